"""Turn a record batch into canonical numpy arrays: values, 1-sigma errors, phase codes."""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from catcheck.errors import CatalogueError, ProfileError
from catcheck.groups import GroupKeys, GroupSummary
from catcheck.physics.stellar import LN10
from catcheck.profile import Profile, QuantityMapping, did_you_mean
from catcheck.quantities import NO_PHASE, PHASE_INDEX, QUANTITIES


@dataclass
class StarBatch:
    """A slice of the catalogue in canonical units, ready for the rules.

    ``values`` maps numeric quantities to float64 arrays (NaN where the catalogue has no
    value); ``errors`` maps them to canonical 1-sigma arrays where the profile gives errors;
    ``phase`` holds phase codes (index into PHASE_CODES, -1 for none); ``text`` holds text
    quantities such as spectral types as Arrow string arrays (null for missing).
    """

    first_row: int
    size: int
    ids: pa.Array
    values: dict[str, np.ndarray] = field(default_factory=dict)
    errors: dict[str, np.ndarray] = field(default_factory=dict)
    phase: np.ndarray | None = None
    text: dict[str, pa.Array] = field(default_factory=dict)
    groups: pa.Array | None = None
    group_codes: np.ndarray | None = None
    group_stats: dict[str, GroupSummary] = field(default_factory=dict)
    _missing_errors: dict[str, np.ndarray] = field(default_factory=dict, repr=False)
    _has: dict[str | tuple[str, ...], np.ndarray] = field(default_factory=dict, repr=False)
    _log10: dict[str, np.ndarray] = field(default_factory=dict, repr=False)
    _log_errors: dict[str, np.ndarray] = field(default_factory=dict, repr=False)
    _log_sigmas: dict[tuple[str, float], np.ndarray] = field(default_factory=dict, repr=False)

    def __len__(self) -> int:
        return self.size

    def has(self, quantity: str) -> np.ndarray:
        """Rows where ``quantity`` has a usable value (not null, not NaN); computed once."""
        if quantity not in self._has:
            if quantity == "phase":
                present = self.phase != NO_PHASE
            elif quantity in self.text:
                present = self.text[quantity].is_valid().to_numpy(zero_copy_only=False)
            else:
                present = ~np.isnan(self.values[quantity])
            self._has[quantity] = present
        return self._has[quantity]

    def has_all(self, quantities: Sequence[str]) -> np.ndarray:
        """Rows where every one of ``quantities`` has a usable value (computed once per
        combination; read-only)."""
        key = tuple(sorted(quantities))
        if key not in self._has:
            present = np.ones(self.size, dtype=bool)
            for quantity in key:
                present &= self.has(quantity)
            present.flags.writeable = False
            self._has[key] = present
        return self._has[key]

    def missing_error(self, quantity: str) -> np.ndarray:
        """Rows where the catalogue's 1-sigma of ``quantity`` is missing (computed once)."""
        if quantity not in self._missing_errors:
            self._missing_errors[quantity] = np.isnan(self.errors[quantity])
        return self._missing_errors[quantity]

    def error_or(self, quantity: str, default: np.ndarray | float) -> np.ndarray:
        """The catalogue's 1-sigma for ``quantity`` where given, else ``default``.

        Rows whose catalogue error is missing or NaN fall back to ``default`` too.
        """
        given = self.errors.get(quantity)
        default = np.broadcast_to(np.asarray(default, dtype=float), (self.size,))
        if given is None:
            return default
        missing = self.missing_error(quantity)
        return np.where(missing, default, given) if missing.any() else given

    def log10(self, quantity: str) -> np.ndarray:
        """log10 of a quantity in canonical units (computed once per batch).

        For columns declared in dex this is the catalogue's own column, unrounded.
        """
        if quantity not in self._log10:
            with np.errstate(divide="ignore", invalid="ignore"):
                self._log10[quantity] = np.log10(self.values[quantity])
        return self._log10[quantity]

    def log_sigma(self, quantity: str, assumed_dex: float) -> np.ndarray:
        """1-sigma of ``log10(quantity)`` in dex: the catalogue's, else ``assumed_dex``.

        Linear errors propagate as ``sigma / (x ln 10)``; errors of dex columns are used
        as given.  Rows without a usable catalogue error get ``assumed_dex``.
        """
        key = (quantity, assumed_dex)
        if key in self._log_sigmas:
            return self._log_sigmas[key]
        given = self._log_errors.get(quantity)
        if given is None and quantity in self.errors:
            with np.errstate(divide="ignore", invalid="ignore"):
                given = self.errors[quantity] / (np.abs(self.values[quantity]) * LN10)
            self._log_errors[quantity] = given
        if given is None:
            sigma = np.broadcast_to(np.float64(assumed_dex), (self.size,))
        else:
            missing = self.missing_error(quantity)
            sigma = np.where(missing, assumed_dex, given) if missing.any() else given
        self._log_sigmas[key] = sigma
        return sigma

    def group_summary(self, name: str) -> tuple[GroupSummary, np.ndarray]:
        """The statistics of group variable ``name`` (by group code) and each row's group
        code: ``summary.at(codes)`` gives (member count, median, robust spread) per row,
        and terms computed once per group go through :meth:`GroupSummary.tables`."""
        assert self.group_codes is not None, "group statistics need the profile's group"
        return self.group_stats[name], self.group_codes

    def environment(self) -> dict[str, np.ndarray]:
        """Values by quantity name, phase codes included, for the expression language."""
        env = dict(self.values)
        if self.phase is not None:
            env["phase"] = self.phase
        return env


