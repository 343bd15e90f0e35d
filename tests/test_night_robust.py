"""The nightly run when things go wrong around it (invented Tamsin Hill data): its main process
killed, called from a plain script, damaged products, odd directory entries, a wrong master
bias."""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from astropy.io import fits

from wavecal.night import run_night
from wavecal.night.synthetic import BIAS_ADU, make_night

ROOT = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(ROOT)}

# a plain script: no `if __name__ == "__main__":` guard (the README's snippet, saved as is)
PLAIN_SCRIPT = textwrap.dedent("""
    import sys
    from wavecal.night import run_night
    from wavecal.night.synthetic import night_profile
    result = run_night(sys.argv[1], night_profile(), sys.argv[2], workers=2)
    print("EXIT", result.exit_code)
""")


@pytest.fixture(scope="module")
def small_night(tmp_path_factory):
    raw = tmp_path_factory.mktemp("robust") / "raw"
    return make_night(raw, n_arcs=3, n_science=2, n_bias=3, n_flats=0, bad_files=False)


def _script(folder: Path) -> str:
    """The plain script saved as a file (``python -c`` would not show the problem: worker
    processes re-run a main *file*)."""
    path = folder / "night_script.py"
    path.write_text(PLAIN_SCRIPT)
    return str(path)


def _descendants(pid: int) -> set[int]:
    """Process ids of every descendant of ``pid`` (Linux /proc)."""
    found, todo = set(), [pid]
    while todo:
        p = todo.pop()
        for task in Path(f"/proc/{p}/task").glob("*"):
            try:
                children = (task / "children").read_text().split()
            except OSError:
                continue
            for c in map(int, children):
                if c not in found:
                    found.add(c)
                    todo.append(c)
    return found


def _alive(pid: int) -> bool:
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return False
    return fields[0] != "Z"  # a zombie has ended (only its exit status is left)


@pytest.mark.skipif(not Path("/proc/self/task").is_dir(), reason="needs Linux /proc")
def test_workers_end_when_the_main_process_is_killed(small_night, tmp_path):
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, _script(tmp_path), str(small_night.root), str(out)],
                            env=ENV, stdout=subprocess.DEVNULL, start_new_session=True)
    children: set[int] = set()
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            children = _descendants(proc.pid)
            if len(children) >= 3:  # two workers and the multiprocessing resource tracker
                break
            time.sleep(0.05)
        assert len(children) >= 3, "the workers never started"
        time.sleep(1.0)  # let the workers get into their tasks
        children |= _descendants(proc.pid)
        os.kill(proc.pid, signal.SIGKILL)  # the main process only, not its group
        proc.wait()
        killed = time.monotonic()
        while time.monotonic() - killed < 2.0 and any(_alive(c) for c in children):
            time.sleep(0.05)
        survivors = [c for c in children if _alive(c)]
        assert not survivors, f"still running 2 s after the kill: {survivors}"
    finally:  # never leave a process behind, even when the test fails
        for c in children | _descendants(proc.pid) | {proc.pid}:
            if _alive(c):
                os.kill(c, signal.SIGKILL)


