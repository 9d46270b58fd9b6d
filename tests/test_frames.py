"""Tests for analyse.frames: frame sources, their times, and linear-light reading.

All inputs are synthetic, written into ``tmp_path`` with Pillow, OpenCV and PyAV.
"""

from __future__ import annotations

import gc
import struct
import time
import tracemalloc
import weakref
import zlib
from datetime import datetime, timezone
from fractions import Fraction
from pathlib import Path

import av
import cv2
import numpy as np
import pytest
from PIL import Image, ImageOps, TiffImagePlugin

from analyse.errors import InputError
from analyse.frames import (
    FrameSet,
    iter_frames,
    linear_to_srgb,
    open_frames,
    read_frames_csv,
    srgb_to_linear,
)

T0 = datetime(2026, 6, 21, 3, 55, 10, tzinfo=timezone.utc).timestamp()  # an arbitrary UTC


# --- helpers that write synthetic inputs ---------------------------------------------


def _png(path: Path, rgb: np.ndarray) -> Path:
    """Write an RGB(A) uint8/uint16 array as PNG through OpenCV (RGB -> BGR)."""
    order = [2, 1, 0, 3][: rgb.shape[2]]
    assert cv2.imwrite(str(path), np.ascontiguousarray(rgb[..., order]))
    return path


def _flat(value: int, size: tuple[int, int] = (12, 16), dtype: type = np.uint8) -> np.ndarray:
    return np.full((*size, 3), value, dtype=dtype)


def _csv(folder: Path, rows: list[tuple[str, str]], header: str = "file,time_utc") -> Path:
    path = folder / "frames.csv"
    path.write_text(header + "\n" + "".join(f"{a},{b}\n" for a, b in rows))
    return path


def _iso(t: float) -> str:
    whole = int(t)
    stamp = datetime.fromtimestamp(whole, timezone.utc).strftime("%Y-%m-%dT%H:%M:%S")
    return f"{stamp}.{round((t - whole) * 1000):03d}Z"


def _stills_with_csv(folder: Path, n: int, size: tuple[int, int] = (12, 16),
                     step_s: float = 0.25) -> list[Path]:
    folder.mkdir(exist_ok=True)
    paths = [_png(folder / f"f{i:03d}.png", _flat(10 * i % 256, size)) for i in range(n)]
    _csv(folder, [(p.name, _iso(T0 + step_s * i)) for i, p in enumerate(paths)])
    return paths


def _exif_jpeg(path: Path, datetime_original: str | None, subsec: str | None = None,
               offset: str | None = None, orientation: int | None = None,
               rgb: np.ndarray | None = None) -> Path:
    exif = Image.Exif()
    ifd = exif.get_ifd(0x8769)
    if datetime_original is not None:
        ifd[0x9003] = datetime_original
    if subsec is not None:
        ifd[0x9291] = subsec
    if offset is not None:
        ifd[0x9011] = offset
    ifd[0x829A] = TiffImagePlugin.IFDRational(1, 500)  # ExposureTime 1/500 s
    ifd[0x8827] = 200  # ISO
    if orientation is not None:
        exif[0x0112] = orientation
    image = _flat(128) if rgb is None else rgb
    Image.fromarray(image).save(path, exif=exif, quality=95)
    return path


def _video(path: Path, pts: list[int], time_base: Fraction = Fraction(1, 90000),
           size: tuple[int, int] = (48, 64), pix_fmt: str = "yuv420p",
           creation_time: str | None = None, rotation: int = 0,
           frames: list[np.ndarray] | None = None) -> Path:
    """H.264 video with the given presentation timestamps (variable intervals allowed)."""
    container = av.open(str(path), "w")
    if creation_time is not None:
        container.metadata["creation_time"] = creation_time
    stream = container.add_stream("libx264", rate=30)
    stream.height, stream.width = size
    stream.pix_fmt = pix_fmt
    stream.time_base = time_base
    stream.codec_context.time_base = time_base
    if rotation:
        stream.set_display_rotation(rotation)
    for i, p in enumerate(pts):
        rgb = frames[i] if frames is not None else _flat(40 + 20 * i, size)
        frame = av.VideoFrame.from_ndarray(rgb, format="rgb24").reformat(format=pix_fmt)
        frame.pts = p
        frame.time_base = time_base
        for packet in stream.encode(frame):
            container.mux(packet)
    for packet in stream.encode():
        container.mux(packet)
    container.close()
    return path


# --- sRGB transfer functions -------------------------------------------------------------


