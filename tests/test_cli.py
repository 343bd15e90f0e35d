"""The command line: products, summary and the documented exit codes (README, "Exit codes")."""
import json

import numpy as np
import pytest
from astropy.io import fits

from wavecal.cli.main import main
from wavecal.status import ExitCode
from wavecal.profile import load_profile
from wavecal.simulate import simulate_arc


@pytest.fixture(scope="module")
def arc_file(tmp_path_factory):
    folder = tmp_path_factory.mktemp("raw")
    return simulate_arc(load_profile("tho_longslit"), seed=0, lamps=("Hg", "Ar")).write(folder / "arc 01.fits")


def test_solve_writes_products_and_exits_ok(arc_file, tmp_path, capsys):
    before = arc_file.read_bytes()
    code = main(["solve", str(arc_file), "-p", "tho_longslit", "-o", str(tmp_path)])
    out = capsys.readouterr().out
    assert code == ExitCode.OK
    assert "verdict   : OK" in out
    stem = "arc_01"  # the space in the file name is made safe
    solution = json.loads((tmp_path / f"{stem}.solution.json").read_text())
    assert solution["status"] == "ok"
    assert (tmp_path / f"{stem}.lines.csv").read_text().startswith("x,x_err")
    png = (tmp_path / f"{stem}.residuals.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    assert arc_file.read_bytes() == before  # the raw frame is never modified
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


def test_apply_command_is_wired(arc_file, tmp_path):
    assert main(["solve", str(arc_file), "-p", "tho_longslit", "-o", str(tmp_path)]) == ExitCode.OK
    out = tmp_path / "calibrated"
    assert main(["apply", str(tmp_path / "arc_01.solution.json"), str(arc_file), "-o", str(out)]) == ExitCode.OK
    written = list(out.glob("*.fits"))
    assert len(written) == 1
    with fits.open(written[0]) as hdul:
        assert hdul[0].header["WCARCSTA"] == "ok"


def test_night_command_is_wired(tmp_path, capsys):
    from wavecal.night.synthetic import make_night

    raw = tmp_path / "raw"
    make_night(raw, n_arcs=1, n_science=1, n_bias=1, n_flats=0, bad_files=False)
    code = main(["night", str(raw), "-p", "tho_longslit", "-o", str(tmp_path / "out"), "--quiet"])
    assert code in (ExitCode.OK, 3, ExitCode.FAILED)
    assert (tmp_path / "out" / "summary.csv").exists()


def test_solve_writes_a_report_unless_told_not_to(arc_file, tmp_path):
    assert main(["solve", str(arc_file), "-p", "tho_longslit", "-o", str(tmp_path / "a")]) == ExitCode.OK
    html = (tmp_path / "a" / "arc_01.report.html").read_text()
    assert "data:image/png;base64," in html and "http" not in html.split("<body", 1)[1]
    assert main(["solve", str(arc_file), "-p", "tho_longslit", "-o", str(tmp_path / "b"),
                 "--no-report"]) == ExitCode.OK
    assert not list((tmp_path / "b").glob("*.report.html"))
    assert main(["report", str(tmp_path / "a" / "arc_01.solution.json"), "-o", str(tmp_path / "c")]) == ExitCode.OK
    assert (tmp_path / "c" / "arc_01.report.html").exists()
