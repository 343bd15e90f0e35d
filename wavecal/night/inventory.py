"""Header-only inventory of a night: classify every file and group it by configuration.

Only headers are read here (no pixel data), so a night of thousands of files is listed in
seconds before any heavy work starts.
"""
from __future__ import annotations

import errno
import math
import os
import re
import stat
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import pandas as pd
from astropy.io import fits
from astropy.time import Time

from ..errors import WavecalError
from ..frames import image_hdu_index, image_header, open_fits
from ..profile import InstrumentProfile
from .._stems import file_stem

__all__ = ["FITS_SUFFIXES", "KINDS", "FileRecord", "Inventory", "build_inventory", "classify",
           "find_files", "survey"]

#: File-name endings taken as FITS files.
FITS_SUFFIXES = (".fits", ".fit", ".fts", ".fits.gz", ".fits.fz", ".fz")
#: Kinds a file can be classified as.
KINDS = ("arc", "science", "bias", "flat", "other", "unknown")

# Words of image-type values (lower case, matched as whole words), common practice.
_TYPE_WORDS = {
    "arc": ("arc", "comp", "comparison", "lamp", "wave", "wavecal", "thar", "hgar", "neon"),
    "bias": ("bias", "zero"),
    "flat": ("flat", "domeflat", "skyflat", "twilight", "lampflat"),
    "science": ("object", "science", "sci", "target", "star", "obj", "standard", "std"),
    "other": ("dark", "focus", "test", "acquisition", "acq"),
}


@dataclass(frozen=True)
class FileRecord:
    """What the headers say about one file of the night.

    Attributes
    ----------
    path : Path
        The file.
    name : str
        Path relative to the night's directory (POSIX separators).
    stem : str
        Safe, unique output-name stem derived from the file name (never from header text).
    kind : str
        One of :data:`KINDS`.
    profile : str
        Key of the profile that describes the file ("" if none does).
    grating : str
        The grating setting of an arc or science frame as its header chooses it (the chosen
        profile's :attr:`~wavecal.profile.InstrumentProfile.configuration_key`: the grating's
        name, groove density and order from the header); "" for a one-grating profile.
    configuration : str
        Configuration label (profile, grating, grating angle group, binning, extra keywords);
        "" when unknown.
    time_mjd : float
        Start of the exposure (MJD, UTC); NaN when unknown.
    grating_angle : float
        Physical grating angle (degrees); NaN when unknown.
    binning : tuple of int
    exposure_s : float
    problem : str
        Why the file cannot be processed ("" when it can).
    size, mtime_ns : int
        File size and modification time (for resuming).
    """

    path: Path
    name: str
    stem: str
    kind: str
    profile: str = ""
    grating: str = ""
    configuration: str = ""
    time_mjd: float = math.nan
    grating_angle: float = math.nan
    binning: tuple[int, int] = (1, 1)
    exposure_s: float = math.nan
    problem: str = ""
    size: int = 0
    mtime_ns: int = 0
    extra: tuple[tuple[str, str], ...] = ()

    @property
    def observation_time(self) -> str:
        """ISO time of the exposure start ("" when unknown)."""
        if math.isnan(self.time_mjd):
            return ""
        return Time(self.time_mjd, format="mjd", scale="utc").isot


