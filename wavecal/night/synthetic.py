"""A synthetic night of invented data (the invented Tamsin Hill Observatory) for tests, demos
and benchmarks: two configurations whose lines drift through the night, science frames,
biases, flats, and a set of bad files (:func:`make_night`); or a night of an instrument with
two gratings described by one profile, binned differently (:func:`make_grating_night`)."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.time import Time

from ..profile import InstrumentProfile, profile_from_dict
from ..simulate import SimulatedArc, simulate_arc

__all__ = ["night_profile", "grating_night_profile", "GRATING_NIGHT_SETTINGS", "SyntheticNight",
           "make_night", "make_grating_night"]

BIAS_ADU = 300.0


def night_profile() -> InstrumentProfile:
    """A small invented long-slit spectrograph (64 x 1024 pixels, 300 grooves/mm)."""
    return profile_from_dict({
        "instrument": {"name": "Tamsin Hill night camera", "lamps": ["Hg", "Ar"],
                       "medium": "air"},
        "grating": {"mount": "reflection", "grooves_per_mm": 300.0, "deviation_deg": 30.0,
                    "blaze_nm": 500.0},
        "camera": {"focal_length_mm": 250.0},
        "detector": {"pixel_size_um": 15.0, "shape": [64, 1024], "bias_adu": BIAS_ADU,
                     "saturation_adu": 65000, "gain_e_per_adu": 1.2, "read_noise_e": 4.0},
        "header": {"grating_angle": {"keyword": "GRTANGLE"}, "lamps": {"keyword": "ARCLAMPS"},
                   "image_type": {"keyword": "FRAMETYP", "default": "unknown"},
                   "exposure_time": {"keyword": "EXPOSURE", "default": 0.0},
                   "observation_time": {"keyword": "DATE-OBS"},
                   "binning": {"keyword": "BINXY", "default": "1 1"}},
    })


def grating_night_profile() -> InstrumentProfile:
    """The night camera with a grating wheel: 1200 and 300 grooves/mm chosen by the GRATING
    keyword, binning along each axis from COLBIN (NAXIS1) and ROWBIN (NAXIS2)."""
    return profile_from_dict({
        "instrument": {"name": "Tamsin Hill night camera with grating wheel", "medium": "air"},
        "grating": {"mount": "reflection", "deviation_deg": 30.0},
        "gratings": [{"name": "G1200", "grooves_per_mm": 1200.0, "blaze_nm": 750.0},
                     {"name": "G300", "grooves_per_mm": 300.0, "blaze_nm": 500.0}],
        "camera": {"focal_length_mm": 250.0},
        "detector": {"pixel_size_um": 15.0, "shape": [64, 1024], "bias_adu": BIAS_ADU,
                     "saturation_adu": 65000, "gain_e_per_adu": 1.2, "read_noise_e": 4.0},
        "header": {"grating": {"keyword": "GRATING"},
                   "grating_angle": {"keyword": "GRTANGLE"}, "lamps": {"keyword": "ARCLAMPS"},
                   "image_type": {"keyword": "FRAMETYP", "default": "unknown"},
                   "exposure_time": {"keyword": "EXPOSURE", "default": 0.0},
                   "observation_time": {"keyword": "DATE-OBS"},
                   "binning_x": {"keyword": "COLBIN", "default": 1},
                   "binning_y": {"keyword": "ROWBIN", "default": 1}},
    })


#: The settings of :func:`make_grating_night`: grating, nominal central wavelength (nm),
#: binning (along rows, along columns) and lamps. The 1200/mm grating covers only ~50 nm on the
#: 1024 pixels: at 640 nm a Ne+Ar lamp puts about a dozen listed lines on it (Hg+Ar gave 4-6
#: near 785-826 nm, too few to identify).
GRATING_NIGHT_SETTINGS = (("G1200", 640.0, (1, 1), "Ne+Ar"), ("G300", 600.0, (2, 1), "Hg+Ar"))


@dataclass(frozen=True)
class SyntheticNight:
    """What :func:`make_night` wrote: file name -> expected kind, and the true model of every
    arc and science frame (a :class:`~wavecal.simulate.SimulatedArc`)."""

    root: Path
    profile: InstrumentProfile
    kinds: dict[str, str]
    truth: dict[str, SimulatedArc]
    configuration: dict[str, int]
    bad: dict[str, str]


def make_night(root: str | Path, *, seed: int = 7, n_arcs: int = 4, n_science: int = 3,
               n_bias: int = 3, n_flats: int = 1, drift_px_per_hour: float = 0.8,
               bad_files: bool = True) -> SyntheticNight:
    """Write a synthetic night into ``root``: two configurations (nominal central wavelengths
    600 and 810 nm), each with ``n_arcs`` arcs and ``n_science`` science frames spread over a
    night whose lines drift by ``drift_px_per_hour`` (camera-axis pixel moving linearly in
    time)."""
    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    profile = night_profile()
    rng = np.random.default_rng(seed)
    start = Time("2025-03-14T19:00:00", scale="utc")
    kinds, truth, config, bad = {}, {}, {}, {}
    n = 0
    # Settings an observer would choose for an Hg+Ar lamp: its lines reach close to both ends of
    # the detector, so each solution is measured, not extrapolated, over nearly all of it. With
    # the default seed the true ranges are about 530-727 nm (listed lines from Hg 546.07 to
    # Ar I 714.70 nm, within ~90 px of either end; the Ar II lines, 413-502 nm, whose strengths
    # on the Ar I scale rest on one bridge line and two unconfirmed ASD values, stay off the
    # detector) and 672-869 nm (Ar I 675.28 to 866.79 nm, within ~15 px of either end). At 520
    # nm the listed lines stopped at Hg 579.07 nm, a third of the detector short of its red
    # end; at 760 nm they began ~95 px after its blue end.
    for c, centre in enumerate((600.0, 810.0)):
        hours = np.sort(np.concatenate([np.linspace(0.0, 8.0, n_arcs),
                                        rng.uniform(0.3, 7.7, n_science)]))
        is_arc = np.isin(hours, np.linspace(0.0, 8.0, n_arcs))
        for h, arc in zip(hours, is_arc):
            n += 1
            date = (start + float(h) * u.hour).isot
            sim = simulate_arc(profile, seed=seed + c, central_wavelength_nm=centre,
                               axis_error_px=drift_px_per_hour * h, noise_seed=seed + 100 * n,
                               bias_adu=BIAS_ADU, missing_fraction=0.05, date_obs=date,
                               exposure_s=20.0 if arc else 600.0)
            name = _write_frame(root, n, sim, arc)
            kinds[name] = "arc" if arc else "science"
            truth[name] = sim
            config[name] = c
    for k in range(n_bias):
        data = (BIAS_ADU + rng.normal(0.0, 3.0, (64, 1024))).astype(np.float32)
        h = fits.Header({"FRAMETYP": "bias", "EXPOSURE": 0.0,
                         "DATE-OBS": (start + k * u.minute).isot})
        fits.PrimaryHDU(data, h).writeto(root / f"bias_{k + 1:02d}.fits")
        kinds[f"bias_{k + 1:02d}.fits"] = "bias"
    for k in range(n_flats):
        data = (BIAS_ADU + 2e4 + rng.normal(0.0, 50.0, (64, 1024))).astype(np.float32)
        h = fits.Header({"FRAMETYP": "flat", "EXPOSURE": 5.0, "GRTANGLE": 5.0})
        fits.PrimaryHDU(data, h).writeto(root / f"flat_{k + 1:02d}.fits")
        kinds[f"flat_{k + 1:02d}.fits"] = "flat"
    if bad_files:
        some_arc = truth[next(k for k in kinds if kinds[k] == "arc")]
        raw = fits.HDUList([fits.PrimaryHDU(some_arc.data, some_arc.header)])
        path = root / "bad_truncated.fits"
        raw.writeto(path)
        path.write_bytes(path.read_bytes()[:40000])
        bad["bad_truncated.fits"] = "truncated"
        (root / "bad_notfits.fits").write_text("this is not a FITS file\n")
        bad["bad_notfits.fits"] = "not a FITS file"
        h = some_arc.header.copy()
        fits.PrimaryHDU(np.full(some_arc.data.shape, np.nan, np.float32), h).writeto(
            root / "bad_nan.fits")
        bad["bad_nan.fits"] = "NaN or infinite"
        h = some_arc.header.copy()
        del h["GRTANGLE"]
        fits.PrimaryHDU(some_arc.data, h).writeto(root / "bad_nokeyword.fits")
        bad["bad_nokeyword.fits"] = "GRTANGLE"
        dark = (BIAS_ADU + rng.normal(0.0, 3.0, some_arc.data.shape)).astype(np.float32)
        fits.PrimaryHDU(dark, some_arc.header.copy()).writeto(root / "bad_nolines.fits")
        bad["bad_nolines.fits"] = "lines"
        h = some_arc.header.copy()
        h["FRAMETYP"] = "object"
        h["GRTANGLE"] = 12.0
        del h["ARCLAMPS"]
        fits.PrimaryHDU(some_arc.data, h).writeto(root / "bad_noarc.fits")
        bad["bad_noarc.fits"] = "no usable arc"
        kinds.update({"bad_truncated.fits": "unknown", "bad_notfits.fits": "unknown",
                      "bad_nan.fits": "arc", "bad_nokeyword.fits": "arc",
                      "bad_nolines.fits": "arc", "bad_noarc.fits": "science"})
    return SyntheticNight(root, profile, kinds, truth, config, bad)


def make_grating_night(root: str | Path, *, seed: int = 7, n_arcs: int = 2, n_science: int = 2,
                       drift_px_per_hour: float = 0.3) -> SyntheticNight:
    """Write a night of one instrument with two gratings into ``root``: arcs and science frames
    of each setting of :data:`GRATING_NIGHT_SETTINGS` (the 1200/mm grating unbinned, the
    300/mm one binned by two along the slit: ROWBIN 2, COLBIN 1), interleaved in time, under one
    profile (:func:`grating_night_profile`); no bias, flat or bad files. ``configuration``
    gives each frame's index in :data:`GRATING_NIGHT_SETTINGS`."""
    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    wheel = grating_night_profile()
    start = Time("2025-03-15T19:00:00", scale="utc")
    rng = np.random.default_rng(seed)
    kinds, truth, config = {}, {}, {}
    frames = []
    for c in range(len(GRATING_NIGHT_SETTINGS)):
        arcs = np.linspace(0.0, 8.0, n_arcs)
        frames += [(h, c, True) for h in arcs]
        frames += [(float(h), c, False) for h in rng.uniform(0.3, 7.7, n_science)]
    for n, (h, c, arc) in enumerate(sorted(frames), start=1):
        grating, centre, bins, lamps = GRATING_NIGHT_SETTINGS[c]
        sim = simulate_arc(wheel.with_grating(grating), lamps=lamps, seed=seed + c,
                           central_wavelength_nm=centre, axis_error_px=drift_px_per_hour * h,
                           noise_seed=seed + 100 * n, bias_adu=BIAS_ADU, missing_fraction=0.05,
                           binning=bins, date_obs=(start + float(h) * u.hour).isot,
                           exposure_s=20.0 if arc else 600.0)
        name = _write_frame(root, n, sim, arc)
        kinds[name] = "arc" if arc else "science"
        truth[name] = sim
        config[name] = c
    return SyntheticNight(root, wheel, kinds, truth, config, {})


def _write_frame(root: Path, n: int, sim: SimulatedArc, arc: bool) -> str:
    """Write frame ``n`` of a night (an arc, or an object frame without lamps); its file name."""
    name = f"{'arc' if arc else 'obj'}_{n:04d}.fits"
    header = sim.header.copy()
    if not arc:
        header["FRAMETYP"] = "object"
        del header["ARCLAMPS"]
    fits.PrimaryHDU(sim.data, header).writeto(root / name)
    return name
