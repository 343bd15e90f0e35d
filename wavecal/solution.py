"""The wavelength solution: evaluate, invert, report, and its versioned JSON file.

A :class:`Solution` is what a calibration returns and what :func:`load_solution` reads back. It
evaluates the fitted physical model (``wavelength``/``pixel``), carries every detected peak with
its identification (``lines``), the fitted parameters with uncertainties and correlations, and
the verdict (``status`` and ``reasons``). The JSON layout is documented in the README
("Solution file").

Whole slit
----------
The physical model gives the wavelength along the *reference row* of the slit. A solution of a
long-slit frame also carries a :class:`~wavecal.slit_shift.SlitShift` ``Δ(x, y)``: a line at ``x`` on
the reference row lies at ``x + Δ(x, y)`` on row ``y`` (``y`` the 0-based pixel along the spatial
axis of the raw frame), so the wavelength at ``(x, y)`` is the model's at the reference-row
position ``r`` solving ``r + Δ(r, y) = x``. Without a slit model (a single row, or
``trace_slit=False``) the wavelength does not depend on ``y``.
"""
from __future__ import annotations

import dataclasses
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ._atomic import atomic_write_text
from ._json import jsonable
from .errors import SolutionFileError
from .validation import (
    Boolean,
    Choice,
    Integer,
    Optional,
    Real,
    Rule,
    Sequence,
    Table,
    Text,
    check_table,
)
from .airvac import air_to_vacuum, vacuum_to_air
from .fit import wavelength_sigma
from .optics import GratingModel
from .determination import Determination, what_data_determine
from .slit_shift import SlitShift
from .solution_records import FitStatistics, PhysicalParameters
from .status import Status

__all__ = ["Solution", "load_solution", "SCHEMA_VERSION", "READABLE_VERSIONS", "STATUSES"]

#: Version of the JSON layout written by :meth:`Solution.write` (2: optional ``slit`` block;
#: 3: statistics ``reduced_chi2``, formerly ``redchi``, and every statistic always present).
SCHEMA_VERSION = 3
#: Versions :func:`load_solution` reads.
READABLE_VERSIONS = (1, 2, 3)
#: Possible verdicts, from best to worst.
STATUSES = tuple(s.value for s in (Status.OK, Status.SUSPECT, Status.FAILED))

#: Columns of :attr:`Solution.lines`, in order.
LINE_COLUMNS = (
    "x", "x_err", "fwhm", "flux", "snr", "flags",
    "identification", "element", "line_wavelength", "line_intensity", "line_verified",
    "wavelength_fit", "residual_px", "residual_nm", "residual_kms", "sigma_px", "source",
)


