"""Blind line identification: a hypothesis search over the physical parameters, then consensus.

The method, in three steps (documented in the README, "How lines are identified"):

1. **Voting (a Hough transform over the grating equation).** For a grid of camera focal lengths
   across the prior, every pair (observed peak, listed line) fixes the grating angle at which that
   line would land on that peak. Each pair votes for its angle; correct pairs pile up at the true
   angle while chance pairs spread evenly. The best-voted (angle, focal length) cells are the
   hypotheses. Observed peak heights are not used, so lamp-to-list intensity differences do not
   matter.
2. **Consensus (RANSAC-style refinement).** Each hypothesis is refined by alternating association
   (each peak to the nearest predicted line within a tolerance, one-to-one) and a least-squares
   fit of the physical parameters with their priors, while the tolerance shrinks. Its consensus
   is the number of peaks it explains at the final tolerance.
3. **Significance and ambiguity.** A hypothesis is only accepted when its consensus is far above
   what chance coincidences with the line list would give (a binomial tail with a trials factor
   for the search and for the fitted parameters). Distinct runner-up solutions with nearly as
   much consensus make the identification ambiguous.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, stats

from .model_setup import PriorBox
from .optics import GratingModel

__all__ = ["Association", "Hypothesis", "Identification", "associate", "identify_lines",
           "chance_log10_probability", "coincidence_probabilities", "blend_distance_px",
           "BLEND_INTENSITY_RATIO", "LOCAL_DENSITY_FRACTION", "AMBIGUITY_DECADES",
           "AMBIGUITY_FRACTION"]

#: Coincidences the refinement can buy beyond the searched grid (tilt and offset within their
#: priors); the searched grating angle and focal length are paid for by the trials factor.
_SEARCH_SLACK_PARAMETERS = 2

#: Parameters the consensus step may adjust, in the order they are freed.
_STAGE_PARAMETERS = (
    ("grating_angle_deg", "focal_length_mm"),
    ("grating_angle_deg", "focal_length_mm", "tilt_deg"),
    ("grating_angle_deg", "focal_length_mm", "tilt_deg", "axis_pixel"),
)
#: The same for an unknown geometry, whose effective model needs its curvature (tilt) from the
#: start and a distortion term to follow the true dispersion curve.
_EFFECTIVE_STAGE_PARAMETERS = (
    ("grating_angle_deg", "focal_length_mm", "tilt_deg"),
    ("grating_angle_deg", "focal_length_mm", "tilt_deg", "axis_pixel"),
    ("grating_angle_deg", "focal_length_mm", "tilt_deg", "axis_pixel", "distortion_3"),
    ("grating_angle_deg", "focal_length_mm", "tilt_deg", "axis_pixel", "distortion_3",
     "distortion_4"),
)
#: A listed neighbour fainter than this fraction of a line (list intensities) does not make it
#: a blend: at 1.5 FWHM it moves the centre by well under a tenth of a pixel.
BLEND_INTENSITY_RATIO = 0.1

#: Half-width, as a fraction of the detector, of the neighbourhood over which the listed lines'
#: density around a peak is counted for the chance-coincidence rate.
LOCAL_DENSITY_FRACTION = 0.1

#: A distinct rival whose chance probability is within this many decades of the best one's makes
#: the identification ambiguous.
AMBIGUITY_DECADES = 2.0
#: ... or within this fraction of the best one's decades, when that is more.
AMBIGUITY_FRACTION = 0.2

#: Angle bins on either side of a voting cell over which the chance rate of votes is averaged.
_CHANCE_WINDOW_BINS = 15

#: Prior width (pixels) of a distortion coefficient during the consensus step.
_DISTORTION_PRIOR_PX = 20.0


@dataclass(frozen=True)
class Association:
    """One-to-one pairing of observed peaks with listed lines under a model.

    Attributes
    ----------
    peak : ndarray of int
        Index of each paired peak.
    line : ndarray of int
        Index of its line in the line list.
    offset_px : ndarray of float
        Observed minus predicted position (pixels).
    crowded : ndarray of bool
        Another listed line lies within the blend distance of the paired line's position.
    """

    peak: np.ndarray
    line: np.ndarray
    offset_px: np.ndarray
    crowded: np.ndarray

    def __len__(self) -> int:
        return int(self.peak.size)


@dataclass(frozen=True)
class Hypothesis:
    """A refined identification hypothesis.

    Attributes
    ----------
    model : GratingModel
        The physical model after refinement (no distortion term).
    association : Association
        Peaks explained at the final tolerance.
    tolerance_px : float
        Final association tolerance.
    log10_chance : float
        log10 of the probability that chance coincidences explain as many peaks.
    """

    model: GratingModel
    association: Association
    tolerance_px: float
    log10_chance: float

    @property
    def n_matched(self) -> int:
        """Number of peaks explained."""
        return len(self.association)

    @property
    def rms_px(self) -> float:
        """RMS of the association offsets (pixels)."""
        off = self.association.offset_px
        return float(np.sqrt(np.mean(off**2))) if off.size else float("nan")


@dataclass(frozen=True)
class Identification:
    """Outcome of the blind search.

    Attributes
    ----------
    best : Hypothesis or None
        The hypothesis with the largest consensus, None when no hypothesis survived.
    runner_up : Hypothesis or None
        The best hypothesis that disagrees with ``best`` by more than a pixel somewhere on the
        detector.
    n_candidates : int
        Hypotheses refined.
    log10_trials : float
        log10 of the number of independent hypotheses the search examined.
    """

    best: Hypothesis | None
    runner_up: Hypothesis | None
    n_candidates: int
    log10_trials: float
    notes: tuple[str, ...] = field(default=())

    @property
    def ambiguous(self) -> bool:
        """True when a distinct solution is nearly as significant as the best one.

        "Nearly": its chance probability is within :data:`AMBIGUITY_DECADES` decades of the best
        one's, or within :data:`AMBIGUITY_FRACTION` of the best one's decades when that is more.
        """
        if self.best is None or self.runner_up is None:
            return False
        best, alt = self.best.log10_chance, self.runner_up.log10_chance
        return alt - best < max(AMBIGUITY_DECADES, AMBIGUITY_FRACTION * abs(best))


def chance_log10_probability(n_matched: int, coincidence: np.ndarray, n_free: int) -> float:
    """log10 probability that chance coincidences explain ``n_matched`` peaks or more.

    Each peak has its own probability of landing within the association window of some listed
    line by chance (:func:`coincidence_probabilities`): high where the list is dense, near zero
    where it lists nothing. The number of chance coincidences then follows a Poisson-binomial
    law, approximated by a Poisson law of the same mean (Le Cam's theorem; it slightly
    overstates the tail, i.e. errs on the side of caution).

    Parameters
    ----------
    n_matched : int
        Peaks explained.
    coincidence : ndarray
        Chance-coincidence probability of every peak available.
    n_free : int
        Parameters adjusted to the data; each may buy one coincidence, so that many matches are
        discounted.
    """
    k = max(n_matched - n_free, 0)
    if k == 0:
        return 0.0
    mean = float(np.sum(np.clip(coincidence, 0.0, 1.0)))
    return float(stats.poisson.logsf(k - 1, max(mean, 1e-12)) / np.log(10))


def coincidence_probabilities(model: GratingModel, x: np.ndarray, lines_nm: np.ndarray,
                              tolerance_px: float) -> np.ndarray:
    """Probability that each peak falls within ``tolerance_px`` of a listed line by chance.

    The listed lines' density is taken locally, around each peak's position under ``model``
    (over :data:`LOCAL_DENSITY_FRACTION` of the detector on either side), so that a hypothesis
    placing the detector where the list is dense pays for it, and a peak where the list has
    nothing to offer (an unlisted line) costs nothing.
    """
    x = np.asarray(x, float)
    pos = np.sort(model.pixel(np.asarray(lines_nm, float)))
    pos = pos[np.isfinite(pos)]
    half = max(LOCAL_DENSITY_FRACTION * model.n_pixels, 10.0 * tolerance_px)
    count = np.searchsorted(pos, x + half, side="right") - np.searchsorted(pos, x - half)
    density = count / (2.0 * half)
    return 1.0 - np.exp(-2.0 * tolerance_px * density)


def associate(model: GratingModel, x: np.ndarray, lines_nm: np.ndarray, tolerance_px: float,
              *, blend_px: float = 0.0, intensity: np.ndarray | None = None) -> Association:
    """Pair each peak with the nearest predicted line within ``tolerance_px``, one-to-one.

    Parameters
    ----------
    model : GratingModel
        Model predicting line positions.
    x : ndarray
        Peak centres (pixels).
    lines_nm : ndarray
        Listed wavelengths, sorted.
    tolerance_px : float
        Largest accepted |observed − predicted| (pixels).
    blend_px : float
        Lines closer than this to another listed line are marked ``crowded`` ...
    intensity : ndarray, optional
        ... unless that neighbour's listed intensity is below :data:`BLEND_INTENSITY_RATIO`
        of the line's own (a faint neighbour hardly moves the centre).
    """
    predicted = model.pixel(lines_nm)
    finite = np.isfinite(predicted)
    pred_idx = np.flatnonzero(finite)
    empty = Association(np.empty(0, int), np.empty(0, int), np.empty(0), np.empty(0, bool))
    if pred_idx.size == 0 or x.size == 0:
        return empty
    order = np.argsort(predicted[pred_idx])
    pos = predicted[pred_idx][order]
    idx = pred_idx[order]
    j = np.clip(np.searchsorted(pos, x), 1, pos.size - 1) if pos.size > 1 else np.zeros(x.size, int)
    if pos.size > 1:
        left_closer = np.abs(x - pos[j - 1]) <= np.abs(x - pos[j])
        j = np.where(left_closer, j - 1, j)
    offset = x - pos[j]
    ok = np.abs(offset) <= tolerance_px
    peak = np.flatnonzero(ok)
    if peak.size == 0:
        return empty
    slot = j[ok]
    off = offset[ok]
    # one-to-one: where several peaks claim one line keep the closest
    keep = np.ones(peak.size, bool)
    order2 = np.lexsort((np.abs(off), slot))
    s_sorted = slot[order2]
    dup = np.r_[False, s_sorted[1:] == s_sorted[:-1]]
    keep[order2[dup]] = False
    peak, slot, off = peak[keep], slot[keep], off[keep]
    gaps = np.diff(pos)
    weight = np.ones(pos.size) if intensity is None else np.asarray(intensity, float)[idx]
    left_close = np.r_[False, gaps < blend_px]
    right_close = np.r_[gaps < blend_px, False]
    left_strong = np.r_[False, weight[:-1] >= BLEND_INTENSITY_RATIO * weight[1:]]
    right_strong = np.r_[weight[1:] >= BLEND_INTENSITY_RATIO * weight[:-1], False]
    crowded = ((left_close & left_strong) | (right_close & right_strong))[slot]
    return Association(peak=peak, line=idx[slot], offset_px=off, crowded=crowded)


def _vote_grid(model: GratingModel, box: PriorBox, n_pixels: int, tolerance_px: float):
    """Focal lengths to scan and the grating-angle bin width worth one pixel."""
    f0, df = box.focal_length_mm
    rel_step = 2.0 * tolerance_px / max(n_pixels, 16)
    n_half = int(np.ceil((df / f0) / rel_step))
    focal = f0 * (1.0 + rel_step * np.arange(-n_half, n_half + 1))
    centre = 0.5 * (n_pixels - 1)
    dlam_dx = abs(float(model.dispersion(centre)))
    h = 1e-4
    dlam_dphi = abs(float(model.with_parameters(grating_angle_deg=model.grating_angle_deg + h)
                          .wavelength(centre) - model.wavelength(centre))) / h
    deg_per_px = dlam_dx / max(dlam_dphi, 1e-12)
    return focal, deg_per_px


def _votes_for_focal(model: GratingModel, x: np.ndarray, lines_nm: np.ndarray,
                     phi_samples: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Grating angles at which each listed line would land on each peak (all crossings)."""
    curves = model.with_parameters(grating_angle_deg=phi_samples[:, None]).wavelength(x[None, :])
    lo = np.minimum(curves[:-1], curves[1:])  # (segments, peaks)
    hi = np.maximum(curves[:-1], curves[1:])
    i_lo = np.searchsorted(lines_nm, lo, side="left")
    i_hi = np.searchsorted(lines_nm, hi, side="right")
    counts = (i_hi - i_lo).ravel()
    total = int(counts.sum())
    if total == 0:
        return np.empty(0), np.empty(0, int)
    seg_idx = np.repeat(np.arange(counts.size), counts)
    first = np.repeat(i_lo.ravel(), counts)
    within = np.arange(total) - np.repeat(np.cumsum(counts) - counts, counts)
    line_idx = first + within
    seg, peak = np.divmod(seg_idx, x.size)
    lam0 = curves[seg, peak]
    lam1 = curves[seg + 1, peak]
    frac = (lines_nm[line_idx] - lam0) / np.where(lam1 != lam0, lam1 - lam0, 1.0)
    phi = phi_samples[seg] + frac * (phi_samples[seg + 1] - phi_samples[seg])
    return phi, peak


