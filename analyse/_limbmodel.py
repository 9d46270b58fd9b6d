"""The blurred limb model of :mod:`analyse.limb` and its least-squares fit.

Near its apex a limb-darkened disc's edge, seen through a Gaussian blur ``sigma`` and
hidden below the horizon, is a blurred step plus a blurred ramp ``mu(t)`` (the linear
limb-darkening law near the limb) whose integrals are tabulated once
(:func:`_ramp_tables`); its apex height is fitted by variable projection [1]_ with a
bounded Levenberg-Marquardt [2]_, the pixels gathered in narrow profile bins.

References
----------
.. [1] G. Golub and V. Pereyra, "Separable nonlinear least squares: the variable
   projection method and its applications", Inverse Problems 19, R1-R26 (2003).
   doi:10.1088/0266-5611/19/2/201
.. [2] K. Levenberg, Q. Appl. Math. 2, 164 (1944); D. W. Marquardt, J. SIAM 11, 431
   (1963).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr

from analyse.disc import limb_darkening_u

__all__ = ["NOMINAL_WAVELENGTH_NM", "PROFILE_BIN_PX", "HIDDEN_SIGMAS"]

NOMINAL_WAVELENGTH_NM = {"r": 600.0, "g": 530.0, "b": 460.0}  # DESIGN.md default bands
PROFILE_BIN_PX = 0.1  # bin of the apex fit's pixels in their height at the apex column [px]
HIDDEN_SIGMAS = 8.0  # below this many blurs the horizon's cut enters the model [-]
_TABLE_STEP = 0.05  # grid of the ramp tables in z and w [blurs]



@functools.lru_cache(maxsize=1)
def _ramp_tables() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``J_k(z, w) = integral_0^max(z + w, 0) v^k phi(v - z) dv`` for k = 1/2 and 3/2.

    The blurred limb-darkening ramp: ``z`` is the depth below the local top and ``w`` the
    height above the horizon, both in units of the blur ``sigma``. Returns the grids of
    ``z`` and ``w`` and the (2, Z, W) table.
    """
    z = np.arange(-10.0, 30.0 + 1e-9, _TABLE_STEP)
    w = np.arange(0.0, 10.0 + 1e-9, _TABLE_STEP)
    dv = 0.02
    v = np.arange(0.0, 45.0 + 1e-9, dv)
    gauss = np.exp(-0.5 * (v[None, :] - z[:, None]) ** 2) / math.sqrt(2.0 * math.pi)
    # The upper limit between the grid's nodes: the running integral interpolated there
    # (rounding it to a node would make the table's slopes jump by up to 40 % between
    # neighbouring cells, and the fits' finite-difference Jacobians with them).
    pos = np.clip(z[:, None] + w[None, :], 0.0, v[-1]) / dv
    below = np.minimum(pos.astype(int), v.size - 2)
    frac = pos - below
    tables = []
    for k in (0.5, 1.5):
        f = v[None, :] ** k * gauss
        cum = np.concatenate([np.zeros((z.size, 1)),
                              np.cumsum(0.5 * (f[:, 1:] + f[:, :-1]) * dv, axis=1)], axis=1)
        tables.append(np.take_along_axis(cum, below, axis=1) * (1.0 - frac)
                      + np.take_along_axis(cum, below + 1, axis=1) * frac)
    return z, w, np.stack(tables)


@functools.lru_cache(maxsize=1)
def _ramp_pairs() -> np.ndarray:
    """The table of :func:`_ramp_tables` as (Z * W, 2): both integrals of a node side by
    side, so one gather fetches them together."""
    _, _, tables = _ramp_tables()
    return np.ascontiguousarray(np.moveaxis(tables, 0, -1)).reshape(-1, 2)


def _limb_basis(h: np.ndarray, top: np.ndarray, sigma: float, radius: float
                ) -> tuple[np.ndarray, np.ndarray]:
    """Blurred step and blurred limb-darkening ramp of a limb with local top ``top``,
    hidden below h = 0.

    Returns the two model columns at heights ``h`` [px]: the step ``Phi(z) - Phi(-w)``
    (zero where the top is below the line) and the blurred ``mu / sqrt(2 / R)`` with
    ``mu = sqrt(2 t / R - t^2 / R^2) ~ sqrt(t) (1 - t / (4 R))`` at depth ``t``:
    ``sqrt(sigma) J_1/2 - sigma^1.5 J_3/2 / (4 R)``. The tables are interpolated
    bilinearly; far above the line (``w`` beyond the table) their last column holds.
    """
    zg, wg, _ = _ramp_tables()
    pairs = _ramp_pairs()
    z, w = np.broadcast_arrays((top - h) / sigma, np.maximum(h, 0.0) / sigma)
    step = np.where(top > 0, ndtr(z) - ndtr(-w), 0.0).clip(0.0, None)
    fz = (np.clip(z, zg[0], zg[-1] - 1e-9) - zg[0]) * (1.0 / _TABLE_STEP)
    fw = np.minimum(w, wg[-1] - 1e-9) * (1.0 / _TABLE_STEP)
    iz, iw = fz.astype(np.intp), fw.astype(np.intp)
    fz -= iz
    fw -= iw
    flat = iz * wg.size + iw
    lower = pairs[flat] + (pairs[flat + 1] - pairs[flat]) * fw[..., None]
    upper = pairs[flat + wg.size] + (pairs[flat + wg.size + 1] - pairs[flat + wg.size]) * fw[..., None]
    j = lower + (upper - lower) * fz[..., None]
    return step, np.sqrt(sigma) * j[..., 0] - np.power(sigma, 1.5) * j[..., 1] / (4.0 * radius)


