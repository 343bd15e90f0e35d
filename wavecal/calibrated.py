"""A wavelength-calibrated image in memory: the data with a WCS, flags and provenance.

:func:`calibrate_image` takes a solution and an image (a 2-D long-slit image or an extracted
1-D spectrum) and returns the HDUs of a new FITS file whose header describes every pixel's
wavelength (:mod:`wavecal.wcs`), optionally resampled onto a linear, log-λ or user grid
(:mod:`wavecal.resample`). :func:`wavecal.apply.apply_solution` writes them to a file.

Output layout
-------------
======  ==========  ===========================================================================
HDU     EXTNAME     content
======  ==========  ===========================================================================
0       (primary)   the data (as read, or resampled: counts per bin), the input's header without
                    its old WCS, the new WCS, provenance keywords ``WC*`` and HISTORY cards
1       VARIANCE    variance of the data (propagated when resampled); only if the input had one
2       FLAGS       uint8 bit mask: 1 wavelength outside the range covered by identified lines
                    (extrapolated), 2 bin not wholly covered by the input, 4 a bad (non-finite)
                    input pixel contributes
3       WAVE-TAB    the lookup table of a ``-TAB`` WCS (only then)
======  ==========  ===========================================================================

Every image HDU carries the same WCS.
"""
from __future__ import annotations

import math
import re
import warnings
from typing import Any

import numpy as np
from astropy.io import fits
from astropy.time import Time

from .constants import SPEED_OF_LIGHT_KMS
from .errors import WavecalError
from .resample import WavelengthGrid, linear_grid, log_grid, resample
from .validation import MAX_GRID_BINS
from .wcs import (
    AIRVAC_WAVECAL,
    SpectralWCS,
    grid_wcs,
    image_geometry,
    pixel_wavelengths,
    solution_wcs,
)

__all__ = [
    "FLAG_EXTRAPOLATED",
    "FLAG_NO_DATA",
    "FLAG_BAD_INPUT",
    "calibrate_image",
    "calibrated_hdus",
    "default_grid",
]

#: FLAGS bit: the wavelength lies outside the range covered by identified lines (extrapolated).
FLAG_EXTRAPOLATED = 1
#: FLAGS bit: a resampled bin is not wholly covered by the input pixels.
FLAG_NO_DATA = 2
#: FLAGS bit: a bad (non-finite) input pixel contributes.
FLAG_BAD_INPUT = 4
_FLAG_TEXT = ((FLAG_EXTRAPOLATED, "extrapolated: outside the lines' range"),
              (FLAG_NO_DATA, "bin not wholly covered by the input"),
              (FLAG_BAD_INPUT, "a non-finite input pixel contributes"))

_STRUCTURAL = re.compile(
    r"^(SIMPLE|BITPIX|NAXIS\d*|EXTEND|PCOUNT|GCOUNT|XTENSION|GROUPS|BZERO|BSCALE|BLANK|CHECKSUM|"
    r"DATASUM|EXTNAME|EXTVER|EXTLEVEL|INHERIT|Z\w*|T(FIELDS|TYPE\d+|FORM\d+|DIM\d+))$")
_WCS_KEY = re.compile(
    r"^(WCSAXES|WCSNAME|CTYPE\d+|CUNIT\d+|CRPIX\d+|CRVAL\d+|CDELT\d+|CROTA\d+|CNAME\d+|CRDER\d+|"
    r"CSYER\d+|PC\d+_\d+|CD\d+_\d+|PV\d+_\d+|PS\d+_\d+|LONPOLE|LATPOLE|RESTFRQ|RESTWAV|SPECSYS|"
    r"SSYSOBS|VELOSYS|MJDREF|MJD-OBS)[A-Z]?$")
