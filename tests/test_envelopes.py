"""Phase envelopes: :mod:`catcheck.physics.envelopes` and ``catcheck/data/parsec_envelopes.csv``.

Comparison with a source outside catcheck: the PARSEC v1.2S isochrones (Bressan et al.
2012, MNRAS 427, 127), lachesis-grids file ``parsec_v1.25.h5``, read by
``tests/parsec_data.py`` (phase codes by its rule).  These tests skip when ``h5py`` or
``lachesis-grids`` is missing:

* the solar-metallicity extremes of the phases, recomputed from the grid, against the
  values tabulated for the project (computed from the same grid); the shipped union
  envelopes must bracket them, apart from two documented differences of definition;
* every classified model point (all [M/H], all ages up to the age of the Universe) lies
  inside its own phase's envelope through the public lookup, neighbour rule included;
* model points relabelled with a wrong phase (red giants as MS, MS stars as RGB, ...)
  fall outside; the fractions are printed (``pytest -s``) and must reach 99%;
* the shipped table is what ``scripts/derive_envelopes.py`` derives now (regression).

Tests that need only the shipped table: its format and provenance, the lookup rules, and
the envelopes from memory against well-known stars (values from memory, marked so).
"""

from __future__ import annotations

import importlib.util
import math
import sys
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType

import numpy as np
import pandas as pd
import pytest

from catcheck.constants import AGE_OF_UNIVERSE
from catcheck.physics import envelopes
from catcheck.physics.envelopes import (
    ENVELOPE_FILE,
    NOT_COVERED,
    envelope_bounds,
    envelope_phases,
    log_radius_bounds,
    logg_bounds,
    logl_bounds,
    outside_teff_range,
    phase_envelope,
    read_envelope_table,
)
from catcheck.quantities import NO_PHASE, PHASE_INDEX

REPO = Path(__file__).resolve().parents[1]
SCRIPT = REPO / "scripts" / "derive_envelopes.py"
DOCUMENT = REPO / "catcheck" / "data" / "ENVELOPES.md"
TABLE = REPO / "catcheck" / "data" / ENVELOPE_FILE

#: phases the PARSEC grid labels (tests/parsec_data.py) and those built from its CHEB stars
PARSEC_PHASES = ("PMS", "MS", "SGB", "RGB", "CHEB")
CLUMP_PHASES = ("RC", "HB")
CLUMP_MAX_INITIAL_MASS = 2.2
#: phases with a box from memory only
MEMORY_ONLY = ("WD", "AGB", "RSG", "BSG")
#: mislabelled model points must be caught at least this often
REQUIRED_SEPARATION = 0.99


def codes(phase: str, n: int = 1) -> np.ndarray:
    return np.full(n, PHASE_INDEX[phase], dtype=np.int8)


def inside(phase: str, teff: float, logg: float, logl: float) -> bool:
    """Whether one star lies inside its phase's envelope (log g and log L; Teff in K)."""
    b = envelope_bounds(codes(phase), np.log10([teff]))
    if b.outside_range[0]:
        return False
    return bool(b.logg_min[0] <= logg <= b.logg_max[0] and b.logl_min[0] <= logl <= b.logl_max[0])


# =========================================================================================
# The shipped table (no grid needed)
# =========================================================================================


def test_table_names_its_source_and_derivation() -> None:
    _, meta = read_envelope_table(TABLE.read_text(encoding="utf-8"), ENVELOPE_FILE)
    assert "Bressan et al. 2012" in meta["reference"]
    assert "parsec_v1.25.h5" in meta["source"] and "lachesis-grids" in meta["source"]
    assert "derive_envelopes.py" in meta["derived"]
    assert float(meta["bin width"]) == 0.01
    assert float(meta["max log age"]) == pytest.approx(math.log10(AGE_OF_UNIVERSE.value), abs=1e-4)


