"""Video: presentation timestamps from demuxed packets, and streamed decoding with PyAV.

Private helper of :mod:`analyse.frames`. Times come from the packets' presentation
timestamps (pts) without decoding pixels: packets arrive in decoding order, so their
pts are sorted into presentation order. ``pts * time_base`` is exact, keeps a
non-zero start and follows a variable frame rate. Only the first frame is decoded
while probing, for its display-matrix rotation.

Colour matrix: a YUV stream's pixels become R'G'B' through the matrix its header names
(ITU-T H.273 ``matrix_coefficients``). FFmpeg's converter falls back to BT.601 when the
header names none, which mixes the channels of HD footage encoded with BT.709 (a red of
200 decodes as 187 and its green drops by 12 codes): an untagged stream is decoded with
BT.709 from 720 rows up and BT.601 below, as players do (common practice, no source), and
the matrix used is recorded (:attr:`VideoProbe.colour_matrix`).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import av
import numpy as np

from analyse._transfer import transfer_name
from analyse.errors import InputError

__all__ = ["VideoProbe", "probe_video", "decode_video", "chroma_subsampling"]

#: Chroma subsampling named from (horizontal, vertical) luma/chroma size ratios.
SUBSAMPLING_NAMES = {(1, 1): "4:4:4", (2, 1): "4:2:2", (2, 2): "4:2:0", (4, 1): "4:1:1"}
#: ITU-T H.273 matrix_coefficients -> (name, PyAV/swscale colorspace). 5 (BT.470BG) and 6
#: (SMPTE 170M) are BT.601's two variants; 10 (BT.2020 constant luminance) is decoded as 9.
MATRICES = {1: ("BT.709", "ITU709"), 4: ("FCC", "FCC"), 5: ("BT.601", "ITU601"),
            6: ("BT.601", "ITU601"), 7: ("SMPTE 240M", "SMPTE240M"), 9: ("BT.2020", "BT2020"),
            10: ("BT.2020", "BT2020")}
HD_ROWS = 720  # untagged streams this tall are taken as BT.709 (common practice, no source)
#: Demuxer flag: generate missing pts (AVI and raw streams may lack them) (FFmpeg docs).
OPEN_OPTIONS = {"fflags": "+genpts"}


@dataclass(frozen=True)
class VideoProbe:
    """What a video says about its frames, read without decoding them (but one).

    ``width``/``height`` are after the rotation is applied; ``frame_pts`` are sorted.
    """

    path: Path
    frame_pts: tuple[int, ...]
    time_base: Fraction
    width: int
    height: int
    bit_depth: int
    pix_fmt: str
    chroma_subsampling: str | None
    rotation_deg: int
    creation_time: str | None
    colour_matrix: str | None = None  # YUV -> R'G'B' matrix decoded with (None for RGB)
    matrix_tagged: bool = False  # the stream's header names it (else assumed by size)
    transfer: str = "sRGB"  # code values -> light (analyse._transfer)
    transfer_tagged: bool = False  # the header names a supported one (else sRGB assumed)


def probe_video(path: Path, max_pixels: int) -> VideoProbe:
    """Read a video's frame timestamps, size, pixel format and rotation.

    Parameters
    ----------
    path : Path
        The video file (any container FFmpeg reads).
    max_pixels : int
        Largest accepted frame width x height [pixels].

    Returns
    -------
    VideoProbe
    """
    try:
        container = av.open(str(path), options=OPEN_OPTIONS)
    except (av.FFmpegError, OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot open the video ({exc})", path) from None
    with container:
        if not container.streams.video:
            raise InputError("the file has no video stream", path)
        stream = container.streams.video[0]
        ctx = stream.codec_context
        width, height, pix_fmt = ctx.width, ctx.height, ctx.pix_fmt
        if not width or not height or pix_fmt is None:
            raise InputError("the video stream has no frame size or pixel format", path)
        if width * height > max_pixels:
            raise InputError(f"frames are {width} x {height} pixels, more than the limit of "
                             f"{max_pixels}", path)
        fmt = av.VideoFormat(pix_fmt, width, height)
        if len([c for c in fmt.components if not c.is_alpha]) < 3:
            raise InputError(f"pixel format {pix_fmt!r} is greyscale; the analysis needs "
                             "colour", path)
        matrix, tagged = colour_matrix(ctx.colorspace, fmt, height)
        transfer, transfer_tagged = transfer_name(ctx.color_trc)
        frame_pts, rotation = _scan(container, stream, path)
        if stream.time_base is None:
            raise InputError("the video stream has no time base", path)
        creation = container.metadata.get("creation_time") or stream.metadata.get(
            "creation_time")
    if rotation % 90:
        raise InputError(f"display rotation of {rotation} deg is not a multiple of 90", path)
    if rotation % 180:
        width, height = height, width
    bits = max(c.bits for c in fmt.components)
    return VideoProbe(
        path=path, frame_pts=frame_pts, time_base=Fraction(stream.time_base),
        width=width, height=height, bit_depth=8 if bits <= 8 else 16, pix_fmt=pix_fmt,
        chroma_subsampling=chroma_subsampling(fmt), rotation_deg=rotation,
        creation_time=creation, colour_matrix=matrix, matrix_tagged=tagged,
        transfer=transfer, transfer_tagged=transfer_tagged,
    )


def colour_matrix(code: int | None, fmt: av.VideoFormat, height: int
                  ) -> tuple[str | None, bool]:
    """The YUV matrix to decode with (module docstring) and whether the header named it.

    ``code``: the stream's H.273 ``matrix_coefficients``; ``height``: coded rows."""
    if fmt.is_rgb:
        return None, False
    if code in MATRICES:
        return MATRICES[code][0], True
    return ("BT.709" if height >= HD_ROWS else "BT.601"), False


