"""Choosing the solution for each science frame: the closest arc in time (policy
``closest-arc``), or that arc moved by the drift interpolated between the two arcs that bracket
it (policy ``follow-drift``)."""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["POLICIES", "ArcPoint", "Assignment", "assign"]

POLICIES = ("closest-arc", "follow-drift")


@dataclass(frozen=True)
class ArcPoint:
    """A usable arc of one configuration: its name, time (MJD) and shift (pixels) relative to
    the configuration's reference arc."""

    name: str
    time_mjd: float
    shift_px: float


@dataclass(frozen=True)
class Assignment:
    """The solution a science frame gets.

    Attributes
    ----------
    arc : str
        The arc whose solution is used (nearest in time).
    shift_px : float
        Extra shift applied to that solution (0 unless interpolated).
    drift_px : float
        Estimated shift of the configuration at the frame's time, relative to its reference arc.
    method : str
        ``"nearest"``, ``"interpolated"`` (between ``bracket``) or ``"extrapolation refused"``
        (outside the arcs' time span: nearest).
    bracket : tuple of str
        The arcs before and after (empty unless interpolated).
    """

    arc: str
    shift_px: float
    drift_px: float
    method: str
    bracket: tuple[str, ...] = ()

    @property
    def label(self) -> str:
        """Short text for the summary table."""
        if self.method == "interpolated":
            return f"{self.arc} shifted {self.shift_px:+.3f} px (between {' and '.join(self.bracket)})"
        return self.arc


def assign(time_mjd: float, arcs: Sequence[ArcPoint], *, policy: str = "closest-arc",
           drift_threshold_px: float = 0.05) -> Assignment | None:
    """The assignment of a frame taken at ``time_mjd`` (None when there is no arc).

    With ``policy="follow-drift"`` and two arcs bracketing the frame whose shifts differ by more
    than ``drift_threshold_px``, the nearest arc's solution is shifted by the linearly
    interpolated drift minus that arc's own shift; otherwise the nearest arc is used as it is.
    """
    if policy not in POLICIES:
        msg = f"policy must be one of {POLICIES}, got {policy!r}"
        raise ValueError(msg)
    if not arcs:
        return None
    ordered = sorted(arcs, key=lambda a: (a.time_mjd, a.name))
    times = np.array([a.time_mjd for a in ordered])
    nearest = ordered[int(np.argmin(np.abs(times - time_mjd)))]
    plain = Assignment(nearest.name, 0.0, nearest.shift_px, "nearest")
    if policy == "closest-arc" or math.isnan(time_mjd):
        return plain
    after = int(np.searchsorted(times, time_mjd, side="right"))
    if after == 0 or after == len(ordered):
        return plain
    a, b = ordered[after - 1], ordered[after]
    if abs(b.shift_px - a.shift_px) <= drift_threshold_px or b.time_mjd == a.time_mjd:
        return plain
    frac = (time_mjd - a.time_mjd) / (b.time_mjd - a.time_mjd)
    drift = a.shift_px + frac * (b.shift_px - a.shift_px)
    return Assignment(nearest.name, drift - nearest.shift_px, drift, "interpolated",
                      (a.name, b.name))
