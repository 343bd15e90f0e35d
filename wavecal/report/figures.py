"""The figures of a frame report and a night report (matplotlib, Agg, Okabe-Ito colours).

Every function returns a matplotlib Figure; :func:`png_bytes` renders and closes it.
"""
from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pandas as pd

from ..plots import PALETTE, residual_figure  # sets the Agg backend first
from ..solution import Solution

import matplotlib.pyplot as plt  # noqa: E402  (after the backend is chosen)

__all__ = ["spectrum_figure", "residuals_figure", "quality_figure", "slit_figure",
           "drift_figure", "arcs_figure", "png_bytes", "DPI"]

#: Resolution of the report figures (dots per inch): readable, small and quick to render.
DPI = 90
#: Okabe & Ito colours (Okabe & Ito 2008) for the marks not in :data:`wavecal.plots.PALETTE`.
_MORE = {"ghost": "#CC79A7", "unidentified": "#999999", "spectrum": "#000000",
         "series": ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9",
                    "#F0E442")}
_FONT = {"font.size": 10, "axes.titlesize": 11, "axes.labelsize": 10}


def _name(solution: Solution) -> str:
    return Path(solution.frame).name if solution.frame else "frame"


def png_bytes(fig) -> bytes:
    """Render ``fig`` as PNG bytes at :data:`DPI` and close it."""
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format="png", dpi=DPI)
    finally:
        plt.close(fig)
    return buf.getvalue()


def spectrum_figure(solution: Solution, spectrum: tuple[np.ndarray, np.ndarray] | None = None):
    """The arc spectrum with every peak marked: used lines labelled with wavelength and
    element, rejected lines, blends, ghosts and unidentified peaks each drawn distinctly.

    Without ``spectrum`` (``(x, flux)``) the peaks are drawn as sticks of their flux and the
    figure says so.
    """
    with plt.rc_context(_FONT):
        fig, ax = plt.subplots(figsize=(11, 4.2))
        lines = solution.lines
        if spectrum is not None:
            x, flux = spectrum
            ax.plot(x, flux, color=_MORE["spectrum"], lw=0.7, label="extracted spectrum")
            height = np.interp(lines["x"].to_numpy(float), x, flux) if len(x) else np.zeros(0)
            note = ""
        else:
            height = lines["flux"].to_numpy(float)
            ax.vlines(lines["x"], 0.0, height, color=_MORE["spectrum"], lw=0.8,
                      label="peak flux (stick)")
            note = " (spectrum not stored: peaks drawn as sticks)"
        height = np.where(np.isfinite(height), height, 0.0)
        top = float(np.nanmax(height)) if height.size else 1.0
        styles = (("used", "v", PALETTE["used"]), ("rejected", "D", PALETTE["rejected"]),
                  ("blend", "^", PALETTE["blend"]), ("ghost", "s", _MORE["ghost"]),
                  ("unidentified", "x", _MORE["unidentified"]))
        ident = lines["identification"].astype(str).to_numpy()
        for kind, marker, colour in styles:
            sel = ident == kind
            if not sel.any():
                continue
            ax.plot(lines["x"].to_numpy(float)[sel], height[sel] + 0.04 * top, marker,
                    color=colour, mfc=colour if kind == "used" else "none", ms=5, ls="none",
                    label=f"{kind} ({int(sel.sum())})")
        for xi, h, lam, el, kind in zip(lines["x"], height, lines["line_wavelength"],
                                        lines["element"], ident):
            if kind in ("used", "rejected", "blend") and isinstance(lam, float) and math.isfinite(lam):
                ax.annotate(f"{lam:.2f} {el}", (xi, h + 0.08 * top), rotation=90, fontsize=7,
                            ha="center", va="bottom",
                            color=PALETTE["used"] if kind == "used" else PALETTE["rejected"])
        ax.set_ylim(bottom=min(0.0, float(np.nanmin(height)) if height.size else 0.0),
                    top=1.45 * top if top > 0 else 1.0)
        if solution.model is not None:
            ax.set_xlim(0, solution.model.n_pixels - 1)
        ax.set_xlabel("pixel along dispersion")
        ax.set_ylabel("electrons per pixel")
        ax.set_title(f"{_name(solution)}: arc spectrum, {solution.status.upper()}{note}")
        ax.legend(loc="upper right", fontsize=8, ncol=3, frameon=False)
        ax.grid(alpha=0.3)
        fig.subplots_adjust(left=0.07, right=0.98, bottom=0.13, top=0.92)
    return fig


