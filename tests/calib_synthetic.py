"""Synthetic calibration sequences with known truth, for tests/test_calibrate.py.

The Sun moves along its ephemeris path (analyse.sun) and is drawn through a rolled
rectilinear camera, independently of calibration.optics: each (sub)pixel is turned
into a sky direction by rotating its offset from the frame centre by -roll and leaving
the tangent plane at the boresight. The apparent altitude of that direction is turned
into a true altitude with Bennett's refraction formula (per channel, scaled by the
refractivity of its wavelength after Edlen 1966), so the disc is flattened and the
channels dispersed as in the real sky. Lateral colour shifts each channel's image by
``d0 + k (p - centre)``. Limb-darkened disc (linear law), 6 x 6 supersampling of pixels
on the limb, a sea below the dip if in view, Gaussian blur, photon and read noise,
16-bit sRGB PNG. Channel wavelengths are the default bands' effective wavelengths for
the Sun's altitude in each frame (calibration.bands).

References: Bennett, G. G. (1982), J. Navigation 35, 255 (refraction against apparent
altitude, at 1010 hPa and 10 C, scaled by (P/1010)(283/(273+T))); Edlen, B. (1966),
Metrologia 2, 71 (dispersion of standard air; formula from memory).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter

from analyse.frames import linear_to_srgb
from analyse.sun import sun_track
from calibration.bands import airmass_kasten_young1989, default_bands, effective_wavelength_nm

CHANNELS = ("r", "g", "b")
SUPERSAMPLE = 6
ARCSEC_PER_RAD = 648000.0 / math.pi


@dataclass(frozen=True)
class CalibScene:
    """A calibration sequence. Boresights per frame (apparent az, alt) [deg]."""

    times_unix_s: tuple
    boresights_deg: tuple  # per frame (az, alt)
    shape: tuple = (448, 512)  # (H, W)
    plate_scale_arcsec_per_px: float = 15.0
    roll_deg: float = 1.3
    latitude_deg: float = 35.2
    longitude_deg: float = -20.4
    eye_height_m: float = 12.0
    temperature_C: float = 15.0
    pressure_hPa: float = 1013.25
    colour_d0_px: dict = field(default_factory=lambda: {"r": (0.30, -0.20), "b": (-0.25, 0.35)})
    colour_k: dict = field(default_factory=lambda: {"r": 4e-4, "b": -3e-4})
    wavelength_nm: dict | None = None  # per channel [nm]; None: default bands' effective ones
    dispersion_factor: float = 1.0
    limb_u: dict = field(default_factory=lambda: {"r": 0.55, "g": 0.62, "b": 0.72})
    disc_level: dict = field(default_factory=lambda: {"r": 0.75, "g": 0.62, "b": 0.45})
    sky_level: dict = field(default_factory=lambda: {"r": 0.10, "g": 0.12, "b": 0.16})
    sea_level: dict = field(default_factory=lambda: {"r": 0.03, "g": 0.035, "b": 0.04})
    psf_sigma_px: float = 1.0
    gain_e: float = 20000.0
    read_noise_e: float = 5.0
    sun: bool = True
    seed: int = 0

    @property
    def centre_px(self) -> tuple[float, float]:
        return (0.5 * (self.shape[1] - 1), 0.5 * (self.shape[0] - 1))

    def colour_offset_at(self, c: str, x, y) -> tuple:
        """True lateral colour displacement of channel c at image position (x, y) [px]."""
        if c == "g":
            return np.zeros(np.shape(x)), np.zeros(np.shape(y))
        cx, cy = self.centre_px
        k, (d0x, d0y) = self.colour_k[c], self.colour_d0_px[c]
        return d0x + k * (np.asarray(x) - cx), d0y + k * (np.asarray(y) - cy)


def edlen1966_refractivity(wavelength_nm) -> np.ndarray:
    """(n - 1) of standard air (15 C, 101325 Pa) [-]; Edlen 1966 (from memory)."""
    s2 = (1000.0 / np.asarray(wavelength_nm, dtype=float)) ** 2
    return (8342.13 + 2406030.0 / (130.0 - s2) + 15997.0 / (38.9 - s2)) * 1e-8


def bennett1982_arcmin(apparent_alt_deg, temperature_C: float, pressure_hPa: float):
    """Refraction against apparent altitude [arcmin], Bennett 1982, scaled to T and P."""
    h = np.asarray(apparent_alt_deg, dtype=float)
    r = 1.0 / np.tan(np.radians(h + 7.31 / (h + 4.4)))
    return r * (pressure_hPa / 1010.0) * (283.0 / (273.0 + temperature_C))


def refraction_arcmin(scene: CalibScene, c: str, apparent_alt_deg) -> np.ndarray:
    """The scene's refraction of channel c: Bennett at 550 nm, dispersed after Edlen."""
    ratio = edlen1966_refractivity(scene.wavelength_nm[c]) / edlen1966_refractivity(550.0)
    factor = 1.0 + scene.dispersion_factor * (ratio - 1.0)
    return bennett1982_arcmin(apparent_alt_deg, scene.temperature_C, scene.pressure_hPa) * factor


