"""One configuration through the night: a joint fit of all its arcs.

Arcs taken with one grating setting share the optics; between them only a small drift changes
(temperature, flexure). The joint fit therefore has *shared* parameters, the camera focal
length, the detector tilt and the distortion coefficients (groove density fixed), and *per-arc*
ones, the camera-axis pixel and the grating angle of each arc. The profile's priors (a
:class:`~wavecal.model_setup.PriorBox`) apply once to each shared parameter and to every arc's own
ones; each identified line weighs with its total uncertainty ``sigma_px`` as the arc's own fit
left it (centre, list wavelength and excess scatter combined). The lines are those the single-arc
fit kept (``identification == "used"``); no further clipping is done here.

An arc that disagrees with the shared optics is left out (its single-arc solution stands). The
test is the nested-model F-test: with its optics tied to the others the arc's chi-square rises
by Δχ² over its own fit of the same lines. Its parameters are partly set by their priors (grating
angle and camera-axis pixel move the lines almost alike) and, in the joint fit, the arc still
helps set the shared ones, so the parameters counted are *effective* ones, the arc's share of
the trace of the hat matrix (common practice for regularised least squares): ``p1`` in its own
fit, ``pJ`` in the joint one, ``q = p1 - pJ`` tied, ``ν = n_lines - p1`` left. Under the
hypothesis that the arc shares the optics, ``F = (Δχ²/q) / s²``, with ``s²`` the arc's own
reduced chi-square (at least 1: the stated uncertainties are believed unless the residuals
exceed them), follows an F(q, ν) distribution. An arc is left out when its tail probability is
below
:data:`FALSE_ALARM` divided by the number of arcs in the joint set (Bonferroni: one false alarm
in a hundred configurations of agreeing arcs); the worst arc goes first, then the rest is refitted.

The drift is stated as a well-determined quantity: where each arc puts one fixed wavelength,
the one the first arc of the joint set puts at the detector centre (pixels, with its
uncertainty from the joint covariance). A straight line against time (and against temperature
when one is given) is fitted by generalised least squares with the full covariance of those
positions.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from ..model_setup import PriorBox
from ..optics import GratingModel
from ..solution import Solution

__all__ = ["ArcFit", "LeftOut", "DriftLine", "JointFit", "joint_fit", "FALSE_ALARM"]

#: Probability, per configuration, of leaving out an arc that agrees with the others (split
#: over the arcs by the Bonferroni rule).
FALSE_ALARM = 0.01
_HOURS_PER_DAY = 24.0
_SHARED = ("focal_length_mm", "tilt_deg")
_PER_ARC = ("grating_angle_deg", "axis_pixel")
_SAME_CONFIGURATION = ("mount", "grooves_per_mm", "order", "deviation_deg", "pixel_mm",
                       "n_pixels", "direction")


@dataclass(frozen=True)
class ArcFit:
    """One arc in the joint fit.

    Attributes
    ----------
    index : int
        Position of the arc in the input sequence.
    frame : str or None
        The frame its solution came from.
    in_joint : bool
        False when the arc was left out (see :attr:`JointFit.left_out`).
    model : GratingModel or None
        The joint per-arc model; for an arc left out, its own solution's model (None when it
        had none).
    names : tuple of str
        Parameters of ``values``, ``errors`` and ``covariance``: grating angle, focal length,
        camera-axis pixel, tilt, then ``distortion_<k>``.
    values, errors, covariance : ndarray
        From the joint fit; for an arc left out, from the refit of its lines alone (NaN when it
        could not be fitted). ``covariance`` works with :func:`wavecal.fit.wavelength_sigma`.
    n_lines : int
        Lines used.
    chi2_joint, chi2_single : float
        Chi-square of its lines in the joint fit (NaN when left out) and in its own fit.
    dof_single : float
        Its own fit's degrees of freedom (lines minus effective parameters).
    shift_px, shift_sigma_px : float
        Pixel where the arc puts :attr:`JointFit.reference_wavelength_nm`, minus the detector
        centre, and its 1-sigma uncertainty (NaN when left out).
    f_statistic, p_value : float
        The agreement test of the module docstring in the final joint fit (NaN when left out;
        the numbers that left it out are in its :class:`LeftOut`).
    """

    index: int
    frame: str | None
    in_joint: bool
    model: GratingModel | None
    names: tuple[str, ...]
    values: np.ndarray
    errors: np.ndarray
    covariance: np.ndarray
    n_lines: int
    chi2_joint: float
    chi2_single: float
    dof_single: float
    shift_px: float
    shift_sigma_px: float
    f_statistic: float
    p_value: float


@dataclass(frozen=True)
class LeftOut:
    """Why an arc was left out of the joint set.

    ``f_statistic`` and ``p_value`` are NaN for an arc that could not enter at all (no model,
    too few lines), ``n_tied`` the effective number of parameters its lines lost to the shared
    ones; ``threshold`` is the tail probability below which it was left out.
    """

    index: int
    frame: str | None
    reason: str
    f_statistic: float = math.nan
    p_value: float = math.nan
    n_tied: float = math.nan
    threshold: float = math.nan


@dataclass(frozen=True)
class DriftLine:
    """Straight line ``shift = intercept + slope * (u - origin)`` through the arcs' shifts.

    ``against`` is ``"time"`` (``u`` in hours from ``origin``, an MJD) or ``"temperature"``
    (``u`` in the unit given, ``origin`` their mean). ``chi2``/``dof`` tell whether a straight
    line describes the drift (dof 0 with two arcs); the errors are not scaled by them.
    """

    against: str
    origin: float
    slope: float
    slope_sigma: float
    intercept: float
    intercept_sigma: float
    chi2: float
    dof: int


@dataclass(frozen=True)
class JointFit:
    """The joint fit of one configuration's arcs (see the module docstring).

    Attributes
    ----------
    arcs : tuple of ArcFit
        One per input solution, in input order.
    shared_names : tuple of str
        ``focal_length_mm``, ``tilt_deg``, then ``distortion_<k>``.
    shared_values, shared_errors : ndarray
        Joint values and 1-sigma errors (NaN when fewer than two arcs could be joined).
    single_errors : ndarray
        Mean, over the arcs in the joint set, of the same parameters' errors in each arc's own
        fit: what the joint fit improves on.
    chi2, dof, reduced_chi2 : float, int, float
        Of the lines in the joint fit (priors excluded). Errors are scaled by the reduced
        chi-square when it exceeds 1.
    distortion_degree : int
        Highest distortion degree among the arcs' own solutions, shared by all (0: none).
    left_out : tuple of LeftOut
        Arcs not in the joint set, in the order they were left out.
    reference_wavelength_nm : float
        The wavelength whose position measures each arc's shift.
    drift_time, drift_temperature : DriftLine or None
        When times (temperatures) are given, finite and distinct for at least two joint arcs;
        arcs without a finite value are left out of the line.
    """

    arcs: tuple[ArcFit, ...]
    shared_names: tuple[str, ...]
    shared_values: np.ndarray
    shared_errors: np.ndarray
    single_errors: np.ndarray
    chi2: float
    dof: int
    reduced_chi2: float
    distortion_degree: int
    left_out: tuple[LeftOut, ...]
    reference_wavelength_nm: float
    drift_time: DriftLine | None
    drift_temperature: DriftLine | None

    @property
    def joined(self) -> tuple[int, ...]:
        """Indices of the arcs in the joint set."""
        return tuple(a.index for a in self.arcs if a.in_joint)


@dataclass(frozen=True)
class _Lines:
    """What the joint fit needs of one arc's solution."""

    model: GratingModel | None
    frame: str | None
    medium: str
    x: np.ndarray
    wavelength_nm: np.ndarray
    sigma_px: np.ndarray


