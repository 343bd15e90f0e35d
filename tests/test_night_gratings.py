"""A night of one instrument with two gratings (invented Tamsin Hill data) run with ONE profile:
each frame's grating is chosen by its header, configurations are split by grating, each arc is
solved with its own grating and each science frame calibrated with an arc of its own grating.

Check values: the simulator's true model of every frame; wavelengths of the calibrated science
frames are evaluated by astropy.wcs (WCSLIB) from the written header. Tolerance 0.1 px over the
range the lines cover: the accuracy asked of a calibrated header (common practice: a tenth of a
pixel).
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from astropy.io import fits
from astropy.wcs import WCS

import astropy.units as u

from wavecal.night import build_inventory, run_night
from wavecal.night.synthetic import GRATING_NIGHT_SETTINGS, make_grating_night
from wavecal.solution import load_solution

TOLERANCE_PX = 0.1


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    return make_grating_night(tmp_path_factory.mktemp("wheel") / "raw")


@pytest.fixture(scope="module")
def result(night, tmp_path_factory):
    return run_night(night.root, night.profile, tmp_path_factory.mktemp("out"),
                     policy="follow-drift")


def _grating(night, name):
    return GRATING_NIGHT_SETTINGS[night.configuration[name]][0]


def test_inventory_chooses_each_frames_grating_and_binning(night):
    inv = build_inventory(night.root, night.profile)
    assert len(inv.configurations()) == 2
    for r in inv.records:
        grating, _, bins, _ = GRATING_NIGHT_SETTINGS[night.configuration[r.name]]
        assert not r.problem, r.problem
        assert r.grating == grating and f"/{grating}/" in r.configuration
        assert r.binning == bins  # COLBIN along NAXIS1 (columns), ROWBIN along NAXIS2 (rows)
        chosen = inv.profile_of(r)
        assert chosen.grating_name == grating and chosen.gratings == ()
        assert chosen.grating.grooves_per_mm == float(grating[1:])


def test_each_arc_is_solved_with_its_own_grating(result, night):
    rows = result.summary.set_index("file")
    arcs = [n for n, k in night.kinds.items() if k == "arc"]
    assert len(arcs) == 4
    for name in arcs:
        assert rows.loc[name, "status"] in ("ok", "suspect"), (name, rows.loc[name, "reason"])
        solution = load_solution(result.out_dir / rows.loc[name, "product"])
        assert solution.grating == _grating(night, name)
        sim = night.truth[name]
        x = np.arange(*solution.covered_range_px)
        err = np.abs(solution.wavelength(x) - sim.true_wavelength(x)) / np.abs(
            sim.truth.dispersion(x))
        assert np.max(err) < TOLERANCE_PX, (name, np.max(err))
        assert solution.covered_range_px[1] - solution.covered_range_px[0] > 0.5 * sim.data.shape[1]


def test_each_science_frame_is_calibrated_with_its_own_gratings_arc(result, night):
    rows = result.summary.set_index("file")
    science = [n for n, k in night.kinds.items() if k == "science"]
    assert len(science) == 4
    for name in science:
        assert rows.loc[name, "status"] in ("ok", "suspect"), (name, rows.loc[name, "reason"])
        used = re.findall(r"arc_\d+\.fits", rows.loc[name, "solution_used"])
        assert used and all(night.configuration[arc] == night.configuration[name]
                            for arc in used), (name, used)
        with fits.open(result.out_dir / rows.loc[name, "product"]) as hdul:
            header = hdul[0].header
            w = WCS(header, hdul)
            shape = hdul[0].data.shape
            assert shape == night.truth[name].data.shape
            x = np.arange(shape[1], dtype=float)
            y = np.full_like(x, float(np.mean(night.truth[name].slit_rows)))
            world = w.wcs_pix2world(x, y, 0)[0] * u.Unit(w.wcs.cunit[0])
        sim = night.truth[name]
        lam = world.to_value(u.nm)
        inside = (x >= header["WCCOVLO"]) & (x <= header["WCCOVHI"])
        err = np.abs(lam - sim.true_wavelength(x)) / np.abs(sim.truth.dispersion(x))
        assert np.max(err[inside]) < TOLERANCE_PX, (name, np.max(err[inside]))


def test_summary_and_page_name_the_grating_of_each_configuration(result, night):
    summary = pd.read_csv(result.out_dir / "summary.csv").set_index("file")
    page = (result.out_dir / "night_report.html").read_text(encoding="utf-8")
    for name in night.kinds:
        grating = _grating(night, name)
        assert f"/{grating}/" in summary.loc[name, "configuration"]
        assert summary.loc[name, "configuration"] in page
    inventory = pd.read_csv(result.out_dir / "inventory.csv").set_index("file")
    assert {inventory.loc[n, "grating"] for n in night.kinds} == {"G1200", "G300"}


def test_a_frame_naming_no_grating_is_its_own_problem_and_the_night_goes_on(night, tmp_path):
    raw = tmp_path / "raw"
    raw.mkdir()
    for p in night.root.iterdir():
        (raw / p.name).write_bytes(p.read_bytes())
    name = next(n for n, k in night.kinds.items() if k == "arc")
    with fits.open(raw / name, mode="update") as hdul:
        hdul[0].header["GRATING"] = "G600"
    inv = build_inventory(raw, night.profile)
    bad = next(r for r in inv.records if r.name == name)
    assert "\n" not in bad.problem
    assert bad.problem.startswith(
        f"{raw / name}: header keyword 'GRATING' = 'G600' names no grating")
    assert all(not r.problem for r in inv.records if r.name != name)
    assert len(inv.configurations()) == 2


def test_calibrate_frame_chooses_the_grating_from_the_header(night):
    from wavecal.calibrate import calibrate_frame

    name = next(n for n, k in night.kinds.items() if k == "arc" and _grating(night, n) == "G300")
    solution = calibrate_frame(night.root / name, night.profile)  # the two-grating profile
    assert solution.grating == "G300" and solution.status in ("ok", "suspect")
    assert solution.model.grooves_per_mm == 300.0
    sim = night.truth[name]
    x = np.arange(*solution.covered_range_px)
    err = np.abs(solution.wavelength(x) - sim.true_wavelength(x)) / np.abs(sim.truth.dispersion(x))
    assert np.max(err) < TOLERANCE_PX
