"""The progress bar: drawn on a terminal only, throttled, cleared at the end."""

from __future__ import annotations

import io
import os
import select
import subprocess
import sys
import time

import pytest
from click.testing import CliRunner
from factory import sun_like, write_catalogue

from catcheck import html_report, progress
from catcheck.cli import cli
from catcheck.progress import ProgressBar, SizedProgress


class FakeTerminal(io.StringIO):
    """A terminal that records what is written to it."""

    def isatty(self) -> bool:
        return True


class Clock:
    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def bar_on(terminal: io.StringIO, clock: Clock, columns: int = 100) -> ProgressBar:
    bar = ProgressBar.for_terminal(terminal)
    assert bar is not None
    bar.clock, bar.columns = clock, lambda: columns
    return bar


def test_bar_shows_rows_rate_and_time_left_then_clears_its_line() -> None:
    terminal, clock = FakeTerminal(), Clock()
    bar = bar_on(terminal, clock)
    bar.start(1_000_000)
    clock.now += 5.0  # the group pass: no rows yet
    bar(250_000)
    clock.now += 1.0
    bar(250_000)
    drawn = terminal.getvalue().split("\r")[1:]
    assert drawn[0].startswith("checking [---") and "0/1,000,000 rows" in drawn[0]
    last = drawn[-1].rstrip()
    assert " 50%  500,000/1,000,000 rows  250k rows/s  ETA 0:02" in last
    assert last.startswith("checking [" + "#" * 10) and len(last) <= 99
    bar.close()
    assert terminal.getvalue().endswith("\r" + " " * len(drawn[-1]) + "\r")


def test_redraws_at_most_ten_times_a_second() -> None:
    terminal, clock = FakeTerminal(), Clock()
    bar = bar_on(terminal, clock)
    bar.start(10_000)
    for _ in range(100):
        clock.now += 0.01  # 100 batches in one second
        bar(100)
    assert 9 <= terminal.getvalue().count("\r") <= 12


def test_narrow_terminal_keeps_the_numbers() -> None:
    terminal, clock = FakeTerminal(), Clock()
    bar = bar_on(terminal, clock, columns=30)
    bar.start(2000)
    clock.now += 1.0
    bar(1000)
    assert all(len(line) <= 29 for line in terminal.getvalue().split("\r"))
    assert "50%" in terminal.getvalue()


def test_silent_when_not_a_terminal_or_quiet() -> None:
    assert ProgressBar.for_terminal(io.StringIO()) is None
    assert ProgressBar.for_terminal(FakeTerminal(), quiet=True) is None
    assert isinstance(ProgressBar(FakeTerminal()), SizedProgress)


@pytest.mark.parametrize(("terminal", "quiet", "shown"),
                         [(False, False, False), (True, True, False), (True, False, True)])
def test_cli_shows_the_bar_on_a_terminal_unless_quiet(tmp_path, monkeypatch, terminal: bool,
                                                      quiet: bool, shown: bool) -> None:
    monkeypatch.setattr(progress, "is_terminal", lambda stream: terminal)
    monkeypatch.setattr(html_report, "plotting_available", lambda: False)  # faster
    path = write_catalogue(tmp_path, sun_like(300))
    run = CliRunner().invoke(cli, ["check", str(path), "--profile",
                                   str(tmp_path / "profile.toml"), "--out",
                                   str(tmp_path / "out"), "--rules", "units"]
                             + (["--quiet"] if quiet else []))
    assert run.exit_code == 0, run.output
    assert ("checking [" in run.stderr) == shown
    assert "\r" not in run.stdout and "checking [" not in run.stdout


@pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs a pseudo-terminal")
def test_cli_draws_the_bar_on_a_real_terminal(tmp_path) -> None:
    path = write_catalogue(tmp_path, sun_like(3000))
    only_teff = tmp_path / "teff.toml"  # no diagram to draw: a quicker run
    only_teff.write_text('id = "name"\n[quantities.teff]\ncolumn = "Teff"\nunit = "K"\n')
    leader, follower = os.openpty()
    command = [sys.executable, "-m", "catcheck", "check", str(path), "--profile",
               str(only_teff), "--out", str(tmp_path / "out"),
               "--rules", "units", "--batch-rows", "1000"]
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=follower)
    os.close(follower)
    seen = b""
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        ready, _, _ = select.select([leader], [], [], 0.5)
        if ready:
            try:
                chunk = os.read(leader, 65536)
            except OSError:  # the child closed the terminal
                break
            if not chunk:
                break
            seen += chunk
        elif process.poll() is not None:
            break
    stdout, _ = process.communicate(timeout=60)
    os.close(leader)
    assert process.returncode == 0, seen.decode(errors="replace")
    text = seen.decode()
    assert "checking [" in text and "/3,000 rows" in text
    assert text.endswith("\r")  # the line is cleared before the summary is printed
    assert b"verdict: PASSED" in stdout
