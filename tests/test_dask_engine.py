"""The dask engine gives the local engine's flags and summary; neither depends on how the
work is cut (batch size, worker count, parts per task).

The catalogue is demo stars in three Parquet files, rows shuffled so every cluster has
members in every file, laid out two ways: a hive-partitioned directory (``shard=0/...``,
read file by file) and a plain directory of files (read row group by row group).
"""

from __future__ import annotations

import json
import socket
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

import catcheck
from catcheck import dask_engine
from catcheck.canonical import StarBatch
from catcheck.cli import main
from catcheck.demo import COLUMNS, write_demo
from catcheck.groups import GroupAccumulator
from catcheck.reader import ParquetCatalogue

ROWS = 6_000
#: rows per file and row-group size per file: groups of several sizes, files of several
FILE_ROWS = (2_500, 1_600, 1_900)
ROW_GROUP_ROWS = (700, 500, 1_300)
UNMAPPED_LABEL = "mystery state"


LAYOUTS = ("hive", "files")


@pytest.fixture(scope="module")
def survey(tmp_path_factory: pytest.TempPathFactory) -> tuple[dict[str, Path], Path]:
    """The catalogue in both layouts, by layout name, and its profile; some phase labels
    are ones the profile does not map."""
    root = tmp_path_factory.mktemp("dask-survey")
    demo = write_demo(root / "demo", rows=ROWS, seed=11)
    table = pq.read_table(demo.catalogue)
    table = table.take(np.random.default_rng(5).permutation(table.num_rows))
    strange = pa.array(np.arange(table.num_rows) % 97 == 0)
    labels = pc.if_else(strange, UNMAPPED_LABEL, table[COLUMNS.evol_class])
    table = table.set_column(table.schema.get_field_index(COLUMNS.evol_class),
                             COLUMNS.evol_class, labels)
    layouts = {layout: root / layout for layout in LAYOUTS}
    start = 0
    for shard, (rows, group_rows) in enumerate(zip(FILE_ROWS, ROW_GROUP_ROWS, strict=True)):
        for path in (layouts["hive"] / f"shard={shard}" / "part-0.parquet",
                     layouts["files"] / f"part-{shard}.parquet"):
            path.parent.mkdir(parents=True, exist_ok=True)
            pq.write_table(table.slice(start, rows), path, row_group_size=group_rows)
        start += rows
    assert start == ROWS
    return layouts, demo.profile


@pytest.fixture(autouse=True)
def several_parts(monkeypatch: pytest.MonkeyPatch) -> None:
    """Tasks of at most 1,500 rows (whole row groups, or whole files of the hive layout),
    so every run merges several partial group statistics."""
    monkeypatch.setattr(dask_engine, "PART_ROWS", 1_500)


@pytest.fixture(scope="module")
def scheduler() -> str:
    """The address of a two-worker local cluster (processes), shared by the module."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0") as cluster:
        yield cluster.scheduler_address


@pytest.fixture(scope="module")
def local(survey: tuple[dict[str, Path], Path]) -> dict[str, catcheck.CheckResult]:
    """The local engine's result by layout, the reference every other run must equal."""
    layouts, profile = survey
    return {layout: catcheck.check(path, profile) for layout, path in layouts.items()}


#: summary entries that may differ: timings, the engine, and the HTML page's note (its
#: diagrams are drawn by the local engine only, and only when a report is written)
ENGINE_KEYS = ("elapsed_seconds", "engine", "visual_report")


def comparable(result: catcheck.CheckResult) -> tuple[pd.DataFrame, dict]:
    """Flags as written, and the summary without the entries that may differ."""
    summary = {k: v for k, v in result.summary.items() if k not in ENGINE_KEYS}
    return result.flags, summary


def assert_same(result: catcheck.CheckResult, reference: catcheck.CheckResult) -> None:
    flags, summary = comparable(result)
    expected_flags, expected_summary = comparable(reference)
    pd.testing.assert_frame_equal(flags, expected_flags, check_exact=True)
    assert summary == expected_summary


@pytest.mark.parametrize("layout", LAYOUTS)
def test_reference_run_exercises_groups_and_labels(local, layout) -> None:
    """The comparisons below mean something: group rules ran and flagged, labels unmapped."""
    local = local[layout]
    rules = {entry["id"]: entry for entry in local.summary["rules"]}
    group_rules = ["cluster-parallax-outlier", "cluster-metallicity-outlier"]
    assert all(rules[r]["status"] == "ran" and rules[r]["flagged"] > 0 for r in group_rules)
    assert local.summary["unmapped_phase_labels"] == {UNMAPPED_LABEL: len(range(0, ROWS, 97))}
    assert local.summary["engine"] == "local"
    assert len(local.flags) > 100