class PhaseLabels:
    """Maps catalogue phase labels to phase codes, counting labels it cannot map."""

    def __init__(self, mapping: Mapping[str, str]) -> None:
        self.mapping = {label.strip(): code for label, code in mapping.items()}
        self.unmapped: Counter[str] = Counter()

    def code_of(self, label: str) -> int:
        """The phase code index of one label, or NO_PHASE."""
        label = label.strip()
        code = self.mapping.get(label) or (label.upper() if label.upper() in PHASE_INDEX
                                           else None)
        return PHASE_INDEX[code] if code else NO_PHASE

    def codes(self, column: pa.Array) -> np.ndarray:
        """Phase codes (int8) for a column of labels; nulls and unknown labels give -1."""
        if not pa.types.is_dictionary(column.type):
            column = pc.cast(column, pa.string()).dictionary_encode()
        labels = column.dictionary.to_pylist()
        lookup = np.array([self.code_of(str(label)) for label in labels] + [NO_PHASE],
                          dtype=np.int8)
        indices = column.indices.fill_null(len(labels)).to_numpy(zero_copy_only=False)
        codes = lookup[indices]
        unknown = [i for i, code in enumerate(lookup[:-1]) if code == NO_PHASE]
        if unknown:
            counts = np.bincount(indices, minlength=len(labels) + 1)
            for i in unknown:
                if counts[i]:
                    self.unmapped[str(labels[i])] += int(counts[i])
        return codes


def to_float(column: pa.Array) -> np.ndarray:
    """A numeric Arrow column as a float64 numpy array with NaN for nulls."""
    if not pa.types.is_floating(column.type) or column.type != pa.float64():
        column = pc.cast(column, pa.float64())
    return column.to_numpy(zero_copy_only=False)


@dataclass
class Labels:
    """The label maps of one run, shared by every batch: phases and groups."""

    phases: PhaseLabels
    groups: GroupKeys = field(default_factory=GroupKeys)
    group_values: GroupValues | None = None


def canonical_batch(profile: Profile, batch: pa.RecordBatch, first_row: int,
                    labels: Labels) -> StarBatch:
    """Convert one record batch to canonical units following the profile.

    Values beyond the float range after conversion become inf (the range rules flag
    them) without a floating-point warning.
    """
    with np.errstate(all="ignore"):
        return _canonical_batch(profile, batch, first_row, labels)


def _canonical_batch(profile: Profile, batch: pa.RecordBatch, first_row: int,
                     labels: Labels) -> StarBatch:
    ids = (pc.cast(batch[profile.id_column], pa.string()) if profile.id_column
           else pa.nulls(batch.num_rows, pa.string()))  # a values-only read (group pass)
    stars = StarBatch(first_row, batch.num_rows, ids)
    if profile.group_column:
        stars.groups = batch[profile.group_column]
        stars.group_codes = labels.groups.codes(stars.groups)
    for name, mapping in profile.quantities.items():
        column = batch[mapping.column]
        if name == "phase":
            stars.phase = labels.phases.codes(column)
        elif not QUANTITIES[name].numeric:
            # labels read as a dictionary stay one (the checks parse each distinct one)
            text_labels = (pa.types.is_dictionary(column.type)
                           and pa.types.is_string(column.type.value_type))
            stars.text[name] = column if text_labels else pc.cast(column, pa.string())
        else:
            _add_numeric(stars, mapping, batch)
    if labels.group_values is not None:
        labels.group_values.fill(stars)
    return stars


