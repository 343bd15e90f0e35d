"""FITS WCS for a wavelength solution: the grating algorithm where it is exact enough, else a table.

:func:`solution_wcs` describes the wavelength of every pixel of an image calibrated by a
:class:`~wavecal.solution.Solution` with FITS WCS keywords (Greisen et al. 2006, "Paper III"):

1. **Grating algorithm** (``AWAV-GRA``/``WAVE-GRI`` and the mixed forms ``WAVE-GRA``,
   ``AWAV-GRI``; written by :mod:`wavecal.wcs_grating`). The physical model of a spectrograph without distortion *is* the geometry of
   this algorithm (see :mod:`wavecal.optics`), so its header reproduces the model exactly. With a
   distortion term, the best distortion-free model (camera-axis pixel, focal length and detector
   tilt refitted to the solution) is tried instead. The header is evaluated with astropy.wcs at
   every pixel centre of the image and used only if it agrees with the solution to within
   :data:`GRATING_TOLERANCE_PX` everywhere (along the slit too).
2. **Tabular algorithm** (``-TAB``) otherwise: a lookup table of wavelengths at knots spaced so
   that linear interpolation stays within :data:`TABLE_TOLERANCE_PX` of the solution. When the
   wavelength depends on the position along the slit (line tilt or curvature), the table is
   two-dimensional: both image axes are ``-TAB`` axes sharing one coordinate array of
   (wavelength, slit position) pairs, interpolated bilinearly.

The spatial axis of a 2-D image is a linear axis ``SLIT`` (``SLIT-TAB`` with a 2-D table) whose
value is the 0-based pixel of the raw frame along the slit, the ``y`` of
:meth:`Solution.wavelength`.

Air and vacuum: the grating algorithm is evaluated in the medium of the solution (``-GRA`` for
air, ``-GRI`` for vacuum); another output medium uses the mixed form, in which WCSLIB converts
with the Edlén 1953 / Cox 2000 standard-air formula. wavecal converts with Ciddor 1996
(:mod:`wavecal.airvac`). The agreement check compares the header with the solution converted by
Ciddor 1996, so a mixed form is only chosen where the two formulas agree to the tolerance; the
conversion the header implies is named in :attr:`SpectralWCS.conversion`.

Pixel conventions: FITS pixel numbers are 1-based (``CRPIX``); the solution's are 0-based along
the raw frame, and ``origin`` gives the raw-frame pixel of the image's first pixel.
"""
from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from astropy.io import fits

from .resample import WavelengthGrid
from .wcs_grating import evaluate_1d, grating_candidate, physical_approximation, spectral_ctype

__all__ = [
    "GRATING_TOLERANCE_PX",
    "TABLE_TOLERANCE_PX",
    "TABLE_EXTNAME",
    "SLIT_CTYPE",
    "AIRVAC_WAVECAL",
    "SpectralWCS",
    "solution_wcs",
    "table_wcs",
    "grid_wcs",
    "spatial_cards",
    "image_geometry",
    "pixel_wavelengths",
]

#: Largest disagreement (pixels) between a grating-algorithm header and the solution, at any
#: pixel, for the grating algorithm to be written.
GRATING_TOLERANCE_PX = 0.01
#: Interpolation error (pixels) a lookup table is built to stay within, along each image axis.
TABLE_TOLERANCE_PX = 0.001
#: EXTNAME of the lookup-table extension.
TABLE_EXTNAME = "WAVE-TAB"
#: CTYPE of the spatial axis (position along the slit, raw-frame pixels).
SLIT_CTYPE = "SLIT"
#: Name of the air/vacuum conversion wavecal applies to table and grid values.
AIRVAC_WAVECAL = "Ciddor 1996 std air (wavecal)"

#: Knot spacings (pixels) tried for a lookup table, coarsest first.
_STEPS = (256, 128, 64, 32, 16, 8, 4, 2, 1)
_TABLE_WAVELENGTH = "WAVELENGTH"
_TABLE_COORDS = "COORDS"


