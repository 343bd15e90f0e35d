"""Drift of a configuration through the night: how far the lines moved, in pixels.

The shift of an arc relative to a reference arc is measured at the detector centre ``xc``: the
wavelength the reference puts at ``xc`` lies at ``xc + shift`` in the arc. Positive: the lines
moved towards larger pixels.
"""
from __future__ import annotations

import math

import numpy as np

from ..solution import Solution

__all__ = ["relative_shift", "shifted_solution"]


def relative_shift(solution: Solution, reference: Solution) -> float:
    """Pixel shift of ``solution``'s lines relative to ``reference`` at the detector centre
    (NaN when either has no model)."""
    if solution.model is None or reference.model is None:
        return math.nan
    xc = 0.5 * (reference.model.n_pixels - 1)
    lam = reference.wavelength(xc)
    return float(np.asarray(solution.pixel(lam)) - xc)


def shifted_solution(solution: Solution, shift_px: float) -> Solution:
    """The solution with every line moved by ``shift_px`` pixels (the model's camera-axis pixel
    moved by that much: the whole pixel-to-wavelength relation translates, distortion aside,
    which changes by far less than a pixel for sub-pixel and few-pixel shifts)."""
    from dataclasses import replace

    if solution.model is None or shift_px == 0.0:
        return solution
    model = solution.model.with_parameters(axis_pixel=solution.model.axis_pixel + shift_px)
    lo, hi = solution.covered_range_px
    return replace(solution, model=model, covered_range_px=(lo + shift_px, hi + shift_px))
