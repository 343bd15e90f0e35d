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

from . import __version__
from .errors import WavecalError

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
    from .profile import parse_lamps

    lamps = parse_lamps(text)
    if not lamps:
        msg = f"no known element in {text!r}"
        raise argparse.ArgumentTypeError(msg)
    return lamps


def _row_range(text: str) -> tuple[int, int]:
    try:
        start, stop = (int(v) for v in text.split(":"))
    except ValueError:
        msg = f"rows must be START:STOP (0-based, stop excluded), got {text!r}"
        raise argparse.ArgumentTypeError(msg) from None
    return start, stop


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="wavecal",
        description="Pixel-to-wavelength solutions for grating spectrographs from raw arc frames.")
    parser.add_argument("--version", action="version", version=f"wavecal {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log each step")
    sub = parser.add_subparsers(dest="command", required=True)

    solve = sub.add_parser("solve", help="calibrate arc frame(s) with an instrument profile")
    solve.add_argument("frames", nargs="+", type=Path, help="raw arc FITS file(s)")
    solve.add_argument("-p", "--profile", required=True,
                       help="instrument profile (TOML file, or the name of a bundled example)")
    solve.add_argument("-o", "--out", type=Path, default=Path("wavecal-output"),
                       help="output folder (default: %(default)s)")
    solve.add_argument("--lamps", type=_lamp_list, help="lamp elements, e.g. 'Hg+Ar' (default: header)")
    solve.add_argument("--grating-angle", type=float, dest="grating_angle",
                       help="physical grating angle in degrees (default: header)")
    solve.add_argument("--rows", type=_row_range, help="slit rows START:STOP to collapse (default: illuminated rows)")
    solve.add_argument("--min-snr", type=float, default=5.0, help="peak detection threshold (default: %(default)s)")
    solve.add_argument("--fit-grooves", action="store_true", help="also fit the groove density")
    solve.add_argument("--no-plot", action="store_true",
                       help="skip the residual plot (the QA report, unless --no-report, has its own)")
    solve.add_argument("--no-report", action="store_true",
                       help="skip the QA report (HTML with figures, and its JSON twin)")
    solve.add_argument("--no-slit", action="store_true",
                       help="do not follow the lines along the slit (one solution for all rows)")

    demo = sub.add_parser("demo", help="run the calibration on the bundled demo frames")
    demo.add_argument("-o", "--out", type=Path, default=Path("wavecal-demo-output"),
                      help="output folder (default: %(default)s)")

    show = sub.add_parser("show", help="print the summary of saved solution file(s)")
    show.add_argument("solutions", nargs="+", type=Path)

    sub.add_parser("profiles", help="list the bundled example instrument profiles")

    from .apply import add_apply_arguments
    from .night.command import add_night_arguments
    from .plan_cli import add_plan_arguments
    from .report.command import add_report_arguments

    add_report_arguments(sub.add_parser(
        "report", help="(re)write QA reports from saved solutions or a night's output folder"))

    add_night_arguments(sub.add_parser(
        "night", help="a whole night's directory: inventory, arcs, drift, calibrated frames, summary"))

    add_apply_arguments(sub.add_parser(
        "apply", help="write wavelength-calibrated copies of frames (FITS WCS, optional resampling)"))

    add_plan_arguments(sub.add_parser(
        "plan", help="what a grating setting will show: range, orders, filter, lamps, blaze"))
    return parser


def _solve_one(frame: Path, profile, args, out: Path):
    from .calibrate import calibrate_frame
    from .products import write_products
    from .summary_text import format_summary

    start = time.perf_counter()
    calibration = calibrate_frame(frame, profile, lamps=getattr(args, "lamps", None),
                               grating_angle_deg=getattr(args, "grating_angle", None),
                               rows=getattr(args, "rows", None),
                               min_snr=getattr(args, "min_snr", 5.0),
                               free_grooves=getattr(args, "fit_grooves", False),
                               trace_slit=not getattr(args, "no_slit", False), details=True)
    solution = calibration.solution
    elapsed = time.perf_counter() - start
    with_report = not getattr(args, "no_report", False)
    # the report draws its own <stem>.residuals.png: do not draw it twice
    products = write_products(solution, out, stem=frame.name,
                              plot=not (getattr(args, "no_plot", False) or with_report))
    report = None
    if with_report:
        from .report import save_spectrum, spectrum_path, write_frame_report

        save_spectrum(spectrum_path(products.solution), calibration.spectrum.x,
                      calibration.spectrum.flux)
        report = write_frame_report(solution, out, spectrum=calibration.spectrum,
                                    stem=products.solution.name.removesuffix(".solution.json"))
    print(format_summary(solution))
    print(f"  written   : {products.solution}, {products.lines}"
          + (f", {products.residual_plot}" if products.residual_plot else "")
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
    print(f"wavecal {__version__}: calibrating the bundled demo frames (invented instruments)\n")
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


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``wavecal`` command; returns the exit code."""
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s")
    from .apply import run_apply_command
    from .night.command import run_night_command
    from .plan_cli import run_plan_command
    from .report.command import run_report_command

    runners = {"solve": _run_solve, "demo": _run_demo, "show": _run_show, "profiles": _run_profiles,
               "plan": run_plan_command, "apply": run_apply_command, "night": run_night_command,
               "report": run_report_command}
    try:
        return runners[args.command](args)
    except WavecalError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
        return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
