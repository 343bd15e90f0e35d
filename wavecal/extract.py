"""Collapse a frame across the slit into a one-dimensional spectrum.

The sum over the rows of the slit is made robust against cosmic rays and hot pixels by
comparing every pixel with a robust local value from its neighbours *along the slit* at the
same dispersion position (a median of medians over 15 rows, see :func:`_running_median`). A
pixel deviating from that local value by more than
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
    Automatic row choice: every row is cleaned of outliers first (see the module docstring);
    each row's signal is then measured on the columns of the lines (where the spectrum summed
    over all rows is 5 sigma above its median; at most the top 3 % of columns), less the row's
    median level, and smoothed with a running median over five rows; the rows used are the
    contiguous run around the brightest one whose smoothed signal is at least ``row_fraction``
    of the way from the faintest rows' level to the brightest (a uniform pedestal such as scattered light does not matter).
    If that slit profile is not 5 sigma above its noise, all rows are used.

    A rejected pixel (see the module docstring) contributes the robust local value from its
    neighbours along the slit and that value's noise-model variance. Saturated pixels are kept
    with their (lower-bound) values and mark the spectrum pixel as saturated.
    """
    if clip <= 0:
        msg = f"clip must be positive, got {clip}"
        raise ValueError(msg)
    data, variance, bad, saturated = (_spatial_first(a, frame.dispersion_axis)
                                      for a in (frame.data, frame.variance, frame.bad, frame.saturated))
    n_spatial, n_disp = data.shape
    if rows is None:
        lo, hi = 0, n_spatial
    else:
        lo, hi = int(rows[0]), int(rows[1])
        if not 0 <= lo < hi <= n_spatial:
            msg = f"rows {rows} must satisfy 0 <= start < stop <= {n_spatial}"
            raise ValueError(msg)
    masked = bad[lo:hi] & ~saturated[lo:hi]
    clean = np.empty((hi - lo, n_disp), dtype=np.float32)
    clean_var = np.empty((hi - lo, n_disp), dtype=np.float32)
    for c0 in range(0, n_disp, _BLOCK):
        cols = slice(c0, min(c0 + _BLOCK, n_disp))
        clean[:, cols], clean_var[:, cols] = _clean(data[lo:hi, cols], variance[lo:hi, cols],
                                                    masked[:, cols], clip)
    start, stop = _illuminated_rows(clean, clean_var, row_fraction) if rows is None else (0, hi - lo)
    used = slice(start, stop)
    offset = frame.origin[frame.dispersion_axis]
    return Spectrum(
        x=np.arange(n_disp, dtype=np.float64) + offset,
        flux=clean[used].sum(axis=0, dtype=np.float64),
        variance=clean_var[used].sum(axis=0, dtype=np.float64),
        saturated=saturated[lo:hi][used].any(axis=0),
        bad=masked[used].mean(axis=0) > _BAD_FRACTION,
        n_rows=stop - start,
        rows=(lo + start, lo + stop),
        binning=int(frame.binning[frame.dispersion_axis]),
    )


def _spatial_first(array: np.ndarray, dispersion_axis: int) -> np.ndarray:
    """View with the slit along axis 0 and the dispersion along axis 1."""
    return array if dispersion_axis == 1 else array.T


