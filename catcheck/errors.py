"""Errors a user can cause, each knowing its exit code.

The command line turns these into one line on stderr and the exit code; nothing else in
catcheck decides exit codes.  An error may carry ``detail`` lines printed beneath that
line (an invalid rule expression and a caret under its offending part).  Exit codes (also
documented in ``catcheck --help``):

* 0 - the gate passed
* 1 - the gate failed
* 2 - usage, profile or rule-pack error (an unwritable report directory included)
* 3 - catalogue missing or unreadable
* 130, 143 - interrupted by SIGINT (Ctrl-C) or SIGTERM: 128 + the signal number; no
  report was written and a previous one is untouched (:class:`Interrupted`)
"""

from __future__ import annotations

EXIT_PASSED = 0
EXIT_GATE_FAILED = 1
EXIT_USAGE = 2
EXIT_CATALOGUE = 3
EXIT_INTERRUPTED = 130  # SIGINT; see Interrupted.exit_code


class CatcheckError(Exception):
    """Base class: a problem with what the user gave us, not a bug in catcheck.

    ``what`` went wrong, ``where`` (file, key, row) and how to ``fix`` it make the one-line
    message (:meth:`render`).  ``detail`` is optional text shown beneath that line, such as
    an invalid rule expression with a caret under the offending part; ``str(err)`` is the
    line followed by the detail.
    """

    exit_code = EXIT_USAGE

    def __init__(self, what: str, *, where: str = "", fix: str = "", detail: str = "") -> None:
        self.what = what
        self.where = where
        self.fix = fix
        self.detail = detail
        super().__init__(self.render() + (f"\n{detail}" if detail else ""))

    def render(self) -> str:
        """One line: where, what, and how to fix it.

        Line breaks become spaces and other characters that are not printable (bytes of a
        damaged file quoted by a reader, terminal escapes) become ``?``.
        """
        text = f"{self.where}: {self.what}" if self.where else self.what
        if self.fix:
            text = f"{text} ({self.fix})"
        text = " ".join(text.splitlines())
        return "".join(char if char.isprintable() else "?" for char in text)


class UsageError(CatcheckError):
    """A bad option or argument on the command line or in the API call."""


class ProfileError(CatcheckError):
    """The profile TOML is invalid or does not match the catalogue."""


class RulePackError(CatcheckError):
    """A rule pack is invalid, or a rule id is unknown."""


class CatalogueError(CatcheckError):
    """The catalogue is missing, unreadable or not a table catcheck can read."""

    exit_code = EXIT_CATALOGUE


class OutputError(CatcheckError):
    """The report cannot be written (for example, an unwritable output directory)."""


class Interrupted(BaseException):
    """SIGINT or SIGTERM arrived: the run stops, its staged report is discarded.

    A ``BaseException`` (like ``KeyboardInterrupt``), so no ``except Exception`` swallows
    it; the command line installs the handlers that raise it and exits with
    ``128 + signal number`` (130 for SIGINT, 143 for SIGTERM).
    """

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum

    @property
    def exit_code(self) -> int:
        """The shell's convention for a process ended by a signal."""
        return 128 + self.signum


class WorkerLostError(CatcheckError):
    """A worker process died during the run (killed, or out of memory)."""
