"""Blind calibration of simulated low-resolution frames from a rough range.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/evaluate_lowres.py                    # 80 frames, seed 2026
    python tests/benchmarks/evaluate_lowres.py --n 60 --seeds 1 2
    python tests/benchmarks/evaluate_lowres.py --quick            # 16 frames

The family is that of small grism and fibre spectrographs (issue 13): 1.5-5 Å/px; a grism whose
dispersion follows the grating equation through a prism of wavelength-dependent index, or a
small reflection grating; line FWHM 3-12 px varying smoothly along the detector (focus and the
anamorphic slit width); Ar+Ne or Ne lamps with unlisted hydrogen Balmer lines, Ar II lines and
random impurity lines that carry much of the blue flux; dense blends; a few lines saturated up
to 6 times; second-order images when no filter blocks them. Two-dimensional frames have tall
slits (300-1040 rows) imaged by a camera with a rotated detector (up to 1.5 degrees), radial
distortion and the conical-diffraction smile of the slit image; one-dimensional frames are a
single row, as a fibre spectrometer gives. Every frame is made by
:func:`wavecal.simulate.simulate_arc` from the true optics, so the truth is exact.

Four sub-families cycle with the frame index: "grism 2-D Ar+Ne", "grism 2-D Ne", "grism 1-D
Ar+Ne", "fibre 1-D Ne".

The calibration gets only a profile of ``mount = "approximate"``: the detector, and a central
wavelength and dispersion each off the truth by up to 10 % and stated as uncertain by 15 %.

Scoring: the error ``(lambda_solution(x) - lambda_true(x)) / |d lambda_true / dx|`` in pixels over
the identified lines' range (``Solution.covered_range_px``), along the solution's reference
row. For these frames a solution is **right** when its largest error is below 0.5 px (not the
0.25 px of ``evaluate.py``: the lines are 3-12 px wide) and the verdict is not ``failed``.
Printed: right, right-and-``ok``, wrong-but-``ok`` overall and per sub-family, and the notes of
the misses; for 2-D frames the whole-slit RMS error is shown in the table, not judged.
"""
from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
import traceback
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from evaluate import (SENSITIVITY_NM, Outcome, _detector, _fmt, _header, _with_rows,
                      print_table, slit_errors, usable_lines)
from wavecal.calibrate import calibrate_frame
from wavecal.profile import InstrumentProfile, profile_from_dict
from wavecal.simulate import SimulatedArc, simulate_arc

RIGHT_PX = 0.5
#: Extra element of the random-stream key of this family (evaluate.py uses none and 3).
LOWRES_STREAM = 13
SUBFAMILIES = ("grism 2-D Ar+Ne", "grism 2-D Ne", "grism 1-D Ar+Ne", "fibre 1-D Ne")
ROUGH_ERROR = 0.10
ROUGH_STATED = 0.15
MIN_USABLE = 6


@dataclass
class Scored(Outcome):
    """An outcome judged with its own tolerance (px) over the identified lines' range: along
    the solution's reference row, or with ``whole_slit`` over every half-maximum row."""

    tolerance_px: float = RIGHT_PX
    family: str = ""
    blue_unlisted: float = math.nan
    whole_slit: bool = False

    @property
    def judged_err(self) -> float:
        return self.slit_max_err if self.whole_slit else self.max_err

    @property
    def success(self) -> bool:
        return self.verdict in ("ok", "suspect") and self.judged_err < self.tolerance_px

    @property
    def wrong_ok(self) -> bool:
        return self.verdict == "ok" and not self.judged_err < self.tolerance_px


@dataclass
class Drawn:
    """One drawn frame: the true instrument, the simulation options and what the user states."""

    family: str
    lamps: str
    sim_profile: dict
    sim: dict
    tags: set


