"""Unit blunders: a column whose values contradict the unit the profile declares for it.

Four checks, one per classic mix-up: log10 Teff declared as K, radii in km declared as
Rsun, linear luminosities declared as dex(Lsun), ages in Gyr (or Myr) declared as yr.
Each flags the rows whose value reads as impossible in the declared unit but as an
ordinary star in the suggested one, and says what the value would then be.

The profile converts declared units to canonical ones before rules see values; the
blunders here are all about a column declared in the canonical unit itself (or, for
luminosity, in its log), so the checks read canonical values.  Each check applies only
when the profile declares the unit whose misuse it looks for: :func:`bind_declared_units`
copies the declared unit into the rule's ``declared_unit`` param before a run (left
empty, the canonical unit is assumed), and a rule whose column is declared in another
unit is reported as not run (``not-run: age declared in Myr (the rule is for yr)``).
Once per column, the run's summary reports the evidence gathered over all rows
(:mod:`catcheck.findings`).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from catcheck.canonical import StarBatch
from catcheck.checks.base import (
    Check,
    Documentation,
    Outcome,
    Params,
    at_rows,
    combined_sigma,
    fixed_needs,
    fmt,
)
from catcheck.checks.stefan_boltzmann import CHECK as STEFAN_BOLTZMANN
from catcheck.physics.stellar import LN10, log_luminosity_stefan_boltzmann_log
from catcheck.profile import Profile
from catcheck.units import UNITS, normalise_unit

if TYPE_CHECKING:  # catcheck.packs imports the checks
    from catcheck.packs import Rule

_KM_IN_RSUN = UNITS["radius"]["km"].scale
_GYR_IN_YR = UNITS["age"]["Gyr"].scale
_MYR_IN_YR = UNITS["age"]["Myr"].scale

DECLARED_UNIT_NOTE = ("declared_unit is filled in from the profile when a run starts: the "
                      "check applies only when the column is declared in {unit}")


@dataclass(frozen=True)
class Blunder:
    """What one unit-blunder check looks for: a quantity declared in ``declared_unit``
    whose values are in another unit; ``suggest(median, params)`` names that unit from a
    typical (median) flagged value, as catalogued, and the rule's params."""

    quantity: str
    declared_unit: str
    suggest: Callable[[float, Params], str]


def _other_unit(params: Params, blunder: Blunder) -> str | None:
    """Why the rule cannot apply: its column is declared in a unit other than the one
    whose misuse it looks for (None when the declared unit is the blunder's, or unknown)."""
    declared = params["declared_unit"]
    if declared in ("", blunder.declared_unit):
        return None
    return f"{blunder.quantity} declared in {declared} (the rule is for {blunder.declared_unit})"


def _not_run_reason(blunder: Blunder) -> Callable[[Params], str | None]:
    """A Check's ``not_run_reason`` for ``blunder``."""
    return lambda params: _other_unit(params, blunder)


def _applies(batch: StarBatch, params: Params, blunder: Blunder) -> np.ndarray | None:
    """None (every row) when the declared unit is the blunder's, else no row (the engine
    does not run such a rule at all; this keeps ``evaluate`` right on its own)."""
    if _other_unit(params, blunder) is None:
        return None
    return np.zeros(batch.size, dtype=bool)


# --- log10 Teff declared as K --------------------------------------------------------------

TEFF_BLUNDER = Blunder("teff", "K", lambda median, params: "dex(K)")

TEFF_DOC = Documentation(
    what="Flags a Teff declared in K whose value is the log10 of a stellar temperature "
    "(3.3-5.4 'K', that is 2000-250,000 K once read as dex(K)).",
    why="Catalogues often give log Teff beside or instead of Teff; a column of log values "
    "mapped with unit K turns every star into an object at a few kelvin, which no star "
    "is.  The value read as log10(Teff/K) is an ordinary stellar temperature.",
    formula="flag when log10(min_teff) <= Teff_cat <= log10(max_teff) (Teff_cat as "
    "catalogued, in K);\nobserved = Teff_cat (K), expected = 10^Teff_cat (K, the value if "
    "the unit is dex(K))\n" + DECLARED_UNIT_NOTE.format(unit="K"),
    caveats="No real star is this cold, so every flag is an error; `teff-range` flags the "
    "same rows as below its limit.  A column of log Teff for brown dwarfs (below 2000 K, "
    "log < 3.3) is not recognised here (the range rule still flags it).  A Teff of a few "
    "kelvin that is a corrupted number, not a log, is flagged too: the message says what "
    "it would be as a log, not that it is one.",
    example="Teff = 3.761 K reads as log10(Teff/K): 5768 K if the unit is dex(K); a whole "
    "column of such values is reported once in the summary as 'teff: declared K, looks "
    "like dex(K)'.",
    references=("Stellar Teff range 2000-250,000 K (late M/L dwarfs to the hottest white "
                "dwarfs and central stars): common practice",),
)


