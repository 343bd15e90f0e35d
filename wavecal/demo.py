"""The bundled demo frames: synthetic arcs of invented instruments, with known truth."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ._resources import data_folder

__all__ = ["DemoCase", "demo_cases", "DEMO_MANIFEST"]

#: Demo frames shipped in ``demo_frames/``: file, bundled profile, title, lamps and the
#: simulator seed that made it (see :func:`write_demo_frames`).
DEMO_MANIFEST = (
    ("tho_longslit_hgar.fits", "tho_longslit",
     "Tamsin Hill long-slit, Hg+Ar, reflection grating 1200/mm", ("Hg", "Ar"), 2),
    ("tho_transmission_ne.fits", "tho_transmission",
     "Tamsin Hill compact spectrograph, Ne, transmission grating 600/mm, wavelength down the "
     "columns", ("Ne",), 2),
    ("tho_approximate_hgne.fits", "tho_approximate",
     "Tamsin Hill outreach spectrograph, Hg+Ne, geometry unknown", ("Hg", "Ne"), 2),
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
    return [DemoCase(Path(str(folder / name)), profile, title)
            for name, profile, title, _, _ in DEMO_MANIFEST]


def write_demo_frames(folder: str | Path) -> list[Path]:
    """Simulate the demo frames into ``folder`` (how ``demo_frames/`` was made).

    Each is :func:`wavecal.simulate.simulate_arc` of its bundled profile with the manifest's
    lamps and seed, 25 cosmic rays, 10 hot pixels and one saturated line, written with lossless
    FITS tile compression.
    """
    from .profile import load_profile
    from .simulate import simulate_arc

    folder = Path(folder)
    written = []
    for name, profile_name, _, lamps, seed in DEMO_MANIFEST:
        arc = simulate_arc(load_profile(profile_name), seed=seed, lamps=lamps, cosmic_rays=25,
                           hot_pixels=10, saturate=1)
        written.append(arc.write(folder / name, overwrite=True, compress=True))
    return written
