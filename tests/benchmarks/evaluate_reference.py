"""Frames the blind search cannot do, solved from a previous solution of the same setting.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/evaluate_reference.py            # 30 frames
    python tests/benchmarks/evaluate_reference.py --n 12     # a smoke run

Each case simulates (:func:`wavecal.simulate.simulate_arc`, the invented Tamsin Hill long-slit
spectrograph) a rich Ne+Ar reference arc with the true optics drawn within the priors, solves it
blindly and keeps it as the reference when its verdict is ``ok``. The hard frame of the case has
the same setting (same header grating angle), the optics drifted by 1-5 px (camera-axis pixel)
and 0-5e-4 in focal length, and one of three difficulties:

- ``few lines``: 4-6 listed lines on the detector (most of the lamp's lines missing);
- ``sparse lamp``: a lamp with few listed lines in range (He, Hg or Kr alone);
- ``wide prior``: a profile whose grating-angle and focal-length priors are ten times wider,
  with 6-8 lines.

It is solved blindly, with the reference, and from three pixel/wavelength pairs (the strongest
listed line in each third of the detector, their true positions read to 0.3 px rms, as a user
would off a plot; no reference). A frame is *right* when the verdict is not
``failed`` and the solution is within 0.25 px of the truth over the lines' range; a *wrong ok* is
an ``ok`` solution off by more (must be 0).
"""
from __future__ import annotations

import argparse
import dataclasses
import math
import tempfile
from pathlib import Path

import numpy as np

from wavecal.anchors import read_anchors
from wavecal.calibrate import calibrate_frame
from wavecal.frames import frame_from_array
from wavecal.profile import example_profile_paths, load_profile
from wavecal.simulate import simulate_arc
from wavecal.solution_prior import load_reference

RIGHT_PX = 0.25
KINDS = ("few lines", "sparse lamp", "wide prior")


def max_error(solution, arc) -> float:
    """Largest error (px) of a solution over its lines' range (NaN without one)."""
    if solution.model is None or solution.status == "failed":
        return math.nan
    lo, hi = solution.covered_range_px
    x = np.linspace(lo, hi, 400)
    return float(np.max(np.abs((solution.wavelength(x) - arc.true_wavelength(x))
                               / np.abs(arc.truth.dispersion(x)))))


def _listed_on_detector(arc) -> int:
    lines = arc.lines
    inside = (lines["x_true"] > 5) & (lines["x_true"] < arc.truth.n_pixels - 5)
    return int(np.count_nonzero(lines["listed"] & ~lines["ghost"] & inside & (lines["snr"] >= 10)))


def run_case(index: int, seed: int, folder: Path):
    """One case: (kind, n listed lines, then (status, error) blind, with the reference and from
    three anchors) or
    None when the rich reference frame itself was not solved ``ok`` or no hard frame with the
    difficulty's line count was drawn."""
    profile = load_profile(example_profile_paths()["tho_longslit"])
    rng = np.random.default_rng([seed, index])
    kind = KINDS[index % len(KINDS)]
    pr = profile.priors
    truth = dict(angle_error_deg=float(rng.uniform(-0.8, 0.8) * pr.grating_angle_deg),
                 focal_error_fraction=float(rng.uniform(-0.8, 0.8) * pr.focal_length_fraction),
                 axis_error_px=float(rng.uniform(-0.8, 0.8) * pr.axis_pixel_px),
                 tilt_error_deg=float(rng.uniform(-0.5, 0.5) * pr.tilt_deg),
                 distortion_px=(0.0, 0.0, 0.0, 0.0))
    angle = float(rng.uniform(12.0, 22.0))
    ref_arc = simulate_arc(profile, seed=rng, lamps="Ne+Ar", grating_angle_deg=angle, **truth)
    ref = calibrate_frame(frame_from_array(ref_arc.data, profile, header=ref_arc.header), profile,
                          trace_slit=False)
    if ref.status != "ok" or not max_error(ref, ref_arc) < RIGHT_PX:
        return None
    ref_path = ref.write(folder / f"ref{index:03d}.json")
    drifted = dict(truth)
    drifted["axis_error_px"] += float(rng.choice([-1, 1]) * rng.uniform(1.0, 5.0))
    drifted["focal_error_fraction"] += float(rng.uniform(-5e-4, 5e-4))
    hard_profile = profile
    if kind == "few lines":
        options, wanted = dict(lamps="Ne+Ar", missing_fraction=0.85), (4, 6)
    elif kind == "sparse lamp":
        options, wanted = dict(lamps=str(rng.choice(["He", "Hg", "Kr"])),
                               missing_fraction=0.2), (3, 99)
    else:
        options, wanted = dict(lamps="Ne+Ar", missing_fraction=0.75), (6, 8)
        hard_profile = dataclasses.replace(profile, priors=dataclasses.replace(
            pr, grating_angle_deg=10 * pr.grating_angle_deg,
            focal_length_fraction=10 * pr.focal_length_fraction))
    for _ in range(30):  # draw the lamp's missing lines until the count is the difficulty's
        hard = simulate_arc(profile, seed=rng, grating_angle_deg=angle, **options, **drifted)
        if wanted[0] <= _listed_on_detector(hard) <= wanted[1]:
            break
    else:
        return None
    frame = frame_from_array(hard.data, hard_profile, header=hard.header)
    blind = calibrate_frame(frame, hard_profile, trace_slit=False)
    with_ref = calibrate_frame(frame, hard_profile, trace_slit=False,
                               reference=load_reference(ref_path))
    anchored = calibrate_frame(frame, hard_profile, trace_slit=False,
                               anchors=read_anchors(_write_anchors(hard, rng, folder, index)))
    return (kind, _listed_on_detector(hard), (blind.status, max_error(blind, hard)),
            (with_ref.status, max_error(with_ref, hard)),
            (anchored.status, max_error(anchored, hard)))


