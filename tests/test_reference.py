"""A previous solution of the same setting as the prior (wavecal.solution_prior, solve --reference),
and a few lines named by the user (wavecal.anchors, solve --anchors).

The frames are simulated (invented Tamsin Hill long-slit spectrograph); the truth they were made
from is the check value. "Right" means within a quarter pixel of the truth over the lines' range
(the scale on which a solution is right or wrong; common practice, as in the evaluation scripts).
"""
import dataclasses
import hashlib
import json
import re

import numpy as np
import pytest

from wavecal.anchors import anchor_peaks, found_lines_chance, read_anchors
from wavecal.calibrate import calibrate_frame
from wavecal.cli.main import main
from wavecal.errors import AnchorFileError, ProfileError, SolutionFileError
from wavecal.features import resolve_lines
from wavecal.linelists import load_line_list
from wavecal.frames import frame_from_array
from wavecal.profile import example_profile_paths, load_profile
from wavecal.simulate import simulate_arc
from wavecal.solution import load_solution
from wavecal.refine import refine_fit
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


# -- anchors: a few pixel/wavelength pairs named by the user -----------------------------------
@pytest.fixture(scope="module")
def anchored(tmp_path_factory):
    """A frame of twelve listed lines whose optics are far from nominal (2 deg in angle, 5 % in
    focal length, 60 px in camera axis) under priors too wide to mean much, and its
    three strongest unsaturated lines (peak S/N 20 or more, alone within 10 px, a twelfth of the
    detector apart) named at their true positions read to 0.3 px."""
    folder = tmp_path_factory.mktemp("anchors")
    profile = load_profile(example_profile_paths()["tho_longslit"])
    wide = dataclasses.replace(profile, priors=dataclasses.replace(
        profile.priors, grating_angle_deg=10.0, focal_length_fraction=0.3, axis_pixel_px=200.0))
    arc = simulate_arc(profile, seed=24, lamps="Ne+Ar", grating_angle_deg=ANGLE,
                       missing_fraction=0.6, **dict(TRUTH, angle_error_deg=2.0,
                                                    focal_error_fraction=-0.05,
                                                    axis_error_px=60.0))
    n = arc.truth.n_pixels
    every = np.sort(arc.lines["x_true"].to_numpy(float))
    alone = np.array([np.count_nonzero(np.abs(every - x) < 10.0) == 1 for x in arc.lines["x_true"]])
    lines = arc.lines[arc.lines["listed"] & ~arc.lines["ghost"] & ~arc.lines["saturated"] & alone
                      & (arc.lines["snr"] >= 20)
                      & (arc.lines["x_true"] > 5) & (arc.lines["x_true"] < n - 5)
                      ].sort_values("snr", ascending=False)
    chosen: list[tuple[float, float]] = []
    for x, lam in zip(lines["x_true"], lines["wavelength_nm"]):
        if len(chosen) < 3 and all(abs(x - other) > n / 12 for other, _ in chosen):
            chosen.append((x, lam))
    assert len(chosen) == 3
    noise = np.random.default_rng(1).normal(0.0, 0.3, 3)
    pairs = folder / "pairs.txt"
    pairs.write_text("# pixel  wavelength\n" + "".join(
        f"{x + e:.2f}  {lam:.4f}   # named by eye\n" for (x, lam), e in zip(chosen, noise)))
    return wide, arc, arc.write(folder / "arc.fits"), pairs


def test_three_named_lines_identify_the_rest(anchored):
    wide, arc, path, pairs = anchored
    solution = calibrate_frame(path, wide, trace_slit=False, anchors=read_anchors(pairs))
    assert solution.status != "failed"
    assert _error(solution, arc) < RIGHT_PX
    user = solution.lines[solution.lines["source"] == "user"]
    assert len(user) == 3 and (user["identification"] == "used").all()
    assert solution.statistics.n_used > 3
    assert solution.notes == (f"3 of the {solution.statistics.n_used} lines used were named by "
                              "the user (pairs.txt); the significance counts only the others",)


def resolve_lines_for(details):
    """The listed features of a calibration's lamps, resolved as the calibration did."""
    in_range = load_line_list(("Ne", "Ar"), medium="air").in_range(
        *details.solution.wavelength([0.0, details.nominal.n_pixels - 1.0]))
    return resolve_lines(in_range, details.identification.best.model, details.peaks.fwhm_at)


