"""Batched weighted least-squares fits of small groups of pixel-integrated Gaussian lines.

Every unit (a row of ``units``: the indices of G lines fitted jointly) has G centres, G fluxes,
G widths (``ln sigma``, each bounded around the line's expected width) and one constant
background; fluxes are bounded below by zero. All units of the same G are solved at once by a vectorised Levenberg–Marquardt
iteration. Lines outside a unit contribute their current model as a fixed offset. A width may
carry a Gaussian prior (used for saturated lines, whose cores are not fitted).

The same fitter serves the peak finder (:mod:`wavecal.peaks`, :func:`fit_units` on a spectrum)
and the tracing of lines along the slit (:mod:`wavecal._trace_bands`, :func:`fit_windows` on the
line profiles of bands of rows, whose variance is given rather than re-evaluated on the model).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr

__all__ = ["FWHM_PER_SIGMA", "FitState", "FitData", "fit_units", "fit_windows", "profile"]

#: FWHM of a Gaussian in units of its standard deviation.
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)
#: Neighbours on each side of a unit whose current model is subtracted as a fixed offset.
_NEIGHBOURS = 3


@dataclass(frozen=True)
class FitData:
    """The spectrum as the fitter sees it (index units)."""

    flux: np.ndarray
    #: The part of the variance not proportional to the signal (read noise etc.).
    read_var: np.ndarray
    #: Pixels the fit may use (usable, not saturated nor next to a saturated pixel).
    fit_ok: np.ndarray
    #: Smallest variance allowed.
    floor: float
    #: The variance has a part proportional to the signal, re-evaluated on the model at every
    #: iteration; when False, ``read_var`` is the whole variance.
    poisson: bool = True


@dataclass
class FitState:
    """Per-line parameters and results, updated in place by :func:`fit_units`."""

    x0: np.ndarray
    flux: np.ndarray
    sigma: np.ndarray
    background: np.ndarray
    x_err: np.ndarray
    flux_err: np.ndarray
    sigma_err: np.ndarray
    redchi: np.ndarray
    ok: np.ndarray
    #: Bounds of sigma.
    sigma_lo: np.ndarray
    sigma_hi: np.ndarray
    #: Gaussian prior on ln sigma: centre and weight (1 / variance; 0 = none).
    prior_ln_sigma: np.ndarray
    prior_weight: np.ndarray


def profile(edges: np.ndarray, x0: np.ndarray, sigma: np.ndarray):
    """Pixel-integrated unit Gaussian and the pieces of its derivatives.

    ``edges`` (..., L + 1, 1) are the pixel boundaries of L consecutive pixels, ``x0`` (..., 1, G)
    the centres, ``sigma`` broadcastable to them. Returns, each of shape (..., L, G): ``e`` (the
    integral over each pixel), ``dx`` (``sigma`` times its derivative in ``x0``) and ``ds`` (its
    derivative in ``ln sigma``).
    """
    z = (edges - x0) / sigma
    cdf = ndtr(z)
    pdf = np.exp(-0.5 * z * z) * _INV_SQRT_2PI
    zpdf = z * pdf
    return (cdf[..., 1:, :] - cdf[..., :-1, :], pdf[..., :-1, :] - pdf[..., 1:, :],
            zpdf[..., :-1, :] - zpdf[..., 1:, :])


def _others(st: FitState, units: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Model of the nearest lines outside each unit (:data:`_NEIGHBOURS` on each side)."""
    order = np.argsort(st.x0)
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    first = rank[units].min(axis=1)
    last = rank[units].max(axis=1)
    offsets = np.concatenate((np.arange(-_NEIGHBOURS, 0), np.arange(1, _NEIGHBOURS + 1)))
    nb_rank = np.where(offsets < 0, first[:, None] + offsets, last[:, None] + offsets)
    nb = order[np.clip(nb_rank, 0, order.size - 1)]
    valid = (nb_rank >= 0) & (nb_rank < order.size) & ~np.any(nb[:, :, None] == units[:, None, :], axis=2)
    valid &= np.isfinite(st.x0[nb]) & np.isfinite(st.flux[nb]) & np.isfinite(st.sigma[nb])
    e, _, _ = profile(edges[:, :, None], np.where(valid, st.x0[nb], 0.0)[:, None, :],
                      np.where(valid, st.sigma[nb], 1.0)[:, None, :])
    return np.sum(e * np.where(valid, st.flux[nb], 0.0)[:, None, :], axis=2)


