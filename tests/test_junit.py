"""--junit FILE and report.md: the outputs a CI server and a reviewer read.

The JUnit XML is parsed back and held to the structure CI servers accept (common practice,
from memory: the JUnit report of Apache Ant's junit task, as read by Jenkins, GitLab and
GitHub test-report actions): a ``testsuite`` with integer ``tests``, ``failures``,
``errors``, ``skipped`` and a decimal ``time``; ``testcase`` elements with ``name``,
``classname`` and ``time``; inside a case at most one of ``failure`` (with ``message``),
``error`` or ``skipped``, and optionally ``system-out``.
"""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from factory import PROFILE_TOML, sun_like, write_catalogue
from test_baseline import no_html_report, run_cli  # noqa: F401 - a fixture and a helper

import catcheck
from catcheck.flags import FLAG_SCHEMA

SUITE_ATTRIBUTES = ("name", "tests", "failures", "errors", "skipped", "time")
CASE_ATTRIBUTES = ("name", "classname", "time")
OUTCOMES = ("failure", "error", "skipped")
DECIMAL = re.compile(r"^\d+(\.\d+)?$")


@pytest.fixture
def release(tmp_path) -> dict:
    """20 stars: S000000 fails stefan-boltzmann (error), S000001 age-range (a warning
    through soft.toml); surface-gravity cannot run (no mass or log g in the profile)."""
    frame = sun_like(20)
    frame.loc[0, "logL"] += 1.0
    frame.loc[1, "Age"] = 40.0
    catalogue = write_catalogue(tmp_path, frame)
    soft = tmp_path / "soft.toml"
    soft.write_text('[[rule]]\nid = "age-range"\nseverity = "warning"\n')
    return {"catalogue": catalogue, "profile": tmp_path / "profile.toml", "frame": frame,
            "packs": ["core", soft]}


def check_cli(capsys, release: dict, *args: object) -> int:
    packs = [x for p in release["packs"] for x in ("--rules", p)]
    return run_cli(capsys, "check", release["catalogue"], "--profile", release["profile"],
                   *packs, *args)[0]


def assert_ci_structure(path: Path) -> ET.Element:
    """Parse the file and check the structure CI servers accept; returns the testsuite."""
    root = ET.parse(path).getroot()
    assert root.tag == "testsuites"
    suites = root.findall("testsuite")
    assert len(suites) == 1
    suite = suites[0]
    for element in (root, suite):
        for name in SUITE_ATTRIBUTES:
            assert name in element.attrib, name
        for name in ("tests", "failures", "errors", "skipped"):
            assert element.get(name).isdigit(), name
        assert DECIMAL.match(element.get("time"))
    cases = suite.findall("testcase")
    assert {child.tag for child in suite} <= {"properties", "testcase"}
    for case in cases:
        for name in CASE_ATTRIBUTES:
            assert case.get(name), name
        assert DECIMAL.match(case.get("time"))
        outcomes = [child for child in case if child.tag in OUTCOMES]
        assert len(outcomes) <= 1
        assert {child.tag for child in case} <= {*OUTCOMES, "system-out"}
        for failure in case.findall("failure"):
            assert failure.get("message")
    assert int(suite.get("tests")) == len(cases)
    assert int(suite.get("failures")) == sum(c.find("failure") is not None for c in cases)
    assert int(suite.get("skipped")) == sum(c.find("skipped") is not None for c in cases)
    assert int(suite.get("errors")) == sum(c.find("error") is not None for c in cases)
    assert suite.get("name") == "catcheck"
    return suite


def cases_by_name(suite: ET.Element) -> dict[str, ET.Element]:
    return {case.get("name"): case for case in suite.findall("testcase")}


