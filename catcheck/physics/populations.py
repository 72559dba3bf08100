"""Stellar populations: pure array functions that invent physically self-consistent stars.

Used by ``catcheck demo`` to build a catalogue whose clean rows obey the physics the rules
check.  Every function is a pure function of numpy arrays (random draws are passed in as
uniform deviates, never drawn here), documents its units and cites its source.  Where a
coefficient could not be verified against the paper it is marked *from memory*; where a
relation is a schematic choice of ours (no published fit) it says so.

Units: mass in Msun, luminosity as log10 L/Lsun, radius in Rsun, Teff in K, ages in yr,
metallicity [M/H] ~ [Fe/H] in dex.  Solar units are the IAU 2015 nominal values; the
Stefan-Boltzmann law and surface gravity come from :mod:`catcheck.physics.stellar`.
Main-sequence lifetimes and contraction times are those of
:mod:`catcheck.physics.evolution` (PARSEC v1.2S) and spectral types use the Teff scales
of :mod:`catcheck.physics.spectral`: the demo's stars are built from the same tables the
rules check them against.
"""

from __future__ import annotations

from enum import IntEnum
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from catcheck.constants import TEFF_SUN
from catcheck.physics.evolution import (
    MAX_WHITE_DWARF_PROGENITOR_MASS,
    log_main_sequence_lifetime,
    log_pre_main_sequence_time,
)
from catcheck.physics.main_sequence import eker2018_log_luminosity
from catcheck.physics.spectral import CLASS_LETTERS, TeffScale, teff_scale
from catcheck.physics.stellar import radius_stefan_boltzmann

FloatArray = NDArray[np.float64]


# =========================================================================================
# Initial mass function
# =========================================================================================

#: Kroupa (2001, MNRAS 322, 231, eq. 2) multi-part power law xi(m) ~ m^-alpha:
#: segment lower edges in Msun and the exponents alpha_0 = 0.3 +- 0.7 (0.01-0.08 Msun),
#: alpha_1 = 1.3 +- 0.5 (0.08-0.5 Msun), alpha_2 = 2.3 +- 0.3 (above 0.5 Msun).
KROUPA_2001_EDGES: tuple[float, ...] = (0.01, 0.08, 0.5)
KROUPA_2001_ALPHAS: tuple[float, ...] = (0.3, 1.3, 2.3)


def _power_law_segments(
    edges: tuple[float, ...], alphas: tuple[float, ...], m_min: float, m_max: float
) -> tuple[list[tuple[float, float, float]], FloatArray]:
    """Segments (lo, hi, alpha) of a continuous broken power law within [m_min, m_max],
    and the cumulative probability at each segment's lower edge (plus 1 at the end)."""
    if not 0.0 < m_min < m_max:
        raise ValueError(f"need 0 < m_min < m_max; got {m_min}, {m_max}")
    if len(edges) != len(alphas) or m_min < edges[0]:
        raise ValueError(f"need one alpha per edge and m_min >= {edges[0]}")
    bounds = (*edges[1:], np.inf)
    coeff = 1.0
    segments: list[tuple[float, float, float]] = []
    weights: list[float] = []
    for i, (edge, upper, alpha) in enumerate(zip(edges, bounds, alphas, strict=True)):
        if i > 0:  # continuity of dN/dm at `edge`: k_{i-1} m^-a_{i-1} = k_i m^-a_i
            coeff *= edge ** (alpha - alphas[i - 1])
        lo, hi = max(edge, m_min), min(upper, m_max)
        if hi <= lo:
            continue
        if alpha == 1.0:
            weights.append(coeff * np.log(hi / lo))
        else:
            weights.append(coeff * (hi ** (1.0 - alpha) - lo ** (1.0 - alpha)) / (1.0 - alpha))
        segments.append((lo, hi, alpha))
    w = np.array(weights)
    return segments, np.concatenate(([0.0], np.cumsum(w))) / w.sum()


def broken_power_law_inverse_cdf(
    u: ArrayLike,
    edges: tuple[float, ...],
    alphas: tuple[float, ...],
    m_min: float,
    m_max: float,
) -> FloatArray:
    """Inverse CDF of a continuous broken power law dN/dm ~ m^-alpha_i, truncated to [m_min, m_max].

    ``edges[i]`` is the lower edge of segment i (the last segment runs to infinity) and
    ``alphas[i]`` its exponent; the coefficients are chosen so that dN/dm is continuous at
    each edge, as in Kroupa (2001).  ``u`` are uniform deviates in [0, 1]; the result has
    the same shape.  Exact inverse-transform sampling, segment by segment.
    """
    u = np.asarray(u, dtype=float)
    segments, cum = _power_law_segments(edges, alphas, m_min, m_max)
    which = np.clip(np.searchsorted(cum, u, side="right") - 1, 0, len(segments) - 1)
    out = np.empty_like(u)
    for j, (lo, hi, alpha) in enumerate(segments):
        sel = which == j
        v = (u[sel] - cum[j]) / (cum[j + 1] - cum[j])
        if alpha == 1.0:
            out[sel] = lo * (hi / lo) ** v
        else:
            p = 1.0 - alpha
            out[sel] = (lo**p + v * (hi**p - lo**p)) ** (1.0 / p)
    return np.clip(out, m_min, m_max)


