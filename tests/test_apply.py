"""Tests of :mod:`wavecal.apply`: calibrated FITS files from a solution and a frame.

Check values: astropy.wcs (WCSLIB) evaluates every written header at every pixel; the truth of a
simulated arc (:mod:`wavecal.simulate`, invented Tamsin Hill instruments) checks the whole chain
from raw frame to written header; hashlib's SHA-256 checks the provenance cards and that the
input file is left untouched. The 0.01 px agreement and the 1e-6 relative count conservation are
the issue's requirements.
"""
from __future__ import annotations

import argparse
import hashlib
import os
import stat

import numpy as np
import pandas as pd
import pytest
from astropy import units as u
from astropy.io import fits
from astropy.wcs import WCS
from scipy.optimize import brentq

import wavecal
from wavecal.apply import apply_solution
from wavecal.calibrate import calibrate_frame
from wavecal.calibrated import FLAG_BAD_INPUT, FLAG_EXTRAPOLATED, FLAG_NO_DATA, calibrate_image
from wavecal.cli.apply import add_apply_arguments, run_apply_command
from wavecal.errors import FrameError, SolutionFileError
from wavecal.optics import GratingModel
from wavecal.profile import load_profile
from wavecal.resample import linear_grid, resample
from wavecal.simulate import simulate_arc
from wavecal.solution import Solution

TOLERANCE_PX = 0.01  # the agreement requirement

SMALL = GratingModel(mount="reflection", grooves_per_mm=1200.0, order=1, grating_angle_deg=20.0,
                     deviation_deg=30.0, focal_length_mm=300.0, pixel_mm=0.015, axis_pixel=511.5,
                     n_pixels=1024, tilt_deg=2.0)
DISTORTED = SMALL.with_parameters(distortion=(0.0, 0.0, 0.0, 0.08))


def make_solution(model=SMALL, status="ok", medium="air", axis=1) -> Solution:
    return Solution(status=status, reasons=() if status == "ok" else ("invented for a test",),
                    medium=medium, model=model, lines=pd.DataFrame(),
                    covered_range_px=(100.0, 900.0), dispersion_axis=axis)


