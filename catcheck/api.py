"""The library entry points: :func:`check` for files and :func:`check_frame` for DataFrames."""

from __future__ import annotations

import functools
import time
from collections.abc import Callable, Collection, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from catcheck import __version__
from catcheck.annotate import SPLIT_SEVERITY, RowOutputs, flagged_mask
from catcheck.baseline import (
    COMPARED_COLUMNS,
    Comparison,
    compare_flags,
    read_flags_file,
    summary_entry,
)
from catcheck.checks.unit_blunders import bind_declared_units
from catcheck.concurrency import ForkedCall
from catcheck.engine import Catalogue, RunStats, run_rules
from catcheck.errors import UsageError
from catcheck.findings import FlagStatistics, catalogue_findings
from catcheck.flags import FLAG_SCHEMA
from catcheck.formats import open_catalogue
from catcheck.gate import Gate, severity_counts
from catcheck.html_report import VisualReport
from catcheck.identifiers import duplicate_ids
from catcheck.junit import check_junit_path, junit_xml, write_junit
from catcheck.outputs import ReportDirectory, read_flags, refuse_inputs_among_outputs
from catcheck.packs import DEFAULT_PACKS, load_rules
from catcheck.profile import Profile, load_profile
from catcheck.progress import SizedProgress
from catcheck.reader import DEFAULT_BATCH_ROWS
from catcheck.report import markdown_report

PathLike = str | Path


@dataclass(frozen=True)
class CheckResult:
    """The outcome of a check: the flags, the summary (as summary.json) and the verdict."""

    summary: dict[str, Any]
    _flags: pa.Table | Path

    @property
    def flags(self) -> pd.DataFrame:
        """The flags table as a pandas DataFrame (columns as in DESIGN.md)."""
        table = self._flags if isinstance(self._flags, pa.Table) else read_flags(self._flags)
        return table.to_pandas()

    @property
    def passed(self) -> bool:
        """True when the gate passed."""
        return bool(self.summary["gate"]["passed"])

    def mask(self, severity: str = SPLIT_SEVERITY, rules: Sequence[str] | None = None
             ) -> np.ndarray:
        """Boolean array over the input rows (by position): True where the row has a flag.

        Only flags at or above ``severity`` count (``"info"``: any flag; the default
        ``"warning"``: error or warning flags, the rows ``--split`` puts in flagged.parquet);
        ``rules`` restricts them to some rule ids.  An unknown severity or rule id raises
        :class:`~catcheck.errors.UsageError`.
        """
        columns = ["row", "rule", "severity"]
        table = (self._flags.select(columns) if isinstance(self._flags, pa.Table)
                 else read_flags(self._flags, columns))
        rule_ids = [entry["id"] for entry in self.summary["rules"]]
        return flagged_mask(table, self.summary["rows"], rule_ids, severity, rules)

    def filter(self, frame: pd.DataFrame | pa.Table, severity: str = SPLIT_SEVERITY,
               rules: Sequence[str] | None = None, keep: str = "clean"
               ) -> pd.DataFrame | pa.Table:
        """The rows of ``frame`` (the checked input, rows aligned by position) to keep.

        ``keep="clean"`` returns the rows without a flag that :meth:`mask` counts,
        ``keep="flagged"`` the others; a DataFrame keeps its index.
        """
        if keep not in ("clean", "flagged"):
            raise UsageError(f"keep must be 'clean' or 'flagged', got {keep!r}")
        if len(frame) != self.summary["rows"]:
            raise UsageError(f"the frame has {len(frame)} rows but the check read "
                             f"{self.summary['rows']}",
                             fix="filter the table that was checked (rows align by position)")
        selected = self.mask(severity, rules)
        if keep == "clean":
            selected = ~selected
        if isinstance(frame, pa.Table):
            return frame.filter(pa.array(selected))
        return frame[selected]


