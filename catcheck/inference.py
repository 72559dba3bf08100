"""Propose a profile for an unknown table (``catcheck profile``).

Three kinds of evidence are weighed for every column:

1. **The name**, against common naming variants of each quantity: ``teff``, ``T_eff``,
   ``TEFF``, ``logTe``; ``logg``, ``log_g``, ``grav``; ``[Fe/H]``, ``feh``, ``MH``; ``Mini``,
   ``M_ini`` ...  A log prefix (``log``, ``lg``, ``dex``) or a unit at the end of the name
   (``age_myr``, ``dist_pc``, ``Teff_K``) is a hint for the unit.  Error columns pair with
   their quantity's column by name: ``e_X``, ``eX``, ``err_X``, ``sigma_X``, ``X_err``,
   ``X_error``, ``X_sigma``, or by the UCD ``stat.error``.
2. **What the file declares**: the unit (FITS ``TUNITn``, VOTable and ECSV ``unit``) and the
   IVOA UCD (``phys.temperature.effective``, ``phys.gravity``, ``time.age``, ``meta.id`` ...)
   that :mod:`catcheck.formats` keeps in the Arrow field metadata.
3. **The values** of the first rows (a sample, :data:`SAMPLE_ROWS` by default): which of
   the quantity's units they fit (:data:`VALUE_WINDOWS`: log10 Teff 3.15-5.4 is dex(K),
   1,500-250,000 is K, 1.5-250 is kK ...; all but 1% of the values on either side, none
   in a sample under 100); when several fit, the shape of the values
   (a linear luminosity or radius is skewed over orders of magnitude, its logarithm is not)
   and, where the columns are there, whether Stefan-Boltzmann and g = GM/R^2 hold with
   one choice of units and not the other.  An identifier must be unique in the sample and
   a group must repeat; a phase column's labels are mapped to phase codes by common names
   (:data:`PHASE_WORDS`), supergiants by their Teff; a spectral-type column must hold MK
   types.  A column whose name or UCD clearly says the quantity is mapped even when some
   values fit no unit: to the unit most of them fit, at lower confidence, the evidence
   counting and quoting the values that do not fit (``9 of 10 values fit K; 1 does not
   (3.76: a log10 value?)``), so that the range and unit-blunder rules flag their rows.
   A column is left out only when no unit fits more than half of its values, and the
   proposal says why.

Nothing is guessed silently.  Each mapping carries its evidence and a confidence:
*high* (the name or UCD says which quantity, and the declared unit, the name or the
values leave one unit), *medium* (one of the two rests on a preference among several
that fit, or up to a tenth of the values fit no unit) or *low* (weak evidence, more of
the values fit no unit, or the values contradict the declared unit: check by hand).
Columns that compete for one quantity are listed with the reason the loser lost;
quantities, columns and phase labels that could not be mapped are listed too.

:func:`infer_profile` is pure (a schema and a sample in, a :class:`ProfileProposal` out);
:func:`propose_profile` reads the sample from a catalogue; :meth:`ProfileProposal.to_toml`
writes the DESIGN.md profile format, which :func:`catcheck.profile.load_profile` reads.

The value windows, phase words and name variants are plausibility heuristics (common
practice), deliberately wide; they decide nothing about the stars, only which reading of
a column is plausible.
"""

from __future__ import annotations

import dataclasses
import math
import re
import textwrap
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, replace
from itertools import product
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
from numpy.typing import NDArray

from catcheck.engine import Catalogue
from catcheck.errors import ProfileError
from catcheck.formats import column_metadata
from catcheck.outputs import write_file_atomically
from catcheck.physics.spectral import TypeKind, parse_mk
from catcheck.physics.stellar import log_luminosity_stefan_boltzmann, log_surface_gravity
from catcheck.quantities import PHASE_CODES, QUANTITIES
from catcheck.units import conversion_for

FloatArray = NDArray[np.float64]

#: rows read for the value evidence (the first rows of the catalogue)
SAMPLE_ROWS = 100_000
#: text columns with more distinct values than this are not read as labels
MAX_LABELS = 5_000
#: text that stands for a missing value, not a label (as pandas and others write it)
MISSING_TEXT = frozenset(("", "nan", "none", "null", "na", "n/a", "--", "-", "?", "..."))
#: phase labels listed by name in the proposal (the most frequent first)
MAX_PHASE_LABELS = 200

#: comment lines of the TOML are wrapped at this width
COMMENT_WIDTH = 96

HIGH, MEDIUM, LOW = 3, 2, 1
CONFIDENCE_NAMES = {HIGH: "high", MEDIUM: "medium", LOW: "low"}

#: targets of a proposal besides the quantities
ID, GROUP = "id", "group"


# =========================================================================================
# Names
# =========================================================================================

#: name (compact: lower case, letters and digits only) -> strength (3 = the usual name,
#: 2 = a name that also means other things).  Per target, for names without a log prefix.
NAMES: dict[str, dict[str, int]] = {
    "teff": {"teff": 3, "tef": 3, "teffective": 3, "effectivetemperature": 3, "tstar": 3,
             "te": 2, "temp": 2, "temperature": 2, "t": 2},
    "logg": {"logg": 3, "grav": 3, "gravity": 3, "surfacegravity": 3, "loggrav": 3},
    "luminosity": {"lum": 3, "luminosity": 3, "lbol": 3, "lstar": 3, "l": 2,
                   "mbol": 2, "mbolmag": 2, "absmagbol": 2, "magbol": 2},
    "radius": {"rad": 3, "radius": 3, "rstar": 3, "r": 2},
    "mass": {"mass": 3, "mact": 3, "mstar": 3, "mcur": 3, "mcurrent": 3, "massact": 3,
             "presentmass": 3, "starmass": 3, "currentmass": 3, "stellarmass": 3, "m": 2},
    "initial_mass": {"mini": 3, "minit": 3, "minitial": 3, "initialmass": 3, "massini": 3,
                     "massinit": 3, "massinitial": 3, "mzams": 3, "zamsmass": 3,
                     "initmass": 3, "m0": 2, "mi": 2},
    "age": {"age": 3, "tau": 2, "stellarage": 3, "clusterage": 3},
    "feh": {"feh": 3, "mh": 3, "moh": 3, "meh": 3, "metallicity": 3, "met": 2, "metal": 2,
            "metals": 2, "fe": 2},
    "parallax": {"plx": 3, "parallax": 3, "varpi": 3, "par": 2, "pi": 2},
    "distance": {"dist": 3, "distance": 3, "d": 2},
    "phase": {"phase": 3, "evo": 3, "evol": 3, "evolution": 3, "evolutionary": 3,
              "evostate": 3, "evolstate": 3,
              "evolutionarystate": 3, "evolutionaryphase": 3, "evolutionarystage": 3,
              "evoclass": 3, "evolclass": 3, "evophase": 3, "evolphase": 3, "evostage": 3,
              "evolstage": 3, "stage": 3, "label": 2, "state": 2, "class": 2},
    "spectral_type": {"spt": 3, "sptype": 3, "spectype": 3, "spectraltype": 3, "mktype": 3,
                      "spclass": 2, "mk": 2, "sp": 2, "spectrum": 2},
    ID: {"id": 3, "sourceid": 3, "objid": 3, "objectid": 3, "starid": 3, "srcid": 3,
         "name": 3, "starname": 3, "objname": 3, "designation": 3, "desig": 3,
         "identifier": 3, "mainid": 3, "source": 2, "star": 2, "object": 2, "obj": 2,
         "oid": 2},
    GROUP: {"cluster": 3, "clust": 3, "clustername": 3, "clusterid": 3, "group": 3,
            "groupname": 3, "groupid": 3,
            "assoc": 3, "association": 3, "cl": 2, "grp": 2, "oc": 2, "memberof": 2},
}
#: the same for names with a log prefix (``logTe``, ``log_g``, ``logL``, ``logAge``)
LOG_NAMES: dict[str, dict[str, int]] = {
    "teff": {"teff": 3, "te": 3, "tef": 3, "t": 2, "temp": 2},
    "logg": {"g": 3, "grav": 3, "gravity": 3},
    "luminosity": {"l": 3, "lum": 3, "luminosity": 3, "lbol": 3, "lstar": 3},
    "radius": {"r": 3, "rad": 3, "radius": 3, "rstar": 3},
    "mass": {"m": 3, "mass": 3, "mstar": 3, "mact": 3},
    "initial_mass": {"mini": 3, "minit": 3, "initialmass": 3, "mzams": 3},
    "age": {"age": 3, "tau": 2, "t": 1},
}
#: names of columns catcheck cannot use as they are, and why (shown under "not mapped")
UNUSABLE_NAMES: dict[str, str] = {
    "z": "the metal mass fraction Z, not [M/H] in dex ([M/H] ~ log10(Z/Z_sun))",
    "zini": "the initial metal mass fraction Z, not [M/H] in dex",
    "zinit": "the initial metal mass fraction Z, not [M/H] in dex",
    "y": "the helium mass fraction Y, which no rule reads",
    "dmod": "a distance modulus (mag); catcheck reads distances in pc or kpc",
    "distancemodulus": "a distance modulus (mag); catcheck reads distances in pc or kpc",
    "distmod": "a distance modulus (mag); catcheck reads distances in pc or kpc",
    "mu0": "a distance modulus (mag); catcheck reads distances in pc or kpc",
    "eep": "an equivalent evolutionary point of a model grid, which no rule reads",
}
_LOG_PREFIXES = ("log10", "log", "lg")
#: words that make a column about a quantity something other than its value
_NOT_THE_VALUE = {"modulus", "mod", "over", "ratio", "flag", "flags", "snr", "sn", "quality",
                  "qual", "n", "num", "count", "ref", "refs", "method", "source", "bibcode",
                  "note", "notes", "lim", "limit", "upper", "lower", "lo", "hi", "min", "max",
                  "ul", "ll", "code", "model", "prior"}
