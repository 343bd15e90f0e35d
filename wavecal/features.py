"""The line list as the frame resolves it: unresolved groups of listed lines become one feature.

At a resolution of a few ångströms per pixel many listed lines lie closer together than the
line width, and the lamp shows each such group as one peak whose centre is the
intensity-weighted mean of its members. Pairing such a peak with one member puts an error of up
to half the separation into the fit; leaving the group out throws away most lines of a
low-resolution frame. :func:`resolve_lines` therefore merges listed lines closer than the
measured line width into one *feature* at the weighted centre, with an uncertainty that says
how well that centre is known:

* within one element the relative intensities are known to about a factor of two (lamp
  currents and pressures change line ratios; common practice), so the centre is uncertain by
  ``ln 2 / 2`` times the members' intensity-weighted spread;
* between elements the list's intensity scales are not comparable (the lamp's mix sets them),
  so the ratio is known only to about a factor of ten: ``ln 10 / 2`` times the spread.

Intensities are compared only after normalising each element to its own brightest line in the
range, so that a faint line of one element never counts as the equal of a strong one of another.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .linelists import LineList
from .optics import GratingModel

__all__ = ["ResolvedLines", "resolve_lines", "SAME_ELEMENT_RATIO_DEX", "OTHER_ELEMENT_RATIO_DEX"]

#: Uncertainty (natural log) of an intensity ratio between lines of one element in a lamp.
SAME_ELEMENT_RATIO_DEX = float(np.log(2.0))
#: Uncertainty (natural log) of an intensity ratio between lines of different elements.
OTHER_ELEMENT_RATIO_DEX = float(np.log(10.0))


@dataclass(frozen=True, eq=False)
class ResolvedLines:
    """Listed lines as the frame resolves them.

    Attributes
    ----------
    lines : LineList
        One entry per feature, sorted by wavelength: a merged feature has the weighted centre,
        the summed normalised intensity, the members' elements joined by ``+`` and
        ``blend = True``; it is ``verified`` only if every member is.
    sigma_nm : ndarray
        Uncertainty of each feature's centre from the unknown intensity ratios of its members
        (0 for a single line).
    members : ndarray of int
        Number of listed lines in each feature.
    """

    lines: LineList
    sigma_nm: np.ndarray
    members: np.ndarray

    def __len__(self) -> int:
        return len(self.lines)


def _normalised_intensity(lines: LineList) -> np.ndarray:
    """Each line's intensity relative to its element's brightest line in ``lines``."""
    out = np.ones(len(lines))
    for element in np.unique(lines.element):
        own = lines.element == element
        peak = np.nanmax(lines.intensity[own], initial=0.0)
        if peak > 0:
            out[own] = np.clip(lines.intensity[own] / peak, 1e-6, None)
    return out


def resolve_lines(lines: LineList, model: GratingModel,
                  fwhm_at: Callable[[np.ndarray], np.ndarray]) -> ResolvedLines:
    """Merge listed lines closer than the line width (at ``model``'s dispersion) into features.

    Parameters
    ----------
    lines : LineList
        The lines that may appear on the detector, sorted by wavelength.
    model : GratingModel
        Sets the local dispersion (nm per pixel) and the position of each line; the nominal
        model is close enough (its dispersion is known to a few per cent).
    fwhm_at : callable
        Measured line width (pixels) at given pixels, e.g. :meth:`wavecal.peak_table.PeakTable.fwhm_at`.

    Returns
    -------
    ResolvedLines
    """
    lam = lines.wavelength_nm
    n = lam.size
    if n == 0:
        return ResolvedLines(lines, np.zeros(0), np.zeros(0, int))
    weight = _normalised_intensity(lines)
    pixel = model.pixel(lam)
    pixel = np.clip(np.where(np.isfinite(pixel), pixel, 0.5 * model.n_pixels), 0, model.n_pixels - 1)
    per_px = np.abs(model.dispersion(pixel))
    gap_px = np.diff(lam) / np.minimum(per_px[:-1], per_px[1:])
    width = np.asarray(fwhm_at(0.5 * (pixel[:-1] + pixel[1:])), float)
    starts = np.r_[0, np.flatnonzero(~(gap_px < width)) + 1]
    ends = np.r_[starts[1:], n]
    centre = np.empty(starts.size)
    sigma = np.zeros(starts.size)
    intensity = np.empty(starts.size)
    element = np.empty(starts.size, dtype=object)
    verified = np.empty(starts.size, bool)
    blend = np.empty(starts.size, bool)
    weak = np.empty(starts.size, bool)
    for k, (a, b) in enumerate(zip(starts, ends)):
        w = weight[a:b]
        centre[k] = float(np.sum(w * lam[a:b]) / np.sum(w))
        intensity[k] = float(np.sum(w))
        names = list(dict.fromkeys(lines.element[a:b]))
        element[k] = "+".join(names)
        verified[k] = bool(np.all(lines.verified[a:b]))
        weak[k] = bool(np.all(lines.weak[a:b]))
        blend[k] = b - a > 1 or bool(lines.blend[a])
        if b - a > 1:
            spread = float(np.sqrt(np.sum(w * (lam[a:b] - centre[k]) ** 2) / np.sum(w)))
            ratio = SAME_ELEMENT_RATIO_DEX if len(names) == 1 else OTHER_ELEMENT_RATIO_DEX
            sigma[k] = 0.5 * ratio * spread
    merged = LineList(centre, intensity, element.astype(str), blend, weak, verified,
                      medium=lines.medium)
    return ResolvedLines(merged, sigma, (ends - starts).astype(int))
