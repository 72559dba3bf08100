"""Invent a cluster catalogue with planted faults: the data behind ``catcheck demo``.

The scenario is fictional: the *Larkspur Open Cluster Survey* (LOCS), a spectroscopic
census of numbered open clusters ("C-017") at 0.3-3 kpc.  Each cluster is a simple stellar
population (one age, one metallicity to 0.03 dex, one distance to 20 pc); its members are
drawn from the Kroupa (2001) IMF, evolved with the relations of
:mod:`catcheck.physics.populations` (PARSEC v1.2S lifetimes and contraction times from
:mod:`catcheck.physics.evolution`, Eker et al. 2018 main sequence placed on PARSEC's,
schematic giant branches, Cummings et al. 2018 / Nauenberg 1972 white dwarfs) and
observed through the survey's selection function.  True values obey Stefan-Boltzmann and
g = GM/R^2 exactly; catalogue values add Gaussian noise with the quoted 1-sigma errors,
some values are missing, and 2.7% of the rows carry one planted fault each (single-star
physics, evolution and cluster membership: :data:`FAULT_KINDS`), listed in a truth table.

Public API: :func:`write_demo`, :func:`tally_faults`, :data:`FAULT_KINDS`,
:class:`DemoFiles`, and :func:`write_next_release` (the survey's next release: some
planted faults fixed, new ones planted, rows removed, added and reordered, with the truth
of what changed, for release-gating demos and tests).  No printing, no command line: the
CLI renders.

Determinism: every random draw comes from ``numpy.random.SeedSequence(seed)`` children,
one for the cluster table and one per chunk of ``CHUNK_ROWS`` rows, so the same
``(rows, seed)`` always gives the same bytes, and memory stays bounded by one chunk.
"""

from __future__ import annotations

import operator
import os
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
from numpy.typing import NDArray

from catcheck.constants import AGE_OF_UNIVERSE, MBOL_SUN
from catcheck.physics import populations as pop
from catcheck.physics.evolution import log_main_sequence_lifetime
from catcheck.physics.main_sequence import eker2018_log_luminosity
from catcheck.physics.populations import Stage
from catcheck.physics.stellar import (
    LN10,
    log_luminosity_stefan_boltzmann,
    log_surface_gravity,
)

FloatArray = NDArray[np.float64]
Generator = np.random.Generator

# =========================================================================================
# The scenario
# =========================================================================================

SURVEY_NAME = "Larkspur Open Cluster Survey"
SURVEY_PREFIX = "LOCS"

#: Rows generated (and written as one Parquet row group) at a time.
CHUNK_ROWS = 1_000_000
#: Stars evolved per call inside a chunk (bounds the temporaries of the physics).
_DRAW_BATCH = 250_000
#: Mean members per cluster; cluster sizes scatter log-normally around it.
MEAN_MEMBERS = 300
CLUSTER_SIZE_SCATTER_DEX = 0.25

#: Cluster ages log-uniform over 10 Myr - 6 Gyr (catalogued to 0.1 Myr).
AGE_RANGE_MYR = (10.0, 6000.0)
#: Cluster metallicity [Fe/H] ~ N(-0.1, 0.15) dex, clipped to -0.8..+0.4 (open clusters
#: of the solar neighbourhood; inside the PARSEC timescale table's -2.0..+0.5).
FEH_MEAN, FEH_SD, FEH_CLIP = -0.1, 0.15, (-0.8, 0.4)
#: A member's true [Fe/H] lies uniformly within this many dex of its cluster's: open
#: clusters are chemically homogeneous to a few hundredths of a dex.
FEH_SPREAD_DEX = 0.03
#: Clusters fill a thin disc uniformly between 0.3 and 3 kpc: p(d) ~ d.
DISTANCE_RANGE_PC = (300.0, 3000.0)
#: Members fill a sphere of this diameter (pc) around the cluster's centre, so their
#: distances, and parallaxes, spread by up to +-half of it.
CLUSTER_DEPTH_PC = 20.0

#: Selection function: members brighter than apparent bolometric magnitude 18 are
#: observed; main-sequence and pre-main-sequence members with probability 0.4 (fibres are
#: shared), evolved stars and white dwarfs always (the survey gives them priority).
MBOL_LIMIT = 18.0
COMPLETENESS: dict[Stage, float] = {
    Stage.PMS: 0.4, Stage.MS: 0.4, Stage.SGB: 1.0, Stage.RGB: 1.0, Stage.CLUMP: 1.0,
    Stage.CHEB: 1.0, Stage.AGB: 1.0, Stage.SUPERGIANT: 1.0, Stage.WD: 1.0,
    Stage.REMNANT: 0.0,
}
IMF_MASS_RANGE = (0.1, 20.0)

#: Quoted 1-sigma errors, drawn per star uniformly within these ranges.  Relative for Teff,
#: radius and mass; in dex for log L and log g; in mas for the parallax.
TEFF_REL_ERR = (0.015, 0.020)
LOG_LUM_ERR = (0.03, 0.05)
RADIUS_REL_ERR = (0.04, 0.05)
MASS_REL_ERR = (0.05, 0.08)
LOG_G_ERR = (0.08, 0.12)
PARALLAX_ERR = (0.02, 0.05)
#: Quoted 1-sigma of [Fe/H] (dex), drawn per star uniformly within this range.
FEH_ERR = (0.03, 0.08)
#: Noise is Gaussian with the quoted sigma, redrawn for the rare star (~1 in 16,000)
#: whose noise in any quantity, or whose Stefan-Boltzmann or surface-gravity residual,
#: would exceed this many (combined) sigma: the demo's false positives then measure the
#: rules, not the noise tail.
NOISE_TRUNCATION_SIGMA = 4.5

#: Fraction of rows with planted faults, shared equally by the fault kinds (each kind
#: gets its share of every chunk, where enough rows can carry it).
FAULT_FRACTION = 0.027
#: Fraction of rows that carry an MK spectral type.
SPECTRAL_TYPE_FRACTION = 0.4


@dataclass(frozen=True)
class SurveyColumns:
    """Column names of the LOCS catalogue (the survey's own style)."""

    id: str = "locs_id"
    cluster: str = "cluster"
    teff: str = "teff"
    teff_err: str = "teff_err"
    log_lum: str = "log_lum"
    log_lum_err: str = "log_lum_err"
    radius: str = "radius"
    radius_err: str = "radius_err"
    mass: str = "mass"
    mass_err: str = "mass_err"
    log_g: str = "log_g"
    log_g_err: str = "log_g_err"
    age: str = "cluster_age_myr"
    feh: str = "fe_h"
    feh_err: str = "fe_h_err"
    parallax: str = "parallax"
    parallax_err: str = "parallax_err"
    evol_class: str = "evol_class"
    sp_type: str = "sp_type"


COLUMNS = SurveyColumns()
_C = COLUMNS

#: Missing-value rate per column; a value and its error go missing together.
MISSING_FRACTION: dict[str, float] = {
    _C.teff: 0.01, _C.log_lum: 0.02, _C.radius: 0.05, _C.mass: 0.03, _C.log_g: 0.02,
    _C.feh: 0.04, _C.parallax: 0.015, _C.evol_class: 0.01,
}
_ERROR_OF = {
    _C.teff: _C.teff_err, _C.log_lum: _C.log_lum_err, _C.radius: _C.radius_err,
    _C.mass: _C.mass_err, _C.log_g: _C.log_g_err, _C.parallax: _C.parallax_err,
    _C.feh: _C.feh_err,
}

