"""The engine end to end through the Python API: counts, skips, flags, gate, batching."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from factory import PROFILE_TOML, sun_like, visual_report_files, write_catalogue

import catcheck
from catcheck.profile import profile_from_dict
from catcheck.toml import loads

#: these tests are about the engine, not the physics: the core pack is enough
CORE = ["core"]

PROFILE = profile_from_dict(loads(PROFILE_TOML))


def stats(result: catcheck.CheckResult, rule_id: str) -> dict:
    return next(r for r in result.summary["rules"] if r["id"] == rule_id)


def test_consistent_stars_give_no_flag() -> None:
    result = catcheck.check_frame(sun_like(500), PROFILE, rules=CORE)
    assert result.flags.empty
    assert result.passed
    sb = stats(result, "stefan-boltzmann")
    assert (sb["checked"], sb["skipped"], sb["flagged"]) == (500, 0, 0)


def test_luminosity_offset_is_flagged_with_numbers() -> None:
    frame = sun_like(10)
    frame.loc[3, "logL"] += 0.5
    result = catcheck.check_frame(frame, PROFILE, rules=CORE)
    flags = result.flags
    assert flags["row"].tolist() == [3]
    flag = flags.iloc[0]
    assert flag["rule"] == "stefan-boltzmann" and flag["severity"] == "error"
    assert flag["observed"] - flag["expected"] == pytest.approx(0.5, abs=1e-9)
    assert flag["deviation"] > 5
    assert "+0.50 dex" in flag["message"] and "K" in flag["message"]
    assert flag["id"] == "S000003"
    assert not result.passed


def test_missing_values_are_skipped_never_flagged() -> None:
    frame = sun_like(20)
    frame.loc[[2, 5], "Rad"] = np.nan
    frame.loc[7, "Teff"] = None
    frame.loc[2, "logL"] += 3  # would fail, but radius is missing
    result = catcheck.check_frame(frame, PROFILE, rules=CORE)
    sb = stats(result, "stefan-boltzmann")
    assert (sb["checked"], sb["skipped"], sb["flagged"]) == (17, 3, 0)
    assert stats(result, "teff-range")["skipped"] == 1


def test_rule_without_quantities_is_reported_not_run() -> None:
    result = catcheck.check_frame(sun_like(5), PROFILE, rules=CORE)
    mass = stats(result, "mass-range")
    assert mass["status"] == "not-run: missing mass"
    assert mass["checked"] == mass["flagged"] == 0


def test_hard_limits_use_the_rows_own_error() -> None:
    frame = sun_like(4)
    frame["Age"] = [20.0, 14.0, 13.0, -1.0]  # Gyr; the profile gives no age error
    result = catcheck.check_frame(frame, PROFILE, rules=CORE)
    flagged = result.flags.query("rule == 'age-range'")
    assert flagged["row"].tolist() == [0, 1, 3]
    assert "age of the Universe" in flagged.iloc[0]["message"]


def test_infinite_value_is_flagged_by_its_range_rule() -> None:
    frame = sun_like(3)
    frame.loc[1, "Teff"] = np.inf
    result = catcheck.check_frame(frame, PROFILE, rules=CORE)
    assert set(result.flags.query("rule == 'teff-range'")["row"]) == {1}


def test_results_do_not_depend_on_batch_size() -> None:
    frame = sun_like(3000, seed=3)
    frame.loc[::97, "logL"] -= 0.8
    frame.loc[::131, "Age"] = 30.0
    reference = catcheck.check_frame(frame, PROFILE, batch_rows=100_000, rules=CORE)
    for batch_rows in (1000, 1001, 2999):
        other = catcheck.check_frame(frame, PROFILE, batch_rows=batch_rows, rules=CORE)
        pd.testing.assert_frame_equal(reference.flags, other.flags)
        assert reference.summary["rules"] == other.summary["rules"]
        assert reference.summary["flagged_rows"] == other.summary["flagged_rows"]


@pytest.mark.parametrize("workers", [2, 3])
def test_worker_processes_give_the_same_report(tmp_path, workers: int) -> None:
    """Row groups checked in forked processes: same flags, counts and unmapped labels."""
    frame = sun_like(4000, seed=5)
    frame.loc[::89, "logL"] += 0.7
    frame.loc[::301, "state"] = "weird"
    path = write_catalogue(tmp_path, frame, row_group_size=700)  # 6 pieces
    profile = tmp_path / "profile.toml"
    one = catcheck.check(path, profile, rules=CORE, batch_rows=1000)
    many = catcheck.check(path, profile, rules=CORE, batch_rows=1000, workers=workers)
    assert len(one.flags) > 40
    pd.testing.assert_frame_equal(one.flags, many.flags)
    for key in ("rules", "flagged_rows", "rows_by_severity", "unmapped_phase_labels"):
        assert one.summary[key] == many.summary[key]
    assert one.summary["unmapped_phase_labels"] == {"weird": 14}


def test_flags_sorted_by_row_then_rule_order() -> None:
    frame = sun_like(6)
    frame.loc[4, "logL"] += 1
    frame.loc[4, "Age"] = 40.0
    frame.loc[1, "Age"] = 40.0
    flags = catcheck.check_frame(frame, PROFILE, rules=CORE).flags
    assert list(zip(flags["row"], flags["rule"], strict=True)) == [
        (1, "age-range"), (4, "stefan-boltzmann"), (4, "age-range")]


def test_summary_counts_rows_by_worst_severity(tmp_path) -> None:
    pack = tmp_path / "soft.toml"
    pack.write_text('[[rule]]\nid = "age-range"\nseverity = "warning"\n')
    frame = sun_like(5)
    frame.loc[0, "Age"] = 40.0
    frame.loc[1, "Age"] = 40.0
    frame.loc[1, "logL"] += 2
    result = catcheck.check_frame(frame, PROFILE, rules=["core", pack])
    assert result.summary["rows_by_severity"] == {"info": 0, "warning": 1, "error": 1}
    assert result.summary["flags_by_severity"] == {"info": 0, "warning": 2, "error": 1}
    assert result.summary["flagged_rows"] == 2


@pytest.mark.parametrize(
    ("fail_on", "fraction", "passed"),
    [("error", None, False), ("warning", None, False), ("none", None, True),
     ("none", 0.5, True), ("none", 0.1, False)],
)
def test_gate(fail_on: str, fraction: float | None, passed: bool) -> None:
    frame = sun_like(4)
    frame.loc[0, "logL"] += 1  # one row of four: 25% flagged
    result = catcheck.check_frame(frame, PROFILE, rules=CORE, fail_on=fail_on,
                                  max_flagged_fraction=fraction)
    assert result.passed is passed


def test_warning_gate_counts_warnings(tmp_path) -> None:
    pack = tmp_path / "soft.toml"
    pack.write_text('[[rule]]\nid = "stefan-boltzmann"\nseverity = "warning"\n')
    frame = sun_like(4)
    frame.loc[0, "logL"] += 1
    assert catcheck.check_frame(frame, PROFILE, rules=["core", pack]).passed
    assert not catcheck.check_frame(frame, PROFILE, rules=["core", pack],
                                    fail_on="warning").passed


def test_unmapped_phase_labels_are_counted() -> None:
    frame = sun_like(6)
    frame.loc[[0, 1], "state"] = "weird"
    frame.loc[2, "state"] = "RGB"  # a phase code itself is accepted
    result = catcheck.check_frame(frame, PROFILE, rules=CORE)
    assert result.summary["unmapped_phase_labels"] == {"weird": 2}


def test_report_files_written_atomically(tmp_path) -> None:
    frame = sun_like(50)
    frame.loc[10, "logL"] += 1
    path = write_catalogue(tmp_path, frame)
    out = tmp_path / "report"
    result = catcheck.check(path, tmp_path / "profile.toml", out=out, rules=CORE)
    assert sorted(p.name for p in out.iterdir()) == sorted(
        ["flags.parquet", "report.md", "summary.json", *visual_report_files("hr_diagram.png")])
    summary = json.loads((out / "summary.json").read_text())
    assert summary["rows"] == 50 and summary["flagged_rows"] == 1
    assert result.flags["row"].tolist() == [10]
    assert "stefan-boltzmann" in (out / "report.md").read_text()


@pytest.mark.parametrize("flags_format", ["csv", "jsonl"])
def test_text_flag_formats_round_trip(tmp_path, flags_format: str) -> None:
    frame = sun_like(30)
    frame.loc[[3, 4], "logL"] += 1
    frame.loc[4, "Age"] = 50.0
    path = write_catalogue(tmp_path, frame)
    parquet = catcheck.check(path, tmp_path / "profile.toml", CORE, out=tmp_path / "a").flags
    text = catcheck.check(path, tmp_path / "profile.toml", CORE, out=tmp_path / "b",
                          flags_format=flags_format).flags
    assert (tmp_path / "b" / f"flags.{flags_format}").exists()
    pd.testing.assert_frame_equal(parquet, text, check_exact=False)


def test_output_is_deterministic(tmp_path) -> None:
    frame = sun_like(200)
    frame.loc[::7, "logL"] += 1
    path = write_catalogue(tmp_path, frame)
    for name in ("a", "b"):
        catcheck.check(path, tmp_path / "profile.toml", out=tmp_path / name, rules=CORE)
    for name in ("flags.parquet", "report.md"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    a, b = (json.loads((tmp_path / n / "summary.json").read_text()) for n in "ab")
    a.pop("elapsed_seconds"), b.pop("elapsed_seconds")
    assert a == b


def test_failed_run_keeps_previous_report(tmp_path) -> None:
    frame = sun_like(20)
    path = write_catalogue(tmp_path, frame)
    out = tmp_path / "report"
    catcheck.check(path, tmp_path / "profile.toml", out=out, rules=CORE)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    with pytest.raises(catcheck.errors.ProfileError):
        bad = tmp_path / "bad.toml"
        bad.write_text(PROFILE_TOML.replace('column = "Rad"', 'column = "Radius"'))
        catcheck.check(path, bad, out=out, rules=CORE)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


def test_assumed_errors_reported_when_some_rows_lack_them() -> None:
    frame = sun_like(4)
    complete = catcheck.check_frame(frame, PROFILE, rules=CORE)
    assert stats(complete, "stefan-boltzmann")["assumed_errors"] == []
    frame.loc[1, "e_logL"] = np.nan
    partial = catcheck.check_frame(frame, PROFILE, rules=CORE)
    assert stats(partial, "stefan-boltzmann")["assumed_errors"] == ["luminosity"]


def test_expression_rule_runs_end_to_end(tmp_path) -> None:
    pack = tmp_path / "mine.toml"
    pack.write_text("""
