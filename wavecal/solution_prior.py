"""A previous good solution of the same setting as the prior of a new frame.

Most users calibrate the same instrument night after night. Between two arcs of one setting
the optics hardly change: flexure and temperature move the lines by a few pixels and stretch
the scale by a little. :func:`reference_prior` turns a previous solution (read by
:func:`load_reference`) into the start model and a narrow :class:`~wavecal.model_setup.PriorBox`
for the search and the fit of a new frame:

- the start model is the reference's fitted model (its distortion included);
- the lines may shift by up to ``drift_px``: the search carries the shift by the grating angle,
  while the camera-axis pixel stays within :data:`AXIS_PIXEL_WIDTH_PX` of the reference's (the two
  move the lines alike; one of them is enough to search over);
- the scale may stretch by up to ``stretch_fraction`` (the focal length);
- the detector tilt stays within the reference's own uncertainty (at least
  :data:`TILT_FLOOR_DEG`, at most the profile's prior).

The search then covers about ten hypotheses instead of some ten thousand, so that a few
lines are significant against the trials actually made. The verdict still judges the result
on its own evidence.

Defaults, from the physics of small spectrographs (from memory; common practice): flexure of
a bench or telescope-mounted spectrograph and thermal drift over a night (a few kelvin of a
metal structure) move arc lines by a pixel or two, up to a few pixels between nights or after a
grating has been moved back to the same setting; :data:`DRIFT_PX` = 5 covers that with margin.
The scale follows the camera's focal length, which changes with temperature by the expansion
of its mount (aluminium: 2.3e-5 per kelvin) and with refocusing; :data:`STRETCH_FRACTION`
= 1e-3 covers some 40 K or a refocus, and moves the ends of a 4k detector by two pixels.
"""
from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass
from pathlib import Path


from .errors import SolutionFileError
from .instrument import ReferenceSpec
from .model_setup import PriorBox
from .optics import GratingModel
from .solution import Solution, load_solution
from .status import Status

__all__ = ["ReferencePrior", "load_reference", "reference_from_profile", "reference_prior", "reference_note", "DRIFT_PX",
           "STRETCH_FRACTION", "AXIS_PIXEL_WIDTH_PX", "TILT_FLOOR_DEG"]

#: Largest shift (pixels) of the lines since the reference that the search allows.
DRIFT_PX = 5.0
#: Largest relative change of the scale (focal length) since the reference.
STRETCH_FRACTION = 1e-3
#: Prior width (pixels) of the camera-axis pixel around the reference's: the search carries the
#: shift by the grating angle; this lets the fit share it.
AXIS_PIXEL_WIDTH_PX = 1.0
#: Smallest prior width (degrees) of the detector tilt around the reference's.
TILT_FLOOR_DEG = 0.05

#: Model attributes that must agree between the reference and the frame (what makes a setting).
_SETTING = (("mount", "mount"), ("grooves_per_mm", "groove density"), ("order", "order"),
            ("deviation_deg", "deviation angle"), ("pixel_mm", "pixel size (binning)"),
            ("n_pixels", "pixels along the dispersion"), ("direction", "wavelength direction"))


@dataclass(frozen=True)
class ReferencePrior:
    """A previous solution used as the prior, with the drift it allows.

    Attributes
    ----------
    path : Path
        The solution file.
    sha256 : str
        Its SHA-256 (hex), recorded in the new solution.
    solution : Solution
        Its content (never ``failed``).
    drift_px : float
        Largest shift of the lines since the reference (pixels).
    stretch_fraction : float
        Largest relative change of the scale since the reference.
    """

    path: Path
    sha256: str
    solution: Solution
    drift_px: float = DRIFT_PX
    stretch_fraction: float = STRETCH_FRACTION


def load_reference(path: str | Path, *, drift_px: float = DRIFT_PX,
                   stretch_fraction: float = STRETCH_FRACTION) -> ReferencePrior:
    """Read a previous solution to use as the prior.

    Raises
    ------
    SolutionFileError
        One line naming the file: unreadable or invalid (:func:`~wavecal.solution.load_solution`),
        a failed solution, or a drift or stretch that is not a positive number.
    """
    path = Path(path)
    if not (math.isfinite(drift_px) and drift_px > 0):
        msg = f"{path}: the drift allowed must be a positive number of pixels, not {drift_px!r}"
        raise SolutionFileError(msg)
    if not (math.isfinite(stretch_fraction) and 0 < stretch_fraction < 0.5):
        msg = f"{path}: the stretch allowed must be between 0 and 0.5, not {stretch_fraction!r}"
        raise SolutionFileError(msg)
    solution = load_solution(path)
    if solution.status == Status.FAILED or solution.model is None:
        msg = f"{path}: a failed solution cannot serve as a reference"
        raise SolutionFileError(msg)
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    return ReferencePrior(path, digest, solution, float(drift_px), float(stretch_fraction))


