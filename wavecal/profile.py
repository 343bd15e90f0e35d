"""Instrument profiles: a TOML file describing one spectrograph, read into frozen dataclasses.

A profile carries everything the physics and the frame reader need (grating, camera, detector),
the prior uncertainty of each nominal value, and a mapping from the observatory's own FITS
header keywords to the quantities the pipeline reads. An instrument with several gratings lists
them in ``[[gratings]]``; :meth:`InstrumentProfile.for_header` gives the one-grating profile of a
frame. The TOML layout is documented in the README ("Instrument profiles").
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
from .header_values import (
    GRATING_NUMBER_TOLERANCE,
    choose_grating,
    header_binning,
    header_count,
    header_number,
)
from .instrument import (
    ApproximateSpec,
    CameraSpec,
    DetectorSpec,
    GratingEntry,
    GratingSpec,
    Priors,
    ReferenceSpec,
)
from .validation import (
    Choice,
    Integer,
    Invalid,
    Lamps,
    Optional,
    Real,
    Sequence,
    Table,
    Text,
    check_table,
)

__all__ = [
    "MOUNTS",
    "HEADER_QUANTITIES",
    "HeaderField",
    "InstrumentProfile",
    "PROFILE_RULES",
    "load_profile",
    "example_profile_paths",
    "profile_from_dict",
]

#: Supported dispersing mounts. ``reflection``: reflection grating with a fixed angle between the
#: collimator and camera axes. ``transmission``: transmission grating, camera axis at a fixed
#: angle to the undeviated beam. ``grism``: a grating on the hypotenuse of a prism.
#: ``approximate``: the geometry is unknown; only a rough wavelength range is given.
MOUNTS = ("reflection", "transmission", "grism", "approximate")

#: Quantities the pipeline reads from a frame header, via the profile's ``[header]`` table.
#: ``binning`` holds "N M"; ``binning_x`` and ``binning_y`` (both or neither, not with
#: ``binning``) hold the binning along NAXIS1 and NAXIS2. ``grating`` chooses an entry of
#: ``[[gratings]]``; ``grooves_per_mm`` and ``order`` replace the grating's values.
HEADER_QUANTITIES = (
    "grating_angle",
    "lamps",
    "image_type",
    "exposure_time",
    "observation_time",
    "binning",
    "binning_x",
    "binning_y",
    "grating",
    "grooves_per_mm",
    "order",
)


@dataclass(frozen=True)
class HeaderField:
    """Where one pipeline quantity lives in the observatory's FITS headers.

    ``tolerance`` (``grating`` only): largest difference between a numeric header value and a
    grating's number for the value to name it.
    """

    keyword: str
    default: Any = None
    tolerance: float = GRATING_NUMBER_TOLERANCE


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
    gratings : tuple of GratingEntry
        The instrument's gratings when the profile lists several (``grating`` and ``priors``
        then hold the first one's until :meth:`for_header` or :meth:`with_grating` chooses);
        empty for a one-grating profile and for a profile whose grating has been chosen.
    grating_name : str or None
        Name of the chosen grating; None for a one-grating profile or before choosing.
    reference : ReferenceSpec or None
        A previous solution to use as every frame's prior (``[reference]``).
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
    gratings: tuple[GratingEntry, ...] = ()
    grating_name: str | None = None
    reference: ReferenceSpec | None = None

    @property
    def configuration_key(self) -> str:
        """Identity of the grating setting, for grouping frames into configurations.

        The chosen grating's name, followed by groove density and order when the header gives
        them; ``""`` for a one-grating profile whose header gives neither.
        """
        parts = [self.grating_name] if self.grating_name else []
        if "grooves_per_mm" in self.header or "order" in self.header:
            parts.append(f"{self.grating.grooves_per_mm:g}/mm order {self.grating.order}")
        return " ".join(parts)

    def with_grating(self, name: str) -> InstrumentProfile:
        """The one-grating profile of the grating called ``name`` (case and blanks ignored).

        Raises
        ------
        ProfileError
            When the profile lists no grating of that name (the message lists the known ones).
        """
        wanted = name.strip().lower()
        for entry in self.gratings:
            if entry.name.strip().lower() == wanted:
                return dataclasses.replace(self, grating=entry.grating, priors=entry.priors,
                                           gratings=(), grating_name=entry.name)
        known = ", ".join(repr(e.name) for e in self.gratings) or "none listed"
        msg = f"{self.source or self.name}: no grating {name!r} in the profile (known: {known})"
        raise ProfileError(msg)

    def for_header(self, header: Any, *, path: str | Path | None = None) -> InstrumentProfile:
        """The one-grating profile of a frame.

        The grating is the entry of ``[[gratings]]`` named by the ``grating`` header keyword;
        groove density and order are then replaced by the ``grooves_per_mm`` and ``order``
        keywords when the profile maps them. A one-grating profile mapping neither is returned
        unchanged. Calling it again on its result gives the same profile.

        Raises
        ------
        HeaderError
            One line naming the file, the keyword and the value: a keyword missing without
            default, a value naming no grating (the known ones listed), a groove density that is
            not a positive number or an order that is not a positive whole number.
        """
        chosen = self
        if self.gratings:
            spec = self.header["grating"]
            raw = self.header_value(header, "grating", path=path)
            index = choose_grating([(e.name, e.number) for e in self.gratings], raw,
                                   keyword=spec.keyword, tolerance=spec.tolerance, path=path)
            chosen = self.with_grating(self.gratings[index].name)
        changes: dict[str, Any] = {}
        if "grooves_per_mm" in self.header:
            changes["grooves_per_mm"] = header_number(
                self.header_value(header, "grooves_per_mm", path=path),
                keyword=self.header["grooves_per_mm"].keyword, what="grooves_per_mm", path=path)
        if "order" in self.header:
            changes["order"] = header_count(self.header_value(header, "order", path=path),
                                            keyword=self.header["order"].keyword, what="order",
                                            path=path)
        if not changes:
            return chosen
        return dataclasses.replace(chosen, grating=dataclasses.replace(chosen.grating, **changes))

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

        Read from the ``binning`` keyword as FITS-style ``"<along NAXIS1> <along NAXIS2>"``, or
        from the ``binning_x`` (along NAXIS1) and ``binning_y`` (along NAXIS2) keywords.
        """
        if "binning" in self.header:
            b1, b2 = header_binning(self.header_value(header, "binning", path=path),
                                    keyword=self.header["binning"].keyword, path=path)
        elif "binning_x" in self.header:
            b1, b2 = (header_count(self.header_value(header, q, path=path),
                                   keyword=self.header[q].keyword, what=q, path=path)
                      for q in ("binning_x", "binning_y"))
        else:
            return (1, 1)
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
                return validation.parse_lamps(str(raw))
            except Invalid as exc:
                where = f"{path}: " if path is not None else ""
                msg = f"{where}header keyword {self.header['lamps'].keyword!r}: {exc}"
                raise HeaderError(msg) from None
        return self.lamps


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


