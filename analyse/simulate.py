"""Synthetic sunset frames from the ray-traced forward model (arrays out, no files).

The forward model of :mod:`analyse.predict` is built once per scenario (it is the very
model whose predictions go into the truth file); every frame is then drawn from its
transfer curves, so mirages show their several images without special cases.

Geometry. Image ``x`` runs right and ``y`` down; the camera's roll ``rho`` turns the
horizon counter-clockwise. Horizon-aligned coordinates in pixels, ``u`` along the horizon
and ``v`` up, with origin at the green sea horizon in the centre column ``xc``, are::

    x = xc + u cos(rho) - v sin(rho)        y = y_h - u sin(rho) - v cos(rho)

A pixel at ``v`` looks at the apparent elevation ``e = e_h + v P`` (``P`` the plate
scale, ``e_h`` the green horizon's elevation) and at ``u P`` of azimuth from the camera's
centre. The Sun is drawn in an unrolled patch around it and, with a roll, turned into the
frame by an affine warp (bilinear); without roll the patch is the frame's own pixels.

The solar disc is drawn by :mod:`analyse._sunpatch`: each pixel's mean of the disc seen
through the traced transfer curves, dimmed and reddened by the traced rays' airmass.

Camera. Optical blur (Gaussian), exposure (locked, or automatic with a lag), photon noise
(a normal with variance equal to the mean, which Poisson approaches above ~10 e-) and
read noise in electrons, clipping at the full well, sRGB encoding (IEC 61966-2-1) and
quantisation (the sensor's steps, in :mod:`analyse._sensor`). One seeded random
generator makes every run bit-for-bit the same; the noise is drawn from a bank of normal
deviates at a random offset per frame (fast; frames are uncorrelated, not strictly
independent).

References
----------
.. [1] Transmission and airmass of the traced rays: :mod:`calibration.bands` (Bodhaine
   et al. 1999; Angstrom 1929) and :mod:`analyse.refraction`.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import cv2
import numpy as np

from analyse._sensor import _sensor, encode_srgb
from analyse._sunpatch import (
    ROW_OVERSAMPLE,
    ChannelCurves,
    disc_area_below_left,
    sun_patch,
)
from analyse.atmosphere import Atmosphere, tabulated_atmosphere
from analyse.errors import InputError
from analyse.observation import DEFAULT_RELATIVE_HUMIDITY, standard_atmosphere_1976
from analyse.predict import Conditions, Prediction, predict_sunset, visible_fraction
from analyse.scenario import MAX_FRAMES, Scenario
from analyse.sun import SunTrack, sun_track
from calibration.bands import Band, band_weights, bands_from_csv, default_bands

__all__ = [
    "ROW_OVERSAMPLE", "ChannelCurves", "Simulation", "FrameRecord", "prepare_simulation",
    "disc_area_below_left", "sun_patch", "render_radiance", "iter_frames", "encode_srgb",
]  # fmt: skip

STILL_TIME_STEP_S = 1e-3  # s; frame times of stills are whole milliseconds (EXIF, csv)
VIDEO_TIME_BASE_HZ = 90000  # ticks/s; video pts unit (MPEG system clock)
# Illustrative sunset sky colour relative to green (no source; only a backdrop).
SKY_COLOUR = {"r": 1.0, "g": 0.45, "b": 0.2}
SKY_FALLOFF_DEG = 2.0  # sky darkens upwards over this elevation (illustrative)
AUREOLE_DEG = 1.0  # brighter sky around the Sun (illustrative)
SEA_FALLOFF_DEG = 0.5  # sea darkens downwards over this depression (illustrative)
GLITTER_DEPTH_DEG = 0.4  # glitter fades downwards over this depression (illustrative)
GLITTER_WIDTH_DEG = 0.08  # glitter column half-width at the horizon (illustrative)
GLITTER_SPREAD = 0.3  # its widening per degree below the horizon (illustrative)
_COARSE_PX = 4  # pixels between samples of the smooth sky and sea
_BANK_SPARE = 2**20  # extra random deviates in a bank, for the per-frame random offset


@dataclass(frozen=True)
class Simulation:
    """Everything fixed for a scenario: the traced model, the frame times, the camera."""

    scenario: Scenario
    prediction: Prediction
    channels: tuple[ChannelCurves, ...]
    frame_times_unix_s: np.ndarray  # (N,) true times of the frames (of the top row)
    track: SunTrack  # the Sun at those times
    camera_azimuth_deg: float
    horizon_elevation_deg: float  # green sea horizon [deg], the image's elevation origin
    centre_signal: dict[str, float]  # disc centre seen along the horizon ray, per channel
    locked_gain_e: float  # electrons per unit radiance of the locked exposure
    clock_error_s: float  # written minus true time [s], whole milliseconds
    horizon_offset_px: np.ndarray  # (3,) each channel's sea horizon above green's [px]
    sun_light: np.ndarray  # (3, N) the Sun's visible light per channel and frame


@dataclass(frozen=True)
class FrameRecord:
    """What is known of one rendered frame."""

    index: int
    t_unix_s: float  # true time of the first (top) row [s]
    written_unix_s: float  # the simulated camera's time stamp [s]
    gain_e: float  # electrons per unit radiance
    exposure_s: float  # exposure time written to EXIF [s]
    shake_px: tuple[float, float]  # (dx, dy) of this frame


# --- set-up ---------------------------------------------------------------------------


def prepare_simulation(scenario: Scenario) -> Simulation:
    """Trace the scenario's atmosphere and fix the frame times.

    Raises
    ------
    InputError
        Bands CSV problems, an atmosphere the model refuses, frame times outside the
        window, or a window whose start shows the Sun above the traced span.
    """
    path = scenario.path
    conditions, atmosphere = _conditions(scenario)
    n = scenario.camera.wavelengths_per_band
    bands: dict[str, Band] = (default_bands(n) if scenario.camera.bands_csv is None
                              else bands_from_csv(scenario.camera.bands_csv, n))
    gamma = scenario.atmosphere.lapse_rate_K_per_km
    try:
        prediction = predict_sunset(conditions, scenario.timing.date,
                                    6.5 if gamma is None else gamma, bands=bands,
                                    atmosphere=atmosphere)
    except ValueError as err:
        raise InputError(f"the forward model refuses this scenario: {err}", path) from None
    model = prediction.model
    channels = tuple(_channel_curves(prediction, name) for name in ("r", "g", "b"))
    times = _frame_times(scenario, prediction)
    site = scenario.site
    track = sun_track(times, site.latitude_deg, site.longitude_deg, site.eye_height_m)
    _check_span(scenario, model.curve.true_altitude_deg, track)
    azimuth = scenario.camera.azimuth_deg
    if azimuth is None:
        t_green = prediction.last_light_unix_s["g"]
        azimuth = float(sun_track(t_green, site.latitude_deg, site.longitude_deg,
                                  site.eye_height_m).azimuth_deg[0])
    centre = {c.name: float(np.sum(c.weight * np.exp(-c.tau * c.horizon_airmass)))
              for c in channels}
    gain = scenario.camera.exposure_level * scenario.camera.full_well_e / max(centre.values())
    e_green = -prediction.dip_arcmin["g"] / 60.0
    to_px = 3600.0 / scenario.camera.plate_scale_arcsec_per_px
    horizon = np.array([(-prediction.dip_arcmin[c.name] / 60.0 - e_green) * to_px
                        for c in channels])
    light = np.stack([visible_fraction(model, c.name, track.altitude_deg,
                                       track.semidiameter_arcsec) * centre[c.name]
                      for c in channels])
    return Simulation(scenario, prediction, channels, times, track, float(azimuth), e_green,
                      centre, float(gain), round(scenario.output.clock_error_s, 3), horizon,
                      light)


def _conditions(scenario: Scenario) -> tuple[Conditions, Atmosphere | None]:
    """Conditions of the forward model, and a tabulated atmosphere when one is given."""
    site, air, atm = scenario.site, scenario.air, scenario.atmosphere
    t_std, p_std = standard_atmosphere_1976(site.eye_height_m)
    pressure = p_std if air.pressure_hPa is None else air.pressure_hPa
    humidity = DEFAULT_RELATIVE_HUMIDITY if air.relative_humidity is None else (
        air.relative_humidity)
    atmosphere = None
    temperature = t_std if air.temperature_C is None else air.temperature_C
    if atm.profile_height_m is not None and atm.profile_temperature_C is not None:
        z = np.asarray(atm.profile_height_m)
        t_K = np.asarray(atm.profile_temperature_C) + 273.15
        temperature = float(np.interp(site.eye_height_m, z, t_K)) - 273.15
        try:
            atmosphere = tabulated_atmosphere(z, t_K, eye_height_m=site.eye_height_m,
                                              pressure_hPa=pressure, relative_humidity=humidity)
        except ValueError as err:
            raise InputError(f"[atmosphere] profile refused: {err}", scenario.path) from None
    return Conditions(site.latitude_deg, site.longitude_deg, site.eye_height_m, temperature,
                      pressure, humidity, atm.layer_top_m, atm.tau_aerosol_550,
                      atm.angstrom_alpha), atmosphere


def _channel_curves(prediction: Prediction, name: str) -> ChannelCurves:
    model = prediction.model
    ch = model.channels[name]
    k = ch.node_index
    e = model.curve.apparent_elevation_deg[k]
    a = model.curve.true_altitude_deg[k]
    m = np.nan_to_num(model.curve.airmass[k])
    slope = (a[:, -1] - a[:, -2]) / (e[:, -1] - e[:, -2])
    # Transmission of each piece of the curve from its rays' mean airmass (as
    # predict.visible_fraction), integrated over elevation so that a sub-row takes the
    # exact mean over the pieces it spans; constant beyond the last ray.
    t_piece = np.exp(-ch.tau[:, None] * 0.5 * (m[:, 1:] + m[:, :-1]))
    far = e[:, -1:] + 10.0
    e_cum = np.concatenate([e, far], axis=1)
    t_cum = np.concatenate([np.zeros((k.size, 1)), np.cumsum(t_piece * np.diff(e), axis=1),
                            np.zeros((k.size, 1))], axis=1)
    t_cum[:, -1] = t_cum[:, -2] + t_piece[:, -1] * 10.0
    return ChannelCurves(name, e, a, m[:, 0], e_cum, t_cum, np.nan_to_num(slope),
                         model.curve.horizon.apparent_elevation_deg[k], ch.tau,
                         np.asarray(band_weights(ch.band, airmass=0.0)), model.u_limb[k])


def _frame_times(scenario: Scenario, prediction: Prediction) -> np.ndarray:
    """True frame times [s]: the window's start in whole ms plus quantised offsets."""
    tm = scenario.timing
    if tm.start_unix_s is not None and tm.end_unix_s is not None:
        start, duration = tm.start_unix_s, tm.end_unix_s - tm.start_unix_s
    else:
        start = prediction.last_light_unix_s["g"] - float(tm.last_seconds or 0.0)
        duration = float(tm.last_seconds or 0.0) + tm.after_seconds
    start = round(start, 3)
    rng = np.random.default_rng(np.random.SeedSequence([scenario.output.seed, 1]))
    count = (int(np.floor(duration * tm.fps + 1e-9)) + 1 if tm.fps is not None else
             len(tm.frame_times_s) if tm.frame_times_s is not None else
             sum(b.count for b in tm.bursts))
    if count > MAX_FRAMES:
        raise InputError(f"[time] {count} frames are more than {MAX_FRAMES}", scenario.path)
    if tm.fps is not None:
        n = count
        steps = np.full(n - 1, 1.0 / tm.fps)
        if tm.fps_jitter:
            steps *= np.clip(1.0 + tm.fps_jitter * rng.standard_normal(n - 1), 0.2, None)
        offsets = np.concatenate([[0.0], np.cumsum(steps)])
        offsets = offsets[offsets <= duration + 1e-9]
    elif tm.frame_times_s is not None:
        offsets = np.asarray(tm.frame_times_s)
    else:
        offsets = np.sort(np.concatenate([b.start_s + np.arange(b.count) / b.fps
                                          for b in tm.bursts]))
    if offsets[-1] > duration + 1e-9:
        raise InputError(f"[time] frames reach {offsets[-1]:g} s after the window's start, "
                         f"beyond its {duration:g} s", scenario.path)
    step = 1.0 / VIDEO_TIME_BASE_HZ if scenario.output.format == "h264" else STILL_TIME_STEP_S
    ticks = np.round(offsets / step)
    if np.any(np.diff(ticks) <= 0):
        raise InputError(f"[time] two frames fall within one time step ({step:g} s) or "
                         "bursts overlap", scenario.path)
    return start + ticks * step


