"""``wavecal plan``: plan a grating setting before the night.

Exit codes (:class:`~wavecal.status.ExitCode`): 0 plan made, 1 bad input (unreadable profile,
unreachable wavelength, invalid option, a grating the profile does not list), 2 usage error (no
setting given for a profile whose grating angle has no header default, no ``--grating`` for a
profile listing several), 3 plan made with warnings.
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .._stems import file_stem
from ..errors import WavecalError
from ..status import ExitCode

__all__ = ["add_plan_arguments", "run_plan_command"]


def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not value > 0:
        msg = f"must be a positive number, got {text!r}"
        raise argparse.ArgumentTypeError(msg)
    return value


def _binning(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        msg = f"binning must be a positive integer, got {text!r}"
        raise argparse.ArgumentTypeError(msg)
    return value


def add_plan_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``wavecal plan`` to ``parser``."""
    parser.add_argument("-p", "--profile", required=True,
                        help="instrument profile (TOML file, or the name of a bundled example)")
    parser.add_argument("--grating", metavar="NAME",
                        help="the grating to plan for, by name, when the profile lists several")
    setting = parser.add_mutually_exclusive_group()
    setting.add_argument("--grating-angle", type=float, dest="grating_angle",
                         help="physical grating angle in degrees (default for a fixed grating: "
                              "the profile's header default)")
    setting.add_argument("--central-wavelength", type=_positive, dest="central_wavelength",
                         help="wavelength (nm, in the profile's medium) wanted at the detector "
                              "centre; the grating angle is solved for")
    parser.add_argument("--slit-width", type=_positive, dest="slit_width",
                        help="slit width in micrometres (for the slit-limited resolving power)")
    parser.add_argument("--binning", type=_binning, default=1,
                        help="binning along the dispersion axis (default: %(default)s)")
    parser.add_argument("-o", "--out", type=Path,
                        help="folder to write <profile>_<nm>nm.plan.json and .plan.png into")
    parser.add_argument("--json", action="store_true", dest="print_json",
                        help="print the plan as JSON instead of the table")
    parser.add_argument("--no-plot", action="store_true", dest="no_plot",
                        help="with --out: write only the JSON")


def _stem(profile, plan) -> str:
    base = profile.source.stem if profile.source is not None else profile.name
    if profile.grating_name:
        base = f"{base}_{profile.grating_name}"
    return f"{file_stem(base, default='plan')}_{plan.central_wavelength_nm:.0f}nm"


def _fixed_angle(profile) -> float | None:
    """Physical angle of a grating whose header keyword has a default (a fixed grating)."""
    spec = profile.header.get("grating_angle")
    if spec is None or spec.default is None:
        return None
    g = profile.grating
    return g.angle_scale * float(spec.default) + g.angle_zero_point_deg


def run_plan_command(args: argparse.Namespace) -> ExitCode:
    """Run ``wavecal plan``; returns the exit code (see the module docstring)."""
    from ..plan import plan_setup
    from ..plan.text import format_plan
    from ..profile import load_profile

    try:
        profile = load_profile(args.profile)
        grating = getattr(args, "grating", None)
        if grating is not None:
            profile = profile.with_grating(grating)
        elif profile.gratings:
            names = ", ".join(e.name for e in profile.gratings)
            print(f"error: {profile.source or profile.name} lists several gratings ({names}); "
                  "choose one with --grating", file=sys.stderr)
            return ExitCode.USAGE
        angle = getattr(args, "grating_angle", None)
        centre = getattr(args, "central_wavelength", None)
        if profile.grating.mount != "approximate" and angle is None and centre is None:
            angle = _fixed_angle(profile)
            if angle is None:
                print("error: give --grating-angle or --central-wavelength", file=sys.stderr)
                return ExitCode.USAGE
        binning = [1, 1]
        binning[profile.detector.dispersion_axis] = int(getattr(args, "binning", 1))
        plan = plan_setup(profile, grating_angle_deg=angle, central_wavelength_nm=centre,
                          slit_width_um=getattr(args, "slit_width", None), binning=tuple(binning))
        written = []
        out = getattr(args, "out", None)
        if out is not None:
            stem = _stem(profile, plan)
            written.append(plan.to_json(Path(out) / f"{stem}.plan.json"))
            if not getattr(args, "no_plot", False):
                from ..plan.plot import save_plan_plot

                written.append(save_plan_plot(plan, Path(out) / f"{stem}.plan.png"))
    except (WavecalError, OSError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    if getattr(args, "print_json", False):
        print(json.dumps(plan.summary(), indent=2, allow_nan=False))
    else:
        print(format_plan(plan))
    if written:
        print(f"written: {', '.join(str(p) for p in written)}",
              file=sys.stderr if getattr(args, "print_json", False) else sys.stdout)
    return ExitCode.SUSPECT if plan.warnings else ExitCode.OK
