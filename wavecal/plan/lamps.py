"""Lamp choice for a planned setting: which arc lamps (or mixes) calibrate it best.

Works on the planner's table of listed lines on the detector (every shipped element, every
order; see :func:`wavecal.plan.plan_setup`). For a set of lamp elements:

* **lines**: listed lines of the working order on the detector whose wavelength lies in the
  sensitivity range; **strong**: of those, not flagged weak and of intensity at least
  :data:`STRONG_INTENSITY` (class S of the shipped lists, whose scale is S = 1000, M = 300,
  W = 100 times a factor in [0.7, 1.4]).
* **usable**: lines that are not weak, not flagged ``blend`` in the list, and have no other
  visible line (not weak, in any order, of the same lamps, within the sensitivity range, not
  blocked by the suggested filter) closer
  than :data:`CROWDING_WIDTHS` line widths: an identifiable, centrable line.
* **evenness**: the largest gap between usable lines, the detector ends included, as a fraction
  of the detector length; and how many detector thirds hold a usable line.
* **ghosts**: lines of the lamps in other orders (not weak, own wavelength within the
  sensitivity range) that land on the detector when no order-sorting filter is used; **ghosts
  left**: those the suggested filter does not block.

The score assumes the suggested order-sorting filter is in place: lines it blocks (column
``filtered`` of the table) neither count nor crowd. The ranking score (higher is better) is,
transparently::

    score = min(usable, 20) + min(strong usable, 10) - 30 * largest_gap - ghosts_left
            - 4 * (number of elements - 1)

Beyond some twenty well-spread lines more lines add little; a strong line is worth a second
point because it survives short exposures and faint blaze wings; a gap of a third of the
detector costs ten lines; every extra lamp costs four lines' worth of set-up effort. The rating is ``solid`` with
at least 8 usable lines, a usable line in every third and no gap above a quarter of the
detector (the physical fit has four to seven free parameters), ``fair`` with at least 5 usable
lines in at least two thirds, else ``poor`` (common practice, not from a source).
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["STRONG_INTENSITY", "CROWDING_WIDTHS", "LampScore", "usable_mask", "score_lamps",
           "rank_lamp_mixes"]

#: Minimum listed intensity of a strong line (class S of the shipped line lists).
STRONG_INTENSITY = 500.0
#: Lines closer than this many line widths to another visible line are not usable.
CROWDING_WIDTHS = 1.5
_SOLID = {"usable": 8, "thirds": 3, "gap": 0.25}
_FAIR = {"usable": 5, "thirds": 2}


@dataclass(frozen=True)
class LampScore:
    """How well one lamp or lamp mix calibrates a planned setting.

    Attributes
    ----------
    lamps : tuple of str
        Element symbols of the lamp(s).
    n_lines, n_strong, n_usable, n_strong_usable : int
        Counts as defined in the module docstring.
    largest_gap_fraction : float
        Largest gap between usable lines (detector ends included) over the detector length;
        1 when there is no usable line.
    thirds_covered : int
        Detector thirds (0-3) holding at least one usable line.
    n_ghosts : int
        Visible lines of the lamps from other orders landing on the detector (no filter).
    n_ghosts_left : int
        Those of them the suggested order-sorting filter does not block.
    score : float
        Ranking score (module docstring).
    rating : str
        ``"solid"``, ``"fair"`` or ``"poor"``.
    """

    lamps: tuple[str, ...]
    n_lines: int
    n_strong: int
    n_usable: int
    n_strong_usable: int
    largest_gap_fraction: float
    thirds_covered: int
    n_ghosts: int
    n_ghosts_left: int
    score: float
    rating: str

    @property
    def label(self) -> str:
        """The lamps as ``"Hg+Ar"``."""
        return "+".join(self.lamps)

    def summary(self) -> dict:
        """JSON-safe dict of the attributes."""
        return {
            "lamps": list(self.lamps),
            "n_lines": self.n_lines,
            "n_strong": self.n_strong,
            "n_usable": self.n_usable,
            "n_strong_usable": self.n_strong_usable,
            "largest_gap_fraction": round(self.largest_gap_fraction, 4),
            "thirds_covered": self.thirds_covered,
            "n_ghosts": self.n_ghosts,
            "n_ghosts_left": self.n_ghosts_left,
            "score": round(self.score, 3),
            "rating": self.rating,
        }


def usable_mask(lines: pd.DataFrame, lamps: tuple[str, ...], *, order: int,
                line_width_px: float) -> np.ndarray:
    """Boolean mask over ``lines``: the usable working-order lines of ``lamps``."""
    mine = lines["element"].isin(lamps).to_numpy()
    visible = (mine & ~lines["weak"].to_numpy() & lines["sensitive"].to_numpy()
               & ~lines["filtered"].to_numpy())
    first = visible & (lines["order"].to_numpy() == order) & ~lines["blend"].to_numpy()
    x = lines["x"].to_numpy(dtype=float)
    xv = np.sort(x[visible])
    nearest = np.full(len(x), np.inf)
    if len(xv) > 1:
        idx = np.searchsorted(xv, x)
        # distance to the nearest visible line other than the line itself (which is in xv)
        for shift in (-1, 0, 1):
            j = np.clip(idx + shift, 0, len(xv) - 1)
            d = np.abs(xv[j] - x)
            d[d == 0.0] = np.inf
            nearest = np.minimum(nearest, d)
    duplicate = _has_twin(x, visible)
    return first & (nearest > CROWDING_WIDTHS * line_width_px) & ~duplicate


def _has_twin(x: np.ndarray, visible: np.ndarray) -> np.ndarray:
    """Visible lines sharing their exact position with another visible line."""
    values, counts = np.unique(x[visible], return_counts=True)
    return visible & np.isin(x, values[counts > 1])


def score_lamps(lines: pd.DataFrame, lamps: tuple[str, ...], *, order: int, n_pixels: int,
                line_width_px: float) -> LampScore:
    """Score one lamp set on the planner's line table.

    Parameters
    ----------
    lines : pandas.DataFrame
        The planner's line table (columns ``element``, ``order``, ``x``, ``weak``, ``blend``,
        ``strong``, ``sensitive``, ``filtered``).
    lamps : tuple of str
        Element symbols.
    order : int
        The working order.
    n_pixels : int
        Detector length along the dispersion axis (pixels).
    line_width_px : float
        Expected line width (pixels) for the crowding test.

    Returns
    -------
    LampScore
    """
    lamps = tuple(lamps)
    mine = lines["element"].isin(lamps).to_numpy()
    sensitive = lines["sensitive"].to_numpy()
    weak = lines["weak"].to_numpy()
    in_order = lines["order"].to_numpy() == order
    working = mine & sensitive & in_order
    strong = lines["strong"].to_numpy()
    usable = usable_mask(lines, lamps, order=order, line_width_px=line_width_px)
    x = np.sort(lines["x"].to_numpy(dtype=float)[usable])
    if len(x):
        edges = np.concatenate([[0.0], np.clip(x, 0.0, n_pixels - 1.0), [n_pixels - 1.0]])
        gap = float(np.max(np.diff(edges)) / (n_pixels - 1.0))
    else:
        gap = 1.0
    thirds = len(set(np.clip((x * 3 // n_pixels).astype(int), 0, 2).tolist()))
    n_usable = int(usable.sum())
    n_strong_usable = int((usable & strong).sum())
    ghosts = mine & sensitive & ~in_order & ~weak
    n_ghosts = int(ghosts.sum())
    n_left = int((ghosts & ~lines["filtered"].to_numpy()).sum())
    score = (min(n_usable, 20) + min(n_strong_usable, 10) - 30.0 * gap - n_left
             - 4.0 * (len(lamps) - 1))
    if n_usable >= _SOLID["usable"] and thirds >= _SOLID["thirds"] and gap <= _SOLID["gap"]:
        rating = "solid"
    elif n_usable >= _FAIR["usable"] and thirds >= _FAIR["thirds"]:
        rating = "fair"
    else:
        rating = "poor"
    return LampScore(lamps=lamps, n_lines=int(working.sum()), n_strong=int((working & strong).sum()),
                     n_usable=n_usable, n_strong_usable=n_strong_usable,
                     largest_gap_fraction=gap, thirds_covered=thirds, n_ghosts=n_ghosts,
                     n_ghosts_left=n_left,
                     score=float(score), rating=rating)


def rank_lamp_mixes(lines: pd.DataFrame, elements: tuple[str, ...], *, order: int,
                    n_pixels: int, line_width_px: float, max_elements: int = 3,
                    ) -> tuple[LampScore, ...]:
    """Every lamp and mix of up to ``max_elements`` elements, best first.

    A mix is kept only if each of its elements contributes at least one usable line of its own
    (a lamp adding nothing is not worth its set-up). Ties keep fewer elements first, then
    alphabetical order.
    """
    scores = []
    single = {e: score_lamps(lines, (e,), order=order, n_pixels=n_pixels,
                             line_width_px=line_width_px) for e in elements}
    useful = [e for e in elements if single[e].n_usable > 0]
    for k in range(1, max_elements + 1):
        for combo in itertools.combinations(useful, k):
            score = single[combo[0]] if k == 1 else score_lamps(
                lines, combo, order=order, n_pixels=n_pixels, line_width_px=line_width_px)
            if k > 1 and not _each_contributes(lines, combo, order, line_width_px):
                continue
            scores.append(score)
    return tuple(sorted(scores, key=lambda s: (-s.score, len(s.lamps), s.label)))


def _each_contributes(lines: pd.DataFrame, combo: tuple[str, ...], order: int,
                      line_width_px: float) -> bool:
    usable = usable_mask(lines, combo, order=order, line_width_px=line_width_px)
    elements = set(lines["element"].to_numpy()[usable].tolist())
    return all(e in elements for e in combo)
