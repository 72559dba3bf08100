"""Single-star relations as pure array functions in canonical units.

Canonical units: Teff in K, luminosity in Lsun, radius in Rsun, mass in Msun, log g in
dex(cm s-2).  Solar units are the IAU 2015 nominal values (:mod:`catcheck.constants`).
Every function accepts scalars or numpy arrays and never modifies its inputs.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from catcheck.constants import (
    ATOMIC_MASS_UNIT,
    C_LIGHT,
    G_NEWTON,
    GM_SUN,
    HBAR,
    L_SUN,
    LOGG_SUN,
    M_SUN_KG,
    MBOL_SUN,
    TEFF_SUN,
)

LN10 = float(np.log(10.0))
LOG_TEFF_SUN = float(np.log10(TEFF_SUN.value))


def log_luminosity_stefan_boltzmann(radius: ArrayLike, teff: ArrayLike) -> NDArray[np.float64]:
    """log10 L/Lsun of a sphere of radius R radiating as a black body at Teff.

    Stefan-Boltzmann law, L = 4 pi R^2 sigma Teff^4, in nominal solar units:
    ``log L = 2 log R + 4 log(Teff / Teff_sun)``.  With the IAU 2015 Resolution B3
    nominal values (R_sun, L_sun, Teff_sun = 5772 K) this is exact to 1e-6 dex.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        return log_luminosity_stefan_boltzmann_log(np.log10(np.asarray(radius, dtype=float)),
                                                   np.log10(np.asarray(teff, dtype=float)))


def log_luminosity_stefan_boltzmann_log(log_radius: ArrayLike, log_teff: ArrayLike
                                        ) -> NDArray[np.float64]:
    """:func:`log_luminosity_stefan_boltzmann` from log10 R/Rsun and log10 Teff/K."""
    return 2.0 * np.asarray(log_radius, dtype=float) + 4.0 * (
        np.asarray(log_teff, dtype=float) - LOG_TEFF_SUN)


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
    with np.errstate(divide="ignore", invalid="ignore"):
        return log_surface_gravity_log(np.log10(np.asarray(mass, dtype=float)),
                                       np.log10(np.asarray(radius, dtype=float)))


def log_surface_gravity_log(log_mass: ArrayLike, log_radius: ArrayLike
                            ) -> NDArray[np.float64]:
    """:func:`log_surface_gravity` from log10 M/Msun and log10 R/Rsun."""
    return LOGG_SUN.value + np.asarray(log_mass, dtype=float) - 2.0 * np.asarray(
        log_radius, dtype=float)


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


def log_eddington_luminosity(mass: ArrayLike, hydrogen_fraction: float = 0.7
                             ) -> NDArray[np.float64]:
    """log10 of the Eddington luminosity (Lsun) for electron-scattering opacity.

    ``L_Edd = 4 pi G M c / kappa`` with ``kappa = 0.2 (1 + X) cm^2/g`` (fully ionised gas,
    Thomson scattering; e.g. Kippenhahn, Weigert & Weiss, Stellar Structure and Evolution,
    2nd ed., section 17.7 / 22.4).  With the IAU 2015 nominal (GM)_sun and L_sun this is
    3.84e4 (M/Msun) Lsun for X = 0.7 and 3.27e4 for X = 1 (computed).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        log_mass = np.log10(np.asarray(mass, dtype=float))
    return log_eddington_luminosity_log(log_mass, hydrogen_fraction)


def log_eddington_luminosity_log(log_mass: ArrayLike, hydrogen_fraction: float = 0.7
                                 ) -> NDArray[np.float64]:
    """:func:`log_eddington_luminosity` from log10 M/Msun."""
    kappa_si = 0.02 * (1.0 + hydrogen_fraction)  # 0.2 (1 + X) cm^2/g in m^2/kg
    per_solar_mass = 4.0 * np.pi * GM_SUN.value * C_LIGHT.value / kappa_si / L_SUN.value
    return np.log10(per_solar_mass) + np.asarray(log_mass, dtype=float)


def chandrasekhar_mass(mean_molecular_weight_per_electron: float = 2.0) -> float:
    """The Chandrasekhar mass in Msun for an ideal, fully degenerate, cold electron gas.

    ``M_Ch = omega_3 (sqrt(3 pi) / 2) (hbar c / G)^(3/2) / (mu_e m_u)^2`` with
    omega_3 = 2.01824 from the n = 3 Lane-Emden solution (Chandrasekhar 1939, An
    Introduction to the Study of Stellar Structure, ch. XI); 1.456 Msun for mu_e = 2
    (computed).  Realistic C/O white dwarfs (Coulomb corrections, neutronisation, general
    relativity) become unstable a little lower, near 1.38-1.40 Msun.
    """
    omega_3 = 2.01824
    numerator = omega_3 * np.sqrt(3.0 * np.pi) / 2.0 * (
        HBAR.value * C_LIGHT.value / G_NEWTON.value) ** 1.5
    mass_kg = numerator / (mean_molecular_weight_per_electron * ATOMIC_MASS_UNIT.value) ** 2
    return float(mass_kg / M_SUN_KG.value)


def hydrogen_burning_minimum_mass(feh: ArrayLike) -> NDArray[np.float64]:
    """Lowest mass (Msun) that reaches a hydrogen-burning main sequence, by [M/H].

    Conservative (lower-edge) values of the model range: 0.07 Msun at [M/H] >= -0.5,
    rising linearly to 0.08 Msun at [M/H] <= -1.5 (Chabrier & Baraffe 1997, A&A 327, 1039
    and later models of that family give 0.07-0.075 near solar metallicity and up to
    0.08-0.09 for metal-poor stars; values from memory).  NaN [M/H] is taken as solar.
    """
    feh = np.asarray(feh, dtype=float)
    feh = np.where(np.isnan(feh), 0.0, feh)
    return np.interp(-feh, [0.5, 1.5], [0.07, 0.08])


def distance_from_parallax(parallax: ArrayLike) -> NDArray[np.float64]:
    """Distance in pc from a parallax in mas: ``d = 1000 / parallax``.

    Inverting a parallax is a biased distance estimator when parallax / error < ~5
    (e.g. Bailer-Jones 2015, PASP 127, 994): callers should use it only above that.
    """
    parallax = np.asarray(parallax, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1000.0 / parallax
