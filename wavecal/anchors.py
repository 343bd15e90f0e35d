"""A few pixel/wavelength pairs given by the user ("anchors") as the start of an identification.

When neither the blind search nor a reference can do a frame, the user can name a few lines.
:func:`read_anchors` reads them from a small text file (two columns: pixel and wavelength in nm
in the profile's medium; ``#`` starts a comment; at least :data:`MIN_ANCHORS` pairs).
:func:`anchored_identification` fits the physical model to the anchors (with the profile's
priors), pairs the remaining peaks with listed lines under that model, refits and narrows the
tolerance as the blind consensus step does, and hands the result to the usual refinement.

Anchors are not evidence that the identification is right by more than chance: the
significance counts only the lines the tool found itself, under the anchored model, after one
search (:func:`found_lines_chance`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import AnchorFileError
from .fit import fit_lines
from .match import (Association, Hypothesis, Identification, associate, blend_distance_px,
                    chance_log10_probability, coincidence_probabilities)
from .model_setup import PriorBox
from .optics import GratingModel
from .refine import Refinement

__all__ = ["Anchors", "read_anchors", "anchored_identification", "anchor_peaks", "line_sources",
           "found_lines_chance", "MIN_ANCHORS", "ANCHOR_PIXEL_SIGMA_PX"]

#: Fewest pairs a file must give: three fix position, scale and its change along the detector.
MIN_ANCHORS = 3
#: Uncertainty given to a user's pixel position (a position read off a plot by eye).
ANCHOR_PIXEL_SIGMA_PX = 0.5
#: Tolerances (pixels) of the association rounds under the anchored model, widest first.
_SCHEDULE_PX = (8.0, 4.0, 2.0, 1.0)


@dataclass(frozen=True)
class Anchors:
    """Pixel/wavelength pairs named by the user.

    Attributes
    ----------
    path : Path
    pixel : ndarray
        0-based pixel along the dispersion axis.
    wavelength_nm : ndarray
        Wavelength (nm) in the profile's medium.
    """

    path: Path
    pixel: np.ndarray
    wavelength_nm: np.ndarray

    def __len__(self) -> int:
        return int(self.pixel.size)


def read_anchors(path: str | Path) -> Anchors:
    """Read a file of pixel/wavelength pairs.

    Raises
    ------
    AnchorFileError
        One line naming the file (and the line) and the problem: unreadable, a line without two
        numbers, a wavelength that is not positive, a pixel given twice, fewer than
        :data:`MIN_ANCHORS` pairs.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        msg = f"{path}: cannot read the anchors file: {getattr(exc, 'strerror', None) or exc}"
        raise AnchorFileError(msg) from None
    pixels, waves = [], []
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].replace(",", " ").split()
        if not line:
            continue
        try:
            if len(line) != 2:
                raise ValueError
            pixel, wave = float(line[0]), float(line[1])
        except ValueError:
            msg = f"{path}, line {number}: expected a pixel and a wavelength (nm), got {raw.strip()!r}"
            raise AnchorFileError(msg) from None
        if not (math.isfinite(pixel) and math.isfinite(wave) and wave > 0):
            msg = f"{path}, line {number}: pixel and wavelength must be finite, the wavelength positive"
            raise AnchorFileError(msg)
        pixels.append(pixel)
        waves.append(wave)
    if len(pixels) < MIN_ANCHORS:
        msg = f"{path}: {len(pixels)} pixel/wavelength pair(s); at least {MIN_ANCHORS} needed"
        raise AnchorFileError(msg)
    if len(set(pixels)) < len(pixels) or len(set(waves)) < len(waves):
        msg = f"{path}: a pixel or a wavelength is given twice"
        raise AnchorFileError(msg)
    order = np.argsort(pixels)
    return Anchors(path, np.asarray(pixels, float)[order], np.asarray(waves, float)[order])


def anchor_peaks(anchors: Anchors, x: np.ndarray, fwhm_px: float) -> np.ndarray:
    """Index of the detected peak each anchor names (nearest within a line width), -1 for none."""
    x = np.asarray(x, float)
    if x.size == 0:
        return np.full(len(anchors), -1)
    nearest = np.argmin(np.abs(x[None, :] - anchors.pixel[:, None]), axis=1)
    close = np.abs(x[nearest] - anchors.pixel) <= max(fwhm_px, 1.0)
    return np.where(close, nearest, -1)


