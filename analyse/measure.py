"""Sequence observables from the per-frame measurements.

Input: the per-frame table (times, horizon, and per channel the upper limb's apex
height above the horizon, the visible flux above the horizon and whether it is
significant). Output: per-channel last light with an uncertainty, the green segment's
duration, the green limb's height above the red one (corrected for the lens's own
colour offset) and the disc's geometry (plate scale from its width, flattening).

Last light
    See :mod:`analyse.lastlight` (re-exported here): where the flux above the line falls
    through the detection fraction of the whole disc's flux.

Disc geometry
    The image of the disc cut by the horizon is an ellipse with horizontal semi-axis
    ``rx`` (refraction does not change horizontal scale) and vertical ``ry = f rx``
    (flattening ``f``). The chord on the horizon and the apex height ``h`` above it obey
    ``w^2 = (8 rx / f) h - (4 / f^2) h^2``: a linear fit in ``h`` and ``h^2`` gives both.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from analyse.disc import blur_fraction_above
from analyse.lastlight import (
    VISIBILITY_SIGMA,
    LastLight,
    chord_depth,
    default_limb_u,
    disc_flux_from_chords,
    last_light,
    segment_depth,
    segment_fraction,
)

__all__ = [
    "CHANNELS",
    "VISIBILITY_SIGMA",
    "FrameTable",
    "LastLight",
    "DiscGeometry",
    "Observables",
    "last_light",
    "segment_fraction",
    "segment_depth",
    "chord_depth",
    "disc_flux_from_chords",
    "green_above_red",
    "disc_geometry",
    "exposure_changes",
    "relative_exposure",
    "per_exposure",
    "median_standard_error",
    "disc_flux_scale",
    "sequence_observables",
]

CHANNELS = ("r", "g", "b")
OFFSET_WINDOW_S = 60.0  # FOLDER-FORMAT.md: median over the final 60 s before red last light


@dataclass(frozen=True)
class FrameTable:
    """One row per frame; per-channel columns are dicts keyed by channel.

    Attributes (all (N,) arrays)
    ----------------------------
    t_unix_s : frame times, UTC POSIX seconds
    horizon_found : bool
    horizon_row_px, horizon_row_err_px : horizon height at the reference column [px]
    roll_deg, roll_err_deg : horizon angle, counter-clockwise positive [deg]
    apex_height_px, apex_height_err_px : per channel, upper limb above the horizon [px]
    apex_x_px : per channel, column of the apex in the frame [px]
    width_px, height_px : per channel, extent of the sun above the horizon [px]
    edge_sigma_px : per channel, blur (Gaussian sigma) of the limb's edge [px]
    visible : per channel, bool
    flux, flux_err : per channel, sky-subtracted linear flux above the horizon
    sky_level : per channel, linear
    saturated : per channel, bool
    flags : per frame, tuple of str
    sources : per frame, file name or video#index
    """

    t_unix_s: np.ndarray
    horizon_found: np.ndarray
    horizon_row_px: np.ndarray
    horizon_row_err_px: np.ndarray
    roll_deg: np.ndarray
    roll_err_deg: np.ndarray
    apex_height_px: dict[str, np.ndarray]
    apex_height_err_px: dict[str, np.ndarray]
    apex_x_px: dict[str, np.ndarray]
    width_px: dict[str, np.ndarray]
    height_px: dict[str, np.ndarray]
    edge_sigma_px: dict[str, np.ndarray]
    visible: dict[str, np.ndarray]
    flux: dict[str, np.ndarray]
    flux_err: dict[str, np.ndarray]
    sky_level: dict[str, np.ndarray]
    saturated: dict[str, np.ndarray]
    flags: tuple[tuple[str, ...], ...]
    sources: tuple[str, ...]

    def __len__(self) -> int:
        return int(self.t_unix_s.size)


def median_standard_error(values, *, std_if_no_spread: bool = False) -> float:
    """Standard error of the median of ``values``: 1.2533 x the Gaussian-equivalent
    scatter (1.4826 x the median absolute deviation) / sqrt(n) (the median's asymptotic
    efficiency for normal data, 2/pi). With ``std_if_no_spread`` a zero deviation (more
    than half the values equal) falls back to the standard deviation. NaN for fewer than
    two values."""
    v = np.asarray(values, dtype=float)
    if v.size < 2:
        return float("nan")
    spread = 1.4826 * float(np.median(np.abs(v - np.median(v))))
    if spread == 0.0 and std_if_no_spread:
        spread = float(np.std(v))
    return 1.2533 * spread / math.sqrt(v.size)


def green_above_red(table: FrameTable, *, t_last_red: float, plate_scale_arcsec_per_px: float,
                    colour_offset_dy_px: dict[str, float] | None = None,
                    colour_offset_dy_err_px: dict[str, float] | None = None,
                    window_s: float = OFFSET_WINDOW_S) -> tuple[float, float, int]:
    """Green upper limb above red [arcsec], median over the final window before red last light.

    ``colour_offset_dy_px`` holds the lens's vertical displacement of each channel's image
    relative to green (y down): a channel shifted down reads too low above the common
    horizon line and is corrected by adding its displacement. Its 1-sigma error
    ``colour_offset_dy_err_px`` [px] is common to every frame of the window, so it adds
    in quadrature to the median's standard error (the frames' scatter) and does not
    shrink with their number (NaN errors count as 0).

    Returns
    -------
    offset_arcsec, err_arcsec, frames_used
    """
    dy = colour_offset_dy_px or {}
    t = table.t_unix_s
    sel = ((t <= t_last_red) & (t >= t_last_red - window_s) & table.visible["r"]
           & table.visible["g"] & np.isfinite(table.apex_height_px["r"])
           & np.isfinite(table.apex_height_px["g"]))
    if not np.isfinite(t_last_red) or np.count_nonzero(sel) == 0:
        return float("nan"), float("nan"), 0
    h_g = table.apex_height_px["g"][sel] + dy.get("g", 0.0)
    h_r = table.apex_height_px["r"][sel] + dy.get("r", 0.0)
    d = (h_g - h_r) * plate_scale_arcsec_per_px
    med = float(np.median(d))
    de = {c: float(np.nan_to_num((colour_offset_dy_err_px or {}).get(c, 0.0), nan=0.0))
          for c in ("r", "g")}
    common = float(np.hypot(de["r"], de["g"])) * plate_scale_arcsec_per_px
    if d.size == 1:
        e = table.apex_height_err_px
        err = float(np.hypot(e["g"][sel][0], e["r"][sel][0]) * plate_scale_arcsec_per_px)
        return med, float(np.hypot(err, common)), 1
    sem = median_standard_error(d, std_if_no_spread=True)
    return med, float(np.hypot(sem, common)), int(d.size)


@dataclass(frozen=True)
class DiscGeometry:
    """Horizontal semidiameter and flattening of the disc's image, from chord and apex."""

    rx_px: float
    rx_err_px: float
    flattening: float  # vertical / horizontal semi-axis of the image
    flattening_err: float
    frames_used: int
    message: str


