"""The command line: a thin layer over the library.

It turns options into library calls, renders the results and maps errors to exit codes in
one place (:func:`main`).  Exit codes: 0 gate passed, 1 gate failed, 2 usage, profile or
rule-pack error, 3 catalogue missing or unreadable.
"""

from __future__ import annotations

import gc
import os
import signal
import sys
import threading
import warnings
from pathlib import Path
from typing import Any

import click

from catcheck import __version__
from catcheck.errors import (
    EXIT_GATE_FAILED,
    EXIT_PASSED,
    EXIT_USAGE,
    CatcheckError,
    Interrupted,
)
from catcheck.tuning import keep_freed_memory

EPILOG = ("Exit codes: 0 gate passed; 1 gate failed; 2 usage, profile or rule-pack error; "
          "3 catalogue missing or unreadable; 130 interrupted (Ctrl-C); 143 terminated "
          "(SIGTERM).")


@click.group(epilog=EPILOG)
@click.version_option(__version__, prog_name="catcheck")
def cli() -> None:
    """Check a stellar catalogue for physical consistency.

    A flag is a reason to look, not a verdict: real stars (blue stragglers, binaries,
    mergers, stripped stars) break simple rules.
    """


@cli.command(epilog=EPILOG)
@click.argument("catalogue", nargs=-1, required=True)
@click.option("--profile", "profile_path", required=True, type=click.Path(dir_okay=False),
              help="TOML profile mapping catalogue columns to quantities.")
@click.option("--rules", "packs", multiple=True, metavar="PACK_OR_FILE",
              help="Rule pack name or file; repeat for several "
                   "(default: core, evolution, clusters, units).")
@click.option("--out", default="catcheck-report", show_default=True,
              type=click.Path(file_okay=False), help="Report directory.")
@click.option("--fail-on", default="error", show_default=True,
              type=click.Choice(["error", "warning", "none"]),
              help="Lowest severity that fails the gate.")
@click.option("--max-flagged-fraction", type=click.FloatRange(0.0, 1.0), default=None,
              help="Fail when more than this fraction of rows has an error or warning flag.")
@click.option("--format", "flags_format", default="parquet", show_default=True,
              type=click.Choice(["parquet", "csv", "jsonl"]), help="Format of the flags file.")
@click.option("--baseline", metavar="OLD_FLAGS", default=None,
              help="A previous release's flags file: flags are matched to it by (id, rule), "
                   "--fail-on counts only new flags (--max-flagged-fraction still counts "
                   "every flagged row), and the report lists new, resolved and persisting "
                   "flags per rule.")
@click.option("--junit", metavar="FILE", default=None,
              help="Also write a JUnit XML report to FILE (one test case per rule) when the "
                   "run completes.")
@click.option("--annotate", is_flag=True,
              help="Also write annotated.parquet: every input row and column plus qc_flags "
                   "(a bit per rule, map in summary.json) and qc_severity.")
@click.option("--split", is_flag=True,
              help="Also write clean.parquet and flagged.parquet (rows with an error or "
                   "warning flag), which partition the input.")
@click.option("--batch-rows", default=262_144, show_default=True,
              type=click.IntRange(1_000, 50_000_000), help="Rows per record batch.")
@click.option("--workers", default=1, show_default=True, type=click.IntRange(1, 64),
              help="Worker processes, each checking whole Parquet row groups (other "
                   "inputs: threads over batches). Memory grows with each worker.")
@click.option("--engine", default="local", show_default=True,
              type=click.Choice(["local", "dask"]),
              help="Where the checks run: this process, or a dask cluster (needs "
                   'pip install "catcheck[dask]"); the results are the same.')
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="With --engine dask: the address of a running dask scheduler "
                   "(tcp://HOST:PORT), whose workers need catcheck and the catalogue at the "
                   "same path. Default: a local cluster of --workers processes. A scheduler "
                   "that cannot be reached exits 2.")
@click.option("--quiet", is_flag=True,
              help="Print only the verdict line (no progress bar; one is shown on stderr "
                   "when it is a terminal).")