def _check_span(scenario: Scenario, altitude_deg: np.ndarray, track: SunTrack) -> None:
    """Refuse a window whose first frame shows the Sun above the traced transfer curve."""
    top = float(np.max(track.altitude_deg + track.semidiameter_arcsec / 3600.0))
    traced = float(np.nanmin(altitude_deg[:, -1]))
    if top > traced:
        raise InputError(f"[time] in the window the Sun's upper limb reaches "
                         f"{(top - traced) * 60:.1f} arcmin above the highest traced ray; "
                         "start later (the forward model traces only the sky near the "
                         "horizon)", scenario.path)


# --- one frame ----------------------------------------------------------------------


def render_radiance(sim: Simulation, index: int, shake_px: tuple[float, float] = (0.0, 0.0),
                    sparkle: np.ndarray | float = 1.0) -> np.ndarray:
    """The scene of frame ``index`` as the lens forms it, before blur and the sensor.

    Parameters
    ----------
    sim : Simulation
    index : int
        Frame number.
    shake_px : (float, float)
        Displacement of the whole image (dx right, dy down) [px].
    sparkle : (H, W) ndarray or float
        Random brightness factors of the sun glitter (mean 1); 1 for a smooth glitter.

    Returns
    -------
    (H, W, 3) ndarray of float32
        Radiance per channel (R, G, B), 1 = the disc's centre outside the atmosphere.
    """
    cam = sim.scenario.camera
    tr = sim.track
    a_c, sd = float(tr.altitude_deg[index]), float(tr.semidiameter_arcsec[index])
    d_az = (float(tr.azimuth_deg[index]) - sim.camera_azimuth_deg + 180.0) % 360.0 - 180.0
    scale = np.cos(np.radians(a_c)) * 3600.0 / cam.plate_scale_arcsec_per_px
    u_sun = d_az * scale
    frame = _background(sim, index, u_sun, shake_px, sparkle)
    rates = (float(tr.altitude_rate_deg_per_s[index]),
             float(tr.azimuth_rate_deg_per_s[index]) * scale)
    _add_sun(frame, sim, a_c, sd, u_sun, rates, shake_px)
    return frame


