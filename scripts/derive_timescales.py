"""Derive the evolutionary timescales table from the PARSEC v1.2S isochrones.

Source: PARSEC v1.2S (Bressan A. et al. 2012, MNRAS 427, 127), the file
``parsec_v1.25.h5`` of the ``lachesis-grids`` package, read through ``tests/parsec_data.py``
(its docstring documents the file's layout).  Only that file is read.  The output,
``catcheck/data/parsec_timescales.csv``, is what :mod:`catcheck.physics.evolution` reads
at run time, so catcheck itself never needs the grid package.

Usage::

    python scripts/derive_timescales.py            # (re)write the shipped table
    python scripts/derive_timescales.py --check    # exit 1 if the shipped table differs
    python scripts/derive_timescales.py --out X.csv --date 2025-01-31

The output is deterministic: the same grid file gives the same bytes, apart from the
``date`` header line (``--date``, else ``SOURCE_DATE_EPOCH``, else today in UTC), which
``--check`` ignores.

Derivation rules (the table's header repeats them)
--------------------------------------------------
The grid holds isochrones: for each [M/H] (-2.0 .. +0.5 dex, step 0.25) and log age
(5.00 .. 10.25, step 0.05; below 6.00 only at [M/H] = 0), one point per equivalent
evolutionary point (EEP), each with its initial mass.  Within an isochrone the initial
mass rises with EEP up to the subgiant branch.  A quantity "the age at which the star of
initial mass M reaches EEP e" is found by taking, in every isochrone, the initial mass at
EEP e, and interpolating log age linearly in log initial mass between consecutive
isochrones (ages 0.05 dex apart).

* ``t_MS``, main-sequence lifetime: the age at which the star reaches EEP 454, the
  terminal-age main sequence (TAMS).  EEP 454 is where the PARSEC label turns from 1
  (main sequence) to 2 (subgiant branch): no integer label 1 occurs above it (checked).
  The EEP is used rather than the label because labels are unreliable before the TAMS
  (PHYSICS.md section 8: massive stars keep label 0 through core hydrogen burning, and
  labels are interpolated in EEP, so 13.6% of points carry a non-integer label).  An
  isochrone's EEP-454 point is used only where its label is exactly 2: in 11 young
  isochrones (20-142 Msun at the TAMS) the points around EEP 454 are interpolated across
  a gap between two models of very different mass, the label still rises through EEP 454
  there, and the point is not a model TAMS; the neighbouring isochrones cover those
  masses.
* Low-mass extrapolation (t_MS and t_HeB_end): stars less massive than the point's
  mass in the oldest isochrone (log age 10.25, 17.8 Gyr) get there after the grid ends,
  which gives only a lower limit.  Their log age continues as a straight line in
  (log M, log t) through the oldest isochrone's point, with one slope for every [M/H]:
  the median, over both points and all 11 [M/H], of the chord slope between the
  isochrones at log age 10.00 and 10.25 (the chords range from -3.3 to -4.0; the median,
  rounded to 0.01, is written to the header as ``low_mass_slope``).  One slope keeps the
  extrapolated lifetimes in the order of [M/H] and the end of helium burning after the
  TAMS.  Rows marked ``extrapolated``.  The straight line is a rough guide only (at
  0.1 Msun it gives ~2e13 yr): what the grid supports is "longer than 17.8 Gyr".
* ``t_PMS``, pre-main-sequence contraction time: the first age at which the star's
  radius comes within 0.01 dex of its zero-age main-sequence (ZAMS) radius, interpolated
  linearly in log age on (log R - log R_ZAMS - 0.01).  The ZAMS radius is the smallest
  radius the star has before the TAMS (the minimum over the isochrones of its log R at
  EEP <= 454, radius interpolated linearly in log initial mass along each isochrone).
  The grid's EEP 202 is *not* used as the ZAMS: intermediate-mass stars still contract
  there (2 Msun, solar: log R = 0.31 at EEP 202, minimum 0.19 reached ~5 Myr later).
  Where the youngest isochrone holding the mass already has it within the tolerance,
  the grid gives only an upper limit: the value is that isochrone's age (log age 5.0 at
  [M/H] = 0, else usually 6.0) and the row is marked ``upper_limit``.  Contraction time
  falls with mass, so last the column is made non-increasing in mass: where a mass's own
  value exceeds that of a smaller mass, the smaller mass's value bounds it from above
  (``upper_limit``).  This removes the spikes of 1.1-1.6 Msun stars, whose early
  main-sequence radius stays within ~0.01 dex of its minimum for hundreds of Myr so that
  the 0.01 dex rule becomes unstable, and the spurious values of massive stars whose
  young isochrones are sparse (PARSEC has no pre-main sequence above ~13 Msun).
  A value is not given (``none``) where isochrones lacking the mass leave a gap wider
  than 0.25 dex in age just before the crossing (0.10-0.11 Msun at a few [M/H]).
* ``t_HeB_end``, end of core helium burning: the age at the last point of the star's
  track in the file, i.e. the age at which the star is the most massive point of an
  isochrone.  The file's tracks end at EEP 707 (stars that ignite helium in a degenerate
  core, after the horizontal branch/red clump, label 4) or EEP 1200 (more massive stars,
  label 6): both are the end of core helium burning (labels 4-6; the file has no AGB
  points).  Only isochrones whose last point is EEP 707 or 1200 and is also their most
  massive point are used, and only the contiguous run of them from the oldest isochrone:
  in younger isochrones the massive stars' tracks end earlier (EEP 605, before core
  helium burning), so above that run's largest mass (13-52 Msun depending on [M/H]) the
  table has no value (``none``).

Mass grid: log10 M/Msun from -1.00 (0.1 Msun) to 2.30 (199.5 Msun) in steps of 0.02 dex:
dense enough that interpolating the table linearly in log M reproduces main-sequence
lifetimes computed directly from the grid to within 3.5%, rms 0.5%, over 0.7-100 Msun
(tests/test_evolution_physics.py); the largest differences are at 0.8-1.3 Msun, where
the onset of a convective core kinks the lifetime curve.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

sys.path.insert(0, str(Path(__file__).resolve().parent))  # provenance.py, beside this script

from provenance import (
    DATA,
    ParsecGrid,
    default_date,
    parsec_grid_path,
    provenance_header,
    read_parsec_grid,
    without_date,
)

FloatArray = NDArray[np.float64]

OUTPUT = DATA / "parsec_timescales.csv"
DOCUMENT = DATA / "TIMESCALES.md"

#: log10 initial mass grid of the table: 0.1 .. 199.5 Msun, 0.02 dex apart
LOG_MASS_GRID = np.round(np.arange(-1.00, 2.30 + 1e-9, 0.02), 2)
#: the PARSEC terminal-age main sequence: where the label turns from 1 to 2
TAMS_EEP = 454
#: EEPs at which the file's tracks end after core helium burning (labels 4 and 6)
HEB_END_EEPS = (707, 1200)
#: a star within this much of its ZAMS radius has finished contracting (dex)
ZAMS_RADIUS_TOLERANCE_DEX = 0.01
#: the widest gap in log age (isochrones lacking the mass) a t_PMS may be interpolated over
MAX_AGE_GAP_DEX = 0.25
#: the low-mass extrapolation uses the chord over this many dex of the oldest ages
EXTRAPOLATION_BASE_DEX = 0.25

#: values of the ``*_source`` columns
GRID, EXTRAPOLATED, UPPER_LIMIT, NONE = "grid", "extrapolated", "upper_limit", "none"
#: labels of the PARSEC scheme (integer values; PHYSICS.md section 8)
MS_LABEL, SGB_LABEL = 1.0, 2.0
SOURCE_DTYPE = "<U12"


@dataclass(frozen=True)
class Isochrone:
    """One isochrone of the grid: its log age and, per point, EEP, log M_init, log R, label."""

    log_age: float
    eep: NDArray[np.int64]
    log_mass: FloatArray
    log_r: FloatArray
    label: FloatArray

    def at_eep(self, eep: int) -> int | None:
        """Row of the point at ``eep``, or None when the isochrone does not reach it."""
        rows = np.flatnonzero(self.eep == eep)
        return int(rows[0]) if len(rows) else None


@dataclass(frozen=True)
class Column:
    """One timescale for every mass of :data:`LOG_MASS_GRID`: log10 age (yr) and source."""

    log_age: FloatArray
    source: NDArray[np.str_]


def isochrones(grid: ParsecGrid, feh_index: int) -> list[Isochrone]:
    """The non-empty isochrones of one [M/H], youngest first."""
    starts = np.concatenate([[0], np.cumsum(grid.lengths)])
    n_age = len(grid.age_values)
    result = []
    for age_index in range(n_age):
        segment = feh_index * n_age + age_index
        rows = slice(starts[segment], starts[segment + 1])
        if starts[segment] == starts[segment + 1]:
            continue
        result.append(Isochrone(
            log_age=float(grid.age_values[age_index]),
            eep=grid.columns["eep"][rows].astype(np.int64),
            log_mass=np.log10(grid.columns["initial_mass"][rows]),
            log_r=grid.columns["log_r"][rows],
            label=grid.columns["phase_label"][rows]))
    return result


@dataclass(frozen=True)
class PointTrack:
    """Where one evolutionary point lies in every isochrone used: log M_init, log age.

    Sorted by mass; the age falls strictly as the mass rises (checked), so the age at
    which a star of any mass in range reaches the point is an interpolation.
    """

    log_mass: FloatArray
    log_age: FloatArray

    @classmethod
    def from_points(cls, points: Sequence[tuple[float, float]], what: str) -> PointTrack:
        log_mass, log_age = np.array(points, dtype=float).T
        order = np.argsort(log_mass)
        log_mass, log_age = log_mass[order], log_age[order]
        if np.any(np.diff(log_mass) <= 0) or np.any(np.diff(log_age) >= 0):
            raise ValueError(f"{what}: the mass at the point does not fall steadily with age")
        return cls(log_mass, log_age)

    def oldest_chord_slope(self) -> float:
        """d log t / d log M along the chord over the oldest EXTRAPOLATION_BASE_DEX of age."""
        base = int(np.argmin(np.abs(self.log_age - (self.log_age[0] - EXTRAPOLATION_BASE_DEX))))
        return float((self.log_age[0] - self.log_age[base])
                     / (self.log_mass[0] - self.log_mass[base]))

    def ages(self, low_mass_slope: float) -> Column:
        """log age at which each mass of :data:`LOG_MASS_GRID` reaches the point.

        Masses in the track's range: linear interpolation of log age in log mass
        (``grid``).  Smaller masses reach it after the oldest isochrone: a straight line
        of slope ``low_mass_slope`` through the oldest isochrone's point
        (``extrapolated``).  Larger masses: no value (``none``).
        """
        values = np.interp(LOG_MASS_GRID, self.log_mass, self.log_age,
                           left=np.nan, right=np.nan)
        source = np.where(np.isnan(values), NONE, GRID).astype(SOURCE_DTYPE)
        below = self.log_mass[0] > LOG_MASS_GRID
        values[below] = self.log_age[0] + low_mass_slope * (LOG_MASS_GRID[below]
                                                            - self.log_mass[0])
        source[below] = EXTRAPOLATED
        return Column(values, source)


def tams_track(isos: Sequence[Isochrone], feh: float) -> PointTrack:
    """The TAMS (EEP 454) of every isochrone where it is a model TAMS.

    The EEP-454 point must carry label 2.  A few young isochrones (11 in the grid, all
    at 20-142 Msun) are left out: their points around EEP 454 are interpolated across a
    gap between two models of very different mass, the label there still rises through
    the EEP and the point is not a model TAMS.  No integer label 1 may occur above EEP 454.
    """
    points = []
    for iso in isos:
        if np.any((iso.label == MS_LABEL) & (iso.eep > TAMS_EEP)):
            raise ValueError(f"[M/H] {feh}, log age {iso.log_age}: main-sequence label "
                             f"above EEP {TAMS_EEP}")
        row = iso.at_eep(TAMS_EEP)
        if row is not None and iso.label[row] == SGB_LABEL:
            points.append((iso.log_mass[row], iso.log_age))
    return PointTrack.from_points(points, f"TAMS, [M/H] {feh}")


def helium_burning_end_track(isos: Sequence[Isochrone], feh: float) -> PointTrack:
    """The end of core helium burning: the last (most massive) point of each isochrone.

    Used from the oldest isochrone back to the first one whose last point is not EEP 707
    or 1200 or is not its most massive point (younger isochrones' massive tracks end at
    EEP 605, before core helium burning).
    """
    points = []
    for iso in reversed(isos):
        last = int(np.argmax(iso.log_mass))
        if iso.eep[-1] not in HEB_END_EEPS or last != len(iso.eep) - 1:
            break
        points.append((iso.log_mass[last], iso.log_age))
    return PointTrack.from_points(points, f"end of core helium burning, [M/H] {feh}")


def radius_by_age(isos: Sequence[Isochrone]) -> FloatArray:
    """log R of each grid mass in each isochrone before its TAMS; NaN where not held."""
    log_r = np.full((len(isos), len(LOG_MASS_GRID)), np.nan)
    for k, iso in enumerate(isos):
        unevolved = iso.eep <= TAMS_EEP
        mass, radius = iso.log_mass[unevolved], iso.log_r[unevolved]
        if np.any(np.diff(mass) <= 0):
            raise ValueError(f"log age {iso.log_age}: initial mass not increasing before "
                             "the TAMS")
        log_r[k] = np.interp(LOG_MASS_GRID, mass, radius, left=np.nan, right=np.nan)
    return log_r


def contraction_end(log_age: FloatArray, log_r: FloatArray) -> tuple[float, str]:
    """(log t_PMS, source) of one mass from its log R in each isochrone (NaN: not held)."""
    present = np.flatnonzero(~np.isnan(log_r))
    if len(present) == 0:
        return np.nan, NONE
    excess = log_r[present] - log_r[present].min() - ZAMS_RADIUS_TOLERANCE_DEX
    first = int(np.flatnonzero(excess <= 0)[0])
    if first == 0:
        return float(log_age[present[0]]), UPPER_LIMIT
    ages = log_age[present[first - 1:first + 1]]
    if ages[1] - ages[0] > MAX_AGE_GAP_DEX:
        return np.nan, NONE
    fraction = excess[first - 1] / (excess[first - 1] - excess[first])
    return float(ages[0] + fraction * (ages[1] - ages[0])), GRID


def pre_main_sequence_time(isos: Sequence[Isochrone]) -> Column:
    """log t_PMS (yr) of every grid mass: the contraction rule, then a running minimum.

    Contraction time cannot rise with mass, so where a mass's own value exceeds that of a
    smaller mass, the smaller mass's value bounds it from above (``upper_limit``).
    """
    log_age = np.array([iso.log_age for iso in isos])
    log_r = radius_by_age(isos)
    values = np.full(len(LOG_MASS_GRID), np.nan)
    source = np.full(len(LOG_MASS_GRID), NONE, dtype=SOURCE_DTYPE)
    bound = np.inf
    for j in range(len(LOG_MASS_GRID)):
        values[j], source[j] = contraction_end(log_age, log_r[:, j])
        if values[j] > bound:
            values[j], source[j] = bound, UPPER_LIMIT
        if not np.isnan(values[j]):
            bound = values[j]
    return Column(values, source)


@dataclass(frozen=True)
class Derivation:
    """The derived columns for every [M/H] and the low-mass slope they used."""

    feh: list[float]
    main_sequence: list[Column]
    pre_main_sequence: list[Column]
    helium_burning_end: list[Column]
    low_mass_slope: float
    oldest_log_age: float


def derive(grid: ParsecGrid) -> Derivation:
    """Apply the rules of the module docstring to every [M/H] of the grid."""
    fehs = [float(feh) for feh in grid.feh_values]
    per_feh = [isochrones(grid, index) for index in range(len(fehs))]
    tams = [tams_track(isos, feh) for isos, feh in zip(per_feh, fehs, strict=True)]
    heb_end = [helium_burning_end_track(isos, feh) for isos, feh in zip(per_feh, fehs, strict=True)]
    chords = [track.oldest_chord_slope() for track in (*tams, *heb_end)]
    slope = round(float(np.median(chords)), 2)
    main_sequence = [track.ages(slope) for track in tams]
    for feh, column in zip(fehs, main_sequence, strict=True):
        if np.any(column.source == NONE):
            raise ValueError(f"[M/H] {feh}: the TAMS masses do not reach "
                             f"{10 ** LOG_MASS_GRID[-1]:.0f} Msun")
    return Derivation(fehs, main_sequence, [pre_main_sequence_time(isos) for isos in per_feh],
                      [track.ages(slope) for track in heb_end], slope,
                      float(grid.age_values.max()))


def _number(value: float) -> str:
    return "" if np.isnan(value) else f"{value:.4f}"


def render(derivation: Derivation, path: Path, date: str) -> str:
    """The CSV text: a commented header (provenance, rules, columns), then the rows."""
    lines = provenance_header(
        "Evolutionary timescales of PARSEC v1.2S stars by initial mass and [M/H]",
        table="parsec_timescales", status="computed", script=Path(__file__),
        document=DOCUMENT, grid=path, date=date)
    lines += [
        f"# mass grid: log10 M/Msun = {LOG_MASS_GRID[0]:.2f} .. {LOG_MASS_GRID[-1]:.2f} "
        "step 0.02",
        f"# feh grid: [M/H] = {derivation.feh[0]:.2f} .. {derivation.feh[-1]:.2f} step 0.25",
        f"# oldest_log_age: {derivation.oldest_log_age:.2f}",
        f"# low_mass_slope: {derivation.low_mass_slope:.2f}",
        "#",
        "# Columns: log_mass = log10 initial mass (Msun); feh = [M/H] (dex);",
        "#   log_t_ms = log10 main-sequence lifetime (yr): age at the TAMS (EEP 454);",
        "#   log_t_pms = log10 pre-main-sequence contraction time (yr): first age with",
        "#     log R within 0.01 dex of the star's minimum (ZAMS) radius;",
        "#   log_t_heb_end = log10 age (yr) at the end of core helium burning (end of the",
        "#     file's track, EEP 707 or 1200; empty where the track ends earlier);",
        "#   *_source: grid = interpolated between isochrones;",
        "#     extrapolated = beyond the oldest isochrone (oldest_log_age), where the grid",
        "#     gives a lower limit only: the value continues a straight line of slope",
        "#     low_mass_slope (d log t / d log M) through the oldest isochrone's point;",
        "#     upper_limit = the grid bounds t_PMS from above only: the star is already",
        "#     contracted in the youngest isochrone holding it (value = that age), or a",
        "#     smaller mass contracts sooner (value = the smaller mass's time);",
        "#     none = no value.",
        "# Rows: every log_mass (ascending), within it every feh (ascending).",
        "log_mass,feh,log_t_ms,ms_source,log_t_pms,pms_source,log_t_heb_end,heb_source",
    ]
    columns = list(zip(derivation.feh, derivation.main_sequence,
                       derivation.pre_main_sequence, derivation.helium_burning_end,
                       strict=True))
    for j, log_mass in enumerate(LOG_MASS_GRID):
        for feh, ms, pms, heb in columns:
            lines.append(",".join([
                f"{log_mass:.2f}", f"{feh:.2f}",
                _number(ms.log_age[j]), str(ms.source[j]),
                _number(pms.log_age[j]), str(pms.source[j]),
                _number(heb.log_age[j]), str(heb.source[j])]))
    return "\n".join(lines) + "\n"


def build_table(date: str | None = None) -> str:
    """Derive the table from the installed grid file and return its CSV text."""
    path = parsec_grid_path()
    grid = read_parsec_grid(str(path))
    return render(derive(grid), path, date or default_date())


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=OUTPUT, help=f"default {OUTPUT}")
    parser.add_argument("--date", help="the date for the header (YYYY-MM-DD)")
    parser.add_argument("--check", action="store_true",
                        help="compare with --out instead of writing; exit 1 if they differ")
    args = parser.parse_args(argv)
    text = build_table(args.date)
    if args.check:
        same = args.out.is_file() and without_date(
            args.out.read_text(encoding="utf-8")) == without_date(text)
        print(f"{args.out}: {'up to date' if same else 'differs from the grid derivation'}")
        return 0 if same else 1
    args.out.write_text(text, encoding="utf-8")
    print(f"wrote {args.out} ({len(text.splitlines())} lines)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
