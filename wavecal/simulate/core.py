"""Synthetic arc-lamp frames with a known pixel-to-wavelength truth: :func:`simulate_arc`.

:func:`simulate_arc` draws a *true* physical model of the spectrograph around the nominal one
(the profile plus the header's grating angle, off by amounts within the profile's priors), puts
the lamp's lines on the detector with it and renders the raw frame a detector would read: the
slit image along the spatial axis, line profiles integrated over pixels, scattered light,
next-order ghosts of ultraviolet lines, bias and overscan, photon and read noise, cosmic rays,
hot pixels and saturation.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from ..linelists import load_line_list
from ..profile import InstrumentProfile
from ..validation import parse_lamps
from .arc import SimulatedArc
from .camera import CameraGeometry
from .detector import (Layout, draw_bias, draw_hot_pixels, flag_saturated, frame_binning,
                       frame_header, read_out, slit_illumination, continuum_shape)
from .lamp import LampExtras, place_lines
from .line_profile import LineWidth
from .line_shape import LineImageShape
from .models import nominal_setting, true_model
from .render import expected_image, set_fluxes

__all__ = ["simulate_arc"]


def simulate_arc(
    profile: InstrumentProfile,
    *,
    seed: int | np.random.Generator,
    lamps: str | Sequence[str] | None = None,
    grating_angle_deg: float | None = None,
    central_wavelength_nm: float | None = None,
    angle_error_deg: float | None = None,
    focal_error_fraction: float | None = None,
    axis_error_px: float | None = None,
    tilt_error_deg: float | None = None,
    distortion_px: Sequence[float] | None = None,
    fwhm_px: float | None = None,
    slit_fraction: float | None = None,
    focus_variation: float | None = None,
    peak_snr: float = 300.0,
    missing_fraction: float = 0.2,
    unlisted_fraction: float = 0.15,
    intensity_scatter: float = 0.7,
    ghosts: bool = True,
    cosmic_rays: int = 20,
    hot_pixels: int = 10,
    saturate: int = 0,
    scattered_light: float = 0.003,
    binning: int | tuple[int, int] = 1,
    bias_adu: float | None = None,
    exposure_s: float = 30.0,
    date_obs: str = "2025-03-14T19:42:05.0",
    dtype: str = "uint16",
    noise_seed: int | None = None,
    line_tilt_deg: float | tuple[float, float] = 0.0,
    line_curvature_px: float | tuple[float, float] = 0.0,
    fwhm_slope: float = 0.0,
    anamorphic: bool = False,
    detector_rotation_deg: float = 0.0,
    radial_distortion_px: float = 0.0,
    slit_smile: bool = False,
    unlisted_strength: float = 0.5,
    balmer: float = 0.0,
    ion_lines: float = 0.0,
    unfiltered_orders: Sequence[int] = (),
    saturation_boost: tuple[float, float] = (1.3, 3.0),
) -> SimulatedArc:
    """Simulate a raw arc-lamp frame of ``profile`` with a known true wavelength model.

    Every random choice comes from ``np.random.default_rng(seed)``; an option left at None is
    drawn from it. Pixel quantities are in pixels of the (binned) frame as read.

    Parameters
    ----------
    profile : InstrumentProfile
        The instrument. For an ``approximate`` profile a hidden reflection grating (300-1200
        /mm, focal length reproducing the dispersion) is invented whose central wavelength and
        dispersion lie within the stated uncertainties; the four error options do not apply.
    seed : int or numpy.random.Generator
        Source of all randomness.
    lamps : str or sequence of str, optional
        Lamp elements ("HgAr", "Hg+Ne", ["Ne", "Ar"]); default the profile's lamps.
    grating_angle_deg : float, optional
        Grating angle as the header states it (nominal). Default: the angle that puts
        ``central_wavelength_nm`` at the detector centre, else the header keyword's default,
        else the angle that puts the most listed lines of the lamps on the detector.
    central_wavelength_nm : float, optional
        Nominal wavelength at the centre of the detector (used when no angle is given).
    angle_error_deg, focal_error_fraction, axis_error_px, tilt_error_deg : float, optional
        True minus nominal grating angle, relative focal length error, camera-axis pixel offset
        and detector tilt. Default: uniform within the profile's prior half-widths.
    distortion_px : sequence of float, optional
        Legendre coefficients (pixels) of the true distortion; default ``(0, 0, c2, c3)`` with
        ``c2, c3`` uniform in +-0.15 px.
    fwhm_px : float, optional
        Line FWHM at the detector centre before pixel integration; default uniform 2-4 px.
    slit_fraction : float, optional
        Slit-image width as a fraction of the FWHM, in [0, 0.95]; default uniform 0.3-0.8.
    focus_variation : float, optional
        Relative FWHM change from centre to the detector ends (quadratic); default +-0.1.
    peak_snr : float
        Expected peak S/N of the brightest first-order listed line in the sum over the lit rows.
    missing_fraction : float
        Probability that a listed line is absent from the lamp.
    unlisted_fraction : float
        Number of extra, unlisted lines at random wavelengths, relative to the listed lines
        present.
    intensity_scatter : float
        Log-normal sigma of each line's strength around its listed intensity.
    ghosts : bool
        Add next-order images (at 1-5 % of their flux) of listed lines bluer than both the
        detector's first-order range and the profile's sensitivity range (ultraviolet lines
        that an order-sorting filter would not block).
    cosmic_rays, hot_pixels : int
        Numbers of cosmic-ray hits and hot pixels.
    saturate : int
        Number of the brightest listed lines pushed 1.3-3 times above saturation.
    scattered_light : float
        Peak of the smooth scattered-light continuum relative to the brightest line's peak.
    binning : int or tuple of int
        Binning, 1 or 2, for both axes or ``(axis 0, axis 1)``.
    bias_adu : float, optional
        Bias level; default the profile's ``bias_adu``, or 300-1200 ADU with an overscan.
    exposure_s : float
        Exposure time for the header.
    date_obs : str
        DATE-OBS for the header.
    dtype : {"uint16", "float32"}
        Data type of the frame (float32 frames are neither rounded nor clipped at zero).
    noise_seed : int, optional
        Seed of the per-exposure noise (photon, read noise, cosmic rays): with the same ``seed``
        and another ``noise_seed`` you get another exposure of the same lamp and setting.
    line_tilt_deg : float or (float, float)
        Angle of the line images from the spatial axis (degrees, |angle| < 45; positive: towards
        larger pixels as the spatial pixel grows), or its values at the first and last
        illuminated pixel along the dispersion (linear in between). See the module docstring.
    line_curvature_px : float or (float, float)
        Sagitta of the line images: extra shift (pixels) at the slit ends relative to the
        straight tilted line, or its values at the first and last illuminated pixel. Zero tilt
        and curvature (the default) give straight lines along the spatial axis.
    fwhm_slope : float
        Relative FWHM change, linear in the pixel position, from the detector centre to its
        last pixel (the opposite at the first), besides ``focus_variation``.
    anamorphic : bool
        Let the slit-image width follow the grating's anamorphic magnification along the
        detector (see :class:`~.line_profile.LineWidth`).
    detector_rotation_deg, radial_distortion_px, slit_smile
        The camera and detector geometry of :mod:`.camera`: rotation of the detector
        (degrees, |angle| < 45), third-order radial distortion given as the displacement
        (pixels, positive outwards) at the end of the dispersion axis farthest from the camera
        axis, and the conical-diffraction curvature of the slit image. Any of them replaces
        the given ``line_tilt_deg`` / ``line_curvature_px`` (which must then be zero) and
        makes :attr:`SimulatedArc.line_shape` a :class:`~.camera.CameraGeometry`.
    unlisted_strength : float
        Median strength of the random unlisted lines relative to a listed line.
    balmer : float
        Hα strength relative to the strongest listed line (0: no hydrogen); see
        :mod:`.hydrogen`.
    ion_lines : float
        Strength of unlisted ion lines (Ar II for an Ar lamp) relative to the element's
        strongest listed line (0: none).
    unfiltered_orders : sequence of int
        Orders among (2, 3) that no filter blocks: every line also appears in them.
    saturation_boost : (float, float)
        Range of the factor by which the ``saturate`` brightest lines exceed saturation.

    Returns
    -------
    SimulatedArc

    Raises
    ------
    ValueError
        For invalid options, or when the requested setting puts no valid wavelength on the
        detector.
    """
    _check_options(peak_snr, missing_fraction, unlisted_fraction, intensity_scatter,
                   slit_fraction, dtype, cosmic_rays, hot_pixels, saturate, scattered_light)
    tilt, curvature = _pair(line_tilt_deg, "line_tilt_deg"), _pair(line_curvature_px,
                                                                     "line_curvature_px")
    if max(abs(tilt[0]), abs(tilt[1])) >= 45.0:
        msg = f"line_tilt_deg must be within (-45, 45) degrees, got {line_tilt_deg!r}"
        raise ValueError(msg)
    camera = bool(detector_rotation_deg or radial_distortion_px or slit_smile)
    _check_physics(camera, tilt, curvature, detector_rotation_deg, balmer, ion_lines,
                   unlisted_strength, saturation_boost)
    extras = LampExtras(unlisted_strength=float(unlisted_strength), balmer=float(balmer),
                        ion_lines=float(ion_lines),
                        unfiltered_orders=tuple(int(k) for k in unfiltered_orders))
    rng = np.random.default_rng(seed)
    lamp_list = parse_lamps(lamps) if isinstance(lamps, str) else tuple(lamps or profile.lamps)
    if not lamp_list:
        msg = f"no lamp elements given and profile {profile.name!r} names none"
        raise ValueError(msg)
    bins = frame_binning(profile, binning)
    layout = Layout.of(profile, bins)
    catalogue = load_line_list(lamp_list, medium=profile.medium, include_weak=True)

    header_angle, nominal = nominal_setting(profile, bins, catalogue, grating_angle_deg,
                                            central_wavelength_nm)
    truth = true_model(profile, nominal, rng, angle_error_deg, focal_error_fraction,
                       axis_error_px, tilt_error_deg, distortion_px, bins)
    lo, hi = np.sort(truth.wavelength(np.array(layout.disp) - 0.5))
    if not (np.isfinite(lo) and np.isfinite(hi)):
        msg = f"{profile.name}: the requested setting diffracts no light onto part of the detector"
        raise ValueError(msg)

    width = LineWidth.draw(rng, fwhm_px, slit_fraction, focus_variation)
    if fwhm_slope or anamorphic:
        width = replace(width, slope=float(fwhm_slope), anamorphic=truth if anamorphic else None)
    lines = place_lines(catalogue, lamp_list, truth, layout, (lo, hi), rng, profile,
                        missing_fraction, unlisted_fraction, intensity_scatter, ghosts, extras)
    spatial, slit_rows, (slit_centre, slit_half) = slit_illumination(layout, rng)
    if camera:
        shape = _camera(truth, layout, profile, bins, slit_centre, detector_rotation_deg,
                        radial_distortion_px, slit_smile)
        lines = lines.assign(x_true=shape.reference_position_of_focal(lines["x_true"].to_numpy()))
    else:
        shape = LineImageShape(tilt_deg=tilt, curvature_px=curvature, reference_row=slit_centre,
                               half_length=slit_half,
                               x_range=(float(layout.disp[0]), float(layout.disp[1] - 1)))
    cont_shape = continuum_shape(layout, rng)
    bias = draw_bias(profile, rng, bias_adu)
    hot = draw_hot_pixels(layout, rng, hot_pixels)
    boosts = rng.uniform(*saturation_boost, size=saturate)

    lines, cont_level = set_fluxes(lines, layout, width, truth, spatial, slit_rows, cont_shape,
                                   profile, peak_snr, scattered_light, boosts, bias[0])
    image = expected_image(lines, layout, width, truth, spatial, cont_shape, cont_level, shape)
    lines = flag_saturated(lines, image, bias[0], profile)
    noise_rng = rng if noise_seed is None else np.random.default_rng(noise_seed)
    data = read_out(image, layout, profile, bias, hot, noise_rng, cosmic_rays, dtype)
    header = frame_header(profile, header_angle, lamp_list, exposure_s, date_obs, bins)
    columns = ["wavelength_nm", "element", "order", "x_true", "flux_e", "snr", "fwhm_px",
               "listed", "ghost", "saturated"]
    return SimulatedArc(data=data, header=header, truth=truth, lines=lines[columns],
                        profile=profile, nominal=nominal, binning=bins, slit_rows=slit_rows,
                        line_shape=shape)


# -- option checks and geometry --------------------------------------------------------------
def _check_physics(camera, tilt, curvature, rotation, balmer, ion_lines, unlisted_strength,
                   saturation_boost):
    boost = tuple(float(b) for b in saturation_boost)
    rules = [
        (not (camera and (any(tilt) or any(curvature))),
         "line_tilt_deg / line_curvature_px cannot be combined with the camera geometry "
         "(detector_rotation_deg, radial_distortion_px, slit_smile)"),
        (abs(rotation) < 45.0, "detector_rotation_deg must be within (-45, 45) degrees"),
        (min(balmer, ion_lines, unlisted_strength) >= 0,
         "balmer, ion_lines and unlisted_strength must be non-negative"),
        (len(boost) == 2 and 1.0 <= boost[0] <= boost[1],
         "saturation_boost must be a pair (low, high) with 1 <= low <= high"),
    ]
    for ok, msg in rules:
        if not ok:
            raise ValueError(msg)


def _camera(truth, layout, profile, bins, slit_centre, rotation, radial_px, smile):
    """The :class:`CameraGeometry` of the options (rotation about the detector centre)."""
    d0, d1 = layout.disp
    reach = max(abs(d0 - truth.axis_pixel), abs(d1 - 1 - truth.axis_pixel))
    spatial_bin = bins[1 - profile.detector.dispersion_axis]
    return CameraGeometry(model=truth, reference_row=float(slit_centre),
                          centre_x=0.5 * (d0 + d1 - 1), rotation_deg=float(rotation),
                          radial_k=float(radial_px) / reach ** 3, smile=bool(smile),
                          spatial_pixel_mm=profile.detector.pixel_size_um * 1e-3 * spatial_bin)


def _check_options(peak_snr, missing_fraction, unlisted_fraction, intensity_scatter,
                   slit_fraction, dtype, cosmic_rays, hot_pixels, saturate, scattered_light):
    rules = [
        (peak_snr > 0, "peak_snr must be positive"),
        (0 <= missing_fraction < 1, "missing_fraction must be in [0, 1)"),
        (unlisted_fraction >= 0, "unlisted_fraction must be non-negative"),
        (intensity_scatter >= 0, "intensity_scatter must be non-negative"),
        (slit_fraction is None or 0 <= slit_fraction <= 0.95,
         "slit_fraction must be in [0, 0.95]"),
        (dtype in ("uint16", "float32"), "dtype must be 'uint16' or 'float32'"),
        (min(cosmic_rays, hot_pixels, saturate) >= 0,
         "cosmic_rays, hot_pixels and saturate must be non-negative"),
        (scattered_light >= 0, "scattered_light must be non-negative"),
    ]
    for ok, msg in rules:
        if not ok:
            raise ValueError(msg)


def _pair(value, name: str) -> tuple[float, float]:
    """A number or a pair of numbers as a pair of finite floats."""
    pair = (value, value) if np.isscalar(value) else tuple(value)
    if len(pair) != 2 or not all(np.isfinite(float(v)) for v in pair):
        msg = f"{name} must be a finite number or a pair of them, got {value!r}"
        raise ValueError(msg)
    return (float(pair[0]), float(pair[1]))

