"""Flux-conserving resampling of spectra onto a wavelength grid, with variance propagation.

Method
------
Each input pixel ``i`` spans the wavelength interval between its edges, ``λ(x = i ∓ 1/2)`` from
the solution. Within a pixel the counts are taken as spread uniformly in wavelength (a
piecewise-constant flux density). An output bin ``[e_j, e_j+1]`` then receives from pixel ``i``
the fraction ``f_ij`` of the pixel's counts that falls inside the bin:

    F_j = Σ_i f_ij c_i ,        V_j = Σ_i f_ij² v_i .

Every count of the input lands in exactly one output bin where the grid covers the pixel, so
the total is preserved (to rounding) over a grid that spans the input. The fractions are found
through each bin edge's fractional position in the input, ``u(e) ∈ [0, N]`` (pixel-edge units,
linear in λ inside a pixel), so a bin costs O(1) whatever its width: the counts are differences
of the cumulative sum evaluated at ``u``; for the variance, pixels wholly inside a bin enter
with f = 1 through cumulative sums, the two pixels cut by its edges with their fractions.

The variance formula is exact for each bin but ignores the **covariance between neighbouring
output bins** that share an input pixel (``Cov(F_j, F_k) = Σ_i f_ij f_ik v_i``): with bins of
about the input pixel size, adjacent resampled values are correlated, and a sum over several
output bins has a larger variance than the sum of their variances (by up to a factor of about
two for equal bin and pixel sizes). Use the input frame when covariance matters.

Non-finite input values (or variances) count as bad: they contribute nothing and the bins they
touch are flagged. Bins not wholly covered by the input are flagged too.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .constants import SPEED_OF_LIGHT_KMS

__all__ = [
    "GRID_KINDS",
    "WavelengthGrid",
    "Resampled",
    "linear_grid",
    "log_grid",
    "user_grid",
    "resample",
]

#: Kinds of output grid.
GRID_KINDS = ("linear", "log", "user")


@dataclass(frozen=True, eq=False)
class WavelengthGrid:
    """Output bins of a resampled spectrum, in increasing wavelength.

    Attributes
    ----------
    edges : ndarray, shape (M + 1,)
        Bin edges in nm, strictly increasing. Read-only.
    kind : str
        ``"linear"`` (equal widths), ``"log"`` (equal widths in ln λ) or ``"user"``.
    """

    edges: np.ndarray
    kind: str

    def __post_init__(self) -> None:
        edges = np.array(self.edges, dtype=float)
        if edges.ndim != 1 or edges.size < 2:
            msg = f"a wavelength grid needs at least two bin edges, got shape {edges.shape}"
            raise ValueError(msg)
        if not np.all(np.isfinite(edges)) or np.any(np.diff(edges) <= 0) or edges[0] <= 0:
            msg = "grid bin edges must be positive, finite and strictly increasing"
            raise ValueError(msg)
        if self.kind not in GRID_KINDS:
            msg = f"grid kind must be one of {GRID_KINDS}, got {self.kind!r}"
            raise ValueError(msg)
        edges.setflags(write=False)
        object.__setattr__(self, "edges", edges)

    @property
    def size(self) -> int:
        """Number of bins."""
        return self.edges.size - 1

    @property
    def centres(self) -> np.ndarray:
        """Bin centres (nm): arithmetic means of the edges, geometric for a ``log`` grid."""
        if self.kind == "log":
            return np.sqrt(self.edges[:-1] * self.edges[1:])
        return 0.5 * (self.edges[:-1] + self.edges[1:])

    @property
    def step(self) -> float:
        """Bin width (nm) of a linear grid, or ln-λ width of a log grid; NaN for a user grid."""
        if self.kind == "linear":
            return float((self.edges[-1] - self.edges[0]) / self.size)
        if self.kind == "log":
            return float(np.log(self.edges[-1] / self.edges[0]) / self.size)
        return math.nan


def _count(start: float, stop: float, step: float | None, n_bins: int | None, what: str) -> int:
    if stop <= start:
        msg = f"grid stop ({stop}) must exceed its start ({start})"
        raise ValueError(msg)
    if (step is None) == (n_bins is None):
        msg = f"give exactly one of the {what} and the number of bins"
        raise ValueError(msg)
    if n_bins is not None:
        if n_bins < 1:
            msg = f"the number of bins must be at least 1, got {n_bins}"
            raise ValueError(msg)
        return int(n_bins)
    if not step > 0:
        msg = f"the {what} must be positive, got {step}"
        raise ValueError(msg)
    return 0


def _covering(span: float, step: float) -> int:
    """Number of steps that cover ``span`` (a span within rounding of k steps gives k)."""
    return max(1, math.ceil(span / step * (1 - 1e-12)))


def linear_grid(start_nm: float, stop_nm: float, *, step_nm: float | None = None,
                n_bins: int | None = None) -> WavelengthGrid:
    """Bins of equal width from ``start_nm`` to ``stop_nm`` (outer edges).

    Give ``n_bins`` (the width is then ``(stop - start) / n_bins``) or ``step_nm`` (then as many
    bins as cover the range: the last edge is at or up to one step beyond ``stop_nm``).
    """
    n = _count(start_nm, stop_nm, step_nm, n_bins, "step")
    if n == 0:
        n = _covering(stop_nm - start_nm, step_nm)
        return WavelengthGrid(start_nm + step_nm * np.arange(n + 1), "linear")
    return WavelengthGrid(np.linspace(start_nm, stop_nm, n + 1), "linear")


def log_grid(start_nm: float, stop_nm: float, *, velocity_step_kms: float | None = None,
             n_bins: int | None = None) -> WavelengthGrid:
    """Bins of equal width in ln λ from ``start_nm`` to ``stop_nm`` (outer edges).

    Give ``n_bins`` or ``velocity_step_kms`` (Δ ln λ = v / c per bin; then as many bins as cover
    the range, the last edge at or up to one step beyond ``stop_nm``).
    """
    if start_nm <= 0:
        msg = f"a log grid must start at a positive wavelength, got {start_nm}"
        raise ValueError(msg)
    n = _count(start_nm, stop_nm, velocity_step_kms, n_bins, "velocity step")
    total = math.log(stop_nm / start_nm)
    if n == 0:
        step = velocity_step_kms / SPEED_OF_LIGHT_KMS
        n = _covering(total, step)
        return WavelengthGrid(start_nm * np.exp(step * np.arange(n + 1)), "log")
    return WavelengthGrid(start_nm * np.exp(np.linspace(0.0, total, n + 1)), "log")


def user_grid(edges_nm: ArrayLike) -> WavelengthGrid:
    """A grid with the given bin edges (nm, strictly increasing)."""
    return WavelengthGrid(np.asarray(edges_nm, dtype=float), "user")


@dataclass(frozen=True, eq=False)
class Resampled:
    """Spectra resampled onto a grid.

    Attributes
    ----------
    flux : ndarray, shape (R, M)
        Counts per output bin (sum of the input's counts that fall in it).
    variance : ndarray or None, shape (R, M)
        Propagated variance (covariance between bins ignored, see the module docstring).
    coverage : ndarray, shape (R, M)
        Fraction of each bin's width covered by the input pixels (1 inside the input).
    bad : ndarray of bool, shape (R, M)
        Bins that a bad (non-finite) input pixel contributes to.
    source_edges : ndarray, shape (R, M + 1)
        Position of each output bin edge in the input, in 0-based pixel coordinates
        (``-0.5`` … ``N - 0.5``, clipped to the input's extent).
    """

    flux: np.ndarray
    variance: np.ndarray | None
    coverage: np.ndarray
    bad: np.ndarray
    source_edges: np.ndarray


def resample(flux: ArrayLike, pixel_edges_nm: ArrayLike, grid: WavelengthGrid, *,
             variance: ArrayLike | None = None) -> Resampled:
    """Resample rows of counts onto ``grid``, conserving flux and propagating variance.

    Parameters
    ----------
    flux : array_like, shape (R, N) or (N,)
        Counts per input pixel, one spectrum per row.
    pixel_edges_nm : array_like, shape (R, N + 1) or (N + 1,)
        Wavelength of each pixel edge (nm), strictly monotonic along each row (increasing or
        decreasing); a single row of edges is used for every row of ``flux``.
    grid : WavelengthGrid
        The output bins.
    variance : array_like, optional
        Variance of ``flux``, same shape.

    Returns
    -------
    Resampled
        Arrays of shape (R, M) (a 1-D input gives R = 1), bins in increasing wavelength.

    Raises
    ------
    ValueError
        On mismatched shapes or edges that are not finite and strictly monotonic.
    """
    counts = np.atleast_2d(np.asarray(flux, dtype=float))
    rows, n = counts.shape
    edges = np.atleast_2d(np.asarray(pixel_edges_nm, dtype=float))
    if edges.shape[1] != n + 1 or edges.shape[0] not in (1, rows):
        msg = f"pixel edges of shape {edges.shape} do not fit flux of shape {counts.shape}"
        raise ValueError(msg)
    var = None if variance is None else np.atleast_2d(np.asarray(variance, dtype=float))
    if var is not None and var.shape != counts.shape:
        msg = f"variance of shape {var.shape} does not match flux of shape {counts.shape}"
        raise ValueError(msg)
    if edges.shape[0] > 1 and np.array_equal(edges, np.broadcast_to(edges[:1], edges.shape)):
        edges = edges[:1]  # every row shares its pixel edges: one set of weights serves all
    step = np.diff(edges, axis=1)
    if not (np.all(np.isfinite(edges)) and np.all((step > 0).all(axis=1) | (step < 0).all(axis=1))):
        msg = "pixel edges must be finite and strictly monotonic along each row"
        raise ValueError(msg)

    bad = ~np.isfinite(counts)
    if var is not None:
        bad |= ~np.isfinite(var) | (var < 0)
    any_bad = bool(bad.any())
    if any_bad:
        counts = np.where(bad, 0.0, counts)
        var = None if var is None else np.where(bad, 0.0, var)

    # fractional position u in [0, n] of each output edge, in pixel-edge units (one row of u
    # when every row shares the same pixel edges)
    u_raw = np.empty((edges.shape[0], grid.edges.size))
    for r, e in enumerate(edges):
        if e[0] < e[-1]:
            u_raw[r] = np.interp(grid.edges, e, np.arange(n + 1.0), left=-np.inf, right=np.inf)
        else:
            u_raw[r] = np.interp(grid.edges, e[::-1], np.arange(n, -1.0, -1.0),
                                 left=np.inf, right=-np.inf)
    u = np.clip(u_raw, 0.0, float(n))
    direction = np.where(edges[:, -1:] > edges[:, :1], 1.0, -1.0)
    out_flux = direction * np.diff(_cumulative_at(counts, u), axis=1)
    pieces = None if var is None and not any_bad else _Pieces.between(
        np.minimum(u[:, :-1], u[:, 1:]), np.maximum(u[:, :-1], u[:, 1:]), n)
    out_var = None if var is None else pieces.integrate(var, power=2)
    low_end = np.minimum(edges[:, :1], edges[:, -1:])
    high_end = np.maximum(edges[:, :1], edges[:, -1:])
    inside = (np.minimum(grid.edges[1:], high_end) - np.maximum(grid.edges[:-1], low_end))
    coverage = np.broadcast_to(np.clip(inside / np.diff(grid.edges), 0.0, 1.0), out_flux.shape)
    touched = (pieces.integrate(bad.astype(float), power=0) > 0 if any_bad
               else np.zeros(out_flux.shape, dtype=bool))
    return Resampled(flux=out_flux, variance=out_var, coverage=coverage.copy(), bad=touched,
                     source_edges=np.broadcast_to(u - 0.5, (rows, u.shape[1])).copy())


def _gather(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    """``values[r, index[r]]`` per row; one row of ``index`` serves every row of ``values``."""
    if index.shape[0] == 1:
        return values[:, index[0]]
    return np.take_along_axis(values, index, axis=1)


def _cumulative_at(values: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Σ of ``values`` from pixel-edge position 0 to ``u`` (each pixel uniform within itself)."""
    n = values.shape[1]
    cumulative = np.zeros((values.shape[0], n + 1))
    np.cumsum(values, axis=1, out=cumulative[:, 1:])
    k = np.minimum(u.astype(np.intp), n - 1)  # u >= 0, so truncation is the floor
    return _gather(cumulative, k) + (u - k) * _gather(values, k)


@dataclass(frozen=True)
class _Pieces:
    """How output bins [lo, hi] (pixel-edge units) cut the input pixels.

    A bin spans pixels ``a`` … ``b``: the first with the fraction ``frac_a``, the last with
    ``frac_b``, those between wholly; if ``a == b`` a single pixel with ``frac_same``. Arrays have
    shape (R, M), or (1, M) when every row shares them.
    """

    a: np.ndarray
    b: np.ndarray
    frac_a: np.ndarray
    frac_b: np.ndarray
    frac_same: np.ndarray

    @classmethod
    def between(cls, lo: np.ndarray, hi: np.ndarray, n: int) -> _Pieces:
        a = np.minimum(np.floor(lo), n - 1).astype(np.intp)
        b = np.minimum(np.floor(hi), n - 1).astype(np.intp)
        b = np.where((b > a) & (hi == b), b - 1, b)  # a bin ending on a pixel edge stops before it
        return cls(a=a, b=b, frac_a=a + 1.0 - lo, frac_b=hi - b, frac_same=hi - lo)

    def integrate(self, values: np.ndarray, *, power: int) -> np.ndarray:
        """Σ_i f_i^power · values_i per bin; ``power = 0`` counts every overlapping pixel once."""
        cumulative = np.zeros((values.shape[0], values.shape[1] + 1))
        np.cumsum(values, axis=1, out=cumulative[:, 1:])
        inner = (_gather(cumulative, self.b)
                 - _gather(cumulative, np.minimum(self.a + 1, self.b)))
        v_a, v_b = _gather(values, self.a), _gather(values, self.b)
        if power == 0:
            nonempty = self.frac_same > 0
            return np.where(self.a == self.b, v_a, v_a + v_b + inner) * nonempty
        return np.where(self.a == self.b, self.frac_same ** power * v_a,
                        self.frac_a ** power * v_a + self.frac_b ** power * v_b + inner)
