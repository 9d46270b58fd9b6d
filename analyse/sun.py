"""The Sun's ephemeris at a site: true topocentric altitude, azimuth, rates, semidiameter.

astropy does the astronomy (``get_sun``, i.e. ERFA's ``epv00`` ephemeris with light time
and aberration, transformed to ``AltAz`` with ``pressure = 0`` so that *no* refraction is
applied: this tool traces its own rays, and astropy's refraction model is not valid near
the horizon). It runs offline on the bundled IERS tables (:mod:`analyse._offline`).

Speed. One astropy call costs about 10 ms plus 0.25 ms per time, and a per-time loop
would cost 20 ms each. So the Sun is computed only at nodes of a uniform grid in POSIX
time (spacing ``NODE_SPACING_S``) and interpolated: for every requested time the four
surrounding nodes give a cubic (4-point Lagrange) interpolant of the Sun's topocentric
position vector (north, east, up; in au). Interpolating the vector rather than the angles
keeps azimuth smooth through north and near the zenith. Altitude, azimuth and distance
follow from the interpolated vector; their rates follow analytically from the derivative
of the same cubic, so they are consistent with the positions. Only the nodes next to a
requested time are computed: a sunset recording needs a dozen, a year of daily samples
four per sample. The interpolation error is of order ``(omega h)^4 / 40`` rad for a
spacing ``h`` and the Earth's rotation rate ``omega``: below 0.005 arcsec at 300 s
(measured against direct astropy calls in ``tests/test_sun.py``).

Times are POSIX seconds (UTC, leap seconds not counted), as ``datetime.timestamp()``.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.coordinates import AltAz, EarthLocation, get_sun
from astropy.time import Time

from analyse._offline import configure_astropy_offline, degraded_accuracy_as_notes
from analyse.errors import InputError

__all__ = [
    "SunTrack",
    "sun_track",
    "sunset_time",
    "time_of_altitude",
    "vertical_rate_arcsec_per_s",
]

configure_astropy_offline()

NODE_SPACING_S = 300.0  # s; node spacing of the interpolated ephemeris (see module docstring)
SOLAR_RADIUS_KM = 695700.0  # km; IAU 2015 Resolution B3, nominal solar radius
AU_KM = 149597870.700  # km; IAU 2012 Resolution B2, astronomical unit
SIDEREAL_RATE_ARCSEC_PER_S = 15.04  # arcsec/s; Earth's rotation, 360 deg per 86164.1 s
# Valid range of ERFA's epv00 Earth ephemeris behind get_sun (ERFA documentation: 1900-2100).
_FIRST_UNIX_S = -2208988800.0  # 1900-01-01T00:00:00 UTC
_LAST_UNIX_S = 4102444800.0  # 2100-01-01T00:00:00 UTC
_SEARCH_STEP_S = 300.0  # s; grid on which sunset_time brackets the crossing
_REFINE_POINTS = 301  # points per refinement pass of a bracketed crossing
_NEWTON_MAX_ITER = 12
_NEWTON_TOL_S = 1e-4  # s; Newton steps smaller than this count as converged
_NEWTON_MAX_STEP_S = 3600.0  # s; longest single Newton step (keeps it on its branch)


@dataclass(frozen=True)
class SunTrack:
    """The Sun's centre seen from a site, at N times (all arrays of shape (N,)).

    Attributes
    ----------
    t_unix_s : UTC as POSIX seconds [s]
    altitude_deg : true (airless) topocentric altitude of the centre [deg]
    azimuth_deg : azimuth from north through east, in [0, 360) [deg]
    altitude_rate_deg_per_s : time derivative of the altitude [deg/s]
    azimuth_rate_deg_per_s : time derivative of the azimuth [deg/s]
    semidiameter_arcsec : angular radius from the topocentric distance [arcsec]
    distance_au : topocentric distance of the centre [au]
    """

    t_unix_s: np.ndarray
    altitude_deg: np.ndarray
    azimuth_deg: np.ndarray
    altitude_rate_deg_per_s: np.ndarray
    azimuth_rate_deg_per_s: np.ndarray
    semidiameter_arcsec: np.ndarray
    distance_au: np.ndarray


def _site(latitude_deg: float, longitude_deg: float, height_m: float) -> EarthLocation:
    """Validate a site and return it as an astropy location (WGS84 geodetic)."""
    values = []
    for name, value, low, high in (
        ("latitude_deg", latitude_deg, -90.0, 90.0),
        ("longitude_deg", longitude_deg, -360.0, 360.0),
        ("height_m", height_m, -1000.0, 100000.0),
    ):
        try:
            number = float(value)
        except (TypeError, ValueError):
            number = float("nan")
        if not low <= number <= high:  # also refuses NaN
            raise InputError(f"{name} = {value!r} is not a number within {low:g}..{high:g}")
        values.append(number)
    lat, lon, height = values
    return EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, height * u.m)


def _times(t_unix_s: np.ndarray | float) -> np.ndarray:
    """Validate times: finite POSIX seconds within the ephemeris range, as a 1-D array."""
    t = np.atleast_1d(np.asarray(t_unix_s, dtype=float))
    if t.ndim != 1:
        raise InputError(f"t_unix_s must be one-dimensional, got shape {t.shape}")
    if not np.all(np.isfinite(t)):
        raise InputError("t_unix_s contains values that are not finite numbers")
    if t.size and (t.min() < _FIRST_UNIX_S or t.max() > _LAST_UNIX_S):
        raise InputError(
            "t_unix_s lies outside 1900-2100, the valid range of the solar ephemeris "
            f"(got {t.min():.0f}..{t.max():.0f} POSIX seconds)"
        )
    return t


def _enu_au(node_unix_s: np.ndarray, site: EarthLocation) -> np.ndarray:
    """Topocentric position of the Sun (north, east, up) [au], shape (3, M): one astropy call."""
    with degraded_accuracy_as_notes():
        t = Time(node_unix_s, format="unix", scale="utc")
        frame = AltAz(obstime=t, location=site, pressure=0.0 * u.hPa)
        sky = get_sun(t).transform_to(frame)
        alt = sky.alt.to_value(u.rad)
        az = sky.az.to_value(u.rad)
        dist = sky.distance.to_value(u.au)
    return np.stack(
        [dist * np.cos(alt) * np.cos(az), dist * np.cos(alt) * np.sin(az), dist * np.sin(alt)]
    )


def _lagrange4(s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Weights of 4-point Lagrange interpolation on nodes -1, 0, 1, 2 and of its derivative.

    Parameters
    ----------
    s : (N,) ndarray
        Position between nodes 0 and 1, in node spacings.

    Returns
    -------
    weights, d_weights : (4, N) ndarray
        Value weights and their derivatives with respect to ``s``.
    """
    w = np.stack(
        [-s * (s - 1) * (s - 2) / 6, (s + 1) * (s - 1) * (s - 2) / 2,
         -(s + 1) * s * (s - 2) / 2, (s + 1) * s * (s - 1) / 6]
    )
    dw = np.stack(
        [-(3 * s**2 - 6 * s + 2) / 6, (3 * s**2 - 4 * s - 1) / 2,
         -(3 * s**2 - 2 * s - 2) / 2, (3 * s**2 - 1) / 6]
    )
    return w, dw


