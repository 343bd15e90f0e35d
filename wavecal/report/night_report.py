"""The QA page of a night: every input file with kind, configuration and status (failed and
suspect first), the drift of each configuration, RMS and line counts of the arcs, and links to
the arcs' frame reports; plus its JSON twin.

Reads a night output folder written by :func:`wavecal.night.run_night` (``summary.csv``,
``drift.csv``, ``solutions/``) and writes ``night_report.html``, ``night_report.json``,
``night_drift.png``, ``night_arcs.png`` there, and the arcs' reports into ``reports/``.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .._atomic import atomic_write_bytes, atomic_write_text
from ..errors import SolutionFileError, WavecalError
from .._json import jsonable
from ..solution import load_solution
from ..status import Status
from . import figures
from .frame_report import FrameReport, write_frame_report
from .html import esc, fmt, image, page, status_badge, table
from .spectrum_file import load_spectrum, spectrum_path

__all__ = ["NightReport", "write_night_report", "STATUS_ORDER"]

#: Order of the file table: what needs attention first.
STATUS_ORDER = (Status.FAILED, Status.SUSPECT, Status.OK, Status.SKIPPED)


@dataclass(frozen=True)
class NightReport:
    """Paths of a night report.

    Attributes
    ----------
    html, json : Path
    pngs : tuple of Path
    frames : tuple of FrameReport
        The arcs' reports written (empty when ``frames=False``).
    """

    html: Path
    json: Path
    pngs: tuple[Path, ...]
    frames: tuple[FrameReport, ...]


def _read_csv(path: Path) -> pd.DataFrame:
    try:
        return pd.read_csv(path, keep_default_na=False, na_values=[""], dtype={"reason": str})
    except (OSError, ValueError, pd.errors.EmptyDataError) as exc:
        msg = f"{path}: cannot read the night table: {exc}"
        raise WavecalError(msg) from None


def _arc_rows(summary: pd.DataFrame, night: Path, reports_dir: Path, frames: bool
              ) -> tuple[list[dict[str, Any]], list[FrameReport]]:
    arcs, written = [], []
    sel = summary[summary["kind"] == "arc"].sort_values("observation_time", na_position="last",
                                                        kind="stable")
    for _, row in sel.iterrows():
        product = str(row.get("product") or "")
        entry = {"file": row["file"], "configuration": row.get("configuration"),
                 "observation_time": row.get("observation_time"), "status": row["status"],
                 "rms_px": row.get("rms_px"), "n_used": math.nan, "n_rejected": math.nan,
                 "n_peaks": math.nan, "report": ""}
        path = night / product if product.endswith(".solution.json") else None
        if path is not None and path.is_file():
            try:
                solution = load_solution(path)
            except SolutionFileError:
                solution = None
            if solution is not None:
                stats = solution.statistics
                entry.update(n_used=stats.n_used, n_rejected=stats.n_rejected,
                             n_peaks=stats.n_peaks)
                stem = path.name[:-len(".solution.json")]
                target = reports_dir / f"{stem}.report.html"
                if frames:
                    rep = write_frame_report(solution, reports_dir, stem=stem,
                                             spectrum=load_spectrum(spectrum_path(path)))
                    written.append(rep)
                if target.is_file():
                    entry["report"] = target.relative_to(night).as_posix()
        arcs.append(entry)
    return arcs, written


def _joint_html(night: Path) -> str:
    """The joint fit of each configuration's arcs (``joint_arcs.csv``, ``joint_shared.csv``)."""
    arcs_path, shared_path = night / "joint_arcs.csv", night / "joint_shared.csv"
    if not (arcs_path.is_file() and shared_path.is_file()):
        return '<p class="note">No joint fit (a configuration needs two solved arcs).</p>'
    arcs, shared = _read_csv(arcs_path), _read_csv(shared_path)
    if arcs.empty:
        return '<p class="note">No joint fit (a configuration needs two solved arcs).</p>'
    out = ['<p>The solved arcs of each configuration are fitted together: the optics are shared, '
           "each arc has its own shift and grating angle (the drift). An arc whose lines disagree "
           "with the others is left out and keeps its own solution.</p>"]
    shared_rows = [(esc(r["configuration"]), esc(r["parameter"]),
                    f"{fmt(r['joint_value'], '.6g')} ± {fmt(r['joint_error'], '.2g')}",
                    fmt(r["single_error"], ".2g"),
                    fmt(r["single_error"] / r["joint_error"] if r["joint_error"] > 0 else math.nan,
                        ".1f"),
                    f"{fmt(r['drift_px_per_hour'], '+.3f')} ± {fmt(r['drift_sigma_px_per_hour'], '.3f')}")
                   for r in shared.to_dict(orient="records")]
    out.append(table(("configuration", "shared parameter", "joint value", "one arc alone (mean)",
                      "better by", "drift (px/hour)"), shared_rows))
    arc_rows = [(esc(r["configuration"]), esc(r["arc"]), "yes" if r["in_joint"] else "no",
                 f"{fmt(r['shift_px'], '+.3f')} ± {fmt(r['shift_sigma_px'], '.3f')}",
                 fmt(r["chi2_joint"], ".1f"), fmt(r["chi2_single"], ".1f"),
                 fmt(r["p_value"], ".2g"),
                 esc(r["note"] if isinstance(r.get("note"), str) else ""))
                for r in arcs.to_dict(orient="records")]
    out.append(table(("configuration", "arc", "joined", "shift (px)", "chi2 joint",
                      "chi2 alone", "agreement p", "note"), arc_rows,
                     row_classes=["" if r["in_joint"] else "suspect"
                                  for r in arcs.to_dict(orient="records")]))
    return "".join(out)


