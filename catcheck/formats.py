"""Catalogue formats beside plain Parquet, and :func:`open_catalogue`, which picks the reader.

The reader is chosen by the file's extension (case-insensitive):

=====================================  ===================================================
``.parquet``, ``.pq``                  Parquet (:class:`catcheck.reader.ParquetCatalogue`);
                                       a directory is a Parquet dataset, hive-partitioned
                                       (``cluster=C-017/part-0.parquet``) or not
``.csv``, ``.tsv`` (also ``.gz``)      pyarrow's streaming CSV reader; no astropy needed
``.fits``, ``.fit``, ``.fts``,         the first table HDU, through ``astropy.io.fits``
``.fits.gz``                           with memmap, sliced into batches of rows
``.vot``, ``.votable``, ``.xml``       VOTable, the first table, through astropy
``.ecsv``                              ECSV, through astropy
=====================================  ===================================================

A file with another extension is read as Parquet only when it starts with Parquet's magic
bytes; anything else is a :class:`~catcheck.errors.CatalogueError` naming the extensions
catcheck knows.  FITS, VOTable and ECSV need astropy (the ``fits`` extra).

Memory: Parquet, CSV and uncompressed FITS are streamed (bounded by the batch size).
VOTable and ECSV are read whole into memory, as is a gzip-compressed FITS file (astropy
cannot memory-map it): convert large tables to Parquet or FITS first.

CSV types are decided by a first pass over the whole file (which also counts its rows):
pyarrow infers them from the first 16 MB and the pass confirms every value fits; if one
does not (integers for a million rows, then ``2.5``), the pass is redone reading text, and
a column is int64 when every value is an integer, uint64 when some exceed int64, float64
when every value is a number, otherwise text.  So a check never fails half-way through a
file on a type.  The values pyarrow reads as missing ("", NA, NaN, null, ...) are null.
(pyarrow's own inference reads integers beyond int64 as float64: keep such identifiers in
a text column, or in Parquet.)

Units, UCDs and descriptions found in the file are kept as Arrow field metadata under
the keys ``unit``, ``ucd`` and ``description`` (read them with :func:`column_metadata`):
FITS ``TUNITn``, ``TUCDn`` and ``TCOMMn`` (and the column metadata astropy writes into
the header), VOTable ``FIELD`` unit, ucd and description, ECSV unit, description and
``meta`` (its ``ucd``).  Text is stripped of padding blanks (FITS pads with blanks), and a
blank text value is null; integer FITS columns honour ``TNULLn``; FITS's big-endian arrays
become native ones.

Every catalogue here satisfies :class:`catcheck.engine.Catalogue` and also offers
``full_schema()`` and ``full_batches()`` (every column), as the annotated outputs need.
"""

from __future__ import annotations

import importlib
import warnings
from collections.abc import Collection, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.dataset as ds

from catcheck.engine import Catalogue
from catcheck.errors import CatalogueError
from catcheck.reader import DEFAULT_BATCH_ROWS, ParquetCatalogue, resolve_sources

PARQUET, CSV, TSV, FITS, VOTABLE, ECSV = "parquet", "csv", "tsv", "fits", "votable", "ecsv"

#: file name endings (lower case) -> format; the longest matching ending wins
SUFFIX_FORMATS: dict[str, str] = {
    ".parquet": PARQUET, ".pq": PARQUET,
    ".csv": CSV, ".csv.gz": CSV, ".csv.bz2": CSV,
    ".tsv": TSV, ".tsv.gz": TSV, ".tsv.bz2": TSV,
    ".fits": FITS, ".fit": FITS, ".fts": FITS, ".fits.gz": FITS, ".fit.gz": FITS,
    ".vot": VOTABLE, ".votable": VOTABLE, ".xml": VOTABLE,
    ".ecsv": ECSV,
}
#: formats read through astropy (the ``fits`` extra)
ASTROPY_FORMATS = (FITS, VOTABLE, ECSV)
INSTALL_ASTROPY = 'pip install "catcheck[fits]"'
PARQUET_MAGIC = b"PAR1"

#: Arrow field-metadata keys for what a file says about a column
UNIT_KEY, UCD_KEY, DESCRIPTION_KEY = b"unit", b"ucd", b"description"

