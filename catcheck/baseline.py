"""A release against the previous one: new, resolved and persisting flags per rule.

Flags are matched by (id, rule), never by row position, so rows may be reordered, added
or removed between releases.  A flag of the new run is *persisting* when the old flags
hold the same (id, rule), *new* when they do not; an old flag with no partner in the new
run is *resolved*: its row was fixed, lost the values the rule needs, or left the
catalogue (the flags alone cannot tell these apart).

Duplicate ids make (id, rule) ambiguous, so the two sides are matched as multisets: a key
flagged ``a`` times in the old run and ``b`` times in the new one counts ``min(a, b)``
persisting, ``b - a`` new (when ``b > a``) and ``a - b`` resolved (when ``a > b``).  Which
of ``b`` duplicates are the new ones is decided by row order: the first ``a`` persist.
Rows without an id (null) share one key per rule and are matched the same way.

The comparison runs in Arrow: group-by counts per key on each side, a full outer join of
the two count tables, and a left join of the new flags' keys onto it; only keys that
duplicate ids leave ambiguous are sorted to rank their flags.  No Python loop per flag.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from catcheck.errors import UsageError
from catcheck.outputs import FORMATS, read_flags

CHANGES = ("new", "resolved", "persisting")
#: flags columns the comparison reads from a flags file
COMPARED_COLUMNS = ("row", "id", "rule", "severity", "message")
#: new flags kept per rule as examples (for report.md and the JUnit failure text)
EXAMPLES_PER_RULE = 5

_ID, _NO_ID, _RULE = "_id", "_no_id", "rule"
_KEYS = [_ID, _NO_ID, _RULE]


@dataclass(frozen=True)
class RuleChange:
    """One rule's flags against the baseline."""

    new: int = 0
    resolved: int = 0
    persisting: int = 0

    def as_dict(self) -> dict[str, int]:
        return {"new": self.new, "resolved": self.resolved, "persisting": self.persisting}


@dataclass(frozen=True)
class Comparison:
    """New, resolved and persisting flags, in total and per rule (rule ids sorted).

    ``new_by_severity`` gives, per rule with new flags, their count per severity (what the
    ratchet gate counts); ``new_examples`` the first new flags of each rule in row order
    (row, id, rule, severity, message).  ``not_rechecked`` counts old flags of rules the new
    run did not run (neither resolved nor persisting: nobody looked again).
    """

    by_rule: dict[str, RuleChange]
    new_by_severity: dict[str, dict[str, int]] = field(default_factory=dict)
    new_examples: dict[str, list[dict[str, Any]]] = field(default_factory=dict)
    not_rechecked: dict[str, int] = field(default_factory=dict)

    @property
    def new(self) -> int:
        return sum(c.new for c in self.by_rule.values())

    @property
    def resolved(self) -> int:
        return sum(c.resolved for c in self.by_rule.values())

    @property
    def persisting(self) -> int:
        return sum(c.persisting for c in self.by_rule.values())

    def as_dict(self) -> dict[str, Any]:
        """``{"new", "resolved", "persisting", "by_rule": {rule: {new, resolved, persisting}}}``
        (the output of ``catcheck compare --json``)."""
        return {"new": self.new, "resolved": self.resolved, "persisting": self.persisting,
                "by_rule": {rule: change.as_dict() for rule, change in self.by_rule.items()}}