#: name tokens meaning "error of"
_ERROR_PREFIXES = {"e", "err", "error", "sig", "sigma", "unc", "std"}
_ERROR_SUFFIXES = {"e", "err", "error", "errs", "sig", "sigma", "unc", "uncertainty", "std"}
#: unit names at the end of a column name -> unit family (see _UNIT_FAMILIES)
_NAME_UNITS = {"k": "K", "kelvin": "K", "kk": "kK", "myr": "Myr", "gyr": "Gyr", "yr": "yr",
               "yrs": "yr", "pc": "pc", "kpc": "kpc", "mas": "mas", "arcsec": "arcsec",
               "km": "km", "rsun": "Rsun", "lsun": "Lsun", "msun": "Msun", "cgs": "cm/s2",
               "mag": "mag"}
_TOKEN = re.compile(r"[A-Z]+(?=[A-Z][a-z])|[A-Z]?[a-z]+|[A-Z]+|\d+")


def name_tokens(name: str) -> tuple[str, ...]:
    """Lower-case words of a column name: ``"logTe"`` -> ``("log", "te")``,
    ``"[Fe/H]"`` -> ``("fe", "h")``, ``"e_T_eff"`` -> ``("e", "t", "eff")``."""
    return tuple(token.lower() for part in re.split(r"[^A-Za-z0-9]+", name)
                 for token in _TOKEN.findall(part))


@dataclass(frozen=True)
class NameReading:
    """What a column name says: its stem (compact), a log prefix, a unit at its end."""

    stem: str
    tokens: tuple[str, ...]
    logged: bool
    unit_family: str | None


def read_name(name: str) -> NameReading:
    """Split off a log prefix and a trailing unit from a column name."""
    tokens = list(name_tokens(name))
    unit_family = None
    logged = "dex" in tokens
    tokens = [token for token in tokens if token != "dex"] or tokens
    if len(tokens) > 1 and tokens[-1] in _NAME_UNITS:
        unit_family = _NAME_UNITS[tokens.pop()]
    if len(tokens) > 1 and tokens[0] in _LOG_PREFIXES:
        tokens.pop(0)
        logged = True
    elif len(tokens) == 1 and tokens[0].startswith("log") and len(tokens[0]) > 3:
        tokens = [tokens[0][3:]]
        logged = True
    return NameReading("".join(tokens), tuple(tokens), logged, unit_family)


def name_candidates(name: str) -> list[tuple[str, int, str]]:
    """``(target, strength, evidence)`` for every target the name suggests.

    The whole stem matching a variant gives its strength; a variant at the start or end of
    a longer name (``teff_spec``, ``cluster_age``, ``locs_id``) one less, unless another
    word of the name says the column is about the quantity rather than its value
    (``teff_flag``, ``distance_modulus``, ``parallax_over_error``).
    """
    reading = read_name(name)
    if reading.stem in UNUSABLE_NAMES:
        return []
    found = []
    for target in NAMES:
        table = LOG_NAMES.get(target, {}) if reading.logged else NAMES[target]
        how = "log of " if reading.logged and target != "logg" else ""
        strength = table.get(reading.stem, 0)
        if strength:
            found.append((target, strength, f'name "{name}" ({how}{_TARGET_WORDS[target]})'))
            continue
        part = _partial_match(reading.tokens, table)
        if part:
            found.append((target, table[part] - 1, f'name "{name}" contains "{part}" '
                                                   f"({how}{_TARGET_WORDS[target]})"))
    return found


def _partial_match(tokens: Sequence[str], table: Mapping[str, int]) -> str | None:
    """The longest usual variant (strength 3) the tokens start or end with, if the other
    tokens qualify the value rather than describe something else (``cluster_age`` is an
    age, not a cluster)."""
    for size in range(len(tokens) - 1, 0, -1):
        for part, rest in (("".join(tokens[:size]), tokens[size:]),
                           ("".join(tokens[-size:]), tokens[:-size])):
            if (table.get(part, 0) >= HIGH and not set(rest) & _NOT_THE_VALUE
                    and not _is_usual_name("".join(rest))):
                return part
    return None


def _is_usual_name(stem: str) -> bool:
    return any(names.get(stem, 0) >= HIGH for names in NAMES.values())


def error_base(name: str) -> str | None:
    """The compact name of the column this one would be the error of, or None.

    ``e_Teff``, ``eTeff``, ``err_Teff``, ``sigma_Teff``, ``Teff_err``, ``Teff_error`` ->
    ``"teff"``; ``e_logL`` -> ``"logl"``.
    """
    tokens = name_tokens(name)
    if len(tokens) > 1 and tokens[0] in _ERROR_PREFIXES:
        return "".join(tokens[1:])
    if len(tokens) > 1 and tokens[-1] in _ERROR_SUFFIXES:
        return "".join(tokens[:-1])
    return None


_TARGET_WORDS = {
    "teff": "effective temperature", "logg": "surface gravity", "luminosity": "luminosity",
    "radius": "radius", "mass": "present mass", "initial_mass": "initial mass",
    "age": "age", "feh": "metallicity", "parallax": "parallax", "distance": "distance",
    "phase": "evolutionary phase", "spectral_type": "spectral type", ID: "identifier",
    GROUP: "group or cluster",
}


# =========================================================================================
# Units and UCDs
# =========================================================================================

#: unit spellings (lower case, no spaces) -> unit family
_UNIT_FAMILIES: dict[str, str] = {
    **dict.fromkeys(("k", "kelvin", "degk"), "K"),
    "kk": "kK",
    **dict.fromkeys(("cm/s2", "cm/s^2", "cm/s**2", "cms-2", "cm.s-2", "cm.s**-2", "cms**-2",
                     "cm/s/s", "cgs", "cm/sec2", "cm/sec^2"), "cm/s2"),
    **dict.fromkeys(("lsun", "sollum", "l_sun", "lsol", "l_sol", "lsolar"), "Lsun"),
    **dict.fromkeys(("w", "watt"), "W"),
    **dict.fromkeys(("erg/s", "ergs-1", "erg.s-1", "erg/sec", "erg.s**-1"), "erg/s"),
    **dict.fromkeys(("mag", "mags"), "mag"),
    **dict.fromkeys(("rsun", "solrad", "r_sun", "rsol", "r_sol"), "Rsun"),
    "km": "km", "m": "m",
    **dict.fromkeys(("msun", "solmass", "m_sun", "msol", "m_sol"), "Msun"),
    "kg": "kg",
    **dict.fromkeys(("yr", "a", "year", "years", "yrs"), "yr"),
    **dict.fromkeys(("myr", "ma", "megayear", "myrs"), "Myr"),
    **dict.fromkeys(("gyr", "ga", "gyrs"), "Gyr"),
    **dict.fromkeys(("mas", "milliarcsec"), "mas"),
    **dict.fromkeys(("arcsec", "asec", "''", '"'), "arcsec"),
    **dict.fromkeys(("pc", "parsec"), "pc"),
    "kpc": "kpc",
    **dict.fromkeys(("sun", "solar", "-", ""), "solar"),
    **dict.fromkeys(("deg", "rad", "uas", "µas", "mpc", "ly", "au", "g", "s", "d", "h",
                     "mas/yr", "km/s", "m/s"), "other"),
}
_LOG_WRAPPER = re.compile(r"^(?:dex|log10|log|lg)\((.*)\)$|^\[(.*)\]$")

#: per quantity: (unit family, logarithmic) -> the profile unit; family None = a bare "dex"
_MASS_UNITS = {("Msun", False): "Msun", ("Msun", True): "dex(Msun)", (None, True): "dex(Msun)",
               ("kg", False): "kg"}
PROFILE_UNITS: dict[str, dict[tuple[str | None, bool], str]] = {
    "teff": {("K", False): "K", ("kK", False): "kK", ("K", True): "dex(K)",
             (None, True): "dex(K)"},
    "logg": {("cm/s2", True): "dex(cm/s2)", (None, True): "dex(cm/s2)"},
    "luminosity": {("Lsun", False): "Lsun", ("Lsun", True): "dex(Lsun)",
                   (None, True): "dex(Lsun)", ("W", False): "W", ("erg/s", False): "erg/s",
                   ("mag", False): "mag"},
    "radius": {("Rsun", False): "Rsun", ("Rsun", True): "dex(Rsun)", (None, True): "dex(Rsun)",
               ("km", False): "km", ("m", False): "m"},
    "mass": _MASS_UNITS,
    "initial_mass": _MASS_UNITS,
    "age": {("yr", False): "yr", ("Myr", False): "Myr", ("Gyr", False): "Gyr",
            ("yr", True): "dex(yr)", (None, True): "dex(yr)"},
    "feh": {("solar", True): "dex", (None, True): "dex"},
    "parallax": {("mas", False): "mas", ("arcsec", False): "arcsec"},
    "distance": {("pc", False): "pc", ("kpc", False): "kpc"},
}
#: units that alone suggest a quantity, for a column whose name says nothing
_TELLING_FAMILIES = {("K", False): "teff", ("kK", False): "teff", ("K", True): "teff",
                     ("cm/s2", True): "logg", ("Lsun", False): "luminosity",
                     ("Lsun", True): "luminosity", ("Rsun", False): "radius",
                     ("Rsun", True): "radius", ("Msun", False): "mass",
                     ("Msun", True): "mass", ("Myr", False): "age", ("Gyr", False): "age",
                     ("yr", True): "age"}

