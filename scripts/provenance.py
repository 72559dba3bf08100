"""What the scripts deriving tables from PARSEC share: the grid loader, provenance, dates.

``scripts/derive_timescales.py`` and ``scripts/derive_envelopes.py`` both read the PARSEC
v1.2S grid (Bressan A. et al. 2012, MNRAS 427, 127; file ``parsec_v1.25.h5`` of the
``lachesis-grids`` package) through the loader in ``tests/parsec_data.py``, and both open
their table with the same provenance header.  This module holds that shared part:

* the grid loader of ``tests/parsec_data.py`` (it lives with the tests, which check it),
  re-exported here: this module puts ``tests/`` on ``sys.path`` to import it;
* :func:`provenance_header`: the header lines naming the table, its status, the reference,
  the grid file (package version and sha256), the script and the date;
* :func:`default_date` and :func:`without_date`: the ``# date:`` line is the only part of
  a table that changes from run to run (``--date``, else ``SOURCE_DATE_EPOCH``, else
  today in UTC), and ``--check`` ignores it.

The scripts import it as ``provenance`` with their own folder on ``sys.path`` (Python puts
it there for ``python scripts/<name>.py``; the scripts add it for tests that load them by
file path).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import sys
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
#: where the derived tables and their documents ship
DATA = REPO / "catcheck" / "data"
sys.path.insert(0, str(REPO / "tests"))

from parsec_data import (  # noqa: E402  (the loader lives with the tests)
    PARSEC_FILE,
    PARSEC_REFERENCE,
    ParsecGrid,
    load_parsec_isochrones,
    parsec_grid_path,
    read_parsec_grid,
)

__all__ = ["DATA", "PARSEC_FILE", "PARSEC_REFERENCE", "REPO", "ParsecGrid", "default_date",
           "load_parsec_isochrones", "package_version", "parsec_grid_path", "provenance_header",
           "read_parsec_grid", "without_date"]

#: the distribution that ships the grid file
GRID_PACKAGE = "lachesis-grids"
DATE_PREFIX = "# date:"


def package_version() -> str:
    """The installed version of :data:`GRID_PACKAGE` ("unknown" when it is not installed)."""
    try:
        return version(GRID_PACKAGE)
    except PackageNotFoundError:
        return "unknown"


def provenance_header(title: str, *, table: str, status: str, script: Path, document: Path,
                      grid: Path, date: str) -> list[str]:
    """The opening ``#`` lines of a derived table: what it is and where it comes from.

    ``script`` is the deriving script and ``document`` the page in ``catcheck/data`` that
    states its rules; ``grid`` is the grid file read, identified by its sha256.
    """
    digest = hashlib.sha256(grid.read_bytes()).hexdigest()
    return [
        f"# {title}",
        f"# table: {table}",
        f"# status: {status}",
        f"# reference: {PARSEC_REFERENCE}",
        f"# source: {GRID_PACKAGE} {package_version()}, file {PARSEC_FILE}, sha256 {digest}",
        f"# derived: {script.resolve().relative_to(REPO).as_posix()} (rules in its docstring "
        f"and in {document.resolve().relative_to(REPO).as_posix()})",
        f"{DATE_PREFIX} {date}",
    ]


def default_date() -> str:
    """``SOURCE_DATE_EPOCH`` as a UTC date if it is set, else today in UTC (YYYY-MM-DD)."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    moment = (dt.datetime.fromtimestamp(int(epoch), tz=dt.timezone.utc) if epoch
              else dt.datetime.now(tz=dt.timezone.utc))
    return moment.date().isoformat()


def without_date(text: str) -> list[str]:
    """The lines of a table other than its ``# date:`` line (for --check)."""
    return [line for line in text.splitlines() if not line.startswith(DATE_PREFIX)]
