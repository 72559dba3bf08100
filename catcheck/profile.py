"""Profiles: which catalogue column holds which canonical quantity, in which unit.

A profile is a TOML file (format in DESIGN.md).  :func:`load_profile` reads and validates
it on its own; :func:`Profile.validate_columns` then checks it against a catalogue's
schema.  Every mistake raises :class:`~catcheck.errors.ProfileError` naming the file, the
key and the fix.
"""

from __future__ import annotations

import difflib
from collections.abc import Collection, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import pyarrow as pa

from catcheck import toml as tomllib
from catcheck.errors import ProfileError
from catcheck.quantities import PHASE_CODES, QUANTITIES
from catcheck.units import UNITS, Conversion, conversion_for

_TOP_KEYS = ("id", "group", "quantities", "phases", "groups")
_QUANTITY_KEYS = ("column", "unit", "error", "error_value")
_GROUPS_KEYS = ("table", "key", "quantities")


def did_you_mean(word: str, choices: Collection[str]) -> str:
    """A 'did you mean ...?' hint for a near miss, or an empty string.

    A choice that differs only in case wins (``TEFF`` -> ``Teff``), then one with the same
    letters in another order (``RBG`` -> ``RGB``), then the closest spelling, compared
    without regard to case, if it is close enough.
    """
    by_lower: dict[str, str] = {}
    for choice in choices:
        by_lower.setdefault(str(choice).lower(), str(choice))
    lower = str(word).lower()
    close = difflib.get_close_matches(lower, list(by_lower), n=3, cutoff=0.6)
    if not close:
        return ""
    best = next((c for c in close if sorted(c) == sorted(lower)), close[0])
    return f"did you mean {by_lower[best]!r}?"


@dataclass(frozen=True)
class QuantityMapping:
    """One canonical quantity taken from one catalogue column."""

    quantity: str
    column: str
    unit: str | None
    conversion: Conversion | None
    error_column: str | None = None
    error_value: float | None = None

    @property
    def columns(self) -> tuple[str, ...]:
        """Catalogue columns this mapping reads."""
        return (self.column,) + ((self.error_column,) if self.error_column else ())


@dataclass(frozen=True)
class GroupTable:
    """Per-group values from a second table (``[groups]`` in the profile)."""

    table: Path
    key: str
    quantities: dict[str, QuantityMapping]


@dataclass(frozen=True)
class Profile:
    """A validated profile."""

    source: str
    #: None only in a profile that reads values alone (:meth:`values_only`)
    id_column: str | None
    group_column: str | None = None
    quantities: dict[str, QuantityMapping] = field(default_factory=dict)
    phases: dict[str, str] = field(default_factory=dict)
    groups: GroupTable | None = None

    @property
    def columns(self) -> list[str]:
        """Every catalogue column the profile reads, each once, in a stable order."""
        names = [self.id_column] if self.id_column else []
        if self.group_column:
            names.append(self.group_column)
        for mapping in self.quantities.values():
            names.extend(mapping.columns)
        return list(dict.fromkeys(names))

    @property
    def label_columns(self) -> list[str]:
        """Columns of labels the checks look up by value (the group, the phase, text
        quantities such as spectral types): few distinct values repeated over many rows,
        best read as Arrow dictionaries.  Never the id column."""
        names = [self.group_column] if self.group_column else []
        names += [mapping.column for name, mapping in self.quantities.items()
                  if not QUANTITIES[name].numeric]
        return [name for name in dict.fromkeys(names) if name != self.id_column]

    def provides(self, quantity: str) -> bool:
        """True when the catalogue (or the group table) gives this quantity."""
        return quantity in self.quantities or (
            self.groups is not None and quantity in self.groups.quantities
        )

    def values_only(self, quantities: Collection[str]) -> Profile:
        """The profile reading only the group and the values of ``quantities``: no id and
        no error column (pass 1 of the group pass; its batches have no ids)."""
        return replace(self, id_column=None, quantities={
            name: replace(mapping, error_column=None, error_value=None)
            for name, mapping in self.quantities.items() if name in quantities})

    def validate_columns(self, schema: pa.Schema, where: str) -> None:
        """Check every mapped column exists in ``schema`` and numeric ones hold numbers."""
        names = schema.names
        for key, column in self._column_keys():
            if column not in names:
                hint = did_you_mean(column, names)
                raise ProfileError(
                    f"column {column!r} is not in the catalogue {where}",
                    where=f"{self.source}: {key}",
                    fix=hint or f"the catalogue has: {', '.join(names[:12])}"
                    + (" ..." if len(names) > 12 else ""),
                )
        for mapping in self.quantities.values():
            if not QUANTITIES[mapping.quantity].numeric:
                continue
            for column in mapping.columns:
                kind = schema.field(column).type
                if not (pa.types.is_floating(kind) or pa.types.is_integer(kind)
                        or pa.types.is_decimal(kind) or pa.types.is_null(kind)):
                    raise ProfileError(
                        f"column {column!r} holds {kind}, not numbers",
                        where=f"{self.source}: [quantities.{mapping.quantity}]",
                        fix=f"map {mapping.quantity} to a numeric column, or write "
                        f"{column!r} as numbers (null for a missing value)",
                    )

    def _column_keys(self) -> list[tuple[str, str]]:
        keys = [("id", self.id_column)] if self.id_column else []
        if self.group_column:
            keys.append(("group", self.group_column))
        for mapping in self.quantities.values():
            keys.append((f"[quantities.{mapping.quantity}] column", mapping.column))
            if mapping.error_column:
                keys.append((f"[quantities.{mapping.quantity}] error", mapping.error_column))
        return keys


