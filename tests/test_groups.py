"""The group (cluster) pass: statistics, batch independence, group tables, cluster rules."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import catcheck
from catcheck.groups import GroupKeys, _BottomSample, row_hash
from catcheck.profile import profile_from_dict

PROFILE = {
    "id": "name",
    "group": "cluster",
    "quantities": {
        "parallax": {"column": "plx", "unit": "mas", "error": "e_plx"},
        "feh": {"column": "feh", "unit": "dex", "error_value": 0.05},
        "age": {"column": "age", "unit": "Myr", "error_value": 20.0},
    },
}


def cluster_table(n_per_group: int = 40, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frames = []
    for k, (plx, feh, age) in enumerate([(2.0, 0.0, 500.0), (0.5, -0.3, 2000.0),
                                          (1.0, 0.1, 100.0)]):
        frames.append(pd.DataFrame({
            "name": [f"C{k}-{i}" for i in range(n_per_group)],
            "cluster": f"C-{k:03d}",
            "plx": rng.normal(plx, 0.02, n_per_group),
            "e_plx": 0.02,
            "feh": rng.normal(feh, 0.03, n_per_group),
            "age": age,
        }))
    return pd.concat(frames, ignore_index=True)


def test_bottom_sample_median_is_exact_for_small_groups() -> None:
    rng = np.random.default_rng(1)
    codes = rng.integers(0, 5, 1000)
    values = rng.normal(codes * 10.0, 1.0)
    sample = _BottomSample(512)
    for chunk in np.array_split(np.arange(1000), 7):
        sample.add(codes[chunk], row_hash(chunk), values[chunk])
    summary = sample.summary(5)
    expected = pd.Series(values).groupby(codes).median().to_numpy()
    # the sample stores values in single precision
    np.testing.assert_allclose(summary.median, expected, rtol=1e-6)
    mad = pd.Series(np.abs(values - expected[codes])).groupby(codes).median().to_numpy()
    np.testing.assert_allclose(summary.spread, 1.4826 * mad, rtol=1e-5, atol=1e-6)
    assert summary.count.tolist() == np.bincount(codes).tolist()


def test_bottom_sample_of_large_group_is_bounded_and_independent_of_batching() -> None:
    rng = np.random.default_rng(2)
    n = 50_000
    values = rng.normal(0.0, 1.0, n)
    codes = np.zeros(n, dtype=np.int64)
    summaries = []
    for pieces in (1, 13, 97):
        sample = _BottomSample(256)
        for chunk in np.array_split(np.arange(n), pieces):
            sample.add(codes[chunk], row_hash(chunk), values[chunk])
        summaries.append(sample.summary(1))
        assert len(sample.values) == 256  # the group's sample is cut to its size
    assert summaries[0].median == summaries[1].median == summaries[2].median
    assert summaries[0].count[0] == n
    # a 256-member sample of a unit normal: median within 4 standard errors (1.2533/16)
    assert abs(summaries[0].median[0]) < 4 * 1.2533 / 16
    assert summaries[0].spread[0] == pytest.approx(1.0, abs=0.2)


def test_many_groups_share_the_sample_budget(monkeypatch) -> None:
    """With many groups each keeps its k smallest row hashes, k from the final group count,
    whatever the batching; k shrinks to the budget but never below the floor."""
    import catcheck.groups as groups

    monkeypatch.setattr(groups, "SAMPLE_BUDGET", 2_000)
    monkeypatch.setattr(groups, "MIN_SAMPLE_SIZE", 8)
    rng = np.random.default_rng(3)
    n, count = 30_000, 100  # 100 groups of ~300: k = 2000 // 100 = 20
    codes = rng.integers(0, count, n)
    values = rng.normal(codes.astype(float), 1.0)
    rows = np.arange(n)
    assert groups.sample_size(count) == 20 and groups.sample_size(10_000) == 8
    medians = []
    for pieces in (1, 9, 61):
        sample = _BottomSample(512)
        for chunk in np.array_split(rows, pieces):
            sample.add(codes[chunk], row_hash(chunk), values[chunk])
        summary = sample.summary(count)
        assert np.bincount(sample.codes, minlength=count).max() == 20
        medians.append(summary.median)
    np.testing.assert_array_equal(medians[0], medians[1])
    np.testing.assert_array_equal(medians[0], medians[2])
    # the same as the median of each group's 20 members of smallest (top 32 bits of) hash
    top = (row_hash(rows) >> np.uint64(32)).astype(np.uint32)
    order = np.lexsort((top, codes))
    first = np.r_[True, codes[order][1:] != codes[order][:-1]]
    rank = np.arange(n) - np.maximum.accumulate(np.where(first, np.arange(n), 0))
    kept = order[rank < 20]
    expected = pd.Series(values[kept].astype(np.float32)).groupby(codes[kept]).median()
    np.testing.assert_allclose(medians[0], expected.to_numpy(), rtol=1e-6)


def test_group_keys_compare_as_text() -> None:
    keys = GroupKeys()
    assert keys.register([17, None, "17", "C-2"]).tolist() == [0, -1, 0, 1]


def test_cluster_rules_flag_outlying_members() -> None:
    frame = cluster_table()
    frame.loc[5, "plx"] = 3.0       # foreground star in C-000 (2.0 mas)
    frame.loc[45, "feh"] = -1.2     # metal-poor interloper in C-001 (-0.3)
    frame.loc[90, "age"] = 5000.0   # a member dated 5 Gyr in a 100 Myr cluster
    result = catcheck.check_frame(frame, profile_from_dict(PROFILE), rules=["clusters"],
                                  batch_rows=1000)
    flags = result.flags
    assert list(zip(flags["row"], flags["rule"], strict=True)) == [
        (5, "cluster-parallax-outlier"), (45, "cluster-metallicity-outlier"),
        (90, "cluster-age-spread")]
    assert "group C-000" in flags.iloc[0]["message"]
    assert "n = 40" in flags.iloc[0]["message"]
    assert flags.iloc[0]["expected"] == pytest.approx(2.0, abs=0.02)


def test_group_results_do_not_depend_on_batch_size() -> None:
    frame = cluster_table(200, seed=3)
    frame.loc[::37, "plx"] += 0.5
    profile = profile_from_dict(PROFILE)
    reference = catcheck.check_frame(frame, profile, rules=["clusters"], batch_rows=100_000)
    assert len(reference.flags)
    for batch_rows in (1000, 1001):
        other = catcheck.check_frame(frame, profile, rules=["clusters"], batch_rows=batch_rows)
        pd.testing.assert_frame_equal(reference.flags, other.flags)


def test_small_groups_and_rows_without_group_are_not_applicable() -> None:
    frame = cluster_table(4)
    frame.loc[0, "cluster"] = None
    result = catcheck.check_frame(frame, profile_from_dict(PROFILE), rules=["clusters"])
    counts = next(r for r in result.summary["rules"] if r["id"] == "cluster-parallax-outlier")
    assert counts["checked"] == 0 and counts["not_applicable"] == len(frame)


def test_group_rules_need_a_group_column() -> None:
    profile = profile_from_dict({k: v for k, v in PROFILE.items() if k != "group"})
    result = catcheck.check_frame(cluster_table(), profile, rules=["clusters"])
    statuses = {r["id"]: r["status"] for r in result.summary["rules"]}
    assert statuses["cluster-parallax-outlier"] == "not-run: missing group"


def test_group_table_fills_missing_member_values(tmp_path) -> None:
    frame = cluster_table(10).drop(columns=["age"])
    frame["age"] = np.nan
    frame.loc[3, "age"] = 50_000.0  # this member's own (impossible) age is kept
    groups = pa.table({"cluster": ["C-000", "C-001", "C-002"],
                       "log_age": [8.7, 9.3, 8.0]})
    pq.write_table(groups, tmp_path / "clusters.parquet")
    spec = dict(PROFILE, groups={
        "table": "clusters.parquet", "key": "cluster",
        "quantities": {"age": {"column": "log_age", "unit": "dex(yr)"}}})
    profile_path = tmp_path / "profile.toml"
    profile_path.write_text(_toml(spec))
    result = catcheck.check_frame(frame, profile_path, rules=["core"])
    age = next(r for r in result.summary["rules"] if r["id"] == "age-range")
    assert age["checked"] == len(frame)
    assert result.flags.query("rule == 'age-range'")["row"].tolist() == [3]


def test_group_table_missing_column(tmp_path) -> None:
    pq.write_table(pa.table({"cluster": ["C-000"]}), tmp_path / "clusters.parquet")
    spec = dict(PROFILE, groups={
        "table": "clusters.parquet", "key": "cluster",
        "quantities": {"age": {"column": "log_age", "unit": "dex(yr)"}}})
    profile_path = tmp_path / "profile.toml"
    profile_path.write_text(_toml(spec))
    with pytest.raises(catcheck.errors.ProfileError, match="'log_age' is not in the group"):
        catcheck.check_frame(cluster_table(), profile_path)


def _toml(spec: dict) -> str:
    """A minimal TOML writer for the nested dicts of these tests."""
    lines, tables = [], []
    for key, value in spec.items():
        if isinstance(value, dict):
            tables.append((key, value))
        else:
            lines.append(f"{key} = {_value(value)}")
    for name, table in tables:
        lines.extend(_table(name, table))
    return "\n".join(lines) + "\n"


def _table(name: str, table: dict) -> list[str]:
    lines = [f"[{name}]"]
    nested = []
    for key, value in table.items():
        if isinstance(value, dict):
            nested.append((f"{name}.{key}", value))
        else:
            lines.append(f"{key} = {_value(value)}")
    for sub, value in nested:
        lines.extend(_table(sub, value))
    return lines


def _value(value: object) -> str:
    return f'"{value}"' if isinstance(value, str) else repr(value)
