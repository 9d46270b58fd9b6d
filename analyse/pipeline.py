"""The measuring run: frames -> registered horizon -> per-channel limbs -> observables.

This is the one place that loops over frames. Each frame is read, the Sun located
(:func:`analyse.limb.locate_sun`, on the whole frame: its first guess sets the box in which
the limbs' flux is summed and where their fits start, so a guess carried over from an
earlier frame would change the results), its sea horizon found (with the previous
frame's line as a prior, which confines the search to a band), and the limbs measured
on a crop around the Sun, so that the cost of the limb fits is set by the Sun's size, not
the frame's.

Speed (scripts/bench_measure.py): frames are decoded and linearised a few frames ahead
in a background thread, while this thread registers the previous one. The limb fits
(:func:`analyse.limb.measure_limbs`, about two thirds of the time) run in a worker
process for long recordings (:mod:`analyse._limbworker`; the same numbers as here). The
lens's colour offsets on the horizon, which only feed a median, are measured on every
frame of a short recording and on every few frames of a long one (at least
:data:`_COLOUR_SAMPLES` frames).

Frames stream through: memory stays flat in the recording's length. Only the per-frame
table grows (a few hundred bytes a frame) and small crops of the final visible frames are
kept, for the report's strip.
"""

from __future__ import annotations

import collections
import dataclasses
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from analyse import horizon as hz
from analyse import limb as lb
from analyse._limbworker import LimbMeasurer
from analyse.errors import InputError
from analyse.frames import FrameSet, iter_frames, open_frames
from analyse.horizon_colour import (
    chroma_offset_error,
    clip_offset_error,
    horizon_colour_offsets,
)
from analyse.measure import (
    CHANNELS,
    DiscGeometry,
    FrameTable,
    Observables,
    disc_flux_scale,
    disc_geometry,
    median_standard_error,
    per_exposure,
    relative_exposure,
    sequence_observables,
)
from analyse.observation import Observation
from analyse.sun import sun_track

__all__ = ["Measurement", "StripFrame", "measure_folder", "read_calibration", "bands_for"]

_STRIP_KEEP = 48  # crops of the final visible frames kept for the report
_CROP_HALF_WIDTH_PX = 90
_CROP_ABOVE_PX = 48
_CROP_BELOW_PX = 16
_PARALLEL_MIN_FRAMES = 300  # recordings this long measure their limbs in a worker process
_PREFETCH_FRAMES = 1  # frames decoded ahead in a background thread (each 24 MB at 1080p)
# The horizon's colour offsets scatter by about 0.12-0.18 px (r) from frame to frame
# (measured on the demo folder and on 1080p H.264), so a median of 300 frames is good to
# about 0.01 px; fewer samples would add more than the rg offset's own error.
_COLOUR_SAMPLES = 300  # fewest frames whose horizon colour offsets feed the median ...
_COLOUR_STRIDE_MAX = 10  # ... measured on every frame up to every 10th frame


@dataclass(frozen=True)
class StripFrame:
    """A small registered crop around the limb apex (linear RGB) and its limb heights."""

    index: int
    t_unix_s: float
    crop: np.ndarray  # (h, w, 3) float16, linear
    horizon_row_px: float  # row of the horizon line in the crop at its centre column
    apex_height_px: dict[str, float]


@dataclass(frozen=True)
class Measurement:
    """Everything measured on a sunset folder, before inference."""

    frameset: FrameSet
    table: FrameTable
    observables: Observables
    sun_altitude_deg: np.ndarray  # (N,) true altitude of the Sun's centre at the frame times
    semidiameter_arcsec: float
    strip: tuple[StripFrame, ...]
    calibration: dict | None
    notes: tuple[str, ...] = field(default=())


def read_calibration(path: Path | None) -> dict | None:
    """Read and validate calibration.json (written by ``calibrate``); None without a path."""
    if path is None:
        return None
    from calibration.store import read_calibration as read

    return read(path)


def bands_for(calib: dict | None, calib_path: Path | None):
    """The colour channels' bands: the calibration's sensitivity CSV, else the defaults."""
    from calibration.bands import bands_from_csv, default_bands

    csv = (calib or {}).get("sensitivity_csv")
    if csv:
        p = Path(csv)
        if not p.is_absolute() and calib_path is not None:
            p = Path(calib_path).parent / p
        if not p.is_file():
            raise InputError(f"sensitivity_csv {csv} named by the calibration does not exist",
                             calib_path)
        return bands_from_csv(p)
    return default_bands()


