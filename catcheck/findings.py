"""Catalogue-level findings: what a rule's flags, taken together, say about a column.

A row flag says "this value is odd".  When a unit-blunder rule
(:mod:`catcheck.checks.unit_blunders`) fires, the flags together also say something about
the column: if most of its values read as another unit, the column's declared unit is
wrong, not its stars; if a sizeable share does, the column mixes units.  After a run,
every unit-blunder rule that flagged the whole column (WHOLE_COLUMN_FRACTION) or enough
rows for a mix of units (MIX_MIN_FRACTION and MIX_MIN_ROWS) becomes one *finding*
(summary.json ``catalogue_findings``) with the evidence: rows flagged, the fraction of
rows checked, the median value as catalogued and in the suggested unit.  Fewer flagged
rows are isolated odd values, not a statement about the column: they keep their row
flags and make no finding.

The medians come from :class:`FlagStatistics`, which sees every flag of a run as it leaves
the engine (it wraps the flag sink, so it works for any number of workers) and keeps, per
rule, a bounded sample of flagged rows (the rows with the smallest hash of their row
number, so the sample does not depend on batch size or file split) and the flags with
the largest deviation (the worst examples of the visual report).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from catcheck import markdown as md
from catcheck.checks.base import fmt
from catcheck.checks.unit_blunders import BLUNDERS, declared_unit
from catcheck.groups import row_hash
from catcheck.profile import Profile

if TYPE_CHECKING:
    from catcheck.engine import RuleStats

#: flagged rows kept per rule for medians (exact below this many flags)
SAMPLE_SIZE = 4096
#: flags with the largest deviation kept per rule
WORST_PER_RULE = 5
#: a finding covers the whole column when at least this fraction of its rows is flagged
WHOLE_COLUMN_FRACTION = 0.5
#: below the whole column, a finding of "a mix of units" needs at least this fraction of
#: the checked rows and at least MIX_MIN_ROWS rows.  In a column whose unit is right, rows
#: that read as another unit are isolated typos or coincidences (the 20,000-row demo's
#: planted 0.5-1 dex luminosity offsets once gave 7 such rows, 0.04%); merged sources that
#: mix units affect blocks of rows.  0.5% is ten times that coincidence rate and still
#: finds a mix in 1 row of 200.
MIX_MIN_FRACTION = 0.005
#: ... and at least this many rows, so that one odd row of a small table is not a finding
MIX_MIN_ROWS = 5

FlagSink = Callable[[pa.Table], None]


class RowSample:
    """The ``size`` rows with the smallest row hash among those added, with named columns.

    Deterministic: the kept set depends only on the rows added, not on the order or the
    batches they came in; :meth:`columns` returns them in hash order.
    """

    def __init__(self, size: int) -> None:
        self.size = size
        self.hashes = np.empty(0, dtype=np.uint64)
        self.values: dict[str, np.ndarray] = {}
        self.cutoff: np.uint64 | None = None  # the largest kept hash once the sample is full

    def add(self, rows: np.ndarray, **columns: np.ndarray) -> None:
        """Offer rows (absolute row numbers) and their values, one array per column."""
        hashes = row_hash(np.asarray(rows))
        if self.cutoff is not None:
            below = hashes < self.cutoff
            hashes = hashes[below]
            columns = {name: values[below] for name, values in columns.items()}
        if not len(hashes):
            return
        self.hashes = np.concatenate([self.hashes, hashes])
        for name, values in columns.items():
            kept = self.values.get(name, np.empty(0, dtype=np.asarray(values).dtype))
            self.values[name] = np.concatenate([kept, values])
        if len(self.hashes) > 2 * self.size:
            self._cut()

    def merge(self, other: RowSample) -> None:
        """Take in another sample: the result is the sample of both sets of rows."""
        if not len(other.hashes):
            return
        self.hashes = np.concatenate([self.hashes, other.hashes])
        for name, values in other.values.items():
            kept = self.values.get(name, np.empty(0, dtype=values.dtype))
            self.values[name] = np.concatenate([kept, values])
        if len(self.hashes) > self.size:
            self._cut()

    def _cut(self) -> None:
        keep = np.argpartition(self.hashes, self.size - 1)[:self.size]
        self.hashes = self.hashes[keep]
        self.values = {name: values[keep] for name, values in self.values.items()}
        self.cutoff = self.hashes.max()

    def columns(self) -> dict[str, np.ndarray]:
        """The kept rows' columns, in increasing hash order."""
        if len(self.hashes) > self.size:
            self._cut()
        order = np.argsort(self.hashes, kind="stable")
        return {name: values[order] for name, values in self.values.items()}


