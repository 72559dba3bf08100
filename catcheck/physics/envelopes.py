"""Evolutionary-phase envelopes: the log g, log L and radius a phase allows at a given Teff.

The envelopes come from the PARSEC v1.2S isochrones (Bressan A. et al. 2012, MNRAS 427,
127; the grid file ``parsec_v1.25.h5`` of the ``lachesis-grids`` package), derived once by
``scripts/derive_envelopes.py`` into the shipped table ``catcheck/data/parsec_envelopes.csv``
(provenance in ``catcheck/data/ENVELOPES.md``); catcheck reads only that table.

For the phases the models label (PMS, MS, SGB, RGB, CHEB, and RC/HB as CHEB stars below
2.2 Msun), the envelope at a log Teff bin (0.01 dex wide) is the minimum and maximum log g
and log L of all model points of the phase in that bin, a **union over metallicity**
([M/H] -2.0 .. +0.5) **and age** (up to the age of the Universe).  The table stores these
raw extremes: nothing is padded here; a rule adds its own margin.  Phases the models do not
reach (WD, AGB, RSG, BSG, and the hot horizontal branch and subdwarfs added to HB and
CHEB) have boxes typed from memory (``source = memory``), which deserve a wider margin
and warnings rather than errors.  BSS (blue stragglers) share the MS envelope; PAGB and WR
have none (:data:`NOT_COVERED`).

Looking a star up
-----------------
A star of phase p at log Teff t falls in p's bin b.  Its bounds are the extremes over b and
the nearest non-empty bin on each side (b - 1 and b + 1 where those hold points), so a
star near a bin edge is judged against both bins and an empty bin inside the range borrows
from its neighbours.  Bounds are NaN for rows without a phase, with a phase that has no
envelope, with NaN Teff, or with Teff outside the phase's whole range; the last case is
reported on its own (``outside_range``), since a rule may want to flag it (an "RGB" star
at 9000 K is outside the red giant branch whatever its log g).

Radius bounds follow from Stefan-Boltzmann, ``log R = (log L - 4 log(Teff/Teff_sun)) / 2``,
at the window's Teff edges (largest L at the coolest edge, smallest L at the hottest), then
clipped to the phase's global log R range: every model point of the phase lies inside them.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import cache
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from catcheck.physics.stellar import log_luminosity_stefan_boltzmann_log
from catcheck.physics.tables import number, read_table, shipped_text
from catcheck.quantities import PHASE_CODES, PHASE_INDEX

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

ENVELOPE_FILE = "parsec_envelopes.csv"
#: the header columns of the table, in order
COLUMNS = ("phase", "source", "log_teff_low", "log_teff_high", "logg_min", "logg_max",
           "logl_min", "logl_max", "n_points")
#: values of the ``source`` column
SOURCES = ("parsec", "memory")
#: metadata every table must give (``# key: value`` header lines)
REQUIRED_META = ("table", "status", "reference", "source", "bin width")
#: phases that borrow another phase's envelope
ENVELOPE_ALIASES: dict[str, str] = {"BSS": "MS"}
#: phases without an envelope, and why
NOT_COVERED: dict[str, str] = {
    "PAGB": "post-AGB stars cross from ~4000 K to ~200,000 K at nearly constant luminosity",
    "WR": "Wolf-Rayet radii and Teff are defined inside an optically thick wind",
}
#: the per-row bounds :func:`envelope_bounds` returns, in order
BOUND_NAMES = ("logg_min", "logg_max", "logl_min", "logl_max", "log_r_min", "log_r_max")
#: the quantities of a ``# range`` header line
RANGE_KEYS = ("log_g", "log_teff", "log_r", "log_l")

_RANGE_LINE = re.compile(r"#\s*range\s+(?P<phase>\w+)\s+(?P<source>\w+)\s*:\s*(?P<body>.*)")
_SELECTION_LINE = re.compile(r"#\s*selection\s+(?P<phase>\w+)\s+(?P<source>\w+)\s*:\s*(?P<body>.*)")


@dataclass(frozen=True)
class PhaseRange:
    """Global extremes of one (phase, source): of its model points, or of its box.

    Each quantity is a (min, max) pair: ``log_g`` in dex(cm/s2), ``log_teff`` in dex(K),
    ``log_r`` in dex(Rsun), ``log_l`` in dex(Lsun).  ``n_points`` is the number of model
    points (None for a box from memory); ``selection`` says which points or why the box.
    """

    phase: str
    source: str
    log_g: tuple[float, float]
    log_teff: tuple[float, float]
    log_r: tuple[float, float]
    log_l: tuple[float, float]
    n_points: int | None
    selection: str


@dataclass(frozen=True)
class PhaseEnvelope:
    """One phase's envelope: per log Teff bin, the log g and log L extremes (raw, unpadded).

    Rows of every source of the phase are merged bin by bin (the union).  NaN marks a bin
    inside the phase's range that holds no model point.  ``n_points`` counts model points
    per bin (0 for bins only a box from memory covers).  ``ranges`` has one
    :class:`PhaseRange` per source.
    """

    phase: str
    sources: tuple[str, ...]
    log_teff_low: FloatArray
    log_teff_high: FloatArray
    logg_min: FloatArray
    logg_max: FloatArray
    logl_min: FloatArray
    logl_max: FloatArray
    n_points: NDArray[np.int64]
    ranges: tuple[PhaseRange, ...]

    @property
    def log_teff_range(self) -> tuple[float, float]:
        """The phase's whole range of log Teff: [first bin's low edge, last bin's high edge)."""
        return float(self.log_teff_low[0]), float(self.log_teff_high[-1])

    @property
    def log_r_range(self) -> tuple[float, float]:
        """The phase's global log R range (union over its sources), dex(Rsun)."""
        return (min(r.log_r[0] for r in self.ranges), max(r.log_r[1] for r in self.ranges))