@pytest.mark.parametrize("layout", LAYOUTS)
def test_dask_gives_the_local_flags_and_summary(survey, local, scheduler, tmp_path, layout
                                                ) -> None:
    layouts, profile = survey
    result = catcheck.check(layouts[layout], profile, out=tmp_path, engine="dask",
                            scheduler=scheduler)
    assert result.summary["engine"] == "dask"
    assert_same(result, local[layout])
    assert result.flags["row"].is_monotonic_increasing  # written in row order
    assert json.loads((tmp_path / "summary.json").read_text())["rows"] == ROWS


def test_dask_does_not_depend_on_parts_or_batches(survey, local, scheduler, monkeypatch
                                                   ) -> None:
    """Parts of one or two row groups, one spanning two files, and small batches."""
    monkeypatch.setattr(dask_engine, "PART_ROWS", 1_000)
    layouts, profile = survey
    parts = dask_engine.catalogue_parts(ParquetCatalogue.open([layouts["files"]]), 1_000)
    assert len(parts) > len(FILE_ROWS)
    assert any(len({piece.path for piece in part}) > 1 for part in parts)
    result = catcheck.check(layouts["files"], profile, engine="dask", scheduler=scheduler,
                            batch_rows=1_000)
    assert_same(result, local["files"])


def test_dask_on_a_local_cluster_of_one_worker(survey, local) -> None:
    """Without --scheduler the engine starts (and stops) its own local cluster."""
    pytest.importorskip("distributed")
    layouts, profile = survey
    assert_same(catcheck.check(layouts["files"], profile, engine="dask", workers=1),
                local["files"])


@pytest.mark.parametrize(("layout", "batch_rows", "workers"),
                         [("files", 1_000, 1), ("files", 100_000, 2), ("files", 1_000, 2),
                          ("hive", 1_000, 2)])
def test_local_does_not_depend_on_batches_or_workers(survey, local, layout, batch_rows,
                                                     workers) -> None:
    layouts, profile = survey
    result = catcheck.check(layouts[layout], profile, batch_rows=batch_rows, workers=workers)
    assert_same(result, local[layout])


def test_command_line_runs_on_a_scheduler(survey, local, scheduler, tmp_path) -> None:
    layouts, profile = survey
    local = local["hive"]
    done = subprocess.run(
        [sys.executable, "-m", "catcheck", "check", str(layouts["hive"]), "--profile",
         str(profile),
         "--out", str(tmp_path), "--engine", "dask", "--scheduler", scheduler, "--quiet"],
        capture_output=True, text=True, timeout=120)
    assert done.returncode == (0 if local.passed else 1), done.stderr
    summary = json.loads((tmp_path / "summary.json").read_text())
    assert summary["engine"] == "dask"
    assert summary["flags_by_severity"] == local.summary["flags_by_severity"]
    flags = pq.read_table(tmp_path / "flags.parquet").to_pandas()
    pd.testing.assert_frame_equal(flags, local.flags, check_exact=True)


def test_dask_with_a_group_table(survey, scheduler, tmp_path) -> None:
    """Ages from a ``[groups]`` table (read on the driver, keyed in its own order) fill the
    members that lack one; both engines agree."""
    layouts, profile = survey
    table = pq.read_table(layouts["files"])
    clusters = table.group_by(COLUMNS.cluster).aggregate([(COLUMNS.age, "max")])
    clusters = clusters.sort_by([(COLUMNS.cluster, "descending")])  # not catalogue order
    pq.write_table(pa.table({"cluster": clusters[COLUMNS.cluster],
                             "log_age": pc.log10(pc.multiply(clusters[f"{COLUMNS.age}_max"],
                                                             1e6))}),
                   tmp_path / "clusters.parquet")
    no_age = pa.array(np.arange(table.num_rows) % 3 == 0)
    age = pc.if_else(no_age, pa.scalar(None, pa.float64()), table[COLUMNS.age])
    table = table.set_column(table.schema.get_field_index(COLUMNS.age), COLUMNS.age, age)
    (tmp_path / "data").mkdir()
    pq.write_table(table.slice(0, 3_500), tmp_path / "data" / "a.parquet", row_group_size=900)
    pq.write_table(table.slice(3_500), tmp_path / "data" / "b.parquet", row_group_size=900)
    with_table = tmp_path / "profile.toml"
    with_table.write_text(profile.read_text() + f"""
[groups]
table = "{tmp_path / 'clusters.parquet'}"
key = "cluster"
[groups.quantities.age]
column = "log_age"
unit = "dex(yr)"
""")
    reference = catcheck.check(tmp_path / "data", with_table)
    age_range = next(r for r in reference.summary["rules"] if r["id"] == "age-range")
    assert age_range["checked"] == ROWS  # a third of them from the table
    result = catcheck.check(tmp_path / "data", with_table, engine="dask", scheduler=scheduler)
    assert_same(result, reference)


