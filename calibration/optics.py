"""A camera's geometry and lateral colour, measured on images of the solar disc.

Pure functions over numpy arrays; :mod:`calibration.run` supplies the frames and the
ephemeris. Image coordinates: x to the right, y down, pixel centres at integers.

Disc. The disc in one channel is located and fitted (:func:`locate_disc`,
:func:`fit_disc`, :func:`edge_profile`, :func:`radius_along_px`) in
:mod:`calibration._disc_fit`; those names are re-exported here.

Camera. A rectilinear (gnomonic) projection with the principal point at the frame's
centre, focal length ``f = 206264.8 / plate_scale`` px, pointed at a boresight (azimuth,
altitude) and rolled: ``roll_deg`` is the horizon's angle in the image, counter-clockwise
positive (FOLDER-FORMAT.md). The local horizontal at the boresight, ``e_A``, maps to the
image direction ``(cos roll, -sin roll)`` (x right, y down). :func:`fit_camera` fits plate
scale, roll and one boresight per pointing to the Sun's disc centres against its
apparent (refracted) positions; :func:`split_pointings` finds where the camera was moved.

Lateral colour. Per frame, a channel's offset from green is the difference of the disc
centres, less the atmospheric dispersion between the channels (supplied by the caller).
:func:`fit_lateral_colour` fits ``d(p) = d0 + k (p - c)`` (``c`` the frame centre: an
isotropic radial magnification difference about any optical centre, plus a constant) when
the disc centres span at least :data:`RADIAL_MIN_SPAN_FRACTION` of the frame diagonal
over at least :data:`RADIAL_MIN_FRAMES` frames (:func:`radial_span_fraction`); else a
constant ``d0``.

References
----------
.. [1] J. J. Moré, "The Levenberg-Marquardt algorithm: implementation and theory",
   Lecture Notes in Mathematics 630, 105-116 (1978) (via scipy.optimize.least_squares).
.. [2] P. W. Holland and R. E. Welsch, "Robust regression using iteratively reweighted
   least-squares", Commun. Stat. Theory Methods 6, 813-827 (1977) (Tukey biweight).
.. [3] M. Calabretta and E. Greisen, "Representations of celestial coordinates in FITS",
   A&A 395, 1077-1122 (2002), sec. 5.1.3 (gnomonic projection, TAN).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from calibration._disc_fit import (
    DiscFit,
    DiscLocation,
    EdgeProfile,
    _covariance,
    crop_box,
    edge_profile,
    fit_disc,
    locate_disc,
    radius_along_px,
)

__all__ = [
    "DiscLocation", "DiscFit", "EdgeProfile", "CameraFit", "ColourFit", "locate_disc",
    "crop_box", "fit_disc", "edge_profile", "radius_along_px", "horizontal_direction",
    "up_direction", "sky_vectors", "project_gnomonic", "split_pointings", "fit_camera",
    "gnomonic_magnification", "robust_mean", "radial_span_fraction", "fit_lateral_colour",
]  # fmt: skip

ARCSEC_PER_RAD = 206264.80624709636  # arcsec per radian (exact: 648000 / pi)
JUMP_PX = 3.0  # a step this much (plus JUMP_FRACTION) off the expected one is a re-pointing
JUMP_FRACTION = 0.25
MIN_POINTING_FRAMES = 3  # pointings with fewer frames are left out of the motion fit
MIN_TRACK_PX = 10.0  # the Sun must move this far in a pointing to constrain scale, roll [px]
TUKEY_C = 4.685  # biweight tuning constant, 95 % efficiency for Gaussian data [2]
RADIAL_MIN_SPAN_FRACTION = 0.25  # disc centres must span this much of the frame diagonal
RADIAL_MIN_FRAMES = 6  # ... over at least this many frames, for a radial model


@dataclass(frozen=True)
class CameraFit:
    """Plate scale, roll and per-pointing boresights from the Sun's track (1-sigma errors)."""

    converged: bool
    plate_scale_arcsec_per_px: float
    plate_scale_err_arcsec_per_px: float
    roll_deg: float
    roll_err_deg: float
    boresight_az_deg: tuple[float, ...]
    boresight_alt_deg: tuple[float, ...]
    rms_px: float
    frames: int
    message: str = ""


