"""The bundled demo frames: synthetic arcs of invented instruments, with known truth."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ._resources import data_folder

__all__ = ["DemoCase", "demo_cases", "DEMO_MANIFEST"]

#: Demo frames shipped in ``demo_frames/`` and the bundled profile each is calibrated with.
DEMO_MANIFEST = (
    ("tho_longslit_hgar.fits", "tho_longslit",
     "Tamsin Hill long-slit, Hg+Ar, reflection grating 1200/mm"),
    ("tho_transmission_ne.fits", "tho_transmission",
     "Tamsin Hill compact spectrograph, Ne, transmission grating 600/mm, wavelength down the columns"),
    ("tho_approximate_hgne.fits", "tho_approximate",
     "Tamsin Hill outreach spectrograph, Hg+Ne, geometry unknown"),
)


@dataclass(frozen=True)
class DemoCase:
    """One demo frame: its path, the profile to use, and a title."""

    frame: Path
    profile: str
    title: str


def demo_cases() -> list[DemoCase]:
    """The demo frames shipped with the package (works from an installed package)."""
    folder = data_folder("demo_frames")
    return [DemoCase(Path(str(folder / name)), profile, title) for name, profile, title in DEMO_MANIFEST]
