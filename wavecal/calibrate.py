"""Calibrate one arc frame end to end: frame → spectrum → peaks → identification → fit → solution.

:func:`calibrate_frame` is the single public entry point used by the command line, the
evaluation scripts and notebooks. Expected failures (too few lines, no significant
identification) come back as a :class:`~wavecal.solution.Solution` with ``status == "failed"``
and reasons; bad input (unreadable file, missing header keyword) raises an exception naming the
file and the problem.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ._version import __version__
from .extract import Spectrum, extract_spectrum
from .features import ResolvedLines, resolve_lines
from .fit import PHYSICAL_PARAMETERS, FitResult, fit_lines, wavelength_sigma
from .frames import Frame, read_frame
from .linelists import LineList, load_line_list
from .match import (Identification, associate, blend_distance_px, chance_log10_probability,
                    coincidence_probabilities, identify_lines)
from .model_setup import PriorBox, nominal_model, prior_box
from .optics import GratingModel
from .peak_table import PeakFlag, PeakTable
from .peaks import find_peaks
from .profile import InstrumentProfile
from .constants import SPEED_OF_LIGHT_KMS
from .slit_shift import SlitShift
from .solution import Solution
from .status import Status
from .tracing import (MIN_SLIT_ROWS, SlitMeasurement, central_rows, follow_lines, profile_slit_rows,
                      refer_peaks, smeared, straighten)
from .verdict import MIN_LINES_FAILED, VerdictInputs, judge

__all__ = ["calibrate_frame", "Calibration", "POSSIBLE_EXTRAS", "ANCHOR_SIGMA_PX", "LINE_UNCERTAINTY_VERIFIED_NM",
           "LINE_UNCERTAINTY_UNVERIFIED_NM"]

#: Leave-one-out residual (pixels) below which a used line counts as confirmed by the others
#: (or five times its uncertainty, if larger).
CONFIRM_PX = 0.3
#: At most this many lines are dropped as unconfirmed.
_MAX_UNCONFIRMED = 4

#: Smallest window (pixels) assumed for chance coincidences in the significance test.
_MIN_CHANCE_WINDOW_PX = 0.1

#: Fraction of its width by which the centre of a line fitted jointly with a close neighbour
#: is uncertain beyond its statistical error (profile mismatch in deblending, unseen faint
#: companions; common practice puts such errors at about a tenth of the width).
BLEND_CENTRE_FRACTION = 0.1

#: A used line marks an end of the range the solution covers only if its total uncertainty in
#: the fit is at most this (pixels): the scale on which a solution is right or wrong (a quarter
#: pixel; common practice). Beyond the outermost such lines the solution extrapolates.
ANCHOR_SIGMA_PX = 0.25

#: Elements many small lamps show besides their own (hydrogen from water in the tube): their
#: lines may name peaks that nothing else explains, but never count as evidence and are never
#: fitted. Name one in ``lamps`` to use it as a lamp element.
POSSIBLE_EXTRAS = ("H",)

#: Wavelength uncertainty given to line-list values checked against NIST (nm).
LINE_UNCERTAINTY_VERIFIED_NM = 0.0005
#: Wavelength uncertainty given to line-list values from memory (nm).
LINE_UNCERTAINTY_UNVERIFIED_NM = 0.002


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
    details : bool
        Return a :class:`Calibration` with the intermediate products instead of the solution.

    Returns
    -------
    Solution or Calibration
    """
    frame = source if isinstance(source, Frame) else read_frame(source, profile)
    where = frame.path
    if grating_angle_deg is None:
        grating_angle_deg = profile.grating_angle_from_header(frame.header, path=where)
    lamps = tuple(lamps) if lamps else profile.lamps_from_header(frame.header, path=where)
    if not lamps:
        msg = f"{where or 'frame'}: no lamp elements in the header or the profile; pass lamps="
        raise ValueError(msg)
    nominal = nominal_model(profile, grating_angle_deg, frame.binning)
    box = prior_box(profile, nominal)

    if rows is None:
        rows = profile_slit_rows(frame, profile)
    spectrum = extract_spectrum(frame, rows=rows)
    peaks = find_peaks(spectrum, min_snr=min_snr)
    slit = None
    if trace_slit:
        slit = _measure_slit(frame, spectrum, peaks, min_snr=min_snr)
        spectrum, peaks = slit.spectrum, slit.peaks
    line_list = load_line_list(lamps, medium=profile.medium)
    extras = tuple(e for e in POSSIBLE_EXTRAS if e not in {lamp.capitalize() for lamp in lamps})
    extra_list = load_line_list(extras, medium=profile.medium) if extras else None
    table = _detections(peaks.table, min_snr, nominal.n_pixels)
    x = table["x"].to_numpy(float)
    fwhm = float(peaks.fwhm_typical) if np.isfinite(peaks.fwhm_typical) else 3.0
    nominal, in_range, ident = _identify(nominal, box, line_list, x, table["snr"].to_numpy(float),
                                         peaks, fwhm,
                                         both_directions=profile.detector.wavelength_increases == 0)
    fit = None
    if ident.best is None:
        solution = _failed(profile, frame, lamps, table, ident.notes or ("no identification",))
    else:
        # the identified model places every listed line far better than the nominal one:
        # resolve the list again where its lines really fall
        features = resolve_lines(in_range, ident.best.model, peaks.fwhm_at)
        solution, fit = _fit_and_judge(profile, frame, lamps, table, features, line_list,
                                       extra_list, ident, box, fwhm, free_grooves,
                                       slit.shift if slit is not None else None)
    if details:
        return Calibration(solution, spectrum, peaks, ident, fit, nominal, box, slit)
    return solution


