"""MK spectral types (:mod:`catcheck.physics.spectral`) and the ``spectral_type_teff`` check.

Comparison with a source outside catcheck: the mean dwarf sequence of Pecaut & Mamajek
(2013, ApJS 208, 9, Table 5; updated table version 2022.04.16 shipped by the ``MeanStars``
package, read by ``tests/reference_data.py``).  The shipped dwarf scale must equal it row
by row; every row must pass the check as it is and be flagged with Teff x0.6 or x1.6.

Behaviour tests: parsing cases typed here from the MK notation; giants and supergiants,
whose scales and example values are from memory (marked so); types the check does not
apply to; one run through the engine with a temporary rule pack.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from importlib import resources

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from reference_data import MEAN_DWARF_VERSION, load_mean_dwarf_sequence

import catcheck
from catcheck.canonical import StarBatch
from catcheck.checks import CHECKS
from catcheck.checks.base import Outcome
from catcheck.checks.spectral_type_teff import CHECK
from catcheck.physics import spectral
from catcheck.physics.spectral import (
    LuminosityGroup,
    TypeKind,
    parse_mk,
    parse_spectral_types,
    read_scale_table,
    teff_scale,
)
from catcheck.profile import profile_from_dict

G = LuminosityGroup
K = TypeKind
NAN = math.nan


def evaluate(types: Sequence[str | None], teff: Sequence[float],
             teff_error: Sequence[float] | None = None, **params: float) -> Outcome:
    """Run the check on a batch built from spectral types and Teff (K), default params."""
    batch = StarBatch(0, len(types), pa.array([f"star{i}" for i in range(len(types))]),
                      values={"teff": np.asarray(teff, dtype=float)},
                      text={"spectral_type": pa.array(list(types), type=pa.string())})
    if teff_error is not None:
        batch.errors["teff"] = np.asarray(teff_error, dtype=float)
    return CHECK.evaluate(batch, {**CHECK.defaults, **params})


def messages(outcome: Outcome) -> list[str]:
    """The messages of the failing rows."""
    return outcome.describe(np.flatnonzero(outcome.failed))


# ---------------------------------------------------------------------------------------
# Parsing (cases typed from the MK notation)
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "kind", "letter", "subtype", "index", "group"),
    [
        ("G2V", K.MK, "G", 2.0, 42.0, G.DWARF),
        ("K1.5III", K.MK, "K", 1.5, 51.5, G.GIANT),
        ("M3.5Ve", K.MK, "M", 3.5, 63.5, G.DWARF),
        ("B0.5IV-V", K.MK, "B", 0.5, 10.5, G.DWARF),
        ("A0Vn", K.MK, "A", 0.0, 20.0, G.DWARF),
        ("F5 V", K.MK, "F", 5.0, 35.0, G.DWARF),
        ("K0III-IV", K.MK, "K", 0.0, 50.0, G.SUBGIANT),
        ("G8IIIb", K.MK, "G", 8.0, 48.0, G.GIANT),
        ("M2Iab", K.MK, "M", 2.0, 62.0, G.SUPERGIANT),
        ("O9.7Ia+", K.MK, "O", 9.7, 9.7, G.SUPERGIANT),
        ("B1Ia-0", K.MK, "B", 1.0, 11.0, G.SUPERGIANT),
        ("G5Ib-II", K.MK, "G", 5.0, 45.0, G.SUPERGIANT),
        ("A9II", K.MK, "A", 9.0, 29.0, G.GIANT),
        ("F2IV", K.MK, "F", 2.0, 32.0, G.SUBGIANT),
        ("K5", K.MK, "K", 5.0, 55.0, G.UNKNOWN),
        ("G2/3V", K.MK, "G", 2.5, 42.5, G.DWARF),
        ("G8-K0III", K.MK, "G", 9.0, 49.0, G.GIANT),
        ("A9/F0IV/V", K.MK, "A", 9.5, 29.5, G.DWARF),
        ("M7.75III", K.MK, "M", 7.75, 67.75, G.GIANT),
        ("L5", K.MK, "L", 5.0, 75.0, G.UNKNOWN),
        ("T6.5", K.MK, "T", 6.5, 86.5, G.UNKNOWN),
        ("Y0V", K.MK, "Y", 0.0, 90.0, G.DWARF),
        ("O5V((f))", K.MK, "O", 5.0, 5.0, G.DWARF),
        ("K0IIIBa0.3", K.MK, "K", 0.0, 50.0, G.GIANT),  # barium star: normal Teff scale
        ("K0var", K.MK, "K", 0.0, 50.0, G.UNKNOWN),  # "var" is not luminosity class V
        # Mount Wilson prefixes d, g, c, sd
        ("dM4e", K.MK, "M", 4.0, 64.0, G.DWARF),
        ("gK0", K.MK, "K", 0.0, 50.0, G.GIANT),
        ("cG8", K.MK, "G", 8.0, 48.0, G.SUPERGIANT),
        ("sdM2", K.MK, "M", 2.0, 62.0, G.SUBDWARF),
        ("esdK7", K.MK, "K", 7.0, 57.0, G.SUBDWARF),
        ("F8VI", K.MK, "F", 8.0, 38.0, G.SUBDWARF),
        ("sdB", K.MK, "B", NAN, NAN, G.SUBDWARF),  # hot subdwarf: no subtype
        # lower-case noise, whitespace and uncertainty marks
        ("g2v", K.MK, "G", 2.0, 42.0, G.DWARF),
        ("  k1.5 iii ", K.MK, "K", 1.5, 51.5, G.GIANT),
        ("G2:V", K.MK, "G", 2.0, 42.0, G.DWARF),
        ("M1: III", K.MK, "M", 1.0, 61.0, G.GIANT),
        ("K", K.MK, "K", NAN, NAN, G.UNKNOWN),
        ("Be", K.MK, "B", NAN, NAN, G.UNKNOWN),
        # outside the MK temperature sequence
        ("DA2", K.WHITE_DWARF, "", NAN, NAN, G.UNKNOWN),
        ("DQ6", K.WHITE_DWARF, "", NAN, NAN, G.UNKNOWN),
        ("WD", K.WHITE_DWARF, "", NAN, NAN, G.UNKNOWN),
        ("WN7", K.WOLF_RAYET, "", NAN, NAN, G.UNKNOWN),
        ("WC8", K.WOLF_RAYET, "", NAN, NAN, G.UNKNOWN),
        ("C5,4", K.CARBON, "", NAN, NAN, G.UNKNOWN),
        ("C-N5", K.CARBON, "", NAN, NAN, G.UNKNOWN),
        ("R8", K.CARBON, "", NAN, NAN, G.UNKNOWN),
        ("S4,2", K.S_TYPE, "", NAN, NAN, G.UNKNOWN),
        ("MS", K.S_TYPE, "", NAN, NAN, G.UNKNOWN),
        # chemically peculiar and composite
        ("kA2hA5mA7V", K.PECULIAR, "", NAN, NAN, G.UNKNOWN),
        ("A2m", K.PECULIAR, "A", 2.0, 22.0, G.UNKNOWN),
        ("A0pSi", K.PECULIAR, "A", 0.0, 20.0, G.UNKNOWN),
        ("B8IIIpHgMn", K.PECULIAR, "B", 8.0, 18.0, G.GIANT),
        ("G2V+K1V", K.COMPOSITE, "", NAN, NAN, G.UNKNOWN),
        ("F5Vcomp", K.COMPOSITE, "", NAN, NAN, G.UNKNOWN),
        # not a type
        ("M10III", K.UNPARSEABLE, "", NAN, NAN, G.UNKNOWN),
        ("xyz", K.UNPARSEABLE, "", NAN, NAN, G.UNKNOWN),
        ("", K.MISSING, "", NAN, NAN, G.UNKNOWN),
        (None, K.MISSING, "", NAN, NAN, G.UNKNOWN),
    ],
)
def test_parse_mk(text: str | None, kind: TypeKind, letter: str, subtype: float,
                  index: float, group: LuminosityGroup) -> None:
    parsed = parse_mk(text)
    assert (parsed.kind, parsed.letter, parsed.group) == (kind, letter, group)
    np.testing.assert_equal([parsed.subtype, parsed.index], [subtype, index])


@pytest.mark.parametrize(("text", "luminosity_class"),
                         [("B0.5IV-V", 4.5), ("K0III-IV", 3.5), ("O9.7Ia+", 1.0),
                          ("B1Ia-0", 0.5), ("gK0", 3.0), ("K5", NAN)])
def test_luminosity_class_number(text: str, luminosity_class: float) -> None:
    np.testing.assert_equal(parse_mk(text).luminosity_class, luminosity_class)


def test_uncertainty_marks_are_kept() -> None:
    assert parse_mk("G2:V").uncertain and parse_mk("K0III?").uncertain
    assert not parse_mk("G2V").uncertain


def test_each_distinct_type_is_parsed_once(monkeypatch: pytest.MonkeyPatch) -> None:
    """A column is dictionary-encoded: parse_mk runs per distinct string, not per row."""
    calls: list[str | None] = []

    def counting(text: str | None) -> spectral.MKType:
        calls.append(text)
        return parse_mk(text)

    monkeypatch.setattr(spectral, "parse_mk", counting)
    distinct = ["G2V", "K0III", "M3.5Ve", "DA2", "kA2hA5mA7V"]
    rows = [distinct[i % 5] if i % 7 else None for i in range(10_000)]
    types = parse_spectral_types(pa.array(rows, type=pa.string()))
    assert sorted(calls) == sorted(distinct)
    per_row = types.rows(types.values("index"))
    expected = [parse_mk(t).index for t in rows]
    np.testing.assert_equal(per_row, expected)
    assert (types.rows(types.values("kind"))[::7] == TypeKind.MISSING).all()


@pytest.mark.parametrize("make", [
    lambda rows: pa.array(rows, type=pa.string()).dictionary_encode(),
    lambda rows: pa.chunked_array([rows[:2], rows[2:]], type=pa.string()),
    lambda rows: rows,
], ids=["dictionary", "chunked", "list"])
def test_parse_accepts_arrow_and_python_columns(make) -> None:
    rows = ["G2V", None, "K0III", "G2V"]
    types = parse_spectral_types(make(rows))
    np.testing.assert_equal(types.rows(types.values("index")), [42.0, NAN, 50.0, 42.0])


# ---------------------------------------------------------------------------------------
# The shipped scales
# ---------------------------------------------------------------------------------------
def test_scale_tables_name_their_source() -> None:
    """Every shipped scale says where it comes from; the giant and supergiant ones say
    they were typed from memory."""
    assert teff_scale("dwarf").status == "published table"
    assert MEAN_DWARF_VERSION in teff_scale("dwarf").reference
    for name in ("giant", "supergiant"):
        assert teff_scale(name).status == "from memory"
        assert "from memory" in teff_scale(name).label


def test_a_scale_table_without_a_reference_is_refused() -> None:
    text = "# scale: x\n# label: x\n# status: from memory\nspt,teff\nG2,5770\n"
    with pytest.raises(ValueError, match="lacks reference"):
        read_scale_table(text, "x.csv")
    with pytest.raises(ValueError, match="line 2: Teff 'hot'"):
        read_scale_table("spt,teff\nG2,hot\n", "x.csv")


def test_scales_are_monotonic_and_ship_with_the_package() -> None:
    """Teff falls along every scale; the tables are package data (importlib.resources)."""
    for name in spectral.SCALE_NAMES:
        assert resources.files("catcheck").joinpath("data", f"mk_teff_{name}.csv").is_file()
        scale = teff_scale(name)
        assert np.all(np.diff(scale.index) > 0) and np.all(np.diff(scale.log_teff) < 0)


def test_giant_and_supergiant_scales_take_dwarf_values_for_early_types() -> None:
    """O-F giants ~ dwarfs (giant table starts at G0); O supergiants ~ dwarfs (table starts
    at B0).  Values: Pecaut & Mamajek 2013 table v2022.04.16, F5V 6550 K, O9V 33300 K."""
    f5, o9 = parse_mk("F5").index, parse_mk("O9").index
    assert 10 ** teff_scale("giant").log_teff_at(f5) == pytest.approx(6550.0)
    assert 10 ** teff_scale("supergiant").log_teff_at(o9) == pytest.approx(33300.0)
    assert np.isnan(teff_scale("giant").log_teff_at(parse_mk("M9").index))


def test_scales_interpolate_in_log_teff() -> None:
    """G2/3V lies halfway between G2V 5770 K and G3V 5720 K (Pecaut & Mamajek 2013
    v2022.04.16) in log Teff: their geometric mean."""
    teff = 10 ** teff_scale("dwarf").log_teff_at(parse_mk("G2/3V").index)
    assert teff == pytest.approx(math.sqrt(5770.0 * 5720.0), rel=1e-12)


def test_type_teff_bands_follow_the_luminosity_group() -> None:
    """Rows: dwarf, giant, supergiant scale.  A dwarf uses the first only, a star without
    class the dwarf and giant scales; a subdwarf or a NaN index none."""
    types = [parse_mk(t) for t in ("K5V", "K5", "K5III", "M2Iab", "sdM2", "K")]
    bands = spectral.type_teff_bands([t.index for t in types], [t.group for t in types],
                                     0.5)
    used = np.isfinite(bands.centre)
    assert used.T.tolist() == [[True, False, False], [True, True, False],
                               [False, True, False], [False, False, True],
                               [False, False, False], [False, False, False]]
    assert (bands.cool[used] < bands.centre[used]).all()
    assert (bands.centre[used] < bands.hot[used]).all()


@pytest.fixture(scope="module")
def dwarfs() -> pd.DataFrame:
    """The mean dwarf sequence, O3V..Y4V (118 rows), Pecaut & Mamajek 2013 v2022.04.16."""
    pytest.importorskip("MeanStars", reason="the MeanStars package (Pecaut & Mamajek mean "
                        "dwarf table) is not installed; pip install catcheck[test]")
    table = load_mean_dwarf_sequence()
    assert table.attrs["version"] == MEAN_DWARF_VERSION
    return table


def test_dwarf_scale_is_the_mean_dwarf_table(dwarfs: pd.DataFrame) -> None:
    """The shipped dwarf scale reproduces every Teff of the table exactly (integers in K)."""
    index = [parse_mk(spt).index for spt in dwarfs["SpT"]]
    assert len(index) == 118
    teff = 10 ** teff_scale("dwarf").log_teff_at(index)
    np.testing.assert_allclose(teff, dwarfs["Teff"], rtol=1e-12)
    assert {parse_mk(spt).group for spt in dwarfs["SpT"]} == {LuminosityGroup.DWARF}


@pytest.mark.parametrize("error_fraction", [None, 0.02])
def test_every_mean_dwarf_row_passes(dwarfs: pd.DataFrame,
                                     error_fraction: float | None) -> None:
    """O3V..Y4V at their table Teff: all checked, none flagged (no error column, then 2%)."""
    teff = dwarfs["Teff"].to_numpy()
    errors = None if error_fraction is None else error_fraction * teff
    outcome = evaluate(list(dwarfs["SpT"]), teff, errors)
    assert outcome.applies.all()
    assert not outcome.failed.any(), messages(outcome)
    np.testing.assert_allclose(outcome.expected, teff, rtol=1e-12)


@pytest.mark.parametrize("factor", [0.6, 1.6])
@pytest.mark.parametrize("error_fraction", [None, 0.02])
def test_every_shifted_mean_dwarf_row_is_flagged(dwarfs: pd.DataFrame, factor: float,
                                                 error_fraction: float | None) -> None:
    """The same rows with Teff scaled by 0.6 or 1.6 (0.22 and 0.20 dex) are all flagged."""
    teff = dwarfs["Teff"].to_numpy() * factor
    errors = None if error_fraction is None else error_fraction * teff
    outcome = evaluate(list(dwarfs["SpT"]), teff, errors)
    unflagged = dwarfs["SpT"][~outcome.failed].tolist()
    assert not unflagged
    assert (outcome.deviation > CHECK.defaults["threshold"]).all()


def test_a_type_one_subtype_off_passes(dwarfs: pd.DataFrame) -> None:
    """An honest classification error of one subtype is never flagged: each row's type
    with the Teff of the row one subtype earlier or later in the table."""
    index = np.array([parse_mk(spt).index for spt in dwarfs["SpT"]])
    teff = dwarfs["Teff"].to_numpy()
    pairs = [(i, j) for i in range(len(index)) for j in range(len(index))
             if abs(index[i] - index[j]) == 1.0]
    assert len(pairs) > 150
    types = [dwarfs["SpT"].iloc[i] for i, _ in pairs]
    outcome = evaluate(types, [teff[j] for _, j in pairs])
    assert not outcome.failed.any(), messages(outcome)


# ---------------------------------------------------------------------------------------
# Giants, supergiants, types without a luminosity class
# ---------------------------------------------------------------------------------------
#: well-known stars with their usual types and Teff, all from memory (values rounded);
#: a check that flagged any of them would flag honest catalogues
KNOWN_STARS = [
    ("Sun", "G2V", 5772.0),  # IAU 2015 Resolution B3 nominal Teff
    ("Vega", "A0V", 9600.0),
    ("Sirius A", "A1V", 9940.0),
    ("Procyon A", "F5IV-V", 6550.0),
    ("Proxima Cen", "M5.5Ve", 3050.0),
    ("Pollux", "K0III", 4850.0),
    ("Arcturus", "K1.5III", 4290.0),  # metal-poor, cooler than its type's mean
    ("Aldebaran", "K5III", 3900.0),
    ("beta And", "M0III", 3850.0),
    ("delta Vir", "M3III", 3600.0),
    ("Capella Aa", "K0III", 4970.0),
    ("Canopus", "A9II", 7350.0),
    ("Betelgeuse", "M1-2Ia-Iab", 3600.0),
    ("Antares A", "M1.5Iab", 3660.0),
    ("Rigel", "B8Ia", 12100.0),
    ("Deneb", "A2Ia", 8500.0),
    ("Polaris", "F7Ib", 6000.0),
    ("epsilon Ori", "B0Ia", 27000.0),
]


def test_well_known_stars_pass() -> None:
    outcome = evaluate([t for _, t, _ in KNOWN_STARS], [teff for _, _, teff in KNOWN_STARS])
    assert outcome.applies.all()
    assert not outcome.failed.any(), messages(outcome)


@pytest.mark.parametrize(("spt", "teff"), [
    ("K0III", 4750.0), ("M2III", 3700.0),  # giant examples from memory
    ("K5", 4440.0), ("K5", 3950.0),  # no class: K5V 4440 K (Pecaut & Mamajek), K5III ~3950
    ("M5", 3060.0), ("M5", 3400.0),  # M5V 3060 K (Pecaut & Mamajek), M5III ~3400 (memory)
    ("K0III-IV", 5000.0),  # subgiant: between K0III ~4800 and K0V 5270 K
    ("O9.7Ia+", 29000.0),  # hypergiant on the dwarf values (O), from memory
])
def test_giants_and_stars_without_class_pass(spt: str, teff: float) -> None:
    outcome = evaluate([spt], [teff])
    assert outcome.applies.all() and not outcome.failed.any(), messages(outcome)


@pytest.mark.parametrize(("spt", "teff"), [
    ("G2V", 3000.0), ("M5V", 9000.0), ("K0III", 9000.0), ("M2Iab", 20000.0),
    ("K5", 9000.0), ("B2V", 6000.0), ("L5", 3500.0), ("T6", 2500.0),
])
def test_gross_mismatches_are_flagged(spt: str, teff: float) -> None:
    outcome = evaluate([spt], [teff])
    assert outcome.failed.all()


def test_uncertain_type_gets_a_wider_band() -> None:
    """M5V: band M4.5-M5.5 = 3110-2930 K; M5:V: M3.5-M6.5 = 3270-2740 K (Pecaut &
    Mamajek 2013 v2022.04.16).  At 4200 K the first is flagged, the second not."""
    outcome = evaluate(["M5V", "M5:V"], [4200.0, 4200.0])
    assert outcome.failed.tolist() == [True, False]


def test_message_and_numbers_name_type_teffs_and_sigma() -> None:
    """The documented example: G2V (5770 K, band 5745-5815 K; Pecaut & Mamajek 2013
    v2022.04.16) at 3000 K with 3% assumed error is 11.8 sigma off; M5V at 9000 K 19 sigma;
    G2V at 5500 K 0.8 sigma."""
    outcome = evaluate(["G2V", "M5V", "G2V"], [3000.0, 9000.0, 5500.0])
    assert outcome.failed.tolist() == [True, True, False]
    np.testing.assert_allclose(outcome.observed, [3000.0, 9000.0, 5500.0])
    np.testing.assert_allclose(outcome.expected, [5770.0, 3060.0, 5770.0])
    np.testing.assert_allclose(outcome.deviation, [11.8, 19.3, 0.8], atol=0.05)
    first, second = messages(outcome)
    for text in ("G2V (dwarf)", "3000 K", "5770 K", "5745-5815 K", "0.28 dex cooler",
                 "11.8 sigma"):
        assert text in first
    assert "M5V" in second and "9000 K" in second and "hotter" in second
    assert "11.8 sigma" in CHECK.doc.example and "0.8 sigma" in CHECK.doc.example
    # a log Teff catalogued as K keeps its digits: 3.761 K, not "4 K"
    (log_teff,) = messages(evaluate(["G2V"], [3.761]))
    assert log_teff.startswith("G2V (dwarf): Teff 3.761 K, but ")


def test_catalogue_errors_widen_the_tolerance() -> None:
    """G2V at 4300 K is 0.126 dex below its band (5745 K, Pecaut & Mamajek 2013): 5.3 sigma
    with the 3% assumed error, flagged; 2.3 sigma with a catalogue error of 500 K."""
    assert evaluate(["G2V"], [4300.0]).failed.all()
    assert not evaluate(["G2V"], [4300.0], [500.0]).failed.any()


NOT_APPLICABLE = ["DA2", "WD", "kA2hA5mA7V", "A2m", "A0pSi", "WN7", "C5,4", "R8", "S4,2",
                  "G2V+K1V", "sdB", "sdM2", "F8VI", "xyz", "", "K", "Be", "M10III",
                  "O2V", "M9III", "L5III", "M8I"]


def test_types_no_scale_serves_are_not_applicable() -> None:
    """White dwarfs, Am/Ap, Wolf-Rayet, carbon and S stars, composites, subdwarfs,
    unparseable strings, types without subtype and types beyond the scales (O2V before
    O3V; M9III after the giant table's M8; L5III; M8I after the supergiant table's M5)."""
    types: list[str | None] = [*NOT_APPLICABLE, None]
    outcome = evaluate(types, np.full(len(types), 1.0e5))
    assert not outcome.applies.any()
    assert not outcome.failed.any()
    assert np.isnan(outcome.expected).all() and np.isnan(outcome.deviation).all()


def test_empty_and_all_null_batches() -> None:
    assert evaluate([], []).failed.size == 0
    outcome = evaluate([None, None], [5000.0, 6000.0])
    assert not outcome.applies.any() and not outcome.failed.any()


def test_impossible_teff_is_not_applicable() -> None:
    """Teff <= 0 K has no logarithm: left to the teff-range rule."""
    outcome = evaluate(["G2V", "G2V", "G2V"], [0.0, -5.0, NAN])
    assert not outcome.applies.any() and not outcome.failed.any()


# ---------------------------------------------------------------------------------------
# Through the engine, with a temporary pack
# ---------------------------------------------------------------------------------------
RULE_TOML = """\
[pack]
name = "spectral-test"

