"""Line-aligned crop around the Sun, its box, the sky beside it and the flux above the line.

Coordinates are those of the horizon line (:class:`_Frame`): ``s`` along it (from the
point below the Sun's first guess), ``h`` perpendicular to it, up positive [px]. Used by
:mod:`analyse.limb` for each channel. The Sun's box (:func:`_sun_box`) is the columns and
rows of the crop whose summed excess over a rough sky is significant; the blur of the
horizon's step beside it (:func:`_horizon_sigma`) is an error function fitted to the sky
model near the line.

The sky is the mean, in bins of ``h`` (0.5 px near the horizon's step, 2 px above),
of the columns beside the Sun (both sides), placed at the mean height of each bin's
pixels and interpolated linearly between, plus a linear trend along ``s``; its
pixel-to-pixel scatter there is the noise. The
flux is the sum of the sky-subtracted pixels over the Sun's columns, up to a little
above its top, each weighted by the share of its area above the line (the row astride
the line counts in part, :func:`_area_above`, so the flux of a faint segment does not
jump as the line crosses a pixel's centre); its error is the noise times the square
root of the sum of squared weights, inflated for correlation between neighbouring
pixels (measured on the sky beside) and for the sky model's own error.

No published formula: :func:`_area_above` is derived in its docstring (the distribution
of the sum of two uniform variables).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr

from analyse._limbmodel import _levenberg_marquardt, _projected
from analyse._sunlocate import SunLocation, _robust_sigma
from analyse.horizon import HorizonLine

__all__ = ["SKY_GAP_PX", "SKY_BIN_PX", "SKY_FINE_PX", "DEFAULT_SIGMA_PX", "NOISE_FLOOR"]

SKY_GAP_PX = 4.0  # gap between the Sun's columns and the sky columns [px]
SKY_BIN_PX = 0.5  # sky-model bin in h near the horizon [px]
SKY_FINE_PX = 6.0  # fine bins within this distance of the horizon [px]
DEFAULT_SIGMA_PX = 1.0  # blur when nothing measures it [px]
NOISE_FLOOR = 0.005  # least pixel noise, relative to the sky (8-bit steps are ~1 %) [-]


@dataclass(frozen=True)
class _Frame:
    """Line-aligned coordinates of a crop's pixels and their sky-model bins."""

    x0: int  # crop origin in the image [px]
    y0: int
    ox: float  # origin: the line below the Sun's first guess (image coordinates)
    oy: float
    slope: float
    s: np.ndarray  # (M, N) along the line [px]
    h: np.ndarray  # (M, N) above the line [px]
    edges: np.ndarray  # h bins of the sky model [px]
    bin: np.ndarray  # (M, N) bin of each pixel

    def to_image(self, s: float, h: float) -> tuple[float, float]:
        norm = math.hypot(1.0, self.slope)
        return self.ox + (s + h * self.slope) / norm, self.oy + (s * self.slope - h) / norm

    def to_line(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Image (x, y) -> (s, h)."""
        norm = math.hypot(1.0, self.slope)
        return (((x - self.ox) + self.slope * (y - self.oy)) / norm,
                (self.oy + self.slope * (x - self.ox) - y) / norm)


def _crop(image: np.ndarray, line: HorizonLine, sun: SunLocation) -> tuple[np.ndarray, _Frame]:
    """The part of the image around the Sun, with room for the sky beside and above it
    and the horizon below, and its line-aligned coordinates."""
    hgt, wid = image.shape[:2]
    r = max(sun.radius_px, 6.0)
    y_line = float(line.row_at(sun.x_px))
    x0 = int(max(0, math.floor(sun.x_px - 1.3 * r - 30)))
    x1 = int(min(wid, math.ceil(sun.x_px + 1.3 * r + 31)))
    top = min(sun.y_px, y_line) - 1.1 * r - 20  # the first guess's radius may be short
    y0 = int(max(0, math.floor(min(top, float(line.row_at(np.array([x0, x1])).min()) - 12))))
    y1 = int(min(hgt, math.ceil(float(line.row_at(np.array([x0, x1])).max()) + 16)))
    crop = image[y0:y1, x0:x1]
    yy, xx = np.mgrid[y0:y1, x0:x1].astype(float)
    fr0 = _Frame(x0, y0, sun.x_px, y_line, line.slope, *([np.zeros(0)] * 4))
    s, h = fr0.to_line(xx, yy)
    edges = _sky_bins(float(h.min()), float(h.max()))
    return crop, _Frame(x0, y0, sun.x_px, y_line, line.slope, s, h, edges,
                        np.clip(np.searchsorted(edges, h) - 1, 0, edges.size - 2))


def _sky_bins(h_min: float, h_max: float) -> np.ndarray:
    """Bin edges in h: :data:`SKY_BIN_PX` within :data:`SKY_FINE_PX` of the line (the
    horizon's step), four times wider elsewhere (the sky varies slowly there)."""
    wide = 4.0 * SKY_BIN_PX
    below = np.arange(-SKY_FINE_PX, min(h_min, -SKY_FINE_PX) - wide, -wide)[::-1]
    fine = np.arange(-SKY_FINE_PX + SKY_BIN_PX, SKY_FINE_PX, SKY_BIN_PX)
    above = np.arange(SKY_FINE_PX, max(h_max, SKY_FINE_PX) + 2 * wide, wide)
    return np.concatenate([below, fine, above])


@dataclass(frozen=True)
class _Nodes:
    """Where the sky model is known: the mean height of the sky pixels of each h bin.

    Nodes at the pixels' mean heights (not the bins' centres) keep the model exact on
    the rows of an unrolled frame, whose pixels share one height per row.
    """

    h: np.ndarray  # node heights [px]
    count: np.ndarray  # sky pixels per node
    member: np.ndarray  # node of each sky pixel
    lo: np.ndarray  # (M, N) node below each pixel of the frame
    frac: np.ndarray  # (M, N) position between nodes lo and lo + 1 [-]


def _nodes(fr: _Frame, beside: np.ndarray) -> _Nodes | None:
    """Sky-model nodes from the pixels flagged ``beside``; None if there are too few."""
    if beside.sum() < 30:
        return None
    idx = fr.bin[beside]
    cnt = np.bincount(idx, minlength=fr.edges.size - 1)
    if np.count_nonzero(cnt) < 2:
        return None
    filled = np.flatnonzero(cnt)
    heights = np.bincount(idx, fr.h[beside], minlength=cnt.size)[filled] / cnt[filled]
    rank = np.cumsum(cnt > 0) - 1  # bin -> node
    lo = np.clip(np.searchsorted(heights, fr.h) - 1, 0, heights.size - 2)
    frac = np.clip((fr.h - heights[lo]) / (heights[lo + 1] - heights[lo]), 0.0, 1.0)
    return _Nodes(heights, cnt[filled], rank[idx], lo, frac)


@dataclass(frozen=True)
class _Sky:
    """Sky model ``a(h) + g (s - s_mean)`` of one channel and its noise."""

    nodes: _Nodes
    level: np.ndarray  # a(h) at the nodes [linear]
    g: float  # trend along s [linear / px]
    s_mean: float
    sigma: float  # pixel noise [linear]
    kappa: float  # variance inflation for sums (correlated noise) [-]

    def on(self, fr: _Frame, part: tuple[slice, slice] = (slice(None), slice(None))
           ) -> np.ndarray:
        """The model at every pixel of the frame, or of its rows and columns ``part``."""
        lo, frac = self.nodes.lo[part], self.nodes.frac[part]
        return (self.level[lo] * (1.0 - frac) + self.level[lo + 1] * frac
                + self.g * (fr.s[part] - self.s_mean))

    def at(self, s: float, h: float) -> float:
        return float(np.interp(h, self.nodes.h, self.level) + self.g * (s - self.s_mean))


def _sky(plane: np.ndarray, fr: _Frame, beside: np.ndarray, nodes: _Nodes | None,
         noise: float | None, correlation: bool = True) -> _Sky | None:
    """Fit the sky model to the pixels flagged ``beside`` (whose nodes are ``nodes``)."""
    if nodes is None:
        return None
    vb, sb = plane[beside].astype(float), fr.s[beside]
    level = np.bincount(nodes.member, vb, minlength=nodes.h.size) / nodes.count
    res = vb - level[nodes.member]
    sd = sb - sb.mean()
    g = float(np.sum(res * sd) / np.sum(sd**2)) if np.sum(sd**2) > 0 else 0.0
    res = res - g * sd
    up = fr.h[beside] > 3.0
    sigma = _robust_sigma(res[up] if up.sum() > 20 else res)
    floor = NOISE_FLOOR * max(float(np.median(vb)), 1e-3)  # quantised, noise-free frames
    sky = _Sky(nodes, level, g, float(sb.mean()), max(sigma, floor), 1.0)
    if noise is not None:
        return dataclasses.replace(sky, sigma=float(noise))
    if correlation:
        kappa = _correlation_inflation(plane - sky.on(fr), beside & (fr.h > 3.0), sky.sigma)
        sky = dataclasses.replace(sky, kappa=kappa)
    return sky


def _correlation_inflation(res: np.ndarray, use: np.ndarray, sigma: float) -> float:
    """Variance of 2x2 sums of sky residuals over four times the pixel variance."""
    res = np.where(use, res, np.nan)
    m, n = (res.shape[0] // 2) * 2, (res.shape[1] // 2) * 2
    blocks = res[:m, :n].reshape(m // 2, 2, n // 2, 2).sum(axis=(1, 3))
    blocks = blocks[np.isfinite(blocks)]
    if blocks.size < 20 or sigma <= 0:
        return 1.0
    var = (1.4826 * float(np.median(np.abs(blocks - np.median(blocks))))) ** 2
    return float(np.clip(var / (4.0 * sigma**2), 1.0, 4.0))


def _sun_box(img: np.ndarray, fr: _Frame, sun: SunLocation) -> tuple[float, float, np.ndarray]:
    """Half-width in ``s`` and top in ``h`` of the Sun's box, and the sky pixels beside it.

    A first box from the first guess gives a rough sky of the channels' sum; the columns
    and rows of the box whose summed excess is significant then set the box (twice).
    """
    r = max(sun.radius_px, 3.0)
    half, top = 1.2 * r + 6.0, float(fr.h.max())
    total = img.sum(axis=2, dtype=np.float32)
    for _ in range(2):
        beside = (np.abs(fr.s) > half + SKY_GAP_PX) & (fr.h > -0.6 * r - 20)
        sky = _sky(total, fr, beside, _nodes(fr, beside), None, correlation=False)
        if sky is None:
            return half, top, beside
        snr = (total - sky.on(fr)) / sky.sigma
        inside = (fr.h > 0) & (np.abs(fr.s) <= half)
        half, top = _significant_extent(snr, fr, inside, half, top)
    beside = (np.abs(fr.s) > half + SKY_GAP_PX) & (fr.h > -0.6 * r - 20)
    return half, top, beside


def _significant_extent(snr, fr, inside, half, top) -> tuple[float, float]:
    """Columns and rows of ``snr`` (summed over the box) above 4 sigma, with margins."""
    s_bin = np.round(fr.s[inside]).astype(int)
    h_bin = np.round(fr.h[inside]).astype(int)
    if s_bin.size == 0:
        return half, top
    v = snr[inside]
    s_min, h_min = s_bin.min(), h_bin.min()
    col = np.bincount(s_bin - s_min, v)
    row = np.bincount(h_bin - h_min, v)
    col_sig = col > 4.0 * np.sqrt(np.maximum(np.bincount(s_bin - s_min), 1))
    row_sig = row > 4.0 * np.sqrt(np.maximum(np.bincount(h_bin - h_min), 1))
    if not col_sig.any() or not row_sig.any():
        return half, top
    cols = np.flatnonzero(col_sig) + s_min
    margin = 3.0 * DEFAULT_SIGMA_PX + 4.0
    new_half = float(max(abs(cols.min()), abs(cols.max())) + margin)
    new_top = float(np.flatnonzero(row_sig).max() + h_min + margin + 2.0)
    return min(max(new_half, 6.0), half + 20.0), new_top


def _flux(excess: np.ndarray, share: np.ndarray, sky: _Sky) -> tuple[float, float]:
    """Sum of the excess, each pixel weighted by its ``share`` of area above the line, and
    its error (noise, correlation, sky-model error)."""
    sel, nodes = share > 0, sky.nodes
    w = share[sel]
    lo, frac = nodes.lo[sel], nodes.frac[sel]
    weight = (np.bincount(lo, w * (1.0 - frac), minlength=nodes.h.size)
              + np.bincount(lo + 1, w * frac, minlength=nodes.h.size))  # of each node's mean
    model_var = np.sum(weight**2 / nodes.count) * sky.sigma**2
    err = math.sqrt(sky.sigma**2 * sky.kappa * float(w @ w) + sky.kappa * model_var)
    return float(w @ excess[sel]), err


def _flux_share(fr: _Frame, half: float, top: float) -> np.ndarray:
    """Weight of each pixel in the flux: its area above the line (:func:`_area_above`)
    within the Sun's columns (``|s| <= half``) up to ``top``, else 0."""
    cols = np.abs(fr.s) <= half
    share = (cols & (fr.h > 0.75) & (fr.h <= top)).astype(float)
    astride = cols & (np.abs(fr.h) <= 0.75)  # 0.75 > sqrt(2) / 2, a pixel's half-diagonal
    share[astride] = _area_above(fr.h[astride], fr.slope)
    return share


def _area_above(h: np.ndarray, slope: float) -> np.ndarray:
    """Share of each unit pixel's area above the line, from its centre's height ``h`` [px].

    Across a pixel the height above the line changes by ``(slope dx - dy) / norm`` with
    ``dx``, ``dy`` uniform on (-1/2, 1/2) and ``norm = sqrt(1 + slope^2)``: the sum of two
    uniform variables of widths ``a = |slope| / norm`` and ``b = 1 / norm``, whose density
    is a trapezoid. The share above is ``1 - F(-h)`` with ``F`` its distribution function,
    quadratic on the slopes and linear between; ``clip(h + 1/2, 0, 1)`` for a level line.
    """
    norm = math.hypot(1.0, slope)
    a, b = sorted((max(abs(slope) / norm, 1e-9), 1.0 / norm))
    t = np.clip(-np.asarray(h, dtype=float), -0.5 * (a + b), 0.5 * (a + b))
    lower = (t + 0.5 * (a + b)) ** 2 / (2.0 * a * b)
    upper = 1.0 - (0.5 * (a + b) - t) ** 2 / (2.0 * a * b)
    middle = (t + 0.5 * b) / b
    return 1.0 - np.where(t < -0.5 * (b - a), lower, np.where(t > 0.5 * (b - a), upper, middle))


def _box_slices(box: np.ndarray, pad: int) -> tuple[slice, slice]:
    """Bounding rows and columns of ``box`` with ``pad`` pixels around."""
    rows, cols = np.flatnonzero(box.any(axis=1)), np.flatnonzero(box.any(axis=0))
    return (slice(max(rows[0] - pad, 0), rows[-1] + pad + 1),
            slice(max(cols[0] - pad, 0), cols[-1] + pad + 1))


def _horizon_sigma(sky: _Sky, start: float | None = None) -> float:
    """Gaussian width of the sky-to-sea step in the sky model [px]: an error function
    plus a linear trend fitted within ``SKY_FINE_PX`` of the line, the bins' own width
    removed. The fit starts at ``start`` (e.g. the previous frame's result) or 1 px."""
    c = sky.nodes.h
    near = np.abs(c) < SKY_FINE_PX
    if near.sum() < 8:
        return DEFAULT_SIGMA_PX
    hc, lv = c[near], sky.level[near]

    def resid(p):  # (K, 2) -> (K, nodes)
        edge = ndtr((hc - p[:, :1]) / np.exp(p[:, 1:2]))
        a = np.stack([np.ones_like(edge), edge, np.broadcast_to(hc, edge.shape)], axis=2)
        return _projected(a, lv)

    lo, hi = np.array([-2.0, math.log(0.3)]), np.array([2.0, math.log(4.0)])
    s0 = math.log(math.sqrt(start**2 + SKY_BIN_PX**2 / 12.0)) if start and start > 0.4 else 0.0
    p, _, r, conv = _levenberg_marquardt(resid, [0.0, min(max(s0, lo[1]), hi[1])], lo, hi,
                                         give_up_at_bound=True)
    rms = math.sqrt(float(r @ r) / max(r.size - 5, 1))
    if not conv or rms > 0.2 * abs(float(np.ptp(lv))):
        return DEFAULT_SIGMA_PX
    return float(max(math.sqrt(max(math.exp(2 * p[1]) - SKY_BIN_PX**2 / 12.0, 0.0)), 0.4))
