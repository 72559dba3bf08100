"""Single-star relations as pure array functions in canonical units.

Canonical units: Teff in K, luminosity in Lsun, radius in Rsun, mass in Msun, log g in
dex(cm s-2).  Solar units are the IAU 2015 nominal values (:mod:`catcheck.constants`).
Every function accepts scalars or numpy arrays and never modifies its inputs.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from catcheck.constants import LOGG_SUN, MBOL_SUN, TEFF_SUN

LN10 = float(np.log(10.0))


def log_luminosity_stefan_boltzmann(radius: ArrayLike, teff: ArrayLike) -> NDArray[np.float64]:
    """log10 L/Lsun of a sphere of radius R radiating as a black body at Teff.

    Stefan-Boltzmann law, L = 4 pi R^2 sigma Teff^4, in nominal solar units:
    ``log L = 2 log R + 4 log(Teff / Teff_sun)``.  With the IAU 2015 Resolution B3
    nominal values (R_sun, L_sun, Teff_sun = 5772 K) this is exact to 1e-6 dex.
    """
    radius = np.asarray(radius, dtype=float)
    teff = np.asarray(teff, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 2.0 * np.log10(radius) + 4.0 * np.log10(teff / TEFF_SUN.value)


def radius_stefan_boltzmann(luminosity: ArrayLike, teff: ArrayLike) -> NDArray[np.float64]:
    """Radius in Rsun from L (Lsun) and Teff (K): the Stefan-Boltzmann law inverted."""
    luminosity = np.asarray(luminosity, dtype=float)
    teff = np.asarray(teff, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.sqrt(luminosity) * (TEFF_SUN.value / teff) ** 2


def log_surface_gravity(mass: ArrayLike, radius: ArrayLike) -> NDArray[np.float64]:
    """log10 g (cgs) from mass (Msun) and radius (Rsun): g = G M / R^2.

    ``log g = log g_sun + log M - 2 log R`` with log g_sun = 4.43807 from the IAU 2015
    nominal solar mass parameter (GM)_sun and radius (Resolution B3).
    """
    mass = np.asarray(mass, dtype=float)
    radius = np.asarray(radius, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return LOGG_SUN.value + np.log10(mass) - 2.0 * np.log10(radius)


def absolute_bolometric_magnitude(luminosity: ArrayLike) -> NDArray[np.float64]:
    """M_bol from L in Lsun: ``M_bol = 4.74 - 2.5 log L`` (IAU 2015 Resolution B2 zero point)."""
    luminosity = np.asarray(luminosity, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return MBOL_SUN.value - 2.5 * np.log10(luminosity)


def luminosity_from_bolometric_magnitude(mbol: ArrayLike) -> NDArray[np.float64]:
    """L in Lsun from absolute bolometric magnitude (IAU 2015 Resolution B2)."""
    mbol = np.asarray(mbol, dtype=float)
    return 10.0 ** (-0.4 * (mbol - MBOL_SUN.value))


def sigma_log_stefan_boltzmann(
    luminosity: ArrayLike,
    sigma_luminosity: ArrayLike,
    radius: ArrayLike,
    sigma_radius: ArrayLike,
    teff: ArrayLike,
    sigma_teff: ArrayLike,
) -> NDArray[np.float64]:
    """Combined 1-sigma, in dex, of ``log L - (2 log R + 4 log Teff)``.

    First-order error propagation with independent errors:
    ``s^2 = (s_L / (L ln10))^2 + (2 s_R / (R ln10))^2 + (4 s_T / (T ln10))^2``.
    """
    luminosity, sigma_luminosity, radius, sigma_radius, teff, sigma_teff = (
        np.asarray(a, dtype=float)
        for a in (luminosity, sigma_luminosity, radius, sigma_radius, teff, sigma_teff)
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        s_l = sigma_luminosity / (luminosity * LN10)
        s_r = 2.0 * sigma_radius / (radius * LN10)
        s_t = 4.0 * sigma_teff / (teff * LN10)
    return np.sqrt(s_l**2 + s_r**2 + s_t**2)