def _tilt_grid(model: GratingModel, box: PriorBox, tolerance_px: float) -> np.ndarray:
    """Detector tilts to scan: only the nominal one, unless the geometry is unknown.

    For an unknown geometry the curvature of the dispersion is unknown; the tilt of the
    effective model sets it, so it is scanned in steps that move the detector's edge by at most
    two tolerances (at most 9 steps).
    """
    tau0, dtau = box.tilt_deg
    if not box.effective:
        return np.array([tau0])
    edge = np.array([0.0, model.n_pixels - 1.0])
    lam = model.wavelength(edge)
    moved = model.with_parameters(tilt_deg=tau0 + 1.0).pixel(lam)
    px_per_deg = float(np.nanmax(np.abs(moved - edge))) if np.all(np.isfinite(moved)) else 1.0
    n_steps = int(np.clip(np.ceil(2 * dtau * px_per_deg / (2 * tolerance_px)), 1, 8))
    return np.linspace(tau0 - dtau, tau0 + dtau, n_steps + 1) if n_steps > 1 else np.array([tau0])


def _candidates(model: GratingModel, box: PriorBox, x: np.ndarray, lines_nm: np.ndarray,
                n_pixels: int, *, tolerance_px: float, max_candidates: int):
    """Best-voted (grating angle, focal length, tilt) cells, most significant first.

    Every peak votes at most once in a cell (a cell spans three angle bins, so that a pair
    landing near a bin edge still counts). A cell's votes are compared with the votes chance
    coincidences would give it: the same peaks' votes averaged over the neighbouring angles
    (:data:`_CHANCE_WINDOW_BINS` on either side), which follows the line list's density where
    that cell puts the detector. Cells are ranked by the Poisson significance of their excess,
    so a dense stretch of the list does not win by its density alone. Distinct cells must
    predict the detector's wavelengths differently (:func:`_distinct`).
    """
    focal, deg_per_px = _vote_grid(model, box, n_pixels, tolerance_px)
    tilts = _tilt_grid(model, box, tolerance_px)
    phi0, dphi = box.grating_angle_deg
    # the detector offset is not scanned: it shifts lines like the grating angle does, so the
    # angle range is widened by the angle equivalent of the offset's prior (an effective
    # geometry's angle range has its own margin already)
    half = 1.02 * dphi + (0.0 if box.effective else deg_per_px * box.axis_pixel[1])
    lo, hi = phi0 - half, phi0 + half
    bin_width = deg_per_px * tolerance_px
    n_bins = max(int(np.ceil((hi - lo) / bin_width)), 1)
    phi_samples = np.linspace(lo, hi, 48)
    wide = np.ones(2 * _CHANCE_WINDOW_BINS + 1)
    inside = np.ones(n_bins)  # bins of the neighbourhood that exist (fewer at the range's ends)
    neighbours = np.maximum(_centred_sum(inside, wide) - _centred_sum(inside, np.ones(3)), 1.0)
    found = []
    for tau in tilts:
        for f in focal:
            trial = model.with_parameters(focal_length_mm=float(f), tilt_deg=float(tau))
            phi, peak = _votes_for_focal(trial, x, lines_nm, phi_samples)
            if phi.size == 0:
                continue
            b = np.floor((phi - lo) / bin_width).astype(int)
            ok = (b >= 0) & (b < n_bins)
            b, peak = b[ok], peak[ok]
            raw = np.bincount(b, minlength=n_bins).astype(float)
            # one vote per peak per three-bin cell
            cast = np.zeros((n_bins + 2, x.size), bool)
            cast[b + 1, peak] = True
            cell = cast[:-2] | cast[1:-1] | cast[2:]
            votes = np.count_nonzero(cell, axis=1).astype(float)
            around = _centred_sum(raw, wide) - _centred_sum(raw, np.ones(3))
            expected = np.maximum(3.0 * around / neighbours, 0.5)
            score = -stats.poisson.logsf(votes - 1, expected)
            top = np.argpartition(score, -3)[-3:] if score.size > 3 else np.arange(score.size)
            for t in top:
                found.append((float(score[t]), lo + (t + 0.5) * bin_width, float(f), float(tau)))
    found.sort(key=lambda c: -c[0])
    chosen: list[tuple[float, float, float, float]] = []
    signatures: list[np.ndarray] = []
    for score, phi, f, tau in found:
        trial = model.with_parameters(grating_angle_deg=phi, focal_length_mm=f, tilt_deg=tau)
        signature = trial.wavelength(np.linspace(0.0, n_pixels - 1.0, 5))
        if all(_distinct(model, signature, other, tolerance_px) for other in signatures):
            chosen.append((score, phi, f, tau))
            signatures.append(signature)
        if len(chosen) >= max_candidates:
            break
    n_trials = n_bins * focal.size * tilts.size / 3.0
    return chosen, float(np.log10(max(n_trials, 1.0)))


