"""MK spectral types: parsing, and the spectral type -> effective temperature scales.

Parsing follows the Morgan-Keenan (MK) notation (Morgan, Keenan & Kellman 1943; the
modern conventions as summarised by Gray & Corbally 2009, *Stellar Spectral
Classification*, Princeton): a class letter O B A F G K M (extended by L, T, Y for the
coolest dwarfs), a decimal subtype, a luminosity class in Roman numerals (0/Ia+ hypergiant,
I supergiant with Ia/Iab/Ib, II bright giant, III giant, IV subgiant, V dwarf, VI
subdwarf) and lower-case suffixes (``e`` emission, ``n`` broad lines, ``p`` peculiar,
``m`` enhanced metals, ...).  Older Mount Wilson prefixes ``d``, ``g``, ``c`` and ``sd``
(dwarf, giant, supergiant, subdwarf) are read as luminosity classes.

A catalogue holds millions of rows but few distinct types, so a column is dictionary-encoded
and every distinct string is parsed once (:func:`parse_spectral_types`); rows map back
through the dictionary indices.

Types are placed on one numeric axis, the *type index*: O0 = 0, B0 = 10, A0 = 20, F0 = 30,
G0 = 40, K0 = 50, M0 = 60, L0 = 70, T0 = 80, Y0 = 90 (so G2 = 42, K1.5 = 51.5).  A Teff
scale is a table of (type, Teff) interpolated linearly in log Teff against this index.  The
scales ship as small CSV tables in ``catcheck/data`` whose headers name their source:

* dwarfs (luminosity class V): the mean dwarf sequence of Pecaut & Mamajek (2013, ApJS 208,
  9, Table 5) as updated in E. Mamajek's table version 2022.04.16, O3-Y4, copied unchanged;
* giants (II-III), G0-M8: typed from memory (after Ridgway et al. 1980, Perrin et al. 1998,
  A&A 331, 619, and van Belle et al. 2021, ApJ 922, 163); earlier types take the dwarf
  scale, since O-F giants have nearly the Teff of dwarfs of the same type;
* supergiants (I), B0-M5: typed from memory (after Levesque et al. 2005, ApJ 628, 973 for
  K-M, and Crowther et al. 2006 and Markova & Puls 2008 for B supergiants); O types take
  the dwarf scale.

Types outside the MK temperature sequence (white dwarfs, Wolf-Rayet stars, carbon and S
stars), chemically peculiar (Am, Ap/Bp) and composite spectra are recognised and kept apart:
no Teff scale applies to them.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from enum import IntEnum
from functools import cache, lru_cache
from typing import NamedTuple

import numpy as np
import pyarrow as pa
from numpy.typing import ArrayLike, NDArray

from catcheck.physics.tables import number, read_table, shipped_text

#: class letters in temperature order; the type index of class c, subtype s is 10 * pos + s
CLASS_LETTERS = "OBAFGKMLTY"
_CLASS_OFFSET = {letter: 10.0 * i for i, letter in enumerate(CLASS_LETTERS)}


class TypeKind(IntEnum):
    """What a spectral type string is, as far as a Teff scale is concerned."""

    MK = 0  # an MK type of the O-Y temperature sequence
    MISSING = 1  # null or empty
    UNPARSEABLE = 2  # not recognised
    WHITE_DWARF = 3  # D plus A, B, C, O, Q, Z, X (e.g. DA2), or "WD"
    WOLF_RAYET = 4  # WN, WC, WO, WR
    CARBON = 5  # C, R, N classes (C5,4; C-N5; R8)
    S_TYPE = 6  # S, MS, SC stars (ZrO bands)
    PECULIAR = 7  # chemically peculiar: Am (kA2hA5mA7V, A2m), Ap/Bp (suffix p, Si, Sr, ...)
    COMPOSITE = 8  # two spectra (G2V+K1V, "comp", SB2)


class LuminosityGroup(IntEnum):
    """Luminosity classes grouped by which Teff scale applies to them."""

    UNKNOWN = 0  # no luminosity class given
    DWARF = 1  # V, IV-V, prefix d
    SUBGIANT = 2  # IV, III-IV
    GIANT = 3  # III, II-III, II, prefix g
    SUPERGIANT = 4  # 0, Ia+, Ia, Iab, Ib, I-II, prefix c
    SUBDWARF = 5  # VI, prefixes sd, esd, usd (including hot subdwarfs sdB, sdO)


#: Roman luminosity classes as numbers; ranges such as IV-V are averaged (4.5)
_ROMAN_VALUE = {"0": 0.0, "I": 1.0, "II": 2.0, "III": 3.0, "IV": 4.0, "V": 5.0, "VI": 6.0}
#: Mount Wilson prefixes as luminosity classes
_PREFIX_VALUE = {"d": 5.0, "g": 3.0, "c": 1.0, "sd": 6.0, "esd": 6.0, "usd": 6.0}
#: upper edges of the luminosity groups on the numeric class axis, hottest/brightest first
_GROUP_EDGES: tuple[tuple[float, LuminosityGroup], ...] = (
    (2.0, LuminosityGroup.SUPERGIANT),  # 0 .. I-II
    (3.5, LuminosityGroup.GIANT),  # II .. III, II-III
    (4.5, LuminosityGroup.SUBGIANT),  # III-IV, IV
    (6.0, LuminosityGroup.DWARF),  # IV-V, V
)

_ROMAN = r"(?:VI|V|IV|III|II|I|0)"
_SUBCLASS = r"(?:a\+|a0|ab|a|b|\+)?"
_NUMBER = r"\d+(?:\.\d+)?"
_MK_PATTERN = re.compile(
    rf"(?P<prefix>esd|usd|sd|d|g|c)?"
    rf"(?P<cls>[{CLASS_LETTERS}])(?P<sub>{_NUMBER})?"
    rf"(?:[-/](?P<cls2>[{CLASS_LETTERS}])?(?P<sub2>{_NUMBER}))?"
    rf"(?P<lum>{_ROMAN}{_SUBCLASS}(?:[-/]{_ROMAN}{_SUBCLASS})?)?"
    rf"(?P<rest>.*)",
    re.IGNORECASE,
)
_ROMAN_AT_START = re.compile(_ROMAN, re.IGNORECASE)
#: recognised before the MK pattern, in this order (first match wins)
_NON_MK: tuple[tuple[re.Pattern[str], TypeKind], ...] = (
    (re.compile(r"\+(?:sd|[dgc])?[OBAFGKMLTYW]|\+D[A-Z]|comp|SB2", re.IGNORECASE),
     TypeKind.COMPOSITE),
    (re.compile(r"^(?:WD|D[ABCOQZX])", re.IGNORECASE), TypeKind.WHITE_DWARF),
    (re.compile(r"^W[NCOR\d]", re.IGNORECASE), TypeKind.WOLF_RAYET),
    # Am notation: Ca II K-line, hydrogen and metallic-line types, e.g. kA2hA5mA7V
    (re.compile(r"^[khm][OBAFGKM]"), TypeKind.PECULIAR),
    (re.compile(r"^(?:MS|SC|S)(?![A-Za-z])", re.IGNORECASE), TypeKind.S_TYPE),
    (re.compile(rf"^[CRN](?![{CLASS_LETTERS}])", re.IGNORECASE), TypeKind.CARBON),
)
#: suffixes that mark a chemically peculiar star: p (peculiar), m first (Am), element codes
_PECULIAR_SUFFIX = re.compile(r"(?i:^m|p)|Si|Sr|Cr|Eu|Hg|He")
#: removed before parsing: whitespace, uncertainty marks, the variability note "var"
_NOISE = re.compile(r"\s+|var", re.IGNORECASE)
_UNCERTAIN = re.compile(r"[:?]")


@dataclass(frozen=True)
class MKType:
    """One parsed spectral type string.

    ``index`` is the type index (G2 = 42, NaN without a subtype); ``luminosity_class`` the
    numeric class (I = 1 ... VI = 6, ranges averaged; NaN when none is given); ``uncertain``
    is true when the string carries a ``:`` or ``?`` mark.
    """

    text: str | None
    kind: TypeKind
    letter: str = ""
    subtype: float = math.nan
    index: float = math.nan
    luminosity_class: float = math.nan
    group: LuminosityGroup = LuminosityGroup.UNKNOWN
    uncertain: bool = False


@lru_cache(maxsize=65536)
def parse_mk(text: str | None) -> MKType:
    """Parse one MK spectral type string (see the module docstring for the notation).

    Whitespace, ``:`` and ``?`` (uncertainty marks) and ``var`` are ignored; letters and
    Roman numerals may be in either case.  A range of subtypes (``G2/3``, ``G8-K0``) gives
    their mean index; a range of classes (``IV-V``) the mean luminosity class.
    Returns kind ``UNPARSEABLE`` for strings not recognised and a subtype of 10 or more.
    Results are cached: a catalogue repeats a few hundred distinct types batch after batch.
    """
    if text is None:
        return MKType(None, TypeKind.MISSING)
    uncertain = bool(_UNCERTAIN.search(text))
    clean = _UNCERTAIN.sub("", _NOISE.sub("", text))
    if not clean:
        return MKType(text, TypeKind.MISSING)
    for pattern, kind in _NON_MK:
        if pattern.search(clean):
            return MKType(text, kind, uncertain=uncertain)
    match = _MK_PATTERN.fullmatch(clean)
    if match is None:
        return MKType(text, TypeKind.UNPARSEABLE, uncertain=uncertain)
    if not _valid_subtypes(match):
        return MKType(text, TypeKind.UNPARSEABLE, uncertain=uncertain)
    letter = match["cls"].upper()
    index = _type_index(letter, match["sub"])
    if match["sub2"] is not None:
        index = 0.5 * (index + _type_index((match["cls2"] or letter).upper(), match["sub2"]))
    lum = _luminosity_class(match["lum"], match["prefix"])
    rest = match["rest"]
    kind = TypeKind.PECULIAR if _PECULIAR_SUFFIX.search(rest) else TypeKind.MK
    return MKType(text, kind, letter, index - _CLASS_OFFSET[letter], index, lum,
                  luminosity_group(lum), uncertain)


def _type_index(letter: str, subtype: str | None) -> float:
    return _CLASS_OFFSET[letter] + (float(subtype) if subtype is not None else math.nan)


def _valid_subtypes(match: re.Match[str]) -> bool:
    return all(float(s) < 10.0 for s in (match["sub"], match["sub2"]) if s is not None)


def _luminosity_class(lum: str | None, prefix: str | None) -> float:
    """The numeric luminosity class of the Roman part (mean of a range), else the prefix's."""
    if lum:
        values = []
        for part in re.split(r"[-/]", lum):
            roman = _ROMAN_AT_START.match(part)
            assert roman is not None  # the MK pattern only lets Roman numerals through
            values.append(_ROMAN_VALUE[roman.group().upper()])
        return float(np.mean(values))
    return _PREFIX_VALUE.get(prefix.lower(), math.nan) if prefix else math.nan


