"""Instrument profiles: a TOML file describing one spectrograph, read into frozen dataclasses.

A profile carries everything the physics and the frame reader need (grating, camera, detector),
the prior uncertainty of each nominal value, and a mapping from the observatory's own FITS
header keywords to the quantities the pipeline reads. The TOML layout is documented in the
README ("Instrument profiles").
"""
from __future__ import annotations

import dataclasses
import math
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on Python 3.10
    import tomli as tomllib

from . import validation
from .errors import HeaderError, ProfileError
from .validation import (
    Choice,
    Integer,
    Invalid,
    Lamps,
    Optional,
    Real,
    Sequence,
    Text,
    check_table,
)

__all__ = [
    "MOUNTS",
    "HEADER_QUANTITIES",
    "GratingSpec",
    "CameraSpec",
    "DetectorSpec",
    "ApproximateSpec",
    "Priors",
    "HeaderField",
    "InstrumentProfile",
    "PROFILE_RULES",
    "load_profile",
    "example_profile_paths",
    "parse_lamps",
    "profile_from_dict",
]

#: Supported dispersing mounts. ``reflection``: reflection grating with a fixed angle between the
#: collimator and camera axes. ``transmission``: transmission grating, camera axis at a fixed
#: angle to the undeviated beam. ``grism``: a grating on the hypotenuse of a prism.
#: ``approximate``: the geometry is unknown; only a rough wavelength range is given.
MOUNTS = ("reflection", "transmission", "grism", "approximate")

#: Quantities the pipeline reads from a frame header, via the profile's ``[header]`` table.
HEADER_QUANTITIES = (
    "grating_angle",
    "lamps",
    "image_type",
    "exposure_time",
    "observation_time",
    "binning",
)


@dataclass(frozen=True)
class GratingSpec:
    """The disperser.

    Attributes
    ----------
    mount : str
        One of :data:`MOUNTS`.
    grooves_per_mm : float
        Groove density in lines per millimetre.
    order : int
        Diffraction order used (positive).
    deviation_deg : float
        Reflection: the full angle between collimator and camera axes. Transmission and grism:
        the angle between the undeviated beam and the camera axis.
    angle_zero_point_deg, angle_scale : float
        The physical grating angle is ``angle_scale * header_value + angle_zero_point_deg``.
        For a reflection grating the grating angle is the rotation of the grating normal from
        the bisector of the collimator and camera axes; for a transmission grating the angle of
        incidence; for a grism the tilt added to the prism apex angle.
    prism_apex_deg, prism_index, prism_index_slope_per_nm, prism_reference_nm : float
        Grism only: apex angle, refractive index at the reference wavelength and its slope.
    blaze_nm : float or None
        Blaze wavelength in the order used, if known.
    """

    mount: str
    grooves_per_mm: float
    order: int = 1
    deviation_deg: float = 0.0
    angle_zero_point_deg: float = 0.0
    angle_scale: float = 1.0
    prism_apex_deg: float = 0.0
    prism_index: float = 1.0
    prism_index_slope_per_nm: float = 0.0
    prism_reference_nm: float = 600.0
    blaze_nm: float | None = None


@dataclass(frozen=True)
class CameraSpec:
    """Camera optics. ``focal_length_mm`` is the camera (exit) focal length."""

    focal_length_mm: float
    collimator_focal_length_mm: float | None = None


