"""Raw frames: reading, bias/overscan removal, trimming, masks, darks and the noise model.

A raw arc frame (FITS, or a text spectrum or camera image read by :mod:`wavecal.frame_files`) is
read once, read-only, into a :class:`Frame` holding the illuminated pixels in
electrons, their variance from the detector noise model and masks of unusable pixels. Nothing
further down the pipeline re-opens the file.

Pixel conventions
-----------------
The instrument profile gives its pixel regions (``trim``, ``overscan``) in *unbinned* detector
pixels; for a binned frame they are divided by the frame's binning (read from the header through
the profile), keeping only whole binned pixels. :attr:`Frame.origin` is the pixel of the file
*as read* (binned, 0-based) that holds ``data[0, 0]``, so a data index plus the origin gives the
raw-frame pixel.

Noise model
-----------
Per pixel, in electrons²: ``variance = max(data, 0) + read_noise²`` (Poisson plus Gaussian read
noise; the noise of the bias estimate is neglected).
"""
from __future__ import annotations

import io
import logging
import math
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
import dataclasses
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from astropy.io import fits

from .errors import FrameError
from .frame_files import RawFile, frame_file_kind, read_camera_image, read_text_spectrum
from .profile import InstrumentProfile

__all__ = ["open_fits", "image_hdu_index", "image_header", "image_data", "read_image", "Frame",
           "read_frame", "frame_from_array", "subtract_dark", "DARK_EXPOSURE_TOLERANCE"]

#: Largest relative difference between the exposure times of an arc and the dark subtracted
#: from it (when both headers give one).
DARK_EXPOSURE_TOLERANCE = 0.01

_log = logging.getLogger(__name__)

#: Degree of the robust Legendre fit to the per-line overscan levels.
_OVERSCAN_DEGREE = 3

#: Header keywords describing the file structure, not copied from the primary header.
_STRUCTURAL = {"SIMPLE", "BITPIX", "NAXIS", "EXTEND", "PCOUNT", "GCOUNT", "XTENSION", "BZERO",
               "BSCALE", "BLANK", "COMMENT", "HISTORY", "", "CHECKSUM", "DATASUM", "EXTNAME",
               "EXTVER", "GROUPS"}


@dataclass(frozen=True, eq=False)
class Frame:
    """A raw frame reduced to electrons, with variance and masks.

    The arrays are read-only.

    Attributes
    ----------
    path : Path or None
        The file the frame was read from (None for in-memory frames).
    data : ndarray of float32, shape (M, N)
        Bias-subtracted, trimmed pixel values in electrons. Non-finite raw values are set to 0
        (and marked in ``bad``).
    variance : ndarray of float32, shape (M, N)
        ``max(data, 0) + read_noise**2`` in electrons².
    bad : ndarray of bool, shape (M, N)
        Unusable pixels: non-finite raw values and saturated pixels.
    saturated : ndarray of bool, shape (M, N)
        Pixels whose raw value reached the profile's ``saturation_adu`` (default: 65535, or for a
        camera image its bit depth's full scale). Their ``data`` keeps the (lower-bound) value
        read.
    header : astropy.io.fits.Header
        A copy of the image HDU's header; for an extension, primary-header keywords it lacks are
        appended.
    dispersion_axis : int
        Axis of ``data`` along which the wavelength changes (0 or 1).
    origin : tuple of int
        ``(row0, col0)``: pixel of the file as read that holds ``data[0, 0]``.
    binning : tuple of int
        Binning ``(along axis 0, along axis 1)`` of ``data``.
    """

    path: Path | None
    data: np.ndarray
    variance: np.ndarray
    bad: np.ndarray
    saturated: np.ndarray
    header: fits.Header
    dispersion_axis: int
    origin: tuple[int, int]
    binning: tuple[int, int]

    @property
    def shape(self) -> tuple[int, int]:
        """Shape ``(rows, columns)`` of ``data``."""
        return self.data.shape  # type: ignore[return-value]

    @property
    def n_dispersion(self) -> int:
        """Number of pixels along the dispersion axis."""
        return int(self.data.shape[self.dispersion_axis])

    @property
    def n_spatial(self) -> int:
        """Number of pixels across the dispersion (along the slit)."""
        return int(self.data.shape[1 - self.dispersion_axis])