def _rotation(cam) -> tuple[float, float, float, float]:
    rho = np.radians(cam.roll_deg)
    return float(np.cos(rho)), float(np.sin(rho)), (cam.width_px - 1) / 2.0, cam.horizon_row()


def _unrolled_shift(cam, dx: float, dy: float) -> tuple[float, float]:
    """An image displacement (dx right, dy down) in horizon coordinates (du, dv) [px]."""
    cos, sin, _, _ = _rotation(cam)
    return dx * cos - dy * sin, -dx * sin - dy * cos


def _add_sun(frame, sim, a_c, sd, u_sun, rates, shake) -> None:
    """Draw the solar disc of every channel into ``frame`` (in place)."""
    cam = sim.scenario.camera
    cos, sin, xc, y_h = _rotation(cam)
    plate = cam.plate_scale_arcsec_per_px
    rs = cam.rolling_shutter_s
    shifts = [_unrolled_shift(cam, shake[0] + cam.offset_px(ch.name)[0],
                              shake[1] + cam.offset_px(ch.name)[1]) for ch in sim.channels]
    margin = 2.0 + max(max(abs(du), abs(dv)) for du, dv in shifts)
    drift = abs(rates[0]) * rs
    v_range = _visible_rows_px(sim, a_c - drift - sd / 3600, a_c + sd / 3600)
    if v_range is None:
        return
    half = _half_width_px(sim, a_c, sd) + abs(rates[1]) * rs
    rows = np.arange(np.floor(y_h - v_range[1] - margin), np.ceil(y_h - v_range[0] + margin) + 1)
    cols = np.arange(np.floor(xc + u_sun - half - margin), np.ceil(xc + u_sun + half + margin) + 1)
    if cos == 1.0:
        rows = rows[(rows >= 0) & (rows < cam.height_px)]
        cols = cols[(cols >= 0) & (cols < cam.width_px)]
    if rows.size == 0 or cols.size == 0:
        return
    y_img = y_h - u_sun * sin - (y_h - rows) * cos  # image row of each patch row
    dt = rs * np.clip(y_img, 0, cam.height_px - 1) / max(cam.height_px - 1, 1)
    patch = np.empty((rows.size, cols.size, 3), np.float32)
    for c, ch in enumerate(sim.channels):
        du, dv = shifts[c]
        patch[..., c] = sun_patch(ch, y_h - rows - 0.5 - dv,
                                  np.append(cols, cols[-1] + 1) - xc - 0.5 - du,
                                  a_c + rates[0] * dt, u_sun + rates[1] * dt, sd, plate,
                                  sim.horizon_elevation_deg)
    _place(frame, patch, int(rows[0]), int(cols[0]), cos, sin, xc, y_h)


