"""The FITS WCS grating algorithm (Greisen et al. 2006, "Paper III") for a grating model.

The physical model of a spectrograph without distortion *is* the geometry of the ``-GRA``/``-GRI``
algorithm (see :mod:`wavecal.optics`): :func:`grating_header` writes it. :func:`grating_candidate`
gives the header in another medium (the mixed forms ``WAVE-GRA``/``AWAV-GRI``, converted by WCSLIB
with the Edlén 1953 / Cox 2000 standard-air formula), :func:`evaluate_1d` evaluates a header with
astropy.wcs, and :func:`physical_approximation` finds the best distortion-free model for a
solution with distortion. :mod:`wavecal.wcs` decides whether the result is exact enough.
"""
from __future__ import annotations

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS
from scipy.optimize import least_squares

from .optics import GratingModel

__all__ = ["AIRVAC_WCSLIB", "grating_header", "spectral_ctype", "grating_candidate", "evaluate_1d",
           "physical_approximation"]

#: Name of the air/vacuum conversion implied by a mixed grating form (WCSLIB's spx.c).
AIRVAC_WCSLIB = "Edlen 1953/Cox 2000 std air (WCSLIB)"
#: CUNIT value -> size of 1 nm in that unit.
_PER_NM = {"Angstrom": 10.0, "nm": 1.0, "m": 1e-9}


def grating_header(model: GratingModel, *, ctype: str = "WAVE-GRI", cunit: str = "Angstrom",
                   reference_pixel: float | None = None, first_pixel: float = 0.0,
                   axis: int = 1) -> fits.Header:
    """``-GRI``/``-GRA`` cards equivalent to a distortion-free ``model``.

    Follows Paper III as implemented by WCSLIB: with the reference pixel ``p`` (0-based, default
    the camera-axis pixel), β_r = β(p), θ = β_c + τ − β_r, L = f cos τ and
    ``CDELT = direction · pixel · cos β_r · cos²θ / (L t)``, t = m G − n′ sin α. ``PVi_0`` and
    ``PVi_4`` are per metre whatever ``CUNITi`` says; ``CRPIXi`` is 1-based.

    Parameters
    ----------
    model : GratingModel
        A model without distortion.
    ctype : str
        ``"WAVE-GRI"`` or ``"AWAV-GRA"``: the grating equation in the model's own medium
        (convert to another medium with :func:`spectral_ctype` and WCSLIB, not here).
    cunit : {"Angstrom", "nm", "m"}
        Unit of ``CRVALi``/``CDELTi``.
    reference_pixel : float, optional
        0-based model pixel of ``CRPIXi``; default ``model.axis_pixel``.
    first_pixel : float
        Model pixel of the image's first pixel along this axis (``CRPIXi`` counts from it).
    axis : int
        FITS axis number of the cards.

    Returns
    -------
    astropy.io.fits.Header
        ``CTYPEi``, ``CUNITi``, ``CRPIXi``, ``CRVALi``, ``CDELTi``, ``PVi_0`` … ``PVi_6``.

    Raises
    ------
    ValueError
        If the model has a non-zero distortion term (the algorithm has none).
    """
    if any(c != 0.0 for c in model.distortion):
        msg = "the grating algorithm has no distortion terms; the model has some"
        raise ValueError(msg)
    p = model.axis_pixel if reference_pixel is None else float(reference_pixel)
    alpha, beta_c = model.angles
    beta_r = float(model.beta(p))
    theta = beta_c + model.tilt_deg - beta_r
    grism = model.mount == "grism"
    slope_per_nm = model.prism_index_slope_per_nm if grism else 0.0
    lam_r_nm = float(model.wavelength(p))
    n_r = (model.prism_index + slope_per_nm * (lam_r_nm - model.prism_reference_nm)) if grism else 1.0
    grooves_per_m = model.grooves_per_mm * 1e3
    slope_per_m = slope_per_nm * 1e9
    t_per_m = grooves_per_m * model.order - slope_per_m * np.sin(np.radians(alpha))
    length_m = model.focal_length_mm * np.cos(np.radians(model.tilt_deg)) * 1e-3
    cdelt_m = (model.direction * model.pixel_mm * 1e-3 * np.cos(np.radians(beta_r))
               * np.cos(np.radians(theta)) ** 2 / (length_m * t_per_m))
    h = fits.Header()
    h[f"CTYPE{axis}"] = ctype
    h[f"CUNIT{axis}"] = cunit
    h[f"CRPIX{axis}"] = p - first_pixel + 1.0
    h[f"CRVAL{axis}"] = lam_r_nm * _PER_NM[cunit]
    h[f"CDELT{axis}"] = float(cdelt_m * 1e9 * _PER_NM[cunit])
    comments = ("groove density [1/m]", "diffraction order", "angle of incidence [deg]",
                "refractive index at CRVAL", "dn/dlambda [1/m]", "out-of-plane angle [deg]",
                "detector normal from ref. ray [deg]")
    values = (grooves_per_m, model.order, alpha, n_r, slope_per_m, 0.0, theta)
    for i, (value, comment) in enumerate(zip(values, comments)):
        h[f"PV{axis}_{i}"] = (float(value) if i != 1 else int(value), comment)
    return h


