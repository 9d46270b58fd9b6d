"""Frame sources (a folder of stills, or one video) and the time of every frame.

The sunset folder's contract is FOLDER-FORMAT.md, "Input: a sunset folder" and "Frame
times". :func:`open_frames` scans the folder (it never writes to it), reads only
headers, timestamps and metadata, and returns a :class:`FrameSet` with a time for every
frame. :func:`iter_frames` then decodes the frames one at a time into linear-light RGB.

Frame times, first source that exists wins:

1. ``frames.csv`` (``file,time_utc``; ISO 8601 UTC). For a video the ``file`` column
   names frames as ``<video name>#<index>`` in presentation order, from 0.
2. EXIF ``DateTimeOriginal`` + ``SubSecTimeOriginal`` + ``OffsetTimeOriginal`` (a camera
   clock offset must be given where the offset is missing).
3. Video presentation timestamps, ``pts * time_base`` exactly, with the container's time
   origin (pts = 0) at ``video_start_utc``, else at the container's ``creation_time``.

Stills are in natural order of their names (``f2`` before ``f10``); their times must
increase strictly in that order. Images are shown as meant to be seen: EXIF Orientation
for stills, the display matrix for video.
"""

from __future__ import annotations

import calendar
import csv
import math
import queue
import re
import threading
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from datetime import datetime, timezone
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np

from analyse import _stills, _transfer, _video
from analyse.errors import InputError

__all__ = [
    "FrameInfo", "FrameSet", "open_frames", "iter_frames", "srgb_to_linear",
    "linear_to_srgb", "read_frames_csv",
]

STILL_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff")
VIDEO_SUFFIXES = (".mp4", ".mov", ".mkv", ".avi")
FRAMES_CSV = "frames.csv"
DEFAULT_MAX_PIXELS = 60_000_000  # about a 60 MP still; larger is refused as an image bomb

# IEC 61966-2-1:1999 (sRGB), decoding and encoding transfer functions:
SRGB_DECODE_KNEE = 0.04045  # encoded value where the linear segment ends [-]
SRGB_ENCODE_KNEE = 0.0031308  # linear value where the linear segment ends [-]
SRGB_SLOPE = 12.92  # slope of the linear segment [-]
SRGB_OFFSET = 0.055  # offset of the power segment [-]
SRGB_GAMMA = 2.4  # exponent of the power segment [-]

_ISO_UTC = re.compile(
    r"^(\d{4})-(\d{2})-(\d{2})[T ](\d{2}):(\d{2}):(\d{2})(\.\d+)?"
    r"(Z|[+-]\d{2}:?\d{2})$", re.IGNORECASE)
_DIGITS = re.compile(r"(\d+)")


@dataclass(frozen=True)
class FrameInfo:
    """One frame's place and time in the recording."""

    index: int  # position in recording order, from 0
    t_unix_s: float  # UTC [s since 1970-01-01]
    source: str  # file name (stills) or "video.mp4#123"
    exposure_s: float | None  # EXIF ExposureTime [s] when present
    iso: float | None  # EXIF PhotographicSensitivity [ISO] when present


@dataclass(frozen=True)
class FrameSet:
    """A sunset folder's frames, their times and how they are stored.

    ``width``/``height`` [pixels] are as displayed (after orientation/rotation);
    ``bit_depth`` is that of the decoded integers (16 for any video deeper than 8 bit).
    ``frame_pts``, ``time_base`` and ``rotation_deg`` are for video only.
    """

    folder: Path
    kind: str  # "stills" or "video"
    files: tuple[Path, ...]
    infos: tuple[FrameInfo, ...]
    time_source: str
    width: int
    height: int
    bit_depth: int
    chroma_subsampling: str | None
    notes: tuple[str, ...]
    frame_pts: tuple[int, ...] = ()  # video: pts of infos[i], in time_base units
    time_base: Fraction | None = None  # video: seconds per pts unit
    rotation_deg: int = 0  # video: counter-clockwise display rotation applied on reading
    # YUV -> R'G'B' matrix of the stored colour ("BT.709", "BT.601", ...; JPEG: "BT.601"
    # per JFIF 1.02), None for RGB storage
    colour_matrix: str | None = None
    # Code values -> linear light (analyse._transfer): "sRGB" for stills and untagged
    # video, else the video's own ("BT.709", "HLG", "PQ", "linear")
    transfer: str = "sRGB"


