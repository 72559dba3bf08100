"""Physical constants and solar reference values, each with its unit and source.

Every number the physics layer uses comes from here.  A :class:`Constant` cannot be
built without a reference; derived values say how they were derived.  The engine, the
I/O layer and the command line hold no physical numbers of their own.

Editions: IAU 2015 Resolutions B2 and B3 (nominal solar and bolometric values),
CODATA 2018 (the Stefan-Boltzmann constant is exact in SI since 2019, so CODATA 2018 and
2022 agree), Planck 2018 results VI (age of the Universe).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Constant:
    """A value with its unit and the published source it comes from."""

    name: str
    value: float
    unit: str
    reference: str
    uncertainty: float = 0.0

    def __post_init__(self) -> None:
        if not self.reference:
            raise ValueError(f"constant {self.name!r} needs a reference")

    def __float__(self) -> float:
        return float(self.value)


# --- IAU 2015 Resolution B3: nominal solar values -------------------------------------
R_SUN = Constant("nominal solar radius", 6.957e8, "m", "IAU 2015 Resolution B3")
L_SUN = Constant("nominal solar luminosity", 3.828e26, "W", "IAU 2015 Resolution B3")
TEFF_SUN = Constant("nominal solar effective temperature", 5772.0, "K", "IAU 2015 Resolution B3")
GM_SUN = Constant("nominal solar mass parameter", 1.3271244e20, "m3 s-2", "IAU 2015 Resolution B3")

# --- IAU 2015 Resolution B2: bolometric magnitude scale --------------------------------
L_BOL_ZERO = Constant(
    "luminosity of absolute bolometric magnitude 0", 3.0128e28, "W", "IAU 2015 Resolution B2"
)

# --- CODATA 2018 ------------------------------------------------------------------------
SIGMA_SB = Constant(
    "Stefan-Boltzmann constant", 5.670374419e-8, "W m-2 K-4", "CODATA 2018 (exact)"
)
G_NEWTON = Constant(
    "Newtonian constant of gravitation", 6.67430e-11, "m3 kg-1 s-2", "CODATA 2018",
    uncertainty=1.5e-15,
)
C_LIGHT = Constant("speed of light in vacuum", 299792458.0, "m s-1", "CODATA 2018 (exact)")
M_PROTON = Constant("proton mass", 1.67262192369e-27, "kg", "CODATA 2018", uncertainty=5.1e-37)
HBAR = Constant("reduced Planck constant", 1.054571817e-34, "J s", "CODATA 2018 (exact)")
ATOMIC_MASS_UNIT = Constant(
    "atomic mass constant", 1.66053906660e-27, "kg", "CODATA 2018", uncertainty=5.0e-37
)
SIGMA_THOMSON = Constant(
    "Thomson cross-section", 6.6524587321e-29, "m2", "CODATA 2018", uncertainty=6.0e-38
)

# --- Cosmology --------------------------------------------------------------------------
AGE_OF_UNIVERSE = Constant(
    "age of the Universe", 13.787e9, "yr",
    "Planck Collaboration 2020, A&A 641, A6 (Planck 2018 results VI), Table 2",
    uncertainty=0.020e9,
)

# --- Derived values (derived here from the constants above) ------------------------------
M_SUN_KG = Constant(
    "solar mass", GM_SUN.value / G_NEWTON.value, "kg",
    "derived: IAU 2015 nominal GM_sun / CODATA 2018 G",
)
LOGG_SUN = Constant(
    "log10 surface gravity of the Sun", math.log10(GM_SUN.value / R_SUN.value**2 * 100.0),
    "dex(cm s-2)", "derived: log10(GM_sun / R_sun^2) in cgs, IAU 2015 nominal values",
)
MBOL_SUN = Constant(
    "absolute bolometric magnitude of the Sun",
    -2.5 * math.log10(L_SUN.value / L_BOL_ZERO.value), "mag",
    "derived: IAU 2015 Resolution B2 zero point and B3 nominal luminosity",
)

# --- Unit factors (exact definitions) ----------------------------------------------------
JULIAN_YEAR_S = Constant("Julian year", 365.25 * 86400.0, "s", "IAU definition (exact)")
PARSEC_M = Constant("parsec", 648000.0 / math.pi * 1.495978707e11, "m",
                    "IAU 2015 Resolution B2 (exact, from the astronomical unit of IAU 2012 B2)")
ERG_J = Constant("erg", 1e-7, "J", "SI definition (exact)")