def _shift_line(line: hz.HorizonLine, x0: float, y0: float) -> hz.HorizonLine:
    return dataclasses.replace(line, x_ref_px=line.x_ref_px - x0, row_px=line.row_px - y0)


def _crop_box(sun: lb.SunLocation, line: hz.HorizonLine, shape) -> tuple[int, int, int, int]:
    """Rows and columns around the Sun: its width plus margins, from above the disc to
    below the horizon."""
    h, w = shape[:2]
    r = max(sun.radius_px, 8.0)
    x0 = int(max(0, np.floor(sun.x_px - 1.25 * r - 24)))
    x1 = int(min(w, np.ceil(sun.x_px + 1.25 * r + 24)))
    y_line = float(line.row_at(np.array([sun.x_px]))[0]) if line.found else sun.y_px
    y0 = int(max(0, np.floor(min(sun.y_px, y_line) - 2.3 * r - 24)))
    y1 = int(min(h, np.ceil(y_line + 0.6 * r + 24)))
    return y0, y1, x0, x1


_LINE_KEYS = ("row_px", "row_err_px", "roll_deg", "roll_err_deg")
_LIMB_KEYS = ("apex_height_px", "apex_height_err_px", "apex_x_px", "width_px", "height_px",
              "edge_sigma_px", "flux", "flux_err", "sky_level")


class _Columns:
    """Accumulates the per-frame table row by row, in arrays sized for ``n`` frames."""

    def __init__(self, n: int) -> None:
        self.n = 0
        self.t = np.full(n, np.nan)
        self.found = np.zeros(n, bool)
        self.line = {k: np.full(n, np.nan) for k in _LINE_KEYS}
        self.limb = {(k, c): np.full(n, np.nan) for k in _LIMB_KEYS for c in CHANNELS}
        self.visible = {c: np.zeros(n, bool) for c in CHANNELS}
        self.saturated = {c: np.zeros(n, bool) for c in CHANNELS}
        self.flags: list[tuple[str, ...]] = []
        self.sources: list[str] = []

    def _grow(self) -> None:
        """Twice the room (only if a reader yields more frames than it announced)."""
        for group in (self.line, self.limb, self.visible, self.saturated):
            for k, v in group.items():
                group[k] = np.concatenate([v, np.zeros_like(v) if v.dtype == bool
                                           else np.full_like(v, np.nan)])
        self.t = np.concatenate([self.t, np.full_like(self.t, np.nan)])
        self.found = np.concatenate([self.found, np.zeros_like(self.found)])

    def add(self, info, line, limbs, flags) -> None:
        if self.n == self.t.size:
            self._grow()
        i, self.n = self.n, self.n + 1
        self.t[i] = info.t_unix_s
        self.sources.append(info.source)
        self.flags.append(tuple(flags))
        self.found[i] = bool(line is not None and line.found)
        if self.found[i]:
            for k in _LINE_KEYS:
                self.line[k][i] = getattr(line, k)
        for c in CHANNELS:
            lm = limbs.get(c) if limbs else None
            if lm is None:
                continue
            for k in _LIMB_KEYS:
                self.limb[k, c][i] = getattr(lm, k)
            self.visible[c][i] = bool(lm.visible)
            self.saturated[c][i] = bool(lm.saturated)

    def table(self) -> FrameTable:
        n = self.n
        line = {k: v[:n].copy() for k, v in self.line.items()}
        per = lambda k: {c: self.limb[k, c][:n].copy() for c in CHANNELS}  # noqa: E731
        return FrameTable(
            self.t[:n].copy(), self.found[:n].copy(), line["row_px"], line["row_err_px"],
            line["roll_deg"], line["roll_err_deg"], per("apex_height_px"),
            per("apex_height_err_px"), per("apex_x_px"), per("width_px"), per("height_px"),
            per("edge_sigma_px"), {c: v[:n].copy() for c, v in self.visible.items()},
            per("flux"), per("flux_err"), per("sky_level"),
            {c: v[:n].copy() for c, v in self.saturated.items()},
            tuple(self.flags), tuple(self.sources))


def _sun_columns(sun: lb.SunLocation) -> tuple[float, float] | None:
    """Columns of the Sun and its glitter, left out of the horizon's fits [px]."""
    if not sun.found:
        return None
    return sun.x_px - 1.3 * sun.radius_px - 10, sun.x_px + 1.3 * sun.radius_px + 10