def _place(frame, patch, row0, col0, cos, sin, xc, y_h) -> None:
    """Add a patch of the unrolled image into the frame, turned by the roll."""
    if cos == 1.0:
        frame[row0:row0 + patch.shape[0], col0:col0 + patch.shape[1]] += patch
        return
    # unrolled (x', y') -> image: x = xc + (x' - xc) cos - (y_h - y') sin,
    #                             y = y_h - (x' - xc) sin - (y_h - y') cos
    m = np.array([[cos, sin, xc + (col0 - xc) * cos - (y_h - row0) * sin],
                  [-sin, cos, y_h - (col0 - xc) * sin - (y_h - row0) * cos]])
    h, w = patch.shape[:2]
    corners = m @ np.array([[0, w, 0, w], [0, 0, h, h], [1, 1, 1, 1]], float)
    x0, y0 = (int(max(np.floor(corners[i].min()) - 1, 0)) for i in (0, 1))
    x1 = int(min(np.ceil(corners[0].max()) + 2, frame.shape[1]))
    y1 = int(min(np.ceil(corners[1].max()) + 2, frame.shape[0]))
    if x1 <= x0 or y1 <= y0:
        return
    m[:, 2] -= (x0, y0)
    frame[y0:y1, x0:x1] += cv2.warpAffine(patch, m, (x1 - x0, y1 - y0), flags=cv2.INTER_LINEAR,
                                          borderMode=cv2.BORDER_CONSTANT, borderValue=0)


