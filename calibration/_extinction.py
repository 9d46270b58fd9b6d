"""The Sun's photon spectrum outside the atmosphere and the atmosphere's extinction.

Private helper of :mod:`calibration.bands`, which re-exports its public names; pure
functions over numpy arrays. :func:`solar_spectrum_relative` approximates the Sun by a
black body at its nominal effective temperature; the vertical optical depth is Rayleigh
scattering (:func:`rayleigh_optical_depth_bodhaine1999`) plus aerosol
(:func:`aerosol_optical_depth_angstrom`), and :func:`transmission` is
``exp(-(tau_R + tau_a) m)`` with ``m`` the relative airmass
(:func:`airmass_kasten_young1989`).

References
----------
Full citations are in each function's References section.
Bodhaine et al. (1999), J. Atmos. Oceanic Technol. 16, 1854, eq. 30: Rayleigh optical depth.
List (1968), Smithsonian Meteorological Tables: gravity, as quoted by Bodhaine et al.
Kasten & Young (1989), Appl. Opt. 28, 4735: relative airmass.
Angstrom (1929), Geogr. Ann. 11, 156: aerosol optical depth.
Prsa et al. (2016), AJ 152, 41 (IAU 2015 Resolution B3): the Sun's effective temperature.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "solar_spectrum_relative", "rayleigh_optical_depth_bodhaine1999",
    "airmass_kasten_young1989", "aerosol_optical_depth_angstrom", "transmission",
]  # fmt: skip

SUN_EFFECTIVE_TEMPERATURE_K = 5772.0  # K; IAU 2015 Resolution B3, nominal T_eff of the Sun
SECOND_RADIATION_CONSTANT_NM_K = 1.438776877e7  # nm K; c2 = hc/k, exact since SI 2019
REFERENCE_WAVELENGTH_NM = 550.0  # nm; where the solar spectrum is normalised to 1
STANDARD_PRESSURE_HPA = 1013.25  # hPa; Bodhaine et al. 1999 standard conditions
STANDARD_LATITUDE_DEG = 45.0  # deg; Bodhaine et al. 1999 standard conditions
RAYLEIGH_VALID_NM = (200.0, 1200.0)  # nm; range where eq. 30 is used here (NaN outside)


def solar_spectrum_relative(wavelength_nm: ArrayLike) -> NDArray[np.float64]:
    """Relative photon flux of the Sun outside the atmosphere (approximation).

    A black body at the Sun's nominal effective temperature, 5772 K, in photon units:
    ``N(lambda) ∝ lambda^-4 / (exp(c2 / (lambda T)) - 1)``, normalised to 1 at 550 nm.
    This is an approximation, not a solar spectrum: the Fraunhofer lines and line
    blanketing are ignored, and the true spectrum departs from it by several per cent
    between 450 and 650 nm and by more below 450 nm (from memory, not checked against a
    tabulated spectrum). Only the spectrum's slope across one band matters here.

    Parameters
    ----------
    wavelength_nm : array_like
        Vacuum wavelength [nm].

    Returns
    -------
    ndarray
        Photon flux per unit wavelength relative to 550 nm [dimensionless], same shape.

    References
    ----------
    Prsa, A. et al. (2016). Nominal values for selected solar and planetary quantities:
    IAU 2015 Resolution B3. AJ 152, 41 (T_eff = 5772 K).
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    ref = REFERENCE_WAVELENGTH_NM
    c2_over_t = SECOND_RADIATION_CONSTANT_NM_K / SUN_EFFECTIVE_TEMPERATURE_K  # nm
    x, x_ref = c2_over_t / lam, c2_over_t / ref
    return (ref / lam) ** 4 * np.expm1(x_ref) / np.expm1(x)


def _gravity_list1968_cm_s2(latitude_deg: ArrayLike, height_m: ArrayLike) -> NDArray[Any]:
    """Gravity at latitude and height, as used by Bodhaine et al. 1999 (after List 1968)."""
    c = np.cos(np.radians(2.0 * np.asarray(latitude_deg, dtype=float)))
    z = np.asarray(height_m, dtype=float)
    g0 = 980.6160 * (1.0 - 0.0026373 * c + 0.0000059 * c**2)
    dg = (3.085462e-4 + 2.27e-7 * c) * z - (7.254e-11 + 1.0e-13 * c) * z**2
    return g0 - dg - (1.517e-17 + 6.0e-20 * c) * z**3


