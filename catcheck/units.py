"""Units a profile may declare, and their conversion to canonical units.

Three kinds of conversion cover every unit in DESIGN.md:

* ``linear``: canonical = value * scale; the 1-sigma error scales the same way.
* ``dex``: the column holds log10 of a value in some unit; canonical = 10**value * scale.
  Errors are given in dex and become canonical 1-sigma by first-order propagation,
  ``sigma = canonical * ln(10) * sigma_dex``.
* ``bolometric magnitude`` (luminosity only): L/Lsun = 10**(-0.4 (M_bol - M_bol,sun)),
  with M_bol,sun = 4.74 from the IAU 2015 Resolution B2 zero point;
  ``sigma_L = L * 0.4 ln(10) * sigma_mag``.

log g and [Fe/H] are logarithmic in their canonical unit and pass through unchanged.
All conversion factors are derived from :mod:`catcheck.constants`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from catcheck.constants import ERG_J, L_SUN, M_SUN_KG, R_SUN
from catcheck.physics.stellar import luminosity_from_bolometric_magnitude

LN10 = float(np.log(10.0))


@dataclass(frozen=True)
class Conversion:
    """How one declared unit becomes the canonical unit of its quantity."""

    kind: str  # "linear", "dex" or "mbol"
    scale: float = 1.0

    def values(self, values: NDArray[np.float64]) -> NDArray[np.float64]:
        """Convert catalogue values to canonical units (the input is never modified)."""
        with np.errstate(over="ignore", invalid="ignore"):
            if self.kind == "linear":
                return values * self.scale if self.scale != 1.0 else values
            if self.kind == "dex":
                return np.power(10.0, values) * self.scale
            return luminosity_from_bolometric_magnitude(values)

    def errors(
        self, canonical: NDArray[np.float64], errors: NDArray[np.float64]
    ) -> NDArray[np.float64]:
        """Convert 1-sigma errors given in the declared unit (dex for dex units, mag for mag)."""
        with np.errstate(over="ignore", invalid="ignore"):
            if self.kind == "linear":
                return np.abs(errors) * self.scale
            if self.kind == "dex":
                return np.abs(canonical) * LN10 * np.abs(errors)
            return np.abs(canonical) * 0.4 * LN10 * np.abs(errors)


_SAME = Conversion("linear", 1.0)
_DEX = Conversion("dex", 1.0)

_MASS_UNITS = {
    "Msun": _SAME,
    "dex(Msun)": _DEX,
    "kg": Conversion("linear", 1.0 / M_SUN_KG.value),
}

#: quantity -> declared unit -> conversion to the canonical unit (see catcheck.quantities)
UNITS: dict[str, dict[str, Conversion]] = {
    "teff": {"K": _SAME, "dex(K)": _DEX, "kK": Conversion("linear", 1e3)},
    "logg": {"dex(cm/s2)": _SAME},
    "luminosity": {
        "Lsun": _SAME,
        "dex(Lsun)": _DEX,
        "W": Conversion("linear", 1.0 / L_SUN.value),
        "erg/s": Conversion("linear", ERG_J.value / L_SUN.value),
        "mag": Conversion("mbol"),
    },
    "radius": {
        "Rsun": _SAME,
        "dex(Rsun)": _DEX,
        "km": Conversion("linear", 1e3 / R_SUN.value),
        "m": Conversion("linear", 1.0 / R_SUN.value),
    },
    "mass": _MASS_UNITS,
    "initial_mass": _MASS_UNITS,
    "age": {
        "yr": _SAME,
        "Myr": Conversion("linear", 1e6),
        "Gyr": Conversion("linear", 1e9),
        "dex(yr)": _DEX,
    },
    "feh": {"dex": _SAME},
    "parallax": {"mas": _SAME, "arcsec": Conversion("linear", 1e3)},
    "distance": {"pc": _SAME, "kpc": Conversion("linear", 1e3)},
}

# Spellings people write for the same unit.
_ALIASES = {
    "dex(cm s-2)": "dex(cm/s2)",
    "dex(cm/s^2)": "dex(cm/s2)",
    "dex(cgs)": "dex(cm/s2)",
    "log(cm/s2)": "dex(cm/s2)",
    "L_sun": "Lsun",
    "R_sun": "Rsun",
    "M_sun": "Msun",
    "solLum": "Lsun",
    "solRad": "Rsun",
    "solMass": "Msun",
    "dex(solLum)": "dex(Lsun)",
    "dex(solRad)": "dex(Rsun)",
    "dex(solMass)": "dex(Msun)",
    "erg s-1": "erg/s",
    "a": "yr",
}


def normalise_unit(unit: str) -> str:
    """The spelling of ``unit`` used in :data:`UNITS` (aliases resolved, spaces trimmed)."""
    unit = unit.strip()
    return _ALIASES.get(unit, unit)


def conversion_for(quantity: str, unit: str) -> Conversion | None:
    """The conversion of ``unit`` for ``quantity``, or None if the unit is not accepted."""
    return UNITS.get(quantity, {}).get(normalise_unit(unit))