def check(catalogue: tuple[str, ...], profile_path: str, packs: tuple[str, ...], out: str,
          fail_on: str, max_flagged_fraction: float | None, flags_format: str,
          baseline: str | None, junit: str | None, annotate: bool, split: bool,
          batch_rows: int, workers: int, engine: str, scheduler: str | None,
          quiet: bool) -> None:
    """Check CATALOGUE (Parquet, CSV/TSV, FITS, VOTable or ECSV files, directories or globs)
    and write a report."""
    from catcheck.api import check as run_check
    from catcheck.packs import DEFAULT_PACKS
    from catcheck.progress import ProgressBar
    from catcheck.report import console_summary

    bar = ProgressBar.for_terminal(quiet=quiet)  # None unless stderr is a terminal
    try:
        result = run_check(list(catalogue), profile_path, list(packs) or list(DEFAULT_PACKS),
                           out=out, fail_on=fail_on, max_flagged_fraction=max_flagged_fraction,
                           flags_format=flags_format, batch_rows=batch_rows, workers=workers,
                           annotate=annotate, split=split, engine=engine, scheduler=scheduler,
                           baseline=baseline, junit=junit, progress=bar)
    finally:
        if bar is not None:
            bar.close()
    text = console_summary(result.summary)
    click.echo(text.splitlines()[-1].strip() if quiet else text)
    if not quiet:
        click.echo(f"  report: {out}/")
    sys.exit(EXIT_PASSED if result.passed else EXIT_GATE_FAILED)


@cli.command()
@click.argument("old_flags")
@click.argument("new_flags")
@click.option("--json", "as_json", is_flag=True,
              help='Print {"new", "resolved", "persisting", "by_rule"} as JSON.')
def compare(old_flags: str, new_flags: str, as_json: bool) -> None:
    """Compare two flags files: new, resolved and persisting flags per rule.

    Flags are matched by (id, rule), never by row position; duplicate ids are matched by
    count. Exits 0 whatever the counts (use `check --baseline` to gate).
    """
    import json

    from catcheck.baseline import compare_files
    from catcheck.report import comparison_text

    comparison = compare_files(old_flags, new_flags)
    click.echo(json.dumps(comparison.as_dict(), indent=2) if as_json
               else comparison_text(comparison, old_flags, new_flags))


@cli.command()
@click.option("--rows", default=20_000, show_default=True, type=click.IntRange(100, 10**9),
              help="Number of stars to invent.")
@click.option("--out", default="catcheck-demo", show_default=True,
              type=click.Path(file_okay=False), help="Directory for the demo files.")
@click.option("--seed", default=1, show_default=True, type=int, help="Random seed.")
def demo(rows: int, out: str, seed: int) -> None:
    """Invent a cluster survey with planted faults, check it, and tally what was found."""
    from catcheck.demo import run_demo

    click.echo(run_demo(Path(out), rows, seed))


@cli.command("rules")
@click.argument("pack", required=False)
def list_rules(pack: str | None) -> None:
    """List rules: id, severity, pack and what each checks (all built-in packs by default)."""
    from catcheck.explain import rule_table
    from catcheck.packs import builtin_packs, load_rules

    packs = [pack] if pack else list(builtin_packs())
    click.echo(rule_table([r for p in packs for r in load_rules([p], enabled_only=False)]))


@cli.command()
@click.argument("rule_id")
@click.option("--rules", "packs", multiple=True, metavar="PACK_OR_FILE",
              help="Also look in these packs (default: every built-in pack).")
def explain(rule_id: str, packs: tuple[str, ...]) -> None:
    """Explain RULE_ID: physics, formula, source, caveats and an example."""
    from catcheck.explain import explain_rule
    from catcheck.packs import builtin_packs, find_rule

    click.echo(explain_rule(find_rule(rule_id, list(builtin_packs()) + list(packs))))


@cli.command("profile", epilog="Exit codes: 0 profile proposed; 2 usage error, or no column "
                                "could be mapped; 3 catalogue missing or unreadable.")
@click.argument("catalogue", nargs=-1, required=True)
@click.option("--out", type=click.Path(dir_okay=False),
              help="Write the proposed profile to this file instead of printing it.")
@click.option("--sample-rows", default=100_000, show_default=True,
              type=click.IntRange(100, 100_000_000),
              help="Rows read (the first ones) for evidence from the values.")