#: The survey's evolutionary-state vocabulary, and the phase code each label means.
LABELS: dict[Stage, str] = {
    Stage.PMS: "pre-ms", Stage.MS: "dwarf", Stage.SGB: "subgiant", Stage.RGB: "giant",
    Stage.CLUMP: "clump", Stage.CHEB: "core-he giant", Stage.AGB: "agb",
    Stage.SUPERGIANT: "supergiant", Stage.WD: "white dwarf",
}
PHASE_OF_LABEL: dict[str, str] = {
    "pre-ms": "PMS", "dwarf": "MS", "subgiant": "SGB", "giant": "RGB", "clump": "RC",
    "core-he giant": "CHEB", "agb": "AGB", "supergiant": "RSG", "white dwarf": "WD",
}
_LUMINOSITY_CLASS: dict[Stage, str] = {
    Stage.PMS: "V", Stage.MS: "V", Stage.SGB: "IV", Stage.RGB: "III", Stage.CLUMP: "III",
    Stage.CHEB: "III", Stage.AGB: "III", Stage.SUPERGIANT: "Ib", Stage.WD: "D",
}

_FLOAT_COLUMNS = (
    _C.teff, _C.teff_err, _C.log_lum, _C.log_lum_err, _C.radius, _C.radius_err, _C.mass,
    _C.mass_err, _C.log_g, _C.log_g_err, _C.age, _C.feh, _C.feh_err, _C.parallax,
    _C.parallax_err,
)
SCHEMA = pa.schema(
    [pa.field(_C.id, pa.string(), nullable=False), pa.field(_C.cluster, pa.string())]
    + [pa.field(name, pa.float64()) for name in _FLOAT_COLUMNS]
    + [pa.field(_C.evol_class, pa.string()), pa.field(_C.sp_type, pa.string())]
)
TRUTH_SCHEMA = pa.schema(
    [pa.field("row", pa.int64()), pa.field("id", pa.string()), pa.field("fault", pa.string())]
)


# =========================================================================================
# Planted faults: one entry in _FAULTS plus one small function per kind
# =========================================================================================

Columns = dict[str, FloatArray]
Rows = NDArray[np.intp]
Mask = NDArray[np.bool_]

#: ms_too_old ages a main-sequence star to this multiple of its main-sequence lifetime;
#: giant_too_young makes a giant this many times younger than the lifetime of its mass.
AGE_FAULT_FACTOR = 5.0
#: giant_too_young takes giants of at least this catalogued mass (Msun).  A giant has lost
#: mass (~0.1-0.3 Msun on the red giant branch for low-mass stars; PHYSICS.md section 4),
#: so its present mass only bounds its initial mass from below: 1/5 of the lifetime of a
#: 1.5 Msun giant is still 0.43 of the lifetime of a 1.95 Msun progenitor (0.37 dex, within
#: 3 sigma of a 0.1 dex age error).  From ~4 Msun the age is too young, by > 3 sigma, for
#: any progenitor the giant could have had, at every [Fe/H] and mass error of the survey.
GIANT_TOO_YOUNG_MIN_MASS = 4.0
#: radius_inflated multiplies a radius (and its error) by this factor.
RADIUS_FAULT_FACTOR = 3.0
#: wd_too_young: the age (Myr) given to a white dwarf, younger than any white dwarf.
WD_TOO_YOUNG_MYR = 10.0
#: The giants (log g at most, Teff below) that ms_label_on_giant relabels as dwarfs, and
#: the dwarfs (log g at least, Teff below) that giant_label_on_dwarf relabels as giants.
GIANT_LOGG_MAX, DWARF_LOGG_MIN, COOL_TEFF_MAX = 3.0, 4.4, 5500.0
#: post-main-sequence stages short of a white dwarf: the "giants" of the label faults
_GIANT_STAGES = (Stage.SGB, Stage.RGB, Stage.CLUMP, Stage.CHEB, Stage.AGB, Stage.SUPERGIANT)
#: parallax_outlier moves a member's parallax to twice, or half, its cluster's parallax;
#: half only where that still lies this many quoted errors from the cluster.
PARALLAX_HALF_MIN_ERRORS = 10.0
#: metallicity_outlier moves a member's [Fe/H] this far (dex) from its cluster's.
FEH_SHIFT_DEX = (0.6, 0.8)


@dataclass(frozen=True)
class _Chunk:
    """One chunk's rows as a planting function sees them (arrays changed in place)."""

    cols: Columns  # the catalogue's float columns
    label: NDArray[np.int8]  # the Stage each row's evolutionary label names
    labelled: Mask  # the row has a label (evol_class is not missing)
    cluster: NDArray[np.intp]  # the row's cluster (index into the cluster table)
    cluster_parallax: FloatArray  # mas, 1000 / the distance of the row's cluster
    cluster_feh: FloatArray  # the row's cluster's true [Fe/H]

    def has(self, column: str) -> Mask:
        """Rows where ``column`` holds a value."""
        return self.labelled if column == _C.evol_class else ~np.isnan(self.cols[column])

    def labelled_as(self, *stages: Stage) -> Mask:
        return self.labelled & np.isin(self.label, stages)

    def first_per_cluster(self, mask: Mask) -> Mask:
        """``mask`` thinned to its first row in each cluster."""
        rows = np.flatnonzero(mask)
        first = np.zeros_like(mask)
        first[rows[np.unique(self.cluster[rows], return_index=True)[1]]] = True
        return first

    def lifetime_myr(self, rows: Rows | slice = slice(None)) -> FloatArray:
        """Main-sequence lifetime (Myr) of the catalogued mass at the catalogued [Fe/H].

        :func:`catcheck.physics.evolution.log_main_sequence_lifetime` (PARSEC v1.2S), the
        timescale the evolution rules use; NaN where mass or [Fe/H] is missing.
        """
        log_t = log_main_sequence_lifetime(self.cols[_C.mass][rows], self.cols[_C.feh][rows])
        return 10.0 ** (log_t - 6.0)


def _age_myr(age_myr: FloatArray) -> FloatArray:
    """An age as the survey catalogues it: Myr, to 0.1 Myr."""
    return np.round(age_myr, 1)


