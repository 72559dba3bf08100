"""`catcheck demo` and `catcheck check` on its output, as a newcomer runs them."""

from __future__ import annotations

import json
import subprocess
import sys

import pyarrow.parquet as pq
import pytest
from factory import visual_report_files

FLAG_COLUMNS = ["row", "id", "rule", "severity", "message", "observed", "expected",
                "deviation"]
SUMMARY_KEYS = {"input", "rows", "rules", "flagged_rows", "flags_by_severity",
                "rows_by_severity", "gate", "version", "elapsed_seconds"}


def catcheck(*args: object, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "catcheck", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=300)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "catcheck-demo"
    done = catcheck("demo", "--rows", 3000, "--out", out, "--seed", 7)
    assert done.returncode == 0, done.stderr
    return out, done.stdout


def test_demo_writes_the_documented_layout(demo) -> None:
    out, stdout = demo
    assert sorted(p.name for p in out.iterdir()) == ["catalogue.parquet", "profile.toml",
                                                      "report", "truth.parquet"]
    assert sorted(p.name for p in (out / "report").iterdir()) == sorted(
        ["flags.parquet", "report.md", "summary.json",
         *visual_report_files("hr_diagram.png", "kiel_diagram.png")])
    assert pq.read_schema(out / "report" / "flags.parquet").names == FLAG_COLUMNS
    assert pq.read_schema(out / "truth.parquet").names == ["row", "id", "fault"]
    summary = json.loads((out / "report" / "summary.json").read_text())
    assert set(summary) >= SUMMARY_KEYS
    for rule in summary["rules"]:
        assert {"id", "severity", "checked", "skipped", "flagged", "status"} <= set(rule)
        assert rule["checked"] + rule["skipped"] == summary["rows"] or rule["status"] != "ran"
    assert "Planted faults found by the check" in stdout
    assert "clean rows flagged:" in stdout
    # the closing line names every file the demo wrote, the page and figures included
    closing = next(line for line in stdout.splitlines() if line.startswith("Wrote "))
    for path in [*out.glob("*.*"), *(out / "report").iterdir()]:
        assert path.name in closing, path.name


def test_demo_finds_its_planted_faults(demo) -> None:
    _, stdout = demo
    table = stdout.split("Planted faults found by the check:")[1].splitlines()[2:]
    for line in table:
        if line.strip().startswith("clean rows flagged"):
            break
        planted, found = line.split()[1:3]
        assert int(found.replace(",", "")) == int(planted.replace(",", "")), line
    assert "clean rows flagged: 0 of" in stdout


def test_check_on_the_demo_gates_as_documented(demo, tmp_path) -> None:
    out, _ = demo
    catalogue, profile = out / "catalogue.parquet", out / "profile.toml"
    failed = catcheck("check", catalogue, "--profile", profile, "--fail-on", "error",
                      "--out", tmp_path / "a")
    assert failed.returncode == 1, failed.stderr
    passed = catcheck("check", catalogue, "--profile", profile, "--fail-on", "none",
                      "--out", tmp_path / "b")
    assert passed.returncode == 0, passed.stderr
