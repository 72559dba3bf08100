"""``physical_range``: hard physical limits of one quantity, run as a pandera schema.

The range rules of a run form the column-schema layer (:class:`RangeSchema`): for each
rule, how far each value lies outside its limits, in units of the value's 1-sigma error,
is validated by a pandera ``Check.le(threshold)``, and pandera's failures become ordinary
flag records.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import pandera.pandas as pandera

from catcheck.canonical import StarBatch
from catcheck.checks.base import Check, Documentation, Outcome, Params, at_rows, excess_sigma, fmt

if TYPE_CHECKING:
    from catcheck.packs import Rule

DOC = Documentation(
    what="Flags a value outside the hard physical limits of its quantity (for example an "
    "age above the age of the Universe, a negative radius, a mass above the most massive "
    "stars known), allowing for the row's own 1-sigma error.",
    why="No star can have these values; a row that does holds a unit error, a sentinel "
    "value such as -999 or 99.99 that should have been null, or a corrupted number.",
    formula="excess = max(low - x, x - high, 0); flag when excess > threshold * sigma_x "
    "(sigma_x from the catalogue, 0 when it gives none; non-finite x is always flagged, "
    "and so is x <= 0 for a quantity whose lower limit is positive)",
    caveats="The limits are deliberately wide so that no real object is flagged; they do "
    "not say a value inside them is right.  Substellar objects (brown dwarfs, Teff down "
    "to ~250 K) lie inside the Teff limit on purpose.",
    example="age = 20 Gyr with a 1 Gyr error is 6.2 Gyr above 13.787 Gyr (Planck 2018), "
    "6.2 sigma, and is flagged; 14.5 +- 1 Gyr is 0.7 sigma above and is not.",
    references=("Each rule's params give its limits, the reason for each (min_reason, "
                "max_reason: what a flag's message quotes) and their sources (source); "
                "`catcheck explain RULE` prints them.",),
)


class RangeSchema:
    """The column-schema layer: one pandera check per range rule, run batch by batch.

    A numpy screen picks the rows outside each rule's limits (cheap comparisons); their
    excess in sigma goes through the rule's pandera ``Check.le(threshold)``, which decides
    the failures.  pandera's fixed cost per call is milliseconds, so passing it only the
    screened rows keeps the schema layer near the cost of the comparisons themselves.
    """

    def __init__(self, rules: Sequence[Rule]) -> None:
        self.rules = list(rules)
        self.checks = {rule.id: pandera.Check.le(rule.params["threshold"], name=rule.id)
                       for rule in self.rules}
        # pandera sets up its backends on first use (a few tenths of a second): do it now,
        # in the process that forks the workers, so that they inherit it
        for check in self.checks.values():
            check(pd.Series([], dtype=float))

    def validate(self, batch: StarBatch) -> dict[str, Outcome]:
        """Validate one batch; an outcome per rule."""
        return {rule.id: self._validate_rule(rule, batch) for rule in self.rules}

    def _validate_rule(self, rule: Rule, batch: StarBatch) -> Outcome:
        params = rule.params
        values = batch.values[params["quantity"]]
        low, high = params["min"], params["max"]
        with np.errstate(invalid="ignore"):
            outside = (values < low) | (values > high)
        if not (np.isfinite(low) and np.isfinite(high)):
            outside |= np.isinf(values)
        candidates = np.flatnonzero(outside)
        sigma = batch.error_or(params["quantity"], 0.0)[candidates]
        z = excess_sigma(values[candidates], sigma, low, high)
        if low > 0:  # zero or negative where only positive values exist: no error excuses it
            z[values[candidates] <= 0] = np.inf
        z[np.isinf(values[candidates])] = np.inf  # even with an infinite error (inf/inf)
        failing = candidates
        if len(candidates):
            result = self.checks[rule.id](pd.Series(z, index=candidates))
            failing = candidates[~result.check_output.to_numpy(dtype=bool)]
        return _outcome(params, batch.size, values, candidates, sigma, z, failing)


def _outcome(params: Params, size: int, values: np.ndarray, candidates: np.ndarray,
             sigma: np.ndarray, z: np.ndarray, failing: np.ndarray) -> Outcome:
    """Flags of one range rule; expected and deviation are filled at screened rows only."""
    low, high = params["min"], params["max"]
    failed = np.zeros(size, dtype=bool)
    failed[failing] = True
    expected = np.full(size, np.nan)
    expected[candidates] = np.where(values[candidates] < low, low, high)
    deviation = np.full(size, np.nan)
    deviation[candidates] = np.where(np.isfinite(z), z, np.nan)
    errors = np.zeros(size)
    errors[candidates] = sigma
    unit = params["unit"]

    def describe(rows: np.ndarray) -> list[str]:
        messages = []
        for value, s, limit in at_rows(rows, values, errors, expected):
            side, reason = (("below the lower", params["min_reason"]) if value < low
                            else ("above the upper", params["max_reason"]))
            error = f" +- {fmt(s)}" if s > 0 else ""
            messages.append(
                f"{params['quantity']} = {fmt(value)}{error} {unit} is {side} limit "
                f"{fmt(limit)} {unit} ({reason})"
            )
        return messages

    return Outcome(failed, describe, values, expected, deviation)


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Evaluate one range rule on its own (the engine batches them through RangeSchema)."""
    from catcheck.packs import Rule

    rule = Rule(id="range", check=CHECK, severity="error", summary="", params=dict(params))
    return RangeSchema([rule]).validate(batch)["range"]


CHECK = Check(
    name="physical_range",
    needs=lambda params: (params["quantity"],),
    evaluate=evaluate,
    doc=DOC,
    uses_errors=False,
    defaults={"threshold": 3.0, "quantity": str, "min": float, "max": float, "unit": str,
              "min_reason": str, "max_reason": str, "source": str},
)