def broken_power_law_cdf(
    mass: ArrayLike,
    edges: tuple[float, ...],
    alphas: tuple[float, ...],
    m_min: float,
    m_max: float,
) -> FloatArray:
    """CDF of the same truncated broken power law: P(m' <= mass), 0 below m_min, 1 above m_max."""
    m = np.clip(np.asarray(mass, dtype=float), m_min, m_max)
    segments, cum = _power_law_segments(edges, alphas, m_min, m_max)
    out = np.zeros_like(m)
    for j, (lo, hi, alpha) in enumerate(segments):
        sel = (m >= lo) & (m <= hi)
        x = m[sel]
        if alpha == 1.0:
            v = np.log(x / lo) / np.log(hi / lo)
        else:
            p = 1.0 - alpha
            v = (x**p - lo**p) / (hi**p - lo**p)
        out[sel] = cum[j] + v * (cum[j + 1] - cum[j])
    return out


def kroupa_imf_inverse_cdf(u: ArrayLike, m_min: float = 0.1, m_max: float = 20.0) -> FloatArray:
    """Initial masses (Msun) from uniform deviates ``u`` via the Kroupa (2001) IMF.

    Kroupa P., 2001, MNRAS 322, 231, eq. (2): alpha = 1.3 for 0.08-0.5 Msun and 2.3 above
    0.5 Msun (0.3 below 0.08).  The default range 0.1-20 Msun keeps to hydrogen-burning
    stars and to the mass range of the Eker et al. (2018) relations used below.
    """
    return broken_power_law_inverse_cdf(u, KROUPA_2001_EDGES, KROUPA_2001_ALPHAS, m_min, m_max)


def kroupa_imf_cdf(mass: ArrayLike, m_min: float = 0.1, m_max: float = 20.0) -> FloatArray:
    """Cumulative fraction of Kroupa (2001) IMF stars in [m_min, m_max] below ``mass`` (Msun).

    The inverse of :func:`kroupa_imf_inverse_cdf`; used to truncate the IMF per star (for
    instance at a survey's magnitude limit) by drawing u from [cdf(floor), 1).
    """
    return broken_power_law_cdf(mass, KROUPA_2001_EDGES, KROUPA_2001_ALPHAS, m_min, m_max)


# =========================================================================================
# Lifetimes: catcheck.physics.evolution (PARSEC v1.2S), the same timescales the rules use
# =========================================================================================


def log_contraction_time(mass: ArrayLike, feh: ArrayLike) -> FloatArray:
    """log10 of the pre-main-sequence contraction time t_c (yr), for every mass in 0.1-20 Msun.

    :func:`catcheck.physics.evolution.log_pre_main_sequence_time` (PARSEC v1.2S, Bressan
    et al. 2012, MNRAS 427, 127), which is NaN at 0.10-0.11 Msun for [M/H] above 0 or
    below -1.75, where the isochrones leave gaps; there the solar-metallicity value stands
    in (at those masses t_c differs from it by < 0.1 dex up to [M/H] = +0.5 and by
    ~0.25 dex at -2.0).
    """
    mass = np.asarray(mass, dtype=float)
    log_t = log_pre_main_sequence_time(mass, feh)
    gap = np.isnan(log_t) & np.isfinite(mass)
    if gap.any():
        log_t = np.where(gap, log_pre_main_sequence_time(mass, 0.0), log_t)
    return log_t


#: Shape of the approach to the ZAMS: log10(R / R_ZAMS) = 0.01 dex (t / t_c)^-0.85, with
#: t_c the PARSEC contraction time of :func:`log_contraction_time` (defined as the
#: age at which R first comes within 0.01 dex of its ZAMS value, so the form matches it at
#: t = t_c by construction).  Schematic, ours: it gives ~0.07 dex at t_c / 10 and ~0.5 dex
#: at t_c / 100 (0.1 Msun: ~0.16 Rsun at 80 Myr, ~0.4 Rsun at 8 Myr, close to published
#: low-mass tracks, from memory), and is capped at 1 dex.
PMS_RADIUS_EXCESS_AT_TC_DEX = 0.01
PMS_RADIUS_EXCESS_SLOPE = 0.85
PMS_RADIUS_EXCESS_MAX_DEX = 1.0


