"""Evolution checks: is a star's phase possible for its mass, metallicity and age?

``ms_lifetime``, ``evolved_too_young``, ``pms_too_old``, ``white_dwarf_too_young`` and
``blue_straggler_candidate`` compare a catalogued age with timescales from PARSEC v1.2S
(:mod:`catcheck.physics.evolution`) in combined sigma of log age: the age error, the
lifetime's sensitivity to the mass error, and the models' own uncertainty.  Flags a real
star can explain (blue stragglers, binaries) stay warnings; those beyond ``error_threshold``
sigma become errors.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

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
    indefinite_article,
    phase_is,
    spread_at,
)
from catcheck.checks.cluster_members import CLUSTER_LOG_AGE, cluster_log_age
from catcheck.physics import evolution
from catcheck.physics.stellar import LN10
from catcheck.quantities import PHASE_CODES

#: post-main-sequence phases whose present mass bounds the initial mass well enough
#: (mass lost on the giant branches of low-mass stars is a few tenths of a solar mass)
GIANT_PHASES = ("SGB", "RGB", "RC", "HB", "CHEB")
#: every phase after the main sequence
EVOLVED_PHASES = (*GIANT_PHASES, "AGB", "PAGB", "WD", "RSG", "BSG", "WR")


def metallicity(batch: StarBatch, rows: np.ndarray | None = None) -> np.ndarray:
    """[M/H] of each row (or of ``rows`` only), solar (0) where the catalogue gives none."""
    feh = batch.values.get("feh")
    if feh is None:
        return np.zeros(batch.size if rows is None else len(rows))
    feh = feh.copy() if rows is None else feh[rows]
    feh[np.isnan(feh)] = 0.0
    return feh


def lifetime_mass(batch: StarBatch, rows: np.ndarray | None = None
                  ) -> tuple[np.ndarray, np.ndarray]:
    """The mass to use for lifetimes, and whether it is the catalogued initial mass.

    Of each row, or of ``rows`` only.
    """
    initial = batch.values.get("initial_mass")
    present = batch.values["mass"]
    if rows is not None:
        present = present[rows]
        initial = None if initial is None else initial[rows]
    if initial is None:
        return present, np.zeros(len(present), dtype=bool)
    given = ~np.isnan(initial)
    return np.where(given, initial, present), given


def _age_sigma(batch: StarBatch, params: Params, rows: np.ndarray, slope: np.ndarray
               ) -> np.ndarray:
    """Combined 1-sigma (dex) of log age against log timescale, at ``rows``."""
    s_age = batch.log_sigma("age", params["assumed_age_dex"])[rows]
    s_mass = batch.log_sigma("mass", params["assumed_mass_fraction"] / LN10)[rows]
    return combined_sigma(s_age, np.abs(slope) * s_mass, params["intrinsic_dex"],
                          floor=params["floor_dex"])


def _age_outcome(batch: StarBatch, params: Params, rows: np.ndarray, applies: np.ndarray,
                 log_limit: np.ndarray, sigma: np.ndarray, older: bool,
                 describe_row: Callable[..., str], extra: tuple[np.ndarray, ...] = ()
                 ) -> Outcome:
    """Outcome of 'age beyond a timescale': older (or younger) than ``log_limit``.

    The rule concerns the batch positions ``rows`` only (ascending); ``applies``,
    ``log_limit``, ``sigma`` and ``extra`` are given at those rows, and the outcome's
    arrays are NaN (False) at every other row.
    """
    all_ages = batch.log10("age")
    log_age = all_ages[rows]
    excess = (log_age - log_limit) if older else (log_limit - log_age)
    with np.errstate(invalid="ignore"):
        deviation = excess / sigma
        failed = applies & (deviation > params["threshold"])
        beyond = deviation > params.get("error_threshold", np.inf)

    def describe(positions: np.ndarray) -> list[str]:
        at = np.searchsorted(rows, positions)
        years = _power_of_ten(log_age[at]), _power_of_ten(log_limit[at])
        return [describe_row(*values)
                for values in at_rows(np.arange(len(at)), *years, deviation[at],
                                      *(column[at] for column in extra))]

    size = batch.size
    return Outcome(spread_at(rows, size, failed, False), describe, all_ages,
                   spread_at(rows, size, log_limit, np.nan),
                   spread_at(rows, size, np.abs(deviation), np.nan),
                   spread_at(rows, size, applies, False), spread_at(rows, size, beyond, False))


def _power_of_ten(logs: np.ndarray) -> np.ndarray:
    """10**logs for the few flagged rows a message needs (inf past the float range)."""
    with np.errstate(over="ignore"):
        return np.power(10.0, logs)


def _years(age: float) -> str:
    """An age for a message: in Gyr, Myr, or yr below 0.1 Myr."""
    if age >= 1e9:
        return f"{age / 1e9:.3g} Gyr"
    return f"{age / 1e6:.3g} Myr" if age >= 1e5 else f"{fmt(age)} yr"


def _timescale_outcome(batch: StarBatch, params: Params, rows: np.ndarray,
                       timescale: Callable[..., tuple[np.ndarray, np.ndarray]],
                       mass: np.ndarray, older: bool, describe_row: Callable[..., str],
                       extra: tuple[np.ndarray, ...] = ()) -> Outcome:
    """Age against a mass-dependent timescale, at the batch positions ``rows`` of one phase.

    ``mass`` and ``extra`` are given at those rows.  Masses outside the timescale table
    (0.1-199.5 Msun) are not checked, and are not counted as checked.  ``describe_row``
    gets (age, timescale, deviation, mass, *extra).
    """
    log_t, slope = timescale(mass, metallicity(batch, rows))
    return _age_outcome(batch, params, rows, np.isfinite(log_t), log_t,
                        _age_sigma(batch, params, rows, slope), older, describe_row,
                        extra=(mass, *extra))


# --- ms-lifetime ---------------------------------------------------------------------------

def evaluate_ms_lifetime(batch: StarBatch, params: Params) -> Outcome:
    """Main-sequence stars older than the main-sequence lifetime of their mass."""
    rows = np.flatnonzero(phase_is(batch, "MS"))
    mass, initial = lifetime_mass(batch, rows)
    return _timescale_outcome(
        batch, params, rows, evolution.log_main_sequence_lifetime_and_slope,
        mass, older=True, describe_row=lambda age, limit, dev, m, given: (
            f"MS star of {'initial' if given else 'present'} mass {fmt(m)} Msun is "
            f"{_years(age)} old, but stars of that mass leave the main sequence at "
            f"{_years(limit)}: {dev:.1f} sigma"), extra=(initial,))


# --- evolved-too-young ---------------------------------------------------------------------

def evaluate_evolved_too_young(batch: StarBatch, params: Params) -> Outcome:
    """Post-main-sequence stars younger than the main-sequence lifetime of their mass.

    The initial mass is used where given; otherwise the present mass of a giant-branch or
    core-helium-burning star, raised by the mass it may have lost, bounds the initial mass
    from above, so the lifetime used is the shortest the star could have had: a lower
    bound on its main-sequence lifetime.
    """
    evolved = np.flatnonzero(phase_is(batch, *EVOLVED_PHASES))
    mass, initial = lifetime_mass(batch, evolved)
    bounded = initial | phase_is(batch, *GIANT_PHASES)[evolved]
    rows, mass, initial = evolved[bounded], mass[bounded], initial[bounded]
    present = batch.values["mass"][rows]
    upper = np.where(initial, mass, present * (1.0 + params["mass_loss_fraction"])
                     + params["mass_loss_msun"])
    phase = batch.phase[rows] if batch.phase is not None else np.full(len(rows), -1)

    def describe_row(age: float, limit: float, dev: float, initial_mass: float,
                     present_mass: float, given: float, code: float) -> str:
        star = f"{PHASE_CODES[int(code)]} star of present mass {fmt(present_mass)} Msun"
        if given:
            why = (f"its initial mass {fmt(initial_mass)} Msun keeps a star on the main "
                   f"sequence for {_years(limit)}")
        else:
            why = (f"with an initial mass of at most {fmt(initial_mass)} Msun it stays on "
                   f"the main sequence for at least {_years(limit)}")
        return f"{star} is {_years(age)} old, but {why}: {dev:.1f} sigma too young"

    return _timescale_outcome(
        batch, params, rows, evolution.log_main_sequence_lifetime_and_slope, upper,
        older=False, describe_row=describe_row, extra=(present, initial, phase))


# --- pms-too-old ---------------------------------------------------------------------------

def evaluate_pms_too_old(batch: StarBatch, params: Params) -> Outcome:
    """Pre-main-sequence stars older than the contraction time of their mass."""
    rows = np.flatnonzero(phase_is(batch, "PMS"))
    return _timescale_outcome(
        batch, params, rows, evolution.log_pre_main_sequence_time_and_slope,
        batch.values["mass"][rows], older=True, describe_row=lambda age, limit, dev, m: (
            f"pre-main-sequence star of {m:.3g} Msun is {_years(age)} old, but it reaches "
            f"the main sequence at {_years(limit)}: {dev:.1f} sigma"))


# --- white-dwarf-too-young -----------------------------------------------------------------

def evaluate_white_dwarf_too_young(batch: StarBatch, params: Params) -> Outcome:
    """White dwarfs in populations younger than the most massive progenitor's lifetime."""
    rows = np.flatnonzero(phase_is(batch, "WD"))
    log_t = np.log10(evolution.youngest_white_dwarf_age(metallicity(batch, rows),
                                                        params["max_progenitor_mass"]))
    sigma = combined_sigma(batch.log_sigma("age", params["assumed_age_dex"])[rows],
                           params["intrinsic_dex"], floor=params["floor_dex"])
    mass_text = f"{params['max_progenitor_mass']:g}"
    progenitor = f"{indefinite_article(mass_text)} {mass_text} Msun"
    return _age_outcome(
        batch, params, rows, np.ones(len(rows), dtype=bool), log_t, sigma, older=False,
        describe_row=lambda age, limit, dev: (
            f"white dwarf in a population {_years(age)} old, but even {progenitor} "
            f"progenitor needs {_years(limit)} to make one: {dev:.1f} sigma"))


