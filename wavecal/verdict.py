"""The verdict on a solution: ``ok``, ``suspect`` or ``failed``, from the evidence, in plain words.

Whether a solution can be trusted follows from what the data show, not from how many lines it
has or how much of the detector they cover:

0. **Something left to check.** The lines used must outnumber the quantities they determine
   (the trace of the fit's hat matrix, priors included) by :data:`MIN_SPARE_LINES_FAILED`. A
   tight prior (a previous solution of the same setting) determines most of the model, so a
   handful of lines can then be checked; a blind fit needs more.
1. **Significance.** The identification must be far less likely to arise from chance
   coincidences with the line list than one in the number of hypotheses searched.
2. **Uncertainty.** The solution's propagated 1-sigma uncertainty, everywhere between the
   outermost lines used, must be small (a wide gap between lines matters through this number).
3. **Residuals.** The scatter of the residuals beyond what the centre uncertainties explain
   must be small against the line width: misidentified or unresolved lines show up there.
4. **Stability.** Leaving out any single line and refitting must not move the solution by
   more than a small fraction of a pixel anywhere in that range (a lone line beyond a gap shows
   up there). For an effective geometry, whose shape no physics holds, the same goes for any
   two neighbouring lines left out together: two wrong lines can bend it and confirm each
   other.
5. **The model's shape.** The camera distortion and the slit model each take the simplest
   form the residuals ask for, and their covariances hold only given that choice. Giving
   either one more term must not move the solution by more than an eighth of a pixel (a
   distortion that sparse lines cannot detect shows up there). A slit of many rows whose lines
   could not be followed along it is doubtful: how the solution changes along it is unknown.

A wrong solution must never be ``ok``, so every rule errs towards doubt. The thresholds are
module constants so that they are visible, documented in the README and tested.
"""
from __future__ import annotations

from dataclasses import dataclass, field


from .status import Status

__all__ = ["Verdict", "judge", "VerdictInputs", "MIN_SPARE_LINES_FAILED", "SIGNIFICANCE_MARGIN_FAILED",
           "SIGNIFICANCE_MARGIN_OK", "MAX_SIGMA_PX_OK", "MAX_SCATTER_FWHM_OK",
           "MAX_LEAVE_ONE_OUT_PX_OK", "MAX_MODEL_MOVE_PX_OK", "MAX_PRIOR_SHIFT_OK"]

#: Lines used minus the number of quantities the data determine (sum of the lines' leverages)
#: below this: nothing is left to check the model with. One: the fewest residuals beyond the
#: determined quantities whose agreement can be tested at all (a chi-square of one degree of
#: freedom); for a blind fit of the four physical parameters this is the former fixed count of
#: five lines.
MIN_SPARE_LINES_FAILED = 1.0
#: log10 chance probability must be below -(log10 trials + margin) for a solution at all ...
SIGNIFICANCE_MARGIN_FAILED = 2.0
#: ... and below -(log10 trials + this margin) for an ``ok``.
SIGNIFICANCE_MARGIN_OK = 6.0
#: Largest 1-sigma uncertainty (pixels) of the solution within the lines' range for an ``ok``:
#: three times it stays below a quarter of a pixel.
MAX_SIGMA_PX_OK = 0.08
#: Largest scatter of the residuals beyond the centre uncertainties, as a fraction of the line
#: width (FWHM), for an ``ok``: a misidentified line or an unresolved companion moves a centre
#: by a sizeable fraction of the width.
MAX_SCATTER_FWHM_OK = 0.1
#: Largest move (pixels) of the solution within the lines' range when any one line (for an
#: effective geometry also any two neighbouring lines together) is left out.
MAX_LEAVE_ONE_OUT_PX_OK = 0.25
#: Largest move (pixels) of the solution within the lines' range, or of the shift along the
#: slit over its summed rows, when the camera distortion or the slit model gains one more term.
#: Such a move estimates an error the covariance does not hold (on the 1023 frames of
#: ``tests/benchmarks/campaign.py`` the actual error is about the move, median ratio 1.0), so it
#: is held to half the quarter pixel that a solution may be off.
MAX_MODEL_MOVE_PX_OK = 0.125
#: Shift of a physical parameter from its nominal value, in prior half-widths, that is suspect.
MAX_PRIOR_SHIFT_OK = 3.0


