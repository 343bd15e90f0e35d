"""The nightly run: inventory, master bias, arcs, drift, assignment, calibrated science frames,
summary table and log, resumable and robust to bad files.

Output layout (``out_dir``)::

    inventory.csv        one row per file, from the headers only
    summary.csv          one row per file: kind, configuration, status, reason, solution used,
                         RMS, drift, product, whether it was (re)made in this run
    drift.csv            per configuration: arc, time, shift (px) relative to its first arc
    joint_arcs.csv       per configuration: the arcs fitted together (shared optics, own shift
                         and angle), each arc's shift and agreement, the arcs left out and why
    joint_shared.csv     per configuration: the shared parameters, joint against single-arc
                         uncertainties, and the drift in px per hour
    night.log            what happened, in plain text
    calibrations/        master bias frames
    solutions/           <stem>.solution.json of every arc (and <stem>.spectrum.npz, its
                         extracted spectrum, for the reports)
    night_report.html    the night's QA page (with night_report.json, night_*.png)
    reports/             <stem>.report.html (+ .json, .png) of every arc
    calibrated/          <stem>.wcal.fits of every science frame
    manifests/           what each product was made from (for resuming)
"""
from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .._version import __version__
from .._atomic import atomic_write_text
from ..errors import FrameError, WavecalError
from ..profile import InstrumentProfile
from ..report import write_night_report
from ..solution import load_solution
from ..status import ExitCode, Status, exit_code_for
from .assign import POLICIES, ArcPoint, assign
from .bias import BiasCheck, check_master_bias, combine_bias, read_master_bias, write_master_bias
from .drift import relative_shift
from .joint_tables import ARC_COLUMNS, SHARED_COLUMNS, night_tables
from .executors import TaskPool
from .inventory import FileRecord, Inventory, build_inventory
from .tasks import (
    arc_products,
    arc_task,
    read_manifest,
    science_task,
    sha256_file,
    verify_products,
    write_manifest,
)

__all__ = ["SUMMARY_COLUMNS", "NightResult", "run_night"]

#: Columns of ``summary.csv``.
SUMMARY_COLUMNS = ("file", "kind", "profile", "configuration", "observation_time", "status",
                   "reason", "solution_used", "rms_px", "drift_px", "product", "made")

ProgressFn = Callable[[int, int, str], None]


@dataclass(frozen=True)
class NightResult:
    """What a nightly run did.

    Attributes
    ----------
    out_dir : Path
    inventory : Inventory
    summary : pandas.DataFrame
        The content of ``summary.csv`` (:data:`SUMMARY_COLUMNS`).
    drift : pandas.DataFrame
        The content of ``drift.csv``.
    exit_code : ExitCode
        0 all good, 3 something suspect or unclassified, 4 something failed.
    n_made : int
        Products (re)made in this run (the others were up to date).
    elapsed_s : float
    """

    out_dir: Path
    inventory: Inventory
    summary: pd.DataFrame
    drift: pd.DataFrame
    exit_code: ExitCode
    n_made: int
    elapsed_s: float


class _Log:
    def __init__(self, progress: ProgressFn | None) -> None:
        self.lines: list[str] = []
        self.progress = progress

    def __call__(self, text: str) -> None:
        self.lines.append(f"{time.strftime('%Y-%m-%dT%H:%M:%S')} {text}")


def _row(rec: FileRecord, **values: Any) -> dict[str, Any]:
    row = {"file": rec.name, "kind": rec.kind, "profile": rec.profile,
           "configuration": rec.configuration, "observation_time": rec.observation_time,
           "status": "", "reason": "", "solution_used": "", "rms_px": math.nan,
           "drift_px": math.nan, "product": "", "made": False}
    row.update(values)
    return row


def _file_key(rec: FileRecord) -> dict[str, Any]:
    return {"input": rec.name, "size": rec.size, "mtime_ns": rec.mtime_ns,
            "software": __version__}


def _up_to_date(products: tuple[Path, ...], manifest: Path, key: dict[str, Any], redo: bool,
                log: _Log) -> dict[str, Any] | None:
    """The recorded result when every product exists, its manifest matches ``key`` and its bytes
    match the manifest's checksums; else None (remake it; a damaged product is logged)."""
    if redo or not all(p.is_file() for p in products):
        return None
    found = read_manifest(manifest)
    if found is None or found.get("key") != key:
        return None
    damage = verify_products(found, products)
    if damage:
        log(f"remaking {products[0].name}: {damage}")
        return None
    return found.get("result")


