"""Frame and night QA reports: escaping, failed frames, the JSON twin, regeneration."""
from __future__ import annotations

import argparse
import json
import re
import shutil
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from wavecal.calibrate import calibrate_frame
from wavecal.frames import frame_from_array
from wavecal.night.synthetic import night_profile
from wavecal.report import (load_spectrum, save_spectrum, spectrum_path, write_frame_report,
                            write_night_report)
from wavecal.cli.report import add_report_arguments, run_report_command
from wavecal.report.canvas import Canvas
from wavecal.simulate import simulate_arc
from wavecal.solution import load_solution

EVIL = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def calibration():
    profile = night_profile()
    sim = simulate_arc(profile, seed=11, line_tilt_deg=0.8, line_curvature_px=0.4)
    frame = frame_from_array(sim.data, profile, header=sim.header, path="arc_0001.fits")
    return calibrate_frame(frame, profile, details=True)


def test_frame_report_files_and_json_twin(calibration, tmp_path, monkeypatch):
    sol = calibration.solution
    drawn = []
    draw_text = Canvas.text

    def recording_text(self, x, y, text, **options):
        drawn.append(text)
        return draw_text(self, x, y, text, **options)

    monkeypatch.setattr(Canvas, "text", recording_text)
    rep = write_frame_report(sol, tmp_path, spectrum=calibration.spectrum)
    monkeypatch.undo()
    assert rep.html.name == "arc_0001.report.html"
    assert {p.name for p in rep.pngs} >= {"arc_0001.spectrum.png", "arc_0001.residuals.png",
                                          "arc_0001.quality.png"}
    for p in rep.pngs:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = rep.html.read_text()
    assert "http://" not in text and "https://" not in text  # self-contained
    assert text.count("data:image/png;base64,") == len(rep.pngs)
    facts = json.loads(rep.json.read_text())
    assert facts["status"] == sol.status
    assert facts["n_used"] == sol.statistics.n_used
    assert [p["name"] for p in facts["parameters"]] == list(sol.parameters.names)
    assert facts["identification_counts"]["used"] == int(
        (sol.lines["identification"] == "used").sum())
    # the spectrum figure labels the used lines with wavelength and element ("546.07 Hg")
    used = sol.lines[sol.lines["identification"] == "used"]
    labels = {f"{lam:.2f} {element}" for lam, element in zip(used["line_wavelength"], used["element"])}
    assert len(labels) == len(used) >= 8
    assert labels <= set(drawn), sorted(labels - set(drawn))
    assert sol.slit is not None and "arc_0001.slit.png" in facts["figures"]


def test_header_strings_are_escaped(calibration, tmp_path):
    sol = replace(calibration.solution, frame=f"arc{EVIL}.fits", profile=EVIL,
                  lamps=(EVIL, "Ne"), reasons=(EVIL,))
    rep = write_frame_report(sol, tmp_path, stem="evil")
    text = rep.html.read_text()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "<script>alert" not in text
    assert json.loads(rep.json.read_text())["profile"] == EVIL  # JSON keeps the raw value


def test_failed_frame_report(tmp_path):
    profile = night_profile()
    rng = np.random.default_rng(3)
    dark = (1000 + rng.normal(0, 3, (64, 1024))).astype(np.float32)
    sim = simulate_arc(profile, seed=1)
    frame = frame_from_array(dark, profile, header=sim.header, path="dark_arc.fits")
    cal = calibrate_frame(frame, profile, details=True)
    assert cal.solution.status == "failed"
    rep = write_frame_report(cal.solution, tmp_path, spectrum=cal.spectrum)
    text = rep.html.read_text()
    assert "FAILED" in text and "No usable solution" in text
    for reason in cal.solution.reasons:
        assert reason.split()[0] in text
    assert json.loads(rep.json.read_text())["status"] == "failed"


def test_regenerate_from_saved_solution(calibration, tmp_path):
    path = tmp_path / "arc_0001.solution.json"
    calibration.solution.write(path)
    save_spectrum(spectrum_path(path), calibration.spectrum.x, calibration.spectrum.flux)
    x, flux = load_spectrum(spectrum_path(path))
    assert np.allclose(flux, calibration.spectrum.flux, rtol=1e-6)
    parser = argparse.ArgumentParser()
    add_report_arguments(parser)
    assert run_report_command(parser.parse_args([str(path), "-o", str(tmp_path / "r")])) == 0
    assert (tmp_path / "r" / "arc_0001.report.html").is_file()
    facts = json.loads((tmp_path / "r" / "arc_0001.report.json").read_text())
    assert facts["rms_px"] == pytest.approx(load_solution(path).rms_px)
    assert run_report_command(parser.parse_args([str(tmp_path / "missing.solution.json")])) == 1


