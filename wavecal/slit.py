"""Arc lines along the slit: follow each line through the illuminated rows and model its shift.

On a long-slit frame the image of an arc line is seldom a straight line along the spatial axis:
it is tilted and curved. This module follows the lines through the slit (:func:`trace_lines`),
fits a smooth two-dimensional model of how their positions shift with slit position
(:func:`fit_slit_shift`, giving a :class:`SlitShift`), and refers a frame's line centres to one
reference row, straightening the frame first when the lines are smeared in the sum over the
slit (:func:`measure_slit`).

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
   would change, is left out (a cosmic ray or hot pixel), as are bad pixels; the others are
   averaged. As the line moves slowly and evenly along the slit, the mean of the normalised
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
   with fewest parameters is taken.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.polynomial import legendre
from scipy.special import ndtr

from .errors import FrameError
from .extract import Spectrum, extract_spectrum
from .frames import Frame
from .peaks import PeakFlag, PeakTable, find_peaks
from .profile import InstrumentProfile

__all__ = ["DOMINANCE", "MIN_SLIT_ROWS", "RECTIFY_SPREAD_PX", "LineTraces", "SlitMeasurement", "SlitShift",
           "fit_slit_shift", "measure_slit", "profile_slit_rows", "trace_lines"]

#: Fewest illuminated rows for which the slit is traced.
MIN_SLIT_ROWS = 8
#: When the lines' shift varies by more than this (pixels) over the summed rows, the frame is
#: straightened before the one-dimensional spectrum is taken; below it the line centres of the
#: plain sum are corrected by the mean shift.
RECTIFY_SPREAD_PX = 0.5
#: At most this many bands along the slit.
_MAX_BANDS = 32
#: Fewest rows in a band.
_MIN_BAND_ROWS = 3
#: Smallest signal-to-noise ratio of a band measurement that counts.
_MIN_BAND_SNR = 4.0
#: Peak signal-to-noise ratio (in the spectrum the lines were found in) of lines worth tracing.
_MIN_TRACE_SNR = 10.0
#: At most this many lines are traced (the brightest).
_MAX_LINES = 80
#: Floor (pixels) added in quadrature to each band centre's uncertainty in the model fit.
_FLOOR_PX = 0.01
#: Rejection threshold of the model fit, in robust standard deviations.
_CLIP = 4.0
#: Largest degrees of the shift model along the dispersion and along the slit.
_MAX_DEGREE_X, _MAX_DEGREE_Y = 2, 3
#: Pixels deviating from their band's median by more than this many standard deviations (plus
#: the allowance for a sliding line) are left out of the band's mean.
_REJECT_SIGMA = 5.0
#: Allowance (pixels) for a line sliding along the dispersion within a band.
_SLIDE_PX = 1.0
#: Peak flags that keep a line from being traced (a blend is traced when one line dominates it).
_SKIP_FLAGS = int(PeakFlag.POOR_FIT | PeakFlag.SATURATED | PeakFlag.EDGE)
#: A line dominates its neighbours when none of them closer than the isolation distance has
#: more than this fraction of its flux. The profile fitted in a band then locks onto the
#: dominant line, and the offset the neighbours cause is the same along the slit (the lines
#: shift together): it goes into the line's reference position, not into the shift. What does
#: vary is that offset with the line's sub-pixel phase in the fitting window; for a neighbour
#: of a quarter of the flux, noise-free fits of two pixel-integrated Gaussians 0.5-4 FWHM
#: apart give at most 0.004, 0.003, 0.010 and 0.018 px for FWHM 2.2, 3, 5 and 9 px (0.02,
#: 0.02, 0.08, 0.23 px for half the flux): about the 0.01 px floor of the model fit.
DOMINANCE = 0.25
_HUGE = np.float32(1e30)
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


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
class SlitShift:
    """How far a line's position moves with slit position: ``Δ(x, y)``.

    ``Δ(x, y) = Σ_ij c_ij P_i(u) t^j`` (``i = 0 .. degree_x``, ``j = 1 .. degree_y``), with ``u``
    the pixel ``x`` mapped from ``x_domain`` onto [-1, 1] and ``t = (y - reference_row) /
    y_scale``. ``x`` is the line's position on the reference row.

    Attributes
    ----------
    reference_row : float
        Row (pixel ``y``) where the shift is zero by definition.
    y_scale : float
        Rows per unit of ``t`` (half the traced rows).
    x_domain : tuple of float
        Pixels mapped onto u = -1 and u = +1.
    coefficients : ndarray, shape (degree_x + 1, degree_y)
        ``c_ij``, pixels; ``degree_y = 0`` (no columns) means no shift at all.
    rows_covered : tuple of float
        First and last row (pixel ``y``) of the traced bands with accepted measurements;
        outside them the model is extrapolated.
    rms_px : float
        RMS of the accepted band centres about the model (pixels).
    n_lines, n_points, n_rejected : int
        Lines and band centres used, and band centres rejected as outliers.
    covariance : ndarray or None
        Covariance of the coefficients (flattened row by row), scaled up by the reduced
        chi-square when it exceeds one; None for a model read from a file (not stored).
    """

    reference_row: float
    y_scale: float
    x_domain: tuple[float, float]
    coefficients: np.ndarray
    rows_covered: tuple[float, float]
    rms_px: float = math.nan
    n_lines: int = 0
    n_points: int = 0
    n_rejected: int = 0
    covariance: np.ndarray | None = None

    @property
    def degree_x(self) -> int:
        """Degree of the Legendre polynomials along the dispersion."""
        return int(self.coefficients.shape[0]) - 1

    @property
    def degree_y(self) -> int:
        """Highest power of the slit position (0: no shift)."""
        return int(self.coefficients.shape[1])

    def _u(self, x):
        lo, hi = self.x_domain
        return (2.0 * np.asarray(x, dtype=float) - (lo + hi)) / (hi - lo)

    def _t_powers(self, y) -> np.ndarray:
        t = (np.asarray(y, dtype=float) - self.reference_row) / self.y_scale
        return t[..., None] ** np.arange(1, self.degree_y + 1)

    def shift(self, x, y) -> np.ndarray:
        """``Δ(x, y)``: position on row ``y`` minus position on the reference row (pixels), for
        a line at ``x`` on the reference row (``x`` and ``y`` broadcast together)."""
        x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        shape = np.broadcast_shapes(x.shape, y.shape)
        if self.degree_y == 0:
            return np.zeros(shape)
        # the y and x factors are formed on the unbroadcast inputs (a column of rows and a row
        # of pixels stay small) and only their products are broadcast
        along_y = self._t_powers(y) @ self.coefficients.T
        along_x = legendre.legvander(self._u(x).ravel(), self.degree_x).reshape(
            x.shape + (self.degree_x + 1,))
        out = np.zeros(shape)
        for k in range(self.degree_x + 1):
            out += along_y[..., k] * along_x[..., k]
        return out

    def shift_sigma_grid(self, x, y) -> np.ndarray:
        """1-sigma uncertainty of ``Δ`` on the grid of the 1-D arrays ``x`` and ``y`` (shape
        ``(len(y), len(x))``), propagated from the coefficients' covariance; NaN when the model
        carries none (read from a file). Zero on the reference row, where ``Δ`` is zero."""
        x, y = np.atleast_1d(np.asarray(x, dtype=float)), np.atleast_1d(np.asarray(y, dtype=float))
        if self.degree_y == 0:
            return np.zeros((y.size, x.size))
        if self.covariance is None:
            return np.full((y.size, x.size), np.nan)
        along_x = legendre.legvander(self._u(x), self.degree_x)  # (nx, dx + 1)
        along_y = self._t_powers(y)  # (ny, dy)
        g = (along_x[None, :, :, None] * along_y[:, None, None, :]).reshape(y.size, x.size, -1)
        return np.sqrt(np.clip(np.einsum("yxi,ij,yxj->yx", g, self.covariance, g), 0.0, None))

    def shift_grid(self, x, y) -> np.ndarray:
        """``Δ`` on the grid of the 1-D arrays ``x`` and ``y``: shape ``(len(y), len(x))``."""
        x, y = np.atleast_1d(np.asarray(x, dtype=float)), np.atleast_1d(np.asarray(y, dtype=float))
        if self.degree_y == 0:
            return np.zeros((y.size, x.size))
        along_y = self._t_powers(y) @ self.coefficients.T
        along_x = legendre.legvander(self._u(x), self.degree_x)
        out = np.zeros((y.size, x.size))
        for k in range(self.degree_x + 1):  # an outer-product sum: faster than BLAS here
            out += along_y[:, k:k + 1] * along_x[:, k]
        return out

    def reference_position(self, x, y, *, iterations: int = 4) -> np.ndarray:
        """Position on the reference row of the line seen at ``x`` on row ``y``.

        Solves ``r + Δ(r, y) = x`` by fixed-point iteration: Δ changes by far less than a
        pixel per pixel along the dispersion, so each step gains orders of magnitude.
        """
        x = np.asarray(x, dtype=float)
        ref = x - self.shift(x, y)
        for _ in range(iterations):
            ref = x - self.shift(ref, y)
        return ref

    def outside(self, y) -> np.ndarray:
        """True for rows outside :attr:`rows_covered` (the model is extrapolated there)."""
        y = np.asarray(y, dtype=float)
        return (y < self.rows_covered[0]) | (y > self.rows_covered[1])

    def summary(self) -> dict[str, Any]:
        """JSON-safe headline facts: degrees, shift at the covered ends, RMS, counts."""
        lo, hi = self.x_domain
        ends = self.shift(np.array([[lo, 0.5 * (lo + hi), hi]]),
                          np.array([[self.rows_covered[0]], [self.rows_covered[1]]]))
        return {"reference_row": float(self.reference_row), "degree_x": self.degree_x,
                "degree_y": self.degree_y,
                "rows_covered": [float(v) for v in self.rows_covered],
                "max_abs_shift_px": float(np.max(np.abs(ends))),
                "rms_px": _finite_or_none(self.rms_px), "n_lines": int(self.n_lines),
                "n_points": int(self.n_points), "n_rejected": int(self.n_rejected)}

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary; :meth:`from_dict` reads it back."""
        return {"model": "sum_ij c_ij P_i(u) t^j, u = x scaled from x_domain to [-1, 1], "
                         "t = (y - reference_row) / y_scale, j >= 1",
                "reference_row": float(self.reference_row), "y_scale": float(self.y_scale),
                "x_domain": [float(v) for v in self.x_domain],
                "degree_x": self.degree_x, "degree_y": self.degree_y,
                "coefficients": [[float(c) for c in row] for row in self.coefficients],
                "rows_covered": [float(v) for v in self.rows_covered],
                "rms_px": _finite_or_none(self.rms_px), "n_lines": int(self.n_lines),
                "n_points": int(self.n_points), "n_rejected": int(self.n_rejected)}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> SlitShift:
        """Inverse of :meth:`to_dict`.

        Raises
        ------
        KeyError, TypeError, ValueError
            When an entry is missing or malformed.
        """
        coefficients = np.array(data["coefficients"], dtype=float).reshape(
            int(data["degree_x"]) + 1, int(data["degree_y"]))
        coefficients.setflags(write=False)
        rms = data.get("rms_px")
        return cls(reference_row=float(data["reference_row"]), y_scale=float(data["y_scale"]),
                   x_domain=_pair(data["x_domain"]), coefficients=coefficients,
                   rows_covered=_pair(data["rows_covered"]),
                   rms_px=math.nan if rms is None else float(rms),
                   n_lines=int(data.get("n_lines", 0)), n_points=int(data.get("n_points", 0)),
                   n_rejected=int(data.get("n_rejected", 0)))


