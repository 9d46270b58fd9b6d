"""Read a sunset scenario (``SCENARIO.toml``) for ``limbtrace simulate``; every key validated.

A scenario says where and when a sunset is seen, through what air, and with what camera;
:mod:`analyse.simulate` renders it with the project's own forward model. The full format,
with an example, is in ``docs/scenario.md``; in short (defaults after ``=``, ``*`` marks a
required key)::

    [site]        name, latitude_deg*, longitude_deg*, eye_height_m*
    [air]         temperature_C, pressure_hPa, relative_humidity      (at the lens)
    [atmosphere]  lapse_rate_K_per_km = 6.5, layer_top_m = 100,
                  profile_height_m + profile_temperature_C (a table, instead of GAMMA),
                  tau_aerosol_550 = 0.1, angstrom_alpha = 1.3
    [time]        date*, start_utc + end_utc | last_seconds (+ after_seconds = 1),
                  fps (+ fps_jitter = 0) | frame_times_s | [[time.burst]] start_s, count, fps
    [camera]      width_px*, height_px*, plate_scale_arcsec_per_px*, roll_deg = 0,
                  horizon_row_px = 0.6 height, azimuth_deg, psf_sigma_px = 0.8,
                  read_noise_e = 3, full_well_e = 20000, exposure = "locked" | "auto",
                  exposure_level = 0.8, auto_exposure_lag_s = 0.5,
                  auto_exposure_max_gain = 16, exposure_time_s = 0.0005, bands_csv,
                  wavelengths_per_band = 7, channel_offset_px = {r = [dx, dy], b = [dx, dy]},
                  shake_px = 0, rolling_shutter_s = 0
    [scene]       sky_level = 0.03, sea_level = 0.3, glitter = true, glitter_level = 0.05
    [output]      format = "png" | "tiff" | "jpeg" | "h264", jpeg_quality = 92,
                  video_crf = 18, seed = 0, clock_utc_offset_h = 0, clock_error_s = 0,
                  clock_uncertainty_s = 0.2

Unknown tables and keys, wrong types and out-of-range values are refused with an
:class:`~analyse.errors.InputError` naming the file and the ``[table] key``. Numbers may be
TOML integers or floats (booleans, NaN and infinities are refused); times are ISO 8601
strings with ``Z`` or an offset, or TOML offset date-times.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from analyse.errors import InputError
from analyse.observation import parse_utc

__all__ = [
    "SiteSpec", "AirSpec", "AtmosphereSpec", "Burst", "TimingSpec", "CameraSpec",
    "SceneSpec", "OutputSpec", "Scenario", "read_scenario", "FORMATS",
]  # fmt: skip

FORMATS = ("png", "tiff", "jpeg", "h264")
EXPOSURE_MODES = ("locked", "auto")
MAX_FRAMES = 100_000  # frames; a guard against typing 3000 fps for an hour
MAX_IMAGE_PX = 16384  # pixels per side
DEFAULT_HORIZON_ROW_FRACTION = 0.6  # of the height from the top; common practice, no source

KNOWN_KEYS: dict[str, tuple[str, ...]] = {
    "site": ("name", "latitude_deg", "longitude_deg", "eye_height_m"),
    "air": ("temperature_C", "pressure_hPa", "relative_humidity"),
    "atmosphere": ("lapse_rate_K_per_km", "layer_top_m", "profile_height_m",
                   "profile_temperature_C", "tau_aerosol_550", "angstrom_alpha"),
    "time": ("date", "start_utc", "end_utc", "last_seconds", "after_seconds", "fps",
             "fps_jitter", "frame_times_s", "burst"),
    "camera": ("width_px", "height_px", "plate_scale_arcsec_per_px", "roll_deg",
               "horizon_row_px", "azimuth_deg", "psf_sigma_px", "read_noise_e",
               "full_well_e", "exposure", "exposure_level", "auto_exposure_lag_s",
               "auto_exposure_max_gain", "exposure_time_s", "bands_csv",
               "wavelengths_per_band", "channel_offset_px", "shake_px", "rolling_shutter_s"),
    "scene": ("sky_level", "sea_level", "glitter", "glitter_level"),
    "output": ("format", "jpeg_quality", "video_crf", "seed", "clock_utc_offset_h",
               "clock_error_s", "clock_uncertainty_s"),
}
REQUIRED_TABLES = ("site", "time", "camera")


@dataclass(frozen=True)
class SiteSpec:
    """Where the observer stands (angles in degrees, north and east positive)."""

    latitude_deg: float
    longitude_deg: float
    eye_height_m: float
    name: str | None = None


@dataclass(frozen=True)
class AirSpec:
    """Air at the lens; None where the scenario leaves it to the defaults."""

    temperature_C: float | None = None
    pressure_hPa: float | None = None
    relative_humidity: float | None = None


@dataclass(frozen=True)
class AtmosphereSpec:
    """The model atmosphere: a linear layer (GAMMA) or a table of temperatures."""

    lapse_rate_K_per_km: float | None = 6.5
    layer_top_m: float = 100.0
    profile_height_m: tuple[float, ...] | None = None
    profile_temperature_C: tuple[float, ...] | None = None
    tau_aerosol_550: float = 0.1
    angstrom_alpha: float = 1.3


@dataclass(frozen=True)
class Burst:
    """``count`` frames at ``fps`` from ``start_s`` after the window start."""

    start_s: float
    count: int
    fps: float


@dataclass(frozen=True)
class TimingSpec:
    """The UTC window and the frame times within it (offsets from its start, seconds)."""

    date: str
    start_unix_s: float | None = None
    end_unix_s: float | None = None
    last_seconds: float | None = None
    after_seconds: float = 1.0
    fps: float | None = None
    fps_jitter: float = 0.0
    frame_times_s: tuple[float, ...] | None = None
    bursts: tuple[Burst, ...] = ()


@dataclass(frozen=True)
class CameraSpec:
    """Image geometry, optics, sensor, exposure and colour of the simulated camera."""

    width_px: int
    height_px: int
    plate_scale_arcsec_per_px: float
    roll_deg: float = 0.0
    horizon_row_px: float | None = None
    azimuth_deg: float | None = None
    psf_sigma_px: float = 0.8
    read_noise_e: float = 3.0
    full_well_e: float = 20000.0
    exposure: str = "locked"
    exposure_level: float = 0.8
    auto_exposure_lag_s: float = 0.5
    auto_exposure_max_gain: float = 16.0
    exposure_time_s: float = 0.0005
    bands_csv: Path | None = None
    wavelengths_per_band: int = 7
    channel_offset_px: tuple[tuple[str, float, float], ...] = ()
    shake_px: float = 0.0
    rolling_shutter_s: float = 0.0

    def horizon_row(self) -> float:
        """Row of the sea horizon at the centre column [px] (default 0.6 of the height)."""
        if self.horizon_row_px is not None:
            return self.horizon_row_px
        return DEFAULT_HORIZON_ROW_FRACTION * self.height_px

    def offset_px(self, channel: str) -> tuple[float, float]:
        """Lateral colour offset (dx right, dy down) of a channel relative to green [px]."""
        for name, dx, dy in self.channel_offset_px:
            if name == channel:
                return dx, dy
        return 0.0, 0.0


@dataclass(frozen=True)
class SceneSpec:
    """Sky, sea and sun glitter, in units of the disc centre seen along the horizon ray."""

    sky_level: float = 0.03
    sea_level: float = 0.3
    glitter: bool = True
    glitter_level: float = 0.05


@dataclass(frozen=True)
class OutputSpec:
    """What is written, and how the simulated camera's clock behaves."""

    format: str = "png"
    jpeg_quality: int = 92
    video_crf: int = 18
    seed: int = 0
    clock_utc_offset_h: float = 0.0
    clock_error_s: float = 0.0
    clock_uncertainty_s: float = 0.2