@dataclass(frozen=True)
class ColourFit:
    """A channel's lateral colour ``d(p) = d0 + k (p - c)`` relative to green [px, -]; with
    ``dispersion_ratio`` the fitted factor on the predicted atmospheric dispersion (1.0
    and error 0 when it was held fixed)."""

    converged: bool
    radial: bool
    offset_px: tuple[float, float]
    offset_err_px: tuple[float, float]
    k: float
    k_err: float
    dispersion_ratio: float
    dispersion_ratio_err: float
    rms_px: float
    frames: int
    message: str = ""


# --- camera geometry --------------------------------------------------------------------
def horizontal_direction(roll_deg: float) -> tuple[float, float]:
    """Image direction (x right, y down) of the sky's horizontal, to the right."""
    r = math.radians(roll_deg)
    return math.cos(r), -math.sin(r)


def up_direction(roll_deg: float) -> tuple[float, float]:
    """Image direction (x right, y down) of the sky's vertical, upward."""
    r = math.radians(roll_deg)
    return -math.sin(r), -math.cos(r)


def sky_vectors(az_deg, alt_deg) -> np.ndarray:
    """Unit vectors (east, north, up) of directions [deg]; shape (..., 3)."""
    a, h = np.radians(az_deg), np.radians(alt_deg)
    return np.stack([np.cos(h) * np.sin(a), np.cos(h) * np.cos(a), np.sin(h)], axis=-1)


def _camera_axes(az_deg: float, alt_deg: float, roll_deg: float) -> np.ndarray:
    """Rows: image right, image up, boresight, as (east, north, up) unit vectors."""
    a, h, r = np.radians([az_deg, alt_deg, roll_deg])
    e_az = np.array([np.cos(a), -np.sin(a), 0.0])
    e_alt = np.array([-np.sin(h) * np.sin(a), -np.sin(h) * np.cos(a), np.cos(h)])
    bore = sky_vectors(az_deg, alt_deg)
    return np.stack([np.cos(r) * e_az - np.sin(r) * e_alt,
                     np.sin(r) * e_az + np.cos(r) * e_alt, bore])


