"""Evolutionary timescales (``catcheck.physics.evolution``) against their sources.

Comparison with other sources, kept apart from the behaviour tests further down:

* PARSEC v1.2S isochrones (Bressan et al. 2012, MNRAS 427, 127), lachesis-grids file
  ``parsec_v1.25.h5`` read by ``tests/parsec_data.py``: main-sequence lifetimes are
  re-derived here, independently of the shipped table and of the script that wrote it,
  for masses half-way between the table's nodes (the worst case for interpolating it).
  The rule is the table's (the age at the terminal-age main sequence, TAMS: EEP 454,
  where the PARSEC label is 2), the interpolation between isochrones differs on purpose:
  linear in age and mass here, linear in their logarithms in the table.  Within 20%
  from 0.7 to 100 Msun at every [M/H] (other grids differ by 10-25%); found: at most
  3.4%, rms 0.5%, so a tighter 5% bound also guards the table's own accuracy.  The
  largest differences are at 0.8-1.3 Msun, where the onset of a convective core kinks
  the lifetime curve between isochrones 0.05 dex apart in age, and above 60 Msun, where
  successive isochrones' TAMS masses lie far apart.  Skipped without h5py or
  lachesis-grids.
* Main-sequence lifetimes and pre-main-sequence contraction times computed from PARSEC
  v1.2S for the project's physics reference (section 4), typed in below: lifetimes
  within 20%, contraction times (printed to 1-3 figures after a "~") within 15%.
* Facts of the trade ("common practice"): the Sun's main-sequence lifetime is about
  10 Gyr; a 0.4 Msun star outlives the present age of the Universe (Planck 2018,
  through ``astropy.cosmology``) many times over; a 40 Msun star lives a few Myr.
* The most massive white-dwarf progenitor, 8 +- 1 Msun (Smartt 2009, ARA&A 47, 63),
  ends core helium burning after ~40 Myr (found: 36-40 Myr over the [M/H] grid; 64-75
  Myr for 6 Msun), so no white dwarf is younger: the ~40-60 Myr of common practice.
"""

from __future__ import annotations

import importlib.util
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from catcheck.physics import evolution
from catcheck.physics.evolution import (
    MAX_WHITE_DWARF_PROGENITOR_MASS,
    log_core_helium_burning_end_age,
    log_main_sequence_lifetime,
    log_pre_main_sequence_time,
    main_sequence_lifetime_is_lower_limit,
    main_sequence_turnoff_mass,
    post_main_sequence_duration,
    pre_main_sequence_time_is_upper_limit,
    read_timescale_table,
    timescale_table,
    youngest_white_dwarf_age,
)

REPO = Path(__file__).resolve().parents[1]
FEH_GRID = np.linspace(-2.0, 0.5, 11)
#: the terminal-age main sequence in the EEP scheme of parsec_v1.25.h5 (label 1 -> 2)
TAMS_EEP = 454
#: the oldest isochrone of the grid, log10 age/yr
OLDEST_LOG_AGE = 10.25
MYR = 1e6


def grid_needed() -> None:
    pytest.importorskip("h5py", reason="h5py is needed to read the PARSEC grid")
    pytest.importorskip("lachesis_grids", reason="the lachesis-grids package (PARSEC "
                        "v1.2S isochrones) is not installed; pip install catcheck[test]")


@pytest.fixture(scope="module")
def isochrones() -> pd.DataFrame:
    """Every model point of PARSEC v1.2S, read by tests/parsec_data.py."""
    grid_needed()
    from parsec_data import load_parsec_isochrones

    frame = load_parsec_isochrones()
    return frame[["feh", "log_age", "eep", "initial_mass", "phase_label"]]


