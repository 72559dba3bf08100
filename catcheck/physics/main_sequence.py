"""Main-sequence relations as pure array functions (canonical units, sources cited)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]

#: Eker et al. 2018, MNRAS 479, 5491, Table 4 (six-piece MLR, log L = a log M + b, fitted
#: over 0.179-31 Msun); coefficients from memory.  Rows: (upper mass edge, a, b).
EKER_2018_MLR: tuple[tuple[float, float, float], ...] = (
    (0.45, 2.028, -0.976),
    (0.72, 4.572, -0.102),
    (1.05, 5.743, -0.007),
    (2.40, 4.329, 0.010),
    (7.00, 3.967, 0.093),
    (np.inf, 2.865, 1.105),
)

_EKER_EDGES = np.array([row[0] for row in EKER_2018_MLR[:-1]])
_EKER_SLOPES = np.array([row[1] for row in EKER_2018_MLR])
_EKER_ZEROS = np.array([row[2] for row in EKER_2018_MLR])


def _eker2018_piece(mass: FloatArray) -> NDArray[np.intp]:
    """Index of the Eker et al. (2018) MLR piece each mass falls in."""
    return np.searchsorted(_EKER_EDGES, mass, side="left")


def eker2018_log_luminosity(mass: ArrayLike) -> FloatArray:
    """Main-sequence log10 L/Lsun from mass (Msun): Eker et al. 2018 six-piece MLR.

    Eker Z. et al., 2018, MNRAS 479, 5491, Table 4 (coefficients from memory): detached
    eclipsing binaries, 0.179-31 Msun; extrapolated linearly in log M outside that range.
    The six pieces were fitted separately and meet only to within 0.08 dex at the break
    masses (largest at 0.72 and 7 Msun); we keep them as published, well inside the
    relation's own 0.1-0.2 dex scatter.
    """
    mass = np.asarray(mass, dtype=float)
    piece = _eker2018_piece(mass)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _EKER_SLOPES[piece] * np.log10(mass) + _EKER_ZEROS[piece]


def eker2018_slope(mass: ArrayLike) -> FloatArray:
    """d log L / d log M of :func:`eker2018_log_luminosity` at each mass (the piece's slope)."""
    return _EKER_SLOPES[_eker2018_piece(np.asarray(mass, dtype=float))]


def eker2018_log_luminosity_and_slope(mass: ArrayLike) -> tuple[FloatArray, FloatArray]:
    """:func:`eker2018_log_luminosity` and :func:`eker2018_slope` in one pass."""
    mass = np.asarray(mass, dtype=float)
    piece = _eker2018_piece(mass)
    slope = _EKER_SLOPES[piece]
    with np.errstate(divide="ignore", invalid="ignore"):
        return slope * np.log10(mass) + _EKER_ZEROS[piece], slope
