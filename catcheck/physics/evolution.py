"""Evolutionary timescales by initial mass and metallicity, from PARSEC v1.2S.

Pure, vectorised functions of the initial mass (Msun: the zero-age mass, *not* the
present mass of an evolved star, which mass loss has lowered) and the metallicity [M/H]
(dex; [Fe/H] stands in for it where a catalogue gives only that):

* :func:`log_main_sequence_lifetime`: t_MS, the age at which the star leaves the main
  sequence (core hydrogen exhaustion, the terminal-age main sequence);
* :func:`log_pre_main_sequence_time`: t_PMS, the age at which the contracting star first
  comes within 0.01 dex of its zero-age main-sequence (ZAMS) radius;
* :func:`log_core_helium_burning_end_age` and :func:`post_main_sequence_duration`: the
  age at the end of core helium burning, and the time from the end of the main sequence
  to it;
* :func:`main_sequence_turnoff_mass`: the inverse of t_MS, the initial mass of the stars
  leaving the main sequence in a population of a given age;
* :func:`youngest_white_dwarf_age`: the lifetime of the most massive white-dwarf
  progenitor, so the youngest population that can hold a white dwarf.

Source: the PARSEC v1.2S stellar models (Bressan A., Marigo P., Girardi L. et al. 2012,
MNRAS 427, 127), through the table ``catcheck/data/parsec_timescales.csv``, which
``scripts/derive_timescales.py`` derives from the PARSEC v1.2S isochrones of the
``lachesis-grids`` file ``parsec_v1.25.h5`` (rules and provenance in
``catcheck/data/TIMESCALES.md``).  The table ships with catcheck; the grid package is
needed only to re-derive or test it.

Interpolation is bilinear in (log M, [M/H]) on log t.  The table runs over log M = -1.00
.. 2.30 (0.1-199.5 Msun) in steps of 0.02 dex and [M/H] = -2.0 .. +0.5 in steps of 0.25;
interpolating it reproduces main-sequence lifetimes computed directly from the grid to
within 3.5% (rms 0.5%) over 0.7-100 Msun at every [M/H] (tests/test_evolution_physics.py);
the largest differences are at 0.8-1.3 Msun, where the onset of a convective core kinks
the lifetime curve and the isochrones, 0.05 dex apart in age, resolve it only coarsely.

Validity: initial masses of 0.1-199.5 Msun (NaN outside).  [M/H] is clamped to the
table's range, -2.0 .. +0.5: a more metal-poor star gets the [M/H] = -2.0 timescales
(t_MS changes by at most 3% from -1.75 to -2.0, so the clamp costs little for halo
stars), a more metal-rich one those of +0.5 (t_MS changes by up to 10% from +0.25).
NaN in any input gives NaN out.  Where the grid gives only a bound the value is flagged
rather than hidden:
:func:`main_sequence_lifetime_is_lower_limit` (lifetimes beyond the grid's oldest
isochrone, 17.8 Gyr, are a straight-line extrapolation in log M - log t) and
:func:`pre_main_sequence_time_is_upper_limit`.

Caveats: non-rotating single stars of scaled-solar composition.  Other published grids
differ by 10-25% and rotation lengthens the main sequence by ~20% (PHYSICS.md section
4); a lifetime rule should allow for that.  Present masses of giants and white dwarfs
are lower bounds on the initial mass.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from catcheck.constants import Constant
from catcheck.physics.tables import number, read_table, shipped_text

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

TABLE_FILE = "parsec_timescales.csv"
PARSEC_REFERENCE = "Bressan A. et al. 2012, MNRAS 427, 127 (PARSEC v1.2S)"

MAX_WHITE_DWARF_PROGENITOR_MASS = Constant(
    "maximum initial mass of a white-dwarf progenitor", 8.0, "Msun",
    "Smartt 2009, ARA&A 47, 63: the minimum initial mass of core-collapse supernova "
    "progenitors has converged to 8 +- 1 Msun, from the red-supergiant progenitors of "
    "type II-P supernovae and the most massive white-dwarf progenitors (model dependent)",
    uncertainty=1.0,
)

#: the table's columns, in order
TABLE_COLUMNS = ("log_mass", "feh", "log_t_ms", "ms_source", "log_t_pms", "pms_source",
                 "log_t_heb_end", "heb_source")
#: what a ``*_source`` column may say (definitions in the table's header)
TABLE_SOURCES = ("grid", "extrapolated", "upper_limit", "none")
#: ``# key: value`` header lines kept as metadata; every one is required
TABLE_METADATA = ("reference", "source", "status", "date", "oldest_log_age",
                  "low_mass_slope")


@dataclass(frozen=True)
class TimescaleTable:
    """The shipped table as arrays of shape (mass, [M/H]); log ages in log10 yr."""

    log_mass: FloatArray
    feh: FloatArray
    log_t_ms: FloatArray
    log_t_pms: FloatArray
    pms_upper_limit: FloatArray  # 1.0 where the table holds an upper limit, else 0.0
    log_t_heb_end: FloatArray  # NaN where the file's track ends before helium burning
    metadata: dict[str, str]

    @property
    def oldest_log_age(self) -> float:
        """log10 age (yr) of the grid's oldest isochrone: longer lifetimes are extrapolated."""
        return float(self.metadata["oldest_log_age"])

    @property
    def mass_range(self) -> tuple[float, float]:
        """The initial masses (Msun) the functions accept."""
        return float(10 ** self.log_mass[0]), float(10 ** self.log_mass[-1])


