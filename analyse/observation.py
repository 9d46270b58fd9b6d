"""Read ``observation.toml`` into an :class:`Observation`, validating every key.

The file has four tables (FOLDER-FORMAT.md). Every key is checked for its type and
range and unknown tables and keys are refused; each failure is an
:class:`~analyse.errors.InputError` whose one-line message names the file, the
``[table] key`` and the problem. Accepted keys:

- ``[site]``: required ``latitude_deg`` -90..90 (north positive), ``longitude_deg``
  -180..360 (east positive; stored within -180..180) and ``eye_height_m`` >= 0 and
  < 10000 (above the sea surface); optional ``horizon`` "sea" (default) or "terrain";
  ``horizon_altitude_deg`` -5..10, required with "terrain" and refused with "sea";
  ``name``: optional free text naming the site, e.g. "Cape Ardent lookout", shown
  in reports (an addition to FOLDER-FORMAT.md).
- ``[air]`` (at the lens): ``temperature_C`` -80..60; ``pressure_hPa`` 300..1100;
  ``relative_humidity`` 0..1.
- ``[camera]``: ``plate_scale_arcsec_per_px`` > 0; ``calibration``: a path relative
  to the TOML file's folder that must exist; ``video_start_utc``: ISO 8601 string (or
  TOML date-time) with ``Z`` or a UTC offset; ``clock_utc_offset_h`` -14..14;
  ``clock_uncertainty_s`` >= 0 (default 1.0); ``azimuth_deg`` 0..360 (from north
  through east; 360 is stored as 0).
- ``[model]``: ``layer_top_m`` > 0 and <= 2000 (default 100.0).

Numbers may be TOML integers or floats; booleans, strings, NaN and infinities are
refused. ``[site]`` is always required; ``read_observation``'s ``require`` names the
other tables that must appear (an empty table is enough: all their keys are optional).

Missing ``[air]`` values are filled by :meth:`Observation.air_at_lens`: temperature
and pressure from the 1976 US Standard Atmosphere at the eye height, relative
humidity 0.7 (typical of air over the sea; common practice, no source).
"""

from __future__ import annotations

import calendar
import difflib
import json
import math
import re
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from datetime import date, datetime, time, timedelta, timezone
from decimal import ROUND_FLOOR, ROUND_HALF_EVEN, Decimal
from fractions import Fraction
from pathlib import Path
from typing import Any

from analyse.errors import InputError

__all__ = [
    "Air",
    "Camera",
    "Model",
    "Observation",
    "Site",
    "format_utc",
    "parse_utc",
    "read_observation",
    "standard_atmosphere_1976",
]

# 1976 US Standard Atmosphere, lowest layer (0-11 km geopotential): U.S. Standard
# Atmosphere, 1976 (NOAA/NASA/USAF).
T0_K = 288.15  # sea-level temperature [K]; USSA 1976
P0_PA = 101325.0  # sea-level pressure [Pa]; USSA 1976
LAPSE_RATE_K_PER_M = 0.0065  # -dT/dH in the troposphere [K/m']; USSA 1976
PRESSURE_EXPONENT = 5.25588  # g0 M0 / (R* L) [1]; USSA 1976 (9.80665*0.0289644/(8.31432*0.0065))
EARTH_RADIUS_USSA_M = 6356766.0  # r0 for geometric -> geopotential height [m]; USSA 1976
KELVIN_OFFSET = 273.15  # 0 deg C in K [K]; SI definition

DEFAULT_RELATIVE_HUMIDITY = 0.7  # at the lens over the sea [1]; common practice, no source
DEFAULT_CLOCK_UNCERTAINTY_S = 1.0  # [s]; FOLDER-FORMAT.md
DEFAULT_LAYER_TOP_M = 100.0  # [m]; FOLDER-FORMAT.md

TABLES = ("site", "air", "camera", "model")
KNOWN_KEYS: dict[str, tuple[str, ...]] = {
    "site": ("latitude_deg", "longitude_deg", "eye_height_m", "horizon",
             "horizon_altitude_deg", "name"),
    "air": ("temperature_C", "pressure_hPa", "relative_humidity"),
    "camera": ("plate_scale_arcsec_per_px", "calibration", "video_start_utc",
               "clock_utc_offset_h", "clock_uncertainty_s", "azimuth_deg"),
    "model": ("layer_top_m",),
}
HORIZONS = ("sea", "terrain")

