"""Blind-calibration accuracy on seeded synthetic arc frames with known truth.

Run from the source tree (it is a script, not collected by pytest)::

    python tests/benchmarks/evaluate.py              # 160 frames
    python tests/benchmarks/evaluate.py --quick      # 36 frames, a smoke run
    python tests/benchmarks/evaluate.py --n 300 --seed 7 --workers 2

Each case draws an instrument (reflection 150-2400 /mm, transmission, grism, or of unknown
geometry), a detector (1k-4k pixels along the dispersion, either axis, either direction,
binning 1 or 2), a lamp mix, a setting with enough usable lines (listed, first order, expected
peak S/N >= 10, unblended, not at an edge: at least 8; 5-8 for the few-line cases; at least 5
at low S/N) and the
true model within the priors, simulates the raw frame with
:func:`wavecal.simulate.simulate_arc`, writes it to FITS and runs
:func:`wavecal.calibrate.calibrate_frame` on the file with nothing but the profile.

Per frame: the largest and the RMS difference between the solution and the truth, in pixels
(``(lambda_sol(x) - lambda_true(x)) / |d lambda_true/dx|``) over the range of the identified lines
(``Solution.covered_range_px``), along the solution's reference row. A frame is a success when the verdict is not ``failed`` and the
largest error is below 0.25 px; an ``ok`` verdict on a solution off by more is a *wrong ok*.
The note of a miss starts with the slit rows the pipeline summed and the rows actually lit (from
a second run with ``details=True``), since a wrong choice of rows ruins everything after it.

Targets: success rate >= 97 %, no wrong ok, median RMS error <= 0.03 px on frames with peak
S/N > 100.

Long slit (``--long-slit N``, default 24 frames after the regular ones, drawn from their own
random stream so that the regular frames stay as they were): reflection-grating frames like the
"grooves" category whose lines are tilted by up to 3 degrees and curved by up to 2 px (sagitta
at the slit ends), both changing linearly along the dispersion. For every two-dimensional frame
the error is also evaluated over the whole illuminated slit, ``(lambda_solution(x, y) -
lambda_true(x, y)) / |d lambda_true/dx|`` for ``x`` over the identified lines' range and ``y``
over the rows lit to at least half the maximum; a long-slit frame counts as a success only when
that whole-slit error stays below 0.25 px. Target: RMS error over the whole illuminated slit
<= 0.05 px.
"""
from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
import traceback
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from wavecal.calibrate import calibrate_frame
from wavecal.frames import frame_from_array
from wavecal.profile import InstrumentProfile, profile_from_dict
from wavecal.simulate import SimulatedArc, simulate_arc

SUCCESS_PX = 0.25
SLIT_TARGET_PX = 0.05
LONG_SLIT = "long slit"
#: Extra element of the random-stream key of the long-slit cases (the regular cases use none).
_LONG_SLIT_STREAM = 3
MAX_LINE_TILT_DEG = 3.0
MAX_LINE_CURVATURE_PX = 2.0
MIN_USABLE_LINES = 8
USABLE_SNR = 10.0
FEW_LINES = (5, 8)
LAMP_MIXES = ("Hg", "Ne", "Ar", "Kr", "Xe", "He", "Cd", "HgAr", "NeAr", "HgNe", "HgNeAr",
              "HgCd", "KrXe", "HeNeAr", "HgKr", "ZnCd", "NeKr", "HgXe")
SENSITIVITY_NM = (330.0, 1000.0)


@dataclass
class Case:
    """One drawn instrument, setting and lamp, and the simulation options."""

    index: int
    kind: str
    grooves: float
    lamps: str
    profile_dict: dict
    sim: dict
    tags: set[str] = field(default_factory=set)

    @property
    def grating(self) -> str:
        if self.kind == "approximate":
            return "approx"
        return f"{self.kind[0].upper()}{self.grooves:.0f}"


