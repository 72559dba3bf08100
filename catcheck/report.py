"""Views of a run for people: the console summary and report.md.

Both are rendered from the summary dict (the content of summary.json) and a few example
flags per rule, so they cannot disagree with the machine-readable outputs.  report.md is
meant to be posted as a review comment: a one-line verdict first, then the counts (flags,
one per row and rule that failed, told apart from flagged rows; rules that did not run),
one table of the rules (with new/resolved/persisting columns under a baseline), then the
examples folded in ``<details>`` blocks.  It holds nothing that changes between identical
runs (no timings, no dates).  Skipped rows are shown in two parts: rows missing a needed
value, and rows the rule is not about (``not_applicable``).
"""

from __future__ import annotations

import html
from collections import Counter
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from catcheck import markdown as md
from catcheck.baseline import CHANGES, Comparison
from catcheck.findings import finding_lines
from catcheck.gate import severity_counts
from catcheck.packs import SEVERITY_RANK

CAUTION = (
    "A flag is a reason to look, not a verdict. catcheck decides what to distrust, never "
    "what is true: real stars break simple rules (blue stragglers, unresolved binaries, "
    "mergers, stripped stars, stars seen through dust), and such rules are kept at warning "
    "severity."
)

#: what the two counts of a run mean, as the console, report.md and report.html label them
FLAGS_MEANING = "flags (one per row and rule that failed)"
ROWS_MEANING = "flagged rows (each counted once, by its worst flag)"
#: said wherever rules that did not run are counted: the gate is decided without them
NOT_RUN_NEVER_FAILS = "Rules that do not run cannot fail the gate."
_MISSING = "not-run: missing "

Examples = Mapping[str, Sequence[Mapping[str, Any]]]


def console_summary(summary: Mapping[str, Any]) -> str:
    """A compact per-rule table and the verdict (always the last line), for the terminal.

    The verdict line also says how many rules did not run and why (it is the one line
    ``--quiet`` prints), without changing the gate's decision.
    """
    lines = [f"catcheck {summary['version']}: {summary['rows']:,} rows from "
             f"{summary['input']}"]
    width = max([len(r["id"]) for r in summary["rules"]] + [4])
    lines.append(f"  {'rule':<{width}}  {'severity':<8} {'checked':>11}  {'missing value':>13}  "
                 f"{'not applicable':>14}  {'flagged':>9}")
    for rule in summary["rules"]:
        if rule["status"] == "ran":
            missing, not_applicable = skipped_counts(rule)
            counts = (f"{rule['checked']:>11,}  {missing:>13,}  {not_applicable:>14,}  "
                      f"{rule['flagged']:>9,}")
            if rule.get("flagged_as_error"):
                counts += f"  ({rule['flagged_as_error']:,} beyond doubt: errors)"
        else:
            counts = f"  {rule['status']}"
        lines.append(f"  {rule['id']:<{width}}  {rule['severity']:<8} {counts}")
    lines += [f"  {FLAGS_MEANING}: {flag_total(summary)}",
              f"  {ROWS_MEANING}: {row_total(summary)}"]
    lines += finding_lines(summary)
    if summary.get("unmapped_phase_labels"):
        lines.append("  phase labels with no phase code (treated as missing): "
                     + _labels(summary["unmapped_phase_labels"]))
    duplicates = _duplicate_ids(summary.get("duplicate_ids") or {})
    if duplicates:
        lines.append(f"  {duplicates}")
    if summary.get("baseline"):
        lines += baseline_lines(summary["baseline"], indent="  ")
    gate = summary["gate"]
    not_run = not_run_line(summary)
    lines.append(f"  verdict: {'PASSED' if gate['passed'] else 'FAILED'}: {gate['reason']}"
                 + (f"; {not_run}" if not_run else ""))
    return "\n".join(lines)


def flag_total(summary: Mapping[str, Any]) -> str:
    """The run's number of flags and their severities, e.g. '1,027 (613 error, 414 warning)'."""
    by_severity = summary.get("flags_by_severity") or {}
    return _total(sum(by_severity.values()), by_severity)


