"""The instrument through the night, as tables: the joint fit of each configuration's arcs.

The nightly run fits the solved arcs of one configuration together
(:func:`wavecal.night.joint.joint_fit`) and writes two tables beside ``drift.csv``:

- ``joint_arcs.csv``: one row per arc: whether it joined, its shift (the pixel where it puts
  the configuration's reference wavelength, minus the detector centre) with its uncertainty, its
  chi-square in the joint fit and alone, the agreement test's tail probability, and for an arc
  left out, why (it keeps its own solution);
- ``joint_shared.csv``: one row per shared parameter: the joint value and uncertainty against
  the mean uncertainty of the arcs' own fits, and the drift against time.

The prior of a configuration is the one its arcs were fitted with: each solution keeps every
parameter's nominal value and prior width.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from ..model_setup import PriorBox
from ..solution import Solution
from .joint import JointFit, joint_fit

__all__ = ["ARC_COLUMNS", "SHARED_COLUMNS", "prior_box_of", "night_tables"]

#: Columns of ``joint_arcs.csv``.
ARC_COLUMNS = ("configuration", "arc", "in_joint", "shift_px", "shift_sigma_px", "chi2_joint",
               "chi2_single", "p_value", "note")
#: Columns of ``joint_shared.csv``.
SHARED_COLUMNS = ("configuration", "parameter", "joint_value", "joint_error", "single_error",
                  "n_arcs", "drift_px_per_hour", "drift_sigma_px_per_hour")

_PHYSICAL = ("grating_angle_deg", "focal_length_mm", "axis_pixel", "tilt_deg")


def prior_box_of(solution: Solution) -> PriorBox:
    """The prior box ``solution`` was fitted with (its parameters' nominal values and widths).

    Raises
    ------
    ValueError
        When the solution lacks a physical parameter or its prior (a failed solution).
    """
    found = {e.name: (e.nominal, e.prior) for e in solution.parameters.estimates}
    missing = [n for n in _PHYSICAL if n not in found or not all(map(math.isfinite, found[n]))]
    if missing:
        msg = f"{solution.frame or 'solution'}: no prior for {', '.join(missing)}"
        raise ValueError(msg)
    return PriorBox(*(found[n] for n in _PHYSICAL),
                    effective=bool(solution.statistics.effective_geometry))


def night_tables(configuration: str, names: Sequence[str], solutions: Sequence[Solution],
                 times: Sequence[float]) -> tuple[JointFit, list[dict[str, Any]],
                                                  list[dict[str, Any]]]:
    """Fit one configuration's arcs together and tabulate the result.

    Parameters
    ----------
    configuration : str
        The configuration's label.
    names : sequence of str
        The arcs' file names, in the order of ``solutions``.
    solutions : sequence of Solution
        Their single-arc solutions (at least two, with models).
    times : sequence of float
        Their observation times (MJD; NaN when unknown).

    Returns
    -------
    (JointFit, list of dict, list of dict)
        The fit, the rows of ``joint_arcs.csv`` and those of ``joint_shared.csv``.

    Raises
    ------
    ValueError
        When the arcs cannot be fitted together (different settings, no prior).
    """
    fit = joint_fit(solutions, prior_box_of(solutions[0]), times=times)
    why = {out.index: out.reason for out in fit.left_out}
    arcs = [{"configuration": configuration, "arc": names[a.index], "in_joint": a.in_joint,
             "shift_px": a.shift_px, "shift_sigma_px": a.shift_sigma_px,
             "chi2_joint": a.chi2_joint, "chi2_single": a.chi2_single, "p_value": a.p_value,
             "note": "" if a.in_joint else f"left out, keeps its own solution: {why[a.index]}"}
            for a in fit.arcs]
    drift = fit.drift_time
    shared = [{"configuration": configuration, "parameter": name, "joint_value": value,
               "joint_error": error, "single_error": single, "n_arcs": len(fit.joined),
               "drift_px_per_hour": drift.slope if drift else math.nan,
               "drift_sigma_px_per_hour": drift.slope_sigma if drift else math.nan}
              for name, value, error, single in zip(fit.shared_names, fit.shared_values,
                                                    fit.shared_errors, fit.single_errors)]
    return fit, arcs, shared
