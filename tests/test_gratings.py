"""An instrument's several gratings in one profile, chosen per frame by a header keyword, and
binning read from one keyword or two."""
import math

import numpy as np
import pytest
from astropy.io import fits

from wavecal.errors import HeaderError, ProfileError
from wavecal.frames import read_frame
from wavecal.model_setup import nominal_model
from wavecal.profile import load_profile, profile_from_dict


def _dispersion_nm_per_px(profile, angle_deg):
    """Reciprocal linear dispersion at the camera axis of the nominal model."""
    model = nominal_model(profile, angle_deg)
    return model.dispersion(profile.detector.nominal_axis_pixel)


def _reciprocal_dispersion(grooves_per_mm, order, beta_deg, focal_mm, pixel_um):
    """d cos(beta) / (m f) times the pixel size, in nm per pixel: the reciprocal linear
    dispersion of a grating at the camera axis (common practice, from the differentiated
    grating equation)."""
    d_nm = 1e6 / grooves_per_mm
    return d_nm * math.cos(math.radians(beta_deg)) / (order * focal_mm) * pixel_um * 1e-3


# ------------------------------------------------------------------------------------------------
# Choosing the grating of a frame
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("value, name", [
    ("G1200", "G1200"), (" g300 ", "G300"),            # by name: case and blanks ignored
    ("1200", "G1200"), (1199.99, "G1200"), (300, "G300"), ("300.4", "G300"),  # by groove density
])
def test_header_value_chooses_the_grating(value, name):
    profile = load_profile("tho_gratings")
    chosen = profile.for_header({"GRATING": value}, path="arc.fits")
    assert chosen.grating_name == name
    assert chosen.gratings == ()
    assert chosen.grating.grooves_per_mm == float(name[1:])


def test_chosen_grating_folds_its_own_values_into_the_instruments():
    profile = load_profile("tho_gratings")
    fine = profile.for_header({"GRATING": "G1200"})
    coarse = profile.for_header({"GRATING": "G300"})
    # shared [grating] values kept where a grating says nothing, its own where it does
    assert fine.grating.deviation_deg == 30.0 and coarse.grating.deviation_deg == 28.0
    assert (fine.grating.blaze_nm, coarse.grating.blaze_nm) == (500.0, 450.0)
    assert fine.priors.grating_angle_deg == 1.0 and coarse.priors.grating_angle_deg == 2.0
    assert coarse.priors.focal_length_fraction == profile.priors.focal_length_fraction
    assert fine.camera == coarse.camera == profile.camera


@pytest.mark.parametrize("name, deviation_deg", [("G1200", 30.0), ("G300", 28.0)])
def test_dispersion_of_each_chosen_grating(name, deviation_deg):
    profile = load_profile("tho_gratings").with_grating(name)
    angle = 12.0
    # reflection mount: diffraction angle = grating angle - deviation / 2 (the profile's convention)
    expected = _reciprocal_dispersion(profile.grating.grooves_per_mm, 1, angle - deviation_deg / 2,
                                      profile.camera.focal_length_mm, profile.detector.pixel_size_um)
    assert _dispersion_nm_per_px(profile, angle) == pytest.approx(expected, rel=1e-6)


def test_value_naming_no_grating_is_one_line_naming_file_keyword_value_and_gratings():
    profile = load_profile("tho_gratings")
    with pytest.raises(HeaderError) as info:
        profile.for_header({"GRATING": "600"}, path="night/arc_007.fits")
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith("night/arc_007.fits: header keyword 'GRATING' = '600' names no grating")
    assert "'G1200' (1200)" in message and "'G300' (300)" in message
    with pytest.raises(HeaderError, match=r"arc\.fits: header keyword 'GRATING' \(grating\) is missing"):
        profile.for_header(fits.Header(), path="arc.fits")


