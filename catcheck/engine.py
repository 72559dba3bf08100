"""The check engine: stream batches, evaluate rules, count, and hand flags to a sink.

Per batch: canonical arrays (:mod:`catcheck.canonical`), then the column-schema layer
(pandera, for the physical ranges), then the row rules.  Per rule it counts rows checked
(every needed value present and the rule applicable to the row), skipped (some needed
value missing or NaN, or the rule not applicable, e.g. a main-sequence rule on a giant;
never flagged; the not-applicable part is also counted on its own) and flagged.
Memory is bounded by the batch size: flags leave through ``sink`` as they are found, and
only counts and a few examples per rule stay behind.
"""

from __future__ import annotations

import copy
from collections import Counter
from collections.abc import Callable, Collection, Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from catcheck.canonical import (
    Labels,
    PhaseLabels,
    StarBatch,
    canonical_batch,
    load_group_values,
)
from catcheck.checks.base import Outcome
from catcheck.checks.physical_range import RangeSchema
from catcheck.concurrency import can_fork, forked_map, ordered_map, prefetch
from catcheck.flags import flag_records
from catcheck.groups import GroupAccumulator, GroupSummary, GroupVariable
from catcheck.packs import SEVERITY_RANK, Rule
from catcheck.profile import Profile
from catcheck.quantities import QUANTITIES
from catcheck.tuning import release_free_memory

EXAMPLES_PER_RULE = 5


