"""The expected line width along the detector: a robust low-order fit of FWHM against position.

The width of an arc line is the instrumental profile: the slit image convolved with the optics'
blur, which changes smoothly along the detector (defocus from field curvature or a tilted focal
plane, anamorphic magnification, a grism's changing dispersion). It is modelled as a polynomial
in position of ``ln FWHM`` (widths vary by factors, and a ratio is what tells an odd line), of
degree at most :data:`MAX_DEGREE` and lower when there are few lines.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from astropy.stats import sigma_clip

__all__ = ["WidthModel", "MAX_DEGREE", "LINES_PER_COEFFICIENT", "fit_width_model"]

#: Highest polynomial degree of ``ln FWHM`` in position: defocus across a flat detector from a
#: curved focal surface is quadratic in position (common practice), a tilted one linear.
MAX_DEGREE = 2
#: Lines needed per polynomial coefficient: with three, every residual keeps at least two
#: thirds of a degree of freedom, enough for the clipping to tell an outlier from the trend.
LINES_PER_COEFFICIENT = 3
#: Clipping threshold, in robust standard deviations of ``ln FWHM`` (common practice).
_CLIP_SIGMA = 3.0
#: Smallest scatter of ``ln FWHM``: no width is known better than 0.1 %.
_MIN_SCATTER = 1e-3
#: Most clipping iterations.
_MAX_ITER = 10
#: Scatter of widths about the model assumed when too few lines measure it: the 25 % width
#: change taken as "odd" (see ``peaks._ODD_WIDTH_RATIO``).
_DEFAULT_SCATTER = math.log(1.25)


@dataclass(frozen=True)
class WidthModel:
    """Expected FWHM (pixels) as a function of position (index units of the spectrum).

    Attributes
    ----------
    coef : tuple of float
        Coefficients of ``ln FWHM`` as a polynomial in ``u = (x - centre) / half_span``,
        lowest order first.
    centre, half_span : float
        Scaling of the position (index units).
    scatter : float
        Robust standard deviation of the measured ``ln FWHM`` about the model (the combined
        intrinsic and measurement scatter of single lines).
    n_lines : int
        Lines the model was fitted to (0: a constant from a starting value).
    """

    coef: tuple[float, ...]
    centre: float
    half_span: float
    scatter: float
    n_lines: int

    @classmethod
    def constant(cls, fwhm: float, n_pix: int) -> WidthModel:
        """A constant width with the default scatter (no lines measured)."""
        return cls((math.log(fwhm),), 0.5 * (n_pix - 1), max(0.5 * (n_pix - 1), 1.0),
                   _DEFAULT_SCATTER, 0)

    @property
    def degree(self) -> int:
        """Polynomial degree (0: constant)."""
        return len(self.coef) - 1

    def __call__(self, x: np.ndarray | float) -> np.ndarray:
        """Expected FWHM at index positions ``x`` (clamped to the fitted range's ends)."""
        u = np.clip((np.asarray(x, dtype=np.float64) - self.centre) / self.half_span, -1.0, 1.0)
        return np.exp(np.polynomial.polynomial.polyval(u, np.asarray(self.coef)))

    def median(self, n_pix: int) -> float:
        """Median expected FWHM over the pixels of the spectrum."""
        return float(np.median(self(np.arange(n_pix, dtype=np.float64))))


def fit_width_model(x: np.ndarray, fwhm: np.ndarray, fwhm_err: np.ndarray, n_pix: int, *,
                    fallback: WidthModel) -> WidthModel:
    """Robust weighted fit of ``ln FWHM`` against position: the instrumental width.

    Unresolved blends make lines wider, never narrower, while noise scatters widths both ways:
    the contamination is one-sided. So the scatter ``s`` is the robust standard deviation of the
    residuals *below* the fit (1.4826 times their median absolute value), and residuals beyond
    :data:`_CLIP_SIGMA` ``s`` on either side are clipped with :func:`astropy.stats.sigma_clip`
    (the window stays symmetric about the fit, which then settles on the mode of the widths
    rather than drifting down). The fit (weights ``1 / (err² + s²)``, ``err`` the
    measurement error of ``ln FWHM``) is repeated until the clipped set no longer changes. The
    degree is the highest (up to :data:`MAX_DEGREE`) with :data:`LINES_PER_COEFFICIENT` lines
    per coefficient; with no line, ``fallback``.

    The positions are clamped to the range spanned by the lines when the model is evaluated, so
    the polynomial never extrapolates.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.log(np.asarray(fwhm, dtype=np.float64))
    err = np.asarray(fwhm_err, dtype=np.float64) / np.asarray(fwhm, dtype=np.float64)
    n = x.size
    if n == 0:
        return fallback
    degree = int(min(MAX_DEGREE, max(n // LINES_PER_COEFFICIENT - 1, 0)))
    lo, hi = float(x.min()), float(x.max())
    centre, half = 0.5 * (lo + hi), max(0.5 * (hi - lo), 1.0)
    u = (x - centre) / half
    keep = np.ones(n, bool)
    scatter = _DEFAULT_SCATTER
    for _ in range(_MAX_ITER):
        w = 1.0 / (err[keep] ** 2 + scatter ** 2)
        coef = np.polynomial.polynomial.polyfit(u[keep], y[keep], degree, w=np.sqrt(w))
        resid = y - np.polynomial.polynomial.polyval(u, coef)
        below = resid[keep & (resid < 0)]
        if n >= 3 and below.size:
            scatter = max(float(1.4826 * np.median(-below)), _MIN_SCATTER)
        clipped = sigma_clip(resid, sigma=_CLIP_SIGMA * scatter,
                             cenfunc=_zero, stdfunc=_one, maxiters=1, masked=True)
        new_keep = ~np.ma.getmaskarray(clipped)
        if np.array_equal(new_keep, keep) or np.count_nonzero(new_keep) <= degree + 1:
            break
        keep = new_keep
    return WidthModel(tuple(float(c) for c in coef), centre, half, scatter, int(np.count_nonzero(keep)))


def _zero(values: np.ndarray, axis: int | None = None) -> float:
    """Centre for :func:`~astropy.stats.sigma_clip`: residuals are about the fit, i.e. zero."""
    return 0.0


def _one(values: np.ndarray, axis: int | None = None) -> float:
    """Scale for :func:`~astropy.stats.sigma_clip`: the thresholds are given in ``ln FWHM``."""
    return 1.0