def quality_figure(solution: Solution):
    """Residual histogram, line FWHM and resolving power across the detector."""
    with plt.rc_context(_FONT):
        fig, axes = plt.subplots(1, 3, figsize=(11, 3.4))
        lines = solution.lines
        used = lines[lines["identification"] == "used"]
        res = used["residual_px"].to_numpy(float)
        res = res[np.isfinite(res)]
        if res.size:
            axes[0].hist(res, bins=max(5, min(30, res.size // 2)), color=PALETTE["used"])
            rms = solution.rms_px
            for s in (-rms, rms):
                if math.isfinite(s):
                    axes[0].axvline(s, color=PALETTE["rejected"], ls="--", lw=1)
        else:
            axes[0].text(0.5, 0.5, "no lines used", ha="center", transform=axes[0].transAxes)
        axes[0].set_xlabel("residual of used lines (px)")
        axes[0].set_ylabel("lines")
        x, fwhm = lines["x"].to_numpy(float), lines["fwhm"].to_numpy(float)
        is_used = (lines["identification"] == "used").to_numpy()
        axes[1].plot(x[~is_used], fwhm[~is_used], "x", color=_MORE["unidentified"], ms=4,
                     label="other peaks")
        axes[1].plot(x[is_used], fwhm[is_used], "o", color=PALETTE["used"], ms=4,
                     label="used lines")
        axes[1].set_xlabel("pixel along dispersion")
        axes[1].set_ylabel("FWHM (px)")
        axes[1].legend(fontsize=8, frameon=False)
        if solution.model is not None and x.size:
            lam = solution.wavelength(x)
            power = lam / (np.abs(solution.model.dispersion(x)) * fwhm)
            axes[2].plot(x[is_used], power[is_used], "o", color=PALETTE["used"], ms=4)
            axes[2].plot(x[~is_used], power[~is_used], "x", color=_MORE["unidentified"], ms=4)
        else:
            axes[2].text(0.5, 0.5, "no wavelength scale", ha="center",
                         transform=axes[2].transAxes)
        axes[2].set_xlabel("pixel along dispersion")
        axes[2].set_ylabel("resolving power λ/Δλ")
        for ax in axes:
            ax.grid(alpha=0.3)
        fig.subplots_adjust(left=0.06, right=0.99, bottom=0.16, top=0.95, wspace=0.3)
    return fig


def residuals_figure(solution: Solution):
    """:func:`wavecal.plots.residual_figure` with fixed margins (quicker to render than its
    constrained layout)."""
    fig = residual_figure(solution)
    fig.set_layout_engine("none")
    fig.subplotpars.update(left=0.08, right=0.98, bottom=0.16, top=0.92, hspace=0.35)
    for ax in fig.axes:
        spec = ax.get_subplotspec()
        if spec is not None:
            ax.set_position(spec.get_position(fig))
    return fig


def slit_figure(solution: Solution):
    """Map of the line shift Δ(x, y) along the slit (tilt and curvature), or None."""
    slit = solution.slit
    if slit is None or solution.model is None:
        return None
    with plt.rc_context(_FONT):
        fig, ax = plt.subplots(figsize=(9, 3.6))
        x = np.linspace(0.0, solution.model.n_pixels - 1.0, 120)
        y = np.linspace(*slit.rows_covered, 60)
        xx, yy = np.meshgrid(x, y)
        shift = slit.shift(xx, yy)
        mesh = ax.pcolormesh(xx, yy, shift, cmap="cividis", shading="auto")
        ax.contour(xx, yy, shift, colors="white", linewidths=0.6)
        fig.colorbar(mesh, ax=ax, label="line shift Δ (px)")
        ax.axhline(slit.reference_row, color=PALETTE["rejected"], lw=1, ls="--",
                   label="reference row")
        ax.set_xlabel("pixel along dispersion")
        ax.set_ylabel("row along slit")
        ax.set_title(f"slit tilt/curvature map (fit RMS {slit.rms_px:.3f} px)")
        ax.legend(loc="upper right", fontsize=8)
        fig.subplots_adjust(left=0.08, right=1.0, bottom=0.15, top=0.9)
    return fig


def drift_figure(drift: pd.DataFrame):
    """Shift (px) of each configuration's arcs through the night, relative to its first arc."""
    with plt.rc_context(_FONT):
        fig, ax = plt.subplots(figsize=(9, 3.4))
        if drift.empty:
            ax.text(0.5, 0.5, "no usable arcs: no drift measured", ha="center",
                    transform=ax.transAxes)
        for i, (conf, grp) in enumerate(drift.groupby("configuration", sort=True)):
            t = pd.to_datetime(grp["observation_time"], errors="coerce")
            ax.plot(t, grp["shift_px"], "o-", color=_MORE["series"][i % 7], ms=5,
                    label=str(conf))
        ax.set_xlabel("observation time (UTC)")
        ax.set_ylabel("shift vs first arc (px)")
        ax.set_title("drift of each configuration")
        ax.grid(alpha=0.3)
        if not drift.empty:
            ax.legend(fontsize=8, frameon=False)
            fig.autofmt_xdate()
        fig.subplots_adjust(left=0.09, right=0.98, bottom=0.25, top=0.9)
    return fig


def arcs_figure(arcs: pd.DataFrame):
    """RMS (px) and number of lines used of every arc, in observation order."""
    with plt.rc_context(_FONT):
        fig, (a, b) = plt.subplots(1, 2, figsize=(11, 3.2))
        idx = np.arange(len(arcs))
        colours = [PALETTE["used"] if s == "ok" else PALETTE["blend"] if s == "suspect"
                   else PALETTE["rejected"] for s in arcs.get("status", [])]
        a.bar(idx, pd.to_numeric(arcs.get("rms_px"), errors="coerce"), color=colours)
        a.set_ylabel("RMS (px)")
        b.bar(idx, pd.to_numeric(arcs.get("n_used"), errors="coerce"), color=colours)
        b.set_ylabel("lines used")
        for ax in (a, b):
            ax.set_xlabel("arc (observation order; blue ok, orange suspect, red failed)")
            ax.grid(alpha=0.3, axis="y")
        fig.subplots_adjust(left=0.07, right=0.99, bottom=0.17, top=0.95, wspace=0.25)
    return fig
