"""Loader for the PARSEC v1.2S isochrones (Bressan et al. 2012, MNRAS 427, 127).

Source: PARSEC v1.2S, Bressan et al. 2012, lachesis-grids file ``parsec_v1.25.h5`` (the
``lachesis-grids`` package, ``<package dir>/grids/parsec_v1.25.h5``).  Only that file is
read.  We read it with h5py ourselves rather than through the package's own reader, so the
tests depend on the published models and on the layout written down here, not on another
program's parsing.

Layout of the file, as inspected with h5py (lachesis-grids 0.0.9)
-----------------------------------------------------------------
* File attributes: ``grid_name = "PARSEC"``, ``storage = "sparse_v1"``,
  ``shape = (11, 106, 1200, 14)`` ([M/H], ages, EEPs, columns) and ``columns``, the 14
  column names of ``values``: eep, age (log10 yr), initial_mass (Msun), star_mass (present
  mass, Msun), log_Teff (dex K), log_g (dex cm/s2), log_L (dex Lsun), log_R (dex Rsun),
  phase (the PARSEC label), Teff, Mbol, radius, density, dm_deep.
* ``feh_values`` (11): [M/H] = -2.0 .. +0.5 in steps of 0.25.  ``age_values`` (106):
  log10(age/yr) = 5.00 .. 10.25 in steps of 0.05.  ``eep_values`` (1200): 1 .. 1200.
* ``values``: 700,889 rows x 14 columns, float32, one row per model point.
* ``lengths`` (1166 = 11 x 106): rows of segment k = i_feh * 106 + i_age.  Segment k
  starts at row ``sum(lengths[:k])`` (the cumulative sum); ``offsets[k]`` is NOT a row
  index but the position in ``eep_values`` of the segment's first EEP.  Within a segment
  the EEPs are consecutive integers.
* 200 segments are empty: log age 5.00 .. 5.95 (the first 20 ages) exists only at
  [M/H] = 0.0; every other metallicity starts at log age 6.00.
* The ``age`` column is constant within a segment and equals ``age_values[i_age]`` to
  float32 precision (4e-7 dex); ``log_age`` below is taken from ``age_values``.
* The grid runs to log age 10.25 (17.8 Gyr), beyond the age of the Universe.
* Stefan-Boltzmann holds exactly (log_L - 2 log_R - 4 log(Teff/5772 K) <= 1.4e-6 dex, the
  float32 rounding); log_g sits 0.003 dex (median 0.0028) below log(G M/R^2) computed with
  star_mass, by up to 0.24 dex for very massive mass-losing stars.
* The ``phase`` label is the PARSEC label interpolated in EEP: 0 PMS, 1 MS, 2 SGB, 3 RGB,
  4-6 core helium burning; 13.6% of rows hold non-integer values.  Integer labels change
  at EEP 454 (1 -> 2), 500 (2 -> 3), 605-631 (3 -> 4), 707 (4 -> 5) and 808 (5 -> 6).
  Label 0 is not trustworthy (PHYSICS.md section 8): massive stars keep label 0 through
  core hydrogen burning and low-mass stars long after the zero-age main sequence (ZAMS).

Phase rule (the ``phase`` column; ``phase_label`` keeps the label as stored)
---------------------------------------------------------------------------
* integer label 1 -> ``MS``, 2 -> ``SGB``, 3 -> ``RGB``, 4, 5, 6 -> ``CHEB``;
* non-integer labels (interpolated across a phase boundary) -> unclassified (missing);
* label 0 -> ``PMS`` only for a star that is still contracting towards the ZAMS: its EEP
  is below the ZAMS EEP (202, the primary EEP of the grid's scheme at which stars of every
  mass arrive on the main sequence: no integer label other than 0 occurs below it, label 1
  first appears at EEP 219, and the ages of the EEP-202 points follow the PMS contraction
  times of PARSEC in PHYSICS.md section 4) AND its radius exceeds the ZAMS radius of a
  star of the same initial mass and [M/H] by more than 0.01 dex (the "reached the ZAMS"
  tolerance of PHYSICS.md section 4).  The ZAMS radius is interpolated in log initial
  mass along the EEP-202 points of the same [M/H].  Every other label-0 point (on or past
  the ZAMS, or outside the mass range of the ZAMS points) is unclassified.
The rule uses only the model's own radius, mass and EEP: never a verdict of catcheck.
"""

