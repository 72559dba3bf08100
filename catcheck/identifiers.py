"""Duplicate identifiers: rows whose id is also another row's, counted in bounded memory.

A repeated id is data, not an error: every row is still checked and flagged by its
position (``row``), so nothing is lost; but a table meant to hold one row per star
usually holds a join or concatenation mistake when ids repeat, so the summary reports
them (``duplicate_ids``) and the console and report.md show them.  They never fail the
gate.

Ids are compared as the text the flags table shows (an integer id 42 and a text id "42"
are the same), by a 64-bit hash.  Memory is bounded: at most :data:`MAX_TRACKED_IDS`
distinct hashes are kept.  Beyond that, only ids whose hash falls in a fixed, ever
smaller fraction of the hash range are kept (distinct sampling: every copy of a kept id
is counted, so repeats are counted exactly within the sample); the counts are then
scaled up by that fraction and reported with ``exact = false``.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import Any, Protocol

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

MAX_TRACKED_IDS = 1 << 21
"""Most distinct id hashes kept (16 bytes each) before the count turns to sampling."""

EXAMPLES = 5
"""Repeated ids named in the summary."""

_HASH_BITS = 64


class _Batches(Protocol):
    def batches(self, columns: Sequence[str], batch_rows: int
                ) -> Iterator[tuple[int, pa.RecordBatch]]: ...


class DuplicateIds:
    """Accumulates id hashes batch by batch; :meth:`summary` reports the repeats."""

    def __init__(self, max_tracked: int = MAX_TRACKED_IDS) -> None:
        self.max_tracked = max_tracked
        self.level = 0  # ids are kept when their hash is below 2**(64 - level)
        self.hashes = np.empty(0, dtype=np.uint64)  # sorted, distinct
        self.counts = np.empty(0, dtype=np.int64)  # rows of each hash
        self.rows_without_id = 0
        self.examples: dict[str, np.uint64] = {}  # the first repeated ids, in row order

    def add(self, ids: pa.Array) -> None:
        """Count one batch of ids (any Arrow type; compared as text, nulls counted apart)."""
        self.rows_without_id += ids.null_count
        # Hash the UTF-8 bytes: a damaged file may hold text that is not valid UTF-8.
        raw = pc.cast(pc.cast(ids.drop_null(), pa.string()), pa.binary())
        text = raw.to_numpy(zero_copy_only=False)
        hashes = pd.util.hash_array(text, categorize=False)
        keep = self._kept(hashes)
        hashes, text = hashes[keep], text[keep]
        batch, counts = np.unique(hashes, return_counts=True)
        at = np.searchsorted(self.hashes, batch)
        known = at < len(self.hashes)
        known[known] = self.hashes[at[known]] == batch[known]
        repeated = known | (counts > 1)
        if len(self.examples) < EXAMPLES and repeated.any():
            rows = np.flatnonzero(np.isin(hashes, batch[repeated]))
            first = rows[np.sort(np.unique(hashes[rows], return_index=True)[1])][:EXAMPLES]
            self._note_examples(text[first], hashes[first])  # each id's first row, in order
        self.counts[at[known]] += counts[known]
        fresh = ~known
        self.hashes = np.insert(self.hashes, at[fresh], batch[fresh])
        self.counts = np.insert(self.counts, at[fresh], counts[fresh])
        while len(self.hashes) > self.max_tracked:
            self.level += 1
            keep = self._kept(self.hashes)
            self.hashes, self.counts = self.hashes[keep], self.counts[keep]

    def _kept(self, hashes: np.ndarray) -> np.ndarray:
        if not self.level:
            return np.ones(len(hashes), dtype=bool)
        return hashes < np.uint64(1 << (_HASH_BITS - self.level))

    def _note_examples(self, ids: np.ndarray, hashes: np.ndarray) -> None:
        for id_bytes, hashed in zip(ids.tolist(), hashes, strict=True):
            if len(self.examples) >= EXAMPLES:
                return
            self.examples.setdefault(id_bytes.decode("utf-8", errors="replace"), hashed)

    def summary(self) -> dict[str, Any]:
        """``repeated_ids`` (ids on more than one row), ``rows_with_repeated_id`` (all rows
        carrying them), ``rows_without_id``, ``examples`` (id -> rows) and ``exact``."""
        repeated = self.counts > 1
        scale = 2**self.level
        examples = {}
        for id_text, hashed in self.examples.items():
            at = int(np.searchsorted(self.hashes, hashed))
            if at < len(self.hashes) and self.hashes[at] == hashed and self.counts[at] > 1:
                examples[id_text] = int(self.counts[at])
        return {
            "repeated_ids": int(repeated.sum()) * scale,
            "rows_with_repeated_id": int(self.counts[repeated].sum()) * scale,
            "rows_without_id": self.rows_without_id,
            "examples": examples,
            "exact": self.level == 0,
        }


def duplicate_ids(catalogue: _Batches, id_column: str,
                  batch_rows: int = 262_144) -> dict[str, Any]:
    """Read only the id column of ``catalogue`` and report its repeated ids."""
    counter = DuplicateIds()
    for _, batch in catalogue.batches([id_column], batch_rows):
        counter.add(batch.column(0))
    return counter.summary()
