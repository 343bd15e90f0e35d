"""Malformed profiles, options and solution files: each is refused with exit code 1 (bad input)
or 2 (usage), one line on stderr naming the file, key or option, and no traceback.

New cases are one line of ``CASES``:

* ``profile``: ``"section.key = <TOML value>"`` set in the bundled ``tho_longslit`` profile,
  which is then given to ``wavecal plan``;
* ``solution``: ``"dotted.key = <JSON value>"`` set in a good solution file, which is then given
  to ``wavecal show`` and ``wavecal apply``;
* ``argv``: a command line; ``{arc}`` is a 200 × 1280 arc frame, ``{tiny}`` a 2 × 2 frame,
  ``{badlamp}`` an arc whose header names the lamp "Arr", ``{spectrum}`` a 1-D spectrum,
  ``{solution}`` a good solution file, ``{out}`` an output folder; ``{empty}`` an empty text
  spectrum, ``{words}`` a CSV spectrum with a word among its counts, ``{stack}`` a TIFF of three
  images (a 3-D image), ``{palette}`` a palette PNG.

The expected word is a piece of the message (the key or option it must name).
"""
from __future__ import annotations

import json
import re
import shlex
from pathlib import Path

import numpy as np
import pytest
from astropy.io import fits
from PIL import Image

from wavecal.cli.main import main
from wavecal.profile import example_profile_paths

DATA = Path(__file__).parent / "data"