def _identify(nominal: GratingModel, box: PriorBox, line_list: LineList, x: np.ndarray,
              snr: np.ndarray, peaks: PeakTable, fwhm: float, *,
              both_directions: bool) -> tuple[GratingModel, LineList, Identification]:
    """The blind identification (:func:`~wavecal.match.identify_lines`) of the listed lines
    reachable within the prior box, resolved at the frame's line width.

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
        features = resolve_lines(in_range, model, peaks.fwhm_at)
        tried.append((model, in_range, identify_lines(
            model, box, x, features.lines.wavelength_nm, intensity=features.lines.intensity,
            vote_weight=snr, fwhm_px=fwhm)))
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


def _line_sigma(features: ResolvedLines) -> np.ndarray:
    """Wavelength uncertainty of each feature: the list's own, and that of a merged centre."""
    listed = np.where(features.lines.verified, LINE_UNCERTAINTY_VERIFIED_NM,
                      LINE_UNCERTAINTY_UNVERIFIED_NM)
    return np.hypot(listed, features.sigma_nm)


def _centre_sigma(table: pd.DataFrame, fwhm: float) -> np.ndarray:
    """Peak-centre uncertainties, with blended and poorly fitted peaks kept but widened.

    The peak finder already widens the ``x_err`` of a line wider than expected (a possible
    blend). The centre of a line fitted jointly with a close neighbour also depends on how well
    the assumed profile matches both, and a faint companion too close to be seen apart pulls it
    unseen: such a centre is uncertain by :data:`BLEND_CENTRE_FRACTION` of its width. A peak
    that one profile does not fit is uncertain by a quarter of its width.
    """
    x_err = table["x_err"].to_numpy(float)
    width = np.nan_to_num(table["fwhm"].to_numpy(float), nan=fwhm)
    flags = table["flags"].to_numpy(int)
    blended = np.where((flags & int(PeakFlag.BLENDED)) != 0, BLEND_CENTRE_FRACTION * width, 0.0)
    poor = np.where((flags & int(PeakFlag.POOR_FIT)) != 0, 0.25 * width, 0.0)
    sigma = np.sqrt(np.nan_to_num(x_err, nan=fwhm) ** 2 + blended**2 + poor**2)
    return np.maximum(sigma, 1e-4)


def _converge(model, box, x, x_err, lam, lam_err, assoc, tolerance, fwhm, free_grooves,
              intensity):
    """Alternate fit and re-association until the identification is stable.

    Crowded pairs (a listed neighbour within the blend distance) are fitted with their
    wavelength uncertainty widened by a tenth of the line width. Returns the last fit, the
    association it was made on and that association's tolerance, or ``(None, ...)`` when too
    few lines remain.
    """
    fit, fitted, fitted_tol = None, assoc, tolerance
    for _ in range(4):
        if len(assoc) < 3:
            break
        fit = fit_lines(model, box, x[assoc.peak], x_err[assoc.peak], lam[assoc.line],
                        _crowded_sigma(model, x[assoc.peak], lam_err[assoc.line], assoc.crowded,
                                       fwhm), free_grooves=free_grooves)
        model, fitted, fitted_tol = fit.model, assoc, tolerance
        tolerance = float(np.clip(5.0 * fit.rms_px, 0.3, tolerance))
        new = associate(model, x, lam, tolerance, blend_px=blend_distance_px(fwhm),
                        intensity=intensity)
        if np.array_equal(new.peak, assoc.peak) and np.array_equal(new.line, assoc.line):
            break
        assoc = new
    return fit, fitted, fitted_tol


