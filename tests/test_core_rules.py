"""One small fixture per core rule: rows that must pass and rows that must fail.

Values are chosen by hand around each rule's formula (see ``catcheck explain RULE``);
the published sources behind the formulas are tested in the reference tests.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import catcheck
from catcheck.physics.stellar import (
    chandrasekhar_mass,
    hydrogen_burning_minimum_mass,
    log_eddington_luminosity,
)
from catcheck.profile import profile_from_dict

UNITS = {"teff": "K", "logg": "dex(cm/s2)", "luminosity": "dex(Lsun)", "radius": "Rsun",
         "mass": "Msun", "feh": "dex", "parallax": "mas", "distance": "pc"}


def run_rule(rule_id: str, rows: list[dict]) -> tuple[list[int], dict]:
    """Run the core pack on ``rows``; the positions flagged by ``rule_id`` and its counts."""
    frame = pd.DataFrame(rows)
    frame.insert(0, "name", [f"r{i}" for i in range(len(frame))])
    quantities = {}
    for column in frame.columns[1:]:
        if column.startswith("e_"):
            continue
        entry = {"column": column}
        if column in UNITS:
            entry["unit"] = UNITS[column]
        if f"e_{column}" in frame.columns:
            entry["error"] = f"e_{column}"
        quantities[column] = entry
    profile = profile_from_dict({"id": "name", "quantities": quantities})
    result = catcheck.check_frame(frame, profile)
    counts = next(r for r in result.summary["rules"] if r["id"] == rule_id)
    flags = result.flags[result.flags["rule"] == rule_id]
    assert (flags["message"].str.len() > 20).all()
    return flags["row"].tolist(), counts


def test_surface_gravity() -> None:
    rows = [
        {"logg": 4.44, "mass": 1.0, "radius": 1.0, "e_logg": 0.1},   # the Sun
        {"logg": 4.30, "mass": 1.0, "radius": 1.0, "e_logg": 0.1},   # 1.2 sigma: passes
        {"logg": 3.44, "mass": 1.0, "radius": 1.0, "e_logg": 0.1},   # 1 dex low: fails
        {"logg": 2.5, "mass": 1.2, "radius": 10.0, "e_logg": 0.1},   # a giant: passes
        {"logg": 4.5, "mass": 1.2, "radius": 10.0, "e_logg": 0.1},   # 'giant' at 4.5: fails
    ]
    flagged, counts = run_rule("surface-gravity", rows)
    assert flagged == [2, 4]
    assert counts["checked"] == 5


def test_eddington_limit() -> None:
    assert float(log_eddington_luminosity(10.0, 0.7)) == pytest.approx(
        math.log10(3.84e5), abs=0.005)  # 3.84e4 M/Msun Lsun for X = 0.7 (computed)
    ledd_10 = float(log_eddington_luminosity(10.0, 0.0))  # the rule's default, X = 0
    rows = [
        {"luminosity": 3.7, "mass": 10.0},            # a B star
        {"luminosity": ledd_10 - 0.1, "mass": 10.0},  # near the limit: passes
        {"luminosity": ledd_10 + 0.6, "mass": 10.0},  # 4x Eddington: fails
        {"luminosity": 5.9, "mass": 40.0},            # a massive O star: passes
    ]
    flagged, _ = run_rule("eddington-limit", rows)
    assert flagged == [2]


def test_ms_mass_luminosity_is_a_band_and_only_for_ms() -> None:
    rows = [
        {"luminosity": 0.0, "mass": 1.0, "phase": "MS"},    # the Sun
        {"luminosity": 0.45, "mass": 1.0, "phase": "MS"},   # evolved MS star: in band
        {"luminosity": 2.0, "mass": 1.0, "phase": "MS"},    # 2 dex too bright: warning
        {"luminosity": 2.0, "mass": 1.0, "phase": "RGB"},   # a giant: not applicable
        {"luminosity": -3.0, "mass": 0.05, "phase": "MS"},  # brown-dwarf mass: not applicable
    ]
    flagged, counts = run_rule("ms-mass-luminosity", rows)
    assert flagged == [2]
    assert (counts["checked"], counts["not_applicable"]) == (3, 2)
    assert counts["severity"] == "warning"


def test_hydrogen_burning_limit_depends_on_metallicity() -> None:
    assert hydrogen_burning_minimum_mass([0.0, -2.0]).tolist() == [0.07, 0.08]
    rows = [
        {"mass": 0.2, "phase": "MS", "feh": 0.0, "e_mass": 0.01},
        {"mass": 0.05, "phase": "MS", "feh": 0.0, "e_mass": 0.005},    # brown dwarf as MS
        {"mass": 0.068, "phase": "MS", "feh": 0.0, "e_mass": 0.005},   # within errors
        {"mass": 0.072, "phase": "MS", "feh": -2.0, "e_mass": 0.001},  # metal-poor: fails
        {"mass": 0.05, "phase": "PMS", "feh": 0.0, "e_mass": 0.005},   # not MS
    ]
    flagged, counts = run_rule("hydrogen-burning-limit", rows)
    assert flagged == [1, 3]
    assert counts["not_applicable"] == 1


def test_chandrasekhar_limit() -> None:
    assert chandrasekhar_mass() == pytest.approx(1.456, abs=0.001)  # mu_e = 2 (computed)
    rows = [
        {"mass": 0.6, "phase": "WD", "e_mass": 0.03},
        {"mass": 1.35, "phase": "WD", "e_mass": 0.05},
        {"mass": 1.6, "phase": "WD", "e_mass": 0.05},
        {"mass": 1.6, "phase": "MS", "e_mass": 0.05},
    ]
    flagged, _ = run_rule("chandrasekhar-limit", rows)
    assert flagged == [2]


def test_parallax_distance_only_for_good_parallaxes() -> None:
    rows = [
        {"parallax": 2.0, "e_parallax": 0.02, "distance": 500.0, "e_distance": 20.0},
        {"parallax": 2.0, "e_parallax": 0.02, "distance": 510.0, "e_distance": 20.0},
        {"parallax": 2.0, "e_parallax": 0.02, "distance": 650.0, "e_distance": 20.0},
        {"parallax": 0.3, "e_parallax": 0.2, "distance": 9000.0, "e_distance": 500.0},
        {"parallax": 2.0, "e_parallax": 0.02, "distance": 0.5, "e_distance": 0.02},  # kpc?
    ]
    flagged, counts = run_rule("parallax-distance", rows)
    assert flagged == [2, 4]
    assert counts["not_applicable"] == 1


def test_stefan_boltzmann_uses_catalogue_errors() -> None:
    rows = [
        {"teff": 5772.0, "radius": 1.0, "luminosity": 0.3, "e_luminosity": 0.02,
         "e_radius": 0.01, "e_teff": 20.0},                       # 0.3 dex at ~0.03: fails
        {"teff": 5772.0, "radius": 1.0, "luminosity": 0.3, "e_luminosity": 0.1,
         "e_radius": 0.05, "e_teff": 100.0},                      # same offset, 2.5 sigma
    ]
    flagged, _ = run_rule("stefan-boltzmann", rows)
    assert flagged == [0]


@pytest.mark.parametrize("value", [np.nan, None])
def test_missing_mass_is_skipped(value) -> None:
    rows = [{"mass": value, "phase": "WD"}, {"mass": 2.0, "phase": "WD"}]
    flagged, counts = run_rule("chandrasekhar-limit", rows)
    assert flagged == [1]
    assert (counts["checked"], counts["skipped"]) == (1, 1)


# --- messages: numbers keep their clue, every quantity its unit -------------------------

def core_messages(rows: list[dict]) -> dict[tuple[int, str], str]:
    """(row, rule) -> message of the core pack on ``rows`` (columns named as UNITS)."""
    frame = pd.DataFrame(rows)
    frame.insert(0, "name", [f"r{i}" for i in range(len(frame))])
    profile = profile_from_dict({"id": "name", "quantities": {
        column: {"column": column, "unit": UNITS[column]} for column in frame.columns[1:]}})
    flags = catcheck.check_frame(frame, profile).flags
    return {(row, rule): message for row, rule, message
            in zip(flags["row"], flags["rule"], flags["message"], strict=True)}


def test_range_messages_give_the_reason_of_the_limit_broken() -> None:
    messages = core_messages([{"teff": 3.777e6}, {"teff": 3.76}])
    assert messages[(0, "teff-range")] == (
        "teff = 3.777e+06 K is above the upper limit 5e+05 K (twice the hottest white "
        "dwarfs and central stars, ~250,000 K)")
    assert messages[(1, "teff-range")] == (
        "teff = 3.76 K is below the lower limit 200 K (the coolest known brown dwarfs are "
        "~250 K)")
    for message in messages.values():  # provenance is for `catcheck explain`, not messages
        assert "from memory" not in message and "Pecaut" not in message


def test_relation_messages_keep_small_values_and_name_units() -> None:
    # a log Teff catalogued as K: 3.76 K must read 3.76 K, never "4 K"
    messages = core_messages([
        {"teff": 3.76, "radius": 1.0, "luminosity": 0.0},
        {"logg": 3.44, "mass": 1.0, "radius": 1.0},
        {"luminosity": 7.0, "mass": 10.0},
    ])
    assert messages[(0, "stefan-boltzmann")].startswith(
        "log L = 0.00 dex(Lsun) but R = 1 Rsun and Teff = 3.76 K give -12.74 dex(Lsun): ")
    assert messages[(1, "surface-gravity")].startswith(
        "log g = 3.44 dex(cm/s2) but M = 1 Msun and R = 1 Rsun give 4.44 dex(cm/s2): ")
    assert messages[(2, "eddington-limit")].startswith(
        "log L = 7.00 dex(Lsun) exceeds the Eddington luminosity of M = 10 Msun, "
        "log L_Edd = 5.81 dex(Lsun), by 1.19 dex")
