"""Air ↔ vacuum wavelength conversion for standard air.

The refractive index of *standard air* (dry, 15 °C, 101 325 Pa) is a function of the vacuum
wavenumber σ = 1/λ_vac (µm⁻¹). Three published dispersion formulas are offered:

``"ciddor1996"`` (default)
    P. E. Ciddor, Appl. Opt. 35, 1566 (1996), standard dry air with 450 ppm CO₂:
    ``(n − 1)·10⁸ = 5 792 105/(238.0185 − σ²) + 167 917/(57.362 − σ²)``.
``"edlen1966"``
    B. Edlén, Metrologia 2, 71 (1966), standard air with 300 ppm CO₂:
    ``(n − 1)·10⁸ = 8342.13 + 2 406 030/(130 − σ²) + 15 997/(38.9 − σ²)``.
``"peck_reeder1972"``
    E. R. Peck & K. Reeder, J. Opt. Soc. Am. 62, 958 (1972), dry air:
    ``(n − 1)·10⁸ = 5 791 817/(238.0185 − σ²) + 167 909/(57.362 − σ²)``.
    The vacuum values NIST gives for lines it lists in air appear to follow this formula
    (it reproduces them for the Na D lines to 0.001 pm).

Over 300–1000 nm the three agree within 0.02 pm. They were fitted to measurements between
about 0.23 and 1.7 µm; this module accepts vacuum wavelengths of 200 nm – 20 µm (no formula has
a pole there), outside the fitted range the formulas are extrapolations.

Real air in a spectrograph is not standard air: the grating sees λ_vac/n_ambient, which differs
from the standard-air wavelength by a near-uniform scale factor (a few pm per 5 °C at 600 nm).

λ_air = λ_vac / n(λ_vac) is explicit; λ_vac from λ_air is found by fixed-point iteration of
λ_vac = λ_air · n(λ_vac) to machine precision, so the two conversions are exact inverses.
All wavelengths are in nm.
"""
from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "AIRVAC_METHODS",
    "DEFAULT_METHOD",
    "VALID_RANGE_NM",
    "refractive_index_air",
    "vacuum_to_air",
    "air_to_vacuum",
]

#: Names of the supported standard-air dispersion formulas.
AIRVAC_METHODS = ("ciddor1996", "edlen1966", "peck_reeder1972")

#: The formula used when none is named.
DEFAULT_METHOD = "ciddor1996"

#: Vacuum wavelengths (nm) accepted by the conversions; air wavelengths are accepted when their
#: vacuum counterparts lie in this range.
VALID_RANGE_NM = (200.0, 20000.0)

# (constant, (numerator, pole) pairs) of (n - 1) * 1e8 = c + sum(k / (pole - σ²)), σ in µm⁻¹.
_COEFFICIENTS = {
    "ciddor1996": (0.0, ((5792105.0, 238.0185), (167917.0, 57.362))),
    "edlen1966": (8342.13, ((2406030.0, 130.0), (15997.0, 38.9))),
    "peck_reeder1972": (0.0, ((5791817.0, 238.0185), (167909.0, 57.362))),
}

_MAX_ITERATIONS = 20


def _check_method(method: str) -> None:
    if method not in _COEFFICIENTS:
        msg = f"method must be one of {AIRVAC_METHODS}, got {method!r}"
        raise ValueError(msg)


def _checked(wavelength_nm: ArrayLike, name: str, bounds: tuple[float, float]) -> np.ndarray:
    values = np.asarray(wavelength_nm, dtype=float)
    lo, hi = bounds
    bad = ~np.isfinite(values) | (values < lo) | (values > hi)
    if np.any(bad):
        offending = values[bad]
        msg = (f"{name} must lie within {lo:.6g}-{hi:.6g} nm (vacuum {VALID_RANGE_NM[0]:g}-"
               f"{VALID_RANGE_NM[1]:g} nm, the range of the standard-air dispersion formulas); got "
               f"{offending.size} value(s) outside it or not finite, e.g. {float(offending.flat[0])!r} nm")
        raise ValueError(msg)
    return values


