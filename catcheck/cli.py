"""The command line: a thin layer over the library.

It turns options into library calls, renders the results and maps errors to exit codes in
one place (:func:`main`).  Exit codes: 0 gate passed, 1 gate failed, 2 usage, profile or
rule-pack error, 3 catalogue missing or unreadable.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import click

from catcheck import __version__
from catcheck.errors import EXIT_GATE_FAILED, EXIT_PASSED, EXIT_USAGE, CatcheckError
from catcheck.tuning import keep_freed_memory

EPILOG = ("Exit codes: 0 gate passed; 1 gate failed; 2 usage, profile or rule-pack error; "
          "3 catalogue missing or unreadable.")


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
                   "(default: core, evolution, clusters).")
@click.option("--out", default="catcheck-report", show_default=True,
              type=click.Path(file_okay=False), help="Report directory.")
@click.option("--fail-on", default="error", show_default=True,
              type=click.Choice(["error", "warning", "none"]),
              help="Lowest severity that fails the gate.")
@click.option("--max-flagged-fraction", type=click.FloatRange(0.0, 1.0), default=None,
              help="Fail when more than this fraction of rows has an error or warning flag.")
@click.option("--format", "flags_format", default="parquet", show_default=True,
              type=click.Choice(["parquet", "csv", "jsonl"]), help="Format of the flags file.")
@click.option("--batch-rows", default=262_144, show_default=True,
              type=click.IntRange(1_000, 50_000_000), help="Rows per record batch.")
@click.option("--workers", default=1, show_default=True, type=click.IntRange(1, 64),
              help="Batches checked at once (threads).")
@click.option("--quiet", is_flag=True, help="Print only the verdict line.")
def check(catalogue: tuple[str, ...], profile_path: str, packs: tuple[str, ...], out: str,
          fail_on: str, max_flagged_fraction: float | None, flags_format: str,
          batch_rows: int, workers: int, quiet: bool) -> None:
    """Check CATALOGUE (Parquet files, directories or globs) and write a report."""
    from catcheck.api import check as run_check
    from catcheck.packs import DEFAULT_PACKS
    from catcheck.report import console_summary

    result = run_check(list(catalogue), profile_path, list(packs) or list(DEFAULT_PACKS),
                       out=out, fail_on=fail_on, max_flagged_fraction=max_flagged_fraction,
                       flags_format=flags_format, batch_rows=batch_rows, workers=workers)
    text = console_summary(result.summary)
    click.echo(text.splitlines()[-1].strip() if quiet else text)
    if not quiet:
        click.echo(f"  report: {out}/")
    sys.exit(EXIT_PASSED if result.passed else EXIT_GATE_FAILED)


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


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the command line, turning every error into one line and an exit code."""
    keep_freed_memory()
    try:
        cli.main(args=argv, prog_name="catcheck", standalone_mode=False)
    except CatcheckError as exc:
        click.echo(f"catcheck: error: {exc.render()}", err=True)
        sys.exit(exc.exit_code)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        click.echo(f"catcheck: error: {exc.format_message()}", err=True)
        click.echo("Try 'catcheck --help' for help.", err=True)
        sys.exit(exc.exit_code if exc.exit_code else EXIT_USAGE)
    except click.Abort:
        click.echo("catcheck: interrupted; no report was written", err=True)
        sys.exit(130)
    except KeyboardInterrupt:
        click.echo("catcheck: interrupted; no report was written", err=True)
        sys.exit(130)
    except Exception as exc:  # a bug in catcheck: still one line, unless debugging
        if os.environ.get("CATCHECK_DEBUG"):
            raise
        click.echo(f"catcheck: internal error: {type(exc).__name__}: {exc} "
                   "(please report it; set CATCHECK_DEBUG=1 for a traceback)", err=True)
        sys.exit(EXIT_USAGE)