# -- drawing ---------------------------------------------------------------------------------
def draw_lowres(rng: np.random.Generator, family: str) -> Drawn:
    """Draw a low-resolution instrument and frame of sub-family ``family``."""
    lamps = "NeAr" if "Ar+Ne" in family else "Ne"
    two_d = "2-D" in family
    grism = family.startswith("grism")
    n_disp = int(rng.choice([1024, 1392, 1600, 2048]))
    pixel_um = float(rng.choice([4.65, 6.45, 9.0, 13.5]))
    dispersion = float(rng.uniform(0.15, 0.5))  # nm per pixel at the centre
    span = dispersion * n_disp
    low = max(SENSITIVITY_NM[0] + 0.5 * span, 420.0)
    centre = float(rng.uniform(low, max(low, min(SENSITIVITY_NM[1] - 0.5 * span, 720.0))))
    det = _detector(rng, n_disp, 1, 1, pixel_um)
    n_rows = int(rng.choice([300, 520, 768, 1040])) if two_d else 1
    det["shape"] = [n_rows, det["shape"][1]]
    if "trim" in det:
        det["trim"]["rows"] = [0, n_rows]
        det["overscan"]["rows"] = [0, n_rows]
    grooves = float(rng.choice([150.0, 300.0, 600.0]))
    d_nm = 1e6 / grooves
    if d_nm * 0.9 < centre * 1.2 and grooves > 150:
        grooves = 150.0
    d_nm = 1e6 / grooves
    if grism:
        index = 1.5 + 0.1 * rng.random()
        apex = float(np.degrees(np.arctan(centre / (d_nm * (index - 1.0)))))
        focal = d_nm * pixel_um * 1e3 / dispersion * 1e-6 * np.cos(np.radians(apex))
        grating = {"mount": "grism", "grooves_per_mm": grooves, "deviation_deg": 0.0,
                   "prism_apex_deg": apex, "prism_index": index,
                   "prism_index_slope_per_nm": -float(rng.uniform(2e-5, 8e-5)),
                   "prism_reference_nm": 600.0}
        header, sim = _header(True), {}
    else:
        deviation = float(rng.uniform(20.0, 40.0))
        sin_phi = centre / (d_nm * 2 * np.cos(np.radians(deviation / 2)))
        beta_c = np.arcsin(sin_phi) - np.radians(deviation / 2)
        focal = d_nm * pixel_um * 1e3 / dispersion * 1e-6 * np.cos(beta_c)
        grating = {"mount": "reflection", "grooves_per_mm": grooves, "deviation_deg": deviation,
                   "blaze_nm": float(rng.uniform(450.0, 650.0))}
        header, sim = _header(False), {"central_wavelength_nm": centre}
    profile = {"instrument": {"name": f"THO low-resolution {family}", "medium": "air",
                              "lamps": [], "sensitivity_nm": list(SENSITIVITY_NM)},
               "grating": grating, "camera": {"focal_length_mm": float(focal)},
               "detector": det, "header": header,
               "priors": {"grating_angle_deg": 0.5, "focal_length_fraction": 0.03,
                          "axis_pixel_px": 20.0, "tilt_deg": 2.0}}
    sim |= {"lamps": lamps, "peak_snr": float(np.exp(rng.uniform(np.log(60), np.log(1500)))),
            "fwhm_px": float(rng.uniform(4.0, 8.0)), "focus_variation": float(rng.uniform(0, 0.25)),
            "fwhm_slope": float(rng.uniform(-0.25, 0.25)), "anamorphic": True,
            "missing_fraction": float(rng.uniform(0.1, 0.3)),
            "unlisted_fraction": float(rng.uniform(0.3, 0.7)),
            "unlisted_strength": float(rng.uniform(0.5, 1.0)),
            "balmer": float(rng.uniform(0.3, 2.0)) if rng.random() < 0.9 else 0.0,
            "ion_lines": float(rng.uniform(0.5, 2.0)) if "Ar" in lamps else 0.0,
            "unfiltered_orders": (2,) if rng.random() < 0.5 else (),
            "saturate": int(rng.integers(0, 5)), "saturation_boost": (1.3, 6.0),
            "cosmic_rays": int(rng.integers(0, 30)) if two_d else 0,
            "hot_pixels": int(rng.integers(0, 20)) if two_d else 0}
    if two_d:
        sim |= {"detector_rotation_deg": float(rng.uniform(-1.5, 1.5)),
                "radial_distortion_px": float(rng.uniform(-3.0, 3.0)), "slit_smile": True}
    tags = {family, "with ghosts" if sim["unfiltered_orders"] else "no order filter needed",
            f"{lamps} lamp"}
    return Drawn(family, lamps, profile, sim, tags)