@dataclass
class Outcome:
    """What one case gave."""

    index: int
    seed: int
    grating: str
    lamps: str
    snr: float
    n_lines: int
    shape: str
    verdict: str
    max_err: float
    rms_err: float
    coverage: float
    seconds: float
    tags: tuple[str, ...]
    note: str = ""
    slit_rms_err: float = math.nan
    slit_max_err: float = math.nan

    @property
    def judged_err(self) -> float:
        """The error a success is judged on: over the whole slit for a long-slit frame."""
        return self.slit_max_err if LONG_SLIT in self.tags else self.max_err

    @property
    def success(self) -> bool:
        return self.verdict in ("ok", "suspect") and self.judged_err < SUCCESS_PX

    @property
    def wrong_ok(self) -> bool:
        return self.verdict == "ok" and not self.judged_err < SUCCESS_PX


# -- drawing cases ---------------------------------------------------------------------------
def _detector(rng, n_disp: int, axis: int, direction: int, pixel_um: float) -> dict:
    """A detector table for profile_from_dict: lit region first, a 30-pixel overscan strip."""
    n_spatial = int(rng.choice([128, 200, 256, 400, 512]))
    det = {"pixel_size_um": pixel_um, "dispersion_axis": axis, "wavelength_increases": direction,
           "saturation_adu": 65000.0, "gain_e_per_adu": float(rng.uniform(0.6, 2.5)),
           "read_noise_e": float(rng.uniform(2.5, 8.0))}
    if rng.random() < 0.6:  # overscan beside the data, along the spatial axis
        extra = 32
        if axis == 1:
            det["shape"] = [n_spatial, n_disp + extra]
            det["trim"] = {"rows": [0, n_spatial], "columns": [0, n_disp]}
            det["overscan"] = {"rows": [0, n_spatial], "columns": [n_disp + 2, n_disp + extra]}
        else:
            det["shape"] = [n_disp, n_spatial + extra]
            det["trim"] = {"rows": [0, n_disp], "columns": [0, n_spatial]}
            det["overscan"] = {"rows": [0, n_disp], "columns": [n_spatial + 2, n_spatial + extra]}
    else:
        det["shape"] = [n_spatial, n_disp] if axis == 1 else [n_disp, n_spatial]
        det["bias_adu"] = float(rng.uniform(100.0, 1500.0))
    return det


def _header(fixed_angle: bool) -> dict:
    angle = {"keyword": "GRTANGLE", "default": 0.0} if fixed_angle else {"keyword": "GRTANGLE"}
    return {"grating_angle": angle, "lamps": {"keyword": "ARCLAMPS"},
            "image_type": {"keyword": "FRAMETYP", "default": "unknown"},
            "exposure_time": {"keyword": "EXPOSURE", "default": 0.0},
            "observation_time": {"keyword": "DATE-OBS"},
            "binning": {"keyword": "BINXY", "default": "1 1"}}


def _range_for(grooves: float, n_disp: int, pixel_um: float, rng, few: bool) -> tuple[float, float]:
    """(focal length mm, approximate wavelength range nm) for a reflection/transmission setup."""
    d_nm = 1e6 / grooves
    length_mm = n_disp * pixel_um * 1e-3
    hi = min(650.0, 0.9 * d_nm * length_mm / 80.0)
    lo = max(25.0, 0.9 * d_nm * length_mm / 1500.0)
    if few:
        hi = max(lo, min(hi, 90.0))
    span = float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
    return 0.9 * d_nm * length_mm / span, span


