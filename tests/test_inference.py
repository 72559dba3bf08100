"""`catcheck profile`: proposing a profile for a table with unfamiliar names and units.

The acceptance tests map every quantity of the demo catalogue written out as FITS with
renamed columns, and of a table of PARSEC v1.2S model points (Bressan et al. 2012) with
PARSEC-style column names, with no wrong mapping.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from factory import sun_like

import catcheck
from catcheck.api import TableCatalogue
from catcheck.canonical import PhaseLabels
from catcheck.cli import main
from catcheck.demo import PHASE_OF_LABEL, write_demo
from catcheck.errors import ProfileError
from catcheck.formats import open_catalogue
from catcheck.inference import column_facts as facts_of
from catcheck.inference import (
    decide_unit,
    error_base,
    name_candidates,
    phase_code_of,
    propose_profile,
    read_name,
    read_unit,
    toml_string,
    ucd_target,
)
from catcheck.physics.stellar import absolute_bolometric_magnitude
from catcheck.profile import load_profile
from catcheck.quantities import PHASE_CODES
from catcheck.units import conversion_for


def field(name: str, values, unit: str | None = None, ucd: str | None = None) -> tuple:
    meta = {k: v for k, v in (("unit", unit), ("ucd", ucd)) if v}
    array = pa.array(values)
    return pa.field(name, array.type, metadata=meta or None), array


def table_of(*columns: tuple) -> pa.Table:
    return pa.Table.from_arrays([array for _, array in columns],
                                schema=pa.schema([f for f, _ in columns]))


def propose(table: pa.Table):
    return propose_profile(TableCatalogue(table, "test table"))


def loads(proposal, tmp_path: Path):
    path = tmp_path / "proposed.toml"
    path.write_text(proposal.to_toml())
    return load_profile(path)


# --- names, units, UCDs -------------------------------------------------------------------

@pytest.mark.parametrize(("name", "target"), [
    ("teff", "teff"), ("Teff", "teff"), ("T_eff", "teff"), ("TEFF", "teff"),
    ("logTe", "teff"), ("log_Teff", "teff"), ("temperature", "teff"),
    ("logg", "logg"), ("log_g", "logg"), ("grav", "logg"), ("LOGG", "logg"),
    ("lum", "luminosity"), ("logL", "luminosity"), ("L", "luminosity"),
    ("rad", "radius"), ("R", "radius"), ("radius", "radius"), ("logR", "radius"),
    ("mass", "mass"), ("M", "mass"), ("Mass", "mass"), ("star_mass", "mass"),
    ("Mini", "initial_mass"), ("M_ini", "initial_mass"), ("initial_mass", "initial_mass"),
    ("age", "age"), ("logAge", "age"), ("log_age", "age"), ("tau", "age"),
    ("cluster_age_myr", "age"),
    ("[Fe/H]", "feh"), ("feh", "feh"), ("FeH", "feh"), ("MH", "feh"), ("[M/H]", "feh"),
    ("metallicity", "feh"), ("fe_h", "feh"),
    ("plx", "parallax"), ("parallax", "parallax"), ("dist", "distance"),
    ("dist_pc", "distance"),
    ("phase", "phase"), ("evo", "phase"), ("stage", "phase"), ("label", "phase"),
    ("evol_class", "phase"),
    ("SpT", "spectral_type"), ("sptype", "spectral_type"), ("spectral_type", "spectral_type"),
    ("id", "id"), ("source_id", "id"), ("name", "id"), ("designation", "id"),
    ("locs_id", "id"), ("cluster", "group"), ("group", "group"), ("assoc", "group"),
    ("cluster_id", "group"),
])
def test_naming_variants(name, target) -> None:
    assert target in [t for t, _, _ in name_candidates(name)], name_candidates(name)


def test_names_that_are_not_quantities() -> None:
    for name in ("ra", "dec", "pmra", "Gmag", "BP_RP", "eep", "Zini", "vsini", "flag"):
        assert name_candidates(name) == [], name
    assert [t for t, _, _ in name_candidates("cluster_age_myr")] == ["age"]
    assert name_candidates("teff_flag") == name_candidates("distance_modulus") == []
    assert read_name("logTe").logged and read_name("logTe").stem == "te"
    assert read_name("age_myr").unit_family == "Myr"
    assert read_name("Teff_K").unit_family == "K"


@pytest.mark.parametrize(("name", "base"), [
    ("e_Teff", "teff"), ("eTeff", "teff"), ("err_Teff", "teff"), ("sigma_logg", "logg"),
    ("Teff_err", "teff"), ("Teff_error", "teff"), ("e_logL", "logl"), ("e_T_eff", "teff"),
    ("Teff", None), ("eep", None), ("error", None),
])
def test_error_names(name, base) -> None:
    assert error_base(name) == base


def test_units_and_ucds_as_files_write_them() -> None:
    cases = {"K": ("K", False), "kK": ("kK", False), "dex(K)": ("K", True),
             "[K]": ("K", True), "log(K)": ("K", True), "solLum": ("Lsun", False),
             "dex(solLum)": ("Lsun", True), "[solLum]": ("Lsun", True),
             "[cm/s2]": ("cm/s2", True), "dex(cm / s2)": ("cm/s2", True),
             "log(cm.s**-2)": ("cm/s2", True), "dex": (None, True), "Myr": ("Myr", False),
             "Gyr": ("Gyr", False), "[yr]": ("yr", True), "mas": ("mas", False),
             "solRad": ("Rsun", False), "km": ("km", False), "[Sun]": ("solar", True),
             "kpc": ("kpc", False), "furlong": ("?", False)}
    for text, (family, logged) in cases.items():
        reading = read_unit(text)
        assert (reading.family, reading.logged) == (family, logged), text
    assert read_unit("") is None and read_unit(None) is None
    assert ucd_target("phys.temperature.effective") == ("teff", False)
    assert ucd_target("stat.error;phys.temperature.effective") == ("teff", True)
    assert ucd_target("meta.id;meta.main") == ("id", False)
    assert ucd_target("pos.parallax.trig") == ("parallax", False)
    assert ucd_target("phot.mag;em.opt.V") == (None, False)


def test_kilokelvin_is_a_teff_unit() -> None:
    conversion = conversion_for("teff", "kK")
    np.testing.assert_allclose(conversion.values(np.array([5.772])), [5772.0])
    np.testing.assert_allclose(conversion.errors(np.array([5772.0]), np.array([0.08])), [80.0])


# --- values -------------------------------------------------------------------------------

def decide(quantity: str, values, name: str = "x", unit: str | None = None,
           clear_name: bool = False):
    column = pa.array(np.asarray(values, dtype=float))
    meta = {"unit": unit} if unit else None
    return decide_unit(quantity, facts_of(0, pa.field(name, pa.float64(), metadata=meta),
                                          column), clear_name=clear_name)


RNG = np.random.default_rng(7)
TEFF = RNG.uniform(3_300.0, 30_000.0, 2_000)
LUM = 10 ** RNG.uniform(-2.5, 4.0, 2_000)


@pytest.mark.parametrize(("quantity", "values", "unit"), [
    ("teff", TEFF, "K"),
    ("teff", np.log10(TEFF), "dex(K)"),
    ("teff", TEFF / 1e3, "kK"),
    ("luminosity", LUM, "Lsun"),
    ("luminosity", np.log10(LUM), "dex(Lsun)"),
    ("luminosity", LUM * 3.828e26, "W"),  # IAU 2015 nominal L_sun in W (common practice)
    ("radius", 10 ** RNG.uniform(-0.5, 2.0, 2_000) * 6.957e5, "km"),  # R_sun = 6.957e5 km
    ("radius", 10 ** RNG.uniform(-0.5, 2.0, 2_000), "Rsun"),
    ("age", 10 ** RNG.uniform(6.5, 10.1, 2_000), "yr"),
    ("age", RNG.uniform(6.5, 10.1, 2_000), "dex(yr)"),
    ("age", RNG.uniform(0.01, 13.0, 2_000), "Gyr"),
    ("age", RNG.uniform(10.0, 5_000.0, 2_000), "Myr"),
    ("mass", RNG.uniform(0.1, 2.5, 2_000), "Msun"),
    ("parallax", RNG.uniform(0.2, 5.0, 2_000), "mas"),
    ("parallax", RNG.uniform(0.0002, 0.005, 2_000), "arcsec"),
    ("feh", RNG.normal(-0.2, 0.3, 2_000), "dex"),
])
def test_the_values_choose_the_unit(quantity, values, unit) -> None:
    decided = decide(quantity, values)
    assert not isinstance(decided, str), decided
    assert decided[0] == unit, decided


def test_values_that_fit_no_unit_reject_the_column() -> None:
    assert "fit no unit of teff" in decide("teff", RNG.uniform(10.0, 20.0, 100) * 1e6)
    assert "linear g" in decide("logg", 10 ** RNG.uniform(2.0, 4.5, 100))
    assert "is not a unit of radius" in decide("radius", RNG.uniform(1, 9, 100), unit="kpc")
    assert "not a unit of mass" in decide("mass", RNG.uniform(3, 8, 100), name="M_K")


def test_declared_units_win_when_the_values_agree_and_lose_when_they_do_not() -> None:
    unit, level, why, _ = decide("age", RNG.uniform(1.0, 13.0, 500), unit="Myr")
    assert (unit, level) == ("Myr", 3) and "declared" in why
    unit, level, why, _ = decide("teff", np.log10(TEFF), name="Teff", unit="K")
    assert (unit, level) == ("dex(K)", 1) and "unit mistake" in why


def test_small_samples_are_described_by_their_real_range_large_ones_by_percentiles() -> None:
    ten = np.array([5772.0, 5800, 4700, 9000, 3.76, 12_000, 4500, 4800, 4200, 30_000])
    unit, _, why, _ = decide("teff", ten, name="Teff", clear_name=True)
    # the real minimum and maximum, not percentiles interpolated between values
    assert unit == "K" and "values 3.76..30,000 (full range of 10 values, median 5,286)" in why
    assert "percentile" not in why
    many = np.concatenate([np.linspace(3_000.0, 9_000.0, 998), [2_000.0, 40_000.0]])
    why = decide("teff", many)[2]
    assert "(1st-99th percentile, median 6,000; full range 2,000..40,000)" in why


def test_a_clearly_named_column_takes_the_unit_most_values_fit() -> None:
    teff = TEFF[:200].copy()
    teff[[3, 50, 90, 120, 150]] = [-999.0, 4.1, -999.0, 12.0, 0.0]
    unit, level, why, _ = decide("teff", teff, name="Teff", clear_name=True)
    assert (unit, level) == ("K", 2)
    assert ("195 of 200 values fit K; 5 do not (e.g. -999: fits no unit of teff; "
            "4.1: a log10 value?; 12: in kK?)") in why
    radius = np.array([1.0, 0.95, 10.0, 1.8, 0.012, 0.7, 11.0, 1.8, 6.5, 0.9 * 6.957e5])
    unit, level, why, _ = decide("radius", radius, name="Rad", clear_name=True)
    assert (unit, level) == ("Rsun", 2)
    assert "9 of 10 values fit Rsun; 1 does not (626,130: in km?)" in why
    # a declared unit most values fit is kept; a third of the values off: low confidence
    mixed = np.array([5772.0, 5800, 4700, 9000, 3.76, 3.8, 3.9, 4800, 4200, 30_000])
    unit, level, why, _ = decide("teff", mixed, name="T", unit="K", clear_name=True)
    assert (unit, level) == ("K", 1)
    assert why.startswith('declared unit "K" says K; values 3.76..30,000')
    assert "7 of 10 values fit K; 3 do not (3.76: a log10 value?; 3.8: a log10 value?; " in why


def test_a_column_is_left_out_only_when_no_unit_fits_most_values_and_says_why() -> None:
    half = np.array([5772.0, 5800, 4700, 9000, 4500, 3.76, 3.8, 3.9, 3.7, 4.1])
    why = decide("teff", half, name="Teff", clear_name=True)
    assert isinstance(why, str) and "fit no unit of teff" in why
    assert "the unit most values fit, K, fits 5 of 10, not more than half" in why
    # a name that only may mean the quantity ("temp") needs the values to fit cleanly
    nine = np.array([5772.0, 5800, 4700, 9000, 3.76, 12_000, 4500, 4800, 4200, 30_000])
    why = decide("teff", nine, name="temp")
    assert isinstance(why, str) and "9 of 10 values fit K; 1 does not" in why
    assert "only a column whose name or UCD clearly says the quantity is mapped" in why


def newcomer_table(path: Path) -> Path:
    """Ten invented stars, each quantity in its usual unit but for a few odd values: a
    log10 Teff among Teffs in K (row 4), a radius in km among radii in Rsun (row 6)."""
    frame = pd.DataFrame({
        "Star": [f"LOCS-7-{i}" for i in range(10)],
        "Teff": [5772.0, 5800, 4700, 9000, 3.76, 12_000, 4500, 4800, 4200, 30_000],
        "e_Teff": [60.0, 60, 70, 150, 0.01, 300, 80, 70, 100, 800],
        "logg": [4.44, 4.44, 2.5, 4.23, 4.46, 8.06, 4.6, 2.53, 3.83, 3.99],
        "logL": [0.0, 0.02, 1.64, 1.28, -0.1, -2.57, -0.74, 1.76, -0.04, 4.49],
        "Rad": [1.0, 1.0, 10.0, 1.8, 0.95, 0.012, 0.7 * 6.957e5, 11.0, 1.8, 6.5],
        "Mass": [1.0, 1.0, 1.2, 2.0, 0.95, 0.6, 0.72, 1.5, 0.8, 15.0],
    })
    frame.to_csv(path, index=False)
    return path


def test_a_few_odd_values_do_not_unmap_a_clearly_named_column(tmp_path) -> None:
    path = newcomer_table(tmp_path / "stars.csv")
    proposal = propose_profile(open_catalogue([path]))
    mapping = proposal.mapping()
    assert mapping["teff"] == ("Teff", "K", "e_Teff")
    assert mapping["radius"] == ("Rad", "Rsun", None)
    teff, radius = proposal.quantities["teff"], proposal.quantities["radius"]
    assert teff.confidence == radius.confidence == 2
    assert any("9 of 10 values fit K; 1 does not (3.76: a log10 value?)" in e
               for e in teff.evidence), teff.evidence
    assert any("9 of 10 values fit Rsun; 1 does not (486,990: in km?)" in e
               for e in radius.evidence), radius.evidence
    text = proposal.to_toml()
    assert "percentile" not in text and not any("teff" in n for n in proposal.not_mapped)
    # checked with the proposal, the rules flag exactly the odd rows
    path_toml = tmp_path / "proposed.toml"
    path_toml.write_text(text)
    flags = catcheck.check(path, path_toml, ["core", "units"]).flags
    flagged = {(rule, row) for rule, row in zip(flags["rule"], flags["row"], strict=True)}
    assert {("teff-log-as-kelvin", 4), ("teff-range", 4), ("radius-km-as-rsun", 6),
            ("radius-range", 6)} <= flagged
    assert {row for rule, row in flagged if rule.endswith(("-as-kelvin", "-as-rsun"))} == {4, 6}


# --- whole tables -------------------------------------------------------------------------

def unfamiliar_table(rows: int = 600) -> tuple[pa.Table, pd.DataFrame]:
    """Stars obeying Stefan-Boltzmann under names, units and UCDs of several styles."""
    frame = sun_like(rows, seed=3)
    radius_km = frame["Rad"] * 6.957e5  # IAU 2015 nominal solar radius, km (common practice)
    labels = np.array(["Main Sequence", "RGB", "red clump", "mystery"])[np.arange(rows) % 4]
    table = table_of(
        field("OBJECT_NAME", frame["name"].tolist()),
        field("T_eff", np.log10(frame["Teff"])),  # log Teff with no unit: values only
        field("sigma_T_eff", np.full(rows, 0.01)),
        field("Luminosity", frame["logL"], unit="dex(solLum)"),
        field("Luminosity_error", frame["e_logL"], unit="dex"),
        field("col7", radius_km, unit="km", ucd="phys.size.radius"),  # metadata only
        field("Tphot", frame["Teff"] * 1.01, unit="K"),  # a second Teff
        field("Evolution", labels.tolist()),
        field("ra", RNG.uniform(0, 360, rows), unit="deg", ucd="pos.eq.ra;meta.main"),
        field("assoc", frame["cluster"].tolist()),
    )
    return table, frame


def test_unfamiliar_names_units_in_metadata_and_values_only(tmp_path) -> None:
    table, frame = unfamiliar_table()
    proposal = propose(table)
    assert proposal.mapping() == {
        "teff": ("T_eff", "dex(K)", "sigma_T_eff"),
        "luminosity": ("Luminosity", "dex(Lsun)", "Luminosity_error"),
        "radius": ("col7", "km", None),
        "phase": ("Evolution", None, None),
    }
    assert proposal.id.column == "OBJECT_NAME" and proposal.group.column == "assoc"
    text = proposal.to_toml()
    assert '"Tphot"' in text  # the second Teff is named, with the reason it lost
    assert 'column "ra": no quantity recognised' in text
    assert 'phase label "mystery"' in text and "not mapped" in text
    profile = loads(proposal, tmp_path)
    assert profile.phases == {"Main Sequence": "MS", "RGB": "RGB", "red clump": "RC"}
    assert profile.group_column == "assoc"
    # the proposal runs: Stefan-Boltzmann holds for every star, as in the factory table
    result = catcheck.check_frame(table.to_pandas(), profile, ["core"])
    assert result.summary["rows"] == len(frame) and result.flags.empty
    sb = {r["id"]: r for r in result.summary["rules"]}["stefan-boltzmann"]
    assert sb["checked"] == len(frame)


def test_two_candidates_for_teff_are_both_named() -> None:
    teff = RNG.uniform(4_000, 7_000, 300)
    proposal = propose(table_of(field("id", [f"s{i}" for i in range(300)]),
                                field("teff_spec", teff), field("teff_phot", teff + 50)))
    chosen = proposal.quantities["teff"]
    assert chosen.column == "teff_spec" and chosen.confidence < 3
    assert any('"teff_phot": as likely as "teff_spec"' in c for c in chosen.considered)


def test_physics_settles_units_the_values_leave_open() -> None:
    # radii 0.9-1.4 and luminosities 0.5-2.5 fit both linear and log readings alone
    rows = 400
    radius = RNG.uniform(0.9, 1.4, rows)
    teff = RNG.uniform(5_300, 6_300, rows)
    luminosity = radius**2 * (teff / 5772.0) ** 4  # Stefan-Boltzmann, Teff_sun = 5772 K
    proposal = propose(table_of(field("id", list(range(rows))), field("teff", teff),
                                field("rad", radius), field("lum", luminosity)))
    assert proposal.quantities["luminosity"].unit == "Lsun"
    assert proposal.quantities["radius"].unit == "Rsun"
    assert any("Stefan-Boltzmann holds" in e for e in proposal.quantities["radius"].evidence)


def test_phase_words_and_supergiants() -> None:
    for label, code in (("dwarf", "MS"), ("Main-sequence", "MS"), ("RGB", "RGB"),
                        ("red giants", "RGB"), ("clump", "RC"), ("Red Clump", "RC"),
                        ("subgiant", "SGB"), ("HB", "HB"), ("e-AGB", "AGB"),
                        ("post-AGB", "PAGB"), ("WD", "WD"), ("white dwarf", "WD"),
                        ("pre-ms", "PMS"), ("YSO", "PMS"), ("T Tauri", "PMS"),
                        ("blue straggler", "BSS"), ("core-He giant", "CHEB"), ("cheb", "CHEB")):
        assert phase_code_of(label)[0] == code, label
    assert phase_code_of("binary")[0] is None
    rows = 60
    labels = np.array(["supergiant", "dwarf", "blue supergiant"])[np.arange(rows) % 3]
    teff = np.where(labels == "supergiant", 3_800.0, 6_000.0)
    proposal = propose(table_of(field("id", list(range(rows))), field("Teff", teff),
                                field("phase", labels.tolist())))
    codes = {label.label: label.code for label in proposal.phases}
    assert codes == {"supergiant": "RSG", "dwarf": "MS", "blue supergiant": "BSG"}


def test_nothing_to_map_is_an_error() -> None:
    with pytest.raises(ProfileError, match="no column could be mapped"):
        propose(table_of(field("ra", [1.0, 2.0]), field("dec", [3.0, 4.0])))


def test_toml_strings_are_escaped(tmp_path) -> None:
    assert toml_string('a"b\\c\n') == '"a\\"b\\\\c\\u000A"'
    frame = pd.DataFrame({'star "id"': ["a", "b", "c"], "Teff\\K": [5000.0, 5100.0, 5200.0],
                          "odd\x01\nthing": [1.0, 2.0, 3.0]})
    proposal = propose(pa.Table.from_pandas(frame))
    assert 'column "odd? thing": no quantity recognised' in proposal.to_toml()
    profile = loads(proposal, tmp_path)
    assert profile.id_column == 'star "id"'
    assert profile.quantities["teff"].column == "Teff\\K"


def test_the_profile_command(tmp_path, capsys) -> None:
    table, _ = unfamiliar_table(100)
    path = tmp_path / "stars.parquet"
    pq.write_table(table, path)
    main(["profile", str(path), "--out", str(tmp_path / "p.toml")])
    assert "catcheck check" in capsys.readouterr().out
    assert load_profile(tmp_path / "p.toml").quantities["radius"].unit == "km"
    main(["profile", str(path)])
    assert load_profile_text(capsys.readouterr().out, tmp_path).id_column == "OBJECT_NAME"
    with pytest.raises(SystemExit) as done:
        main(["profile", str(tmp_path / "nope.parquet")])
    assert done.value.code == 3


def load_profile_text(text: str, tmp_path: Path):
    path = tmp_path / "printed.toml"
    path.write_text(text)
    return load_profile(path)


# --- acceptance: the demo catalogue as FITS with renamed columns --------------------------

#: demo column -> (new name, TUNITn, TUCDn); units and UCDs in FITS/VO spelling
DEMO_RENAMED = {
    "locs_id": ("designation", None, "meta.id;meta.main"),
    "cluster": ("CLUSTER_NAME", None, None),
    "teff": ("TEFF", None, None),  # no unit: the values tell
    "teff_err": ("TEFF_ERR", None, None),
    "log_lum": ("lum", "dex(solLum)", None),
    "log_lum_err": ("e_lum", "dex", None),
    "radius": ("R", "solRad", "phys.size.radius"),
    "radius_err": ("sigma_R", "solRad", "stat.error;phys.size.radius"),
    "mass": ("M_act", "solMass", None),
    "mass_err": ("e_M_act", "solMass", None),
    "log_g": ("grav", "[cm/s2]", None),
    "log_g_err": ("grav_error", "dex", None),
    "cluster_age_myr": ("tau", "Myr", "time.age"),
    "fe_h": ("MH", "[Sun]", None),
    "fe_h_err": ("e_MH", "dex", None),
    "parallax": ("plx", "mas", "pos.parallax"),
    "parallax_err": ("plx_err", "mas", None),
    "evol_class": ("evo", None, None),
    "sp_type": ("SpT", None, "src.spType"),
}


def test_demo_catalogue_as_fits_with_renamed_columns(tmp_path) -> None:
    fits = pytest.importorskip("astropy.io.fits")
    files = write_demo(tmp_path / "demo", rows=3_000, seed=3)
    table = pq.read_table(files.catalogue)
    columns = []
    for name in table.column_names:
        new, unit, _ = DEMO_RENAMED[name]
        values = table[name].to_numpy(zero_copy_only=False)
        if values.dtype == object:  # FITS has no null text: a blank is null
            text = np.array(["" if v is None else v for v in values])
            columns.append(fits.Column(name=new, format=f"{text.dtype.itemsize // 4}A",
                                       array=text))
        else:
            columns.append(fits.Column(name=new, format="D", unit=unit, array=values))
    hdu = fits.BinTableHDU.from_columns(columns)
    for number, name in enumerate(table.column_names, start=1):
        if DEMO_RENAMED[name][2]:
            hdu.header[f"TUCD{number}"] = DEMO_RENAMED[name][2]
    hdu.writeto(tmp_path / "locs.fits")

    proposal = propose_profile(open_catalogue([tmp_path / "locs.fits"]))
    profile = loads(proposal, tmp_path)
    demo = load_profile(files.profile)
    renamed = {old: new for old, (new, _, _) in DEMO_RENAMED.items()}
    assert profile.id_column == renamed[demo.id_column]
    assert profile.group_column == renamed[demo.group_column]
    expected = {q: (renamed[m.column], m.unit, renamed.get(m.error_column))
                for q, m in demo.quantities.items()}
    found = {q: (m.column, m.unit, m.error_column) for q, m in profile.quantities.items()}
    assert found == expected
    assert all(m.confidence == 3 for m in proposal.quantities.values())
    labels = set(pc_unique(table["evol_class"]))
    assert profile.phases == {label: PHASE_OF_LABEL[label] for label in labels}
    # the proposal audits the FITS file exactly as the demo's own profile audits the Parquet
    original = catcheck.check(files.catalogue, files.profile).flags
    audited = catcheck.check(tmp_path / "locs.fits", tmp_path / "proposed.toml").flags
    assert len(original) > 50
    pd.testing.assert_frame_equal(audited, original)


def pc_unique(column: pa.ChunkedArray) -> list[str]:
    return [v for v in column.unique().to_pylist() if v is not None]


# --- acceptance: a PARSEC-derived table ---------------------------------------------------

def test_parsec_table_with_parsec_column_names(tmp_path) -> None:
    pytest.importorskip("h5py")
    pytest.importorskip("lachesis_grids")
    from parsec_data import PARSEC_REFERENCE, load_parsec_isochrones

    grid = load_parsec_isochrones()  # PARSEC_REFERENCE: Bressan et al. 2012, parsec_v1.25.h5
    assert "parsec_v1.25.h5" in PARSEC_REFERENCE
    integral = grid["phase_label"] == np.round(grid["phase_label"])
    sample = grid[integral].sample(3_000, random_state=11).reset_index(drop=True)
    table = pd.DataFrame({
        # Zini: a metal mass fraction as PARSEC tables carry, here 0.0152 * 10**[M/H]
        # (PARSEC's solar Z, from memory); it only has to look like Z, and must stay unmapped
        "Zini": 0.0152 * 10 ** sample["feh"],
        "MH": sample["feh"],
        "logAge": sample["log_age"],
        "Mini": sample["initial_mass"],
        "Mass": sample["star_mass"],
        "logL": sample["log_l"],
        "logTe": sample["log_teff"],
        "logg": sample["log_g"],
        "label": sample["phase_label"].astype(int),
        "mbolmag": absolute_bolometric_magnitude(10 ** sample["log_l"]),
    })
    path = tmp_path / "parsec.csv"
    pacsv.write_csv(pa.Table.from_pandas(table, preserve_index=False), path)

    proposal = propose_profile(open_catalogue([path]))
    assert proposal.mapping() == {
        "teff": ("logTe", "dex(K)", None),
        "logg": ("logg", "dex(cm/s2)", None),
        "luminosity": ("logL", "dex(Lsun)", None),
        "mass": ("Mass", "Msun", None),
        "initial_mass": ("Mini", "Msun", None),
        "age": ("logAge", "dex(yr)", None),
        "feh": ("MH", "dex", None),
        "phase": ("label", None, None),
    }
    text = proposal.to_toml()
    assert proposal.id.column == "Zini" and "no identifier column found" in text
    assert '"mbolmag": less evidence than "logL"' in text
    profile = loads(proposal, tmp_path)
    # no wrong phase: every row's mapped code is the loader's phase (label 0 left unmapped)
    codes = PhaseLabels(profile.phases).codes(pa.array(table["label"]))
    mapped = codes >= 0
    assert set(profile.phases.values()) <= {"MS", "SGB", "RGB", "CHEB"}
    assert (table["label"][~mapped] == 0).all()
    truth = sample["phase"].astype(object).to_numpy()
    assert [PHASE_CODES[c] for c in codes[mapped]] == list(truth[mapped])
    assert mapped.sum() > 2_000
    result = catcheck.check(path, profile, ["core"])
    assert result.summary["rows"] == 3_000
    rules = {r["id"]: r for r in result.summary["rules"]}
    assert rules["stefan-boltzmann"]["status"].startswith("not-run")  # no radius column
    # in the units proposed, every model point lies within the physical ranges
    for rule in ("teff-range", "logg-range", "luminosity-range", "mass-range",
                 "initial-mass-range", "feh-range"):
        assert rules[rule]["status"] == "ran" and rules[rule]["checked"] == 3_000, rule
        assert rules[rule]["flagged"] == 0, rule
