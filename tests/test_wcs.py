"""Tests of :mod:`wavecal.wcs`: every written header is evaluated with astropy.wcs.

Sources of the check values:

* astropy.wcs (WCSLIB), run live: the reference evaluator of every header, at every pixel.
* ``fits-wcs-grating.md`` (FITS WCS Paper III, Greisen et al. 2006, A&A 446, 747, as implemented
  by WCSLIB inside astropy): §4, the MARS grism header converted to vacuum with
  ``sptr('WAVE-???')`` gives ``WAVE-GRA`` with CRVAL 7247.1966 Å; the Edlén 1953 / Cox 2000
  standard-air formula WCSLIB uses; §3, the ``-TAB`` conventions.
* The solution's own ``wavelength(x, y, medium=...)`` (Ciddor 1996 for air/vacuum) is the truth
  the header must reproduce to 0.01 px (the issue's requirement).

Pixel conventions: astropy's ``wcs_pix2world(..., 0)`` takes 0-based pixels, as wavecal does;
``-GRI``/``-GRA``/linear/``-LOG`` axes return metres, ``-TAB`` axes the table's unit (nm).
"""
from __future__ import annotations

import dataclasses
import io

import numpy as np
import pandas as pd
import pytest
from astropy import units as u
from astropy.io import fits
from astropy.wcs import WCS

from wavecal.optics import GratingModel
from wavecal.resample import linear_grid, log_grid, user_grid
from wavecal.solution import Solution
from wavecal.wcs import (
    AIRVAC_WAVECAL,
    GRATING_TOLERANCE_PX,
    TABLE_EXTNAME,
    grid_wcs,
    solution_wcs,
    table_wcs,
)
from wavecal.wcs_grating import AIRVAC_WCSLIB, grating_header

# The reflection-grating worked example of fits-wcs-grating.md §2 (1200/mm, 4096 px).
WORKED = GratingModel(mount="reflection", grooves_per_mm=1200.0, order=1, grating_angle_deg=20.0,
                      deviation_deg=30.0, focal_length_mm=300.0, pixel_mm=0.015,
                      axis_pixel=2047.5, n_pixels=4096, tilt_deg=3.0)
SMALL = GratingModel(mount="transmission", grooves_per_mm=600.0, order=1, grating_angle_deg=8.0,
                     deviation_deg=25.0, focal_length_mm=200.0, pixel_mm=0.0135, axis_pixel=500.0,
                     n_pixels=1024, tilt_deg=-1.0, direction=-1)
GRISM = GratingModel(mount="grism", grooves_per_mm=300.0, order=1, grating_angle_deg=0.5,
                     deviation_deg=0.0, focal_length_mm=200.0, pixel_mm=0.015, axis_pixel=1060.0,
                     n_pixels=2048, tilt_deg=2.0, prism_apex_deg=20.0, prism_index=1.52,
                     prism_index_slope_per_nm=-4.0e-5, prism_reference_nm=600.0)


def make_solution(model: GratingModel, medium: str = "air", axis: int = 1) -> Solution:
    lo, hi = 0.1 * model.n_pixels, 0.9 * model.n_pixels
    return Solution(status="ok", reasons=(), medium=medium, model=model, lines=pd.DataFrame(),
                    covered_range_px=(lo, hi), dispersion_axis=axis)


def as_file(wcs_result, shape) -> fits.HDUList:
    """The header (and table) as they would be read back from a FITS file."""
    hdus = [fits.PrimaryHDU(np.zeros(shape, dtype=np.float32), header=wcs_result.header)]
    if wcs_result.table is not None:
        hdus.append(wcs_result.table)
    buf = io.BytesIO()
    fits.HDUList(hdus).writeto(buf)
    buf.seek(0)
    return fits.open(buf)


