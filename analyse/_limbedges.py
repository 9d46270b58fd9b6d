"""Edges of the Sun's image in line-aligned coordinates, for :mod:`analyse.limb`.

The upper contour down each column and the circle fitted to its top (steps 1 and 2 of
:mod:`analyse.limb`), the side edges along rows that give the width and height, and a
thin segment's centre and width from its column fluxes. Edges are the peaks of a
derivative-of-Gaussian response, located to sub-pixel by a Gaussian three-point fit
[1]_; the arc and the width are fitted with Huber's weights [2]_.

References
----------
.. [1] R. B. Fisher and D. K. Naidu, "A comparison of algorithms for subpixel peak
   detection", in Image Technology, Springer (1996), 385-404 (Gaussian three-point fit).
.. [2] P. J. Huber, "Robust estimation of a location parameter", Ann. Math. Statist. 35,
   73-101 (1964).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import ndimage

from analyse._limbmodel import _solve_linear
from analyse._limbsky import _box_slices, _Frame

__all__ = ["EDGE_SMOOTH_PX", "EDGE_MIN_SNR", "ARC_FRACTION"]

EDGE_SMOOTH_PX = 1.0  # derivative-of-Gaussian scale for limb edges [px]
EDGE_MIN_SNR = 5.0  # an edge point's response over its noise
ARC_FRACTION = 0.6  # contour points within this fraction of R_c of the apex column


def _peaks(resp: np.ndarray, allowed: np.ndarray, noise: float, axis: int):
    """Sub-pixel position of the largest positive ``resp`` along ``axis`` where allowed.

    Returns (index along the other axis, sub-pixel position along ``axis``) of the
    peaks that stand :data:`EDGE_MIN_SNR` above ``noise``.
    """
    r = np.where(allowed, resp, -np.inf)
    if axis == 1:
        r = r.T
    k = np.argmax(r, axis=0)
    j = np.arange(r.shape[1])
    ok = (k > 0) & (k < r.shape[0] - 1)
    k = np.clip(k, 1, r.shape[0] - 2)
    a, b, c = r[k - 1, j], r[k, j], r[k + 1, j]
    ok &= np.isfinite(a) & np.isfinite(c) & (a > 0) & (c > 0) & (b >= a) & (b >= c)
    ok &= b > EDGE_MIN_SNR * noise
    with np.errstate(divide="ignore", invalid="ignore"):
        la, lb, lc = (np.log(np.where(ok, q, 1.0)) for q in (a, b, c))
        off = np.clip(0.5 * (la - lc) / (la - 2 * lb + lc), -0.5, 0.5)
    ok &= np.isfinite(off)
    return j[ok], (k + off)[ok]


def _contour(excess, fr: _Frame, box, noise) -> tuple[np.ndarray, np.ndarray]:
    """Upper-edge points (s, h) down each image column of the box."""
    ys, xs = _box_slices(box, 4)
    d = ndimage.gaussian_filter1d(excess[ys, xs], EDGE_SMOOTH_PX, axis=0, order=1,
                                  mode="nearest")
    cols, rows = _peaks(d, (box & (fr.h > 0.5))[ys, xs], noise * _dog_norm(), axis=0)
    return fr.to_line(cols + xs.start + fr.x0, rows + ys.start + fr.y0)


@functools.lru_cache(maxsize=1)
def _dog_norm() -> float:
    """Noise gain of the derivative-of-Gaussian filter for white noise."""
    impulse = np.zeros(41)
    impulse[20] = 1.0
    return float(np.sqrt(np.sum(ndimage.gaussian_filter1d(impulse, EDGE_SMOOTH_PX, order=1)**2)))


def _fit_arc(s, h, min_h) -> tuple[float, float, float] | None:
    """Circle ``h = h_c + sqrt(R^2 - (s - s_c)^2)`` to the top of a contour.

    Started from a parabola fitted with Huber weights (robust to stray edge points),
    refined by Gauss-Newton with Huber weights on the points within
    :data:`ARC_FRACTION` of ``R`` of the apex column.
    """
    keep = h > min_h
    if keep.sum() < 6:
        return None
    s, h = s[keep], h[keep]
    a = np.column_stack([np.ones_like(s), s, s**2])
    wts = np.ones_like(s)
    for _ in range(4):
        c0, c1, c2 = _solve_linear(a * wts[:, None], h * wts)
        r = h - a @ np.array([c0, c1, c2])
        wts = np.sqrt(_huber_weights(r))
    if not c2 < 0:
        return None
    rad = -1.0 / (2 * c2)
    p = np.array([-c1 / (2 * c2), c0 - c1**2 / (4 * c2) - rad, rad])
    for _ in range(10):
        near = np.abs(s - p[0]) < ARC_FRACTION * p[2]
        if near.sum() < 6:
            return None
        ds = s[near] - p[0]
        root = np.sqrt(np.maximum(p[2] ** 2 - ds**2, 1e-6))
        r = h[near] - (p[1] + root)
        w = np.sqrt(_huber_weights(r))
        jac = np.column_stack([ds / root, np.ones_like(ds), p[2] / root])
        step = _solve_linear(jac * w[:, None], r * w)
        p = p + step
        if not (np.all(np.isfinite(p)) and p[2] > 1.0):
            return None
        if np.max(np.abs(step)) < 1e-3:
            break
    return float(p[0]), float(p[1]), float(p[2])


def _huber_weights(r: np.ndarray) -> np.ndarray:
    """Huber's weights (tuning 1.345 robust sigmas) for residuals ``r``; P. J. Huber,
    Ann. Math. Statist. 35, 73 (1964)."""
    scale = max(1.4826 * float(np.median(np.abs(r))), 0.05)
    return 1.0 / np.maximum(1.0, np.abs(r) / (1.345 * scale))


def _side_width(excess, fr: _Frame, box, noise, arc, top, delta, sigma):
    """Chord on the horizon (or the widest chord) and the vertical extent, from the side
    edges moved outward by the contour bias ``delta``; None if they are too few."""
    sc, hc, _ = arc
    lowest, highest = 3.0 * sigma + 1.0, top - max(3.0, 0.25 * top)
    if highest - lowest < 4.0:
        return None
    band = box & (fr.h > lowest) & (fr.h < highest)
    ys, xs = _box_slices(band, 4)
    d = ndimage.gaussian_filter1d(excess[ys, xs], EDGE_SMOOTH_PX, axis=1, order=1,
                                  mode="nearest")
    pts = []
    for sign, side in ((1.0, fr.s < sc), (-1.0, fr.s > sc)):
        rows, cols = _peaks(sign * d, (band & side)[ys, xs], noise * _dog_norm(), axis=1)
        s, h = fr.to_line(cols + xs.start + fr.x0, rows + ys.start + fr.y0)
        factor = np.minimum(np.hypot(s - sc, h - hc) / np.maximum(np.abs(s - sc), 1e-3), 3.0)
        pts.append((s - sign * delta * factor, h))
    if min(p[0].size for p in pts) < 3:
        return None
    s, h = np.concatenate([pts[0][0], pts[1][0]]), np.concatenate([pts[0][1], pts[1][1]])
    if np.ptp(h) < 2.0:
        return None
    a = np.column_stack([np.ones_like(h), h, h**2])
    wts = np.ones_like(h)
    for _ in range(5):
        q = _solve_linear(a * wts[:, None], (s - sc) ** 2 * wts)
        r = (s - sc) ** 2 - a @ q
        scale = max(1.4826 * float(np.median(np.abs(r))), 1e-6)
        wts = 1.0 / np.maximum(1.0, np.abs(r) / (1.345 * scale))
    q0, q1, q2 = q
    h_v = -q1 / (2 * q2) if q2 < 0 else -1.0
    if h_v <= 0:
        return 2.0 * math.sqrt(max(q0, 0.0)), top
    peak = q0 + q1 * h_v + q2 * h_v**2
    low = h_v - math.sqrt(max(peak, 0.0) / -q2)
    return 2.0 * math.sqrt(max(peak, 0.0)), top - max(low, 0.0)


def _segment(excess, fr: _Frame, box) -> tuple[float, float] | None:
    """Centre and width of a thin segment: zeros of a parabola fitted to column fluxes."""
    above = box & (fr.h > 0)
    cols = np.flatnonzero(above.any(axis=0))
    if cols.size < 3:
        return None
    flux = np.sum(np.where(above, excess, 0.0), axis=0)[cols]
    s_col = np.array([fr.s[above[:, j], j].mean() for j in cols])
    smooth = np.convolve(flux, np.ones(3) / 3.0, mode="same")
    use = flux > 0.3 * smooth.max()
    if use.sum() < 3:
        return None
    c2, c1, c0 = np.polyfit(s_col[use], flux[use], 2)
    if c2 >= 0:
        return None
    sc = -c1 / (2 * c2)
    peak = c0 - c1**2 / (4 * c2)
    return float(sc), 2.0 * math.sqrt(max(peak / -c2, 0.0))