@dataclass(frozen=True)
class Inventory:
    """Every file of a night, classified and grouped by configuration."""

    root: Path
    records: tuple[FileRecord, ...]
    profiles: Mapping[str, InstrumentProfile] = field(default_factory=dict)
    #: The profile of each grating setting found, by (profile key, :attr:`FileRecord.grating`).
    settings: Mapping[tuple[str, str], InstrumentProfile] = field(default_factory=dict)
    #: Every other entry of the folder, with the reason it is not read (see :func:`survey`).
    ignored: tuple[tuple[str, str], ...] = ()

    def of_kind(self, kind: str) -> tuple[FileRecord, ...]:
        """Usable records (no problem) of one kind."""
        return tuple(r for r in self.records if r.kind == kind and not r.problem)

    def profile_of(self, record: FileRecord) -> InstrumentProfile:
        """The profile of a record with its grating chosen (the profile itself when it has one
        grating)."""
        return self.settings.get((record.profile, record.grating), self.profiles[record.profile])

    def counts(self) -> dict[str, int]:
        """Number of files of each kind (problems counted under their kind)."""
        return {k: sum(r.kind == k for r in self.records) for k in KINDS}

    def configurations(self) -> tuple[str, ...]:
        """Configuration labels found, sorted."""
        return tuple(sorted({r.configuration for r in self.records if r.configuration}))

    def to_dataframe(self) -> pd.DataFrame:
        """One row per file."""
        rows = [{"file": r.name, "kind": r.kind, "profile": r.profile, "grating": r.grating,
                 "configuration": r.configuration, "observation_time": r.observation_time,
                 "grating_angle_deg": r.grating_angle, "binning": f"{r.binning[0]}x{r.binning[1]}",
                 "exposure_s": r.exposure_s, "problem": r.problem, "size": r.size}
                for r in self.records]
        return pd.DataFrame(rows, columns=["file", "kind", "profile", "grating", "configuration",
                                           "observation_time", "grating_angle_deg", "binning",
                                           "exposure_s", "problem", "size"])

    def describe(self) -> str:
        """A short plain-text report of what was found."""
        counts = self.counts()
        lines = [f"{len(self.records)} files in {self.root}: "
                 + ", ".join(f"{n} {k}" for k, n in counts.items() if n)]
        for conf in self.configurations():
            here = [r for r in self.records if r.configuration == conf and not r.problem]
            by_kind = {k: sum(r.kind == k for r in here) for k in KINDS}
            lines.append(f"  {conf}: " + ", ".join(f"{n} {k}" for k, n in by_kind.items() if n))
        bad = [r for r in self.records if r.problem]
        if bad:
            lines.append(f"  {len(bad)} file(s) with problems")
        if self.ignored:
            lines.append(f"  {len(self.ignored)} other entr{'y' if len(self.ignored) == 1 else 'ies'}"
                         " not read (listed in the summary)")
        return "\n".join(lines)


def survey(root: str | Path, *, recursive: bool = False, exclude: Sequence[str | Path] = ()
           ) -> tuple[list[Path], list[tuple[str, str]]]:
    """Every entry of ``root``: the FITS files to read, and every other entry with the reason it
    is not read (named pipe, socket, dangling or looping symbolic link, a folder named like a
    FITS file, a sub-folder without ``recursive``, a hidden entry, another file name ...).

    Nothing is opened: entries are told apart by ``stat`` alone (a named pipe is never read).

    Returns
    -------
    files : list of Path
        FITS files by name (symbolic links to files included), sorted by relative path.
    ignored : list of (str, str)
        Relative path (POSIX) and reason of every other entry, sorted.
    """
    root = Path(root)
    skip = {Path(e).resolve() for e in exclude}
    files: list[Path] = []
    ignored: list[tuple[str, str]] = []

    def visit(folder: Path) -> None:
        try:
            entries = sorted(os.scandir(folder), key=lambda e: e.name)
        except OSError as exc:
            ignored.append((folder.relative_to(root).as_posix(),
                            f"folder cannot be listed ({exc.strerror}): not read"))
            return
        for entry in entries:
            path = Path(entry.path)
            reason = _why_not_read(entry, path, recursive, skip)
            if reason is None:
                files.append(path)
            elif reason == "":
                visit(path)
            else:
                ignored.append((path.relative_to(root).as_posix(), reason))

    visit(root)
    return (sorted(files, key=lambda p: p.relative_to(root).as_posix()), sorted(ignored))


def _why_not_read(entry: os.DirEntry, path: Path, recursive: bool, skip: set[Path]
                  ) -> str | None:
    """None for a FITS file to read, "" for a folder to look into, else the reason."""
    link = entry.is_symlink()
    try:
        st = os.stat(path)  # follows symbolic links
    except OSError as exc:
        if link and exc.errno == errno.ELOOP:
            return "symbolic link loop: not read"
        if link:
            return "dangling symbolic link (its target does not exist): not read"
        return f"cannot be examined ({exc.strerror}): not read"
    hidden = entry.name.startswith(".")
    if stat.S_ISDIR(st.st_mode):
        if path.resolve() in skip:
            return "the output folder: not read"
        if link:
            return "symbolic link to a folder: not followed"
        if entry.name.lower().endswith(FITS_SUFFIXES):
            return "a folder named like a FITS file: not read"
        if hidden:
            return "hidden folder: not read"
        return "" if recursive else "sub-folder: not read (use --recursive)"
    if not stat.S_ISREG(st.st_mode):
        what = ("named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else
                "socket" if stat.S_ISSOCK(st.st_mode) else
                "device file" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else
                "not a regular file")
        return f"{what}: not read"
    if hidden:
        return "hidden file: not read"
    if not entry.name.lower().endswith(FITS_SUFFIXES):
        return f"not a FITS file name ({' '.join(FITS_SUFFIXES)}): not read"
    return None