class Catalogue(Protocol):
    """What the engine needs of an input: a schema, a size and ordered batches."""

    schema: pa.Schema
    num_rows: int

    @property
    def description(self) -> str: ...

    def check_columns(self, columns: Sequence[str]) -> None: ...

    def batches(self, columns: Sequence[str], batch_rows: int, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Ordered ``(first_row, batch)`` of ``columns``; text columns in ``dictionary``
        may come as Arrow dictionaries (where the format stores them so)."""


@dataclass
class RuleStats:
    """Counts for one rule over the whole run."""

    rule: Rule
    status: str = "ran"
    checked: int = 0
    skipped: int = 0
    not_applicable: int = 0
    flagged: int = 0
    escalated: int = 0
    assumed_errors: set[str] = field(default_factory=set)
    examples: list[dict[str, Any]] = field(default_factory=list)

    def add(self, tally: RuleTally, flags: pa.Table | None) -> None:
        """Add one batch's counts; keep the first few flags as examples."""
        self.checked += tally.checked
        self.skipped += tally.skipped
        self.not_applicable += tally.not_applicable
        self.flagged += tally.flagged
        self.escalated += tally.escalated
        self.assumed_errors.update(tally.assumed_errors)
        room = EXAMPLES_PER_RULE - len(self.examples)
        if room > 0 and tally.flagged and flags is not None:
            mine = flags.filter(pc.equal(flags["rule"], self.rule.id))
            self.examples.extend(mine.slice(0, room).to_pylist())

    def as_dict(self) -> dict[str, Any]:
        """The rule's entry in summary.json."""
        entry: dict[str, Any] = {
            "id": self.rule.id,
            "pack": self.rule.pack,
            "severity": self.rule.severity,
            "summary": self.rule.summary,
            "status": self.status,
            "checked": self.checked,
            "skipped": self.skipped,
            "not_applicable": self.not_applicable,
            "flagged": self.flagged,
        }
        if self.rule.check.escalates:
            entry["flagged_as_error"] = self.escalated
        if self.rule.check.uses_errors:
            entry["assumed_errors"] = sorted(self.assumed_errors)
            # the values used where the catalogue gives no error (reports show them)
            entry["assumed_error_params"] = {name: value for name, value
                                             in sorted(self.rule.params.items())
                                             if name.startswith("assumed_")}
        return entry


@dataclass
class RunStats:
    """Everything the engine learned, apart from the flags themselves."""

    rows: int = 0
    rules: list[RuleStats] = field(default_factory=list)
    flagged_rows: int = 0
    rows_by_severity: dict[str, int] = field(default_factory=dict)
    flags_by_severity: dict[str, int] = field(default_factory=dict)
    unmapped_phase_labels: dict[str, int] = field(default_factory=dict)

    def add_batch(self, result: BatchResult, sink: FlagSink) -> None:
        """Count one checked batch (batches in row order) and hand its flags to ``sink``."""
        self.rows += result.rows
        runnable = [s for s in self.rules if s.status == "ran"]
        for rule_stats, tally in zip(runnable, result.tallies, strict=True):
            rule_stats.add(tally, result.flags)
        if result.flags is not None:
            _count_rows(self, result.flags, result.rank)
            sink(result.flags)


FlagSink = Callable[[pa.Table], None]
#: sees a checked batch and its flags (None when it has none)
class BatchObserver(Protocol):
    """Something that gathers from every checked batch (a diagram's density image, say).

    ``observe`` sees each batch once with its flags.  With worker processes, each piece is
    observed by a fresh copy of the observer in the worker and the copies are merged back
    here in row order, so ``merge`` must give what observing both parts in turn gives.
    """

    def observe(self, stars: StarBatch, flags: pa.Table | None) -> None: ...

    def merge(self, other: Any) -> None: ...


@dataclass
class RuleTally:
    """One rule's counts on one batch."""

    checked: int
    skipped: int
    not_applicable: int
    flagged: int
    assumed_errors: list[str]
    escalated: int = 0


@dataclass
class BatchResult:
    """Everything one batch contributes: counts per rule and its sorted flag records."""

    rows: int
    tallies: list[RuleTally]
    flags: pa.Table | None = None
    rank: np.ndarray | None = None
    stars: StarBatch | None = None


def run_rules(catalogue: Catalogue, profile: Profile, rules: Sequence[Rule], sink: FlagSink,
              batch_rows: int, progress: Callable[[int], None] | None = None,
              workers: int = 1, observers: Sequence[BatchObserver] = ()) -> RunStats:
    """Check every row of ``catalogue`` against ``rules``; flags go to ``sink`` in row order.

    With ``workers`` > 1, a Parquet catalogue's row groups are checked in that many forked
    worker processes (each reads its own); other inputs have their batches checked in
    threads.  Either way results are taken in row order.  The group pass (pass 1) runs
    here in any case (see :func:`_group_pass`).  Each of ``observers`` sees
    every checked batch once with its flags (see :class:`BatchObserver`).
    """
    stats, checker, labels = start_run(catalogue, profile, rules)

    def converted(reading: Profile = profile) -> Iterator[StarBatch]:
        for first_row, batch in catalogue.batches(reading.columns, batch_rows,
                                                  dictionary=reading.label_columns):
            yield canonical_batch(reading, batch, first_row, labels)

    pieces = _pieces(catalogue, workers)
    group_stats = _group_pass(checker.rules, profile, converted, labels)
    release_free_memory()  # pass 1's samples are gone; pass 2 needs other sizes
    labels.phases.unmapped.clear()  # pass 2 counts the labels again

    def with_group_stats(stars: StarBatch) -> BatchResult:
        stars.group_stats = group_stats
        result = checker.check(stars)
        if observers:
            result.stars = stars
        return result

    if pieces:
        results = _check_pieces(pieces, profile, batch_rows, labels, with_group_stats,
                                workers, observers)
    else:
        results = ordered_map(with_group_stats, prefetch(converted()), workers)
    for result in results:
        if result.stars is not None:  # observed here, in row order
            for observer in observers:
                observer.observe(result.stars, result.flags)
            result.stars = None
        stats.add_batch(result, sink)
        if progress:
            progress(result.rows)
    stats.unmapped_phase_labels = dict(sorted(labels.phases.unmapped.items()))
    return stats


def _pieces(catalogue: Catalogue, workers: int) -> list[Any] | None:
    """The catalogue's independent pieces when worth spreading over processes, else None.

    Processes need a catalogue that can be cut (Parquet row groups), more than one piece
    and a platform that forks.
    """
    if workers <= 1 or not can_fork():
        return None
    cut = getattr(catalogue, "pieces", None)
    pieces = cut() if cut else []
    return pieces if len(pieces) > 1 else None


def _check_pieces(pieces: Sequence[Any], profile: Profile, batch_rows: int, labels: Labels,
                  check: Callable[[StarBatch], BatchResult], workers: int,
                  observers: Sequence[BatchObserver]) -> Iterator[BatchResult]:
    """Check whole pieces in forked worker processes; batch results in row order.

    Each worker reads its piece itself (no batch crosses a process boundary), so only
    flags, counts and the observers' gatherings come back.  Unmapped phase labels are
    counted where the batch is read and added up here; observers are merged here.
    """
    def check_piece(index: int
                    ) -> tuple[list[BatchResult], Counter[str], list[BatchObserver]]:
        labels.phases.unmapped.clear()  # this process's count for this piece only
        watching = [copy.deepcopy(observer) for observer in observers]  # still empty here
        results = []
        for first_row, batch in pieces[index].batches(profile.columns, batch_rows,
                                                      dictionary=profile.label_columns):
            result = check(canonical_batch(profile, batch, first_row, labels))
            if result.stars is not None:
                for observer in watching:
                    observer.observe(result.stars, result.flags)
                result.stars = None
            results.append(result)
        return results, Counter(labels.phases.unmapped), watching

    unmapped = labels.phases.unmapped
    for results, piece_unmapped, watched in forked_map(check_piece, len(pieces), workers):
        unmapped.update(piece_unmapped)
        for observer, piece_observer in zip(observers, watched, strict=True):
            observer.merge(piece_observer)
        yield from results


def start_run(catalogue: Catalogue, profile: Profile, rules: Sequence[Rule]
              ) -> tuple[RunStats, BatchChecker, Labels]:
    """Everything a run needs before its first batch (any engine).

    Checks the profile against the catalogue's columns; returns empty statistics (rules
    the profile cannot feed marked not-run), the checker of the rules that can run, and
    the run's label maps with the ``[groups]`` table's values loaded.
    """
    profile.validate_columns(catalogue.schema, catalogue.description)
    catalogue.check_columns(profile.columns)
    stats = RunStats(rules=[_prepare(rule, profile) for rule in rules])
    stats.rows_by_severity = dict.fromkeys(SEVERITY_RANK, 0)
    stats.flags_by_severity = dict.fromkeys(SEVERITY_RANK, 0)
    checker = BatchChecker([s.rule for s in stats.rules if s.status == "ran"])
    labels = Labels(PhaseLabels(profile.phases))
    labels.group_values = load_group_values(profile, labels.groups)
    return stats, checker, labels


def group_plan(rules: Sequence[Rule], profile: Profile
               ) -> tuple[dict[str, GroupVariable], Profile] | None:
    """What pass 1 aggregates and reads: the group variables of ``rules`` and the profile
    reading only the group and the values of the quantities they need (group variables
    are functions of values: no id or error column is read); None when no rule needs a
    group pass (or the profile has no group column).
    """
    group_rules = [rule for rule in rules if rule.check.group_variables]
    if not group_rules or not profile.group_column:
        return None
    variables = {name: variable for rule in group_rules
                 for name, variable in rule.check.group_variables.items()}
    needed = {quantity for rule in group_rules for quantity in rule.needs}
    needed |= {"initial_mass", "feh"}  # optional inputs of the lifetime relations
    return variables, profile.values_only(needed)


def _group_pass(rules: Sequence[Rule], profile: Profile,
                batches: Callable[[Profile], Iterator[StarBatch]], labels: Labels
                ) -> dict[str, GroupSummary]:
    """Pass 1: aggregate every group variable the rules need over the whole catalogue.

    Only the columns of the quantities the group rules need are read, always in this
    process, with decoding on Arrow's threads and a prefetch thread beside the sampling:
    the pass is mostly decoding, and worker processes would have to send their samples
    back to be merged here, one after another (measured slower: DEVELOPERS.md).
    """
    plan = group_plan(rules, profile)
    if plan is None:
        return {}
    variables, reading = plan
    accumulator = GroupAccumulator(variables)
    for stars in prefetch(batches(reading)):
        accumulator.add(stars)
    return accumulator.finish(len(labels.groups.code_of))


def _prepare(rule: Rule, profile: Profile) -> RuleStats:
    stats = RuleStats(rule)
    missing = [q for q in rule.needs if not profile.provides(q)]
    if rule.check.group_variables and not profile.group_column:
        missing.append("group")
    reason = rule.check.not_run_reason(rule.params) if rule.check.not_run_reason else None
    if missing:
        stats.status = f"not-run: missing {', '.join(missing)}"
    elif reason:
        stats.status = f"not-run: {reason}"
    return stats


class BatchChecker:
    """Checks one batch against a fixed list of rules; safe to call from several threads."""

    def __init__(self, rules: Sequence[Rule]) -> None:
        self.rules = list(rules)
        ranges = [r for r in self.rules if r.check.name == "physical_range"]
        self.schema = RangeSchema(ranges) if ranges else None

    def check(self, stars: StarBatch) -> BatchResult:
        """Counts per rule and the batch's flags sorted by (row, rule order).

        Floating-point warnings (overflow, division by zero, NaN compared) are silenced:
        extreme and missing values are data, which the rules test explicitly.
        """
        with np.errstate(all="ignore"):
            outcomes = self.schema.validate(stars) if self.schema else {}
        tallies, tables = [], []
        for rule in self.rules:
            with np.errstate(all="ignore"):
                outcome = outcomes.get(rule.id) or rule.check.evaluate(stars, rule.params)
                tally, table = _tally(rule, stars, outcome)
            tallies.append(tally)
            if table is not None:
                tables.append(table)
        result = BatchResult(stars.size, tallies)
        if tables:
            result.flags, result.rank = _merge(tables)
        return result


def _tally(rule: Rule, stars: StarBatch, outcome: Outcome) -> tuple[RuleTally, pa.Table | None]:
    """One rule's counts on a batch, and its flag records (None if it flagged no row)."""
    available = stars.has_all(rule.row_needs)
    checked = int(np.count_nonzero(available))
    not_applicable = 0
    if outcome.applies is not None:
        available = available & outcome.applies
        applicable = int(np.count_nonzero(available))
        not_applicable, checked = checked - applicable, applicable
    assumed = _assumed_errors(rule.needs, stars, available) if rule.check.uses_errors else []
    positions = np.flatnonzero(outcome.failed & available)
    tally = RuleTally(checked, stars.size - checked, not_applicable, len(positions), assumed)
    if not len(positions):
        return tally, None
    escalate = None
    if outcome.beyond_doubt is not None and rule.severity == "warning":
        escalate = outcome.beyond_doubt[positions]
        tally.escalated = int(escalate.sum())
    table = flag_records(rule.id, rule.severity, stars.first_row, positions, stars.ids,
                         outcome.describe(positions), outcome.observed, outcome.expected,
                         outcome.deviation, escalate)
    return tally, table


def _assumed_errors(needs: Sequence[str], stars: StarBatch, available: np.ndarray
                    ) -> list[str]:
    """Needed quantities whose 1-sigma the catalogue lacks in some checked row."""
    assumed = []
    for quantity in needs:
        if not QUANTITIES[quantity].numeric:
            continue
        if quantity not in stars.errors or (
                stars.missing_error(quantity).any()  # cheap test first: most columns are full
                and (stars.missing_error(quantity) & available).any()):
            assumed.append(quantity)
    return assumed


def _merge(tables: list[pa.Table]) -> tuple[pa.Table, np.ndarray]:
    """One batch's flags sorted by (row, rule order), and the severity rank of each flag.

    ``tables`` holds one table per rule, in rule order.
    """
    flags = pa.concat_tables(tables)
    sizes = [t.num_rows for t in tables]
    rule_order = np.repeat(np.arange(len(tables)), sizes)
    rank = np.zeros(flags.num_rows, dtype=np.int8)
    for name, value in SEVERITY_RANK.items():
        if value:
            rank[pc.equal(flags["severity"], name).to_numpy(zero_copy_only=False)] = value
    order = np.lexsort((rule_order, flags["row"].to_numpy()))
    return flags.take(pa.array(order)), rank[order]


def _count_rows(stats: RunStats, flags: pa.Table, rank: np.ndarray) -> None:
    rows = flags["row"].to_numpy()
    unique, inverse = np.unique(rows, return_inverse=True)
    worst = np.full(len(unique), -1, dtype=np.int8)
    np.maximum.at(worst, inverse, rank)
    stats.flagged_rows += len(unique)
    for name, value in SEVERITY_RANK.items():
        stats.rows_by_severity[name] += int((worst == value).sum())
        stats.flags_by_severity[name] += int((rank == value).sum())
