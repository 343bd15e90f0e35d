"""The plain-text table of a setup plan, as the command line prints it."""
from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .core import SetupPlan

__all__ = ["format_plan"]

#: Rows of the lamp tables and of the ghost list shown on the terminal (the JSON has them all).
_SHOWN_RECOMMENDED = 6
_SHOWN_GHOSTS = 8
_SHOWN_OVERLAPS = 6


def _num(value, fmt: str, missing: str = "–") -> str:
    return missing if value is None else format(value, fmt)


def _range(pair, fmt: str = ".1f") -> str:
    return "none" if pair is None else f"{pair[0]:{fmt}} – {pair[1]:{fmt}} nm"


def format_plan(plan: SetupPlan) -> str:
    """Plain-text summary of ``plan``: setting, range and dispersion, resolving power, blaze,
    orders and filters, lamps, ghosts, notes and warnings."""
    out = [f"{plan.profile_name} — setup plan"]
    out += _setting(plan)
    out += _points(plan)
    out += _orders(plan)
    out += _lamps(plan)
    out += _ghosts(plan)
    out.append("  notes     :")
    out += [f"    - {note}" for note in plan.notes]
    if plan.warnings:
        out.append("  warnings  :")
        out += [f"    ! {w}" for w in plan.warnings]
    return "\n".join(out)


def _setting(plan: SetupPlan) -> list[str]:
    lo, hi = plan.wavelength_range_nm
    if plan.grating_angle_deg is None:
        angle = "fixed by the profile (geometry unknown)"
    else:
        angle = f"grating angle {plan.grating_angle_deg:.4f}° (header value {plan.header_angle:.4f})"
        if plan.solved_for_nm is not None:
            angle += f", solved for {plan.solved_for_nm:g} nm at the centre"
    littrow = _num(plan.littrow_angle_deg, ".3f")
    geometry = (f"  geometry  : alpha {plan.alpha_deg:.3f}°, beta {plan.beta_centre_deg:.3f}° at the "
                f"centre; Littrow angle of the centre {littrow}°; angular dispersion "
                f"{plan.angular_dispersion_rad_per_nm:.4e} rad/nm")
    direction = "increases" if plan.wavelength_increases else "decreases"
    span = (f"  range     : {lo:.2f} – {hi:.2f} nm ({plan.medium}) on pixels 0 – {plan.n_pixels - 1} "
            f"(binning {plan.binning[0]}x{plan.binning[1]}; wavelength {direction} with pixel)")
    return [f"  setting   : {angle}; order {plan.order}, {plan.grooves_per_mm:g}/mm, {plan.mount}",
            geometry, span]


def _limit(point) -> str:
    if point.resolving_power is None:
        return "sampling"
    return "slit" if point.resolving_power < point.sampling_resolving_power else "sampling"


def _points(plan: SetupPlan) -> list[str]:
    p = plan.points
    slit = (f"{plan.slit_width_um:g} µm slit, f_coll {plan.collimator_focal_length_mm:g} mm"
            if plan.slit_width_um is not None and plan.collimator_focal_length_mm
            else "no slit-limited R (see notes)")
    rows = [
        ("pixel", [f"{q.pixel:.1f}" for q in p], ""),
        ("wavelength", [f"{q.wavelength_nm:.3f}" for q in p], "nm"),
        ("dispersion", [f"{q.dispersion_nm_per_px:.5f}" for q in p], "nm/px"),
        ("anamorphic", [f"{q.anamorphic_magnification:.3f}" for q in p], "cos a / cos b"),
        ("slit image", [_num(q.slit_image_px, ".2f") for q in p], "px"),
        ("resolution", [_num(q.resolution_nm, ".4f") for q in p], "nm"),
        ("R (slit)", [_num(q.resolving_power, ".0f") for q in p], slit),
        ("R (2 px)", [f"{q.sampling_resolving_power:.0f}" for q in p], "sampling limit"),
        ("limited by", [_limit(q) for q in p], "the lower of the two"),
        ("blaze eff.", [_num(q.blaze_efficiency, ".2f") for q in p],
         "scalar, relative to peak" if plan.blaze_nm is not None else "no blaze in profile"),
    ]
    out = [f"  {'':<12s}{'first pixel':>13s}{'centre':>13s}{'last pixel':>13s}"]
    for label, values, unit in rows:
        out.append(f"  {label:<12s}" + "".join(f"{v:>13s}" for v in values) + f"   {unit}")
    if plan.blaze_nm is not None:
        angle = "" if plan.blaze_angle_deg is None else f" (blaze angle {plan.blaze_angle_deg:.3f}°)"
        out.append(f"  blaze     : {plan.blaze_nm:g} nm in order {plan.order}{angle}")
    return out