@dataclass(frozen=True)
class Scenario:
    """A whole scenario file, validated; ``path`` is the file read."""

    site: SiteSpec
    air: AirSpec
    atmosphere: AtmosphereSpec
    timing: TimingSpec
    camera: CameraSpec
    scene: SceneSpec
    output: OutputSpec
    path: Path

    @property
    def bit_depth(self) -> int:
        """8, or 16 for TIFF."""
        return 16 if self.output.format == "tiff" else 8


def read_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file.

    Parameters
    ----------
    path : str or Path
        The TOML file (format in the module docstring and ``docs/scenario.md``).

    Returns
    -------
    Scenario

    Raises
    ------
    InputError
        A missing or unreadable file, TOML syntax, an unknown table or key, a wrong type,
        a value out of range, a missing required key or keys that exclude each other.
    """
    path = Path(path)
    doc = _load(path)
    for name, value in doc.items():
        if name not in KNOWN_KEYS:
            raise InputError(f"unknown table [{name}]; known: {', '.join(KNOWN_KEYS)}", path)
    r = {name: _Table(doc, name, path) for name in KNOWN_KEYS}
    camera = _camera(r["camera"], path)
    output = _output(r["output"])
    if output.format == "h264" and (camera.width_px % 2 or camera.height_px % 2):
        raise InputError(f"[camera] width_px and height_px must be even for H.264 4:2:0 "
                         f"video, got {camera.width_px} x {camera.height_px}", path)
    scenario = Scenario(_site(r["site"]), _air(r["air"]), _atmosphere(r["atmosphere"]),
                        _timing(r["time"]), camera, _scene(r["scene"]), output, path)
    if scenario.atmosphere.profile_height_m is not None and scenario.air.temperature_C is not None:
        raise InputError("[air] temperature_C cannot be given with [atmosphere] "
                         "profile_temperature_C: the profile sets the lens temperature", path)
    return scenario


# --- tables -------------------------------------------------------------------------


def _site(t: _Table) -> SiteSpec:
    return SiteSpec(
        latitude_deg=t.number("latitude_deg", required=True, low=-89.0, high=89.0),
        longitude_deg=_wrap180(t.number("longitude_deg", required=True, low=-180.0, high=360.0)),
        eye_height_m=t.number("eye_height_m", required=True, low=0.0, high=5000.0),
        name=t.string("name"),
    )


def _air(t: _Table) -> AirSpec:
    return AirSpec(t.number("temperature_C", low=-80.0, high=60.0),
                   t.number("pressure_hPa", low=300.0, high=1100.0),
                   t.number("relative_humidity", low=0.0, high=1.0))


def _atmosphere(t: _Table) -> AtmosphereSpec:
    heights = t.numbers("profile_height_m")
    temps = t.numbers("profile_temperature_C")
    gamma = t.number("lapse_rate_K_per_km", low=-1000.0, high=1000.0)
    if (heights is None) != (temps is None):
        t.fail("profile_height_m", "and profile_temperature_C must be given together")
    if heights is not None and temps is not None:
        if gamma is not None:
            t.fail("lapse_rate_K_per_km", "cannot be given with a temperature profile")
        if len(heights) != len(temps) or len(heights) < 2:
            t.fail("profile_height_m", f"and profile_temperature_C need equal lengths >= 2, "
                   f"got {len(heights)} and {len(temps)}")
        if heights[0] != 0.0 or any(b <= a for a, b in zip(heights, heights[1:])):
            t.fail("profile_height_m", "must start at 0 and increase strictly")
        if heights[-1] > 10000.0:
            t.fail("profile_height_m", f"must end at or below 10000 m, got {heights[-1]:g}")
        if any(not -80.0 <= v <= 60.0 for v in temps):
            t.fail("profile_temperature_C", "values must lie within -80..60")
    return AtmosphereSpec(
        lapse_rate_K_per_km=None if heights is not None else (6.5 if gamma is None else gamma),
        layer_top_m=t.number("layer_top_m", default=100.0, low=0.0, high=2000.0, low_open=True),
        profile_height_m=heights, profile_temperature_C=temps,
        tau_aerosol_550=t.number("tau_aerosol_550", default=0.1, low=0.0, high=3.0),
        angstrom_alpha=t.number("angstrom_alpha", default=1.3, low=-1.0, high=4.0),
    )


def _timing(t: _Table) -> TimingSpec:
    date = t.string("date", required=True)
    try:
        dt.date.fromisoformat(date)
    except ValueError:
        t.fail("date", f"= {date!r} is not a date like 2026-06-21")
    start, end = t.time("start_utc"), t.time("end_utc")
    last = t.number("last_seconds", low=0.0, high=3600.0, low_open=True)
    if (start is None) != (end is None):
        t.fail("start_utc", "and end_utc must be given together")
    if (start is None) == (last is None):
        t.fail("last_seconds", "or start_utc + end_utc: give exactly one of the two windows")
    if start is not None and end is not None and not 0.0 < end - start <= 3600.0:
        t.fail("end_utc", f"must be after start_utc by at most 3600 s, got {end - start:g} s")
    after = t.number("after_seconds", default=1.0, low=0.0, high=600.0)
    if start is not None and "after_seconds" in t.table:
        t.fail("after_seconds", "only goes with last_seconds")
    fps = t.number("fps", low=0.0, high=1000.0, low_open=True)
    times = t.numbers("frame_times_s")
    bursts = _bursts(t)
    if sum(v is not None for v in (fps, times, bursts or None)) != 1:
        t.fail("fps", "or frame_times_s or [[time.burst]]: give exactly one")
    jitter = t.number("fps_jitter", default=0.0, low=0.0, high=0.5)
    if jitter and fps is None:
        t.fail("fps_jitter", "only goes with fps")
    if times is not None and (not times or times[0] < 0.0
                              or any(b <= a for a, b in zip(times, times[1:]))):
        t.fail("frame_times_s", "must be a non-empty list of offsets >= 0, strictly increasing")
    if times is not None and len(times) > MAX_FRAMES:
        t.fail("frame_times_s", f"has {len(times)} frames, more than {MAX_FRAMES}")
    return TimingSpec(date, start, end, last, after, fps, jitter, times, bursts)


def _bursts(t: _Table) -> tuple[Burst, ...]:
    raw = t.table.get("burst")
    if raw is None:
        return ()
    if not isinstance(raw, list) or not raw or not all(isinstance(b, dict) for b in raw):
        t.fail("burst", "must be an array of tables: [[time.burst]] start_s, count, fps")
    out = []
    for i, b in enumerate(raw):
        sub = _Table({"burst": b}, "burst", t.path, label=f"time.burst #{i + 1}",
                     known=("start_s", "count", "fps"))
        out.append(Burst(sub.number("start_s", required=True, low=0.0),
                         sub.integer("count", required=True, low=1, high=MAX_FRAMES),
                         sub.number("fps", required=True, low=0.0, high=1000.0, low_open=True)))
    return tuple(out)


def _camera(t: _Table, path: Path) -> CameraSpec:
    width = t.integer("width_px", required=True, low=16, high=MAX_IMAGE_PX)
    height = t.integer("height_px", required=True, low=16, high=MAX_IMAGE_PX)
    exposure = t.string("exposure") or "locked"
    if exposure not in EXPOSURE_MODES:
        t.fail("exposure", f"= {exposure!r} is not one of {', '.join(EXPOSURE_MODES)}")
    bands = t.string("bands_csv")
    bands_path = None
    if bands is not None:
        bands_path = path.parent / Path(bands).expanduser()
        if not bands_path.is_file():
            t.fail("bands_csv", f"= {bands!r}: {bands_path} is not a file")
    azimuth = t.number("azimuth_deg", low=0.0, high=360.0)
    return CameraSpec(
        width_px=width, height_px=height,
        plate_scale_arcsec_per_px=t.number("plate_scale_arcsec_per_px", required=True,
                                           low=0.0, high=600.0, low_open=True),
        roll_deg=t.number("roll_deg", default=0.0, low=-45.0, high=45.0),
        horizon_row_px=t.number("horizon_row_px", low=0.0, high=height - 1.0),
        azimuth_deg=None if azimuth is None else azimuth % 360.0,
        psf_sigma_px=t.number("psf_sigma_px", default=0.8, low=0.0, high=50.0),
        read_noise_e=t.number("read_noise_e", default=3.0, low=0.0, high=1000.0),
        full_well_e=t.number("full_well_e", default=20000.0, low=1.0, high=1e7),
        exposure=exposure,
        exposure_level=t.number("exposure_level", default=0.8, low=0.0, high=1000.0,
                                low_open=True),
        auto_exposure_lag_s=t.number("auto_exposure_lag_s", default=0.5, low=0.0, high=60.0,
                                     low_open=True),
        auto_exposure_max_gain=t.number("auto_exposure_max_gain", default=16.0, low=1.0,
                                        high=1e6),
        exposure_time_s=t.number("exposure_time_s", default=0.0005, low=0.0, high=60.0,
                                 low_open=True),
        bands_csv=bands_path,
        wavelengths_per_band=t.integer("wavelengths_per_band", default=7, low=1, high=20),
        channel_offset_px=_offsets(t),
        shake_px=t.number("shake_px", default=0.0, low=0.0, high=100.0),
        rolling_shutter_s=t.number("rolling_shutter_s", default=0.0, low=0.0, high=1.0),
    )


def _offsets(t: _Table) -> tuple[tuple[str, float, float], ...]:
    raw = t.table.get("channel_offset_px")
    if raw is None:
        return ()
    if not isinstance(raw, dict):
        t.fail("channel_offset_px", "must be an inline table like {r = [0.3, 0.0]}")
    out = []
    for name, value in raw.items():
        if name not in ("r", "b"):
            t.fail("channel_offset_px", f"has key {name!r}; only r and b (relative to green)")
        ok = (isinstance(value, list) and len(value) == 2
              and all(_is_number(v) and abs(v) <= 20.0 for v in value))
        if not ok:
            t.fail("channel_offset_px", f"{name} must be [dx, dy] with |values| <= 20 px")
        out.append((name, float(value[0]), float(value[1])))
    return tuple(out)


def _scene(t: _Table) -> SceneSpec:
    return SceneSpec(
        sky_level=t.number("sky_level", default=0.03, low=0.0, high=100.0),
        sea_level=t.number("sea_level", default=0.3, low=0.0, high=10.0),
        glitter=t.boolean("glitter", default=True),
        glitter_level=t.number("glitter_level", default=0.05, low=0.0, high=100.0),
    )


def _output(t: _Table) -> OutputSpec:
    fmt = t.string("format") or "png"
    if fmt not in FORMATS:
        t.fail("format", f"= {fmt!r} is not one of {', '.join(FORMATS)}")
    return OutputSpec(
        format=fmt,
        jpeg_quality=t.integer("jpeg_quality", default=92, low=1, high=100),
        video_crf=t.integer("video_crf", default=18, low=0, high=51),
        seed=t.integer("seed", default=0, low=0, high=2**63 - 1),
        clock_utc_offset_h=t.number("clock_utc_offset_h", default=0.0, low=-14.0, high=14.0),
        clock_error_s=t.number("clock_error_s", default=0.0, low=-86400.0, high=86400.0),
        clock_uncertainty_s=t.number("clock_uncertainty_s", default=0.2, low=0.0, high=86400.0),
    )


# --- key access ---------------------------------------------------------------------


class _Table:
    """One TOML table with typed, range-checked access; messages name file and key."""

    def __init__(self, doc: Mapping[str, Any], name: str, path: Path, *,
                 label: str | None = None, known: tuple[str, ...] | None = None) -> None:
        self.name, self.path, self.label = name, path, label or name
        table = doc.get(name, {})
        if name not in doc and name in REQUIRED_TABLES:
            raise InputError(f"table [{name}] is missing", path)
        if not isinstance(table, dict):
            raise InputError(f"[{self.label}] must be a table", path)
        allowed = known or KNOWN_KEYS[name]
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1)
                hint = f" (did you mean {close[0]}?)" if close else ""
                raise InputError(f"[{self.label}] {key} is not a known key{hint}; known: "
                                 f"{', '.join(allowed)}", path)
        self.table = table

    def fail(self, key: str, problem: str) -> None:
        raise InputError(f"[{self.label}] {key} {problem}", self.path)

    def _get(self, key: str, required: bool) -> Any:
        if key not in self.table and required:
            self.fail(key, "is required but missing")
        return self.table.get(key)

    def number(self, key: str, *, required: bool = False, default: float | None = None,
               low: float | None = None, high: float | None = None,
               low_open: bool = False) -> Any:
        value = self._get(key, required)
        if value is None:
            return default
        if not _is_number(value):
            self.fail(key, f"must be a number, got {value!r}")
        if (low is not None and (value <= low if low_open else value < low)) or (
                high is not None and value > high):
            bounds = [f"{'>' if low_open else '>='} {low:g}" if low is not None else "",
                      f"<= {high:g}" if high is not None else ""]
            self.fail(key, f"= {value} is out of range (must be "
                      f"{' and '.join(filter(None, bounds))})")
        return float(value)

    def integer(self, key: str, *, required: bool = False, default: int | None = None,
                low: int, high: int) -> Any:
        value = self._get(key, required)
        if value is None:
            return default
        if isinstance(value, bool) or not isinstance(value, int):
            self.fail(key, f"must be an integer, got {value!r}")
        if not low <= value <= high:
            self.fail(key, f"= {value} is out of range ({low}..{high})")
        return int(value)

    def numbers(self, key: str) -> tuple[float, ...] | None:
        value = self.table.get(key)
        if value is None:
            return None
        if not isinstance(value, list) or not all(_is_number(v) for v in value):
            self.fail(key, "must be an array of finite numbers")
        return tuple(float(v) for v in value)

    def string(self, key: str, *, required: bool = False) -> Any:
        value = self._get(key, required)
        if value is not None and (not isinstance(value, str) or not value.strip()):
            self.fail(key, f"must be a non-empty string, got {value!r}")
        return value

    def boolean(self, key: str, *, default: bool) -> bool:
        value = self.table.get(key, default)
        if not isinstance(value, bool):
            self.fail(key, f"must be true or false, got {value!r}")
        return value

    def time(self, key: str) -> float | None:
        value = self.table.get(key)
        if value is None:
            return None
        if isinstance(value, dt.datetime) and value.tzinfo is not None:
            return value.timestamp()
        if isinstance(value, (dt.datetime, dt.date, dt.time)):
            self.fail(key, "has no time zone; end it with Z for UTC")
        try:
            return parse_utc(value, where=f"[{self.label}] {key}")
        except InputError as err:
            raise InputError(err.message, self.path) from None


def _is_number(value: Any) -> bool:
    return (not isinstance(value, bool) and isinstance(value, (int, float))
            and math.isfinite(value))


def _wrap180(longitude_deg: float) -> float:
    return longitude_deg - 360.0 if longitude_deg > 180.0 else longitude_deg


def _load(path: Path) -> dict[str, Any]:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("scenario file does not exist", path) from None
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(f"cannot read the scenario file ({err})", path) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"TOML syntax error: {err}", path) from None
