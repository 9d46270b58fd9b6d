#!/usr/bin/env python3
"""Benchmark the measuring stage on 1080p, 30 fps H.264 recordings; prints, never asserts.

Targets (issue 4): the analysis (``analyse.pipeline.measure_folder``) runs at no less than
0.8x the throughput of plainly decoding the same file to RGB with PyAV in the same run;
its peak memory stays under 600 MB and does not grow with the recording's length
(20 s against 60 s).

The recordings (made once, or reused with ``--workdir``):

- A scenario (written here into the work folder) puts the Sun near a sea horizon at
  5 arcsec/px, so its disc is about 380 px wide on 1920 x 1080 frames; its time window
  is the last 59 s before green last light plus 1 s after it: the disc sinks and sets.
- ``limbtrace simulate`` costs about 0.3-0.4 s a frame at 1080p on this machine, too
  slow for 2400 frames, so the scenario's frames are rendered by the simulator
  (``analyse.simulate``) at 5 frames/s only. The 30 fps video is made from them with
  PyAV: each video frame is the linear blend (in stored values) of the two key frames
  around its time, plus fresh Gaussian noise of ``--noise-dn`` code values (the blend
  repeats the keys' own noise; real footage has new noise in every frame, which sets its
  bitrate and so the decoder's cost), encoded by libx264 as ``limbtrace simulate`` does
  (4:2:0, BT.709, presentation times in 1/90000 s) at ``--crf``.
- ``bench60/sunset.mp4`` holds all 60 s (1800 frames), ``bench20/sunset.mp4`` the last
  20 s (600 frames, its first frame 40 s after the video's time origin, which the reader
  keeps). Both folders share the simulator's observation.toml.

Each measurement runs in a fresh child process. Its peak memory is the larger of its
resident set's high-water mark (VmHWM; not ``ru_maxrss``, which a child inherits from a
larger parent) and the largest sum of the resident sets of it and any processes it
starts (sampled every 0.05 s from /proc); imports included:
(a) decoding every frame with PyAV (``thread_type="AUTO"``, as ``analyse.frames`` reads)
to ``frame.to_ndarray(format="rgb24")``; (b) ``measure_folder`` on the folder (the per-
sequence observables included, after the frame loop). The children of one recording
run one after the other, so they see the same load on the machine.

    .venv/bin/python scripts/bench_measure.py                      # all (about 20 min)
    .venv/bin/python scripts/bench_measure.py --workdir /tmp/bm    # keep/reuse recordings
    .venv/bin/python scripts/bench_measure.py --only 20            # the 20 s one only

Measured here (2026-12, 2 cores shared with other work, load 1-4): the recordings come
out at 2.6-2.7 Mbit/s (a dark sky; cameras write 10-30 Mbit/s, which costs the decoder
more) and decode at 135-190 frames/s (5-7 ms a frame, 7-9.5 ms of CPU). The analysis's
own reader (decoding and linearising to float, before any measuring) reaches 0.56-0.75
of that. First version: measuring at 3.5-4.6 frames/s (ratio 0.03-0.06), about 90 % of
it in :func:`analyse.limb.measure_limbs`, peak memory 348 MB (20 s) and 354 MB (60 s).
With the limb fits about 3x cheaper and in a worker process: 8-12 frames/s at load 0.6-2
(ratio 0.06), 5.6 frames/s for the 60 s recording while other tests ran (0.03); peak
500 MB (20 s) and 503 MB (60 s). The target of 0.8 would leave under 2 ms of CPU a frame
for everything after decoding; see DEVELOPERS.md, "Known gaps". The printed green
duration is not a check of accuracy: the video's frames are blends of key frames 0.2 s
apart, whose fading near last light is not a sunset's.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
TARGET_RATIO = 0.8  # analysis / decoding throughput (issue 4)
TARGET_PEAK_MB = 600.0  # peak resident memory of the analysis (issue 4)
KEY_FPS = 5  # rendered frames per second
VIDEO_FPS = 30  # frames per second of the video
LENGTH_S = 60  # the long recording [s]; the short one is its last 20 s
SHORT_S = 20

SCENARIO = """\
# Benchmark scenario of scripts/bench_measure.py: 1080p, the Sun about 380 px wide.
[site]
name = "Benchmark shore"
latitude_deg = 35.2
longitude_deg = -20.4
eye_height_m = 12.0

[air]
temperature_C = 16.0
pressure_hPa = 1015.0
relative_humidity = 0.7

[time]
date = "2026-06-21"
last_seconds = {last:.1f}
after_seconds = 1.0
fps = {fps:.1f}

[camera]
width_px = 1920
height_px = 1080
plate_scale_arcsec_per_px = {scale}
horizon_row_px = 700.0
psf_sigma_px = 0.9
exposure = "locked"
exposure_level = 0.7
channel_offset_px = {{ r = [0.3, 0.0], b = [-0.3, 0.1] }}
shake_px = 0.3

[scene]
sky_level = 0.03
sea_level = 0.3
glitter = true
glitter_level = 0.2

