"""Tests of the frame files that are not FITS (:mod:`wavecal.frame_files` through
:func:`wavecal.frames.read_frame`): text/CSV spectra and camera images; the dark subtraction
(:func:`wavecal.frames.subtract_dark`); and the unknown wavelength direction of rough profiles.

Spectra and images are made here (invented Tamsin Hill data); check values from outside the
project: an n-bit channel holds 0 .. 2**n - 1 (common practice, and the PNG specification,
ISO/IEC 15948 §7.1: "sample values range from 0 to 2^depth - 1"); a 16-bit PNG or TIFF sample
keeps all 16 bits.
"""
from __future__ import annotations

import hashlib
import struct
import tomllib
import zlib

import numpy as np
import pytest
from astropy.io import fits
from PIL import Image

from wavecal.calibrate import calibrate_frame
from wavecal.errors import FrameError, ProfileError
from wavecal.frames import read_frame, subtract_dark
from wavecal.profile import example_profile_paths, load_profile, profile_from_dict

GAIN = 2.0
READ_NOISE = 3.0


def camera(**detector):
    """An invented test camera (profile of unknown geometry), detector keys overridable."""
    det = {"pixel_size_um": 10.0, "shape": [40, 110], "dispersion_axis": 1,
           "gain_e_per_adu": GAIN, "read_noise_e": READ_NOISE, "bias_adu": 0.0}
    det.update(detector)
    return profile_from_dict({
        "instrument": {"name": "Tamsin Hill test camera"},
        "grating": {"mount": "approximate", "grooves_per_mm": 0.0},
        "approximate": {"central_wavelength_nm": 500.0, "dispersion_nm_per_px": 0.1},
        "detector": det,
        "header": {"exposure_time": {"keyword": "EXPOSURE", "default": 0.0}},
    })