def world_nm(hdul: fits.HDUList) -> tuple[np.ndarray, np.ndarray | None]:
    """astropy's wavelength (nm) and slit coordinate at every pixel (0-based), image-shaped."""
    w = WCS(hdul[0].header, hdul)
    shape = hdul[0].data.shape
    grids = np.indices(shape, dtype=float)[::-1]  # FITS axis order: x first
    world = w.wcs_pix2world(*[g.ravel() for g in grids], 0)
    spec = [i for i, t in enumerate(w.wcs.ctype) if t[:4] in ("AWAV", "WAVE")]
    assert len(spec) == 1
    i = spec[0]
    lam = (world[i] * u.Unit(w.wcs.cunit[i])).to_value(u.nm).reshape(shape)
    slit = world[1 - i].reshape(shape) if len(shape) == 2 else None
    return lam, slit


def error_px(lam_wcs: np.ndarray, lam_true: np.ndarray, axis: int = -1) -> float:
    return float(np.max(np.abs(lam_wcs - lam_true) / np.abs(np.gradient(lam_true, axis=axis))))


# --------------------------------------------------------------------------------------------
# The grating algorithm
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("model", [WORKED, WORKED.with_parameters(direction=-1), SMALL, GRISM],
                         ids=["worked", "reversed", "transmission", "grism"])
@pytest.mark.parametrize(("solution_medium", "medium", "ctype"), [
    ("air", "air", "AWAV-GRA"), ("air", "vacuum", "WAVE-GRA"),
    ("vacuum", "vacuum", "WAVE-GRI"), ("vacuum", "air", "AWAV-GRI")])
def test_grating_algorithm_round_trip(model, solution_medium, medium, ctype):
    solution = make_solution(model, solution_medium)
    result = solution_wcs(solution, (model.n_pixels,), medium=medium)
    assert result.algorithm == ctype[-3:] and result.ctype == ctype and result.table is None
    with as_file(result, (model.n_pixels,)) as hdul:
        lam, _ = world_nm(hdul)
        w = WCS(hdul[0].header)
    x = np.arange(model.n_pixels, dtype=float)
    truth = solution.wavelength(x, medium=medium)
    err = error_px(lam, truth)
    assert err <= GRATING_TOLERANCE_PX
    assert result.max_error_px == pytest.approx(err, rel=1e-6, abs=1e-8)  # card rounding
    if medium == solution_medium:
        assert err < 1e-6  # the model is the algorithm: exact but for rounding
        assert result.conversion == "none"
    else:
        assert result.conversion == AIRVAC_WCSLIB
    # inverse: astropy's world2pix returns the pixels
    back = w.wcs_world2pix((lam * u.nm).to_value(u.m), 0)[0]
    assert np.max(np.abs(back - x)) < 1e-6


def test_mixed_form_matches_published_vacuum_conversion():
    # fits-wcs-grating.md §4: the MARS grism (AWAV-GRA, CRVAL 7245.2 A at CRPIX 719.8) converted
    # with sptr('WAVE-???') is WAVE-GRA with CRVAL 7247.1966 A. Our mixed-form header must carry
    # the same reference value for the same grism.
    g_per_nm, alpha, n_r, dn, lam_r, cdelt = 4.5e-4, 27.0, 1.765, -1.077e-3, 724.52, 0.2956
    sin_a = np.sin(np.radians(alpha))
    beta_r = np.degrees(np.arcsin(g_per_nm * lam_r - n_r * sin_a))
    t = g_per_nm - dn * sin_a
    mars = GratingModel(mount="grism", grooves_per_mm=450.0, order=1, grating_angle_deg=0.0,
                        deviation_deg=alpha + float(beta_r),
                        focal_length_mm=float(0.015 * np.cos(np.radians(beta_r)) / (cdelt * t)),
                        pixel_mm=0.015, axis_pixel=718.8, n_pixels=1700, prism_apex_deg=alpha,
                        prism_index=n_r, prism_index_slope_per_nm=dn, prism_reference_nm=lam_r)
    result = solution_wcs(make_solution(mars, "air"), (1700,), medium="vacuum")
    assert result.ctype == "WAVE-GRA"
    assert result.header["CRPIX1"] == pytest.approx(719.8)
    assert result.header["CRVAL1"] * 10 == pytest.approx(7247.1966, abs=5e-5)


