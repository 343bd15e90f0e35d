"""Calibrate one arc frame end to end, along the data's path.

read the frame → collapse it across the slit → find the peaks (following them along the slit)
→ resolve the line list at the frame's resolution → identify → fit, confirm and gather the
evidence (:mod:`wavecal.refine`) → verdict → :class:`~wavecal.solution.Solution`.

:func:`calibrate_frame` is the single public entry point used by the command line, the
evaluation scripts and notebooks. Expected failures (too few lines, no significant
identification) come back as a :class:`~wavecal.solution.Solution` with ``status == "failed"``
and reasons; bad input (unreadable file, missing header keyword) raises an exception naming the
file and the problem.
"""
from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ._version import __version__
from .anchors import (Anchors, anchor_peaks, anchored_identification, found_lines_chance,
                      line_sources)
from .assemble import fit_statistics, line_table, physical_parameters, unidentified_lines
from .extract import Spectrum, extract_spectrum
from .features import resolve_lines
from .fit import FitResult
from .frames import Frame, read_frame
from .linelists import LineList, load_line_list
from .match import Identification, identify_lines
from .model_setup import PriorBox, nominal_model, prior_box
from .optics import GratingModel
from .peak_table import PeakTable
from .peaks import find_peaks
from .profile import InstrumentProfile
from .refine import Refinement, refine_fit
from .solution import Solution
from .solution_prior import (ReferencePrior, reference_from_profile, reference_note,
                             reference_prior)
from .solution_records import FitStatistics, PhysicalParameters
from .status import Status
from .tracing import (MIN_SLIT_ROWS, SlitMeasurement, central_rows, follow_lines, profile_slit_rows,
                      refer_peaks, smeared, straighten)
from .verdict import Verdict, VerdictInputs, judge

__all__ = ["calibrate_frame", "Calibration", "POSSIBLE_EXTRAS"]

#: Elements many small lamps show besides their own (hydrogen from water in the tube): their
#: lines may name peaks that nothing else explains, but never count as evidence and are never
#: fitted. Name one in ``lamps`` to use it as a lamp element.
POSSIBLE_EXTRAS = ("H",)
#: No line is dropped as unconfirmed from a fit of this many lines or fewer (each is needed).
KEEP_ALL_LINES_UP_TO = 5


@dataclass(frozen=True)
class Calibration:
    """Everything a calibration produced, for reports and debugging.

    Attributes
    ----------
    solution : Solution
    spectrum : Spectrum
    peaks : PeakTable
    identification : Identification
    fit : FitResult or None
    nominal : GratingModel
    box : PriorBox
    slit : SlitMeasurement or None
        The slit tracing (None when not traced); ``spectrum`` and ``peaks`` above are its
        (possibly straightened, reference-row) ones.
    """

    solution: Solution
    spectrum: Spectrum
    peaks: PeakTable
    identification: Identification
    fit: FitResult | None
    nominal: GratingModel
    box: PriorBox
    slit: SlitMeasurement | None = None


