"""An interrupted nightly run (killed mid-way) leaves nothing half-written, and a re-run
completes it, redoing only what is missing (invented Tamsin Hill data)."""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pandas as pd
from astropy.io import fits

from wavecal.night import run_night
from wavecal.night.synthetic import make_night

SCRIPT = textwrap.dedent("""
    import sys
    from wavecal.night import run_night
    from wavecal.night.synthetic import night_profile
    run_night(sys.argv[1], night_profile(), sys.argv[2])
""")


def all_valid(out: Path) -> None:
    for p in out.rglob("*.json"):
        json.loads(p.read_text())
    for p in out.rglob("*.fits"):
        with fits.open(p, checksum=True) as hdul:
            assert hdul[0].data is not None or len(hdul) > 1


def test_killed_run_resumes(tmp_path):
    raw, out = tmp_path / "raw", tmp_path / "out"
    night = make_night(raw, n_arcs=4, n_science=3, bad_files=False)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    proc = subprocess.Popen([sys.executable, "-c", SCRIPT, str(raw), str(out)], env=env)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        if len(list((out / "solutions").glob("*.json"))) >= 2:
            break
        time.sleep(0.01)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert not (out / "summary.csv").exists()  # it really stopped mid-way
    first = {p.name for p in (out / "solutions").glob("*.solution.json")}
    assert 2 <= len(first) < 8
    all_valid(out)  # whatever was written is whole (at most a hidden .part file is left)
    kept = {n for n in first if (out / "manifests" / n.replace(".solution.json", ".arc.json")).exists()}

    res = run_night(raw, night.profile, out)
    assert not list(out.rglob("*.part"))
    all_valid(out)
    summary = pd.read_csv(out / "summary.csv").set_index("file")
    assert sorted(summary.index) == sorted(night.kinds)
    assert set(summary["status"]) <= {"ok", "suspect", "skipped"}
    made = summary[summary["made"]].index
    # solutions finished before the kill (with their manifests) were not redone
    assert kept and not any(n.replace(".solution.json", ".fits") in made for n in kept)
    for name, kind in night.kinds.items():
        if kind == "science":
            assert (out / summary.loc[name, "product"]).is_file()
    assert res.exit_code in (0, 3)
