"""Every unit a profile may declare (catcheck.units.UNITS), converted by astropy.units.

astropy is the outside source: its solar units are the IAU 2015 Resolution B3 nominal
values (``solLum`` = 3.828e26 W, ``solRad`` = 6.957e8 m, ``solMass`` = (GM)_sun / G), its
year is the Julian year, and its absolute bolometric magnitude ``M_bol`` has the IAU 2015
Resolution B2 zero point (M_bol = 0 is 3.0128e28 W).  Both sides derive from exact nominal
definitions, so values must agree to rounding (1e-12 relative).

1-sigma errors: linear units scale; for ``dex(...)`` and ``mag`` catcheck propagates to
first order (sigma_x = x ln10 sigma_dex, sigma_L = L 0.4 ln10 sigma_mag).  That is checked
against a central finite difference of astropy's conversion.

The test is parametrised over ``UNITS`` itself, so a unit added there without a reference
entry in ``ASTROPY_UNITS`` below fails.
"""

from __future__ import annotations

from collections.abc import Callable

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import iau2015

from catcheck.quantities import QUANTITIES
from catcheck.units import _ALIASES, UNITS, conversion_for, normalise_unit

#: canonical unit of each quantity (catcheck.quantities) as an astropy unit
ASTROPY_CANONICAL: dict[str, u.UnitBase] = {
    "K": u.K,
    "dex(cm/s2)": u.dex(u.cm / u.s**2),
    "Lsun": u.solLum,
    "Rsun": u.solRad,
    "Msun": u.solMass,
    "yr": u.yr,
    "dex": u.dex,
    "mas": u.mas,
    "pc": u.pc,
}

#: (quantity, unit as catcheck spells it) -> (the same unit in astropy, sample values)
ASTROPY_UNITS: dict[tuple[str, str], tuple[u.UnitBase, list[float]]] = {
    ("teff", "K"): (u.K, [250.0, 5772.0, 45000.0]),
    ("teff", "dex(K)"): (u.dex(u.K), [2.4, 3.7613, 4.65]),
    ("teff", "kK"): (u.kK, [0.25, 5.772, 45.0]),
    ("logg", "dex(cm/s2)"): (u.dex(u.cm / u.s**2), [-0.5, 4.438, 8.6]),
    ("luminosity", "Lsun"): (u.solLum, [1e-5, 1.0, 1e6]),
    ("luminosity", "dex(Lsun)"): (u.dex(u.solLum), [-5.0, 0.0, 6.0]),
    ("luminosity", "W"): (u.W, [3.828e21, 3.828e26, 3.0128e28, 4e32]),
    ("luminosity", "erg/s"): (u.erg / u.s, [3.828e28, 3.828e33, 4e39]),
    # absolute bolometric magnitude, IAU 2015 Resolution B2 zero point
    ("luminosity", "mag"): (u.M_bol, [-10.0, 0.0, 4.74, 17.0]),
    ("radius", "Rsun"): (u.solRad, [0.008, 1.0, 1500.0]),
    ("radius", "dex(Rsun)"): (u.dex(u.solRad), [-2.1, 0.0, 3.2]),
    ("radius", "km"): (u.km, [5600.0, 695700.0, 1.0e9]),
    ("radius", "m"): (u.m, [5.6e6, 6.957e8, 1.0e12]),
    ("mass", "Msun"): (u.solMass, [0.08, 1.0, 150.0]),
    ("mass", "dex(Msun)"): (u.dex(u.solMass), [-1.1, 0.0, 2.2]),
    ("mass", "kg"): (u.kg, [1.6e29, 1.98841e30, 3.0e32]),
    ("initial_mass", "Msun"): (u.solMass, [0.08, 1.0, 150.0]),
    ("initial_mass", "dex(Msun)"): (u.dex(u.solMass), [-1.1, 0.0, 2.2]),
    ("initial_mass", "kg"): (u.kg, [1.6e29, 1.98841e30, 3.0e32]),
    ("age", "yr"): (u.yr, [1e5, 4.57e9, 1.3e10]),
    ("age", "Myr"): (u.Myr, [0.1, 4570.0, 13000.0]),
    ("age", "Gyr"): (u.Gyr, [0.0001, 4.57, 13.0]),
    ("age", "dex(yr)"): (u.dex(u.yr), [5.0, 9.66, 10.11]),
    ("feh", "dex"): (u.dex, [-4.0, 0.0, 0.5]),
    ("parallax", "mas"): (u.mas, [-0.3, 10.0, 768.0]),
    ("parallax", "arcsec"): (u.arcsec, [-0.0003, 0.01, 0.768]),
    ("distance", "pc"): (u.pc, [1.3, 100.0, 8000.0]),
    ("distance", "kpc"): (u.kpc, [0.0013, 0.1, 50.0]),
}

