"""The parts of a :class:`~wavecal.solution.Solution`: its line table and typed records.

:func:`line_table` lists every detected peak with its identification and residuals (peaks
left unpaired by the fit are named, never fitted, when they sit at a listed line in twice the
order or at a line of a possible extra element); :func:`unidentified_lines` is the table of a
failed calibration. :func:`fit_statistics` and :func:`physical_parameters` turn a
:class:`~wavecal.refine.Refinement` into the records the solution carries.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .features import ResolvedLines
from .fit import FitResult
from .linelists import LineList
from .match import Identification, associate
from .model_setup import PriorBox
from .optics import GratingModel
from .refine import Refinement
from .constants import SPEED_OF_LIGHT_KMS
from .solution_records import FitStatistics, ParameterEstimate, PhysicalParameters

__all__ = ["line_table", "unidentified_lines", "fit_statistics", "physical_parameters"]


def _peak_columns(table: pd.DataFrame) -> dict[str, np.ndarray]:
    """The peak finder's columns of the line table."""
    return {"x": table["x"].to_numpy(float), "x_err": table["x_err"].to_numpy(float),
            "fwhm": table["fwhm"].to_numpy(float), "flux": table["flux"].to_numpy(float),
            "snr": table["snr"].to_numpy(float), "flags": table["flags"].to_numpy(int)}


def unidentified_lines(table: pd.DataFrame) -> pd.DataFrame:
    """The line table of a failed calibration: every detected peak, none identified."""
    return pd.DataFrame({
        **_peak_columns(table),
        "identification": "unidentified", "element": "", "line_wavelength": np.nan,
        "line_intensity": np.nan, "line_verified": False, "wavelength_fit": np.nan,
        "residual_px": np.nan, "residual_nm": np.nan, "residual_kms": np.nan, "sigma_px": np.nan,
    })


def line_table(table: pd.DataFrame, refined: Refinement, features: ResolvedLines,
               full_list: LineList, extra_list: LineList | None, fwhm: float) -> pd.DataFrame:
    """Every detected peak with its identification and residuals under the refined model.

    Parameters
    ----------
    table : pandas.DataFrame
        The detected peaks.
    refined : Refinement
        The confirmed fit (its pairs index ``table`` and ``features.lines``).
    features : ResolvedLines
        The listed features the fit paired peaks with.
    full_list : LineList
        The lamps' whole list (for second-order ghosts).
    extra_list : LineList or None
        Lines of possible extra elements (named, never fitted).
    fwhm : float
        Typical line width (pixels): the naming tolerance.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`wavecal.solution.LINE_COLUMNS`.
    """
    fit, lines, model = refined.fit, features.lines, refined.fit.model
    pairs_peak, pairs_line = refined.pairs.peak, refined.pairs.line
    out = pd.DataFrame(_peak_columns(table))
    x = out["x"].to_numpy(float)
    n = x.size
    ident = np.full(n, "unidentified", dtype=object)
    element = np.full(n, "", dtype=object)
    line_wl = np.full(n, np.nan)
    line_int = np.full(n, np.nan)
    verified = np.zeros(n, bool)
    ident[pairs_peak] = np.where(fit.used, "used",
                                 np.where(refined.unconfirmed, "unconfirmed", "rejected"))
    element[pairs_peak] = lines.element[pairs_line]
    line_wl[pairs_peak] = lines.wavelength_nm[pairs_line]
    line_int[pairs_peak] = lines.intensity[pairs_line]
    verified[pairs_peak] = lines.verified[pairs_line]

    def name_rest(label: str, rest_model: GratingModel, candidates: LineList) -> None:
        """Name still unidentified peaks that sit at a line of ``candidates`` under
        ``rest_model`` (never fitted, never evidence)."""
        rest = np.flatnonzero(ident == "unidentified")
        if not rest.size or not len(candidates):
            return
        found = associate(rest_model, x[rest], candidates.wavelength_nm, max(0.5, 0.3 * fwhm))
        idx = rest[found.peak]
        ident[idx] = label
        element[idx] = candidates.element[found.line]
        line_wl[idx] = candidates.wavelength_nm[found.line]
        line_int[idx] = candidates.intensity[found.line]
        verified[idx] = candidates.verified[found.line]

    # where a listed line would appear in twice the order, then a possible extra element's line
    name_rest("ghost", model.with_parameters(order=2 * model.order), full_list)
    if extra_list is not None:
        name_rest("extra", model, extra_list)
    fit_wl = model.wavelength(x)
    residual_px = np.full(n, np.nan)
    first_order = np.isin(ident, ["used", "rejected", "unconfirmed"])
    residual_px[first_order] = x[first_order] - model.pixel(line_wl[first_order])
    residual_nm = np.where(first_order, fit_wl - line_wl, np.nan)
    out["identification"] = ident
    out["element"] = element
    out["line_wavelength"] = line_wl
    out["line_intensity"] = line_int
    out["line_verified"] = verified
    out["wavelength_fit"] = fit_wl
    out["residual_px"] = residual_px
    out["residual_nm"] = residual_nm
    out["residual_kms"] = residual_nm / line_wl * SPEED_OF_LIGHT_KMS
    out["sigma_px"] = np.nan
    out.loc[pairs_peak, "sigma_px"] = fit.sigma_px
    return out