@dataclass(frozen=True, eq=False)
class SpectralWCS:
    """WCS keywords (and lookup table) describing the wavelengths of an image.

    Attributes
    ----------
    header : astropy.io.fits.Header
        WCS cards for every axis of the image (``WCSAXES`` first).
    table : astropy.io.fits.BinTableHDU or None
        The lookup-table extension a ``-TAB`` header refers to (EXTNAME :data:`TABLE_EXTNAME`).
    algorithm : str
        ``"GRA"``/``"GRI"`` (grating), ``"TAB"`` (1-D table), ``"TAB2D"`` (table over both
        axes), ``"LINEAR"`` or ``"LOG"`` (resampled grids).
    ctype : str
        CTYPE of the spectral axis.
    medium : str
        ``"air"`` or ``"vacuum"``: the medium of the wavelengths the header gives.
    conversion : str
        The air/vacuum conversion between the solution and the header, or ``"none"``.
    max_error_px : float
        Largest disagreement with the solution over every pixel centre (pixels), as evaluated
        for the choice (astropy.wcs for the grating algorithm, the table's linear interpolation
        for ``-TAB``). NaN where not applicable (resampled grids, which are exact).
    spectral_axis : int
        FITS axis number (1-based) of the wavelength axis.
    knot_spacing : tuple of int or None
        Knot spacing of the table in pixels ``(along the dispersion, along the slit)``.
    """

    header: fits.Header
    table: fits.BinTableHDU | None
    algorithm: str
    ctype: str
    medium: str
    conversion: str
    max_error_px: float
    spectral_axis: int
    knot_spacing: tuple[int, int] | None = None

    def summary(self) -> dict[str, Any]:
        """A JSON-safe dictionary of the choice made."""
        return {"algorithm": self.algorithm, "ctype": self.ctype, "medium": self.medium,
                "conversion": self.conversion, "max_error_px": float(self.max_error_px),
                "spectral_axis": self.spectral_axis,
                "knot_spacing": None if self.knot_spacing is None else list(self.knot_spacing)}


# ------------------------------------------------------------------------------------------------
# Tabular algorithm
# ------------------------------------------------------------------------------------------------

def _knots(n: int, step: int) -> np.ndarray:
    """0-based knot positions from the first pixel's lower edge to the last pixel's upper edge."""
    return np.append(np.arange(-0.5, n - 0.5, float(step)), n - 0.5)


def _interp_error_px(knots: np.ndarray, at_knots: np.ndarray, centres: np.ndarray,
                     at_centres: np.ndarray, dispersion: np.ndarray) -> float:
    """Largest linear-interpolation error (pixels) over rows of values (last axis interpolated)."""
    at_knots = np.atleast_2d(at_knots)
    at_centres = np.atleast_2d(at_centres)
    worst = 0.0
    for k_row, c_row, d_row in zip(at_knots, at_centres, np.atleast_2d(dispersion)):
        err = np.abs(np.interp(centres, knots, k_row) - c_row) / d_row
        worst = max(worst, float(np.max(err)))
    return worst


def _choose_step(n: int, evaluate, centres_values: np.ndarray, dispersion: np.ndarray,
                 tolerance: float) -> int:
    """Coarsest knot spacing whose interpolation error along one axis is within ``tolerance``.

    ``evaluate(knots)`` gives values at 0-based knot positions, shaped like ``centres_values``
    with the interpolated axis last.
    """
    centres = np.arange(n, dtype=float)
    for step in _STEPS:
        knots = _knots(n, step)
        if _interp_error_px(knots, evaluate(knots), centres, centres_values, dispersion) <= tolerance:
            return step
    return 1


def _table_column(name: str, values: np.ndarray, dim: str | None = None) -> fits.Column:
    return fits.Column(name=name, format=f"{values.size}D", dim=dim,
                       array=values.reshape((1,) + values.shape))


def table_wcs(knots_fits: Sequence[float], wavelengths_nm: np.ndarray, *, medium: str,
              axis: int = 1) -> tuple[fits.Header, fits.BinTableHDU]:
    """A 1-D ``-TAB`` spectral axis: wavelengths at FITS pixel positions, linearly interpolated.

    Parameters
    ----------
    knots_fits : sequence of float
        Strictly increasing FITS (1-based) pixel positions of the knots.
    wavelengths_nm : ndarray
        Wavelength at each knot (nm, strictly monotonic).
    medium : {"air", "vacuum"}
    axis : int
        FITS axis number.

    Returns
    -------
    header, table
        The axis cards and the table extension (EXTNAME :data:`TABLE_EXTNAME`).

    Raises
    ------
    ValueError
        If the knots are not strictly increasing or the wavelengths not finite and strictly
        monotonic (WCSLIB aborts the process on a non-monotonic index vector).
    """
    knots = np.asarray(knots_fits, dtype=float)
    lam = np.asarray(wavelengths_nm, dtype=float)
    _check_monotonic(knots, "table index vector", increasing=True)
    _check_monotonic(lam, "table wavelengths")
    table = fits.BinTableHDU.from_columns(
        [_table_column(_TABLE_WAVELENGTH, lam[:, np.newaxis], dim=f"(1,{lam.size})"),
         _table_column(f"INDEX{axis}", knots)], name=TABLE_EXTNAME)
    h = fits.Header()
    h[f"CTYPE{axis}"] = spectral_ctype(medium, "TAB")
    h[f"CUNIT{axis}"] = "nm"
    h.update(_tab_index_cards(axis, _TABLE_WAVELENGTH, f"INDEX{axis}", 1))
    return h, table