def test_one_case_per_rule_with_failures_skips_and_warnings(release, tmp_path,
                                                             capsys) -> None:
    junit = tmp_path / "ci" / "junit.xml"  # the directory is created
    assert check_cli(capsys, release, "--out", tmp_path / "qc", "--junit", junit) == 1
    suite = assert_ci_structure(junit)
    summary = catcheck.check(release["catalogue"], release["profile"], release["packs"]).summary
    cases = cases_by_name(suite)
    assert list(cases) == [r["id"] for r in summary["rules"]] + ["verdict"]
    assert all(cases[r["id"]].get("classname") == r["pack"] for r in summary["rules"])

    failure = cases["stefan-boltzmann"].find("failure")
    assert failure.get("message").startswith("1 error flag fails the gate (--fail-on error)")
    assert "row 0, id S000000, error: log L =" in failure.text
    warning = cases["age-range"]
    assert warning.find("failure") is None
    out = warning.find("system-out").text
    assert out.startswith("1 flag (1 warning), none failing the gate (--fail-on error)")
    assert "row 1, id S000001, warning:" in out
    skipped = cases["surface-gravity"].find("skipped")
    assert skipped.get("message").startswith("not-run: missing ")
    assert list(cases["teff-range"]) == []  # passed
    assert cases["verdict"].get("classname") == "catcheck.gate"
    assert "1 error flag in stefan-boltzmann" in cases["verdict"].find("failure").get("message")
    properties = {p.get("name"): p.get("value") for p in suite.find("properties")}
    assert properties["rows"] == "20" and properties["verdict"] == "failed"


def test_fail_on_warning_turns_the_warning_into_a_failure(release, tmp_path, capsys) -> None:
    junit = tmp_path / "junit.xml"
    assert check_cli(capsys, release, "--out", tmp_path / "qc", "--junit", junit,
                     "--fail-on", "warning") == 1
    cases = cases_by_name(assert_ci_structure(junit))
    assert cases["age-range"].find("failure").get("message").startswith(
        "1 error or warning flag fails the gate (--fail-on warning)")


def test_a_passing_run_and_the_fraction_gate(release, tmp_path, capsys) -> None:
    junit = tmp_path / "junit.xml"
    assert check_cli(capsys, release, "--out", tmp_path / "a", "--junit", junit,
                     "--fail-on", "none") == 0
    suite = assert_ci_structure(junit)
    assert suite.get("failures") == "0"
    assert cases_by_name(suite)["verdict"].find("system-out").text.startswith("no flag fails")
    assert check_cli(capsys, release, "--out", tmp_path / "b", "--junit", junit,
                     "--fail-on", "none", "--max-flagged-fraction", "0.05") == 1
    suite = assert_ci_structure(junit)
    assert suite.get("failures") == "1"  # no rule fails; the verdict does
    assert "above --max-flagged-fraction 0.05" in cases_by_name(suite)["verdict"].find(
        "failure").get("message")


def test_under_a_baseline_only_new_flags_fail(release, tmp_path, capsys) -> None:
    known = pa.Table.from_pylist([{"row": 5, "id": "S000000", "rule": "stefan-boltzmann",
                                   "severity": "error", "message": "old", "observed": 0.0,
                                   "expected": 0.0, "deviation": 0.0}], schema=FLAG_SCHEMA)
    pq.write_table(known, tmp_path / "old.parquet")
    frame = release["frame"].copy()
    frame.loc[7, "logL"] -= 1.0  # a new error
    catalogue = write_catalogue(tmp_path, frame, name="two.parquet")
    junit = tmp_path / "junit.xml"
    code, _, _ = run_cli(capsys, "check", catalogue, "--profile", release["profile"],
                         "--rules", "core", "--out", tmp_path / "qc", "--junit", junit,
                         "--baseline", tmp_path / "old.parquet")
    assert code == 1
    cases = cases_by_name(assert_ci_structure(junit))
    failure = cases["stefan-boltzmann"].find("failure")
    assert failure.get("message") == (
        "1 new error flag fails the gate (--fail-on error); 2 flags (2 error) in all; against "
        "the baseline 1 new, 0 resolved, 1 persisting")
    assert "first new flags:\n  row 7, id S000007, error:" in failure.text
    assert "S000000" not in failure.text
    assert run_cli(capsys, "check", catalogue, "--profile", release["profile"], "--rules",
                   "core", "--out", tmp_path / "qc2", "--junit", junit, "--baseline",
                   tmp_path / "qc" / "flags.parquet")[0] == 0
    cases = cases_by_name(assert_ci_structure(junit))
    persisting = cases["stefan-boltzmann"]
    assert persisting.find("failure") is None
    assert "against the baseline 0 new, 0 resolved, 2 persisting" in persisting.find(
        "system-out").text


