"""The extracted arc spectrum saved beside a solution, so its report can be redrawn later.

The file ``<stem>.spectrum.npz`` (next to ``<stem>.solution.json``) holds two float32 arrays:
``x`` (0-based pixel along the dispersion axis) and ``flux`` (electrons per pixel).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .._atomic import atomic_path
from ..errors import SolutionFileError

__all__ = ["save_spectrum", "load_spectrum", "spectrum_path"]

_SOLUTION_SUFFIX = ".solution.json"


def spectrum_path(solution_path: str | Path) -> Path:
    """Where the spectrum of the solution file ``solution_path`` is kept."""
    path = Path(solution_path)
    name = path.name
    stem = name[:-len(_SOLUTION_SUFFIX)] if name.endswith(_SOLUTION_SUFFIX) else path.stem
    return path.with_name(f"{stem}.spectrum.npz")


def save_spectrum(path: str | Path, x, flux) -> Path:
    """Write ``x`` and ``flux`` (same length) atomically as a compressed ``.npz`` file."""
    x, flux = np.asarray(x, dtype=np.float32), np.asarray(flux, dtype=np.float32)
    if x.shape != flux.shape or x.ndim != 1:
        msg = f"{path}: x and flux must be 1-D arrays of the same length"
        raise ValueError(msg)
    path = Path(path)
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(fh, x=x, flux=flux)
    return path


def load_spectrum(path: str | Path) -> tuple[np.ndarray, np.ndarray] | None:
    """``(x, flux)`` from a file written by :func:`save_spectrum`; None when there is none.

    Raises
    ------
    SolutionFileError
        When the file exists but is not a spectrum file.
    """
    path = Path(path)
    if not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as data:
            return np.asarray(data["x"], float), np.asarray(data["flux"], float)
    except (OSError, ValueError, KeyError) as exc:
        msg = f"{path}: not a spectrum file ({exc})"
        raise SolutionFileError(msg) from None
