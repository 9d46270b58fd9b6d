"""The solar disc through the traced transfer curves: a channel's radiance in pixels.

Holds the renderer's view of one channel's transfer curves (:class:`ChannelCurves`, built
by :mod:`analyse.simulate`) and the disc drawn through them (:func:`sun_patch`, with the
closed-form disc area :func:`disc_area_below_left`): pure functions over numpy arrays,
no scenario or camera. ``u`` (along the horizon), ``v`` (up) and the elevation ``e`` are
those of :mod:`analyse.simulate`.

The solar disc. For wavelength node ``k`` the ray at ``e`` sees the true altitude
``a_k(e)`` (the traced curve, linear between its rays); rays below the node's sea
horizon meet the sea. The brightness of a pixel is its mean over its solid angle of the
disc's intensity at ``(u, a_k(e))`` times the transmission, so a sub-row
``[e1, e2]`` of a pixel contributes ``(e2 - e1) / (a2 - a1)`` times the disc's flux in
the true-sky box ``[u1, u2] x [a1, a2]``. The uniform part of that box flux is exact:
with the disc's radius as unit, the area of the disc below ``y`` and left of ``x`` has a
closed form ``H(x, y)`` (:func:`disc_area_below_left`) and a box is a difference of four
``H``. The limb-darkened part takes ``mu`` at the middle of the part of the pixel's
central column that lies inside the disc. The transmission is ``exp(-tau_k m_k)``, with
``m_k`` the airmass of the traced rays bounding that piece of the curve (their mean, as
:func:`analyse.predict.visible_fraction` uses), averaged over each sub-row; the node
weights are sensitivity x solar spectrum outside the atmosphere, so reddening and
dimming come from the rays themselves.

References
----------
.. [1] Linear limb darkening as in :mod:`analyse.disc` (Allen's Astrophysical
   Quantities, 4th ed., section 14.7).
.. [2] Transmission and airmass of the traced rays: :mod:`calibration.bands` (Bodhaine
   et al. 1999; Angstrom 1929) and :mod:`analyse.refraction`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ROW_OVERSAMPLE", "ChannelCurves", "disc_area_below_left", "sun_patch"]

ROW_OVERSAMPLE = 2  # sub-rows per pixel row that follow the transfer curve's bends
_CHUNK_ELEMENTS = 1_500_000  # array elements per block of the disc computation


@dataclass(frozen=True)
class ChannelCurves:
    """One channel's wavelength nodes, as the renderer needs them (K nodes, M rays)."""

    name: str
    elevation_deg: np.ndarray  # (K, M) apparent elevation of the traced rays
    altitude_deg: np.ndarray  # (K, M) true altitude they see (NaN: trapped)
    horizon_airmass: np.ndarray  # (K,) airmass along each node's sea-horizon ray
    cum_elevation_deg: np.ndarray  # (K, M+1) the rays' elevations, and one far beyond
    cum_transmission_deg: np.ndarray  # (K, M+1) integral of the transmission over e
    top_slope: np.ndarray  # (K,) da/de of the last piece, for a little extrapolation
    horizon_deg: np.ndarray  # (K,) apparent elevation of each node's sea horizon
    tau: np.ndarray  # (K,) vertical optical depth (Rayleigh + aerosol)
    weight: np.ndarray  # (K,) sensitivity x solar spectrum, summing to 1
    limb_u: np.ndarray  # (K,) linear limb-darkening coefficient


def _fs(x: np.ndarray) -> np.ndarray:
    """``integral_-1^x sqrt(1 - t^2) dt`` for ``-1 <= x <= 1``."""
    return 0.5 * (x * np.sqrt(np.maximum(1.0 - x * x, 0.0)) + np.arcsin(x)) + np.pi / 4


def disc_area_below_left(x: np.ndarray, y: np.ndarray, fs_x: np.ndarray | None = None
                         ) -> np.ndarray:
    """Area of the unit disc with ``X < x`` and ``Y < y``: ``H(x, y)`` (broadcast).

    Inside the chord ``|x| < c = sqrt(1 - y^2)`` a column holds ``y + sqrt(1 - x^2)`` of
    disc below ``y``; outside it the whole column (``y > 0``) or nothing (``y < 0``).
    Integrating column by column with ``F(x) = integral_-1^x sqrt(1 - t^2) dt`` gives
    ``H = y (x_c + c) + F(x_c) - F(-c)`` plus, for ``y >= 0``,
    ``2 (F(min(x, -c)) + F(max(x, c)) - F(c))``, with ``x_c`` = ``x`` clipped to
    ``[-c, c]``; ``F`` increases, so ``F(clip(x)) = clip(F(x))``. ``fs_x`` may pass
    ``F(x)`` when ``x`` is shared by many ``y``.
    """
    x = np.minimum(np.maximum(x, -1.0), 1.0)
    y = np.minimum(np.maximum(y, -1.0), 1.0)
    fs_x = _fs(x) if fs_x is None else fs_x
    c = np.sqrt(1.0 - y * y)
    fs_c = _fs(c)
    fs_mc = np.pi / 2 - fs_c
    h = np.minimum(np.maximum(x, -c), c)
    h += c
    h *= y
    h += np.minimum(np.maximum(fs_x, fs_mc), fs_c)
    h -= fs_mc
    outer = np.minimum(fs_x, fs_mc)
    outer += np.maximum(fs_x, fs_c)
    outer -= fs_c
    outer *= 2.0 * (y >= 0.0)
    h += outer
    return h


