"""Per-row outputs: the annotated catalogue, the clean/flagged split, and row masks.

After the check, a second streaming pass reads the input in record batches with all its
columns and walks the staged flags file in step (the engine writes flags in row order), so
memory stays bounded by the batch size whatever the number of rows.  For each batch the
flags become, with numpy and no loop per row:

* ``qc_flags`` (uint64): bit ``i`` is set when the rule with bit ``i`` flagged the row.  Bits
  follow the order of the run's rules (summary.json ``rules``); a rule that could not run
  keeps its bit, always 0.  The bit map is ``qc_bits`` in summary.json and in the field
  metadata of ``qc_flags``.
* ``qc_severity`` (dictionary-encoded string): the worst severity among the row's flags,
  null when the row has none.

A row is *flagged* (``flagged.parquet``) when it has at least one error or warning flag:
the rows the gate's ``--max-flagged-fraction`` counts.  Info flags alone never make a row
flagged, as they never fail a run; such rows go to ``clean.parquet`` and keep their bits in
the annotated catalogue.  Clean and flagged partition the input: every row is in exactly
one of them, in input order, with every column unchanged.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from catcheck.errors import UsageError
from catcheck.outputs import ReportDirectory
from catcheck.packs import SEVERITY_RANK
from catcheck.profile import did_you_mean

QC_FLAGS = "qc_flags"
QC_SEVERITY = "qc_severity"
MAX_QC_BITS = 64
ANNOTATED = "annotated.parquet"
CLEAN = "clean.parquet"
FLAGGED = "flagged.parquet"
#: lowest severity that puts a row into flagged.parquet (as the gate's flagged fraction)
SPLIT_SEVERITY = "warning"

#: severities from least to most severe; a row's worst rank indexes this list
_BY_RANK = sorted(SEVERITY_RANK, key=SEVERITY_RANK.__getitem__)
_SEVERITY_VALUES = pa.array(_BY_RANK, pa.string())
_NO_FLAG = -1


class FullCatalogue(Protocol):
    """An input that can be read with every column (see :mod:`catcheck.reader`)."""

    @property
    def description(self) -> str: ...

    def full_schema(self) -> pa.Schema: ...

    def full_batches(self, batch_rows: int) -> Iterator[tuple[int, pa.RecordBatch]]: ...


def qc_bit_map(rule_ids: Sequence[str]) -> dict[str, int]:
    """Bit of each rule in ``qc_flags``: the rules in run order, from bit 0."""
    if len(rule_ids) > MAX_QC_BITS:
        raise UsageError(
            f"--annotate gives each rule one bit of the {MAX_QC_BITS}-bit qc_flags column, "
            f"but this run has {len(rule_ids)} rules",
            fix=f"run at most {MAX_QC_BITS} rules (fewer --rules packs, or enabled = false "
                "in a pack), or use --split alone")
    return {rule: bit for bit, rule in enumerate(rule_ids)}


@dataclass(frozen=True)
class RowMarks:
    """What the flags say about each row of one batch."""

    qc_flags: np.ndarray  # uint64, one bit per rule
    worst: np.ndarray  # int8 severity rank of the worst flag, -1 where none

    def severity(self) -> pa.DictionaryArray:
        """``qc_severity``: the worst severity's name, null where the row has no flag."""
        indices = pa.array(self.worst, pa.int8(), mask=self.worst == _NO_FLAG)
        return pa.DictionaryArray.from_arrays(indices, _SEVERITY_VALUES)

    def flagged(self) -> np.ndarray:
        """True for rows that belong in flagged.parquet (an error or warning flag)."""
        return self.worst >= SEVERITY_RANK[SPLIT_SEVERITY]