[output]
format = "h264"
seed = 4
"""


# --- the recordings ---------------------------------------------------------------------


def make_recordings(work: Path, scale: float, noise_dn: float, crf: int, preset: str
                    ) -> dict[int, Path]:
    """Render the key frames and write the 60 s and 20 s video folders (module docstring)."""
    import numpy as np

    from analyse.scenario import read_scenario
    from analyse.simulate import iter_frames, prepare_simulation
    from analyse.writers import VIDEO_NAME, VIDEO_TIME_BASE, VideoWriter, observation_toml

    folders = {LENGTH_S: work / f"bench{LENGTH_S}", SHORT_S: work / f"bench{SHORT_S}"}
    if all((f / VIDEO_NAME).is_file() for f in folders.values()):
        print(f"recordings: reusing {work}")
        return folders
    scenario_path = work / "bench_scenario.toml"
    scenario_path.write_text(SCENARIO.format(last=LENGTH_S - 1.0, fps=KEY_FPS, scale=scale),
                             encoding="utf-8")
    start = time.perf_counter()
    sim = prepare_simulation(read_scenario(scenario_path))
    keys = sim.frame_times_unix_s
    n_video = LENGTH_S * VIDEO_FPS
    per_key = VIDEO_FPS // KEY_FPS
    if keys.size < n_video // per_key + 1:
        raise SystemExit(f"the scenario gave {keys.size} key frames, expected "
                         f"{n_video // per_key + 1}")
    for f in folders.values():
        f.mkdir(parents=True, exist_ok=True)
        (f / "observation.toml").write_text(observation_toml(sim, "none"), encoding="utf-8")
    cam = sim.scenario.camera
    rng = np.random.default_rng(7)
    spare = 1 << 16
    bank = np.round(rng.normal(0.0, noise_dn, 3 * cam.width_px * cam.height_px + spare)
                    ).astype(np.int16)
    enc = {n: VideoWriter(f / VIDEO_NAME, cam.width_px, cam.height_px, start_unix_s=0.0,
                          crf=crf, preset=preset) for n, f in folders.items()}
    first_short = (LENGTH_S - SHORT_S) * VIDEO_FPS
    frames = iter_frames(sim)
    _, prev = next(frames)
    prev = prev.astype(np.int16)
    i = 0
    try:
        for _, nxt in frames:
            nxt = nxt.astype(np.int16)
            for j in range(per_key):
                if i >= n_video:
                    break
                at = int(rng.integers(0, spare))
                blend = (prev * (per_key - j) + nxt * j) // per_key
                blend += bank[at:at + blend.size].reshape(blend.shape)
                image = np.clip(blend, 0, 255).astype(np.uint8)
                pts = round(i / VIDEO_FPS / VIDEO_TIME_BASE)
                enc[LENGTH_S].add_at(image, pts)
                if i >= first_short:
                    enc[SHORT_S].add_at(image, pts)
                i += 1
            prev = nxt
            if i and i % 300 == 0:
                print(f"  {i} of {n_video} video frames, {time.perf_counter() - start:.0f} s",
                      flush=True)
    finally:
        for e in enc.values():
            e.close()
    print(f"recordings: {keys.size} key frames rendered, {n_video} video frames written "
          f"in {time.perf_counter() - start:.0f} s")
    return folders


# --- the measurements (each in a child process) -----------------------------------------


def _decode(folder: Path) -> dict:
    import av

    from analyse.writers import VIDEO_NAME

    n = 0
    start = time.perf_counter()
    with av.open(str(folder / VIDEO_NAME)) as container:
        stream = container.streams.video[0]
        stream.thread_type = "AUTO"
        for frame in container.decode(stream):
            frame.to_ndarray(format="rgb24")
            n += 1
    return {"frames": n, "wall_s": time.perf_counter() - start}


def _read(folder: Path) -> dict:
    """The analysis's own reader alone: decoding plus linearising (a bound on measuring)."""
    from analyse.frames import iter_frames, open_frames
    from analyse.observation import read_observation

    obs = read_observation(folder / "observation.toml")
    fs = open_frames(folder, video_start_utc=obs.camera.video_start_utc)
    n = 0
    start = time.perf_counter()
    for _ in iter_frames(fs, on_error="skip", prefetch=1):
        n += 1
    return {"frames": n, "wall_s": time.perf_counter() - start}


def _measure(folder: Path) -> dict:
    from analyse.observation import read_observation
    from analyse.pipeline import measure_folder

    obs = read_observation(folder / "observation.toml")
    start, own = time.perf_counter(), time.thread_time()
    m = measure_folder(folder, obs, progress=False)
    wall, own = time.perf_counter() - start, time.thread_time() - own
    vis = {c: int(m.table.visible[c].sum()) for c in "rgb"}
    return {"frames": len(m.table), "wall_s": wall, "thread_cpu_s": own, "visible": vis,
            "green_duration_s": m.observables.green_duration_s}


def _rss_kb(pid: int | str, key: str = "VmRSS") -> int:
    """A process's resident set (or another /proc status line) [kB]; 0 once it is gone."""
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1])
    except (OSError, ValueError):
        pass
    return 0