def calibrate_frame(source: str | Path | Frame, profile: InstrumentProfile, *,
                    lamps: tuple[str, ...] | list[str] | None = None,
                    grating_angle_deg: float | None = None,
                    rows: tuple[int, int] | None = None,
                    min_snr: float = 5.0,
                    free_grooves: bool = False,
                    trace_slit: bool = True,
                    reference: ReferencePrior | None = None,
                    anchors: Anchors | None = None,
                    details: bool = False) -> Solution | Calibration:
    """Find, identify and fit the lines of one arc frame.

    Parameters
    ----------
    source : str, Path or Frame
        A raw FITS arc frame, or an already read :class:`~wavecal.frames.Frame`.
    profile : InstrumentProfile
        The instrument.
    lamps : sequence of str, optional
        Lamp elements in use; default: from the header through the profile.
    grating_angle_deg : float, optional
        Physical grating angle; default: from the header through the profile.
    rows : (int, int), optional
        Slit rows to collapse (indices along the frame's spatial axis); default: the profile's
        ``[detector] slit_rows``, else the illuminated rows, found from the frame.
    min_snr : float
        Detection threshold of the peak finder (peak signal-to-noise).
    free_grooves : bool
        Also fit the groove density (normally fixed by the grating's ruling).
    trace_slit : bool
        On a frame of at least :data:`~wavecal.tracing.MIN_SLIT_ROWS` slit rows, follow the lines
        along the slit and model their tilt and curvature (:mod:`wavecal.tracing`):
        the line centres are referred to the slit's reference row (straightening the frame
        first if the lines are smeared in the sum) and the solution gives the wavelength at
        every pixel of the slit.
    reference : ReferencePrior, optional
        A previous good solution of the same setting (:func:`~wavecal.solution_prior.load_reference`;
        default: the profile's ``[reference]``, if any):
        its fit is the start model and the prior narrows to the drift it allows
        (:func:`~wavecal.solution_prior.reference_prior`); the solution records it.
    anchors : Anchors, optional
        Pixel/wavelength pairs named by the user (:func:`~wavecal.anchors.read_anchors`): the
        identification starts from them instead of the blind search
        (:func:`~wavecal.anchors.anchored_identification`); the significance counts only the
        lines found besides them, and the solution's notes say how many came from the user.
    details : bool
        Return a :class:`Calibration` with the intermediate products instead of the solution.

    Returns
    -------
    Solution or Calibration
    """
    frame = source if isinstance(source, Frame) else read_frame(source, profile)
    where = frame.path
    profile = profile.for_header(frame.header, path=where)  # the frame's grating
    if grating_angle_deg is None:
        grating_angle_deg = profile.grating_angle_from_header(frame.header, path=where)
    lamps = tuple(lamps) if lamps else profile.lamps_from_header(frame.header, path=where)
    if not lamps:
        msg = f"{where or 'frame'}: no lamp elements in the header or the profile; pass lamps="
        raise ValueError(msg)
    nominal = nominal_model(profile, grating_angle_deg, frame.binning)
    box = prior_box(profile, nominal)
    if reference is None and profile.reference is not None:
        reference = reference_from_profile(profile.reference)
    if reference is not None:
        nominal, box = reference_prior(reference, nominal, box, medium=profile.medium, frame=where)

    spectrum, peaks, slit = _spectrum_and_peaks(frame, profile, rows, min_snr, trace_slit)
    table = _detections(peaks.table, min_snr, nominal.n_pixels)
    fwhm = float(peaks.fwhm_typical) if np.isfinite(peaks.fwhm_typical) else 3.0

    line_list = load_line_list(lamps, medium=profile.medium)
    extras = tuple(e for e in POSSIBLE_EXTRAS if e not in {lamp.capitalize() for lamp in lamps})
    extra_list = load_line_list(extras, medium=profile.medium) if extras else None
    nominal, in_range, ident = _identify(
        nominal, box, line_list, table["x"].to_numpy(float), table["snr"].to_numpy(float), peaks,
        fwhm, anchors=anchors,
        both_directions=anchors is None and profile.detector.wavelength_increases == 0)
    notes = () if reference is None else (reference_note(reference),)

    refined = None
    verdict = Verdict(Status.FAILED, ident.notes or ("no identification",))
    if ident.best is not None:
        # the identified model places every listed line far better than the nominal one:
        # resolve the list again where its lines really fall
        features = resolve_lines(in_range, ident.best.model, peaks.fwhm_at)
        refined = refine_fit(ident.best, box, table, features, fwhm,
                             min_lines=KEEP_ALL_LINES_UP_TO, free_grooves=free_grooves,
                             extra_sigma_px=_slit_sigma(slit))
        if refined is not None and anchors is not None:
            refined, note = _anchored(refined, anchors, table, fwhm)
            notes += (note,)
        verdict = (Verdict(Status.FAILED, ("too few lines identified",)) if refined is None
                   else judge(_verdict_inputs(refined, ident, box, fwhm, slit)))

    if refined is None:
        model, covered, shift = None, (math.nan, math.nan), None
        lines = unidentified_lines(table)
        parameters, statistics = PhysicalParameters(), FitStatistics(n_peaks=len(table))
    else:
        model, covered = refined.fit.model, refined.covered_range_px
        shift = slit.shift if slit is not None else None
        lines = line_table(table, refined, features, line_list, extra_list, fwhm)
        parameters = physical_parameters(refined.fit, box)
        statistics = fit_statistics(refined, ident, box, features)
    named = None if anchors is None else anchor_peaks(anchors, table["x"].to_numpy(float), fwhm)
    lines = lines.assign(source=line_sources(len(lines), named))
    solution = Solution(
        status=verdict.status, reasons=verdict.reasons, medium=profile.medium, model=model,
        lines=lines, parameters=parameters, statistics=statistics, covered_range_px=covered,
        frame=str(frame.path) if frame.path else None, profile=profile.name, lamps=tuple(lamps),
        dispersion_axis=profile.detector.dispersion_axis, software_version=__version__,
        slit=shift, grating=profile.grating_name, notes=notes,
        reference=None if reference is None else {"file": reference.path.name,
                                                  "sha256": reference.sha256})
    if details:
        return Calibration(solution, spectrum, peaks, ident,
                           refined.fit if refined is not None else None, nominal, box, slit)
    return solution