def test_with_grating_by_name_and_unknown_name():
    profile = load_profile("tho_gratings")
    assert profile.with_grating(" g300").grating_name == "G300"
    with pytest.raises(ProfileError, match=r"tho_gratings\.toml: no grating 'G600' .*'G1200', 'G300'"):
        profile.with_grating("G600")
    with pytest.raises(ProfileError, match=r"no grating 'G1200' in the profile \(known: none listed\)"):
        load_profile("tho_longslit").with_grating("G1200")


def test_choosing_again_gives_the_same_profile_and_configuration_keys_differ():
    profile = load_profile("tho_gratings")
    header = {"GRATING": 300.0}
    once = profile.for_header(header)
    assert once.for_header(header) == once
    keys = {profile.for_header({"GRATING": g}).configuration_key for g in ("G1200", "g1200", 1200, "G300")}
    assert keys == {"G1200", "G300"}


def test_one_grating_profile_is_returned_unchanged():
    profile = load_profile("tho_longslit")
    assert profile.for_header({"GRTANGLE": 20.0}, path="arc.fits") is profile
    assert profile.grating_name is None and profile.configuration_key == ""


# ------------------------------------------------------------------------------------------------
# Profiles listing gratings, header keywords for groove density and order
# ------------------------------------------------------------------------------------------------

def _profile(**changes):
    data = {
        "grating": {"mount": "reflection", "deviation_deg": 30.0},
        "gratings": [{"name": "low", "grooves_per_mm": 600.0},
                     {"name": "high", "grooves_per_mm": 1800.0, "number": 3}],
        "camera": {"focal_length_mm": 250.0},
        "detector": {"pixel_size_um": 13.5, "shape": [100, 2048]},
        "header": {"grating_angle": {"keyword": "ANGLE"}, "grating": {"keyword": "WHEEL"}},
    }
    for section, value in changes.items():
        if value is None:
            data.pop(section)
        else:
            data[section] = value
    return profile_from_dict(data, source="inst.toml")


def test_a_grating_number_other_than_the_groove_density():
    profile = _profile()
    assert profile.for_header({"WHEEL": 3}).grating_name == "high"
    assert profile.for_header({"WHEEL": "600"}).grating_name == "low"
    with pytest.raises(HeaderError, match="names no grating"):
        profile.for_header({"WHEEL": 1800}, path="a.fits")


def test_tolerance_of_a_numeric_header_value():
    assert _profile().for_header({"WHEEL": 600.5}).grating_name == "low"
    with pytest.raises(HeaderError, match=r"WHEEL' = 601 names no grating.*within 0\.5"):
        _profile().for_header({"WHEEL": 601}, path="a.fits")
    wide = _profile(header={"grating_angle": {"keyword": "ANGLE"},
                            "grating": {"keyword": "WHEEL", "tolerance": 2.0}})
    assert wide.for_header({"WHEEL": 601}).grating_name == "low"


def test_two_gratings_of_one_number_are_told_apart_by_name_only():
    profile = _profile(gratings=[{"name": "red", "grooves_per_mm": 600.0, "order": 1},
                                 {"name": "blue", "grooves_per_mm": 600.0, "order": 2}])
    assert profile.for_header({"WHEEL": "BLUE"}).grating.order == 2
    with pytest.raises(HeaderError, match=r"a\.fits: header keyword 'WHEEL' = 600 names several gratings"):
        profile.for_header({"WHEEL": 600}, path="a.fits")


