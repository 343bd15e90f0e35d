"""Where the lines fall on a two-dimensional detector, derived from the optics.

:class:`CameraGeometry` maps a detector pixel ``(x, y)`` (``x`` along the dispersion, ``y`` along
the slit, 0-based pixels of the frame as read) to the wavelength that reaches it, through three
effects that real spectrographs show:

* **Smile** (the curvature of the slit image): light from a point of the slit at height ``h``
  meets the grating out of the dispersion plane, at ``γ = atan(h_det / f)`` (``h_det`` its
  height on the detector, ``f`` the camera focal length). The grating equation then reads
  ``m λ = d cos γ (n sin α + sin β)`` (Palmer & Loewen, *Diffraction Grating Handbook*, ch. 2,
  conical diffraction), so the point of the focal plane that receives ``λ_0`` on the slit centre
  receives ``λ_0 cos γ`` at height ``h``: every line bends towards longer wavelengths at the slit
  ends, by ``λ (1/cos γ - 1)``.
* **Radial camera distortion** about the camera axis (pixel ``model.axis_pixel`` on the slit
  centre row): a focal-plane point at distance ``r`` from the axis is imaged at
  ``r (1 + k r²)`` (third-order radial distortion; ``k > 0`` pincushion, ``k < 0`` barrel).
* **Detector rotation** by ``θ`` about the detector centre: the slit image, straight along the
  spatial axis of the focal plane, runs at ``θ`` from the detector columns (positive: towards
  larger ``x`` as ``y`` grows, the convention of :class:`~.line_shape.LineImageShape`).

In the focal plane before distortion, ``u`` (pixels along the dispersion) and ``w`` (rows along
the slit) are the coordinates the true grating model and the slit use: the slit centre row
``reference_row`` receives ``model.wavelength(u)``. Everything is computed, not fitted: the
forward map is closed-form and its inverse is solved to round-off, so the truth stays exact.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..optics import GratingModel

__all__ = ["CameraGeometry"]

#: Iterations of the inversions (each converges to round-off long before).
_ITERATIONS = 40
_TOLERANCE_PX = 1e-10


@dataclass(frozen=True)
class CameraGeometry:
    """Smile, radial distortion and detector rotation of a simulated frame (module docstring).

    Attributes
    ----------
    model : GratingModel
        The true grating model on the slit centre row of the undistorted focal plane.
    reference_row : float
        Row of the slit centre (``w`` of the camera axis and of the rotation centre); lines
        are listed at their position on this detector row.
    centre_x : float
        Pixel along the dispersion of the rotation centre (the middle of the detector).
    rotation_deg : float
        Detector rotation ``θ``, degrees.
    radial_k : float
        Radial distortion coefficient ``k``, per square pixel.
    smile : bool
        Whether the conical-diffraction curvature of the slit image is included.
    spatial_pixel_mm : float
        Pixel pitch along the slit (binning included), for the height ``h_det``.
    """

    model: GratingModel
    reference_row: float
    centre_x: float
    rotation_deg: float = 0.0
    radial_k: float = 0.0
    smile: bool = False
    spatial_pixel_mm: float = 0.0135

    straight = False

    # -- focal plane <-> detector -------------------------------------------------------------
    def _axis(self) -> tuple[float, float]:
        return float(self.model.axis_pixel), float(self.reference_row)

    def detector_position(self, u, w):
        """Detector ``(x, y)`` of the undistorted focal-plane point ``(u, w)``."""
        ou, ow = self._axis()
        du, dw = np.asarray(u, dtype=float) - ou, np.asarray(w, dtype=float) - ow
        grow = 1.0 + self.radial_k * (du * du + dw * dw)
        pu, pw = ou + du * grow - self.centre_x, ow + dw * grow - self.reference_row
        c, s = np.cos(np.radians(self.rotation_deg)), np.sin(np.radians(self.rotation_deg))
        return self.centre_x + c * pu + s * pw, self.reference_row - s * pu + c * pw

    def focal_position(self, x, y):
        """Undistorted focal-plane ``(u, w)`` of detector pixel ``(x, y)`` (inverse of
        :meth:`detector_position`)."""
        c, s = np.cos(np.radians(self.rotation_deg)), np.sin(np.radians(self.rotation_deg))
        px = np.asarray(x, dtype=float) - self.centre_x
        py = np.asarray(y, dtype=float) - self.reference_row
        ou, ow = self._axis()
        du = self.centre_x + c * px - s * py - ou
        dw = self.reference_row + s * px + c * py - ow
        if self.radial_k == 0.0:
            return ou + du, ow + dw
        seen = np.hypot(du, dw)
        r = seen.copy()
        for _ in range(_ITERATIONS):  # Newton on r (1 + k r²) = seen
            step = (r * (1.0 + self.radial_k * r * r) - seen) / (1.0 + 3.0 * self.radial_k * r * r)
            r = r - step
            if np.max(np.abs(step), initial=0.0) < _TOLERANCE_PX:
                break
        ratio = np.divide(r, seen, out=np.ones_like(seen), where=seen > 0)
        return ou + du * ratio, ow + dw * ratio

    # -- wavelengths ---------------------------------------------------------------------------
    def _smile_factor(self, w):
        """``cos γ`` for focal-plane row ``w`` (1 without smile)."""
        if not self.smile:
            return np.ones_like(np.asarray(w, dtype=float))
        height = (np.asarray(w, dtype=float) - self.reference_row) * self.spatial_pixel_mm
        return np.cos(np.arctan(height / self.model.focal_length_mm))

    def wavelength(self, model: GratingModel, x, y):
        """First-order wavelength (nm) reaching detector pixel ``(x, y)``.

        ``model`` must be the geometry's own model (the frame's truth); it is taken so that
        this method and :meth:`.LineImageShape.wavelength` are called alike.
        """
        if model != self.model:
            msg = "CameraGeometry.wavelength: model differs from the geometry's own model"
            raise ValueError(msg)
        u, w = self.focal_position(x, y)
        return self.model.wavelength(u) * self._smile_factor(w)

    def slit_position(self, x, y):
        """Row along the slit (focal-plane ``w``) imaged at detector pixel ``(x, y)``."""
        return self.focal_position(x, y)[1]

    def _position_of(self, target, y, guess):
        """Pixel on row ``y`` receiving wavelength ``target``: Newton iterations from ``guess``
        (the wavelength changes monotonically along a row)."""
        x = np.array(guess, dtype=float)
        for _ in range(_ITERATIONS):
            slope = (self.wavelength(self.model, x + 0.5, y)
                     - self.wavelength(self.model, x - 0.5, y))
            step = (self.wavelength(self.model, x, y) - target) / slope
            x = x - step
            if np.max(np.abs(step), initial=0.0) < _TOLERANCE_PX:
                break
        return x

    def shift(self, x, y):
        """Shift (pixels along the dispersion) on row ``y`` of the line at ``x`` on the
        reference row."""
        x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        target = self.wavelength(self.model, x, np.full_like(x, self.reference_row))
        return self._position_of(target, y, x) - x

    def reference_position(self, x, y):
        """Position on the reference row of the line seen at ``x`` on row ``y``."""
        x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        return self._position_of(self.wavelength(self.model, x, y),
                                 np.full_like(x, self.reference_row), x)

    def reference_position_of_focal(self, u):
        """Position on the reference row of the line imaged at ``u`` on the slit centre of the
        undistorted focal plane (where :attr:`model` puts it)."""
        u = np.asarray(u, dtype=float)
        return self._position_of(self.model.wavelength(u), np.full_like(u, self.reference_row), u)

    def describe(self) -> dict:
        """JSON-safe description for :meth:`.SimulatedArc.summary`."""
        return {"detector_rotation_deg": float(self.rotation_deg),
                "radial_k_per_px2": float(self.radial_k), "smile": bool(self.smile),
                "slit_centre_row": float(self.reference_row)}
