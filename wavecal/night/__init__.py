"""The nightly run: a whole night's directory of raw FITS files in; calibrated frames, solutions,
a summary table and a log out (see :func:`wavecal.night.runner.run_night`).

The names below are imported on first use, so that a worker process can import
:mod:`wavecal.night.executors` (and start watching its parent) before anything heavy.
"""
from __future__ import annotations

__all__ = ["FileRecord", "Inventory", "build_inventory", "NightResult", "run_night"]

_LAZY = {"FileRecord": "inventory", "Inventory": "inventory", "build_inventory": "inventory",
         "NightResult": "runner", "run_night": "runner"}


def __getattr__(name: str):
    if name in _LAZY:
        from importlib import import_module

        value = getattr(import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    msg = f"module 'wavecal.night' has no attribute {name!r}"
    raise AttributeError(msg)


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