@dataclass(frozen=True, eq=False)
class SlitMeasurement:
    """What :func:`measure_slit` gives: the spectrum and peaks to calibrate, and the slit model.

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


def _finite_or_none(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def _pair(value) -> tuple[float, float]:
    lo, hi = (float(v) for v in value)
    return (lo, hi)


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
    view = _SpatialFirst(frame)
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

    bands = _bands(start, stop, band_rows)
    y_index = 0.5 * (bands[:, 0] + bands.max(axis=1))
    reference = 0.5 * (start + stop - 1)
    n_lines, n_bands = x_start.size, bands.shape[0]
    x = np.full((n_lines, n_bands), np.nan)
    x_err = np.full((n_lines, n_bands), np.nan)
    good = np.zeros((n_lines, n_bands), bool)
    state = _TraceState(view, bands, x, x_err, good)
    lines = np.flatnonzero(traced)
    y_raw = y_index + view.y0
    band_fwhm = _follow(state, lines, index[lines], y_index, reference, fwhm, view) \
        if lines.size else math.nan
    edges = np.stack([bands[:, 0], bands.max(axis=1)], axis=1) + view.y0
    return LineTraces(x_start=x_start, traced=traced, y=y_raw, band_edges=edges, x=x + view.x0,
                      x_err=x_err, good=good, reference_row=reference + view.y0,
                      rows=(start + view.y0, stop - 1 + view.y0),
                      row_weight=state.slit_profile(start, stop),
                      x_domain=(float(view.x0), float(view.x0 + view.n_disp - 1)),
                      fwhm=float(band_fwhm))


class _SpatialFirst:
    """The frame's arrays with the slit along axis 0, and its pixel origin."""

    def __init__(self, frame: Frame) -> None:
        flip = frame.dispersion_axis == 0
        self.data, self.variance, self.bad = ((a.T if flip else a)
                                              for a in (frame.data, frame.variance, frame.bad))
        self.n_rows, self.n_disp = self.data.shape
        self.x0 = int(frame.origin[frame.dispersion_axis])
        self.y0 = int(frame.origin[1 - frame.dispersion_axis])


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