def row_marks(num_rows: int, local_rows: np.ndarray, bits: np.ndarray | None,
              ranks: np.ndarray) -> RowMarks:
    """Combine flags sorted by row into per-row bit masks and worst severities.

    ``local_rows`` are positions within the batch (non-decreasing), ``bits`` each flag's
    rule bit (None: no ``qc_flags`` wanted, all zero), ``ranks`` each flag's severity rank.
    """
    qc_flags = np.zeros(num_rows, dtype=np.uint64)
    worst = np.full(num_rows, _NO_FLAG, dtype=np.int8)
    if len(local_rows):
        steps = np.diff(local_rows)
        if (steps < 0).any():
            raise RuntimeError("flags are not sorted by row")  # an engine bug, not the user's
        starts = np.concatenate(([0], np.flatnonzero(steps) + 1))
        rows = local_rows[starts]
        worst[rows] = np.maximum.reduceat(ranks, starts)
        if bits is not None:
            values = np.left_shift(np.uint64(1), bits.astype(np.uint64))
            qc_flags[rows] = np.bitwise_or.reduceat(values, starts)
    return RowMarks(qc_flags, worst)


class FlagWalk:
    """Reads flags sorted by row, handing out the flags of consecutive row ranges."""

    def __init__(self, flags: pq.ParquetFile, bits: Mapping[str, int] | None,
                 batch_rows: int) -> None:
        columns = ["row", "severity"] + (["rule"] if bits is not None else [])
        self._batches = flags.iter_batches(batch_size=batch_rows, columns=columns)
        self._rule_ids = pa.array(list(bits), pa.string()) if bits is not None else None
        self._bit_values = (np.array(list(bits.values()), np.int64) if bits is not None
                            else None)
        self._rows = np.empty(0, np.int64)
        self._bits: np.ndarray | None = np.empty(0, np.int64) if bits is not None else None
        self._ranks = np.empty(0, np.int8)
        self._exhausted = False

    def marks(self, first_row: int, num_rows: int) -> RowMarks:
        """The marks of rows ``first_row`` .. ``first_row + num_rows - 1``; call in row order."""
        end = first_row + num_rows
        while not self._exhausted and (not len(self._rows) or self._rows[-1] < end):
            self._pull()
        take = int(np.searchsorted(self._rows, end, side="left"))
        rows, self._rows = self._rows[:take], self._rows[take:]
        ranks, self._ranks = self._ranks[:take], self._ranks[take:]
        bits = None
        if self._bits is not None:
            bits, self._bits = self._bits[:take], self._bits[take:]
        if len(rows) and rows[0] < first_row:
            raise RuntimeError("flags are not sorted by row")
        return row_marks(num_rows, rows - first_row, bits, ranks)

    def finish(self) -> None:
        """Check that no flag is left over (every flag names a row of the input)."""
        while not self._exhausted:
            self._pull()
        if len(self._rows):
            raise RuntimeError(f"flags name row {self._rows[0]}, beyond the input")

    def _pull(self) -> None:
        batch = next(self._batches, None)
        if batch is None:
            self._exhausted = True
            return
        rank = pc.index_in(batch.column("severity"), value_set=_SEVERITY_VALUES)
        self._rows = np.concatenate((self._rows, batch.column("row").to_numpy()))
        self._ranks = np.concatenate((self._ranks, rank.to_numpy(zero_copy_only=False)
                                      .astype(np.int8)))
        if self._bits is not None:
            index = pc.index_in(batch.column("rule"), value_set=self._rule_ids)
            if index.null_count:
                raise RuntimeError("a flag names a rule outside the run")
            bits = self._bit_values[index.to_numpy(zero_copy_only=False)]
            self._bits = np.concatenate((self._bits, bits))