def disc_geometry(apex_height_px, width_px) -> DiscGeometry:
    """Fit ``w^2 = (8 rx / f) h - (4 / f^2) h^2`` to chords ``w`` and apex heights ``h`` [px].

    Needs frames spanning a good part of the disc's height (the ``h^2`` term); frames
    with the whole disc above the horizon (chord no longer on the horizon) must be
    excluded by the caller.
    """
    h = np.asarray(apex_height_px, dtype=float)
    w = np.asarray(width_px, dtype=float)
    ok = np.isfinite(h) & np.isfinite(w) & (h > 1.0) & (w > 2.0)
    if np.count_nonzero(ok) < 5:
        return DiscGeometry(np.nan, np.nan, np.nan, np.nan, int(np.count_nonzero(ok)),
                            "too few frames with a measured chord and apex")
    h, w = h[ok], w[ok]
    scale = float(np.max(h))
    a = np.vstack([h / scale, (h / scale) ** 2]).T
    coef, res, rank, _ = np.linalg.lstsq(a, w**2, rcond=None)
    if rank < 2:
        return DiscGeometry(np.nan, np.nan, np.nan, np.nan, h.size, "chords span too little height")
    p1, p2 = coef[0] / scale, coef[1] / scale**2
    if p2 >= 0 or p1 <= 0:
        return DiscGeometry(np.nan, np.nan, np.nan, np.nan, h.size,
                            "chords do not follow an ellipse (too little height spanned)")
    f = 2.0 / np.sqrt(-p2)
    rx = p1 * f / 8.0
    dof = max(h.size - 2, 1)
    sigma2 = float(np.sum((a @ coef - w**2) ** 2)) / dof
    cov = sigma2 * np.linalg.pinv(a.T @ a)
    df_dp2 = (-p2) ** -1.5
    jac = np.array([[f / 8.0 / scale, p1 / 8.0 * df_dp2 / scale**2],
                    [0.0, df_dp2 / scale**2]])
    cov_rf = jac @ cov @ jac.T
    rx_err, f_err = (float(np.sqrt(max(v, 0.0))) for v in (cov_rf[0, 0], cov_rf[1, 1]))
    if not (0.5 <= f <= 1.1 and f_err < 0.05 and rx_err < 0.02 * rx):
        return DiscGeometry(np.nan, np.nan, np.nan, np.nan, h.size,
                            f"chords span too little of the disc's height (flattening "
                            f"{f:.2f} +- {f_err:.2f})")
    return DiscGeometry(float(rx), rx_err, float(f), f_err, h.size, "")