def read_frame(path: str | Path, profile: InstrumentProfile, *, hdu: int | str | None = None,
               bias: np.ndarray | None = None, bad_pixels: np.ndarray | None = None) -> Frame:
    """Read a raw frame from a FITS file, a text spectrum or a camera image.

    The reader is chosen by the suffix (:func:`~wavecal.frame_files.frame_file_kind`): ``.txt``,
    ``.csv``, ``.dat`` are 1-D text spectra, ``.png``, ``.tif``, ``.tiff``, ``.bmp`` camera
    images (:mod:`wavecal.frame_files`), anything else FITS. The file is opened read-only and
    closed before returning; it is never modified.

    Parameters
    ----------
    path : str or Path
        The frame file.
    profile : InstrumentProfile
        The instrument: detector geometry, gain, read noise, saturation, header mapping.
    hdu : int or str, optional
        HDU (index or EXTNAME) holding the image. Default: the profile's ``detector.hdu``, else
        the first HDU with image data.
    bias : ndarray, optional
        Master bias in ADU, of the raw (as read) shape or of the trimmed shape. When given it is
        subtracted instead of the overscan level or the profile's constant ``bias_adu``.
    bad_pixels : ndarray of bool, optional
        Known bad pixels (True = bad), of the raw or of the trimmed shape; they are masked like
        non-finite ones (2-D frames).

    Returns
    -------
    Frame

    Raises
    ------
    FrameError
        Naming the file: missing, not FITS, truncated or corrupt, no image data, all pixels
        non-finite, or a shape that does not hold the profile's trim/overscan regions.
    HeaderError
        When the binning keyword is missing and the profile declares no default.

    Notes
    -----
    Integer data with ``BZERO``/``BSCALE`` are scaled by astropy on reading. One-dimensional
    data are taken as an already extracted, bias-subtracted spectrum in ADU: it becomes a
    one-row frame with the dispersion along axis 1; no bias is subtracted, saturation is not
    flagged (a sum of rows may legitimately exceed the saturation level) and the profile's trim
    along the dispersion axis is applied only when the length equals the detector's length.
    """
    path = Path(path)
    if not path.is_file():
        msg = f"{path}: file not found"
        raise FrameError(msg)
    kind = frame_file_kind(path)
    if kind == "text":
        raw = read_text_spectrum(path)
    elif kind == "image":
        raw = read_camera_image(path, profile.detector.saturation_adu)
    else:
        raw = RawFile(*read_image(path, hdu if hdu is not None else profile.detector.hdu))
    return _build_frame(raw.data, raw.header, profile, path=path, bias=bias,
                        bad_pixels=bad_pixels, saturated=raw.saturated,
                        first_pixel=raw.first_pixel)


def subtract_dark(frame: Frame, dark: Frame, profile: InstrumentProfile) -> Frame:
    """``frame`` minus a matching dark frame (both read with the same profile).

    The dark must have the frame's shape and, when both headers give an exposure time through
    the profile's mapping (keyword present), the same exposure within
    :data:`DARK_EXPOSURE_TOLERANCE`. Variances add; the dark's bad pixels become bad.

    Raises
    ------
    FrameError
        One line naming the dark and what differs.
    """
    if dark.shape != frame.shape or dark.origin != frame.origin or dark.binning != frame.binning:
        msg = (f"{dark.path}: dark of shape {dark.shape[0]}x{dark.shape[1]} (binning "
               f"{dark.binning[0]}x{dark.binning[1]}) does not match {frame.path} "
               f"({frame.shape[0]}x{frame.shape[1]}, binning {frame.binning[0]}x{frame.binning[1]})")
        raise FrameError(msg)
    times = [_exposure(f, profile) for f in (frame, dark)]
    if None not in times and abs(times[0] - times[1]) > DARK_EXPOSURE_TOLERANCE * max(times):
        msg = (f"{dark.path}: dark exposure {times[1]:g} s differs from the {times[0]:g} s of "
               f"{frame.path} by more than {100 * DARK_EXPOSURE_TOLERANCE:g} %")
        raise FrameError(msg)
    arrays = (frame.data - dark.data, frame.variance + dark.variance, frame.bad | dark.bad)
    for array in arrays:
        array.setflags(write=False)
    return dataclasses.replace(frame, data=arrays[0], variance=arrays[1], bad=arrays[2])


