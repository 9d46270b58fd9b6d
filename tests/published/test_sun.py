"""analyse.sun against published values: NREL SPA worked example, almanac figures,
the textbook vertical rate."""

from __future__ import annotations

import datetime as dt

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import EarthLocation, HADec, get_sun
from astropy.time import Time

from analyse.errors import InputError
from analyse.sun import sun_track, sunset_time, vertical_rate_arcsec_per_s
from tests.published.references import (
    refraction_saemundsson1986_arcmin,
    sun_low_precision_almanac,
)

UNIX_EPOCH_JD = 2440587.5  # JD of 1970-01-01T00:00 UTC
J2000_JD = 2451545.0


def _unix(iso: str) -> float:
    return dt.datetime.fromisoformat(iso).replace(tzinfo=dt.timezone.utc).timestamp()


def _days_since_j2000(t_unix_s: np.ndarray | float) -> np.ndarray | float:
    return np.asarray(t_unix_s) / 86400.0 + UNIX_EPOCH_JD - J2000_JD


# NREL SPA worked example (Reda & Andreas 2004, Solar Energy 76, 577, Table A4.1;
# NREL/TP-560-34302): 2003-10-17 12:30:30 at UTC-7, i.e. 19:30:30 UTC.
SPA_UNIX_S = _unix("2003-10-17T19:30:30")
SPA_SITE = (39.742476, -105.1786, 1830.14)  # deg, deg, m
SPA_PRESSURE_HPA = 820.0
SPA_TEMPERATURE_C = 11.0
SPA_ZENITH_DEG = 50.11162  # topocentric zenith angle, includes SPA's refraction (eq. 42)
SPA_AZIMUTH_DEG = 194.34024  # topocentric azimuth, eastward from north


def _spa_apparent(t_unix_s: float) -> tuple[float, float]:
    """Our zenith angle with SPA's own refraction added, and our azimuth [deg]."""
    track = sun_track(t_unix_s, *SPA_SITE)
    alt = float(track.altitude_deg[0])
    refraction_deg = (
        refraction_saemundsson1986_arcmin(alt, SPA_PRESSURE_HPA, SPA_TEMPERATURE_C) / 60.0
    )
    return 90.0 - alt - refraction_deg, float(track.azimuth_deg[0])


def test_spa_worked_example():
    zenith, azimuth = _spa_apparent(SPA_UNIX_S)
    # Reda & Andreas 2004 (NREL SPA), worked example. Tolerance 0.005 deg (18"): the SPA
    # example assumes delta_t = TT - UT1 = 67 s and UT1 = UTC (delta_ut1 = 0), while astropy
    # uses the IERS values, UT1 - UTC = -0.36 s and so TT - UT1 = 64.5 s. The 2.5 s in
    # delta_t moves the Sun along the ecliptic by 2.5 s x 0.041"/s = 0.1" (negligible);
    # the 0.36 s in UT1 turns the sky by 0.36 s x 15.04"/s = 5.5", about 0.0015 deg, the
    # largest term, and still well inside 0.005 deg.
    assert zenith == pytest.approx(SPA_ZENITH_DEG, abs=0.005)
    assert azimuth == pytest.approx(SPA_AZIMUTH_DEG, abs=0.005)


def test_spa_worked_example_with_its_ut1():
    # The explanation above, checked: evaluate at the UTC where UT1 equals the example's
    # clock (UTC - (UT1 - UTC)); the residual should drop to SPA's own stated uncertainty.
    dut1_s = float(Time(SPA_UNIX_S, format="unix", scale="utc").delta_ut1_utc)
    assert -0.5 < dut1_s < -0.2  # IERS EOP for 2003-10-17, as bundled with astropy
    zenith, azimuth = _spa_apparent(SPA_UNIX_S - dut1_s)
    # Reda & Andreas 2004 state an uncertainty of +-0.0003 deg for SPA; 0.0005 deg leaves
    # room for the 0.1" delta_t difference and the ERFA/SPA model differences.
    assert zenith == pytest.approx(SPA_ZENITH_DEG, abs=0.0005)
    assert azimuth == pytest.approx(SPA_AZIMUTH_DEG, abs=0.0005)


def _year_of_noons() -> np.ndarray:
    return _unix("2025-01-01T12:00:00") + 86400.0 * np.arange(365)


