"""Speed of the nightly run: header-only inventory rate and whole-night throughput.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/benchmark_night.py                  # 1000 files, 200-frame night
    python tests/benchmarks/benchmark_night.py --files 300 --frames 60 --no-dask

It prints

(a) the inventory rate (files/s) over ``--files`` copies of a synthetic 64 x 1024 arc
    (headers only: no pixel data is read);
(b) the throughput (frames/s) of a synthetic night of ``--frames`` arcs and science frames
    (two configurations, a quarter arcs, with biases and flats) with 1 and 2 local worker
    processes, and their ratio;
(c) the same night on a local Dask cluster of 2 worker processes on the loopback address
    (optional dependency ``wavecal[dask]``; skipped with ``--no-dask``).

Each run starts from an empty output folder (nothing up to date). Invented data (Tamsin Hill).
"""
from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from wavecal.night import build_inventory, run_night  # noqa: E402
from wavecal.night.synthetic import make_night  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--files", type=int, default=1000)
    parser.add_argument("--frames", type=int, default=200)
    parser.add_argument("--no-dask", action="store_true")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        seed_night = make_night(tmp / "one", n_arcs=2, n_science=0, n_bias=0, n_flats=0,
                                bad_files=False)
        arc = next(seed_night.root.glob("arc_*.fits"))
        many = tmp / "many"
        many.mkdir()
        for i in range(args.files):
            shutil.copyfile(arc, many / f"f{i:05d}.fits")
        t = time.perf_counter()
        inv = build_inventory(many, seed_night.profile)
        dt = time.perf_counter() - t
        assert len(inv.records) == args.files
        print(f"(a) inventory: {args.files} files in {dt:.2f} s = {args.files / dt:.0f} files/s")

        per_conf = args.frames // 2
        n_arcs = max(2, per_conf // 4)
        night = make_night(tmp / "night", n_arcs=n_arcs, n_science=per_conf - n_arcs,
                           n_bias=5, n_flats=2, bad_files=False)
        n_frames = 2 * per_conf
        rates = {}
        for label, kw in (("1 worker", {"workers": 1}), ("2 workers", {"workers": 2})):
            out = tmp / f"out{len(rates)}"
            t = time.perf_counter()
            res = run_night(night.root, night.profile, out, policy="follow-drift", **kw)
            dt = time.perf_counter() - t
            rates[label] = n_frames / dt
            print(f"(b) {n_frames}-frame night, {label}: {dt:.1f} s = {rates[label]:.2f} frames/s "
                  f"(exit status {res.exit_code})")
        print(f"    ratio 2 workers / 1 worker: {rates['2 workers'] / rates['1 worker']:.2f}")
        if not args.no_dask:
            from distributed import LocalCluster

            with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                              host="127.0.0.1", dashboard_address=None) as cluster:
                t = time.perf_counter()
                res = run_night(night.root, night.profile, tmp / "outdask", policy="follow-drift",
                                scheduler=cluster.scheduler_address)
                dt = time.perf_counter() - t
            print(f"(c) {n_frames}-frame night, local Dask cluster of 2 workers: {dt:.1f} s = "
                  f"{n_frames / dt:.2f} frames/s (exit status {res.exit_code}; ratio to 1 worker "
                  f"{n_frames / dt / rates['1 worker']:.2f})")


if __name__ == "__main__":
    main()
