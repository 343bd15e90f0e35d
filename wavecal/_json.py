"""JSON-safe values: the one conversion every JSON file written by wavecal goes through.

numpy scalars and arrays become plain Python numbers and lists, NaN and infinities become
``None`` (JSON has no such numbers; files are written with ``allow_nan=False``), mappings and
sequences are converted element by element, anything else is passed through unchanged.
"""
from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["jsonable"]


def jsonable(value: Any) -> Any:
    """``value`` converted to plain, JSON-safe Python.

    Parameters
    ----------
    value : Any
        A number, numpy scalar or array, mapping, list or tuple (nested freely), or anything
        else (returned as is).

    Returns
    -------
    Any
        Mappings become dicts with string keys, arrays/lists/tuples become lists, numpy
        booleans/integers/floats become ``bool``/``int``/``float``, non-finite floats ``None``.
    """
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, np.ndarray):
        return [jsonable(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    return value