def grid_main_sequence_lifetime(points: pd.DataFrame, mass: np.ndarray) -> np.ndarray:
    """t_MS (yr) of each initial mass (Msun) from the isochrones of one [M/H] of the grid.

    The TAMS of an isochrone is its EEP-454 point where the PARSEC label is 2 (subgiant:
    the main sequence has just ended).  Between the two isochrones whose TAMS masses
    bracket a mass, its t_MS is interpolated linearly in age (yr) against mass (Msun),
    where the table is linear in the logarithms of both.  NaN where the star is still on
    the main sequence in the oldest isochrone (the grid gives only a lower limit).
    """
    tams = points[(points["eep"] == TAMS_EEP) & (points["phase_label"] == 2.0)]
    tams = tams.sort_values("initial_mass")
    return np.interp(mass, tams["initial_mass"].to_numpy(), 10 ** tams["log_age"].to_numpy(),
                     left=np.nan, right=np.nan)


# --- comparison with PARSEC v1.2S, computed here from the grid ---------------------------

#: masses half-way between the table's nodes (0.02 dex apart), 0.7-100 Msun
OFF_NODE_MASS = 10 ** np.round(np.arange(-0.15, 2.0, 0.02), 2)


@pytest.fixture(scope="module")
def grid_lifetimes(isochrones: pd.DataFrame) -> dict[float, np.ndarray]:
    return {feh: grid_main_sequence_lifetime(isochrones[isochrones["feh"] == feh],
                                             OFF_NODE_MASS) for feh in FEH_GRID}


def test_main_sequence_lifetime_matches_the_parsec_grid(grid_lifetimes):
    """Source: PARSEC v1.2S isochrones, parsec_v1.25.h5 (module docstring): within 20%."""
    errors = []
    for feh, grid_t in grid_lifetimes.items():
        measured = ~np.isnan(grid_t)
        table_log_t = log_main_sequence_lifetime(OFF_NODE_MASS[measured], feh)
        errors.append(10**table_log_t / grid_t[measured] - 1.0)
    relative = np.concatenate(errors)
    assert len(relative) > 0.9 * len(OFF_NODE_MASS) * len(FEH_GRID)
    assert np.abs(relative).max() < 0.20
    # the table's interpolation accuracy (regression bound; found: max 3.4%, rms 0.5%)
    assert np.abs(relative).max() < 0.05
    assert np.sqrt(np.mean(relative**2)) < 0.01


def test_lower_limits_are_where_the_grid_ends_on_the_main_sequence(grid_lifetimes):
    """Lifetimes beyond the oldest isochrone are flagged, the ones the grid measures not.

    Only a mass within interpolation error of the boundary (table lifetime within 0.01
    dex of the oldest isochrone, e.g. 0.7079 Msun at [M/H] = -1.5, 0.0001 dex below the
    oldest TAMS mass) may fall on the other side.
    """
    assert sum(np.isnan(grid_t).sum() for grid_t in grid_lifetimes.values()) > 10
    for feh, grid_t in grid_lifetimes.items():
        flagged = main_sequence_lifetime_is_lower_limit(OFF_NODE_MASS, feh)
        censored = np.isnan(grid_t)
        log_t = log_main_sequence_lifetime(OFF_NODE_MASS, feh)
        differ = flagged != censored
        assert np.all(np.abs(log_t[differ] - OLDEST_LOG_AGE) < 0.01), feh
        assert np.all(log_t[censored] > OLDEST_LOG_AGE - 0.01)


def test_shipped_table_is_what_the_script_derives(monkeypatch):
    """scripts/derive_timescales.py on parsec_v1.25.h5 gives the shipped table (but the date)."""
    grid_needed()
    spec = importlib.util.spec_from_file_location(
        "derive_timescales", REPO / "scripts" / "derive_timescales.py")
    assert spec is not None and spec.loader is not None
    script = importlib.util.module_from_spec(spec)
    monkeypatch.setitem(sys.modules, "derive_timescales", script)
    monkeypatch.setattr(sys, "path", list(sys.path))  # the script adds tests/ to the path
    spec.loader.exec_module(script)
    shipped = (REPO / "catcheck" / "data" / evolution.TABLE_FILE).read_text(encoding="utf-8")
    assert script.without_date(script.build_table("2000-01-01")) == script.without_date(shipped)


# --- comparison with the PARSEC values of the physics reference (computed) ---------------