def _bands(start: int, stop: int, band_rows: int | None) -> np.ndarray:
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


def _follow(state: _TraceState, lines, index, y_index, reference, fwhm, view) -> float:
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


def _interim_model(state: _TraceState, lines, index, y_index, reference, view, *, deep: bool):
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
    sigma = np.hypot(state.x_err[lines][good], _FLOOR_PX)
    t = (y_index[band_id] - reference) / half
    lo, hi = 0.0, view.n_disp - 1.0
    fit = _fit_model(line_id, x, sigma, t, index, (lo, hi), degree_x, degree_y, len(lines))
    coef, ref = fit.coefficients, np.where(np.isfinite(fit.reference), fit.reference, index)
    u = (2.0 * ref - (lo + hi)) / (hi - lo)

    def predict(todo):
        powers = ((y_index[todo] - reference) / half)[:, None] ** np.arange(1, degree_y + 1)
        return ref[:, None] + legendre.legvander(u, degree_x) @ coef @ powers.T

    return predict


class _TraceState:
    """The band measurements of :func:`trace_lines` as they are filled in, and each traced
    line's flux in every row, from which the slit profile is made."""

    def __init__(self, view: _SpatialFirst, bands, x, x_err, good) -> None:
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
        peak = _locate(profile, usable, centre - first, reach)
        take = peak[:, None] + np.arange(-half, half + 1)
        y = np.take_along_axis(profile, take, axis=1)
        var = np.take_along_axis(variance, take, axis=1)
        use = np.take_along_axis(usable, take, axis=1)
        fit = _fit_profiles(y, var, use, _refine(y, half), fwhm / _FWHM_PER_SIGMA)
        offset = first + peak - half
        n_use = use.sum(axis=1)
        sigma_ok = (fit.sigma * _FWHM_PER_SIGMA >= 0.5) & (fit.sigma < 0.6 * half)
        accept = (fit.converged & (n_use >= 6) & (fit.flux > _MIN_BAND_SNR * fit.flux_err)
                  & (np.abs(fit.x0 - half) <= 1.5) & sigma_ok & np.isfinite(fit.x_err))
        self.x[li, bi] = np.where(accept, fit.x0 + offset, np.nan)
        self.x_err[li, bi] = np.where(accept, fit.x_err, np.nan)
        self.fwhm[li, bi] = np.where(accept, fit.sigma * _FWHM_PER_SIGMA, np.nan)
        self.good[li, bi] = accept