def srgb_to_linear(x: np.ndarray | float) -> np.ndarray:
    """Decode sRGB-encoded values to linear light.

    Parameters
    ----------
    x : array_like
        Encoded values, nominally 0..1 [-]. Values outside follow the same two
        segments (not clipped).

    Returns
    -------
    ndarray
        Linear values [-], same shape, floating dtype of ``x`` (float64 for integers).

    References
    ----------
    IEC 61966-2-1:1999, Multimedia systems and equipment - Colour measurement and
    management - Part 2-1: Default RGB colour space - sRGB (decoding formula).
    """
    x = np.asarray(x)
    if not np.issubdtype(x.dtype, np.floating):
        x = x.astype(np.float64)
    power = ((np.maximum(x, SRGB_DECODE_KNEE) + SRGB_OFFSET) / (1 + SRGB_OFFSET)) ** SRGB_GAMMA
    return np.where(x <= SRGB_DECODE_KNEE, x / SRGB_SLOPE, power).astype(x.dtype)


def linear_to_srgb(x: np.ndarray | float) -> np.ndarray:
    """Encode linear light as sRGB values (inverse of :func:`srgb_to_linear`).

    Parameters
    ----------
    x : array_like
        Linear values, nominally 0..1 [-]; not clipped.

    Returns
    -------
    ndarray
        Encoded values [-], same shape, floating dtype of ``x`` (float64 for integers).

    References
    ----------
    IEC 61966-2-1:1999 (encoding formula).
    """
    x = np.asarray(x)
    if not np.issubdtype(x.dtype, np.floating):
        x = x.astype(np.float64)
    power = (1 + SRGB_OFFSET) * np.maximum(x, SRGB_ENCODE_KNEE) ** (1 / SRGB_GAMMA) - SRGB_OFFSET
    return np.where(x <= SRGB_ENCODE_KNEE, x * SRGB_SLOPE, power).astype(x.dtype)


def read_frames_csv(path: str | Path) -> dict[str, float]:
    """Read ``frames.csv``: one row per frame, columns ``file`` and ``time_utc``.

    Parameters
    ----------
    path : str or Path
        The CSV file. Extra columns are ignored; blank lines are skipped.

    Returns
    -------
    dict
        File name (or ``<video>#<index>``) -> UTC [s since 1970-01-01], in file order.
    """
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            rows = [(n, row) for n, row in enumerate(csv.reader(fh), start=1)
                    if any(cell.strip() for cell in row)]
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise InputError(f"cannot read ({exc})", path) from None
    if not rows:
        raise InputError("is empty; expected a header 'file,time_utc' and one row per frame",
                         path)
    header = [cell.strip().lower() for cell in rows[0][1]]
    if "file" not in header or "time_utc" not in header:
        raise InputError(f"header {','.join(rows[0][1])!r} lacks the columns 'file' and "
                         "'time_utc'", path)
    i_file, i_time = header.index("file"), header.index("time_utc")
    times: dict[str, float] = {}
    for line, row in rows[1:]:
        if len(row) <= max(i_file, i_time):
            raise InputError(f"line {line} has {len(row)} columns, expected {len(header)}",
                             path)
        name, text = row[i_file].strip(), row[i_time].strip()
        if not name:
            raise InputError(f"line {line} has an empty 'file'", path)
        if name in times:
            raise InputError(f"line {line} repeats the file {name!r}", path)
        times[name] = _parse_iso_utc(text, f"line {line} time_utc", path)
    if not times:
        raise InputError("has a header but no rows", path)
    return times


