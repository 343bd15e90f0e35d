"""What the data determine: which quantities the lines fix, and which the prior sets.

One arc fixes the pixel-to-wavelength curve, not every physical parameter behind it: the grating
angle, the focal length, the camera-axis pixel and the detector tilt trade off against one another
(correlations near ±1), and the fit's uncertainty on such a parameter is then mostly the prior's.
This module says so, with numbers.

For a Gaussian prior of width ``s_prior`` and a posterior width ``s_post``, the precision adds:
``1 / s_post² = 1 / s_prior² + 1 / s_data²`` (linearised least squares). The share of a quantity's
precision that comes from the lines is therefore ``1 - (s_post / s_prior)²``: 1 when the lines
alone fix it, 0 when the prior does. A quantity is *set by the lines* when that share is at least
one half (:data:`DATA_SHARE_DETERMINED`), i.e. the lines carry more information about it than the
prior. The same is computed for three combinations the lines always fix well: the central
wavelength, the dispersion at the centre and the change of dispersion from one end of the detector
to the other (their prior widths are the prior propagated through the model).
"""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .optics import GratingModel

__all__ = ["Determined", "Determination", "what_data_determine", "DATA_SHARE_DETERMINED"]

#: A quantity is "set by the lines" when the lines give at least this share of its precision.
DATA_SHARE_DETERMINED = 0.5

_LABELS = {
    "grating_angle_deg": ("grating angle", "deg"),
    "focal_length_mm": ("camera focal length", "mm"),
    "axis_pixel": ("camera-axis pixel", "px"),
    "tilt_deg": ("detector tilt", "deg"),
    "grooves_per_mm": ("groove density", "/mm"),
    "central_wavelength_nm": ("central wavelength", "nm"),
    "central_dispersion_nm_per_px": ("dispersion at the centre", "nm/px"),
    "dispersion_change_nm_per_px": ("change of dispersion across the detector", "nm/px"),
}


