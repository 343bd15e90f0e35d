"""Measuring arc lines in bands of rows along the slit: the working parts of
:func:`wavecal.tracing.trace_lines` (steps 1-3 of :mod:`wavecal.tracing`'s method).

The frame is seen with the slit along axis 0 (:class:`SpatialFirst`); the rows are divided into
bands (:func:`split_bands`), and the bands measured from the reference row outwards
(:func:`follow`) into a :class:`TraceState`. Each band's line profile is the robust mean of its
normalised rows, fitted by the shared line-profile fitter :mod:`wavecal._line_fit`.
"""
from __future__ import annotations

import math

import numpy as np
from numpy.polynomial import legendre

from ._line_fit import FWHM_PER_SIGMA, fit_windows
from .frames import Frame
from .slit_shift import fit_shift_model

__all__ = ["FLOOR_PX", "MIN_BAND_SNR", "SpatialFirst", "TraceState", "follow", "split_bands"]

#: At most this many bands along the slit.
_MAX_BANDS = 32
#: Fewest rows in a band.
_MIN_BAND_ROWS = 3
#: Smallest signal-to-noise ratio of a band measurement that counts.
MIN_BAND_SNR = 4.0
#: Floor (pixels) added in quadrature to each band centre's uncertainty in the model fit.
FLOOR_PX = 0.01
#: Pixels deviating from their band's median by more than this many standard deviations (plus
#: the allowance for a sliding line) are left out of the band's mean.
_REJECT_SIGMA = 5.0
#: Allowance (pixels) for a line sliding along the dispersion within a band.
_SLIDE_PX = 1.0
_HUGE = np.float32(1e30)


class SpatialFirst:
    """The frame's arrays with the slit along axis 0, and its pixel origin."""

    def __init__(self, frame: Frame) -> None:
        flip = frame.dispersion_axis == 0
        self.data, self.variance, self.bad, self.saturated = (
            (a.T if flip else a) for a in (frame.data, frame.variance, frame.bad, frame.saturated))
        self.n_rows, self.n_disp = self.data.shape
        self.x0 = int(frame.origin[frame.dispersion_axis])
        self.y0 = int(frame.origin[1 - frame.dispersion_axis])