def cox_index(air_nm):
    """Edlén 1953 / Cox 2000 standard air, as WCSLIB's spx.c (fits-wcs-grating.md §4)."""
    s2 = (1e3 / np.asarray(air_nm)) ** 2
    return 1.000064328 + 2.94981e-2 / (146 - s2) + 2.554e-4 / (41 - s2)


def test_vacuum_output_falls_back_to_a_table_where_formulas_disagree():
    # Near 1.4 um, Ciddor 1996 and Edlen 1953/Cox differ by 1.9e-8 in lambda (computed here from
    # both published formulas); at 0.0013 nm/px (316/mm, order 4, f = 3 m; an infrared echelle
    # setting, invented) that is 0.02 px -- beyond the tolerance, so the mixed form is refused.
    ir = GratingModel(mount="reflection", grooves_per_mm=316.0, order=4, grating_angle_deg=63.0,
                      deviation_deg=10.0, focal_length_mm=3000.0, pixel_mm=0.009,
                      axis_pixel=2047.5, n_pixels=4096)
    solution = make_solution(ir, "air")
    x = np.arange(4096, dtype=float)
    air = solution.wavelength(x)
    vac_ciddor = solution.wavelength(x, medium="vacuum")
    mismatch = np.abs(vac_ciddor - air * cox_index(air)) / np.abs(np.gradient(vac_ciddor))
    assert mismatch.max() > GRATING_TOLERANCE_PX
    result = solution_wcs(solution, (4096,), medium="vacuum")
    assert result.algorithm == "TAB" and result.ctype == "WAVE-TAB"
    assert result.conversion == AIRVAC_WAVECAL
    with as_file(result, (4096,)) as hdul:
        lam, _ = world_nm(hdul)
    assert error_px(lam, vac_ciddor) <= GRATING_TOLERANCE_PX
    # In air the grating algorithm is exact for the same instrument.
    assert solution_wcs(solution, (4096,)).ctype == "AWAV-GRA"


def test_small_distortion_keeps_the_grating_algorithm():
    # A third-order term of 0.003 px cannot be absorbed by the physical parameters, but stays
    # within the tolerance: the best distortion-free header is written and checked.
    model = WORKED.with_parameters(distortion=(0.0, 0.0, 0.0, 0.003))
    result = solution_wcs(make_solution(model), (4096,))
    assert result.ctype == "AWAV-GRA"
    with as_file(result, (4096,)) as hdul:
        lam, _ = world_nm(hdul)
    err = error_px(lam, model.wavelength(np.arange(4096.0)))
    assert 1e-4 < err <= GRATING_TOLERANCE_PX


def test_low_order_distortion_is_absorbed_by_the_physical_refit():
    # Degrees 0-2 of the distortion are spanned by the camera-axis pixel, focal length and tilt:
    # a 1.5 px shift-and-scale distortion still gives the grating algorithm, to 0.01 px.
    model = WORKED.with_parameters(distortion=(0.8, -0.7, 0.3))
    result = solution_wcs(make_solution(model), (4096,))
    assert result.algorithm == "GRA"
    with as_file(result, (4096,)) as hdul:
        lam, _ = world_nm(hdul)
    assert error_px(lam, model.wavelength(np.arange(4096.0))) <= GRATING_TOLERANCE_PX


def test_grating_header_refuses_distortion():
    with pytest.raises(ValueError, match="no distortion"):
        grating_header(WORKED.with_parameters(distortion=(0.0, 0.0, 0.0, 0.1)))


