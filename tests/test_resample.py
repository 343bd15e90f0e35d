"""Tests of :mod:`wavecal.resample`: flux conservation, variance propagation, grids, flags.

Check values come from independent computations in the tests themselves: a brute-force overlap
matrix (the definition of the method in the module docstring), sums over the input, analytic
integrals of a constant flux density, and a seeded Monte-Carlo of the variance. The speed of
light is exact by the SI definition.
"""
from __future__ import annotations

import numpy as np
import pytest

from wavecal.resample import linear_grid, log_grid, resample, user_grid

C_KMS = 299792.458  # exact, SI definition of the metre


def overlap_matrix(pixel_edges: np.ndarray, grid_edges: np.ndarray) -> np.ndarray:
    """f_ij: the fraction of input pixel i (uniform in wavelength) inside output bin j."""
    e = np.sort(pixel_edges)
    reverse = pixel_edges[0] > pixel_edges[-1]
    g = grid_edges[:, np.newaxis]
    overlap = np.minimum(g[1:], e[np.newaxis, 1:]) - np.maximum(g[:-1], e[np.newaxis, :-1])
    m = np.clip(overlap, 0.0, None) / np.diff(e)[np.newaxis, :]
    return m[:, ::-1] if reverse else m


def random_edges(rng, n=120, start=600.0):
    return start + np.cumsum(np.r_[0.0, 0.05 + 0.03 * rng.random(n)])


