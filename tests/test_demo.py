"""Tests of the demo catalogue generator and the population physics behind it.

Published values are quoted with their source beside each check; "regression" checks pin
our own schematic choices and are kept apart from the comparisons with sources.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from catcheck import toml as tomllib
from catcheck.demo import (
    AGE_FAULT_FACTOR,
    CLEAN_ROWS,
    CLUSTER_DEPTH_PC,
    COLUMNS,
    COOL_TEFF_MAX,
    DWARF_LOGG_MIN,
    FAULT_FRACTION,
    FAULT_KINDS,
    FEH_SHIFT_DEX,
    FEH_SPREAD_DEX,
    GIANT_LOGG_MAX,
    GIANT_TOO_YOUNG_MIN_MASS,
    LABELS,
    NOISE_TRUNCATION_SIGMA,
    PHASE_OF_LABEL,
    WD_TOO_YOUNG_MYR,
    tally_faults,
    write_demo,
)
from catcheck.physics import evolution
from catcheck.physics import main_sequence as ms
from catcheck.physics import populations as pop
from catcheck.physics.envelopes import envelope_bounds
from catcheck.physics.spectral import parse_mk, teff_scale
from catcheck.physics.stellar import (
    LN10,
    log_luminosity_stefan_boltzmann,
    log_surface_gravity,
    sigma_log_stefan_boltzmann,
)
from catcheck.quantities import PHASE_CODES, PHASE_INDEX, QUANTITIES

C = COLUMNS
ROWS = 20_000
#: the age of the Universe in Myr: Planck 2018 results VI, A&A 641, A6
UNIVERSE_MYR = 13_787


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[pd.DataFrame, pd.DataFrame, Path]:
    files = write_demo(tmp_path_factory.mktemp("demo"), rows=ROWS, seed=1)
    return pd.read_parquet(files.catalogue), pd.read_parquet(files.truth), files.profile


def _clean(catalogue: pd.DataFrame, truth: pd.DataFrame) -> pd.DataFrame:
    return catalogue.loc[~catalogue.index.isin(truth["row"])]


def _planted(catalogue: pd.DataFrame, truth: pd.DataFrame, kind: str) -> pd.DataFrame:
    rows = catalogue.iloc[truth.loc[truth["fault"] == kind, "row"]]
    assert len(rows) > 20, kind
    return rows


def _lifetime_myr(rows: pd.DataFrame) -> pd.Series:
    """PARSEC main-sequence lifetime (Myr) of the catalogued mass and [Fe/H]."""
    return 10.0 ** (evolution.log_main_sequence_lifetime(rows[C.mass], rows[C.feh]) - 6.0)


def _cluster_median(catalogue: pd.DataFrame, truth: pd.DataFrame, column: str) -> pd.Series:
    """Per row, the median of ``column`` over the clean members of the row's cluster."""
    medians = _clean(catalogue, truth).groupby(C.cluster)[column].median()
    return catalogue[C.cluster].map(medians)


def _sb_sigmas(df: pd.DataFrame) -> pd.Series:
    """Stefan-Boltzmann residual of each row in combined sigma (catcheck.physics.stellar)."""
    lum = 10.0 ** df[C.log_lum]
    sigma = sigma_log_stefan_boltzmann(lum, lum * LN10 * df[C.log_lum_err], df[C.radius],
                                       df[C.radius_err], df[C.teff], df[C.teff_err])
    return (df[C.log_lum] - log_luminosity_stefan_boltzmann(df[C.radius], df[C.teff])) / sigma


# --- files, determinism, truth table ------------------------------------------------------


def test_same_seed_gives_same_bytes(tmp_path: Path) -> None:
    a = write_demo(tmp_path / "a", rows=3000, seed=7)
    b = write_demo(tmp_path / "b", rows=3000, seed=7)
    c = write_demo(tmp_path / "c", rows=3000, seed=8)
    for name in ("catalogue", "truth", "profile"):
        assert getattr(a, name).read_bytes() == getattr(b, name).read_bytes(), name
    assert a.catalogue.read_bytes() != c.catalogue.read_bytes()