# --------------------------------------------------------------------------------------------
# The tabular algorithm
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("medium", ["air", "vacuum"])
@pytest.mark.parametrize("direction", [1, -1])
def test_distortion_gives_a_table_within_tolerance(medium, direction):
    model = WORKED.with_parameters(distortion=(0.0, 0.0, 0.0, 0.07, -0.04), direction=direction)
    solution = make_solution(model)
    result = solution_wcs(solution, (4096,), medium=medium)
    assert result.algorithm == "TAB" and result.ctype[-4:] == "-TAB"
    assert result.table.name == TABLE_EXTNAME
    x = np.arange(4096, dtype=float)
    truth = solution.wavelength(x, medium=medium)
    with as_file(result, (4096,)) as hdul:
        lam, _ = world_nm(hdul)
        w = WCS(hdul[0].header, hdul)
        back = w.wcs_world2pix(lam, 0)[0]
        # the table reaches the outer pixel edges (-0.5 and 4095.5, 0-based)
        ends = w.wcs_pix2world([-0.5, 4095.5], 0)[0]
    err = error_px(lam, truth)
    assert err <= GRATING_TOLERANCE_PX
    assert result.max_error_px == pytest.approx(err, rel=1e-6)
    assert np.max(np.abs(back - x)) < 1e-6
    np.testing.assert_allclose(ends, solution.wavelength(np.array([-0.5, 4095.5]), medium=medium),
                               rtol=1e-12)


def test_image_with_offset_origin():
    # A frame trimmed to start at raw column 100: the header counts its own pixels from 1.
    model = WORKED.with_parameters(distortion=(0.0, 0.0, 0.0, 0.07))
    for m in (WORKED, model):
        solution = make_solution(m)
        result = solution_wcs(solution, (3000,), origin=(0, 100))
        with as_file(result, (3000,)) as hdul:
            lam, _ = world_nm(hdul)
        assert error_px(lam, m.wavelength(100.0 + np.arange(3000.0))) <= GRATING_TOLERANCE_PX


def test_table_refuses_non_monotonic_index():
    # WCSLIB aborts the whole process on a non-monotonic index vector (fits-wcs-grating.md §5.8):
    # the builder must refuse it before astropy ever sees it.
    with pytest.raises(ValueError, match="strictly increasing"):
        table_wcs([1.0, 3.0, 2.0], np.array([500.0, 501.0, 502.0]), medium="air")
    with pytest.raises(ValueError, match="monotonic"):
        table_wcs([1.0, 2.0, 3.0], np.array([500.0, 502.0, 501.0]), medium="air")


# --------------------------------------------------------------------------------------------
# 2-D images
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("axis", [1, 0])
@pytest.mark.parametrize("distortion", [(), (0.0, 0.0, 0.0, 0.07)])
def test_two_dimensional_without_slit_dependence(axis, distortion):
    model = SMALL.with_parameters(distortion=distortion)
    solution = make_solution(model, axis=axis)
    shape = (24, 1024) if axis == 1 else (1024, 24)
    result = solution_wcs(solution, shape, origin=(5, 0) if axis == 1 else (0, 5))
    assert result.spectral_axis == (1 if axis == 1 else 2)
    assert result.algorithm == ("GRA" if not distortion else "TAB")
    with as_file(result, shape) as hdul:
        lam, slit = world_nm(hdul)
    x = np.arange(1024.0)
    truth = np.broadcast_to(solution.wavelength(x)[np.newaxis, :] if axis == 1
                            else solution.wavelength(x)[:, np.newaxis], shape)
    assert error_px(lam, truth, axis=axis) <= GRATING_TOLERANCE_PX
    # the slit axis gives the raw-frame row (0-based): 5 + image row
    rows = np.indices(shape)[1 - axis]
    np.testing.assert_array_equal(slit, rows + 5.0)