@dataclass
class _RuleFlags:
    """What :class:`FlagStatistics` keeps of one rule's flags."""

    sample: RowSample
    worst: list[dict[str, Any]] = field(default_factory=list)
    worst_floor: float = -np.inf  # a new flag must beat this to enter a full worst list


def _score(deviation: np.ndarray) -> np.ndarray:
    """Deviation for ranking: NaN (no sigma) ranks below every number."""
    return np.where(np.isnan(deviation), -np.inf, deviation)


class FlagStatistics:
    """Per rule: a bounded sample of flagged values and the worst flags of a run.

    Feed it every flags table of a run in row order (:meth:`feeding` wraps a sink).
    """

    def __init__(self, sample_size: int = SAMPLE_SIZE, worst: int = WORST_PER_RULE) -> None:
        self.sample_size = sample_size
        self.worst_count = worst
        self.rules: dict[str, _RuleFlags] = {}

    def feeding(self, sink: FlagSink) -> FlagSink:
        """A sink that hands each flags table to ``sink`` and to these statistics."""
        def both(flags: pa.Table) -> None:
            sink(flags)
            self.add(flags)
        return both

    def add(self, flags: pa.Table) -> None:
        """Take one batch of flags (the flags schema, batches in row order)."""
        if not flags.num_rows:
            return
        encoded = pc.dictionary_encode(flags["rule"].combine_chunks())
        codes = encoded.indices.to_numpy()
        order = np.argsort(codes, kind="stable")
        bounds = np.r_[0, np.cumsum(np.bincount(codes, minlength=len(encoded.dictionary)))]
        rows = flags["row"].to_numpy()
        observed = flags["observed"].to_numpy()
        expected = flags["expected"].to_numpy()
        score = _score(flags["deviation"].to_numpy())
        for code, rule_id in enumerate(encoded.dictionary.to_pylist()):
            positions = order[bounds[code]:bounds[code + 1]]
            kept = self.rules.setdefault(rule_id, _RuleFlags(RowSample(self.sample_size)))
            kept.sample.add(rows[positions], observed=observed[positions],
                            expected=expected[positions])
            self._add_worst(kept, flags, positions, rows, score)

    def _add_worst(self, kept: _RuleFlags, flags: pa.Table, positions: np.ndarray,
                   rows: np.ndarray, score: np.ndarray) -> None:
        # batches come in row order and ties go to the earlier row, so once the list is
        # full only a strictly larger deviation can enter it
        if len(kept.worst) >= self.worst_count:
            positions = positions[score[positions] > kept.worst_floor]
        if not len(positions):
            return
        best = np.lexsort((rows[positions], -score[positions]))[:self.worst_count]
        chosen = positions[best]
        records = flags.take(pa.array(chosen)).to_pylist()
        for record, value in zip(records, score[chosen].tolist(), strict=True):
            record["_score"] = value
        merged = sorted(kept.worst + records, key=lambda r: (-r["_score"], r["row"]))
        kept.worst = merged[:self.worst_count]
        if len(kept.worst) >= self.worst_count:
            kept.worst_floor = kept.worst[-1]["_score"]

    def median(self, rule_id: str, column: str = "observed") -> float:
        """Median of a flags column over the rule's sample of flagged rows (NaN if none)."""
        kept = self.rules.get(rule_id)
        values = kept.sample.columns().get(column) if kept else None
        if values is None or not len(values) or np.isnan(values).all():
            return float("nan")
        return float(np.nanmedian(values))

    def worst(self, rule_id: str) -> list[dict[str, Any]]:
        """The rule's flags with the largest deviation (rows first for equal or no deviation),
        as flag records."""
        kept = self.rules.get(rule_id)
        if kept is None:
            return []
        return [{k: v for k, v in record.items() if k != "_score"} for record in kept.worst]