def _mass_weighted_height_m(altitude_m: ArrayLike) -> NDArray[np.float64]:
    """Mass-weighted height of the air column above a site, Bodhaine et al. 1999."""
    return 0.73737 * np.asarray(altitude_m, dtype=float) + 5517.56


def rayleigh_optical_depth_bodhaine1999(
    wavelength_nm: ArrayLike,
    pressure_hPa: ArrayLike = STANDARD_PRESSURE_HPA,
    latitude_deg: ArrayLike = STANDARD_LATITUDE_DEG,
    altitude_m: ArrayLike = 0.0,
) -> NDArray[np.float64]:
    """Vertical Rayleigh optical depth of the atmosphere above a site.

    Eq. 30 of Bodhaine et al. (1999), their fit for 1013.25 hPa, sea level, 45 deg
    latitude and 360 ppm CO2 (lambda in micrometres)::

        tau = 0.0021520 (1.0455996 - 341.29061 l^-2 - 0.90230850 l^2)
                        / (1 + 0.0027059889 l^-2 - 85.968563 l^2)

    scaled to other sites as their ``tau = sigma P A / (m_a g)`` implies: by
    ``P / 1013.25 hPa`` and by ``g_std / g``, with ``g`` the gravity (List 1968, as
    quoted in the paper) at the mass-weighted height of the column,
    ``z_c = 0.73737 z + 5517.56 m``; ``g_std`` is the same at 45 deg and z = 0. The
    mean molecular weight is kept at its 360 ppm CO2 value (100 ppm more CO2 raises tau
    by 7e-5 relative in the paper's full method). The fit agrees with the paper's full
    calculation to 6e-5 over 250-850 nm and 5e-4 at 1000 nm (tests/published); NaN is
    returned outside 200-1200 nm.

    Parameters
    ----------
    wavelength_nm : array_like
        Vacuum wavelength [nm].
    pressure_hPa, latitude_deg, altitude_m : array_like
        Surface pressure [hPa], geodetic latitude [deg], height above sea level [m].

    Returns
    -------
    ndarray
        Optical depth for a vertical path [dimensionless]; inputs broadcast.

    References
    ----------
    Bodhaine, B. A., Wood, N. B., Dutton, E. G., Slusser, J. R. (1999). On Rayleigh
    optical depth calculations. J. Atmos. Oceanic Technol. 16, 1854-1861, eq. 30.
    doi:10.1175/1520-0426(1999)016<1854:ORODC>2.0.CO;2
    List, R. J. (1968). Smithsonian Meteorological Tables, 6th ed. (gravity formula).
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    inside = (lam >= RAYLEIGH_VALID_NM[0]) & (lam <= RAYLEIGH_VALID_NM[1])
    l2 = np.where(inside, lam / 1000.0, 0.55) ** 2  # micrometres squared
    num = 1.0455996 - 341.29061 / l2 - 0.90230850 * l2
    tau = 0.0021520 * num / (1.0 + 0.0027059889 / l2 - 85.968563 * l2)  # eq. 30
    g_std = _gravity_list1968_cm_s2(STANDARD_LATITUDE_DEG, _mass_weighted_height_m(0.0))
    g_site = _gravity_list1968_cm_s2(latitude_deg, _mass_weighted_height_m(altitude_m))
    scaled = tau * np.asarray(pressure_hPa, dtype=float) / STANDARD_PRESSURE_HPA * g_std / g_site
    return np.where(inside, scaled, np.nan)


def airmass_kasten_young1989(apparent_zenith_deg: ArrayLike) -> NDArray[np.float64]:
    """Relative optical airmass from the apparent zenith angle.

    ``m = 1 / (cos z + 0.50572 (96.07995 - z)^-1.6364)``, z in degrees; 1 at the zenith,
    37.92 at z = 90 deg. Valid for 0 <= z <= 90 deg; NaN outside (not clipped).

    Parameters
    ----------
    apparent_zenith_deg : array_like
        Apparent (refracted) zenith angle [deg].

    Returns
    -------
    ndarray
        Airmass relative to the vertical path [dimensionless], same shape.

    References
    ----------
    Kasten, F., Young, A. T. (1989). Revised optical air mass tables and approximation
    formula. Appl. Opt. 28, 4735-4738. doi:10.1364/AO.28.004735
    """
    z = np.asarray(apparent_zenith_deg, dtype=float)
    valid = (z >= 0.0) & (z <= 90.0)
    zs = np.where(valid, z, 0.0)
    m = 1.0 / (np.cos(np.radians(zs)) + 0.50572 * (96.07995 - zs) ** -1.6364)
    return np.where(valid, m, np.nan)


def aerosol_optical_depth_angstrom(
    wavelength_nm: ArrayLike, tau_550: ArrayLike = 0.1, angstrom_alpha: ArrayLike = 1.3
) -> NDArray[np.float64]:
    """Aerosol optical depth by Angstrom's power law, anchored at 550 nm.

    ``tau_a = tau_550 (lambda / 550 nm)^-alpha``. The defaults (0.1, 1.3) are a clear
    continental sky (from memory; Angstrom's own typical alpha is 1.3); a marine
    horizon often has lower alpha and higher tau.

    Parameters
    ----------
    wavelength_nm : array_like
        Wavelength [nm].
    tau_550, angstrom_alpha : array_like
        Vertical aerosol optical depth at 550 nm (>= 0) and Angstrom exponent [1].

    Returns
    -------
    ndarray
        Vertical aerosol optical depth [dimensionless]; inputs broadcast.

    References
    ----------
    Angstrom, A. (1929). On the atmospheric transmission of sun radiation and on dust
    in the air. Geogr. Ann. 11, 156-166.
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    tau = np.asarray(tau_550, dtype=float)
    if np.any(tau < 0):
        raise ValueError(f"tau_550 must be >= 0, got {tau_550}")
    return tau * (lam / REFERENCE_WAVELENGTH_NM) ** -np.asarray(angstrom_alpha, dtype=float)


def _vertical_optical_depth(
    wavelength_nm: ArrayLike, pressure_hPa: float, tau_aerosol_550: float, angstrom_alpha: float
) -> NDArray[np.float64]:
    tau_r = rayleigh_optical_depth_bodhaine1999(wavelength_nm, pressure_hPa)
    return tau_r + aerosol_optical_depth_angstrom(wavelength_nm, tau_aerosol_550, angstrom_alpha)


def transmission(
    wavelength_nm: ArrayLike,
    airmass: ArrayLike,
    *,
    pressure_hPa: float = STANDARD_PRESSURE_HPA,
    tau_aerosol_550: float = 0.1,
    angstrom_alpha: float = 1.3,
) -> NDArray[np.float64]:
    """Direct-beam transmission ``exp(-(tau_R + tau_a) m)``.

    Parameters
    ----------
    wavelength_nm : array_like
        Wavelength [nm].
    airmass : array_like
        Relative airmass of the path, >= 0 [dimensionless]; NaN propagates.
        ``wavelength_nm`` and ``airmass`` broadcast by numpy rules: pass
        ``airmass[..., None]`` with a (K,) wavelength array to get shape (..., K).
    pressure_hPa : float
        Surface pressure for the Rayleigh term [hPa].
    tau_aerosol_550, angstrom_alpha : float
        Aerosol optical depth at 550 nm and Angstrom exponent [dimensionless].

    Returns
    -------
    ndarray
        Transmission, 0..1 [dimensionless].
    """
    m = np.asarray(airmass, dtype=float)
    if np.any(m < 0):
        raise ValueError("airmass must be >= 0 (NaN allowed)")
    tau = _vertical_optical_depth(wavelength_nm, pressure_hPa, tau_aerosol_550, angstrom_alpha)
    return np.exp(-tau * m)