def _arc_lines(solution: Solution) -> _Lines:
    """The one place that reads a :class:`~wavecal.solution.Solution`: its model, frame,
    medium and the lines its fit used (pixel, listed wavelength, total uncertainty)."""
    lines = solution.lines
    used = (lines["identification"] == "used").to_numpy()
    return _Lines(solution.model, solution.frame, solution.medium,
                  lines["x"].to_numpy(float)[used], lines["line_wavelength"].to_numpy(float)[used],
                  lines["sigma_px"].to_numpy(float)[used])


@dataclass(frozen=True)
class _Fit:
    """Least-squares fit of a set of arcs with shared optics (one arc: its own fit)."""

    members: tuple[int, ...]
    models: tuple[GratingModel, ...]
    theta: np.ndarray          # physical parameter vector, see _Problem
    covariance: np.ndarray     # of theta, scaled
    chi2_arc: np.ndarray
    dof: int
    n_effective: np.ndarray    # per arc: its lines' share of the hat-matrix trace

    @property
    def chi2(self) -> float:
        return float(self.chi2_arc.sum())


class _Problem:
    """Parameter vector: shared (focal, tilt, distortion_3..D), then (angle, axis) per arc.

    Prior-carrying parameters are fitted in units of their prior half-width about the nominal
    value (the prior residual is then the parameter itself); distortion coefficients in pixels.
    """

    def __init__(self, arcs: Sequence[_Lines], box: PriorBox, degree: int):
        self.arcs, self.degree = arcs, degree
        self.n_dist = max(degree - 2, 0)
        self.n_shared = len(_SHARED) + self.n_dist
        priors = box.as_dict()
        centre = [priors[n][0] for n in _SHARED] + [0.0] * self.n_dist
        width = [priors[n][1] for n in _SHARED] + [1.0] * self.n_dist
        for _ in arcs:
            centre += [priors[n][0] for n in _PER_ARC]
            width += [priors[n][1] for n in _PER_ARC]
        self.centre, self.width = np.array(centre), np.array(width)
        self.has_prior = np.ones(self.centre.size, bool)
        self.has_prior[len(_SHARED):self.n_shared] = False
        self.disp = [np.abs(a.model.dispersion(a.x)) for a in arcs]

    def models(self, theta: np.ndarray) -> list[GratingModel]:
        shared = dict(zip(_SHARED, theta[:len(_SHARED)]))
        dist = (tuple([0.0, 0.0, 0.0] + list(theta[len(_SHARED):self.n_shared]))
                if self.degree else ())
        out = []
        for i, arc in enumerate(self.arcs):
            own = theta[self.n_shared + 2 * i:self.n_shared + 2 * i + 2]
            out.append(arc.model.with_parameters(distortion=dist, **shared,
                                                 **dict(zip(_PER_ARC, own))))
        return out

    def start(self) -> np.ndarray:
        models = [a.model for a in self.arcs]
        shared = [np.mean([m.parameter(n) for m in models]) for n in _SHARED]
        dist = [np.mean([m.parameter(f"distortion_{k}") for m in models])
                for k in range(3, self.degree + 1)]
        own = [m.parameter(n) for m in models for n in _PER_ARC]
        return np.array(shared + dist + own)

    def residual(self, scaled: np.ndarray) -> np.ndarray:
        theta = self.centre + self.width * scaled
        data = [(m.wavelength(a.x) - a.wavelength_nm) / (d * a.sigma_px)
                for m, a, d in zip(self.models(theta), self.arcs, self.disp)]
        return np.concatenate(data + [scaled[self.has_prior]])

    def fit(self, members: tuple[int, ...]) -> _Fit:
        start = (self.start() - self.centre) / self.width
        result = optimize.least_squares(self.residual, start, method="lm", x_scale="jac")
        theta = self.centre + self.width * result.x
        sizes = [a.x.size for a in self.arcs]
        data = result.fun[:sum(sizes)]
        chi2_arc = np.array([np.sum(part**2) for part in np.split(data, np.cumsum(sizes)[:-1])])
        dof = sum(sizes) - theta.size
        jac = result.jac
        scaled_cov = np.linalg.pinv(jac.T @ jac)
        rows = jac[:data.size]
        leverage = np.einsum("ij,jk,ik->i", rows, scaled_cov, rows)
        n_effective = np.array([part.sum() for part in np.split(leverage, np.cumsum(sizes)[:-1])])
        cov = scaled_cov * np.outer(self.width, self.width)
        cov *= max(chi2_arc.sum() / max(dof, 1), 1.0)
        return _Fit(members, tuple(self.models(theta)), theta, cov, chi2_arc, dof, n_effective)

    def arc_covariance(self, fit: _Fit, i: int) -> tuple[tuple[str, ...], np.ndarray]:
        """Names and covariance of arc ``i``'s model parameters in ``fit``."""
        dist = [f"distortion_{k}" for k in range(3, self.degree + 1)]
        names = ("grating_angle_deg", "focal_length_mm", "axis_pixel", "tilt_deg", *dist)
        own = self.n_shared + 2 * i
        index = [own, 0, own + 1, 1] + list(range(len(_SHARED), self.n_shared))
        return names, fit.covariance[np.ix_(index, index)]

    def positions(self, fit: _Fit, wavelength_nm: float) -> tuple[np.ndarray, np.ndarray]:
        """Pixel of ``wavelength_nm`` in every arc and the covariance of those pixels."""
        x0 = np.array([m.pixel(wavelength_nm) for m in fit.models])
        steps = 1e-3 * np.sqrt(np.clip(np.diag(fit.covariance), 0, None))
        steps = np.where(steps > 0, steps, 1e-9)
        grad = np.empty((x0.size, fit.theta.size))
        for j, step in enumerate(steps):
            up, down = fit.theta.copy(), fit.theta.copy()
            up[j] += step
            down[j] -= step
            grad[:, j] = [(a.pixel(wavelength_nm) - b.pixel(wavelength_nm)) / (2 * step)
                          for a, b in zip(self.models(up), self.models(down))]
        return x0, grad @ fit.covariance @ grad.T


