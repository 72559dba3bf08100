"""The library entry points: :func:`check` for files and :func:`check_frame` for DataFrames."""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa

from catcheck import __version__
from catcheck.engine import Catalogue, RunStats, run_rules
from catcheck.flags import FLAG_SCHEMA
from catcheck.gate import Gate
from catcheck.outputs import ReportDirectory, read_flags
from catcheck.packs import DEFAULT_PACKS, load_rules
from catcheck.profile import Profile, load_profile
from catcheck.reader import DEFAULT_BATCH_ROWS, ParquetCatalogue
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

    def batches(self, columns: Sequence[str], batch_rows: int
                ) -> Iterator[tuple[int, pa.RecordBatch]]:
        first = 0
        for batch in self.table.select(list(columns)).to_batches(max_chunksize=batch_rows):
            yield first, batch
            first += batch.num_rows


def check(catalogue: PathLike | Sequence[PathLike], profile: PathLike | Profile,
          rules: Sequence[PathLike] = DEFAULT_PACKS, *, out: PathLike | None = None,
          fail_on: str = "error", max_flagged_fraction: float | None = None,
          flags_format: str = "parquet", batch_rows: int = DEFAULT_BATCH_ROWS,
          workers: int = 1, progress: Callable[[int], None] | None = None) -> CheckResult:
    """Check a Parquet catalogue (file, directory, glob or list of them).

    With ``out``, the report (flags, summary.json, report.md) is written there atomically;
    without it, everything stays in memory.  ``workers`` batches are checked at once.
    """
    sources = [catalogue] if isinstance(catalogue, str | Path) else list(catalogue)
    return _run(ParquetCatalogue.open(sources), profile, rules, out, fail_on,
                max_flagged_fraction, flags_format, batch_rows, workers, progress)


def check_frame(frame: pd.DataFrame, profile: PathLike | Profile,
                rules: Sequence[PathLike] = DEFAULT_PACKS, *, out: PathLike | None = None,
                fail_on: str = "error", max_flagged_fraction: float | None = None,
                batch_rows: int = DEFAULT_BATCH_ROWS, workers: int = 1) -> CheckResult:
    """Check an in-memory pandas DataFrame; rows are numbered by position."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    return _run(TableCatalogue(table), profile, rules, out, fail_on, max_flagged_fraction,
                "parquet", batch_rows, workers, None)


def _run(catalogue: Catalogue, profile: PathLike | Profile, rules: Sequence[PathLike],
         out: PathLike | None, fail_on: str, max_flagged_fraction: float | None,
         flags_format: str, batch_rows: int, workers: int,
         progress: Callable[[int], None] | None) -> CheckResult:
    started = time.perf_counter()
    gate = Gate(fail_on, max_flagged_fraction)
    profile = profile if isinstance(profile, Profile) else load_profile(profile)
    loaded = load_rules(rules)
    if out is None:
        collected: list[pa.Table] = []
        stats = run_rules(catalogue, profile, loaded, collected.append, batch_rows, progress,
                          workers)
        flags = pa.concat_tables([FLAG_SCHEMA.empty_table(), *collected])
        summary = _summary(catalogue, profile, rules, stats, gate, started)
        return CheckResult(summary, flags)
    with ReportDirectory(out, flags_format) as report:
        stats = run_rules(catalogue, profile, loaded, report.add_flags, batch_rows, progress,
                          workers)
        summary = _summary(catalogue, profile, rules, stats, gate, started)
        report.write_json("summary.json", summary)
        examples = {s.rule.id: s.examples for s in stats.rules}
        report.write_text("report.md", markdown_report(summary, examples))
        written = report.commit()
    return CheckResult(summary, written[f"flags.{flags_format}"])  # read only when asked


def _summary(catalogue: Catalogue, profile: Profile, packs: Sequence[PathLike],
             stats: RunStats, gate: Gate, started: float) -> dict[str, Any]:
    passed, reason = gate.verdict(stats.rows, stats.flags_by_severity, stats.rows_by_severity)
    return {
        "tool": "catcheck",
        "version": __version__,
        "input": catalogue.description,
        "profile": profile.source,
        "packs": [str(p) for p in packs],
        "rows": stats.rows,
        "rules": [s.as_dict() for s in stats.rules],
        "flagged_rows": stats.flagged_rows,
        "flags_by_severity": stats.flags_by_severity,
        "rows_by_severity": stats.rows_by_severity,
        "unmapped_phase_labels": stats.unmapped_phase_labels,
        "gate": {
            "passed": passed,
            "fail_on": gate.fail_on,
            "max_flagged_fraction": gate.max_flagged_fraction,
            "reason": reason,
        },
        "elapsed_seconds": round(time.perf_counter() - started, 3),
    }