@cache
def timescale_table() -> TimescaleTable:
    """The shipped table, read once (``catcheck/data/parsec_timescales.csv``)."""
    return read_timescale_table(shipped_text(TABLE_FILE), TABLE_FILE)


def read_timescale_table(text: str, where: str) -> TimescaleTable:
    """Parse and check a timescale table (format: the header of the shipped table).

    ``# key: value`` lines for the keys in :data:`TABLE_METADATA` are metadata (all
    required); other ``#`` lines are prose; then the header row and one row per (log M,
    [M/H]), masses ascending and every [M/H] within each mass.  Raises ``ValueError``
    naming the file and line for anything else, including a main-sequence lifetime that
    does not fall strictly with mass (the turn-off mass inverts it).
    """
    table = read_table(text, where, columns=TABLE_COLUMNS, metadata=TABLE_METADATA,
                       required=TABLE_METADATA, parse_row=_timescale_row)
    values = np.array([row for row, _ in table.rows])
    log_mass = np.unique(values[:, 0])
    feh = np.unique(values[:, 1])
    shape = (len(log_mass), len(feh))
    expected = np.stack(np.meshgrid(log_mass, feh, indexing="ij"), axis=-1).reshape(-1, 2)
    if len(values) != shape[0] * shape[1] or not np.array_equal(values[:, :2], expected):
        raise ValueError(f"{where}: rows must cover every (log_mass, feh) once, masses "
                         "ascending and every feh within each mass")
    log_t_ms = values[:, 2].reshape(shape)
    if np.isnan(log_t_ms).any() or np.any(np.diff(log_t_ms, axis=0) >= 0):
        raise ValueError(f"{where}: log_t_ms must be given everywhere and fall strictly "
                         "with mass at every feh")
    pms_upper_limit = np.array([upper for _, upper in table.rows], dtype=float)
    return TimescaleTable(log_mass=log_mass, feh=feh, log_t_ms=log_t_ms,
                          log_t_pms=values[:, 3].reshape(shape),
                          pms_upper_limit=pms_upper_limit.reshape(shape),
                          log_t_heb_end=values[:, 4].reshape(shape),
                          metadata=table.metadata)


def _timescale_row(fields: list[str], here: str) -> tuple[tuple[float, ...], bool]:
    """((log_mass, feh, log_t_ms, log_t_pms, log_t_heb_end), t_PMS is an upper limit)."""
    for source in fields[3::2]:
        if source not in TABLE_SOURCES:
            raise ValueError(f"{here}: source {source!r} is not one of "
                             f"{', '.join(TABLE_SOURCES)}")
    for value, source in zip(fields[2::2], fields[3::2], strict=True):
        if (value == "") != (source == "none"):
            raise ValueError(f"{here}: a value is empty exactly when its source is none")
    values = tuple(number(fields[k], here, TABLE_COLUMNS[k]) for k in (0, 1, 2, 4, 6))
    return values, fields[5] == "upper_limit"


