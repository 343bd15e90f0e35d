"""Tests of :mod:`wavecal.frames`: FITS reading, bias/overscan, trimming, binning, masks, errors.

Frames are built in memory with numpy and written with astropy.io.fits to ``tmp_path``; the
detector values are invented (a "Tamsin Hill" test camera). FITS conventions checked here
(BZERO/BSCALE scaling of integer data, NAXIS order) are those of the FITS Standard 4.0
(Pence et al. 2010, A&A 524, A42, §5.3 and §4.4.1.1), as implemented by astropy.io.fits.
"""
from __future__ import annotations

import hashlib

import numpy as np
import pytest
from astropy.io import fits

from wavecal.errors import FrameError
from wavecal.frames import Frame, frame_from_array, read_frame
from wavecal.profile import load_profile, profile_from_dict

GAIN = 2.0
READ_NOISE = 3.0


def camera(**detector):
    """An invented test camera (profile of unknown geometry), detector keys overridable."""
    det = {"pixel_size_um": 10.0, "shape": [40, 110], "dispersion_axis": 1, "saturation_adu": 60000,
           "gain_e_per_adu": GAIN, "read_noise_e": READ_NOISE, "bias_adu": 300.0}
    det.update(detector)
    return profile_from_dict({
        "instrument": {"name": "Tamsin Hill test camera"},
        "grating": {"mount": "approximate", "grooves_per_mm": 0.0},
        "approximate": {"central_wavelength_nm": 500.0, "dispersion_nm_per_px": 0.1},
        "detector": det,
        "header": {"binning": {"keyword": "BINXY", "default": "1 1"}},
    })


def signal_image(shape, rng):
    """Smooth positive test signal in ADU."""
    rows, cols = np.indices(shape)
    return 100.0 + 20.0 * np.sin(cols / 7.0) + rows + rng.uniform(0, 5, shape)