def rough_profile(arc: SimulatedArc, sim_profile: dict,
                  rng: np.random.Generator) -> InstrumentProfile:
    """The profile a user states: the detector, and the central wavelength and dispersion off
    the truth by up to 10 % each, stated as uncertain by 15 %."""
    x_mid = 0.5 * (arc.truth.n_pixels - 1)
    centre = float(arc.true_wavelength(x_mid))
    dispersion = float(abs(arc.true_wavelength(x_mid + 0.5) - arc.true_wavelength(x_mid - 0.5)))
    u = rng.uniform(-ROUGH_ERROR, ROUGH_ERROR, size=2)
    data = {"instrument": sim_profile["instrument"], "detector": sim_profile["detector"],
            "priors": sim_profile["priors"],
            "header": {k: v for k, v in sim_profile["header"].items() if k != "grating_angle"},
            "grating": {"mount": "approximate", "grooves_per_mm": 0.0},
            "approximate": {"central_wavelength_nm": centre * (1 + u[0]),
                            "dispersion_nm_per_px": dispersion * (1 + u[1]),
                            "central_wavelength_uncertainty": ROUGH_STATED,
                            "dispersion_uncertainty": ROUGH_STATED}}
    return profile_from_dict(data, source="<rough range>")


def blue_unlisted_share(arc: SimulatedArc) -> float:
    """Share of the line flux on the blue half of the detector that is in unlisted lines."""
    lines = arc.lines
    x_mid = 0.5 * (arc.truth.n_pixels - 1)
    blue_side = np.sign(arc.true_wavelength(x_mid + 1.0) - arc.true_wavelength(x_mid))
    blue = (lines["x_true"].to_numpy() - x_mid) * blue_side < 0
    flux = lines["flux_e"].to_numpy()
    unlisted = ~lines["listed"].to_numpy()
    total = flux[blue].sum()
    return float(flux[blue & unlisted].sum() / total) if total > 0 else math.nan


def simulate_lowres(index: int, seed: int, *, stream: int = LOWRES_STREAM
                    ) -> tuple[Drawn, SimulatedArc, InstrumentProfile, int]:
    """Draw and simulate frame ``index`` until it shows enough usable lines (``stream``: the
    extra element of the random-stream key, so that another script draws frames of its own)."""
    family = SUBFAMILIES[index % len(SUBFAMILIES)]
    for attempt in range(40):
        rng = np.random.default_rng([seed, index, attempt, stream])
        drawn = draw_lowres(rng, family)
        profile = profile_from_dict(drawn.sim_profile, source=f"<low-res {index}>")
        sim_seed = int(rng.integers(2**31))
        try:
            arc = simulate_arc(profile, seed=sim_seed, **drawn.sim)
        except ValueError:
            continue
        if usable_lines(arc) >= MIN_USABLE:
            return drawn, arc, rough_profile(arc, drawn.sim_profile, rng), sim_seed
    msg = f"low-resolution frame {index}: no setting with {MIN_USABLE} usable lines in 40 draws"
    raise RuntimeError(msg)


# -- scoring ---------------------------------------------------------------------------------
def score_frame(arc: SimulatedArc, profile: InstrumentProfile, folder: str, common: dict,
                tolerance_px: float, *, whole_slit: bool = False) -> Scored:
    """Write ``arc``, calibrate it blind with ``profile`` and score the solution against the
    truth over the identified lines' range (``common``: the descriptive fields; ``whole_slit``:
    judge a 2-D frame over all its lit rows)."""
    common = common | {"tolerance_px": tolerance_px,
                       "whole_slit": whole_slit and arc.slit_rows[1] - arc.slit_rows[0] > 1}
    path = arc.write(Path(folder) / f"frame{common['index']:05d}.fits", overwrite=True)
    start = time.perf_counter()
    try:
        solution = calibrate_frame(path, profile)
    except Exception as exc:  # an evaluation records crashes as misses and goes on
        last = traceback.extract_tb(exc.__traceback__)[-1]
        note = f"{type(exc).__name__}: {exc} ({Path(last.filename).name}:{last.lineno})"
        return Scored(**common, verdict="error", max_err=math.nan, rms_err=math.nan,
                      coverage=0.0, seconds=time.perf_counter() - start, note=note[:200])
    finally:
        path.unlink(missing_ok=True)
    seconds = time.perf_counter() - start
    note = "; ".join(solution.reasons)[:200]
    if solution.model is None:
        return _with_rows(Scored(**common, verdict=solution.status, max_err=math.nan,
                                 rms_err=math.nan, coverage=0.0, seconds=seconds, note=note),
                          arc, profile)
    lo, hi = solution.covered_range_px
    x = np.linspace(lo, hi, 500)
    error = ((solution.wavelength(x) - arc.true_wavelength(x, solution.reference_row))
             / np.abs(arc.truth.dispersion(x)))
    slit_rms, slit_max = slit_errors(solution, arc)
    outcome = Scored(**common, verdict=solution.status, max_err=float(np.max(np.abs(error))),
                     rms_err=float(np.sqrt(np.mean(error ** 2))),
                     coverage=float((hi - lo) / arc.truth.n_pixels), seconds=seconds, note=note,
                     slit_rms_err=slit_rms, slit_max_err=slit_max)
    return outcome if outcome.success else _with_rows(outcome, arc, profile)