def anchored_identification(model: GratingModel, box: PriorBox, anchors: Anchors, x: np.ndarray,
                            lines_nm: np.ndarray, *, intensity: np.ndarray | None = None,
                            fwhm_px: float = 3.0) -> Identification:
    """Identify the peaks from the anchors: one hypothesis, one search (``log10_trials`` 0).

    The model is fitted to the anchors (centres of the peaks they name where found), then
    peaks and listed lines are paired under it at shrinking tolerances, each round refitted on
    the pairs found and the anchors. The hypothesis's significance counts only the pairs found
    (:func:`found_lines_chance`).

    Raises
    ------
    AnchorFileError
        When two pairs name the same detected peak.
    """
    x = np.asarray(x, float)
    lines_nm = np.asarray(lines_nm, float)
    named = anchor_peaks(anchors, x, fwhm_px)
    taken = named[named >= 0]
    if np.unique(taken).size < taken.size:
        ordered = np.sort(taken)
        twice = x[ordered[np.flatnonzero(np.diff(ordered) == 0)[0]]]
        msg = (f"{anchors.path}: two pairs name the same peak, at pixel {twice:.1f} (pairs closer "
               "than a line width)")
        raise AnchorFileError(msg)
    ax = anchors.pixel.copy()
    ax[named >= 0] = x[named[named >= 0]]
    blend_px = blend_distance_px(fwhm_px)
    fitted = model
    for tolerance in (None, *_SCHEDULE_PX):
        assoc = (_empty() if tolerance is None else
                 _without(associate(fitted, x, lines_nm, tolerance, blend_px=blend_px,
                                    intensity=intensity), named))
        px = np.r_[ax, x[assoc.peak]]
        lam = np.r_[anchors.wavelength_nm, lines_nm[assoc.line]]
        err = np.r_[np.full(ax.size, ANCHOR_PIXEL_SIGMA_PX), np.full(assoc.peak.size, 0.1)]
        fitted = fit_lines(fitted, box, px, err, lam, np.full(lam.size, 1e-3),
                           max_distortion_degree=0, clip=1e9).model
    tolerance = _SCHEDULE_PX[-1]
    assoc = associate(fitted, x, lines_nm, tolerance, blend_px=blend_px, intensity=intensity)
    found = ~np.isin(assoc.peak, named[named >= 0])
    chance = coincidence_probabilities(fitted, x[_not_named(x.size, named)], lines_nm, tolerance)
    log10_p = chance_log10_probability(int(np.count_nonzero(found)), chance, n_free=2)
    notes = (f"{len(anchors)} lines named by the user ({anchors.path.name})",)
    return Identification(Hypothesis(fitted, assoc, tolerance, log10_p), None, 1, 0.0, notes)


def found_lines_chance(refined: Refinement, named: np.ndarray) -> tuple[float, int]:
    """Chance probability (log10) of the refined pairs the tool found itself, and how many of
    the used lines came from the user.

    The peaks the anchors name neither count as matches nor as chances: the significance is
    that of the other lines under the anchored model, as after one search, less the
    coincidences the fit could buy by bending towards them (the sum of their leverages,
    rounded up: what they, not the anchors and priors, determine).
    """
    fit, pairs = refined.fit, refined.pairs
    user = np.isin(pairs.peak, named[named >= 0])
    window = float(np.clip(4.0 * fit.rms_px, 0.1, refined.tolerance_px))
    others = _not_named(refined.x.size, named)
    chance = coincidence_probabilities(fit.model, refined.x[others],
                                       refined.wavelength_nm, window)
    # each found line could have pulled the model towards a chance coincidence by as much as
    # its leverage: the sum of the found lines' leverages is the coincidences the fit can buy
    bought = float(np.nansum(fit.leverage[~user & fit.used]))
    log10_p = chance_log10_probability(int(np.count_nonzero(~user)), chance,
                                       n_free=int(math.ceil(bought - 1e-9)))
    return log10_p, int(np.count_nonzero(user & fit.used))


def line_sources(n_peaks: int, named: np.ndarray | None) -> np.ndarray:
    """The line table's ``source`` column: ``"user"`` for a peak an anchor named, ``"search"``
    for the others."""
    source = np.full(n_peaks, "search", dtype=object)
    if named is not None:
        source[named[named >= 0]] = "user"
    return source


def _not_named(n: int, named: np.ndarray) -> np.ndarray:
    keep = np.ones(n, bool)
    keep[named[named >= 0]] = False
    return keep


def _without(assoc: Association, named: np.ndarray) -> Association:
    """The association less the peaks the anchors name (they are fitted as the user said)."""
    keep = ~np.isin(assoc.peak, named[named >= 0])
    return Association(assoc.peak[keep], assoc.line[keep], assoc.offset_px[keep],
                       assoc.crowded[keep])


def _empty() -> Association:
    return Association(np.empty(0, int), np.empty(0, int), np.empty(0), np.empty(0, bool))
