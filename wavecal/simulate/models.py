"""The nominal and the true pixel-to-wavelength models of a simulated frame."""
from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from ..model_setup import nominal_model
from ..optics import GratingModel

__all__ = ["nominal_setting", "true_model"]

#: Groove densities tried for the hidden grating of an ``approximate`` profile.
_HIDDEN_GROOVES = (300.0, 600.0, 900.0, 1200.0)


def nominal_setting(profile, bins, catalogue, grating_angle_deg, central_wavelength_nm):
    """(header angle or None, nominal model)."""
    if profile.grating.mount == "approximate":
        return None, nominal_model(profile, 0.0, bins)
    g = profile.grating
    template = nominal_model(profile, 0.0, bins)
    if grating_angle_deg is not None:
        header_angle = float(grating_angle_deg)
    elif central_wavelength_nm is not None:
        phys = _angle_for_centre(template, central_wavelength_nm, profile)
        header_angle = (phys - g.angle_zero_point_deg) / g.angle_scale
    elif profile.header["grating_angle"].default is not None:
        header_angle = float(profile.header["grating_angle"].default)
    else:
        phys = _angle_with_most_lines(template, catalogue, profile)
        header_angle = (phys - g.angle_zero_point_deg) / g.angle_scale
    header_angle = round(header_angle, 4)
    phys = g.angle_scale * header_angle + g.angle_zero_point_deg
    return header_angle, template.with_parameters(grating_angle_deg=phys)


def _angle_grid(template: GratingModel) -> tuple[np.ndarray, np.ndarray]:
    """Grating angles and the wavelengths at (first, axis, last) pixel for each."""
    phis = np.arange(-75.0, 75.01, 0.25)
    xs = np.array([0.0, template.axis_pixel, template.n_pixels - 1.0])
    ends = np.array([template.with_parameters(grating_angle_deg=p).wavelength(xs) for p in phis])
    return phis, ends


def _angle_for_centre(template: GratingModel, centre_nm: float, profile) -> float:
    phis, ends = _angle_grid(template)
    diff = ends[:, 1] - centre_nm
    roots = []
    for i in np.flatnonzero(np.isfinite(diff[:-1]) & np.isfinite(diff[1:])
                            & (np.sign(diff[:-1]) != np.sign(diff[1:]))):
        def off(p):
            return float(template.with_parameters(grating_angle_deg=p).wavelength(
                template.axis_pixel)) - centre_nm
        roots.append(brentq(off, phis[i], phis[i + 1], xtol=1e-9))
    if not roots:
        msg = f"no grating angle puts {centre_nm} nm at the centre of {profile.name!r}"
        raise ValueError(msg)
    return float(min(roots, key=abs))


def _angle_with_most_lines(template: GratingModel, catalogue, profile) -> float:
    phis, ends = _angle_grid(template)
    valid = np.all(np.isfinite(ends), axis=1)
    if not valid.any():
        msg = f"profile {profile.name!r}: no grating angle gives a valid spectrum"
        raise ValueError(msg)
    wl = catalogue.wavelength_nm[~catalogue.weak]
    lo, hi = np.minimum(ends[:, 0], ends[:, 2]), np.maximum(ends[:, 0], ends[:, 2])
    count = ((wl[None, :] >= lo[:, None]) & (wl[None, :] <= hi[:, None])).sum(axis=1)
    sens = profile.sensitivity_nm or (300.0, 1100.0)
    valid &= (lo >= sens[0]) & (hi <= sens[1])
    preferred = profile.grating.blaze_nm or 0.5 * (sens[0] + sens[1])
    score = np.where(valid, count - 1e-6 * np.abs(ends[:, 1] - preferred), -np.inf)
    return float(phis[int(np.argmax(score))])


def true_model(profile, nominal, rng, angle_error, focal_error, axis_error, tilt_error,
                distortion, bins):
    u = rng.uniform(-1.0, 1.0, size=6)
    if distortion is None:
        distortion = (0.0, 0.0, 0.15 * u[4], 0.15 * u[5])
    distortion = tuple(float(c) for c in distortion)
    if profile.grating.mount == "approximate":
        return _hidden_model(profile, nominal, rng, distortion)
    pr = profile.priors
    bin_d = bins[profile.detector.dispersion_axis]

    def pick(given, draw):
        return float(given) if given is not None else float(draw)

    d_angle = pick(angle_error, u[0] * pr.grating_angle_deg)
    d_focal = pick(focal_error, u[1] * pr.focal_length_fraction)
    return nominal.with_parameters(
        grating_angle_deg=nominal.grating_angle_deg + d_angle,
        focal_length_mm=nominal.focal_length_mm * (1 + d_focal),
        axis_pixel=nominal.axis_pixel + pick(axis_error, u[2] * pr.axis_pixel_px / bin_d),
        tilt_deg=nominal.tilt_deg + pick(tilt_error, u[3] * pr.tilt_deg),
        distortion=distortion,
    )


def _hidden_model(profile, nominal, rng, distortion):
    """An invented reflection grating matching an ``approximate`` profile within its uncertainty."""
    approx = profile.approximate
    u = rng.uniform(-1.0, 1.0, size=5)
    centre = approx.central_wavelength_nm * (1 + u[0] * approx.central_wavelength_uncertainty)
    bin_d = nominal.pixel_mm / (profile.detector.pixel_size_um * 1e-3)
    dispersion = approx.dispersion_nm_per_px * bin_d * (1 + u[1] * approx.dispersion_uncertainty)
    deviation = 30.0 + 15.0 * u[2]
    options = []
    for grooves in _HIDDEN_GROOVES:
        sin_phi = grooves * 1e-6 * centre / (2 * np.cos(np.radians(deviation / 2)))
        if sin_phi >= 0.9:
            continue
        phi = float(np.degrees(np.arcsin(sin_phi)))
        beta_c = np.radians(phi - deviation / 2)
        focal = nominal.pixel_mm * np.cos(beta_c) / (grooves * 1e-6 * dispersion)
        if 15.0 <= focal <= 2000.0:
            options.append((grooves, phi, float(focal)))
    if not options:
        msg = f"profile {profile.name!r}: no plausible grating reproduces its approximate values"
        raise ValueError(msg)
    grooves, phi, focal = options[int(rng.integers(len(options)))]
    return GratingModel(
        mount="reflection", grooves_per_mm=grooves, order=1, grating_angle_deg=phi,
        deviation_deg=deviation, focal_length_mm=focal, pixel_mm=nominal.pixel_mm,
        axis_pixel=nominal.axis_pixel + 0.02 * nominal.n_pixels * u[3], n_pixels=nominal.n_pixels,
        tilt_deg=1.5 * u[4], direction=nominal.direction, distortion=distortion)

