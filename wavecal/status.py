"""The status vocabulary: the verdict of a solution (or a night's file) and the exit codes.

A :class:`Status` is a ``str``, so it compares equal to, and is written to JSON and CSV as, its
plain word (``"ok"``); solution files read back with plain strings compare equal to it.
:class:`ExitCode` is the one set of exit codes of the ``wavecal`` command (also in the README).
"""
from __future__ import annotations

from collections.abc import Iterable
from enum import Enum, IntEnum

__all__ = ["Status", "ExitCode", "exit_code_for"]


class Status(str, Enum):
    """Verdict of a solution, or what became of one file of a night."""

    OK = "ok"
    SUSPECT = "suspect"
    FAILED = "failed"
    #: a night's file that was not processed (unknown kind, or not needed)
    SKIPPED = "skipped"

    def __str__(self) -> str:
        return self.value

    def __format__(self, spec: str) -> str:
        return format(self.value, spec)


class ExitCode(IntEnum):
    """Exit codes of the ``wavecal`` command and its subcommands."""

    #: every frame gave an ``ok`` solution (or: the command did what was asked)
    OK = 0
    #: bad input: a file or profile could not be read or is invalid
    BAD_INPUT = 1
    #: usage error: wrong, missing or contradictory options
    USAGE = 2
    #: at least one solution is ``suspect`` (none failed); a plan made with warnings
    SUSPECT = 3
    #: at least one solution ``failed``
    FAILED = 4


def exit_code_for(statuses: Iterable[str]) -> ExitCode:
    """The exit code of a run whose solutions have these statuses (failed > suspect > ok)."""
    statuses = set(statuses)
    if Status.FAILED in statuses:
        return ExitCode.FAILED
    if Status.SUSPECT in statuses:
        return ExitCode.SUSPECT
    return ExitCode.OK
