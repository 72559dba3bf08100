"""Property-based tests: random catalogues with hostile numbers never break the engine.

Every example is a small catalogue (1-50 rows) mapping every canonical quantity, checked
with all default packs through :func:`catcheck.check_frame`.  Values mix plausible
numbers with NaN, +-inf, zeros (signed), negatives, huge and tiny magnitudes; phase labels
mix codes, profile labels, unknown labels and nulls; spectral types mix valid and
malformed strings.  The properties:

* no exception (numpy's floating-point warnings on such values are expected and
  silenced; the command line keeps them off stderr, see test_bad_inputs.py);
* every rule runs (but for ``age-gyr-or-myr-as-yr``, reported as not run: the profile
  declares ages in Myr, not the yr that rule is about), and for every rule
  ``checked + skipped == rows``;
* every flag names a real row, that row's id, a known rule and severity, and carries a
  non-empty message; ``flagged`` in the summary is the number of the rule's flags;
* the same input gives the same flags, and permuting the rows gives the same flags per id.

Each property runs :data:`EXAMPLES` examples with a fixed derandomized seed, so CI is
reproducible (settings profile ``catcheck-properties``).  The properties share one test
and its three check_frame runs per example (about 60 s for 500 examples on a shared 2-core
machine; a run of a 50-row catalogue costs ~25 ms, most of it in the rules, the group pass
and re-reading the rule packs' TOML).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import catcheck
from catcheck.packs import DEFAULT_PACKS, SEVERITIES
from catcheck.profile import profile_from_dict
from catcheck.quantities import PHASE_CODES

EXAMPLES = 500
settings.register_profile(
    "catcheck-properties",
    max_examples=EXAMPLES,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
PROPERTY_SETTINGS = settings.get_profile("catcheck-properties")

# quantity -> (column, unit, plausible range in that unit, error column or None)
NUMERIC = {
    "teff": ("Teff", "K", (2000.0, 60000.0), "e_Teff"),
    "logg": ("logg", "dex(cm/s2)", (-1.0, 9.0), "e_logg"),
    "luminosity": ("logL", "dex(Lsun)", (-5.0, 7.0), "e_logL"),
    "radius": ("R", "Rsun", (0.005, 2000.0), "e_R"),
    "mass": ("M", "Msun", (0.05, 150.0), "e_M"),
    "initial_mass": ("M0", "Msun", (0.05, 150.0), None),
    "age": ("age", "Myr", (0.1, 14000.0), "e_age"),
    "feh": ("feh", "dex", (-4.0, 1.0), None),
    "parallax": ("plx", "mas", (0.01, 100.0), "e_plx"),
    "distance": ("dist", "kpc", (0.01, 50.0), None),
}
PHASE_LABELS = ["dwarf", "giant", "clump", "wd"]
PROFILE = profile_from_dict({
    "id": "source_id",
    "group": "cluster",
    "quantities": {
        **{name: {"column": column, "unit": unit, **({"error": error} if error else {})}
           for name, (column, unit, _, error) in NUMERIC.items()},
        "phase": {"column": "evo"},
        "spectral_type": {"column": "sptype"},
    },
    "phases": {"dwarf": "MS", "giant": "RGB", "clump": "RC", "wd": "WD"},
}, source="<property profile>")
RULE_COUNT = len(catcheck.check_frame(
    pd.DataFrame({"source_id": ["a"], "cluster": ["C-1"], "evo": ["MS"], "sptype": ["G2V"],
                  **{column: [1.0] for column, *_ in NUMERIC.values()},
                  **{error: [0.1] for *_, error in NUMERIC.values() if error}}),
    PROFILE).summary["rules"])

HOSTILE = [math.nan, math.inf, -math.inf, 0.0, -0.0, -1.0, 1e300, -1e300, 1e-300,
           5e-324, 1.7976931348623157e308, -1e-300]
SPECTRAL_TYPES = ["G2V", "K1.5III", "M3.5Ve", "B0Ia", "O2If", "A0p", "DA2", "sdB", "L5",
                  "K", "G2V+K1V", "", "X9Z", "??", "ééé", "M12V", "G-2V", None]
LABELS = [*PHASE_CODES, *(code.lower() for code in PHASE_CODES), *PHASE_LABELS,
          "subgiantish", "", " ms ", "Ñ", "RGB/AGB", None]


# Module-level strategies: hypothesis validates a strategy once, not on every draw.
SEEDS = st.integers(0, 2**32 - 1)
HOSTILE_FRACTIONS = st.sampled_from([0.0, 0.1, 0.5, 1.0])
ANY_FLOAT = st.floats()


def numeric_column(rows: int, low: float, high: float, seed: int, fraction: float,
                   anything: float) -> np.ndarray:
    """Plausible values from ``seed``, about ``fraction`` of them replaced by hostile ones
    and, with that probability, one row by ``anything`` (any float hypothesis draws)."""
    rng = np.random.default_rng(seed)
    column = rng.uniform(low, high, rows)
    hostile = rng.random(rows) < fraction
    column[hostile] = rng.choice(HOSTILE, int(hostile.sum()))
    if rng.random() < fraction:
        column[rng.integers(rows)] = anything
    return column


def label_column(rows: int, choices: list, seed: int) -> list:
    """Each row's label picked from ``choices`` by a generator seeded with ``seed``."""
    return [choices[i] for i in np.random.default_rng(seed).integers(len(choices), size=rows)]