def _rel(path: Path | str, out: Path) -> str:
    return Path(path).relative_to(out).as_posix() if path else ""


def _clean_partials(out: Path) -> int:
    n = 0
    for p in out.rglob(".*.part"):
        p.unlink(missing_ok=True)
        n += 1
    return n


def _master_biases(inv: Inventory, out: Path, redo: bool, log: _Log
                   ) -> tuple[dict[tuple, Path], list[dict[str, Any]], int]:
    groups: dict[tuple, list[FileRecord]] = {}
    for r in inv.of_kind("bias"):
        groups.setdefault((r.profile, r.binning), []).append(r)
    masters, rows, made = {}, [], 0
    for i, ((profile, binning), recs) in enumerate(sorted(groups.items(), key=str), start=1):
        product = out / "calibrations" / f"master_bias_{i}.fits"
        manifest = out / "manifests" / f"master_bias_{i}.json"
        key = {"inputs": [_file_key(r) for r in recs], "software": __version__}
        result = _up_to_date((product,), manifest, key, redo, log)
        if result is None:
            try:
                master, rejected = combine_bias([r.path for r in recs])
            except FrameError as exc:
                rows += [_row(r, status=Status.FAILED, reason=str(exc)) for r in recs]
                log(f"master bias {i}: {exc}")
                continue
            used = [r.name for r in recs if str(r.path) not in rejected]
            write_master_bias(master, product, used)
            result = {"rejected": {Path(k).relative_to(inv.root).as_posix(): v
                                   for k, v in rejected.items()}}
            write_manifest(manifest, key, result, products=(product,))
            made += 1
            log(f"master bias {i} ({profile}, binning {binning}): {len(used)} frames combined")
        check = _check_bias(inv, profile, binning, product)
        if check.ok:
            masters[(profile, binning)] = product
            note = ""
        else:
            log(f"WARNING master bias {i} ({profile}, binning {binning}): {check.message}")
            note = f"; WARNING: {check.message}"
        rejected = result.get("rejected", {})
        for r in recs:
            if r.name in rejected:
                rows.append(_row(r, status=Status.FAILED, reason=rejected[r.name]))
            else:
                rows.append(_row(r, status=Status.OK if check.ok else Status.SUSPECT,
                                 reason=f"combined into {_rel(product, out)}{note}",
                                 product=_rel(product, out), made=made > 0))
    return masters, rows, made


