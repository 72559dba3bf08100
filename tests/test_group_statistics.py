"""The bottom-k group samples against a direct computation: the same members, bit for bit.

The reference below selects each group's sample the slow, obvious way (every row sorted by
group, top 32 bits of its row hash, then row number) and takes medians with pandas'
grouped median of the single-precision values, the definition catcheck's medians follow.
Batching, merge thresholds, hash ties, signed zeros, infinities and NaN must not change a
bit of the result.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from catcheck import groups
from catcheck.groups import GroupSummary, _BottomSample, row_hash

#: values at the edges of single precision: signed zeros, infinities, NaN, overflow
SPECIAL = np.array([0.0, -0.0, np.inf, -np.inf, np.nan, 3.4e38, -3.4e38, 1e-45, 1.0,
                    1.0000001, 1e300])


def direct_summary(codes: np.ndarray, hashes: np.ndarray, values: np.ndarray,
                   groups_count: int, largest: int) -> GroupSummary:
    """Count, median and 1.4826 MAD of each group's ``k`` rows of smallest (hash, row)."""
    counted = (codes >= 0) & ~np.isnan(values)
    count = np.bincount(codes[counted], minlength=groups_count)
    k = groups.sample_size(int(np.count_nonzero(count)), largest)
    rows = np.flatnonzero(counted)
    top = hashes[rows] >> np.uint64(32)
    order = rows[np.lexsort((rows, top, codes[rows]))]
    in_order = codes[order]
    first = np.r_[True, in_order[1:] != in_order[:-1]]
    rank = np.arange(len(order)) - np.maximum.accumulate(np.where(first, np.arange(len(order)), 0))
    kept = order[rank < k]
    with np.errstate(over="ignore"):
        sample = pd.Series(values[kept].astype(np.float32))
    median = np.full(groups_count, np.nan)
    by_group = sample.groupby(codes[kept]).median()
    median[by_group.index.to_numpy()] = by_group.to_numpy(dtype=float) + 0.0
    with np.errstate(all="ignore"):  # inf - inf is NaN here too
        deviation = np.abs(sample.to_numpy() - median[codes[kept]].astype(np.float32))
    deviation = pd.Series(deviation)
    spread = np.full(groups_count, np.nan)
    by_group = deviation.groupby(codes[kept]).median()
    spread[by_group.index.to_numpy()] = 1.4826 * (by_group.to_numpy(dtype=float) + 0.0)
    return GroupSummary(count, median, spread)


def assert_same(summary: GroupSummary, expected: GroupSummary) -> None:
    for name in ("count", "median", "spread"):
        got, want = getattr(summary, name), getattr(expected, name)
        assert got.dtype == want.dtype
        assert got.tobytes() == want.tobytes(), (name, got, want)  # bit for bit, NaN too


def random_case(seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    rng = np.random.default_rng(seed)
    groups_count = int(rng.integers(1, 30))
    n = int(rng.integers(0, 3000))
    codes = rng.integers(-1, groups_count, n)
    if seed % 2:
        codes = np.sort(codes)  # members of a group together, as many catalogues are
    values = [rng.normal(codes, 1.0), rng.choice(SPECIAL, n), np.round(rng.normal(0, 2, n)),
              np.where(rng.random(n) < 0.3, np.nan, rng.normal(0, 1, n)),
              rng.choice(np.array([3.4e38, -3.4e38, 1.0, -0.0, 0.0]), n)][seed % 5]
    hashes = row_hash(np.arange(n) + 10**6 * seed)
    if seed % 3 == 0:  # many rows of a group with equal top hash bits: row order decides
        hashes = rng.integers(0, 40, n).astype(np.uint64) << np.uint64(32)
    return codes, hashes, values, groups_count


@pytest.mark.parametrize("seed", range(15))
def test_sample_statistics_equal_the_direct_computation(monkeypatch, seed: int) -> None:
    monkeypatch.setattr(groups, "SAMPLE_BUDGET", [1 << 22, 300, 60][seed % 3])
    monkeypatch.setattr(groups, "MIN_SAMPLE_SIZE", 4)
    codes, hashes, values, groups_count = random_case(seed)
    expected = direct_summary(codes, hashes, values, groups_count, largest=64)
    for pieces, merge_at in ((1, 1 << 20), (7, 1 << 20), (40, 50)):
        monkeypatch.setattr(groups, "_MERGE_AT", merge_at)
        sample = _BottomSample(64)
        for chunk in np.array_split(np.arange(len(codes)), pieces):
            with np.errstate(all="ignore"):
                sample.add(codes[chunk], hashes[chunk], values[chunk])
        with np.errstate(all="ignore"):
            assert_same(sample.summary(groups_count), expected)


@pytest.mark.parametrize("seed", range(6))
def test_partial_samples_merged_in_row_order_equal_one_pass(monkeypatch, seed: int) -> None:
    """Workers number the groups in their own order; merging maps the codes back."""
    monkeypatch.setattr(groups, "SAMPLE_BUDGET", [1 << 22, 200][seed % 2])
    monkeypatch.setattr(groups, "MIN_SAMPLE_SIZE", 4)
    codes, hashes, values, groups_count = random_case(seed)
    expected = direct_summary(codes, hashes, values, groups_count, largest=32)
    total = _BottomSample(32)
    for part in np.array_split(np.arange(len(codes)), 3):
        known: dict[int, int] = {}  # the worker's codes, in order of first appearance
        local = np.array([known.setdefault(c, len(known)) if c >= 0 else -1
                          for c in codes[part].tolist()], dtype=np.int64)
        partial = _BottomSample(32)
        with np.errstate(all="ignore"):
            partial.add(local, hashes[part], values[part])
        total.merge(partial, np.array(list(known), dtype=np.int64))
    with np.errstate(all="ignore"):
        assert_same(total.summary(groups_count), expected)


def test_summary_lookup_gives_nothing_without_a_group() -> None:
    summary = GroupSummary(np.array([3, 5]), np.array([1.5, 2.5]), np.array([0.1, 0.2]))
    count, median, spread = summary.at(np.array([1, -1, 0, 7]))  # 7: not in the table
    assert count.tolist() == [5, 0, 3, 0]
    np.testing.assert_array_equal(median, [2.5, np.nan, 1.5, np.nan])
    np.testing.assert_array_equal(spread, [0.2, np.nan, 0.1, np.nan])
    table = summary.tables()[0] * 10  # a term computed once per group
    assert summary.lookup(table, np.array([0, -1])).tolist() == [30, 0]
