"""The CI gate: does this run pass?

The gate is a pure function of counts.  ``--fail-on`` counts flags at or above a severity:
all of the run's flags, or, with ``--baseline``, only the flags that are new against the
previous release (a ratchet: known flags do not block a release, new ones do).
``--max-flagged-fraction`` always counts every flagged row of the run, baseline or not: it
bounds how much of the release is in doubt, whatever the history of those doubts.  A
catalogue with no rows always fails (a truncated release must not pass).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from catcheck.errors import UsageError

FAIL_ON = ("error", "warning", "none")
#: the severities each --fail-on value counts
COUNTED_SEVERITIES: dict[str, tuple[str, ...]] = {
    "error": ("error",), "warning": ("error", "warning"), "none": ()}
#: the severities --max-flagged-fraction counts (info flags never fail a run)
FRACTION_SEVERITIES = ("error", "warning")


@dataclass(frozen=True)
class Verdict:
    """The gate's answer: passed or not, why, and the rules whose flags fail it.

    ``failing_rules`` maps a rule id to the number of its flags that ``--fail-on`` counts
    (only new flags under a baseline); rules with none are left out.
    """

    passed: bool
    reason: str
    failing_rules: dict[str, int] = field(default_factory=dict)


@dataclass(frozen=True)
class Gate:
    """When a run fails: any counted flag at or above ``fail_on``, too many flagged rows,
    or no rows.

    ``max_flagged_fraction`` counts rows with at least one error or warning flag
    (info flags never fail a run).
    """

    fail_on: str = "error"
    max_flagged_fraction: float | None = None

    def __post_init__(self) -> None:
        if self.fail_on not in FAIL_ON:
            raise UsageError(f"--fail-on must be one of {', '.join(FAIL_ON)}, "
                             f"got {self.fail_on!r}")
        f = self.max_flagged_fraction
        if f is not None and not 0.0 <= f <= 1.0:
            raise UsageError(f"--max-flagged-fraction must be between 0 and 1, got {f}")

    def verdict(self, rows: int, rows_by_severity: Mapping[str, int],
                flags_by_rule: Mapping[str, Mapping[str, int]], *,
                new_only: bool = False) -> Verdict:
        """The verdict for a run of ``rows`` rows.

        ``rows_by_severity`` counts the run's rows by their worst flag;
        ``flags_by_rule`` maps rule id -> severity -> the flags ``--fail-on`` may count:
        every flag of the run, or only the new ones when ``new_only`` (a baseline run).
        """
        reasons = []
        if rows == 0:
            reasons.append("the catalogue has no rows")
        counted = COUNTED_SEVERITIES[self.fail_on]
        failing = {rule: n for rule, by_severity in flags_by_rule.items()
                   if (n := sum(by_severity.get(s, 0) for s in counted))}
        total = sum(failing.values())
        if total:
            kind = "new " if new_only else ""
            reasons.append(f"{total:,} {kind}{' or '.join(counted)} flag{'s' * (total != 1)} "
                           f"in {_rules(failing)} (--fail-on {self.fail_on}"
                           + (", against the baseline)" if new_only else ")"))
        if self.max_flagged_fraction is not None and rows:
            flagged = sum(rows_by_severity.get(s, 0) for s in FRACTION_SEVERITIES)
            fraction = flagged / rows
            if fraction > self.max_flagged_fraction:
                reasons.append(f"{fraction:.4%} of rows flagged, above "
                               f"--max-flagged-fraction {self.max_flagged_fraction:g}")
        if reasons:
            return Verdict(False, "; ".join(reasons), failing)
        options = [f"--fail-on {self.fail_on}"]
        if self.max_flagged_fraction is not None:
            options.append(f"--max-flagged-fraction {self.max_flagged_fraction:g}")
        what = "no new flag" if new_only else "no flag"
        return Verdict(True, f"{what} fails the gate ({', '.join(options)})", failing)


def severity_counts(rule: Mapping[str, Any]) -> dict[str, int]:
    """A rule's flags by severity, from its entry in summary.json.

    Every flag carries the rule's severity, except the flags of a warning rule that the
    check raised to error because no real star could explain them (``flagged_as_error``).
    """
    flagged = int(rule.get("flagged", 0))
    escalated = int(rule.get("flagged_as_error", 0)) if rule["severity"] == "warning" else 0
    counts = {rule["severity"]: flagged - escalated}
    if escalated:
        counts["error"] = escalated
    return {severity: n for severity, n in counts.items() if n}


def _rules(failing: Mapping[str, int]) -> str:
    names = list(failing)
    if len(names) <= 3:
        return ", ".join(names)
    return f"{', '.join(names[:3])} and {len(names) - 3} more rule{'s' * (len(names) > 4)}"
