"""Cost of the QA reports of a night, as a ratio to the night's calibration time.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/benchmark_report.py                 # 50-frame night
    python tests/benchmarks/benchmark_report.py --arcs 13 --science 12

A synthetic night (two configurations, each with ``--arcs`` arcs and ``--science`` science
frames, so 50 frames by default, plus 3 biases, a flat and the bad files) is run with reports
off (one worker process); then :func:`wavecal.report.write_night_report` writes the night page
and every arc's frame report. Printed: both times and their ratio (target: at most 0.25).
Invented data (Tamsin Hill).
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from wavecal.night import run_night  # noqa: E402
from wavecal.night.synthetic import make_night  # noqa: E402
from wavecal.report import write_night_report  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--arcs", type=int, default=13, help="arcs per configuration")
    parser.add_argument("--science", type=int, default=12, help="science frames per configuration")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        night = make_night(Path(tmp) / "raw", n_arcs=args.arcs, n_science=args.science)
        n_frames = 2 * (args.arcs + args.science)
        start = time.perf_counter()
        run_night(Path(tmp) / "raw", night.profile, Path(tmp) / "out", reports=False)
        calibration_s = time.perf_counter() - start
        start = time.perf_counter()
        rep = write_night_report(Path(tmp) / "out")
        report_s = time.perf_counter() - start
    print(f"night of {n_frames} frames ({2 * args.arcs} arcs): calibration {calibration_s:.2f} s, "
          f"reports {report_s:.2f} s ({len(rep.frames)} frame reports + night page)")
    print(f"report / calibration time ratio: {report_s / calibration_s:.2f} (target <= 0.25)")


if __name__ == "__main__":
    main()