def evaluate_teff(batch: StarBatch, params: Params) -> Outcome:
    """Flag Teff values that are log10 of a stellar temperature."""
    teff = batch.values["teff"]
    with np.errstate(invalid="ignore"):
        failed = ((teff >= np.log10(params["min_teff"]))
                  & (teff <= np.log10(params["max_teff"])))
    as_log = np.full(batch.size, np.nan)  # only flagged rows need it: 10**x is costly
    as_log[failed] = np.power(10.0, teff[failed])

    def describe(rows: np.ndarray) -> list[str]:
        return [f"Teff = {fmt(t)} K reads as log10(Teff/K): {e:.0f} K if the unit is dex(K)"
                for t, e in at_rows(rows, teff, as_log)]

    return Outcome(failed, describe, teff, as_log, applies=_applies(batch, params,
                                                                    TEFF_BLUNDER))


TEFF_LOG_AS_KELVIN = Check(
    name="teff_log_as_kelvin",
    needs=fixed_needs("teff"),
    evaluate=evaluate_teff,
    doc=TEFF_DOC,
    defaults={"declared_unit": "", "min_teff": 2000.0, "max_teff": 250000.0},
    uses_errors=False,
    not_run_reason=_not_run_reason(TEFF_BLUNDER),
)


# --- radius in km declared as Rsun ---------------------------------------------------------

RADIUS_BLUNDER = Blunder("radius", "Rsun", lambda median, params: "km")

RADIUS_DOC = Documentation(
    what="Flags a radius declared in Rsun that is larger than any star but is an ordinary "
    "stellar radius once read as km (1 Rsun = 695,700 km).",
    why="Radii computed from physical formulae come out in km or m; a km column mapped "
    "with unit Rsun makes the Sun 695,700 Rsun.  The value in km divided by the nominal "
    "solar radius is an ordinary radius.",
    formula="flag when R_cat > max_radius and R_cat x (1 km / R_sun) <= max_radius "
    "(R_cat as catalogued, in Rsun; R_sun = 695,700 km, IAU 2015 B3);\n"
    "observed = R_cat (Rsun), expected = R_cat km in Rsun\n"
    + DECLARED_UNIT_NOTE.format(unit="Rsun"),
    caveats="No star is larger than max_radius, so every flag is an error; `radius-range` "
    "flags the same rows as above its limit.  A radius in metres declared as Rsun "
    "(7e6-1e12) is partly mistaken for km here; the summary's median value tells them "
    "apart (a solar-type star is 7e5 km but 7e8 m).",
    example="R = 6.957e5 Rsun is larger than any star (3000 Rsun) but reads as km: "
    "1 Rsun if the unit is km.",
    references=("IAU 2015 Resolution B3 (nominal solar radius 6.957e8 m)",
                "Largest red supergiants ~1500-2000 Rsun (from memory); 3000 Rsun as in "
                "`radius-range`"),
)


def evaluate_radius(batch: StarBatch, params: Params) -> Outcome:
    """Flag radii too large for a star that are stellar radii in km."""
    radius = batch.values["radius"]
    in_km = radius * _KM_IN_RSUN
    with np.errstate(invalid="ignore"):
        failed = (radius > params["max_radius"]) & (in_km <= params["max_radius"])
    limit = params["max_radius"]

    def describe(rows: np.ndarray) -> list[str]:
        return [f"R = {fmt(r)} Rsun is larger than any star ({fmt(limit)} Rsun) but reads as "
                f"km: {fmt(e)} Rsun if the unit is km" for r, e in at_rows(rows, radius, in_km)]

    return Outcome(failed, describe, radius, in_km,
                   applies=_applies(batch, params, RADIUS_BLUNDER))


RADIUS_KM_AS_RSUN = Check(
    name="radius_km_as_rsun",
    needs=fixed_needs("radius"),
    evaluate=evaluate_radius,
    doc=RADIUS_DOC,
    defaults={"declared_unit": "", "max_radius": 3000.0},
    uses_errors=False,
    not_run_reason=_not_run_reason(RADIUS_BLUNDER),
)


