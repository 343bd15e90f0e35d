"""Command line: ``wavecal solve``, ``demo``, ``show``, ``profiles``, ``plan``, ``apply``,
``night`` and ``report``.

Exit codes (also in the README):

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
import time
from pathlib import Path
from typing import NoReturn

from .errors import FrameError, WavecalError
from .validation import GRATING_ANGLE, Real, option_type

__all__ = ["main", "EXIT_OK", "EXIT_BAD_INPUT", "EXIT_USAGE", "EXIT_SUSPECT", "EXIT_FAILED"]

EXIT_OK = 0
EXIT_BAD_INPUT = 1
EXIT_USAGE = 2
EXIT_SUSPECT = 3
EXIT_FAILED = 4

log = logging.getLogger("wavecal")


def _exit_code(statuses: list[str]) -> int:
    if "failed" in statuses:
        return EXIT_FAILED
    if "suspect" in statuses:
        return EXIT_SUSPECT
    return EXIT_OK


def _lamp_list(text: str) -> tuple[str, ...]:
    from .validation import Invalid, parse_lamps

    try:
        lamps = parse_lamps(text)
    except Invalid as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    if not lamps:
        msg = f"no lamp element in {text!r}"
        raise argparse.ArgumentTypeError(msg)
    return lamps


def _row_range(text: str) -> tuple[int, int]:
    try:
        start, stop = (int(v) for v in text.split(":"))
    except ValueError:
        msg = f"rows must be START:STOP (0-based, stop excluded), got {text!r}"
        raise argparse.ArgumentTypeError(msg) from None
    if not 0 <= start < stop:
        msg = f"rows START:STOP need 0 <= START < STOP, got {text!r}"
        raise argparse.ArgumentTypeError(msg)
    return start, stop


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit code 2): the option and the problem, and where to
    find the usage."""

    def error(self, message: str) -> NoReturn:
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message} (see: {self.prog} --help)\n")


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


def _add_solve_arguments(solve: argparse.ArgumentParser) -> None:
    solve.add_argument("frames", nargs="+", type=Path, help="raw arc FITS file(s)")
    solve.add_argument("-p", "--profile", required=True,
                       help="instrument profile (TOML file, or the name of a bundled example)")
    solve.add_argument("-o", "--out", type=Path, default=Path("wavecal-output"),
                       help="output folder (default: %(default)s)")
    solve.add_argument("--lamps", type=_lamp_list, help="lamp elements, e.g. 'Hg+Ar' (default: header)")
    solve.add_argument("--grating-angle", type=option_type(GRATING_ANGLE), dest="grating_angle",
                       help="physical grating angle in degrees (default: header)")
    solve.add_argument("--rows", type=_row_range, help="slit rows START:STOP to collapse (default: illuminated rows)")
    solve.add_argument("--min-snr", type=option_type(Real(low=0, open_low=True)), default=5.0,
                       help="peak detection threshold (default: %(default)s)")
    solve.add_argument("--fit-grooves", action="store_true", help="also fit the groove density")
    solve.add_argument("--no-plot", action="store_true",
                       help="skip the residual plot (the QA report, unless --no-report, has its own)")
    solve.add_argument("--no-report", action="store_true",
                       help="skip the QA report (HTML with figures, and its JSON twin)")
    solve.add_argument("--no-slit", action="store_true",
                       help="do not follow the lines along the slit (one solution for all rows)")


def _add_arguments(command: str, parser: argparse.ArgumentParser) -> None:
    """Add the options of one subcommand (importing its module only now)."""
    if command == "solve":
        _add_solve_arguments(parser)
    elif command == "demo":
        parser.add_argument("-o", "--out", type=Path, default=Path("wavecal-demo-output"),
                            help="output folder (default: %(default)s)")
    elif command == "show":
        parser.add_argument("solutions", nargs="+", type=Path)
    elif command == "report":
        from .report.command import add_report_arguments

        add_report_arguments(parser)
    elif command == "night":
        from .night.command import add_night_arguments

        add_night_arguments(parser)
    elif command == "apply":
        from .apply import add_apply_arguments

        add_apply_arguments(parser)
    elif command == "plan":
        from .plan_cli import add_plan_arguments

        add_plan_arguments(parser)


def _parser(argv: list[str]) -> argparse.ArgumentParser:
    """The parser, with the options of the subcommand named in ``argv`` (if any)."""
    parser = _Parser(
        prog="wavecal",
        description="Pixel-to-wavelength solutions for grating spectrographs from raw arc frames.")
    parser.add_argument("--version", action="version", version=f"wavecal {_version()}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log each step")
    sub = parser.add_subparsers(dest="command", required=True)
    chosen = next((a for a in argv if not a.startswith("-")), None)
    for command, text in _COMMANDS.items():
        subparser = sub.add_parser(command, help=text)
        if command == chosen:
            _add_arguments(command, subparser)
    return parser


def _version() -> str:
    from ._version import __version__

    return __version__


