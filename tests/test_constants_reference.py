"""catcheck.constants and the relations built on them, against sources outside catcheck.

Sources:

* IAU 2015 Resolution B3 (nominal solar radius, luminosity, (GM) and Teff) and Resolution
  B2 (bolometric magnitude zero point), through ``astropy.constants.iau2015``.  Nominal
  values are exact by definition, so they are compared exactly.  astropy has no constant
  for the nominal Teff of 5772 K: it is typed from Resolution B3.
* CODATA 2018 through ``astropy.constants.codata2018`` (catcheck cites that edition;
  astropy's default is now CODATA 2022, which agrees for sigma, c and G).
* Planck 2018 results VI (A&A 641, A6), through astropy's ``Planck18`` cosmology.

Two kinds of test, kept apart: "comparison with other sources" (the values are right) and
"regression" (the values catcheck computes have not changed by accident).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import astropy.constants as astropy_constants
import astropy.units as u
import numpy as np
import pytest
from astropy.constants import codata2018, iau2015
from astropy.cosmology import Planck18

from catcheck import constants
from catcheck.constants import (
    L_SUN,
    LOGG_SUN,
    MBOL_SUN,
    R_SUN,
    SIGMA_SB,
    TEFF_SUN,
    Constant,
)
from catcheck.physics import stellar

#: IAU 2015 Resolution B3: "T_eff,sun nominal = 5772 K" (no astropy constant for it)
IAU2015_TEFF_SUN = 5772.0 * u.K


@dataclass(frozen=True)
class Reference:
    """An outside value for one catcheck constant.

    ``rtol`` / ``atol`` are 0 for exact definitions; otherwise they match the precision
    the source printed.  ``uncertainty`` is the source's 1-sigma, where it gives one.
    """

    value: u.Quantity
    source: str
    rtol: float = 0.0
    atol: float = 0.0
    uncertainty: u.Quantity | None = None


REFERENCES: dict[str, Reference] = {
    "R_SUN": Reference(iau2015.R_sun, "IAU 2015 Resolution B3 (astropy iau2015.R_sun)"),
    "L_SUN": Reference(iau2015.L_sun, "IAU 2015 Resolution B3 (astropy iau2015.L_sun)"),
    "TEFF_SUN": Reference(IAU2015_TEFF_SUN, "IAU 2015 Resolution B3 (typed from the text)"),
    "GM_SUN": Reference(iau2015.GM_sun, "IAU 2015 Resolution B3 (astropy iau2015.GM_sun)"),
    "L_BOL_ZERO": Reference(iau2015.L_bol0, "IAU 2015 Resolution B2 (astropy iau2015.L_bol0)"),
    # CODATA prints sigma to 10 significant digits; the SI value is exact and longer.
    "SIGMA_SB": Reference(codata2018.sigma_sb, "CODATA 2018 (astropy codata2018.sigma_sb)",
                          rtol=1e-10),
    "G_NEWTON": Reference(codata2018.G, "CODATA 2018 (astropy codata2018.G)",
                          uncertainty=codata2018.G.uncertainty * codata2018.G.unit),
    "C_LIGHT": Reference(codata2018.c, "CODATA 2018, exact (astropy codata2018.c)"),
    "M_PROTON": Reference(codata2018.m_p, "CODATA 2018 (astropy codata2018.m_p)",
                          uncertainty=codata2018.m_p.uncertainty * codata2018.m_p.unit),
    # hbar = h / 2 pi is exact but irrational; CODATA prints 10 significant digits.
    "HBAR": Reference(codata2018.hbar, "CODATA 2018, exact (astropy codata2018.hbar)",
                      rtol=1e-9),
    "ATOMIC_MASS_UNIT": Reference(
        codata2018.u, "CODATA 2018 (astropy codata2018.u)",
        uncertainty=codata2018.u.uncertainty * codata2018.u.unit),
    "SIGMA_THOMSON": Reference(
        codata2018.sigma_T, "CODATA 2018 (astropy codata2018.sigma_T)",
        uncertainty=codata2018.sigma_T.uncertainty * codata2018.sigma_T.unit),
    # Planck 2018 VI Table 2 prints 13.787 +- 0.020 Gyr (the +- from memory); astropy's
    # Planck18 recomputes the age from the same paper's parameters: 13.78689 Gyr.
    "AGE_OF_UNIVERSE": Reference(Planck18.age(0).to(u.yr),
                                 "Planck 2018 results VI, A&A 641, A6 (astropy Planck18)",
                                 atol=0.0005e9, uncertainty=0.020 * u.Gyr),
    # astropy's M_sun is IAU 2015 (GM)_sun / G with CODATA 2022 G, equal to CODATA 2018 G.
    "M_SUN_KG": Reference(astropy_constants.M_sun, "IAU 2015 B3 + CODATA (astropy M_sun)",
                          rtol=1e-15),
    "LOGG_SUN": Reference(
        np.log10((iau2015.GM_sun / iau2015.R_sun**2).to_value(u.cm / u.s**2))
        * u.dex(u.cm / u.s**2),
        "computed here: log10 (GM)_sun / R_sun^2, IAU 2015 B3 (astropy iau2015)", rtol=1e-14),
    "MBOL_SUN": Reference(
        (iau2015.L_sun).to(u.M_bol).value * u.mag,
        "computed here: L_sun on the IAU 2015 B2 magnitude scale (astropy u.M_bol)",
        rtol=1e-14),
    "JULIAN_YEAR_S": Reference((1 * u.yr).to(u.s), "Julian year (astropy u.yr)"),
    "PARSEC_M": Reference(iau2015.pc, "IAU 2015 Resolution B2 (astropy iau2015.pc)",
                          rtol=1e-15),
    # exact, but astropy's erg -> J conversion rounds in the last binary digit
    "ERG_J": Reference((1 * u.erg).to(u.J), "cgs erg (astropy u.erg)", rtol=1e-15),
}

CATCHECK_CONSTANTS = sorted(
    name for name, value in vars(constants).items() if isinstance(value, Constant)
)


# ---------------------------------------------------------------------------------------
# Comparison with other sources
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("name", CATCHECK_CONSTANTS)
def test_constant_has_an_outside_reference(name: str) -> None:
    """Every Constant in catcheck.constants is checked here; a new one needs a reference."""
    assert name in REFERENCES, (
        f"catcheck.constants.{name} has no outside reference value in "
        "tests/test_constants_reference.py: add one, naming its source"
    )


@pytest.mark.parametrize("name", sorted(REFERENCES))
def test_constant_unit_matches_reference(name: str) -> None:
    """The unit string each Constant declares means, in astropy, the reference's unit."""
    const: Constant = getattr(constants, name)
    ref = REFERENCES[name]
    declared = u.Unit(const.unit)
    assert declared == ref.value.unit or (
        declared.is_equivalent(ref.value.unit) and declared.to(ref.value.unit) == 1.0
    ), f"{name}: catcheck says {const.unit!r}, {ref.source} has {ref.value.unit}"


