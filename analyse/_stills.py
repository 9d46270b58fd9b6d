"""Still frames: header probing (size, depth, EXIF) and decoding to integer RGB.

Private helper of :mod:`analyse.frames`. Headers are read with Pillow, whose
``Image.open`` reads only the header, so the size is checked before any pixel is
decoded. 8-bit JPEG is decoded with Pillow (it reports truncated files; OpenCV
silently returns a partial image); PNG and TIFF with OpenCV, which reads 16-bit RGB
at full depth (Pillow reduces it to 8 bits).
"""

from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

import cv2
import numpy as np
from PIL import Image, JpegImagePlugin, UnidentifiedImageError

from analyse.errors import InputError

__all__ = ["StillHeader", "probe_still", "exif_time_utc", "times_from_exif", "still_notes",
           "read_still", "orient"]

EXIF_IFD = 0x8769  # pointer to the Exif sub-IFD (EXIF 2.32, CIPA DC-008-2019)
TAG_ORIENTATION = 0x0112  # in the top-level IFD (EXIF 2.32)
TAG_EXPOSURE_TIME = 0x829A  # ExposureTime, seconds (EXIF 2.32)
TAG_ISO = 0x8827  # PhotographicSensitivity / ISOSpeedRatings (EXIF 2.32)
TAG_DATETIME_ORIGINAL = 0x9003  # "YYYY:MM:DD HH:MM:SS", local time (EXIF 2.32)
TAG_OFFSET_TIME_ORIGINAL = 0x9011  # "+HH:MM" offset of that local time from UTC (EXIF 2.32)
TAG_SUBSEC_TIME_ORIGINAL = 0x9291  # decimal fraction digits: "05" is 0.05 s (EXIF 2.32)

#: Pillow modes accepted as colour; greyscale ("L", "I;16", "1", ...) is refused.
COLOUR_MODES = ("RGB", "RGBA", "RGBX", "P", "PA")
#: Chroma subsampling from Pillow's ``JpegImagePlugin.get_sampling`` code.
JPEG_SAMPLING = {0: "4:4:4", 1: "4:2:2", 2: "4:2:0"}
#: Last 12 bytes of every complete PNG: the empty IEND chunk (PNG spec, 11.2.5).
PNG_IEND = b"\x00\x00\x00\x00IEND\xaeB`\x82"

_EXIF_DATETIME = re.compile(r"^(\d{4}):(\d{2}):(\d{2}) (\d{2}):(\d{2}):(\d{2})$")
_EXIF_OFFSET = re.compile(r"^([+-])(\d{2}):(\d{2})$")


@dataclass(frozen=True)
class StillHeader:
    """What a still's header says, read without decoding its pixels.

    ``width``/``height`` are after the EXIF orientation is applied.
    """

    path: Path
    width: int
    height: int
    bit_depth: int
    chroma_subsampling: str | None
    orientation: int
    datetime_original: str | None
    subsec_original: str | None
    offset_original: str | None
    exposure_s: float | None
    iso: float | None
    png_gamma: float | None