#: t_MS in Myr computed from PARSEC v1.2S (Bressan et al. 2012) isochrones, PHYSICS.md
#: section 4; None is "> 17,800" (still on the main sequence in the oldest isochrone)
PARSEC_MS_LIFETIME_MYR = {
    #  M: ([M/H] -1.0, -0.5, 0.0, +0.25)
    0.8: (12_700, 15_680, None, None),
    1.0: (5_650, 7_020, 9_580, 11_080),
    1.5: (1_700, 2_030, 2_690, 3_060),
    2.0: (771, 902, 1_161, 1_297),
    3.0: (280, 316, 379, 408),
    5.0: (89, 95, 103, 105),
    10.0: (24.9, 24.7, 24.2, 23.2),
    20.0: (9.7, 9.4, 9.4, 8.8),
    40.0: (5.3, 5.2, 5.0, 4.8),
    100.0: (3.2, 3.2, 3.2, 3.1),
}
PARSEC_MS_FEH = (-1.0, -0.5, 0.0, 0.25)


@pytest.mark.parametrize("mass", sorted(PARSEC_MS_LIFETIME_MYR))
def test_main_sequence_lifetime_matches_the_reference_table(mass):
    """Within 20% of the tabulated PARSEC lifetimes; '> 17,800' rows are lower limits."""
    for feh, expected in zip(PARSEC_MS_FEH, PARSEC_MS_LIFETIME_MYR[mass], strict=True):
        lifetime = 10 ** log_main_sequence_lifetime(mass, feh) / MYR
        if expected is None:
            assert main_sequence_lifetime_is_lower_limit(mass, feh)
            assert lifetime > 17_800
        else:
            assert lifetime == pytest.approx(expected, rel=0.20), (mass, feh)
            assert not main_sequence_lifetime_is_lower_limit(mass, feh)


#: solar-metallicity PMS contraction times in Myr from PARSEC v1.2S, PHYSICS.md section 4
PARSEC_PMS_TIME_MYR = {0.1: 800, 0.2: 370, 0.5: 165, 1.0: 36, 2.0: 10, 3.0: 3.4, 5.0: 0.9}


@pytest.mark.parametrize("mass", sorted(PARSEC_PMS_TIME_MYR))
def test_pre_main_sequence_time_matches_the_reference_values(mass):
    """Solar [M/H]: within 15% of the tabulated '~' values (printed to 1-3 figures)."""
    found = 10 ** log_pre_main_sequence_time(mass, 0.0) / MYR
    assert found == pytest.approx(PARSEC_PMS_TIME_MYR[mass], rel=0.15)
    assert not pre_main_sequence_time_is_upper_limit(mass, 0.0)


def test_pre_main_sequence_is_shorter_at_low_metallicity():
    """'~0.5x these at [M/H] = -1' (PHYSICS.md section 4, computed from PARSEC)."""
    masses = np.array([0.5, 1.0, 2.0, 3.0])
    ratio = 10 ** (log_pre_main_sequence_time(masses, -1.0)
                   - log_pre_main_sequence_time(masses, 0.0))
    assert np.all((ratio > 0.35) & (ratio < 0.7))


def test_massive_stars_have_no_pre_main_sequence_in_the_models():
    """Above ~13 Msun PARSEC stars start on the ZAMS: only an upper limit of <= 1 Myr."""
    masses = np.geomspace(15.0, 150.0, 12)
    for feh in FEH_GRID:
        assert np.all(pre_main_sequence_time_is_upper_limit(masses, feh))
        assert np.all(log_pre_main_sequence_time(masses, feh) <= 6.0)


# --- facts of the trade (common practice) -------------------------------------------------

def test_the_sun_lives_about_ten_gyr_on_the_main_sequence():
    """Common practice: about 10 Gyr (PARSEC: 9.6 Gyr at [M/H] = 0)."""
    assert 8e9 < 10 ** log_main_sequence_lifetime(1.0, 0.0) < 12e9


def test_a_red_dwarf_outlives_the_universe_many_times():
    """Common practice: 0.4 Msun lives far longer than the present age of the Universe."""
    cosmology = pytest.importorskip("astropy.cosmology")
    age_of_universe = cosmology.Planck18.age(0).to_value("yr")  # Planck 2018: 13.79 Gyr
    lifetimes = 10 ** log_main_sequence_lifetime(0.4, FEH_GRID)
    assert np.all(lifetimes > 5 * age_of_universe)
    assert np.all(main_sequence_lifetime_is_lower_limit(0.4, FEH_GRID))