def project_gnomonic(az_deg, alt_deg, *, boresight_az_deg: float, boresight_alt_deg: float,
                     roll_deg: float, plate_scale_arcsec_per_px: float,
                     centre_px: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Image position of sky directions through the camera model (see module docstring).

    Parameters
    ----------
    az_deg, alt_deg : (N,) array_like
        Apparent azimuth and altitude [deg].
    boresight_az_deg, boresight_alt_deg : float
        Direction imaged at ``centre_px`` [deg].
    roll_deg : float
        Horizon's angle in the image, counter-clockwise positive [deg].
    plate_scale_arcsec_per_px : float
        At the image centre [arcsec/px].
    centre_px : (cx, cy)
        Principal point [px].

    Returns
    -------
    x_px, y_px : (N,) ndarray

    References
    ----------
    Calabretta & Greisen 2002 [3], sec. 5.1.3 (TAN).
    """
    axes = _camera_axes(boresight_az_deg, boresight_alt_deg, roll_deg)
    cam = sky_vectors(az_deg, alt_deg) @ axes.T
    f = ARCSEC_PER_RAD / plate_scale_arcsec_per_px
    return (centre_px[0] + f * cam[..., 0] / cam[..., 2],
            centre_px[1] - f * cam[..., 1] / cam[..., 2])


def split_pointings(t_s, x_px, y_px, expected_step_px) -> np.ndarray:
    """Label frames by camera pointing: a new pointing where the disc jumped.

    Parameters
    ----------
    t_s : (N,) array_like
        Frame times, increasing [s] (only their order is used).
    x_px, y_px : (N,) array_like
        Disc centres [px].
    expected_step_px : (N-1,) array_like
        How far the Sun should move between consecutive frames at the plate scale [px].

    Returns
    -------
    (N,) ndarray of int
        Pointing index per frame, from 0.
    """
    step = np.hypot(np.diff(x_px), np.diff(y_px))
    expect = np.asarray(expected_step_px, dtype=float)
    jump = np.abs(step - expect) > JUMP_PX + JUMP_FRACTION * expect
    return np.concatenate([[0], np.cumsum(jump)]).astype(int)


def _boresight_guess(az, alt, x, y, roll_deg, scale, centre) -> tuple[float, float]:
    """Boresight that puts one sky direction at one pixel (small-angle inverse)."""
    xi_r, eta_r = (x - centre[0]) * scale / 3600.0, (centre[1] - y) * scale / 3600.0
    r = math.radians(roll_deg)
    xi, eta = xi_r * math.cos(r) + eta_r * math.sin(r), -xi_r * math.sin(r) + eta_r * math.cos(r)
    alt0 = alt - eta
    return az - xi / max(math.cos(math.radians(alt0)), 1e-3), alt0


def _roll_guess(t, az, alt, x, y) -> float:
    """Roll from the direction of motion: image velocity against the sky's [deg]."""
    vx, vy = np.polyfit(t - t.mean(), x, 1)[0], np.polyfit(t - t.mean(), y, 1)[0]
    v_az = np.polyfit(t - t.mean(), az, 1)[0] * math.cos(math.radians(float(np.mean(alt))))
    v_alt = np.polyfit(t - t.mean(), alt, 1)[0]
    return math.degrees(math.atan2(-vy, vx) - math.atan2(v_alt, v_az))


def fit_camera(t_s, az_deg, alt_deg, x_px, y_px, pointing, *, centre_px: tuple[float, float],
               scale_guess_arcsec_per_px: float) -> CameraFit:
    """Plate scale, roll and boresights from the Sun's disc centres along its track.

    Parameters
    ----------
    t_s : (N,) array_like
        Frame times [s].
    az_deg, alt_deg : (N,) array_like
        The disc centre's apparent azimuth and altitude (refraction included) [deg].
    x_px, y_px : (N,) array_like
        Measured disc centres [px].
    pointing : (N,) array_like of int
        Pointing labels (:func:`split_pointings`); pointings with fewer than
        :data:`MIN_POINTING_FRAMES` frames or a track shorter than :data:`MIN_TRACK_PX`
        are left out.
    centre_px : (cx, cy)
        Principal point [px].
    scale_guess_arcsec_per_px : float
        Starting plate scale [arcsec/px], e.g. from the disc's width.

    Returns
    -------
    CameraFit
        Errors from the residual scatter (inflated for correlated residuals).
    """
    t, az, alt, x, y = (np.asarray(v, dtype=float) for v in (t_s, az_deg, alt_deg, x_px, y_px))
    lab = np.asarray(pointing, dtype=int)
    keep = [k for k in np.unique(lab) if np.count_nonzero(lab == k) >= MIN_POINTING_FRAMES
            and np.hypot(np.ptp(x[lab == k]), np.ptp(y[lab == k])) >= MIN_TRACK_PX]
    if not keep:
        return CameraFit(False, np.nan, np.nan, np.nan, np.nan, (), (), np.nan, 0,
                         f"no pointing has {MIN_POINTING_FRAMES} frames over a track of "
                         f"{MIN_TRACK_PX:g} px")
    longest = max(keep, key=lambda k: np.count_nonzero(lab == k))
    sel = lab == longest
    roll0 = _roll_guess(t[sel], az[sel], alt[sel], x[sel], y[sel])
    s0 = scale_guess_arcsec_per_px
    p0 = [0.0, roll0]
    for k in keep:
        i = int(np.flatnonzero(lab == k)[0])
        p0 += list(_boresight_guess(az[i], alt[i], x[i], y[i], roll0, s0, centre_px))
    used = np.isin(lab, keep)
    index = np.searchsorted(keep, lab[used])

    az_u, alt_u, xy_u = az[used], alt[used], np.stack([x[used], y[used]])

    def residuals(p):
        out = np.empty((2, index.size))
        for j in range(len(keep)):
            m = index == j
            out[0, m], out[1, m] = project_gnomonic(
                az_u[m], alt_u[m], boresight_az_deg=p[2 + 2 * j], boresight_alt_deg=p[3 + 2 * j],
                roll_deg=p[1], plate_scale_arcsec_per_px=s0 * math.exp(p[0]), centre_px=centre_px)
        return (out - xy_u).ravel()

    sol = least_squares(residuals, np.array(p0), loss="soft_l1", f_scale=1.0,
                        x_scale=[1e-3, 1e-2] + [1e-2] * (2 * len(keep)))
    sol = least_squares(residuals, sol.x, x_scale=[1e-3, 1e-2] + [1e-2] * (2 * len(keep)))
    cov = _covariance(sol.jac, sol.fun, n_params=sol.x.size)
    scale = s0 * math.exp(sol.x[0])
    return CameraFit(bool(sol.success), scale, scale * math.sqrt(cov[0, 0]),
                     float((sol.x[1] + 180.0) % 360.0 - 180.0), math.sqrt(cov[1, 1]),
                     tuple(float(v) % 360.0 for v in sol.x[2::2]),
                     tuple(float(v) for v in sol.x[3::2]),
                     float(np.sqrt(np.mean(sol.fun**2))), int(index.size), sol.message)


def gnomonic_magnification(x_px, y_px, direction: tuple[float, float], *,
                           centre_px: tuple[float, float], focal_px: float) -> np.ndarray:
    """Local scale of the gnomonic projection along an image direction, relative to the
    centre's: ``sec^2 theta`` radially, ``sec theta`` tangentially (Calabretta &
    Greisen 2002 [3]), ``theta`` the angle off the boresight.

    Parameters
    ----------
    x_px, y_px : (N,) array_like
        Positions [px].
    direction : (dx, dy)
        Unit image direction along which lengths are measured.
    centre_px : (cx, cy)
        Principal point [px].
    focal_px : float
        Focal length [px].

    Returns
    -------
    (N,) ndarray
        Magnification [-], 1 at the centre.
    """
    vx, vy = np.asarray(x_px, float) - centre_px[0], np.asarray(y_px, float) - centre_px[1]
    rho = np.hypot(vx, vy)
    tan2 = (rho / focal_px) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        cos_psi = np.where(rho > 0, (vx * direction[0] + vy * direction[1]) / rho, 1.0)
    radial, tangential = 1.0 + tan2, np.sqrt(1.0 + tan2)
    return np.sqrt((radial * cos_psi) ** 2 + (tangential**2) * (1.0 - cos_psi**2))


def robust_mean(values, errors=None) -> tuple[float, float, int]:
    """Tukey-biweight mean [2] and its standard error (the larger of the formal error and
    the scatter over sqrt(n)); also the number of values with non-zero weight."""
    v = np.asarray(values, dtype=float)
    e = np.ones_like(v) if errors is None else np.asarray(errors, dtype=float)
    ok = np.isfinite(v) & np.isfinite(e) & (e > 0)
    v, e = v[ok], e[ok]
    if v.size == 0:
        return np.nan, np.nan, 0
    m = float(np.median(v))
    w = 1.0 / e**2
    for _ in range(10):
        s = max(1.4826 * float(np.median(np.abs(v - m))), 1e-12)
        w = np.clip(1.0 - ((v - m) / (TUKEY_C * s)) ** 2, 0.0, None) ** 2 / e**2
        m = float(np.sum(w * v) / np.sum(w))
    n = int(np.count_nonzero(w))
    formal = math.sqrt(1.0 / np.sum(1.0 / e[w > 0] ** 2)) if errors is not None else 0.0
    scatter = float(np.std(v[w > 0], ddof=1)) / math.sqrt(n) if n > 1 else np.nan
    return m, float(np.nanmax([formal, scatter])) if n > 1 else formal, n


# --- lateral colour ---------------------------------------------------------------------
def radial_span_fraction(x_px, y_px, width: int, height: int) -> float:
    """Largest distance between two disc centres over the frame diagonal [-]."""
    p = np.column_stack([x_px, y_px]).astype(float)
    if len(p) < 2:
        return 0.0
    span = float(np.max(np.hypot(*(p[:, None, :] - p[None, :, :]).transpose(2, 0, 1))))
    return span / math.hypot(width, height)


def fit_lateral_colour(x_px, y_px, offset_px, offset_err_px, dispersion_px, *,
                       centre_px: tuple[float, float], radial: bool,
                       free_dispersion: bool = False) -> ColourFit:
    """Fit ``offset = d0 + k (p - c) + s D`` to one channel's per-frame offsets from green.

    Parameters
    ----------
    x_px, y_px : (N,) array_like
        Disc centres in green [px].
    offset_px, offset_err_px : (N, 2) array_like
        Measured (dx, dy) of the channel's disc centre from green's and 1-sigma errors [px].
    dispersion_px : (N, 2) array_like
        Predicted atmospheric dispersion of the channel from green, ``D`` [px].
    centre_px : (cx, cy)
        The frame's centre ``c`` [px].
    radial : bool
        Fit ``k``; else ``k = 0``.
    free_dispersion : bool
        Fit ``s``; else ``s = 1`` (the prediction is subtracted).

    Returns
    -------
    ColourFit
        Tukey-biweight iteratively reweighted least squares [2]; the covariance is scaled
        by the reduced chi-square when above 1.
    """
    off = np.asarray(offset_px, float)
    err = np.asarray(offset_err_px, float)
    disp = np.asarray(dispersion_px, float)
    dx, dy = np.asarray(x_px, float) - centre_px[0], np.asarray(y_px, float) - centre_px[1]
    n = off.shape[0]
    one, zero = np.ones(n), np.zeros(n)
    cols = [np.concatenate([one, zero]), np.concatenate([zero, one])]
    if radial:
        cols.append(np.concatenate([dx, dy]))
    if free_dispersion:
        cols.append(disp.T.ravel())
    a = np.column_stack(cols)
    b = off.T.ravel() - (0.0 if free_dispersion else disp.T.ravel())
    sig = np.maximum(err.T.ravel(), 1e-4)
    if n * 2 <= a.shape[1]:
        return ColourFit(False, radial, (np.nan, np.nan), (np.nan, np.nan), np.nan, np.nan,
                         np.nan, np.nan, np.nan, n, f"{n} frames are too few")
    w = np.ones_like(b)
    for _ in range(10):
        coef = np.linalg.lstsq(a * (np.sqrt(w) / sig)[:, None], b * np.sqrt(w) / sig,
                               rcond=None)[0]
        z = (b - a @ coef) / sig
        s = max(1.4826 * float(np.median(np.abs(z))), 1.0)
        w = np.clip(1.0 - (z / (TUKEY_C * s)) ** 2, 0.0, None) ** 2
    use = w > 0
    chi2 = float(np.sum(z[use] ** 2)) / max(int(use.sum()) - a.shape[1], 1)
    cov = np.linalg.pinv((a[use] / sig[use, None]).T @ (a[use] / sig[use, None])) * max(chi2, 1.0)
    e = np.sqrt(np.diag(cov))
    j = 2 + int(radial)
    return ColourFit(True, radial, (float(coef[0]), float(coef[1])), (float(e[0]), float(e[1])),
                     float(coef[2]) if radial else 0.0, float(e[2]) if radial else 0.0,
                     float(coef[j]) if free_dispersion else 1.0,
                     float(e[j]) if free_dispersion else 0.0,
                     float(np.sqrt(np.mean((z * sig)[use] ** 2))), n)
