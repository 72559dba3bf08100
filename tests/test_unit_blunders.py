"""The `units` pack: each unit blunder, planted in 1% of rows or in a whole column, is
flagged row by row and reported once per column in the summary's catalogue findings.

Catalogues are built here: stars obeying Stefan-Boltzmann exactly (tests/factory.py), with
ages in yr; a blunder rewrites some values of one column into another unit while the
profile keeps declaring the original unit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from factory import sun_like

import catcheck
from catcheck.checks.unit_blunders import bind_declared_units
from catcheck.constants import R_SUN
from catcheck.demo import write_demo
from catcheck.findings import FlagStatistics, RowSample, finding_lines
from catcheck.flags import FLAG_SCHEMA
from catcheck.packs import DEFAULT_PACKS, load_rules
from catcheck.profile import profile_from_dict
from catcheck.report import console_summary, markdown_report

KM_PER_RSUN = R_SUN.value / 1e3  # IAU 2015 Resolution B3 nominal solar radius, in km
UNITS_RULES = ("teff-log-as-kelvin", "radius-km-as-rsun", "luminosity-linear-as-dex",
               "age-gyr-or-myr-as-yr")


def profile(teff: str = "K", luminosity: str = "dex(Lsun)", radius: str = "Rsun",
            age: str = "yr", with_radius: bool = True):
    quantities = {
        "teff": {"column": "Teff", "unit": teff, "error": "e_Teff"},
        "luminosity": {"column": "logL", "unit": luminosity},
        "age": {"column": "Age", "unit": age},
    }
    if with_radius:
        quantities["radius"] = {"column": "Rad", "unit": radius, "error": "e_Rad"}
    return profile_from_dict({"id": "name", "quantities": quantities})


def stars(n: int = 2000, seed: int = 3) -> pd.DataFrame:
    """Stars obeying Stefan-Boltzmann, ages 100 Myr - 10 Gyr in yr, no luminosity error."""
    frame = sun_like(n, seed).drop(columns=["e_logL"])
    frame["Age"] = 10 ** np.random.default_rng(seed).uniform(8.0, 10.0, n)
    return frame


def log_teff(frame: pd.DataFrame, rows: np.ndarray) -> None:
    """log10 Teff and its error in dex in place of Teff and its error in K."""
    teff = frame.loc[rows, "Teff"]
    frame.loc[rows, "e_Teff"] = frame.loc[rows, "e_Teff"] / (teff * np.log(10))
    frame.loc[rows, "Teff"] = np.log10(teff)


def km(frame: pd.DataFrame, rows: np.ndarray) -> None:
    frame.loc[rows, "Rad"] *= KM_PER_RSUN
    frame.loc[rows, "e_Rad"] *= KM_PER_RSUN


def linear_luminosity(frame: pd.DataFrame, rows: np.ndarray) -> None:
    frame.loc[rows, "logL"] = 10 ** frame.loc[rows, "logL"]


def gyr(frame: pd.DataFrame, rows: np.ndarray) -> None:
    frame.loc[rows, "Age"] /= 1e9


#: rule -> (quantity, column, the blunder rewriting rows in place, suggested unit)
BLUNDERS = {
    "teff-log-as-kelvin": ("teff", "Teff", log_teff, "dex(K)"),
    "radius-km-as-rsun": ("radius", "Rad", km, "km"),
    "luminosity-linear-as-dex": ("luminosity", "logL", linear_luminosity, "Lsun"),
    "age-gyr-or-myr-as-yr": ("age", "Age", gyr, "Gyr"),
}


def plant(frame: pd.DataFrame, rule_id: str, rows: np.ndarray) -> pd.DataFrame:
    frame = frame.copy()
    BLUNDERS[rule_id][2](frame, rows)
    return frame


#: luminosity-linear-as-dex (rules/units.toml): a log L off by up to ordinary_error_dex =
#: 1 dex is an ordinary mistake, and the log reading must be off by more than that plus
#: agreement = 2 sigma; sigma here is that of stars(): 4% radius and 2% Teff errors and
#: the assumed 0.05 dex for log L, in quadrature (the rule's formula)
LINEAR_MARGIN_DEX = 1.0 + 2.0 * np.hypot(np.hypot(2 * 0.04, 4 * 0.02) / np.log(10), 0.05)


def diagnosable(clean: pd.DataFrame, rule_id: str, rows: np.ndarray) -> np.ndarray:
    """The planted rows a blunder rule can tell apart row by row: all of them, except for
    linear luminosities L whose reading as a log, L, lies too close to the true log L
    (L - log10 L <= 1.14 dex: L between ~0.09 and ~1.2 Lsun), where an ordinary log L
    mistake looks the same."""
    if rule_id != "luminosity-linear-as-dex":
        return rows
    log_l = clean.loc[rows, "logL"].to_numpy()
    return rows[10.0 ** log_l - log_l > LINEAR_MARGIN_DEX]


@pytest.mark.parametrize("share", [0.01, 1.0], ids=["one-percent", "whole-column"])
@pytest.mark.parametrize("rule_id", UNITS_RULES)
def test_planted_blunder_is_flagged_per_row_and_reported_once(rule_id: str,
                                                               share: float) -> None:
    clean = stars()
    rng = np.random.default_rng(11)
    planted = np.sort(rng.choice(len(clean), int(share * len(clean)), replace=False))
    frame = plant(clean, rule_id, planted)
    result = catcheck.check_frame(frame, profile(), rules=["units"], batch_rows=1000)

    flags = result.flags
    expected = diagnosable(clean, rule_id, planted)
    assert len(expected) >= 0.6 * len(planted)
    assert sorted(flags.loc[flags["rule"] == rule_id, "row"]) == expected.tolist()
    assert set(flags["rule"]) == {rule_id}  # the other blunder rules stay silent

    quantity, column, _, suggested = BLUNDERS[rule_id]
    (finding,) = result.summary["catalogue_findings"]
    assert finding["rule"] == rule_id and finding["quantity"] == quantity
    assert finding["column"] == column and finding["suggested_unit"] == suggested
    assert finding["rows"] == len(expected)
    assert finding["fraction"] == pytest.approx(len(expected) / len(clean))
    assert finding["scope"] == ("column" if share == 1.0 else "rows")
    if share == 1.0:
        assert finding["severity"] == "error"
        assert f"declare it as {suggested}" in finding["evidence"]
    observed = flags.loc[flags["rule"] == rule_id, "observed"]
    assert finding["median"] == pytest.approx(observed.median())


def test_messages_name_the_likely_unit_and_the_value_it_gives() -> None:
    frame = stars(4)
    frame.loc[0, "Teff"] = 3.761
    km(frame, np.array([1]))
    frame.loc[2, "logL"] = 1.5e4
    frame.loc[3, "Age"] = 4.5
    result = catcheck.check_frame(frame, profile(), rules=["units"])
    messages = dict(zip(result.flags["rule"], result.flags["message"], strict=True))
    assert messages["teff-log-as-kelvin"] == (
        "Teff = 3.761 K reads as log10(Teff/K): 5768 K if the unit is dex(K)")
    radius = frame.loc[1, "Rad"] / KM_PER_RSUN
    assert f"reads as km: {radius:.4g} Rsun if the unit is km" in messages["radius-km-as-rsun"]
    assert messages["luminosity-linear-as-dex"].startswith(
        "log L = 1.5e+04 dex(Lsun) reads as a linear luminosity: log L = 4.18 dex(Lsun) if "
        "the unit is Lsun (as a log it is above any star's, 7.5 dex(Lsun)); R and Teff give "
        "log L = ")
    assert messages["age-gyr-or-myr-as-yr"] == (
        "age = 4.5 yr is younger than any star (1e+04 yr): it reads as 4.5e+09 yr if the "
        "unit is Gyr (4.5e+06 yr if Myr)")
    expected = dict(zip(result.flags["rule"], result.flags["expected"], strict=True))
    assert expected["teff-log-as-kelvin"] == pytest.approx(10 ** 3.761)
    assert expected["age-gyr-or-myr-as-yr"] == pytest.approx(4.5e9)


def test_teff_window() -> None:
    teff = [3.29, 3.31, 5.39, 5.41, 150.0, 5772.0]  # log10 2000 K = 3.30, 250,000 K = 5.40
    frame = stars(len(teff)).assign(Teff=teff, e_Teff=1.0)
    result = catcheck.check_frame(frame, profile(), rules=["units"])
    assert result.flags.loc[result.flags["rule"] == "teff-log-as-kelvin", "row"].tolist() == [
        1, 2]


def test_radius_window() -> None:
    # above the largest stars (3000 Rsun), and no larger than 3000 Rsun once read as km
    radius = [2999.0, 3001.0, 3000 * KM_PER_RSUN * 0.99, 3000 * KM_PER_RSUN * 1.01, 1.0]
    frame = stars(len(radius)).assign(Rad=radius, e_Rad=0.0)
    result = catcheck.check_frame(frame, profile(), rules=["units"])
    assert result.flags.loc[result.flags["rule"] == "radius-km-as-rsun", "row"].tolist() == [
        1, 2]


def test_age_severity_and_suggestion() -> None:
    ages = [4.5, 250.0, 2e4, 0.0, 5e9, 3.0]
    frame = stars(len(ages)).assign(Age=ages)
    result = catcheck.check_frame(frame, profile(), rules=["units"])
    flags = result.flags[result.flags["rule"] == "age-gyr-or-myr-as-yr"]
    assert flags["row"].tolist() == [0, 1, 5]
    # a few years is no star's age (an error); 250 yr might be a protostar (a warning)
    assert flags["severity"].tolist() == ["error", "warning", "error"]
    assert "as 2.5e+08 yr if the unit is Myr" in flags["message"].iloc[1]
    assert flags["expected"].tolist() == pytest.approx([4.5e9, 250e6, 3e9])
    (finding,) = result.summary["catalogue_findings"]
    assert finding["suggested_unit"] == "Gyr"  # the median flagged value, 4.5, fits Gyr
    frame = stars(3).assign(Age=[250.0, 800.0, 3.0])
    (finding,) = catcheck.check_frame(frame, profile(), rules=["units"]).summary[
        "catalogue_findings"]
    assert finding["suggested_unit"] == "Myr"  # 250 Gyr is older than the Universe


def test_luminosity_without_radius_needs_a_value_too_large_for_a_log() -> None:
    frame = stars(3).assign(logL=[1.5e4, 5.0, 40.0])
    result = catcheck.check_frame(frame, profile(with_radius=False), rules=["units"])
    flags = result.flags
    assert flags["row"].tolist() == [0, 2]
    assert flags["severity"].tolist() == ["error", "error"]  # no star is 10^40 Lsun


def test_luminosity_documented_example() -> None:
    # catcheck explain luminosity-linear-as-dex: R = 1.2 Rsun, Teff = 5900 K, no errors
    frame = pd.DataFrame({"name": ["a"], "Teff": [5900.0], "e_Teff": [np.nan],
                          "logL": [2.0], "Rad": [1.2], "e_Rad": [np.nan], "Age": [1e9]})
    result = catcheck.check_frame(frame, profile(), rules=["units"])
    (message,) = result.flags["message"]
    assert result.flags["severity"].tolist() == ["warning"]
    assert message == (
        "log L = 2 dex(Lsun) reads as a linear luminosity: log L = 0.30 dex(Lsun) if the "
        "unit is Lsun; R and Teff give log L = 0.20 dex(Lsun) by Stefan-Boltzmann: 24 sigma "
        "from the value as a log, 1.4 sigma as linear")


def test_luminosity_that_fits_stefan_boltzmann_as_a_log_is_never_flagged() -> None:
    # log L = 12.29 is above any star's, but R and Teff give the same 12.29: whatever is
    # wrong with the row, the luminosity column is not linear (luminosity-range and the
    # radius say the rest)
    radius = 10 ** (12.29 / 2)  # at the solar Teff, log L = 2 log R
    frame = pd.DataFrame({"name": ["a", "b"], "Teff": [5772.0, 5772.0], "e_Teff": [50.0, 50.0],
                          "logL": [12.29, 1.5e4], "Rad": [radius, 1.0], "e_Rad": [0.0, 0.05],
                          "Age": [1e9, 1e9]})
    flags = catcheck.check_frame(frame, profile(), rules=["units"]).flags
    flags = flags[flags["rule"] == "luminosity-linear-as-dex"]
    assert flags["row"].tolist() == [1]  # 1.5e4 cannot be a log L, and fits neither reading
    assert flags["severity"].tolist() == ["error"]


def test_luminosity_near_its_own_log_is_left_to_stefan_boltzmann() -> None:
    # R and Teff give log L = -0.26 (L = 0.55 Lsun); the catalogue says 0.544 (a demo row
    # whose log L was shifted by ~0.8 dex).  Read as linear it fits exactly (log10 0.544 =
    # -0.264), but as a log it is only 0.80 dex off, as a log L wrong by an ordinary amount
    # would be: not a diagnosable unit blunder.  At 1.8 dex off (log L 2.0 for log L_SB
    # 0.20, the documented example) it is one.
    radius = [10 ** ((-0.264 - 4 * np.log10(5576.6 / 5772.0)) / 2), 1.2]
    frame = pd.DataFrame({"name": ["near", "far"], "Teff": [5576.6, 5900.0],
                          "e_Teff": [100.0, np.nan], "logL": [0.544, 2.0], "Rad": radius,
                          "e_Rad": [0.03, np.nan], "Age": [1e9, 1e9]})
    flags = catcheck.check_frame(frame, profile(), rules=["core", "units"]).flags
    by_rule = flags.groupby("rule")["row"].apply(list).to_dict()
    assert by_rule["luminosity-linear-as-dex"] == [1]
    assert by_rule["stefan-boltzmann"] == [0, 1]  # the row is flagged, without a diagnosis


def test_every_planted_linear_luminosity_is_flagged_by_one_rule_or_the_other() -> None:
    clean = stars()
    frame = plant(clean, "luminosity-linear-as-dex", np.arange(len(clean)))
    flags = catcheck.check_frame(frame, profile(), rules=["core", "units"]).flags
    blunder = set(flags.loc[flags["rule"] == "luminosity-linear-as-dex", "row"])
    relation = set(flags.loc[flags["rule"] == "stefan-boltzmann", "row"])
    near = set(range(len(clean))) - set(diagnosable(clean, "luminosity-linear-as-dex",
                                                    np.arange(len(clean))))
    assert 0.1 * len(clean) < len(near) < 0.3 * len(clean)
    assert blunder | relation == set(range(len(clean)))
    assert not blunder & near and near <= relation


def test_isolated_rows_make_no_catalogue_finding() -> None:
    # 4 rows of 2,000 (0.2%): each is flagged, but a mix of units needs >= 0.5% of the
    # checked rows and >= 5 rows (catcheck.findings.MIX_MIN_FRACTION, MIX_MIN_ROWS)
    few = plant(stars(), "radius-km-as-rsun", np.array([3, 500, 1000, 1500]))
    result = catcheck.check_frame(few, profile(), rules=["units"])
    assert result.flags["row"].tolist() == [3, 500, 1000, 1500]
    assert result.summary["catalogue_findings"] == []
    # 10 rows of 2,000 (0.5%) are a mix of units
    some = plant(stars(), "radius-km-as-rsun", np.arange(0, 2000, 200))
    (finding,) = catcheck.check_frame(some, profile(), rules=["units"]).summary[
        "catalogue_findings"]
    assert finding["rows"] == 10 and finding["scope"] == "rows"
    assert "a mix of units" in finding["evidence"]


def test_rules_apply_only_to_the_unit_they_are_about() -> None:
    # log Teff declared as dex(K) and ages in Gyr declared as Gyr are right: nothing to say
    frame = stars(50)
    frame["Teff"] = np.log10(frame["Teff"])
    frame["e_Teff"] = 0.01
    frame["Age"] = frame["Age"] / 1e9
    result = catcheck.check_frame(frame, profile(teff="dex(K)", age="Gyr"), rules=["units"])
    counts = {r["id"]: r for r in result.summary["rules"]}
    assert result.flags.empty and result.summary["catalogue_findings"] == []
    # reported as not run, with the reason, rather than as run on no row
    assert counts["teff-log-as-kelvin"]["status"] == (
        "not-run: teff declared in dex(K) (the rule is for K)")
    assert counts["age-gyr-or-myr-as-yr"]["status"] == (
        "not-run: age declared in Gyr (the rule is for yr)")
    assert counts["teff-log-as-kelvin"]["checked"] == 0
    assert counts["radius-km-as-rsun"]["status"] == "ran"
    assert counts["radius-km-as-rsun"]["checked"] == 50
    assert "2 of 4 rules not run: " in console_summary(result.summary)


def test_declared_units_come_from_the_profile() -> None:
    rules = bind_declared_units(load_rules(["units", "core"]), profile(age="Myr"))
    params = {rule.id: rule.params for rule in rules}
    assert params["age-gyr-or-myr-as-yr"]["declared_unit"] == "Myr"
    assert params["teff-log-as-kelvin"]["declared_unit"] == "K"
    assert "declared_unit" not in params["teff-range"]


def test_the_demo_raises_no_unit_blunder(tmp_path) -> None:
    # the demo's units are all right; its planted luminosity offsets (0.5-1 dex) are
    # ordinary log L mistakes, some of which happen to fit Stefan-Boltzmann as linear
    # values (7 of the 20,000 rows of seed 1): stefan-boltzmann flags them, this pack not
    files = write_demo(tmp_path, rows=20_000, seed=1)
    result = catcheck.check(files.catalogue, files.profile, rules=list(DEFAULT_PACKS))
    assert not result.flags["rule"].isin(UNITS_RULES).any()
    assert result.summary["catalogue_findings"] == []
    offsets = pd.read_parquet(files.truth).query("fault == 'luminosity_offset'")["row"]
    sb = set(result.flags.loc[result.flags["rule"] == "stefan-boltzmann", "row"])
    assert set(offsets) <= sb


def test_findings_are_shown_on_the_console_and_in_report_md() -> None:
    frame = plant(stars(), "teff-log-as-kelvin", np.arange(2000))
    result = catcheck.check_frame(frame, profile(), rules=["core", "units"])
    console = "\n".join(finding_lines(result.summary))
    assert "error: teff: 2,000 of 2,000 values (100%) of column 'Teff' look like dex(K)" in (
        console)
    markdown = markdown_report(result.summary, {})
    assert "### Catalogue-level findings" in markdown
    assert "- **error**, teff: 2,000 of 2,000 values (100%) of column 'Teff' look like dex(K)" in (
        markdown)
    # the range rule fires too, and says nothing that contradicts the blunder's message
    assert set(result.flags.loc[result.flags["row"] == 0, "rule"]) >= {
        "teff-range", "teff-log-as-kelvin"}


def test_findings_do_not_depend_on_batch_size() -> None:
    frame = plant(stars(3000), "radius-km-as-rsun", np.arange(0, 3000, 3))
    small = catcheck.check_frame(frame, profile(), rules=["units"], batch_rows=1000)
    large = catcheck.check_frame(frame, profile(), rules=["units"], batch_rows=100_000)
    assert small.summary["catalogue_findings"] == large.summary["catalogue_findings"]


def test_row_sample_keeps_the_same_rows_however_they_arrive() -> None:
    rows = np.arange(10_000)
    values = np.sqrt(rows)
    whole = RowSample(100)
    whole.add(rows, value=values)
    pieces = RowSample(100)
    for start in range(0, 10_000, 700):
        pieces.add(rows[start:start + 700], value=values[start:start + 700])
    assert np.array_equal(whole.columns()["value"], pieces.columns()["value"])
    assert len(whole.columns()["value"]) == 100


def test_worst_flags_are_the_largest_deviations_first_row_on_ties() -> None:
    stats = FlagStatistics(worst=3)
    deviation = [1.0, 7.0, np.nan, 7.0, 3.0, 9.0]
    for start in (0, 3):
        part = slice(start, start + 3)
        n = 3
        stats.add(pa.table({
            "row": pa.array(range(start, start + n), pa.int64()),
            "id": [f"s{i}" for i in range(start, start + n)],
            "rule": ["r"] * n, "severity": ["error"] * n, "message": ["m"] * n,
            "observed": [0.0] * n, "expected": [0.0] * n,
            "deviation": deviation[part]}, schema=FLAG_SCHEMA))
    assert [r["row"] for r in stats.worst("r")] == [5, 1, 3]