class _Block:
    """The pixels of each unit's window: its band's rows by the window's columns."""

    def __init__(self, view: _SpatialFirst, rows: np.ndarray, cols: np.ndarray) -> None:
        self.inside = (cols >= 0) & (cols < view.n_disp)
        c = np.clip(cols, 0, view.n_disp - 1)[:, None, :]
        r = np.clip(rows, 0, view.n_rows - 1)[:, :, None]
        self.data = view.data[r, c]
        self.variance = view.variance[r, c]
        self.bad = view.bad[r, c] | (rows < 0)[:, :, None] | ~self.inside[:, None, :]

    def row_flux(self) -> np.ndarray:
        """Each row's flux in the window above the median of its two outermost columns on
        each side, shape (U, R); NaN for rows with bad pixels."""
        edges = np.concatenate([self.data[:, :, :2], self.data[:, :, -2:]], axis=2)
        level = np.median(edges, axis=2)
        flux = np.sum(self.data[:, :, 2:-2] - level[:, :, None], axis=2, dtype=np.float64)
        return np.where(self.bad.any(axis=2), np.nan, flux)

    def profile(self, weight: np.ndarray):
        """Robust mean over the band's rows of the pixels divided by the rows' ``weight`` (U, R):
        see the module docstring, step 1. Returns the profile, its variance and which columns
        are usable, each (U, C)."""
        w = np.maximum(weight, 0.02).astype(np.float32)[:, :, None]
        norm = self.data / w
        var = self.variance / (w * w)
        bad = self.bad
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