def fit_units(data: FitData, base: np.ndarray, st: FitState, units: np.ndarray, half: np.ndarray, *,
              owned: np.ndarray | None = None, max_iter: int = 50) -> None:
    """Fit every unit (row of ``units``) at once; write the results into ``st``.

    A row holds the indices of its lines, padded with -1 (padding slots are held at zero flux).
    Only the lines marked in ``owned`` (default: all) are written back; the others are fitted
    to let the owned ones settle next to them.
    ``half`` (one per unit) is the number of pixels fitted beyond the outermost centres. The
    variance is the noise model re-evaluated on the model at every iteration, ``max(model +
    offset, 0) + read_var`` (``read_var`` alone when ``data.poisson`` is False); at convergence
    this is the Poisson maximum-likelihood estimate.
    Uncertainties come from the inverse of the weighted normal matrix (plus the priors) at the
    solution, i.e. from the noise model alone.
    """
    n_units, g = units.shape
    n = data.flux.size
    real = units >= 0
    lines = np.where(real, units, units[:, :1])
    x_lo = np.floor(st.x0[lines].min(axis=1)).astype(int) - half
    x_hi = np.ceil(st.x0[lines].max(axis=1)).astype(int) + half
    length = int((x_hi - x_lo).max()) + 1
    pix = x_lo[:, None] + np.arange(length)[None, :]
    safe = np.clip(pix, 0, n - 1)
    mask = (pix >= 0) & (pix < n) & (pix <= x_hi[:, None]) & data.fit_ok[safe]
    edges = x_lo[:, None] - 0.5 + np.arange(length + 1)[None, :]
    offset = base[safe] + _others(st, lines, edges)
    y = data.flux[safe] - offset
    read_var = data.read_var[safe]
    edges3 = edges[:, :, None]

    n_par = 3 * g + 1
    s_sl = slice(2 * g, 3 * g)
    i_b = 3 * g
    theta = np.concatenate((st.x0[lines], np.where(real, st.flux[lines], 0.0), np.log(st.sigma[lines]),
                            st.background[lines].mean(axis=1, keepdims=True)), axis=1)
    lower = np.full((n_units, n_par), -np.inf)
    upper = np.full((n_units, n_par), np.inf)
    lower[:, :g], upper[:, :g] = x_lo[:, None], x_hi[:, None]
    lower[:, g:2 * g] = 0.0  # emission lines: the flux is not negative
    lower[:, s_sl], upper[:, s_sl] = np.log(st.sigma_lo[lines]), np.log(st.sigma_hi[lines])
    theta = np.clip(theta, lower, upper)
    prior_mu = st.prior_ln_sigma[lines]
    prior_w = np.where(real, st.prior_weight[lines], 0.0)
    n_valid = mask.sum(axis=1)
    free = np.concatenate((real, real, real, np.ones((n_units, 1), bool)), axis=1)
    n_free = free.sum(axis=1)
    too_few = n_valid < n_free + 2
    free &= ~too_few[:, None]
    fixed_diag = (~free)[:, :, None] * np.eye(n_par)
    prior_diag = np.zeros((n_units, n_par))
    prior_diag[:, s_sl] = prior_w
    dof = np.maximum(n_valid - n_free, 1)

    def evaluate(a: np.ndarray, th: np.ndarray, with_jacobian: bool):
        """Model (and Jacobian) of units ``a`` at parameters ``th``."""
        sig = np.exp(th[:, None, s_sl])
        e, dx, ds = profile(edges3[a], th[:, None, :g], sig)
        amp = th[:, None, g:2 * g]
        mu = np.sum(e * amp, axis=2) + th[:, i_b][:, None]
        if not with_jacobian:
            return mu, None
        jac = np.empty((a.size, length, n_par))
        jac[:, :, :g] = amp * dx / sig
        jac[:, :, g:2 * g] = e
        jac[:, :, s_sl] = amp * ds
        jac[:, :, i_b] = 1.0
        return mu, jac * free[a, None, :]

    def weights(a: np.ndarray, mu: np.ndarray) -> np.ndarray:
        var = (np.maximum(mu + offset[a], 0.0) + read_var[a]) if data.poisson else read_var[a]
        return np.where(mask[a], 1.0 / np.maximum(var, data.floor), 0.0)

    def prior_chi2(a: np.ndarray, th: np.ndarray) -> np.ndarray:
        return np.sum(prior_w[a] * (th[:, s_sl] - prior_mu[a]) ** 2, axis=1)

    eye = np.eye(n_par)
    lam = np.full(n_units, 1e-3)
    done = too_few.copy()
    for _ in range(max_iter):
        a = np.flatnonzero(~done)  # only the units still iterating
        if a.size == 0:
            break
        th = theta[a]
        mu, jac = evaluate(a, th, True)
        w = weights(a, mu)
        resid = y[a] - mu
        chi2 = np.sum(w * resid * resid, axis=1) + prior_chi2(a, th)
        jw = jac * w[:, :, None]
        normal = np.einsum("ulp,ulq->upq", jw, jac) + prior_diag[a, :, None] * eye
        grad = np.einsum("ulp,ul->up", jw, resid)
        grad[:, s_sl] += prior_w[a] * (prior_mu[a] - th[:, s_sl])
        # parameters held at a bound they are pushed against are fixed for this iteration
        held = ((th <= lower[a]) & (grad < 0)) | ((th >= upper[a]) & (grad > 0))
        keep = ~held
        normal = normal * keep[:, :, None] * keep[:, None, :] + held[:, :, None] * eye
        grad = grad * keep
        diag = np.maximum(np.einsum("upp->up", normal), 1e-300)
        damped = normal + (lam[a, None] * diag)[:, :, None] * eye + fixed_diag[a]
        step = np.linalg.solve(damped, grad[:, :, None])[:, :, 0]
        sig = np.exp(th[:, s_sl])
        step[:, :g] = np.clip(step[:, :g], -sig, sig)
        step[:, s_sl] = np.clip(step[:, s_sl], -0.5, 0.5)
        trial = np.clip(th + step, lower[a], upper[a])
        change = trial - th
        resid_t = y[a] - evaluate(a, trial, False)[0]
        actual = chi2 - np.sum(w * resid_t * resid_t, axis=1) - prior_chi2(a, trial)
        predicted = 2.0 * np.sum(change * grad, axis=1) - np.einsum("up,upq,uq->u", change, normal, change)
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            gain = np.where(predicted > 0, actual / np.maximum(predicted, 1e-300), -np.inf)
        better = actual >= -1e-12 * chi2
        theta[a] = np.where(better[:, None], trial, th)
        # converged: the step moves the parameters by < 1 % of their uncertainty (chi-square
        # change < 1e-4, in units of the reduced chi-square when the model misfits the data:
        # the uncertainties scale with it), or by < 1e-5 pixel
        small = np.all(np.abs(change[:, :g]) < 1e-5, axis=1) & np.all(np.abs(change[:, s_sl]) < 1e-5, axis=1)
        tolerance = 1e-4 * np.maximum(chi2 / dof[a], 1.0)
        done[a] = small | (better & (predicted < tolerance)) | (lam[a] > 1e10)
        # Marquardt-style damping control from the ratio of actual to predicted reduction
        factor = np.where(gain > 0.75, 1.0 / 3.0, np.where(gain < 0.25, 2.0, 1.0))
        lam[a] = np.where(better, np.maximum(lam[a] * factor, 1e-7), lam[a] * 4.0)

    every = np.arange(n_units)
    mu, jac = evaluate(every, theta, True)
    w = weights(every, mu)
    chi2 = np.sum(w * (y - mu) ** 2, axis=1)
    normal = np.einsum("ulp,ulq->upq", jac * w[:, :, None], jac) + fixed_diag + prior_diag[:, :, None] * eye
    scale = np.sqrt(np.maximum(np.einsum("upp->up", normal), 1e-300))
    scaled = normal / (scale[:, :, None] * scale[:, None, :])
    invertible = np.linalg.cond(scaled) < 1e12
    cov = np.full_like(normal, np.nan)
    cov[invertible] = np.linalg.inv(scaled[invertible]) / (scale[invertible][:, :, None]
                                                            * scale[invertible][:, None, :])
    var = np.einsum("upp->up", cov)
    var = np.where(free & (var > 0), var, np.nan)

    sigma_fit = np.exp(theta[:, s_sl])
    out = real if owned is None else real & owned
    idx = units[out]
    st.x0[idx] = theta[:, :g][out]
    st.flux[idx] = theta[:, g:2 * g][out]
    st.sigma[idx] = sigma_fit[out]
    st.background[idx] = np.broadcast_to(theta[:, i_b][:, None], out.shape)[out]
    st.x_err[idx] = np.sqrt(var[:, :g])[out]
    st.flux_err[idx] = np.sqrt(var[:, g:2 * g])[out]
    st.sigma_err[idx] = (sigma_fit * np.sqrt(var[:, s_sl]))[out]
    st.redchi[idx] = np.broadcast_to((chi2 / dof)[:, None], out.shape)[out]
    st.ok[idx] = np.broadcast_to((done & ~too_few & invertible)[:, None], out.shape)[out]


