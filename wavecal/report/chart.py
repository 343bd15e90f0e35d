"""Plot panels on a :class:`~wavecal.report.canvas.Canvas`: data limits, nice ticks, grid,
clipping, axis labels.

A :class:`Panel` maps data to figure pixels inside its box. Its grid is drawn when it is made,
then the data, then :meth:`Panel.finish` draws the frame, tick labels and axis labels.
"""
from __future__ import annotations

import functools
import math
from collections.abc import Callable, Sequence

import numpy as np
from matplotlib.ticker import MaxNLocator

from .canvas import Canvas, text_width

__all__ = ["Panel", "nice_ticks", "tick_labels", "limits", "clock_ticks"]

_GRID = "#DDDDDD"
_FRAME = "#333333"
_NICE_STEPS = (1, 2, 2.5, 5, 10)


def limits(values, *, pad: float = 0.05, include: Sequence[float] = ()) -> tuple[float, float]:
    """Range of the finite ``values`` (and ``include``), padded by ``pad`` of its width;
    ``(0, 1)`` when there is nothing finite."""
    v = np.concatenate([np.asarray(values, dtype=float).ravel(),
                        np.asarray(include, dtype=float).ravel()])
    v = v[np.isfinite(v)]
    if v.size == 0:
        return 0.0, 1.0
    lo, hi = float(v.min()), float(v.max())
    if hi - lo <= 1e-12 * max(1.0, abs(hi)):
        half = 0.05 * max(abs(hi), 1.0)
        return lo - half, hi + half
    span = hi - lo
    return lo - pad * span, hi + pad * span


@functools.lru_cache(maxsize=16)
def _locator(n: int, integer: bool) -> MaxNLocator:
    return MaxNLocator(nbins=n, steps=_NICE_STEPS, integer=integer)


def nice_ticks(lo: float, hi: float, n: int = 6, *, integer: bool = False) -> np.ndarray:
    """At most about ``n`` round tick values inside ``[lo, hi]`` (whole numbers only if
    ``integer``)."""
    ticks = _locator(n, integer).tick_values(lo, hi)
    eps = 1e-9 * (hi - lo)
    return ticks[(ticks >= lo - eps) & (ticks <= hi + eps)]


def tick_labels(ticks: np.ndarray) -> list[str]:
    """Tick values written with just enough decimals for their spacing (− as the minus sign)."""
    if ticks.size == 0:
        return []
    step = float(np.min(np.diff(ticks))) if ticks.size > 1 else abs(float(ticks[0])) or 1.0
    decimals = 0
    while decimals < 8 and abs(round(step * 10 ** decimals) - step * 10 ** decimals) > 1e-6:
        decimals += 1
    out = []
    for t in ticks:
        text = f"{t:.{decimals}f}"
        if float(text) == 0.0:
            text = f"{0.0:.{decimals}f}"
        out.append(text.replace("-", "\u2212"))
    return out


def _si(value: float) -> str:
    """A compact count: 950, 1.5k, 20k, 1.2M."""
    a = abs(value)
    for div, suffix in ((1e6, "M"), (1e3, "k")):
        if a >= div:
            return f"{value / div:.3g}{suffix}"
    return f"{value:.3g}"


