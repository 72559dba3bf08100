"""The run as a JUnit XML report (``--junit FILE``), the test format CI servers display.

Layout: a ``<testsuites>`` root holding one ``<testsuite name="catcheck">`` with

* one ``<testcase>`` per rule (``classname`` = its pack, ``name`` = its id): a
  ``<failure>`` when the rule's flags fail the gate (error flags under ``--fail-on
  error``, new ones only under ``--baseline``), its message carrying the counts and its
  text the first examples (row, id, message); ``<skipped>`` with the reason when the rule
  could not run; flags that do not fail the gate (warnings under ``--fail-on error``,
  known flags under a baseline) go to ``<system-out>``;
* one more ``<testcase classname="catcheck.gate" name="verdict">``: the verdict itself,
  a ``<failure>`` with the gate's reason when the run failed, so a run failed only by
  ``--max-flagged-fraction`` or an empty catalogue still shows red.

Test cases carry ``time="0"``: rules are timed together, and the suite's ``time`` is the
run's elapsed seconds.  The XML is built with :mod:`xml.etree.ElementTree` (escaping
included; characters XML 1.0 forbids are replaced by U+FFFD) and written atomically.
"""

from __future__ import annotations

import os
import re
import xml.etree.ElementTree as ET
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from catcheck.errors import UsageError
from catcheck.gate import COUNTED_SEVERITIES, severity_counts
from catcheck.outputs import write_file_atomically

SUITE_NAME = "catcheck"
VERDICT_CLASSNAME = "catcheck.gate"
VERDICT_NAME = "verdict"
_FORBIDDEN = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")

Examples = Mapping[str, Sequence[Mapping[str, Any]]]


def junit_xml(summary: Mapping[str, Any], examples: Examples,
              new_examples: Examples | None = None) -> bytes:
    """The JUnit XML document (UTF-8 bytes) for a run's summary (as summary.json).

    ``examples`` holds the first flags of each rule; ``new_examples`` the first new flags
    of each rule under a baseline (shown in the failures then).
    """
    gate = summary["gate"]
    failing = gate.get("failing_rules", {})
    baseline = summary.get("baseline")
    changes = baseline["by_rule"] if baseline else {}
    cases = [_rule_case(rule, failing.get(rule["id"], 0), gate["fail_on"],
                        changes.get(rule["id"]),
                        (new_examples if baseline and new_examples is not None else examples)
                        .get(rule["id"], ()),
                        examples.get(rule["id"], ()))
             for rule in summary["rules"]]
    cases.append(_verdict_case(summary))
    failures = sum(case.find("failure") is not None for case in cases)
    skipped = sum(case.find("skipped") is not None for case in cases)
    counts = {"tests": str(len(cases)), "failures": str(failures), "errors": "0",
              "skipped": str(skipped), "time": f"{float(summary['elapsed_seconds']):.3f}"}
    root = ET.Element("testsuites", {"name": SUITE_NAME, **counts})
    suite = ET.SubElement(root, "testsuite", {"name": SUITE_NAME, **counts})
    properties = ET.SubElement(suite, "properties")
    for name, value in _properties(summary):
        ET.SubElement(properties, "property", {"name": name, "value": _text(value)})
    suite.extend(cases)
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"


def check_junit_path(path: str | Path) -> None:
    """Before a run: refuse a --junit path that cannot be written (a directory, or under a
    file), so that the run does not replace its report and then fail."""
    path = Path(path)
    parent = next((p for p in path.parents if p.exists()), Path("."))
    if path.is_dir() or not parent.is_dir() or not os.access(parent, os.W_OK):
        raise UsageError("cannot write the JUnit report there", where=str(path),
                         fix="give --junit a file path in a writable directory")


def write_junit(path: str | Path, document: bytes) -> Path:
    """Write ``document`` to ``path`` atomically (a temporary file beside it, then
    :func:`os.replace`); the parent directory is created if needed."""
    return write_file_atomically(path, document, "JUnit report", "--junit")


