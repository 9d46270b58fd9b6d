"""analyse.sun and analyse._offline: interpolation, rates, root finding, offline use."""

from __future__ import annotations

import datetime as dt
import socket
import time
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import AltAz, EarthLocation, get_sun
from astropy.time import Time
from astropy.utils import data, iers
from astropy.utils.exceptions import AstropyWarning

import analyse._offline as offline
import analyse.sun as sun
from analyse._offline import (
    configure_astropy_offline,
    degraded_accuracy_as_notes,
    offline_notes,
)
from analyse.errors import InputError

SITE = (35.2, -20.4, 12.0)  # deg, deg, m: the sample scenario's site


def _unix(iso: str) -> float:
    return dt.datetime.fromisoformat(iso).replace(tzinfo=dt.timezone.utc).timestamp()


def _direct_altaz(t_unix_s, lat, lon, height):
    """Altitude, azimuth [deg] from one direct astropy call per time array (no interpolant)."""
    t = Time(t_unix_s, format="unix", scale="utc")
    site = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, height * u.m)
    sky = get_sun(t).transform_to(AltAz(obstime=t, location=site, pressure=0 * u.hPa))
    return sky.alt.deg, sky.az.deg


@pytest.mark.parametrize("lat", [35.2, 0.0, -60.0, 23.0])
def test_interpolant_matches_direct_astropy(lat):
    t = _unix("2026-01-01T00:00:00") + np.random.default_rng(7).uniform(0, 3e7, 300)
    track = sun.sun_track(t, lat, 10.0, 5.0)
    alt, az = _direct_altaz(t, lat, 10.0, 5.0)
    daz = (track.azimuth_deg - az + 180.0) % 360.0 - 180.0
    # Cubic on 300 s nodes: error ~ (omega h)^4 / 40 rad = 0.001" (module docstring);
    # 0.01" is still 1000x below anything the tool resolves.
    assert np.abs(track.altitude_deg - alt).max() * 3600 < 0.01
    assert np.abs(daz * np.cos(np.radians(alt))).max() * 3600 < 0.01


def test_azimuth_through_north_at_midnight_sun():
    # Latitude 75 N at the June solstice: the Sun crosses north near local midnight.
    t = _unix("2026-06-21T00:00:00") + np.linspace(-3600, 3600, 61)
    track = sun.sun_track(t, 75.0, 0.0)
    alt, az = _direct_altaz(t, 75.0, 0.0, 0.0)
    daz = (track.azimuth_deg - az + 180.0) % 360.0 - 180.0
    assert (track.azimuth_deg > 350).any() and (track.azimuth_deg < 10).any()  # wraps
    assert np.abs(daz).max() * 3600 < 0.01  # as above
    assert (track.azimuth_rate_deg_per_s > 0).all()  # no jump at 360 -> 0
    assert np.all((track.azimuth_deg >= 0) & (track.azimuth_deg < 360))


@pytest.mark.parametrize("date", ["2026-03-20", "2026-06-21"])
def test_rates_match_finite_differences(date):
    t0 = sun.sunset_time(date, *SITE)
    t = t0 + np.linspace(-1800, 1800, 37)
    track = sun.sun_track(t, *SITE)
    plus, minus = sun.sun_track(t + 1.0, *SITE), sun.sun_track(t - 1.0, *SITE)
    fd_alt = (plus.altitude_deg - minus.altitude_deg) / 2.0
    fd_az = (plus.azimuth_deg - minus.azimuth_deg) / 2.0
    # Central differences over +-1 s err by ~ (omega * 1 s)^2 / 6 = 1e-9 relative; the
    # tolerance 1e-6 relative leaves room for the interpolant's cell boundaries.
    np.testing.assert_allclose(track.altitude_rate_deg_per_s, fd_alt, rtol=1e-6)
    np.testing.assert_allclose(track.azimuth_rate_deg_per_s, fd_az, rtol=1e-6)
    assert (track.altitude_rate_deg_per_s < 0).all()  # setting


def test_sunset_time_is_on_the_local_date_and_at_the_altitude():
    t = sun.sunset_time("2026-06-21", *SITE)
    local = dt.datetime.fromtimestamp(t + SITE[1] / 15.0 * 3600.0, tz=dt.timezone.utc)
    assert local.date() == dt.date(2026, 6, 21) and 17 <= local.hour <= 21
    track = sun.sun_track(t, *SITE)
    # One microdegree is 0.3 ms of the Sun's motion at this site: the refinement is finer.
    assert track.altitude_deg[0] == pytest.approx(-0.8333, abs=1e-6)
    assert track.altitude_rate_deg_per_s[0] < 0
    assert 270 < track.azimuth_deg[0] < 310  # north-west at the June solstice