# --- blue-straggler-candidate --------------------------------------------------------------

def evaluate_blue_straggler(batch: StarBatch, params: Params) -> Outcome:
    """Main-sequence cluster members more massive than their cluster's turn-off."""
    age_summary, codes = batch.group_summary(CLUSTER_LOG_AGE)
    rows = np.flatnonzero(phase_is(batch, "MS") & (codes >= 0))
    mass = batch.values["mass"][rows]
    # the cluster's age is its members' median age (pass 1), else the member's own
    _, cluster_age, _ = age_summary.at(codes[rows])
    log_age = np.where(np.isfinite(cluster_age), cluster_age, batch.log10("age")[rows])
    turnoff, slope = _turnoff_and_slope(log_age, metallicity(batch, rows))
    with np.errstate(divide="ignore", invalid="ignore"):
        s_turnoff = batch.log_sigma("age", params["assumed_age_dex"])[rows] / np.abs(slope)
        s_mass = batch.log_sigma("mass", params["assumed_mass_fraction"] / LN10)[rows]
        sigma = combined_sigma(s_mass, s_turnoff, params["intrinsic_dex"],
                               floor=params["floor_dex"])
        deviation = (np.log10(mass) - np.log10(turnoff)) / sigma
    applies = np.isfinite(turnoff)
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])

    def describe(positions: np.ndarray) -> list[str]:
        at = np.searchsorted(rows, positions)
        return [
            f"MS member of {fmt(m)} Msun is above its cluster's turn-off mass {t:.3g} Msun "
            f"at {_years(a)}: {d:.1f} sigma (a blue straggler, a binary or a non-member)"
            for m, t, a, d in at_rows(np.arange(len(at)), mass[at], turnoff[at],
                                      _power_of_ten(log_age[at]), deviation[at])
        ]

    size = batch.size
    return Outcome(spread_at(rows, size, failed, False), describe, batch.values["mass"],
                   spread_at(rows, size, turnoff, np.nan),
                   spread_at(rows, size, np.abs(deviation), np.nan),
                   spread_at(rows, size, applies, False))


