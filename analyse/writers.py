"""Write a simulated sunset: the folder (FOLDER-FORMAT.md) and its truth file beside it.

:func:`run_simulate` is the whole of ``limbtrace simulate SCENARIO.toml OUT_FOLDER``: it
reads the scenario, refuses an existing non-empty ``OUT_FOLDER`` (unless ``force``),
renders the frames one at a time (:mod:`analyse.simulate`) and writes them into a hidden
folder beside ``OUT_FOLDER``, which is renamed into place only when everything is
written; a crash leaves no half-written folder behind.

What the folder holds, by ``[output] format``:

- ``png`` (8 bit) or ``tiff`` (16 bit): ``frame_00000.png``... and ``frames.csv``
  (``file,time_utc``, milliseconds);
- ``jpeg``: ``frame_00000.jpg``... with EXIF ``DateTimeOriginal`` (the camera clock's
  local time), ``SubSecTimeOriginal`` (milliseconds, 3 digits), ``OffsetTimeOriginal``
  and ``ExposureTime``; no frames.csv, so the readers take the EXIF times;
- ``h264``: ``sunset.mp4``, H.264 4:2:0 (BT.709 matrix, sRGB transfer) whose
  presentation timestamps, in units of 1/90000 s, are the exact (possibly variable)
  frame times from the video's start, which ``observation.toml`` gives as
  ``[camera] video_start_utc``.

Every folder has ``observation.toml`` ([site], [air] as resolved for the model,
[camera] plate scale, azimuth, clock keys, [model] layer top). Frame times written are
the simulated camera's: true times plus ``[output] clock_error_s``.

The truth file ``<OUT_FOLDER>.truth.json`` (never inside the folder, where it would be
taken for input) holds the forward model's observables for the scenario, as
``limbtrace predict`` computes them, and the rendering parameters::

    {"schema": 1, "scenario": "...", "date": "...", "site": {...},
     "atmosphere": "...", "lapse_rate_K_per_km": 6.5 | null, "layer_top_m": 100.0,
     "mirage": false, "detection_fraction": 0.0001, "semidiameter_arcsec": ...,
     "last_light_utc": {"r": ..., "g": ..., "b": ...}, "last_light_unix_s": {...},
     "green_duration_s": ..., "rg_offset_arcsec": ...,
     "horizon_refraction_arcmin": {...}, "dip_arcmin": {...}, "clock_error_s": 0.0,
     "rendering": {"width_px", "height_px", "plate_scale_arcsec_per_px", "roll_deg",
                   "horizon_row_px", "azimuth_deg", "channel_offset_px": {"r": [dx, dy],
                   "b": [dx, dy]}, "frame_count", "first_frame_utc", "last_frame_utc",
                   "format", "bit_depth", "exposure", "psf_sigma_px", "shake_px",
                   "rolling_shutter_s", "seed"}}

Values that are not numbers (NaN) are written as null.
"""

from __future__ import annotations

import csv
import json
import math
import os
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from datetime import datetime, timedelta, timezone
from fractions import Fraction
from pathlib import Path
from typing import Any

import av
import cv2
import numpy as np
from PIL import Image
from PIL.TiffImagePlugin import IFDRational
from tqdm import tqdm

from analyse import outfolder
from analyse.errors import InputError
from analyse.observation import format_utc
from analyse.scenario import read_scenario
from analyse.simulate import FrameRecord, Simulation, iter_frames, prepare_simulation

__all__ = [
    "VIDEO_NAME", "truth_path", "check_output", "StillWriter",
    "VideoWriter", "observation_toml", "truth_dict", "write_truth", "run_simulate",
]  # fmt: skip

VIDEO_NAME = "sunset.mp4"
EXIF_IFD = 0x8769  # Exif sub-IFD pointer (EXIF 2.32, CIPA DC-008-2019)
TAG_EXPOSURE_TIME = 0x829A  # ExposureTime [s] (EXIF 2.32)
TAG_DATETIME_ORIGINAL = 0x9003  # "YYYY:MM:DD HH:MM:SS", camera-clock local time (EXIF 2.32)
TAG_OFFSET_TIME_ORIGINAL = 0x9011  # "+HH:MM" (EXIF 2.32)
TAG_SUBSEC_TIME_ORIGINAL = 0x9291  # decimal fraction digits of the second (EXIF 2.32)
VIDEO_TIME_BASE = Fraction(1, 90000)  # s per pts tick (MPEG system clock)
VIDEO_PRESET = "medium"  # libx264 speed/size trade-off
# PNG: zlib level 1, Huffman coding only, "Sub" row filter: for noisy frames about twice
# as fast as OpenCV's defaults and 20 % smaller (measured on 640 x 480 frames).
PNG_PARAMS = [cv2.IMWRITE_PNG_COMPRESSION, 1, cv2.IMWRITE_PNG_STRATEGY,
              cv2.IMWRITE_PNG_STRATEGY_HUFFMAN_ONLY, cv2.IMWRITE_PNG_FILTER,
              cv2.IMWRITE_PNG_FILTER_SUB]