def split_bands(start: int, stop: int, band_rows: int | None) -> np.ndarray:
    """Row indices of each band, shape (B, longest band), padded with -1."""
    n = stop - start
    if band_rows is None:
        count = max(2, min(_MAX_BANDS, n // _MIN_BAND_ROWS))
    else:
        if band_rows < 1:
            msg = f"band_rows must be positive, got {band_rows}"
            raise ValueError(msg)
        count = max(1, n // int(band_rows))
    edges = np.round(np.linspace(start, stop, count + 1)).astype(int)
    size = int(np.max(np.diff(edges)))
    out = np.full((count, size), -1)
    for k in range(count):
        out[k, :edges[k + 1] - edges[k]] = np.arange(edges[k], edges[k + 1])
    return out



def follow(state: TraceState, lines, index, y_index, reference, fwhm, view) -> float:
    """Measure the bands in stages of doubling distance from the reference row; return the
    typical FWHM within a band."""
    distance = np.abs(y_index - reference)
    band_height = float(np.max(np.sum(state.bands >= 0, axis=1)))
    radius = max(1.5 * band_height, 16.0)
    done = np.zeros(distance.size, bool)
    band_fwhm = fwhm
    model = None
    stage = 0
    while not done.all():
        todo = np.flatnonzero(~done & (distance <= radius))
        if todo.size == 0:
            radius *= 2.0
            continue
        if model is None:
            predicted = np.repeat(index[:, None], todo.size, axis=1)
            search = 1.0 + 0.75 * fwhm
        else:
            predicted = model(todo)
            search = 1.0 + 0.5 * band_fwhm
        state.measure(lines, todo, predicted, search, band_fwhm)
        if not done.any():
            band_fwhm = state.typical_fwhm(fwhm)
        done[todo] = True
        model = _interim_model(state, lines, index, y_index, reference, view, deep=stage > 0)
        radius *= 2.0
        stage += 1
    return band_fwhm



def _interim_model(state: TraceState, lines, index, y_index, reference, view, *, deep: bool):
    """A function giving the predicted centres (frame index) of ``lines`` in given bands, from
    a model fitted to the measurements so far (a line not yet measured is predicted from its
    start position); the start positions themselves while too little is measured."""
    good = state.good[lines]
    if good.sum() < 4:
        return lambda todo: np.repeat(index[:, None], todo.size, axis=1)
    half = max(0.5 * (np.max(y_index) - np.min(y_index)), 1.0)
    line_id, band_id = np.nonzero(good)
    n_lines = int(np.unique(line_id).size)
    n_band = int(np.unique(band_id).size)
    degree_y = min(2 if deep else 1, n_band - 1)
    degree_x = min(2 if deep else 1, n_lines - 1)
    if degree_y < 1:
        return lambda todo: np.repeat(index[:, None], todo.size, axis=1)
    x = state.x[lines][good]
    sigma = np.hypot(state.x_err[lines][good], FLOOR_PX)
    t = (y_index[band_id] - reference) / half
    lo, hi = 0.0, view.n_disp - 1.0
    fit = fit_shift_model(line_id, x, sigma, t, index, (lo, hi), degree_x, degree_y, len(lines))
    coef, ref = fit.coefficients, np.where(np.isfinite(fit.reference), fit.reference, index)
    u = (2.0 * ref - (lo + hi)) / (hi - lo)

    def predict(todo):
        powers = ((y_index[todo] - reference) / half)[:, None] ** np.arange(1, degree_y + 1)
        return ref[:, None] + legendre.legvander(u, degree_x) @ coef @ powers.T

    return predict



class TraceState:
    """The band measurements of :func:`~wavecal.tracing.trace_lines` as they are filled in, and each traced
    line's flux in every row, from which the slit profile is made."""

    def __init__(self, view: SpatialFirst, bands, x, x_err, good) -> None:
        self.view, self.bands, self.x, self.x_err, self.good = view, bands, x, x_err, good
        self.fwhm = np.full(x.shape, np.nan)
        self.row_flux = np.full((x.shape[0], view.n_rows), np.nan)

    def typical_fwhm(self, fallback: float) -> float:
        values = self.fwhm[self.good]
        return float(np.median(values)) if values.size else fallback

    def slit_profile(self, start: int, stop: int) -> np.ndarray:
        """Share of the light in rows ``start .. stop - 1`` (maximum 1): the median over the
        traced lines of each row's flux relative to the line's median row; 1 where unknown."""
        flux = self.row_flux[:, start:stop]
        measured = np.isfinite(flux).any(axis=1)
        if not measured.any():
            return np.ones(stop - start)
        flux = flux[measured]
        median = np.nanmedian(flux, axis=1, keepdims=True)
        # a line whose median row holds no light says nothing about the profile
        flux = np.divide(flux, median, out=np.full(flux.shape, np.nan), where=median > 0)
        known = np.isfinite(flux).any(axis=0)
        profile = np.ones(stop - start)
        profile[known] = np.nanmedian(flux[:, known], axis=0)
        top = np.max(profile)
        return np.clip(profile / top, 0.02, 1.0) if top > 0 else np.ones(stop - start)

    def measure(self, lines, bands, predicted, search: float, fwhm: float) -> None:
        """Fit every (line, band) pair of ``lines`` x ``bands`` around ``predicted`` (frame
        index, shape (len(lines), len(bands))) and store the results."""
        view = self.view
        li, bi = np.meshgrid(lines, bands, indexing="ij")
        li, bi, centre = li.ravel(), bi.ravel(), np.asarray(predicted, dtype=float).ravel()
        ok = np.isfinite(centre) & (centre > -search) & (centre < view.n_disp - 1 + search)
        li, bi, centre = li[ok], bi[ok], centre[ok]
        if li.size == 0:
            return
        half = math.ceil(1.5 * fwhm) + 1
        reach = math.ceil(search)
        width = half + reach + 1
        first = np.round(centre).astype(int) - width
        cols = first[:, None] + np.arange(2 * width + 1)
        rows = self.bands[bi]
        block = _Block(view, rows, cols)
        flux = block.row_flux()
        weight = _band_weights(flux, bi)
        keep_rows = rows >= 0
        self.row_flux[li[:, None].repeat(rows.shape[1], axis=1)[keep_rows], rows[keep_rows]] = \
            flux[keep_rows]
        profile, variance, usable = block.profile(weight)
        plateau = _plateau(block.saturated.any(axis=1), centre - first, reach + half)
        clipped = np.isfinite(plateau)
        peak = np.where(clipped, np.round(np.where(clipped, plateau, 0.0)).astype(int),
                        _locate(profile, usable, centre - first, reach))
        take = np.clip(peak[:, None] + np.arange(-half, half + 1), 0, profile.shape[1] - 1)
        y = np.take_along_axis(profile, take, axis=1)
        var = np.take_along_axis(variance, take, axis=1)
        use = np.take_along_axis(usable, take, axis=1)
        start = np.where(clipped, half + np.where(clipped, plateau, 0.0) - peak, _refine(y, half))
        fit = fit_windows(y, var, use, start, fwhm / FWHM_PER_SIGMA, (0.15, y.shape[1] / 2.0))
        offset = first + peak - half
        n_use = use.sum(axis=1)
        sigma_ok = (fit.sigma * FWHM_PER_SIGMA >= 0.5) & (fit.sigma < 0.6 * half)
        accept = (fit.ok & (n_use >= 6) & (fit.flux > MIN_BAND_SNR * fit.flux_err)
                  & (np.abs(fit.x0 - half) <= 1.5) & sigma_ok & np.isfinite(fit.x_err))
        self.x[li, bi] = np.where(accept, fit.x0 + offset, np.nan)
        self.x_err[li, bi] = np.where(accept, fit.x_err, np.nan)
        self.fwhm[li, bi] = np.where(accept, fit.sigma * FWHM_PER_SIGMA, np.nan)
        self.good[li, bi] = accept



class _Block:
    """The pixels of each unit's window: its band's rows by the window's columns."""

    def __init__(self, view: SpatialFirst, rows: np.ndarray, cols: np.ndarray) -> None:
        self.inside = (cols >= 0) & (cols < view.n_disp)
        c = np.clip(cols, 0, view.n_disp - 1)[:, None, :]
        r = np.clip(rows, 0, view.n_rows - 1)[:, :, None]
        self.data = view.data[r, c]
        self.variance = view.variance[r, c]
        self.bad = view.bad[r, c] | (rows < 0)[:, :, None] | ~self.inside[:, None, :]
        self.saturated = view.saturated[r, c] & ~(rows < 0)[:, :, None] & self.inside[:, None, :]

    def row_flux(self) -> np.ndarray:
        """Each row's flux in the window above the median of its two outermost columns on
        each side, shape (U, R); NaN for rows with bad pixels."""
        edges = np.concatenate([self.data[:, :, :2], self.data[:, :, -2:]], axis=2)
        level = np.median(edges, axis=2)
        flux = np.sum(self.data[:, :, 2:-2] - level[:, :, None], axis=2, dtype=np.float64)
        return np.where((self.bad | self.saturated).any(axis=2), np.nan, flux)

    def profile(self, weight: np.ndarray):
        """Robust mean over the band's rows of the pixels divided by the rows' ``weight`` (U, R):
        see the module docstring, step 1. Returns the profile, its variance and which columns
        are usable, each (U, C). Saturated pixels are left out like bad ones: a saturated
        line is located by its wings."""
        w = np.maximum(weight, 0.02).astype(np.float32)[:, :, None]
        norm = self.data / w
        var = self.variance / (w * w)
        bad = self.bad | self.saturated
        alternate = np.where(np.arange(bad.shape[1]) % 2 == 0, _HUGE, -_HUGE).astype(np.float32)
        median = np.median(np.where(bad, alternate[None, :, None], norm), axis=1)
        slope = np.zeros_like(median)
        slope[:, 1:-1] = 0.5 * np.abs(median[:, 2:] - median[:, :-2])
        tolerance = _REJECT_SIGMA * np.sqrt(var) + _SLIDE_PX * slope[:, None, :]
        keep = ~bad & (np.abs(norm - median[:, None, :]) <= tolerance)
        n_keep = np.sum(keep, axis=1)
        safe = np.maximum(n_keep, 1)
        mean = np.sum(np.where(keep, norm, 0.0), axis=1, dtype=np.float64) / safe
        variance = np.sum(np.where(keep, var, 0.0), axis=1, dtype=np.float64) / safe ** 2
        usable = (n_keep >= 2) & (np.abs(median) < _HUGE / 2) & self.inside
        return np.where(usable, mean, 0.0), np.where(usable, variance, 1.0), usable


def _band_weights(flux: np.ndarray, band: np.ndarray) -> np.ndarray:
    """Each row's share of the light within its band, the same for every unit of the band: the
    median over the band's units of the row flux relative to the unit's mean row (1 where it
    cannot be told)."""
    finite = np.isfinite(flux)
    count = finite.sum(axis=1, keepdims=True)
    mean = np.where(count > 0, np.where(finite, flux, 0.0).sum(axis=1, keepdims=True)
                    / np.maximum(count, 1), np.nan)
    positive = np.isfinite(mean) & (mean > 0)
    relative = np.where(positive, flux / np.where(positive, mean, 1.0), np.nan)
    weight = np.ones_like(flux)
    for b in np.unique(band):
        units = band == b
        values = relative[units]
        known = np.isfinite(values).any(axis=0)
        if known.any():
            row = np.ones(values.shape[1])
            row[known] = np.nanmedian(values[:, known], axis=0)
            weight[units] = np.where(np.isfinite(row) & (row > 0), row, 1.0)
    return weight


def _locate(profile: np.ndarray, usable: np.ndarray, centre: np.ndarray, reach: int) -> np.ndarray:
    """Column of the brightest point (3-pixel running sum) within ``reach`` of ``centre``."""
    n = profile.shape[1]
    smooth = profile.copy()
    smooth[:, 1:-1] += profile[:, :-2] + profile[:, 2:]
    col = np.arange(n)[None, :]
    near = np.abs(col - centre[:, None]) <= reach + 0.5
    score = np.where(near & usable, smooth, -np.inf)
    return np.argmax(score, axis=1)


def _plateau(clipped: np.ndarray, centre: np.ndarray, reach: int) -> np.ndarray:
    """Middle column of the saturated pixels within ``reach`` of ``centre`` (NaN where none):
    the centre of a saturated line's flat top, from which its wings are fitted."""
    col = np.arange(clipped.shape[1])[None, :]
    near = clipped & (np.abs(col - centre[:, None]) <= reach + 0.5)
    count = near.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        middle = np.sum(np.where(near, col, 0), axis=1) / count
    return np.where(count > 0, middle, np.nan)


def _refine(y: np.ndarray, half: int) -> np.ndarray:
    """Starting centre: the middle pixel moved by a parabola through it and its neighbours."""
    a, b, c = y[:, half - 1], y[:, half], y[:, half + 1]
    curvature = 2.0 * b - a - c
    step = np.where(curvature > 0, 0.5 * (c - a) / np.where(curvature > 0, curvature, 1.0), 0.0)
    return half + np.clip(step, -0.5, 0.5)
