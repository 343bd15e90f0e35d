"""The setup plan: what a grating setting will put on the detector, worked out before the night.

:func:`plan_setup` takes an instrument profile and either a grating angle or a wanted central
wavelength (the angle is then solved for) and returns a :class:`SetupPlan`:

1. **Range and dispersion.** Wavelengths at the first pixel, the centre and the last pixel of
   the detector, the reciprocal linear dispersion (nm/px) there, the angular dispersion and the
   Littrow angle of the central wavelength, all from the profile's nominal geometry
   (:func:`wavecal.model_setup.nominal_model`, no distortion); an angle for a wanted central
   wavelength comes from :func:`wavecal.optics.solve_grating_angle`.
2. **Resolving power** R = λ/Δλ for a slit of width ``w``: the slit subtends ``w / f_coll`` at
   the collimator; the grating magnifies that angle by the anamorphic factor ``cos α / cos β``;
   Δλ is that angle times dλ/dβ. On the detector this is a slit image of ``w · (cos α / cos β) ·
   f_cam / f_coll`` (on the camera axis; the flat-detector projection is included elsewhere).
   Approximated: a geometric slit image, no optical blur, diffraction or aberration, no limit
   from the illuminated grating width (R ≤ m N is not checked). The 2-pixel sampling limit
   λ / (2 px · dλ/dx) is reported beside it. Without ``collimator_focal_length_mm`` in the
   profile (or without a slit width) only the sampling limit is given.
3. **Order overlap.** A line of wavelength λ' in order m' lands where the working order m has
   λ = m'λ'/m (same α and β); for every neighbouring order (m−1, m+1, 2m, and any order whose
   wavelengths on the detector lie in the sensitivity range) the band that lands on the
   detector is listed. The free spectral range is λ/m at the centre. The order-sorting advice
   follows every order's wavelengths across the detector (:mod:`wavecal.plan.orders`).
4. **Blaze** (:func:`wavecal.optics.scalar_blaze_efficiency`): relative efficiency in the scalar approximation.
5. **Lamps**: every shipped line list and every useful mix of up to three, scored and ranked
   (:mod:`wavecal.plan.lamps`), with the ghost lines of other orders.

The sensitivity range is the profile's ``sensitivity_nm``; without one 300–1100 nm is assumed
(a silicon detector, common practice) and the plan says so.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .._atomic import atomic_write_text
from .._json import jsonable
from ..errors import WavecalError
from ..linelists import available_elements
from ..model_setup import nominal_model, prior_box
from ..optics import GratingModel, scalar_blaze_efficiency, solve_grating_angle
from ..profile import InstrumentProfile
from .lamps import LampScore, rank_lamp_mixes, score_lamps
from .orders import FilterAdvice, OrderOverlap, filter_advice, line_table, order_overlaps

__all__ = ["DEFAULT_SENSITIVITY_NM", "PlanningError", "SamplePoint", "SetupPlan", "plan_setup"]

#: Sensitivity range assumed when a profile states none (silicon detector, common practice).
DEFAULT_SENSITIVITY_NM = (300.0, 1100.0)
#: Line width (pixels) assumed for the crowding test when the slit image is unknown (common
#: practice: spectrographs sample a line with 2-4 pixels).
_DEFAULT_LINE_WIDTH_PX = 3.0
#: How many mixes the plan keeps in its ranked recommendation.
_N_RECOMMENDED = 10
#: Blaze efficiency below which the plan warns that lines will be faint.
_FAINT_EFFICIENCY = 0.3
#: ``schema`` and ``schema_version`` of the plan JSON (every wavecal JSON file carries the pair).
_SCHEMA, _SCHEMA_VERSION = "wavecal-plan", 2


class PlanningError(WavecalError, ValueError):
    """A setting cannot be planned: unreachable wavelength, no light on the detector, bad option."""


@dataclass(frozen=True)
class SamplePoint:
    """Optical quantities at one pixel of the detector.

    Attributes
    ----------
    label : str
        ``"first pixel"``, ``"centre"`` or ``"last pixel"``.
    pixel : float
        0-based (binned) pixel along the dispersion axis.
    wavelength_nm : float
        Wavelength of the working order there (profile medium).
    dispersion_nm_per_px : float
        Reciprocal linear dispersion |dλ/dx|.
    beta_deg : float
        Diffraction angle received there.
    anamorphic_magnification : float
        cos α / cos β.
    slit_image_px, resolution_nm, resolving_power : float or None
        Geometric slit image width, its width in wavelength Δλ and R = λ/Δλ (None without a
        slit width or a collimator focal length).
    sampling_resolving_power : float
        λ / (2 px · dλ/dx): the resolving power two pixels allow.
    blaze_efficiency : float or None
        Relative blaze efficiency (None without a blaze wavelength).
    """

    label: str
    pixel: float
    wavelength_nm: float
    dispersion_nm_per_px: float
    beta_deg: float
    anamorphic_magnification: float
    slit_image_px: float | None
    resolution_nm: float | None
    resolving_power: float | None
    sampling_resolving_power: float
    blaze_efficiency: float | None

    def summary(self) -> dict:
        """JSON-safe dict of the attributes."""
        return {k: jsonable(getattr(self, k)) for k in self.__dataclass_fields__}


@dataclass(frozen=True, eq=False)
class SetupPlan:
    """Everything the planner worked out for one setting (see the module docstring).

    Attributes
    ----------
    profile_name : str
        The instrument.
    profile_source : str or None
        The profile file.
    mount : str
        Grating mount of the profile.
    medium : str
        Medium of all wavelengths (the profile's).
    grooves_per_mm : float
        Groove density (of the effective grating for a profile of unknown geometry).
    order : int
        Working order m.
    grating_angle_deg : float or None
        Physical grating angle (None for a profile of unknown geometry).
    header_angle : float or None
        The same as the header (dial) value: ``(angle - zero point) / scale``.
    solved_for_nm : float or None
        The central wavelength the angle was solved for (None if the angle was given).
    alpha_deg, beta_centre_deg : float
        Angle of incidence and diffraction angle at the detector centre.
    littrow_angle_deg : float or None
        Littrow angle of the central wavelength in the working order, asin(mλ/2d) (None for a
        grism).
    angular_dispersion_rad_per_nm : float
        dβ/dλ at the centre.
    binning : tuple of int
        ``(along axis 0, along axis 1)``.
    n_pixels : int
        Detector length along the dispersion axis (binned pixels).
    wavelength_increases : bool
        Wavelength grows with pixel index.
    points : tuple of SamplePoint
        First pixel, centre, last pixel.
    slit_width_um, collimator_focal_length_mm : float or None
        Inputs of the resolving power.
    free_spectral_range_nm, free_spectral_range_px : float
        λ/m at the centre, and that in pixels of the central dispersion.
    sensitivity_nm : tuple of float
        Sensitivity range used; ``sensitivity_assumed`` tells whether it was assumed.
    sensitivity_assumed : bool
        True when the profile gave none and :data:`DEFAULT_SENSITIVITY_NM` was used.
    overlaps : tuple of OrderOverlap
        Neighbouring orders landing on the detector.
    filters : FilterAdvice
        Order-sorting advice.
    blaze_nm, blaze_angle_deg : float or None
        Blaze wavelength (profile, working order) and the Littrow blaze angle.
    angle_prior_shift_px : float
        How far the central wavelength moves (pixels) if the grating angle is off by the
        profile's prior half-width: the uncertainty of the planned positions.
    line_width_px : float
        Line width used for the crowding test of the lamp scores.
    lines : pandas.DataFrame
        Listed lines of every shipped element landing on the detector in any order, sorted by
        ``x``: ``element``, ``wavelength_nm``, ``order``, ``x`` (0-based pixel),
        ``apparent_wavelength_nm`` (working-order wavelength at ``x``), ``intensity``, ``weak``,
        ``blend``, ``verified``, ``strong``, ``sensitive`` (own wavelength within the
        sensitivity range), ``ghost`` (order other than the working one), ``filtered`` (blocked
        by the suggested filter(s)), ``efficiency`` (blaze, NaN when unknown).
    lamps : tuple of LampScore
        Each shipped element on its own, alphabetically.
    recommended : tuple of LampScore
        The best lamps and mixes, best first.
    profile_lamps : LampScore or None
        The profile's default lamps scored the same way (None if it names none).
    notes : tuple of str
        What is approximated or assumed.
    warnings : tuple of str
        Problems with the setting worth a look.
    model : GratingModel
        The nominal model of the setting.
    """

    profile_name: str
    profile_source: str | None
    mount: str
    medium: str
    grooves_per_mm: float
    order: int
    grating_angle_deg: float | None
    header_angle: float | None
    solved_for_nm: float | None
    alpha_deg: float
    beta_centre_deg: float
    littrow_angle_deg: float | None
    angular_dispersion_rad_per_nm: float
    binning: tuple[int, int]
    n_pixels: int
    wavelength_increases: bool
    points: tuple[SamplePoint, ...]
    slit_width_um: float | None
    collimator_focal_length_mm: float | None
    free_spectral_range_nm: float
    free_spectral_range_px: float
    sensitivity_nm: tuple[float, float]
    sensitivity_assumed: bool
    overlaps: tuple[OrderOverlap, ...]
    filters: FilterAdvice
    blaze_nm: float | None
    blaze_angle_deg: float | None
    angle_prior_shift_px: float
    line_width_px: float
    lines: pd.DataFrame
    lamps: tuple[LampScore, ...]
    recommended: tuple[LampScore, ...]
    profile_lamps: LampScore | None
    notes: tuple[str, ...]
    warnings: tuple[str, ...]
    model: GratingModel

    @property
    def wavelength_range_nm(self) -> tuple[float, float]:
        """(shortest, longest) working-order wavelength on the detector (pixel centres)."""
        ends = sorted((self.points[0].wavelength_nm, self.points[-1].wavelength_nm))
        return float(ends[0]), float(ends[1])

    @property
    def central_wavelength_nm(self) -> float:
        """Working-order wavelength at the detector centre."""
        return self.points[1].wavelength_nm

    def pixel(self, wavelength_nm, *, order: int | None = None):
        """Planned 0-based pixel of ``wavelength_nm`` (in ``order``, default the working one)."""
        model = self.model if order is None else self.model.with_parameters(order=int(order))
        return model.pixel(wavelength_nm)

    def ghosts(self, lamps: tuple[str, ...] | None = None) -> pd.DataFrame:
        """Lines of other orders on the detector (all shipped elements, or only ``lamps``)."""
        table = self.lines[self.lines["ghost"]]
        return table if lamps is None else table[table["element"].isin(tuple(lamps))]

    def lines_for(self, lamps: tuple[str, ...]) -> pd.DataFrame:
        """Working-order lines of ``lamps`` on the detector."""
        table = self.lines[~self.lines["ghost"]]
        return table[table["element"].isin(tuple(lamps))]

    def summary(self) -> dict:
        """Everything as a JSON-safe dict (NaN becomes None)."""
        model = self.model
        return {
            "schema": _SCHEMA,
            "schema_version": _SCHEMA_VERSION,
            "instrument": self.profile_name,
            "profile": self.profile_source,
            "mount": self.mount,
            "medium": self.medium,
            "grooves_per_mm": jsonable(self.grooves_per_mm),
            "order": self.order,
            "grating_angle_deg": jsonable(self.grating_angle_deg),
            "header_angle": jsonable(self.header_angle),
            "solved_for_nm": jsonable(self.solved_for_nm),
            "alpha_deg": jsonable(self.alpha_deg),
            "beta_centre_deg": jsonable(self.beta_centre_deg),
            "littrow_angle_deg": jsonable(self.littrow_angle_deg),
            "angular_dispersion_rad_per_nm": jsonable(self.angular_dispersion_rad_per_nm),
            "binning": list(self.binning),
            "n_pixels": self.n_pixels,
            "wavelength_increases": self.wavelength_increases,
            "wavelength_range_nm": [jsonable(v) for v in self.wavelength_range_nm],
            "points": [p.summary() for p in self.points],
            "slit_width_um": jsonable(self.slit_width_um),
            "collimator_focal_length_mm": jsonable(self.collimator_focal_length_mm),
            "free_spectral_range_nm": jsonable(self.free_spectral_range_nm),
            "free_spectral_range_px": jsonable(self.free_spectral_range_px),
            "sensitivity_nm": [jsonable(v) for v in self.sensitivity_nm],
            "sensitivity_assumed": self.sensitivity_assumed,
            "overlaps": [o.summary() for o in self.overlaps],
            "filters": self.filters.summary(),
            "blaze_nm": jsonable(self.blaze_nm),
            "blaze_angle_deg": jsonable(self.blaze_angle_deg),
            "angle_prior_shift_px": jsonable(self.angle_prior_shift_px),
            "line_width_px": jsonable(self.line_width_px),
            "lamps": [s.summary() for s in self.lamps],
            "recommended": [s.summary() for s in self.recommended],
            "profile_lamps": None if self.profile_lamps is None else self.profile_lamps.summary(),
            "lines": [{k: jsonable(v) for k, v in row.items()}
                      for row in self.lines.to_dict(orient="records")],
            "notes": list(self.notes),
            "warnings": list(self.warnings),
            "model": {"focal_length_mm": jsonable(model.focal_length_mm),
                      "pixel_mm": jsonable(model.pixel_mm), "axis_pixel": jsonable(model.axis_pixel),
                      "tilt_deg": jsonable(model.tilt_deg), "deviation_deg": jsonable(model.deviation_deg),
                      "direction": model.direction},
        }

    def to_json(self, path: str | Path) -> Path:
        """Write :meth:`summary` as JSON, atomically; returns the path."""
        path = Path(path)
        atomic_write_text(path, json.dumps(self.summary(), indent=2, allow_nan=False) + "\n")
        return path


# -- the plan --------------------------------------------------------------------------------------
def _where(profile: InstrumentProfile) -> str:
    return str(profile.source) if profile.source is not None else f"profile {profile.name!r}"


def _check_inputs(profile, grating_angle_deg, central_wavelength_nm, slit_width_um, binning):
    where = _where(profile)
    if profile.grating.mount == "approximate":
        if grating_angle_deg is not None or central_wavelength_nm is not None:
            msg = (f"{where}: geometry unknown (mount 'approximate'): the setting is the one its "
                   f"[approximate] table states; give neither a grating angle nor a central wavelength")
            raise PlanningError(msg)
    elif (grating_angle_deg is None) == (central_wavelength_nm is None):
        msg = f"{where}: give exactly one of grating_angle_deg and central_wavelength_nm"
        raise PlanningError(msg)
    if grating_angle_deg is not None and not math.isfinite(float(grating_angle_deg)):
        msg = f"{where}: grating angle must be finite, got {grating_angle_deg!r}"
        raise PlanningError(msg)
    try:
        slit = None if slit_width_um is None else float(slit_width_um)
    except (TypeError, ValueError):
        slit = math.nan
    if slit is not None and not (math.isfinite(slit) and slit > 0):
        msg = f"{where}: slit width must be a positive number of micrometres, got {slit_width_um!r}"
        raise PlanningError(msg)
    try:
        bins = tuple(int(b) for b in binning)
    except (TypeError, ValueError):
        bins = ()
    if len(bins) != 2 or min(bins) < 1:
        msg = f"{where}: binning must be two positive integers (along axis 0, axis 1), got {binning!r}"
        raise PlanningError(msg)
    return bins, slit


def plan_setup(profile: InstrumentProfile, *, grating_angle_deg: float | None = None,
               central_wavelength_nm: float | None = None, slit_width_um: float | None = None,
               binning: tuple[int, int] = (1, 1)) -> SetupPlan:
    """Plan an observing setting (see the module docstring for what is computed and how).

    Parameters
    ----------
    profile : InstrumentProfile
        The instrument.
    grating_angle_deg : float, optional
        Physical grating angle (degrees), as ``wavecal solve --grating-angle`` takes it.
    central_wavelength_nm : float, optional
        Wavelength (profile medium) wanted at the detector centre; the angle is solved for with
        :func:`wavecal.optics.solve_grating_angle`. Give exactly one of the two (neither for a profile of
        unknown geometry, whose setting is fixed by its ``[approximate]`` table).
    slit_width_um : float, optional
        Slit width in micrometres, for the slit-limited resolving power.
    binning : tuple of int
        Binning ``(along axis 0, along axis 1)``.

    Returns
    -------
    SetupPlan

    Raises
    ------
    PlanningError
        For invalid options, an unreachable central wavelength, or a setting that diffracts no
        light of the working order onto part of the detector.
    """
    bins, slit_width_um = _check_inputs(profile, grating_angle_deg, central_wavelength_nm,
                                        slit_width_um, binning)
    where = _where(profile)
    g = profile.grating
    approximate = g.mount == "approximate"
    if central_wavelength_nm is not None:
        try:
            angle = solve_grating_angle(nominal_model(profile, 0.0, bins), central_wavelength_nm)
        except ValueError as exc:
            msg = f"{where}: {exc}"
            raise PlanningError(msg) from None
    else:
        angle = None if approximate else float(grating_angle_deg)
    model = nominal_model(profile, 0.0 if angle is None else angle, bins)
    n = model.n_pixels
    xs = np.array([0.0, 0.5 * (n - 1), n - 1.0])
    lam = model.wavelength(xs)
    if not np.all(np.isfinite(lam) & (lam > 0)):
        msg = (f"{where}: grating angle {angle}° diffracts no order-{model.order} light onto part of "
               f"the detector (wavelengths at first pixel, centre, last pixel: "
               f"{', '.join(f'{v:.1f}' for v in lam)} nm)")
        raise PlanningError(msg)
    sens = profile.sensitivity_nm or DEFAULT_SENSITIVITY_NM
    assumed = profile.sensitivity_nm is None
    blaze_nm = None if approximate else g.blaze_nm
    blaze_order = g.order
    if blaze_nm is not None and g.mount == "reflection" and \
            not 0 < blaze_order * g.grooves_per_mm * 1e-6 * blaze_nm / 2 < 1:
        msg = f"{where}: blaze_nm {blaze_nm} in order {blaze_order} gives no Littrow blaze angle"
        raise PlanningError(msg)

    def efficiency(wl, order):
        if blaze_nm is None:
            return np.full(np.shape(wl), np.nan)
        return scalar_blaze_efficiency(model, wl, order, blaze_nm=blaze_nm, blaze_order=blaze_order)

    f_coll = None if approximate else profile.camera.collimator_focal_length_mm
    points = _sample_points(model, xs, slit_width_um, f_coll, efficiency)
    band = (float(lam.min()), float(lam.max()))
    overlaps = order_overlaps(model, sens)
    filters = filter_advice(model, sens)
    width = (max(points[1].slit_image_px, 2.0) if points[1].slit_image_px is not None
             else _DEFAULT_LINE_WIDTH_PX)
    lines = line_table(model, profile.medium, sens, efficiency, filters)
    elements = available_elements()
    lamps = tuple(score_lamps(lines, (e,), order=model.order, n_pixels=n, line_width_px=width)
                  for e in elements)
    ranked = rank_lamp_mixes(lines, elements, order=model.order, n_pixels=n, line_width_px=width)
    usual = tuple(e for e in profile.lamps if e in elements)
    usual_score = (score_lamps(lines, usual, order=model.order, n_pixels=n, line_width_px=width)
                   if usual else None)
    alpha, _ = model.angles
    beta_c = float(model.beta(xs[1]))
    dbeta = abs(float(np.radians(model.beta(xs[1] + 0.5) - model.beta(xs[1] - 0.5))))
    ang_disp = dbeta / points[1].dispersion_nm_per_px
    sin_littrow = model.order * model.grooves_per_mm * 1e-6 * lam[1] / 2.0
    shift = _prior_shift(profile, model, lam[1])
    blaze_angle = None
    if blaze_nm is not None and g.mount == "reflection":
        blaze_angle = float(np.degrees(np.arcsin(blaze_order * g.grooves_per_mm * 1e-6 * blaze_nm / 2)))
    header_angle = None if angle is None else (angle - g.angle_zero_point_deg) / g.angle_scale
    plan_fields = dict(
        profile_name=profile.name,
        profile_source=None if profile.source is None else str(profile.source),
        mount=g.mount, medium=profile.medium, grooves_per_mm=float(model.grooves_per_mm),
        order=int(model.order), grating_angle_deg=angle, header_angle=header_angle,
        solved_for_nm=None if central_wavelength_nm is None else float(central_wavelength_nm),
        alpha_deg=float(alpha), beta_centre_deg=beta_c,
        littrow_angle_deg=(float(np.degrees(np.arcsin(sin_littrow)))
                           if 0 < sin_littrow < 1 and g.mount != "grism" else None),
        angular_dispersion_rad_per_nm=float(ang_disp), binning=bins, n_pixels=int(n),
        wavelength_increases=bool(lam[2] > lam[0]), points=points, slit_width_um=slit_width_um,
        collimator_focal_length_mm=f_coll,
        free_spectral_range_nm=float(lam[1] / model.order),
        free_spectral_range_px=float(lam[1] / model.order / points[1].dispersion_nm_per_px),
        sensitivity_nm=(float(sens[0]), float(sens[1])), sensitivity_assumed=assumed,
        overlaps=overlaps, filters=filters, blaze_nm=blaze_nm,
        blaze_angle_deg=blaze_angle, angle_prior_shift_px=shift, line_width_px=float(width),
        lines=lines, lamps=lamps, recommended=ranked[:_N_RECOMMENDED], profile_lamps=usual_score,
        model=model,
    )
    notes = _notes(plan_fields, profile, approximate, slit_width_um, f_coll)
    warnings = _warnings(plan_fields, band, sens, ranked)
    return SetupPlan(**plan_fields, notes=notes, warnings=warnings)


def _sample_points(model: GratingModel, xs: np.ndarray, slit_um, f_coll, efficiency):
    lam = model.wavelength(xs)
    disp = np.abs(model.dispersion(xs))
    beta = model.beta(xs)
    alpha, _ = model.angles
    anamorphic = np.cos(np.radians(alpha)) / np.cos(np.radians(beta))
    dbeta_dx = np.abs(np.radians(model.beta(xs + 0.5) - model.beta(xs - 0.5)))  # rad per px
    eff = efficiency(lam, model.order)
    labels = ("first pixel", "centre", "last pixel")
    points = []
    for i, label in enumerate(labels):
        slit_px = res = r = None
        if slit_um is not None and f_coll:
            angle = slit_um * 1e-3 / f_coll * anamorphic[i]  # slit image angle after the grating
            slit_px = float(angle / dbeta_dx[i])
            res = slit_px * float(disp[i])
            r = float(lam[i] / res)
        points.append(SamplePoint(
            label=label, pixel=float(xs[i]), wavelength_nm=float(lam[i]),
            dispersion_nm_per_px=float(disp[i]), beta_deg=float(beta[i]),
            anamorphic_magnification=float(anamorphic[i]), slit_image_px=slit_px,
            resolution_nm=res, resolving_power=r,
            sampling_resolving_power=float(lam[i] / (2.0 * disp[i])),
            blaze_efficiency=None if not np.isfinite(eff[i]) else float(eff[i])))
    return tuple(points)


def _prior_shift(profile: InstrumentProfile, model: GratingModel, centre_nm: float) -> float:
    half_width = prior_box(profile, model).grating_angle_deg[1]
    moved = model.with_parameters(grating_angle_deg=model.grating_angle_deg + half_width)
    shift = float(moved.pixel(centre_nm)) - 0.5 * (model.n_pixels - 1)
    return abs(shift) if math.isfinite(shift) else math.inf


def _notes(fields: dict, profile: InstrumentProfile, approximate: bool, slit_um, f_coll) -> tuple[str, ...]:
    notes = []
    if approximate:
        notes.append("Geometry unknown (mount 'approximate'): an effective first-order grating that "
                     "reproduces the stated central wavelength and dispersion stands in for the real "
                     "one; angles, orders and resolving power are only indicative.")
    notes.append(f"Positions use the profile's nominal geometry without distortion; a grating angle "
                 f"off by the profile's prior moves lines by up to {fields['angle_prior_shift_px']:.0f} px.")
    if slit_um is None:
        notes.append("No slit width given: only the 2-pixel sampling limit of the resolving power "
                     "is reported.")
    elif not f_coll:
        notes.append("The profile gives no collimator focal length: the slit image, hence the "
                     "slit-limited resolving power, cannot be computed; only the 2-pixel sampling "
                     "limit is reported.")
    else:
        notes.append("Resolving power from the geometric slit image: slit width x anamorphic "
                     "magnification cos(alpha)/cos(beta) x f_cam/f_coll, times the dispersion; no "
                     "optical blur, diffraction or aberration, and no limit from the illuminated "
                     "grating (R <= mN not checked). 'R (2 px)' is the sampling limit of two pixels "
                     "per resolution element.")
    if fields["blaze_nm"] is None:
        notes.append("The profile gives no blaze wavelength: grating efficiency not estimated.")
    elif profile.grating.mount == "reflection":
        notes.append("Blaze efficiency: scalar approximation, sinc^2 of the phase across one groove "
                     "facet (blaze angle from the Littrow condition m lambda_B = 2 d sin theta_B), "
                     "relative to its peak; polarisation, shadowing and anomalies ignored.")
    else:
        notes.append("Blaze efficiency: scalar small-angle approximation sinc^2(pi (m - m_B "
                     "lambda_B / lambda)), relative to its peak; polarisation and anomalies ignored.")
    if fields["sensitivity_assumed"]:
        notes.append(f"The profile states no sensitivity range: {DEFAULT_SENSITIVITY_NM[0]:.0f}–"
                     f"{DEFAULT_SENSITIVITY_NM[1]:.0f} nm assumed (silicon detector).")
    if fields["filters"].long_pass_needed or fields["filters"].short_pass_needed:
        notes.append("Filter edges are not sharp (a coloured-glass edge spans some tens of nm, from "
                     "memory): pick one that blocks below and passes above the whole window.")
    width_note = ("the slit image (at least 2 px)" if fields["points"][1].slit_image_px is not None
                  else f"{_DEFAULT_LINE_WIDTH_PX:g} px (assumed)")
    notes.append(f"Lamp scores: line width {width_note}; 'ghosts' without an order-sorting filter, "
                 f"'left' with the suggested one, which the score assumes; intensities are per "
                 f"element, not comparable between lamps; score = min(usable,20) + min(strong "
                 f"usable,10) - 30 x largest gap - ghosts left - 4 x (lamps - 1).")
    return tuple(notes)


def _warnings(fields: dict, band, sens, ranked) -> tuple[str, ...]:
    out = []
    if band[0] < sens[0] or band[1] > sens[1]:
        out.append(f"Part of the detector ({band[0]:.1f}–{band[1]:.1f} nm) lies outside the "
                   f"sensitivity range {sens[0]:.0f}–{sens[1]:.0f} nm.")
    filters = fields["filters"]
    if band[1] <= sens[0] or band[0] >= sens[1]:
        out.append("The detector sees no working-order light within the sensitivity range.")
    elif not filters.clears_detector:
        clean = filters.clean_range_nm
        where = f"only {clean[0]:.1f}–{clean[1]:.1f} nm is free of other orders" if clean else \
            "no part of it is free of other orders"
        out.append(f"The detector spans more than a free spectral range: even with the suggested "
                   f"filter(s) {where}.")
    effs = [p.blaze_efficiency for p in fields["points"] if p.blaze_efficiency is not None]
    if effs and min(effs) < _FAINT_EFFICIENCY:
        out.append(f"Blaze efficiency drops to {min(effs):.2f} of its peak on the detector: lines "
                   f"there will be faint.")
    if not any(s.rating == "solid" for s in ranked):
        out.append("No shipped lamp or mix of up to three gives a solid calibration at this setting.")
    return tuple(out)