def row_total(summary: Mapping[str, Any]) -> str:
    """The run's number of flagged rows by worst flag, e.g. '540 (362 error, 178 warning)'."""
    return _total(summary["flagged_rows"], summary["rows_by_severity"])


def skipped_counts(rule: Mapping[str, Any]) -> tuple[int, int]:
    """A rule's skipped rows, split: (a needed value missing, the rule not applicable).

    summary.json's ``skipped`` counts both; ``not_applicable`` the second alone.
    """
    not_applicable = int(rule.get("not_applicable", 0))
    return int(rule["skipped"]) - not_applicable, not_applicable


def not_run_line(summary: Mapping[str, Any]) -> str:
    """How many rules did not run and why, in one line ('' when every rule ran).

    E.g. "13 of 32 rules not run: missing teff (7), group (5), distance (2)": each
    missing quantity with the number of rules that need it, most needed first; a rule
    that did not run for another reason is named with it ("...; age-gyr-or-myr-as-yr: age
    declared in Myr (the rule is for yr)").
    """
    rules = summary["rules"]
    idle = [rule for rule in rules if rule["status"] != "ran"]
    if not idle:
        return ""
    missing: Counter[str] = Counter()
    other: dict[str, list[str]] = {}
    for rule in idle:
        status = rule["status"]
        if status.startswith(_MISSING):
            missing.update(status[len(_MISSING):].split(", "))
        else:
            other.setdefault(status.removeprefix("not-run: "), []).append(rule["id"])
    reasons = ["missing " + _most_first(missing)] if missing else []
    reasons += [f"{', '.join(ids)}: {reason}" for reason, ids in other.items()]
    return f"{len(idle)} of {len(rules)} rules not run: {'; '.join(reasons)}"


def _most_first(counts: Counter[str]) -> str:
    return ", ".join(f"{name} ({n:,})" for name, n
                     in sorted(counts.items(), key=lambda item: (-item[1], item[0])))


def assumed_error_text(quantity: str, params: Mapping[str, Any]) -> str:
    """The 1-sigma a rule assumed for ``quantity`` and the param that holds it, e.g.
    "age 0.1 dex (`assumed_age_dex`)" (Markdown).

    Checks name these params ``assumed_<quantity>_<unit>`` (``_dex``, ``_fraction`` of
    the value, ``_mas``, ...); a check about a single quantity may call its one
    ``assumed_error`` (in the rule's unit), and the phase envelopes call the error of
    log L or log R ``assumed_log_dex``.
    """
    names = [name for name in params if name.startswith(f"assumed_{quantity}_")]
    names = names or [name for name in ("assumed_error", "assumed_log_dex") if name in params]
    if not names:
        return f"{quantity} (the rule names no assumed value for it)"
    return f"{quantity} " + ", ".join(f"{_assumed_value(name, params[name])} (`{name}`)"
                                      for name in names)


def _assumed_value(name: str, value: Any) -> str:
    if not isinstance(value, int | float):
        return str(value)
    if name.endswith("_fraction"):
        return f"{100 * value:g}% of the value"
    unit = name.rsplit("_", 1)[-1]
    return f"{value:g} {unit}" if unit in ("dex", "mas") else f"{value:g} in the rule's unit"


def baseline_lines(entry: Mapping[str, Any], indent: str = "",
                   heading: str | None = None) -> list[str]:
    """The comparison with a previous release as text: totals (after ``heading``, by
    default "against FILE: "), then one line per rule with a new, resolved or persisting
    flag (used by the console and ``catcheck compare``)."""
    heading = f"against {entry['file']}: " if heading is None else heading
    lines = [f"{indent}{heading}{entry['new']:,} new, "
             f"{entry['resolved']:,} resolved, {entry['persisting']:,} persisting"]
    rows = {rule: c for rule, c in entry["by_rule"].items() if any(c.values())}
    if rows:
        width = max(len(rule) for rule in rows)
        lines.append(f"{indent}  {'rule':<{width}} {'new':>9} {'resolved':>9} "
                     f"{'persisting':>10}")
        lines += [f"{indent}  {rule:<{width}} {c['new']:>9,} {c['resolved']:>9,} "
                  f"{c['persisting']:>10,}" for rule, c in rows.items()]
    for rule, n in entry.get("not_rechecked", {}).items():
        lines.append(f"{indent}  {rule}: {n:,} old flags not rechecked (rule not run)")
    return lines


