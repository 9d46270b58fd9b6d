"""The sea horizon in a frame: a straight line found to sub-pixel accuracy; registration.

Method
------
1. Columns are grouped in blocks of ``step`` adjacent columns (``step`` chosen so that
   about :data:`COLUMN_TARGET` blocks cover the frame) and averaged: less noise, and the
   cost of a full frame is that of a few hundred columns. Only a band around a prior
   line is searched: the previous frame's, or else that of a first pass with wider
   blocks (:data:`COARSE_COLUMNS`) over the whole height.
2. Each block's profile down the image is filtered with a derivative-of-Gaussian
   (scale :data:`EDGE_SMOOTH_PX`). The sky-to-sea step is the extreme of that response
   (its sign, brighter above or below, is taken from the majority of blocks). A constant
   background gradient of the sky only adds a constant to the response, so it does not
   move the peak. The peak is located to sub-pixel by a parabola through the logarithm of
   the three samples around it, exact for a Gaussian-blurred step [1]_; the curvature of
   that parabola gives the edge's Gaussian width. A block's edge counts when that peak
   stands :data:`EDGE_MIN_SNR` times above the block's own noise, taken from differences
   with its neighbouring blocks (:func:`_column_noise`): a bright solar disc over most of
   the frame's width raises only its own blocks' noise, not that of the sky beside it.
3. A straight line is fitted robustly to the block edges: RANSAC [2]_ on pairs of
   points, then iteratively reweighted least squares with Tukey's biweight [3]_.
   Columns the caller excludes (the Sun, its glitter) are left out; remaining outliers
   get zero weight.

The line found is the green channel's horizon by default: the lens's lateral colour
shifts the red and blue images, and :mod:`analyse.horizon_colour` measures by how much
on the same edge.

Limits
------
8-bit JPEG frames of a dark sky (green ~12 over ~2.5 sRGB codes) carry an error of the
codec: the noise that would dither the codes is quantised away, ringing below the dark
sea is clipped at code 0, and coarsely quantised chroma leaks into the green channel near
the edge. The edge moves alike in every column of a level horizon, by an amount set by
the quality and by the edge's place in the 8- and 16-row blocks: on the end-to-end test's
scene re-encoded at q75, q85 and q95 with the edge at six places, -0.06 to +0.32, +0.11 to
+0.25 and +0.03 to +0.20 px (about half of it from DCT quantisation, half from 4:2:0
chroma: q85 4:4:4 gives +0.17 where 4:2:0 gives +0.26); the same frames as PNG: -0.01 px.
The green channel alone cannot undo it. Luma (which JPEG stores at full resolution)
halves it at best and must be turned back into green's line with colour offsets that the
codec biases more (:mod:`analyse.horizon_colour`); a linear model of the chroma leak
removes only 0.01-0.06 px of it.

References
----------
.. [1] R. B. Fisher and D. K. Naidu, "A comparison of algorithms for subpixel peak
   detection", in Image Technology, Springer (1996), 385-404 (Gaussian three-point fit).
.. [2] M. A. Fischler and R. C. Bolles, "Random sample consensus", Commun. ACM 24,
   381-395 (1981). doi:10.1145/358669.358692
.. [3] P. W. Holland and R. E. Welsch, "Robust regression using iteratively reweighted
   least-squares", Commun. Stat. Theory Methods 6, 813-827 (1977).
   doi:10.1080/03610927708827533
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter1d, median_filter

__all__ = ["HorizonLine", "find_horizon", "column_edges", "robust_line"]

COLUMN_TARGET = 480  # column blocks across a frame (1920 px: blocks of 4 columns)
EDGE_SMOOTH_PX = 1.5  # derivative-of-Gaussian scale [px] (common practice, no source)
EDGE_MIN_SNR = 6.0  # a block's edge must stand this many noise sigmas above its column
NOISE_HALF_COLUMNS = 4  # a block's noise: median over +-4 neighbouring block pairs
NOISE_ROWS = 128  # rows sampled for the noise of a taller strip
EDGE_MAX_SIGMA_PX = 4.0  # wider edges are not a sea horizon (haze bands, sky gradients) [px]
COARSE_COLUMNS = 120  # column blocks of the first pass over the whole height
PRIOR_BAND_PX = 12.0  # search band around the previous frame's line [px]
COARSE_BAND_PX = 4.0  # search band around the first pass's line [px]
RANSAC_TRIALS = 200  # random pairs tried
RANSAC_INLIER_PX = 2.0  # pair-model inlier distance [px]
RANSAC_EVAL_POINTS = 128  # points on which each pair's consensus is counted
TUKEY_C = 4.685  # biweight tuning constant (95 % efficiency for Gaussian data) [3]
IRLS_MAX_ITER = 10  # reweighting steps at most
IRLS_TOL_PX = 1e-6  # ... stopping when the line moves less than this [px]
MIN_COLUMNS = 8  # fewest inlier blocks for a line
MIN_COLUMN_FRACTION = 0.25  # ... and at least this fraction of the blocks searched
_CHANNELS = {"r": 0, "g": 1, "b": 2}


@dataclass(frozen=True)
class HorizonLine:
    """A straight sea horizon in image coordinates (x right, y down, pixel centres at
    integers). ``roll_deg`` is counter-clockwise positive: positive when the horizon
    rises to the right (FOLDER-FORMAT.md)."""

    found: bool
    row_px: float  # y of the line at x = x_ref_px [px]
    x_ref_px: float  # reference column [px]
    slope: float  # dy/dx [-]
    row_err_px: float  # 1-sigma [px]
    roll_deg: float  # -degrees(atan(slope)) [deg]
    roll_err_deg: float  # 1-sigma [deg]
    columns_used: int  # inlier column blocks
    message: str  # why not found, or ""
    edge_sigma_px: float = float("nan")  # Gaussian width of the sky-sea step [px]
    edge_contrast: float = float("nan")  # sky minus sea level across the step [linear]

    def row_at(self, x) -> np.ndarray:
        """y of the line at columns ``x`` [px] (any shape)."""
        return self.row_px + self.slope * (np.asarray(x, dtype=float) - self.x_ref_px)

    def height_above(self, x, y) -> np.ndarray:
        """Perpendicular distance of points ``(x, y)`` from the line [px], positive above."""
        return (self.row_at(x) - np.asarray(y, dtype=float)) / math.hypot(1.0, self.slope)


def _not_found(message: str, x_ref: float, columns: int = 0) -> HorizonLine:
    nan = float("nan")
    return HorizonLine(False, nan, x_ref, nan, nan, nan, nan, columns, message)


def _plane(image: np.ndarray, channel: str) -> np.ndarray:
    image = np.asarray(image)
    if image.ndim == 2:
        return image
    if image.ndim == 3 and image.shape[2] == 3:
        if channel not in _CHANNELS:
            raise ValueError(f"channel must be one of 'r', 'g', 'b', got {channel!r}")
        return image[..., _CHANNELS[channel]]
    raise ValueError(f"image must be (H, W) or (H, W, 3), got shape {image.shape}")


def _blocks(plane: np.ndarray, step: int, r0: int, r1: int) -> tuple[np.ndarray, np.ndarray]:
    """Rows r0..r1-1 averaged over blocks of ``step`` columns; block centre columns [px]."""
    n = plane.shape[1] // step
    strip = np.ascontiguousarray(plane[r0:r1, : n * step], dtype=np.float32)
    if step > 1:  # INTER_AREA with an integer factor is the exact block mean
        strip = cv2.resize(strip, (n, r1 - r0), interpolation=cv2.INTER_AREA)
    return strip, np.arange(n) * step + 0.5 * (step - 1)


def column_edges(strip: np.ndarray, lo: np.ndarray, hi: np.ndarray, *, polarity: int = 0
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, int]:
    """Sub-pixel row of the strongest step in each column of a strip.

    Parameters
    ----------
    strip : (M, N) ndarray
        Column profiles [linear units]; row 0 is the strip's first row.
    lo, hi : (N,) ndarray
        Rows (strip coordinates) between which each column's edge is searched [px].
    polarity : {-1, 0, +1}
        +1: brighter below the edge; -1: brighter above (a sky over a darker sea);
        0: decided by the majority of columns.

    Returns
    -------
    row : (N,) ndarray
        Edge row in strip coordinates [px]; NaN where no edge qualifies.
    snr : (N,) ndarray
        Peak response over its noise [-].
    sigma : (N,) ndarray
        Gaussian width of the edge, the smoothing removed [px].
    step : (N,) ndarray
        Step height, positive along ``polarity`` [linear units].
    polarity : int
        The polarity used.
    """
    d = gaussian_filter1d(strip, EDGE_SMOOTH_PX, axis=0, order=1, mode="nearest")
    d = d - _median_rows(d)
    rows = np.arange(strip.shape[0])[:, None]
    margin = 2.0 * EDGE_SMOOTH_PX
    last = strip.shape[0] - 1 - margin
    inside = (rows >= np.maximum(lo, margin)) & (rows <= np.minimum(hi, last))
    noise = _column_noise(strip) * _dog_gain() + 1e-12
    if polarity == 0:
        pos = np.where(inside, d, -np.inf).max(axis=0)
        neg = np.where(inside, -d, -np.inf).max(axis=0)
        ok = np.isfinite(pos)
        polarity = 1 if ok.any() and np.median(pos[ok] - neg[ok]) > 0 else -1
    resp = np.where(inside, polarity * d, -np.inf)
    k = np.argmax(resp, axis=0)
    cols = np.arange(strip.shape[1])
    peak = resp[k, cols]
    valid = np.isfinite(peak) & (k > 0) & (k < strip.shape[0] - 1)
    k = np.clip(k, 1, strip.shape[0] - 2)
    a, b, c = (polarity * d[k + i, cols] for i in (-1, 0, 1))
    valid &= inside[k - 1, cols] & inside[k + 1, cols] & (a > 0) & (c > 0) & (b >= a) & (b >= c)
    with np.errstate(divide="ignore", invalid="ignore"):
        la, lb, lc = np.log(np.where(valid, a, 1)), np.log(np.where(valid, b, 1)), np.log(
            np.where(valid, c, 1))
        curv = la - 2.0 * lb + lc
        offset = np.clip(0.5 * (la - lc) / curv, -0.5, 0.5)
        s2 = -1.0 / curv
    sigma = np.sqrt(np.clip(s2 - EDGE_SMOOTH_PX**2, 0.0, None))
    snr = np.where(valid, peak / noise, 0.0)
    valid &= (curv < 0) & (snr >= EDGE_MIN_SNR) & (sigma <= EDGE_MAX_SIGMA_PX)
    row = np.where(valid, k + offset, np.nan)
    step = np.where(valid, peak * np.sqrt(2.0 * np.pi * np.clip(s2, 0, None)), np.nan)
    return row, snr, np.where(valid, sigma, np.nan), step, polarity


def _column_noise(strip: np.ndarray) -> np.ndarray:
    """Pixel noise of each column of a strip [its units], shape (N,).

    The median absolute difference between neighbouring columns (the nearly horizontal
    edge cancels; 1.4826 / sqrt 2 for a normal pair), down each pair, then the median of
    the pairs within +-:data:`NOISE_HALF_COLUMNS`: local, so that a bright disc over most
    of the frame raises only its own columns' noise. Strips taller than
    :data:`NOISE_ROWS` rows are sampled on every k-th row.
    """
    n = strip.shape[1]
    if n < 2:
        return np.zeros(n)
    rows = strip[:: max(1, strip.shape[0] // NOISE_ROWS)]
    pair = _median_rows(np.abs(rows[:, 1:] - rows[:, :-1])) * (1.4826 / math.sqrt(2.0))
    pair = np.append(pair, pair[-1])  # column j: pairs (j-1, j) and (j, j+1) in the window
    return median_filter(pair, size=2 * NOISE_HALF_COLUMNS + 1, mode="nearest")


def _median_rows(a: np.ndarray) -> np.ndarray:
    """``np.median(a, axis=0)``, the same values, from one partial sort (several times
    faster on (M, N) strips)."""
    k = a.shape[0] // 2
    p = np.partition(a, k, axis=0)
    return p[k] if a.shape[0] % 2 else 0.5 * (p[k] + p[:k].max(axis=0))


@functools.lru_cache(maxsize=1)
def _dog_gain() -> float:
    """White-noise gain of the derivative-of-Gaussian filter of :func:`column_edges`."""
    impulse = np.zeros(64)
    impulse[32] = 1.0
    return float(np.linalg.norm(gaussian_filter1d(impulse, EDGE_SMOOTH_PX, order=1)))


def _ransac_line(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Inlier mask of the best line through random pairs of points (Fischler 1981).

    Each pair's consensus is counted on an evenly spaced subset of at most
    :data:`RANSAC_EVAL_POINTS` points (the pairs are drawn from all of them); the mask
    returned is the best pair's over all points.
    """
    n = x.size
    rng = np.random.default_rng(0)
    i = rng.integers(0, n, RANSAC_TRIALS)
    j = rng.integers(0, n, RANSAC_TRIALS)
    keep = x[i] != x[j]
    i, j = i[keep], j[keep]
    if not i.size:
        return np.ones(n, bool)
    slope = (y[j] - y[i]) / (x[j] - x[i])
    sub = slice(None, None, max(1, n // RANSAC_EVAL_POINTS))
    xs, ys = x[None, sub], y[None, sub]
    resid = np.abs(ys - (y[i][:, None] + slope[:, None] * (xs - x[i][:, None])))
    best = int(np.argmax((resid < RANSAC_INLIER_PX).sum(axis=1)))
    return np.abs(y - (y[i[best]] + slope[best] * (x - x[i[best]]))) < RANSAC_INLIER_PX


def _weighted_line(u: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """Weighted least-squares ``y = c0 + c1 u`` from the 2x2 normal equations."""
    sw, su, suu = float(w.sum()), float(w @ u), float(w @ (u * u))
    sy, suy = float(w @ y), float(w @ (u * y))
    det = sw * suu - su * su
    if not det > 1e-12 * max(sw * suu, 1e-300):  # one column only: a level line
        return (sy / sw if sw > 0 else float("nan")), 0.0
    return (suu * sy - su * suy) / det, (sw * suy - su * sy) / det


def robust_line(x: np.ndarray, y: np.ndarray, x_ref: float
                ) -> tuple[float, float, np.ndarray, np.ndarray, float]:
    """Line ``y = row + slope (x - x_ref)`` by RANSAC then Tukey-biweight IRLS.

    The reweighting stops when the line moves by less than :data:`IRLS_TOL_PX` at the
    ends of the span, or after :data:`IRLS_MAX_ITER` steps.

    Returns
    -------
    row, slope : float
    cov : (2, 2) ndarray
        Covariance of (row, slope), scaled by the residual scatter and inflated for
        correlation between neighbouring residuals.
    inliers : (N,) ndarray of bool
    scale : float
        Robust residual scatter [px].
    """
    inl = _ransac_line(x, y)
    span = max(float(np.ptp(x)), 1.0)
    u = (x - x_ref) / span  # centred and scaled for conditioning
    w = inl.astype(float)
    scale = 1.0
    coef = (float("nan"), float("nan"))
    for _ in range(IRLS_MAX_ITER):
        new = _weighted_line(u, y, w)
        r = y - (new[0] + new[1] * u)
        scale = max(1.4826 * float(np.median(np.abs(r[w > 0]))), 0.02)
        w = np.clip(1.0 - (r / (TUKEY_C * scale)) ** 2, 0.0, None) ** 2
        moved = abs(new[0] - coef[0]) + abs(new[1] - coef[1])
        coef = new
        if moved < IRLS_TOL_PX:
            break
    inl = w > 0
    r_in = r[inl]
    s2 = float(np.sum(r_in**2) / max(inl.sum() - 2, 1))
    rho = float(np.corrcoef(r_in[:-1], r_in[1:])[0, 1]) if inl.sum() > 4 else 0.0
    inflate = (1.0 + max(rho, 0.0)) / (1.0 - min(max(rho, 0.0), 0.9))
    a = np.column_stack([np.ones(int(inl.sum())), u[inl]])
    cov_u = s2 * inflate * np.linalg.inv(a.T @ a)
    jac = np.diag([1.0, 1.0 / span])
    return float(coef[0]), float(coef[1] / span), jac @ cov_u @ jac, inl, scale


def _search_rows(h: int, xs: np.ndarray, prior: HorizonLine | None, band: float
                 ) -> tuple[int, int, np.ndarray, np.ndarray]:
    """Strip rows r0..r1 and per-column search limits (strip coordinates)."""
    if prior is None or not prior.found:
        return 0, h, np.zeros(xs.size), np.full(xs.size, h - 1.0)
    centre = prior.row_at(xs)
    pad = int(math.ceil(4 * EDGE_SMOOTH_PX)) + 1
    r0 = int(max(0, math.floor(centre.min() - band) - pad))
    r1 = int(min(h, math.ceil(centre.max() + band) + pad + 1))
    if r1 - r0 < 3 * pad:
        return 0, 0, centre, centre
    return r0, r1, centre - band - r0, centre + band - r0


def find_horizon(image: np.ndarray, *, exclude_x: tuple[float, float] | None = None,
                 prior: HorizonLine | None = None, min_columns: int | None = None,
                 channel: str = "g") -> HorizonLine:
    """Find the sea horizon: a straight sky-to-sea edge across the frame.

    Parameters
    ----------
    image : (H, W, 3) or (H, W) ndarray
        Linear-light frame [0..1].
    exclude_x : (x0, x1), optional
        Columns to leave out (the Sun and its glitter) [px].
    prior : HorizonLine, optional
        The previous frame's line: only a band of :data:`PRIOR_BAND_PX` around it is
        searched. The caller retries without a prior when nothing is found. Without
        one, a first pass with :data:`COARSE_COLUMNS` wider blocks over the whole
        height serves as the prior.
    min_columns : int, optional
        Fewest inlier column blocks for a line (default: :data:`MIN_COLUMNS` or
        :data:`MIN_COLUMN_FRACTION` of the blocks searched, whichever is more).
    channel : {"g", "r", "b"}
        Channel whose edge defines the line.

    Returns
    -------
    HorizonLine
        ``found`` False with a ``message`` when there is no straight edge.
    """
    plane = _plane(image, channel)
    h, w = plane.shape
    x_ref = 0.5 * (w - 1)
    if h < 16 or w < 16:
        return _not_found(f"image of {h}x{w} px is too small for a horizon", x_ref)
    band = PRIOR_BAND_PX
    if prior is None or not prior.found:  # coarse pass over the whole height
        prior = _fit_line(plane, max(1, w // COARSE_COLUMNS), None, band, exclude_x, None)
        if not prior.found:
            return prior
        band = COARSE_BAND_PX
    return _fit_line(plane, max(1, w // COLUMN_TARGET), prior, band, exclude_x, min_columns)


def _fit_line(plane: np.ndarray, step: int, prior: HorizonLine | None, band: float,
              exclude_x: tuple[float, float] | None, min_columns: int | None) -> HorizonLine:
    """Edges of column blocks of ``step`` columns (near ``prior`` if given), then a line."""
    h, w = plane.shape
    x_ref = 0.5 * (w - 1)
    xs = np.arange(w // step) * step + 0.5 * (step - 1)
    r0, r1, lo, hi = _search_rows(h, xs, prior, band)
    if r1 <= r0:
        return _not_found("the prior line lies outside the frame", x_ref)
    strip, xs = _blocks(plane, step, r0, r1)
    row, _, sig, height, _ = column_edges(strip, lo, hi)
    use = np.ones(xs.size, bool)
    if exclude_x is not None:
        use &= (xs < min(exclude_x) - 0.5 * step) | (xs > max(exclude_x) + 0.5 * step)
    need = max(MIN_COLUMNS, int(math.ceil(MIN_COLUMN_FRACTION * use.sum())))
    need = need if min_columns is None else int(min_columns)
    ok = use & np.isfinite(row)
    if ok.sum() < max(need, 3):
        return _not_found(f"no sharp straight edge: {int(ok.sum())} of {int(use.sum())} column "
                          f"blocks have an edge, {need} needed", x_ref, int(ok.sum()))
    row_px, slope, cov, inl, _ = robust_line(xs[ok], row[ok] + r0, x_ref)
    if inl.sum() < need:
        return _not_found(f"edges do not line up: {int(inl.sum())} of {int(use.sum())} column "
                          f"blocks on one line, {need} needed", x_ref, int(inl.sum()))
    slope_err = math.sqrt(cov[1, 1])
    return HorizonLine(
        True, row_px, x_ref, slope, math.sqrt(cov[0, 0]), -math.degrees(math.atan(slope)),
        math.degrees(slope_err / (1.0 + slope**2)), int(inl.sum()), "",
        float(np.median(sig[ok][inl])), float(np.median(height[ok][inl])))


# Moved to analyse.horizon_colour, which imports this module: still importable from here,
# looked up on first use (PEP 562) so that neither module's import needs the other's end.
_MOVED = frozenset({"horizon_colour_offsets", "encoding_bias", "chroma_offset_error",
                    "clip_offset_error", "COLOUR_BAND_PX", "CENTROID_HALF_PX",
                    "CHROMA_ROW_SPACING_PX"})


def __getattr__(name: str):
    """The names moved to :mod:`analyse.horizon_colour` (PEP 562)."""
    if name in _MOVED:
        from analyse import horizon_colour

        return getattr(horizon_colour, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
