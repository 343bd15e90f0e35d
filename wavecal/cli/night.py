"""``wavecal night``: a whole night's folder (:func:`wavecal.night.runner.run_night`)."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import WavecalError
from ..night.assign import POLICIES
from ..status import ExitCode
from ..validation import Integer, Real, option_type

__all__ = ["add_night_arguments", "run_night_command"]


def add_night_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``wavecal night RAW_DIR -p PROFILE -o OUT``."""
    parser.add_argument("raw_dir", help="folder of the night's raw FITS files (only read)")
    parser.add_argument("-p", "--profile", action="append", required=True,
                        help="instrument profile (TOML file or bundled name); repeat for several, "
                             "chosen per file by --profile-keyword")
    parser.add_argument("-o", "--out", default="wavecal-night", help="output folder")
    parser.add_argument("-r", "--recursive", action="store_true", help="also read sub-folders")
    parser.add_argument("--policy", choices=POLICIES, default=POLICIES[0],
                        help="solution of a science frame: the closest arc in time as it is, or "
                             "moved by the drift interpolated between the bracketing arcs "
                             "(default %(default)s)")
    parser.add_argument("--drift-threshold", type=option_type(Real(low=0)), default=0.05, metavar="PX",
                        help="interpolate only when the bracketing arcs differ by more (px)")
    parser.add_argument("--angle-tolerance", type=option_type(Real(low=0)), default=0.01, metavar="DEG",
                        help="grating angles closer than this form one configuration")
    parser.add_argument("--profile-keyword", default="INSTRUME",
                        help="header keyword naming the profile of each file (several profiles)")
    parser.add_argument("--group-by", action="append", default=[], metavar="KEYWORD",
                        help="further header keyword splitting configurations (repeatable)")
    parser.add_argument("-j", "--workers", type=option_type(Integer(low=1, high=256), int), default=1, help="local worker processes")
    parser.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="run on a Dask distributed scheduler (tcp://host:port); needs the "
                             "optional dependency wavecal[dask]")
    parser.add_argument("--redo", action="store_true",
                        help="remake every product, even those up to date")
    parser.add_argument("--quiet", action="store_true", help="no progress output")
    parser.add_argument("--no-report", action="store_true",
                        help="do not write the QA reports (night_report.html, reports/)")


def run_night_command(args: argparse.Namespace) -> ExitCode:
    """Run the night; exit code 0 all ok, 1 bad input, 3 something suspect, 4 something failed."""
    from ..night.progress import Progress
    from ..night.runner import run_night
    from ..profile import load_profile

    try:
        profiles = {}
        for spec in args.profile:
            prof = load_profile(spec)
            profiles[prof.name] = prof
        result = run_night(Path(args.raw_dir), profiles, Path(args.out),
                           recursive=args.recursive, workers=args.workers,
                           scheduler=args.scheduler, policy=args.policy,
                           drift_threshold_px=args.drift_threshold,
                           angle_tolerance_deg=args.angle_tolerance,
                           profile_keyword=args.profile_keyword,
                           extra_keywords=tuple(args.group_by), redo=args.redo,
                           progress=None if args.quiet else Progress(sys.stderr),
                           reports=not getattr(args, "no_report", False))
    except (WavecalError, ImportError, OSError) as exc:
        print(f"wavecal night: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    counts = result.summary["status"].value_counts().to_dict()
    print(f"{len(result.summary)} files: " + ", ".join(f"{n} {s}" for s, n in sorted(counts.items()))
          + f"; {result.n_made} product(s) made in {result.elapsed_s:.1f} s")
    print(f"summary: {result.out_dir / 'summary.csv'}   log: {result.out_dir / 'night.log'}")
    return result.exit_code