def load_profile(path: str | Path) -> Profile:
    """Read and validate a profile TOML file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProfileError("profile file not found", where=str(path),
                           fix="pass an existing file with --profile") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(f"cannot read the profile: {exc}", where=str(path)) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"not valid TOML: {exc}", where=str(path),
                           fix="see the profile example in the README") from None
    return profile_from_dict(data, source=str(path), base=path.parent)


def profile_from_dict(data: Mapping[str, Any], source: str = "<profile>",
                      base: Path | None = None) -> Profile:
    """Validate a profile given as a dict (the parsed TOML)."""
    _reject_unknown(data, _TOP_KEYS, source, "top level")
    id_column = _string(data, "id", source, "id", required=True)
    group_column = _string(data, "group", source, "group")
    quantities = _quantities(data.get("quantities", {}), source, "quantities")
    if not quantities:
        raise ProfileError("no quantities are mapped", where=f"{source}: [quantities]",
                           fix='add e.g. [quantities.teff] with column = "Teff", unit = "K"')
    phases = _phases(data.get("phases", {}), source)
    groups = _groups(data.get("groups"), source, base or Path("."), group_column)
    return Profile(source, id_column, group_column, quantities, phases, groups)


def _reject_unknown(table: Mapping[str, Any], allowed: Collection[str], source: str,
                    where: str) -> None:
    for key in table:
        if key not in allowed:
            hint = did_you_mean(key, allowed)
            raise ProfileError(
                f"unknown key {key!r} at {where}",
                where=source,
                fix=hint or f"allowed keys: {', '.join(allowed)}",
            )


def _string(table: Mapping[str, Any], key: str, source: str, where: str,
            required: bool = False) -> str | None:
    value = table.get(key)
    if value is None:
        if required:
            raise ProfileError(f"missing required key {key!r}", where=f"{source}: {where}",
                               fix=f'add {key} = "<column name>"')
        return None
    if not isinstance(value, str) or not value:
        raise ProfileError(f"{key!r} must be a non-empty string, got {value!r}",
                           where=f"{source}: {where}", fix=f'write {key} = "<column name>"')
    return value


def _quantities(table: Any, source: str, prefix: str) -> dict[str, QuantityMapping]:
    if not isinstance(table, Mapping):
        raise ProfileError(f"[{prefix}] must be a table", where=source,
                           fix=f"write [{prefix}.teff] sections")
    result = {}
    for name, entry in table.items():
        where = f"[{prefix}.{name}]"
        if name not in QUANTITIES:
            hint = did_you_mean(name, QUANTITIES)
            raise ProfileError(f"unknown quantity {name!r}", where=f"{source}: {where}",
                               fix=hint or f"quantities are: {', '.join(QUANTITIES)}")
        if not isinstance(entry, Mapping):
            raise ProfileError(f"{where} must be a table", where=source,
                               fix=f'write {where} then column = "..."')
        result[name] = _quantity(name, entry, source, where)
    return result


def _quantity(name: str, entry: Mapping[str, Any], source: str, where: str) -> QuantityMapping:
    _reject_unknown(entry, _QUANTITY_KEYS, source, where)
    column = _string(entry, "column", source, where, required=True)
    quantity = QUANTITIES[name]
    unit = entry.get("unit")
    if not quantity.numeric:
        if unit is not None or "error" in entry or "error_value" in entry:
            raise ProfileError(f"{name} is text and takes no unit or error",
                               where=f"{source}: {where}", fix="remove unit/error")
        return QuantityMapping(name, column, None, None)
    accepted = ", ".join(UNITS[name])
    if unit is None:
        raise ProfileError(f"missing 'unit' for {name}", where=f"{source}: {where}",
                           fix=f"add unit = one of: {accepted}")
    conversion = conversion_for(name, unit) if isinstance(unit, str) else None
    if conversion is None:
        hint = did_you_mean(str(unit), UNITS[name])
        raise ProfileError(f"unit {unit!r} is not accepted for {name}",
                           where=f"{source}: {where} unit",
                           fix=(hint + " " if hint else "") + f"use one of: {accepted}")
    error_column = _string(entry, "error", source, where)
    error_value = entry.get("error_value")
    if error_column and error_value is not None:
        raise ProfileError("give either 'error' (a column) or 'error_value', not both",
                           where=f"{source}: {where}", fix="remove one of them")
    if error_value is not None and (
        isinstance(error_value, bool) or not isinstance(error_value, int | float)
        or not error_value >= 0
    ):
        raise ProfileError(f"error_value must be a number >= 0, got {error_value!r}",
                           where=f"{source}: {where}", fix="write e.g. error_value = 80")
    return QuantityMapping(name, column, unit, conversion, error_column,
                           None if error_value is None else float(error_value))


def _phases(table: Any, source: str) -> dict[str, str]:
    if not isinstance(table, Mapping):
        raise ProfileError("[phases] must be a table of label = code", where=source,
                           fix='write [phases] then "dwarf" = "MS"')
    upper = {code.upper(): code for code in PHASE_CODES}
    phases = {}
    for label, code in table.items():
        if not isinstance(code, str) or code.upper() not in upper:
            hint = did_you_mean(str(code).upper(), PHASE_CODES)
            raise ProfileError(
                f"label {label!r} is mapped to {code!r}, which is not a phase code",
                where=f"{source}: [phases]",
                fix=(hint + " " if hint else "") + f"codes are: {', '.join(PHASE_CODES)}",
            )
        phases[label] = upper[code.upper()]
    return phases


def _groups(table: Any, source: str, base: Path, group_column: str | None) -> GroupTable | None:
    if table is None:
        return None
    if not isinstance(table, Mapping):
        raise ProfileError("[groups] must be a table", where=source,
                           fix='write [groups] with table = "...", key = "..."')
    _reject_unknown(table, _GROUPS_KEYS, source, "[groups]")
    if group_column is None:
        raise ProfileError("[groups] needs the top-level 'group' column", where=source,
                           fix='add group = "<cluster column>" at the top')
    path = _string(table, "table", source, "[groups]", required=True)
    key = _string(table, "key", source, "[groups]", required=True)
    quantities = _quantities(table.get("quantities", {}), source, "groups.quantities")
    for name in quantities:
        if not QUANTITIES[name].numeric:
            raise ProfileError(f"a group table can give numeric quantities only, not {name}",
                               where=f"{source}: [groups.quantities.{name}]",
                               fix="map it in the catalogue's [quantities] instead")
    return GroupTable(base / path, key, quantities)