# kind, case, expected word in the message
CASES = [
    # -- instrument profiles -------------------------------------------------------------------
    ("profile", "instrument.lamps = 42", "lamps"),
    ("profile", 'instrument.lamps = "Hg+Ar"', "lamps"),
    ("profile", 'instrument.lamps = ["Hg", "Arr"]', "Arr"),
    ("profile", 'instrument.lamps = ["Hg", 7]', "lamps"),
    ("profile", 'instrument.medium = "water"', "medium"),
    ("profile", "instrument.name = 42", "name"),
    ("profile", "instrument.sensitivity_nm = [1000.0, 330.0]", "sensitivity_nm"),
    ("profile", 'instrument.sensitivity_nm = "visible"', "sensitivity_nm"),
    ("profile", "instrument.sensitivity_nm = [330.0]", "sensitivity_nm"),
    ("profile", "grating.order = 1.5", "order"),
    ("profile", "grating.order = true", "order"),
    ("profile", "grating.order = 0", "order"),
    ("profile", "grating.order = -1", "order"),
    ("profile", 'grating.order = "1"', "order"),
    ("profile", 'grating.grooves_per_mm = "1200"', "grooves_per_mm"),
    ("profile", "grating.grooves_per_mm = nan", "grooves_per_mm"),
    ("profile", "grating.grooves_per_mm = inf", "grooves_per_mm"),
    ("profile", "grating.grooves_per_mm = -1200.0", "grooves_per_mm"),
    ("profile", 'grating.deviation_deg = "thirty"', "deviation_deg"),
    ("profile", "grating.deviation_deg = 400.0", "deviation_deg"),
    ("profile", 'grating.mount = "mirror"', "mount"),
    ("profile", "grating.mount = 3", "mount"),
    ("profile", "grating.angle_scale = 0.0", "angle_scale"),
    ("profile", "grating.blaze_nm = -500.0", "blaze_nm"),
    ("profile", 'grating.colour = "red"', "colour"),
    ("profile", "camera.focal_length_mm = -300.0", "focal_length_mm"),
    ("profile", 'camera.focal_length_mm = "300"', "focal_length_mm"),
    ("profile", "camera.collimator_focal_length_mm = 0.0", "collimator_focal_length_mm"),
    ("profile", "detector.pixel_size_um = 0", "pixel_size_um"),
    ('profile', 'detector.shape = "512x4128"', "shape"),
    ("profile", "detector.shape = [512]", "shape"),
    ("profile", "detector.shape = [512, 4128, 3]", "shape"),
    ("profile", "detector.shape = [0, 4128]", "shape"),
    ("profile", "detector.shape = [512.5, 4128]", "shape"),
    ("profile", 'detector.saturation_adu = "65000"', "saturation_adu"),
    ("profile", "detector.saturation_adu = -5", "saturation_adu"),
    ("profile", "detector.dispersion_axis = 2", "dispersion_axis"),
    ("profile", "detector.dispersion_axis = true", "dispersion_axis"),
    ("profile", "detector.wavelength_increases = 0", "wavelength_increases"),
    ("profile", 'detector.wavelength_increases = "unknown"', "wavelength_increases"),
    ("profile", "detector.gain_e_per_adu = -1.2", "gain_e_per_adu"),
    ("profile", "detector.read_noise_e = -4.0", "read_noise_e"),
    ("profile", 'detector.bias_adu = "zero"', "bias_adu"),
    ("profile", "detector.tilt_deg = nan", "tilt_deg"),
    ("profile", "detector.hdu = 1.5", "hdu"),
    ("profile", 'detector.overscan = "right"', "overscan"),
    ("profile", "detector.trim = { rows = [0, 512], columns = [0, 9999] }", "trim"),
    ("profile", "detector.slit_rows = [100, 50]", "slit_rows"),
    ("profile", "priors.grating_angle_deg = -1.0", "grating_angle_deg"),
    ("profile", "priors.focal_length_fraction = -0.03", "focal_length_fraction"),
    ("profile", 'priors.axis_pixel_px = "20"', "axis_pixel_px"),
    ("profile", "priors.tilt_deg = inf", "tilt_deg"),
    ("profile", "header.grating_angle = 42", "grating_angle"),
    ("profile", "header.lamps = { keyword = 5 }", "keyword"),
    # -- command-line options ------------------------------------------------------------------
    ("argv", "solve {arc} -p tho_approximate -o {out} --rows 600:700", "--rows"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --rows 50:50", "--rows"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --rows=-3:10", "--rows"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --rows a:b", "--rows"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --min-snr -5", "--min-snr"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --min-snr nan", "--min-snr"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --min-snr 0", "--min-snr"),
    ("argv", "solve {arc} -p tho_longslit -o {out} --grating-angle nan", "--grating-angle"),
    ("argv", "solve {arc} -p tho_longslit -o {out} --grating-angle inf", "--grating-angle"),
    ("argv", "solve {arc} -p tho_longslit -o {out} --grating-angle 95", "--grating-angle"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --lamps Hg+Arr", "Arr"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --lamps xyz", "--lamps"),
    ("argv", "solve {badlamp} -p tho_approximate -o {out}", "Arr"),
    ("argv", "solve {tiny} -p tho_approximate -o {out}", "tiny.fits"),
    ("argv", "solve {empty} -p tho_approximate -o {out}", "empty.txt"),
    ("argv", "solve {words} -p tho_approximate -o {out}", "words.csv"),
    ("argv", "solve {stack} -p tho_approximate -o {out}", "stack.tif"),
    ("argv", "solve {palette} -p tho_approximate -o {out}", "palette.png"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --dark {tiny}", "tiny.fits"),
    ("argv", "solve {arc} -p tho_approximate -o {out} --dark {empty}", "empty.txt"),
    ("argv", "solve {arc} -o {out}", "--profile"),
    ("argv", "", "command"),
    ("argv", "solve {arc} -p tho_approximate --frobnicate", "--frobnicate"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample log --step 1e-9", "--step"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --step 1e-12", "--step"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --step 0", "--step"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --step nan", "--step"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --bins 0", "--bins"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --bins -3", "--bins"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --bins 1000000000",
     "--bins"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --start nan", "--start"),
    ("argv", "apply {solution} {spectrum} -o {out} --resample linear --start 700 --stop 400",
     "--start"),
    ("argv", "apply {solution} {spectrum} -o {out} --origin 1,x", "--origin"),
    ("argv", "night {out} -p tho_longslit -o {out}/n -j 0", "--workers"),
    ("argv", "night {out} -p tho_longslit -o {out}/n --drift-threshold -1", "--drift-threshold"),
    ("argv", "night {out} -p tho_longslit -o {out}/n --angle-tolerance nan",
     "--angle-tolerance"),
    ("argv", "plan -p tho_longslit --grating-angle nan", "grating angle"),
    ("argv", "plan -p tho_longslit --binning 0", "--binning"),
    # -- solution files ------------------------------------------------------------------------
    ("solution", 'model.focal_length_mm = "300"', "focal_length_mm"),
    ("solution", "model.focal_length_mm = -300.0", "focal_length_mm"),
    ("solution", "dispersion_axis = 5", "dispersion_axis"),
    ("solution", 'model.mount = "mirror"', "mount"),
    ("solution", 'status = "<script>x</script>"', "status"),
    ("solution", "status = 1", "status"),
    ("solution", "schema_version = 99", "schema version"),
    ("solution", 'schema_version = "2"', "schema version"),
    ("solution", 'medium = "water"', "medium"),
    ("solution", 'lines.x = "abc"', "lines"),
    ("solution", "lines.x = [1.0]", "lines"),
    ("solution", "covered_range_px = [1.0]", "covered_range_px"),
    ("solution", "model = 5", "model"),
    ("solution", "model.n_pixels = -1", "n_pixels"),
    ("solution", "model.order = 1.5", "order"),
    ("solution", "model.direction = 0", "direction"),
    ("solution", 'model.distortion = "x"', "distortion"),
    ("solution", "model.pixel_mm = NaN", "pixel_mm"),
    ("solution", 'reasons = "text"', "reasons"),
    ("solution", "statistics = []", "statistics"),
    ("solution", "lamps = 42", "lamps"),
    ("solution", 'covariance = "x"', "covariance"),
    ("solution", "covariance = [[1.0, 2.0]]", "covariance"),
]


def _set_toml(text: str, section: str, key: str, value: str) -> str:
    lines = text.splitlines()
    start = lines.index(f"[{section}]") + 1
    stop = next((i for i in range(start, len(lines)) if lines[i].startswith("[")), len(lines))
    for i in range(start, stop):
        if re.match(rf"{re.escape(key)}\s*=", lines[i]):
            lines[i] = f"{key} = {value}"
            break
    else:
        lines.insert(start, f"{key} = {value}")
    return "\n".join(lines) + "\n"


def _set_json(data: dict, dotted: str, value: str) -> dict:
    *parents, last = dotted.split(".")
    node = data
    for name in parents:
        node = node[name]
    node[last] = json.loads(value)
    return data


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("fuzz")
    rng = np.random.default_rng(1)
    x = np.arange(1280)
    arc = 64 + rng.normal(0, 2, (200, 1280)) + sum(
        3000 * np.exp(-0.5 * ((x - c) / 1.5) ** 2) for c in (100, 400, 700, 1000))
    header = {"ARCLAMPS": "Hg+Ne", "FRAMETYP": "arc", "GRTANGLE": 20.0}
    out = {"arc": folder / "arc.fits", "tiny": folder / "tiny.fits",
           "badlamp": folder / "badlamp.fits", "spectrum": folder / "spectrum.fits",
           "solution": DATA / "solution_v1.json", "out": folder / "out"}
    fits.PrimaryHDU(arc.astype(np.float32), header=fits.Header(header)).writeto(out["arc"])
    fits.PrimaryHDU(np.full((2, 2), 100.0, np.float32),
                    header=fits.Header(header)).writeto(out["tiny"])
    fits.PrimaryHDU(arc.astype(np.float32), header=fits.Header(
        {**header, "ARCLAMPS": "Hg+Arr"})).writeto(out["badlamp"])
    fits.PrimaryHDU(np.ones(4096, np.float32)).writeto(out["spectrum"])
    out |= {"empty": folder / "empty.txt", "words": folder / "words.csv",
            "stack": folder / "stack.tif", "palette": folder / "palette.png"}
    out["empty"].write_text("")
    out["words"].write_text("pixel,counts\n0,12\n1,many\n2,14\n")
    layers = [Image.fromarray(np.full((20, 30), v, np.uint8)) for v in (1, 2, 3)]
    layers[0].save(out["stack"], save_all=True, append_images=layers[1:])
    Image.fromarray(np.zeros((20, 30, 3), np.uint8)).convert("P").save(out["palette"])
    out["out"].mkdir()
    return out


def _argvs(kind: str, case: str, files: dict[str, Path], tmp_path: Path) -> list[list[str]]:
    if kind == "argv":
        return [shlex.split(case.format(**{k: str(v) for k, v in files.items()}))]
    target, value = (s.strip() for s in case.split("=", 1))
    if kind == "profile":
        section, key = target.split(".", 1)
        path = tmp_path / "bad.toml"
        path.write_text(_set_toml(example_profile_paths()["tho_longslit"].read_text(),
                                  section, key, value))
        return [["plan", "-p", str(path), "--grating-angle", "20"]]
    path = tmp_path / "bad.solution.json"
    data = json.loads(files["solution"].read_text())
    path.write_text(json.dumps(_set_json(data, target, value)))
    return [["show", str(path)],
            ["apply", str(path), str(files["spectrum"]), "-o", str(tmp_path / "out")]]


@pytest.mark.parametrize(("kind", "case", "word"), CASES, ids=[f"{k}:{c}" for k, c, _ in CASES])
def test_refused_in_one_line(kind, case, word, files, tmp_path, capsys):
    for argv in _argvs(kind, case, files, tmp_path):
        try:
            code = main(argv)
        except SystemExit as exc:  # argparse's own refusals
            code = exc.code
        err = capsys.readouterr().err
        assert code in (1, 2), (argv, code, err)
        lines = err.strip().splitlines()
        assert len(lines) == 1, err
        assert "Traceback" not in err
        assert word.lower() in lines[0].lower(), lines[0]


def test_there_are_enough_cases():
    assert len(CASES) >= 50