@dataclass(frozen=True)
class RowOutputs:
    """The per-row outputs a run writes (``--annotate``, ``--split``), checked up front."""

    schema: pa.Schema  # the input's, every column
    bits: dict[str, int] | None  # None without --annotate
    split: bool

    @classmethod
    def plan(cls, catalogue: FullCatalogue, rule_ids: Sequence[str], *, annotate: bool,
             split: bool) -> RowOutputs | None:
        """Validate the request before the check runs; None when nothing is asked for."""
        if not (annotate or split):
            return None
        bits = qc_bit_map(rule_ids) if annotate else None
        schema = catalogue.full_schema()
        if annotate:
            for name in (QC_FLAGS, QC_SEVERITY):
                if name in schema.names:
                    raise UsageError(f"the catalogue already has a column {name!r}, which "
                                     "--annotate adds", where=catalogue.description,
                                     fix="rename that column, or use --split")
        return cls(schema, bits, split)

    @property
    def annotated_schema(self) -> pa.Schema:
        """The input's schema plus ``qc_flags`` (with the bit map) and ``qc_severity``."""
        bit_map = json.dumps(self.bits or {})
        return (self.schema
                .append(pa.field(QC_FLAGS, pa.uint64(), nullable=False,
                                 metadata={"qc_bits": bit_map}))
                .append(pa.field(QC_SEVERITY, pa.dictionary(pa.int8(), pa.string()))))

    def write(self, catalogue: FullCatalogue, flags: Path, report: ReportDirectory,
              batch_rows: int) -> dict[str, Any]:
        """Stream the input and the flags once; stage the files; return summary entries."""
        annotated = self.annotated_schema if self.bits is not None else None
        counts = {CLEAN: 0, FLAGGED: 0}
        with (pq.ParquetFile(flags) as source,
              report.parquet_writers([ANNOTATED] if annotated else [], annotated or self.schema)
              as annotating,
              report.parquet_writers([CLEAN, FLAGGED] if self.split else [], self.schema)
              as splitting):
            walk = FlagWalk(source, self.bits, batch_rows)
            for first_row, batch in catalogue.full_batches(batch_rows):
                marks = walk.marks(first_row, batch.num_rows)
                if annotated is not None:
                    columns = [*batch.columns, pa.array(marks.qc_flags, pa.uint64()),
                               marks.severity()]
                    annotating[ANNOTATED].write_batch(
                        pa.RecordBatch.from_arrays(columns, schema=annotated))
                if self.split:
                    flagged = marks.flagged()
                    for name, keep in ((CLEAN, ~flagged), (FLAGGED, flagged)):
                        part = batch.filter(pa.array(keep))
                        counts[name] += part.num_rows
                        if part.num_rows:
                            splitting[name].write_batch(part)
            walk.finish()
        entries: dict[str, Any] = {}
        if self.bits is not None:
            entries["qc_bits"] = dict(self.bits)
        if self.split:
            counted = " or ".join(_BY_RANK[SEVERITY_RANK[SPLIT_SEVERITY]:])
            entries["split"] = {"clean": counts[CLEAN], "flagged": counts[FLAGGED],
                                "flagged_means": f"at least one {counted} flag"}
        return entries


def flagged_mask(flags: pa.Table, num_rows: int, rule_ids: Sequence[str],
                 severity: str = SPLIT_SEVERITY, rules: Sequence[str] | None = None
                 ) -> np.ndarray:
    """Boolean mask over the input rows: True where a flag at or above ``severity`` exists.

    ``flags`` needs the ``row``, ``rule`` and ``severity`` columns; ``rule_ids`` are the
    rules of the run (to catch misspelt ``rules``); ``rules`` restricts the mask to some
    rule ids (all by default).
    """
    if severity not in SEVERITY_RANK:
        raise UsageError(f"unknown severity {severity!r}",
                         fix=did_you_mean(str(severity), SEVERITY_RANK)
                         or f"use one of {', '.join(_BY_RANK)}")
    if isinstance(rules, str):
        rules = [rules]
    for rule in rules or ():
        if rule not in rule_ids:
            raise UsageError(f"rule {rule!r} was not part of this run",
                             fix=did_you_mean(rule, rule_ids)
                             or "see result.summary['rules'] for the rule ids")
    threshold = pa.array(_BY_RANK[SEVERITY_RANK[severity]:], pa.string())
    keep = pc.is_in(flags["severity"], value_set=threshold)
    if rules is not None:
        keep = pc.and_(keep, pc.is_in(flags["rule"], value_set=pa.array(list(rules),
                                                                        pa.string())))
    rows = flags["row"].filter(keep).to_numpy()
    mask = np.zeros(num_rows, dtype=bool)
    mask[rows] = True
    return mask
