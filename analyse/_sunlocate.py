"""First guess of the Sun's image in a frame: the brightest compact region above the horizon.

Holds :func:`locate_sun` and its result :class:`SunLocation` (both re-exported by
:mod:`analyse.limb`), and the robust scatter and the image check that the limb
measurement shares. Each channel's excess over its sky, at the same height above the
horizon line, is divided by its noise on a block-averaged copy of the frame; the region
above half the peak is the Sun. No published formula: the scatter is the usual
Gaussian-equivalent of the median (1.4826) and mean (1.2533) absolute deviations.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np
from scipy import ndimage

from analyse.horizon import HorizonLine

__all__ = ["LOCATE_BLOCKS", "SUN_MIN_SNR", "SUN_MIN_CONTRAST", "SunLocation", "locate_sun"]

LOCATE_BLOCKS = 320  # locate_sun works on a copy about this many blocks across
SUN_MIN_SNR = 12.0  # a Sun's peak above the sky, in noise sigmas of the small copy
SUN_MIN_CONTRAST = 0.5  # ... and in units of the sky's own level (no source)


@dataclass(frozen=True)
class SunLocation:
    """First guess of the Sun's image: centroid and extent of the bright region [px]."""

    found: bool
    x_px: float
    y_px: float
    radius_px: float
    message: str


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