def fit_windows(y: np.ndarray, var: np.ndarray, use: np.ndarray, x_start: np.ndarray,
                sigma_start: float, sigma_bounds: tuple[float, float]) -> FitState:
    """One pixel-integrated Gaussian plus a constant fitted to every row of ``y`` by :func:`fit_units`.

    Pixel ``k`` of a row is centred at ``k``; the weights are ``1 / var`` on the ``use`` pixels
    (the variance is given, not re-evaluated on the model). The rows are laid end to end,
    far enough apart that the model of one row is exactly zero on the others (the normal CDF
    is exactly 0 or 1 beyond 40 standard deviations), and fitted as units of one line each.

    Parameters
    ----------
    y, var : ndarray, shape (N, M)
        Profiles and their variances.
    use : ndarray of bool, shape (N, M)
        Pixels that count.
    x_start : ndarray, shape (N,)
        Starting centres (pixels of the row), within half a pixel of the middle pixel.
    sigma_start : float
        Starting standard deviation of every line (pixels; at least 0.3 is used).
    sigma_bounds : (float, float)
        Bounds of the standard deviation (pixels).

    Returns
    -------
    FitState
        One entry per row, centres in pixels of the row; ``ok`` marks converged fits with an
        invertible normal matrix.
    """
    n, m = y.shape
    low, high = sigma_bounds
    stride = 2 * m + math.ceil(40.0 * high)
    start = np.arange(n) * stride
    pixels = (start[:, None] + np.arange(m)).ravel()
    flux, read_var = np.zeros(n * stride), np.ones(n * stride)
    fit_ok = np.zeros(n * stride, bool)
    flux[pixels], read_var[pixels], fit_ok[pixels] = y.ravel(), var.ravel(), use.ravel()
    background = np.median(np.concatenate([y[:, :2], y[:, -2:]], axis=1), axis=1)
    line_flux = np.maximum(np.sum(np.where(use, y - background[:, None], 0.0), axis=1), 1e-3)
    nan = np.full(n, np.nan)
    st = FitState(x0=x_start + start, flux=line_flux, sigma=np.full(n, max(float(sigma_start), 0.3)),
                  background=background, x_err=nan.copy(), flux_err=nan.copy(),
                  sigma_err=nan.copy(), redchi=nan.copy(), ok=np.zeros(n, bool),
                  sigma_lo=np.full(n, low), sigma_hi=np.full(n, high),
                  prior_ln_sigma=np.zeros(n), prior_weight=np.zeros(n))
    data = FitData(flux=flux, read_var=read_var, fit_ok=fit_ok, floor=1e-300, poisson=False)
    fit_units(data, np.zeros(n * stride), st, np.arange(n)[:, None], np.full(n, (m - 1) // 2))
    st.x0 -= start
    return st