def _rule_case(rule: Mapping[str, Any], failing: int, fail_on: str,
               change: Mapping[str, int] | None, failure_examples: Sequence[Mapping[str, Any]],
               all_examples: Sequence[Mapping[str, Any]]) -> ET.Element:
    case = ET.Element("testcase", {"classname": rule.get("pack") or SUITE_NAME,
                                   "name": rule["id"], "time": "0"})
    if rule["status"] != "ran":
        ET.SubElement(case, "skipped", {"message": _text(rule["status"])})
        return case
    by_severity = severity_counts(rule)
    flagged = _counts(by_severity)
    history = (f"; against the baseline {change['new']:,} new, {change['resolved']:,} "
               f"resolved, {change['persisting']:,} persisting" if change else "")
    if failing:
        counted = " or ".join(COUNTED_SEVERITIES[fail_on])
        what = "new " if change is not None else ""
        verb = "fails" if failing == 1 else "fail"
        message = (f"{failing:,} {what}{counted} flag{'s' * (failing != 1)} {verb} the gate "
                   f"(--fail-on {fail_on}); {flagged} in all{history}")
        shown = [e for e in failure_examples if e["severity"] in COUNTED_SEVERITIES[fail_on]]
        failure = ET.SubElement(case, "failure", {"message": _text(message),
                                                  "type": "catcheck.gate"})
        failure.text = _text(_example_text(rule, shown or failure_examples,
                                           "new flags" if change is not None else "flags"))
    elif rule["flagged"]:
        out = ET.SubElement(case, "system-out")
        out.text = _text(f"{flagged}, none failing the gate (--fail-on {fail_on}){history}\n"
                         + _example_text(rule, all_examples, "flags"))
    return case


def _verdict_case(summary: Mapping[str, Any]) -> ET.Element:
    gate = summary["gate"]
    case = ET.Element("testcase", {"classname": VERDICT_CLASSNAME, "name": VERDICT_NAME,
                                   "time": "0"})
    if not gate["passed"]:
        failure = ET.SubElement(case, "failure", {"message": _text(gate["reason"]),
                                                  "type": "catcheck.gate"})
        failure.text = _text(f"{summary['rows']:,} rows, {summary['flagged_rows']:,} flagged; "
                             f"{gate['reason']}")
    else:
        ET.SubElement(case, "system-out").text = _text(gate["reason"])
    return case


def _properties(summary: Mapping[str, Any]) -> list[tuple[str, Any]]:
    gate = summary["gate"]
    props = [("input", summary["input"]), ("profile", summary["profile"]),
             ("rows", summary["rows"]), ("flagged_rows", summary["flagged_rows"]),
             ("fail_on", gate["fail_on"]),
             ("max_flagged_fraction", gate["max_flagged_fraction"]),
             ("verdict", "passed" if gate["passed"] else "failed"),
             ("catcheck_version", summary["version"])]
    if summary.get("baseline"):
        props.append(("baseline", summary["baseline"]["file"]))
    return [(name, "" if value is None else value) for name, value in props]


def _counts(by_severity: Mapping[str, int]) -> str:
    total = sum(by_severity.values())
    parts = ", ".join(f"{n:,} {severity}" for severity, n in by_severity.items())
    return f"{total:,} flag{'s' * (total != 1)} ({parts})" if total else "no flags"


def _example_text(rule: Mapping[str, Any], examples: Sequence[Mapping[str, Any]],
                  what: str) -> str:
    lines = [f"{rule['id']}: {rule.get('summary', '')}".rstrip(": ")]
    if examples:
        lines.append(f"first {what}:")
        lines += [f"  row {e['row']}, id {e['id']}, {e['severity']}: {e['message']}"
                  for e in examples]
    lines.append(f"catcheck explain {rule['id']}")
    return "\n".join(lines)


def _text(value: Any) -> str:
    return _FORBIDDEN.sub("\ufffd", str(value))
