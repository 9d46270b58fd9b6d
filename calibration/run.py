"""``limbtrace calibrate FOLDER``: a camera's plate scale, roll, lateral colour and bands.

The frame loop (at most :data:`MAX_FRAMES` frames, evenly spread over the recording)
measures, per frame, the solar disc in each channel (:mod:`calibration.optics`) and the
sea horizon where it is in view (:mod:`analyse.horizon`). The sequence is then reduced
to the calibration in :mod:`calibration._reduce` (its module docstring lists the steps):
ephemeris and refraction per channel, roll, plate scale, lateral colour, a check of the
atmospheric dispersion, effective wavelengths.

The output folder (default ``<folder>-calibration``) is written atomically and never
inside the input folder; a sensitivity CSV used is copied into it beside
calibration.json, which names it.
"""

from __future__ import annotations

import dataclasses
import shutil
from pathlib import Path

import numpy as np

from analyse import horizon as hz
from analyse.frames import FrameSet, iter_frames, open_frames
from analyse.horizon_colour import horizon_colour_offsets
from analyse.observation import read_observation
from analyse.outfolder import atomic_folder, check_output, default_output
from calibration import optics as op
from calibration._reduce import (
    _CHANNELS,
    FrameMeasure,
    calibrate_measurements,
    dispersion_check,
)
from calibration.bands import Band, bands_from_csv, default_bands
from calibration.store import CALIBRATION_FILE, write_calibration

__all__ = ["FrameMeasure", "measure_frame", "dispersion_check", "calibrate_measurements",
           "run_calibrate"]

MAX_FRAMES = 150  # frames measured, evenly spread over a longer recording
SATURATED_LEVEL = 0.98  # linear level above which a disc counts as saturated
HORIZON_CLEARANCE_PX = 4.0  # a disc closer than this to the horizon is not whole [px]
SENSITIVITY_COPY = "sensitivities.csv"


def measure_frame(img: np.ndarray, *, prior: hz.HorizonLine | None = None) -> tuple:
    """Discs per channel, green's limb profile, horizon and its colour offsets in a frame.

    Parameters
    ----------
    img : (H, W, 3) ndarray
        Linear-light RGB [0..1].
    prior : HorizonLine, optional
        The previous frame's horizon.

    Returns
    -------
    discs, profile, horizon, horizon_dy, saturated, message
        ``discs`` ``{"r", "g", "b"}`` of DiscFit in frame coordinates, or None.
    """
    loc = op.locate_disc(img[..., 1])
    exclude = None
    if loc.found or np.isfinite(loc.x_px):
        half = 1.3 * loc.radius_px + 10.0
        exclude = (loc.x_px - half, loc.x_px + half)
    line = hz.find_horizon(img, exclude_x=exclude, prior=prior)
    if not line.found and prior is not None:
        line = hz.find_horizon(img, exclude_x=exclude)
    dy = horizon_colour_offsets(img, line, exclude_x=exclude) if line.found else {}
    if not loc.found:
        return None, None, line, dy, False, loc.message
    y0, y1, x0, x1 = op.crop_box(loc, img.shape)
    crop = np.asarray(img[y0:y1, x0:x1], dtype=np.float64)
    guess = dataclasses.replace(loc, x_px=loc.x_px - x0, y_px=loc.y_px - y0)
    local = {}
    for i, c in enumerate(_CHANNELS):
        local[c] = op.fit_disc(crop[..., i], guess)
        if not local[c].found:
            return None, None, line, dy, False, f"channel {c}: {local[c].message}"
    saturated = bool(crop.max() >= SATURATED_LEVEL)
    profile = None if saturated else op.edge_profile(crop[..., 1], local["g"])
    discs = {c: dataclasses.replace(f, x_px=f.x_px + x0, y_px=f.y_px + y0)
             for c, f in local.items()}
    if line.found:
        g = discs["g"]
        bottom = float(line.height_above(g.x_px, g.y_px)) - op.radius_along_px(
            g, op.up_direction(line.roll_deg))
        if bottom < HORIZON_CLEARANCE_PX:
            return None, None, line, dy, saturated, "the disc touches the horizon"
    return discs, profile, line, dy, saturated, ""


