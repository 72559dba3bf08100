"""Streaming reads of Parquet catalogues: a file, a directory dataset, a glob, several files.

Only the needed columns are read, in record batches of a bounded size, so memory does not
grow with the number of rows.  ``row`` numbers run across the files in the order given
(a directory's files in sorted path order).
"""

from __future__ import annotations

import glob
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from catcheck.errors import CatalogueError

DEFAULT_BATCH_ROWS = 262_144
_GLOB_CHARS = set("*?[")


def resolve_sources(sources: Sequence[str | Path]) -> list[Path]:
    """Expand files, directories and globs into an ordered list of Parquet files."""
    if not sources:
        raise CatalogueError("no catalogue given", fix="name a Parquet file, directory or glob")
    files: list[Path] = []
    for source in sources:
        text = str(source)
        if _GLOB_CHARS & set(text):
            matches = [Path(m) for m in sorted(glob.glob(text, recursive=True))
                       if Path(m).is_file()]
            if not matches:
                raise CatalogueError("the pattern matches no file", where=text,
                                     fix="check the path and quote the pattern")
            files.extend(matches)
            continue
        path = Path(text)
        if path.is_dir():
            found = sorted(p for p in path.rglob("*.parquet") if p.is_file()
                           and not any(part.startswith((".", "_")) for part in
                                       p.relative_to(path).parts))
            if not found:
                raise CatalogueError("the directory holds no .parquet file", where=text,
                                     fix="point at a Parquet file or a directory of them")
            files.extend(found)
        elif path.is_file():
            files.append(path)
        else:
            raise CatalogueError("catalogue not found", where=text,
                                 fix="check the path (a Parquet file, directory or glob)")
    return files


@dataclass(frozen=True)
class ParquetCatalogue:
    """An ordered set of Parquet files read as one table."""

    files: tuple[Path, ...]
    schema: pa.Schema
    num_rows: int

    @classmethod
    def open(cls, sources: Sequence[str | Path]) -> ParquetCatalogue:
        """Open the sources and read their footers (no data yet)."""
        files = resolve_sources(sources)
        schema = None
        rows = 0
        for path in files:
            meta = _metadata(path)
            rows += meta.num_rows
            if schema is None:
                schema = meta.schema.to_arrow_schema()
        assert schema is not None
        return cls(tuple(files), schema, rows)

    @property
    def description(self) -> str:
        """Short text naming the input, for messages and the summary."""
        if len(self.files) == 1:
            return str(self.files[0])
        return f"{self.files[0]} and {len(self.files) - 1} more files"

    def check_columns(self, columns: Sequence[str]) -> None:
        """Every file must have every needed column with the same type as the first file."""
        for path in self.files:
            schema = _metadata(path).schema.to_arrow_schema()
            for name in columns:
                if name not in schema.names:
                    raise CatalogueError(f"column {name!r} is missing from this file",
                                         where=str(path),
                                         fix="all files of a catalogue need the same columns")
                expected = self.schema.field(name).type
                if schema.field(name).type != expected:
                    raise CatalogueError(
                        f"column {name!r} is {schema.field(name).type} here but {expected} "
                        f"in {self.files[0]}", where=str(path),
                        fix="write every file of the catalogue with the same schema")

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS
                ) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` over all files in order, only ``columns``."""
        first_row = 0
        for path in self.files:
            try:
                reader = pq.ParquetFile(path, pre_buffer=False)
                for batch in reader.iter_batches(batch_size=batch_rows, columns=list(columns)):
                    yield first_row, batch
                    first_row += batch.num_rows
            except (OSError, pa.ArrowException) as exc:
                raise CatalogueError(f"cannot read the catalogue: {_first_line(exc)}",
                                     where=str(path), fix="is the file complete?") from None


def _metadata(path: Path) -> pq.FileMetaData:
    try:
        return pq.read_metadata(path)
    except FileNotFoundError:
        raise CatalogueError("catalogue not found", where=str(path)) from None
    except (OSError, pa.ArrowException) as exc:
        raise CatalogueError(f"not a readable Parquet file: {_first_line(exc)}",
                             where=str(path),
                             fix="is it complete and in Parquet format?") from None


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
