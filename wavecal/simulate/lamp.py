"""The lines a simulated lamp puts on the detector, and their relative strengths.

The lamp differs from the shipped line list on purpose, as real lamps do: some listed lines are
missing, some unlisted lines are present, and line strengths scatter around the listed
intensities, so that a matcher cannot rely on line heights.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..airvac import air_to_vacuum
from ..optics import GratingModel
from .hydrogen import BALMER_DECREMENT, balmer_wavelengths

__all__ = ["LampExtras", "place_lines"]

#: Lines up to this many pixels beyond the ends of the detector still spill light onto it.
_EDGE_MARGIN_PX = 12
#: Ghost (next order) flux as a fraction of the line's own first-order flux.
_GHOST_FRACTION = (0.01, 0.05)
#: Log-normal scatter of the lamp-to-lamp brightness ratio of different elements.
_ELEMENT_SCATTER = 0.5
#: Share of a line's light diffracted into order k (k = 2, 3) relative to order 1, at the
#: order's own blaze peak: a few per cent in order 2, less in order 3 (typical of first-order
#: blazed gratings; from memory).
_ORDER_SHARE = {2: (0.02, 0.10), 3: (0.005, 0.03)}
#: Ion lines a lamp of the element shows but its (neutral-atom) list does not hold: standard-air
#: wavelengths (nm) of strong Ar II lines, NIST ASD (from memory; their exact values do not
#: matter here, the lines are unlisted).
_ION_LINES_NM = {"Ar": (434.8064, 442.6001, 454.5052, 457.9350, 460.9567, 465.7901, 472.6868,
                        473.5906, 476.4865, 480.6020, 484.7810, 487.9864, 496.5079, 501.7163)}


@dataclass(frozen=True)
class LampExtras:
    """Light a real lamp adds to its listed lines (all off by default).

    Attributes
    ----------
    unlisted_strength : float
        Median strength of the random unlisted (impurity) lines relative to a listed line drawn
        at random.
    balmer : float
        Strength of Hα relative to the strongest listed line present (0: no hydrogen); the other
        Balmer lines follow the decrement of :mod:`.hydrogen`.
    ion_lines : float
        Strength of the element's ion lines (Ar II for Ar) relative to its strongest listed
        line present (0: none), each scattered like listed lines.
    unfiltered_orders : tuple of int
        Orders (2, 3) imaged with nothing to block them: every line of the lamp also appears in
        them, with the order's share of its light times the blaze efficiency at ``k λ``.
    """

    unlisted_strength: float = 0.5
    balmer: float = 0.0
    ion_lines: float = 0.0
    unfiltered_orders: tuple[int, ...] = ()


def place_lines(catalogue, lamps, truth, layout, wl_range, rng, profile, missing_fraction,
                unlisted_fraction, scatter, ghosts, extras: LampExtras = LampExtras()):
    """Table of the lines on the detector with relative fluxes (column ``weight``)."""
    wl = np.asarray(catalogue.wavelength_nm, dtype=float)
    element = np.asarray(catalogue.element).astype(str)
    n = len(wl)
    gains = rng.lognormal(0.0, _ELEMENT_SCATTER, size=len(lamps))
    element_gain = dict(zip(lamps, gains, strict=True))
    present = rng.random(n) >= missing_fraction
    strength = (np.asarray(catalogue.intensity, dtype=float) * rng.lognormal(0.0, scatter, size=n)
                * np.array([element_gain[e] for e in element]))
    ghost_share = rng.uniform(*_GHOST_FRACTION, size=n)
    d0, d1 = layout.disp
    lo_x, hi_x = d0 - _EDGE_MARGIN_PX, d1 - 1 + _EDGE_MARGIN_PX

    def on_detector(x):
        return np.isfinite(x) & (x >= lo_x) & (x <= hi_x)

    x1 = pixel_near_detector(truth, wl)
    first = present & on_detector(x1)
    weight = strength * _blaze_factor(wl, profile)
    m = truth.order
    xg = pixel_near_detector(truth.with_parameters(order=m + 1), wl)
    blue_limit = min(wl_range[0], (profile.sensitivity_nm or wl_range)[0])
    second = present & on_detector(xg) & (wl < blue_limit) & bool(ghosts)

    n_extra = int(round(unlisted_fraction * first.sum()))
    extra_wl = rng.uniform(wl_range[0], wl_range[1], size=n_extra)
    pool = weight[first] if first.any() else np.asarray(catalogue.intensity, dtype=float)
    extra_weight = (extras.unlisted_strength * rng.choice(pool, size=n_extra)
                    * rng.lognormal(0.0, scatter, size=n_extra) if len(pool) else np.zeros(n_extra))
    extra_element = rng.choice(np.asarray(lamps), size=n_extra)

    groups = [_group(wl[first], element[first], m, x1[first], weight[first], True, False),
              _group(wl[second], element[second], m + 1, xg[second],
                     strength[second] * ghost_share[second], True, True),
              _group(extra_wl, extra_element, m, pixel_near_detector(truth, extra_wl),
                     extra_weight, False, False)]
    reference = float(strength[first].max()) if first.any() else float(np.max(
        catalogue.intensity, initial=1.0))
    unlisted = _impurities(extras, lamps, element, strength, first, reference, truth,
                           profile.medium, rng, scatter)
    groups.append(unlisted.assign(weight=unlisted["weight"] * _blaze_factor(
        unlisted["wavelength_nm"].to_numpy(), profile)))
    if extras.unfiltered_orders:
        sources = _joined([_group(wl[present], element[present], m, np.zeros(present.sum()),
                                  strength[present], True, False), groups[2], unlisted])
    for k in extras.unfiltered_orders:
        images = _order_images(sources, k, truth, profile, rng)
        if k == m + 1:  # do not repeat the ultraviolet ghosts already there
            images = images[~(images["listed"] & images["wavelength_nm"].isin(wl[second]))]
        groups.append(images)
    table = _joined(groups)
    table = table[on_detector(table["x_true"].to_numpy())]
    return table.sort_values("x_true", kind="stable").reset_index(drop=True)


def _group(wl, element, order, x, weight, listed: bool, ghost: bool) -> pd.DataFrame:
    """One group of lines as table rows."""
    n = len(wl)
    return pd.DataFrame({"wavelength_nm": np.asarray(wl, dtype=float),
                         "element": np.asarray(element).astype(str),
                         "order": np.full(n, order, dtype=int),
                         "x_true": np.asarray(x, dtype=float),
                         "weight": np.asarray(weight, dtype=float),
                         "listed": np.full(n, listed), "ghost": np.full(n, ghost)})


def _joined(groups: list[pd.DataFrame]) -> pd.DataFrame:
    """The groups as one table (the empty ones left out)."""
    full = [g for g in groups if len(g)]
    return pd.concat(full, ignore_index=True) if full else groups[0]


def _impurities(extras: LampExtras, lamps, element, strength, first, reference, truth, medium,
                rng, scatter) -> pd.DataFrame:
    """First-order Balmer and ion lines (unlisted; strengths before the blaze efficiency);
    none when both are off."""
    wl, names, weight = [], [], []
    if extras.balmer > 0:
        levels = np.array(sorted(BALMER_DECREMENT))
        decrement = np.array([BALMER_DECREMENT[n] for n in levels]) / BALMER_DECREMENT[3]
        wl.append(balmer_wavelengths(levels, medium=medium))
        names.append(np.full(len(levels), "H"))
        weight.append(extras.balmer * reference * decrement)
    if extras.ion_lines > 0:
        for lamp in lamps:
            if lamp not in _ION_LINES_NM:
                continue
            ion = np.array(_ION_LINES_NM[lamp])
            own = first & (element == lamp)
            top = float(strength[own].max()) if own.any() else reference
            wl.append(ion if medium == "air" else air_to_vacuum(ion))
            names.append(np.full(len(ion), f"{lamp} II"))
            weight.append(extras.ion_lines * top * rng.lognormal(0.0, scatter, size=len(ion)))
    if not wl:
        return _group([], [], truth.order, [], [], False, False)
    wl = np.concatenate(wl)
    return _group(wl, np.concatenate(names), truth.order, pixel_near_detector(truth, wl),
                  np.concatenate(weight), False, False)


def _order_images(sources: pd.DataFrame, k: int, truth, profile, rng) -> pd.DataFrame:
    """Images in order ``k`` of the lamp's lines (``sources``: their first-order strengths)."""
    if k not in _ORDER_SHARE or k <= truth.order:
        msg = f"unfiltered orders must be among {sorted(_ORDER_SHARE)}, got {k!r}"
        raise ValueError(msg)
    share = rng.uniform(*_ORDER_SHARE[k])
    wl = sources["wavelength_nm"].to_numpy()
    x = pixel_near_detector(truth.with_parameters(order=k), wl)
    weight = sources["weight"].to_numpy() * share * _blaze_factor(k * wl, profile)
    return sources.assign(order=k, x_true=x, weight=weight, ghost=True)


def pixel_near_detector(model: GratingModel, wl: np.ndarray) -> np.ndarray:
    """``model.pixel`` for wavelengths landing near the detector, NaN elsewhere.

    The distortion polynomial is only evaluated near the detector, where it is meant to hold
    (far outside, its cubic terms overflow).
    """
    plain = model.with_parameters(distortion=()).pixel(wl)
    n = model.n_pixels
    near = np.isfinite(plain) & (plain > -n) & (plain < 2 * n)
    x = np.full(np.shape(wl), np.nan)
    x[near] = model.pixel(np.asarray(wl)[near])
    return x


def _blaze_factor(wl, profile):
    """Smooth grating efficiency around the blaze wavelength (1 if no blaze is given)."""
    blaze = profile.grating.blaze_nm
    if not blaze:
        return np.ones_like(wl)
    return np.exp(-0.5 * (np.log(wl / blaze) / 0.45) ** 2)