def draw_case(index: int, base_seed: int, attempt: int, *, long_slit: bool = False) -> Case:
    """Draw case ``index`` (the category cycles with the index; ``attempt`` re-draws).

    With ``long_slit`` the case is the ``index``-th long-slit case instead, from its own random
    stream: a reflection grating (as in the "grooves" category), either dispersion axis, and
    lines tilted and curved along the slit.
    """
    if long_slit:
        rng = np.random.default_rng([base_seed, index, attempt, _LONG_SLIT_STREAM])
        category = LONG_SLIT
    else:
        rng = np.random.default_rng([base_seed, index, attempt])
        category = CATEGORIES[index % len(CATEGORIES)]
    tags = {category}
    kind = {"transmission": "transmission", "grism": "grism",
            "approximate": "approximate"}.get(category, "reflection")
    lamps = str(rng.choice(LAMP_MIXES))
    any_axis = category in ("axis/direction", "approximate", "detector size", LONG_SLIT)
    axis = int(rng.integers(2)) if any_axis else 1
    direction = int(rng.choice([1, -1])) if category in ("axis/direction", "approximate") else 1
    n_disp = int(rng.choice([1024, 2048, 3072, 4096]))
    if category == "detector size":
        n_disp = int(rng.choice([1024, 1536, 2048, 4096]))
    pixel_um = float(rng.choice([9.0, 13.5, 15.0]))
    binning = 2 if category == "binned" else 1
    few = category == "few lines"
    snr = float(np.exp(rng.uniform(np.log(80.0), np.log(3000.0))))
    if category == "low S/N":
        snr = float(rng.uniform(15.0, 40.0))
    prior = {"grating_angle_deg": 1.0, "focal_length_fraction": 0.03, "axis_pixel_px": 20.0,
             "tilt_deg": 2.0}
    if category == "wide priors":
        prior = {"grating_angle_deg": float(rng.uniform(2.0, 3.0)), "focal_length_fraction": 0.03,
                 "axis_pixel_px": float(rng.uniform(20.0, 60.0)), "tilt_deg": 2.0}
    sim = {"peak_snr": snr, "binning": binning, "lamps": lamps,
           "missing_fraction": float(rng.uniform(0.1, 0.3)),
           "unlisted_fraction": float(rng.uniform(0.05, 0.25)),
           "cosmic_rays": int(rng.integers(0, 60)), "hot_pixels": int(rng.integers(0, 30)),
           "saturate": int(rng.choice([0, 0, 0, 1, 2]))}
    if category == LONG_SLIT:
        sim |= _line_shape(rng)
    profile = {"instrument": {"name": f"THO synthetic case {index}", "medium": "air",
                              "lamps": [], "sensitivity_nm": list(SENSITIVITY_NM)},
               "detector": _detector(rng, n_disp, axis, direction, pixel_um),
               "priors": prior}
    if kind == "approximate":
        centre = float(rng.uniform(450.0, 800.0))
        dispersion = float(np.exp(rng.uniform(np.log(0.04), np.log(0.5))) * 2048 / n_disp)
        profile |= {"grating": {"mount": "approximate", "grooves_per_mm": 0.0},
                    "approximate": {"central_wavelength_nm": centre,
                                    "dispersion_nm_per_px": dispersion,
                                    "central_wavelength_uncertainty": 0.15,
                                    "dispersion_uncertainty": 0.15},
                    "header": {k: v for k, v in _header(False).items() if k != "grating_angle"}}
        return Case(index, kind, 0.0, lamps, profile, sim, tags)
    if kind == "grism":
        grooves = float(rng.choice([150.0, 300.0, 600.0]))
        apex = float(np.degrees(np.arctan(grooves * 1e-6 * 600.0 / 0.5)))
        focal, _ = _range_for(grooves, n_disp, pixel_um, rng, few)
        profile |= {"grating": {"mount": "grism", "grooves_per_mm": grooves, "deviation_deg": 0.0,
                                "prism_apex_deg": apex, "prism_index": 1.5,
                                "prism_index_slope_per_nm": -4e-5, "prism_reference_nm": 600.0},
                    "camera": {"focal_length_mm": focal}, "header": _header(True)}
        profile["priors"]["grating_angle_deg"] = 0.5
        return Case(index, kind, grooves, lamps, profile, sim, tags)
    if kind == "transmission":
        grooves = float(rng.choice([300.0, 600.0, 1200.0]))
        deviation = float(rng.uniform(20.0, 45.0))
        lam_max = 2 * np.sin(np.radians(deviation / 2)) / (grooves * 1e-6)
        focal, span = _range_for(grooves, n_disp, pixel_um, rng, few)
        top = min(0.97 * lam_max, SENSITIVITY_NM[1] - 0.55 * span)
        sim["central_wavelength_nm"] = float(rng.uniform(SENSITIVITY_NM[0] + 0.55 * span, top)) \
            if top > SENSITIVITY_NM[0] + 0.55 * span else float(0.97 * lam_max)
        profile |= {"grating": {"mount": "transmission", "grooves_per_mm": grooves,
                                "deviation_deg": deviation},
                    "camera": {"focal_length_mm": focal}, "header": _header(False)}
        return Case(index, kind, grooves, lamps, profile, sim, tags)
    grooves = float(rng.choice([150.0, 300.0, 600.0, 900.0, 1200.0, 1800.0, 2400.0]))
    deviation = float(rng.uniform(15.0, 45.0))
    focal, span = _range_for(grooves, n_disp, pixel_um, rng, few)
    lam_max = 0.95 * 2 * np.cos(np.radians(deviation / 2)) / (grooves * 1e-6)
    low = SENSITIVITY_NM[0] + 0.55 * span
    top = min(lam_max, SENSITIVITY_NM[1] - 0.55 * span)
    sim["central_wavelength_nm"] = float(rng.uniform(low, top)) if top > low else float(
        0.5 * (SENSITIVITY_NM[0] + min(lam_max, SENSITIVITY_NM[1])))
    profile |= {"grating": {"mount": "reflection", "grooves_per_mm": grooves,
                            "deviation_deg": deviation, "blaze_nm": float(rng.uniform(400, 800))},
                "camera": {"focal_length_mm": focal}, "header": _header(False)}
    return Case(index, kind, grooves, lamps, profile, sim, tags)