def test_text_xml_forbids_is_escaped_or_replaced(tmp_path) -> None:
    frame = sun_like(3)
    frame["name"] = ['a<b&"c">', "tab\there", "bell\x07"]
    frame.loc[:, "logL"] += 1.0
    junit = tmp_path / "junit.xml"
    catcheck.check_frame(frame, profile_file(tmp_path), ["core"], junit=junit)
    failure = cases_by_name(assert_ci_structure(junit))["stefan-boltzmann"].find("failure")
    assert 'id a<b&"c">, error' in failure.text
    assert "id tab\there" in failure.text
    assert "id bell\ufffd" in failure.text


def profile_file(tmp_path: Path) -> Path:
    path = tmp_path / "profile.toml"
    path.write_text(PROFILE_TOML)
    return path


def test_written_only_when_the_run_completes(release, tmp_path, capsys) -> None:
    junit = tmp_path / "junit.xml"
    junit.write_text("previous run")
    bad = tmp_path / "bad.toml"
    bad.write_text(PROFILE_TOML.replace('column = "Rad"', 'column = "Radius"'))
    code, _, stderr = run_cli(capsys, "check", release["catalogue"], "--profile", bad,
                              "--out", tmp_path / "qc", "--junit", junit)
    assert code == 2 and "Radius" in stderr
    assert junit.read_text() == "previous run"
    assert check_cli(capsys, release, "--out", tmp_path / "qc", "--junit", junit) == 1
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []
    (tmp_path / "taken").mkdir()
    code, _, stderr = run_cli(capsys, "check", release["catalogue"], "--profile",
                              release["profile"], "--out", tmp_path / "qc", "--junit",
                              tmp_path / "taken")
    assert code == 2
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("catcheck: error:")
    assert "cannot write the JUnit report" in lines[0]


def test_junit_and_report_are_deterministic_apart_from_timing(release, tmp_path,
                                                              capsys) -> None:
    texts = []
    for name in ("a", "b"):
        check_cli(capsys, release, "--out", tmp_path / name, "--junit",
                  tmp_path / f"{name}.xml")
        texts.append(re.sub(r'time="[0-9.]+"', 'time=""', (tmp_path / f"{name}.xml").read_text()))
    assert texts[0] == texts[1]
    assert (tmp_path / "a" / "report.md").read_bytes() == (tmp_path / "b" / "report.md"
                                                            ).read_bytes()


def test_report_md_is_fit_for_a_review_comment(release, tmp_path, capsys) -> None:
    check_cli(capsys, release, "--out", tmp_path / "qc")
    report = (tmp_path / "qc" / "report.md").read_text()
    lines = report.splitlines()
    assert lines[0] == "## catcheck: FAILED"
    assert lines[2] == "**1 error flag in stefan-boltzmann (--fail-on error)**"
    # flags (one per row and rule) and flagged rows (each once) are told apart
    assert lines[4:7] == [
        "- rows checked: 20",
        "- flags (one per row and rule that failed): 2 (1 error, 1 warning)",
        "- flagged rows (each counted once, by its worst flag): 2 (1 error, 1 warning)"]
    # the rules that did not run, counted, with the quantity most of them lack first
    rules = json.loads((tmp_path / "qc" / "summary.json").read_text())["rules"]
    idle = [r for r in rules if r["status"] != "ran"]
    assert lines[7].startswith(f"- {len(idle)} of {len(rules)} rules not run: missing mass (")
    assert lines[7].endswith(". Rules that do not run cannot fail the gate.")
    assert ("| rule | pack | severity | checked | skipped: missing value "
            "| skipped: not applicable | flagged | gate |") in report
    assert "| `stefan-boltzmann` | core | error | 20 | 0 | 0 | 1 | **fails** (1) |" in report
    assert "| `age-range` | core | warning | 20 | 0 | 0 | 1 | passes |" in report
    assert any(line.startswith("| `surface-gravity` | core | error |  |  |  |  | not-run: ")
               for line in lines)
    assert report.count("<details>") == report.count("</details>") == 3  # 2 rules + run
    assert "<details><summary><code>age-range</code>: 1 warning (first 1)</summary>" in report
    assert "| 1 | S000001 | warning | " in report
    assert "new | resolved" not in report  # no baseline, no history columns
    assert "Took" not in report and "seconds" not in report
