"""Tests for analyse.pipeline's frame loop: the same table as the loop first written, flat
memory; and the read-ahead thread of analyse.frames.iter_frames that it uses.

The reference is computed here as the loop was first written: every frame read in the
caller's thread and measured whole by ``_measure_frame`` (Sun, horizon, limbs), the
horizon's colour offsets on every frame with a horizon, the strip cut from the frame.
"""

from __future__ import annotations

import csv
import dataclasses
import gc
import shutil
import threading
import tracemalloc
from pathlib import Path

import cv2
import numpy as np
import pytest

from analyse import pipeline as pl
from analyse.errors import InputError
from analyse.frames import iter_frames, open_frames
from analyse.horizon_colour import horizon_colour_offsets
from analyse.measure import CHANNELS
from analyse.writers import VideoWriter, run_simulate

# A short simulated sunset, small frames: the disc (about 236 px wide at 8 arcsec/px)
# sinks from well above the horizon through a thin segment to below it, with glitter,
# lateral colour and shake. Sparse frames while it sinks, denser at the end.
SCENARIO = """\
[site]
latitude_deg = 35.2
longitude_deg = -20.4
eye_height_m = 10.0

[time]
date = "2026-06-21"
last_seconds = 30.0
after_seconds = 2.5

[[time.burst]]
start_s = 0.0
count = 8
fps = 0.4

[[time.burst]]
start_s = 28.0
count = 13
fps = 3.0

[camera]
width_px = 400
height_px = 240
plate_scale_arcsec_per_px = 8.0
horizon_row_px = 170.0
psf_sigma_px = 0.9
channel_offset_px = { r = [0.3, 0.0], b = [-0.3, 0.2] }
shake_px = 0.3

[scene]
glitter = true
glitter_level = 0.2

[output]
format = "png"
seed = 3
"""


@pytest.fixture(scope="module")
def sunset(tmp_path_factory) -> Path:
    """The simulated sunset folder (PNG stills and frames.csv), 21 frames."""
    work = tmp_path_factory.mktemp("pipeline")
    (work / "scenario.toml").write_text(SCENARIO, encoding="utf-8")
    run_simulate(work / "scenario.toml", work / "sunset", quiet=True)
    return work / "sunset"


def _reference(fs):
    """Rows (line, limbs in frame columns, flags), colour offsets and strip crops, one
    frame after another as the loop was first written."""
    rows, colour, strip = [], {"r": [], "b": []}, []
    prior = sun_prior = previous = None
    after_dark = 0
    for info, img in iter_frames(fs, on_error="skip"):
        line, sun, limbs, flags, box = pl._measure_frame(img, prior, sun_prior, previous)
        previous = limbs or previous  # the fits start from the last frame's blurs
        if box is not None:
            limbs = {c: dataclasses.replace(lm, apex_x_px=lm.apex_x_px + box[2])
                     for c, lm in limbs.items()}
        rows.append((line, limbs, flags))
        if line.found:
            prior = line
            offs = horizon_colour_offsets(img, line, exclude_x=(
                sun.x_px - 1.3 * sun.radius_px - 10, sun.x_px + 1.3 * sun.radius_px + 10)
                if sun.found else None)
            for c in colour:
                if np.isfinite(offs[c]):
                    colour[c].append(offs[c])
        if sun.found:
            sun_prior = sun
        after_dark = 0 if any(lm.visible for lm in limbs.values()) else after_dark + 1
        g = limbs.get("g")
        if box is not None and after_dark <= 3 and np.isfinite(g.apex_x_px):
            xc = int(round(g.apex_x_px))
            yc = int(round(float(line.row_at(np.array([float(xc)]))[0])))
            if yc - 48 >= 0 and xc - 90 >= 0 and yc + 16 <= img.shape[0] and (
                    xc + 90 <= img.shape[1]):
                strip.append((info.index, img[yc - 48:yc + 16, xc - 90:xc + 90]))
    return rows, colour, strip[-pl._STRIP_KEEP:]


@pytest.fixture(scope="module")
def reference(sunset):
    return _reference(open_frames(sunset))


def _same(a: float, b: float) -> bool:
    return (np.isnan(a) and np.isnan(b)) or abs(a - b) <= 1e-9 * max(1.0, abs(a))


