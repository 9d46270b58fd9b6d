"""Sequence observables from the per-frame measurements.

Input: the per-frame table (times, horizon, and per channel the upper limb's apex
height above the horizon, the visible flux above the horizon and whether it is
significant). Output: per-channel last light with an uncertainty, the green segment's
duration, the green limb's height above the red one (corrected for the lens's own
colour offset) and the disc's geometry (plate scale from its width, flattening).

Last light
    The channel's last frame with significant sun above the horizon is found (a lone
    significant frame after a dark run is a noise blip and ignored). In the final
    seconds a limb segment of height ``h`` has a flux ``F ~ h^1.5`` and ``h`` falls
    linearly with time, so ``F^(2/3)`` is linear in time: fitted over the last visible
    frames, it is extrapolated to the detection threshold (the visibility significance
    times the flux noise) to interpolate the crossing between the last bright and the
    first dark frame. Where the fit is not possible the crossing is the midpoint, with
    the frame spacing over sqrt(12) as its uncertainty.

Disc geometry
    The image of the disc cut by the horizon is an ellipse with horizontal semi-axis
    ``rx`` (refraction does not change horizontal scale) and vertical ``ry = f rx``
    (flattening ``f``). The chord on the horizon and the apex height ``h`` above it obey
    ``w^2 = (8 rx / f) h - (4 / f^2) h^2``: a linear fit in ``h`` and ``h^2`` gives both.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from analyse.disc import blur_fraction_above
from analyse.predict import DETECTION_FRACTION

__all__ = [
    "CHANNELS",
    "VISIBILITY_SIGMA",
    "FrameTable",
    "LastLight",
    "DiscGeometry",
    "Observables",
    "last_light",
    "green_above_red",
    "disc_geometry",
    "exposure_changes",
    "disc_flux_scale",
    "sequence_observables",
]

CHANNELS = ("r", "g", "b")
VISIBILITY_SIGMA = 5.0  # significance for "sun above the horizon" (common practice, no source)
OFFSET_WINDOW_S = 60.0  # FOLDER-FORMAT.md: median over the final 60 s before red last light
_FIT_FRAMES = 6
LEVEL_SNR = 10.0  # the detection level must stand this far above the flux noise to be
# measured directly (common practice, no source)  # last visible frames used for the fading fit


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


@dataclass(frozen=True)
class LastLight:
    """When a channel's light fell below the detection level above the horizon."""

    channel: str
    t_unix_s: float  # NaN when not measurable
    err_s: float
    last_visible_index: int  # -1 if never visible
    first_dark_index: int  # -1 if never dark after being visible
    method: str  # how it was found, or why it is not measurable
    threshold_flux: float  # noise threshold [linear flux units]
    detection_limit_unix_s: float = float("nan")  # when the light sank into the noise