def pre_main_sequence_log_radius_excess(
    age: ArrayLike, contraction_time: ArrayLike
) -> FloatArray:
    """log10(R / R_ZAMS) of a contracting pre-main-sequence star at ``age`` (yr), >= 0.

    ``0.01 (t / t_c)^-0.85`` dex up to the contraction time t_c (yr), 0 after it; see
    :data:`PMS_RADIUS_EXCESS_SLOPE`.  Schematic: it reproduces the definition of t_c
    (0.01 dex at t_c, Bressan et al. 2012 tracks) and the steep early contraction of fully
    convective stars on their Hayashi tracks (R ~ t^-1/3 to t^-0.4; Hayashi 1961, PASJ 13,
    450, from memory), without modelling either.
    """
    ratio = np.asarray(age, dtype=float) / np.asarray(contraction_time, dtype=float)
    excess = PMS_RADIUS_EXCESS_AT_TC_DEX * ratio ** (-PMS_RADIUS_EXCESS_SLOPE)
    return np.where(ratio < 1.0, np.minimum(excess, PMS_RADIUS_EXCESS_MAX_DEX), 0.0)


# =========================================================================================
# Main sequence: Eker et al. (2018) interrelated MLR / MRR / MTR
# =========================================================================================

#: Eker et al. 2018, Table 5: mass-radius R = a M^2 + b M + c for M <= 1.5 Msun, and
#: mass-Teff log T = a (log M)^2 + b log M + c for M > 1.5 Msun (from memory).
EKER_2018_MRR: tuple[float, float, float] = (0.438, 0.479, 0.075)
EKER_2018_MTR: tuple[float, float, float] = (-0.170, 0.888, 3.671)
EKER_2018_MRR_MAX_MASS = 1.5

#: Main-sequence evolution, ZAMS to the end of the main sequence (TAMS), by log M (Msun)
#: at the nodes MS_EVOLUTION_LOG_MASS (1, 1.2, 1.5, 2, 4, 7 and 10 Msun; constant beyond):
#: the total brightening in log L and growth in log R, and the largest fraction of the
#: main sequence at which a star sits on the Eker et al. (2018) relations (for L and for R;
#: see EKER_2018_REFERENCE_AGE_YR).  Above 1 Msun computed from the PARSEC v1.2S
#: isochrones at [M/H] = 0 (Bressan et al. 2012; ZAMS at EEP 202, TAMS at EEP 454 of
#: parsec_v1.25.h5), relative to the Eker relations and rounded: PARSEC's ZAMS lies
#: 0-0.2 dex below the Eker luminosity and its TAMS 0.2-0.35 dex above it, so the
#: relations run through the early main sequence, not its middle.  At 1 Msun the schematic
#: 0.30 and 0.15 dex with the Sun's own fraction (0.48) keep the Sun on its nominal values.
MS_EVOLUTION_LOG_MASS: tuple[float, ...] = (0.0, 0.079, 0.176, 0.301, 0.602, 0.845, 1.0)
MS_BRIGHTENING_DEX: tuple[float, ...] = (0.30, 0.31, 0.32, 0.30, 0.41, 0.42, 0.44)
MS_RADIUS_GROWTH_DEX: tuple[float, ...] = (0.15, 0.16, 0.24, 0.26, 0.31, 0.37, 0.39)
MS_LUMINOSITY_REFERENCE_MAX: tuple[float, ...] = (0.5, 0.25, 0.06, 0.0, 0.15, 0.37, 0.41)
MS_RADIUS_REFERENCE_MAX: tuple[float, ...] = (0.5, 0.29, 0.17, 0.10, 0.19, 0.42, 0.40)
#: Age at which a star sits on the Eker et al. (2018) relations: their calibrators are
#: nearby field stars, which we take to be as old as the Sun, 4.6 Gyr, or, if that is
#: longer than their main sequence, at the fractions MS_LUMINOSITY_REFERENCE_MAX and
#: MS_RADIUS_REFERENCE_MAX of it.  Schematic, ours.
EKER_2018_REFERENCE_AGE_YR = 4.6e9