@dataclass(frozen=True)
class Solution:
    """A pixel-to-wavelength solution for one arc frame.

    Attributes
    ----------
    status : Status
        ``"ok"``, ``"suspect"`` or ``"failed"``.
    reasons : tuple of str
        Plain-language reasons behind the status (empty for a clean ``ok``).
    medium : str
        ``"air"`` or ``"vacuum"``: the medium of every wavelength here (nm).
    model : GratingModel or None
        The fitted physical model; None for a failed solution.
    lines : pandas.DataFrame
        Every detected peak, with its identification (``identification`` is one of ``used``,
        ``rejected``, ``blend``, ``ghost``, ``unidentified``) and residuals.
    parameters : PhysicalParameters
        Fitted parameters (name, value, error, nominal, prior half-width, shift in prior
        half-widths) with their covariance and correlation; none for a failed solution.
    statistics : FitStatistics
        rms_px, rms_nm, rms_kms, reduced_chi2, n_used, n_rejected, n_peaks, distortion_degree,
        log10_chance, ...
    covered_range_px : tuple of float
        Lowest and highest pixel of the lines used; outside it the solution is extrapolated.
    frame : str or None
        The frame the solution came from.
    profile : str
        Name of the instrument profile.
    grating : str or None
        Name of the profile's grating used (an instrument with several); None otherwise.
    lamps : tuple of str
    dispersion_axis : int
        numpy axis of the raw frame along which ``x`` runs.
    software_version : str
    slit : SlitShift or None
        How line positions shift along the slit (see the module docstring); None for a
        single-row solution or when the slit was not traced.
    notes : tuple of str
        Plain-language facts about how the solution was made that are not verdict reasons
        (e.g. that its prior came from a reference solution).
    reference : dict or None
        The reference solution whose fit was the prior: ``{"file": name, "sha256": hex}``.
    """

    status: Status
    reasons: tuple[str, ...]
    medium: str
    model: GratingModel | None
    lines: pd.DataFrame
    parameters: PhysicalParameters = PhysicalParameters()
    statistics: FitStatistics = FitStatistics()
    covered_range_px: tuple[float, float] = (math.nan, math.nan)
    frame: str | None = None
    profile: str = ""
    lamps: tuple[str, ...] = ()
    dispersion_axis: int = 1
    software_version: str = ""
    slit: SlitShift | None = None
    grating: str | None = None
    notes: tuple[str, ...] = ()
    reference: dict[str, str] | None = None

    @property
    def reference_row(self) -> float | None:
        """Row (pixel ``y``) along which the physical model holds as it is; None without a slit
        model."""
        return None if self.slit is None else self.slit.reference_row

    @property
    def determination(self) -> Determination:
        """What the lines determine and which parameters their prior sets
        (:func:`wavecal.determination.what_data_determine`; empty for a failed solution)."""
        covariance = self.parameters.covariance
        if self.model is None or covariance is None:
            return Determination(parameters=(), combinations=())
        prior = {e.name: e.prior for e in self.parameters.estimates if math.isfinite(e.prior)}
        return what_data_determine(self.model, self.parameters.names, covariance, prior)

    # -- evaluation ------------------------------------------------------------------------
    def _require_model(self) -> GratingModel:
        if self.model is None:
            reasons = "; ".join(self.reasons) or "no solution"
            msg = f"this solution failed ({reasons}); it has no wavelength scale"
            raise ValueError(msg)
        return self.model

    def wavelength(self, x, y=None, *, medium: str | None = None):
        """Wavelength (nm) at 0-based pixel ``x`` along the dispersion axis, on row ``y``.

        Parameters
        ----------
        x : float or array_like
            0-based pixel along the dispersion axis of the raw frame.
        y : float or array_like, optional
            0-based pixel along the spatial axis of the raw frame (broadcast with ``x``).
            Default: the reference row. Ignored (beyond broadcasting) without a slit model.
        medium : {"air", "vacuum"}, optional
            Medium of the returned wavelengths; default :attr:`medium`. Converted with
            :mod:`wavecal.airvac` (Ciddor 1996, standard air) when it differs.
        """
        model = self._require_model()
        lam = self._to_medium(model.wavelength(self._reference_x(x, y)), self.medium,
                              medium or self.medium)
        if y is not None:
            lam = lam + np.zeros(np.broadcast(np.asarray(x), np.asarray(y)).shape)
        return lam

    def pixel(self, wavelength_nm, y=None, *, medium: str | None = None):
        """0-based pixel along the dispersion axis where ``wavelength_nm`` lands on row ``y``
        (default the reference row).

        NaN where the wavelength lands off the detector, i.e. outside the pixels ``-0.5`` to
        ``n_pixels - 0.5`` (the outer edges of the first and last pixel, ``n_pixels`` of the
        model), or cannot be diffracted at all. ``medium`` says which medium ``wavelength_nm``
        is in (default :attr:`medium`).
        """
        model = self._require_model()
        lam = self._to_medium(np.asarray(wavelength_nm, dtype=float), medium or self.medium,
                              self.medium)
        x = model.pixel(lam)
        if y is not None:
            x = x + (np.zeros(np.broadcast(np.asarray(x), np.asarray(y)).shape)
                     if self.slit is None else self.slit.shift(x, y))
        with np.errstate(invalid="ignore"):
            off = ~((x >= -0.5) & (x <= model.n_pixels - 0.5))
        if np.ndim(x) == 0:
            return float("nan") if off else x
        return np.where(off, np.nan, x)

    def _reference_x(self, x, y):
        """Position on the reference row of the point ``x`` on row ``y``."""
        if y is None or self.slit is None:
            return x
        return self.slit.reference_position(x, y)

    @staticmethod
    def _to_medium(wavelength_nm, source: str, target: str):
        if source == target:
            return wavelength_nm
        if {source, target} != {"air", "vacuum"}:
            msg = f"medium must be 'air' or 'vacuum', got {source!r} and {target!r}"
            raise ValueError(msg)
        return air_to_vacuum(wavelength_nm) if target == "vacuum" else vacuum_to_air(wavelength_nm)

    def extrapolated(self, x, y=None) -> np.ndarray:
        """True where the solution is extrapolated at ``(x, y)``.

        That is where the reference-row position of ``x`` lies outside the range covered by
        identified lines (:attr:`covered_range_px`) or, with a slit model, where ``y`` lies
        outside the rows the lines were traced over (``slit.rows_covered``).
        """
        lo, hi = self.covered_range_px
        x = np.asarray(self._reference_x(np.asarray(x, dtype=float), y), dtype=float)
        out = (x < lo) | (x > hi)
        if y is not None:
            out = out | (self.slit.outside(y) if self.slit is not None
                         else np.zeros(np.shape(y), bool))
        return out

    def wavelength_uncertainty(self, x, y=None) -> np.ndarray:
        """1-sigma uncertainty (nm) of :meth:`wavelength` from the parameter covariance (the
        slit model's own uncertainty is not included)."""
        model = self._require_model()
        names = list(self.parameters.names)
        x = self._reference_x(np.asarray(x, dtype=float), y)
        if self.parameters.covariance is None or not names:
            return np.full(np.shape(x), np.nan)
        return wavelength_sigma(model, names, self.parameters.covariance, x)

    # -- reporting -------------------------------------------------------------------------
    @property
    def ok(self) -> bool:
        """True only for an ``ok`` verdict."""
        return self.status == Status.OK

    @property
    def rms_px(self) -> float:
        """RMS of the residuals of the lines used (pixels)."""
        return float(self.statistics.rms_px)

    def summary(self) -> dict[str, Any]:
        """A JSON-safe dictionary of the headline facts."""
        stats = {k: jsonable(v) for k, v in self.statistics.to_dict().items()}
        out = {"status": self.status, "reasons": list(self.reasons), "medium": self.medium,
               "frame": self.frame, "profile": self.profile, "grating": self.grating,
               "lamps": list(self.lamps),
               "covered_range_px": [jsonable(v) for v in self.covered_range_px], **stats,
               "slit": None if self.slit is None else self.slit.summary()}
        if self.model is not None:
            grid = np.array([0.0, 0.5 * (self.model.n_pixels - 1), self.model.n_pixels - 1.0])
            lam = self.model.wavelength(grid)
            out["wavelength_range_nm"] = [float(lam.min()), float(lam.max())]
            out["central_dispersion_nm_per_px"] = float(abs(self.model.dispersion(grid[1])))
        return out

    def to_dict(self) -> dict[str, Any]:
        """The full content of the solution file as a JSON-safe dictionary."""
        lines = self.lines.reindex(columns=list(LINE_COLUMNS))
        parameters = self.parameters.to_dict()
        determination = self.determination
        return {
            "schema": "wavecal-solution",
            "schema_version": SCHEMA_VERSION,
            "software_version": self.software_version,
            "status": self.status,
            "reasons": list(self.reasons),
            "medium": self.medium,
            "wavelength_unit": "nm",
            "pixel_convention": "0-based pixel along the dispersion axis of the raw frame",
            "dispersion_axis": self.dispersion_axis,
            "frame": self.frame,
            "profile": self.profile,
            "grating": self.grating,
            "lamps": list(self.lamps),
            "covered_range_px": [jsonable(v) for v in self.covered_range_px],
            "model": None if self.model is None else _model_to_dict(self.model),
            "slit": None if self.slit is None else self.slit.to_dict(),
            "notes": list(self.notes),
            "reference": self.reference,
            "parameters": [{k: jsonable(v) for k, v in p.items()}
                           for p in parameters["parameters"]],
            "correlation": {"names": parameters["correlation"]["names"],
                            "matrix": jsonable(parameters["correlation"]["matrix"])},
            "covariance": jsonable(parameters["covariance"]),
            "statistics": {k: jsonable(v) for k, v in self.statistics.to_dict().items()},
            "determination": jsonable({**determination.to_dict(),
                                       "in_words": list(determination.sentences())}),
            "lines": {col: [jsonable(v) for v in lines[col].tolist()] for col in LINE_COLUMNS},
        }

    def write(self, path: str | Path) -> Path:
        """Write the solution as JSON, atomically (a temporary file renamed into place)."""
        path = Path(path)
        atomic_write_text(path, json.dumps(self.to_dict(), indent=1, allow_nan=False) + "\n")
        return path