def last_light(t_unix_s, visible, flux, flux_err, *, channel: str = "",
               sigma: float = VISIBILITY_SIGMA, disc_flux: float | None = None,
               detection_fraction: float = DETECTION_FRACTION, height_px=None,
               blur_px: float | None = None) -> LastLight:
    """Last light of one channel from its per-frame visibility and flux.

    With ``disc_flux`` (the whole disc's flux in the recording's units) last light is
    where the visible flux falls through ``detection_fraction`` of it, the definition
    the forward model uses: the fading law is fitted to the frames between 2 and 60
    times that level (each divided by the share of a segment's light that blur leaves
    above the line, from ``height_px`` and ``blur_px``) and solved for the level.
    Without it, or where that fit is impossible, last light is where the flux sinks into
    the noise (``sigma`` times its error), interpolated between the last bright and the
    first dark frame.

    Parameters
    ----------
    t_unix_s : (N,) ndarray
        Frame times, increasing [s].
    visible : (N,) ndarray of bool
    flux, flux_err : (N,) ndarray
        Visible flux above the horizon and its 1-sigma error [linear units].
    """
    t = np.asarray(t_unix_s, dtype=float)
    vis = _drop_blips(np.asarray(visible, dtype=bool))
    f = np.asarray(flux, dtype=float)
    fe = np.asarray(flux_err, dtype=float)
    thr = float(sigma * np.nanmedian(fe)) if np.any(np.isfinite(fe)) else float("nan")
    idx = np.flatnonzero(vis)
    if idx.size == 0:
        return LastLight(channel, np.nan, np.nan, -1, -1, "never visible", thr)
    i = int(idx[-1])
    if i == t.size - 1:
        return LastLight(channel, np.nan, np.nan, i, -1, "still visible in the last frame", thr)
    limit, limit_err, how = _noise_crossing(t, f, fe, vis, i, thr)
    noise = float(np.nanmedian(fe[max(0, i - 20): i + 1])) if np.any(np.isfinite(fe)) else 0.0
    faint = disc_flux is not None and detection_fraction * disc_flux < LEVEL_SNR * noise
    if faint:
        how = (f"{how} (this channel's disc is too faint for {detection_fraction:g} of it to "
               f"stand {LEVEL_SNR:g} times above the noise)")
    if not faint and disc_flux is not None and np.isfinite(disc_flux) and disc_flux > 0:
        frac = f / disc_flux
        if height_px is not None and blur_px is not None and np.isfinite(blur_px):
            h = np.nan_to_num(np.asarray(height_px, dtype=float), nan=0.0)
            frac = frac / blur_fraction_above(np.maximum(h, 0.0), blur_px)
        tc, tc_err = _level_crossing(t[: i + 1], frac[: i + 1], vis[: i + 1],
                                     detection_fraction)
        if np.isfinite(tc) and t[0] <= tc <= t[i + 1] + 2.0 * (t[i + 1] - t[i]):
            return LastLight(channel, tc, max(tc_err, 0.01 * (t[i + 1] - t[i])), i, i + 1,
                             f"fading fit to {detection_fraction:g} of the disc", thr, limit)
    return LastLight(channel, limit, limit_err, i, i + 1, how, thr, limit)


def _drop_blips(vis: np.ndarray) -> np.ndarray:
    """A lone significant frame after at least two dark ones is a blip, not the sun."""
    vis = vis.copy()
    idx = np.flatnonzero(vis)
    while idx.size > 1:
        i = idx[-1]
        if i >= 2 and not vis[i - 1] and not vis[i - 2]:
            vis[i] = False
            idx = idx[:-1]
            continue
        break
    return vis


def _noise_crossing(t, f, fe, vis, i, thr):
    """Where the flux sinks into the noise, between frame i (bright) and i + 1 (dark)."""
    t0, t1 = t[i], t[i + 1]
    mid, mid_err = 0.5 * (t0 + t1), (t1 - t0) / np.sqrt(12.0)
    sel = np.flatnonzero(vis[: i + 1] & np.isfinite(f[: i + 1]) & (f[: i + 1] > 0))
    tc, tc_err = _fit_fading(t[sel][-_FIT_FRAMES:], f[sel][-_FIT_FRAMES:],
                             fe[sel][-_FIT_FRAMES:], thr)
    slack = 3.0 * tc_err + 0.5 * (t1 - t0) if np.isfinite(tc_err) else 0.0
    if np.isfinite(tc) and t0 - slack <= tc <= t1 + slack:
        # Detected at t0, not at t1: the crossing lies between, whatever the noise says.
        err = float(np.hypot(tc_err, 0.05 * (t1 - t0)))
        return float(np.clip(tc, t0, t1)), min(err, mid_err), "noise limit, fading fit"
    return float(mid), float(mid_err), "noise limit, midpoint"


def _level_crossing(t, frac, vis, level):
    """Fit the fading law to frames between 2 and 60 times ``level``; time it hits ``level``.

    ``F^(2/3)`` is only nearly linear in time (limb darkening adds an ``h^2`` term): on
    noise-free model light curves (35 deg N, 10 fps) the extrapolation lands 0.07 s (red)
    to 0.11 s (green) early. Narrower windows are less biased on the model but worse on
    rendered frames, whose faintest frames carry the blur correction's error.
    """
    sel = np.flatnonzero(vis & np.isfinite(frac) & (frac > 2.0 * level) & (frac < 60.0 * level))
    if sel.size < 3 or np.ptp(t[sel]) <= 0:
        return np.nan, np.nan
    y = frac[sel]
    # Relative scatter of the flux about the law sets the weights (shake, JPEG, glitter).
    return _fit_fading(t[sel], y, 0.05 * y, level)