def open_frames(folder: str | Path, *, video_start_utc: float | str | datetime | None = None,
                clock_utc_offset_h: float | None = None,
                max_pixels: int = DEFAULT_MAX_PIXELS) -> FrameSet:
    """Scan a sunset folder and time every frame, without decoding pixels.

    Parameters
    ----------
    folder : str or Path
        The sunset folder: still images or exactly one video (FOLDER-FORMAT.md).
    video_start_utc : float, str or datetime, optional
        UTC of the video's time origin (pts = 0): POSIX seconds [s], ISO 8601 text or
        an aware datetime. Else the container's ``creation_time`` is used.
    clock_utc_offset_h : float, optional
        Camera clock minus UTC [h], for EXIF times without OffsetTimeOriginal.
    max_pixels : int
        Largest accepted frame width x height [pixels], checked from headers.

    Returns
    -------
    FrameSet

    Raises
    ------
    InputError
        For a missing or empty folder, mixed or several videos, bad or incomplete
        frames.csv, missing time sources, unreadable or oversized images, stills of
        differing sizes, and times that go backwards or repeat.
    """
    folder = Path(folder)
    stills, videos = _scan_folder(folder)
    csv_path = folder / FRAMES_CSV
    csv_times = read_frames_csv(csv_path) if csv_path.is_file() else None
    if videos:
        frameset = _open_video(folder, videos[0], csv_times, video_start_utc, max_pixels)
    else:
        frameset = _open_stills(folder, stills, csv_times, clock_utc_offset_h, max_pixels)
    _check_increasing(frameset.infos, frameset.folder)
    return frameset


def iter_frames(frameset: FrameSet, *, roi: tuple[int, int, int, int] | None = None,
                on_error: str = "raise", prefetch: int = 0
                ) -> Iterator[tuple[FrameInfo, np.ndarray | None]]:
    """Decode the frames one at a time, in recording order, as linear-light RGB.

    Nothing is kept between frames: memory does not grow with their number (at most
    ``prefetch`` + 2 frames are held).

    Parameters
    ----------
    frameset : FrameSet
        From :func:`open_frames`.
    roi : (y0, y1, x0, x1), optional
        Rows y0..y1-1 and columns x0..x1-1 to keep [pixels, display coordinates].
    on_error : {"raise", "skip"}
        For a frame that cannot be decoded: raise InputError naming it, or yield
        ``(info, None)`` and go on.
    prefetch : int
        Decode and linearise up to this many frames ahead in a background thread, so
        that decoding (FFmpeg and OpenCV release the GIL) overlaps the caller's work on
        the previous frame; 0 decodes in the caller's thread. Errors are raised to the
        caller at the frame where they occur; closing the iterator early stops the
        thread.

    Yields
    ------
    info : FrameInfo
    rgb : (H, W, 3) ndarray of float32, or None
        Linear-light R, G, B, 0..1 [-] (sRGB decoded per IEC 61966-2-1; 8-bit values
        divided by 255, 16-bit by 65535).
    """
    if on_error not in ("raise", "skip"):
        raise ValueError(f"on_error must be 'raise' or 'skip', got {on_error!r}")
    if prefetch < 0:
        raise ValueError(f"prefetch must be >= 0 frames, got {prefetch!r}")
    if prefetch:
        yield from _prefetched(iter_frames(frameset, roi=roi, on_error=on_error), prefetch)
        return
    roi = _check_roi(roi, frameset.height, frameset.width)
    lut = _linear_lut(frameset.bit_depth, frameset.transfer)
    if frameset.kind == "video":
        infos = frameset.infos
        for k, rgb, problem in _video.decode_video(_probe_of(frameset), roi):
            if rgb is None:
                if on_error == "raise":
                    raise InputError(f"{infos[k].source}: {problem}", frameset.files[0])
                yield infos[k], None
            else:
                yield infos[k], _linearise(lut, rgb)
        return
    for info, path in zip(frameset.infos, frameset.files):
        try:
            header = _stills.probe_still(path, frameset.width * frameset.height)
            rgb = _stills.read_still(header, roi)
        except InputError:
            if on_error == "raise":
                raise
            yield info, None
            continue
        yield info, _linearise(lut, rgb)


# --- folder scanning and time sources ----------------------------------------------


