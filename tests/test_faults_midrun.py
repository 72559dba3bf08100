"""Faults in the middle of a run: an interrupt, a full disk, a failing read.

Whatever stops a run, the previous report in ``--out`` stays byte for byte as it was, no
staging directory is left behind, no new report appears where there was none, and the
catalogue's bytes never change (sha256 before and after normal, failed and interrupted
runs).
"""

from __future__ import annotations

import errno
import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest
from factory import sun_like, write_catalogue

from catcheck.cli import main
from catcheck.demo import write_demo
from catcheck.errors import EXIT_CATALOGUE, EXIT_GATE_FAILED, EXIT_INTERRUPTED, EXIT_USAGE
from catcheck.outputs import ReportDirectory

STAGING = ".catcheck-staging-*"
BIG_ROWS = 60_000  # with --batch-rows 1000, a few seconds of checking: time to interrupt


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def snapshot(directory: Path) -> dict[str, str]:
    """Every file under ``directory`` (hidden ones included) and its sha256."""
    return {str(p.relative_to(directory)): sha256(p)
            for p in sorted(directory.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def big(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """An invented demo catalogue big enough to interrupt, and its profile."""
    files = write_demo(tmp_path_factory.mktemp("big"), rows=BIG_ROWS, seed=5,
                       chunk_rows=BIG_ROWS // 12)  # row groups, for --workers
    return files.catalogue, files.profile


@pytest.fixture
def previous(tmp_path: Path) -> tuple[Path, Path, Path, dict[str, str]]:
    """A small catalogue, its profile, a report of it in ``out``, and that report's hashes."""
    frame = sun_like(50)
    frame.loc[[4, 9], "logL"] += 1.0  # two flags, so the previous report has some
    catalogue = write_catalogue(tmp_path, frame)
    profile = tmp_path / "profile.toml"
    out = tmp_path / "report"
    assert cli(["check", str(catalogue), "--profile", str(profile), "--out", str(out),
                "--rules", "core"]) == EXIT_GATE_FAILED
    return catalogue, profile, out, snapshot(out)


def cli(args: list[str]) -> int:
    """Run the command line in this process and return its exit code (capsys has stderr)."""
    with pytest.raises(SystemExit) as exited:
        main(args)
    return int(exited.value.code)


def check_in_subprocess(catalogue: Path, profile: Path, out: Path, workers: int = 1
                        ) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "catcheck", "check", str(catalogue), "--profile", str(profile),
         "--out", str(out), "--batch-rows", "1000", "--workers", str(workers)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def wait_until_flags_are_staged(process: subprocess.Popen, out: Path) -> None:
    """Wait until the run has staged some flags: it is partway through the catalogue."""
    deadline = time.monotonic() + 120
    while not list(out.glob(f"{STAGING}/flags.parquet")):
        assert process.poll() is None, "the run ended before it could be interrupted"
        assert time.monotonic() < deadline, "the run never staged flags"
        time.sleep(0.005)


@pytest.mark.parametrize(("signum", "code", "workers"),
                         [(signal.SIGINT, EXIT_INTERRUPTED, 1),
                          (signal.SIGTERM, 128 + signal.SIGTERM, 1),
                          (signal.SIGINT, EXIT_INTERRUPTED, 2)],
                         ids=["SIGINT", "SIGTERM", "SIGINT-forked-workers"])
def test_an_interrupt_leaves_the_previous_report_and_the_input_intact(
        big: tuple[Path, Path], previous: tuple[Path, Path, Path, dict[str, str]],
        signum: int, code: int, workers: int) -> None:
    catalogue, profile = big
    out, before = previous[2], previous[3]
    input_hash = sha256(catalogue)
    process = check_in_subprocess(catalogue, profile, out, workers)
    wait_until_flags_are_staged(process, out)
    process.send_signal(signum)
    _, stderr = process.communicate(timeout=120)
    assert process.returncode == code, stderr
    assert stderr.splitlines() == [
        f"catcheck: interrupted ({signal.Signals(signum).name}); no report was written and "
        "any previous report is unchanged"]
    assert snapshot(out) == before  # byte-identical, and no staging directory left
    assert sha256(catalogue) == input_hash


def test_an_interrupted_first_run_leaves_no_report_directory(big: tuple[Path, Path],
                                                             tmp_path: Path) -> None:
    catalogue, profile = big
    out = tmp_path / "first-report"
    process = check_in_subprocess(catalogue, profile, out)
    wait_until_flags_are_staged(process, out)
    process.send_signal(signal.SIGINT)
    process.communicate(timeout=120)
    assert process.returncode == EXIT_INTERRUPTED
    assert not out.exists()


def disk_full(*args: object, **kwargs: object) -> None:
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.mark.parametrize("where", ["add_flags", "write_text", "commit-convert"])
def test_a_full_disk_leaves_the_previous_report_and_the_input_intact(
        where: str, previous: tuple[Path, Path, Path, dict[str, str]],
        monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    catalogue, profile, out, before = previous
    input_hash = sha256(catalogue)
    if where == "add_flags":  # while flags stream to disk, and the writer cannot close
        monkeypatch.setattr(pq.ParquetWriter, "write_table", disk_full)
        monkeypatch.setattr(pq.ParquetWriter, "close", disk_full)
    elif where == "write_text":  # summary.json or report.md
        monkeypatch.setattr(Path, "write_text", disk_full)
    else:  # converting the staged flags to CSV when the run commits
        monkeypatch.setattr("catcheck.outputs._convert_flags", disk_full)
    code = cli(["check", str(catalogue), "--profile", str(profile), "--out", str(out),
                "--rules", "core", "--format", "csv"])
    monkeypatch.undo()
    err = capsys.readouterr().err
    assert code == EXIT_USAGE, err
    assert err.splitlines() == [
        f"catcheck: error: {out}: cannot write the report: No space left on device "
        "(free some space or choose another --out)"]
    assert snapshot(out) == before
    assert sha256(catalogue) == input_hash


def test_a_failed_read_partway_leaves_the_previous_report_intact(
        previous: tuple[Path, Path, Path, dict[str, str]], tmp_path: Path,
        capsys: pytest.CaptureFixture[str]) -> None:
    """A second file that is damaged after its footer: the read fails midway (exit 3)."""
    catalogue, profile, out, before = previous
    damaged = write_catalogue(tmp_path, sun_like(500, seed=2), "damaged.parquet")
    data = bytearray(damaged.read_bytes())
    data[4:68] = b"\xff" * 64  # the first data page header: the footer still reads
    damaged.write_bytes(bytes(data))
    hashes = sha256(catalogue), sha256(damaged)
    code = cli(["check", str(catalogue), str(damaged), "--profile", str(profile),
                "--out", str(out), "--rules", "core"])
    err = capsys.readouterr().err
    assert code == EXIT_CATALOGUE, err
    assert len(err.splitlines()) == 1 and "cannot read the catalogue" in err
    assert snapshot(out) == before
    assert (sha256(catalogue), sha256(damaged)) == hashes


def test_a_normal_run_replaces_the_report_and_leaves_the_input_alone(
        previous: tuple[Path, Path, Path, dict[str, str]]) -> None:
    catalogue, profile, out, _ = previous

    def inputs() -> dict[str, str]:  # everything beside the catalogue but the report
        return {name: digest for name, digest in snapshot(catalogue.parent).items()
                if not name.startswith(f"{out.name}/")}

    before = inputs()
    assert cli(["check", str(catalogue), "--profile", str(profile), "--out", str(out),
                "--rules", "core", "--format", "jsonl"]) == EXIT_GATE_FAILED
    report = snapshot(out)
    assert {"flags.jsonl", "summary.json", "report.md"} <= set(report)
    assert "flags.parquet" not in report and not any("staging" in name for name in report)
    assert inputs() == before


def test_report_directory_discards_its_staging_area_on_any_error(tmp_path: Path) -> None:
    """The staging area goes whatever stops the run, a BaseException included."""
    for error in (OSError(errno.ENOSPC, "full"), KeyboardInterrupt()):
        with pytest.raises(type(error)), ReportDirectory(tmp_path / "out") as report:
            report.write_text("report.md", "half")
            raise error
        assert not (tmp_path / "out").exists()
