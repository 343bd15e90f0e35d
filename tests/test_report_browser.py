"""The night report in headless Chromium: it loads without console errors, every image decodes,
and a screenshot is saved (Debian's chromium package, installed by .ci/run).

Without a Chromium on PATH these tests are skipped, saying so; with the environment variable
``WAVECAL_REQUIRE_BROWSER=1`` (set by .ci/run) a missing Chromium is a failure instead.
"""
from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from wavecal.night import run_night

pytestmark = pytest.mark.browser

#: Set to 1 to make a missing Chromium a failure rather than a skip (CI).
REQUIRE_VARIABLE = "WAVECAL_REQUIRE_BROWSER"
_FOUND = next((shutil.which(name) for name in ("chromium", "chromium-browser")
               if shutil.which(name)), None)
CHROMIUM = Path(_FOUND) if _FOUND else None
_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
          "--disable-component-update", "--disable-sync", "--no-first-run",
          "--enable-logging=stderr", "--v=0"]


@pytest.fixture(scope="module", autouse=True)
def _browser() -> None:
    """Skip (or, with ``WAVECAL_REQUIRE_BROWSER=1``, fail) when no Chromium is on PATH."""
    if CHROMIUM is not None:
        return
    msg = ("no Chromium on PATH (chromium or chromium-browser): install Debian's chromium "
           "package (apt-get install -y chromium), as .ci/run does")
    if os.environ.get(REQUIRE_VARIABLE) == "1":
        pytest.fail(f"{msg}; {REQUIRE_VARIABLE}=1 requires it", pytrace=False)
    pytest.skip(msg)


def _chromium(tmp: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp / f"chromium-profile-{len(list(tmp.glob('chromium-profile-*')))}"
    return subprocess.run([str(CHROMIUM), *_FLAGS, f"--user-data-dir={profile}", *args],
                          capture_output=True, text=True, timeout=60, check=False)


def _console(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if ":CONSOLE" in line]


@pytest.fixture(scope="module")
def night_out(small_night, tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("browser_night") / "out"
    run_night(small_night.root, small_night.profile, out)
    return out


def test_console_check_detects_errors(tmp_path):
    # positive control: the same parsing sees a script error in a page that has one
    page = tmp_path / "bad.html"
    page.write_text("<html><body><script>undefinedFunction();</script></body></html>")
    proc = _chromium(tmp_path, "--dump-dom", page.as_uri())
    assert any("Uncaught" in line for line in _console(proc.stderr)), proc.stderr[-2000:]


def test_night_report_loads_in_chromium(night_out, tmp_path):
    page = night_out / "night_report.html"
    proc = _chromium(tmp_path, "--virtual-time-budget=5000", "--dump-dom", page.as_uri())
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert _console(proc.stderr) == []
    # the page's own load handler writes how many images decoded (naturalWidth > 0)
    found = re.search(r'data-images="([^"]*)"', proc.stdout)
    assert found is not None, "the image check did not run"
    assert found.group(1) == f"ok:{page.read_text().count('<img ')}"
    assert found.group(1) != "ok:0"
    shot = tmp_path / "night.png"
    proc = _chromium(tmp_path, f"--screenshot={shot}", "--window-size=1280,2000", page.as_uri())
    assert shot.is_file() and shot.stat().st_size > 10_000, proc.stderr[-2000:]


def test_frame_report_images_decode(night_out, tmp_path):
    page = next((night_out / "reports").glob("*.report.html"))
    proc = _chromium(tmp_path, "--virtual-time-budget=5000", "--dump-dom", page.as_uri())
    assert _console(proc.stderr) == []
    found = re.search(r'data-images="([^"]*)"', proc.stdout)
    assert found is not None and found.group(1) == f"ok:{page.read_text().count('<img ')}"
