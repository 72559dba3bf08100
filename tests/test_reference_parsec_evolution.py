"""PARSEC v1.2S model stars through catcheck's evolution pack: a comparison with an outside source.

Source: PARSEC v1.2S isochrones (Bressan et al. 2012, MNRAS 427, 127), lachesis-grids file
``parsec_v1.25.h5``, read by ``tests/parsec_data.py`` (its docstring gives the file layout
and the phase rule, the only cleaning of the grid's labels: non-integer labels and label 0
on or past the ZAMS are unclassified).  An isochrone is a coeval population of single stars
of one [M/H], each labelled with its phase, so:

* a deterministic sample of at least 100,000 classified model points (every [M/H], every
  isochrone up to the age of the Universe, every phase from the pre-main sequence to core
  helium burning), each at its own isochrone's age and [M/H], written as a catalogue with
  realistic errors, must raise no flag of severity ``error`` from any rule of the
  ``evolution`` pack, nor of the ``core`` pack run beside it; warnings are counted and
  printed, not failed; every evolution rule that can run must have checked most of the
  points in its scope (``RULE_SCOPE``);
* model points with a planted fault must be caught, each kind on at least 99% of the rows
  it applies to.  A row counts as caught when any rule of the evolution pack flags it, at
  any severity; the rule meant to catch the kind must also reach 99% on its own, since
  other rules catch some kinds as well and must not hide a broken rule.  The kinds
  (``FAULTS``), each with its rule: an MS point aged 5x its main-sequence lifetime
  (ms-lifetime), an RGB point aged 1/5 of it (evolved-too-young), an MS point of
  Teff < 6000 K with log g 3.0 and an RGB point of Teff < 5500 K with log g 4.5
  (phase-envelope), any point labelled WD in a 10 Myr population (white-dwarf-too-young,
  a warning rule, since a field white dwarf counted as a member is a real star: >= 99% of
  those rows must be its flags, errors exactly where beyond its error_threshold).  A kind
  whose rule is missing
  from the pack fails.

Caveat: catcheck's timescales were derived from this same grid (catcheck/data/
TIMESCALES.md), so the clean-point tests check that the rules and the grid's phase labels
agree, not the timescales against another source; points at the end of a phase sit on
the rules' boundaries (within 0.1 sigma on the safe side).

Catalogue errors (1 sigma), those of tests/test_reference_parsec.py (reasons there): Teff 2%,
log L 0.05 dex, R 5%, present mass 5%, log g 0.1 dex; plus the age, 0.1 dex (isochrone ages
of well-studied clusters and of stars with asteroseismology; field stars are often worse).
Initial mass and [M/H] carry no error: the rules take the mass error from the present mass.
The group (cluster) column is the isochrone, a coeval population, so that the
blue-straggler rule, which looks only at cluster members, runs too.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("h5py", reason="h5py is needed to read the PARSEC grid; "
                    "pip install catcheck[test]")
pytest.importorskip("lachesis_grids", reason="the lachesis-grids package (PARSEC v1.2S "
                    "isochrones) is not installed; pip install catcheck[test]")

from parsec_data import PARSEC_PHASES, PARSEC_REFERENCE, load_parsec_isochrones
from test_reference_parsec import (
    LOG_G_ERROR_DEX,
    LOG_L_ERROR_DEX,
    MODEL_COLUMNS,
    NOT_IN_MODELS,
    SAMPLE_SEED,
    catalogue_from_models,
    log_age_of_universe,
    stratified_sample,
)

import catcheck
from catcheck.api import CheckResult
from catcheck.packs import load_rules
from catcheck.physics.evolution import (
    MAX_WHITE_DWARF_PROGENITOR_MASS,
    log_main_sequence_lifetime,
    timescale_table,
)
from catcheck.profile import profile_from_dict

SAMPLE_SIZE = 120_000
AGE_ERROR_DEX = 0.1

#: each kind of planted fault must be caught on at least this fraction of its rows
REQUIRED_CATCH_RATE = 0.99
#: a rule that can run must check at least this fraction of the points in its scope
MOST = 0.9
#: the phase codes a catalogue row may carry here: the loader's, and WD for a planted fault
CATALOGUE_PHASES = [*PARSEC_PHASES, "WD"]

PHASE_ENVELOPE = "phase-envelope"
EVOLUTION_RULES = tuple(rule.id for rule in load_rules(["evolution"]))

PROFILE = profile_from_dict({
    "id": "id",
    "group": "isochrone",
    "quantities": {
        "teff": {"column": "Teff", "unit": "K", "error": "e_Teff"},
        "luminosity": {"column": "logL", "unit": "dex(Lsun)", "error_value": LOG_L_ERROR_DEX},
        "radius": {"column": "R", "unit": "Rsun", "error": "e_R"},
        "logg": {"column": "logg", "unit": "dex(cm/s2)", "error_value": LOG_G_ERROR_DEX},
        "mass": {"column": "M", "unit": "Msun", "error": "e_M"},
        "initial_mass": {"column": "M_init", "unit": "Msun"},
        "age": {"column": "log_age", "unit": "dex(yr)", "error_value": AGE_ERROR_DEX},
        "feh": {"column": "feh", "unit": "dex"},
        "phase": {"column": "phase"},
    },
}, source="<PARSEC v1.2S sample, evolution>")


# ---------------------------------------------------------------------------------------
# What each rule is about
# ---------------------------------------------------------------------------------------
def _in_timescale_range(mass: pd.Series) -> np.ndarray:
    """Masses inside the range of catcheck's PARSEC timescales (0.1-199.5 Msun, documented
    in catcheck.physics.evolution): outside it no lifetime exists and a rule cannot judge."""
    low, high = timescale_table().mass_range
    return mass.between(low, high).to_numpy()


def _phase_in(models: pd.DataFrame, *phases: str) -> np.ndarray:
    return models["phase"].isin(phases).to_numpy()


#: the model points each evolution rule is about (its documented scope), as a row mask.
#: A rule of the pack missing here fails the scope test: declare its scope.
RULE_SCOPE: dict[str, Callable[[pd.DataFrame], np.ndarray]] = {
    "ms-lifetime": lambda m: _phase_in(m, "MS") & _in_timescale_range(m["initial_mass"]),
    "evolved-too-young": lambda m: (_phase_in(m, "SGB", "RGB", "CHEB")
                                    & _in_timescale_range(m["initial_mass"])),
    "pms-too-old": lambda m: _phase_in(m, "PMS") & _in_timescale_range(m["star_mass"]),
    # PARSEC has no white dwarfs: in scope only in the planted-fault run
    "white-dwarf-too-young": lambda m: _phase_in(m, "WD"),
    # a turn-off mass exists once the most massive tabulated star (199.5 Msun) has left the
    # main sequence, after 2.6-2.8 Myr (catcheck.physics.evolution): isochrones from 3.2 Myr
    "blue-straggler-candidate": lambda m: _phase_in(m, "MS") & (m["log_age"] >= 6.5).to_numpy(),
    # every phase the models label has an envelope (catcheck/data/ENVELOPES.md)
    PHASE_ENVELOPE: lambda m: _phase_in(m, *PARSEC_PHASES),
}


# ---------------------------------------------------------------------------------------
# The grid, the sample and its catalogue
# ---------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def grid() -> pd.DataFrame:
    """The classified model points of parsec_v1.25.h5 no older than the age of the Universe."""
    started = time.perf_counter()
    models = load_parsec_isochrones()
    real = models[(models["log_age"] <= log_age_of_universe()) & models["phase"].notna()]
    print(f"\nPARSEC grid loaded in {time.perf_counter() - started:.2f} s: {len(real)} "
          "classified points of real age")
    return real


@pytest.fixture(scope="module")
def models(grid: pd.DataFrame) -> pd.DataFrame:
    """The deterministic sample: classified points spread evenly over [M/H], age, phase."""
    return stratified_sample(grid, SAMPLE_SIZE, SAMPLE_SEED)


def isochrone_names(models: pd.DataFrame) -> pd.Series:
    """One name per isochrone ([M/H] and log age): the group column."""
    return ("[M/H]=" + models["feh"].map("{:+.2f}".format) + " log t="
            + models["log_age"].map("{:.2f}".format))


def evolution_catalogue(models: pd.DataFrame) -> pd.DataFrame:
    """The model points as a catalogue (tests/test_reference_parsec.py's columns and errors),
    phases as codes that admit WD, and the isochrone as the group."""
    catalogue = catalogue_from_models(models)
    catalogue["phase"] = pd.Categorical(models["phase"].to_numpy(), categories=CATALOGUE_PHASES)
    catalogue["isochrone"] = isochrone_names(models).to_numpy()
    return catalogue


@pytest.fixture(scope="module")
def catalogue(models: pd.DataFrame) -> pd.DataFrame:
    return evolution_catalogue(models)


def timed_check(frame: pd.DataFrame, packs: list[str], what: str) -> CheckResult:
    """catcheck.check_frame with ``packs``, printing the time it took."""
    started = time.perf_counter()
    result = catcheck.check_frame(frame, profile=PROFILE, rules=packs)
    print(f"{' + '.join(packs)} on {what} ({len(frame)} rows): "
          f"{time.perf_counter() - started:.2f} s")
    return result


@pytest.fixture(scope="module")
def clean_result(catalogue: pd.DataFrame) -> CheckResult:
    """The evolution pack's verdict on the unaltered model stars."""
    return timed_check(catalogue, ["evolution"], "the PARSEC sample")


def test_sample_spans_every_metallicity_age_and_phase(grid: pd.DataFrame,
                                                      models: pd.DataFrame) -> None:
    """At least 100,000 classified points: every [M/H], every real age, every phase."""
    assert len(models) >= 100_000
    assert models.index.is_unique
    assert models["phase"].notna().all()
    assert models["log_age"].max() == pytest.approx(10.10)  # 12.6 Gyr; 10.15 is 14.1 Gyr
    assert set(models["feh"]) == set(grid["feh"])
    assert set(models["log_age"]) == set(grid["log_age"])
    shares = models["phase"].value_counts(normalize=True)
    for phase in PARSEC_PHASES:
        assert shares.get(phase, 0.0) > 0.05, shares.to_dict()


def test_premises_of_the_planted_faults(grid: pd.DataFrame) -> None:
    """The planted faults are impossible for the models themselves (computed from the grid).

    * No MS point cooler than 6000 K has log g below 3.77, so log g 3.0 is 0.77 dex (7.7
      sigma of the log g error) below the coolest main sequence;
    * no RGB point cooler than 5500 K has log g above 3.70, 0.80 dex below 4.5;
    * at 10 Myr (log age 7.0) every star up to 16.9 Msun is still alive (the isochrones
      reach 16.9-20.8 Msun, by [M/H]), so whatever has died by then had more than twice
      the mass of the most massive white-dwarf progenitor (8 +- 1 Msun).
    """
    teff = 10 ** grid["log_teff"]
    cool_ms = grid[(grid["phase"] == "MS") & (teff < 6000.0)]
    cool_rgb = grid[(grid["phase"] == "RGB") & (teff < 5500.0)]
    assert len(cool_ms) > 10_000 and len(cool_rgb) > 10_000
    assert cool_ms["log_g"].min() == pytest.approx(3.77, abs=0.005)
    assert cool_rgb["log_g"].max() == pytest.approx(3.70, abs=0.005)
    ten_myr = grid[np.isclose(grid["log_age"], 7.0)]
    heaviest_alive = ten_myr.groupby("feh")["initial_mass"].max()
    assert len(heaviest_alive) == len(set(grid["feh"]))
    assert heaviest_alive.min() == pytest.approx(16.9, abs=0.05)
    assert heaviest_alive.min() > 2 * MAX_WHITE_DWARF_PROGENITOR_MASS.value


# ---------------------------------------------------------------------------------------
# Model stars must pass
# ---------------------------------------------------------------------------------------
def flag_counts(result: CheckResult, rules: tuple[str, ...]) -> str:
    """One line per rule: errors and warnings it raised, and rows it checked."""
    flags = result.flags
    by_rule = flags.groupby(["rule", "severity"]).size()
    entries = {entry["id"]: entry for entry in result.summary["rules"]}
    lines = []
    for rule in rules:
        entry = entries[rule]
        lines.append(f"  {rule}: {by_rule.get((rule, 'error'), 0)} errors, "
                     f"{by_rule.get((rule, 'warning'), 0)} warnings "
                     f"({entry['status']}, checked {entry['checked']})")
    return "\n".join(lines)


def describe_worst(flags: pd.DataFrame, models: pd.DataFrame, per_rule: int = 5) -> str:
    """Per rule and severity: the number of flags, where the flagged points lie, and the
    ``per_rule`` largest deviations with their model parameters and messages."""
    lines = []
    for (rule, severity), group in flags.groupby(["rule", "severity"], sort=True):
        flagged = models.iloc[group["row"].to_numpy()]
        phases = flagged["phase"].value_counts()
        lines.append(
            f"{rule}: {len(group)} {severity} flags; [M/H] {flagged['feh'].min():+.2f}.."
            f"{flagged['feh'].max():+.2f}, log age {flagged['log_age'].min():.2f}.."
            f"{flagged['log_age'].max():.2f}, initial mass {flagged['initial_mass'].min():.3g}"
            f"..{flagged['initial_mass'].max():.3g} Msun, phases "
            f"{ {str(p): int(n) for p, n in phases.items() if n} }; worst:")
        worst = group.sort_values("deviation", ascending=False, na_position="last")
        for flag in worst.head(per_rule).itertuples():
            model = models.iloc[flag.row]
            parameters = ", ".join(f"{name}={model[name]:.4g}" if isinstance(model[name], float)
                                   else f"{name}={model[name]}" for name in MODEL_COLUMNS)
            lines.append(f"  grid row {flag.id}: {parameters}\n    -> {flag.message}")
    return "\n".join(lines)


@pytest.mark.slow
def test_parsec_models_raise_no_error_flag_from_the_evolution_pack(
        models: pd.DataFrame, clean_result: CheckResult) -> None:
    """No evolution rule calls a PARSEC model star at its own age and [M/H] impossible."""
    flags = clean_result.flags
    counts = flag_counts(clean_result, EVOLUTION_RULES)
    print(f"evolution pack on {len(models)} PARSEC points:\n{counts}")
    warnings = flags[flags["severity"] == "warning"]
    if not warnings.empty:
        print("warnings (not failed):\n" + describe_worst(warnings, models))
    errors = flags[flags["severity"] == "error"]
    assert errors.empty, (f"{len(errors)} error flags on {errors['row'].nunique()} of "
                          f"{len(models)} model points ({PARSEC_REFERENCE}):\n{counts}\n"
                          + describe_worst(errors, models))


@pytest.mark.slow
def test_every_evolution_rule_that_can_run_checked_the_models(
        models: pd.DataFrame, clean_result: CheckResult) -> None:
    """A pass must come from rules that looked: each rule checked at least MOST of the
    points in its scope (RULE_SCOPE), and every rule of the pack ran."""
    problems, report = [], []
    entries = {entry["id"]: entry for entry in clean_result.summary["rules"]}
    assert set(entries) == set(EVOLUTION_RULES)
    for rule, entry in entries.items():
        if entry["status"] != "ran":
            problems.append(f"{rule} did not run: {entry['status']}")
            continue
        if rule not in RULE_SCOPE:
            problems.append(f"{rule}: no scope declared in RULE_SCOPE")
            continue
        in_scope = int(RULE_SCOPE[rule](models).sum())
        report.append(f"{rule}: checked {entry['checked']} of {in_scope} in scope")
        if entry["checked"] < MOST * in_scope:
            problems.append(report[-1])
    print("\n".join(report))
    assert not problems, "\n".join(["rules that checked too little:", *problems, "all:",
                                    *report])


@pytest.mark.slow
def test_core_and_evolution_packs_together(models: pd.DataFrame, catalogue: pd.DataFrame,
                                           clean_result: CheckResult) -> None:
    """Run beside the core pack: no error flag from either, every core rule that can run
    ran, and the evolution pack's flags are exactly those it raises alone."""
    result = timed_check(catalogue, ["core", "evolution"], "the PARSEC sample")
    flags = result.flags
    core_rules = tuple(rule.id for rule in load_rules(["core"]))
    print(f"core + evolution on {len(models)} PARSEC points:\n"
          + flag_counts(result, core_rules + EVOLUTION_RULES))
    errors = flags[flags["severity"] == "error"]
    assert errors.empty, (f"{len(errors)} error flags:\n"
                          + flag_counts(result, core_rules + EVOLUTION_RULES) + "\n"
                          + describe_worst(errors, models))
    not_run = [f"{entry['id']}: {entry['status']}" for entry in result.summary["rules"]
               if entry["status"] != "ran" and not set(
                   entry["status"].removeprefix("not-run: missing ").split(", "))
               <= NOT_IN_MODELS]
    assert not not_run, not_run
    alone = clean_result.flags.reset_index(drop=True)
    beside = flags[flags["rule"].isin(EVOLUTION_RULES)].reset_index(drop=True)
    pd.testing.assert_frame_equal(beside, alone, check_dtype=False)


# ---------------------------------------------------------------------------------------
# Planted faults must be caught
# ---------------------------------------------------------------------------------------
LOG_FIVE = float(np.log10(5.0))


def log_lifetime(models: pd.DataFrame) -> np.ndarray:
    """log10 main-sequence lifetime (yr) of each point's initial mass and [M/H]."""
    return log_main_sequence_lifetime(models["initial_mass"].to_numpy(),
                                      models["feh"].to_numpy())


@dataclass(frozen=True)
class Fault:
    """A planted fault: the model points it applies to, how it changes their catalogue rows
    (given the rows and their model points), and the rule meant to catch it."""

    applies: Callable[[pd.DataFrame], np.ndarray]
    plant: Callable[[pd.DataFrame, pd.DataFrame], pd.DataFrame]
    rule: str


def _cool(models: pd.DataFrame, teff_k: float) -> np.ndarray:
    return (10 ** models["log_teff"] < teff_k).to_numpy()


FAULTS: dict[str, Fault] = {
    # only where 5 t_MS is no older than the Universe (else core's age range fires too)
    "MS aged 5 t_MS": Fault(
        lambda m: _phase_in(m, "MS") & (log_lifetime(m) + LOG_FIVE <= log_age_of_universe()),
        lambda c, m: c.assign(log_age=log_lifetime(m) + LOG_FIVE), "ms-lifetime"),
    "RGB aged t_MS / 5": Fault(
        lambda m: _phase_in(m, "RGB") & np.isfinite(log_lifetime(m)),
        lambda c, m: c.assign(log_age=log_lifetime(m) - LOG_FIVE), "evolved-too-young"),
    "MS at Teff < 6000 K with log g 3.0": Fault(
        lambda m: _phase_in(m, "MS") & _cool(m, 6000.0),
        lambda c, m: c.assign(logg=3.0), PHASE_ENVELOPE),
    "RGB at Teff < 5500 K with log g 4.5": Fault(
        lambda m: _phase_in(m, "RGB") & _cool(m, 5500.0),
        lambda c, m: c.assign(logg=4.5), PHASE_ENVELOPE),
    # every point, its phase code replaced by WD, its population 10 Myr old
    "WD in a 10 Myr population": Fault(
        lambda m: np.ones(len(m), dtype=bool),
        lambda c, m: c.assign(phase=pd.Categorical(["WD"] * len(c), categories=CATALOGUE_PHASES),
                              log_age=7.0),
        "white-dwarf-too-young"),
}


@pytest.fixture(scope="module")
def faulted(models: pd.DataFrame, catalogue: pd.DataFrame
            ) -> tuple[pd.DataFrame, np.ndarray, CheckResult]:
    """The planted faults, one block of rows per kind, checked together in one run; and the
    position in ``models`` of each row's model point."""
    blocks, sources = [], []
    for kind, fault in FAULTS.items():
        where = np.flatnonzero(fault.applies(models))
        rows, points = catalogue.iloc[where], models.iloc[where]
        blocks.append(fault.plant(rows, points).assign(fault=kind))
        sources.append(where)
    frame = pd.concat(blocks, ignore_index=True)
    return frame, np.concatenate(sources), timed_check(frame, ["evolution"], "planted faults")


@pytest.mark.slow
@pytest.mark.parametrize("kind", list(FAULTS))
def test_planted_fault_is_caught(kind: str, models: pd.DataFrame,
                                 faulted: tuple[pd.DataFrame, np.ndarray, CheckResult]
                                 ) -> None:
    """Any flag of the evolution pack, any severity, on >= 99% of the kind's rows; and the
    kind's own rule alone reaches 99% too, so a neighbour rule cannot hide a broken one
    (blue-straggler-candidate, for one, flags every MS row aged 5 t_MS)."""
    frame, sources, result = faulted
    rows = (frame["fault"] == kind).to_numpy()
    flags = result.flags
    flags = flags[rows[flags["row"].to_numpy()]]
    caught = np.zeros(len(frame), dtype=bool)
    caught[flags["row"].to_numpy()] = True
    by_intended = np.zeros(len(frame), dtype=bool)
    by_intended[flags.loc[flags["rule"] == FAULTS[kind].rule, "row"].to_numpy()] = True
    rate, intended_rate = caught[rows].mean(), by_intended[rows].mean()
    by_rule = flags.groupby(["rule", "severity"]).size()
    lines = [f"{kind}: caught {rate:.4%} of {rows.sum()} rows; by its rule "
             f"{FAULTS[kind].rule} {intended_rate:.4%}; flags by rule and severity: "
             f"{ {f'{r}/{s}': int(n) for (r, s), n in by_rule.items()} }"]
    for row in np.flatnonzero(rows & ~caught)[:5]:
        model = models.iloc[sources[row]]
        lines.append("    missed: " + ", ".join(f"{name}={model[name]}"
                                                 for name in MODEL_COLUMNS))
    report = "\n".join(lines)
    print(report)
    assert rows.sum() >= 1000, report
    assert rate >= REQUIRED_CATCH_RATE, report
    assert intended_rate >= REQUIRED_CATCH_RATE, report


@pytest.mark.slow
def test_white_dwarfs_in_a_10_myr_population_are_flagged_by_their_own_rule(
        faulted: tuple[pd.DataFrame, np.ndarray, CheckResult]) -> None:
    """white-dwarf-too-young checks every WD row and flags >= 99% of them itself
    (evolved-too-young and phase-envelope flag most of them too, which must not hide it);
    a flag is an error exactly where it is beyond the rule's error_threshold (5 sigma), a
    warning otherwise (a field white dwarf counted as a member would explain it)."""
    frame, _, result = faulted
    rule = FAULTS["WD in a 10 Myr population"].rule
    rows = (frame["phase"] == "WD").to_numpy()
    entry = next(entry for entry in result.summary["rules"] if entry["id"] == rule)
    flags = result.flags[result.flags["rule"] == rule]
    rate = rows[flags["row"].to_numpy()].sum() / rows.sum()
    errors = (flags["severity"] == "error").to_numpy()
    print(f"{rule}: checked {entry['checked']} of {rows.sum()} WD rows, flagged "
          f"{rate:.4%}, {errors.mean():.2%} of the flags beyond doubt (errors)")
    assert entry["checked"] == rows.sum()
    assert rate >= REQUIRED_CATCH_RATE
    assert entry["severity"] == "warning"
    assert np.array_equal(errors, flags["deviation"].to_numpy() > 5.0)