# --- linear luminosity declared as dex -----------------------------------------------------

LUMINOSITY_BLUNDER = Blunder("luminosity", "dex(Lsun)", lambda median, params: "Lsun")

LUMINOSITY_DOC = Documentation(
    what="Flags a log L declared in dex(Lsun) that is a linear luminosity in Lsun: either "
    "it is above any star's log L while its log10 is an ordinary log L (an error), or "
    "Stefan-Boltzmann with the row's radius and Teff rejects it as a log, accepts it as "
    "linear, and puts it clearly further from the truth as a log than an ordinary log L "
    "mistake would (a warning).  A value that fits Stefan-Boltzmann as a log is never "
    "flagged.",
    why="'L' and 'log L' columns sit side by side in many tables; mapping the linear one "
    "with unit dex(Lsun) raises 10 to the power of a luminosity.  L, R and Teff of one "
    "star obey L = 4 pi R^2 sigma Teff^4, which tells the two readings apart wherever R "
    "and Teff are given, except where a linear value and its log are close: a linear L of "
    "0.14-1 Lsun reads, as a log, less than 1 dex from its true log L, which is what an "
    "ordinary mistake in a log L (a distance off by a factor of 3, 2.5 mag of extinction "
    "left uncorrected) also gives.  Only a log reading off by clearly more than that "
    "tells a unit blunder from such a mistake.",
    formula="x = log L as catalogued (dex(Lsun)); log L_SB = 2 log R + 4 log(Teff/5772 K);\n"
    "sigma^2 = (2 s_R / (R ln10))^2 + (4 s_Teff / (Teff ln10))^2 + assumed_luminosity_dex^2, "
    "sigma >= floor_dex (the catalogue's own log L error is not used: it is in doubt with "
    "the column);\n"
    "as a log: z_log = |x - log L_SB| / sigma; as linear: z_lin = |log10 x - log L_SB| / "
    "sigma;\n"
    "never flagged when z_log <= threshold (the value fits as a log);\n"
    "error when max_log_luminosity < x <= 10^max_log_luminosity (no star's log L, an "
    "ordinary star's linear L);\n"
    "warning when z_log > threshold, z_lin <= agreement (so the linear reading fits better "
    "by at least threshold - agreement sigma) and x - log L_SB > ordinary_error_dex + "
    "agreement * sigma (further off as a log than an ordinary log L mistake, by more than "
    "the tolerance of a fit);\n"
    "observed = x, expected = log10 x (the log L if the unit is Lsun)\n"
    + DECLARED_UNIT_NOTE.format(unit="dex(Lsun)"),
    caveats="A linear L between ~0.1 and ~1.2 Lsun (x - log10 x <= 1 dex + 2 sigma, for "
    "sigma 0.07 dex) is not flagged row by row through Stefan-Boltzmann: there a log L "
    "wrong by an ordinary amount looks the same, so `stefan-boltzmann` flags the row "
    "without naming a cause.  In a whole "
    "column of linear values the other rows are flagged, and the summary's catalogue "
    "finding names the unit.  Without radius and Teff only values above "
    "max_log_luminosity are recognised, so a linear column of faint stars (L < 10^7.5 "
    "Lsun) goes unnoticed row by row.  A row flagged through Stefan-Boltzmann alone can "
    "still be a real star whose catalogued log L is wrong by more than ordinary_error_dex "
    "by just the amount that makes its log10 fit: hence a warning.",
    example="log L = 2.0 dex(Lsun) where R = 1.2 Rsun and Teff = 5900 K (no errors given) "
    "give log L_SB = 0.20 with sigma 0.075 dex: as a log it is 1.8 dex (more than 1 + 2 x "
    "0.075) and 24 sigma off, read as linear it is log L = 0.30, 1.4 sigma off: flagged "
    "(warning).  log L = 0.544 with log L_SB = -0.26 fits as linear (log10 0.544 = -0.26) "
    "but is only 0.80 dex off as a log: not flagged here (stefan-boltzmann flags it).  "
    "log L = 1.5e4 exceeds 10^7.5 Lsun as a log and reads as log L = 4.18 as linear: "
    "flagged (error).",
    references=("Stefan (1879); Boltzmann (1884): L = 4 pi R^2 sigma T^4",
                "IAU 2015 Resolution B3 (nominal solar values)",
                "Most luminous stars ~10^6.8 Lsun (PARSEC v1.2S, Bressan et al. 2012); "
                "10^7.5 Lsun as in `luminosity-range`",
                "ordinary_error_dex = 1 dex: a distance off by a factor of 10^0.5 = 3.2 or "
                "2.5 mag of extinction (common practice)"),
)