def test_a_forty_solar_mass_star_lives_a_few_myr():
    """Common practice: a few Myr (PARSEC: 4.5-5.3 Myr over the [M/H] grid)."""
    lifetimes = 10 ** log_main_sequence_lifetime(40.0, FEH_GRID) / MYR
    assert np.all((lifetimes > 3) & (lifetimes < 7))


def test_youngest_white_dwarf_age():
    """8 Msun progenitors (Smartt 2009) finish helium burning after ~40 Myr (36-40 found)."""
    assert MAX_WHITE_DWARF_PROGENITOR_MASS.value == 8.0
    ages = youngest_white_dwarf_age(FEH_GRID) / MYR
    assert np.all((ages > 30) & (ages < 60))
    assert youngest_white_dwarf_age(0.0) / MYR == pytest.approx(40, rel=0.1)
    lighter = youngest_white_dwarf_age(FEH_GRID, max_progenitor_mass=6.0)
    assert np.all(lighter / MYR > ages)  # a lighter upper limit means an older population
    assert np.all(youngest_white_dwarf_age(FEH_GRID) > 10 ** log_main_sequence_lifetime(
        MAX_WHITE_DWARF_PROGENITOR_MASS.value, FEH_GRID))


# --- behaviour -----------------------------------------------------------------------------

def test_turnoff_mass_inverts_the_lifetime():
    """Round trips mass -> t_MS -> mass and age -> mass -> age, at any [M/H]."""
    rng = np.random.default_rng(20120127)
    mass = 10 ** rng.uniform(-1.0, 2.3, 20_000)
    feh = rng.uniform(-2.5, 1.0, 20_000)
    age = 10 ** log_main_sequence_lifetime(mass, feh)
    np.testing.assert_allclose(main_sequence_turnoff_mass(age, feh), mass, rtol=1e-9)
    ages = 10 ** rng.uniform(6.5, 10.1, 20_000)
    turnoff = main_sequence_turnoff_mass(ages, feh)
    np.testing.assert_allclose(10 ** log_main_sequence_lifetime(turnoff, feh), ages,
                               rtol=1e-9)


def test_turnoff_mass_of_familiar_populations():
    """The Sun's age turns off ~1.2 Msun; 100 Myr (Pleiades-like) ~5 Msun; NaN if too young."""
    turnoff = main_sequence_turnoff_mass([4.6e9, 1e8, 1e6], 0.0)
    assert turnoff[0] == pytest.approx(1.19, abs=0.05)
    assert turnoff[1] == pytest.approx(5.07, abs=0.1)
    assert np.isnan(turnoff[2])  # younger than any lifetime in the table
    ages = np.geomspace(3e6, 1.5e10, 200)
    assert np.all(np.diff(main_sequence_turnoff_mass(ages, -0.3)) < 0)


def test_nan_in_nan_out_and_out_of_range():
    values = [np.nan, 1.0, 0.05, 300.0, -1.0, 0.0]
    fehs = [0.0, np.nan, 0.0, 0.0, 0.0, 0.0]
    for function in (log_main_sequence_lifetime, log_pre_main_sequence_time,
                     log_core_helium_burning_end_age, post_main_sequence_duration):
        assert np.all(np.isnan(function(values, fehs))), function.__name__
    assert not main_sequence_lifetime_is_lower_limit(values, fehs).any()
    assert not pre_main_sequence_time_is_upper_limit(values, fehs).any()
    assert np.all(np.isnan(main_sequence_turnoff_mass([np.nan, 1e9, -5.0, 0.0],
                                                       [0.0, np.nan, 0.0, 0.0])))
    assert np.isnan(youngest_white_dwarf_age(np.nan))


