"""Blind identification on synthetic peak lists with known truth.

The truth is a GratingModel perturbed from the nominal one within the priors the brief asks the
matcher to tolerate (grating angle ±3°, focal length ±3 %); line wavelengths are the shipped
NIST-based lists. Tolerances: a correct identification names the right listed line for every
peak it uses.
"""
import dataclasses

import numpy as np
import pytest
from scipy import stats

from wavecal.fit import fit_lines
from wavecal.linelists import load_line_list
from wavecal.match import (LOCAL_DENSITY_FRACTION, associate, chance_log10_probability,
                           coincidence_probabilities, identify_lines)
from wavecal.model_setup import nominal_model, prior_box
from wavecal.profile import load_profile


@pytest.fixture(scope="module")
def wide_profile():
    profile = load_profile("tho_longslit")
    return dataclasses.replace(profile, priors=dataclasses.replace(profile.priors, grating_angle_deg=3.0))


def _peaks(truth, wavelengths, rng, *, missing=0.2, extra=0.15, noise=0.02):
    x_true = truth.pixel(wavelengths)
    on = np.isfinite(x_true) & (x_true > 3) & (x_true < truth.n_pixels - 4)
    lam, x = wavelengths[on], x_true[on]
    keep = rng.random(x.size) >= missing
    lam, x = lam[keep], x[keep] + rng.normal(0, noise, keep.sum())
    n_extra = int(round(extra * x.size))
    x_all = np.r_[x, rng.uniform(0, truth.n_pixels - 1, n_extra)]
    lam_all = np.r_[lam, np.full(n_extra, np.nan)]
    return x_all, lam_all


@pytest.mark.parametrize("seed, lamps, angle, d_angle, d_focal", [
    (1, ("Hg", "Ar"), 22.0, 2.7, 0.025),
    (2, ("Ne",), 28.0, -2.9, -0.028),
    (3, ("Ar",), 30.0, 1.5, 0.01),
    (4, ("Hg", "Ne", "Ar"), 18.0, -1.0, 0.03),
    (5, ("Kr",), 32.0, -1.5, -0.02),
])
def test_identifies_lines_blindly_within_wide_priors(wide_profile, seed, lamps, angle, d_angle, d_focal):
    rng = np.random.default_rng(seed)
    nominal = nominal_model(wide_profile, angle)
    box = prior_box(wide_profile, nominal)
    truth = nominal.with_parameters(grating_angle_deg=angle + d_angle,
                                    focal_length_mm=nominal.focal_length_mm * (1 + d_focal),
                                    axis_pixel=nominal.axis_pixel + rng.uniform(-20, 20),
                                    tilt_deg=rng.uniform(-2, 2), distortion=(0, 0, 0, 0.3))
    lines = np.sort(load_line_list(lamps).wavelength_nm)
    x, lam_true = _peaks(truth, lines, rng)
    ident = identify_lines(nominal, box, x, lines, fwhm_px=3.0)
    assert ident.best is not None
    a = ident.best.association
    identified = lines[a.line]
    truly_listed = np.isfinite(lam_true[a.peak])
    # every identification of a real line names the right line; chance extras are few
    assert np.allclose(identified[truly_listed], lam_true[a.peak][truly_listed])
    assert np.count_nonzero(~truly_listed) <= 1
    assert ident.best.n_matched >= 0.8 * np.count_nonzero(np.isfinite(lam_true))
    assert ident.best.log10_chance < -(ident.log10_trials + 6)
    assert not ident.ambiguous


