"""The multi-grating profile through the rest of the tool: the solution file records the
grating, ``wavecal plan --grating``, and simulated frames carrying the grating and binning
keywords an instrument of several gratings reads (invented Tamsin Hill instruments)."""
from __future__ import annotations

import dataclasses
import json
import math

import pytest

from wavecal.cli.main import main
from wavecal.night.synthetic import grating_night_profile
from wavecal.simulate import simulate_arc
from wavecal.solution import load_solution
from wavecal.status import ExitCode


# ------------------------------------------------------------------------------------------------
# The solution file
# ------------------------------------------------------------------------------------------------

def test_solution_file_keeps_the_grating_and_reads_files_without_it(shared_solution, tmp_path):
    _, solution = shared_solution("tho_longslit", seed=2, lamps=("Hg", "Ne", "Ar"))
    assert solution.grating is None  # a one-grating profile names none
    named = dataclasses.replace(solution, grating="G300")
    path = named.write(tmp_path / "named.solution.json")
    assert load_solution(path).grating == "G300"
    assert json.loads(path.read_text())["grating"] == "G300"
    old = json.loads(path.read_text())
    del old["grating"]  # as written before solutions recorded a grating
    (tmp_path / "old.solution.json").write_text(json.dumps(old))
    assert load_solution(tmp_path / "old.solution.json").grating is None


# ------------------------------------------------------------------------------------------------
# wavecal plan --grating
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("name, grooves", [("G1200", 1200.0), ("g300", 300.0)])
def test_plan_for_one_grating_of_several(name, grooves, capsys):
    code = main(["plan", "-p", "tho_gratings", "--grating", name, "--central-wavelength", "600",
                 "--json"])
    assert code in (ExitCode.OK, ExitCode.SUSPECT)
    plan = json.loads(capsys.readouterr().out)
    assert plan["grooves_per_mm"] == grooves
    # angular dispersion d(beta)/d(lambda) = m / (d cos beta) (common practice: the
    # differentiated grating equation), d = 1e6 / grooves nm
    beta = math.radians(plan["beta_centre_deg"])
    expected = plan["order"] / (1e6 / grooves * math.cos(beta))
    assert plan["angular_dispersion_rad_per_nm"] == pytest.approx(expected, rel=1e-9)
    # sin(alpha) + sin(beta) = m lambda / d at the centre (the grating equation)
    alpha = math.radians(plan["alpha_deg"])
    assert math.sin(alpha) + math.sin(beta) == pytest.approx(600.0 * grooves * 1e-6, rel=1e-6)


def test_plan_of_several_gratings_needs_one(capsys):
    assert main(["plan", "-p", "tho_gratings", "--central-wavelength", "600"]) == ExitCode.USAGE
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "lists several gratings (G1200, G300)" in err and "--grating" in err
    assert main(["plan", "-p", "tho_gratings", "--grating", "G600",
                 "--central-wavelength", "600"]) == ExitCode.BAD_INPUT
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "no grating 'G600'" in err and "'G1200', 'G300'" in err


# ------------------------------------------------------------------------------------------------
# The simulator
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("grating, bins", [("G1200", (2, 1)), ("G300", (1, 2))])
def test_simulated_header_names_the_grating_and_binning_by_two_keywords(grating, bins):
    wheel = grating_night_profile()
    sim = simulate_arc(wheel.with_grating(grating), central_wavelength_nm=600.0, binning=bins,
                       lamps="Hg+Ar", seed=3)
    assert sim.header["GRATING"] == grating
    assert (sim.header["COLBIN"], sim.header["ROWBIN"]) == (bins[1], bins[0])
    assert sim.data.shape == (64 // bins[0], 1024 // bins[1])
    chosen = wheel.for_header(sim.header)
    assert chosen.grating_name == grating
    assert wheel.binning_from_header(sim.header) == bins
    assert sim.truth.grooves_per_mm == chosen.grating.grooves_per_mm


def test_simulating_an_unchosen_profile_names_its_first_grating():
    wheel = grating_night_profile()
    sim = simulate_arc(wheel, central_wavelength_nm=600.0, lamps="Ne+Ar", seed=4)
    assert sim.header["GRATING"] == wheel.gratings[0].name
    assert sim.truth.grooves_per_mm == wheel.gratings[0].grating.grooves_per_mm
