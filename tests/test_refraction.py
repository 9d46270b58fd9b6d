"""Unit tests of the ray tracer: geometry, invariants, an independent integration, the
sea horizon, several atmospheres at once."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.interpolate import CubicSpline

from analyse._raytrace import ESCAPED, SEA
from analyse.atmosphere import linear_layer_atmosphere, tabulated_atmosphere
from analyse.refraction import (
    EARTH_RADIUS_M,
    Medium,
    earth_radius_of_curvature_m,
    make_medium,
    refraction_table,
    sea_horizon,
    trace_rays,
    transfer_curve,
    transfer_curves,
)

ARCSEC_DEG = 1.0 / 3600.0


def _vacuum(eye_height_m: float) -> Medium:
    z = np.concatenate([[0.0], np.geomspace(0.01, 86000.0, 400)])
    if eye_height_m not in z:
        z = np.sort(np.append(z, eye_height_m))
    zeros = np.zeros((1, z.size))
    return Medium(z, zeros, zeros, np.ones(z.size), 86000.0, np.array([550.0]), np.array([]),
                  EARTH_RADIUS_M, eye_height_m)


def test_vacuum_rays_are_straight():
    medium = _vacuum(10.0)
    geometric_dip_deg = np.degrees(np.arccos(EARTH_RADIUS_M / (EARTH_RADIUS_M + 10.0)))
    e = np.array([-0.2, -geometric_dip_deg - 0.001, -geometric_dip_deg + 0.001, -0.05, 0.0,
                  0.5, 5.0, 30.0, 89.9])
    ends = trace_rays(medium, e, 0)
    below = e < -geometric_dip_deg
    assert np.all(ends.fate[below] == SEA)
    assert np.all(ends.fate[~below] == ESCAPED)
    # n = 1: the direction never changes; true altitude equals apparent elevation (to
    # rounding: 1e-6 arcsec).
    np.testing.assert_allclose(ends.true_altitude_deg[~below], e[~below], atol=1e-6 * ARCSEC_DEG)
    hz = sea_horizon(medium)
    assert hz.dip_arcmin[0] == pytest.approx(60.0 * geometric_dip_deg, rel=1e-9)
    assert hz.refraction_arcmin[0] == pytest.approx(0.0, abs=1e-5 / 60.0)  # 1e-5" rounding


def test_earth_radius_of_curvature_wgs84():
    # WGS 84 (a = 6 378 137 m, 1/f = 298.257223563): meridional radius M and prime-vertical
    # radius N at the equator, a (1 - e^2) = 6 335 439.327 m and a; at the pole both
    # a^2 / b = 6 399 593.626 m (standard geodetic values, from memory; 1 mm).
    assert earth_radius_of_curvature_m(0.0, 0.0) == pytest.approx(6335439.327, abs=1e-3)
    assert earth_radius_of_curvature_m(0.0, 90.0) == pytest.approx(6378137.0, abs=1e-3)
    assert earth_radius_of_curvature_m(90.0, 0.0) == pytest.approx(6399593.626, abs=1e-3)
    assert earth_radius_of_curvature_m(90.0, 90.0) == pytest.approx(6399593.626, abs=1e-3)
    m, n = earth_radius_of_curvature_m(45.0, 0.0), earth_radius_of_curvature_m(45.0, 270.0)
    assert 1.0 / earth_radius_of_curvature_m(45.0, 45.0) == pytest.approx(
        0.5 / m + 0.5 / n, rel=1e-12)  # Euler's theorem


@pytest.mark.parametrize("eye_height_m", [2.0, 10.0, 50.0])
def test_dip_obeys_bouguer(eye_height_m):
    # The grazing ray has c = n(0) R; where it climbs through the eye height
    # sin(zeta) = c / (n(h) (R + h)): the dip follows exactly from the table of n, and
    # the integration must reproduce it (to 0.001").
    medium = make_medium(linear_layer_atmosphere(6.5, eye_height_m=eye_height_m), [550.0])
    r = medium.earth_radius_m
    n0, nh = math.exp(medium.ln_n[0, 0]), float(medium.n_at(eye_height_m, 0))
    expected_arcmin = 60.0 * math.degrees(math.acos(n0 * r / (nh * (r + eye_height_m))))
    assert sea_horizon(medium).dip_arcmin[0] == pytest.approx(expected_arcmin,
                                                             abs=0.001 / 60.0)
    ends = trace_rays(medium, [0.0], [0], start_height_m=0.0, record_height_m=eye_height_m)
    zeta = math.asin(n0 * r / (nh * (r + eye_height_m)))
    assert ends.crossing_zeta_rad[0] == pytest.approx(zeta, abs=0.001 * math.radians(ARCSEC_DEG))


def test_turning_height_and_sea():
    medium = make_medium(linear_layer_atmosphere(6.5, eye_height_m=10.0), [550.0])
    e = sea_horizon(medium).apparent_elevation_deg[0] + 0.01
    ends = trace_rays(medium, [e, -1.0], [0, 0])
    assert list(ends.fate) == [ESCAPED, SEA]
    assert ends.min_height_m[1] <= 0.0
    # The ray turns where m(z) = n (R + z) equals its invariant (to 1 mm).
    c = float(medium.n_at(10.0, 0)) * (medium.earth_radius_m + 10.0) * math.cos(math.radians(e))
    m = medium.modified_index(0)
    below = medium.height_m <= 10.0
    z_turn = np.interp(c, m[below], medium.height_m[below])
    assert ends.min_height_m[0] == pytest.approx(z_turn, abs=1e-3)


def _reference_altitude_deg(medium: Medium, elevation_deg: float) -> float:
    """True altitude of one ray from an independent integration (row 0).

    scipy's DOP853 (rtol 1e-11) on (z, phi, zeta), with d ln n/dz from a cubic spline of
    ln n through the nodes of each layer between kinks, restarted at every kink; the
    exit direction from Bouguer's invariant, as in the tracer.
    """
    z, lnn = medium.height_m, medium.ln_n[0]
    radius, h = medium.earth_radius_m, medium.eye_height_m
    bounds = np.concatenate([[z[0]], [k for k in medium.kinks_m if z[0] < k < z[-1]], [z[-1]]])
    grads = [CubicSpline(z[(z >= a) & (z <= b)], lnn[(z >= a) & (z <= b)]).derivative()
             for a, b in zip(bounds[:-1], bounds[1:])]
    c0 = math.exp(np.interp(h, z, lnn)) * (radius + h) * math.cos(math.radians(elevation_deg))
    y = np.array([h, 0.0, math.radians(90.0 - elevation_deg)])
    j = int(np.searchsorted(bounds, h, side="right")) - 1
    s0 = 0.0
    while True:
        g, lo, hi = grads[j], bounds[j], bounds[j + 1]

        def rhs(s, yy, g=g):
            inv_r = 1.0 / (radius + yy[0])
            return [math.cos(yy[2]), math.sin(yy[2]) * inv_r,
                    -math.sin(yy[2]) * (inv_r + float(g(yy[0])))]

        def below(s, yy, lo=lo):
            return yy[0] - lo

        def above(s, yy, hi=hi):
            return yy[0] - hi

        below.terminal = above.terminal = True
        below.direction, above.direction = -1.0, 1.0
        sol = solve_ivp(rhs, (s0, 4e6), y, method="DOP853", rtol=1e-11, atol=1e-12,
                        events=[below, above])
        y, s0 = sol.y[:, -1].copy(), sol.t[-1]
        if len(sol.t_events[1]):
            if j == len(grads) - 1:
                return 90.0 - math.degrees(math.asin(c0 / (radius + y[0])) + y[1])
            j, y[0] = j + 1, hi
        elif len(sol.t_events[0]) and j > 0:
            j, y[0] = j - 1, lo
        else:
            return math.nan  # the sea, or still inside


@pytest.mark.parametrize("lapse_rate", [-60.0, 6.5])
def test_agrees_with_independent_integration(lapse_rate):
    medium = make_medium(linear_layer_atmosphere(lapse_rate, eye_height_m=10.0), [550.0])
    e = [sea_horizon(medium).apparent_elevation_deg[0] + 0.002, 0.0, 0.3, 2.0]
    ours = trace_rays(medium, e, [0] * 4).true_altitude_deg
    ref = np.array([_reference_altitude_deg(medium, x) for x in e])
    # Measured 0.0012" (the two representations of n between nodes differ by O(dz^2));
    # 0.01" is a fifth of the 0.05" the transfer curves need.
    np.testing.assert_allclose(ours, ref, atol=0.01 * ARCSEC_DEG)


def test_agrees_with_independent_integration_in_a_mirage():
    atm = tabulated_atmosphere(np.array([0.0, 1.0, 100.0]), np.array([291.15, 288.15, 287.5]),
                               eye_height_m=3.0)
    medium = make_medium(atm, [550.0])
    e = sea_horizon(medium).apparent_elevation_deg[0] + np.array([0.003, 0.02, 0.2])
    ours = trace_rays(medium, e, [0] * 3).true_altitude_deg
    ref = np.array([_reference_altitude_deg(medium, x) for x in e])
    # Rays turning inside the hot layer: 0.02" (measured 0.005").
    np.testing.assert_allclose(ours, ref, atol=0.02 * ARCSEC_DEG)


def test_horizon_airmass_joins_the_curve():
    # The horizon ray's light crosses the air between the tangent point and the eye on
    # both sides of the tangent point, like its neighbours: its airmass continues theirs.
    curve = transfer_curve(make_medium(linear_layer_atmosphere(6.5, eye_height_m=10.0),
                                       [550.0]))
    m = curve.airmass[0]
    assert m[0] == pytest.approx(m[1], rel=1e-3)
    assert np.all(np.diff(m) < 0.0)


def test_eye_at_the_sea_horizon_is_the_horizontal_ray():
    medium = make_medium(linear_layer_atmosphere(6.5), [550.0])
    hz = sea_horizon(medium)
    assert hz.method == "tangent ray"
    assert hz.apparent_elevation_deg[0] == 0.0
    assert hz.refraction_arcmin[0] == pytest.approx(refraction_table(medium, [0.0])[0, 0],
                                                    abs=1e-9)


def test_several_atmospheres_at_once():
    lam = [480.0, 600.0]
    media = [make_medium(linear_layer_atmosphere(g, eye_height_m=5.0), lam)
             for g in (-150.0, -30.0, 6.5, 40.0)]
    together = transfer_curves(media, rays=12)
    for medium, curve in zip(media, together):
        alone = transfer_curve(medium, rays=12)
        # Each ray's steps depend on that ray only: the results are identical.
        np.testing.assert_array_equal(curve.true_altitude_deg, alone.true_altitude_deg)
        np.testing.assert_array_equal(curve.airmass, alone.airmass)
        assert curve.horizon.method == alone.horizon.method
    assert [c.horizon.method for c in together] == ["search"] + ["tangent ray"] * 3
    other = make_medium(linear_layer_atmosphere(6.5, layer_top_m=50.0, eye_height_m=5.0), lam)
    with pytest.raises(ValueError, match="share the height grid"):
        transfer_curves([media[0], other])


def test_elevation_of_takes_the_lowest_image_of_a_fold():
    atm = tabulated_atmosphere(np.array([0.0, 1.0, 100.0]), np.array([291.15, 288.15, 287.5]),
                               eye_height_m=3.0)
    curve = transfer_curve(make_medium(atm, [550.0]))
    a, e = curve.true_altitude_deg[0], curve.apparent_elevation_deg[0]
    i = int(np.argmin(a))  # bottom of the fold: images on both sides of it
    target = 0.5 * (a[i] + a[0])
    lowest = curve.elevation_of(0, target)
    assert e[0] <= lowest <= e[i]
    assert curve.true_altitude_at(0, lowest) == pytest.approx(target, abs=1e-9)
