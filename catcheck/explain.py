"""Rule documentation for people: ``catcheck rules`` and ``catcheck explain``."""

from __future__ import annotations

import textwrap
from collections.abc import Sequence

from catcheck.packs import Rule
from catcheck.report import CAUTION


def rule_table(rules: Sequence[Rule]) -> str:
    """One line per rule: id, severity, pack and summary."""
    width = max([len(r.id) for r in rules] + [4])
    lines = [f"{'rule':<{width}}  {'severity':<8} {'pack':<10} summary"]
    lines += [f"{r.id:<{width}}  {r.severity:<8} {r.pack:<10} {r.summary}" for r in rules]
    return "\n".join(lines)


def explain_rule(rule: Rule) -> str:
    """The full documentation of one rule under fixed headings."""
    doc = rule.check.doc
    params = "\n".join(f"{key} = {value!r}" for key, value in rule.params.items()) or "(none)"
    sections = [
        (f"{rule.id} ({rule.severity}, pack {rule.pack}, check {rule.check.name})",
         rule.summary),
        ("What it checks", doc.what),
        ("Why, physically", doc.why),
        ("Formula", doc.formula),
        ("Params", params),
        ("When a real star trips it", doc.caveats + "\n\n" + CAUTION),
        ("Example", doc.example),
        ("References", "\n".join(f"- {ref}" for ref in doc.references) or "(none)"),
    ]
    out = []
    for heading, body in sections:
        out.append(heading)
        for paragraph in body.split("\n"):
            wrapped = textwrap.fill(paragraph, width=88, initial_indent="  ",
                                    subsequent_indent="  ") if paragraph else ""
            out.append(wrapped)
        out.append("")
    return "\n".join(out).rstrip() + "\n"
