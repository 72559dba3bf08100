"""A corpus of bad inputs, each run through the command line as a user meets it.

Every case builds its input in ``tmp_path``, runs ``catcheck.cli.main`` and checks the
documented exit code (README, "Bad input"), that stderr holds no traceback, and:

* for an error: one line on stderr naming what is wrong, where (file, key) and how to
  fix it, and no report directory left behind;
* for data that is odd but not an error (inf, negatives, NaN, repeated ids, unknown phase
  labels): nothing on stderr, and the summary or console saying what was found.
"""

from __future__ import annotations

import json
import os
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from factory import PROFILE_TOML, sun_like, write_catalogue

import catcheck
from catcheck.cli import main
from catcheck.errors import (
    EXIT_CATALOGUE,
    EXIT_GATE_FAILED,
    EXIT_PASSED,
    EXIT_USAGE,
    CatalogueError,
    ProfileError,
)
from catcheck.identifiers import DuplicateIds


@dataclass
class Run:
    """What a user sees: the exit code, stdout, stderr, and the report directory."""

    code: int
    stdout: str
    stderr: str
    out: Path

    @property
    def summary(self) -> dict:
        return json.loads((self.out / "summary.json").read_text(encoding="utf-8"))

    @property
    def flags(self) -> pd.DataFrame:
        return pd.read_parquet(self.out / "flags.parquet")


@dataclass
class Case:
    """One bad input: how to build it, and what the user must see."""

    build: Callable[[Path], list[str]]  # writes the input, returns the check arguments
    code: int
    error: tuple[str, ...] = ()  # substrings of the one-line error; () for data cases
    stdout: tuple[str, ...] = ()
    check: Callable[[Run], None] | None = None
    detail_lines: int = 0  # lines printed under the error (an expression and its caret)
    options: tuple[str, ...] = field(default=("--fail-on", "none"))


def run_check(tmp_path: Path, case: Case, capsys: pytest.CaptureFixture[str]) -> Run:
    args = ["check", *case.build(tmp_path), *case.options]
    if "--out" not in args:
        args += ["--out", str(tmp_path / "report")]
    if "--profile" not in args:
        args += ["--profile", str(tmp_path / "profile.toml")]
    out = Path(args[args.index("--out") + 1])
    with pytest.raises(SystemExit) as exited:
        main(args)
    captured = capsys.readouterr()
    return Run(exited.value.code, captured.out, captured.err, out)


# --- builders -----------------------------------------------------------------------------


def catalogue(tmp_path: Path, frame: pd.DataFrame | None = None, name: str = "cat.parquet"
              ) -> Path:
    """The factory catalogue (or ``frame``) and its profile, in tmp_path."""
    return write_catalogue(tmp_path, sun_like(30) if frame is None else frame, name)


def damaged(change: Callable[[bytes], bytes]) -> Callable[[Path], list[str]]:
    """A builder writing a good catalogue, then replacing its bytes by change(bytes)."""
    def build(tmp_path: Path) -> list[str]:
        path = catalogue(tmp_path, sun_like(200))
        path.write_bytes(change(path.read_bytes()))
        return [str(path)]
    return build


def with_frame(edit: Callable[[pd.DataFrame], pd.DataFrame]) -> Callable[[Path], list[str]]:
    """A builder writing the factory catalogue (30 rows) as changed by ``edit``."""
    def build(tmp_path: Path) -> list[str]:
        return [str(catalogue(tmp_path, edit(sun_like(30))))]
    return build


def two_files(change_second: Callable[[pd.DataFrame], pd.DataFrame]
              ) -> Callable[[Path], list[str]]:
    """A builder writing one dataset as two files, the second changed by a function."""
    def build(tmp_path: Path) -> list[str]:
        frame = sun_like(20)
        first = catalogue(tmp_path, frame.iloc[:10], "a.parquet")
        second = catalogue(tmp_path, change_second(frame.iloc[10:].copy()), "b.parquet")
        return [str(first), str(second)]
    return build


