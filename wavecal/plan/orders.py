"""Other orders on the detector: their overlap with the working order, order-sorting filters,
and the table of every shipped line that lands on the detector in any order.

A line of wavelength λ' in order m' lands where the working order m has λ = m'λ'/m (same α and
β). The filter advice (:class:`FilterAdvice`) follows every order's wavelengths across the
detector on a half-pixel grid, from the model (so a grism's prism dispersion is included).
"""
from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._json import jsonable
from ..linelists import available_elements, load_line_list
from ..optics import GratingModel
from .lamps import STRONG_INTENSITY

__all__ = ["OrderOverlap", "FilterAdvice", "clean_range", "filter_advice", "order_overlaps",
           "line_table"]


@dataclass(frozen=True)
class OrderOverlap:
    """The wavelengths of another order that land on the detector.

    Attributes
    ----------
    order : int
        The other order m'.
    wavelength_range_nm : tuple of float
        Its wavelengths (min, max) that fall on the detector.
    sensitive_range_nm : tuple of float or None
        The part of that band inside the sensitivity range (None: none of it).
    """

    order: int
    wavelength_range_nm: tuple[float, float]
    sensitive_range_nm: tuple[float, float] | None

    def summary(self) -> dict:
        """JSON-safe dict of the attributes."""
        return {"order": self.order,
                "wavelength_range_nm": [jsonable(v) for v in self.wavelength_range_nm],
                "sensitive_range_nm": None if self.sensitive_range_nm is None
                else [jsonable(v) for v in self.sensitive_range_nm]}


@dataclass(frozen=True)
class FilterAdvice:
    """Order-sorting filters for the setting.

    Attributes
    ----------
    long_pass_needed : bool
        Light of higher orders (shorter wavelengths) within the sensitivity range reaches the
        part of the detector where the working order is detectable.
    cut_on_window_nm : tuple of float or None
        A long-pass cut-on anywhere strictly above the first and at or below the second value
        blocks the higher orders and passes the whole detectable working-order band; None when no
        long-pass is needed or none can (the detector spans more than a free spectral range).
    cut_on_nm : float or None
        Suggested cut-on (the middle of the window, or, when no window exists, the lowest cut-on
        that keeps the red end of the detector clean).
    short_pass_needed, cut_off_window_nm, cut_off_nm
        The same for lower orders (longer wavelengths), which only exist for orders m ≥ 2.
    clean_range_nm : tuple of float or None
        Working-order wavelengths free of other orders with the suggested filter(s) (None if
        none).
    clears_detector : bool
        The clean range is the whole detectable working-order band.
    """

    long_pass_needed: bool
    cut_on_window_nm: tuple[float, float] | None
    cut_on_nm: float | None
    short_pass_needed: bool
    cut_off_window_nm: tuple[float, float] | None
    cut_off_nm: float | None
    clean_range_nm: tuple[float, float] | None
    clears_detector: bool

    def summary(self) -> dict:
        """JSON-safe dict of the attributes."""
        out = {}
        for key in self.__dataclass_fields__:
            value = getattr(self, key)
            out[key] = [jsonable(v) for v in value] if isinstance(value, tuple) else jsonable(value)
        return out

# -- filters -------------------------------------------------------------------------------------
def _detector_grid(model: GratingModel) -> np.ndarray:
    """Half-pixel grid over the detector, ends included."""
    return np.linspace(0.0, model.n_pixels - 1.0, 2 * model.n_pixels - 1)


def _other_orders(model: GratingModel, sensitivity_nm: tuple[float, float]) -> list[int]:
    """Orders other than the working one whose light on the detector can reach the sensitivity range."""
    m = model.order
    top = float(np.max(model.wavelength(np.array([0.0, model.n_pixels - 1.0]))))
    return [k for k in range(1, max(2 * m, math.ceil(m * top / sensitivity_nm[0])) + 1) if k != m]


