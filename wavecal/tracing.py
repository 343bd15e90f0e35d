"""Arc lines along the slit: follow each line through the illuminated rows and model its shift.

On a long-slit frame the image of an arc line is seldom a straight line along the spatial axis:
it is tilted and curved. This module follows the lines through the slit (:func:`trace_lines`,
the band measurements in :mod:`wavecal._trace_bands`), fits a smooth two-dimensional model of
how their positions shift with slit position (:func:`fit_slit_shift`, giving a
:class:`~wavecal.slit_shift.SlitShift`), and refers a spectrum's line centres to one reference
row (:func:`refer_peaks`) or straightens the frame (:func:`straighten`) when the lines are
smeared in the sum over the slit (:func:`smeared`). It extracts no spectrum and finds no peaks:
the calibration pipeline (:mod:`wavecal.calibrate`) gives it the peaks of a narrow central band
(:func:`central_rows`) and extracts the straightened frame again.

Coordinates
-----------
``x`` is the 0-based pixel along the dispersion axis of the raw frame as read (binned), ``y``
the 0-based pixel along its spatial axis, the other numpy axis ("row" below means the pixels at
one ``y``, whichever axis that is). A line at ``x`` on the *reference row* ``y_ref`` (the centre
of the traced rows) lies at ``x + Δ(x, y)`` on row ``y``; ``Δ(x, y_ref) = 0``.

Method
------
1. **Bands.** The rows are divided into bands of a few rows. In a window around each line,
   each row's pixels are divided by the row's share of the light: the median over the band's
   lines of the row's flux in their windows relative to their mean row (so that a cosmic ray
   in one window does not count). A pixel deviating from the median over the band's rows of
   its column by more than five times its noise, plus what a slide of the line by a pixel
   would change, is left out (a cosmic ray or hot pixel), as are bad and saturated pixels;
   the others are averaged. A saturated line is centred on its flat top and fitted by its
   wings. As the line moves slowly and evenly along the slit, the mean of the normalised
   rows is the line profile at the band's middle row.
2. **Centres.** In each band the line is located near its predicted position and its profile
   fitted with a Gaussian integrated over each pixel plus a constant, by weighted least
   squares (a batched Levenberg-Marquardt iteration; variances from the frame's noise model of
   the pixels averaged). A band measurement counts when the fit converged with a
   signal-to-noise ratio of at least 4, a width between 0.5 px and the window's and a centre
   within 1.5 px of the brightest point.
3. **Following.** Bands are measured from the reference row outwards in stages of doubling
   distance; each stage predicts the positions from the model fitted to the earlier ones, so
   that a strongly tilted or curved line is followed with a narrow search window.
4. **Model.** ``Δ(x, y) = Σ_{i≤p} Σ_{1≤j≤q} c_ij P_i(u) t^j`` with ``P_i`` the Legendre
   polynomials, ``u`` the pixel ``x`` scaled to [-1, 1] over the detector and
   ``t = (y - y_ref) / h``, ``h`` half the traced rows. It is fitted jointly with every line's
   reference-row position by weighted linear least squares (a floor of 0.01 px is added to
   each centre's uncertainty), rejecting points beyond four robust standard deviations. Then
   each line's uncertainties are scaled up by its own scatter about the richest model, when
   larger than they say (a blend or a faint line weighs as it deserves). The degrees, ``p``
   from 0 to 2 and ``q`` from 0 (no shift at all) to 3, minimise the Bayesian information
   criterion ``n ln(χ²/n) + k ln n``; of models within 2 of the minimum the one
   with fewest parameters is taken. The models with one more degree along either axis are
   kept beside it (:attr:`SlitShift.larger <wavecal.slit_shift.SlitShift.larger>`): how far
   they move the shift is the uncertainty of the choice.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ._trace_bands import FLOOR_PX, MIN_BAND_SNR, SpatialFirst, TraceState, follow, split_bands
from .errors import FrameError
from .extract import Spectrum
from .frames import Frame
from .peak_table import PeakFlag, PeakTable
from .profile import InstrumentProfile
from .slit_shift import SlitShift, fit_shift_model

__all__ = ["DOMINANCE", "MIN_SLIT_ROWS", "RECTIFY_SPREAD_PX", "LineTraces", "SlitMeasurement",
           "central_rows", "fit_slit_shift", "follow_lines", "profile_slit_rows", "refer_peaks",
           "smeared", "straighten", "trace_lines"]

#: Fewest illuminated rows for which the slit is traced.
MIN_SLIT_ROWS = 8
#: When the lines' shift varies by more than this (pixels) over the summed rows, the frame is
#: straightened before the one-dimensional spectrum is taken; below it the line centres of the
#: plain sum are corrected by the mean shift.
RECTIFY_SPREAD_PX = 0.5
#: At most this many lines are traced (the brightest).
_MAX_LINES = 80
#: Rejection threshold of the model fit, in robust standard deviations.
_CLIP = 4.0
#: Largest degrees of the shift model along the dispersion and along the slit.
_MAX_DEGREE_X, _MAX_DEGREE_Y = 2, 3
#: Peak flags that keep a line from being traced (a blend is traced when one line dominates it).
_SKIP_FLAGS = int(PeakFlag.POOR_FIT | PeakFlag.EDGE)
#: A line dominates its neighbours when none of them closer than the isolation distance has
#: more than this fraction of its flux. The profile fitted in a band then locks onto the
#: dominant line, and the offset the neighbours cause is the same along the slit (the lines
#: shift together): it goes into the line's reference position, not into the shift. What does
#: vary is that offset with the line's sub-pixel phase in the fitting window; for a neighbour
#: of a quarter of the flux, noise-free fits of two pixel-integrated Gaussians 0.5-4 FWHM
#: apart give at most 0.004, 0.003, 0.010 and 0.018 px for FWHM 2.2, 3, 5 and 9 px (0.02,
#: 0.02, 0.08, 0.23 px for half the flux): about the 0.01 px floor of the model fit.
DOMINANCE = 0.25


# ------------------------------------------------------------------------------------------------
# Results
# ------------------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class LineTraces:
    """Centres of arc lines in bands of rows along the slit.

    Attributes
    ----------
    x_start : ndarray, shape (L,)
        Positions given to :func:`trace_lines` (pixel ``x``).
    traced : ndarray of bool, shape (L,)
        Lines that were followed (isolated or dominating their neighbours, inside the frame).
    y : ndarray, shape (B,)
        Middle row (pixel ``y``) of each band.
    band_edges : ndarray of int, shape (B, 2)
        First and last row (pixel ``y``) of each band.
    x, x_err : ndarray, shape (L, B)
        Fitted centre and its 1-sigma uncertainty from the noise model (NaN where not measured).
    good : ndarray of bool, shape (L, B)
        Measurements that count (see the module docstring).
    reference_row : float
        ``y_ref``, the centre of the traced rows.
    rows : tuple of int
        First and last traced row (pixel ``y``).
    row_weight : ndarray, shape (rows[1] - rows[0] + 1,)
        Share of the slit light in each traced row (maximum 1): the median over the traced
        lines of their flux in the row relative to their median row (a cosmic ray in one line's
        window does not count).
    x_domain : tuple of float
        First and last pixel ``x`` of the frame.
    fwhm : float
        Typical FWHM (pixels) of the lines within a band.
    """

    x_start: np.ndarray
    traced: np.ndarray
    y: np.ndarray
    band_edges: np.ndarray
    x: np.ndarray
    x_err: np.ndarray
    good: np.ndarray
    reference_row: float
    rows: tuple[int, int]
    row_weight: np.ndarray
    x_domain: tuple[float, float]
    fwhm: float

    def to_table(self) -> pd.DataFrame:
        """One row per (line, band): ``line``, ``x_start``, ``y``, ``x``, ``x_err``, ``good``."""
        n_lines, n_bands = self.x.shape
        return pd.DataFrame({
            "line": np.repeat(np.arange(n_lines), n_bands),
            "x_start": np.repeat(self.x_start, n_bands),
            "y": np.tile(self.y, n_lines),
            "x": self.x.ravel(), "x_err": self.x_err.ravel(), "good": self.good.ravel(),
        })

    def summary(self) -> dict[str, Any]:
        """JSON-safe counts: lines given, traced, bands, good measurements, rows, FWHM."""
        return {"n_lines": int(self.x_start.size), "n_traced": int(self.traced.sum()),
                "n_bands": int(self.y.size), "n_good": int(self.good.sum()),
                "rows": [int(self.rows[0]), int(self.rows[1])],
                "reference_row": float(self.reference_row),
                "fwhm": float(self.fwhm) if math.isfinite(self.fwhm) else None}



@dataclass(frozen=True, eq=False)
class SlitMeasurement:
    """What the calibration's slit measurement gives: the spectrum and peaks to calibrate, and the slit model.

    Attributes
    ----------
    spectrum : Spectrum
        The one-dimensional spectrum: the given one, or that of the straightened frame.
    peaks : PeakTable
        Its peaks, with centres referred to the reference row of ``shift``.
    shift : SlitShift or None
        The fitted shift model (None when too few lines could be followed).
    traces : LineTraces or None
        The band centres the model was fitted to.
    straightened : bool
        The frame was straightened before summing (the lines were smeared in the plain sum).
    """

    spectrum: Spectrum
    peaks: PeakTable
    shift: SlitShift | None
    traces: LineTraces | None
    straightened: bool



# ------------------------------------------------------------------------------------------------
# Tracing
# ------------------------------------------------------------------------------------------------

def profile_slit_rows(frame: Frame, profile: InstrumentProfile) -> tuple[int, int] | None:
    """The profile's ``[detector] slit_rows`` as ``[start, stop)`` indices along the frame's
    spatial axis (binned, trimmed: as ``rows`` of :func:`~wavecal.extract.extract_spectrum`),
    or None when the profile gives none or the frame has a single row.

    Only the whole binned pixels inside the unbinned range count; the range is cut to the
    trimmed frame.

    Raises
    ------
    FrameError
        Naming the frame, when none of the rows lies in the trimmed frame.
    """
    span = profile.detector.slit_rows
    axis = 1 - frame.dispersion_axis
    if span is None or frame.data.shape[axis] == 1:
        return None
    binning, origin = frame.binning[axis], frame.origin[axis]
    start = max(-(-span[0] // binning) - origin, 0)
    stop = min(span[1] // binning - origin, frame.data.shape[axis])
    if stop <= start:
        msg = (f"{frame.path or 'frame'}: the profile's slit_rows {list(span)} (unbinned) lie "
               f"outside the frame's {frame.data.shape[axis]} trimmed rows")
        raise FrameError(msg)
    return int(start), int(stop)


def trace_lines(frame: Frame, positions, *, rows: tuple[int, int] | None = None,
                fwhm: float = 3.0, band_rows: int | None = None, neighbours=None,
                flux=None, neighbour_flux=None) -> LineTraces:
    """Follow arc lines through the slit, measuring their centres in bands of rows.

    Parameters
    ----------
    frame : Frame
        The arc frame (either dispersion axis).
    positions : array_like
        Pixel ``x`` of the lines near the reference row (e.g. peak centres of the spectrum
        summed over the slit).
    rows : (int, int), optional
        ``[start, stop)`` indices along the frame's spatial axis to trace (as
        :attr:`Spectrum.rows <wavecal.extract.Spectrum.rows>`); default all.
    fwhm : float
        Typical line FWHM in ``positions``' spectrum (pixels): sets the first search windows.
    band_rows : int, optional
        Rows per band; default: the rows divided into at most 32 bands of at least 3 rows.
    neighbours : array_like, optional
        Pixel ``x`` of other lines, bright or faint: a line with a neighbour (or another of
        ``positions``) closer than ``2.5 fwhm + 2`` pixels is not traced, unless it dominates
        it (see ``flux``).
    flux, neighbour_flux : array_like, optional
        Fluxes of ``positions`` and of ``neighbours`` (any common unit). A line is traced
        despite a close neighbour whose flux is at most :data:`DOMINANCE` times its own (a
        dominated blend). Without ``flux`` every close neighbour counts, and so does one
        whose flux is not given or not finite.

    Returns
    -------
    LineTraces

    Raises
    ------
    ValueError
        For fewer than :data:`MIN_SLIT_ROWS` rows, invalid rows, a non-positive FWHM or fluxes
        not matching their positions.
    """
    if not (np.isfinite(fwhm) and fwhm > 0):
        msg = f"fwhm must be a positive number, got {fwhm}"
        raise ValueError(msg)
    view = SpatialFirst(frame)
    start, stop = (0, view.n_rows) if rows is None else (int(rows[0]), int(rows[1]))
    if not 0 <= start < stop <= view.n_rows:
        msg = f"rows {rows} must satisfy 0 <= start < stop <= {view.n_rows}"
        raise ValueError(msg)
    if stop - start < MIN_SLIT_ROWS:
        msg = f"{stop - start} rows are too few to trace lines along the slit (at least {MIN_SLIT_ROWS})"
        raise ValueError(msg)
    x_start = np.atleast_1d(np.asarray(positions, dtype=float))
    others = np.atleast_1d(np.asarray([] if neighbours is None else neighbours, dtype=float))
    own = _fluxes(flux, x_start.size, 0.0, "flux")
    their = _fluxes(neighbour_flux, others.size, math.inf, "neighbour_flux")
    index = x_start - view.x0
    traced = _dominant(index, own, others - view.x0, their, 2.5 * fwhm + 2.0) & (index >= 0) & (
        index <= view.n_disp - 1)

    bands = split_bands(start, stop, band_rows)
    y_index = 0.5 * (bands[:, 0] + bands.max(axis=1))
    reference = 0.5 * (start + stop - 1)
    n_lines, n_bands = x_start.size, bands.shape[0]
    x = np.full((n_lines, n_bands), np.nan)
    x_err = np.full((n_lines, n_bands), np.nan)
    good = np.zeros((n_lines, n_bands), bool)
    state = TraceState(view, bands, x, x_err, good)
    lines = np.flatnonzero(traced)
    y_raw = y_index + view.y0
    band_fwhm = follow(state, lines, index[lines], y_index, reference, fwhm, view) \
        if lines.size else math.nan
    edges = np.stack([bands[:, 0], bands.max(axis=1)], axis=1) + view.y0
    return LineTraces(x_start=x_start, traced=traced, y=y_raw, band_edges=edges, x=x + view.x0,
                      x_err=x_err, good=good, reference_row=reference + view.y0,
                      rows=(start + view.y0, stop - 1 + view.y0),
                      row_weight=state.slit_profile(start, stop),
                      x_domain=(float(view.x0), float(view.x0 + view.n_disp - 1)),
                      fwhm=float(band_fwhm))



def _fluxes(values, size: int, missing: float, name: str) -> np.ndarray:
    """Fluxes as a float array of ``size`` (``missing`` where not given or not finite)."""
    if values is None:
        return np.full(size, missing)
    out = np.atleast_1d(np.asarray(values, dtype=float))
    if out.shape != (size,):
        msg = f"{name} has {out.size} values for {size} lines"
        raise ValueError(msg)
    return np.where(np.isfinite(out), out, missing)


def _dominant(x: np.ndarray, flux: np.ndarray, others: np.ndarray, other_flux: np.ndarray,
              distance: float) -> np.ndarray:
    """True where every other entry of ``x`` and every one of ``others`` within ``distance``
    has at most :data:`DOMINANCE` times the line's flux (a value in both counts once, with its
    flux in ``x``)."""
    every, first = np.unique(np.concatenate([x, others]), return_index=True)
    every_flux = np.concatenate([flux, other_flux])[first]
    lo = np.searchsorted(every, x - distance, side="left")
    hi = np.searchsorted(every, x + distance, side="right")
    out = np.empty(x.size, bool)
    for k in range(x.size):
        near = slice(lo[k], hi[k])
        bright = (every_flux[near] > DOMINANCE * flux[k]) & (every[near] != x[k])
        out[k] = not bright.any()
    return out



def fit_slit_shift(traces: LineTraces, *, max_degree_x: int = _MAX_DEGREE_X,
                   max_degree_y: int = _MAX_DEGREE_Y) -> SlitShift | None:
    """Fit the shift model to traced line centres (see the module docstring, step 4).

    Parameters
    ----------
    traces : LineTraces
        From :func:`trace_lines`.
    max_degree_x, max_degree_y : int
        Largest degrees tried along the dispersion (Legendre) and along the slit (power).

    Returns
    -------
    SlitShift or None
        None when fewer than two lines or two bands have accepted centres.
    """
    line_id, band_id = np.nonzero(traces.good)
    if np.unique(line_id).size < 2 or np.unique(band_id).size < 2:
        return None
    x = traces.x[line_id, band_id]
    sigma = np.hypot(traces.x_err[line_id, band_id], FLOOR_PX)
    y = traces.y[band_id]
    reference = float(traces.reference_row)
    half = max(0.5 * (traces.rows[1] - traces.rows[0]), 1.0)
    t = (y - reference) / half
    n_lines = traces.x.shape[0]
    start = traces.x_start
    domain = traces.x_domain

    def limits(keep):
        # a line beyond those the dependence along the dispersion needs is left to check it
        lines = np.unique(line_id[keep]).size
        bands = np.unique(band_id[keep]).size
        return max(min(max_degree_x, lines - 2), 0), min(max_degree_y, bands - 1)

    keep = np.ones(x.size, bool)
    for _ in range(8):
        dx, dy = limits(keep)
        fit = fit_shift_model(line_id, x, sigma, t, start, domain, dx, dy, n_lines, keep)
        z = fit.residual / sigma
        scale = max(1.4826 * float(np.median(np.abs(z[keep]))), 1e-6)
        new = np.abs(z) <= _CLIP * scale
        counts = np.bincount(line_id[new], minlength=n_lines)
        new &= counts[line_id] >= 3
        if np.array_equal(new, keep) or new.sum() < 6:
            break
        keep = new
    dx_max, dy_max = limits(keep)
    sigma = _with_line_scatter(line_id, sigma, fit.residual, keep, n_lines)
    n = int(keep.sum())
    n_used_lines = int(np.unique(line_id[keep]).size)
    candidates = []
    for dy in range(dy_max + 1):
        for dx in range(dx_max + 1 if dy else 1):
            fit = fit_shift_model(line_id, x, sigma, t, start, domain, dx, dy, n_lines, keep)
            k = n_used_lines + (dx + 1) * dy
            if n <= k:
                continue
            bic = n * math.log(max(fit.chi2, 1e-300) / n) + k * math.log(n)
            candidates.append((bic, k, dy, dx, fit))
    if not candidates:
        return None
    best_bic = min(c[0] for c in candidates)
    _, _, dy, dx, fit = min((c for c in candidates if c[0] <= best_bic + 2.0),
                            key=lambda c: (c[1], c[2]))
    coefficients = fit.coefficients.copy()
    coefficients.setflags(write=False)
    bands_used = np.unique(band_id[keep])
    covered = (float(traces.band_edges[bands_used, 0].min()),
               float(traces.band_edges[bands_used, 1].max()))
    rms = float(np.sqrt(np.mean(fit.residual[keep] ** 2)))
    shift = SlitShift(reference_row=reference, y_scale=half, x_domain=domain,
                      coefficients=coefficients, rows_covered=covered, rms_px=rms,
                      n_lines=n_used_lines, n_points=n, n_rejected=int(x.size - n),
                      covariance=fit.covariance)
    larger = tuple(
        dataclasses.replace(shift, coefficients=other.coefficients, covariance=other.covariance)
        for other in (fit_shift_model(line_id, x, sigma, t, start, domain, ax, ay, n_lines, keep)
                      for ax, ay in ((dx + 1, dy), (dx, dy + 1))
                      if ax < n_used_lines and ay < bands_used.size
                      and n > n_used_lines + (ax + 1) * ay))
    return dataclasses.replace(shift, larger=larger)


def _with_line_scatter(line_id, sigma, residual, keep, n_lines: int) -> np.ndarray:
    """Uncertainties of each line's band centres scaled up by the line's own scatter about the
    model, when larger than its noise says (``sqrt`` of its reduced chi-square): a blend or a
    faint line measured less well than its noise model claims then weighs as it deserves."""
    z2 = np.where(keep, (residual / sigma) ** 2, 0.0)
    count = np.bincount(line_id[keep], minlength=n_lines).astype(float)
    dof = np.maximum(count - 1.0, 1.0)  # each line has its reference position
    scale = np.sqrt(np.maximum(np.bincount(line_id, z2, n_lines) / dof, 1.0))
    return sigma * scale[line_id]


# ------------------------------------------------------------------------------------------------
# Referring a frame's spectrum to the reference row
# ------------------------------------------------------------------------------------------------

def central_rows(rows: tuple[int, int]) -> tuple[int, int]:
    """``[start, stop)`` of the narrow band of rows around the middle of ``rows`` (an eighth of
    them, 8 to 32 rows) whose spectrum's peaks :func:`follow_lines` follows: even tilted or
    curved lines are sharp there."""
    start, stop = rows
    height = int(np.clip((stop - start) // 8, MIN_SLIT_ROWS, 32))
    low = (start + stop - height) // 2
    return low, low + height


def follow_lines(frame: Frame, central: PeakTable,
                 rows: tuple[int, int]) -> tuple[LineTraces, SlitShift] | None:
    """Trace the bright lines of a central band over ``rows`` and fit the shift model.

    The peaks to follow are those of ``central`` that a band can measure: bright enough that
    their signal-to-noise ratio, scaled from the central band's rows to a band's, reaches the
    band measurements' threshold (the brightest, at most 80), unflagged or saturated (located
    by their wings) or blends that one line dominates (:data:`DOMINANCE`); all of
    ``central``'s peaks count as their neighbours.

    Parameters
    ----------
    frame : Frame
        The arc frame.
    central : PeakTable
        The peaks of the spectrum of :func:`central_rows` of ``rows``.
    rows : (int, int)
        ``[start, stop)`` indices along the frame's spatial axis to trace (the summed rows).

    Returns
    -------
    (LineTraces, SlitShift) or None
        None when ``central`` has no peak or too few lines could be followed.
    """
    if len(central) == 0:
        return None
    fwhm = float(central.fwhm_typical) if np.isfinite(central.fwhm_typical) else 3.0
    band_rows = (rows[1] - rows[0]) / split_bands(rows[0], rows[1], None).shape[0]
    central_height = np.subtract(*central_rows(rows)[::-1])
    chosen = _candidates(central, MIN_BAND_SNR * math.sqrt(central_height / band_rows))
    traces = trace_lines(frame, chosen["x"].to_numpy(float), rows=rows, fwhm=fwhm,
                         neighbours=central.table["x"].to_numpy(float),
                         flux=chosen["flux"].to_numpy(float),
                         neighbour_flux=central.table["flux"].to_numpy(float))
    shift = fit_slit_shift(traces)
    return None if shift is None else (traces, shift)


def _candidates(peaks: PeakTable, min_snr: float) -> pd.DataFrame:
    """Rows of the peaks of signal-to-noise ratio ``min_snr`` or more, unflagged but for
    saturation and blends (the brightest, at most 80, sorted by ``x``): whether a blend is
    dominated is decided by :func:`trace_lines`."""
    table = peaks.table
    ok = ((table["flags"].to_numpy(int) & _SKIP_FLAGS) == 0) & (
        table["snr"].to_numpy(float) >= min_snr)
    chosen = table[ok].sort_values("snr", ascending=False).head(_MAX_LINES)
    return chosen.sort_values("x")


def smeared(shift: SlitShift, traces: LineTraces) -> bool:
    """Whether the shift varies by more than :data:`RECTIFY_SPREAD_PX` over the traced rows
    anywhere along the dispersion: the lines are then smeared in the plain sum over the slit,
    and the frame is to be straightened (:func:`straighten`) before it is summed."""
    grid = shift.shift_grid(np.linspace(*traces.x_domain, 33), _traced_rows(traces))
    return bool(np.max(np.ptp(grid, axis=0)) > RECTIFY_SPREAD_PX)


def refer_peaks(peaks: PeakTable, shift: SlitShift, traces: LineTraces) -> PeakTable:
    """Peaks of the plain sum over the traced rows with centres moved to the reference row:
    minus the mean shift over the summed rows, each weighted by its share of the light
    (``traces.row_weight``)."""
    x = peaks.table["x"].to_numpy(float)
    weight = traces.row_weight
    mean = weight @ shift.shift_grid(x, _traced_rows(traces)) / np.sum(weight)
    return dataclasses.replace(peaks, table=peaks.table.assign(x=x - mean))


def _traced_rows(traces: LineTraces) -> np.ndarray:
    return np.arange(traces.rows[0], traces.rows[1] + 1)


def straighten(frame: Frame, shift: SlitShift, rows: tuple[int, int]) -> Frame:
    """Rows ``[start, stop)`` of the frame resampled so that every line lies at its
    reference-row position: each row by linear interpolation at ``x + Δ(x, y)``, variance and
    masks alike (the result has its dispersion along axis 1 and its origin at ``start``)."""
    start, stop = rows
    view = SpatialFirst(frame)
    n, m = view.n_disp, stop - start
    source = shift.shift_grid(np.arange(n) + view.x0, np.arange(start, stop) + view.y0
                              ).astype(np.float32)
    source += np.arange(n, dtype=np.float32)
    left = np.floor(source)
    frac = source - left
    index = left.astype(np.int32)
    inside = (index >= 0) & (index <= n - 2)
    np.clip(index, 0, n - 2, out=index)
    index += (np.arange(m, dtype=np.int32) * n)[:, None]
    index = index.ravel()
    upper = index + 1

    def pick(array, at):
        block = array[start:stop] if frame.dispersion_axis == 1 else array[:, start:stop].T
        return np.ascontiguousarray(block).ravel().take(at).reshape(m, n)

    def blend(array):
        low = pick(array, index)
        out = pick(array, upper)
        out -= low
        out *= frac
        out += low
        return out

    code = frame.bad.astype(np.uint8) | (frame.saturated.astype(np.uint8) << 1)
    flags = pick(code, index) | np.where(frac > 0, pick(code, upper), np.uint8(0))
    data = np.where(inside, blend(frame.data), np.float32(0.0))
    variance = np.where(inside, blend(frame.variance), np.float32(1.0))
    bad = ((flags & 1) > 0) | ~inside
    saturated = (flags & 2) > 0
    for array in (data, variance, bad, saturated):
        array.setflags(write=False)
    binning = (frame.binning[1 - frame.dispersion_axis], frame.binning[frame.dispersion_axis])
    return Frame(path=frame.path, data=data, variance=variance, bad=bad, saturated=saturated,
                 header=frame.header, dispersion_axis=1, origin=(view.y0 + start, view.x0),
                 binning=binning)