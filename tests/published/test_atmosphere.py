"""analyse.atmosphere against published values: the 1976 US Standard Atmosphere's table
and NIST's check values for Ciddor's refractive index of air."""

from __future__ import annotations

import numpy as np
import pytest

from analyse.atmosphere import (
    linear_layer_atmosphere,
    refractivity_ciddor1996,
    saturation_vapour_pressure_davis1992,
    ussa1976,
)
from tests.published.references import saturation_vapour_pressure_iapws_if97

# U.S. Standard Atmosphere, 1976 (NOAA-S/T 76-1562), Part 4, Table I, geometric-altitude
# pages 53-61: (geometric height [m], temperature [K], pressure [Pa]) as printed (pressure
# printed in mb to 5 significant figures). Read from a transcription of the table (with its
# page numbers) in a public repository's test data found with the search tool; they agree
# with my memory of the table to 4 figures.
USSA1976_TABLE_I = [
    (0.0, 288.150, 101325.0),
    (1000.0, 281.651, 89876.0),
    (5000.0, 255.676, 54048.0),
    (11000.0, 216.774, 22699.0),
    (20000.0, 216.650, 5529.3),
]


@pytest.mark.parametrize(("height_m", "temperature_K", "pressure_Pa"), USSA1976_TABLE_I)
def test_ussa1976_against_table_i(height_m, temperature_K, pressure_Pa):
    t, p = ussa1976(height_m)
    # USSA 1976 Table I. Temperature within one unit of its last printed digit, 0.001 K
    # (the table rounds: at 5 km the defining equations give 255.6755 K, printed 255.676).
    assert float(t) == pytest.approx(temperature_K, abs=1.0e-3)
    # Pressure: printed to 5 significant figures and apparently truncated (at 10 km the
    # defining equations give 26 499.9 Pa where 2.6499E+4 is printed), so the computed
    # value lies within one unit of the last printed digit, at or above it. That is far
    # inside the 0.1 % asked of the model, and fails with Ciddor's gas constant
    # (8.314510) in place of USSA's (8.31432).
    unit = 10.0 ** (np.floor(np.log10(pressure_Pa)) - 4)
    assert 0.0 <= float(p) - pressure_Pa < unit


def test_ussa1976_layer_base_11km_geopotential():
    # DESIGN.md's table (from USSA 1976, Table 4): 216.65 K and 22 632 Pa at the 11 km
    # geopotential layer base (geometric 11 019.07 m). Tolerance 1 Pa: the table's 22 632
    # is rounded to the pascal (the defining equations give 22 632.06 Pa).
    z_base = 6356766.0 * 11000.0 / (6356766.0 - 11000.0)  # eq. 18 of USSA 1976, inverted
    t, p = ussa1976(z_base)
    assert float(t) == pytest.approx(216.65, abs=1e-6)
    assert float(p) == pytest.approx(22632.0, abs=1.0)


def test_linear_layer_standard_case_is_ussa1976():
    # The contract's atmosphere at GAMMA = 6.5 K/km with the standard surface air must be
    # the 1976 standard atmosphere (USSA 1976 [1]). Compared at the model's own height
    # nodes up to 20 km: the model integrates the hydrostatic equation numerically
    # (trapezoid on a grid of about 1 % of the height), measured to agree to 1e-6; the
    # tolerance, 1e-5 in pressure and 1e-3 K, is 100 times tighter than the 0.1 % asked.
    atm = linear_layer_atmosphere(6.5, temperature_C=15.0, pressure_hPa=1013.25)
    low = atm.height_m <= 20000.0
    t, p = ussa1976(atm.height_m[low])
    np.testing.assert_allclose(atm.temperature_K[low], t, atol=1e-3)
    np.testing.assert_allclose(atm.pressure_Pa[low], p, rtol=1e-5)


# NIST Engineering Metrology Toolbox, "Refractive Index of Air Calculator" documentation
# (J. A. Stone and J. H. Zimmerman), section VII, table of Ciddor-equation values at
# 450 ppm CO2: (temperature [C], relative humidity [%], pressure [kPa], vacuum wavelength
# [nm], n). Read from transcriptions in public repositories found with the search tool
# (several agree digit for digit). The rows at 1700 nm are left out: Ciddor states his
# equation for 300-1690 nm and analyse.atmosphere refuses wavelengths outside that range.
NIST_CIDDOR = [
    (20.0, 0.0, 101.325, 633.0, 1.000271800),
    (20.0, 0.0, 60.0, 633.0, 1.000160924),
    (20.0, 0.0, 120.0, 633.0, 1.000321916),
    (50.0, 0.0, 100.0, 633.0, 1.000243285),
    (5.0, 0.0, 100.0, 633.0, 1.000282756),
    (-40.0, 0.0, 100.0, 633.0, 1.000337580),
    (50.0, 100.0, 120.0, 633.0, 1.000287924),
    (40.0, 75.0, 120.0, 633.0, 1.000299418),
    (20.0, 100.0, 100.0, 633.0, 1.000267394),
    (40.0, 100.0, 110.0, 300.0, 1.000289000),
    (20.0, 0.0, 101.325, 300.0, 1.000286581),
    (-40.0, 0.0, 120.0, 300.0, 1.000427233),
]


@pytest.mark.parametrize(("t_C", "rh_percent", "p_kPa", "wavelength_nm", "n"), NIST_CIDDOR)
def test_ciddor1996_against_nist(t_C, rh_percent, p_kPa, wavelength_nm, n):
    # NIST turns relative humidity into vapour pressure with IAPWS-IF97 (its Appendix
    # A-I); so does this test, to compare like with like (Davis's formula, which the
    # package uses, differs by 0.01 %, i.e. 1e-10 in n at 50 C and 100 %).
    e_Pa = rh_percent / 100.0 * saturation_vapour_pressure_iapws_if97(t_C)
    got = 1.0 + refractivity_ciddor1996(wavelength_nm, t_C + 273.15, p_kPa * 1e3, e_Pa)
    # NIST EMT table: n is printed to 9 decimals, so within half a unit of the last
    # digit, 5e-10 (measured: at most 3e-10). Ciddor's own stated uncertainty is 2e-8.
    assert float(got) == pytest.approx(n, abs=5e-10)


def test_ciddor1996_refuses_wavelengths_outside_its_range():
    # Ciddor 1996 (Appl. Opt. 35, 1566) states the equations for 300-1690 nm.
    with pytest.raises(ValueError, match="wavelength_nm"):
        refractivity_ciddor1996(1700.0, 293.15, 101325.0, 0.0)


def test_davis1992_saturation_pressure_against_iapws_if97():
    # The CIPM-81/91 formula (Davis 1992, Metrologia 29, 67, eq. A1.1) that Ciddor uses,
    # against IAPWS-IF97 (eq. 30, the formula NIST uses) from 0 to 40 C: measured within
    # 6e-5. Tolerance 2e-4: Davis gives the formula's uncertainty as about that (from
    # memory), far below what humidity is known to at a sea-level lens.
    t_C = np.arange(0.0, 41.0, 5.0)
    np.testing.assert_allclose(saturation_vapour_pressure_davis1992(t_C + 273.15),
                               saturation_vapour_pressure_iapws_if97(t_C), rtol=2e-4)