def test_metallicity_is_clamped_to_the_table():
    masses = np.array([0.9, 1.0, 3.0, 30.0])
    np.testing.assert_array_equal(log_main_sequence_lifetime(masses, -3.0),
                                  log_main_sequence_lifetime(masses, -2.0))
    np.testing.assert_array_equal(log_pre_main_sequence_time(masses, 1.2),
                                  log_pre_main_sequence_time(masses, 0.5))
    np.testing.assert_array_equal(main_sequence_turnoff_mass(1e9, [-4.0, 0.9]),
                                  main_sequence_turnoff_mass(1e9, [-2.0, 0.5]))


def test_table_nodes_are_returned_exactly_and_shapes_broadcast():
    table = timescale_table()
    i, j = 57, 4
    mass, feh = 10 ** table.log_mass[i], table.feh[j]
    assert log_main_sequence_lifetime(mass, feh) == pytest.approx(table.log_t_ms[i, j],
                                                                  abs=1e-12)
    assert log_main_sequence_lifetime([[1.0], [2.0]], [0.0, -1.0, 0.5]).shape == (2, 3)
    assert log_main_sequence_lifetime(1.0, 0.0).shape == ()


def test_table_invariants():
    """t_MS falls with mass, t_PMS never rises, helium burning ends after the TAMS."""
    table = timescale_table()
    assert table.mass_range == pytest.approx((0.1, 10**2.3))
    np.testing.assert_array_equal(table.feh, FEH_GRID)
    assert np.all(np.diff(table.log_t_ms, axis=0) < 0)
    pms = table.log_t_pms
    assert np.all(np.diff(pms, axis=0)[~np.isnan(np.diff(pms, axis=0))] <= 0)
    heb = table.log_t_heb_end
    assert np.all(heb[~np.isnan(heb)] > table.log_t_ms[~np.isnan(heb)])
    for key in ("reference", "source", "status", "date"):
        assert table.metadata[key]
    assert "Bressan et al. 2012" in table.metadata["reference"]
    assert "parsec_v1.25.h5" in table.metadata["source"]


def test_post_main_sequence_duration():
    """A tenth or so of the main sequence at 5 Msun; NaN where the file ends too early."""
    duration = post_main_sequence_duration(5.0, 0.0)
    assert 0.05 < duration / 10 ** log_main_sequence_lifetime(5.0, 0.0) < 0.2
    assert np.isnan(post_main_sequence_duration(60.0, 0.0))
    assert np.isnan(post_main_sequence_duration(0.5, 0.0))  # both ages extrapolated


def test_runs_without_the_grid_package():
    """The shipped table is all catcheck needs at run time: no lachesis-grids, no h5py."""
    code = textwrap.dedent("""
        import sys
        sys.modules["lachesis_grids"] = None
        sys.modules["h5py"] = None
        from catcheck.physics.evolution import log_main_sequence_lifetime
        print(round(float(10 ** log_main_sequence_lifetime(1.0, 0.0) / 1e9), 1))
    """)
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True)
    assert result.stdout.strip() == "9.6"


@pytest.mark.parametrize("change, message", [
    (lambda text: text.replace("# low_mass_slope: -3.50\n", ""), "header lacks"),
    (lambda text: text.replace("log_mass,feh,", "mass,feh,"), "expected the header"),
    (lambda text: text.replace(",grid,", ",model,", 1), "is not one of"),
    (lambda text: text.replace("\n-1.00,-2.00,", "\n-1.00,-2.50,", 1), "every (log_mass"),
])
def test_table_reader_rejects_malformed_tables(change, message):
    path = REPO / "catcheck" / "data" / evolution.TABLE_FILE
    text = path.read_text(encoding="utf-8")
    read_timescale_table(text, "ok.csv")
    with pytest.raises(ValueError, match=message.replace("(", r"\(")):
        read_timescale_table(change(text), "bad.csv")


def test_table_reader_rejects_a_lifetime_that_rises_with_mass():
    lines = (REPO / "catcheck" / "data" / evolution.TABLE_FILE).read_text(
        encoding="utf-8").splitlines()
    row = next(k for k, line in enumerate(lines) if line.startswith("0.00,0.00,"))
    fields = lines[row].split(",")
    fields[2] = "11.0000"
    lines[row] = ",".join(fields)
    with pytest.raises(ValueError, match="fall strictly"):
        read_timescale_table("\n".join(lines), "bad.csv")