def test_table_holds_every_phase_it_promises() -> None:
    assert set(envelope_phases()) == {*PARSEC_PHASES, *CLUMP_PHASES, *MEMORY_ONLY, "BSS"}
    for phase in ("PMS", "MS", "SGB", "RGB", "RC"):
        assert phase_envelope(phase).sources == ("parsec",)
    for phase in ("HB", "CHEB"):  # the hot horizontal branch from memory joins the models
        assert set(phase_envelope(phase).sources) == {"parsec", "memory"}
    for phase in MEMORY_ONLY:
        assert phase_envelope(phase).sources == ("memory",)
    assert phase_envelope("BSS") is phase_envelope("MS")
    for phase, why in NOT_COVERED.items():
        with pytest.raises(KeyError, match=why[:20]):
            phase_envelope(phase)


def test_bins_counts_and_empty_bins_agree() -> None:
    for phase in envelope_phases():
        env = phase_envelope(phase)
        assert np.all(np.diff(env.log_teff_low) > 0)
        np.testing.assert_allclose(env.log_teff_high - env.log_teff_low, 0.01, atol=1e-9)
        empty = np.isnan(env.logg_min)
        for values in (env.logg_max, env.logl_min, env.logl_max):
            assert np.array_equal(np.isnan(values), empty)
        assert np.all(env.logg_min[~empty] <= env.logg_max[~empty])
        assert np.all(env.logl_min[~empty] <= env.logl_max[~empty])
        assert not empty[0] and not empty[-1]  # a range starts and ends with a point
        if env.sources == ("parsec",):
            assert np.array_equal(empty, env.n_points == 0)
            assert env.n_points.sum() == env.ranges[0].n_points


def test_lookup_takes_the_extremes_of_the_neighbouring_bins() -> None:
    env = phase_envelope("MS")
    for b in (5, 40, 80):
        centre = 0.5 * (env.log_teff_low[b] + env.log_teff_high[b])
        lo, hi = logg_bounds(codes("MS"), [centre])
        assert lo[0] == env.logg_min[b - 1:b + 2].min()
        assert hi[0] == env.logg_max[b - 1:b + 2].max()
        lo, hi = logl_bounds(codes("MS"), [env.log_teff_low[b]])  # on the edge: same bin
        assert lo[0] == env.logl_min[b - 1:b + 2].min()
        assert hi[0] == env.logl_max[b - 1:b + 2].max()


def test_an_empty_bin_borrows_from_its_nearest_filled_neighbours() -> None:
    env = phase_envelope("SGB")
    empty = np.flatnonzero(np.isnan(env.logg_min))
    assert len(empty) > 0, "the SGB envelope has an empty bin among its massive stars"
    b = int(empty[0])
    filled = np.flatnonzero(~np.isnan(env.logg_min))
    left, right = filled[filled < b].max(), filled[filled > b].min()
    lo, hi = logg_bounds(codes("SGB"), [env.log_teff_low[b] + 0.005])
    assert lo[0] == min(env.logg_min[left], env.logg_min[right])
    assert hi[0] == max(env.logg_max[left], env.logg_max[right])


def test_rows_without_an_envelope_get_nan_and_outside_range_is_separate() -> None:
    phase = np.array([NO_PHASE, PHASE_INDEX["PAGB"], PHASE_INDEX["WR"], PHASE_INDEX["MS"],
                      PHASE_INDEX["MS"], PHASE_INDEX["RGB"], PHASE_INDEX["BSS"]], dtype=np.int8)
    log_teff = np.log10([5000.0, 5000.0, 80000.0, 1500.0, np.nan, 5000.0, 7000.0])
    b = envelope_bounds(phase, log_teff)
    assert b.covered.tolist() == [False, False, False, True, True, True, True]
    assert b.outside_range.tolist() == [False, False, False, True, False, False, False]
    assert np.isnan(b.logg_min[:5]).all() and np.isnan(b.log_r_max[:5]).all()
    assert np.isfinite(b.logg_min[5:]).all() and np.isfinite(b.log_r_max[5:]).all()
    assert outside_teff_range(phase, log_teff).tolist() == b.outside_range.tolist()


def test_scalars_and_arrays_agree() -> None:
    scalar = envelope_bounds(PHASE_INDEX["RGB"], math.log10(4500.0))
    array = envelope_bounds(codes("RGB", 3), np.full(3, math.log10(4500.0)))
    assert scalar.logg_min.shape == ()
    for s, a in zip(scalar, array, strict=True):
        assert np.all(a == s)