def test_named_lines_are_no_evidence(anchored):
    wide, _, path, pairs = anchored
    details = calibrate_frame(path, wide, trace_slit=False, anchors=read_anchors(pairs),
                              details=True)
    named = anchor_peaks(read_anchors(pairs), details.peaks.table["x"].to_numpy(float), 3.0)
    assert np.all(named >= 0)
    refined = refine_fit(details.identification.best, details.box,
                         details.peaks.table.reset_index(drop=True),
                         resolve_lines_for(details), 3.0, min_lines=5)
    with_user, n_user = found_lines_chance(refined, named)
    without_user, none = found_lines_chance(refined, np.full(3, -1))
    assert (n_user, none) == (3, 0)
    assert with_user > without_user  # the user's lines do not make it more significant
    assert details.identification.log10_trials == 0.0  # one search


@pytest.mark.parametrize("text, message", [
    ("100 500.0\n200 600.0\n", "2 pixel/wavelength pair(s); at least 3 needed"),
    ("100 500.0\n200 abc\n300 700.0\n", "line 2: expected a pixel and a wavelength"),
    ("100 500.0\n200 600.0 1\n300 700.0\n", "line 2: expected a pixel and a wavelength"),
    ("100 500.0\n200 -600.0\n300 700.0\n", "line 2: pixel and wavelength must be finite"),
    ("100 500.0\n100 600.0\n300 700.0\n", "a pixel or a wavelength is given twice"),
])
def test_bad_anchor_files_are_refused_in_one_line(tmp_path, text, message):
    path = tmp_path / "pairs.txt"
    path.write_text(text)
    with pytest.raises(AnchorFileError, match=re.escape(message)) as info:
        read_anchors(path)
    assert str(info.value).startswith(str(path)) and "\n" not in str(info.value)
    with pytest.raises(AnchorFileError, match="cannot read"):
        read_anchors(tmp_path / "missing.txt")


def test_two_pairs_naming_one_peak_are_refused(anchored, tmp_path):
    wide, _, path, pairs = anchored
    first = pairs.read_text().splitlines()[1].split()
    doubled = tmp_path / "doubled.txt"
    doubled.write_text(pairs.read_text() + f"{float(first[0]) + 0.5:.2f} {float(first[1]) + 0.01}\n")
    with pytest.raises(AnchorFileError, match="doubled.txt: two pairs name the same peak"):
        calibrate_frame(path, wide, trace_slit=False, anchors=read_anchors(doubled))


def test_solve_anchors_on_the_command_line(anchored, tmp_path, capsys):
    _, _, path, pairs = anchored
    bad = tmp_path / "bad.txt"
    bad.write_text("1 2\n")
    assert main(["solve", str(path), "-p", "tho_longslit", "-o", str(tmp_path), "--no-report",
                 "--no-plot", "--no-slit", "--anchors", str(bad)]) == ExitCode.BAD_INPUT
    assert "bad.txt: 1 pixel/wavelength pair(s)" in capsys.readouterr().err
    code = main(["solve", str(path), "-p", "tho_longslit", "-o", str(tmp_path), "--no-report",
                 "--no-plot", "--no-slit", "--anchors", str(pairs)])
    assert code in (ExitCode.OK, ExitCode.SUSPECT)
    written = load_solution(next(tmp_path.glob("*.solution.json")))
    assert (written.lines["source"] == "user").sum() == 3


def test_a_profile_names_its_reference_relative_to_itself(setting, tmp_path):
    _, _, ref_path, hard, hard_path = setting
    folder = tmp_path / "instrument"
    folder.mkdir()
    (folder / "last-good.json").write_bytes(ref_path.read_bytes())
    text = example_profile_paths()["tho_longslit"].read_text()
    (folder / "mine.toml").write_text(text + '\n[reference]\nsolution = "last-good.json"\n'
                                      "drift_px = 7\n")
    profile = load_profile(folder / "mine.toml")
    assert profile.reference.solution == folder / "last-good.json"
    solution = calibrate_frame(hard_path, profile, trace_slit=False)
    assert solution.reference["file"] == "last-good.json"
    assert "shift by 7 px" in solution.notes[0]
    assert _error(solution, hard) < RIGHT_PX
    (folder / "bad.toml").write_text(text + '\n[reference]\nsolution = "x.json"\ndrift_px = -1\n')
    with pytest.raises(ProfileError, match=r"bad\.toml: \[reference\] drift_px"):
        load_profile(folder / "bad.toml")
