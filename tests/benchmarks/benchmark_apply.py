"""Speed of applying a solution to a 4096 x 512 frame, against reading and writing that frame.

Run from the source tree (a script, not collected by pytest)::

    python tests/benchmarks/benchmark_apply.py            # 5 runs of each
    python tests/benchmarks/benchmark_apply.py --repeat 9 --seed 3
    python tests/benchmarks/benchmark_apply.py --tilt 2 --curvature 0.5   # lines tilted along the slit

It simulates an arc of the example long-slit profile (``tho_longslit``: 512 x 4128 pixels with
the overscan, uint16), calibrates it, and times from the files (median of the runs):

(a) reading the frame with astropy and writing it to a new FITS file (the least any tool does);
(b) ``apply_solution``, WCS only: the pixels as read, with header, FLAGS image, provenance;
(c) ``apply_solution`` resampled onto a linear grid (as many bins as pixels), flux-conserving;
(d) the same as (a), (b) and (c) for a float32 frame with a VARIANCE extension (the usual
    shape of a reduced science frame; (c) then also propagates the variance).

It prints each time and its ratio to (a), the WCS algorithm chosen and its largest disagreement
with the solution over every pixel. With ``--tilt``/``--curvature`` the simulated lines tilt and bend
along the slit, the solution carries a slit model and the WCS becomes a 2-D table.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
from astropy.io import fits

from _timing import median_time  # the folder of this script is on sys.path
from wavecal.apply import apply_solution
from wavecal.calibrate import calibrate_frame
from wavecal.profile import load_profile
from wavecal.simulate import simulate_arc


def read_and_write(path: Path, out: Path) -> None:
    """Read every HDU's data with astropy and write them to a new file."""
    with fits.open(path, memmap=False) as hdul:
        copy = fits.HDUList([hdu.copy() for hdu in hdul])
        for hdu, source in zip(copy, hdul):
            hdu.data = np.array(source.data)
        copy.writeto(out, overwrite=True)


def _report(label: str, path: Path, solution_path: Path, folder: Path, repeat: int) -> None:
    read_and_write(path, folder / "copy.fits")  # warm-up (page cache, imports)
    t_io, _ = median_time(lambda: read_and_write(path, folder / "copy.fits"), repeat)
    apply_solution(solution_path, path, folder / "wcs.fits")
    t_wcs, wcs = median_time(lambda: apply_solution(solution_path, path, folder / "wcs.fits"),
                              repeat)
    t_res, res = median_time(lambda: apply_solution(solution_path, path, folder / "res.fits",
                                                     grid="linear"), repeat)
    size_mb = path.stat().st_size / 1024 ** 2
    print(f"{label} ({size_mb:.1f} MB file):")
    print(f"  (a) astropy read + write           {t_io:7.3f} s")
    print(f"  (b) apply, WCS only                {t_wcs:7.3f} s   ratio (b)/(a) {t_wcs / t_io:6.1f}"
          f"   [{wcs.ctype} ({wcs.algorithm}), max {wcs.max_error_px:.2g} px from the solution]")
    print(f"  (c) apply, resampled (linear)      {t_res:7.3f} s   ratio (c)/(a) {t_res / t_io:6.1f}"
          f"   [{res.shape[0]} x {res.shape[1]} bins]")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeat", type=int, default=5, help="runs of each timing (default 5)")
    parser.add_argument("--seed", type=int, default=1, help="simulation seed (default 1)")
    parser.add_argument("--tilt", type=float, default=0.0,
                        help="tilt of the lines along the slit, degrees (default 0)")
    parser.add_argument("--curvature", type=float, default=0.0,
                        help="sagitta of the lines along the slit, pixels (default 0)")
    args = parser.parse_args(argv)
    profile = load_profile("tho_longslit")
    arc = simulate_arc(profile, seed=args.seed, line_tilt_deg=args.tilt,
                       line_curvature_px=args.curvature)
    with tempfile.TemporaryDirectory(prefix="wavecal-bench-apply-") as name:
        folder = Path(name)
        raw = arc.write(folder / "arc_4096x512.fits")
        solution = calibrate_frame(raw, profile)
        solution_path = solution.write(folder / "arc.solution.json")
        print(f"frame: {arc.data.shape[0]} x {arc.data.shape[1]} {arc.data.dtype}; solution "
              f"{solution.status}, distortion degree {solution.statistics.distortion_degree}, "
              f"slit model: {'yes' if getattr(solution, 'slit', None) is not None else 'no'}")
        print(f"median of {args.repeat} runs:")
        _report("raw uint16 frame", raw, solution_path, folder, args.repeat)
        science = folder / "science_float32.fits"
        data = arc.data.astype(np.float32)
        fits.HDUList([fits.PrimaryHDU(data, arc.header),
                      fits.ImageHDU(data + np.float32(16.0), name="VARIANCE")]).writeto(science)
        _report("float32 frame + VARIANCE", science, solution_path, folder, args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