def _interpolated_enu(t: np.ndarray, site: EarthLocation) -> tuple[np.ndarray, np.ndarray]:
    """Position (3, N) [au] and velocity (3, N) [au/s] of the Sun from the node interpolant."""
    h = NODE_SPACING_S
    base = np.floor(t / h).astype(np.int64)
    stencil = base[None, :] + np.arange(-1, 3)[:, None]  # (4, N) node indices
    nodes, where = np.unique(stencil, return_inverse=True)
    enu_nodes = _enu_au(nodes * h, site)  # (3, M)
    values = enu_nodes[:, where.reshape(stencil.shape)]  # (3, 4, N)
    w, dw = _lagrange4(t / h - base)
    return np.einsum("kjn,jn->kn", values, w), np.einsum("kjn,jn->kn", values, dw) / h


def sun_track(
    t_unix_s: np.ndarray | float,
    latitude_deg: float,
    longitude_deg: float,
    height_m: float = 0.0,
) -> SunTrack:
    """True topocentric position of the Sun's centre, its rates and semidiameter.

    Parameters
    ----------
    t_unix_s : (N,) array_like or float
        Times, UTC as POSIX seconds [s], within 1900-2100.
    latitude_deg : float
        Geodetic latitude, north positive [deg].
    longitude_deg : float
        Longitude, east positive [deg].
    height_m : float, optional
        Height above the WGS84 ellipsoid [m].

    Returns
    -------
    SunTrack
        Arrays of shape (N,) (a scalar time gives N = 1). Altitudes are airless (no
        refraction); rates are derivatives of the interpolant (module docstring).

    Raises
    ------
    InputError
        For non-finite or out-of-range times or site values.
    """
    site = _site(latitude_deg, longitude_deg, height_m)
    t = _times(t_unix_s)
    if t.size == 0:
        empty = np.empty(0)
        return SunTrack(t, empty, empty, empty, empty, empty, empty)
    (n, e, up), (dn, de, dup) = _interpolated_enu(t, site)
    horiz2 = n**2 + e**2
    horiz = np.sqrt(horiz2)
    dist2 = horiz2 + up**2
    dist = np.sqrt(dist2)
    d_horiz = (n * dn + e * de) / horiz
    alt_rate = (horiz * dup - up * d_horiz) / dist2  # d/dt atan2(up, horiz) [rad/s]
    az_rate = (n * de - e * dn) / horiz2  # d/dt atan2(e, n) [rad/s]
    return SunTrack(
        t_unix_s=t,
        altitude_deg=np.degrees(np.arctan2(up, horiz)),
        azimuth_deg=np.degrees(np.arctan2(e, n)) % 360.0,
        altitude_rate_deg_per_s=np.degrees(alt_rate),
        azimuth_rate_deg_per_s=np.degrees(az_rate),
        semidiameter_arcsec=np.degrees(np.arcsin(SOLAR_RADIUS_KM / (dist * AU_KM))) * 3600.0,
        distance_au=dist,
    )