def write_night_report(night_dir: str | Path, *, frames: bool = True) -> NightReport:
    """Write the report of the night output folder ``night_dir``.

    Parameters
    ----------
    night_dir : str or Path
        Output folder of :func:`wavecal.night.run_night`.
    frames : bool
        Also (re)write the frame report of every arc with a solution (into ``reports/``).

    Raises
    ------
    WavecalError
        When ``night_dir`` has no readable ``summary.csv``.
    """
    night = Path(night_dir)
    summary = _read_csv(night / "summary.csv")
    drift_path = night / "drift.csv"
    drift = (_read_csv(drift_path) if drift_path.is_file()
             else pd.DataFrame(columns=["configuration", "arc", "observation_time", "shift_px"]))
    arcs, written = _arc_rows(summary, night, night / "reports", frames)
    reports = {a["file"]: a["report"] for a in arcs}

    rank = {s: i for i, s in enumerate(STATUS_ORDER)}
    ordered = summary.assign(_rank=summary["status"].map(lambda s: rank.get(s, len(rank))))
    ordered = ordered.sort_values(["_rank", "file"], kind="stable").drop(columns="_rank")
    counts = {str(k): int(v) for k, v in summary["status"].value_counts().sort_index().items()}

    pngs = {"night_drift": figures.drift_figure(drift).png(),
            "night_arcs": figures.arcs_figure(pd.DataFrame(arcs)).png()}
    rows, classes = [], []
    for _, r in ordered.iterrows():
        link = reports.get(r["file"], "")
        rows.append((esc(r["file"]), esc(r["kind"]), esc(r.get("configuration")),
                     status_badge(str(r["status"])), esc(r.get("reason")),
                     fmt(r.get("rms_px"), ".4f"), fmt(r.get("drift_px"), "+.3f"),
                     f'<a href="{esc(link)}">report</a>' if link else ""))
        classes.append(str(r["status"]))
    arc_rows = [(esc(a["file"]), esc(a["configuration"]), esc(a["observation_time"]),
                 status_badge(str(a["status"])), fmt(a["rms_px"], ".4f"), fmt(a["n_used"], "g"),
                 fmt(a["n_rejected"], "g"),
                 f'<a href="{esc(a["report"])}">report</a>' if a["report"] else "")
                for a in arcs]
    headline = " ".join(f"{status_badge(s)} {n}" for s, n in sorted(
        counts.items(), key=lambda item: rank.get(item[0], len(rank))))
    attention = [i for i, c in enumerate(classes) if c in (Status.FAILED, Status.SUSPECT)]
    file_header = ("file", "kind", "configuration", "status", "reason", "RMS (px)", "drift (px)",
                   "frame report")
    body = [f"<h1>Night report: {esc(night.resolve().name)}</h1>",
            f"<p>{len(summary)} files: {headline}</p>",
            "<h2>Needs attention</h2>",
            (table(file_header, [rows[i] for i in attention],
                   row_classes=[classes[i] for i in attention]) if attention
             else '<p class="note">Nothing: every file was calibrated or used.</p>'),
            "<h2>Drift of each configuration</h2>", image(pngs["night_drift"], "drift"),
            "<h2>The instrument through the night</h2>", _joint_html(night),
            "<h2>Arcs: RMS and line counts</h2>", image(pngs["night_arcs"], "arc quality"),
            table(("arc", "configuration", "time", "status", "RMS (px)", "lines used",
                   "rejected", "frame report"), arc_rows,
                  row_classes=[str(a["status"]) for a in arcs]),
            "<h2>Every input file (failed and suspect first)</h2>",
            table(file_header, rows, row_classes=classes)]
    png_paths = []
    for key, png in pngs.items():
        path = night / f"{key}.png"
        atomic_write_bytes(path, png, durable=False)
        png_paths.append(path)
    facts = {"schema": "wavecal-night-report", "schema_version": 1,
             "night": night.resolve().name, "counts": counts,
             "files": [{k: jsonable(v) for k, v in r.items()}
                       for r in ordered.to_dict(orient="records")],
             "drift": [{k: jsonable(v) for k, v in r.items()}
                       for r in drift.to_dict(orient="records")],
             "arcs": [{k: jsonable(v) for k, v in a.items()} for a in arcs]}
    html_path, json_path = night / "night_report.html", night / "night_report.json"
    atomic_write_text(json_path, json.dumps(facts, indent=1, allow_nan=False) + "\n",
                      durable=False)
    atomic_write_text(html_path, page(f"wavecal night {night.resolve().name}", "\n".join(body)),
                      durable=False)
    return NightReport(html=html_path, json=json_path, pngs=tuple(png_paths),
                       frames=tuple(written))