@dataclass(frozen=True)
class _Cells:
    """Where inputs fall in the table: lower node indices and fractions toward the next."""

    mass_index: NDArray[np.intp]
    mass_fraction: FloatArray  # NaN where the mass or [M/H] is NaN or out of range
    feh_index: NDArray[np.intp]
    feh_fraction: FloatArray


def _locate(nodes: FloatArray, x: FloatArray) -> tuple[NDArray[np.intp], FloatArray]:
    """Lower node index of each ``x`` (clipped to the first and last cell) and the fraction
    of the way to the next node (NaN for NaN ``x``)."""
    index = _lower_node(nodes, x)
    fraction = np.subtract(x, nodes.take(index))
    fraction /= np.diff(nodes).take(index)
    return index, fraction


def _lower_node(nodes: FloatArray, x: FloatArray) -> NDArray[np.intp]:
    """``searchsorted(nodes, x, side="right") - 1`` clipped to 0 .. len(nodes) - 2.

    On evenly spaced nodes (the table's) the index is computed, then moved by at most one
    node to the exact answer: much faster than a binary search.  NaN gives some index in
    range (its fraction is NaN whatever the index).
    """
    last = len(nodes) - 2
    step = (nodes[-1] - nodes[0]) / (last + 1)
    even = last >= 0 and np.all(np.abs(nodes - (nodes[0] + step * np.arange(last + 2)))
                                <= 0.01 * step)
    if not even:
        return np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, last)
    # within one node of the answer; fmax and fmin send NaN to 0 and clip infinities
    guess = np.asarray(x - nodes[0])
    guess /= step
    index = np.fmin(np.fmax(guess, 0.0, out=guess), last, out=guess).astype(np.intp)
    with np.errstate(invalid="ignore"):
        index += x >= nodes[1:].take(index)
        index -= x < nodes.take(index)
    return np.clip(index, 0, last, out=index)


def _feh_cells(table: TimescaleTable, feh: FloatArray
               ) -> tuple[NDArray[np.intp], FloatArray]:
    """[M/H] node index and fraction, [M/H] clamped to the table's range (NaN kept)."""
    return _locate(table.feh, np.clip(feh, table.feh[0], table.feh[-1]))