def _line_shape(rng) -> dict:
    """Tilt (up to 3 degrees) and sagitta (up to 2 px) of the line images, each at the first and
    last pixel along the dispersion, for :func:`~wavecal.simulate.simulate_arc`."""
    tilt = rng.uniform(-MAX_LINE_TILT_DEG, MAX_LINE_TILT_DEG)
    sagitta = rng.uniform(-MAX_LINE_CURVATURE_PX, MAX_LINE_CURVATURE_PX)
    tilt_end = np.clip(tilt + rng.uniform(-1.0, 1.0), -MAX_LINE_TILT_DEG, MAX_LINE_TILT_DEG)
    sagitta_end = np.clip(sagitta + rng.uniform(-0.5, 0.5), -MAX_LINE_CURVATURE_PX,
                          MAX_LINE_CURVATURE_PX)
    return {"line_tilt_deg": (float(tilt), float(tilt_end)),
            "line_curvature_px": (float(sagitta), float(sagitta_end))}


CATEGORIES = ("grooves", "lamps", "low S/N", "few lines", "wide priors", "axis/direction",
              "detector size", "approximate", "transmission", "grism", "binned")


def usable_lines(arc: SimulatedArc) -> int:
    """Listed first-order lines a pipeline can be expected to use.

    Expected peak S/N >= USABLE_SNR, at least two FWHM inside the detector, and no other line
    carrying more than a tenth of its flux within two FWHM (no blend).
    """
    lines = arc.lines
    x = lines["x_true"].to_numpy()
    fwhm = lines["fwhm_px"].to_numpy()
    flux = lines["flux_e"].to_numpy()
    near = np.abs(x[:, None] - x[None, :]) < 2 * fwhm[:, None]
    rival = near & (flux[None, :] > 0.1 * flux[:, None])
    np.fill_diagonal(rival, False)
    inside = (x >= 2 * fwhm) & (x <= arc.truth.n_pixels - 1 - 2 * fwhm)
    good = (inside & lines["listed"].to_numpy() & ~lines["ghost"].to_numpy()
            & (lines["snr"].to_numpy() >= USABLE_SNR) & ~rival.any(axis=1))
    return int(good.sum())