def _children(pid: int) -> list[str]:
    """Process ids of the children (and their children) of ``pid``."""
    found = []
    for task in Path(f"/proc/{pid}/task").glob("*"):
        try:
            found += (task / "children").read_text().split()
        except OSError:
            continue
    return found + [g for c in found for g in _children(int(c))]


class _PeakMemory:
    """Samples the resident set of this process plus its children in a thread."""

    def __init__(self, every_s: float = 0.05) -> None:
        import os
        import threading

        self.peak_kb, self.pid, self.every_s = 0, os.getpid(), every_s
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        while not self.stop.wait(self.every_s):
            total = _rss_kb(self.pid) + sum(_rss_kb(c) for c in _children(self.pid))
            self.peak_kb = max(self.peak_kb, total)

    def done(self) -> float:
        """Peak [MB]."""
        self.stop.set()
        self.thread.join()
        return max(self.peak_kb, _rss_kb(self.pid, "VmHWM")) / 1024


def child(kind: str, folder: Path) -> dict:
    """Run one measurement in a fresh process; its result with the peak memory [MB]."""
    out = subprocess.run([sys.executable, __file__, "--child", kind, str(folder)],
                         check=True, capture_output=True, text=True, cwd=REPO).stdout
    return json.loads(out.strip().splitlines()[-1])


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workdir", type=Path, help="keep the recordings here (reused)")
    parser.add_argument("--only", type=int, choices=(SHORT_S, LENGTH_S))
    parser.add_argument("--plate-scale", type=float, default=5.0, help="arcsec/px")
    parser.add_argument("--noise-dn", type=float, default=1.0, help="per-frame noise [DN]")
    parser.add_argument("--crf", type=int, default=18)
    parser.add_argument("--preset", default="fast", help="libx264 preset of the recordings")
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args()
    sys.path.insert(0, str(REPO))
    if args.child:
        kind, folder = args.child[0], Path(args.child[1])
        sampler = _PeakMemory()
        res = {"decode": _decode, "read": _read, "measure": _measure}[kind](folder)
        res["peak_mb"] = sampler.done()
        res["self_hwm_mb"] = _rss_kb("self", "VmHWM") / 1024
        res["cpu_s"] = time.process_time()
        print(json.dumps(res))
        return 0
    with tempfile.TemporaryDirectory() as tmp:
        work = args.workdir or Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        folders = make_recordings(work, args.plate_scale, args.noise_dn, args.crf,
                                  args.preset)
        peaks = {}
        print(f"load average before: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores "
              "(other work on the machine slows both runs)")
        for seconds in (SHORT_S, LENGTH_S):
            if args.only and seconds != args.only:
                continue
            video = folders[seconds] / "sunset.mp4"
            mbit = 8 * video.stat().st_size / seconds / 1e6
            dec, mea = child("decode", folders[seconds]), child("measure", folders[seconds])
            rea = child("read", folders[seconds])
            fd, fm = dec["frames"] / dec["wall_s"], mea["frames"] / mea["wall_s"]
            fr = rea["frames"] / rea["wall_s"]
            print(f"{seconds} s recording: {dec['frames']} frames 1920 x 1080, "
                  f"{mbit:.1f} Mbit/s")
            print(f"  decoding:  {fd:6.1f} frames/s  ({dec['wall_s']:.1f} s wall, "
                  f"{dec['cpu_s']:.1f} s CPU; peak {dec['peak_mb']:.0f} MB)")
            print(f"  reading:   {fr:6.1f} frames/s  (the analysis's reader alone: decoding "
                  f"and linearising; {dec['cpu_s'] / dec['frames'] * 1000:.1f} ms CPU a frame "
                  f"to decode, {rea['cpu_s'] / rea['frames'] * 1000:.1f} ms to read)")
            print(f"  measuring: {fm:6.1f} frames/s  ({mea['wall_s']:.1f} s wall, "
                  f"{mea['cpu_s']:.1f} s CPU of which {mea['thread_cpu_s']:.1f} s in the "
                  f"measuring thread; peak {mea['peak_mb']:.0f} MB)")
            print(f"  visible frames {mea['visible']}, green duration "
                  f"{mea['green_duration_s']:.3f} s")
            print(f"  ratio reading / decoding: {fr / fd:.2f} (no analysis reading this way "
                  "can do better)")
            print(f"  ratio measuring / decoding: {fm / fd:.2f} (target >= {TARGET_RATIO}); "
                  f"per frame: decoding {1000 * dec['wall_s'] / dec['frames']:.0f} ms, "
                  f"measuring {1000 * mea['wall_s'] / mea['frames']:.0f} ms")
            peaks[seconds] = mea["peak_mb"]
        if len(peaks) == 2:
            print(f"peak memory of measuring: {peaks[SHORT_S]:.0f} MB for {SHORT_S} s, "
                  f"{peaks[LENGTH_S]:.0f} MB for {LENGTH_S} s (ratio "
                  f"{peaks[LENGTH_S] / peaks[SHORT_S]:.2f}; target < {TARGET_PEAK_MB:.0f} MB, "
                  "ratio near 1)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