def sha256(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _rough(direction, read_noise_e=None):
    """The bundled rough profile with its direction (None: left out) and read noise replaced."""
    data = tomllib.loads(example_profile_paths()["tho_approximate"].read_text())
    if direction is None:
        del data["detector"]["wavelength_increases"]
    else:
        data["detector"]["wavelength_increases"] = direction
    if read_noise_e is not None:
        data["detector"]["read_noise_e"] = read_noise_e
    return profile_from_dict(data)


def demo_spectrum(direction=1):
    """The 1-D spectrum (ADU) extracted from the bundled rough-profile demo arc, and a profile for
    it: a spectrum summed over n rows carries the read noise of n pixels."""
    from wavecal._resources import data_folder
    from wavecal.extract import extract_spectrum

    profile = load_profile("tho_approximate")
    spectrum = extract_spectrum(read_frame(data_folder("demo_frames") / "tho_approximate_hgne.fits",
                                           profile))
    read_noise = profile.detector.read_noise_e * np.sqrt(spectrum.n_rows)
    return (_rough(direction, read_noise),
            (spectrum.flux / profile.detector.gain_e_per_adu).astype(np.float32))


# ------------------------------------------------------------------------------------------------
# Text spectra
# ------------------------------------------------------------------------------------------------

def test_text_spectrum_gives_the_solution_of_the_same_fits_spectrum(tmp_path):
    profile, spectrum = demo_spectrum()
    fits_path = tmp_path / "arc.fits"
    fits.PrimaryHDU(spectrum).writeto(fits_path)
    csv_path = tmp_path / "arc.csv"
    body = "\n".join(f"{i},{v:.9g}" for i, v in enumerate(spectrum))
    csv_path.write_text(f"# Tamsin Hill outreach spectrograph, Hg+Ne lamp\npixel,counts\n{body}\n")
    a, b = read_frame(fits_path, profile), read_frame(csv_path, profile)
    np.testing.assert_array_equal(a.data, b.data)
    np.testing.assert_array_equal(a.variance, b.variance)
    assert (a.origin, a.binning, a.dispersion_axis) == (b.origin, b.binning, b.dispersion_axis)
    sa, sb = calibrate_frame(fits_path, profile), calibrate_frame(csv_path, profile)
    assert sa.status == sb.status == "ok"
    assert sa.model == sb.model
    np.testing.assert_array_equal(sa.lines["line_wavelength"], sb.lines["line_wavelength"])


@pytest.mark.parametrize("text", [
    "10\n20.5\n30\n40\n",
    "# one column of counts\ncounts\n10\n20.5 # a comment\n\n30\n40\n",
    "0 10\n1 20.5\n2\t30\n3   40\n",
    "pixel;counts\n0;10\n1;20.5\n2;30\n3;40\n",
    "Pixel, Counts\n0, 10\n1, 20.5\n2, 30\n3, 40\n",
])
def test_text_layouts_read_the_same(tmp_path, text):
    path = tmp_path / "spectrum.txt"
    path.write_text(text)
    frame = read_frame(path, camera())
    np.testing.assert_array_equal(frame.data, [[20.0, 41.0, 60.0, 80.0]])  # counts x gain
    # variance from the profile's gain and read noise as for FITS: electrons + read noise^2
    np.testing.assert_allclose(frame.variance, frame.data + READ_NOISE**2)
    assert frame.origin == (0, 0)


def test_pixel_column_keeps_the_file_numbering(tmp_path):
    path = tmp_path / "spectrum.dat"
    path.write_text("1 10\n2 20\n3 30\n")
    assert read_frame(path, camera()).origin == (0, 1)


@pytest.mark.parametrize(("text", "words"), [
    ("", ["holds no values"]),
    ("# only a comment\npixel,counts\n", ["holds no values"]),
    ("10\n20\nlots\n40\n", ["line 3", "'lots'"]),
    ("counts\n10\ncounts\n40\n", ["line 3", "'counts'"]),  # column names: first line only
    ("pixel,counts\npixel,counts\n0,10\n", ["line 2", "'pixel'"]),
    ("0,10\n1,20\n1,30\n", ["line 3", "count up by one"]),
    ("0,10\n2,20\n3,30\n", ["line 2", "count up by one"]),
    ("400.1,10\n400.6,20\n401.1,30\n", ["line 2", "wavelength"]),
    ("0.5,10\n1.5,20\n", ["line 1", "whole pixel"]),
    ("0,10,5\n1,20,5\n", ["line 1", "3 columns"]),
    ("0,10\n1\n", ["line 2", "1 columns"]),
])
def test_bad_text_spectra_are_refused_in_one_line(tmp_path, text, words):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(FrameError) as info:
        read_frame(path, camera())
    message = str(info.value)
    assert "\n" not in message and message.startswith(str(path))
    for word in words:
        assert word in message


def test_binary_file_with_text_suffix_is_refused(tmp_path):
    path = tmp_path / "spectrum.txt"
    path.write_bytes(b"\xff\xfe\x00\x81\x92")
    with pytest.raises(FrameError, match="not a text file"):
        read_frame(path, camera())


# ------------------------------------------------------------------------------------------------
# Camera images
# ------------------------------------------------------------------------------------------------

def test_8bit_gray_saturates_at_2_pow_8_minus_1(tmp_path):
    pixels = np.full((40, 110), 100, np.uint8)
    pixels[5, 7] = 255  # 2**8 - 1: full scale of an 8-bit channel (common practice)
    pixels[6, 7] = 254
    path = tmp_path / "arc.png"
    Image.fromarray(pixels).save(path)
    frame = read_frame(path, camera())
    assert frame.saturated[5, 7] and not frame.saturated[6, 7]
    assert np.count_nonzero(frame.saturated) == 1
    np.testing.assert_array_equal(frame.data, pixels.astype(np.float32) * GAIN)


@pytest.mark.parametrize("suffix", [".png", ".tif"])
def test_16bit_gray_keeps_every_bit_and_saturates_at_2_pow_16_minus_1(tmp_path, suffix):
    pixels = (np.arange(40 * 110, dtype=np.uint16).reshape(40, 110) * 13 + 1).astype(np.uint16)
    pixels[0, 0] = 65535  # 2**16 - 1 (common practice)
    pixels[0, 1] = 65534
    path = tmp_path / f"arc{suffix}"
    Image.fromarray(pixels).save(path)
    frame = read_frame(path, camera())
    np.testing.assert_array_equal(frame.data, pixels.astype(np.float32) * GAIN)  # odd values: no bit lost
    assert frame.saturated[0, 0] and np.count_nonzero(frame.saturated) == 1


@pytest.mark.parametrize("suffix", [".png", ".bmp", ".tiff"])
def test_colour_images_are_summed_over_the_channels(tmp_path, suffix):
    pixels = np.zeros((40, 110, 3), np.uint8)
    pixels[..., 0], pixels[..., 1], pixels[..., 2] = 30, 20, 10
    pixels[3, 4, 0] = 255  # one channel at full scale: the sum is a lower bound
    path = tmp_path / f"arc{suffix}"
    Image.fromarray(pixels).save(path)
    frame = read_frame(path, camera())
    assert frame.data[0, 0] == 60 * GAIN
    assert frame.data[3, 4] == (255 + 30) * GAIN
    assert frame.saturated[3, 4] and np.count_nonzero(frame.saturated) == 1


def test_a_stated_saturation_level_applies_to_the_image_values(tmp_path):
    pixels = np.full((40, 110), 100, np.uint8)
    pixels[1, 1] = 200
    path = tmp_path / "arc.bmp"
    Image.fromarray(pixels).save(path)
    frame = read_frame(path, camera(saturation_adu=180.0))
    assert frame.saturated[1, 1] and np.count_nonzero(frame.saturated) == 1


def _png_16bit_rgb(path):
    """A 16-bit RGB PNG written by hand (Pillow writes none): PNG specification chunks."""
    def chunk(kind, body):
        return (struct.pack(">I", len(body)) + kind + body
                + struct.pack(">I", zlib.crc32(kind + body) & 0xFFFFFFFF))
    rows = b"".join(b"\x00" + np.full((4, 3), 40000, ">u2").tobytes() for _ in range(3))
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", 4, 3, 16, 2, 0, 0, 0))
                     + chunk(b"IDAT", zlib.compress(rows)) + chunk(b"IEND", b""))