def comparison_text(comparison: Comparison, old: str, new: str) -> str:
    """``catcheck compare OLD NEW`` as text."""
    entry = {"file": old, **comparison.as_dict()}
    return "\n".join([f"catcheck compare: {old} -> {new}",
                      *baseline_lines(entry, heading="")])


def markdown_report(summary: Mapping[str, Any], examples: Examples,
                    new_examples: Examples | None = None) -> str:
    """report.md: the run for people, fit to post as a review comment.

    ``examples`` are the first flags of each rule; ``new_examples`` the first new flags of
    each rule under a baseline.  Text from the catalogue or the rules is escaped only
    where Markdown would misread it (:mod:`catcheck.markdown`).
    """
    gate = summary["gate"]
    baseline = summary.get("baseline")
    out = [
        f"## catcheck: {'PASSED' if gate['passed'] else 'FAILED'}",
        "",
        f"**{md.text(_sentence(gate['reason']))}**",
        "",
        *_overview(summary),
        "",
        *_rule_table(summary),
        *finding_lines(summary, markdown=True),
    ]
    if baseline and baseline.get("not_rechecked"):
        out += ["", "Old flags of rules this run did not run (not rechecked): "
                + ", ".join(f"`{rule}` {n:,}" for rule, n in baseline["not_rechecked"].items())]
    assumed = [r for r in summary["rules"] if r.get("assumed_errors")]
    if assumed:
        out += ["", "Errors assumed where the catalogue gives none (the rule's params: a rule "
                "pack can change them; see `catcheck explain RULE`):"]
        out += [f"- `{r['id']}`: " + "; ".join(
                    assumed_error_text(q, r.get("assumed_error_params") or {})
                    for q in r["assumed_errors"]) for r in assumed]
    if summary.get("unmapped_phase_labels"):
        out += ["", "Phase labels with no phase code (treated as missing): "
                + md.text(_labels(summary["unmapped_phase_labels"]))]
    duplicates = _duplicate_ids(summary.get("duplicate_ids") or {})
    if duplicates:
        out += ["", md.text(duplicates[0].upper() + duplicates[1:])]
    if baseline and new_examples:
        out += ["", "### New flags against the baseline", ""]
        changes = baseline["by_rule"]
        out += _folded(new_examples, lambda rule: f"{changes[rule]['new']:,} new")
    flagged = {r["id"]: r for r in summary["rules"]}
    if any(examples.values()):
        out += ["", "### First flagged rows per rule", ""]
        out += _folded(examples, lambda rule: _flag_count(flagged[rule]))
    out += ["", "<details><summary>Run details</summary>", "",
            f"- input: {md.code(summary['input'])}",
            f"- profile: {md.code(summary['profile'])}",
            f"- rule packs: {', '.join(md.code(p) for p in summary['packs'])}",
            f"- gate: --fail-on {gate['fail_on']}"
            + (f", --max-flagged-fraction {gate['max_flagged_fraction']:g}"
               if gate["max_flagged_fraction"] is not None else "")
            + (f", --baseline {md.code(baseline['file'])} (only new flags count against "
               "--fail-on; --max-flagged-fraction counts every flagged row)"
               if baseline else ""),
            f"- catcheck {summary['version']}",
            "", "</details>",
            "", CAUTION + " Run `catcheck explain RULE` for a rule's formula, sources and "
            "caveats.", ""]
    return "\n".join(out)


def _overview(summary: Mapping[str, Any]) -> list[str]:
    """The counts under the verdict: rows, flags and flagged rows told apart, rules that
    did not run, the baseline comparison."""
    lines = [f"- rows checked: {summary['rows']:,}",
             f"- {FLAGS_MEANING}: {flag_total(summary)}",
             f"- {ROWS_MEANING}: {row_total(summary)}"]
    not_run = not_run_line(summary)
    if not_run:
        lines.append(f"- {md.text(not_run)}. {NOT_RUN_NEVER_FAILS}")
    baseline = summary.get("baseline")
    if baseline:
        lines.append(f"- against the baseline {md.code(baseline['file'])}: "
                     f"{baseline['new']:,} new, {baseline['resolved']:,} resolved, "
                     f"{baseline['persisting']:,} persisting flags")
    return lines


