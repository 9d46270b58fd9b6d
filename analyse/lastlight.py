"""Last light of one channel: when the light above the horizon fell below the detection level.

The channel's last frame with significant sun above the horizon is found (a lone
significant frame after a dark run is a noise blip and ignored). Last light is where
the flux above the line falls through the detection level, a fraction of the whole
disc's flux (the forward model's definition, :mod:`analyse.predict`). The flux of a
limb-darkened disc above a chord at depth ``eta`` below its top is ``S(eta)`` of the
disc in closed form (:func:`segment_fraction`; for a thin segment ``~ eta^1.5``, the
circular segment's area, plus the limb darkening's ``eta^2`` term); refraction
squeezes the segment vertically by a nearly constant factor over the final seconds
and the Sun sinks at a steady rate, so ``S^-1(flux / disc)`` falls linearly with
time. A line through the frames between 0.7 and 20 times the level (so that it
brackets it) is solved for the level. The disc's flux comes from the thin segments'
chords and apexes (:func:`disc_flux_from_chords`: the chord gives the true depth,
the apex over it the squeeze), so no atmosphere is assumed. Without it, last light
is where the flux sinks into the noise: ``F^(2/3)`` fitted linear in time over the
last visible frames is extrapolated to the visibility threshold, within the last
bright and the first dark frame; where that fit is not possible, the midpoint with
the frame spacing over sqrt(12) as its uncertainty.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analyse.disc import (
    blur_fraction_above,
    chord_brightness,
    flux_below,
    limb_darkening_u,
    total_flux,
)
from analyse._limbmodel import NOMINAL_WAVELENGTH_NM
from analyse.predict import DETECTION_FRACTION

__all__ = [
    "VISIBILITY_SIGMA",
    "LastLight",
    "last_light",
    "default_limb_u",
    "segment_fraction",
    "segment_depth",
    "chord_depth",
    "disc_flux_from_chords",
]

VISIBILITY_SIGMA = 5.0  # significance for "sun above the horizon" (common practice, no source)
_FIT_FRAMES = 6  # last visible frames used for the noise-limit fading fit
LEVEL_SNR = 10.0  # the detection level must stand this far above the flux noise to be
# measured directly (common practice, no source)
LEVEL_WINDOW = (0.7, 20.0)  # frames fitted for last light: between these multiples of the
# level, so that the fit brackets it (chosen on model light curves, see _level_crossing)
FLUX_SCATTER = 0.05  # relative scatter of a frame's flux about the fading law (shake,
# JPEG, glitter, the line's pixel phase; 5-10 % on the simulated recordings)
OUTLIER_SIGMA = 4.0  # a frame this far off the fading line is left out (common practice,
# no source)
HEIGHT_LINE_BLURS = 10.0  # apexes 3 to 3 + this many blurs high set the final apex line
APEX_FLOOR_PX = 0.5  # blur floor for that band: a segment's apex under ~1.5 px is poorly
# fitted however sharp the image (the thin-segment fit on the simulated recordings)


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


def segment_fraction(depth, u) -> np.ndarray:
    """Share of a limb-darkened disc's flux above a chord ``depth`` below its top.

    ``(C(1) - C(1 - depth)) / C(1)`` with ``C`` the closed-form flux below a height of
    :func:`analyse.disc.flux_below` (linear limb-darkening law): exact for any depth.
    For a thin segment it is ``(1 - u) (4 sqrt(2) / 3) depth^1.5 / (pi (1 - u / 3))``
    times ``1 + O(sqrt(depth))``: the uniform disc's circular-segment area [1]_ with the
    limb's darkening, whose ``u`` term grows as ``depth^2``.

    Parameters
    ----------
    depth : array_like
        Height of the segment, from its chord to the top [disc semidiameters], 0..2.
    u : float
        Linear limb-darkening coefficient.

    References
    ----------
    .. [1] E. W. Weisstein, "Circular Segment", MathWorld (area
       ``R^2 (theta - sin theta) / 2``; for a thin segment ``(4 sqrt 2 / 3) R^0.5 h^1.5``).
    """
    d = np.clip(np.asarray(depth, dtype=float), 0.0, 2.0)
    return (total_flux(u) - flux_below(1.0 - d, u)) / total_flux(u)


def segment_depth(fraction, u) -> np.ndarray:
    """Inverse of :func:`segment_fraction`: the depth [semidiameters] holding ``fraction``.

    Interpolated in ``log`` on a grid of depths from 1e-7 to 2, then two Newton steps
    (the derivative is the chord's brightness, :func:`analyse.disc.chord_brightness`):
    relative error below 1e-8 up to depth 1.9. 0 for fractions <= 0.
    """
    grid = np.geomspace(1e-7, 2.0, 2000)
    f = np.asarray(fraction, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.exp(np.interp(np.log(f), np.log(segment_fraction(grid, u)), np.log(grid)))
    for _ in range(2):
        slope = chord_brightness(1.0 - d, u) / total_flux(u)
        step = (segment_fraction(d, u) - f) / np.where(slope > 0, slope, np.inf)
        d = np.clip(d - step, 0.5 * d, np.minimum(2.0 * d, 2.0))
    return np.where(f > 0, d, 0.0)


def chord_depth(width_px, radius_px) -> np.ndarray:
    """Sagitta of a chord of a circle: ``1 - sqrt(1 - (w / 2R)^2)`` [units of ``R``] [1]_.

    Refraction leaves the horizontal scale alone, so the chord on the horizon line and the
    disc's true radius give the true depth of the segment above the horizon ray.

    References
    ----------
    .. [1] E. W. Weisstein, "Sagitta", MathWorld (``s = R - sqrt(R^2 - a^2 / 4)``).
    """
    x = np.asarray(width_px, dtype=float) / (2.0 * np.asarray(radius_px, dtype=float))
    return np.where(x <= 1.0, 1.0 - np.sqrt(np.clip(1.0 - x**2, 0.0, None)), np.nan)


def disc_flux_from_chords(height_px, width_px, flux, visible, *, blur_px: float,
                          radius_px: float, limb_u: float, max_height_px: float) -> float:
    """The whole disc's flux in the recording's units, from thin segments' chords and apexes.

    For a segment between three blurs and ``max_height_px`` high, its chord ``w`` on the
    horizon gives its true depth ``eta`` (:func:`chord_depth`, in semidiameters) and so
    its share of the disc ``S(eta)`` (:func:`segment_fraction`); refraction squeezes it
    vertically by ``q = h / (eta R)`` (apparent over true height), which scales its
    flux alike (radiance is conserved). So ``disc = flux / (q S(eta) b)``, with ``b``
    the share of the segment's light that blur leaves above the line; the median over
    the frames. No atmosphere model enters: an inversion's squeezed image or a
    superadiabatic layer's stretched one is measured, not assumed.

    Parameters
    ----------
    height_px, width_px, flux : (N,) ndarray
        Apex height above the horizon line (corrected for lateral colour) [px], chord on
        the line [px], flux above the line [linear units].
    visible : (N,) ndarray of bool
    blur_px, radius_px, limb_u : float
        Blur (Gaussian sigma) [px], the disc's true semidiameter [px] (ephemeris over plate
        scale), the channel's linear limb-darkening coefficient (band-weighted).
    max_height_px : float
        Thickest segment used [px] (``q`` is the mean squeeze over the segment's height).
    """
    h, w = np.asarray(height_px, dtype=float), np.asarray(width_px, dtype=float)
    f = np.asarray(flux, dtype=float)
    lo = 3.0 * blur_px if np.isfinite(blur_px) else 3.0
    sel = (np.asarray(visible, bool) & np.isfinite(h) & np.isfinite(w) & (h > lo)
           & (h < max_height_px) & (f > 0) & (w < 2.0 * radius_px))
    if np.count_nonzero(sel) < 3 or not radius_px > 0:
        return float("nan")
    eta = chord_depth(w[sel], radius_px)
    squeeze = h[sel] / (eta * radius_px)
    share = blur_fraction_above(h[sel], blur_px if np.isfinite(blur_px) else 1.0)
    ratio = f[sel] / (squeeze * segment_fraction(eta, limb_u) * share)
    ratio = ratio[np.isfinite(ratio) & (ratio > 0)]
    return float(np.median(ratio)) if ratio.size >= 3 else float("nan")


def last_light(t_unix_s, visible, flux, flux_err, *, channel: str = "",
               sigma: float = VISIBILITY_SIGMA, disc_flux: float | None = None,
               detection_fraction: float = DETECTION_FRACTION, height_px=None,
               blur_px: float | None = None, limb_u: float | None = None) -> LastLight:
    """Last light of one channel from its per-frame visibility and flux.

    With ``disc_flux`` (the whole disc's flux in the recording's units) last light is
    where the visible flux falls through ``detection_fraction`` of it, the definition
    the forward model uses: each frame's flux over the disc's (divided by the share of
    the segment's light that blur leaves above the line, see :func:`_blur_shares`) is
    turned into a segment depth (:func:`segment_depth`), which falls linearly with time;
    a line fitted to the frames between ``LEVEL_WINDOW`` times the level is solved for the
    level's depth. Without ``disc_flux``, or where that fit is impossible, last light is
    where the flux sinks into the noise (``sigma`` times its error), interpolated between
    the last bright and the first dark frame.

    Parameters
    ----------
    t_unix_s : (N,) ndarray
        Frame times, increasing [s].
    visible : (N,) ndarray of bool
    flux, flux_err : (N,) ndarray
        Visible flux above the horizon and its 1-sigma error [linear units].
    height_px : (N,) ndarray, optional
        Apex height above the horizon line [px]; with ``blur_px`` [px] for the blur share.
    limb_u : float, optional
        The channel's linear limb-darkening coefficient; default that of the channel's
        nominal wavelength (``NOMINAL_WAVELENGTH_NM``), else 0.6.
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
        n = slice(0, i + 1)
        scale = disc_flux * _blur_shares(t[n], height_px, vis[n], blur_px)
        u = default_limb_u(channel) if limb_u is None else float(limb_u)
        tc, tc_err = _level_crossing(t[n], f[n] / scale, fe[n] / scale, vis[n],
                                     detection_fraction, u)
        if np.isfinite(tc) and t[0] <= tc <= t[i + 1] + 2.0 * (t[i + 1] - t[i]):
            return LastLight(channel, tc, max(tc_err, 0.01 * (t[i + 1] - t[i])), i, i + 1,
                             f"fading fit to {detection_fraction:g} of the disc", thr, limit)
    return LastLight(channel, limit, limit_err, i, i + 1, how, thr, limit)


def default_limb_u(channel: str) -> float:
    """Linear limb-darkening coefficient at the channel's nominal wavelength, else 0.6."""
    nm = NOMINAL_WAVELENGTH_NM.get(channel)
    return 0.6 if nm is None else float(limb_darkening_u(nm))


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


def _blur_shares(t, h, vis, blur_px):
    """Share of each frame's segment light that blur leaves above the line.

    The apex of a segment under a few blurs, or under a couple of pixels, is poorly
    measured (a thin segment's fit reads about a pixel high when it is half that), so
    from the first frame with an apex between 3 and 3 + ``HEIGHT_LINE_BLURS`` blurs
    (blurs of at least ``APEX_FLOOR_PX``) on, the apex height is a straight line fitted
    to those frames' apexes against time (the limb sinks at a steady rate over a few
    seconds), extrapolated; earlier frames keep their own apex. NaN (the frame is left
    out) where the height is unknown: read as 0 it would halve the share. All 1 without
    heights or blur. ``h`` may run beyond ``t`` (the frames after the last visible one).
    """
    if h is None or blur_px is None or not np.isfinite(blur_px):
        return np.ones(t.size)
    b = max(blur_px, APEX_FLOOR_PX)
    hh = np.asarray(h, dtype=float)[: t.size]
    band = vis & np.isfinite(hh) & (hh > 3.0 * b) & (hh < (3.0 + HEIGHT_LINE_BLURS) * b)
    if np.count_nonzero(band) >= 4 and np.ptp(t[band]) > 0:
        tb, hb = t[band], hh[band]
        line = np.polyfit(tb - tb[-1], hb, 1)
        for _ in range(2):  # drop the apex fits that went astray (3 sigma), refit
            res = hb - np.polyval(line, tb - tb[-1])
            keep = np.abs(res) <= 3.0 * 1.4826 * np.median(np.abs(res)) + 1e-9
            line = np.polyfit(tb[keep] - tb[-1], hb[keep], 1)
        if line[0] < 0:
            hh = np.where(t >= tb[0], np.polyval(line, t - tb[-1]), hh)
    share = blur_fraction_above(np.maximum(np.nan_to_num(hh), 0.0), blur_px)
    return np.where(np.isfinite(hh), share, np.nan)


def _level_crossing(t, frac, frac_err, vis, level, u):
    """Time at which the visible fraction of the disc falls through ``level``.

    The flux above the line of a limb-darkened disc whose top is a depth ``eta`` above
    the horizon ray is ``S(eta)`` of the disc (:func:`segment_fraction`), times the
    vertical squeeze of refraction near the horizon, close to constant over the final
    seconds. The Sun sinks at a steady rate, so ``eta = S^-1(frac)`` falls linearly
    with time (the squeeze scales ``eta`` by ``q^-2/3`` and moves the line's slope, not
    its straightness): a weighted line through the frames between ``LEVEL_WINDOW`` times
    the level is solved for ``S^-1(level)``. The window brackets the level, so the line
    interpolates; the channel's spread of wavelengths, whose horizons differ by several
    arcseconds, bends the final second's curve in a way no single-segment law follows.
    On noise-free model light curves (six atmospheres, -25..40 K/km, 30-58 deg) the
    crossing lands within 0.03 s (``F^(2/3)`` linear in time from 2-60 times the level:
    0.08-0.21 s early).
    """
    lo, hi = LEVEL_WINDOW
    ok = vis & np.isfinite(frac) & np.isfinite(frac_err)
    sel = np.flatnonzero(ok & (frac > lo * level) & (frac < hi * level))
    if sel.size < 3 or np.ptp(t[sel]) <= 0:
        return np.nan, np.nan
    t, y = t[sel], segment_depth(frac[sel], u)
    slope = chord_brightness(1.0 - y, u) / total_flux(u)  # dS / d eta
    y_err = np.hypot(frac_err[sel], FLUX_SCATTER * frac[sel]) / slope
    keep = np.ones(t.size, bool)
    for _ in range(3):  # frames whose flux went astray (a failed sky or line): out, refit
        line = np.polyfit(t[keep] - t[-1], y[keep], 1, w=1.0 / y_err[keep])
        z = np.abs(y - np.polyval(line, t - t[-1])) / y_err
        new = z <= OUTLIER_SIGMA * max(1.0, 1.4826 * float(np.median(z[keep])))
        if np.array_equal(new, keep) or np.count_nonzero(new) < 3:
            break
        keep = new
    return _line_crossing(t[keep], y[keep], y_err[keep], float(segment_depth(level, u)))


def _fit_fading(t, f, fe, threshold):
    """Fit F^(2/3) linear in t; the time it reaches ``threshold`` and its error."""
    if t.size < 3 or not np.isfinite(threshold) or threshold <= 0:
        return np.nan, np.nan
    y_err = (2.0 / 3.0) * np.maximum(fe, 1e-30) * f ** (-1.0 / 3.0)
    return _line_crossing(t, f ** (2.0 / 3.0), y_err, threshold ** (2.0 / 3.0))


def _line_crossing(t, y, y_err, target):
    """Weighted line ``y = c0 + c1 (t - t_last)``, falling; when it reaches ``target``.

    The covariance is scaled by the reduced chi-square where the points scatter beyond
    their errors. Returns (time, error), NaN where the line does not fall.
    """
    if t.size < 3:
        return np.nan, np.nan
    tt = t - t[-1]
    w = 1.0 / np.maximum(y_err, 1e-300) ** 2
    a = np.vstack([np.ones_like(tt), tt]).T
    cov = np.linalg.pinv(a.T @ (a * w[:, None]))
    c0, c1 = cov @ (a.T @ (w * y))
    if not c1 < 0:
        return np.nan, np.nan
    chi2 = float(np.sum(w * (y - a @ np.array([c0, c1])) ** 2))
    cov = cov * max(chi2 / max(t.size - 2, 1), 1.0)  # scatter beyond the stated errors
    dt = (target - c0) / c1
    grad = np.array([-1.0 / c1, -(target - c0) / c1**2])
    err = float(np.sqrt(max(grad @ cov @ grad, 0.0)))
    return float(t[-1] + dt), err