def test_srgb_check_values():
    # IEC 61966-2-1:1999 decoding (formula as reproduced in Wikipedia "sRGB"; the
    # standard itself not at hand): C = C'/12.92 at and below C' = 0.04045; float64
    # arithmetic, so a tolerance of 1e-12 only absorbs rounding.
    assert srgb_to_linear(0.04045) == pytest.approx(0.04045 / 12.92, abs=1e-12)
    # Same standard, power segment: ((1 + 0.055)/1.055)^2.4 = 1 exactly at full scale.
    assert srgb_to_linear(1.0) == pytest.approx(1.0, abs=1e-12)
    # ((0.5 + 0.055)/1.055)^2.4 = 0.214041..., evaluated from the standard's formula
    # (not a printed table value); 5e-6 allows the 5 quoted digits.
    assert srgb_to_linear(0.5) == pytest.approx(0.21404, abs=5e-6)
    assert srgb_to_linear(0.0) == 0.0
    # IEC 61966-2-1 encoding (same source): 12.92 * L at and below L = 0.0031308.
    assert linear_to_srgb(0.0031308) == pytest.approx(12.92 * 0.0031308, abs=1e-12)
    assert linear_to_srgb(0.21404114) == pytest.approx(0.5, abs=1e-7)


def test_srgb_round_trip_and_dtypes():
    x = np.linspace(0.0, 1.0, 10001)
    # inverses to float64 rounding away from the knees (this grid has no point within the
    # ~1e-8 gap between the two rounded knees, where they disagree by about that much)
    assert np.allclose(linear_to_srgb(srgb_to_linear(x)), x, atol=1e-12, rtol=0)
    assert np.allclose(srgb_to_linear(linear_to_srgb(x)), x, atol=1e-12, rtol=0)
    assert srgb_to_linear(x.astype(np.float32)).dtype == np.float32
    y = srgb_to_linear(x)
    assert np.all(np.diff(y) > 0)  # strictly increasing, both segments
    # the two segments meet at the knee (IEC 61966-2-1; 1e-6 covers the standard's own
    # rounded constants, whose segments differ there by about 1e-8)
    knee = 0.04045
    assert ((knee + 0.055) / 1.055) ** 2.4 == pytest.approx(knee / 12.92, abs=1e-6)


# --- frames.csv ------------------------------------------------------------------------


def test_read_frames_csv_exact(tmp_path):
    path = _csv(tmp_path, [("a.png", "2026-06-21T03:55:10.250Z"),
                           ("b.png", "2026-06-21T03:55:10.333333Z"),
                           ("c.png", "2026-06-21T05:55:11+02:00")])
    times = read_frames_csv(path)
    assert list(times) == ["a.png", "b.png", "c.png"]
    assert times["a.png"] == T0 + 0.25
    assert times["b.png"] == pytest.approx(T0 + 0.333333, abs=1e-6)  # float64 at 1.8e9 s
    assert times["c.png"] == T0 + 1.0


@pytest.mark.parametrize("content, fragment", [
    ("name,time\na.png,2026-06-21T03:55:10Z\n", "file"),
    ("file,time_utc\na.png,2026-06-21 03:55\n", "line 2"),
    ("file,time_utc\na.png,2026-06-21T03:55:10\n", "line 2"),  # no zone
    ("file,time_utc\na.png,2026-02-30T03:55:10Z\n", "line 2"),
    ("file,time_utc\na.png,2026-06-21T03:55:10Z\na.png,2026-06-21T03:55:11Z\n", "repeats"),
    ("file,time_utc\n", "no rows"),
    ("", "empty"),
])
def test_read_frames_csv_malformed(tmp_path, content, fragment):
    path = tmp_path / "frames.csv"
    path.write_text(content)
    with pytest.raises(InputError, match=fragment) as info:
        read_frames_csv(path)
    assert "frames.csv" in str(info.value)


def test_stills_times_from_frames_csv_natural_order(tmp_path):
    names = ["f1.png", "f2.png", "f10.png"]  # natural order; plain sorting puts f10 second
    for name in names:
        _png(tmp_path / name, _flat(100))
    _csv(tmp_path, [(n, _iso(T0 + 0.5 * i)) for i, n in enumerate(names)])
    fs = open_frames(tmp_path)
    assert fs.kind == "stills" and fs.time_source == "frames.csv"
    assert [i.source for i in fs.infos] == names
    assert [i.index for i in fs.infos] == [0, 1, 2]
    assert [i.t_unix_s for i in fs.infos] == [T0, T0 + 0.5, T0 + 1.0]
    assert (fs.width, fs.height, fs.bit_depth, fs.chroma_subsampling) == (16, 12, 8, None)