class EnvelopeBounds(NamedTuple):
    """Per-row bounds from :func:`envelope_bounds` (NaN where no bound applies).

    ``covered``: the row's phase has an envelope; ``outside_range``: it has one, the row's
    Teff is finite and lies outside the phase's whole Teff range (bounds are then NaN).
    """

    logg_min: FloatArray
    logg_max: FloatArray
    logl_min: FloatArray
    logl_max: FloatArray
    log_r_min: FloatArray
    log_r_max: FloatArray
    covered: BoolArray
    outside_range: BoolArray


@dataclass(frozen=True)
class _Lookup:
    """One phase's bins ready for lookup: the bin edges (one more than bins, increasing)
    and, per bound of :data:`BOUND_NAMES`, the neighbour-window extreme of every bin."""

    edges: FloatArray
    bounds: dict[str, FloatArray]


# =========================================================================================
# Public functions
# =========================================================================================


def envelope_phases() -> tuple[str, ...]:
    """Phase codes with an envelope (those of the table plus aliases), in PHASE_CODES order."""
    have = set(_table()[0]) | {alias for alias, target in ENVELOPE_ALIASES.items()
                               if target in _table()[0]}
    return tuple(code for code in PHASE_CODES if code in have)


def phase_envelope(phase: str) -> PhaseEnvelope:
    """The envelope table of one phase code (BSS gives the MS envelope).

    Raises ``KeyError`` for a phase without an envelope (PAGB, WR) or an unknown code.
    The envelopes of PARSEC phases are unions over [M/H] -2.0 .. +0.5 and ages up to the
    age of the Universe of the PARSEC v1.2S isochrones (Bressan et al. 2012); see the module
    docstring for the phases from memory.
    """
    envelopes = _table()[0]
    target = ENVELOPE_ALIASES.get(phase, phase)
    if target not in envelopes:
        if phase in NOT_COVERED:
            raise KeyError(f"phase {phase} has no envelope: {NOT_COVERED[phase]}")
        raise KeyError(f"no envelope for phase {phase!r}; phases with one: "
                       f"{', '.join(envelope_phases())}")
    return envelopes[target]


