"""Master bias: the sigma-clipped median of the night's bias frames."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from astropy.io import fits
from astropy.stats import sigma_clip

from .._atomic import atomic_path
from ..errors import FrameError, WavecalError
from ..frames import read_frame, read_image
from ..profile import InstrumentProfile

__all__ = ["BiasCheck", "bias_tolerance_adu", "check_master_bias", "combine_bias",
           "write_master_bias", "read_master_bias"]


def _raw(path: Path) -> np.ndarray:
    data, _ = read_image(path)
    if data.ndim != 2:
        msg = f"{path}: no 2-D image"
        raise FrameError(msg)
    return np.asarray(data, dtype=np.float32)


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
    hdu.header["WCNCOMB"] = (len(sources), "bias frames combined")
    for s in sources:
        hdu.header.add_history(f"bias: {s}"[:70])
    with atomic_path(path) as tmp:
        hdu.writeto(tmp, overwrite=True, checksum=True)
    return Path(path)


def read_master_bias(path: str | Path) -> np.ndarray:
    """A master bias written by :func:`write_master_bias`."""
    data, _ = read_image(path, 0)
    return np.asarray(data, dtype=np.float32)


def bias_tolerance_adu(profile: InstrumentProfile) -> float:
    """Largest difference (ADU) allowed between a master bias and a frame's own bias estimate:
    5 times the read noise, at least 10 ADU (a bias level drifts by a few ADU over a night;
    common practice)."""
    det = profile.detector
    return max(10.0, 5.0 * det.read_noise_e / det.gain_e_per_adu)


@dataclass(frozen=True)
class BiasCheck:
    """Whether a master bias agrees with the frames it is to be subtracted from.

    Attributes
    ----------
    ok : bool
    offset_adu : float
        Worst disagreement found (ADU): master bias minus the frame's own estimate.
    tolerance_adu : float
        See :func:`bias_tolerance_adu`.
    reference : str
        What the master was compared with: ``"overscan"`` or ``"frame level"``.
    message : str
        One line for the log and the summary ("" when ok).
    """

    ok: bool
    offset_adu: float
    tolerance_adu: float
    reference: str
    message: str = ""


def check_master_bias(master: np.ndarray, frames: Sequence[str | Path],
                      profile: InstrumentProfile) -> BiasCheck:
    """Compare a master bias with the bias level of some frames it will be subtracted from.

    With an overscan in the profile, the master is compared with each frame's overscan level
    (the median over the illuminated region of ``(frame - master) - (frame - overscan)``).
    Without one, with the frame's own level: the 1st percentile of the frame after subtracting
    the master must not lie below zero by more than the tolerance (an arc or science frame's
    darkest pixels sit at the bias level, noise aside). Unreadable frames are passed over.
    """
    det = profile.detector
    tolerance = bias_tolerance_adu(profile)
    reference = "overscan" if det.overscan is not None else "frame level"
    worst = 0.0
    for path in frames:
        try:
            with_master = read_frame(path, profile, bias=master).data / det.gain_e_per_adu
            if det.overscan is not None:
                own = read_frame(path, profile).data / det.gain_e_per_adu
                offset = float(np.nanmedian(own - with_master))
            else:
                offset = -float(np.nanpercentile(with_master, 1.0))
        except (WavecalError, ValueError):
            continue
        if abs(offset) > abs(worst):
            worst = offset
    if (worst > tolerance) if det.overscan is None else (abs(worst) > tolerance):
        message = (f"master bias differs from the frames' {reference} by {worst:+.1f} ADU "
                   f"(tolerance {tolerance:.1f} ADU): not used, the frames use "
                   + ("their overscan" if det.overscan is not None
                      else f"the profile's bias level {det.bias_adu:g} ADU"))
        return BiasCheck(False, worst, tolerance, reference, message)
    return BiasCheck(True, worst, tolerance, reference)