#: block sizes of the CSV reader: bounds for reading batches, and for the type scan (pyarrow
#: infers types from the first block)
_CSV_MIN_BLOCK, _CSV_MAX_BLOCK, _CSV_SCAN_BLOCK = 1 << 20, 1 << 28, 1 << 24
#: the order in which a CSV column's type widens as values that do not fit turn up
_CSV_TYPES = (pa.int64(), pa.uint64(), pa.float64(), pa.string())
#: astropy's serialized-column block in a FITS header (the units it cannot write as TUNIT)
_ASTROPY_YAML = ("--BEGIN-ASTROPY-SERIALIZED-COLUMNS--", "--END-ASTROPY-SERIALIZED-COLUMNS--")


# =========================================================================================
# Choosing the reader
# =========================================================================================


def format_of(path: Path) -> str:
    """The format of ``path`` from its extension (see the module docstring).

    A file with an unknown extension is Parquet if it starts with Parquet's magic bytes;
    otherwise :class:`~catcheck.errors.CatalogueError`.
    """
    name = path.name.lower()
    endings = [ending for ending in SUFFIX_FORMATS if name.endswith(ending)]
    if endings:
        return SUFFIX_FORMATS[max(endings, key=len)]
    try:
        with open(path, "rb") as handle:
            if handle.read(len(PARQUET_MAGIC)) == PARQUET_MAGIC:
                return PARQUET
    except OSError as exc:
        raise CatalogueError(f"cannot read the catalogue: {exc.strerror or exc}",
                             where=str(path)) from None
    known = ", ".join(sorted(SUFFIX_FORMATS))
    raise CatalogueError(f"unknown catalogue format {path.suffix or '(no extension)'!r}",
                         where=str(path), fix=f"catcheck reads files ending in {known}")


def open_catalogue(sources: Sequence[str | Path]) -> Catalogue:
    """Open files, directories and globs of any supported format as one catalogue.

    Rows are numbered across the sources in the order given (a directory's files in
    sorted path order).  Plain Parquet keeps :class:`~catcheck.reader.ParquetCatalogue`;
    a hive-partitioned directory gains its partition keys as columns; several files of
    other formats are read one after another, and must agree on the columns a profile
    reads (names and types).
    """
    if not sources:
        resolve_sources([])  # raises the "no catalogue given" error
    listed: list[tuple[Path, str] | list[Part]] = []
    for source in sources:
        files = resolve_sources([source])
        base = Path(source)
        if base.is_dir() and any("=" in part for path in files
                                 for part in path.relative_to(base).parts[:-1]):
            listed.append(_hive_parts(base, files))
        else:
            listed.extend((path, format_of(path)) for path in files)
    if all(isinstance(item, tuple) and item[1] == PARQUET for item in listed):
        return ParquetCatalogue.open([item[0] for item in listed])  # type: ignore[index]
    parts: list[Part] = []
    for item in listed:
        if isinstance(item, list):
            parts.extend(item)
        else:
            parts.append(Part(_open_file(*item)))
    if len(parts) == 1 and not parts[0].constants:
        return parts[0].catalogue
    return JoinedCatalogue.of(parts)


def _open_file(path: Path, kind: str) -> Catalogue:
    if kind == PARQUET:
        return ParquetCatalogue.open([path])
    if kind in (CSV, TSV):
        return CsvCatalogue.open(path, "\t" if kind == TSV else ",")
    if kind == FITS:
        return FitsCatalogue.open(path)
    return read_astropy_table(path, kind)


def astropy_module(name: str, path: Path | str) -> ModuleType:
    """Import an astropy module, or say how to install it (the ``fits`` extra)."""
    try:
        return importlib.import_module(name)
    except ImportError:
        raise CatalogueError("reading FITS, VOTable and ECSV files needs astropy, which is "
                             "not installed", where=str(path),
                             fix=f"{INSTALL_ASTROPY}, or convert the table to Parquet or "
                                 "CSV") from None


def column_metadata(field: pa.Field) -> dict[str, str]:
    """What the file said about a column: ``unit``, ``ucd``, ``description`` (those present)."""
    meta = field.metadata or {}
    found = {}
    for key in (UNIT_KEY, UCD_KEY, DESCRIPTION_KEY):
        value = meta.get(key)
        if value:
            found[key.decode()] = value.decode("utf-8", errors="replace")
    return found