# --- EXIF times --------------------------------------------------------------------------


def test_exif_times_subsec_and_offset(tmp_path):
    # local 20:55:10.05 at UTC-7 is 03:55:10.05 UTC the next day
    _exif_jpeg(tmp_path / "a.jpg", "2026:06:20 20:55:10", "05", "-07:00")
    _exif_jpeg(tmp_path / "b.jpg", "2026:06:20 20:55:10", "5", "-07:00")
    fs = open_frames(tmp_path)
    assert fs.time_source == "exif"
    assert fs.infos[0].t_unix_s == pytest.approx(T0 + 0.05, abs=1e-6)  # "05" is 0.05 s
    assert fs.infos[1].t_unix_s == pytest.approx(T0 + 0.5, abs=1e-6)  # "5" is 0.5 s
    assert fs.infos[0].exposure_s == pytest.approx(1 / 500)
    assert fs.infos[0].iso == 200


def test_exif_without_offset_needs_clock_offset(tmp_path):
    _exif_jpeg(tmp_path / "a.jpg", "2026:06:20 20:55:10", "25")
    with pytest.raises(InputError, match="clock_utc_offset_h") as info:
        open_frames(tmp_path)
    assert "a.jpg" in str(info.value) and "OffsetTimeOriginal" in str(info.value)
    fs = open_frames(tmp_path, clock_utc_offset_h=-7)
    assert fs.infos[0].t_unix_s == pytest.approx(T0 + 0.25, abs=1e-6)
    assert any("clock_utc_offset_h" in n for n in fs.notes)


def test_exif_offset_wins_over_clock_offset_and_frames_csv_wins_over_exif(tmp_path):
    _exif_jpeg(tmp_path / "a.jpg", "2026:06:20 20:55:10", None, "-07:00")
    fs = open_frames(tmp_path, clock_utc_offset_h=+3)
    assert fs.infos[0].t_unix_s == T0
    assert any("SubSecTimeOriginal" in n for n in fs.notes)
    _csv(tmp_path, [("a.jpg", "2026-06-21T03:55:12.500Z")])
    fs = open_frames(tmp_path)
    assert fs.time_source == "frames.csv" and fs.infos[0].t_unix_s == T0 + 2.5
    assert fs.infos[0].exposure_s == pytest.approx(1 / 500)  # EXIF still read


def test_stills_without_time_source(tmp_path):
    _png(tmp_path / "a.png", _flat(10))
    with pytest.raises(InputError, match="frames.csv") as info:
        open_frames(tmp_path)
    assert "a.png" in str(info.value) and "DateTimeOriginal" in str(info.value)


def test_exif_orientation_applied(tmp_path):
    rgb = np.zeros((16, 24, 3), np.uint8)
    rgb[:8, :8] = 255  # marker top-left as stored
    _exif_jpeg(tmp_path / "a.jpg", "2026:06:20 20:55:10", "0", "-07:00", orientation=6,
               rgb=rgb)
    fs = open_frames(tmp_path)
    assert (fs.width, fs.height) == (16, 24)
    (_, img), = list(iter_frames(fs))
    assert img.shape == (24, 16, 3)
    # orientation 6: the stored image must turn 90 deg clockwise; top-left goes top-right
    assert img[2, -3].min() > 0.8 and img[2, 2].max() < 0.1
    with Image.open(tmp_path / "a.jpg") as im:
        expected = srgb_to_linear(np.asarray(ImageOps.exif_transpose(im)) / 255.0)
    assert np.allclose(img, expected, atol=1e-6)


# --- reading pixels ----------------------------------------------------------------------


@pytest.mark.parametrize("suffix", [".png", ".tif"])
def test_16bit_read_at_full_depth(tmp_path, suffix):
    rgb = np.zeros((10, 14, 3), np.uint16)
    rgb[..., 0], rgb[..., 1], rgb[..., 2] = 40000, 1000, 65535
    _png(tmp_path / f"a{suffix}", rgb)
    _csv(tmp_path, [(f"a{suffix}", _iso(T0))])
    fs = open_frames(tmp_path)
    assert fs.bit_depth == 16
    (_, img), = list(iter_frames(fs))
    assert img.dtype == np.float32 and img.shape == (10, 14, 3)
    # 40000/65535 is not k/255 for any k, so an 8-bit path would miss it by > 1e-3
    expected = srgb_to_linear(np.array([40000, 1000, 65535]) / 65535.0)
    assert np.allclose(img[3, 4], expected, atol=1e-6, rtol=0)  # float32 rounding


