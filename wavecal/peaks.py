"""Emission-line detection and sub-pixel centring in a one-dimensional spectrum.

Steps of :func:`find_peaks`:

0. **Spikes.** One- and two-pixel spikes much sharper than any line (cosmic-ray residue, hot
   pixels) are masked like bad pixels.
1. **Line width.** Unless given, the typical FWHM is first estimated from the half-maximum
   widths of the brightest isolated maxima; after the fits it is the median fitted FWHM of
   isolated, unsaturated lines (everything is redone once if that differs by more than 25 %).
2. **Continuum.** A running median over ten FWHM (at least 31 pixels) of the pixels that are
   not part of a line (pixels 3 sigma above the current estimate, grown by one FWHM, are left
   out), iterated three times and smoothed with a running mean. This removes scattered light
   and continuum without eating the lines.
3. **Detection.** The continuum-subtracted spectrum is cross-correlated with the line profile
   (a matched filter); its signal-to-noise ratio against the noise model (the spectrum's
   variance) must reach ``min_snr`` at a local maximum.
4. **Centring.** Each line is fitted with a pixel-integrated Gaussian (the difference of the
   normal CDF at the pixel edges, i.e. exact integration over each pixel) plus a local constant
   background by weighted least squares, weights 1/variance. The variance is the noise model
   re-evaluated on the fitted model at every iteration, ``max(model + continuum, 0) +
   (variance - max(flux, 0))`` (Poisson plus the read-noise part of the given variance); at
   convergence this is the Poisson maximum-likelihood estimate, whose scatter reaches the
   Cramér–Rao bound (Winick 1986, J. Opt. Soc. Am. A 3, 1809). Lines closer than
   ``blend_separation`` FWHM are fitted jointly with a shared width and flagged BLENDED. All fits
   of a given number of lines are solved at once by a vectorised Levenberg–Marquardt iteration;
   the wings of neighbouring lines outside a fit are subtracted using their current estimates,
   and the whole pass is repeated once with the updated neighbours.
5. **Second look.** The matched filter is run again on the residual of the fits (allowing 3 %
   of the fitted profile as model error); lines it finds more than one FWHM from every fitted
   line (typically faint lines in the wings of bright ones) are added and everything is fitted
   again.

Uncertainties come from the inverse of the weighted normal matrix at the solution, i.e. from
the noise model alone (not rescaled by the reduced chi-square, which is reported separately).
"""
from __future__ import annotations

import enum
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.ndimage import maximum_filter1d, median_filter, percentile_filter, uniform_filter1d
from scipy.special import ndtr

from .extract import Spectrum

__all__ = ["PeakFlag", "PeakTable", "describe_flags", "find_peaks", "COLUMNS"]

#: FWHM of a Gaussian in units of its standard deviation.
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)
#: Starting FWHM (pixels) when no line is bright enough to measure one (common practice:
#: spectrographs sample the line width with 2-4 pixels).
_DEFAULT_FWHM = 3.0
#: A line is of ODD_WIDTH when its FWHM differs from the expected one by more than this factor.
_ODD_WIDTH_RATIO = 1.25
#: Fraction of the fitted line profile allowed as model error when looking for lines hidden in
#: the residual of the fit (real line profiles are not exactly Gaussian).
_PROFILE_TOLERANCE = 0.03

#: Columns of :attr:`PeakTable.table`.
COLUMNS = ("x", "x_err", "fwhm", "fwhm_err", "flux", "flux_err", "amplitude", "background", "snr",
           "redchi", "flags")


class PeakFlag(enum.IntFlag):
    """Quality bits of a fitted line (column ``flags``; 0 means none)."""

    #: A pixel within one FWHM of the centre is saturated; the centre comes from the wings, its
    #: width is fixed at the typical FWHM and its uncertainty is doubled.
    SATURATED = 1
    #: Fitted jointly with a line closer than ``blend_separation`` FWHM.
    BLENDED = 2
    #: Within ``edge_margin`` of an end of the spectrum or of a bad pixel.
    EDGE = 4
    #: The fit failed, did not converge, gave a non-positive flux or moved the centre by more
    #: than a FWHM from the detection.
    POOR_FIT = 8
    #: FWHM significantly (5 sigma) and strongly (by more than 25 %) unlike the FWHM expected at
    #: its position (a quadratic in position through the isolated lines).
    ODD_WIDTH = 16


