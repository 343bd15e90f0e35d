"""Checking values where they enter wavecal: profile fields, command-line options, solution files.

One small typed layer. A *rule* (:class:`Real`, :class:`Integer`, :class:`Choice`, :class:`Text`,
:class:`Sequence`, :class:`Optional`, :class:`Lamps`) says what a value must be and returns it
cleaned (``float``, ``int``, ``tuple`` ...) or raises :class:`Invalid` with a short description of
the problem; :func:`check_table` applies a mapping of rules to a TOML or JSON table and raises the
caller's :mod:`wavecal.errors` exception with one line naming the file, the key and the problem.

Types are strict: a boolean is not a number, a string is not a number, an integer field refuses
``1.5``, and every number must be finite.
"""
from __future__ import annotations

import argparse
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

__all__ = ["Invalid", "Real", "Integer", "Choice", "Text", "Sequence", "Optional", "Lamps",
           "Boolean", "Table",
           "Rule", "check_table", "describe", "known_lamps", "parse_lamps", "option_type",
           "GRATING_ANGLE", "MAX_GRID_BINS", "MIN_DISPERSION_PIXELS"]

#: Largest number of output bins of a resampled frame (along the dispersion): beyond it a grid
#: is refused rather than allocated (a grid of 10^7 bins of 128 rows is already ~10 GB).
MAX_GRID_BINS = 1_000_000


#: Fewest pixels along the dispersion of a frame given to ``wavecal solve`` (a peak needs a few
#: pixels and the fit several lines).
MIN_DISPERSION_PIXELS = 32


class Invalid(ValueError):
    """A value breaks its rule; the message says how (without the file or key)."""


def describe(value: Any, limit: int = 40) -> str:
    """``repr`` of a value, shortened to ``limit`` characters and on one line."""
    text = repr(value).replace("\n", "\\n")
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


@dataclass(frozen=True)
class Real:
    """A finite real number within ``[low, high]`` (``open_low``: strictly above ``low``)."""

    low: float | None = None
    high: float | None = None
    open_low: bool = False
    nonzero: bool = False

    def what(self) -> str:
        if self.low is not None and self.high is not None:
            return f"a number from {self.low:g} to {self.high:g}"
        if self.low == 0:
            return "a positive number" if self.open_low else "a number >= 0"
        if self.low is not None:
            return f"a number {'>' if self.open_low else '>='} {self.low:g}"
        if self.high is not None:
            return f"a number <= {self.high:g}"
        return "a non-zero number" if self.nonzero else "a finite number"

    def __call__(self, value: Any) -> float:
        if not _is_number(value) or not math.isfinite(value):
            raise Invalid(f"must be {self.what()}, got {describe(value)}")
        value = float(value)
        below = self.low is not None and (value <= self.low if self.open_low else value < self.low)
        above = self.high is not None and value > self.high
        if below or above or (self.nonzero and value == 0):
            raise Invalid(f"must be {self.what()}, got {describe(value)}")
        return value


@dataclass(frozen=True)
class Integer:
    """An integer (not a boolean, not ``1.5``) within ``[low, high]`` or among ``choices``."""

    low: int | None = None
    high: int | None = None
    choices: tuple[int, ...] = ()

    def what(self) -> str:
        if self.choices:
            return "one of " + ", ".join(map(str, self.choices))
        if self.low is not None and self.high is not None:
            return f"an integer from {self.low} to {self.high}"
        if self.low is not None:
            return "a positive integer" if self.low == 1 else f"an integer >= {self.low}"
        return "an integer"

    def __call__(self, value: Any) -> int:
        ok = isinstance(value, int) and not isinstance(value, bool)
        if ok and self.choices:
            ok = value in self.choices
        if ok and self.low is not None:
            ok = value >= self.low
        if ok and self.high is not None:
            ok = value <= self.high
        if not ok:
            raise Invalid(f"must be {self.what()}, got {describe(value)}")
        return int(value)


@dataclass(frozen=True)
class Choice:
    """A string among ``choices``."""

    choices: tuple[str, ...]

    def __call__(self, value: Any) -> str:
        if not isinstance(value, str) or value not in self.choices:
            raise Invalid(f"must be one of {', '.join(map(repr, self.choices))}, "
                          f"got {describe(value)}")
        return value


@dataclass(frozen=True)
class Text:
    """A string (non-empty unless ``empty``), at most ``max_length`` characters."""

    empty: bool = False
    max_length: int = 1000

    def __call__(self, value: Any) -> str:
        if not isinstance(value, str) or (not value and not self.empty) \
                or len(value) > self.max_length:
            raise Invalid(f"must be {'a' if self.empty else 'a non-empty'} text of at most "
                          f"{self.max_length} characters, got {describe(value)}")
        return value


@dataclass(frozen=True)
class Sequence:
    """A list of items, each checked by ``item``: exactly ``length`` of them when given, in
    strictly increasing order when ``increasing``."""

    item: Rule
    length: int | None = None
    increasing: bool = False
    label: str = ""

    def __call__(self, value: Any) -> tuple:
        what = self.label or ("a list" if self.length is None else f"a list of {self.length}")
        if not isinstance(value, (list, tuple)) or (
                self.length is not None and len(value) != self.length):
            raise Invalid(f"must be {what}, got {describe(value)}")
        items = []
        for i, v in enumerate(value):
            try:
                items.append(self.item(v))
            except Invalid as exc:
                raise Invalid(f"item {i} {exc}") from None
        if self.increasing and any(b <= a for a, b in zip(items, items[1:])):
            raise Invalid(f"must be increasing, got {describe(value)}")
        return tuple(items)


