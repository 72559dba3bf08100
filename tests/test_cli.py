"""The command line as a user meets it: exit codes, one-line errors, no tracebacks."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from factory import PROFILE_TOML, sun_like, write_catalogue


def run(*args: str, cwd=None) -> subprocess.CompletedProcess:
    if args and args[0] == "check" and "--rules" not in args:
        args = (*args, "--rules", "core")  # about the command line, not the physics
    return subprocess.run([sys.executable, "-m", "catcheck", *map(str, args)],
                          capture_output=True, text=True, cwd=cwd, timeout=120)


def assert_one_line_error(done: subprocess.CompletedProcess, code: int, text: str) -> None:
    assert done.returncode == code, done.stderr
    assert "Traceback" not in done.stderr
    lines = [line for line in done.stderr.splitlines() if line.strip()]
    assert lines and lines[0].startswith("catcheck: error:") and text in lines[0]


@pytest.fixture
def catalogue(tmp_path):
    frame = sun_like(100)
    frame.loc[[4, 9], "logL"] += 1.0
    return write_catalogue(tmp_path, frame)


def test_check_fails_on_errors_and_passes_with_fail_on_none(tmp_path, catalogue) -> None:
    profile = tmp_path / "profile.toml"
    failed = run("check", catalogue, "--profile", profile, "--out", tmp_path / "r1")
    assert failed.returncode == 1, failed.stderr
    assert "stefan-boltzmann" in failed.stdout and "FAILED" in failed.stdout
    passed = run("check", catalogue, "--profile", profile, "--out", tmp_path / "r2",
                 "--fail-on", "none")
    assert passed.returncode == 0
    summary = json.loads((tmp_path / "r2" / "summary.json").read_text())
    assert summary["flagged_rows"] == 2 and summary["gate"]["passed"]


def test_quiet_prints_only_the_verdict(tmp_path, catalogue) -> None:
    done = run("check", catalogue, "--profile", tmp_path / "profile.toml", "--quiet",
               "--out", tmp_path / "r")
    assert done.stdout.strip().startswith("verdict: FAILED")
    assert len(done.stdout.strip().splitlines()) == 1


def test_max_flagged_fraction(tmp_path, catalogue) -> None:
    common = ("check", catalogue, "--profile", tmp_path / "profile.toml", "--fail-on", "none",
              "--out", tmp_path / "r")
    assert run(*common, "--max-flagged-fraction", "0.05").returncode == 0
    assert run(*common, "--max-flagged-fraction", "0.01").returncode == 1


def test_missing_catalogue_exits_3(tmp_path) -> None:
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    done = run("check", tmp_path / "absent.parquet", "--profile", tmp_path / "profile.toml",
               "--out", tmp_path / "r")
    assert_one_line_error(done, 3, "catalogue not found")
    assert not (tmp_path / "r").exists()


def test_profile_naming_missing_column_exits_2(tmp_path, catalogue) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(PROFILE_TOML.replace('column = "Rad"', 'column = "Radius"'))
    done = run("check", catalogue, "--profile", bad, "--out", tmp_path / "r")
    assert_one_line_error(done, 2, "column 'Radius' is not in the catalogue")
    assert str(bad) in done.stderr


def test_unknown_pack_exits_2(tmp_path, catalogue) -> None:
    done = run("check", catalogue, "--profile", tmp_path / "profile.toml", "--rules", "cor",
               "--out", tmp_path / "r")
    assert_one_line_error(done, 2, "did you mean 'core'")


def test_bad_option_exits_2(tmp_path, catalogue) -> None:
    done = run("check", catalogue, "--profile", tmp_path / "profile.toml", "--fail-on",
               "sometimes")
    assert done.returncode == 2 and "Traceback" not in done.stderr


def test_unwritable_output_directory_exits_2(tmp_path, catalogue) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a directory")
    done = run("check", catalogue, "--profile", tmp_path / "profile.toml", "--out",
               blocker / "sub")
    assert_one_line_error(done, 2, "cannot write the report")


def test_input_is_never_modified(tmp_path, catalogue) -> None:
    before = catalogue.read_bytes()
    run("check", catalogue, "--profile", tmp_path / "profile.toml", "--out", tmp_path / "r")
    assert catalogue.read_bytes() == before


def test_rules_and_explain() -> None:
    listing = run("rules")
    assert listing.returncode == 0 and "stefan-boltzmann" in listing.stdout
    page = run("explain", "stefan-boltzmann")
    assert page.returncode == 0
    for heading in ("What it checks", "Formula", "When a real star trips it", "Example",
                    "References", "reason to look, not a verdict"):
        assert heading in page.stdout
    assert_one_line_error(run("explain", "no-such-rule"), 2, "no rule 'no-such-rule'")


def test_help_documents_exit_codes() -> None:
    done = run("check", "--help")
    assert done.returncode == 0 and "3 catalogue missing" in done.stdout