#: Keywords this module writes (removed from an input header that already has them).
_OWN_KEYS = frozenset({"WCMEDIUM", "WCAIRVAC", "WCALGOR", "WCMAXERR", "WCRESAMP", "WCARCSTA",
                       "WCCOVLO", "WCCOVHI", "WCLAMLO", "WCLAMHI", "WCORIGX", "WCVERS", "WCARCFIL",
                       "WCARCSHA", "WCINFIL", "WCFLAG1", "WCFLAG2", "WCFLAG4"})



def default_grid(solution: Any, shape: tuple[int, ...], kind: str, *, medium: str | None = None,
                 origin: tuple[int, int] = (0, 0), start_nm: float | None = None,
                 stop_nm: float | None = None, step: float | None = None,
                 n_bins: int | None = None) -> WavelengthGrid:
    """A linear or log grid for an image, with defaults taken from the solution.

    The default range runs from the shortest to the longest wavelength of any pixel edge of the
    image; the default number of bins is the number of pixels along the dispersion (used when
    ``step`` is not given). ``step`` is in nm for a linear grid and in km/s for a log grid.
    """
    medium = medium or solution.medium
    axis, x0, y0 = image_geometry(solution, shape, origin)
    edges = _pixel_edges(solution, shape, axis, x0, y0, medium)
    return _grid_over(edges, kind, int(shape[axis]), start_nm=start_nm, stop_nm=stop_nm,
                      step=step, n_bins=n_bins)


def _grid_over(edges: np.ndarray, kind: str, n_pixels: int, *, start_nm: float | None = None,
               stop_nm: float | None = None, step: float | None = None,
               n_bins: int | None = None) -> WavelengthGrid:
    """:func:`default_grid` from the wavelengths of the image's pixel edges."""
    if kind not in ("linear", "log"):
        msg = f"a default grid is 'linear' or 'log', got {kind!r}"
        raise ValueError(msg)
    lo = float(np.min(edges)) if start_nm is None else float(start_nm)
    hi = float(np.max(edges)) if stop_nm is None else float(stop_nm)
    bins = None if step is not None else (n_pixels if n_bins is None else n_bins)
    _check_grid_size(kind, lo, hi, step, bins)
    if kind == "linear":
        return linear_grid(lo, hi, step_nm=step, n_bins=bins)
    return log_grid(lo, hi, velocity_step_kms=step, n_bins=bins)


def _check_grid_size(kind: str, lo: float, hi: float, step: float | None,
                     bins: int | None) -> None:
    """Refuse a grid that is empty, reversed or larger than :data:`MAX_GRID_BINS` bins (before
    allocating it)."""
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        msg = (f"grid from {lo:g} nm (--start) to {hi:g} nm (--stop): the start must be below "
               "the stop, both positive")
        raise WavecalError(msg)
    if step is not None and not (math.isfinite(step) and step > 0):
        msg = f"grid step (--step) must be a positive number, got {step!r}"
        raise WavecalError(msg)
    if step is None:
        n, what = bins, "--bins"
    elif kind == "linear":
        n, what = (hi - lo) / step, f"--step {step:g} nm"
    else:
        n, what = math.log(hi / lo) / (step / SPEED_OF_LIGHT_KMS), f"--step {step:g} km/s"
    if not 1 <= n <= MAX_GRID_BINS:
        msg = (f"grid of {n:.3g} bins ({what} over {lo:.6g}-{hi:.6g} nm): "
               f"allowed 1 to {MAX_GRID_BINS}")
        raise WavecalError(msg)


def _pixel_edges(solution: Any, shape: tuple[int, ...], axis: int, x0: float, y0: float,
                 medium: str) -> np.ndarray:
    """Wavelength (nm) of every pixel edge along the dispersion: shape (rows or 1, n + 1)."""
    n = int(shape[axis])
    x = x0 + np.arange(n + 1, dtype=float) - 0.5
    if len(shape) == 2 and getattr(solution, "slit", None) is not None:
        y = y0 + np.arange(int(shape[1 - axis]), dtype=float)
        lam = solution.wavelength(x[np.newaxis, :], y[:, np.newaxis], medium=medium)
    else:
        lam = solution.wavelength(x, medium=medium)
    return np.atleast_2d(np.asarray(lam, dtype=float))


