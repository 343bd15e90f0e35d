"""The nominal physical model of a frame and the prior on its parameters.

Turns an instrument profile plus what a frame's header says (grating angle, binning) into the
:class:`~wavecal.optics.GratingModel` expected before looking at the data, and the prior
half-widths of the free parameters. For a profile of ``approximate`` mount (geometry unknown) an
*effective* reflection grating is set up that reproduces the stated central wavelength and
dispersion; its parameters then have no physical meaning beyond describing the curve.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .optics import GratingModel
from .profile import InstrumentProfile

__all__ = ["PriorBox", "nominal_model", "prior_box", "unbinned_to_binned", "EFFECTIVE_GROOVES_PER_MM",
           "EFFECTIVE_PRIOR_MARGIN"]

#: Groove density of the effective grating used for profiles of unknown geometry.
EFFECTIVE_GROOVES_PER_MM = 600.0
#: The effective model turns the stated centre and dispersion uncertainties into angle and
#: focal-length ranges only approximately (its tilt also changes the central dispersion), so
#: its search ranges are widened by this factor.
EFFECTIVE_PRIOR_MARGIN = 1.4


@dataclass(frozen=True)
class PriorBox:
    """Nominal values and prior half-widths of the free physical parameters.

    Attributes
    ----------
    grating_angle_deg, focal_length_mm, axis_pixel, tilt_deg : tuple of float
        ``(nominal, half_width)`` for each parameter. The matcher searches the full half-width;
        the fit uses it as the standard deviation of a Gaussian prior.
    effective : bool
        True when the geometry is an effective one (profile of unknown geometry).
    """

    grating_angle_deg: tuple[float, float]
    focal_length_mm: tuple[float, float]
    axis_pixel: tuple[float, float]
    tilt_deg: tuple[float, float]
    effective: bool = False

    def as_dict(self) -> dict[str, tuple[float, float]]:
        """Parameter name to ``(nominal, half_width)``."""
        return {
            "grating_angle_deg": self.grating_angle_deg,
            "focal_length_mm": self.focal_length_mm,
            "axis_pixel": self.axis_pixel,
            "tilt_deg": self.tilt_deg,
        }


def unbinned_to_binned(pixel: float, binning: int) -> float:
    """Binned 0-based pixel coordinate of an unbinned one (binned pixel k spans k*b .. k*b+b-1)."""
    return (pixel - (binning - 1) / 2.0) / binning


def nominal_model(profile: InstrumentProfile, grating_angle_deg: float = 0.0,
                  binning: tuple[int, int] = (1, 1)) -> GratingModel:
    """The model a frame should follow if the instrument were exactly as described.

    Parameters
    ----------
    profile : InstrumentProfile
        The instrument.
    grating_angle_deg : float
        Physical grating angle (already converted from the header value); ignored for
        ``approximate`` profiles.
    binning : tuple of int
        Binning ``(along axis 0, along axis 1)`` of the frame.

    Returns
    -------
    GratingModel
        Pixel coordinates are binned pixels of the raw frame along the dispersion axis.
    """
    det = profile.detector
    bin_d = int(binning[det.dispersion_axis])
    pixel_mm = det.pixel_size_um * 1e-3 * bin_d
    n_pixels = int(det.n_dispersion // bin_d)
    axis_pixel = unbinned_to_binned(det.nominal_axis_pixel, bin_d)
    if profile.grating.mount == "approximate":
        return _effective_model(profile, pixel_mm, axis_pixel, n_pixels, bin_d)
    g = profile.grating
    return GratingModel(
        mount=g.mount,
        grooves_per_mm=g.grooves_per_mm,
        order=g.order,
        grating_angle_deg=float(grating_angle_deg),
        deviation_deg=g.deviation_deg,
        focal_length_mm=profile.camera.focal_length_mm,
        pixel_mm=pixel_mm,
        axis_pixel=axis_pixel,
        n_pixels=n_pixels,
        tilt_deg=det.tilt_deg,
        direction=det.wavelength_increases,
        prism_apex_deg=g.prism_apex_deg,
        prism_index=g.prism_index,
        prism_index_slope_per_nm=g.prism_index_slope_per_nm,
        prism_reference_nm=g.prism_reference_nm,
    )


def _effective_model(profile: InstrumentProfile, pixel_mm: float, axis_pixel: float,
                     n_pixels: int, bin_d: int) -> GratingModel:
    """Littrow-like reflection grating reproducing the stated centre and dispersion."""
    approx = profile.approximate
    d_nm = 1e6 / EFFECTIVE_GROOVES_PER_MM
    sin_phi = approx.central_wavelength_nm / (2.0 * d_nm)
    phi = float(np.degrees(np.arcsin(sin_phi)))
    dispersion = approx.dispersion_nm_per_px * bin_d
    focal = d_nm * np.cos(np.radians(phi)) * pixel_mm / dispersion
    return GratingModel(
        mount="reflection",
        grooves_per_mm=EFFECTIVE_GROOVES_PER_MM,
        order=1,
        grating_angle_deg=phi,
        deviation_deg=0.0,
        focal_length_mm=float(focal),
        pixel_mm=pixel_mm,
        axis_pixel=axis_pixel,
        n_pixels=n_pixels,
        # an unknown direction (0) starts as increasing; calibration tries both
        direction=profile.detector.wavelength_increases or 1,
    )


def prior_box(profile: InstrumentProfile, model: GratingModel) -> PriorBox:
    """Prior half-widths around ``model`` (the nominal model of a frame).

    For ``approximate`` profiles the widths follow from the stated relative uncertainties of
    the central wavelength and dispersion, and the tilt is left wide so that it (with the
    distortion term) can absorb the unknown shape of the dispersion curve.
    """
    pr = profile.priors
    bin_d = model.pixel_mm / (profile.detector.pixel_size_um * 1e-3)
    if profile.grating.mount == "approximate":
        approx = profile.approximate
        d_nm = 1e6 / model.grooves_per_mm
        dphi = approx.central_wavelength_uncertainty * approx.central_wavelength_nm / (
            2.0 * d_nm * np.cos(np.radians(model.grating_angle_deg)))
        return PriorBox(
            grating_angle_deg=(model.grating_angle_deg,
                               EFFECTIVE_PRIOR_MARGIN * float(np.degrees(dphi))),
            focal_length_mm=(model.focal_length_mm, EFFECTIVE_PRIOR_MARGIN
                             * model.focal_length_mm * approx.dispersion_uncertainty),
            axis_pixel=(model.axis_pixel, pr.axis_pixel_px / bin_d),
            tilt_deg=(model.tilt_deg, 25.0),
            effective=True,
        )
    return PriorBox(
        grating_angle_deg=(model.grating_angle_deg, pr.grating_angle_deg),
        focal_length_mm=(model.focal_length_mm, model.focal_length_mm * pr.focal_length_fraction),
        axis_pixel=(model.axis_pixel, pr.axis_pixel_px / bin_d),
        tilt_deg=(model.tilt_deg, pr.tilt_deg),
    )
