"""The nightly run with local worker processes and on a local Dask cluster (loopback only) gives
the same summary as the serial run; the command-line handler (invented Tamsin Hill data)."""
from __future__ import annotations

import argparse
import io

import pandas as pd
import pytest

from wavecal.night import run_night
from wavecal.cli.night import add_night_arguments, run_night_command
from wavecal.night.progress import Progress
from wavecal.night.synthetic import make_night

COLUMNS = ["file", "kind", "configuration", "status", "solution_used", "product"]


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    raw = tmp_path_factory.mktemp("par") / "raw"
    night = make_night(raw, n_arcs=3, n_science=2, n_bias=2, n_flats=0, bad_files=False)
    serial = run_night(raw, night.profile, tmp_path_factory.mktemp("serial"))
    return night, serial


def test_two_workers_match_serial(small, tmp_path):
    night, serial = small
    stream = io.StringIO()
    par = run_night(night.root, night.profile, tmp_path, workers=2, progress=Progress(stream))
    pd.testing.assert_frame_equal(par.summary[COLUMNS], serial.summary[COLUMNS])
    lines = stream.getvalue().splitlines()  # not a terminal: one plain line per task
    assert sum(line.startswith("[") for line in lines) == 6 + 4 + 1


@pytest.mark.dask
def test_dask_local_cluster_matches_serial(small, tmp_path):
    import distributed  # the optional extra "dask", part of the test extra

    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        res = run_night(night_root(small), small[0].profile, tmp_path,
                        scheduler=cluster.scheduler_address)
    pd.testing.assert_frame_equal(res.summary[COLUMNS], small[1].summary[COLUMNS])


def night_root(small):
    return small[0].root


def test_command_line_handler(small, tmp_path, capsys):
    night, _ = small
    parser = argparse.ArgumentParser()
    add_night_arguments(parser)
    profile_file = tmp_path / "missing.toml"
    args = parser.parse_args([str(night.root), "-p", str(profile_file), "-o", str(tmp_path / "o")])
    assert run_night_command(args) == 1
    assert "missing.toml" in capsys.readouterr().err