#: the 1-sigma error used for each kind of declared unit: 5% of the value for linear
#: units, 0.05 dex, 0.1 mag (typical catalogue errors; any positive value would do)
LINEAR_FRACTION, DEX_SIGMA, MAG_SIGMA = 0.05, 0.05, 0.1

DECLARED = [(q, unit) for q, units in UNITS.items() for unit in units]


def to_canonical(quantity: str, unit: str) -> Callable[[np.ndarray], np.ndarray]:
    """astropy's conversion of values in ``unit`` to the canonical unit of ``quantity``."""
    declared = ASTROPY_UNITS[quantity, unit][0]
    canonical = ASTROPY_CANONICAL[QUANTITIES[quantity].unit]
    return lambda values: (np.asarray(values, dtype=float) * declared).to_value(canonical)


def is_logarithmic(quantity: str, unit: str) -> bool:
    """Declared in dex or mag while the canonical unit is linear."""
    declared = ASTROPY_UNITS[quantity, unit][0]
    canonical = ASTROPY_CANONICAL[QUANTITIES[quantity].unit]
    return isinstance(declared, u.FunctionUnitBase) and not isinstance(
        canonical, u.FunctionUnitBase)


def declared_sigma(quantity: str, unit: str, values: np.ndarray) -> np.ndarray:
    """A 1-sigma error in the declared unit for each sample value."""
    declared = ASTROPY_UNITS[quantity, unit][0]
    if isinstance(declared, u.MagUnit):
        return np.full_like(values, MAG_SIGMA)
    if isinstance(declared, u.FunctionUnitBase):
        return np.full_like(values, DEX_SIGMA)
    return np.abs(values) * LINEAR_FRACTION


# ---------------------------------------------------------------------------------------
# Comparison with astropy.units
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("canonical", sorted({q.unit for q in QUANTITIES.values()
                                              if q.numeric}))
def test_every_canonical_unit_has_an_astropy_equivalent(canonical: str) -> None:
    """Each canonical unit in catcheck.quantities is known here (a new one fails)."""
    assert canonical in ASTROPY_CANONICAL, (
        f"canonical unit {canonical!r} has no astropy equivalent in ASTROPY_CANONICAL")


@pytest.mark.parametrize(("quantity", "unit"), DECLARED)
def test_every_declared_unit_has_a_reference(quantity: str, unit: str) -> None:
    """Each unit in catcheck.units.UNITS has an astropy reference here (a new one fails)."""
    assert (quantity, unit) in ASTROPY_UNITS, (
        f"unit {unit!r} of {quantity} has no astropy reference in "
        "tests/test_units_reference.py: add it to ASTROPY_UNITS")


@pytest.mark.parametrize(("quantity", "unit"), DECLARED)
def test_values_convert_as_astropy_does(quantity: str, unit: str) -> None:
    """catcheck's conversion to the canonical unit equals astropy's, to rounding."""
    values = np.array(ASTROPY_UNITS[quantity, unit][1])
    conversion = UNITS[quantity][unit]
    expected = to_canonical(quantity, unit)(values)
    assert conversion.values(values) == pytest.approx(expected, rel=1e-12, abs=1e-300)


