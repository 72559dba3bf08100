"""Reading the small CSV tables shipped in ``catcheck/data``: one format for all of them.

Every shipped table (the Teff scales ``mk_teff_*.csv``, ``parsec_timescales.csv``,
``parsec_envelopes.csv``) is a CSV body under a commented header:

* ``# key: value`` lines carry the table's metadata; only the keys a reader names are
  kept, so prose that happens to hold a colon is not mistaken for metadata, and the keys
  that say where the numbers come from (reference, status, ...) are required;
* every other ``#`` line is prose (a reader may still look at it: :attr:`Table.comments`);
* the first other line is the header row, which must name exactly the expected columns;
  then one row per line, with exactly that many fields.

:func:`read_table` checks all of that and hands each row to the reader's own parser;
every error is a ``ValueError`` naming the file and, for a line, its number.  What the rows
mean and how they are checked stays with each table's module.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from importlib import resources
from typing import Generic, TypeVar

Row = TypeVar("Row")


@dataclass(frozen=True)
class Table(Generic[Row]):
    """A table as read: its metadata, its parsed rows, and its ``#`` lines.

    ``comments`` holds (where, line) for every ``#`` line in order, metadata included,
    ``where`` naming the file and line (``"x.csv, line 3"``) for messages.
    """

    metadata: dict[str, str]
    rows: list[Row]
    comments: list[tuple[str, str]]


def shipped_text(filename: str) -> str:
    """The text of the table ``filename`` shipped in ``catcheck/data`` (package data)."""
    return resources.files("catcheck").joinpath("data", filename).read_text(encoding="utf-8")


def read_table(text: str, where: str, *, columns: Sequence[str], metadata: Sequence[str],
               required: Sequence[str], parse_row: Callable[[list[str], str], Row]
               ) -> Table[Row]:
    """Read a commented-header CSV table (format: the module docstring).

    ``where`` names the file in messages; ``columns`` is the expected header row;
    ``metadata`` the ``# key: value`` keys to keep, of which ``required`` must be present
    and non-empty.  ``parse_row(fields, here)`` turns the stripped fields of each data row
    into a row (``here`` is ``"<where>, line <n>"``, for its own messages) and raises
    ``ValueError`` for a bad one; rows are parsed as they are read, so the first bad row
    is reported before any missing metadata.  Raises ``ValueError`` also for a wrong
    header, a row with the wrong number of fields, missing metadata or no rows.
    """
    meta: dict[str, str] = {}
    rows: list[Row] = []
    comments: list[tuple[str, str]] = []
    header_seen = False
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        here = f"{where}, line {number}"
        if stripped.startswith("#"):
            comments.append((here, stripped))
            key, sep, value = stripped[1:].partition(":")
            if sep and key.strip() in metadata:
                meta[key.strip()] = value.strip()
            continue
        fields = [field.strip() for field in stripped.split(",")]
        if not header_seen:
            if fields != list(columns):
                raise ValueError(f"{here}: expected the header {','.join(columns)!r}")
            header_seen = True
            continue
        if len(fields) != len(columns):
            raise ValueError(f"{here}: expected {len(columns)} fields "
                             f"({','.join(columns)}), got {len(fields)}")
        rows.append(parse_row(fields, here))
    missing = [key for key in required if not meta.get(key)]
    if missing:
        raise ValueError(f"{where}: header lacks {', '.join(missing)} (every shipped table "
                         "names its source)")
    if not rows:
        raise ValueError(f"{where}: the table has no rows")
    return Table(meta, rows, comments)


def number(field: str, here: str, name: str) -> float:
    """The number in one field (empty -> NaN); ``ValueError`` naming ``name`` and ``here``."""
    if field == "":
        return math.nan
    try:
        return float(field)
    except ValueError:
        raise ValueError(f"{here}: {name} {field!r} is not a number") from None