@dataclass(frozen=True)
class VerdictInputs:
    """Facts the verdict is based on.

    Attributes
    ----------
    n_used : int
        Lines in the final fit.
    n_determined : float
        Quantities the data determine: the trace of the fit's hat matrix over the lines used
        (the sum of their leverages; :attr:`wavecal.fit.FitResult.leverage`). NaN when unknown.
    log10_chance, log10_trials : float
        Chance probability of the identification and the number of hypotheses searched.
    rival_log10_chance : float or None
        Chance probability of the best distinct rival identification (None: no rival).
    ambiguous : bool
        The rival is nearly as significant (:attr:`wavecal.match.Identification.ambiguous`).
    fit_success : bool
    max_sigma_px : float
        Largest propagated 1-sigma uncertainty between the outermost lines used (pixels).
    max_sigma_at_px : float
        Where it is.
    scatter_px : float
        Residual scatter beyond the centre uncertainties (:func:`wavecal.fit.excess_scatter`).
    fwhm_px : float
        Typical line width.
    leave_one_out_px : float
        Largest move of the solution when one line is left out.
    leave_one_out_at_px : float
        Position of the line whose absence moves it most.
    leave_pair_out_px : float
        Largest move of the solution when two neighbouring lines are left out together.
    leave_pair_out_at_px : tuple of float
        Positions of those two lines.
    distortion_move_px : float
        Largest move of the solution when the camera distortion gains its next term
        (:func:`wavecal.fit.next_degree_model`).
    slit_move_px : float
        Largest change of the shift along the slit when the slit model gains one more term
        (:attr:`wavecal.slit_shift.SlitShift.degree_move_px`); 0 without a slit model.
    untraced_slit_rows : int
        Summed rows along which the lines could not be followed (0: traced, or too few rows
        to trace).
    largest_gap_fraction : float
        Largest stretch without a used line between the outermost ones, as a fraction of the
        detector (only to explain the uncertainty and stability figures).
    prior_shifts : dict
        Shift of each physical parameter from its nominal value, in prior half-widths.
    effective_geometry : bool
        The geometry is an effective one: its parameters have no nominal values to compare.
    """

    n_used: int
    n_determined: float
    log10_chance: float
    log10_trials: float
    fit_success: bool
    max_sigma_px: float
    scatter_px: float
    fwhm_px: float
    leave_one_out_px: float
    ambiguous: bool = False
    rival_log10_chance: float | None = None
    max_sigma_at_px: float = float("nan")
    leave_one_out_at_px: float = float("nan")
    leave_pair_out_px: float = 0.0
    leave_pair_out_at_px: tuple[float, float] = (float("nan"), float("nan"))
    distortion_move_px: float = 0.0
    slit_move_px: float = 0.0
    untraced_slit_rows: int = 0
    largest_gap_fraction: float = 0.0
    prior_shifts: dict[str, float] = field(default_factory=dict)
    effective_geometry: bool = False


@dataclass(frozen=True)
class Verdict:
    """Status and the reasons behind it."""

    status: Status
    reasons: tuple[str, ...]


