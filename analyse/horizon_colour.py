"""Lens colour offsets measured on the sea horizon: the red and blue edges against green.

The line of :func:`analyse.horizon.find_horizon` is the green channel's horizon by
default: the lens's lateral colour shifts the red and blue images, and
:func:`horizon_colour_offsets` measures by how much on the same edge, with a centroid of
the sRGB-encoded gradient, which chroma subsampling does not move (see its docstring).
The centroid's own offset from the linear edge, :func:`encoding_bias`, is removed, and
the per-block differences from green are averaged robustly with Tukey's biweight [1]_.
:func:`chroma_offset_error` and :func:`clip_offset_error` give the offsets' systematic
errors from vertically subsampled chroma and from samples clipped at 0 or 1.

References
----------
.. [1] P. W. Holland and R. E. Welsch, "Robust regression using iteratively reweighted
   least-squares", Commun. Stat. Theory Methods 6, 813-827 (1977).
   doi:10.1080/03610927708827533
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

from analyse.frames import linear_to_srgb
from analyse.horizon import (
    _CHANNELS,
    COLUMN_TARGET,
    MIN_COLUMNS,
    TUKEY_C,
    HorizonLine,
    _blocks,
    _search_rows,
    column_edges,
)

__all__ = ["horizon_colour_offsets", "encoding_bias", "chroma_offset_error",
           "clip_offset_error"]

COLOUR_BAND_PX = 6.0  # search band for the r/b edges around the green line [px]
CENTROID_HALF_PX = 5  # half-window of the encoded-gradient centroid [px]
# 4:2:0 chroma: one chroma sample per 2 rows (ITU-T T.81 / H.264 4:2:0 sampling) [px]
CHROMA_ROW_SPACING_PX = 2.0


def horizon_colour_offsets(image: np.ndarray, line: HorizonLine, *,
                           exclude_x: tuple[float, float] | None = None) -> dict[str, float]:
    """Vertical offset of the red and blue horizon edges from the green one.

    The lens's lateral colour displaces each channel's image; on a horizontal edge the
    vertical part shows. Each channel's edge is located per column block, within
    :data:`COLOUR_BAND_PX` of ``line``, as the centroid of its gradient over
    +-:data:`CENTROID_HALF_PX`, computed on the sRGB-encoded values: JPEG and video
    store colour as full-resolution luma plus subsampled chroma, and smoothing the
    chroma changes neither the integral nor the centroid of an encoded channel's
    gradient, whereas it moves the peak. The centroid of an encoded edge differs from
    the linear edge by an amount set by the channel's two levels and the edge width
    (:func:`encoding_bias`), which is removed. Per-block differences from green are
    averaged robustly (Tukey biweight).

    Parameters
    ----------
    image : (H, W, 3) ndarray
        Linear-light frame.
    line : HorizonLine
        The green horizon (from :func:`find_horizon`).
    exclude_x : (x0, x1), optional
        Columns to leave out [px].

    Returns
    -------
    dict
        ``{"r": dy, "b": dy}``: the channel's edge below the green one [px, y down
        positive]; NaN when not measurable. Beside them, per channel ``c`` in r, g, b:
        ``"step_c"``, the edge's sRGB-encoded step (above minus below, [0..1] scale;
        for :func:`chroma_offset_error`), and ``"clip_c"``, a bound on the edge's shift
        by samples clipped at 0 or 1 [px] (for :func:`clip_offset_error`); NaN when
        not measured.
    """
    nan = {"r": float("nan"), "b": float("nan")}
    nan |= {f"{k}_{c}": float("nan") for k in ("step", "clip") for c in _CHANNELS}
    image = np.asarray(image)
    if image.ndim != 3 or image.shape[2] != 3:
        raise ValueError(f"image must be (H, W, 3), got shape {image.shape}")
    if not line.found:
        return nan
    h, w = image.shape[:2]
    step = max(1, w // COLUMN_TARGET)
    xs = np.arange(w // step) * step + 0.5 * (step - 1)
    r0, r1, lo, hi = _search_rows(h, xs, line, COLOUR_BAND_PX + CENTROID_HALF_PX)
    if r1 <= r0:
        return nan
    keep = np.ones(xs.size, bool)
    if exclude_x is not None:
        keep = (xs < min(exclude_x) - 0.5 * step) | (xs > max(exclude_x) + 0.5 * step)
    centre = line.row_at(xs) - r0
    edges = {c: _encoded_edge(image[..., _CHANNELS[c]], step, r0, r1, lo, hi, keep, centre)
             for c in ("r", "g", "b")}
    out = dict(nan)
    for c in ("r", "b"):
        d = edges[c][0] - edges["g"][0]
        d = d[np.isfinite(d)]
        out[c] = _tukey_mean(d) if d.size >= MIN_COLUMNS else float("nan")
    for c, (_, step_enc, clipped) in edges.items():
        out[f"step_{c}"], out[f"clip_{c}"] = step_enc, clipped
    return out


def _encoded_edge(plane: np.ndarray, step: int, r0: int, r1: int, lo: np.ndarray,
                  hi: np.ndarray, keep: np.ndarray,
                  centre: np.ndarray) -> tuple[np.ndarray, float, float]:
    """Per-block edge row (strip coordinates) from the encoded gradient's centroid,
    corrected by :func:`encoding_bias`, NaN where there is no clean edge; the encoded
    step (above minus below) and the fraction of the window's samples clipped at 0 or 1.

    The window is centred on ``centre`` (strip rows) moved by the channel's median
    peak offset from it, the same for every block: a window following each block's own
    peak would follow its noise and compression artefacts.
    """
    strip, _ = _blocks(plane, step, r0, r1)
    row, _, sig, _, _ = column_edges(strip, lo, hi)
    out = np.full(row.shape, np.nan)
    none = (out, float("nan"), float("nan"))
    good = keep & np.isfinite(row)
    if good.sum() < MIN_COLUMNS:
        return none
    enc, _ = _blocks(linear_to_srgb(np.clip(plane[r0:r1], 0.0, None)), step, 0, r1 - r0)
    half = int(CENTROID_HALF_PX)
    k = np.round(centre + np.median(row[good] - centre[good])).astype(int)
    cols = np.flatnonzero(keep & (k - half - 1 >= 0) & (k + half + 1 < strip.shape[0]))
    if cols.size < MIN_COLUMNS:
        return none
    k = k[cols]
    offs = np.arange(-half, half)[:, None]
    grad = enc[k + offs + 1, cols] - enc[k + offs, cols]
    total = np.sum(grad, axis=0)
    typical = float(np.median(total))
    ok = total * np.sign(typical) > 0.5 * abs(typical)  # flat (quantised) columns out
    out[cols[ok]] = np.sum((k + offs + 0.5) * grad, axis=0)[ok] / total[ok]
    above = float(np.median(strip[k - half - 1, cols]))
    below = float(np.median(strip[k + half + 1, cols]))
    rows = r0 + k + np.arange(-half - 1, half + 2)[:, None]
    px = plane[rows[..., None], (cols * step)[None, :, None] + np.arange(step)]
    lev = linear_to_srgb(np.clip([above, below], 0.0, 1.0))
    return (out - encoding_bias(above, below, float(np.nanmedian(sig[good])), half),
            float(lev[0] - lev[1]), _clip_shift(px, float(lev[0]), float(lev[1])))


def _clip_shift(px: np.ndarray, above_enc: float, below_enc: float) -> float:
    """Bound on the centroid's shift by samples clipped at 0 or 1 [px].

    ``px``: (rows, blocks, columns) linear samples of the window, one row beyond each
    end. The centroid of a monotonic edge's gradient over a window is its far end minus
    the integral of the normalised profile, so raising samples by ``d`` moves it by
    ``d / step`` px per row. Clipping spread evenly over a side (noise cut at 0) moves
    that side's level alike and not the centroid; only the rows' excess over the
    clipping at the dark (bright) side's outer row counts, each clipped sample taken
    as having lost as much as the dark level's distance from 0 (the bright level's from
    1): the codec's undershoot of a level is of the order of that level (a judgement:
    common practice, no source).
    """
    step = abs(above_enc - below_enc)
    if not step > 0:
        return float("nan")
    dark_first = above_enc < below_enc  # the dark side is the window's first row
    low = np.mean(px <= 0.0, axis=(1, 2))
    high = np.mean(px >= 1.0, axis=(1, 2))
    low_ref = low[0] if dark_first else low[-1]
    high_ref = high[-1] if dark_first else high[0]
    lost = (np.sum(np.clip(low - low_ref, 0.0, None)) * min(above_enc, below_enc)
            + np.sum(np.clip(high - high_ref, 0.0, None)) * (1.0 - max(above_enc, below_enc)))
    return float(lost / step)


def encoding_bias(level_above: float, level_below: float, sigma_px: float,
                  half_px: float) -> float:
    """Centroid of the sRGB-encoded gradient of a Gaussian-blurred step, minus the step's
    position [px, y down].

    Parameters
    ----------
    level_above, level_below : float
        Linear levels above and below the step [-].
    sigma_px : float
        Gaussian width of the step [px].
    half_px : float
        Half-width of the centroid window, centred on the step [px].

    References
    ----------
    IEC 61966-2-1:1999 (sRGB encoding), through :func:`analyse.frames.linear_to_srgb`.
    """
    if not (np.isfinite(sigma_px) and sigma_px > 0):
        return 0.0
    y = np.linspace(-half_px, half_px, 2001)
    prof = level_below + (level_above - level_below) * ndtr(-y / sigma_px)
    grad = -np.gradient(np.asarray(linear_to_srgb(np.clip(prof, 0.0, None))), y)
    return float(np.sum(y * grad) / np.sum(grad))


def chroma_offset_error(step_enc: dict[str, float], luma: tuple[float, float, float], *,
                        spacing_px: float = CHROMA_ROW_SPACING_PX) -> dict[str, float]:
    """1-sigma error of the r and b offsets from green where chroma is subsampled
    vertically [px].

    A stored channel is luma (every row) plus chroma (every ``spacing_px`` rows):
    ``C' = Y' + (C' - Y')``. The edge of chroma is placed by the codec only to within
    its sample spacing, taken as a uniform error over one spacing, ``spacing/sqrt(12)``
    [1]_ (the spacing as the error's range is a judgement: common practice, no source).
    A shift ``e`` of the chroma edge moves channel ``c``'s edge by ``e s_c``, with
    ``s_c = (step_c - step_Y) / step_c`` the chroma's share of the channel's step, so
    the offset from green by ``e (s_c - s_g)``. Capped at :data:`CENTROID_HALF_PX`
    (a flat channel has no edge to place).

    Parameters
    ----------
    step_enc : dict
        ``{"r", "g", "b"}``: each channel's encoded step across the horizon (above minus
        below) [0..1 scale], from :func:`horizon_colour_offsets`.
    luma : (3,) tuple
        The codec's luma weights ``K_R, K_G, K_B`` [-].
    spacing_px : float
        Rows between chroma samples [px]: 2 for 4:2:0, 1 for 4:2:2 and 4:4:4.

    Returns
    -------
    dict
        ``{"r": err, "b": err}`` [px]; NaN where a step is not finite.

    References
    ----------
    .. [1] W. R. Bennett, "Spectra of quantized signals", Bell Syst. Tech. J. 27,
       446-472 (1948) (uniform error over a step: variance step^2 / 12).
    """
    s = {c: float(step_enc.get(c, np.nan)) for c in _CHANNELS}
    step_y = sum(k * s[c] for k, c in zip(luma, ("r", "g", "b")))
    out = {}
    for c in ("r", "b"):
        if not all(np.isfinite(s[x]) for x in (c, "g")):
            out[c] = float("nan")
        elif min(abs(s[c]), abs(s["g"])) < 1e-6:
            out[c] = float(CENTROID_HALF_PX)
        else:
            share = (s[c] - step_y) / s[c] - (s["g"] - step_y) / s["g"]
            out[c] = min(abs(share) * spacing_px / math.sqrt(12.0), float(CENTROID_HALF_PX))
    return out


def clip_offset_error(clipped: dict[str, float]) -> dict[str, float]:
    """1-sigma error of the r and b offsets from green from clipped samples [px].

    Each channel's bound on its edge's shift by clipping (see :func:`_clip_shift`) is
    taken as its error, the r (or b) and green channels' in quadrature (a judgement:
    common practice, no source).

    Parameters
    ----------
    clipped : dict
        ``{"r", "g", "b"}``: each channel's bound [px], ``"clip_c"`` of
        :func:`horizon_colour_offsets`.

    Returns
    -------
    dict
        ``{"r": err, "b": err}`` [px]; NaN where a fraction is not finite.
    """
    f = {c: float(clipped.get(c, np.nan)) for c in _CHANNELS}
    return {c: min(float(math.hypot(f[c], f["g"])), float(CENTROID_HALF_PX)) for c in ("r", "b")}


def _tukey_mean(d: np.ndarray) -> float:
    """Biweight location of ``d`` (Holland & Welsch 1977), started at the median."""
    m = float(np.median(d))
    for _ in range(10):
        s = max(1.4826 * float(np.median(np.abs(d - m))), 1e-3)
        wt = np.clip(1.0 - ((d - m) / (TUKEY_C * s)) ** 2, 0.0, None) ** 2
        m = float(np.sum(wt * d) / np.sum(wt))
    return m
