"""A camera's geometry and lateral colour, measured on images of the solar disc.

Pure functions over numpy arrays; :mod:`calibration.run` supplies the frames and the
ephemeris. Image coordinates: x to the right, y down, pixel centres at integers.

Disc. :func:`locate_disc` thresholds a channel between the sky and the disc level and
keeps the bright compact blob. :func:`fit_disc` samples the channel along rays from the
rough centre, takes the point of steepest descent on each ray (derivative of a Gaussian
along the ray, parabola through the peak) as an edge point, and fits an ellipse
``v^T Q v = 1`` (``v`` from the centre) to them, robustly (soft-L1, then least squares on
the inliers). Limb darkening and blur move the steepest descent slightly inside the
true limb; :func:`edge_profile` measures that offset by fitting the pixels near the limb,
against their distance to the ellipse, with a limb-darkened edge (linear law) blurred by
a Gaussian, so that the radius, and the plate scale from it, are not biased.

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
from scipy import ndimage
from scipy.optimize import least_squares

__all__ = [
    "DiscLocation", "DiscFit", "EdgeProfile", "CameraFit", "ColourFit", "locate_disc",
    "crop_box", "fit_disc", "edge_profile", "radius_along_px", "horizontal_direction",
    "up_direction", "sky_vectors", "project_gnomonic", "split_pointings", "fit_camera",
    "gnomonic_magnification", "robust_mean", "radial_span_fraction", "fit_lateral_colour",
]  # fmt: skip

ARCSEC_PER_RAD = 206264.80624709636  # arcsec per radian (exact: 648000 / pi)
MIN_DISC_RADIUS_PX = 6.0  # smaller discs are not measured [px]
# disc peak over the sky, in sky-noise sigmas (common practice, no source)
DISC_MIN_CONTRAST_NOISE = 20.0
DISC_THRESHOLD = 0.2  # mask level between sky (0) and disc peak (1); below the limb's ~0.4
DISC_AREA_RATIO = (0.8, 1.2)  # blob area over its bounding ellipse's: a compact disc
CROP_MARGIN_PX = 14  # crop beyond the rough radius [px]
RAY_SPACING_PX = 1.5  # arc length between rays at the limb [px]
RAYS = (64, 720)  # fewest, most rays
RAY_STEP_PX = 0.25  # sampling step along a ray [px]
EDGE_SEARCH_PX = 6.0  # edge searched within +-(this + 10 % of the radius) of it [px]
EDGE_SMOOTH_PX = 1.0  # derivative-of-Gaussian scale along a ray [px]
EDGE_MIN_STRENGTH = 0.3  # an edge's slope, relative to the median ray's, to be kept
EDGE_OUTLIER_PX = 0.5  # soft-L1 scale of the ellipse fit [px]
MIN_INLIER_FRACTION = 0.85  # rays on the fitted limb, else the disc is not whole
MAX_EDGE_RMS_PX = 0.6  # scatter of edge points about the ellipse, else not a clean disc
PROFILE_HALF_PX = 8.0  # pixels within this distance of the limb enter the profile fit [px]
PROFILE_GRID_PX = 0.05  # grid of the 1-D blurred-limb model [px]
PROFILE_BIN_PX = 0.1  # pixels are averaged in bins of this width of distance [px]
PROFILE_MAX_OFFSET_PX = 2.0  # larger fitted limb offsets are refused [px]
JUMP_PX = 3.0  # a step this much (plus JUMP_FRACTION) off the expected one is a re-pointing
JUMP_FRACTION = 0.25
MIN_POINTING_FRAMES = 3  # pointings with fewer frames are left out of the motion fit
MIN_TRACK_PX = 10.0  # the Sun must move this far in a pointing to constrain scale, roll [px]
TUKEY_C = 4.685  # biweight tuning constant, 95 % efficiency for Gaussian data [2]
RADIAL_MIN_SPAN_FRACTION = 0.25  # disc centres must span this much of the frame diagonal
RADIAL_MIN_FRAMES = 6  # ... over at least this many frames, for a radial model


@dataclass(frozen=True)
class DiscLocation:
    """Rough disc position from thresholding (``x_px``, ``y_px`` centroid; ``radius_px``
    from the area). ``found`` False with a ``message`` when there is no whole disc."""

    found: bool
    x_px: float
    y_px: float
    radius_px: float
    message: str = ""


@dataclass(frozen=True)
class DiscFit:
    """An ellipse fitted to a channel's limb: ``v^T Q v = 1`` for limb points ``v`` from
    the centre. ``shape_px2`` is ``(Q11, Q12, Q22)`` [1/px^2]; errors are 1-sigma."""

    found: bool
    x_px: float
    y_px: float
    x_err_px: float
    y_err_px: float
    shape_px2: tuple[float, float, float]
    rms_px: float  # scatter of the inlier edge points about the ellipse [px]
    inlier_fraction: float
    points: int
    message: str = ""


@dataclass(frozen=True)
class EdgeProfile:
    """Offset of the true limb from the fitted steepest-descent ellipse (positive outward)
    [px], with the blur and limb darkening found by the profile fit."""

    converged: bool
    offset_px: float
    offset_err_px: float
    psf_sigma_px: float
    limb_darkening_u: float
    message: str = ""


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


# --- the disc in one channel -----------------------------------------------------------
def locate_disc(plane: np.ndarray, *, min_radius_px: float = MIN_DISC_RADIUS_PX) -> DiscLocation:
    """The solar disc's rough centre and radius in one channel.

    Parameters
    ----------
    plane : (H, W) ndarray
        Linear-light channel [0..1].
    min_radius_px : float
        Smallest disc accepted [px].

    Returns
    -------
    DiscLocation
        Not found when the brightest region is not much above the sky, is not a
        compact round blob, is too small, or touches the frame's edge.
    """
    plane = np.asarray(plane, dtype=np.float32)
    sky = float(np.median(plane))
    noise = 1.4826 * float(np.median(np.abs(plane - sky))) + 1e-6
    smooth = ndimage.uniform_filter(plane, 3)
    iy, ix = np.unravel_index(int(np.argmax(smooth)), plane.shape)
    contrast = float(smooth[iy, ix]) - sky
    if contrast < DISC_MIN_CONTRAST_NOISE * noise:
        return DiscLocation(False, np.nan, np.nan, np.nan, "no bright disc above the sky")
    labels, _ = ndimage.label(plane > sky + DISC_THRESHOLD * contrast)
    blob = labels == labels[iy, ix]
    ys, xs = np.nonzero(blob)
    radius = math.sqrt(xs.size / math.pi)
    if radius < min_radius_px:
        return DiscLocation(False, np.nan, np.nan, radius, f"brightest blob of radius "
                            f"{radius:.1f} px is smaller than {min_radius_px:g} px")
    h, w = plane.shape
    if xs.min() <= 0 or ys.min() <= 0 or xs.max() >= w - 1 or ys.max() >= h - 1:
        return DiscLocation(False, float(xs.mean()), float(ys.mean()), radius,
                            "the disc touches the frame's edge")
    ratio = xs.size / (math.pi / 4 * (np.ptp(xs) + 1) * (np.ptp(ys) + 1))
    if not DISC_AREA_RATIO[0] <= ratio <= DISC_AREA_RATIO[1]:
        return DiscLocation(False, float(xs.mean()), float(ys.mean()), radius,
                            f"brightest blob is not round (area ratio {ratio:.2f})")
    return DiscLocation(True, float(xs.mean()), float(ys.mean()), radius)


def crop_box(loc: DiscLocation, shape: tuple[int, ...]) -> tuple[int, int, int, int]:
    """Rows y0..y1-1 and columns x0..x1-1 around a located disc, clipped to the frame."""
    half = loc.radius_px * (1.0 + 0.1) + EDGE_SEARCH_PX + CROP_MARGIN_PX
    h, w = shape[:2]
    return (max(0, int(loc.y_px - half)), min(h, int(loc.y_px + half) + 2),
            max(0, int(loc.x_px - half)), min(w, int(loc.x_px + half) + 2))


def _edge_points(plane: np.ndarray, x0: float, y0: float, r0: float):
    """Steepest-descent limb points along rays from ``(x0, y0)``: x, y [px] of valid rays."""
    n = int(np.clip(round(2 * math.pi * r0 / RAY_SPACING_PX), *RAYS))
    phi = 2 * math.pi * (np.arange(n) + 0.5) / n
    half = EDGE_SEARCH_PX + 0.1 * r0
    rho = r0 + np.arange(-half, half + 1e-9, RAY_STEP_PX)
    c, s = np.cos(phi)[:, None], np.sin(phi)[:, None]
    xs, ys = x0 + rho * c, y0 + rho * s
    h, w = plane.shape
    inside = np.all((xs >= 1) & (xs <= w - 2) & (ys >= 1) & (ys <= h - 2), axis=1)
    prof = ndimage.map_coordinates(plane, [ys, xs], order=3, mode="nearest")
    slope = -ndimage.gaussian_filter1d(prof, EDGE_SMOOTH_PX / RAY_STEP_PX, axis=1, order=1)
    m = int(math.ceil(2 * EDGE_SMOOTH_PX / RAY_STEP_PX))
    k = np.argmax(slope[:, m:-m], axis=1) + m
    rows = np.arange(n)
    a, b, cc = slope[rows, k - 1], slope[rows, k], slope[rows, k + 1]
    den = a - 2 * b + cc
    frac = np.where(den < 0, 0.5 * (a - cc) / np.where(den < 0, den, -1.0), 0.0)
    radius = rho[k] + np.clip(frac, -0.5, 0.5) * RAY_STEP_PX
    ok = inside & (b > 0)
    if ok.any():
        ok &= b >= EDGE_MIN_STRENGTH * np.median(b[ok])
    return (x0 + radius * c[:, 0])[ok], (y0 + radius * s[:, 0])[ok], n


def _ellipse_residuals(p: np.ndarray, x: np.ndarray, y: np.ndarray, r0: float) -> np.ndarray:
    """Near-geometric distance [px] of points from the ellipse ``p = (xc, yc, q11, q12, q22)``
    (``q`` in units of 1/r0^2)."""
    dx, dy = x - p[0], y - p[1]
    quad = (p[2] * dx * dx + 2 * p[3] * dx * dy + p[4] * dy * dy) / r0**2
    return (np.sqrt(np.maximum(quad, 0.0)) - 1.0) * r0


def _ellipse_jacobian(p: np.ndarray, x: np.ndarray, y: np.ndarray, r0: float) -> np.ndarray:
    """Derivatives of :func:`_ellipse_residuals` with respect to ``p``, shape (N, 5)."""
    dx, dy = x - p[0], y - p[1]
    quad = (p[2] * dx * dx + 2 * p[3] * dx * dy + p[4] * dy * dy) / r0**2
    f = 0.5 / (r0 * np.sqrt(np.maximum(quad, 1e-12)))
    return np.column_stack([-2 * (p[2] * dx + p[3] * dy) * f, -2 * (p[3] * dx + p[4] * dy) * f,
                            dx * dx * f, 2 * dx * dy * f, dy * dy * f])


def fit_disc(plane: np.ndarray, guess: DiscLocation) -> DiscFit:
    """Fit an ellipse to one channel's limb, starting from a located disc.

    Parameters
    ----------
    plane : (H, W) ndarray
        Linear-light channel (a crop is best) [0..1].
    guess : DiscLocation
        Rough centre and radius in the same coordinates [px].

    Returns
    -------
    DiscFit
        Not found when too few rays show the limb, or the edge points do not lie on
        one ellipse (the disc is cut by the horizon or the frame, or it is not a disc).
    """
    nan3 = (np.nan, np.nan, np.nan)
    plane = np.asarray(plane, dtype=np.float64)
    x, y, n = _edge_points(plane, guess.x_px, guess.y_px, guess.radius_px)
    if x.size < 0.5 * n or x.size < 12:
        return DiscFit(False, np.nan, np.nan, np.nan, np.nan, nan3, np.nan, x.size / n, x.size,
                       f"limb seen on {x.size} of {n} rays")
    r0 = guess.radius_px
    p0 = np.array([guess.x_px, guess.y_px, 1.0, 0.0, 1.0])
    fit = least_squares(_ellipse_residuals, p0, jac=_ellipse_jacobian, args=(x, y, r0),
                        loss="soft_l1",
                        f_scale=EDGE_OUTLIER_PX, x_scale=[1.0, 1.0, 1.0 / r0, 1.0 / r0, 1.0 / r0])
    res = _ellipse_residuals(fit.x, x, y, r0)
    scale = max(1.4826 * float(np.median(np.abs(res))), 0.05)
    inl = np.abs(res) < max(4.0 * scale, 0.5)
    frac = float(inl.sum()) / n
    fit = least_squares(_ellipse_residuals, fit.x, jac=_ellipse_jacobian,
                        args=(x[inl], y[inl], r0))
    res = fit.fun
    rms = float(np.sqrt(np.mean(res**2)))
    q = tuple(float(v) / r0**2 for v in fit.x[2:])
    if frac < MIN_INLIER_FRACTION or rms > MAX_EDGE_RMS_PX or q[0] * q[2] - q[1] ** 2 <= 0:
        return DiscFit(False, float(fit.x[0]), float(fit.x[1]), np.nan, np.nan, q, rms, frac,
                       int(inl.sum()), f"limb not one ellipse: {100 * frac:.0f} % of rays "
                       f"on it, scatter {rms:.2f} px")
    cov = _covariance(fit.jac, res, n_params=5)
    return DiscFit(True, float(fit.x[0]), float(fit.x[1]), math.sqrt(cov[0, 0]),
                   math.sqrt(cov[1, 1]), q, rms, frac, int(inl.sum()))


def _covariance(jac: np.ndarray, res: np.ndarray, n_params: int) -> np.ndarray:
    """Parameter covariance from a least-squares Jacobian, scaled by the residual variance
    and inflated for correlation between neighbouring residuals."""
    s2 = float(np.sum(res**2)) / max(res.size - n_params, 1)
    rho = float(np.corrcoef(res[:-1], res[1:])[0, 1]) if res.size > 4 else 0.0
    rho = min(max(rho if np.isfinite(rho) else 0.0, 0.0), 0.9)
    return s2 * (1.0 + rho) / (1.0 - rho) * np.linalg.pinv(jac.T @ jac)


def radius_along_px(fit: DiscFit, direction: tuple[float, float]) -> float:
    """Distance from the ellipse's centre to its limb along an image direction [px].

    Parameters
    ----------
    fit : DiscFit
    direction : (dx, dy)
        Image direction (x right, y down); need not be normalised.
    """
    ex, ey = direction
    norm = math.hypot(ex, ey)
    ex, ey = ex / norm, ey / norm
    q11, q12, q22 = fit.shape_px2
    return 1.0 / math.sqrt(q11 * ex * ex + 2 * q12 * ex * ey + q22 * ey * ey)


def _limb_model(d: np.ndarray, p: np.ndarray, radius_px: float, grid: np.ndarray) -> np.ndarray:
    """Blurred limb-darkened edge at signed distances ``d`` from the limb (outward +) [px].

    ``p = (sky, amplitude, u, sigma_px, offset_px)``: the disc's brightness at depth
    ``t`` inside the limb is ``amplitude (1 - u (1 - mu))``, ``mu = sqrt(1 - (1 - t/R)^2)``
    (linear limb-darkening law), blurred by a Gaussian of ``sigma_px``. ``grid`` is a
    fixed, uniform grid of distances [px] wide enough for any blur and offset allowed
    (fixed, so that the model is smooth in the parameters).
    """
    sky, amp, u, sigma, offset = p
    depth = np.clip(-grid / radius_px, 0.0, 1.0)
    mu = np.sqrt(np.clip(1.0 - (1.0 - depth) ** 2, 0.0, 1.0))
    disc = np.where(grid < 0, 1.0 - u * (1.0 - mu), 0.0)
    blurred = ndimage.gaussian_filter1d(disc, sigma / PROFILE_GRID_PX, mode="nearest")
    return sky + amp * np.interp(d - offset, grid, blurred)


def _binned_profile(plane: np.ndarray, fit: DiscFit) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pixels near the limb: radial distance from the ellipse [px] (outward +), binned by
    PROFILE_BIN_PX: mean distance, mean value and count per non-empty bin."""
    yy, xx = np.mgrid[: plane.shape[0], : plane.shape[1]]
    vx, vy = xx - fit.x_px, yy - fit.y_px
    dist = np.hypot(vx, vy)
    q11, q12, q22 = fit.shape_px2
    with np.errstate(divide="ignore", invalid="ignore"):
        d = dist - dist / np.sqrt(q11 * vx * vx + 2 * q12 * vx * vy + q22 * vy * vy)
    near = np.abs(d) < PROFILE_HALF_PX
    d, v = d[near], plane[near]
    b = np.floor((d + PROFILE_HALF_PX) / PROFILE_BIN_PX).astype(int)
    n = np.bincount(b)
    keep = n > 0
    return (np.bincount(b, d)[keep] / n[keep], np.bincount(b, v)[keep] / n[keep], n[keep])


