"""Reference line lists: the shipped ECSV tables of arc-lamp lines, selected and merged.

One ECSV file per element lives in the ``wavecal.line_lists`` package (``line_lists/`` in the
source tree). Each holds standard-air wavelengths in nm (the NIST Atomic Spectra Database
convention for 200–2000 nm) with a relative intensity, ``blend``, ``weak`` and ``verified``
flags, the spectrum (``"Ar I"``, ``"Ar II"`` ...), the source of each value and a note; the table
metadata documents the intensity scale, the flag rules and the references. A lamp's file holds every
spectrum the lamp shows (an argon lamp: Ar I and Ar II), with intensities on one scale per file.
Files written before the ``spectrum`` column existed are still read: their lines take the
spectrum named in the table metadata.

Vacuum wavelengths are computed on request with :mod:`wavecal.airvac`.
"""
from __future__ import annotations

import functools
from collections.abc import Iterable
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from astropy.table import Table

from . import airvac
from ._resources import data_folder

if TYPE_CHECKING:
    from importlib.resources.abc import Traversable

__all__ = ["MEDIA", "LineList", "available_elements", "load_line_list"]

#: Media a wavelength can refer to.
MEDIA = ("air", "vacuum")

_COLUMNS = ("wavelength", "intensity", "blend", "weak", "verified")
_FLAGS = ("blend", "weak", "verified")
_SPECTRUM_COLUMN = "spectrum"


@dataclass(frozen=True, eq=False)
class LineList:
    """Reference emission lines of one or more elements, sorted by wavelength.

    All arrays have shape ``(N,)`` and are read-only.

    Attributes
    ----------
    wavelength_nm : ndarray of float
        Wavelengths in nm, in :attr:`medium`.
    intensity : ndarray of float
        Relative intensity on each element's own scale (see the ECSV metadata); not comparable
        between elements.
    element : ndarray of str
        Element symbol of each line (``"Hg"``, ``"Ne"`` ...).
    blend : ndarray of bool
        Another line of the same element lies within 0.15 nm, or the line is an unresolved
        fine-structure blend: its measured centre depends on the resolution.
    weak : ndarray of bool
        Faint in a typical lamp.
    verified : ndarray of bool
        False for wavelengths not checked against a published source.
    medium : {"air", "vacuum"}
        Medium of :attr:`wavelength_nm` (air means standard air).
    spectrum : ndarray of str
        Emitting spectrum of each line (``"Ar I"`` neutral, ``"Ar II"`` singly ionised ...); an
        empty string where the source file does not say. Defaults to empty strings.
    """

    wavelength_nm: np.ndarray
    intensity: np.ndarray
    element: np.ndarray
    blend: np.ndarray
    weak: np.ndarray
    verified: np.ndarray
    medium: str = "air"
    spectrum: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.medium not in MEDIA:
            msg = f"medium must be one of {MEDIA}, got {self.medium!r}"
            raise ValueError(msg)
        n = len(np.atleast_1d(self.wavelength_nm))
        if self.spectrum is None:
            object.__setattr__(self, "spectrum", np.full(n, ""))
        dtypes = {"wavelength_nm": float, "intensity": float, "element": str,
                  "blend": bool, "weak": bool, "verified": bool, "spectrum": str}
        for name, dtype in dtypes.items():
            values = np.array(getattr(self, name), dtype=dtype, ndmin=1)
            if values.shape != (n,):
                msg = f"LineList.{name} has shape {values.shape}; expected ({n},) like wavelength_nm"
                raise ValueError(msg)
            values.setflags(write=False)
            object.__setattr__(self, name, values)

    def __len__(self) -> int:
        return int(self.wavelength_nm.size)

    def _subset(self, keep: np.ndarray) -> LineList:
        return LineList(self.wavelength_nm[keep], self.intensity[keep], self.element[keep],
                        self.blend[keep], self.weak[keep], self.verified[keep],
                        medium=self.medium, spectrum=self.spectrum[keep])

    def in_range(self, lo_nm: float, hi_nm: float) -> LineList:
        """The lines with ``lo_nm <= wavelength_nm <= hi_nm`` (in this list's medium)."""
        if not (np.isfinite(lo_nm) and np.isfinite(hi_nm) and lo_nm < hi_nm):
            msg = f"wavelength range must be finite with lo_nm < hi_nm, got ({lo_nm!r}, {hi_nm!r})"
            raise ValueError(msg)
        return self._subset((self.wavelength_nm >= lo_nm) & (self.wavelength_nm <= hi_nm))

    def _converted(self, medium: str, method: str) -> LineList:
        if method not in airvac.AIRVAC_METHODS:
            msg = f"method must be one of {airvac.AIRVAC_METHODS}, got {method!r}"
            raise ValueError(msg)
        if medium == self.medium:
            return self
        convert = airvac.air_to_vacuum if medium == "vacuum" else airvac.vacuum_to_air
        wavelength = convert(self.wavelength_nm, method=method)
        return LineList(wavelength, self.intensity, self.element, self.blend, self.weak,
                        self.verified, medium=medium, spectrum=self.spectrum)

    def to_vacuum(self, *, method: str = airvac.DEFAULT_METHOD) -> LineList:
        """The same lines with vacuum wavelengths (``self`` if already in vacuum).

        Parameters
        ----------
        method : str
            Standard-air formula, one of :data:`wavecal.airvac.AIRVAC_METHODS`.
        """
        return self._converted("vacuum", method)

    def to_air(self, *, method: str = airvac.DEFAULT_METHOD) -> LineList:
        """The same lines with standard-air wavelengths (``self`` if already in air).

        Parameters
        ----------
        method : str
            Standard-air formula, one of :data:`wavecal.airvac.AIRVAC_METHODS`.
        """
        return self._converted("air", method)

    def to_dataframe(self) -> pd.DataFrame:
        """One row per line: ``wavelength_nm``, ``intensity``, ``element``, ``blend``, ``weak``,
        ``verified``, ``spectrum``; the medium is in ``DataFrame.attrs["medium"]``."""
        frame = pd.DataFrame({
            "wavelength_nm": self.wavelength_nm,
            "intensity": self.intensity,
            "element": self.element,
            "blend": self.blend,
            "weak": self.weak,
            "verified": self.verified,
            "spectrum": self.spectrum,
        })
        frame.attrs["medium"] = self.medium
        return frame