def _turnoff_and_slope(log_age: np.ndarray, feh: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray]:
    """Turn-off mass at each (log age, [M/H]) and the lifetime slope d log t / d log M there.

    Members share their cluster's age and nearly its [M/H]: solved once per distinct pair,
    [M/H] to 0.01 dex (changing the turn-off mass by < 0.1%).  The pairs are found by
    hashing, not sorting.
    """
    inverse, pairs = pd.factorize(log_age + 1j * np.round(feh, 2), use_na_sentinel=False)
    turnoff = evolution.main_sequence_turnoff_mass(10.0 ** pairs.real, pairs.imag)
    slope = evolution.log_main_sequence_lifetime_and_slope(turnoff, pairs.imag)[1]
    return turnoff[inverse], slope[inverse]


_AGE_CAVEAT = ("Stellar ages are model-dependent: grids differ by 10-25% in main-sequence "
               "lifetime and rotation lengthens it by ~20% (hence intrinsic_dex).  Ages of "
               "single field stars are often poorly constrained and their errors "
               "understated.")
_PARSEC = "Bressan et al. (2012), MNRAS 427, 127: PARSEC v1.2S isochrones (the timescales)"
_DEFAULTS = {"threshold": 3.0, "error_threshold": 5.0, "intrinsic_dex": 0.08,
             "floor_dex": 0.05, "assumed_age_dex": 0.1, "assumed_mass_fraction": 0.1}

