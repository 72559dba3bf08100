"""Views of a run for people: the console summary and report.md.

Both are rendered from the summary dict (the content of summary.json) and a few example
flags per rule, so they cannot disagree with the machine-readable outputs.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

CAUTION = (
    "A flag is a reason to look, not a verdict. catcheck decides what to distrust, never "
    "what is true: real stars break simple rules (blue stragglers, unresolved binaries, "
    "mergers, stripped stars, stars seen through dust), and such rules are kept at warning "
    "severity."
)


def console_summary(summary: Mapping[str, Any]) -> str:
    """A compact per-rule table and the verdict, for the terminal."""
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
    if summary.get("unmapped_phase_labels"):
        lines.append("  phase labels with no phase code (treated as missing): "
                     + _labels(summary["unmapped_phase_labels"]))
    gate = summary["gate"]
    lines.append(f"  verdict: {'PASSED' if gate['passed'] else 'FAILED'}: {gate['reason']}")
    return "\n".join(lines)


def markdown_report(summary: Mapping[str, Any],
                    examples: Mapping[str, Sequence[Mapping[str, Any]]]) -> str:
    """report.md: the run for people, fit to post as a review comment."""
    gate = summary["gate"]
    out = [
        "# catcheck report",
        "",
        f"**Verdict: {'PASSED' if gate['passed'] else 'FAILED'}** - {gate['reason']}",
        "",
        f"- input: `{summary['input']}`",
        f"- profile: `{summary['profile']}`",
        f"- rule packs: {', '.join(f'`{p}`' for p in summary['packs'])}",
        f"- rows read: {summary['rows']:,}",
        f"- flagged rows: {summary['flagged_rows']:,} "
        f"({_by_severity(summary['rows_by_severity'])})",
        f"- catcheck {summary['version']}",
        "",
        "## Rules",
        "",
        "| rule | severity | checked | skipped | of which not applicable | flagged | status |",
        "|---|---|---:|---:|---:|---:|---|",
    ]
    for rule in summary["rules"]:
        escalated = (f" ({rule['flagged_as_error']:,} as error)"
                     if rule.get("flagged_as_error") else "")
        out.append(f"| `{rule['id']}` | {rule['severity']} | {rule['checked']:,} | "
                   f"{rule['skipped']:,} | {rule['not_applicable']:,} | "
                   f"{rule['flagged']:,}{escalated} | {rule['status']} |")
    assumed = [r for r in summary["rules"] if r.get("assumed_errors")]
    if assumed:
        out += ["", "Errors assumed where the catalogue gives none (see `catcheck explain`):"]
        out += [f"- `{r['id']}`: {', '.join(r['assumed_errors'])}" for r in assumed]
    if summary.get("unmapped_phase_labels"):
        out += ["", "Phase labels with no phase code (treated as missing): "
                + _labels(summary["unmapped_phase_labels"])]
    shown = [(rule_id, rows) for rule_id, rows in examples.items() if rows]
    if shown:
        out += ["", "## First flagged rows per rule", ""]
        for rule_id, rows in shown:
            out += [f"### `{rule_id}`", "", "| row | id | message |", "|---:|---|---|"]
            out += [f"| {r['row']} | {_cell(r['id'])} | {_cell(r['message'])} |" for r in rows]
            out.append("")
    out += ["", "## Reading this report", "", CAUTION,
            "Run `catcheck explain RULE` for a rule's formula, sources and caveats.", ""]
    return "\n".join(out)


def _by_severity(counts: Mapping[str, int]) -> str:
    return ", ".join(f"{n:,} {name}" for name, n in counts.items() if n) or "none"


def _labels(labels: Mapping[str, int]) -> str:
    return ", ".join(f"{label!r} x{n:,}" for label, n in labels.items())


def _cell(value: Any) -> str:
    return str(value).replace("|", "\\|").replace("\n", " ")
