"""The CI gate: does this run pass?"""

from __future__ import annotations

from dataclasses import dataclass

from catcheck.errors import UsageError

FAIL_ON = ("error", "warning", "none")


@dataclass(frozen=True)
class Gate:
    """When a run fails: any flag at or above ``fail_on``, too many flagged rows, or no rows.

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

    def verdict(self, rows: int, flags_by_severity: dict[str, int],
                rows_by_severity: dict[str, int]) -> tuple[bool, str]:
        """(passed, reason) for a run with these counts."""
        reasons = []
        if rows == 0:
            reasons.append("the catalogue has no rows")
        if self.fail_on != "none":
            counted = ("error",) if self.fail_on == "error" else ("error", "warning")
            n = sum(flags_by_severity.get(s, 0) for s in counted)
            if n:
                reasons.append(f"{n} {' or '.join(counted)} flag{'s' * (n != 1)} "
                               f"(--fail-on {self.fail_on})")
        if self.max_flagged_fraction is not None and rows:
            flagged = rows_by_severity.get("error", 0) + rows_by_severity.get("warning", 0)
            fraction = flagged / rows
            if fraction > self.max_flagged_fraction:
                reasons.append(f"{fraction:.4%} of rows flagged, above "
                               f"--max-flagged-fraction {self.max_flagged_fraction:g}")
        if reasons:
            return False, "; ".join(reasons)
        return True, f"no flag fails the gate (--fail-on {self.fail_on}" + (
            f", --max-flagged-fraction {self.max_flagged_fraction:g})"
            if self.max_flagged_fraction is not None else ")")