@pytest.fixture(scope="module")
def night_without_reports(small_night, tmp_path_factory):
    """The small night run once without reports; tests write their reports into a copy."""
    from wavecal.night import run_night
    out = tmp_path_factory.mktemp("night_without_reports") / "out"
    return run_night(small_night.root, small_night.profile, out, reports=False)


def night_output(result, tmp_path: Path) -> Path:
    """A private copy of a night's output folder."""
    return Path(shutil.copytree(result.out_dir, tmp_path / "out"))


def test_night_report_orders_failed_first(night_without_reports, tmp_path):
    res = night_without_reports
    night_output(res, tmp_path)
    assert not (tmp_path / "out" / "night_report.html").exists()
    rep = write_night_report(tmp_path / "out")
    facts = json.loads(rep.json.read_text())
    statuses = [f["status"] for f in facts["files"]]
    rank = {"failed": 0, "suspect": 1, "ok": 2, "skipped": 3}
    assert statuses == sorted(statuses, key=rank.__getitem__)
    assert len(facts["files"]) == len(res.summary)
    text = rep.html.read_text()
    links = re.findall(r'href="([^"]+)"', text)
    assert links and all(not link.startswith(("/", "http")) for link in links)
    for link in links:
        assert (tmp_path / "out" / link).is_file()
    good_arcs = [a for a in facts["arcs"] if a["status"] in ("ok", "suspect")]
    assert good_arcs and all(a["report"] and a["n_used"] > 0 for a in good_arcs)


def test_night_page_puts_problems_first_and_never_prints_nan(night_without_reports, tmp_path):
    text = write_night_report(night_output(night_without_reports, tmp_path),
                              frames=False).html.read_text()
    assert not re.search(r">\s*nan\s*<", text, flags=re.IGNORECASE)  # missing values are blank
    assert "-0.000" not in text
    attention = text.index("Needs attention")
    first_plot = text.index("data:image/png")
    failed = text.index('class="failed"')
    assert attention < failed < first_plot  # a failed file is listed before the figures


def test_peak_flags_are_written_out(calibration, tmp_path):
    from wavecal.peak_table import PeakFlag
    sol = calibration.solution
    lines = sol.lines.copy()
    lines.loc[lines.index[0], "flags"] = int(PeakFlag.SATURATED) | int(PeakFlag.EDGE)
    rep = write_frame_report(replace(sol, lines=lines), tmp_path, stem="flagged")
    text = rep.html.read_text()
    assert "SATURATED, EDGE" in text


def test_slit_map_says_when_the_lines_do_not_shift(calibration):
    import numpy as np

    from wavecal.report.figures import slit_figure
    sol = calibration.solution  # simulated with a 0.8 degree tilt and 0.4 px curvature
    flat = replace(sol, slit=replace(sol.slit, coefficients=np.zeros((1, 0))))
    centre = (180, (80 + 1100 - 130) // 2)  # middle of the map panel (row, column)
    tilted_px = np.asarray(slit_figure(sol).image())[centre]
    flat_px = np.asarray(slit_figure(flat).image())[centre]
    assert tuple(flat_px) == (255, 255, 255)  # the white label of the note
    assert tuple(tilted_px) != (255, 255, 255)  # the colour map itself


def test_numbers_that_round_to_zero_have_no_minus_sign():
    from wavecal.report.html import fmt
    assert fmt(-0.00001, ".3f") == "0.000"
    assert fmt(-0.00001, "+.3f") == "+0.000"
    assert fmt(-0.5, "+.3f") == "-0.500"
    assert fmt(float("nan"), ".3f") == "—"


def test_report_and_file_say_which_parameters_the_prior_sets(calibration, tmp_path):
    # one arc fixes the curve (central wavelength, dispersion and its change) but not every
    # physical parameter behind it: angle and camera-axis pixel move the lines almost alike
    # (common practice), so at least one of them must be reported as set by its prior
    solution = calibration.solution
    found = solution.determination
    assert all(c.set_by_data for c in found.combinations)
    assert found.prior_set, [p.to_dict() for p in found.parameters]
    rep = write_frame_report(solution, tmp_path, spectrum=calibration.spectrum)
    text = rep.html.read_text()
    assert "What the data determine" in text
    for p in found.prior_set:
        assert f"{p.label} (posterior/prior width {p.width_ratio:.2f})" in text
    path = solution.write(tmp_path / "arc.solution.json")
    data = json.loads(path.read_text())
    assert any("Set mainly by the prior" in s for s in data["determination"]["in_words"])
    assert load_solution(path).determination == found
