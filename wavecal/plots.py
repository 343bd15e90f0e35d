"""Figures of a solution (matplotlib, no display needed).

Colours come from the Okabe & Ito colour-blind-safe palette (Okabe & Ito 2008, "Color Universal
Design").
"""
from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ._atomic import atomic_path  # noqa: E402
from .solution import Solution  # noqa: E402

__all__ = ["residual_figure", "save_residual_plot", "save_png", "PALETTE"]

#: Okabe & Ito colour-blind-safe colours.
PALETTE = {"used": "#0072B2", "rejected": "#D55E00", "blend": "#E69F00", "band": "#56B4E9",
           "extrapolated": "#999999", "text": "#000000"}


def residual_figure(solution: Solution):
    """Residuals (pixels) against pixel and against wavelength, as a matplotlib Figure.

    Used lines are filled circles with error bars, rejected lines open diamonds, blends
    triangles; the band is ±RMS; the shaded regions are extrapolated (no line used there).
    """
    fig, axes = plt.subplots(2, 1, figsize=(9, 6.5), constrained_layout=True)
    lines = solution.lines
    title = f"{Path(solution.frame).name if solution.frame else 'frame'} — {solution.status.upper()}"
    fig.suptitle(title, fontsize=13)
    if solution.model is None:
        for ax in axes:
            ax.text(0.5, 0.5, "no solution: " + "; ".join(solution.reasons), ha="center",
                    va="center", wrap=True, transform=ax.transAxes)
            ax.set_axis_off()
        return fig
    rms = solution.rms_px
    n = solution.model.n_pixels
    lo, hi = solution.covered_range_px
    for ax, key, label in ((axes[0], "x", "pixel along dispersion"),
                           (axes[1], "line_wavelength", f"wavelength ({solution.medium}, nm)")):
        for kind, marker in (("used", "o"), ("rejected", "D"), ("blend", "^")):
            sel = lines[lines["identification"] == kind]
            if sel.empty:
                continue
            ax.errorbar(sel[key], sel["residual_px"], yerr=sel["x_err"], fmt=marker,
                        color=PALETTE[kind], mfc=PALETTE[kind] if kind == "used" else "none",
                        ms=5, lw=1, label=f"{kind} ({len(sel)})")
        if np.isfinite(rms):
            ax.axhspan(-rms, rms, color=PALETTE["band"], alpha=0.25, lw=0,
                       label=f"±RMS = {rms:.3f} px")
        ax.axhline(0.0, color="k", lw=0.8)
        ax.set_xlabel(label, fontsize=11)
        ax.set_ylabel("observed − model (px)", fontsize=11)
        ax.grid(alpha=0.3)
    axes[0].set_xlim(0, n - 1)
    if np.isfinite(lo):
        axes[0].axvspan(0, lo, color=PALETTE["extrapolated"], alpha=0.2, lw=0, label="extrapolated")
        axes[0].axvspan(hi, n - 1, color=PALETTE["extrapolated"], alpha=0.2, lw=0)
        wl = np.sort(solution.wavelength(np.array([0.0, lo, hi, n - 1.0])))
        axes[1].set_xlim(wl[0], wl[-1])
        axes[1].axvspan(wl[0], wl[1], color=PALETTE["extrapolated"], alpha=0.2, lw=0)
        axes[1].axvspan(wl[2], wl[3], color=PALETTE["extrapolated"], alpha=0.2, lw=0)
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncol=len(labels), fontsize=9,
               frameon=False)
    return fig


def save_png(fig, path: str | Path) -> Path:
    """Write a matplotlib figure as a PNG file, atomically, and close the figure."""
    path = Path(path)
    try:
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format="png", dpi=110)
    finally:
        plt.close(fig)
    return path


def save_residual_plot(solution: Solution, path: str | Path) -> Path:
    """Write :func:`residual_figure` as a PNG file, atomically."""
    return save_png(residual_figure(solution), path)