def time_of_altitude(
    altitude_deg_target: np.ndarray | float,
    t_guess_unix_s: np.ndarray | float,
    latitude_deg: float,
    longitude_deg: float,
    height_m: float = 0.0,
) -> np.ndarray | float:
    """When the Sun's centre reaches a true altitude, by Newton's method from a guess.

    Each iteration is one vectorised :func:`sun_track` call for all elements. The root
    found is the crossing on the same side of culmination as the guess; steps are capped
    at ``_NEWTON_MAX_STEP_S`` so a guess near culmination does not jump to another day.

    Parameters
    ----------
    altitude_deg_target : (N,) array_like or float
        True (airless) altitude of the centre [deg].
    t_guess_unix_s : (N,) array_like or float
        First guesses, UTC as POSIX seconds [s]; broadcast against the targets.
    latitude_deg, longitude_deg, height_m : float
        The site, as in :func:`sun_track` [deg, deg, m].

    Returns
    -------
    float or (N,) ndarray
        UTC as POSIX seconds [s]; NaN where the iteration did not converge (the altitude
        is not reached near the guess, e.g. beyond the day's highest altitude).
    """
    target, guess = np.broadcast_arrays(
        np.asarray(altitude_deg_target, dtype=float), np.asarray(t_guess_unix_s, dtype=float)
    )
    scalar = target.ndim == 0
    t = np.array(guess, dtype=float).ravel()
    target = target.ravel()
    done = np.zeros(t.size, dtype=bool)
    for _ in range(_NEWTON_MAX_ITER):
        todo = ~done
        if not todo.any():
            break
        track = sun_track(t[todo], latitude_deg, longitude_deg, height_m)
        step = (target[todo] - track.altitude_deg) / track.altitude_rate_deg_per_s
        step = np.clip(np.nan_to_num(step, nan=0.0), -_NEWTON_MAX_STEP_S, _NEWTON_MAX_STEP_S)
        t[todo] += step
        done[todo] = np.abs(step) < _NEWTON_TOL_S
    t[~done] = np.nan
    return float(t[0]) if scalar else t.reshape(np.shape(guess))


def _local_mean_midnight_unix_s(date_iso: str, longitude_deg: float) -> float:
    """POSIX time of 00:00 local mean solar time (UTC + longitude/15 h) on a date [s]."""
    try:
        date = dt.date.fromisoformat(date_iso)
    except (TypeError, ValueError):
        raise InputError(f"date {date_iso!r} is not an ISO date like 2026-06-21") from None
    midnight_utc = dt.datetime(date.year, date.month, date.day, tzinfo=dt.timezone.utc)
    lon = (longitude_deg + 180.0) % 360.0 - 180.0  # in [-180, 180)
    return midnight_utc.timestamp() - lon / 15.0 * 3600.0


def _first_descending_crossing(
    t: np.ndarray, altitude_deg: np.ndarray, target_deg: float
) -> tuple[int, float] | None:
    """Index of the first grid step where altitude falls through the target, and the time
    of the crossing by linear interpolation within it; None if there is none."""
    above = altitude_deg >= target_deg
    steps = np.flatnonzero(above[:-1] & ~above[1:])
    if steps.size == 0:
        return None
    i = int(steps[0])
    frac = (altitude_deg[i] - target_deg) / (altitude_deg[i] - altitude_deg[i + 1])
    return i, float(t[i] + frac * (t[i + 1] - t[i]))