def _exposure(frame: Frame, profile: InstrumentProfile) -> float | None:
    """The exposure time (s) a frame's header gives through the profile, None if it gives none
    (a default of the profile's mapping is not a measured exposure)."""
    spec = profile.header.get("exposure_time")
    if spec is None or frame.header.get(spec.keyword) in (None, ""):
        return None
    value = frame.header[spec.keyword]
    try:
        seconds = float(value)
    except (TypeError, ValueError):
        seconds = math.nan
    if not math.isfinite(seconds) or seconds < 0:
        msg = f"{frame.path}: header keyword {spec.keyword!r} (exposure time) = {value!r} is not a time"
        raise FrameError(msg)
    return seconds


def frame_from_array(data: np.ndarray, profile: InstrumentProfile, *,
                     header: fits.Header | None = None, path: str | Path | None = None,
                     bias: np.ndarray | None = None, bad_pixels: np.ndarray | None = None) -> Frame:
    """Build a :class:`Frame` from a raw image held in memory.

    Parameters
    ----------
    data : array_like, shape (M, N) or (N,)
        Raw pixel values in ADU, as they would be read from the file (overscan included).
    profile : InstrumentProfile
        The instrument.
    header : astropy.io.fits.Header, optional
        Header to attach (copied); an empty one by default.
    path : str or Path, optional
        Name used in error messages and kept as :attr:`Frame.path`.
    bias : ndarray, optional
        Master bias in ADU (see :func:`read_frame`).
    bad_pixels : ndarray of bool, optional
        Known bad pixels (see :func:`read_frame`).

    Returns
    -------
    Frame
    """
    header = fits.Header() if header is None else header.copy()
    raw = np.asarray(data)
    if raw.dtype.kind not in "uif":
        msg = f"{path or '<array>'}: image data of type {raw.dtype} is not numeric"
        raise FrameError(msg)
    return _build_frame(raw, header, profile, path=None if path is None else Path(path), bias=bias,
                        bad_pixels=bad_pixels)


# ------------------------------------------------------------------------------------------------
# Reading
# ------------------------------------------------------------------------------------------------

@contextmanager
def open_fits(path: str | Path, *, content: bytes | None = None) -> Iterator[fits.HDUList]:
    """Open a FITS file read-only (every HDU header scanned, no memory mapping).

    Parameters
    ----------
    path : str or Path
        The file; named in every error.
    content : bytes, optional
        The file's bytes when the caller has read them already (they are parsed instead of
        opening ``path`` again).

    Yields
    ------
    astropy.io.fits.HDUList

    Raises
    ------
    FrameError
        Naming the file: not FITS, truncated or corrupt, unreadable (also for such errors raised
        while the caller reads the HDUs inside the ``with`` block).
    """
    path = Path(path)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with (io.BytesIO(content) if content is not None else path.open("rb")) as fh, \
                    fits.open(fh, mode="readonly", memmap=False, lazy_load_hdus=False) as hdul:
                _raise_if_truncated(path, caught)
                yield hdul
                _raise_if_truncated(path, caught)
        except FrameError:
            raise
        except (OSError, ValueError, TypeError, fits.VerifyError) as exc:
            empty = (len(content) if content is not None else path.stat().st_size) == 0
            if "SIMPLE" in str(exc) or empty or "Empty or corrupt" in str(exc):
                msg = f"{path}: not a FITS file (or its header is truncated or corrupt): {exc}"
            else:
                msg = f"{path}: cannot read FITS file: {exc}"
            raise FrameError(msg) from None
    for w in caught:
        _log.debug("%s: %s", path, w.message)