def test_chunks_are_row_groups_and_leave_no_temporary_files(tmp_path: Path) -> None:
    files = write_demo(tmp_path, rows=2500, seed=3, chunk_rows=1000)
    meta = pq.ParquetFile(files.catalogue).metadata
    assert meta.num_rows == 2500
    assert [meta.row_group(i).num_rows for i in range(meta.num_row_groups)] == [1000, 1000, 500]
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "catalogue.parquet", "profile.toml", "truth.parquet"]
    catalogue = pd.read_parquet(files.catalogue)
    truth = pd.read_parquet(files.truth)
    assert catalogue[C.id].is_unique
    assert (catalogue[C.id].to_numpy()[truth["row"]] == truth["id"].to_numpy()).all()
    again = write_demo(tmp_path / "again", rows=2500, seed=3, chunk_rows=1000)
    assert again.catalogue.read_bytes() == files.catalogue.read_bytes()


def test_truth_table_matches_catalogue(demo: tuple[pd.DataFrame, pd.DataFrame, Path]) -> None:
    catalogue, truth, _ = demo
    assert list(truth.columns) == ["row", "id", "fault"]
    assert str(truth["row"].dtype) == "int64"
    assert truth["row"].is_unique and truth["row"].is_monotonic_increasing
    assert truth["row"].between(0, len(catalogue) - 1).all()
    assert (catalogue[C.id].to_numpy()[truth["row"]] == truth["id"].to_numpy()).all()
    # every kind gets its equal share of the rows: at least 0.2% each, 2-3% in all
    share = round(ROWS * FAULT_FRACTION / len(FAULT_KINDS))
    assert share >= 0.002 * ROWS
    assert truth["fault"].value_counts().to_dict() == dict.fromkeys(FAULT_KINDS, share)
    assert 0.02 <= len(truth) / len(catalogue) <= 0.03


def test_catalogue_shape(demo: tuple[pd.DataFrame, pd.DataFrame, Path]) -> None:
    catalogue, truth, _ = demo
    assert len(catalogue) == ROWS
    assert catalogue[C.id].is_unique
    assert catalogue[C.cluster].str.fullmatch(r"C-\d{3,}").all()
    # every member of a cluster shares its age, except rows with a planted age
    clean = _clean(catalogue, truth)
    assert (clean.groupby(C.cluster)[C.age].nunique() == 1).all()
    # a realistic share of missing values, value and error together
    assert 0.03 < catalogue[C.radius].isna().mean() < 0.07
    assert 0.015 < catalogue[C.mass].isna().mean() < 0.045
    assert (catalogue[C.radius].isna() == catalogue[C.radius_err].isna()).all()


def test_population_mixture(demo: tuple[pd.DataFrame, pd.DataFrame, Path]) -> None:
    share = demo[0][C.evol_class].value_counts(normalize=True)
    giants = share.reindex(["subgiant", "giant", "clump", "core-he giant", "agb",
                            "supergiant"]).fillna(0).sum()
    assert share["dwarf"] > 0.6
    assert 0.01 < giants < 0.1
    assert 0.002 < share["white dwarf"] < 0.02
    assert 0.0 < share.get("pre-ms", 0.0) < 0.3


# --- the physics holds for clean rows and breaks for planted faults -----------------------


