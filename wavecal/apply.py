"""Applying a solution to a frame file: a new, wavelength-calibrated FITS file.

:func:`apply_solution` reads a solution file and a frame (a 2-D long-slit image or an extracted
1-D spectrum; :func:`wavecal.frames.read_image` reads it) and writes what
:func:`wavecal.calibrated.calibrate_image` makes of them (layout in that module) to a new file.
The input file is read once into memory, read-only, and never modified; the output is written
atomically.
"""
from __future__ import annotations

import argparse
import hashlib
import math
import os
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from astropy.io import fits

from ._atomic import atomic_path
from ._stems import file_stem
from ._version import __version__
from .calibrated import FLAG_EXTRAPOLATED, calibrated_hdus
from .errors import FrameError, SolutionFileError, WavecalError
from .frames import image_data, image_header, image_hdu_index, open_fits
from .resample import GRID_KINDS, WavelengthGrid, resample, user_grid
from .solution import load_solution
from .validation import MAX_GRID_BINS, Integer, Real, option_type

__all__ = [
    "ApplyResult",
    "apply_solution",
    "output_path_for",
    "add_apply_arguments",
    "run_apply_command",
]


@dataclass(frozen=True)
class ApplyResult:
    """What :func:`apply_solution` wrote.

    Attributes
    ----------
    output : Path
    frame : Path
    solution : Path
    solution_sha256 : str
    status : str
        The solution's verdict.
    algorithm, ctype, medium, conversion : str
        The WCS written (see :class:`~wavecal.wcs.SpectralWCS`).
    max_error_px : float
        Largest disagreement of the header with the solution over every pixel (NaN for a
        resampled grid, whose WCS is exact).
    resampled : str
        ``"none"`` or the grid kind.
    shape : tuple of int
        Shape of the written data.
    n_extrapolated : int
        Output pixels flagged :data:`~wavecal.calibrated.FLAG_EXTRAPOLATED`.
    """

    output: Path
    frame: Path
    solution: Path
    solution_sha256: str
    status: str
    algorithm: str
    ctype: str
    medium: str
    conversion: str
    max_error_px: float
    resampled: str
    shape: tuple[int, ...]
    n_extrapolated: int

    def summary(self) -> dict[str, Any]:
        """A JSON-safe dictionary."""
        out = {k: getattr(self, k) for k in self.__dataclass_fields__}
        for k in ("output", "frame", "solution"):
            out[k] = str(out[k])
        out["shape"] = list(self.shape)
        out["max_error_px"] = None if math.isnan(self.max_error_px) else self.max_error_px
        return out


# ------------------------------------------------------------------------------------------------
# Files
# ------------------------------------------------------------------------------------------------

def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _read_bytes(path: Path, what: str, error: type[WavecalError]) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        msg = f"{path}: cannot read {what}: {exc.strerror}"
        raise error(msg) from None