@pytest.mark.parametrize("changes, message", [
    ({"gratings": []}, r"\[\[gratings\]\] must be a list of tables"),
    ({"gratings": [{"name": "a"}]}, r"\[\[gratings\]\] item 0 missing key\(s\) grooves_per_mm"),
    ({"gratings": [{"name": "a", "grooves_per_mm": 0.0}]}, r"item 0 grooves_per_mm must be a positive"),
    ({"gratings": [{"name": "a", "grooves_per_mm": 600.0, "mount": "grism"}]}, r"item 0 unknown key\(s\) mount"),
    ({"gratings": [{"name": "a", "grooves_per_mm": 6e2}, {"name": " A", "grooves_per_mm": 3e2}]},
     r"name ' A' is given twice"),
    ({"gratings": [{"name": "a", "grooves_per_mm": 600.0, "priors": {"tilt": 1.0}}]},
     r"\[\[gratings\]\] 'a' priors unknown key\(s\) tilt"),
    ({"grating": {"mount": "reflection", "grooves_per_mm": 600.0}},
     r"\[grating\] grooves_per_mm belong to each grating in \[\[gratings\]\]"),
    ({"grating": {"mount": "approximate"}}, r"mount 'approximate' cannot list \[\[gratings\]\]"),
    ({"header": {"grating_angle": {"keyword": "ANGLE"}}}, r"\[header\] must map 'grating'"),
    ({"gratings": None}, r"\[header\] 'grating' chooses among \[\[gratings\]\], but none are listed"),
    ({"header": {"grating_angle": {"keyword": "A"}, "grating": {"keyword": "W", "tolerance": -1}}},
     r"\[header\.grating\] tolerance must be a number >= 0"),
    ({"header": {"grating_angle": {"keyword": "A", "tolerance": 1}, "grating": {"keyword": "W"}}},
     r"\[header\.grating_angle\] unknown key\(s\) tolerance"),
])
def test_profile_errors_name_the_file_and_the_key(changes, message):
    if changes.get("gratings", 0) is None:
        changes["grating"] = {"mount": "reflection", "grooves_per_mm": 600.0}
    with pytest.raises(ProfileError, match=r"^inst\.toml: .*" + message) as info:
        _profile(**changes)
    assert "\n" not in str(info.value)


def test_groove_density_and_order_from_header_keywords():
    data = {"grating": {"mount": "reflection", "grooves_per_mm": 1200.0, "deviation_deg": 30.0},
            "camera": {"focal_length_mm": 300.0},
            "detector": {"pixel_size_um": 15.0, "shape": [512, 4096]},
            "header": {"grating_angle": {"keyword": "ANGLE"},
                       "grooves_per_mm": {"keyword": "GROOVES"}, "order": {"keyword": "ORDER", "default": 1}}}
    profile = profile_from_dict(data, source="inst.toml")
    first = profile.for_header({"GROOVES": "600.0"})
    second = profile.for_header({"GROOVES": 600, "ORDER": 2})
    assert (first.grating.grooves_per_mm, first.grating.order) == (600.0, 1)
    assert first.configuration_key == "600/mm order 1" and second.configuration_key == "600/mm order 2"
    # at one diffraction angle, the second order disperses twice as much as the first (grating
    # equation, common practice)
    assert _dispersion_nm_per_px(first, 20.0) == pytest.approx(2 * _dispersion_nm_per_px(second, 20.0), rel=1e-9)
    assert profile.grating.grooves_per_mm == 1200.0  # the profile itself is not changed
    with pytest.raises(HeaderError, match=r"^f\.fits: header keyword 'ORDER' \(order\) = 1\.5 is not a positive whole number$"):
        profile.for_header({"GROOVES": 600, "ORDER": 1.5}, path="f.fits")
    for bad in ("fine", -600, 0, True):
        with pytest.raises(HeaderError, match=r"^f\.fits: header keyword 'GROOVES' \(grooves_per_mm\) = "
                                              + repr(bad) + " is not a positive number$"):
            profile.for_header({"GROOVES": bad}, path="f.fits")


# ------------------------------------------------------------------------------------------------
# Binning: one keyword "N M" or one keyword per axis
# ------------------------------------------------------------------------------------------------

def _binning_profile(header):
    return profile_from_dict({
        "grating": {"mount": "approximate", "grooves_per_mm": 0.0},
        "approximate": {"central_wavelength_nm": 500.0, "dispersion_nm_per_px": 0.1},
        "detector": {"pixel_size_um": 10.0, "shape": [40, 110], "bias_adu": 300.0,
                     "trim": {"rows": [4, 36], "columns": [10, 100]}},
        "header": header,
    }, source="cam.toml")


