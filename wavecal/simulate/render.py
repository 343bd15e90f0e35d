"""Expected electrons of a simulated frame: line fluxes scaled to the wanted S/N, and the image."""
from __future__ import annotations

import numpy as np

from .detector import Layout, continuum_rows
from .line_profile import LineWidth, slit_line_profile
from .camera import CameraGeometry
from .line_shape import LineImageShape

__all__ = ["expected_image", "set_fluxes"]


def _spectrum_1d(x, flux, layout: Layout, width: LineWidth, n_pixels: int) -> np.ndarray:
    """Electrons per dispersion pixel summed over the slit."""
    spec = np.zeros(layout.n_disp)
    if len(x) == 0:
        return spec
    _, slit, sigma = width.at(x, n_pixels)
    half = int(np.ceil(np.max(0.5 * slit + 6 * sigma))) + 2
    pix = np.floor(x)[:, None] + np.arange(-half, half + 1)[None, :]
    frac = slit_line_profile(pix, x[:, None], slit_px=slit[:, None], blur_sigma_px=sigma[:, None])
    d0, d1 = layout.disp
    inside = (pix >= d0) & (pix < d1)
    np.add.at(spec, pix[inside].astype(int), (frac * flux[:, None])[inside])
    return spec


def _shaped_lines(x, flux, layout: Layout, width: LineWidth, n_pixels: int, spatial: np.ndarray,
                  shape: LineImageShape | CameraGeometry) -> np.ndarray:
    """Electrons of the lines per (spatial, dispersion) pixel, each row with its own shift and
    the slit illumination of the slit row imaged there."""
    image = np.zeros((layout.n_spatial, layout.n_disp))
    lit = np.flatnonzero(spatial > 1e-12 * spatial.max())
    if len(x) == 0 or lit.size == 0:
        return image
    _, slit, sigma = width.at(x, n_pixels)
    half = int(np.ceil(np.max(0.5 * slit + 6 * sigma))) + 2
    offsets = np.arange(-half, half + 1)
    d0, d1 = layout.disp
    # a rotated slit image reaches beyond the rows lit at the rotation centre
    rows = (np.arange(*layout.spatial) if isinstance(shape, CameraGeometry)
            else np.arange(lit[0], lit[-1] + 1))
    all_rows = np.arange(layout.n_spatial, dtype=float)
    per_chunk = max(1, 2_000_000 // (len(x) * offsets.size))
    for start in range(0, rows.size, per_chunk):
        chunk = rows[start:start + per_chunk]
        centre = x[None, :] + shape.shift(x[None, :], chunk[:, None])
        pix = np.floor(centre)[:, :, None] + offsets
        frac = slit_line_profile(pix, centre[:, :, None], slit_px=slit[None, :, None],
                                 blur_sigma_px=sigma[None, :, None])
        lit_here = np.interp(shape.slit_position(centre, chunk[:, None]), all_rows, spatial)
        value = frac * (flux[None, :, None] * lit_here[:, :, None])
        inside = (pix >= d0) & (pix < d1)
        index = (np.arange(chunk.size)[:, None, None] * layout.n_disp + pix)[inside].astype(np.int64)
        image[chunk] = np.bincount(index, weights=value[inside],
                                   minlength=chunk.size * layout.n_disp).reshape(chunk.size, -1)
    return image


def set_fluxes(lines, layout, width, truth, spatial, slit_rows, cont_shape, profile, peak_snr,
                scattered_light, boosts, bias):
    """Scale the relative line weights to electrons; return the lines (with ``flux_e``,
    ``fwhm_px``, ``snr``) and the scattered-light level (electrons per pixel at the brightest
    row)."""
    det = profile.detector
    x = lines["x_true"].to_numpy()
    weight = lines["weight"].to_numpy()
    fwhm, slit, sigma = width.at(x, truth.n_pixels)
    peak = slit_line_profile(np.round(x), x, slit_px=slit, blur_sigma_px=sigma)
    rows = slice(*slit_rows)
    slit_share, n_rows = spatial[rows].sum(), slit_rows[1] - slit_rows[0]
    cont_sum = continuum_rows(layout, spatial)[rows].sum()
    noise_floor = n_rows * det.read_noise_e ** 2
    d0, d1 = layout.disp
    xi = np.clip(np.round(x).astype(int), d0, d1 - 1)
    listed = (lines["listed"] & ~lines["ghost"]).to_numpy()
    fully_on = (x >= d0 + 2) & (x <= d1 - 3)
    pick = listed & fully_on if (listed & fully_on).any() else fully_on
    scale = cont_level = 0.0
    if pick.any():
        j = int(np.argmax(np.where(pick, weight * peak, -1.0)))
        a = weight[j] * peak[j] * slit_share
        c = scattered_light * weight[j] * peak[j] * spatial.max() * cont_shape[xi[j]] * cont_sum
        k = peak_snr ** 2
        # peak_snr = a F / sqrt((a + c) F + noise_floor), solved for the flux scale F
        b = k * (a + c)
        scale = (b + np.sqrt(b * b + 4 * a * a * k * noise_floor)) / (2 * a * a)
        cont_level = scattered_light * weight[j] * peak[j] * scale * spatial.max()
    flux = weight * scale
    if len(boosts):
        top = np.argsort(np.where(pick, flux * peak, -1.0))[::-1][:len(boosts)]
        top = top[pick[top]]
        wanted = ((det.saturation_level_adu - bias) * boosts[:len(top)] * det.gain_e_per_adu
                  / (peak[top] * spatial.max()))
        flux[top] = np.maximum(flux[top], wanted)
    signal = flux * peak * slit_share
    snr = signal / np.sqrt(signal + cont_level * cont_shape[xi] * cont_sum + noise_floor)
    lines = lines.drop(columns="weight").assign(flux_e=flux, snr=snr, fwhm_px=fwhm)
    return lines, cont_level



def expected_image(lines, layout, width, truth, spatial, cont_shape, cont_level,
                   shape: LineImageShape | CameraGeometry) -> np.ndarray:
    """Expected electrons, shape (spatial, dispersion)."""
    x, flux = lines["x_true"].to_numpy(), lines["flux_e"].to_numpy()
    if shape.straight:
        image = np.outer(spatial, _spectrum_1d(x, flux, layout, width, truth.n_pixels))
    else:
        image = _shaped_lines(x, flux, layout, width, truth.n_pixels, spatial, shape)
    if cont_level > 0:
        image += cont_level * np.outer(continuum_rows(layout, spatial), cont_shape)
    return image

