"""From an identification to a confirmed fit: iterate association and fit, confirm, assess.

The identification (:mod:`wavecal.match`) pairs peaks with listed lines under a rough model.
:func:`refine_fit` makes that the physical fit of the solution:

1. the uncertainties going into the fit: each peak centre's, widened for blends and poor
   profile fits (:func:`centre_sigma`), and each listed feature's (:func:`line_sigma`);
2. fit and re-associate until the pairs no longer change (crowded pairs fitted with their
   wavelength uncertainty widened by a tenth of the line width);
3. drop, one at a time, used lines that the other lines do not confirm (leave-one-out);
4. the evidence the verdict weighs: the significance of the final pairs against chance, the
   range the solution covers, its propagated uncertainty and its stability there
   (:class:`Evidence`).
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .features import ResolvedLines
from .fit import PHYSICAL_PARAMETERS, FitResult, fit_lines, next_degree_model, wavelength_sigma
from .match import (Association, Hypothesis, associate, blend_distance_px,
                    chance_log10_probability, coincidence_probabilities)
from .model_setup import PriorBox
from .optics import GratingModel
from .peaks import PeakFlag

__all__ = ["refine_fit", "Refinement", "Evidence", "centre_sigma", "line_sigma", "CONFIRM_PX",
           "BLEND_CENTRE_FRACTION", "ANCHOR_SIGMA_PX", "LINE_UNCERTAINTY_VERIFIED_NM",
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

#: Wavelength uncertainty given to line-list values checked against NIST (nm).
LINE_UNCERTAINTY_VERIFIED_NM = 0.0005
#: Wavelength uncertainty given to line-list values from memory (nm).
LINE_UNCERTAINTY_UNVERIFIED_NM = 0.002


@dataclass(frozen=True)
class Evidence:
    """Uncertainty and stability of a solution between the outermost lines used.

    Attributes
    ----------
    max_sigma_px, max_sigma_at_px : float
        Largest propagated 1-sigma uncertainty (pixels; on a long slit including that of the
        shift along the slit) and where it is.
    leave_one_out_px, leave_one_out_at_px : float
        Largest move of the solution when one line is left out, and that line's position.
    leave_pair_out_px : float
        Largest move of the solution when two neighbouring lines are left out together.
    leave_pair_out_at_px : tuple of float
        Those two lines' positions.
    distortion_move_px : float
        Largest move of the solution when the camera distortion gains its next degree
        (:func:`~wavecal.fit.next_degree_model`; 0 when no larger model can be fitted).
    largest_gap_fraction : float
        Largest stretch without a used line, as a fraction of the detector.
    """

    max_sigma_px: float = math.nan
    max_sigma_at_px: float = math.nan
    leave_one_out_px: float = math.nan
    leave_one_out_at_px: float = math.nan
    leave_pair_out_px: float = 0.0
    leave_pair_out_at_px: tuple[float, float] = (math.nan, math.nan)
    distortion_move_px: float = 0.0
    largest_gap_fraction: float = 1.0


@dataclass(frozen=True)
class Refinement:
    """A confirmed fit of identified lines and the evidence about it.

    Attributes
    ----------
    fit : FitResult
        The final fit, over the pairs ``pairs`` (``fit.used`` marks those kept).
    pairs : Association
        The association the fit was made on (peak and line indices, crowded pairs).
    tolerance_px : float
        That association's tolerance.
    unconfirmed : ndarray of bool
        Pairs dropped because the other lines did not confirm them.
    x, x_err : ndarray
        Every detected peak's centre and its uncertainty in the fit (pixels).
    wavelength_nm, wavelength_err_nm : ndarray
        Every listed feature's wavelength and uncertainty.
    log10_chance : float
        Chance probability of the final pairs (:func:`wavecal.match.chance_log10_probability`).
    prior_shifts : dict
        Shift of each physical parameter from its nominal value, in prior half-widths.
    anchors_px : ndarray
        Positions of the used lines that mark the ends of the covered range (those known to
        :data:`ANCHOR_SIGMA_PX`, else all used ones).
    evidence : Evidence
    """

    fit: FitResult
    pairs: Association
    tolerance_px: float
    unconfirmed: np.ndarray
    x: np.ndarray
    x_err: np.ndarray
    wavelength_nm: np.ndarray
    wavelength_err_nm: np.ndarray
    log10_chance: float
    prior_shifts: dict[str, float]
    anchors_px: np.ndarray
    evidence: Evidence

    @property
    def covered_range_px(self) -> tuple[float, float]:
        """Lowest and highest anchoring line (NaN without any)."""
        if not self.anchors_px.size:
            return (math.nan, math.nan)
        return (float(self.anchors_px.min()), float(self.anchors_px.max()))


def refine_fit(best: Hypothesis, box: PriorBox, table: pd.DataFrame, features: ResolvedLines,
               fwhm: float, *, min_lines: int, free_grooves: bool = False,
               extra_sigma_px: Callable[[np.ndarray], np.ndarray] | None = None
               ) -> Refinement | None:
    """Iterate association and fit to convergence, confirm the lines, gather the evidence.

    Parameters
    ----------
    best : Hypothesis
        The identification's best hypothesis (model and tolerance).
    box : PriorBox
        Priors on the physical parameters.
    table : pandas.DataFrame
        The detected peaks (``x``, ``x_err``, ``fwhm``, ``flags``).
    features : ResolvedLines
        The listed features at the frame's resolution.
    fwhm : float
        Typical line width (pixels).
    min_lines : int
        No line is dropped as unconfirmed from a fit that uses this many lines or fewer (the
        calibration's :data:`~wavecal.calibrate.KEEP_ALL_LINES_UP_TO`).
    free_grooves : bool
        Also fit the groove density.
    extra_sigma_px : callable, optional
        Uncertainty (pixels) to add in quadrature to the solution's at given reference-row
        positions (a long slit's shift model); part of :attr:`Evidence.max_sigma_px`.

    Returns
    -------
    Refinement or None
        None when fewer than three lines stay identified.
    """
    lines = features.lines
    x = table["x"].to_numpy(float)
    x_err = centre_sigma(table, fwhm)
    lam = lines.wavelength_nm
    lam_err = line_sigma(features)
    start = associate(best.model, x, lam, best.tolerance_px,
                      blend_px=blend_distance_px(fwhm), intensity=lines.intensity)
    fit, fitted, tolerance = _converge(best.model, box, x, x_err, lam, lam_err, start,
                                       best.tolerance_px, fwhm, free_grooves, lines.intensity)
    if fit is None:
        return None
    pairs_peak, pairs_line = fitted.peak, fitted.line
    pair_lam_err = _crowded_sigma(fit.model, x[pairs_peak], lam_err[pairs_line], fitted.crowded,
                                  fwhm)
    fit, unconfirmed = _confirm(fit, box, x[pairs_peak], x_err[pairs_peak], lam[pairs_line],
                                pair_lam_err, free_grooves, min_lines)
    model = fit.model
    # the window that chance coincidences would have had to hit: the association tolerance, or
    # four times the residual RMS when the lines sit much closer than that (never below 0.1 px)
    window = float(np.clip(4.0 * fit.rms_px, _MIN_CHANCE_WINDOW_PX, tolerance))
    log10_chance = chance_log10_probability(
        len(pairs_peak), coincidence_probabilities(model, x, lam, window),
        n_free=2 + max(fit.distortion_degree - 2, 0))
    priors = box.as_dict()
    shifts = {n: (getattr(model, n) - priors[n][0]) / priors[n][1] for n in PHYSICAL_PARAMETERS}
    # the range the solution covers: between the outermost used lines precise enough to hold
    # it there (a line known only to a pixel or two at the end of the range vouches for nothing)
    anchoring = fit.used & (fit.sigma_px <= ANCHOR_SIGMA_PX)
    anchors = x[pairs_peak[anchoring]] if np.any(anchoring) else x[pairs_peak[fit.used]]
    return Refinement(fit=fit, pairs=fitted, tolerance_px=tolerance, unconfirmed=unconfirmed,
                      x=x, x_err=x_err, wavelength_nm=lam, wavelength_err_nm=lam_err,
                      log10_chance=log10_chance, prior_shifts=shifts, anchors_px=anchors,
                      evidence=_evidence(fit, anchors, extra_sigma_px,
                                         next_degree_model(fit, box, lam[pairs_line],
                                                           free_grooves=free_grooves)))


def line_sigma(features: ResolvedLines) -> np.ndarray:
    """Wavelength uncertainty of each feature: the list's own, and that of a merged centre."""
    listed = np.where(features.lines.verified, LINE_UNCERTAINTY_VERIFIED_NM,
                      LINE_UNCERTAINTY_UNVERIFIED_NM)
    return np.hypot(listed, features.sigma_nm)


def centre_sigma(table: pd.DataFrame, fwhm: float) -> np.ndarray:
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


def _confirm(fit: FitResult, box, x, x_err, lam, lam_err, free_grooves, min_lines):
    """Drop, one at a time, used lines that the other lines do not confirm.

    A line is confirmed when its leave-one-out residual is within
    max(:data:`CONFIRM_PX`, 5 σ √χ²_red); an unconfirmed line (typically alone beyond a gap,
    where the model bends to whatever it is paired with) leaves the fit, so that the range
    covered by the solution only spans confirmed lines. A fit of ``min_lines`` lines or fewer
    keeps them all.
    """
    unconfirmed = np.zeros(x.size, bool)
    for _ in range(_MAX_UNCONFIRMED):
        sigma = np.hypot(x_err, lam_err / np.abs(fit.model.dispersion(x)))
        limit = np.maximum(CONFIRM_PX, 5.0 * sigma * np.sqrt(max(fit.reduced_chi2, 1.0)))
        ratio = np.abs(fit.leave_one_out_px) / limit
        ratio[~fit.used | ~np.isfinite(ratio)] = 0.0
        worst = int(np.argmax(ratio))
        if ratio[worst] <= 1.0 or fit.n_used <= min_lines:
            break
        unconfirmed[worst] = True
        fit = fit_lines(fit.model, box, x, x_err, lam, lam_err, fit_mask=~unconfirmed,
                        free_grooves=free_grooves)
    return fit, unconfirmed


def _evidence(fit: FitResult, used_x: np.ndarray,
              extra_sigma_px: Callable[[np.ndarray], np.ndarray] | None,
              larger: GratingModel | None) -> Evidence:
    """Uncertainty and stability of the solution between the outermost lines used; on a long
    slit the uncertainty includes ``extra_sigma_px`` (that of the shift along the slit);
    ``larger`` is the model with the next distortion degree (None: none)."""
    model = fit.model
    if used_x.size == 0:
        return Evidence()
    grid = np.linspace(used_x.min(), used_x.max(), 65)
    sigma_px = wavelength_sigma(model, fit.names, fit.covariance, grid) / np.abs(model.dispersion(grid))
    if extra_sigma_px is not None:
        sigma_px = np.hypot(sigma_px, extra_sigma_px(grid))
    shift = fit.leave_one_out_shift_px(grid)
    worst = int(np.nanargmax(np.where(np.isfinite(shift), shift, -1.0)))
    top = int(np.nanargmax(np.where(np.isfinite(sigma_px), sigma_px, -1.0)))
    gaps = np.diff(np.sort(used_x)) / max(model.n_pixels - 1, 1)
    pair_shift, pairs = fit.leave_pair_out_shift_px(grid)
    pair = int(np.argmax(pair_shift)) if pair_shift.size else None
    moved = (0.0 if larger is None else
             float(np.max(np.abs(larger.wavelength(grid) - model.wavelength(grid))
                          / np.abs(model.dispersion(grid)))))
    return Evidence(max_sigma_px=float(sigma_px[top]), max_sigma_at_px=float(grid[top]),
                    leave_one_out_px=float(shift[worst]),
                    leave_one_out_at_px=float(fit.x[worst]),
                    leave_pair_out_px=0.0 if pair is None else float(pair_shift[pair]),
                    leave_pair_out_at_px=((math.nan, math.nan) if pair is None else
                                          tuple(float(v) for v in fit.x[pairs[pair]])),
                    distortion_move_px=moved,
                    largest_gap_fraction=float(gaps.max(initial=0.0)))
