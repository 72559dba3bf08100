"""Streaming reads of Parquet catalogues: a file, a directory dataset, a glob, several files.

Only the needed columns are read, in record batches of a bounded size, so memory does not
grow with the number of rows.  ``row`` numbers run across the files in the order given
(a directory's files in sorted path order).
"""

from __future__ import annotations

import glob
from collections.abc import Collection, Iterator, Sequence
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
        raise CatalogueError("no catalogue given", fix="name a catalogue file, directory or glob")
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
                                 fix="check the path (a catalogue file, directory or glob)")
    return files


@dataclass(frozen=True)
class ParquetCatalogue:
    """An ordered set of Parquet files read as one table."""

    files: tuple[Path, ...]
    schema: pa.Schema
    num_rows: int

    @classmethod
    def open(cls, sources: Sequence[str | Path]) -> ParquetCatalogue:
        """Open the sources and read their footers (no data yet).

        ``schema`` is the first file's, except that a column with no values at all there
        (Arrow type ``null``) takes its type from the first later file that has values.
        """
        files = resolve_sources(sources)
        schema = None
        rows = 0
        for path in files:
            meta = _metadata(path)
            rows += meta.num_rows
            file_schema = meta.schema.to_arrow_schema()
            if schema is None:
                schema = file_schema
                continue
            for i, field in enumerate(schema):
                if pa.types.is_null(field.type) and field.name in file_schema.names:
                    schema = schema.set(i, field.with_type(file_schema.field(field.name).type))
        assert schema is not None
        return cls(tuple(files), schema, rows)

    @property
    def description(self) -> str:
        """Short text naming the input, for messages and the summary."""
        if len(self.files) == 1:
            return str(self.files[0])
        return f"{self.files[0]} and {len(self.files) - 1} more files"

    def check_columns(self, columns: Sequence[str]) -> None:
        """Every file must have every needed column, of a type read the same way.

        Types may differ only where catcheck reads them alike: integers, floats and
        decimals (all become float64 or text the same way), the string types, and a
        column with no values in one file (type ``null``).
        """
        for path in self.files:
            schema = _metadata(path).schema.to_arrow_schema()
            for name in columns:
                if name not in schema.names:
                    raise CatalogueError(f"column {name!r} is missing from this file",
                                         where=str(path),
                                         fix="all files of a catalogue need the same columns")
                expected = self.schema.field(name).type
                if not _read_alike(schema.field(name).type, expected):
                    raise CatalogueError(
                        f"column {name!r} is {schema.field(name).type} here but {expected} "
                        f"in {self.files[0]}", where=str(path),
                        fix="write every file of the catalogue with the same schema")

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` over all files in order, only ``columns``; text
        columns in ``dictionary`` come as Arrow dictionaries (see :func:`_file_batches`)."""
        first_row = 0
        for path in self.files:
            for batch in _file_batches(path, columns, batch_rows, dictionary=dictionary):
                yield first_row, batch
                first_row += batch.num_rows

    def pieces(self) -> list[ParquetPiece]:
        """The catalogue cut at row-group boundaries, each piece knowing its first row.

        Pieces can be read independently (by worker processes) and together give the
        same batches, row numbers included, as :meth:`batches`.
        """
        pieces, first_row = [], 0
        for path in self.files:
            meta = _metadata(path)
            for group in range(meta.num_row_groups):
                pieces.append(ParquetPiece(path, group, first_row))
                first_row += meta.row_group(group).num_rows
        return pieces

    def full_schema(self) -> pa.Schema:
        """The schema of all columns, the same for every file (for the annotated outputs).

        Files may order their columns differently and differ in metadata: the first file's
        column order, schema metadata and field metadata are kept, and a column is nullable
        when it is in any file.  A column missing from a file, or of another type there, is
        an error: catcheck never invents values or converts types in a copy of a catalogue.
        """
        first = _arrow_schema(self.files[0])
        nullable = {field.name: field.nullable for field in first}
        for path in self.files[1:]:
            schema = _arrow_schema(path)
            missing = [name for name in first.names if name not in schema.names]
            extra = [name for name in schema.names if name not in first.names]
            if missing or extra:
                what = (f"columns {missing} of {self.files[0]} are missing here" if missing
                        else f"columns {extra} are not in {self.files[0]}")
                raise CatalogueError(what, where=str(path),
                                     fix="an annotated or split copy needs every file of the "
                                         "catalogue to have the same columns")
            for field in first:
                other = schema.field(field.name)
                if other.type != field.type:
                    raise CatalogueError(
                        f"column {field.name!r} is {other.type} here but {field.type} in "
                        f"{self.files[0]}", where=str(path),
                        fix="write every file of the catalogue with the same schema")
                nullable[field.name] |= other.nullable
        return pa.schema([field.with_nullable(nullable[field.name]) for field in first],
                         metadata=first.metadata)

    def full_batches(self, batch_rows: int = DEFAULT_BATCH_ROWS
                     ) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` with every column, all batches of :meth:`full_schema`."""
        schema = self.full_schema()
        for first_row, batch in self.batches(schema.names, batch_rows):
            yield first_row, pa.RecordBatch.from_arrays(batch.columns, schema=schema)


@dataclass(frozen=True)
class ParquetPiece:
    """One row group of one file of a catalogue: a unit of work for a worker process."""

    path: Path
    row_group: int
    first_row: int

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` over the row group, only ``columns`` (text columns
        in ``dictionary`` as Arrow dictionaries)."""
        first_row = self.first_row
        for batch in _file_batches(self.path, columns, batch_rows, [self.row_group],
                                   threads=False, dictionary=dictionary):
            yield first_row, batch
            first_row += batch.num_rows


