"""The simulated frame and the truth it was made from."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from astropy.io import fits

from .._atomic import atomic_path
from ..optics import GratingModel
from ..profile import InstrumentProfile
from .camera import CameraGeometry
from .line_shape import LineImageShape

__all__ = ["SimulatedArc"]


@dataclass(frozen=True, eq=False)
class SimulatedArc:
    """A synthetic raw arc frame and the truth it was made from.

    Attributes
    ----------
    data : ndarray of shape (rows, columns)
        Raw frame as read (binned), uint16 ADU unless float32 was requested.
    header : astropy.io.fits.Header
        Header with the profile's keywords: nominal grating angle, lamps, image type "arc",
        exposure time, DATE-OBS and binning.
    truth : GratingModel
        The true pixel-to-wavelength model (binned pixels along the dispersion axis of ``data``)
        on the reference row; with a :class:`~.camera.CameraGeometry` it holds on the slit
        centre of the undistorted focal plane instead, and :meth:`true_wavelength` gives the
        wavelength on the detector.
    lines : pandas.DataFrame
        One row per line put on the detector, sorted by ``x_true``: ``wavelength_nm``,
        ``element``, ``order`` (diffraction order), ``x_true`` (0-based raw pixel on the
        reference row of :attr:`line_shape`), ``flux_e``
        (electrons over the whole slit), ``snr`` (expected peak S/N in the sum over the
        illuminated rows of straight lines; a tilted or curved line is spread wider in that
        sum), ``fwhm_px``, ``listed`` (in the shipped line list), ``ghost``
        (next-order image), ``saturated`` (peak at or above the saturation level).
    profile : InstrumentProfile
        The instrument simulated.
    nominal : GratingModel
        The model the profile and header imply (what a pipeline knows before looking); for an
        ``approximate`` profile the profile's effective model.
    binning : tuple of int
        Binning ``(along axis 0, along axis 1)``.
    slit_rows : tuple of int
        ``[start, stop)`` along the spatial axis of the rows lit to at least half the maximum.
    line_shape : LineImageShape or CameraGeometry
        How the lines run along the slit (given, or derived from the camera's optics); its
        reference row is the centre of the slit.
    """

    data: np.ndarray
    header: fits.Header
    truth: GratingModel
    lines: pd.DataFrame
    profile: InstrumentProfile
    nominal: GratingModel
    binning: tuple[int, int]
    slit_rows: tuple[int, int]
    line_shape: LineImageShape | CameraGeometry = field(default_factory=LineImageShape)

    def true_wavelength(self, x, y=None):
        """True wavelength (nm, the profile's medium) at 0-based raw pixel ``x``.

        Parameters
        ----------
        x : array_like
            Pixel along the dispersion axis.
        y : array_like, optional
            Pixel along the spatial axis (broadcast with ``x``); default the reference row of
            :attr:`line_shape` (the slit centre).
        """
        row = self.line_shape.reference_row if y is None else y
        return self.line_shape.wavelength(self.truth, x, row)

    def true_shift(self, x, y):
        """True shift (pixels) on row ``y`` of the line at ``x`` on the reference row."""
        return self.line_shape.shift(x, y)

    def to_hdulist(self) -> fits.HDUList:
        """The frame as FITS HDUs, the image in the HDU the profile says (default: primary)."""
        where = self.profile.detector.hdu
        if where in (None, 0):
            return fits.HDUList([fits.PrimaryHDU(self.data, self.header.copy())])
        hdus = [fits.PrimaryHDU(header=self.header.copy())]
        if isinstance(where, str):
            hdus.append(fits.ImageHDU(self.data, self.header.copy(), name=where))
        else:
            hdus.extend(fits.ImageHDU() for _ in range(int(where) - 1))
            hdus.append(fits.ImageHDU(self.data, self.header.copy()))
        return fits.HDUList(hdus)

    def write(self, path: str | Path, *, overwrite: bool = False, compress: bool = False) -> Path:
        """Write the frame to a FITS file atomically (temporary file, then rename).

        With ``compress`` the image goes, losslessly RICE tile-compressed, into the first
        extension (FITS tile compression, as astropy's ``CompImageHDU`` writes it).

        Raises
        ------
        FileExistsError
            If ``path`` exists and ``overwrite`` is false.
        """
        path = Path(path)
        if path.exists() and not overwrite:
            msg = f"{path}: file exists (pass overwrite=True to replace it)"
            raise FileExistsError(msg)
        hdul = self.to_hdulist()
        if compress:
            image = hdul[self.profile.detector.hdu or 0]
            hdul = fits.HDUList([fits.PrimaryHDU(),
                                 fits.CompImageHDU(data=image.data, header=image.header,
                                                   compression_type="RICE_1")])
        with atomic_path(path) as tmp:
            hdul.writeto(tmp, overwrite=True)
        return path

    def summary(self) -> dict:
        """JSON-safe summary: the true and nominal parameters, line counts and the line shape
        along the slit."""
        keys = ("grating_angle_deg", "focal_length_mm", "axis_pixel", "tilt_deg")
        lines = self.lines
        return {
            "instrument": self.profile.name,
            "shape": list(self.data.shape),
            "binning": list(self.binning),
            "truth": {k: float(getattr(self.truth, k)) for k in keys}
            | {"grooves_per_mm": self.truth.grooves_per_mm,
               "distortion": [float(c) for c in self.truth.distortion]},
            "nominal": {k: float(getattr(self.nominal, k)) for k in keys},
            "n_lines": int(len(lines)),
            "n_listed": int((lines["listed"] & ~lines["ghost"]).sum()),
            "n_unlisted": int((~lines["listed"]).sum()),
            "n_ghosts": int(lines["ghost"].sum()),
            "n_saturated": int(lines["saturated"].sum()),
        } | self.line_shape.describe()