@dataclass(frozen=True)
class DetectorSpec:
    """The detector and its read-out.

    Every pixel quantity here is in UNBINNED detector pixels; a binned frame's regions are these
    divided by its binning. Pixel regions use numpy's convention: 0-based, half-open
    ``[start, stop)`` ranges as ``(row_start, row_stop, col_start, col_stop)``.

    Attributes
    ----------
    pixel_size_um : float
        Unbinned pixel pitch in micrometres.
    shape : tuple of int
        Unbinned raw frame shape ``(rows, columns)`` as read, including any overscan.
    dispersion_axis : int
        numpy axis of the image along which wavelength changes: 1 = along a row (columns
        change, FITS NAXIS1), 0 = along a column (rows change, FITS NAXIS2).
    wavelength_increases : int
        +1 if wavelength increases with pixel index along the dispersion axis, -1 otherwise.
    saturation_adu : float
        Level (raw ADU, before bias subtraction) at or above which a pixel is saturated.
    gain_e_per_adu, read_noise_e : float
        Conversion gain and read noise in electrons.
    overscan : tuple of int or None
        Overscan region, or None when there is none.
    trim : tuple of int or None
        Region holding illuminated data, or None for the whole frame.
    bias_adu : float
        Constant bias level to subtract when there is no overscan.
    axis_pixel : float or None
        Unbinned 0-based pixel (along the dispersion axis of the raw frame) hit by the camera
        axis; None means the centre of the detector.
    tilt_deg : float
        Nominal tilt of the detector in the dispersion plane (positive: detector normal turned
        towards larger diffraction angles).
    hdu : int or str or None
        HDU holding the image; None means the first HDU with image data.
    slit_rows : tuple of int or None
        ``[start, stop)`` pixels along the spatial axis (the axis other than
        ``dispersion_axis``) of the raw frame that the slit illuminates; None (the default)
        means they are found from each frame.
    """

    pixel_size_um: float
    shape: tuple[int, int]
    dispersion_axis: int = 1
    wavelength_increases: int = 1
    saturation_adu: float = 65535.0
    gain_e_per_adu: float = 1.0
    read_noise_e: float = 5.0
    overscan: tuple[int, int, int, int] | None = None
    trim: tuple[int, int, int, int] | None = None
    bias_adu: float = 0.0
    axis_pixel: float | None = None
    tilt_deg: float = 0.0
    hdu: int | str | None = None
    slit_rows: tuple[int, int] | None = None

    @property
    def dispersion_range(self) -> tuple[int, int]:
        """Unbinned ``[start, stop)`` pixels of the illuminated region along the dispersion axis."""
        if self.trim is None:
            return (0, int(self.shape[self.dispersion_axis]))
        return (self.trim[2], self.trim[3]) if self.dispersion_axis == 1 else (self.trim[0], self.trim[1])

    @property
    def n_dispersion(self) -> int:
        """Number of unbinned illuminated pixels along the dispersion axis."""
        start, stop = self.dispersion_range
        return stop - start

    @property
    def nominal_axis_pixel(self) -> float:
        """Unbinned raw-frame pixel hit by the camera axis (centre of the illuminated region
        unless stated)."""
        if self.axis_pixel is not None:
            return float(self.axis_pixel)
        start, stop = self.dispersion_range
        return (start + stop - 1) / 2.0


@dataclass(frozen=True)
class ApproximateSpec:
    """For spectrographs of unknown geometry: a rough central wavelength and dispersion.

    Attributes
    ----------
    central_wavelength_nm : float
        Wavelength near the detector centre.
    dispersion_nm_per_px : float
        Reciprocal linear dispersion near the centre (unbinned pixels).
    central_wavelength_uncertainty, dispersion_uncertainty : float
        Relative (1-sigma-like half-width) uncertainty of each, e.g. 0.15 for ±15 %.
    """

    central_wavelength_nm: float
    dispersion_nm_per_px: float
    central_wavelength_uncertainty: float = 0.15
    dispersion_uncertainty: float = 0.15


@dataclass(frozen=True)
class Priors:
    """Half-widths of the prior ranges around each nominal value.

    The matcher searches the full range; the fit uses each as a Gaussian prior width.
    """

    grating_angle_deg: float = 1.0
    focal_length_fraction: float = 0.03
    axis_pixel_px: float = 20.0
    tilt_deg: float = 2.0


@dataclass(frozen=True)
class HeaderField:
    """Where one pipeline quantity lives in the observatory's FITS headers."""

    keyword: str
    default: Any = None