def with_profile(edit: Callable[[str], str]) -> Callable[[Path], list[str]]:
    """A builder writing the factory catalogue and an edited profile, bad.toml."""
    def build(tmp_path: Path) -> list[str]:
        path = catalogue(tmp_path)
        (tmp_path / "bad.toml").write_text(edit(PROFILE_TOML), encoding="utf-8")
        return [str(path), "--profile", str(tmp_path / "bad.toml")]
    return build


def with_pack(text: str, *before: str) -> Callable[[Path], list[str]]:
    """A builder writing the factory catalogue and a rule pack rules.toml."""
    def build(tmp_path: Path) -> list[str]:
        path = catalogue(tmp_path)
        (tmp_path / "rules.toml").write_text(text, encoding="utf-8")
        packs = [arg for pack in before for arg in ("--rules", pack)]
        return [str(path), *packs, "--rules", str(tmp_path / "rules.toml")]
    return build


def set_column(name: str, values: object) -> Callable[[pd.DataFrame], pd.DataFrame]:
    def edit(frame: pd.DataFrame) -> pd.DataFrame:
        frame[name] = values
        return frame
    return edit


def set_cells(name: str, cells: dict[int, object]) -> Callable[[pd.DataFrame], pd.DataFrame]:
    def edit(frame: pd.DataFrame) -> pd.DataFrame:
        for row, value in cells.items():
            frame.loc[row, name] = value
        return frame
    return edit


def missing_file(tmp_path: Path) -> list[str]:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    return [str(tmp_path / "absent.parquet")]


def directory_without_parquet(tmp_path: Path) -> list[str]:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    (tmp_path / "release").mkdir()
    (tmp_path / "release" / "stars.csv").write_text("name,Teff\nS1,5000\n")
    return [str(tmp_path / "release")]


def profile_missing(tmp_path: Path) -> list[str]:
    return [str(catalogue(tmp_path)), "--profile", str(tmp_path / "nowhere.toml")]


def glob_matching_nothing(tmp_path: Path) -> list[str]:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    return [str(tmp_path / "release-*.parquet")]


def out_under_a_file(tmp_path: Path) -> list[str]:
    path = catalogue(tmp_path)
    (tmp_path / "blocker").write_text("a file where a directory should be")
    return [str(path), "--out", str(tmp_path / "blocker" / "report")]


def out_is_a_file(tmp_path: Path) -> list[str]:
    path = catalogue(tmp_path)
    (tmp_path / "report").write_text("a file where the report directory should go")
    return [str(path)]


def unicode_everything(tmp_path: Path) -> list[str]:
    """Non-ASCII column names, ids, phase labels, file and directory names."""
    frame = sun_like(30).rename(columns={"name": "désignation", "Teff": "Tэфф", "state": "état",
                                         "logL": "log_L☉"})
    frame["désignation"] = [f"Étoile-{i}-星" for i in range(len(frame))]
    frame["état"] = np.where(np.arange(len(frame)) % 3 == 0, "géante", "naine")
    frame.loc[[4, 9], "log_L☉"] += 1.0  # two Stefan-Boltzmann faults
    folder = tmp_path / "relevé ünïcode"
    folder.mkdir()
    path = folder / "catalogue_é.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path)
    profile = (PROFILE_TOML.replace('"name"', '"désignation"').replace('"Teff"', '"Tэфф"')
               .replace('"state"', '"état"').replace('"logL"', '"log_L☉"')
               .replace('"dwarf"', '"naine"').replace('"giant"', '"géante"'))
    (tmp_path / "profile.toml").write_text(profile, encoding="utf-8")
    return [str(path)]


# --- extra checks -------------------------------------------------------------------------


