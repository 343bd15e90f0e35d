"""The physical fit's statistics: excess scatter, leave-one-out and leave-pair-out stability,
and the next distortion degree.

Outside checks: the excess scatter is the maximum-likelihood "jitter" of common practice, so on
draws from N(0, sigma^2 + s^2) it must recover s; the leave-one-out and leave-pair-out shifts are
checked against actual refits without the lines (the Sherman-Morrison and Woodbury downdates are
exact for a linear problem and close for this nearly linear one); the next-degree model against
a fit made with that degree by :func:`fit_lines` itself.
"""
import dataclasses

import numpy as np
import pytest

from wavecal.fit import excess_scatter, fit_lines, next_degree_model
from wavecal.linelists import load_line_list
from wavecal.model_setup import nominal_model, prior_box
from wavecal.profile import load_profile


@pytest.fixture(scope="module")
def setting():
    profile = load_profile("tho_longslit")
    nominal = nominal_model(profile, 28.0)
    box = prior_box(profile, nominal)
    truth = nominal.with_parameters(grating_angle_deg=28.3, focal_length_mm=nominal.focal_length_mm * 1.01)
    lam = load_line_list(("Hg", "Ar")).wavelength_nm
    x = truth.pixel(lam)
    on = np.isfinite(x) & (x > 20) & (x < truth.n_pixels - 20)
    return nominal, box, truth, lam[on], x[on]


def test_excess_scatter_recovers_the_jitter():
    rng = np.random.default_rng(3)
    sigma = rng.uniform(0.01, 0.05, 4000)
    residual = rng.normal(0.0, np.sqrt(sigma**2 + 0.2**2))
    assert excess_scatter(residual, sigma, 4) == pytest.approx(0.2, rel=0.05)


def test_no_excess_scatter_when_the_uncertainties_explain_the_residuals():
    rng = np.random.default_rng(4)
    sigma = np.full(200, 0.1)
    assert excess_scatter(rng.normal(0.0, 0.08, 200), sigma, 4) == 0.0


def test_bright_lines_are_not_rejected_for_a_small_model_mismatch(setting):
    # tiny centre errors on half the lines, and a 0.1 px scatter the errors do not contain:
    # the scatter is absorbed, no good line is thrown out
    nominal, box, truth, lam, x = setting
    rng = np.random.default_rng(5)
    x_err = np.where(np.arange(x.size) % 2 == 0, 0.002, 0.05)
    observed = x + rng.normal(0.0, 0.1, x.size)
    fit = fit_lines(nominal, box, observed, x_err, lam, np.full(lam.size, 1e-5))
    assert fit.scatter_px == pytest.approx(0.1, rel=0.4)
    assert fit.n_used >= x.size - 1


def test_leave_one_out_shift_matches_a_refit(setting):
    nominal, box, truth, lam, x = setting
    rng = np.random.default_rng(6)
    x_err = np.full(x.size, 0.03)
    observed = x + rng.normal(0.0, 0.03, x.size)
    observed[-1] += 0.15  # the reddest line pulls a little
    fit = fit_lines(nominal, box, observed, x_err, lam, np.full(lam.size, 1e-5),
                    max_distortion_degree=0)
    grid = np.linspace(observed.min(), observed.max(), 33)
    shifts = fit.leave_one_out_shift_px(grid)
    for i in (0, x.size // 2, x.size - 1):
        mask = np.ones(x.size, bool)
        mask[i] = False
        refit = fit_lines(fit.model, box, observed, x_err, lam, np.full(lam.size, 1e-5),
                          fit_mask=mask, max_distortion_degree=0, clip=1e9)
        moved = np.abs(refit.model.pixel(fit.model.wavelength(grid)) - grid).max()
        assert shifts[i] == pytest.approx(moved, rel=0.1, abs=2e-4)


def test_excess_scatter_with_one_degree_of_freedom():
    # five residuals, four parameters: the jitter that makes chi-square equal to one exists
    residual = np.array([0.3, -0.2, 0.25, -0.35, 0.1])
    sigma = np.full(5, 0.01)
    jitter = excess_scatter(residual, sigma, 4)
    assert np.sum(residual**2 / (sigma**2 + jitter**2)) == pytest.approx(1.0, rel=1e-4)


def test_leave_pair_out_shift_matches_a_refit(setting):
    # the two bluest lines moved together by 0.4 px: each confirms the other when one is left
    # out, and only leaving both out shows how much the solution rests on them
    nominal, box, truth, lam, x = setting
    rng = np.random.default_rng(7)
    x_err = np.full(x.size, 0.03)
    observed = x + rng.normal(0.0, 0.03, x.size)
    order = np.argsort(observed)
    observed[order[:2]] += 0.4
    fit = fit_lines(nominal, box, observed, x_err, lam, np.full(lam.size, 1e-5),
                    max_distortion_degree=0, clip=1e9)
    grid = np.linspace(observed.min(), observed.max(), 33)
    shifts, pairs = fit.leave_pair_out_shift_px(grid)
    assert pairs.shape == (x.size - 1, 2)
    assert np.all(np.diff(observed[pairs], axis=1) > 0)  # neighbours, in order of position
    for k in (0, pairs.shape[0] // 2, pairs.shape[0] - 1):
        mask = np.ones(x.size, bool)
        mask[pairs[k]] = False
        refit = fit_lines(fit.model, box, observed, x_err, lam, np.full(lam.size, 1e-5),
                          fit_mask=mask, max_distortion_degree=0, clip=1e9)
        moved = np.abs(refit.model.pixel(fit.model.wavelength(grid)) - grid).max()
        assert shifts[k] == pytest.approx(moved, rel=0.1, abs=2e-4)
    # the displaced pair moves the solution most, and more than either of its lines alone
    assert set(pairs[np.argmax(shifts)]) == set(order[:2])
    assert shifts.max() > 1.5 * np.nanmax(fit.leave_one_out_shift_px(grid)[order[:2]])


def test_next_degree_model_follows_a_distortion_the_criterion_left_out(setting):
    # an injected cubic bend of 0.5 px at the ends (outside check: the bend itself), fitted
    # with the physical model alone: the model with the next distortion degree follows the
    # bend, and moves the solution by about its size; on unbent lines it hardly moves
    nominal, box, truth, lam, x = setting
    rng = np.random.default_rng(8)
    x_err = np.full(x.size, 0.03)
    observed = x + rng.normal(0.0, 0.03, x.size)
    grid = np.linspace(observed.min(), observed.max(), 33)

    def move(lines):
        fit = fit_lines(nominal, box, lines, x_err, lam, np.full(lam.size, 1e-5),
                        max_distortion_degree=0, clip=1e9)
        larger = next_degree_model(fit, box, lam)
        assert len(larger.distortion) == 4  # the degree-3 term (0-2 are spanned already)
        residual = lines - larger.pixel(lam)
        return np.abs(larger.pixel(fit.model.wavelength(grid)) - grid).max(), residual, fit

    u = (observed - observed.mean()) / (0.5 * np.ptp(observed))
    bent = observed + 0.5 * (u ** 3 - 0.6 * u)  # the cubic Legendre shape: no linear part
    moved, residual, fit = move(bent)
    assert np.sqrt(np.mean(fit.residual_px ** 2)) > 0.1
    assert np.sqrt(np.mean(residual ** 2)) < 0.05
    assert moved > 0.1  # the physical terms absorb part of the bend; the rest shows here
    assert move(observed)[0] < 0.03
    # a fit at the highest degree tried has no larger model
    assert next_degree_model(dataclasses.replace(fit, distortion_degree=5), box, lam) is None
