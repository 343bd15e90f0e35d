"""The joint fit of a configuration's arcs through a night, against the simulator's truth.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/evaluate_joint.py                 # seeds 7 and 11, 8 arcs each
    python tests/benchmarks/evaluate_joint.py --seeds 3 --arcs 6

For every seed a synthetic night (invented Tamsin Hill data, ``make_night``: two configurations,
lines drifting by 0.8 px per hour over 8 hours) is written, each arc calibrated alone
(``calibrate_frame``), and the arcs of each configuration fitted jointly (``joint_fit``). It
prints

(a) per arc: the largest |error| in pixels over the arc's covered range of its own solution and
    of its joint per-arc model (``model.pixel(true λ(x)) - x``), and the recovered shift of the
    reference wavelength against the true one in units of its stated sigma;
(b) the drift against time (slope, px/hour) against the injected one;
(c) the shared parameters' 1-sigma errors for 2, 4 and all arcs (evenly spaced through the
    night) beside the mean single-arc error and sqrt(2/n) times the 2-arc error (the scaling
    expected when the per-arc information is alike and the prior negligible);
(d) the fallback: configuration 0's arcs plus one arc of configuration 1 (another central
    wavelength and a focal length differing by about 0.5 %: a mis-grouped arc), which should
    be left out.

Targets: joint error no worse than single (median and maximum over arcs); shifts within 3
sigma; the mis-grouped arc left out and no other.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
from astropy.time import Time

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from wavecal.calibrate import calibrate_frame  # noqa: E402
from wavecal.night.joint import joint_fit  # noqa: E402
from wavecal.night.synthetic import make_night  # noqa: E402

DRIFT_PX_PER_HOUR = 0.8


def max_error(model, truth, covered) -> float:
    """Largest |pixel error| of ``model`` against ``truth`` over ``covered``."""
    x = np.linspace(covered[0], covered[1], 400)
    return float(np.max(np.abs(model.pixel(truth.wavelength(x)) - x)))


def calibrated_night(seed: int, n_arcs: int):
    """[(name, configuration, solution, box, true model, MJD)] of a synthetic night's arcs."""
    with tempfile.TemporaryDirectory() as folder:
        night = make_night(folder, seed=seed, n_arcs=n_arcs, n_science=0, n_bias=0, n_flats=0,
                           drift_px_per_hour=DRIFT_PX_PER_HOUR, bad_files=False)
        rows = []
        for name, sim in night.truth.items():
            run = calibrate_frame(night.root / name, night.profile, details=True)
            rows.append((name, night.configuration[name], run.solution, run.box, sim.truth,
                         float(Time(sim.header["DATE-OBS"], scale="utc").mjd)))
    return rows


def report_configuration(rows) -> None:
    box = rows[0][3]
    result = joint_fit([r[2] for r in rows], box, times=[r[5] for r in rows])
    print(f"  joint set {len(result.joined)}/{len(rows)} arcs, distortion degree "
          f"{result.distortion_degree}, reduced chi2 {result.reduced_chi2:.2f}")
    single_err, joint_err, z = [], [], []
    for (name, _, solution, _, truth, _), arc in zip(rows, result.arcs):
        single_err.append(max_error(solution.model, truth, solution.covered_range_px))
        joint_err.append(max_error(arc.model, truth, solution.covered_range_px))
        true_shift = truth.pixel(result.reference_wavelength_nm) - 0.5 * (truth.n_pixels - 1)
        z.append((arc.shift_px - true_shift) / arc.shift_sigma_px)
        print(f"    {name}: max |err| single {single_err[-1]:.4f} px, joint {joint_err[-1]:.4f} px;"
              f" shift {arc.shift_px:+.3f} ± {arc.shift_sigma_px:.3f} px, true "
              f"{true_shift:+.3f} ({z[-1]:+.1f} sigma)")
    print(f"  max |err| over arcs: median single {np.median(single_err):.4f} / joint "
          f"{np.median(joint_err):.4f} px, worst single {max(single_err):.4f} / joint "
          f"{max(joint_err):.4f} px; largest |shift error| {np.max(np.abs(z)):.1f} sigma")
    d = result.drift_time
    print(f"  drift against time: {d.slope:.4f} ± {d.slope_sigma:.4f} px/h (injected "
          f"{DRIFT_PX_PER_HOUR}), chi2 {d.chi2:.1f} for {d.dof} dof")
    print("  shared errors against the number of arcs (joint | mean single | sqrt(2/n) x 2-arc):")
    base = None
    for n in (2, 4, len(rows)):
        pick = np.unique(np.round(np.linspace(0, len(rows) - 1, n)).astype(int))
        sub = joint_fit([rows[i][2] for i in pick], box)
        base = sub.shared_errors if base is None else base
        cells = ", ".join(f"{name} {e:.4g} | {s:.4g} | {b * np.sqrt(2 / n):.4g}"
                          for name, e, s, b in zip(sub.shared_names, sub.shared_errors,
                                                   sub.single_errors, base))
        print(f"    n={n}: {cells}")


def report_fallback(rows) -> None:
    first = [r for r in rows if r[1] == 0]
    stranger = next(r for r in rows if r[1] == 1)
    result = joint_fit([r[2] for r in first] + [stranger[2]], first[0][3])
    print(f"  configuration 0 plus {stranger[0]} (configuration 1): joint set "
          f"{len(result.joined)}/{len(first) + 1}")
    for out in result.left_out:
        print(f"    left out {Path(out.frame).name}: {out.reason}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[7, 11])
    parser.add_argument("--arcs", type=int, default=8)
    args = parser.parse_args()
    for seed in args.seeds:
        rows = calibrated_night(seed, args.arcs)
        for c in (0, 1):
            print(f"seed {seed}, configuration {c}:")
            report_configuration([r for r in rows if r[1] == c])
        print(f"seed {seed}, fallback:")
        report_fallback(rows)


if __name__ == "__main__":
    main()