#: UCD (IVOA UCD1+) words -> target; the most specific first
UCD_TARGETS: tuple[tuple[str, str], ...] = (
    ("phys.temperature.effective", "teff"),
    ("phys.gravity", "logg"),
    ("phys.luminosity", "luminosity"),
    ("phys.magabs.bol", "luminosity"),
    ("phys.size.radius", "radius"),
    ("phys.mass", "mass"),
    ("time.age", "age"),
    ("phys.abund.z", "feh"),
    ("phys.abund.fe", "feh"),
    ("phys.abund.metal", "feh"),
    ("pos.parallax", "parallax"),
    ("pos.distance", "distance"),
    ("src.sptype", "spectral_type"),
    ("meta.code.class", "phase"),
    ("src.class", "phase"),
    ("meta.id.parent", GROUP),
    ("meta.id.assoc", GROUP),
    ("meta.id", ID),
)


@dataclass(frozen=True)
class UnitReading:
    """A declared unit: its family (None for a bare ``dex``; ``"?"`` if not understood)."""

    text: str
    family: str | None
    logged: bool


def read_unit(text: str | None) -> UnitReading | None:
    """Read a declared unit string (FITS, VOTable, ECSV, CDS or astropy spelling).

    ``None`` when nothing is declared.  ``dex(K)``, ``log(K)`` and ``[K]`` are log K;
    ``dex`` alone is logarithmic with no unit named.
    """
    if text is None or not text.strip() or text.strip().lower() == "none":
        return None
    compact = re.sub(r"\s+", "", text).lower().replace("solar", "sun")
    compact = {"sollum": "lsun", "solrad": "rsun", "solmass": "msun"}.get(compact, compact)
    if compact in ("dex", "log", "[-]", "[]"):
        return UnitReading(text, None, True)
    wrapped = _LOG_WRAPPER.match(compact)
    inner = next(group for group in wrapped.groups() if group is not None) if wrapped else compact
    inner = {"sollum": "lsun", "solrad": "rsun", "solmass": "msun"}.get(inner, inner)
    family = _UNIT_FAMILIES.get(inner, "?")
    return UnitReading(text, family, wrapped is not None)


def ucd_target(ucd: str | None) -> tuple[str | None, bool]:
    """``(target, is_error)`` named by a UCD; target None if no word of it is known."""
    if not ucd:
        return None, False
    words = [word.strip().lower() for word in ucd.split(";") if word.strip()]
    is_error = bool(words) and words[0].startswith(("stat.error", "stat.stdev"))
    for word in words[1:] if is_error else words:
        for prefix, target in UCD_TARGETS:
            if word == prefix or word.startswith(prefix + "."):
                return target, is_error
    return None, is_error


# =========================================================================================
# Values
# =========================================================================================

#: per quantity and unit, the window a column's values must lie in for them to fit that
#: unit (common practice, wide on purpose: stars from brown dwarfs to O stars and white
#: dwarfs); up to :data:`OUTLIER_SHARE` of the values may lie outside on each side, as
#: faults do
VALUE_WINDOWS: dict[str, dict[str, tuple[float, float]]] = {
    "teff": {"K": (1_500.0, 250_000.0), "kK": (1.5, 250.0), "dex(K)": (3.15, 5.4)},
    "logg": {"dex(cm/s2)": (-1.5, 9.9)},
    "luminosity": {"Lsun": (0.0, 1e8), "dex(Lsun)": (-6.0, 7.5), "W": (1e19, 1e36),
                   "erg/s": (1e26, 1e43), "mag": (-15.0, 22.0)},
    "radius": {"Rsun": (0.0, 3_000.0), "dex(Rsun)": (-3.0, 3.5), "km": (300.0, 3e9),
               "m": (3e5, 3e12)},
    "mass": {"Msun": (0.0, 350.0), "dex(Msun)": (-2.5, 2.6), "kg": (1e27, 1e33)},
    "age": {"yr": (1e3, 2e10), "Myr": (0.0, 14_500.0), "Gyr": (0.0, 14.5),
            "dex(yr)": (4.0, 10.35)},
    "feh": {"dex": (-5.5, 1.5)},
    "parallax": {"mas": (-100.0, 1_000.0), "arcsec": (-0.1, 1.0)},
    "distance": {"pc": (0.5, 1e6), "kpc": (5e-4, 1_000.0)},
}
VALUE_WINDOWS["initial_mass"] = VALUE_WINDOWS["mass"]
#: share of a column's values that may lie below, and again above, a unit's window while
#: the values still fit it cleanly (rounded down: in a sample under 100 values, none may)
OUTLIER_SHARE = 0.01
#: samples smaller than this are described by their full range, not by percentiles (which
#: would be interpolated between values and name numbers the file does not hold)
SMALL_SAMPLE = 100
#: a column whose name or UCD clearly says the quantity is still mapped when no unit fits
#: its values cleanly, if one unit fits more than this share of them (the range and
#: unit-blunder rules then flag the rest); the mapping is medium confidence when at least
#: :data:`MOSTLY_FIT_MEDIUM` of the values fit, low otherwise
MOSTLY_FIT = 0.5
MOSTLY_FIT_MEDIUM = 0.9
#: values that do not fit the chosen unit quoted in the evidence, in row order
ODD_VALUES_SHOWN = 3
#: a linear quantity spread over orders of magnitude is skewed: (p99 - p50) / (p50 - p1)
#: at least this much reads as linear rather than logarithmic
LINEAR_SKEW = 3.0
#: a relation (Stefan-Boltzmann, g = GM/R^2) settles a choice of units when its median
#: absolute residual is below this (dex) and below a third of the next choice's
RELATION_HOLDS_DEX = 0.2


@dataclass(frozen=True)
class ValueSummary:
    """A column's finite values in the sample: their 1st, 50th and 99th percentiles, their
    full range, and the values themselves in row order (to count those in a window)."""

    count: int
    low: float
    median: float
    high: float
    minimum: float
    maximum: float
    finite: FloatArray = dataclasses.field(compare=False, repr=False)

    @classmethod
    def of(cls, values: FloatArray) -> ValueSummary:
        finite = values[np.isfinite(values)]
        if finite.size == 0:
            return cls(0, math.nan, math.nan, math.nan, math.nan, math.nan, finite)
        low, median, high = np.percentile(finite, [1.0, 50.0, 99.0])
        return cls(int(finite.size), float(low), float(median), float(high),
                   float(finite.min()), float(finite.max()), finite)

    def inside(self, window: tuple[float, float]) -> NDArray[np.bool_]:
        """Which values (in row order) lie in ``window``, bounds included."""
        return (self.finite >= window[0]) & (self.finite <= window[1])

    def fits(self, window: tuple[float, float]) -> bool:
        """At most :data:`OUTLIER_SHARE` of the values below the window, and as many above."""
        allowed = int(self.count * OUTLIER_SHARE)
        below = int(np.count_nonzero(self.finite < window[0]))
        above = int(np.count_nonzero(self.finite > window[1]))
        return below <= allowed and above <= allowed

    @property
    def skew(self) -> float:
        return (self.high - self.median) / max(self.median - self.low, 1e-12)

    def describe(self) -> str:
        """``values A..B (...)``: the full range of a small sample, else the 1st to 99th
        percentile followed by the full range."""
        full = f"{_number(self.minimum)}..{_number(self.maximum)}"
        if self.count < SMALL_SAMPLE:
            return (f"values {full} (full range of {self.count:,} "
                    f"value{'' if self.count == 1 else 's'}, median {_number(self.median)})")
        return (f"values {_number(self.low)}..{_number(self.high)} (1st-99th percentile, "
                f"median {_number(self.median)}; full range {full})")


def _number(value: float) -> str:
    if 100 <= abs(value) < 1e6:
        return f"{value:,.0f}"
    if value == 0 or 1e-3 <= abs(value) < 100:
        return f"{value:.4g}"
    return f"{value:.3g}"


@dataclass(frozen=True)
class ColumnFacts:
    """Everything the inference knows about one column."""

    index: int
    name: str
    kind: str  # "number", "text" or "other"
    unit: UnitReading | None
    ucd: str | None
    rows: int
    present: int
    distinct: int
    values: FloatArray  # the sample as float64, NaN for null (numbers only)
    labels: dict[str, int]  # label text -> rows (text and integer columns with few values)
    integral: bool
    label_rows: pa.Array | None = None  # each row's label text, when labels were read

    @property
    def summary(self) -> ValueSummary:
        return ValueSummary.of(self.values)


