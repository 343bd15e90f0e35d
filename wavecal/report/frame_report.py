"""The QA report of one solution: an HTML page, its figures as PNG files and a JSON twin.

Files written into ``out_dir`` for a frame stem ``S``: ``S.report.html`` (self-contained),
``S.spectrum.png``, ``S.residuals.png``, ``S.quality.png``, ``S.slit.png`` (long-slit only) and
``S.report.json`` (the facts of the page, for monitoring).
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .._atomic import atomic_write_bytes, atomic_write_text
from .._json import jsonable
from .._stems import file_stem
from ..peak_table import describe_flags
from ..solution import Solution
from ..status import Status
from . import figures
from .html import esc, fmt, image, page, status_badge, table

__all__ = ["FrameReport", "write_frame_report", "frame_facts", "report_stem",
           "LARGE_SHIFT_SIGMA"]

#: A parameter that moved more than this many prior half-widths from its nominal value is
#: flagged: the instrument or its header may be off (common practice: the prior box is the
#: expected range of the instrument's setting).
LARGE_SHIFT_SIGMA = 1.0


@dataclass(frozen=True)
class FrameReport:
    """Paths of one frame report.

    Attributes
    ----------
    html : Path
    json : Path
    pngs : tuple of Path
    """

    html: Path
    json: Path
    pngs: tuple[Path, ...]


def report_stem(solution: Solution) -> str:
    """File stem of a solution's report: :func:`wavecal._stems.file_stem` of the frame's name
    (``"solution"`` when the frame is unknown)."""
    return file_stem(solution.frame or "solution", default="solution")


def frame_facts(solution: Solution) -> dict[str, Any]:
    """The facts shown by a frame report, JSON-safe."""
    params = []
    for p in solution.parameters.estimates:
        params.append({**{k: jsonable(v) for k, v in p.to_dict().items()},
                       "large_shift": bool(math.isfinite(p.shift_sigma)
                                           and abs(p.shift_sigma) > LARGE_SHIFT_SIGMA)})
    counts = solution.lines["identification"].astype(str).value_counts().to_dict()
    determination = solution.determination  # derived from the fit: computed once here
    return {"schema": "wavecal-frame-report", "schema_version": 1,
            **solution.summary(),
            "identification_counts": {k: int(v) for k, v in sorted(counts.items())},
            "parameters": params,
            "correlation": {"names": list(solution.parameters.names),
                            "matrix": jsonable(np.asarray(solution.parameters.correlation,
                                                           dtype=float))},
            "determination": jsonable(determination.to_dict()),
            "determination_in_words": list(determination.sentences()),
            "software_version": solution.software_version}


def _verdict_html(solution: Solution, facts: dict[str, Any]) -> str:
    words = {Status.OK: "This solution can be trusted.",
             Status.SUSPECT: "This solution may be usable but needs a look:",
             Status.FAILED: "No usable solution was found:"}
    reasons = "".join(f"<li>{esc(r)}</li>" for r in solution.reasons)
    moved = [p for p in facts["parameters"] if p["large_shift"]]
    warn = "".join(
        f'<li class="warn">{esc(p["name"])} moved {fmt(p["shift_sigma"], "+.2f")} prior '
        f"half-widths from its nominal value: the instrument or its header may be off.</li>"
        for p in moved)
    return (f"<p>{status_badge(solution.status)} {esc(words.get(solution.status, ''))}</p>"
            + (f"<ul>{reasons}{warn}</ul>" if reasons or warn else ""))


def _headline_html(solution: Solution, facts: dict[str, Any]) -> str:
    rows = [("frame", esc(solution.frame)), ("profile", esc(solution.profile)),
            ("lamps", esc(", ".join(solution.lamps))), ("medium", esc(solution.medium)),
            ("RMS", f"{fmt(facts.get('rms_px'), '.4f')} px = {fmt(facts.get('rms_nm'), '.5f')} nm"
                    f" = {fmt(facts.get('rms_kms'), '.3f')} km/s"),
            ("lines used / rejected / peaks", f"{fmt(facts.get('n_used'))} / "
             f"{fmt(facts.get('n_rejected'))} / {fmt(facts.get('n_peaks'))}"),
            ("covered pixels", " – ".join(fmt(v, ".1f") for v in solution.covered_range_px)),
            ("wavelength range (nm)", " – ".join(fmt(v, ".3f")
                                                 for v in facts.get("wavelength_range_nm", ()))
             or "—"),
            ("chance identification (log10)", fmt(facts.get("log10_chance"), ".1f")),
            ("software", esc(solution.software_version))]
    return table(("quantity", "value"), rows)


def _parameters_html(facts: dict[str, Any]) -> str:
    if not facts["parameters"]:
        return '<p class="note">No fitted parameters (no solution).</p>'
    rows, classes = [], []
    for p in facts["parameters"]:
        rows.append((esc(p.get("name")), fmt(p.get("value"), ".6g"), fmt(p.get("error"), ".2g"),
                     fmt(p.get("nominal"), ".6g"), fmt(p.get("prior"), ".3g"),
                     fmt(p.get("shift_sigma"), "+.2f")))
        classes.append("suspect" if p["large_shift"] else "")
    out = table(("parameter", "value", "uncertainty", "nominal", "prior half-width",
                 "move (prior half-widths)"), rows, row_classes=classes)
    names = facts["correlation"]["names"]
    matrix = facts["correlation"]["matrix"]
    if names and matrix:
        rows = [(esc(n), *(fmt(v, "+.2f") for v in row)) for n, row in zip(names, matrix)]
        out += "<h3>Correlations</h3>" + table(("", *names), rows)
    return out


def _determination_html(solution: Solution) -> str:
    found = solution.determination
    if not found.parameters and not found.combinations:
        return '<p class="note">Nothing determined (no solution).</p>'
    words = "".join(f"<p>{esc(sentence)}</p>" for sentence in found.sentences())
    rows, classes = [], []
    for d in found.combinations + found.parameters:
        prior = "none" if not math.isfinite(d.prior_sigma) else fmt(d.prior_sigma, ".3g")
        rows.append((esc(d.label), f"{fmt(d.value, '.7g')} ± {fmt(d.sigma, '.2g')} {esc(d.unit)}",
                     prior, fmt(d.width_ratio, ".2f"), f"{d.data_share:.0%}",
                     "the lines" if d.set_by_data else "the prior"))
        classes.append("" if d.set_by_data else "suspect")
    return words + table(("quantity", "value", "prior width (1 sigma)", "posterior / prior width",
                          "precision from the lines", "set by"), rows, row_classes=classes)


def _lines_html(solution: Solution) -> str:
    lines = solution.lines
    columns = ("x", "x_err", "fwhm", "snr", "flags", "identification", "element",
               "line_wavelength", "residual_px")
    rows, classes = [], []
    for values in zip(*(lines[c].tolist() for c in columns)):
        r = dict(zip(columns, values))
        known = math.isfinite(float(r["flags"]))
        flags = ", ".join(describe_flags(int(r["flags"]))) if known else ""
        rows.append((fmt(r["x"], ".2f"), fmt(r["x_err"], ".3f"), fmt(r["fwhm"], ".2f"),
                     fmt(r["snr"], ".0f"), esc(flags), esc(r["identification"]),
                     esc(r["element"]), fmt(r["line_wavelength"], ".4f"),
                     fmt(r["residual_px"], "+.3f")))
        ident = str(r["identification"])
        classes.append("" if ident == "used" else "failed" if ident == "rejected" else "skipped")
    return table(("x (px)", "σx", "FWHM", "S/N", "flags", "identification", "element",
                  "wavelength (nm)", "residual (px)"), rows, row_classes=classes)


def write_frame_report(solution: Solution, out_dir: str | Path, *,
                       spectrum: tuple[np.ndarray, np.ndarray] | Any | None = None,
                       stem: str | None = None) -> FrameReport:
    """Write the report of ``solution`` into ``out_dir`` (created if needed), atomically.

    Parameters
    ----------
    solution : Solution
        Any solution, failed ones included.
    out_dir : str or Path
    spectrum : (x, flux) or Spectrum, optional
        The extracted arc spectrum; without it the peaks are drawn as sticks.
    stem : str, optional
        File stem; default :func:`report_stem`.

    Returns
    -------
    FrameReport
    """
    out = Path(out_dir)
    stem = stem or report_stem(solution)
    if spectrum is not None and hasattr(spectrum, "flux"):
        spectrum = (np.asarray(spectrum.x, float), np.asarray(spectrum.flux, float))
    facts = frame_facts(solution)
    figs = {"spectrum": figures.spectrum_figure(solution, spectrum),
            "residuals": figures.residuals_figure(solution),
            "quality": figures.quality_figure(solution)}
    slit = figures.slit_figure(solution)
    if slit is not None:
        figs["slit"] = slit
    pngs = {key: fig.png() for key, fig in figs.items()}
    captions = {"spectrum": "Arc spectrum and identified lines",
                "residuals": "Residuals versus pixel and wavelength (shaded: extrapolated)",
                "quality": "Residual histogram, line width and resolving power",
                "slit": "Line tilt and curvature along the slit"}
    body = [f"<h1>Wavelength solution of {esc(Path(solution.frame).name if solution.frame else stem)}</h1>",
            "<h2>Verdict</h2>", _verdict_html(solution, facts),
            "<h2>Summary</h2>", _headline_html(solution, facts)]
    for key, png in pngs.items():
        body += [f"<h2>{esc(captions[key])}</h2>", image(png, captions[key])]
    body += ["<h2>What the data determine</h2>", _determination_html(solution),
             "<h2>Fitted physical parameters</h2>", _parameters_html(facts),
             "<h2>Every detected peak</h2>", _lines_html(solution)]
    paths = []
    for key, png in pngs.items():
        path = out / f"{stem}.{key}.png"
        atomic_write_bytes(path, png, durable=False)
        paths.append(path)
    facts["figures"] = [p.name for p in paths]
    html_path, json_path = out / f"{stem}.report.html", out / f"{stem}.report.json"
    text = json.dumps(jsonable(facts), indent=1, allow_nan=False) + "\n"
    atomic_write_text(json_path, text, durable=False)
    atomic_write_text(html_path, page(f"wavecal: {stem}", "\n".join(body)), durable=False)
    return FrameReport(html=html_path, json=json_path, pngs=tuple(paths))