def image_header(hdul: fits.HDUList, index: int) -> fits.Header:
    """Header of HDU ``index`` (a copy) with the primary header's non-structural cards it lacks."""
    header = hdul[index].header.copy()
    if index != 0:
        for card in hdul[0].header.cards:
            if card.keyword not in _STRUCTURAL and card.keyword not in header:
                header.append(card)
    return header


def image_data(path: str | Path, hdul: fits.HDUList, index: int) -> np.ndarray:
    """The data of image HDU ``index`` (a copy, scaled by ``BZERO``/``BSCALE``)."""
    try:
        return np.array(hdul[index].data, copy=True)
    except (ValueError, OSError, TypeError) as exc:
        msg = (f"{path}: cannot read the image data of HDU {index} "
               f"(truncated or corrupt file?): {exc}")
        raise FrameError(msg) from None


def read_image(path: str | Path, hdu: int | str | None = None, *,
               content: bytes | None = None) -> tuple[np.ndarray, fits.Header]:
    """The image of a FITS file as stored: data and header, nothing subtracted or converted.

    The one way wavecal reads FITS images (:func:`read_frame` builds on it).

    Parameters
    ----------
    path : str or Path
        The file (opened read-only, closed before returning, never modified).
    hdu : int or str, optional
        HDU (index or EXTNAME); default the first HDU holding 1-D or 2-D image data.
    content : bytes, optional
        The file's bytes, when already read.

    Returns
    -------
    data : ndarray
        A copy, scaled to physical values by astropy.
    header : astropy.io.fits.Header
        The image HDU's header with the primary header's non-structural cards it lacks.

    Raises
    ------
    FrameError
        Naming the file: not FITS, truncated or corrupt, or no such image HDU.
    """
    with open_fits(path, content=content) as hdul:
        index = image_hdu_index(Path(path), hdul, hdu)
        return image_data(path, hdul, index), image_header(hdul, index)


def _raise_if_truncated(path: Path, caught: list[warnings.WarningMessage]) -> None:
    for w in caught:
        if "truncated" in str(w.message).lower():
            msg = f"{path}: the FITS file is truncated ({w.message})"
            raise FrameError(msg)


def image_hdu_index(path: Path, hdul: fits.HDUList, which: int | str | None) -> int:
    """Index of the HDU holding the image: ``which`` (index or EXTNAME) if given, checked to hold
    1-D or 2-D image data, else the first HDU that does.

    Raises
    ------
    FrameError
        Naming the file, when there is no such HDU or it holds no image.
    """
    if which is not None:
        try:
            index = hdul.index_of(which)
            if not 0 <= index < len(hdul):
                raise IndexError(index)
        except (KeyError, IndexError):
            msg = f"{path}: has no HDU {which!r} (HDUs: {[h.name for h in hdul]})"
            raise FrameError(msg) from None
        if not _is_image(hdul[index]):
            msg = f"{path}: HDU {which!r} holds no image data"
            raise FrameError(msg)
        return index
    for index, candidate in enumerate(hdul):
        if _is_image(candidate):
            return index
    msg = f"{path}: no HDU holds 1-D or 2-D image data"
    raise FrameError(msg)


def _is_image(hdu: Any) -> bool:
    if not isinstance(hdu, (fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU)):
        return False
    shape = tuple(int(n) for n in hdu.shape) if hdu.shape else ()
    while len(shape) > 2 and shape[0] == 1:
        shape = shape[1:]
    return len(shape) in (1, 2) and all(n > 0 for n in shape)


# ------------------------------------------------------------------------------------------------
# Reduction to electrons
# ------------------------------------------------------------------------------------------------

