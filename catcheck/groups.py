"""The group (cluster) pass: group codes, per-group values, and per-group statistics.

Pass 1 streams the whole catalogue once and keeps, for every group and every variable a
group rule asks for, an exact member count and a bounded sample of values; pass 2 checks
each row against its group's robust centre (median) and spread (1.4826 x the median
absolute deviation).  Memory grows with the number of groups, not of rows.

The sample of a group is its k members with the smallest hash of their row number (a
bottom-k sample): it does not depend on batch size, file split or worker count, and it is
exact for groups no larger than k.  k is ``SAMPLE_SIZE`` (512) while the groups share
``SAMPLE_BUDGET`` entries per variable (up to 8192 groups), and shrinks as more groups
have members, down to ``MIN_SAMPLE_SIZE`` (16, reached at 262,144 groups): memory stays
bounded for catalogues of very many clusters, at the price of estimated rather than exact
centres and spreads for groups larger than k.
Bottom-k samples nest (the k' smallest hashes are among the k smallest), so the final
sample depends only on how many groups the whole catalogue has.  One standard error of
the median of a k-member sample of a normal distribution is 1.2533 sigma / sqrt(k): 0.055
sigma for k = 512, 0.157 sigma for k = 64, 0.31 sigma for k = 16.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

SAMPLE_SIZE = 512
#: sample entries per variable shared by all groups (12 bytes each: about 50 MB)
SAMPLE_BUDGET = 1 << 22
MIN_SAMPLE_SIZE = 16
#: pending sample entries (per variable) that trigger a merge
_MERGE_AT = 1 << 20
#: 1.4826 x MAD estimates the standard deviation of a normal distribution
MAD_TO_SIGMA = 1.4826
NO_GROUP = -1

if TYPE_CHECKING:
    from catcheck.canonical import StarBatch

#: what a group rule aggregates: a function of a batch, NaN where a row does not count
GroupVariable = Callable[["StarBatch"], np.ndarray]


def row_hash(rows: np.ndarray) -> np.ndarray:
    """A well-mixed 64-bit hash of row numbers (splitmix64 finaliser, Steele et al. 2014)."""
    with np.errstate(over="ignore"):
        z = rows.astype(np.uint64) + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))


class GroupKeys:
    """Dense integer codes for group labels, in order of first appearance."""

    def __init__(self) -> None:
        self.code_of: dict[str, int] = {}

    def register(self, labels: list[object]) -> np.ndarray:
        """Codes of ``labels`` (None gives NO_GROUP), adding labels not seen before.

        Labels are compared as text, so a group table keyed by the integer 17 matches a
        catalogue column holding "17" or 17.0; a NaN label means no group.
        """
        codes = np.empty(len(labels), dtype=np.int64)
        for i, label in enumerate(labels):
            if isinstance(label, float):
                if label != label:  # NaN: no group
                    label = None
                elif label.is_integer():  # 17.0 is the group "17"
                    label = int(label)
            if label is None:
                codes[i] = NO_GROUP
            else:
                codes[i] = self.code_of.setdefault(str(label), len(self.code_of))
        return codes

    def codes(self, column: pa.Array) -> np.ndarray:
        """Group codes (int64, NO_GROUP for null) of a column, each distinct label once."""
        if not pa.types.is_dictionary(column.type):
            column = column.dictionary_encode()
        lookup = np.append(self.register(column.dictionary.to_pylist()), NO_GROUP)
        indices = column.indices.fill_null(len(column.dictionary))
        return lookup[indices.to_numpy(zero_copy_only=False)]


@dataclass(frozen=True)
class GroupSummary:
    """One variable's statistics by group code: member count, median and robust spread."""

    count: np.ndarray
    median: np.ndarray
    spread: np.ndarray

    def at(self, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(count, median, spread) for each row's group code; 0 / NaN without a group."""
        if not len(self.count):
            return np.zeros(len(codes), dtype=np.int64), *np.full((2, len(codes)), np.nan)
        inside = (codes >= 0) & (codes < len(self.count))
        safe = np.where(inside, codes, 0)
        return (np.where(inside, self.count[safe], 0),
                np.where(inside, self.median[safe], np.nan),
                np.where(inside, self.spread[safe], np.nan))


def sample_size(groups: int, largest: int = SAMPLE_SIZE) -> int:
    """Members sampled per group when ``groups`` groups have members (see the module)."""
    shared = SAMPLE_BUDGET // max(groups, 1)
    return min(largest, max(MIN_SAMPLE_SIZE, shared))


class _BottomSample:
    """Per group, the values of the ``size`` members with the smallest row hash.

    Values are kept in single precision (ample for robust centres and spreads) and hashes
    as their top 32 bits; equal hashes keep row order, so the sample stays deterministic.

    New values wait in a pending list and are merged (sorted, cut to ``size`` per group)
    only when the pending part outgrows the kept part, so the work stays O(n log n) over a
    run and memory stays below about groups x size x 2 entries.  The kept entries are
    sorted by (group, hash).
    """

    def __init__(self, size: int) -> None:
        self.largest = size  # the size while few groups share the budget
        self.size = size
        # compact types: the sample can hold groups x size entries (12 bytes each)
        self.codes = np.empty(0, dtype=np.int32)
        self.hashes = np.empty(0, dtype=np.uint32)
        self.values = np.empty(0, dtype=np.float32)
        self.counts = np.zeros(0, dtype=np.int64)
        self.cutoff = np.empty(0, dtype=np.uint32)  # largest kept hash of a full group
        self.pending: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
        self.pending_size = 0

    def add(self, codes: np.ndarray, hashes: np.ndarray, values: np.ndarray) -> None:
        keep = (codes >= 0) & ~np.isnan(values)
        codes = codes[keep].astype(np.int32)
        hashes = (hashes[keep] >> np.uint64(32)).astype(np.uint32)
        values = values[keep].astype(np.float32)
        if not len(codes):
            return
        self._grow(int(codes.max()) + 1)
        self.counts += np.bincount(codes, minlength=len(self.counts))
        below = hashes < self.cutoff[codes]
        self.pending.append((codes[below], hashes[below], values[below]))
        self.pending_size += int(below.sum())
        if self.pending_size > max(_MERGE_AT, len(self.codes)):
            self._merge()

    def merge(self, other: _BottomSample, codes: np.ndarray) -> None:
        """Take in the sample of ``other``, drawn from rows after all of this sample's.

        ``codes[c]`` is this sample's group code for group code ``c`` of ``other``.  The
        result is the sample of all rows of both: equal hashes keep row order because
        ``other``'s rows come later.
        """
        other._merge()
        groups = codes[:len(other.counts)]
        if not len(groups):
            return
        self._grow(int(groups.max()) + 1)
        self.counts[groups] += other.counts  # codes are distinct: no repeated index
        mapped = groups[other.codes].astype(np.int32)
        below = other.hashes < self.cutoff[mapped]
        self.pending.append((mapped[below], other.hashes[below], other.values[below]))
        self.pending_size += int(below.sum())
        if self.pending_size > max(_MERGE_AT, len(self.codes)):
            self._merge()

    def _merge(self, final: bool = False) -> None:
        """Fold the pending entries in and cut every group to its ``size`` smallest hashes.

        The kept entries stay sorted by (group, hash), so a merge sorts only the pending
        part and then merges two sorted runs (a stable sort finds them: linear time).
        """
        size = sample_size(int(np.count_nonzero(self.counts)), self.largest)
        if not self.pending and not (final and size < self.size):
            return
        self.size = size  # never grows: groups only gain members
        codes, hashes, values = self.codes, self.hashes, self.values
        if self.pending:
            new_codes, new_hashes, new_values = (np.concatenate(part) for part in
                                                 zip(*self.pending, strict=True))
            self.pending, self.pending_size = [], 0
            new = np.argsort(_sort_key(new_codes, new_hashes), kind="stable")
            codes = np.concatenate([codes, new_codes[new]])
            hashes = np.concatenate([hashes, new_hashes[new]])
            values = np.concatenate([values, new_values[new]])
            # equal keys keep the kept (earlier) rows first: row order, as documented
            order = np.argsort(_sort_key(codes, hashes), kind="stable")
            codes, hashes, values = codes[order], hashes[order], values[order]
        rank = _rank_within(codes)
        full = np.flatnonzero(rank == size - 1)
        self.cutoff[codes[full]] = hashes[full]
        kept = rank < size
        self.codes, self.hashes, self.values = codes[kept], hashes[kept], values[kept]

    def _grow(self, groups: int) -> None:
        extra = groups - len(self.counts)
        if extra > 0:
            self.counts = np.concatenate([self.counts, np.zeros(extra, dtype=np.int64)])
            self.cutoff = np.concatenate(
                [self.cutoff, np.full(extra, np.iinfo(np.uint32).max, dtype=np.uint32)])

    def summary(self, groups: int) -> GroupSummary:
        self._merge(final=True)
        self._grow(groups)
        median = _group_median(self.codes, self.values, groups)
        deviation = np.abs(self.values - median[self.codes].astype(np.float32))
        spread = MAD_TO_SIGMA * _group_median(self.codes, deviation, groups)
        return GroupSummary(self.counts.copy(), median, spread)


def _sort_key(codes: np.ndarray, hashes: np.ndarray) -> np.ndarray:
    """One uint64 per entry ordering by group code, then hash (codes are >= 0)."""
    return (codes.astype(np.uint64) << np.uint64(32)) | hashes.astype(np.uint64)


def _rank_within(sorted_codes: np.ndarray) -> np.ndarray:
    """Position of each element within its run of equal codes (codes sorted)."""
    starts = np.flatnonzero(np.r_[True, sorted_codes[1:] != sorted_codes[:-1]])
    run_start = np.repeat(starts, np.diff(np.r_[starts, len(sorted_codes)]))
    return np.arange(len(sorted_codes)) - run_start


def _group_median(codes: np.ndarray, values: np.ndarray, groups: int) -> np.ndarray:
    """Median of ``values`` per group code (NaN for groups without values)."""
    median = np.full(groups, np.nan)
    if len(codes):
        by_group = pd.Series(values, copy=False).groupby(codes, sort=False).median()
        # + 0.0 turns a median of -0.0 into 0.0, which signed zeros in another order give
        median[by_group.index.to_numpy()] = by_group.to_numpy(dtype=float) + 0.0
    return median


class GroupAccumulator:
    """Pass 1: per-group counts and samples of every variable the group rules need."""

    def __init__(self, variables: Mapping[str, GroupVariable],
                 sample_size: int = SAMPLE_SIZE) -> None:
        self.variables = dict(variables)
        self.samples = {name: _BottomSample(sample_size) for name in self.variables}

    def add(self, batch: StarBatch) -> None:
        """Add one batch (it must carry group codes)."""
        codes = batch.group_codes
        hashes = row_hash(np.arange(batch.first_row, batch.first_row + len(codes)))
        for name, variable in self.variables.items():
            with np.errstate(all="ignore"):  # extreme values are data here too
                values = np.asarray(variable(batch), dtype=float)
            self.samples[name].add(codes, hashes, values)

    def merge(self, other: GroupAccumulator, codes: np.ndarray) -> None:
        """Take in ``other``'s state, accumulated over rows after all of this one's.

        ``codes[c]`` is this accumulator's group code for ``other``'s group code ``c``
        (:meth:`GroupKeys.register` of ``other``'s labels in code order gives it).  Merging
        partial states in row order gives exactly the statistics of one pass over all rows.
        """
        for name, sample in self.samples.items():
            sample.merge(other.samples[name], codes)

    def settle(self) -> None:
        """Merge what is pending now (in a worker, before its state is sent for merging:
        the sorting is then done in parallel and the state sent is smaller)."""
        for sample in self.samples.values():
            sample._merge()

    def finish(self, groups: int) -> dict[str, GroupSummary]:
        """Statistics by variable, for ``groups`` group codes; the samples are released."""
        summaries = {}
        for name in list(self.samples):
            summaries[name] = self.samples.pop(name).summary(groups)
        return summaries


def group_labels_at(column: pa.Array, rows: np.ndarray) -> list[str]:
    """The group labels of the given rows as text, for messages."""
    return [str(v) for v in pc.take(column, pa.array(rows, type=pa.int64())).to_pylist()]
