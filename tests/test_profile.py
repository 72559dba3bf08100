"""Profiles: validation messages and unit conversion of values and 1-sigma errors."""

from __future__ import annotations

import math

import numpy as np
import pytest
from factory import PROFILE_TOML, sun_like, write_catalogue

import catcheck
from catcheck.errors import ProfileError
from catcheck.profile import load_profile, profile_from_dict
from catcheck.toml import loads

#: these tests are about the engine, not the physics: the core pack is enough
CORE = ["core"]


def profile_error(tmp_path, text: str) -> str:
    path = tmp_path / "p.toml"
    path.write_text(text)
    with pytest.raises(ProfileError) as info:
        load_profile(path)
    assert info.value.exit_code == 2
    message = str(info.value)
    assert "\n" not in message and str(path) in message
    return message


def test_valid_profile_loads(tmp_path) -> None:
    (tmp_path / "p.toml").write_text(PROFILE_TOML)
    profile = load_profile(tmp_path / "p.toml")
    assert profile.id_column == "name" and profile.group_column == "cluster"
    assert profile.quantities["age"].unit == "Gyr"
    assert profile.phases == {"dwarf": "MS", "giant": "RGB"}
    assert profile.columns[:3] == ["name", "cluster", "Teff"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ('idd = "x"\n', "unknown key 'idd'"),
        ('[quantities.teff]\ncolumn = "T"\nunit = "K"\n', "missing required key 'id'"),
        ('id = "x"\n[quantities.tef]\ncolumn = "T"\nunit = "K"\n', "did you mean 'teff'"),
        ('id = "x"\n[quantities.teff]\ncolumn = "T"\nunit = "Kelvin"\n',
         "unit 'Kelvin' is not accepted for teff"),
        ('id = "x"\n[quantities.teff]\ncolumn = "T"\n', "missing 'unit'"),
        ('id = "x"\n[quantities.teff]\ncolumn = "T"\nunit = "K"\nerror = "e"\nerror_value = 5\n',
         "not both"),
        ('id = "x"\n[quantities.teff]\ncolumn = "T"\nunit = "K"\nerror_value = -5\n',
         "error_value must be a number >= 0"),
        ('id = "x"\n[quantities.phase]\ncolumn = "s"\n[phases]\n"dwarf" = "MAIN"\n',
         "not a phase code"),
        ('id = "x"\n[quantities.phase]\ncolumn = "s"\nunit = "K"\n', "takes no unit"),
        ('id = "x"\n', "no quantities are mapped"),
        ('id = "x"\n[quantities.teff]\ncolumn = "T"\nunit = "K"\n[quantities.teff\n',
         "not valid TOML"),
    ],
)
def test_profile_mistakes_name_file_key_and_fix(tmp_path, text: str, expected: str) -> None:
    assert expected in profile_error(tmp_path, text)


def test_missing_profile_file(tmp_path) -> None:
    with pytest.raises(ProfileError, match="profile file not found"):
        load_profile(tmp_path / "none.toml")


def test_column_not_in_catalogue_suggests_a_name(tmp_path) -> None:
    path = write_catalogue(tmp_path, sun_like(5))
    bad = tmp_path / "bad.toml"
    bad.write_text(PROFILE_TOML.replace('column = "Rad"', 'column = "rad"'))
    with pytest.raises(ProfileError, match=r"column 'rad' is not in .*did you mean 'Rad'"):
        catcheck.check(path, bad, rules=CORE)


def test_text_column_mapped_to_numeric_quantity(tmp_path) -> None:
    frame = sun_like(5)
    frame["Teff"] = frame["Teff"].astype(str)
    path = write_catalogue(tmp_path, frame)
    with pytest.raises(ProfileError, match=r"holds (large_)?string, not numbers"):
        catcheck.check(path, tmp_path / "profile.toml", rules=CORE)


def convert(quantity: str, unit: str, value: float, error: float) -> tuple[float, float]:
    profile = profile_from_dict({"id": "i", "quantities": {quantity: {
        "column": "v", "unit": unit, "error": "e"}}})
    mapping = profile.quantities[quantity]
    canonical = mapping.conversion.values(np.array([value]))
    sigma = mapping.conversion.errors(canonical, np.array([error]))
    return float(canonical[0]), float(sigma[0])


def test_dex_values_and_errors() -> None:
    value, sigma = convert("luminosity", "dex(Lsun)", 2.0, 0.1)
    assert value == pytest.approx(100.0)
    assert sigma == pytest.approx(100.0 * math.log(10) * 0.1)


def test_bolometric_magnitude_values_and_errors() -> None:
    value, sigma = convert("luminosity", "mag", 4.74, 0.25)
    assert value == pytest.approx(1.0, rel=1e-4)  # M_bol,sun = 4.74 (IAU 2015 B2)
    assert sigma == pytest.approx(0.4 * math.log(10) * 0.25, rel=1e-4)


def test_linear_units_scale_errors() -> None:
    assert convert("age", "Gyr", 2.5, 0.5) == pytest.approx((2.5e9, 0.5e9))
    assert convert("parallax", "arcsec", 0.1, 0.001) == pytest.approx((100.0, 1.0))


def test_profile_constant_error_used(tmp_path) -> None:
    text = PROFILE_TOML.replace('error = "e_logL"', "error_value = 0.5")
    profile = profile_from_dict(loads(text))
    frame = sun_like(5)
    frame.loc[0, "logL"] += 1.0  # 1 dex off, but the catalogue claims 0.5 dex errors
    result = catcheck.check_frame(frame, profile, rules=CORE)
    assert result.flags.empty
