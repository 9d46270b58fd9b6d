"""Ray tracing through a spherically stratified atmosphere.

A ray is followed outwards from the observer (the reverse of the light's way) in arc
length ``s`` with state ``(r, phi, zeta)``: distance from the Earth's centre, angle
travelled around the centre, and zenith angle relative to the local vertical::

    dr/ds    = cos(zeta)
    dphi/ds  = sin(zeta) / r
    dzeta/ds = -sin(zeta) * (1/r + n'/n)

The equations are regular where a ray turns (zeta = 90 deg), so rays below the
astronomical horizon, ducts and mirages need no special cases. Along every ray
Bouguer's invariant ``n r sin(zeta)`` is constant; the tracer reports how well it held.
Where a ray leaves the tabulated atmosphere, the direction it would have in vacuum is
``zeta_vac = asin(n_top sin(zeta))`` at the same point, and its direction relative to the
observer's horizontal plane is ``90 deg - (zeta_vac + phi)``: the true altitude of the
point on the sky whose light arrives along the ray.

All rays (any mix of elevations and wavelengths) advance together as numpy arrays with
a classical fourth-order Runge-Kutta step whose length grows with height: the height
change per step is limited to a small fraction of the height above the sea and of
the distance to the nearest kink of the temperature profile.

References
----------
.. [1] C. Y. Hohenkerk and A. T. Sinclair, "The computation of angular atmospheric
   refraction at large zenith angles", NAO Technical Note 63 (1985).
.. [2] G. H. Auer and E. M. Standish, "Astronomical refraction: computational method
   for all zenith angles", Astron. J. 119, 2472-2474 (2000). doi:10.1086/301325
"""

from __future__ import annotations

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
    "refraction_table",
    "earth_radius_of_curvature_m",
]

EARTH_RADIUS_M = 6371000.0  # m, mean Earth radius (IUGG)
WGS84_A_M = 6378137.0  # m, WGS 84 semi-major axis
WGS84_F = 1.0 / 298.257223563  # WGS 84 flattening

ESCAPED, SEA, TRAPPED = 0, 1, 2
_MAX_STEPS = 20000
_MAX_PHI_RAD = 0.5  # a ray still inside the atmosphere after ~3000 km is trapped (a duct)


