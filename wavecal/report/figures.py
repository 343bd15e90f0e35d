"""The figures of a frame report and a night report, drawn on a
:class:`~wavecal.report.canvas.Canvas` in the Okabe & Ito colour-blind-safe colours
(Okabe & Ito 2008, "Color Universal Design").

Every function returns a Canvas: ``canvas.png()`` gives the PNG bytes, and a notebook shows it
inline.
"""
from __future__ import annotations

import math
from pathlib import Path

import contourpy
import numpy as np
import pandas as pd
from matplotlib import colormaps

from ..solution import Solution
from ..status import Status
from .canvas import Canvas, legend
from .chart import Panel, clock_ticks, limits, nice_ticks, tick_labels

__all__ = ["spectrum_figure", "residuals_figure", "quality_figure", "slit_figure",
           "drift_figure", "arcs_figure", "PALETTE"]

#: Okabe & Ito colours by role.
PALETTE = {"used": "#0072B2", "rejected": "#D55E00", "extra": "#E69F00", "band": "#56B4E9",
           "unconfirmed": "#009E73",
           "extrapolated": "#999999", "ghost": "#CC79A7", "unidentified": "#999999",
           "spectrum": "#000000", Status.OK: "#0072B2", Status.SUSPECT: "#E69F00",
           Status.FAILED: "#D55E00"}
#: Colours of successive series (configurations) in the night figures.
SERIES = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442")
#: How each kind of peak is marked: (marker, colour, filled).
PEAK_STYLES = {"used": ("v", PALETTE["used"], True), "rejected": ("s", PALETTE["rejected"], False),
               "extra": ("^", PALETTE["extra"], False), "ghost": ("o", PALETTE["ghost"], False),
               "unidentified": ("|", PALETTE["unidentified"], False)}
_WIDTH = 1100
#: Below this spread of the line shift over the slit (px) the slit map says it is flat.
FLAT_SLIT_PX = 0.01
_LABEL_SIZE = 10.0


def _name(solution: Solution) -> str:
    return Path(solution.frame).name if solution.frame else "frame"


def _column(lines: pd.DataFrame, name: str) -> np.ndarray:
    column = lines[name]
    if column.dtype.kind != "f":
        column = pd.to_numeric(column, errors="coerce")
    return column.to_numpy(dtype=float)


def _wavelength_ticks(solution: Solution, xlim: tuple[float, float]
                      ) -> tuple[np.ndarray, list[str]] | None:
    """Round wavelengths and where they fall in pixels, for a second scale along the top."""
    if solution.model is None:
        return None
    px = np.linspace(xlim[0], xlim[1], 256)
    lam = np.asarray(solution.wavelength(px), dtype=float)
    if not np.all(np.isfinite(lam)):
        return None
    order = np.argsort(lam)
    ticks = nice_ticks(float(lam.min()), float(lam.max()), 8)
    return np.interp(ticks, lam[order], px[order]), tick_labels(ticks)


def _spread_labels(x: np.ndarray, gap: float, lo: float, hi: float) -> np.ndarray:
    """Nudge sorted label positions apart to at least ``gap`` pixels, staying in [lo, hi]."""
    out = np.array(x, dtype=float)
    for i in range(1, out.size):
        out[i] = max(out[i], out[i - 1] + gap)
    if out.size and out[-1] > hi:
        out[-1] = hi
        for i in range(out.size - 2, -1, -1):
            out[i] = min(out[i], out[i + 1] - gap)
    return np.clip(out, lo, hi)