def envelope_bounds(phase_codes: ArrayLike, log_teff: ArrayLike, margin: float = 0.0
                    ) -> EnvelopeBounds:
    """Bounds on log g, log L and log R for each row's phase at its log Teff (vectorised).

    ``phase_codes``: integer indices into :data:`catcheck.quantities.PHASE_CODES` (-1 for no
    phase); ``log_teff``: log10 Teff/K; scalars or arrays of one shape.  Each row is looked
    up in its phase's bins with the neighbour rule of the module docstring.  Envelopes from
    PARSEC v1.2S (Bressan et al. 2012) are unions over metallicity and age; the bounds are
    raw (no padding) unless a rule asks for a ``margin`` (dex, taken off every minimum and
    added to every maximum).  Bounds are NaN for rows with no phase, a phase without an
    envelope (PAGB, WR) or an unknown code, NaN Teff, or Teff outside the phase's range
    (then ``outside_range`` is True).  One call serves every quantity: prefer it to the
    single-quantity functions below when a rule needs several.
    """
    codes = np.asarray(phase_codes)
    log_teff = np.asarray(log_teff, dtype=float)
    codes, log_teff = np.broadcast_arrays(codes, log_teff)
    grid = _grid()
    phase = np.where((codes >= 0) & (codes < len(PHASE_CODES)), codes, len(PHASE_CODES))
    # a Teff on a bin edge belongs to the bin above (1e-7 bin absorbs rounding)
    position = np.asarray(log_teff - grid.start)
    position /= grid.width
    position += 1e-7
    with np.errstate(invalid="ignore"):
        np.floor(position, out=position)
        on_grid = (position >= 0) & (position < grid.bins)
    # one flat index per row into the (phase, bin) tables; off the grid: the empty column
    cell = np.where(on_grid, position, grid.bins).astype(np.intp)
    cell += phase.astype(np.intp) * (grid.bins + 1)
    in_range = grid.in_range.ravel().take(cell)
    covered = grid.covered[phase]
    out = {name: np.asarray(table.ravel().take(cell))
           for name, table in _widened(margin).items()}
    outside = covered & np.isfinite(log_teff) & ~in_range
    return EnvelopeBounds(**out, covered=covered, outside_range=outside)


@cache
def _widened(margin: float) -> dict[str, FloatArray]:
    """The grid's bound tables with ``margin`` taken off the minima and added to the maxima."""
    bounds = _grid().bounds
    if margin == 0.0:
        return bounds
    return {name: table - margin if name.endswith("_min") else table + margin
            for name, table in bounds.items()}


@dataclass(frozen=True)
class _Grid:
    """Every phase's lookup on one shared Teff grid: bounds[name][phase code, bin].

    Each table has one column more than the grid has bins, NaN (``in_range`` False), for
    a Teff off the grid; bounds are NaN wherever ``in_range`` is False.
    """

    start: float
    width: float
    bins: int
    bounds: dict[str, FloatArray]
    in_range: BoolArray
    covered: BoolArray  # by phase code; the extra last code stands for 'no phase'


@cache
def _grid() -> _Grid:
    """The per-phase lookups laid on one grid, so a lookup is a single gather per bound."""
    lookups = _lookups()
    width = float(_table()[1]["bin width"])
    start = min(lookup.edges[0] for lookup in lookups.values())
    stop = max(lookup.edges[-1] for lookup in lookups.values())
    bins = round((stop - start) / width)
    codes = len(PHASE_CODES) + 1
    bounds = {name: np.full((codes, bins + 1), np.nan) for name in BOUND_NAMES}
    in_range = np.zeros((codes, bins + 1), dtype=bool)
    covered = np.zeros(codes, dtype=bool)
    for code, lookup in lookups.items():
        first = round((lookup.edges[0] - start) / width)
        span = slice(first, first + len(lookup.edges) - 1)
        for name, values in lookup.bounds.items():
            bounds[name][code, span] = values
        in_range[code, span] = True
        covered[code] = True
    return _Grid(start, width, bins, bounds, in_range, covered)


def logg_bounds(phase_codes: ArrayLike, log_teff: ArrayLike) -> tuple[FloatArray, FloatArray]:
    """(min, max) log g (dex cgs) each row's phase allows at its log Teff; see envelope_bounds."""
    bounds = envelope_bounds(phase_codes, log_teff)
    return bounds.logg_min, bounds.logg_max


def logl_bounds(phase_codes: ArrayLike, log_teff: ArrayLike) -> tuple[FloatArray, FloatArray]:
    """(min, max) log L/Lsun each row's phase allows at its log Teff; see envelope_bounds."""
    bounds = envelope_bounds(phase_codes, log_teff)
    return bounds.logl_min, bounds.logl_max


def log_radius_bounds(phase_codes: ArrayLike, log_teff: ArrayLike
                      ) -> tuple[FloatArray, FloatArray]:
    """(min, max) log R/Rsun each row's phase allows at its log Teff (Stefan-Boltzmann on
    the luminosity bounds at the window's Teff edges, clipped to the phase's log R range)."""
    bounds = envelope_bounds(phase_codes, log_teff)
    return bounds.log_r_min, bounds.log_r_max


def outside_teff_range(phase_codes: ArrayLike, log_teff: ArrayLike) -> BoolArray:
    """True where the row's phase has an envelope and its log Teff lies outside the whole of it."""
    return envelope_bounds(phase_codes, log_teff).outside_range


# =========================================================================================
# The shipped table
# =========================================================================================