def catalogue_findings(rule_stats: Sequence[RuleStats], profile: Profile,
                       flags: FlagStatistics) -> list[dict[str, Any]]:
    """One finding per unit-blunder rule that flagged the whole column or a mix of units
    (enough rows: MIX_MIN_FRACTION, MIX_MIN_ROWS), in rule order (summary.json)."""
    findings = []
    for stats in rule_stats:
        blunder = BLUNDERS.get(stats.rule.check.name)
        if blunder is None or not stats.flagged or not stats.checked:
            continue
        quantity = blunder.quantity
        declared = declared_unit(profile, quantity) or blunder.declared_unit
        fraction = stats.flagged / stats.checked
        median = flags.median(stats.rule.id, "observed")
        median_as_suggested = flags.median(stats.rule.id, "expected")
        suggested = blunder.suggest(median, stats.rule.params)
        scope = "column" if fraction >= WHOLE_COLUMN_FRACTION else "rows"
        if scope == "rows" and (fraction < MIX_MIN_FRACTION or stats.flagged < MIX_MIN_ROWS):
            continue  # isolated rows: their flags say all there is to say
        column = _column_name(profile, quantity)
        unit = blunder.declared_unit  # the unit observed and expected values are given in
        evidence = (
            f"{stats.flagged:,} of {stats.checked:,} values ({_percent(fraction)}) of column "
            f"{column!r} look like {suggested} rather than {declared}: median "
            f"{fmt(median)} {unit} as catalogued, {fmt(median_as_suggested)} {unit} if in "
            f"{suggested}; "
            + (f"the whole column looks mislabelled: declare it as {suggested}"
               if scope == "column" else
               "only some rows: a mix of units, or values from another column"))
        findings.append({
            "rule": stats.rule.id,
            "quantity": quantity,
            "column": column,
            "declared_unit": declared,
            "suggested_unit": suggested,
            "severity": "error" if scope == "column" else stats.rule.severity,
            "scope": scope,
            "rows": stats.flagged,
            "checked": stats.checked,
            "fraction": round(fraction, 6),
            "median": _finite_or_none(median),
            "median_as_suggested": _finite_or_none(median_as_suggested),
            "evidence": evidence,
        })
    return findings


def finding_lines(summary: Mapping[str, Any], markdown: bool = False) -> list[str]:
    """The summary's catalogue-level findings for people: console lines or a Markdown
    section (nothing when there are none)."""
    findings = summary.get("catalogue_findings") or []
    if not findings:
        return []
    if not markdown:
        lines = ["  catalogue-level findings (once per column):"]
        lines += [f"    {f['severity']}: {f['quantity']}: {f['evidence']} ({f['rule']})"
                  for f in findings]
        return lines
    lines = ["", "### Catalogue-level findings", "",
             "Columns whose values contradict their declared unit, once per column "
             "(the rows are also flagged one by one):", ""]
    lines += [f"- **{f['severity']}**, {f['quantity']}: "
              f"{md.text(f['evidence'])} (`{f['rule']}`)" for f in findings]
    return lines


def _column_name(profile: Profile, quantity: str) -> str:
    """The catalogue column of a quantity, or the group table's column."""
    if quantity in profile.quantities:
        return profile.quantities[quantity].column
    assert profile.groups is not None
    return f"{profile.groups.table.name}:{profile.groups.quantities[quantity].column}"


def _percent(fraction: float) -> str:
    return f"{100 * fraction:.3g}%"


def _finite_or_none(value: float) -> float | None:
    """JSON has no NaN or infinity: those become null."""
    return float(value) if np.isfinite(value) else None