def column_facts(index: int, field: pa.Field, column: pa.ChunkedArray | pa.Array | None
                 ) -> ColumnFacts:
    """Facts about one column from its schema field and its sample (None: not read)."""
    kind = ("number" if _is_number(field.type) else
            "text" if pa.types.is_string(field.type) or pa.types.is_large_string(field.type)
            or (pa.types.is_dictionary(field.type) and pa.types.is_string(field.type.value_type))
            else "other")
    meta = column_metadata(field)
    empty = np.empty(0)
    if column is None or kind == "other":
        return ColumnFacts(index, field.name, kind, read_unit(meta.get("unit")),
                           meta.get("ucd"), 0, 0, 0, empty, {}, False)
    if isinstance(column, pa.ChunkedArray):
        column = column.combine_chunks()
    rows, present = len(column), len(column) - column.null_count
    distinct = pc.count_distinct(column).as_py() if present else 0
    values, integral = empty, False
    if kind == "number":
        values = pc.cast(column, pa.float64()).to_numpy(zero_copy_only=False)
        finite = values[np.isfinite(values)]
        integral = bool(finite.size) and bool(np.all(finite == np.round(finite)))
    labels: dict[str, int] = {}
    label_rows = None
    if distinct <= MAX_LABELS and (kind == "text" or integral):
        label_rows = pc.utf8_trim_whitespace(pc.cast(column, pa.string()))
        for entry in pc.value_counts(label_rows).to_pylist():
            if entry["values"] is not None and entry["values"].lower() not in MISSING_TEXT:
                labels[entry["values"]] = entry["counts"]
    return ColumnFacts(index, field.name, kind, read_unit(meta.get("unit")), meta.get("ucd"),
                       rows, present, distinct, values, labels, integral, label_rows)


def _is_number(kind: pa.DataType) -> bool:
    return pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind)


# =========================================================================================
# The proposal
# =========================================================================================


@dataclass(frozen=True)
class ProposedMapping:
    """One proposed mapping of a target (a quantity, ``id`` or ``group``) to a column."""

    target: str
    column: str
    unit: str | None
    confidence: int
    evidence: tuple[str, ...]
    error: str | None = None
    error_evidence: str = ""
    considered: tuple[str, ...] = ()


@dataclass(frozen=True)
class PhaseLabel:
    """One catalogue label and the phase code proposed for it (None: not mapped)."""

    label: str
    rows: int
    code: str | None
    confidence: int
    evidence: str


@dataclass(frozen=True)
class ProfileProposal:
    """A proposed profile with the evidence for every mapping and what was not mapped."""

    source: str
    sample_rows: int
    total_rows: int
    id: ProposedMapping
    group: ProposedMapping | None
    quantities: dict[str, ProposedMapping]
    phases: tuple[PhaseLabel, ...] = ()
    not_mapped: tuple[str, ...] = ()

    def mapping(self) -> dict[str, tuple[str, str | None, str | None]]:
        """quantity -> (column, unit, error column): the proposal without its evidence."""
        return {name: (m.column, m.unit, m.error) for name, m in self.quantities.items()}

    def to_toml(self) -> str:
        """The proposal in the DESIGN.md profile format, with its evidence as comments."""
        return _render(self)


# =========================================================================================
# Inference
# =========================================================================================


def propose_profile(catalogue: Catalogue, sample_rows: int = SAMPLE_ROWS) -> ProfileProposal:
    """Read the first ``sample_rows`` rows of ``catalogue`` and propose a profile."""
    columns = columns_to_sample(catalogue.schema)
    sample = read_sample(catalogue, columns, sample_rows)
    return infer_profile(catalogue.schema, sample, source=catalogue.description,
                         total_rows=catalogue.num_rows)


def columns_to_sample(schema: pa.Schema) -> list[str]:
    """The columns whose values can be evidence: all but numbers that nothing points at."""
    wanted = []
    for index, field in enumerate(schema):
        facts = column_facts(index, field, None)
        if (facts.kind == "text" or pa.types.is_integer(field.type)
                or name_candidates(field.name) or ucd_target(facts.ucd)[0]
                or _telling_unit(facts.unit) or error_base(field.name) is not None
                or _unusable_reason(field.name)):
            wanted.append(field.name)
    return wanted


def read_sample(catalogue: Catalogue, columns: Sequence[str], rows: int) -> pa.Table:
    """The first ``rows`` rows of ``columns`` (fewer if the catalogue is shorter)."""
    catalogue.check_columns(columns)
    batches: list[pa.RecordBatch] = []
    read = 0
    if columns:
        for _, batch in catalogue.batches(list(columns), min(rows, 65_536)):
            batches.append(batch.slice(0, rows - read))
            read += batches[-1].num_rows
            if read >= rows:
                break
    fields = [catalogue.schema.field(name) for name in columns]
    return pa.Table.from_arrays(
        [pa.chunked_array([b.column(i) for b in batches], field.type)
         for i, field in enumerate(fields)], schema=pa.schema(fields))


def infer_profile(schema: pa.Schema, sample: pa.Table, source: str = "<table>",
                  total_rows: int | None = None) -> ProfileProposal:
    """Propose a profile for a table with ``schema`` from a ``sample`` of its rows (pure).

    ``sample`` holds the first rows of (some of) the columns; columns missing from it are
    judged by name and metadata only.  Raises :class:`~catcheck.errors.ProfileError` when
    no quantity at all can be mapped (the profile could not be loaded).
    """
    facts = [column_facts(i, field, sample.column(field.name)
                          if field.name in sample.column_names else None)
             for i, field in enumerate(schema)]
    errors = _error_columns(facts)
    candidates = [candidate for fact in facts if fact.name not in errors.values()
                  for candidate in _candidates(fact)]
    chosen, losers = _assign(candidates)
    chosen = _settle_units_by_physics(chosen, {f.name: f for f in facts})
    by_name = {fact.name: fact for fact in facts}
    quantities = {}
    for quantity in QUANTITIES:
        if quantity in chosen:
            pick = chosen[quantity]
            quantities[quantity] = _with_error(pick.mapping, errors, by_name, losers)
    if not quantities:
        raise ProfileError("no column could be mapped to a quantity", where=source,
                           fix="write the profile by hand (see the README); columns: "
                               + ", ".join(schema.names[:15]))
    id_mapping = (_with_considered(chosen[ID].mapping, losers) if ID in chosen
                  else _fallback_id(facts, losers))
    group = _with_considered(chosen[GROUP].mapping, losers) if GROUP in chosen else None
    phases: tuple[PhaseLabel, ...] = ()
    if "phase" in quantities:
        phases = phase_labels(by_name[quantities["phase"].column],
                              _teff_by_label(by_name, quantities))
    used = {m.column for m in quantities.values()} | {id_mapping.column}
    used |= {m.error for m in quantities.values() if m.error}
    if group:
        used.add(group.column)
    not_mapped = _not_mapped(facts, quantities, used, losers, group is None, errors)
    rows = sample.num_rows
    return ProfileProposal(source, rows, rows if total_rows is None else total_rows,
                           id_mapping, group, quantities, phases, tuple(not_mapped))


# --- candidates ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Candidate:
    mapping: ProposedMapping
    identity: int  # 3 UCD or the usual name, 2 weaker name or values, 1 unit only
    unit_level: int
    fitting: tuple[str, ...]  # units the values fit, when the values chose the unit
    present: int
    index: int

    @property
    def rank(self) -> tuple[int, int, int, int]:
        return (min(self.identity, self.unit_level), self.identity, self.present, -self.index)


@dataclass(frozen=True)
class _Rejection:
    target: str
    column: str
    reason: str


def _candidates(fact: ColumnFacts) -> Iterable[_Candidate | _Rejection]:
    """Every target this column could be, with its unit and confidence, or why not."""
    identity: dict[str, tuple[int, list[str]]] = {}
    for target, strength, evidence in name_candidates(fact.name):
        identity[target] = (strength, [evidence])
    target, is_error = ucd_target(fact.ucd)
    if target and not is_error:
        if target == "mass" and "initial_mass" in identity:
            target = "initial_mass"  # phys.mass names both; the name says which
        strength, evidence = identity.get(target, (0, []))
        identity[target] = (HIGH, [f"UCD {fact.ucd}", *evidence])
    if not identity and fact.kind == "number" and _telling_unit(fact.unit):
        quantity = _telling_unit(fact.unit)
        identity[quantity] = (LOW, [f'only the unit "{fact.unit.text}" suggests {quantity}'])
    if fact.kind == "text" and "phase" not in identity and _phase_share(fact) >= 0.8 \
            and len(fact.labels) >= 2:
        identity["phase"] = (MEDIUM, ["values are evolutionary-phase words"])
    if fact.kind == "text" and "spectral_type" not in identity and _mk_share(fact, True) >= 0.8:
        identity["spectral_type"] = (MEDIUM, ["values are MK spectral types"])
    for target, (strength, evidence) in identity.items():
        yield _judge(fact, target, strength, evidence)


def _judge(fact: ColumnFacts, target: str, identity: int, evidence: list[str]
           ) -> _Candidate | _Rejection:
    if target == ID:
        return _judge_id(fact, identity, evidence)
    if target == GROUP:
        return _judge_group(fact, identity, evidence)
    if target == "phase":
        return _judge_phase(fact, identity, evidence)
    if target == "spectral_type":
        return _judge_spectral(fact, identity, evidence)
    if fact.kind != "number":
        return _Rejection(target, fact.name, f"holds {fact.kind}, not numbers")
    decision = decide_unit(target, fact, clear_name=identity >= HIGH)
    if isinstance(decision, str):
        return _Rejection(target, fact.name, decision)
    unit, level, why, fitting = decision
    mapping = ProposedMapping(target, fact.name, unit, min(identity, level), (*evidence, why))
    return _Candidate(mapping, identity, level, fitting, fact.present, fact.index)