def evaluate_luminosity(batch: StarBatch, params: Params) -> Outcome:
    """Flag log L values that are linear luminosities."""
    log_l = batch.log10("luminosity")
    limit = params["max_log_luminosity"]
    with np.errstate(invalid="ignore", divide="ignore"):
        as_linear = np.log10(log_l)
    predicted = np.full(batch.size, np.nan)
    sigma = np.full(batch.size, np.nan)
    if "radius" in batch.values and "teff" in batch.values:
        predicted = log_luminosity_stefan_boltzmann_log(batch.log10("radius"),
                                                        batch.log10("teff"))
        sigma = combined_sigma(
            2.0 * batch.log_sigma("radius", params["assumed_radius_fraction"] / LN10),
            4.0 * batch.log_sigma("teff", params["assumed_teff_fraction"] / LN10),
            params["assumed_luminosity_dex"], floor=params["floor_dex"])
    with np.errstate(invalid="ignore"):
        off_as_log = np.abs(log_l - predicted) / sigma
        off_as_linear = np.abs(as_linear - predicted) / sigma
        fits_as_log = off_as_log <= params["threshold"]  # False where R or Teff are missing
        beyond = (log_l > limit) & (as_linear <= limit) & ~fits_as_log
        by_relation = ((off_as_log > params["threshold"])
                       & (off_as_linear <= params["agreement"])
                       & (log_l - predicted - params["ordinary_error_dex"]
                          > params["agreement"] * sigma))
    failed = beyond | by_relation

    def describe(rows: np.ndarray) -> list[str]:
        messages = []
        for x, e, p, d_log, d_lin in at_rows(rows, log_l, as_linear, predicted, off_as_log,
                                             off_as_linear):
            text = (f"log L = {fmt(x)} dex(Lsun) reads as a linear luminosity: log L = "
                    f"{e:.2f} dex(Lsun) if the unit is Lsun")
            if x > limit:
                text += f" (as a log it is above any star's, {fmt(limit)} dex(Lsun))"
            if p == p:  # Stefan-Boltzmann could judge the row
                text += (f"; R and Teff give log L = {p:.2f} dex(Lsun) by Stefan-Boltzmann: "
                         f"{d_log:.0f} sigma from the value as a log, {d_lin:.1f} sigma as "
                         "linear")
            messages.append(text)
        return messages

    return Outcome(failed, describe, log_l, as_linear,
                   applies=_applies(batch, params, LUMINOSITY_BLUNDER), beyond_doubt=beyond)


_SB_ASSUMED = ("assumed_luminosity_dex", "assumed_radius_fraction", "assumed_teff_fraction",
               "floor_dex")

LUMINOSITY_LINEAR_AS_DEX = Check(
    name="luminosity_linear_as_dex",
    needs=fixed_needs("luminosity"),
    evaluate=evaluate_luminosity,
    doc=LUMINOSITY_DOC,
    defaults={"declared_unit": "", "max_log_luminosity": 7.5, "threshold": 5.0,
              "agreement": 2.0, "ordinary_error_dex": 1.0,
              **{k: STEFAN_BOLTZMANN.defaults[k] for k in _SB_ASSUMED}},
    escalates=True,
    not_run_reason=_not_run_reason(LUMINOSITY_BLUNDER),
)


# --- ages in Gyr or Myr declared as yr -----------------------------------------------------

def _suggest_age_unit(median: float, params: Params) -> str:
    """Gyr when a typical flagged age is possible in Gyr, else Myr."""
    return "Gyr" if median <= params["max_age"] / _GYR_IN_YR else "Myr"


AGE_BLUNDER = Blunder("age", "yr", _suggest_age_unit)