_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)


def truth_path(out_folder: str | Path) -> Path:
    """``<OUT_FOLDER>.truth.json``, beside the folder."""
    out = Path(out_folder)
    return out.with_name(out.name + ".truth.json")


def check_output(out_folder: str | Path, *, force: bool = False) -> None:
    """Refuse to overwrite: an existing non-empty folder or truth file needs ``force``."""
    out = Path(out_folder)
    out.parent.mkdir(parents=True, exist_ok=True)
    outfolder.check_output(out, input_folder=None, force=force, option="OUT_FOLDER")
    truth = truth_path(out)
    if truth.exists() and not force:
        raise InputError("truth file exists; use --force to replace it", truth)


class StillWriter:
    """PNG (8 bit) or TIFF (16 bit) stills with frames.csv, or JPEG stills with EXIF times."""

    def __init__(self, folder: Path, fmt: str, *, clock_utc_offset_h: float = 0.0,
                 jpeg_quality: int = 92) -> None:
        self.folder, self.fmt = folder, fmt
        self.offset_s = round(clock_utc_offset_h * 3600)
        self.quality = jpeg_quality
        self.ext = {"png": "png", "tiff": "tif", "jpeg": "jpg"}[fmt]
        self._csv = None
        if fmt != "jpeg":
            self._csv = open(folder / "frames.csv", "w", newline="", encoding="utf-8")
            self._rows = csv.writer(self._csv, lineterminator="\n")
            self._rows.writerow(["file", "time_utc"])

    def add(self, record: FrameRecord, image: np.ndarray) -> None:
        """Write one frame; ``image`` is (H, W, 3) RGB, uint8 (uint16 for TIFF)."""
        name = f"frame_{record.index:05d}.{self.ext}"
        path = self.folder / name
        if self.fmt == "jpeg":
            Image.fromarray(image).save(path, quality=self.quality, subsampling=2,
                                        exif=self._exif(record))
        else:
            params = PNG_PARAMS if self.fmt == "png" else []
            if not cv2.imwrite(str(path), np.ascontiguousarray(image[..., ::-1]), params):
                raise OSError(f"cannot write {path}")
        if self._csv is not None:
            self._rows.writerow([name, format_utc(record.written_unix_s, 3)])

    def _exif(self, record: FrameRecord) -> Image.Exif:
        ms = round(record.written_unix_s * 1000) + self.offset_s * 1000
        local = _EPOCH + timedelta(milliseconds=ms)
        sign = "-" if self.offset_s < 0 else "+"
        hours, minutes = divmod(abs(self.offset_s) // 60, 60)
        exif = Image.Exif()
        ifd = exif.get_ifd(EXIF_IFD)
        ifd[TAG_DATETIME_ORIGINAL] = local.strftime("%Y:%m:%d %H:%M:%S")
        ifd[TAG_SUBSEC_TIME_ORIGINAL] = f"{ms % 1000:03d}"
        ifd[TAG_OFFSET_TIME_ORIGINAL] = f"{sign}{hours:02d}:{minutes:02d}"
        exposure = Fraction(record.exposure_s).limit_denominator(1_000_000)
        ifd[TAG_EXPOSURE_TIME] = IFDRational(exposure.numerator, exposure.denominator)
        return exif

    def close(self) -> None:
        if self._csv is not None:
            self._csv.close()


class VideoWriter:
    """One H.264 4:2:0 video with each frame's exact presentation time (1/90000 s)."""

    def __init__(self, path: Path, width: int, height: int, *, start_unix_s: float,
                 crf: int = 18, preset: str = VIDEO_PRESET) -> None:
        self.start_unix_s = start_unix_s
        self.container = av.open(str(path), "w")
        stamp = datetime.fromtimestamp(math.floor(start_unix_s), timezone.utc)
        self.container.metadata["creation_time"] = stamp.strftime("%Y-%m-%dT%H:%M:%S.000000Z")
        stream = self.container.add_stream("libx264")
        stream.width, stream.height, stream.pix_fmt = width, height, "yuv420p"
        stream.time_base = VIDEO_TIME_BASE
        ctx = stream.codec_context
        ctx.time_base = VIDEO_TIME_BASE
        ctx.colorspace = ctx.color_primaries = 1  # BT.709 matrix and primaries (ITU-T H.273)
        ctx.color_trc = 13  # the frames' code values are sRGB's (IEC 61966-2-1; H.273 code 13)
        ctx.color_range = 1  # limited ("TV") range
        stream.options = {"crf": str(crf), "preset": preset}
        self.stream = stream

    def add(self, record: FrameRecord, image: np.ndarray) -> None:
        """Encode one frame; ``image`` is (H, W, 3) uint8 RGB."""
        self.add_at(image, round((record.written_unix_s - self.start_unix_s) / VIDEO_TIME_BASE))

    def add_at(self, image: np.ndarray, pts: int) -> None:
        """Encode one frame at a presentation time in ticks of ``VIDEO_TIME_BASE``."""
        frame = av.VideoFrame.from_ndarray(np.ascontiguousarray(image), format="rgb24")
        frame = frame.reformat(format="yuv420p", src_colorspace="ITU709",
                               dst_colorspace="ITU709")
        frame.pts = pts
        frame.time_base = VIDEO_TIME_BASE
        for packet in self.stream.encode(frame):
            self.container.mux(packet)

    def close(self) -> None:
        for packet in self.stream.encode():
            self.container.mux(packet)
        self.container.close()


def observation_toml(sim: Simulation, truth_name: str) -> str:
    """The folder's observation.toml: site, air as modelled, camera facts, layer top."""
    sc, c = sim.scenario, sim.prediction.model.conditions
    lines = [f"# Written by `limbtrace simulate` from {sc.path.name}: a simulated sunset.",
             f"# The scenario's true observables are in {truth_name} beside this folder.",
             "", "[site]"]
    if sc.site.name:
        lines.append(f"name = {json.dumps(sc.site.name, ensure_ascii=False)}")
    lines += [f"latitude_deg = {_num(sc.site.latitude_deg)}",
              f"longitude_deg = {_num(sc.site.longitude_deg)}",
              f"eye_height_m = {_num(sc.site.eye_height_m)}", 'horizon = "sea"', "", "[air]",
              f"temperature_C = {_num(round(c.temperature_C, 3))}",
              f"pressure_hPa = {_num(round(c.pressure_hPa, 3))}",
              f"relative_humidity = {_num(c.relative_humidity)}", "", "[camera]",
              f"plate_scale_arcsec_per_px = {_num(sc.camera.plate_scale_arcsec_per_px)}",
              f"azimuth_deg = {_num(round(sim.camera_azimuth_deg, 4))}",
              f"clock_uncertainty_s = {_num(sc.output.clock_uncertainty_s)}"]
    if sc.output.format == "jpeg":
        lines.append(f"clock_utc_offset_h = {_num(sc.output.clock_utc_offset_h)}")
    if sc.output.format == "h264":
        start = sim.frame_times_unix_s[0] + sim.clock_error_s
        lines.append(f'video_start_utc = "{format_utc(start, 3)}"')
    lines += ["", "[model]", f"layer_top_m = {_num(sc.atmosphere.layer_top_m)}", ""]
    return "\n".join(lines)


def truth_dict(sim: Simulation) -> dict[str, Any]:
    """The scenario's true observables and the rendering parameters (module docstring)."""
    sc, p = sim.scenario, sim.prediction
    cam = sc.camera
    times = sim.frame_times_unix_s
    return _clean({
        "schema": 1, "scenario": sc.path.name, "date": sc.timing.date,
        "site": {"name": sc.site.name, "latitude_deg": sc.site.latitude_deg,
                 "longitude_deg": sc.site.longitude_deg, "eye_height_m": sc.site.eye_height_m},
        "atmosphere": p.model.atmosphere.description,
        "lapse_rate_K_per_km": sc.atmosphere.lapse_rate_K_per_km,
        "layer_top_m": sc.atmosphere.layer_top_m,
        "mirage": bool(np.any(p.model.curve.folded)),
        "detection_fraction": p.detection_fraction,
        "semidiameter_arcsec": p.semidiameter_arcsec,
        "last_light_utc": {k: format_utc(v, 3) for k, v in p.last_light_unix_s.items()},
        "last_light_unix_s": dict(p.last_light_unix_s),
        "green_duration_s": p.green_duration_s, "rg_offset_arcsec": p.rg_offset_arcsec,
        "horizon_refraction_arcmin": dict(p.horizon_refraction_arcmin),
        "dip_arcmin": dict(p.dip_arcmin), "clock_error_s": sim.clock_error_s,
        "rendering": {
            "width_px": cam.width_px, "height_px": cam.height_px,
            "plate_scale_arcsec_per_px": cam.plate_scale_arcsec_per_px,
            "roll_deg": cam.roll_deg, "horizon_row_px": cam.horizon_row(),
            "azimuth_deg": sim.camera_azimuth_deg,
            "channel_offset_px": {n: list(cam.offset_px(n)) for n in ("r", "b")},
            "frame_count": int(times.size), "first_frame_utc": format_utc(times[0], 3),
            "last_frame_utc": format_utc(times[-1], 3), "format": sc.output.format,
            "bit_depth": sc.bit_depth, "exposure": cam.exposure,
            "psf_sigma_px": cam.psf_sigma_px, "shake_px": cam.shake_px,
            "rolling_shutter_s": cam.rolling_shutter_s, "seed": sc.output.seed}})


def write_truth(path: Path, truth: dict[str, Any]) -> None:
    """Write the truth JSON through a temporary file, replaced in one step."""
    tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
    tmp.write_text(json.dumps(truth, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    os.replace(tmp, path)


def run_simulate(scenario_path: str | Path, out_folder: str | Path, *, force: bool = False,
                 quiet: bool = False) -> dict[str, Any]:
    """``limbtrace simulate``: render a scenario into a sunset folder and its truth file.

    Parameters
    ----------
    scenario_path : str or Path
        The scenario TOML (docs/scenario.md).
    out_folder : str or Path
        The sunset folder to write; refused if it exists and is not empty, unless ``force``.
    force : bool
        Replace an existing folder and truth file.
    quiet : bool
        No progress bar.

    Returns
    -------
    dict
        The truth (as written to ``<out_folder>.truth.json``).

    Raises
    ------
    InputError
        Bad scenario, or an output that would be overwritten without ``force``.
    """
    scenario = read_scenario(scenario_path)
    out = Path(out_folder)
    check_output(out, force=force)
    sim = prepare_simulation(scenario)
    fmt = scenario.output.format
    frames = tqdm(iter_frames(sim), total=sim.frame_times_unix_s.size, disable=quiet or None,
                  unit="frame", desc="simulate")
    with outfolder.atomic_folder(out, force=force) as stage:
        if fmt == "h264":
            writer: StillWriter | VideoWriter = VideoWriter(
                stage / VIDEO_NAME, scenario.camera.width_px, scenario.camera.height_px,
                start_unix_s=sim.frame_times_unix_s[0] + sim.clock_error_s,
                crf=scenario.output.video_crf)
        else:
            writer = StillWriter(stage, fmt, clock_utc_offset_h=scenario.output.clock_utc_offset_h,
                                 jpeg_quality=scenario.output.jpeg_quality)
        try:
            _write_all(frames, writer)
        finally:
            writer.close()
        (stage / "observation.toml").write_text(observation_toml(sim, truth_path(out).name),
                                                encoding="utf-8")
    truth = truth_dict(sim)
    write_truth(truth_path(out), truth)
    return truth


def _write_all(frames, writer: StillWriter | VideoWriter) -> None:
    """Encode and write in a second thread, in order, at most two frames behind."""
    pending: deque[Future] = deque()
    with ThreadPoolExecutor(1) as io:
        for record, image in frames:
            pending.append(io.submit(writer.add, record, image))
            while len(pending) > 2:
                pending.popleft().result()
        while pending:
            pending.popleft().result()


def _num(value: float) -> str:
    """A float as TOML writes it (always with a decimal point)."""
    return repr(float(value))


def _clean(value: Any) -> Any:
    """Floats for numpy scalars, None for NaN, recursively."""
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value