@dataclass(frozen=True)
class InstrumentProfile:
    """Everything wavecal knows about one spectrograph before looking at a frame.

    Attributes
    ----------
    name : str
        Human-readable instrument name.
    medium : str
        ``"air"`` or ``"vacuum"``: the medium the spectrograph works in, hence of the solution.
    grating, camera, detector : GratingSpec, CameraSpec, DetectorSpec
        Hardware description.
    priors : Priors
        Prior half-widths on the nominal values.
    header : dict of str to HeaderField
        Mapping of :data:`HEADER_QUANTITIES` to header keywords (with optional defaults).
    lamps : tuple of str
        Default lamp elements when the header does not say.
    approximate : ApproximateSpec or None
        Present for ``mount = "approximate"``.
    sensitivity_nm : tuple of float or None
        Range of wavelengths the instrument is sensitive to.
    source : Path or None
        File the profile was read from.
    """

    name: str
    medium: str
    grating: GratingSpec
    camera: CameraSpec
    detector: DetectorSpec
    priors: Priors = field(default_factory=Priors)
    header: dict[str, HeaderField] = field(default_factory=dict)
    lamps: tuple[str, ...] = ()
    approximate: ApproximateSpec | None = None
    sensitivity_nm: tuple[float, float] | None = None
    source: Path | None = None

    def header_value(self, header: Any, quantity: str, *, path: str | Path | None = None) -> Any:
        """Read one pipeline quantity from a FITS header through the profile's mapping.

        Parameters
        ----------
        header : mapping
            A FITS header (anything with ``in`` and ``[]``).
        quantity : str
            One of :data:`HEADER_QUANTITIES`.
        path : str or Path, optional
            The file the header came from, named in the error message.

        Raises
        ------
        HeaderError
            When the keyword is missing and the profile declares no default.
        """
        where = f"{path}: " if path is not None else ""
        spec = self.header.get(quantity)
        if spec is None:
            msg = f"{where}profile {self.name!r} maps no header keyword for {quantity!r}"
            raise HeaderError(msg)
        if spec.keyword in header and header[spec.keyword] not in (None, ""):
            return header[spec.keyword]
        if spec.default is not None:
            return spec.default
        msg = (f"{where}header keyword {spec.keyword!r} ({quantity}) is missing and profile "
               f"{self.name!r} declares no default for it")
        raise HeaderError(msg)

    def grating_angle_from_header(self, header: Any, *, path: str | Path | None = None) -> float:
        """Physical grating angle (degrees) for a frame, from its header."""
        if self.grating.mount == "approximate":
            return 0.0
        raw = self.header_value(header, "grating_angle", path=path)
        try:
            value = float(raw)
        except (TypeError, ValueError):
            where = f"{path}: " if path is not None else ""
            msg = f"{where}grating angle {raw!r} is not a number"
            raise HeaderError(msg) from None
        return self.grating.angle_scale * value + self.grating.angle_zero_point_deg

    def binning_from_header(self, header: Any, *, path: str | Path | None = None) -> tuple[int, int]:
        """Binning ``(along rows axis 0, along columns axis 1)`` from the header, default 1×1.

        The header value is read as FITS-style ``"<binning along NAXIS1> <binning along NAXIS2>"``.
        """
        if "binning" not in self.header:
            return (1, 1)
        raw = self.header_value(header, "binning", path=path)
        parts = str(raw).replace("x", " ").replace(",", " ").split()
        try:
            b1, b2 = (int(p) for p in parts) if len(parts) == 2 else (int(parts[0]),) * 2
        except (ValueError, IndexError):
            where = f"{path}: " if path is not None else ""
            msg = f"{where}binning {raw!r} is not of the form 'N M'"
            raise HeaderError(msg) from None
        return (b2, b1)

    def lamps_from_header(self, header: Any, *, path: str | Path | None = None) -> tuple[str, ...]:
        """Lamp elements in use, from the header (``"Hg+Ar"``, ``"HgAr"``, ``"Ne, Ar"`` ...)."""
        if "lamps" in self.header:
            try:
                raw = self.header_value(header, "lamps", path=path)
            except HeaderError:
                if self.lamps:
                    return self.lamps
                raise
            try:
                return parse_lamps(str(raw))
            except Invalid as exc:
                where = f"{path}: " if path is not None else ""
                msg = f"{where}header keyword {self.header['lamps'].keyword!r}: {exc}"
                raise HeaderError(msg) from None
        return self.lamps


def parse_lamps(text: str) -> tuple[str, ...]:
    """Element symbols named in a free-text lamp description, in order of appearance.

    Words are element symbols, run together or not ("HgAr", "Hg+Ar", "ne, xe"), element names
    ("neon") or words that name no lamp ("lamp", "none" ...); see
    :func:`wavecal.validation.parse_lamps`.

    >>> parse_lamps("HgAr + Ne")
    ('Hg', 'Ar', 'Ne')
    >>> parse_lamps("none")
    ()

    Raises
    ------
    ValueError
        For an unknown word or an element without a shipped line list (the message lists the
        known ones).
    """
    return validation.parse_lamps(text)


def _span(value: Any) -> tuple[int, int]:
    """A ``[start, stop]`` pixel range, 0-based, stop excluded, not empty."""
    start, stop = Sequence(Integer(low=0), length=2, label="[start, stop]")(value)
    if stop <= start:
        raise Invalid(f"[start, stop] {[start, stop]} is empty (start must be below stop)")
    return start, stop


