"""The Solution object and its JSON file."""
import json
import math
from pathlib import Path

import numpy as np
import pytest

from wavecal.calibrate import calibrate_frame
from wavecal.errors import SolutionFileError
from wavecal.frames import frame_from_array
from wavecal.profile import load_profile
from wavecal.solution import SCHEMA_VERSION, load_solution

#: A solution file as wavecal wrote it before the statistics key ``redchi`` became
#: ``reduced_chi2`` (schema version 2, with a slit block; written at commit 6de3d93 for a
#: simulated Hg+Ar arc of ``tho_longslit``, seed 4, lines tilted by 1.5 degrees and curved by 1 px).
V2_FILE = Path(__file__).parent / "data" / "solution_v2.json"


@pytest.fixture(scope="module")
def solved(shared_solution):
    sim, solution = shared_solution("tho_longslit", seed=2, lamps=("Hg", "Ne", "Ar"))
    return solution, sim


def test_json_round_trip_reproduces_everything(solved, tmp_path):
    solution, _ = solved
    path = solution.write(tmp_path / "s.json")
    back = load_solution(path)
    x = np.linspace(-100, 4200, 97)
    assert np.array_equal(back.wavelength(x), solution.wavelength(x))
    assert back.status == solution.status and back.reasons == solution.reasons
    assert back.medium == "air"
    # JSON stores each float by its shortest repr, which reads back as the same double: the
    # round trip is exact, not merely close (a relative tolerance of 1e-5 would allow 0.04 px
    # at x = 4000)
    assert back.covered_range_px == solution.covered_range_px
    assert list(back.lines.columns) == list(solution.lines.columns)
    np.testing.assert_array_equal(back.lines["x"], solution.lines["x"])
    assert (back.lines["identification"] == solution.lines["identification"]).all()
    np.testing.assert_array_equal(back.wavelength_uncertainty(x), solution.wavelength_uncertainty(x))
    data = json.loads(path.read_text())
    assert data["schema_version"] == SCHEMA_VERSION and data["wavelength_unit"] == "nm"
    assert "reduced_chi2" in data["statistics"] and "redchi" not in data["statistics"]
    assert back.statistics.reduced_chi2 == solution.statistics.reduced_chi2 > 0
    assert back.parameters.names == solution.parameters.names
    np.testing.assert_array_equal(back.parameters.covariance, solution.parameters.covariance)
    # written again, the file is the same, byte for byte
    assert back.write(tmp_path / "again.json").read_text() == path.read_text()


def test_schema_2_file_still_reads():
    data = json.loads(V2_FILE.read_text())
    assert data["schema_version"] == 2 and "reduced_chi2" not in data["statistics"]
    solution = load_solution(V2_FILE)
    assert solution.status == data["status"] and solution.slit is not None
    stats = solution.statistics
    assert stats.reduced_chi2 == data["statistics"]["redchi"]
    assert (stats.n_used, stats.n_peaks, stats.rms_px) == (
        data["statistics"]["n_used"], data["statistics"]["n_peaks"], data["statistics"]["rms_px"])
    assert [p.value for p in solution.parameters.estimates] == [
        p["value"] for p in data["parameters"]]
    np.testing.assert_array_equal(solution.parameters.covariance, np.array(data["covariance"]))
    # the wavelengths and uncertainty the writing version computed are reproduced
    used = solution.lines[solution.lines["identification"] == "used"]
    np.testing.assert_allclose(solution.wavelength(used["x"].to_numpy()),
                               used["wavelength_fit"].to_numpy(), rtol=1e-12)
    assert np.all(solution.wavelength_uncertainty(used["x"].to_numpy()) > 0)


def test_schema_2_failed_solution_still_reads(tmp_path):
    """A failed solution as the writing version of schema 2 made it: two statistics only."""
    data = {"schema": "wavecal-solution", "schema_version": 2, "software_version": "0.1",
            "status": "failed", "reasons": ["too few lines identified"], "medium": "air",
            "wavelength_unit": "nm", "pixel_convention": "0-based", "dispersion_axis": 1,
            "frame": "arc.fits", "profile": "tho_longslit", "lamps": ["Hg"],
            "covered_range_px": [None, None], "model": None, "slit": None, "parameters": [],
            "correlation": {"names": [], "matrix": []}, "covariance": None,
            "statistics": {"n_peaks": 2, "n_used": 0},
            "lines": {col: [None, None] for col in (
                "x", "x_err", "fwhm", "flux", "snr", "line_wavelength", "line_intensity",
                "wavelength_fit", "residual_px", "residual_nm", "residual_kms", "sigma_px")}
            | {"flags": [0, 0], "identification": ["unidentified"] * 2, "element": ["", ""],
               "line_verified": [False, False]}}
    path = tmp_path / "failed_v2.json"
    path.write_text(json.dumps(data))
    solution = load_solution(path)
    assert solution.status == "failed" and solution.model is None
    assert (solution.statistics.n_peaks, solution.statistics.n_used) == (2, 0)
    assert math.isnan(solution.statistics.reduced_chi2) and solution.parameters.names == ()
    data["statistics"]["n_used"] = 2.5
    path.write_text(json.dumps(data))
    with pytest.raises(SolutionFileError, match="failed_v2.json: .*n_used"):
        load_solution(path)


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