def judge(facts: VerdictInputs) -> Verdict:
    """Apply the rules to the facts of one solution.

    Returns
    -------
    Verdict
        ``failed`` when a rule for failure fires, else ``suspect`` when any rule for doubt
        fires, else ``ok``.
    """
    failed: list[str] = []
    doubts: list[str] = []
    threshold_failed = -(facts.log10_trials + SIGNIFICANCE_MARGIN_FAILED)
    threshold_ok = -(facts.log10_trials + SIGNIFICANCE_MARGIN_OK)
    spare = facts.n_used - facts.n_determined
    if not spare >= MIN_SPARE_LINES_FAILED:
        failed.append(f"too few lines identified ({facts.n_used} for the {facts.n_determined:.1f} "
                      f"quantities they determine; at least {MIN_SPARE_LINES_FAILED:g} more "
                      "needed to check them)")
    if facts.log10_chance > threshold_failed:
        failed.append("the identification is no better than chance coincidences with the line list "
                      f"(chance probability 10^{facts.log10_chance:.1f} after "
                      f"10^{facts.log10_trials:.1f} trials)")
    if not facts.fit_success:
        failed.append("the fit did not converge")
    if failed:
        return Verdict(Status.FAILED, tuple(failed))

    if facts.ambiguous and facts.rival_log10_chance is not None:
        doubts.append("ambiguous identification: a different solution is nearly as likely "
                      f"(chance probability 10^{facts.rival_log10_chance:.1f} against "
                      f"10^{facts.log10_chance:.1f})")
    if facts.log10_chance > threshold_ok:
        doubts.append("identification only marginally better than chance "
                      f"(chance probability 10^{facts.log10_chance:.1f} after "
                      f"10^{facts.log10_trials:.1f} trials)")
    gap = (f"; the largest stretch without a line is {facts.largest_gap_fraction:.0%} of the "
           "detector" if facts.largest_gap_fraction > 0.2 else "")
    if not facts.max_sigma_px <= MAX_SIGMA_PX_OK:
        doubts.append(f"the solution is uncertain by up to {facts.max_sigma_px:.2f} px (1 sigma; "
                      f"{MAX_SIGMA_PX_OK} allowed) near pixel {facts.max_sigma_at_px:.0f}{gap}")
    if not facts.scatter_px <= MAX_SCATTER_FWHM_OK * facts.fwhm_px:
        doubts.append(f"the residuals scatter by {facts.scatter_px:.2f} px more than the line "
                      f"centres' uncertainties explain ({facts.scatter_px / facts.fwhm_px:.2f} of "
                      "the line width): misidentified or blended lines are likely")
    if not facts.leave_one_out_px <= MAX_LEAVE_ONE_OUT_PX_OK:
        doubts.append(f"leaving out the line at pixel {facts.leave_one_out_at_px:.0f} moves the "
                      f"solution by {facts.leave_one_out_px:.2f} px: it rests on that one "
                      f"line{gap}")
    if facts.effective_geometry and not facts.leave_pair_out_px <= MAX_LEAVE_ONE_OUT_PX_OK:
        first, second = facts.leave_pair_out_at_px
        doubts.append(f"leaving out the neighbouring lines at pixels {first:.0f} and "
                      f"{second:.0f} together moves the solution by "
                      f"{facts.leave_pair_out_px:.2f} px: it rests on those two lines, which "
                      f"only confirm each other{gap}")
    if not facts.distortion_move_px <= MAX_MODEL_MOVE_PX_OK:
        doubts.append(f"one more term of the camera distortion moves the solution by "
                      f"{facts.distortion_move_px:.2f} px ({MAX_MODEL_MOVE_PX_OK} allowed): the "
                      f"lines do not pin down its shape{gap}")
    if not facts.slit_move_px <= MAX_MODEL_MOVE_PX_OK:
        doubts.append(f"one more term of the slit model moves the shift along the slit by "
                      f"{facts.slit_move_px:.2f} px ({MAX_MODEL_MOVE_PX_OK} allowed): the lines "
                      "followed along the slit do not pin down its shape")
    if facts.untraced_slit_rows > 0:
        doubts.append(f"the lines could not be followed along the {facts.untraced_slit_rows} "
                      "summed rows of the slit: how the solution changes along it is not "
                      "measured")
    if not facts.effective_geometry:
        for name, shift in facts.prior_shifts.items():
            if abs(shift) > MAX_PRIOR_SHIFT_OK:
                doubts.append(f"{name.replace('_', ' ')} moved {abs(shift):.1f} prior widths from "
                              "its nominal value: the instrument or its header may be off")
    return Verdict(Status.SUSPECT if doubts else Status.OK, tuple(doubts))
