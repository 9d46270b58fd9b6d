"""Published reference formulas, written out independently of the package, for the tests.

A plain module: one function per published formula, named author+year, each with its
source. Tests compare the package against these (and against published worked values).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "LowPrecisionSun",
    "refraction_saemundsson1986_arcmin",
    "sun_low_precision_almanac",
]

# Conditions at which Saemundsson's coefficients hold (Meeus 1998, ch. 16): 1010 hPa, 10 C.
_SAEMUNDSSON_P_HPA = 1010.0
_SAEMUNDSSON_T_K = 283.0


def refraction_saemundsson1986_arcmin(
    true_alt_deg: np.ndarray | float,
    pressure_hPa: np.ndarray | float = 1010.0,
    temperature_C: np.ndarray | float = 10.0,
) -> np.ndarray | float:
    """Atmospheric refraction from the true (airless) altitude, Saemundsson's formula.

    ``R = 1.02 / tan(h + 10.3 / (h + 5.11))`` arcmin (h in degrees) at 1010 hPa and 10 C,
    scaled by ``(P / 1010) (283 / (273 + T))``: exactly eq. 42 of the NREL SPA [2]_, which
    adds it to the true elevation to give the apparent one.

    Parameters
    ----------
    true_alt_deg : array_like or float
        True altitude of the body [deg]; valid from about -1 deg (a body on the apparent
        horizon) to 90 deg. NaN below -1 deg.
    pressure_hPa : array_like or float, optional
        Air pressure at the observer [hPa].
    temperature_C : array_like or float, optional
        Air temperature at the observer [C].

    Returns
    -------
    float or ndarray
        Refraction, apparent minus true altitude [arcmin].

    References
    ----------
    .. [1] T. Saemundsson, "Atmospheric refraction", Sky and Telescope 72, 70 (1986); as
       given in J. Meeus, *Astronomical Algorithms*, 2nd ed. (Willmann-Bell, 1998), eq. 16.4.
    .. [2] I. Reda and A. Andreas, "Solar position algorithm for solar radiation
       applications", Solar Energy 76, 577-589 (2004); NREL/TP-560-34302, eq. 42.
    """
    h = np.asarray(true_alt_deg, dtype=float)
    cot = 1.0 / np.tan(np.radians(h + 10.3 / (h + 5.11)))
    scale = (np.asarray(pressure_hPa) / _SAEMUNDSSON_P_HPA) * (
        _SAEMUNDSSON_T_K / (273.0 + np.asarray(temperature_C))
    )
    r = np.where(h >= -1.0, 1.02 * cot * scale, np.nan)
    return float(r) if r.ndim == 0 else r


class LowPrecisionSun(NamedTuple):
    """Geocentric apparent Sun from the almanac's low-precision formulas."""

    declination_deg: np.ndarray
    equation_of_time_min: np.ndarray  # apparent minus mean solar time
    distance_au: np.ndarray
    semidiameter_arcmin: np.ndarray


def sun_low_precision_almanac(days_since_j2000: np.ndarray | float) -> LowPrecisionSun:
    """The Sun's declination, equation of time, distance and semidiameter, low precision.

    With ``D = JD(UT) - 2451545.0``: mean anomaly ``g = 357.529 + 0.98560028 D``, mean
    longitude ``q = 280.459 + 0.98564736 D``, apparent longitude
    ``L = q + 1.915 sin g + 0.020 sin 2g``, obliquity ``e = 23.439 - 0.00000036 D``;
    ``RA = atan2(cos e sin L, cos L)``, ``dec = asin(sin e sin L)``, equation of time
    ``q - RA`` (deg, times 4 for minutes), ``R = 1.00014 - 0.01671 cos g - 0.00014 cos 2g``
    au and semidiameter ``0.2666 deg / R``.

    Precision: about 1 arcmin in RA and Dec within two centuries of 2000, hence about
    4 s in the equation of time, and about 1e-4 au in R (stated by the USNO; from memory).

    Parameters
    ----------
    days_since_j2000 : array_like or float
        Julian date (UT) minus 2451545.0 [day].

    Returns
    -------
    LowPrecisionSun
        Declination [deg], equation of time [min], distance [au], semidiameter [arcmin].

    References
    ----------
    .. [1] The Astronomical Almanac, Section C, "Low-precision formulas for the Sun";
       also the U.S. Naval Observatory's "Approximate Solar Coordinates" (from memory;
       the coefficients checked against a copy posted to the NavList forum by A. Ruiz,
       2003-08-21).
    """
    d = np.asarray(days_since_j2000, dtype=float)
    g = np.radians(357.529 + 0.98560028 * d)
    q = 280.459 + 0.98564736 * d
    lam = np.radians(q + 1.915 * np.sin(g) + 0.020 * np.sin(2.0 * g))
    eps = np.radians(23.439 - 0.00000036 * d)
    ra_deg = np.degrees(np.arctan2(np.cos(eps) * np.sin(lam), np.cos(lam)))
    dec_deg = np.degrees(np.arcsin(np.sin(eps) * np.sin(lam)))
    eot_deg = (q - ra_deg + 180.0) % 360.0 - 180.0
    r_au = 1.00014 - 0.01671 * np.cos(g) - 0.00014 * np.cos(2.0 * g)
    return LowPrecisionSun(dec_deg, 4.0 * eot_deg, r_au, 60.0 * 0.2666 / r_au)