def edge_profile(plane: np.ndarray, fit: DiscFit) -> EdgeProfile:
    """Offset of the true limb from the steepest-descent ellipse, by a profile fit.

    Every pixel within :data:`PROFILE_HALF_PX` of the fitted ellipse is placed at its
    radial distance ``d`` from it and averaged in bins of :data:`PROFILE_BIN_PX`;
    ``_limb_model`` (sky, amplitude, linear limb-darkening coefficient, Gaussian blur,
    offset) is fitted to the binned profile by robust least squares weighted by the
    pixel counts. The offset corrects the ellipse's size.

    Parameters
    ----------
    plane : (H, W) ndarray
        The channel in which ``fit`` was made [0..1].
    fit : DiscFit

    Returns
    -------
    EdgeProfile
        ``converged`` False (offset 0) when the fit fails or gives an implausible edge.
    """
    d, v, n = _binned_profile(np.asarray(plane, dtype=np.float64), fit)
    q11, q12, q22 = fit.shape_px2
    radius = 1.0 / math.sqrt(math.sqrt(q11 * q22 - q12**2))
    lo, hi = [-np.inf, 0.0, 0.0, 0.2, -3.0], [np.inf, np.inf, 1.0, 5.0, 3.0]
    pad = 6.0 * hi[3] + hi[4] + 1.0
    grid = np.arange(-PROFILE_HALF_PX - pad, PROFILE_HALF_PX + pad, PROFILE_GRID_PX)
    sky = float(np.median(v[d > 0.5 * PROFILE_HALF_PX]))
    inner = float(np.median(v[d < -0.5 * PROFILE_HALF_PX]))
    p0 = np.array([sky, (inner - sky) / 0.7, 0.6, 1.0, 0.0])
    w = np.sqrt(n)
    sol = least_squares(lambda p: (_limb_model(d, p, radius, grid) - v) * w, p0,
                        bounds=(lo, hi), loss="soft_l1",
                        f_scale=max(0.01 * abs(inner - sky) * float(np.median(w)), 1e-9),
                        x_scale=[0.01, 0.01, 0.01, 0.01, 0.01])
    cov = _covariance(sol.jac, sol.fun, n_params=5)
    offset, sigma, u = float(sol.x[4]), float(sol.x[3]), float(sol.x[2])
    if not sol.success or abs(offset) > PROFILE_MAX_OFFSET_PX or sigma >= 0.999 * hi[3]:
        return EdgeProfile(False, 0.0, np.nan, sigma, u, f"implausible limb profile (offset "
                           f"{offset:.2f} px, blur {sigma:.2f} px; {sol.message})")
    return EdgeProfile(True, offset, math.sqrt(cov[4, 4]), sigma, u)


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
