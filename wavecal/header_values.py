"""Interpreting the values of frame header keywords: numbers, whole counts, binning, and which
of an instrument's gratings a keyword's value names.

Header values arrive as FITS gives them: numbers, or texts written by an observatory's software
(``"1200"``, ``" G300 "``, ``"2 2"``). Each function here takes one raw value, the keyword it came
from and the file, and returns the cleaned value or raises :class:`~wavecal.errors.HeaderError`
with one line naming the file, the keyword and the value.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from .errors import HeaderError

__all__ = ["GRATING_NUMBER_TOLERANCE", "header_number", "header_count", "header_binning",
           "choose_grating"]

#: Default largest difference between a numeric header value and a grating's number (its groove
#: density unless the profile gives another) for the value to name that grating: a keyword
#: holding 1199.99 or "1200" names the 1200 /mm grating.
GRATING_NUMBER_TOLERANCE = 0.5


def _where(path: str | Path | None) -> str:
    return f"{path}: " if path is not None else ""


def _as_float(value: Any) -> float | None:
    """A finite number from a number or a numeric text; None otherwise (booleans included)."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        number = float(value)
    elif isinstance(value, str):
        try:
            number = float(value.strip())
        except ValueError:
            return None
    else:
        return None
    return number if math.isfinite(number) else None


def header_number(value: Any, *, keyword: str, what: str,
                  path: str | Path | None = None) -> float:
    """A positive finite number from a header value (a number or a numeric text).

    Raises
    ------
    HeaderError
        Naming the file, the keyword, the quantity (``what``) and the value.
    """
    number = _as_float(value)
    if number is None or number <= 0:
        msg = f"{_where(path)}header keyword {keyword!r} ({what}) = {value!r} is not a positive number"
        raise HeaderError(msg)
    return number


def header_count(value: Any, *, keyword: str, what: str,
                 path: str | Path | None = None) -> int:
    """A positive whole number from a header value (``2``, ``2.0`` or ``"2"``).

    Raises
    ------
    HeaderError
        Naming the file, the keyword, the quantity (``what``) and the value.
    """
    number = _as_float(value)
    if number is None or number < 1 or number != int(number):
        msg = (f"{_where(path)}header keyword {keyword!r} ({what}) = {value!r} is not a positive "
               f"whole number")
        raise HeaderError(msg)
    return int(number)


def header_binning(value: Any, *, keyword: str,
                   path: str | Path | None = None) -> tuple[int, int]:
    """Binning ``(along NAXIS1, along NAXIS2)`` from one keyword holding ``"N M"``.

    ``"2 1"``, ``"2x1"`` and ``"2,1"`` are read alike; a single number bins both axes.

    Raises
    ------
    HeaderError
        When the value is not one or two positive whole numbers.
    """
    parts = str(value).replace("x", " ").replace(",", " ").split()
    try:
        if len(parts) not in (1, 2):
            raise HeaderError
        counts = [header_count(p, keyword=keyword, what="binning", path=path) for p in parts]
    except HeaderError:
        msg = (f"{_where(path)}header keyword {keyword!r} (binning) = {value!r} is not of the form "
               f"'N M' (positive whole numbers)")
        raise HeaderError(msg) from None
    return (counts[0], counts[-1])


def choose_grating(gratings: Sequence[tuple[str, float]], value: Any, *, keyword: str,
                   tolerance: float = GRATING_NUMBER_TOLERANCE,
                   path: str | Path | None = None) -> int:
    """Index of the grating a header value names.

    A value names a grating by its name (case and surrounding blanks ignored) or, when it is a
    number, by the grating's number within ``tolerance``.

    Parameters
    ----------
    gratings : sequence of (name, number)
        The profile's gratings in order.
    value : str or number
        The header value.
    keyword : str
        The keyword it came from (named in errors).
    tolerance : float
        Largest difference between a numeric value and a grating's number.
    path : str or Path, optional
        The file the header came from (named in errors).

    Raises
    ------
    HeaderError
        When the value names no grating, or several (one line listing the known gratings).
    """
    text = str(value).strip().lower()
    by_name = [i for i, (name, _) in enumerate(gratings) if name.strip().lower() == text]
    number = _as_float(value)
    by_number = [] if number is None else [
        i for i, (_, n) in enumerate(gratings) if abs(n - number) <= tolerance]
    found = by_name or by_number
    if len(found) == 1:
        return found[0]
    known = ", ".join(f"{name!r} ({n:g})" for name, n in gratings)
    problem = "names no grating" if not found else "names several gratings"
    msg = (f"{_where(path)}header keyword {keyword!r} = {value!r} {problem} of the profile "
           f"(known, name (number): {known}; numbers match within {tolerance:g})")
    raise HeaderError(msg)
