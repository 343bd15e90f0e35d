"""The detector of a simulated frame: layout, slit illumination, scattered light, bias, noise,
cosmic rays, hot pixels, saturation and the header."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from astropy.io import fits
from scipy.special import ndtr

from ..profile import InstrumentProfile

__all__ = ["Layout", "continuum_rows", "continuum_shape", "draw_bias", "draw_hot_pixels",
           "flag_saturated", "frame_binning", "frame_header", "read_out", "slit_illumination"]


def frame_binning(profile: InstrumentProfile, binning) -> tuple[int, int]:
    bins = (binning, binning) if np.isscalar(binning) else tuple(binning)
    if len(bins) != 2 or any(b not in (1, 2) for b in bins):
        msg = f"binning must be 1 or 2 (or a pair of them), got {binning!r}"
        raise ValueError(msg)
    if bins != (1, 1) and not {"binning", "binning_x"} & set(profile.header):
        msg = f"profile {profile.name!r} maps no header keyword for binning; cannot bin"
        raise ValueError(msg)
    return (int(bins[0]), int(bins[1]))


def _binned_region(region, bins) -> tuple[int, int, int, int]:
    """Unbinned region -> the whole binned pixels inside it."""
    r0, r1, c0, c1 = region
    return (-(-r0 // bins[0]), r1 // bins[0], -(-c0 // bins[1]), c1 // bins[1])


@dataclass(frozen=True)
class Layout:
    """Binned frame geometry: shape, lit region along each axis, overscan region."""

    shape: tuple[int, int]
    axis: int
    disp: tuple[int, int]
    spatial: tuple[int, int]
    overscan: tuple[int, int, int, int] | None

    @classmethod
    def of(cls, profile: InstrumentProfile, bins: tuple[int, int]) -> Layout:
        det = profile.detector
        shape = (det.shape[0] // bins[0], det.shape[1] // bins[1])
        trim = _binned_region(det.trim or (0, det.shape[0], 0, det.shape[1]), bins)
        over = None if det.overscan is None else _binned_region(det.overscan, bins)
        rows, cols = (trim[0], trim[1]), (trim[2], trim[3])
        disp, spatial = (cols, rows) if det.dispersion_axis == 1 else (rows, cols)
        return cls(shape=shape, axis=det.dispersion_axis, disp=disp, spatial=spatial,
                   overscan=over)

    @property
    def n_disp(self) -> int:
        """Frame length along the dispersion axis."""
        return self.shape[self.axis]

    @property
    def n_spatial(self) -> int:
        """Frame length along the spatial axis."""
        return self.shape[1 - self.axis]



def slit_illumination(layout: Layout, rng):
    """Fraction of the slit light per spatial row (sums to 1), the half-maximum rows and the
    slit's (centre, half-length) in rows."""
    s0, s1 = layout.spatial
    n = s1 - s0
    u = rng.uniform(0.0, 1.0, size=4)
    length = (0.55 + 0.35 * u[0]) * n
    centre = s0 + 0.5 * n + (u[1] - 0.5) * (n - length)
    edge = 0.7 + 1.3 * u[2]
    gradient = 0.3 * u[3] - 0.15
    y = np.arange(layout.n_spatial, dtype=float)
    lo, hi = centre - 0.5 * length, centre + 0.5 * length
    lit = (ndtr((y - lo) / edge) - ndtr((y - hi) / edge)) * (1 + gradient * (y - centre) / length)
    lit[:s0] = 0.0
    lit[s1:] = 0.0
    lit /= lit.sum()
    rows = np.flatnonzero(lit >= 0.5 * lit.max())
    return lit, (int(rows[0]), int(rows[-1]) + 1), (float(centre), float(0.5 * length))


def continuum_shape(layout: Layout, rng) -> np.ndarray:
    """Smooth scattered-light profile along the dispersion axis, peak 1 on the lit region."""
    d0, d1 = layout.disp
    u = rng.uniform(0.0, 1.0, size=3)
    x = np.arange(layout.n_disp, dtype=float)
    centre, width = d0 + u[0] * (d1 - d0), (0.2 + 0.3 * u[1]) * (d1 - d0)
    shape = 0.3 + 0.4 * u[2] + np.exp(-0.5 * ((x - centre) / width) ** 2)
    shape[:d0] = 0.0
    shape[d1:] = 0.0
    return shape / shape.max()


def draw_bias(profile, rng, bias_adu) -> tuple[float, float, int]:
    """(bias level, end-to-end ramp, axis of the ramp) in ADU; constant without an overscan.

    The ramp runs along the overscan strip, so that a per-line overscan level removes it.
    """
    u = rng.uniform(0.0, 1.0, size=2)
    over = profile.detector.overscan
    if over is None:
        return (float(bias_adu) if bias_adu is not None else profile.detector.bias_adu), 0.0, 0
    level = float(bias_adu) if bias_adu is not None else 300.0 + 900.0 * u[0]
    along = 0 if (over[1] - over[0]) >= (over[3] - over[2]) else 1
    return level, 6.0 * u[1] - 3.0, along


def _physical_mask(layout: Layout) -> np.ndarray:
    """Pixels of the raw frame that are real detector pixels (not overscan), raw orientation."""
    mask = np.ones(layout.shape, dtype=bool)
    if layout.overscan is not None:
        r0, r1, c0, c1 = layout.overscan
        mask[r0:r1, c0:c1] = False
    return mask