def calibrate_image(solution: Any, data: np.ndarray, *, header: fits.Header | None = None,
                    variance: np.ndarray | None = None, medium: str | None = None,
                    grid: WavelengthGrid | str | None = None,
                    grid_options: dict[str, Any] | None = None, origin: tuple[int, int] = (0, 0),
                    provenance: fits.Header | None = None) -> fits.HDUList:
    """The calibrated HDUs (layout in the module docstring) for an image held in memory.

    Parameters
    ----------
    solution : Solution
        The wavelength solution (it must have a model).
    data : ndarray, shape (N,) or (rows, columns)
        The frame; for 2-D the dispersion runs along ``solution.dispersion_axis``.
    header : astropy.io.fits.Header, optional
        The frame's header; copied without its structural and WCS keywords.
    variance : ndarray, optional
        Variance of ``data``, same shape.
    medium : {"air", "vacuum"}, optional
        Medium of the output wavelengths; default the solution's.
    grid : WavelengthGrid or {"linear", "log"}, optional
        Resample onto this grid (in ``medium``), or onto a :func:`default_grid` of that kind
        made with ``grid_options``; default: keep the pixels, WCS only.
    grid_options : dict, optional
        ``start_nm``, ``stop_nm``, ``step``, ``n_bins`` of a default grid.
    origin : tuple of int
        ``(row, column)`` of the raw frame held by ``data``'s first pixel (for a spectrum, the
        entry along the solution's dispersion axis; see :func:`wavecal.wcs.image_geometry`).
    provenance : astropy.io.fits.Header, optional
        Extra cards (HISTORY, keywords) for the primary header.

    Returns
    -------
    astropy.io.fits.HDUList

    Raises
    ------
    ValueError
        On a failed solution, an image that is not 1-D or 2-D, a variance of another shape, or
        an image the solution gives no monotonic wavelength scale for.
    """
    return calibrated_hdus(solution, data, header=header, variance=variance, medium=medium, grid=grid,
                           grid_options=grid_options, origin=origin, provenance=provenance)[0]