from __future__ import annotations

import importlib.util
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

PARSEC_PACKAGE = "lachesis_grids"
PARSEC_FILE = "parsec_v1.25.h5"
PARSEC_REFERENCE = ("PARSEC v1.2S, Bressan et al. 2012, MNRAS 427, 127; "
                    "lachesis-grids file parsec_v1.25.h5")

#: the file's ``shape`` attribute: [M/H] values, ages, EEPs, columns
PARSEC_SHAPE = (11, 106, 1200, 14)
#: [M/H] of the grid, -2.0 .. +0.5 dex in steps of 0.25
PARSEC_FEH = np.linspace(-2.0, 0.5, 11)
#: the EEP at which the models arrive on the zero-age main sequence (see the module doc)
ZAMS_EEP = 202
#: a star within this much of its ZAMS radius has finished contracting (PHYSICS.md sec. 4)
ZAMS_RADIUS_TOLERANCE_DEX = 0.01

#: PARSEC integer labels with a trustworthy phase code (label 0 is handled on its own)
LABEL_PHASES = {1: "MS", 2: "SGB", 3: "RGB", 4: "CHEB", 5: "CHEB", 6: "CHEB"}
#: the phase codes the loader can give, in evolutionary order
PARSEC_PHASES = ("PMS", "MS", "SGB", "RGB", "CHEB")

#: loader column -> column name in the file's ``columns`` attribute
_FILE_COLUMNS = {"eep": "eep", "initial_mass": "initial_mass", "star_mass": "star_mass",
                 "log_teff": "log_Teff", "log_g": "log_g", "log_l": "log_L",
                 "log_r": "log_R", "phase_label": "phase"}


def parsec_grid_path() -> Path:
    """Where the installed ``lachesis-grids`` package keeps ``parsec_v1.25.h5``.

    Raises ``ModuleNotFoundError`` when the package is not installed and
    ``FileNotFoundError`` when it does not ship the file.
    """
    spec = importlib.util.find_spec(PARSEC_PACKAGE)
    if spec is None:
        raise ModuleNotFoundError(f"the {PARSEC_PACKAGE} package is not installed",
                                  name=PARSEC_PACKAGE)
    package_dirs = spec.submodule_search_locations or [str(Path(spec.origin or ".").parent)]
    candidates = [Path(folder, "grids", PARSEC_FILE) for folder in package_dirs]
    found = next((path for path in candidates if path.is_file()), None)
    if found is None:
        raise FileNotFoundError(f"{PARSEC_FILE} is not in the {PARSEC_PACKAGE} package "
                                f"(looked for {', '.join(map(str, candidates))})")
    return found


@dataclass(frozen=True)
class ParsecGrid:
    """The file's arrays, read once: per-row columns plus the segment of each row."""

    columns: dict[str, np.ndarray]
    feh_index: np.ndarray
    age_index: np.ndarray
    feh_values: np.ndarray
    age_values: np.ndarray
    shape: tuple[int, ...]
    lengths: np.ndarray


@lru_cache(maxsize=2)
def read_parsec_grid(path: str) -> ParsecGrid:
    """Read ``parsec_v1.25.h5`` with h5py and check its layout (module docstring).

    A layout other than the one documented raises ``ValueError``, so a changed file fails
    loudly instead of shifting columns or segments.  Arrays are read-only (they are cached).
    """
    import h5py

    with h5py.File(path, "r") as grid:
        names = [str(name) for name in grid.attrs["columns"]]
        shape = tuple(int(n) for n in grid.attrs["shape"])
        feh_values = grid["feh_values"][:].astype(float)
        age_values = grid["age_values"][:].astype(float)
        lengths = grid["lengths"][:].astype(np.int64)
        values = grid["values"][:]
    n_feh, n_age = shape[0], shape[1]
    problems = []
    if shape != PARSEC_SHAPE:
        problems.append(f"shape {shape}, expected {PARSEC_SHAPE}")
    if len(names) != shape[-1] or values.shape[1] != len(names):
        problems.append(f"{len(names)} column names for {values.shape[1]} columns")
    if len(lengths) != n_feh * n_age:
        problems.append(f"{len(lengths)} segment lengths, expected {n_feh * n_age}")
    if lengths.sum() != len(values):
        problems.append(f"lengths add up to {lengths.sum()} rows, values has {len(values)}")
    missing = sorted(set(_FILE_COLUMNS.values()) - set(names))
    if missing:
        problems.append(f"columns {missing} missing")
    if problems:
        raise ValueError(f"{path}: unexpected layout: {'; '.join(problems)}")

    segment = np.repeat(np.arange(len(lengths)), lengths)
    columns = {key: values[:, names.index(name)].astype(float)
               for key, name in _FILE_COLUMNS.items()}
    feh_index, age_index = np.divmod(segment, n_age)
    stored_age = values[:, names.index("age")].astype(float)
    if np.abs(stored_age - age_values[age_index]).max() > 1e-5:
        raise ValueError(f"{path}: the age column does not match age_values by segment")
    arrays = [*columns.values(), feh_index, age_index, feh_values, age_values, lengths]
    for array in arrays:
        array.flags.writeable = False
    return ParsecGrid(columns, feh_index, age_index, feh_values, age_values, shape, lengths)