def chroma_subsampling(fmt: av.VideoFormat) -> str | None:
    """``"4:2:0"`` etc. for a YUV pixel format, None for RGB or unknown ratios."""
    if fmt.is_rgb:
        return None
    luma = fmt.components[0]
    chroma = [c for c in fmt.components if c.is_chroma]
    if not chroma or not chroma[0].width or not chroma[0].height:
        return None
    ratio = (round(luma.width / chroma[0].width), round(luma.height / chroma[0].height))
    return SUBSAMPLING_NAMES.get(ratio)


def decode_video(probe: VideoProbe, roi: tuple[int, int, int, int] | None
                 ) -> Iterator[tuple[int, np.ndarray | None, str | None]]:
    """Decode frames one at a time in presentation order.

    Parameters
    ----------
    probe : VideoProbe
        From :func:`probe_video`.
    roi : (y0, y1, x0, x1) or None
        Crop in display coordinates (after rotation) [pixels].

    Yields
    ------
    position : int
        Index into ``probe.frame_pts``; every position is yielded once, in order.
    rgb : (H, W, 3) ndarray of uint8 or uint16, or None
        The frame as stored (not linearised), rotated for display and cropped; None
        where the frame could not be decoded.
    problem : str or None
        Why ``rgb`` is None.
    """
    position_of = {pts: k for k, pts in enumerate(probe.frame_pts)}
    out_format = "rgb24" if probe.bit_depth == 8 else "rgb48le"
    space = {name: sws for name, sws in MATRICES.values()}.get(probe.colour_matrix)
    convert = {"src_colorspace": space, "dst_colorspace": space} if space else {}
    k_rot = (probe.rotation_deg // 90) % 4
    next_k = 0
    problem = "frame missing from the decoder's output"
    with av.open(str(probe.path), options=OPEN_OPTIONS) as container:
        stream = container.streams.video[0]
        stream.thread_type = "AUTO"
        for frame, error in _frames(container, stream):
            if error is not None:
                problem = f"decoder error ({error})"
                continue
            k = position_of.get(frame.pts)
            if k is None or k < next_k:
                continue
            for missing in range(next_k, k):
                yield missing, None, problem
            next_k = k + 1
            if frame.is_corrupt:
                yield k, None, "frame decoded with errors (corrupt data)"
                continue
            rgb = np.rot90(frame.to_ndarray(format=out_format, **convert), k_rot)
            if roi is not None:
                rgb = rgb[roi[0]:roi[1], roi[2]:roi[3]]
            yield k, rgb, None
    for missing in range(next_k, len(probe.frame_pts)):
        yield missing, None, problem


def _frames(container: av.container.InputContainer, stream: av.VideoStream
            ) -> Iterator[tuple[av.VideoFrame | None, str | None]]:
    """Decoded frames, or the decoder's error for a packet, continuing after errors."""
    for packet in container.demux(stream):
        try:
            frames = stream.decode(packet)
        except av.FFmpegError as exc:
            yield None, str(exc)
            continue
        for frame in frames:
            yield frame, None


def _scan(container: av.container.InputContainer, stream: av.VideoStream, path: Path
          ) -> tuple[tuple[int, ...], int]:
    """Sorted pts of every shown frame, and the display rotation (counter-clockwise deg)."""
    pts: list[int] = []
    rotation: int | None = None
    try:
        for packet in container.demux(stream):
            if packet.size == 0 or packet.is_discard:
                continue  # end-of-stream flush, or outside the edit list
            if packet.pts is None:
                raise InputError("a video packet has no presentation timestamp", path)
            pts.append(packet.pts)
            if rotation is None:
                rotation = _first_rotation(stream, packet)
        if rotation is None:
            rotation = _first_rotation(stream, None) or 0
    except av.FFmpegError as exc:
        raise InputError(f"cannot read the video's packets ({exc})", path) from None
    if not pts:
        raise InputError("the video has no frames", path)
    if rotation == 0 and "rotate" in stream.metadata:  # legacy tag, degrees clockwise
        try:
            rotation = -int(float(stream.metadata["rotate"]))
        except ValueError:
            rotation = 0
    rotation = ((rotation + 180) % 360) - 180
    return tuple(sorted(pts)), rotation


def _first_rotation(stream: av.VideoStream, packet: av.Packet | None) -> int | None:
    """Display rotation of the first frame the decoder returns, None while it has none."""
    try:
        frames = stream.decode(packet)
    except av.FFmpegError:
        return None  # a damaged frame: try the next; iter_frames reports it
    return frames[0].rotation if frames else None