def _folder() -> Traversable:
    return data_folder("line_lists")


@functools.lru_cache(maxsize=1)
def available_elements() -> tuple[str, ...]:
    """Element symbols with a shipped line list, sorted alphabetically."""
    return tuple(sorted(entry.name[:-len(".ecsv")] for entry in _folder().iterdir()
                        if entry.name.endswith(".ecsv")))


@functools.lru_cache(maxsize=None)
def _read_element(element: str) -> LineList:
    with resources.as_file(_folder() / f"{element}.ecsv") as path:
        return _read_table(path, element)


def _read_table(path: Path, element: str) -> LineList:
    """The lines of one ECSV line-list file, with the old (no ``spectrum`` column) or new layout."""
    table = Table.read(path, format="ascii.ecsv")
    missing = [name for name in _COLUMNS if name not in table.colnames]
    if missing:
        msg = f"{path}: line list lacks column(s) {missing}"
        raise ValueError(msg)
    if table.meta.get("medium") != "air" or str(table["wavelength"].unit) != "nm":
        msg = (f"{path}: line list must give air wavelengths in nm, found medium "
               f"{table.meta.get('medium')!r} and unit {str(table['wavelength'].unit)!r}")
        raise ValueError(msg)
    n = len(table)
    if _SPECTRUM_COLUMN in table.colnames:
        spectrum = np.asarray(table[_SPECTRUM_COLUMN], dtype=str)
    else:
        spectrum = np.full(n, str(table.meta.get("spectrum", "")))
    return LineList(np.asarray(table["wavelength"], dtype=float),
                    np.asarray(table["intensity"], dtype=float),
                    np.full(n, element),
                    *(np.asarray(table[flag], dtype=bool) for flag in _FLAGS),
                    medium="air", spectrum=spectrum)


def _normalised(elements: str | Iterable[str]) -> list[str]:
    names = [elements] if isinstance(elements, str) else list(elements)
    known = available_elements()
    chosen: list[str] = []
    for raw in names:
        name = str(raw).strip().capitalize()
        if name not in known:
            msg = f"no line list for element {raw!r}; available: {', '.join(known)}"
            raise ValueError(msg)
        if name not in chosen:
            chosen.append(name)
    if not chosen:
        msg = f"no element given; available: {', '.join(known)}"
        raise ValueError(msg)
    return chosen


def load_line_list(elements: str | Iterable[str], *, medium: str = "air",
                   include_weak: bool = True,
                   wavelength_range_nm: tuple[float, float] | None = None,
                   airvac_method: str = airvac.DEFAULT_METHOD) -> LineList:
    """Reference lines of one or more elements, merged and sorted by wavelength.

    Parameters
    ----------
    elements : str or iterable of str
        Element symbols (case-insensitive), e.g. ``"Ne"`` or ``("Hg", "Ar")``; duplicates are
        ignored. See :func:`available_elements`.
    medium : {"air", "vacuum"}
        Medium of the returned wavelengths; vacuum values are converted from the stored
        standard-air values with :func:`wavecal.airvac.air_to_vacuum`.
    include_weak : bool
        Keep lines flagged ``weak``.
    wavelength_range_nm : (float, float), optional
        Keep only lines within ``[lo, hi]`` nm, in the requested medium.
    airvac_method : str
        Standard-air formula for the vacuum conversion, one of
        :data:`wavecal.airvac.AIRVAC_METHODS`.

    Returns
    -------
    LineList

    Raises
    ------
    ValueError
        For an unknown element (the message lists the available ones), no element, an unknown
        medium or an invalid range.
    """
    if medium not in MEDIA:
        msg = f"medium must be one of {MEDIA}, got {medium!r}"
        raise ValueError(msg)
    parts = [_read_element(name) for name in _normalised(elements)]
    wavelength = np.concatenate([part.wavelength_nm for part in parts])
    order = np.argsort(wavelength, kind="stable")
    merged = LineList(
        wavelength[order],
        np.concatenate([part.intensity for part in parts])[order],
        np.concatenate([part.element for part in parts])[order],
        *(np.concatenate([getattr(part, flag) for part in parts])[order] for flag in _FLAGS),
        medium="air",
        spectrum=np.concatenate([part.spectrum for part in parts])[order],
    )
    if not include_weak:
        merged = merged._subset(~merged.weak)
    merged = merged._converted(medium, airvac_method)
    if wavelength_range_nm is not None:
        merged = merged.in_range(*wavelength_range_nm)
    return merged
