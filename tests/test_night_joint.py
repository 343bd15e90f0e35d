"""The joint fit of one configuration's arcs (wavecal.night.joint).

Check values come from the truth the lines were made from (invented Tamsin Hill instrument) and
from statistical facts:
- the Fisher information of independent data sets adds, so for n identical arcs the error of a
  shared parameter falls as 1/sqrt(n) when its prior is negligible (common practice: maximum
  likelihood; the per-arc nuisance parameters are marginalised arc by arc, which removes the same
  information from every arc);
- a measured quantity with a correct Gaussian sigma lies within 3 sigma of the truth with
  probability 99.7 % (common practice); the noise is seeded, so each check is repeatable;
- a straight-line fit is unchanged by an affine change of its abscissa: its slope scales by the
  inverse factor (common practice);
- to first order the uncertainty of the pixel of a fixed wavelength is that of the wavelength at
  that pixel divided by the dispersion (common practice: linear error propagation).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from astropy.time import Time

from wavecal.calibrate import calibrate_frame
from wavecal.fit import wavelength_sigma
from wavecal.model_setup import nominal_model, prior_box
from wavecal.night.joint import FALSE_ALARM, joint_fit
from wavecal.night.synthetic import make_night, night_profile
from wavecal.solution import Solution

PROFILE = night_profile()
NOMINAL = nominal_model(PROFILE, grating_angle_deg=5.35)
BOX = prior_box(PROFILE, NOMINAL)
TRUTH = NOMINAL.with_parameters(grating_angle_deg=5.6, focal_length_mm=255.9, tilt_deg=-1.1,
                                distortion=(0.0, 0.0, 0.0, 0.11))
SIGMA_PX = 0.02


def arc_solution(truth, *, noise: np.random.Generator | None = None, n_lines: int = 22,
                 frame: str = "arc") -> Solution:
    """A Solution whose used lines lie where ``truth`` puts them (plus seeded noise), started
    from a model off the truth, as a single-arc fit would hand it over."""
    x_true = np.linspace(40.0, truth.n_pixels - 40.0, n_lines)
    lam = truth.wavelength(x_true)
    x = x_true + (0.0 if noise is None else noise.normal(0.0, SIGMA_PX, n_lines))
    lines = pd.DataFrame({"x": x, "line_wavelength": lam, "sigma_px": SIGMA_PX,
                          "identification": "used"})
    start = truth.with_parameters(axis_pixel=truth.axis_pixel + 0.7,
                                  focal_length_mm=truth.focal_length_mm * 1.001)
    return Solution(status="ok", reasons=(), medium="air", model=start, lines=lines, frame=frame)


def test_shared_error_falls_as_one_over_sqrt_n_for_identical_arcs():
    errors = {}
    for n in (2, 4, 8):
        result = joint_fit([arc_solution(TRUTH) for _ in range(n)], BOX)
        assert result.joined == tuple(range(n))
        errors[n] = dict(zip(result.shared_names, result.shared_errors))
        single = dict(zip(result.shared_names, result.single_errors))
    focal_single = single["focal_length_mm"]
    for n in (2, 4, 8):
        # the prior (7.5 mm) carries 1e-5 of the information the lines give (0.03 mm)
        assert errors[n]["focal_length_mm"] == pytest.approx(focal_single / np.sqrt(n), rel=0.02)
    assert errors[8]["distortion_3"] == pytest.approx(errors[2]["distortion_3"] / 2, rel=0.02)


def drifting_night(seed: int, shifts_px, *, stretched: int | None = None):
    rng = np.random.default_rng(seed)
    truths, sols = [], []
    for i, shift in enumerate(shifts_px):
        truth = TRUTH.with_parameters(axis_pixel=TRUTH.axis_pixel + shift,
                                      grating_angle_deg=TRUTH.grating_angle_deg - 0.001 * i)
        if i == stretched:  # lines that follow another focal length, as a wrong stretch would
            truth = truth.with_parameters(focal_length_mm=truth.focal_length_mm * 1.01)
        truths.append(truth)
        sols.append(arc_solution(truth, noise=rng, frame=f"arc{i}"))
    return truths, sols


def test_drifted_arcs_recover_their_shift_and_the_drift_rate():
    hours = np.arange(6.0)
    truths, sols = drifting_night(1, 0.8 * hours)
    times = 60000.0 + hours / 24.0
    result = joint_fit(sols, BOX, times=times, temperatures=12.0 - 0.5 * hours)
    assert not result.left_out
    xc = 0.5 * (NOMINAL.n_pixels - 1)
    for truth, arc in zip(truths, result.arcs):
        true_shift = truth.pixel(result.reference_wavelength_nm) - xc
        assert abs(arc.shift_px - true_shift) < 3 * arc.shift_sigma_px
        assert arc.shift_sigma_px < 0.05  # a drift measured, not a prior restated (20 px)
        x = arc.model.pixel(result.reference_wavelength_nm)
        sigma = wavelength_sigma(arc.model, arc.names, arc.covariance, x) / abs(
            arc.model.dispersion(x))
        assert arc.shift_sigma_px == pytest.approx(sigma, rel=0.01)
    true_rate = (truths[-1].pixel(result.reference_wavelength_nm)
                 - truths[0].pixel(result.reference_wavelength_nm)) / hours[-1]
    drift = result.drift_time
    assert abs(drift.slope - true_rate) < 3 * drift.slope_sigma
    assert result.drift_temperature.slope == pytest.approx(-2.0 * drift.slope, rel=1e-9)
    assert result.drift_temperature.slope_sigma == pytest.approx(2.0 * drift.slope_sigma, rel=1e-9)


def test_joint_models_are_closer_to_the_truth_than_single_fits():
    truths, sols = drifting_night(2, [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0])
    result = joint_fit(sols, BOX)
    x = np.linspace(40.0, NOMINAL.n_pixels - 40.0, 300)
    worst_joint = max(np.max(np.abs(a.model.pixel(t.wavelength(x)) - x))
                      for a, t in zip(result.arcs, truths))
    singles = [joint_fit([s, s], BOX) for s in sols]  # one arc twice: its own fit, exactly
    worst_single = max(np.max(np.abs(r.arcs[0].model.pixel(t.wavelength(x)) - x))
                       for r, t in zip(singles, truths))
    assert worst_joint < worst_single
    for name, joint_error, single_error in zip(result.shared_names, result.shared_errors,
                                               result.single_errors):
        assert joint_error < single_error / 2, name  # 8 arcs: sqrt(8) = 2.8 expected


def test_an_arc_that_disagrees_is_left_out_with_its_numbers():
    truths, sols = drifting_night(3, 0.8 * np.arange(6.0), stretched=4)
    result = joint_fit(sols, BOX)
    assert result.joined == (0, 1, 2, 3, 5)
    (out,) = result.left_out
    assert out.index == 4 and out.frame == "arc4"
    assert out.p_value < out.threshold == pytest.approx(FALSE_ALARM / 6)
    assert f"{out.f_statistic:.3g}" in out.reason
    assert result.arcs[4].model is sols[4].model  # keeps its single-arc solution
    assert not result.arcs[4].in_joint and np.isnan(result.arcs[4].shift_px)


def test_agreeing_noisy_arcs_are_all_kept_and_their_f_statistic_is_f_distributed():
    f_values = []
    for seed in range(10, 20):
        _, sols = drifting_night(seed, 0.8 * np.arange(8.0))
        result = joint_fit(sols, BOX)
        assert result.joined == tuple(range(8))
        f_values += [arc.f_statistic for arc in result.arcs]
    # Agreeing arcs: F follows F(q, nu), here about F(1.8, 18) (effective parameters), whose
    # mean is 1.13 and sd 1.34 (common practice: the F distribution's moments; scipy.stats.f);
    # the floor of the arc's own reduced chi-square at 1 lowers the mean by about a tenth. The
    # mean of 80 values lies within 3 sd / sqrt(80) of 1.
    margin = 3 * 1.34 / np.sqrt(80)
    assert abs(np.mean(f_values) - 1.0) < margin


def test_arcs_that_cannot_enter_are_named():
    _, sols = drifting_night(5, [0.0, 1.0, 2.0])
    failed = Solution(status="failed", reasons=("no lines",), medium="air", model=None,
                      lines=sols[0].lines.iloc[:0], frame="dark")
    few = arc_solution(TRUTH, n_lines=4, frame="few")
    result = joint_fit([*sols, failed, few], BOX)
    assert result.joined == (0, 1, 2)
    reasons = {o.frame: o.reason for o in result.left_out}
    assert reasons["dark"] == "no solution"
    assert reasons["few"].startswith("4 lines used")
    alone = joint_fit([sols[0], failed], BOX)
    assert alone.joined == () and np.all(np.isnan(alone.shared_values))
    assert {o.frame for o in alone.left_out} == {"arc0", "dark"}


def test_inputs_of_another_configuration_or_wrong_length_are_refused():
    _, sols = drifting_night(6, [0.0, 1.0])
    other = arc_solution(TRUTH.with_parameters(order=2), frame="order2")
    with pytest.raises(ValueError, match="not of one configuration"):
        joint_fit([*sols, other], BOX)
    with pytest.raises(ValueError, match="times has 1 values for 2 solutions"):
        joint_fit(sols, BOX, times=[60000.0])


def test_no_drift_line_without_two_distinct_finite_values():
    _, sols = drifting_night(7, [0.0, 1.0, 2.0])
    assert joint_fit(sols, BOX).drift_time is None
    assert joint_fit(sols, BOX, times=[60000.0, np.nan, np.nan]).drift_time is None
    assert joint_fit(sols, BOX, temperatures=[5.0, 5.0, 5.0]).drift_temperature is None
    line = joint_fit(sols, BOX, times=[60000.0, np.nan, 60000.25]).drift_time
    assert line.dof == 0 and line.origin == 60000.0


def test_calibrated_arcs_of_a_synthetic_night(tmp_path):
    night = make_night(tmp_path, seed=7, n_arcs=3, n_science=0, n_bias=0, n_flats=0,
                       bad_files=False)
    names = [n for n in night.truth if night.configuration[n] == 0]
    runs = [calibrate_frame(tmp_path / n, night.profile, details=True) for n in names]
    times = [Time(night.truth[n].header["DATE-OBS"], scale="utc").mjd for n in names]
    result = joint_fit([r.solution for r in runs], runs[0].box, times=times)
    assert result.joined == (0, 1, 2)
    xc = 0.5 * (night.profile.detector.n_dispersion - 1)
    for name, arc in zip(names, result.arcs):
        truth = night.truth[name].truth
        true_shift = truth.pixel(result.reference_wavelength_nm) - xc
        assert abs(arc.shift_px - true_shift) < 3 * arc.shift_sigma_px
    # make_night's default drift, 0.8 px per hour
    assert abs(result.drift_time.slope - 0.8) < 3 * result.drift_time.slope_sigma
