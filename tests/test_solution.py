"""The Solution object and its JSON file."""
import json

import numpy as np
import pytest

from wavecal.calibrate import calibrate_frame
from wavecal.errors import SolutionFileError
from wavecal.frames import frame_from_array
from wavecal.profile import load_profile
from wavecal.simulate import simulate_arc
from wavecal.solution import SCHEMA_VERSION, load_solution


@pytest.fixture(scope="module")
def solved():
    profile = load_profile("tho_longslit")
    sim = simulate_arc(profile, seed=2, lamps=("Hg", "Ne", "Ar"))
    return calibrate_frame(frame_from_array(sim.data, profile, header=sim.header), profile), sim


def test_json_round_trip_reproduces_everything(solved, tmp_path):
    solution, _ = solved
    path = solution.write(tmp_path / "s.json")
    back = load_solution(path)
    x = np.linspace(-100, 4200, 97)
    assert np.array_equal(back.wavelength(x), solution.wavelength(x))
    assert back.status == solution.status and back.reasons == solution.reasons
    assert back.medium == "air"
    assert back.covered_range_px == pytest.approx(solution.covered_range_px)
    assert list(back.lines.columns) == list(solution.lines.columns)
    assert np.allclose(back.lines["x"], solution.lines["x"])
    assert (back.lines["identification"] == solution.lines["identification"]).all()
    assert np.allclose(back.wavelength_uncertainty(x), solution.wavelength_uncertainty(x))
    data = json.loads(path.read_text())
    assert data["schema_version"] == SCHEMA_VERSION and data["wavelength_unit"] == "nm"


def test_evaluation_and_inverse(solved):
    solution, sim = solved
    x = np.array([10.0, 2000.0, 4000.0])
    assert np.allclose(solution.pixel(solution.wavelength(x)), x, atol=1e-6)
    assert solution.wavelength(x, y=np.array([[0.0], [100.0]])).shape == (2, 3)
    lo, hi = solution.covered_range_px
    assert solution.extrapolated([lo - 1, (lo + hi) / 2, hi + 1]).tolist() == [True, False, True]
    sigma = solution.wavelength_uncertainty(x)
    assert np.all(sigma > 0) and np.all(sigma < 0.01)
    # the stated uncertainty is honest: the true error is within a few sigma
    err = solution.wavelength(x[1]) - sim.truth.wavelength(x[1])
    assert abs(err) < 5 * sigma[1]


def test_lines_table_has_residuals_in_three_units(solved):
    solution, _ = solved
    used = solution.lines[solution.lines["identification"] == "used"]
    assert len(used) == solution.statistics.n_used
    c_kms = 299792.458  # speed of light, exact by SI definition
    assert np.allclose(used["residual_kms"], used["residual_nm"] / used["line_wavelength"] * c_kms)
    # the RMS is weighted by each line's total uncertainty in the fit (column sigma_px)
    weight = 1.0 / used["sigma_px"] ** 2
    rms = np.sqrt(np.sum(weight * used["residual_px"] ** 2) / np.sum(weight))
    assert rms == pytest.approx(solution.rms_px, rel=0.05)
    assert (used["sigma_px"] >= used["x_err"]).all()


def test_bad_solution_files_are_refused_with_the_file_named(tmp_path):
    missing = tmp_path / "none.json"
    with pytest.raises(SolutionFileError, match="none.json"):
        load_solution(missing)
    garbage = tmp_path / "garbage.json"
    garbage.write_text("{not json")
    with pytest.raises(SolutionFileError, match="garbage.json: not a JSON"):
        load_solution(garbage)
    other = tmp_path / "other.json"
    other.write_text(json.dumps({"schema": "wavecal-solution", "schema_version": 99}))
    with pytest.raises(SolutionFileError, match="version 99"):
        load_solution(other)


def test_failed_solution_has_no_wavelength_scale(tmp_path):
    profile = load_profile("tho_longslit")
    flat = np.full((512, 4128), 1200, dtype=np.uint16)
    from astropy.io import fits

    header = fits.Header({"GRTANGLE": 20.0, "ARCLAMPS": "Hg+Ar", "DATE-OBS": "2025-01-01T00:00:00"})
    solution = calibrate_frame(frame_from_array(flat, profile, header=header), profile)
    assert solution.status == "failed"
    with pytest.raises(ValueError, match="failed"):
        solution.wavelength(10.0)
    back = load_solution(solution.write(tmp_path / "failed.json"))
    assert back.status == "failed" and back.model is None


def test_vacuum_wavelengths_on_request(solved):
    """Air solution evaluated in vacuum: the Ciddor (1996) conversion, as in specutils."""
    solution, _ = solved
    from specutils.utils.wcs_utils import air_to_vac
    import astropy.units as u

    x = np.array([100.0, 2000.0, 3900.0])
    air = solution.wavelength(x)
    vacuum = solution.wavelength(x, medium="vacuum")
    reference = air_to_vac(air * u.nm, method="Ciddor1996", scheme="iteration").to_value(u.nm)
    assert np.allclose(vacuum, reference, atol=5e-8)  # 0.05 pm, the agreement of standard-air formulas
    assert np.allclose(solution.pixel(vacuum, medium="vacuum"), x, atol=1e-6)