def test_8bit_png_linearised_and_alpha_dropped(tmp_path):
    rgba = np.zeros((6, 8, 4), np.uint8)
    rgba[..., 0], rgba[..., 1], rgba[..., 2], rgba[..., 3] = 128, 64, 255, 17
    _png(tmp_path / "a.png", rgba)
    _csv(tmp_path, [("a.png", _iso(T0))])
    (_, img), = list(iter_frames(open_frames(tmp_path)))
    assert img.shape == (6, 8, 3)
    expected = srgb_to_linear(np.array([128, 64, 255]) / 255.0)
    assert np.allclose(img[0, 0], expected, atol=1e-6, rtol=0)


@pytest.mark.parametrize("subsampling, name", [(0, "4:4:4"), (1, "4:2:2"), (2, "4:2:0")])
def test_jpeg_chroma_subsampling_detected(tmp_path, subsampling, name):
    rng = np.random.default_rng(1)
    Image.fromarray(rng.integers(0, 255, (16, 16, 3), dtype=np.uint8)).save(
        tmp_path / "a.jpg", subsampling=subsampling)
    _csv(tmp_path, [("a.jpg", _iso(T0))])
    fs = open_frames(tmp_path)
    assert fs.chroma_subsampling == name
    assert any(name in n for n in fs.notes) == (name != "4:4:4")


def test_roi_crops_stills(tmp_path):
    rng = np.random.default_rng(2)
    rgb = rng.integers(0, 255, (20, 30, 3), dtype=np.uint8)
    _png(tmp_path / "a.png", rgb)
    _csv(tmp_path, [("a.png", _iso(T0))])
    fs = open_frames(tmp_path)
    (_, full), = list(iter_frames(fs))
    (_, part), = list(iter_frames(fs, roi=(3, 11, 5, 25)))
    assert part.shape == (8, 20, 3)
    assert np.array_equal(part, full[3:11, 5:25])
    with pytest.raises(ValueError, match="roi"):
        list(iter_frames(fs, roi=(0, 21, 0, 5)))


# --- video -------------------------------------------------------------------------------

VFR_PTS = [9000, 12000, 15500, 21000, 21500, 30000]  # 1/90000 s units, irregular, start 0.1 s


def test_video_variable_frame_rate_times_exact(tmp_path):
    _video(tmp_path / "clip.mp4", VFR_PTS)
    fs = open_frames(tmp_path, video_start_utc="2026-06-21T03:55:10Z")
    assert fs.kind == "video" and fs.time_source == "video pts + video_start_utc"
    assert fs.time_base == Fraction(1, 90000)
    assert [i.source for i in fs.infos] == [f"clip.mp4#{k}" for k in range(6)]
    # exact to the time base; 1e-6 s is float64 resolution at 1.8e9 s (~2.4e-7 s) x 4
    for info, pts in zip(fs.infos, VFR_PTS):
        assert info.t_unix_s == pytest.approx(T0 + pts / 90000, abs=1e-6)
    assert (fs.width, fs.height, fs.bit_depth) == (64, 48, 8)
    assert fs.chroma_subsampling == "4:2:0"
    assert any("4:2:0" in n for n in fs.notes)
    assert any("0.100000 s" in n for n in fs.notes)  # non-zero start kept and said
    decoded = list(iter_frames(fs))
    assert [info.index for info, _ in decoded] == list(range(6))
    assert all(img is not None and img.shape == (48, 64, 3) for _, img in decoded)
    # frame i was encoded flat at 40 + 20 i: decoded in presentation order, not decode order
    levels = [float(linear_to_srgb(img.mean()) * 255) for _, img in decoded]
    assert np.allclose(levels, [40 + 20 * i for i in range(6)], atol=3)


def test_video_start_as_posix_seconds_and_time_base_1_1000(tmp_path):
    _video(tmp_path / "clip.mov", [0, 33, 70, 100], time_base=Fraction(1, 1000))
    fs = open_frames(tmp_path, video_start_utc=T0)
    assert [i.t_unix_s - T0 for i in fs.infos] == pytest.approx([0, 0.033, 0.070, 0.100],
                                                                abs=1e-6)


def test_video_creation_time_fallback(tmp_path):
    _video(tmp_path / "clip.mp4", [0, 3000, 6000], creation_time="2026-06-21T03:55:10Z")
    fs = open_frames(tmp_path)
    assert fs.time_source == "video pts + creation_time"
    assert fs.infos[1].t_unix_s == pytest.approx(T0 + 3000 / 90000, abs=1e-6)
    assert any("whole seconds" in n for n in fs.notes)
    fs = open_frames(tmp_path, video_start_utc=T0 + 100)  # the given start wins
    assert fs.infos[0].t_unix_s == T0 + 100