def read_flags_file(path: str | Path, role: str = "baseline",
                    columns: Sequence[str] = COMPARED_COLUMNS) -> pa.Table:
    """Read and validate a flags file written by ``catcheck check`` (any of its formats).

    Raises :class:`~catcheck.errors.UsageError` (exit code 2) naming the file when it is
    missing, unreadable, of an unknown format or not in the flags schema.  ``role`` names
    the file in the message ("baseline", "old flags", ...).
    """
    path = Path(path)

    def refuse(what: str) -> UsageError:
        return UsageError(f"the {role} flags file {what}", where=str(path),
                          fix="give a flags.parquet, flags.csv or flags.jsonl written by "
                              "'catcheck check'")

    suffix = path.suffix.lstrip(".")
    if suffix not in FORMATS:
        raise refuse(f"has an unknown format {path.suffix or '(no suffix)'!r}")
    if not path.is_file():
        raise refuse("does not exist" if not path.exists() else "is not a file")
    try:
        table = read_flags(path, list(columns))
    except (OSError, ValueError, KeyError, TypeError, pa.ArrowException) as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise refuse(f"cannot be read as flags: {reason[:200]}") from None
    for name in columns:
        kind = table.schema.field(name).type
        text = pa.types.is_string(kind) or pa.types.is_large_string(kind) or pa.types.is_null(
            kind)
        if not (kind == pa.int64() if name == "row" else text):
            wanted = "int64" if name == "row" else "string"
            raise refuse(f"has column {name!r} of type {kind}, not {wanted}")
    if table.num_rows and table["rule"].null_count:
        raise refuse(f"has {table['rule'].null_count:,} flags without a rule")
    if table.num_rows and table["id"].null_count == table.num_rows:
        raise refuse("has no ids, so its flags cannot be matched by id")
    return table.cast(pa.schema([(n, table.schema.field(n).type if n == "row" else pa.string())
                                 for n in columns]))


def compare_files(old: str | Path, new: str | Path) -> Comparison:
    """Compare two flags files (``catcheck compare OLD NEW``)."""
    return compare_flags(read_flags_file(old, "old", columns=("id", "rule")),
                         read_flags_file(new, "new"))


def compare_flags(old: pa.Table, new: pa.Table, rules_run: Iterable[str] | None = None
                  ) -> Comparison:
    """Match ``new`` flags against ``old`` ones by (id, rule), as multisets.

    Both tables need the columns ``id`` and ``rule``; ``new`` also ``row``, ``severity`` and
    ``message`` (for the examples).  ``new`` must be in row order (as the engine writes
    it).  With ``rules_run``, old flags of other rules are counted as ``not_rechecked``
    instead of resolved, and every rule run appears in ``by_rule`` (zeros included).
    """
    not_rechecked: dict[str, int] = {}
    if rules_run is not None:
        rules_run = list(rules_run)
        rechecked = pc.is_in(old["rule"], value_set=pa.array(rules_run, pa.string()))
        not_rechecked = _count_by(old.filter(pc.invert(rechecked)), ["rule"])
        old = old.filter(rechecked)
    old_keyed, new_keyed = _keyed(old), _keyed(new)
    counts = _both_counts(_key_counts(old_keyed, "old"), _key_counts(new_keyed, "new"))
    only_new = new.take(pa.array(_new_positions(new_keyed, counts)))
    by_rule = {rule: RuleChange(**changes) for rule, changes in _per_rule(counts).items()}
    for rule in rules_run or ():
        by_rule.setdefault(rule, RuleChange())
    by_severity: dict[str, dict[str, int]] = {}
    for (rule, severity), n in _count_by(only_new, ["rule", "severity"]).items():
        by_severity.setdefault(rule, {})[severity] = n
    return Comparison(
        by_rule=dict(sorted(by_rule.items())),
        new_by_severity=dict(sorted(by_severity.items())),
        new_examples=_first_per_rule(only_new, EXAMPLES_PER_RULE),
        not_rechecked=dict(sorted(not_rechecked.items())),
    )


def _keyed(flags: pa.Table) -> pa.Table:
    """The matching key of each flag: id with nulls as "", a null marker, and rule."""
    ids = flags["id"]
    return pa.table({_ID: pc.fill_null(ids, ""), _NO_ID: pc.is_null(ids),
                     _RULE: flags["rule"]})


def _key_counts(keyed: pa.Table, name: str) -> pa.Table:
    """Flags per (id, rule) key, in a column ``name``."""
    counts = keyed.group_by(_KEYS).aggregate([([], "count_all")])
    return counts.rename_columns([*_KEYS, name])


def _both_counts(old_counts: pa.Table, new_counts: pa.Table) -> pa.Table:
    """One row per key of either side: its ``old`` and ``new`` counts (0 when absent)."""
    both = old_counts.join(new_counts, _KEYS, join_type="full outer", coalesce_keys=True)
    return pa.table({**{key: both[key] for key in _KEYS},
                     "old": pc.fill_null(both["old"], 0), "new": pc.fill_null(both["new"], 0)})


