"""Views of a run for people: the console summary and report.md.

Both are rendered from the summary dict (the content of summary.json) and a few example
flags per rule, so they cannot disagree with the machine-readable outputs.  report.md is
meant to be posted as a review comment: a one-line verdict first, then one table of the
rules (with new/resolved/persisting columns under a baseline), then the examples folded
in ``<details>`` blocks.  It holds nothing that changes between identical runs (no
timings, no dates).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

from catcheck.baseline import CHANGES, Comparison
from catcheck.findings import finding_lines
from catcheck.gate import severity_counts

CAUTION = (
    "A flag is a reason to look, not a verdict. catcheck decides what to distrust, never "
    "what is true: real stars break simple rules (blue stragglers, unresolved binaries, "
    "mergers, stripped stars, stars seen through dust), and such rules are kept at warning "
    "severity."
)

Examples = Mapping[str, Sequence[Mapping[str, Any]]]


def console_summary(summary: Mapping[str, Any]) -> str:
    """A compact per-rule table and the verdict (always the last line), for the terminal."""
    lines = [f"catcheck {summary['version']}: {summary['rows']:,} rows from "
             f"{summary['input']}"]
    width = max([len(r["id"]) for r in summary["rules"]] + [4])
    lines.append(f"  {'rule':<{width}}  {'severity':<8} {'checked':>11} {'skipped':>11} "
                 f"{'flagged':>9}")
    for rule in summary["rules"]:
        if rule["status"] == "ran":
            counts = f"{rule['checked']:>11,} {rule['skipped']:>11,} {rule['flagged']:>9,}"
            if rule.get("flagged_as_error"):
                counts += f"  ({rule['flagged_as_error']:,} beyond doubt: errors)"
        else:
            counts = f"  {rule['status']}"
        lines.append(f"  {rule['id']:<{width}}  {rule['severity']:<8} {counts}")
    lines.append(f"  flagged rows: {summary['flagged_rows']:,} "
                 f"({_by_severity(summary['rows_by_severity'])})")
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
    lines.append(f"  verdict: {'PASSED' if gate['passed'] else 'FAILED'}: {gate['reason']}")
    return "\n".join(lines)


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
    each rule under a baseline.
    """
    gate = summary["gate"]
    baseline = summary.get("baseline")
    out = [
        f"## catcheck: {'passed' if gate['passed'] else 'FAILED'}",
        "",
        f"**{_sentence(gate['reason'])}**",
        "",
        _overview(summary),
        "",
        *_rule_table(summary),
        *finding_lines(summary, markdown=True),
    ]
    if baseline and baseline.get("not_rechecked"):
        out += ["", "Old flags of rules this run did not run (not rechecked): "
                + ", ".join(f"`{rule}` {n:,}" for rule, n in baseline["not_rechecked"].items())]
    assumed = [r for r in summary["rules"] if r.get("assumed_errors")]
    if assumed:
        out += ["", "Errors assumed where the catalogue gives none (see `catcheck explain`):"]
        out += [f"- `{r['id']}`: {', '.join(r['assumed_errors'])}" for r in assumed]
    if summary.get("unmapped_phase_labels"):
        out += ["", "Phase labels with no phase code (treated as missing): "
                + _labels(summary["unmapped_phase_labels"])]
    duplicates = _duplicate_ids(summary.get("duplicate_ids") or {})
    if duplicates:
        out += ["", duplicates[0].upper() + duplicates[1:]]
    if baseline and new_examples:
        out += ["", "### New flags against the baseline", ""]
        changes = baseline["by_rule"]
        out += _folded(new_examples, lambda rule: f"{changes[rule]['new']:,} new")
    flagged = {r["id"]: r for r in summary["rules"]}
    if any(examples.values()):
        out += ["", "### First flagged rows per rule", ""]
        out += _folded(examples, lambda rule: _flag_count(flagged[rule]))
    out += ["", "<details><summary>Run details</summary>", "",
            f"- input: `{summary['input']}`",
            f"- profile: `{summary['profile']}`",
            f"- rule packs: {', '.join(f'`{p}`' for p in summary['packs'])}",
            f"- gate: --fail-on {gate['fail_on']}"
            + (f", --max-flagged-fraction {gate['max_flagged_fraction']:g}"
               if gate["max_flagged_fraction"] is not None else "")
            + (f", --baseline `{baseline['file']}` (only new flags count against --fail-on;"
               " --max-flagged-fraction counts every flagged row)" if baseline else ""),
            f"- catcheck {summary['version']}",
            "", "</details>",
            "", CAUTION + " Run `catcheck explain RULE` for a rule's formula, sources and "
            "caveats.", ""]
    return "\n".join(out)


def _overview(summary: Mapping[str, Any]) -> str:
    text = (f"{summary['rows']:,} rows checked; {summary['flagged_rows']:,} flagged "
            f"({_by_severity(summary['rows_by_severity'])}).")
    baseline = summary.get("baseline")
    if baseline:
        text += (f" Against the baseline `{baseline['file']}`: {baseline['new']:,} new, "
                 f"{baseline['resolved']:,} resolved, {baseline['persisting']:,} persisting "
                 "flags.")
    return text


def _rule_table(summary: Mapping[str, Any]) -> list[str]:
    baseline = summary.get("baseline")
    failing = summary["gate"].get("failing_rules", {})
    header = ["rule", "pack", "severity", "checked", "skipped", "flagged"]
    align = ["---", "---", "---", "---:", "---:", "---:"]
    if baseline:
        header += list(CHANGES)
        align += ["---:"] * len(CHANGES)
    header += ["gate"]
    align += ["---"]
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join(align) + "|"]
    for rule in summary["rules"]:
        ran = rule["status"] == "ran"
        cells = [f"`{rule['id']}`", rule.get("pack", ""), rule["severity"]]
        if ran:
            escalated = (f" ({rule['flagged_as_error']:,} as error)"
                         if rule.get("flagged_as_error") else "")
            cells += [f"{rule['checked']:,}", f"{rule['skipped']:,}",
                      f"{rule['flagged']:,}{escalated}"]
        else:
            cells += ["", "", ""]
        if baseline:
            change = baseline["by_rule"].get(rule["id"], {})
            cells += [f"{change[c]:,}" if change else "" for c in CHANGES]
        if not ran:
            cells.append(_cell(rule["status"]))
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
        out += [f"<details><summary><code>{_html(rule_id)}</code>: {counted(rule_id)} "
                f"(first {len(rows)})</summary>", "",
                "| row | id | severity | message |", "|---:|---|---|---|"]
        out += [f"| {r['row']} | {_cell(r['id'])} | {r['severity']} | {_cell(r['message'])} |"
                for r in rows]
        out += ["", "</details>", ""]
    return out


def _sentence(text: str) -> str:
    return text[:1].upper() + text[1:]


def _by_severity(counts: Mapping[str, int]) -> str:
    return ", ".join(f"{n:,} {name}" for name, n in counts.items() if n) or "none"


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


def _cell(value: Any) -> str:
    """Text safe inside a Markdown table cell (no pipes, no line breaks, no raw HTML)."""
    return _html(str(value)).replace("|", "\\|").replace("\n", " ")


def _html(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