def _drift(values, members, shifts, shift_cov, against: str) -> DriftLine | None:
    """The drift line of the joint arcs whose ``values`` are finite (None unless at least two
    distinct ones): time in hours from the first MJD, temperature about its mean."""
    if values is None:
        return None
    u = np.array([values[i] for i in members], float)
    ok = np.isfinite(u)
    if np.count_nonzero(ok) < 2 or np.ptp(u[ok]) == 0:
        return None
    u, shifts, shift_cov = u[ok], shifts[ok], shift_cov[np.ix_(ok, ok)]
    if against == "time":
        return _straight_line((u - u.min()) * _HOURS_PER_DAY, shifts, shift_cov, against,
                              float(u.min()))
    return _straight_line(u - u.mean(), shifts, shift_cov, against, float(u.mean()))


def _straight_line(u: np.ndarray, y: np.ndarray, cov: np.ndarray, against: str,
                   origin: float) -> DriftLine:
    """Generalised least squares of ``y = a + b u`` with the covariance ``cov`` of ``y``."""
    design = np.column_stack([np.ones_like(u), u])
    weight = np.linalg.inv(cov)
    normal = np.linalg.inv(design.T @ weight @ design)
    coef = normal @ design.T @ weight @ y
    r = y - design @ coef
    return DriftLine(against=against, origin=float(origin), slope=float(coef[1]),
                     slope_sigma=float(np.sqrt(normal[1, 1])), intercept=float(coef[0]),
                     intercept_sigma=float(np.sqrt(normal[0, 0])), chi2=float(r @ weight @ r),
                     dof=int(u.size - 2))


