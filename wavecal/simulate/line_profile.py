"""Line profiles of the simulated frames: the pixel-integrated image of the slit.

The slit image on the detector is a top-hat of full width ``w`` pixels blurred by a Gaussian of
standard deviation ``s`` (the camera optics). Integrated over pixel ``[x - 1/2, x + 1/2]``, a
unit-flux line centred at ``c`` puts

    P(x) = s/(2a) [G((d+1/2+a)/s) - G((d-1/2+a)/s) - G((d+1/2-a)/s) + G((d-1/2-a)/s)]

into the pixel, with ``d = x - c``, ``a = w/2`` and ``G(t) = t Phi(t) + phi(t)`` the
antiderivative of the standard normal distribution function ``Phi`` (``phi`` its density).
:class:`LineWidth` says how the width changes along the detector.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq
from scipy.special import ndtr

from ..optics import GratingModel

__all__ = ["LineWidth", "blur_for_fwhm", "fwhm_of", "slit_line_profile"]

_SQRT_2PI = np.sqrt(2.0 * np.pi)


def slit_line_profile(x, centre, *, slit_px, blur_sigma_px):
    """Fraction of a unit-flux line that falls into pixel ``x`` (spanning ``[x-1/2, x+1/2]``).

    The line is the image of the slit, a top-hat of full width ``slit_px``, blurred by a Gaussian
    of standard deviation ``blur_sigma_px`` (see the module docstring for the formula).

    Parameters
    ----------
    x, centre : array_like
        Pixel positions and line centres (broadcast together).
    slit_px : array_like
        Full width of the top-hat (>= 0), pixels.
    blur_sigma_px : array_like
        Gaussian standard deviation (> 0), pixels.

    Returns
    -------
    ndarray
        Pixel-integrated flux fractions; they sum to 1 over all pixels.
    """
    a = 0.5 * np.asarray(slit_px, dtype=float)
    s = np.asarray(blur_sigma_px, dtype=float)
    if np.any(~(s > 0)) or np.any(~(a >= 0)):
        msg = "blur_sigma_px must be positive and slit_px non-negative"
        raise ValueError(msg)
    d = np.asarray(x, dtype=float) - np.asarray(centre, dtype=float)
    gauss = ndtr((d + 0.5) / s) - ndtr((d - 0.5) / s)
    wide = a > 1e-4 * s
    a_safe = np.where(wide, a, 1.0)
    box = s / (2.0 * a_safe) * (_gauss_cdf_integral((d + 0.5 + a) / s)
                                - _gauss_cdf_integral((d - 0.5 + a) / s)
                                - _gauss_cdf_integral((d + 0.5 - a) / s)
                                + _gauss_cdf_integral((d - 0.5 - a) / s))
    return np.where(wide, np.maximum(box, 0.0), gauss)  # clip round-off far out in the wings


def _gauss_cdf_integral(t):
    """G(t) = t Phi(t) + phi(t), whose derivative is the standard normal CDF Phi."""
    return t * ndtr(t) + np.exp(-0.5 * t * t) / _SQRT_2PI


def blur_for_fwhm(fwhm: float, slit: float) -> float:
    """Gaussian sigma that makes a top-hat of width ``slit`` (< fwhm) reach FWHM ``fwhm``."""
    a, h = 0.5 * slit, 0.5 * fwhm
    if a < 1e-6 * fwhm:  # a Gaussian alone
        return fwhm / (2.0 * np.sqrt(2.0 * np.log(2.0)))

    def excess(s: float) -> float:  # > 0 while the profile at h is above half its maximum
        return float(ndtr((h + a) / s) - ndtr((h - a) / s) - (ndtr(a / s) - 0.5))

    return float(brentq(excess, 1e-6 * fwhm, fwhm, xtol=1e-10 * fwhm))


def fwhm_of(slit_px, blur_sigma_px):
    """FWHM (pixels, before pixel integration) of a top-hat of full width ``slit_px`` blurred by
    a Gaussian of standard deviation ``blur_sigma_px`` (inverse of :func:`blur_for_fwhm`)."""
    a, s = np.broadcast_arrays(0.5 * np.asarray(slit_px, dtype=float),
                               np.asarray(blur_sigma_px, dtype=float))
    half_peak = ndtr(a / s) - 0.5  # half of the peak 2 Phi(a/s) - 1
    lo, hi = np.zeros_like(a), a + 6.0 * s
    for _ in range(60):  # bisection: the profile falls monotonically from the centre
        mid = 0.5 * (lo + hi)
        above = ndtr((mid + a) / s) - ndtr((mid - a) / s) > half_peak
        lo, hi = np.where(above, mid, lo), np.where(above, hi, mid)
    gaussian = 2.0 * np.sqrt(2.0 * np.log(2.0)) * s  # the limit of a vanishing slit
    return np.where(a < 1e-6 * s, gaussian, lo + hi)


@dataclass(frozen=True)
class LineWidth:
    """How wide the lines are along the detector.

    The FWHM at the detector centre is ``fwhm``; the camera's focus changes the whole profile
    by the factor ``1 + slope s + focus s²`` (``s`` the pixel position scaled to [-1, 1]). The
    slit image is ``slit_fraction`` of the central FWHM; with ``anamorphic`` (the true grating
    model) its width also follows the grating's anamorphic magnification: the image of a slit
    of fixed width is ``cos α / cos β`` times wider along the dispersion (Palmer & Loewen,
    *Diffraction Grating Handbook*, ch. 2), so relative to the detector centre it scales as
    ``cos β_c / cos β(x)``.
    """

    fwhm: float
    slit_fraction: float
    focus: float
    slope: float = 0.0
    anamorphic: GratingModel | None = None

    @classmethod
    def draw(cls, rng, fwhm, slit_fraction, focus):
        u = rng.uniform(0.0, 1.0, size=3)
        def pick(given, draw):
            return float(given) if given is not None else float(draw)

        return cls(fwhm=pick(fwhm, 2.0 + 2.0 * u[0]),
                   slit_fraction=pick(slit_fraction, 0.3 + 0.5 * u[1]),
                   focus=pick(focus, 0.2 * u[2] - 0.1))

    def at(self, x, n_pixels):
        """(FWHM, slit width, blur sigma) of lines centred at ``x``."""
        half = 0.5 * (n_pixels - 1)
        x = np.asarray(x, dtype=float)
        s = (x - half) / half
        change = 1 + self.focus * s ** 2
        if self.slope:
            change = change + self.slope * s
        fwhm = np.maximum(self.fwhm * change, 0.3)
        slit = self.slit_fraction * self.fwhm
        sigma = blur_for_fwhm(self.fwhm, slit)
        scale = fwhm / self.fwhm
        if self.anamorphic is None:
            return fwhm, slit * scale, sigma * scale
        _, beta_c = self.anamorphic.angles
        widening = np.cos(np.radians(beta_c)) / np.cos(np.radians(self.anamorphic.beta(x)))
        slit_x = slit * scale * widening
        return fwhm_of(slit_x, sigma * scale), slit_x, sigma * scale
