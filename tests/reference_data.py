"""Loaders for reference data from outside catcheck, used by the comparison tests.

Only one source so far: the mean dwarf sequence of Pecaut & Mamajek (2013, ApJS 208, 9,
Table 5), in the updated form E. Mamajek keeps as the text table
``EEM_dwarf_UBVIJHK_colors_Teff.txt`` ("A Modern Mean Dwarf Stellar Color and Effective
Temperature Sequence").  The ``MeanStars`` package ships a copy inside its package
directory; we read that file ourselves rather than through the package's reader, so the
tests depend on the published table and not on another program's parsing of it.
"""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import numpy as np
import pandas as pd

MEAN_DWARF_PACKAGE = "MeanStars"
MEAN_DWARF_FILE = "EEM_dwarf_UBVIJHK_colors_Teff.txt"
#: the table version the reference tests were written against (line 4 of the file)
MEAN_DWARF_VERSION = "2022.04.16"
MEAN_DWARF_REFERENCE = (
    "Pecaut & Mamajek 2013, ApJS 208, 9, Table 5; updated table "
    "EEM_dwarf_UBVIJHK_colors_Teff.txt by E. Mamajek"
)

#: the columns that hold text; every other column holds numbers
_TEXT_COLUMNS = ("SpT",)
#: the table repeats the spectral type as its last column, headed "#SpT"
_REPEATED_SPT = "#SpT"
_VERSION = re.compile(r"^#\s*Version\s+(\S+)", re.IGNORECASE)
#: a missing value: "..." (or any run of two or more dots, the table uses 3 to 5)
_MISSING = re.compile(r"^\.{2,}$")
#: markers after a number: ":" uncertain, "*" very preliminary (notes in the table)
_MARKERS = ":*"


def mean_dwarf_table_path() -> Path:
    """Where the installed ``MeanStars`` package keeps the mean dwarf table.

    Raises ``ModuleNotFoundError`` when the package is not installed and
    ``FileNotFoundError`` when it is installed but does not ship the table.
    """
    spec = importlib.util.find_spec(MEAN_DWARF_PACKAGE)
    if spec is None:
        raise ModuleNotFoundError(f"the {MEAN_DWARF_PACKAGE} package is not installed",
                                  name=MEAN_DWARF_PACKAGE)
    folders = list(spec.submodule_search_locations or [])
    if spec.origin and not folders:
        folders = [str(Path(spec.origin).parent)]
    for folder in folders:
        path = Path(folder) / MEAN_DWARF_FILE
        if path.is_file():
            return path
    raise FileNotFoundError(f"{MEAN_DWARF_FILE} is not in the {MEAN_DWARF_PACKAGE} package "
                            f"(looked in {', '.join(folders) or 'nothing'})")


def load_mean_dwarf_sequence(path: Path | None = None) -> pd.DataFrame:
    """The mean dwarf sequence as a DataFrame, one row per spectral type (O3V .. Y4V).

    Columns are named as in the table's header (``SpT``, ``Teff``, ``logT``, ``BCv``,
    ``logL``, ``Mbol``, ``R_Rsun``, ``Mv``, colours ..., ``Msun``); ``SpT`` holds strings and
    every other column floats, NaN where the table prints ``...``.  A trailing ``:``
    (uncertain) or ``*`` (preliminary) is dropped from a number.  ``attrs`` holds the
    table's ``version``, its ``path`` and the ``reference`` to cite.
    """
    path = mean_dwarf_table_path() if path is None else Path(path)
    frame, version = parse_mean_dwarf_table(path.read_text(encoding="utf-8"), str(path))
    frame.attrs.update(version=version, path=str(path), reference=MEAN_DWARF_REFERENCE)
    return frame


def parse_mean_dwarf_table(text: str, where: str = MEAN_DWARF_FILE
                           ) -> tuple[pd.DataFrame, str | None]:
    """Parse the text of the table: (DataFrame, version or None).

    The table is whitespace-separated: comment lines start with ``#``; the first other
    line is the header; the data run until the next comment line (the header repeated as
    a comment).  Each row must have as many fields as the header and end with the same
    spectral type it starts with; anything else raises ``ValueError`` naming the line,
    so a change in the file's layout fails loudly instead of shifting columns.
    """
    version = None
    header: list[str] | None = None
    rows: list[tuple[int, list[str]]] = []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if header is None:
            match = _VERSION.match(stripped)
            if match and version is None:
                version = match.group(1)
            if stripped and not stripped.startswith("#"):
                header = stripped.split()
            continue
        if stripped.startswith("#"):
            break
        if stripped:
            rows.append((number, stripped.split()))
    if header is None or "SpT" not in header:
        raise ValueError(f"{where}: no header line starting with 'SpT' found")
    if not rows:
        raise ValueError(f"{where}: the table has no data rows")

    columns: dict[str, list[object]] = {name: [] for name in header}
    for number, fields in rows:
        if len(fields) != len(header):
            raise ValueError(f"{where}, line {number}: {len(fields)} fields, the header "
                             f"has {len(header)}")
        for name, field in zip(header, fields, strict=True):
            columns[name].append(field if name in _TEXT_COLUMNS or name == _REPEATED_SPT
                                 else _number(field, where, number, name))
    frame = pd.DataFrame(columns)
    if _REPEATED_SPT in frame:
        mismatch = frame[frame["SpT"] != frame[_REPEATED_SPT]]
        if not mismatch.empty:
            first = mismatch.iloc[0]
            raise ValueError(f"{where}: row {first['SpT']!r} ends with spectral type "
                             f"{first[_REPEATED_SPT]!r}; columns are misaligned")
        frame = frame.drop(columns=_REPEATED_SPT)
    return frame, version


def _number(field: str, where: str, line: int, column: str) -> float:
    if _MISSING.match(field):
        return np.nan
    try:
        return float(field.rstrip(_MARKERS))
    except ValueError:
        raise ValueError(f"{where}, line {line}, column {column}: {field!r} is not a "
                         "number") from None
