"""The one-screen text summary of a solution, as printed by the command line."""
from __future__ import annotations

import math

import numpy as np

from .solution import Solution

__all__ = ["format_summary"]

_PARAMETER_LABELS = {
    "grating_angle_deg": ("grating angle", "deg"),
    "focal_length_mm": ("camera focal length", "mm"),
    "axis_pixel": ("camera-axis pixel", "px"),
    "tilt_deg": ("detector tilt", "deg"),
    "grooves_per_mm": ("groove density", "/mm"),
}


def _fmt(value: float, digits: int = 4) -> str:
    return "n/a" if value is None or (isinstance(value, float) and math.isnan(value)) else f"{value:.{digits}g}"


def format_summary(solution: Solution) -> str:
    """Plain-text summary: verdict and reasons, range, fit quality, parameters, line counts."""
    out = []
    name = solution.frame or "frame"
    out.append(f"{name}")
    out.append(f"  verdict   : {solution.status.upper()}")
    for reason in solution.reasons:
        out.append(f"              - {reason}")
    for note in solution.notes:
        out.append(f"  note      : {note}")
    stats = solution.statistics
    ident = solution.lines["identification"].value_counts() if len(solution.lines) else {}
    out.append(f"  lamps     : {'+'.join(solution.lamps)}   profile: {solution.profile}")
    out.append(f"  peaks     : {stats.n_peaks} found, "
               f"{int(ident.get('used', 0))} used, {int(ident.get('rejected', 0))} rejected, "
               f"{stats.n_blends} blends, {int(ident.get('ghost', 0))} 2nd-order ghosts, "
               f"{int(ident.get('extra', 0))} extra, {int(ident.get('unidentified', 0))} unidentified")
    if solution.model is None:
        return "\n".join(out)
    n = solution.model.n_pixels
    lam = solution.wavelength(np.array([0.0, n - 1.0]))
    disp = abs(float(solution.model.dispersion(0.5 * (n - 1))))
    lo, hi = solution.covered_range_px
    out.append(f"  range     : {lam.min():.3f} – {lam.max():.3f} nm ({solution.medium}), "
               f"{disp:.5f} nm/px at centre")
    out.append(f"  lines span: pixels {lo:.1f} – {hi:.1f} of 0 – {n - 1} (outside: extrapolated)")
    slit = solution.slit.summary() if getattr(solution, "slit", None) is not None else None
    if slit is not None and slit.get("degree_y", 0) > 0:
        first, last = slit["rows_covered"]
        out.append(f"  slit      : lines shift by up to {slit['max_abs_shift_px']:.2f} px over rows "
                   f"{first:.0f} – {last:.0f} (reference row {solution.reference_row:.1f}); "
                   f"degree {slit['degree_x']} along x, {slit['degree_y']} along y; "
                   f"RMS {slit['rms_px']:.3f} px")
    out.append(f"  residuals : RMS {_fmt(stats.rms_px)} px = {_fmt(stats.rms_nm)} nm = "
               f"{_fmt(stats.rms_kms)} km/s;  reduced chi2 {_fmt(stats.reduced_chi2, 3)};  "
               f"distortion degree {stats.distortion_degree}")
    if stats.effective_geometry:
        out.append("  parameters of the effective model (geometry unknown: they describe the curve, "
                   "not the hardware):")
    else:
        out.append("  parameters (value ± error, shift from nominal in prior widths):")
    for p in solution.parameters.estimates:
        label, unit = _PARAMETER_LABELS.get(p.name, (p.name.replace("_", " "), ""))
        shift_txt = "" if math.isnan(p.shift_sigma) else f"  ({p.shift_sigma:+.2f})"
        out.append(f"    {label:<22s} {p.value:.6g} ± {_fmt(p.error, 2)} {unit}{shift_txt}")
    return "\n".join(out)