def calibrated_hdus(solution: Any, data: np.ndarray, *, header: fits.Header | None,
                    variance: np.ndarray | None, medium: str | None,
                    grid: WavelengthGrid | str | None, grid_options: dict[str, Any] | None,
                    origin: tuple[int, int], provenance: fits.Header | None,
                    ) -> tuple[fits.HDUList, SpectralWCS]:
    """:func:`calibrate_image`'s HDUs and the spectral WCS chosen for them (same parameters)."""
    data = np.asarray(data)
    while data.ndim > 2 and data.shape[0] == 1:
        data = data[0]
    if data.ndim not in (1, 2) or data.size == 0:
        msg = f"image of shape {data.shape} is neither 1-D nor 2-D"
        raise ValueError(msg)
    if variance is not None:
        if np.size(variance) != data.size:
            msg = f"the variance image of shape {np.shape(variance)} does not match the data {data.shape}"
            raise ValueError(msg)
        variance = np.asarray(variance).reshape(data.shape)
    if solution.model is None:
        msg = "this solution failed; it has no wavelength scale to apply"
        raise ValueError(msg)
    medium = medium or solution.medium
    axis, x0, y0 = image_geometry(solution, data.shape, origin)
    lo, hi = solution.covered_range_px
    # rows along the slit (as a column), when the wavelength depends on them
    y_rows = (y0 + np.arange(data.shape[1 - axis], dtype=float))[:, np.newaxis] if (
        data.ndim == 2 and getattr(solution, "slit", None) is not None) else None
    if grid is None:
        lam = pixel_wavelengths(solution, data.shape, medium=medium, origin=origin)
        wcs = solution_wcs(solution, data.shape, medium=medium, origin=origin, wavelengths=lam)
        out_data, out_var = data, variance
        outside = _outside_lines(solution, lam, medium, y_rows, lo, hi)
        flags = np.where(outside, FLAG_EXTRAPOLATED, 0).astype(np.uint8)
        flags = flags[0] if data.ndim == 1 else np.broadcast_to(
            flags if axis == 1 else flags.T, data.shape).copy()
        bad = ~np.isfinite(data) if data.dtype.kind == "f" else np.zeros(data.shape, bool)
        if variance is not None:
            bad |= ~np.isfinite(variance)
        flags[bad] |= FLAG_BAD_INPUT
    else:
        conversion = "none" if medium == solution.medium else AIRVAC_WAVECAL
        edges = _pixel_edges(solution, data.shape, axis, x0, y0, medium)
        if isinstance(grid, str):
            grid = _grid_over(edges, grid, int(data.shape[axis]), **(grid_options or {}))
        rows = np.moveaxis(np.atleast_2d(data), axis if data.ndim == 2 else 1, -1)
        rows_var = None if variance is None else np.moveaxis(
            np.atleast_2d(variance), axis if data.ndim == 2 else 1, -1)
        res = resample(rows, edges, grid, variance=rows_var)
        outside = _outside_lines(solution, grid.edges, medium, y_rows, lo, hi, bins=True)
        flags = np.where(np.broadcast_to(outside, res.flux.shape), FLAG_EXTRAPOLATED,
                         0).astype(np.uint8)
        flags[res.coverage < 1.0 - 1e-9] |= FLAG_NO_DATA
        flags[res.bad] |= FLAG_BAD_INPUT
        dtype = np.result_type(data.dtype, np.float32)
        out_data = _restore(res.flux, data.ndim, axis).astype(dtype)
        out_var = None if res.variance is None else _restore(res.variance, data.ndim, axis).astype(dtype)
        flags = _restore(flags, data.ndim, axis)
        wcs = grid_wcs(grid, medium=medium, ndim=data.ndim, spectral_axis=data.ndim - axis
                       if data.ndim == 2 else 1, first_row=y0, conversion=conversion)
    hdul = _hdus(out_data, out_var, flags, wcs, header, provenance, solution, grid, (x0, lo, hi),
                 medium)
    return hdul, wcs


def _extrapolated(solution: Any, x: np.ndarray, y: np.ndarray | None) -> np.ndarray:
    """``solution.extrapolated`` at raw pixels ``x`` (on rows ``y`` when λ depends on them)."""
    if y is None:
        return np.asarray(solution.extrapolated(x), dtype=bool)
    return np.asarray(solution.extrapolated(x, y), dtype=bool)


def _outside_lines(solution: Any, wavelengths: np.ndarray, medium: str, y_rows: np.ndarray | None,
                   lo: float, hi: float, *, bins: bool = False) -> np.ndarray:
    """Where the wavelengths lie beyond those the identified lines span (extrapolated).

    ``wavelengths`` are pixel wavelengths, shape (R or 1, N), or with ``bins`` the M + 1 edges
    of resampled bins, which are outside when either edge is. The lines span the same
    wavelengths on every row: those of the covered pixel range on the reference row (this is
    :meth:`Solution.extrapolated` expressed in wavelength, the solution being monotonic). With a
    slit model, rows the lines were not traced over are outside whole (``extrapolated`` at the
    middle of the covered range on each row). Returns shape (R or 1, N or M).
    """
    shape = (1, wavelengths.size - 1) if bins else np.atleast_2d(wavelengths).shape
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return np.ones(shape, dtype=bool)
    trusted = np.sort(np.asarray(solution.wavelength(np.array([lo, hi]), medium=medium), dtype=float))
    if bins:
        outside = ((wavelengths[:-1] < trusted[0]) | (wavelengths[1:] > trusted[1]))[np.newaxis, :]
    else:
        outside = (np.atleast_2d(wavelengths) < trusted[0]) | (np.atleast_2d(wavelengths) > trusted[1])
    if y_rows is not None:
        outside = outside | _extrapolated(solution, np.full(y_rows.shape, 0.5 * (lo + hi)), y_rows)
    return outside