def _tab_index_cards(axis: int, coords: str, index: str, table_axis: int) -> fits.Header:
    h = fits.Header()
    h[f"CRPIX{axis}"] = (1.0, "table index = FITS pixel number")
    h[f"CRVAL{axis}"] = 1.0
    h[f"CDELT{axis}"] = 1.0
    h[f"PS{axis}_0"] = (TABLE_EXTNAME, "EXTNAME of the lookup table")
    h[f"PS{axis}_1"] = (coords, "coordinate array column")
    h[f"PS{axis}_2"] = (index, "index vector column (FITS pixels)")
    h[f"PV{axis}_1"] = 1
    h[f"PV{axis}_2"] = 1
    h[f"PV{axis}_3"] = (table_axis, "axis of the coordinate array")
    return h


def _check_monotonic(values: np.ndarray, what: str, *, increasing: bool = False) -> None:
    d = np.diff(values)
    ok = np.all(np.isfinite(values)) and (np.all(d > 0) or (not increasing and np.all(d < 0)))
    if not ok:
        msg = f"{what} must be finite and strictly {'increasing' if increasing else 'monotonic'}"
        raise ValueError(msg)


def _table_2d(spec_axis: int, slit_axis: int, kx: np.ndarray, ky: np.ndarray,
              lam: np.ndarray, y0: float, medium: str) -> tuple[fits.Header, fits.BinTableHDU]:
    """Both axes ``-TAB`` over one (wavelength, slit position) array of shape (len(ky), len(kx))."""
    for row in lam:
        _check_monotonic(row, "table wavelengths along the dispersion")
    _check_monotonic(kx, "table index vector", increasing=True)
    _check_monotonic(ky, "table index vector", increasing=True)
    coords = np.empty(lam.shape + (2,))
    coords[..., 0] = lam
    coords[..., 1] = (ky - 1.0 + y0)[:, np.newaxis]
    table = fits.BinTableHDU.from_columns(
        [_table_column(_TABLE_COORDS, coords, dim=f"(2,{kx.size},{ky.size})"),
         _table_column(f"INDEX{spec_axis}", kx), _table_column(f"INDEX{slit_axis}", ky)],
        name=TABLE_EXTNAME)
    h = fits.Header()
    h[f"CTYPE{spec_axis}"] = spectral_ctype(medium, "TAB")
    h[f"CUNIT{spec_axis}"] = "nm"
    h[f"CTYPE{slit_axis}"] = f"{SLIT_CTYPE}-TAB"
    h[f"CUNIT{slit_axis}"] = "pix"
    h.update(_tab_index_cards(spec_axis, _TABLE_COORDS, f"INDEX{spec_axis}", 1))
    h.update(_tab_index_cards(slit_axis, _TABLE_COORDS, f"INDEX{slit_axis}", 2))
    return h, table


def spatial_cards(axis: int, first_row: float) -> fits.Header:
    """Linear slit-position axis: raw-frame pixel along the slit (0-based) of each image row."""
    h = fits.Header()
    h[f"CTYPE{axis}"] = (SLIT_CTYPE, "position along the slit")
    h[f"CUNIT{axis}"] = ("pix", "0-based raw-frame pixel")
    h[f"CRPIX{axis}"] = 1.0
    h[f"CRVAL{axis}"] = float(first_row)
    h[f"CDELT{axis}"] = 1.0
    return h


# ------------------------------------------------------------------------------------------------
# The choice
# ------------------------------------------------------------------------------------------------

def _solution_wavelengths(solution: Any, x: np.ndarray, y: np.ndarray | None, medium: str) -> np.ndarray:
    """λ (nm) at raw-frame pixels ``x`` (last axis) and rows ``y``: shape (len(y) or 1, len(x))."""
    if y is None:
        return np.atleast_2d(np.asarray(solution.wavelength(x, medium=medium), dtype=float))
    lam = solution.wavelength(x[np.newaxis, :], y[:, np.newaxis], medium=medium)
    return np.broadcast_to(np.asarray(lam, dtype=float), (y.size, x.size))