def luminosity_group(luminosity_class: float) -> LuminosityGroup:
    """The group of a numeric luminosity class (NaN -> UNKNOWN).

    Edges: below 2 supergiant (0, I, I-II), below 3.5 giant (II, II-III, III), below 4.5
    subgiant (III-IV, IV), below 6 dwarf (IV-V, V), 6 and above subdwarf (VI).
    """
    if math.isnan(luminosity_class):
        return LuminosityGroup.UNKNOWN
    for edge, group in _GROUP_EDGES:
        if luminosity_class < edge:
            return group
    return LuminosityGroup.SUBDWARF


@dataclass(frozen=True)
class SpectralTypes:
    """The parsed types of a column: one :class:`MKType` per distinct string, plus codes.

    ``distinct`` lists the distinct strings' parses, the last entry standing for null;
    ``codes[i]`` is the position in ``distinct`` of row i.  Per-distinct values become
    per-row values with :meth:`rows`, a single gather.
    """

    distinct: tuple[MKType, ...]
    codes: NDArray[np.intp]

    def values(self, name: str) -> NDArray:
        """One field of :class:`MKType` (``kind``, ``index``, ``group``, ...) per distinct."""
        return np.array([getattr(t, name) for t in self.distinct])

    def rows(self, per_distinct: ArrayLike) -> NDArray:
        """Per-distinct values spread to the rows: one gather along the last axis.

        ``per_distinct`` has one entry per entry of ``distinct`` along its last axis.
        """
        return np.take(np.asarray(per_distinct), self.codes, axis=-1)