[[rule]]
id = "hot-red-giant"
severity = "warning"
summary = "red giants are cool"
when = "phase in ('RGB', 'AGB')"
require = "teff < 5800"
message = "{phase} star at {teff:.0f} K is too hot"
""")
    frame = sun_like(9)
    result = catcheck.check_frame(frame, PROFILE, rules=["core", pack])
    giants_hot = frame.index[(frame["state"] == "giant") & (frame["Teff"] >= 5800)].tolist()
    flags = result.flags.query("rule == 'hot-red-giant'")
    assert flags["row"].tolist() == giants_hot and giants_hot
    row = giants_hot[0]
    assert flags.iloc[0]["message"] == f"RGB star at {frame.loc[row, 'Teff']:.0f} K is too hot"
    assert flags.iloc[0]["severity"] == "warning"
    counts = stats(result, "hot-red-giant")
    giants = int((frame["state"] == "giant").sum())
    assert (counts["checked"], counts["not_applicable"]) == (giants, 9 - giants)
    assert counts["checked"] + counts["skipped"] == 9


def test_worker_processes_give_the_same_group_statistics(tmp_path) -> None:
    """The cluster pass merged from worker processes equals one pass over all rows."""
    from catcheck.demo import write_demo

    files = write_demo(tmp_path / "demo", rows=12_000, seed=4, chunk_rows=2_500)
    one = catcheck.check(files.catalogue, files.profile, batch_rows=1_000)
    two = catcheck.check(files.catalogue, files.profile, batch_rows=1_000, workers=2)
    group_rules = {r["id"] for r in one.summary["rules"] if r["pack"] == "clusters"}
    assert one.flags["rule"].isin(group_rules).sum() > 10
    pd.testing.assert_frame_equal(one.flags, two.flags)
    for key in ("rules", "flagged_rows", "rows_by_severity", "unmapped_phase_labels"):
        assert one.summary[key] == two.summary[key]


def test_repeated_ids_counted_in_a_forked_process_match(tmp_path, monkeypatch) -> None:
    """Large catalogues count repeated ids beside the checks: the same summary entry."""
    import catcheck.api as api

    frame = sun_like(3000, seed=6)
    frame.loc[[5, 17, 2999], "name"] = "dup"
    path = write_catalogue(tmp_path, frame)
    inline = catcheck.check(path, tmp_path / "profile.toml", rules=CORE)
    monkeypatch.setattr(api, "BACKGROUND_ID_COUNT_ROWS", 0)
    forked = catcheck.check(path, tmp_path / "profile.toml", rules=CORE)
    assert forked.summary["duplicate_ids"] == inline.summary["duplicate_ids"]
    assert forked.summary["duplicate_ids"]["rows_with_repeated_id"] == 3


def test_forked_call_returns_raises_and_cancels() -> None:
    from catcheck.concurrency import ForkedCall
    from catcheck.errors import CatalogueError

    assert ForkedCall(lambda: {"rows": 3}).result() == {"rows": 3}

    def fail() -> None:
        raise CatalogueError("cannot read", where="x.parquet")

    with pytest.raises(CatalogueError, match="cannot read"):
        ForkedCall(fail).result()
    import time

    slow = ForkedCall(lambda: time.sleep(30))
    started = time.perf_counter()
    slow.cancel()
    assert time.perf_counter() - started < 5
    assert ForkedCall(lambda: 7, fork=False).result() == 7


def test_extreme_values_raise_no_floating_point_warnings() -> None:
    """Overflowing, zero and infinite values are data: flagged, never a RuntimeWarning."""
    import warnings

    frame = sun_like(20)
    frame.loc[0, "Teff"] = 1e308
    frame.loc[1, "logL"] = 400.0
    frame.loc[2, "Rad"] = -5.0
    frame.loc[3, "Teff"] = 0.0
    frame.loc[4, "Age"] = np.inf
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        result = catcheck.check_frame(frame, PROFILE)
    assert set(result.flags["row"]) >= {0, 1, 2, 3, 4}


def test_forked_map_orders_results_and_reports_dead_or_failing_workers() -> None:
    import os
    import signal

    from catcheck.concurrency import forked_map
    from catcheck.errors import CatalogueError, WorkerLostError

    assert list(forked_map(lambda i: i * i, 7, 3)) == [0, 1, 4, 9, 16, 25, 36]

    def dies_at_three(i: int) -> int:
        if i == 3:
            os.kill(os.getpid(), signal.SIGKILL)  # as the out-of-memory killer would
        return i

    with pytest.raises(WorkerLostError, match="ended unexpectedly"):
        list(forked_map(dies_at_three, 6, 2))

    def unreadable_at_two(i: int) -> int:
        if i == 2:
            raise CatalogueError("cannot read the catalogue", where="part-2.parquet")
        return i

    with pytest.raises(CatalogueError, match=r"part-2\.parquet"):
        list(forked_map(unreadable_at_two, 6, 2))


def test_a_catalogue_inside_the_report_directory_is_refused(tmp_path) -> None:
    """Re-checking report/clean.parquet into report/ would replace or remove the input."""
    from catcheck.errors import UsageError

    frame = sun_like(50)
    report = tmp_path / "report"
    report.mkdir()
    path = write_catalogue(report, frame, name="clean.parquet")
    before = path.read_bytes()
    with pytest.raises(UsageError, match="report directory"):
        catcheck.check(path, report / "profile.toml", rules=CORE, out=report)
    assert path.read_bytes() == before
    other = write_catalogue(report, frame, name="stars.parquet")  # not a report file: fine
    assert catcheck.check(other, report / "profile.toml", rules=CORE, out=report).passed


def test_an_unwritable_junit_path_is_refused_before_the_run(tmp_path) -> None:
    from catcheck.errors import UsageError

    path = write_catalogue(tmp_path, sun_like(20))
    (tmp_path / "afile").write_text("not a directory")
    with pytest.raises(UsageError, match="JUnit"):
        catcheck.check(path, tmp_path / "profile.toml", rules=CORE, out=tmp_path / "r",
                       junit=tmp_path / "afile" / "x.xml")
    assert not (tmp_path / "r").exists()
