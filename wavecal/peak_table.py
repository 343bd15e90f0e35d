"""The vocabulary of found lines: quality flags (:class:`PeakFlag`) and the peak table.

:func:`wavecal.peaks.find_peaks` fills a :class:`PeakTable`; the later stages (tracing,
identification, reports) read it and its flags without loading the peak finder.
"""
from __future__ import annotations

import enum
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._line_widths import WidthModel

__all__ = ["COLUMNS", "PeakFlag", "PeakTable", "describe_flags"]

#: Columns of :attr:`PeakTable.table`.
COLUMNS = ("x", "x_err", "fwhm", "fwhm_err", "flux", "flux_err", "amplitude", "background", "snr",
           "reduced_chi2", "flags", "fwhm_expected")


class PeakFlag(enum.IntFlag):
    """Quality bits of a fitted line (column ``flags``; 0 means none)."""

    #: A pixel within one expected FWHM of the centre is saturated; the centre comes from a fit
    #: of the unsaturated wings (saturated pixels and their neighbours left out), the width from
    #: a prior at the expected FWHM, and ``x_err`` from that fit.
    SATURATED = 1
    #: Fitted jointly with a line closer than ``blend_separation`` expected FWHM.
    BLENDED = 2
    #: Within ``edge_margin`` of an end of the spectrum or of a bad pixel.
    EDGE = 4
    #: The fit failed, did not converge, gave a non-positive flux or moved the centre by more
    #: than an expected FWHM from the detection.
    POOR_FIT = 8
    #: FWHM significantly (5 sigma) and strongly (by more than a factor 1.25) unlike the FWHM
    #: expected at its position (``fwhm_expected``, from the width model; the ratio is
    #: ``fwhm / fwhm_expected``). A wider line may be an unresolved blend: its ``x_err``
    #: includes the possible offset of the blend's centroid from its brighter component. Such
    #: a line is to be down-weighted through its ``x_err``, never excluded for its width alone.
    ODD_WIDTH = 16


def describe_flags(value: int) -> tuple[str, ...]:
    """Names of the :class:`PeakFlag` bits set in ``value`` (empty for 0).

    >>> describe_flags(5)
    ('SATURATED', 'EDGE')
    """
    value = int(value)
    return tuple(flag.name for flag in PeakFlag if value & flag)


@dataclass(frozen=True, eq=False)
class PeakTable:
    """Lines found in a spectrum.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per line, sorted by ``x``, with columns :data:`COLUMNS`: ``x`` (centre, raw
        pixel coordinate of the spectrum), ``x_err`` (1-sigma), ``fwhm`` and ``fwhm_err``
        (pixels; ``fwhm_err`` is NaN when the width was not measured, as for saturated lines),
        ``flux`` and ``flux_err`` (electrons), ``amplitude`` (peak of the Gaussian, electrons per
        pixel), ``background`` (continuum plus local background under the line, electrons per
        pixel), ``snr`` (``flux / flux_err``; NaN when that is not finite), ``reduced_chi2`` (reduced
        chi-square of the fit), ``flags`` (a :class:`PeakFlag` bit mask) and ``fwhm_expected``
        (the width model's FWHM at ``x``, pixels).
    fwhm_typical : float
        Typical FWHM of the lines in pixels: the median of the width model over the spectrum.
    width_model : WidthModel, optional
        Expected FWHM along the spectrum (in index units of the spectrum; use :meth:`fwhm_at`).
    x_offset : float
        Coordinate ``x`` of the spectrum's first pixel.
    """

    table: pd.DataFrame
    fwhm_typical: float
    width_model: WidthModel | None = None
    x_offset: float = 0.0

    def __len__(self) -> int:
        return len(self.table)

    def good(self) -> pd.DataFrame:
        """Rows with no flag set."""
        return self.table[self.table["flags"] == 0]

    def fwhm_at(self, x: np.ndarray | float) -> np.ndarray:
        """Expected FWHM (pixels) at positions ``x`` (coordinates of the spectrum).

        The width model is clamped at the ends of the range of the lines it was fitted to;
        without a width model, :attr:`fwhm_typical` everywhere.
        """
        x = np.asarray(x, dtype=np.float64)
        if self.width_model is None:
            return np.full(x.shape, self.fwhm_typical)
        return self.width_model(x - self.x_offset)

    def by_strength(self) -> pd.DataFrame:
        """The rows ordered by decreasing ``snr``; a row whose ``snr`` is not finite comes last."""
        snr = self.table["snr"].to_numpy(np.float64)
        key = np.where(np.isfinite(snr), -snr, np.inf)
        return self.table.iloc[np.argsort(key, kind="stable")]

    def to_table(self) -> pd.DataFrame:
        """A copy of the table with an extra ``flag_names`` column."""
        out = self.table.copy()
        out["flag_names"] = ["|".join(describe_flags(v)) for v in out["flags"]]
        return out

    def summary(self) -> dict:
        """JSON-safe counts: lines, unflagged lines, lines per flag, typical FWHM."""
        flags = self.table["flags"].to_numpy()
        return {
            "n_peaks": int(len(self.table)),
            "n_good": int(np.count_nonzero(flags == 0)),
            "fwhm_typical": None if not np.isfinite(self.fwhm_typical) else float(self.fwhm_typical),
            "flag_counts": {flag.name: int(np.count_nonzero(flags & flag)) for flag in PeakFlag},
        }
