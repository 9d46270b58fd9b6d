"""The Sun's upper limb in each colour channel: visibility, apex height, extent.

Coordinates are those of the horizon line: ``s`` along it (from the point below the
Sun's first guess), ``h`` perpendicular to it, up positive [px]. Each channel is measured
on its own sky-subtracted image (DESIGN.md, "Camera").

Sky and flux
    The sky is the mean, in bins of ``h`` (0.5 px near the horizon's step, 2 px above),
    of the columns beside the Sun (both sides), placed at the mean height of each bin's
    pixels and interpolated linearly between, plus a linear trend along ``s``; its
    pixel-to-pixel scatter there is the noise. The
    flux is the sum of the sky-subtracted pixels over the Sun's columns, up to a little
    above its top, each weighted by the share of its area above the line (the row astride
    the line counts in part, :func:`_area_above`, so the flux of a faint segment does not
    jump as the line crosses a pixel's centre); its error is the noise times the square
    root of the sum of squared weights, inflated for correlation between neighbouring
    pixels (measured on the sky beside) and for the sky model's own error. The channel is
    visible when ``flux / flux_err >= VISIBILITY_SIGMA``.

Upper limb
    1. Contour: in each column the upper edge is the peak of a derivative-of-Gaussian
       response down the column, located to sub-pixel by a Gaussian three-point fit [3].
    2. A circle fitted to the contour points near the top (within ``ARC_FRACTION`` of
       its radius from the apex column, clear of the horizon) gives the apex column
       ``s_c`` and the curvature radius ``R_c``.
    3. That contour lies inside the true limb: limb darkening makes the edge a step
       followed by a steep rise [1], and blur moves the gradient's peak inward by
       0.1-0.6 px. The apex height ``T`` is therefore fitted to the pixels of the
       columns near ``s_c`` with a model of the limb seen through a Gaussian blur
       ``sigma`` (PSF and pixel): brightness ``a + b mu(t) / sqrt(2 / R)`` at depth ``t``
       below the local top ``T - (s - s_c)^2 / (2 R_c)``, with
       ``mu = sqrt(2 t / R - t^2 / R^2)`` (the linear limb-darkening law near the limb),
       hidden below the horizon (``h < 0``), blurred. The step integrates in closed
       form (normal CDF), the ramp from two tabulated integrals. ``a``, ``b`` and a sky
       offset enter linearly and are solved at each trial of ``T`` and ``sigma``
       (variable projection [2]). ``b / a`` is pulled gently toward the law's
       ``u sqrt(2 / R) / (1 - u)`` (``u`` from :mod:`analyse.disc` at the channel's
       nominal wavelength; weight ``RAMP_PRIOR_WEIGHT``): JPEG and 4:2:0 video ring at
       the limb, and a free ramp takes the ringing for limb darkening.
    4. Saturated discs: pixels at the clip level are left out, ``sigma`` is that of the
       horizon's edge beside the Sun, ``b / a`` the law's; ``T`` is fitted to the
       unsaturated edge.
    5. Thin segments (apex below ``THIN_SEGMENT_PX`` plus three blurs): no plateau, no
       arc. The same model, with ``sigma`` and ``b / a`` fixed as in step 4, is fitted to
       every pixel of the segment with ``T``, ``s_c`` and ``R_c`` free: the column fluxes
       (the segment's area against ``s``) fix the chord ``w = 2 sqrt(2 R_c T - T^2)``,
       the flux and its profile against the blur fix ``T``. Given ``radius_px`` (a
       circular segment of known radius), ``R_c`` is fixed and ``T`` follows from the
       width and flux together. Flagged ``"thin-segment"``.

4:2:0 colour (``chroma_luma`` given)
    JPEG and most video keep the luma ``Y' = K_R R' + K_G G' + K_B B'`` of the encoded
    (sRGB) values at full resolution and the colour differences at half resolution in
    both directions, so each decoded channel is ``X' + D (X' - Y')``, with ``D`` the
    chroma's resampling minus the identity [4]_. At a sunset limb the channels' edges
    differ (dispersion lifts green a pixel or two above a much brighter red), and red's
    edge leaks into green with weight ``-K_R``: on simulated H.264 and JPEG frames green's
    apex reads 0.2 px low, red's edge is widened. The leak is predicted from the fitted
    limb models (sky plus limb of each channel, encoded), with ``D`` the resampling's
    vertical spread averaged over the row phase, :data:`CHROMA_420_KERNEL`, and each
    channel with a disc is fitted again with it removed, most significant first, each
    refit updating the prediction for the next. Only rows mix: the limb is level near the
    apex. The same leak of the sky's own colour step at the horizon is in the sky model
    (the columns beside the Sun went through the codec alike) and is left out.

Width and height
    The side edges are located along image rows like the contour; each point is moved
    outward by the contour's bias found in step 3. For an ellipse ``(s - s_c)^2`` is a
    quadratic in ``h``: fitted, it gives the chord on the horizon (``h = 0``) or, when
    the centre is above the line, the widest chord and the lower limb.

References
----------
.. [1] A. N. Cox (ed.), Allen's Astrophysical Quantities, 4th ed., Springer (2000),
   section 14.7 (solar limb darkening); the coefficients via :mod:`analyse.disc`.
.. [2] G. Golub and V. Pereyra, "Separable nonlinear least squares: the variable
   projection method and its applications", Inverse Problems 19, R1-R26 (2003).
   doi:10.1088/0266-5611/19/2/201
.. [3] R. B. Fisher and D. K. Naidu, "A comparison of algorithms for subpixel peak
   detection", in Image Technology, Springer (1996), 385-404 (Gaussian three-point fit).
.. [4] ITU-R Recommendation BT.601-7 (2011), section 2.5.1 (luma weights 0.299, 0.587,
   0.114; also JPEG's JFIF 1.02, Hamilton 1992) and BT.709-6 (2015), items 3.2-3.3
   (0.2126, 0.7152, 0.0722); chroma siting and 2:1 decimation in both directions for
   4:2:0 per ITU-T H.264 (2019), annex E, and ITU-T T.81 (1992), section A.1.1.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from dataclasses import dataclass

import cv2
import numpy as np
from scipy import ndimage
from scipy.special import ndtr

from analyse._limbmodel import (  # the limb model and its fit
    _fit_apex,
    _levenberg_marquardt,
    _limb_basis,
    _projected,
    _ramp_ratio,
    _solve_linear,
)
from analyse.frames import linear_to_srgb, srgb_to_linear
from analyse.horizon import HorizonLine

__all__ = ["VISIBILITY_SIGMA", "LUMA_BT601", "LUMA_BT709", "SunLocation", "ChannelLimb",
           "locate_sun", "measure_limbs"]

VISIBILITY_SIGMA = 5.0  # flux / flux_err for "sun above the horizon" (common practice, no source)
CHANNELS = ("r", "g", "b")
LOCATE_BLOCKS = 320  # locate_sun works on a copy about this many blocks across
SUN_MIN_SNR = 12.0  # a Sun's peak above the sky, in noise sigmas of the small copy
SUN_MIN_CONTRAST = 0.5  # ... and in units of the sky's own level (no source)
EDGE_SMOOTH_PX = 1.0  # derivative-of-Gaussian scale for limb edges [px]
EDGE_MIN_SNR = 5.0  # an edge point's response over its noise
ARC_FRACTION = 0.6  # contour points within this fraction of R_c of the apex column
GROUP_DROP_PX = 1.5  # columns whose top is at most this far below the apex enter the fit [px]
THIN_SEGMENT_PX = 4.0  # below this apex height the segment has no plateau [px]
MAX_CHANNEL_GAP_PX = 8.0  # a "thin" channel this far below another's disc is not measured
SKY_GAP_PX = 4.0  # gap between the Sun's columns and the sky columns [px]
SKY_BIN_PX = 0.5  # sky-model bin in h near the horizon [px]
SKY_FINE_PX = 6.0  # fine bins within this distance of the horizon [px]
SATURATION_LEVEL = 0.98  # fraction of the clip level counted as saturated
DEFAULT_SIGMA_PX = 1.0  # blur when nothing measures it [px]
RAMP_PRIOR_WEIGHT = 0.2  # pull toward the limb-darkening law (tuned on synthetic JPEG q85)
MIN_LIMB_SIGMA_FRACTION = 0.5  # a limb blur below this fraction of the horizon's is not
# believed: the same optics blur both (common practice, no source)
NOISE_FLOOR = 0.005  # least pixel noise, relative to the sky (8-bit steps are ~1 %) [-]
LUMA_BT601 = (0.299, 0.587, 0.114)  # K_R, K_G, K_B: ITU-R BT.601-7 (JPEG/JFIF, SD video)
LUMA_BT709 = (0.2126, 0.7152, 0.0722)  # K_R, K_G, K_B: ITU-R BT.709-6 item 3.2 (HD video)
# Vertical spread of 4:2:0 chroma [-], averaged over the row phase: FFmpeg's (1, 3, 3, 1) / 8
# decimation with nearest-sample upsampling and libjpeg's 2x2 mean with its (3/4, 1/4)
# "fancy" upsampling both average to the binomial (1, 4, 6, 4, 1) / 16, variance 1 px^2
# (derived here; the round trip through FFmpeg is checked in tests/test_limb_fit.py).
CHROMA_420_KERNEL = np.array([1.0, 4.0, 6.0, 4.0, 1.0]) / 16.0


@dataclass(frozen=True)
class SunLocation:
    """First guess of the Sun's image: centroid and extent of the bright region [px]."""

    found: bool
    x_px: float
    y_px: float
    radius_px: float
    message: str


