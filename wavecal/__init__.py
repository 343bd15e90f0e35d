"""wavecal: pixel-to-wavelength solutions for grating spectrographs from raw arc-lamp frames.

The data's path: a raw FITS frame is read into a :class:`~wavecal.frames.Frame`, collapsed across
the slit into a :class:`~wavecal.extract.Spectrum`, its emission lines found as a peak table,
identified against reference line lists with the grating equation as a physical prior, and
fitted with a physical model of the spectrograph into a :class:`~wavecal.solution.Solution`.
"""
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("wavecal")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