@pytest.mark.parametrize(("make", "word"), [
    (lambda p: Image.fromarray(np.zeros((8, 8, 3), np.uint8)).convert("P").save(p / "x.png"),
     "palette"),
    (lambda p: Image.fromarray(np.zeros((8, 8), bool)).save(p / "x.png"), "1-bit"),
    (lambda p: Image.fromarray(np.zeros((8, 8), np.float32)).save(p / "x.tif"), "floating-point"),
    (lambda p: Image.fromarray(np.zeros((8, 8), np.uint8)).save(
        p / "x.tif", save_all=True, append_images=[Image.fromarray(np.zeros((8, 8), np.uint8))]),
     "2 images"),
    (lambda p: _png_16bit_rgb(p / "x.png"), "16-bit colour"),
    (lambda p: (p / "x.png").write_bytes(b"not an image at all"), "cannot read"),
    (lambda p: (p / "x.bmp").write_bytes(b""), "cannot read"),
])
def test_unreadable_images_are_refused_in_one_line(tmp_path, make, word):
    make(tmp_path)
    path = next(tmp_path.glob("x.*"))
    with pytest.raises(FrameError) as info:
        read_frame(path, camera())
    message = str(info.value)
    assert "\n" not in message and message.startswith(str(path)) and word in message


# ------------------------------------------------------------------------------------------------
# Darks
# ------------------------------------------------------------------------------------------------

def _fits(path, data, **header):
    fits.PrimaryHDU(np.asarray(data, np.float32), header=fits.Header(header)).writeto(path)
    return path


def test_dark_is_subtracted_and_its_variance_added(tmp_path):
    profile = camera()
    rng = np.random.default_rng(3)
    arc = _fits(tmp_path / "arc.fits", rng.uniform(100, 200, (40, 110)), EXPOSURE=30.0)
    dark = _fits(tmp_path / "dark.fits", rng.uniform(10, 20, (40, 110)), EXPOSURE=30.2)
    before = sha256(arc), sha256(dark)
    a, d = read_frame(arc, profile), read_frame(dark, profile)
    out = subtract_dark(a, d, profile)
    np.testing.assert_allclose(out.data, a.data - d.data)
    # independent noise: variances add (common practice)
    np.testing.assert_allclose(out.variance, a.variance + d.variance)
    assert not out.data.flags.writeable
    assert (sha256(arc), sha256(dark)) == before


