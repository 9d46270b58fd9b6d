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
