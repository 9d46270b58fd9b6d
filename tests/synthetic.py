"""Synthetic sunset frames with known truth, for the image-stage tests.

A frame is drawn per channel in that channel's own line-aligned coordinates (``s``
along the horizon, ``h`` perpendicular, up positive), so the lens's lateral colour
offset moves everything in that channel (horizon, disc, glitter) together:

- sky above, sea below a straight (rolled) horizon, antialiased by pixel coverage;
- the solar disc: an ellipse (horizontal semi-axis ``radius_px``, vertical
  ``flattening * radius_px``) with linear limb darkening ``1 - u (1 - mu)``, hidden
  below the horizon, supersampled 5x5 per pixel; its apex height above the channel's
  horizon is given per channel (dispersion lifts green and blue above red);
- an optional glitter column on the sea below the Sun;
- Gaussian PSF, optional motion blur ("shake": a line kernel centred on the mean
  position, so the truth does not move), Poisson + read noise, clipping at 1.0, and
  an optional JPEG round trip (8-bit sRGB, OpenCV's default 4:2:0 chroma).

Used by tests only; the physics of real frames is in ``analyse.simulate``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np
from scipy.ndimage import convolve, gaussian_filter

from analyse.frames import linear_to_srgb, srgb_to_linear

CHANNELS = ("r", "g", "b")
SUPERSAMPLE = 5  # sub-samples per pixel side for the disc


@dataclass(frozen=True)
class Scene:
    """What to draw. Lengths in pixels, levels in linear units (0..1)."""

    shape: tuple[int, int] = (220, 300)
    horizon_row_px: float = 150.3  # green horizon's y at the centre column
    roll_deg: float = 0.0  # counter-clockwise positive (horizon rising to the right)
    sun_s_px: float = 0.0  # Sun centre along the horizon from the centre column
    radius_px: float = 50.0  # horizontal semidiameter
    flattening: float = 1.0  # vertical / horizontal semi-axis
    apex_height_px: dict = field(default_factory=lambda: {"r": 30.0, "g": 32.0, "b": 33.0})
    limb_darkening: dict = field(default_factory=lambda: {"r": 0.58, "g": 0.66, "b": 0.74})
    disc_level: dict = field(default_factory=lambda: {"r": 0.7, "g": 0.45, "b": 0.28})
    sky_level: dict = field(default_factory=lambda: {"r": 0.22, "g": 0.14, "b": 0.09})
    sea_level: dict = field(default_factory=lambda: {"r": 0.05, "g": 0.04, "b": 0.035})
    psf_sigma_px: float = 1.0
    colour_offset_px: dict = field(default_factory=dict)  # {"r": (dx, dy), "b": (dx, dy)}
    glitter: bool = False
    shake_px: float = 0.0  # length of the motion-blur line
    shake_angle_deg: float = 30.0
    gain_e: float = 4000.0  # electrons per unit level (Poisson noise)
    read_noise_e: float = 4.0
    sun: bool = True
    jpeg_quality: int | None = None
    seed: int = 0


@dataclass(frozen=True)
class Truth:
    """The green horizon line and, per channel, the apex of the upper limb."""

    row_px: float  # green horizon at x_ref
    x_ref_px: float
    slope: float
    apex_xy_px: dict  # per channel, image (x, y) of the limb's apex
    apex_height_px: dict  # per channel, above the green horizon (perpendicular)
    chord_px: dict  # per channel, chord on its own horizon (or the widest chord)
    colour_dy_px: dict  # vertical offset of r and b relative to g (y down)

    def height_above(self, x, y):
        """Height above the true green horizon [px], as HorizonLine.height_above."""
        return (self.row_px + self.slope * (np.asarray(x) - self.x_ref_px)
                - np.asarray(y)) / math.hypot(1.0, self.slope)


def _frame_axes(scene: Scene, dxy: tuple[float, float]):
    """Origin, along-line unit vector and up-normal of one channel's horizon."""
    slope = -math.tan(math.radians(scene.roll_deg))
    norm = math.hypot(1.0, slope)
    origin = np.array([0.5 * (scene.shape[1] - 1) + dxy[0], scene.horizon_row_px + dxy[1]])
    return origin, np.array([1.0, slope]) / norm, np.array([slope, -1.0]) / norm


def _sky_and_sea(scene: Scene, c: str, x, y, origin, t, n) -> np.ndarray:
    h = (x - origin[0]) * n[0] + (y - origin[1]) * n[1]
    cover = np.clip(h * math.hypot(1.0, t[1] / t[0]) + 0.5, 0.0, 1.0)
    sky = scene.sky_level[c] * np.exp(-np.maximum(h, 0.0) / 250.0)
    sea = scene.sea_level[c] * (1.0 + 0.002 * np.maximum(-h, 0.0))
    return cover * sky + (1.0 - cover) * sea


def _disc(scene: Scene, c: str, origin, t, n) -> tuple[np.ndarray, tuple[int, int]]:
    """Supersampled disc in its bounding box; returns the box image and its corner."""
    rx, ry = scene.radius_px, scene.radius_px * scene.flattening
    hc = scene.apex_height_px[c] - ry
    centre = origin + scene.sun_s_px * t + hc * n
    x0, y0 = int(math.floor(centre[0] - rx - 3)), int(math.floor(centre[1] - ry - 3))
    x1, y1 = int(math.ceil(centre[0] + rx + 4)), int(math.ceil(centre[1] + ry + 4))
    k = (np.arange(SUPERSAMPLE) + 0.5) / SUPERSAMPLE - 0.5
    yy = (np.arange(y0, y1)[:, None] + k[None, :]).ravel()
    xx = (np.arange(x0, x1)[:, None] + k[None, :]).ravel()
    x, y = np.meshgrid(xx, yy)
    s = (x - origin[0]) * t[0] + (y - origin[1]) * t[1] - scene.sun_s_px
    h = (x - origin[0]) * n[0] + (y - origin[1]) * n[1]
    rho2 = (s / rx) ** 2 + ((h - hc) / ry) ** 2
    mu = np.sqrt(np.clip(1.0 - rho2, 0.0, None))
    u = scene.limb_darkening[c]
    val = np.where((rho2 < 1.0) & (h > 0.0), scene.disc_level[c] * (1.0 - u * (1.0 - mu)), 0.0)
    val = val.reshape(y1 - y0, SUPERSAMPLE, x1 - x0, SUPERSAMPLE).mean(axis=(1, 3))
    return val, (y0, x0)


