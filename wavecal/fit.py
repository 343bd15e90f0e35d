"""The lmfit model: physical parameters of the spectrograph fitted to identified lines.

Free parameters: grating angle, camera focal length, the pixel where the camera axis meets the
detector ("detector offset") and the detector tilt, each with a Gaussian prior centred on its
nominal value (width: the profile's prior half-width); the groove density is fixed unless asked
for. A distortion term (Legendre polynomial of degree 3 and up in pixel position; lower degrees are
already spanned by offset, focal length and tilt) is added with the degree that minimises the
Bayesian information criterion. Residuals are weighted by the peak-centre uncertainty combined with
the line-list wavelength uncertainty. Outliers are rejected iteratively with a robust (MAD) scale.
"""
from __future__ import annotations

from dataclasses import dataclass

import lmfit
import numpy as np
from astropy.stats import mad_std
from scipy import optimize

from .model_setup import PriorBox
from .optics import GratingModel

__all__ = ["FitResult", "fit_lines", "next_degree_model", "wavelength_sigma", "excess_scatter",
           "PHYSICAL_PARAMETERS"]

#: Physical parameters fitted, with their GratingModel attribute names.
PHYSICAL_PARAMETERS = ("grating_angle_deg", "focal_length_mm", "axis_pixel", "tilt_deg")

_DISTORTION_DEGREES = (0, 3, 4, 5)  # 0 means no distortion term
#: Rounds of (excess scatter, refit with it) at most: the first fit, weighted by the stated
#: uncertainties alone, follows the brightest lines and overstates the scatter.
_SCATTER_ITERATIONS = 5


