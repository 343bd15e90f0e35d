"""The lines a simulated lamp puts on the detector, and their relative strengths.

The lamp differs from the shipped line list on purpose, as real lamps do: some listed lines are
missing, some unlisted lines are present, and line strengths scatter around the listed
intensities, so that a matcher cannot rely on line heights.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..optics import GratingModel

__all__ = ["pixel_near_detector", "place_lines"]

#: Lines up to this many pixels beyond the ends of the detector still spill light onto it.
_EDGE_MARGIN_PX = 12
#: Ghost (next order) flux as a fraction of the line's own first-order flux.
_GHOST_FRACTION = (0.01, 0.05)
#: Log-normal scatter of the lamp-to-lamp brightness ratio of different elements.
_ELEMENT_SCATTER = 0.5


def place_lines(catalogue, lamps, truth, layout, wl_range, rng, profile, missing_fraction,
                 unlisted_fraction, scatter, ghosts):
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

    x1 = _pixel_near_detector(truth, wl)
    first = present & on_detector(x1)
    weight = strength * _blaze_factor(wl, profile)
    m = truth.order
    xg = _pixel_near_detector(truth.with_parameters(order=m + 1), wl)
    blue_limit = min(wl_range[0], (profile.sensitivity_nm or wl_range)[0])
    second = present & on_detector(xg) & (wl < blue_limit) & bool(ghosts)

    n_extra = int(round(unlisted_fraction * first.sum()))
    extra_wl = rng.uniform(wl_range[0], wl_range[1], size=n_extra)
    pool = weight[first] if first.any() else np.asarray(catalogue.intensity, dtype=float)
    extra_weight = (0.5 * rng.choice(pool, size=n_extra) * rng.lognormal(0.0, scatter, size=n_extra)
                    if len(pool) else np.zeros(n_extra))
    extra_element = rng.choice(np.asarray(lamps), size=n_extra)

    table = pd.DataFrame({
        "wavelength_nm": np.concatenate([wl[first], wl[second], extra_wl]),
        "element": np.concatenate([element[first], element[second], extra_element]),
        "order": np.concatenate([np.full(first.sum(), m), np.full(second.sum(), m + 1),
                                 np.full(n_extra, m)]).astype(int),
        "x_true": np.concatenate([x1[first], xg[second], _pixel_near_detector(truth, extra_wl)]),
        "weight": np.concatenate([weight[first], strength[second] * ghost_share[second],
                                  extra_weight]),
        "listed": np.concatenate([np.ones(first.sum() + second.sum(), bool),
                                  np.zeros(n_extra, bool)]),
        "ghost": np.concatenate([np.zeros(first.sum(), bool), np.ones(second.sum(), bool),
                                 np.zeros(n_extra, bool)]),
    })
    table = table[on_detector(table["x_true"].to_numpy())]
    return table.sort_values("x_true", kind="stable").reset_index(drop=True)


def _pixel_near_detector(model: GratingModel, wl: np.ndarray) -> np.ndarray:
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