def reference_from_profile(spec: ReferenceSpec, *, drift_px: float | None = None
                           ) -> ReferencePrior:
    """The profile's ``[reference]`` solution, with its drift and stretch (``drift_px``, when
    given, overrides the profile's; unset ones take :data:`DRIFT_PX`, :data:`STRETCH_FRACTION`).
    """
    drift = next(v for v in (drift_px, spec.drift_px, DRIFT_PX) if v is not None)
    stretch = STRETCH_FRACTION if spec.stretch_fraction is None else spec.stretch_fraction
    return load_reference(spec.solution, drift_px=drift, stretch_fraction=stretch)


def reference_prior(reference: ReferencePrior, nominal: GratingModel, blind: PriorBox, *,
                    medium: str, frame: str | Path | None = None
                    ) -> tuple[GratingModel, PriorBox]:
    """The start model and the narrow prior box of a frame from a reference of its setting.

    Parameters
    ----------
    reference : ReferencePrior
    nominal : GratingModel
        The frame's nominal model (from its profile and header).
    blind : PriorBox
        The frame's blind prior box (its tilt width caps the reference's).
    medium : str
        The profile's medium.
    frame : str or Path, optional
        The frame, named in errors.

    Raises
    ------
    SolutionFileError
        One line naming the reference file and what differs: medium, grating (groove density,
        order, mount, deviation), binning, detector size, wavelength direction, or a grating
        angle in the header that moved the lines further than the drift allows.
    """
    ref = reference.solution.model
    where = f"{reference.path}: not a reference for {frame or 'this frame'}"
    if reference.solution.medium != medium:
        msg = f"{where}: its medium is {reference.solution.medium}, the profile's {medium}"
        raise SolutionFileError(msg)
    for attr, label in _SETTING:
        mine, theirs = getattr(nominal, attr), getattr(ref, attr)
        same = (mine == theirs if isinstance(mine, str)
                else math.isclose(float(mine), float(theirs), rel_tol=1e-6, abs_tol=1e-9))
        if not same:
            msg = f"{where}: its {label} is {theirs}, the frame's {mine}"
            raise SolutionFileError(msg)
    deg_per_px = _degrees_per_pixel(ref)
    moved_px = abs(nominal.grating_angle_deg - _nominal_angle(reference)) / deg_per_px
    if not blind.effective and moved_px > reference.drift_px:
        msg = (f"{where}: the header's grating angle moves the lines by {moved_px:.0f} px from "
               f"the reference's ({reference.drift_px:g} px allowed)")
        raise SolutionFileError(msg)
    errors = {e.name: e.error for e in reference.solution.parameters.estimates}
    tilt_error = errors.get("tilt_deg", math.nan)
    tilt_width = max(tilt_error if math.isfinite(tilt_error) else 0.0, TILT_FLOOR_DEG)
    # a header angle that differs from the reference's moves the lines by as much
    start = ref.with_parameters(grating_angle_deg=ref.grating_angle_deg + nominal.grating_angle_deg
                                - _nominal_angle(reference)) if not blind.effective else ref
    box = PriorBox(
        grating_angle_deg=(start.grating_angle_deg, reference.drift_px * deg_per_px),
        focal_length_mm=(ref.focal_length_mm, reference.stretch_fraction * ref.focal_length_mm),
        axis_pixel=(ref.axis_pixel, AXIS_PIXEL_WIDTH_PX),
        tilt_deg=(ref.tilt_deg, min(tilt_width, blind.tilt_deg[1])),
        effective=blind.effective)
    return start, box


def reference_note(reference: ReferencePrior) -> str:
    """The sentence a solution carries about its reference."""
    return (f"prior from the reference solution {reference.path.name} (sha256 "
            f"{reference.sha256[:12]}...): lines allowed to shift by {reference.drift_px:g} px "
            f"and the scale to stretch by {reference.stretch_fraction:g}")


def _nominal_angle(reference: ReferencePrior) -> float:
    """The grating angle the reference's header implied (its fitted one when not recorded)."""
    for estimate in reference.solution.parameters.estimates:
        if estimate.name == "grating_angle_deg" and math.isfinite(estimate.nominal):
            return estimate.nominal
    return reference.solution.model.grating_angle_deg


def _degrees_per_pixel(model: GratingModel) -> float:
    """Grating angle (degrees) that moves the lines at the detector's centre by one pixel."""
    centre = 0.5 * (model.n_pixels - 1)
    step = 1e-4
    moved = model.with_parameters(grating_angle_deg=model.grating_angle_deg + step)
    dlam_dphi = abs(float(moved.wavelength(centre) - model.wavelength(centre))) / step
    return abs(float(model.dispersion(centre))) / max(dlam_dphi, 1e-12)