def _rule_table(summary: Mapping[str, Any]) -> list[str]:
    baseline = summary.get("baseline")
    failing = summary["gate"].get("failing_rules", {})
    header = ["rule", "pack", "severity", "checked", "skipped: missing value",
              "skipped: not applicable", "flagged"]
    align = ["---", "---", "---", "---:", "---:", "---:", "---:"]
    if baseline:
        header += list(CHANGES)
        align += ["---:"] * len(CHANGES)
    header += ["gate"]
    align += ["---"]
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join(align) + "|"]
    for rule in summary["rules"]:
        ran = rule["status"] == "ran"
        cells = [f"`{rule['id']}`", md.cell(rule.get("pack", "")), rule["severity"]]
        if ran:
            escalated = (f" ({rule['flagged_as_error']:,} as error)"
                         if rule.get("flagged_as_error") else "")
            missing, not_applicable = skipped_counts(rule)
            cells += [f"{rule['checked']:,}", f"{missing:,}", f"{not_applicable:,}",
                      f"{rule['flagged']:,}{escalated}"]
        else:
            cells += ["", "", "", ""]
        if baseline:
            change = baseline["by_rule"].get(rule["id"], {})
            cells += [f"{change[c]:,}" if change else "" for c in CHANGES]
        if not ran:
            cells.append(md.cell(rule["status"]))
        elif rule["id"] in failing:
            cells.append(f"**fails** ({failing[rule['id']]:,})")
        else:
            cells.append("passes")
        lines.append("| " + " | ".join(cells) + " |")
    return lines


def _flag_count(rule: Mapping[str, Any]) -> str:
    by_severity = severity_counts(rule)
    return ", ".join(f"{n:,} {severity}" for severity, n in by_severity.items())


def _folded(examples: Examples, counted: Callable[[str], str]) -> list[str]:
    """One collapsed block per rule with examples: its first rows as a table."""
    out = []
    for rule_id, rows in examples.items():
        if not rows:
            continue
        out += [f"<details><summary><code>{html.escape(rule_id)}</code>: {counted(rule_id)} "
                f"(first {len(rows)})</summary>", "",
                "| row | id | severity | message |", "|---:|---|---|---|"]
        out += [f"| {r['row']} | {md.cell(r['id'])} | {r['severity']} | "
                f"{md.cell(r['message'])} |" for r in rows]
        out += ["", "</details>", ""]
    return out


def _sentence(text: str) -> str:
    return text[:1].upper() + text[1:]


def _total(total: int, by_severity: Mapping[str, int]) -> str:
    """'1,027 (613 error, 414 warning)': a total and its severities, worst first."""
    parts = [f"{by_severity[name]:,} {name}" for name in sorted(
        SEVERITY_RANK, key=SEVERITY_RANK.__getitem__, reverse=True) if by_severity.get(name)]
    return f"{total:,}" + (f" ({', '.join(parts)})" if parts else "")


def _labels(labels: Mapping[str, int]) -> str:
    return ", ".join(f"{label!r} x{n:,}" for label, n in labels.items())


def _duplicate_ids(entry: Mapping[str, Any]) -> str:
    """The summary's ``duplicate_ids`` as one sentence ('' when no id repeats or is missing)."""
    parts = []
    if entry.get("repeated_ids"):
        about = "" if entry["exact"] else "about "
        ids = entry["repeated_ids"]
        parts.append(f"ids on more than one row: {about}{ids:,} id{'s' * (ids != 1)} on "
                     f"{about}{entry['rows_with_repeated_id']:,} rows, e.g. "
                     + _labels(entry["examples"]))
    if entry.get("rows_without_id"):
        parts.append(f"rows without an id: {entry['rows_without_id']:,}")
    return "; ".join(parts) + " (every row is still checked)" if parts else ""
