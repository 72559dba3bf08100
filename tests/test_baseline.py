"""Release against release: --baseline, the ratchet gate, `catcheck compare`, report.md.

Flags are matched by (id, rule), never by row position; the demo's second release
(`write_next_release`) fixes some planted faults, plants new ones, removes, adds and
reorders rows, and the comparison must count exactly what it planted.
"""

from __future__ import annotations

import json
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from factory import sun_like, write_catalogue
from hypothesis import given, settings
from hypothesis import strategies as st

import catcheck
from catcheck.baseline import CHANGES, compare_flags, read_flags_file
from catcheck.cli import main
from catcheck.demo import NEXT_RELEASE_FAULTS, write_demo, write_next_release
from catcheck.errors import UsageError
from catcheck.flags import FLAG_SCHEMA

CORE = ["--rules", "core"]


@pytest.fixture(scope="module", autouse=True)
def no_html_report():
    """These tests are about flags, verdicts, report.md and JUnit files: skip drawing
    report.html (matplotlib).  Imported by the other gating test modules."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr("catcheck.html_report.plotting_available", lambda: False, raising=False)
        yield


def run_cli(capsys: pytest.CaptureFixture[str], *args: object) -> tuple[int, str, str]:
    """Run the command line in this process: (exit code, stdout, stderr).

    ``main`` exits through SystemExit, or returns (exit code 0) for commands that do not
    gate.
    """
    try:
        main([str(a) for a in args])
        code = 0
    except SystemExit as done:
        code = done.code
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def flags_table(pairs: list[tuple[str | None, str]]) -> pa.Table:
    """Flags in row order with the given (id, rule) pairs."""
    return pa.Table.from_pylist(
        [{"row": i, "id": id_, "rule": rule, "severity": "error", "message": f"flag {i}",
          "observed": 0.0, "expected": 0.0, "deviation": 0.0}
         for i, (id_, rule) in enumerate(pairs)], schema=FLAG_SCHEMA)


# --- matching ------------------------------------------------------------------------------

def multiset_reference(old: list[tuple], new: list[tuple]) -> dict[str, dict[str, int]]:
    """new/resolved/persisting per rule by counting (id, rule) pairs with Counter."""
    a, b = Counter(old), Counter(new)
    out: dict[str, dict[str, int]] = {}
    for rule in sorted({r for _, r in old + new}):
        mine = {k for k in a | b if k[1] == rule}
        out[rule] = {"new": sum(max(b[k] - a[k], 0) for k in mine),
                     "resolved": sum(max(a[k] - b[k], 0) for k in mine),
                     "persisting": sum(min(a[k], b[k]) for k in mine)}
    return out


PAIRS = st.lists(st.tuples(st.sampled_from(["a", "b", "c", None]), st.sampled_from(["x", "y"])),
                 max_size=14)


@settings(max_examples=40, deadline=None)
@given(old=PAIRS, new=PAIRS, seed=st.integers(0, 2**16))
def test_comparison_counts_like_a_multiset_whatever_the_order(old, new, seed) -> None:
    comparison = compare_flags(flags_table(old), flags_table(new))
    by_rule = {rule: change.as_dict() for rule, change in comparison.by_rule.items()}
    assert by_rule == multiset_reference(old, new)
    shuffled = list(np.random.default_rng(seed).permutation(len(new))) if new else []
    again = compare_flags(flags_table(old[::-1]), flags_table([new[i] for i in shuffled]))
    assert again.as_dict() == comparison.as_dict()
    for rule, change in comparison.by_rule.items():
        assert len(comparison.new_examples.get(rule, [])) == min(change.new, 5)
        assert sum(comparison.new_by_severity.get(rule, {}).values()) == change.new


def test_duplicate_ids_persist_first_in_row_order() -> None:
    old = flags_table([("d", "x"), ("d", "x")])
    new = flags_table([("d", "x"), ("e", "x"), ("d", "x"), ("d", "x")])
    comparison = compare_flags(old, new)
    assert comparison.as_dict() == {"new": 2, "resolved": 0, "persisting": 2,
                                    "by_rule": {"x": {"new": 2, "resolved": 0,
                                                      "persisting": 2}}}
    assert [e["row"] for e in comparison.new_examples["x"]] == [1, 3]


def test_rows_without_an_id_share_one_key_never_an_empty_id() -> None:
    comparison = compare_flags(flags_table([(None, "x"), ("", "x")]),
                               flags_table([(None, "x"), (None, "x")]))
    assert comparison.by_rule["x"].as_dict() == {"new": 1, "resolved": 1, "persisting": 1}


def test_old_flags_of_rules_not_run_are_not_called_resolved() -> None:
    comparison = compare_flags(flags_table([("a", "x"), ("a", "gone")]), flags_table([]),
                               rules_run=["x", "quiet"])
    assert comparison.not_rechecked == {"gone": 1}
    assert {r: c.as_dict() for r, c in comparison.by_rule.items()} == {
        "quiet": {"new": 0, "resolved": 0, "persisting": 0},
        "x": {"new": 0, "resolved": 1, "persisting": 0}}


# --- a small release, reordered, with rows added and removed ------------------------------

def release_pair(tmp_path: Path) -> tuple[Path, Path]:
    """Two releases of 40 stars, by hand.

    Release 1: S3, S7 and S20 fail stefan-boltzmann, S12 and S20 age-range.
    Release 2: S7 and S30 removed, S3 fixed, S25 given an age beyond the Universe, three
    new stars added (X1 failing stefan-boltzmann), and every row shuffled.
    """
    first = sun_like(40)
    first.loc[[3, 7, 20], "logL"] += 1.0
    first.loc[[12, 20], "Age"] = 40.0
    second = first.copy()
    second.loc[3, "logL"] -= 1.0
    second.loc[25, "Age"] = 50.0
    second = second.drop(index=[7, 30])
    added = sun_like(3, seed=9).assign(name=["X0", "X1", "X2"])
    added.loc[1, "logL"] += 1.0
    second = pd.concat([second, added]).sample(frac=1.0, random_state=4)
    (tmp_path / "one").mkdir()
    (tmp_path / "two").mkdir()
    return (write_catalogue(tmp_path / "one", first), write_catalogue(tmp_path / "two", second))


def test_baseline_matches_by_id_when_rows_move_arrive_and_leave(tmp_path) -> None:
    one, two = release_pair(tmp_path)
    profile = one.parent / "profile.toml"
    old = catcheck.check(one, profile, ["core"], out=tmp_path / "qc1")
    new = catcheck.check(two, profile, ["core"], out=tmp_path / "qc2",
                         baseline=tmp_path / "qc1" / "flags.parquet")
    entry = new.summary["baseline"]
    assert entry["file"] == str(tmp_path / "qc1" / "flags.parquet")
    assert entry["by_rule"]["stefan-boltzmann"] == {"new": 1, "resolved": 2, "persisting": 1}
    assert entry["by_rule"]["age-range"] == {"new": 1, "resolved": 0, "persisting": 2}
    assert entry["by_rule"]["teff-range"] == {"new": 0, "resolved": 0, "persisting": 0}
    assert (entry["new"], entry["resolved"], entry["persisting"]) == (2, 2, 3)
    # the persisting flags sit at other rows now: matching by row would have failed
    moved = old.flags.merge(new.flags, on=["id", "rule"], suffixes=("_old", "_new"))
    assert len(moved) == 3 and (moved["row_old"] != moved["row_new"]).all()
    assert new.summary["gate"]["failing_rules"] == {"stefan-boltzmann": 1, "age-range": 1}
    assert new.summary["gate"]["counts"] == "new flags"
    assert not new.passed


def test_baseline_in_memory_and_in_every_flags_format_agree(tmp_path) -> None:
    one, two = release_pair(tmp_path)
    profile = one.parent / "profile.toml"
    comparisons = []
    for fmt in ("parquet", "csv", "jsonl"):
        catcheck.check(one, profile, ["core"], out=tmp_path / fmt, flags_format=fmt)
        result = catcheck.check(two, profile, ["core"],
                                baseline=tmp_path / fmt / f"flags.{fmt}")
        entry = result.summary["baseline"]
        comparisons.append({k: entry[k] for k in ("new", "resolved", "persisting", "by_rule")})
    assert comparisons[0] == comparisons[1] == comparisons[2]
    frame = pd.read_parquet(two)
    in_memory = catcheck.check_frame(frame, profile, ["core"],
                                     baseline=tmp_path / "parquet" / "flags.parquet")
    assert in_memory.summary["baseline"]["by_rule"] == comparisons[0]["by_rule"]


def test_baseline_may_be_the_flags_file_the_run_replaces(tmp_path, capsys) -> None:
    one, two = release_pair(tmp_path)
    profile = one.parent / "profile.toml"
    out = tmp_path / "qc"
    assert run_cli(capsys, "check", one, "--profile", profile, "--out", out, *CORE)[0] == 1
    code, stdout, _ = run_cli(capsys, "check", two, "--profile", profile, "--out", out,
                              "--baseline", out / "flags.parquet", *CORE)
    assert code == 1
    assert f"against {out / 'flags.parquet'}: 2 new, 2 resolved, 3 persisting" in stdout
    assert stdout.splitlines()[-2].strip().startswith(
        "verdict: FAILED: 2 new error flags in stefan-boltzmann, age-range")
    assert json.loads((out / "summary.json").read_text())["baseline"]["new"] == 2


def test_report_lists_new_and_resolved_per_rule(tmp_path) -> None:
    one, two = release_pair(tmp_path)
    profile = one.parent / "profile.toml"
    catcheck.check(one, profile, ["core"], out=tmp_path / "qc1")
    for name in ("a", "b"):
        catcheck.check(two, profile, ["core"], out=tmp_path / name,
                       baseline=tmp_path / "qc1" / "flags.parquet")
    report = (tmp_path / "a" / "report.md").read_text()
    assert report == (tmp_path / "b" / "report.md").read_text()  # deterministic
    lines = report.splitlines()
    assert lines[0] == "## catcheck: FAILED"
    assert lines[2].startswith("**2 new error flags in stefan-boltzmann, age-range")
    assert "| new | resolved | persisting | gate |" in report
    assert any(line.startswith("| `stefan-boltzmann` | core | error |")
               and line.endswith("| 1 | 2 | 1 | **fails** (1) |") for line in lines)
    new_block = report.split("### New flags against the baseline")[1].split("###")[0]
    assert "<details><summary><code>stefan-boltzmann</code>: 1 new (first 1)</summary>" \
        in new_block
    assert "| X1 |" in new_block and "| S000020 |" not in new_block


# --- a bad baseline --------------------------------------------------------------------------

def bad_baselines(tmp_path: Path) -> dict[str, Path]:
    files = {"missing": tmp_path / "absent.parquet", "unknown suffix": tmp_path / "flags.txt",
             "not parquet": tmp_path / "garbage.parquet",
             "wrong columns": tmp_path / "other.parquet", "csv header": tmp_path / "bad.csv",
             "jsonl without rule": tmp_path / "bad.jsonl", "integer ids": tmp_path / "int.parquet",
             "a directory": tmp_path / "dir.parquet"}
    files["unknown suffix"].write_text("row,id,rule\n")
    files["not parquet"].write_bytes(b"PAR1 this is not a parquet file")
    pq.write_table(pa.table({"source": ["a"], "check": ["x"]}), files["wrong columns"])
    files["csv header"].write_text("row,name,rule\n0,a,x\n")
    files["jsonl without rule"].write_text('{"row": 0, "id": "a", "severity": "error"}\n')
    pq.write_table(pa.table({"row": [0], "id": [17], "rule": ["x"], "severity": ["error"]}),
                   files["integer ids"])
    files["a directory"].mkdir()
    return files


def test_a_bad_baseline_is_one_error_and_exit_2_before_anything_is_written(tmp_path,
                                                                           capsys) -> None:
    catalogue = write_catalogue(tmp_path, sun_like(10))
    for kind, path in bad_baselines(tmp_path).items():
        out = tmp_path / f"qc-{kind.replace(' ', '-')}"
        code, stdout, stderr = run_cli(capsys, "check", catalogue, "--profile",
                                       tmp_path / "profile.toml", "--out", out,
                                       "--baseline", path, *CORE)
        assert code == 2, kind
        lines = stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("catcheck: error: "), (kind, stderr)
        assert str(path) in lines[0] and "baseline flags file" in lines[0], kind
        assert not out.exists(), kind
        assert stdout == ""
        code, _, stderr = run_cli(capsys, "compare", path, path)
        assert code == 2 and str(path) in stderr, kind


def test_read_flags_file_raises_usage_error() -> None:
    with pytest.raises(UsageError, match="does not exist"):
        read_flags_file("no/such/flags.parquet")


# --- compare ---------------------------------------------------------------------------------

def test_compare_prints_text_and_exact_json(tmp_path, capsys) -> None:
    one, two = release_pair(tmp_path)
    profile = one.parent / "profile.toml"
    catcheck.check(one, profile, ["core"], out=tmp_path / "qc1")
    catcheck.check(two, profile, ["core"], out=tmp_path / "qc2", flags_format="csv")
    old, new = tmp_path / "qc1" / "flags.parquet", tmp_path / "qc2" / "flags.csv"
    code, stdout, _ = run_cli(capsys, "compare", old, new, "--json")
    assert code == 0
    assert json.loads(stdout) == {
        "new": 2, "resolved": 2, "persisting": 3,
        "by_rule": {"age-range": {"new": 1, "resolved": 0, "persisting": 2},
                    "stefan-boltzmann": {"new": 1, "resolved": 2, "persisting": 1}}}
    code, stdout, _ = run_cli(capsys, "compare", old, new)
    assert code == 0
    lines = stdout.splitlines()
    assert lines[0] == f"catcheck compare: {old} -> {new}"
    assert lines[1] == "2 new, 2 resolved, 3 persisting"
    assert lines[2].split() == ["rule", *CHANGES]
    assert lines[3].split() == ["age-range", "1", "0", "2"]
    assert lines[4].split() == ["stefan-boltzmann", "1", "2", "1"]
    code, stdout, _ = run_cli(capsys, "compare", new, new, "--json")
    assert code == 0 and json.loads(stdout)["new"] == 0  # compare never gates


# --- two demo releases: the acceptance test of the ratchet ----------------------------------

@pytest.fixture(scope="module")
def releases(tmp_path_factory) -> dict:
    base = tmp_path_factory.mktemp("releases")
    first = write_demo(base / "r1", rows=4000, seed=5)
    second = write_next_release(base / "r1", base / "r2", seed=6)
    catcheck.check(first.catalogue, first.profile, out=base / "qc1")
    return {"base": base, "second": second, "old_flags": base / "qc1" / "flags.parquet"}


def expected_comparison(old: pd.DataFrame, changes: pd.DataFrame) -> dict:
    """What the planted changes must give, from the first release's own flags.

    Every old flag of a removed or fixed row is resolved (a fixed row is its unfaulted,
    unflagged self; a removed one is gone); each planted fault adds one flag of its rule
    unless the first release already flagged that (id, rule); added rows are clean.
    """
    gone = changes.loc[changes["change"].isin(["removed", "fixed"]), "id"]
    resolved = old[old["id"].isin(gone)].groupby("rule").size()
    planted = changes[changes["change"] == "planted"]
    known = pd.MultiIndex.from_frame(old[["id", "rule"]])
    is_new = ~pd.MultiIndex.from_frame(planted[["id", "rule"]]).isin(known)
    new = planted[is_new].groupby("rule").size()
    old_count = old.groupby("rule").size()
    by_rule = {}
    for rule in sorted(set(old_count.index) | set(new.index)):
        n_resolved = int(resolved.get(rule, 0))
        by_rule[rule] = {"new": int(new.get(rule, 0)), "resolved": n_resolved,
                         "persisting": int(old_count.get(rule, 0)) - n_resolved
                         + int(((planted["rule"] == rule) & ~is_new).sum())}
    return {"new": sum(c["new"] for c in by_rule.values()),
            "resolved": sum(c["resolved"] for c in by_rule.values()),
            "persisting": sum(c["persisting"] for c in by_rule.values()),
            "by_rule": by_rule}


def test_next_release_changes_what_it_says(releases) -> None:
    second, base = releases["second"], releases["base"]
    changes = second.changes
    first = pq.read_table(base / "r1" / "catalogue.parquet").to_pandas()
    now = pq.read_table(second.files.catalogue).to_pandas()
    counts = changes["change"].value_counts()
    assert {"removed", "fixed", "planted", "added"} <= set(counts.index)
    assert set(changes.loc[changes["change"] == "planted", "fault"]) == set(NEXT_RELEASE_FAULTS)
    assert len(now) == len(first) - counts["removed"] + counts["added"]
    assert set(now["locs_id"]) == (set(first["locs_id"])
                                   - set(changes.loc[changes["change"] == "removed", "id"])
                                   | set(changes.loc[changes["change"] == "added", "id"]))
    kept = now[now["locs_id"].isin(first["locs_id"])]
    position_in_first = first.reset_index().set_index("locs_id").loc[kept["locs_id"], "index"]
    assert not np.all(np.diff(position_in_first.to_numpy()) > 0)  # reordered
    truth = pq.read_table(second.files.truth).to_pandas()
    assert (now["locs_id"].to_numpy()[truth["row"]] == truth["id"].to_numpy()).all()


def test_ratchet_fails_only_for_the_new_faults(releases, capsys) -> None:
    second, base, old_flags = releases["second"], releases["base"], releases["old_flags"]
    catalogue, profile = second.files.catalogue, second.files.profile
    code, _, _ = run_cli(capsys, "check", catalogue, "--profile", profile, "--out",
                         base / "qc2", "--baseline", old_flags, "--junit", base / "junit.xml")
    assert code == 1
    summary = json.loads((base / "qc2" / "summary.json").read_text())
    planted = second.changes[second.changes["change"] == "planted"]
    per_rule = planted.groupby("rule").size().to_dict()
    assert summary["gate"]["failing_rules"] == {"spectral-type-teff":
                                                per_rule["spectral-type-teff"]}
    assert "new error flags in spectral-type-teff" in summary["gate"]["reason"]

    old = pd.read_parquet(old_flags)
    new = pd.read_parquet(base / "qc2" / "flags.parquet")
    appeared = set(zip(new["id"], new["rule"], strict=True)) - set(
        zip(old["id"], old["rule"], strict=True))
    assert appeared == set(zip(planted["id"], planted["rule"], strict=True))

    code, stdout, _ = run_cli(capsys, "compare", old_flags, base / "qc2" / "flags.parquet",
                              "--json")
    assert code == 0
    assert json.loads(stdout) == expected_comparison(old, second.changes)

    code, _, _ = run_cli(capsys, "check", catalogue, "--profile", profile, "--out",
                         base / "qc3", "--baseline", old_flags, "--fail-on", "warning")
    assert code == 1
    failing = json.loads((base / "qc3" / "summary.json").read_text())["gate"]["failing_rules"]
    assert failing == per_rule

    code, _, _ = run_cli(capsys, "check", catalogue, "--profile", profile, "--out",
                         base / "qc4")
    without = json.loads((base / "qc4" / "summary.json").read_text())["gate"]["failing_rules"]
    assert code == 1 and set(without) > {"spectral-type-teff"}  # known faults fail it too

    code, _, _ = run_cli(capsys, "check", catalogue, "--profile", profile, "--out",
                         base / "qc5", "--baseline", base / "qc2" / "flags.parquet",
                         "--fail-on", "warning")
    assert code == 0  # nothing new against itself
