"""Hydrogen Balmer lines, computed: the impurity most small lamp modules show.

The wavenumber of the transition from level ``n`` to level 2 of hydrogen is given by the
Rydberg formula with the reduced-mass Rydberg constant,

    1/λ_vac = R_H (1/2² - 1/n²),    R_H = R_∞ / (1 + m_e/m_p),

(the Bohr model; any atomic physics text). Fine structure and the Lamb shift, left out, move
the lines by about 0.01 nm (Hα 656.4696 nm here, 656.4603 nm for the NIST ASD blend): far below
a pixel of the low-resolution spectrographs whose lamps show these lines. Air wavelengths come
from :func:`wavecal.airvac.vacuum_to_air`.

Relative strengths follow the recombination (case B) Balmer decrement at 10⁴ K (Osterbrock &
Ferland, *Astrophysics of Gaseous Nebulae and Active Galactic Nuclei*, 2006, table 4.2; from
memory). A lamp discharge is not a nebula; the decrement only gives the lines a realistic
ordering and spread of strengths.
"""
from __future__ import annotations

import numpy as np

from ..airvac import vacuum_to_air

__all__ = ["BALMER_DECREMENT", "RYDBERG_HYDROGEN_PER_M", "balmer_wavelengths"]

#: Rydberg constant R_∞ (m⁻¹) and proton-to-electron mass ratio, CODATA 2018 (from memory).
_RYDBERG_INFINITY_PER_M = 10973731.568160
_PROTON_ELECTRON_MASS_RATIO = 1836.15267343
#: Rydberg constant of hydrogen with the reduced mass of the electron-proton system (m⁻¹).
RYDBERG_HYDROGEN_PER_M = _RYDBERG_INFINITY_PER_M / (1.0 + 1.0 / _PROTON_ELECTRON_MASS_RATIO)
#: Case B line strengths relative to Hβ, upper level n = 3 (Hα) to 10 (H10).
BALMER_DECREMENT = {3: 2.86, 4: 1.0, 5: 0.468, 6: 0.259, 7: 0.159, 8: 0.105, 9: 0.0731,
                    10: 0.0530}


def balmer_wavelengths(upper, *, medium: str = "air"):
    """Wavelengths (nm) of the Balmer lines from upper levels ``upper`` (integers >= 3).

    Parameters
    ----------
    upper : int or array_like of int
        Principal quantum number of the upper level (3 gives Hα).
    medium : {"air", "vacuum"}
        Medium of the returned wavelengths (air: standard air, Ciddor 1996).

    Returns
    -------
    float or ndarray
        Wavelengths in nm.
    """
    n = np.asarray(upper, dtype=float)
    if np.any(n < 3) or np.any(n != np.round(n)):
        msg = f"Balmer upper levels must be integers >= 3, got {upper!r}"
        raise ValueError(msg)
    if medium not in ("air", "vacuum"):
        msg = f"medium must be 'air' or 'vacuum', got {medium!r}"
        raise ValueError(msg)
    vacuum = 1e9 / (RYDBERG_HYDROGEN_PER_M * (0.25 - 1.0 / (n * n)))
    return vacuum_to_air(vacuum) if medium == "air" else (
        float(vacuum) if np.ndim(vacuum) == 0 else vacuum)
