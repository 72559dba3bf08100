"""``physical_range``: hard physical limits of one quantity, run as a pandera schema.

All range rules of a run are validated together, once per batch, by one pandera
``DataFrameSchema`` (:class:`RangeSchema`): each rule contributes a column holding how far
each value lies outside its limits, in units of the value's 1-sigma error, and a
``Check.le(threshold)``.  pandera's failure cases become ordinary flag records.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import pandera.pandas as pandera
from pandera.errors import SchemaErrors

from catcheck.canonical import StarBatch
from catcheck.checks.base import Check, Documentation, Outcome, Params, excess_sigma, fmt

if TYPE_CHECKING:
    from catcheck.packs import Rule

DOC = Documentation(
    what="Flags a value outside the hard physical limits of its quantity (for example an "
    "age above the age of the Universe, a negative radius, a mass above the most massive "
    "stars known), allowing for the row's own 1-sigma error.",
    why="No star can have these values; a row that does holds a unit error, a sentinel "
    "value such as -999 or 99.99 that should have been null, or a corrupted number.",
    formula="excess = max(low - x, x - high, 0); flag when excess > threshold * sigma_x "
    "(sigma_x from the catalogue, 0 when it gives none; non-finite x is always flagged)",
    caveats="The limits are deliberately wide so that no real object is flagged; they do "
    "not say a value inside them is right.  Substellar objects (brown dwarfs, Teff down "
    "to ~250 K) lie inside the Teff limit on purpose.",
    example="age = 20 Gyr with a 1 Gyr error is 6.2 Gyr above 13.787 Gyr (Planck 2018), "
    "6.2 sigma, and is flagged; 14.5 +- 1 Gyr is 0.7 sigma above and is not.",
    references=("Limits and their sources are in each rule's params (`catcheck explain`).",),
)


class RangeSchema:
    """One pandera schema validating every range rule of a run at once."""

    def __init__(self, rules: Sequence[Rule]) -> None:
        self.rules = list(rules)
        self.schema = pandera.DataFrameSchema(
            {
                rule.id: pandera.Column(
                    float, nullable=True,
                    checks=pandera.Check.le(rule.params["threshold"]),
                )
                for rule in self.rules
            }
        )

    def validate(self, batch: StarBatch) -> dict[str, Outcome]:
        """Validate one batch; an outcome per rule."""
        values, sigmas, excess = {}, {}, {}
        for rule in self.rules:
            q = rule.params["quantity"]
            values[rule.id] = batch.values[q]
            sigmas[rule.id] = batch.error_or(q, 0.0)
            excess[rule.id] = excess_sigma(values[rule.id], sigmas[rule.id],
                                           rule.params["min"], rule.params["max"])
        failed_positions: dict[str, np.ndarray] = {}
        try:
            self.schema.validate(pd.DataFrame(excess, copy=False), lazy=True, inplace=True)
        except SchemaErrors as errors:
            cases = errors.failure_cases
            cases = cases[cases["schema_context"] == "Column"]
            for rule_id, group in cases.groupby("column"):
                failed_positions[str(rule_id)] = group["index"].to_numpy(dtype=np.int64)
        return {
            rule.id: _outcome(rule.params, batch.size, values[rule.id], sigmas[rule.id],
                              excess[rule.id], failed_positions.get(rule.id))
            for rule in self.rules
        }


def _outcome(params: Params, size: int, values: np.ndarray, sigma: np.ndarray,
             excess: np.ndarray, positions: np.ndarray | None) -> Outcome:
    failed = np.zeros(size, dtype=bool)
    if positions is not None:
        failed[positions] = True
    low, high = params["min"], params["max"]
    expected = np.where(values < low, low, high)
    unit = params["unit"]

    def describe(rows: np.ndarray) -> list[str]:
        messages = []
        for i in rows:
            side = "below the lower" if values[i] < low else "above the upper"
            error = f" +- {fmt(sigma[i])}" if sigma[i] > 0 else ""
            messages.append(
                f"{params['quantity']} = {fmt(values[i])}{error} {unit} is {side} limit "
                f"{fmt(expected[i])} {unit} ({params['limit']})"
            )
        return messages

    with np.errstate(invalid="ignore"):
        deviation = np.where(np.isfinite(excess), excess, np.nan)
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
              "limit": str},
)
