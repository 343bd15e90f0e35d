"""Exceptions raised for bad input, each naming the file and the problem."""
from __future__ import annotations

__all__ = ["WavecalError", "ProfileError", "HeaderError", "FrameError", "SolutionFileError",
           "AnchorFileError"]


class WavecalError(Exception):
    """Base class of every error wavecal raises on purpose."""


class ProfileError(WavecalError, ValueError):
    """An instrument profile is missing, unreadable or inconsistent."""


class HeaderError(WavecalError, KeyError):
    """A FITS header lacks a value the pipeline needs (and the profile gives no default)."""

    def __str__(self) -> str:  # KeyError would otherwise quote the message
        return str(self.args[0]) if self.args else ""


class FrameError(WavecalError, ValueError):
    """A FITS frame cannot be read or holds no usable image data."""


class AnchorFileError(WavecalError, ValueError):
    """A file of user-given pixel/wavelength pairs is unreadable or malformed."""


class SolutionFileError(WavecalError, ValueError):
    """A solution file is unreadable, of an unknown schema version, or inconsistent."""