def _crowded_sigma(model, x, lam_err, crowded, fwhm) -> np.ndarray:
    """Wavelength uncertainties with crowded pairs' widened by a tenth of the line width."""
    return np.where(crowded, np.hypot(lam_err, 0.1 * fwhm * np.abs(model.dispersion(x))), lam_err)


def _confirm(fit: FitResult, box, x, x_err, lam, lam_err, free_grooves):
    """Drop, one at a time, used lines that the other lines do not confirm.

    A line is confirmed when its leave-one-out residual is within
    max(:data:`CONFIRM_PX`, 5 σ √χ²_red); an unconfirmed line (typically alone beyond a gap,
    where the model bends to whatever it is paired with) leaves the fit, so that the range
    covered by the solution only spans confirmed lines.
    """
    unconfirmed = np.zeros(x.size, bool)
    for _ in range(_MAX_UNCONFIRMED):
        sigma = np.hypot(x_err, lam_err / np.abs(fit.model.dispersion(x)))
        limit = np.maximum(CONFIRM_PX, 5.0 * sigma * np.sqrt(max(fit.redchi, 1.0)))
        ratio = np.abs(fit.leave_one_out_px) / limit
        ratio[~fit.used | ~np.isfinite(ratio)] = 0.0
        worst = int(np.argmax(ratio))
        if ratio[worst] <= 1.0 or fit.n_used <= MIN_LINES_FAILED:
            break
        unconfirmed[worst] = True
        fit = fit_lines(fit.model, box, x, x_err, lam, lam_err, fit_mask=~unconfirmed,
                        free_grooves=free_grooves)
    return fit, unconfirmed