def _illuminated_rows(data: np.ndarray, variance: np.ndarray, fraction: float) -> tuple[int, int]:
    """Contiguous run of rows around the brightest one, judged on the lines' columns.

    The slit profile is measured where the light is: on the columns where the spectrum summed
    over all rows stands 5 sigma above its median (at most the top 3 % of columns), after
    removing each row's own median level, smoothed over five rows. A row belongs to the slit
    when its smoothed profile value is at least ``fraction`` of the way from the faintest rows
    to the brightest. When the profile is
    not clearly above its noise (5 sigma), all rows are used.
    """
    n_rows, n_cols = data.shape
    if n_rows < 5:
        return 0, n_rows
    collapsed = data.sum(axis=0, dtype=np.float64)
    excess = (collapsed - np.median(collapsed)) / np.sqrt(variance.sum(axis=0, dtype=np.float64) + 1e-12)
    n_top = max(int(0.03 * n_cols), 3)
    line_cols = np.flatnonzero(excess > 5.0)
    if line_cols.size < 3 or line_cols.size > n_top:
        line_cols = np.argpartition(excess, -n_top)[-n_top:]
    level = np.median(data, axis=1)
    profile = data[:, line_cols].sum(axis=1, dtype=np.float64) - line_cols.size * level
    noise = np.sqrt(variance[:, line_cols].sum(axis=1, dtype=np.float64))
    smooth = median_filter(profile, size=5, mode="reflect")
    peak = int(np.argmax(smooth))
    floor = float(np.median(np.sort(smooth)[: max(n_rows // 10, 1)]))
    if smooth[peak] - floor < 5.0 * float(np.median(noise)):
        return 0, n_rows
    below = np.flatnonzero(smooth < floor + fraction * (smooth[peak] - floor))
    start = int(below[below < peak].max()) + 1 if (below < peak).any() else 0
    stop = int(below[below > peak].min()) if (below > peak).any() else n_rows
    return start, stop


def _median3(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    return np.maximum(np.minimum(a, b), np.minimum(np.maximum(a, b), c))


def _median5(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray, e: np.ndarray) -> np.ndarray:
    low = np.maximum(np.minimum(a, b), np.minimum(c, d))
    high = np.minimum(np.maximum(a, b), np.maximum(c, d))
    return _median3(e, low, high)


def _alternating(n: int, start: int = 0) -> np.ndarray:
    """Column of ``n`` values alternately huge and negative-huge (neutral in a median)."""
    return np.where((np.arange(start, start + n) % 2 == 0), _HUGE, -_HUGE).astype(np.float32)[:, None]


def _running_median(block: np.ndarray, groups: int = 3) -> np.ndarray:
    """Robust local value of each pixel from its neighbours along axis 0 (the slit).

    The median of ``groups`` (3 or 5) medians of five consecutive pixels, centred on the pixel
    and on every fifth row either side (15 or 25 rows in all). A cosmic-ray track along the
    slit spoils a group only when it covers most of it: with three groups a track of up to five
    pixels cannot pull the result, with five groups one of up to ten. Slits shorter than the
    window use fewer groups, or the median of five or three neighbouring pixels. Beyond the
    ends the block is padded with alternately huge and negative-huge values, which leave the
    medians to the real pixels; an outer group lying wholly beyond an end is replaced by the
    lower of the central group and its mirror group on the other side (so that neither a
    cosmic ray at the end nor a bright neighbour of a dark end row is taken as the local value).
    """
    n, m = block.shape
    groups = 5 if groups == 5 and n >= 25 else 3 if n >= 15 else 1
    reach = 5 * (groups // 2)
    pad = reach + 2 if groups > 1 else (2 if n >= 5 else 1)
    p = np.empty((n + 2 * pad, m), dtype=np.float32)
    p[pad:pad + n] = block
    p[:pad] = _alternating(pad)
    p[pad + n:] = _alternating(pad, pad + n)
    if groups == 1:
        if n >= 5:
            return _median5(p[0:n], p[1:n + 1], p[2:n + 2], p[3:n + 3], p[4:n + 4])
        return _median3(p[0:n], p[1:n + 1], p[2:n + 2])
    size = n + 2 * reach
    med = _median5(p[0:size], p[1:size + 1], p[2:size + 2], p[3:size + 3], p[4:size + 4])
    # med[reach + r + o] is the median of rows r + o - 2 .. r + o + 2
    shifted = {o: med[reach + o:reach + o + n].copy() for o in range(-reach, reach + 1, 5)}
    centre = shifted[0]
    for o in range(5, reach + 1, 5):
        low, high = max(o - 2, 0), n - o + 2  # rows whose group at -o (+o) lies beyond the end
        shifted[-o][:low] = np.minimum(centre[:low], shifted[o][:low])
        shifted[o][high:] = np.minimum(centre[high:], shifted[-o][high:])
    if groups == 3:
        return _median3(shifted[-5], shifted[0], shifted[5])
    return _median5(shifted[-10], shifted[-5], shifted[0], shifted[5], shifted[10])


def _clean(data: np.ndarray, variance: np.ndarray, masked: np.ndarray,
           clip: float) -> tuple[np.ndarray, np.ndarray]:
    """One block of columns with outliers replaced by their local value; returns the cleaned
    values and variances.

    Rejection is repeated (at most twice more) on the columns where it found something, with
    the pixels already rejected left out and a window of 25 rather than 15 rows: the rest of a
    cosmic-ray track longer than the first window tolerates is caught once its middle is gone.
    """
    n = data.shape[0]
    if n < 3:
        return data, variance
    clean, clean_var, out = _reject(data, variance, masked, clip)
    cols = np.flatnonzero((out & ~masked).any(axis=0))
    for _ in range(2):
        if cols.size == 0:
            break
        d, v, o = data[:, cols], variance[:, cols], out[:, cols]
        clean[:, cols], clean_var[:, cols], again = _reject(d, v, o, clip, groups=5)
        changed = (again & ~o).any(axis=0)
        out[:, cols] = again
        cols = cols[changed]
    return clean, clean_var


def _reject(data: np.ndarray, variance: np.ndarray, left_out: np.ndarray, clip: float, *,
            groups: int = 3) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One rejection pass: cleaned values, their variances and the rejected pixels.

    ``left_out`` pixels are excluded from the local medians and always rejected.
    """
    n = data.shape[0]
    if left_out.any():
        local = _running_median(np.where(left_out, _alternating(n), data), groups)
        local = _fill_unreliable(local, data, left_out)
    else:
        local = _running_median(data, groups)
    zero = np.float32(0.0)
    local_var = np.maximum(local, zero) + (variance - np.maximum(data, zero))
    deviation = data - local
    reject = (deviation * deviation > np.float32(clip * clip) * local_var) | left_out
    return np.where(reject, local, data), np.where(reject, local_var, variance), reject


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