def _same_sun(sun: lb.SunLocation, before: lb.SunLocation | None) -> bool:
    """Whether a first guess can be the Sun of the previous frame's guess ``before``.

    Between frames the Sun may move (it sets, the camera is re-aimed) or shrink (it sets),
    but not both jump by more than two of its radii (plus 20 px) and change its size more
    than twofold: such a guess is something else, e.g. a smooth sky glow that a codec's
    smoothing of the noise lets stand out once the Sun has set (seen on H.264).
    """
    if before is None or not before.found:
        return True
    jump = float(np.hypot(sun.x_px - before.x_px, sun.y_px - before.y_px))
    sizes = sorted((max(sun.radius_px, 1.0), max(before.radius_px, 1.0)))
    return jump <= 2.0 * (before.radius_px + 20.0) or sizes[1] <= 2.0 * sizes[0]


def _register(img, prior, sun_prior):
    """Sun and horizon of one frame and the crop for its limbs.

    Returns (line, sun, flags, box, job): ``job`` is (crop, line, sun) in crop
    coordinates for :func:`analyse.limb.measure_limbs`, or None (no horizon or no Sun,
    flagged) and then ``box`` is None too.
    """
    flags: list[str] = []
    sun = lb.locate_sun(img, prior if prior is not None and prior.found else None)
    if sun.found and not _same_sun(sun, sun_prior):
        sun, flags = sun_prior, flags + ["sun-guess-rejected"]
    if not sun.found and sun_prior is not None:
        sun = sun_prior
    exclude = _sun_columns(sun)
    line = hz.find_horizon(img, exclude_x=exclude, prior=prior)
    if not line.found and prior is not None:
        line = hz.find_horizon(img, exclude_x=exclude)
    if not line.found:
        return line, sun, flags + ["no-horizon"], None, None
    if not sun.found:
        return line, sun, flags + ["no-sun"], None, None
    y0, y1, x0, x1 = _crop_box(sun, line, img.shape)
    sun_c = dataclasses.replace(sun, x_px=sun.x_px - x0, y_px=sun.y_px - y0)
    job = (img[y0:y1, x0:x1], _shift_line(line, x0, y0), sun_c)
    return line, sun, flags, (y0, y1, x0, x1), job


def _measure_frame(img, prior, sun_prior, previous=None):
    """Horizon, Sun and limbs of one frame; returns (line, sun, limbs, flags, box).
    ``previous``: the previous frame's limbs, where the fits start."""
    line, sun, flags, box, job = _register(img, prior, sun_prior)
    limbs = {} if job is None else lb.measure_limbs(*job, previous=previous)
    return line, sun, limbs, flags + _limb_flags(limbs), box


def _limb_flags(limbs: dict[str, lb.ChannelLimb]) -> list[str]:
    return [f"{c}:{f}" for c, lm in limbs.items() for f in lm.flags]


def _strip_crop(img, line, limbs, info) -> StripFrame | None:
    """A small crop centred on the green apex column, the horizon near its bottom."""
    g = limbs.get("g")
    if g is None or not np.isfinite(g.apex_x_px):
        return None
    h, w = img.shape[:2]
    xc = int(round(g.apex_x_px))
    yc = float(line.row_at(np.array([float(xc)]))[0])
    y0, y1 = int(round(yc)) - _CROP_ABOVE_PX, int(round(yc)) + _CROP_BELOW_PX
    x0, x1 = xc - _CROP_HALF_WIDTH_PX, xc + _CROP_HALF_WIDTH_PX
    if y0 < 0 or x0 < 0 or y1 > h or x1 > w:
        return None
    apex = {c: float(lm.apex_height_px) for c, lm in limbs.items()}
    return StripFrame(info.index, info.t_unix_s, img[y0:y1, x0:x1].astype(np.float16),
                      yc - y0, apex)


def _progress(total: int, enabled: bool, desc: str):
    from tqdm import tqdm

    return tqdm(total=total, disable=not enabled or None, desc=desc, unit="frame", leave=False)