def describe_flags(value: int) -> tuple[str, ...]:
    """Names of the :class:`PeakFlag` bits set in ``value`` (empty for 0).

    >>> describe_flags(5)
    ('SATURATED', 'EDGE')
    """
    value = int(value)
    return tuple(flag.name for flag in PeakFlag if value & flag)


@dataclass(frozen=True, eq=False)
class PeakTable:
    """Lines found in a spectrum.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per line, sorted by ``x``, with columns :data:`COLUMNS`: ``x`` (centre, raw
        pixel coordinate of the spectrum), ``x_err`` (1-sigma), ``fwhm`` and ``fwhm_err``
        (pixels; ``fwhm_err`` is NaN when the width was fixed), ``flux`` and ``flux_err``
        (electrons), ``amplitude`` (peak of the Gaussian, electrons per pixel), ``background``
        (continuum plus local background under the line, electrons per pixel), ``snr``
        (``flux / flux_err``), ``redchi`` (reduced chi-square of the fit) and ``flags`` (a
        :class:`PeakFlag` bit mask).
    fwhm_typical : float
        Typical FWHM of the lines in pixels (NaN if it could not be measured).
    """

    table: pd.DataFrame
    fwhm_typical: float

    def __len__(self) -> int:
        return len(self.table)

    def good(self) -> pd.DataFrame:
        """Rows with no flag set."""
        return self.table[self.table["flags"] == 0]

    def to_table(self) -> pd.DataFrame:
        """A copy of the table with an extra ``flag_names`` column."""
        out = self.table.copy()
        out["flag_names"] = ["|".join(describe_flags(v)) for v in out["flags"]]
        return out

    def summary(self) -> dict:
        """JSON-safe counts: lines, unflagged lines, lines per flag, typical FWHM."""
        flags = self.table["flags"].to_numpy()
        return {
            "n_peaks": int(len(self.table)),
            "n_good": int(np.count_nonzero(flags == 0)),
            "fwhm_typical": None if not np.isfinite(self.fwhm_typical) else float(self.fwhm_typical),
            "flag_counts": {flag.name: int(np.count_nonzero(flags & flag)) for flag in PeakFlag},
        }


def find_peaks(spectrum: Spectrum, *, min_snr: float = 5.0, fwhm_guess: float | None = None,
               edge_margin: float | None = None, blend_separation: float = 2.5) -> PeakTable:
    """Detect emission lines and measure their centres, widths and fluxes.

    Parameters
    ----------
    spectrum : Spectrum
        Flux in electrons with its variance; ``x`` must advance by one per pixel.
    min_snr : float
        Detection threshold: signal-to-noise ratio of the matched-filter flux estimate.
    fwhm_guess : float, optional
        Starting FWHM in pixels; estimated from the spectrum when omitted (3 pixels when no
        line is bright enough for that).
    edge_margin : float, optional
        Lines closer than this (pixels) to an end of the spectrum or to a bad pixel are flagged
        EDGE. Default: two typical FWHM.
    blend_separation : float
        Lines closer than this many FWHM are fitted jointly and flagged BLENDED.

    Returns
    -------
    PeakTable
        See the module docstring for the method.

    Raises
    ------
    ValueError
        For an empty spectrum, non-unit pixel spacing or invalid options.
    """
    flux = np.asarray(spectrum.flux, dtype=np.float64)
    variance = np.asarray(spectrum.variance, dtype=np.float64)
    x = np.asarray(spectrum.x, dtype=np.float64)
    _check_inputs(flux, variance, x, min_snr, fwhm_guess, blend_separation)
    usable = np.isfinite(flux) & np.isfinite(variance) & (variance > 0) & ~np.asarray(spectrum.bad, bool)
    saturated = np.asarray(spectrum.saturated, bool) & np.isfinite(flux)
    if not usable.any():
        return _empty(math.nan)
    data = _Data(flux, variance, usable, saturated)
    fwhm = float(fwhm_guess) if fwhm_guess is not None else _initial_fwhm(data, min_snr)
    if not np.isfinite(fwhm):
        fwhm = _DEFAULT_FWHM
    spikes = _spikes(data, fwhm)
    if spikes.any():
        data = _Data(flux, variance, usable & ~spikes, saturated)
    for attempt in range(2):
        result = _measure(data, fwhm, min_snr, blend_separation)
        typical = _typical_fwhm(result, fwhm, min_snr)
        if attempt == 0 and abs(typical / fwhm - 1.0) > 0.25:
            fwhm = typical
            continue
        break
    margin = 2.0 * typical if edge_margin is None else float(edge_margin)
    return _table(data, result, typical, margin, x[0])