def _field_metadata(unit: Any = None, ucd: Any = None, description: Any = None
                    ) -> dict[bytes, bytes] | None:
    """Arrow field metadata from what a file declares; blank and "None" values are dropped."""
    meta = {}
    for key, value in ((UNIT_KEY, unit), (UCD_KEY, ucd), (DESCRIPTION_KEY, description)):
        text = "" if value is None else " ".join(str(value).split())
        if text and text != "None":
            meta[key] = text.encode()
    return meta or None


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _unreadable(path: Path, kind: str, exc: BaseException) -> CatalogueError:
    return CatalogueError(f"not a readable {kind} table: {_first_line(exc)}", where=str(path),
                          fix="is the file complete and in the format its extension says?")


# =========================================================================================
# Several catalogues read one after another (several files; hive partitions)
# =========================================================================================


@dataclass(frozen=True)
class Part:
    """One catalogue of a :class:`JoinedCatalogue`, with constant columns (partition keys)."""

    catalogue: Catalogue
    constants: tuple[tuple[pa.Field, Any], ...] = ()

    @property
    def schema(self) -> pa.Schema:
        """The catalogue's columns followed by the constant ones."""
        schema = self.catalogue.schema
        for field, _ in self.constants:
            schema = schema.append(field)
        return schema

    def constant_columns(self) -> dict[str, pa.Scalar]:
        """The constant columns by name, each as a typed scalar."""
        return {field.name: pa.scalar(value, field.type) for field, value in self.constants}


