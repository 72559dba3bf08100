"""The built-in checks, by the name a rule pack uses in ``check = "..."``."""

from __future__ import annotations

from catcheck.checks import physical_range, stefan_boltzmann
from catcheck.checks.base import Check

CHECKS: dict[str, Check] = {
    check.name: check
    for check in (
        physical_range.CHECK,
        stefan_boltzmann.CHECK,
    )
}