def _fit_and_judge(profile, frame, lamps, table, features: ResolvedLines, full_list: LineList,
                   extra_list: LineList | None, ident: Identification, box: PriorBox, fwhm: float, free_grooves: bool,
                   slit: SlitShift | None):
    lines = features.lines
    x = table["x"].to_numpy(float)
    x_err = _centre_sigma(table, fwhm)
    lam = lines.wavelength_nm
    lam_err = _line_sigma(features)
    start = associate(ident.best.model, x, lam, ident.best.tolerance_px,
                      blend_px=blend_distance_px(fwhm), intensity=lines.intensity)
    fit, fitted, tolerance = _converge(
        ident.best.model, box, x, x_err, lam, lam_err, start, ident.best.tolerance_px, fwhm,
        free_grooves, lines.intensity)
    if fit is None:
        return _failed(profile, frame, lamps, table, ("too few lines identified",)), None
    crowded = fitted.crowded
    pairs_peak, pairs_line = fitted.peak, fitted.line
    pair_lam_err = _crowded_sigma(fit.model, x[pairs_peak], lam_err[pairs_line], crowded, fwhm)
    fit, unconfirmed = _confirm(fit, box, x[pairs_peak], x_err[pairs_peak], lam[pairs_line],
                                pair_lam_err, free_grooves)
    model = fit.model

    used_peaks = pairs_peak[fit.used]
    # the window that chance coincidences would have had to hit: the association tolerance, or
    # four times the residual RMS when the lines sit much closer than that (never below 0.1 px)
    window = float(np.clip(4.0 * fit.rms_px, _MIN_CHANCE_WINDOW_PX, tolerance))
    log10_chance = chance_log10_probability(
        len(pairs_peak), coincidence_probabilities(model, x, lam, window),
        n_free=2 + max(fit.distortion_degree - 2, 0))
    priors = box.as_dict()
    shifts = {n: (getattr(model, n) - priors[n][0]) / priors[n][1] for n in PHYSICAL_PARAMETERS}
    runner = ident.runner_up
    # the range the solution covers: between the outermost used lines precise enough to hold
    # it there (a line known only to a pixel or two at the end of the range vouches for nothing)
    anchoring = fit.used & (fit.sigma_px <= ANCHOR_SIGMA_PX)
    used_x = x[pairs_peak[anchoring]] if np.any(anchoring) else x[used_peaks]
    evidence = _evidence(fit, model, used_x, slit)
    verdict = judge(VerdictInputs(
        n_used=fit.n_used, log10_chance=log10_chance, log10_trials=ident.log10_trials,
        fit_success=fit.success, scatter_px=fit.scatter_px, fwhm_px=fwhm,
        ambiguous=ident.ambiguous, rival_log10_chance=runner.log10_chance if runner else None,
        prior_shifts=shifts, effective_geometry=box.effective, **evidence))

    lines_df = _line_table(table, model, lines, full_list, extra_list, pairs_peak, pairs_line, fit.used,
                           unconfirmed, fwhm)
    lines_df.loc[pairs_peak, "sigma_px"] = fit.sigma_px
    used_lam = lam[pairs_line[fit.used]]
    offset_nm = model.wavelength(x[used_peaks]) - used_lam
    weight = 1.0 / fit.sigma_px[fit.used] ** 2  # as in FitResult.rms_px
    rms_nm = _weighted_rms(offset_nm, weight)
    rms_kms = _weighted_rms(offset_nm / used_lam * SPEED_OF_LIGHT_KMS, weight)
    parameters = []
    for name, value, error in zip(fit.names, fit.values, fit.errors):
        nominal, width = priors.get(name, (math.nan, math.nan))
        parameters.append({"name": name, "value": float(value), "error": float(error),
                           "nominal": float(nominal), "prior": float(width),
                           "shift_sigma": float((value - nominal) / width) if width == width else math.nan})
    statistics = {
        "rms_px": fit.rms_px, "rms_nm": rms_nm, "rms_kms": rms_kms, "redchi": fit.redchi,
        "n_used": fit.n_used,
        "n_rejected": int(np.count_nonzero(~fit.used & ~unconfirmed)),
        "n_unconfirmed": int(np.count_nonzero(unconfirmed)),
        "n_blends": int(np.count_nonzero(crowded | lines.blend[pairs_line])), "n_peaks": int(x.size),
        "n_identified": int(len(pairs_peak)), "distortion_degree": fit.distortion_degree,
        "log10_chance": log10_chance, "log10_trials": ident.log10_trials,
        "runner_up_log10_chance": runner.log10_chance if runner else math.nan,
        "association_tolerance_px": tolerance, "effective_geometry": box.effective,
        "max_sigma_px": evidence["max_sigma_px"], "scatter_px": fit.scatter_px,
        "leave_one_out_px": evidence["leave_one_out_px"],
    }
    solution = Solution(
        status=verdict.status, reasons=verdict.reasons, medium=profile.medium, model=model,
        lines=lines_df, parameters=tuple(parameters),
        correlation={"names": fit.names, "matrix": fit.correlation}, covariance=fit.covariance,
        statistics=statistics,
        covered_range_px=(float(used_x.min()), float(used_x.max())) if used_x.size else (math.nan, math.nan),
        frame=str(frame.path) if frame.path else None, profile=profile.name, lamps=tuple(lamps),
        dispersion_axis=profile.detector.dispersion_axis, software_version=__version__, slit=slit)
    return solution, fit


def _weighted_rms(values: np.ndarray, weight: np.ndarray) -> float:
    return float(np.sqrt(np.sum(weight * values**2) / np.sum(weight))) if values.size else math.nan


def _evidence(fit: FitResult, model: GratingModel, used_x: np.ndarray,
              slit: SlitShift | None) -> dict[str, float]:
    """Uncertainty and stability of the solution between the outermost lines used; on a long
    slit the uncertainty includes that of the shift along the slit, over the traced rows."""
    if used_x.size == 0:
        return {"max_sigma_px": math.nan, "max_sigma_at_px": math.nan,
                "leave_one_out_px": math.nan, "leave_one_out_at_px": math.nan,
                "largest_gap_fraction": 1.0}
    grid = np.linspace(used_x.min(), used_x.max(), 65)
    sigma_px = wavelength_sigma(model, fit.names, fit.covariance, grid) / np.abs(model.dispersion(grid))
    if slit is not None:
        rows = np.linspace(slit.rows_covered[0], slit.rows_covered[1], 17)
        along = np.nanmax(slit.shift_sigma_grid(grid, rows), axis=0, initial=0.0)
        sigma_px = np.hypot(sigma_px, along)
    shift = fit.leave_one_out_shift_px(grid)
    worst = int(np.nanargmax(np.where(np.isfinite(shift), shift, -1.0)))
    top = int(np.nanargmax(np.where(np.isfinite(sigma_px), sigma_px, -1.0)))
    gaps = np.diff(np.sort(used_x)) / max(model.n_pixels - 1, 1)
    return {"max_sigma_px": float(sigma_px[top]), "max_sigma_at_px": float(grid[top]),
            "leave_one_out_px": float(shift[worst]), "leave_one_out_at_px": float(fit.x[worst]),
            "largest_gap_fraction": float(gaps.max(initial=0.0))}