@pytest.mark.parametrize("prefetch,parallel", [(0, False), (2, False), (1, True)])
def test_loop_gives_the_reference_table(sunset, reference, prefetch, parallel):
    # With or without the read-ahead thread, with the limbs measured here or in a worker
    # process: the same computations on the same pixels in the same order, so the same
    # numbers (1e-9 allows for nothing but rounding).
    fs = open_frames(sunset)
    rows, colour, strip = reference
    assert sum(bool(limbs) and limbs["g"].visible for _, limbs, _ in rows) >= 10
    assert any(not limbs or not limbs["g"].visible for _, limbs, _ in rows)  # after sunset
    res = pl._measure_frames(fs, lambda: None, colour_stride=1, prefetch=prefetch,
                             parallel=parallel)
    table = res.cols.table()
    assert len(table) == len(rows) == len(fs.infos)
    for i, (line, limbs, flags) in enumerate(rows):
        assert table.flags[i] == tuple(flags)
        assert table.horizon_found[i] == line.found
        assert _same(table.horizon_row_px[i], line.row_px if line.found else np.nan)
        assert _same(table.roll_deg[i], line.roll_deg if line.found else np.nan)
        for c in CHANNELS:
            lm = limbs.get(c)
            assert table.visible[c][i] == (lm is not None and lm.visible)
            for key in ("apex_height_px", "apex_height_err_px", "apex_x_px", "width_px",
                        "flux", "flux_err", "edge_sigma_px"):
                want = getattr(lm, key) if lm is not None else np.nan
                assert _same(getattr(table, key)[c][i], want), (i, c, key)
    for c in colour:
        np.testing.assert_allclose(res.colour_dy[c], colour[c], rtol=1e-9, atol=1e-12)
    assert [s.index for s in res.strip] == [k for k, _ in strip]
    for s, (_, crop) in zip(res.strip, strip):
        np.testing.assert_array_equal(s.crop, crop.astype(np.float16))


def test_colour_offsets_on_every_kth_frame(sunset, reference):
    fs = open_frames(sunset)
    third = pl._measure_frames(fs, lambda: None, colour_stride=3)
    np.testing.assert_allclose(third.colour_dy["r"], reference[1]["r"][::3], rtol=1e-9)
    # Every frame of a short recording, every 10th of a long one, and at least
    # _COLOUR_SAMPLES samples in between.
    assert pl._colour_stride(len(fs.infos)) == 1
    assert pl._colour_stride(100_000) == pl._COLOUR_STRIDE_MAX
    n = 7 * pl._COLOUR_SAMPLES
    assert n // pl._colour_stride(n) >= pl._COLOUR_SAMPLES