def _scan_folder(folder: Path) -> tuple[list[Path], list[Path]]:
    """Stills (natural name order) and videos in a folder; refuse anything else."""
    if not folder.exists():
        raise InputError("folder does not exist", folder)
    if not folder.is_dir():
        raise InputError("is not a folder", folder)
    entries = [p for p in folder.iterdir() if p.is_file() and not p.name.startswith(".")]
    stills = sorted((p for p in entries if p.suffix.lower() in STILL_SUFFIXES),
                    key=lambda p: _natural_key(p.name))
    videos = sorted(p for p in entries if p.suffix.lower() in VIDEO_SUFFIXES)
    if stills and videos:
        raise InputError(f"mixes {len(stills)} still images with video {videos[0].name}; "
                         "keep one kind of frames per folder", folder)
    if len(videos) > 1:
        raise InputError(f"holds more than one video ({', '.join(p.name for p in videos)}); "
                         "keep exactly one", folder)
    if not stills and not videos:
        raise InputError("has no frames: expected still images (*.png *.jpg *.jpeg *.tif "
                         "*.tiff) or one video (*.mp4 *.mov *.mkv *.avi)", folder)
    return stills, videos


def _open_stills(folder: Path, stills: list[Path], csv_times: dict[str, float] | None,
                 clock_utc_offset_h: float | None, max_pixels: int) -> FrameSet:
    """FrameSet for a folder of still images."""
    headers = [_stills.probe_still(p, max_pixels) for p in stills]
    first = headers[0]
    for h in headers[1:]:
        if (h.width, h.height) != (first.width, first.height):
            raise InputError(f"is {h.width} x {h.height} pixels but {first.path.name} is "
                             f"{first.width} x {first.height}: stills must share one size",
                             h.path)
        if h.bit_depth != first.bit_depth:
            raise InputError(f"is {h.bit_depth}-bit but {first.path.name} is "
                             f"{first.bit_depth}-bit: stills must share one depth", h.path)
    notes: list[str] = []
    if csv_times is not None:
        times = _times_from_csv(csv_times, [p.name for p in stills], folder / FRAMES_CSV)
        time_source = "frames.csv"
    else:
        times = _stills.times_from_exif(headers, clock_utc_offset_h, notes)
        time_source = "exif"
    infos = tuple(FrameInfo(index=i, t_unix_s=t, source=h.path.name,
                            exposure_s=h.exposure_s, iso=h.iso)
                  for i, (t, h) in enumerate(zip(times, headers)))
    notes.extend(_stills.still_notes(headers))
    return FrameSet(folder=folder, kind="stills", files=tuple(stills), infos=infos,
                    time_source=time_source, width=first.width, height=first.height,
                    bit_depth=first.bit_depth, chroma_subsampling=first.chroma_subsampling,
                    notes=tuple(notes),
                    colour_matrix="BT.601" if first.chroma_subsampling else None)


def _open_video(folder: Path, video: Path, csv_times: dict[str, float] | None,
                video_start_utc: float | str | datetime | None, max_pixels: int) -> FrameSet:
    """FrameSet for a folder holding one video."""
    probe = _video.probe_video(video, max_pixels)
    sources = [f"{video.name}#{k}" for k in range(len(probe.frame_pts))]
    notes: list[str] = []
    if csv_times is not None:
        times = _times_from_csv(csv_times, sources, folder / FRAMES_CSV)
        time_source = "frames.csv"
    else:
        anchor_s, time_source = _video_anchor(probe, video_start_utc, notes)
        times = [anchor_s + float(pts * probe.time_base) for pts in probe.frame_pts]
        if probe.frame_pts[0] != 0:
            notes.append(f"first frame at pts {probe.frame_pts[0]} = "
                         f"{float(probe.frame_pts[0] * probe.time_base):.6f} s after the "
                         "video's time origin (kept)")
    if probe.chroma_subsampling in ("4:2:0", "4:2:2", "4:1:1"):
        notes.append(f"video is {probe.chroma_subsampling} ({probe.pix_fmt}): colour is stored "
                     "at reduced resolution, so colour edges are interpolated")
    if not probe.transfer_tagged:
        notes.append("the video does not name a supported transfer function: its code "
                     "values are decoded as sRGB")
    elif probe.transfer != "sRGB":
        notes.append(f"code values decoded to linear light with the {probe.transfer} "
                     "transfer function the video names")
    if probe.transfer == "PQ":
        notes.append("PQ video: light is relative to 10000 cd/m^2, so a disc clipped by "
                     "the camera below that peak is not recognised as saturated")
    if probe.colour_matrix and not probe.matrix_tagged:
        notes.append(f"the video does not name its colour matrix: decoded as "
                     f"{probe.colour_matrix} ({probe.height} rows)")
    if probe.rotation_deg:
        notes.append(f"display rotation {probe.rotation_deg} deg (counter-clockwise) applied "
                     "on reading")
    if probe.bit_depth == 16:
        notes.append(f"{probe.pix_fmt} video read as 16-bit RGB")
    infos = tuple(FrameInfo(index=k, t_unix_s=t, source=s, exposure_s=None, iso=None)
                  for k, (t, s) in enumerate(zip(times, sources)))
    return FrameSet(folder=folder, kind="video", files=(video,), infos=infos,
                    time_source=time_source, width=probe.width, height=probe.height,
                    bit_depth=probe.bit_depth, chroma_subsampling=probe.chroma_subsampling,
                    notes=tuple(notes), frame_pts=probe.frame_pts,
                    time_base=probe.time_base, rotation_deg=probe.rotation_deg,
                    colour_matrix=probe.colour_matrix, transfer=probe.transfer)