def spectrum_figure(solution: Solution, spectrum: tuple[np.ndarray, np.ndarray] | None = None
                    ) -> Canvas:
    """The arc spectrum (square-root scale, so faint and saturated lines both show) with every
    peak marked: used lines labelled with wavelength and element, rejected lines, extra
    lines, ghosts and unidentified peaks each drawn distinctly; a wavelength scale along the top.

    Without ``spectrum`` (``(x, flux)``) the peaks are drawn as sticks of their flux and the
    figure says so.
    """
    canvas = Canvas(_WIDTH, 470)
    lines = solution.lines
    x_peak = _column(lines, "x")
    if spectrum is not None and len(spectrum[0]):
        xs, flux = (np.asarray(v, dtype=float) for v in spectrum)
        height = np.interp(x_peak, xs, flux)
    else:
        xs = flux = None
        height = _column(lines, "flux")
    height = np.where(np.isfinite(height), height, 0.0)
    n = solution.model.n_pixels if solution.model is not None else None
    xlim = (0.0, n - 1.0) if n else limits(x_peak if xs is None else xs, pad=0.0)
    top = max(float(np.nanmax(flux)) if flux is not None else 0.0,
              float(height.max()) if height.size else 0.0, 1.0)
    bottom = min(0.0, float(np.nanmin(flux)) if flux is not None else 0.0)
    # the brightest peak sits at 55 % of the height (square-root scale): room for the labels
    ylim = (bottom, (math.sqrt(top) / 0.55) ** 2)
    wl_ticks = _wavelength_ticks(solution, xlim)
    panel = Panel(canvas, (70, 88, _WIDTH - 15, 425), xlim, ylim, ysqrt=True)
    if xs is not None:
        panel.envelope(xs, flux, PALETTE["spectrum"], width=0.8)
        note = ""
    else:
        panel.sticks(x_peak, 0.0, height, PALETTE["spectrum"])
        note = " (spectrum not stored: peaks drawn as sticks)"
    ident = lines["identification"].astype(str).to_numpy()
    mark_y = panel.y(height) - 8.0
    items = [({"line": PALETTE["spectrum"]}, "spectrum" if xs is not None else "peak flux")]
    for kind, (marker, colour, filled) in PEAK_STYLES.items():
        sel = ident == kind
        if sel.any():
            px, py = panel.x(x_peak[sel]), mark_y[sel]
            keep = panel.inside(px, py)
            canvas.markers(px[keep], py[keep], marker, colour, size=7.0, filled=filled)
            items.append(({"marker": marker, "colour": colour, "filled": filled},
                          f"{kind} ({int(sel.sum())})"))
    lam = _column(lines, "line_wavelength")
    labelled = np.flatnonzero(np.isin(ident, ("used", "rejected", "extra")) & np.isfinite(lam))
    if labelled.size:
        labelled = labelled[np.argsort(x_peak[labelled], kind="stable")]
        want = panel.x(x_peak[labelled])
        placed = _spread_labels(want, _LABEL_SIZE + 2, panel.left + 6, panel.right - 6)
        for i, px, wx in zip(labelled, placed, want):
            colour = PEAK_STYLES.get(ident[i], PEAK_STYLES["used"])[1]
            base = mark_y[i] - 7.0
            if not panel.inside(wx, base):
                continue
            if abs(px - wx) > 1.5:
                canvas.segments(wx, base + 2, px, base - 6, colour, width=0.7)
                base -= 8.0
            canvas.text(px, base, f"{lam[i]:.2f} {lines['element'].iloc[i]}",
                        size=_LABEL_SIZE, colour=colour, anchor="md", vertical=True)
    panel.finish(xlabel="pixel along dispersion", ylabel="electrons per pixel (√ scale)",
                 title=f"{_name(solution)}: arc spectrum, {solution.status.upper()}{note}",
                 top_ticks=wl_ticks,
                 top_label=f"wavelength ({solution.medium}, nm)" if wl_ticks else "")
    legend(canvas, _WIDTH - 15, 10, items, size=11, align="right")
    return canvas


def _residual_limits(res: np.ndarray, err: np.ndarray, rms: float) -> float:
    """Half-height of the residual axes: the used lines with their error bars, at least 4 RMS."""
    reach = np.abs(res) + np.where(np.isfinite(err), err, 0.0)
    reach = reach[np.isfinite(reach)]
    half = max(float(reach.max()) * 1.15 if reach.size else 0.0,
               4.0 * rms if math.isfinite(rms) else 0.0)
    return half if half > 0 else 1.0


def _off_scale(panel: Panel, x: np.ndarray, res: np.ndarray, half: float, colour: str) -> None:
    """Residuals beyond the axes: an arrowhead at the edge pointing their way, and the value."""
    for xi, r in zip(x.tolist(), res.tolist()):
        edge = math.copysign(0.93 * half, r)
        panel.points([xi], [edge], "^" if r > 0 else "v", colour, size=8)
        px, py = float(panel.x(xi)), float(panel.y(edge)) + (9.0 if r > 0 else -9.0)
        left = px < panel.right - 45  # the value to the right of the arrowhead if there is room
        panel.canvas.text(px + 6 if left else px - 6, py, f"{r:+.2f}".replace("-", "\u2212"),
                          size=10, colour=colour,
                          anchor=("l" if left else "r") + ("a" if r > 0 else "d"))