# -- the slit: the frame's spectrum and peaks, traced along the slit ---------------------------
def _spectrum_and_peaks(frame: Frame, profile: InstrumentProfile, rows: tuple[int, int] | None,
                        min_snr: float, trace_slit: bool
                        ) -> tuple[Spectrum, PeakTable, SlitMeasurement | None]:
    """The spectrum to calibrate and its peaks; with ``trace_slit``, those of the slit tracing
    (centres referred to the reference row) and the tracing itself."""
    if rows is None:
        rows = profile_slit_rows(frame, profile)
    spectrum = extract_spectrum(frame, rows=rows)
    peaks = find_peaks(spectrum, min_snr=min_snr)
    if not trace_slit:
        return spectrum, peaks, None
    slit = _measure_slit(frame, spectrum, peaks, min_snr=min_snr)
    return slit.spectrum, slit.peaks, slit


def _measure_slit(frame: Frame, spectrum: Spectrum, peaks: PeakTable, *,
                  min_snr: float) -> SlitMeasurement:
    """Trace the slit of a frame and refer its spectrum's line centres to the reference row.

    The lines to follow are the peaks of the spectrum of a narrow central band of
    ``spectrum.rows`` (:func:`~wavecal.tracing.central_rows`), traced over ``spectrum.rows``
    (:func:`~wavecal.tracing.follow_lines`). When they are smeared in the plain sum
    (:func:`~wavecal.tracing.smeared`), the straightened frame is summed again and its peaks
    found again: they lie at the lines' reference-row positions. Otherwise each peak centre of
    the plain sum is moved to the reference row (:func:`~wavecal.tracing.refer_peaks`).
    ``shift`` is None (and spectrum and peaks are unchanged) when the slit has fewer than
    :data:`~wavecal.tracing.MIN_SLIT_ROWS` rows or too few lines could be followed.
    """
    unchanged = SlitMeasurement(spectrum, peaks, None, None, False)
    start, stop = spectrum.rows
    if stop - start < MIN_SLIT_ROWS or len(peaks) == 0:
        return unchanged
    central = find_peaks(extract_spectrum(frame, rows=central_rows(spectrum.rows)), min_snr=min_snr)
    followed = follow_lines(frame, central, spectrum.rows)
    if followed is None:
        return unchanged
    traces, shift = followed
    if not smeared(shift, traces):
        return SlitMeasurement(spectrum, refer_peaks(peaks, shift, traces), shift, traces, False)
    straight = dataclasses.replace(
        extract_spectrum(straighten(frame, shift, spectrum.rows), rows=(0, stop - start)),
        rows=(start, stop))
    straight_peaks = find_peaks(straight, min_snr=min_snr)
    if len(straight_peaks) == 0:
        return unchanged
    return SlitMeasurement(straight, straight_peaks, shift, traces, True)


def _slit_sigma(slit: SlitMeasurement | None) -> Callable[[np.ndarray], np.ndarray] | None:
    """The uncertainty of the shift along the slit at reference-row positions: the largest
    over the summed rows, the rows the solution is for (None without a slit model)."""
    if slit is None or slit.shift is None:
        return None
    shift = slit.shift
    rows = np.linspace(slit.spectrum.rows[0], slit.spectrum.rows[1] - 1, 17)
    return lambda grid: np.nanmax(shift.shift_sigma_grid(grid, rows), axis=0, initial=0.0)


def _untraced_rows(slit: SlitMeasurement | None) -> int:
    """Summed rows along which the lines were to be followed but could not be (0 when the
    slit was traced, too short to trace, or not to be traced)."""
    if slit is None or slit.shift is not None:
        return 0
    height = slit.spectrum.rows[1] - slit.spectrum.rows[0]
    return height if height >= MIN_SLIT_ROWS else 0