def simulate_case(index: int, base_seed: int, *,
                  long_slit: bool = False) -> tuple[Case, InstrumentProfile, SimulatedArc, int]:
    """Draw and simulate until the frame has enough usable lines (few-line cases: 5-8)."""
    for attempt in range(60):
        case = draw_case(index, base_seed, attempt, long_slit=long_slit)
        profile = profile_from_dict(case.profile_dict, source=f"<case {index}>")
        key = [base_seed, index, attempt, 1] + ([_LONG_SLIT_STREAM] if long_slit else [])
        seed = int(np.random.default_rng(key).integers(2**31))
        try:
            arc = simulate_arc(profile, seed=seed, **case.sim)
        except ValueError:
            continue
        n = usable_lines(arc)
        wanted = (FEW_LINES if "few lines" in case.tags
                  else (FEW_LINES[0], math.inf) if "low S/N" in case.tags
                  else (MIN_USABLE_LINES, math.inf))
        if wanted[0] <= n <= wanted[1]:
            return case, profile, arc, seed
    msg = f"case {index}: no setting with the wanted number of usable lines after 60 draws"
    raise RuntimeError(msg)


def _tags(case: Case, arc: SimulatedArc, profile: InstrumentProfile,
          n_lines: int) -> tuple[str, ...]:
    det = profile.detector
    tags = set(case.tags)
    tags.add(f"mount {case.kind}")
    tags.add(f"axis {det.dispersion_axis} dir {det.wavelength_increases:+d}")
    tags.add(f"{det.n_dispersion // 1024}k pixels" if det.n_dispersion >= 1024 else "<1k pixels")
    if case.kind == "reflection":
        tags.add(f"R {case.grooves:.0f}/mm")
    tags.add("peak S/N < 50" if case.sim["peak_snr"] < 50 else "peak S/N >= 50")
    if n_lines <= FEW_LINES[1]:
        tags.add(f"<= {FEW_LINES[1]} usable lines")
    if arc.lines["ghost"].any():
        tags.add("with ghosts")
    if arc.lines["saturated"].any():
        tags.add("with saturated lines")
    return tuple(sorted(tags))


def slit_errors(solution, arc: SimulatedArc) -> tuple[float, float]:
    """RMS and largest error (px) over the whole illuminated slit: x over the identified lines'
    range, y over the rows lit to at least half the maximum (NaN for a one-row frame)."""
    if arc.data.ndim != 2 or arc.slit_rows[1] - arc.slit_rows[0] < 2:
        return math.nan, math.nan
    lo, hi = solution.covered_range_px
    x = np.linspace(lo, hi, 200)[np.newaxis, :]
    y = np.arange(*arc.slit_rows, dtype=float)[:, np.newaxis]
    error = ((solution.wavelength(x, y) - arc.true_wavelength(x, y))
             / np.abs(arc.truth.dispersion(x)))
    return float(np.sqrt(np.mean(error ** 2))), float(np.max(np.abs(error)))