def _refine(y: np.ndarray, half: int) -> np.ndarray:
    """Starting centre: the middle pixel moved by a parabola through it and its neighbours."""
    a, b, c = y[:, half - 1], y[:, half], y[:, half + 1]
    curvature = 2.0 * b - a - c
    step = np.where(curvature > 0, 0.5 * (c - a) / np.where(curvature > 0, curvature, 1.0), 0.0)
    return half + np.clip(step, -0.5, 0.5)


@dataclass(frozen=True, eq=False)
class _ProfileFit:
    x0: np.ndarray
    x_err: np.ndarray
    sigma: np.ndarray
    flux: np.ndarray
    flux_err: np.ndarray
    converged: np.ndarray


def _fit_profiles(y: np.ndarray, var: np.ndarray, use: np.ndarray, x_start: np.ndarray,
                  sigma_start: float, max_iter: int = 30) -> _ProfileFit:
    """Pixel-integrated Gaussian plus constant fitted to every row of ``y`` (pixel k centred at
    k), weights 1/var on the usable pixels; a batched Levenberg-Marquardt iteration (each fit
    leaves the batch once its centre moves by less than 1e-4 pixel)."""
    n, m = y.shape
    edges = np.arange(m + 1, dtype=float) - 0.5
    w = np.where(use, 1.0 / var, 0.0)
    background = np.median(np.concatenate([y[:, :2], y[:, -2:]], axis=1), axis=1)
    flux = np.maximum(np.sum(np.where(use, y - background[:, None], 0.0), axis=1), 1e-3)
    theta = np.stack([x_start, np.full(n, math.log(max(float(sigma_start), 0.3))), flux,
                      background], axis=1)
    lower = np.array([0.0, math.log(0.15), -np.inf, -np.inf])
    upper = np.array([m - 1.0, math.log(m / 2.0), np.inf, np.inf])

    def evaluate(th, with_jacobian=True):
        s = np.exp(th[:, 1:2])
        z = (edges[None, :] - th[:, 0:1]) / s
        cdf = ndtr(z)
        e = cdf[:, 1:] - cdf[:, :-1]
        mu = th[:, 2:3] * e + th[:, 3:4]
        if not with_jacobian:
            return mu, None
        pdf = np.exp(-0.5 * z * z) * _INV_SQRT_2PI
        zpdf = z * pdf
        jac = np.empty(e.shape + (4,))
        jac[:, :, 0] = th[:, 2:3] * (pdf[:, :-1] - pdf[:, 1:]) / s
        jac[:, :, 1] = th[:, 2:3] * (zpdf[:, :-1] - zpdf[:, 1:])
        jac[:, :, 2] = e
        jac[:, :, 3] = 1.0
        return mu, jac

    def normal_equations(jac, weights, resid):
        jw = jac * weights[:, :, None]
        return np.matmul(jw.transpose(0, 2, 1), jac), np.matmul(jw.transpose(0, 2, 1),
                                                                resid[:, :, None])[:, :, 0]

    lam = np.full(n, 1e-3)
    done = np.zeros(n, bool)
    eye = np.eye(4)
    mu, _ = evaluate(theta, False)
    chi2 = np.sum(w * (y - mu) ** 2, axis=1)
    for _ in range(max_iter):
        act = np.flatnonzero(~done)
        if act.size == 0:
            break
        th, wa, ya = theta[act], w[act], y[act]
        mu_a, jac = evaluate(th)
        normal, grad = normal_equations(jac, wa, ya - mu_a)
        diag = np.maximum(np.einsum("npp->np", normal), 1e-300)
        step = np.linalg.solve(normal + (lam[act, None] * diag)[:, :, None] * eye,
                               grad[:, :, None])[:, :, 0]
        trial = np.clip(th + step, lower, upper)
        chi2_t = np.sum(wa * (ya - evaluate(trial, False)[0]) ** 2, axis=1)
        better = chi2_t <= chi2[act]
        small = np.abs(trial[:, 0] - th[:, 0]) < 1e-4
        theta[act] = np.where(better[:, None], trial, th)
        chi2[act] = np.where(better, chi2_t, chi2[act])
        done[act] = (better & small) | (lam[act] > 1e8)
        lam[act] = np.where(better, np.maximum(lam[act] / 3.0, 1e-7), lam[act] * 4.0)
    _, jac = evaluate(theta)
    normal, _ = normal_equations(jac, w, np.zeros_like(y))
    scale = np.sqrt(np.maximum(np.einsum("npp->np", normal), 1e-300))
    scaled = normal / (scale[:, :, None] * scale[:, None, :])
    invertible = np.linalg.cond(scaled) < 1e12
    cov = np.full_like(normal, np.nan)
    cov[invertible] = np.linalg.inv(scaled[invertible]) / (
        scale[invertible][:, :, None] * scale[invertible][:, None, :])
    var_theta = np.einsum("npp->np", cov)
    err = np.sqrt(np.where(var_theta > 0, var_theta, np.nan))
    return _ProfileFit(x0=theta[:, 0], x_err=err[:, 0], sigma=np.exp(theta[:, 1]),
                       flux=theta[:, 2], flux_err=err[:, 2], converged=done & invertible)