def test_mislabels_named_in_the_issue_fall_outside() -> None:
    """Cases from the issue: each is outside its claimed phase, inside the right one."""
    assert not inside("RGB", 4500.0, 4.5, -0.6)  # a "red giant" with a dwarf's log g 4.5
    assert not inside("MS", 4500.0, 3.0, 1.0)  # an MS label on a log g 3.0 cool star
    assert inside("SGB", 4900.0, 3.5, 0.8) or inside("RGB", 4900.0, 3.0, 1.3)
    # a low-mass "RGB" star at 9000 K: only massive supergiants have label 3 there
    assert not inside("RGB", 9000.0, 2.5, 2.0)
    # a main-sequence label 2 dex above the main-sequence band at 6000 K
    assert not inside("MS", 6000.0, 3.0, 2.2)


def test_well_known_stars_sit_in_their_phase_envelopes() -> None:
    """Values from memory (rounded literature values), each with a phase it must fit."""
    stars = [  # name, phase, Teff (K), log g, log L
        ("Sun", "MS", 5772.0, 4.44, 0.0),
        ("Arcturus", "RGB", 4290.0, 1.66, 2.23),
        ("Vega", "MS", 9600.0, 4.1, 1.6),
        ("Sirius B", "WD", 25000.0, 8.57, -1.6),
        ("Mira", "AGB", 3000.0, -0.5, 3.9),
        ("sdB star", "HB", 28000.0, 5.5, 1.3),
        ("sdB star", "CHEB", 28000.0, 5.5, 1.3),
        ("Betelgeuse", "RSG", 3600.0, -0.3, 5.1),
        ("Rigel", "BSG", 12100.0, 1.75, 5.08),
        ("Deneb", "BSG", 8500.0, 1.1, 5.3),
    ]
    for name, phase, teff, logg, logl in stars:
        assert inside(phase, teff, logg, logl), f"{name} outside the {phase} envelope"
    assert not inside("RGB", 5772.0, 4.44, 0.0)  # the Sun is no giant
    assert not inside("MS", 4290.0, 1.66, 2.23)  # nor Arcturus a dwarf


def test_white_dwarf_and_agb_boxes_from_memory_are_sane() -> None:
    wd = phase_envelope("WD")
    (wd_range,) = wd.ranges
    assert wd_range.source == "memory"
    assert wd_range.log_g == (7.0, 9.5)
    assert 10 ** wd_range.log_teff[0] == pytest.approx(3500.0, rel=1e-3)
    # radii: 1.35 Msun at log g 9.5 and 0.6 Msun at log g 7.0, from g = G M / R^2
    assert 10 ** wd_range.log_r[0] == pytest.approx(0.0034, abs=5e-5)
    assert 10 ** wd_range.log_r[1] == pytest.approx(0.0406, abs=5e-5)
    teff = np.array([4000.0, 6000.0, 12000.0, 25000.0, 60000.0, 150000.0])
    r_lo, r_hi = log_radius_bounds(codes("WD", len(teff)), np.log10(teff))
    # PHYSICS.md's typical white dwarfs (0.008-0.02 Rsun) fit at every Teff ...
    assert np.all(r_lo <= math.log10(0.008)) and np.all(r_hi >= math.log10(0.02))
    # ... giant radii (10 Rsun) and main-sequence radii (1 Rsun) do not
    assert np.all(r_hi < 0.0)
    assert not inside("WD", 25000.0, 4.3, 4.3)  # a B dwarf called a white dwarf
    assert not inside("WD", 2500.0, 8.0, -4.0)  # cooler than any white dwarf
    agb = phase_envelope("AGB")
    (agb_range,) = agb.ranges
    assert agb_range.log_g == (-1.0, 3.0) and agb_range.log_l == (1.5, 4.75)
    assert not inside("AGB", 3000.0, 5.0, -2.5)  # an M dwarf called AGB
    assert not inside("AGB", 4500.0, 2.5, 0.9)  # below the start of the AGB
    assert outside_teff_range(codes("AGB"), [math.log10(9000.0)])[0]


