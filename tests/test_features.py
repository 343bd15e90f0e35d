"""Listed lines as the frame resolves them (wavecal.features).

The outside check is arithmetic: the centroid (first moment) of a sum of two Gaussian line
profiles is the intensity-weighted mean of their centres, computed here by numerical
integration of the summed profile, independently of the code under test.
"""
import numpy as np
import pytest

from wavecal.features import OTHER_ELEMENT_RATIO_DEX, SAME_ELEMENT_RATIO_DEX, resolve_lines
from wavecal.linelists import LineList
from wavecal.model_setup import nominal_model
from wavecal.profile import load_profile


@pytest.fixture(scope="module")
def model():
    return nominal_model(load_profile("tho_approximate"))


def _width(fwhm_px):
    return lambda x: np.full(np.shape(x), fwhm_px)


def _list(wavelengths, intensities, elements):
    n = len(wavelengths)
    return LineList(np.array(wavelengths, float), np.array(intensities, float), np.array(elements),
                    np.zeros(n, bool), np.zeros(n, bool), np.ones(n, bool))


def test_an_unresolved_pair_becomes_one_feature_at_its_centroid(model):
    per_px = abs(float(model.dispersion(640.0)))
    fwhm_px = 4.0
    a, b = 560.0, 560.0 + 0.5 * fwhm_px * per_px  # half a line width apart
    lines = _list([a, b, 600.0], [1000.0, 400.0, 500.0], ["Ne", "Ne", "Ne"])
    resolved = resolve_lines(lines, model, _width(fwhm_px))
    assert len(resolved) == 2
    assert resolved.members.tolist() == [2, 1]
    # first moment of the summed profile, by numerical integration
    sigma = fwhm_px * per_px / 2.3548
    grid = np.linspace(a - 10 * sigma, b + 10 * sigma, 20001)
    profile = 1000.0 * np.exp(-0.5 * ((grid - a) / sigma) ** 2) \
        + 400.0 * np.exp(-0.5 * ((grid - b) / sigma) ** 2)
    centroid = np.sum(grid * profile) / np.sum(profile)
    assert resolved.lines.wavelength_nm[0] == pytest.approx(centroid, abs=1e-9)
    # its uncertainty: ln 2 / 2 of the weighted spread (weights 1.0 and 0.4 of the brightest)
    w = np.array([1.0, 0.4])
    spread = np.sqrt(np.sum(w * (np.array([a, b]) - centroid) ** 2) / w.sum())
    assert resolved.sigma_nm[0] == pytest.approx(0.5 * SAME_ELEMENT_RATIO_DEX * spread, rel=1e-9)
    assert resolved.sigma_nm[1] == 0.0
    assert bool(resolved.lines.blend[0]) and not bool(resolved.lines.blend[1])


def test_resolved_lines_stay_apart(model):
    per_px = abs(float(model.dispersion(640.0)))
    lines = _list([560.0, 560.0 + 1.2 * 4.0 * per_px], [1.0, 1.0], ["Ne", "Ne"])
    resolved = resolve_lines(lines, model, _width(4.0))
    assert resolved.members.tolist() == [1, 1]
    np.testing.assert_allclose(resolved.lines.wavelength_nm, lines.wavelength_nm)


def test_pairs_of_two_elements_have_the_wider_uncertainty(model):
    per_px = abs(float(model.dispersion(640.0)))
    step = 0.5 * 4.0 * per_px
    same = resolve_lines(_list([560.0, 560.0 + step], [1.0, 1.0], ["Ne", "Ne"]), model, _width(4.0))
    mixed = resolve_lines(_list([560.0, 560.0 + step], [1.0, 1.0], ["Ar", "Ne"]), model, _width(4.0))
    assert mixed.sigma_nm[0] / same.sigma_nm[0] == pytest.approx(
        OTHER_ELEMENT_RATIO_DEX / SAME_ELEMENT_RATIO_DEX)
    assert mixed.lines.element[0] == "Ar+Ne"


def test_intensities_are_compared_within_each_element_only(model):
    # Ar's list scale is 100x Ne's: normalised, the strongest line of each weighs 1
    per_px = abs(float(model.dispersion(640.0)))
    lines = _list([560.0, 560.0 + 0.3 * 4.0 * per_px, 620.0, 630.0],
                  [100000.0, 1000.0, 50000.0, 500.0], ["Ar", "Ne", "Ar", "Ne"])
    resolved = resolve_lines(lines, model, _width(4.0))
    assert resolved.lines.intensity[0] == pytest.approx(2.0)  # 1.0 (Ar) + 1.0 (Ne)
    assert resolved.lines.intensity[-1] == pytest.approx(0.5)  # half of Ne's brightest


def test_the_merging_width_follows_the_width_model(model):
    # the same pair is one feature where the lines are wide and two where they are narrow
    per_px = abs(float(model.dispersion(640.0)))
    lines = _list([480.0, 480.0 + 3.0 * per_px, 640.0, 640.0 + 3.0 * per_px],
                  [1.0, 1.0, 1.0, 1.0], ["Ne"] * 4)
    blue = float(model.pixel(480.0))
    resolved = resolve_lines(lines, model, lambda x: np.where(np.asarray(x) < blue + 50, 6.0, 2.0))
    assert resolved.members.tolist() == [2, 1, 1]