def sun_patch(ch: ChannelCurves, v_low_px: np.ndarray, u_edges_px: np.ndarray,
              centre_altitude_deg: np.ndarray, centre_u_px: np.ndarray,
              semidiameter_arcsec: float, plate_scale_arcsec_per_px: float,
              horizon_elevation_deg: float, oversample: int = ROW_OVERSAMPLE) -> np.ndarray:
    """Radiance of the Sun in a block of pixels, for one channel.

    Parameters
    ----------
    ch : ChannelCurves
    v_low_px : (R,) ndarray
        Lower edge of each pixel row, upwards from the elevation origin [px].
    u_edges_px : (X+1,) ndarray
        Column edges along the horizon [px].
    centre_altitude_deg, centre_u_px : (R,) ndarray
        True altitude [deg] and horizontal position [px] of the Sun's centre per row
        (rows differ with a rolling shutter).
    semidiameter_arcsec, plate_scale_arcsec_per_px : float
    horizon_elevation_deg : float
        Apparent elevation at ``v = 0`` [deg].
    oversample : int
        Sub-rows per row.

    Returns
    -------
    (R, X) ndarray
        Mean radiance per pixel, 1 = the disc's centre outside the atmosphere.
    """
    rows = v_low_px.size
    per_row = ch.weight.size * (oversample + 1) * u_edges_px.size
    step = max(1, _CHUNK_ELEMENTS // per_row)
    out = np.empty((rows, u_edges_px.size - 1))
    for r0 in range(0, rows, step):
        sl = slice(r0, r0 + step)
        out[sl] = _sun_rows(ch, v_low_px[sl], u_edges_px, centre_altitude_deg[sl],
                            centre_u_px[sl], semidiameter_arcsec, plate_scale_arcsec_per_px,
                            horizon_elevation_deg, oversample)
    return out


def _sun_rows(ch, v_low, u_edges, a_centre, u_centre, sd, plate, e_origin, oversample):
    sub = np.arange(oversample + 1) / oversample
    e = e_origin + (v_low[:, None] + sub[None, :]) * plate / 3600.0  # (R, S+1)
    ec, a = _altitudes(ch, e)  # (K, R, S+1)
    y = (a - a_centre[None, :, None]) * (3600.0 / sd)
    good = np.isfinite(y[..., 1:]) & np.isfinite(y[..., :-1])
    y = np.nan_to_num(y, nan=2.0)
    da = np.diff(a, axis=-1)
    cum = np.stack([np.interp(ec[k], ch.cum_elevation_deg[k], ch.cum_transmission_deg[k])
                    for k in range(ch.weight.size)])
    # (integral of T over the sub-row) / da = slope de/da x mean transmission
    ok = good & (da != 0)
    coef = np.where(ok, np.diff(cum, axis=-1) / np.where(ok, da, 1.0), 0.0) * (sd / plate) ** 2
    x = (u_edges[None, :] - u_centre[:, None]) * (plate / sd)  # (R, X+1)
    fs_x = _fs(np.minimum(np.maximum(x, -1.0), 1.0))[None, :, None, :]
    h = disc_area_below_left(x[None, :, None, :], y[..., None], fs_x)
    col = h[..., 1:] - h[..., :-1]  # (K, R, S+1, X): column strips below each boundary
    uniform = np.einsum("krs,krsx->krx", coef, col[:, :, 1:] - col[:, :, :-1])
    # Limb darkening: mu at the middle of the part of the row's column inside the disc.
    xm = 0.5 * (x[:, 1:] + x[:, :-1])
    q = np.sqrt(np.maximum(1.0 - xm * xm, 0.0))[None]
    y_lo, y_hi = y.min(axis=-1)[..., None], y.max(axis=-1)[..., None]
    mid = 0.5 * (np.minimum(np.maximum(y_lo, -q), q) + np.minimum(np.maximum(y_hi, -q), q))
    mu = np.sqrt(np.maximum(q * q - mid * mid, 0.0))
    u = ch.limb_u[:, None, None]
    return np.einsum("k,krx->rx", ch.weight, uniform * ((1.0 - u) + u * mu))


def _altitudes(ch: ChannelCurves, e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Elevations clamped to each node's sea horizon, and the true altitudes they see."""
    k_nodes = ch.weight.size
    ec = np.maximum(e[None], ch.horizon_deg.reshape(k_nodes, *([1] * e.ndim)))
    a = np.empty_like(ec)
    for k in range(k_nodes):
        ek, ak = ch.elevation_deg[k], ch.altitude_deg[k]
        a[k] = np.interp(ec[k], ek, ak)
        above = ec[k] > ek[-1]
        a[k][above] = ak[-1] + (ec[k][above] - ek[-1]) * ch.top_slope[k]
    return ec, a