def run_case(args: tuple) -> Outcome:
    """Simulate, write, calibrate and score one case (``args``: index, base seed, folder, and
    optionally True for a long-slit case and the index it is shown with)."""
    index, base_seed, folder = args[:3]
    long_slit = len(args) > 3 and bool(args[3])
    shown = args[4] if len(args) > 4 else index
    case, profile, arc, seed = simulate_case(index, base_seed, long_slit=long_slit)
    n_lines = usable_lines(arc)
    path = arc.write(Path(folder) / f"case{shown:04d}.fits", overwrite=True)
    shape = "x".join(str(s) for s in arc.data.shape)
    common = dict(index=shown, seed=seed, grating=case.grating, lamps=case.lamps,
                  snr=case.sim["peak_snr"], n_lines=n_lines, shape=shape,
                  tags=_tags(case, arc, profile, n_lines))
    start = time.perf_counter()
    try:
        solution = calibrate_frame(path, profile)
    except Exception as exc:  # an evaluation records crashes as failures and goes on
        last = traceback.extract_tb(exc.__traceback__)[-1]
        note = f"{type(exc).__name__}: {exc} ({Path(last.filename).name}:{last.lineno})"
        return Outcome(**common, verdict="error", max_err=math.nan, rms_err=math.nan,
                       coverage=0.0, seconds=time.perf_counter() - start, note=note[:200])
    finally:
        path.unlink(missing_ok=True)
    seconds = time.perf_counter() - start
    if solution.model is None or solution.status == "failed":
        return _with_rows(Outcome(**common, verdict=solution.status, max_err=math.nan,
                                  rms_err=math.nan, coverage=0.0, seconds=seconds,
                                  note="; ".join(solution.reasons)[:200]), arc, profile)
    lo, hi = solution.covered_range_px
    x = np.linspace(lo, hi, 500)
    # along the solution's reference row (the truth's own for a single-row solution)
    error = ((solution.wavelength(x) - arc.true_wavelength(x, solution.reference_row))
             / np.abs(arc.truth.dispersion(x)))
    slit_rms, slit_max = slit_errors(solution, arc)
    outcome = Outcome(**common, verdict=solution.status, max_err=float(np.max(np.abs(error))),
                      rms_err=float(np.sqrt(np.mean(error ** 2))),
                      coverage=float((hi - lo) / arc.truth.n_pixels), seconds=seconds,
                      note="; ".join(solution.reasons)[:200], slit_rms_err=slit_rms,
                      slit_max_err=slit_max)
    return outcome if outcome.success else _with_rows(outcome, arc, profile)


def _with_rows(outcome: Outcome, arc: SimulatedArc, profile: InstrumentProfile) -> Outcome:
    """Add to a miss's note which slit rows the pipeline summed, against the lit ones."""
    frame = frame_from_array(arc.data, profile, header=arc.header)
    rows = calibrate_frame(frame, profile, details=True).spectrum.rows
    outcome.note = f"[rows {rows[0]}:{rows[1]}, lit {arc.slit_rows[0]}:{arc.slit_rows[1]}] " \
        + outcome.note
    return outcome


# -- report ----------------------------------------------------------------------------------
def _fmt(value: float, digits: int = 3) -> str:
    return "nan" if not np.isfinite(value) else f"{value:.{digits}f}"


def print_table(outcomes: list[Outcome]) -> None:
    print(f"{'case':>4} {'seed':>10} {'grating':>7} {'lamps':>7} {'S/N':>6} {'lines':>5} "
          f"{'frame':>10} {'verdict':>8} {'max px':>7} {'rms px':>7} {'slit rms':>8} "
          f"{'cover':>5} {'time s':>6}  note")
    for o in outcomes:
        mark = "" if o.success else ("  <-- WRONG OK" if o.wrong_ok else "  <-- miss")
        long = " (long slit)" if LONG_SLIT in o.tags else ""
        print(f"{o.index:>4} {o.seed:>10} {o.grating:>7} {o.lamps:>7} {o.snr:>6.0f} {o.n_lines:>5} "
              f"{o.shape:>10} {o.verdict:>8} {_fmt(o.max_err):>7} {_fmt(o.rms_err, 4):>7} "
              f"{_fmt(o.slit_rms_err, 4):>8} {o.coverage:>5.2f} {o.seconds:>6.2f}  "
              f"{o.note}{long}{mark}")