# -- identification and verdict -------------------------------------------------------------
def _identify(nominal: GratingModel, box: PriorBox, line_list: LineList, x: np.ndarray,
              snr: np.ndarray, peaks: PeakTable, fwhm: float, *, anchors: Anchors | None,
              both_directions: bool) -> tuple[GratingModel, LineList, Identification]:
    """The identification of the listed lines reachable within the prior box, resolved at the
    frame's line width: the blind search (:func:`~wavecal.match.identify_lines`), or the one
    started from the user's ``anchors`` (:func:`~wavecal.anchors.anchored_identification`).

    With ``both_directions`` (a rough profile that does not say which way wavelength
    increases) it is run for either direction and the more significant identification is
    kept: the number of hypotheses examined is the sum over both searches (twice as many,
    about ``log10(2)`` more in ``log10_trials``), and the other direction's best hypothesis
    competes as the runner-up, so that a direction the frame cannot decide is ``ambiguous``.

    Returns the nominal model in the chosen direction, the listed lines in its reachable
    range, and the identification.
    """
    tried = []
    for direction in (1, -1) if both_directions else (nominal.direction,):
        model = nominal.with_parameters(direction=direction)
        in_range = line_list.in_range(*_reachable_range(model, box))
        lines = resolve_lines(in_range, model, peaks.fwhm_at).lines
        if anchors is None:
            ident = identify_lines(model, box, x, lines.wavelength_nm, intensity=lines.intensity,
                                   vote_weight=snr, fwhm_px=fwhm)
        else:
            ident = anchored_identification(model, box, anchors, x, lines.wavelength_nm,
                                            intensity=lines.intensity, fwhm_px=fwhm)
        tried.append((model, in_range, ident))
    if len(tried) == 1:
        return tried[0]
    tried.sort(key=lambda t: t[2].best.log10_chance if t[2].best is not None else math.inf)
    (model, in_range, ident), (_, _, other) = tried
    rivals = [h for h in (ident.runner_up, other.best) if h is not None]
    high, low = sorted((ident.log10_trials, other.log10_trials), reverse=True)
    ident = dataclasses.replace(
        ident, runner_up=min(rivals, key=lambda h: h.log10_chance, default=None),
        n_candidates=ident.n_candidates + other.n_candidates,
        log10_trials=high + math.log10(1.0 + 10.0 ** (low - high)))  # log10 of the sum
    return model, in_range, ident


def _detections(table: pd.DataFrame, min_snr: float, n_pixels: int) -> pd.DataFrame:
    """The peaks that are detections: fitted at the detection threshold or above, with their
    centre on the detector (a fit of a crowded group can leave a faint member, or one pushed
    past the edge, that the matched filter alone would not have found)."""
    x = table["x"].to_numpy(float)
    keep = (table["snr"].to_numpy(float) >= min_snr) & (x >= 0.0) & (x <= n_pixels - 1.0)
    return table[keep].reset_index(drop=True)


def _reachable_range(model: GratingModel, box: PriorBox) -> tuple[float, float]:
    """Wavelengths that can reach the detector anywhere within the prior box."""
    (phi, dphi), (f, df) = box.grating_angle_deg, box.focal_length_mm
    margin = 0.02 * model.n_pixels + box.axis_pixel[1]
    edges = np.array([-margin, model.n_pixels - 1 + margin])
    lams = [model.with_parameters(grating_angle_deg=phi + a, focal_length_mm=f + b).wavelength(edges)
            for a in (-dphi, dphi) for b in (-df, df)]
    lams = np.concatenate(lams)
    return float(np.nanmin(lams)), float(np.nanmax(lams))


def _anchored(refined: Refinement, anchors: Anchors, table: pd.DataFrame,
              fwhm: float) -> tuple[Refinement, str]:
    """The refinement with its significance counting only the lines the tool found, and the
    note saying how many lines came from the user."""
    named = anchor_peaks(anchors, table["x"].to_numpy(float), fwhm)
    log10_chance, n_user = found_lines_chance(refined, named)
    note = (f"{n_user} of the {refined.fit.n_used} lines used were named by the user "
            f"({anchors.path.name}); the significance counts only the others")
    return dataclasses.replace(refined, log10_chance=log10_chance), note


def _verdict_inputs(refined: Refinement, ident: Identification, box: PriorBox,
                    fwhm: float, slit: SlitMeasurement | None) -> VerdictInputs:
    """The facts the verdict weighs, from the refined fit, the identification and the slit."""
    fit, evidence, runner = refined.fit, refined.evidence, ident.runner_up
    shift = None if slit is None else slit.shift
    return VerdictInputs(
        n_used=fit.n_used, n_determined=float(np.sum(fit.leverage[fit.used])),
        log10_chance=refined.log10_chance, log10_trials=ident.log10_trials,
        fit_success=fit.success, scatter_px=fit.scatter_px, fwhm_px=fwhm,
        ambiguous=ident.ambiguous, rival_log10_chance=runner.log10_chance if runner else None,
        prior_shifts=refined.prior_shifts, effective_geometry=box.effective,
        max_sigma_px=evidence.max_sigma_px, max_sigma_at_px=evidence.max_sigma_at_px,
        leave_one_out_px=evidence.leave_one_out_px,
        leave_one_out_at_px=evidence.leave_one_out_at_px,
        leave_pair_out_px=evidence.leave_pair_out_px,
        leave_pair_out_at_px=evidence.leave_pair_out_at_px,
        distortion_move_px=evidence.distortion_move_px,
        slit_move_px=0.0 if shift is None else shift.degree_move_px(
            np.linspace(*refined.covered_range_px, 17),
            np.linspace(slit.spectrum.rows[0], slit.spectrum.rows[1] - 1, 17)),
        untraced_slit_rows=_untraced_rows(slit),
        largest_gap_fraction=evidence.largest_gap_fraction)
