"""Frame files that are not FITS: 1-D spectra as text or CSV, and 8- or 16-bit camera images.

:func:`wavecal.frames.read_frame` chooses the reader by the file's suffix
(:func:`frame_file_kind`) and turns what it returns (:class:`RawFile`) into the same
:class:`~wavecal.frames.Frame` a FITS file gives. Files are opened read-only and never modified.

Text spectra
------------
One column of counts, or two columns: pixel and counts. Lines starting with ``#`` (and anything
after a ``#``) are comments; values are separated by commas, semicolons or white space; the first
line may name the columns. A pixel column must count up by one from line to line; its first value
is the pixel number of the first value (the spectrum's pixels keep the file's numbering).

Camera images
-------------
PNG, TIFF and BMP through Pillow: 8-bit and 16-bit gray images as they are, 8-bit RGB (and RGBA)
images summed over the three colour channels (the sum is what a colour camera collected; alpha
is ignored). A pixel is saturated when its value (the sum) reaches the profile's
``saturation_adu``, or, when the profile states none, when any of its channels reaches the full
scale of its bit depth (2**8 - 1 or 2**16 - 1). Palette, 1-bit, floating-point, 32-bit, other
colour spaces, 16-bit colour and multi-image files are refused.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from astropy.io import fits

from .errors import FrameError

__all__ = ["TEXT_SUFFIXES", "IMAGE_SUFFIXES", "RawFile", "frame_file_kind", "read_text_spectrum",
           "read_camera_image"]

#: Suffixes read as text spectra (:func:`read_text_spectrum`).
TEXT_SUFFIXES = (".txt", ".csv", ".dat")
#: Suffixes read as camera images (:func:`read_camera_image`).
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".bmp")

#: Pillow modes read as they are: mode -> full scale (common practice: 2**bits - 1).
_GRAY_MODES = {"L": 255.0, "I;16": 65535.0, "I;16L": 65535.0, "I;16B": 65535.0, "I;16N": 65535.0}
#: Pillow modes whose colour channels are summed: mode -> (channels summed, full scale each).
_COLOUR_MODES = {"RGB": 3, "RGBA": 3}
#: What the refused Pillow modes are, for the error message.
_REFUSED = {"P": "a palette (indexed-colour) image", "PA": "a palette image", "1": "a 1-bit image",
            "F": "a floating-point image", "I": "a 32-bit integer image",
            "LA": "a gray image with alpha", "CMYK": "a CMYK image", "YCbCr": "a YCbCr image",
            "LAB": "a Lab image", "HSV": "an HSV image"}
_SEPARATORS = re.compile(r"[;,]|\s+")


@dataclass(frozen=True)
class RawFile:
    """What a non-FITS frame file holds, as read.

    Attributes
    ----------
    data : ndarray
        Raw values (1-D for a text spectrum, 2-D for an image).
    header : astropy.io.fits.Header
        An empty header (such files carry none).
    saturated : ndarray of bool or None
        For an image: pixels at its saturation level; None for a text spectrum.
    first_pixel : int
        Pixel number of ``data``'s first value along the dispersion (a text spectrum's pixel
        column; 0 otherwise).
    """

    data: np.ndarray
    header: fits.Header
    saturated: np.ndarray | None = None
    first_pixel: int = 0


def frame_file_kind(path: str | Path) -> str:
    """``"text"``, ``"image"`` or ``"fits"`` (any other suffix), from the file's suffix."""
    suffix = Path(path).suffix.lower()
    if suffix in TEXT_SUFFIXES:
        return "text"
    if suffix in IMAGE_SUFFIXES:
        return "image"
    return "fits"