@pytest.mark.parametrize(("shape", "exposure", "word"), [
    ((40, 100), 30.0, "does not match"),
    ((40, 110), 60.0, "differs"),
    ((40, 110), 30.4, "1 %"),
])
def test_a_dark_that_does_not_match_is_refused_in_one_line(tmp_path, shape, exposure, word):
    profile = camera()
    arc = read_frame(_fits(tmp_path / "arc.fits", np.full((40, 110), 100.0), EXPOSURE=30.0), profile)
    path = _fits(tmp_path / "dark.fits", np.full(shape, 10.0), EXPOSURE=exposure)
    with pytest.raises(FrameError) as info:
        subtract_dark(arc, read_frame(path, profile), profile)
    message = str(info.value)
    assert "\n" not in message and message.startswith(str(path)) and word in message


def test_dark_exposure_is_compared_only_when_both_headers_give_one(tmp_path):
    profile = camera()  # maps EXPOSURE with a default, which is no measured exposure
    arc = read_frame(_fits(tmp_path / "arc.fits", np.full((40, 110), 100.0), EXPOSURE=30.0), profile)
    dark = read_frame(_fits(tmp_path / "dark.fits", np.full((40, 110), 10.0)), profile)
    assert np.all(subtract_dark(arc, dark, profile).data == 90.0 * GAIN)


# ------------------------------------------------------------------------------------------------
# Unknown wavelength direction (rough profiles)
# ------------------------------------------------------------------------------------------------

def test_direction_unknown_only_for_rough_profiles():
    assert _rough(None).detector.wavelength_increases == 0
    assert _rough("unknown").detector.wavelength_increases == 0
    assert _rough(-1).detector.wavelength_increases == -1
    data = tomllib.loads(example_profile_paths()["tho_longslit"].read_text())
    data["detector"]["wavelength_increases"] = "unknown"
    with pytest.raises(ProfileError, match="approximate"):
        profile_from_dict(data)
    del data["detector"]["wavelength_increases"]
    assert profile_from_dict(data).detector.wavelength_increases == 1


def test_unknown_direction_finds_a_reversed_frame_and_pays_for_the_second_search(tmp_path):
    known_profile, spectrum = demo_spectrum(1)
    unknown_profile = demo_spectrum(None)[0]
    ahead, reversed_ = tmp_path / "ahead.fits", tmp_path / "reversed.fits"
    fits.PrimaryHDU(spectrum).writeto(ahead)
    fits.PrimaryHDU(spectrum[::-1].copy()).writeto(reversed_)
    known = calibrate_frame(ahead, known_profile)
    assert calibrate_frame(reversed_, known_profile).status == "failed"  # the wrong direction stated
    assert calibrate_frame(ahead, unknown_profile).model == known.model
    found = calibrate_frame(reversed_, unknown_profile)
    assert found.status == "ok" and found.model.direction == -1
    n = spectrum.size
    x = np.array([0.1, 0.5, 0.9]) * (n - 1)
    # the same wavelengths, read from the other end
    np.testing.assert_allclose(found.model.wavelength(n - 1 - x), known.model.wavelength(x), atol=0.02)
    # two searches: twice the trials (to the rounding of the two searches' own counts)
    assert found.statistics.log10_trials == pytest.approx(
        known.statistics.log10_trials + np.log10(2.0), abs=0.05)


def test_solve_reads_a_csv_spectrum_and_subtracts_its_dark(tmp_path, capsys):
    from wavecal.cli.main import main
    from wavecal.status import ExitCode

    profile, spectrum = demo_spectrum(1)
    toml = tmp_path / "outreach.toml"
    toml.write_text(example_profile_paths()["tho_approximate"].read_text().replace(
        "read_noise_e = 2.5", f"read_noise_e = {profile.detector.read_noise_e!r}"))
    arc = tmp_path / "arc.csv"
    arc.write_text("\n".join(f"{v:.9g}" for v in spectrum) + "\n")
    twin = tmp_path / "twin.csv"  # a "dark" holding the arc itself leaves nothing to calibrate
    twin.write_bytes(arc.read_bytes())
    before = sha256(arc)
    assert main(["solve", str(arc), "-p", str(toml), "-o", str(tmp_path / "a"), "--no-report"]) \
        == ExitCode.OK
    assert main(["solve", str(arc), "-p", str(toml), "-o", str(tmp_path / "b"), "--no-report",
                 "--dark", str(twin)]) == ExitCode.FAILED
    assert sha256(arc) == before
    capsys.readouterr()