def sunset_time(
    date_iso: str,
    latitude_deg: float,
    longitude_deg: float,
    height_m: float = 0.0,
    *,
    altitude_deg: float = -0.8333,
) -> float:
    """When the Sun's centre sets through a true altitude on a local date.

    The evening crossing is searched between the upper and the lower culmination that
    follow 10:00 local mean solar time (UTC + longitude/15 h) on ``date_iso``; so the
    sunset belongs to that date even where it falls after local midnight. The crossing is
    bracketed on a 5-minute grid and refined by two vectorised subdivision passes (no
    iteration), to well under a millisecond.

    Parameters
    ----------
    date_iso : str
        Local date, ``YYYY-MM-DD``.
    latitude_deg, longitude_deg, height_m : float
        The site, as in :func:`sun_track` [deg, deg, m].
    altitude_deg : float, optional
        True altitude of the centre [deg]. The default -0.8333 is the conventional
        almanac sunset (refraction 34' plus semidiameter 16').

    Returns
    -------
    float
        UTC as POSIX seconds [s].

    Raises
    ------
    InputError
        If the Sun does not cross that altitude that day (polar day or polar night).
    """
    start = _local_mean_midnight_unix_s(date_iso, longitude_deg) + 10.0 * 3600.0
    grid = start + np.arange(0.0, 16.0 * 3600.0 + _SEARCH_STEP_S, _SEARCH_STEP_S)
    alt = sun_track(grid, latitude_deg, longitude_deg, height_m).altitude_deg
    top = int(np.argmax(alt))
    bottom = top + int(np.argmin(alt[top:]))
    found = _first_descending_crossing(grid[top : bottom + 1], alt[top : bottom + 1], altitude_deg)
    if found is None:
        state = "above it all day (polar day)" if alt[bottom] > altitude_deg else (
            "below it all day (polar night)")
        raise InputError(
            f"on {date_iso} at latitude {latitude_deg:g} deg the Sun does not set through "
            f"altitude {altitude_deg:g} deg: its centre stays {state}"
        )
    i, t_cross = found
    t_lo, t_hi = grid[top + i], grid[top + i + 1]
    for _ in range(2):  # 300 s -> 1 s -> 3 ms brackets; then linear within the last one
        fine = np.linspace(t_lo, t_hi, _REFINE_POINTS)
        fine_alt = sun_track(fine, latitude_deg, longitude_deg, height_m).altitude_deg
        found = _first_descending_crossing(fine, fine_alt, altitude_deg)
        if found is None:  # cannot happen: the bracket's ends are the same values as before
            break
        j, t_cross = found
        t_lo, t_hi = fine[j], fine[j + 1]
    return t_cross


def vertical_rate_arcsec_per_s(
    latitude_deg: np.ndarray | float,
    declination_deg: np.ndarray | float,
    hour_angle_deg: np.ndarray | float,
    *,
    hour_angle_rate_arcsec_per_s: float = SIDEREAL_RATE_ARCSEC_PER_S,
) -> np.ndarray | float:
    """Rate of descent of a body at the horizon: 15.04"/s cos(lat) cos(dec) sin(H).

    Differentiating ``sin a = sin(lat) sin(dec) + cos(lat) cos(dec) cos(H)`` at fixed
    declination gives ``da/dt = -cos(lat) cos(dec) sin(H) dH/dt / cos(a)``; at the horizon
    ``cos(a) = 1`` and this is the textbook result. Positive while setting (0 < H < 180).

    The default ``dH/dt`` is the sidereal rate, right for a star. The Sun's hour angle
    advances about 0.3 % slower (one turn per solar day, 15.00"/s) and its declination
    drifts by up to 0.4'/h, so for the Sun this is a sanity check to about 0.5 %, not an
    ephemeris: :func:`sun_track` gives the exact rate.

    Parameters
    ----------
    latitude_deg : array_like or float
        Latitude of the site [deg].
    declination_deg : array_like or float
        Declination of the body [deg].
    hour_angle_deg : array_like or float
        Local hour angle, positive west of the meridian [deg].
    hour_angle_rate_arcsec_per_s : float, optional
        Rate of the hour angle [arcsec/s].

    Returns
    -------
    float or ndarray
        Rate of descent [arcsec/s], broadcast over the inputs.

    References
    ----------
    .. [1] W. M. Smart, *Textbook on Spherical Astronomy*, 6th ed., rev. R. M. Green
       (Cambridge University Press, 1977), ch. II, the differential relations of the
       astronomical triangle (from memory).
    """
    phi = np.radians(latitude_deg)
    delta = np.radians(declination_deg)
    hour = np.radians(hour_angle_deg)
    rate = hour_angle_rate_arcsec_per_s * np.cos(phi) * np.cos(delta) * np.sin(hour)
    return float(rate) if np.ndim(rate) == 0 else rate