def test_fit_recovers_truth_to_a_small_fraction_of_a_pixel(wide_profile):
    rng = np.random.default_rng(11)
    nominal = nominal_model(wide_profile, 25.0)
    box = prior_box(wide_profile, nominal)
    truth = nominal.with_parameters(grating_angle_deg=26.2, focal_length_mm=304.0, tilt_deg=1.1,
                                    axis_pixel=nominal.axis_pixel + 7.0, distortion=(0, 0, 0, 0.4))
    lines = np.sort(load_line_list(("Hg", "Ne", "Ar")).wavelength_nm)
    x, lam_true = _peaks(truth, lines, rng, noise=0.01)
    ident = identify_lines(nominal, box, x, lines)
    a = ident.best.association
    fit = fit_lines(ident.best.model, box, x[a.peak], np.full(len(a), 0.01), lines[a.line],
                    np.full(len(a), 1e-5), fit_mask=~a.crowded)
    used_x = x[a.peak][fit.used]
    grid = np.linspace(used_x.min(), used_x.max(), 300)
    error_px = fit.model.pixel(truth.wavelength(grid)) - grid
    assert np.max(np.abs(error_px)) < 0.05
    assert fit.distortion_degree >= 3  # a 0.4 px cubic term must be detected
    assert 0.3 < fit.reduced_chi2 < 3.0


def test_wrong_lamp_gives_no_significant_identification(wide_profile):
    """Peaks of a neon lamp searched against the argon list: nothing beyond chance."""
    rng = np.random.default_rng(5)
    nominal = nominal_model(wide_profile, 27.0)
    box = prior_box(wide_profile, nominal)
    neon = np.sort(load_line_list("Ne").wavelength_nm)
    argon = np.sort(load_line_list("Ar").wavelength_nm)
    x, _ = _peaks(nominal.with_parameters(grating_angle_deg=28.0), neon, rng)
    ident = identify_lines(nominal, box, x, argon)
    if ident.best is not None:
        assert ident.best.log10_chance > -(ident.log10_trials + 6)


def test_associate_is_one_to_one(wide_profile):
    model = nominal_model(wide_profile, 20.0)
    lines = np.array([500.0, 520.0, 540.0])
    pos = model.pixel(lines)
    x = np.array([pos[0] - 0.2, pos[0] + 0.1, pos[2] + 0.3, pos[1] + 50])
    a = associate(model, x, lines, 1.0)
    assert a.peak.tolist() == [1, 2]  # the closer of the two peaks near line 0 wins
    assert a.line.tolist() == [0, 2]


def test_chance_probability_behaves():
    # more matches at the same rates are less likely by chance; higher rates more likely
    low, high = np.full(20, 0.01), np.full(20, 0.04)
    assert chance_log10_probability(10, low, 2) < chance_log10_probability(5, low, 2)
    assert chance_log10_probability(8, high, 2) > chance_log10_probability(8, low, 2)
    assert chance_log10_probability(2, low, 2) == 0.0
    # the Poisson tail of the summed rates (scipy.stats as the outside reference)
    assert chance_log10_probability(9, low, 2) == pytest.approx(
        stats.poisson.logsf(6, 0.2) / np.log(10), rel=1e-12)


def test_coincidence_rate_follows_the_local_line_density(wide_profile):
    # peaks where the list is dense are likely to hit a line by chance, peaks where it lists
    # nothing are not: the rate is 1 - exp(-2 w rho) with rho counted around each peak
    model = nominal_model(wide_profile, 20.0)
    n = model.n_pixels
    dense = model.wavelength(np.linspace(0.05 * n, 0.3 * n, 200))
    sparse = model.wavelength(np.linspace(0.6 * n, 0.95 * n, 5))
    lines = np.sort(np.r_[dense, sparse])
    rates = coincidence_probabilities(model, np.array([0.15 * n, 0.8 * n, 0.45 * n]), lines, 1.0)
    half = LOCAL_DENSITY_FRACTION * n
    expected_dense = 1 - np.exp(-2 * 1.0 * (2 * half * 200 / (0.25 * n)) / (2 * half))
    assert rates[0] == pytest.approx(expected_dense, rel=0.05)
    assert rates[1] < 0.2 * rates[0]
    assert rates[2] == 0.0


