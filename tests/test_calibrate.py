"""End to end: simulated raw arc frames (known truth) through calibrate_frame.

The truth is the simulator's GratingModel; success means the solution agrees with it to a small
fraction of a pixel over the range covered by the identified lines. Tolerances: 0.1 px maximum
error on well-exposed frames (the evaluation script measures the distribution over many more).
"""

import numpy as np
import pytest

from wavecal.calibrate import calibrate_frame
from wavecal.frames import frame_from_array
from wavecal.linelists import load_line_list
from wavecal.profile import load_profile
from wavecal.simulate import simulate_arc


def _max_error_px(solution, truth):
    lo, hi = solution.covered_range_px
    grid = np.linspace(lo, hi, 400)
    return float(np.max(np.abs(solution.pixel(truth.wavelength(grid)) - grid)))


@pytest.mark.parametrize("profile_name, lamps, seed", [
    ("tho_longslit", ("Hg", "Ar"), 0),
    ("tho_longslit", ("Hg", "Ne", "Ar"), 2),
    ("tho_transmission", ("Ne",), 1),
    ("tho_approximate", ("Hg", "Ne"), 3),
])
def test_blind_calibration_recovers_the_truth(profile_name, lamps, seed, shared_solution):
    sim, solution = shared_solution(profile_name, seed=seed, lamps=lamps)
    assert solution.status == "ok", solution.reasons
    assert _max_error_px(solution, sim.truth) < 0.1
    used = solution.lines[solution.lines["identification"] == "used"]
    assert len(used) >= 8
    # every used identification is a line the simulator really put there, or the centroid of
    # listed lines closer together than the line width (one feature at this resolution), one
    # of which the simulator put there
    emitted = sim.lines[sim.lines["listed"] & ~sim.lines["ghost"]]["wavelength_nm"].to_numpy()
    catalogue = load_line_list(lamps).wavelength_nm
    for wl, x, fwhm in used[["line_wavelength", "x", "fwhm"]].itertuples(index=False):
        width_nm = fwhm * abs(float(sim.truth.dispersion(x)))
        if np.min(np.abs(emitted - wl)) < 1e-6:
            continue
        members = catalogue[np.abs(catalogue - wl) < width_nm]
        assert members.min() < wl < members.max()
        assert np.min(np.abs(emitted - wl)) < width_nm


def test_wrong_lamp_is_never_ok():
    """A neon arc calibrated as if it were krypton: no trustworthy solution may come out."""
    profile = load_profile("tho_longslit")
    sim = simulate_arc(profile, seed=4, lamps=("Ne",))
    solution = calibrate_frame(frame_from_array(sim.data, profile, header=sim.header), profile,
                               lamps=("Kr",))
    assert solution.status != "ok"


def test_far_wrong_grating_angle_is_not_ok():
    """The header's grating angle is 8 degrees off, far outside the prior: never ok."""
    profile = load_profile("tho_longslit")
    sim = simulate_arc(profile, seed=6, lamps=("Hg", "Ne", "Ar"), grating_angle_deg=24.0)
    solution = calibrate_frame(frame_from_array(sim.data, profile, header=sim.header), profile,
                               grating_angle_deg=32.0)
    assert solution.status != "ok", solution.reasons


def test_calibrating_a_file_never_modifies_it(hgar_arc_file):
    import hashlib

    path = hgar_arc_file
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    solution = calibrate_frame(path, load_profile("tho_longslit"))
    assert solution.frame == str(path)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


@pytest.mark.parametrize("seed", [0, 6, 10])
def test_five_listed_lines_are_still_solved_and_judged_on_their_significance(seed):
    """Xe at a red setting with 45 % of its lines missing leaves five listed lines on the chip:
    the geometry prior still identifies them. Five coincidences are not enough to rule out
    chance after 10^4 trials by the margin an ``ok`` needs, and the verdict says so with the
    numbers (not by counting lines)."""
    profile = load_profile("tho_longslit")
    sim = simulate_arc(profile, seed=seed, lamps=("Xe",), grating_angle_deg=33.0, missing_fraction=0.45)
    lines = sim.lines
    on_chip = lines["listed"] & ~lines["ghost"] & lines["x_true"].between(5, 4090)
    assert on_chip.sum() == 5
    solution = calibrate_frame(frame_from_array(sim.data, profile, header=sim.header), profile)
    assert solution.status == "suspect"
    assert solution.reasons == (
        "identification only marginally better than chance (chance probability "
        f"10^{solution.statistics.log10_chance:.1f} after "
        f"10^{solution.statistics.log10_trials:.1f} trials)",)
    assert _max_error_px(solution, sim.truth) < 0.25


def test_hydrogen_lines_name_peaks_but_are_not_evidence():
    """A lamp module with water in its tube shows Balmer lines (H-alpha at 656.279 nm in air,
    NIST ASD). Calibrated as Hg+Ne, the H-alpha peak is named as an extra, and neither fitted
    nor counted in the identification's significance."""
    profile = load_profile("tho_approximate")
    sim = simulate_arc(profile, seed=1, lamps=("Hg", "Ne", "H"))
    solution = calibrate_frame(frame_from_array(sim.data, profile, header=sim.header), profile,
                               lamps=("Hg", "Ne"))
    extra = solution.lines[solution.lines["identification"] == "extra"]
    h_alpha = sim.truth.pixel(656.279)
    assert (extra["element"] == "H").all()
    assert np.min(np.abs(extra["x"] - h_alpha)) < 0.5
    used = solution.lines[solution.lines["identification"] == "used"]
    assert solution.statistics.n_identified == len(solution.lines[
        solution.lines["identification"].isin(["used", "rejected", "unconfirmed"])])
    assert not used["element"].str.split("+").apply(lambda names: "H" in names).any()