def _judge_id(fact: ColumnFacts, identity: int, evidence: list[str]) -> _Candidate | _Rejection:
    if fact.distinct < fact.present:
        return _Rejection(ID, fact.name, f"{fact.distinct:,} distinct values in "
                                         f"{fact.present:,} rows: not unique")
    level = HIGH if fact.rows and fact.present == fact.rows else MEDIUM if fact.rows else LOW
    seen = ("no values read" if not fact.rows else
            f"values unique in the sample ({fact.rows:,} rows)" if level == HIGH else
            f"values unique, but {fact.rows - fact.present:,} of {fact.rows:,} rows have none")
    mapping = ProposedMapping(ID, fact.name, None, min(identity, level), (*evidence, seen))
    return _Candidate(mapping, identity, level, (), fact.present, fact.index)


def _judge_group(fact: ColumnFacts, identity: int, evidence: list[str]
                 ) -> _Candidate | _Rejection:
    if fact.present and fact.distinct >= fact.present:
        return _Rejection(GROUP, fact.name, "every value is different: not a group")
    seen = (f"{fact.distinct:,} distinct values in {fact.present:,} rows" if fact.present
            else "no values read")
    mapping = ProposedMapping(GROUP, fact.name, None, identity, (*evidence, seen))
    return _Candidate(mapping, identity, HIGH if fact.present else LOW, (), fact.present,
                      fact.index)


def _judge_phase(fact: ColumnFacts, identity: int, evidence: list[str]
                 ) -> _Candidate | _Rejection:
    share = _phase_share(fact)
    if fact.kind == "number" and not fact.integral:
        return _Rejection("phase", fact.name, "holds non-integer numbers, not phase labels")
    if fact.kind not in ("text", "number"):
        return _Rejection("phase", fact.name, f"holds {fact.kind}")
    if fact.present and share == 0 and identity < HIGH:
        return _Rejection("phase", fact.name, "no value is a phase label catcheck knows")
    level = HIGH if share >= 0.5 else MEDIUM if share > 0 else LOW
    seen = (f"{share:.0%} of the sample's labelled rows carry a label mapped below"
            if fact.present else "no labels read")
    mapping = ProposedMapping("phase", fact.name, None, min(identity, level), (*evidence, seen))
    return _Candidate(mapping, identity, level, (), fact.present, fact.index)


def _judge_spectral(fact: ColumnFacts, identity: int, evidence: list[str]
                    ) -> _Candidate | _Rejection:
    if fact.kind != "text":
        return _Rejection("spectral_type", fact.name, f"holds {fact.kind}, not text")
    share = _mk_share(fact, False)
    if fact.present and share < 0.5:
        return _Rejection("spectral_type", fact.name,
                          f"only {share:.0%} of the values read as spectral types")
    level = HIGH if share >= 0.8 else MEDIUM if fact.present else LOW
    seen = f"{share:.0%} of the values read as spectral types" if fact.present else "no values"
    mapping = ProposedMapping("spectral_type", fact.name, None, min(identity, level),
                       (*evidence, seen))
    return _Candidate(mapping, identity, level, (), fact.present, fact.index)


def _telling_unit(unit: UnitReading | None) -> str | None:
    return None if unit is None else _TELLING_FAMILIES.get((unit.family, unit.logged))


def _unusable_reason(name: str) -> str | None:
    return UNUSABLE_NAMES.get(read_name(name).stem)


# --- units --------------------------------------------------------------------------------


def decide_unit(quantity: str, fact: ColumnFacts, clear_name: bool = False
                ) -> tuple[str, int, str, tuple[str, ...]] | str:
    """The unit of a numeric column for ``quantity``: ``(unit, level, evidence, fitting)``,
    or the reason the column cannot be this quantity.

    The values fit a unit cleanly when all but :data:`OUTLIER_SHARE` of them on either
    side lie in its window.  When no unit fits cleanly and ``clear_name`` says the column's
    name or UCD clearly names the quantity, the unit that more than :data:`MOSTLY_FIT` of
    the values fit is taken at lower confidence, and the evidence counts and quotes the
    values that do not fit (the range and unit-blunder rules flag their rows); only when no
    unit fits most values is the column left out.

    ``fitting`` lists the units the values fit when the values alone chose among several
    (a relation between quantities may still settle the choice), else it is empty.
    """
    summary = fact.summary
    windows = VALUE_WINDOWS[quantity]
    reading = read_name(fact.name)
    hint_family = reading.unit_family
    if quantity == "luminosity" and reading.stem in ("mbol", "mbolmag", "absmagbol", "magbol"):
        hint_family = "mag"
    if hint_family and not _same_family(quantity, hint_family):
        return f'its name ends in a unit ({hint_family}) that is not a unit of {quantity}'
    hinted = PROFILE_UNITS[quantity].get((hint_family, reading.logged))
    declared, declared_note = _declared_unit(quantity, fact.unit)
    if declared_note and declared is None and fact.unit and fact.unit.family not in (
            "?", None, "solar") and not _same_family(quantity, fact.unit.family):
        return f'its unit "{fact.unit.text}" is not a unit of {quantity}'
    allowed = [unit for unit in windows if unit != "mag" or "mag" in (declared, hinted)]
    if summary.count == 0:
        unit = declared or hinted or QUANTITIES[quantity].unit
        source = ("declared" if declared else "from the name" if hinted
                  else "the canonical unit, a guess")
        return unit, LOW, f'no values in the sample; unit "{unit}" {source}', ()
    fitting = tuple(unit for unit in allowed if summary.fits(windows[unit]))
    mostly = (_units_most_values_fit(quantity, summary, allowed)
              if clear_name and not fitting else {})
    seen = summary.describe()
    for given, how in ((declared, f'declared unit "{fact.unit.text if fact.unit else ""}"'),
                       (hinted, f'the name "{fact.name}"')):
        if given is None:
            continue
        if given in fitting:
            return given, HIGH, f"{how} says {given}; {seen} agree", ()
        if fitting:
            unit, _, _ = _prefer(quantity, fitting, summary)
            return unit, LOW, (f"{how} says {given}, but {seen} fit {' or '.join(fitting)}: "
                               f"taken as {unit} (check: a unit mistake in the table?)"), ()
        if given in mostly:
            unit, level, why = _mostly(quantity, summary, allowed, mostly, given)
            return unit, level, f"{how} says {given}; {seen}: {why}", ()
        if mostly:
            unit, _, why = _mostly(quantity, summary, allowed, mostly)
            return unit, LOW, (f"{how} says {given}, but {seen}: {why}; taken as {unit} "
                               "(check: a unit mistake in the table?)"), ()
        return (f"{seen} fit no unit of {quantity} ({how} says {given}; "
                f"{_why_no_unit(quantity, summary, allowed, clear_name)})")
    if declared_note:
        seen = f"{declared_note}; {seen}"
    if mostly:
        unit, level, why = _mostly(quantity, summary, allowed, mostly)
        return unit, level, f"{seen}: {why}", ()
    if not fitting:
        if quantity == "logg" and summary.median > 100:
            return f"{seen} look like linear g in cm/s2; profiles take log g"
        return (f"{seen} fit no unit of {quantity} "
                f"({_why_no_unit(quantity, summary, allowed, clear_name)})")
    unit, level, why = _prefer(quantity, fitting, summary)
    if declared_note:  # the file says something else: never high
        level = min(level, MEDIUM)
    return unit, level, f"{seen}: {why}", fitting if len(fitting) > 1 else ()


def _fit_counts(quantity: str, summary: ValueSummary, allowed: Sequence[str]
                ) -> dict[str, int]:
    """unit -> how many values lie in its window, the most first (ties in window order)."""
    counts = {unit: int(np.count_nonzero(summary.inside(VALUE_WINDOWS[quantity][unit])))
              for unit in allowed}
    return dict(sorted(counts.items(), key=lambda item: -item[1]))


def _units_most_values_fit(quantity: str, summary: ValueSummary, allowed: Sequence[str]
                           ) -> dict[str, int]:
    """unit -> values in its window, for the units more than :data:`MOSTLY_FIT` of the
    values fit (the most first)."""
    return {unit: count for unit, count in _fit_counts(quantity, summary, allowed).items()
            if count > MOSTLY_FIT * summary.count}


def _mostly(quantity: str, summary: ValueSummary, allowed: Sequence[str],
            mostly: Mapping[str, int], given: str | None = None) -> tuple[str, int, str]:
    """Choose among the units most values fit: ``(unit, level, why)``.

    ``given`` (declared or named) wins if most values fit it; else the unit the most values
    fit, with :func:`_prefer` deciding a tie on the values that fit.  The level is medium
    when at least :data:`MOSTLY_FIT_MEDIUM` of the values fit, else low.
    """
    top = max(mostly.values())
    tied = [unit for unit, count in mostly.items() if count == top]
    level, preference = HIGH, ""
    if given in mostly:
        unit = given
    elif len(tied) > 1:
        windows = VALUE_WINDOWS[quantity]
        inside = np.logical_or.reduce([summary.inside(windows[u]) for u in tied])
        unit, level, preference = _prefer(quantity, tied, ValueSummary.of(summary.finite[inside]))
        preference = f"; {preference}"
    else:
        unit = tied[0]
    share_level = MEDIUM if mostly[unit] >= MOSTLY_FIT_MEDIUM * summary.count else LOW
    return (unit, min(level, share_level),
            f"{_misfit_note(quantity, summary, unit, allowed)}{preference}; taken as {unit} "
            "(the rules flag the rows that do not fit)")


