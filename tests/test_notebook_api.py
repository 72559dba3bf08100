"""The notebook API: result.flags, result.mask(...) and result.filter(...)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from factory import PROFILE_TOML, sun_like, write_catalogue
from test_annotate import NOTES

import catcheck
from catcheck.errors import UsageError


@pytest.fixture
def setup(tmp_path):
    """A frame with known errors (Stefan-Boltzmann), warnings (cool) and infos (hot)."""
    frame = sun_like(120, seed=3)
    frame.index = frame.index * 10 + 7  # not positions: results must align by position
    errors = [1, 50, 99]
    frame.loc[frame.index[errors], "logL"] += 1.0
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    (tmp_path / "mine.toml").write_text(NOTES)
    rules = ["core", tmp_path / "mine.toml"]
    result = catcheck.check_frame(frame, tmp_path / "profile.toml", rules)
    teff = frame["Teff"].to_numpy()
    expected = {
        "error": np.isin(np.arange(len(frame)), errors),
        "warning": teff <= 3800,
        "info": teff >= 8500,
    }
    assert all(v.any() for v in expected.values())  # every severity is exercised
    return frame, result, expected, rules


def test_mask_by_severity(setup) -> None:
    frame, result, expected, _ = setup
    error = result.mask(severity="error")
    assert error.dtype == bool and error.shape == (len(frame),)
    assert np.array_equal(error, expected["error"])
    warning_or_worse = expected["error"] | expected["warning"]
    assert np.array_equal(result.mask(), warning_or_worse)  # the default: as --split
    assert np.array_equal(result.mask("info"), warning_or_worse | expected["info"])


def test_mask_by_rule(setup) -> None:
    _, result, expected, _ = setup
    only_cool = result.mask("info", rules=["cool-star-warning"])
    assert np.array_equal(only_cool, expected["warning"])
    assert np.array_equal(result.mask("info", rules="hot-star-note"), expected["info"])
    # a rule's flags below the severity asked for do not count
    assert not result.mask("error", rules=["cool-star-warning"]).any()
    assert not result.mask(rules=[]).any()


def test_unknown_severity_or_rule_is_a_clear_error(setup) -> None:
    _, result, _, _ = setup
    with pytest.raises(UsageError, match=r"unknown severity 'warn'.*did you mean 'warning'"):
        result.mask(severity="warn")
    with pytest.raises(UsageError, match=r"'stefan-boltzman'.*did you mean 'stefan-boltzmann'"):
        result.mask(rules=["stefan-boltzman"])
    with pytest.raises(UsageError, match="keep must be"):
        result.filter(setup[0], keep="good")


def test_filter_keeps_clean_or_flagged_rows_with_their_index(setup) -> None:
    frame, result, expected, _ = setup
    flagged_rows = expected["error"] | expected["warning"]
    clean = result.filter(frame)
    flagged = result.filter(frame, keep="flagged")
    pd.testing.assert_frame_equal(clean, frame[~flagged_rows])
    pd.testing.assert_frame_equal(flagged, frame[flagged_rows])
    assert len(clean) + len(flagged) == len(frame)
    assert not set(clean.index) & set(flagged.index)
    strict = result.filter(frame, severity="error", keep="clean")
    assert len(strict) == len(frame) - 3
    table = pa.Table.from_pandas(frame, preserve_index=False)
    assert result.filter(table, keep="flagged").equals(table.filter(pa.array(flagged_rows)))
    with pytest.raises(UsageError, match="the frame has 119 rows but the check read 120"):
        result.filter(frame.iloc[1:])


def test_file_results_align_with_the_files_rows(tmp_path, setup) -> None:
    frame, in_memory, _, rules = setup
    path = write_catalogue(tmp_path, frame.reset_index(drop=True))
    loose = catcheck.check(path, tmp_path / "profile.toml", rules)
    csv = catcheck.check(path, tmp_path / "profile.toml", rules, out=tmp_path / "r",
                         flags_format="csv", split=True)
    for severity in ("error", "warning", "info"):
        for result in (loose, csv):
            assert np.array_equal(result.mask(severity), in_memory.mask(severity))
    on_disk = pq.read_table(path).to_pandas()
    written = pq.read_table(tmp_path / "r" / "flagged.parquet").to_pandas()
    pd.testing.assert_frame_equal(csv.filter(on_disk, keep="flagged").reset_index(drop=True),
                                  written)
