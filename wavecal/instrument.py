"""The parts of a spectrograph as an instrument profile describes them: the disperser (one, or
one of several gratings), the camera, the detector, a rough description for an instrument of
unknown geometry, and the prior widths around the nominal values.

Plain frozen dataclasses; :mod:`wavecal.profile` reads them from TOML and checks them.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

__all__ = ["GratingSpec", "CameraSpec", "DetectorSpec", "ApproximateSpec", "Priors", "GratingEntry",
           "FULL_SCALE_ADU", "ReferenceSpec"]

#: Saturation level of a detector whose profile states none: the full scale of the 16-bit
#: integers most FITS frames hold (2**16 - 1; common practice). Camera images use their own
#: bit depth's full scale instead (:mod:`wavecal.frame_files`).
FULL_SCALE_ADU = 65535.0


@dataclass(frozen=True)
class GratingSpec:
    """The disperser.

    Attributes
    ----------
    mount : str
        One of :data:`MOUNTS`.
    grooves_per_mm : float
        Groove density in lines per millimetre.
    order : int
        Diffraction order used (positive).
    deviation_deg : float
        Reflection: the full angle between collimator and camera axes. Transmission and grism:
        the angle between the undeviated beam and the camera axis.
    angle_zero_point_deg, angle_scale : float
        The physical grating angle is ``angle_scale * header_value + angle_zero_point_deg``.
        For a reflection grating the grating angle is the rotation of the grating normal from
        the bisector of the collimator and camera axes; for a transmission grating the angle of
        incidence; for a grism the tilt added to the prism apex angle.
    prism_apex_deg, prism_index, prism_index_slope_per_nm, prism_reference_nm : float
        Grism only: apex angle, refractive index at the reference wavelength and its slope.
    blaze_nm : float or None
        Blaze wavelength in the order used, if known.
    """

    mount: str
    grooves_per_mm: float
    order: int = 1
    deviation_deg: float = 0.0
    angle_zero_point_deg: float = 0.0
    angle_scale: float = 1.0
    prism_apex_deg: float = 0.0
    prism_index: float = 1.0
    prism_index_slope_per_nm: float = 0.0
    prism_reference_nm: float = 600.0
    blaze_nm: float | None = None


@dataclass(frozen=True)
class CameraSpec:
    """Camera optics. ``focal_length_mm`` is the camera (exit) focal length."""

    focal_length_mm: float
    collimator_focal_length_mm: float | None = None


@dataclass(frozen=True)
class DetectorSpec:
    """The detector and its read-out.

    Every pixel quantity here is in UNBINNED detector pixels; a binned frame's regions are these
    divided by its binning. Pixel regions use numpy's convention: 0-based, half-open
    ``[start, stop)`` ranges as ``(row_start, row_stop, col_start, col_stop)``.

    Attributes
    ----------
    pixel_size_um : float
        Unbinned pixel pitch in micrometres.
    shape : tuple of int
        Unbinned raw frame shape ``(rows, columns)`` as read, including any overscan.
    dispersion_axis : int
        numpy axis of the image along which wavelength changes: 1 = along a row (columns
        change, FITS NAXIS1), 0 = along a column (rows change, FITS NAXIS2).
    wavelength_increases : int
        +1 if wavelength increases with pixel index along the dispersion axis, -1 if it
        decreases, 0 if unknown (``approximate`` profiles only: both directions are tried).
    saturation_adu : float or None
        Level (raw ADU, before bias subtraction) at or above which a pixel is saturated; None
        when the profile states none (see :attr:`saturation_level_adu`).
    gain_e_per_adu, read_noise_e : float
        Conversion gain and read noise in electrons.
    overscan : tuple of int or None
        Overscan region, or None when there is none.
    trim : tuple of int or None
        Region holding illuminated data, or None for the whole frame.
    bias_adu : float
        Constant bias level to subtract when there is no overscan.
    axis_pixel : float or None
        Unbinned 0-based pixel (along the dispersion axis of the raw frame) hit by the camera
        axis; None means the centre of the detector.
    tilt_deg : float
        Nominal tilt of the detector in the dispersion plane (positive: detector normal turned
        towards larger diffraction angles).
    hdu : int or str or None
        HDU holding the image; None means the first HDU with image data.
    slit_rows : tuple of int or None
        ``[start, stop)`` pixels along the spatial axis (the axis other than
        ``dispersion_axis``) of the raw frame that the slit illuminates; None (the default)
        means they are found from each frame.
    """

    pixel_size_um: float
    shape: tuple[int, int]
    dispersion_axis: int = 1
    wavelength_increases: int = 1
    saturation_adu: float | None = None
    gain_e_per_adu: float = 1.0
    read_noise_e: float = 5.0
    overscan: tuple[int, int, int, int] | None = None
    trim: tuple[int, int, int, int] | None = None
    bias_adu: float = 0.0
    axis_pixel: float | None = None
    tilt_deg: float = 0.0
    hdu: int | str | None = None
    slit_rows: tuple[int, int] | None = None

    @property
    def saturation_level_adu(self) -> float:
        """The stated saturation level, else :data:`FULL_SCALE_ADU` (16-bit full scale)."""
        return FULL_SCALE_ADU if self.saturation_adu is None else float(self.saturation_adu)

    @property
    def dispersion_range(self) -> tuple[int, int]:
        """Unbinned ``[start, stop)`` pixels of the illuminated region along the dispersion axis."""
        if self.trim is None:
            return (0, int(self.shape[self.dispersion_axis]))
        return (self.trim[2], self.trim[3]) if self.dispersion_axis == 1 else (self.trim[0], self.trim[1])

    @property
    def n_dispersion(self) -> int:
        """Number of unbinned illuminated pixels along the dispersion axis."""
        start, stop = self.dispersion_range
        return stop - start

    @property
    def nominal_axis_pixel(self) -> float:
        """Unbinned raw-frame pixel hit by the camera axis (centre of the illuminated region
        unless stated)."""
        if self.axis_pixel is not None:
            return float(self.axis_pixel)
        start, stop = self.dispersion_range
        return (start + stop - 1) / 2.0


@dataclass(frozen=True)
class ApproximateSpec:
    """For spectrographs of unknown geometry: a rough central wavelength and dispersion.

    Attributes
    ----------
    central_wavelength_nm : float
        Wavelength near the detector centre.
    dispersion_nm_per_px : float
        Reciprocal linear dispersion near the centre (unbinned pixels).
    central_wavelength_uncertainty, dispersion_uncertainty : float
        Relative (1-sigma-like half-width) uncertainty of each, e.g. 0.15 for ±15 %.
    """

    central_wavelength_nm: float
    dispersion_nm_per_px: float
    central_wavelength_uncertainty: float = 0.15
    dispersion_uncertainty: float = 0.15


@dataclass(frozen=True)
class Priors:
    """Half-widths of the prior ranges around each nominal value.

    The matcher searches the full range; the fit uses each as a Gaussian prior width.
    """

    grating_angle_deg: float = 1.0
    focal_length_fraction: float = 0.03
    axis_pixel_px: float = 20.0
    tilt_deg: float = 2.0


@dataclass(frozen=True)
class GratingEntry:
    """One grating of an instrument with several, as chosen by a frame's header.

    Attributes
    ----------
    name : str
        The grating's name, as a header keyword may give it.
    number : float
        The number a header keyword holds for this grating (its groove density unless the
        profile says otherwise, e.g. a wheel position).
    grating : GratingSpec
        The instrument's ``[grating]`` values with this grating's own folded in.
    priors : Priors
        The instrument's ``[priors]`` with this grating's own folded in.
    """

    name: str
    number: float
    grating: GratingSpec
    priors: Priors


@dataclass(frozen=True)
class ReferenceSpec:
    """A previous good solution of the instrument's setting to use as every frame's prior
    (``[reference]``; :mod:`wavecal.solution_prior`).

    Attributes
    ----------
    solution : Path
        The solution file (a relative path in the profile is relative to the profile's folder).
    drift_px, stretch_fraction : float or None
        Largest shift of the lines (pixels) and relative stretch of the scale since the
        reference; None: the defaults of :mod:`wavecal.solution_prior`.
    """

    solution: Path
    drift_px: float | None = None
    stretch_fraction: float | None = None