@dataclass(frozen=True)
class TableCatalogue:
    """An in-memory Arrow table read like a catalogue."""

    table: pa.Table
    description: str = "<DataFrame>"

    @property
    def schema(self) -> pa.Schema:
        return self.table.schema

    @property
    def num_rows(self) -> int:
        return self.table.num_rows

    def check_columns(self, columns: Sequence[str]) -> None:
        """Columns were checked against the schema already; one table has one schema."""

    def batches(self, columns: Sequence[str], batch_rows: int, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """The table's rows in batches, columns as they are (``dictionary`` is ignored)."""
        first = 0
        for batch in self.table.select(list(columns)).to_batches(max_chunksize=batch_rows):
            yield first, batch
            first += batch.num_rows

    def full_schema(self) -> pa.Schema:
        """Every column's schema (for the annotated outputs)."""
        return self.table.schema

    def full_batches(self, batch_rows: int) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` with every column."""
        return self.batches(self.table.schema.names, batch_rows)


def check(catalogue: PathLike | Sequence[PathLike], profile: PathLike | Profile,
          rules: Sequence[PathLike] = DEFAULT_PACKS, *, out: PathLike | None = None,
          fail_on: str = "error", max_flagged_fraction: float | None = None,
          flags_format: str = "parquet", batch_rows: int = DEFAULT_BATCH_ROWS,
          workers: int = 1, progress: Callable[[int], None] | None = None,
          annotate: bool = False, split: bool = False, engine: str = "local",
          scheduler: str | None = None, baseline: PathLike | None = None,
          junit: PathLike | None = None) -> CheckResult:
    """Check a catalogue: Parquet, CSV/TSV, FITS, VOTable or ECSV (file, directory, glob or
    list of them; formats in :mod:`catcheck.formats`).

    With ``out``, the report (flags, summary.json, report.md) is written there atomically;
    without it, everything stays in memory.  ``workers`` batches are checked at once.
    ``annotate`` adds ``annotated.parquet`` (the input plus ``qc_flags`` and ``qc_severity``)
    and ``split`` adds ``clean.parquet`` and ``flagged.parquet`` to the report (both need
    ``out``; see :mod:`catcheck.annotate`).
    ``engine="dask"`` runs the checks on a dask cluster (:mod:`catcheck.dask_engine`): the
    scheduler at ``scheduler`` (``tcp://host:port``), or else a local cluster of ``workers``
    processes; flags and summary are the local engine's.
    ``baseline`` (a previous release's flags file) makes the gate count only new flags
    against ``fail_on`` and adds the comparison to the summary (:mod:`catcheck.baseline`);
    ``junit`` writes a JUnit XML report there when the run completes (:mod:`catcheck.junit`).
    ``progress`` is called with the rows of each checked batch; one that also has
    ``start(total_rows)`` (:class:`catcheck.progress.SizedProgress`, e.g. the command
    line's progress bar) is told the catalogue's row count first.  With the ``plot`` extra
    the report also holds ``report.html`` and its figures (:mod:`catcheck.html_report`).
    """
    sources = [catalogue] if isinstance(catalogue, str | Path) else list(catalogue)
    return _run(open_catalogue(sources), profile, rules, out, fail_on,
                max_flagged_fraction, flags_format, batch_rows, workers, progress,
                annotate=annotate, split=split, engine=engine, scheduler=scheduler,
                baseline=baseline, junit=junit)


def check_frame(frame: pd.DataFrame, profile: PathLike | Profile,
                rules: Sequence[PathLike] = DEFAULT_PACKS, *, out: PathLike | None = None,
                fail_on: str = "error", max_flagged_fraction: float | None = None,
                batch_rows: int = DEFAULT_BATCH_ROWS, workers: int = 1,
                annotate: bool = False, split: bool = False,
                baseline: PathLike | None = None, junit: PathLike | None = None
                ) -> CheckResult:
    """Check an in-memory pandas DataFrame; rows are numbered by position.

    ``annotate`` and ``split`` write the frame's annotated copy and its clean/flagged split
    into ``out`` as for :func:`check` (the index is not written; rows keep their order);
    ``baseline`` and ``junit`` as for :func:`check`.
    """
    table = pa.Table.from_pandas(frame, preserve_index=False)
    return _run(TableCatalogue(table), profile, rules, out, fail_on, max_flagged_fraction,
                "parquet", batch_rows, workers, None, annotate=annotate, split=split,
                baseline=baseline, junit=junit)


def _run(catalogue: Catalogue, profile: PathLike | Profile,
         rules: Sequence[PathLike],
         out: PathLike | None, fail_on: str, max_flagged_fraction: float | None,
         flags_format: str, batch_rows: int, workers: int,
         progress: Callable[[int], None] | None, *, annotate: bool = False,
         split: bool = False, engine: str = "local",
         scheduler: str | None = None, baseline: PathLike | None = None,
         junit: PathLike | None = None) -> CheckResult:
    started = time.perf_counter()
    gate = Gate(fail_on, max_flagged_fraction)
    old_flags = None if baseline is None else read_flags_file(baseline, columns=("id", "rule"))
    run_checks = _engine(engine, scheduler)
    if (annotate or split) and out is None:
        raise UsageError("annotate and split write files, but no output directory was given",
                         fix="give out=DIR, or use result.mask() and result.filter() in memory")
    profile = profile if isinstance(profile, Profile) else load_profile(profile)
    loaded = bind_declared_units(load_rules(rules), profile)
    flag_stats = FlagStatistics()  # catalogue-level findings, worst flags for report.html
    if isinstance(progress, SizedProgress):
        progress.start(catalogue.num_rows)
    row_outputs = RowOutputs.plan(catalogue, [rule.id for rule in loaded],
                                  annotate=annotate, split=split)
    if out is not None:
        refuse_inputs_among_outputs(out, _input_files(catalogue))
    if junit is not None:
        check_junit_path(junit)
    repeated_ids = _count_repeated_ids(catalogue, profile)
    try:
        if out is None:
            collected: list[pa.Table] = []
            stats = run_checks(catalogue, profile, loaded, flag_stats.feeding(collected.append),
                               batch_rows, progress, workers)
            flags = pa.concat_tables([FLAG_SCHEMA.empty_table(), *collected])
            comparison = _compare(old_flags, flags.select(list(COMPARED_COLUMNS)), stats)
            summary = _summary(catalogue, profile, rules, stats, gate, started, engine,
                               repeated_ids.result(), comparison, baseline)
            summary["catalogue_findings"] = catalogue_findings(stats.rules, profile, flag_stats)
            if junit is not None:
                write_junit(junit, junit_xml(summary, _examples(stats), _new_examples(comparison)))
            return CheckResult(summary, flags)
        with ReportDirectory(out, flags_format) as report:
            visual = VisualReport(profile, observing=engine == "local")
            run = (functools.partial(run_checks, observers=visual.observers) if visual.observers
                   else run_checks)
            stats = run(catalogue, profile, loaded, flag_stats.feeding(report.add_flags),
                        batch_rows, progress, workers)
            row_entries = (row_outputs.write(catalogue, report.flags_file(), report, batch_rows)
                           if row_outputs else {})
            comparison = None if old_flags is None else _compare(
                old_flags, read_flags(report.flags_file(), COMPARED_COLUMNS), stats)
            summary = _summary(catalogue, profile, rules, stats, gate, started, engine,
                               repeated_ids.result(), comparison, baseline)
            summary.update(row_entries)
            summary["catalogue_findings"] = catalogue_findings(stats.rules, profile, flag_stats)
            summary["visual_report"] = visual.note()
            report.write_json("summary.json", summary)
            examples = _examples(stats)
            report.write_text("report.md", markdown_report(summary, examples,
                                                           _new_examples(comparison)))
            visual.write(report, summary, flag_stats)
            document = None if junit is None else junit_xml(summary, examples,
                                                              _new_examples(comparison))
            written = report.commit()
        if document is not None:
            write_junit(junit, document)
        return CheckResult(summary, written[f"flags.{flags_format}"])  # read only when asked
    finally:
        repeated_ids.cancel()


def _input_files(catalogue: Any) -> list[Path]:
    """The files a catalogue reads (none for an in-memory table)."""
    if hasattr(catalogue, "parts"):  # a joined catalogue (formats.JoinedCatalogue)
        return [f for part in catalogue.parts for f in _input_files(part.catalogue)]
    if hasattr(catalogue, "files"):
        return list(catalogue.files)
    return [catalogue.path] if hasattr(catalogue, "path") else []


#: catalogues at least this long have their ids counted in a forked process during the run
BACKGROUND_ID_COUNT_ROWS = 1_000_000


def _count_repeated_ids(catalogue: Catalogue, profile: Profile) -> ForkedCall:
    """Count repeated ids (a second read of the id column only) beside the checks.

    On a large catalogue this runs in a forked process while the rules run; a small one
    is counted when the summary asks (a fork would cost more than the count).
    """
    def count() -> dict[str, Any]:
        return duplicate_ids(catalogue, profile.id_column)

    if catalogue.num_rows < BACKGROUND_ID_COUNT_ROWS:
        return ForkedCall(count, fork=False)
    return ForkedCall(count)


def _compare(old_flags: pa.Table | None, new_flags: pa.Table, stats: RunStats
             ) -> Comparison | None:
    """The run's flags against the baseline's (None without a baseline)."""
    if old_flags is None:
        return None
    return compare_flags(old_flags, new_flags,
                         [s.rule.id for s in stats.rules if s.status == "ran"])


def _examples(stats: RunStats) -> dict[str, list[dict[str, Any]]]:
    return {s.rule.id: s.examples for s in stats.rules}


def _new_examples(comparison: Comparison | None) -> dict[str, list[dict[str, Any]]] | None:
    return None if comparison is None else comparison.new_examples


def _engine(engine: str, scheduler: str | None) -> Callable[..., RunStats]:
    """The run function of ``engine``: :func:`run_rules` (local) or its dask twin."""
    if engine == "dask":
        from catcheck.dask_engine import run_rules_on_dask

        return functools.partial(run_rules_on_dask, scheduler=scheduler)
    if engine != "local":
        raise UsageError(f"engine must be 'local' or 'dask', got {engine!r}")
    if scheduler is not None:
        raise UsageError("a scheduler address is for the dask engine",
                         fix="add --engine dask (engine='dask')")
    return run_rules


def _summary(catalogue: Catalogue, profile: Profile, packs: Sequence[PathLike],
             stats: RunStats, gate: Gate, started: float, engine: str,
             repeated_ids: dict[str, Any], comparison: Comparison | None = None,
             baseline: PathLike | None = None) -> dict[str, Any]:
    rules = [s.as_dict() for s in stats.rules]
    counted = {rule["id"]: (severity_counts(rule) if comparison is None
                            else comparison.new_by_severity.get(rule["id"], {}))
               for rule in rules}  # in the run's rule order
    verdict = gate.verdict(stats.rows, stats.rows_by_severity, counted,
                           new_only=comparison is not None)
    history = {} if comparison is None else {"baseline": summary_entry(comparison, baseline)}
    return {
        "tool": "catcheck",
        "version": __version__,
        "input": catalogue.description,
        "profile": profile.source,
        "packs": [str(p) for p in packs],
        "engine": engine,
        "rows": stats.rows,
        "rules": rules,
        "flagged_rows": stats.flagged_rows,
        "flags_by_severity": stats.flags_by_severity,
        "rows_by_severity": stats.rows_by_severity,
        "unmapped_phase_labels": stats.unmapped_phase_labels,
        "duplicate_ids": repeated_ids,  # a warning, never gated
        **history,
        "gate": {
            "passed": verdict.passed,
            "fail_on": gate.fail_on,
            "max_flagged_fraction": gate.max_flagged_fraction,
            "counts": "new flags" if comparison is not None else "all flags",
            "reason": verdict.reason,
            "failing_rules": verdict.failing_rules,
        },
        "elapsed_seconds": round(time.perf_counter() - started, 3),
    }