def _check_inputs(arcs: Sequence[_Lines], times, temperatures) -> None:
    for name, values in (("times", times), ("temperatures", temperatures)):
        if values is not None and len(values) != len(arcs):
            msg = f"{name} has {len(values)} values for {len(arcs)} solutions"
            raise ValueError(msg)
    if len({a.medium for a in arcs}) > 1:
        msg = "the solutions are in different media; convert them to one first"
        raise ValueError(msg)
    models = [a.model for a in arcs if a.model is not None]
    for attr in _SAME_CONFIGURATION:
        if len({getattr(m, attr) for m in models}) > 1:
            msg = f"the solutions are not of one configuration (their {attr} differ)"
            raise ValueError(msg)


def _entry_problem(arc: _Lines, degree: int) -> str:
    """Why an arc cannot enter the fit at all ('' when it can)."""
    if arc.model is None:
        return "no solution"
    n_par = len(_SHARED) + len(_PER_ARC) + max(degree - 2, 0)
    if arc.x.size <= n_par:
        return f"{arc.x.size} lines used, too few for {n_par} parameters"
    return ""


def joint_fit(solutions: Sequence[Solution], box: PriorBox, *,
              times: Sequence[float] | None = None,
              temperatures: Sequence[float] | None = None) -> JointFit:
    """Fit one configuration's arcs together: shared optics, a per-arc shift and angle.

    Parameters
    ----------
    solutions : sequence of Solution
        Single-arc solutions of one configuration (same grating, order, binning, medium).
    box : PriorBox
        The configuration's priors (:func:`wavecal.model_setup.prior_box`).
    times : sequence of float, optional
        Observation time of each arc, MJD (as the night inventory holds it); gives the drift
        against time in pixels per hour.
    temperatures : sequence of float, optional
        A temperature of each arc (any unit); gives the drift per unit temperature.

    Returns
    -------
    JointFit

    Raises
    ------
    ValueError
        When the solutions are not of one configuration, or ``times``/``temperatures`` do not
        have one value per solution.
    """
    arcs = [_arc_lines(s) for s in solutions]
    _check_inputs(arcs, times, temperatures)
    degree = max([len(a.model.distortion) - 1 for a in arcs
                  if a.model is not None and a.model.distortion] + [0])
    left, active, singles = [], [], {}
    for i, arc in enumerate(arcs):
        problem = _entry_problem(arc, degree)
        if problem:
            left.append(LeftOut(i, arc.frame, problem))
            continue
        active.append(i)
        alone = _Problem([arc], box, degree)
        singles[i] = (alone, alone.fit((i,)))
    joint, tails = None, {}
    while len(active) >= 2:
        problem = _Problem([arcs[i] for i in active], box, degree)
        joint = (problem, problem.fit(tuple(active)))
        tails = {}
        for k, i in enumerate(active):
            single = singles[i][1]
            nu = arcs[i].x.size - single.n_effective[0]
            q = max(single.n_effective[0] - joint[1].n_effective[k], 1e-3)
            variance = max(single.chi2 / nu, 1.0)
            f_stat = max(joint[1].chi2_arc[k] - single.chi2, 0.0) / q / variance
            tails[i] = (float(stats.f.sf(f_stat, q, nu)), float(f_stat), float(q))
        worst = min(tails, key=tails.get)
        p_value, f_stat, q = tails[worst]
        threshold = FALSE_ALARM / len(active)
        if p_value >= threshold:
            break
        left.append(LeftOut(worst, arcs[worst].frame,
                            f"its lines disagree with the optics of the other arcs: F = "
                            f"{f_stat:.3g} for {q:.2g} parameters tied, tail "
                            f"probability {p_value:.2g} < {threshold:.2g}",
                            f_stat, p_value, q, threshold))
        active.remove(worst)
        joint = None
    if joint is None:
        left += [LeftOut(i, arcs[i].frame, "fewer than two arcs left to share optics with")
                 for i in active]
    return _result(arcs, degree, joint, singles, tails, left, times, temperatures)


