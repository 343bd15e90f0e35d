"""File stems: the one way wavecal turns an input's name into the stem of its products' names."""
from __future__ import annotations

import re
from pathlib import Path

__all__ = ["file_stem"]

#: Suffixes taken off a name, tried in this order (so ``a.fits.fz`` and ``a.fits.gz`` give ``a``).
_SUFFIXES = (".gz", ".fz", ".fits", ".fit", ".fts")


def file_stem(name: str | Path, *, default: str = "frame") -> str:
    """A file-name stem made only of safe characters.

    Parameters
    ----------
    name : str or Path
        A file name or path; only its last component is used.
    default : str
        The stem when nothing is left.

    Returns
    -------
    str
        The name without its folder and without FITS/compression suffixes (``.fits``, ``.fit``,
        ``.fts``, ``.fz``, ``.gz``, any case), every character other than letters, digits and
        ``._+-`` replaced by ``_``, leading dots removed.
    """
    stem = Path(str(name)).name
    for suffix in _SUFFIXES:
        if stem.lower().endswith(suffix):
            stem = stem[: -len(suffix)]
    stem = re.sub(r"[^A-Za-z0-9._+-]", "_", stem).lstrip(".")
    return stem or default
