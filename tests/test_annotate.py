"""--annotate and --split: every input row and column survives unchanged, plus qc columns.

The catalogues here carry what a copy most easily damages: nulls, NaN, a list column, a
struct column, a dictionary column, schema and field metadata, and several row groups
read in many small batches.
"""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
from factory import PROFILE_TOML, sun_like

import catcheck
from catcheck.annotate import row_marks
from catcheck.errors import CatalogueError, UsageError

#: core finds the Stefan-Boltzmann errors; NOTES adds an info and a warning rule
NOTES = """
[[rule]]
id = "hot-star-note"
severity = "info"
summary = "a note on hot stars"
require = "teff < 8500"
message = "hot: {teff:.0f} K"

[[rule]]
id = "cool-star-warning"
severity = "warning"
summary = "a warning on cool stars"
require = "teff > 3800"
message = "cool: {teff:.0f} K"
"""
ROWS = 300
SMALL_BATCH = 37  # many batches, none aligned with the row groups of 50


def rich_table(rows: int = ROWS, seed: int = 0, first: int = 0) -> pa.Table:
    """sun_like stars with faults, nulls, NaN and nested, dictionary and metadata columns."""
    frame = sun_like(rows, seed)
    frame["name"] = [f"S{first + i:06d}" for i in range(rows)]
    frame.loc[frame.index[3::17], "logL"] += 1.0  # Stefan-Boltzmann errors
    frame.loc[frame.index[5::23], "Teff"] = np.nan  # rows the rules skip
    table = pa.Table.from_pandas(frame, preserve_index=False)
    n = np.arange(rows)
    extra = {
        "tags": pa.array([None if i % 7 == 0 else [] if i % 7 == 1 else [f"t{i}", "x"]
                          for i in n], pa.list_(pa.string())),
        "photometry": pa.array([None if i % 11 == 0 else {"band": "V", "mag": None if i % 5
                                                          == 0 else float(i) / 10}
                                for i in n]),
        "field": pa.array([None if i % 13 == 0 else f"F{i % 4}" for i in n]
                          ).dictionary_encode(),
        "flagged_by_survey": pa.array([None if i % 9 == 0 else bool(i % 2) for i in n]),
    }
    for name, column in extra.items():
        table = table.append_column(name, column)
    teff = table.schema.get_field_index("Teff")
    table = table.set_column(teff, table.schema.field(teff).with_metadata({"unit": "K"}),
                             table.column(teff))
    metadata = {**(table.schema.metadata or {}), b"survey": b"Larkspur Open Cluster Survey"}
    return table.replace_schema_metadata(metadata)


@pytest.fixture
def catalogue(tmp_path):
    path = tmp_path / "cat.parquet"
    pq.write_table(rich_table(), path, row_group_size=50)
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    (tmp_path / "notes.toml").write_text(NOTES)
    return path


def rules(tmp_path) -> list:
    return ["core", tmp_path / "notes.toml"]


def assert_same_table(got: pa.Table, expected: pa.Table) -> None:
    """Equal schemas (metadata included) and equal values, NaN equal to NaN bit for bit."""
    assert got.schema.equals(expected.schema, check_metadata=True), (got.schema,
                                                                     expected.schema)
    for name in expected.column_names:
        a, b = got[name].combine_chunks(), expected[name].combine_chunks()
        if pa.types.is_floating(b.type):
            assert a.is_valid().equals(b.is_valid()), name
            assert np.array_equal(a.fill_null(0).to_numpy().view(np.uint64),
                                  b.fill_null(0).to_numpy().view(np.uint64)), name
        else:
            assert a.equals(b), name