MS_LIFETIME = Check(
    name="ms_lifetime",
    needs=fixed_needs("age", "mass", "phase"),
    evaluate=evaluate_ms_lifetime,
    escalates=True,
    doc=Documentation(
        what="Flags a main-sequence star older than the main-sequence lifetime of its "
        "(initial) mass at its metallicity.",
        why="A star leaves the main sequence when its core hydrogen is exhausted; a star "
        "still labelled main sequence past that age has a wrong mass, a wrong age (often a "
        "cluster age copied to a non-member) or a wrong phase.",
        formula="log t_MS(M, [M/H]) from PARSEC v1.2S (mass: initial_mass if given, else "
        "the present mass; [M/H] solar if not given)\n"
        "sigma^2 = s_logage^2 + (slope * s_logM)^2 + intrinsic_dex^2, slope = "
        "d log t_MS / d log M\n"
        "warning when log age - log t_MS > threshold * sigma; error beyond "
        "error_threshold * sigma",
        caveats="Blue stragglers (mergers and mass-transfer products) are main-sequence "
        "stars more massive than their population's turn-off and look older than their "
        "lifetime; unresolved binaries have overestimated masses. " + _AGE_CAVEAT,
        example="A 5 Msun MS star (t_MS ~ 0.1 Gyr at solar [M/H]) catalogued at 2 Gyr "
        "+- 0.1 dex with a 10% mass error: 1.3 dex over, sigma ~0.15 dex, ~9 sigma: an "
        "error.  A 1.2 Msun star at 1.5x its lifetime (0.18 dex, ~1.3 sigma) is not "
        "flagged.",
        references=(_PARSEC,),
    ),
    defaults=dict(_DEFAULTS),
)

EVOLVED_TOO_YOUNG = Check(
    name="evolved_too_young",
    needs=fixed_needs("age", "mass", "phase"),
    evaluate=evaluate_evolved_too_young,
    escalates=True,
    doc=Documentation(
        what="Flags a post-main-sequence star (SGB, RGB, RC, HB, CHEB; AGB, post-AGB, white "
        "dwarf and supergiants only where the initial mass is given) younger than the "
        "main-sequence lifetime of its initial mass.",
        why="A star cannot have left the main sequence before exhausting its core hydrogen.",
        formula="initial mass M_i = initial_mass where given, else an upper bound from the "
        "present mass: M (1 + mass_loss_fraction) + mass_loss_msun (stars lose mass on the "
        "giant branches, ~0.1-0.3 Msun for low-mass stars)\n"
        "sigma as for ms-lifetime; warning when log t_MS(M_i) - log age > threshold * "
        "sigma; error beyond error_threshold * sigma",
        caveats="Catalogue masses are usually present masses; AGB stars and white dwarfs "
        "have lost so much mass that the present mass says nothing useful about the initial "
        "one, so they are only checked when initial_mass is given.  Mass transfer in "
        "binaries can make an evolved star whose present mass is misleading. "
        + _AGE_CAVEAT,
        example="An RGB star of initial mass 1.0 Msun (t_MS ~10 Gyr) in a 2 Gyr cluster: "
        "0.7 dex younger than possible, sigma ~0.13 dex: 5.4 sigma, an error.",
        references=(_PARSEC,),
    ),
    defaults=dict(_DEFAULTS, mass_loss_fraction=0.1, mass_loss_msun=0.3),
)