def fit_statistics(refined: Refinement, ident: Identification, box: PriorBox,
                   features: ResolvedLines) -> FitStatistics:
    """The figures of merit of a refined fit (RMS in three units, counts, significance)."""
    fit, model = refined.fit, refined.fit.model
    x, lam = refined.x, refined.wavelength_nm
    pairs_peak, pairs_line = refined.pairs.peak, refined.pairs.line
    used_lam = lam[pairs_line[fit.used]]
    offset_nm = model.wavelength(x[pairs_peak[fit.used]]) - used_lam
    weight = 1.0 / fit.sigma_px[fit.used] ** 2  # as in FitResult.rms_px
    runner = ident.runner_up
    unconfirmed = refined.unconfirmed
    blends = refined.pairs.crowded | features.lines.blend[pairs_line]
    return FitStatistics(
        rms_px=fit.rms_px, rms_nm=_weighted_rms(offset_nm, weight),
        rms_kms=_weighted_rms(offset_nm / used_lam * SPEED_OF_LIGHT_KMS, weight),
        reduced_chi2=fit.reduced_chi2, n_used=fit.n_used,
        n_rejected=int(np.count_nonzero(~fit.used & ~unconfirmed)),
        n_unconfirmed=int(np.count_nonzero(unconfirmed)),
        n_blends=int(np.count_nonzero(blends)), n_peaks=int(x.size),
        n_identified=int(len(pairs_peak)), distortion_degree=fit.distortion_degree,
        log10_chance=refined.log10_chance, log10_trials=ident.log10_trials,
        runner_up_log10_chance=runner.log10_chance if runner else math.nan,
        association_tolerance_px=refined.tolerance_px, effective_geometry=box.effective,
        max_sigma_px=refined.evidence.max_sigma_px, scatter_px=fit.scatter_px,
        leave_one_out_px=refined.evidence.leave_one_out_px)


def physical_parameters(fit: FitResult, box: PriorBox) -> PhysicalParameters:
    """The fitted parameters with their priors, covariance and correlation."""
    priors = box.as_dict()
    estimates = []
    for name, value, error in zip(fit.names, fit.values, fit.errors):
        nominal, width = priors.get(name, (math.nan, math.nan))
        estimates.append(ParameterEstimate(
            name=name, value=float(value), error=float(error), nominal=float(nominal),
            prior=float(width),
            shift_sigma=float((value - nominal) / width) if width == width else math.nan))
    return PhysicalParameters(estimates=tuple(estimates), correlation=fit.correlation,
                              covariance=fit.covariance)


def _weighted_rms(values: np.ndarray, weight: np.ndarray) -> float:
    return float(np.sqrt(np.sum(weight * values**2) / np.sum(weight))) if values.size else math.nan