@st.composite
def catalogues(draw: st.DrawFn) -> pd.DataFrame:
    """A random catalogue of 1-50 rows with unique ids and every mapped column.

    Hypothesis draws the row count and, per column, a seed, a hostile fraction and one
    arbitrary float; numpy fills the column.  A few draws per column keep generation cheap
    (drawing every value costs more than checking the catalogue), and failures still
    shrink: fractions towards 0, seeds towards 0, the float towards a simple value.
    """
    rows = draw(st.integers(1, 50))
    frame = {"source_id": [f"LOCS-{i:04d}" for i in range(rows)],
             "cluster": label_column(rows, ["C-001", "C-002", "C-017", None], draw(SEEDS))}
    for column, _, (low, high), error in NUMERIC.values():
        for name, top in ((column, high), (error, 0.2 * high)):
            if name:
                frame[name] = numeric_column(rows, low if name == column else 0.0, top,
                                             draw(SEEDS), draw(HOSTILE_FRACTIONS),
                                             draw(ANY_FLOAT))
    frame["evo"] = label_column(rows, LABELS, draw(SEEDS))
    frame["sptype"] = label_column(rows, SPECTRAL_TYPES, draw(SEEDS))
    return pd.DataFrame(frame)


def run(frame: pd.DataFrame) -> catcheck.CheckResult:
    """check_frame with all default packs.

    Floating-point warnings on hostile values are expected (the checks treat inf and NaN
    as data); they are silenced here, and the command line keeps them off stderr.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return catcheck.check_frame(frame, PROFILE, DEFAULT_PACKS, fail_on="none")


def assert_counts_add_up(frame: pd.DataFrame, result: catcheck.CheckResult) -> None:
    """Every rule ran (but the one about ages in yr), and for every rule checked +
    skipped == rows."""
    summary, flags = result.summary, result.flags
    assert summary["rows"] == len(frame)
    assert len(summary["rules"]) == RULE_COUNT
    for rule in summary["rules"]:
        if rule["id"] == "age-gyr-or-myr-as-yr":  # the profile declares ages in Myr
            assert rule["status"] == "not-run: age declared in Myr (the rule is for yr)"
            assert rule["checked"] == rule["flagged"] == 0
            continue
        assert rule["status"] == "ran", rule
        assert rule["checked"] + rule["skipped"] == len(frame), rule
        assert 0 <= rule["flagged"] <= rule["checked"], rule
        assert rule["flagged"] == int((flags["rule"] == rule["id"]).sum()), rule


def assert_flags_are_real_rows_with_messages(frame: pd.DataFrame,
                                             result: catcheck.CheckResult) -> None:
    """Every flag names a row of the input, that row's id, a known rule and severity, and
    carries a non-empty message; one flag per (row, rule)."""
    flags = result.flags
    assert flags["row"].between(0, len(frame) - 1).all()
    assert (flags["id"].to_numpy() == frame["source_id"].to_numpy()[flags["row"]]).all()
    assert set(flags["rule"]) <= {rule["id"] for rule in result.summary["rules"]}
    assert set(flags["severity"]) <= set(SEVERITIES)
    assert all(isinstance(m, str) and m.strip() for m in flags["message"])
    assert not flags.duplicated(["row", "rule"]).any()
    assert result.summary["flagged_rows"] == flags["row"].nunique()


def flags_by_id(result: catcheck.CheckResult) -> pd.DataFrame:
    """The flags without row numbers, sorted by (id, rule); ids are unique here."""
    flags = result.flags.drop(columns="row")
    return flags.sort_values(["id", "rule"], kind="stable").reset_index(drop=True)


@PROPERTY_SETTINGS
@given(frame=catalogues(), seed=SEEDS)
def test_random_catalogues_check_soundly_repeatably_and_in_any_row_order(
        frame: pd.DataFrame, seed: int) -> None:
    """The four properties on each example, sharing its runs (three per example).

    One test rather than four keeps the suite inside its time budget: the catalogue is
    checked once, again (the same flags), and with its rows shuffled (the same flags per
    id); both the first and the shuffled run are checked for sound counts and flags.
    """
    result = run(frame)  # 1. never crashes, whatever the numbers and labels
    assert_counts_add_up(frame, result)  # 2.
    assert_flags_are_real_rows_with_messages(frame, result)  # 3.
    again = run(frame.copy())  # 4. the same input gives the same flags
    pd.testing.assert_frame_equal(result.flags, again.flags)
    assert result.summary["rules"] == again.summary["rules"]
    order = np.random.default_rng(seed).permutation(len(frame))  # 5. row order
    shuffled_frame = frame.iloc[order].reset_index(drop=True)
    shuffled = run(shuffled_frame)
    assert_counts_add_up(shuffled_frame, shuffled)
    assert_flags_are_real_rows_with_messages(shuffled_frame, shuffled)
    pd.testing.assert_frame_equal(flags_by_id(result), flags_by_id(shuffled))
    assert result.summary["rules"] == shuffled.summary["rules"]


def test_the_catalogue_strategy_reaches_the_hostile_values() -> None:
    """Control: the generator does produce every kind of hostile input it claims to."""
    seen: set[str] = set()

    @settings(max_examples=200, derandomize=True, database=None, deadline=None,
              suppress_health_check=list(HealthCheck))
    @given(frame=catalogues())
    def collect(frame: pd.DataFrame) -> None:
        numbers = frame[[c for c, *_ in NUMERIC.values()]].to_numpy(dtype=float).ravel()
        for kind, present in (("nan", np.isnan(numbers)), ("inf", np.isinf(numbers)),
                              ("zero", numbers == 0), ("negative", numbers < 0),
                              ("huge", np.abs(numbers) > 1e200),
                              ("tiny", (numbers != 0) & (np.abs(numbers) < 1e-200))):
            if present.any():
                seen.add(kind)
        if frame["evo"].isna().any():
            seen.add("null label")
        if (~frame["evo"].isin([*PHASE_CODES, *PHASE_LABELS]) & frame["evo"].notna()).any():
            seen.add("unknown label")

    collect()
    assert seen == {"nan", "inf", "zero", "negative", "huge", "tiny", "null label",
                    "unknown label"}


@pytest.mark.parametrize("value", HOSTILE)
def test_each_hostile_value_alone_in_every_column(value: float) -> None:
    """One row whose every number is the same hostile value: no crash, counts add up."""
    frame = pd.DataFrame({"source_id": ["x"], "cluster": ["C-001"], "evo": ["giant"],
                          "sptype": ["G2V"],
                          **{column: [value] for column, *_ in NUMERIC.values()},
                          **{error: [value] for *_, error in NUMERIC.values() if error}})
    result = run(frame)
    ran = [r for r in result.summary["rules"] if r["status"] == "ran"]
    assert len(ran) == RULE_COUNT - 1  # all but age-gyr-or-myr-as-yr: ages are in Myr
    assert all(r["checked"] + r["skipped"] == 1 for r in ran)