def dip_deg(eye_height_m: float) -> float:
    """Dip of the sea horizon, 1.76' sqrt(h) (nautical almanacs)."""
    return 1.76 * math.sqrt(eye_height_m) / 60.0


def apparent_centre_deg(scene: CalibScene, t: float) -> tuple[float, float]:
    """Apparent (az, alt) of the green disc centre at time t, refraction solved by iteration."""
    tr = sun_track(np.array([t]), scene.latitude_deg, scene.longitude_deg, scene.eye_height_m)
    h_true = float(tr.altitude_deg[0])
    h = h_true
    for _ in range(8):
        h = h_true + float(refraction_arcmin(scene, "g", h)) / 60.0
    return float(tr.azimuth_deg[0]), h


def _sky_direction(scene: CalibScene, x, y, boresight) -> tuple[np.ndarray, np.ndarray]:
    """Apparent (az, alt) [deg] seen at image position (x, y) for a boresight (az, alt)."""
    cx, cy = scene.centre_px
    f = ARCSEC_PER_RAD / scene.plate_scale_arcsec_per_px
    xi_r, eta_r = (np.asarray(x) - cx) / f, (cy - np.asarray(y)) / f
    r = math.radians(scene.roll_deg)
    xi = xi_r * math.cos(r) + eta_r * math.sin(r)  # undo the roll (image rotated by +roll)
    eta = -xi_r * math.sin(r) + eta_r * math.cos(r)
    a0, h0 = math.radians(boresight[0]), math.radians(boresight[1])
    bore = np.array([math.cos(h0) * math.sin(a0), math.cos(h0) * math.cos(a0), math.sin(h0)])
    e_az = np.array([math.cos(a0), -math.sin(a0), 0.0])
    e_alt = np.array([-math.sin(h0) * math.sin(a0), -math.sin(h0) * math.cos(a0), math.cos(h0)])
    v = bore + xi[..., None] * e_az + eta[..., None] * e_alt
    v /= np.linalg.norm(v, axis=-1, keepdims=True)
    return (np.degrees(np.arctan2(v[..., 0], v[..., 1])) % 360.0,
            np.degrees(np.arcsin(np.clip(v[..., 2], -1, 1))))


def _angular_distance_deg(az1, alt1, az2, alt2):
    a1, h1, a2, h2 = (np.radians(v) for v in (az1, alt1, az2, alt2))
    c = np.sin(h1) * np.sin(h2) + np.cos(h1) * np.cos(h2) * np.cos(a1 - a2)
    return np.degrees(np.arccos(np.clip(c, -1.0, 1.0)))


def _horizon_altitude(scene: CalibScene, boresight) -> np.ndarray | None:
    """Apparent altitude of every pixel [deg] when the sea horizon is in view, else None."""
    h, w = scene.shape
    dip = dip_deg(scene.eye_height_m)
    corners = _sky_direction(scene, np.array([0.0, w - 1.0]), np.array([h - 1.0, h - 1.0]),
                             boresight)[1]
    if corners.min() > -dip + 0.05:
        return None
    yy, xx = np.mgrid[0:h, 0:w].astype(float)
    return _sky_direction(scene, xx, yy, boresight)[1]