def _selected(fs: FrameSet) -> tuple[FrameSet, set[int]]:
    """At most MAX_FRAMES frames evenly spread: a smaller FrameSet for stills (video is
    decoded in order anyway), and the indices of the frames to measure."""
    n = len(fs.infos)
    keep = np.unique(np.round(np.linspace(0, n - 1, min(n, MAX_FRAMES))).astype(int))
    if fs.kind == "stills":
        fs = dataclasses.replace(fs, files=tuple(fs.files[i] for i in keep),
                                 infos=tuple(fs.infos[i] for i in keep))
    return fs, {int(i) for i in keep}


def _measure_frames(fs: FrameSet, *, progress: bool) -> list[FrameMeasure]:
    """The frame loop: one FrameMeasure per selected frame."""
    from tqdm import tqdm

    fs_used, wanted = _selected(fs)
    out: list[FrameMeasure] = []
    prior = None
    with tqdm(total=len(wanted), disable=not progress or None, desc="calibrating", unit="frame",
              leave=False) as bar:
        for info, img in iter_frames(fs_used, on_error="skip"):
            if info.index not in wanted:
                continue
            bar.update(1)
            if img is None:
                out.append(FrameMeasure(info.index, info.t_unix_s, info.source, None, None,
                                        None, {}, False, "unreadable"))
                continue
            discs, profile, line, dy, sat, msg = measure_frame(img, prior=prior)
            prior = line if line is not None and line.found else prior
            out.append(FrameMeasure(info.index, info.t_unix_s, info.source, discs, profile,
                                    line, dy, sat, msg))
    return out

def _bands(sensitivity_csv) -> tuple[dict[str, Band], dict]:
    """The channels' bands and their description for calibration.json."""
    if sensitivity_csv is None:
        bands = default_bands()
        return bands, {"source": "default"} | {c: bands[c].description for c in _CHANNELS}
    path = Path(sensitivity_csv)
    bands = bands_from_csv(path)
    return bands, {"source": path.name} | {c: bands[c].description for c in _CHANNELS}


def run_calibrate(folder, *, out=None, force: bool = False, quiet: bool = False,
                  sensitivity_csv=None) -> dict:
    """Calibrate a camera from a recording of the Sun and write calibration.json.

    Parameters
    ----------
    folder : str or Path
        A sunset folder (FOLDER-FORMAT.md); observation.toml needs [site] only.
    out : str or Path, optional
        Output folder; default ``<folder>-calibration`` beside the input folder.
    force : bool
        Replace an existing, non-empty output folder.
    quiet : bool
        No progress bar.
    sensitivity_csv : str or Path, optional
        Channel sensitivities (format: :mod:`calibration.bands`); else default bands.

    Returns
    -------
    dict
        The calibration as written, plus ``"path"``: the calibration.json written.

    Raises
    ------
    InputError
        Bad observation.toml, frames or sensitivity CSV; an output folder inside the
        input or existing without ``force``; no whole solar disc in any frame.
    """
    folder = Path(folder)
    obs = read_observation(folder / "observation.toml", require=("site",))
    bands, bands_doc = _bands(sensitivity_csv)
    out = check_output(Path(out) if out is not None else default_output(folder, "calibration"),
                       input_folder=folder, force=force)
    fs = open_frames(folder, video_start_utc=obs.camera.video_start_utc,
                     clock_utc_offset_h=obs.camera.clock_utc_offset_h)
    ms = _measure_frames(fs, progress=not quiet)
    doc = calibrate_measurements(ms, fs, obs, bands, bands_doc)
    with atomic_folder(out, force=force) as tmp:
        if sensitivity_csv is not None:
            shutil.copyfile(sensitivity_csv, tmp / SENSITIVITY_COPY)
            doc["sensitivity_csv"] = SENSITIVITY_COPY
        write_calibration(doc, tmp / CALIBRATION_FILE)
    return dict(doc, path=str(out / CALIBRATION_FILE))
