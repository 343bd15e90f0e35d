"""The verdict on a solution: ``ok``, ``suspect`` or ``failed``, with reasons in plain words.

A wrong solution must never be ``ok``, so every rule errs towards doubt. The thresholds are
module constants so that they are visible, documented in the README and tested.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Verdict", "judge", "VerdictInputs", "MIN_LINES_FAILED", "MIN_LINES_OK",
           "MIN_COVERAGE_OK", "MAX_GAP_OK", "MAX_REDCHI_OK", "MAX_RMS_PX_OK",
           "SIGNIFICANCE_MARGIN_FAILED", "SIGNIFICANCE_MARGIN_OK", "MAX_PRIOR_SHIFT_OK",
           "MAX_SIGMA_PX_OK"]

#: Fewer lines used than this: no solution.
MIN_LINES_FAILED = 5
#: Fewer lines used than this: at best suspect.
MIN_LINES_OK = 8
#: Fraction of the detector spanned by the lines used, below which the solution is suspect.
MIN_COVERAGE_OK = 0.5
#: Largest gap between used lines, as a fraction of the detector, above which it is suspect.
MAX_GAP_OK = 0.4
#: Reduced chi-square above which the residuals are too large for the centre uncertainties.
MAX_REDCHI_OK = 9.0
#: RMS (pixels) above which the solution is suspect whatever the uncertainties say.
MAX_RMS_PX_OK = 0.25
#: log10 chance probability must be below -(log10 trials + margin) for a solution at all ...
SIGNIFICANCE_MARGIN_FAILED = 2.0
#: ... and below -(log10 trials + this margin) for an ``ok``.
SIGNIFICANCE_MARGIN_OK = 6.0
#: Largest 1-sigma uncertainty (pixels) of the solution within the lines' range for an ``ok``:
#: three times it stays below a quarter of a pixel.
MAX_SIGMA_PX_OK = 0.08
#: Shift of a physical parameter from its nominal value, in prior half-widths, that is suspect.
MAX_PRIOR_SHIFT_OK = 3.0


@dataclass(frozen=True)
class VerdictInputs:
    """Facts the verdict is based on."""

    n_used: int
    used_x: np.ndarray
    n_pixels: int
    rms_px: float
    redchi: float
    log10_chance: float
    log10_trials: float
    ambiguous: bool
    runner_up_matches: int
    best_matches: int
    prior_shifts: dict[str, float]
    fit_success: bool
    max_sigma_px: float = 0.0
    effective_geometry: bool = False


@dataclass(frozen=True)
class Verdict:
    """Status and the reasons behind it."""

    status: str
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
    if facts.n_used < MIN_LINES_FAILED:
        failed.append(f"too few lines identified ({facts.n_used}; at least {MIN_LINES_FAILED} needed)")
    if facts.log10_chance > threshold_failed:
        failed.append("the identification is no better than chance coincidences with the line list "
                      f"(chance probability 10^{facts.log10_chance:.1f})")
    if not facts.fit_success:
        failed.append("the fit did not converge")
    if failed:
        return Verdict("failed", tuple(failed))

    if facts.n_used < MIN_LINES_OK:
        doubts.append(f"few lines used ({facts.n_used}; {MIN_LINES_OK} or more wanted)")
    if facts.ambiguous:
        doubts.append("ambiguous identification: another solution explains "
                      f"{facts.runner_up_matches} peaks against {facts.best_matches}")
    if facts.log10_chance > threshold_ok:
        doubts.append("identification only marginally better than chance "
                      f"(chance probability 10^{facts.log10_chance:.1f})")
    span = np.sort(np.asarray(facts.used_x, float))
    n = max(facts.n_pixels - 1, 1)
    coverage = (span[-1] - span[0]) / n if span.size else 0.0
    gaps = np.diff(np.r_[0.0, span, n]) / n if span.size else np.array([1.0])
    if coverage < MIN_COVERAGE_OK:
        doubts.append(f"poor coverage: lines span only {coverage:.0%} of the detector")
    elif gaps.max() > MAX_GAP_OK:
        doubts.append(f"poor coverage: a gap of {gaps.max():.0%} of the detector has no line")
    if facts.rms_px > MAX_RMS_PX_OK:
        doubts.append(f"high RMS residual ({facts.rms_px:.3f} px)")
    if facts.max_sigma_px > MAX_SIGMA_PX_OK:
        doubts.append(f"the solution is uncertain by up to {facts.max_sigma_px:.2f} px (1 sigma) "
                      "within the range of the lines")
    if facts.redchi > MAX_REDCHI_OK:
        doubts.append(f"residuals {np.sqrt(facts.redchi):.1f}x larger than the centre "
                      "uncertainties explain (reduced chi-square "
                      f"{facts.redchi:.1f})")
    if not facts.effective_geometry:
        for name, shift in facts.prior_shifts.items():
            if abs(shift) > MAX_PRIOR_SHIFT_OK:
                doubts.append(f"{name.replace('_', ' ')} moved {abs(shift):.1f} prior widths from "
                              "its nominal value: the instrument or its header may be off")
    return Verdict("suspect" if doubts else "ok", tuple(doubts))