def _line(label: str, group: list[Outcome]) -> str:
    n = len(group)
    ok = sum(o.success for o in group)
    wrong = sum(o.wrong_ok for o in group)
    rms = [o.rms_err for o in group if o.success]
    med = _fmt(float(np.median(rms)), 4) if rms else "-"
    return f"  {label:<26} {n:>4} {ok:>5} {100.0 * ok / n:>7.1f}% {wrong:>6} {med:>9}"


def _slit_figure(label: str, group: list[Outcome]) -> str:
    values = [o.slit_rms_err for o in group if o.verdict in ("ok", "suspect")
              and np.isfinite(o.slit_rms_err)]
    if not values:
        return f"RMS error over the whole illuminated slit, {label}: no frames"
    return (f"RMS error over the whole illuminated slit, {label}: median {np.median(values):.4f} px, "
            f"max {np.max(values):.4f} px over {len(values)} frames   [target <= {SLIT_TARGET_PX} px]")


def print_summary(outcomes: list[Outcome], wall: float) -> None:
    n = len(outcomes)
    ok = sum(o.success for o in outcomes)
    wrong = sum(o.wrong_ok for o in outcomes)
    verdicts = {v: sum(o.verdict == v for o in outcomes)
                for v in ("ok", "suspect", "failed", "error")}
    bright = [o.rms_err for o in outcomes if o.snr > 100 and o.success]
    times = [o.seconds for o in outcomes]
    print()
    print(f"frames: {n}   wall time {wall:.1f} s   calibrate time median {np.median(times):.2f} s, "
          f"max {np.max(times):.2f} s")
    print(f"verdicts: {verdicts}")
    print(f"success rate (verdict not failed and max error < {SUCCESS_PX} px): {ok}/{n} = "
          f"{100.0 * ok / n:.1f} %   [target >= 97 %]")
    print(f"'ok' verdicts on a wrong solution: {wrong}   [target 0]")
    if bright:
        print(f"median RMS error, successful frames with peak S/N > 100: "
              f"{np.median(bright):.4f} px over {len(bright)} frames   [target <= 0.03 px]")
    long = [o for o in outcomes if LONG_SLIT in o.tags]
    if long:
        print(_slit_figure(f"long-slit frames (tilt <= {MAX_LINE_TILT_DEG:g} deg, curvature "
                           f"<= {MAX_LINE_CURVATURE_PX:g} px; not failed)", long))
    print(_slit_figure("frames with straight lines (not failed)",
                       [o for o in outcomes if LONG_SLIT not in o.tags]))
    print()
    print(f"  {'category':<26} {'n':>4} {'succ':>5} {'rate':>8} {'wrongok':>6} {'med rms':>9}")
    for label in sorted({t for o in outcomes for t in o.tags}):
        print(_line(label, [o for o in outcomes if label in o.tags]))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--n", type=int, default=160, help="number of frames (default 160)")
    parser.add_argument("--seed", type=int, default=2025, help="base seed (default 2025)")
    parser.add_argument("--quick", action="store_true", help="36 frames, for a smoke run")
    parser.add_argument("--workers", type=int, default=1, help="worker processes (1 or 2)")
    parser.add_argument("--long-slit", type=int, default=None,
                        help="long-slit frames added after the others (default 24; --quick 8)")
    args = parser.parse_args(argv)
    n = 36 if args.quick else args.n
    n_long = args.long_slit if args.long_slit is not None else (8 if args.quick else 24)
    start = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="wavecal-eval-") as folder:
        jobs = [(i, args.seed, folder) for i in range(n)]
        jobs += [(i, args.seed, folder, True, n + i) for i in range(n_long)]
        if args.workers > 1:
            with ProcessPoolExecutor(max_workers=min(args.workers, 2)) as pool:
                outcomes = list(pool.map(run_case, jobs))
        else:
            outcomes = [run_case(job) for job in jobs]
    print_table(outcomes)
    print_summary(outcomes, time.perf_counter() - start)
    return 0


if __name__ == "__main__":
    sys.exit(main())
