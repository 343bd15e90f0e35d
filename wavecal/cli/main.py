"""Entry point of the ``wavecal`` command: ``solve``, ``demo``, ``show``, ``profiles``, ``plan``,
``apply``, ``night`` and ``report``.

Exit codes (:class:`wavecal.status.ExitCode`, also in the README):

=====  ===========================================================
0      every frame gave an ``ok`` solution
1      bad input: a file or profile could not be read or is invalid
2      usage error (wrong or missing options)
3      at least one solution is ``suspect`` (none failed)
4      at least one solution ``failed``
=====  ===========================================================
"""
from __future__ import annotations

import argparse
import logging
import os
import sys
from collections.abc import Callable
from importlib import import_module
from pathlib import Path
from typing import NoReturn

from ..errors import WavecalError
from ..status import ExitCode, exit_code_for

__all__ = ["main"]


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit code 2): the option and the problem, and where to
    find the usage."""

    def error(self, message: str) -> NoReturn:
        self.exit(ExitCode.USAGE, f"{self.prog}: error: {message} (see: {self.prog} --help)\n")


#: Subcommands and their one-line help; the options of each are added only when it is used
#: (``wavecal --help`` and ``--version`` import nothing heavy).
_COMMANDS = {
    "solve": "calibrate arc frame(s) with an instrument profile",
    "demo": "run the calibration on the bundled demo frames",
    "show": "print the summary of saved solution file(s)",
    "profiles": "list the bundled example instrument profiles",
    "report": "(re)write QA reports from saved solutions or a night's output folder",
    "night": "a whole night's directory: inventory, arcs, drift, calibrated frames, summary",
    "apply": "write wavelength-calibrated copies of frames (FITS WCS, optional resampling)",
    "plan": "what a grating setting will show: range, orders, filter, lamps, blaze",
}

#: Subcommand -> module of this package holding its ``add_<command>_arguments`` and
#: ``run_<command>_command`` (``show`` and ``profiles`` are here).
_MODULES = {"solve": "solve", "demo": "solve", "report": "report", "night": "night",
            "apply": "apply", "plan": "plan"}


def add_show_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``wavecal show SOLUTION [SOLUTION ...]``."""
    parser.add_argument("solutions", nargs="+", type=Path)


def add_profiles_arguments(parser: argparse.ArgumentParser) -> None:
    """``wavecal profiles`` has no options."""


def run_show_command(args: argparse.Namespace) -> ExitCode:
    """Print the summary of each solution file; the exit code of their statuses."""
    from ..solution import load_solution
    from ..summary_text import format_summary

    statuses = []
    for path in args.solutions:
        solution = load_solution(path)
        print(format_summary(solution))
        print()
        statuses.append(solution.status)
    return exit_code_for(statuses)


def run_profiles_command(args: argparse.Namespace) -> ExitCode:
    """List the bundled example profiles."""
    from ..profile import example_profile_paths, load_profile

    for name, path in sorted(example_profile_paths().items()):
        profile = load_profile(path)
        print(f"{name:<20s} {profile.grating.mount:<13s} {profile.name}")
    return ExitCode.OK


def _handler(command: str, kind: str) -> Callable:
    """``add_<command>_arguments`` (kind "add") or ``run_<command>_command`` (kind "run"), importing
    the subcommand's module only now."""
    name = f"add_{command}_arguments" if kind == "add" else f"run_{command}_command"
    if command not in _MODULES:
        return globals()[name]
    return getattr(import_module(f".{_MODULES[command]}", __package__), name)


def _parser(argv: list[str]) -> argparse.ArgumentParser:
    """The parser, with the options of the subcommand named in ``argv`` (if any)."""
    from .._version import __version__

    parser = _Parser(
        prog="wavecal",
        description="Pixel-to-wavelength solutions for grating spectrographs from raw arc frames.")
    parser.add_argument("--version", action="version", version=f"wavecal {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log each step")
    sub = parser.add_subparsers(dest="command", required=True)
    chosen = next((a for a in argv if not a.startswith("-")), None)
    for command, text in _COMMANDS.items():
        subparser = sub.add_parser(command, help=text)
        if command == chosen:
            _handler(command, "add")(subparser)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``wavecal`` command; returns the exit code."""
    argv = sys.argv[1:] if argv is None else list(argv)
    args = _parser(argv).parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s")
    try:
        return _handler(args.command, "run")(args)
    except WavecalError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
        return ExitCode.OK