def parse_spectral_types(types: pa.Array | pa.ChunkedArray | Sequence[str | None]
                         ) -> SpectralTypes:
    """Parse a column of spectral types, each distinct string once.

    The column is dictionary-encoded (Arrow); :func:`parse_mk` runs once per dictionary
    entry, never per row, so a catalogue of millions of rows with a few hundred distinct
    types costs a few hundred parses plus one gather.
    """
    column = types if isinstance(types, pa.Array | pa.ChunkedArray) else pa.array(
        types, type=pa.string())
    if isinstance(column, pa.ChunkedArray):
        column = column.combine_chunks()
    if not pa.types.is_dictionary(column.type):
        column = column.dictionary_encode()
    labels = column.dictionary.to_pylist()
    distinct = (*(parse_mk(label) for label in labels), MKType(None, TypeKind.MISSING))
    codes = column.indices.fill_null(len(labels)).to_numpy(zero_copy_only=False)
    return SpectralTypes(distinct, codes.astype(np.intp, copy=False))


# =========================================================================================
# Teff scales
# =========================================================================================

SCALE_NAMES = ("dwarf", "giant", "supergiant")
#: the scales a luminosity group is compared with; a star matches if it fits any of them
#: (subgiants and stars without a class lie between, or on, the dwarf and giant scales)
SCALES_FOR_GROUP: dict[LuminosityGroup, tuple[str, ...]] = {
    LuminosityGroup.DWARF: ("dwarf",),
    LuminosityGroup.SUBGIANT: ("dwarf", "giant"),
    LuminosityGroup.GIANT: ("giant",),
    LuminosityGroup.SUPERGIANT: ("supergiant",),
    LuminosityGroup.UNKNOWN: ("dwarf", "giant"),
    LuminosityGroup.SUBDWARF: (),
}
_REQUIRED_META = ("scale", "label", "status", "reference")
_EARLIER_TYPES = "earlier types"