# ------------------------------------------------------------------------------------------------
# Input handling
# ------------------------------------------------------------------------------------------------

class _Data:
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


def _check_inputs(flux, variance, x, min_snr, fwhm_guess, blend_separation) -> None:
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

def _continuum(data: _Data, fwhm: float) -> np.ndarray:
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


def _initial_fwhm(data: _Data, min_snr: float) -> float:
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


def _spikes(data: _Data, fwhm: float) -> np.ndarray:
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


def _detect(data: _Data, residual: np.ndarray, fwhm: float, min_snr: float, use: np.ndarray, *,
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


# ------------------------------------------------------------------------------------------------
# Batched Levenberg–Marquardt fit of groups of lines
# ------------------------------------------------------------------------------------------------

@dataclass
class _Result:
    """Per-line fit results (index units)."""

    x0: np.ndarray
    x_init: np.ndarray
    flux: np.ndarray
    sigma: np.ndarray
    background: np.ndarray
    x_err: np.ndarray
    flux_err: np.ndarray
    sigma_err: np.ndarray
    redchi: np.ndarray
    ok: np.ndarray
    group_size: np.ndarray
    saturated: np.ndarray
    continuum: np.ndarray


def _measure(data: _Data, fwhm: float, min_snr: float, blend_separation: float) -> _Result:
    """Continuum, detection and fit; then a second detection on the residual of the fit.

    The second look finds lines hidden in the wings of brighter ones; when it finds any
    farther than one FWHM from every fitted line, all lines are fitted again together.
    """
    base = _continuum(data, fwhm)
    pos, amp = _detect(data, data.flux - base, fwhm, min_snr, data.usable | data.saturated)
    res = _fit_lines(data, base, pos, amp, pos, fwhm, min_snr, blend_separation)
    if pos.size == 0:
        return res
    model = _line_model(res, data.n, fwhm)
    allowance = data.variance + (_PROFILE_TOLERANCE * model) ** 2
    new, new_amp = _detect(data, data.flux - base - model, fwhm, min_snr, data.fit_ok, variance=allowance)
    if new.size:
        nearest = np.min(np.abs(new[:, None] - res.x0[None, :]), axis=1)
        keep = nearest > fwhm
        new, new_amp = new[keep], new_amp[keep]
    if new.size == 0:
        return res
    start = np.concatenate((np.where(res.ok, res.x0, res.x_init), new))
    return _fit_lines(data, base, start, np.concatenate((np.maximum(res.flux, 0.0), new_amp)),
                      np.concatenate((res.x_init, new)), fwhm, min_snr, blend_separation)


def _fit_lines(data: _Data, base: np.ndarray, pos: np.ndarray, amp: np.ndarray, x_init: np.ndarray,
               fwhm: float, min_snr: float, blend_separation: float) -> _Result:
    """Fit all lines starting at ``pos`` (two passes, neighbours and the width of saturated
    lines updated in between)."""
    n = pos.size
    sigma0 = fwhm / FWHM_PER_SIGMA
    sat_line = _saturated_lines(data, pos, fwhm)
    pos = np.where(sat_line, _saturated_centres(data, pos), pos)
    res = _Result(x0=pos.copy(), x_init=np.asarray(x_init, float).copy(), flux=np.maximum(amp, 0.0),
                  sigma=np.full(n, sigma0), background=np.zeros(n), x_err=np.full(n, np.nan),
                  flux_err=np.full(n, np.nan), sigma_err=np.full(n, np.nan), redchi=np.full(n, np.nan),
                  ok=np.zeros(n, bool), group_size=np.ones(n, int), saturated=sat_line, continuum=base)
    if n == 0:
        return res
    groups = _groups(pos, blend_separation * fwhm)
    by_size: dict[int, list[np.ndarray]] = {}
    for g in groups:
        res.group_size[g] = len(g)
        by_size.setdefault(len(g), []).append(np.asarray(g))
    half = max(3, int(math.ceil(2.5 * fwhm)))
    for _ in range(2):
        for members in by_size.values():
            _fit_batch(data, base, res, np.stack(members), half, sigma0)
        sigma0 = _typical_fwhm(res, fwhm, min_snr) / FWHM_PER_SIGMA  # width of saturated lines
    return res


def _line_model(res: _Result, n: int, fwhm: float) -> np.ndarray:
    """Sum of the fitted line profiles (without background) over the whole spectrum."""
    half = int(math.ceil(4.0 * fwhm))
    good = np.isfinite(res.x0) & np.isfinite(res.flux) & np.isfinite(res.sigma)
    x0, flux, sigma = res.x0[good], res.flux[good], res.sigma[good]
    lo = np.floor(x0).astype(int) - half
    pix = lo[:, None] + np.arange(2 * half + 2)[None, :]
    e, _, _ = _profile((pix - 0.5)[:, :, None], x0[:, None, None], sigma[:, None, None])
    values = e[:, :, 0] * flux[:, None]
    pix = pix[:, :-1]
    inside = (pix >= 0) & (pix < n)
    model = np.zeros(n)
    np.add.at(model, pix[inside], values[inside])
    return model


def _saturated_lines(data: _Data, pos: np.ndarray, fwhm: float) -> np.ndarray:
    if not data.saturated.any() or pos.size == 0:
        return np.zeros(pos.size, bool)
    sat_idx = np.flatnonzero(data.saturated)
    j = np.searchsorted(sat_idx, pos)
    left = np.abs(pos - sat_idx[np.clip(j - 1, 0, sat_idx.size - 1)])
    right = np.abs(sat_idx[np.clip(j, 0, sat_idx.size - 1)] - pos)
    return np.minimum(left, right) <= max(fwhm, 1.0)


def _saturated_centres(data: _Data, pos: np.ndarray) -> np.ndarray:
    """Midpoint of the saturated run nearest to each position (the position if none)."""
    out = pos.copy()
    sat = data.saturated
    for k, p in enumerate(pos):
        lo_win = max(0, int(round(p)) - 3)
        near = np.flatnonzero(sat[lo_win:int(round(p)) + 4]) + lo_win
        if near.size == 0:
            continue
        lo = hi = int(near[np.argmin(np.abs(near - p))])
        while lo > 0 and sat[lo - 1]:
            lo -= 1
        while hi < sat.size - 1 and sat[hi + 1]:
            hi += 1
        out[k] = 0.5 * (lo + hi)
    return out


def _groups(pos: np.ndarray, separation: float) -> list[list[int]]:
    """Chains of lines closer than ``separation`` (indices into ``pos``)."""
    order = np.argsort(pos)
    groups: list[list[int]] = [[int(order[0])]]
    for a, b in zip(order[:-1], order[1:]):
        if pos[b] - pos[a] < separation:
            groups[-1].append(int(b))
        else:
            groups.append([int(b)])
    return groups


def _profile(edges: np.ndarray, x0: np.ndarray, sigma: np.ndarray):
    """Pixel-integrated unit Gaussian and the pieces of its derivatives.

    ``edges`` (..., L + 1, 1) are the pixel boundaries of L consecutive pixels, ``x0`` (..., 1, G)
    the centres, ``sigma`` broadcastable to them. Returns, each of shape (..., L, G): ``e`` (the
    integral over each pixel), ``dx`` (``sigma`` times its derivative in ``x0``) and ``ds`` (its
    derivative in ``ln sigma``).
    """
    z = (edges - x0) / sigma
    cdf = ndtr(z)
    pdf = np.exp(-0.5 * z * z) * _INV_SQRT_2PI
    zpdf = z * pdf
    return (cdf[..., 1:, :] - cdf[..., :-1, :], pdf[..., :-1, :] - pdf[..., 1:, :],
            zpdf[..., :-1, :] - zpdf[..., 1:, :])


def _others(res: _Result, units: np.ndarray, edges: np.ndarray, k_side: int = 3) -> np.ndarray:
    """Model of the nearest lines outside each unit (``k_side`` on each side), in its window."""
    order = np.argsort(res.x0)
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    first = rank[units].min(axis=1)
    last = rank[units].max(axis=1)
    offsets = np.concatenate((np.arange(-k_side, 0), np.arange(1, k_side + 1)))
    nb_rank = np.where(offsets < 0, first[:, None] + offsets, last[:, None] + offsets)
    nb = order[np.clip(nb_rank, 0, order.size - 1)]
    valid = (nb_rank >= 0) & (nb_rank < order.size) & ~np.any(nb[:, :, None] == units[:, None, :], axis=2)
    valid &= np.isfinite(res.x0[nb]) & np.isfinite(res.flux[nb]) & np.isfinite(res.sigma[nb])
    e, _, _ = _profile(edges[:, :, None], np.where(valid, res.x0[nb], 0.0)[:, None, :],
                       np.where(valid, res.sigma[nb], 1.0)[:, None, :])
    return np.sum(e * np.where(valid, res.flux[nb], 0.0)[:, None, :], axis=2)


def _fit_batch(data: _Data, base: np.ndarray, res: _Result, units: np.ndarray, half: int,
               sigma0: float, max_iter: int = 50) -> None:
    """Fit every unit (row of ``units``: indices of G lines fitted jointly) at once.

    Parameters per unit: G centres, G fluxes, one ln(sigma) and one constant background. The
    results are written into ``res``.
    """
    n_units, g = units.shape
    x_lo = np.floor(res.x0[units].min(axis=1)).astype(int) - half
    x_hi = np.ceil(res.x0[units].max(axis=1)).astype(int) + half
    length = int((x_hi - x_lo).max()) + 1
    pix = x_lo[:, None] + np.arange(length)[None, :]
    safe = np.clip(pix, 0, data.n - 1)
    mask = (pix >= 0) & (pix < data.n) & (pix <= x_hi[:, None]) & data.fit_ok[safe]
    edges = x_lo[:, None] - 0.5 + np.arange(length + 1)[None, :]
    offset = base[safe] + _others(res, units, edges)
    y = data.flux[safe] - offset
    read_var = data.read_var[safe]
    edges3 = edges[:, :, None]

    n_par = 2 * g + 2
    i_s, i_b = 2 * g, 2 * g + 1
    theta = np.concatenate((res.x0[units], res.flux[units],
                            np.log(res.sigma[units].mean(axis=1, keepdims=True)),
                            res.background[units].mean(axis=1, keepdims=True)), axis=1)
    free = np.ones((n_units, n_par), bool)
    sat_unit = res.saturated[units].any(axis=1)
    theta[sat_unit, i_s] = math.log(sigma0)
    free[sat_unit, i_s] = False
    n_valid = mask.sum(axis=1)
    too_few = n_valid < n_par + 2
    free[too_few] = False
    fixed_diag = (~free)[:, :, None] * np.eye(n_par)
    lower = np.full((n_units, n_par), -np.inf)
    upper = np.full((n_units, n_par), np.inf)
    lower[:, :g], upper[:, :g] = x_lo[:, None], x_hi[:, None]
    lower[:, i_s], upper[:, i_s] = math.log(sigma0 / 3.0), math.log(sigma0 * 3.0)

    def evaluate(th: np.ndarray, with_jacobian: bool):
        sig = np.exp(th[:, i_s])[:, None, None]
        e, dx, ds = _profile(edges3, th[:, None, :g], sig)
        amp = th[:, None, g:2 * g]
        mu = np.sum(e * amp, axis=2) + th[:, i_b][:, None]
        if not with_jacobian:
            return mu, None
        jac = np.empty((n_units, length, n_par))
        jac[:, :, :g] = amp * dx / sig
        jac[:, :, g:2 * g] = e
        jac[:, :, i_s] = np.sum(amp * ds, axis=2)
        jac[:, :, i_b] = 1.0
        return mu, jac * free[:, None, :]

    def weights(mu: np.ndarray) -> np.ndarray:
        var = np.maximum(mu + offset, 0.0) + read_var
        return np.where(mask, 1.0 / np.maximum(var, data.floor), 0.0)

    lam = np.full(n_units, 1e-3)
    done = too_few.copy()
    for _ in range(max_iter):
        mu, jac = evaluate(theta, True)
        w = weights(mu)
        resid = y - mu
        chi2 = np.sum(w * resid * resid, axis=1)
        jw = jac * w[:, :, None]
        normal = np.einsum("ulp,ulq->upq", jw, jac)
        grad = np.einsum("ulp,ul->up", jw, resid)
        # parameters held at a bound they are pushed against are fixed for this iteration
        held = ((theta <= lower) & (grad < 0)) | ((theta >= upper) & (grad > 0))
        keep = ~held
        normal = normal * keep[:, :, None] * keep[:, None, :] + held[:, :, None] * np.eye(n_par)
        grad = grad * keep
        diag = np.maximum(np.einsum("upp->up", normal), 1e-300)
        damped = normal + (lam[:, None] * diag)[:, :, None] * np.eye(n_par) + fixed_diag
        step = np.linalg.solve(damped, grad[:, :, None])[:, :, 0]
        sig = np.exp(theta[:, i_s])[:, None]
        step[:, :g] = np.clip(step[:, :g], -sig, sig)
        step[:, i_s] = np.clip(step[:, i_s], -0.5, 0.5)
        step[done] = 0.0
        trial = np.clip(theta + step, lower, upper)
        change = trial - theta
        resid_t = y - evaluate(trial, False)[0]
        actual = chi2 - np.sum(w * resid_t * resid_t, axis=1)
        predicted = 2.0 * np.sum(change * grad, axis=1) - np.einsum("up,upq,uq->u", change, normal, change)
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            gain = np.where(predicted > 0, actual / np.maximum(predicted, 1e-300), -np.inf)
        better = (actual >= -1e-12 * chi2) & ~done
        theta = np.where(better[:, None], trial, theta)
        # converged: the step moves the parameters by < 1 % of their uncertainty (chi-square
        # change < 1e-4), or by < 1e-5 pixel
        small = np.all(np.abs(change[:, :g]) < 1e-5, axis=1) & (np.abs(change[:, i_s]) < 1e-5)
        done |= small | (better & (predicted < 1e-4)) | (lam > 1e10)
        # Marquardt-style damping control from the ratio of actual to predicted reduction
        factor = np.where(gain > 0.75, 1.0 / 3.0, np.where(gain < 0.25, 2.0, 1.0))
        lam = np.where(better, np.maximum(lam * factor, 1e-7), lam * 4.0)
        if done.all():
            break

    mu, jac = evaluate(theta, True)
    w = weights(mu)
    chi2 = np.sum(w * (y - mu) ** 2, axis=1)
    normal = np.einsum("ulp,ulq->upq", jac * w[:, :, None], jac) + fixed_diag
    scale = np.sqrt(np.maximum(np.einsum("upp->up", normal), 1e-300))
    scaled = normal / (scale[:, :, None] * scale[:, None, :])
    invertible = np.linalg.cond(scaled) < 1e12
    cov = np.full_like(normal, np.nan)
    cov[invertible] = np.linalg.inv(scaled[invertible]) / (scale[invertible][:, :, None]
                                                            * scale[invertible][:, None, :])
    var = np.einsum("upp->up", cov)
    var = np.where(free & (var > 0), var, np.nan)
    dof = np.maximum(n_valid - free.sum(axis=1), 1)

    sigma_fit = np.exp(theta[:, i_s])
    res.x0[units] = theta[:, :g]
    res.flux[units] = theta[:, g:2 * g]
    res.sigma[units] = sigma_fit[:, None]
    res.background[units] = theta[:, i_b][:, None]
    res.x_err[units] = np.sqrt(var[:, :g])
    res.flux_err[units] = np.sqrt(var[:, g:2 * g])
    res.sigma_err[units] = (sigma_fit * np.sqrt(var[:, i_s]))[:, None]
    res.redchi[units] = (chi2 / dof)[:, None]
    res.ok[units] = (done & ~too_few & invertible)[:, None]


# ------------------------------------------------------------------------------------------------
# Results
# ------------------------------------------------------------------------------------------------

def _typical_fwhm(res: _Result, fallback: float, min_snr: float) -> float:
    if res.x0.size == 0:
        return fallback
    fwhm = res.sigma * FWHM_PER_SIGMA
    snr = res.flux / res.flux_err
    use = res.ok & (res.group_size == 1) & ~res.saturated & np.isfinite(fwhm) & (snr >= max(min_snr, 10.0))
    if np.count_nonzero(use) < 3:
        use = res.ok & ~res.saturated & np.isfinite(fwhm) & (res.flux > 0)
    if np.count_nonzero(use) < 1:
        return fallback
    return float(np.median(fwhm[use]))


def _local_fwhm(res: _Result, typical: float) -> np.ndarray:
    """Expected FWHM at each line: a robust quadratic in position through the isolated,
    unsaturated, well-measured lines (the constant ``typical`` when there are fewer than 8)."""
    fwhm = res.sigma * FWHM_PER_SIGMA
    use = (res.ok & (res.group_size == 1) & ~res.saturated & np.isfinite(res.sigma_err)
           & (res.flux > 10.0 * res.flux_err))
    if np.count_nonzero(use) < 8:
        return np.full(fwhm.shape, typical)
    x, y = res.x0[use], fwhm[use]
    keep = np.ones(x.size, bool)
    for _ in range(3):
        coef = np.polynomial.polynomial.polyfit(x[keep], y[keep], 2)
        resid = y - np.polynomial.polynomial.polyval(x, coef)
        scale = 1.4826 * np.median(np.abs(resid[keep])) + 1e-12
        keep = np.abs(resid) < 4.0 * scale
    return np.polynomial.polynomial.polyval(res.x0, coef)


def _distance_to_bad(data: _Data, pos: np.ndarray) -> np.ndarray:
    """Distance (pixels) from each position to the nearest bad pixel or spectrum end."""
    ends = np.minimum(pos + 0.5, data.n - 0.5 - pos)
    bad_idx = np.flatnonzero(~(data.usable | data.saturated))
    if bad_idx.size == 0:
        return ends
    j = np.searchsorted(bad_idx, pos)
    left = pos - bad_idx[np.clip(j - 1, 0, bad_idx.size - 1)]
    right = bad_idx[np.clip(j, 0, bad_idx.size - 1)] - pos
    left = np.where(j > 0, left, np.inf)
    right = np.where(j < bad_idx.size, right, np.inf)
    return np.minimum(ends, np.minimum(np.abs(left), np.abs(right)) - 0.5)


def _table(data: _Data, res: _Result, typical: float, margin: float, x_offset: float) -> PeakTable:
    n = res.x0.size
    if n == 0:
        return _empty(typical)
    fwhm = res.sigma * FWHM_PER_SIGMA
    fwhm_err = res.sigma_err * FWHM_PER_SIGMA
    x_err = np.where(res.saturated, 2.0 * res.x_err, res.x_err)
    flags = np.zeros(n, dtype=np.int64)
    flags |= np.where(res.saturated, int(PeakFlag.SATURATED), 0)
    flags |= np.where(res.group_size > 1, int(PeakFlag.BLENDED), 0)
    inside = (res.x0 > -0.5) & (res.x0 < data.n - 0.5)
    pos = np.clip(res.x0, 0.0, data.n - 1.0)
    flags |= np.where(_distance_to_bad(data, pos) < margin, int(PeakFlag.EDGE), 0)
    finite = np.isfinite(res.x0) & np.isfinite(x_err) & np.isfinite(res.flux)
    poor = ~res.ok | ~finite | (res.flux <= 0) | (np.abs(res.x0 - res.x_init) > typical)
    flags |= np.where(poor, int(PeakFlag.POOR_FIT), 0)
    local = _local_fwhm(res, typical)
    odd = (np.abs(np.log(np.maximum(fwhm, 1e-9) / local)) > math.log(_ODD_WIDTH_RATIO)) & (
        np.abs(fwhm - local) > 5.0 * fwhm_err)
    flags |= np.where(odd & ~res.saturated, int(PeakFlag.ODD_WIDTH), 0)
    # A saturated line whose wings could not be fitted: centre of the saturated run.
    fallback = res.saturated & ~np.isfinite(x_err)
    x_err = np.where(fallback, np.maximum(fwhm, 1.0) / math.sqrt(12.0), x_err)
    x0 = np.where(fallback, res.x_init, res.x0)

    continuum = np.interp(pos, np.arange(data.n), res.continuum)
    table = pd.DataFrame({
        "x": x0 + x_offset,
        "x_err": x_err,
        "fwhm": fwhm,
        "fwhm_err": np.where(res.saturated, np.nan, fwhm_err),
        "flux": res.flux,
        "flux_err": res.flux_err,
        "amplitude": res.flux * _INV_SQRT_2PI / res.sigma,
        "background": res.background + continuum,
        "snr": res.flux / res.flux_err,
        "redchi": res.redchi,
        "flags": flags,
    })
    table = table[inside].sort_values("x", kind="stable").reset_index(drop=True)
    table = _drop_duplicates(table, 0.5 * typical)
    return PeakTable(table=table, fwhm_typical=float(typical))


def _drop_duplicates(table: pd.DataFrame, tolerance: float) -> pd.DataFrame:
    """Of two fitted centres closer than ``tolerance``, keep the brighter and flag it POOR_FIT."""
    if len(table) < 2:
        return table
    x = table["x"].to_numpy()
    close = np.flatnonzero(np.diff(x) < tolerance)
    if close.size == 0:
        return table
    flux = table["flux"].to_numpy()
    drop = set()
    flags = table["flags"].to_numpy().copy()
    for i in close:
        fainter, brighter = (i, i + 1) if flux[i] < flux[i + 1] else (i + 1, i)
        drop.add(fainter)
        flags[brighter] |= int(PeakFlag.POOR_FIT)
    table = table.assign(flags=flags)
    return table.drop(index=sorted(drop)).reset_index(drop=True)


def _empty(fwhm: float) -> PeakTable:
    table = pd.DataFrame({name: pd.Series(dtype=np.int64 if name == "flags" else float)
                          for name in COLUMNS})
    return PeakTable(table=table, fwhm_typical=float(fwhm))