def _line_table(table: pd.DataFrame, model: GratingModel, lines: LineList, full_list: LineList,
                extra_list: LineList | None,
                pairs_peak, pairs_line, used, unconfirmed, fwhm: float) -> pd.DataFrame:
    x = table["x"].to_numpy(float)
    n = x.size
    out = pd.DataFrame({
        "x": x, "x_err": table["x_err"].to_numpy(float), "fwhm": table["fwhm"].to_numpy(float),
        "flux": table["flux"].to_numpy(float), "snr": table["snr"].to_numpy(float),
        "flags": table["flags"].to_numpy(int),
    })
    ident = np.full(n, "unidentified", dtype=object)
    element = np.full(n, "", dtype=object)
    line_wl = np.full(n, np.nan)
    line_int = np.full(n, np.nan)
    verified = np.zeros(n, bool)
    ident[pairs_peak] = np.where(used, "used", np.where(unconfirmed, "unconfirmed", "rejected"))
    element[pairs_peak] = lines.element[pairs_line]
    line_wl[pairs_peak] = lines.wavelength_nm[pairs_line]
    line_int[pairs_peak] = lines.intensity[pairs_line]
    verified[pairs_peak] = lines.verified[pairs_line]
    def name_rest(label: str, rest_model: GratingModel, candidates: LineList) -> None:
        """Name still unidentified peaks that sit at a line of ``candidates`` under
        ``rest_model`` (never fitted, never evidence)."""
        rest = np.flatnonzero(ident == "unidentified")
        if not rest.size or not len(candidates):
            return
        found = associate(rest_model, x[rest], candidates.wavelength_nm, max(0.5, 0.3 * fwhm))
        idx = rest[found.peak]
        ident[idx] = label
        element[idx] = candidates.element[found.line]
        line_wl[idx] = candidates.wavelength_nm[found.line]
        line_int[idx] = candidates.intensity[found.line]
        verified[idx] = candidates.verified[found.line]

    # where a listed line would appear in twice the order, then a possible extra element's line
    name_rest("ghost", model.with_parameters(order=2 * model.order), full_list)
    if extra_list is not None:
        name_rest("extra", model, extra_list)
    fit_wl = model.wavelength(x)
    residual_px = np.full(n, np.nan)
    first_order = np.isin(ident, ["used", "rejected", "unconfirmed"])
    residual_px[first_order] = x[first_order] - model.pixel(line_wl[first_order])
    residual_nm = np.where(first_order, fit_wl - line_wl, np.nan)
    out["identification"] = ident
    out["element"] = element
    out["line_wavelength"] = line_wl
    out["line_intensity"] = line_int
    out["line_verified"] = verified
    out["wavelength_fit"] = fit_wl
    out["residual_px"] = residual_px
    out["residual_nm"] = residual_nm
    out["residual_kms"] = residual_nm / line_wl * SPEED_OF_LIGHT_KMS
    out["sigma_px"] = np.nan
    return out


def _failed(profile, frame, lamps, table: pd.DataFrame, reasons) -> Solution:
    lines = pd.DataFrame({
        "x": table["x"].to_numpy(float), "x_err": table["x_err"].to_numpy(float),
        "fwhm": table["fwhm"].to_numpy(float), "flux": table["flux"].to_numpy(float),
        "snr": table["snr"].to_numpy(float), "flags": table["flags"].to_numpy(int),
        "identification": "unidentified", "element": "", "line_wavelength": np.nan,
        "line_intensity": np.nan, "line_verified": False, "wavelength_fit": np.nan,
        "residual_px": np.nan, "residual_nm": np.nan, "residual_kms": np.nan, "sigma_px": np.nan,
    })
    return Solution(status=Status.FAILED, reasons=tuple(reasons), medium=profile.medium, model=None,
                    lines=lines, statistics={"n_peaks": int(len(table)), "n_used": 0},
                    frame=str(frame.path) if frame.path else None, profile=profile.name,
                    lamps=tuple(lamps), dispersion_axis=profile.detector.dispersion_axis,
                    software_version=__version__)