[[rule]]
id = "spectral-type-teff"
check = "spectral_type_teff"
severity = "error"
summary = "Teff agrees with the MK spectral type"
[rule.params]
threshold = 5.0
"""


def test_rule_through_the_engine(tmp_path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(CHECKS, CHECK.name, CHECK)
    pack = tmp_path / "spectral.toml"
    pack.write_text(RULE_TOML)
    frame = pd.DataFrame({
        "name": ["sun", "bad-g2", "giant", "wd", "no-type", "no-teff", "bad-m5"],
        "SpT": ["G2V", "G2V", "K0III", "DA2", None, "K5V", "M5V"],
        "Teff": [5772.0, 3000.0, 4750.0, 20000.0, 5000.0, np.nan, 9000.0],
    })
    profile = profile_from_dict({"id": "name", "quantities": {
        "teff": {"column": "Teff", "unit": "K"}, "spectral_type": {"column": "SpT"}}})
    result = catcheck.check_frame(frame, profile=profile, rules=[pack])
    flags = result.flags
    assert flags["id"].tolist() == ["bad-g2", "bad-m5"]
    assert set(flags["rule"]) == {"spectral-type-teff"} and set(flags["severity"]) == {"error"}
    np.testing.assert_allclose(flags["expected"], [5770.0, 3060.0])
    (entry,) = result.summary["rules"]
    assert entry["status"] == "ran"
    assert (entry["checked"], entry["not_applicable"], entry["skipped"]) == (4, 1, 3)
    assert entry["flagged"] == 2
    assert entry["assumed_errors"] == ["teff"]
