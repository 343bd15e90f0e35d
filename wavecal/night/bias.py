"""Master bias: the sigma-clipped median of the night's bias frames."""
from __future__ import annotations

import warnings
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from astropy.io import fits
from astropy.stats import sigma_clip

from .._atomic import atomic_path
from ..errors import FrameError

__all__ = ["combine_bias", "write_master_bias", "read_master_bias"]


def _raw(path: Path) -> np.ndarray:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            with fits.open(path, memmap=False) as hdul:
                hdu = next((h for h in hdul if h.data is not None and h.data.ndim == 2), None)
                if hdu is None:
                    msg = f"{path}: no 2-D image"
                    raise FrameError(msg)
                return np.asarray(hdu.data, dtype=np.float32)
    except (OSError, ValueError, TypeError) as exc:
        msg = f"{path}: cannot read the bias frame ({exc})"
        raise FrameError(msg) from None


def combine_bias(paths: Sequence[str | Path], *, sigma: float = 3.0
                 ) -> tuple[np.ndarray, dict[str, str]]:
    """Combine bias frames pixel by pixel (median after 3-sigma clipping, common practice).

    Returns
    -------
    master : ndarray of float32
        Raw-shaped master bias in ADU.
    rejected : dict of str to str
        Frames left out (unreadable, another shape, mostly non-finite) with the reason.

    Raises
    ------
    FrameError
        When no frame is usable.
    """
    stack, shapes, rejected = [], [], {}
    arrays = {}
    for p in paths:
        try:
            arrays[str(p)] = _raw(Path(p))
        except FrameError as exc:
            rejected[str(p)] = str(exc)
    if arrays:
        shapes = [a.shape for a in arrays.values()]
        common = max(set(shapes), key=shapes.count)
        for name, a in arrays.items():
            if a.shape != common:
                rejected[name] = f"{name}: shape {a.shape} differs from the other biases {common}"
            elif np.mean(~np.isfinite(a)) > 0.5:
                rejected[name] = f"{name}: mostly non-finite pixels"
            else:
                stack.append(a)
    if not stack:
        msg = "no usable bias frame: " + "; ".join(rejected.values())
        raise FrameError(msg)
    cube = np.ma.masked_invalid(np.stack(stack))
    if len(stack) >= 3:
        cube = sigma_clip(cube, sigma=sigma, axis=0, masked=True)
    master = np.ma.median(cube, axis=0).filled(np.nan).astype(np.float32)
    return master, rejected


def write_master_bias(master: np.ndarray, path: str | Path, sources: Sequence[str]) -> Path:
    """Write a master bias atomically, listing its source frames in HISTORY."""
    hdu = fits.PrimaryHDU(master)
    hdu.header["NCOMBINE"] = (len(sources), "bias frames combined")
    for s in sources:
        hdu.header.add_history(f"bias: {s}"[:70])
    with atomic_path(path) as tmp:
        hdu.writeto(tmp, overwrite=True, checksum=True)
    return Path(path)


def read_master_bias(path: str | Path) -> np.ndarray:
    """A master bias written by :func:`write_master_bias`."""
    with fits.open(path, memmap=False) as hdul:
        return np.asarray(hdul[0].data, dtype=np.float32)