@cache
def _table() -> tuple[dict[str, PhaseEnvelope], dict[str, str]]:
    """(envelopes by phase, header metadata) of the shipped table, read once."""
    return read_envelope_table(shipped_text(ENVELOPE_FILE), ENVELOPE_FILE)


@cache
def _lookups() -> dict[int, _Lookup]:
    """Lookup arrays by phase code index (aliases included), built once."""
    result = {}
    for code in envelope_phases():
        result[PHASE_INDEX[code]] = _build_lookup(phase_envelope(code))
    return result


def read_envelope_table(text: str, where: str) -> tuple[dict[str, PhaseEnvelope], dict[str, str]]:
    """Parse an envelope table: (envelopes by phase, metadata).

    ``# key: value`` lines are metadata (:data:`REQUIRED_META` must be present), ``# range``
    and ``# selection`` lines describe each (phase, source), other ``#`` lines are prose;
    then the :data:`COLUMNS` header and one row per (phase, source, bin).  Raises
    ``ValueError`` naming the file and line for anything malformed: unknown phase or
    source, bins not contiguous on the table's grid, a minimum above its maximum, a value
    missing on one side only, a (phase, source) without its range line.
    """
    table = read_table(text, where, columns=COLUMNS,
                       metadata=(*REQUIRED_META, "derived", "date", "max log age"),
                       required=REQUIRED_META, parse_row=_row)
    ranges: dict[tuple[str, str], dict[str, tuple[float, float]]] = {}
    counts: dict[tuple[str, str], int | None] = {}
    selections: dict[tuple[str, str], str] = {}
    for here, line in table.comments:
        _read_comment(line, here, ranges, counts, selections)
    rows: dict[tuple[str, str], list[tuple[float, ...]]] = {}
    for key, values in table.rows:
        rows.setdefault(key, []).append(values)
    width = float(table.metadata["bin width"])
    by_phase: dict[str, list[tuple[str, FloatArray]]] = {}
    for (phase, source), values in rows.items():
        if (phase, source) not in ranges:
            raise ValueError(f"{where}: no '# range {phase} {source}:' line")
        by_phase.setdefault(phase, []).append((source, _checked_bins(
            np.array(values), width, f"{where}, {phase} {source}")))
    envelopes = {}
    for phase, parts in by_phase.items():
        phase_ranges = tuple(
            PhaseRange(phase, source, *(ranges[phase, source][key] for key in RANGE_KEYS),
                       counts.get((phase, source)), selections.get((phase, source), ""))
            for source, _ in parts)
        envelopes[phase] = _merge(phase, parts, width, phase_ranges)
    return envelopes, table.metadata


def _read_comment(line: str, where: str,
                  ranges: dict[tuple[str, str], dict[str, tuple[float, float]]],
                  counts: dict[tuple[str, str], int | None],
                  selections: dict[tuple[str, str], str]) -> None:
    """Read one ``#`` line if it is a range or a selection (metadata and prose pass)."""
    match = _RANGE_LINE.fullmatch(line)
    if match:
        key = (match["phase"], match["source"])
        values: dict[str, tuple[float, float]] = {}
        for item in match["body"].split(";"):
            name, _, value = item.strip().partition("=")
            if name == "n":
                counts[key] = int(value)
            elif name in RANGE_KEYS:
                low, _, high = value.partition("..")
                values[name] = (float(low), float(high))
        if set(values) != set(RANGE_KEYS):
            raise ValueError(f"{where}: a range line needs {', '.join(RANGE_KEYS)}")
        ranges[key] = values
        counts.setdefault(key, None)
        return
    match = _SELECTION_LINE.fullmatch(line)
    if match:
        selections[match["phase"], match["source"]] = match["body"].strip()


def _row(fields: list[str], where: str) -> tuple[tuple[str, str], tuple[float, ...]]:
    """((phase, source), values) of one row: :func:`_row_key`, :func:`_row_values`."""
    return _row_key(fields, where), _row_values(fields, where)


def _row_key(fields: list[str], where: str) -> tuple[str, str]:
    phase, source = fields[0], fields[1]
    if phase not in PHASE_INDEX:
        raise ValueError(f"{where}: unknown phase code {phase!r}")
    if phase in ENVELOPE_ALIASES or phase in NOT_COVERED:
        raise ValueError(f"{where}: phase {phase} must not have rows of its own")
    if source not in SOURCES:
        raise ValueError(f"{where}: source must be one of {', '.join(SOURCES)}, got {source!r}")
    return phase, source