def _model_to_dict(model: GratingModel) -> dict[str, Any]:
    out = dataclasses.asdict(model)
    out["distortion"] = list(model.distortion)
    return {k: jsonable(v) for k, v in out.items()}


#: Line columns that files written by earlier versions lack (read as empty).
_NEWER_LINE_COLUMNS = ("sigma_px", "source")
_FLOAT_LINE_COLUMNS = frozenset(("x", "x_err", "fwhm", "flux", "snr", "line_wavelength",
                                 "line_intensity", "wavelength_fit", "residual_px", "residual_nm",
                                 "residual_kms", "sigma_px"))

_NUMBER_OR_NULL = Optional(Real())
_POSITIVE = Real(low=0, open_low=True)

#: Rules of the model table (:class:`~wavecal.optics.GratingModel` fields).
MODEL_RULES: dict[str, Rule] = {
    "mount": Choice(("reflection", "transmission", "grism")), "grooves_per_mm": _POSITIVE,
    "order": Integer(low=1), "grating_angle_deg": Real(low=-90, high=90),
    "deviation_deg": Real(low=-180, high=180), "focal_length_mm": _POSITIVE,
    "pixel_mm": _POSITIVE, "axis_pixel": Real(), "n_pixels": Integer(low=1),
    "tilt_deg": Real(low=-89, high=89), "direction": Integer(choices=(1, -1)),
    "distortion": Sequence(Real()), "prism_apex_deg": Real(low=0, high=90),
    "prism_index": Real(low=1, high=5), "prism_index_slope_per_nm": Real(),
    "prism_reference_nm": _POSITIVE,
}