def _misfit_note(quantity: str, summary: ValueSummary, unit: str, allowed: Sequence[str]
                 ) -> str:
    """``9 of 10 values fit K; 1 does not (3.76: a log10 value?)``: the count of values
    outside ``unit``'s window and the first few distinct ones, with the unit they fit."""
    inside = summary.inside(VALUE_WINDOWS[quantity][unit])
    odd = summary.finite[~inside]
    _, first = np.unique(odd, return_index=True)
    distinct = odd[np.sort(first)]
    shown = "; ".join(f"{_number(value)}: {_odd_value_reading(quantity, value, unit, allowed)}"
                      for value in distinct[:ODD_VALUES_SHOWN])
    example = "e.g. " if distinct.size > ODD_VALUES_SHOWN else ""
    verb = "does" if odd.size == 1 else "do"
    return (f"{summary.count - odd.size:,} of {summary.count:,} values fit {unit}; "
            f"{odd.size:,} {verb} not ({example}{shown})")


def _odd_value_reading(quantity: str, value: float, chosen: str, allowed: Sequence[str]
                       ) -> str:
    """What a value outside ``chosen``'s window might be: ``a log10 value?``, ``in km?``."""
    windows = VALUE_WINDOWS[quantity]
    others = [unit for unit in allowed
              if unit != chosen and windows[unit][0] <= value <= windows[unit][1]]
    if not others:
        return f"fits no unit of {quantity}"
    unit, _, _ = _prefer(quantity, others, ValueSummary.of(np.array([value])))
    return "a log10 value?" if unit.startswith("dex") else f"in {unit}?"


def _why_no_unit(quantity: str, summary: ValueSummary, allowed: Sequence[str],
                 clear_name: bool) -> str:
    """Why a column is left out although it may be ``quantity``: how many values the best
    unit fits, and why that is not enough."""
    unit, count = next(iter(_fit_counts(quantity, summary, allowed).items()))
    if count == 0:
        return f"no value fits any unit of {quantity}"
    if count > MOSTLY_FIT * summary.count and not clear_name:
        return (f"{_misfit_note(quantity, summary, unit, allowed)}; only a column whose name "
                "or UCD clearly says the quantity is mapped with values that do not fit")
    return (f"the unit most values fit, {unit}, fits {count:,} of {summary.count:,}, "
            "not more than half")


def _declared_unit(quantity: str, unit: UnitReading | None) -> tuple[str | None, str]:
    if unit is None:
        return None, ""
    found = PROFILE_UNITS[quantity].get((unit.family, unit.logged))
    if found is None and unit.family == "solar" and quantity != "feh":
        found = PROFILE_UNITS[quantity].get((None, True)) if unit.logged else None
    if found:
        return found, ""
    return None, f'declared unit "{unit.text}" is not one catcheck reads for {quantity}'


def _same_family(quantity: str, family: str | None) -> bool:
    return any(known == family for known, _ in PROFILE_UNITS[quantity])


#: quantity -> (linear unit, its logarithm), told apart by the skew of the values
_LINEAR_LOG = {"luminosity": ("Lsun", "dex(Lsun)"), "radius": ("Rsun", "dex(Rsun)"),
               "mass": ("Msun", "dex(Msun)"), "initial_mass": ("Msun", "dex(Msun)")}


def _prefer(quantity: str, fitting: Sequence[str], summary: ValueSummary
            ) -> tuple[str, int, str]:
    """Choose among the units the values fit: ``(unit, level, why)``."""
    if len(fitting) == 1:
        return fitting[0], HIGH, f"only {fitting[0]} fits"
    others = " or ".join(fitting)
    linear, logarithmic = _LINEAR_LOG.get(quantity, (None, None))
    if linear in fitting and logarithmic in fitting:
        if quantity in ("mass", "initial_mass"):
            return linear, MEDIUM, (f"{others} fit; no value is negative, as log masses of "
                                    f"stars below 1 Msun would be, so {linear}")
        unit = linear if summary.skew >= LINEAR_SKEW else logarithmic
        shape = "skewed over orders of magnitude" if unit == linear else "not skewed"
        return unit, MEDIUM, f"{others} fit; the values are {shape}, so {unit}"
    if quantity == "teff":
        return "dex(K)", MEDIUM, f"{others} fit; log10 K is the usual reading of 3.2-5.4"
    if quantity == "luminosity":
        unit = "W" if summary.median < 1e30 else "erg/s"
        return unit, MEDIUM, f"{others} fit; a median of {_number(summary.median)} suits {unit}"
    if quantity == "radius":
        unit = ("Rsun" if "Rsun" in fitting and summary.median < 300 else
                "km" if summary.median < 1e8 else "m")
        return unit, MEDIUM, f"{others} fit; a median of {_number(summary.median)} suits {unit}"
    if quantity == "age":
        for unit, why in (("dex(yr)", "4-10.35 reads as log10 yr"),
                          ("Gyr", "values up to 14.5 read as Gyr"),
                          ("Myr", "values up to 14,500 read as Myr")):
            if unit in fitting:
                return unit, MEDIUM if unit != "Gyr" else LOW, f"{others} fit; {why}"
    if quantity == "parallax":
        small = summary.high <= 1.0 and abs(summary.median) < 0.05
        unit = "arcsec" if small else "mas"
        return unit, MEDIUM, f"{others} fit; a median of {_number(summary.median)} suits {unit}"
    if quantity == "distance":
        unit = "pc" if summary.median >= 30 else "kpc"
        return unit, MEDIUM if unit == "pc" else LOW, (
            f"{others} fit; a median of {_number(summary.median)} suits {unit}")
    return fitting[0], LOW, f"{others} fit; took the first"



# --- errors -------------------------------------------------------------------------------


def _error_columns(facts: Sequence[ColumnFacts]) -> dict[str, str]:
    """Main column -> its error column, by name (``e_X``, ``X_err`` ...) or UCD."""
    by_stem = {"".join(name_tokens(f.name)): f.name for f in facts}
    errors: dict[str, str] = {}
    for fact in facts:
        if fact.kind != "number":
            continue
        base = error_base(fact.name)
        compact = "".join(name_tokens(fact.name))
        main = by_stem.get(base) if base else None
        if main is None and compact.startswith("e") and compact[1:] in by_stem:
            main = by_stem[compact[1:]]  # eTEFF written in one case
        if main is None:
            main = _main_of_error_ucd(fact, facts)
        if main is None or main == fact.name:
            continue
        errors.setdefault(main, fact.name)
    return errors


def _main_of_error_ucd(fact: ColumnFacts, facts: Sequence[ColumnFacts]) -> str | None:
    """The one column whose UCD is the quantity this ``stat.error`` UCD is the error of."""
    target, is_error = ucd_target(fact.ucd)
    if not (target and is_error):
        return None
    mains = [f.name for f in facts if ucd_target(f.ucd) == (target, False)]
    return mains[0] if len(mains) == 1 else None


def _with_error(mapping: ProposedMapping, errors: Mapping[str, str],
                facts: Mapping[str, ColumnFacts], losers: Mapping[str, list[str]]
                ) -> ProposedMapping:
    mapping = _with_considered(mapping, losers)
    error = errors.get(mapping.column)
    if error is None:
        return mapping
    fact = facts[error]
    note = f'"{error}" by its name'
    declared = read_unit(fact.unit.text) if fact.unit else None
    if mapping.unit and mapping.unit.startswith("dex") and declared and not declared.logged \
            and declared.family not in (None, "?", "solar"):
        return replace(mapping, error_evidence=(
            f'"{error}" looks like its error but its unit "{fact.unit.text}" is linear, and '
            f"errors of {mapping.unit} are in dex: left out"))
    summary = fact.summary
    if summary.count and summary.low < 0:
        return replace(mapping, error_evidence=f'"{error}" has negative values: left out')
    if mapping.unit and mapping.unit.startswith("dex") and summary.count and summary.median > 2:
        return replace(mapping, error_evidence=(
            f'"{error}" has a median of {_number(summary.median)}, too large for an error in '
            "dex: left out"))
    if fact.unit:
        note += f', unit "{fact.unit.text}"'
    return replace(mapping, error=error, error_evidence=note)


# --- assignment ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Pick:
    mapping: ProposedMapping
    fitting: tuple[str, ...]


def _assign(candidates: Sequence[_Candidate | _Rejection]
            ) -> tuple[dict[str, _Pick], dict[str, list[str]]]:
    """Give each target its best column, each column to one target; note the losers."""
    losers: dict[str, list[str]] = {}
    viable = []
    for candidate in candidates:
        if isinstance(candidate, _Rejection):
            losers.setdefault(candidate.target, []).append(
                f'"{candidate.column}": {candidate.reason}')
        else:
            viable.append(candidate)
    viable.sort(key=lambda c: c.rank, reverse=True)
    chosen: dict[str, _Candidate] = {}
    taken: dict[str, str] = {}
    for candidate in viable:
        target, column = candidate.mapping.target, candidate.mapping.column
        if target in chosen:
            winner = chosen[target]
            tie = (min(winner.identity, winner.unit_level), winner.identity) == (
                min(candidate.identity, candidate.unit_level), candidate.identity)
            reason = (f"as likely as \"{winner.mapping.column}\", which has more values or "
                      "comes first" if tie else f'less evidence than "{winner.mapping.column}"')
            losers.setdefault(target, []).append(f'"{column}": {reason}')
            if tie:
                chosen[target] = replace(winner, mapping=replace(
                    winner.mapping, confidence=max(LOW, winner.mapping.confidence - 1)))
            continue
        if column in taken:
            losers.setdefault(target, []).append(f'"{column}": taken for {taken[column]}')
            continue
        chosen[target] = candidate
        taken[column] = target
    return ({t: _Pick(c.mapping, c.fitting) for t, c in chosen.items()}, losers)


