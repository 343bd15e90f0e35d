"""A previous solution of the same setting as the prior (wavecal.solution_prior, solve --reference).

The frames are simulated (invented Tamsin Hill long-slit spectrograph); the truth they were made
from is the check value. "Right" means within a quarter pixel of the truth over the lines' range
(the scale on which a solution is right or wrong; common practice, as in the evaluation scripts).
"""
import dataclasses
import hashlib
import json

import numpy as np
import pytest

from wavecal.calibrate import calibrate_frame
from wavecal.cli.main import main
from wavecal.errors import SolutionFileError
from wavecal.frames import frame_from_array
from wavecal.profile import example_profile_paths, load_profile
from wavecal.simulate import simulate_arc
from wavecal.solution import load_solution
from wavecal.solution_prior import load_reference
from wavecal.status import ExitCode

RIGHT_PX = 0.25
ANGLE = 14.0
TRUTH = dict(angle_error_deg=0.4, focal_error_fraction=-0.012, axis_error_px=7.0,
             tilt_error_deg=0.3, distortion_px=(0.0, 0.0, 0.0, 0.0))


def _error(solution, arc) -> float:
    lo, hi = solution.covered_range_px
    x = np.linspace(lo, hi, 300)
    return float(np.max(np.abs((solution.wavelength(x) - arc.true_wavelength(x))
                               / np.abs(arc.truth.dispersion(x)))))


@pytest.fixture(scope="module")
def setting(tmp_path_factory):
    """A rich reference arc solved blind, and a frame of the same setting drifted by 3 px with
    six listed lines, under a profile whose angle and focal-length priors are ten times wider."""
    folder = tmp_path_factory.mktemp("reference")
    profile = load_profile(example_profile_paths()["tho_longslit"])
    ref_arc = simulate_arc(profile, seed=3, lamps="Ne+Ar", grating_angle_deg=ANGLE, **TRUTH)
    ref = calibrate_frame(frame_from_array(ref_arc.data, profile, header=ref_arc.header), profile,
                          trace_slit=False)
    assert ref.status == "ok" and _error(ref, ref_arc) < RIGHT_PX
    ref_path = ref.write(folder / "ref.solution.json")
    drifted = dict(TRUTH, axis_error_px=TRUTH["axis_error_px"] + 3.0)
    hard = simulate_arc(profile, seed=11, lamps="Ne+Ar", grating_angle_deg=ANGLE,
                        missing_fraction=0.8, **drifted)
    wide = dataclasses.replace(profile, priors=dataclasses.replace(
        profile.priors, grating_angle_deg=10 * profile.priors.grating_angle_deg,
        focal_length_fraction=10 * profile.priors.focal_length_fraction))
    hard_path = hard.write(folder / "hard.fits")
    return profile, wide, ref_path, hard, hard_path


def test_a_frame_the_blind_search_cannot_do_comes_out_right_from_a_reference(setting):
    _, wide, ref_path, hard, hard_path = setting
    blind = calibrate_frame(hard_path, wide, trace_slit=False)
    assert blind.status == "failed" or _error(blind, hard) > RIGHT_PX
    solution = calibrate_frame(hard_path, wide, trace_slit=False,
                               reference=load_reference(ref_path))
    assert solution.status != "failed"
    assert _error(solution, hard) < RIGHT_PX
    assert solution.reference == {"file": ref_path.name,
                                  "sha256": hashlib.sha256(ref_path.read_bytes()).hexdigest()}
    assert any(ref_path.name in note for note in solution.notes)


def test_the_search_over_the_drift_makes_far_fewer_trials(setting):
    profile, _, ref_path, _, hard_path = setting
    blind = calibrate_frame(hard_path, profile, trace_slit=False, details=True)
    narrow = calibrate_frame(hard_path, profile, trace_slit=False, details=True,
                             reference=load_reference(ref_path))
    assert narrow.identification.log10_trials < blind.identification.log10_trials - 2
    # the prior box: 5 px of drift in angle, 1e-3 in focal length around the reference's fit
    ref_model = load_solution(ref_path).model
    assert narrow.box.focal_length_mm == pytest.approx(
        (ref_model.focal_length_mm, 1e-3 * ref_model.focal_length_mm))


def test_a_reference_of_another_setting_is_refused_in_one_line(setting, tmp_path):
    profile, _, ref_path, _, hard_path = setting
    data = json.loads(ref_path.read_text())
    data["model"]["grooves_per_mm"] = 600.0
    other = tmp_path / "other.json"
    other.write_text(json.dumps(data))
    with pytest.raises(SolutionFileError, match=r"other\.json: not a reference .*groove density"):
        calibrate_frame(hard_path, profile, trace_slit=False, reference=load_reference(other))
    # a header grating angle far from the reference's: another setting
    moved = dataclasses.replace(profile, grating=dataclasses.replace(
        profile.grating, angle_zero_point_deg=profile.grating.angle_zero_point_deg + 1.0))
    with pytest.raises(SolutionFileError, match="grating angle moves the lines by"):
        calibrate_frame(hard_path, moved, trace_slit=False, reference=load_reference(ref_path))


def test_a_failed_solution_is_no_reference(setting, tmp_path):
    _, _, ref_path, _, _ = setting
    data = json.loads(ref_path.read_text())
    data["status"] = "failed"
    bad = tmp_path / "failed.json"
    bad.write_text(json.dumps(data))
    with pytest.raises(SolutionFileError, match="failed.json: a failed solution"):
        load_reference(bad)


def test_solve_reference_on_the_command_line(setting, tmp_path, capsys):
    _, _, ref_path, _, hard_path = setting
    out = tmp_path / "out"
    code = main(["solve", str(hard_path), "-p", "tho_longslit", "-o", str(out), "--no-report",
                 "--no-plot", "--no-slit", "--reference", str(ref_path), "--drift-px", "6"])
    assert code in (ExitCode.OK, ExitCode.SUSPECT)
    written = load_solution(next(out.glob("*.solution.json")))
    assert written.reference["file"] == ref_path.name
    assert "shift by 6 px" in written.notes[0]
    assert "note      : prior from the reference solution" in capsys.readouterr().out
    assert main(["solve", str(hard_path), "-p", "tho_longslit", "-o", str(out),
                 "--drift-px", "6"]) == ExitCode.BAD_INPUT
    assert "--drift-px needs --reference" in capsys.readouterr().err