def clean_range(model: GratingModel, sensitivity_nm: tuple[float, float], *,
                cut_on_nm: float | None = None, cut_off_nm: float | None = None,
                ) -> tuple[float, float] | None:
    """Working-order wavelengths on the detector that no other order overlaps.

    Light of any order is detected when its wavelength lies in the sensitivity range and passes
    the filters (a long-pass with ``cut_on_nm``, a short-pass with ``cut_off_nm``). On a
    half-pixel grid over the detector, a point is clean when its working-order light is detected
    and no other order's is (each order's wavelength there from the model, i.e. m'λ' = mλ for
    reflection and transmission gratings, with the prism's dispersion for a grism). Returns the
    working-order wavelengths (min, max) of the longest clean run, or None.
    """
    x = _detector_grid(model)
    lam = model.wavelength(x)
    lo = max(sensitivity_nm[0], -np.inf if cut_on_nm is None else cut_on_nm)
    hi = min(sensitivity_nm[1], np.inf if cut_off_nm is None else cut_off_nm)
    clean = (lam >= lo) & (lam <= hi)
    for k in _other_orders(model, sensitivity_nm):
        other = model.with_parameters(order=k).wavelength(x)
        clean &= ~((other >= lo) & (other <= hi))
    if not clean.any():
        return None
    edges = np.flatnonzero(np.diff(np.concatenate([[0], clean.astype(int), [0]])))
    starts, stops = edges[::2], edges[1::2]
    best = int(np.argmax(stops - starts))
    run = lam[starts[best]:stops[best]]
    return float(run.min()), float(run.max())


def _inside(value: float, window: tuple[float, float]) -> float:
    """``value`` rounded to a whole nm if that stays strictly inside ``window``."""
    rounded = float(round(value))
    return rounded if window[0] < rounded < window[1] else float(value)


def _offending(model: GratingModel, x: np.ndarray, orders: list[int], sens) -> np.ndarray:
    """Detectable wavelengths of ``orders`` landing on the grid points ``x``."""
    values = [model.with_parameters(order=k).wavelength(x) for k in orders]
    values = np.concatenate(values) if values else np.array([])
    return values[(values >= sens[0]) & (values <= sens[1])]


def filter_advice(model: GratingModel, sens: tuple[float, float]) -> FilterAdvice:
    """Order-sorting filters for ``model``'s setting, given the sensitivity range ``sens`` (nm)."""
    m = model.order
    x = _detector_grid(model)
    lam = model.wavelength(x)
    wanted = (lam >= sens[0]) & (lam <= sens[1])
    if not wanted.any():  # nothing detectable in the working order: nothing to sort
        return FilterAdvice(long_pass_needed=False, cut_on_window_nm=None, cut_on_nm=None,
                            short_pass_needed=False, cut_off_window_nm=None, cut_off_nm=None,
                            clean_range_nm=None, clears_detector=False)
    w_lo, w_hi = float(lam[wanted].min()), float(lam[wanted].max())
    others = _other_orders(model, sens)
    higher = _offending(model, x[wanted], [k for k in others if k > m], sens)
    cut_on = window_on = None
    if len(higher):
        top = float(higher.max())  # the longest detectable higher-order wavelength to block
        if top < w_lo:
            window_on = (top, w_lo)
            cut_on = _inside(0.5 * (top + w_lo), window_on)
        else:  # no window: keep the red end clean
            cut_on = float(math.floor(top) + 1)
    lower = _offending(model, x[wanted], [k for k in others if k < m], sens)
    cut_off = window_off = None
    if len(lower):
        bottom = float(lower.min())  # the shortest detectable lower-order wavelength to block
        if bottom > w_hi:
            window_off = (w_hi, bottom)
            cut_off = _inside(0.5 * (bottom + w_hi), window_off)
        else:  # no window: keep the blue end clean
            cut_off = float(math.ceil(bottom) - 1)
    clean = clean_range(model, sens, cut_on_nm=cut_on, cut_off_nm=cut_off)
    return FilterAdvice(long_pass_needed=bool(len(higher)), cut_on_window_nm=window_on, cut_on_nm=cut_on,
                        short_pass_needed=bool(len(lower)), cut_off_window_nm=window_off,
                        cut_off_nm=cut_off, clean_range_nm=clean,
                        clears_detector=clean == (w_lo, w_hi))