def _result(arcs, degree, joint, singles, tails, left, times, temperatures) -> JointFit:
    shared_names = (*_SHARED, *[f"distortion_{k}" for k in range(3, degree + 1)])
    n_shared = len(shared_names)
    members = joint[1].members if joint else ()
    out: dict[int, ArcFit] = {}
    reference, shifts, shift_cov = math.nan, np.array([]), np.zeros((0, 0))
    if joint:
        problem, fit = joint
        xc = 0.5 * (fit.models[0].n_pixels - 1)
        reference = float(fit.models[0].wavelength(xc))
        shifts, shift_cov = problem.positions(fit, reference)
        shifts = shifts - xc
        for k, i in enumerate(members):
            names, cov = problem.arc_covariance(fit, k)
            model = fit.models[k]
            values = np.array([model.parameter(n) for n in names])
            single = singles[i][1]
            out[i] = ArcFit(i, arcs[i].frame, True, model, names, values,
                            np.sqrt(np.clip(np.diag(cov), 0, None)), cov, int(arcs[i].x.size),
                            float(fit.chi2_arc[k]), single.chi2,
                            float(arcs[i].x.size - single.n_effective[0]), float(shifts[k]),
                            float(np.sqrt(max(shift_cov[k, k], 0.0))), tails[i][1], tails[i][0])
    for i, arc in enumerate(arcs):
        if i in out:
            continue
        if i in singles:
            problem, single = singles[i]
            names, cov = problem.arc_covariance(single, 0)
            values = np.array([single.models[0].parameter(n) for n in names])
            errors, chi2 = np.sqrt(np.clip(np.diag(cov), 0, None)), single.chi2
            dof = float(arc.x.size - single.n_effective[0])
        else:
            names = ("grating_angle_deg", "focal_length_mm", "axis_pixel", "tilt_deg",
                     *[f"distortion_{k}" for k in range(3, degree + 1)])
            values = errors = np.full(len(names), np.nan)
            cov = np.full((len(names), len(names)), np.nan)
            chi2, dof = math.nan, math.nan
        out[i] = ArcFit(i, arc.frame, False, arc.model, names, values, errors, cov,
                        int(arc.x.size), math.nan, chi2, dof, math.nan, math.nan, math.nan,
                        math.nan)
    if joint:
        fit = joint[1]
        shared_values = fit.theta[:n_shared].copy()
        shared_errors = np.sqrt(np.clip(np.diag(fit.covariance)[:n_shared], 0, None))
        single_errors = np.mean([np.sqrt(np.clip(np.diag(singles[i][1].covariance)[:n_shared],
                                                 0, None)) for i in members], axis=0)
        chi2, dof = fit.chi2, fit.dof
    else:
        shared_values = shared_errors = single_errors = np.full(n_shared, np.nan)
        chi2, dof = math.nan, 0
    return JointFit(arcs=tuple(out[i] for i in range(len(arcs))), shared_names=shared_names,
                    shared_values=shared_values, shared_errors=shared_errors,
                    single_errors=single_errors, chi2=float(chi2), dof=int(dof),
                    reduced_chi2=float(chi2 / dof) if dof > 0 else math.nan,
                    distortion_degree=degree, left_out=tuple(left),
                    reference_wavelength_nm=reference,
                    drift_time=_drift(times, members, shifts, shift_cov, "time"),
                    drift_temperature=_drift(temperatures, members, shifts, shift_cov,
                                             "temperature"))