def run_lowres(job: tuple[int, int, str]) -> Scored:
    """Simulate, calibrate from the rough range and score low-resolution frame ``index``."""
    index, seed, folder = job
    drawn, arc, rough, sim_seed = simulate_lowres(index, seed)
    common = dict(index=index, seed=sim_seed, grating=drawn.sim_profile["grating"]["mount"][:7],
                  lamps=drawn.lamps, snr=drawn.sim["peak_snr"], n_lines=usable_lines(arc),
                  shape="x".join(str(s) for s in arc.data.shape),
                  tags=tuple(sorted(drawn.tags)), family=drawn.family)
    outcome = score_frame(arc, rough, folder, common, RIGHT_PX)
    outcome.blue_unlisted = blue_unlisted_share(arc)
    return outcome


# -- report ----------------------------------------------------------------------------------
def family_counts(label: str, group: Sequence[Outcome]) -> str:
    """One table row: frames, right, right-and-ok, wrong-but-ok, other verdicts."""
    n = len(group)
    right = sum(o.success for o in group)
    right_ok = sum(o.success and o.verdict == "ok" for o in group)
    wrong_ok = sum(o.wrong_ok for o in group)
    failed = sum(o.verdict in ("failed", "error") for o in group)
    share = f"{100.0 * right_ok / right:5.1f}%" if right else "    -"
    return (f"  {label:<28} {n:>5} {right:>6} {100.0 * right / n:>6.1f}% {right_ok:>8} {share:>9}"
            f" {wrong_ok:>8} {failed:>7}")


def print_families(outcomes: Sequence[Scored]) -> None:
    """Right, right-and-ok and wrong-but-ok per family and overall, then the misses' notes."""
    print(f"  {'family':<28} {'n':>5} {'right':>6} {'rate':>7} {'right+ok':>8} {'ok/right':>9}"
          f" {'wrongok':>8} {'failed':>7}")
    for family in sorted({o.family for o in outcomes}):
        print(family_counts(family, [o for o in outcomes if o.family == family]))
    print(family_counts("all", outcomes))
    misses = [o for o in outcomes if not o.success]
    print(f"\nmisses ({len(misses)}):")
    for o in misses:
        mark = "WRONG OK " if o.wrong_ok else ""
        print(f"  {mark}{o.family} #{o.index} seed {o.seed}: {o.verdict}, max "
              f"{_fmt(o.judged_err)} px, lines {o.n_lines}: {o.note}")


def run_frames(worker: Callable, seeds: Sequence[int], n: int, workers: int) -> list[Scored]:
    """Run ``worker`` on frames ``0..n-1`` of every seed, in one process or a pool of at most
    two, with a temporary folder for the files."""
    with tempfile.TemporaryDirectory(prefix="wavecal-frames-") as folder:
        jobs = [(i, seed, folder) for seed in seeds for i in range(n)]
        if workers > 1:
            with ProcessPoolExecutor(max_workers=min(workers, 2)) as pool:
                return list(pool.map(worker, jobs))
        return [worker(job) for job in jobs]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--n", type=int, default=80, help="frames per seed (default 80)")
    parser.add_argument("--seeds", type=int, nargs="+", default=[2026],
                        help="base seeds (default 2026)")
    parser.add_argument("--quick", action="store_true", help="16 frames per seed, a smoke run")
    parser.add_argument("--workers", type=int, default=1, help="worker processes (1 or 2)")
    args = parser.parse_args(argv)
    n = 16 if args.quick else args.n
    start = time.perf_counter()
    outcomes = run_frames(run_lowres, args.seeds, n, args.workers)
    print_table(outcomes)
    print(f"\nlow-resolution frames: {len(outcomes)} over seeds {args.seeds}, wall time "
          f"{time.perf_counter() - start:.0f} s; right = verdict not failed and max error "
          f"< {RIGHT_PX} px over the identified lines' range (a low-resolution tolerance; "
          f"evaluate.py uses 0.25 px)")
    shares = 100.0 * np.array([o.blue_unlisted for o in outcomes])
    print(f"unlisted share of the line flux on the blue half: median {np.median(shares):.0f} %, "
          f"range {np.min(shares):.0f}-{np.max(shares):.0f} %")
    print_families(outcomes)
    return 0


if __name__ == "__main__":
    sys.exit(main())