def relative_exposure(exposure_s, iso=None) -> np.ndarray | None:
    """Each frame's exposure (time x ISO, from EXIF) over the first frame's, or None when
    a frame lacks it or it does not change (by more than 1 %).

    Linear light recorded is proportional to exposure time and gain, so a flux divided
    by it is comparable across an automatic exposure's changes (below the clip level).
    """
    t = np.array([np.nan if v is None else float(v) for v in exposure_s], dtype=float)
    g = np.array([1.0 if v is None else float(v) for v in (iso or [None] * t.size)], float)
    e = t * g
    if e.size < 2 or not np.all(np.isfinite(e) & (e > 0)):
        return None
    rel = e / e[0]
    # Changes under 1 % are EXIF rounding, not an exposure change (a judgement, no source).
    return rel if float(np.max(rel) / np.min(rel)) > 1.01 else None


def per_exposure(table: FrameTable, rel: np.ndarray) -> FrameTable:
    """``table`` with fluxes, their errors and sky levels divided by each frame's
    relative exposure (:func:`relative_exposure`)."""
    scale = {k: {c: v / rel for c, v in getattr(table, k).items()}
             for k in ("flux", "flux_err", "sky_level")}
    return dataclasses.replace(table, **scale)


def exposure_changes(sky_level: np.ndarray, *, jump: float = 0.15, run: int = 3) -> np.ndarray:
    """Frame indices where the sky level steps by more than ``jump`` (relative).

    The sky dims smoothly at sunset; an automatic exposure shows as a step: the median
    of the ``run`` frames from a frame on differs from that of the ``run`` frames before
    it; a clean step shows at the ``run`` frames around it, and is placed at their middle.
    A single frame off the trend
    (the sky beside a faint apex is noisy) moves neither median and is not a step.
    NaN levels are skipped.
    """
    s = np.asarray(sky_level, dtype=float)
    if s.size < 2:
        return np.zeros(0, dtype=int)
    log_s = np.log(np.where(s > 0, s, np.nan))
    step = np.full(s.size, np.nan)
    for k in range(1, s.size):
        before, after = log_s[max(0, k - run):k], log_s[k:k + run]
        if np.any(np.isfinite(before)) and np.any(np.isfinite(after)):
            step[k] = abs(np.nanmedian(after) - np.nanmedian(before))
    hit = np.nan_to_num(step, nan=0.0) > np.log1p(jump)
    out, k = [], 0
    while k < s.size:  # each run of hits is one step, at its middle
        if hit[k]:
            end = k
            while end + 1 < s.size and hit[end + 1]:
                end += 1
            out.append((k + end + 1) // 2)
            k = end + 1
        else:
            k += 1
    return np.asarray(out, dtype=int)


def disc_flux_scale(height_px, flux, visible, *, blur_px: float, model_height_px,
                    model_fraction, max_height_px: float) -> float:
    """The whole disc's flux in the recording's units, from the thin-segment frames.

    Each frame with a segment between three blurs and ``max_height_px`` high gives
    ``flux / (V(h) * blur share)``, with ``V(h)`` the model's visible fraction of the disc
    at that apex height (``model_height_px`` -> ``model_fraction``, increasing); the
    median of those is robust to shake and glitter.
    """
    h = np.asarray(height_px, dtype=float)
    f = np.asarray(flux, dtype=float)
    mh, mv = np.asarray(model_height_px, float), np.asarray(model_fraction, float)
    ok_m = np.isfinite(mh) & np.isfinite(mv)
    if np.count_nonzero(ok_m) < 3:
        return float("nan")
    lo = 3.0 * blur_px if np.isfinite(blur_px) else 3.0
    sel = np.asarray(visible, bool) & np.isfinite(h) & (h > lo) & (h < max_height_px) & (f > 0)
    if np.count_nonzero(sel) < 3:
        return float("nan")
    v = np.interp(h[sel], mh[ok_m], mv[ok_m], left=np.nan, right=np.nan)
    v = v * blur_fraction_above(h[sel], blur_px if np.isfinite(blur_px) else 1.0)
    ratio = f[sel] / v
    ratio = ratio[np.isfinite(ratio) & (ratio > 0)]
    return float(np.median(ratio)) if ratio.size >= 3 else float("nan")


def _chord_disc_flux(table: FrameTable, blur, dy, semidiameter_px, limb_u, fallback):
    """Per channel: :func:`disc_flux_from_chords` where it gives a value, else ``fallback``."""
    out = dict(fallback)
    if semidiameter_px is None or not np.isfinite(semidiameter_px):
        return out
    for c in CHANNELS:
        b = blur[c] if np.isfinite(blur[c]) else 1.0
        d = disc_flux_from_chords(table.apex_height_px[c] + dy.get(c, 0.0), table.width_px[c],
                                  table.flux[c], table.visible[c], blur_px=b,
                                  radius_px=semidiameter_px, limb_u=limb_u[c],
                                  max_height_px=0.3 * semidiameter_px)
        if np.isfinite(d):
            out[c] = d
    return out


@dataclass(frozen=True)
class Observables:
    """The sequence's observables (FOLDER-FORMAT.md's result.json "observables")."""

    last: dict[str, LastLight]
    green_duration_s: float
    green_duration_err_s: float
    rg_offset_arcsec: float
    rg_offset_err_arcsec: float
    rg_offset_frames: int
    plate_scale_arcsec_per_px: float
    plate_scale_source: str
    colour_offset_dy_px: dict[str, float]
    colour_offset_source: str
    geometry: DiscGeometry
    disc_flux: dict[str, float] = field(default_factory=dict)
    blur_px: dict[str, float] = field(default_factory=dict)
    notes: tuple[str, ...] = field(default=())
    colour_offset_dy_err_px: dict[str, float] = field(default_factory=dict)  # 1-sigma


def sequence_observables(table: FrameTable, *, plate_scale_arcsec_per_px: float,
                         plate_scale_source: str, colour_offset_dy_px: dict[str, float],
                         colour_offset_source: str, geometry: DiscGeometry,
                         disc_flux: dict[str, float] | None = None,
                         limb_u: dict[str, float] | None = None,
                         semidiameter_px: float | None = None,
                         colour_offset_dy_err_px: dict[str, float] | None = None
                         ) -> Observables:
    """Last light per channel, green duration and green-above-red offset.

    Last light is the moment the visible flux falls below the model's detection
    fraction of the whole disc's flux, which comes from the thin segments' chords
    (:func:`disc_flux_from_chords`, with the disc's true semidiameter ``semidiameter_px``
    [px], by default the ephemeris's at the first frame over the plate scale); where the
    chords give none, from ``disc_flux`` (per channel, in the recording's units); without
    either, last light is the moment the flux sinks into the noise. ``limb_u`` (per
    channel, the band-weighted linear limb-darkening coefficient) enters both; default
    that of the channels' nominal wavelengths. ``colour_offset_dy_err_px``: the colour
    offsets' 1-sigma errors [px] (see :func:`green_above_red`).
    """
    notes: list[str] = []
    limb_u = {c: (limb_u or {}).get(c, default_limb_u(c)) for c in CHANNELS}
    blur = {c: float(np.nanmedian(table.edge_sigma_px[c]))
            if np.any(np.isfinite(table.edge_sigma_px[c])) else float("nan") for c in CHANNELS}
    if semidiameter_px is None and len(table) and np.isfinite(plate_scale_arcsec_per_px):
        from analyse.sun import sun_track  # the semidiameter depends on the date alone

        sd = sun_track(table.t_unix_s[:1], 0.0, 0.0).semidiameter_arcsec[0]
        semidiameter_px = float(sd) / plate_scale_arcsec_per_px
    disc_flux = _chord_disc_flux(table, blur, colour_offset_dy_px, semidiameter_px, limb_u,
                                 disc_flux or {})
    last = {c: last_light(table.t_unix_s, table.visible[c], table.flux[c], table.flux_err[c],
                          channel=c, disc_flux=disc_flux.get(c),
                          height_px=table.apex_height_px[c], blur_px=blur[c],
                          limb_u=limb_u[c])
            for c in CHANNELS}
    for c, ll in last.items():
        if not np.isfinite(ll.t_unix_s):
            notes.append(f"last light of channel {c} not measurable: {ll.method}")
    lr, lg = last["r"], last["g"]
    duration = lg.t_unix_s - lr.t_unix_s
    duration_err = float(np.hypot(lg.err_s, lr.err_s))
    if np.isfinite(duration) and duration < 0:
        notes.append(f"green set {-duration:.2f} s before red: no green segment")
    offset, offset_err, used = green_above_red(
        table, t_last_red=lr.t_unix_s, plate_scale_arcsec_per_px=plate_scale_arcsec_per_px,
        colour_offset_dy_px=colour_offset_dy_px, colour_offset_dy_err_px=colour_offset_dy_err_px)
    if used == 0:
        notes.append("green-above-red offset not measurable: no frame with both limbs "
                     "measured in the final minute before red last light")
    jumps = exposure_changes(table.sky_level["g"])
    if jumps.size:
        notes.append(f"the sky level jumps at {jumps.size} frame(s) (first at frame "
                     f"{int(jumps[0])}): an automatic exposure; fluxes are compared only "
                     "as ratios between channels of one frame there")
    return Observables(last, float(duration), duration_err, offset, offset_err, used,
                       plate_scale_arcsec_per_px, plate_scale_source, colour_offset_dy_px,
                       colour_offset_source, geometry, dict(disc_flux), blur, tuple(notes),
                       dict(colour_offset_dy_err_px or {}))