@dataclass(frozen=True)
class FitResult:
    """Result of fitting the physical model to identified lines.

    Attributes
    ----------
    model : GratingModel
        Best-fit model.
    names : tuple of str
        Names of the varied parameters, in covariance order.
    values, errors : ndarray
        Best-fit values and 1-sigma uncertainties (covariance scaled by the reduced χ² when
        it exceeds 1, never shrunk below the formal errors).
    covariance, correlation : ndarray
        Of the varied parameters (NaN if the fit could not estimate them).
    used : ndarray of bool
        Which of the input pairs were kept (not rejected as outliers).
    residual_px : ndarray
        Observed minus model position for every input pair (pixels).
    normalized_residual : ndarray
        ``residual_px`` divided by its total uncertainty.
    chisqr, reduced_chi2, bic : float
        Of the data part, over kept pairs (priors excluded from ``reduced_chi2``).
    distortion_degree : int
        Highest Legendre degree of the distortion term, 0 for none.
    success : bool
    message : str
    leverage : ndarray
        Diagonal of the hat matrix for every pair: how much a line's own position sets the
        model there. A kept line's leave-one-out residual is ``residual_px / (1 - leverage)``.
    scatter_px : float
        Scatter added in quadrature to every line's uncertainty because the residuals exceeded
        what the stated uncertainties explain (:func:`excess_scatter`); 0 when they did not.
        ``normalized_residual`` and ``reduced_chi2`` include it.
    x, sigma_px : ndarray
        Position of every input pair and its total uncertainty in the fit (pixels: centre,
        list wavelength and ``scatter_px`` combined).
    unscaled_covariance : ndarray
        Parameter covariance before scaling by the reduced chi-square (priors included).
    """

    model: GratingModel
    names: tuple[str, ...]
    values: np.ndarray
    errors: np.ndarray
    covariance: np.ndarray
    correlation: np.ndarray
    used: np.ndarray
    residual_px: np.ndarray
    normalized_residual: np.ndarray
    chisqr: float
    reduced_chi2: float
    bic: float
    distortion_degree: int
    success: bool
    message: str
    leverage: np.ndarray
    scatter_px: float
    x: np.ndarray
    sigma_px: np.ndarray
    unscaled_covariance: np.ndarray

    @property
    def n_used(self) -> int:
        """Number of lines in the final fit."""
        return int(np.count_nonzero(self.used))

    @property
    def rms_px(self) -> float:
        """RMS of the kept residuals (pixels), each weighted by its inverse variance, so that a
        line kept with a widened uncertainty (a possible blend) counts as little here as in
        the fit."""
        r = self.residual_px[self.used]
        if not r.size:
            return float("nan")
        w = 1.0 / self.sigma_px[self.used] ** 2
        return float(np.sqrt(np.sum(w * r**2) / np.sum(w)))

    @property
    def leave_one_out_px(self) -> np.ndarray:
        """Residual of each kept line against the fit without it (pixels; NaN if not kept).

        The usual linear approximation ``r / (1 - h)`` (h the leverage); it flags a line whose
        identification the other lines do not confirm.
        """
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = self.residual_px / np.clip(1.0 - self.leverage, 1e-6, None)
        return np.where(self.used, loo, np.nan)

    def leave_pair_out_shift_px(self, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """How far the solution moves on ``grid`` when each pair of neighbouring kept lines is
        left out together (pixels).

        Two wrong lines side by side mask each other when one is left out at a time: each
        confirms the other, most of all at the end of the range where a distortion term bends
        the model to both. Leaving both out is the Woodbury generalisation of
        :meth:`leave_one_out_shift_px`: ``dθ = C A_Sᵀ (I − H_SS)⁻¹ e_S`` for the pair ``S``.

        Returns
        -------
        shift : ndarray
            Largest |change| of the model over ``grid`` for each pair (empty for fewer than three
            kept lines or without a covariance).
        pairs : ndarray of int, shape (n, 2)
            Indices of each pair's lines in :attr:`x`.
        """
        cov = self.unscaled_covariance
        kept = np.flatnonzero(self.used)
        if kept.size < 3 or not self.names or not np.all(np.isfinite(cov)):
            return np.zeros(0), np.zeros((0, 2), int)
        kept = kept[np.argsort(self.x[kept])]
        pairs = np.stack([kept[:-1], kept[1:]], axis=1)
        steps = 1e-3 * np.asarray(self.errors)
        grid = np.asarray(grid, float)
        jac_grid = self.model.wavelength_derivatives(self.names, grid, steps) \
            / np.abs(self.model.dispersion(grid))
        rows = (self.model.wavelength_derivatives(self.names, self.x, steps)
                / (np.abs(self.model.dispersion(self.x)) * self.sigma_px)).T
        a = rows[pairs]  # (pairs, 2, parameters)
        hat = a @ cov @ a.transpose(0, 2, 1)  # (pairs, 2, 2)
        inner = np.eye(2)[None] - hat
        # a pair the others cannot predict at all has a singular (I - H_SS): its move is unbounded
        det = np.linalg.det(inner)
        safe = np.where(np.abs(det)[:, None, None] > 1e-12, inner, np.eye(2)[None])
        weights = np.linalg.solve(safe, self.normalized_residual[pairs][..., None])[..., 0]
        delta = np.einsum("pk,pkj,ji->pi", weights, a, cov)  # (pairs, parameters)
        shift = np.abs(delta @ jac_grid).max(axis=1)
        return np.where(np.abs(det) > 1e-12, shift, np.inf), pairs

    def leave_one_out_shift_px(self, grid: np.ndarray) -> np.ndarray:
        """How far the solution moves on ``grid`` when each kept line is left out (pixels).

        For every kept line, the largest |change| of the model over ``grid`` after refitting
        without it, by the exact leave-one-out downdate of the linearised least-squares
        problem (the Sherman-Morrison formula: dθ = C aᵢ eᵢ / (1 − hᵢ), with aᵢ the line's row
        of the weighted Jacobian, eᵢ its normalised residual and hᵢ its leverage). NaN for
        lines not kept, or without a covariance.
        """
        out = np.full(self.x.size, np.nan)
        cov = self.unscaled_covariance
        if not self.names or not np.all(np.isfinite(cov)) or not np.any(self.used):
            return out
        steps = 1e-3 * np.asarray(self.errors)
        grid = np.asarray(grid, float)
        jac_grid = self.model.wavelength_derivatives(self.names, grid, steps) \
            / np.abs(self.model.dispersion(grid))
        rows = (self.model.wavelength_derivatives(self.names, self.x, steps)
                / (np.abs(self.model.dispersion(self.x)) * self.sigma_px)).T
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = self.normalized_residual / np.clip(1.0 - self.leverage, 1e-6, None)
        delta = (rows @ cov) * factor[:, None]  # (pairs, parameters)
        shift = np.abs(delta @ jac_grid).max(axis=1)
        return np.where(self.used, shift, np.nan)


def _model_from(params: lmfit.Parameters, base: GratingModel, degree: int) -> GratingModel:
    changes = {name: params[name].value for name in PHYSICAL_PARAMETERS}
    if "grooves_per_mm" in params:
        changes["grooves_per_mm"] = params["grooves_per_mm"].value
    changes["distortion"] = (tuple([0.0, 0.0, 0.0] + [params[f"distortion_{k}"].value
                                                      for k in range(3, degree + 1)])
                             if degree else ())
    return base.with_parameters(**changes)


def _make_params(start: GratingModel, box: PriorBox, degree: int, free_grooves: bool) -> lmfit.Parameters:
    params = lmfit.Parameters()
    for name in PHYSICAL_PARAMETERS:
        params.add(name, value=float(getattr(start, name)))
    if free_grooves:
        params.add("grooves_per_mm", value=start.grooves_per_mm)
    current = list(start.distortion) + [0.0] * 6
    for k in range(3, degree + 1):
        params.add(f"distortion_{k}", value=float(current[k]))
    return params


def _single_fit(start: GratingModel, box: PriorBox, x, lam, sigma_px, degree: int,
                free_grooves: bool, grooves_prior: tuple[float, float] | None):
    priors = box.as_dict()
    disp = np.abs(start.dispersion(x))

    def residual(params):
        model = _model_from(params, start, degree)
        data = (model.wavelength(x) - lam) / (disp * sigma_px)
        prior = [(params[n].value - priors[n][0]) / priors[n][1] for n in PHYSICAL_PARAMETERS]
        if grooves_prior is not None:
            prior.append((params["grooves_per_mm"].value - grooves_prior[0]) / grooves_prior[1])
        return np.r_[data, prior]

    params = _make_params(start, box, degree, free_grooves)
    minimizer = lmfit.Minimizer(residual, params, scale_covar=False, nan_policy="raise")
    return minimizer.leastsq()


def fit_lines(start: GratingModel, box: PriorBox, x: np.ndarray, x_err: np.ndarray,
              wavelength_nm: np.ndarray, wavelength_err_nm: np.ndarray, *,
              free_grooves: bool = False, grooves_prior_fraction: float = 0.01,
              fit_mask: np.ndarray | None = None, clip: float = 4.0,
              max_distortion_degree: int = 5) -> FitResult:
    """Fit the physical model to identified lines.

    Parameters
    ----------
    start : GratingModel
        Starting model (e.g. from the identification step).
    box : PriorBox
        Priors on the physical parameters.
    x, x_err : ndarray
        Peak centres and their 1-sigma uncertainties (pixels).
    wavelength_nm, wavelength_err_nm : ndarray
        Listed wavelengths of the identified lines and their uncertainties.
    free_grooves : bool
        Also fit the groove density (with a prior of ``grooves_prior_fraction``).
    fit_mask : ndarray of bool, optional
        Pairs allowed into the fit (e.g. excluding blends); others get residuals only.
    clip : float
        Outlier threshold in robust standard deviations.
    max_distortion_degree : int
        Highest distortion degree tried (0 disables the term).

    Returns
    -------
    FitResult
    """
    x = np.asarray(x, float)
    lam = np.asarray(wavelength_nm, float)
    disp = np.abs(start.dispersion(x))
    sigma_px = np.hypot(np.asarray(x_err, float), np.asarray(wavelength_err_nm, float) / disp)
    allowed = np.ones(x.size, bool) if fit_mask is None else np.asarray(fit_mask, bool).copy()
    grooves_prior = (start.grooves_per_mm, start.grooves_per_mm * grooves_prior_fraction) \
        if free_grooves else None
    n_base = len(PHYSICAL_PARAMETERS) + int(free_grooves)

    floor = n_base + 1  # clipping never leaves fewer lines than this: a fit on nothing is no fit

    def run(model, degree, keep):
        result = _single_fit(model, box, x[keep], lam[keep], sigma_px[keep], degree,
                             free_grooves, grooves_prior)
        return result, _model_from(result.params, model, degree)

    def clip_pass(model, degree, keep):
        for _ in range(6):
            if np.count_nonzero(keep) < n_base + degree + 1:
                break
            result, model = run(model, degree, keep)
            norm = (x - model.pixel(lam)) / sigma_px
            scale = max(float(mad_std(norm[keep])), 1.0)
            new_keep = allowed & (np.abs(norm) <= clip * scale)
            if np.array_equal(new_keep, keep) or np.count_nonzero(new_keep) < floor:
                break
            keep = new_keep
        return model, keep

    degrees = [d for d in _DISTORTION_DEGREES if d <= max_distortion_degree]
    keep = allowed.copy()
    mid_degree = 3 if 3 in degrees and np.count_nonzero(keep) >= n_base + 3 + 4 else 0
    stated = sigma_px
    model, keep = clip_pass(start, mid_degree, keep)
    scatter = 0.0
    for _ in range(_SCATTER_ITERATIONS):  # the scatter and the fit it weights, to agreement
        new = excess_scatter((x - model.pixel(lam))[keep], stated[keep],
                             n_base + max(mid_degree - 2, 0))
        converged = abs(new - scatter) <= 0.05 * max(new, 1e-3)
        scatter = new
        sigma_px = np.hypot(stated, scatter)
        if converged:
            break
        model, keep = clip_pass(model, mid_degree, keep)

    best = None
    for degree in degrees:
        n_par = n_base + max(degree - 2, 0)
        if np.count_nonzero(keep) < n_par + 3:
            continue
        result, fitted = run(model, degree, keep)
        n_data = np.count_nonzero(keep)
        chisqr = float(np.sum(result.residual[:n_data] ** 2))
        bic = chisqr + n_par * np.log(n_data)
        if best is None or bic < best[0] - 2.0:  # a more complex model must earn its place
            best = (bic, degree)
    degree = best[1] if best else 0
    model, keep = clip_pass(model.with_parameters(distortion=()) if degree == 0 else model,
                            degree, keep)
    result, model = run(model, degree, keep)
    return _summarise(result, model, x, lam, sigma_px, keep, degree, n_base, scatter)


def next_degree_model(fit: FitResult, box: PriorBox, wavelength_nm: np.ndarray, *,
                      free_grooves: bool = False,
                      grooves_prior_fraction: float = 0.01) -> GratingModel | None:
    """The model refitted to the same lines with the camera distortion's next degree.

    The information criterion picks the simplest distortion the residuals ask for, and the
    covariance of that fit is conditional on the choice: where lines are sparse (a gap, the
    ends of the range) a distortion the residuals cannot detect still moves the solution by
    more than that covariance says. How far the solution moves when the distortion gains its
    next term is the measure of that model uncertainty (the model-selection counterpart of
    leaving one line out).

    Parameters
    ----------
    fit : FitResult
        The selected fit; its kept lines and their total uncertainties are refitted.
    box : PriorBox
        The same priors.
    wavelength_nm : ndarray
        Listed wavelength of each of ``fit``'s input pairs.
    free_grooves, grooves_prior_fraction
        As for :func:`fit_lines`.

    Returns
    -------
    GratingModel or None
        None when the selected degree is the highest tried, or the kept lines are fewer than
        the parameters of the larger model.
    """
    higher = [d for d in _DISTORTION_DEGREES if d > fit.distortion_degree]
    keep = fit.used
    if not higher or np.count_nonzero(keep) < len(fit.names) + 1:
        return None
    grooves_prior = ((fit.model.grooves_per_mm, fit.model.grooves_per_mm * grooves_prior_fraction)
                     if free_grooves else None)
    result = _single_fit(fit.model, box, fit.x[keep], np.asarray(wavelength_nm, float)[keep],
                         fit.sigma_px[keep], higher[0], free_grooves, grooves_prior)
    return _model_from(result.params, fit.model, higher[0])


def excess_scatter(residual_px: np.ndarray, sigma_px: np.ndarray, n_parameters: int) -> float:
    """Scatter (pixels) to add in quadrature to every line's uncertainty so that the reduced
    chi-square of ``residual_px`` is one; 0 when the stated uncertainties already explain it.

    The maximum-likelihood "jitter" of common practice in astronomy: it stands for what the
    centre uncertainties do not contain (unresolved companions, profile asymmetry, a list
    wavelength that differs slightly in the lamp). Without it the brightest lines, whose
    centres are known to a few thousandths of a pixel, dominate the fit and are the first
    rejected when the model or the list is imperfect at that level.
    """
    r = np.asarray(residual_px, float)
    s = np.asarray(sigma_px, float)
    dof = r.size - n_parameters
    if dof < 1 or np.sum((r / s) ** 2) <= dof:
        return 0.0

    def excess(jitter: float) -> float:
        return float(np.sum(r**2 / (s**2 + jitter**2))) - dof

    # at jitter j the sum is at most sum(r²) / j², which reaches dof at j = sqrt(sum(r²) / dof)
    high = float(np.sqrt(np.sum(r**2) / dof)) * 1.01 + 1e-12
    return float(optimize.brentq(excess, 0.0, high, xtol=1e-6))


def _summarise(result, model, x, lam, sigma_px, keep, degree, n_base, scatter) -> FitResult:
    names = tuple(result.var_names)
    values = np.array([result.params[n].value for n in names])
    n_data = int(np.count_nonzero(keep))
    chisqr = float(np.sum(result.residual[:n_data] ** 2))
    n_par = n_base + max(degree - 2, 0)
    dof = max(n_data - n_par, 1)
    reduced_chi2 = chisqr / dof
    if result.covar is not None and np.all(np.isfinite(result.covar)):
        cov = np.array(result.covar) * max(reduced_chi2, 1.0)
        errors = np.sqrt(np.clip(np.diag(cov), 0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.outer(errors, errors)
    else:
        cov = np.full((len(names), len(names)), np.nan)
        errors = np.full(len(names), np.nan)
        corr = cov.copy()
    residual = x - model.pixel(lam)
    bic = chisqr + n_par * np.log(max(n_data, 1))
    leverage = _leverage(model, names, result.covar, x, sigma_px, errors)
    return FitResult(model=model, names=names, values=values, errors=errors, covariance=cov,
                     correlation=corr, used=keep, residual_px=residual,
                     normalized_residual=residual / sigma_px, chisqr=chisqr,
                     reduced_chi2=reduced_chi2, bic=float(bic), distortion_degree=degree, success=bool(result.success),
                     message=str(result.message), leverage=leverage, scatter_px=scatter,
                     x=x, sigma_px=sigma_px, unscaled_covariance=_unscaled(result.covar, names))


def _unscaled(covar, names) -> np.ndarray:
    if covar is not None and np.all(np.isfinite(covar)):
        return np.array(covar, dtype=float)
    return np.full((len(names), len(names)), np.nan)


def wavelength_sigma(model: GratingModel, names, covariance, x) -> np.ndarray:
    """1-sigma uncertainty (nm) of ``model.wavelength(x)`` propagated from the covariance of the
    named parameters (linear propagation, J C Jᵀ)."""
    x = np.asarray(x, dtype=float)
    covariance = np.asarray(covariance, dtype=float)
    if not names or not np.all(np.isfinite(covariance)):
        return np.full(x.shape, np.nan)
    jac = model.wavelength_derivatives(names, x, 1e-3 * np.sqrt(np.clip(np.diag(covariance), 0, None)))
    return np.sqrt(np.clip(np.einsum("i...,ij,j...->...", jac, covariance, jac), 0, None))


def _leverage(model: GratingModel, names, covar, x, sigma_px, errors) -> np.ndarray:
    """Diagonal of the hat matrix, J C Jᵀ, for every pair (NaN without a covariance).

    J holds the derivatives of the normalised residuals with respect to the varied parameters
    and C their unscaled covariance (priors included), so a line that no other line constrains
    (say, alone beyond a gap) has a leverage near 1.
    """
    if covar is None or not np.all(np.isfinite(covar)):
        return np.full(x.size, np.nan)
    scale = np.abs(model.dispersion(x)) * sigma_px
    jac = (model.wavelength_derivatives(names, x, 1e-3 * np.asarray(errors)) / scale).T
    return np.einsum("ij,jk,ik->i", jac, np.asarray(covar), jac)
