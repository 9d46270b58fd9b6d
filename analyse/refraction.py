"""Refraction near the sea horizon: the medium, the horizon ray, transfer curves, tables.

An atmosphere is tabulated for the tracer by :func:`make_medium` (``ln n`` of each
wavelength from Ciddor 1996, :mod:`analyse.atmosphere`), over a sea whose radius is the
ellipsoid's along the path (:func:`earth_radius_of_curvature_m`). The rays themselves are
traced by :mod:`analyse._raytrace`; its docstring gives the equations, the steps and the
references.

The sea horizon. Where ``m(z) = n (R + z)`` increases from the sea to the eye, the horizon
ray grazes the sea and is traced from its tangent point (a spherically stratified medium
is symmetric about it); where a duct lies below the eye, the lowest escaping ray is found
by bisection. A transfer curve (true altitude against apparent elevation, per
wavelength) is traced from each row's horizon upwards in the same integration as the
grazing rays' continuation, and several atmospheres sharing a height grid are traced
together (:func:`transfer_curves`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from analyse._raytrace import (
    _STOPPED,
    ESCAPED,
    Medium,
    RayEnds,
    _column,
    _exits,
    _integrate,
    _ln_n_at,
    _Profile,
    trace_rays,
)
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
_SEARCH_TOP_DEG = 5.0  # deg, highest elevation the horizon search tries


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