def pixel_wavelengths(solution: Any, shape: tuple[int, ...], *, medium: str | None = None,
                      origin: tuple[int, int] = (0, 0)) -> np.ndarray:
    """The solution's wavelengths (nm) at every pixel centre of an image.

    Returns an array of shape (rows, n) with the dispersion along the last axis when the
    wavelength depends on the row (a 2-D image and a solution with a slit model), else (1, n).
    """
    disp, x0, y0 = image_geometry(solution, shape, origin)
    x = x0 + np.arange(int(shape[disp]), dtype=float)
    if len(shape) == 2 and getattr(solution, "slit", None) is not None:
        y = y0 + np.arange(int(shape[1 - disp]), dtype=float)
        return _solution_wavelengths(solution, x, y, medium or solution.medium)
    return _solution_wavelengths(solution, x, None, medium or solution.medium)


def _check_wavelengths(lam: np.ndarray) -> None:
    d = np.diff(lam, axis=-1)
    if not (np.all(np.isfinite(lam)) and (np.all(d > 0) or np.all(d < 0))):
        msg = ("the solution gives no finite, monotonic wavelength scale over the image "
               "(is the image larger than the detector the solution describes?)")
        raise ValueError(msg)


def image_geometry(solution: Any, shape: tuple[int, ...],
                   origin: tuple[int, int] = (0, 0)) -> tuple[int, float, float]:
    """Where an image lies on the raw frame the solution describes.

    Parameters
    ----------
    solution : Solution
    shape : tuple of int
        ``(n,)`` for a spectrum or ``(rows, columns)``.
    origin : tuple of int
        ``(row, column)`` of the raw frame held by the image's first pixel. For a spectrum, the
        entry along the solution's dispersion axis is its first pixel's raw position.

    Returns
    -------
    axis, x0, y0
        numpy axis of the image along the dispersion (``solution.dispersion_axis`` for 2-D, 0
        for a spectrum), raw pixel ``x`` of its first pixel along the dispersion and raw pixel
        ``y`` of its first row along the slit (0 for a spectrum).
    """
    disp = int(solution.dispersion_axis)
    x0, y0 = float(origin[disp]), float(origin[1 - disp])
    return (disp, x0, y0) if len(shape) == 2 else (0, x0, 0.0)