@pytest.mark.parametrize("name", sorted(REFERENCES))
def test_constant_value_matches_reference(name: str) -> None:
    """Value agrees with the source: exactly for definitions, else to printed precision."""
    const: Constant = getattr(constants, name)
    ref = REFERENCES[name]
    expected = ref.value.to_value(u.Unit(const.unit))
    assert const.value == pytest.approx(expected, rel=ref.rtol, abs=ref.atol), ref.source


@pytest.mark.parametrize(
    "name", sorted(n for n, r in REFERENCES.items() if r.uncertainty is not None)
)
def test_constant_uncertainty_matches_reference(name: str) -> None:
    """The 1-sigma uncertainty agrees with the source's."""
    const: Constant = getattr(constants, name)
    ref = REFERENCES[name]
    assert ref.uncertainty is not None
    expected = ref.uncertainty.to_value(u.Unit(const.unit))
    assert const.uncertainty == pytest.approx(expected, rel=1e-12), ref.source


@pytest.mark.parametrize(
    ("const", "printed", "precision", "source"),
    [
        (LOGG_SUN, 4.43807, 0.5e-5, "GM/R^2 of IAU 2015 B3, computed (PHYSICS.md section 1)"),
        (MBOL_SUN, 4.74, 0.005, "IAU 2015 Resolution B2: M_bol,sun = 4.74"),
    ],
    ids=["logg_sun", "mbol_sun"],
)
def test_derived_solar_value_matches_printed_value(
    const: Constant, printed: float, precision: float, source: str
) -> None:
    """Derived solar values round to the figure their source prints."""
    assert const.value == pytest.approx(printed, abs=precision), source


