"""What a check is: a documented, vectorised function over a :class:`StarBatch`.

A *check* is code (this package); a *rule* is data (a TOML entry in a rule pack) that names
a check, gives it an id, a severity and params.  Keeping them apart lets one check serve
several rules (the physical ranges) and lets packs be edited without touching code.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from catcheck.canonical import StarBatch
from catcheck.groups import GroupVariable

Params = Mapping[str, Any]


@dataclass(frozen=True)
class Documentation:
    """A check's documentation under fixed headings; ``catcheck explain`` renders it."""

    what: str
    why: str
    formula: str
    caveats: str
    example: str
    references: tuple[str, ...]


@dataclass
class Outcome:
    """A check's verdict on one batch.

    ``failed`` is a boolean mask over the batch; ``observed``, ``expected`` and
    ``deviation`` (in combined sigma) are arrays of the batch length or None; ``describe``
    turns positions of failing rows into one message each.  ``applies`` marks the rows the
    rule is about (for example main-sequence stars only); rows outside it are counted as
    skipped and reported as not applicable, never flagged.  None means every row.
    """

    failed: np.ndarray
    describe: Callable[[np.ndarray], list[str]]
    observed: np.ndarray | None = None
    expected: np.ndarray | None = None
    deviation: np.ndarray | None = None
    applies: np.ndarray | None = None
    #: rows so far off that no real star explains them: their flags become errors when
    #: the rule's severity is warning (never when a pack set it to info); checks that do
    #: this set Check.escalates
    beyond_doubt: np.ndarray | None = None


@dataclass(frozen=True)
class Check:
    """A built-in check: its name, what it needs, its default params and its code."""

    name: str
    needs: Callable[[Params], tuple[str, ...]]
    evaluate: Callable[[StarBatch, Params], Outcome]
    doc: Documentation
    #: param name -> default value; a type (``float``, ``str``) marks a required param
    defaults: Mapping[str, Any] = field(default_factory=dict)
    uses_errors: bool = True
    escalates: bool = False
    #: the quantities whose missing value skips a row (default: all of ``needs``)
    row_needs: Callable[[Params], tuple[str, ...]] | None = None
    #: for group rules: the per-group statistics the check reads in pass 2, by name; the
    #: engine aggregates them over the whole catalogue in pass 1 (see catcheck.groups)
    group_variables: Mapping[str, GroupVariable] = field(default_factory=dict)
    #: why a rule with these params cannot apply to the catalogue at all (None: it can);
    #: the engine then reports the rule as ``not-run: <reason>`` instead of running it
    not_run_reason: Callable[[Params], str | None] | None = None


def fixed_needs(*quantities: str) -> Callable[[Params], tuple[str, ...]]:
    """A ``needs`` function for a check whose quantities do not depend on params."""
    return lambda params: quantities


def combined_sigma(*terms: np.ndarray | float, floor: float = 0.0) -> np.ndarray:
    """Quadrature sum of independent 1-sigma terms, never below ``floor``."""
    if len(terms) == 1:
        return np.maximum(np.abs(np.asarray(terms[0], dtype=float)), floor)
    total = sum(np.square(np.asarray(t, dtype=float)) for t in terms)
    return np.maximum(np.sqrt(total), floor)


def sigma_deviation(observed: np.ndarray, expected: np.ndarray, sigma: np.ndarray,
                    threshold: float) -> tuple[np.ndarray, np.ndarray]:
    """``|observed - expected| / sigma`` and where it exceeds ``threshold`` (NaN never does)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        deviation = np.abs(observed - expected) / sigma
        return deviation, deviation > threshold


def excess_sigma(values: np.ndarray, sigma: np.ndarray | float, low: float | np.ndarray,
                 high: float | np.ndarray) -> np.ndarray:
    """How far ``values`` lie outside ``[low, high]``, in units of ``sigma``.

    0 inside the band; ``inf`` outside it where sigma is 0, and for infinite values; NaN
    where the value (or the band) is missing.
    """
    values = np.asarray(values, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        excess = np.maximum(np.maximum(low - values, values - high), 0.0)  # NaN propagates
        return np.divide(excess, sigma, out=np.zeros_like(excess), where=excess != 0.0)


def spread_at(rows: np.ndarray, size: int, values: np.ndarray,
              fill: float | bool = np.nan) -> np.ndarray:
    """A batch-length array holding ``values`` at ``rows`` and ``fill`` elsewhere (for
    rules computed only on the rows they concern)."""
    full = np.full(size, fill, dtype=np.asarray(values).dtype)
    full[rows] = values
    return full


def phase_is(batch: StarBatch, *codes: str) -> np.ndarray:
    """Rows whose phase code is one of ``codes`` (False where no phase is given)."""
    from catcheck.quantities import PHASE_INDEX

    if batch.phase is None:
        return np.zeros(batch.size, dtype=bool)
    if len(codes) == 1:
        return batch.phase == PHASE_INDEX[codes[0]]
    return np.isin(batch.phase, [PHASE_INDEX[c] for c in codes])


def at_rows(rows: np.ndarray, *arrays: np.ndarray) -> zip:
    """The values of each array at ``rows`` as Python floats, zipped row by row.

    Formatting Python floats is several times faster than numpy scalars, and messages are
    built for every flag.
    """
    return zip(*(np.asarray(a, dtype=float)[rows].tolist() for a in arrays), strict=True)


def fmt(value: float) -> str:
    """A number for a message: 4 significant digits, no needless exponent.

    Use it for any value that can be far from its usual magnitude (a Teff of 3.76 K stays
    3.76, not 4); fixed decimals suit only quantities already in dex.
    """
    return f"{value:.4g}"


def indefinite_article(number: str) -> str:
    """'a' or 'an' before a number as written in a message, by how it is spoken.

    "an" before 8, 8.5, 80, 800 and 8000 ("eight...") and before 11 and 18 and their
    thousands and millions ("eleven", "eighteen thousand"); "a" otherwise.
    """
    digits = number.lstrip("+").split(".")[0].split("e")[0]
    if not digits.isdigit():
        return "a"
    if digits.startswith("8"):
        return "an"
    return "an" if len(digits) % 3 == 2 and digits[:2] in ("11", "18") else "a"