def with_axis(solution, axis: int):
    """The same solution for a frame whose dispersion runs along numpy axis ``axis``."""
    return dataclasses.replace(solution, dispersion_axis=axis)


@pytest.mark.parametrize("axis", [1, 0])
@pytest.mark.parametrize("medium", ["air", "vacuum"])
def test_tilted_lines_give_a_two_dimensional_table(tilted_arc, axis, medium):
    # A real whole-slit solution (lines tilted by 2 degrees and curved by 0.6 px on the simulated
    # frame, the slit-shift model measured by the calibration): no 1-D header can describe it;
    # both axes become -TAB over one (wavelength, slit) coordinate array.
    sim, solution, _, _ = tilted_arc
    solution = with_axis(solution, axis)
    shape = sim.data.shape if axis == 1 else sim.data.shape[::-1]
    result = solution_wcs(solution, shape, medium=medium)
    assert result.algorithm == "TAB2D"
    assert result.header[f"CTYPE{3 - result.spectral_axis}"] == "SLIT-TAB"
    with as_file(result, shape) as hdul:
        lam, slit = world_nm(hdul)
    idx = np.indices(shape).astype(float)
    x, y = (idx[1], idx[0]) if axis == 1 else (idx[0], idx[1])
    truth = solution.wavelength(x, y, medium=medium)
    err = error_px(lam, truth, axis=axis)
    assert err <= GRATING_TOLERANCE_PX
    assert result.max_error_px == pytest.approx(err, rel=1e-6)
    np.testing.assert_allclose(slit, y, atol=1e-9)
    # the tilt is really there: one row's wavelengths would miss others by more than 0.3 px
    assert error_px(np.broadcast_to(truth[0:1] if axis == 1 else truth[:, 0:1], shape), truth,
                    axis=axis) > 0.3


def test_tilted_solution_on_a_spectrum_uses_one_dimension(tilted_arc):
    # A 1-D spectrum has no slit axis: the reference-row (y = None) wavelengths describe it.
    _, solution, _, _ = tilted_arc
    n = solution.model.n_pixels
    result = solution_wcs(solution, (n,))
    assert result.algorithm in ("GRA", "TAB") and result.header["WCSAXES"] == 1
    with as_file(result, (n,)) as hdul:
        lam, slit = world_nm(hdul)
    assert slit is None
    assert error_px(lam, solution.wavelength(np.arange(n, dtype=float))) <= GRATING_TOLERANCE_PX


# --------------------------------------------------------------------------------------------
# Resampled grids
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("grid", [
    linear_grid(500.0, 520.0, n_bins=400),
    log_grid(500.0, 520.0, velocity_step_kms=10.0),
    user_grid(np.cumsum(np.r_[500.0, np.linspace(0.02, 0.08, 300)])),
], ids=["linear", "log", "user"])
@pytest.mark.parametrize("ndim", [1, 2])
def test_grid_wcs_gives_bin_centres_and_edges(grid, ndim):
    shape = (grid.size,) if ndim == 1 else (7, grid.size)
    result = grid_wcs(grid, medium="vacuum", ndim=ndim, spectral_axis=1, first_row=3.0)
    assert result.ctype.startswith("WAVE")
    with as_file(result, shape) as hdul:
        lam, slit = world_nm(hdul)
        w = WCS(hdul[0].header, hdul)
        edges_pix = np.arange(grid.size + 1) - 0.5
        coords = [edges_pix] + ([np.zeros_like(edges_pix)] if ndim == 2 else [])
        edges = (w.wcs_pix2world(*coords, 0)[0] * u.Unit(w.wcs.cunit[0])).to_value(u.nm)
    np.testing.assert_allclose(lam[..., :] if ndim == 1 else lam[0], grid.centres, rtol=1e-12)
    np.testing.assert_allclose(edges, grid.edges, rtol=1e-12)
    if ndim == 2:
        np.testing.assert_array_equal(slit[:, 0], 3.0 + np.arange(7))