def _plant_luminosity_offset(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    # the shift takes the sign of the row's noise residual, so noise never hides part of it
    cols = chunk.cols
    residual = cols[_C.log_lum][idx] - log_luminosity_stefan_boltzmann(
        cols[_C.radius][idx], cols[_C.teff][idx])
    sign = np.where(residual >= 0.0, 1.0, -1.0)
    cols[_C.log_lum][idx] += sign * rng.uniform(0.5, 1.0, idx.size)


def _plant_radius_inflated(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.cols[_C.radius][idx] *= RADIUS_FAULT_FACTOR
    chunk.cols[_C.radius_err][idx] *= RADIUS_FAULT_FACTOR


def _plant_impossible_teff(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    cols = chunk.cols
    hot = rng.random(idx.size) < 0.5
    new = np.where(hot, 10.0 ** rng.uniform(6.0, 7.0, idx.size),
                   rng.uniform(1.0, 100.0, idx.size))
    cols[_C.teff_err][idx] *= new / cols[_C.teff][idx]
    cols[_C.teff][idx] = new


def _plant_age_beyond_universe(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.cols[_C.age][idx] = _age_myr(rng.uniform(20_000.0, 40_000.0, idx.size))


def _plant_impossible_mass(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    cols = chunk.cols
    heavy = rng.random(idx.size) < 0.5
    new = np.where(heavy, rng.uniform(500.0, 5000.0, idx.size), -cols[_C.mass][idx])
    cols[_C.mass_err][idx] *= np.abs(new / cols[_C.mass][idx])
    cols[_C.mass][idx] = new


def _ms_too_old_age(chunk: _Chunk, rows: Rows | slice = slice(None)) -> FloatArray:
    return _age_myr(AGE_FAULT_FACTOR * chunk.lifetime_myr(rows))


def _can_be_ms_too_old(chunk: _Chunk) -> Mask:
    # dwarfs whose aged value stays below the age of the Universe (above ~1.45 Msun)
    fits = _ms_too_old_age(chunk) < AGE_OF_UNIVERSE.value / 1e6
    return chunk.labelled_as(Stage.MS) & fits


def _plant_ms_too_old(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.cols[_C.age][idx] = _ms_too_old_age(chunk, idx)


def _can_be_giant_too_young(chunk: _Chunk) -> Mask:
    massive = chunk.cols[_C.mass] >= GIANT_TOO_YOUNG_MIN_MASS
    return chunk.labelled_as(Stage.RGB, Stage.CLUMP, Stage.CHEB) & massive


def _plant_giant_too_young(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.cols[_C.age][idx] = _age_myr(chunk.lifetime_myr(idx) / AGE_FAULT_FACTOR)


def _plant_wd_too_young(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.cols[_C.age][idx] = WD_TOO_YOUNG_MYR


def _cool(chunk: _Chunk) -> Mask:
    return chunk.cols[_C.teff] < COOL_TEFF_MAX


def _is_cool_giant(chunk: _Chunk) -> Mask:
    low_g = chunk.cols[_C.log_g] <= GIANT_LOGG_MAX
    return chunk.labelled_as(*_GIANT_STAGES) & low_g & _cool(chunk)


def _is_cool_dwarf(chunk: _Chunk) -> Mask:
    # one per cluster: a cluster's evolved members date it (rule cluster-turnoff-age), and
    # nearby clusters, rich in cool dwarfs, would otherwise gain more false giants than
    # they have real ones
    high_g = chunk.cols[_C.log_g] >= DWARF_LOGG_MIN
    return chunk.first_per_cluster(chunk.labelled_as(Stage.MS) & high_g & _cool(chunk))


def _plant_ms_label(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.label[idx] = Stage.MS


def _plant_giant_label(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    chunk.label[idx] = Stage.RGB


def _plant_parallax_outlier(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    centre = chunk.cluster_parallax[idx]
    half_is_far = 0.5 * centre >= PARALLAX_HALF_MIN_ERRORS * chunk.cols[_C.parallax_err][idx]
    half = half_is_far & (rng.random(idx.size) < 0.5)
    chunk.cols[_C.parallax][idx] = np.where(half, 0.5, 2.0) * centre


def _plant_metallicity_outlier(chunk: _Chunk, idx: Rows, rng: Generator) -> None:
    # away from the cluster on the side the row's noise already lies
    feh = chunk.cols[_C.feh]
    sign = np.where(feh[idx] >= chunk.cluster_feh[idx], 1.0, -1.0)
    feh[idx] += sign * rng.uniform(*FEH_SHIFT_DEX, idx.size)


@dataclass(frozen=True)
class _Fault:
    description: str
    needs: tuple[str, ...]  # columns that must hold a value for the fault to be plantable
    plant: Callable[[_Chunk, Rows, Generator], None]
    where: Callable[[_Chunk], Mask] | None = None  # further rows that can carry it

    def candidates(self, chunk: _Chunk) -> Mask:
        ok = np.ones(chunk.label.size, dtype=bool) if self.where is None else self.where(chunk)
        for column in self.needs:
            ok &= chunk.has(column)
        return ok


_FAULTS: dict[str, _Fault] = {
    "luminosity_offset": _Fault(
        "log L shifted by 0.5-1.0 dex up or down, radius and Teff untouched",
        (_C.log_lum, _C.radius, _C.teff), _plant_luminosity_offset),
    "radius_inflated": _Fault(
        "radius (and its error) x3, luminosity and Teff untouched",
        (_C.radius, _C.log_lum, _C.teff), _plant_radius_inflated),
    "impossible_teff": _Fault(
        "Teff above 1,000,000 K or below 100 K (error scaled with the value)",
        (_C.teff,), _plant_impossible_teff),
    "age_beyond_universe": _Fault(
        f"age 20-40 Gyr, older than the Universe ({AGE_OF_UNIVERSE.value / 1e9:.2f} Gyr)",
        (_C.age,), _plant_age_beyond_universe),
    "impossible_mass": _Fault(
        "mass above 500 Msun or negative",
        (_C.mass,), _plant_impossible_mass),
    "ms_too_old": _Fault(
        f"a dwarf's catalogued age set to {AGE_FAULT_FACTOR:g}x the main-sequence lifetime of "
        "its mass and [Fe/H] (PARSEC), where that is below the age of the Universe",
        (_C.mass, _C.feh, _C.evol_class), _plant_ms_too_old, _can_be_ms_too_old),
    "giant_too_young": _Fault(
        f"a red or core-helium giant's (>= {GIANT_TOO_YOUNG_MIN_MASS:g} Msun) catalogued age "
        f"set to 1/{AGE_FAULT_FACTOR:g} of the main-sequence lifetime of its mass and [Fe/H] "
        "(PARSEC)",
        (_C.mass, _C.feh, _C.evol_class), _plant_giant_too_young, _can_be_giant_too_young),
    "wd_too_young": _Fault(
        f"a white dwarf's catalogued age set to {WD_TOO_YOUNG_MYR:g} Myr",
        (_C.evol_class,), _plant_wd_too_young, lambda chunk: chunk.labelled_as(Stage.WD)),
    "ms_label_on_giant": _Fault(
        f"a giant (log g <= {GIANT_LOGG_MAX:g}, Teff < {COOL_TEFF_MAX:g} K) labelled "
        f"{LABELS[Stage.MS]!r} (main sequence)",
        (_C.log_g, _C.teff, _C.evol_class), _plant_ms_label, _is_cool_giant),
    "giant_label_on_dwarf": _Fault(
        f"a dwarf (log g >= {DWARF_LOGG_MIN:g}, Teff < {COOL_TEFF_MAX:g} K) labelled "
        f"{LABELS[Stage.RGB]!r} (red giant branch)",
        (_C.log_g, _C.teff, _C.evol_class), _plant_giant_label, _is_cool_dwarf),
    "parallax_outlier": _Fault(
        "a member's parallax set to twice or half its cluster's (error unchanged)",
        (_C.parallax,), _plant_parallax_outlier),
    "metallicity_outlier": _Fault(
        f"a member's [Fe/H] moved {FEH_SHIFT_DEX[0]:g}-{FEH_SHIFT_DEX[1]:g} dex away from "
        "its cluster's (error unchanged)",
        (_C.feh,), _plant_metallicity_outlier),
}

#: Fault kind -> one-line description, in planting order.
FAULT_KINDS: dict[str, str] = {name: fault.description for name, fault in _FAULTS.items()}
CLEAN_ROWS = "(clean rows)"


# =========================================================================================
# Public API
# =========================================================================================


@dataclass(frozen=True)
class DemoFiles:
    """Paths written by :func:`write_demo`."""

    catalogue: Path
    profile: Path
    truth: Path


def write_demo(
    out_dir: Path, rows: int = 20_000, seed: int = 1, *, chunk_rows: int = CHUNK_ROWS
) -> DemoFiles:
    """Write an invented LOCS catalogue, its profile and its truth table into ``out_dir``.

    Writes ``catalogue.parquet`` (one row group per chunk of ``chunk_rows`` rows),
    ``profile.toml`` (DESIGN.md format) and ``truth.parquet`` (columns row int64, id string,
    fault string: one row per planted fault, sorted by row).  Each file is written to a
    temporary file in ``out_dir`` and moved into place with :func:`os.replace`.  The same
    ``rows``, ``seed`` and ``chunk_rows`` give the same bytes.
    """
    rows, seed, chunk_rows = (_integer(v, name) for v, name in
                              ((rows, "rows"), (seed, "seed"), (chunk_rows, "chunk_rows")))
    if rows < 1 or chunk_rows < 1:
        raise ValueError(f"rows and chunk_rows must be positive; got {rows}, {chunk_rows}")
    if seed < 0:
        raise ValueError(f"seed must be a non-negative integer; got {seed}")
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files = DemoFiles(out_dir / "catalogue.parquet", out_dir / "profile.toml",
                      out_dir / "truth.parquet")

    clusters = _make_clusters(rows, seed)
    truths: list[pa.Table] = []
    with _atomic_path(files.catalogue) as tmp, pq.ParquetWriter(tmp, SCHEMA) as writer:
        for index, start in enumerate(range(0, rows, chunk_rows)):
            stop = min(rows, start + chunk_rows)
            table, truth = _make_chunk(clusters, start, stop, seed, index)
            writer.write_table(table, row_group_size=chunk_rows)
            truths.append(truth)
            del table
    with _atomic_path(files.truth) as tmp:
        pq.write_table(pa.concat_tables(truths), tmp)
    with _atomic_path(files.profile) as tmp:
        Path(tmp).write_text(profile_toml(), encoding="utf-8")
    return files


def tally_faults(truth: pd.DataFrame, flags: pd.DataFrame, rows: int) -> pd.DataFrame:
    """Per fault kind: how many planted faults the check found, and clean rows it flagged.

    ``truth`` has columns row, id, fault (as written by :func:`write_demo`); ``flags`` is in
    the DESIGN.md flags schema (row, id, rule, severity, ...); ``rows`` is the catalogue's
    row count.  A row counts as flagged when at least one flag of severity ``error`` or
    ``warning`` names it (matched by row).  Returns one row per fault kind (the kinds of
    :data:`FAULT_KINDS` in order, then any other kind found in ``truth``) with columns
    fault, planted, found, missed and rules (comma-separated, sorted ids of the rules that
    flagged those rows), and a final row ``fault = "(clean rows)"`` where planted is the
    number of clean rows, found the clean rows flagged (false positives) and missed the
    clean rows left unflagged.
    """
    serious = flags["severity"].isin(["error", "warning"])
    flagged = flags.loc[serious, ["row", "rule"]].drop_duplicates()
    fault_of_row = pd.Series(truth["fault"].to_numpy(), index=truth["row"].to_numpy())
    flagged = flagged.assign(fault=flagged["row"].map(fault_of_row).fillna(CLEAN_ROWS))
    found = flagged.groupby("fault")["row"].nunique()
    rules = flagged.groupby("fault")["rule"].agg(lambda s: ",".join(sorted(set(s))))
    planted = truth.groupby("fault")["row"].nunique()
    planted[CLEAN_ROWS] = int(rows) - int(truth["row"].nunique())
    kinds = list(FAULT_KINDS) + sorted(set(truth["fault"]) - set(FAULT_KINDS)) + [CLEAN_ROWS]
    table = pd.DataFrame({"fault": kinds})
    table["planted"] = table["fault"].map(planted).fillna(0).astype("int64")
    table["found"] = table["fault"].map(found).fillna(0).astype("int64")
    table["missed"] = table["planted"] - table["found"]
    table["rules"] = table["fault"].map(rules).fillna("").astype(str)
    return table


def run_demo(out_dir: Path, rows: int = 20_000, seed: int = 1) -> str:
    """Write the demo catalogue, check it with the default packs, and tally the faults.

    The report goes to ``out_dir / "report"``.  Returns the text to show: the console
    summary of the check, then per fault kind how many planted faults were found, how
    many clean rows were flagged, and every file written.
    """
    from catcheck.api import check
    from catcheck.report import console_summary

    files = write_demo(Path(out_dir), rows=rows, seed=seed)
    report = Path(out_dir) / "report"
    result = check(files.catalogue, files.profile, out=report)
    tally = tally_faults(pd.read_parquet(files.truth), result.flags, result.summary["rows"])
    lines = [f"{SURVEY_NAME}: {rows:,} invented stars in {out_dir}/catalogue.parquet "
             f"(profile {files.profile.name}, planted faults in {files.truth.name})", "",
             console_summary(result.summary), "", "Planted faults found by the check:"]
    width = max(len(k) for k in tally["fault"])
    lines.append(f"  {'fault':<{width}} {'planted':>9} {'found':>9} {'missed':>8}  rules")
    for entry in tally.iloc[:-1].itertuples():
        lines.append(f"  {entry.fault:<{width}} {entry.planted:>9,} {entry.found:>9,} "
                     f"{entry.missed:>8,}  {entry.rules}")
    clean = tally.iloc[-1]
    # every file of the report, data first, figures last; why there is no page, if none
    kinds = {".parquet": 0, ".json": 1, ".md": 2, ".html": 3}
    written = sorted((p.name for p in report.iterdir()),
                     key=lambda name: (kinds.get(Path(name).suffix, 4), name))
    visual = result.summary.get("visual_report") or {}
    if not visual.get("file") and visual.get("note"):
        written.append(f"report.html {visual['note']}")
    lines += [
        f"  clean rows flagged: {clean.found:,} of {clean.planted:,}",
        "",
        f"Wrote {out_dir}/: {files.catalogue.name}, {files.profile.name}, "
        f"{files.truth.name}; the report in {report}/: {', '.join(written)}. "
        "The demo exits 0: its verdict is expected to fail, because faults were planted.",
        "Next: catcheck explain stefan-boltzmann",
    ]
    return "\n".join(lines)


def profile_toml() -> str:
    """The LOCS profile (DESIGN.md format) mapping the catalogue's columns."""
    c = COLUMNS
    quantities = [
        ("teff", c.teff, "K", c.teff_err),
        ("luminosity", c.log_lum, "dex(Lsun)", c.log_lum_err),
        ("radius", c.radius, "Rsun", c.radius_err),
        ("mass", c.mass, "Msun", c.mass_err),
        ("logg", c.log_g, "dex(cm/s2)", c.log_g_err),
        ("age", c.age, "Myr", None),
        ("feh", c.feh, "dex", c.feh_err),
        ("parallax", c.parallax, "mas", c.parallax_err),
    ]
    lines = [
        f"# {SURVEY_NAME} ({SURVEY_PREFIX}): invented by `catcheck demo`; no real survey.",
        "# Members of numbered open clusters; ages are the cluster's, repeated per member.",
        f'id = "{c.id}"',
        f'group = "{c.cluster}"',
        "",
    ]
    for quantity, column, unit, error in quantities:
        lines += [f"[quantities.{quantity}]", f'column = "{column}"', f'unit = "{unit}"']
        if error:
            lines.append(f'error = "{error}"')
        lines.append("")
    lines += ["[quantities.phase]", f'column = "{c.evol_class}"', ""]
    lines += ["[quantities.spectral_type]", f'column = "{c.sp_type}"', ""]
    lines.append("[phases]")
    lines += [f'"{label}" = "{code}"' for label, code in PHASE_OF_LABEL.items()]
    return "\n".join(lines) + "\n"


# =========================================================================================
# The next release: faults fixed and planted, rows removed, added and reordered
# =========================================================================================

#: Planted faults a later release undoes exactly from the catalogue alone: the radius and
#: its error divided by RADIUS_FAULT_FACTOR again, or the age set back to the cluster's
#: (the age every unfaulted member of the cluster carries).  Undone, the row is its
#: unfaulted self again.
FIXABLE_FAULTS = ("radius_inflated", "age_beyond_universe", "ms_too_old", "giant_too_young",
                  "wd_too_young")
#: Faults a later release plants, each built to trip exactly one rule: kind -> rule id.
#: A spectral type is read by ``spectral-type-teff`` alone.  A parallax is read by the
#: cluster parallax rule and ``parallax-range`` (twice a parallax of a star beyond 290 pc
#: stays far below its 800 mas); ``parallax-distance`` needs a distance the demo lacks.
#: [Fe/H] also enters the lifetime relations and the hydrogen-burning limit, so the
#: metallicity faults go to dwarfs of NEXT_FEH_FAULT_MASS, which live longer than the
#: Universe and lie far above that limit at every [Fe/H] the fault can give.
NEXT_RELEASE_FAULTS: dict[str, str] = {
    "spectral_type_mismatch": "spectral-type-teff",
    "parallax_outlier": "cluster-parallax-outlier",
    "metallicity_outlier": "cluster-metallicity-outlier",
}
#: spectral_type_mismatch gives a star with Teff in this range (K) the dwarf type of a Teff
#: SPECTRAL_FAULT_FACTOR times hotter (below SPECTRAL_FAULT_PIVOT_K) or cooler (above):
#: 0.48 dex off, beyond 19 combined sigma on the dwarf scale.
SPECTRAL_FAULT_TEFF_K = (3000.0, 30000.0)
SPECTRAL_FAULT_PIVOT_K = 10000.0
SPECTRAL_FAULT_FACTOR = 3.0
#: catalogued masses (Msun) of the dwarfs that may receive a metallicity fault
NEXT_FEH_FAULT_MASS = (0.3, 0.7)
#: Shares of the first release the next one changes: clusters removed whole, fixable
#: planted faults fixed, rows added (as whole new clusters), and rows given each new
#: fault kind (at least one each, where a row can carry it).
NEXT_REMOVED_CLUSTER_FRACTION = 0.1
NEXT_FIXED_FRACTION = 0.5
NEXT_ADDED_ROW_FRACTION = 0.1
NEXT_FAULT_FRACTION = 0.002
CHANGES_SCHEMA = pa.schema([
    pa.field("id", pa.string()), pa.field("change", pa.string()),
    pa.field("fault", pa.string()), pa.field("rule", pa.string()),
])


@dataclass(frozen=True)
class NextRelease:
    """What :func:`write_next_release` wrote, and the truth of what changed.

    ``changes`` has one row per changed id (columns of :data:`CHANGES_SCHEMA`): ``change``
    is ``removed`` (the row left the catalogue; ``fault`` names its planted fault, if it
    had one), ``added`` (a clean row of a new cluster), ``fixed`` (``fault`` undone) or
    ``planted`` (a new ``fault``, built to trip ``rule``).  Rows not listed are unchanged,
    though at another position.
    """

    files: DemoFiles
    changes: pd.DataFrame


def write_next_release(first_dir: Path, out_dir: Path, seed: int = 2) -> NextRelease:
    """Write the next release of the demo catalogue in ``first_dir`` into ``out_dir``.

    The next release removes NEXT_REMOVED_CLUSTER_FRACTION of the clusters whole, fixes
    NEXT_FIXED_FRACTION of the planted faults that can be undone (:data:`FIXABLE_FAULTS`),
    plants faults of :data:`NEXT_RELEASE_FAULTS` in rows without one, adds whole new
    clusters of clean stars (NEXT_ADDED_ROW_FRACTION of the rows) and shuffles the rows.
    Clusters leave and arrive whole and the fixed and new faults touch one row each, so no
    other row's cluster statistics move (up to the row sample of clusters above
    :data:`catcheck.groups.SAMPLE_SIZE` members, which follows row numbers).

    Writes ``catalogue.parquet``, ``profile.toml``, ``truth.parquet`` (the faults the next
    release holds, at their new rows) and ``changes.parquet`` (:class:`NextRelease`), each
    atomically.  Reads the first release whole: meant for demo sizes.  The same inputs and
    ``seed`` give the same bytes.
    """
    seed = _integer(seed, "seed")
    if seed < 0:
        raise ValueError(f"seed must be a non-negative integer; got {seed}")
    first_dir, out_dir = Path(first_dir), Path(out_dir)
    table = pq.read_table(first_dir / "catalogue.parquet").cast(SCHEMA)
    truth = pq.read_table(first_dir / "truth.parquet")
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(2,)))
    fault = np.full(table.num_rows, None, dtype=object)
    fault[truth["row"].to_numpy()] = truth["fault"].to_numpy(zero_copy_only=False)

    cluster = table[_C.cluster].to_numpy(zero_copy_only=False)
    names = np.unique(cluster)
    removed_names = rng.choice(names, size=min(len(names) - 1, max(
        1, round(NEXT_REMOVED_CLUSTER_FRACTION * len(names)))), replace=False)
    removed = np.isin(cluster, removed_names)
    changes = [_changes(table[_C.id].filter(pa.array(removed)), "removed", fault[removed])]
    table, fault = table.filter(pa.array(~removed)), fault[~removed]

    fixed = _fixed_rows(rng, fault)
    table = _undo_faults(table, fault, fixed)
    changes.append(_changes(table[_C.id].take(pa.array(fixed)), "fixed", fault[fixed]))
    free = pd.isna(fault)  # rows with no fault, before the fixed ones join them
    fault[fixed] = None

    table, planted = _plant_next_faults(rng, table, free)
    for kind, rows in planted.items():
        changes.append(_changes(table[_C.id].take(pa.array(rows)), "planted",
                                np.full(rows.size, kind, dtype=object),
                                NEXT_RELEASE_FAULTS[kind]))
        fault[rows] = kind

    added = _new_clusters(rng, table, max(1, round(NEXT_ADDED_ROW_FRACTION * table.num_rows)))
    changes.append(_changes(added[_C.id], "added", np.full(added.num_rows, None)))
    table = pa.concat_tables([table, added])
    fault = np.concatenate([fault, np.full(added.num_rows, None, dtype=object)])

    order = rng.permutation(table.num_rows)
    table, fault = table.take(pa.array(order)), fault[order]
    has_fault = np.flatnonzero(~pd.isna(fault))
    new_truth = pa.Table.from_arrays(
        [pa.array(has_fault.astype(np.int64)), table[_C.id].take(pa.array(has_fault)),
         pa.array(fault[has_fault], pa.string())], schema=TRUTH_SCHEMA)
    change_table = pa.concat_tables(changes).sort_by([("change", "ascending"),
                                                      ("id", "ascending")])

    out_dir.mkdir(parents=True, exist_ok=True)
    files = DemoFiles(out_dir / "catalogue.parquet", out_dir / "profile.toml",
                      out_dir / "truth.parquet")
    with _atomic_path(files.catalogue) as tmp:
        pq.write_table(table, tmp, row_group_size=CHUNK_ROWS)
    with _atomic_path(files.truth) as tmp:
        pq.write_table(new_truth, tmp)
    with _atomic_path(out_dir / "changes.parquet") as tmp:
        pq.write_table(change_table, tmp)
    with _atomic_path(files.profile) as tmp:
        Path(tmp).write_text(profile_toml(), encoding="utf-8")
    return NextRelease(files, change_table.to_pandas())


def _changes(ids: pa.Array | pa.ChunkedArray, change: str, faults: np.ndarray,
             rule: str | None = None) -> pa.Table:
    n = len(ids)
    return pa.Table.from_arrays(
        [pa.chunked_array([ids]) if isinstance(ids, pa.Array) else ids,
         pa.array([change] * n, pa.string()), pa.array(faults, pa.string()),
         pa.array([rule] * n, pa.string())], schema=CHANGES_SCHEMA)


def _fixed_rows(rng: Generator, fault: NDArray[np.object_]) -> Rows:
    """NEXT_FIXED_FRACTION of the rows whose fault can be undone (at least one), sorted."""
    fixable = np.flatnonzero(np.isin(fault, FIXABLE_FAULTS))
    count = min(fixable.size, max(1, round(NEXT_FIXED_FRACTION * fixable.size)))
    return np.sort(rng.choice(fixable, size=count, replace=False))


def _undo_faults(table: pa.Table, fault: NDArray[np.object_], rows: Rows) -> pa.Table:
    """``table`` with the faults of ``rows`` undone (see :data:`FIXABLE_FAULTS`)."""
    radius = table[_C.radius].to_numpy().copy()
    radius_err = table[_C.radius_err].to_numpy().copy()
    age = table[_C.age].to_numpy().copy()
    inflated = rows[fault[rows] == "radius_inflated"]
    radius[inflated] /= RADIUS_FAULT_FACTOR
    radius_err[inflated] /= RADIUS_FAULT_FACTOR
    aged = rows[fault[rows] != "radius_inflated"]
    age[aged] = _cluster_values(table, age, pd.isna(fault))[aged]
    for name, values in ((_C.radius, radius), (_C.radius_err, radius_err), (_C.age, age)):
        table = table.set_column(table.schema.get_field_index(name), name, pa.array(values))
    return table


def _cluster_values(table: pa.Table, values: FloatArray, clean: Mask) -> FloatArray:
    """Per row, the median of ``values`` over the clean members of the row's cluster
    (for the catalogued age, the value they all share)."""
    codes = table[_C.cluster].to_numpy(zero_copy_only=False)
    names, cluster = np.unique(codes, return_inverse=True)
    frame = pd.DataFrame({"cluster": cluster[clean], "value": values[clean]})
    medians = frame.groupby("cluster")["value"].median().reindex(range(len(names)))
    return medians.to_numpy()[cluster]


def _plant_next_faults(rng: Generator, table: pa.Table, free: Mask
                       ) -> tuple[pa.Table, dict[str, Rows]]:
    """Plant NEXT_RELEASE_FAULTS in ``free`` rows (rows without a fault); returns the table
    and the rows of each kind.  A cluster's centre is the median of its free rows."""
    cols = {name: table[name].to_numpy().copy() for name in _FLOAT_COLUMNS}
    stage_of = {label: int(stage) for stage, label in LABELS.items()}
    labels = table[_C.evol_class].to_pandas()
    label = labels.map(stage_of).fillna(int(Stage.REMNANT)).to_numpy(dtype=np.int8)
    cluster = np.unique(table[_C.cluster].to_numpy(zero_copy_only=False),
                        return_inverse=True)[1]
    chunk = _Chunk(cols, label, labels.notna().to_numpy(), cluster,
                   _cluster_values(table, cols[_C.parallax], free),
                   _cluster_values(table, cols[_C.feh], free))
    sp_type = table[_C.sp_type].to_numpy(zero_copy_only=False).copy()
    teff = cols[_C.teff]
    lo, hi = SPECTRAL_FAULT_TEFF_K
    m_lo, m_hi = NEXT_FEH_FAULT_MASS
    with np.errstate(invalid="ignore"):
        candidates = {
            "spectral_type_mismatch": (teff >= lo) & (teff <= hi),
            "parallax_outlier": _FAULTS["parallax_outlier"].candidates(chunk),
            "metallicity_outlier": _FAULTS["metallicity_outlier"].candidates(chunk)
            & chunk.labelled_as(Stage.MS) & (cols[_C.mass] >= m_lo) & (cols[_C.mass] <= m_hi),
        }
    count = max(1, round(NEXT_FAULT_FRACTION * table.num_rows))
    taken = ~free
    planted: dict[str, Rows] = {}
    for kind, can in candidates.items():
        options = np.flatnonzero(can & ~taken)
        idx = np.sort(rng.choice(options, size=min(count, options.size), replace=False))
        if kind == "spectral_type_mismatch":
            shown = np.where(teff[idx] < SPECTRAL_FAULT_PIVOT_K,
                             teff[idx] * SPECTRAL_FAULT_FACTOR, teff[idx] / SPECTRAL_FAULT_FACTOR)
            sp_type[idx] = pop.mk_spectral_type(shown, np.full(idx.size, "V", dtype=object))
        else:
            _FAULTS[kind].plant(chunk, idx, rng)
        taken[idx] = True
        planted[kind] = idx
    for name in (_C.parallax, _C.feh):
        table = table.set_column(table.schema.get_field_index(name), name,
                                 pa.array(cols[name]))
    table = table.set_column(table.schema.get_field_index(_C.sp_type), _C.sp_type,
                             pa.array(sp_type, pa.string()))
    return table, planted


def _new_clusters(rng: Generator, table: pa.Table, rows: int) -> pa.Table:
    """About ``rows`` clean stars in whole new clusters, numbered after the last cluster
    of ``table``; the rows that drew a planted fault are left out."""
    numbers = pc.cast(pc.utf8_slice_codeunits(table[_C.cluster], 2), pa.int64())
    clusters = _make_clusters(rows, int(rng.integers(2**62)))
    first_new = int(pc.max(numbers).as_py()) + 1
    new_numbers = clusters.numbers + first_new
    width = max(clusters.number_width, len(str(int(new_numbers.max()))))
    clusters = replace(clusters, numbers=new_numbers, number_width=width,
                       names=_cluster_names(new_numbers, width))
    members, truth = _make_chunk(clusters, 0, rows, int(rng.integers(2**62)), 0)
    keep = np.ones(members.num_rows, dtype=bool)
    keep[truth["row"].to_numpy()] = False
    return members.filter(pa.array(keep))


# =========================================================================================
# Clusters
# =========================================================================================


@dataclass(frozen=True)
class _Clusters:
    names: pa.Array  # "C-017"
    numbers: NDArray[np.int64]
    start: NDArray[np.int64]  # first row of each cluster
    stop: NDArray[np.int64]  # one past the last row
    age_myr: FloatArray
    feh: FloatArray
    distance_pc: FloatArray
    number_width: int
    member_width: int


def _make_clusters(rows: int, seed: int) -> _Clusters:
    """The cluster table: sizes summing to ``rows``, ages, metallicities, distances."""
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(0,)))
    k = max(1, round(rows / MEAN_MEMBERS))
    weights = 10.0 ** rng.normal(0.0, CLUSTER_SIZE_SCATTER_DEX, k)
    sizes = rng.multinomial(rows, weights / weights.sum()).astype(np.int64)
    stop = np.cumsum(sizes)
    # survey numbers are sparse, as if some catalogued clusters were never observed
    numbers = np.sort(rng.choice(np.arange(1, 3 * k + 1), size=k, replace=False))
    width = max(3, len(str(3 * k)))
    lo, hi = np.log10(AGE_RANGE_MYR)
    age = np.round(10.0 ** rng.uniform(lo, hi, k), 1)
    feh = np.clip(rng.normal(FEH_MEAN, FEH_SD, k), *FEH_CLIP)
    d0, d1 = DISTANCE_RANGE_PC
    distance = np.sqrt(rng.uniform(d0**2, d1**2, k))
    return _Clusters(_cluster_names(numbers, width), numbers, stop - sizes, stop, age, feh,
                     distance, width, max(5, len(str(int(sizes.max())))))


def _cluster_names(numbers: NDArray[np.int64], width: int) -> pa.Array:
    """Survey names of numbered clusters: "C-017"."""
    return pc.binary_join_element_wise("C", _padded(numbers, width), "-")


# =========================================================================================
# Members
# =========================================================================================


def _mass_floor(distance_pc: FloatArray) -> FloatArray:
    """Lowest initial mass whose zero-age main-sequence star is brighter than MBOL_LIMIT.

    Inverts the Eker et al. (2018) MLR on a grid; older dwarfs are brighter, so every
    main-sequence or pre-main-sequence star above the floor passes the magnitude limit.
    """
    log_l_min = -0.4 * (MBOL_LIMIT - 5.0 * np.log10(distance_pc / 10.0) - MBOL_SUN.value)
    grid = np.linspace(np.log10(IMF_MASS_RANGE[0]), np.log10(IMF_MASS_RANGE[1]), 2001)
    log_l = eker2018_log_luminosity(10.0**grid)
    return np.clip(10.0 ** np.interp(log_l_min, log_l, grid), *IMF_MASS_RANGE)


def _draw_members(
    rng: Generator, age_yr: FloatArray, feh: FloatArray, distance_pc: FloatArray
) -> tuple[NDArray[np.int8], pop.StarProperties]:
    """Members that pass the survey's selection function, one per row.

    Masses come from the Kroupa IMF above the row's magnitude-limit floor (an exact
    truncation, through the CDF); stars the survey would not observe (white dwarfs fainter
    than the limit, neutron stars and black holes, fibre losses) are redrawn.
    """
    n = age_yr.size
    u_floor = pop.kroupa_imf_cdf(_mass_floor(distance_pc), *IMF_MASS_RANGE)
    stage = np.empty(n, dtype=np.int8)
    props = [np.empty(n) for _ in range(4)]
    completeness = np.array([COMPLETENESS[s] for s in Stage])
    todo = np.arange(n)
    for _ in range(200):
        if todo.size == 0:
            break
        rejected = []
        for part in np.array_split(todo, -(-todo.size // _DRAW_BATCH)):
            u = u_floor[part] + rng.random(part.size) * (1.0 - u_floor[part])
            mass = pop.kroupa_imf_inverse_cdf(u, *IMF_MASS_RANGE)
            st, p = pop.stellar_properties(mass, age_yr[part], feh[part],
                                           rng.random(part.size), rng.random(part.size))
            with np.errstate(invalid="ignore"):
                mbol = MBOL_SUN.value - 2.5 * p.log_luminosity + 5.0 * np.log10(
                    distance_pc[part] / 10.0)
                keep = (rng.random(part.size) < completeness[st]) & (mbol <= MBOL_LIMIT)
            done = part[keep]
            stage[done] = st[keep]
            for dest, src in zip(props, p, strict=True):
                dest[done] = src[keep]
            rejected.append(part[~keep])
        todo = np.concatenate(rejected)
    if todo.size:  # pragma: no cover - needs ~1e-60 luck
        raise RuntimeError("selection loop did not converge")
    return stage, pop.StarProperties(*props)


def _noise(
    rng: Generator,
    true: dict[str, FloatArray],
    err: dict[str, FloatArray],
) -> dict[str, FloatArray]:
    """Observed values: true + N(0, quoted sigma), truncated jointly (NOISE_TRUNCATION_SIGMA).

    A row is redrawn, every quantity at once, while the noise of any quantity or its
    Stefan-Boltzmann or surface-gravity residual exceeds NOISE_TRUNCATION_SIGMA sigma.
    """
    n = true[_C.teff].size
    obs = {k: true[k] + err[k] * rng.standard_normal(n) for k in true}
    todo = np.arange(n)
    for _ in range(100):
        z_sb, z_g = _residual_sigmas(obs, err, todo)
        bad = (z_sb > NOISE_TRUNCATION_SIGMA) | (z_g > NOISE_TRUNCATION_SIGMA)
        for k in obs:
            bad |= np.abs(obs[k][todo] - true[k][todo]) > NOISE_TRUNCATION_SIGMA * err[k][todo]
        todo = todo[bad]
        if todo.size == 0:
            break
        for k in obs:
            obs[k][todo] = true[k][todo] + err[k][todo] * rng.standard_normal(todo.size)
    return obs


def _residual_sigmas(
    obs: dict[str, FloatArray], err: dict[str, FloatArray], idx: NDArray[np.intp]
) -> tuple[FloatArray, FloatArray]:
    """|Stefan-Boltzmann| and |surface-gravity| residuals in combined sigma, rows ``idx``."""
    t, st = obs[_C.teff][idx], err[_C.teff][idx]
    r, sr = obs[_C.radius][idx], err[_C.radius][idx]
    m, sm = obs[_C.mass][idx], err[_C.mass][idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        d_sb = obs[_C.log_lum][idx] - log_luminosity_stefan_boltzmann(r, t)
        s_sb = np.hypot(err[_C.log_lum][idx],
                        np.hypot(2.0 * sr / (r * LN10), 4.0 * st / (t * LN10)))
        d_g = obs[_C.log_g][idx] - log_surface_gravity(m, r)
        s_g = np.hypot(err[_C.log_g][idx], np.hypot(sm / (m * LN10), 2.0 * sr / (r * LN10)))
        return np.abs(d_sb) / s_sb, np.abs(d_g) / s_g


def _make_chunk(
    clusters: _Clusters, start: int, stop: int, seed: int, index: int
) -> tuple[pa.Table, pa.Table]:
    """Rows [start, stop) of the catalogue, and their truth table."""
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(1, index)))
    n = stop - start
    row = np.arange(start, stop, dtype=np.int64)
    ci = np.searchsorted(clusters.stop, row, side="right")
    member = row - clusters.start[ci] + 1
    age_myr = clusters.age_myr[ci]
    feh_cluster = clusters.feh[ci]
    distance = clusters.distance_pc[ci] + _depth_offsets(rng, n)

    stage, star = _draw_members(rng, age_myr * 1e6, feh_cluster, distance)
    true = {
        _C.teff: star.teff,
        _C.log_lum: star.log_luminosity,
        _C.radius: star.radius,
        _C.mass: star.mass,
        _C.log_g: log_surface_gravity(star.mass, star.radius),
        _C.parallax: 1000.0 / distance,
        _C.feh: feh_cluster + rng.uniform(-FEH_SPREAD_DEX, FEH_SPREAD_DEX, n),
    }
    err = {
        _C.teff: star.teff * rng.uniform(*TEFF_REL_ERR, n),
        _C.log_lum: rng.uniform(*LOG_LUM_ERR, n),
        _C.radius: star.radius * rng.uniform(*RADIUS_REL_ERR, n),
        _C.mass: star.mass * rng.uniform(*MASS_REL_ERR, n),
        _C.log_g: rng.uniform(*LOG_G_ERR, n),
        _C.parallax: rng.uniform(*PARALLAX_ERR, n),
        _C.feh: rng.uniform(*FEH_ERR, n),
    }
    cols: Columns = _noise(rng, true, err)
    for name, error_name in _ERROR_OF.items():
        cols[error_name] = err[name]
    cols[_C.age] = age_myr.copy()

    missing = {name: rng.random(n) < rate for name, rate in MISSING_FRACTION.items()}
    for name, gone in missing.items():
        if name in cols:
            cols[name][gone] = np.nan
            if name in _ERROR_OF:
                cols[_ERROR_OF[name]][gone] = np.nan

    ids = pc.binary_join_element_wise(
        f"{SURVEY_PREFIX}-",
        _padded(clusters.numbers[ci], clusters.number_width), "-",
        _padded(member, clusters.member_width), "")
    chunk = _Chunk(cols, stage.copy(), ~missing[_C.evol_class], ci,
                   1000.0 / clusters.distance_pc[ci], feh_cluster)
    truth = _plant_faults(rng, chunk, row, ids)

    labels = pa.array([LABELS.get(s, "") for s in Stage])
    evol = pa.DictionaryArray.from_arrays(
        pa.array(chunk.label.astype(np.int32), mask=missing[_C.evol_class]), labels
    ).dictionary_decode()
    sp_type = _spectral_types(rng, stage, star.teff)
    cluster_names = pa.DictionaryArray.from_arrays(
        pa.array(ci.astype(np.int32)), clusters.names).dictionary_decode()

    arrays = [ids, cluster_names] + [pa.array(cols[name]) for name in _FLOAT_COLUMNS]
    arrays += [evol, sp_type]
    return pa.Table.from_arrays(arrays, schema=SCHEMA), truth


def _depth_offsets(rng: Generator, n: int) -> FloatArray:
    """Line-of-sight offsets (pc) of members spread uniformly through a sphere of diameter
    CLUSTER_DEPTH_PC: radius R u^(1/3) and a uniform cosine of the angle to the line of sight."""
    radius = 0.5 * CLUSTER_DEPTH_PC * np.cbrt(rng.random(n))
    return radius * rng.uniform(-1.0, 1.0, n)


def _padded(values: NDArray[np.int64], width: int) -> pa.Array:
    return pc.utf8_lpad(pc.cast(pa.array(values), pa.string()), width=width, padding="0")


def _spectral_types(rng: Generator, stage: NDArray[np.int8], teff: FloatArray) -> pa.Array:
    """MK types from the true Teff and stage, for SPECTRAL_TYPE_FRACTION of the rows."""
    has = rng.random(stage.size) < SPECTRAL_TYPE_FRACTION
    out = np.full(stage.size, None, dtype=object)
    lclass = np.array([_LUMINOSITY_CLASS.get(s, "V") for s in Stage], dtype=object)[stage[has]]
    out[has] = pop.mk_spectral_type(teff[has], lclass)
    return pa.array(out, type=pa.string())


def _plant_faults(
    rng: Generator, chunk: _Chunk, row: NDArray[np.int64], ids: pa.Array
) -> pa.Table:
    """Plant FAULT_FRACTION of the rows with faults, at most one per row, an equal share
    of the chunk per kind (fewer where fewer rows can carry a kind), in _FAULTS order."""
    n = row.size
    count = round(n * FAULT_FRACTION / len(_FAULTS))
    taken = np.zeros(n, dtype=bool)
    picked: list[NDArray[np.intp]] = []
    kinds: list[str] = []
    for kind, fault in _FAULTS.items():
        candidates = np.flatnonzero(fault.candidates(chunk) & ~taken)
        idx = np.sort(rng.choice(candidates, size=min(count, candidates.size), replace=False))
        fault.plant(chunk, idx, rng)
        taken[idx] = True
        picked.append(idx)
        kinds += [kind] * idx.size
    idx = np.concatenate(picked)
    order = np.argsort(idx, kind="stable")
    idx = idx[order]
    return pa.Table.from_arrays(
        [pa.array(row[idx]), ids.take(pa.array(idx)),
         pa.array(np.array(kinds, dtype=object)[order], type=pa.string())],
        schema=TRUTH_SCHEMA,
    )


def _integer(value: object, name: str) -> int:
    if isinstance(value, bool):
        raise ValueError(f"{name} must be an integer; got {value!r}")
    try:
        return operator.index(value)  # type: ignore[arg-type]
    except TypeError:
        raise ValueError(f"{name} must be an integer; got {value!r}") from None


@contextmanager
def _atomic_path(final: Path) -> Iterator[str]:
    """A fresh temporary path beside ``final``, moved onto it with os.replace on success.

    The writer creates the file itself (so it gets the usual permissions); on any error
    the temporary file is removed and ``final`` is left as it was.
    """
    tmp = final.parent / f".{final.name}.{os.getpid()}.{uuid.uuid4().hex}.tmp"
    try:
        yield str(tmp)
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