AGE_DOC = Documentation(
    what="Flags an age declared in yr that is younger than any star (below min_age) and "
    "is an ordinary stellar age once read as Gyr (values up to the age of the Universe in "
    "Gyr, 13.787) or as Myr (larger values).",
    why="Cluster and isochrone ages are quoted in Gyr or Myr; mapped with unit yr, a "
    "4.5 Gyr star becomes 4.5 years old.  No star is younger than the youngest "
    "protostars.",
    formula="flag when 0 < t_cat < min_age (t_cat as catalogued, in yr);\n"
    "expected = t_cat x 1e9 yr (Gyr) when t_cat <= max_age / 1e9, else t_cat x 1e6 yr "
    "(Myr);\nbeyond doubt (an error) when t_cat <= max_age / 1e9: a few years is no star's "
    "age\n" + DECLARED_UNIT_NOTE.format(unit="yr"),
    caveats="Values up to 13.787 fit both Gyr and Myr: the message names both, and the "
    "summary suggests one from the median flagged value.  Ages between 13.8 and "
    "min_age yr stay warnings: the youngest protostars are estimated at 1e4-1e5 yr, and "
    "a catalogue of embedded objects may hold such values.  An age of exactly 0 (often a "
    "placeholder) is not flagged here.",
    example="age = 4.5 yr is younger than any star (1e4 yr): it reads as 4.5e9 yr if the "
    "unit is Gyr (4.5e6 yr if Myr); flagged as an error.",
    references=("Age of the Universe 13.787 +- 0.020 Gyr (Planck 2018 results VI, A&A 641, "
                "A6)",
                "Youngest protostars (Class 0) ~1e4-1e5 yr (from memory)"),
)


def evaluate_age(batch: StarBatch, params: Params) -> Outcome:
    """Flag ages too young for any star that read as Gyr or Myr."""
    age = batch.values["age"]
    oldest_gyr = params["max_age"] / _GYR_IN_YR
    with np.errstate(invalid="ignore"):
        failed = (age > 0) & (age < params["min_age"])
        as_gyr = age <= oldest_gyr
    expected = np.where(as_gyr, age * _GYR_IN_YR, age * _MYR_IN_YR)
    youngest = params["min_age"]

    def describe(rows: np.ndarray) -> list[str]:
        messages = []
        for t, e in at_rows(rows, age, expected):
            text = f"age = {fmt(t)} yr is younger than any star ({fmt(youngest)} yr): it reads"
            if t <= oldest_gyr:
                text += (f" as {fmt(e)} yr if the unit is Gyr ({fmt(t * _MYR_IN_YR)} yr if "
                         "Myr)")
            else:
                text += f" as {fmt(e)} yr if the unit is Myr"
            messages.append(text)
        return messages

    return Outcome(failed, describe, age, expected,
                   applies=_applies(batch, params, AGE_BLUNDER), beyond_doubt=as_gyr)


AGE_SCALED_AS_YR = Check(
    name="age_gyr_or_myr_as_yr",
    needs=fixed_needs("age"),
    evaluate=evaluate_age,
    doc=AGE_DOC,
    defaults={"declared_unit": "", "min_age": 1e4, "max_age": 1.3787e10},
    uses_errors=False,
    escalates=True,
    not_run_reason=_not_run_reason(AGE_BLUNDER),
)

#: check name -> the blunder it looks for
BLUNDERS: dict[str, Blunder] = {
    TEFF_LOG_AS_KELVIN.name: TEFF_BLUNDER,
    RADIUS_KM_AS_RSUN.name: RADIUS_BLUNDER,
    LUMINOSITY_LINEAR_AS_DEX.name: LUMINOSITY_BLUNDER,
    AGE_SCALED_AS_YR.name: AGE_BLUNDER,
}

CHECKS = (TEFF_LOG_AS_KELVIN, RADIUS_KM_AS_RSUN, LUMINOSITY_LINEAR_AS_DEX, AGE_SCALED_AS_YR)


def declared_unit(profile: Profile, quantity: str) -> str | None:
    """The unit the profile declares for ``quantity`` (catalogue column first, then the
    ``[groups]`` table), normalised; None when the profile does not map it."""
    mapping = profile.quantities.get(quantity)
    if mapping is None and profile.groups is not None:
        mapping = profile.groups.quantities.get(quantity)
    if mapping is None or mapping.unit is None:
        return None
    return normalise_unit(mapping.unit)


def bind_declared_units(rules: Sequence[Rule], profile: Profile) -> list[Rule]:
    """The rules with each unit-blunder rule's ``declared_unit`` param set from ``profile``.

    Other rules are returned unchanged.
    """
    bound = []
    for rule in rules:
        blunder = BLUNDERS.get(rule.check.name)
        unit = declared_unit(profile, blunder.quantity) if blunder else None
        if unit is not None:
            rule = replace(rule, params={**rule.params, "declared_unit": unit})
        bound.append(rule)
    return bound