def probe_still(path: Path, max_pixels: int) -> StillHeader:
    """Read a still's header and EXIF; refuse huge, greyscale or unreadable images.

    Parameters
    ----------
    path : Path
        The image file.
    max_pixels : int
        Largest accepted width x height [pixels], checked before decoding.

    Returns
    -------
    StillHeader
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            im = Image.open(path)
    except Image.DecompressionBombError as exc:
        raise InputError(f"image is too large to decode safely ({exc})", path) from None
    except (UnidentifiedImageError, OSError, SyntaxError, ValueError) as exc:
        raise InputError(f"cannot read the image header ({exc})", path) from None
    with im:
        width, height = im.size
        if width * height > max_pixels:
            raise InputError(f"image is {width} x {height} = {width * height} pixels, more than "
                             f"the limit of {max_pixels} (refused before decoding)", path)
        if im.mode not in COLOUR_MODES:
            raise InputError(f"image mode {im.mode!r} is not RGB colour (greyscale, CMYK and "
                             "other modes are refused: the analysis needs colour)", path)
        if im.format == "PNG" and _png_truncated(path):
            raise InputError("PNG is truncated (no IEND chunk at the end)", path)
        exif = _exif_of(im)
        sub = exif.get_ifd(EXIF_IFD) if exif else {}
        orientation = _int_or(exif.get(TAG_ORIENTATION), 1) if exif else 1
        if orientation not in range(1, 9):
            orientation = 1
        if orientation >= 5:
            width, height = height, width
        sampling = JpegImagePlugin.get_sampling(im) if im.format == "JPEG" else -1
        return StillHeader(
            path=path, width=width, height=height, bit_depth=_bit_depth(im),
            chroma_subsampling=JPEG_SAMPLING.get(sampling), orientation=orientation,
            datetime_original=_text(sub.get(TAG_DATETIME_ORIGINAL)),
            subsec_original=_text(sub.get(TAG_SUBSEC_TIME_ORIGINAL)),
            offset_original=_text(sub.get(TAG_OFFSET_TIME_ORIGINAL)),
            exposure_s=_float_or_none(sub.get(TAG_EXPOSURE_TIME)),
            iso=_float_or_none(sub.get(TAG_ISO)),
            png_gamma=_float_or_none(im.info.get("gamma")) if im.format == "PNG" else None,
        )


def exif_time_utc(header: StillHeader, clock_utc_offset_h: float | None) -> float:
    """UTC POSIX seconds from EXIF DateTimeOriginal + SubSecTimeOriginal + offset.

    Parameters
    ----------
    header : StillHeader
        As read by :func:`probe_still`; must have ``datetime_original``.
    clock_utc_offset_h : float or None
        The camera clock's offset from UTC [h] (local = UTC + offset), used only
        where the file has no OffsetTimeOriginal.

    Returns
    -------
    float
        UTC [s since 1970-01-01].

    References
    ----------
    CIPA DC-008-2019 (EXIF 2.32), tags DateTimeOriginal, SubSecTimeOriginal,
    OffsetTimeOriginal.
    """
    path = header.path
    match = _EXIF_DATETIME.match(header.datetime_original or "")
    if match is None:
        raise InputError(f"EXIF DateTimeOriginal {header.datetime_original!r} is not "
                         "'YYYY:MM:DD HH:MM:SS'", path)
    try:
        local = datetime(*(int(g) for g in match.groups()), tzinfo=timezone.utc)
    except ValueError as exc:
        raise InputError(f"EXIF DateTimeOriginal {header.datetime_original!r}: {exc}",
                         path) from None
    if header.offset_original:
        offset = _EXIF_OFFSET.match(header.offset_original)
        if offset is None:
            raise InputError(f"EXIF OffsetTimeOriginal {header.offset_original!r} is not "
                             "'+HH:MM'", path)
        sign = -1 if offset.group(1) == "-" else 1
        offset_s = sign * (int(offset.group(2)) * 3600 + int(offset.group(3)) * 60)
    elif clock_utc_offset_h is not None:
        offset_s = float(clock_utc_offset_h) * 3600.0
    else:
        raise InputError("EXIF has DateTimeOriginal but no OffsetTimeOriginal: give "
                         "[camera] clock_utc_offset_h in observation.toml or add frames.csv",
                         path)
    subsec = (header.subsec_original or "").strip()
    if subsec and not subsec.isdigit():
        raise InputError(f"EXIF SubSecTimeOriginal {subsec!r} is not decimal digits", path)
    fraction_s = float(f"0.{subsec}") if subsec else 0.0
    return (local - timedelta(seconds=offset_s)).timestamp() + fraction_s


def times_from_exif(headers: list[StillHeader], clock_utc_offset_h: float | None,
                     notes: list[str]) -> list[float]:
    """EXIF times of every still, with notes on what was assumed."""
    for h in headers:
        if h.datetime_original is None:
            raise InputError("no frame times: there is no frames.csv (file,time_utc) and this "
                             "image has no EXIF DateTimeOriginal", h.path)
    times = [exif_time_utc(h, clock_utc_offset_h) for h in headers]
    if any(h.offset_original is None for h in headers):
        notes.append(f"EXIF times without OffsetTimeOriginal taken as camera clock = UTC "
                     f"{clock_utc_offset_h:+g} h ([camera] clock_utc_offset_h)")
    if any(h.subsec_original is None for h in headers):
        notes.append("some EXIF times have no SubSecTimeOriginal: those are whole seconds")
    return times


def still_notes(headers: list[StillHeader]) -> list[str]:
    """Notes on orientation, chroma subsampling and declared gamma of the stills."""
    notes = []
    turned = sorted({h.orientation for h in headers} - {1})
    if turned:
        notes.append(f"EXIF Orientation {', '.join(map(str, turned))} applied on reading")
    samplings = sorted({h.chroma_subsampling for h in headers if h.chroma_subsampling})
    if "4:2:0" in samplings or "4:2:2" in samplings:
        notes.append(f"JPEG chroma subsampling {'/'.join(samplings)}: colour is stored at "
                     "reduced resolution, so colour edges are interpolated")
    gammas = sorted({h.png_gamma for h in headers if h.png_gamma is not None
                     and abs(h.png_gamma - 1 / 2.2) > 0.01})
    if gammas:
        notes.append(f"PNG gAMA chunk declares gamma {gammas[0]:g}; decoded as sRGB anyway")
    return notes


def read_still(header: StillHeader,
               roi: tuple[int, int, int, int] | None) -> np.ndarray:
    """Decode one still to an integer RGB array, oriented for display and cropped.

    Parameters
    ----------
    header : StillHeader
        From :func:`probe_still` for the same file.
    roi : (y0, y1, x0, x1) or None
        Crop in display coordinates [pixels], applied before any float conversion.

    Returns
    -------
    (H, W, 3) ndarray of uint8 or uint16
        R, G, B as stored (not linearised).
    """
    path = header.path
    if path.suffix.lower() in (".jpg", ".jpeg"):
        rgb = _decode_pillow(path)
    else:
        rgb = _decode_opencv(path)
    expected = (np.uint8 if header.bit_depth == 8 else np.uint16)
    if rgb.dtype != expected:
        raise InputError(f"decoded as {rgb.dtype}, but its header says {header.bit_depth}-bit",
                         path)
    rgb = orient(rgb, header.orientation)
    if rgb.shape[:2] != (header.height, header.width):
        raise InputError(f"decoded size {rgb.shape[1]} x {rgb.shape[0]} differs from its "
                         f"header's {header.width} x {header.height}", path)
    if roi is not None:
        y0, y1, x0, x1 = roi
        rgb = rgb[y0:y1, x0:x1]
    return rgb


def orient(image: np.ndarray, orientation: int) -> np.ndarray:
    """Apply an EXIF Orientation (1..8) so the array is as the image is meant to be seen.

    Parameters
    ----------
    image : (H, W, C) ndarray
        Pixels as stored, row 0 at the top.
    orientation : int
        EXIF tag 0x0112: 1 as stored, 3 rotated 180 deg, 6 needs 90 deg clockwise,
        8 needs 90 deg counter-clockwise, 2/4/5/7 the mirrored variants.

    Returns
    -------
    ndarray
        A view of ``image`` in display orientation.

    References
    ----------
    CIPA DC-008-2019 (EXIF 2.32), tag Orientation; same transforms as Pillow's
    ``ImageOps.exif_transpose``.
    """
    transforms = {
        1: lambda a: a,
        2: lambda a: a[:, ::-1],
        3: lambda a: a[::-1, ::-1],
        4: lambda a: a[::-1],
        5: lambda a: a.swapaxes(0, 1),
        6: lambda a: np.rot90(a, -1),
        7: lambda a: a[::-1, ::-1].swapaxes(0, 1),
        8: lambda a: np.rot90(a, 1),
    }
    return transforms[orientation](image)


def _decode_pillow(path: Path) -> np.ndarray:
    """8-bit RGB through Pillow; truncated or corrupt data raises InputError."""
    try:
        with Image.open(path) as im:
            im.load()
            if im.mode != "RGB":
                im = im.convert("RGB")
            return np.asarray(im)
    except (OSError, SyntaxError, ValueError) as exc:
        raise InputError(f"cannot decode the image, truncated or corrupt ({exc})",
                         path) from None


def _decode_opencv(path: Path) -> np.ndarray:
    """8- or 16-bit RGB through OpenCV (BGR(A) -> RGB, alpha dropped)."""
    try:
        data = np.fromfile(path, dtype=np.uint8)
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc})", path) from None
    image = cv2.imdecode(data, cv2.IMREAD_UNCHANGED) if data.size else None
    if image is None:
        raise InputError("cannot decode the image, truncated or corrupt", path)
    if image.ndim != 3 or image.shape[2] not in (3, 4):
        raise InputError("image decodes as greyscale; the analysis needs colour", path)
    return image[..., 2::-1]


def _png_truncated(path: Path) -> bool:
    """True when a PNG file does not end with its IEND chunk."""
    with open(path, "rb") as fh:
        fh.seek(0, 2)
        size = fh.tell()
        fh.seek(max(size - len(PNG_IEND), 0))
        return fh.read() != PNG_IEND


def _exif_of(im: Image.Image) -> Image.Exif | None:
    """The image's EXIF without decoding pixels (PNG: only an eXIf chunk before IDAT)."""
    if im.format == "PNG" and "exif" not in im.info:
        return None  # Pillow would decode the whole image to look after IDAT
    try:
        return im.getexif()
    except (OSError, SyntaxError, ValueError):
        return None


def _bit_depth(im: Image.Image) -> int:
    """8 or 16 from the decoder's raw mode (``'RGB;16B'`` for 16-bit PNG)."""
    for tile in getattr(im, "tile", None) or ():
        args = tile.args if hasattr(tile, "args") else tile[3]
        rawmode = args[0] if isinstance(args, tuple) and args else args
        if isinstance(rawmode, str) and ";16" in rawmode:
            return 16
    return 8


def _text(value: object) -> str | None:
    """An EXIF ASCII value as stripped text; blank or absent -> None."""
    if value is None:
        return None
    if isinstance(value, bytes):
        value = value.decode("ascii", "replace")
    text = str(value).replace("\x00", "").strip()
    return text if text and text.strip(" :") else None


def _float_or_none(value: object) -> float | None:
    """An EXIF number (rational, int or 1-tuple) as float; missing/invalid -> None."""
    if isinstance(value, tuple):
        value = value[0] if value else None
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError, ZeroDivisionError):
        return None
    return number if math.isfinite(number) else None


def _int_or(value: object, default: int) -> int:
    """An EXIF integer, or ``default`` where absent or invalid."""
    try:
        return int(value)  # type: ignore[call-overload]
    except (TypeError, ValueError):
        return default