def _check_bias(inv: Inventory, profile: str, binning: tuple[int, int], product: Path
                ) -> BiasCheck:
    """The master bias against up to three of the frames it is for (first, middle, last)."""
    frames = sorted((r for kind in ("arc", "science") for r in inv.of_kind(kind)
                     if r.profile == profile and r.binning == binning),
                    key=lambda r: (r.time_mjd, r.name))
    sample = [frames[k].path for k in sorted({0, len(frames) // 2, len(frames) - 1})] \
        if frames else []
    return check_master_bias(read_master_bias(product), sample, inv.profiles[profile])


def _run(fn: Callable[..., dict], jobs: list[tuple[FileRecord, dict]], *, pool: TaskPool,
         progress: ProgressFn | None, what: str) -> dict[str, dict[str, Any]]:
    results: dict[str, dict[str, Any]] = {}
    items = [kw for _, kw in jobs]
    for done, (i, res) in enumerate(pool.run(fn, items), start=1):
        results[jobs[i][0].name] = res
        if progress is not None:
            progress(done, len(jobs), f"{what} {jobs[i][0].name}: {res.get('status')}")
    return results


def _arcs(inv: Inventory, out: Path, masters: dict, redo: bool, pool: TaskPool,
          progress: ProgressFn | None, log: _Log) -> dict[str, dict[str, Any]]:
    outcome, jobs = {}, []
    for r in inv.of_kind("arc"):
        product = out / "solutions" / f"{r.stem}.solution.json"
        manifest = out / "manifests" / f"{r.stem}.arc.json"
        bias = masters.get((r.profile, r.binning))
        key = {**_file_key(r), "task": "arc", "bias": sha256_file(bias)}
        result = _up_to_date(arc_products(product), manifest, key, redo, log)
        if result is not None:
            outcome[r.name] = {**result, "made": False}
            continue
        jobs.append((r, {"path": str(r.path), "profile": inv.profile_of(r),
                         "bias_path": None if bias is None else str(bias),
                         "product": str(product), "manifest": str(manifest), "key": key}))
    log(f"arcs: {len(outcome)} up to date, {len(jobs)} to calibrate")
    for name, res in _run(arc_task, jobs, pool=pool, progress=progress, what="arc").items():
        outcome[name] = {**res, "made": True}
        log(f"arc {name}: {res['status']} {res.get('reason', '')}".rstrip())
    return outcome


def _drift(inv: Inventory, arcs: dict[str, dict[str, Any]], cross_check_px: float, log: _Log
           ) -> tuple[dict[str, list[ArcPoint]], pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    points: dict[str, list[ArcPoint]] = {}
    rows, joint_arcs, joint_shared = [], [], []
    for conf in inv.configurations():
        good = sorted((r for r in inv.of_kind("arc") if r.configuration == conf
                       and arcs.get(r.name, {}).get("status") in (Status.OK, Status.SUSPECT)),
                      key=lambda r: (r.time_mjd, r.name))
        if not good:
            continue
        sols = {}
        for r in good:
            try:
                sols[r.name] = load_solution(arcs[r.name]["product"])
            except WavecalError as exc:  # listed as failed; the night goes on
                arcs[r.name].update(status=Status.FAILED, reason=str(exc))
                log(f"arc {r.name}: {exc}")
        good = [r for r in good if r.name in sols]
        if not good:
            continue
        ref = sols[good[0].name]
        if len(good) >= 2:
            _joint(conf, good, sols, joint_arcs, joint_shared, log)
        pts = [ArcPoint(r.name, r.time_mjd, relative_shift(sols[r.name], ref)) for r in good]
        for k, p in enumerate(pts):
            if 0 < k < len(pts) - 1:
                a, b = pts[k - 1], pts[k + 1]
                frac = (p.time_mjd - a.time_mjd) / (b.time_mjd - a.time_mjd) if (
                    b.time_mjd > a.time_mjd) else 0.5
                off = p.shift_px - (a.shift_px + frac * (b.shift_px - a.shift_px))
                if abs(off) > cross_check_px:
                    res = arcs[p.name]
                    res["status"] = Status.SUSPECT
                    res["reason"] = "; ".join(filter(None, [
                        res.get("reason"), f"shift disagrees with the neighbouring arcs by "
                                           f"{off:+.2f} px"]))
                    log(f"arc {p.name}: shift disagrees with its neighbours by {off:+.2f} px")
            rows.append({"configuration": conf, "arc": p.name,
                         "observation_time": next(r for r in good
                                                  if r.name == p.name).observation_time,
                         "shift_px": p.shift_px})
        points[conf] = pts
        log(f"drift of {conf}: {len(pts)} arcs, shifts "
            + ", ".join(f"{p.shift_px:+.3f}" for p in pts) + " px")
    return (points, pd.DataFrame(rows, columns=["configuration", "arc", "observation_time",
                                                "shift_px"]),
            pd.DataFrame(joint_arcs, columns=list(ARC_COLUMNS)),
            pd.DataFrame(joint_shared, columns=list(SHARED_COLUMNS)))


def _joint(conf: str, good: list[FileRecord], sols: dict[str, Any], joint_arcs: list[dict],
           joint_shared: list[dict], log: _Log) -> None:
    """The joint fit of one configuration's solved arcs, added to the night's tables."""
    try:
        fit, arc_rows, shared_rows = night_tables(conf, [r.name for r in good],
                                                  [sols[r.name] for r in good],
                                                  [r.time_mjd for r in good])
    except ValueError as exc:  # e.g. arcs of different settings: reported, the night goes on
        log(f"joint fit of {conf}: not done ({exc})")
        return
    joint_arcs += arc_rows
    joint_shared += shared_rows
    left = ", ".join(f"{good[o.index].name} ({o.reason})" for o in fit.left_out)
    log(f"joint fit of {conf}: {len(fit.joined)} of {len(good)} arcs share the optics"
        + (f"; left out: {left}" if left else ""))


def run_night(raw_dir: str | Path,
              profiles: InstrumentProfile | Mapping[str, InstrumentProfile],
              out_dir: str | Path, *, recursive: bool = False, workers: int = 1,
              scheduler: str | None = None, policy: str = "closest-arc",
              drift_threshold_px: float = 0.05, cross_check_px: float = 0.5,
              angle_tolerance_deg: float = 0.01, profile_keyword: str = "INSTRUME",
              extra_keywords: tuple[str, ...] = (), redo: bool = False,
              progress: ProgressFn | None = None, reports: bool = True) -> NightResult:
    """Process a whole night's directory of raw FITS files.

    Parameters
    ----------
    raw_dir : str or Path
        The night's raw files; only read, never modified (it may be read-only).
    profiles : InstrumentProfile or mapping of str to InstrumentProfile
        One profile, or several chosen per file by the ``profile_keyword`` header value.
    out_dir : str or Path
        Where the products go (layout in the module docstring); created if needed.
    recursive : bool
        Also take files from sub-folders of ``raw_dir``.
    workers : int
        Local worker processes for the arcs and science frames.
    scheduler : str, optional
        Address of a Dask distributed scheduler to run them on instead (optional dependency).
    policy : {"closest-arc", "follow-drift"}
        Solution of a science frame: that of the nearest arc in time of its configuration, or,
        when the bracketing arcs' shifts differ by more than ``drift_threshold_px``, that
        solution moved by the drift interpolated linearly in time.
    cross_check_px : float
        An arc whose shift differs by more than this from the interpolation of its two time
        neighbours is marked suspect.
    angle_tolerance_deg, profile_keyword, extra_keywords
        Grouping into configurations (see :func:`~wavecal.night.inventory.build_inventory`).
    redo : bool
        Remake every product even when its manifest says it is up to date.
    progress : callable, optional
        ``progress(done, total, message)`` after each task (see
        :class:`~wavecal.night.progress.Progress`).
    reports : bool
        Write the QA reports (:func:`wavecal.report.write_night_report`) at the end.

    Returns
    -------
    NightResult
        Bad files never raise: each gets a summary row with its reason.

    Raises
    ------
    WavecalError
        When ``raw_dir`` is not a directory or ``out_dir`` is ``raw_dir``.
    """
    if policy not in POLICIES:
        msg = f"policy must be one of {POLICIES}, got {policy!r}"
        raise ValueError(msg)
    start = time.monotonic()
    raw, out = Path(raw_dir), Path(out_dir)
    if raw.is_dir() and out.exists() and out.resolve() == raw.resolve():
        msg = f"{out}: the output folder must not be the raw folder"
        raise WavecalError(msg)
    out.mkdir(parents=True, exist_ok=True)
    log = _Log(progress)
    log(f"wavecal {__version__} night run: {raw} -> {out} (policy {policy}, workers {workers}"
        + (f", scheduler {scheduler}" if scheduler else "") + ")")
    if (n := _clean_partials(out)):
        log(f"removed {n} half-written file(s) left by an interrupted run")
    inv = build_inventory(raw, profiles, recursive=recursive, profile_keyword=profile_keyword,
                          angle_tolerance_deg=angle_tolerance_deg,
                          extra_keywords=extra_keywords, exclude=[out])
    atomic_write_text(out / "inventory.csv", inv.to_dataframe().to_csv(index=False))
    log("inventory: " + inv.describe())
    if progress is not None:
        progress(0, 1, inv.describe().splitlines()[0])

    with TaskPool(workers=workers, scheduler=scheduler) as pool:  # workers start once
        masters, rows, made = _master_biases(inv, out, redo, log)
        arcs = _arcs(inv, out, masters, redo, pool, progress, log)
        points, drift, joint_arcs, joint_shared = _drift(inv, arcs, cross_check_px, log)
        atomic_write_text(out / "drift.csv", drift.to_csv(index=False))
        atomic_write_text(out / "joint_arcs.csv", joint_arcs.to_csv(index=False))
        atomic_write_text(out / "joint_shared.csv", joint_shared.to_csv(index=False))
        shifts = {p.name: p.shift_px for pts in points.values() for p in pts}
        for r in inv.of_kind("arc"):
            res = arcs[r.name]
            rows.append(_row(r, status=res["status"], reason=res.get("reason", ""),
                             solution_used=_rel(res.get("product", ""), out),
                             rms_px=res.get("rms_px", math.nan), drift_px=shifts.get(r.name, math.nan),
                             product=_rel(res.get("product", ""), out), made=res["made"]))
            made += res["made"] and "product" in res

        jobs, science_rows = [], {}
        for r in inv.of_kind("science"):
            choice = assign(r.time_mjd, points.get(r.configuration, ()), policy=policy,
                            drift_threshold_px=drift_threshold_px)
            if choice is None:
                science_rows[r.name] = _row(r, status=Status.FAILED,
                                            reason=f"no usable arc of configuration {r.configuration}")
                continue
            solution = Path(arcs[choice.arc]["product"])
            product = out / "calibrated" / f"{r.stem}.wcal.fits"
            manifest = out / "manifests" / f"{r.stem}.science.json"
            bias = masters.get((r.profile, r.binning))
            key = {**_file_key(r), "task": "science", "bias": sha256_file(bias),
                   "solution": sha256_file(solution), "shift_px": round(choice.shift_px, 6)}
            base = {"solution_used": choice.label, "drift_px": choice.drift_px,
                    "product": _rel(product, out)}
            result = _up_to_date((product,), manifest, key, redo, log)
            if result is not None:
                science_rows[r.name] = _row(r, status=result["status"], reason=result["reason"],
                                            rms_px=result.get("rms_px"), **base)
                continue
            science_rows[r.name] = _row(r, made=True, **base)
            jobs.append((r, {"path": str(r.path), "profile": inv.profile_of(r),
                             "bias_path": None if bias is None else str(bias),
                             "solution_path": str(solution), "shift_px": choice.shift_px,
                             "product": str(product), "manifest": str(manifest), "key": key}))
        log(f"science: {len(inv.of_kind('science')) - len(jobs)} up to date or unassigned, "
            f"{len(jobs)} to calibrate")
        for name, res in _run(science_task, jobs, pool=pool, progress=progress,
                              what="science").items():
            row = science_rows[name]
            row.update(status=res["status"], reason=res.get("reason", ""),
                       rms_px=res.get("rms_px", math.nan))
            if res["status"] == Status.FAILED:
                row["product"] = ""
            made += res["status"] != Status.FAILED
            log(f"science {name}: {res['status']} {res.get('reason', '')}".rstrip())
        rows += list(science_rows.values())

    for r in inv.records:
        if r.problem:
            rows.append(_row(r, status=Status.FAILED, reason=r.problem))
        elif r.kind == "flat":
            rows.append(_row(r, status=Status.SKIPPED,
                             reason="flat field: not used by the wavelength calibration"))
        elif r.kind in ("other", "unknown"):
            rows.append(_row(r, status=Status.SKIPPED,
                             reason=f"frame type {r.kind}: not processed"))
    order = {r.name: i for i, r in enumerate(inv.records)}
    rows = sorted(rows, key=lambda row: order[row["file"]])
    rows += [{**_row(FileRecord(path=inv.root / name, name=name, stem="", kind="other")),
              "status": Status.SKIPPED, "reason": reason} for name, reason in inv.ignored]
    summary = pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))
    summary["rms_px"] = pd.to_numeric(summary["rms_px"])
    atomic_write_text(out / "summary.csv", summary.to_csv(index=False))
    statuses = set(summary["status"])
    unclassified = bool(((summary["kind"] == "unknown") & (summary["status"] != Status.FAILED)).any())
    exit_code = exit_code_for(statuses)
    if exit_code == ExitCode.OK and unclassified:
        exit_code = ExitCode.SUSPECT
    elapsed = time.monotonic() - start
    counts = summary["status"].value_counts().to_dict()
    log(f"done in {elapsed:.1f} s: {len(summary)} files, "
        + ", ".join(f"{n} {s}" for s, n in sorted(counts.items()))
        + f"; {made} product(s) made; exit status {exit_code}")
    if reports:
        write_night_report(out)
        log(f"reports: {out / 'night_report.html'}")
    atomic_write_text(out / "night.log", "\n".join(log.lines) + "\n")
    return NightResult(out_dir=out, inventory=inv, summary=summary, drift=drift,
                       exit_code=exit_code, n_made=int(made), elapsed_s=elapsed)
