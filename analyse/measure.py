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
    "sequence_observables",
]

CHANNELS = ("r", "g", "b")
VISIBILITY_SIGMA = 5.0  # significance for "sun above the horizon" (common practice, no source)
OFFSET_WINDOW_S = 60.0  # FOLDER-FORMAT.md: median over the final 60 s before red last light
_FIT_FRAMES = 6  # last visible frames used for the fading fit


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
    """When a channel's light was last detected above the horizon."""

    channel: str
    t_unix_s: float  # NaN when not measurable
    err_s: float
    last_visible_index: int  # -1 if never visible
    first_dark_index: int  # -1 if never dark after being visible
    method: str  # "fading fit", "midpoint", or why it is not measurable
    threshold_flux: float  # detection threshold used [linear flux units]


def last_light(t_unix_s, visible, flux, flux_err, *, channel: str = "",
               sigma: float = VISIBILITY_SIGMA) -> LastLight:
    """Last light of one channel from its per-frame visibility and flux.

    Parameters
    ----------
    t_unix_s : (N,) ndarray
        Frame times, increasing [s].
    visible : (N,) ndarray of bool
    flux, flux_err : (N,) ndarray
        Visible flux above the horizon and its 1-sigma error [linear units].
    sigma : float
        Visibility significance; the threshold is ``sigma * flux_err``.
    """
    t = np.asarray(t_unix_s, dtype=float)
    vis = np.asarray(visible, dtype=bool).copy()
    f = np.asarray(flux, dtype=float)
    fe = np.asarray(flux_err, dtype=float)
    n = t.size
    idx = np.flatnonzero(vis)
    # A lone significant frame after at least two dark ones is a blip, not the sun.
    while idx.size >= 1:
        i = idx[-1]
        if i >= 2 and not vis[i - 1] and not vis[i - 2] and idx.size > 1:
            vis[i] = False
            idx = idx[:-1]
            continue
        break
    thr = float(sigma * np.nanmedian(fe)) if np.any(np.isfinite(fe)) else float("nan")
    if idx.size == 0:
        return LastLight(channel, np.nan, np.nan, -1, -1, "never visible", thr)
    i = int(idx[-1])
    if i == n - 1:
        return LastLight(channel, np.nan, np.nan, i, -1, "still visible in the last frame", thr)
    t0, t1 = t[i], t[i + 1]
    mid, mid_err = 0.5 * (t0 + t1), (t1 - t0) / np.sqrt(12.0)
    tc, tc_err = _fading_crossing(t[: i + 1], f[: i + 1], fe[: i + 1], vis[: i + 1], thr)
    slack = 3.0 * tc_err + 0.5 * (t1 - t0) if np.isfinite(tc_err) else 0.0
    if np.isfinite(tc) and t0 - slack <= tc <= t1 + slack:
        # Detected at t0, not at t1: the crossing lies between, whatever the noise says.
        tc = float(np.clip(tc, t0, t1))
        err = float(np.hypot(tc_err, 0.05 * (t1 - t0)))
        return LastLight(channel, tc, min(err, mid_err), i, i + 1, "fading fit", thr)
    return LastLight(channel, float(mid), float(mid_err), i, i + 1, "midpoint", thr)


def _fading_crossing(t, f, fe, vis, threshold):
    """Fit F^(2/3) linear in t over the last visible frames; time it reaches the threshold."""
    sel = np.flatnonzero(vis & np.isfinite(f) & (f > 0))[-_FIT_FRAMES:]
    if sel.size < 3 or not np.isfinite(threshold) or threshold <= 0:
        return np.nan, np.nan
    tt = t[sel] - t[sel[-1]]
    y = f[sel] ** (2.0 / 3.0)
    y_err = (2.0 / 3.0) * np.maximum(fe[sel], 1e-30) * f[sel] ** (-1.0 / 3.0)
    w = 1.0 / y_err**2
    a = np.vstack([np.ones_like(tt), tt]).T
    cov = np.linalg.pinv(a.T @ (a * w[:, None]))
    c0, c1 = cov @ (a.T @ (w * y))
    if not c1 < 0:
        return np.nan, np.nan
    y_thr = threshold ** (2.0 / 3.0)
    dt = (y_thr - c0) / c1
    grad = np.array([-1.0 / c1, -(y_thr - c0) / c1**2])
    err = float(np.sqrt(max(grad @ cov @ grad, 0.0)))
    return float(t[sel[-1]] + dt), err


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
    return DiscGeometry(float(rx), float(np.sqrt(max(cov_rf[0, 0], 0.0))), float(f),
                        float(np.sqrt(max(cov_rf[1, 1], 0.0))), h.size, "")


def exposure_changes(sky_level: np.ndarray, *, jump: float = 0.15) -> np.ndarray:
    """Frame indices where the sky level jumps by more than ``jump`` (relative) from the last.

    The sky dims smoothly at sunset; an automatic exposure shows as steps.
    """
    s = np.asarray(sky_level, dtype=float)
    if s.size < 2:
        return np.zeros(0, dtype=int)
    ratio = s[1:] / np.where(s[:-1] > 0, s[:-1], np.nan)
    return np.flatnonzero(np.abs(np.log(ratio)) > np.log1p(jump)) + 1


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
    notes: tuple[str, ...] = field(default=())


def sequence_observables(table: FrameTable, *, plate_scale_arcsec_per_px: float,
                         plate_scale_source: str, colour_offset_dy_px: dict[str, float],
                         colour_offset_source: str, geometry: DiscGeometry) -> Observables:
    """Last light per channel, green duration and green-above-red offset."""
    notes: list[str] = []
    last = {c: last_light(table.t_unix_s, table.visible[c], table.flux[c], table.flux_err[c],
                          channel=c) for c in CHANNELS}
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
                       colour_offset_source, geometry, tuple(notes))
