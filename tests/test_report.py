"""The run for people: the console summary and report.md as a newcomer reads them.

Flags (one per row and rule) are told apart from flagged rows; skipped rows are split into
missing values and rows a rule is not about; rules that did not run are counted next to
the verdict without changing it; assumed errors show the value used; report.md escapes only
what Markdown would misread.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from factory import PROFILE_TOML, sun_like, write_catalogue

import catcheck
from catcheck import markdown as md
from catcheck.packs import DEFAULT_PACKS, load_rules
from catcheck.quantities import QUANTITIES
from catcheck.report import (
    assumed_error_text,
    console_summary,
    markdown_report,
    not_run_line,
    skipped_counts,
)


@pytest.fixture(scope="module")
def passing(tmp_path_factory) -> tuple[catcheck.api.CheckResult, Path]:
    """40 stars that obey Stefan-Boltzmann (14 giants, 26 dwarfs), 3 without Teff, masses
    for the giants only, checked by core and units: the gate passes while the rules needing
    log g, [Fe/H], ... cannot run."""
    root = tmp_path_factory.mktemp("passing")
    frame = sun_like(40)
    frame.loc[:2, "Teff"] = np.nan
    frame["Mass"] = np.where(frame["state"] == "giant", 1.5, np.nan)
    path = write_catalogue(root, frame)
    (root / "profile.toml").write_text(
        PROFILE_TOML + '\n[quantities.mass]\ncolumn = "Mass"\nunit = "Msun"\n')
    result = catcheck.check(path, root / "profile.toml", rules=["core", "units"],
                            out=root / "qc")
    return result, root / "qc"


def test_a_pass_with_rules_not_run_says_so_on_the_verdict_line(passing) -> None:
    result, _ = passing
    rules = result.summary["rules"]
    idle = [r for r in rules if r["status"] != "ran"]
    assert result.passed and idle  # not running never fails the gate (DESIGN.md)
    verdict = console_summary(result.summary).splitlines()[-1]  # what --quiet prints
    assert verdict.startswith("  verdict: PASSED: no flag fails the gate (--fail-on error); "
                              f"{len(idle)} of {len(rules)} rules not run: missing ")
    assert result.summary["gate"]["reason"] == "no flag fails the gate (--fail-on error)"


def test_console_tells_flags_from_rows_and_missing_from_not_applicable(passing) -> None:
    result, _ = passing
    lines = console_summary(result.summary).splitlines()
    assert lines[1].split() == ["rule", "severity", "checked", "missing", "value", "not",
                                "applicable", "flagged"]
    teff_range = next(line for line in lines if line.split()[0] == "teff-range")
    assert teff_range.split()[2:] == ["37", "3", "0", "0"]  # 3 rows without Teff
    # a main-sequence rule: the dwarfs lack a mass, the giants are not what it is about
    limit = next(line for line in lines if line.split()[0] == "hydrogen-burning-limit")
    assert limit.split()[2:] == ["0", "26", "14", "0"]
    assert "  flags (one per row and rule that failed): 0" in lines
    assert "  flagged rows (each counted once, by its worst flag): 0" in lines


def test_skipped_counts_split_summary_skipped() -> None:
    assert skipped_counts({"skipped": 10, "not_applicable": 4}) == (6, 4)
    assert skipped_counts({"skipped": 10}) == (10, 0)  # an older summary.json


def test_not_run_line_counts_rules_per_missing_quantity() -> None:
    statuses = ["ran", "not-run: missing teff", "not-run: missing teff, group",
                "not-run: missing group", "not-run: age declared in Myr", "ran"]
    summary = {"rules": [{"id": f"r{i}", "status": s} for i, s in enumerate(statuses)]}
    assert not_run_line(summary) == (
        "4 of 6 rules not run: missing group (2), teff (2); r4: age declared in Myr")
    assert not_run_line({"rules": [{"id": "r", "status": "ran"}]}) == ""


def test_report_md_heading_counts_and_skipped_columns(passing) -> None:
    _, out = passing
    report = (out / "report.md").read_text(encoding="utf-8")
    lines = report.splitlines()
    assert lines[0] == "## catcheck: PASSED"
    assert lines[4:7] == ["- rows checked: 40",
                          "- flags (one per row and rule that failed): 0",
                          "- flagged rows (each counted once, by its worst flag): 0"]
    assert lines[7].endswith(". Rules that do not run cannot fail the gate.")
    assert " rules not run: missing " in lines[7]
    assert "| `teff-range` | core | error | 37 | 3 | 0 | 0 | passes |" in report
    assert "| `hydrogen-burning-limit` | core | error | 0 | 26 | 14 | 0 | passes |" in report


def test_report_md_gives_the_assumed_errors_values(tmp_path) -> None:
    path = write_catalogue(tmp_path, sun_like(30))
    (tmp_path / "profile.toml").write_text(PROFILE_TOML.replace('error = "e_logL"\n', ""))
    result = catcheck.check(path, tmp_path / "profile.toml", rules=["core"])
    assumed = {r.id: r.params for r in load_rules(["core"])}["stefan-boltzmann"][
        "assumed_luminosity_dex"]
    report = markdown_report(result.summary, {})
    assert (f"- `stefan-boltzmann`: luminosity {assumed:g} dex (`assumed_luminosity_dex`)"
            in report.splitlines())


def test_every_shipped_assumed_error_is_named_by_a_param() -> None:
    """Each quantity whose error a shipped rule may assume has a param report.md can show
    (the check's naming convention); the one exception is listed, with the reason."""
    unnamed = set()
    for rule in load_rules(list(DEFAULT_PACKS)):
        if rule.check.uses_errors:
            for quantity in rule.needs:
                text = assumed_error_text(quantity, rule.params)
                if QUANTITIES[quantity].numeric and "`assumed_" not in text:
                    unnamed.add((rule.id, quantity))
    # the turn-off rule reads members' masses for a cluster statistic, not with an error
    assert unnamed <= {("cluster-turnoff-age", "mass")}


def test_assumed_error_text_reads_the_units_from_the_param_names() -> None:
    assert assumed_error_text("age", {"assumed_age_dex": 0.1, "threshold": 5}) == (
        "age 0.1 dex (`assumed_age_dex`)")
    assert assumed_error_text("mass", {"assumed_mass_fraction": 0.1}) == (
        "mass 10% of the value (`assumed_mass_fraction`)")
    assert assumed_error_text("parallax", {"assumed_parallax_error_mas": 0.2}) == (
        "parallax 0.2 mas (`assumed_parallax_error_mas`)")
    assert assumed_error_text("feh", {"assumed_error": 0.1}) == (
        "feh 0.1 in the rule's unit (`assumed_error`)")
    assert assumed_error_text("luminosity", {"assumed_log_dex": 0.05,
                                             "assumed_teff_fraction": 0.02}) == (
        "luminosity 0.05 dex (`assumed_log_dex`)")


def test_report_md_escapes_only_what_markdown_needs(tmp_path) -> None:
    frame = sun_like(20)
    frame.loc[0, "logL"] += 1.0  # fails Stefan-Boltzmann
    frame.loc[0, "name"] = "A&A <b>|`x`"
    path = write_catalogue(tmp_path, frame)
    catcheck.check(path, tmp_path / "profile.toml", rules=["core"], out=tmp_path / "qc")
    report = (tmp_path / "qc" / "report.md").read_text(encoding="utf-8")
    assert report.splitlines()[0] == "## catcheck: FAILED"
    row = next(line for line in report.splitlines() if line.startswith("| 0 | "))
    assert row.startswith("| 0 | A&A \\<b>\\|\\`x\\` | error | log L = ")
    assert "&amp;" not in report and "&lt;" not in report and "&gt;" not in report


def test_markdown_escapes() -> None:
    assert md.text("Pecaut & Mamajek; A&A 641; M <= 1.34 Msun; x < y") == (
        "Pecaut & Mamajek; A&A 641; M <= 1.34 Msun; x < y")  # shown as written
    assert md.text("<script>&amp;</script>") == "\\<script>\\&amp;\\</script>"
    assert md.text("a\\b `c`") == "a\\\\b \\`c\\`"
    assert md.cell("a|b\nc") == "a\\|b c"
    assert md.code("cat.parquet") == "`cat.parquet`"
    assert md.code("odd`name") == "`` odd`name ``"