PMS_TOO_OLD = Check(
    name="pms_too_old",
    needs=fixed_needs("age", "mass", "phase"),
    evaluate=evaluate_pms_too_old,
    escalates=True,
    doc=Documentation(
        what="Flags a pre-main-sequence star older than the contraction time of its mass.",
        why="Pre-main-sequence stars contract onto the zero-age main sequence in a time set "
        "by their mass (~40 Myr at 1 Msun, ~1 Myr at 5 Msun); older than that the star "
        "is on the main sequence and the label or the age is wrong.",
        formula="log t_PMS(M, [M/H]): age at which the radius first reaches its ZAMS value "
        "within 0.01 dex, from PARSEC v1.2S\n"
        "sigma as for ms-lifetime with intrinsic_dex for the definition of 'arrival'; "
        "warning beyond threshold sigma, error beyond error_threshold",
        caveats="The end of contraction is gradual: stars near it are labelled either "
        "way; magnetic activity and accretion history change contraction times; ages of "
        "young stars carry large systematic errors. " + _AGE_CAVEAT,
        example="A 1 Msun PMS star (t_PMS ~40 Myr) in a 1 Gyr cluster: 1.4 dex over: an "
        "error.",
        references=(_PARSEC,),
    ),
    defaults=dict(_DEFAULTS, intrinsic_dex=0.15),
)

WHITE_DWARF_TOO_YOUNG = Check(
    name="white_dwarf_too_young",
    needs=fixed_needs("age", "phase"),
    evaluate=evaluate_white_dwarf_too_young,
    escalates=True,
    doc=Documentation(
        what="Flags a white dwarf in a population younger than the lifetime of the most "
        "massive white-dwarf progenitor.",
        why="A white dwarf is the end of a star's life: none can exist before the most "
        "massive stars that make white dwarfs (~6-8 Msun) have finished evolving, some "
        "40-60 Myr after star formation.",
        formula="t_min = lifetime (main sequence and later phases) of a max_progenitor_mass "
        "star, PARSEC v1.2S\n"
        "sigma^2 = s_logage^2 + intrinsic_dex^2\n"
        "warning when log t_min - log age > threshold * sigma; error beyond "
        "error_threshold * sigma",
        caveats="A white dwarf seen towards a young cluster can be a field star wrongly "
        "counted as a member, so flags are warnings unless beyond error_threshold sigma.  "
        "The maximum progenitor mass is uncertain (6-10 Msun).",
        example="A white dwarf in a 10 Myr cluster: t_min ~40 Myr at solar [M/H], 0.6 dex "
        "too young; with the assumed 0.1 dex age error, sigma 0.14 dex: 4.3 sigma, a "
        "warning.  With an age error of 0.05 dex (sigma 0.11 dex) it is 5.4 sigma: an "
        "error.",
        references=(_PARSEC, "Maximum white-dwarf progenitor mass ~6-8 Msun, e.g. "
                    "Cummings et al. (2018), ApJ 866, 21 (from memory)"),
    ),
    defaults={"threshold": 3.0, "error_threshold": 5.0, "intrinsic_dex": 0.1,
              "floor_dex": 0.05, "assumed_age_dex": 0.1, "max_progenitor_mass": 8.0},
)

BLUE_STRAGGLER = Check(
    name="blue_straggler_candidate",
    needs=fixed_needs("age", "mass", "phase"),
    evaluate=evaluate_blue_straggler,
    group_variables={CLUSTER_LOG_AGE: cluster_log_age},
    doc=Documentation(
        what="Marks a main-sequence cluster member more massive than its cluster's "
        "turn-off mass.",
        why="In a coeval cluster no single main-sequence star can be more massive than the "
        "turn-off; those that are are blue stragglers (mergers, mass transfer), unresolved "
        "binaries with overestimated masses, or non-members.",
        formula="M_TO(age, [M/H]): the initial mass whose PARSEC v1.2S main-sequence "
        "lifetime equals the cluster's age (the median age of its members)\n"
        "sigma^2 = s_logM^2 + (s_logage / slope)^2 + intrinsic_dex^2\n"
        "flag when log M - log M_TO > threshold * sigma (members of a group only)",
        caveats="Always a warning, never an error: blue stragglers are real and common in "
        "old clusters; this rule finds candidates, it does not reject them.",
        example="A 2.5 Msun MS member of a 1 Gyr cluster (turn-off ~2.1 Msun) with a 5% "
        "mass error: 0.076 dex above, sigma ~0.04 dex: 1.9 sigma, not flagged; at "
        "3.5 Msun it is 5.6 sigma above and is marked.",
        references=(_PARSEC,),
    ),
    defaults={"threshold": 3.0, "intrinsic_dex": 0.02, "floor_dex": 0.01,
              "assumed_age_dex": 0.1, "assumed_mass_fraction": 0.1},
)
