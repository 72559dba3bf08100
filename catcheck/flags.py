"""The flags table: one record per (catalogue row, failed rule); every output is a view of it."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyarrow as pa

FLAG_SCHEMA = pa.schema(
    [
        pa.field("row", pa.int64()),
        pa.field("id", pa.string()),
        pa.field("rule", pa.string()),
        pa.field("severity", pa.string()),
        pa.field("message", pa.string()),
        pa.field("observed", pa.float64()),
        pa.field("expected", pa.float64()),
        pa.field("deviation", pa.float64()),
    ]
)


def flag_records(rule_id: str, severity: str, first_row: int, positions: np.ndarray,
                 ids: pa.Array, messages: Sequence[str], observed: np.ndarray | None,
                 expected: np.ndarray | None, deviation: np.ndarray | None,
                 escalated: np.ndarray | None = None) -> pa.Table:
    """Flag records of one rule for the given positions within a batch.

    ``severity`` is the rule's; where ``escalated`` (a mask over the positions) is true,
    the flag is an error instead (a check that escalates flags beyond doubt).
    """
    n = len(positions)
    severities = pa.array([severity, "error"], pa.string())
    severity_codes = np.zeros(n, dtype=np.int8) if escalated is None else escalated.astype(
        np.int8)

    def pick(values: np.ndarray | None) -> np.ndarray:
        if values is None:
            return np.full(n, np.nan)
        return np.asarray(values, dtype=float)[positions]

    return pa.Table.from_arrays(
        [
            pa.array(positions.astype(np.int64) + first_row, pa.int64()),
            ids.take(pa.array(positions)),
            pa.repeat(pa.scalar(rule_id, pa.string()), n),
            severities.take(pa.array(severity_codes)),
            pa.array(messages, pa.string()),
            pa.array(pick(observed), pa.float64()),
            pa.array(pick(expected), pa.float64()),
            pa.array(pick(deviation), pa.float64()),
        ],
        schema=FLAG_SCHEMA,
    )