def _with_considered(mapping: ProposedMapping, losers: Mapping[str, list[str]]) -> ProposedMapping:
    return replace(mapping, considered=tuple(losers.get(mapping.target, ())))


def _fallback_id(facts: Sequence[ColumnFacts], losers: Mapping[str, list[str]]) -> ProposedMapping:
    """No identifier column: the first unique text or integer column, else the first column.

    A profile needs an ``id`` column; the comment says loudly that this one is a stand-in.
    """
    unique = [f for f in facts if f.kind == "text" or (f.kind == "number" and f.integral)]
    unique = [f for f in unique if f.rows and f.distinct == f.present == f.rows]
    column = unique[0].name if unique else facts[0].name
    why = ("no identifier column found: this column is unique in the sample and stands in"
           if unique else
           "no identifier column found: this is the first column, set only so the profile "
           "loads; flags will name rows by its value; add an identifier column")
    return ProposedMapping(ID, column, None, LOW, (why,), considered=tuple(losers.get(ID, ())))


# --- relations between quantities ---------------------------------------------------------


def _settle_units_by_physics(chosen: dict[str, _Pick], facts: Mapping[str, ColumnFacts]
                             ) -> dict[str, _Pick]:
    """Where the values left a choice of units, let Stefan-Boltzmann or g = GM/R^2 decide.

    The relation's median absolute residual (dex) is computed for every combination of
    the open choices; a combination is taken only if it holds (< RELATION_HOLDS_DEX) and
    beats every other by a factor of three.  The evidence names the residuals.
    """
    relations = (("Stefan-Boltzmann", ("teff", "radius", "luminosity"), _stefan_boltzmann),
                 ("g = GM/R^2", ("mass", "radius", "logg"), _surface_gravity))
    result = dict(chosen)
    for name, quantities, residual in relations:
        if not all(q in result for q in quantities):
            continue
        options = [result[q].fitting or (result[q].mapping.unit,) for q in quantities]
        scores = []
        for units in product(*options):
            arrays = [_canonical(facts[result[q].mapping.column], q, u)
                      for q, u in zip(quantities, units, strict=True)]
            with np.errstate(all="ignore"):
                misfit = np.abs(residual(*arrays))
            misfit = misfit[np.isfinite(misfit)]
            if misfit.size:
                scores.append((float(np.median(misfit)), units))
        if not scores:
            continue
        scores.sort()
        best, units = scores[0]
        clear = best < RELATION_HOLDS_DEX and (len(scores) == 1 or scores[1][0] > 3 * best)
        for quantity, unit in zip(quantities, units, strict=True):
            pick = result[quantity]
            if clear and pick.fitting:
                note = (f"{name} holds to a median {best:.2f} dex with {unit}"
                        + (f" (next best {scores[1][0]:.2f} dex)" if len(scores) > 1 else ""))
                level = HIGH if pick.mapping.confidence >= MEDIUM else MEDIUM
                pick = _Pick(replace(pick.mapping, unit=unit, confidence=level,
                                     evidence=(*pick.mapping.evidence, note)), ())
            elif pick.mapping.unit == unit:
                holds = best < RELATION_HOLDS_DEX
                verdict = "holds" if holds else ("does not hold: check the units of "
                                                 + ", ".join(quantities))
                pick = replace(pick, mapping=replace(
                    pick.mapping, confidence=(pick.mapping.confidence if holds
                                              else max(LOW, pick.mapping.confidence - 1)),
                    evidence=(*pick.mapping.evidence,
                              f"{name} {verdict} (median residual {best:.2f} dex)")))
            result[quantity] = pick
    return result


def _canonical(fact: ColumnFacts, quantity: str, unit: str | None) -> FloatArray:
    conversion = conversion_for(quantity, unit) if unit else None
    if conversion is None or fact.values.size == 0:
        return np.full(max(fact.rows, 1), np.nan)
    return conversion.values(fact.values)


def _stefan_boltzmann(teff: FloatArray, radius: FloatArray, luminosity: FloatArray
                      ) -> FloatArray:
    return np.log10(luminosity) - log_luminosity_stefan_boltzmann(radius, teff)


def _surface_gravity(mass: FloatArray, radius: FloatArray, logg: FloatArray) -> FloatArray:
    return logg - log_surface_gravity(mass, radius)


# =========================================================================================
# Phase labels and spectral types
# =========================================================================================

#: common names of evolutionary phases (normalised: lower case, words separated by one
#: space) -> (phase code, confidence); common practice
PHASE_WORDS: dict[str, tuple[str, int]] = {
    **dict.fromkeys(("ms", "main sequence", "mainsequence", "ms star", "zams", "dwarf star"),
                    ("MS", HIGH)),
    **dict.fromkeys(("dwarf", "v"), ("MS", MEDIUM)),
    **dict.fromkeys(("pms", "pre ms", "pre main sequence", "premainsequence", "yso",
                     "young stellar object", "t tauri", "ttauri", "tts", "ctts", "wtts"),
                    ("PMS", HIGH)),
    **dict.fromkeys(("sgb", "subgiant", "sub giant", "subgiant branch"), ("SGB", HIGH)),
    "iv": ("SGB", MEDIUM),
    **dict.fromkeys(("rgb", "red giant branch", "red giant", "redgiant", "trgb", "rgb tip",
                     "first ascent giant"), ("RGB", HIGH)),
    "giant": ("RGB", MEDIUM),
    "iii": ("RGB", LOW),
    **dict.fromkeys(("rc", "red clump", "clump", "clump giant", "red clump giant"),
                    ("RC", HIGH)),
    **dict.fromkeys(("hb", "horizontal branch", "bhb", "rhb", "ehb"), ("HB", HIGH)),
    **dict.fromkeys(("cheb", "core he", "core he giant", "core he burning",
                     "core helium burning", "he burning", "helium burning", "heb"),
                    ("CHEB", HIGH)),
    **dict.fromkeys(("agb", "asymptotic giant branch", "eagb", "e agb", "early agb", "tpagb",
                     "tp agb", "thermally pulsing agb"), ("AGB", HIGH)),
    **dict.fromkeys(("pagb", "post agb", "postagb"), ("PAGB", HIGH)),
    **dict.fromkeys(("wd", "white dwarf", "whitedwarf"), ("WD", HIGH)),
    **dict.fromkeys(("bsg", "blue supergiant"), ("BSG", HIGH)),
    **dict.fromkeys(("rsg", "red supergiant"), ("RSG", HIGH)),
    **dict.fromkeys(("wr", "wolf rayet", "wolfrayet"), ("WR", HIGH)),
    **dict.fromkeys(("bss", "blue straggler", "bs star"), ("BSS", HIGH)),
}
#: labels of supergiants, whose code (BSG or RSG) follows their Teff
SUPERGIANT_WORDS = ("supergiant", "sg", "i", "ia", "iab", "ib", "ii")
#: median Teff (K) of a supergiant label at or above which it is BSG, at or below which RSG
#: (common practice: red supergiants are K-M types, blue ones O-B-early A)
BSG_MIN_TEFF, RSG_MAX_TEFF = 10_000.0, 5_000.0
#: PARSEC isochrone tables' integer ``label`` column (Bressan et al. 2012; CMD output):
#: 1 main sequence, 2 subgiant branch, 3 red giant branch, 4-6 core helium burning (as
#: documented in tests/parsec_data.py from the grid file), 7 early and 8 thermally pulsing
#: AGB (from memory of the CMD output description).  0 (pre-main sequence) is left out:
#: massive stars keep it through core hydrogen burning; 9 (post-AGB or white dwarf) is
#: ambiguous.
PARSEC_LABELS: dict[str, tuple[str, int]] = {
    "1": ("MS", MEDIUM), "2": ("SGB", MEDIUM), "3": ("RGB", MEDIUM), "4": ("CHEB", MEDIUM),
    "5": ("CHEB", MEDIUM), "6": ("CHEB", MEDIUM), "7": ("AGB", LOW), "8": ("AGB", LOW),
}
_PARSEC_LEFT_OUT = {"0": "PARSEC's pre-main-sequence label, which massive stars keep through "
                         "core hydrogen burning: map it by hand if your table means PMS",
                    "9": "PARSEC's post-AGB or white-dwarf label: map it by hand"}


def normalise_label(label: str) -> str:
    """Lower case, punctuation as spaces, one space between words, no trailing 'star(s)'."""
    text = " ".join(re.sub(r"[-_/.,;:()\[\]]+", " ", label.lower()).split())
    return re.sub(r" stars?$", "", text) or text


def phase_code_of(label: str) -> tuple[str | None, int, str]:
    """The phase code a label names: ``(code, confidence, evidence)``; code None if none."""
    text = normalise_label(label)
    for word in (text, text[:-1] if text.endswith("s") else text):
        if word.upper() in PHASE_CODES:
            return word.upper(), HIGH, "the label is the phase code"
        if word in PHASE_WORDS:
            code, level = PHASE_WORDS[word]
            return code, level, f'"{label}" is a common name of {code}'
    return None, LOW, "no phase code recognised"