def test_semidiameter_almanac_range_and_dates():
    track = sun_track(_year_of_noons(), 0.0, 0.0)
    sd_arcmin = track.semidiameter_arcsec / 60.0
    # Astronomical almanacs tabulate the Sun's SD from about 16.3' at perihelion (early
    # January) to 15.7' at aphelion (early July) (from memory). Bounds +-0.03' around
    # 16.27' and 15.73' (the almanac SD 0.2666 deg/R with R = 0.9833 and 1.0167 au).
    assert 16.24 < sd_arcmin.max() < 16.30
    assert 15.70 < sd_arcmin.min() < 15.76
    # Perihelion falls on 2-5 January, aphelion on 3-7 July (from memory).
    assert 1 <= int(np.argmax(sd_arcmin)) <= 4  # day index 0 = 1 January
    assert 182 <= int(np.argmin(sd_arcmin)) <= 187  # 2 July .. 7 July


def test_semidiameter_and_distance_against_almanac_formulas():
    t = _year_of_noons()
    track = sun_track(t, 0.0, 0.0)
    almanac = sun_low_precision_almanac(_days_since_j2000(t))
    # Astronomical Almanac low-precision formulas: R good to about 1e-4 au; our distance
    # is topocentric, up to one Earth radius (4.3e-5 au) off the geocentric one.
    np.testing.assert_allclose(track.distance_au, almanac.distance_au, atol=2e-4)
    # SD = 0.2666 deg / R (almanac). Tolerance 1": the almanac's 0.2666 deg implies a solar
    # radius 0.05 % above the IAU 2015 nominal 695700 km that we use (0.5"), plus 0.1" from R.
    np.testing.assert_allclose(
        track.semidiameter_arcsec, 60.0 * almanac.semidiameter_arcmin, atol=1.0
    )


@pytest.mark.parametrize("date", ["2025-03-20", "2025-06-21", "2025-09-22", "2025-12-21"])
def test_equator_sunset_follows_equation_of_time(date):
    # At latitude 0 the true horizon is reached at hour angle exactly 90 deg whatever the
    # declination (cos H = -tan(lat) tan(dec) = 0), i.e. at 18:00 apparent solar time,
    # which is 18:00 - EoT local mean time. Longitude 0, so local mean time = UTC.
    t = sunset_time(date, 0.0, 0.0, altitude_deg=0.0)
    lmt_min = (t - _unix(f"{date}T00:00:00")) / 60.0
    eot_min = float(sun_low_precision_almanac(_days_since_j2000(t)).equation_of_time_min)
    # EoT from the Astronomical Almanac low-precision formulas, good to about 1' in RA,
    # i.e. 4 s of time; the Sun's parallax delays the topocentric setting by another
    # 0.6 s. Tolerance 0.1 min = 6 s.
    assert lmt_min == pytest.approx(18 * 60 - eot_min, abs=0.1)


def test_equinox_sunset_near_six_pm_at_equator():
    t = sunset_time("2025-03-20", 0.0, 0.0)  # default: centre 0.8333 deg below the horizon
    lmt_min = (t - _unix("2025-03-20T00:00:00")) / 60.0
    # The equation of time stays within -14.2 .. +16.4 min over the year (from memory);
    # the almanac sunset altitude -0.8333 deg adds 0.8333 deg / (15"/s) = 200 s = 3.3 min
    # at an equinox on the equator, where the Sun sets vertically.
    assert abs(lmt_min - 18 * 60) < 16.5 + 3.4
    # And it is the March value, about -7.4 min (from memory), that shifts it: 18:10.7.
    assert lmt_min == pytest.approx(18 * 60 + 7.4 + 3.33, abs=0.5)


def test_polar_night_and_day_refused():
    with pytest.raises(InputError, match=r"2026-12-21.*latitude 80.*polar night"):
        sunset_time("2026-12-21", 80.0, 15.0)
    with pytest.raises(InputError, match=r"2026-06-21.*latitude 80.*polar day"):
        sunset_time("2026-06-21", 80.0, 15.0)


@pytest.mark.parametrize("date", ["2026-03-20", "2026-06-21", "2026-12-21"])
def test_altitude_rate_at_sunset_matches_textbook_formula(date):
    lat, lon, height = 35.2, -20.4, 12.0
    t = sunset_time(date, lat, lon, height)
    track = sun_track(t, lat, lon, height)
    # Declination and hour angle of the Sun from astropy directly (topocentric, airless).
    time = Time(t, format="unix", scale="utc")
    site = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, height * u.m)
    hadec = get_sun(time).transform_to(HADec(obstime=time, location=site, pressure=0 * u.hPa))
    expected = vertical_rate_arcsec_per_s(lat, hadec.dec.deg, hadec.ha.deg)
    # Smart 1977 (Textbook on Spherical Astronomy): 15.04"/s cos(lat) cos(dec) sin(H) at the
    # horizon. Tolerance 1 %: the formula's 15.04"/s is the sidereal rate, while the Sun's
    # hour angle runs 0.3 % slower; its declination drift adds < 0.1 %.
    assert -track.altitude_rate_deg_per_s[0] * 3600.0 == pytest.approx(expected, rel=0.01)
