"""Emission-line detection and sub-pixel centring in a one-dimensional spectrum.

Steps of :func:`find_peaks` (steps 0-3 in :mod:`wavecal._peak_detect`; the result is a
:class:`~wavecal.peak_table.PeakTable`):

0. **Spikes.** One- and two-pixel spikes much sharper than any line (cosmic-ray residue, hot
   pixels) are masked like bad pixels.
1. **Line width.** Unless given, a starting FWHM is estimated from the half-maximum widths of
   the brightest isolated maxima. The lines are then detected and fitted once with it, and the
   widths of all well-measured lines give the **width model**: a robust low-order polynomial of
   ``ln FWHM`` in position (:mod:`wavecal._line_widths`), the expected FWHM at every pixel
   (:meth:`~wavecal.peak_table.PeakTable.fwhm_at`, column ``fwhm_expected``). Everything below is redone with it,
   and once more if it then moves at some line by more than the spread of widths about it.
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
   Cramér–Rao bound (Winick 1986, J. Opt. Soc. Am. A 3, 1809). Every line has its own width,
   bounded within a factor 2 of the expected FWHM at its position, and a non-negative flux.
   Lines closer than ``blend_separation`` expected FWHM are fitted jointly and flagged
   BLENDED; a longer group is cut into chunks of at most three lines, each fitted with one
   more line of the group on each side (overlap), the lines beyond held as fixed
   contributions updated between two passes (:mod:`wavecal._line_fit`).
5. **Saturated lines.** Saturated pixels and their neighbours are left out of the fit, so the
   centre comes from the unsaturated wings; the width has a Gaussian prior at the expected
   FWHM with the scatter of widths about the width model, and ``x_err`` is that fit's own.
6. **Second look.** The matched filter is run again on the residual of the fits (allowing 3 %
   of the fitted profile as model error); lines it finds more than one expected FWHM from
   every fitted line (typically faint lines in the wings of bright ones) are added and
   everything is fitted again.
7. **Satellites.** A line whose peak does not stand out above the fitted profiles of the
   brighter lines around it (a shoulder on their wings), or whose flux went to zero, is
   dropped and the rest fitted again.

Uncertainties come from the inverse of the weighted normal matrix at the solution, i.e. from
the noise model alone (not rescaled by the reduced chi-square, which is reported separately).
A line of ODD_WIDTH keeps its place in the table; when it is wider than expected, its ``x_err``
includes the possible offset of a blend's centroid from its brighter component, so a caller
down-weights it through ``x_err``: no line is excluded here for its width alone.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._line_fit import FWHM_PER_SIGMA, FitData, FitState, fit_units, profile
from ._line_widths import LINES_PER_COEFFICIENT, WidthModel, fit_width_model
from ._peak_detect import (SpectrumData, check_inputs, detect_lines, estimate_continuum, find_spikes,
                           starting_fwhm)
from .extract import Spectrum
from .peak_table import COLUMNS, PeakFlag, PeakTable

__all__ = ["find_peaks"]

_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)
#: Starting FWHM (pixels) when no line is bright enough to measure one (common practice:
#: spectrographs sample the line width with 2-4 pixels).
_DEFAULT_FWHM = 3.0
#: A line is of ODD_WIDTH when its FWHM differs from the expected one by more than this factor
#: (two equal lines 0.64 FWHM apart make one line 1.25 times as wide: sqrt(1 + d²/4σ²)).
_ODD_WIDTH_RATIO = 1.25
#: Each fitted width is bounded within this factor of the expected FWHM: two equal lines 1.5
#: FWHM apart, about as close as the matched filter still sees as one, make one line twice as
#: wide; no real line is narrower than half the instrumental profile.
_WIDTH_SPAN = 2.0
#: The same while the expected FWHM is only a starting value (a guess or half-maximum estimate).
_START_SPAN = 3.0
#: Flux signal-to-noise ratio a line needs for its width to enter the width model (its width is
#: then measured to about 15 %: relative width error ~ sqrt(2) / (S/N), common practice).
_WIDTH_SNR = 10.0
#: Most measurements with an updated width model (after a first fit with the starting width).
_MAX_ROUNDS = 2
#: Largest number of lines a chunk of a crowded group keeps (it is fitted with one more line of
#: the group on each side, so at most five lines are fitted jointly).
_MAX_CHUNK = 3
#: Fit passes (the lines outside a chunk are updated between passes).
_PASSES = 2
#: Pixels fitted beyond the outermost centres of a chunk, in expected FWHM (±2.5 FWHM holds all
#: but 4e-9 of a Gaussian's flux).
_FIT_HALF_WIDTH = 2.5
#: Brighter lines on each side whose wings are considered in the satellite test.
_NEIGHBOUR_LINES = 3
#: Fraction of the fitted line profile allowed as model error when looking for lines hidden in
#: the residual of the fit (real line profiles are not exactly Gaussian).
_PROFILE_TOLERANCE = 0.03



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
    check_inputs(flux, variance, x, min_snr, fwhm_guess, blend_separation)
    usable = np.isfinite(flux) & np.isfinite(variance) & (variance > 0) & ~np.asarray(spectrum.bad, bool)
    saturated = np.asarray(spectrum.saturated, bool) & np.isfinite(flux)
    if not usable.any():
        return PeakTable(table=_empty_frame(), fwhm_typical=math.nan, x_offset=float(x[0]))
    data = SpectrumData(flux, variance, usable, saturated)
    fwhm = float(fwhm_guess) if fwhm_guess is not None else starting_fwhm(data, min_snr)
    if not np.isfinite(fwhm):
        fwhm = _DEFAULT_FWHM
    spikes = find_spikes(data, fwhm)
    if spikes.any():
        data = SpectrumData(flux, variance, usable & ~spikes, saturated)
    widths = WidthModel.constant(fwhm, data.n)
    # a first fit of the detected lines measures the width model; then everything is measured
    # with it, again while the model moves at some line by more than the spread of widths
    # about it (the width prior of saturated lines must come from the final model)
    result = _measure(data, widths, min_snr, blend_separation, full=False)
    for attempt in range(_MAX_ROUNDS + 1):
        new = _width_model(result, widths, data.n)
        at = result.st.x0[np.isfinite(result.st.x0)]
        moved = float(np.max(np.abs(np.log(new(at) / widths(at))))) if at.size else 0.0
        widths = new
        if attempt == _MAX_ROUNDS or (attempt > 0 and moved < widths.scatter):
            break
        result = _measure(data, widths, min_snr, blend_separation, full=True)
    margin = 2.0 * widths.median(data.n) if edge_margin is None else float(edge_margin)
    return _table(data, result, widths, margin, x[0])


# ------------------------------------------------------------------------------------------------
# Fitting all lines: groups, chunks, passes, satellites
# ------------------------------------------------------------------------------------------------

@dataclass
class _Result:
    """Per-line fit results (index units) and what they were fitted with."""

    st: FitState
    x_init: np.ndarray
    group_size: np.ndarray
    saturated: np.ndarray
    expected: np.ndarray
    continuum: np.ndarray


def _measure(data: SpectrumData, widths: WidthModel, min_snr: float, blend_separation: float, *,
             full: bool) -> _Result:
    """Continuum, detection and fit; when ``full``, a second detection on the residual of the
    fit, and a last fit without wing satellites.

    The second look finds lines hidden in the wings of brighter ones; when it finds any
    farther than one expected FWHM from every fitted line, all lines are fitted again together.
    Then wing satellites (:func:`_satellites`) and candidates
    fitted with zero flux (no line) are dropped, and the rest fitted once more.
    """
    typical = widths.median(data.n)
    base = estimate_continuum(data, typical)
    pos, amp = detect_lines(data, data.flux - base, typical, min_snr, data.usable | data.saturated)
    res = _fit_lines(data, base, pos, amp, pos, widths, blend_separation)
    if not full or pos.size == 0:
        return res
    st = res.st
    model = _line_model(res)
    allowance = data.variance + (_PROFILE_TOLERANCE * model) ** 2
    new, new_amp = detect_lines(data, data.flux - base - model, typical, min_snr, data.fit_ok, variance=allowance)
    if new.size:
        nearest = np.min(np.abs(new[:, None] - st.x0[None, :]), axis=1)
        keep = nearest > widths(new)
        new, new_amp = new[keep], new_amp[keep]
    if new.size:
        start = np.concatenate((np.where(st.ok, st.x0, res.x_init), new))
        res = _fit_lines(data, base, start, np.concatenate((st.flux, new_amp)), np.concatenate((res.x_init, new)),
                         widths, blend_separation)
        st = res.st
    drop = _satellites(res) | (st.ok & (st.flux <= 0))
    if not drop.any():
        return res
    keep = ~drop
    return _fit_lines(data, base, np.where(st.ok, st.x0, res.x_init)[keep], st.flux[keep],
                      res.x_init[keep], widths, blend_separation)


def _fit_lines(data: SpectrumData, base: np.ndarray, pos: np.ndarray, amp: np.ndarray, x_init: np.ndarray,
               widths: WidthModel, blend_separation: float) -> _Result:
    """Fit all lines starting at ``pos``.

    Lines closer than ``blend_separation`` expected FWHM form a group; a group of more than
    :data:`_MAX_CHUNK` lines is cut at its widest gaps into chunks of at most that many. Every
    chunk is fitted together with the next line of its group on each side (overlap: fitted, not
    kept), the lines beyond held as fixed contributions, in :data:`_PASSES` passes that update
    them. Each line
    has its own width, bounded within a factor :data:`_WIDTH_SPAN` (:data:`_START_SPAN` while
    the width model is only a starting guess) of the expected FWHM at its position; a saturated
    line's width has a Gaussian prior in ``ln sigma`` at the expected width with the scatter of
    widths about the width model.
    """
    n = pos.size
    expected = widths(pos)
    sat_line = _saturated_lines(data, pos, expected)
    pos = np.where(sat_line, _saturated_centres(data, pos), pos)
    expected = widths(pos)
    sigma0 = expected / FWHM_PER_SIGMA
    span = _WIDTH_SPAN if widths.n_lines > 0 else _START_SPAN
    st = FitState(x0=pos.copy(), flux=np.maximum(amp, 0.0), sigma=sigma0.copy(), background=np.zeros(n),
                  x_err=np.full(n, np.nan), flux_err=np.full(n, np.nan), sigma_err=np.full(n, np.nan),
                  redchi=np.full(n, np.nan), ok=np.zeros(n, bool), sigma_lo=sigma0 / span,
                  sigma_hi=sigma0 * span, prior_ln_sigma=np.log(sigma0),
                  prior_weight=np.where(sat_line, 1.0 / widths.scatter ** 2, 0.0))
    res = _Result(st=st, x_init=np.asarray(x_init, float).copy(), group_size=np.ones(n, int),
                  saturated=sat_line, expected=expected, continuum=base)
    if n == 0:
        return res
    groups = _groups(pos, blend_separation * expected)
    units_list: list[list[int]] = []
    owned_list: list[list[bool]] = []
    for g in groups:
        res.group_size[g] = len(g)
        start = 0
        for c in _chunks(g, pos):
            # a chunk is fitted with one more line of its group on each side, free but not kept
            lo, hi = max(start - 1, 0), min(start + len(c) + 1, len(g))
            units_list.append(g[lo:hi])
            owned_list.append([lo + k >= start and lo + k < start + len(c) for k in range(hi - lo)])
            start += len(c)
    # single lines in one batch, chunks of several lines in another (padded with -1)
    batches = []
    for pick in (lambda u: len(u) == 1, lambda u: len(u) > 1):
        rows = [k for k, u in enumerate(units_list) if pick(u)]
        if not rows:
            continue
        size = max(len(units_list[k]) for k in rows)
        units = np.full((len(rows), size), -1)
        owned = np.zeros((len(rows), size), bool)
        for r, k in enumerate(rows):
            units[r, :len(units_list[k])] = units_list[k]
            owned[r, :len(units_list[k])] = owned_list[k]
        half = np.ceil(_FIT_HALF_WIDTH * np.where(units >= 0, expected[units], 0.0).max(axis=1))
        batches.append((units, owned, np.maximum(half, 3).astype(int)))
    fit_data = FitData(flux=data.flux, read_var=data.read_var, fit_ok=data.fit_ok, floor=data.floor)
    for _ in range(_PASSES):
        for units, owned, half in batches:
            fit_units(fit_data, base, st, units, half, owned=owned)
    return res


def _chunks(group: list[int], pos: np.ndarray) -> list[list[int]]:
    """``group`` (sorted by position) cut at its widest gaps into pieces of at most
    :data:`_MAX_CHUNK` lines."""
    if len(group) <= _MAX_CHUNK:
        return [group]
    gaps = np.diff(pos[group])
    k = int(np.argmax(gaps)) + 1
    return _chunks(group[:k], pos) + _chunks(group[k:], pos)


def _satellites(res: _Result) -> np.ndarray:
    """Lines that do not stand out above the fitted profile of a brighter neighbour.

    A line is a satellite when its own peak (the amplitude of its fitted Gaussian) is no higher
    than the sum of the fitted Gaussians of the brighter lines at its centre: it is then a
    shoulder on their wings, which a departure of the real profile from a Gaussian (or a
    saturated core) explains as well as a line does. Lines whose fit failed do not count.
    """
    st = res.st
    n = st.x0.size
    if n < 2:
        return np.zeros(n, bool)
    usable = st.ok & np.isfinite(st.x0) & np.isfinite(st.sigma) & (st.flux > 0)
    amp = np.where(usable, st.flux * _INV_SQRT_2PI / st.sigma, 0.0)
    order = np.argsort(st.x0)
    x, a, s = st.x0[order], amp[order], st.sigma[order]
    wing = np.zeros(n)
    for shift in (*range(1, _NEIGHBOUR_LINES + 1), *range(-_NEIGHBOUR_LINES, 0)):
        other = np.arange(n) + shift
        j = np.clip(other, 0, n - 1)
        brighter = (other >= 0) & (other < n) & (a[j] > a)
        wing += np.where(brighter, a[j] * np.exp(-0.5 * ((x - x[j]) / s[j]) ** 2), 0.0)
    out = np.zeros(n, bool)
    out[order] = usable[order] & (a <= wing)
    return out


def _line_model(res: _Result) -> np.ndarray:
    """Sum of the fitted line profiles (without background) over the whole spectrum."""
    st = res.st
    n = res.continuum.size
    good = np.isfinite(st.x0) & np.isfinite(st.flux) & np.isfinite(st.sigma)
    x0, flux, sigma = st.x0[good], st.flux[good], st.sigma[good]
    if x0.size == 0:
        return np.zeros(n)
    half = int(math.ceil(4.0 * FWHM_PER_SIGMA * sigma.max()))
    lo = np.floor(x0).astype(int) - half
    pix = lo[:, None] + np.arange(2 * half + 2)[None, :]
    e, _, _ = profile((pix - 0.5)[:, :, None], x0[:, None, None], sigma[:, None, None])
    values = e[:, :, 0] * flux[:, None]
    pix = pix[:, :-1]
    inside = (pix >= 0) & (pix < n)
    model = np.zeros(n)
    np.add.at(model, pix[inside], values[inside])
    return model


def _saturated_lines(data: SpectrumData, pos: np.ndarray, fwhm: np.ndarray) -> np.ndarray:
    if not data.saturated.any() or pos.size == 0:
        return np.zeros(pos.size, bool)
    sat_idx = np.flatnonzero(data.saturated)
    j = np.searchsorted(sat_idx, pos)
    left = np.abs(pos - sat_idx[np.clip(j - 1, 0, sat_idx.size - 1)])
    right = np.abs(sat_idx[np.clip(j, 0, sat_idx.size - 1)] - pos)
    return np.minimum(left, right) <= np.maximum(fwhm, 1.0)


def _saturated_centres(data: SpectrumData, pos: np.ndarray) -> np.ndarray:
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


def _groups(pos: np.ndarray, separation: np.ndarray) -> list[list[int]]:
    """Chains of lines closer than ``separation`` (per line; the mean of two neighbours' is
    used), as indices into ``pos`` sorted by position."""
    order = np.argsort(pos)
    groups: list[list[int]] = [[int(order[0])]]
    for a, b in zip(order[:-1], order[1:]):
        if pos[b] - pos[a] < 0.5 * (separation[a] + separation[b]):
            groups[-1].append(int(b))
        else:
            groups.append([int(b)])
    return groups


# ------------------------------------------------------------------------------------------------
# Results
# ------------------------------------------------------------------------------------------------

def _width_model(res: _Result, fallback: WidthModel, n: int) -> WidthModel:
    """Width model fitted to every well-measured line (see :mod:`wavecal._line_widths`).

    A width counts when the fit converged, the line is not saturated, its flux is positive, the
    centre stayed within one expected FWHM of the detection and the width is not held at a bound
    (a width at a bound is not a measurement); of these, the lines with a flux S/N of at least
    :data:`_WIDTH_SNR`, or all of them when fewer than
    :data:`~wavecal._line_widths.LINES_PER_COEFFICIENT` are that bright.
    """
    st = res.st
    if st.x0.size == 0:
        return fallback
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = st.flux / st.flux_err
    inside_bounds = (st.sigma > st.sigma_lo * 1.001) & (st.sigma < st.sigma_hi / 1.001)
    use = (st.ok & ~res.saturated & np.isfinite(st.sigma_err) & (st.flux > 0) & inside_bounds
           & (np.abs(st.x0 - res.x_init) <= res.expected))
    if np.count_nonzero(use & (snr >= _WIDTH_SNR)) >= LINES_PER_COEFFICIENT:
        use &= snr >= _WIDTH_SNR
    if not use.any():
        return fallback
    return fit_width_model(st.x0[use], st.sigma[use] * FWHM_PER_SIGMA, st.sigma_err[use] * FWHM_PER_SIGMA,
                           n, fallback=fallback)


def _distance_to_bad(data: SpectrumData, pos: np.ndarray) -> np.ndarray:
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


def _table(data: SpectrumData, res: _Result, widths: WidthModel, margin: float, x_offset: float) -> PeakTable:
    st = res.st
    n = st.x0.size
    typical = widths.median(data.n)
    if n == 0:
        return PeakTable(table=_empty_frame(), fwhm_typical=typical, width_model=widths, x_offset=float(x_offset))
    fwhm = st.sigma * FWHM_PER_SIGMA
    fwhm_err = st.sigma_err * FWHM_PER_SIGMA
    pos = np.clip(st.x0, 0.0, data.n - 1.0)
    expected = widths(pos)
    flags = np.zeros(n, dtype=np.int64)
    flags |= np.where(res.saturated, int(PeakFlag.SATURATED), 0)
    flags |= np.where(res.group_size > 1, int(PeakFlag.BLENDED), 0)
    inside = (st.x0 > -0.5) & (st.x0 < data.n - 0.5)
    flags |= np.where(_distance_to_bad(data, pos) < margin, int(PeakFlag.EDGE), 0)
    finite = np.isfinite(st.x0) & np.isfinite(st.x_err) & np.isfinite(st.flux)
    poor = ~st.ok | ~finite | (st.flux <= 0) | (np.abs(st.x0 - res.x_init) > expected)
    flags |= np.where(poor, int(PeakFlag.POOR_FIT), 0)
    log_ratio = np.log(np.maximum(fwhm, 1e-9) / expected)
    odd = (np.abs(log_ratio) > math.log(_ODD_WIDTH_RATIO)) & (np.abs(fwhm - expected) > 5.0 * fwhm_err)
    odd &= ~res.saturated
    flags |= np.where(odd, int(PeakFlag.ODD_WIDTH), 0)
    # A line of ODD_WIDTH wider than expected may be two: the centroid of a blend lies at most
    # sqrt(sigma_obs² - sigma_expected²) from its brighter component; that goes into its x_err.
    excess = np.maximum(st.sigma ** 2 - (expected / FWHM_PER_SIGMA) ** 2, 0.0)
    x_err = np.where(odd, np.sqrt(st.x_err ** 2 + excess), st.x_err)
    # A saturated line whose wings could not be fitted: centre of the saturated run.
    fallback = res.saturated & ~np.isfinite(x_err)
    x_err = np.where(fallback, np.maximum(expected, 1.0) / math.sqrt(12.0), x_err)
    x0 = np.where(fallback, res.x_init, st.x0)
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = st.flux / st.flux_err
    continuum = np.interp(pos, np.arange(data.n), res.continuum)
    table = pd.DataFrame({
        "x": x0 + x_offset,
        "x_err": x_err,
        "fwhm": fwhm,
        "fwhm_err": np.where(res.saturated, np.nan, fwhm_err),
        "flux": st.flux,
        "flux_err": st.flux_err,
        "amplitude": st.flux * _INV_SQRT_2PI / st.sigma,
        "background": st.background + continuum,
        "snr": np.where(np.isfinite(snr), snr, np.nan),
        "reduced_chi2": st.redchi,
        "flags": flags,
        "fwhm_expected": expected,
    })
    table = table[inside].sort_values("x", kind="stable").reset_index(drop=True)
    table = _drop_duplicates(table, 0.5 * table["fwhm_expected"].to_numpy())
    return PeakTable(table=table, fwhm_typical=float(typical), width_model=widths, x_offset=float(x_offset))


def _drop_duplicates(table: pd.DataFrame, tolerance: np.ndarray) -> pd.DataFrame:
    """Of two fitted centres closer than ``tolerance``, keep the brighter and flag it POOR_FIT."""
    if len(table) < 2:
        return table
    x = table["x"].to_numpy()
    close = np.flatnonzero(np.diff(x) < tolerance[1:])
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


def _empty_frame() -> pd.DataFrame:
    return pd.DataFrame({name: pd.Series(dtype=np.int64 if name == "flags" else float) for name in COLUMNS})