def phase_labels(fact: ColumnFacts, teff_by_label: Mapping[str, float]
                 ) -> tuple[PhaseLabel, ...]:
    """Propose a code for each label of the phase column seen in the sample."""
    parsec = _is_parsec_label_column(fact)
    found = []
    ordered = sorted(fact.labels.items(), key=lambda item: (-item[1], item[0]))
    for label, rows in ordered[:MAX_PHASE_LABELS]:
        if parsec:
            code, level = PARSEC_LABELS.get(label, (None, LOW))
            why = (f"PARSEC label {label}" if code else
                   _PARSEC_LEFT_OUT.get(label, "not a PARSEC label"))
        else:
            code, level, why = phase_code_of(label)
            if code is None and normalise_label(label) in SUPERGIANT_WORDS:
                code, level, why = _supergiant(label, teff_by_label.get(label))
        found.append(PhaseLabel(label, rows, code, level, why))
    return tuple(found)


def _supergiant(label: str, teff: float | None) -> tuple[str | None, int, str]:
    if teff is None or not math.isfinite(teff):
        return None, LOW, "a supergiant, BSG or RSG by its Teff, which is not mapped"
    where = f"median Teff of its rows {teff:,.0f} K"
    if teff >= BSG_MIN_TEFF:
        return "BSG", MEDIUM, f"a supergiant; {where}: blue"
    if teff <= RSG_MAX_TEFF:
        return "RSG", MEDIUM, f"a supergiant; {where}: red"
    return None, LOW, f"a supergiant; {where}: neither clearly blue nor red"


def _is_parsec_label_column(fact: ColumnFacts) -> bool:
    return (fact.kind == "number" and fact.integral and read_name(fact.name).stem == "label"
            and bool(fact.labels) and set(fact.labels) <= {str(i) for i in range(10)})


def _phase_share(fact: ColumnFacts) -> float:
    """Share of labelled rows whose label maps to a phase code."""
    total = sum(fact.labels.values())
    if not total:
        return 0.0
    if _is_parsec_label_column(fact):
        known = sum(rows for label, rows in fact.labels.items() if label in PARSEC_LABELS)
    else:
        known = sum(rows for label, rows in fact.labels.items()
                    if phase_code_of(label)[0] or normalise_label(label) in SUPERGIANT_WORDS)
    return known / total


def _mk_share(fact: ColumnFacts, strict: bool) -> float:
    """Share of rows whose text reads as a spectral type (strict: an MK type with a subtype,
    as a column needs to be taken for spectral types by its values alone)."""
    total = sum(fact.labels.values())
    if not total:
        return 0.0
    accepted = ({TypeKind.MK, TypeKind.PECULIAR} if strict else
                set(TypeKind) - {TypeKind.MISSING, TypeKind.UNPARSEABLE})
    good = 0
    for label, rows in fact.labels.items():
        parsed = parse_mk(label)
        if parsed.kind in accepted and not (strict and math.isnan(parsed.index)):
            good += rows
    return good / total


def _teff_by_label(facts: Mapping[str, ColumnFacts], quantities: Mapping[str, ProposedMapping]
                   ) -> dict[str, float]:
    """Median Teff (K) of the rows of each phase label, when Teff is mapped."""
    if "teff" not in quantities or "phase" not in quantities:
        return {}
    teff = _canonical(facts[quantities["teff"].column], "teff", quantities["teff"].unit)
    phase = facts[quantities["phase"].column]
    if phase.label_rows is None or len(phase.label_rows) != teff.size:
        return {}
    encoded = phase.label_rows.dictionary_encode()
    codes = encoded.indices.fill_null(-1).to_numpy(zero_copy_only=False)
    medians = {}
    for code, label in enumerate(encoded.dictionary.to_pylist()):
        values = teff[(codes == code) & np.isfinite(teff)]
        if values.size:
            medians[label] = float(np.median(values))
    return medians


# =========================================================================================
# Not mapped
# =========================================================================================


def _not_mapped(facts: Sequence[ColumnFacts], quantities: Mapping[str, ProposedMapping],
                used: set[str], losers: Mapping[str, list[str]], no_group: bool,
                errors: Mapping[str, str]) -> list[str]:
    """Lines for the "not mapped" block: quantities without a column, unused columns."""
    lines = []
    for quantity in QUANTITIES:
        if quantity not in quantities:
            why = "; ".join(losers.get(quantity, [])) or "no column found"
            lines.append(f"{quantity}: {why}")
    if no_group:
        why = "; ".join(losers.get(GROUP, [])) or "no cluster or group column found"
        lines.append(f"group: {why} (optional)")
    for fact in facts:
        if fact.name in used:
            continue
        reason = _unusable_reason(fact.name)
        if reason is None and fact.name in errors.values():
            main = next(m for m, e in errors.items() if e == fact.name)
            reason = (f'the error of "{main}": left out (see above)' if main in used
                      else f'the error of "{main}", which is not mapped')
        if reason is None:
            targets = [t for t, items in losers.items()
                       if any(item.startswith(f'"{fact.name}"') for item in items)]
            reason = ("considered for " + ", ".join(targets) + " (see above)" if targets
                      else "no quantity recognised")
        lines.append(f'column "{fact.name}": {reason}')
    return lines


# =========================================================================================
# TOML
# =========================================================================================


def toml_string(text: str) -> str:
    """``text`` as a TOML basic string (quotes, backslashes and control characters escaped)."""
    out = []
    for char in text:
        if char in '"\\':
            out.append("\\" + char)
        elif ord(char) < 0x20 or ord(char) == 0x7F:
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return '"' + "".join(out) + '"'


def _comment(text: str, indent: str = "# ") -> list[str]:
    """``text`` as comment lines of at most :data:`COMMENT_WIDTH` characters."""
    return textwrap.wrap(_one_line(text), COMMENT_WIDTH, initial_indent=indent,
                         subsequent_indent=indent + "    ", break_on_hyphens=False)


def _one_line(text: str) -> str:
    """Text fit for a TOML comment: one line, control characters replaced."""
    return re.sub(r"[\x00-\x08\x0b-\x1f\x7f]", "?", " ".join(text.split()))


def _rows(count: int) -> str:
    return f"{count:,} row" + ("" if count == 1 else "s")


def _render(proposal: ProfileProposal) -> str:
    source = _one_line(proposal.source)
    lines = [
        *_comment(f"Profile proposed by `catcheck profile` for {source} from the column "
                  "names, the units and UCDs the file declares, and the values of the first "
                  f"{proposal.sample_rows:,} of {proposal.total_rows:,} rows."),
        *_comment("Each mapping gives its evidence and a confidence: high (the name or UCD, "
                  "and the unit, agree with the values), medium (one of them rests on a "
                  "preference among readings that fit, or a few values fit no reading), low "
                  "(check it by hand). Review it, then run:"),
        f"#   catcheck check {source} --profile <this file>",
        "",
    ]
    lines += _target_lines("id", proposal.id)
    if proposal.group:
        lines += _target_lines("group", proposal.group)
    for quantity, mapping in proposal.quantities.items():
        lines += ["", f"[quantities.{quantity}]"]
        lines += _comment(f"confidence {CONFIDENCE_NAMES[mapping.confidence]}: "
                          + "; ".join(mapping.evidence))
        for other in mapping.considered:
            lines += _comment(f"also considered {other}")
        lines.append(f"column = {toml_string(mapping.column)}")
        if mapping.unit:
            lines.append(f"unit = {toml_string(mapping.unit)}")
        if mapping.error:
            lines += _comment(f"error: {mapping.error_evidence}")
            lines.append(f"error = {toml_string(mapping.error)}")
        elif mapping.error_evidence:
            lines += _comment(f"error: {mapping.error_evidence}")
    mapped = [label for label in proposal.phases if label.code]
    unmapped = [label for label in proposal.phases if not label.code]
    if mapped:
        lines += ["", "[phases]", "# labels seen in the sample -> phase codes "
                  "(labels not seen there are reported by catcheck check as unmapped)"]
        for label in mapped:
            lines.append(f"{toml_string(label.label)} = {toml_string(label.code or '')}  "
                         f"# {CONFIDENCE_NAMES[label.confidence]}: {_rows(label.rows)}; "
                         f"{_one_line(label.evidence)}")
    notes = list(proposal.not_mapped)
    notes += [f'phase label "{label.label}" ({_rows(label.rows)}): {label.evidence}'
              for label in unmapped]
    if notes:
        lines += ["", "# not mapped:"]
        for note in notes:
            lines += _comment(note, "#   ")
    return "\n".join(lines) + "\n"


def _target_lines(key: str, mapping: ProposedMapping) -> list[str]:
    lines = _comment(f"{key}: confidence {CONFIDENCE_NAMES[mapping.confidence]}: "
                     + "; ".join(mapping.evidence))
    for other in mapping.considered:
        lines += _comment(f"also considered {other}")
    lines.append(f"{key} = {toml_string(mapping.column)}")
    return lines


def write_proposal(path: str | Path, text: str) -> Path:
    """Write a proposal to ``path`` atomically (a temporary file beside it, then rename)."""
    return write_file_atomically(path, text.encode("utf-8"), "profile", "--out")


__all__ = [
    "SAMPLE_ROWS",
    "ColumnFacts",
    "PhaseLabel",
    "ProfileProposal",
    "ProposedMapping",
    "column_facts",
    "columns_to_sample",
    "decide_unit",
    "error_base",
    "infer_profile",
    "name_candidates",
    "name_tokens",
    "phase_code_of",
    "propose_profile",
    "read_name",
    "read_sample",
    "read_unit",
    "toml_string",
    "ucd_target",
    "write_proposal",
]