def _region(value: Any) -> tuple[int, int, int, int]:
    """A ``{rows = [start, stop], columns = [start, stop]}`` table."""
    if not isinstance(value, dict) or set(value) != {"rows", "columns"}:
        raise Invalid(f"must be a table {{rows = [start, stop], columns = [start, stop]}}, "
                      f"got {validation.describe(value)}")
    rows, cols = _span(value["rows"]), _span(value["columns"])
    return (*rows, *cols)


def _hdu(value: Any) -> int | str:
    if isinstance(value, str) and value:
        return value
    return Integer(low=0)(value)


_POSITIVE = Real(low=0, open_low=True)
_ANGLE = Real(low=-180, high=180)

#: The rule of every profile key, by section.
PROFILE_RULES: dict[str, dict[str, validation.Rule]] = {
    "instrument": {"name": Text(max_length=200), "medium": Choice(("air", "vacuum")),
                   "lamps": Lamps(),
                   "sensitivity_nm": Sequence(_POSITIVE, length=2, increasing=True,
                                              label="[shortest, longest] in nm")},
    "grating": {"mount": Choice(MOUNTS), "grooves_per_mm": Real(low=0), "order": Integer(low=1),
                "deviation_deg": _ANGLE, "angle_zero_point_deg": Real(low=-360, high=360),
                "angle_scale": Real(nonzero=True), "prism_apex_deg": Real(low=0, high=90),
                "prism_index": Real(low=1, high=5), "prism_index_slope_per_nm": Real(),
                "prism_reference_nm": _POSITIVE, "blaze_nm": _POSITIVE},
    "camera": {"focal_length_mm": _POSITIVE, "collimator_focal_length_mm": _POSITIVE},
    "detector": {"pixel_size_um": _POSITIVE,
                 "shape": Sequence(Integer(low=1), length=2, label="[rows, columns]"),
                 "dispersion_axis": Integer(choices=(0, 1)),
                 "wavelength_increases": Integer(choices=(1, -1)),
                 "saturation_adu": _POSITIVE, "gain_e_per_adu": _POSITIVE,
                 "read_noise_e": Real(low=0), "overscan": _region, "trim": _region,
                 "bias_adu": Real(), "axis_pixel": Real(), "tilt_deg": Real(low=-45, high=45),
                 "hdu": _hdu,
                 "slit_rows": _span},
    "approximate": {"central_wavelength_nm": _POSITIVE, "dispersion_nm_per_px": _POSITIVE,
                    "central_wavelength_uncertainty": Real(low=0, high=1, open_low=True),
                    "dispersion_uncertainty": Real(low=0, high=1, open_low=True)},
    "priors": {"grating_angle_deg": _POSITIVE, "focal_length_fraction": Real(low=0, high=1,
                                                                             open_low=True),
               "axis_pixel_px": _POSITIVE, "tilt_deg": _POSITIVE},
}

def _header_default(value: Any) -> str | int | float:
    """A header default: a text or a finite number, as a header value would be."""
    if isinstance(value, str) or (isinstance(value, (int, float)) and math.isfinite(value)):
        return value
    raise Invalid(f"must be a text or a finite number, got {validation.describe(value)}")


def _section(data: dict[str, Any], name: str, cls: type, src: str) -> Any:
    """Check one section against :data:`PROFILE_RULES` and build its dataclass."""
    table = data.pop(name)
    required = tuple(f.name for f in cls.__dataclass_fields__.values()
                     if f.default is dataclasses.MISSING
                     and f.default_factory is dataclasses.MISSING)
    values = check_table(table, PROFILE_RULES[name], where=f"{src}: [{name}]", error=ProfileError,
                         required=required)
    return cls(**values)