@dataclass(frozen=True)
class _ApexFit:
    top_px: float
    top_err_px: float
    sigma_px: float
    ok: bool
    coef: tuple[float, float, float] = (0.0, 0.0, 0.0)  # a, b and the sky offset [linear]


def _levenberg_marquardt(fun, p0, lo, hi, max_iter: int = 20, tol: float = 2e-3,
                         give_up_at_bound: bool = False):
    """Minimise ``|fun(p)|^2`` within bounds (forward-difference Jacobian).

    ``fun`` takes a stack of parameter vectors (K, P) and returns their residuals (K, M):
    the Jacobian's columns are computed in one call.

    A parameter at a bound that the gradient pushes outward is held there for the
    iteration (an active set); the others take the damped Gauss-Newton step, clipped to
    the bounds. Stops when a step taken changes no parameter by more than ``tol``, or
    when no damping finds a lower cost. ``converged`` is False at ``max_iter`` and when
    a bound holds a parameter at the end. ``give_up_at_bound``: return (not converged)
    as soon as a bound holds a parameter, for fits whose bounds mark a failure (a blur
    sharper than the optics allow) rather than a constraint to fit within.

    Returns (p, jacobian, residuals, converged). K. Levenberg, Q. Appl. Math. 2, 164
    (1944); D. W. Marquardt, J. SIAM 11, 431 (1963).
    """
    p = np.clip(np.asarray(p0, dtype=float), lo, hi)
    r = fun(p[None, :])[0]
    cost, lam, eps = float(r @ r), 1e-3, 1e-4
    for _ in range(max_iter):
        jac = ((fun(p + eps * np.eye(p.size)) - r) / eps).T  # one batched call
        a, g = jac.T @ jac, jac.T @ r
        free = ~(((p <= lo) & (g > 0)) | ((p >= hi) & (g < 0)))
        if not free.any() or (give_up_at_bound and not free.all()):
            return p, jac, r, False
        af, gf = a[np.ix_(free, free)], g[free]
        while lam < 1e8:
            delta = np.zeros_like(p)
            delta[free] = -np.linalg.solve(af + lam * np.diag(np.diag(af) + 1e-12), gf)
            trial = np.clip(p + delta, lo, hi)
            rt = fun(trial[None, :])[0]
            if float(rt @ rt) < cost:
                delta = trial - p  # the step taken (a bound may have stopped it)
                p, r, cost, lam = trial, rt, float(rt @ rt), max(lam / 10.0, 1e-9)
                break
            lam *= 10.0
        else:
            return p, jac, r, bool(free.all())
        if np.max(np.abs(delta)) < tol:
            return p, jac, r, bool(free.all()) and not np.any((p <= lo) | (p >= hi))
    return p, jac, r, False