def _repeated(src: Path, dst: Path, n: int, times: int) -> Path:
    """A stills folder holding the first ``n`` frames of ``src`` ``times`` times over, a
    second apart: the same content, ``times`` times as long."""
    dst.mkdir()
    with open(src / "frames.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))[1:n + 1]
    out = [["file", "time_utc"]]
    for k in range(times):
        for i, (name, _) in enumerate(rows):
            shutil.copy(src / name, dst / f"f{k * n + i:03d}.png")
            out.append([f"f{k * n + i:03d}.png", f"2026-06-21T20:00:00.{k * n + i:03d}Z"])
    with open(dst / "frames.csv", "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh).writerows(out)
    return dst


def _peak_bytes(folder: Path) -> int:
    fs = open_frames(folder)
    gc.collect()
    tracemalloc.start()
    try:
        pl._measure_frames(fs, lambda: None)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_memory_flat_in_the_recording_length(sunset, tmp_path):
    short = _repeated(sunset, tmp_path / "short", 5, 1)
    long = _repeated(sunset, tmp_path / "long", 5, 3)
    _peak_bytes(short)  # once before: cached tables of the limb model
    peak_n, peak_3n = _peak_bytes(short), _peak_bytes(long)
    # Keeping the frames would add 10 x 1.15 MB (400 x 240 x 3 float32) to a peak of a
    # few MB; 20 % is the allowance (common practice, no source).
    assert peak_3n < 1.2 * peak_n, (peak_n, peak_3n)


# --- iter_frames(prefetch=...) --------------------------------------------------------


def _clip(path: Path, n: int) -> Path:
    """A small H.264 clip of noise frames, 1/30 s apart, written by the project's writer."""
    writer = VideoWriter(path, 64, 48, start_unix_s=0.0)
    rng = np.random.default_rng(1)
    for i in range(n):
        writer.add_at(rng.integers(0, 256, (48, 64, 3), dtype=np.uint8), 3000 * i)
    writer.close()
    return path


def test_prefetch_yields_the_same_frames(tmp_path):
    _clip(tmp_path / "clip.mp4", 12)
    fs = open_frames(tmp_path, video_start_utc=0.0)
    plain = list(iter_frames(fs))
    ahead = list(iter_frames(fs, prefetch=3))
    assert [i.index for i, _ in ahead] == [i.index for i, _ in plain] == list(range(12))
    for (_, a), (_, b) in zip(plain, ahead):
        np.testing.assert_array_equal(a, b)


def test_prefetch_stops_early_and_raises_in_order(tmp_path):
    _clip(tmp_path / "clip.mp4", 12)
    frames = iter_frames(open_frames(tmp_path, video_start_utc=0.0), prefetch=2)
    next(frames)
    frames.close()  # the thread is stopped and joined
    assert not [t for t in threading.enumerate() if t.name == "limbtrace-decode"]
    stills = tmp_path / "stills"
    stills.mkdir()
    rows = [["file", "time_utc"]]
    for i in range(5):
        cv2.imwrite(str(stills / f"f{i}.png"), np.full((16, 24, 3), 40 * i, np.uint8))
        rows.append([f"f{i}.png", f"2026-06-21T20:00:0{i}.000Z"])
    with open(stills / "frames.csv", "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh).writerows(rows)
    fs = open_frames(stills)
    (stills / "f2.png").write_bytes((stills / "f2.png").read_bytes()[:40])  # truncated
    got = []
    with pytest.raises(InputError, match="f2.png"):
        for info, _ in iter_frames(fs, prefetch=2):
            got.append(info.source)
    assert got == ["f0.png", "f1.png"]
    with pytest.raises(ValueError, match="prefetch"):
        next(iter_frames(fs, prefetch=-1))


def test_chroma_leak_weights_follow_the_decoding_matrix():
    # The 4:2:0 leak is predicted with the luma weights of the matrix the video was
    # decoded with: ITU-R BT.709-6 item 3.2 (0.2126, 0.7152, 0.0722) and BT.601-7
    # section 2.5.1 (0.299, 0.587, 0.114); JPEG stills and other matrices are left alone.
    from types import SimpleNamespace

    from analyse.pipeline import _chroma_luma

    def fs(kind, sub, matrix):
        return SimpleNamespace(kind=kind, chroma_subsampling=sub, colour_matrix=matrix)

    assert _chroma_luma(fs("video", "4:2:0", "BT.709")) == pytest.approx((0.2126, 0.7152, 0.0722))
    assert _chroma_luma(fs("video", "4:2:0", "BT.601")) == pytest.approx((0.299, 0.587, 0.114))
    assert _chroma_luma(fs("video", "4:2:0", "BT.2020")) is None
    assert _chroma_luma(fs("video", "4:4:4", "BT.709")) is None
    assert _chroma_luma(fs("stills", "4:2:0", "BT.601")) is None


def test_a_first_guess_that_jumps_and_changes_size_is_not_the_sun():
    # Seen on an H.264 recording after sunset: the smooth sky glow at the top of the
    # frame (radius ~280 px) was taken for the Sun that had just set on the horizon
    # (radius ~18 px), and its "flux" kept last light from being found. A Sun may move
    # (re-aimed camera) or shrink (setting) between frames, not both at once (the rule
    # is a judgement, no source).
    from analyse.limb import SunLocation
    from analyse.pipeline import _same_sun

    setting = SunLocation(True, 960.0, 698.0, 18.0, "")
    glow = SunLocation(True, 930.0, 15.0, 282.0, "")
    assert not _same_sun(glow, setting)
    assert _same_sun(SunLocation(True, 400.0, 300.0, 20.0, ""), setting)  # re-aimed
    assert _same_sun(SunLocation(True, 962.0, 700.0, 150.0, ""), setting)  # in place
    assert _same_sun(glow, None) and _same_sun(glow, SunLocation(False, *[np.nan] * 3, "x"))