@dataclass(frozen=True)
class Determined:
    """One quantity with its posterior and prior widths.

    Attributes
    ----------
    name : str
        Parameter or combination name (e.g. ``"focal_length_mm"``, ``"central_wavelength_nm"``).
    value, sigma : float
        Fitted value and posterior 1-sigma uncertainty.
    prior_sigma : float
        1-sigma width of the prior on it (``inf`` when nothing but the lines constrains it).
    """

    name: str
    value: float
    sigma: float
    prior_sigma: float

    @property
    def label(self) -> str:
        """Plain-words name."""
        return _LABELS.get(self.name, (self.name.replace("_", " "), ""))[0]

    @property
    def unit(self) -> str:
        """Unit of ``value`` and ``sigma``."""
        return _LABELS.get(self.name, ("", ""))[1]

    @property
    def width_ratio(self) -> float:
        """Posterior over prior width (0 when the prior is unbounded)."""
        if not math.isfinite(self.prior_sigma):
            return 0.0
        return self.sigma / self.prior_sigma if self.prior_sigma > 0 else math.nan

    @property
    def data_share(self) -> float:
        """Share of the precision that comes from the lines, ``1 - (sigma / prior_sigma)²``,
        within [0, 1] (NaN without a covariance)."""
        ratio = self.width_ratio
        return float(np.clip(1.0 - ratio * ratio, 0.0, 1.0)) if math.isfinite(ratio) else math.nan

    @property
    def set_by_data(self) -> bool:
        """True when the lines give at least :data:`DATA_SHARE_DETERMINED` of the precision."""
        return bool(self.data_share >= DATA_SHARE_DETERMINED)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready mapping (the derived figures included for readers of the file)."""
        return {"name": self.name, "value": self.value, "sigma": self.sigma,
                "prior_sigma": self.prior_sigma, "width_ratio": self.width_ratio,
                "data_share": self.data_share, "set_by": "lines" if self.set_by_data else "prior"}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Determined:
        """Inverse of :meth:`to_dict` (derived figures are recomputed)."""
        return cls(name=str(data["name"]), value=float(data["value"]),
                   sigma=float(data["sigma"]), prior_sigma=float(data["prior_sigma"]))


@dataclass(frozen=True)
class Determination:
    """What one fit's data determine.

    Attributes
    ----------
    parameters : tuple of Determined
        The varied physical parameters (distortion terms, which have no prior, are left out).
    combinations : tuple of Determined
        Central wavelength, dispersion at the centre, change of dispersion across the detector.
    """

    parameters: tuple[Determined, ...]
    combinations: tuple[Determined, ...]

    @property
    def prior_set(self) -> tuple[Determined, ...]:
        """Parameters set mainly by their prior."""
        return tuple(p for p in self.parameters if not p.set_by_data)

    def sentences(self) -> tuple[str, ...]:
        """The finding in plain words, one sentence per group."""
        out = []
        fixed = [c for c in self.combinations if c.set_by_data]
        if fixed:
            out.append("The lines determine the " + ", the ".join(
                f"{c.label} ({_figure(c.value, c.sigma)} {c.unit})" for c in fixed) + ".")
        by_data = [p for p in self.parameters if p.set_by_data]
        if by_data:
            out.append("Set by the lines: " + ", ".join(
                f"{p.label} ({p.data_share:.0%} of its precision from the lines)" for p in by_data)
                + ".")
        if self.prior_set:
            out.append("Set mainly by the prior, not measured by this arc: " + ", ".join(
                f"{p.label} (posterior/prior width {p.width_ratio:.2f})" for p in self.prior_set)
                + ".")
        return tuple(out)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready mapping."""
        return {"parameters": [p.to_dict() for p in self.parameters],
                "combinations": [c.to_dict() for c in self.combinations]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Determination:
        """Inverse of :meth:`to_dict`."""
        return cls(parameters=tuple(Determined.from_dict(p) for p in data.get("parameters", ())),
                   combinations=tuple(Determined.from_dict(c)
                                      for c in data.get("combinations", ())))


def _figure(value: float, sigma: float) -> str:
    """``value ± sigma`` with two significant digits of the uncertainty."""
    if not (math.isfinite(sigma) and sigma > 0):
        return f"{value:.6g}"
    digits = max(0, 1 - int(math.floor(math.log10(sigma))))
    return f"{value:.{digits}f} ± {sigma:.{digits}f}"


def _combinations(model: GratingModel) -> dict[str, Callable[[GratingModel], float]]:
    centre = 0.5 * (model.n_pixels - 1)
    low, high = 0.0, float(model.n_pixels - 1)
    return {
        "central_wavelength_nm": lambda m: float(m.wavelength(centre)),
        "central_dispersion_nm_per_px": lambda m: float(m.dispersion(centre)),
        "dispersion_change_nm_per_px": lambda m: float(m.dispersion(high) - m.dispersion(low)),
    }


def _jacobian(model: GratingModel, names: Sequence[str], steps: np.ndarray,
              functions: Sequence[Callable[[GratingModel], float]]) -> np.ndarray:
    """Central-difference derivatives of each function with respect to each parameter."""
    jac = np.zeros((len(functions), len(names)))
    for j, (name, step) in enumerate(zip(names, steps)):
        value = model.parameter(name)
        up = model.with_parameters(**{name: value + step})
        down = model.with_parameters(**{name: value - step})
        for i, f in enumerate(functions):
            jac[i, j] = (f(up) - f(down)) / (2.0 * step)
    return jac


def what_data_determine(model: GratingModel, names: Sequence[str], covariance: np.ndarray,
                        prior_sigma: Mapping[str, float]) -> Determination:
    """Which quantities of a fit the lines determine and which the prior sets.

    Parameters
    ----------
    model : GratingModel
        The fitted model.
    names : sequence of str
        Varied parameters, in the order of ``covariance``.
    covariance : ndarray
        Posterior covariance of the varied parameters (as reported, i.e. scaled by the reduced
        chi-square when the residuals exceed their uncertainties).
    prior_sigma : mapping
        1-sigma prior width of each parameter that has a Gaussian prior; parameters without one
        (the distortion terms) are taken as unconstrained by the prior.

    Returns
    -------
    Determination
        Empty when there is no finite covariance.
    """
    names = tuple(names)
    cov = np.asarray(covariance, dtype=float)
    if not names or cov.shape != (len(names), len(names)) or not np.all(np.isfinite(cov)):
        return Determination(parameters=(), combinations=())
    errors = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    prior = np.array([float(prior_sigma.get(n, math.inf)) for n in names])
    parameters = tuple(
        Determined(name=n, value=model.parameter(n), sigma=float(e), prior_sigma=float(p))
        for n, e, p in zip(names, errors, prior) if not n.startswith("distortion_"))

    functions = _combinations(model)
    steps = np.where(errors > 0, 1e-3 * errors, 1e-9)
    jac = _jacobian(model, names, steps, list(functions.values()))
    posterior = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", jac, cov, jac), 0.0, None))
    finite = np.isfinite(prior)
    # the prior propagated through the model; unbounded as soon as a parameter without a prior
    # (a distortion term) moves the combination
    unbounded = np.any(np.abs(jac[:, ~finite]) > 0, axis=1)
    prior_var = (jac[:, finite] ** 2) @ (prior[finite] ** 2)
    combined = np.where(unbounded, math.inf, np.sqrt(prior_var))
    combinations = tuple(
        Determined(name=n, value=f(model), sigma=float(s), prior_sigma=float(p))
        for (n, f), s, p in zip(functions.items(), posterior, combined))
    return Determination(parameters=parameters, combinations=combinations)