def test_malformed_tables_are_refused() -> None:
    text = TABLE.read_text(encoding="utf-8")
    header, _, rest = text.partition("phase,source,")
    rows = rest.splitlines()[1:]
    columns = "phase,source," + rest.splitlines()[0]
    ms_rows = [r for r in rows if r.startswith("MS,parsec,")]

    def table(*body: str, head: str = header) -> str:
        return head + "\n".join([columns, *body]) + "\n"

    assert "MS" in read_envelope_table(table(*ms_rows), "t")[0]
    lo_hi_swapped = ms_rows[0].split(",")
    lo_hi_swapped[4], lo_hi_swapped[5] = lo_hi_swapped[5], lo_hi_swapped[4]
    cases = {
        "minimum exceeds": table(",".join(lo_hi_swapped), *ms_rows[1:]),
        "contiguous": table(ms_rows[0], *ms_rows[2:]),
        "unknown phase": table(ms_rows[0].replace("MS,", "XX,", 1)),
        "source must be": table(ms_rows[0].replace(",parsec,", ",guess,", 1)),
        "must not have rows": table(ms_rows[0].replace("MS,", "BSS,", 1)),
        "either empty": table(ms_rows[0].rsplit(",", 3)[0] + ",,1.0,3"),
        "lacks reference": table(*ms_rows, head=header.replace("# reference:", "# ref:")),
        "no '# range": table(*ms_rows, head=header.replace("# range MS parsec", "# x")),
    }
    for message, bad in cases.items():
        with pytest.raises(ValueError, match=message.split()[-1]):
            read_envelope_table(bad, "bad.csv")


def test_table_reads_once() -> None:
    assert envelopes._table() is envelopes._table()
    assert envelopes._lookups() is envelopes._lookups()


# =========================================================================================
# Against the PARSEC v1.2S grid (skipped without h5py and lachesis-grids)
# =========================================================================================


@pytest.fixture(scope="module")
def grid() -> pd.DataFrame:
    """Every classified PARSEC point no older than the Universe (the envelopes' points)."""
    pytest.importorskip("h5py", reason="h5py is needed to read the PARSEC grid")
    pytest.importorskip("lachesis_grids", reason="the lachesis-grids package (PARSEC v1.2S "
                        "isochrones) is not installed; pip install catcheck[test]")
    from parsec_data import load_parsec_isochrones

    frame = load_parsec_isochrones()
    frame.attrs.clear()
    return frame


@pytest.fixture(scope="module")
def points(grid: pd.DataFrame) -> pd.DataFrame:
    keep = (grid["log_age"] <= math.log10(AGE_OF_UNIVERSE.value)) & grid["phase"].notna()
    return grid.loc[keep].reset_index(drop=True)


def outside_envelope(frame: pd.DataFrame, phase: str) -> pd.DataFrame:
    """Per point, by how much (dex) it lies outside ``phase``'s envelope (<= 0: inside)."""
    b = envelope_bounds(codes(phase, len(frame)), frame["log_teff"].to_numpy())
    result = {}
    for name, lo, hi in (("log_g", b.logg_min, b.logg_max), ("log_l", b.logl_min, b.logl_max),
                         ("log_r", b.log_r_min, b.log_r_max)):
        value = frame[name].to_numpy()
        result[name] = np.fmax(lo - value, value - hi)
    result["outside_range"] = b.outside_range
    return pd.DataFrame(result)


def test_every_model_point_lies_inside_its_own_phase_envelope(points: pd.DataFrame) -> None:
    """The union by construction, checked through the public lookup (neighbour rule too)."""
    selections = {phase: points["phase"] == phase for phase in PARSEC_PHASES}
    clump = (points["phase"] == "CHEB") & (points["initial_mass"] < CLUMP_MAX_INITIAL_MASS)
    selections.update({phase: clump for phase in CLUMP_PHASES})
    assert sum(selections[p].sum() for p in PARSEC_PHASES) == len(points) > 500_000
    for phase, chosen in selections.items():
        distance = outside_envelope(points.loc[chosen], phase)
        assert not distance["outside_range"].any(), phase
        for name in ("log_g", "log_l", "log_r"):
            assert (distance[name] <= 0).all(), f"{phase} point outside in {name}"
    # log g spans of each phase's envelope reach the model extremes exactly
    for phase in PARSEC_PHASES:
        (model,) = [r for r in phase_envelope(phase).ranges if r.source == "parsec"]
        chosen = points.loc[selections[phase]]
        assert model.n_points == len(chosen)
        assert model.log_g[0] <= chosen["log_g"].min() < model.log_g[0] + 1e-4
        assert model.log_l[1] - 1e-4 < chosen["log_l"].max() <= model.log_l[1]