@pytest.mark.parametrize("kind", ["linear", "log", "user", "coarse", "fine"])
@pytest.mark.parametrize("reverse", [False, True])
def test_matches_brute_force_overlaps(kind, reverse):
    rng = np.random.default_rng(11)
    edges = random_edges(rng)
    lo, hi = edges[0] - 0.3, edges[-1] + 0.3
    grid = {"linear": linear_grid(lo, hi, step_nm=0.061),
            "log": log_grid(lo, hi, velocity_step_kms=30.0),
            "user": user_grid(np.sort(rng.uniform(lo, hi, 90))),
            "coarse": linear_grid(lo, hi, n_bins=13),          # many pixels per bin
            "fine": linear_grid(lo, hi, step_nm=0.007)}[kind]  # many bins per pixel
    flux = rng.uniform(0, 1000, (3, edges.size - 1))
    var = flux + 25.0
    if reverse:
        edges, flux, var = edges[::-1], flux[:, ::-1], var[:, ::-1]
    res = resample(flux, edges, grid, variance=var)
    m = overlap_matrix(edges, grid.edges)
    np.testing.assert_allclose(res.flux, flux @ m.T, rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(res.variance, var @ (m ** 2).T, rtol=1e-10, atol=1e-9)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_total_counts_preserved(dtype):
    rng = np.random.default_rng(3)
    edges = np.tile(random_edges(rng, n=2000), (5, 1)) + np.arange(5)[:, np.newaxis] * 0.01
    flux = rng.poisson(400.0, (5, 2000)).astype(dtype)
    grid = log_grid(edges.min() - 1.0, edges.max() + 1.0, n_bins=1500)
    res = resample(flux, edges, grid)
    total_in = flux.astype(np.float64).sum(axis=1)
    # the requirement: total counts preserved to 1e-6 relative
    np.testing.assert_allclose(res.flux.sum(axis=1), total_in, rtol=1e-6)
    assert np.max(np.abs(res.flux.sum(axis=1) / total_in - 1)) < 1e-12


def test_constant_flux_density_gives_counts_proportional_to_width():
    # Counts c_i = D * width_i for a constant density D: every wholly covered bin gets D * its width.
    rng = np.random.default_rng(5)
    edges = random_edges(rng, n=300)
    density = 37.0
    flux = density * np.diff(edges)
    grid = user_grid(np.sort(rng.uniform(edges[0], edges[-1], 200)))
    res = resample(flux, edges, grid)
    np.testing.assert_allclose(res.flux[0], density * np.diff(grid.edges), rtol=1e-10)
    assert np.all(res.coverage == 1.0)


def test_variance_matches_monte_carlo():
    # 4000 seeded noise draws with a known variance per pixel: the scatter of each resampled bin
    # agrees with the propagated variance (standard error of a variance estimate: sqrt(2/N) = 2.2 %).
    rng = np.random.default_rng(7)
    edges = random_edges(rng, n=40)
    sigma2 = rng.uniform(1.0, 9.0, 40)
    draws = rng.normal(0.0, np.sqrt(sigma2), (4000, 40))
    grid = linear_grid(edges[0], edges[-1], step_nm=0.047)
    res = resample(draws, edges, grid, variance=np.broadcast_to(sigma2, draws.shape))
    empirical = res.flux.var(axis=0)
    assert np.all(np.abs(empirical / res.variance[0] - 1) < 5 * np.sqrt(2 / 4000))
    # Neighbouring bins share pixels: their covariance is real and the propagated variances ignore
    # it (documented). Adjacent-bin correlation is clearly positive here.
    corr = np.corrcoef(res.flux[:, 10], res.flux[:, 11])[0, 1]
    assert corr > 0.1


def test_coverage_and_bad_pixels_are_flagged():
    edges = np.linspace(500.0, 510.0, 101)  # 100 pixels of 0.1 nm
    flux = np.ones((2, 100))
    flux[1, 42] = np.nan
    grid = linear_grid(499.0, 511.0, step_nm=0.25)  # 48 bins
    res = resample(flux, edges, grid)
    centres = grid.centres
    inside = (grid.edges[:-1] >= 500.0) & (grid.edges[1:] <= 510.0)
    assert np.all(res.coverage[:, inside] == 1.0)
    assert np.all(res.coverage[:, (centres < 499.9) | (centres > 510.1)] == 0.0)
    # pixel 42 spans 504.2-504.3 nm: it lies in bin [504.0, 504.25] and bin [504.25, 504.5]
    touched = np.flatnonzero(res.bad[1])
    np.testing.assert_array_equal(grid.edges[touched], [504.0, 504.25])
    assert not res.bad[0].any()
    assert np.isfinite(res.flux).all()
    # the bad pixel contributes nothing: the two bins lose its counts (0.5 of a pixel each)
    np.testing.assert_allclose(res.flux[1, touched], res.flux[0, touched] - 0.5)
    # source_edges: where each grid edge falls in the input (0-based pixels, clipped)
    np.testing.assert_allclose(res.source_edges[0, [0, 4, 8]], [-0.5, -0.5, 9.5])


def test_grid_constructors():
    g = linear_grid(500.0, 510.0, step_nm=0.3)  # 33 1/3 steps: 34 bins cover the range
    assert g.size == 34 and g.step == pytest.approx(0.3) and g.edges[-1] == pytest.approx(510.2)
    assert linear_grid(500.0, 510.0, step_nm=0.25).size == 40
    g = linear_grid(500.0, 510.0, n_bins=40)
    assert g.edges[-1] == pytest.approx(510.0) and g.step == pytest.approx(0.25)
    g = log_grid(500.0, 600.0, velocity_step_kms=20.0)
    # equal steps in ln(lambda) of v/c
    np.testing.assert_allclose(np.diff(np.log(g.edges)), 20.0 / C_KMS, rtol=1e-9)
    np.testing.assert_allclose(g.centres, np.sqrt(g.edges[:-1] * g.edges[1:]))
    assert g.size == int(np.ceil(np.log(600 / 500) / (20 / C_KMS)))
    assert g.edges[-2] < 600.0 <= g.edges[-1]
    with pytest.raises(ValueError, match="exactly one"):
        linear_grid(500.0, 510.0)
    with pytest.raises(ValueError, match="exceed its start"):
        log_grid(510.0, 500.0, n_bins=3)
    with pytest.raises(ValueError, match="strictly increasing"):
        user_grid([500.0, 501.0, 500.5])
    with pytest.raises(ValueError, match="at least two"):
        user_grid([500.0])


def test_bad_shapes_and_edges_raise():
    grid = linear_grid(500.0, 510.0, n_bins=10)
    with pytest.raises(ValueError, match="do not fit"):
        resample(np.ones(10), np.linspace(500, 510, 10), grid)
    with pytest.raises(ValueError, match="strictly monotonic"):
        resample(np.ones(3), np.array([500.0, 502.0, 501.0, 503.0]), grid)
    with pytest.raises(ValueError, match="variance"):
        resample(np.ones(3), np.linspace(500, 510, 4), grid, variance=np.ones(4))
