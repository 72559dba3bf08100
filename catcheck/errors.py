"""Errors a user can cause, each knowing its exit code.

The command line turns these into one line on stderr and the exit code; nothing else in
catcheck decides exit codes.  Exit codes (also documented in ``catcheck --help``):

* 0 - the gate passed
* 1 - the gate failed
* 2 - usage, profile or rule-pack error
* 3 - catalogue missing or unreadable
"""

from __future__ import annotations

EXIT_PASSED = 0
EXIT_GATE_FAILED = 1
EXIT_USAGE = 2
EXIT_CATALOGUE = 3


class CatcheckError(Exception):
    """Base class: a problem with what the user gave us, not a bug in catcheck."""

    exit_code = EXIT_USAGE

    def __init__(self, what: str, *, where: str = "", fix: str = "") -> None:
        self.what = what
        self.where = where
        self.fix = fix
        super().__init__(self.render())

    def render(self) -> str:
        """One line: where, what, and how to fix it."""
        text = f"{self.where}: {self.what}" if self.where else self.what
        if self.fix:
            text = f"{text} ({self.fix})"
        return text


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
