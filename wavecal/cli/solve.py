"""``wavecal solve`` and ``wavecal demo``: calibrate arc frames and write their products
(:func:`wavecal.solve.solve_and_write`)."""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from ..errors import FrameError, SolutionFileError, WavecalError
from ..status import ExitCode, Status, exit_code_for
from ..validation import GRATING_ANGLE, Real, option_type

__all__ = ["add_solve_arguments", "add_demo_arguments", "run_solve_command", "run_demo_command"]


def _lamp_list(text: str) -> tuple[str, ...]:
    from ..validation import Invalid, parse_lamps

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


def add_solve_arguments(solve: argparse.ArgumentParser) -> None:
    """Options of ``wavecal solve FRAME [FRAME ...] -p PROFILE``."""
    solve.add_argument("frames", nargs="+", type=Path,
                       help="raw arc frame(s): FITS, text/CSV spectrum, or PNG/TIFF/BMP image")
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
    solve.add_argument("--dark", type=Path,
                       help="dark frame to subtract from every arc (same shape and exposure)")
    solve.add_argument("--reference", type=Path, metavar="SOLUTION.json",
                       help="a previous good solution of the same setting: its fit is the prior "
                            "and the search allows only the drift since (default: the "
                            "profile's [reference], if any)")
    solve.add_argument("--drift-px", type=option_type(Real(low=0, open_low=True)),
                       dest="drift_px", help="largest shift of the lines since the reference "
                                             "(pixels; default 5)")
    solve.add_argument("--anchors", type=Path, metavar="PAIRS.txt",
                       help="a few known lines: a text file of pixel and wavelength (nm, in the "
                            "profile's medium) pairs, one a line, '#' comments; at least three")


def add_demo_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``wavecal demo``."""
    parser.add_argument("-o", "--out", type=Path, default=Path("wavecal-demo-output"),
                        help="output folder (default: %(default)s)")


def _read_arc(frame: Path, profile, rows: tuple[int, int] | None, dark: Path | None = None):
    """Read an arc frame (minus ``dark``) and check it can be calibrated with ``rows``
    (command-line bounds)."""
    from ..frames import read_frame, subtract_dark
    from ..validation import MIN_DISPERSION_PIXELS

    arc = read_frame(frame, profile)
    if dark is not None:
        arc = subtract_dark(arc, read_frame(dark, profile), profile)
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


def _reference(args: argparse.Namespace, profile):
    """The ``--reference`` solution as a prior, else the profile's ``[reference]`` with
    ``--drift-px`` (None: the profile's own, if any, as it stands)."""
    from ..instrument import ReferenceSpec
    from ..solution_prior import reference_from_profile

    path = getattr(args, "reference", None)
    drift = getattr(args, "drift_px", None)
    if path is not None:
        return reference_from_profile(ReferenceSpec(path), drift_px=drift)
    if drift is None:
        return None
    if profile.reference is None:
        raise SolutionFileError("--drift-px needs --reference SOLUTION.json (or a [reference] "
                                "in the profile)")
    return reference_from_profile(profile.reference, drift_px=drift)


def _anchors(args: argparse.Namespace):
    """The ``--anchors`` pairs (None without them)."""
    from ..anchors import read_anchors

    path = getattr(args, "anchors", None)
    return None if path is None else read_anchors(path)


def _solve_one(frame: Path, profile, args: argparse.Namespace, out: Path) -> Status:
    """Solve and write one frame, print its summary; returns its status."""
    from ..solve import solve_and_write
    from ..summary_text import format_summary

    start = time.perf_counter()
    arc = _read_arc(frame, profile, getattr(args, "rows", None), getattr(args, "dark", None))
    with_report = not getattr(args, "no_report", False)
    # the report draws its own <stem>.residuals.png: do not draw it twice
    written = solve_and_write(arc, profile, out, stem=frame.name,
                              plot=not (getattr(args, "no_plot", False) or with_report),
                              spectrum=with_report, report=with_report,
                              lamps=getattr(args, "lamps", None),
                              grating_angle_deg=getattr(args, "grating_angle", None),
                              rows=getattr(args, "rows", None),
                              min_snr=getattr(args, "min_snr", 5.0),
                              free_grooves=getattr(args, "fit_grooves", False),
                              trace_slit=not getattr(args, "no_slit", False),
                              reference=_reference(args, profile), anchors=_anchors(args))
    elapsed = time.perf_counter() - start
    print(format_summary(written.solution))
    print(f"  written   : {written.solution_path}, {written.lines}"
          + (f", {written.residual_plot}" if written.residual_plot else "")
          + (f", {written.report}" if written.report is not None else "")
          + f"  ({elapsed:.2f} s)")
    print()
    return written.solution.status


def run_solve_command(args: argparse.Namespace) -> ExitCode:
    """Run ``wavecal solve``: every frame is tried; a frame that cannot be read makes the exit
    code at least :attr:`~wavecal.status.ExitCode.BAD_INPUT`."""
    from ..profile import load_profile

    profile = load_profile(args.profile)
    statuses = []
    bad_input = False
    for frame in args.frames:
        try:
            statuses.append(_solve_one(frame, profile, args, args.out))
        except WavecalError as exc:
            print(f"error: {exc}", file=sys.stderr)
            bad_input = True
    if bad_input:
        return max(exit_code_for(statuses), ExitCode.BAD_INPUT)
    return exit_code_for(statuses)


def run_demo_command(args: argparse.Namespace) -> ExitCode:
    """Run ``wavecal demo``: solve the bundled demo frames."""
    from .._version import __version__
    from ..demo import demo_cases
    from ..profile import load_profile

    statuses = []
    print(f"wavecal {__version__}: calibrating the bundled demo frames (invented instruments)\n")
    for case in demo_cases():
        profile = load_profile(case.profile)
        print(f"[{case.title}]")
        statuses.append(_solve_one(case.frame, profile, args, args.out))
    print(f"products in {args.out.resolve()}")
    return exit_code_for(statuses)
