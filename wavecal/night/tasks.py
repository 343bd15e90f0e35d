"""The per-file work of a night (module-level functions, so worker processes can run them).

Each task catches its own errors and returns a plain dict: one bad file never stops the night.
Products are written atomically, then their manifest: what they were made from, and the SHA-256
of each product file, so that a re-run keeps a product only when its manifest matches and its
bytes are those written (:func:`verify_products`).
"""
from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path
from typing import Any

from astropy.io import fits

from .._version import __version__
from .._atomic import atomic_path, atomic_write_text
from ..calibrated import calibrate_image
from ..frames import read_frame
from ..profile import InstrumentProfile
from ..report.spectrum_file import spectrum_path
from ..solution import load_solution
from ..solve import solve_and_write
from ..status import Status
from .bias import read_master_bias
from .drift import shifted_solution

__all__ = ["MANIFEST_SCHEMA", "MANIFEST_SCHEMA_VERSION", "sha256_file", "read_manifest",
           "write_manifest", "verify_products", "arc_products", "arc_task", "science_task"]


def sha256_file(path: str | Path | None) -> str:
    """SHA-256 of a file's bytes ("" for None)."""
    if path is None:
        return ""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


#: ``schema`` and ``schema_version`` of a manifest (every wavecal JSON file carries the pair).
MANIFEST_SCHEMA, MANIFEST_SCHEMA_VERSION = "wavecal-night-manifest", 1


def read_manifest(path: Path) -> dict[str, Any] | None:
    """A product's manifest, or None when missing, unreadable or of another schema (manifests
    written before the schema pair existed are read)."""
    try:
        found = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(found, dict) or found.get("schema", MANIFEST_SCHEMA) != MANIFEST_SCHEMA:
        return None
    return found


def write_manifest(path: Path, key: dict[str, Any], result: dict[str, Any],
                   products: tuple[str | Path, ...] = ()) -> None:
    """Write a manifest (after its products): the inputs' ``key``, the task's ``result`` and the
    SHA-256 of each product file (by file name)."""
    checksums = {Path(p).name: sha256_file(p) for p in products}
    atomic_write_text(path, json.dumps({"schema": MANIFEST_SCHEMA,
                                        "schema_version": MANIFEST_SCHEMA_VERSION,
                                        "key": key, "result": result, "software": __version__,
                                        "checksums": checksums},
                                       indent=1, allow_nan=True) + "\n")


def verify_products(manifest: dict[str, Any], products: tuple[str | Path, ...]) -> str:
    """Why the ``products`` do not match their ``manifest``'s checksums ("" when they all do)."""
    checksums = manifest.get("checksums")
    if not isinstance(checksums, dict):
        return "the manifest records no checksums"
    for product in map(Path, products):
        if product.name not in checksums:
            return f"the manifest records no checksum of {product.name}"
        try:
            if sha256_file(product) != checksums[product.name]:
                return f"{product.name} differs from what was written (checksum mismatch)"
        except OSError as exc:
            return f"{product.name} cannot be read ({exc.strerror})"
    return ""


def _failure(exc: BaseException) -> dict[str, Any]:
    return {"status": Status.FAILED, "reason": str(exc) or type(exc).__name__}


def arc_task(*, path: str, profile: InstrumentProfile, bias_path: str | None, product: str,
             manifest: str, key: dict[str, Any]) -> dict[str, Any]:
    """Calibrate one arc and write its solution file."""
    try:
        bias = read_master_bias(bias_path) if bias_path else None
        frame = read_frame(path, profile, bias=bias)
        written = solve_and_write(frame, profile, Path(product).parent, line_table=False,
                                  stem=Path(product).name.removesuffix(".solution.json"))
        solution = written.solution
        result = {"status": solution.status, "reason": "; ".join(solution.reasons),
                  "rms_px": solution.rms_px, "product": product}
    except Exception as exc:  # every failure becomes a row of the summary
        return _failure(exc)
    write_manifest(Path(manifest), key, result, products=arc_products(product))
    return result


def arc_products(solution: str | Path) -> tuple[Path, Path]:
    """Files an arc task writes: its solution and the extracted spectrum beside it."""
    return Path(solution), spectrum_path(solution)


def science_task(*, path: str, profile: InstrumentProfile, bias_path: str | None,
                 solution_path: str, shift_px: float, product: str, manifest: str,
                 key: dict[str, Any]) -> dict[str, Any]:
    """Write one science frame calibrated (bias-subtracted, in electrons, with the WCS of its
    assigned solution moved by ``shift_px``)."""
    try:
        solution = shifted_solution(load_solution(solution_path), float(shift_px))
        bias = read_master_bias(bias_path) if bias_path else None
        frame = read_frame(path, profile, bias=bias)
        provenance = fits.Header()
        provenance["WCVERS"] = (__version__, "wavecal version")
        provenance["WCARCFIL"] = (Path(solution_path).name, "solution file")
        provenance["WCDRIFT"] = (float(shift_px), "[px] drift shift applied to the solution")
        provenance["WCINFIL"] = (Path(path).name, "input frame")
        provenance.add_history(f"wavecal {__version__} night: bias-subtracted, electrons")
        hdul = calibrate_image(solution, frame.data, header=frame.header,
                               variance=frame.variance, origin=frame.origin,
                               provenance=provenance)
        with atomic_path(product) as tmp:
            hdul.writeto(tmp, overwrite=True, checksum=True)
        rms = solution.rms_px
        result = {"status": solution.status, "reason": "; ".join(solution.reasons),
                  "rms_px": rms if math.isfinite(rms) else None, "product": product}
    except Exception as exc:  # every failure becomes a row of the summary
        return _failure(exc)
    write_manifest(Path(manifest), key, result, products=(product,))
    return result