def _video_anchor(probe: _video.VideoProbe, video_start_utc: float | str | datetime | None,
                  notes: list[str]) -> tuple[float, str]:
    """UTC of the video's pts origin [s] and the name of that time source."""
    if video_start_utc is not None:
        if isinstance(video_start_utc, str):
            anchor = _parse_iso_utc(video_start_utc, "video_start_utc", None)
        elif isinstance(video_start_utc, datetime):
            if video_start_utc.tzinfo is None:
                raise InputError("video_start_utc has no time zone")
            anchor = video_start_utc.timestamp()
        else:
            anchor = float(video_start_utc)
        if not math.isfinite(anchor):
            raise InputError(f"video_start_utc = {video_start_utc!r} is not a finite time")
        return anchor, "video pts + video_start_utc"
    if probe.creation_time is None:
        raise InputError("no frame times: the video has no creation_time; give [camera] "
                         "video_start_utc in observation.toml or add frames.csv", probe.path)
    anchor = _parse_iso_utc(probe.creation_time, "container creation_time", probe.path)
    notes.append(f"frame times anchored at the container's creation_time "
                 f"{probe.creation_time}: whole seconds only, and cameras differ on whether it "
                 "marks the start or the end of recording; set [camera] video_start_utc to "
                 "be sure")
    return anchor, "video pts + creation_time"


def _times_from_csv(csv_times: Mapping[str, float], names: list[str],
                    csv_path: Path) -> list[float]:
    """Times for ``names`` from frames.csv; every name listed, nothing extra."""
    listed = set(csv_times)
    for name in names:
        if name not in listed:
            raise InputError(f"lacks a row for the frame {name!r}", csv_path)
    extra = sorted(listed - set(names), key=_natural_key)
    if extra:
        raise InputError(f"names {extra[0]!r}, which is not a frame in the folder", csv_path)
    return [csv_times[name] for name in names]


def _check_increasing(infos: tuple[FrameInfo, ...], folder: Path) -> None:
    """Refuse times that repeat or go backwards in recording order, naming both frames."""
    for a, b in zip(infos, infos[1:]):
        if b.t_unix_s <= a.t_unix_s:
            how = "repeats the time of" if b.t_unix_s == a.t_unix_s else "is earlier than"
            raise InputError(f"frame times must increase: {b.source} ({_iso(b.t_unix_s)}) "
                             f"{how} {a.source} ({_iso(a.t_unix_s)})", folder)


# --- small helpers -----------------------------------------------------------------


