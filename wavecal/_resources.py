"""Locating the data folders shipped with wavecal (line lists, demo frames, example profiles).

Installed, they are the subpackages ``wavecal.line_lists`` and ``wavecal.demo_frames`` (see
``pyproject.toml``); in a source tree that is imported without being installed they are the
top-level folders beside the package.
"""
from __future__ import annotations

import functools
from importlib import resources
from importlib.abc import Traversable
from pathlib import Path

__all__ = ["data_folder"]


@functools.lru_cache(maxsize=None)
def data_folder(name: str) -> Traversable:
    """The shipped folder ``name`` (``"line_lists"``, ``"demo_frames"`` or ``"profiles"``)."""
    try:
        return resources.files(f"wavecal.{name}")
    except ModuleNotFoundError:
        return Path(__file__).resolve().parent.parent / name