def test_video_without_any_time_source(tmp_path):
    _video(tmp_path / "clip.mp4", [0, 3000])
    with pytest.raises(InputError, match="video_start_utc") as info:
        open_frames(tmp_path)
    assert "clip.mp4" in str(info.value) and "creation_time" in str(info.value)


def test_video_frames_csv(tmp_path):
    _video(tmp_path / "clip.mp4", [0, 3000, 6000])
    _csv(tmp_path, [(f"clip.mp4#{k}", _iso(T0 + k)) for k in range(3)])
    fs = open_frames(tmp_path)
    assert fs.time_source == "frames.csv"
    assert [i.t_unix_s for i in fs.infos] == [T0, T0 + 1, T0 + 2]
    _csv(tmp_path, [(f"clip.mp4#{k}", _iso(T0 + k)) for k in range(2)])
    with pytest.raises(InputError, match="clip.mp4#2"):
        open_frames(tmp_path)


def test_video_rotation_applied(tmp_path):
    rgb = np.zeros((48, 64, 3), np.uint8)
    rgb[:16, :16] = 255  # marker top-left as stored
    _video(tmp_path / "clip.mp4", [0, 3000], rotation=90, frames=[rgb, rgb])
    fs = open_frames(tmp_path, video_start_utc=T0)
    assert fs.rotation_deg == 90 and (fs.width, fs.height) == (48, 64)
    assert any("rotation" in n for n in fs.notes)
    _, img = next(iter(iter_frames(fs)))
    assert img.shape == (64, 48, 3)
    # 90 deg counter-clockwise for display: the top-left corner goes to the bottom-left
    assert img[-4, 4].min() > 0.8 and img[4, 4].max() < 0.1
    _, part = next(iter(iter_frames(fs, roi=(40, 64, 0, 20))))
    assert np.array_equal(part, img[40:64, 0:20])


def test_video_10bit_read_as_16bit(tmp_path):
    _video(tmp_path / "clip.mkv", [0, 40], time_base=Fraction(1, 1000),
           pix_fmt="yuv420p10le")
    fs = open_frames(tmp_path, video_start_utc=T0)
    assert fs.bit_depth == 16 and fs.chroma_subsampling == "4:2:0"
    levels = [float(linear_to_srgb(img.mean()) * 255) for _, img in iter_frames(fs)]
    assert np.allclose(levels, [40, 60], atol=3)


def test_video_unreadable(tmp_path):
    path = _video(tmp_path / "clip.mp4", [0, 3000, 6000])
    path.write_bytes(path.read_bytes()[:200])
    with pytest.raises(InputError, match="clip.mp4"):
        open_frames(tmp_path, video_start_utc=T0)


# --- errors ------------------------------------------------------------------------------


def test_folder_missing_not_a_folder_and_empty(tmp_path):
    with pytest.raises(InputError, match="does not exist") as info:
        open_frames(tmp_path / "nowhere")
    assert "nowhere" in str(info.value)
    (tmp_path / "file.txt").write_text("x")
    with pytest.raises(InputError, match="not a folder"):
        open_frames(tmp_path / "file.txt")
    (tmp_path / "empty").mkdir()
    (tmp_path / "empty" / "observation.toml").write_text("")
    with pytest.raises(InputError, match="no frames") as info:
        open_frames(tmp_path / "empty")
    assert "empty" in str(info.value)


def test_mixed_stills_and_video_and_two_videos(tmp_path):
    _video(tmp_path / "clip.mp4", [0, 3000])
    _png(tmp_path / "a.png", _flat(1))
    with pytest.raises(InputError, match="mixes") as info:
        open_frames(tmp_path)
    assert "clip.mp4" in str(info.value)
    (tmp_path / "a.png").unlink()
    _video(tmp_path / "other.MOV", [0, 3000])
    with pytest.raises(InputError, match="more than one video") as info:
        open_frames(tmp_path)
    assert "clip.mp4" in str(info.value) and "other.MOV" in str(info.value)


def test_frames_csv_names_missing_file_or_lacks_one(tmp_path):
    _png(tmp_path / "a.png", _flat(1))
    _png(tmp_path / "b.png", _flat(2))
    _csv(tmp_path, [("a.png", _iso(T0)), ("b.png", _iso(T0 + 1)), ("c.png", _iso(T0 + 2))])
    with pytest.raises(InputError, match="c.png"):
        open_frames(tmp_path)
    _csv(tmp_path, [("a.png", _iso(T0))])
    with pytest.raises(InputError, match="b.png") as info:
        open_frames(tmp_path)
    assert "frames.csv" in str(info.value)