def read_text_spectrum(path: str | Path) -> RawFile:
    """Read a 1-D spectrum from a text or CSV file (see the module docstring).

    Raises
    ------
    FrameError
        One line naming the file (and the line, where one is at fault): unreadable, not text,
        no values, a value that is not a number, a varying or wrong number of columns, or a
        pixel column that does not count up by one.
    """
    path = Path(path)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError:
        msg = f"{path}: not a text file (it is not UTF-8 or ASCII text)"
        raise FrameError(msg) from None
    except OSError as exc:
        msg = f"{path}: cannot read the file: {exc.strerror or exc}"
        raise FrameError(msg) from None
    rows: list[list[float]] = []
    numbers: list[int] = []
    seen_line = False
    for number, line in enumerate(text.splitlines(), start=1):
        fields = [f for f in _SEPARATORS.split(line.split("#", 1)[0].strip()) if f]
        if not fields:
            continue
        values = _numbers(fields)
        if values is None:
            if not seen_line and all(re.match(r"^[A-Za-z_(\[]", f) for f in fields):
                seen_line = True  # a header line naming the columns
                continue
            bad = next(f for f in fields if _numbers([f]) is None)
            msg = f"{path}: line {number}: {bad!r} is not a number"
            raise FrameError(msg)
        seen_line = True
        if len(values) not in (1, 2) or (rows and len(values) != len(rows[0])):
            expected = f"{len(rows[0])} as above" if rows else "1 (counts) or 2 (pixel, counts)"
            msg = f"{path}: line {number}: {len(values)} columns; expected {expected}"
            raise FrameError(msg)
        rows.append(values)
        numbers.append(number)
    if not rows:
        msg = f"{path}: holds no values (a spectrum needs one column of counts, or pixel and counts)"
        raise FrameError(msg)
    table = np.array(rows, dtype=float)
    first_pixel = 0
    if table.shape[1] == 2:
        first_pixel = _pixel_start(path, table[:, 0], numbers)
    return RawFile(table[:, -1].copy(), fits.Header(), None, first_pixel)


def _numbers(fields: list[str]) -> list[float] | None:
    try:
        return [float(f) for f in fields]
    except ValueError:
        return None


def _pixel_start(path: Path, pixel: np.ndarray, numbers: list[int]) -> int:
    """The first pixel number, after checking the pixel column counts up by one."""
    wrong = np.flatnonzero(np.diff(pixel) != 1.0)
    if wrong.size:
        i = int(wrong[0]) + 1
        msg = (f"{path}: line {numbers[i]}: pixel {pixel[i]:g} follows {pixel[i - 1]:g}; the pixel "
               "column must count up by one (is the first column a wavelength?)")
        raise FrameError(msg)
    if pixel[0] != round(pixel[0]):
        msg = f"{path}: line {numbers[0]}: pixel {pixel[0]:g} is not a whole pixel number"
        raise FrameError(msg)
    return int(pixel[0])


def read_camera_image(path: str | Path, saturation_adu: float | None = None) -> RawFile:
    """Read an 8- or 16-bit camera image (PNG, TIFF, BMP) through Pillow.

    Parameters
    ----------
    path : str or Path
        The image file.
    saturation_adu : float, optional
        The profile's saturation level, for the image's values (the colour sum); default: any
        channel at the full scale of its bit depth (see the module docstring).

    Raises
    ------
    FrameError
        One line naming the file: not an image Pillow reads, several images in one file, or a
        kind of image that is refused (palette, 1-bit, float, 32-bit, 16-bit colour ...).
    """
    from PIL import Image, UnidentifiedImageError

    path = Path(path)
    try:
        with Image.open(path) as image:
            n_images = getattr(image, "n_frames", 1)
            if n_images > 1:
                msg = f"{path}: holds {n_images} images (a stack or 3-D image); wavecal reads one"
                raise FrameError(msg)
            mode = image.mode
            bits = _colour_bits(path, image)
            pixels = np.array(image)
    except (UnidentifiedImageError, OSError, ValueError, SyntaxError) as exc:
        msg = f"{path}: cannot read it as an image: {exc}"
        raise FrameError(msg) from None
    if mode in _GRAY_MODES:
        data = pixels.astype(np.float64)
        full = np.asarray(pixels >= _GRAY_MODES[mode])
    elif mode in _COLOUR_MODES and bits == 8:
        channels = pixels[..., :_COLOUR_MODES[mode]]
        data = channels.sum(axis=-1, dtype=np.float64)
        full = np.any(channels >= 255, axis=-1)
    else:
        what = (f"a {bits}-bit colour image" if mode in _COLOUR_MODES
                else _REFUSED.get(mode, f"an image of mode {mode!r}"))
        msg = (f"{path}: {what}; wavecal reads 8- or 16-bit gray and 8-bit RGB images "
               "(save it as such, or as FITS)")
        raise FrameError(msg)
    saturated = full if saturation_adu is None else data >= saturation_adu
    return RawFile(data, fits.Header(), saturated, 0)


def _colour_bits(path: Path, image) -> int:
    """Bits per channel of a colour image as stored (Pillow reads 16-bit colour at 8 bits)."""
    if image.format == "PNG":
        with path.open("rb") as fh:
            head = fh.read(26)
        return int(head[24]) if len(head) == 26 else 8  # IHDR bit depth (PNG specification)
    if image.format == "TIFF":
        per_sample = image.tag_v2.get(258, (8,))  # BitsPerSample (TIFF 6.0 specification)
        return int(max(per_sample if isinstance(per_sample, tuple) else (per_sample,)))
    return 8