def test_partial_group_statistics_merge_exactly() -> None:
    """Three parts, each with its own group codes, merged in row order give what one pass
    gives; a sample of 8 per group makes the merge cut crowded groups."""
    rng = np.random.default_rng(2)
    groups, rows = 10, 5_000
    codes = rng.integers(-1, groups, rows)  # -1: no group
    values = np.where(rng.random(rows) < 0.05, np.nan, rng.normal(3.0, 1.0, rows))

    def batch(start: int, stop: int, group_codes: np.ndarray) -> StarBatch:
        stars = StarBatch(start, stop - start, pa.array(np.arange(start, stop).astype(str)))
        stars.values["teff"] = values[start:stop]
        stars.group_codes = group_codes
        return stars

    def accumulator() -> GroupAccumulator:
        return GroupAccumulator({"teff": lambda stars: stars.values["teff"]}, sample_size=8)

    whole = accumulator()
    for start in range(0, rows, 700):
        stop = min(rows, start + 700)
        whole.add(batch(start, stop, codes[start:stop]))
    merged = accumulator()
    for start, stop in [(0, 1_800), (1_800, 2_100), (2_100, rows)]:
        local_code = rng.permutation(groups)  # the part's own codes of the same groups
        part = accumulator()
        own = codes[start:stop]
        part.add(batch(start, stop, np.where(own >= 0, local_code[own], -1)))
        merged.merge(part, np.argsort(local_code))  # its code -> our code
    expected, got = whole.finish(groups)["teff"], merged.finish(groups)["teff"]
    assert expected.count.sum() == np.count_nonzero((codes >= 0) & ~np.isnan(values))
    for name in ("count", "median", "spread"):
        np.testing.assert_array_equal(getattr(got, name), getattr(expected, name))


def run_cli(args: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str]:
    with pytest.raises(SystemExit) as exit_info:
        main(args)
    return exit_info.value.code, capsys.readouterr().err


def test_dask_missing_names_the_extra(survey, tmp_path, monkeypatch, capsys) -> None:
    layouts, profile = survey
    dataset = layouts["files"]
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed fails
    out = tmp_path / "report"
    code, err = run_cli(["check", str(dataset), "--profile", str(profile), "--out", str(out),
                         "--engine", "dask"], capsys)
    assert code == 2
    assert 'pip install "catcheck[dask]"' in err and "Traceback" not in err
    assert not (out / "summary.json").exists()


def test_unreachable_scheduler_exits_2(survey, tmp_path, monkeypatch, capsys) -> None:
    pytest.importorskip("distributed")
    monkeypatch.setattr(dask_engine, "CONNECT_TIMEOUT_SECONDS", 1)
    with socket.socket() as probe:  # a port nobody listens on
        probe.bind(("127.0.0.1", 0))
        address = f"tcp://127.0.0.1:{probe.getsockname()[1]}"
    layouts, profile = survey
    dataset = layouts["files"]
    code, err = run_cli(["check", str(dataset), "--profile", str(profile), "--out",
                         str(tmp_path), "--engine", "dask", "--scheduler", address], capsys)
    assert code == 2
    assert "cannot reach the dask scheduler" in err and address in err
    assert not (tmp_path / "summary.json").exists()


def test_scheduler_needs_the_dask_engine(survey, tmp_path, capsys) -> None:
    layouts, profile = survey
    dataset = layouts["files"]
    code, err = run_cli(["check", str(dataset), "--profile", str(profile), "--out",
                         str(tmp_path), "--scheduler", "tcp://127.0.0.1:8786"], capsys)
    assert code == 2 and "--engine dask" in err
