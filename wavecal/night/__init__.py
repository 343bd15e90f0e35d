"""The nightly run: a whole night's directory of raw FITS files in; calibrated frames, solutions,
a summary table and a log out (see :func:`wavecal.night.runner.run_night`)."""
from __future__ import annotations

from .inventory import FileRecord, Inventory, build_inventory
from .runner import NightResult, run_night

__all__ = ["FileRecord", "Inventory", "build_inventory", "NightResult", "run_night"]