def _read_frame(path: Path, raw: bytes, hdu: int | str | None, variance_hdu: int | str | None):
    """(data, header, variance or None) from the file's bytes (nothing is written anywhere)."""
    with open_fits(path, content=raw) as hdul:
        index = image_hdu_index(path, hdul, hdu)
        data, header = image_data(path, hdul, index), image_header(hdul, index)
        names = [h.name for h in hdul]
        which = variance_hdu if variance_hdu is not None else (
            "VARIANCE" if "VARIANCE" in names and index != names.index("VARIANCE") else None)
        variance = None
        if which is not None:
            variance = image_data(path, hdul, image_hdu_index(path, hdul, which))
    while data.ndim > 2 and data.shape[0] == 1:
        data = data[0]
    if variance is not None and variance.size != data.size:
        msg = f"{path}: variance HDU {which!r} of shape {variance.shape} does not match the data {data.shape}"
        raise FrameError(msg)
    return data, header, None if variance is None else variance.reshape(data.shape)


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def apply_solution(solution_path: str | Path, frame_path: str | Path, output_path: str | Path, *,
                   medium: str | None = None, grid: WavelengthGrid | str | None = None,
                   grid_options: dict[str, Any] | None = None, hdu: int | str | None = None,
                   variance_hdu: int | str | None = None,
                   origin: tuple[int, int] = (0, 0)) -> ApplyResult:
    """Write a wavelength-calibrated copy of a frame.

    Parameters
    ----------
    solution_path : str or Path
        A solution file (``*.solution.json``).
    frame_path : str or Path
        The FITS frame: a 2-D long-slit image (dispersion along the solution's
        ``dispersion_axis``) or a 1-D spectrum. Read once, read-only; never modified.
    output_path : str or Path
        The new FITS file (replaced atomically if it exists; never the input).
    medium : {"air", "vacuum"}, optional
        Medium of the output wavelengths; default the solution's.
    grid : WavelengthGrid or {"linear", "log"}, optional
        Resample onto this grid; a kind name makes a :func:`~wavecal.calibrated.default_grid` with ``grid_options``
        (``start_nm``, ``stop_nm``, ``step``, ``n_bins``). Default: no resampling.
    hdu, variance_hdu : int or str, optional
        HDU of the image (default: the first 1-D or 2-D image) and of its variance (default: an
        HDU named ``VARIANCE`` if there is one).
    origin : tuple of int
        ``(row, column)`` of the raw arc frame's pixel grid held by the frame's first pixel
        (non-zero when the frame was trimmed differently from the raw arc).

    Returns
    -------
    ApplyResult

    Raises
    ------
    SolutionFileError
        If the solution file cannot be read or holds a failed solution.
    FrameError
        If the frame cannot be read, has no suitable image, the solution gives no wavelength
        scale over it, or the output would replace an input file.
    """
    solution_path, frame_path, output_path = Path(solution_path), Path(frame_path), Path(output_path)
    solution_bytes = _read_bytes(solution_path, "solution file", SolutionFileError)
    solution = load_solution(solution_path)
    if solution.model is None:
        msg = f"{solution_path}: the solution failed ({'; '.join(solution.reasons)}); nothing to apply"
        raise SolutionFileError(msg)
    if not frame_path.is_file():
        msg = f"{frame_path}: file not found"
        raise FrameError(msg)
    for other in (frame_path, solution_path):
        if _same_file(output_path, other) or output_path.resolve() == other.resolve():
            msg = f"{output_path}: the output would replace the input file {other}; choose another name"
            raise FrameError(msg)
    frame_bytes = _read_bytes(frame_path, "frame", FrameError)
    data, header, variance = _read_frame(frame_path, frame_bytes, hdu, variance_hdu)
    medium = medium or solution.medium
    solution_sha = _sha256(solution_bytes)
    provenance = fits.Header()
    provenance["WCVERS"] = (__version__, "wavecal version")
    provenance["WCSOLFIL"] = (solution_path.name, "solution file")
    provenance["WCSOLSHA"] = solution_sha  # 64 hex digits leave no room for a comment
    provenance["WCINFIL"] = (frame_path.name, "input frame")
    for line in (f"wavecal {__version__} apply: wavelength calibration",
                 f"solution file: {solution_path.name}", f"sha256 {solution_sha}",
                 f"input frame: {frame_path.name}", f"sha256 {_sha256(frame_bytes)}"):
        provenance.add_history(line)
    try:
        hdul, wcs = calibrated_hdus(solution, data, header=header, variance=variance, medium=medium,
                                grid=grid, grid_options=grid_options, origin=origin,
                                provenance=provenance)
    except ValueError as exc:
        msg = f"{frame_path}: cannot apply {solution_path.name}: {exc}"
        raise FrameError(msg) from None
    with atomic_path(output_path) as tmp:
        hdul.writeto(tmp, overwrite=True, checksum=True)
    return ApplyResult(
        output=output_path, frame=frame_path, solution=solution_path, solution_sha256=solution_sha,
        status=solution.status, algorithm=wcs.algorithm, ctype=wcs.ctype, medium=wcs.medium,
        conversion=wcs.conversion, max_error_px=wcs.max_error_px,
        resampled=hdul[0].header["WCRESAMP"], shape=tuple(hdul[0].data.shape),
        n_extrapolated=int(np.count_nonzero(hdul["FLAGS"].data & FLAG_EXTRAPOLATED)))


def output_path_for(frame: Path, out: Path, n_frames: int) -> Path:
    """Output file for ``frame``: ``out`` itself if it names a FITS file (one frame), else
    ``out/<frame name without .fits/.fz>.wcal.fits``."""
    if out.suffix.lower() in (".fits", ".fit", ".fts") and n_frames == 1:
        return out
    return out / f"{file_stem(frame)}.wcal.fits"


# ------------------------------------------------------------------------------------------------
# Command line
# ------------------------------------------------------------------------------------------------

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


def run_apply_command(args: argparse.Namespace) -> int:
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
        return 2
    except WavecalError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    if solution.model is None:
        print(f"error: {args.solution}: the solution failed ({'; '.join(solution.reasons)}); "
              "nothing written", file=sys.stderr)
        return 4
    code = 0
    for frame in args.frames:
        out = output_path_for(frame, args.out, len(args.frames))
        try:
            result = apply_solution(args.solution, frame, out, medium=args.medium, grid=grid,
                                    grid_options=options, hdu=args.hdu,
                                    variance_hdu=args.variance_hdu, origin=args.origin)
        except WavecalError as exc:
            print(f"error: {exc}", file=sys.stderr)
            code = 1
            continue
        error = "" if math.isnan(result.max_error_px) else f", max {result.max_error_px:.2g} px from the solution"
        total = int(np.prod(result.shape))
        print(f"{frame} -> {result.output}: {result.ctype} ({result.medium}{error}); "
              f"resampled: {result.resampled}; {result.n_extrapolated}/{total} pixels extrapolated")
    if code == 0 and solution.status == "suspect":
        print(f"warning: {args.solution}: the solution is suspect ({'; '.join(solution.reasons)})",
              file=sys.stderr)
        return 3
    return code
