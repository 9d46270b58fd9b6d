"""The Sun's upper limb in each colour channel: visibility, apex height, extent.

Coordinates are those of the horizon line: ``s`` along it (from the point below the
Sun's first guess), ``h`` perpendicular to it, up positive [px]. Each channel is measured
on its own sky-subtracted image (DESIGN.md, "Camera").

Sky and flux
    A sky model fitted to the columns beside the Sun is subtracted; the flux is the sum
    of the sky-subtracted pixels over the Sun's columns above the line, with its error
    (:mod:`analyse._limbsky`). The channel is visible when
    ``flux / flux_err >= VISIBILITY_SIGMA``.

Upper limb
    1. Contour: in each column the upper edge is the peak of a derivative-of-Gaussian
       response down the column, located to sub-pixel (:mod:`analyse._limbedges`).
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
    The leak of the channels' edges into each other through the half-resolution chroma
    of JPEG and most video is predicted from the fitted limb models, and each channel
    with a disc is fitted again with it removed (:mod:`analyse._chroma420`).

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
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from analyse._chroma420 import (  # the 4:2:0 colour leak
    CHROMA_420_KERNEL,
    LUMA_BT601,
    LUMA_BT709,
    _leak_420,
    _model_light,
)
from analyse._limbedges import _contour, _fit_arc, _segment, _side_width
from analyse._limbmodel import (  # the limb model and its fit
    _fit_apex,
    _levenberg_marquardt,
    _limb_basis,
    _projected,
    _ramp_ratio,
)
from analyse._limbsky import (  # line-aligned crop, Sun's box, sky model and flux
    _box_slices,
    _crop,
    _flux,
    _flux_share,
    _Frame,
    _horizon_sigma,
    _nodes,
    _Sky,
    _sky,
    _sun_box,
)
from analyse._sunlocate import SunLocation, _check_rgb, locate_sun
from analyse.horizon import HorizonLine

__all__ = ["VISIBILITY_SIGMA", "LUMA_BT601", "LUMA_BT709", "SunLocation", "ChannelLimb",
           "locate_sun", "measure_limbs"]

VISIBILITY_SIGMA = 5.0  # flux / flux_err for "sun above the horizon" (common practice, no source)
CHANNELS = ("r", "g", "b")
GROUP_DROP_PX = 1.5  # columns whose top is at most this far below the apex enter the fit [px]
THIN_SEGMENT_PX = 4.0  # below this apex height the segment has no plateau [px]
MAX_CHANNEL_GAP_PX = 8.0  # a "thin" channel this far below another's disc is not measured
SATURATION_LEVEL = 0.98  # fraction of the clip level counted as saturated
RAMP_PRIOR_WEIGHT = 0.2  # pull toward the limb-darkening law (tuned on synthetic JPEG q85)
MIN_LIMB_SIGMA_FRACTION = 0.5  # a limb blur below this fraction of the horizon's is not
# believed: the same optics blur both (common practice, no source)


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


# --- per channel ----------------------------------------------------------------------


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


# --- 4:2:0 chroma ---------------------------------------------------------------------


def _refit_420(out: dict[str, ChannelLimb], shapes: dict, crop: np.ndarray, fr: _Frame, box,
               skies: dict[str, _Sky], memos: dict[str, dict], luma) -> dict[str, ChannelLimb]:
    """Each channel with a fitted disc, fitted again without the 4:2:0 chroma leak that
    the channels' limb models predict (:mod:`analyse._chroma420`), the most significant first;
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
