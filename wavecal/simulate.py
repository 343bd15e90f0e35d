"""Synthetic arc-lamp frames with a known pixel-to-wavelength truth.

:func:`simulate_arc` draws a *true* physical model of the spectrograph around the nominal one
(the profile plus the header's grating angle, off by amounts within the profile's priors), puts
the lamp's lines on the detector with it and renders the raw frame a detector would read: the
slit image along the spatial axis, line profiles integrated over pixels, scattered light,
next-order ghosts of ultraviolet lines, bias and overscan, photon and read noise, cosmic rays,
hot pixels and saturation. The lamp differs from the shipped line list on purpose, as real
lamps do: some listed lines are missing, some unlisted lines are present, and line strengths
scatter around the listed intensities, so that a matcher cannot rely on line heights.

Line profile
------------
The slit image on the detector is a top-hat of full width ``w`` pixels blurred by a Gaussian of
standard deviation ``s`` (the camera optics). Integrated over pixel ``[x - 1/2, x + 1/2]``, a
unit-flux line centred at ``c`` puts

    P(x) = s/(2a) [G((d+1/2+a)/s) - G((d-1/2+a)/s) - G((d+1/2-a)/s) + G((d-1/2-a)/s)]

into the pixel, with ``d = x - c``, ``a = w/2`` and ``G(t) = t Phi(t) + phi(t)`` the
antiderivative of the standard normal distribution function ``Phi`` (``phi`` its density).

Line image along the slit
-------------------------
By default every line is a straight image of the slit, parallel to the spatial axis. With
``line_tilt_deg`` and ``line_curvature_px`` a line at pixel ``x`` on the reference row ``y_c``
(the centre of the simulated slit) lies at ``x + shift(x, y)`` on row ``y``, with

    shift(x, y) = tan(tilt(x)) (y - y_c) + curvature(x) ((y - y_c) / h)²

``h`` the half-length of the slit: the tilt is the angle of the line image from the spatial axis
(positive: the line moves towards larger ``x`` as ``y`` grows) and the curvature the sagitta, the
extra shift at the slit ends relative to the straight tilted line. Both may change linearly from
the first to the last illuminated pixel along the dispersion (see :class:`LineImageShape`).
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from astropy.io import fits
from scipy.optimize import brentq
from scipy.special import ndtr

from ._atomic import atomic_path
from .linelists import load_line_list
from .model_setup import nominal_model
from .optics import GratingModel
from .profile import InstrumentProfile, parse_lamps

__all__ = ["LineImageShape", "SimulatedArc", "simulate_arc", "slit_line_profile"]

#: Lines up to this many pixels beyond the ends of the detector still spill light onto it.
_EDGE_MARGIN_PX = 12
#: Ghost (next order) flux as a fraction of the line's own first-order flux.
_GHOST_FRACTION = (0.01, 0.05)
#: Log-normal scatter of the lamp-to-lamp brightness ratio of different elements.
_ELEMENT_SCATTER = 0.5
#: Groove densities tried for the hidden grating of an ``approximate`` profile.
_HIDDEN_GROOVES = (300.0, 600.0, 900.0, 1200.0)
_SQRT_2PI = np.sqrt(2.0 * np.pi)


@dataclass(frozen=True)
class LineImageShape:
    """Where the image of a line lies on each row of the slit (see the module docstring).

    Coordinates are 0-based pixels of the frame as read (binned): ``x`` along the dispersion
    axis, ``y`` along the spatial axis.

    Attributes
    ----------
    tilt_deg : tuple of float
        Angle of the line image from the spatial axis at the first and at the last pixel of
        ``x_range`` (linear in between), degrees.
    curvature_px : tuple of float
        Sagitta (extra shift at the slit ends, pixels) at the first and last pixel of
        ``x_range``.
    reference_row : float
        Row ``y_c`` where the shift is zero: the centre of the simulated slit.
    half_length : float
        Half-length ``h`` of the slit (rows) at which the curvature term equals the sagitta.
    x_range : tuple of float
        First and last illuminated pixel along the dispersion axis.
    """

    tilt_deg: tuple[float, float] = (0.0, 0.0)
    curvature_px: tuple[float, float] = (0.0, 0.0)
    reference_row: float = 0.0
    half_length: float = 1.0
    x_range: tuple[float, float] = (0.0, 1.0)

    @property
    def straight(self) -> bool:
        """True when the lines run exactly along the spatial axis (no tilt, no curvature)."""
        return not any(self.tilt_deg) and not any(self.curvature_px)

    def shift(self, x, y):
        """Shift (pixels along the dispersion) on row ``y`` of a line at ``x`` on the reference row."""
        x = np.asarray(x, dtype=float)
        t = np.asarray(y, dtype=float) - self.reference_row
        x0, x1 = self.x_range
        s = (x - x0) / (x1 - x0) if x1 != x0 else np.zeros_like(x)
        tilt = np.radians(self.tilt_deg[0] + (self.tilt_deg[1] - self.tilt_deg[0]) * s)
        sagitta = self.curvature_px[0] + (self.curvature_px[1] - self.curvature_px[0]) * s
        return np.tan(tilt) * t + sagitta * (t / self.half_length) ** 2

    def reference_position(self, x, y, *, iterations: int = 8):
        """Position on the reference row of the line seen at ``x`` on row ``y``.

        Solves ``x_ref + shift(x_ref, y) = x`` by fixed-point iteration (the shift changes
        slowly with ``x``, so a few steps reach round-off).
        """
        x = np.asarray(x, dtype=float)
        ref = x - self.shift(x, y)
        for _ in range(iterations):
            ref = x - self.shift(ref, y)
        return ref


@dataclass(frozen=True, eq=False)
class SimulatedArc:
    """A synthetic raw arc frame and the truth it was made from.

    Attributes
    ----------
    data : ndarray of shape (rows, columns)
        Raw frame as read (binned), uint16 ADU unless float32 was requested.
    header : astropy.io.fits.Header
        Header with the profile's keywords: nominal grating angle, lamps, image type "arc",
        exposure time, DATE-OBS and binning.
    truth : GratingModel
        The true pixel-to-wavelength model (binned pixels along the dispersion axis of ``data``).
    lines : pandas.DataFrame
        One row per line put on the detector, sorted by ``x_true``: ``wavelength_nm``,
        ``element``, ``order`` (diffraction order), ``x_true`` (0-based raw pixel on the
        reference row of :attr:`line_shape`), ``flux_e``
        (electrons over the whole slit), ``snr`` (expected peak S/N in the sum over the
        illuminated rows of straight lines; a tilted or curved line is spread wider in that
        sum), ``fwhm_px``, ``listed`` (in the shipped line list), ``ghost``
        (next-order image), ``saturated`` (peak at or above the saturation level).
    profile : InstrumentProfile
        The instrument simulated.
    nominal : GratingModel
        The model the profile and header imply (what a pipeline knows before looking); for an
        ``approximate`` profile the profile's effective model.
    binning : tuple of int
        Binning ``(along axis 0, along axis 1)``.
    slit_rows : tuple of int
        ``[start, stop)`` along the spatial axis of the rows lit to at least half the maximum.
    line_shape : LineImageShape
        How the lines run along the slit; its reference row is the centre of the slit.
    """

    data: np.ndarray
    header: fits.Header
    truth: GratingModel
    lines: pd.DataFrame
    profile: InstrumentProfile
    nominal: GratingModel
    binning: tuple[int, int]
    slit_rows: tuple[int, int]
    line_shape: LineImageShape = field(default_factory=LineImageShape)

    def true_wavelength(self, x, y=None):
        """True wavelength (nm, the profile's medium) at 0-based raw pixel ``x``.

        Parameters
        ----------
        x : array_like
            Pixel along the dispersion axis.
        y : array_like, optional
            Pixel along the spatial axis (broadcast with ``x``); default the reference row of
            :attr:`line_shape` (the slit centre), where ``truth`` holds as it is.
        """
        if y is None:
            return self.truth.wavelength(x)
        return self.truth.wavelength(self.line_shape.reference_position(x, y))

    def true_shift(self, x, y):
        """True shift (pixels) on row ``y`` of the line at ``x`` on the reference row."""
        return self.line_shape.shift(x, y)

    def to_hdulist(self) -> fits.HDUList:
        """The frame as FITS HDUs, the image in the HDU the profile says (default: primary)."""
        where = self.profile.detector.hdu
        if where in (None, 0):
            return fits.HDUList([fits.PrimaryHDU(self.data, self.header.copy())])
        hdus = [fits.PrimaryHDU(header=self.header.copy())]
        if isinstance(where, str):
            hdus.append(fits.ImageHDU(self.data, self.header.copy(), name=where))
        else:
            hdus.extend(fits.ImageHDU() for _ in range(int(where) - 1))
            hdus.append(fits.ImageHDU(self.data, self.header.copy()))
        return fits.HDUList(hdus)

    def write(self, path: str | Path, *, overwrite: bool = False, compress: bool = False) -> Path:
        """Write the frame to a FITS file atomically (temporary file, then rename).

        With ``compress`` the image goes, losslessly RICE tile-compressed, into the first
        extension (FITS tile compression, as astropy's ``CompImageHDU`` writes it).

        Raises
        ------
        FileExistsError
            If ``path`` exists and ``overwrite`` is false.
        """
        path = Path(path)
        if path.exists() and not overwrite:
            msg = f"{path}: file exists (pass overwrite=True to replace it)"
            raise FileExistsError(msg)
        hdul = self.to_hdulist()
        if compress:
            image = hdul[self.profile.detector.hdu or 0]
            hdul = fits.HDUList([fits.PrimaryHDU(),
                                 fits.CompImageHDU(data=image.data, header=image.header,
                                                   compression_type="RICE_1")])
        with atomic_path(path) as tmp:
            hdul.writeto(tmp, overwrite=True)
        return path

    def summary(self) -> dict:
        """JSON-safe summary: the true and nominal parameters, line counts and the line shape
        along the slit."""
        keys = ("grating_angle_deg", "focal_length_mm", "axis_pixel", "tilt_deg")
        lines = self.lines
        return {
            "instrument": self.profile.name,
            "shape": list(self.data.shape),
            "binning": list(self.binning),
            "truth": {k: float(getattr(self.truth, k)) for k in keys}
            | {"grooves_per_mm": self.truth.grooves_per_mm,
               "distortion": [float(c) for c in self.truth.distortion]},
            "nominal": {k: float(getattr(self.nominal, k)) for k in keys},
            "n_lines": int(len(lines)),
            "n_listed": int((lines["listed"] & ~lines["ghost"]).sum()),
            "n_unlisted": int((~lines["listed"]).sum()),
            "n_ghosts": int(lines["ghost"].sum()),
            "n_saturated": int(lines["saturated"].sum()),
            "line_tilt_deg": list(self.line_shape.tilt_deg),
            "line_curvature_px": list(self.line_shape.curvature_px),
            "slit_centre_row": float(self.line_shape.reference_row),
        }


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


def _blur_for_fwhm(fwhm: float, slit: float) -> float:
    """Gaussian sigma that makes a top-hat of width ``slit`` (< fwhm) reach FWHM ``fwhm``."""
    a, h = 0.5 * slit, 0.5 * fwhm
    if a < 1e-6 * fwhm:  # a Gaussian alone
        return fwhm / (2.0 * np.sqrt(2.0 * np.log(2.0)))

    def excess(s: float) -> float:  # > 0 while the profile at h is above half its maximum
        return float(ndtr((h + a) / s) - ndtr((h - a) / s) - (ndtr(a / s) - 0.5))

    return float(brentq(excess, 1e-6 * fwhm, fwhm, xtol=1e-10 * fwhm))


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
    rng = np.random.default_rng(seed)
    lamp_list = parse_lamps(lamps) if isinstance(lamps, str) else tuple(lamps or profile.lamps)
    if not lamp_list:
        msg = f"no lamp elements given and profile {profile.name!r} names none"
        raise ValueError(msg)
    bins = _binning(profile, binning)
    layout = _Layout.of(profile, bins)
    catalogue = load_line_list(lamp_list, medium=profile.medium, include_weak=True)

    header_angle, nominal = _nominal(profile, bins, catalogue, grating_angle_deg,
                                     central_wavelength_nm)
    truth = _true_model(profile, nominal, rng, angle_error_deg, focal_error_fraction,
                        axis_error_px, tilt_error_deg, distortion_px, bins)
    lo, hi = np.sort(truth.wavelength(np.array(layout.disp) - 0.5))
    if not (np.isfinite(lo) and np.isfinite(hi)):
        msg = f"{profile.name}: the requested setting diffracts no light onto part of the detector"
        raise ValueError(msg)

    width = _LineWidth.draw(rng, fwhm_px, slit_fraction, focus_variation)
    lines = _place_lines(catalogue, lamp_list, truth, layout, (lo, hi), rng, profile,
                         missing_fraction, unlisted_fraction, intensity_scatter, ghosts)
    spatial, slit_rows, (slit_centre, slit_half) = _slit_illumination(layout, rng)
    shape = LineImageShape(tilt_deg=tilt, curvature_px=curvature, reference_row=slit_centre,
                           half_length=slit_half,
                           x_range=(float(layout.disp[0]), float(layout.disp[1] - 1)))
    cont_shape = _continuum_shape(layout, rng)
    bias = _bias(profile, rng, bias_adu)
    hot = _hot_pixels(layout, rng, hot_pixels)
    boosts = rng.uniform(1.3, 3.0, size=saturate)

    lines, cont_level = _set_fluxes(lines, layout, width, truth, spatial, slit_rows, cont_shape,
                                    profile, peak_snr, scattered_light, boosts, bias[0])
    image = _expected_image(lines, layout, width, truth, spatial, cont_shape, cont_level, shape)
    lines = _flag_saturated(lines, image, bias[0], profile)
    noise_rng = rng if noise_seed is None else np.random.default_rng(noise_seed)
    data = _read_out(image, layout, profile, bias, hot, noise_rng, cosmic_rays, dtype)
    header = _header(profile, header_angle, lamp_list, exposure_s, date_obs, bins)
    columns = ["wavelength_nm", "element", "order", "x_true", "flux_e", "snr", "fwhm_px",
               "listed", "ghost", "saturated"]
    return SimulatedArc(data=data, header=header, truth=truth, lines=lines[columns],
                        profile=profile, nominal=nominal, binning=bins, slit_rows=slit_rows,
                        line_shape=shape)


# -- option checks and geometry --------------------------------------------------------------
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


def _binning(profile: InstrumentProfile, binning) -> tuple[int, int]:
    bins = (binning, binning) if np.isscalar(binning) else tuple(binning)
    if len(bins) != 2 or any(b not in (1, 2) for b in bins):
        msg = f"binning must be 1 or 2 (or a pair of them), got {binning!r}"
        raise ValueError(msg)
    if bins != (1, 1) and "binning" not in profile.header:
        msg = f"profile {profile.name!r} maps no header keyword for binning; cannot bin"
        raise ValueError(msg)
    return (int(bins[0]), int(bins[1]))


def _binned_region(region, bins) -> tuple[int, int, int, int]:
    """Unbinned region -> the whole binned pixels inside it."""
    r0, r1, c0, c1 = region
    return (-(-r0 // bins[0]), r1 // bins[0], -(-c0 // bins[1]), c1 // bins[1])


@dataclass(frozen=True)
class _Layout:
    """Binned frame geometry: shape, lit region along each axis, overscan region."""

    shape: tuple[int, int]
    axis: int
    disp: tuple[int, int]
    spatial: tuple[int, int]
    overscan: tuple[int, int, int, int] | None

    @classmethod
    def of(cls, profile: InstrumentProfile, bins: tuple[int, int]) -> _Layout:
        det = profile.detector
        shape = (det.shape[0] // bins[0], det.shape[1] // bins[1])
        trim = _binned_region(det.trim or (0, det.shape[0], 0, det.shape[1]), bins)
        over = None if det.overscan is None else _binned_region(det.overscan, bins)
        rows, cols = (trim[0], trim[1]), (trim[2], trim[3])
        disp, spatial = (cols, rows) if det.dispersion_axis == 1 else (rows, cols)
        return cls(shape=shape, axis=det.dispersion_axis, disp=disp, spatial=spatial,
                   overscan=over)

    @property
    def n_disp(self) -> int:
        """Frame length along the dispersion axis."""
        return self.shape[self.axis]

    @property
    def n_spatial(self) -> int:
        """Frame length along the spatial axis."""
        return self.shape[1 - self.axis]


# -- the models ------------------------------------------------------------------------------
def _nominal(profile, bins, catalogue, grating_angle_deg, central_wavelength_nm):
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


def _true_model(profile, nominal, rng, angle_error, focal_error, axis_error, tilt_error,
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


# -- lines -----------------------------------------------------------------------------------
@dataclass(frozen=True)
class _LineWidth:
    """Line FWHM at the centre, slit-image fraction of it, and FWHM change towards the ends."""

    fwhm: float
    slit_fraction: float
    focus: float

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
        fwhm = self.fwhm * (1 + self.focus * ((np.asarray(x, dtype=float) - half) / half) ** 2)
        fwhm = np.maximum(fwhm, 0.3)
        slit = self.slit_fraction * self.fwhm
        sigma = _blur_for_fwhm(self.fwhm, slit)
        scale = fwhm / self.fwhm
        return fwhm, slit * scale, sigma * scale


def _place_lines(catalogue, lamps, truth, layout, wl_range, rng, profile, missing_fraction,
                 unlisted_fraction, scatter, ghosts):
    """Table of the lines on the detector with relative fluxes (column ``weight``)."""
    wl = np.asarray(catalogue.wavelength_nm, dtype=float)
    element = np.asarray(catalogue.element).astype(str)
    n = len(wl)
    gains = rng.lognormal(0.0, _ELEMENT_SCATTER, size=len(lamps))
    element_gain = dict(zip(lamps, gains, strict=True))
    present = rng.random(n) >= missing_fraction
    strength = (np.asarray(catalogue.intensity, dtype=float) * rng.lognormal(0.0, scatter, size=n)
                * np.array([element_gain[e] for e in element]))
    ghost_share = rng.uniform(*_GHOST_FRACTION, size=n)
    d0, d1 = layout.disp
    lo_x, hi_x = d0 - _EDGE_MARGIN_PX, d1 - 1 + _EDGE_MARGIN_PX

    def on_detector(x):
        return np.isfinite(x) & (x >= lo_x) & (x <= hi_x)

    x1 = _pixel_near_detector(truth, wl)
    first = present & on_detector(x1)
    weight = strength * _blaze_factor(wl, profile)
    m = truth.order
    xg = _pixel_near_detector(truth.with_parameters(order=m + 1), wl)
    blue_limit = min(wl_range[0], (profile.sensitivity_nm or wl_range)[0])
    second = present & on_detector(xg) & (wl < blue_limit) & bool(ghosts)

    n_extra = int(round(unlisted_fraction * first.sum()))
    extra_wl = rng.uniform(wl_range[0], wl_range[1], size=n_extra)
    pool = weight[first] if first.any() else np.asarray(catalogue.intensity, dtype=float)
    extra_weight = (0.5 * rng.choice(pool, size=n_extra) * rng.lognormal(0.0, scatter, size=n_extra)
                    if len(pool) else np.zeros(n_extra))
    extra_element = rng.choice(np.asarray(lamps), size=n_extra)

    table = pd.DataFrame({
        "wavelength_nm": np.concatenate([wl[first], wl[second], extra_wl]),
        "element": np.concatenate([element[first], element[second], extra_element]),
        "order": np.concatenate([np.full(first.sum(), m), np.full(second.sum(), m + 1),
                                 np.full(n_extra, m)]).astype(int),
        "x_true": np.concatenate([x1[first], xg[second], _pixel_near_detector(truth, extra_wl)]),
        "weight": np.concatenate([weight[first], strength[second] * ghost_share[second],
                                  extra_weight]),
        "listed": np.concatenate([np.ones(first.sum() + second.sum(), bool),
                                  np.zeros(n_extra, bool)]),
        "ghost": np.concatenate([np.zeros(first.sum(), bool), np.ones(second.sum(), bool),
                                 np.zeros(n_extra, bool)]),
    })
    table = table[on_detector(table["x_true"].to_numpy())]
    return table.sort_values("x_true", kind="stable").reset_index(drop=True)


def _pixel_near_detector(model: GratingModel, wl: np.ndarray) -> np.ndarray:
    """``model.pixel`` for wavelengths landing near the detector, NaN elsewhere.

    The distortion polynomial is only evaluated near the detector, where it is meant to hold
    (far outside, its cubic terms overflow).
    """
    plain = model.with_parameters(distortion=()).pixel(wl)
    n = model.n_pixels
    near = np.isfinite(plain) & (plain > -n) & (plain < 2 * n)
    x = np.full(np.shape(wl), np.nan)
    x[near] = model.pixel(np.asarray(wl)[near])
    return x


def _blaze_factor(wl, profile):
    """Smooth grating efficiency around the blaze wavelength (1 if no blaze is given)."""
    blaze = profile.grating.blaze_nm
    if not blaze:
        return np.ones_like(wl)
    return np.exp(-0.5 * (np.log(wl / blaze) / 0.45) ** 2)


# -- image -----------------------------------------------------------------------------------
def _slit_illumination(layout: _Layout, rng):
    """Fraction of the slit light per spatial row (sums to 1), the half-maximum rows and the
    slit's (centre, half-length) in rows."""
    s0, s1 = layout.spatial
    n = s1 - s0
    u = rng.uniform(0.0, 1.0, size=4)
    length = (0.55 + 0.35 * u[0]) * n
    centre = s0 + 0.5 * n + (u[1] - 0.5) * (n - length)
    edge = 0.7 + 1.3 * u[2]
    gradient = 0.3 * u[3] - 0.15
    y = np.arange(layout.n_spatial, dtype=float)
    lo, hi = centre - 0.5 * length, centre + 0.5 * length
    lit = (ndtr((y - lo) / edge) - ndtr((y - hi) / edge)) * (1 + gradient * (y - centre) / length)
    lit[:s0] = 0.0
    lit[s1:] = 0.0
    lit /= lit.sum()
    rows = np.flatnonzero(lit >= 0.5 * lit.max())
    return lit, (int(rows[0]), int(rows[-1]) + 1), (float(centre), float(0.5 * length))


def _continuum_shape(layout: _Layout, rng) -> np.ndarray:
    """Smooth scattered-light profile along the dispersion axis, peak 1 on the lit region."""
    d0, d1 = layout.disp
    u = rng.uniform(0.0, 1.0, size=3)
    x = np.arange(layout.n_disp, dtype=float)
    centre, width = d0 + u[0] * (d1 - d0), (0.2 + 0.3 * u[1]) * (d1 - d0)
    shape = 0.3 + 0.4 * u[2] + np.exp(-0.5 * ((x - centre) / width) ** 2)
    shape[:d0] = 0.0
    shape[d1:] = 0.0
    return shape / shape.max()


def _bias(profile, rng, bias_adu) -> tuple[float, float, int]:
    """(bias level, end-to-end ramp, axis of the ramp) in ADU; constant without an overscan.

    The ramp runs along the overscan strip, so that a per-line overscan level removes it.
    """
    u = rng.uniform(0.0, 1.0, size=2)
    over = profile.detector.overscan
    if over is None:
        return (float(bias_adu) if bias_adu is not None else profile.detector.bias_adu), 0.0, 0
    level = float(bias_adu) if bias_adu is not None else 300.0 + 900.0 * u[0]
    along = 0 if (over[1] - over[0]) >= (over[3] - over[2]) else 1
    return level, 6.0 * u[1] - 3.0, along


def _physical_mask(layout: _Layout) -> np.ndarray:
    """Pixels of the raw frame that are real detector pixels (not overscan), raw orientation."""
    mask = np.ones(layout.shape, dtype=bool)
    if layout.overscan is not None:
        r0, r1, c0, c1 = layout.overscan
        mask[r0:r1, c0:c1] = False
    return mask


def _hot_pixels(layout: _Layout, rng, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices (raw orientation) and electrons of the hot pixels."""
    where = np.flatnonzero(_physical_mask(layout))
    index = rng.choice(where, size=count, replace=False)
    return index, 10.0 ** rng.uniform(2.5, 4.5, size=count)


def _spectrum_1d(x, flux, layout: _Layout, width: _LineWidth, n_pixels: int) -> np.ndarray:
    """Electrons per dispersion pixel summed over the slit."""
    spec = np.zeros(layout.n_disp)
    if len(x) == 0:
        return spec
    _, slit, sigma = width.at(x, n_pixels)
    half = int(np.ceil(np.max(0.5 * slit + 6 * sigma))) + 2
    pix = np.floor(x)[:, None] + np.arange(-half, half + 1)[None, :]
    frac = slit_line_profile(pix, x[:, None], slit_px=slit[:, None], blur_sigma_px=sigma[:, None])
    d0, d1 = layout.disp
    inside = (pix >= d0) & (pix < d1)
    np.add.at(spec, pix[inside].astype(int), (frac * flux[:, None])[inside])
    return spec


def _shaped_lines(x, flux, layout: _Layout, width: _LineWidth, n_pixels: int, spatial: np.ndarray,
                  shape: LineImageShape) -> np.ndarray:
    """Electrons of the lines per (spatial, dispersion) pixel, each row with its own shift."""
    image = np.zeros((layout.n_spatial, layout.n_disp))
    lit = np.flatnonzero(spatial > 1e-12 * spatial.max())
    if len(x) == 0 or lit.size == 0:
        return image
    _, slit, sigma = width.at(x, n_pixels)
    half = int(np.ceil(np.max(0.5 * slit + 6 * sigma))) + 2
    offsets = np.arange(-half, half + 1)
    d0, d1 = layout.disp
    rows = np.arange(lit[0], lit[-1] + 1)
    per_chunk = max(1, 2_000_000 // (len(x) * offsets.size))
    for start in range(0, rows.size, per_chunk):
        chunk = rows[start:start + per_chunk]
        centre = x[None, :] + shape.shift(x[None, :], chunk[:, None])
        pix = np.floor(centre)[:, :, None] + offsets
        frac = slit_line_profile(pix, centre[:, :, None], slit_px=slit[None, :, None],
                                 blur_sigma_px=sigma[None, :, None])
        value = frac * (flux[None, :, None] * spatial[chunk][:, None, None])
        inside = (pix >= d0) & (pix < d1)
        index = (np.arange(chunk.size)[:, None, None] * layout.n_disp + pix)[inside].astype(np.int64)
        image[chunk] = np.bincount(index, weights=value[inside],
                                   minlength=chunk.size * layout.n_disp).reshape(chunk.size, -1)
    return image


def _set_fluxes(lines, layout, width, truth, spatial, slit_rows, cont_shape, profile, peak_snr,
                scattered_light, boosts, bias):
    """Scale the relative line weights to electrons; return the lines (with ``flux_e``,
    ``fwhm_px``, ``snr``) and the scattered-light level (electrons per pixel at the brightest
    row)."""
    det = profile.detector
    x = lines["x_true"].to_numpy()
    weight = lines["weight"].to_numpy()
    fwhm, slit, sigma = width.at(x, truth.n_pixels)
    peak = slit_line_profile(np.round(x), x, slit_px=slit, blur_sigma_px=sigma)
    rows = slice(*slit_rows)
    slit_share, n_rows = spatial[rows].sum(), slit_rows[1] - slit_rows[0]
    cont_sum = _continuum_rows(layout, spatial)[rows].sum()
    noise_floor = n_rows * det.read_noise_e ** 2
    d0, d1 = layout.disp
    xi = np.clip(np.round(x).astype(int), d0, d1 - 1)
    listed = (lines["listed"] & ~lines["ghost"]).to_numpy()
    fully_on = (x >= d0 + 2) & (x <= d1 - 3)
    pick = listed & fully_on if (listed & fully_on).any() else fully_on
    scale = cont_level = 0.0
    if pick.any():
        j = int(np.argmax(np.where(pick, weight * peak, -1.0)))
        a = weight[j] * peak[j] * slit_share
        c = scattered_light * weight[j] * peak[j] * spatial.max() * cont_shape[xi[j]] * cont_sum
        k = peak_snr ** 2
        # peak_snr = a F / sqrt((a + c) F + noise_floor), solved for the flux scale F
        b = k * (a + c)
        scale = (b + np.sqrt(b * b + 4 * a * a * k * noise_floor)) / (2 * a * a)
        cont_level = scattered_light * weight[j] * peak[j] * scale * spatial.max()
    flux = weight * scale
    if len(boosts):
        top = np.argsort(np.where(pick, flux * peak, -1.0))[::-1][:len(boosts)]
        top = top[pick[top]]
        wanted = ((det.saturation_adu - bias) * boosts[:len(top)] * det.gain_e_per_adu
                  / (peak[top] * spatial.max()))
        flux[top] = np.maximum(flux[top], wanted)
    signal = flux * peak * slit_share
    snr = signal / np.sqrt(signal + cont_level * cont_shape[xi] * cont_sum + noise_floor)
    lines = lines.drop(columns="weight").assign(flux_e=flux, snr=snr, fwhm_px=fwhm)
    return lines, cont_level


def _continuum_rows(layout: _Layout, spatial: np.ndarray) -> np.ndarray:
    """Spatial shape of the scattered light: mostly the slit, a little over the lit region."""
    lit = np.zeros(layout.n_spatial)
    lit[layout.spatial[0]:layout.spatial[1]] = 0.05
    return spatial / spatial.max() + lit


def _expected_image(lines, layout, width, truth, spatial, cont_shape, cont_level,
                    shape: LineImageShape) -> np.ndarray:
    """Expected electrons, shape (spatial, dispersion)."""
    x, flux = lines["x_true"].to_numpy(), lines["flux_e"].to_numpy()
    if shape.straight:
        image = np.outer(spatial, _spectrum_1d(x, flux, layout, width, truth.n_pixels))
    else:
        image = _shaped_lines(x, flux, layout, width, truth.n_pixels, spatial, shape)
    if cont_level > 0:
        image += cont_level * np.outer(_continuum_rows(layout, spatial), cont_shape)
    return image


def _flag_saturated(lines, image, bias, profile) -> pd.DataFrame:
    """Mark lines whose noiseless peak reaches the saturation level."""
    det = profile.detector
    brightest = image.max(axis=0) / det.gain_e_per_adu + bias
    x = np.round(lines["x_true"].to_numpy()).astype(int)
    around = np.clip(x[:, None] + np.arange(-1, 2)[None, :], 0, len(brightest) - 1)
    return lines.assign(saturated=brightest[around].max(axis=1) >= det.saturation_adu)


def _read_out(image, layout, profile, bias, hot, rng, cosmic_rays, dtype) -> np.ndarray:
    """Raw frame as read: photon and read noise, cosmic rays, hot pixels, bias, saturation."""
    det = profile.detector
    electrons = image.T if layout.axis == 0 else image
    electrons = np.ascontiguousarray(electrons)
    flat = electrons.reshape(-1)
    flat[hot[0]] += hot[1]
    counts = rng.poisson(electrons).astype(np.float64)
    counts += rng.normal(0.0, det.read_noise_e, size=counts.shape)
    _add_cosmic_rays(counts, layout, rng, cosmic_rays)
    level, ramp, along = bias
    position = np.linspace(-0.5, 0.5, layout.shape[along])
    bias_map = level + ramp * (position[:, None] if along == 0 else position[None, :])
    adu = counts / det.gain_e_per_adu + bias_map
    if dtype == "float32":
        return np.minimum(adu, det.saturation_adu).astype(np.float32)
    top = min(det.saturation_adu, 65535.0)
    return np.clip(np.rint(adu), 0.0, top).astype(np.uint16)


def _add_cosmic_rays(counts, layout, rng, count) -> None:
    """Short straight tracks of 1-6 pixels carrying 1e3-5e4 electrons each (in place)."""
    if count == 0:
        return
    length = rng.integers(1, 7, size=count)
    angle = rng.uniform(0.0, np.pi, size=count)
    start = rng.uniform(0.0, 1.0, size=(count, 2)) * np.array(layout.shape)
    energy = 10.0 ** rng.uniform(3.0, 4.7, size=count)
    step = np.concatenate([np.arange(n) for n in length])
    which = np.repeat(np.arange(count), length)
    r = np.floor(start[which, 0] + step * np.sin(angle[which])).astype(int)
    c = np.floor(start[which, 1] + step * np.cos(angle[which])).astype(int)
    deposit = energy[which] / length[which] * rng.uniform(0.5, 1.5, size=len(which))
    keep = (r < layout.shape[0]) & (c < layout.shape[1])
    r, c, deposit = r[keep], c[keep], deposit[keep]
    real = _physical_mask(layout)[r, c]
    np.add.at(counts, (r[real], c[real]), deposit[real])


# -- header ----------------------------------------------------------------------------------
def _header(profile, header_angle, lamps, exposure_s, date_obs, bins) -> fits.Header:
    header = fits.Header()
    values = {
        "grating_angle": (header_angle, "grating angle [deg]"),
        "lamps": ("+".join(lamps), "arc lamps on"),
        "image_type": ("arc", "frame type"),
        "exposure_time": (float(exposure_s), "exposure time [s]"),
        "observation_time": (date_obs, "start of exposure (UTC)"),
        "binning": (f"{bins[1]} {bins[0]}", "binning along NAXIS1, NAXIS2"),
    }
    header["DATE-OBS"] = (date_obs, "start of exposure (UTC)")
    for quantity, (value, comment) in values.items():
        spec = profile.header.get(quantity)
        if spec is not None and value is not None:
            header[spec.keyword] = (value, comment)
    header["INSTRUME"] = (profile.name[:60], "instrument")
    header["COMMENT"] = "Synthetic arc frame made by wavecal.simulate (invented data)."
    return header