@dataclass(frozen=True)
class TeffScale:
    """A spectral type -> Teff table, interpolated linearly in log Teff over the type index.

    ``index`` increases strictly; ``log_teff`` is log10 Teff (K).  ``label`` names the
    scale in messages; ``reference`` and ``status`` ("published table" or "from memory")
    come from the table's header.
    """

    name: str
    label: str
    reference: str
    status: str
    index: NDArray[np.float64]
    log_teff: NDArray[np.float64]

    def log_teff_at(self, index: ArrayLike) -> NDArray[np.float64]:
        """log10 Teff at type index ``index``; NaN outside the table (no extrapolation)."""
        index = np.asarray(index, dtype=float)
        inside = (index >= self.index[0]) & (index <= self.index[-1])
        return np.where(inside, np.interp(index, self.index, self.log_teff), np.nan)

    def log_teff_band(self, index: ArrayLike, half_width: ArrayLike
                      ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """(cool, hot) log10 Teff at ``index + half_width`` and ``index - half_width``.

        The band's ends are clipped to the table, so at its first and last types the band
        is one-sided.  NaN where ``index`` itself lies outside the table.
        """
        index = np.asarray(index, dtype=float)
        half_width = np.asarray(half_width, dtype=float)
        outside = np.isnan(self.log_teff_at(index))
        cool = np.interp(np.minimum(index + half_width, self.index[-1]), self.index,
                         self.log_teff)
        hot = np.interp(np.maximum(index - half_width, self.index[0]), self.index,
                        self.log_teff)
        return np.where(outside, np.nan, cool), np.where(outside, np.nan, hot)


class TeffBands(NamedTuple):
    """log10 Teff (K) of types on every scale: one row per scale of :data:`SCALE_NAMES`.

    ``centre`` is the scale at the type, ``cool`` and ``hot`` the ends of its band; NaN
    where the scale does not apply to the type's luminosity group or does not cover it.
    """

    centre: NDArray[np.float64]
    cool: NDArray[np.float64]
    hot: NDArray[np.float64]


def type_teff_bands(index: ArrayLike, group: ArrayLike, half_width: ArrayLike) -> TeffBands:
    """Expected log Teff of types (type index, luminosity group) on each applicable scale.

    The band of a type t on scale s runs from s at ``t + half_width`` (cooler) to s at
    ``t - half_width`` (hotter), clipped to the scale's table.  Which scales apply to a
    group is :data:`SCALES_FOR_GROUP`.  Pass NaN as the index of types that no scale should
    serve (white dwarfs, peculiar, ...).  Arrays have shape (len(SCALE_NAMES), n).
    """
    index = np.asarray(index, dtype=float)
    group = np.asarray(group)
    half_width = np.broadcast_to(np.asarray(half_width, dtype=float), index.shape)
    rows = []
    for name in SCALE_NAMES:
        scale = teff_scale(name)
        groups = [g for g, names in SCALES_FOR_GROUP.items() if name in names]
        centre = np.where(np.isin(group, groups), scale.log_teff_at(index), np.nan)
        cool, hot = scale.log_teff_band(index, half_width)
        outside = np.isnan(centre)
        rows.append((centre, np.where(outside, np.nan, cool), np.where(outside, np.nan, hot)))
    centre, cool, hot = (np.array(parts) for parts in zip(*rows, strict=True))
    return TeffBands(centre, cool, hot)


def teff_scale(name: str) -> TeffScale:
    """The shipped scale ``name`` (one of :data:`SCALE_NAMES`), read once and cached."""
    if name not in SCALE_NAMES:
        raise ValueError(f"unknown Teff scale {name!r}; scales are {', '.join(SCALE_NAMES)}")
    return _load_scale(name)


@cache
def _load_scale(name: str) -> TeffScale:
    filename = f"mk_teff_{name}.csv"
    meta, types, teff = read_scale_table(shipped_text(filename), filename)
    index = np.array([parse_mk(spt).index for spt in types])
    log_teff = np.log10(np.array(teff))
    if np.isnan(index).any() or np.any(np.diff(index) <= 0):
        raise ValueError(f"{filename}: types must be plain MK types in increasing order")
    earlier = meta.get(_EARLIER_TYPES)
    if earlier:
        base = teff_scale(earlier)
        keep = base.index < index[0]
        index = np.concatenate([base.index[keep], index])
        log_teff = np.concatenate([base.log_teff[keep], log_teff])
    return TeffScale(name, meta["label"], meta["reference"], meta["status"], index, log_teff)


def read_scale_table(text: str, where: str) -> tuple[dict[str, str], list[str], list[float]]:
    """Parse a scale table: (metadata, spectral types, Teff in K).

    Lines ``# key: value`` are metadata (``scale``, ``label``, ``status`` and ``reference``
    are required); other ``#`` lines are prose; then a ``spt,teff`` header and one row per
    type.  Raises ``ValueError`` naming the file and line for anything else, so a scale
    cannot be built without its source.
    """
    table = read_table(text, where, columns=("spt", "teff"),
                       metadata=(*_REQUIRED_META, "derived", _EARLIER_TYPES),
                       required=_REQUIRED_META, parse_row=_scale_row)
    return (table.metadata, [spt for spt, _ in table.rows],
            [teff for _, teff in table.rows])


def _scale_row(fields: list[str], here: str) -> tuple[str, float]:
    """(type, Teff) of one row of a scale table; Teff must be a positive number."""
    value = number(fields[1], here, "Teff")
    if not value > 0:
        raise ValueError(f"{here}: Teff must be positive, got {fields[1] or 'nothing'}")
    return fields[0], value
