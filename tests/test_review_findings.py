"""Regressions found in review: each test pins one behaviour that was wrong once."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from factory import PROFILE_TOML, sun_like, visual_report_files, write_catalogue

import catcheck
from catcheck.errors import CatalogueError, ProfileError, RulePackError
from catcheck.groups import GroupKeys
from catcheck.packs import load_rules
from catcheck.profile import profile_from_dict
from catcheck.reader import ParquetCatalogue


def test_non_positive_radius_is_flagged_whatever_its_error() -> None:
    frame = pd.DataFrame({"name": ["a", "b", "c"], "R": [-0.5, 0.0, 1.0],
                          "e_R": [1.0, 1.0, 0.05], "T": [5772.0] * 3, "L": [0.0] * 3})
    profile = profile_from_dict({"id": "name", "quantities": {
        "radius": {"column": "R", "unit": "Rsun", "error": "e_R"},
        "teff": {"column": "T", "unit": "K"},
        "luminosity": {"column": "L", "unit": "dex(Lsun)"}}})
    result = catcheck.check_frame(frame, profile, rules=["core"])
    assert result.flags.query("rule == 'radius-range'")["row"].tolist() == [0, 1]
    sb = next(r for r in result.summary["rules"] if r["id"] == "stefan-boltzmann")
    assert (sb["checked"], sb["not_applicable"]) == (1, 2)  # no log of a negative radius


def test_group_error_does_not_replace_a_members_own_missing_error(tmp_path) -> None:
    frame = pd.DataFrame({"name": ["own", "filled"], "cluster": ["C-1", "C-1"],
                          "age": [5.0e9, np.nan]})
    pq.write_table(pa.table({"cluster": ["C-1"], "log_age": [9.0], "e_log_age": [0.05]}),
                   tmp_path / "groups.parquet")
    profile = tmp_path / "p.toml"
    profile.write_text('id = "name"\ngroup = "cluster"\n[quantities.age]\ncolumn = "age"\n'
                       'unit = "yr"\n[groups]\ntable = "groups.parquet"\nkey = "cluster"\n'
                       '[groups.quantities.age]\ncolumn = "log_age"\nunit = "dex(yr)"\n'
                       'error = "e_log_age"\n')
    result = catcheck.check_frame(frame, profile, rules=["core"])
    age = next(r for r in result.summary["rules"] if r["id"] == "age-range")
    assert age["checked"] == 2


def test_group_table_with_text_column_is_a_profile_error(tmp_path) -> None:
    pq.write_table(pa.table({"cluster": ["C-1"], "log_age": ["old"]}),
                   tmp_path / "groups.parquet")
    profile = tmp_path / "p.toml"
    profile.write_text('id = "name"\ngroup = "cluster"\n[quantities.feh]\ncolumn = "feh"\n'
                       'unit = "dex"\n[groups]\ntable = "groups.parquet"\nkey = "cluster"\n'
                       '[groups.quantities.age]\ncolumn = "log_age"\nunit = "dex(yr)"\n')
    frame = pd.DataFrame({"name": ["a"], "cluster": ["C-1"], "feh": [0.0]})
    with pytest.raises(ProfileError, match="holds string, not numbers"):
        catcheck.check_frame(frame, profile)


def test_group_table_cannot_give_a_phase() -> None:
    with pytest.raises(ProfileError, match="numeric quantities only"):
        profile_from_dict({"id": "i", "group": "g", "quantities": {
            "teff": {"column": "t", "unit": "K"}}, "groups": {
            "table": "x.parquet", "key": "g", "quantities": {"phase": {"column": "p"}}}})


def test_glob_matching_only_directories(tmp_path) -> None:
    (tmp_path / "sub.parquet").mkdir()
    with pytest.raises(CatalogueError, match="matches no file"):
        ParquetCatalogue.open([str(tmp_path / "*.parquet")])


def test_a_rule_demoted_to_info_is_never_escalated(tmp_path) -> None:
    pack = tmp_path / "quiet.toml"
    pack.write_text('[[rule]]\nid = "phase-envelope"\nseverity = "info"\n')
    frame = pd.DataFrame({"name": ["x"], "teff": [4800.0], "logg": [4.5], "phase": ["RGB"]})
    profile = profile_from_dict({"id": "name", "quantities": {
        "teff": {"column": "teff", "unit": "K"},
        "logg": {"column": "logg", "unit": "dex(cm/s2)", "error_value": 0.1},
        "phase": {"column": "phase"}}})
    flags = catcheck.check_frame(frame, profile, rules=["evolution", pack]).flags
    assert flags["severity"].tolist() == ["info"]


def test_switching_flag_format_removes_the_old_flags_file(tmp_path) -> None:
    path = write_catalogue(tmp_path, sun_like(10))
    out = tmp_path / "report"
    catcheck.check(path, tmp_path / "profile.toml", ["core"], out=out, flags_format="csv")
    catcheck.check(path, tmp_path / "profile.toml", ["core"], out=out)
    assert sorted(p.name for p in out.iterdir()) == sorted(
        ["flags.parquet", "report.md", "summary.json", *visual_report_files("hr_diagram.png")])


def test_nan_and_integral_float_group_labels() -> None:
    keys = GroupKeys()
    assert keys.register([1.0, float("nan"), None, "1", 2.5]).tolist() == [0, -1, -1, 0, 1]


def test_override_cannot_change_documentation(tmp_path) -> None:
    pack = tmp_path / "p.toml"
    pack.write_text('[[rule]]\nid = "stefan-boltzmann"\nsummary = "mine"\n')
    with pytest.raises(RulePackError, match="override can change severity, params"):
        load_rules(["core", pack])


def test_references_may_be_one_string(tmp_path) -> None:
    pack = tmp_path / "p.toml"
    pack.write_text('[[rule]]\nid = "x"\nsummary = "s"\nrequire = "teff > 0"\n'
                    'references = "Somebody (2020)"\n')
    (rule,) = load_rules([pack])
    assert rule.check.doc.references == ("Somebody (2020)",)


def test_factory_profile_still_loads() -> None:
    assert "[phases]" in PROFILE_TOML  # guards the fixtures these regressions build on


def test_isnan_in_an_expression_can_fire(tmp_path) -> None:
    pack = tmp_path / "p.toml"
    pack.write_text('[[rule]]\nid = "needs-luminosity"\nsummary = "every star has an L"\n'
                    'severity = "warning"\nrequire = "not isnan(luminosity)"\n'
                    'message = "no luminosity for a star at {teff:.0f} K"\n')
    frame = pd.DataFrame({"name": ["a", "b"], "T": [5000.0, 6000.0], "L": [np.nan, 0.3]})
    profile = profile_from_dict({"id": "name", "quantities": {
        "teff": {"column": "T", "unit": "K"},
        "luminosity": {"column": "L", "unit": "dex(Lsun)"}}})
    result = catcheck.check_frame(frame, profile, rules=[pack])
    assert result.flags["row"].tolist() == [0]
    assert result.flags.iloc[0]["message"] == "no luminosity for a star at 5000 K"
    counts = result.summary["rules"][0]
    assert (counts["checked"], counts["skipped"]) == (2, 0)