@dataclass
class GroupValues:
    """Per-group quantities from a second table, by group code, in canonical units.

    A member without its own value of a quantity takes its group's (and its error).
    """

    values: dict[str, np.ndarray]
    errors: dict[str, np.ndarray]

    def fill(self, stars: StarBatch) -> None:
        """Fill the batch's missing values (and errors) from the members' groups."""
        codes = stars.group_codes
        assert codes is not None
        for quantity, by_group in self.values.items():
            from_group = _by_code(by_group, codes)
            own = stars.values.get(quantity)
            missing = np.isnan(own) if own is not None else np.ones(stars.size, dtype=bool)
            stars.values[quantity] = from_group if own is None else np.where(
                missing, from_group, own)
            stars._log10.pop(quantity, None)
            stars._log_errors.pop(quantity, None)
            stars._log_sigmas = {k: v for k, v in stars._log_sigmas.items() if k[0] != quantity}
            if quantity in self.errors:
                group_error = _by_code(self.errors[quantity], codes)
                own_error = stars.errors.get(quantity)
                if own_error is None:  # members with their own value keep 'no error'
                    own_error = np.full(stars.size, np.nan)
                stars.errors[quantity] = np.where(missing, group_error, own_error)
                stars._missing_errors.pop(quantity, None)


def _by_code(by_group: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Per-group values spread to rows; NaN for rows without a group or a table entry."""
    inside = (codes >= 0) & (codes < len(by_group))
    return np.where(inside, by_group[np.where(inside, codes, 0)] if len(by_group) else np.nan,
                    np.nan)


def load_group_values(profile: Profile, keys: GroupKeys) -> GroupValues | None:
    """Read the profile's ``[groups]`` table into canonical per-group values."""
    table_spec = profile.groups
    if table_spec is None:
        return None
    try:
        table = pq.read_table(table_spec.table)
    except FileNotFoundError:
        raise CatalogueError("group table not found", where=str(table_spec.table),
                             fix="fix [groups] table in the profile") from None
    except (OSError, pa.ArrowException) as exc:
        raise CatalogueError(f"cannot read the group table: {exc}",
                             where=str(table_spec.table)) from None
    needed = [table_spec.key] + [c for m in table_spec.quantities.values() for c in m.columns]
    for column in needed:
        if column not in table.column_names:
            raise ProfileError(f"column {column!r} is not in the group table "
                               f"{table_spec.table}", where=f"{profile.source}: [groups]",
                               fix=did_you_mean(column, table.column_names)
                               or f"it has: {', '.join(table.column_names)}")
    codes = keys.register(table[table_spec.key].to_pylist())
    size = int(codes.max()) + 1 if len(codes) else 0
    values, errors = {}, {}
    for quantity, mapping in table_spec.quantities.items():
        assert mapping.conversion is not None
        for column in mapping.columns:
            kind = table.schema.field(column).type
            if not (pa.types.is_floating(kind) or pa.types.is_integer(kind)):
                raise ProfileError(f"column {column!r} of the group table holds {kind}, not "
                                   "numbers", where=f"{profile.source}: [groups.quantities."
                                   f"{quantity}]", fix="map a numeric column")
        raw = to_float(table[mapping.column].combine_chunks())
        canonical = mapping.conversion.values(raw)
        values[quantity] = _scatter(canonical, codes, size)
        if mapping.error_column or mapping.error_value is not None:
            raw_error = (to_float(table[mapping.error_column].combine_chunks())
                         if mapping.error_column else np.full(len(raw), mapping.error_value))
            errors[quantity] = _scatter(mapping.conversion.errors(canonical, raw_error),
                                        codes, size)
    return GroupValues(values, errors)


def _scatter(values: np.ndarray, codes: np.ndarray, size: int) -> np.ndarray:
    out = np.full(size, np.nan)
    keep = codes >= 0
    out[codes[keep]] = values[keep]
    return out


def _add_numeric(stars: StarBatch, mapping: QuantityMapping, batch: pa.RecordBatch) -> None:
    assert mapping.conversion is not None
    quantity = mapping.quantity
    raw = to_float(batch[mapping.column])
    values = mapping.conversion.values(raw)
    stars.values[quantity] = values
    is_log = mapping.conversion.kind == "dex" and mapping.conversion.scale == 1.0
    if is_log:  # the column already holds log10 of the canonical value: keep it exact
        stars._log10[quantity] = raw
    if mapping.error_column is not None:
        errors = to_float(batch[mapping.error_column])
    elif mapping.error_value is not None:
        errors = np.full(stars.size, mapping.error_value)
    else:
        return
    stars.errors[quantity] = mapping.conversion.errors(values, errors)
    if is_log:
        stars._log_errors[quantity] = np.abs(errors)