@dataclass(frozen=True)
class JoinedCatalogue:
    """Several catalogues read as one table, rows numbered across them in order.

    The first part's schema is the catalogue's; every part must have the columns a run
    reads, with the same types.
    """

    parts: tuple[Part, ...]
    schema: pa.Schema
    num_rows: int

    @classmethod
    def of(cls, parts: Sequence[Part]) -> JoinedCatalogue:
        """Join ``parts`` (at least one)."""
        return cls(tuple(parts), parts[0].schema,
                   sum(part.catalogue.num_rows for part in parts))

    @property
    def description(self) -> str:
        """Short text naming the input, for messages and the summary."""
        first = self.parts[0].catalogue.description
        return first if len(self.parts) == 1 else f"{first} and {len(self.parts) - 1} more files"

    def check_columns(self, columns: Sequence[str]) -> None:
        """Every part must have every needed column, of the first part's type."""
        for part in self.parts:
            schema = part.schema
            for name in columns:
                where = part.catalogue.description
                if name not in schema.names:
                    raise CatalogueError(f"column {name!r} is missing from this file",
                                         where=where,
                                         fix="all files of a catalogue need the same columns")
                kind, expected = schema.field(name).type, self.schema.field(name).type
                if kind != expected:
                    raise CatalogueError(
                        f"column {name!r} is {kind} here but {expected} in "
                        f"{self.parts[0].catalogue.description}", where=where,
                        fix="give every file of the catalogue the same column types")
            constants = part.constant_columns()
            part.catalogue.check_columns([name for name in columns if name not in constants])

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` over every part in order, only ``columns``."""
        offset = 0
        for part in self.parts:
            constants = part.constant_columns()
            own = [name for name in columns if name not in constants]
            for first_row, batch in part.catalogue.batches(own, batch_rows,
                                                           dictionary=dictionary):
                arrays = [pa.repeat(constants[name], batch.num_rows) if name in constants
                          else batch.column(own.index(name)) for name in columns]
                yield offset + first_row, pa.RecordBatch.from_arrays(arrays, names=list(columns))
            offset += part.catalogue.num_rows

    def full_schema(self) -> pa.Schema:
        """Every column's schema (for the annotated outputs)."""
        return self.schema

    def full_batches(self, batch_rows: int = DEFAULT_BATCH_ROWS
                     ) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` with every column of :meth:`full_schema`."""
        for first_row, batch in self.batches(self.schema.names, batch_rows):
            yield first_row, pa.RecordBatch.from_arrays(batch.columns, schema=self.schema)


def _hive_parts(base: Path, files: Sequence[Path]) -> list[Part]:
    """The files of a hive-partitioned Parquet directory, each with its partition keys."""
    not_parquet = [path for path in files if format_of(path) != PARQUET]
    if not_parquet:
        raise CatalogueError("a partitioned directory must hold Parquet files only",
                             where=str(not_parquet[0]), fix="move other files elsewhere")
    try:
        dataset = ds.dataset([str(path) for path in files], format="parquet",
                             partitioning="hive", partition_base_dir=str(base))
        fragments = list(dataset.get_fragments())
    except (OSError, pa.ArrowException) as exc:
        raise CatalogueError(f"cannot read the partitioned dataset: {_first_line(exc)}",
                             where=str(base), fix="are its files complete Parquet files?"
                             ) from None
    file_names = set(ParquetCatalogue.open([files[0]]).schema.names)
    keys = [field for field in dataset.schema if field.name not in file_names]
    parts = []
    for path, fragment in zip(files, fragments, strict=True):
        values = ds.get_partition_keys(fragment.partition_expression)
        parts.append(Part(ParquetCatalogue.open([path]),
                          tuple((field, values.get(field.name)) for field in keys)))
    return parts


@dataclass(frozen=True)
class _OneFile:
    """What every single-file catalogue shares: a path, one schema, a row count."""

    path: Path
    schema: pa.Schema
    num_rows: int

    @property
    def description(self) -> str:
        """The file's path."""
        return str(self.path)

    def check_columns(self, columns: Sequence[str]) -> None:
        """One file has one schema: nothing to compare."""

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Ordered batches of ``columns``; text formats read every column as plain values
        (``dictionary`` is a hint they ignore)."""
        raise NotImplementedError

    def full_schema(self) -> pa.Schema:
        """Every column's schema (for the annotated outputs)."""
        return self.schema

    def full_batches(self, batch_rows: int = DEFAULT_BATCH_ROWS
                     ) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` with every column."""
        return self.batches(self.schema.names, batch_rows)


# =========================================================================================
# CSV and TSV
# =========================================================================================


@dataclass(frozen=True)
class CsvCatalogue(_OneFile):
    """A CSV or TSV file (one header line), streamed with pyarrow's CSV reader."""

    delimiter: str = ","
    native: bool = True  # pyarrow's inferred types held for every value of the file

    @classmethod
    def open(cls, path: Path, delimiter: str = ",") -> CsvCatalogue:
        """Decide each column's type over the whole file, counting the rows on the way."""
        try:
            try:
                schema, rows = _native_csv_scan(path, delimiter)
                native = True
            except pa.ArrowInvalid:  # a value that does not fit the type inferred first
                schema, rows = _widening_csv_scan(path, delimiter)
                native = False
        except (OSError, pa.ArrowException) as exc:
            raise _unreadable(path, "CSV", exc) from None
        return cls(path, schema, rows, delimiter, native)

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` of at most ``batch_rows`` rows, only ``columns``
        (``dictionary`` is ignored: CSV holds plain text)."""
        types = [self.schema.field(name).type for name in columns]
        reading = dict(zip(columns, types if self.native else [pa.string()] * len(types),
                           strict=True))
        first_row = 0
        try:
            with _csv_reader(self.path, self.delimiter, reading, self._block_size(batch_rows),
                             columns) as reader:
                for block in reader:
                    if not self.native:
                        block = pa.RecordBatch.from_arrays(
                            [_csv_values(column, kind)
                             for column, kind in zip(block.columns, types, strict=True)],
                            names=list(columns))
                    for start in range(0, block.num_rows, batch_rows):
                        piece = block.slice(start, batch_rows)
                        yield first_row, piece
                        first_row += piece.num_rows
        except (OSError, pa.ArrowException) as exc:
            raise _unreadable(self.path, "CSV", exc) from None

    def _block_size(self, batch_rows: int) -> int:
        """Bytes per block so a block holds about ``batch_rows`` rows."""
        per_row = self.path.stat().st_size / max(self.num_rows, 1)
        return int(min(max(per_row * batch_rows * 1.1, _CSV_MIN_BLOCK), _CSV_MAX_BLOCK))


def _csv_reader(path: Path, delimiter: str, types: dict[str, pa.DataType] | None,
                block_size: int, columns: Sequence[str] | None = None
                ) -> pacsv.CSVStreamingReader:
    convert = pacsv.ConvertOptions(column_types=types or {}, strings_can_be_null=True,
                                   include_columns=list(columns or ()))
    return pacsv.open_csv(path, read_options=pacsv.ReadOptions(block_size=block_size),
                          parse_options=pacsv.ParseOptions(delimiter=delimiter),
                          convert_options=convert)


def _native_csv_scan(path: Path, delimiter: str) -> tuple[pa.Schema, int]:
    """pyarrow's types, inferred from the first block and converted through the whole file
    (raises ArrowInvalid where a later value does not fit); all-empty columns are float64."""
    with _csv_reader(path, delimiter, None, _CSV_SCAN_BLOCK) as reader:
        _check_unique(reader.schema.names, path)
        rows = sum(batch.num_rows for batch in reader)
        fields = [field.with_type(pa.float64()) if pa.types.is_null(field.type) else field
                  for field in reader.schema]
    return pa.schema(fields), rows


def _widening_csv_scan(path: Path, delimiter: str) -> tuple[pa.Schema, int]:
    """Each column's narrowest type of :data:`_CSV_TYPES` that every value fits."""
    with _csv_reader(path, delimiter, None, _CSV_MIN_BLOCK) as reader:
        names = reader.schema.names
    types: dict[str, pa.DataType | None] = dict.fromkeys(names)
    rows = 0
    with _csv_reader(path, delimiter, dict.fromkeys(names, pa.string()),
                     _CSV_SCAN_BLOCK) as reader:
        for batch in reader:
            rows += batch.num_rows
            for name, column in zip(names, batch.columns, strict=True):
                types[name] = _widened_csv_type(types[name], column)
    return pa.schema([pa.field(name, kind or pa.float64()) for name, kind in types.items()]), rows


