"""The typed records a :class:`~wavecal.solution.Solution` is built from, and their JSON form.

:class:`FitStatistics` holds the figures of merit of a fit and its identification;
:class:`PhysicalParameters` the fitted physical parameters (:class:`ParameterEstimate` each)
with their covariance and correlation. Both are frozen. Each gives its entries of a solution
file (:meth:`FitStatistics.to_dict`, :meth:`PhysicalParameters.to_dict`: plain Python and
numpy values, made JSON-safe by the solution) and reads them back, including the keys of files
written by earlier versions (``redchi``, now ``reduced_chi2``).
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["FitStatistics", "ParameterEstimate", "PhysicalParameters"]

#: Statistics keys of files written by earlier versions, and their present names.
_OLDER_STATISTICS_KEYS = {"redchi": "reduced_chi2"}


def _float(value: Any) -> float:
    """A float from a JSON entry (null -> NaN)."""
    return math.nan if value is None else float(value)


@dataclass(frozen=True)
class FitStatistics:
    """Figures of merit of a solution: residuals, line counts, significance, stability.

    A failed solution has only ``n_peaks`` (and ``n_used`` 0); its other figures keep their
    "not measured" defaults (NaN, 0, False).

    Attributes
    ----------
    rms_px, rms_nm, rms_kms : float
        RMS of the used lines' residuals, each weighted by its inverse variance.
    reduced_chi2 : float
        Reduced chi-square of the fit (:attr:`wavecal.fit.FitResult.reduced_chi2`).
    n_used, n_rejected, n_unconfirmed, n_blends, n_peaks, n_identified : int
        Lines used, rejected as outliers, dropped as unconfirmed, crowded or merged, peaks
        detected, peaks paired with a listed line.
    distortion_degree : int
        Highest Legendre degree of the distortion term, 0 for none.
    log10_chance, log10_trials : float
        Chance probability of the identification and the hypotheses searched.
    runner_up_log10_chance : float
        Chance probability of the best rival (NaN: none).
    association_tolerance_px : float
        Tolerance of the association the final fit was made on.
    effective_geometry : bool
        The geometry is unknown: the parameters describe the curve, not the hardware.
    max_sigma_px : float
        Largest propagated 1-sigma uncertainty between the outermost lines used.
    scatter_px : float
        Excess scatter added to every line's uncertainty.
    leave_one_out_px : float
        Largest move of the solution when one line is left out.
    """

    rms_px: float = math.nan
    rms_nm: float = math.nan
    rms_kms: float = math.nan
    reduced_chi2: float = math.nan
    n_used: int = 0
    n_rejected: int = 0
    n_unconfirmed: int = 0
    n_blends: int = 0
    n_peaks: int = 0
    n_identified: int = 0
    distortion_degree: int = 0
    log10_chance: float = math.nan
    log10_trials: float = math.nan
    runner_up_log10_chance: float = math.nan
    association_tolerance_px: float = math.nan
    effective_geometry: bool = False
    max_sigma_px: float = math.nan
    scatter_px: float = math.nan
    leave_one_out_px: float = math.nan

    def to_dict(self) -> dict[str, Any]:
        """The entries, in field order."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> FitStatistics:
        """Read :meth:`to_dict`'s entries, or those of a file written by an earlier version
        (``redchi``; a failed solution's ``n_peaks`` and ``n_used`` alone). Unknown keys are
        ignored.

        Raises
        ------
        TypeError, ValueError
            If an entry is not of its field's type.
        """
        data = {_OLDER_STATISTICS_KEYS.get(k, k): v for k, v in data.items()}
        values: dict[str, Any] = {}
        for f in dataclasses.fields(cls):
            if f.name not in data:
                continue
            value = data[f.name]
            if f.type == "int":
                if value is None or isinstance(value, bool) or int(value) != value:
                    msg = f"statistics {f.name} must be a whole number, not {value!r}"
                    raise ValueError(msg)
                values[f.name] = int(value)
            elif f.type == "bool":
                if not isinstance(value, bool):
                    msg = f"statistics {f.name} must be true or false, not {value!r}"
                    raise ValueError(msg)
                values[f.name] = value
            else:
                values[f.name] = _float(value)
        return cls(**values)


@dataclass(frozen=True)
class ParameterEstimate:
    """One fitted parameter.

    Attributes
    ----------
    name : str
        Name of the :class:`~wavecal.optics.GratingModel` attribute (or ``distortion_k``).
    value, error : float
        Best-fit value and 1-sigma uncertainty.
    nominal, prior : float
        Nominal value and prior half-width (NaN for a parameter without a prior).
    shift_sigma : float
        ``(value - nominal) / prior`` (NaN without a prior).
    """

    name: str
    value: float
    error: float
    nominal: float = math.nan
    prior: float = math.nan
    shift_sigma: float = math.nan

    def to_dict(self) -> dict[str, Any]:
        """The entries: name, value, error, nominal, prior, shift_sigma."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ParameterEstimate:
        """Read :meth:`to_dict`'s entries (null -> NaN)."""
        return cls(name=str(data["name"]), value=_float(data["value"]), error=_float(data["error"]),
                   nominal=_float(data.get("nominal")), prior=_float(data.get("prior")),
                   shift_sigma=_float(data.get("shift_sigma")))


@dataclass(frozen=True)
class PhysicalParameters:
    """The fitted parameters with their covariance and correlation (same order).

    Attributes
    ----------
    estimates : tuple of ParameterEstimate
        The varied parameters, in covariance order.
    correlation : ndarray
        Correlation matrix (empty without parameters).
    covariance : ndarray or None
        Covariance matrix (None when not known).
    """

    estimates: tuple[ParameterEstimate, ...] = ()
    correlation: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    covariance: np.ndarray | None = None

    @property
    def names(self) -> tuple[str, ...]:
        """Names of the varied parameters, in covariance order."""
        return tuple(e.name for e in self.estimates)

    def to_dict(self) -> dict[str, Any]:
        """The ``parameters``, ``correlation`` and ``covariance`` entries of a solution file."""
        return {"parameters": [e.to_dict() for e in self.estimates],
                "correlation": {"names": list(self.names), "matrix": self.correlation},
                "covariance": self.covariance}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> PhysicalParameters:
        """Read the entries :meth:`to_dict` writes (all optional: a failed solution has none).

        Raises
        ------
        KeyError, TypeError, ValueError
            If a parameter lacks a name, value or error, or the correlation names are not the
            parameters'.
        """
        estimates = tuple(ParameterEstimate.from_dict(p) for p in data.get("parameters") or ())
        corr = data.get("correlation") or {}
        names = tuple(corr.get("names", ()))
        if names != tuple(e.name for e in estimates):
            msg = f"correlation names {list(names)} are not the parameters' names"
            raise ValueError(msg)
        cov = data.get("covariance")
        return cls(estimates=estimates,
                   correlation=np.array(corr.get("matrix", []), dtype=float),
                   covariance=None if cov is None else np.array(cov, dtype=float))