def solution_wcs(solution: Any, shape: tuple[int, ...], *, medium: str | None = None,
                 origin: tuple[int, int] = (0, 0),
                 grating_tolerance_px: float = GRATING_TOLERANCE_PX,
                 table_tolerance_px: float = TABLE_TOLERANCE_PX,
                 wavelengths: np.ndarray | None = None) -> SpectralWCS:
    """The best WCS description of the wavelengths of an image calibrated by ``solution``.

    Parameters
    ----------
    solution : Solution
        A solution with a model (anything with the public :class:`~wavecal.solution.Solution`
        interface: ``wavelength(x, y=None, medium=...)``, ``model``, ``medium``,
        ``dispersion_axis``; an optional ``slit`` attribute that is not None means the
        wavelength depends on the position along the slit).
    shape : tuple of int
        Shape of the image: ``(n,)`` for a spectrum along the dispersion, or ``(rows, columns)``
        with the dispersion along numpy axis ``solution.dispersion_axis``.
    medium : {"air", "vacuum"}, optional
        Medium of the wavelengths in the header; default the solution's.
    origin : tuple of int
        ``(row, column)`` of the raw frame held by the image's first pixel (see
        :func:`image_geometry`).
    grating_tolerance_px, table_tolerance_px : float
        See :data:`GRATING_TOLERANCE_PX` and :data:`TABLE_TOLERANCE_PX`.
    wavelengths : ndarray, optional
        The solution's wavelengths at every pixel centre in ``medium``, as
        :func:`pixel_wavelengths` gives them (to spare a second evaluation); computed if absent.

    Returns
    -------
    SpectralWCS

    Raises
    ------
    ValueError
        If the solution has no model, the shape is neither 1-D nor 2-D, or the solution gives
        no finite, monotonic wavelength over the image.
    """
    model = solution.model
    if model is None:
        msg = "this solution failed; it has no wavelength scale to describe"
        raise ValueError(msg)
    if len(shape) not in (1, 2):
        msg = f"image shape {shape} is neither 1-D nor 2-D"
        raise ValueError(msg)
    medium = medium or solution.medium
    two_d = len(shape) == 2
    disp_np, x0, y0 = image_geometry(solution, shape, origin)
    n_disp = int(shape[disp_np])
    n_rows = int(shape[1 - disp_np]) if two_d else 1
    spec_axis = len(shape) - disp_np  # numpy axis -> FITS axis number
    slit_axis = 3 - spec_axis
    x = x0 + np.arange(n_disp, dtype=float)
    y = y0 + np.arange(n_rows, dtype=float)
    depends_on_y = two_d and getattr(solution, "slit", None) is not None
    if wavelengths is None:
        lam = _solution_wavelengths(solution, x, y if depends_on_y else None, medium)
    else:
        lam = np.atleast_2d(np.asarray(wavelengths, dtype=float))
        if lam.shape != (n_rows if depends_on_y else 1, n_disp):
            msg = (f"wavelengths of shape {lam.shape} do not match the image: expected "
                   f"{(n_rows if depends_on_y else 1, n_disp)} (see pixel_wavelengths)")
            raise ValueError(msg)
    _check_wavelengths(lam)
    dispersion = np.abs(np.gradient(lam, axis=-1))

    def result(cards: fits.Header, table: fits.BinTableHDU | None, algorithm: str, ctype: str,
               conversion: str, error: float, steps: tuple[int, int] | None = None) -> SpectralWCS:
        h = fits.Header()
        h["WCSAXES"] = len(shape)
        h.update(cards)
        if two_d and algorithm != "TAB2D":
            h.update(spatial_cards(slit_axis, y0))
        return SpectralWCS(header=h, table=table, algorithm=algorithm, ctype=ctype, medium=medium,
                           conversion=conversion, max_error_px=float(error),
                           spectral_axis=spec_axis, knot_spacing=steps)

    # 1. the grating algorithm, checked by astropy.wcs against every pixel (every row too)
    physical = model
    if any(c != 0.0 for c in model.distortion):
        native = np.asarray(solution.wavelength(x), dtype=float)
        physical = physical_approximation(model, x, native, np.abs(np.gradient(native)))
    cand, conversion = grating_candidate(physical, solution.medium, medium, x0)
    err = float(np.max(np.abs(evaluate_1d(cand, n_disp)[np.newaxis, :] - lam) / dispersion))
    if err <= grating_tolerance_px:
        ctype = cand["CTYPE1"]
        return result(_renumber(cand, spec_axis), None, ctype[-3:], ctype, conversion, err)

    conversion = "none" if medium == solution.medium else AIRVAC_WAVECAL
    ctype = spectral_ctype(medium, "TAB")

    # 2. a 1-D table, when the wavelength does not depend on the row (to within the tolerance)
    spread = float(np.max(np.abs(lam - lam.mean(axis=0)) / dispersion))
    if spread <= table_tolerance_px:
        middle = [n_rows // 2] if depends_on_y else [0]
        ref_y = y[middle] if depends_on_y else None

        def along_x(knots: np.ndarray) -> np.ndarray:
            return _solution_wavelengths(solution, x0 + knots, ref_y, medium)

        step = _choose_step(n_disp, along_x, lam[middle], dispersion[middle], table_tolerance_px)
        knots = _knots(n_disp, step)
        at_knots = along_x(knots)[0]
        cards, table = table_wcs(knots + 1.0, at_knots, medium=medium, axis=spec_axis)
        interp = np.interp(np.arange(n_disp, dtype=float), knots, at_knots)
        error = float(np.max(np.abs(interp[np.newaxis, :] - lam) / dispersion))
        return result(cards, table, "TAB", ctype, conversion, error, (step, 0))

    # 3. a 2-D table over (dispersion, slit), bilinear
    rows = np.unique(np.linspace(0, n_rows - 1, 3).round().astype(int))
    cols = np.unique(np.linspace(0, n_disp - 1, 5).round().astype(int))
    step_x = _choose_step(
        n_disp, lambda k: _solution_wavelengths(solution, x0 + k, y[rows], medium),
        lam[rows], dispersion[rows], table_tolerance_px)
    step_y = _choose_step(
        n_rows, lambda k: _solution_wavelengths(solution, x[cols], y0 + k, medium).T,
        lam[:, cols].T, dispersion[:, cols].T, table_tolerance_px)
    while True:
        kx, ky = _knots(n_disp, step_x), _knots(n_rows, step_y)
        grid = _solution_wavelengths(solution, x0 + kx, y0 + ky, medium)
        error = float(np.max(np.abs(_bilinear(kx, ky, grid, n_disp, n_rows) - lam) / dispersion))
        if error <= 2 * table_tolerance_px or (step_x == 1 and step_y == 1):
            break
        step_x, step_y = max(1, step_x // 2), max(1, step_y // 2)
    cards, table = _table_2d(spec_axis, slit_axis, kx + 1.0, ky + 1.0, grid, y0, medium)
    return result(cards, table, "TAB2D", ctype, conversion, error, (step_x, step_y))


def grid_wcs(grid: WavelengthGrid, *, medium: str, ndim: int = 1, spectral_axis: int = 1,
             first_row: float = 0.0, conversion: str = "none") -> SpectralWCS:
    """WCS of a spectrum resampled onto ``grid`` (exact: no interpolation error).

    A linear grid gives a linear axis (``AWAV``/``WAVE``), a log grid the ``-LOG`` algorithm
    (λ = CRVAL exp(CDELT (p − CRPIX) / CRVAL)), a user grid a ``-TAB`` table of the bin edges at
    the FITS pixel edges 0.5 … M + 0.5, so that each bin centre (the mean of its edges) falls on
    its pixel centre. The wavelengths are in ``medium``; ``ndim = 2`` adds the linear slit axis.
    ``conversion`` names the air/vacuum conversion used to make the grid's wavelengths.
    """
    if ndim not in (1, 2) or spectral_axis not in range(1, ndim + 1):
        msg = f"a {ndim}-D image has no axis {spectral_axis}"
        raise ValueError(msg)
    centres = grid.centres
    table = None
    cards = fits.Header()
    if grid.kind == "user":
        cards, table = table_wcs(np.arange(grid.size + 1) + 0.5, grid.edges, medium=medium,
                                 axis=spectral_axis)
        algorithm = "TAB"
    else:
        algorithm = "LINEAR" if grid.kind == "linear" else "LOG"
        i = spectral_axis
        cards[f"CTYPE{i}"] = spectral_ctype(medium, "" if grid.kind == "linear" else "LOG")
        cards[f"CUNIT{i}"] = "nm"
        cards[f"CRPIX{i}"] = 1.0
        cards[f"CRVAL{i}"] = float(centres[0])
        cards[f"CDELT{i}"] = grid.step if grid.kind == "linear" else float(centres[0]) * grid.step
    h = fits.Header()
    h["WCSAXES"] = ndim
    h.update(cards)
    if ndim == 2:
        h.update(spatial_cards(3 - spectral_axis, first_row))
    return SpectralWCS(header=h, table=table, algorithm=algorithm, ctype=cards[f"CTYPE{spectral_axis}"],
                       medium=medium, conversion=conversion, max_error_px=math.nan,
                       spectral_axis=spectral_axis)


def _bilinear(kx: np.ndarray, ky: np.ndarray, grid: np.ndarray, nx: int, ny: int) -> np.ndarray:
    """Bilinear interpolation of ``grid`` (knots ky × kx) at every pixel centre: shape (ny, nx)."""
    def weights(knots, n):
        c = np.arange(n, dtype=float)
        i = np.clip(np.searchsorted(knots, c, side="right") - 1, 0, knots.size - 2)
        return i, (c - knots[i]) / (knots[i + 1] - knots[i])

    ix, wx = weights(kx, nx)
    along = grid[:, ix] * (1.0 - wx) + grid[:, ix + 1] * wx
    iy, wy = weights(ky, ny)
    return along[iy] * (1.0 - wy)[:, np.newaxis] + along[iy + 1] * wy[:, np.newaxis]


_AXIS_KEY = re.compile(r"^(CTYPE|CUNIT|CRPIX|CRVAL|CDELT)1$|^(PV|PS)1_(\d+)$")


def _renumber(header: fits.Header, axis: int) -> fits.Header:
    """Copy of 1-axis cards with the axis number changed to ``axis``."""
    out = fits.Header()
    for card in header.cards:
        m = _AXIS_KEY.match(card.keyword)
        if m is None:
            msg = f"unexpected keyword {card.keyword} in a 1-axis WCS"
            raise ValueError(msg)
        key = f"{m.group(1)}{axis}" if m.group(1) else f"{m.group(2)}{axis}_{m.group(3)}"
        out[key] = (card.value, card.comment)
    return out
