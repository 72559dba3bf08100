"""The gate's exit code in every combination, through the command line.

--fail-on error|warning|none x --max-flagged-fraction unset / set and not exceeded / set
and exceeded x no baseline / a baseline knowing every flag / one with a new warning / one
with a new error x a catalogue of 20 rows / an empty one.  The expected verdict is worked
out here from the rules of DESIGN.md, independently of catcheck.gate.
"""

from __future__ import annotations

import itertools
import json

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from factory import sun_like, write_catalogue
from test_baseline import no_html_report, run_cli  # noqa: F401 - a fixture and a helper

from catcheck.flags import FLAG_SCHEMA

ROWS = 20
#: the planted flags: id -> (rule, severity); age-range is made a warning by a pack
PLANTED = {"S000000": ("stefan-boltzmann", "error"), "S000001": ("age-range", "warning")}
#: baseline name -> the ids whose flags it already holds (None: no --baseline)
BASELINES: dict[str, set[str] | None] = {
    "no-baseline": None, "all-known": {"S000000", "S000001"},
    "new-warning": {"S000000"}, "new-error": {"S000001"},
}
#: --max-flagged-fraction: unset, above the 2/20 flagged rows, below them
FRACTIONS: dict[str, float | None] = {"unset": None, "not-exceeded": 0.5, "exceeded": 0.05}
COUNTED = {"error": {"error"}, "warning": {"error", "warning"}, "none": set()}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> dict:
    base = tmp_path_factory.mktemp("gate")
    frame = sun_like(ROWS)
    frame.loc[0, "logL"] += 1.0  # stefan-boltzmann: error
    frame.loc[1, "Age"] = 40.0  # age-range, a warning in soft.toml
    (base / "full").mkdir()
    (base / "empty").mkdir()
    catalogues = {"full": write_catalogue(base / "full", frame)}
    empty = pa.Table.from_pandas(frame, preserve_index=False).slice(0, 0)
    catalogues["empty"] = base / "empty" / "cat.parquet"
    pq.write_table(empty, catalogues["empty"])
    soft = base / "soft.toml"
    soft.write_text('[[rule]]\nid = "age-range"\nseverity = "warning"\n')
    baselines = {}
    for name, known in BASELINES.items():
        if known is None:
            continue
        records = [{"row": i, "id": id_, "rule": PLANTED[id_][0], "severity": PLANTED[id_][1],
                    "message": "known", "observed": 1.0, "expected": 1.0, "deviation": 9.0}
                   for i, id_ in enumerate(sorted(known))]
        baselines[name] = base / f"{name}.parquet"
        pq.write_table(pa.Table.from_pylist(records, schema=FLAG_SCHEMA), baselines[name])
    return {"base": base, "catalogues": catalogues, "profile": base / "full" / "profile.toml",
            "packs": ["--rules", "core", "--rules", soft], "baselines": baselines}


def expected_to_pass(fail_on: str, fraction: float | None, baseline: str, size: str) -> bool:
    """The verdict DESIGN.md asks for."""
    if size == "empty":
        return False  # a catalogue with no rows always fails
    known = BASELINES[baseline] or set()
    counted = {severity for id_, (_, severity) in PLANTED.items() if id_ not in known}
    if counted & COUNTED[fail_on]:
        return False
    return fraction is None or len(PLANTED) / ROWS <= fraction


COMBINATIONS = list(itertools.product(COUNTED, FRACTIONS, BASELINES, ("full", "empty")))


@pytest.mark.parametrize(("fail_on", "fraction", "baseline", "size"), COMBINATIONS,
                         ids=["-".join(c) for c in COMBINATIONS])
def test_exit_code(inputs, tmp_path, capsys, fail_on, fraction, baseline, size) -> None:
    out = tmp_path / "qc"
    args = ["check", inputs["catalogues"][size], "--profile", inputs["profile"],
            *inputs["packs"], "--out", out, "--fail-on", fail_on, "--quiet"]
    if FRACTIONS[fraction] is not None:
        args += ["--max-flagged-fraction", FRACTIONS[fraction]]
    if BASELINES[baseline] is not None:
        args += ["--baseline", inputs["baselines"][baseline]]
    code, stdout, _ = run_cli(capsys, *args)
    passed = expected_to_pass(fail_on, FRACTIONS[fraction], baseline, size)
    assert code == (0 if passed else 1), stdout
    assert stdout.startswith("verdict: PASSED" if passed else "verdict: FAILED")
    summary = json.loads((out / "summary.json").read_text())
    assert summary["gate"]["passed"] is passed
    assert ("baseline" in summary) is (BASELINES[baseline] is not None)
    if size == "empty":
        assert "the catalogue has no rows" in summary["gate"]["reason"]