def profile_from_dict(data: dict[str, Any], *, source: str | Path = "<profile>") -> InstrumentProfile:
    """Build an :class:`InstrumentProfile` from a parsed TOML document.

    Every key is checked against :data:`PROFILE_RULES` (type and range), then the sections
    against each other (regions inside the detector, the sections a mount needs).

    Raises
    ------
    ProfileError
        One line naming the source, the section and key, and the problem.
    """
    src = str(source)
    data = dict(data)
    unknown = sorted(set(data) - {*PROFILE_RULES, "header"})
    if unknown:
        msg = f"{src}: unknown section(s) {unknown}; allowed: {sorted({*PROFILE_RULES, 'header'})}"
        raise ProfileError(msg)
    inst = check_table(data.pop("instrument", {}), PROFILE_RULES["instrument"],
                       where=f"{src}: [instrument]", error=ProfileError)
    for required in ("grating", "detector"):
        if required not in data:
            msg = f"{src}: missing [{required}] section"
            raise ProfileError(msg)
    grating = _section(data, "grating", GratingSpec, src)
    detector = _section(data, "detector", DetectorSpec, src)
    _check_detector(detector, src)

    approximate = None
    if grating.mount == "approximate":
        if "approximate" not in data:
            msg = f"{src}: mount 'approximate' needs an [approximate] section"
            raise ProfileError(msg)
        approximate = _section(data, "approximate", ApproximateSpec, src)
        camera = CameraSpec(focal_length_mm=float("nan"))
        data.pop("camera", None)
    else:
        if grating.grooves_per_mm <= 0:
            msg = (f"{src}: [grating] grooves_per_mm must be a positive number, got "
                   f"{grating.grooves_per_mm!r}")
            raise ProfileError(msg)
        if "camera" not in data:
            msg = f"{src}: missing [camera] section"
            raise ProfileError(msg)
        camera = _section(data, "camera", CameraSpec, src)
        data.pop("approximate", None)

    priors = _section(data, "priors", Priors, src) if "priors" in data else Priors()
    header = _header_fields(data.pop("header", {}), src)
    if grating.mount != "approximate" and "grating_angle" not in header:
        msg = f"{src}: [header] must map 'grating_angle' (give a default for a fixed grating)"
        raise ProfileError(msg)
    return InstrumentProfile(
        name=inst.get("name", Path(src).stem),
        medium=inst.get("medium", "air"),
        grating=grating,
        camera=camera,
        detector=detector,
        priors=priors,
        header=header,
        lamps=inst.get("lamps", ()),
        approximate=approximate,
        sensitivity_nm=inst.get("sensitivity_nm"),
        source=Path(src) if src != "<profile>" else None,
    )


def _check_detector(detector: DetectorSpec, src: str) -> None:
    """Regions of the detector inside its shape."""
    rows, cols = detector.shape
    for name in ("overscan", "trim"):
        region = getattr(detector, name)
        if region is not None and (region[1] > rows or region[3] > cols):
            msg = (f"{src}: [detector] {name} rows {list(region[:2])} columns {list(region[2:])} "
                   f"run beyond the detector shape [{rows}, {cols}]")
            raise ProfileError(msg)
    spatial = detector.shape[1 - detector.dispersion_axis]
    if detector.slit_rows is not None and detector.slit_rows[1] > spatial:
        msg = (f"{src}: [detector] slit_rows {list(detector.slit_rows)} run beyond the "
               f"{spatial} pixels of the spatial axis")
        raise ProfileError(msg)


def _header_fields(table: Any, src: str) -> dict[str, HeaderField]:
    rules = {quantity: (lambda v: v) for quantity in HEADER_QUANTITIES}
    table = check_table(table, rules, where=f"{src}: [header]", error=ProfileError)
    header: dict[str, HeaderField] = {}
    for quantity, spec in table.items():
        if isinstance(spec, str):
            spec = {"keyword": spec}
        values = check_table(spec, {"keyword": Text(max_length=70), "default": Optional(_header_default)},
                             where=f"{src}: [header.{quantity}]", error=ProfileError,
                             required=("keyword",))
        header[quantity] = HeaderField(**values)
    return header


def load_profile(path: str | Path) -> InstrumentProfile:
    """Read an instrument profile from a TOML file.

    Parameters
    ----------
    path : str or Path
        The profile file, or the name of a bundled example profile (see
        :func:`example_profile_paths`).

    Raises
    ------
    ProfileError
        If the file cannot be read or parsed, or a value is missing or invalid.
    """
    path = Path(path)
    if not path.exists():
        bundled = example_profile_paths()
        if path.stem in bundled and path.parent == Path("."):
            path = bundled[path.stem]
        else:
            msg = f"{path}: profile file not found (bundled examples: {sorted(bundled)})"
            raise ProfileError(msg)
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        msg = f"{path}: not valid TOML: {exc}"
        raise ProfileError(msg) from None
    except OSError as exc:
        msg = f"{path}: cannot read profile: {exc.strerror}"
        raise ProfileError(msg) from None
    return profile_from_dict(data, source=path)


def example_profile_paths() -> dict[str, Path]:
    """The example profiles shipped with wavecal, by name."""
    from ._resources import data_folder

    folder = data_folder("profiles")
    return {Path(str(p)).stem: Path(str(p)) for p in folder.iterdir() if str(p).endswith(".toml")}