def teff_stefan_boltzmann(log_luminosity: ArrayLike, radius: ArrayLike) -> FloatArray:
    """Teff (K) of a black-body sphere of log10 L/Lsun and radius R (Rsun).

    Stefan-Boltzmann, ``Teff = Teff_sun (L / R^2)^(1/4)`` in IAU 2015 nominal solar units:
    the inverse of :func:`catcheck.physics.stellar.log_luminosity_stefan_boltzmann`.
    """
    log_luminosity = np.asarray(log_luminosity, dtype=float)
    radius = np.asarray(radius, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return TEFF_SUN.value * 10.0 ** (0.25 * (log_luminosity - 2.0 * np.log10(radius)))


def eker2018_radius(mass: ArrayLike) -> FloatArray:
    """Main-sequence radius (Rsun) from mass (Msun), Eker et al. 2018 interrelated relations.

    M <= 1.5 Msun: the quadratic mass-radius relation ``R = 0.438 M^2 + 0.479 M + 0.075``;
    above, R follows from the MLR and the mass-Teff relation
    ``log T = -0.170 (log M)^2 + 0.888 log M + 3.671`` through Stefan-Boltzmann, which is
    how Eker et al. (2018, Table 5) complete each relation (coefficients from memory).
    The two branches differ by ~3% at 1.5 Msun.
    """
    mass = np.asarray(mass, dtype=float)
    a, b, c = EKER_2018_MRR
    quadratic = a * mass**2 + b * mass + c
    ta, tb, tc = EKER_2018_MTR
    logm = np.log10(mass)
    teff = 10.0 ** (ta * logm**2 + tb * logm + tc)
    from_teff = radius_stefan_boltzmann(10.0 ** eker2018_log_luminosity(mass), teff)
    return np.where(mass <= EKER_2018_MRR_MAX_MASS, quadratic, from_teff)


class StarProperties(NamedTuple):
    """True (noise-free) properties of a set of stars; obey Stefan-Boltzmann exactly."""

    mass: FloatArray  # present mass, Msun
    log_luminosity: FloatArray  # log10 L/Lsun
    radius: FloatArray  # Rsun
    teff: FloatArray  # K


def main_sequence_star(mass: ArrayLike, fraction: ArrayLike) -> StarProperties:
    """A main-sequence star of initial mass M (Msun) at ``fraction`` (0 ZAMS .. 1 TAMS) of its life.

    The Eker et al. (2018) relations (:func:`eker2018_log_luminosity`,
    :func:`eker2018_radius`) give the star at a reference fraction of its main sequence,
    f_ref = min(f_max, 4.6 Gyr / t_MS) (:data:`EKER_2018_REFERENCE_AGE_YR`, t_MS at solar
    metallicity from :func:`catcheck.physics.evolution.log_main_sequence_lifetime`, f_max
    by mass from :data:`MS_LUMINOSITY_REFERENCE_MAX` and :data:`MS_RADIUS_REFERENCE_MAX`);
    log L and log R then change linearly in ``fraction`` by :data:`MS_BRIGHTENING_DEX` and
    :data:`MS_RADIUS_GROWTH_DEX` between ZAMS and TAMS, which above 1 Msun puts the ZAMS
    and TAMS where PARSEC v1.2S has them, and Teff follows from Stefan-Boltzmann, so the
    triple is exactly self-consistent.  Low-mass dwarfs, whose f_ref is ~0, stay on the
    relations; the Sun (1 Msun at 4.57 Gyr) comes out within 2% of its nominal L, R, Teff.
    """
    mass = np.asarray(mass, dtype=float)
    f = np.clip(np.asarray(fraction, dtype=float), 0.0, 1.0)
    logm = np.log10(mass)
    at_reference_age = EKER_2018_REFERENCE_AGE_YR / 10.0 ** log_main_sequence_lifetime(mass, 0.0)

    def along(nodes: tuple[float, ...]) -> FloatArray:
        return np.interp(logm, MS_EVOLUTION_LOG_MASS, nodes)

    f_l = np.minimum(along(MS_LUMINOSITY_REFERENCE_MAX), at_reference_age)
    f_r = np.minimum(along(MS_RADIUS_REFERENCE_MAX), at_reference_age)
    log_l = eker2018_log_luminosity(mass) + along(MS_BRIGHTENING_DEX) * (f - f_l)
    radius = eker2018_radius(mass) * 10.0 ** (along(MS_RADIUS_GROWTH_DEX) * (f - f_r))
    return StarProperties(mass, log_l, radius, teff_stefan_boltzmann(log_l, radius))


# =========================================================================================
# White dwarfs
# =========================================================================================

#: Cummings et al. 2018, ApJ 866, 21 (PARSEC-based piecewise-linear initial-final mass
#: relation), from memory: rows (upper initial-mass edge, slope, intercept), M_f = a M_i + b.
CUMMINGS_2018_IFMR: tuple[tuple[float, float, float], ...] = (
    (2.85, 0.080, 0.489),
    (3.60, 0.187, 0.184),
    (np.inf, 0.107, 0.471),
)
#: Chandrasekhar mass for mu_e = 2 in the Nauenberg (1972) fit, and its radius scale
#: 7.8e8 cm = 0.0112 Rsun (from memory).
NAUENBERG_1972_MCH = 1.454
NAUENBERG_1972_R0 = 0.0112
#: Mestel (1952) cooling: t_cool = 8.8e6 yr (A/12)^-1 M^(5/7) (mu/2)^(-2/7) L^(-5/7),
#: with A = 12 (carbon ions) and mu = 2 (from memory; textbook form).
MESTEL_TIMESCALE_YR = 8.8e6


def white_dwarf_mass_cummings2018(initial_mass: ArrayLike) -> FloatArray:
    """White-dwarf mass (Msun) from progenitor initial mass (Msun), Cummings et al. 2018.

    Cummings J. D. et al., 2018, ApJ 866, 21, PARSEC-based IFMR (from memory):
    0.080 M_i + 0.489 (0.85-2.85 Msun), 0.187 M_i + 0.184 (2.85-3.60), 0.107 M_i + 0.471
    (3.60-7.20).  Continuous at the edges to 0.001 Msun; a ~0.6 Msun white dwarf comes
    from a ~1.5-2 Msun star.
    """
    m = np.asarray(initial_mass, dtype=float)
    edges = np.array([row[0] for row in CUMMINGS_2018_IFMR[:-1]])
    piece = np.searchsorted(edges, m, side="left")
    slope = np.array([row[1] for row in CUMMINGS_2018_IFMR])[piece]
    zero = np.array([row[2] for row in CUMMINGS_2018_IFMR])[piece]
    return slope * m + zero


def white_dwarf_radius_nauenberg(mass: ArrayLike) -> FloatArray:
    """Zero-temperature white-dwarf radius (Rsun) from mass (Msun), Nauenberg 1972.

    Nauenberg M., 1972, ApJ 175, 417: ``R = 0.0112 Rsun [(M/M_ch)^(-2/3) - (M/M_ch)^(2/3)]^(1/2)``
    with M_ch = 1.454 Msun (mu_e = 2); coefficients from memory.  0.6 Msun gives
    0.0125 Rsun (log g 8.0).
    """
    x = np.asarray(mass, dtype=float) / NAUENBERG_1972_MCH
    with np.errstate(invalid="ignore"):
        return NAUENBERG_1972_R0 * np.sqrt(x ** (-2.0 / 3.0) - x ** (2.0 / 3.0))


def white_dwarf_log_luminosity_mestel(mass: ArrayLike, cooling_age: ArrayLike) -> FloatArray:
    """log10 L/Lsun of a white dwarf of mass M (Msun) after ``cooling_age`` yr, Mestel cooling.

    Mestel L., 1952, MNRAS 112, 583: ``t_cool = 8.8e6 yr M^(5/7) L^(-5/7)`` for a carbon
    core (A = 12, mu = 2; textbook form, from memory), inverted for L.  Crude at the
    hot (neutrino cooling) and cold (crystallisation) ends.
    """
    mass = np.asarray(mass, dtype=float)
    t = np.maximum(np.asarray(cooling_age, dtype=float), 1.0)
    return -1.4 * np.log10(t / (MESTEL_TIMESCALE_YR * mass ** (5.0 / 7.0)))


# =========================================================================================
# Evolutionary stages of a simple stellar population
# =========================================================================================


class Stage(IntEnum):
    """Evolutionary stage of a synthetic star (internal codes of this module)."""

    PMS = 0  # pre-main sequence, still contracting
    MS = 1  # core hydrogen burning
    SGB = 2  # subgiant: crossing from the end of the MS to the red giant branch
    RGB = 3  # red giant branch
    CLUMP = 4  # core helium burning, low mass (< 2.2 Msun): red clump
    CHEB = 5  # core helium burning, intermediate mass (2.2-8 Msun)
    AGB = 6  # asymptotic giant branch
    SUPERGIANT = 7  # post-main-sequence star above 8 Msun (red supergiant)
    WD = 8  # white dwarf
    REMNANT = 9  # neutron star or black hole: not in an optical catalogue


#: Post-main-sequence windows as multiples of the main-sequence lifetime (age / t_MS):
#: schematic, ours.  Hydrogen-shell and core-helium burning together last ~10-20% of the
#: main-sequence lifetime (textbook, from memory).  Upper edges of SGB, RGB, core He
#: burning and AGB; beyond the last a star is a white dwarf (or a remnant above M_UP).
POST_MS_WINDOWS: tuple[float, float, float, float] = (1.04, 1.10, 1.18, 1.20)
SUPERGIANT_WINDOW = 1.10
#: Most massive white-dwarf progenitor (Msun): 8 Msun after Smartt 2009, the value the
#: white-dwarf rules use (:data:`catcheck.physics.evolution.MAX_WHITE_DWARF_PROGENITOR_MASS`).
M_UP = MAX_WHITE_DWARF_PROGENITOR_MASS.value
#: Helium-flash mass: below it core helium burning starts degenerate (red clump),
#: ~2.2 Msun (PARSEC envelope split in PHYSICS.md section 5).
M_HEF = 2.2


def evolutionary_stage(mass: ArrayLike, age: ArrayLike, feh: ArrayLike) -> NDArray[np.int8]:
    """Stage (:class:`Stage` codes) of stars of initial mass M (Msun) at ``age`` (yr), [M/H] (dex).

    Main-sequence lifetime from :func:`catcheck.physics.evolution.log_main_sequence_lifetime`
    and contraction time from :func:`log_contraction_time`, both PARSEC v1.2S (Bressan et
    al. 2012) and the timescales the evolution rules use; the post-main-sequence split
    follows ``POST_MS_WINDOWS`` (schematic).
    """
    mass = np.asarray(mass, dtype=float)
    age = np.broadcast_to(np.asarray(age, dtype=float), mass.shape)
    feh = np.broadcast_to(np.asarray(feh, dtype=float), mass.shape)
    return _stage(mass, age / 10.0 ** log_main_sequence_lifetime(mass, feh),
                  age < 10.0 ** log_contraction_time(mass, feh))


def _stage(mass: FloatArray, phi: FloatArray, pms: NDArray[np.bool_]) -> NDArray[np.int8]:
    """:func:`evolutionary_stage` from age / t_MS (``phi``) and 'still contracting'."""
    sgb, rgb, cheb, agb = POST_MS_WINDOWS
    low = mass <= M_UP
    conditions = [
        phi < 1.0,
        ~low & (phi < SUPERGIANT_WINDOW),
        ~low,
        phi < sgb,
        phi < rgb,
        phi < cheb,
        phi < agb,
    ]
    core_he = np.where(mass < M_HEF, Stage.CLUMP, Stage.CHEB)
    choices = [
        np.where(pms, Stage.PMS, Stage.MS),
        Stage.SUPERGIANT,
        Stage.REMNANT,
        Stage.SGB,
        Stage.RGB,
        core_he,
        Stage.AGB,
    ]
    return np.select(conditions, choices, default=Stage.WD).astype(np.int8)


#: Coolest end of the schematic subgiant branch (K).  PARSEC v1.2S subgiants (label 2)
#: cooler than ~4700 K are all luminous (log L > 2.2, massive stars: the SGB envelope of
#: catcheck/data/parsec_envelopes.csv, Bressan et al. 2012); 2-4 Msun stars reach the
#: giant branch hotter than that, so the subgiant branch stops at 5000 K and the giant
#: branch takes over from there (a star at 5000 K must be catalogued 6.5% too cool, over
#: 3 sigma of a 2% Teff error, to fall among the luminous ones).
SUBGIANT_MIN_TEFF = 5000.0


def red_giant_branch_teff(log_luminosity: ArrayLike, feh: ArrayLike) -> FloatArray:
    """Teff (K) along a schematic red giant branch of log10 L/Lsun and [M/H].

    ``Teff = 4900 - 380 (log L - 0.8) - 250 [M/H]``, clipped to 3300-4950 K: a straight-line
    stand-in of ours for the slope of solar-metallicity PARSEC giant branches (cooler as
    they climb, hotter when metal-poor), inside the PARSEC RGB envelope of 3023-5140 K
    (PHYSICS.md section 5).
    """
    log_l = np.asarray(log_luminosity, dtype=float)
    feh = np.asarray(feh, dtype=float)
    return np.clip(4900.0 - 380.0 * (log_l - 0.8) - 250.0 * feh, 3300.0, 4950.0)


def stellar_properties(
    mass: ArrayLike,
    age: ArrayLike,
    feh: ArrayLike,
    u1: ArrayLike,
    u2: ArrayLike,
) -> tuple[NDArray[np.int8], StarProperties]:
    """Stage and true properties of stars of initial mass M (Msun), age (yr) and [M/H] (dex).

    ``u1`` and ``u2`` are uniform deviates that place each evolved star within the spread
    of its stage (luminosity and Teff of clump, AGB and supergiant stars).  Returns the
    :class:`Stage` codes and :class:`StarProperties` obeying Stefan-Boltzmann exactly.
    Per stage:

    - MS: :func:`main_sequence_star` at fraction age / t_MS.
    - PMS: the ZAMS star swollen by :func:`pre_main_sequence_log_radius_excess` at the ZAMS
      Teff (vertical Hayashi track), L from Stefan-Boltzmann.
    - SGB: log L and log Teff interpolated from the end of the MS towards the base of the
      giant branch, ending no cooler than :data:`SUBGIANT_MIN_TEFF`.
    - RGB: log L from max(0.8, log L_TAMS) to max(3.0, base + 0.6) (at most 4.3), more stars
      low on the branch; Teff from :func:`red_giant_branch_teff`; up to 0.15 Msun lost
      towards the tip below 2.2 Msun.
    - CLUMP: log L 1.60-1.85, Teff 4550-4850 K (less 250 K per dex [M/H]), 0.15 Msun lost:
      inside the PARSEC clump envelope (log L 1.54-2.46, Teff 4309-5015 K).
    - CHEB (2.2-8 Msun): log L = log L_TAMS + 0.2-0.5, Teff 4500-5200 K (red part only,
      no blue loops; PARSEC's intermediate-mass core helium burners cooler than ~4400 K
      have log g below ~2.3, so a cooler schematic star would sit on the envelope's steep
      cool edge).
    - AGB: log L from log L_TAMS + 0.5 (kept within 2.8-4.2) up to 0.8 dex higher (at most
      4.6), Teff 3200-3900 K, 10-25% mass lost: inside the AGB ranges quoted from memory in
      PHYSICS.md section 5 (log L 2.7-4.6, Teff 2000-4000 K, log g -1 to 1.5).
    - SUPERGIANT (> 8 Msun): log L = log L_TAMS + 0.1-0.3, Teff 3500-4500 K.
    - WD: mass from :func:`white_dwarf_mass_cummings2018` clipped to 0.5-0.9 Msun, radius
      :func:`white_dwarf_radius_nauenberg`, L from :func:`white_dwarf_log_luminosity_mestel`
      after cooling since the end of the AGB; Teff clipped to 5000-40000 K and L recomputed.
    - REMNANT: NaN (such stars do not belong in an optical catalogue; callers redraw them).

    The stage rules and spreads not attributed to a paper are schematic choices of ours,
    bounded by the PARSEC envelopes of PHYSICS.md section 5.
    """
    m0 = np.asarray(mass, dtype=float)
    age = np.broadcast_to(np.asarray(age, dtype=float), m0.shape)
    feh = np.broadcast_to(np.asarray(feh, dtype=float), m0.shape)
    u1 = np.asarray(u1, dtype=float)
    u2 = np.asarray(u2, dtype=float)
    t_ms = 10.0 ** log_main_sequence_lifetime(m0, feh)
    t_pms = 10.0 ** log_contraction_time(m0, feh)
    phi = age / t_ms
    stage = _stage(m0, phi, age < t_pms)

    # the star on its main sequence now, at its end (TAMS) and at its start (ZAMS), at once
    now_end_start = main_sequence_star(m0, np.stack([phi, np.ones_like(phi),
                                                     np.zeros_like(phi)]))
    ms, tams, zams = (StarProperties(m0, *values)
                      for values in zip(*now_end_start[1:], strict=True))
    log_t_tams = np.log10(tams.teff)

    mass_now = m0.copy()
    log_l = ms.log_luminosity.copy()
    log_teff = np.log10(ms.teff)
    radius = ms.radius.copy()

    def take(sel: NDArray[np.bool_], ll: ArrayLike, lt: ArrayLike) -> None:
        log_l[sel] = np.broadcast_to(ll, m0.shape)[sel]
        log_teff[sel] = np.broadcast_to(lt, m0.shape)[sel]

    # --- pre-main sequence: swollen ZAMS star at the ZAMS Teff
    sel = stage == Stage.PMS
    excess = pre_main_sequence_log_radius_excess(age, t_pms)
    r_pms = zams.radius * 10.0**excess
    take(sel, zams.log_luminosity + 2.0 * excess, np.log10(zams.teff))

    # --- giant branch geometry shared by SGB and RGB
    sgb_end, rgb_end, _, agb_end = POST_MS_WINDOWS
    rgb_lo = np.maximum(0.8, tams.log_luminosity)
    rgb_hi = np.minimum(np.maximum(3.0, rgb_lo + 0.6), 4.3)
    base_teff = red_giant_branch_teff(rgb_lo, feh)

    sel = stage == Stage.SGB
    tau = np.clip((phi - 1.0) / (sgb_end - 1.0), 0.0, 1.0)
    take(
        sel,
        tams.log_luminosity + (rgb_lo - tams.log_luminosity) * tau,
        log_t_tams + (np.log10(np.maximum(base_teff, SUBGIANT_MIN_TEFF)) - log_t_tams) * tau,
    )

    sel = stage == Stage.RGB
    tau = np.clip((phi - sgb_end) / (rgb_end - sgb_end), 0.0, 1.0)
    rgb_l = rgb_lo + (rgb_hi - rgb_lo) * tau**2
    take(sel, rgb_l, np.log10(red_giant_branch_teff(rgb_l, feh)))
    mass_now[sel] = (m0 - np.where(m0 < M_HEF, 0.15 * tau**2, 0.0))[sel]

    sel = stage == Stage.CLUMP
    take(sel, 1.60 + 0.25 * u1, np.log10(np.clip(4550.0 + 300.0 * u2 - 250.0 * feh, 4450, 4900)))
    mass_now[sel] = m0[sel] - 0.15

    sel = stage == Stage.CHEB
    take(sel, tams.log_luminosity + 0.2 + 0.3 * u1, np.log10(4500.0 + 700.0 * u2))

    sel = stage == Stage.AGB
    agb_lo = np.clip(tams.log_luminosity + 0.5, 2.8, 4.2)
    agb_hi = np.minimum(agb_lo + 0.8, 4.6)
    take(sel, agb_lo + (agb_hi - agb_lo) * u1, np.log10(3200.0 + 700.0 * u2))
    mass_now[sel] = (m0 * (0.9 - 0.15 * u1))[sel]

    sel = stage == Stage.SUPERGIANT
    take(sel, tams.log_luminosity + 0.1 + 0.2 * u1, np.log10(3500.0 + 1000.0 * u2))
    mass_now[sel] = (m0 * (1.0 - 0.05 * u1))[sel]

    # --- giants: radius from Stefan-Boltzmann with the chosen L and Teff
    giant = (stage >= Stage.SGB) & (stage <= Stage.SUPERGIANT)
    radius = np.where(giant, radius_stefan_boltzmann(10.0**log_l, 10.0**log_teff), radius)
    radius = np.where(stage == Stage.PMS, r_pms, radius)

    # --- white dwarfs
    sel = stage == Stage.WD
    m_wd = np.clip(white_dwarf_mass_cummings2018(m0), 0.5, 0.9)
    r_wd = white_dwarf_radius_nauenberg(m_wd)
    t_cool = age - agb_end * t_ms
    l_wd = white_dwarf_log_luminosity_mestel(m_wd, t_cool)
    teff_wd = np.clip(teff_stefan_boltzmann(l_wd, r_wd), 5000.0, 40000.0)
    mass_now[sel] = m_wd[sel]
    radius[sel] = r_wd[sel]
    log_teff[sel] = np.log10(teff_wd[sel])
    log_l[sel] = (2.0 * np.log10(r_wd) + 4.0 * np.log10(teff_wd / TEFF_SUN.value))[sel]

    teff = 10.0**log_teff
    # every non-MS branch set (L, Teff) and took R from them, or (R, Teff) and set L:
    # re-derive L from R and Teff once so that the triple is exact to rounding.
    log_l = 2.0 * np.log10(radius) + 4.0 * np.log10(teff / TEFF_SUN.value)
    sel = stage == Stage.REMNANT
    for arr in (mass_now, log_l, radius, teff):
        arr[sel] = np.nan
    return stage, StarProperties(mass_now, log_l, radius, teff)


# =========================================================================================
# MK spectral types
# =========================================================================================

#: The shipped Teff scale (:func:`catcheck.physics.spectral.teff_scale`) that types a star
#: of each luminosity class: the Pecaut & Mamajek (2013) mean dwarf sequence for dwarfs
#: and subgiants, the giant and supergiant scales for the rest (white dwarfs apart).
SCALE_OF_CLASS: dict[str, str] = {"V": "dwarf", "IV": "dwarf", "III": "giant", "Ib": "supergiant"}
#: White-dwarf temperature index 50400 / Teff in half steps (McCook & Sion 1999, ApJS
#: 121, 1, from memory); hydrogen-atmosphere (DA) spectra assumed.
WD_TEMPERATURE_INDEX = 50400.0


def _type_name(index: float) -> str:
    """The MK type of a type index (G2 = 42; :mod:`catcheck.physics.spectral`), no class."""
    letter = int(index // 10.0)
    return f"{CLASS_LETTERS[letter]}{index - 10.0 * letter:g}"


def _nearest_type(teff: FloatArray, scale: TeffScale) -> NDArray[np.object_]:
    """The scale's type nearest in log Teff to each Teff (K)."""
    names = np.array([_type_name(i) for i in scale.index], dtype=object)
    log_t = scale.log_teff[::-1]  # increasing (the scale runs hot to cool)
    mids = 0.5 * (log_t[:-1] + log_t[1:])
    idx = len(mids) - np.searchsorted(mids, np.log10(teff), side="right")
    return names[idx]


def mk_spectral_type(teff: ArrayLike, luminosity_class: ArrayLike) -> NDArray[np.object_]:
    """MK spectral type strings for Teff (K) and a luminosity class per star.

    ``luminosity_class`` holds "V", "IV", "III", "Ib" or "D" (white dwarf).  Each star
    takes the type nearest in log Teff on the shipped scale of its class
    (:data:`SCALE_OF_CLASS`; :func:`catcheck.physics.spectral.teff_scale`: Pecaut &
    Mamajek 2013 for dwarfs and subgiants, the giant and supergiant scales otherwise),
    plus the class; white dwarfs "DA" plus the temperature index 50400/Teff rounded to a
    half (McCook & Sion 1999).  Returns an object array of str.
    """
    teff = np.asarray(teff, dtype=float)
    lclass = np.asarray(luminosity_class, dtype=object)
    out = np.full(teff.shape, "", dtype=object)
    for cls, name in SCALE_OF_CLASS.items():
        sel = lclass == cls
        if sel.any():
            out[sel] = _nearest_type(teff[sel], teff_scale(name)) + cls
    wd = lclass == "D"
    if wd.any():
        index = np.round(2.0 * WD_TEMPERATURE_INDEX / teff[wd]) / 2.0
        values, inverse = np.unique(index, return_inverse=True)
        labels = np.array([f"DA{v:g}" for v in values], dtype=object)
        out[wd] = labels[inverse]
    return out