class Panel:
    """A plot box on ``canvas``; data outside it are pulled onto its edge (lines, bars,
    bands) or left out (markers, text), so nothing spills into the labels.

    Parameters
    ----------
    canvas : Canvas
    box : (left, top, right, bottom)
        The data area in figure pixels (labels go outside it).
    xlim, ylim : (float, float)
        Data limits.
    ysqrt : bool
        Square-root y scale (sign kept) so that faint and bright lines both show.
    xticks : (values, labels), optional
        Explicit x ticks (for example clock times); default: round numbers.
    yinteger : bool
        Whole-number y ticks (for counts).
    """

    def __init__(self, canvas: Canvas, box: tuple[float, float, float, float],
                 xlim: tuple[float, float], ylim: tuple[float, float], *,
                 ysqrt: bool = False, xticks: tuple[Sequence[float], Sequence[str]] | None = None,
                 yinteger: bool = False) -> None:
        self.canvas = canvas
        self.yinteger = yinteger
        self.left, self.top, self.right, self.bottom = (float(v) for v in box)
        self.xlim = tuple(float(v) for v in xlim)
        self.ysqrt = ysqrt
        self._ylim_t = tuple(float(self._fy(v)) for v in ylim)
        if xticks is None:
            xt = nice_ticks(*sorted(self.xlim), 7)
            self._xticks = (xt, tick_labels(xt))
        else:
            self._xticks = (np.asarray(xticks[0], dtype=float), list(xticks[1]))
        self._yticks = self._make_yticks(ylim)
        gx, gy = self.x(self._xticks[0]), self.y(self._yticks[0])
        canvas.segments(gx, self.top, gx, self.bottom, _GRID)
        canvas.segments(self.left, gy, self.right, gy, _GRID)

    # -- transforms ---------------------------------------------------------------------------
    def _fy(self, v):
        v = np.asarray(v, dtype=float)
        return np.sign(v) * np.sqrt(np.abs(v)) if self.ysqrt else v

    def x(self, v) -> np.ndarray:
        """Figure-pixel x of data ``v``."""
        a, b = self.xlim
        return self.left + (np.asarray(v, dtype=float) - a) / (b - a) * (self.right - self.left)

    def y(self, v) -> np.ndarray:
        """Figure-pixel y of data ``v``."""
        a, b = self._ylim_t
        return self.bottom - (self._fy(v) - a) / (b - a) * (self.bottom - self.top)

    def _cx(self, px) -> np.ndarray:
        return np.clip(px, self.left, self.right)

    def _cy(self, py) -> np.ndarray:
        return np.clip(py, self.top, self.bottom)

    def inside(self, px, py) -> np.ndarray:
        """Whether figure pixels ``(px, py)`` lie in the box."""
        px, py = np.asarray(px, dtype=float), np.asarray(py, dtype=float)
        return (px >= self.left) & (px <= self.right) & (py >= self.top) & (py <= self.bottom)

    def _make_yticks(self, ylim) -> tuple[np.ndarray, list[str]]:
        if not self.ysqrt:
            yt = nice_ticks(*sorted(ylim), 5, integer=self.yinteger)
            return yt, tick_labels(yt)
        lo, hi = sorted(self._ylim_t)
        values = []
        for t in nice_ticks(lo, hi, 7):
            v = math.copysign(t * t, t)
            if v != 0.0:  # two significant digits
                digits = 10 ** (math.floor(math.log10(abs(v))) - 1)
                v = round(v / digits) * digits
            if not values or v != values[-1]:
                values.append(v)
        yt = np.asarray(values)
        return yt, [_si(v).replace("-", "\u2212") for v in yt]

    # -- data (kept inside the box) -------------------------------------------------------------
    def line(self, x, y, colour: str, *, width: float = 1.2, alpha: float = 1.0) -> None:
        """A polyline through the data points."""
        self.canvas.polyline(self._cx(self.x(x)), self._cy(self.y(y)), colour, width=width,
                             alpha=alpha)

    def envelope(self, x, y, colour: str, *, width: float = 1.0) -> None:
        """A dense curve drawn as its minimum–maximum envelope per half-pixel column (the
        same picture as every point, at a fraction of the cost)."""
        px, py = self.x(x), self._cy(self.y(y))
        good = np.isfinite(px) & np.isfinite(py) & (px >= self.left) & (px <= self.right)
        px, py = px[good], py[good]
        if px.size <= 4 * (self.right - self.left):
            self.canvas.polyline(px, py, colour, width=width)
            return
        order = np.argsort(px, kind="stable")
        px, py = px[order], py[order]
        col = np.floor(px * 2).astype(np.int64)
        starts = np.flatnonzero(np.r_[True, np.diff(col) != 0])
        lo, hi = np.minimum.reduceat(py, starts), np.maximum.reduceat(py, starts)
        self.canvas.polyline(np.repeat(col[starts] / 2.0, 2), np.column_stack((lo, hi)).ravel(),
                             colour, width=width)

    def points(self, x, y, shape: str, colour: str, *, size: float = 7.0,
               filled: bool = True) -> None:
        """Markers at the data points (those outside the box are left out)."""
        px, py = self.x(x), self.y(y)
        keep = self.inside(px, py)
        self.canvas.markers(px[keep], py[keep], shape, colour, size=size, filled=filled)

    def errorbars(self, x, y, yerr, colour: str, *, width: float = 1.0) -> None:
        """Vertical error bars of half-length ``yerr``."""
        x, y, e = (np.asarray(v, dtype=float) for v in (x, y, yerr))
        self.sticks(x, y - e, y + e, colour, width=width)

    def sticks(self, x, y0, y1, colour: str, *, width: float = 1.0) -> None:
        """Vertical segments from ``y0`` to ``y1`` at each ``x``."""
        px = self.x(x)
        keep = (px >= self.left) & (px <= self.right)
        y0, y1 = np.broadcast_arrays(np.asarray(y0, dtype=float), np.asarray(y1, dtype=float),
                                     px)[:2]
        self.canvas.segments(px[keep], self._cy(self.y(y0[keep])), px[keep],
                             self._cy(self.y(y1[keep])), colour, width=width)

    def hline(self, y: float, colour: str, *, width: float = 1.0,
              dash: float | None = None) -> None:
        """A horizontal line across the box."""
        py = float(self.y(y))
        if self.top <= py <= self.bottom:
            self.canvas.segments(self.left, py, self.right, py, colour, width=width, dash=dash)

    def vline(self, x: float, colour: str, *, width: float = 1.0,
              dash: float | None = None) -> None:
        """A vertical line across the box."""
        px = float(self.x(x))
        if self.left <= px <= self.right:
            self.canvas.segments(px, self.top, px, self.bottom, colour, width=width, dash=dash)

    def hspan(self, y0: float, y1: float, colour: str, *, alpha: float = 0.25) -> None:
        """A shaded band between ``y0`` and ``y1`` across the box."""
        self.canvas.rect(self.left, float(self._cy(self.y(y0))), self.right,
                         float(self._cy(self.y(y1))), fill=colour, alpha=alpha)

    def vspan(self, x0: float, x1: float, colour: str, *, alpha: float = 0.2) -> None:
        """A shaded band between ``x0`` and ``x1`` over the full height."""
        self.canvas.rect(float(self._cx(self.x(x0))), self.top, float(self._cx(self.x(x1))),
                         self.bottom, fill=colour, alpha=alpha)

    def bars(self, x, height, colours: Sequence[str], *, width: float = 0.8,
             base: float = 0.0) -> None:
        """Bars of data width ``width`` centred on ``x``."""
        for xi, hi, c in zip(np.asarray(x, float), np.asarray(height, float), colours):
            if np.isfinite(xi) and np.isfinite(hi):
                self.canvas.rect(float(self._cx(self.x(xi - width / 2))),
                                 float(self._cy(self.y(base))),
                                 float(self._cx(self.x(xi + width / 2))),
                                 float(self._cy(self.y(hi))), fill=c)

    def raster(self, rgb: np.ndarray, extent: tuple[float, float, float, float]) -> None:
        """An image covering the data ``extent`` = (x0, x1, y0, y1), which must lie inside
        the limits; row 0 is at ``y0``."""
        x0, x1, y0, y1 = extent
        top_first = rgb if self.y(y0) < self.y(y1) else rgb[::-1]
        self.canvas.raster(top_first, float(self._cx(self.x(x0))), float(self._cy(self.y(y0))),
                           float(self._cx(self.x(x1))), float(self._cy(self.y(y1))))

    def message(self, text: str) -> None:
        """A note on a white label in the middle of the box (for empty, failed or flat
        plots)."""
        cx, cy = (self.left + self.right) / 2, (self.top + self.bottom) / 2
        half = text_width(text, 12) / 2 + 8
        self.canvas.rect(max(self.left, cx - half), cy - 13, min(self.right, cx + half), cy + 13,
                         fill="#FFFFFF", outline="#999999")
        self.canvas.text(cx, cy, text, size=12, colour="#333333", anchor="mm")

    # -- frame and labels -----------------------------------------------------------------------
    def finish(self, *, xlabel: str = "", ylabel: str = "", title: str = "",
               top_ticks: tuple[Sequence[float], Sequence[str]] | None = None,
               top_label: str = "", xtick_labels: bool = True, ytick_side: str = "left"
               ) -> None:
        """Draw the frame, ticks and labels.

        ``top_ticks`` (x data positions, labels) adds a second scale along the top edge;
        ``ytick_side="right"`` puts the y scale on the right (a colour bar).
        """
        c = self.canvas
        c.rect(self.left, self.top, self.right, self.bottom, outline=_FRAME, width=1.0)
        xt, xl = self._xticks
        px = self.x(xt)
        c.segments(px, self.bottom, px, self.bottom + 4, _FRAME)
        if xtick_labels:
            for p, text in zip(px, xl):
                c.text(float(p), self.bottom + 6, text, size=11, anchor="ma")
        yt, yl = self._yticks
        py = self.y(yt)
        edge, out = (self.left, -1.0) if ytick_side == "left" else (self.right, 1.0)
        c.segments(edge, py, edge + 4 * out, py, _FRAME)
        for p, text in zip(py, yl):
            c.text(edge + 6 * out, float(p), text, size=11,
                   anchor="rm" if ytick_side == "left" else "lm")
        widest = max((len(t) for t in yl), default=0) if ytick_side == "left" else 0
        if xlabel:
            c.text((self.left + self.right) / 2, self.bottom + (24 if xtick_labels else 8),
                   xlabel, size=12, anchor="ma")
        if ylabel:
            c.text(self.left - 12 - 7 * widest, (self.top + self.bottom) / 2, ylabel, size=12,
                   anchor="rm", vertical=True)
        if top_ticks is not None:
            tp = self.x(np.asarray(top_ticks[0], dtype=float))
            c.segments(tp, self.top - 4, tp, self.top, _FRAME)
            for p, text in zip(tp, top_ticks[1]):
                c.text(float(p), self.top - 6, text, size=11, anchor="md")
            if top_label:
                c.text(self.right, self.top - 22, top_label, size=12, anchor="rd")
        if title:
            c.text(self.left, self.top - (40 if top_ticks is not None else 8), title, size=13,
                   anchor="ld", bold=True)


def clock_ticks(hours_lo: float, hours_hi: float, fmt: Callable[[float], str], *,
                n: int = 7) -> tuple[np.ndarray, list[str]]:
    """Ticks for a time axis in hours: steps of 5, 10, 15, 30 minutes or 1, 2, 3, 6 hours,
    at most about ``n`` of them, labelled by ``fmt(hours)``."""
    span = max(hours_hi - hours_lo, 1e-6)
    for step in (1 / 12, 1 / 6, 1 / 4, 1 / 2, 1, 2, 3, 6, 12):
        if span / step <= n:
            break
    first = math.ceil(hours_lo / step - 1e-9) * step
    ticks = np.arange(first, hours_hi + 1e-9, step)
    return ticks, [fmt(t) for t in ticks]