#: Rules of the top-level entries of a solution file (the ``lines`` columns are checked apart).
SOLUTION_RULES: dict[str, Rule] = {
    "status": Choice(STATUSES), "reasons": Sequence(Text(empty=True)),
    "medium": Choice(("air", "vacuum")), "wavelength_unit": Choice(("nm",)),
    "pixel_convention": Text(), "dispersion_axis": Integer(choices=(0, 1)),
    "frame": Optional(Text(empty=True)), "profile": Text(empty=True),
    "grating": Optional(Text()),
    "software_version": Text(empty=True), "lamps": Sequence(Text()),
    "covered_range_px": Sequence(_NUMBER_OR_NULL, length=2), "model": Optional(Table()),
    "slit": Optional(Table()), "parameters": Sequence(Table()), "correlation": Table(),
    "covariance": Optional(Sequence(Sequence(_NUMBER_OR_NULL))), "statistics": Table(),
    "lines": Table(), "notes": Sequence(Text()),
    "reference": Optional(Table()),
}
_REQUIRED = ("status", "reasons", "medium", "model", "lines", "statistics", "covered_range_px")

_LINE_RULES: dict[str, Rule] = {
    **{col: _NUMBER_OR_NULL for col in _FLOAT_LINE_COLUMNS}, "flags": Integer(low=0),
    "identification": Text(), "element": Optional(Text(empty=True)),
    "line_verified": Optional(Boolean()), "source": Optional(Text(empty=True)),
}


def _float_or_nan(value: Any) -> float:
    return math.nan if value is None else float(value)


