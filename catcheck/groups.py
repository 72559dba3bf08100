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

import itertools
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
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

#: what a group rule aggregates: a function of a batch's values (pass 1 reads no errors),
#: NaN where a row does not count
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
    #: the three arrays between "no group" entries (0 / NaN), looked up at code + 1
    _padded: tuple[np.ndarray, ...] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        padded = tuple(np.concatenate([[none], values, [none]]).astype(values.dtype)
                       for values, none in ((self.count, 0), (self.median, np.nan),
                                            (self.spread, np.nan)))
        object.__setattr__(self, "_padded", padded)

    def at(self, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(count, median, spread) for each row's group code; 0 / NaN without a group."""
        count, median, spread = (self.lookup(table, codes) for table in self._padded)
        return count, median, spread

    def tables(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(count, median, spread) by group, with a "no group" entry (0 / NaN) at either end.

        A term that depends on the group alone can be computed once per group on these
        and looked up for each row with :meth:`lookup`.
        """
        count, median, spread = self._padded
        return count, median, spread

    @staticmethod
    def lookup(table: np.ndarray, codes: np.ndarray) -> np.ndarray:
        """Each row's entry of a per-group table laid out as :meth:`tables` gives them."""
        # NO_GROUP (-1) takes the first entry; codes beyond the table clip to the last
        return np.take(table, codes + 1, mode="clip")


def sample_size(groups: int, largest: int = SAMPLE_SIZE) -> int:
    """Members sampled per group when ``groups`` groups have members (see the module)."""
    shared = SAMPLE_BUDGET // max(groups, 1)
    return min(largest, max(MIN_SAMPLE_SIZE, shared))


class _BottomSample:
    """Per group, the values of the ``size`` members with the smallest row hash.

    Values are kept in single precision (ample for robust centres and spreads) and hashes
    as their top 32 bits; equal hashes keep row order, so the sample stays deterministic.
    An entry's group code and hash travel as one sort key, ``code << 32 | hash``.

    New values wait in a pending list and are merged (sorted, cut to ``size`` per group)
    only when the pending part outgrows half the kept part, so the work stays O(n log n)
    over a run and memory stays below about groups x size x 1.5 entries (a merge briefly
    needs about twice that: at 50M demo rows the pass peaked 600 MB with merges at the
    kept part's size, 360 MB at half of it, in the same time).  The kept entries are
    sorted by key, that is by (group, hash).
    """

    def __init__(self, size: int) -> None:
        self.largest = size  # the size while few groups share the budget
        self.size = size
        # compact types: the sample can hold groups x size entries (12 bytes each)
        self.keys = np.empty(0, dtype=np.uint64)
        self.values = np.empty(0, dtype=np.float32)
        self.counts = np.zeros(0, dtype=np.int64)
        self.cutoff = np.empty(0, dtype=np.uint32)  # largest kept hash of a full group
        self.pending: list[tuple[np.ndarray, np.ndarray]] = []
        self.pending_size = 0

    @property
    def codes(self) -> np.ndarray:
        """The group code of each kept entry."""
        return _codes_of(self.keys)

    def add(self, codes: np.ndarray, hashes: np.ndarray, values: np.ndarray) -> None:
        """Offer rows: their group codes, 64-bit row hashes and values (NaN: not counted)."""
        self.add_rows(_RowKeys.of(codes, hashes), values)

    def add_rows(self, rows: _RowKeys, values: np.ndarray) -> None:
        """Offer the rows of a batch with their values (NaN: not counted)."""
        with np.errstate(over="ignore"):  # beyond the single-precision range: infinite
            values = values[rows.rows].astype(np.float32)
        codes, keys = rows.codes, rows.keys
        present = ~np.isnan(values)
        if not present.all():
            codes, keys, values = codes[present], keys[present], values[present]
        if not len(codes):
            return
        self._grow(int(codes[-1]) + 1)  # codes ascend
        self.counts += np.bincount(codes, minlength=len(self.counts))
        below = (keys & _HASH_MASK) < self.cutoff[codes]
        if not below.all():
            keys, values = keys[below], values[below]
        self._offer(keys, values)

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
        keys, values = _renumbered(other.keys, other.values, groups)
        below = np.flatnonzero((keys & _HASH_MASK) < self.cutoff[_codes_of(keys)])
        self._offer(keys[below], values[below])

    def _offer(self, keys: np.ndarray, values: np.ndarray) -> None:
        """Queue entries, sorted by key (equal keys in row order), for the next merge;
        merge when enough wait.

        A group with more of them than the sample keeps is cut at once: the queue is a
        list of short sorted runs, which a merge joins in close to linear time.
        """
        size = sample_size(int(np.count_nonzero(self.counts)), self.largest)
        keys, values = self._cut(keys, values, size)
        self.pending.append((keys, values))
        self.pending_size += len(keys)
        if self.pending_size > max(_MERGE_AT, len(self.keys) // 2):
            self._merge()

    def _merge(self, final: bool = False) -> None:
        """Fold the pending entries in and cut every group to its ``size`` smallest hashes.

        The kept entries and each pending run are sorted by key, so one stable sort finds
        the runs and merges them (close to linear time); equal keys keep the earlier rows
        first, as the runs are in row order.
        """
        size = sample_size(int(np.count_nonzero(self.counts)), self.largest)
        if not self.pending and not (final and size < self.size):
            return
        self.size = size  # never grows: groups only gain members
        keys, values = self.keys, self.values
        if self.pending:
            runs = [(keys, values)] * bool(len(keys)) + self.pending
            # drop every reference to the parts as soon as they are joined: the merge is
            # the pass's memory peak, several times the sample itself
            self.keys = self.values = keys = values = np.empty(0)
            self.pending, self.pending_size = [], 0
            several = len(runs) > 1
            keys = np.concatenate([run[0] for run in runs])
            values = np.concatenate([run[1] for run in runs])
            del runs
            if several:
                order = np.argsort(keys, kind="stable")
                keys = keys[order]
                values = values[order]
                del order
        self.keys, self.values = self._cut(keys, values, size)

    def _cut(self, keys: np.ndarray, values: np.ndarray, size: int
             ) -> tuple[np.ndarray, np.ndarray]:
        """Entries sorted by key (equal keys in row order) cut to ``size`` per group.

        Each group with ``size`` entries or more gets the hash of its ``size``-th as its
        cutoff: later rows need a smaller hash to enter.
        """
        groups, starts, entries = _group_runs(keys)
        full = np.flatnonzero(entries >= size)
        if not len(full):
            return keys, values
        self.cutoff[groups[full]] = (keys[starts[full] + size - 1] & _HASH_MASK).astype(np.uint32)
        over = full[entries[full] > size]
        if not len(over):
            return keys, values
        extra = entries[over] - size  # each over-full group's entries after its size-th
        first = np.cumsum(extra) - extra
        dropped = np.repeat(starts[over] + size - first, extra) + np.arange(int(extra.sum()))
        kept = np.ones(len(keys), dtype=bool)
        kept[dropped] = False
        return keys[kept], values[kept]

    def _grow(self, groups: int) -> None:
        extra = groups - len(self.counts)
        if extra > 0:
            self.counts = np.concatenate([self.counts, np.zeros(extra, dtype=np.int64)])
            self.cutoff = np.concatenate(
                [self.cutoff, np.full(extra, np.iinfo(np.uint32).max, dtype=np.uint32)])

    def summary(self, groups: int) -> GroupSummary:
        self._merge(final=True)
        self._grow(groups)
        order = _GroupOrder.of_sample(self.keys, self.values)
        median = np.full(groups, np.nan)
        median[order.groups] = order.median()
        centre = median[order.groups].astype(np.float32)
        deviation = order.deviation_median(centre)
        if deviation is None:  # infinite values: sort the deviations themselves
            codes = self.codes
            spread = MAD_TO_SIGMA * _group_median(
                codes, np.abs(self.values - median[codes].astype(np.float32)), groups)
        else:
            spread = np.full(groups, np.nan)
            spread[order.groups] = MAD_TO_SIGMA * deviation
        return GroupSummary(self.counts.copy(), median, spread)


_HASH_BITS = np.uint64(32)
#: entries sorted at once where whole groups can be sorted apart (fits a processor cache)
_SORT_PIECE = 1 << 18
_HASH_MASK = np.uint64(0xFFFFFFFF)
_SIGN_BIT = np.uint32(0x80000000)


def _sort_key(codes: np.ndarray, hashes: np.ndarray) -> np.ndarray:
    """One uint64 per entry ordering by group code, then hash (codes >= 0, hashes < 2**32)."""
    return (codes.astype(np.uint64) << _HASH_BITS) | hashes.astype(np.uint64, copy=False)


@dataclass(frozen=True)
class _RowKeys:
    """The rows of a batch that have a group, sorted by key (group code, top 32 bits of
    the row hash; equal keys in row order): shared by every variable's sample."""

    rows: np.ndarray  # positions in the batch
    codes: np.ndarray  # their group codes (ascending)
    keys: np.ndarray  # their sort keys (ascending)

    @classmethod
    def of(cls, codes: np.ndarray, hashes: np.ndarray) -> _RowKeys:
        """The keys of rows with group ``codes`` (NO_GROUP: none) and 64-bit row ``hashes``."""
        rows = np.flatnonzero(codes >= 0)
        keys = _sort_key(codes[rows], hashes[rows] >> _HASH_BITS)
        order = _sorted_order(keys)
        rows = rows[order]
        return cls(rows, codes[rows], keys[order])


def _renumbered(keys: np.ndarray, values: np.ndarray, codes: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
    """Entries sorted by key, their group ``c`` renamed ``codes[c]``, sorted by new key.

    Renaming keeps each group's entries together and in order, so only the groups need
    reordering (one small sort), not the entries: linear time in the entries.
    """
    groups, starts, entries = _group_runs(keys)
    if not len(groups):
        return keys, values
    new = codes[groups]
    by_new = np.argsort(new, kind="stable")
    starts, entries = starts[by_new], entries[by_new]
    first_out = np.cumsum(entries) - entries
    order = np.repeat(starts - first_out, entries) + np.arange(len(keys))
    renamed = _sort_key(np.repeat(new[by_new], entries), keys[order] & _HASH_MASK)
    return renamed, values[order]


def _codes_of(keys: np.ndarray) -> np.ndarray:
    """The group codes of sort keys (see :func:`_sort_key`)."""
    return (keys >> _HASH_BITS).astype(np.int64)


def _group_runs(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The groups in ascending sort ``keys``: their codes, where each starts, their sizes.

    A binary search per group code where the entries span few codes, else a pass over the
    entries: either way the work does not grow with the number of groups elsewhere.
    """
    if not len(keys):
        return (np.empty(0, dtype=np.int64),) * 3
    first, last = int(keys[0] >> _HASH_BITS), int(keys[-1] >> _HASH_BITS)
    if (last - first) * 16 < len(keys):
        bounds = np.searchsorted(keys, np.arange(first, last + 2, dtype=np.uint64) << _HASH_BITS)
        entries = np.diff(bounds)
        present = np.flatnonzero(entries)
        return present + first, bounds[present], entries[present]
    codes = keys >> _HASH_BITS
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]])
    return codes[starts].astype(np.int64), starts, np.diff(np.r_[starts, len(keys)])


def _sorted_order(keys: np.ndarray) -> np.ndarray:
    """The order sorting ``keys``, equal keys in their given order.

    Equal keys (two rows of a group with equal top hash bits) are rare: a fast unstable
    sort, and a stable one only when it finds some.
    """
    order = np.argsort(keys)
    in_order = keys[order]
    if np.any(in_order[1:] == in_order[:-1]):
        order = np.argsort(keys, kind="stable")
    return order


@dataclass(frozen=True)
class _GroupOrder:
    """Single-precision values sorted within their groups (one sort of (code, value) keys).

    Medians follow pandas' grouped median of float32 data: NaN values are left out, and
    for an even count the median is the mean of the two middle values, rounded to single
    precision; results are double precision, a median of -0.0 given as 0.0.
    """

    keys: np.ndarray  # (code << 32 | orderable value), ascending
    groups: np.ndarray  # the codes of the groups with values
    starts: np.ndarray  # where each of these groups starts in ``keys``
    sizes: np.ndarray  # how many values each has

    @classmethod
    def of(cls, codes: np.ndarray, values: np.ndarray, groups: int) -> _GroupOrder:
        """The order of ``values`` (float32) by group ``codes`` (< ``groups``)."""
        present = ~np.isnan(values)
        if not present.all():
            codes, values = codes[present], values[present]
        entries = np.bincount(codes, minlength=groups)
        has = np.flatnonzero(entries)
        return cls(np.sort(_sort_key(codes, _orderable(values))), has,
                   (np.cumsum(entries) - entries)[has], entries[has])

    @classmethod
    def of_sample(cls, keys: np.ndarray, values: np.ndarray) -> _GroupOrder:
        """The order of a sample's ``values`` (float32, no NaN), its ``keys`` ascending.

        The entries come grouped already: each stretch of whole groups is sorted on its
        own, in pieces that fit a processor cache.
        """
        present, starts, entries = _group_runs(keys)
        ordered = (keys & ~_HASH_MASK) | _orderable(values)
        bounds = np.append(starts, len(keys))
        cuts = bounds[np.searchsorted(bounds, np.arange(0, len(keys), _SORT_PIECE))]
        for start, end in itertools.pairwise([*cuts.tolist(), len(keys)]):
            ordered[start:end].sort()
        return cls(ordered, present, starts, entries)

    def at(self, positions: np.ndarray) -> np.ndarray:
        """The values at ``positions`` of the order."""
        return _from_orderable(self.keys[positions])

    def median(self) -> np.ndarray:
        """Each group's median."""
        return _middle(self.at(self.starts + (self.sizes - 1) // 2),
                       self.at(self.starts + self.sizes // 2), self.sizes)

    def deviation_median(self, centre: np.ndarray) -> np.ndarray | None:
        """Each group's median of ``|value - centre|`` (float32, as the values), or None
        where some value is infinite.

        Within a group the deviations fall on the values' left of the centre and rise on
        its right: two sorted runs, whose middle a binary search per group finds (no sort).
        """
        last = self.starts + self.sizes - 1
        if not (np.isfinite(self.at(self.starts)).all() and np.isfinite(self.at(last)).all()):
            return None
        split = np.searchsorted(self.keys, _sort_key(self.groups, _orderable(centre)))
        # both middle ranks at once: the first half of each array for the lower one
        rank = np.concatenate([(self.sizes - 1) // 2, self.sizes // 2])
        split, centre = np.tile(split, 2), np.tile(centre, 2)
        left = split - np.tile(self.starts, 2)  # deviations ascending from split - 1 down
        right = np.tile(last + 1, 2) - split  # ascending from split up

        def deviation(positions: np.ndarray) -> np.ndarray:
            return np.abs(self.at(positions) - centre)

        # taken = how many of the rank + 1 smallest come from the left run: the first
        # count where the next left one is no smaller than the last right one taken
        low, high = np.maximum(0, rank + 1 - right), np.minimum(rank + 1, left)
        while (searching := low < high).any():
            taken = (low + high) // 2
            from_right = rank + 1 - taken
            valid = searching & (taken < left) & (from_right > 0)
            more = valid & (deviation(np.where(valid, split - 1 - taken, 0))
                            < deviation(np.where(valid, split + from_right - 1, 0)))
            low = np.where(more, taken + 1, low)
            high = np.where(searching & ~more, taken, high)
        from_right = rank + 1 - low
        last_left = np.where(low > 0, deviation(np.where(low > 0, split - low, 0)), -np.inf)
        last_right = np.where(from_right > 0, deviation(
            np.where(from_right > 0, split + from_right - 1, 0)), -np.inf)
        middle = np.maximum(last_left, last_right).astype(np.float32)
        half = len(self.sizes)
        return _middle(middle[:half], middle[half:], self.sizes)


def _middle(low: np.ndarray, high: np.ndarray, sizes: np.ndarray) -> np.ndarray:
    """Medians from the two middle values (float32) of groups of ``sizes`` values."""
    with np.errstate(invalid="ignore"):  # inf and -inf give NaN, as in pandas
        mean = ((low.astype(np.float64) + high) / 2).astype(np.float32)
    # + 0.0 turns a median of -0.0 into 0.0, which signed zeros in another order give
    return np.where(sizes % 2 == 1, low, mean).astype(np.float64) + 0.0


def _group_median(codes: np.ndarray, values: np.ndarray, groups: int) -> np.ndarray:
    """Median of single-precision ``values`` per group code (NaN for groups without values;
    see :class:`_GroupOrder`)."""
    median = np.full(groups, np.nan)
    order = _GroupOrder.of(codes, values, groups)
    median[order.groups] = order.median()
    return median


def _orderable(values: np.ndarray) -> np.ndarray:
    """float32 values (no NaN) as uint32 whose unsigned order is the values' order."""
    bits = values.view(np.uint32)
    return bits ^ (-(bits >> np.uint32(31)) | _SIGN_BIT)


def _from_orderable(keys: np.ndarray) -> np.ndarray:
    """The float32 values of the low 32 bits of sort keys made by :func:`_orderable`."""
    bits = (keys & _HASH_MASK).astype(np.uint32)
    return (bits ^ ((bits >> np.uint32(31)) - np.uint32(1) | _SIGN_BIT)).view(np.float32)


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
        rows = _RowKeys.of(codes, hashes)  # shared by the variables: one sort per batch
        for name, variable in self.variables.items():
            with np.errstate(all="ignore"):  # extreme values are data here too
                values = np.asarray(variable(batch), dtype=float)
            self.samples[name].add_rows(rows, values)

    def merge(self, other: GroupAccumulator, codes: np.ndarray) -> None:
        """Take in ``other``'s state, accumulated over rows after all of this one's.

        ``codes[c]`` is this accumulator's group code for ``other``'s group code ``c``
        (:meth:`GroupKeys.register` of ``other``'s labels in code order gives it).  Merging
        partial states in row order gives exactly the statistics of one pass over all rows.
        """
        for name, sample in self.samples.items():
            sample.merge(other.samples[name], codes)

    def finish(self, groups: int) -> dict[str, GroupSummary]:
        """Statistics by variable, for ``groups`` group codes; the samples are released."""
        summaries = {}
        for name in list(self.samples):
            summaries[name] = self.samples.pop(name).summary(groups)
        return summaries


def group_labels_at(column: pa.Array, rows: np.ndarray) -> list[str]:
    """The group labels of the given rows as text, for messages."""
    return [str(v) for v in pc.take(column, pa.array(rows, type=pa.int64())).to_pylist()]