def skipped_every_row(*rules: str) -> Callable[[Run], None]:
    def check(run: Run) -> None:
        summary = {r["id"]: r for r in run.summary["rules"]}
        for rule in rules:
            assert summary[rule]["checked"] == 0, summary[rule]
            assert summary[rule]["skipped"] == run.summary["rows"], summary[rule]
    return check


def flagged(rule: str, rows: set[int], skipped: set[int]) -> Callable[[Run], None]:
    """``rule`` flags at least ``rows`` and none of ``skipped``, which it skips."""
    def check(run: Run) -> None:
        found = set(run.flags.loc[run.flags["rule"] == rule, "row"])
        assert rows <= found and not skipped & found, found
        entry = next(r for r in run.summary["rules"] if r["id"] == rule)
        assert entry["skipped"] == len(skipped), entry
    return check


def summary_has(key: str, expected: object) -> Callable[[Run], None]:
    def check(run: Run) -> None:
        assert run.summary[key] == expected
    return check


def rows_read(n: int) -> Callable[[Run], None]:
    return summary_has("rows", n)


def unicode_end_to_end(run: Run) -> None:
    flags = run.flags
    assert sorted(flags.loc[flags["rule"] == "stefan-boltzmann", "id"]) == [
        "Étoile-4-星", "Étoile-9-星"]
    assert run.summary["unmapped_phase_labels"] == {}
    report = (run.out / "report.md").read_text(encoding="utf-8")
    assert "Étoile-4-星" in report and "relevé ünïcode" in report


def nothing_written(run: Run) -> None:
    """No report directory (a file already in its place is left alone)."""
    assert not run.out.exists() or run.out.is_file()


# --- the corpus ---------------------------------------------------------------------------

