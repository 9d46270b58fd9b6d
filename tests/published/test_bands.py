"""calibration.bands against published values: Bodhaine et al. 1999, Kasten & Young 1989.

Bodhaine, B. A., Wood, N. B., Dutton, E. G., Slusser, J. R. (1999). On Rayleigh optical
depth calculations. J. Atmos. Oceanic Technol. 16, 1854-1861.
Kasten, F., Young, A. T. (1989). Revised optical air mass tables and approximation
formula. Appl. Opt. 28, 4735-4738.
"""

from __future__ import annotations

import numpy as np
import pytest

from calibration.bands import airmass_kasten_young1989, rayleigh_optical_depth_bodhaine1999


def bodhaine1999_full_method(
    wavelength_nm: np.ndarray,
    pressure_hPa: float = 1013.25,
    latitude_deg: float = 45.0,
    altitude_m: float = 0.0,
    co2_ppm: float = 360.0,
) -> np.ndarray:
    """Bodhaine et al. 1999's first-principles Rayleigh optical depth, tau = sigma P A / (m_a g).

    An independent reference for the module's use of the paper's eq. 30 fit. The pieces,
    as given in the paper (coefficients from memory of the paper; their agreement with
    eq. 30 to ~1e-5 is what confirms both transcriptions): refractivity of air at 300 ppm
    CO2 after Peck & Reeder 1972, scaled for CO2; King factor of air from N2, O2, Ar, CO2
    (Bates 1984); Ns = 2.546899e19 cm^-3 at 288.15 K, 1013.25 mb; mean molecular weight
    15.0556 CO2 + 28.9595 g/mol; gravity after List 1968 at the mass-weighted column
    height z_c = 0.73737 z + 5517.56 m. CGS units throughout, as in the paper.
    """
    lam_um = np.asarray(wavelength_nm, dtype=float) / 1000.0
    w = lam_um**-2
    n300_minus_1 = (8060.51 + 2480990.0 / (132.274 - w) + 17455.7 / (39.32957 - w)) * 1e-8
    co2 = co2_ppm * 1e-6
    n2 = (1.0 + n300_minus_1 * (1.0 + 0.54 * (co2 - 0.0003))) ** 2
    f_n2 = 1.034 + 3.17e-4 * w
    f_o2 = 1.096 + 1.385e-3 * w + 1.448e-4 * w**2
    co2_pct = co2 * 100.0
    f_air = (78.084 * f_n2 + 20.946 * f_o2 + 0.934 * 1.0 + co2_pct * 1.15) / (
        78.084 + 20.946 + 0.934 + co2_pct
    )
    ns = 2.546899e19  # molecules cm^-3
    lam_cm = lam_um * 1e-4
    sigma = 24 * np.pi**3 * (n2 - 1) ** 2 / (lam_cm**4 * ns**2 * (n2 + 2) ** 2) * f_air
    m_a = 15.0556 * co2 + 28.9595  # g mol^-1
    c = np.cos(np.radians(2 * latitude_deg))
    z = 0.73737 * altitude_m + 5517.56
    g0 = 980.6160 * (1 - 0.0026373 * c + 0.0000059 * c**2)
    g = g0 - (3.085462e-4 + 2.27e-7 * c) * z + (7.254e-11 + 1e-13 * c) * z**2
    g -= (1.517e-17 + 6e-20 * c) * z**3
    avogadro = 6.0221367e23
    return sigma * (pressure_hPa * 1000.0) * avogadro / (m_a * g)


def test_rayleigh_550nm_sea_level():
    tau = rayleigh_optical_depth_bodhaine1999(550.0)
    # Bodhaine et al. 1999, standard conditions (1013.25 hPa, sea level, 45 deg, 360 ppm):
    # 0.0971 as quoted in DESIGN.md, which is what the paper's eq. 30 gives (0.09707).
    # The brief recalled 0.0973 from the paper's Table 3; I could not read the table
    # (search returned only the paper's first page), so 0.0971 is used. Tolerance 0.5 %:
    # the value has three figures and the two recollections differ by 0.2 %; a unit slip
    # (um for nm) or a pressure scaling error is orders of magnitude larger.
    assert tau == pytest.approx(0.0971, rel=5e-3)


@pytest.mark.parametrize("wavelength_nm", [250.0, 300.0, 400.0, 450.0, 500.0, 600.0, 700.0, 850.0])
def test_rayleigh_fit_matches_papers_full_method(wavelength_nm):
    fit = rayleigh_optical_depth_bodhaine1999(wavelength_nm)
    full = bodhaine1999_full_method(wavelength_nm)
    # Bodhaine et al. 1999: eq. 30 is their fit to the full calculation for standard
    # conditions; measured agreement here is <= 6e-5 relative over 250-850 nm. Tolerance
    # 2e-4: above the fit's own residual, below any single wrong digit in either formula.
    assert fit == pytest.approx(full, rel=2e-4)


def test_rayleigh_400nm_value():
    # From memory (textbook figure, no document at hand): tau_R(400 nm) is about 0.36 at
    # sea level. Tolerance 1 %: the recollection has two figures.
    assert rayleigh_optical_depth_bodhaine1999(400.0) == pytest.approx(0.36, rel=1e-2)


def test_rayleigh_site_scaling_matches_papers_full_method():
    # Bodhaine et al. 1999, tau = sigma P A / (m_a g): a high equatorial site at reduced
    # pressure. The module scales eq. 30 by P and g; the reference computes it directly.
    # Tolerance 2e-4 as above (the fit's residual; the scaling itself is exact).
    args = dict(pressure_hPa=850.0, latitude_deg=0.0, altitude_m=1500.0)
    fit = rayleigh_optical_depth_bodhaine1999(550.0, **args)
    assert fit == pytest.approx(bodhaine1999_full_method(550.0, **args), rel=2e-4)


def test_kasten_young_zenith():
    # Kasten & Young 1989: airmass 1 at the zenith; the formula gives 0.99971 there, so
    # the tolerance is 1e-3 (the formula's own design accuracy at z = 0).
    assert airmass_kasten_young1989(0.0) == pytest.approx(1.0, abs=1e-3)


def test_kasten_young_horizon():
    # Kasten & Young 1989: 37.920 at apparent zenith angle 90 deg (their table and
    # abstract); tolerance 0.01, the last quoted digit.
    assert airmass_kasten_young1989(90.0) == pytest.approx(37.92, abs=0.01)


def test_kasten_young_plane_parallel_limit():
    # Textbook: away from the horizon the airmass tends to the plane-parallel sec z.
    # At 60 deg the curvature terms are ~0.3 %; tolerance 0.5 % (common practice, no source).
    sec_z = 1.0 / np.cos(np.radians(60.0))
    assert airmass_kasten_young1989(60.0) == pytest.approx(sec_z, rel=5e-3)