def _write_anchors(arc, rng, folder: Path, index: int) -> Path:
    """Three pairs as a user would name them: the strongest listed line in each third of the
    detector (else the next strongest at least 20 px from those chosen), their true positions
    read to 0.3 px rms."""
    lines = arc.lines
    n = arc.truth.n_pixels
    usable = lines[lines["listed"] & ~lines["ghost"] & (lines["snr"] >= 10) & (lines["x_true"] > 5)
                   & (lines["x_true"] < n - 5)].sort_values("snr", ascending=False)
    chosen = []
    for third in range(3):
        inside = usable[(usable["x_true"] >= third * n / 3) & (usable["x_true"] < (third + 1) * n / 3)]
        if len(inside):
            chosen.append((inside["x_true"].iloc[0], inside["wavelength_nm"].iloc[0]))
    for x, lam in zip(usable["x_true"], usable["wavelength_nm"]):
        if len(chosen) < 3 and all(abs(x - c[0]) > 20 for c in chosen):
            chosen.append((x, lam))
    path = folder / f"anchors{index:03d}.txt"
    path.write_text("# pixel  wavelength (nm)\n" + "".join(
        f"{x + rng.normal(0.0, 0.3):.2f} {lam:.4f}\n" for x, lam in chosen))
    return path


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--n", type=int, default=30, help="cases (default: %(default)s)")
    parser.add_argument("--seed", type=int, default=14, help="base seed (default: %(default)s)")
    args = parser.parse_args(argv)
    rows = []
    print(f"{'case':>4} {'kind':<12} {'lines':>5}  {'blind':<8} {'err px':>7}  "
          f"{'reference':<9} {'err px':>7}  {'anchors':<8} {'err px':>7}")
    with tempfile.TemporaryDirectory() as tmp:
        for index in range(args.n):
            row = run_case(index, args.seed, Path(tmp))
            if row is None:
                print(f"{index:>4} (reference not solved ok, or no hard frame of that difficulty: skipped)")
                continue
            kind, n_lines, (b_status, b_err), (r_status, r_err), (a_status, a_err) = row
            print(f"{index:>4} {kind:<12} {n_lines:>5}  {b_status:<8} {b_err:>7.3f}  "
                  f"{r_status:<9} {r_err:>7.3f}  {a_status:<8} {a_err:>7.3f}", flush=True)
            rows.append(row)
    print()
    for label, col in (("blind", 2), ("reference", 3), ("anchors", 4)):
        for kind in (*KINDS, "all"):
            sel = [r for r in rows if kind in ("all", r[0])]
            right = [r for r in sel if r[col][0] != "failed" and r[col][1] < RIGHT_PX]
            ok = [r for r in right if r[col][0] == "ok"]
            wrong_ok = [r for r in sel if r[col][0] == "ok" and not r[col][1] < RIGHT_PX]
            print(f"{label:<9} {kind:<12} right {len(right):>2}/{len(sel):<2}  ok {len(ok):>2}  "
                  f"wrong-but-ok {len(wrong_ok)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