def _centred_sum(values: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    """Sum of ``values`` over a centred window (``kernel``, odd length) at every index, as long
    as ``values`` even when the window is longer (a narrow search of a few angle bins)."""
    half = (kernel.size - 1) // 2
    return np.convolve(values, kernel, mode="full")[half:half + values.size]


def _distinct(model: GratingModel, signature: np.ndarray, other: np.ndarray,
              tolerance_px: float) -> bool:
    """True when two hypotheses' wavelengths at five points along the detector differ by more
    than four association tolerances somewhere (in pixels of the nominal dispersion)."""
    step = np.abs(model.dispersion(np.linspace(0.0, model.n_pixels - 1.0, 5)))
    return bool(np.nanmax(np.abs(signature - other) / step) > 4.0 * tolerance_px)


def _fit_parameters(model: GratingModel, x: np.ndarray, lines: np.ndarray, names: tuple[str, ...],
                    box: PriorBox) -> GratingModel:
    """Least-squares fit of ``names`` to paired positions, with Gaussian priors (pixel units)."""
    priors = box.as_dict()
    start = np.array([model.parameter(n) for n in names], dtype=float)
    scale = np.array([priors.get(n, (0.0, _DISTORTION_PRIOR_PX))[1] for n in names], dtype=float)
    nominal = np.array([priors.get(n, (0.0, 0.0))[0] for n in names], dtype=float)
    disp = np.abs(model.dispersion(x))

    def residuals(p):
        trial = model.with_parameters(**dict(zip(names, p * scale + nominal)))
        data = (trial.wavelength(x) - lines) / disp
        return np.r_[data, p]

    p0 = (start - nominal) / scale
    try:
        result = optimize.least_squares(residuals, p0, method="lm", x_scale=1.0, max_nfev=200)
        values = result.x * scale + nominal
    except (ValueError, np.linalg.LinAlgError):
        return model
    if not np.all(np.isfinite(values)):
        return model
    return model.with_parameters(**dict(zip(names, (float(v) for v in values))))


def _refine(model: GratingModel, box: PriorBox, x: np.ndarray, lines_nm: np.ndarray,
            schedule: tuple[float, ...], blend_px: float,
            intensity: np.ndarray | None) -> tuple[GratingModel, Association]:
    stages = _EFFECTIVE_STAGE_PARAMETERS if box.effective else _STAGE_PARAMETERS
    assoc = associate(model, x, lines_nm, schedule[0], blend_px=blend_px, intensity=intensity)
    for stage, tol in enumerate(schedule):
        assoc = associate(model, x, lines_nm, tol, blend_px=blend_px, intensity=intensity)
        if len(assoc) < 2:
            break
        names = stages[min(stage, len(stages) - 1)]
        names = names[: max(len(assoc) - 2, 2)]  # never more parameters than pairs allow
        model = _fit_parameters(model, x[assoc.peak], lines_nm[assoc.line], names, box)
    assoc = associate(model, x, lines_nm, schedule[-1], blend_px=blend_px, intensity=intensity)
    return model, assoc


def _is_rival(best: Hypothesis, other: Hypothesis, n_pixels: int) -> bool:
    """True when ``other`` is a different identification, not a variant of ``best``.

    A variant shares most of its (peak, line) pairs with ``best``; a rival names the peaks
    differently and disagrees with ``best`` by more than a pixel on the detector.
    """
    if other.n_matched == 0:
        return False
    shared = np.intersect1d(best.association.peak * 100003 + best.association.line,
                            other.association.peak * 100003 + other.association.line).size
    if shared >= 0.5 * other.n_matched:
        return False
    grid = np.linspace(0, n_pixels - 1, 33)
    disagreement = np.abs(other.model.pixel(best.model.wavelength(grid)) - grid)
    return bool(np.nanmax(disagreement, initial=0.0) > 1.0)


def identify_lines(model: GratingModel, box: PriorBox, x: np.ndarray, lines_nm: np.ndarray, *,
                   intensity: np.ndarray | None = None,
                   vote_weight: np.ndarray | None = None, fwhm_px: float = 3.0,
                   max_vote_peaks: int = 80, max_candidates: int = 10,
                   final_tolerance_px: float = 1.0) -> Identification:
    """Identify observed peaks with listed lines, blindly, within the prior box.

    Parameters
    ----------
    model : GratingModel
        Nominal model of the frame (sets everything the search does not vary).
    box : PriorBox
        Nominal values and search half-widths.
    x : ndarray
        Peak centres, 0-based pixels along the dispersion axis.
    lines_nm : ndarray
        Listed wavelengths (sorted), in the medium of the model.
    intensity : ndarray, optional
        Listed intensities, same order; used only to tell harmless faint neighbours from blends.
    vote_weight : ndarray, optional
        Ranking of peaks (e.g. S/N); the strongest ``max_vote_peaks`` vote.
    fwhm_px : float
        Typical line width; listed lines closer than :func:`blend_distance_px` are unresolved.
    final_tolerance_px : float
        Association tolerance of the last consensus stage.

    Returns
    -------
    Identification
    """
    x = np.asarray(x, dtype=float)
    lines_nm = np.asarray(lines_nm, dtype=float)
    if np.any(np.diff(lines_nm) < 0):
        msg = "lines_nm must be sorted by wavelength"
        raise ValueError(msg)
    n_pixels = model.n_pixels
    notes = []
    if x.size < 3 or lines_nm.size < 3:
        notes.append(f"too few peaks ({x.size}) or listed lines in range ({lines_nm.size}) to search")
        return Identification(None, None, 0, 0.0, tuple(notes))
    voters = np.arange(x.size)
    if vote_weight is not None and voters.size > max_vote_peaks:
        weight = np.nan_to_num(np.asarray(vote_weight, float), nan=-np.inf, posinf=-np.inf)
        voters = voters[np.sort(np.argsort(weight[voters], kind="stable")[-max_vote_peaks:])]
    vote_tol = 2.0 if not box.effective else 3.0
    chosen, log10_trials = _candidates(model, box, x[voters], lines_nm, n_pixels,
                                       tolerance_px=vote_tol, max_candidates=max_candidates)
    schedule = (8.0 * vote_tol, 4.0 * vote_tol, 2.0 * vote_tol, vote_tol,
                max(final_tolerance_px, 0.25))
    blend_px = blend_distance_px(fwhm_px)
    refined: list[Hypothesis] = []
    for _, phi, f, tau in chosen:
        start = model.with_parameters(grating_angle_deg=phi, focal_length_mm=f, tilt_deg=tau)
        fitted, assoc = _refine(start, box, x, lines_nm, schedule, blend_px, intensity)
        chance = coincidence_probabilities(fitted, x, lines_nm, schedule[-1])
        log10_p = chance_log10_probability(len(assoc), chance, n_free=_SEARCH_SLACK_PARAMETERS)
        refined.append(Hypothesis(fitted, assoc, schedule[-1], log10_p))
    if not refined:
        notes.append("no grating angle within the prior puts listed lines on the peaks")
        return Identification(None, None, 0, log10_trials, tuple(notes))
    refined.sort(key=lambda h: (h.log10_chance, -h.n_matched, h.rms_px))
    best = refined[0]
    runner_up = next((h for h in refined[1:] if _is_rival(best, h, n_pixels)), None)
    return Identification(best, runner_up, len(refined), log10_trials, tuple(notes))


def blend_distance_px(fwhm_px: float) -> float:
    """Listed lines closer than this (1.5 FWHM, at least a pixel) are an unresolved blend."""
    return max(1.5 * fwhm_px, 1.0)