@pytest.mark.parametrize("second_offset_s, word", [(-0.5, "earlier"), (0.0, "repeats")])
def test_times_backwards_or_repeating_name_both(tmp_path, second_offset_s, word):
    _png(tmp_path / "a.png", _flat(1))
    _png(tmp_path / "b.png", _flat(2))
    _csv(tmp_path, [("a.png", _iso(T0)), ("b.png", _iso(T0 + second_offset_s))])
    with pytest.raises(InputError, match=word) as info:
        open_frames(tmp_path)
    assert "a.png" in str(info.value) and "b.png" in str(info.value)


def test_repeating_exif_times_name_both(tmp_path):
    for name in ("a.jpg", "b.jpg"):
        _exif_jpeg(tmp_path / name, "2026:06:20 20:55:10", None, "-07:00")
    with pytest.raises(InputError, match="repeats") as info:
        open_frames(tmp_path)
    assert "a.jpg" in str(info.value) and "b.jpg" in str(info.value)


def test_unreadable_and_greyscale_images(tmp_path):
    _png(tmp_path / "a.png", _flat(1))
    (tmp_path / "b.png").write_bytes(b"\x89PNG\r\n\x1a\nnot really a png")
    with pytest.raises(InputError, match="b.png"):
        open_frames(tmp_path)
    cv2.imwrite(str(tmp_path / "b.png"), np.zeros((12, 16), np.uint8))
    with pytest.raises(InputError, match="colour") as info:
        open_frames(tmp_path)
    assert "b.png" in str(info.value)


def test_stills_of_differing_sizes(tmp_path):
    _png(tmp_path / "a.png", _flat(1, (12, 16)))
    _png(tmp_path / "b.png", _flat(1, (12, 18)))
    with pytest.raises(InputError, match="one size") as info:
        open_frames(tmp_path)
    assert "a.png" in str(info.value) and "b.png" in str(info.value)


def test_truncated_images(tmp_path):
    rng = np.random.default_rng(3)
    noise = rng.integers(0, 255, (120, 160, 3), dtype=np.uint8)
    _png(tmp_path / "a.png", noise)
    data = (tmp_path / "a.png").read_bytes()
    (tmp_path / "a.png").write_bytes(data[: len(data) // 2])
    _csv(tmp_path, [("a.png", _iso(T0))])
    with pytest.raises(InputError, match="truncated") as info:  # PNG: seen from its end
        open_frames(tmp_path)
    assert "a.png" in str(info.value)
    (tmp_path / "a.png").unlink()
    for i, name in enumerate(("a.jpg", "b.jpg", "c.jpg")):
        Image.fromarray(noise).save(tmp_path / name, quality=90)
    data = (tmp_path / "b.jpg").read_bytes()
    (tmp_path / "b.jpg").write_bytes(data[: len(data) // 2])
    _csv(tmp_path, [(n, _iso(T0 + i)) for i, n in enumerate(("a.jpg", "b.jpg", "c.jpg"))])
    fs = open_frames(tmp_path)  # JPEG truncation shows only on decoding
    with pytest.raises(InputError, match="truncated") as info:
        list(iter_frames(fs))
    assert "b.jpg" in str(info.value)
    got = [(info.source, img is None) for info, img in iter_frames(fs, on_error="skip")]
    assert got == [("a.jpg", False), ("b.jpg", True), ("c.jpg", False)]


def _png_header_only(path: Path, width: int, height: int) -> Path:
    """A PNG whose header claims width x height RGB, with a few bytes of image data."""
    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF))
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    body = chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 64)) + chunk(b"IEND", b"")
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + body)
    return path


@pytest.mark.parametrize("side", [9000, 20000])  # 81 MP: our limit; 400 MP: Pillow's too
def test_image_bomb_refused_from_header(tmp_path, side):
    _png(tmp_path / "a.png", _flat(1))
    _png_header_only(tmp_path / "b.png", side, side)
    _csv(tmp_path, [("a.png", _iso(T0)), ("b.png", _iso(T0 + 1))])
    start = time.perf_counter()
    with pytest.raises(InputError, match="b.png") as info:
        open_frames(tmp_path)
    assert time.perf_counter() - start < 1.0  # decoding 81-400 MP would take far longer
    assert "large" in str(info.value) or "limit" in str(info.value)
    assert "truncated" not in str(info.value)  # refused from the header, not by decoding
    (tmp_path / "b.png").unlink()
    _csv(tmp_path, [("a.png", _iso(T0))])
    with pytest.raises(InputError, match="limit of 100"):
        open_frames(tmp_path, max_pixels=100)  # the 16 x 12 still is 192 pixels