def residuals_figure(solution: Solution) -> Canvas:
    """Residuals (pixels) against pixel and against wavelength: used lines filled circles
    with error bars, rejected lines open squares, unconfirmed lines triangles; the band is ±RMS; the
    shaded regions are extrapolated (no line used there). Lines beyond the axes (the axes
    follow the used lines) are arrowheads at the edge, with their residual written."""
    canvas = Canvas(_WIDTH, 570)
    boxes = ((80, 44, _WIDTH - 15, 255), (80, 318, _WIDTH - 15, 529))
    title = f"{_name(solution)}: residuals, {solution.status.upper()}"
    if solution.model is None:
        for i, box in enumerate(boxes):
            panel = Panel(canvas, box, (0.0, 1.0), (-1.0, 1.0))
            panel.message("no solution: " + "; ".join(solution.reasons)[:150])
            panel.finish(title=title if i == 0 else "", xtick_labels=False)
        return canvas
    lines = solution.lines
    ident = lines["identification"].astype(str).to_numpy()
    res, err = _column(lines, "residual_px"), _column(lines, "x_err")
    rms = solution.rms_px
    used = ident == "used"
    half = _residual_limits(res[used], err[used], rms)
    n = solution.model.n_pixels
    lo, hi = solution.covered_range_px
    wl_edges = np.asarray(solution.wavelength(np.array([0.0, lo, hi, n - 1.0])), dtype=float)
    styles = (("used", "o", True), ("rejected", "s", False), ("unconfirmed", "^", False))
    items = []
    for kind, marker, filled in styles:
        if (ident == kind).any():
            items.append(({"marker": marker, "colour": PALETTE[kind], "filled": filled},
                          f"{kind} ({int((ident == kind).sum())})"))
    if math.isfinite(rms):
        items.append(({"patch": PALETTE["band"], "alpha": 0.35}, f"±RMS = {rms:.3f} px"))
    items.append(({"patch": PALETTE["extrapolated"], "alpha": 0.3}, "extrapolated"))
    for i, (box, key, label) in enumerate(
            ((boxes[0], "x", "pixel along dispersion"),
             (boxes[1], "line_wavelength", f"wavelength ({solution.medium}, nm)"))):
        xv = _column(lines, key)
        if key == "x":
            xlim, spans = (0.0, n - 1.0), ((0.0, lo), (hi, n - 1.0))
        else:
            w = np.sort(wl_edges)
            xlim, spans = (float(w[0]), float(w[3])), ((w[0], w[1]), (w[2], w[3]))
        panel = Panel(canvas, box, xlim, (-half, half))
        if all(math.isfinite(v) for v in (lo, hi)):
            for a, b in spans:
                panel.vspan(a, b, PALETTE["extrapolated"], alpha=0.2)
        if math.isfinite(rms):
            panel.hspan(-rms, rms, PALETTE["band"], alpha=0.3)
        panel.hline(0.0, "#000000", width=0.8)
        for kind, marker, filled in styles:
            sel = (ident == kind) & np.isfinite(xv) & np.isfinite(res)
            if not sel.any():
                continue
            on = sel & (np.abs(res) <= 0.97 * half)
            panel.errorbars(xv[on], res[on], err[on], PALETTE[kind])
            panel.points(xv[on], res[on], marker, PALETTE[kind], filled=filled)
            _off_scale(panel, xv[sel & ~on], res[sel & ~on], half, PALETTE[kind])
        panel.finish(xlabel=label, ylabel="observed − model (px)",
                     title=title if i == 0 else "")
    legend(canvas, _WIDTH - 15, 8, items, size=11, align="right")
    return canvas