def _check_unique(names: Sequence[str], path: Path) -> None:
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise CatalogueError(f"column names repeat in the header: {', '.join(repeated)}",
                             where=str(path), fix="give every column its own name")


def _csv_values(strings: pa.Array, kind: pa.DataType) -> pa.Array:
    """A CSV column read as text, as ``kind`` (raises ArrowInvalid if a value does not fit)."""
    if kind == pa.string():
        return strings
    try:
        return pc.cast(strings, kind)
    except pa.ArrowInvalid:  # perhaps blanks around the numbers, as CSV writers may leave
        return pc.cast(pc.utf8_trim_whitespace(strings), kind)


def _widened_csv_type(current: pa.DataType | None, strings: pa.Array) -> pa.DataType | None:
    """The narrowest type of :data:`_CSV_TYPES`, from ``current`` on, that fits ``strings``."""
    values = strings.drop_null()
    if len(values) == 0:
        return current
    start = 0 if current is None else _CSV_TYPES.index(current)
    for kind in _CSV_TYPES[start:]:
        try:
            _csv_values(values, kind)
        except pa.ArrowInvalid:
            continue
        return kind
    return pa.string()


# =========================================================================================
# FITS binary (and ASCII) tables
# =========================================================================================


@dataclass(frozen=True)
class FitsCatalogue(_OneFile):
    """The first table HDU of a FITS file, memory-mapped and read a slice of rows at a time."""

    hdu: int = 1

    @classmethod
    def open(cls, path: Path) -> FitsCatalogue:
        """Find the first table HDU and read its header (no rows yet)."""
        fits = astropy_module("astropy.io.fits", path)
        try:
            with _quiet(), _open_fits(fits, path) as hdus:
                index = next((i for i, hdu in enumerate(hdus)
                              if isinstance(hdu, fits.BinTableHDU | fits.TableHDU)), None)
                if index is None:
                    raise CatalogueError("the FITS file holds no table HDU", where=str(path),
                                         fix="catcheck reads binary or ASCII table extensions")
                hdu = hdus[index]
                empty = _fits_batch(_fits_rows(fits, hdu, 0, 0), hdu.columns)
                schema = _with_metadata(empty.schema, _fits_column_metadata(hdu))
                return cls(path, schema, int(hdu.header.get("NAXIS2", 0)), index)
        except (OSError, ValueError, TypeError, KeyError, IndexError) as exc:
            raise _unreadable(path, "FITS", exc) from None

    def batches(self, columns: Sequence[str], batch_rows: int = DEFAULT_BATCH_ROWS, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` of ``batch_rows`` rows at a time, only ``columns``
        (``dictionary`` is ignored: FITS holds plain text).

        Each batch is copied out of the memory map (native byte order), so the file is
        never held by a batch.  astropy's warnings are silenced while a batch is read,
        not while the caller holds it.
        """
        fits = astropy_module("astropy.io.fits", self.path)
        try:
            with _quiet():
                hdus = _open_fits(fits, self.path)
            with hdus:
                for start in range(0, self.num_rows, batch_rows):
                    stop = min(start + batch_rows, self.num_rows)
                    with _quiet():
                        hdu = hdus[self.hdu]
                        batch = _fits_batch(_fits_rows(fits, hdu, start, stop), hdu.columns,
                                            columns)
                    yield start, batch
        except (OSError, ValueError, TypeError, KeyError, IndexError) as exc:
            raise _unreadable(self.path, "FITS", exc) from None


def _open_fits(fits: ModuleType, path: Path) -> Any:
    """The HDU list, memory-mapped."""
    return fits.open(path, memmap=True)


@contextmanager
def _quiet() -> Iterator[None]:
    """Silence warnings (astropy warns about non-standard but readable files)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        yield


def _fits_rows(fits: ModuleType, hdu: Any, start: int, stop: int) -> Any:
    """Rows ``start:stop`` of a table HDU as a FITS_rec (a view of the memory map)."""
    data = hdu.data
    if data is None:  # a table without rows
        return fits.FITS_rec.from_columns(hdu.columns, nrows=0)
    return data[start:stop]


def _fits_batch(rows: Any, coldefs: Any, names: Sequence[str] | None = None
                ) -> pa.RecordBatch:
    """Some columns (default: all) of FITS rows as a record batch."""
    by_name = {column.name: column for column in coldefs}
    names = list(by_name) if names is None else list(names)
    stored = np.asarray(rows)  # the records as stored (a view)
    arrays = []
    for name in names:
        column = by_name[name]
        # text as stored: astropy would decode every slice to str, which costs more than
        # all the rest of the reading
        values = stored[name] if column.dtype.kind == "S" else np.asarray(rows.field(name))
        arrays.append(to_arrow(values, _fits_null_mask(values, column)))
    return pa.RecordBatch.from_arrays(arrays, names=names)


def _fits_null_mask(values: np.ndarray, column: Any) -> np.ndarray | None:
    """Rows whose integer value is the column's ``TNULLn`` (after TSCAL/TZERO scaling)."""
    null = column.null
    if null is None or null == "" or values.dtype.kind not in "iu":
        return None
    scale = column.bscale if column.bscale not in (None, "") else 1
    zero = column.bzero if column.bzero not in (None, "") else 0
    try:
        target = int(null) * scale + zero
    except (TypeError, ValueError):
        return None
    mask = values == target
    return mask if mask.ndim == 1 and mask.any() else None


def _fits_column_metadata(hdu: Any) -> dict[str, dict[bytes, bytes] | None]:
    """Per column: TUNITn, TUCDn, TCOMMn, completed from astropy's serialized columns."""
    header = hdu.header
    extra = _astropy_header_columns(header)
    found = {}
    for number, column in enumerate(hdu.columns, start=1):
        more = extra.get(column.name, {})
        ucd = header.get(f"TUCD{number}") or (more.get("meta") or {}).get("ucd")
        found[column.name] = _field_metadata(column.unit or more.get("unit"), ucd,
                                             header.get(f"TCOMM{number}")
                                             or more.get("description"))
    return found


def _astropy_header_columns(header: Any) -> dict[str, dict[str, Any]]:
    """The column entries (unit, description, meta) astropy serializes into COMMENT cards.

    astropy writes there what FITS cannot say in TUNITn (``dex(K)``, UCDs in ``meta``).
    A block that cannot be parsed is ignored: it only adds metadata.
    """
    comments = [str(card) for card in header.get("COMMENT", [])]
    begin, end = _ASTROPY_YAML
    if begin not in comments or end not in comments:
        return {}
    lines = comments[comments.index(begin) + 1:comments.index(end)]
    try:
        from astropy.table.meta import get_header_from_yaml

        entries = get_header_from_yaml(lines).get("datatype", [])
    except Exception:  # any malformed block (YAML errors have no common base class)
        return {}
    return {entry["name"]: entry for entry in entries
            if isinstance(entry, dict) and "name" in entry}


def _with_metadata(schema: pa.Schema, metadata: dict[str, dict[bytes, bytes] | None]
                   ) -> pa.Schema:
    return pa.schema([field.with_metadata(metadata.get(field.name)) if metadata.get(field.name)
                      else field for field in schema])


# =========================================================================================
# VOTable and ECSV (read whole), and numpy -> Arrow
# =========================================================================================


def read_astropy_table(path: Path, kind: str) -> Catalogue:
    """A VOTable (first table) or ECSV file, read whole into memory."""
    from catcheck.api import TableCatalogue  # here, not at the top: api imports this module

    astropy_module("astropy.table", path)
    try:
        with _quiet():
            if kind == VOTABLE:
                table, metadata = _read_votable(path)
            else:
                table, metadata = _read_ecsv(path)
    except (OSError, ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        raise _unreadable(path, "VOTable" if kind == VOTABLE else "ECSV", exc) from None
    arrays = [to_arrow(np.ma.getdata(table[name]), _mask_of(table[name]))
              for name in table.colnames]
    batch = pa.Table.from_arrays(arrays, names=list(table.colnames))
    return TableCatalogue(batch.cast(_with_metadata(batch.schema, metadata)), str(path))


def _read_votable(path: Path) -> tuple[Any, dict[str, dict[bytes, bytes] | None]]:
    votable = astropy_module("astropy.io.votable", path)
    resource = votable.parse(str(path), verify="ignore").get_first_table()
    table = resource.to_table(use_names_over_ids=True)
    metadata = {name: _field_metadata(field.unit, field.ucd, field.description)
                for name, field in zip(table.colnames, resource.fields, strict=True)}
    return table, metadata


def _read_ecsv(path: Path) -> tuple[Any, dict[str, dict[bytes, bytes] | None]]:
    table = astropy_module("astropy.table", path).Table.read(str(path), format="ascii.ecsv")
    metadata = {name: _field_metadata(table[name].unit, (table[name].meta or {}).get("ucd"),
                                      table[name].description) for name in table.colnames}
    return table, metadata


def _mask_of(column: Any) -> np.ndarray | None:
    mask = np.ma.getmask(column)
    return None if mask is np.ma.nomask or not np.any(mask) else np.asarray(mask)


def to_arrow(values: np.ndarray, mask: np.ndarray | None = None) -> pa.Array:
    """A numpy column (from FITS or astropy) as an Arrow array.

    Numbers are copied in native byte order; text is decoded, stripped of padding and blank
    text becomes null; a column of arrays becomes a list column.  ``mask`` marks nulls.
    """
    if values.ndim > 1 and mask is not None and mask.ndim > 1:
        mask = mask.all(axis=tuple(range(1, mask.ndim)))
    if values.dtype.kind in "SU" or (values.dtype.kind == "O" and _holds_text(values)):
        return _text(values, mask)
    if values.dtype.kind == "O":  # variable-length arrays
        items = [None if (mask is not None and mask[i]) or item is None
                 else np.asarray(item).tolist() for i, item in enumerate(values)]
        return pa.array(items)
    native = np.array(values, dtype=values.dtype.newbyteorder("="), copy=True)
    if native.ndim > 1:
        flat = pa.array(native.reshape(-1))
        width = int(np.prod(native.shape[1:]))
        array = pa.FixedSizeListArray.from_arrays(flat, width)
        return array if mask is None else pc.if_else(pa.array(~mask), array, None)
    return pa.array(native, mask=mask)


def _holds_text(values: np.ndarray) -> bool:
    return any(isinstance(item, str | bytes) for item in values[:100])


def _text(values: np.ndarray, mask: np.ndarray | None) -> pa.Array:
    if values.dtype.kind == "S":
        array = pc.cast(pa.array(values, pa.binary(), mask=mask), pa.string())
    else:
        array = pa.array([None if item is None else str(item) if not isinstance(item, bytes)
                          else item.decode("utf-8", errors="replace") for item in values]
                         if values.dtype.kind == "O" else values, pa.string(), mask=mask)
    stripped = pc.utf8_trim(array, characters=" \t\x00")
    return pc.if_else(pc.equal(stripped, ""), pa.scalar(None, pa.string()), stripped)
