"""Applying a solution to a frame file: a new, wavelength-calibrated FITS file.

:func:`apply_solution` reads a solution file and a frame (a 2-D long-slit image or an extracted
1-D spectrum; :func:`wavecal.frames.read_image` reads it) and writes what
:func:`wavecal.calibrated.calibrate_image` makes of them (layout in that module) to a new file.
The input file is read once into memory, read-only, and never modified; the output is written
atomically.
"""
from __future__ import annotations

import hashlib
import math
import os
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
from .resample import WavelengthGrid
from .solution import load_solution

__all__ = [
    "ApplyResult",
    "apply_solution",
    "output_path_for",
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
    provenance["WCARCFIL"] = (solution_path.name, "solution file")
    provenance["WCARCSHA"] = solution_sha  # 64 hex digits leave no room for a comment
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