@dataclass(frozen=True)
class Medium:
    """What the tracer needs of an atmosphere, for a set of wavelengths.

    Attributes
    ----------
    height_m : (H,) ndarray
        Height nodes above the sea [m].
    ln_n, dln_n_dz : (L, H) ndarray
        ``ln n`` and its height derivative [1/m] for each wavelength.
    density : (H,) ndarray
        Dry-air density relative to standard air (for the airmass along a ray).
    column : float
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
    column: float
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
    # One-sided differences at kinks keep the gradient's jump sharp at the node.
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
        ``|c_end / c_start - 1|`` of Bouguer's invariant ``n r sin(zeta)``.
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
    """Linear interpolation of the medium's tables for rays of mixed wavelengths.

    Each cell ``i`` stores its value at the lower node and its slope, so that one
    look-up and three gathers give the gradient of ``ln n`` and the density.
    """

    def __init__(self, medium: Medium) -> None:
        z = medium.height_m
        self.z = z
        self.h = z.size
        dz = np.diff(z)
        g = medium.dln_n_dz
        self.g0 = g[:, :-1].ravel()
        self.gs = (np.diff(g, axis=1) / dz).ravel()
        self.d0 = medium.density[:-1]
        self.ds = np.diff(medium.density) / dz

    def __call__(self, height_m, base):
        """Gradient of ln n [1/m] and relative density at heights [m]."""
        i = np.searchsorted(self.z, height_m)
        np.clip(i - 1, 0, self.h - 2, out=i)
        dz = height_m - self.z[i]
        j = base + i
        return self.g0[j] + dz * self.gs[j], self.d0[i] + dz * self.ds[i]


def _derivatives(r, zeta, base, prof, radius):
    g, d = prof(r - radius, base)
    s, c = np.sin(zeta), np.cos(zeta)
    return c, s / r, -s * (1.0 / r + g), d


def _step_length(z, zeta, kinks, radius, scale):
    """Arc length per step [m]: the height change stays below ~10 % of the height."""
    dz_allow = 0.1 * scale * (z + 1.0)
    if kinks.size:
        near = np.min(np.abs(z[:, None] - kinks[None, :]), axis=1)
        dz_allow = np.minimum(dz_allow, np.maximum(0.5 * near, 2e-3 * scale * (z + 1.0)))
    ds = dz_allow / np.maximum(np.abs(np.cos(zeta)), 1e-9)
    return np.minimum(ds, np.minimum(np.sqrt(2.0 * radius * dz_allow), 20000.0 * scale))


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
        Index into ``medium.wavelength_nm`` for each ray.
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
    lam = np.broadcast_to(np.asarray(wavelength_index, dtype=np.intp), e.shape).copy()
    radius = medium.earth_radius_m
    h0 = medium.eye_height_m if start_height_m is None else float(start_height_m)
    n_rays = e.size
    r = np.full(n_rays, radius + h0)
    phi = np.zeros(n_rays)
    zeta = np.radians(90.0 - e)
    col = np.zeros(n_rays)
    zmin = np.full(n_rays, h0)
    base_all = lam * (medium.height_m.size - 1)
    c0 = medium.n_at(h0, lam) * r * np.sin(zeta)
    prof = _Profile(medium)
    top = medium.top_m

    out_alt = np.full(n_rays, np.nan)
    fate = np.full(n_rays, TRAPPED, dtype=np.int8)
    air = np.full(n_rays, np.nan)
    bouguer = np.full(n_rays, np.nan)
    cross_phi = np.full(n_rays, np.nan)
    cross_zeta = np.full(n_rays, np.nan)
    idx = np.arange(n_rays)
    steps = 0
    while idx.size and steps < _MAX_STEPS:
        steps += 1
        base = base_all[idx]
        z_old = r - radius
        ds = _step_length(z_old, zeta, medium.kinks_m, radius, step_scale)
        k1 = _derivatives(r, zeta, base, prof, radius)
        k2 = _derivatives(r + 0.5 * ds * k1[0], zeta + 0.5 * ds * k1[2], base, prof, radius)
        k3 = _derivatives(r + 0.5 * ds * k2[0], zeta + 0.5 * ds * k2[2], base, prof, radius)
        k4 = _derivatives(r + ds * k3[0], zeta + ds * k3[2], base, prof, radius)
        w = ds / 6.0
        r_new = r + w * (k1[0] + 2 * k2[0] + 2 * k3[0] + k4[0])
        phi_new = phi + w * (k1[1] + 2 * k2[1] + 2 * k3[1] + k4[1])
        zeta_new = zeta + w * (k1[2] + 2 * k2[2] + 2 * k3[2] + k4[2])
        col += w * (k1[3] + 2 * k2[3] + 2 * k3[3] + k4[3])
        z_new = r_new - radius
        if record_height_m is not None:
            hit = (z_old < record_height_m) & (z_new >= record_height_m) & np.isnan(cross_phi[idx])
            if np.any(hit):
                f = (record_height_m - z_old[hit]) / (z_new[hit] - z_old[hit])
                cross_phi[idx[hit]] = phi[hit] + f * (phi_new[hit] - phi[hit])
                cross_zeta[idx[hit]] = zeta[hit] + f * (zeta_new[hit] - zeta[hit])
        r, phi, zeta = r_new, phi_new, zeta_new
        zmin[idx] = np.minimum(zmin[idx], z_new)
        sea = z_new < 0.0
        out = z_new >= top
        lost = phi > _MAX_PHI_RAD
        if np.any(out):
            n_top = medium.n_at(z_new[out], lam[idx[out]])
            sin_vac = np.clip(n_top * np.sin(zeta[out]), -1.0, 1.0)
            zeta_vac = np.where(np.cos(zeta[out]) >= 0, np.arcsin(sin_vac), np.pi - np.arcsin(sin_vac))
            out_alt[idx[out]] = 90.0 - np.degrees(zeta_vac + phi[out])
            fate[idx[out]] = ESCAPED
            air[idx[out]] = col[out] / medium.column
            c_end = n_top * r[out] * np.sin(zeta[out])
            c_start = c0[idx[out]]
            scale = np.maximum(np.abs(c_start), medium.earth_radius_m * 1e-9)  # zenith rays: c = 0
            bouguer[idx[out]] = np.abs(c_end - c_start) / scale
        fate[idx[sea]] = SEA
        done = sea | out | lost
        if np.any(done):
            keep = ~done
            idx, r, phi, zeta, col = idx[keep], r[keep], phi[keep], zeta[keep], col[keep]
    return RayEnds(out_alt, fate, air, zmin, bouguer, cross_phi, cross_zeta, steps)


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
        Dry-air column along the ray beyond the tangent point, relative to the
        vertical column above the eye.
    method : str
        "tangent ray" (the ray grazing the sea, traced from its tangent point) or
        "search" (bisection for the lowest escaping ray, used where a duct below the
        eye keeps grazing rays from reaching it).
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


def sea_horizon(medium: Medium, *, step_scale: float = 1.0) -> SeaHorizon:
    """Find the sea-horizon ray for every wavelength of the medium.

    Where the modified index ``m(z) = n (R + z)`` increases from the sea to the eye (no
    duct below the eye), the horizon ray grazes the sea. By the symmetry of a
    spherically stratified medium it is traced once from its tangent point upwards:
    where it climbs through the eye height it has the zenith angle ``zeta_h`` that the
    observer sees mirrored, so the dip is ``90 deg - zeta_h``, and the angle ``phi_h``
    between eye and tangent point adds to the exit direction.
    """
    n_lam = medium.wavelength_nm.size
    lam = np.arange(n_lam)
    h = medium.eye_height_m
    ducted = any(_duct_below(medium, k) for k in lam)
    if h <= 0.0 or ducted:
        return _horizon_by_search(medium, step_scale=step_scale)
    ends = trace_rays(medium, np.zeros(n_lam), lam, start_height_m=0.0, record_height_m=h,
                      step_scale=step_scale)
    elev = -(90.0 - np.degrees(ends.crossing_zeta_rad))
    true = ends.true_altitude_deg - np.degrees(ends.crossing_phi_rad)
    # The column below the eye is crossed twice in the tangent ray's full path.
    return SeaHorizon(elev, true, ends.airmass, "tangent ray")


def _duct_below(medium: Medium, k: int) -> bool:
    """True where m(z) falls below m(0) somewhere between the sea and the eye."""
    below = medium.height_m <= medium.eye_height_m
    m = medium.modified_index(k)[below]
    return bool(m.size > 1 and np.any(m[1:] <= m[0]))


def _horizon_by_search(medium: Medium, *, step_scale: float = 1.0, rounds: int = 5,
                       rays: int = 16) -> SeaHorizon:
    """Bisection, all wavelengths at once, for the lowest ray that escapes."""
    n_lam = medium.wavelength_nm.size
    h = max(medium.eye_height_m, 0.0)
    geometric_dip = np.degrees(np.arccos(medium.earth_radius_m / (medium.earth_radius_m + h)))
    lo = np.full(n_lam, -2.0 * geometric_dip - 0.05)
    hi = np.full(n_lam, 0.05)
    frac = np.linspace(0.0, 1.0, rays)
    for _ in range(rounds):
        e = lo[:, None] + (hi - lo)[:, None] * frac[None, :]
        ends = trace_rays(medium, e.ravel(), np.repeat(np.arange(n_lam), rays),
                          step_scale=step_scale)
        ok = (ends.fate == ESCAPED).reshape(n_lam, rays)
        first = np.argmax(ok, axis=1)
        first = np.where(ok.any(axis=1), first, rays - 1)
        hi = e[np.arange(n_lam), first]
        lo = e[np.arange(n_lam), np.maximum(first - 1, 0)]
    ends = trace_rays(medium, hi, np.arange(n_lam), step_scale=step_scale)
    return SeaHorizon(hi, ends.true_altitude_deg, ends.airmass, "search")


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
        """True altitude [deg] seen at apparent elevations [deg] for wavelength k (NaN below the horizon)."""
        e = self.apparent_elevation_deg[k]
        a = np.interp(elevation_deg, e, self.true_altitude_deg[k])
        return np.where(np.asarray(elevation_deg) < e[0], np.nan, a)

    def elevation_of(self, k: int, true_altitude_deg) -> np.ndarray:
        """Lowest apparent elevation [deg] at which wavelength k sees a true altitude (NaN if none)."""
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
    hz = sea_horizon(medium, step_scale=step_scale) if horizon is None else horizon
    n_lam = medium.wavelength_nm.size
    u = np.linspace(0.0, 1.0, rays) ** 2
    e = hz.apparent_elevation_deg[:, None] + (span_arcmin / 60.0) * u[None, :]
    e[:, 0] += 1e-7  # a hair above the grazing ray, which would touch the sea
    ends = trace_rays(medium, e[:, 1:].ravel(), np.repeat(np.arange(n_lam), rays - 1),
                      step_scale=step_scale)
    a = np.empty_like(e)
    m = np.empty_like(e)
    a[:, 0], m[:, 0] = hz.true_altitude_deg, hz.airmass
    a[:, 1:] = ends.true_altitude_deg.reshape(n_lam, rays - 1)
    m[:, 1:] = ends.airmass.reshape(n_lam, rays - 1)
    folded = np.any(np.diff(a, axis=1) <= 0, axis=1)
    return TransferCurve(medium.wavelength_nm, e, a, m, hz, folded)


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