def spectral_ctype(medium: str, algorithm: str) -> str:
    """CTYPE of a spectral axis: ``AWAV`` (air) or ``WAVE`` (vacuum) with an algorithm code.

    ``algorithm`` is ``""`` (linear), ``"GRA"``, ``"GRI"``, ``"LOG"`` or ``"TAB"``.
    """
    stype = {"air": "AWAV", "vacuum": "WAVE"}.get(medium)
    if stype is None:
        msg = f"medium must be 'air' or 'vacuum', got {medium!r}"
        raise ValueError(msg)
    return stype if not algorithm else f"{stype}-{algorithm}"


def grating_candidate(model: GratingModel, solution_medium: str, medium: str,
                       first_pixel: float) -> tuple[fits.Header, str]:
    """A 1-axis grating header in the output medium and the conversion it implies."""
    native = spectral_ctype(solution_medium, "GRA" if solution_medium == "air" else "GRI")
    h = grating_header(model, ctype=native, cunit="nm", first_pixel=first_pixel)
    if medium == solution_medium:
        return h, "none"
    w = WCS(h)
    w.wcs.sptr(spectral_ctype(medium, "???"))
    w.wcs.set()
    h["CTYPE1"] = w.wcs.ctype[0]
    h["CRVAL1"] = float(w.wcs.crval[0]) * 1e9  # WCSLIB holds SI (metres)
    h["CDELT1"] = float(w.wcs.cdelt[0]) * 1e9
    return h, AIRVAC_WCSLIB


def evaluate_1d(header: fits.Header, n: int) -> np.ndarray:
    """astropy.wcs wavelengths (nm) of a 1-axis grating header at FITS pixels 1 … n."""
    w = WCS(header)
    return w.wcs_pix2world(np.arange(1.0, n + 1.0), 1)[0] * 1e9  # -GRI/-GRA give metres


def physical_approximation(model: GratingModel, x: np.ndarray, target: np.ndarray,
                            dispersion: np.ndarray) -> GratingModel:
    """The distortion-free model closest (least squares, in pixels) to ``target`` at ``x``.

    Camera-axis pixel, focal length and tilt span the Legendre degrees 0–2 of the distortion;
    the grating angle is held (it is almost interchangeable with the camera-axis pixel).
    """
    base = model.with_parameters(distortion=())
    start = np.array([base.axis_pixel, base.focal_length_mm, base.tilt_deg])

    def residual(p: np.ndarray) -> np.ndarray:
        trial = base.with_parameters(axis_pixel=p[0], focal_length_mm=p[1], tilt_deg=p[2])
        return (trial.wavelength(x) - target) / dispersion

    scale = np.array([1.0, 1e-3 * base.focal_length_mm, 0.01])
    fit = least_squares(residual, start, x_scale=scale, method="lm")
    return base.with_parameters(axis_pixel=float(fit.x[0]), focal_length_mm=float(fit.x[1]),
                                tilt_deg=float(fit.x[2]))