def test_plain_script_without_main_guard_runs_the_night(small_night, tmp_path):
    out = tmp_path / "out"
    run = subprocess.run([sys.executable, _script(tmp_path), str(small_night.root), str(out)],
                         env=ENV, capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr[-2000:]
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert not summary["reason"].str.contains("worker failed").any()
    assert set(summary["status"]) <= {"ok", "suspect"}
    assert (summary["kind"] == "science").sum() == 4


def test_rerun_remakes_damaged_products_and_lists_a_corrupt_solution(small_night, tmp_path):
    out = tmp_path / "out"
    first = run_night(small_night.root, small_night.profile, out, reports=False)
    summary = first.summary.set_index("file")
    science = summary[summary["kind"] == "science"].index[0]
    product = out / summary.loc[science, "product"]
    product.write_bytes(product.read_bytes()[:5000])  # truncated behind the run's back
    arc = summary[summary["kind"] == "arc"].index[0]
    solution = out / summary.loc[arc, "product"]
    solution.write_text(solution.read_text()[:300])  # a corrupt solution file

    second = run_night(small_night.root, small_night.profile, out, reports=False)
    again = second.summary.set_index("file")
    assert again.loc[science, "made"] and again.loc[arc, "made"]  # both remade
    assert again["made"].sum() == 2  # and nothing else
    with fits.open(product, checksum=True) as hdul:
        assert hdul[0].data.shape == (64, 1024)
    assert json.loads(solution.read_text())["status"] in ("ok", "suspect")
    log = (out / "night.log").read_text()
    assert "checksum mismatch" in log

    # a solution that is corrupt and yet matches its manifest (written corrupt): that arc is
    # listed as failed, the rest of the night goes on
    manifest = out / "manifests" / f"{Path(arc).stem}.arc.json"
    solution.write_text("{not json")
    record = json.loads(manifest.read_text())
    record["checksums"][solution.name] = __import__("hashlib").sha256(
        solution.read_bytes()).hexdigest()
    manifest.write_text(json.dumps(record))
    third = run_night(small_night.root, small_night.profile, out, reports=False)
    rows = third.summary.set_index("file")
    assert rows.loc[arc, "status"] == "failed"
    assert "not a JSON solution file" in rows.loc[arc, "reason"]
    assert (rows.drop(index=arc)["status"].isin(["ok", "suspect"])).all()


def test_every_directory_entry_is_in_the_summary(small_night, tmp_path):
    raw = tmp_path / "raw"
    raw.mkdir()
    for name in ("arc_0001.fits", "bias_01.fits"):
        (raw / name).write_bytes((small_night.root / name).read_bytes())
    os.mkfifo(raw / "pipe.fits")
    (raw / "dangling.fits").symlink_to(raw / "nowhere.fits")
    (raw / "loop.fits").symlink_to(raw / "loop.fits")
    (raw / "x.fits").mkdir()
    (raw / "sub").mkdir()
    (raw / "notes.txt").write_text("seeing 1.2\n")
    (raw / ".hidden.fits").write_bytes(b"")
    (raw / "linked.fits").symlink_to(raw / "arc_0001.fits")
    expected = {"pipe.fits": "named pipe", "dangling.fits": "dangling symbolic link",
                "loop.fits": "symbolic link loop", "x.fits": "folder named like a FITS file",
                "sub": "sub-folder", "notes.txt": "not a FITS file name",
                ".hidden.fits": "hidden file"}
    result = run_night(raw, small_night.profile, tmp_path / "out", reports=False)
    summary = result.summary.set_index("file")
    assert sorted(summary.index) == sorted(os.listdir(raw))
    for name, reason in expected.items():
        assert summary.loc[name, "status"] == "skipped"
        assert reason in summary.loc[name, "reason"], (name, summary.loc[name, "reason"])
    assert summary.loc["linked.fits", "kind"] == "arc"  # a link to a file is read


def test_wrong_master_bias_is_not_used(small_night, tmp_path):
    raw = tmp_path / "raw"
    raw.mkdir()
    for path in small_night.root.iterdir():
        data = path.read_bytes()
        (raw / path.name).write_bytes(data)
    for path in raw.glob("bias_*.fits"):  # bias frames at 1000 ADU, the frames' bias at 300
        with fits.open(path, mode="update") as hdul:
            hdul[0].data = hdul[0].data + np.float32(1000.0 - BIAS_ADU)
    out = tmp_path / "out"
    result = run_night(raw, small_night.profile, out)
    summary = result.summary.set_index("file")
    biases = summary[summary["kind"] == "bias"]
    assert (biases["status"] == "suspect").all()
    assert biases["reason"].str.contains("master bias differs").all()
    assert "WARNING master bias" in (out / "night.log").read_text()
    assert "master bias differs" in (out / "night_report.html").read_text()
    science = summary[summary["kind"] == "science"].index[0]
    with fits.open(out / summary.loc[science, "product"]) as hdul:
        level = float(np.nanmedian(hdul[0].data))
    assert level > -50.0  # electrons: the profile's bias level was used, not the master's
    assert result.exit_code == 3


def test_good_master_bias_is_used(small_night, tmp_path):
    result = run_night(small_night.root, small_night.profile, tmp_path / "out", reports=False)
    biases = result.summary[result.summary["kind"] == "bias"]
    assert (biases["status"] == "ok").all()
    assert not biases["reason"].str.contains("WARNING").any()


def test_master_bias_checked_against_the_overscan(tmp_path):
    # a detector with an overscan strip: frames whose overscan says 474 ADU (the case)
    from wavecal.night.bias import bias_tolerance_adu, check_master_bias
    from wavecal.profile import profile_from_dict

    profile = profile_from_dict({
        "grating": {"mount": "reflection", "grooves_per_mm": 300.0, "deviation_deg": 30.0},
        "camera": {"focal_length_mm": 250.0},
        "detector": {"pixel_size_um": 15.0, "shape": [32, 288], "gain_e_per_adu": 1.2,
                     "read_noise_e": 4.0,
                     "overscan": {"rows": [0, 32], "columns": [264, 288]},
                     "trim": {"rows": [0, 32], "columns": [0, 256]}},
        "header": {"grating_angle": {"keyword": "GRTANGLE", "default": 10.0}}})
    rng = np.random.default_rng(3)
    frame = 474.0 + rng.normal(0.0, 3.0, (32, 288))
    frame[:, :256] += 200.0  # light in the illuminated part only
    path = tmp_path / "arc.fits"
    fits.PrimaryHDU(frame.astype(np.float32)).writeto(path)
    tolerance = bias_tolerance_adu(profile)
    assert tolerance == pytest.approx(max(10.0, 5 * 4.0 / 1.2))
    wrong = check_master_bias(np.full((32, 288), 1000.0, np.float32), [path], profile)
    assert not wrong.ok and wrong.reference == "overscan"
    assert wrong.offset_adu == pytest.approx(526.0, abs=1.0)
    assert "their overscan" in wrong.message
    right = check_master_bias(np.full((32, 288), 476.0, np.float32), [path], profile)
    assert right.ok and right.offset_adu == pytest.approx(2.0, abs=1.0)