def test_stefan_boltzmann_of_nominal_sun_gives_nominal_luminosity() -> None:
    """4 pi R^2 sigma Teff^4 with IAU 2015 B3 R and Teff (5772 K) and CODATA sigma is L_sun.

    Source: IAU 2015 Resolution B3 chose the nominal values to be consistent; the result
    is 3.82799e26 W, 2.6e-6 below 3.828e26 W.  Both astropy's and catcheck's constants.
    """
    astropy_l = 4 * math.pi * iau2015.R_sun**2 * codata2018.sigma_sb * IAU2015_TEFF_SUN**4
    assert astropy_l.to_value(u.W) == pytest.approx(iau2015.L_sun.value, rel=1e-5)
    catcheck_l = 4 * math.pi * R_SUN.value**2 * SIGMA_SB.value * TEFF_SUN.value**4
    assert catcheck_l == pytest.approx(L_SUN.value, rel=1e-5)


# A spread of stars (radius in Rsun, Teff in K, mass in Msun) from brown dwarfs to
# supergiants; they only need to span the range, not to be real.
STARS = [(0.1, 1200.0, 0.07), (0.0081, 25200.0, 1.0), (1.0, 5772.0, 1.0),
         (2.0, 10000.0, 2.5), (25.0, 4300.0, 1.1), (800.0, 3600.0, 18.0)]


@pytest.mark.parametrize(("radius", "teff", "mass"), STARS)
def test_physics_stefan_boltzmann_matches_si_computation(
    radius: float, teff: float, mass: float
) -> None:
    """catcheck's solar-unit Stefan-Boltzmann law equals 4 pi R^2 sigma T^4 done in SI.

    Sources: IAU 2015 B3 (R_sun, L_sun) and CODATA 2018 (sigma) through astropy.  The
    solar-unit form assumes L_sun = 4 pi R_sun^2 sigma (5772 K)^4, true to 1.1e-6 dex
    (previous test), hence the 1e-5 dex tolerance.
    """
    r = radius * iau2015.R_sun
    si = 4 * math.pi * r**2 * codata2018.sigma_sb * (teff * u.K) ** 4
    log_l = math.log10(si.to_value(u.W) / iau2015.L_sun.value)
    assert stellar.log_luminosity_stefan_boltzmann(radius, teff) == pytest.approx(
        log_l, abs=1e-5)
    assert stellar.radius_stefan_boltzmann(10.0**log_l, teff) == pytest.approx(
        radius, rel=1e-5)


@pytest.mark.parametrize(("radius", "teff", "mass"), STARS)
def test_physics_surface_gravity_matches_si_computation(
    radius: float, teff: float, mass: float
) -> None:
    """log g = log10(G M / R^2) in cgs, with M as a multiple of (GM)_sun (IAU 2015 B3)."""
    g = mass * iau2015.GM_sun / (radius * iau2015.R_sun) ** 2
    expected = math.log10(g.to_value(u.cm / u.s**2))
    assert stellar.log_surface_gravity(mass, radius) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("luminosity", [1e-6, 0.01, 1.0, 40.0, 1e6])
def test_physics_bolometric_magnitude_matches_astropy(luminosity: float) -> None:
    """M_bol and its inverse agree with astropy's absolute bolometric magnitude (IAU 2015 B2)."""
    expected = (luminosity * iau2015.L_sun).to(u.M_bol).value
    assert stellar.absolute_bolometric_magnitude(luminosity) == pytest.approx(expected,
                                                                              abs=1e-12)
    assert stellar.luminosity_from_bolometric_magnitude(expected) == pytest.approx(
        luminosity, rel=1e-12)


# ---------------------------------------------------------------------------------------
# Regression: values catcheck computes today (a change here must be deliberate)
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("const", "value"),
    [(LOGG_SUN, 4.438067627303133), (MBOL_SUN, 4.7399959339194595)],
    ids=["logg_sun", "mbol_sun"],
)
def test_derived_value_regression(const: Constant, value: float) -> None:
    """Full-precision derived values, pinned (regression, not a comparison)."""
    assert const.value == pytest.approx(value, rel=1e-15)


def test_constant_without_reference_is_refused() -> None:
    """A Constant cannot be built without a reference (behaviour)."""
    with pytest.raises(ValueError, match="needs a reference"):
        Constant("made-up", 1.0, "m", "")