def order_overlaps(model: GratingModel, sens: tuple[float, float]) -> tuple[OrderOverlap, ...]:
    """The neighbouring orders (m−1, m+1, 2m) and every order whose light on the detector lies in
    the sensitivity range ``sens`` (nm), with the wavelengths each puts on the detector."""
    m = model.order
    ends = np.array([0.0, model.n_pixels - 1.0])
    out = []
    for k in _other_orders(model, sens):
        wl = model.with_parameters(order=k).wavelength(ends)
        lo, hi = float(np.min(wl)), float(np.max(wl))
        s_lo, s_hi = max(lo, sens[0]), min(hi, sens[1])
        sensitive = (s_lo, s_hi) if s_lo <= s_hi else None
        if sensitive is not None or k in (m - 1, m + 1, 2 * m):
            out.append(OrderOverlap(order=k, wavelength_range_nm=(lo, hi), sensitive_range_nm=sensitive))
    return tuple(out)


def line_table(model: GratingModel, medium: str, sens: tuple[float, float],
               efficiency: Callable[[np.ndarray, int], np.ndarray],
               filters: FilterAdvice) -> pd.DataFrame:
    """Every shipped line that lands on the detector, in any order, sorted by pixel.

    Parameters
    ----------
    model : GratingModel
        The setting.
    medium : str
        ``"air"`` or ``"vacuum"``: the wavelengths of the line lists to load.
    sens : tuple of float
        Sensitivity range (nm).
    efficiency : callable
        ``efficiency(wavelength_nm, order)``: relative blaze efficiency (NaN when unknown).
    filters : FilterAdvice
        The suggested filters; lines they block are marked ``filtered``.

    Returns
    -------
    pandas.DataFrame
        Columns ``element, wavelength_nm, order, x, apparent_wavelength_nm, intensity, weak,
        blend, verified, strong, sensitive, ghost, filtered, efficiency``.
    """
    catalogue = load_line_list(available_elements(), medium=medium)
    wl = catalogue.wavelength_nm
    n = model.n_pixels
    m = model.order
    top = float(np.max(model.wavelength(np.array([0.0, n - 1.0]))))
    k_max = max(2 * m, math.ceil(m * top / float(wl.min())))
    frames = []
    for k in range(1, k_max + 1):
        x = model.with_parameters(order=k).pixel(wl)
        on = np.isfinite(x) & (x >= -0.5) & (x <= n - 0.5)
        if not on.any():
            continue
        frames.append(pd.DataFrame({
            "element": catalogue.element[on].astype(str),
            "wavelength_nm": wl[on],
            "order": np.full(on.sum(), k),
            "x": x[on],
            "apparent_wavelength_nm": model.wavelength(x[on]),
            "intensity": catalogue.intensity[on],
            "weak": catalogue.weak[on],
            "blend": catalogue.blend[on],
            "verified": catalogue.verified[on],
            "efficiency": efficiency(wl[on], k),
        }))
    columns = ["element", "wavelength_nm", "order", "x", "apparent_wavelength_nm", "intensity",
               "weak", "blend", "verified", "strong", "sensitive", "ghost", "filtered", "efficiency"]
    if not frames:
        return pd.DataFrame({c: [] for c in columns})
    table = pd.concat(frames, ignore_index=True)
    lam = table["wavelength_nm"].to_numpy()
    blocked = np.zeros(len(table), bool)
    if filters.cut_on_nm is not None:
        blocked |= lam < filters.cut_on_nm
    if filters.cut_off_nm is not None:
        blocked |= lam > filters.cut_off_nm
    table = table.assign(
        strong=~table["weak"] & (table["intensity"] >= STRONG_INTENSITY),
        sensitive=(lam >= sens[0]) & (lam <= sens[1]),
        ghost=table["order"] != m,
        filtered=blocked,
    )
    return table[columns].sort_values("x", kind="stable").reset_index(drop=True)