def test_folder_is_not_written(tmp_path):
    _stills_with_csv(tmp_path / "sunset", 3)
    (tmp_path / "video").mkdir()
    _video(tmp_path / "video" / "clip.mp4", [0, 3000])
    for folder in (tmp_path / "sunset", tmp_path / "video"):
        before = {p.name: (p.stat().st_mtime_ns, p.stat().st_size) for p in folder.iterdir()}
        fs = open_frames(folder, video_start_utc=T0)
        list(iter_frames(fs))
        after = {p.name: (p.stat().st_mtime_ns, p.stat().st_size) for p in folder.iterdir()}
        assert after == before


# --- memory ------------------------------------------------------------------------------


def _peak_bytes(fs: FrameSet, n: int) -> int:
    gc.collect()
    tracemalloc.start()
    try:
        for k, (_, img) in enumerate(iter_frames(fs)):
            assert img is not None
            if k + 1 == n:
                break
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_memory_flat_in_number_of_frames(tmp_path):
    _stills_with_csv(tmp_path, 40, size=(96, 128))  # 147 kB per float32 frame
    fs = open_frames(tmp_path)
    peak_10, peak_40 = _peak_bytes(fs, 10), _peak_bytes(fs, 40)
    # keeping frames would add 30 x 147 kB = 4.4 MB; allow 1 frame of slack
    assert peak_40 - peak_10 < 96 * 128 * 3 * 4


@pytest.mark.parametrize("kind", ["stills", "video"])
def test_frames_are_not_kept(tmp_path, kind):
    if kind == "stills":
        _stills_with_csv(tmp_path, 6)
    else:
        _video(tmp_path / "clip.mp4", VFR_PTS)
    fs = open_frames(tmp_path, video_start_utc=T0)
    refs = []
    for _, img in iter_frames(fs):
        refs.append(weakref.ref(img))
        del img
        assert all(r() is None for r in refs)  # earlier frames were freed
    assert len(refs) == 6


def test_video_frame_corrupt_mid_stream(tmp_path):
    rng = np.random.default_rng(0)
    frames = [rng.integers(0, 255, (48, 64, 3), dtype=np.uint8) for _ in range(20)]
    path = _video(tmp_path / "clip.mp4", [3000 * i for i in range(20)], frames=frames)
    data = bytearray(path.read_bytes())
    start = data.find(b"mdat") + len(data) // 3  # scramble 3 kB in the middle of the frames
    data[start:start + 3000] = bytes((7 * b + 13) % 256 for b in data[start:start + 3000])
    path.write_bytes(bytes(data))
    fs = open_frames(tmp_path, video_start_utc=T0)  # packets and their times are intact
    assert len(fs.infos) == 20
    with pytest.raises(InputError, match=r"clip\.mp4#\d+"):
        list(iter_frames(fs))
    got = [(info.index, img is None) for info, img in iter_frames(fs, on_error="skip")]
    assert [k for k, _ in got] == list(range(20))  # every frame accounted for, in order
    assert not got[0][1] and 0 < sum(bad for _, bad in got) < 20
    with pytest.raises(ValueError, match="on_error"):
        next(iter_frames(fs, on_error="ignore"))


# --- colour matrix -----------------------------------------------------------------------