def _checked(data: Any, path: Path) -> dict[str, Any]:
    """The content of a solution file, every entry checked (type, range, known values)."""
    where = f"{path}:"
    data = check_table(data, SOLUTION_RULES, where=where, error=SolutionFileError,
                       required=_REQUIRED, unknown_ok=True)
    if data["model"] is not None:
        data["model"] = check_table(data["model"], MODEL_RULES, where=f"{where} model",
                                    error=SolutionFileError,
                                    required=tuple(k for k in MODEL_RULES if k not in (
                                        "tilt_deg", "direction", "distortion") and not
                                                   k.startswith("prism")))
    elif data["status"] != Status.FAILED:
        msg = f"{path}: status {data['status']!r} but no model (only a failed solution has none)"
        raise SolutionFileError(msg)
    lines = check_table(data["lines"], {c: Sequence(_LINE_RULES[c]) for c in LINE_COLUMNS},
                        where=f"{where} lines", error=SolutionFileError,
                        required=tuple(c for c in LINE_COLUMNS if c not in _NEWER_LINE_COLUMNS))
    if len({len(v) for v in lines.values()}) > 1:
        msg = f"{path}: lines columns differ in length ({sorted({len(v) for v in lines.values()})})"
        raise SolutionFileError(msg)
    data["lines"] = lines
    corr = check_table(data.get("correlation", {}), {"names": Sequence(Text()),
                                                     "matrix": Sequence(Sequence(_NUMBER_OR_NULL))},
                       where=f"{where} correlation", error=SolutionFileError)
    n = len(corr.get("names", ()))
    for name in ("covariance", "matrix"):
        matrix = data.get("covariance") if name == "covariance" else corr.get("matrix")
        if matrix and (len(matrix) != n or any(len(row) != n for row in matrix)):
            msg = f"{path}: {name} is not {n} x {n} (one row and column per fitted parameter)"
            raise SolutionFileError(msg)
    data["correlation"] = corr
    if data.get("reference") is not None:
        data["reference"] = check_table(data["reference"], {"file": Text(), "sha256": Text()},
                                        where=f"{where} reference", error=SolutionFileError,
                                        required=("file", "sha256"))
    bad = [k for k, v in data["statistics"].items()
           if not (v is None or isinstance(v, (int, float, str, bool)))]
    if bad:
        msg = f"{path}: statistics {bad[0]} must be a number, a text or null"
        raise SolutionFileError(msg)
    return data


def load_solution(path: str | Path) -> Solution:
    """Read a solution file written by :meth:`Solution.write`.

    Files of schema version 1 (no slit model), 2 and 3 are read; the statistics of versions 1
    and 2 (``redchi``, a failed solution's counts alone) are read into :class:`FitStatistics`.

    Raises
    ------
    SolutionFileError
        If the file is missing, not JSON, of another schema or of an unknown version, or an entry
        has the wrong type or is out of range (:data:`SOLUTION_RULES`, :data:`MODEL_RULES`).
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        msg = f"{path}: cannot read solution file: {exc.strerror}"
        raise SolutionFileError(msg) from None
    except json.JSONDecodeError as exc:
        msg = f"{path}: not a JSON solution file ({exc.msg} at line {exc.lineno})"
        raise SolutionFileError(msg) from None
    if not isinstance(data, dict) or data.get("schema") != "wavecal-solution":
        msg = f"{path}: not a wavecal solution file (no 'schema': 'wavecal-solution')"
        raise SolutionFileError(msg)
    version = data.get("schema_version")
    if isinstance(version, bool) or version not in READABLE_VERSIONS:
        msg = (f"{path}: solution schema version {version!r} is not supported (this wavecal reads "
               f"versions {', '.join(map(str, READABLE_VERSIONS))})")
        raise SolutionFileError(msg)
    data = _checked(data, path)
    try:
        model = None
        if data["model"] is not None:
            fields = dict(data["model"])
            fields["distortion"] = tuple(fields.get("distortion", ()))
            model = GratingModel(**fields)
        n_lines = len(data["lines"]["x"])
        lines = pd.DataFrame({col: (np.array(data["lines"].get(col, [None] * n_lines),
                                             dtype=float)  # None -> NaN
                                    if col in _FLOAT_LINE_COLUMNS
                                    else list(data["lines"].get(col, [""] * n_lines)))
                              for col in LINE_COLUMNS})
        slit = data.get("slit")
        return Solution(
            status=Status(data["status"]),
            reasons=tuple(data["reasons"]),
            medium=data["medium"],
            model=model,
            lines=lines,
            parameters=PhysicalParameters.from_dict(data),
            statistics=FitStatistics.from_dict(data["statistics"]),
            covered_range_px=tuple(_float_or_nan(v) for v in data["covered_range_px"]),
            frame=data.get("frame"),
            profile=data.get("profile", ""),
            lamps=tuple(data.get("lamps", ())),
            dispersion_axis=data.get("dispersion_axis", 1),
            software_version=data.get("software_version", ""),
            slit=None if slit is None else SlitShift.from_dict(slit),
            grating=data.get("grating"),  # files written before gratings had names: None
            notes=tuple(data.get("notes", ())),
            reference=None if data.get("reference") is None else dict(data["reference"]),
        )
    except (KeyError, TypeError, ValueError) as exc:
        msg = f"{path}: solution file is inconsistent: {exc}"
        raise SolutionFileError(msg) from None