def _visible_rows_px(sim, a_low_deg, a_high_deg):
    """Elevations [px above the origin] of the rays that see true altitudes in a range."""
    curve = sim.prediction.model.curve
    e, a = curve.apparent_elevation_deg, curve.true_altitude_deg
    with np.errstate(invalid="ignore"):
        lo_p, hi_p = np.fmin(a[:, :-1], a[:, 1:]), np.fmax(a[:, :-1], a[:, 1:])
        hit = (hi_p >= a_low_deg) & (lo_p <= a_high_deg)
    tops = [e[:, 1:][hit].max()] if hit.any() else []
    lows = [e[:, :-1][hit].min()] if hit.any() else []
    beyond = a[:, -1] < a_high_deg  # the disc reaches above the traced rays
    if beyond.any():
        slope = (a[:, -1] - a[:, -2]) / (e[:, -1] - e[:, -2])
        tops.append(float(np.max(e[beyond, -1] + (a_high_deg - a[beyond, -1]) / slope[beyond])))
        lows.append(float(np.min(np.where(a[beyond, -1] < a_low_deg, e[beyond, -1] + (
            a_low_deg - a[beyond, -1]) / slope[beyond], e[beyond, -1]))))
    if not tops:
        return None
    to_px = 3600.0 / sim.scenario.camera.plate_scale_arcsec_per_px
    return ((min(lows) - sim.horizon_elevation_deg) * to_px,
            (max(tops) - sim.horizon_elevation_deg) * to_px)