def checksum(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def reference_marks(flags, bits: dict[str, int], rows: int) -> tuple[list[int], list]:
    """qc_flags and qc_severity computed the slow, obvious way, from the flags table."""
    rank = {"info": 0, "warning": 1, "error": 2}
    qc_flags = [0] * rows
    worst: list = [None] * rows
    for row, rule, severity in zip(flags["row"], flags["rule"], flags["severity"],
                                   strict=True):
        qc_flags[row] |= 1 << bits[rule]
        if worst[row] is None or rank[severity] > rank[worst[row]]:
            worst[row] = severity
    return qc_flags, worst


def test_annotated_is_the_input_plus_qc_columns(tmp_path, catalogue) -> None:
    before = checksum(catalogue)
    result = catcheck.check(catalogue, tmp_path / "profile.toml", rules(tmp_path),
                            out=tmp_path / "r", annotate=True, batch_rows=SMALL_BATCH)
    assert checksum(catalogue) == before  # the input is never modified
    annotated = pq.read_table(tmp_path / "r" / "annotated.parquet")
    source = pq.read_table(catalogue)
    assert_same_table(annotated.drop_columns(["qc_flags", "qc_severity"]), source)
    assert annotated.column_names[-2:] == ["qc_flags", "qc_severity"]
    assert annotated.schema.field("qc_flags").type == pa.uint64()
    assert annotated.schema.field("qc_severity").type == pa.dictionary(pa.int8(), pa.string())

    bits = result.summary["qc_bits"]
    assert list(bits) == [r["id"] for r in result.summary["rules"]]  # the run's order
    assert list(bits.values()) == list(range(len(bits)))
    field_bits = annotated.schema.field("qc_flags").metadata[b"qc_bits"]
    assert json.loads(field_bits) == bits  # the file describes itself
    flags = result.flags
    assert set(flags["severity"]) == {"info", "warning", "error"}  # every kind is tested
    qc_flags, worst = reference_marks(flags, bits, ROWS)
    assert annotated["qc_flags"].to_pylist() == qc_flags
    assert annotated["qc_severity"].to_pylist() == worst


def test_split_partitions_the_input(tmp_path, catalogue) -> None:
    result = catcheck.check(catalogue, tmp_path / "profile.toml", rules(tmp_path),
                            out=tmp_path / "r", split=True, batch_rows=SMALL_BATCH)
    source = pq.read_table(catalogue)
    clean = pq.read_table(tmp_path / "r" / "clean.parquet")
    flagged = pq.read_table(tmp_path / "r" / "flagged.parquet")
    flags = result.flags
    gating = set(flags.loc[flags["severity"] != "info", "row"])
    info_only = set(flags["row"]) - gating
    assert gating and info_only  # rows with only an info flag exist ...
    keys = source["name"].to_pylist()
    assert not set(clean["name"].to_pylist()) & set(flagged["name"].to_pylist())
    assert sorted(clean["name"].to_pylist() + flagged["name"].to_pylist()) == sorted(keys)
    is_flagged = np.isin(np.arange(ROWS), sorted(gating))
    # ... and they stay clean: flagged means an error or warning flag, as for the gate
    assert {keys[r] for r in info_only} <= set(clean["name"].to_pylist())
    # each part is the input, filtered, in input order, every column unchanged
    assert_same_table(clean, source.filter(pa.array(~is_flagged)))
    assert_same_table(flagged, source.filter(pa.array(is_flagged)))
    assert result.summary["split"]["clean"] == clean.num_rows
    assert result.summary["split"]["flagged"] == flagged.num_rows == len(gating)
    assert result.summary["rows_by_severity"]["error"] + result.summary[
        "rows_by_severity"]["warning"] == flagged.num_rows
    assert "qc_bits" not in result.summary  # only with --annotate


def test_several_files_with_reordered_columns(tmp_path) -> None:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    (tmp_path / "notes.toml").write_text(NOTES)
    parts = [rich_table(120, seed, first=120 * seed) for seed in range(3)]
    paths = []
    for i, part in enumerate(parts):
        if i == 1:  # same columns in another order, other metadata: still one catalogue
            part = part.select(part.column_names[::-1]).replace_schema_metadata({"x": "y"})
        paths.append(tmp_path / f"part-{i}.parquet")
        pq.write_table(part, paths[-1], row_group_size=45)
    result = catcheck.check(paths, tmp_path / "profile.toml", rules(tmp_path),
                            out=tmp_path / "r", annotate=True, split=True,
                            batch_rows=SMALL_BATCH)
    first = pq.read_schema(paths[0])  # as Parquet gives it back (list<element: ...>)
    whole = pa.concat_tables([pq.read_table(p).select(first.names).cast(first)
                              for p in paths])
    annotated = pq.read_table(tmp_path / "r" / "annotated.parquet")
    assert_same_table(annotated.drop_columns(["qc_flags", "qc_severity"]), whole)
    qc_flags, _ = reference_marks(result.flags, result.summary["qc_bits"], 360)
    assert annotated["qc_flags"].to_pylist() == qc_flags
    is_flagged = pc.is_in(annotated["qc_severity"].cast(pa.string()),
                          value_set=pa.array(["warning", "error"])).fill_null(False)
    flagged = pq.read_table(tmp_path / "r" / "flagged.parquet")
    assert_same_table(flagged, whole.filter(is_flagged))
    assert flagged.num_rows + pq.read_metadata(tmp_path / "r" / "clean.parquet").num_rows \
        == 360


def test_files_with_other_columns_or_types_are_refused(tmp_path) -> None:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    table = rich_table(20)
    pq.write_table(table, tmp_path / "a.parquet")
    pq.write_table(table.drop_columns(["tags"]), tmp_path / "b.parquet")
    pq.write_table(table.set_column(table.schema.get_field_index("field"), "field",
                                    table["field"].cast(pa.string())), tmp_path / "c.parquet")
    for other, what in (("b", "missing here"), ("c", "'field' is string here")):
        with pytest.raises(CatalogueError, match=what):
            catcheck.check([tmp_path / "a.parquet", tmp_path / f"{other}.parquet"],
                           tmp_path / "profile.toml", ["core"], out=tmp_path / "r",
                           annotate=True)
        assert not (tmp_path / "r" / "annotated.parquet").exists()


def test_empty_catalogue_gives_empty_outputs_with_the_schema(tmp_path) -> None:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    empty = rich_table(10).slice(0, 0)
    pq.write_table(empty, tmp_path / "empty.parquet")
    catcheck.check(tmp_path / "empty.parquet", tmp_path / "profile.toml", ["core"],
                   out=tmp_path / "r", annotate=True, split=True)
    for name in ("clean", "flagged"):
        assert_same_table(pq.read_table(tmp_path / "r" / f"{name}.parquet"),
                          pq.read_table(tmp_path / "empty.parquet"))
    assert pq.read_table(tmp_path / "r" / "annotated.parquet").num_rows == 0


def test_outputs_of_an_older_run_are_removed(tmp_path, catalogue) -> None:
    profile, out = tmp_path / "profile.toml", tmp_path / "r"
    catcheck.check(catalogue, profile, ["core"], out=out, annotate=True, split=True)
    assert {p.name for p in out.iterdir()} >= {"annotated.parquet", "clean.parquet",
                                               "flagged.parquet"}
    catcheck.check(catalogue, profile, ["core"], out=out, annotate=True, flags_format="csv")
    names = {p.name for p in out.iterdir()}
    assert "annotated.parquet" in names and "flags.csv" in names
    assert not names & {"clean.parquet", "flagged.parquet", "flags.parquet"}
    catcheck.check(catalogue, profile, ["core"], out=out)
    assert "annotated.parquet" not in {p.name for p in out.iterdir()}


def test_check_frame_writes_annotated_and_split(tmp_path) -> None:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    frame = sun_like(80)
    frame.loc[[2, 40], "logL"] += 1.0
    result = catcheck.check_frame(frame, tmp_path / "profile.toml", ["core"],
                                  out=tmp_path / "r", annotate=True, split=True, batch_rows=9)
    annotated = pq.read_table(tmp_path / "r" / "annotated.parquet").to_pandas()
    assert annotated.drop(columns=["qc_flags", "qc_severity"]).equals(frame)
    bit = result.summary["qc_bits"]["stefan-boltzmann"]
    assert annotated.index[annotated["qc_flags"] == 1 << bit].tolist() == [2, 40]
    flagged = pq.read_table(tmp_path / "r" / "flagged.parquet").to_pandas()
    assert flagged["name"].tolist() == ["S000002", "S000040"]


def test_requests_checked_before_the_run(tmp_path, catalogue) -> None:
    profile = tmp_path / "profile.toml"
    with pytest.raises(UsageError, match="no output directory"):
        catcheck.check(catalogue, profile, ["core"], split=True)
    clash = rich_table(20).append_column("qc_flags", pa.array(np.zeros(20, np.int64)))
    pq.write_table(clash, tmp_path / "clash.parquet")
    with pytest.raises(UsageError, match="already has a column 'qc_flags'"):
        catcheck.check(tmp_path / "clash.parquet", profile, ["core"], out=tmp_path / "r",
                       annotate=True)
    catcheck.check(tmp_path / "clash.parquet", profile, ["core"], out=tmp_path / "r",
                   split=True)  # --split adds no column: no clash


def many_rules(n: int) -> str:
    return "".join(f'[[rule]]\nid = "rule-{i}"\nseverity = "info"\nsummary = "r{i}"\n'
                   f'require = "teff > {i}"\n\n' for i in range(n))


def test_more_than_64_rules_cannot_be_annotated(tmp_path, catalogue) -> None:
    (tmp_path / "many.toml").write_text(many_rules(65))
    command = [sys.executable, "-m", "catcheck", "check", str(catalogue), "--profile",
               str(tmp_path / "profile.toml"), "--rules", str(tmp_path / "many.toml"),
               "--out", str(tmp_path / "r")]
    done = subprocess.run([*command, "--annotate"], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith("catcheck: error: --annotate gives each rule one bit")
    assert "Traceback" not in done.stderr and "65 rules" in done.stderr
    assert not (tmp_path / "r" / "summary.json").exists()
    done = subprocess.run([*command, "--split", "--fail-on", "none"], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr  # the split needs no bits
    assert pq.read_metadata(tmp_path / "r" / "clean.parquet").num_rows == ROWS


def test_64_rules_use_every_bit(tmp_path) -> None:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    (tmp_path / "many.toml").write_text(many_rules(64))
    frame = sun_like(5)
    frame["Teff"] = [0.5, 10.5, 62.5, 63.5, 1e4]  # fails rules i >= teff
    catcheck.check_frame(frame, tmp_path / "profile.toml", [tmp_path / "many.toml"],
                         out=tmp_path / "r", annotate=True)
    qc_flags = pq.read_table(tmp_path / "r" / "annotated.parquet")["qc_flags"].to_numpy()
    top = np.uint64(2**64 - 1)
    assert qc_flags.tolist() == [int(top - 1), int(top - (2**11 - 1)),
                                 int(top - (2**63 - 1)), 0, 0]


def test_row_marks_combine_flags_by_row() -> None:
    marks = row_marks(5, np.array([0, 0, 3, 3, 3]), np.array([0, 63, 1, 2, 5]),
                      np.array([0, 1, 2, 0, 1], np.int8))
    assert marks.qc_flags.tolist() == [1 + 2**63, 0, 0, 2 + 4 + 32, 0]
    assert marks.worst.tolist() == [1, -1, -1, 2, -1]
    assert marks.severity().to_pylist() == ["warning", None, None, "error", None]
    assert marks.flagged().tolist() == [True, False, False, True, False]
    with pytest.raises(RuntimeError, match="not sorted"):
        row_marks(5, np.array([3, 0]), None, np.array([0, 0], np.int8))