def _direction(value: Any) -> int:
    """+1, -1, or "unknown" (read as 0; allowed for ``approximate`` profiles only)."""
    if value == "unknown":
        return 0
    if isinstance(value, int) and not isinstance(value, bool) and value in (1, -1):
        return int(value)
    raise Invalid(f'must be 1, -1 or "unknown", got {validation.describe(value)}')


def _hdu(value: Any) -> int | str:
    if isinstance(value, str) and value:
        return value
    return Integer(low=0)(value)


_POSITIVE = Real(low=0, open_low=True)
_ANGLE = Real(low=-180, high=180)
#: The keys of a grating an entry of ``[[gratings]]`` may give (all but the mount).
_GRATING = {"grooves_per_mm": Real(low=0), "order": Integer(low=1), "deviation_deg": _ANGLE,
            "angle_zero_point_deg": Real(low=-360, high=360), "angle_scale": Real(nonzero=True),
            "prism_apex_deg": Real(low=0, high=90), "prism_index": Real(low=1, high=5),
            "prism_index_slope_per_nm": Real(), "prism_reference_nm": _POSITIVE,
            "blaze_nm": _POSITIVE}

#: The rule of every profile key, by section.
PROFILE_RULES: dict[str, dict[str, validation.Rule]] = {
    "instrument": {"name": Text(max_length=200), "medium": Choice(("air", "vacuum")),
                   "lamps": Lamps(),
                   "sensitivity_nm": Sequence(_POSITIVE, length=2, increasing=True,
                                              label="[shortest, longest] in nm")},
    "grating": {"mount": Choice(MOUNTS), **_GRATING},
    # one table per grating of an instrument with several: the [grating] keys that differ
    # from the instrument's, a name, the number a header keyword may give for it, own priors
    "gratings": {**_GRATING, "grooves_per_mm": _POSITIVE, "name": Text(max_length=70),
                 "number": Real(), "priors": Table()},
    "camera": {"focal_length_mm": _POSITIVE, "collimator_focal_length_mm": _POSITIVE},
    "detector": {"pixel_size_um": _POSITIVE,
                 "shape": Sequence(Integer(low=1), length=2, label="[rows, columns]"),
                 "dispersion_axis": Integer(choices=(0, 1)),
                 "wavelength_increases": _direction,
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
    "reference": {"solution": Text(), "drift_px": _POSITIVE,
                  "stretch_fraction": Real(low=0, high=0.5, open_low=True)},
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


def _gratings(data: dict[str, Any], priors: Priors, src: str) -> tuple[GratingEntry, ...]:
    """The ``[[gratings]]`` list, each entry folded into ``[grating]`` and ``[priors]``; the
    ``[grating]`` table is left in ``data`` when there is no list."""
    if "gratings" not in data:
        return ()
    tables = data.pop("gratings")
    if not isinstance(tables, list) or not tables:
        msg = (f"{src}: [[gratings]] must be a list of tables, one per grating, got "
               f"{validation.describe(tables)}")
        raise ProfileError(msg)
    base = check_table(data.pop("grating"), PROFILE_RULES["grating"], where=f"{src}: [grating]",
                       error=ProfileError, required=("mount",))
    if base["mount"] == "approximate":
        msg = f"{src}: mount 'approximate' cannot list [[gratings]] (no geometry to choose from)"
        raise ProfileError(msg)
    shared = sorted({"grooves_per_mm", "order", "blaze_nm"} & set(base))
    if shared:
        msg = f"{src}: [grating] {', '.join(shared)} belong to each grating in [[gratings]]"
        raise ProfileError(msg)
    entries: list[GratingEntry] = []
    for i, table in enumerate(tables):
        own = check_table(table, PROFILE_RULES["gratings"], where=f"{src}: [[gratings]] item {i}",
                          error=ProfileError, required=("name", "grooves_per_mm"))
        name = own.pop("name")
        if any(e.name.strip().lower() == name.strip().lower() for e in entries):
            msg = f"{src}: [[gratings]] name {name!r} is given twice"
            raise ProfileError(msg)
        own_priors = check_table(own.pop("priors", {}), PROFILE_RULES["priors"],
                                 where=f"{src}: [[gratings]] {name!r} priors", error=ProfileError)
        entries.append(GratingEntry(name=name, number=own.pop("number", own["grooves_per_mm"]),
                                    grating=GratingSpec(**{**base, **own}),
                                    priors=dataclasses.replace(priors, **own_priors)))
    return tuple(entries)


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
    priors = _section(data, "priors", Priors, src) if "priors" in data else Priors()
    gratings = _gratings(data, priors, src)
    if gratings:
        grating, priors = gratings[0].grating, gratings[0].priors
    else:
        grating = _section(data, "grating", GratingSpec, src)
    direction_stated = isinstance(data["detector"], dict) and "wavelength_increases" in data["detector"]
    detector = _section(data, "detector", DetectorSpec, src)
    _check_detector(detector, src)
    if grating.mount == "approximate" and not direction_stated:
        detector = dataclasses.replace(detector, wavelength_increases=0)  # unknown: both tried
    elif grating.mount != "approximate" and detector.wavelength_increases == 0:
        msg = (f'{src}: [detector] wavelength_increases = "unknown" is allowed only for mount '
               f'"approximate" (a known geometry needs its direction: 1 or -1)')
        raise ProfileError(msg)

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

    reference = _section(data, "reference", ReferenceSpec, src) if "reference" in data else None
    if reference is not None:
        reference = dataclasses.replace(reference, solution=Path(src).parent / reference.solution)
    header = _header_fields(data.pop("header", {}), src)
    if grating.mount != "approximate" and "grating_angle" not in header:
        msg = f"{src}: [header] must map 'grating_angle' (give a default for a fixed grating)"
        raise ProfileError(msg)
    if bool(gratings) != ("grating" in header):
        msg = (f"{src}: [header] must map 'grating' to choose among [[gratings]]" if gratings
               else f"{src}: [header] 'grating' chooses among [[gratings]], but none are listed")
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
        gratings=gratings,
        reference=reference,
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
        rules = {"keyword": Text(max_length=70), "default": Optional(_header_default)}
        if quantity == "grating":
            rules["tolerance"] = Real(low=0)
        values = check_table(spec, rules, where=f"{src}: [header.{quantity}]", error=ProfileError,
                             required=("keyword",))
        header[quantity] = HeaderField(**values)
    axes = {"binning_x", "binning_y"} & set(header)
    if axes and ("binning" in header or len(axes) == 1):
        msg = (f"{src}: [header] binning comes from 'binning' (\"N M\") or from both "
               f"'binning_x' and 'binning_y', got {sorted({'binning', *axes} & set(header))}")
        raise ProfileError(msg)
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
