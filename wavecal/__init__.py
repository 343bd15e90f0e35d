"""wavecal: pixel-to-wavelength solutions for grating spectrographs from raw arc-lamp frames.

The data's path: a raw FITS frame is read into a :class:`~wavecal.frames.Frame`, collapsed across
the slit into a :class:`~wavecal.extract.Spectrum`, its emission lines found as a peak table,
identified against reference line lists with the grating equation as a physical prior, and
fitted with a physical model of the spectrograph into a :class:`~wavecal.solution.Solution`.

The names most users need are available here::

    import wavecal
    profile = wavecal.load_profile("tho_longslit")
    solution = wavecal.calibrate_frame("arc.fits", profile)
    solution.write("arc.solution.json")
    same = wavecal.load_solution("arc.solution.json")
"""
from ._lazy import lazy_attributes
from ._version import __version__

__all__ = ["__version__", "calibrate_frame", "load_profile", "load_solution", "Solution"]

#: Where each public name lives; imported on first use, so that ``import wavecal`` (and the
#: command line's ``--help``) stays fast.
_LAZY = {"calibrate_frame": "calibrate", "load_profile": "profile", "load_solution": "solution",
         "Solution": "solution"}

__getattr__, __dir__ = lazy_attributes(__name__, _LAZY)