def separation(points: pd.DataFrame, true_phase: str, claimed: str, max_teff: float,
               quantity: str, side: str) -> dict[str, float]:
    """How well ``true_phase`` points cooler than ``max_teff``, relabelled ``claimed``, fall
    outside ``claimed``'s envelope: ``side`` fraction (``quantity`` on ``side`` of it, of
    all points), ``side_in_range`` (the same among points inside the claimed phase's Teff
    range), ``caught`` (outside by any measure, Teff range included) and ``margin`` (the
    smallest distance, dex, of the points outside on ``side``).  Printed (pytest -s)."""
    chosen = points.loc[(points["phase"] == true_phase)
                        & (points["log_teff"] < math.log10(max_teff))]
    distance = outside_envelope(chosen, claimed)
    b = envelope_bounds(codes(claimed, len(chosen)), chosen["log_teff"].to_numpy())
    value = chosen[quantity].to_numpy()
    low, high = {"log_g": (b.logg_min, b.logg_max), "log_l": (b.logl_min, b.logl_max)}[quantity]
    gap = low - value if side == "below" else value - high
    beyond = gap > 0
    in_range = ~b.outside_range
    result = {
        "side": float(beyond.mean()),
        "side_in_range": float(beyond[in_range].mean()),
        "caught": float((distance["outside_range"]
                         | (distance[["log_g", "log_l", "log_r"]] > 0).any(axis=1)).mean()),
        "margin": float(np.min(gap[beyond])),
    }
    print(f"\n{true_phase} points < {max_teff:.0f} K labelled {claimed}: {len(chosen)} points; "
          f"{result['side']:.2%} with {quantity} {side} the envelope "
          f"({result['side_in_range']:.2%} of those inside its Teff range; "
          f"smallest margin {result['margin']:.2f} dex); "
          f"{result['caught']:.2%} outside by any measure, "
          f"{1.0 - float(in_range.mean()):.2%} outside the Teff range")
    return result


def test_red_giants_labelled_main_sequence_are_outside(points: pd.DataFrame) -> None:
    for true_phase in ("RGB", "CHEB"):
        found = separation(points, true_phase, "MS", 5000.0, "log_g", "below")
        assert found["side"] >= REQUIRED_SEPARATION
        assert found["margin"] > 0.5  # a rule may pad by 0.5 dex and still catch them all


def test_main_sequence_stars_labelled_red_giants_are_outside(points: pd.DataFrame) -> None:
    """By log g where the RGB reaches their Teff; the coolest M dwarfs are cooler than any
    red giant (outside the RGB's Teff range)."""
    found = separation(points, "MS", "RGB", 6000.0, "log_g", "above")
    assert found["side_in_range"] >= REQUIRED_SEPARATION
    assert found["caught"] >= REQUIRED_SEPARATION
    assert found["margin"] > 0.5


def test_main_sequence_stars_far_above_the_band_are_outside(points: pd.DataFrame) -> None:
    """MS points moved up: log L + 2 dex or log g - 1.5 dex leaves the MS envelope; smaller
    shifts are caught less often because the union over [M/H] and age is wide (printed)."""
    ms = points.loc[points["phase"] == "MS"]
    b = envelope_bounds(codes("MS", len(ms)), ms["log_teff"].to_numpy())
    log_l, log_g = ms["log_l"].to_numpy(), ms["log_g"].to_numpy()
    above = {shift: float(np.mean(log_l + shift > b.logl_max)) for shift in (1.0, 1.5, 2.0)}
    below = {shift: float(np.mean(log_g - shift < b.logg_min)) for shift in (0.5, 1.0, 1.5)}
    print("\nMS points with log L raised by " + ", ".join(
        f"{k} dex: {v:.1%}" for k, v in above.items()) + " outside; log g lowered by "
        + ", ".join(f"{k} dex: {v:.1%}" for k, v in below.items()))
    assert above[2.0] >= REQUIRED_SEPARATION and below[1.5] >= REQUIRED_SEPARATION