_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
_UTC_EXAMPLE = "2026-06-21T03:55:10.250Z"
_ISO_RE = re.compile(
    r"(?P<date>\d{4}-\d{2}-\d{2})[Tt ](?P<hour>\d{2}):(?P<minute>\d{2}):(?P<second>\d{2})"
    r"(?:[.,](?P<frac>\d+))?(?P<tz>[Zz]|[+-]\d{2}(?::?\d{2})?)?"
)


@dataclass(frozen=True)
class Site:
    """Where the observer stood. Angles in degrees, east and north positive."""

    latitude_deg: float
    longitude_deg: float
    eye_height_m: float
    horizon: str = "sea"
    horizon_altitude_deg: float | None = None
    name: str | None = None


@dataclass(frozen=True)
class Air:
    """Air at the lens; None where the file gives no value."""

    temperature_C: float | None = None
    pressure_hPa: float | None = None
    relative_humidity: float | None = None


@dataclass(frozen=True)
class Camera:
    """Camera facts; None where the file gives no value. Times in POSIX seconds (UTC)."""

    plate_scale_arcsec_per_px: float | None = None
    calibration: Path | None = None
    video_start_utc: float | None = None
    clock_utc_offset_h: float | None = None
    clock_uncertainty_s: float = DEFAULT_CLOCK_UNCERTAINTY_S
    azimuth_deg: float | None = None


@dataclass(frozen=True)
class Model:
    """Atmosphere-model settings."""

    layer_top_m: float = DEFAULT_LAYER_TOP_M


@dataclass(frozen=True)
class Observation:
    """The whole of ``observation.toml``, validated; ``path`` is the file read."""

    site: Site
    air: Air
    camera: Camera
    model: Model
    path: Path

    def air_at_lens(self) -> tuple[float, float, float]:
        """Temperature [deg C], pressure [hPa] and relative humidity [1] at the lens.

        Values missing from ``[air]`` are filled in: temperature and pressure from
        :func:`standard_atmosphere_1976` at ``site.eye_height_m``, humidity with
        ``DEFAULT_RELATIVE_HUMIDITY`` (0.7; common practice, no source).
        """
        std_T_C, std_p_hPa = standard_atmosphere_1976(self.site.eye_height_m)
        T_C = std_T_C if self.air.temperature_C is None else self.air.temperature_C
        p_hPa = std_p_hPa if self.air.pressure_hPa is None else self.air.pressure_hPa
        rh = self.air.relative_humidity
        return T_C, p_hPa, DEFAULT_RELATIVE_HUMIDITY if rh is None else rh


def standard_atmosphere_1976(height_m: float) -> tuple[float, float]:
    """Temperature and pressure of the 1976 US Standard Atmosphere below 11 km.

    Parameters
    ----------
    height_m : float
        Geometric height above sea level [m]; converted to geopotential height
        H = r0 h / (r0 + h), r0 = 6356766 m, which must lie within 0..11000 m'.

    Returns
    -------
    temperature_C : float
        T = 288.15 K - 0.0065 K/m' * H, in deg C [deg C].
    pressure_hPa : float
        p = 101325 Pa * (T / 288.15 K) ** 5.25588, in hPa [hPa].

    References
    ----------
    .. [1] U.S. Standard Atmosphere, 1976, NOAA/NASA/USAF, Washington D.C.,
       eqs. 18 (geopotential height) and 33a (pressure, non-zero lapse rate);
       equation numbers from memory.
    """
    geopotential_m = EARTH_RADIUS_USSA_M * height_m / (EARTH_RADIUS_USSA_M + height_m)
    if not 0.0 <= geopotential_m <= 11000.0:
        raise ValueError(f"height_m = {height_m} is outside this layer (0..11 km geopotential)")
    T_K = T0_K - LAPSE_RATE_K_PER_M * geopotential_m
    p_Pa = P0_PA * (T_K / T0_K) ** PRESSURE_EXPONENT
    return T_K - KELVIN_OFFSET, p_Pa / 100.0