TWO_KEYS = {"binning_x": {"keyword": "COLBIN", "default": 1}, "binning_y": {"keyword": "ROWBIN", "default": 1}}


def test_two_keywords_give_the_same_binning_as_one():
    one = _binning_profile({"binning": {"keyword": "BINXY"}})
    two = _binning_profile(TWO_KEYS)
    # FITS order: the first number bins along NAXIS1 (columns, numpy axis 1)
    for x, y in ((1, 1), (2, 1), (1, 3), (2, 2)):
        assert two.binning_from_header({"COLBIN": x, "ROWBIN": str(y)}) == (y, x)
        assert one.binning_from_header({"BINXY": f"{x} {y}"}) == (y, x)
    assert two.binning_from_header({}) == (1, 1)
    assert one.binning_from_header({"BINXY": "2x1"}) == one.binning_from_header({"BINXY": "2,1"}) == (1, 2)
    assert one.binning_from_header({"BINXY": 2}) == (2, 2)  # one number bins both axes
    assert two.binning_from_header({"COLBIN": 2.0}) == (1, 2)


def test_frame_read_with_binning_from_two_keywords(tmp_path):
    profile = _binning_profile(TWO_KEYS)
    data = np.full((20, 55), 310.0)  # the 40 x 110 detector binned 2 x 2
    hdu = fits.PrimaryHDU(data)
    hdu.header["COLBIN"], hdu.header["ROWBIN"] = 2, 2
    hdu.writeto(tmp_path / "binned.fits")
    frame = read_frame(tmp_path / "binned.fits", profile)
    # unbinned trim rows 4..36, columns 10..100 -> binned 2..18, 5..50
    assert frame.binning == (2, 2) and frame.origin == (2, 5) and frame.data.shape == (16, 45)


@pytest.mark.parametrize("header, value, keyword, problem", [
    ({"binning": {"keyword": "BINXY"}}, "1 2 3", "BINXY", "is not of the form 'N M'"),
    ({"binning": {"keyword": "BINXY"}}, "0 1", "BINXY", "is not of the form 'N M'"),
    ({"binning": {"keyword": "BINXY"}}, "2 1.5", "BINXY", "is not of the form 'N M'"),
    (TWO_KEYS, 1.5, "COLBIN", "is not a positive whole number"),
    (TWO_KEYS, "two", "COLBIN", "is not a positive whole number"),
    (TWO_KEYS, 0, "COLBIN", "is not a positive whole number"),
])
def test_bad_binning_values_name_file_keyword_and_value(header, value, keyword, problem):
    profile = _binning_profile(header)
    with pytest.raises(HeaderError) as info:
        profile.binning_from_header({keyword: value}, path="raw/f1.fits")
    message = str(info.value)
    assert message.startswith(f"raw/f1.fits: header keyword {keyword!r}") and problem in message
    assert repr(value) in message and "\n" not in message


@pytest.mark.parametrize("header, given", [
    ({"binning": {"keyword": "B"}, **TWO_KEYS}, "['binning', 'binning_x', 'binning_y']"),
    ({"binning_x": {"keyword": "COLBIN"}}, "['binning_x']"),
    ({"binning_y": {"keyword": "ROWBIN"}, "binning": "B"}, "['binning', 'binning_y']"),
])
def test_binning_keywords_of_a_profile_are_one_form_or_the_other(header, given):
    with pytest.raises(ProfileError) as info:
        _binning_profile(header)
    assert str(info.value) == (f"cam.toml: [header] binning comes from 'binning' (\"N M\") or from both "
                               f"'binning_x' and 'binning_y', got {given}")


def test_example_profile_reads_binning_from_two_keywords():
    profile = load_profile("tho_gratings")
    assert profile.binning_from_header({"COLBIN": 2, "ROWBIN": 1}) == (1, 2)
    assert profile.binning_from_header({}) == (1, 1)
