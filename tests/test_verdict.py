"""The verdict's rules, each pinned on both sides of its threshold.

Every case uses literal numbers, never the module's constants, so that moving any threshold by a
factor of ten either way turns at least one case around: the last test makes those mutations
and checks it. The rules themselves are the project's policy (README, "The verdict"); the
significance test's arithmetic is checked in test_match.py.
"""
import dataclasses

import pytest

from wavecal import match, verdict
from wavecal.match import Hypothesis, Identification
from wavecal.verdict import VerdictInputs, judge

#: A solution every rule accepts: 40 lines determining 4 quantities, chance 10^-20 after 10^4 trials, 0.02 px (1 sigma),
#: 0.02 px excess scatter on 3 px lines, 0.05 px leave-one-out move, parameters near nominal.
GOOD = VerdictInputs(n_used=40, n_determined=4.0, log10_chance=-20.0, log10_trials=4.0, fit_success=True,
                     max_sigma_px=0.02, scatter_px=0.02, fwhm_px=3.0, leave_one_out_px=0.05,
                     max_sigma_at_px=100.0, leave_one_out_at_px=200.0,
                     prior_shifts={"grating_angle_deg": 0.5})

#: (changes to GOOD, expected status)
CASES = [
    ({}, "ok"),
    ({"n_used": 4}, "failed"),   # no line beyond the 4 quantities determined: nothing to check
    ({"n_used": 4, "n_determined": 3.5}, "failed"),  # half a line beyond them
    ({"n_used": 5}, "ok"),       # one beyond them: a residual that can be tested
    ({"n_used": 7, "n_determined": 4.0}, "ok"),  # three beyond them
    ({"n_used": 4, "n_determined": 2.5}, "ok"),  # a tight prior determines more of the model
    ({"n_determined": float("nan")}, "failed"),  # unknown: no claim that anything is left
    ({"log10_chance": -5.0}, "failed"),   # not 2 decades beyond the 10^4 trials
    ({"log10_chance": -7.0}, "suspect"),  # beyond 2 but not 6 decades
    ({"log10_chance": -9.0}, "suspect"),
    ({"log10_chance": -11.0}, "ok"),      # beyond 6 decades
    ({"max_sigma_px": 0.04}, "ok"),
    ({"max_sigma_px": 0.16}, "suspect"),
    ({"scatter_px": 0.15}, "ok"),         # 0.05 of the 3 px line width
    ({"scatter_px": 0.6}, "suspect"),     # 0.2 of it
    ({"leave_one_out_px": 0.1}, "ok"),
    ({"leave_one_out_px": 0.5}, "suspect"),
    # an effective geometry has no physics to hold the model's shape: two neighbouring lines
    # that only confirm each other are doubtful; a known geometry's physics confirms them
    ({"leave_pair_out_px": 0.1, "effective_geometry": True}, "ok"),
    ({"leave_pair_out_px": 0.5, "effective_geometry": True}, "suspect"),
    ({"leave_pair_out_px": float("inf"), "effective_geometry": True}, "suspect"),
    ({"leave_pair_out_px": 0.5}, "ok"),
    ({"distortion_move_px": 0.04}, "ok"),
    ({"distortion_move_px": 0.16}, "suspect"),  # a distortion the lines cannot pin down
    ({"slit_move_px": 0.04}, "ok"),
    ({"slit_move_px": 0.16}, "suspect"),        # nor the shape of the shift along the slit
    ({"untraced_slit_rows": 300}, "suspect"),   # a tall slit whose lines were not followed
    ({"prior_shifts": {"tilt_deg": 1.5}}, "ok"),
    ({"prior_shifts": {"tilt_deg": 6.0}}, "suspect"),
    ({"prior_shifts": {"tilt_deg": 6.0}, "effective_geometry": True}, "ok"),
    ({"fit_success": False}, "failed"),
    ({"ambiguous": True, "rival_log10_chance": -19.0}, "suspect"),
    # line counts and coverage are not grounds: six lines with a wide gap, judged on evidence
    ({"n_used": 7, "largest_gap_fraction": 0.8}, "ok"),
]