def find_files(root: str | Path, *, recursive: bool = False,
               exclude: Sequence[str | Path] = ()) -> list[Path]:
    """FITS files (by name) in ``root``, sorted; ``exclude`` folders are skipped (see
    :func:`survey` for the entries left out and why)."""
    return survey(root, recursive=recursive, exclude=exclude)[0]


def _words(value: object) -> set[str]:
    return set(re.split(r"[^a-z0-9]+", str(value).lower())) - {""}


def classify(header: Mapping, profile: InstrumentProfile | None) -> str:
    """Kind of a frame from its header: the profile's ``image_type`` keyword first, then
    fallbacks (``IMAGETYP``/``OBSTYPE``, a lamps keyword that names lamps means an arc, a zero
    exposure a bias)."""
    values = []
    if profile is not None and "image_type" in profile.header:
        kw = profile.header["image_type"].keyword
        if kw in header:
            values.append(header[kw])
    values += [header[k] for k in ("IMAGETYP", "OBSTYPE", "FRAMETYP") if k in header]
    for value in values:
        words = _words(value)
        for kind, vocabulary in _TYPE_WORDS.items():
            if words & set(vocabulary):
                return kind
    if profile is not None:
        spec = profile.header.get("lamps")
        if spec is not None and str(header.get(spec.keyword, "")).strip() not in ("", "none",
                                                                                  "off"):
            return "arc"
        spec = profile.header.get("exposure_time")
        if spec is not None and spec.keyword in header:
            try:
                if float(header[spec.keyword]) == 0.0:
                    return "bias"
            except (TypeError, ValueError):
                pass
    return "unknown"


def _read_header(path: Path, profile_hdu: int | str | None) -> fits.Header:
    """Merged header of the image HDU (:func:`wavecal.frames.image_header`); no data is read."""
    with open_fits(path) as hdul:
        return image_header(hdul, image_hdu_index(path, hdul, profile_hdu))


def _select_profile(header: fits.Header, profiles: Mapping[str, InstrumentProfile],
                    keyword: str) -> str:
    if len(profiles) == 1:
        return next(iter(profiles))
    value = str(header.get(keyword, "")).strip().lower()
    for key, prof in profiles.items():
        if value and value in (key.lower(), prof.name.lower(), prof.name[:60].lower()):
            return key
    return ""


def _time_mjd(header: fits.Header, profile: InstrumentProfile, path: Path) -> float:
    raw = profile.header_value(header, "observation_time", path=path) if (
        "observation_time" in profile.header) else header.get("DATE-OBS")
    if raw in (None, ""):
        msg = f"{path}: no observation time in the header"
        raise WavecalError(msg)
    try:
        return float(Time(str(raw), scale="utc").mjd)
    except ValueError:
        msg = f"{path}: observation time {raw!r} is not an ISO date"
        raise WavecalError(msg) from None


def _examine(path: Path, root: Path, profiles: Mapping[str, InstrumentProfile], keyword: str,
             extra_keywords: Sequence[str]) -> tuple[FileRecord, InstrumentProfile | None]:
    """The record of one file and, for an arc or science frame, its profile with the grating
    its header chooses (None when there is none)."""
    stat = path.stat()
    base = FileRecord(path=path, name=path.relative_to(root).as_posix(), stem="",
                      kind="unknown", size=stat.st_size, mtime_ns=stat.st_mtime_ns)
    hdus = {p.detector.hdu for p in profiles.values()}
    try:
        header = _read_header(path, hdus.pop() if len(hdus) == 1 else None)
    except WavecalError as exc:
        return replace(base, problem=str(exc)), None
    except (OSError, ValueError) as exc:
        return replace(base, problem=f"{path}: not a readable FITS file ({exc})"), None
    key = _select_profile(header, profiles, keyword)
    if not key:
        problem = f"{path}: no profile matches {keyword}={header.get(keyword)!r}"
        return replace(base, kind=classify(header, None), problem=problem), None
    profile = profiles[key]
    kind = classify(header, profile)
    rec = replace(base, kind=kind, profile=key)
    problems = []
    chosen = None
    try:
        rec = replace(rec, binning=profile.binning_from_header(header, path=path))
        if "exposure_time" in profile.header:
            rec = replace(rec, exposure_s=float(profile.header_value(header, "exposure_time",
                                                                     path=path)))
    except (WavecalError, TypeError, ValueError) as exc:
        problems.append(str(exc))
    if kind in ("arc", "science"):
        try:
            chosen = profile.for_header(header, path=path)
            rec = replace(rec, grating=chosen.configuration_key,
                          grating_angle=chosen.grating_angle_from_header(header, path=path))
        except WavecalError as exc:
            problems.append(str(exc))
        try:
            rec = replace(rec, time_mjd=_time_mjd(header, profile, path))
        except WavecalError as exc:
            problems.append(str(exc))
    else:
        try:
            rec = replace(rec, time_mjd=_time_mjd(header, profile, path))
        except WavecalError:
            pass  # calibration frames need no time
    extra = tuple((k, str(header.get(k, "")).strip()) for k in extra_keywords)
    return replace(rec, extra=extra, problem="; ".join(problems)), chosen