def _solve_linear(a: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least-squares coefficients by the normal equations (a has 2-3 columns)."""
    try:
        return np.linalg.solve(a.T @ a, a.T @ y)
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(a, y, rcond=None)[0]


def _projected(a: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Residuals ``a c - y`` of the least-squares ``c`` for a stack of designs ``a``
    (K, M, Q) and one target ``y`` (M,): the linear part of a variable projection [1]."""
    at = np.swapaxes(a, 1, 2)
    try:
        c = np.linalg.solve(at @ a, (at @ y)[..., None])
    except np.linalg.LinAlgError:
        c = np.stack([np.linalg.lstsq(ak, y, rcond=None)[0] for ak in a])[..., None]
    return (a @ c)[..., 0] - y


def _fit_apex(values, h, drop, top0, sigma0, kappa, radius, ratio, prior_weight, free,
              sigma_start: float | None = None, sigma_floor: float = 0.3) -> _ApexFit:
    """Least-squares apex height ``T`` of the limb model (variable projection [1]).

    ``values`` are excess pixels at heights ``h`` whose column's top lies ``drop`` below
    the apex. ``free``: ``T`` and ``sigma`` nonlinear, ``a``, ``b`` and a sky offset linear,
    ``b`` pulled toward ``ratio * a`` with weight ``prior_weight`` per sqrt(pixel) (a row
    appended to the linear problem). Otherwise ``sigma = sigma0`` and ``b = ratio * a``.
    ``sigma_start``: where the free fit starts in ``sigma`` (default ``sigma0``), e.g. the
    previous frame's: fewer iterations, the same minimum. ``sigma_floor``: the least blur
    believed [px]; a fit that reaches it gives up (``ok`` False).

    The model of a pixel depends on ``u = h + drop`` (its height as if in the apex column)
    and, near the horizon only, on ``h``: the pixels are fitted as the means of narrow
    bins (:func:`_profile_bins`), weighted by their counts, which leaves the least-squares
    problem the same (the scatter within bins is added back to the residual sum) at a
    fraction of the model evaluations' cost.
    """
    bins = _profile_bins(values, h, drop, sigma0)
    wt = np.sqrt(bins.count)
    lam = prior_weight * math.sqrt(values.size) if free else 0.0
    prior = np.array([[-lam * ratio, lam, 0.0]])
    target = np.append(bins.mean * wt, 0.0)

    def resid(p):  # (K, 1 or 2) -> (K, bins [+ 1])
        sig = np.exp(p[:, 1:2]) if free else sigma0
        step, ramp = _limb_basis(bins.h, p[:, :1] - bins.drop, sig, radius)
        ones = np.ones_like(step)
        if free:
            a = np.stack([step, ramp, ones], axis=2) * wt[:, None]
            a = np.concatenate([a, np.broadcast_to(prior, (len(p), 1, 3))], axis=1)
            return _projected(a, target)
        a = np.stack([step + ratio * ramp, ones], axis=2) * wt[:, None]
        return _projected(a, target[:-1])

    floor = max(sigma_floor, 0.3)
    start = sigma_start if sigma_start is not None and floor < sigma_start < 5.0 else sigma0
    p0 = [top0, math.log(max(start, 1.05 * floor))] if free else [top0]
    lo = np.array([top0 - 6.0, math.log(floor)][: len(p0)])
    hi = np.array([top0 + 6.0, math.log(6.0)][: len(p0)])
    p, jac, r, conv = _levenberg_marquardt(resid, p0, lo, hi, give_up_at_bound=True)
    r, jac = r[: bins.count.size], jac[: bins.count.size]
    dof = max(values.size - len(p0) - (3 if free else 2), 1)
    try:
        var = (float(np.linalg.inv(jac.T @ jac)[0, 0]) * (float(r @ r) + bins.scatter)
               / dof * kappa)
    except np.linalg.LinAlgError:
        var = np.nan
    inside = bool(np.all((p > lo + 1e-3) & (p < hi - 1e-3)))
    sig = math.exp(p[1]) if free else sigma0
    step, ramp = _limb_basis(bins.h, p[0] - bins.drop, sig, radius)
    a = np.column_stack([step, ramp, np.ones_like(step)]) * wt[:, None]
    if free:  # the linear coefficients at the minimum (the prior row included)
        c = _solve_linear(np.concatenate([a, prior]), target)
    else:
        c = _solve_linear(np.column_stack([a[:, 0] + ratio * a[:, 1], a[:, 2]]), target[:-1])
        c = np.array([c[0], ratio * c[0], c[1]])
    coef = (float(c[0]), float(c[1]), float(c[2]))
    return _ApexFit(float(p[0]), math.sqrt(max(var, 0.0)), sig, conv and inside, coef)


@dataclass(frozen=True)
class _Bins:
    """Pixels of a limb fit gathered in bins of nearly equal model value."""

    mean: np.ndarray  # mean excess of each bin [linear]
    count: np.ndarray  # pixels per bin
    h: np.ndarray  # their mean height above the line [px]
    drop: np.ndarray  # their mean drop below the apex column's top [px]
    scatter: float  # sum of squared deviations from the bin means [linear^2]


def _profile_bins(values, h, drop, sigma0: float) -> _Bins:
    """Bins of :data:`PROFILE_BIN_PX` in ``u = h + drop``; pixels lower than
    :data:`HIDDEN_SIGMAS` blurs (where the horizon's cut shapes the model) are also
    split by ``h`` in steps of the same width."""
    u = h + drop
    ku = np.floor((u - u.min()) / PROFILE_BIN_PX).astype(np.int64)
    low = h < HIDDEN_SIGMAS * max(sigma0, 1.0)
    kh = np.where(low, np.floor(np.maximum(h, 0.0) / PROFILE_BIN_PX).astype(np.int64) + 1, 0)
    key = ku * (int(kh.max()) + 1) + kh
    _, idx, count = np.unique(key, return_inverse=True, return_counts=True)
    mean = np.bincount(idx, values) / count
    scatter = float(np.sum(values**2) - np.sum(count * mean**2))
    return _Bins(mean, count.astype(float), np.bincount(idx, h) / count,
                 np.bincount(idx, drop) / count, max(scatter, 0.0))


def _ramp_ratio(channel: str, radius_px: float) -> float:
    """``b / a`` of the limb model: ``u sqrt(2 / R) / (1 - u)`` for the linear law
    ``1 - u (1 - mu)`` with ``mu ~ sqrt(2 t / R)`` near the limb (Allen 2000)."""
    u = float(limb_darkening_u(NOMINAL_WAVELENGTH_NM[channel]))
    return u * math.sqrt(2.0 / max(radius_px, 1.0)) / (1.0 - u)
