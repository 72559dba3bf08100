"""Fixtures for the evolution and cluster turn-off rules: rows that pass and rows that fail.

Lifetimes come from the shipped PARSEC v1.2S table; its accuracy against the grid is tested
in test_evolution_physics.py.  Facts of the trade used here (common practice): the Sun's
main-sequence lifetime is about 10 Gyr; a 5 Msun star lives about 0.1 Gyr.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import catcheck
from catcheck.physics.evolution import log_main_sequence_lifetime
from catcheck.profile import profile_from_dict

PROFILE = {
    "id": "name",
    "group": "cluster",
    "quantities": {
        "mass": {"column": "mass", "unit": "Msun", "error_value": 0.05},
        "initial_mass": {"column": "mass0", "unit": "Msun"},
        "age": {"column": "age", "unit": "Gyr"},
        "feh": {"column": "feh", "unit": "dex"},
        "phase": {"column": "phase"},
    },
}


def run(rows: list[dict], rule_id: str) -> tuple[pd.DataFrame, dict]:
    frame = pd.DataFrame(rows)
    for column, default in (("mass0", np.nan), ("feh", 0.0), ("cluster", None)):
        if column not in frame:
            frame[column] = default
    frame.insert(0, "name", [f"s{i}" for i in range(len(frame))])
    result = catcheck.check_frame(frame, profile_from_dict(PROFILE),
                                  rules=["evolution", "clusters"])
    counts = next(r for r in result.summary["rules"] if r["id"] == rule_id)
    return result.flags[result.flags["rule"] == rule_id], counts


def test_ms_lifetime_warns_and_escalates() -> None:
    flags, counts = run([
        {"mass": 1.0, "age": 4.6, "phase": "MS"},    # the Sun
        {"mass": 5.0, "age": 2.0, "phase": "MS"},    # 20x its ~0.1 Gyr lifetime: error
        {"mass": 1.4, "age": 8.0, "phase": "MS"},    # ~2.5x: a blue-straggler-like warning
        {"mass": 5.0, "age": 2.0, "phase": "RGB"},   # not on the main sequence
    ], "ms-lifetime")
    assert dict(zip(flags["row"], flags["severity"], strict=True)) == {1: "error",
                                                                      2: "warning"}
    assert counts["flagged_as_error"] == 1 and counts["not_applicable"] == 1


def test_evolved_too_young_uses_initial_mass_or_a_bound() -> None:
    flags, counts = run([
        {"mass": 0.9, "mass0": 1.0, "age": 2.0, "phase": "RGB"},   # 1 Msun giant at 2 Gyr
        {"mass": 0.9, "mass0": 1.0, "age": 11.0, "phase": "RGB"},  # a normal old giant
        {"mass": 0.9, "age": 11.0, "phase": "RC"},                 # present mass only: ok
        {"mass": 0.6, "age": 0.5, "phase": "WD"},                  # WD, no initial mass
        {"mass": 1.0, "age": 0.2, "phase": "RGB"},                 # present mass only: young
    ], "evolved-too-young")
    assert flags["row"].tolist() == [0, 4]
    assert counts["not_applicable"] == 1
    given, bound = flags["message"]
    # the catalogued initial mass gives the lifetime itself
    assert given.startswith("RGB star of present mass 0.9 Msun is 2 Gyr old, but its initial "
                            "mass 1 Msun keeps a star on the main sequence for ")
    # a present mass bounds the initial mass from above (1.0 x 1.1 + 0.3 Msun lost at
    # most), so the lifetime from it is a lower bound
    assert bound.startswith("RGB star of present mass 1 Msun is 200 Myr old, but with an "
                            "initial mass of at most 1.4 Msun it stays on the main sequence "
                            "for at least ")
    assert bound.endswith("sigma too young")


def test_pms_too_old() -> None:
    flags, _ = run([
        {"mass": 1.0, "age": 0.01, "phase": "PMS"},
        {"mass": 1.0, "age": 1.0, "phase": "PMS"},  # contraction ends at ~40 Myr
    ], "pms-too-old")
    assert flags["row"].tolist() == [1]


def test_white_dwarf_too_young_warns_and_escalates_beyond_doubt() -> None:
    # youngest white dwarf at solar [M/H]: an 8 Msun star's lifetime, ~40 Myr (PARSEC
    # v1.2S); ages without errors get the assumed 0.1 dex, so sigma = 0.141 dex
    flags, counts = run([
        {"mass": 0.6, "age": 0.010, "phase": "WD"},  # 10 Myr: 0.60 dex, 4.3 sigma
        {"mass": 0.6, "age": 0.001, "phase": "WD"},  # 1 Myr: 1.60 dex, 11 sigma
        {"mass": 0.6, "age": 1.0, "phase": "WD"},
    ], "white-dwarf-too-young")
    # a field white dwarf counted as a member explains the first: a warning
    assert dict(zip(flags["row"], flags["severity"], strict=True)) == {0: "warning",
                                                                      1: "error"}
    assert counts["flagged_as_error"] == 1
    assert flags.iloc[0]["message"] == (
        "white dwarf in a population 10 Myr old, but even an 8 Msun progenitor needs "
        "40.1 Myr to make one: 4.3 sigma")


def test_blue_straggler_candidate_is_only_a_warning_and_needs_a_cluster() -> None:
    flags, counts = run([
        {"mass": 1.5, "age": 1.0, "phase": "MS", "cluster": "C-1"},
        {"mass": 3.5, "age": 1.0, "phase": "MS", "cluster": "C-1"},  # above a ~2.1 turn-off
        {"mass": 3.5, "age": 1.0, "phase": "MS"},                    # field star
    ], "blue-straggler-candidate")
    assert flags["row"].tolist() == [1]
    assert set(flags["severity"]) == {"warning"}
    assert counts["not_applicable"] == 1


@pytest.mark.parametrize(("giant_mass", "flagged"), [(3.0, True), (None, False)])
def test_cluster_turnoff_age(giant_mass: float | None, flagged: bool) -> None:
    age_gyr = 2.0
    if giant_mass is None:  # giants whose lifetime matches the cluster's age
        grid = np.linspace(1.0, 3.0, 2001)
        giant_mass = float(grid[np.argmin(np.abs(
            log_main_sequence_lifetime(grid, np.zeros_like(grid)) - np.log10(age_gyr * 1e9)))])
    rows = [{"mass": giant_mass, "mass0": giant_mass, "age": age_gyr, "phase": "RGB",
             "cluster": "C-7"} for _ in range(5)]
    rows += [{"mass": 1.0, "age": age_gyr, "phase": "MS", "cluster": "C-7"}]
    flags, counts = run(rows, "cluster-turnoff-age")
    assert (len(flags) == 5) is flagged
    assert counts["checked"] == 5
    if flagged:
        assert "cluster C-7" in flags.iloc[0]["message"]


def envelope_run(rows: list[dict]) -> pd.DataFrame:
    frame = pd.DataFrame(rows)
    frame.insert(0, "name", [f"s{i}" for i in range(len(frame))])
    profile = profile_from_dict({"id": "name", "quantities": {
        "teff": {"column": "teff", "unit": "K"},
        "logg": {"column": "logg", "unit": "dex(cm/s2)", "error_value": 0.1},
        "phase": {"column": "phase"}}})
    flags = catcheck.check_frame(frame, profile, rules=["evolution"]).flags
    return flags[flags["rule"] == "phase-envelope"]


def test_phase_envelope_catches_mislabels_and_passes_real_stars() -> None:
    flags = envelope_run([
        {"teff": 5772.0, "logg": 4.44, "phase": "MS"},    # the Sun
        {"teff": 4800.0, "logg": 2.5, "phase": "RGB"},    # a red giant
        {"teff": 4800.0, "logg": 4.5, "phase": "RGB"},    # a dwarf labelled red giant
        {"teff": 5000.0, "logg": 3.0, "phase": "MS"},     # a giant labelled main sequence
        {"teff": 9000.0, "logg": 2.5, "phase": "RGB"},    # far too hot for a red giant
        {"teff": 20000.0, "logg": 8.0, "phase": "WD"},    # a white dwarf
        {"teff": 20000.0, "logg": 4.0, "phase": "WD"},    # a 'white dwarf' of giant size
    ])
    assert flags["row"].tolist() == [2, 3, 4, 6]
    assert set(flags["severity"]) == {"error"}
    messages = flags["message"].tolist()
    # quantity, value and unit, the bound and its unit, at which Teff
    assert messages[0].startswith("RGB star at Teff = 4800 K: log g = 4.50 dex(cm/s2) is "
                                  "above the RGB envelope: its upper bound is ")
    assert " dex(cm/s2) " in messages[0].split("upper bound is ")[1]
    assert "(0.1 dex margin included)" in messages[0]
    # judged at the most favourable Teff within the Teff error (2% assumed), it says which
    assert messages[2].startswith("RGB star at Teff = 9000 K: log g = 2.50 dex(cm/s2) is "
                                  "above the RGB envelope: its upper bound is ")
    assert "even at Teff = 9367 K, 2 sigma hotter" in messages[2]


def test_phase_envelope_flags_a_cool_dwarf_labelled_white_dwarf() -> None:
    flags = envelope_run([{"teff": 3000.0, "logg": 5.0, "phase": "WD"}])
    assert flags["row"].tolist() == [0]
    # a Teff outside the phase's range: the message compares Teff itself, in K
    assert flags.iloc[0]["message"].startswith(
        "WD star: Teff = 3000 K is below the coolest Teff of the WD envelope, ")


def test_phase_envelope_allows_for_the_teff_error_at_steep_edges() -> None:
    """A red giant near the cool base of the RGB, whose Teff is 4 sigma low, is not flagged.

    Values from a demo star (true Teff ~4612 K, catalogued 4265 +- 84 K): at the base of
    the giant branch the allowed log g ceiling falls by ~0.24 dex per 0.01 dex of Teff.
    """
    frame = pd.DataFrame({"name": ["g"], "teff": [4265.0], "e_teff": [84.0],
                          "logg": [2.90], "phase": ["RGB"]})
    profile = profile_from_dict({"id": "name", "quantities": {
        "teff": {"column": "teff", "unit": "K", "error": "e_teff"},
        "logg": {"column": "logg", "unit": "dex(cm/s2)", "error_value": 0.084},
        "phase": {"column": "phase"}}})
    flags = catcheck.check_frame(frame, profile, rules=["evolution"]).flags
    assert flags.empty