def _sky_and_sea(scene: CalibScene, c: str, alt_g: np.ndarray | None) -> np.ndarray:
    """Sky with a faint vertical gradient, and the sea below the dip where in view. The
    channel's altitude map is green's moved by its colour offset along the vertical."""
    h, w = scene.shape
    yy, xx = np.mgrid[0:h, 0:w].astype(float)
    img = scene.sky_level[c] * (1.0 + 0.05 * (yy / h))
    if alt_g is None:
        return img
    pix_deg = scene.plate_scale_arcsec_per_px / 3600.0
    ddx, ddy = scene.colour_offset_at(c, xx, yy)
    r = math.radians(scene.roll_deg)
    alt = alt_g + pix_deg * (ddx * math.sin(r) + ddy * math.cos(r))
    sea = np.clip(0.5 - (alt + dip_deg(scene.eye_height_m)) / pix_deg, 0.0, 1.0)
    return img * (1 - sea) + scene.sea_level[c] * sea


def _disc_box(scene: CalibScene, sun, boresight) -> tuple[int, int, int, int]:
    """Rows and columns holding the disc, from a coarse grid (y0, y1, x0, x1)."""
    h, w = scene.shape
    step = 4
    yy, xx = np.mgrid[0:h:step, 0:w:step].astype(float)
    az, alt = _sky_direction(scene, xx, yy, boresight)
    gamma = _angular_distance_deg(az, alt - refraction_arcmin(scene, "g", alt) / 60.0,
                                  sun[0], sun[1])
    ys, xs = np.nonzero(gamma < sun[2] + (step + 4) * scene.plate_scale_arcsec_per_px / 3600.0)
    if ys.size == 0:
        return 0, 0, 0, 0
    return (max(0, ys.min() * step - 2 * step), min(h, ys.max() * step + 2 * step),
            max(0, xs.min() * step - 2 * step), min(w, xs.max() * step + 2 * step))


def _disc_values(scene: CalibScene, c: str, sun, boresight, x, y):
    """Limb-darkened disc brightness seen in channel c at image points (x, y) [linear],
    and the points' angular distance from the Sun's centre [deg]."""
    ddx, ddy = scene.colour_offset_at(c, x, y)
    az, alt = _sky_direction(scene, x - ddx, y - ddy, boresight)
    true = alt - refraction_arcmin(scene, c, alt) / 60.0
    gamma = _angular_distance_deg(az, true, sun[0], sun[1])
    mu = np.sqrt(np.clip(1.0 - (gamma / sun[2]) ** 2, 0.0, 1.0))
    return np.where((gamma < sun[2]) & (alt > -dip_deg(scene.eye_height_m)),
                    scene.disc_level[c] * (1.0 - scene.limb_u[c] * (1.0 - mu)), 0.0), gamma


def _channel(scene: CalibScene, c: str, sun, boresight, alt_g) -> np.ndarray:
    """One channel of one frame, before blur and noise [linear]. Pixels within 1.5 px
    of the limb are averaged over SUPERSAMPLE x SUPERSAMPLE points, others sampled once
    (the disc is smooth inside)."""
    img = _sky_and_sea(scene, c, alt_g)
    y0, y1, x0, x1 = _disc_box(scene, sun, boresight)
    if not scene.sun or y1 <= y0 or x1 <= x0:
        return img
    ys, xs = np.mgrid[y0:y1, x0:x1].astype(float)
    disc, gamma = _disc_values(scene, c, sun, boresight, xs, ys)
    edge = np.abs(gamma - sun[2]) < 1.5 * scene.plate_scale_arcsec_per_px / 3600.0
    sub = (np.arange(SUPERSAMPLE) + 0.5) / SUPERSAMPLE - 0.5
    sx = xs[edge][:, None, None] + sub[None, None, :]
    sy = ys[edge][:, None, None] + sub[None, :, None]
    sx, sy = np.broadcast_arrays(sx, sy)
    disc[edge] = _disc_values(scene, c, sun, boresight, sx, sy)[0].mean(axis=(1, 2))
    img[y0:y1, x0:x1] += disc
    return img


def effective_wavelengths(scene: CalibScene, apparent_alt_deg: float) -> dict:
    """The default bands' effective wavelengths for the Sun at an apparent altitude [nm]
    (calibration.bands: solar spectrum, Rayleigh and aerosol extinction)."""
    m = airmass_kasten_young1989(90.0 - max(apparent_alt_deg, 0.0))
    return {c: effective_wavelength_nm(b, airmass=m, pressure_hPa=scene.pressure_hPa)
            for c, b in default_bands().items()}