def _cells(table: TimescaleTable, initial_mass: ArrayLike, feh: ArrayLike) -> _Cells:
    mass, metallicity = np.broadcast_arrays(np.asarray(initial_mass, dtype=float),
                                            np.asarray(feh, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        log_mass = np.log10(mass)
    inside = (log_mass >= table.log_mass[0]) & (log_mass <= table.log_mass[-1])
    log_mass = np.where(inside, log_mass, np.nan)
    mass_index, mass_fraction = _locate(table.log_mass, log_mass)
    feh_index, feh_fraction = _feh_cells(table, metallicity)
    mass_fraction = np.where(np.isnan(feh_fraction), np.nan, mass_fraction)
    return _Cells(mass_index, mass_fraction, feh_index, feh_fraction)


def _corners(values: FloatArray, cells: _Cells) -> tuple[FloatArray, ...]:
    """The table values at each row's four cell corners: (i, j), (i, j+1), (i+1, j) and
    (i+1, j+1), i the mass node and j the [M/H] node."""
    columns = values.shape[1]
    flat = values.ravel()
    at = cells.mass_index * columns + cells.feh_index
    return flat.take(at), flat.take(at + 1), flat.take(at + columns), flat.take(at + columns + 1)


def _bilinear(values: FloatArray, cells: _Cells,
              corners: tuple[FloatArray, ...] | None = None) -> FloatArray:
    """Bilinear interpolation; a node with zero weight never matters, even if NaN.

    ``corners``: :func:`_corners` of ``values``, where the caller has them already.
    """
    u, w = cells.mass_fraction, cells.feh_fraction
    corners = _corners(values, cells) if corners is None else corners
    # without NaN or infinity in the table a zero weight gives a zero term by itself
    finite = bool(np.isfinite(values).all())
    total = np.zeros(np.shape(u))
    term = np.empty(np.shape(u))
    rest_u, rest_w = 1.0 - u, 1.0 - w
    weights = ((rest_u, rest_w), (rest_u, w), (u, rest_w), (u, w))
    for (mass_weight, feh_weight), corner in zip(weights, corners, strict=True):
        weight = np.multiply(mass_weight, feh_weight, out=term)
        if not finite:
            total += np.where(weight > 0.0, weight * corner, 0.0)
            continue
        weight *= corner
        total += weight
    total[np.isnan(u)] = np.nan
    return total


def _slope_in_log_mass(values: FloatArray, cells: _Cells, table: TimescaleTable,
                       corners: tuple[FloatArray, ...] | None = None) -> FloatArray:
    """d(value)/d(log M) of the bilinear interpolation: exact within each table cell."""
    u, w = cells.mass_fraction, cells.feh_fraction
    low, low_next, high, high_next = _corners(values, cells) if corners is None else corners
    rise = np.asarray(high - low)
    rise *= 1.0 - w
    rise += np.multiply(w, np.subtract(high_next, low_next))
    rise /= np.diff(table.log_mass).take(cells.mass_index)
    rise[np.isnan(u)] = np.nan
    return rise


def log_main_sequence_lifetime_and_slope(initial_mass: ArrayLike, feh: ArrayLike
                                         ) -> tuple[FloatArray, FloatArray]:
    """:func:`log_main_sequence_lifetime` and its slope d log t_MS / d log M, in one lookup.

    The slope (about -2.5 near 1 Msun, flattening above 20 Msun) turns a mass error into a
    lifetime error: ``sigma_log_t = |slope| sigma_log_M``.
    """
    table = timescale_table()
    cells = _cells(table, initial_mass, feh)
    corners = _corners(table.log_t_ms, cells)
    return (_bilinear(table.log_t_ms, cells, corners),
            _slope_in_log_mass(table.log_t_ms, cells, table, corners))


def log_pre_main_sequence_time_and_slope(initial_mass: ArrayLike, feh: ArrayLike
                                         ) -> tuple[FloatArray, FloatArray]:
    """:func:`log_pre_main_sequence_time` and its slope d log t_PMS / d log M."""
    table = timescale_table()
    cells = _cells(table, initial_mass, feh)
    corners = _corners(table.log_t_pms, cells)
    return (_bilinear(table.log_t_pms, cells, corners),
            _slope_in_log_mass(table.log_t_pms, cells, table, corners))


def log_main_sequence_lifetime(initial_mass: ArrayLike, feh: ArrayLike) -> FloatArray:
    """log10 of the main-sequence lifetime t_MS (yr) of a star of initial mass M (Msun).

    PARSEC v1.2S (Bressan et al. 2012, MNRAS 427, 127): the age at which the star reaches
    the terminal-age main sequence (core hydrogen exhaustion, EEP 454 of the grid, where
    the PARSEC label turns from main sequence to subgiant), interpolated bilinearly in
    (log M, [M/H]) in the shipped table.  For example 9.6 Gyr for the Sun's mass at
    [M/H] = 0, 103 Myr at 5 Msun, 5.0 Myr at 40 Msun.  Valid for 0.1-199.5 Msun (NaN
    outside); [M/H] is clamped to -2.0 .. +0.5.  Beyond the grid's oldest isochrone
    (17.8 Gyr; below ~0.7-0.87 Msun depending on [M/H]) the value is an extrapolation,
    a straight line in log M - log t of slope ``low_mass_slope`` (-3.5) from the
    oldest turn-off: a lower-limit-quality estimate, see
    :func:`main_sequence_lifetime_is_lower_limit`.
    """
    table = timescale_table()
    return _bilinear(table.log_t_ms, _cells(table, initial_mass, feh))


def main_sequence_lifetime_is_lower_limit(initial_mass: ArrayLike, feh: ArrayLike
                                          ) -> BoolArray:
    """True where :func:`log_main_sequence_lifetime` exceeds the grid's oldest isochrone.

    PARSEC v1.2S runs to 17.8 Gyr (log age 10.25): a longer lifetime is known only to be
    longer than that; the value returned is an extrapolation.  False for NaN inputs.
    """
    table = timescale_table()
    with np.errstate(invalid="ignore"):
        return log_main_sequence_lifetime(initial_mass, feh) > table.oldest_log_age


def log_pre_main_sequence_time(initial_mass: ArrayLike, feh: ArrayLike) -> FloatArray:
    """log10 of the pre-main-sequence contraction time t_PMS (yr), initial mass in Msun.

    PARSEC v1.2S (Bressan et al. 2012, MNRAS 427, 127): the first age at which the
    star's radius is within 0.01 dex of its zero-age main-sequence radius (the smallest
    radius it has before the end of the main sequence).  Solar metallicity: ~790 Myr at
    0.1 Msun, 36 Myr at 1 Msun, 10 Myr at 2 Msun, 0.9 Myr at 5 Msun; about half as long
    at [M/H] = -1.  Valid for 0.1-199.5 Msun (NaN outside, and at 0.10-0.11 Msun for
    [M/H] = -2.0, +0.25 and +0.5, where the isochrones leave gaps); [M/H] clamped to
    -2.0 .. +0.5.  Where the grid gives only an upper limit the value is that bound (see
    :func:`pre_main_sequence_time_is_upper_limit`): stars already contracted in the
    youngest isochrone, 1 Myr, above 3.5-6 Msun depending on [M/H]; at [M/H] = 0, whose
    isochrones start at 0.1 Myr, above 13 Msun, where the models have no pre-main
    sequence at all.
    """
    table = timescale_table()
    return _bilinear(table.log_t_pms, _cells(table, initial_mass, feh))


def pre_main_sequence_time_is_upper_limit(initial_mass: ArrayLike, feh: ArrayLike
                                          ) -> BoolArray:
    """True where :func:`log_pre_main_sequence_time` rests on an upper limit of the table.

    That is, where any table node with weight in the interpolation bounds t_PMS from
    above only (the star had already contracted in the youngest isochrone holding it,
    or a smaller mass contracts sooner).  False for NaN inputs.
    """
    table = timescale_table()
    with np.errstate(invalid="ignore"):
        return _bilinear(table.pms_upper_limit, _cells(table, initial_mass, feh)) > 0.0


def log_core_helium_burning_end_age(initial_mass: ArrayLike, feh: ArrayLike) -> FloatArray:
    """log10 of the age (yr) at which a star of initial mass M (Msun) ends core He burning.

    PARSEC v1.2S (Bressan et al. 2012, MNRAS 427, 127): the age at the last point of the
    star's track in ``parsec_v1.25.h5``, which is the end of core helium burning (the
    horizontal branch or red clump for stars that ignite helium in a degenerate core, the
    end of the blue loop phase for more massive ones).  What remains before a white dwarf
    forms, the asymptotic giant branch, is not in the file; it lasts a few percent of the
    lifetime.  Defined for 0.1 Msun up to 13 Msun at [M/H] >= 0, rising to 52 Msun at
    [M/H] <= -1.5 (NaN above: the file's tracks of more massive stars end before core
    helium burning).  Below ~0.7-0.9 Msun the age exceeds the oldest isochrone (17.8 Gyr)
    and is extrapolated like :func:`log_main_sequence_lifetime`.
    """
    table = timescale_table()
    return _bilinear(table.log_t_heb_end, _cells(table, initial_mass, feh))


def post_main_sequence_duration(initial_mass: ArrayLike, feh: ArrayLike) -> FloatArray:
    """Years from the end of the main sequence to the end of core helium burning.

    PARSEC v1.2S (Bressan et al. 2012): 10 ** :func:`log_core_helium_burning_end_age`
    minus 10 ** :func:`log_main_sequence_lifetime`, the subgiant, red-giant and core
    helium-burning phases together (e.g. ~10% of t_MS at 5 Msun, [M/H] = 0).  NaN where
    either age is missing or lies beyond the grid's oldest isochrone (a difference of two
    extrapolations means nothing).
    """
    table = timescale_table()
    cells = _cells(table, initial_mass, feh)
    end = _bilinear(table.log_t_heb_end, cells)
    main_sequence = _bilinear(table.log_t_ms, cells)
    with np.errstate(invalid="ignore"):
        beyond = end > table.oldest_log_age
    return np.where(beyond, np.nan, 10.0 ** end - 10.0 ** main_sequence)


def main_sequence_turnoff_mass(age: ArrayLike, feh: ArrayLike) -> FloatArray:
    """Initial mass (Msun) of the stars leaving the main sequence at ``age`` (yr).

    The exact inverse of :func:`log_main_sequence_lifetime` (PARSEC v1.2S, Bressan et al.
    2012): the mass M with t_MS(M, [M/H]) = age.  In a coeval population of that age, main-
    sequence stars of larger initial mass should not exist (blue stragglers aside).
    Defined for ages between the lifetimes of 199.5 Msun (2.6-2.8 Myr) and 0.1 Msun (an
    extrapolation far beyond the age of the Universe); NaN outside.  Ages above 17.8 Gyr
    give an extrapolated mass.  [M/H] is clamped to -2.0 .. +0.5.
    """
    table = timescale_table()
    log_age, metallicity = np.broadcast_arrays(np.asarray(age, dtype=float),
                                               np.asarray(feh, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        log_age = np.log10(log_age)
    j, w = _feh_cells(table, metallicity)
    columns = table.log_t_ms.shape[1]
    lifetimes = table.log_t_ms.ravel()
    rest = 1.0 - w

    def column(index: NDArray[np.intp]) -> FloatArray:
        """log t_MS at mass node ``index``, interpolated to each row's [M/H]."""
        at = index * columns + j
        return rest * lifetimes.take(at) + w * lifetimes.take(at + 1)

    n_mass = len(table.log_mass)
    low = np.zeros(np.shape(log_age), dtype=np.intp)
    high = np.full(np.shape(log_age), n_mass - 1, dtype=np.intp)
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = (log_age <= column(low)) & (log_age >= column(high))
        for _ in range(math.ceil(math.log2(n_mass - 1))):
            middle = (low + high) // 2
            longer = column(middle) >= log_age  # the middle mass outlives the age
            low = np.where(longer, middle, low)
            high = np.where(longer, high, middle)
        above, below = column(low), column(high)
        fraction = (above - log_age) / (above - below)
        log_mass = table.log_mass[low] + fraction * (table.log_mass[high]
                                                     - table.log_mass[low])
    return np.where(inside, 10.0 ** log_mass, np.nan)


def youngest_white_dwarf_age(feh: ArrayLike,
                             max_progenitor_mass: ArrayLike = MAX_WHITE_DWARF_PROGENITOR_MASS.value
                             ) -> FloatArray:
    """Youngest age (yr) of a population that can hold a white dwarf.

    The age at which the most massive white-dwarf progenitor (initial mass
    ``max_progenitor_mass``, default 8 Msun after Smartt 2009, ARA&A 47, 63: 8 +- 1 Msun)
    ends core helium burning in PARSEC v1.2S (Bressan et al. 2012), via
    :func:`log_core_helium_burning_end_age`.  The asymptotic giant branch that follows
    (absent from the grid) lasts a few percent of the lifetime, so this is a slight
    underestimate, the safe side for a rule that flags white dwarfs in younger
    populations.  About 40 Myr for 8 Msun at every [M/H] (39 Myr at [M/H] = 0), 70 Myr
    for 6 Msun.  NaN where the progenitor mass lies outside the range of
    :func:`log_core_helium_burning_end_age`.
    """
    return 10.0 ** log_core_helium_burning_end_age(max_progenitor_mass, feh)