def _restore(rows: np.ndarray, ndim: int, axis: int) -> np.ndarray:
    """Undo the (rows, dispersion) arrangement used for resampling."""
    return rows[0] if ndim == 1 else np.moveaxis(rows, -1, axis)


def _clean_header(header: fits.Header | None) -> fits.Header:
    """The input's header without structural, WCS and our own keywords.

    ``MJD-OBS`` is added from ``DATE-OBS`` when missing: it is a WCS keyword, and without it
    astropy.wcs warns on every read that it derived the value itself.
    """
    out = fits.Header()
    if header is None:
        return out
    for card in header.cards:
        key = card.keyword
        if _STRUCTURAL.match(key) or _WCS_KEY.match(key) or key in _OWN_KEYS:
            continue
        out.append(card, end=True)
    if "DATE-OBS" in out and "MJD-OBS" not in out:
        with warnings.catch_warnings():
            # a date beyond the leap-second table only makes erfa doubt the UTC seconds of
            # that day, far below what an MJD in days carries
            warnings.simplefilter("ignore")
            try:
                mjd = Time(str(out["DATE-OBS"]), scale="utc").mjd
            except (ValueError, TypeError):
                return out
        out.insert("DATE-OBS", ("MJD-OBS", float(mjd), "[d] from DATE-OBS"), after=True)
    return out


def _hdus(data: np.ndarray, variance: np.ndarray | None, flags: np.ndarray, wcs: SpectralWCS,
          header: fits.Header | None, provenance: fits.Header | None, solution: Any,
          grid: WavelengthGrid | None, covered: tuple[float, float, float], medium: str) -> fits.HDUList:
    x0, lo, hi = covered
    info = fits.Header()
    info["WCMEDIUM"] = (medium, "medium of the wavelengths (nm)")
    info["WCAIRVAC"] = (wcs.conversion, "air/vacuum conversion")
    info["WCALGOR"] = (wcs.algorithm, "wavelength WCS algorithm")
    if math.isfinite(wcs.max_error_px):
        info["WCMAXERR"] = (float(f"{wcs.max_error_px:.3g}"), "[px] max |WCS - solution|, every pixel")
    info["WCRESAMP"] = ("none" if grid is None else grid.kind, "resampled onto a grid?")
    info["WCARCSTA"] = (solution.status, "verdict of the solution")
    for key, value, what in (("WCCOVLO", lo, "first"), ("WCCOVHI", hi, "last")):
        if math.isfinite(value):
            info[key] = (float(value), f"{what} raw px (0-based) covered by lines")
    if all(math.isfinite(v) for v in (lo, hi)):
        lam = np.asarray(solution.wavelength(np.array([lo, hi]), medium=medium), dtype=float)
        info["WCLAMLO"] = (float(np.min(lam)), "[nm] trusted range: shortest")
        info["WCLAMHI"] = (float(np.max(lam)), "[nm] trusted range: longest")
    info["WCORIGX"] = (x0, "raw px (0-based) of the first pixel along disp.")
    primary = fits.PrimaryHDU(data)
    primary.header.extend(_clean_header(header), end=True)
    primary.header.extend(wcs.header, end=True, update=True)
    primary.header.extend(info, end=True, update=True)
    if provenance is not None:
        primary.header.extend(provenance, end=True)
    hdus: list[Any] = [primary]
    if variance is not None:
        hdus.append(fits.ImageHDU(variance, header=wcs.header.copy(), name="VARIANCE"))
    flag_hdu = fits.ImageHDU(flags.astype(np.uint8), header=wcs.header.copy(), name="FLAGS")
    for bit, text in _FLAG_TEXT:
        flag_hdu.header[f"WCFLAG{bit}"] = (text, f"meaning of bit {bit}")
    hdus.append(flag_hdu)
    if wcs.table is not None:
        hdus.append(wcs.table)
    return fits.HDUList(hdus)