def parse_utc(text: str, *, where: str) -> float:
    """ISO 8601 date and time with ``Z`` or a UTC offset -> POSIX seconds.

    Accepts ``YYYY-MM-DDTHH:MM:SS[.fff...](Z|+HH:MM|+HHMM|+HH)`` (``T`` may be a space,
    the decimal sign a comma). The fraction is kept exactly (the float nearest the
    exact value; microseconds survive, float resolution near 2026 is about 0.24 us).
    Leap seconds (``:60``) and times without a zone are refused.

    Parameters
    ----------
    text : str
        The time, e.g. ``"2026-06-21T03:55:10.250Z"``.
    where : str
        What the text came from (file, key or row), put first in error messages.

    Returns
    -------
    float
        Seconds since 1970-01-01T00:00:00Z, leap seconds not counted [s].

    Raises
    ------
    InputError
        When ``text`` is not such a time.
    """
    if not isinstance(text, str):
        raise InputError(f"{where}: expected an ISO 8601 time string, got {_describe(text)}")
    match = _ISO_RE.fullmatch(text.strip())
    if match is None:
        raise InputError(f"{where}: {text!r} is not an ISO 8601 time like {_UTC_EXAMPLE}")
    if match["tz"] is None:
        raise InputError(f"{where}: {text!r} has no time zone; end it with Z for UTC "
                         f"or give the offset, e.g. +02:00")
    try:
        day = date.fromisoformat(match["date"])
        clock = time(int(match["hour"]), int(match["minute"]), int(match["second"]))
        offset_s = _offset_seconds(match["tz"])
    except ValueError as err:
        raise InputError(f"{where}: {text!r} is not a valid time ({err})") from None
    whole_s = calendar.timegm((day.year, day.month, day.day, clock.hour, clock.minute,
                               clock.second)) - offset_s
    frac = match["frac"] or "0"
    return float(whole_s + Fraction(int(frac), 10 ** len(frac)))


def _offset_seconds(tz: str) -> int:
    """``Z``, ``+HH``, ``+HHMM`` or ``+HH:MM`` -> seconds east of UTC."""
    if tz in ("Z", "z"):
        return 0
    digits = tz[1:].replace(":", "")
    hours, minutes = int(digits[:2]), int(digits[2:] or 0)
    if hours > 23 or minutes > 59:
        raise ValueError(f"UTC offset {tz} is out of range")
    sign = -1 if tz[0] == "-" else 1
    return sign * (hours * 3600 + minutes * 60)


def format_utc(t_unix_s: float, digits: int = 3) -> str:
    """POSIX seconds -> ISO 8601 UTC, e.g. ``"2026-06-21T03:55:10.250Z"``.

    Parameters
    ----------
    t_unix_s : float
        Seconds since 1970-01-01T00:00:00Z [s].
    digits : int
        Decimals of the seconds, 0..9; rounded half to even on the float's exact value.

    Returns
    -------
    str
        The time, ending in ``Z``; no decimal point when ``digits`` is 0.
    """
    if not 0 <= digits <= 9:
        raise ValueError(f"digits must be within 0..9, got {digits}")
    if not math.isfinite(t_unix_s):
        raise ValueError(f"t_unix_s must be finite, got {t_unix_s}")
    rounded = Decimal(t_unix_s).quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_EVEN)
    whole = int(rounded.to_integral_value(rounding=ROUND_FLOOR))
    stamp = (_EPOCH + timedelta(seconds=whole)).strftime("%Y-%m-%dT%H:%M:%S")
    if digits == 0:
        return f"{stamp}Z"
    frac = int((rounded - whole).scaleb(digits))
    return f"{stamp}.{frac:0{digits}d}Z"


def read_observation(
    path: str | Path, *, require: Iterable[str] = ("site",)
) -> Observation:
    """Read and validate ``observation.toml``.

    Parameters
    ----------
    path : str or Path
        The TOML file.
    require : iterable of str
        Tables that must be present (possibly empty) besides ``site``, which always
        must; e.g. ``("site",)`` for ``calibrate``. Absent tables take their defaults.

    Returns
    -------
    Observation

    Raises
    ------
    InputError
        For a missing or unreadable file, a TOML syntax error, an unknown table or
        key, a wrong type, a value out of range or a missing required key; the
        message names the file, the ``[table] key`` and the problem.
    """
    required = set(require) | {"site"}
    if not required <= set(TABLES):
        raise ValueError(f"require must name tables among {TABLES}, got {sorted(required)}")
    path = Path(path)
    document = _load_toml(path)
    for name, value in document.items():
        if name not in TABLES:
            what = "table" if isinstance(value, dict) else "top-level key"
            raise InputError(f"unknown {what} [{name}]; known tables: {', '.join(TABLES)}",
                             path)
    tables = {name: _table(document, name, name in required, path) for name in TABLES}
    return Observation(
        site=_parse_site(tables["site"], path),
        air=_parse_air(tables["air"], path),
        camera=_parse_camera(tables["camera"], path),
        model=_parse_model(tables["model"], path),
        path=path,
    )