def _per_rule(counts: pa.Table) -> dict[str, dict[str, int]]:
    """Per rule, new/resolved/persisting summed over its keys."""
    per_key = pa.table({
        "rule": counts["rule"],
        "persisting": pc.min_element_wise(counts["old"], counts["new"]),
        "new": pc.max_element_wise(pc.subtract(counts["new"], counts["old"]), 0),
        "resolved": pc.max_element_wise(pc.subtract(counts["old"], counts["new"]), 0),
    })
    sums = per_key.group_by("rule").aggregate([(name, "sum") for name in CHANGES]).to_pydict()
    return {rule: {name: int(sums[f"{name}_sum"][i]) for name in CHANGES}
            for i, rule in enumerate(sums["rule"])}


def _new_positions(new_keyed: pa.Table, counts: pa.Table) -> np.ndarray:
    """Sorted positions of the new flags among ``new_keyed`` (in row order).

    A flag whose key the old side lacks is new; one whose key the old side holds at least
    as often persists.  Only keys held fewer times by the old side than by the new one
    (duplicate ids) need the rank of each flag within its key: it is new from the old
    count on.
    """
    narrow = new_keyed.append_column("_order", pa.array(np.arange(new_keyed.num_rows)))
    joined = narrow.join(counts, _KEYS, join_type="left outer")
    old_n, new_n = joined["old"], joined["new"]
    positions = [joined.filter(pc.equal(old_n, 0))["_order"].to_numpy()]
    ambiguous = joined.filter(pc.and_(pc.greater(old_n, 0), pc.less(old_n, new_n)))
    if ambiguous.num_rows:
        rank = _rank_within(ambiguous, _KEYS)
        positions.append(ambiguous.filter(pc.greater_equal(rank, ambiguous["old"])
                                          )["_order"].to_numpy())
    return np.sort(np.concatenate(positions))


def _rank_within(table: pa.Table, keys: Sequence[str]) -> pa.Array:
    """0-based rank of each row among the rows sharing its ``keys``, by ``_order``."""
    n = table.num_rows
    if n == 0:
        return pa.array([], pa.int64())
    order = pc.sort_indices(table, sort_keys=[(k, "ascending") for k in keys]
                            + [("_order", "ascending")])
    ordered = table.select(list(keys)).take(order)
    starts = np.zeros(n, dtype=bool)
    starts[0] = True
    for key in keys:
        column = ordered[key]
        changed = pc.not_equal(column.slice(1), column.slice(0, n - 1))
        starts[1:] |= changed.to_numpy(zero_copy_only=False)
    position = np.arange(n)
    group_start = np.maximum.accumulate(np.where(starts, position, 0))
    rank = np.empty(n, dtype=np.int64)
    rank[order.to_numpy()] = position - group_start
    return pa.array(rank)


def _count_by(table: pa.Table, keys: list[str]) -> dict[Any, int]:
    """Rows per distinct value of ``keys`` (a tuple of values for several keys)."""
    counts = table.select(keys).group_by(keys).aggregate(
        [([], "count_all")]).to_pydict()
    values = zip(*(counts[k] for k in keys), strict=True)
    return {(v if len(keys) > 1 else v[0]): int(n)
            for v, n in zip(values, counts["count_all"], strict=True)}


def _first_per_rule(flags: pa.Table, k: int) -> dict[str, list[dict[str, Any]]]:
    """The first ``k`` flags of each rule (``flags`` in row order), as records."""
    if flags.num_rows == 0:
        return {}
    in_order = pa.table({"rule": flags["rule"], "_order": np.arange(flags.num_rows)})
    rank = _rank_within(in_order, ["rule"])
    first = flags.filter(pc.less(rank, k)).select(list(COMPARED_COLUMNS))
    examples: dict[str, list[dict[str, Any]]] = {}
    for record in first.to_pylist():  # at most k per rule
        examples.setdefault(record["rule"], []).append(record)
    return dict(sorted(examples.items()))


def summary_entry(comparison: Comparison, baseline: str | Path) -> dict[str, Any]:
    """The ``baseline`` entry of summary.json."""
    entry: dict[str, Any] = {"file": str(baseline), **comparison.as_dict()}
    if comparison.not_rechecked:
        entry["not_rechecked"] = comparison.not_rechecked
    return entry