def propose(catalogue: tuple[str, ...], out: str | None, sample_rows: int) -> None:
    """Propose a profile for CATALOGUE, an unknown table (any format `check` reads).

    Columns are mapped to quantities from their names, the units and UCDs the file
    declares, and their values; every mapping carries its evidence and a confidence, and
    what could not be mapped is listed. Review the TOML, then pass it to `check --profile`.
    """
    from catcheck.errors import UsageError
    from catcheck.formats import open_catalogue
    from catcheck.inference import propose_profile, write_proposal

    opened = open_catalogue(list(catalogue))
    if out and any(Path(out).resolve() == Path(source).resolve() for source in catalogue):
        raise UsageError("--out names the catalogue itself", where=out,
                         fix="write the profile to another file")
    text = propose_profile(opened, sample_rows).to_toml()
    if out:
        write_proposal(out, text)
        click.echo(f"profile written to {out}; review it, then: catcheck check "
                   f"{' '.join(catalogue)} --profile {out}")
    else:
        click.echo(text, nl=False)


_FLOATING_POINT_WARNING = r"(overflow|invalid value|divide by zero|underflow) encountered"


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the command line, turning every error into one line and an exit code.

    SIGINT (Ctrl-C) and SIGTERM (a cancelled CI job) stop the run cleanly: the staged
    report is discarded, a previous report is left as it was, and the exit code is 130 or
    143 (128 + the signal number).
    """
    keep_freed_memory()
    previous_handlers = _interrupt_on_signals()
    stopped_by: int | None = None
    try:
        with warnings.catch_warnings():
            # numpy's floating-point warnings on hostile values (inf, 1e308, zero errors)
            # are expected: the checks take such values as data; stderr is for errors
            warnings.filterwarnings("ignore", _FLOATING_POINT_WARNING, RuntimeWarning)
            cli.main(args=argv, prog_name="catcheck", standalone_mode=False)
    except CatcheckError as exc:
        click.echo(f"catcheck: error: {exc.render()}", err=True)
        if exc.detail:  # e.g. an invalid rule expression and a caret under the problem
            click.echo("\n".join("    " + line for line in exc.detail.splitlines()), err=True)
        sys.exit(exc.exit_code)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        context = getattr(exc, "ctx", None)  # usage errors know the command they are about
        command = context.command_path if context is not None else "catcheck"
        message = " ".join(exc.format_message().split())
        click.echo(f"catcheck: error: {message} (see '{command} --help')", err=True)
        sys.exit(exc.exit_code if exc.exit_code else EXIT_USAGE)
    except (Interrupted, click.Abort, KeyboardInterrupt) as exc:
        stopped_by = exc.signum if isinstance(exc, Interrupted) else signal.SIGINT
        click.echo(f"catcheck: interrupted ({signal.Signals(stopped_by).name}); no report "
                   "was written and any previous report is unchanged", err=True)
    except Exception as exc:  # a bug in catcheck: still one line, unless debugging
        if os.environ.get("CATCHECK_DEBUG"):
            raise
        text = " ".join(str(exc).split())
        click.echo(f"catcheck: internal error: {type(exc).__name__}: {text} "
                   "(please report it; set CATCHECK_DEBUG=1 for a traceback)", err=True)
        sys.exit(EXIT_USAGE)
    finally:
        for signum, handler in previous_handlers.items():
            signal.signal(signum, handler)
    if stopped_by is not None:
        # Leaving the except block freed the interrupted run; collect what is left here,
        # in the main thread, so that worker pools shut down now and not from one of
        # their own threads at exit (which prints a traceback).
        gc.collect()
        sys.exit(Interrupted(stopped_by).exit_code)


def _interrupt_on_signals() -> dict[int, Any]:
    """Make SIGINT and SIGTERM raise :class:`Interrupted`; returns the handlers replaced.

    A signal the parent process set to be ignored stays ignored (a background job started
    by a shell ignores SIGINT).  Changes nothing outside the main thread, where Python
    cannot set signal handlers.
    """
    def interrupt(signum: int, frame: object) -> None:
        raise Interrupted(signum)

    if threading.current_thread() is not threading.main_thread():
        return {}
    return {signum: signal.signal(signum, interrupt)
            for signum in (signal.SIGINT, signal.SIGTERM)
            if signal.getsignal(signum) is not signal.SIG_IGN}
