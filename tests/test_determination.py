"""What the data determine: posterior widths against prior widths.

Outside checks (statistics, not our own numbers):
- the propagated uncertainty of a quantity must match the spread of refits over independent noise
  draws (Monte Carlo against linear error propagation; common practice);
- in a linear Gaussian problem precisions add, ``1/s_post² = 1/s_prior² + 1/s_data²``, so with
  four times as many equally good lines the data part of the variance falls fourfold;
- a parameter whose prior is far narrower than anything the lines can say keeps the prior's width.
"""
import math

import numpy as np
import pytest

from wavecal.determination import Determined, Determination, what_data_determine
from wavecal.fit import fit_lines
from wavecal.model_setup import PriorBox, nominal_model, prior_box
from wavecal.profile import load_profile


@pytest.fixture(scope="module")
def setting():
    profile = load_profile("tho_longslit")
    nominal = nominal_model(profile, 28.0)
    box = prior_box(profile, nominal)
    truth = nominal.with_parameters(grating_angle_deg=28.2, axis_pixel=nominal.axis_pixel + 3.0)
    return nominal, box, truth


def _lines(truth, n):
    x = np.linspace(40.0, truth.n_pixels - 40.0, n)
    return x, truth.wavelength(x)


def _fit(nominal, box, truth, n, rng, sigma=0.05):
    x, lam = _lines(truth, n)
    observed = x + rng.normal(0.0, sigma, n)
    return fit_lines(nominal, box, observed, np.full(n, sigma), lam, np.full(n, 1e-6),
                     max_distortion_degree=0, clip=1e9)


def _determine(fit, box):
    prior = {name: width for name, (_, width) in box.as_dict().items()}
    return what_data_determine(fit.model, fit.names, fit.covariance, prior)


def _by_name(items):
    return {d.name: d for d in items}


def test_posterior_width_matches_the_error_over_truths_drawn_from_the_prior(setting):
    # a posterior is honest when, over instruments drawn from the prior and noise drawn from the
    # stated uncertainties, the error of the estimate scatters as the posterior width says
    # (simulation-based calibration; common practice in Bayesian statistics)
    nominal, box, _ = setting
    rng = np.random.default_rng(11)
    errors, stated = [], []
    for _ in range(60):
        truth = nominal.with_parameters(**{name: rng.normal(centre, width)
                                           for name, (centre, width) in box.as_dict().items()})
        found = _determine(_fit(nominal, box, truth, 12, rng), box)
        true_values = [c.value for c in _determine_truth(truth, found)]
        errors.append([c.value - v for c, v in zip(found.combinations, true_values)])
        stated.append([c.sigma for c in found.combinations])
    spread = np.std(errors, axis=0, ddof=0)  # about zero mean: the prior is centred on the draws
    # 60 draws estimate a standard deviation to about 9 %: 30 % is over three of those
    for name, observed, width in zip(("centre", "dispersion", "change"), spread,
                                     np.median(stated, axis=0)):
        assert observed == pytest.approx(width, rel=0.3), name


def _determine_truth(truth, found):
    """The combinations evaluated on the true model (same definitions as the fitted ones)."""
    names = tuple(p.name for p in found.parameters)
    return what_data_determine(truth, names, np.eye(len(names)), {}).combinations


def test_four_times_the_lines_halve_the_central_wavelength_uncertainty(setting):
    nominal, box, truth = setting
    rng = np.random.default_rng(12)
    few = _by_name(_determine(_fit(nominal, box, truth, 10, rng), box).combinations)
    many = _by_name(_determine(_fit(nominal, box, truth, 40, rng), box).combinations)
    name = "central_wavelength_nm"
    assert many[name].sigma / few[name].sigma == pytest.approx(0.5, rel=0.15)
    assert few[name].set_by_data and many[name].set_by_data


def test_a_parameter_with_a_tight_prior_is_prior_set(setting):
    nominal, _, truth = setting
    loose = prior_box(load_profile("tho_longslit"), nominal)
    tight = PriorBox(grating_angle_deg=loose.grating_angle_deg,
                     focal_length_mm=(nominal.focal_length_mm, 1e-6 * nominal.focal_length_mm),
                     axis_pixel=loose.axis_pixel, tilt_deg=loose.tilt_deg)
    truth = truth.with_parameters(focal_length_mm=nominal.focal_length_mm)
    fit = _fit(nominal, tight, truth, 15, np.random.default_rng(13))
    found = _by_name(_determine(fit, tight).parameters)
    focal = found["focal_length_mm"]
    assert focal.width_ratio == pytest.approx(1.0, abs=0.02)
    assert not focal.set_by_data
    assert focal in _determine(fit, tight).prior_set
    assert any("focal length" in s and "prior" in s for s in _determine(fit, tight).sentences())


def test_one_arc_does_not_measure_every_physical_parameter(setting):
    # angle, camera-axis pixel and focal length all move the curve in nearly the same way over
    # one detector: the lines fix the curve, not all of them (common practice)
    nominal, box, truth = setting
    found = _determine(_fit(nominal, box, truth, 20, np.random.default_rng(14)), box)
    assert all(c.set_by_data for c in found.combinations)
    assert found.prior_set, [p.to_dict() for p in found.parameters]


def test_round_trip_and_no_covariance():
    d = Determination(parameters=(Determined("tilt_deg", 0.1, 1.9, 2.0),),
                      combinations=(Determined("central_wavelength_nm", 600.0, 0.01, math.inf),))
    again = Determination.from_dict(d.to_dict())
    assert again == d
    assert again.parameters[0].data_share == pytest.approx(1 - 0.95**2)
    assert again.combinations[0].data_share == 1.0
    nominal = nominal_model(load_profile("tho_longslit"), 28.0)
    empty = what_data_determine(nominal, ("tilt_deg",), np.full((1, 1), np.nan), {"tilt_deg": 2.0})
    assert empty == Determination((), ())