def _load_toml(path: Path) -> dict[str, Any]:
    """The parsed TOML document, every failure an InputError naming the file."""
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file does not exist", path) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a TOML file", path) from None
    except OSError as err:
        raise InputError(f"cannot be read: {err.strerror or err}", path) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise InputError(f"is not UTF-8 text (bad byte at offset {err.start})", path) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"TOML syntax error: {err}", path) from None


def _table(document: Mapping[str, Any], name: str, required: bool, path: Path) -> dict:
    """One table, checked for being a table and for unknown keys ({} when absent)."""
    if name not in document:
        if required:
            raise InputError(f"table [{name}] is missing (it may be empty: all its keys "
                             f"but [site]'s are optional)", path)
        return {}
    table = document[name]
    if not isinstance(table, dict):
        raise InputError(f"[{name}] must be a table, got {_describe(table)}", path)
    known = KNOWN_KEYS[name]
    for key in table:
        if key not in known:
            close = difflib.get_close_matches(key, known, n=1)
            hint = f"did you mean {close[0]}? " if close else ""
            raise InputError(f"[{name}] {key} is not a known key; {hint}known: "
                             f"{', '.join(known)}", path)
    return table


def _parse_site(table: Mapping[str, Any], path: Path) -> Site:
    for key in ("latitude_deg", "longitude_deg", "eye_height_m"):
        if key not in table:
            raise InputError(f"[site] {key} is required but missing", path)
    latitude = _number(table, "site", "latitude_deg", path, low=-90.0, high=90.0)
    longitude = _number(table, "site", "longitude_deg", path, low=-180.0, high=360.0)
    eye = _number(table, "site", "eye_height_m", path, low=0.0, high=10000.0, high_open=True)
    horizon = _string(table, "site", "horizon", path) or "sea"
    if horizon not in HORIZONS:
        raise InputError(f"[site] horizon = {_toml(horizon)} is not one of "
                         f"{', '.join(map(_toml, HORIZONS))}", path)
    horizon_alt = _number(table, "site", "horizon_altitude_deg", path, low=-5.0, high=10.0)
    if horizon == "terrain" and horizon_alt is None:
        raise InputError('[site] horizon_altitude_deg is required with horizon = "terrain"',
                         path)
    if horizon == "sea" and horizon_alt is not None:
        raise InputError('[site] horizon_altitude_deg is only allowed with horizon = '
                         '"terrain" (the sea horizon is computed)', path)
    return Site(
        latitude_deg=latitude,
        longitude_deg=longitude - 360.0 if longitude > 180.0 else longitude,
        eye_height_m=eye,
        horizon=horizon,
        horizon_altitude_deg=horizon_alt,
        name=_string(table, "site", "name", path),
    )


def _parse_air(table: Mapping[str, Any], path: Path) -> Air:
    return Air(
        temperature_C=_number(table, "air", "temperature_C", path, low=-80.0, high=60.0),
        pressure_hPa=_number(table, "air", "pressure_hPa", path, low=300.0, high=1100.0),
        relative_humidity=_number(table, "air", "relative_humidity", path, low=0.0, high=1.0),
    )


def _parse_camera(table: Mapping[str, Any], path: Path) -> Camera:
    uncertainty = _number(table, "camera", "clock_uncertainty_s", path, low=0.0)
    azimuth = _number(table, "camera", "azimuth_deg", path, low=0.0, high=360.0)
    return Camera(
        plate_scale_arcsec_per_px=_number(table, "camera", "plate_scale_arcsec_per_px", path,
                                          low=0.0, low_open=True),
        calibration=_calibration(table, path),
        video_start_utc=_video_start(table, path),
        clock_utc_offset_h=_number(table, "camera", "clock_utc_offset_h", path,
                                   low=-14.0, high=14.0),
        clock_uncertainty_s=DEFAULT_CLOCK_UNCERTAINTY_S if uncertainty is None else uncertainty,
        azimuth_deg=None if azimuth is None else azimuth % 360.0,
    )