def _half_width_px(sim, a_c, sd) -> float:
    """Half the widest visible chord of the disc [px]."""
    lowest = float(np.nanmin(sim.prediction.model.curve.true_altitude_deg))
    gap = max(lowest - a_c, 0.0) * 3600.0
    half = float(np.sqrt(max(sd * sd - gap * gap, 0.0)))
    return half / sim.scenario.camera.plate_scale_arcsec_per_px


def _background(sim, index, u_sun, shake, sparkle) -> np.ndarray:
    """Twilight sky above the horizon, darker sea below, and the sun glitter on it.

    The smooth parts are evaluated every ``_COARSE_PX`` pixels and interpolated; the
    horizon's edge (per channel, with its colour offset) and the glitter's sparkle are
    drawn at full resolution.
    """
    cam, scene = sim.scenario.camera, sim.scenario.scene
    light = sim.sun_light[:, index] * scene.glitter_level if scene.glitter else np.zeros(3)
    if scene.sky_level == 0 and light.max() <= 0:
        return np.zeros((cam.height_px, cam.width_px, 3), np.float32)
    cos, sin, xc, y_h = _rotation(cam)
    deg = cam.plate_scale_arcsec_per_px / 3600.0
    f = _COARSE_PX
    nx, ny = -(-cam.width_px // f) + 1, -(-cam.height_px // f) + 1
    xs = (f * np.arange(nx) + (f - 1) / 2 - xc - shake[0])[None, :]
    ys = (f * np.arange(ny) + (f - 1) / 2 - y_h - shake[1])[:, None]
    h = (-xs * sin - ys * cos) * deg  # degrees above the green horizon
    du = (xs * cos - ys * sin) * deg - u_sun * deg  # degrees from the Sun's azimuth
    level = scene.sky_level * sim.centre_signal["g"]
    aureole = np.exp(-(du * du + h * h) / (2 * AUREOLE_DEG**2))
    depth = np.maximum(-h, 0)
    width = GLITTER_WIDTH_DEG + GLITTER_SPREAD * depth
    smooth = np.stack([
        level * (0.5 + 0.5 * np.exp(-np.maximum(h, 0) / SKY_FALLOFF_DEG)) * (1 + 2 * aureole),
        level * scene.sea_level * (0.6 + 0.4 * np.exp(-depth / SEA_FALLOFF_DEG)) * (1 + aureole),
        np.exp(-depth / GLITTER_DEPTH_DEG - du * du / (2 * width * width))], axis=-1)
    sky, sea, glitter = (cv2.resize(np.ascontiguousarray(smooth[..., i], np.float32),
                                    (f * nx, f * ny), interpolation=cv2.INTER_LINEAR
                                    )[:cam.height_px, :cam.width_px] for i in range(3))
    xs1 = np.arange(cam.width_px, dtype=np.float32)[None, :] - np.float32(xc + shake[0])
    ys1 = np.arange(cam.height_px, dtype=np.float32)[:, None] - np.float32(y_h + shake[1])
    v = -xs1 * np.float32(sin) - ys1 * np.float32(cos)  # (H, 1) without roll, else (H, W)
    sky -= sea
    if light.max() > 0:
        glitter *= sparkle
        glitter *= 1 - np.clip(v + np.float32(0.5), 0.0, 1.0)
    out = np.empty((cam.height_px, cam.width_px, 3), np.float32)
    for c, ch in enumerate(sim.channels):
        ox, oy = cam.offset_px(ch.name)
        shift = -ox * sin - oy * cos + sim.horizon_offset_px[c] - 0.5
        plane = np.clip(v - np.float32(shift), 0.0, 1.0)  # share of the pixel above the sea
        plane = plane * sky
        plane += sea
        plane *= np.float32(SKY_COLOUR[ch.name])
        if light.max() > 0:
            plane += glitter * np.float32(light[c])
        out[..., c] = plane
    return out


# --- the camera ---------------------------------------------------------------------


def iter_frames(sim: Simulation, *, threads: int = 2
                ) -> Iterator[tuple[FrameRecord, np.ndarray]]:
    """Render, blur, expose, add noise and encode every frame, in order, one at a time.

    Up to ``threads`` frames are rendered ahead in worker threads (numpy and OpenCV
    release the GIL); exposure and noise follow in frame order. Memory does not grow with
    the number of frames.

    Yields
    ------
    record : FrameRecord
    image : (H, W, 3) ndarray of uint8 (uint16 for TIFF)
        sRGB-encoded R, G, B.
    """
    cam, out = sim.scenario.camera, sim.scenario.output
    rng = np.random.default_rng(np.random.SeedSequence([out.seed, 2]))
    n_px = cam.height_px * cam.width_px
    noise_bank = rng.standard_normal(3 * n_px + _BANK_SPARE, dtype=np.float32)
    sparkle_bank = rng.standard_exponential(n_px + _BANK_SPARE, dtype=np.float32) ** 2 / 2

    def lens(i: int, shake: tuple[float, float], start: int) -> np.ndarray:
        sparkle = sparkle_bank[start:start + n_px].reshape(cam.height_px, cam.width_px)
        radiance = render_radiance(sim, i, shake, sparkle)
        if cam.psf_sigma_px > 0:
            radiance = cv2.GaussianBlur(radiance, (0, 0), cam.psf_sigma_px,
                                        borderType=cv2.BORDER_REFLECT)
        return radiance

    times = sim.frame_times_unix_s
    gain = sim.locked_gain_e
    pending: deque = deque()
    with ThreadPoolExecutor(max(threads, 1)) as pool:
        for i in range(times.size + 1):
            if i < times.size:
                shake = (tuple(float(v) for v in rng.normal(0.0, cam.shake_px, 2))
                         if cam.shake_px else (0.0, 0.0))
                start = rng.integers(0, _BANK_SPARE, 2)
                pending.append((i, shake, start[1], pool.submit(lens, i, shake, start[0])))
            while pending and (len(pending) > threads or i == times.size):
                k, shake, noise_at, future = pending.popleft()
                radiance = future.result()
                gain = _exposure_gain(sim, k, radiance, gain)
                noise = noise_bank[noise_at:noise_at + 3 * n_px].reshape(radiance.shape)
                image = _sensor(radiance, gain, cam, noise, sim.scenario.bit_depth)
                t = float(times[k])
                yield (FrameRecord(k, t, t + sim.clock_error_s, float(gain),
                                   cam.exposure_time_s * gain / sim.locked_gain_e, shake),
                       image)


def _exposure_gain(sim: Simulation, k: int, radiance: np.ndarray, gain: float) -> float:
    """Electrons per unit radiance: locked, or following the frame's brightest pixel."""
    cam = sim.scenario.camera
    if cam.exposure != "auto":
        return sim.locked_gain_e
    target = cam.exposure_level * cam.full_well_e / max(float(radiance.max()), 1e-30)
    if k:
        dt = sim.frame_times_unix_s[k] - sim.frame_times_unix_s[k - 1]
        target = gain * (target / gain) ** (1.0 - np.exp(-dt / cam.auto_exposure_lag_s))
    return min(target, cam.auto_exposure_max_gain * sim.locked_gain_e)
