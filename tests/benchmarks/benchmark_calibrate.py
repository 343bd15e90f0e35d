"""Speed and memory of a blind calibration against the cost of merely reading the frame.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/benchmark_calibrate.py            # 5 runs of each
    python tests/benchmarks/benchmark_calibrate.py --repeat 9 --seed 3

It simulates a 4096 x 512 arc of the example long-slit profile (``tho_longslit``, 4128 columns
with the overscan), writes it to a temporary FITS file and reports the median time of

(a) reading the file with astropy and taking the median along the slit (the least any tool
    must do), and
(b) ``calibrate_frame(path, profile)``: the full blind calibration from the file,

their ratio (target <= 10, and (b) <= 1 s). Memory is measured in a fresh process doing one
calibration after the imports: the peak Python allocated (tracemalloc, which also sees numpy's
buffers) and the peak resident set size above the starting one (Linux: the VmHWM mark reset
through /proc/self/clear_refs; elsewhere the growth of ru_maxrss, which can read 0 when the
imports set a higher mark), against the frame's size as float32 (target <= 5x + 200 MB). It
also times the simulation itself (target < 1.5 s).
"""
from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import tracemalloc
from pathlib import Path

import numpy as np
from astropy.io import fits

from _timing import median_time  # the folder of this script is on sys.path
from wavecal.calibrate import calibrate_frame
from wavecal.profile import load_profile
from wavecal.simulate import simulate_arc

MB = 1024.0 ** 2


def read_and_collapse(path: Path, dispersion_axis: int) -> np.ndarray:
    """Read the image with astropy and take the median across the slit."""
    data = fits.getdata(path).astype(np.float32)
    return np.median(data, axis=1 - dispersion_axis)


def _proc_status_mb(field: str) -> float | None:
    """A memory line of /proc/self/status in MB (Linux), else None."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(field + ":"):
                    return float(line.split()[1]) / 1024.0
    except OSError:
        return None
    return None


def _reset_peak_rss() -> bool:
    """Reset the kernel's resident-set high-water mark (Linux); False if not possible."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:
        return False
    return True


def memory_of_calibration(path: Path, profile) -> tuple[float, float]:
    """(tracemalloc peak, peak resident set size above the starting one), in MB."""
    rss_before = _proc_status_mb("VmRSS")
    if rss_before is None or not _reset_peak_rss():
        rss_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    tracemalloc.start()
    calibrate_frame(path, profile)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss_peak = _proc_status_mb("VmHWM")
    if rss_peak is None:
        rss_peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    return peak / MB, rss_peak - rss_before


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeat", type=int, default=5, help="runs of each timing (default 5)")
    parser.add_argument("--seed", type=int, default=1, help="simulation seed (default 1)")
    parser.add_argument("--memory-of", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    profile = load_profile("tho_longslit")
    if args.memory_of is not None:
        print(*memory_of_calibration(args.memory_of, profile))
        return 0

    axis = profile.detector.dispersion_axis
    simulate_arc(profile, seed=args.seed)  # warm-up: imports, line lists
    t_sim, arc = median_time(lambda: simulate_arc(profile, seed=args.seed), args.repeat)
    frame_mb = arc.data.size * 4 / MB

    with tempfile.TemporaryDirectory(prefix="wavecal-bench-") as folder:
        path = arc.write(Path(folder) / "arc_4096x512.fits")
        # The maximum resident set size is a high-water mark: measure it in a fresh process.
        child = subprocess.run([sys.executable, __file__, "--memory-of", str(path)],
                               capture_output=True, text=True, check=True)
        peak_mb, rss_growth = (float(v) for v in child.stdout.split())
        read_and_collapse(path, axis)
        calibrate_frame(path, profile)  # warm-up
        t_read, _ = median_time(lambda: read_and_collapse(path, axis), args.repeat)
        t_cal, solution = median_time(lambda: calibrate_frame(path, profile), args.repeat)

    lo, hi = solution.covered_range_px
    x = np.linspace(lo, hi, 500) if solution.model is not None else np.array([])
    err = ((solution.wavelength(x) - arc.true_wavelength(x)) / np.abs(arc.truth.dispersion(x))
           if x.size else np.array([np.nan]))
    budget_mb = 5 * frame_mb + 200
    print(f"frame: {arc.data.shape[0]} x {arc.data.shape[1]} {arc.data.dtype} "
          f"({frame_mb:.1f} MB as float32), lamps {arc.header['ARCLAMPS']}, "
          f"{len(arc.lines)} lines simulated")
    print(f"solution: {solution.status} {list(solution.reasons)}; "
          f"max error vs truth {np.nanmax(np.abs(err)):.4f} px over the identified range")
    print(f"median of {args.repeat} runs:")
    print(f"  simulate_arc                    {t_sim:7.3f} s   [target < 1.5 s]")
    print(f"  (a) astropy read + median       {t_read:7.3f} s")
    print(f"  (b) calibrate_frame(path)       {t_cal:7.3f} s   [target <= 1 s]")
    print(f"  ratio (b)/(a)                   {t_cal / t_read:7.1f}     [target <= 10]")
    print(f"memory during (b), fresh process: tracemalloc peak {peak_mb:.1f} MB "
          f"= {peak_mb / frame_mb:.1f}x the float32 frame; peak RSS {rss_growth:.1f} MB above "
          f"the start = {rss_growth / frame_mb:.1f}x   [target <= {budget_mb:.0f} MB]")
    return 0


if __name__ == "__main__":
    sys.exit(main())
