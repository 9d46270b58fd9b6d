"""The solar disc in one channel: rough position, limb ellipse and limb profile.

Private helper of :mod:`calibration.optics`, which re-exports its public names; pure
functions over numpy arrays. Image coordinates: x to the right, y down, pixel centres at
integers.

:func:`locate_disc` thresholds a channel between the sky and the disc level and
keeps the bright compact blob. :func:`fit_disc` samples the channel along rays from the
rough centre, takes the point of steepest descent on each ray (derivative of a Gaussian
along the ray, parabola through the peak) as an edge point, and fits an ellipse
``v^T Q v = 1`` (``v`` from the centre) to them, robustly (soft-L1, then least squares on
the inliers). Limb darkening and blur move the steepest descent slightly inside the
true limb; :func:`edge_profile` measures that offset by fitting the pixels near the limb,
against their distance to the ellipse, with a limb-darkened edge (linear law) blurred by
a Gaussian, so that the radius, and the plate scale from it, are not biased.
``_covariance`` (a least-squares fit's parameter covariance) also serves the camera fit.

References
----------
.. [1] J. J. Moré, "The Levenberg-Marquardt algorithm: implementation and theory",
   Lecture Notes in Mathematics 630, 105-116 (1978) (via scipy.optimize.least_squares).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares

__all__ = [
    "DiscLocation", "DiscFit", "EdgeProfile", "locate_disc", "crop_box", "fit_disc",
    "edge_profile", "radius_along_px",
]  # fmt: skip

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
