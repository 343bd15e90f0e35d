"""``wavecal report``: regenerate reports from saved solutions, without fitting again."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import WavecalError
from ..status import ExitCode

__all__ = ["add_report_arguments", "run_report_command"]


def add_report_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``wavecal report SOURCE [-o OUT]``."""
    parser.add_argument("source", nargs="+",
                        help="solution file(s) (*.solution.json) or a night output folder")
    parser.add_argument("-o", "--out", default=None,
                        help="folder of the frame reports (default: beside each solution); a "
                             "night's report is always written into its folder")
    parser.add_argument("--no-frames", action="store_true",
                        help="for a night folder: only the night page, not the arcs' reports")


def run_report_command(args: argparse.Namespace) -> ExitCode:
    """Write the reports; exit code 0 written, 1 bad input."""
    from ..solution import load_solution
    from ..report.frame_report import write_frame_report
    from ..report.night_report import write_night_report
    from ..report.spectrum_file import load_spectrum, spectrum_path

    try:
        for src in map(Path, args.source):
            if src.is_dir():
                rep = write_night_report(src, frames=not args.no_frames)
                print(f"night report: {rep.html} ({len(rep.frames)} frame report(s))")
                continue
            solution = load_solution(src)
            out = Path(args.out) if args.out else src.parent
            stem = src.name[:-len(".solution.json")] if src.name.endswith(
                ".solution.json") else None
            rep = write_frame_report(solution, out, stem=stem,
                                     spectrum=load_spectrum(spectrum_path(src)))
            print(f"frame report: {rep.html}")
    except (WavecalError, OSError) as exc:
        print(f"wavecal report: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    return ExitCode.OK
