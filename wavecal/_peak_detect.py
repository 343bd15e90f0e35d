"""Steps 0-3 of :func:`wavecal.peaks.find_peaks`: the spectrum as the fitting code sees it,
spikes, the starting line width, the continuum and the matched-filter detection (see
:mod:`wavecal.peaks` for the method).
"""
from __future__ import annotations

import math

import numpy as np
from scipy.ndimage import maximum_filter1d, median_filter, percentile_filter, uniform_filter1d
from scipy.special import ndtr

from ._line_fit import FWHM_PER_SIGMA

__all__ = ["SpectrumData", "check_inputs", "detect_lines", "estimate_continuum", "find_spikes", "starting_fwhm"]


class SpectrumData:
    """The spectrum as the fitting code sees it."""

    def __init__(self, flux: np.ndarray, variance: np.ndarray, usable: np.ndarray,
                 saturated: np.ndarray) -> None:
        self.n = flux.size
        self.usable = usable
        self.saturated = saturated
        fill = float(np.median(variance[usable]))
        self.flux = np.where(usable | saturated, np.nan_to_num(flux), 0.0)
        self.variance = np.where(usable, variance, fill)
        positive = variance[usable & (variance > 0)]
        floor = 0.01 * float(np.median(positive)) if positive.size else 1.0
        #: The part of the variance not proportional to the signal (read noise etc.).
        self.read_var = np.maximum(self.variance - np.maximum(self.flux, 0.0), 0.0)
        self.floor = max(floor, 1e-300)
        #: Pixels the fit may use: usable, not saturated nor next to a saturated pixel.
        near_sat = saturated.copy()
        near_sat[1:] |= saturated[:-1]
        near_sat[:-1] |= saturated[1:]
        self.fit_ok = usable & ~near_sat


def check_inputs(flux, variance, x, min_snr, fwhm_guess, blend_separation) -> None:
    if flux.ndim != 1 or flux.size < 5:
        msg = f"spectrum must be 1-D with at least 5 pixels, got shape {flux.shape}"
        raise ValueError(msg)
    if variance.shape != flux.shape or x.shape != flux.shape:
        msg = "spectrum x, flux and variance must have the same shape"
        raise ValueError(msg)
    if not np.allclose(np.diff(x), 1.0):
        msg = "spectrum x must advance by exactly one per pixel"
        raise ValueError(msg)
    if not min_snr > 0:
        msg = f"min_snr must be positive, got {min_snr}"
        raise ValueError(msg)
    if fwhm_guess is not None and not (np.isfinite(fwhm_guess) and fwhm_guess > 0):
        msg = f"fwhm_guess must be a positive number, got {fwhm_guess}"
        raise ValueError(msg)
    if not blend_separation >= 0:
        msg = f"blend_separation must be non-negative, got {blend_separation}"
        raise ValueError(msg)


# ------------------------------------------------------------------------------------------------
# Continuum, width estimate, detection
# ------------------------------------------------------------------------------------------------

def estimate_continuum(data: SpectrumData, fwhm: float) -> np.ndarray:
    """Robust continuum under the lines.

    A running 20th percentile gives a first, low estimate. Then, three times: pixels more than
    3 sigma above the estimate, grown by one FWHM on each side, are taken as line pixels, and a
    running median of the other pixels is computed (line pixels are replaced alternately by a
    huge positive and negative value, which leaves the median of the rest unchanged). The
    result is smoothed with a running mean of the same width (ten FWHM, at least 31 pixels).
    """
    width = _window(max(10.0 * fwhm, 31.0), data.n)
    sigma = np.sqrt(data.variance)
    grow = 2 * max(1, int(round(fwhm))) + 1
    index = np.arange(data.n)
    invalid = ~(data.usable | data.saturated)
    values = data.flux
    if invalid.any():
        values = np.interp(index, index[~invalid], values[~invalid])
    base = percentile_filter(values, 20, size=width, mode="reflect")
    huge = 1e30 * np.where(index % 2 == 0, 1.0, -1.0)
    for _ in range(3):
        line = maximum_filter1d((values - base > 3.0 * sigma).astype(np.uint8), size=grow).astype(bool)
        line |= invalid
        masked_median = median_filter(np.where(line, huge, values), size=width, mode="reflect")
        reliable = np.abs(masked_median) < 1e29
        if not reliable.any():
            break
        base = np.interp(index, index[reliable], masked_median[reliable])
    return uniform_filter1d(base, size=width, mode="nearest")


def _window(value: float, n: int) -> int:
    """Odd filter size near ``value`` (at least 11), no longer than the spectrum."""
    size = max(11, int(round(value)))
    size = size if size % 2 else size + 1
    return min(size, n if n % 2 else n - 1)