def _configurations(records: list[FileRecord], tolerance_deg: float) -> list[FileRecord]:
    """Group arcs and science frames: same profile, grating, binning and extra keywords, and
    grating angles that chain together within ``tolerance_deg``."""
    groups: dict[tuple, list[int]] = {}
    for i, r in enumerate(records):
        if r.kind in ("arc", "science") and not r.problem:
            groups.setdefault((r.profile, r.grating, r.binning, r.extra), []).append(i)
    out = list(records)
    for (profile, grating, binning, extra), members in sorted(groups.items(),
                                                               key=lambda kv: str(kv[0])):
        members.sort(key=lambda i: records[i].grating_angle)
        cluster: list[int] = []
        for i in [*members, None]:
            if i is not None and (not cluster or records[i].grating_angle
                                  - records[cluster[-1]].grating_angle <= tolerance_deg):
                cluster.append(i)
                continue
            angles = [records[j].grating_angle for j in cluster]
            label = (f"{profile}/" + (f"{grating}/" if grating else "")
                     + f"angle{sum(angles) / len(angles):.3f}/"
                     f"bin{binning[0]}x{binning[1]}"
                     + "".join(f"/{k}={v}" for k, v in extra))
            for j in cluster:
                out[j] = replace(out[j], configuration=label)
            cluster = [i] if i is not None else []
    return out


def _unique_stems(records: list[FileRecord]) -> list[FileRecord]:
    seen: dict[str, int] = {}
    out = []
    for r in records:
        stem = file_stem(r.path.name)
        n = seen.get(stem.lower(), 0) + 1
        seen[stem.lower()] = n
        out.append(replace(r, stem=stem if n == 1 else f"{stem}-{n}"))
    return out


def build_inventory(root: str | Path,
                    profiles: InstrumentProfile | Mapping[str, InstrumentProfile], *,
                    recursive: bool = False, profile_keyword: str = "INSTRUME",
                    angle_tolerance_deg: float = 0.01, extra_keywords: Sequence[str] = (),
                    exclude: Sequence[str | Path] = ()) -> Inventory:
    """Classify every FITS file of a night from its headers alone.

    Parameters
    ----------
    root : str or Path
        The night's directory (never modified).
    profiles : InstrumentProfile or mapping of str to InstrumentProfile
        One profile, or several keyed by name: each file gets the profile whose key or
        ``name`` equals its ``profile_keyword`` header value (case-insensitive). A profile
        listing several gratings chooses each arc's and science frame's from its header
        (:meth:`~wavecal.profile.InstrumentProfile.for_header`); a header naming none makes
        that file's problem.
    recursive : bool
        Also look in sub-folders.
    profile_keyword : str
        Header keyword that names the instrument when several profiles are given.
    angle_tolerance_deg : float
        Grating angles closer than this (chained) belong to one configuration.
    extra_keywords : sequence of str
        Further header keywords (filter, slit ...) whose values split configurations.
    exclude : sequence of paths
        Folders not to look into (e.g. the output folder).

    Returns
    -------
    Inventory
        Files that cannot be used carry a ``problem``; nothing raises for one bad file.
    """
    root = Path(root)
    if not root.is_dir():
        msg = f"{root}: not a directory"
        raise WavecalError(msg)
    if isinstance(profiles, InstrumentProfile):
        profiles = {profiles.name: profiles}
    profiles = dict(profiles)
    found, ignored = survey(root, recursive=recursive, exclude=exclude)
    examined = [_examine(p, root, profiles, profile_keyword, tuple(extra_keywords))
                for p in found]
    settings = {(r.profile, r.grating): chosen for r, chosen in examined
                if chosen is not None and not r.problem}
    records = _unique_stems(_configurations([r for r, _ in examined], angle_tolerance_deg))
    return Inventory(root=root, records=tuple(records), profiles=profiles, settings=settings,
                     ignored=tuple(ignored))