def test_time_of_altitude_agrees_with_sunset_and_is_vectorised():
    targets = np.array([-0.8333, 0.0, 2.0])
    sunsets = np.array([sun.sunset_time("2026-03-20", *SITE, altitude_deg=a) for a in targets])
    found = sun.time_of_altitude(targets, sunsets - 900.0, *SITE)
    assert isinstance(found, np.ndarray) and found.shape == (3,)
    np.testing.assert_allclose(found, sunsets, atol=1e-3)  # two root finders, 1 ms
    single = sun.time_of_altitude(0.0, sunsets[1] + 600.0, *SITE)
    assert isinstance(single, float) and single == pytest.approx(sunsets[1], abs=1e-3)


def test_time_of_altitude_unreachable_is_nan():
    guess = _unix("2026-12-21T12:00:00")
    assert np.isnan(sun.time_of_altitude(80.0, guess, 60.0, 0.0))  # noon Sun at 6.6 deg


def test_one_astropy_call_for_many_times(monkeypatch):
    calls = []
    real_get_sun = sun.get_sun

    def counting_get_sun(t):
        calls.append(t.size)
        return real_get_sun(t)

    monkeypatch.setattr(sun, "get_sun", counting_get_sun)
    t = _unix("2026-06-21T19:00:00") + np.linspace(0, 3600, 10_000)
    sun.sun_track(t[:10], *SITE)  # warm astropy's IERS tables (a one-off ~1 s per process)
    start = time.perf_counter()
    track = sun.sun_track(t, *SITE)
    elapsed = time.perf_counter() - start
    assert calls[-1] <= 20 and len(calls) == 2  # one call, a dozen nodes for an hour
    assert track.altitude_deg.shape == (10_000,)
    assert elapsed < 1.0  # DESIGN.md: well under a second (measured ~25 ms)


def test_empty_and_scalar_times():
    empty = sun.sun_track(np.array([]), *SITE)
    assert empty.altitude_deg.shape == (0,)
    one = sun.sun_track(_unix("2026-06-21T19:00:00"), *SITE)
    assert one.altitude_deg.shape == (1,)


@pytest.mark.parametrize(
    ("args", "message"),
    [
        ((0.0, 95.0, 0.0), "latitude_deg"),
        ((0.0, 10.0, float("nan")), "longitude_deg"),
        ((np.nan, 10.0, 0.0), "not finite"),
        ((_unix("2150-01-01T00:00:00"), 10.0, 0.0), "1900-2100"),
    ],
)
def test_bad_input_raises_input_error(args, message):
    with pytest.raises(InputError, match=message):
        sun.sun_track(*args)


def test_bad_date_raises_input_error():
    with pytest.raises(InputError, match="2026-13-01"):
        sun.sunset_time("2026-13-01", *SITE)


def test_vertical_rate_formula():
    # Equator, declination 0, H = 90 deg: the full sidereal rate; and signs/zeros.
    assert sun.vertical_rate_arcsec_per_s(0.0, 0.0, 90.0) == pytest.approx(15.04)
    assert sun.vertical_rate_arcsec_per_s(60.0, 0.0, 90.0) == pytest.approx(7.52)
    assert sun.vertical_rate_arcsec_per_s(35.0, 20.0, -90.0) < 0  # rising
    rates = sun.vertical_rate_arcsec_per_s(np.array([0.0, 90.0]), 0.0, 90.0)
    np.testing.assert_allclose(rates, [15.04, 0.0], atol=1e-12)


def test_configuration_is_offline_and_idempotent():
    configure_astropy_offline()
    configure_astropy_offline()
    assert iers.conf.auto_download is False
    assert iers.conf.auto_max_age is None
    assert data.conf.allow_internet is False


def _no_network(*args, **kwargs):
    raise AssertionError("analyse.sun tried to use the network")


@pytest.mark.parametrize(
    ("date", "note_word"), [("2028-06-21", "IERS"), ("2045-06-21", "leap-second")]
)
def test_beyond_bundled_tables_offline_without_warnings(monkeypatch, date, note_word):
    monkeypatch.setattr(offline, "_notes", [])  # notes from this test only
    monkeypatch.setattr(socket.socket, "connect", _no_network)
    monkeypatch.setattr(socket, "create_connection", _no_network)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        t = sun.sunset_time(date, *SITE)
        track = sun.sun_track(t + np.linspace(-600, 600, 100), *SITE)
    assert caught == []  # nothing leaks
    assert np.isfinite(track.altitude_deg).all()
    assert any(note_word in note for note in offline_notes())
    assert len(offline_notes()) == len(set(offline_notes()))  # each note once


def test_unknown_warnings_pass_through_known_become_notes(monkeypatch):
    monkeypatch.setattr(offline, "_notes", [])
    with pytest.warns(UserWarning, match="something else"):
        with degraded_accuracy_as_notes():
            warnings.warn("something else", UserWarning)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with degraded_accuracy_as_notes():
            warnings.warn("Tried to get polar motions for times after IERS data is valid.",
                          AstropyWarning)
    assert caught == []
    assert len(offline_notes()) == 1 and "IERS" in offline_notes()[0]