def _paste(img: np.ndarray, patch: np.ndarray, corner: tuple[int, int]) -> None:
    y0, x0 = corner
    ya, xa = max(y0, 0), max(x0, 0)
    yb, xb = min(y0 + patch.shape[0], img.shape[0]), min(x0 + patch.shape[1], img.shape[1])
    if yb > ya and xb > xa:
        img[ya:yb, xa:xb] += patch[ya - y0:yb - y0, xa - x0:xb - x0]


def _glitter(scene: Scene, c: str, x, y, origin, t, n, rng_field) -> np.ndarray:
    s = (x - origin[0]) * t[0] + (y - origin[1]) * t[1] - scene.sun_s_px
    h = (x - origin[0]) * n[0] + (y - origin[1]) * n[1]
    half = scene.radius_px * (0.4 + 0.01 * np.maximum(-h, 0.0))
    column = (h < -1.0) & (np.abs(s) < half)
    return np.where(column, 0.6 * scene.disc_level[c] * rng_field, 0.0)


def _shake_kernel(length: float, angle_deg: float) -> np.ndarray:
    half = int(math.ceil(length / 2)) + 1
    ker = np.zeros((2 * half + 1, 2 * half + 1))
    a = math.radians(angle_deg)
    for f in np.linspace(-0.5, 0.5, 201):
        px, py = half + f * length * math.cos(a), half - f * length * math.sin(a)
        i, j = int(math.floor(py)), int(math.floor(px))
        fy, fx = py - i, px - j
        ker[i, j] += (1 - fy) * (1 - fx)
        ker[i + 1, j] += fy * (1 - fx)
        ker[i, j + 1] += (1 - fy) * fx
        ker[i + 1, j + 1] += fy * fx
    return ker / ker.sum()


def _jpeg_round_trip(img: np.ndarray, quality: int) -> np.ndarray:
    code = np.round(np.clip(linear_to_srgb(np.clip(img, 0, 1)), 0, 1) * 255).astype(np.uint8)
    ok, buf = cv2.imencode(".jpg", np.ascontiguousarray(code[..., ::-1]),
                           [cv2.IMWRITE_JPEG_QUALITY, quality])
    assert ok
    dec = cv2.imdecode(buf, cv2.IMREAD_COLOR)[..., ::-1]
    return srgb_to_linear(dec.astype(np.float32) / 255.0)


def render(scene: Scene) -> tuple[np.ndarray, Truth]:
    """Draw the scene: an (H, W, 3) float32 linear-light frame and its truth."""
    rng = np.random.default_rng(scene.seed)
    hgt, wid = scene.shape
    y, x = np.mgrid[0:hgt, 0:wid].astype(float)
    sparkle = rng.exponential(1.0, (hgt, wid)) * (rng.random((hgt, wid)) < 0.12)
    img = np.zeros((hgt, wid, 3))
    for i, c in enumerate(CHANNELS):
        origin, t, n = _frame_axes(scene, scene.colour_offset_px.get(c, (0.0, 0.0)))
        plane = _sky_and_sea(scene, c, x, y, origin, t, n)
        if scene.sun:
            patch, corner = _disc(scene, c, origin, t, n)
            _paste(plane, patch, corner)
            if scene.glitter:
                plane += _glitter(scene, c, x, y, origin, t, n, sparkle)
        plane = gaussian_filter(plane, scene.psf_sigma_px, mode="nearest")
        if scene.shake_px > 0:
            plane = convolve(plane, _shake_kernel(scene.shake_px, scene.shake_angle_deg),
                             mode="nearest")
        img[..., i] = plane
    electrons = rng.poisson(np.clip(img, 0, None) * scene.gain_e)
    img = (electrons + rng.normal(0.0, scene.read_noise_e, img.shape)) / scene.gain_e
    img = np.clip(img, 0.0, 1.0)
    if scene.jpeg_quality is not None:
        img = _jpeg_round_trip(img, scene.jpeg_quality)
    return img.astype(np.float32), _truth(scene)


def _truth(scene: Scene) -> Truth:
    origin_g, t, n = _frame_axes(scene, (0.0, 0.0))
    rx, ry = scene.radius_px, scene.radius_px * scene.flattening
    truth = Truth(origin_g[1], origin_g[0], t[1] / t[0], {}, {}, {},
                  {c: scene.colour_offset_px.get(c, (0.0, 0.0))[1] for c in ("r", "b")})
    for c in CHANNELS:
        origin, _, _ = _frame_axes(scene, scene.colour_offset_px.get(c, (0.0, 0.0)))
        apex = origin + scene.sun_s_px * t + scene.apex_height_px[c] * n
        truth.apex_xy_px[c] = (float(apex[0]), float(apex[1]))
        truth.apex_height_px[c] = float(truth.height_above(apex[0], apex[1]))
        hc = scene.apex_height_px[c] - ry
        truth.chord_px[c] = 2 * rx * math.sqrt(max(1 - (hc / ry) ** 2, 0.0)) if hc < 0 else 2 * rx
    return truth