def _read_arc(frame: Path, profile, rows: tuple[int, int] | None):
    """Read an arc frame and check it can be calibrated with ``rows`` (command-line bounds)."""
    from .frames import read_frame
    from .validation import MIN_DISPERSION_PIXELS

    arc = read_frame(frame, profile)
    n_disp = arc.data.shape[arc.dispersion_axis]
    if n_disp < MIN_DISPERSION_PIXELS:
        msg = (f"{frame}: {n_disp} pixel(s) along the dispersion; a wavelength solution needs at "
               f"least {MIN_DISPERSION_PIXELS}")
        raise FrameError(msg)
    n_spatial = arc.data.shape[1 - arc.dispersion_axis]
    if rows is not None and rows[1] > n_spatial:
        msg = (f"{frame}: --rows {rows[0]}:{rows[1]} runs beyond the frame's {n_spatial} rows "
               f"along the slit (0:{n_spatial})")
        raise FrameError(msg)
    return arc


def _solve_one(frame: Path, profile, args, out: Path):
    from .calibrate import calibrate_frame
    from .products import write_products
    from .summary_text import format_summary

    start = time.perf_counter()
    arc = _read_arc(frame, profile, getattr(args, "rows", None))
    calibration = calibrate_frame(arc, profile, lamps=getattr(args, "lamps", None),
                               grating_angle_deg=getattr(args, "grating_angle", None),
                               rows=getattr(args, "rows", None),
                               min_snr=getattr(args, "min_snr", 5.0),
                               free_grooves=getattr(args, "fit_grooves", False),
                               trace_slit=not getattr(args, "no_slit", False), details=True)
    solution = calibration.solution
    elapsed = time.perf_counter() - start
    with_report = not getattr(args, "no_report", False)
    products = write_products(solution, out, stem=frame.name)
    report = plot = None
    if not with_report and not getattr(args, "no_plot", False):
        from ._atomic import atomic_write_bytes
        from .report.figures import residuals_figure

        plot = products.solution.with_name(
            products.solution.name.removesuffix(".solution.json") + ".residuals.png")
        atomic_write_bytes(plot, residuals_figure(solution).png())
    if with_report:
        from .report import save_spectrum, spectrum_path, write_frame_report

        save_spectrum(spectrum_path(products.solution), calibration.spectrum.x,
                      calibration.spectrum.flux)
        report = write_frame_report(solution, out, spectrum=calibration.spectrum,
                                    stem=products.solution.name.removesuffix(".solution.json"))
    print(format_summary(solution))
    print(f"  written   : {products.solution}, {products.lines}"
          + (f", {plot}" if plot is not None else "")
          + (f", {report.html}" if report is not None else "")
          + f"  ({elapsed:.2f} s)")
    print()
    return solution.status


def _run_solve(args) -> int:
    from .profile import load_profile

    profile = load_profile(args.profile)
    statuses = []
    for frame in args.frames:
        try:
            statuses.append(_solve_one(frame, profile, args, args.out))
        except WavecalError as exc:
            print(f"error: {exc}", file=sys.stderr)
            statuses.append("bad-input")
    if "bad-input" in statuses and len(statuses) == 1:
        return EXIT_BAD_INPUT
    return _exit_code(statuses) if "bad-input" not in statuses else max(_exit_code(statuses), EXIT_BAD_INPUT)


def _run_demo(args) -> int:
    from .demo import demo_cases
    from .profile import load_profile

    statuses = []
    print(f"wavecal {_version()}: calibrating the bundled demo frames (invented instruments)\n")
    for case in demo_cases():
        profile = load_profile(case.profile)
        print(f"[{case.title}]")
        statuses.append(_solve_one(case.frame, profile, args, args.out))
    print(f"products in {args.out.resolve()}")
    return _exit_code(statuses)


def _run_show(args) -> int:
    from .solution import load_solution
    from .summary_text import format_summary

    statuses = []
    for path in args.solutions:
        solution = load_solution(path)
        print(format_summary(solution))
        print()
        statuses.append(solution.status)
    return _exit_code(statuses)


def _run_profiles(args) -> int:
    from .profile import example_profile_paths, load_profile

    for name, path in sorted(example_profile_paths().items()):
        profile = load_profile(path)
        print(f"{name:<20s} {profile.grating.mount:<13s} {profile.name}")
    return EXIT_OK


def _runner(command: str):
    if command == "plan":
        from .plan_cli import run_plan_command as run
    elif command == "apply":
        from .apply import run_apply_command as run
    elif command == "night":
        from .night.command import run_night_command as run
    elif command == "report":
        from .report.command import run_report_command as run
    else:
        run = {"solve": _run_solve, "demo": _run_demo, "show": _run_show,
               "profiles": _run_profiles}[command]
    return run


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``wavecal`` command; returns the exit code."""
    argv = sys.argv[1:] if argv is None else list(argv)
    args = _parser(argv).parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s")
    try:
        return _runner(args.command)(args)
    except WavecalError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
        return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