def measure_folder(folder: Path, obs: Observation, *, progress: bool = True) -> Measurement:
    """Read, register and measure every frame of a sunset folder.

    Parameters
    ----------
    folder : Path
        The sunset folder (FOLDER-FORMAT.md).
    obs : Observation
        Its observation.toml.
    progress : bool
        Show a progress bar on the terminal.
    """
    fs = open_frames(folder, video_start_utc=obs.camera.video_start_utc,
                     clock_utc_offset_h=obs.camera.clock_utc_offset_h)
    with _progress(len(fs.infos), progress, "measuring frames") as bar:
        res = _measure_frames(fs, lambda: bar.update(1))
    return _observables(fs, obs, res.cols.table(), res.colour_dy, tuple(res.strip),
                        colour_edge=res.colour_edge)


class _Results:
    """The per-frame table, the strip and the colour offsets, added in frame order."""

    def __init__(self, n: int) -> None:
        self.cols = _Columns(n)
        self.strip: collections.deque = collections.deque(maxlen=_STRIP_KEEP)
        self.after_dark = 0
        self.colour_dy: dict[str, list[float]] = {"r": [], "b": []}
        # per frame measured: each channel's encoded step and clipping bound
        self.colour_edge: dict[str, list[float]] = {
            f"{k}_{c}": [] for k in ("step", "clip") for c in CHANNELS}

    def add_colour(self, offs: dict[str, float]) -> None:
        for c in self.colour_dy:
            if np.isfinite(offs.get(c, np.nan)):
                self.colour_dy[c].append(float(offs[c]))
        for key, vals in self.colour_edge.items():
            if np.isfinite(offs.get(key, np.nan)):
                vals.append(float(offs[key]))

    def add(self, info, img, line, limbs, flags, box) -> None:
        if box is not None:  # apex columns back in frame coordinates
            limbs = {c: dataclasses.replace(lm, apex_x_px=lm.apex_x_px + box[2])
                     for c, lm in limbs.items()}
        self.cols.add(info, line, limbs, flags)
        visible = any(lm.visible for lm in limbs.values())
        self.after_dark = 0 if visible else self.after_dark + 1
        if box is not None and self.after_dark <= 3:
            s = _strip_crop(img, line, limbs, info)
            if s is not None:
                self.strip.append(s)


