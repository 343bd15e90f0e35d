"""Figure of a setup plan: the detector with the lines of every shipped lamp and their ghosts.

Colours come from the Okabe & Ito colour-blind-safe palette (Okabe & Ito 2008, "Color Universal
Design"); line kinds also differ in length and style, so the figure reads without colour.
"""
from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .._atomic import atomic_path  # noqa: E402
from ..optics import scalar_blaze_efficiency  # noqa: E402

if TYPE_CHECKING:
    from .core import SetupPlan

__all__ = ["PLAN_PALETTE", "plan_figure", "save_plan_plot"]

#: Okabe & Ito colours of the line kinds and shaded regions.
PLAN_PALETTE = {"strong": "#0072B2", "line": "#56B4E9", "weak": "#999999", "ghost": "#D55E00",
                "faint_ghost": "#CC79A7", "overlap": "#E69F00", "insensitive": "#000000",
                "blaze": "#009E73"}


def _row_lines(ax, table, row: int, n: int) -> None:
    """Vertical ticks of one element's lines in its row (row centre at ``row``)."""
    kinds = (
        ("strong", ~table["ghost"] & table["strong"], 0.42, "-", 1.6),
        ("line", ~table["ghost"] & ~table["strong"] & ~table["weak"], 0.3, "-", 1.2),
        ("weak", ~table["ghost"] & table["weak"], 0.16, "-", 0.9),
        ("ghost", table["ghost"] & table["sensitive"] & ~table["weak"], 0.36, "--", 1.3),
        ("faint_ghost", table["ghost"] & ~(table["sensitive"] & ~table["weak"]), 0.16, ":", 1.0),
    )
    for kind, mask, half, style, width in kinds:
        x = table.loc[mask, "x"].to_numpy()
        x = x[(x >= -0.5) & (x <= n - 0.5)]
        if len(x):
            ax.vlines(x, row - half, row + half, colors=PLAN_PALETTE[kind], linestyles=style,
                      linewidth=width)


def plan_figure(plan: SetupPlan):
    """The plan as a matplotlib Figure.

    Top panel: relative blaze efficiency across the detector (scalar approximation), pixels
    outside the sensitivity range and pixels reached by other orders within it (no filter).
    Bottom panel: one row per shipped element, best single lamp on top; working-order lines as
    solid ticks (long: strong, medium: other, short: weak), other-order ghosts dashed (within
    the sensitivity range) or dotted (outside it or weak). The top axis gives the wavelength.
    """
    n = plan.n_pixels
    model = plan.model
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(11, 7.5), sharex=True,
                                      gridspec_kw={"height_ratios": [1, 3]}, constrained_layout=True)
    lo, hi = plan.wavelength_range_nm
    angle = "" if plan.grating_angle_deg is None else f", grating angle {plan.grating_angle_deg:.3f}°"
    best = plan.recommended[0].label if plan.recommended else "none"
    filters = plan.filters
    advice = []
    if filters.long_pass_needed:
        advice.append(f"long-pass cut-on {filters.cut_on_nm:g} nm")
    if filters.short_pass_needed:
        advice.append(f"short-pass cut-off {filters.cut_off_nm:g} nm")
    fig.suptitle(f"{plan.profile_name}\norder {plan.order}, {lo:.1f} – {hi:.1f} nm "
                 f"({plan.medium}){angle}; recommended lamps: {best}; filter: "
                 f"{', '.join(advice) if advice else 'none needed'}", fontsize=12)

    x = np.linspace(0.0, n - 1.0, 600)
    lam = model.wavelength(x)
    sens = plan.sensitivity_nm
    outside = (lam < sens[0]) | (lam > sens[1])
    if outside.any():
        top.fill_between(x, 0, 1.05, where=outside, color=PLAN_PALETTE["insensitive"], alpha=0.12,
                         lw=0, label="outside sensitivity range")
    overlapped = np.zeros_like(x, dtype=bool)
    for o in plan.overlaps:
        if o.sensitive_range_nm is not None:
            other = model.with_parameters(order=o.order).wavelength(x)
            overlapped |= (other >= o.sensitive_range_nm[0]) & (other <= o.sensitive_range_nm[1])
    if overlapped.any():
        top.fill_between(x, 0, 1.05, where=overlapped, color=PLAN_PALETTE["overlap"], alpha=0.3,
                         lw=0, label="other orders land here (no filter)")
    if plan.blaze_nm is not None:
        eff = scalar_blaze_efficiency(model, lam, plan.order, blaze_nm=plan.blaze_nm,
                                      blaze_order=plan.order)
        top.plot(x, eff, color=PLAN_PALETTE["blaze"], lw=2, label="blaze efficiency (scalar)")
    else:
        top.text(0.5, 0.5, "no blaze wavelength in the profile", ha="center", va="center",
                 transform=top.transAxes, fontsize=10)
    top.set_ylim(0, 1.05)
    top.set_ylabel("relative efficiency", fontsize=10)
    top.grid(alpha=0.3)
    if top.get_legend_handles_labels()[0]:
        top.legend(loc="lower center", fontsize=8, ncol=3, frameon=False)
    secondary = top.secondary_xaxis("top", functions=(model.wavelength, model.pixel))
    secondary.set_xlabel(f"wavelength in order {plan.order} ({plan.medium}, nm)", fontsize=10)

    order = sorted(plan.lamps, key=lambda s: (-s.score, s.label))
    for row, score in enumerate(reversed(order)):
        table = plan.lines[plan.lines["element"] == score.lamps[0]]
        _row_lines(bottom, table, row, n)
        bottom.axhline(row - 0.5, color="#dddddd", lw=0.6)
    bottom.set_yticks(range(len(order)))
    bottom.set_yticklabels([f"{s.label}  ({s.n_usable} usable, {s.rating})" for s in reversed(order)],
                           fontsize=9)
    bottom.set_ylim(-0.6, len(order) - 0.4)
    bottom.set_xlim(-0.5, n - 0.5)
    bottom.set_xlabel("detector pixel along the dispersion axis (0-based)", fontsize=10)
    handles = [plt.Line2D([], [], color=PLAN_PALETTE[k], ls=s, lw=w, label=t) for k, s, w, t in (
        ("strong", "-", 2, "strong line"), ("line", "-", 1.5, "line"), ("weak", "-", 1, "weak line"),
        ("ghost", "--", 1.5, "other order (sensitive)"),
        ("faint_ghost", ":", 1.2, "other order (weak or outside sensitivity)"))]
    fig.legend(handles=handles, loc="outside lower center", ncol=5, fontsize=9, frameon=False)
    return fig


def save_plan_plot(plan: SetupPlan, path: str | Path) -> Path:
    """Write :func:`plan_figure` as a PNG file, atomically; returns the path."""
    path = Path(path)
    fig = plan_figure(plan)
    try:
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format="png", dpi=110)
    finally:
        plt.close(fig)
    return path