@dataclass(frozen=True)
class Boolean:
    """``true`` or ``false`` (not 0 or 1)."""

    def __call__(self, value: Any) -> bool:
        if not isinstance(value, bool):
            raise Invalid(f"must be true or false, got {describe(value)}")
        return value


@dataclass(frozen=True)
class Table:
    """A table (dict) with text keys, its values unchecked."""

    def __call__(self, value: Any) -> dict:
        if not isinstance(value, dict):
            raise Invalid(f"must be a table, got {describe(value)}")
        return value


@dataclass(frozen=True)
class Optional:
    """``None`` (JSON ``null``) or a value passing ``rule``."""

    rule: Rule

    def __call__(self, value: Any) -> Any:
        return None if value is None else self.rule(value)


Rule = Callable[[Any], Any]


def check_table(table: Any, rules: Mapping[str, Rule], *, where: str,
                error: type[Exception], required: tuple[str, ...] = (),
                unknown_ok: bool = False) -> dict[str, Any]:
    """Check a table (a dict) against ``rules``; return the cleaned values of the keys present.

    Parameters
    ----------
    table : dict
        The parsed TOML table or JSON object.
    rules : mapping of str to rule
        Allowed keys and their rules.
    where : str
        Prefix of the messages, e.g. ``"night.toml: [grating]"``.
    error : exception class
        Raised (with one line: ``"<where> <key> <problem>"``) on the first problem.
    required : tuple of str
        Keys that must be present.
    unknown_ok : bool
        Let keys without a rule through unchecked (else they are an error).
    """
    if not isinstance(table, dict):
        raise error(f"{where} must be a table, got {describe(table)}")
    unknown = sorted(set(table) - set(rules))
    if unknown and not unknown_ok:
        raise error(f"{where} unknown key(s) {', '.join(unknown)}; allowed: "
                    f"{', '.join(sorted(rules))}")
    missing = [k for k in required if k not in table]
    if missing:
        raise error(f"{where} missing key(s) {', '.join(missing)}")
    out = {}
    for key, value in table.items():
        if key not in rules:
            out[key] = value
            continue
        try:
            out[key] = rules[key](value)
        except Invalid as exc:
            raise error(f"{where} {key} {exc}") from None
    return out


#: A physical grating angle in degrees (beyond ±90° no light reaches the grating face).
GRATING_ANGLE = Real(low=-90, high=90)


def option_type(rule: Rule, parse: Callable[[str], Any] = float) -> Callable[[str], Any]:
    """An argparse ``type=``: parse the text, then check it with ``rule`` (a refused value is
    an argparse error naming the option, exit code 2)."""

    def convert(text: str) -> Any:
        try:
            value = parse(text)
        except ValueError:
            value = text
        try:
            return rule(value)
        except Invalid as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    convert.__name__ = getattr(rule, "__name__", type(rule).__name__).lower()
    return convert


# -- lamps -------------------------------------------------------------------------------------

#: Element names accepted for symbols in lamp descriptions ("neon" for Ne). Only elements with a
#: shipped line list (:func:`known_lamps`) are accepted, whatever this table holds.
ELEMENT_NAMES = {"hydrogen": "H", "helium": "He", "neon": "Ne", "argon": "Ar", "krypton": "Kr",
                 "xenon": "Xe", "mercury": "Hg", "cadmium": "Cd", "zinc": "Zn", "sodium": "Na",
                 "thorium": "Th", "iron": "Fe", "copper": "Cu", "lithium": "Li"}
#: Words of lamp descriptions that name no element and are passed over.
FILLER_WORDS = frozenset(("lamp", "lamps", "and", "with", "on", "none", "off", "arc", "hollow",
                          "cathode", "pen", "ray"))


def known_lamps() -> tuple[str, ...]:
    """Element symbols with a shipped line list (:func:`wavecal.linelists.available_elements`)."""
    from .linelists import available_elements

    return available_elements()


def _split_symbols(token: str, known: tuple[str, ...]) -> list[str] | None:
    """Split a word made only of element symbols ("HgAr"); None if it is anything else."""
    if not token:
        return []
    for element in sorted(known, key=len, reverse=True):
        if token[:len(element)].lower() == element.lower():
            rest = _split_symbols(token[len(element):], known)
            if rest is not None:
                return [element, *rest]
    return None


def parse_lamps(text: str) -> tuple[str, ...]:
    """Element symbols named in a free-text lamp description, in order of appearance.

    Words are element symbols, run together or not ("HgAr", "Hg+Ar", "ne, xe"), element names
    ("neon") or one of :data:`FILLER_WORDS` ("lamp", "none" ...), which name nothing.

    Raises
    ------
    Invalid
        For any other word, or an element without a shipped line list; the message lists the
        known elements.
    """
    known = known_lamps()
    ordered: list[str] = []
    for token in re.findall(r"[A-Za-z]+", str(text)):
        word = token.lower()
        if word in FILLER_WORDS:
            continue
        symbols = [ELEMENT_NAMES[word]] if word in ELEMENT_NAMES else _split_symbols(token, known)
        if symbols is None or any(s not in known for s in symbols):
            raise Invalid(f"unknown lamp {token!r} in {describe(text)} "
                          f"(known: {', '.join(known)})")
        ordered.extend(s for s in symbols if s not in ordered)
    return tuple(ordered)


@dataclass(frozen=True)
class Lamps:
    """A list of lamp element symbols, each with a shipped line list."""

    def __call__(self, value: Any) -> tuple[str, ...]:
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise Invalid(f'must be a list of element symbols such as ["Hg", "Ar"], '
                          f"got {describe(value)}")
        known = known_lamps()
        wrong = [v for v in value if v not in known]
        if wrong:
            raise Invalid(f"names unknown lamp(s) {', '.join(map(repr, wrong))} "
                          f"(known: {', '.join(known)})")
        return tuple(value)
