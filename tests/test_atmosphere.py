"""Unit tests of analyse.atmosphere: the contract's linear layer, tabulated profiles, the
height grid and the guards."""

from __future__ import annotations

import numpy as np
import pytest

from analyse.atmosphere import (
    linear_layer_atmosphere,
    saturation_vapour_pressure_davis1992,
    tabulated_atmosphere,
    ussa1976,
)


@pytest.mark.parametrize("eye_height_m", [0.0, 10.0, 150.0])
def test_linear_layer_meets_the_contract(eye_height_m):
    atm = linear_layer_atmosphere(-40.0, layer_top_m=100.0, eye_height_m=eye_height_m,
                                  temperature_C=12.0, pressure_hPa=1005.0,
                                  relative_humidity=0.6)
    z, t = atm.height_m, atm.temperature_K
    assert eye_height_m in z and 100.0 in z  # the eye and the layer top are nodes
    assert np.interp(eye_height_m, z, t) == pytest.approx(285.15, abs=1e-9)
    assert np.interp(eye_height_m, z, atm.pressure_Pa) == pytest.approx(100500.0, rel=1e-12)
    # GAMMA = -dT/dz = -40 K/km inside the layer: 4 K warmer at its top than at the sea.
    assert t[z == 100.0][0] - t[0] == pytest.approx(4.0, abs=1e-9)
    # Above it the standard atmosphere's gradients, from the layer-top temperature.
    t_std, _ = ussa1976(np.array([100.0, 5000.0]))
    assert np.interp(5000.0, z, t) - t[z == 100.0][0] == pytest.approx(t_std[1] - t_std[0],
                                                                       abs=1e-6)
    # Vapour pressure: the lens's relative humidity, never above saturation.
    e_sat = saturation_vapour_pressure_davis1992(t)
    assert np.interp(eye_height_m, z, atm.vapour_pressure_Pa) == pytest.approx(
        0.6 * saturation_vapour_pressure_davis1992(285.15), rel=1e-9)
    assert np.all(atm.vapour_pressure_Pa <= e_sat * (1 + 1e-12))
    assert np.all(np.diff(atm.pressure_Pa) < 0.0)


def test_hydrostatic_balance():
    atm = linear_layer_atmosphere(6.5, relative_humidity=0.0)
    z, t, p = atm.height_m, atm.temperature_K, atm.pressure_Pa
    # dp/dz = -p g M / (R T): the central-difference slope against the formula, 1e-4.
    g = 9.80665 * (6356766.0 / (6356766.0 + z)) ** 2
    slope = np.gradient(np.log(p), z)
    inner = slice(10, -10)
    np.testing.assert_allclose(slope[inner], (-g * 0.0289644 / (8.31432 * t))[inner],
                               rtol=1e-3)


def test_tabulated_profile_nodes_are_kinks():
    heights = np.array([0.0, 0.5, 2.0, 30.0])
    temps = np.array([293.0, 290.0, 289.0, 288.8])
    atm = tabulated_atmosphere(heights, temps, eye_height_m=3.0, pressure_hPa=1010.0)
    assert set(heights[1:]) <= set(atm.kinks_m)
    assert set(heights) <= set(atm.height_m)
    np.testing.assert_allclose(atm.temperature_at(heights), temps, atol=1e-9)
    assert atm.temperature_at(1.25) == pytest.approx(289.5)


@pytest.mark.parametrize(("kwargs", "name"), [
    ({"eye_height_m": -1.0}, "eye_height_m"),
    ({"temperature_C": 75.0}, "temperature_C"),
    ({"pressure_hPa": 200.0}, "pressure_hPa"),
    ({"relative_humidity": 1.2}, "relative_humidity"),
    ({"layer_top_m": 0.0}, "layer_top_m"),
])
def test_guards_name_the_argument(kwargs, name):
    with pytest.raises(ValueError, match=name):
        linear_layer_atmosphere(6.5, **kwargs)


def test_tabulated_guards():
    with pytest.raises(ValueError, match="start at 0"):
        tabulated_atmosphere(np.array([1.0, 2.0]), np.array([288.0, 287.0]))
    with pytest.raises(ValueError, match="150..350 K"):
        tabulated_atmosphere(np.array([0.0, 2.0]), np.array([288.0, 400.0]))