#: column chunks are read through a buffer of this size instead of whole: reading a demo
#: row group of 1M rows then peaks ~120 MB lower, and no slower
READ_BUFFER_BYTES = 1 << 20


def _file_batches(path: Path, columns: Sequence[str], batch_rows: int,
                  row_groups: list[int] | None = None, threads: bool = True,
                  dictionary: Collection[str] = ()) -> Iterator[pa.RecordBatch]:
    """Record batches of one file (or some of its row groups), only ``columns``.

    ``threads=False`` decodes on the calling thread only: worker processes, one per
    core, would otherwise each start Arrow's pool of threads and oversubscribe the cores.
    Text columns in ``dictionary`` are read as Arrow dictionaries straight from Parquet's
    dictionary pages: no string per row is built (a label column read this way costs
    about a fifth).
    """
    try:
        reader = pq.ParquetFile(path, pre_buffer=False, buffer_size=READ_BUFFER_BYTES,
                                read_dictionary=[c for c in columns if c in dictionary])
        yield from reader.iter_batches(batch_size=batch_rows, columns=list(columns),
                                       row_groups=row_groups, use_threads=threads)
    except (OSError, pa.ArrowException) as exc:
        raise CatalogueError(f"cannot read the catalogue: {_first_line(exc)}",
                             where=str(path),
                             fix="the file is damaged or incomplete: write it again") from None


def _read_alike(actual: pa.DataType, expected: pa.DataType) -> bool:
    """True when a column of type ``actual`` is read like one of type ``expected``."""
    if actual == expected or pa.types.is_null(actual) or pa.types.is_null(expected):
        return True
    return any(kind(actual) and kind(expected) for kind in (_is_number, _is_text))


def _is_number(kind: pa.DataType) -> bool:
    return pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind)


def _is_text(kind: pa.DataType) -> bool:
    if pa.types.is_dictionary(kind):
        kind = kind.value_type
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def _metadata(path: Path) -> pq.FileMetaData:
    try:
        return pq.read_metadata(path)
    except FileNotFoundError:
        raise CatalogueError("catalogue not found", where=str(path)) from None
    except (OSError, pa.ArrowException) as exc:
        raise CatalogueError(f"not a readable Parquet file: {_first_line(exc)}",
                             where=str(path),
                             fix="is it complete and in Parquet format?") from None


def _arrow_schema(path: Path) -> pa.Schema:
    """The Arrow schema of a Parquet file, with its schema and field metadata."""
    try:
        return pq.read_schema(path)
    except (OSError, pa.ArrowException) as exc:
        raise CatalogueError(f"not a readable Parquet file: {_first_line(exc)}",
                             where=str(path),
                             fix="is it complete and in Parquet format?") from None


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