def _parse_model(table: Mapping[str, Any], path: Path) -> Model:
    layer_top = _number(table, "model", "layer_top_m", path, low=0.0, high=2000.0,
                        low_open=True)
    return Model(layer_top_m=DEFAULT_LAYER_TOP_M if layer_top is None else layer_top)


def _calibration(table: Mapping[str, Any], path: Path) -> Path | None:
    """``[camera] calibration`` resolved against the TOML file's folder; must exist."""
    text = _string(table, "camera", "calibration", path)
    if text is None:
        return None
    resolved = path.parent / Path(text).expanduser()
    if not resolved.is_file():
        problem = "is a folder, not a file" if resolved.is_dir() else "does not exist"
        raise InputError(f"[camera] calibration = {_toml(text)}: {resolved} {problem}", path)
    return resolved


def _video_start(table: Mapping[str, Any], path: Path) -> float | None:
    """``[camera] video_start_utc`` as POSIX seconds (string or TOML date-time)."""
    value = table.get("video_start_utc")
    where = "[camera] video_start_utc"
    if value is None:
        return None
    if isinstance(value, datetime) and value.tzinfo is not None:
        whole_s = (value - _EPOCH) // timedelta(seconds=1)
        return float(whole_s + Fraction(value.microsecond, 10**6))
    if isinstance(value, (datetime, date, time)):
        raise InputError(f"{where} = {value.isoformat()} has no time zone; end it with Z "
                         f"for UTC or give the offset, e.g. +02:00", path)
    try:
        return parse_utc(value, where=where)
    except InputError as err:
        raise InputError(err.message, path) from None


def _number(table: Mapping[str, Any], name: str, key: str, path: Path, *,
            low: float | None = None, high: float | None = None,
            low_open: bool = False, high_open: bool = False) -> float | None:
    """A finite number within [low, high] (open ends as flagged), or None if absent."""
    if key not in table:
        return None
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"[{name}] {key} must be a number, got {_describe(value)}", path)
    if not math.isfinite(value):
        raise InputError(f"[{name}] {key} must be a finite number, got {value}", path)
    below = low is not None and (value <= low if low_open else value < low)
    above = high is not None and (value >= high if high_open else value > high)
    if below or above:
        raise InputError(f"[{name}] {key} = {value} is outside the allowed range: "
                         f"{_range_text(low, high, low_open, high_open)}", path)
    return float(value)


def _string(table: Mapping[str, Any], name: str, key: str, path: Path) -> str | None:
    """A non-empty string, or None if absent."""
    if key not in table:
        return None
    value = table[key]
    if not isinstance(value, str):
        raise InputError(f"[{name}] {key} must be a string, got {_describe(value)}", path)
    if not value.strip():
        raise InputError(f"[{name}] {key} must not be empty", path)
    return value


def _range_text(low: float | None, high: float | None, low_open: bool, high_open: bool) -> str:
    """``"-90..90"``, ``"> 0"``, ``">= 0 and < 10000"`` and the like."""
    if low is not None and high is not None and not (low_open or high_open):
        return f"{low:g}..{high:g}"
    parts = []
    if low is not None:
        parts.append(f"{'>' if low_open else '>='} {low:g}")
    if high is not None:
        parts.append(f"{'<' if high_open else '<='} {high:g}")
    return " and ".join(parts)


def _toml(value: Any) -> str:
    """A value as it would be written in TOML (for messages)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    return str(value)


def _describe(value: Any) -> str:
    """``'a string ("12")'``, ``'a boolean (true)'`` and so on, in TOML's words."""
    kinds = [(bool, "a boolean"), (str, "a string"), (int, "an integer"), (float, "a float"),
             (dict, "a table"), (list, "an array"), (datetime, "a date-time"),
             (date, "a date"), (time, "a time")]
    kind = next((label for cls, label in kinds if isinstance(value, cls)), type(value).__name__)
    shown = _toml(value)
    return f"{kind} ({shown[:40]}{'...' if len(shown) > 40 else ''})"