def draw_hot_pixels(layout: Layout, rng, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices (raw orientation) and electrons of the hot pixels."""
    where = np.flatnonzero(_physical_mask(layout))
    index = rng.choice(where, size=count, replace=False)
    return index, 10.0 ** rng.uniform(2.5, 4.5, size=count)



def continuum_rows(layout: Layout, spatial: np.ndarray) -> np.ndarray:
    """Spatial shape of the scattered light: mostly the slit, a little over the lit region."""
    lit = np.zeros(layout.n_spatial)
    lit[layout.spatial[0]:layout.spatial[1]] = 0.05
    return spatial / spatial.max() + lit



def flag_saturated(lines, image, bias, profile) -> pd.DataFrame:
    """Mark lines whose noiseless peak reaches the saturation level."""
    det = profile.detector
    brightest = image.max(axis=0) / det.gain_e_per_adu + bias
    x = np.round(lines["x_true"].to_numpy()).astype(int)
    around = np.clip(x[:, None] + np.arange(-1, 2)[None, :], 0, len(brightest) - 1)
    return lines.assign(saturated=brightest[around].max(axis=1) >= det.saturation_level_adu)


def read_out(image, layout, profile, bias, hot, rng, cosmic_rays, dtype) -> np.ndarray:
    """Raw frame as read: photon and read noise, cosmic rays, hot pixels, bias, saturation."""
    det = profile.detector
    electrons = image.T if layout.axis == 0 else image
    electrons = np.ascontiguousarray(electrons)
    flat = electrons.reshape(-1)
    flat[hot[0]] += hot[1]
    counts = rng.poisson(electrons).astype(np.float64)
    counts += rng.normal(0.0, det.read_noise_e, size=counts.shape)
    _add_cosmic_rays(counts, layout, rng, cosmic_rays)
    level, ramp, along = bias
    position = np.linspace(-0.5, 0.5, layout.shape[along])
    bias_map = level + ramp * (position[:, None] if along == 0 else position[None, :])
    adu = counts / det.gain_e_per_adu + bias_map
    if dtype == "float32":
        return np.minimum(adu, det.saturation_level_adu).astype(np.float32)
    top = min(det.saturation_level_adu, 65535.0)
    return np.clip(np.rint(adu), 0.0, top).astype(np.uint16)


def _add_cosmic_rays(counts, layout, rng, count) -> None:
    """Short straight tracks of 1-6 pixels carrying 1e3-5e4 electrons each (in place)."""
    if count == 0:
        return
    length = rng.integers(1, 7, size=count)
    angle = rng.uniform(0.0, np.pi, size=count)
    start = rng.uniform(0.0, 1.0, size=(count, 2)) * np.array(layout.shape)
    energy = 10.0 ** rng.uniform(3.0, 4.7, size=count)
    step = np.concatenate([np.arange(n) for n in length])
    which = np.repeat(np.arange(count), length)
    r = np.floor(start[which, 0] + step * np.sin(angle[which])).astype(int)
    c = np.floor(start[which, 1] + step * np.cos(angle[which])).astype(int)
    deposit = energy[which] / length[which] * rng.uniform(0.5, 1.5, size=len(which))
    keep = (r < layout.shape[0]) & (c < layout.shape[1])
    r, c, deposit = r[keep], c[keep], deposit[keep]
    real = _physical_mask(layout)[r, c]
    np.add.at(counts, (r[real], c[real]), deposit[real])


# -- header ----------------------------------------------------------------------------------
def frame_header(profile, header_angle, lamps, exposure_s, date_obs, bins) -> fits.Header:
    """The header of a simulated arc, under the profile's keywords: grating angle, lamps, frame
    type, exposure, time, binning (one keyword or two), and for an instrument of several
    gratings the chosen grating's name (the first listed when none is chosen) with the groove
    density and order when the profile maps them."""
    header = fits.Header()
    grating = profile.grating_name or (profile.gratings[0].name if profile.gratings else None)
    values = {
        "grating": (grating, "grating in use"),
        "grooves_per_mm": (profile.grating.grooves_per_mm, "grating grooves per mm"),
        "order": (profile.grating.order, "diffraction order"),
        "grating_angle": (header_angle, "grating angle [deg]"),
        "lamps": ("+".join(lamps), "arc lamps on"),
        "image_type": ("arc", "frame type"),
        "exposure_time": (float(exposure_s), "exposure time [s]"),
        "observation_time": (date_obs, "start of exposure (UTC)"),
        "binning": (f"{bins[1]} {bins[0]}", "binning along NAXIS1, NAXIS2"),
        "binning_x": (bins[1], "binning along NAXIS1"),
        "binning_y": (bins[0], "binning along NAXIS2"),
    }
    header["DATE-OBS"] = (date_obs, "start of exposure (UTC)")
    for quantity, (value, comment) in values.items():
        spec = profile.header.get(quantity)
        if spec is not None and value is not None:
            header[spec.keyword] = (value, comment)
    header["INSTRUME"] = (profile.name[:60], "instrument")
    header["COMMENT"] = "Synthetic arc frame made by wavecal.simulate (invented data)."
    return header