def frame_scene(scene: CalibScene, i: int) -> CalibScene:
    """The scene as drawn in frame i: channel wavelengths resolved for the Sun's altitude."""
    if scene.wavelength_nm is not None:
        return scene
    probe = dataclasses.replace(scene, wavelength_nm={"g": 530.0})
    alt = apparent_centre_deg(probe, scene.times_unix_s[i])[1]
    return dataclasses.replace(scene, wavelength_nm=effective_wavelengths(scene, alt))


def render_frame(scene: CalibScene, i: int) -> np.ndarray:
    """Frame i as linear RGB (H, W, 3), blurred, noisy, clipped to 0..1."""
    t = scene.times_unix_s[i]
    scene = frame_scene(scene, i)
    tr = sun_track(np.array([t]), scene.latitude_deg, scene.longitude_deg, scene.eye_height_m)
    sun = (float(tr.azimuth_deg[0]), float(tr.altitude_deg[0]),
           float(tr.semidiameter_arcsec[0]) / 3600.0)
    rng = np.random.default_rng(scene.seed + 7919 * i)
    planes = []
    alt_g = _horizon_altitude(scene, scene.boresights_deg[i])
    for c in CHANNELS:
        img = gaussian_filter(_channel(scene, c, sun, scene.boresights_deg[i], alt_g),
                              scene.psf_sigma_px)
        e = img * scene.gain_e
        noise = rng.normal(0.0, 1.0, img.shape) * np.sqrt(e + scene.read_noise_e**2)
        img = (e + noise) / scene.gain_e
        planes.append(np.clip(img, 0.0, 1.0))
    return np.stack(planes, axis=-1)


def _iso(t: float) -> str:
    return datetime.fromtimestamp(t, tz=timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def write_folder(scene: CalibScene, folder: Path) -> Path:
    """Write the sequence as a sunset folder: PNG stills, frames.csv, observation.toml."""
    folder.mkdir(parents=True, exist_ok=True)
    rows = ["file,time_utc"]
    for i, t in enumerate(scene.times_unix_s):
        rgb = render_frame(scene, i)
        code = np.round(linear_to_srgb(rgb) * 65535.0).astype(np.uint16)
        name = f"frame_{i:03d}.png"
        cv2.imwrite(str(folder / name), code[..., ::-1], [cv2.IMWRITE_PNG_COMPRESSION, 1])
        rows.append(f"{name},{_iso(t)}")
    (folder / "frames.csv").write_text("\n".join(rows) + "\n")
    (folder / "observation.toml").write_text(
        f"[site]\nlatitude_deg = {scene.latitude_deg}\nlongitude_deg = {scene.longitude_deg}\n"
        f"eye_height_m = {scene.eye_height_m}\nhorizon = \"sea\"\n\n"
        f"[air]\ntemperature_C = {scene.temperature_C}\npressure_hPa = {scene.pressure_hPa}\n"
        "relative_humidity = 0.5\n")
    return folder


def tracking_scene(t_start: float, duration_s: float, frames: int, pointings: int,
                   offsets_deg: tuple = ((-0.0, 0.0),), **kwargs) -> CalibScene:
    """Frames evenly in time; the camera re-pointed ``pointings`` times, each time at the
    Sun's apparent centre at the middle of its stretch plus an offset (d az cos alt, d alt)."""
    base = CalibScene(times_unix_s=(), boresights_deg=(),
                      **(kwargs | {"wavelength_nm": {"g": 530.0}}))
    times = t_start + np.linspace(0.0, duration_s, frames)
    groups = np.array_split(np.arange(frames), pointings)
    bores = []
    for j, g in enumerate(groups):
        az, alt = apparent_centre_deg(base, float(times[g].mean()))
        d_az, d_alt = offsets_deg[j % len(offsets_deg)]
        bore = (az + d_az / math.cos(math.radians(alt)), alt + d_alt)
        bores += [bore] * g.size
    return CalibScene(times_unix_s=tuple(float(t) for t in times), boresights_deg=tuple(bores),
                      **kwargs)