CORPUS: dict[str, Case] = {
    # the catalogue is missing or unreadable: exit 3
    "missing-file": Case(missing_file, EXIT_CATALOGUE,
                         ("catalogue not found", "absent.parquet", "check the path")),
    "directory-without-parquet": Case(directory_without_parquet, EXIT_CATALOGUE,
                                      ("holds no .parquet file", "release",
                                       "point at a Parquet file")),
    "glob-matching-nothing": Case(glob_matching_nothing, EXIT_CATALOGUE,
                                  ("matches no file", "release-*.parquet", "quote")),
    "truncated-parquet": Case(damaged(lambda b: b[: len(b) // 2]), EXIT_CATALOGUE,
                              ("not a readable Parquet file", "cat.parquet", "complete")),
    "last-byte-missing": Case(damaged(lambda b: b[:-1]), EXIT_CATALOGUE,
                              ("not a readable Parquet file", "cat.parquet", "complete")),
    "empty-file": Case(damaged(lambda b: b""), EXIT_CATALOGUE,
                       ("not a readable Parquet file", "cat.parquet", "complete")),
    "garbage-bytes": Case(damaged(lambda b: np.random.default_rng(8).bytes(len(b))),
                          EXIT_CATALOGUE,
                          ("not a readable Parquet file", "cat.parquet", "Parquet format")),
    "csv-named-parquet": Case(damaged(lambda b: b"name,Teff\nS1,5000\n"), EXIT_CATALOGUE,
                              ("not a readable Parquet file", "cat.parquet", "Parquet format")),
    "damaged-data-page": Case(damaged(lambda b: b[:4] + b"\xff" * 64 + b[68:]),
                              EXIT_CATALOGUE,
                              ("cannot read the catalogue", "cat.parquet", "damaged")),
    "clashing-types-int-and-string": Case(
        two_files(set_column("Age", "old")), EXIT_CATALOGUE,
        ("column 'Age' is", "string here but double in", "a.parquet", "b.parquet",
         "same schema")),
    "column-missing-from-one-file": Case(
        two_files(lambda f: f.drop(columns=["Age"])), EXIT_CATALOGUE,
        ("column 'Age' is missing from this file", "b.parquet", "same columns")),
    # read alike: integers in one file, floats in another; no values at all in one file
    "int-and-float-files": Case(two_files(lambda f: f.assign(Age=1)), EXIT_PASSED,
                                check=rows_read(20)),
    "all-null-column-in-one-file": Case(two_files(set_column("Rad", None)), EXIT_PASSED,
                                        check=rows_read(20)),
    # the profile does not fit the data, or the output cannot be written: exit 2
    "quantity-column-of-strings": Case(
        with_frame(lambda f: f.assign(Teff=[f"{t:.0f} K" for t in f["Teff"]])), EXIT_USAGE,
        ("column 'Teff' holds", "not numbers", "profile.toml", "[quantities.teff]",
         "map teff to a numeric column")),
    "output-directory-under-a-file": Case(out_under_a_file, EXIT_USAGE,
                                          ("cannot write the report", "blocker/report",
                                           "choose a writable directory")),
    "output-directory-is-a-file": Case(out_is_a_file, EXIT_USAGE,
                                       ("--out", "report", "is a file",
                                        "see 'catcheck check --help'")),
    # odd data, not errors: flagged or skipped, reported, never a crash
    "zero-rows": Case(with_frame(lambda f: f.iloc[:0]), EXIT_GATE_FAILED,
                      stdout=("0 rows", "verdict: FAILED: the catalogue has no rows"),
                      check=rows_read(0)),
    "all-nan-column": Case(with_frame(set_column("Teff", np.nan)), EXIT_PASSED,
                           check=skipped_every_row("teff-range", "stefan-boltzmann")),
    "all-null-column": Case(with_frame(set_column("Rad", None)), EXIT_PASSED,
                            check=skipped_every_row("radius-range", "stefan-boltzmann")),
    "inf-negative-and-huge-values": Case(
        with_frame(set_cells("Teff", {0: np.inf, 1: -np.inf, 2: -5000.0, 3: 0.0, 4: 1e300,
                                      5: -0.0, 6: 5e-324, 7: np.nan})),
        EXIT_PASSED, check=flagged("teff-range", {0, 1, 2, 3, 4, 5}, skipped={7})),
    "inf-and-negative-errors": Case(
        with_frame(set_cells("e_Teff", {0: np.inf, 1: -80.0, 2: 0.0, 3: 1e308, 4: np.nan})),
        EXIT_PASSED, check=rows_read(30)),
    "duplicate-ids": Case(
        with_frame(set_cells("name", {1: "S000000", 2: "S000000", 7: "S000005", 8: None})),
        EXIT_PASSED,
        stdout=("ids on more than one row: 2 ids on 5 rows", "'S000000' x3",
                "rows without an id: 1"),
        check=summary_has("duplicate_ids", {
            "repeated_ids": 2, "rows_with_repeated_id": 5, "rows_without_id": 1,
            "examples": {"S000000": 3, "S000005": 2}, "exact": True})),
    "unknown-phase-labels": Case(
        with_frame(set_cells("state", {0: "subgiantish", 3: "subgiantish", 5: "Ñ", 6: None,
                                       9: "MS", 12: "rgb"})),
        EXIT_PASSED,
        stdout=("phase labels with no phase code", "'subgiantish' x2", "'Ñ' x1"),
        check=summary_has("unmapped_phase_labels", {"subgiantish": 2, "Ñ": 1})),
    "non-ascii-names-ids-labels-and-paths": Case(unicode_everything, EXIT_GATE_FAILED,
                                                 check=unicode_end_to_end, options=()),
    # profile and rule-pack mistakes point at the place and suggest: exit 2
    "profile-missing": Case(profile_missing, EXIT_USAGE,
                            ("profile file not found", "nowhere.toml", "--profile")),
    "profile-not-toml": Case(with_profile(lambda t: t.replace('column = "Teff"', "column Teff")),
                             EXIT_USAGE, ("bad.toml", "not valid TOML", "line 5")),
    "profile-mistyped-key": Case(with_profile(lambda t: t.replace("[quantities.teff]",
                                                                  "[quantites.teff]")),
                                 EXIT_USAGE, ("bad.toml", "unknown key 'quantites'",
                                              "did you mean 'quantities'?")),
    "profile-mistyped-quantity": Case(with_profile(lambda t: t.replace("quantities.teff",
                                                                       "quantities.tef")),
                                      EXIT_USAGE, ("bad.toml", "[quantities.tef]",
                                                   "unknown quantity", "did you mean 'teff'?")),
    "profile-mistyped-unit": Case(with_profile(lambda t: t.replace('"dex(Lsun)"',
                                                                   '"dex(LSun)"')),
                                  EXIT_USAGE, ("bad.toml", "[quantities.luminosity] unit",
                                                "did you mean 'dex(Lsun)'?")),
    "profile-column-in-wrong-case": Case(with_profile(lambda t: t.replace('"Teff"', '"TEFF"')),
                                         EXIT_USAGE, ("bad.toml", "[quantities.teff] column",
                                                      "'TEFF' is not in the catalogue",
                                                      "did you mean 'Teff'?")),
    "profile-mistyped-phase-code": Case(with_profile(lambda t: t.replace('= "RGB"', '= "RBG"')),
                                        EXIT_USAGE, ("bad.toml", "[phases]",
                                                     "not a phase code", "did you mean 'RGB'?")),
    "pack-mistyped-name": Case(lambda tmp_path: [str(catalogue(tmp_path)), "--rules",
                                                 "evolutoin"],
                               EXIT_USAGE, ("unknown rule pack 'evolutoin'",
                                            "did you mean 'evolution'?")),
    "pack-mistyped-rule-key": Case(with_pack('[[rule]]\nid = "cool"\nsumary = "s"\n'),
                                   EXIT_USAGE, ("rules.toml", "id='cool'",
                                                "unknown key 'sumary'",
                                                "did you mean 'summary'?")),
    "pack-override-of-mistyped-id": Case(
        with_pack('[[rule]]\nid = "stefan-boltzman"\nseverity = "warning"\n', "core"),
        EXIT_USAGE, ("rules.toml", "'stefan-boltzman' is not defined by an earlier pack",
                     "did you mean 'stefan-boltzmann'?")),
    "pack-unknown-name-in-expression": Case(
        with_pack('[[rule]]\nid = "hot-giant"\nsummary = "giants are cool"\n'
                  "when = \"phase in ('RGB', 'AGB')\"\nrequire = \"tef < 5800\"\n"),
        EXIT_USAGE, ("rules.toml", "id='hot-giant', require", "invalid expression",
                     "unknown quantity 'tef' (did you mean 'teff'?)"),
        detail_lines=2),
}


@pytest.mark.parametrize("case", CORPUS.values(), ids=CORPUS.keys())
def test_bad_input(case: Case, tmp_path: Path, capsys: pytest.CaptureFixture[str],
                   monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("CATCHECK_DEBUG", raising=False)
    monkeypatch.chdir(tmp_path)
    run = run_check(tmp_path, case, capsys)
    assert run.code == case.code, run.stderr
    assert "Traceback" not in run.stderr and "Traceback" not in run.stdout
    lines = run.stderr.splitlines()
    if case.error:
        assert len(lines) == 1 + case.detail_lines, run.stderr
        assert lines[0].startswith("catcheck: error: ")
        for part in case.error:
            assert part in lines[0], (part, lines[0])
        nothing_written(run)
    else:
        assert run.stderr == ""
        assert (run.out / "summary.json").is_file() and (run.out / "report.md").is_file()
    for part in case.stdout:
        assert part in run.stdout, (part, run.stdout)
    if case.check:
        case.check(run)


def test_the_expression_error_shows_the_expression_and_a_caret(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    run = run_check(tmp_path, CORPUS["pack-unknown-name-in-expression"], capsys)
    assert run.stderr.splitlines()[1:] == ["    tef < 5800", "    ^"]


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="needs POSIX permissions, which root ignores")
def test_read_only_output_directory(tmp_path: Path, capsys: pytest.CaptureFixture[str]
                                    ) -> None:
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        case = Case(lambda p: [str(catalogue(p)), "--out", str(locked / "report")], EXIT_USAGE)
        run = run_check(tmp_path, case, capsys)
    finally:
        locked.chmod(0o755)
    assert run.code == EXIT_USAGE
    assert "cannot write the report" in run.stderr and not any(locked.iterdir())


def damage(data: bytes, rng: np.random.Generator) -> bytes:
    """``data`` with bits flipped, a run overwritten or zeroed, or its end cut off."""
    damaged = bytearray(data)
    kind = rng.integers(4)
    start = int(rng.integers(len(data)))
    if kind == 0:
        for at in rng.integers(len(data), size=int(rng.integers(1, 20))):
            damaged[at] ^= 1 << int(rng.integers(8))
    elif kind == 1:
        run = rng.bytes(int(rng.integers(1, 500)))[: len(data) - start]
        damaged[start : start + len(run)] = run
    elif kind == 2:
        damaged[start : start + int(rng.integers(1, 500))] = b"\0" * min(500, len(data))
    else:
        del damaged[start:]
    return bytes(damaged)


def test_randomly_damaged_files_end_in_a_report_or_a_catalogue_error(tmp_path: Path) -> None:
    """Seeded damage to a Parquet file (several row groups, every column type the profile
    reads): each run writes a report or raises CatalogueError/ProfileError, nothing else.
    Found: a NaN deviation crashing the range rules; invalid UTF-8 ids."""
    frame = sun_like(300)
    frame.loc[::7, "logL"] = 400.0  # luminosity overflows to inf: inf/inf deviations
    good = write_catalogue(tmp_path, frame, row_group_size=100).read_bytes()
    path, rng = tmp_path / "cat.parquet", np.random.default_rng(2024)
    outcomes = {"report": 0, "error": 0}
    for _ in range(60):
        path.write_bytes(damage(good, rng))
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                catcheck.check(path, tmp_path / "profile.toml", out=tmp_path / "report")
            outcomes["report"] += 1
        except (CatalogueError, ProfileError) as err:
            assert err.render().isprintable()
            outcomes["error"] += 1
    assert min(outcomes.values()) > 0, outcomes  # both kinds of damage were exercised
    assert not list((tmp_path / "report").glob(".catcheck-staging-*"))


def test_duplicate_ids_compare_ids_as_text_and_count_nulls_apart() -> None:
    counter = DuplicateIds()
    counter.add(pa.array(["b", "a", "b", None, "é", "é"]))
    counter.add(pa.array([7, 8]))
    counter.add(pa.array(["7", "c", None]))
    assert counter.summary() == {"repeated_ids": 3, "rows_with_repeated_id": 6,
                                 "rows_without_id": 2, "examples": {"b": 2, "é": 2, "7": 2},
                                 "exact": True}


def test_duplicate_ids_beyond_the_memory_bound_are_estimated_from_a_hash_sample() -> None:
    """4,000 distinct ids, 1,000 of them twice, with room for 500 hashes: about right."""
    counter = DuplicateIds(max_tracked=500)
    for start in range(0, 4000, 1000):
        block = [f"LOCS-{i}" for i in range(start, start + 1000)]
        counter.add(pa.array(block + block[:250]))
    summary = counter.summary()
    assert not summary["exact"] and len(counter.hashes) <= 500
    assert 700 <= summary["repeated_ids"] <= 1300  # 1,000 expected; sample of ~1/8 to 1/16
    assert summary["rows_with_repeated_id"] == 2 * summary["repeated_ids"]