def _orders(plan: SetupPlan) -> list[str]:
    sens = plan.sensitivity_nm
    out = [f"  orders    : free spectral range {plan.free_spectral_range_nm:.2f} nm at the centre "
           f"({plan.free_spectral_range_px:.0f} px); sensitivity {sens[0]:g} – {sens[1]:g} nm"
           + (" (assumed)" if plan.sensitivity_assumed else "")]
    near = sorted(plan.overlaps, key=lambda o: (abs(o.order - plan.order), o.order))
    for o in near[:_SHOWN_OVERLAPS]:
        seen = ("outside the sensitivity range" if o.sensitive_range_nm is None
                else f"sensitive part {_range(o.sensitive_range_nm)}")
        out.append(f"    order {o.order:<3d} {_range(o.wavelength_range_nm)} lands here; {seen}")
    if len(near) > _SHOWN_OVERLAPS:
        out.append(f"    ... {len(near) - _SHOWN_OVERLAPS} more orders (see the JSON)")
    f = plan.filters
    if f.long_pass_needed:
        if f.cut_on_window_nm is not None:
            out.append(f"  filter    : long-pass needed: cut-on above {f.cut_on_window_nm[0]:.1f} and at "
                       f"most {f.cut_on_window_nm[1]:.1f} nm (suggested {f.cut_on_nm:g} nm)")
        else:
            out.append(f"  filter    : long-pass needed but none clears the whole detector; cut-on "
                       f"{f.cut_on_nm:g} nm keeps {_range(f.clean_range_nm)} clean")
    if f.short_pass_needed:
        if f.cut_off_window_nm is not None:
            out.append(f"  filter    : short-pass needed: cut-off at least {f.cut_off_window_nm[0]:.1f} "
                       f"and below {f.cut_off_window_nm[1]:.1f} nm (suggested {f.cut_off_nm:g} nm)")
        else:
            out.append(f"  filter    : short-pass needed but none clears the whole detector; cut-off "
                       f"{f.cut_off_nm:g} nm keeps {_range(f.clean_range_nm)} clean")
    if not (f.long_pass_needed or f.short_pass_needed):
        out.append("  filter    : none needed (no other order within the sensitivity range lands here)")
    out.append(f"  positions : uncertain by ±{plan.angle_prior_shift_px:.0f} px (the profile's "
               f"grating-angle prior)")
    return out


def _lamp_row(s) -> str:
    return (f"    {s.label:<10s}{s.n_lines:>6d}{s.n_strong:>8d}{s.n_usable:>8d}"
            f"{s.largest_gap_fraction:>8.2f}{s.thirds_covered:>8d}{s.n_ghosts:>8d}{s.n_ghosts_left:>6d}"
            f"{s.score:>8.1f}  {s.rating}")


def _lamps(plan: SetupPlan) -> list[str]:
    head = (f"    {'lamp':<10s}{'lines':>6s}{'strong':>8s}{'usable':>8s}{'gap':>8s}{'thirds':>8s}"
            f"{'ghosts':>8s}{'left':>6s}{'score':>8s}  rating")
    out = [f"  lamps     : each shipped line list (line width {plan.line_width_px:.1f} px)", head]
    out += [_lamp_row(s) for s in sorted(plan.lamps, key=lambda s: -s.score)]
    out.append("  recommended (best first):")
    out.append(head)
    out += [_lamp_row(s) for s in plan.recommended[:_SHOWN_RECOMMENDED]]
    if plan.profile_lamps is not None:
        out.append("  the profile's own lamps:")
        out.append(_lamp_row(plan.profile_lamps))
    return out


def _ghosts(plan: SetupPlan) -> list[str]:
    table = plan.lines[plan.lines["ghost"] & ~plan.lines["weak"]]
    if plan.recommended:
        best = plan.recommended[0].lamps
        table = table[table["element"].isin(best)]
        title = f"  ghosts    : other-order lines of {'+'.join(best)} on the detector (no filter)"
    else:
        title = "  ghosts    : other-order lines on the detector (no filter)"
    ghosts = table[table["sensitive"]]
    faint = table[~table["sensitive"]]
    out = [title + (": none" if ghosts.empty else "")]
    for row in ghosts.head(_SHOWN_GHOSTS).itertuples():
        blocked = ", blocked by the suggested filter" if row.filtered else ""
        out.append(f"    {row.element} {row.wavelength_nm:.3f} nm in order {row.order} at pixel "
                   f"{row.x:.0f} (looks like {row.apparent_wavelength_nm:.2f} nm){blocked}")
    if len(ghosts) > _SHOWN_GHOSTS:
        out.append(f"    ... {len(ghosts) - _SHOWN_GHOSTS} more (see the JSON)")
    if not faint.empty:
        row = faint.iloc[0]
        out.append(f"    (and {len(faint)} from outside the sensitivity range, e.g. {row['element']} "
                   f"{row['wavelength_nm']:.3f} nm in order {row['order']} at pixel {row['x']:.0f}: "
                   f"faint if the optics pass them at all)")
    return out