def _row_values(fields: list[str], where: str) -> tuple[float, ...]:
    """(low, high, logg_min, logg_max, logl_min, logl_max, n_points) of one row."""
    values = [number(field, where, name) for field, name in zip(fields[2:], COLUMNS[2:],
                                                                strict=True)]
    low, high, g_lo, g_hi, l_lo, l_hi, _ = values
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        raise ValueError(f"{where}: bin edges must be numbers with low < high")
    pairs = ((g_lo, g_hi), (l_lo, l_hi))
    if any(math.isnan(a) != math.isnan(b) for a, b in pairs) or (
            math.isnan(g_lo) != math.isnan(l_lo)):
        raise ValueError(f"{where}: a bin is either empty (all values blank) or complete")
    if any(a > b for a, b in pairs):
        raise ValueError(f"{where}: a minimum exceeds its maximum")
    return tuple(values)


def _checked_bins(values: FloatArray, width: float, where: str) -> FloatArray:
    """The rows of one (phase, source), checked to be contiguous bins of the table's grid."""
    low, high = values[:, 0], values[:, 1]
    index = np.round(low / width)
    if (np.any(np.abs(index * width - low) > 1e-9) or np.any(np.abs(high - low - width) > 1e-9)
            or np.any(np.diff(index) != 1)):
        raise ValueError(f"{where}: bins must be contiguous, {width} dex wide, in order")
    return values


def _merge(phase: str, parts: list[tuple[str, FloatArray]], width: float,
           ranges: tuple[PhaseRange, ...]) -> PhaseEnvelope:
    """The union, bin by bin, of the rows of every source of one phase."""
    first = min(round(float(v[0, 0]) / width) for _, v in parts)
    last = max(round(float(v[-1, 0]) / width) for _, v in parts)
    size = last - first + 1
    merged = {name: np.full((len(parts), size), np.nan)
              for name in ("logg_min", "logg_max", "logl_min", "logl_max")}
    n_points = np.zeros(size, dtype=np.int64)
    for k, (_, values) in enumerate(parts):
        at = np.round(values[:, 0] / width).astype(np.int64) - first
        for column, name in enumerate(merged, start=2):
            merged[name][k, at] = values[:, column]
        n_points[at] += np.nan_to_num(values[:, 6]).astype(np.int64)
    with np.errstate(invalid="ignore"):
        extremes = {name: (np.fmin.reduce(m, axis=0) if name.endswith("min")
                           else np.fmax.reduce(m, axis=0)) for name, m in merged.items()}
    index = np.arange(first, last + 2)
    edges = np.round(index * width, 10)
    return PhaseEnvelope(phase, tuple(source for source, _ in parts), edges[:-1], edges[1:],
                         **extremes, n_points=n_points, ranges=ranges)


def _build_lookup(envelope: PhaseEnvelope) -> _Lookup:
    """Neighbour-window extremes per bin (module docstring), and the radius bounds."""
    size = len(envelope.logg_min)
    index = np.arange(size)
    filled = ~np.isnan(envelope.logg_min)
    last_filled = np.maximum.accumulate(np.where(filled, index, -1))  # at or before i
    next_filled = np.minimum.accumulate(np.where(filled, index, size)[::-1])[::-1]  # at/after
    left = np.concatenate([[-1], last_filled[:-1]])
    right = np.concatenate([next_filled[1:], [size]])
    left = np.where(left < 0, index, left)
    right = np.where(right >= size, index, right)
    window = np.stack([left, index, right])

    def lowest(values: FloatArray) -> FloatArray:
        return np.fmin.reduce(values[window], axis=0)

    def highest(values: FloatArray) -> FloatArray:
        return np.fmax.reduce(values[window], axis=0)

    logl_min, logl_max = lowest(envelope.logl_min), highest(envelope.logl_max)
    cool_edge, hot_edge = envelope.log_teff_low[left], envelope.log_teff_high[right]
    r_low, r_high = envelope.log_r_range
    # Stefan-Boltzmann inverted: log R = (log L - 4 log(Teff/Teff_sun)) / 2
    log_r_max = 0.5 * (logl_max - log_luminosity_stefan_boltzmann_log(0.0, cool_edge))
    log_r_min = 0.5 * (logl_min - log_luminosity_stefan_boltzmann_log(0.0, hot_edge))
    bounds = (lowest(envelope.logg_min), highest(envelope.logg_max), logl_min, logl_max,
              np.fmax(log_r_min, r_low), np.fmin(log_r_max, r_high))
    return _Lookup(np.append(envelope.log_teff_low, envelope.log_teff_high[-1]),
                   dict(zip(BOUND_NAMES, bounds, strict=True)))