#: (best, rival log10 chance, ambiguous?)
AMBIGUITY = [
    (-5.0, -4.0, True),     # within 2 decades
    (-5.0, -1.0, False),    # 4 decades apart, and a fifth of 5 is less than 2
    (-30.0, -26.0, True),   # 4 decades apart, but within a fifth of 30
    (-30.0, -20.0, False),  # 10 decades apart
]

THRESHOLDS = [(verdict, name) for name in (
    "MIN_SPARE_LINES_FAILED", "SIGNIFICANCE_MARGIN_FAILED", "SIGNIFICANCE_MARGIN_OK", "MAX_SIGMA_PX_OK",
    "MAX_SCATTER_FWHM_OK", "MAX_LEAVE_ONE_OUT_PX_OK", "MAX_MODEL_MOVE_PX_OK",
    "MAX_PRIOR_SHIFT_OK")] + [
    (match, "AMBIGUITY_DECADES"), (match, "AMBIGUITY_FRACTION")]


def _identification(best: float, rival: float) -> Identification:
    def hypothesis(log10_chance):
        return Hypothesis(model=None, association=None, tolerance_px=1.0,
                          log10_chance=log10_chance)
    return Identification(hypothesis(best), hypothesis(rival), 2, 4.0)


def _mismatches() -> int:
    wrong = sum(judge(dataclasses.replace(GOOD, **changes)).status != status
                for changes, status in CASES)
    return wrong + sum(_identification(b, r).ambiguous is not a for b, r, a in AMBIGUITY)


@pytest.mark.parametrize("changes, status", CASES)
def test_rule(changes, status):
    assert judge(dataclasses.replace(GOOD, **changes)).status == status


@pytest.mark.parametrize("best, rival, ambiguous", AMBIGUITY)
def test_ambiguity_is_measured_in_decades_of_chance(best, rival, ambiguous):
    assert _identification(best, rival).ambiguous is ambiguous


def test_reasons_give_their_numbers():
    reasons = judge(dataclasses.replace(GOOD, max_sigma_px=0.31, max_sigma_at_px=1234.0,
                                        largest_gap_fraction=0.45, leave_one_out_px=0.7,
                                        leave_one_out_at_px=1500.0)).reasons
    assert reasons == (
        "the solution is uncertain by up to 0.31 px (1 sigma; 0.08 allowed) near pixel 1234; "
        "the largest stretch without a line is 45% of the detector",
        "leaving out the line at pixel 1500 moves the solution by 0.70 px: it rests on that "
        "one line; the largest stretch without a line is 45% of the detector")


def test_model_and_slit_reasons_give_their_numbers():
    reasons = judge(dataclasses.replace(GOOD, leave_pair_out_px=1.234, effective_geometry=True,
                                        leave_pair_out_at_px=(52.9, 135.8),
                                        distortion_move_px=0.21, slit_move_px=0.45,
                                        untraced_slit_rows=879)).reasons
    assert reasons == (
        "leaving out the neighbouring lines at pixels 53 and 136 together moves the solution "
        "by 1.23 px: it rests on those two lines, which only confirm each other",
        "one more term of the camera distortion moves the solution by 0.21 px (0.125 allowed): "
        "the lines do not pin down its shape",
        "one more term of the slit model moves the shift along the slit by 0.45 px (0.125 "
        "allowed): the lines followed along the slit do not pin down its shape",
        "the lines could not be followed along the 879 summed rows of the slit: how the "
        "solution changes along it is not measured")


@pytest.mark.parametrize("module, name", THRESHOLDS, ids=[n for _, n in THRESHOLDS])
@pytest.mark.parametrize("factor", [10.0, 0.1])
def test_every_threshold_is_pinned(monkeypatch, module, name, factor):
    assert _mismatches() == 0
    monkeypatch.setattr(module, name, getattr(module, name) * factor)
    assert _mismatches() > 0, f"{name} x {factor} goes unnoticed"