def _colour_stride(n_frames: int) -> int:
    """Measure the horizon's colour offsets on every k-th frame with a horizon."""
    return max(1, min(_COLOUR_STRIDE_MAX, n_frames // _COLOUR_SAMPLES))


def _luma(fs: FrameSet) -> tuple[float, float, float] | None:
    """Luma weights of the matrix the frames' colour was stored with (BT.709 or BT.601,
    the latter also JPEG's); None for RGB storage or another matrix."""
    return {"BT.709": lb.LUMA_BT709, "BT.601": lb.LUMA_BT601}.get(fs.colour_matrix or "")


def _chroma_luma(fs: FrameSet) -> tuple[float, float, float] | None:
    """Luma weights of a 4:2:0 video for :func:`analyse.limb.measure_limbs`, whose
    colour leak between channels they predict: those of the matrix the video was
    decoded with (``FrameSet.colour_matrix``; BT.709 for HD video and for ``limbtrace
    simulate``, BT.601 for SD); other matrices are not corrected.

    Not for JPEG stills: there the horizon's own codec bias (+0.27 px on the simulated
    q85 recording, analyse/horizon.py "Limits") is partly offset by the uncorrected leak,
    and correcting the limb alone made the green apex worse (0.26 -> 0.47 px).
    """
    if fs.kind != "video" or fs.chroma_subsampling != "4:2:0":
        return None
    return _luma(fs)


def _measure_frames(fs: FrameSet, tick: Callable[[], object], *,
                    colour_stride: int | None = None,
                    prefetch: int = _PREFETCH_FRAMES,
                    parallel: bool | None = None) -> _Results:
    """The frame loop; ``tick`` is called once per frame (a progress bar).

    ``parallel``: measure the limbs in a worker process (:mod:`analyse._limbworker`);
    by default for recordings of :data:`_PARALLEL_MIN_FRAMES` frames or more on a
    machine with two or more cores. The numbers are the same either way.
    """
    res = _Results(len(fs.infos))
    stride = colour_stride or _colour_stride(len(fs.infos))
    if parallel is None:
        parallel = len(fs.infos) >= _PARALLEL_MIN_FRAMES and (os.cpu_count() or 1) >= 2
    prior = sun_prior = None
    lines = 0
    waiting: collections.deque = collections.deque()  # frames whose limbs are pending

    def finish(limbs_of: LimbMeasurer) -> None:
        info, img, line, flags, box = waiting.popleft()
        if img is None:
            res.cols.add(info, None, {}, flags)
            return
        limbs = limbs_of.result() if box is not None else {}
        res.add(info, img, line, limbs, flags + _limb_flags(limbs), box)

    with LimbMeasurer(parallel, chroma_luma=_chroma_luma(fs)) as limbs_of:
        for info, img in iter_frames(fs, on_error="skip", prefetch=prefetch):
            tick()
            if img is None:
                waiting.append((info, None, None, ["unreadable"], None))
            else:
                line, sun, flags, box, job = _register(img, prior, sun_prior)
                if job is not None:
                    limbs_of.submit(*job)
                waiting.append((info, img, line, flags, box))
                if line.found:
                    if lines % stride == 0:
                        res.add_colour(horizon_colour_offsets(
                            img, line, exclude_x=_sun_columns(sun)))
                    prior, lines = line, lines + 1
                if sun.found:
                    sun_prior = sun
            while waiting and (waiting[0][4] is None or limbs_of.ready()):
                finish(limbs_of)
        while waiting:
            finish(limbs_of)
    return res


def _plate_scale(obs: Observation, calib: dict | None, geometry: DiscGeometry,
                 sd_arcsec: float) -> tuple[float, str, list[str]]:
    notes: list[str] = []
    measured = sd_arcsec / geometry.rx_px if np.isfinite(geometry.rx_px) else np.nan
    if obs.camera.plate_scale_arcsec_per_px is not None:
        scale, source = obs.camera.plate_scale_arcsec_per_px, "observation.toml"
    elif calib is not None and calib.get("plate_scale_arcsec_per_px"):
        scale, source = float(calib["plate_scale_arcsec_per_px"]), "calibration"
    elif np.isfinite(measured):
        scale, source = float(measured), "disc width and ephemeris semidiameter"
    else:
        notes.append("no plate scale: give [camera] plate_scale_arcsec_per_px or a "
                     f"calibration; the disc's width could not be measured ({geometry.message})")
        return float("nan"), "unknown", notes
    if source != "disc width and ephemeris semidiameter" and np.isfinite(measured):
        rel = measured / scale - 1.0
        if abs(rel) > 0.03:
            notes.append(f"the disc's measured width implies {measured:.3f} arcsec/px, "
                         f"{100 * rel:+.1f} % from the {source} value {scale:.3f}")
    return float(scale), source, notes


def _colour_offsets(calib: dict | None, colour_dy: dict[str, list[float]], sun_xy,
                    edge: dict[str, list[float]] | None = None, fs: FrameSet | None = None):
    """Vertical lens offsets of r and b from green at the Sun, their source and 1-sigma
    errors [px]: calibration (its error is not stored: 0), else the horizon edge.

    The horizon's error: the standard error of the frames' median, and in quadrature
    the systematic terms of :func:`analyse.horizon_colour.chroma_offset_error` (4:2:0 chroma:
    one chroma row per two) and :func:`analyse.horizon_colour.clip_offset_error`, from the
    frames' median steps and clipping. With no measurement the offsets are assumed
    zero and their error is unknown (NaN).
    """
    if calib is not None and calib.get("channel_offset_px"):
        from calibration.store import channel_offset_at

        offs = channel_offset_at(calib, *sun_xy)
        return ({c: float(offs[c][1]) for c in offs} | {"g": 0.0}, "calibration",
                {c: 0.0 for c in offs} | {"g": 0.0})
    dy = {c: float(np.median(v)) if v else 0.0 for c, v in colour_dy.items()}
    source = "horizon edge" if any(colour_dy.values()) else "none (assumed zero)"
    med = {k: float(np.median(v)) if v else float("nan") for k, v in (edge or {}).items()}
    sys = clip_offset_error({c: med.get(f"clip_{c}", 0.0) for c in CHANNELS})
    if fs is not None and fs.chroma_subsampling == "4:2:0":  # 4:2:2 keeps every row
        chroma = chroma_offset_error({c: med.get(f"step_{c}", np.nan) for c in CHANNELS},
                                     _luma(fs) or lb.LUMA_BT601)
        sys = {c: float(np.hypot(sys[c], chroma[c])) for c in sys}
    err = {}
    for c, v in colour_dy.items():
        err[c] = float(np.hypot(median_standard_error(v), np.nan_to_num(sys[c], nan=0.0)))
    return dy | {"g": 0.0}, source, err | {"g": 0.0}


def _disc_flux(obs, table: FrameTable, track, sd_arcsec: float, scale: float, dy,
               calib) -> tuple[dict[str, float], dict[str, float]]:
    """Each channel's whole-disc flux in the recording's units by the standard
    atmosphere's visible fraction (see measure.disc_flux_scale; the fallback of
    :func:`analyse.measure.sequence_observables`, which takes it from the thin segments'
    chords), and each channel's band-weighted limb-darkening coefficient.
    """
    from analyse.infer import _conditions
    from analyse.predict import build_model, light_by_height

    if not np.isfinite(scale):
        return {}, {}
    model = build_model(_conditions(obs), 6.5, bands=bands_for(calib, obs.camera.calibration),
                        azimuth_deg=float(np.median(track.azimuth_deg)), rays=32,
                        span_arcmin=20.0)
    out, limb_u = {}, {}
    for c in CHANNELS:
        ch = model.channels[c]
        limb_u[c] = float(np.average(model.u_limb[ch.node_index], weights=ch.weights))
        _, h, v = light_by_height(model, c, sd_arcsec)
        sig = table.edge_sigma_px[c]
        blur = float(np.nanmedian(sig)) if np.any(np.isfinite(sig)) else 1.0
        out[c] = disc_flux_scale(table.apex_height_px[c] + dy.get(c, 0.0), table.flux[c],
                                 table.visible[c], blur_px=blur, model_height_px=h / scale,
                                 model_fraction=v, max_height_px=0.3 * sd_arcsec / scale)
    return out, limb_u


def _observables(fs, obs, table: FrameTable, colour_dy, strip, *,
                 colour_edge: dict[str, list[float]] | None = None) -> Measurement:
    notes = list(fs.notes)
    calib = read_calibration(obs.camera.calibration)
    n_bad = int(np.count_nonzero(~table.horizon_found))
    if n_bad == len(table):
        raise InputError("no sea horizon found in any frame (is the horizon in view and "
                         "straight?)", fs.folder)
    if n_bad:
        notes.append(f"{n_bad} of {len(table)} frames without a horizon were flagged and "
                     "not used")
    if not any(np.any(table.visible[c]) for c in CHANNELS):
        raise InputError("no sun found above the horizon in any frame", fs.folder)
    rel = relative_exposure([i.exposure_s for i in fs.infos], [i.iso for i in fs.infos])
    if rel is not None and rel.size == len(table):
        table = per_exposure(table, rel)
        span = float(rel.max() / rel.min())
        notes.append(f"the exposure (EXIF time x ISO) changes {span:.2f}-fold over the "
                     "recording: fluxes and sky levels are per unit exposure, relative to "
                     f"{table.sources[0]}'s")
    track = sun_track(table.t_unix_s, obs.site.latitude_deg, obs.site.longitude_deg,
                      obs.site.eye_height_m)
    sd = float(np.median(track.semidiameter_arcsec))
    chord_frames = table.visible["r"] & table.horizon_found
    geometry = disc_geometry(np.where(chord_frames, table.apex_height_px["r"], np.nan),
                             np.where(chord_frames, table.width_px["r"], np.nan))
    scale, scale_source, scale_notes = _plate_scale(obs, calib, geometry, sd)
    notes += scale_notes
    x_sun = float(np.nanmedian(table.apex_x_px["g"])) if np.any(np.isfinite(
        table.apex_x_px["g"])) else 0.5 * fs.width
    y_sun = float(np.nanmedian(table.horizon_row_px))
    dy, dy_source, dy_err = _colour_offsets(calib, colour_dy, (x_sun, y_sun), colour_edge,
                                            fs)
    disc_flux, limb_u = _disc_flux(obs, table, track, sd, scale, dy, calib)
    observables = sequence_observables(
        table, plate_scale_arcsec_per_px=scale, plate_scale_source=scale_source,
        colour_offset_dy_px=dy, colour_offset_source=dy_source, geometry=geometry,
        colour_offset_dy_err_px=dy_err,
        disc_flux=disc_flux, limb_u=limb_u,
        semidiameter_px=sd / scale if np.isfinite(scale) else None)
    return Measurement(fs, table, observables, track.altitude_deg, sd, strip, calib,
                       tuple(notes) + observables.notes)