def quality_figure(solution: Solution) -> Canvas:
    """Residual histogram, line FWHM and resolving power across the detector."""
    canvas = Canvas(_WIDTH, 360)
    lines = solution.lines
    ident = lines["identification"].astype(str).to_numpy()
    used = ident == "used"
    res = _column(lines, "residual_px")[used]
    res = res[np.isfinite(res)]
    boxes = ((70, 52, 370, 300), (440, 52, 740, 300), (810, 52, _WIDTH - 15, 300))
    # histogram of the used residuals
    if res.size:
        edges = np.histogram_bin_edges(res, bins=max(5, min(30, res.size // 2)))
        counts, edges = np.histogram(res, bins=edges)
        rms = solution.rms_px
        xr = limits(edges, pad=0.02, include=(-rms, rms) if math.isfinite(rms) else ())
        panel = Panel(canvas, boxes[0], xr, (0.0, counts.max() * 1.15 + 0.5), yinteger=True)
        centres, width = 0.5 * (edges[1:] + edges[:-1]), float(edges[1] - edges[0])
        panel.bars(centres, counts, [PALETTE["used"]] * counts.size, width=0.92 * width)
        if math.isfinite(rms):
            for s in (-rms, rms):
                panel.vline(s, PALETTE["rejected"], width=1.2, dash=5)
    else:
        panel = Panel(canvas, boxes[0], (-1.0, 1.0), (0.0, 1.0))
        panel.message("no lines used")
    panel.finish(xlabel="residual of used lines (px)", ylabel="lines",
                 title="residuals (dashed: ±RMS)")
    # FWHM and resolving power across the detector
    x, fwhm = _column(lines, "x"), _column(lines, "fwhm")
    n = solution.model.n_pixels if solution.model is not None else None
    xlim = (0.0, n - 1.0) if n else limits(x)
    panel = Panel(canvas, boxes[1], xlim, limits(fwhm, include=(0.0,)))
    panel.points(x[~used], fwhm[~used], "|", PALETTE["unidentified"], size=6)
    panel.points(x[used], fwhm[used], "o", PALETTE["used"], size=6)
    panel.finish(xlabel="pixel along dispersion", ylabel="FWHM (px)", title="line width")
    if solution.model is not None and x.size:
        lam = np.asarray(solution.wavelength(x), dtype=float)
        power = lam / (np.abs(np.asarray(solution.model.dispersion(x), dtype=float)) * fwhm)
        panel = Panel(canvas, boxes[2], xlim, limits(power, include=(0.0,)))
        panel.points(x[~used], power[~used], "|", PALETTE["unidentified"], size=6)
        panel.points(x[used], power[used], "o", PALETTE["used"], size=6)
    else:
        panel = Panel(canvas, boxes[2], xlim, (0.0, 1.0))
        panel.message("no wavelength scale")
    panel.finish(xlabel="pixel along dispersion", ylabel="λ/Δλ", title="resolving power")
    legend(canvas, _WIDTH - 15, 8, [({"marker": "o", "colour": PALETTE["used"]}, "used lines"),
                                    ({"marker": "|", "colour": PALETTE["unidentified"]},
                                     "other peaks")], align="right")
    return canvas


def slit_figure(solution: Solution) -> Canvas | None:
    """Map of the line shift Δ(x, y) along the slit (tilt and curvature) with contours, or
    None for a frame without a slit model."""
    slit = solution.slit
    if slit is None or solution.model is None:
        return None
    canvas = Canvas(_WIDTH, 380)
    n = solution.model.n_pixels
    x = np.linspace(0.0, n - 1.0, 220)
    y = np.linspace(*slit.rows_covered, 80)
    xx, yy = np.meshgrid(x, y)
    shift = np.asarray(slit.shift(xx, yy), dtype=float)
    lo, hi = limits(shift, pad=0.0)
    cmap = colormaps["cividis"]
    rgb = (cmap((shift - lo) / (hi - lo))[..., :3] * 255).astype(np.uint8)
    panel = Panel(canvas, (80, 40, _WIDTH - 130, 320), (0.0, n - 1.0),
                  (float(y[0]), float(y[-1])))
    panel.raster(rgb, (0.0, n - 1.0, float(y[0]), float(y[-1])))
    generator = contourpy.contour_generator(xx, yy, shift)
    for level in nice_ticks(lo, hi, 8):
        for seg in generator.lines(level):
            panel.line(seg[:, 0], seg[:, 1], "#FFFFFF", width=0.8)
    panel.hline(slit.reference_row, PALETTE["rejected"], width=1.3, dash=6)
    spread = float(np.nanmax(shift) - np.nanmin(shift)) if np.isfinite(shift).any() else 0.0
    if spread < FLAT_SLIT_PX:
        panel.message(f"the lines shift by less than {FLAT_SLIT_PX} px over the slit: "
                      "no measurable tilt or curvature")
    panel.finish(xlabel="pixel along dispersion", ylabel="row along slit",
                 title=f"slit tilt/curvature map: line shift Δ (fit RMS {slit.rms_px:.3f} px)")
    bar = Panel(canvas, (_WIDTH - 95, 40, _WIDTH - 75, 320), (0.0, 1.0), (lo, hi),
                xticks=((), ()))
    bar.raster((cmap(np.linspace(0.0, 1.0, 128))[:, None, :3] * 255).astype(np.uint8),
               (0.0, 1.0, lo, hi))
    bar.finish(ytick_side="right")
    canvas.text(_WIDTH - 85, 332, "Δ (px)", size=11, anchor="ma")
    legend(canvas, _WIDTH - 130, 8, [({"line": PALETTE["rejected"], "dash": 6},
                                      "reference row"), ({"line": "#777777"}, "contours")],
           align="right")
    return canvas


def _hours(times: pd.Series, origin: pd.Timestamp) -> np.ndarray:
    return ((times - origin) / pd.Timedelta(hours=1)).to_numpy(float)


def drift_figure(drift: pd.DataFrame) -> Canvas:
    """Shift (px) of each configuration's arcs through the night, relative to its first arc."""
    drift = drift.reset_index(drop=True)
    canvas = Canvas(1000, 340, scale=2)
    box = (80, 40, 985, 280)
    times = pd.to_datetime(drift.get("observation_time", pd.Series(dtype=str)), errors="coerce",
                           utc=True)
    shifts = pd.to_numeric(drift.get("shift_px", pd.Series(dtype=float)), errors="coerce")
    good = (times.notna() & shifts.notna()).to_numpy()
    if not good.any():
        panel = Panel(canvas, box, (0.0, 1.0), (-1.0, 1.0), xticks=((), ()))
        panel.message("no usable arcs with observation times: no drift measured")
        panel.finish(title="drift of each configuration", xtick_labels=False)
        return canvas
    origin = times[good].min().floor("D")
    hours = _hours(times, origin)
    xlim = limits(hours[good], pad=0.04)
    ticks = clock_ticks(*xlim, lambda h: (origin + pd.Timedelta(hours=h)).strftime("%H:%M"))
    panel = Panel(canvas, box, xlim, limits(shifts[good], include=(0.0,), pad=0.1),
                  xticks=ticks)
    panel.hline(0.0, "#000000", width=0.8)
    items = []
    for i, (conf, grp) in enumerate(drift[good].groupby("configuration", sort=True)):
        colour = SERIES[i % len(SERIES)]
        h = hours[grp.index.to_numpy()]
        order = np.argsort(h)
        s = shifts[grp.index].to_numpy(float)[order]
        panel.line(h[order], s, colour, width=1.5)
        panel.points(h[order], s, "o", colour, size=7)
        items.append(({"marker": "o", "colour": colour}, str(conf)))
    day = origin.strftime("%Y-%m-%d")
    panel.finish(xlabel=f"observation time (UTC, from {day})", ylabel="shift vs first arc (px)",
                 title="drift of each configuration")
    legend(canvas, 985, 8, items, align="right")
    return canvas


def arcs_figure(arcs: pd.DataFrame) -> Canvas:
    """RMS (px) and number of lines used of every arc, in observation order, coloured by
    verdict."""
    canvas = Canvas(_WIDTH, 320)
    idx = np.arange(len(arcs), dtype=float)
    status = [str(s) for s in arcs.get("status", [])]
    colours = [PALETTE.get(s, PALETTE[Status.FAILED]) for s in status]
    xlim = (-0.7, max(len(arcs), 1) - 0.3)
    for box, key, label in (((70, 40, 530, 270), "rms_px", "RMS (px)"),
                            ((610, 40, _WIDTH - 15, 270), "n_used", "lines used")):
        values = pd.to_numeric(arcs.get(key, pd.Series(dtype=float)),
                               errors="coerce").to_numpy(float)
        panel = Panel(canvas, box, xlim, limits(values, include=(0.0,), pad=0.08),
                      yinteger=key == "n_used")
        if len(arcs):
            panel.bars(idx, values, colours)
        else:
            panel.message("no arcs")
        panel.finish(xlabel="arc (observation order)", ylabel=label)
    items = [({"patch": PALETTE[s]}, s.value) for s in (Status.OK, Status.SUSPECT, Status.FAILED)]
    legend(canvas, _WIDTH - 15, 8, items, align="right")
    return canvas
