"""Instrument profiles: loading, validation messages, header mapping."""
import textwrap

import pytest
from astropy.io import fits

from wavecal.errors import HeaderError, ProfileError
from wavecal.model_setup import nominal_model, prior_box, unbinned_to_binned
from wavecal.profile import example_profile_paths, load_profile
from wavecal.validation import parse_lamps


def test_bundled_examples_cover_the_required_mounts():
    mounts = {load_profile(p).grating.mount for p in example_profile_paths().values()}
    assert {"reflection", "transmission", "approximate"} <= mounts
    assert len(example_profile_paths()) >= 3


@pytest.mark.parametrize("name", sorted(example_profile_paths()))
def test_nominal_model_of_each_example_spans_its_detector(name):
    profile = load_profile(name)
    model = nominal_model(profile, 20.0 if profile.grating.mount == "reflection" else 0.0)
    lam = model.wavelength([0.0, model.n_pixels - 1.0])
    assert all(200 < v < 1200 for v in lam)
    # the declared direction holds: wavelength grows with pixel index iff wavelength_increases = +1
    assert (lam[1] > lam[0]) == (profile.detector.wavelength_increases == 1)
    box = prior_box(profile, model)
    assert box.focal_length_mm[1] > 0 and box.grating_angle_deg[1] > 0


def test_approximate_profile_reproduces_stated_centre_and_dispersion():
    profile = load_profile("tho_approximate")
    model = nominal_model(profile)
    centre = 0.5 * (model.n_pixels - 1)
    assert model.wavelength(centre) == pytest.approx(profile.approximate.central_wavelength_nm, rel=1e-3)
    assert abs(model.dispersion(centre)) == pytest.approx(profile.approximate.dispersion_nm_per_px, rel=1e-3)


def _write(tmp_path, text):
    path = tmp_path / "p.toml"
    path.write_text(textwrap.dedent(text))
    return path


MINIMAL = """
    [grating]
    mount = "reflection"
    grooves_per_mm = 600
    deviation_deg = 20
    [camera]
    focal_length_mm = 200
    [detector]
    pixel_size_um = 15
    shape = [100, 2048]
    [header]
    grating_angle = { keyword = "ANGLE" }
"""


def test_errors_name_the_file_and_the_problem(tmp_path):
    with pytest.raises(ProfileError, match=r"p\.toml.*unknown key.*focal_lenght"):
        load_profile(_write(tmp_path, MINIMAL.replace("focal_length_mm", "focal_lenght_mm")))
    with pytest.raises(ProfileError, match=r"p\.toml: \[grating\] mount must be one of .*got 'prism'"):
        load_profile(_write(tmp_path, MINIMAL.replace('"reflection"', '"prism"')))
    with pytest.raises(ProfileError, match=r"p\.toml.*not valid TOML"):
        load_profile(_write(tmp_path, "[grating\n"))
    with pytest.raises(ProfileError, match="not found"):
        load_profile(tmp_path / "missing.toml")
    with pytest.raises(ProfileError, match=r"grating_angle"):
        load_profile(_write(tmp_path, MINIMAL.replace('grating_angle = { keyword = "ANGLE" }', "")))


def test_missing_header_keyword_is_named_unless_defaulted(tmp_path):
    profile = load_profile(_write(tmp_path, MINIMAL))
    header = fits.Header()
    with pytest.raises(HeaderError, match=r"frame\.fits: header keyword 'ANGLE' \(grating_angle\) is missing"):
        profile.grating_angle_from_header(header, path="frame.fits")
    header["ANGLE"] = 12.5
    assert profile.grating_angle_from_header(header) == 12.5
    defaulted = load_profile(_write(tmp_path, MINIMAL.replace('{ keyword = "ANGLE" }',
                                                              '{ keyword = "ANGLE", default = 3.0 }')))
    assert defaulted.grating_angle_from_header(fits.Header()) == 3.0


def test_angle_scale_and_zero_point(tmp_path):
    text = MINIMAL.replace("deviation_deg = 20", "deviation_deg = 20\nangle_zero_point_deg = -1.5\nangle_scale = 0.5")
    profile = load_profile(_write(tmp_path, text))
    assert profile.grating_angle_from_header({"ANGLE": 40.0}) == pytest.approx(18.5)


def test_lamp_parsing():
    assert parse_lamps("HgAr") == ("Hg", "Ar")
    assert parse_lamps("ne, XE") == ("Ne", "Xe")
    assert parse_lamps("none") == ()  # not neon
    assert parse_lamps("Argon lamp + mercury") == ("Ar", "Hg")


def test_binned_pixel_coordinates():
    # binned pixel k spans unbinned k*b .. k*b+b-1 (common practice for on-chip binning)
    assert unbinned_to_binned(0.5, 2) == 0.0
    assert unbinned_to_binned(2047.5, 2) == pytest.approx(1023.5)