@dataclass(frozen=True)
class ChannelLimb:
    """One channel's Sun above the horizon (heights perpendicular to the line) [px]."""

    channel: str
    visible: bool  # significance >= VISIBILITY_SIGMA
    significance: float  # flux / flux_err
    flux: float  # sky-subtracted, over the Sun's columns, by area above the line [linear]
    flux_err: float
    apex_height_px: float  # upper limb's apex above the horizon; NaN if not measured
    apex_height_err_px: float
    apex_x_px: float  # image x of the apex
    width_px: float  # chord on the horizon, or the widest chord
    height_px: float  # apex to the lowest visible limb point (or to the horizon)
    sky_level: float  # sky beside the apex [linear]
    disc_level: float  # disc plateau (95th percentile inside) [linear]
    saturated: bool
    flags: tuple[str, ...]
    curvature_radius_px: float = float("nan")  # limb's radius of curvature at the apex
    edge_sigma_px: float = float("nan")  # Gaussian blur of the limb (with the pixel box)
    horizon_sigma_px: float = float("nan")  # blur of the horizon's step beside the Sun


# --- locate_sun --------------------------------------------------------------------


def locate_sun(image: np.ndarray, line: HorizonLine | None = None) -> SunLocation:
    """Brightest compact region at or above the horizon: a first guess of the Sun.

    Works on a block-averaged copy about :data:`LOCATE_BLOCKS` blocks across. Each
    channel's excess over its sky (a low percentile of the blocks at the same height
    above the line, or in the same row without a line) is divided by its noise; the
    region above half the peak of the largest of the three is the Sun. Below the line
    (glitter) is ignored when ``line`` is found.

    Parameters
    ----------
    image : (H, W, 3) ndarray
        Linear-light frame.
    line : HorizonLine, optional
        The horizon.

    Returns
    -------
    SunLocation
        ``found`` False with a message when nothing stands out by :data:`SUN_MIN_SNR`.
    """
    img = _check_rgb(image)
    hgt, wid = img.shape[:2]
    f = max(1, math.ceil(max(hgt, wid) / LOCATE_BLOCKS))
    small = cv2.resize(np.ascontiguousarray(img, dtype=np.float32),
                       (max(1, wid // f), max(1, hgt // f)), interpolation=cv2.INTER_AREA)
    fy, fx = hgt / small.shape[0], wid / small.shape[1]
    yc = (np.arange(small.shape[0]) + 0.5) * fy - 0.5
    xc = (np.arange(small.shape[1]) + 0.5) * fx - 0.5
    groups = np.repeat(np.arange(small.shape[0])[:, None], small.shape[1], axis=1)
    mask = np.ones(small.shape[:2], bool)
    if line is not None and line.found:  # sky by height above the line, not by row
        above = line.row_at(xc)[None, :] - yc[:, None]
        mask = above > -0.5 * fy
        groups = np.round(4.0 * above / fy).astype(int)  # blocks astride the line alike
    if mask.sum() < 9:
        return SunLocation(False, np.nan, np.nan, np.nan, "no sky above the horizon")
    snr = np.max([_excess_snr(small[..., i], mask, groups) for i in range(3)], axis=0)
    peak = float(np.max(snr))
    if not peak >= SUN_MIN_SNR:
        return SunLocation(False, np.nan, np.nan, np.nan,
                           f"nothing bright above the sky (peak {peak:.1f} sigma, "
                           f"{SUN_MIN_SNR:g} needed)")
    labels, n = ndimage.label(snr > 0.5 * peak)
    sums = ndimage.sum_labels(snr, labels, np.arange(1, n + 1))
    region = labels == 1 + int(np.argmax(sums))
    wts = np.where(region, snr, 0.0)
    cols = np.flatnonzero(region.any(axis=0))
    x = float(np.sum(wts.sum(axis=0) * xc) / wts.sum())
    y = float(np.sum(wts.sum(axis=1) * yc) / wts.sum())
    radius = max(0.5 * (cols[-1] - cols[0] + 1) * fx, math.sqrt(region.sum() / math.pi) * fy)
    return SunLocation(True, x, y, float(radius), "")


def _excess_snr(plane: np.ndarray, mask: np.ndarray, groups: np.ndarray) -> np.ndarray:
    """(plane - sky) / noise, -inf outside ``mask``; the sky of each group of blocks (one
    height above the line) is its 20th percentile, the noise from neighbour differences."""
    g, v = groups[mask], plane[mask].astype(float)
    lo, span = float(v.min()), float(np.ptp(v)) + 1e-12
    key = np.sort(g + 0.999 * (v - lo) / span)  # by group, then by value within it
    gs = np.floor(key).astype(int)
    vs = (key - gs) / 0.999 * span + lo
    keys, start, count = np.unique(gs, return_index=True, return_counts=True)
    sky_of_key = vs[start + (0.2 * (count - 1)).astype(int)]
    sky = np.zeros(plane.shape)
    sky[mask] = sky_of_key[np.searchsorted(keys, g)]
    d = np.diff(plane, axis=1)[mask[:, 1:] & mask[:, :-1]]
    noise = _robust_sigma(d) / math.sqrt(2.0) if d.size else 0.0
    snr = np.where(mask, (plane - sky) / max(noise, 1e-9), -np.inf)
    # A Sun is also bright against its sky, not only against the noise.
    return np.where(plane - sky >= SUN_MIN_CONTRAST * np.abs(sky), snr, np.minimum(snr, 0.0))


def _robust_sigma(x: np.ndarray) -> float:
    """Gaussian-equivalent scatter of ``x``: the larger of the scaled median and mean
    absolute deviations (quantised data can have a median deviation of zero)."""
    dev = np.abs(x - np.median(x))
    return max(1.4826 * float(np.median(dev)), 1.2533 * float(np.mean(dev)))


def _check_rgb(image: np.ndarray) -> np.ndarray:
    img = np.asarray(image)
    if img.ndim != 3 or img.shape[2] != 3:
        raise ValueError(f"image must be (H, W, 3), got shape {img.shape}")
    return img


# --- geometry, sky and flux ----------------------------------------------------------


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


# --- edges and shapes --------------------------------------------------------------------


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


def _box_slices(box: np.ndarray, pad: int) -> tuple[slice, slice]:
    """Bounding rows and columns of ``box`` with ``pad`` pixels around."""
    rows, cols = np.flatnonzero(box.any(axis=1)), np.flatnonzero(box.any(axis=0))
    return (slice(max(rows[0] - pad, 0), rows[-1] + pad + 1),
            slice(max(cols[0] - pad, 0), cols[-1] + pad + 1))


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


# --- per channel ------------------------------------------------------------------------


@dataclass(frozen=True)
class _Shape:
    apex_px: float
    apex_err_px: float
    s_c: float
    width_px: float
    height_px: float
    radius_px: float
    sigma_px: float
    flags: tuple[str, ...]
    arc: tuple[float, float, float] | None = None  # (s_c, h_c, R_c) of the contour
    # (T, s_c, R_c, sigma, a, b, offset) of the apex fit: the limb model (step 3)
    model: tuple[float, ...] | None = None


@dataclass(frozen=True)
class _Channel:
    """One channel's data in the frame and the options of :func:`measure_limbs`."""

    name: str
    excess: np.ndarray  # (M, N) sky-subtracted [linear]
    usable: np.ndarray  # (M, N) below the clip level
    sky: _Sky
    sigma_h: float  # blur measured on the horizon beside the Sun [px]
    radius_px: float | None
    prior_weight: float
    sigma_start: float | None = None  # the blur where the apex fit starts [px]
    top_start: float | None = None  # the apex height where it starts (default: the arc's)


def _thick(ch: _Channel, fr: _Frame, box, hint=None, memo=None) -> _Shape | None:
    """Apex from the contour's arc and the limb model near the apex (module docstring).

    ``hint``: another channel's arc, used when this channel's contour is too faint for
    its own (the channels' discs differ by a few pixels of dispersion).
    """
    noise = ch.sky.sigma * math.sqrt(ch.sky.kappa)
    memo = {} if memo is None else memo
    if "arc" not in memo:
        memo["arc"] = _fit_arc(*_contour(ch.excess, fr, box, noise), 3.0 * ch.sigma_h + 1.0)
    arc, flags = memo["arc"], ()
    if hint is not None:
        if not (arc is None or abs(arc[1] + arc[2] - hint[1] - hint[2]) > 6.0
                or abs(arc[0] - hint[0]) > 0.2 * hint[2]):
            return None  # its own arc kept: the first pass's fit, which failed
        arc, flags = hint, ("arc-from-other-channel",)
    if arc is None or arc[1] + arc[2] < THIN_SEGMENT_PX + 3.0 * ch.sigma_h:
        return None
    sc, hc, rc = arc
    apex0 = hc + rc
    drop = (fr.s - sc) ** 2 / (2.0 * rc)
    depth = apex0 - drop - fr.h
    group = (box & (drop <= GROUP_DROP_PX) & (fr.h > 0)
             & (depth > -(3.0 * ch.sigma_h + 4.0)) & (depth < 3.0 * ch.sigma_h + 8.0))
    saturated = not np.all(ch.usable[group])
    group &= ch.usable
    if group.sum() < 30:
        return None
    top0 = apex0 + 0.2 if ch.top_start is None else ch.top_start
    fit = _fit_apex(ch.excess[group], fr.h[group], drop[group], top0, ch.sigma_h,
                    ch.sky.kappa, rc, _ramp_ratio(ch.name, rc), ch.prior_weight, not saturated,
                    ch.sigma_start, MIN_LIMB_SIGMA_FRACTION * ch.sigma_h)
    if not fit.ok or fit.sigma_px < MIN_LIMB_SIGMA_FRACTION * ch.sigma_h:
        return None  # no fit, or a limb sharper than the optics: a thin segment's contour
    top = fit.top_px
    wh = _side_width(ch.excess, fr, box, noise, arc, top, top - apex0, fit.sigma_px)
    if wh is None:  # too low for side edges: the circle's chord on the line
        wh = (2.0 * math.sqrt(max(2.0 * rc * top - top**2, 0.0)), top)
    return _Shape(top, fit.top_err_px, sc, wh[0], wh[1], rc, fit.sigma_px, flags, arc,
                  (top, sc, rc, fit.sigma_px) + fit.coef)


def _thin_top(sigma_px: float) -> float:
    """Highest apex a thin-segment fit may return [px]."""
    return 3.0 * sigma_px + 6.0


def _thin(ch: _Channel, fr: _Frame, box) -> _Shape | None:
    """A segment too low for a plateau, fitted whole (module docstring, step 5).

    The limb model with ``sigma`` and ``b / a`` fixed is fitted to every pixel of the
    segment with its centre column and curvature radius free (or the radius fixed to
    ``radius_px``): the column fluxes set the width ``sqrt(8 R T)``, the profile
    against the blur sets ``T``.
    """
    seg = _segment(ch.excess, fr, box)
    if seg is None:
        return None
    sc0, w0 = seg
    sig, top0 = ch.sigma_h, 1.5
    sel = (ch.usable & box & (np.abs(fr.s - sc0) < 0.5 * w0 + 3.0 * sig + 3.0)
           & (fr.h < top0 + 3.0 * sig + 6.0))
    if sel.sum() < 15:
        return None
    vals, s, h = ch.excess[sel], fr.s[sel], fr.h[sel]
    fixed = ch.radius_px if ch.radius_px is not None and ch.radius_px > 0.5 * w0 else None

    def resid(p):  # (K, 2 or 3) -> (K, pixels)
        rc = np.full((len(p), 1), fixed) if fixed is not None else np.exp(p[:, 2:3])
        step, ramp = _limb_basis(h, p[:, :1] - (s - p[:, 1:2]) ** 2 / (2.0 * rc), sig, rc)
        ratio = np.array([_ramp_ratio(ch.name, float(x)) for x in rc[:, 0]])[:, None]
        a = np.stack([step + ratio * ramp, np.ones_like(step)], axis=2)
        return _projected(a, vals)

    p0 = [top0, sc0] + ([] if fixed is not None else [math.log(max(w0**2 / 12.0, w0))])
    lo = np.array([0.0, sc0 - 5.0, math.log(0.5 * w0 + 1.0)][: len(p0)])
    hi = np.array([_thin_top(sig), sc0 + 5.0, math.log(1e4)][: len(p0)])
    p, jac, r, conv = _levenberg_marquardt(resid, p0, lo, hi, max_iter=30)
    try:
        err = math.sqrt(max(np.linalg.inv(jac.T @ jac)[0, 0] * float(r @ r)
                            / max(vals.size - len(p0) - 2, 1) * ch.sky.kappa, 0.0))
    except np.linalg.LinAlgError:
        err = np.nan
    if p[0] > hi[0] - 0.05:  # no thin segment: a fainter disc than the contour could show
        return None
    rc, top = (fixed if fixed is not None else math.exp(p[2])), float(p[0])
    width = 2.0 * math.sqrt(max(2.0 * rc * top - top**2, 0.0))
    flags = ("thin-segment",) + (() if conv else ("fit-not-converged",))
    return _Shape(top, err, float(p[1]), width, top, rc, sig, flags)


def _measure_channel(name: str, plane, fr: _Frame, box, share, sky: _Sky, clip: float,
                     radius_px: float | None, prior_weight: float, hint=None,
                     thin: bool = True, memo: dict | None = None
                     ) -> tuple[ChannelLimb, _Shape | None]:
    """One channel: flux and visibility, then its limb: the arc and apex fit of a disc
    (:func:`_thick`, on ``hint``'s arc if its own is missing), else, if ``thin``, a thin
    segment (:func:`_thin`), unless ``hint``'s disc stands too high for the channel's
    segment to be believed (:data:`MAX_CHANNEL_GAP_PX`). ``share``: each pixel's weight
    in the flux (:func:`_flux`). ``memo`` keeps the channel's blur, arc and data between
    the first call (no hint) and later ones (with a hint, or a 4:2:0 refit)."""
    memo = {} if memo is None else memo
    excess = plane - sky.on(fr)
    flux, err = _flux(excess, share, sky)
    significance = flux / err if err > 0 else 0.0
    usable = plane < SATURATION_LEVEL * clip
    saturated = int(np.count_nonzero(box & ~usable)) >= 3
    flags = ("saturated",) if saturated else ()
    disc = float(np.percentile(excess[box], 95)) if box.any() else np.nan
    nan = float("nan")
    sky_here = sky.at(0.0, 5.0)
    if not significance >= VISIBILITY_SIGMA:
        return ChannelLimb(name, False, significance, flux, err, nan, nan, nan, nan, nan,
                           sky_here, sky_here + disc, saturated, flags), None
    if "sigma" not in memo:
        memo["sigma"] = _horizon_sigma(sky, memo.get("horizon_start"))
    ch = _Channel(name, excess, usable, sky, memo["sigma"], radius_px, prior_weight,
                  memo.get("sigma_start"))
    memo["channel"] = ch
    shape = _thick(ch, fr, box, hint, memo)
    if shape is None and thin and (hint is None or hint[1] + hint[2] - _thin_top(ch.sigma_h)
                                   <= MAX_CHANNEL_GAP_PX):
        shape = _thin(ch, fr, box)
    if shape is None:
        return ChannelLimb(name, True, significance, flux, err, nan, nan, nan, nan, nan,
                           sky_here, sky_here + disc, saturated, flags + ("no-limb-fit",),
                           horizon_sigma_px=ch.sigma_h), None
    memo["limb"] = ChannelLimb(name, True, significance, flux, err, nan, nan, nan, nan, nan,
                               sky_here, sky_here + disc, saturated, flags,
                               horizon_sigma_px=ch.sigma_h)
    return _with_shape(memo["limb"], shape, fr, sky), shape


def _with_shape(limb: ChannelLimb, shape: _Shape, fr: _Frame, sky: _Sky) -> ChannelLimb:
    """``limb`` (flux and visibility measured, no limb yet) with the limb ``shape``."""
    x_apex, _ = fr.to_image(shape.s_c, shape.apex_px)
    sky_apex = sky.at(shape.s_c, shape.apex_px + 3.0)
    return dataclasses.replace(
        limb, apex_height_px=shape.apex_px, apex_height_err_px=shape.apex_err_px,
        apex_x_px=x_apex, width_px=shape.width_px, height_px=shape.height_px,
        sky_level=sky_apex, disc_level=sky_apex + limb.disc_level - limb.sky_level,
        flags=limb.flags + shape.flags, curvature_radius_px=shape.radius_px,
        edge_sigma_px=shape.sigma_px)


def _missing(flag: str) -> dict[str, ChannelLimb]:
    nan = float("nan")
    return {c: ChannelLimb(c, False, nan, nan, nan, nan, nan, nan, nan, nan, nan, nan, False,
                           (flag,)) for c in CHANNELS}


def measure_limbs(image: np.ndarray, line: HorizonLine, sun: SunLocation, *,
                  noise: float | dict[str, float] | None = None,
                  radius_px: float | None = None, clip_level: float = 1.0,
                  ramp_prior_weight: float = RAMP_PRIOR_WEIGHT,
                  previous: dict[str, ChannelLimb] | None = None,
                  chroma_luma: tuple[float, float, float] | None = None
                  ) -> dict[str, ChannelLimb]:
    """Measure each channel's Sun above the horizon: flux, visibility, upper limb, extent.

    Parameters
    ----------
    image : (H, W, 3) ndarray
        Linear-light frame or a crop of one; ``line`` and ``sun`` in its coordinates.
        Only a region around the Sun is used, so the cost follows the Sun's size.
    line : HorizonLine
        The horizon (:func:`analyse.horizon.find_horizon`).
    sun : SunLocation
        First guess (:func:`locate_sun`).
    noise : float or dict, optional
        Pixel noise [linear], for all channels or per channel; default: measured on the
        sky beside the Sun.
    radius_px : float, optional
        The limb's radius of curvature at the apex [px] (e.g. ``curvature_radius_px``
        of earlier frames); fixes it in the fit of thin segments.
    clip_level : float
        Sensor clip level [linear]; pixels above :data:`SATURATION_LEVEL` of it are
        saturated.
    ramp_prior_weight : float
        Pull of the fitted limb darkening toward the law at the channel's nominal
        wavelength, per sqrt(pixel) [-]: 0 trusts the data (best for frames without
        chroma subsampling); the default keeps JPEG/4:2:0 ringing from being taken for
        limb darkening, at the cost of ~3 px per unit error of the law's ``u``.
    previous : dict, optional
        The previous frame's result: its blurs (``edge_sigma_px``, ``horizon_sigma_px``)
        are where this frame's fits start, which then converge in fewer steps to the same
        minimum.
    chroma_luma : (K_R, K_G, K_B), optional
        Luma weights of a source whose colour was stored as 4:2:0 (JPEG:
        :data:`LUMA_BT601`; HD video: :data:`LUMA_BT709`): the leak of the channels'
        edges into each other through the half-resolution chroma is predicted and removed
        (module docstring, "4:2:0 colour"), at the cost of a second apex fit per channel.
        None (default) for colour at full resolution.

    Returns
    -------
    dict
        ``{"r": ChannelLimb, "g": ..., "b": ...}``; never raises for a missing Sun or
        horizon (flags ``"no-horizon"``, ``"no-sun"``).
    """
    img = _check_rgb(image)
    if not line.found:
        return _missing("no-horizon")
    if not sun.found:
        return _missing("no-sun")
    crop, fr = _crop(img, line, sun)
    if crop.shape[0] < 8 or crop.shape[1] < 8:
        return _missing("near-frame-edge")
    half, top, beside = _sun_box(crop, fr, sun)
    box = (np.abs(fr.s) <= half) & (fr.h > 0) & (fr.h <= top)
    share = _flux_share(fr, half, top)
    extra = _box_flags(fr, half, top, beside)
    out = {}
    if _nodes(fr, beside) is None:  # nothing beside the Sun: the sky above it
        beside = (fr.h > top) & ~box
    nodes = _nodes(fr, beside)
    skies, shapes = {}, {}
    memos = {c: _starts(previous.get(c) if previous else None) for c in CHANNELS}
    for i, c in enumerate(CHANNELS):  # discs first: their arcs help fainter channels
        level = noise.get(c) if isinstance(noise, dict) else noise
        skies[c] = _sky(crop[..., i], fr, beside, nodes, level)
        if skies[c] is None:
            out[c] = _missing("no-sky-reference")[c]
            continue
        out[c], shapes[c] = _measure_channel(c, crop[..., i], fr, box, share, skies[c],
                                             clip_level, radius_px, ramp_prior_weight,
                                             thin=False, memo=memos[c])
    hint = _best_arc(out, shapes)
    for i, c in enumerate(CHANNELS):  # channels without an arc: another's, or thin
        if c in shapes and out[c].visible and shapes[c] is None:
            out[c], shapes[c] = _second_pass(out[c], hint, lambda h: _measure_channel(
                c, crop[..., i], fr, box, share, skies[c], clip_level, radius_px,
                ramp_prior_weight, h, memo=memos[c]))
    if chroma_luma is not None and len(skies) == 3 and all(skies.values()):
        out = _refit_420(out, shapes, crop, fr, box, skies, memos, chroma_luma)
    return {c: dataclasses.replace(lm, flags=lm.flags + extra) for c, lm in out.items()}


# --- 4:2:0 chroma -------------------------------------------------------------------------


def _refit_420(out: dict[str, ChannelLimb], shapes: dict, crop: np.ndarray, fr: _Frame, box,
               skies: dict[str, _Sky], memos: dict[str, dict], luma) -> dict[str, ChannelLimb]:
    """Each channel with a fitted disc, fitted again without the 4:2:0 chroma leak that
    the channels' limb models predict (module docstring), the most significant first;
    each refit's model predicts the leak for the next. Channels without a disc model
    enter the prediction as their decoded pixels."""
    order = sorted((c for c in CHANNELS if shapes.get(c) is not None
                    and shapes[c].model is not None), key=lambda c: -out[c].significance)
    part = _leak_region(fr, box, [shapes[c].model for c in order])
    if part is None:
        return out
    out = dict(out)
    sky = [skies[c].on(fr, part) for c in CHANNELS]
    light = [_model_light(shapes[c].model, fr, part, sky[i]) if c in order
             else crop[part][..., i].astype(float) for i, c in enumerate(CHANNELS)]
    for c in order:
        i, shape = CHANNELS.index(c), shapes[c]
        ch = memos[c]["channel"]
        excess = ch.excess.copy()
        excess[part] -= _leak_420(light, sky, luma)[i]
        hint = shape.arc if "arc-from-other-channel" in shape.flags else None
        again = _thick(dataclasses.replace(ch, excess=excess, sigma_start=shape.sigma_px,
                                           top_start=shape.apex_px), fr, box, hint, memos[c])
        if again is not None:
            out[c] = _with_shape(memos[c]["limb"], again, fr, skies[c])
            light[i] = _model_light(again.model, fr, part, sky[i])
    return out


def _leak_region(fr: _Frame, box, models) -> tuple[slice, slice] | None:
    """Rows and columns of the crop around every apex fit's pixels, with room for the
    chroma's vertical spread; None if there are none."""
    tops, sigma = [m[0] for m in models], max((m[3] for m in models), default=1.0)
    near = np.zeros_like(box)
    for top, sc, rc, *_ in models:
        near |= np.abs(fr.s - sc) <= math.sqrt(2.0 * rc * GROUP_DROP_PX) + 3.0
    near &= box & (fr.h > min(tops, default=0.0) - 3.0 * sigma - 10.0)
    near &= fr.h < max(tops, default=0.0) + 3.0 * sigma + 6.0
    if not near.any():
        return None
    return _box_slices(near, CHROMA_420_KERNEL.size // 2 + 1)


def _model_light(model, fr: _Frame, part: tuple[slice, slice], sky: np.ndarray) -> np.ndarray:
    """Sky plus a channel's fitted limb model on the crop's rows and columns ``part``."""
    top, sc, rc, sigma, a, b, offset = model
    s, h = fr.s[part], fr.h[part]
    step, ramp = _limb_basis(h, top - (s - sc) ** 2 / (2.0 * rc), sigma, rc)
    return sky + offset + a * step + b * ramp


def _leak_420(light: list[np.ndarray], sky: list[np.ndarray], luma) -> list[np.ndarray]:
    """What 4:2:0 chroma adds to each channel's excess over the sky model [linear].

    ``light`` and ``sky``: the three channels' linear light, with and without the Sun,
    on the same image rows (axis 0). Each is encoded (sRGB), its colour difference from
    the luma ``sum K_i X'_i`` spread by :data:`CHROMA_420_KERNEL` and decoded: the
    decoded minus the true light, less the same for the sky alone (already in the sky
    model, which went through the codec alike).
    """
    def through_codec(planes):
        code = [linear_to_srgb(np.maximum(p, 0.0)) for p in planes]
        luma_code = sum(k * x for k, x in zip(luma, code))
        out = []
        for p, x in zip(planes, code):
            diff = x - luma_code
            spread = ndimage.convolve1d(diff, CHROMA_420_KERNEL, axis=0, mode="nearest")
            out.append(srgb_to_linear(x + spread - diff) - np.maximum(p, 0.0))
        return out

    return [a - b for a, b in zip(through_codec(light), through_codec(sky))]


def _starts(limb: ChannelLimb | None) -> dict[str, float]:
    """Where a channel's fits start: an earlier frame's blurs, where finite."""
    if limb is None:
        return {}
    pairs = (("sigma_start", limb.edge_sigma_px), ("horizon_start", limb.horizon_sigma_px))
    return {k: float(v) for k, v in pairs if np.isfinite(v)}


def _second_pass(limb: ChannelLimb, hint, measure) -> tuple[ChannelLimb, _Shape | None]:
    """A channel without an arc of its own: measured on another channel's arc ``hint``
    (when there is one) or as a thin segment; a thin apex far below the hint's disc is
    not believed. Returns the limb and its shape (None if not believed)."""
    again, shape = measure(hint)
    if hint is None or (shape is not None and shape.arc is not None):
        return again, shape
    if hint[1] + hint[2] - again.apex_height_px > MAX_CHANNEL_GAP_PX:
        return dataclasses.replace(again, apex_height_px=np.nan, apex_height_err_px=np.nan,
                                   width_px=np.nan, height_px=np.nan,
                                   flags=again.flags + ("no-limb-fit",)), None
    return again, shape


def _best_arc(limbs: dict[str, ChannelLimb], shapes: dict) -> tuple[float, float, float] | None:
    """The contour arc of the most significant channel that has one."""
    have = [c for c, sh in shapes.items() if sh is not None and sh.arc is not None
            and "arc-from-other-channel" not in sh.flags]
    if not have:
        return None
    return shapes[max(have, key=lambda c: limbs[c].significance)].arc


def _box_flags(fr: _Frame, half: float, top: float, beside: np.ndarray) -> tuple[str, ...]:
    flags = []
    if fr.s.min() > -half or fr.s.max() < half or fr.h.max() < top:
        flags.append("near-frame-edge")
    if beside.sum() < 30:
        flags.append("no-sky-reference")
    elif not ((fr.s[beside] < 0).any() and (fr.s[beside] > 0).any()):
        flags.append("one-sided-sky")
    return tuple(flags)
