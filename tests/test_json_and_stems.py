"""Tests of the shared small helpers: JSON-safe values (:mod:`wavecal._json`) and product file
stems (:mod:`wavecal._stems`)."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from wavecal._json import jsonable
from wavecal._stems import file_stem


def test_jsonable_makes_plain_python_and_no_nan():
    value = {"a": np.float32(1.5), "b": [np.int64(3), np.bool_(True)], 2: np.array([1.0, np.nan]),
             "c": (math.inf, None, "text")}
    out = jsonable(value)
    assert out == {"a": 1.5, "b": [3, True], "2": [1.0, None], "c": [None, None, "text"]}
    assert type(out["b"][0]) is int and type(out["b"][1]) is bool and type(out["a"]) is float
    json.dumps(out, allow_nan=False)  # JSON has no NaN: this raises if one is left


@pytest.mark.parametrize(("name", "stem"), [
    ("raw/arc_01.fits", "arc_01"), ("arc.FITS.fz", "arc"), ("arc.fits.gz", "arc"),
    ("arc.fts", "arc"), ("arc 01.fit", "arc_01"), ("../.hidden.fits", "hidden"),
    ("plain", "plain"), (".fits", "frame"),
])
def test_file_stem_drops_fits_suffixes_and_unsafe_characters(name, stem):
    assert file_stem(name) == stem


def test_file_stem_default():
    assert file_stem("", default="solution") == "solution"
