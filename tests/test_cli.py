"""The command line: products, summary and the documented exit codes (README, "Exit codes")."""
import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from astropy.io import fits

from wavecal.cli.main import main
from wavecal.status import ExitCode
from wavecal.profile import load_profile


def test_solve_writes_products_and_exits_ok(hgar_arc_file, tmp_path, capsys):
    before = hgar_arc_file.read_bytes()
    code = main(["solve", str(hgar_arc_file), "-p", "tho_longslit", "-o", str(tmp_path)])
    out = capsys.readouterr().out
    assert code == ExitCode.OK
    assert "verdict   : OK" in out
    stem = "arc_01"  # the space in the file name is made safe
    solution = json.loads((tmp_path / f"{stem}.solution.json").read_text())
    assert solution["status"] == "ok"
    assert (tmp_path / f"{stem}.lines.csv").read_text().startswith("x,x_err")
    png = (tmp_path / f"{stem}.residuals.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert hgar_arc_file.read_bytes() == before  # the raw frame is never modified
    assert main(["show", str(tmp_path / f"{stem}.solution.json")]) == ExitCode.OK


def test_failed_frame_exit_code(tmp_path, capsys):
    header = fits.Header({"GRTANGLE": 20.0, "ARCLAMPS": "Hg+Ar", "DATE-OBS": "2025-01-01T00:00:00"})
    path = tmp_path / "dark.fits"
    fits.PrimaryHDU(np.full((512, 4128), 1000, np.uint16), header=header).writeto(path)
    assert main(["solve", str(path), "-p", "tho_longslit", "-o", str(tmp_path / "out")]) == ExitCode.FAILED
    assert "FAILED" in capsys.readouterr().out


def test_bad_input_names_the_file(tmp_path, capsys):
    bogus = tmp_path / "not_fits.fits"
    bogus.write_text("this is not a FITS file")
    assert main(["solve", str(bogus), "-p", "tho_longslit", "-o", str(tmp_path)]) == ExitCode.BAD_INPUT
    assert "not_fits.fits" in capsys.readouterr().err
    assert main(["solve", str(bogus), "-p", str(tmp_path / "nope.toml")]) == ExitCode.BAD_INPUT
    assert "nope.toml" in capsys.readouterr().err


def test_missing_header_keyword_is_bad_input(tmp_path, capsys):
    path = tmp_path / "nohdr.fits"
    fits.PrimaryHDU(np.full((512, 4128), 1000, np.uint16)).writeto(path)
    assert main(["solve", str(path), "-p", "tho_longslit", "-o", str(tmp_path)]) == ExitCode.BAD_INPUT
    assert "GRTANGLE" in capsys.readouterr().err


def test_usage_errors(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["solve"])
    assert exc.value.code == ExitCode.USAGE
    with pytest.raises(SystemExit) as exc:
        main(["solve", "x.fits", "-p", "tho_longslit", "--lamps", "unobtainium"])
    assert exc.value.code == ExitCode.USAGE


def test_demo_runs_on_the_bundled_frames(tmp_path, capsys):
    assert main(["demo", "-o", str(tmp_path)]) == ExitCode.OK
    assert len(list(tmp_path.glob("*.solution.json"))) == 3
    assert capsys.readouterr().out.count("verdict   : OK") == 3


def test_plan_command_is_wired(tmp_path, capsys):
    code = main(["plan", "-p", "tho_longslit", "--central-wavelength", "600", "-o", str(tmp_path)])
    assert code in (ExitCode.OK, 3)  # 3: plan made with warnings
    assert "setup plan" in capsys.readouterr().out
    assert len(list(tmp_path.glob("*.plan.json"))) == 1


def test_apply_command_is_wired(hgar_arc_file, tmp_path):
    assert main(["solve", str(hgar_arc_file), "-p", "tho_longslit", "-o", str(tmp_path)]) == ExitCode.OK
    out = tmp_path / "calibrated"
    assert main(["apply", str(tmp_path / "arc_01.solution.json"), str(hgar_arc_file), "-o", str(out)]) == ExitCode.OK
    written = list(out.glob("*.fits"))
    assert len(written) == 1
    with fits.open(written[0]) as hdul:
        assert hdul[0].header["WCARCSTA"] == "ok"


#: The synthetic night's instrument (:func:`wavecal.night.synthetic.night_profile`) as a profile
#: file: the command line takes an instrument as a file (checked equal below).
NIGHT_PROFILE = """
[instrument]
name = "Tamsin Hill night camera"
lamps = ["Hg", "Ar"]
medium = "air"

[grating]
mount = "reflection"
grooves_per_mm = 300.0
deviation_deg = 30.0
blaze_nm = 500.0

[camera]
focal_length_mm = 250.0

[detector]
pixel_size_um = 15.0
shape = [64, 1024]
bias_adu = {bias}
saturation_adu = 65000
gain_e_per_adu = 1.2
read_noise_e = 4.0

[header]
grating_angle = {{ keyword = "GRTANGLE" }}
lamps = {{ keyword = "ARCLAMPS" }}
image_type = {{ keyword = "FRAMETYP", default = "unknown" }}
exposure_time = {{ keyword = "EXPOSURE", default = 0.0 }}
observation_time = {{ keyword = "DATE-OBS" }}
binning = {{ keyword = "BINXY", default = "1 1" }}
"""


def test_night_command_is_wired(tmp_path, capsys):
    from wavecal.night.synthetic import BIAS_ADU, make_night, night_profile

    raw = tmp_path / "raw"
    night = make_night(raw, n_arcs=1, n_science=1, n_bias=1, n_flats=0, bad_files=False)
    profile_file = tmp_path / "night.toml"
    profile_file.write_text(NIGHT_PROFILE.format(bias=float(BIAS_ADU)))
    assert replace(load_profile(profile_file), source=None) == replace(night_profile(), source=None)
    code = main(["night", str(raw), "-p", str(profile_file), "-o", str(tmp_path / "out"), "--quiet"])
    summary = pd.read_csv(tmp_path / "out" / "summary.csv").set_index("file")
    assert sorted(summary.index) == sorted(night.kinds)
    # every arc is solved and every science frame calibrated, so the run exits 0 (README,
    # "Exit codes"); an arc failing on the frame shape would leave code 4
    assert (summary["status"] == "ok").all(), summary[["kind", "status"]]
    science = [name for name, kind in night.kinds.items() if kind == "science"]
    assert all((tmp_path / "out" / summary.loc[name, "product"]).is_file() for name in science)
    assert code == ExitCode.OK


def test_solve_writes_a_report_unless_told_not_to(hgar_arc_file, tmp_path):
    assert main(["solve", str(hgar_arc_file), "-p", "tho_longslit", "-o", str(tmp_path / "a")]) == ExitCode.OK
    html = (tmp_path / "a" / "arc_01.report.html").read_text()
    assert "data:image/png;base64," in html and "http" not in html.split("<body", 1)[1]
    assert main(["solve", str(hgar_arc_file), "-p", "tho_longslit", "-o", str(tmp_path / "b"),
                 "--no-report"]) == ExitCode.OK
    assert not list((tmp_path / "b").glob("*.report.html"))
    assert main(["report", str(tmp_path / "a" / "arc_01.solution.json"), "-o", str(tmp_path / "c")]) == ExitCode.OK
    assert (tmp_path / "c" / "arc_01.report.html").exists()