def _fit_fading(t, f, fe, threshold):
    """Fit F^(2/3) linear in t; the time it reaches ``threshold`` and its error."""
    if t.size < 3 or not np.isfinite(threshold) or threshold <= 0:
        return np.nan, np.nan
    tt = t - t[-1]
    y = f ** (2.0 / 3.0)
    y_err = (2.0 / 3.0) * np.maximum(fe, 1e-30) * f ** (-1.0 / 3.0)
    w = 1.0 / y_err**2
    a = np.vstack([np.ones_like(tt), tt]).T
    cov = np.linalg.pinv(a.T @ (a * w[:, None]))
    c0, c1 = cov @ (a.T @ (w * y))
    if not c1 < 0:
        return np.nan, np.nan
    chi2 = float(np.sum(w * (y - a @ np.array([c0, c1])) ** 2))
    cov = cov * max(chi2 / max(t.size - 2, 1), 1.0)  # scatter beyond the stated errors
    y_thr = threshold ** (2.0 / 3.0)
    dt = (y_thr - c0) / c1
    grad = np.array([-1.0 / c1, -(y_thr - c0) / c1**2])
    err = float(np.sqrt(max(grad @ cov @ grad, 0.0)))
    return float(t[-1] + dt), err


def green_above_red(table: FrameTable, *, t_last_red: float, plate_scale_arcsec_per_px: float,
                    colour_offset_dy_px: dict[str, float] | None = None,
                    window_s: float = OFFSET_WINDOW_S) -> tuple[float, float, int]:
    """Green upper limb above red [arcsec], median over the final window before red last light.

    ``colour_offset_dy_px`` holds the lens's vertical displacement of each channel's image
    relative to green (y down): a channel shifted down reads too low above the common
    horizon line and is corrected by adding its displacement.

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
    if d.size == 1:
        e = table.apex_height_err_px
        err = float(np.hypot(e["g"][sel][0], e["r"][sel][0]) * plate_scale_arcsec_per_px)
        return med, err, 1
    spread = 1.4826 * float(np.median(np.abs(d - med)))
    if spread == 0.0:
        spread = float(np.std(d))
    return med, 1.2533 * spread / np.sqrt(d.size), int(d.size)  # standard error of a median


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


def exposure_changes(sky_level: np.ndarray, *, jump: float = 0.15) -> np.ndarray:
    """Frame indices where the sky level jumps by more than ``jump`` (relative) from the last.

    The sky dims smoothly at sunset; an automatic exposure shows as steps.
    """
    s = np.asarray(sky_level, dtype=float)
    if s.size < 2:
        return np.zeros(0, dtype=int)
    ratio = s[1:] / np.where(s[:-1] > 0, s[:-1], np.nan)
    return np.flatnonzero(np.abs(np.log(ratio)) > np.log1p(jump)) + 1


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


def sequence_observables(table: FrameTable, *, plate_scale_arcsec_per_px: float,
                         plate_scale_source: str, colour_offset_dy_px: dict[str, float],
                         colour_offset_source: str, geometry: DiscGeometry,
                         disc_flux: dict[str, float] | None = None) -> Observables:
    """Last light per channel, green duration and green-above-red offset.

    ``disc_flux`` (per channel, the whole disc's flux in the recording's units) makes
    last light the moment the visible flux falls below the model's detection fraction
    of the disc; without it, the moment it sinks into the noise.
    """
    notes: list[str] = []
    disc_flux = disc_flux or {}
    blur = {c: float(np.nanmedian(table.edge_sigma_px[c]))
            if np.any(np.isfinite(table.edge_sigma_px[c])) else float("nan") for c in CHANNELS}
    last = {c: last_light(table.t_unix_s, table.visible[c], table.flux[c], table.flux_err[c],
                          channel=c, disc_flux=disc_flux.get(c),
                          height_px=table.apex_height_px[c], blur_px=blur[c])
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
        colour_offset_dy_px=colour_offset_dy_px)
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
                       colour_offset_source, geometry, dict(disc_flux), blur, tuple(notes))