def starting_fwhm(data: SpectrumData, min_snr: float) -> float:
    """Median half-maximum width of the brightest (S/N > 10 in three pixels) isolated maxima
    (NaN if none)."""
    base = median_filter(data.flux, size=_window(101, data.n), mode="nearest")
    r = data.flux - base
    smooth = uniform_filter1d(r, size=3, mode="nearest")
    snr = smooth * np.sqrt(3.0) / np.sqrt(data.variance)
    is_max = (smooth == maximum_filter1d(smooth, size=7)) & (snr > max(min_snr, 10.0))
    is_max &= data.usable & ~maximum_filter1d(data.saturated.astype(np.uint8), size=7).astype(bool)
    idx = np.flatnonzero(is_max)
    if idx.size == 0:
        return math.nan
    idx = idx[np.argsort(r[idx])[::-1][:40]]
    widths = []
    for i in idx:
        if r[i] <= 0:
            continue
        half = r[i] / 2.0
        left = _half_crossing(r, i, half, -1)
        right = _half_crossing(r, i, half, +1)
        if left is not None and right is not None:
            widths.append(right - left)
    if not widths:
        return math.nan
    return float(max(np.median(widths), 1.0))


def _half_crossing(r: np.ndarray, i: int, half: float, step: int) -> float | None:
    j = i
    for _ in range(60):
        k = j + step
        if k < 0 or k >= r.size:
            return None
        if r[k] > r[j] * 1.05 and r[k] > half:  # rising again before half maximum: not isolated
            return None
        if r[k] <= half:
            frac = (r[j] - half) / (r[j] - r[k])
            return j + step * frac
        j = k
    return None


def find_spikes(data: SpectrumData, fwhm: float) -> np.ndarray:
    """One- and two-pixel spikes far sharper than any line (cosmic-ray residue, hot pixels).

    A pixel (or pair) is a spike when it exceeds ``1.5 ×`` the mean of its two neighbours (if
    positive) times the centre-to-neighbour ratio of a line half as wide as ``fwhm`` by more
    than 5 sigma, after subtraction of a running 10th percentile over four FWHM (which stays
    below the neighbours of a line even among crowded lines). A line of any width down to half
    the typical one fails this test at every sub-pixel phase.
    """
    sigma = 0.5 * fwhm / FWHM_PER_SIGMA
    pixel = ndtr(np.array([0.5, 1.5, 1.0, 2.0]) / sigma)
    ratio_one = 1.5 * (2.0 * pixel[0] - 1.0) / (pixel[1] - pixel[0])
    ratio_two = 1.5 * (pixel[2] - 0.5) / (pixel[3] - pixel[2])
    size = 2 * int(math.ceil(2.0 * fwhm)) + 1
    y = data.flux - percentile_filter(data.flux, 10, size=min(size, data.n), mode="nearest")
    y = np.where(data.usable & ~data.saturated, y, np.nan)
    v = data.variance
    spikes = np.zeros(data.n, bool)
    with np.errstate(invalid="ignore"):
        excess = y[1:-1] - ratio_one * np.maximum(0.5 * (y[:-2] + y[2:]), 0.0)
        noise = np.sqrt(v[1:-1] + ratio_one ** 2 * 0.25 * (v[:-2] + v[2:]))
        spikes[1:-1] |= excess > 5.0 * noise
        pair = 0.5 * (y[1:-2] + y[2:-1])
        excess = pair - ratio_two * np.maximum(0.5 * (y[:-3] + y[3:]), 0.0)
        noise = np.sqrt(0.25 * (v[1:-2] + v[2:-1]) + ratio_two ** 2 * 0.25 * (v[:-3] + v[3:]))
        two = excess > 5.0 * noise
    spikes[1:-2] |= two
    spikes[2:-1] |= two
    return spikes


def _pixel_gaussian(fwhm: float) -> np.ndarray:
    sigma = fwhm / FWHM_PER_SIGMA
    h = max(1, int(math.ceil(3.0 * sigma)))
    u = np.arange(-h, h + 1, dtype=float)
    k = ndtr((u + 0.5) / sigma) - ndtr((u - 0.5) / sigma)
    return k / k.sum()


def detect_lines(data: SpectrumData, residual: np.ndarray, fwhm: float, min_snr: float, use: np.ndarray, *,
            variance: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Candidate positions (float, index units) and matched-filter flux estimates.

    ``use`` marks the pixels whose residual may be used; the others count as zero. ``variance``
    replaces the spectrum's variance in the signal-to-noise ratio.
    """
    k = _pixel_gaussian(fwhm)
    r = np.where(use, residual, 0.0)
    num = np.correlate(r, k, mode="same")
    den = np.sqrt(np.correlate(data.variance if variance is None else variance, k * k, mode="same"))
    snr = num / den
    size = 2 * int(math.ceil(0.5 * fwhm)) + 1
    is_max = (num == maximum_filter1d(num, size=size, mode="nearest")) & (snr >= min_snr) & (num > 0)
    idx = np.flatnonzero(is_max)
    if idx.size > 1:  # equal values on a plateau: keep the first of each run
        keep = np.concatenate(([True], np.diff(idx) > size // 2))
        idx = idx[keep]
    inner = np.clip(idx, 1, data.n - 2)
    y0, y1, y2 = num[inner - 1], num[inner], num[inner + 1]
    curv = y0 - 2.0 * y1 + y2
    shift = np.where(curv < 0, 0.5 * (y0 - y2) / np.where(curv < 0, curv, -1.0), 0.0)
    pos = inner + np.clip(shift, -0.5, 0.5)
    pos = np.where(idx == inner, pos, idx.astype(float))
    amp = num[idx] / np.sum(k * k)
    return pos, amp

