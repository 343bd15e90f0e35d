"""Shared test fixtures: simulated arcs (invented Tamsin Hill instruments) that several test
modules use with the same arguments, simulated and calibrated once per test session.

The pixel arrays of shared arcs are read-only, so a test that tried to change a shared arc fails
at once instead of spoiling the tests that run after it. Tests that need a frame of their own
(to change a header, or to write beside it) simulate it themselves.
"""
from __future__ import annotations

import stat
from collections.abc import Callable
from pathlib import Path

import pytest

from wavecal.calibrate import calibrate_frame
from wavecal.frames import frame_from_array
from wavecal.profile import load_profile
from wavecal.simulate import SimulatedArc, simulate_arc
from wavecal.solution import Solution


def _read_only(sim: SimulatedArc) -> SimulatedArc:
    sim.data.flags.writeable = False
    return sim


def _freeze_file(path: Path) -> Path:
    path.chmod(stat.S_IRUSR | stat.S_IRGRP | stat.S_IROTH)
    return path


@pytest.fixture(scope="session")
def shared_arc() -> Callable[..., SimulatedArc]:
    """``shared_arc(profile_name, **simulate_arc_options)``: one read-only simulated arc per set
    of arguments for the whole session."""
    cache: dict[tuple, SimulatedArc] = {}

    def get(profile_name: str, **options) -> SimulatedArc:
        key = (profile_name, tuple(sorted(options.items())))
        if key not in cache:
            cache[key] = _read_only(simulate_arc(load_profile(profile_name), **options))
        return cache[key]

    return get


@pytest.fixture(scope="session")
def shared_solution(shared_arc) -> Callable[..., tuple[SimulatedArc, Solution]]:
    """``shared_solution(profile_name, **simulate_arc_options)``: the shared arc and its blind
    calibration (default options, from the pixel array), once per session."""
    cache: dict[tuple, tuple[SimulatedArc, Solution]] = {}

    def get(profile_name: str, **options) -> tuple[SimulatedArc, Solution]:
        key = (profile_name, tuple(sorted(options.items())))
        if key not in cache:
            sim = shared_arc(profile_name, **options)
            profile = sim.profile
            frame = frame_from_array(sim.data, profile, header=sim.header)
            cache[key] = sim, calibrate_frame(frame, profile)
        return cache[key]

    return get


@pytest.fixture(scope="session")
def hgar_arc_file(shared_arc, tmp_path_factory) -> Path:
    """The Hg+Ar arc of ``tho_longslit`` (seed 0) as a read-only FITS file whose name has a
    space in it."""
    sim = shared_arc("tho_longslit", seed=0, lamps=("Hg", "Ar"))
    return _freeze_file(sim.write(tmp_path_factory.mktemp("raw") / "arc 01.fits"))


@pytest.fixture(scope="session")
def tilted_arc(shared_arc, tmp_path_factory) -> tuple[SimulatedArc, Solution, Path, Path]:
    """A real whole-slit solution: a simulated long-slit arc of ``tho_longslit`` whose lines tilt
    by 2 degrees and curve by 0.6 px along the slit (binned 2x2 to keep it quick), written to a
    read-only file and calibrated blind from it, so ``solution.slit`` is the
    :class:`~wavecal.slit_shift.SlitShift` measured on the frame.

    Returns ``(sim, solution, solution_path, frame_path)``.
    """
    folder = tmp_path_factory.mktemp("tilted")
    sim = shared_arc("tho_longslit", seed=4, lamps=("Hg", "Ne", "Ar"), line_tilt_deg=2.0,
                     line_curvature_px=0.6, binning=2)
    frame = _freeze_file(sim.write(folder / "tilted.fits"))
    solution = calibrate_frame(frame, sim.profile)
    assert solution.status == "ok" and solution.slit is not None
    return sim, solution, _freeze_file(solution.write(folder / "tilted.solution.json")), frame


@pytest.fixture(scope="session")
def small_night(tmp_path_factory):
    """A small synthetic night (2 arcs, 1 science frame, 1 bias per configuration, the bad files
    included) in a read-only folder: :class:`~wavecal.night.synthetic.SyntheticNight`."""
    from wavecal.night.synthetic import make_night

    root = tmp_path_factory.mktemp("small_night") / "raw"
    night = make_night(root, n_arcs=2, n_science=1, n_bias=1, n_flats=0)
    for path in root.iterdir():
        _freeze_file(path)
    root.chmod(stat.S_IRUSR | stat.S_IXUSR)
    yield night
    root.chmod(stat.S_IRWXU)