def _build_frame(raw: np.ndarray, header: fits.Header, profile: InstrumentProfile, *,
                 path: Path | None, bias: np.ndarray | None,
                 bad_pixels: np.ndarray | None = None, saturated: np.ndarray | None = None,
                 first_pixel: int = 0) -> Frame:
    where = str(path) if path is not None else "<array>"
    while raw.ndim > 2 and raw.shape[0] == 1:
        raw = raw[0]
    if raw.ndim not in (1, 2) or raw.size == 0:
        msg = f"{where}: image data of shape {raw.shape} is neither 1-D nor 2-D"
        raise FrameError(msg)
    det = profile.detector
    binning = profile.binning_from_header(header, path=path)
    adu = raw.astype(np.float32, copy=False)
    finite = np.isfinite(adu)
    if not finite.any():
        msg = f"{where}: all pixel values are NaN or infinite"
        raise FrameError(msg)
    if raw.ndim == 1:
        adu, finite, saturated, origin, binning = _one_dimensional(adu, finite, profile, binning, bias,
                                                                   where)
        origin = (origin[0], origin[1] + first_pixel)
        disp_axis = 1
    else:
        saturated = finite & (adu >= det.saturation_level_adu if saturated is None else saturated)
        trim, overscan = _regions(adu.shape, det, binning, where)
        if bias is not None:
            level: np.ndarray | float = _cutout(np.asarray(bias, dtype=np.float32), adu.shape,
                                                trim, where, "bias frame")
        elif overscan is not None:
            level = _overscan_level(adu, finite, overscan, trim, where)
        else:
            level = np.float32(det.bias_adu)
        cut = (slice(trim[0], trim[1]), slice(trim[2], trim[3]))
        adu = adu[cut] - level
        finite, saturated = finite[cut], saturated[cut]
        if bad_pixels is not None:
            finite = finite & ~_cutout(np.asarray(bad_pixels, dtype=bool), raw.shape, trim, where,
                                       "bad-pixel mask")
        origin = (trim[0], trim[2])
        disp_axis = det.dispersion_axis
    if not finite.any():
        msg = f"{where}: all pixel values in the trim region are NaN or infinite"
        raise FrameError(msg)
    electrons = np.where(finite, adu * np.float32(det.gain_e_per_adu), np.float32(0.0)).astype(np.float32)
    variance = np.maximum(electrons, np.float32(0.0)) + np.float32(det.read_noise_e ** 2)
    bad = ~finite | saturated
    for array in (electrons, variance, bad, saturated):
        array.setflags(write=False)
    return Frame(path=path, data=electrons, variance=variance, bad=bad,
                 saturated=saturated, header=header, dispersion_axis=disp_axis,
                 origin=(int(origin[0]), int(origin[1])), binning=(int(binning[0]), int(binning[1])))