def test_clean_rows_obey_stefan_boltzmann_within_5_sigma(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, truth, _ = demo
    z = _sb_sigmas(_clean(catalogue, truth)).dropna()
    assert len(z) > 0.85 * ROWS
    assert z.abs().max() < 5.0
    # the noise is Gaussian with the quoted errors: unit spread, no bias
    assert 0.95 < z.std() < 1.05
    assert abs(z.mean()) < 0.05


def test_clean_rows_obey_surface_gravity_within_5_sigma(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    df = _clean(*demo[:2])
    sigma = np.sqrt(df[C.log_g_err] ** 2 + (df[C.mass_err] / (df[C.mass] * LN10)) ** 2
                    + (2.0 * df[C.radius_err] / (df[C.radius] * LN10)) ** 2)
    z = ((df[C.log_g] - log_surface_gravity(df[C.mass], df[C.radius])) / sigma).dropna()
    assert z.abs().max() < 5.0
    assert 0.95 < z.std() < 1.05


@pytest.mark.parametrize("kind", ["luminosity_offset", "radius_inflated"])
def test_planted_luminosity_and_radius_faults_break_stefan_boltzmann(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path], kind: str,
) -> None:
    catalogue, truth, _ = demo
    z = _sb_sigmas(_planted(catalogue, truth, kind))
    assert z.notna().all()
    assert (z.abs() > 5.0).all()


def test_planted_limit_faults(demo: tuple[pd.DataFrame, pd.DataFrame, Path]) -> None:
    catalogue, truth, _ = demo
    teff = _planted(catalogue, truth, "impossible_teff")[C.teff]
    assert ((teff > 3e5) | (teff < 1000)).all()
    assert (_planted(catalogue, truth, "age_beyond_universe")[C.age] >= 20_000).all()  # Myr
    mass = _planted(catalogue, truth, "impossible_mass")[C.mass]
    assert ((mass > 500) | (mass < 0)).all()
    clean = _clean(catalogue, truth)
    assert clean[C.teff].dropna().between(2000, 60_000).all()
    assert (clean[C.age] < UNIVERSE_MYR).all()


def test_planted_age_faults_set_the_age_they_say(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, truth, _ = demo
    old = _planted(catalogue, truth, "ms_too_old")
    assert (old[C.evol_class] == LABELS[pop.Stage.MS]).all()
    assert np.allclose(old[C.age], AGE_FAULT_FACTOR * _lifetime_myr(old), rtol=1e-3, atol=0.05)
    assert (old[C.age] < UNIVERSE_MYR).all()

    young = _planted(catalogue, truth, "giant_too_young")
    giants = {LABELS[s] for s in (pop.Stage.RGB, pop.Stage.CLUMP, pop.Stage.CHEB)}
    assert young[C.evol_class].isin(giants).all()
    assert (young[C.mass] >= GIANT_TOO_YOUNG_MIN_MASS).all()
    assert np.allclose(young[C.age], _lifetime_myr(young) / AGE_FAULT_FACTOR, rtol=1e-3,
                       atol=0.05)

    wd = _planted(catalogue, truth, "wd_too_young")
    assert (wd[C.evol_class] == LABELS[pop.Stage.WD]).all()
    assert (wd[C.age] == WD_TOO_YOUNG_MYR).all()


def _luminosity_class(sp_type: pd.Series) -> pd.Series:
    return sp_type.dropna().map(lambda text: parse_mk(text).luminosity_class)


def test_planted_label_faults_change_only_the_label(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, truth, _ = demo
    giants = _planted(catalogue, truth, "ms_label_on_giant")
    assert (giants[C.evol_class] == LABELS[pop.Stage.MS]).all()
    assert (giants[C.log_g] <= GIANT_LOGG_MAX).all() and (giants[C.teff] < COOL_TEFF_MAX).all()
    # the spectral type still says what the star is (class I-IV), only the label changed
    assert (_luminosity_class(giants[C.sp_type]) < 5).all()

    dwarfs = _planted(catalogue, truth, "giant_label_on_dwarf")
    assert (dwarfs[C.evol_class] == LABELS[pop.Stage.RGB]).all()
    assert (dwarfs[C.log_g] >= DWARF_LOGG_MIN).all() and (dwarfs[C.teff] < COOL_TEFF_MAX).all()
    assert (_luminosity_class(dwarfs[C.sp_type]) == 5).all()
    # one per cluster, so false giants never outnumber a cluster's real ones
    assert dwarfs[C.cluster].is_unique


def test_planted_cluster_faults_move_members_off_their_cluster(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, truth, _ = demo
    rows = _planted(catalogue, truth, "parallax_outlier")
    ratio = rows[C.parallax] / _cluster_median(catalogue, truth, C.parallax)[rows.index]
    # twice or half the cluster's parallax, to the precision of the median (~1%)
    near = np.minimum(np.abs(np.log(ratio / 2.0)), np.abs(np.log(ratio / 0.5)))
    assert (near < 0.03).all()
    assert ((ratio > 1.5).sum() > 0) and ((ratio < 0.7).sum() > 0)

    rows = _planted(catalogue, truth, "metallicity_outlier")
    shift = (rows[C.feh] - _cluster_median(catalogue, truth, C.feh)[rows.index]).abs()
    noise = NOISE_TRUNCATION_SIGMA * rows[C.feh_err] + FEH_SPREAD_DEX
    assert (shift >= FEH_SHIFT_DEX[0] - 0.02).all()
    assert (shift <= FEH_SHIFT_DEX[1] + noise + 0.02).all()


def test_planted_faults_of_one_quantity_leave_the_others_consistent(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, truth, _ = demo
    kinds = ["ms_too_old", "giant_too_young", "wd_too_young", "ms_label_on_giant",
             "giant_label_on_dwarf", "parallax_outlier", "metallicity_outlier"]
    rows = catalogue.iloc[truth.loc[truth["fault"].isin(kinds), "row"]]
    z = _sb_sigmas(rows).dropna()
    assert len(z) > 200 and (z.abs() < 5.0).all()


def test_clean_members_agree_with_their_cluster(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, truth, _ = demo
    clean = _clean(catalogue, truth)
    # parallaxes: the cluster's depth (<= 20 pc) plus the quoted error
    centre = _cluster_median(catalogue, truth, C.parallax)[clean.index]
    depth = centre**2 * 0.5 * CLUSTER_DEPTH_PC / 1000.0
    allowed = NOISE_TRUNCATION_SIGMA * clean[C.parallax_err] + depth + 0.02 * centre
    assert ((clean[C.parallax] - centre).abs() <= allowed)[clean[C.parallax].notna()].all()
    # [Fe/H]: a spread of <= 0.03 dex plus the quoted error
    centre = _cluster_median(catalogue, truth, C.feh)[clean.index]
    allowed = NOISE_TRUNCATION_SIGMA * clean[C.feh_err] + 2.0 * FEH_SPREAD_DEX
    assert ((clean[C.feh] - centre).abs() <= allowed)[clean[C.feh].notna()].all()
    assert (clean[C.feh].isna() == clean[C.feh_err].isna()).all()


# --- profile ------------------------------------------------------------------------------


def test_profile_maps_every_column_and_label(
    demo: tuple[pd.DataFrame, pd.DataFrame, Path],
) -> None:
    catalogue, _, profile_path = demo
    profile = tomllib.loads(profile_path.read_text(encoding="utf-8"))
    assert profile["id"] in catalogue.columns and profile["group"] in catalogue.columns
    for quantity, spec in profile["quantities"].items():
        assert quantity in QUANTITIES
        assert spec["column"] in catalogue.columns
        if "error" in spec:
            assert spec["error"] in catalogue.columns
    units = {spec.get("unit") for spec in profile["quantities"].values()}
    assert {"Myr", "dex(Lsun)"} <= units  # conversions are exercised
    phases = profile["phases"]
    used = set(catalogue[C.evol_class].dropna())
    assert used <= set(phases)
    assert set(phases.values()) <= set(PHASE_CODES)
    assert set(phases) == set(LABELS.values()) == set(PHASE_OF_LABEL)


# --- tally -------------------------------------------------------------------------------


def test_tally_faults_counts_found_missed_and_false_positives() -> None:
    truth = pd.DataFrame({"row": [1, 2, 5], "id": ["a", "b", "e"],
                          "fault": ["luminosity_offset", "luminosity_offset", "impossible_mass"]})
    flags = pd.DataFrame({
        "row": [1, 1, 5, 7, 8, 2],
        "id": ["a", "a", "e", "g", "h", "b"],
        "rule": ["stefan-boltzmann", "logg", "mass-range", "stefan-boltzmann", "x", "info-rule"],
        "severity": ["error", "warning", "error", "error", "error", "info"],
    })
    tally = tally_faults(truth, flags, rows=10).set_index("fault")
    assert list(tally.index) == [*FAULT_KINDS, CLEAN_ROWS]
    assert tally.loc["luminosity_offset"].tolist() == [2, 1, 1, "logg,stefan-boltzmann"]
    assert tally.loc["impossible_mass"].tolist() == [1, 1, 0, "mass-range"]
    assert tally.loc["radius_inflated"].tolist() == [0, 0, 0, ""]
    assert tally.loc[CLEAN_ROWS].tolist() == [7, 2, 5, "stefan-boltzmann,x"]
    assert tally["planted"].dtype == np.int64


def test_bad_arguments_are_refused(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="rows"):
        write_demo(tmp_path, rows=0)
    with pytest.raises(ValueError, match="seed"):
        write_demo(tmp_path, rows=10, seed=-1)


# --- population physics against published values -----------------------------------------


def test_imf_sampler_recovers_kroupa_2001_exponents() -> None:
    # Kroupa 2001, MNRAS 322, 231, eq. (2): alpha_1 = 1.3 (0.08-0.5 Msun), alpha_2 = 2.3 (> 0.5)
    u = np.random.default_rng(2001).random(400_000)
    mass = pop.kroupa_imf_inverse_cdf(u, 0.1, 20.0)
    assert mass.min() >= 0.1 and mass.max() <= 20.0
    for lo, hi, alpha in ((0.1, 0.5, 1.3), (0.5, 20.0, 2.3)):
        edges = np.geomspace(lo, hi, 16)
        counts, _ = np.histogram(mass, bins=edges)
        # equal log bins: N per bin ~ m_lo^(1 - alpha) exactly for a power law
        slope = np.polyfit(np.log10(edges[:-1]), np.log10(counts), 1, w=np.sqrt(counts))[0]
        assert 1.0 - slope == pytest.approx(alpha, abs=0.05)
    # the CDF inverts the sampler
    assert np.allclose(pop.kroupa_imf_cdf(mass[:1000], 0.1, 20.0), u[:1000], atol=1e-9)


def test_stages_follow_the_timescales_the_rules_use() -> None:
    # catcheck.physics.evolution (PARSEC v1.2S) sets when stars arrive on and leave the MS
    mass = np.array([0.3, 1.0, 1.7, 3.0, 6.0, 12.0])
    for feh in (-0.8, 0.0, 0.4):
        t_ms = 10.0 ** evolution.log_main_sequence_lifetime(mass, feh)
        t_pms = 10.0 ** evolution.log_pre_main_sequence_time(mass, feh)
        assert (pop.evolutionary_stage(mass, 0.99 * t_ms, feh) == pop.Stage.MS).all()
        assert (pop.evolutionary_stage(mass, 1.01 * t_ms, feh) != pop.Stage.MS).all()
        assert (pop.evolutionary_stage(mass, 0.99 * t_pms, feh) == pop.Stage.PMS).all()
        assert (pop.evolutionary_stage(mass, 1.01 * t_pms, feh) == pop.Stage.MS).all()
    # where the isochrones leave a gap (0.1 Msun, [M/H] > 0), the solar value stands in
    assert np.isnan(evolution.log_pre_main_sequence_time(0.1, 0.3))
    assert pop.log_contraction_time(0.1, 0.3) == evolution.log_pre_main_sequence_time(0.1, 0.0)


def test_eker_2018_main_sequence_and_the_sun() -> None:
    # Eker et al. 2018, Table 4: the six published pieces are fitted separately and meet
    # only to within 0.08 dex at their break masses (0.45, 0.72, 1.05, 2.4, 7 Msun)
    for edge, *_ in ms.EKER_2018_MLR[:-1]:
        below, above = ms.eker2018_log_luminosity([edge * (1 - 1e-9), edge * (1 + 1e-9)])
        assert above == pytest.approx(below, abs=0.09)
    # the Sun at 4.57 Gyr lands on the IAU 2015 nominal L, R and Teff within 2%
    fraction = 4.57e9 / 10.0 ** pop.log_main_sequence_lifetime(1.0, 0.0)
    sun = pop.main_sequence_star(1.0, fraction)
    assert 10.0**sun.log_luminosity == pytest.approx(1.0, rel=0.02)
    assert sun.radius == pytest.approx(1.0, rel=0.02)
    assert sun.teff == pytest.approx(5772.0, rel=0.02)


def test_stellar_properties_are_self_consistent() -> None:
    rng = np.random.default_rng(5)
    n = 50_000
    mass = pop.kroupa_imf_inverse_cdf(rng.random(n), 0.1, 20.0)
    age = 10.0 ** rng.uniform(7.0, np.log10(6e9), n)
    stage, star = pop.stellar_properties(mass, age, rng.normal(-0.1, 0.15, n),
                                         rng.random(n), rng.random(n))
    ok = stage != pop.Stage.REMNANT
    assert np.allclose(star.log_luminosity[ok],
                       log_luminosity_stefan_boltzmann(star.radius[ok], star.teff[ok]),
                       atol=1e-9)
    assert (star.mass[ok] > 0).all() and (star.mass[ok] <= mass[ok]).all()
    assert set(np.unique(stage)) >= {pop.Stage.MS, pop.Stage.RGB, pop.Stage.WD}
    # PARSEC envelopes (PHYSICS.md section 5, computed from Bressan et al. 2012)
    logg = log_surface_gravity(star.mass, star.radius)
    rgb = stage == pop.Stage.RGB
    assert star.teff[rgb].min() >= 3023 and star.teff[rgb].max() <= 5140
    assert logg[rgb].min() >= -0.15 and logg[rgb].max() <= 3.70
    clump = stage == pop.Stage.CLUMP
    assert star.teff[clump].min() >= 4309 and star.teff[clump].max() <= 5015
    assert logg[clump].min() >= 1.79 and logg[clump].max() <= 2.93
    ms = stage == pop.Stage.MS
    assert logg[ms].min() >= 2.20 and logg[ms].max() <= 5.24  # 5.22 at 0.09 Msun, extrapolated
    wd = stage == pop.Stage.WD
    assert star.teff[wd].min() >= 5000 and star.teff[wd].max() <= 40000 * (1 + 1e-12)
    assert logg[wd].min() >= 7.0 and logg[wd].max() <= 9.5  # from memory, PHYSICS.md sec. 3
    assert (star.mass[wd] >= 0.5).all() and (star.mass[wd] <= 0.9).all()
    # no white dwarfs before the most massive progenitor (8 Msun) has died (PARSEC)
    assert age[wd].min() > evolution.youngest_white_dwarf_age(0.0)


def test_noise_free_stars_lie_inside_the_parsec_phase_envelopes() -> None:
    # envelopes of catcheck.physics.envelopes (PARSEC v1.2S, Bressan et al. 2012, and boxes
    # from memory), within 0.07 dex (the phase-envelope rule pads them by 0.1 dex)
    rng = np.random.default_rng(8)
    n = 200_000
    mass = 10.0 ** rng.uniform(np.log10(0.15), np.log10(20.0), n)
    age = 10.0 ** rng.uniform(7.0, np.log10(6e9), n)
    stage, star = pop.stellar_properties(mass, age, rng.uniform(-0.8, 0.4, n),
                                         rng.random(n), rng.random(n))
    ok = stage != pop.Stage.REMNANT
    code = np.array([PHASE_INDEX[PHASE_OF_LABEL[LABELS[pop.Stage(s)]]]
                     for s in range(pop.Stage.REMNANT)])[stage[ok]]
    bounds = envelope_bounds(code, np.log10(star.teff[ok]))
    logg = log_surface_gravity(star.mass[ok], star.radius[ok])
    log_l = star.log_luminosity[ok]
    assert bounds.covered.all() and not bounds.outside_range.any()
    assert (logg >= bounds.logg_min - 0.07).all() and (logg <= bounds.logg_max + 0.07).all()
    assert (log_l >= bounds.logl_min - 0.07).all() and (log_l <= bounds.logl_max + 0.07).all()
    assert set(np.unique(stage[ok])) == set(range(pop.Stage.REMNANT))


def test_main_sequence_stays_inside_the_mass_luminosity_band() -> None:
    # ZAMS to TAMS within the Eker et al. (2018) relation -0.2 .. +0.4 dex: the
    # ms-mass-luminosity rule allows -0.3 .. +0.5 dex (PHYSICS.md section 2: stars brighten
    # by up to ~0.3-0.5 dex on the main sequence)
    mass = np.geomspace(0.2, 20.0, 200)[:, None]
    star = pop.main_sequence_star(mass, np.linspace(0.0, 1.0, 21)[None, :])
    offset = star.log_luminosity - ms.eker2018_log_luminosity(mass)
    assert offset.min() > -0.2 and offset.max() < 0.4


def test_main_sequence_ends_where_parsec_puts_them() -> None:
    # PARSEC v1.2S isochrones at [M/H] = 0 (Bressan et al. 2012; lachesis-grids file
    # parsec_v1.25.h5): log L and log R of the ZAMS (EEP 202) and of the end of the main
    # sequence (EEP 454, where PARSEC's label turns from MS to SGB), at the nodes of
    # MS_EVOLUTION_LOG_MASS above 1 Msun, which were computed from them
    pytest.importorskip("h5py")
    parsec_data = pytest.importorskip("parsec_data")
    try:
        grid = parsec_data.read_parsec_grid(str(parsec_data.parsec_grid_path()))
    except (ModuleNotFoundError, FileNotFoundError) as missing:
        pytest.skip(str(missing))
    solar = grid.feh_index == int(np.flatnonzero(np.isclose(grid.feh_values, 0.0))[0])
    mass = 10.0 ** np.array(pop.MS_EVOLUTION_LOG_MASS[1:])
    for eep, fraction in ((parsec_data.ZAMS_EEP, 0.0), (454, 1.0)):
        at = solar & (grid.columns["eep"] == eep)
        order = np.argsort(grid.columns["initial_mass"][at])
        log_m = np.log10(grid.columns["initial_mass"][at][order])
        star = pop.main_sequence_star(mass, fraction)
        for ours, column in ((star.log_luminosity, "log_l"), (np.log10(star.radius), "log_r")):
            theirs = np.interp(np.log10(mass), log_m, grid.columns[column][at][order])
            assert np.abs(ours - theirs).max() < 0.02, (eep, column, ours - theirs)


def test_white_dwarf_relations() -> None:
    # Nauenberg 1972, ApJ 175, 417: 0.6 Msun -> R ~ 0.0125 Rsun, log g ~ 8.0 (from memory)
    radius = pop.white_dwarf_radius_nauenberg(0.6)
    assert radius == pytest.approx(0.0125, rel=0.03)
    assert log_surface_gravity(0.6, radius) == pytest.approx(8.0, abs=0.05)
    # Cummings et al. 2018 IFMR: continuous at its breaks, ~0.6 Msun from ~1.5 Msun (memory)
    for edge, *_ in pop.CUMMINGS_2018_IFMR[:-1]:
        below, above = pop.white_dwarf_mass_cummings2018([edge - 1e-9, edge + 1e-9])
        assert above == pytest.approx(below, abs=0.002)
    assert pop.white_dwarf_mass_cummings2018(1.5) == pytest.approx(0.61, abs=0.02)


def test_spectral_types_come_from_the_shipped_teff_scales() -> None:
    # each scale's own Teff gives back its type: the demo types stars on the scales the
    # spectral-type-teff rule checks them against (catcheck/data/mk_teff_*.csv)
    for lclass, name in pop.SCALE_OF_CLASS.items():
        scale = teff_scale(name)
        types = pop.mk_spectral_type(10.0 ** scale.log_teff, [lclass] * len(scale.index))
        assert [parse_mk(t).index for t in types] == pytest.approx(scale.index.tolist())
        assert all(t.endswith(lclass) for t in types)
    # Pecaut & Mamajek 2013 (G2V 5770 K, M0V 3850 K); giant scale K0III 4800 K (from memory)
    types = pop.mk_spectral_type([5772.0, 3850.0, 4800.0, 20000.0], ["V", "V", "III", "D"])
    assert types.tolist() == ["G2V", "M0V", "K0III", "DA2.5"]