def _matrix_clip(folder: Path, rows: int, encode_space: str, tag: int | None,
                 colour: tuple[int, int, int] = (200, 60, 20), trc: int | None = None,
                 ten_bit: bool = False) -> Path:
    """One-frame H.264 clip of one colour (a deep red; 8-bit codes, or 16-bit with
    ``ten_bit``, stored as 10-bit), converted to YUV with ``encode_space``, its header's
    matrix_coefficients (and colour primaries) set to ``tag`` and its
    transfer_characteristics to ``trc`` (None: untagged)."""
    folder.mkdir()
    pix_fmt, rgb_fmt, dtype = (("yuv420p10le", "rgb48le", np.uint16) if ten_bit
                               else ("yuv420p", "rgb24", np.uint8))
    container = av.open(str(folder / "clip.mp4"), "w")
    stream = container.add_stream("libx264", rate=30)
    stream.height, stream.width = rows, 16 * rows // 9
    stream.pix_fmt = pix_fmt
    if tag is not None:
        stream.codec_context.colorspace = tag
        if ten_bit:
            stream.codec_context.color_primaries = tag
    if trc is not None:
        stream.codec_context.color_trc = trc
    rgb = np.zeros((rows, 16 * rows // 9, 3), dtype)
    rgb[:] = colour
    frame = av.VideoFrame.from_ndarray(rgb, format=rgb_fmt).reformat(
        format=pix_fmt, src_colorspace=encode_space, dst_colorspace=encode_space)
    frame.pts = 0
    for packet in list(stream.encode(frame)) + list(stream.encode()):
        container.mux(packet)
    container.close()
    return folder


@pytest.mark.parametrize("rows, space, tag, name, tagged", [
    (720, "ITU709", None, "BT.709", False),  # untagged HD: BT.709 (HD_ROWS)
    (360, "ITU601", None, "BT.601", False),  # untagged SD: BT.601
    (720, "ITU601", 6, "BT.601", True),  # the header's SMPTE 170M wins over the size
    (360, "ITU709", 1, "BT.709", True),
])
def test_video_decoded_with_its_colour_matrix(tmp_path, rows, space, tag, name, tagged):
    # The matrices are those of ITU-R BT.709-6 (item 3.2) and BT.601-7 (section 2.5.1);
    # H.273 (2016) table 4 numbers them 1 and 5/6. Decoded with the encoder's matrix, the
    # colour comes back within the 8-bit and 4:2:0 rounding (2 codes); with the other one
    # the red would be 12 codes off (measured with FFmpeg's converter).
    fs = open_frames(_matrix_clip(tmp_path / "v", rows, space, tag), video_start_utc=T0)
    assert fs.colour_matrix == name
    assert any("does not name its colour matrix" in n for n in fs.notes) == (not tagged)
    _, img = next(iter(iter_frames(fs)))
    codes = linear_to_srgb(img[rows // 2, rows // 2].astype(float)) * 255
    assert np.allclose(codes, [200, 60, 20], atol=2.5)


def test_stills_colour_matrix(tmp_path):
    # JPEG's YCbCr is BT.601's (JFIF 1.02, Hamilton 1992); PNG stores RGB.
    for sub, name in (("j", "f1.jpg"), ("p", "f1.png")):
        (tmp_path / sub).mkdir()
        Image.fromarray(_flat(100)).save(tmp_path / sub / name)
        _csv(tmp_path / sub, [(name, _iso(T0))])
    assert open_frames(tmp_path / "j").colour_matrix == "BT.601"
    assert open_frames(tmp_path / "p").colour_matrix is None


@pytest.mark.parametrize("trc, name, decode", [
    (1, "BT.709", lambda v: np.where(v < 0.081, v / 4.5, ((v + 0.099) / 1.099) ** (1 / 0.45))),
    (13, "sRGB", srgb_to_linear),
    (None, "sRGB", srgb_to_linear),
])
def test_video_linearised_with_its_transfer(tmp_path, trc, name, decode):
    # Code 128 of 255 is 0.26 of full light through BT.709's OETF inverted (ITU-R BT.709-6
    # item 1.2) and 0.22 through sRGB's decoding (IEC 61966-2-1): the header's transfer
    # characteristics (H.273 table 3: 1 BT.709, 13 sRGB) decide; untagged is sRGB.
    fs = open_frames(_matrix_clip(tmp_path / "v", 360, "ITU601", 6, (128, 128, 128), trc),
                     video_start_utc=T0)
    assert fs.transfer == name
    assert any("transfer function" in n for n in fs.notes) == (trc != 13)
    _, img = next(iter(iter_frames(fs)))
    assert float(img[180, 320, 1]) == pytest.approx(float(decode(128 / 255)), rel=0.01)


def test_hlg_bt2020_ten_bit_video(tmp_path):
    # Phones' HDR video: 10-bit, BT.2020 matrix (H.273 code 9), HLG transfer (code 18).
    # A colour stored as R'G'B' codes (40000, 30000, 20000) / 65535 decodes to the HLG
    # OETF's inverse of those codes (ITU-R BT.2100-2 table 5), within 1 % (10-bit and
    # 4:2:0 rounding).
    from analyse._transfer import hlg_to_linear

    codes = np.array([40000, 30000, 20000])
    folder = _matrix_clip(tmp_path / "v", 360, "BT2020", 9, tuple(codes), 18, ten_bit=True)
    fs = open_frames(folder, video_start_utc=T0)
    assert (fs.colour_matrix, fs.transfer, fs.bit_depth) == ("BT.2020", "HLG", 16)
    _, img = next(iter(iter_frames(fs)))
    np.testing.assert_allclose(img[180, 320], hlg_to_linear(codes / 65535), rtol=0.01)