def _one_dimensional(adu: np.ndarray, finite: np.ndarray, profile: InstrumentProfile,
                     binning: tuple[int, int], bias: np.ndarray | None, where: str):
    """An extracted spectrum as a one-row frame (see :func:`read_frame`, Notes)."""
    det = profile.detector
    b = int(binning[det.dispersion_axis])
    start, stop = det.dispersion_range
    full = det.shape[det.dispersion_axis] // b
    lo, hi = (math.ceil(start / b), stop // b) if adu.size == full else (0, adu.size)
    if bias is not None:
        level = np.asarray(bias, dtype=np.float32).ravel()
        if level.size == adu.size:
            level = level[lo:hi]
        elif level.size != hi - lo:
            msg = (f"{where}: bias of size {level.size} matches neither the spectrum ({adu.size}) "
                   "nor its trimmed length")
            raise FrameError(msg)
        adu = adu[lo:hi] - level
    else:
        adu = adu[lo:hi]
    finite = finite[lo:hi][np.newaxis, :]
    adu = adu[np.newaxis, :]
    saturated = np.zeros(adu.shape, dtype=bool)
    frame_binning = (int(binning[1 - det.dispersion_axis]), b)
    return adu, finite, saturated, (0, lo), frame_binning


def _scale_region(region: tuple[int, int, int, int], binning: tuple[int, int]) -> tuple[int, int, int, int]:
    """Unbinned region -> whole binned pixels inside it."""
    b0, b1 = binning
    r0, r1, c0, c1 = region
    return (math.ceil(r0 / b0), r1 // b0, math.ceil(c0 / b1), c1 // b1)


def _regions(shape: tuple[int, ...], det: Any, binning: tuple[int, int], where: str):
    """Trim and overscan regions in pixels as read, checked against the frame shape."""
    rows, cols = shape
    trim = (0, rows, 0, cols) if det.trim is None else _scale_region(det.trim, binning)
    overscan = None if det.overscan is None else _scale_region(det.overscan, binning)
    for name, region in (("trim", trim), ("overscan", overscan)):
        if region is None:
            continue
        if region[1] > rows or region[3] > cols or region[1] <= region[0] or region[3] <= region[2]:
            msg = (f"{where}: frame shape {rows}x{cols} (binning {binning[0]}x{binning[1]}) does not "
                   f"contain the profile's {name} region rows {region[0]}:{region[1]}, columns "
                   f"{region[2]}:{region[3]} (profile detector shape {det.shape[0]}x{det.shape[1]} "
                   f"unbinned); wrong profile or binning?")
            raise FrameError(msg)
    return trim, overscan


def _cutout(array: np.ndarray, shape: tuple[int, ...], trim: tuple[int, int, int, int],
            where: str, what: str) -> np.ndarray:
    """``array`` (of the raw or of the trimmed shape) cut to the trim region."""
    if array.shape == tuple(shape):
        return array[trim[0]:trim[1], trim[2]:trim[3]]
    if array.shape == (trim[1] - trim[0], trim[3] - trim[2]):
        return array
    msg = (f"{where}: {what} of shape {array.shape} matches neither the raw frame {tuple(shape)} "
           f"nor its trimmed shape {(trim[1] - trim[0], trim[3] - trim[2])}")
    raise FrameError(msg)


def _overscan_level(adu: np.ndarray, finite: np.ndarray, overscan: tuple[int, int, int, int],
                    trim: tuple[int, int, int, int], where: str) -> np.ndarray | np.float32:
    """Robust overscan level: per line along the strip when it runs beside the data, else scalar.

    A strip of columns covering the trimmed rows gives one level per row (median across the
    strip, then a low-order robust fit along the strip); a strip of rows covering the trimmed columns
    gives one level per column. Otherwise the median of the whole region is used. Non-finite
    overscan pixels are replaced by the median of the finite ones.
    """
    r0, r1, c0, c1 = overscan
    strip = adu[r0:r1, c0:c1]
    ok = finite[r0:r1, c0:c1]
    if not ok.any():
        msg = f"{where}: the overscan region holds no finite values"
        raise FrameError(msg)
    overall = np.median(strip[ok])
    if not ok.all():
        strip = np.where(ok, strip, overall)
    covers_rows = r0 <= trim[0] and r1 >= trim[1]
    covers_cols = c0 <= trim[2] and c1 >= trim[3]
    if covers_rows and (c1 - c0) >= 3 and not (covers_cols and (r1 - r0) < (c1 - c0)):
        per_row = _smooth(np.median(strip, axis=1))
        return per_row[trim[0] - r0:trim[1] - r0, np.newaxis].astype(np.float32)
    if covers_cols and (r1 - r0) >= 3:
        per_col = _smooth(np.median(strip, axis=0))
        return per_col[np.newaxis, trim[2] - c0:trim[3] - c0].astype(np.float32)
    return np.float32(overall)


def _smooth(levels: np.ndarray) -> np.ndarray:
    """Low-order robust fit to the per-line overscan levels.

    A fit (Legendre, degree 3, three passes rejecting lines beyond 4 robust sigma) follows a
    slow drift of the bias along the read-out without copying the per-line noise of the strip
    into the data: a running median over a few lines would add correlated, line-like bumps
    along the dispersion when the strip runs parallel to it (common practice: fit the overscan
    with a low-order function).
    """
    n = levels.size
    if n < 8:
        return np.full(n, np.median(levels))
    u = np.linspace(-1.0, 1.0, n)
    keep = np.ones(n, bool)
    for _ in range(3):
        coeffs = np.polynomial.legendre.legfit(u[keep], levels[keep], _OVERSCAN_DEGREE)
        fit = np.polynomial.legendre.legval(u, coeffs)
        resid = levels - fit
        scale = 1.4826 * np.median(np.abs(resid[keep])) or 1.0
        keep = np.abs(resid) <= 4.0 * scale
    return fit
