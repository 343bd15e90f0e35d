"""The nightly run: a whole night's directory of raw FITS files in; calibrated frames, solutions,
a summary table and a log out (see :func:`wavecal.night.runner.run_night`).

The names below are imported on first use, so that a worker process can import
:mod:`wavecal.night.executors` (and start watching its parent) before anything heavy.
"""
from __future__ import annotations

from .._lazy import lazy_attributes

__all__ = ["FileRecord", "Inventory", "build_inventory", "NightResult", "run_night"]

_LAZY = {"FileRecord": "inventory", "Inventory": "inventory", "build_inventory": "inventory",
         "NightResult": "runner", "run_night": "runner"}

__getattr__, __dir__ = lazy_attributes(__name__, _LAZY)
