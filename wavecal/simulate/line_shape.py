"""Where the image of a line lies on each row of the slit, as a given tilt and curvature.

By default every line is a straight image of the slit, parallel to the spatial axis. With
``line_tilt_deg`` and ``line_curvature_px`` a line at pixel ``x`` on the reference row ``y_c``
(the centre of the simulated slit) lies at ``x + shift(x, y)`` on row ``y``, with

    shift(x, y) = tan(tilt(x)) (y - y_c) + curvature(x) ((y - y_c) / h)²

``h`` the half-length of the slit: the tilt is the angle of the line image from the spatial axis
(positive: the line moves towards larger ``x`` as ``y`` grows) and the curvature the sagitta, the
extra shift at the slit ends relative to the straight tilted line. Both may change linearly from
the first to the last illuminated pixel along the dispersion. (:mod:`.camera` derives the line
shape from the optics instead.)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["LineImageShape"]


@dataclass(frozen=True)
class LineImageShape:
    """Where the image of a line lies on each row of the slit (see the module docstring).

    Coordinates are 0-based pixels of the frame as read (binned): ``x`` along the dispersion
    axis, ``y`` along the spatial axis.

    Attributes
    ----------
    tilt_deg : tuple of float
        Angle of the line image from the spatial axis at the first and at the last pixel of
        ``x_range`` (linear in between), degrees.
    curvature_px : tuple of float
        Sagitta (extra shift at the slit ends, pixels) at the first and last pixel of
        ``x_range``.
    reference_row : float
        Row ``y_c`` where the shift is zero: the centre of the simulated slit.
    half_length : float
        Half-length ``h`` of the slit (rows) at which the curvature term equals the sagitta.
    x_range : tuple of float
        First and last illuminated pixel along the dispersion axis.
    """

    tilt_deg: tuple[float, float] = (0.0, 0.0)
    curvature_px: tuple[float, float] = (0.0, 0.0)
    reference_row: float = 0.0
    half_length: float = 1.0
    x_range: tuple[float, float] = (0.0, 1.0)

    @property
    def straight(self) -> bool:
        """True when the lines run exactly along the spatial axis (no tilt, no curvature)."""
        return not any(self.tilt_deg) and not any(self.curvature_px)

    def shift(self, x, y):
        """Shift (pixels along the dispersion) on row ``y`` of a line at ``x`` on the reference row."""
        x = np.asarray(x, dtype=float)
        t = np.asarray(y, dtype=float) - self.reference_row
        x0, x1 = self.x_range
        s = (x - x0) / (x1 - x0) if x1 != x0 else np.zeros_like(x)
        tilt = np.radians(self.tilt_deg[0] + (self.tilt_deg[1] - self.tilt_deg[0]) * s)
        sagitta = self.curvature_px[0] + (self.curvature_px[1] - self.curvature_px[0]) * s
        return np.tan(tilt) * t + sagitta * (t / self.half_length) ** 2

    def reference_position(self, x, y, *, iterations: int = 8):
        """Position on the reference row of the line seen at ``x`` on row ``y``.

        Solves ``x_ref + shift(x_ref, y) = x`` by fixed-point iteration (the shift changes
        slowly with ``x``, so a few steps reach round-off).
        """
        x = np.asarray(x, dtype=float)
        ref = x - self.shift(x, y)
        for _ in range(iterations):
            ref = x - self.shift(ref, y)
        return ref

    def wavelength(self, model, x, y):
        """Wavelength (nm) at pixel ``(x, y)`` when ``model`` holds on the reference row."""
        return model.wavelength(self.reference_position(x, y))

    def slit_position(self, x, y):
        """Row along the slit imaged at pixel ``(x, y)``: the row itself (the slit image is not
        rotated)."""
        return np.broadcast_to(np.asarray(y, dtype=float), np.broadcast_shapes(np.shape(x),
                                                                                 np.shape(y)))

    def describe(self) -> dict:
        """JSON-safe description for :meth:`.SimulatedArc.summary`."""
        return {"line_tilt_deg": list(self.tilt_deg),
                "line_curvature_px": list(self.curvature_px),
                "slit_centre_row": float(self.reference_row)}
