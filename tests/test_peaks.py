"""Tests of :mod:`wavecal.peaks`: line detection, centring, flags.

The key check compares the scatter of the fitted centres of isolated, unsaturated lines with the
Cramér–Rao lower bound for the centre of a pixel-integrated Gaussian with Poisson plus Gaussian
read noise: Fisher information I = Σ_i (∂μ_i/∂x₀)² / (μ_i + σ_R²) (Winick 1986, J. Opt. Soc.
Am. A 3, 1809; Mendez, Silva & Lobos 2013, PASP 125, 580). The formula, its reference
implementation and the check values are those of ``reference-values.md`` §4.

The same bound is the outside check on saturated lines: centred from their wings alone, they
carry less information than the whole line, so their stated uncertainty must exceed it, and
their pulls (error / stated uncertainty) over many noise draws must have unit width.

Synthetic spectra are invented test data (no instrument); every random draw is seeded.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.special import erf, ndtr

from wavecal.extract import Spectrum
from wavecal.peak_table import COLUMNS, PeakFlag, PeakTable, describe_flags
from wavecal.peaks import find_peaks

FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))


# ------------------------------------------------------------------------------------------------
# Cramér–Rao bound (reference-values.md §4, "Reference implementation of the bound")
# ------------------------------------------------------------------------------------------------

def crlb_x0(flux, sigma, background=0.0, read_noise=0.0, x0=0.0, pix=1.0, npix=41):
    """Cramér–Rao bound (std, pixels) on the centre of a pixel-integrated Gaussian line with
    Poisson + Gaussian read noise, x0 the only unknown (equals the joint bound for a symmetric
    line; reference-values.md §4)."""

    def cdf(z):
        return 0.5 * (1 + erf(z / np.sqrt(2)))

    def pdf(z):
        return np.exp(-0.5 * z * z) / np.sqrt(2 * np.pi)

    xc = (np.arange(npix) - npix // 2) * pix
    lo, hi = (xc - pix / 2 - x0) / sigma, (xc + pix / 2 - x0) / sigma
    mu = flux * (cdf(hi) - cdf(lo)) + background
    dmu = flux / sigma * (pdf(lo) - pdf(hi))
    v = mu + read_noise ** 2
    ok = v > 0
    return 1 / np.sqrt(np.sum(dmu[ok] ** 2 / v[ok]))


@pytest.mark.parametrize(("flux", "sigma", "background", "read_noise", "expected"), [
    # check values: reference-values.md §4 table, column "CRLB, x0 only"
    (1e4, 0.5, 0.0, 0.0, 0.00579),
    (1e4, 0.5, 0.0, 5.0, 0.00591),
    (1e4, 1.5, 0.0, 0.0, 0.01528),
    (1e4, 1.5, 0.0, 10.0, 0.01698),
    (1e5, 1.0, 0.0, 0.0, 0.00329),
    (1e3, 1.0, 0.0, 0.0, 0.03291),
    (1e3, 2.0, 10.0, 5.0, 0.08488),
    (500, 2.5, 20.0, 3.0, 0.17337),
])
def test_crlb_matches_reference_table(flux, sigma, background, read_noise, expected):
    got = crlb_x0(flux, sigma, background, read_noise)
    assert got == pytest.approx(expected, rel=1e-3)


def test_crlb_photon_limit_formula():
    # reference-values.md §4, limits: Var ≈ (σ² + Δ²/12)/F for no background or read noise
    assert crlb_x0(1e4, 1.5) == pytest.approx(np.sqrt((1.5 ** 2 + 1 / 12) / 1e4), rel=1e-3)


# ------------------------------------------------------------------------------------------------
# Synthetic spectra
# ------------------------------------------------------------------------------------------------

def line_profile(n, centres, fluxes, sigma):
    """Pixel-integrated Gaussians (exact integral over each pixel), summed."""
    pix = np.arange(n, dtype=float)[:, None]
    c = np.atleast_1d(centres)[None, :]
    e = ndtr((pix + 0.5 - c) / sigma) - ndtr((pix - 0.5 - c) / sigma)
    return e @ np.broadcast_to(np.asarray(fluxes, float), c.shape[1:])


def noisy_spectrum(rng, expected, read_noise, *, offset=0.0, saturation=None):
    """Poisson + Gaussian read noise; variance from the noise model of the data."""
    flux = rng.poisson(expected) + rng.normal(0.0, read_noise, expected.size)
    saturated = np.zeros(expected.size, bool)
    if saturation is not None:
        saturated = flux >= saturation
        flux = np.minimum(flux, saturation)
    n = expected.size
    return Spectrum(x=np.arange(n, dtype=float) + offset, flux=flux,
                    variance=np.maximum(flux, 0.0) + read_noise ** 2, saturated=saturated,
                    bad=np.zeros(n, bool), n_rows=1, rows=(0, 1))


def match(table, truth, tolerance=1.0):
    """Index of the found line nearest each true centre (-1 if none within ``tolerance``)."""
    x = table["x"].to_numpy()
    if x.size == 0:
        return np.full(len(truth), -1)
    k = np.argmin(np.abs(x[None, :] - np.asarray(truth)[:, None]), axis=1)
    return np.where(np.abs(x[k] - truth) < tolerance, k, -1)


# ------------------------------------------------------------------------------------------------
# Centring precision against the Cramér–Rao bound
# ------------------------------------------------------------------------------------------------

CRLB_CASES = [
    # (F, sigma, B, read noise, fwhm_guess): the reference-values.md §4 cases
    (1e4, 1.5, 0.0, 10.0, None),
    (1e3, 2.0, 10.0, 5.0, None),
    (500.0, 2.5, 20.0, 3.0, 2.5 * FWHM_PER_SIGMA * 1.2),  # a 20 % wrong starting FWHM
]


@pytest.mark.parametrize(("flux", "sigma", "background", "read_noise", "guess"), CRLB_CASES)
def test_centre_scatter_reaches_cramer_rao_bound(flux, sigma, background, read_noise, guess):
    rng = np.random.default_rng(20261201)
    n_spectra, n_lines, spacing, n = 25, 80, 50.0, 4096
    errors, reported, phases = [], [], []
    n_found_extra = 0
    for _ in range(n_spectra):
        centres = 40.0 + spacing * np.arange(n_lines) + rng.uniform(0.0, 1.0, n_lines)
        expected = line_profile(n, centres, flux, sigma) + background
        spectrum = noisy_spectrum(rng, expected, read_noise, offset=1000.0)
        table = find_peaks(spectrum, fwhm_guess=guess).table
        k = match(table, centres + 1000.0)
        assert np.all(k >= 0), "every line must be found"
        assert np.all(table["flags"].to_numpy()[k] == 0), "isolated unsaturated lines are unflagged"
        n_found_extra += len(table) - n_lines
        errors.append(table["x"].to_numpy()[k] - (centres + 1000.0))
        reported.append(table["x_err"].to_numpy()[k])
        phases.append(centres % 1.0)
    err, rep, phase = np.concatenate(errors), np.concatenate(reported), np.concatenate(phases)
    bound = crlb_x0(flux, sigma, background, read_noise)
    ratio = err.std() / bound
    assert err.size >= 2000
    # an efficient estimator: within 30 % of the bound, and not below it beyond the statistics
    assert 0.9 < ratio <= 1.3, f"std/CRLB = {ratio:.3f}"
    # unbiased overall and at every sub-pixel phase (bins of a quarter pixel)
    assert abs(err.mean()) < 4.0 * err.std() / np.sqrt(err.size)
    for lo in (0.0, 0.25, 0.5, 0.75):
        sel = (phase >= lo) & (phase < lo + 0.25)
        assert abs(err[sel].mean()) < 4.0 * err.std() / np.sqrt(sel.sum()), f"bias at phase {lo}"
    # the reported uncertainties are honest
    assert 0.8 <= np.median(rep) / err.std() <= 1.25
    assert 0.8 <= np.std(err / rep) <= 1.25
    # false detections at 5 sigma are rare: at most one per ten spectra
    assert n_found_extra <= n_spectra // 10


# ------------------------------------------------------------------------------------------------
# Width, continuum, flags
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("sigma", [0.6, 1.5, 3.0])
def test_fwhm_estimated_automatically(sigma):
    rng = np.random.default_rng(7)
    n = 3000
    centres = np.arange(60.0, n - 60.0, 70.0)
    centres = centres + rng.uniform(0, 1, centres.size)
    expected = line_profile(n, centres, rng.uniform(5e3, 5e4, centres.size), sigma) + 50.0
    peaks = find_peaks(noisy_spectrum(rng, expected, 5.0))
    assert peaks.fwhm_typical == pytest.approx(sigma * FWHM_PER_SIGMA, rel=0.02)
    good = peaks.good()
    assert len(good) == centres.size
    assert np.median(good["fwhm"]) == pytest.approx(sigma * FWHM_PER_SIGMA, rel=0.02)


def test_faint_lines_without_width_guess():
    # every line below the S/N needed to measure a width directly (10): the finder starts from
    # its default width and still finds all of them, with the right width
    rng = np.random.default_rng(31)
    n, sigma = 2000, 2.0
    centres = np.arange(100.0, 1900.0, 100.0) + 0.3
    expected = line_profile(n, centres, 400.0, sigma) + 50.0
    peaks = find_peaks(noisy_spectrum(rng, expected, 5.0))
    assert np.all(match(peaks.table, centres) >= 0) and len(peaks) == centres.size
    assert peaks.fwhm_typical == pytest.approx(sigma * FWHM_PER_SIGMA, rel=0.1)


def test_sloped_scattered_light_is_removed():
    rng = np.random.default_rng(11)
    n, sigma = 4096, 1.3
    pix = np.arange(n)
    scattered = 200.0 + 0.4 * pix + 3000.0 * np.exp(-0.5 * ((pix - 2600.0) / 300.0) ** 2)
    centres = np.arange(50.0, n - 50.0, 45.0)
    centres = centres + rng.uniform(0, 1, centres.size)
    fluxes = rng.uniform(2e3, 3e4, centres.size)
    expected = line_profile(n, centres, fluxes, sigma) + scattered
    peaks = find_peaks(noisy_spectrum(rng, expected, 4.0))
    table = peaks.table
    k = match(table, centres)
    assert np.all(k >= 0)
    assert len(table) == centres.size, "no spurious peaks on the scattered-light hump"
    found = table.iloc[k]
    bg_true = np.interp(found["x"], pix, scattered)
    # the background under the lines follows the scattered light without offset; each local
    # value scatters by ~20 e- (pixel noise ~ sqrt(1000) over a ~17-pixel window)
    diff = found["background"].to_numpy() - bg_true
    assert abs(diff.mean()) < 5.0 and np.median(np.abs(diff)) < 20.0
    flux_pull = (found["flux"].to_numpy() - fluxes) / found["flux_err"].to_numpy()
    x_pull = (found["x"].to_numpy() - centres) / found["x_err"].to_numpy()
    assert abs(flux_pull.mean()) < 0.4 and 0.75 < flux_pull.std() < 1.3
    assert abs(x_pull.mean()) < 0.4 and 0.75 < x_pull.std() < 1.3


def test_saturated_line_centre_from_wings():
    rng = np.random.default_rng(3)
    n, sigma, saturation = 400, 1.5, 20000.0
    centres = np.array([100.3, 200.6, 300.45])
    fluxes = np.array([2e4, 2e5, 2e4])  # the middle line's core exceeds the saturation level
    expected = line_profile(n, centres, fluxes, sigma) + 30.0
    spectrum = noisy_spectrum(rng, expected, 4.0, saturation=saturation)
    assert spectrum.saturated.sum() >= 3
    table = find_peaks(spectrum).table
    k = match(table, centres)
    assert np.all(k >= 0) and len(table) == 3
    flags = table["flags"].to_numpy()[k]
    assert flags[1] == PeakFlag.SATURATED
    assert flags[0] == 0 and flags[2] == 0
    sat = table.iloc[k[1]]
    assert abs(sat["x"] - centres[1]) < 3.0 * sat["x_err"]
    assert sat["flux"] == pytest.approx(fluxes[1], rel=0.05)
    assert np.isnan(sat["fwhm_err"])
    # the wings carry less information than the whole line: the uncertainty is above the
    # Cramér–Rao bound of the same line unsaturated (reference-values.md §4)
    assert sat["x_err"] > crlb_x0(fluxes[1], sigma, 30.0, 4.0)


def test_blended_pair_fitted_jointly():
    rng = np.random.default_rng(5)
    n, sigma = 300, 1.5
    fwhm = sigma * FWHM_PER_SIGMA
    centres = np.array([100.2, 100.2 + 1.6 * fwhm, 200.7, 200.7 + 3.2 * fwhm])
    fluxes = np.array([3e4, 1.8e4, 3e4, 1.8e4])
    expected = line_profile(n, centres, fluxes, sigma) + 20.0
    pulls = []
    for _ in range(40):
        table = find_peaks(noisy_spectrum(rng, expected, 4.0), fwhm_guess=fwhm).table
        k = match(table, centres, tolerance=0.5)
        assert np.all(k >= 0) and len(table) == 4
        flags = table["flags"].to_numpy()[k]
        assert np.all(flags[:2] == PeakFlag.BLENDED)
        assert np.all(flags[2:] == 0), "lines 3.2 FWHM apart are not blended"
        pulls.append((table["x"].to_numpy()[k[:2]] - centres[:2]) / table["x_err"].to_numpy()[k[:2]])
    pulls = np.concatenate(pulls)
    assert abs(pulls.mean()) < 0.5 and 0.7 < pulls.std() < 1.4


def test_unresolved_pair_has_odd_width():
    rng = np.random.default_rng(9)
    n, sigma = 2000, 1.5
    fwhm = sigma * FWHM_PER_SIGMA
    centres = np.arange(50.0, 1950.0, 60.0)
    expected = line_profile(n, centres, 2e4, sigma) + 20.0
    pair = np.array([980.0, 980.0 + 0.8 * fwhm])  # too close to be resolved
    expected += line_profile(n, pair, [2e4, 2e4], sigma)
    table = find_peaks(noisy_spectrum(rng, expected, 4.0)).table
    near = table[np.abs(table["x"] - pair.mean()) < 3.0]
    assert len(near) == 1
    assert near["flags"].iloc[0] == PeakFlag.ODD_WIDTH
    others = table[np.abs(table["x"] - pair.mean()) > 10.0]
    assert len(others) == centres.size
    assert np.all(others["flags"] == 0)


# ------------------------------------------------------------------------------------------------
# Width model, saturated cores, crowded groups, ranking, satellites
# ------------------------------------------------------------------------------------------------

def varying_width_spectrum(rng, n, centres, fluxes, fwhm_of_x, background=20.0, read_noise=4.0):
    """Lines whose FWHM follows ``fwhm_of_x`` (invented test data)."""
    expected = np.full(n, background)
    for c, f in zip(centres, fluxes):
        expected = expected + line_profile(n, [c], [f], fwhm_of_x(c) / FWHM_PER_SIGMA)
    return noisy_spectrum(rng, expected, read_noise)


def test_width_model_follows_linearly_varying_fwhm():
    # the FWHM grows linearly from 3 to 4.5 px along the detector (as in the blue of a grism);
    # the expected width must follow it, and no line may be of odd width
    rng = np.random.default_rng(41)
    n = 3000

    def fwhm_of_x(x):
        return 3.0 + 1.5 * np.asarray(x) / n

    centres = np.arange(40.0, n - 40.0, 55.0) + rng.uniform(0, 1, 54)
    fluxes = rng.uniform(1e4, 5e4, centres.size)
    peaks = find_peaks(varying_width_spectrum(rng, n, centres, fluxes, fwhm_of_x))
    table = peaks.table
    k = match(table, centres)
    assert np.all(k >= 0) and len(table) == centres.size
    grid = np.linspace(centres[0], centres[-1], 50)
    # each width is measured to ~1 % (S/N > 100); the model of 54 of them to a fraction of that
    assert np.allclose(peaks.fwhm_at(grid), fwhm_of_x(grid), rtol=0.02)
    assert np.allclose(table["fwhm_expected"], peaks.fwhm_at(table["x"]))
    assert not np.any(table["flags"].to_numpy() & PeakFlag.ODD_WIDTH)
    # fwhm_typical is the scalar summary: the median over the detector
    assert peaks.fwhm_typical == pytest.approx(3.75, rel=0.02)


def test_width_model_in_spectrum_coordinates():
    rng = np.random.default_rng(43)
    n, offset = 2000, 500.0

    def fwhm_of_x(x):
        return 2.5 + 2.0 * np.asarray(x) / n

    centres = np.arange(40.0, n - 40.0, 50.0) + 0.4
    spectrum = varying_width_spectrum(rng, n, centres, np.full(centres.size, 3e4), fwhm_of_x)
    spectrum = Spectrum(x=spectrum.x + offset, flux=spectrum.flux, variance=spectrum.variance,
                        saturated=spectrum.saturated, bad=spectrum.bad, n_rows=1, rows=(0, 1))
    peaks = find_peaks(spectrum)
    assert peaks.fwhm_at(offset + 1800.0) == pytest.approx(fwhm_of_x(1800.0), rel=0.02)


def test_odd_width_line_is_down_weighted_not_dropped():
    # an unresolved pair (two equal lines 0.8 FWHM apart: one line ~1.3 times as wide) keeps its
    # place in the table with ODD_WIDTH, and its x_err covers the offset of the pair's centroid
    # from either component (half the separation)
    rng = np.random.default_rng(47)
    n, sigma = 2000, 1.5
    fwhm = sigma * FWHM_PER_SIGMA
    centres = np.arange(50.0, 1950.0, 60.0)
    pair = np.array([1010.0, 1010.0 + 0.8 * fwhm])
    expected = line_profile(n, centres, 2e4, sigma) + line_profile(n, pair, [2e4, 2e4], sigma) + 20.0
    table = find_peaks(noisy_spectrum(rng, expected, 4.0)).table
    row = table.iloc[int(np.argmin(np.abs(table["x"].to_numpy() - pair.mean())))]
    assert row["flags"] == PeakFlag.ODD_WIDTH
    assert row["fwhm"] / row["fwhm_expected"] > 1.25
    assert row["x_err"] >= 0.5 * (pair[1] - pair[0]) * 0.9
    single = table.iloc[match(table, centres[:5])]
    assert np.all(single["x_err"] < 0.05)


def test_saturated_centre_pulls_have_unit_width():
    # a line whose core is saturated (peak about six times the saturation level) is centred from
    # its wings; over many noise draws its pull (error / x_err) has unit width
    rng = np.random.default_rng(53)
    n, sigma, saturation = 600, 1.5, 20000.0
    pulls = []
    for _ in range(80):
        centres = np.array([100.0, 200.0, 300.0, 400.0, 500.0]) + rng.uniform(0, 1, 5)
        fluxes = np.array([2e4, 3e4, 5e5, 2.5e4, 2e4])
        spectrum = noisy_spectrum(rng, line_profile(n, centres, fluxes, sigma) + 30.0, 4.0,
                                  saturation=saturation)
        assert spectrum.saturated.sum() >= 5
        table = find_peaks(spectrum).table
        k = match(table, centres)
        assert np.all(k >= 0) and len(table) == 5
        row = table.iloc[k[2]]
        assert int(row["flags"]) & PeakFlag.SATURATED
        pulls.append((row["x"] - centres[2]) / row["x_err"])
    pulls = np.asarray(pulls)
    # 80 draws: the standard deviation is known to ~8 %, the mean to ~0.11
    assert abs(pulls.mean()) < 0.35
    assert 0.8 < pulls.std() < 1.25


def test_close_pair_gets_two_widths():
    # two lines 2 FWHM apart (fitted jointly), the second 1.4 times as wide (an unresolved blend
    # of its own): each gets its own width
    rng = np.random.default_rng(59)
    n, sigma = 2400, 1.5
    fwhm = sigma * FWHM_PER_SIGMA
    centres = np.arange(50.0, 2350.0, 70.0)
    pair = np.array([1225.3, 1225.3 + 2.0 * fwhm])
    widths, found = [], []
    for _ in range(10):
        expected = (line_profile(n, centres, 3e4, sigma) + line_profile(n, pair[:1], [4e4], sigma)
                    + line_profile(n, pair[1:], [4e4], 1.4 * sigma) + 20.0)
        table = find_peaks(noisy_spectrum(rng, expected, 4.0)).table
        k = match(table, pair, tolerance=0.5)
        assert np.all(k >= 0)
        rows = table.iloc[k]
        assert np.all(rows["flags"].to_numpy() & PeakFlag.BLENDED)
        widths.append(rows["fwhm"].to_numpy())
        found.append(rows["fwhm_err"].to_numpy())
    widths, errors = np.asarray(widths), np.asarray(found)
    truth = np.array([fwhm, 1.4 * fwhm])
    pull = (widths - truth) / errors
    assert np.all(np.abs(pull.mean(axis=0)) < 4.0 / np.sqrt(10)), pull.mean(axis=0)
    assert np.all(widths[:, 1] > 1.2 * widths[:, 0])


def test_crowded_group_fitted_in_chunks():
    # nine lines 2 FWHM apart form one group; each is found, flagged BLENDED and centred
    # within its stated uncertainty
    rng = np.random.default_rng(61)
    n, sigma = 600, 1.5
    fwhm = sigma * FWHM_PER_SIGMA
    centres = 250.3 + 2.0 * fwhm * np.arange(9)
    fluxes = rng.uniform(2e4, 4e4, centres.size)
    pulls = []
    for _ in range(20):
        expected = line_profile(n, centres, fluxes, sigma) + 20.0
        table = find_peaks(noisy_spectrum(rng, expected, 4.0), fwhm_guess=fwhm).table
        k = match(table, centres, tolerance=0.5)
        assert np.all(k >= 0) and len(table) == centres.size
        rows = table.iloc[k]
        assert np.all(rows["flags"].to_numpy() == PeakFlag.BLENDED)
        pulls.append((rows["x"].to_numpy() - centres) / rows["x_err"].to_numpy())
    pulls = np.concatenate(pulls)
    assert abs(pulls.mean()) < 0.3 and 0.75 < pulls.std() < 1.3


def test_non_finite_snr_ranks_last():
    table = pd.DataFrame({name: np.zeros(4) for name in COLUMNS})
    table["x"] = [10.0, 20.0, 30.0, 40.0]
    table["snr"] = [5.0, np.nan, 50.0, np.inf]
    table["flags"] = np.zeros(4, dtype=np.int64)
    peaks = PeakTable(table=table, fwhm_typical=3.0)
    assert list(peaks.by_strength()["x"]) == [30.0, 10.0, 20.0, 40.0]


def test_table_snr_is_finite_or_nan():
    rng = np.random.default_rng(67)
    n = 1000
    centres = np.array([200.0, 500.0, 800.0])
    table = find_peaks(noisy_spectrum(rng, line_profile(n, centres, 2e4, 1.5) + 20.0, 4.0)).table
    assert not np.any(np.isinf(table["snr"].to_numpy()))


def test_no_satellites_around_bright_saturated_line():
    # a line saturated at six times the saturation level, whose profile (as in real optics) has
    # 10 % of its flux in a halo three times as wide as the core (invented profile): it gives one
    # peak, flagged SATURATED, and no satellite on its wings
    rng = np.random.default_rng(71)
    n, sigma, saturation = 800, 1.5, 30000.0
    fwhm = sigma * FWHM_PER_SIGMA
    for _ in range(10):
        centres = np.array([100.0, 250.0, 550.0, 700.0]) + rng.uniform(0, 1, 4)
        bright = 400.0 + rng.uniform(0, 1)
        core = 6.0 * saturation / (ndtr(0.5 / sigma) - ndtr(-0.5 / sigma))
        expected = (line_profile(n, centres, 4e4, sigma) + line_profile(n, [bright], [core], sigma)
                    + line_profile(n, [bright], [core / 9.0], 3.0 * sigma) + 30.0)
        spectrum = noisy_spectrum(rng, expected, 4.0, saturation=saturation)
        table = find_peaks(spectrum).table
        near = table[np.abs(table["x"] - bright) < 8.0 * fwhm]
        assert len(near) == 1, near
        assert near["flags"].iloc[0] & PeakFlag.SATURATED
        assert np.all(match(table, centres) >= 0) and len(table) == centres.size + 1


def test_edge_flags_near_ends_and_bad_pixels():
    rng = np.random.default_rng(13)
    n, sigma = 500, 1.5
    centres = np.array([2.6, 100.0, 250.3, 497.1])
    expected = line_profile(n, centres, 3e4, sigma) + 20.0
    spectrum = noisy_spectrum(rng, expected, 4.0)
    bad = np.zeros(n, bool)
    bad[254:258] = True  # a bad column 4 px from the third line
    spectrum = Spectrum(x=spectrum.x, flux=np.where(bad, np.nan, spectrum.flux),
                        variance=spectrum.variance, saturated=spectrum.saturated, bad=bad,
                        n_rows=1, rows=(0, 1))
    table = find_peaks(spectrum, fwhm_guess=3.5).table
    k = match(table, centres)
    assert np.all(k >= 0)
    flags = table["flags"].to_numpy()[k]
    assert flags[0] & PeakFlag.EDGE and flags[3] & PeakFlag.EDGE and flags[2] & PeakFlag.EDGE
    assert flags[1] == 0
    # a smaller margin lifts the flag from the line 4 px from the bad column
    table2 = find_peaks(spectrum, fwhm_guess=3.5, edge_margin=2.0).table
    assert table2["flags"].to_numpy()[match(table2, centres)][2] == 0


def test_spikes_are_masked_not_fitted():
    # one- and two-pixel spikes (cosmic-ray residue in a 1-D spectrum), one of them 5.7 px from
    # a line: they make no peak and do not pull the line's centre
    rng = np.random.default_rng(17)
    n, sigma = 600, 1.5
    centres = np.array([150.0, 300.3, 450.0])
    expected = line_profile(n, centres, 2e4, sigma) + 20.0
    spectrum = noisy_spectrum(rng, expected, 4.0)
    flux = spectrum.flux.copy()
    flux[222] += 5000.0
    flux[306] += 3000.0
    flux[400:402] += 4000.0
    spectrum = Spectrum(x=spectrum.x, flux=flux, variance=np.maximum(flux, 0) + 16.0,
                        saturated=spectrum.saturated, bad=spectrum.bad, n_rows=1, rows=(0, 1))
    table = find_peaks(spectrum).table
    assert len(table) == 3
    k = match(table, centres)
    assert np.all(k >= 0)
    assert np.all(np.abs(table["x"].to_numpy()[k] - centres) < 3.0 * table["x_err"].to_numpy()[k])
    flags = table["flags"].to_numpy()[k]
    assert flags[0] == 0 and flags[2] == 0
    assert flags[1] == PeakFlag.EDGE, "the line next to a masked spike is flagged"


# ------------------------------------------------------------------------------------------------
# Table, API and input checks
# ------------------------------------------------------------------------------------------------

def test_peak_table_api():
    rng = np.random.default_rng(19)
    n = 800
    centres = np.array([1.5, 200.2, 400.7, 600.1])
    expected = line_profile(n, centres, 2e4, 1.4) + 10.0
    peaks = find_peaks(noisy_spectrum(rng, expected, 3.0, offset=37.0))
    assert isinstance(peaks, PeakTable)
    assert tuple(peaks.table.columns) == COLUMNS
    assert len(peaks) == 4
    assert np.all(np.diff(peaks.table["x"]) > 0)
    assert np.allclose(peaks.table["x"], centres + 37.0, atol=0.05), "x is in the spectrum's coordinates"
    assert len(peaks.good()) == 3  # the first line is at the edge
    out = peaks.to_table()
    assert list(out["flag_names"]) == ["EDGE", "", "", ""]
    summary = peaks.summary()
    assert json.loads(json.dumps(summary)) == summary
    assert summary["n_peaks"] == 4 and summary["n_good"] == 3 and summary["flag_counts"]["EDGE"] == 1
    row = peaks.table.iloc[1]
    sigma = row["fwhm"] / FWHM_PER_SIGMA
    assert row["amplitude"] == pytest.approx(row["flux"] / (np.sqrt(2 * np.pi) * sigma))
    assert row["snr"] == pytest.approx(row["flux"] / row["flux_err"])


def test_describe_flags():
    assert describe_flags(0) == ()
    assert describe_flags(PeakFlag.SATURATED | PeakFlag.EDGE) == ("SATURATED", "EDGE")
    assert describe_flags(int(PeakFlag.BLENDED) | int(PeakFlag.POOR_FIT) | int(PeakFlag.ODD_WIDTH)) == (
        "BLENDED", "POOR_FIT", "ODD_WIDTH")


def test_pure_noise_gives_empty_table():
    rng = np.random.default_rng(23)
    spectrum = noisy_spectrum(rng, np.full(2048, 100.0), 5.0)
    peaks = find_peaks(spectrum, fwhm_guess=3.0)
    assert len(peaks) == 0
    assert tuple(peaks.table.columns) == COLUMNS
    assert peaks.summary()["n_peaks"] == 0


def test_invalid_input():
    spectrum = noisy_spectrum(np.random.default_rng(0), np.full(100, 10.0), 1.0)
    bent = Spectrum(x=np.arange(100) * 2.0, flux=spectrum.flux, variance=spectrum.variance,
                    saturated=spectrum.saturated, bad=spectrum.bad, n_rows=1, rows=(0, 1))
    with pytest.raises(ValueError, match="advance by exactly one"):
        find_peaks(bent)
    with pytest.raises(ValueError, match="min_snr"):
        find_peaks(spectrum, min_snr=0.0)
    with pytest.raises(ValueError, match="fwhm_guess"):
        find_peaks(spectrum, fwhm_guess=-1.0)