def sha256(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def write_frame(path, data, variance=None, header=None):
    hdus = [fits.PrimaryHDU(data, header=header)]
    if variance is not None:
        hdus.append(fits.ImageHDU(variance, name="VARIANCE"))
    fits.HDUList(hdus).writeto(path)
    return path


def wcs_wavelength_nm(path, hdu=0) -> np.ndarray:
    """astropy's wavelength (nm) at every pixel of an HDU of a written file (0-based pixels)."""
    with fits.open(path) as hdul:
        w = WCS(hdul[hdu].header, hdul)
        shape = hdul[hdu].data.shape
        grids = np.indices(shape, dtype=float)[::-1]
        world = w.wcs_pix2world(*[g.ravel() for g in grids], 0)
        i = next(k for k, t in enumerate(w.wcs.ctype) if t[:4] in ("AWAV", "WAVE"))
        return (world[i] * u.Unit(w.wcs.cunit[i])).to_value(u.nm).reshape(shape)


def expected_extrapolated(solution, shape) -> np.ndarray:
    """The solution's own extrapolation test at every pixel of a frame (dispersion along rows)."""
    x = np.arange(shape[1], dtype=float)
    if getattr(solution, "slit", None) is None:  # the wavelength does not depend on the row
        return np.broadcast_to(solution.extrapolated(x), shape)
    return solution.extrapolated(x[np.newaxis, :], np.arange(shape[0], dtype=float)[:, np.newaxis])


def error_px(lam, truth, axis=-1) -> float:
    return float(np.max(np.abs(lam - truth) / np.abs(np.gradient(truth, axis=axis))))


# --------------------------------------------------------------------------------------------
# A simulated arc, calibrated blind, then applied to its own raw file
# --------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def arc(tmp_path_factory):
    folder = tmp_path_factory.mktemp("arc")
    profile = load_profile("tho_longslit")
    sim = simulate_arc(profile, seed=4, lamps=("Hg", "Ne", "Ar"))
    frame = sim.write(folder / "arc.fits")
    solution = calibrate_frame(frame, profile)
    assert solution.status == "ok"
    solution_path = solution.write(folder / "arc.solution.json")
    os.chmod(frame, stat.S_IRUSR | stat.S_IRGRP | stat.S_IROTH)  # read-only input
    return sim, solution, solution_path, frame


def test_wcs_only_output_of_a_simulated_arc(arc, tmp_path):
    sim, solution, solution_path, frame = arc
    before = sha256(frame)
    result = apply_solution(solution_path, frame, tmp_path / "out.fits")
    assert sha256(frame) == before  # the input file is never modified
    assert not os.access(frame, os.W_OK) or os.geteuid() == 0
    assert result.output.is_file() and result.status == "ok"
    with fits.open(result.output) as hdul:
        assert [h.name for h in hdul][1:] == ["FLAGS"] + (["WAVE-TAB"] if result.algorithm == "TAB"
                                                          else [])
        np.testing.assert_array_equal(hdul[0].data, sim.data)  # the pixels are kept as they were
        head = hdul[0].header
        flags = hdul["FLAGS"].data
        history = [str(v) for v in head["HISTORY"]]
        assert hdul[0].verify_checksum() == 1
    # provenance: solution file name and SHA-256, software version
    assert head["WCARCFIL"] == "arc.solution.json" and head["WCARCSHA"] == sha256(solution_path)
    assert f"sha256 {sha256(solution_path)}" in history
    assert "solution file: arc.solution.json" in history
    assert any(f"wavecal {wavecal.__version__}" in line for line in history)
    assert head["WCVERS"] == wavecal.__version__
    # the header agrees with the solution at every pixel (4128 columns, overscan included) ...
    lam = wcs_wavelength_nm(result.output)
    x = np.arange(sim.data.shape[1], dtype=float)
    y = np.arange(sim.data.shape[0], dtype=float)[:, np.newaxis]
    truth = np.broadcast_to(solution.wavelength(x[np.newaxis, :], y), lam.shape)
    assert error_px(lam, truth) <= TOLERANCE_PX
    # ... and with the simulation's truth at the true line centres, as well as the solution does
    lines = sim.lines[~sim.lines["ghost"] & sim.lines["listed"]]
    xs = lines["x_true"].to_numpy()
    middle = sim.data.shape[0] // 2
    lam_at = np.interp(xs, x, lam[middle])
    true_err = np.abs(lam_at - sim.true_wavelength(xs)) / np.abs(sim.truth.dispersion(xs))
    sol_err = np.abs(solution.wavelength(xs) - sim.true_wavelength(xs)) / np.abs(sim.truth.dispersion(xs))
    assert np.all(true_err <= sol_err + TOLERANCE_PX)
    # extrapolation honesty: flagged exactly where the solution is extrapolated
    np.testing.assert_array_equal(flags & FLAG_EXTRAPOLATED > 0,
                                  expected_extrapolated(solution, flags.shape))
    assert (flags[middle] == 0).any() and (flags[middle] & FLAG_EXTRAPOLATED).any()
    lo, hi = solution.covered_range_px
    assert head["WCCOVLO"] == pytest.approx(lo) and head["WCCOVHI"] == pytest.approx(hi)
    assert head["WCLAMLO"] == pytest.approx(min(solution.wavelength(np.array([lo, hi]))))


def test_resampled_simulated_arc_conserves_counts(arc, tmp_path):
    sim, solution, solution_path, frame = arc
    result = apply_solution(solution_path, frame, tmp_path / "lin.fits", grid="linear",
                            grid_options={"step": 0.05}, medium="vacuum")
    with fits.open(result.output) as hdul:
        out = hdul[0].data.astype(np.float64)
        flags = hdul["FLAGS"].data
        head = hdul[0].header
    assert head["CTYPE1"] == "WAVE" and head["WCAIRVAC"].startswith("Ciddor 1996")
    # the default range spans every pixel: every count lands somewhere (1e-6 relative)
    total = sim.data.astype(np.float64).sum()
    assert out.sum() == pytest.approx(total, rel=1e-6)
    np.testing.assert_allclose(out.sum(axis=1), sim.data.astype(np.float64).sum(axis=1), rtol=1e-6)
    # bins beyond the lines' range are flagged; the rest are not (on a row the lines were
    # traced over; the slit model flags rows beyond them too)
    middle = out.shape[0] // 2
    lam = wcs_wavelength_nm(result.output)[middle]
    trusted = np.sort(solution.wavelength(np.array(solution.covered_range_px), float(middle),
                                          medium="vacuum"))
    step = head["CDELT1"]
    row = flags[middle]
    assert np.all(row[(lam < trusted[0] - step) | (lam > trusted[1] + step)] & FLAG_EXTRAPOLATED)
    assert not np.any(row[(lam > trusted[0] + step) & (lam < trusted[1] - step)])
    if getattr(solution, "slit", None) is not None:
        y = np.arange(out.shape[0], dtype=float)
        untraced = solution.extrapolated(np.full(y.shape, 0.5 * sum(solution.covered_range_px)), y)
        assert np.all(flags[untraced] & FLAG_EXTRAPOLATED)


# --------------------------------------------------------------------------------------------
# A simulated arc whose lines tilt and curve along the slit (binned 2x2 to keep it quick)
# --------------------------------------------------------------------------------------------

#: The centroid measurement of the straightening test reads a core of +-4 px around a line and
#: estimates the background as the median of the wings 7-15 px away on both sides.
CORE_PX = 4
WINGS_PX = (7, 15)
#: A neighbour fainter than this fraction of a line's flux cannot spoil that line's centroid:
#: wholly inside one wing (a peak of about a quarter of its flux per pixel, FWHM ~4 px) it lifts
#: the median background by at most ~F_n/4, which moves a centroid taken over 9 core pixels
#: at most ~0.5 px x 9 x (F_n/4) / F, about 1.1 x F_n/F px: 0.01 px, a tenth of the 0.1 px
#: allowed; in the core its light moves the centroid by at most F_n/F x its distance (< 0.05 px).
NEIGHBOUR_FRACTION = 0.01
#: Light of a line's image beyond this many FWHM from its centre is negligible (the simulated
#: profile is a slit image narrower than the FWHM blurred by a Gaussian: 2 FWHM >= 3.5 sigma past
#: the slit edge, below 1e-3 of the peak).
REACH_FWHM = 2.0


def isolated_bright_lines(sim, min_snr=100.0):
    """Listed first-order lines, unsaturated, whose centroid no other simulated line can bias.

    A line is isolated when every other simulated line (listed or not, ghosts included) whose
    light reaches the measurement window (within ``WINGS_PX[1]`` plus ``REACH_FWHM`` of its own
    FWHM) is fainter than ``NEIGHBOUR_FRACTION`` of the line: both the distance and the
    brightness of a neighbour decide, as a faint line 9 px away is harmless and a brighter one
    biases the measured centroid by a third of a pixel (Ne 864.70 beside Ne 865.44 nm).
    """
    every = sim.lines
    lines = every[every["listed"] & ~every["ghost"] & ~every["saturated"] & (every["snr"] > min_snr)]
    x, flux = every["x_true"].to_numpy(), every["flux_e"].to_numpy()
    reach = WINGS_PX[1] + REACH_FWHM * every["fwhm_px"].to_numpy()
    keep = []
    for index, line in lines.iterrows():
        near = (np.abs(x - line["x_true"]) < reach) & (every.index != index)
        keep.append(not np.any(near & (flux > NEIGHBOUR_FRACTION * line["flux_e"])))
    return lines[keep]


def test_tilted_arc_gets_a_two_dimensional_table(tilted_arc, tmp_path):
    sim, solution, solution_path, frame = tilted_arc
    result = apply_solution(solution_path, frame, tmp_path / "out.fits")
    assert result.algorithm == "TAB2D"
    lam = wcs_wavelength_nm(result.output)
    shape = sim.data.shape
    x = np.arange(shape[1], dtype=float)[np.newaxis, :]
    y = np.arange(shape[0], dtype=float)[:, np.newaxis]
    assert error_px(lam, solution.wavelength(x, y)) <= TOLERANCE_PX  # every pixel
    # against the simulation's truth, on the traced rows, where the lines really are
    rows = np.arange(*sim.slit_rows, dtype=float)[:, np.newaxis]
    lines = isolated_bright_lines(sim, min_snr=30.0)
    xs = lines["x_true"].to_numpy()[np.newaxis, :]
    seen = xs + sim.true_shift(xs, rows)  # where each line lies on each row
    with fits.open(result.output) as hdul:
        w = WCS(hdul[0].header, hdul)
        world = w.wcs_pix2world(seen.ravel(), np.broadcast_to(rows, seen.shape).ravel(), 0)[0]
    truth = sim.true_wavelength(seen, rows)
    dispersion = np.abs(sim.truth.dispersion(xs))
    header_err = np.abs(world.reshape(seen.shape) - truth) / dispersion
    solution_err = np.abs(solution.wavelength(seen, rows) - truth) / dispersion
    assert np.all(header_err <= solution_err + TOLERANCE_PX)
    assert np.max(header_err) < 0.1
    with fits.open(result.output) as hdul:
        flags = hdul["FLAGS"].data
    np.testing.assert_array_equal(flags & FLAG_EXTRAPOLATED > 0, expected_extrapolated(solution, shape))


def test_tilted_arc_is_straightened_by_resampling(tilted_arc, tmp_path):
    # The lines tilt by 2 degrees along the slit: on the raw frame a line's centroid moves by
    # several pixels between the top and bottom thirds of the slit. After resampling row by row
    # onto one wavelength grid it must stay put, at the true wavelength.
    sim, solution, solution_path, frame = tilted_arc
    result = apply_solution(solution_path, frame, tmp_path / "lin.fits", grid="linear")
    with fits.open(result.output) as hdul:
        out = hdul[0].data.astype(np.float64)
        w = WCS(hdul[0].header)
        lam = w.wcs_pix2world(np.arange(out.shape[1]), np.zeros(out.shape[1]), 0)[0] * 1e9
    raw = sim.data.astype(np.float64)
    rows = np.arange(sim.slit_rows[0] + 2, sim.slit_rows[1] - 2)
    third = rows.size // 3
    lines = isolated_bright_lines(sim)
    assert len(lines) >= 5

    def centroids(image, centre, coords):
        core = np.arange(centre - CORE_PX, centre + CORE_PX + 1)
        near, far = WINGS_PX
        wings = np.r_[centre - far:centre - near + 1, centre + near:centre + far + 1]
        seg = image[rows][:, core] - np.median(image[rows][:, wings], axis=1, keepdims=True)
        c = (seg * coords[core]).sum(axis=1) / seg.sum(axis=1)
        return np.median(c[:third]), np.median(c[-third:]), np.median(c)

    for _, line in lines.iterrows():
        dispersion = abs(float(sim.truth.dispersion(line["x_true"])))
        top, bottom, _ = centroids(raw, int(round(line["x_true"])), np.arange(raw.shape[1], dtype=float))
        assert abs(top - bottom) > 2.0  # pixels: the tilt is there on the raw frame
        top, bottom, middle = centroids(out, int(np.argmin(np.abs(lam - line["wavelength_nm"]))), lam)
        assert abs(top - bottom) / dispersion < 0.15
        assert abs(middle - line["wavelength_nm"]) / dispersion < 0.1


# --------------------------------------------------------------------------------------------
# Constructed solutions and frames
# --------------------------------------------------------------------------------------------

def test_variance_is_propagated_and_matches_resample(tmp_path):
    rng = np.random.default_rng(8)
    data = rng.poisson(50.0, (6, 1024)).astype(np.float64)
    var = data + 9.0
    data[2, 300] = np.nan
    solution = make_solution(DISTORTED)
    solution_path = solution.write(tmp_path / "s.solution.json")
    frame = write_frame(tmp_path / "frame.fits", data, var)
    grid = linear_grid(480.0, 560.0, step_nm=0.05)  # starts before, ends inside the frame
    result = apply_solution(solution_path, frame, tmp_path / "out.fits", grid=grid)
    edges = solution.wavelength(np.arange(1025) - 0.5)
    expected = resample(data, edges, grid, variance=var)
    with fits.open(result.output) as hdul:
        np.testing.assert_allclose(hdul[0].data, expected.flux, rtol=1e-12)
        np.testing.assert_allclose(hdul["VARIANCE"].data, expected.variance, rtol=1e-12)
        flags = hdul["FLAGS"].data
        assert hdul["VARIANCE"].header["CTYPE1"] == hdul[0].header["CTYPE1"] == "AWAV"
    centres = grid.centres
    lam_min = edges.min()
    assert np.all(flags[:, centres < lam_min - 0.05] & FLAG_NO_DATA)
    assert not np.any(flags[:, centres > lam_min + 0.05] & FLAG_NO_DATA)
    np.testing.assert_array_equal(flags[2] & FLAG_BAD_INPUT > 0, expected.bad[2])
    assert (flags[2] & FLAG_BAD_INPUT).any() and not (flags[[0, 1, 3, 4, 5]] & FLAG_BAD_INPUT).any()


@pytest.mark.parametrize("axis", [1, 0])
def test_distortion_writes_a_table_that_astropy_reads_on_every_hdu(tmp_path, axis):
    solution = make_solution(DISTORTED, axis=axis)
    shape = (16, 1024) if axis == 1 else (1024, 16)
    data = np.ones(shape, dtype=np.float32)
    frame = write_frame(tmp_path / "frame.fits", data, data * 2)
    result = apply_solution(solution.write(tmp_path / "s.json"), frame, tmp_path / "out.fits",
                            medium="vacuum")
    assert result.algorithm == "TAB" and result.ctype == "WAVE-TAB"
    x = np.arange(1024, dtype=float)
    truth = solution.wavelength(x, medium="vacuum")
    truth = np.broadcast_to(truth if axis == 1 else truth[:, np.newaxis], shape)
    for hdu in (0, "VARIANCE", "FLAGS"):
        lam = wcs_wavelength_nm(result.output, hdu)
        assert error_px(lam, truth, axis=axis) <= TOLERANCE_PX
    with fits.open(result.output) as hdul:
        assert hdul[0].header["WCMAXERR"] <= TOLERANCE_PX
        ext = hdul["FLAGS"].data & FLAG_EXTRAPOLATED > 0
    expect = solution.extrapolated(x)
    np.testing.assert_array_equal(ext, np.broadcast_to(expect if axis == 1 else expect[:, None], shape))


def test_one_dimensional_spectrum_in_an_extension(tmp_path):
    spectrum = np.linspace(1.0, 2.0, 1024)
    frame = tmp_path / "spec.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.ImageHDU(spectrum, name="SPEC")]).writeto(frame)
    solution = make_solution(SMALL, medium="vacuum")
    result = apply_solution(solution.write(tmp_path / "s.json"), frame, tmp_path / "out.fits",
                            medium="air")
    assert result.ctype == "AWAV-GRI" and result.shape == (1024,)
    lam = wcs_wavelength_nm(result.output)
    assert error_px(lam, solution.wavelength(np.arange(1024.0), medium="air")) <= TOLERANCE_PX
    res = apply_solution(tmp_path / "s.json", frame, tmp_path / "log.fits", grid="log")
    with fits.open(res.output) as hdul:
        assert hdul[0].header["CTYPE1"] == "WAVE-LOG"
        assert hdul[0].data.sum() == pytest.approx(spectrum.sum(), rel=1e-6)


def test_trimmed_frame_with_origin(tmp_path):
    solution = make_solution(SMALL)
    frame = write_frame(tmp_path / "trim.fits", np.ones((4, 900), dtype=np.float32))
    result = apply_solution(solution.write(tmp_path / "s.json"), frame, tmp_path / "out.fits",
                            origin=(10, 50))
    lam = wcs_wavelength_nm(result.output)
    truth = np.broadcast_to(solution.wavelength(50.0 + np.arange(900)), (4, 900))
    assert error_px(lam, truth) <= TOLERANCE_PX
    with fits.open(result.output) as hdul:
        w = WCS(hdul[0].header)
        assert w.wcs_pix2world([[0.0, 0.0], [0.0, 3.0]], 0)[:, 1].tolist() == [10.0, 13.0]


def test_tilted_lines_are_rectified_by_resampling(tilted_arc):
    # A line drawn on every row where the real whole-slit solution says its wavelength lands
    # (the slit-shift model measured on a simulated arc tilted by 2 degrees) lands in the same
    # wavelength bins on every row after resampling.
    sim, solution, _, _ = tilted_arc
    top, bottom = (int(v) for v in solution.slit.rows_covered)
    n = sim.data.shape[1]
    y = np.arange(top, bottom + 1, dtype=float)[:, np.newaxis]
    x = np.arange(n, dtype=float)[np.newaxis, :]
    x_line = 0.5 * sum(solution.covered_range_px) + 0.3
    lam_line = float(solution.wavelength(x_line))                # on the reference row
    centre = solution.pixel(lam_line, y)                          # where it falls on each row
    data = np.zeros(sim.data.shape)
    data[top:bottom + 1] = np.exp(-0.5 * ((x - centre) / 1.5) ** 2)
    grid = linear_grid(lam_line - 1.0, lam_line + 1.0, step_nm=0.01)
    hdul = calibrate_image(solution, data, grid=grid)
    out = hdul[0].data[top:bottom + 1]
    centroid = (out * grid.centres).sum(axis=1) / out.sum(axis=1)
    dispersion = abs(float(solution.model.dispersion(x_line)))
    assert np.max(np.abs(centroid - lam_line)) / dispersion < 0.02   # all rows agree
    lit = data[top:bottom + 1]
    raw_centroid = (lit * x).sum(axis=1) / lit.sum(axis=1)
    assert np.ptp(raw_centroid) > 0.9                               # they did not before
    # WCS only: a 2-D table, and flags follow the tilted extrapolation boundary
    wcs_only = calibrate_image(solution, data)
    assert wcs_only[0].header["WCALGOR"] == "TAB2D"
    rows = np.arange(data.shape[0], dtype=float)[:, np.newaxis]
    flags = wcs_only["FLAGS"].data & FLAG_EXTRAPOLATED > 0
    np.testing.assert_array_equal(flags, solution.extrapolated(x + 0 * rows, rows))


# --------------------------------------------------------------------------------------------
# Refusals and errors
# --------------------------------------------------------------------------------------------

def test_refuses_to_replace_the_input(tmp_path):
    frame = write_frame(tmp_path / "f.fits", np.ones((4, 1024)))
    solution_path = make_solution().write(tmp_path / "s.json")
    before = sha256(frame)
    with pytest.raises(FrameError, match="would replace the input"):
        apply_solution(solution_path, frame, frame)
    with pytest.raises(FrameError, match="would replace the input"):
        apply_solution(solution_path, frame, tmp_path / "." / "s.json")
    assert sha256(frame) == before


def test_errors_name_the_file_and_leave_nothing_behind(tmp_path):
    solution_path = make_solution().write(tmp_path / "s.json")
    with pytest.raises(FrameError, match="missing.fits: file not found"):
        apply_solution(solution_path, tmp_path / "missing.fits", tmp_path / "o.fits")
    not_fits = tmp_path / "junk.fits"
    not_fits.write_text("not a FITS file")
    with pytest.raises(FrameError, match="junk.fits"):
        apply_solution(solution_path, not_fits, tmp_path / "o.fits")
    frame = write_frame(tmp_path / "f.fits", np.ones((4, 1024)))
    # A frame placed (by its origin) where the diffraction angle passes 90 degrees, far off the
    # detector: the wavelength turns back there, so there is no monotonic scale to describe.
    x90 = brentq(lambda x: float(SMALL.beta(x)) - 90.0, 1e3, 1e7)
    with pytest.raises(FrameError, match="f.fits: cannot apply s.json: .*no finite, monotonic"):
        apply_solution(solution_path, frame, tmp_path / "o.fits", origin=(0, int(x90) - 500))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["f.fits", "junk.fits", "s.json"]
    failed = Solution(status="failed", reasons=("too few lines",), medium="air", model=None,
                      lines=pd.DataFrame())
    with pytest.raises(SolutionFileError, match="failed .too few lines."):
        apply_solution(failed.write(tmp_path / "bad.json"), frame, tmp_path / "o.fits")
    with pytest.raises(SolutionFileError, match="nope.json"):
        apply_solution(tmp_path / "nope.json", frame, tmp_path / "o.fits")


# --------------------------------------------------------------------------------------------
# Command line
# --------------------------------------------------------------------------------------------

def _args(*argv):
    parser = argparse.ArgumentParser(prog="wavecal apply")
    add_apply_arguments(parser)
    return parser.parse_args([str(a) for a in argv])


def test_cli_writes_named_outputs_and_exit_codes(tmp_path, capsys):
    frames = [write_frame(tmp_path / f"sci{i}.fits", np.ones((4, 1024))) for i in range(2)]
    ok = make_solution().write(tmp_path / "ok.json")
    out = tmp_path / "calibrated"
    assert run_apply_command(_args(ok, *frames, "-o", out, "--medium", "vacuum")) == 0
    assert sorted(p.name for p in out.iterdir()) == ["sci0.wcal.fits", "sci1.wcal.fits"]
    assert "WAVE-GRA" in capsys.readouterr().out
    # one frame to a named file, resampled onto a user grid from a text file
    grid_file = tmp_path / "grid.txt"
    grid_file.write_text("# bin edges, nm\n" + "\n".join(f"{v:.3f}" for v in np.arange(500, 540, 0.1)))
    single = tmp_path / "single.fits"
    assert run_apply_command(_args(ok, frames[0], "-o", single, "--resample", "user",
                                   "--grid-file", grid_file)) == 0
    with fits.open(single) as hdul:
        assert hdul[0].header["WCRESAMP"] == "user" and hdul[0].data.shape == (4, 399)
    # a suspect solution is applied, with exit code 3; a failed one is not (4)
    suspect = make_solution(status="suspect").write(tmp_path / "suspect.json")
    assert run_apply_command(_args(suspect, frames[0], "-o", tmp_path / "s")) == 3
    assert "suspect" in capsys.readouterr().err
    failed = Solution(status="failed", reasons=("no lines",), medium="air", model=None,
                      lines=pd.DataFrame()).write(tmp_path / "failed.json")
    assert run_apply_command(_args(failed, frames[0], "-o", tmp_path / "f")) == 4
    assert not (tmp_path / "f").exists()
    # bad input: the other frames are still done
    code = run_apply_command(_args(ok, tmp_path / "missing.fits", frames[1], "-o", tmp_path / "b"))
    assert code == 1
    assert "missing.fits" in capsys.readouterr().err
    assert (tmp_path / "b" / "sci1.wcal.fits").is_file()
    bad_grid = tmp_path / "bad.txt"
    bad_grid.write_text("500\n499\n")
    assert run_apply_command(_args(ok, frames[0], "--resample", "user", "--grid-file", bad_grid,
                                   "-o", tmp_path / "c")) == 1
    assert "bad.txt: not a usable grid file" in capsys.readouterr().err


@pytest.mark.parametrize("options", [
    ("--bins", "100"),                                   # grid option without --resample
    ("--resample", "linear", "--grid-file", "g.txt"),
    ("--resample", "user", "--step", "0.1"),
    ("--resample", "user"),                              # user grid without its file
    ("--resample", "log", "--step", "10", "--bins", "100"),
])
def test_cli_contradictory_grid_options_are_usage_errors(tmp_path, capsys, options):
    ok = make_solution().write(tmp_path / "ok.json")
    frame = write_frame(tmp_path / "f.fits", np.ones((4, 1024)))
    assert run_apply_command(_args(ok, frame, "-o", tmp_path / "out", *options)) == 2
    assert "error:" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()