def test_giants_and_dwarfs_labelled_white_dwarfs_are_outside(points: pd.DataFrame) -> None:
    for phase in PARSEC_PHASES:
        distance = outside_envelope(points.loc[points["phase"] == phase], "WD")
        caught = distance["outside_range"] | (distance["log_g"] > 0)
        assert caught.all(), phase


def test_low_mass_main_sequence_points_with_label_zero_sit_on_the_ms_edge(
        grid: pd.DataFrame) -> None:
    """PARSEC keeps label 0 on low-mass stars for a while after the ZAMS (EEP 202); the
    loader leaves them unclassified, so the MS envelope's ZAMS edge is drawn by points a
    little past it.  They lie within 0.02 dex of the envelope: a rule's padding covers it."""
    zams = grid.loc[(grid["phase_label"] == 0) & (grid["eep"] >= 202) & (grid["eep"] < 454)
                    & (grid["initial_mass"] < 2.0)
                    & (grid["log_age"] <= math.log10(AGE_OF_UNIVERSE.value))]
    distance = outside_envelope(zams, "MS")
    assert not distance["outside_range"].any()
    assert (distance[["log_g", "log_l", "log_r"]] < 0.02).all().all()


# -- PHYSICS.md section 5: solar-metallicity PARSEC v1.2S extremes (min, max) ----------------
#: Computed for the project's physics reference from the same PARSEC v1.2S grid (Bressan et
#: al. 2012) at [M/H] = 0, printed to 0.01 dex and 1 K.  Its rows take every age of the grid
#: (to 17.8 Gyr), masses by initial mass, and its MS row includes the points labelled 0
#: past EEP 202 (massive stars in core hydrogen burning), which the loader leaves out.
SECTION5: dict[str, dict[str, tuple[float, float]]] = {
    "MS": {"log_g": (2.20, 5.22), "teff": (2308, 64076), "log_r": (-0.91, 1.96),
           "log_l": (-3.42, 6.81)},
    "SGB": {"log_g": (1.00, 4.16), "teff": (4246, 21553), "log_r": (0.11, 2.22),
            "log_l": (0.13, 4.20)},
    "RGB": {"log_g": (-0.15, 3.70), "teff": (3023, 5140), "log_r": (0.34, 2.61),
            "log_l": (0.37, 4.43)},
    "RC": {"log_g": (1.79, 2.93), "teff": (4309, 5015), "log_r": (0.90, 1.49),
           "log_l": (1.54, 2.46)},
    "CHEB": {"log_g": (-0.04, 2.93), "teff": (3605, 10055), "log_r": (0.90, 2.81),
             "log_l": (1.54, 4.80)},
    "PMS": {"log_g": (2.61, 5.16), "teff": (2366, 29656), "log_r": (-0.88, 1.33),
            "log_l": (-3.32, 4.12)},
}
#: their mass cuts on initial mass (Msun): SGB and RGB <= 10, the clump < 2.2
SECTION5_MASS = {"SGB": (None, 10.0), "RGB": (None, 10.0), "RC": (CLUMP_MAX_INITIAL_MASS, None)}


def section5_points(grid: pd.DataFrame, phase: str) -> pd.DataFrame:
    solar = grid.loc[grid["feh"] == 0.0]
    parsec_phase = "CHEB" if phase == "RC" else phase
    chosen = solar["phase"] == parsec_phase
    if phase == "MS":
        chosen |= (solar["phase_label"] == 0) & (solar["eep"] >= 202)
    below, at_most = SECTION5_MASS.get(phase, (None, None))
    if below is not None:
        chosen &= solar["initial_mass"] < below
    if at_most is not None:
        chosen &= solar["initial_mass"] <= at_most
    return solar.loc[chosen]


def extremes(frame: pd.DataFrame) -> dict[str, tuple[float, float]]:
    result = {name: (float(frame[name].min()), float(frame[name].max()))
              for name in ("log_g", "log_r", "log_l")}
    result["teff"] = (float(10 ** frame["log_teff"].min()), float(10 ** frame["log_teff"].max()))
    return result