def load_parsec_isochrones(path: str | Path | None = None) -> pd.DataFrame:
    """Every model point of the PARSEC v1.2S grid as a DataFrame (a fresh copy each call).

    Columns: ``feh`` ([M/H], dex), ``log_age`` (log10 yr), ``eep`` (int), ``initial_mass``
    and ``star_mass`` (Msun; star_mass is the present mass), ``log_teff`` (dex K),
    ``log_g`` (dex cm/s2), ``log_l`` (dex Lsun), ``log_r`` (dex Rsun), ``phase_label``
    (the PARSEC label as stored, float) and ``phase`` (a categorical of the codes in
    ``PARSEC_PHASES``, missing where unclassified; rule in the module docstring).
    ``attrs`` holds the ``path`` and the ``reference`` to cite.
    """
    path = parsec_grid_path() if path is None else Path(path)
    grid = read_parsec_grid(str(path))
    columns = grid.columns
    frame = pd.DataFrame({
        "feh": grid.feh_values[grid.feh_index],
        "log_age": grid.age_values[grid.age_index],
        "eep": columns["eep"].astype(np.int32),
        **{key: columns[key].copy() for key in ("initial_mass", "star_mass", "log_teff",
                                                 "log_g", "log_l", "log_r", "phase_label")},
        "phase": parsec_phases(grid.feh_index, columns["eep"], columns["initial_mass"],
                               columns["log_r"], columns["phase_label"]),
    })
    frame.attrs.update(path=str(path), reference=PARSEC_REFERENCE)
    return frame


def parsec_phases(feh_index: np.ndarray, eep: np.ndarray, initial_mass: np.ndarray,
                  log_r: np.ndarray, label: np.ndarray) -> pd.Categorical:
    """Phase codes from PARSEC labels by the rule in the module docstring (vectorised)."""
    codes = np.full(len(label), -1, dtype=np.int8)
    integer = label == np.round(label)
    for value, phase in LABEL_PHASES.items():
        codes[integer & (label == value)] = PARSEC_PHASES.index(phase)
    zams_log_r = zams_log_radius(feh_index, eep, initial_mass, log_r)
    with np.errstate(invalid="ignore"):
        contracting = (label == 0) & (eep < ZAMS_EEP) & (
            log_r > zams_log_r + ZAMS_RADIUS_TOLERANCE_DEX)
    codes[contracting] = PARSEC_PHASES.index("PMS")
    return pd.Categorical.from_codes(codes, categories=list(PARSEC_PHASES))


def zams_log_radius(feh_index: np.ndarray, eep: np.ndarray, initial_mass: np.ndarray,
                    log_r: np.ndarray) -> np.ndarray:
    """log R (Rsun) on the ZAMS for each point's initial mass and [M/H]; NaN outside range.

    The ZAMS of one [M/H] is the set of its EEP-202 points (one per isochrone, the star
    just arriving on the main sequence at that age), interpolated linearly in log mass.
    """
    result = np.full(len(eep), np.nan)
    log_mass = np.log10(initial_mass)
    on_zams = eep == ZAMS_EEP
    for index in np.unique(feh_index):
        same_feh = feh_index == index
        zams = on_zams & same_feh
        order = np.argsort(log_mass[zams])
        result[same_feh] = np.interp(log_mass[same_feh], log_mass[zams][order],
                                     log_r[zams][order], left=np.nan, right=np.nan)
    return result
