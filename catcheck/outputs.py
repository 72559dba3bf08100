"""Writing the report: flags in Parquet/CSV/JSON lines, summary.json, report.md, and the
optional per-row outputs (annotated catalogue, clean/flagged split).

Everything is written into a staging directory inside the output directory and moved into
place only when the whole report is complete, so an interrupted or failed run leaves the
previous report intact and never half a new one.  Optional files of an older run that this
run did not write (an annotated catalogue, a split) are removed on commit, so the directory
never mixes two runs.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager, suppress
from pathlib import Path
from types import TracebackType
from typing import Any

import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from catcheck.errors import OutputError, UsageError
from catcheck.flags import FLAG_SCHEMA

FORMATS = ("parquet", "csv", "jsonl")
#: files written only when asked for (--annotate, --split); removed when a run does not ask
OPTIONAL_FILES = ("annotated.parquet", "clean.parquet", "flagged.parquet",
                  # the visual report (plot extra; a figure needs its quantities)
                  "report.html", "hr_diagram.png", "kiel_diagram.png")


def write_file_atomically(path: str | Path, data: bytes, what: str, option: str) -> Path:
    """Write ``data`` to ``path`` through a temporary file beside it and :func:`os.replace`.

    The parent directory is created if needed.  A failure leaves ``path`` as it was and
    becomes one :class:`OutputError` naming ``what`` was being written and the ``option``
    that chose the path.
    """
    path = Path(path)
    tmp = path.parent / f".{path.name}.{os.getpid()}.tmp"
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp.write_bytes(data)
        os.replace(tmp, path)
    except OSError as exc:
        with contextlib.suppress(OSError):
            tmp.unlink(missing_ok=True)
        raise OutputError(f"cannot write the {what}: {exc.strerror or exc}", where=str(path),
                          fix=f"choose a writable path with {option}") from None
    return path


def refuse_inputs_among_outputs(out_dir: str | Path, inputs: Sequence[Path]) -> None:
    """Stop before a run whose report would overwrite or remove one of its own inputs.

    A report directory holds files catcheck writes, replaces and (when not asked for
    again) removes: checking ``report/clean.parquet`` into ``report/`` would lose it.
    """
    out = Path(out_dir).resolve()
    managed = {f"flags.{name}" for name in FORMATS} | {"summary.json", "report.md",
                                                        *OPTIONAL_FILES}
    for path in inputs:
        path = Path(path).resolve()
        if path.parent == out and path.name in managed:
            raise UsageError("the catalogue is a file of the report directory, which this "
                             "run would replace or remove", where=str(path),
                             fix="copy it elsewhere or choose another --out")


class ReportDirectory:
    """A staging area that becomes the report in ``out_dir`` on :meth:`commit`."""

    def __init__(self, out_dir: str | Path, flags_format: str = "parquet") -> None:
        if flags_format not in FORMATS:
            raise UsageError(f"--format must be one of {', '.join(FORMATS)}, "
                             f"got {flags_format!r}")
        self.out_dir = Path(out_dir)
        self.flags_format = flags_format
        self._created = not self.out_dir.exists()  # removed again if the run fails
        try:
            self.out_dir.mkdir(parents=True, exist_ok=True)
            self.staging = Path(tempfile.mkdtemp(prefix=".catcheck-staging-", dir=self.out_dir))
        except OSError as exc:
            raise OutputError(f"cannot write the report: {exc.strerror or exc}",
                              where=str(self.out_dir),
                              fix="choose a writable directory with --out") from None
        self._writer: pq.ParquetWriter | None = None
        self._flags_path = self.staging / "flags.parquet"
        self._flags_complete = False

    def __enter__(self) -> ReportDirectory:
        return self

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.discard()

    def add_flags(self, flags: pa.Table) -> None:
        """Append a batch of flag records (streamed to disk)."""
        if self._flags_complete:
            raise RuntimeError("flags added after flags_file() closed them")
        with self._writing():
            if self._writer is None:
                # messages and ids rarely repeat: dictionary-encoding them only to fall
                # back costs time (writing 100k demo flags: 69 ms, 46 ms without)
                self._writer = pq.ParquetWriter(self._flags_path, FLAG_SCHEMA,
                                                use_dictionary=["rule", "severity"])
            self._writer.write_table(flags)

    def flags_file(self) -> Path:
        """The staged flags in Parquet (closed and complete; later calls return the same file)."""
        if self._flags_complete:
            return self._flags_path
        with self._writing():
            if self._writer is None:
                pq.write_table(FLAG_SCHEMA.empty_table(), self._flags_path)
            else:
                self._writer.close()
        self._writer = None
        self._flags_complete = True
        return self._flags_path

    @contextmanager
    def parquet_writers(self, names: Sequence[str], schema: pa.Schema
                        ) -> Iterator[dict[str, pq.ParquetWriter]]:
        """Staged Parquet files of one schema, written batch by batch; closed on exit.

        A file that receives no batch is still a valid Parquet file with no rows.  Only
        text, dictionary and unsigned integer columns are dictionary-encoded: measurements
        rarely repeat, and trying them first made writing a catalogue copy about 3 times
        slower (and its file larger) on the demo catalogue.
        """
        writers: dict[str, pq.ParquetWriter] = {}
        encoded = [field.name for field in schema if _repeats(field.type)]
        with self._writing():
            try:
                for name in names:
                    writers[name] = pq.ParquetWriter(self.staging / name, schema,
                                                     use_dictionary=encoded)
                yield writers
            finally:
                for writer in writers.values():
                    writer.close()

    def write_text(self, name: str, text: str) -> None:
        """Stage a text file."""
        with self._writing():
            (self.staging / name).write_text(text, encoding="utf-8")

    def write_bytes(self, name: str, data: bytes) -> None:
        """Stage a binary file (a figure)."""
        with self._writing():
            (self.staging / name).write_bytes(data)

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
            for optional in OPTIONAL_FILES:  # not asked for this time: from an older run
                if not (self.staging / optional).exists():
                    (self.out_dir / optional).unlink(missing_ok=True)
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
        """Remove the staging area (a no-op after commit), and the output directory if this
        run created it and it is still empty (a failed first run leaves nothing behind)."""
        if self._writer is not None:
            with suppress(OSError):  # a full disk fails the close too; the file goes anyway
                self._writer.close()
            self._writer = None
        shutil.rmtree(self.staging, ignore_errors=True)
        if self._created:
            with suppress(OSError):  # not empty: a committed report, or files of others
                self.out_dir.rmdir()


def _repeats(kind: pa.DataType) -> bool:
    """Columns whose values usually repeat: labels, identifiers of groups, bit masks."""
    return (pa.types.is_string(kind) or pa.types.is_large_string(kind)
            or pa.types.is_dictionary(kind) or pa.types.is_unsigned_integer(kind))


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


def read_flags(path: Path, columns: Sequence[str] | None = None) -> pa.Table:
    """Read a flags file written by :class:`ReportDirectory`, in any of its formats.

    ``columns`` picks some of the flags columns (all by default).
    """
    if path.suffix == ".parquet":
        return pq.read_table(path, columns=None if columns is None else list(columns))
    if path.suffix == ".csv":
        table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(
            column_types=FLAG_SCHEMA)).cast(FLAG_SCHEMA)
    else:
        with open(path, encoding="utf-8") as lines:
            records = [json.loads(line) for line in lines if line.strip()]
        table = pa.Table.from_pylist(records, schema=FLAG_SCHEMA)
    return table if columns is None else table.select(list(columns))
