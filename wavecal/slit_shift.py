"""The slit-shift model: how far an arc line's position moves with slit position.

A long-slit solution gives the wavelength along the slit's *reference row* and carries a
:class:`SlitShift` ``Δ(x, y)``: a line at ``x`` on the reference row ``y_ref`` lies at
``x + Δ(x, y)`` on row ``y``, with ``Δ(x, y_ref) = 0``. This module holds the model, its
covariance, its JSON round trip and its weighted least-squares fit to measured line centres
(:func:`fit_shift_model`); following the lines through a frame is :mod:`wavecal.tracing`'s work.
It depends on numpy alone, so that reading a solution file loads no frame-processing code.

Coordinates
-----------
``x`` is the 0-based pixel along the dispersion axis of the raw frame as read (binned), ``y``
the 0-based pixel along its spatial axis, the other numpy axis ("row" below means the pixels at
one ``y``, whichever axis that is).

Model
-----
``Δ(x, y) = Σ_{i≤p} Σ_{1≤j≤q} c_ij P_i(u) t^j`` with ``P_i`` the Legendre polynomials, ``u`` the
pixel ``x`` scaled to [-1, 1] over the detector and ``t = (y - y_ref) / h``, ``h`` half the
traced rows; ``q = 0`` means no shift at all.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.polynomial import legendre

from ._json import jsonable

__all__ = ["ShiftModelFit", "SlitShift", "fit_shift_model"]

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
    larger : tuple of SlitShift
        The models with one more degree along either axis, fitted to the same centres (for
        :meth:`degree_move_px`); empty for a model read from a file (not stored).
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
    larger: tuple[SlitShift, ...] = ()

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

    def degree_move_px(self, x, y) -> float:
        """Largest change of ``Δ`` on the grid of ``x`` and ``y`` when the model gains one more
        degree along either axis (:attr:`larger`): the uncertainty of the degree choice, which
        the covariance does not contain. 0 without larger models."""
        base = self.shift_grid(x, y)
        return float(max((np.max(np.abs(other.shift_grid(x, y) - base)) for other in self.larger),
                         default=0.0))

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
                "rms_px": jsonable(self.rms_px), "n_lines": int(self.n_lines),
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
                "rms_px": jsonable(self.rms_px), "n_lines": int(self.n_lines),
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


def _pair(value) -> tuple[float, float]:
    lo, hi = (float(v) for v in value)
    return (lo, hi)


@dataclass(frozen=True, eq=False)
class ShiftModelFit:
    """What :func:`fit_shift_model` gives: coefficients ``c_ij`` (shape ``(degree_x + 1,
    degree_y)``), each line's reference-row position (NaN for a line without weight), the
    residuals, the chi-square and the coefficients' covariance."""

    coefficients: np.ndarray
    reference: np.ndarray
    residual: np.ndarray
    chi2: float
    covariance: np.ndarray


def fit_shift_model(line_id: np.ndarray, x: np.ndarray, sigma: np.ndarray, t: np.ndarray, start,
                    domain: tuple[float, float], degree_x: int, degree_y: int, n_lines: int,
                    keep: np.ndarray | None = None) -> ShiftModelFit:
    """Weighted least squares for the shift coefficients and each line's reference position.

    The reference positions are eliminated by centring each line's data on its weighted mean;
    the basis depends on them through ``u``, so the fit is repeated once with the updated ones.

    Parameters
    ----------
    line_id : ndarray of int, shape (N,)
        Line (0 .. n_lines - 1) of each measured centre.
    x, sigma : ndarray, shape (N,)
        Measured centres (pixel ``x``) and their 1-sigma uncertainties.
    t : ndarray, shape (N,)
        Scaled slit position of each centre.
    start : array_like, shape (n_lines,)
        Starting reference-row positions (kept for lines without weight).
    domain : (float, float)
        Pixels mapped onto u = -1 and u = +1.
    degree_x, degree_y : int
        Legendre degree along the dispersion, highest power of ``t`` (0: no shift).
    n_lines : int
        Number of lines.
    keep : ndarray of bool, shape (N,), optional
        Centres used (default all).

    Returns
    -------
    ShiftModelFit
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
    return ShiftModelFit(coefficients=coef, reference=np.where(has, reference, np.nan),
                         residual=residual, chi2=chi2, covariance=covariance)