# ------------------------------------------------------------------------------------------------
# The model
# ------------------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class _ModelFit:
    coefficients: np.ndarray
    reference: np.ndarray
    residual: np.ndarray
    chi2: float
    covariance: np.ndarray


def _fit_model(line_id, x, sigma, t, start, domain, degree_x, degree_y, n_lines,
               keep=None) -> _ModelFit:
    """Weighted least squares for the shift coefficients and each line's reference position.

    The reference positions are eliminated by centring each line's data on its weighted mean;
    the basis depends on them through ``u``, so the fit is repeated once with the updated ones.
    """
    keep = np.ones(x.size, bool) if keep is None else keep
    w = np.where(keep, 1.0 / sigma ** 2, 0.0)
    lo, hi = domain
    start = np.asarray(start, dtype=float)
    reference = start.copy()
    powers = t[:, None] ** np.arange(1, degree_y + 1)
    weight_sum = np.bincount(line_id, w, n_lines)
    has = weight_sum > 0
    safe = np.where(has, weight_sum, 1.0)
    coef = np.zeros((degree_x + 1, degree_y))
    for _ in range(2):
        u = (2.0 * reference - (lo + hi)) / (hi - lo)
        p = legendre.legvander(u, degree_x)[line_id]
        basis = (p[:, :, None] * powers[:, None, :]).reshape(x.size, -1)
        x_mean = np.bincount(line_id, w * x, n_lines) / safe
        b_mean = np.stack([np.bincount(line_id, w * col, n_lines) for col in basis.T],
                          axis=1) / safe[:, None] if basis.shape[1] else np.zeros((n_lines, 0))
        root = np.sqrt(w)
        design = (basis - b_mean[line_id]) * root[:, None]
        if basis.shape[1]:
            solution = np.linalg.lstsq(design, (x - x_mean[line_id]) * root, rcond=None)[0]
        else:
            solution = np.zeros(0)
        coef = solution.reshape(degree_x + 1, degree_y)
        reference = np.where(has, x_mean - b_mean @ solution, start)
    model = reference[line_id] + basis @ solution
    residual = x - model
    chi2 = float(np.sum(w * residual ** 2))
    # coefficient covariance, scaled up by the reduced chi-square when the scatter exceeds the
    # stated uncertainties (each used line also spends one degree of freedom on its reference)
    dof = max(int(np.count_nonzero(w > 0)) - solution.size - int(np.count_nonzero(has)), 1)
    covariance = np.linalg.pinv(design.T @ design) * max(chi2 / dof, 1.0)
    return _ModelFit(coefficients=coef, reference=np.where(has, reference, np.nan),
                     residual=residual, chi2=chi2, covariance=covariance)


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
        None when fewer than three lines or two bands have accepted centres.
    """
    line_id, band_id = np.nonzero(traces.good)
    if np.unique(line_id).size < 3 or np.unique(band_id).size < 2:
        return None
    x = traces.x[line_id, band_id]
    sigma = np.hypot(traces.x_err[line_id, band_id], _FLOOR_PX)
    y = traces.y[band_id]
    reference = float(traces.reference_row)
    half = max(0.5 * (traces.rows[1] - traces.rows[0]), 1.0)
    t = (y - reference) / half
    n_lines = traces.x.shape[0]
    start = traces.x_start
    domain = traces.x_domain

    def limits(keep):
        lines = np.unique(line_id[keep]).size
        bands = np.unique(band_id[keep]).size
        return min(max_degree_x, lines - 1), min(max_degree_y, bands - 1)

    keep = np.ones(x.size, bool)
    for _ in range(8):
        dx, dy = limits(keep)
        fit = _fit_model(line_id, x, sigma, t, start, domain, dx, dy, n_lines, keep)
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
            fit = _fit_model(line_id, x, sigma, t, start, domain, dx, dy, n_lines, keep)
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
    return SlitShift(reference_row=reference, y_scale=half, x_domain=domain,
                     coefficients=coefficients, rows_covered=covered, rms_px=rms,
                     n_lines=n_used_lines, n_points=n, n_rejected=int(x.size - n),
                     covariance=fit.covariance)


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

def measure_slit(frame: Frame, spectrum: Spectrum, peaks: PeakTable, *, min_snr: float = 5.0,
                 band_rows: int | None = None) -> SlitMeasurement:
    """Trace the slit of a frame and refer its spectrum's line centres to the reference row.

    The lines to follow are found in the spectrum of a narrow band of rows around the middle of
    ``spectrum.rows`` (an eighth of them, 8 to 32 rows), where even tilted or curved lines are
    sharp: its bright peaks, unflagged or blends that one line dominates (:data:`DOMINANCE`),
    are traced over ``spectrum.rows`` and the shift model fitted. When the shift varies by more than :data:`RECTIFY_SPREAD_PX` over
    those rows, the lines are smeared in the plain sum: the rows are straightened (each
    resampled by linear interpolation at ``x + Δ(x, y)``, variance and masks alike), summed
    again with :func:`~wavecal.extract.extract_spectrum` and the peaks found again with
    :func:`~wavecal.peaks.find_peaks`: they lie at the lines' reference-row positions.
    Otherwise each peak centre of the plain sum is moved by minus the mean shift over the
    summed rows, weighted by their share of the light, so that it is the line's position on
    the reference row.

    Parameters
    ----------
    frame : Frame
        The arc frame.
    spectrum : Spectrum
        Its spectrum summed over the slit (the rows traced are ``spectrum.rows``).
    peaks : PeakTable
        The peaks of ``spectrum``.
    min_snr : float
        Detection threshold of the peak finder in the central band and in the straightened
        frame.
    band_rows : int, optional
        Rows per band (see :func:`trace_lines`).

    Returns
    -------
    SlitMeasurement
        ``shift`` is None (and spectrum and peaks are unchanged) when the slit has fewer than
        :data:`MIN_SLIT_ROWS` rows or too few lines could be followed.
    """
    unchanged = SlitMeasurement(spectrum, peaks, None, None, False)
    start, stop = spectrum.rows
    if stop - start < MIN_SLIT_ROWS or len(peaks) == 0:
        return unchanged
    height = int(np.clip((stop - start) // 8, MIN_SLIT_ROWS, 32))
    low = (start + stop - height) // 2
    central = find_peaks(extract_spectrum(frame, rows=(low, low + height)), min_snr=min_snr)
    if len(central) == 0:
        return unchanged
    fwhm = float(central.fwhm_typical) if np.isfinite(central.fwhm_typical) else 3.0
    chosen = _candidates(central)
    traces = trace_lines(frame, chosen["x"].to_numpy(float), rows=(start, stop), fwhm=fwhm,
                         band_rows=band_rows, neighbours=central.table["x"].to_numpy(float),
                         flux=chosen["flux"].to_numpy(float),
                         neighbour_flux=central.table["flux"].to_numpy(float))
    shift = fit_slit_shift(traces)
    if shift is None:
        return unchanged
    x_grid = np.linspace(*traces.x_domain, 33)
    y_rows = np.arange(traces.rows[0], traces.rows[1] + 1)
    grid = shift.shift_grid(x_grid, y_rows)
    if np.max(np.ptp(grid, axis=0)) <= RECTIFY_SPREAD_PX:
        return SlitMeasurement(spectrum, _refer(peaks, shift, y_rows, traces.row_weight), shift,
                               traces, False)
    straight = _straightened(frame, shift, start, stop)
    straight_spectrum = dataclasses.replace(extract_spectrum(straight, rows=(0, stop - start)),
                                    rows=(start, stop))
    straight_peaks = find_peaks(straight_spectrum, min_snr=min_snr)
    if len(straight_peaks) == 0:
        return unchanged
    return SlitMeasurement(straight_spectrum, straight_peaks, shift, traces, True)


def _candidates(peaks: PeakTable) -> pd.DataFrame:
    """Rows of the peaks bright enough to trace, unflagged but for blends (the brightest, at
    most 80, sorted by ``x``): whether a blend is dominated is decided by :func:`trace_lines`."""
    table = peaks.table
    ok = ((table["flags"].to_numpy(int) & _SKIP_FLAGS) == 0) & (
        table["snr"].to_numpy(float) >= _MIN_TRACE_SNR)
    chosen = table[ok].sort_values("snr", ascending=False).head(_MAX_LINES)
    return chosen.sort_values("x")


def _refer(peaks: PeakTable, shift: SlitShift, y_rows: np.ndarray,
           weight: np.ndarray) -> PeakTable:
    """Peaks with centres moved to the reference row: minus the mean shift over the summed rows,
    each weighted by its share of the light."""
    x = peaks.table["x"].to_numpy(float)
    mean = weight @ shift.shift_grid(x, y_rows) / np.sum(weight)
    return dataclasses.replace(peaks, table=peaks.table.assign(x=x - mean))


def _straightened(frame: Frame, shift: SlitShift, start: int, stop: int) -> Frame:
    """Rows ``start .. stop - 1`` resampled so that every line lies at its reference-row position
    (dispersion along axis 1)."""
    view = _SpatialFirst(frame)
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