def _as_output(values: np.ndarray) -> np.ndarray | float:
    return float(values) if values.ndim == 0 else values


def _index(vacuum_nm: np.ndarray, method: str) -> np.ndarray:
    sigma2 = (1e3 / vacuum_nm) ** 2
    constant, terms = _COEFFICIENTS[method]
    total = constant + sum(k / (pole - sigma2) for k, pole in terms)
    return 1.0 + 1e-8 * total


def refractive_index_air(wavelength_vacuum_nm: ArrayLike, *,
                         method: str = DEFAULT_METHOD) -> np.ndarray | float:
    """Refractive index of standard air at the given vacuum wavelengths.

    Parameters
    ----------
    wavelength_vacuum_nm : float or array_like
        Vacuum wavelengths in nm, within :data:`VALID_RANGE_NM`.
    method : {"ciddor1996", "edlen1966", "peck_reeder1972"}
        Dispersion formula (see the module docstring).

    Returns
    -------
    float or ndarray
        n, of the same shape as the input.

    Raises
    ------
    ValueError
        For an unknown method or a wavelength outside :data:`VALID_RANGE_NM` (or not finite).
        The conversions raise the same way.
    """
    _check_method(method)
    vacuum = _checked(wavelength_vacuum_nm, "wavelength_vacuum_nm", VALID_RANGE_NM)
    return _as_output(_index(vacuum, method))


def vacuum_to_air(wavelength_vacuum_nm: ArrayLike, *,
                  method: str = DEFAULT_METHOD) -> np.ndarray | float:
    """Standard-air wavelengths (nm) for the given vacuum wavelengths (nm).

    Parameters
    ----------
    wavelength_vacuum_nm : float or array_like
        Vacuum wavelengths in nm, within :data:`VALID_RANGE_NM`.
    method : {"ciddor1996", "edlen1966", "peck_reeder1972"}
        Dispersion formula.

    Returns
    -------
    float or ndarray
        λ_vac / n(λ_vac), of the same shape as the input.

    Examples
    --------
    >>> round(vacuum_to_air(200.0) * 10, 3)  # 2000 Å vacuum -> 1999.353 Å air
    1999.353
    """
    _check_method(method)
    vacuum = _checked(wavelength_vacuum_nm, "wavelength_vacuum_nm", VALID_RANGE_NM)
    return _as_output(vacuum / _index(vacuum, method))


def air_to_vacuum(wavelength_air_nm: ArrayLike, *,
                  method: str = DEFAULT_METHOD) -> np.ndarray | float:
    """Vacuum wavelengths (nm) for the given standard-air wavelengths (nm).

    The exact inverse of :func:`vacuum_to_air`: λ_vac = λ_air · n(λ_vac) is iterated until no
    element changes by more than a few units of the last place.

    Parameters
    ----------
    wavelength_air_nm : float or array_like
        Air wavelengths in nm whose vacuum values lie within :data:`VALID_RANGE_NM`
        (about 199.936–19994.5 nm).
    method : {"ciddor1996", "edlen1966", "peck_reeder1972"}
        Dispersion formula.

    Returns
    -------
    float or ndarray
        Vacuum wavelengths, of the same shape as the input.

    Examples
    --------
    >>> round(air_to_vacuum(605.6125) * 10, 4)  # 6056.125 Å air -> 6057.8019 Å vacuum
    6057.8019
    """
    _check_method(method)
    limits = np.asarray(VALID_RANGE_NM)
    air_limits = limits / _index(limits, method)
    air = _checked(wavelength_air_nm, "wavelength_air_nm", (air_limits[0], air_limits[1]))
    vacuum = air * _index(air, method)
    tolerance = 4.0 * np.finfo(float).eps * air
    for _ in range(_MAX_ITERATIONS):
        updated = air * _index(vacuum, method)
        converged = np.all(np.abs(updated - vacuum) <= tolerance)
        vacuum = updated
        if converged:
            break
    return _as_output(vacuum)