@pytest.mark.parametrize(("quantity", "unit"), DECLARED)
def test_errors_convert_as_astropy_derivative(quantity: str, unit: str) -> None:
    """1-sigma errors: first-order propagation, d(canonical)/d(declared) * sigma.

    The derivative is astropy's conversion differenced centrally with a step of 1e-6 in
    dex or mag, or 1e-6 of the value (at least 1e-6) in linear units; its truncation error
    is ~1e-11, far below the 1e-7 tolerance.
    """
    values = np.array(ASTROPY_UNITS[quantity, unit][1])
    sigma = declared_sigma(quantity, unit, values)
    convert = to_canonical(quantity, unit)
    if is_logarithmic(quantity, unit):
        step = np.full_like(values, 1e-6)
    else:
        step = 1e-6 * np.maximum(np.abs(values), 1.0)
    derivative = (convert(values + step) - convert(values - step)) / (2 * step)
    conversion = UNITS[quantity][unit]
    canonical = conversion.values(values)
    assert conversion.errors(canonical, sigma) == pytest.approx(
        np.abs(derivative) * sigma, rel=1e-7)


def test_bolometric_zero_point_is_iau_2015_b2() -> None:
    """M_bol = 0 is 3.0128e28 W (IAU 2015 Resolution B2), in Lsun of 3.828e26 W (B3)."""
    mag = UNITS["luminosity"]["mag"]
    in_lsun = mag.values(np.array([0.0]))[0]
    assert in_lsun * iau2015.L_sun.value == pytest.approx(iau2015.L_bol0.value, rel=1e-12)
    assert (0.0 * u.M_bol).to_value(u.W) == pytest.approx(3.0128e28, rel=1e-12)


def test_solar_bolometric_magnitude_is_one_solar_luminosity() -> None:
    """M_bol,sun = 4.74 (IAU 2015 Resolution B2, printed to 0.01 mag) is 1 Lsun.

    0.005 mag, half the last printed digit, is 0.46% in luminosity.
    """
    in_lsun = UNITS["luminosity"]["mag"].values(np.array([4.74]))[0]
    assert in_lsun == pytest.approx(1.0, rel=0.005 * 0.4 * np.log(10))


@pytest.mark.parametrize(("alias", "target"), sorted(_ALIASES.items()))
def test_alias_is_the_same_unit(alias: str, target: str) -> None:
    """Each alternative spelling resolves to a declared unit, and astropy agrees.

    Where astropy can parse the alias (e.g. ``solLum``, ``erg s-1``, ``a`` for annum) it
    must be the same astropy unit as the target; ``dex(cgs)`` and ``log(cm/s2)`` are
    spellings of the trade (common practice) that astropy does not parse.
    """
    resolved = normalise_unit(alias)
    owners = [q for q, units in UNITS.items() if resolved in units]
    assert owners, f"alias {alias!r} resolves to {resolved!r}, which no quantity accepts"
    for quantity in owners:
        assert conversion_for(quantity, alias) is UNITS[quantity][resolved]
    try:
        parsed = u.Unit(alias.strip())
    except ValueError:
        return
    reference = ASTROPY_UNITS[owners[0], resolved][0]
    assert parsed == reference or parsed.to(reference) == pytest.approx(1.0, rel=1e-15)


# ---------------------------------------------------------------------------------------
# Contract: the units DESIGN.md promises (section "Canonical quantities")
# ---------------------------------------------------------------------------------------

DESIGN_UNITS = {
    "teff": ["K", "dex(K)"],
    "logg": ["dex(cm/s2)"],
    "luminosity": ["Lsun", "dex(Lsun)", "W", "erg/s", "mag"],
    "radius": ["Rsun", "dex(Rsun)", "km", "m"],
    "mass": ["Msun", "dex(Msun)", "kg"],
    "initial_mass": ["Msun", "dex(Msun)", "kg"],
    "age": ["yr", "Myr", "Gyr", "dex(yr)"],
    "feh": ["dex"],
    "parallax": ["mas", "arcsec"],
    "distance": ["pc", "kpc"],
}


@pytest.mark.parametrize(
    ("quantity", "unit"), [(q, unit) for q, units in DESIGN_UNITS.items() for unit in units]
)
def test_design_unit_is_accepted(quantity: str, unit: str) -> None:
    """Every unit DESIGN.md lists for a quantity is accepted by catcheck."""
    assert conversion_for(quantity, unit) is not None