def test_section5_extremes_are_reproduced_from_the_grid(grid: pd.DataFrame) -> None:
    """Comparison with the tabulated values: our reading of their definitions is right."""
    for phase, printed in SECTION5.items():
        if phase == "PMS":
            continue  # its "physical" PMS rule is not written down; see the next test
        found = extremes(section5_points(grid, phase))
        for name, pair in printed.items():
            tolerance = 1.0 if name == "teff" else 0.005 + 1e-6
            assert found[name] == pytest.approx(pair, abs=tolerance), (phase, name)


#: where the shipped envelopes need not hold the tabulated extremes, and why
SECTION5_DIFFERENCES = {
    # the massive stars labelled 0 through core hydrogen burning are not MS for the loader
    ("MS", "log_g", 0): "beyond", ("MS", "teff", 1): "beyond", ("MS", "log_r", 1): "beyond",
    ("MS", "log_l", 1): "beyond",
    # a different PMS rule ("physical", not written down): the hot end differs a little
    ("PMS", "teff", 1): "close", ("PMS", "log_l", 1): "close",
    # the faintest red giants are older than the Universe (0.87 Msun at 17.8 Gyr)
    ("RGB", "log_l", 0): "close",
}


def test_union_envelopes_bracket_section5() -> None:
    """The shipped envelopes (union over [M/H] and age) hold the solar extremes, except where
    the definitions differ (:data:`SECTION5_DIFFERENCES`): there the tabulated value lies
    beyond the envelope (MS) or within 0.03 dex of it (PMS, RGB)."""
    for phase, printed in SECTION5.items():
        (model,) = [r for r in phase_envelope(phase).ranges if r.source == "parsec"]
        shipped = {"log_g": model.log_g, "log_r": model.log_r, "log_l": model.log_l,
                   "teff": model.log_teff}
        for name, pair in printed.items():
            for end, value in enumerate(pair):
                if name == "teff":  # compare in dex; the table prints whole kelvin
                    value, half_step = math.log10(value), 0.5 / value / math.log(10.0)
                else:
                    half_step = 0.005
                edge = shipped[name][end]
                held = edge <= value + half_step if end == 0 else edge >= value - half_step
                difference = SECTION5_DIFFERENCES.get((phase, name, end))
                if difference is None:
                    assert held, (phase, name, end, edge, value)
                elif difference == "beyond":
                    assert not held, (phase, name, end, edge, value)
                else:
                    assert abs(edge - value) < 0.03, (phase, name, end, edge, value)


def test_memory_boxes_hold_the_models_they_were_widened_to(points: pd.DataFrame) -> None:
    """RSG and BSG boxes hold PARSEC's massive (>= 9 Msun) post-main-sequence points of
    their Teff range; the AGB box holds the last core-helium-burning points of tracks
    below 8 Msun (where the AGB begins) cooler than 5500 K."""
    massive = points.loc[points["phase"].isin(["SGB", "RGB", "CHEB"])
                         & (points["initial_mass"] >= 9.0)]
    teff = 10 ** massive["log_teff"]
    for phase, low, high in (("RSG", 0.0, 4500.0), ("BSG", 7500.0, 50000.0)):
        distance = outside_envelope(massive.loc[(teff >= low) & (teff <= high)], phase)
        assert not distance["outside_range"].any()
        assert (distance[["log_g", "log_l"]] <= 0).all().all(), phase
    ends = points.loc[points["eep"].isin([707, 1200]) & (points["initial_mass"] < 8.0)
                      & (points["log_teff"] < math.log10(5500.0))]
    assert len(ends) > 100
    distance = outside_envelope(ends, "AGB")
    assert not distance["outside_range"].any()
    assert (distance[["log_g", "log_l"]] <= 0).all().all()


@pytest.fixture(scope="module")
def script(grid: pd.DataFrame) -> Iterator[ModuleType]:
    spec = importlib.util.spec_from_file_location("derive_envelopes", SCRIPT)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules["derive_envelopes"] = module
    spec.loader.exec_module(module)
    yield module
    sys.modules.pop("derive_envelopes", None)


def test_shipped_table_and_document_are_what_the_script_derives(script: ModuleType) -> None:
    text, block = script.build(date="2000-01-01")
    assert script.without_date(text) == script.without_date(TABLE.read_text(encoding="utf-8"))
    document = DOCUMENT.read_text(encoding="utf-8")
    assert script.with_block(document, block) == document
