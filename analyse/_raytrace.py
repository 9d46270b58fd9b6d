"""The ray integrator: rays through a spherically stratified atmosphere, all at once.

Holds the tracer's input (:class:`Medium`), its output (:class:`RayEnds`), the profile
laid out for it, the Runge-Kutta integration and :func:`trace_rays`. It knows nothing of
atmospheres or wavelengths beyond the tabulated ``ln n`` rows; :mod:`analyse.refraction`
builds the medium and finds horizons and transfer curves with it.

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

__all__ = [
    "ESCAPED",
    "SEA",
    "TRAPPED",
    "STEP_FRACTION",
    "STEP_HEIGHT_M",
    "MAX_STEP_M",
    "Medium",
    "RayEnds",
    "trace_rays",
]

ESCAPED, SEA, TRAPPED = 0, 1, 2
_STOPPED = 3  # internal: reached the requested stop height
STEP_FRACTION = 0.1  # height change per step / (z + STEP_HEIGHT_M): 0.001" accuracy, see the
STEP_HEIGHT_M = 1.0  # m   convergence tests in tests/published/test_refraction.py
MAX_STEP_M = 20000.0  # m, longest step along a ray
_MAX_STEPS = 20000
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
