"""The canonical quantities a profile maps catalogue columns onto, and the phase codes.

This table is the vocabulary shared by profiles, rules and outputs.  Units a profile may
declare for each quantity, and their conversion to the canonical unit, live in
:mod:`catcheck.units`.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Quantity:
    """One canonical quantity: its name, canonical unit and what it means."""

    name: str
    unit: str
    description: str
    numeric: bool = True


QUANTITIES: dict[str, Quantity] = {
    q.name: q
    for q in (
        Quantity("teff", "K", "effective temperature"),
        Quantity("logg", "dex(cm/s2)", "log10 surface gravity"),
        Quantity("luminosity", "Lsun", "bolometric luminosity"),
        Quantity("radius", "Rsun", "radius"),
        Quantity("mass", "Msun", "present mass"),
        Quantity("initial_mass", "Msun", "zero-age (initial) mass"),
        Quantity("age", "yr", "age"),
        Quantity("feh", "dex", "metallicity [Fe/H] or [M/H]"),
        Quantity("parallax", "mas", "trigonometric parallax"),
        Quantity("distance", "pc", "distance"),
        Quantity("phase", "code", "evolutionary phase", numeric=False),
        Quantity("spectral_type", "text", "MK spectral type", numeric=False),
    )
}

NUMERIC_QUANTITIES: tuple[str, ...] = tuple(n for n, q in QUANTITIES.items() if q.numeric)


# Phase codes (trade abbreviations).  The position in this tuple is the integer code used
# inside the engine; -1 means "no phase given".
PHASES: dict[str, str] = {
    "PMS": "pre-main sequence",
    "MS": "main sequence",
    "SGB": "subgiant branch",
    "RGB": "red giant branch",
    "RC": "red clump",
    "HB": "horizontal branch",
    "CHEB": "core helium burning (any)",
    "AGB": "asymptotic giant branch",
    "PAGB": "post-AGB",
    "WD": "white dwarf",
    "BSG": "blue supergiant",
    "RSG": "red supergiant",
    "WR": "Wolf-Rayet",
    "BSS": "blue straggler",
}
PHASE_CODES: tuple[str, ...] = tuple(PHASES)
PHASE_INDEX: dict[str, int] = {code: i for i, code in enumerate(PHASE_CODES)}
NO_PHASE = -1
