"""Collapse a frame across the slit into a one-dimensional spectrum.

The sum over the rows of the slit is made robust against cosmic rays and hot pixels by
comparing every pixel with a robust local value from its neighbours *along the slit* at the
same dispersion position (a median of medians over 15 rows, see :func:`_running_median`). A pixel deviating from that local value by more than
``clip`` standard deviations of the noise model, or marked bad (non-finite) in the frame, is
replaced by the local value. A local rather than a whole-column median keeps lines that are
tilted or curved across the slit intact: their flux changes slowly along the slit, and the
median of a monotonic sequence is its central value.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter

from .frames import Frame

__all__ = ["Spectrum", "extract_spectrum"]

#: Columns processed at once (keeps the temporaries in cache).
_BLOCK = 512
#: A spectrum pixel is bad when more than this fraction of its rows are bad (non-finite).
_BAD_FRACTION = 0.25
#: Stand-in value for masked pixels in the running medians.
_HUGE = np.float32(1e30)


@dataclass(frozen=True, eq=False)
class Spectrum:
    """A one-dimensional spectrum with its noise and masks.

    Attributes
    ----------
    x : ndarray of float64, shape (N,)
        0-based pixel coordinate along the dispersion axis of the raw frame as read (binned
        pixels): the index plus the frame origin.
    flux : ndarray of float64, shape (N,)
        Electrons per pixel, summed over the slit rows used.
    variance : ndarray of float64, shape (N,)
        Variance of ``flux`` from the noise model (electrons²).
    saturated : ndarray of bool, shape (N,)
        Any contributing pixel saturated.
    bad : ndarray of bool, shape (N,)
        The value is unreliable: more than a quarter of the contributing pixels were bad.
    n_rows : int
        Number of slit rows summed.
    rows : tuple of int
        ``(start, stop)`` indices of the rows used along the frame's spatial axis.
    binning : int
        Binning factor along the dispersion axis.
    """

    x: np.ndarray
    flux: np.ndarray
    variance: np.ndarray
    saturated: np.ndarray
    bad: np.ndarray
    n_rows: int
    rows: tuple[int, int]
    binning: int = 1

    def __len__(self) -> int:
        return int(self.flux.size)


def extract_spectrum(frame: Frame, *, rows: tuple[int, int] | None = None, clip: float = 5.0,
                     row_fraction: float = 0.3) -> Spectrum:
    """Sum a frame over the slit, rejecting cosmic rays and hot pixels.

    Parameters
    ----------
    frame : Frame
        The frame (any dispersion axis).
    rows : tuple of int, optional
        ``(start, stop)`` of the slit rows to sum, as indices along the frame's spatial axis.
        Default: chosen automatically (see Notes).
    clip : float
        Rejection threshold in standard deviations of the noise model.
    row_fraction : float
        For the automatic choice: fraction of the brightest row's signal a row must reach.

    Returns
    -------
    Spectrum

    Notes
    -----
    Automatic row choice: each row's total signal (sum along the dispersion axis) is smoothed
    with a running median over five rows, so that a cosmic ray cannot make a dark row look
    bright; the rows used are the contiguous run around the brightest one whose smoothed signal
    is at least ``row_fraction`` of the way from the faintest row's signal to the brightest's
    (a uniform pedestal such as scattered light does not matter). If no row has positive
    signal, or all rows are equal, all rows are used.

    A rejected pixel (see the module docstring) contributes the robust local value from its
    neighbours along the slit and that value's noise-model variance. Saturated pixels are kept
    with their (lower-bound) values and mark the spectrum pixel as saturated.
    """
    if clip <= 0:
        msg = f"clip must be positive, got {clip}"
        raise ValueError(msg)
    data, variance, bad, saturated = (_spatial_first(a, frame.dispersion_axis)
                                      for a in (frame.data, frame.variance, frame.bad, frame.saturated))
    n_spatial = data.shape[0]
    if rows is None:
        start, stop = _illuminated_rows(data, row_fraction)
    else:
        start, stop = int(rows[0]), int(rows[1])
        if not 0 <= start < stop <= n_spatial:
            msg = f"rows {rows} must satisfy 0 <= start < stop <= {n_spatial}"
            raise ValueError(msg)
    masked = bad[start:stop] & ~saturated[start:stop]
    n_disp = data.shape[1]
    flux = np.empty(n_disp)
    var = np.empty(n_disp)
    for c0 in range(0, n_disp, _BLOCK):
        cols = slice(c0, min(c0 + _BLOCK, n_disp))
        flux[cols], var[cols] = _collapse(data[start:stop, cols], variance[start:stop, cols],
                                          masked[:, cols], clip)
    offset = frame.origin[frame.dispersion_axis]
    return Spectrum(
        x=np.arange(n_disp, dtype=np.float64) + offset,
        flux=flux,
        variance=var,
        saturated=saturated[start:stop].any(axis=0),
        bad=masked.mean(axis=0) > _BAD_FRACTION,
        n_rows=stop - start,
        rows=(start, stop),
        binning=int(frame.binning[frame.dispersion_axis]),
    )


def _spatial_first(array: np.ndarray, dispersion_axis: int) -> np.ndarray:
    """View with the slit along axis 0 and the dispersion along axis 1."""
    return array if dispersion_axis == 1 else array.T


def _illuminated_rows(data: np.ndarray, fraction: float) -> tuple[int, int]:
    """Contiguous run of rows around the brightest one whose signal is at least ``fraction`` of
    the way from the faintest row's to the brightest's."""
    signal = data.sum(axis=1, dtype=np.float64)
    if signal.size >= 5:
        signal = median_filter(signal, size=5, mode="nearest")
    peak = int(np.argmax(signal))
    floor = float(signal.min())
    if signal[peak] <= 0 or signal[peak] <= floor:
        return 0, data.shape[0]
    below = np.flatnonzero(signal < floor + fraction * (signal[peak] - floor))
    start = int(below[below < peak].max()) + 1 if (below < peak).any() else 0
    stop = int(below[below > peak].min()) if (below > peak).any() else data.shape[0]
    return start, stop


def _median3(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    return np.maximum(np.minimum(a, b), np.minimum(np.maximum(a, b), c))


def _median5(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray, e: np.ndarray) -> np.ndarray:
    low = np.maximum(np.minimum(a, b), np.minimum(c, d))
    high = np.minimum(np.maximum(a, b), np.maximum(c, d))
    return _median3(e, low, high)


def _running_median(block: np.ndarray) -> np.ndarray:
    """Robust local value of each pixel from its neighbours along axis 0 (the slit).

    With at least 15 rows: the median of the three medians of five consecutive pixels centred
    on the pixel and five rows either side (15 pixels in all). A cosmic-ray track of up to five
    pixels along the slit spoils at most one of the three medians, so it cannot pull the
    result. Shorter slits use the median of five, or of three, neighbouring pixels.
    """
    n = block.shape[0]
    if n >= 15:
        p = np.pad(block, ((7, 7), (0, 0)), mode="reflect")
        m = _median5(p[0:n + 10], p[1:n + 11], p[2:n + 12], p[3:n + 13], p[4:n + 14])
        return _median3(m[0:n], m[5:n + 5], m[10:n + 10])
    if n >= 5:
        p = np.pad(block, ((2, 2), (0, 0)), mode="reflect")
        return _median5(p[0:n], p[1:n + 1], p[2:n + 2], p[3:n + 3], p[4:n + 4])
    p = np.pad(block, ((1, 1), (0, 0)), mode="reflect")
    return _median3(p[0:n], p[1:n + 1], p[2:n + 2])


def _collapse(data: np.ndarray, variance: np.ndarray, masked: np.ndarray,
              clip: float) -> tuple[np.ndarray, np.ndarray]:
    """Robust sum over axis 0 of one block of columns; returns flux and variance."""
    n = data.shape[0]
    if n < 3:
        return data.sum(axis=0, dtype=np.float64), variance.sum(axis=0, dtype=np.float64)
    if masked.any():
        # masked pixels alternately huge and negative-huge: the medians ignore them
        alternate = np.where((np.arange(n) % 2 == 0)[:, None], _HUGE, -_HUGE).astype(np.float32)
        local = _fill_unreliable(_running_median(np.where(masked, alternate, data)), data, masked)
    else:
        local = _running_median(data)
    zero = np.float32(0.0)
    read_var = variance - np.maximum(data, zero)
    local_var = np.maximum(local, zero) + read_var
    deviation = data - local
    reject = (deviation * deviation > np.float32(clip * clip) * local_var) | masked
    flux = np.where(reject, local, data).sum(axis=0, dtype=np.float64)
    var = np.where(reject, local_var, variance).sum(axis=0, dtype=np.float64)
    return flux, var


def _fill_unreliable(local: np.ndarray, data: np.ndarray, masked: np.ndarray) -> np.ndarray:
    """Where too many masked pixels spoiled the local value, use the median of the column's good
    pixels (0 for a column with none)."""
    broken = np.abs(local) >= _HUGE / 2
    if not broken.any():
        return local
    cols = np.flatnonzero(broken.any(axis=0))
    good = ~masked[:, cols]
    level = np.zeros(cols.size, dtype=np.float32)
    some = good.any(axis=0)
    if some.any():
        level[some] = np.nanmedian(np.where(good[:, some], data[:, cols[some]], np.nan), axis=0)
    local[:, cols] = np.where(broken[:, cols], level[None, :], local[:, cols])
    return local
