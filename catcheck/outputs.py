"""Writing the report: flags in Parquet/CSV/JSON lines, summary.json, report.md.

Everything is written into a staging directory inside the output directory and moved into
place only when the whole report is complete, so an interrupted or failed run leaves the
previous report intact and never half a new one.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from types import TracebackType
from typing import Any

import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from catcheck.errors import OutputError, UsageError
from catcheck.flags import FLAG_SCHEMA

FORMATS = ("parquet", "csv", "jsonl")


class ReportDirectory:
    """A staging area that becomes the report in ``out_dir`` on :meth:`commit`."""

    def __init__(self, out_dir: str | Path, flags_format: str = "parquet") -> None:
        if flags_format not in FORMATS:
            raise UsageError(f"--format must be one of {', '.join(FORMATS)}, "
                             f"got {flags_format!r}")
        self.out_dir = Path(out_dir)
        self.flags_format = flags_format
        try:
            self.out_dir.mkdir(parents=True, exist_ok=True)
            self.staging = Path(tempfile.mkdtemp(prefix=".catcheck-staging-", dir=self.out_dir))
        except OSError as exc:
            raise OutputError(f"cannot write the report: {exc.strerror or exc}",
                              where=str(self.out_dir),
                              fix="choose a writable directory with --out") from None
        self._writer: pq.ParquetWriter | None = None
        self._flags_path = self.staging / "flags.parquet"

    def __enter__(self) -> ReportDirectory:
        return self

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.discard()

    def add_flags(self, flags: pa.Table) -> None:
        """Append a batch of flag records (streamed to disk)."""
        with self._writing():
            if self._writer is None:
                self._writer = pq.ParquetWriter(self._flags_path, FLAG_SCHEMA)
            self._writer.write_table(flags)

    def flags_file(self) -> Path:
        """The staged flags in Parquet (closed and complete)."""
        with self._writing():
            if self._writer is None:
                pq.write_table(FLAG_SCHEMA.empty_table(), self._flags_path)
            else:
                self._writer.close()
        self._writer = None
        return self._flags_path

    def write_text(self, name: str, text: str) -> None:
        """Stage a text file."""
        with self._writing():
            (self.staging / name).write_text(text, encoding="utf-8")

    @contextmanager
    def _writing(self) -> Iterator[None]:
        """Turn a failed write (disk full, permissions) into one clear error."""
        try:
            yield
        except OSError as exc:
            raise OutputError(f"cannot write the report: {exc.strerror or exc}",
                              where=str(self.out_dir),
                              fix="free some space or choose another --out") from None

    def write_json(self, name: str, data: Any) -> None:
        """Stage a JSON file (stable key order as given, 2-space indent)."""
        self.write_text(name, json.dumps(data, indent=2, allow_nan=False) + "\n")

    def commit(self) -> dict[str, Path]:
        """Move the staged files into the output directory; returns their final paths."""
        parquet = self.flags_file()
        name = f"flags.{self.flags_format}"
        if self.flags_format != "parquet":
            with self._writing():
                _convert_flags(parquet, self.staging / name, self.flags_format)
            parquet.unlink()
        written = {}
        try:
            for other in FORMATS:  # a flags file of another format is from an older run
                if other != self.flags_format:
                    (self.out_dir / f"flags.{other}").unlink(missing_ok=True)
            for path in sorted(self.staging.iterdir()):
                target = self.out_dir / path.name
                os.replace(path, target)
                written[path.name] = target
        except OSError as exc:
            raise OutputError(f"cannot write the report: {exc}", where=str(self.out_dir)
                              ) from None
        finally:
            self.discard()
        return written

    def discard(self) -> None:
        """Remove the staging area (a no-op after commit)."""
        if self._writer is not None:
            self._writer.close()
            self._writer = None
        shutil.rmtree(self.staging, ignore_errors=True)


def _convert_flags(parquet: Path, target: Path, flags_format: str) -> None:
    source = pq.ParquetFile(parquet)
    if flags_format == "csv":
        with pacsv.CSVWriter(target, FLAG_SCHEMA) as writer:
            for batch in source.iter_batches():
                writer.write_batch(batch)
        return
    with open(target, "w", encoding="utf-8") as out:
        for batch in source.iter_batches():
            for record in batch.to_pylist():
                out.write(json.dumps({k: _json_value(v) for k, v in record.items()}) + "\n")


def _json_value(value: Any) -> Any:
    if isinstance(value, float) and value != value:
        return None
    if isinstance(value, float) and value in (float("inf"), float("-inf")):
        return None
    return value


def read_flags(path: Path) -> pa.Table:
    """Read a flags file written by :class:`ReportDirectory`, in any of its formats."""
    if path.suffix == ".parquet":
        return pq.read_table(path)
    if path.suffix == ".csv":
        return pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(
            column_types=FLAG_SCHEMA)).cast(FLAG_SCHEMA)
    with open(path, encoding="utf-8") as lines:
        records = [json.loads(line) for line in lines if line.strip()]
    return pa.Table.from_pylist(records, schema=FLAG_SCHEMA)