# --- refraction, dip and the refractive index of air (appended for test_refraction.py
# --- and test_atmosphere.py) ------------------------------------------------------------

__all__ += [
    "dip_almanac_arcmin",
    "refraction_bennett1982_arcmin",
    "refraction_bennett1982_meeus_arcmin",
    "saturation_vapour_pressure_iapws_if97",
]

# Conditions of Bennett's formula (Bennett 1982): 1010 hPa, 10 C.
_BENNETT_P_HPA = 1010.0
_BENNETT_T_K = 283.0
_ALMANAC_DIP_ARCMIN_PER_SQRT_M = 1.76  # arcmin / sqrt(m), nautical almanacs' dip formula


def refraction_bennett1982_arcmin(
    apparent_alt_deg: np.ndarray | float,
    pressure_hPa: np.ndarray | float = 1010.0,
    temperature_C: np.ndarray | float = 10.0,
) -> np.ndarray:
    """Astronomical refraction from the apparent altitude, Bennett's formula.

    ``R = cot(h + 7.31 / (h + 4.4))`` arcmin (h in degrees) at 1010 hPa and 10 C, scaled by
    ``(P / 1010) (283 / (273 + T))``; stated accuracy 0.07 arcmin from 0 to 90 deg.

    Parameters
    ----------
    apparent_alt_deg : array_like
        Apparent (observed) altitude [deg], valid 0 to 90.
    pressure_hPa, temperature_C : array_like
        Air at the observer [hPa], [C].

    Returns
    -------
    ndarray
        Refraction, apparent minus true altitude [arcmin].

    References
    ----------
    .. [1] G. G. Bennett, "The calculation of astronomical refraction in marine
       navigation", J. Navigation 35, 255-259 (1982); as given in J. Meeus, *Astronomical
       Algorithms*, 2nd ed. (Willmann-Bell, 1998), eq. 16.3 (from memory).
    """
    h = np.asarray(apparent_alt_deg, dtype=float)
    r = 1.0 / np.tan(np.radians(h + 7.31 / (h + 4.4)))
    scale = (np.asarray(pressure_hPa) / _BENNETT_P_HPA) * (
        _BENNETT_T_K / (273.0 + np.asarray(temperature_C)))
    return r * scale


def refraction_bennett1982_meeus_arcmin(apparent_alt_deg: np.ndarray | float) -> np.ndarray:
    """Bennett's formula with Meeus's correction, at 1010 hPa and 10 C.

    ``R' = R - 0.06 sin(14.7 R + 13)`` with ``R`` from :func:`refraction_bennett1982_arcmin`
    in arcmin and the sine's argument in degrees; Meeus states it brings the formula to
    about 0.015 arcmin of the tables it was fitted to.

    References
    ----------
    .. [1] J. Meeus, *Astronomical Algorithms*, 2nd ed. (Willmann-Bell, 1998), ch. 16
       (from memory).
    """
    r = refraction_bennett1982_arcmin(apparent_alt_deg)
    return r - 0.06 * np.sin(np.radians(14.7 * r + 13.0))


def dip_almanac_arcmin(eye_height_m: np.ndarray | float) -> np.ndarray:
    """Dip of the sea horizon as the nautical almanacs give it, ``1.76' sqrt(h)``.

    It assumes a fixed terrestrial refraction coefficient (about 0.165 of the geometric
    dip's ``1.93' sqrt(h)`` curvature term).

    References
    ----------
    .. [1] The Nautical Almanac, "Dip" table and its formula D = 1.76' sqrt(h), h in
       metres (from memory).
    """
    return _ALMANAC_DIP_ARCMIN_PER_SQRT_M * np.sqrt(np.asarray(eye_height_m, dtype=float))


# IAPWS-IF97 saturation-pressure equation coefficients n1..n10, as listed in the NIST
# Engineering Metrology Toolbox's refractive-index documentation, Appendix A-I.
_IF97_N = (1167.05214528, -724213.167032, -17.0738469401, 12020.8247025, -3232555.03223,
           14.9151086135, -4823.26573616, 405113.405421, -0.238555575678, 650.175348448)


def saturation_vapour_pressure_iapws_if97(temperature_C: np.ndarray | float) -> np.ndarray:
    """Saturation vapour pressure over liquid water [Pa], IAPWS-IF97 (0 to 100 C here).

    The formula the NIST refractive-index calculator uses to turn relative humidity into
    a partial pressure (above 0 C), so that its check values can be reproduced.

    References
    ----------
    .. [1] J. A. Stone and J. H. Zimmerman, "Index of refraction of air", NIST
       Engineering Metrology Toolbox, https://emtoolbox.nist.gov/Wavelength/Documentation.asp,
       Appendix A-I (coefficients checked against a transcription in a public repository).
    .. [2] IAPWS, "Revised Release on the IAPWS Industrial Formulation 1997 for the
       Thermodynamic Properties of Water and Steam" (2007), eq. 30.
    """
    n = _IF97_N
    t = np.asarray(temperature_C, dtype=float) + 273.15
    omega = t + n[8] / (t - n[9])
    a = omega**2 + n[0] * omega + n[1]
    b = n[2] * omega**2 + n[3] * omega + n[4]
    c = n[5] * omega**2 + n[6] * omega + n[7]
    x = -b + np.sqrt(b**2 - 4.0 * a * c)
    return 1e6 * (2.0 * c / x) ** 4
