"""Tests of :mod:`wavecal.extract`: robust collapse across the slit.

Frames are invented (a "Tamsin Hill" test camera) and built in memory; random draws are seeded.
The noise model checked is the one of :mod:`wavecal.frames` (Poisson + read noise, summed
over the rows: variances of independent pixels add).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy.special import ndtr

from wavecal.extract import Spectrum, extract_spectrum
from wavecal.frames import frame_from_array
from wavecal.peaks import find_peaks
from wavecal.profile import profile_from_dict

GAIN = 1.0
READ_NOISE = 4.0


def camera(shape, *, dispersion_axis=1, trim=None):
    det = {"pixel_size_um": 15.0, "shape": list(shape), "dispersion_axis": dispersion_axis,
           "saturation_adu": 60000, "gain_e_per_adu": GAIN, "read_noise_e": READ_NOISE, "bias_adu": 0.0}
    if trim is not None:
        det["trim"] = trim
    return profile_from_dict({
        "instrument": {"name": "Tamsin Hill test camera"},
        "grating": {"mount": "approximate", "grooves_per_mm": 0.0},
        "approximate": {"central_wavelength_nm": 500.0, "dispersion_nm_per_px": 0.1},
        "detector": det,
    })


def arc_image(rng, n_rows, n_cols, centres, fluxes, sigma=1.4, tilt=0.0, lit=(0, None)):
    """Expected electrons per pixel: lines across the lit rows (tilt in pixels per row)."""
    rows = np.arange(n_rows)[:, None, None]
    cols = np.arange(n_cols)[None, :, None]
    c = np.asarray(centres)[None, None, :] + tilt * (rows - n_rows / 2)
    e = ndtr((cols + 0.5 - c) / sigma) - ndtr((cols - 0.5 - c) / sigma)
    image = np.sum(e * np.asarray(fluxes)[None, None, :], axis=2)
    lit_rows = np.zeros(n_rows, bool)
    lit_rows[lit[0]:lit[1]] = True
    return np.where(lit_rows[:, None], image, 0.0) + 2.0


def observe(rng, expected):
    return (rng.poisson(expected) + rng.normal(0.0, READ_NOISE, expected.shape)).astype(np.float32)


def test_clean_frame_sum_and_variance():
    rng = np.random.default_rng(1)
    expected = np.full((200, 1000), 50.0)
    frame = frame_from_array(observe(rng, expected), camera((200, 1000)))
    spectrum = extract_spectrum(frame, rows=(0, 200))
    assert isinstance(spectrum, Spectrum)
    plain = frame.data.sum(axis=0, dtype=np.float64)
    # without outliers the robust sum is the plain sum (a false rejection is rarer than 1e-6)
    assert np.count_nonzero(spectrum.flux != plain) <= 2
    # the propagated variance matches the actual scatter of the sums (Poisson + read noise)
    expected_var = 200 * (50.0 + READ_NOISE ** 2)
    assert spectrum.variance.mean() == pytest.approx(expected_var, rel=0.01)
    assert spectrum.flux.var() == pytest.approx(expected_var, rel=0.1)
    assert spectrum.n_rows == 200 and spectrum.rows == (0, 200) and len(spectrum) == 1000


def test_cosmic_rays_are_rejected_and_make_no_peak():
    rng = np.random.default_rng(2)
    n_rows, n_cols = 120, 800
    centres = np.array([100.3, 300.7, 500.2, 700.9])
    expected = arc_image(rng, n_rows, n_cols, centres, [200.0] * 4)
    clean = observe(rng, expected)
    hit = clean.copy()
    hit[40:45, 400] += 30000.0  # a track five pixels long along the slit
    hit[60:67, 200] += 8000.0  # one seven pixels long, on a line
    hit[80, 401:404] += 15000.0  # one along the dispersion
    hit[117:120, 550] += 20000.0  # one at the end of the slit
    hit[10, 600] += 50000.0  # a single hot pixel
    profile = camera((n_rows, n_cols))
    a = extract_spectrum(frame_from_array(clean, profile), rows=(0, n_rows))
    b = extract_spectrum(frame_from_array(hit, profile), rows=(0, n_rows))
    sigma = np.sqrt(a.variance)
    assert np.all(np.abs(b.flux - a.flux) < 5.0 * sigma)
    peaks = find_peaks(b)
    assert len(peaks) == 4
    assert np.all(np.abs(peaks.table["x"].to_numpy() - centres) < 0.05)


def test_tilted_lines_keep_their_flux():
    rng = np.random.default_rng(3)
    n_rows, n_cols = 300, 400
    centres = np.array([100.0, 200.5, 300.25])
    expected = arc_image(rng, n_rows, n_cols, centres, [3000.0] * 3, tilt=0.02)  # 6 px over the slit
    frame = frame_from_array(observe(rng, expected), camera((n_rows, n_cols)))
    spectrum = extract_spectrum(frame, rows=(0, n_rows))
    plain = frame.data.sum(axis=0, dtype=np.float64)
    for c in centres:
        window = slice(int(c) - 12, int(c) + 13)
        total_err = np.sqrt(spectrum.variance[window].sum())
        assert abs(spectrum.flux[window].sum() - plain[window].sum()) < 0.5 * total_err


def test_automatic_rows_and_cosmic_ray_in_dark_rows():
    rng = np.random.default_rng(4)
    n_rows, n_cols = 200, 600
    expected = arc_image(rng, n_rows, n_cols, [150.0, 400.0], [500.0, 800.0], lit=(60, 150))
    data = observe(rng, expected)
    data[10, 50:60] += 20000.0  # a bright cosmic ray in a dark row
    spectrum = extract_spectrum(frame_from_array(data, camera((n_rows, n_cols))))
    assert spectrum.rows == (60, 150) and spectrum.n_rows == 90
    # a higher threshold selects the same lit block
    frame = frame_from_array(data, camera((n_rows, n_cols)))
    assert extract_spectrum(frame, row_fraction=0.6).rows == (60, 150)
    # lit rows three rows from the frame's end: the dark end rows are not filled with light
    expected = arc_image(rng, n_rows, n_cols, [150.0, 400.0], [500.0, 800.0], lit=(3, 100))
    frame = frame_from_array(observe(rng, expected), camera((n_rows, n_cols)))
    assert extract_spectrum(frame).rows == (3, 100)
    whole = extract_spectrum(frame, rows=(0, 100))
    plain = frame.data[:100].sum(axis=0, dtype=np.float64)
    assert np.all(np.abs(whole.flux - plain) < 3.0 * np.sqrt(whole.variance))


def test_dark_frame_uses_all_rows():
    data = np.zeros((50, 100), np.float32)
    spectrum = extract_spectrum(frame_from_array(data, camera((50, 100))))
    assert spectrum.rows == (0, 50)


def test_dispersion_along_columns_and_origin():
    rng = np.random.default_rng(5)
    n_rows, n_cols = 64, 500
    expected = arc_image(rng, n_rows, n_cols, [100.0, 250.0], [400.0, 400.0])
    data = observe(rng, expected)
    trim = {"rows": [0, 64], "columns": [0, 500]}
    along_rows = extract_spectrum(frame_from_array(data, camera((n_rows, n_cols), trim=trim)))
    # the same image transposed, on a detector whose wavelength runs along axis 0 and whose
    # illuminated region starts at raw row 20
    raw_t = np.zeros((520, 64), np.float32)
    raw_t[20:] = data.T
    profile_t = camera((520, 64), dispersion_axis=0, trim={"rows": [20, 520], "columns": [0, 64]})
    frame_t = frame_from_array(raw_t, profile_t)
    along_cols = extract_spectrum(frame_t)
    np.testing.assert_allclose(along_cols.flux, along_rows.flux, rtol=1e-6)
    np.testing.assert_array_equal(along_cols.x, np.arange(500) + 20.0)
    np.testing.assert_array_equal(along_rows.x, np.arange(500.0))


def test_saturated_and_bad_columns_are_marked():
    data = np.full((40, 100), 100.0, np.float32)
    data[5, 30] = 70000.0  # one saturated pixel
    data[:, 60] = np.nan  # a dead column
    data[:5, 70] = np.nan  # a few bad pixels only
    spectrum = extract_spectrum(frame_from_array(data, camera((40, 100))), rows=(0, 40))
    assert spectrum.saturated[30] and spectrum.saturated.sum() == 1
    assert spectrum.bad[60] and not spectrum.bad[70] and spectrum.bad.sum() == 1
    # the partly bad column is filled from its neighbours along the slit
    assert spectrum.flux[70] == pytest.approx(40 * 100.0)


def test_invalid_rows():
    frame = frame_from_array(np.zeros((40, 100), np.float32), camera((40, 100)))
    with pytest.raises(ValueError, match="rows"):
        extract_spectrum(frame, rows=(30, 20))
    with pytest.raises(ValueError, match="rows"):
        extract_spectrum(frame, rows=(0, 41))


def test_one_row_frame():
    frame = frame_from_array(np.linspace(0, 10, 100), camera((40, 100)))
    spectrum = extract_spectrum(frame)
    assert spectrum.n_rows == 1
    np.testing.assert_allclose(spectrum.flux, np.linspace(0, 10, 100) * GAIN, rtol=1e-6)
    assert replace(spectrum, binning=2).binning == 2


