"""Grating optics: the grating equation for the supported mounts and the detector mapping.

Conventions (those of the grating equation as usually written, e.g. Palmer & Loewen,
*Diffraction Grating Handbook*, ch. 2):

* ``m λ = d (n(λ) sin α + sin β)`` with α the angle of incidence and β the angle of
  diffraction, both from the grating normal and positive on the same side; ``n = 1`` for a
  reflection or plain transmission grating and the prism index for a grism (α is then the
  angle of incidence inside the glass). λ is the wavelength in the medium around the grating.
* Mounts: for a **reflection** grating in a mount with a fixed full angle ``D`` between the
  collimator and camera axes and grating rotation ``φ`` (grating normal from the bisector of the
  two axes): α = φ + D/2, β_c = φ − D/2, where β_c is the diffraction angle along the camera
  axis. For a **transmission** grating with angle of incidence φ and the camera axis at ``D``
  from the undeviated beam: α = φ, β_c = D − φ. For a **grism** with apex angle A (light entering
  the first face at normal incidence), tilt φ and camera at ``D`` from the undeviated beam:
  α = A + φ (inside the glass), β_c = D − A.
* Detector: a flat detector whose normal is tilted by τ from the camera axis (towards larger β),
  with the camera axis meeting it at pixel ``x0``. A point at distance ``s`` from that pixel along
  the dispersion direction receives the ray at ``β = β_c + atan2(s cos τ, f − s sin τ)``. This is
  exactly the geometry of the FITS WCS ``-GRI``/``-GRA`` algorithm (Greisen et al. 2006, Paper III).
* A small camera distortion is an extra pixel shift ``Σ_k c_k P_k(u)`` (Legendre polynomials,
  ``u`` the pixel position scaled to [-1, 1] over the detector), added before the geometry; it is
  held constant beyond |u| = 4, far from any light.

All angles are in degrees at the public interface, wavelengths in nm, lengths in mm, pixels are
0-based along the dispersion axis of the raw frame.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import math

import numpy as np
from numpy.polynomial import legendre

__all__ = [
    "GratingModel",
    "mount_angles",
    "diffraction_angle",
    "wavelength_from_angles",
    "angular_dispersion",
    "reciprocal_linear_dispersion",
    "resolving_power",
    "free_spectral_range",
    "littrow_blaze_wavelength",
    "angle_search_range",
    "solve_grating_angle",
    "scalar_blaze_efficiency",
]

#: No angle of incidence or camera-axis diffraction angle beyond this (degrees) is considered.
_GRAZING_DEG = 80.0
#: Step (degrees) of the scan that brackets the grating-angle roots before brentq refines them.
_ANGLE_STEP_DEG = 0.25


def mount_angles(mount: str, grating_angle_deg: float, deviation_deg: float,
                 prism_apex_deg: float = 0.0) -> tuple[float, float]:
    """Angle of incidence α and camera-axis diffraction angle β_c (degrees) for a mount.

    Parameters
    ----------
    mount : {"reflection", "transmission", "grism"}
        The mount (see the module docstring for the geometry of each).
    grating_angle_deg : float
        Grating rotation φ (reflection), angle of incidence (transmission) or tilt (grism).
    deviation_deg : float
        Collimator-camera angle (reflection) or camera angle from the undeviated beam.
    prism_apex_deg : float
        Grism apex angle.

    Returns
    -------
    alpha_deg, beta_camera_deg : float
    """
    if mount == "reflection":
        return grating_angle_deg + deviation_deg / 2.0, grating_angle_deg - deviation_deg / 2.0
    if mount == "transmission":
        return grating_angle_deg, deviation_deg - grating_angle_deg
    if mount == "grism":
        return prism_apex_deg + grating_angle_deg, deviation_deg - prism_apex_deg
    msg = f"mount must be 'reflection', 'transmission' or 'grism', got {mount!r}"
    raise ValueError(msg)


def diffraction_angle(wavelength_nm, grooves_per_mm: float, order: int, alpha_deg: float,
                      index: float = 1.0):
    """Diffraction angle β (degrees) from ``m λ = d (n sin α + sin β)``; NaN where |sin β| > 1."""
    g = grooves_per_mm * 1e-6  # grooves per nm
    sin_beta = order * g * np.asarray(wavelength_nm, dtype=float) - index * np.sin(np.radians(alpha_deg))
    with np.errstate(invalid="ignore"):
        return np.degrees(np.arcsin(np.where(np.abs(sin_beta) <= 1, sin_beta, np.nan)))


def wavelength_from_angles(alpha_deg, beta_deg, grooves_per_mm: float, order: int,
                           index: float = 1.0):
    """Wavelength (nm) from the grating equation for given α and β (degrees)."""
    g = grooves_per_mm * 1e-6
    return (index * np.sin(np.radians(alpha_deg)) + np.sin(np.radians(beta_deg))) / (order * g)


def angular_dispersion(beta_deg, grooves_per_mm: float, order: int):
    """Angular dispersion dβ/dλ = m / (d cos β), in radians per nm (α fixed)."""
    g = grooves_per_mm * 1e-6
    return order * g / np.cos(np.radians(beta_deg))


def reciprocal_linear_dispersion(beta_deg, grooves_per_mm: float, order: int,
                                 focal_length_mm: float):
    """Reciprocal linear dispersion dλ/dx = d cos β / (m f), in nm per mm."""
    return 1.0 / (angular_dispersion(beta_deg, grooves_per_mm, order) * focal_length_mm)


def resolving_power(wavelength_nm, fwhm_nm):
    """Resolving power R = λ / Δλ from a measured line width (FWHM) in wavelength units."""
    return np.asarray(wavelength_nm, dtype=float) / np.asarray(fwhm_nm, dtype=float)


def free_spectral_range(wavelength_nm, order: int):
    """Free spectral range λ / m (nm): order m+1 of λ·m/(m+1) lands on order m of λ."""
    return np.asarray(wavelength_nm, dtype=float) / order


def littrow_blaze_wavelength(blaze_angle_deg: float, grooves_per_mm: float, order: int) -> float:
    """Littrow blaze wavelength (nm) from ``m λ_B = 2 d sin θ_B``."""
    d_nm = 1e6 / grooves_per_mm
    return 2.0 * d_nm * np.sin(np.radians(blaze_angle_deg)) / order


@dataclass(frozen=True)
class GratingModel:
    """Physical pixel ↔ wavelength model of one grating spectrograph setting.

    Attributes
    ----------
    mount : str
        ``"reflection"``, ``"transmission"`` or ``"grism"``.
    grooves_per_mm : float
        Groove density (lines per mm).
    order : int
        Diffraction order.
    grating_angle_deg : float
        φ, see :func:`mount_angles`.
    deviation_deg : float
        Collimator-camera angle (reflection) or camera angle from the undeviated beam.
    focal_length_mm : float
        Camera focal length.
    pixel_mm : float
        Pixel pitch along the dispersion axis, binning included.
    axis_pixel : float
        0-based pixel (binned, raw frame) where the camera axis meets the detector.
    tilt_deg : float
        Detector tilt τ in the dispersion plane.
    direction : int
        +1 if β (hence λ for m > 0) increases with pixel index, -1 otherwise.
    n_pixels : int
        Number of pixels along the dispersion axis (sets the distortion's [-1, 1] scaling).
    distortion : tuple of float
        Legendre coefficients (pixels) of the distortion shift, starting at degree 0.
    prism_apex_deg, prism_index, prism_index_slope_per_nm, prism_reference_nm : float
        Grism only.
    """

    mount: str
    grooves_per_mm: float
    order: int
    grating_angle_deg: float
    deviation_deg: float
    focal_length_mm: float
    pixel_mm: float
    axis_pixel: float
    n_pixels: int
    tilt_deg: float = 0.0
    direction: int = 1
    distortion: tuple[float, ...] = ()
    prism_apex_deg: float = 0.0
    prism_index: float = 1.0
    prism_index_slope_per_nm: float = 0.0
    prism_reference_nm: float = 600.0

    # -- geometry -------------------------------------------------------------------------
    @property
    def angles(self) -> tuple[float, float]:
        """(α, β_c) in degrees."""
        return mount_angles(self.mount, self.grating_angle_deg, self.deviation_deg,
                            self.prism_apex_deg)

    def with_parameters(self, **changes) -> GratingModel:
        """A copy with some attributes changed.

        Besides the attributes, ``distortion_<k>=value`` sets one Legendre coefficient.
        """
        coeffs = None
        for name in [n for n in changes if n.startswith("distortion_")]:
            k = int(name.rsplit("_", 1)[1])
            coeffs = list(self.distortion) if coeffs is None else coeffs
            coeffs += [0.0] * (k + 1 - len(coeffs))
            coeffs[k] = float(changes.pop(name))
        if coeffs is not None:
            changes["distortion"] = tuple(coeffs)
        return replace(self, **changes)

    def wavelength_derivatives(self, names, x, steps) -> np.ndarray:
        """Derivatives of :meth:`wavelength` at ``x`` with respect to the named parameters.

        Central differences with the given steps (use a small fraction of each parameter's
        uncertainty). Returns an array of shape ``(len(names),) + shape(x)``, nm per unit.
        """
        x = np.asarray(x, dtype=float)
        rows = []
        for name, step in zip(names, steps):
            step = float(step) if np.isfinite(step) and step > 0 else 1e-9
            value = self.parameter(name)
            up = self.with_parameters(**{name: value + step}).wavelength(x)
            down = self.with_parameters(**{name: value - step}).wavelength(x)
            rows.append((up - down) / (2 * step))
        return np.array(rows)

    def parameter(self, name: str) -> float:
        """Value of an attribute, or of the distortion coefficient ``distortion_<k>``."""
        if name.startswith("distortion_"):
            k = int(name.rsplit("_", 1)[1])
            return float(self.distortion[k]) if k < len(self.distortion) else 0.0
        return float(getattr(self, name))

    def _distortion_shift(self, x):
        """Distortion shift (pixels); held at its value 1.5 detector lengths out beyond that,
        where no light falls, so that far-off wavelengths cannot overflow the polynomial."""
        if not self.distortion:
            return 0.0
        return legendre.legval(np.clip(self._scaled(x), -4.0, 4.0), self.distortion)

    def _scaled(self, x):
        half = 0.5 * (self.n_pixels - 1)
        return (np.asarray(x, dtype=float) - half) / half

    def position_mm(self, x):
        """Signed distance (mm) from the camera axis along the detector, towards larger β."""
        x = np.asarray(x, dtype=float)
        return self.direction * (x + self._distortion_shift(x) - self.axis_pixel) * self.pixel_mm

    def beta(self, x):
        """Diffraction angle (degrees) received at pixel ``x``."""
        s = self.position_mm(x)
        tau = np.radians(self.tilt_deg)
        _, beta_c = self.angles
        return beta_c + np.degrees(np.arctan2(s * np.cos(tau), self.focal_length_mm - s * np.sin(tau)))

    # -- wavelength -----------------------------------------------------------------------
    def _grating_terms(self) -> tuple[float, float]:
        """(t, c) such that λ = (sin β + c) / t."""
        alpha, _ = self.angles
        g = self.grooves_per_mm * 1e-6
        sin_a = np.sin(np.radians(alpha))
        slope = self.prism_index_slope_per_nm if self.mount == "grism" else 0.0
        index = self.prism_index if self.mount == "grism" else 1.0
        t = self.order * g - slope * sin_a
        c = (index - slope * self.prism_reference_nm) * sin_a
        return t, c

    def wavelength(self, x):
        """Wavelength (nm) at 0-based pixel ``x`` along the dispersion axis."""
        t, c = self._grating_terms()
        return (np.sin(np.radians(self.beta(x))) + c) / t

    def pixel(self, wavelength_nm, *, iterations: int = 30):
        """0-based pixel where ``wavelength_nm`` lands; NaN if it cannot be diffracted there."""
        t, c = self._grating_terms()
        sin_beta = np.asarray(wavelength_nm, dtype=float) * t - c
        with np.errstate(invalid="ignore"):
            beta = np.arcsin(np.where(np.abs(sin_beta) < 1, sin_beta, np.nan))
        _, beta_c = self.angles
        psi = beta - np.radians(beta_c)
        tau = np.radians(self.tilt_deg)
        with np.errstate(invalid="ignore", divide="ignore"):
            cos_term = np.cos(psi - tau)
            s = np.where((np.abs(psi) < np.pi / 2) & (cos_term > 0),
                         self.focal_length_mm * np.sin(psi) / cos_term, np.nan)
        target = self.axis_pixel + self.direction * s / self.pixel_mm
        x = target
        for _ in range(iterations if self.distortion else 0):
            previous = x
            x = target - self._distortion_shift(x)
            if np.nanmax(np.abs(x - previous), initial=0.0) < 1e-10:
                break
        return x

    def dispersion(self, x):
        """Reciprocal linear dispersion dλ/dx in nm per pixel at pixel ``x`` (numerical)."""
        x = np.asarray(x, dtype=float)
        h = 0.5
        return (self.wavelength(x + h) - self.wavelength(x - h)) / (2 * h)

    def central_wavelength(self) -> float:
        """Wavelength (nm) at the middle of the detector."""
        return float(self.wavelength(0.5 * (self.n_pixels - 1)))


# -- the grating angle for a wanted central wavelength -------------------------------------------
def angle_search_range(model: GratingModel) -> tuple[float, float]:
    """Grating angles (degrees) that keep α and the camera-axis β within 80° of the normal.

    Reflection: α = φ + D/2, β_c = φ − D/2; transmission: α = φ, β_c = D − φ; grism: α = A + φ
    inside the glass (β_c does not depend on φ); see the module docstring.

    Raises
    ------
    ValueError
        For a mount without a grating angle.
    """
    lim = _GRAZING_DEG
    if model.mount == "reflection":
        half = 0.5 * abs(model.deviation_deg)
        return -lim + half, lim - half
    if model.mount == "transmission":
        return max(-lim, model.deviation_deg - lim), min(lim, model.deviation_deg + lim)
    if model.mount == "grism":
        return -lim - model.prism_apex_deg, lim - model.prism_apex_deg
    msg = f"mount {model.mount!r} has no grating angle to solve for"
    raise ValueError(msg)


def solve_grating_angle(model: GratingModel, central_wavelength_nm: float) -> float:
    """Physical grating angle (degrees) that puts ``central_wavelength_nm`` at the detector centre.

    The centre wavelength of ``model`` (its own grating angle is ignored) is scanned over
    :func:`angle_search_range` in steps of 0.25°; each bracketed root is refined with
    :func:`scipy.optimize.brentq`. Of the roots that light the whole detector the one nearest 0°
    is returned (a transmission grating has two, symmetric about its minimum-deviation angle).

    Raises
    ------
    ValueError
        When no angle in the range reaches the wavelength; the message gives the reachable range.
    """
    from scipy.optimize import brentq  # scipy loads only when an angle is solved for

    target = float(central_wavelength_nm)
    if not (math.isfinite(target) and target > 0):
        msg = f"central wavelength must be a positive number of nm, got {central_wavelength_nm!r}"
        raise ValueError(msg)
    template = model.with_parameters(grating_angle_deg=0.0)
    centre = 0.5 * (template.n_pixels - 1)
    ends = np.array([0.0, template.n_pixels - 1.0])
    lo, hi = angle_search_range(template)
    grid = np.linspace(lo, hi, math.ceil((hi - lo) / _ANGLE_STEP_DEG) + 1)

    def offset(phi: float) -> float:
        return float(template.with_parameters(grating_angle_deg=phi).wavelength(centre)) - target

    values = np.array([offset(p) for p in grid])
    roots = [float(p) for p, v in zip(grid, values) if v == 0.0]
    for i in np.flatnonzero(np.sign(values[:-1]) * np.sign(values[1:]) < 0):
        roots.append(float(brentq(offset, grid[i], grid[i + 1], xtol=1e-10)))
    lit = [r for r in roots
           if np.all(np.isfinite(template.with_parameters(grating_angle_deg=r).wavelength(ends)))]
    if not lit:
        reach = values + target
        reach = reach[np.isfinite(reach) & (reach > 0)]
        span = (f"{reach.min():.1f}–{reach.max():.1f} nm" if len(reach) else "no positive wavelength")
        msg = (f"central wavelength {target:g} nm is out of reach in order {template.order}: "
               f"grating angles {lo:.1f}° to {hi:.1f}° put {span} at the detector centre")
        raise ValueError(msg)
    return min(lit, key=abs)


# -- blaze ---------------------------------------------------------------------------------------
def scalar_blaze_efficiency(model: GratingModel, wavelength_nm, order: int, *, blaze_nm: float,
                            blaze_order: int) -> np.ndarray:
    """Relative efficiency (1 at the blaze peak) of a blazed grating, scalar approximation.

    Reflection gratings: the Fraunhofer pattern of one groove facet (common practice), ::

        efficiency = sinc²(γ),  γ = π (d cos θ_B / λ) [sin(α − θ_B) + sin(β − θ_B)]

    with facet width ``d cos θ_B``, α from the model, β from the grating equation for λ in
    ``order``, and the blaze angle θ_B from the Littrow blaze condition ``m_B λ_B = 2 d sin θ_B``
    (``m_B = blaze_order``). γ = 0 (efficiency 1) where the facet reflects specularly into β;
    in Littrow that is λ_B. Transmission gratings and grisms: the small-angle form of the same
    function, γ = π (m − m_B λ_B / λ), whose peak is at λ_B in the blaze order.

    The scalar theory ignores polarisation, groove shadowing and resonance anomalies; for groove
    spacings below about two wavelengths the real efficiency can differ a lot. Returns NaN where
    λ cannot be diffracted into ``order``.
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    g = model.grooves_per_mm * 1e-6
    alpha, _ = model.angles
    with np.errstate(invalid="ignore", divide="ignore"):
        if model.mount == "reflection":
            sin_tb = blaze_order * g * blaze_nm / 2.0
            if not 0 < sin_tb < 1:
                msg = f"blaze wavelength {blaze_nm} nm in order {blaze_order} gives no blaze angle"
                raise ValueError(msg)
            theta = np.arcsin(sin_tb)
            sin_beta = order * g * lam - np.sin(np.radians(alpha))
            beta = np.arcsin(np.where(np.abs(sin_beta) <= 1, sin_beta, np.nan))
            gamma = (np.pi * np.cos(theta) / (g * lam)
                     * (np.sin(np.radians(alpha) - theta) + np.sin(beta - theta)))
        else:
            valid = np.isfinite(model.with_parameters(order=int(order)).pixel(lam))
            gamma = np.where(valid, np.pi * (order - blaze_order * blaze_nm / lam), np.nan)
        return np.sinc(gamma / np.pi) ** 2
