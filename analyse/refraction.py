"""Ray tracing through a spherically stratified atmosphere.

A ray is followed outwards from the observer (the reverse of the light's way) in arc
length ``s``. With ``z`` the height above the sea, ``r = R + z``, ``zeta`` the zenith
angle relative to the local vertical and ``phi`` the angle travelled around the centre::

    dz/ds    = cos(zeta)
    dphi/ds  = sin(zeta) / r
    dzeta/ds = -sin(zeta) * (1/r + n'/n)

carried as ``cos(zeta)`` and ``sin(zeta)`` (``d cos/ds = sin^2 (1/r + n'/n)``,
``d sin/ds = -cos sin (1/r + n'/n)``: no trigonometry per step). The equations are regular
where a ray turns (zeta = 90 deg), so rays below the astronomical horizon, ducts and
mirages need no special cases.

Bouguer's invariant ``c = n r sin(zeta)`` is constant along a ray. It gives the direction
in which a ray leaves the tabulated atmosphere exactly, ``sin(zeta_vac) = c / r``, so only
``phi`` carries integration error; the integrated ``sin(zeta)`` is checked against ``c``
and the discrepancy reported. The point on the sky whose light arrives along the ray has
the true altitude ``90 deg - (zeta_vac + phi)`` relative to the observer's horizontal plane.

Steps. All rays (any mix of elevations and wavelengths, or of atmospheres sharing a
height grid) advance together as numpy arrays with the classical fourth-order
Runge-Kutta method. A step may change the height by ``dz``, ``STEP_FRACTION`` of
``z + STEP_HEIGHT_M``: its length is at most ``dz / |cos(zeta)|`` and, for a ray near its
turning point, ``sqrt(2 dz / k)`` with ``k`` the larger of ``|d2z/ds2|`` and the Earth's
curvature (a mirage's hot layer bends rays twenty times more than the Earth). Where dT/dz
jumps (``kinks_m``: the layer top, the standard atmosphere's layer bases, a tabulated
profile's nodes) ``d ln n/dz`` jumps too, and a Runge-Kutta step across a jump is only
first-order accurate. So a step that would cross a kink is shortened to end just beyond
it (its length from ``z + s cos(zeta) + s^2 d2z/ds2 / 2``), and within a step the profile
is read on the starting side of the kink (extrapolated a hair beyond it).

The medium. ``d ln n/dz`` is linear in each height cell and continuous, except at kinks,
where each side takes the value that makes its cell's integral equal to the cell's
change of ``ln n``; so the integrated path and ``n`` agree, which the Bouguer check needs.

References
----------
.. [1] C. Y. Hohenkerk and A. T. Sinclair, "The computation of angular atmospheric
   refraction at large zenith angles", NAO Technical Note 63 (1985).
.. [2] G. H. Auer and E. M. Standish, "Astronomical refraction: computational method
   for all zenith angles", Astron. J. 119, 2472-2474 (2000). doi:10.1086/301325
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from analyse.atmosphere import (
    Atmosphere,
    ciddor1996_coefficients,
    ciddor1996_density_ratios,
)

__all__ = [
    "EARTH_RADIUS_M",
    "Medium",
    "RayEnds",
    "make_medium",
    "trace_rays",
    "SeaHorizon",
    "sea_horizon",
    "TransferCurve",
    "transfer_curve",
    "transfer_curves",
    "refraction_table",
    "earth_radius_of_curvature_m",
]

EARTH_RADIUS_M = 6371000.0  # m, mean Earth radius (IUGG)
WGS84_A_M = 6378137.0  # m, WGS 84 semi-major axis
WGS84_F = 1.0 / 298.257223563  # WGS 84 flattening

ESCAPED, SEA, TRAPPED = 0, 1, 2
_STOPPED = 3  # internal: reached the requested stop height
STEP_FRACTION = 0.1  # height change per step / (z + STEP_HEIGHT_M): 0.001" accuracy, see the
STEP_HEIGHT_M = 1.0  # m   convergence tests in tests/published/test_refraction.py
MAX_STEP_M = 20000.0  # m, longest step along a ray
_MAX_STEPS = 20000
_SEARCH_TOP_DEG = 5.0  # deg, highest elevation the horizon search tries
_MAX_PHI_RAD = 0.5  # a ray still inside the atmosphere after ~3000 km is trapped (a duct)
_OVERSHOOT_M = 1e-5  # m: a shortened step aims this far beyond the kink
_INSIDE_M = 1e-6  # m: within a step the profile is read at least this far inside its layer
_BRANCH = np.array([[1.0], [-1.0]])  # root branches for the layer's upper / lower bound


@dataclass(frozen=True)
class Medium:
    """What the tracer needs of an atmosphere, for a set of wavelengths.

    Attributes
    ----------
    height_m : (H,) ndarray
        Height nodes above the sea [m].
    ln_n, dln_n_dz : (L, H) ndarray
        ``ln n`` and its height derivative [1/m] for each row (a wavelength; or an
        atmosphere-and-wavelength pair, see :func:`transfer_curves`).
    density : (H,) or (L, H) ndarray
        Dry-air density relative to standard air (for the airmass along a ray); per row
        when the rows come from several atmospheres.
    column : float or (L,) ndarray
        Relative density integrated vertically from the eye to the top [m].
    wavelength_nm : (L,) ndarray
    kinks_m : (K,) ndarray
        Heights where dT/dz jumps [m].
    earth_radius_m, eye_height_m : float
    """

    height_m: np.ndarray
    ln_n: np.ndarray
    dln_n_dz: np.ndarray
    density: np.ndarray
    column: float | np.ndarray
    wavelength_nm: np.ndarray
    kinks_m: np.ndarray
    earth_radius_m: float
    eye_height_m: float

    @property
    def top_m(self) -> float:
        return float(self.height_m[-1])

    def n_at(self, height_m, wavelength_index) -> np.ndarray:
        """Refractive index at heights [m] for wavelength indices (broadcast)."""
        z = np.clip(height_m, self.height_m[0], self.height_m[-1])
        h = np.broadcast_to(z, np.broadcast(z, wavelength_index).shape)
        li = np.broadcast_to(wavelength_index, h.shape)
        out = np.empty(h.shape)
        for k in np.unique(li):
            sel = li == k
            out[sel] = np.exp(np.interp(h[sel], self.height_m, self.ln_n[k]))
        return out

    def modified_index(self, wavelength_index: int) -> np.ndarray:
        """``m(z) = n(z) (R + z)`` on the height grid [m]; rays turn where m equals c."""
        return np.exp(self.ln_n[wavelength_index]) * (self.earth_radius_m + self.height_m)


def earth_radius_of_curvature_m(latitude_deg: float, azimuth_deg: float) -> float:
    """Radius of curvature of the WGS 84 ellipsoid along an azimuth (Euler's theorem).

    ``1/R = cos^2(A)/M + sin^2(A)/N`` with the meridional radius ``M`` and the prime
    vertical radius ``N`` at the latitude: the radius a spherical-stratification ray
    tracer should use for the path towards the setting Sun.
    """
    phi = np.radians(latitude_deg)
    e2 = WGS84_F * (2 - WGS84_F)
    w = np.sqrt(1 - e2 * np.sin(phi) ** 2)
    m = WGS84_A_M * (1 - e2) / w**3
    n = WGS84_A_M / w
    a = np.radians(azimuth_deg)
    return float(1.0 / (np.cos(a) ** 2 / m + np.sin(a) ** 2 / n))


def make_medium(atmosphere: Atmosphere, wavelength_nm, *,
                earth_radius_m: float = EARTH_RADIUS_M) -> Medium:
    """Tabulate ``ln n`` and its gradient for each wavelength on the atmosphere's grid.

    Parameters
    ----------
    atmosphere : Atmosphere
    wavelength_nm : (L,) array_like
        Vacuum wavelengths [nm].
    earth_radius_m : float
        Radius of the sea surface [m] (see :func:`earth_radius_of_curvature_m`).
    """
    lam = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    a, b = ciddor1996_coefficients(lam)
    d, w = ciddor1996_density_ratios(atmosphere.temperature_K, atmosphere.pressure_Pa,
                                     atmosphere.vapour_pressure_Pa)
    z = atmosphere.height_m
    ln_n = np.log1p(a[:, None] * d[None, :] + b[:, None] * w[None, :])
    grad = np.gradient(ln_n, z, axis=1)
    # A kink's node gets the mean of its two one-sided slopes (the tracer itself reads
    # each side's own slope there: see _cell_gradients).
    for zk in atmosphere.kinks_m:
        i = int(np.searchsorted(z, zk))
        if 0 < i < z.size - 1 and z[i] == zk:
            grad[:, i] = 0.5 * ((ln_n[:, i] - ln_n[:, i - 1]) / (z[i] - z[i - 1])
                                + (ln_n[:, i + 1] - ln_n[:, i]) / (z[i + 1] - z[i]))
    above = z >= atmosphere.eye_height_m
    zz, dd = z[above], d[above]
    d_eye = np.interp(atmosphere.eye_height_m, z, d)
    column = float(np.trapezoid(np.concatenate([[d_eye], dd]),
                                np.concatenate([[atmosphere.eye_height_m], zz])))
    return Medium(z, ln_n, grad, d, column, lam, np.asarray(atmosphere.kinks_m, float),
                  float(earth_radius_m), float(atmosphere.eye_height_m))


def _stack_media(media: Sequence[Medium]) -> Medium:
    """One medium whose rows are all rows of ``media`` (same grid, kinks, radius, eye)."""
    first = media[0]
    for m in media[1:]:
        if not (np.array_equal(m.height_m, first.height_m)
                and np.array_equal(m.kinks_m, first.kinks_m)
                and m.earth_radius_m == first.earth_radius_m
                and m.eye_height_m == first.eye_height_m):
            raise ValueError("media to trace together must share the height grid, kinks, "
                             "Earth radius and eye height")
    shape = [(m.ln_n.shape[0], m.height_m.size) for m in media]
    density = np.concatenate([np.broadcast_to(m.density, s) for m, s in zip(media, shape)])
    column = np.concatenate([np.broadcast_to(m.column, s[:1]) for m, s in zip(media, shape)])
    return Medium(first.height_m, np.concatenate([m.ln_n for m in media]),
                  np.concatenate([m.dln_n_dz for m in media]), density, column,
                  np.concatenate([m.wavelength_nm for m in media]), first.kinks_m,
                  first.earth_radius_m, first.eye_height_m)


@dataclass(frozen=True)
class RayEnds:
    """Where each traced ray went.

    Attributes
    ----------
    true_altitude_deg : (N,) ndarray
        Direction of the ray beyond the atmosphere relative to the observer's horizontal
        plane [deg]; NaN for rays that met the sea or stayed trapped.
    fate : (N,) ndarray of int8
        0 escaped, 1 met the sea, 2 trapped (still inside after ``_MAX_PHI_RAD``).
    airmass : (N,) ndarray
        Dry-air column along the ray relative to the vertical column above the eye.
    min_height_m : (N,) ndarray
        Lowest height reached [m].
    bouguer_rel_error : (N,) ndarray
        ``|c_end / c_start - 1|`` of Bouguer's invariant ``n r sin(zeta)``, with the
        integrated ``sin(zeta)`` at the exit (NaN for rays that did not escape).
    crossing_phi_rad, crossing_zeta_rad : (N,) ndarray
        ``phi`` and ``zeta`` where the ray first climbed through ``record_height_m``
        (NaN if it never did or none was asked).
    steps : int
        Number of Runge-Kutta steps of the longest ray.
    """

    true_altitude_deg: np.ndarray
    fate: np.ndarray
    airmass: np.ndarray
    min_height_m: np.ndarray
    bouguer_rel_error: np.ndarray
    crossing_phi_rad: np.ndarray
    crossing_zeta_rad: np.ndarray
    steps: int


class _Profile:
    """The medium's tables laid out for the tracer.

    ``d ln n/dz`` and the density are ``a + b z`` in each cell, stored row after row so
    that one index ``row * cells + cell`` reads both. Layers lie between consecutive
    landing heights (kinks, the top, heights where rays stop or are recorded); each
    layer reads the table between the kinks around it.
    """

    def __init__(self, medium: Medium, landing_m: Sequence[float] = ()) -> None:
        z = medium.height_m
        self.z_inner = z[1:-1]
        self.cells = z.size - 1
        self.top_m = float(z[-1])
        knodes = _kink_nodes(z, medium.kinks_m)
        lo, hi = _cell_gradients(medium, knodes)
        dz = np.diff(z)
        b = (hi - lo) / dz
        self.ga, self.gb = (lo - b * z[:-1]).ravel(), b.ravel()
        dens = np.atleast_2d(medium.density)
        b = np.diff(dens, axis=1) / dz
        self.da, self.db = (dens[:, :-1] - b * z[:-1]).ravel(), b.ravel()
        self.density_per_row = dens.shape[0] > 1
        land = [h for h in (*medium.kinks_m, *landing_m) if z[0] < h < z[-1]]
        self.land = np.unique(np.asarray([*land, z[-1]], dtype=float))
        lower = np.concatenate([[-np.inf], self.land])
        upper = np.concatenate([self.land, [np.inf]])
        self.aim_up, self.aim_down = upper + _OVERSHOOT_M, lower - _OVERSHOOT_M
        inside = 0.5 * (np.where(np.isinf(lower), upper - 1.0, lower)
                        + np.where(np.isinf(upper), lower + 1.0, upper))
        edges = np.concatenate([[-np.inf], z[knodes], [np.inf]])
        j = np.searchsorted(z[knodes], inside)
        self.read_lo, self.read_hi = edges[j] + _INSIDE_M, edges[j + 1] - _INSIDE_M

    def rates(self, y, base, read_lo, read_hi, radius, out):
        """Derivatives of ``(z, cos, sin, phi)`` at states ``y`` (3 or 4, N) into ``out``.

        Returns the cell index of each ray (for the density look-up).
        """
        z, c, s = y[0], y[1], y[2]
        i = self.z_inner.searchsorted(np.minimum(np.maximum(z, read_lo), read_hi), "right")
        j = i + base
        w = self.ga.take(j)
        w += z * self.gb.take(j)
        ir = 1.0 / (radius + z)
        w += ir
        w *= s
        out[0] = c
        np.multiply(s, w, out=out[1])
        np.multiply(c, w, out=out[2])
        np.negative(out[2], out=out[2])
        np.multiply(s, ir, out=out[3])
        return i

    def density(self, z, i, dbase):
        j = i + dbase
        return self.da.take(j) + z * self.db.take(j)


def _kink_nodes(z: np.ndarray, kinks_m: np.ndarray) -> np.ndarray:
    """Indices of interior grid nodes that are kinks."""
    i = np.searchsorted(z, kinks_m)
    ok = (i > 0) & (i < z.size - 1)
    i = np.unique(i[ok][z[i[ok]] == np.asarray(kinks_m)[ok]])
    return i.astype(np.intp)


def _cell_gradients(medium: Medium, knodes: np.ndarray):
    """``d ln n/dz`` at the lower and upper end of every cell, shapes (L, H-1).

    At a kink each side's value makes its cell's trapezoid integral equal to the cell's
    change of ``ln n`` (a second-order one-sided estimate); a cell between two kinks is
    given its secant slope.
    """
    g = medium.dln_n_dz
    lo, hi = g[:, :-1].copy(), g[:, 1:].copy()
    secant = np.diff(medium.ln_n, axis=1) / np.diff(medium.height_m)
    if knodes.size:
        is_kink = np.zeros(medium.height_m.size, dtype=bool)
        is_kink[knodes] = True
        top, bottom = is_kink[1:], is_kink[:-1]
        both = top & bottom
        hi[:, top & ~both] = 2.0 * secant[:, top & ~both] - lo[:, top & ~both]
        lo[:, bottom & ~both] = 2.0 * secant[:, bottom & ~both] - hi[:, bottom & ~both]
        lo[:, both] = hi[:, both] = secant[:, both]
    # Elsewhere the nodal values' trapezoid misses the cell's change of ln n by
    # O(dz^2 g''): shift both ends by the difference (1e-5 of g), so that the integrated
    # n passes through every node's n.
    shift = secant - 0.5 * (lo + hi)
    return lo + shift, hi + shift


def _step_length(z, c, d2z, layer, prof, radius, scale):
    """Arc length of the next step [m] for each ray (see the module docstring)."""
    dz = (STEP_FRACTION * scale) * (z + STEP_HEIGHT_M)
    bend = np.maximum(np.abs(d2z), 1.0 / radius)
    ds = np.minimum(dz / np.maximum(np.abs(c), 1e-9), np.sqrt(2.0 * dz / bend))
    np.minimum(ds, MAX_STEP_M * scale, out=ds)
    # Shorten to land just beyond the layer's bound: the smallest positive root of
    # z + c s + d2z s^2 / 2 = aim, for the bound above and the one below.
    delta = np.stack([prof.aim_up.take(layer) - z, prof.aim_down.take(layer) - z])
    with np.errstate(invalid="ignore", divide="ignore"):
        s = 2.0 * delta / (c + _BRANCH * np.sqrt(c * c + 2.0 * d2z * delta))
    s = np.where(s > 0.0, s, np.inf).min(axis=0)
    return np.minimum(ds, s, out=ds)


@dataclass
class _Run:
    """Where the rays of one integration ended (internal)."""

    y: np.ndarray  # (4, N) final (z, cos, sin, phi)
    fate: np.ndarray  # (N,) int8
    column_m: np.ndarray  # (N,) relative density integrated along the ray [m]
    min_height_m: np.ndarray  # (N,)
    record: np.ndarray  # (4, N) state where the ray first climbed through record_m
    steps: int


def _integrate(prof: _Profile, y0: np.ndarray, rows: np.ndarray, radius: float, *,
               column0_m=0.0, stop_m: float | None = None, record_m: float | None = None,
               step_scale: float = 1.0) -> _Run:
    """Advance rays from states ``y0`` (4, N) until they escape, meet the sea or stop."""
    n = y0.shape[1]
    y, idx = y0.copy(), np.arange(n)
    base = rows * prof.cells
    dbase = base if prof.density_per_row else np.zeros_like(base)
    col = np.broadcast_to(np.asarray(column0_m, dtype=float), (n,)).copy()
    zmin = y[0].copy()
    run = _Run(np.full((4, n), np.nan), np.full(n, TRAPPED, dtype=np.int8), np.full(n, np.nan),
               np.full(n, np.nan), np.full((4, n), np.nan), 0)
    stop = np.inf if stop_m is None else stop_m
    scratch = np.empty((4, 4, n))
    while idx.size and run.steps < _MAX_STEPS:
        run.steps += 1
        z_old, c_old = y[0].copy(), y[1].copy()
        ds = _rk4_step(prof, y, base, dbase, col, radius, step_scale, scratch[:, :, :idx.size])
        _lowest(zmin, z_old, c_old, y, ds)
        if record_m is not None:
            hit = (z_old < record_m) & (y[0] >= record_m) & np.isnan(run.record[0, idx])
            run.record[:, idx[hit]] = y[:, hit]
        sea, out, stopped = zmin < 0.0, y[0] >= prof.top_m, y[0] >= stop
        done = sea | out | stopped | ~(y[3] <= _MAX_PHI_RAD)  # NaN too: trapped
        if np.any(done):
            j = idx[done]
            run.y[:, j], run.column_m[j], run.min_height_m[j] = y[:, done], col[done], zmin[done]
            run.fate[j] = np.select([sea[done], out[done], stopped[done]],
                                    [SEA, ESCAPED, _STOPPED], TRAPPED)
            keep = ~done
            idx, y, col, zmin = idx[keep], y[:, keep], col[keep], zmin[keep]
            base, dbase = base[keep], dbase[keep]
    if idx.size:  # out of steps: trapped
        run.y[:, idx], run.column_m[idx], run.min_height_m[idx] = y, col, zmin
    return run


def _rk4_step(prof: _Profile, y, base, dbase, col, radius, scale, k) -> np.ndarray:
    """One classical Runge-Kutta step of every ray, in place; returns the step [m].

    ``k`` (4, 4, N) is scratch space for the stages. The column ``col`` grows by the
    density at the step's middle times its length.
    """
    k1, k2, k3, k4 = k
    layer = prof.land.searchsorted(y[0], "right")
    lo, hi = prof.read_lo.take(layer), prof.read_hi.take(layer)
    prof.rates(y, base, lo, hi, radius, k1)
    ds = _step_length(y[0], y[1], k1[1], layer, prof, radius, scale)
    half = 0.5 * ds
    i2 = prof.rates(y[:3] + half * k1[:3], base, lo, hi, radius, k2)
    col += ds * prof.density(y[0] + half * k1[0], i2, dbase)
    prof.rates(y[:3] + half * k2[:3], base, lo, hi, radius, k3)
    prof.rates(y[:3] + ds * k3[:3], base, lo, hi, radius, k4)
    k2 += k3
    k2 *= 2.0
    k2 += k1
    k2 += k4
    y += (ds / 6.0) * k2
    return ds


def _lowest(zmin, z_old, c_old, y, ds):
    """Update the lowest height, also where a ray turned inside the step."""
    np.minimum(zmin, y[0], out=zmin)
    turned = (c_old < 0.0) & (y[1] >= 0.0)
    if np.any(turned):
        c0, c1 = c_old[turned], y[1, turned]
        z_turn = z_old[turned] - c0 * c0 * ds[turned] / (2.0 * (c1 - c0))
        zmin[turned] = np.minimum(zmin[turned], z_turn)


def _ln_n_at(medium: Medium, height_m: float) -> np.ndarray:
    """``ln n`` of every row at one height [m], shape (L,)."""
    z = medium.height_m
    i = int(np.clip(np.searchsorted(z, height_m) - 1, 0, z.size - 2))
    f = (height_m - z[i]) / (z[i + 1] - z[i])
    return medium.ln_n[:, i] + f * (medium.ln_n[:, i + 1] - medium.ln_n[:, i])


def _column(medium: Medium, rows: np.ndarray) -> np.ndarray:
    return np.broadcast_to(np.asarray(medium.column, dtype=float), medium.ln_n.shape[:1])[rows]


def _exits(medium: Medium, run: _Run, rows: np.ndarray, c0: np.ndarray):
    """True altitude [deg] and Bouguer error of the escaped rays (NaN for the others)."""
    z, c, s, phi = run.y
    out = run.fate == ESCAPED
    r = medium.earth_radius_m + z
    sin_vac = np.clip(c0 / r, -1.0, 1.0)
    zeta_vac = np.where(c >= 0.0, np.arcsin(sin_vac), np.pi - np.arcsin(sin_vac))
    alt = np.where(out, 90.0 - np.degrees(zeta_vac + phi), np.nan)
    n_top = np.exp(medium.ln_n[rows, -1])
    with np.errstate(invalid="ignore"):
        bouguer = np.abs(n_top * r * s / np.hypot(c, s) / c0 - 1.0)
    return alt, np.where(out, bouguer, np.nan)


def trace_rays(medium: Medium, apparent_elevation_deg, wavelength_index, *,
               start_height_m: float | None = None, record_height_m: float | None = None,
               step_scale: float = 1.0) -> RayEnds:
    """Trace rays from the observer to space or the sea.

    Parameters
    ----------
    medium : Medium
    apparent_elevation_deg : (N,) array_like
        Elevation of each ray at the start above the local horizontal plane [deg].
    wavelength_index : (N,) array_like of int
        Row of ``medium`` (index into ``medium.wavelength_nm``) for each ray.
    start_height_m : float, optional
        Height of the start [m]; default the eye height.
    record_height_m : float, optional
        Record ``phi`` and ``zeta`` where rays climb through this height.
    step_scale : float
        Multiplies every step (0.5 halves them: the convergence check).

    Returns
    -------
    RayEnds
    """
    e = np.atleast_1d(np.asarray(apparent_elevation_deg, dtype=float))
    rows = np.broadcast_to(np.asarray(wavelength_index, dtype=np.intp), e.shape).copy()
    radius = medium.earth_radius_m
    h0 = medium.eye_height_m if start_height_m is None else float(start_height_m)
    y0 = np.stack([np.full(e.size, h0), np.sin(np.radians(e)), np.cos(np.radians(e)),
                   np.zeros(e.size)])
    c0 = np.exp(_ln_n_at(medium, h0))[rows] * (radius + h0) * y0[2]
    landing = () if record_height_m is None else (record_height_m,)
    run = _integrate(_Profile(medium, landing), y0, rows, radius, record_m=record_height_m,
                     step_scale=step_scale)
    alt, bouguer = _exits(medium, run, rows, c0)
    air = np.where(run.fate == ESCAPED, run.column_m / _column(medium, rows), np.nan)
    return RayEnds(alt, run.fate, air, run.min_height_m, bouguer, run.record[3],
                   np.arctan2(run.record[2], run.record[1]), run.steps)


@dataclass(frozen=True)
class SeaHorizon:
    """The sea-horizon ray of each wavelength: the lowest ray that escapes.

    Attributes
    ----------
    apparent_elevation_deg : (L,) ndarray
        Its elevation at the eye [deg] (minus the dip).
    true_altitude_deg : (L,) ndarray
        The true altitude a body must have to sit on the horizon [deg].
    airmass : (L,) ndarray
        Dry-air column along the ray from space past its tangent point to the eye,
        relative to the vertical column above the eye.
    method : str
        "tangent ray" (the ray grazing the sea, traced from its tangent point) or
        "search" (bisection for the lowest escaping ray, used where a duct below the
        eye keeps grazing rays from reaching it; "search" if any row needed it). NaN
        where no ray below ``_SEARCH_TOP_DEG`` escapes.
    """

    apparent_elevation_deg: np.ndarray
    true_altitude_deg: np.ndarray
    airmass: np.ndarray
    method: str

    @property
    def dip_arcmin(self) -> np.ndarray:
        return -60.0 * self.apparent_elevation_deg

    @property
    def refraction_arcmin(self) -> np.ndarray:
        """Refraction of the horizon ray, apparent minus true altitude [arcmin]."""
        return 60.0 * (self.apparent_elevation_deg - self.true_altitude_deg)


def _rows(medium: Medium, rows: np.ndarray) -> Medium:
    """The medium restricted to some of its rows."""
    dens = medium.density if np.ndim(medium.density) == 1 else medium.density[rows]
    col = medium.column if np.ndim(medium.column) == 0 else np.asarray(medium.column)[rows]
    return Medium(medium.height_m, medium.ln_n[rows], medium.dln_n_dz[rows], dens, col,
                  medium.wavelength_nm[rows], medium.kinks_m, medium.earth_radius_m,
                  medium.eye_height_m)


def _duct_below(medium: Medium, k: int) -> bool:
    """True where m(z) falls below m(0) somewhere between the sea and the eye.

    With the eye at the sea, true where m decreases from the sea upwards (a surface duct).
    """
    below = medium.height_m <= max(medium.eye_height_m, medium.height_m[1])
    m = medium.modified_index(k)[below]
    return bool(m.size > 1 and np.any(m[1:] <= m[0]))


def _graze(medium: Medium, rows: np.ndarray, step_scale: float):
    """Trace the rays grazing the sea up to the eye height.

    Where ``m(z) = n (R + z)`` increases from the sea to the eye, the horizon ray grazes
    the sea. By the symmetry of a spherically stratified medium it is traced from its
    tangent point: where it climbs through the eye height it has the zenith angle the
    observer sees mirrored, and beyond it continues as the observer's ray would. Returns
    the state there (4, R), which rays got there (R,) and the column on the way [m] (R,).
    """
    y0 = np.zeros((4, rows.size))
    y0[2] = 1.0
    h = medium.eye_height_m
    if h <= 0.0 or rows.size == 0:
        return y0, np.ones(rows.size, dtype=bool), np.zeros(rows.size)
    prof = _Profile(medium, (h,))
    run = _integrate(prof, y0, rows, medium.earth_radius_m, stop_m=h, step_scale=step_scale)
    # The last step ended a hair (_OVERSHOOT_M) above the eye: step back to it.
    layer = np.searchsorted(prof.land, run.y[0], side="right")
    rates = np.empty_like(run.y)
    prof.rates(run.y, rows * prof.cells, prof.read_lo[layer], prof.read_hi[layer],
               medium.earth_radius_m, rates)
    with np.errstate(invalid="ignore", divide="ignore"):
        y = run.y - (run.y[0] - h) / run.y[1] * rates
    y[0] = h
    return y, run.fate == _STOPPED, run.column_m


@dataclass
class _Start:
    """Horizons before the grazing rays' continuation is traced (internal)."""

    searched: np.ndarray  # (L,) bool: horizon found by search
    rows: np.ndarray  # (G,) rows whose horizon ray grazes the sea
    y: np.ndarray  # (4, G) their state at the eye height
    column_m: np.ndarray  # (G,) their column from the tangent point to the eye [m]
    horizon: np.ndarray  # (3, L) elevation [deg], true altitude [deg], airmass


def _start(medium: Medium, step_scale: float, horizon: SeaHorizon | None) -> _Start:
    """Grazing rays up to the eye; a search where a duct (or a failed graze) needs it."""
    n_lam = medium.ln_n.shape[0]
    if horizon is not None:
        known = np.stack([horizon.apparent_elevation_deg, horizon.true_altitude_deg,
                          horizon.airmass])
        return _Start(np.full(n_lam, horizon.method == "search"), np.zeros(0, dtype=np.intp),
                      np.zeros((4, 0)), np.zeros(0), known)
    searched = np.array([_duct_below(medium, k) for k in range(n_lam)])
    rows = np.flatnonzero(~searched)
    y, ok, col = _graze(medium, rows, step_scale)
    searched[rows[~ok]] = True
    start = _Start(searched, rows[ok], y[:, ok], col[ok], np.full((3, n_lam), np.nan))
    start.horizon[0, start.rows] = -np.degrees(np.arctan2(start.y[1], start.y[2]))
    if np.any(searched):
        s_rows = np.flatnonzero(searched)
        hz = _horizon_by_search(_rows(medium, s_rows), step_scale=step_scale)
        start.horizon[:, s_rows] = hz.apparent_elevation_deg, hz.true_altitude_deg, hz.airmass
    return start


def _horizon_and_rays(medium: Medium, above_deg: np.ndarray, step_scale: float,
                      horizon: SeaHorizon | None = None):
    """The sea horizon of every row, and rays ``above_deg`` (L, M) above it, traced together.

    Rows with a duct below the eye (or whose grazing ray does not reach the eye) get
    their horizon by search. The grazing rays' continuation beyond the eye starts with
    twice the tangent-to-eye column: the light crosses that air on both sides of the
    tangent point. Returns the horizon, which rows were searched (L,), and the rays'
    true altitudes [deg] and airmasses, each (L, M).
    """
    n_lam, m = above_deg.shape
    radius, h = medium.earth_radius_m, medium.eye_height_m
    st = _start(medium, step_scale, horizon)
    e_rows = np.repeat(np.arange(n_lam), m)
    er = np.radians((st.horizon[0][:, None] + above_deg).ravel())
    y_e = np.stack([np.full(er.size, h), np.sin(er), np.cos(er), np.zeros(er.size)])
    c0 = np.concatenate([np.exp(medium.ln_n[st.rows, 0]) * radius,
                         np.exp(_ln_n_at(medium, h))[e_rows] * (radius + h) * y_e[2]])
    rows = np.concatenate([st.rows, e_rows])
    run = _integrate(_Profile(medium), np.concatenate([st.y, y_e], axis=1), rows, radius,
                     column0_m=np.concatenate([2.0 * st.column_m, np.zeros(er.size)]),
                     step_scale=step_scale)
    alt, _ = _exits(medium, run, rows, c0)
    air = np.where(run.fate == ESCAPED, run.column_m / _column(medium, rows), np.nan)
    k = st.rows.size  # the eye's horizontal plane is tilted by phi_h against the tangent's
    st.horizon[1:, st.rows] = alt[:k] - np.degrees(st.y[3]), air[:k]
    if horizon is None:
        horizon = SeaHorizon(*st.horizon, "search" if np.any(st.searched) else "tangent ray")
    return horizon, st.searched, alt[k:].reshape(n_lam, m), air[k:].reshape(n_lam, m)


def sea_horizon(medium: Medium, *, step_scale: float = 1.0) -> SeaHorizon:
    """Find the sea-horizon ray for every wavelength of the medium.

    Where ``m(z) = n (R + z)`` increases from the sea to the eye (no duct below the
    eye), the horizon ray grazes the sea and is traced from its tangent point, so the dip
    is that of the integration, without a search. Where any row has a duct below the
    eye, that row's lowest escaping ray is searched for, and ``method`` is "search".
    """
    n_lam = medium.ln_n.shape[0]
    return _horizon_and_rays(medium, np.zeros((n_lam, 0)), step_scale)[0]


def _horizon_by_search(medium: Medium, *, step_scale: float = 1.0, rounds: int = 5,
                       rays: int = 16) -> SeaHorizon:
    """Bisection, all wavelengths at once, for the lowest ray that escapes.

    The bracket runs from below twice the geometric dip to the lowest of a few
    elevations up to ``_SEARCH_TOP_DEG`` whose ray escapes (NaN where none does).
    """
    n_lam = medium.ln_n.shape[0]
    h = max(medium.eye_height_m, 0.0)
    geometric_dip = np.degrees(np.arccos(medium.earth_radius_m / (medium.earth_radius_m + h)))
    tops = np.array([-2.0 * geometric_dip - 0.05, 0.05, 0.2, 0.5, 1.0, 2.0, _SEARCH_TOP_DEG])
    ends = trace_rays(medium, np.tile(tops[1:], n_lam),
                      np.repeat(np.arange(n_lam), tops.size - 1), step_scale=step_scale)
    ok = (ends.fate == ESCAPED).reshape(n_lam, tops.size - 1)
    first = np.where(ok.any(axis=1), np.argmax(ok, axis=1) + 1, tops.size - 1)
    sel = np.flatnonzero(ok.any(axis=1))  # rows with a bracket
    lo, hi = tops[first - 1][sel], tops[first][sel]
    frac = np.linspace(0.0, 1.0, rays)
    for _ in range(rounds):
        e = lo[:, None] + (hi - lo)[:, None] * frac[None, :]
        ends = trace_rays(medium, e.ravel(), np.repeat(sel, rays), step_scale=step_scale)
        ok = (ends.fate == ESCAPED).reshape(sel.size, rays)
        first = np.where(ok.any(axis=1), np.argmax(ok, axis=1), rays - 1)
        hi = e[np.arange(sel.size), first]
        lo = e[np.arange(sel.size), np.maximum(first - 1, 0)]
    ends = trace_rays(medium, hi, sel, step_scale=step_scale)
    out = np.full((3, n_lam), np.nan)
    out[:, sel] = hi, ends.true_altitude_deg, ends.airmass
    return SeaHorizon(out[0], out[1], out[2], "search")


@dataclass(frozen=True)
class TransferCurve:
    """True altitude against apparent elevation near the horizon, per wavelength.

    Attributes
    ----------
    wavelength_nm : (L,) ndarray
    apparent_elevation_deg : (L, M) ndarray
        Elevation grid of each wavelength, from its sea-horizon ray upwards, densest at
        the horizon [deg].
    true_altitude_deg : (L, M) ndarray
        True altitude of the point each ray sees [deg]; NaN for trapped rays.
    airmass : (L, M) ndarray
        Dry-air column along each ray relative to the vertical column above the eye.
    horizon : SeaHorizon
    folded : (L,) ndarray of bool
        True where ``a(e)`` is not increasing: one true altitude is seen at several
        elevations (a mirage with multiple images).
    """

    wavelength_nm: np.ndarray
    apparent_elevation_deg: np.ndarray
    true_altitude_deg: np.ndarray
    airmass: np.ndarray
    horizon: SeaHorizon
    folded: np.ndarray

    def true_altitude_at(self, k: int, elevation_deg) -> np.ndarray:
        """True altitude [deg] seen at elevations [deg] by row k (NaN below the horizon)."""
        e = self.apparent_elevation_deg[k]
        a = np.interp(elevation_deg, e, self.true_altitude_deg[k])
        return np.where(np.asarray(elevation_deg) < e[0], np.nan, a)

    def elevation_of(self, k: int, true_altitude_deg) -> np.ndarray:
        """Lowest elevation [deg] at which row k sees a true altitude [deg] (NaN if none)."""
        a = self.true_altitude_deg[k]
        e = self.apparent_elevation_deg[k]
        if not self.folded[k]:
            out = np.interp(true_altitude_deg, a, e, left=np.nan, right=np.nan)
            return np.asarray(out)
        t = np.atleast_1d(np.asarray(true_altitude_deg, dtype=float))
        out = np.full(t.shape, np.nan)
        for j, aj in enumerate(t):
            s = np.nonzero((a[:-1] - aj) * (a[1:] - aj) <= 0)[0]
            if s.size:
                i = s[0]
                f = (aj - a[i]) / (a[i + 1] - a[i]) if a[i + 1] != a[i] else 0.0
                out[j] = e[i] + f * (e[i + 1] - e[i])
        return out.reshape(np.shape(true_altitude_deg))


def transfer_curve(medium: Medium, *, span_arcmin: float = 45.0, rays: int = 48,
                   step_scale: float = 1.0, horizon: SeaHorizon | None = None) -> TransferCurve:
    """Trace the transfer curve of every wavelength from its sea horizon upwards.

    The grazing rays' continuation beyond the eye and the curve's rays are traced
    together in one integration.

    Parameters
    ----------
    medium : Medium
    span_arcmin : float
        How far above the horizon ray the curve reaches [arcmin].
    rays : int
        Rays per wavelength, spaced quadratically (densest at the horizon, where the
        first step is ``span / (rays - 1)^2``: 1.2 arcsec for the defaults).
    horizon : SeaHorizon, optional
        Reuse a horizon already found.
    """
    return _transfer_curve(medium, span_arcmin, rays, step_scale, horizon)[0]


def _transfer_curve(medium: Medium, span_arcmin: float, rays: int, step_scale: float,
                    horizon: SeaHorizon | None):
    """:func:`transfer_curve`, and which rows' horizons were searched for (L,)."""
    n_lam = medium.ln_n.shape[0]
    u = np.linspace(0.0, 1.0, rays) ** 2
    above = np.broadcast_to((span_arcmin / 60.0) * u[1:], (n_lam, rays - 1))
    hz, searched, alt, air = _horizon_and_rays(medium, above, step_scale, horizon)
    e = hz.apparent_elevation_deg[:, None] + (span_arcmin / 60.0) * u[None, :]
    a = np.concatenate([hz.true_altitude_deg[:, None], alt], axis=1)
    m = np.concatenate([hz.airmass[:, None], air], axis=1)
    folded = np.any(np.diff(a, axis=1) <= 0, axis=1)
    return TransferCurve(medium.wavelength_nm, e, a, m, hz, folded), searched


def transfer_curves(media: Sequence[Medium], *, span_arcmin: float = 45.0, rays: int = 48,
                    step_scale: float = 1.0) -> list[TransferCurve]:
    """Transfer curves of several media (e.g. trial lapse rates) in one integration.

    The same as ``[transfer_curve(m, ...) for m in media]``, faster: the rows of all
    media advance together. The media must share the height grid, kinks, Earth radius
    and eye height, as :func:`analyse.atmosphere.linear_layer_atmosphere` gives for one
    layer top and eye height; a ``ValueError`` says when they do not.
    """
    curve, searched = _transfer_curve(_stack_media(media), span_arcmin, rays, step_scale, None)
    out, start = [], 0
    for med in media:
        k = slice(start, start + med.ln_n.shape[0])
        start = k.stop
        hz = SeaHorizon(curve.horizon.apparent_elevation_deg[k],
                        curve.horizon.true_altitude_deg[k], curve.horizon.airmass[k],
                        "search" if np.any(searched[k]) else "tangent ray")
        out.append(TransferCurve(curve.wavelength_nm[k], curve.apparent_elevation_deg[k],
                                 curve.true_altitude_deg[k], curve.airmass[k], hz,
                                 curve.folded[k]))
    return out


def refraction_table(medium: Medium, apparent_altitude_deg, *, step_scale: float = 1.0):
    """Refraction [arcmin] at apparent altitudes [deg] for each wavelength, shape (L, N).

    Rays that meet the sea or stay trapped give NaN.
    """
    alt = np.atleast_1d(np.asarray(apparent_altitude_deg, dtype=float))
    n_lam = medium.wavelength_nm.size
    ends = trace_rays(medium, np.tile(alt, n_lam), np.repeat(np.arange(n_lam), alt.size),
                      step_scale=step_scale)
    true = ends.true_altitude_deg.reshape(n_lam, alt.size)
    return 60.0 * (alt[None, :] - true)