def _parse_iso_utc(text: str, where: str, path: Path | None) -> float:
    """ISO 8601 date-time with Z or an offset -> POSIX seconds, fraction kept exactly."""
    match = _ISO_UTC.match(text.strip())
    if match is None:
        raise InputError(f"{where} {text!r} is not ISO 8601 UTC like "
                         "'2026-06-21T03:55:10.250Z'", path)
    year, month, day, hour, minute, second = (int(g) for g in match.groups()[:6])
    try:
        datetime(year, month, day, hour, minute, second)
    except ValueError as exc:
        raise InputError(f"{where} {text!r}: {exc}", path) from None
    whole = calendar.timegm((year, month, day, hour, minute, second, 0, 0, 0))
    zone = match.group(8).upper().replace(":", "")
    if zone != "Z":
        sign = -1 if zone[0] == "-" else 1
        whole -= sign * (int(zone[1:3]) * 3600 + int(zone[3:5]) * 60)
    fraction = match.group(7)
    return whole + (float(fraction) if fraction else 0.0)


def _iso(t_unix_s: float) -> str:
    """POSIX seconds as ISO 8601 UTC with milliseconds, for messages."""
    whole = math.floor(t_unix_s)
    stamp = datetime.fromtimestamp(whole, timezone.utc).strftime("%Y-%m-%dT%H:%M:%S")
    return f"{stamp}.{min(int((t_unix_s - whole) * 1000), 999):03d}Z"


def _natural_key(name: str) -> list[object]:
    """Sort key putting ``f2`` before ``f10``."""
    return [(0, int(part), "") if part.isdigit() else (1, 0, part.lower())
            for part in _DIGITS.split(name) if part]


def _linear_lut(bit_depth: int, transfer: str = "sRGB") -> np.ndarray:
    """Lookup table: stored integer -> linear light, float32 (:mod:`analyse._transfer`)."""
    levels = 2 ** bit_depth
    codes = np.arange(levels, dtype=np.float64) / (levels - 1)
    return _transfer.to_linear(transfer, codes).astype(np.float32)


def _linearise(lut: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """``lut[codes]``: OpenCV's table lookup for 8-bit codes (the same values, about three
    times faster, and without the GIL), numpy indexing for 16-bit ones."""
    if codes.dtype == np.uint8 and lut.size == 256:
        return cv2.LUT(codes, lut)
    return lut[codes]


def _prefetched(source: Iterator, depth: int) -> Iterator:
    """The items of ``source``, produced in a background thread at most ``depth`` ahead.

    Exceptions raised by ``source`` are raised here, in order; leaving the loop early
    stops and joins the thread.
    """
    slots: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(item: tuple) -> bool:
        while not stop.is_set():
            try:
                slots.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def produce() -> None:
        try:
            for item in source:
                if not put(("item", item)):
                    return
            put(("end", None))
        except BaseException as exc:  # handed to the consumer, raised there
            put(("error", exc))
        finally:
            source.close()

    worker = threading.Thread(target=produce, name="limbtrace-decode", daemon=True)
    worker.start()
    try:
        while True:
            kind, value = slots.get()
            if kind == "end":
                return
            if kind == "error":
                raise value
            yield value
    finally:
        stop.set()
        worker.join()


def _check_roi(roi: tuple[int, int, int, int] | None, height: int, width: int
               ) -> tuple[int, int, int, int] | None:
    """Validate (y0, y1, x0, x1) against the frame size."""
    if roi is None:
        return None
    y0, y1, x0, x1 = (int(v) for v in roi)
    if not (0 <= y0 < y1 <= height and 0 <= x0 < x1 <= width):
        raise ValueError(f"roi (y0, y1, x0, x1) = {roi} is not inside the {width} x {height} "
                         "frame")
    return y0, y1, x0, x1


def _probe_of(frameset: FrameSet) -> _video.VideoProbe:
    """Rebuild the video probe from a FrameSet (no file access)."""
    return _video.VideoProbe(
        path=frameset.files[0], frame_pts=frameset.frame_pts,
        time_base=frameset.time_base or Fraction(1), width=frameset.width,
        height=frameset.height, bit_depth=frameset.bit_depth, pix_fmt="",
        chroma_subsampling=frameset.chroma_subsampling, rotation_deg=frameset.rotation_deg,
        creation_time=None, colour_matrix=frameset.colour_matrix,
        transfer=frameset.transfer)
