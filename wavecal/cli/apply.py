"""``wavecal apply``: write wavelength-calibrated copies of frames
(:func:`wavecal.apply.apply_solution`)."""
from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np

from ..apply import apply_solution, output_path_for
from ..errors import WavecalError
from ..resample import GRID_KINDS, WavelengthGrid, user_grid
from ..solution import load_solution
from ..status import ExitCode, Status
from ..validation import MAX_GRID_BINS, Integer, Real, option_type

__all__ = ["add_apply_arguments", "run_apply_command"]


#: A wavelength bound of a grid on the command line (nm).
_WAVELENGTH = Real(low=0, open_low=True)


def _hdu_arg(text: str) -> int | str:
    if text.lstrip("-").isdigit():
        return option_type(Integer(low=0), int)(text)
    return text


def _origin_arg(text: str) -> tuple[int, int]:
    try:
        row, col = (int(v) for v in text.split(","))
    except ValueError:
        msg = f"origin must be ROW,COLUMN (0-based raw-frame pixel), got {text!r}"
        raise argparse.ArgumentTypeError(msg) from None
    if row < 0 or col < 0:
        msg = f"origin ROW,COLUMN must not be negative, got {text!r}"
        raise argparse.ArgumentTypeError(msg)
    return row, col


def add_apply_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``wavecal apply SOLUTION FRAME [FRAME ...]``."""
    parser.add_argument("solution", type=Path, help="solution file (*.solution.json)")
    parser.add_argument("frames", nargs="+", type=Path,
                        help="FITS frame(s): 2-D long-slit images or 1-D spectra")
    parser.add_argument("-o", "--out", type=Path, default=Path("wavecal-calibrated"),
                        help="output folder, or a .fits file for a single frame "
                             "(default: %(default)s; files are named <frame>.wcal.fits)")
    parser.add_argument("--medium", choices=("air", "vacuum"),
                        help="medium of the output wavelengths (default: the solution's)")
    parser.add_argument("--resample", choices=("none",) + GRID_KINDS, default="none",
                        help="keep the pixels and write the WCS only (default), or resample "
                             "onto a linear, log-wavelength or user grid (flux-conserving)")
    grid = parser.add_argument_group("grid (with --resample)")
    grid.add_argument("--start", type=option_type(_WAVELENGTH), dest="grid_start", metavar="NM",
                      help="first bin edge in nm (default: shortest wavelength of the frame)")
    grid.add_argument("--stop", type=option_type(_WAVELENGTH), dest="grid_stop", metavar="NM",
                      help="last bin edge in nm (default: longest wavelength of the frame)")
    grid.add_argument("--step", type=option_type(Real(low=0, open_low=True)), dest="grid_step", metavar="STEP",
                      help="bin width: nm for linear, km/s for log (default: from --bins)")
    grid.add_argument("--bins", type=option_type(Integer(low=1, high=MAX_GRID_BINS), int),
                      dest="grid_bins", metavar="N",
                      help="number of bins (default: pixels along the dispersion)")
    grid.add_argument("--grid-file", type=Path, dest="grid_file", metavar="FILE",
                      help="text file of bin edges in nm, increasing (for --resample user)")
    parser.add_argument("--hdu", type=_hdu_arg, help="HDU of the image (default: first image)")
    parser.add_argument("--variance-hdu", type=_hdu_arg, dest="variance_hdu", metavar="HDU",
                        help="HDU of the variance (default: an HDU named VARIANCE, if any)")
    parser.add_argument("--origin", type=_origin_arg, default=(0, 0), metavar="ROW,COLUMN",
                        help="ROW,COLUMN of the raw arc frame at the frame's first pixel "
                             "(default: 0,0)")


#: Grid options: argparse destination -> option name.
_GRID_OPTIONS = {"grid_start": "--start", "grid_stop": "--stop", "grid_step": "--step",
                 "grid_bins": "--bins", "grid_file": "--grid-file"}


class _UsageError(ValueError):
    """Options that contradict each other (exit code 2, like argparse's own errors)."""


def _grid_from_args(args: argparse.Namespace) -> tuple[WavelengthGrid | str | None, dict[str, Any]]:
    kind = getattr(args, "resample", "none")
    allowed = {"none": (), "user": ("grid_file",)}.get(
        kind, ("grid_start", "grid_stop", "grid_step", "grid_bins"))
    wrong = [option for dest, option in _GRID_OPTIONS.items()
             if getattr(args, dest, None) is not None and dest not in allowed]
    if wrong:
        msg = f"{', '.join(wrong)} cannot be used with --resample {kind}"
        raise _UsageError(msg)
    if kind == "none":
        return None, {}
    if kind == "user":
        path = getattr(args, "grid_file", None)
        if path is None:
            msg = "--resample user needs --grid-file"
            raise _UsageError(msg)
        try:
            edges = np.loadtxt(path, dtype=float, comments="#", ndmin=1).ravel()
            return user_grid(edges), {}
        except (OSError, ValueError) as exc:
            msg = f"{path}: not a usable grid file (bin edges in nm, increasing): {exc}"
            raise WavecalError(msg) from None
    if args.grid_step is not None and args.grid_bins is not None:
        msg = "give --step or --bins, not both"
        raise _UsageError(msg)
    options = {"start_nm": args.grid_start, "stop_nm": args.grid_stop,
               "step": args.grid_step, "n_bins": args.grid_bins}
    return kind, {k: v for k, v in options.items() if v is not None}


def run_apply_command(args: argparse.Namespace) -> ExitCode:
    """Run ``wavecal apply``; returns the exit code.

    0: every frame written from an ``ok`` solution; 1: bad input (a file could not be read or
    written; other frames are still done); 2: contradictory options; 3: written, but the
    solution is ``suspect``; 4: the solution ``failed`` (nothing written).
    """
    try:
        grid, options = _grid_from_args(args)
        solution = load_solution(args.solution)
    except _UsageError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return ExitCode.USAGE
    except WavecalError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    if solution.model is None:
        print(f"error: {args.solution}: the solution failed ({'; '.join(solution.reasons)}); "
              "nothing written", file=sys.stderr)
        return ExitCode.FAILED
    code = ExitCode.OK
    for frame in args.frames:
        out = output_path_for(frame, args.out, len(args.frames))
        try:
            result = apply_solution(args.solution, frame, out, medium=args.medium, grid=grid,
                                    grid_options=options, hdu=args.hdu,
                                    variance_hdu=args.variance_hdu, origin=args.origin)
        except WavecalError as exc:
            print(f"error: {exc}", file=sys.stderr)
            code = ExitCode.BAD_INPUT
            continue
        error = "" if math.isnan(result.max_error_px) else f", max {result.max_error_px:.2g} px from the solution"
        total = int(np.prod(result.shape))
        print(f"{frame} -> {result.output}: {result.ctype} ({result.medium}{error}); "
              f"resampled: {result.resampled}; {result.n_extrapolated}/{total} pixels extrapolated")
    if code == ExitCode.OK and solution.status == Status.SUSPECT:
        print(f"warning: {args.solution}: the solution is suspect ({'; '.join(solution.reasons)})",
              file=sys.stderr)
        return ExitCode.SUSPECT
    return code
