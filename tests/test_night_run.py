"""The nightly run on a synthetic night (invented Tamsin Hill data) in a read-only folder.

Check values: the wavelength of every calibrated science pixel is evaluated by astropy.wcs
(WCSLIB) from the written header and compared with the simulator's true model of that frame;
the drift is the simulator's injected camera-axis shift. Tolerances: 0.1 px is the accuracy the
whole-slit issue asks of a calibrated header (common practice: a tenth of a pixel).
"""
from __future__ import annotations

import hashlib
import stat

import astropy.units as u
import numpy as np
import pandas as pd
import pytest
from astropy.io import fits
from astropy.wcs import WCS

from wavecal.calibrated import FLAG_EXTRAPOLATED
from wavecal.night import build_inventory, run_night
from wavecal.night.synthetic import make_night

DRIFT = 0.8  # px per hour injected by make_night


def checksums(root):
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(root.iterdir())}


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    root = tmp_path_factory.mktemp("night") / "raw"
    made = make_night(root, drift_px_per_hour=DRIFT)
    for p in root.iterdir():
        p.chmod(stat.S_IRUSR | stat.S_IRGRP)
    root.chmod(stat.S_IRUSR | stat.S_IXUSR)
    yield made
    root.chmod(stat.S_IRWXU)
    for p in root.iterdir():
        p.chmod(stat.S_IRUSR | stat.S_IWUSR)


@pytest.fixture(scope="module")
def result(night, tmp_path_factory):
    before = checksums(night.root)
    out = tmp_path_factory.mktemp("out")
    res = run_night(night.root, night.profile, out, policy="follow-drift")
    assert checksums(night.root) == before  # the raw files are untouched
    return res


def wcs_wavelength_nm(path):
    with fits.open(path) as hdul:
        w = WCS(hdul[0].header, hdul)
        shape = hdul[0].data.shape
        y, x = np.indices(shape, dtype=float)
        world = w.wcs_pix2world(x.ravel(), y.ravel(), 0)
        return (world[0] * u.Unit(w.wcs.cunit[0])).to_value(u.nm).reshape(shape), hdul[0].header


def test_inventory_classifies_every_file_from_headers(night):
    inv = build_inventory(night.root, night.profile)
    kinds = {r.name: r.kind for r in inv.records}
    assert kinds == night.kinds
    assert len(inv.configurations()) == 3  # two real ones and the orphan science frame's
    by_conf = {}
    for r in inv.records:
        if r.name in night.configuration:
            by_conf.setdefault(night.configuration[r.name], set()).add(r.configuration)
    assert all(len(v) == 1 for v in by_conf.values()) and by_conf[0] != by_conf[1]
    df = inv.to_dataframe()
    assert len(df) == len(night.kinds) and set(df["file"]) == set(night.kinds)


def test_summary_has_one_row_per_file_with_reasons(result, night):
    summary = pd.read_csv(result.out_dir / "summary.csv")
    assert sorted(summary["file"]) == sorted(night.kinds)
    rows = summary.set_index("file")
    for name, kind in night.kinds.items():
        assert rows.loc[name, "kind"] == kind
    for name, words in night.bad.items():
        assert rows.loc[name, "status"] == "failed", name
        assert words.lower() in rows.loc[name, "reason"].lower(), (name, rows.loc[name, "reason"])
    good = [n for n in night.kinds if n not in night.bad]
    for name in good:
        kind = night.kinds[name]
        expected = {"arc": ("ok", "suspect"), "science": ("ok", "suspect"), "bias": ("ok",),
                    "flat": ("skipped",)}[kind]
        assert rows.loc[name, "status"] in expected, (name, rows.loc[name, "reason"])
        if kind in ("arc", "science"):
            assert rows.loc[name, "rms_px"] < 0.1
            assert isinstance(rows.loc[name, "solution_used"], str)
    assert result.exit_code == 4  # the bad files failed
    assert (result.out_dir / "night.log").read_text().count("\n") > 5
    assert not list(result.out_dir.rglob("*.part"))


def test_drift_follows_the_injected_shift(result, night):
    drift = pd.read_csv(result.out_dir / "drift.csv")
    assert len(drift) == 8
    for _, row in drift.iterrows():
        sim = night.truth[row["arc"]]
        first = night.truth[drift[drift["configuration"] == row["configuration"]]["arc"].iloc[0]]
        injected = sim.truth.axis_pixel - first.truth.axis_pixel
        assert abs(row["shift_px"] - injected) < 0.05