def sha256(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


# ------------------------------------------------------------------------------------------------
# Data types and scaling
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("dtype", [np.uint16, np.int16, np.int32, np.float32, np.float64])
def test_read_each_dtype(tmp_path, dtype):
    rng = np.random.default_rng(1)
    profile = camera()
    signal = np.round(signal_image((40, 110), rng))
    raw = signal + 300.0
    if dtype is np.int16:
        raw = raw - 1000.0  # fits in int16 without scaling
    path = tmp_path / f"arc_{np.dtype(dtype).name}.fits"
    fits.PrimaryHDU(raw.astype(dtype)).writeto(path)
    if dtype is np.int16:
        profile = camera(bias_adu=-700.0)
    frame = read_frame(path, profile)
    assert frame.data.dtype == np.float32 and frame.variance.dtype == np.float32
    np.testing.assert_allclose(frame.data, signal * GAIN, rtol=1e-6)
    np.testing.assert_allclose(frame.variance, np.maximum(signal * GAIN, 0) + READ_NOISE ** 2, rtol=1e-6)
    assert frame.path == path and frame.origin == (0, 0) and frame.binning == (1, 1)


def test_int16_with_bzero(tmp_path):
    # FITS Standard 4.0 §5.3: physical = BZERO + BSCALE * stored; unsigned 16-bit data are
    # stored as int16 with BZERO = 32768.
    rng = np.random.default_rng(2)
    signal = np.round(signal_image((40, 110), rng))
    raw = (signal + 40000.0).astype(np.uint16)  # above 32767: needs the BZERO offset
    path = tmp_path / "u16.fits"
    fits.PrimaryHDU(raw).writeto(path)
    with fits.open(path, do_not_scale_image_data=True) as hdul:
        stored = hdul[0].data
        assert stored.dtype.kind == "i" and stored.dtype.itemsize == 2 and hdul[0].header["BZERO"] == 32768
    frame = read_frame(path, camera(bias_adu=40000.0))
    np.testing.assert_allclose(frame.data, signal * GAIN)

    # an explicit BZERO/BSCALE pair on int16 data
    stored = np.round(signal - 500).astype(np.int16)
    hdu = fits.PrimaryHDU(stored)
    hdu.header["BSCALE"] = 2.0
    hdu.header["BZERO"] = 1000.0
    path2 = tmp_path / "scaled.fits"
    hdu.writeto(path2)
    frame = read_frame(path2, camera(bias_adu=0.0))
    np.testing.assert_allclose(frame.data, (2.0 * stored + 1000.0) * GAIN, rtol=1e-6)


def test_raw_file_is_not_modified_and_arrays_are_read_only(tmp_path):
    path = tmp_path / "arc.fits"
    fits.PrimaryHDU(np.full((40, 110), 500, np.uint16)).writeto(path)
    before = sha256(path)
    frame = read_frame(path, camera())
    assert sha256(path) == before
    for array in (frame.data, frame.variance, frame.bad, frame.saturated):
        assert not array.flags.writeable
    frame.header["NEWKEY"] = 1  # the header is a copy
    assert "NEWKEY" not in fits.getheader(path)


# ------------------------------------------------------------------------------------------------
# Bias, overscan, trim, masks
# ------------------------------------------------------------------------------------------------

def test_overscan_per_row_is_subtracted():
    rng = np.random.default_rng(3)
    profile = camera(overscan={"rows": [0, 40], "columns": [100, 110]},
                     trim={"rows": [0, 40], "columns": [0, 96]})
    signal = signal_image((40, 96), rng)
    bias = 1000.0 + 5.0 * np.arange(40)[:, None]  # bias drifting from row to row
    raw = np.empty((40, 110))
    raw[:, :96] = signal + bias
    raw[:, 96:] = bias + rng.normal(0, 0.5, (40, 14))
    raw[7, 103] = 65000.0  # a hot pixel in the overscan does not matter
    frame = frame_from_array(raw.astype(np.float32), profile)
    assert frame.data.shape == (40, 96)
    np.testing.assert_allclose(frame.data, signal * GAIN, atol=0.6 * GAIN)
    # the profile's constant bias is not used when there is an overscan
    assert abs(np.median(frame.data - signal * GAIN)) < 0.2


def test_overscan_rows_give_per_column_level():
    rng = np.random.default_rng(4)
    profile = camera(overscan={"rows": [36, 40], "columns": [0, 110]},
                     trim={"rows": [0, 34], "columns": [0, 110]})
    signal = signal_image((34, 110), rng)
    bias = 800.0 + 2.0 * np.arange(110)[None, :]
    raw = np.vstack([signal + bias, np.repeat(bias, 6, axis=0) + rng.normal(0, 0.3, (6, 110))])
    frame = frame_from_array(raw, profile)
    np.testing.assert_allclose(frame.data, signal * GAIN, atol=0.5 * GAIN)


def test_constant_bias_and_master_bias():
    rng = np.random.default_rng(5)
    signal = signal_image((40, 110), rng)
    master = 300.0 + rng.normal(0, 2.0, (40, 110))
    frame = frame_from_array(signal + 300.0, camera())
    np.testing.assert_allclose(frame.data, signal * GAIN, rtol=1e-5)
    frame = frame_from_array(signal + master, camera(), bias=master)
    np.testing.assert_allclose(frame.data, signal * GAIN, rtol=1e-5)
    with pytest.raises(FrameError, match="bias frame of shape"):
        frame_from_array(signal + master, camera(), bias=master[:10])


def test_saturation_from_raw_adu_and_nonfinite_pixels():
    profile = camera(saturation_adu=1000.0, bias_adu=900.0)
    raw = np.full((40, 110), 950.0)
    raw[10, 20] = 1000.0  # at the level: saturated although only 100 ADU above bias
    raw[11, 21] = 999.0
    raw[12, 22] = np.nan
    raw[13, 23] = np.inf
    frame = frame_from_array(raw, profile)
    assert frame.saturated[10, 20] and not frame.saturated[11, 21]
    assert frame.bad[10, 20] and frame.bad[12, 22] and frame.bad[13, 23]
    assert frame.bad.sum() == 3 and frame.saturated.sum() == 1
    assert frame.data[12, 22] == 0.0 and np.isfinite(frame.data).all() and np.isfinite(frame.variance).all()
    assert frame.data[10, 20] == pytest.approx(100.0 * GAIN)


def test_trim_origin_and_binning(tmp_path):
    rng = np.random.default_rng(6)
    # unbinned detector 40 x 110 with data in rows 4..36, columns 10..100; overscan 104..110
    profile = camera(trim={"rows": [4, 36], "columns": [10, 100]},
                     overscan={"rows": [0, 40], "columns": [104, 110]})
    raw = rng.normal(500.0, 1.0, (40, 110))
    frame = frame_from_array(raw, profile)
    assert frame.data.shape == (32, 90) and frame.origin == (4, 10) and frame.binning == (1, 1)
    # the same detector binned 2 x 2: regions are halved (profile regions are unbinned)
    binned = rng.normal(500.0, 1.0, (20, 55))
    binned[2:18, 5:50] += 40.0  # illuminated part, binned rows 2..18, columns 5..50
    path = tmp_path / "binned.fits"
    hdu = fits.PrimaryHDU(binned)
    hdu.header["BINXY"] = "2 2"
    hdu.writeto(path)
    frame = read_frame(path, profile)
    assert frame.binning == (2, 2)
    assert frame.origin == (2, 5) and frame.data.shape == (16, 45)
    assert np.median(frame.data) == pytest.approx(40.0 * GAIN, abs=1.0)
    # wrong binning in the header: the regions no longer fit
    hdu.header["BINXY"] = "1 1"
    hdu.writeto(tmp_path / "wrong.fits")
    with pytest.raises(FrameError, match=r"wrong\.fits.*does not contain the profile's trim"):
        read_frame(tmp_path / "wrong.fits", profile)


def test_dispersion_along_columns():
    profile = load_profile("tho_transmission")  # 2048 x 256, wavelength along axis 0
    raw = np.full(profile.detector.shape, profile.detector.bias_adu + 10.0, np.float32)
    frame = frame_from_array(raw, profile)
    assert frame.dispersion_axis == 0 and frame.n_dispersion == 2048 and frame.n_spatial == 256
    assert np.allclose(frame.data, 10.0 * profile.detector.gain_e_per_adu)


def test_bundled_longslit_profile_with_overscan(tmp_path):
    profile = load_profile("tho_longslit")  # 512 x 4128 with overscan columns 4098..4128
    det = profile.detector
    raw = np.full(det.shape, 1200, np.uint16)
    raw[:, :4096] += 100
    path = tmp_path / "longslit.fits"
    fits.PrimaryHDU(raw, header=fits.Header({"GRTANGLE": 12.0})).writeto(path)
    frame = read_frame(path, profile)
    assert frame.shape == (512, 4096)
    np.testing.assert_allclose(frame.data, 100.0 * det.gain_e_per_adu, rtol=1e-6)
    np.testing.assert_allclose(frame.variance, 100.0 * det.gain_e_per_adu + det.read_noise_e ** 2,
                               rtol=1e-6)


def test_one_dimensional_spectrum_becomes_one_row(tmp_path):
    spectrum = np.linspace(0.0, 50.0, 110)
    path = tmp_path / "spec1d.fits"
    fits.PrimaryHDU(spectrum).writeto(path)
    frame = read_frame(path, camera(trim={"rows": [0, 40], "columns": [5, 105]}))
    assert frame.shape == (1, 100) and frame.dispersion_axis == 1 and frame.origin == (0, 5)
    np.testing.assert_allclose(frame.data[0], spectrum[5:105] * GAIN, rtol=1e-6)
    assert not frame.saturated.any()


def test_image_in_extension_with_merged_header(tmp_path):
    primary = fits.PrimaryHDU()
    primary.header["GRTANGLE"] = 11.5
    primary.header["OBSERVER"] = "nobody"
    table = fits.BinTableHDU.from_columns([fits.Column(name="a", format="E", array=np.zeros(3))])
    image = fits.ImageHDU(np.full((40, 110), 320.0, np.float32), name="SCI")
    image.header["OBSERVER"] = "someone"
    path = tmp_path / "mef.fits"
    fits.HDUList([primary, table, image]).writeto(path)
    frame = read_frame(path, camera())
    assert frame.header["GRTANGLE"] == 11.5 and frame.header["OBSERVER"] == "someone"
    np.testing.assert_allclose(frame.data, 20.0 * GAIN)
    assert read_frame(path, camera(hdu="SCI")).shape == (40, 110)
    with pytest.raises(FrameError, match=r"mef\.fits.*no HDU 'RAW'"):
        read_frame(path, camera(), hdu="RAW")
    with pytest.raises(FrameError, match=r"mef\.fits.*HDU 1 holds no image"):
        read_frame(path, camera(), hdu=1)
    with pytest.raises(FrameError, match=r"mef\.fits.*no HDU 7"):
        read_frame(path, camera(), hdu=7)


def test_frame_from_array_matches_read_frame(tmp_path):
    rng = np.random.default_rng(8)
    raw = np.round(signal_image((40, 110), rng) + 300).astype(np.uint16)
    path = tmp_path / "same.fits"
    fits.PrimaryHDU(raw).writeto(path)
    a = read_frame(path, camera())
    b = frame_from_array(raw, camera(), path=path)
    assert isinstance(b, Frame) and b.path == path
    np.testing.assert_array_equal(a.data, b.data)
    np.testing.assert_array_equal(a.variance, b.variance)


# ------------------------------------------------------------------------------------------------
# Errors name the file and the problem
# ------------------------------------------------------------------------------------------------

def test_error_missing_file(tmp_path):
    with pytest.raises(FrameError, match=r"nothere\.fits: file not found"):
        read_frame(tmp_path / "nothere.fits", camera())


def test_error_not_fits(tmp_path):
    path = tmp_path / "notes.fits"
    path.write_text("these are observing notes, not a FITS file\n" * 100)
    with pytest.raises(FrameError, match=r"notes\.fits: not a FITS file"):
        read_frame(path, camera())
    empty = tmp_path / "empty.fits"
    empty.write_bytes(b"")
    with pytest.raises(FrameError, match=r"empty\.fits: not a FITS file"):
        read_frame(empty, camera())


def test_error_truncated(tmp_path):
    path = tmp_path / "whole.fits"
    fits.PrimaryHDU(np.zeros((100, 200), np.uint16)).writeto(path)
    data = path.read_bytes()
    cut = tmp_path / "cut.fits"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(FrameError, match=r"cut\.fits.*truncated"):
        read_frame(cut, camera(shape=[100, 200]))
    header_only = tmp_path / "cut_header.fits"
    header_only.write_bytes(data[:1000])
    with pytest.raises(FrameError, match=r"cut_header\.fits"):
        read_frame(header_only, camera(shape=[100, 200]))


def test_error_no_image(tmp_path):
    table = fits.BinTableHDU.from_columns([fits.Column(name="a", format="E", array=np.zeros(3))])
    path = tmp_path / "table_only.fits"
    fits.HDUList([fits.PrimaryHDU(), table]).writeto(path)
    with pytest.raises(FrameError, match=r"table_only\.fits: no HDU holds 1-D or 2-D image data"):
        read_frame(path, camera())


def test_error_all_nan(tmp_path):
    path = tmp_path / "nan.fits"
    fits.PrimaryHDU(np.full((40, 110), np.nan, np.float32)).writeto(path)
    with pytest.raises(FrameError, match=r"nan\.fits: all pixel values are NaN"):
        read_frame(path, camera())


def test_error_shape_mismatch(tmp_path):
    path = tmp_path / "small.fits"
    fits.PrimaryHDU(np.zeros((30, 80), np.float32)).writeto(path)
    profile = camera(trim={"rows": [0, 40], "columns": [0, 100]})
    with pytest.raises(FrameError, match=r"small\.fits: frame shape 30x80 .* trim region"):
        read_frame(path, profile)
    profile = camera(overscan={"rows": [0, 40], "columns": [100, 110]},
                     trim={"rows": [0, 30], "columns": [0, 80]})
    with pytest.raises(FrameError, match=r"small\.fits: .* overscan region"):
        read_frame(path, profile)


def test_known_bad_pixels_are_masked():
    from wavecal.profile import load_profile

    profile = load_profile("tho_transmission")  # 2048 x 256, no overscan
    data = np.full((2048, 256), 600, np.uint16)
    data[100, 10] = 9000  # a hot pixel the mask knows about
    mask = np.zeros(data.shape, bool)
    mask[100, 10] = True
    frame = frame_from_array(data, profile, bad_pixels=mask)
    assert frame.bad[100, 10] and frame.bad.sum() == 1
    with pytest.raises(FrameError, match="bad-pixel mask of shape"):
        frame_from_array(data, profile, bad_pixels=np.zeros((10, 10), bool))