def test_calibrated_science_wcs_matches_the_truth(result, night):
    rows = result.summary.set_index("file")
    science = [n for n, k in night.kinds.items() if k == "science" and n not in night.bad]
    assert len(science) == 6
    for name in science:
        assert "between" in rows.loc[name, "solution_used"]  # interpolated: drift is large
        lam, header = wcs_wavelength_nm(result.out_dir / rows.loc[name, "product"])
        sim = night.truth[name]
        # the product keeps every column of the raw frame (the night camera has no overscan
        # and no trim section), so its first column is raw column 0: the keyword apply writes
        # (WCORIGX) must say so, and the wavelengths are checked at those raw columns
        first, stop = night.profile.detector.dispersion_range
        assert (first, stop) == (0, sim.data.shape[1]) == (0, lam.shape[1])
        assert header["WCORIGX"] == first
        x = np.arange(lam.shape[1], dtype=float) + first
        rows_lit = np.arange(*sim.slit_rows)
        truth = sim.true_wavelength(x)
        # every lit pixel, extrapolated ones included: make_night chooses settings whose lamp
        # lines reach close to both ends of the detector, so the solutions extrapolate over
        # less than a tenth of it at either end and the whole detector is held to the 0.1 px
        err = np.abs(lam[rows_lit] - truth) / np.abs(sim.truth.dispersion(x))
        assert np.max(err) < 0.1, (name, np.max(err))
        # the pixels beyond the lines' range are those flagged as extrapolated
        with fits.open(result.out_dir / rows.loc[name, "product"]) as hdul:
            flags = hdul["FLAGS"].data[rows_lit] & FLAG_EXTRAPOLATED > 0
        outside = (x < header["WCCOVLO"]) | (x > header["WCCOVHI"])
        np.testing.assert_array_equal(flags, np.broadcast_to(outside, flags.shape), err_msg=name)


def test_rerun_is_up_to_date_and_redo_remakes(result, night):
    again = run_night(night.root, night.profile, result.out_dir, policy="follow-drift")
    assert again.n_made == 0
    pd.testing.assert_frame_equal(again.summary.drop(columns="made"),
                                  result.summary.drop(columns="made"))
    redo = run_night(night.root, night.profile, result.out_dir, policy="follow-drift", redo=True)
    assert redo.n_made == result.n_made > 0


def test_output_names_never_come_from_headers(tmp_path):
    raw = tmp_path / "raw"
    made = make_night(raw, n_arcs=2, n_science=1, n_bias=0, n_flats=0, bad_files=False)
    name = next(n for n, k in made.kinds.items() if k == "science")
    with fits.open(raw / name, mode="update") as hdul:
        hdul[0].header["OBJECT"] = "../../evil"
        hdul[0].header["FILENAME"] = "/etc/evil.fits"
    res = run_night(raw, made.profile, tmp_path / "out")
    for p in (tmp_path / "out").rglob("*"):
        assert "evil" not in p.name
        assert (tmp_path / "out") in p.resolve().parents
    assert res.summary.set_index("file").loc[name, "product"] == f"calibrated/{name[:-5]}.wcal.fits"


def test_joint_fit_shares_the_optics_and_follows_the_drift(result, night):
    # the simulator moves the whole spectrum by the injected camera-axis shift, so the joint
    # shifts of one configuration differ as the truth does; four arcs share one focal length,
    # which they determine better together than one arc alone (precisions add: common practice)
    arcs = pd.read_csv(result.out_dir / "joint_arcs.csv")
    shared = pd.read_csv(result.out_dir / "joint_shared.csv")
    assert len(arcs) == 8 and arcs["in_joint"].all()
    for conf, group in arcs.groupby("configuration"):
        first = night.truth[group["arc"].iloc[0]]
        for _, row in group.iterrows():
            injected = night.truth[row["arc"]].truth.axis_pixel - first.truth.axis_pixel
            assert abs(row["shift_px"] - group["shift_px"].iloc[0] - injected) < 0.05
        focal = shared[(shared["configuration"] == conf) & (shared["parameter"] == "focal_length_mm")]
        assert len(focal) == 1
        assert focal["joint_error"].iloc[0] < focal["single_error"].iloc[0]
        assert focal["drift_px_per_hour"].iloc[0] == pytest.approx(DRIFT, abs=0.1)
    page = (result.out_dir / "night_report.html").read_text()
    assert "The instrument through the night" in page and "focal_length_mm" in page
