"""Tests for analyse.observation: reading and validating observation.toml, UTC times."""

from __future__ import annotations

import math
import os
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from analyse.errors import InputError
from analyse.observation import (
    Air,
    Camera,
    Model,
    Observation,
    Site,
    format_utc,
    parse_utc,
    read_observation,
    standard_atmosphere_1976,
)

FILE_NAME = "observation.toml"

# A complete, valid file as {table: {key: TOML literal}}; cases below override entries.
VALID: dict[str, dict[str, str]] = {
    "site": {
        "name": '"Cape Ardent lookout"',
        "latitude_deg": "35.2",
        "longitude_deg": "-20.4",
        "eye_height_m": "12",
        "horizon": '"sea"',
    },
    "air": {"temperature_C": "17.0", "pressure_hPa": "1016.0", "relative_humidity": "0.75"},
    "camera": {
        "plate_scale_arcsec_per_px": "2.0",
        "calibration": '"calibration.json"',
        "video_start_utc": '"2026-06-21T21:40:00.125+01:00"',
        "clock_utc_offset_h": "-7",
        "clock_uncertainty_s": "0.2",
        "azimuth_deg": "299.0",
    },
    "model": {"layer_top_m": "150.0"},
}


def render(tables: dict[str, dict[str, str]]) -> str:
    """TOML text for {table: {key: literal}}."""
    blocks = []
    for name, keys in tables.items():
        lines = [f"[{name}]"] + [f"{key} = {literal}" for key, literal in keys.items()]
        blocks.append("\n".join(lines))
    return "\n\n".join(blocks) + "\n"


def with_changes(changes: dict[tuple[str, str], str | None]) -> dict[str, dict[str, str]]:
    """VALID with (table, key) set to a literal, or removed when the literal is None."""
    tables = {name: dict(keys) for name, keys in VALID.items()}
    for (table, key), literal in changes.items():
        if literal is None:
            tables[table].pop(key, None)
        else:
            tables.setdefault(table, {})[key] = literal
    return tables


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    (tmp_path / "calibration.json").write_text("{}\n")
    return tmp_path


def write(folder: Path, text: str) -> Path:
    path = folder / FILE_NAME
    path.write_text(text, encoding="utf-8")
    return path


def expect_error(path: Path, *fragments: str, **kwargs) -> str:
    """Read ``path``, expect an InputError naming the file and ``fragments``; return it."""
    with pytest.raises(InputError) as info:
        read_observation(path, **kwargs)
    message = str(info.value)
    assert "\n" not in message
    assert FILE_NAME in message
    for fragment in fragments:
        assert fragment in message, message
    return message


# ---------------------------------------------------------------- a valid file


def test_full_valid_file_round_trips(folder: Path) -> None:
    path = write(folder, render(VALID))
    obs = read_observation(path)
    # 2026-06-21T21:40:00.125+01:00 = 20:40:00.125Z; 2026-06-21 is day 20625 since 1970.
    start = 20625 * 86400 + 20 * 3600 + 40 * 60 + 0.125
    assert obs == Observation(
        site=Site(35.2, -20.4, 12.0, "sea", None, "Cape Ardent lookout"),
        air=Air(17.0, 1016.0, 0.75),
        camera=Camera(2.0, folder / "calibration.json", start, -7.0, 0.2, 299.0),
        model=Model(150.0),
        path=path,
    )
    assert isinstance(obs.site.eye_height_m, float)  # TOML integer 12 -> float
    assert obs.air_at_lens() == (17.0, 1016.0, 0.75)


def test_dataclasses_are_frozen(folder: Path) -> None:
    obs = read_observation(write(folder, render(VALID)))
    with pytest.raises(AttributeError):
        obs.site.latitude_deg = 0.0  # type: ignore[misc]


def test_minimal_file_takes_defaults(folder: Path) -> None:
    site = {k: VALID["site"][k] for k in ("latitude_deg", "longitude_deg", "eye_height_m")}
    obs = read_observation(write(folder, render({"site": site})), require=("site",))
    assert obs.site.horizon == "sea" and obs.site.name is None
    assert obs.air == Air(None, None, None)
    assert obs.camera == Camera(None, None, None, None, 1.0, None)
    assert obs.model.layer_top_m == 100.0
    std_T_C, std_p_hPa = standard_atmosphere_1976(12.0)
    assert obs.air_at_lens() == (std_T_C, std_p_hPa, 0.7)


def test_empty_tables_are_enough_for_the_default_require(folder: Path) -> None:
    text = render({"site": VALID["site"], "air": {}, "camera": {}, "model": {}})
    obs = read_observation(write(folder, text))
    assert obs.camera.clock_uncertainty_s == 1.0


def test_air_at_lens_fills_only_missing_values(folder: Path) -> None:
    tables = with_changes({("air", "pressure_hPa"): None, ("air", "relative_humidity"): None})
    T_C, p_hPa, rh = read_observation(write(folder, render(tables))).air_at_lens()
    assert T_C == 17.0
    assert p_hPa == standard_atmosphere_1976(12.0)[1]
    assert rh == 0.7  # module default; common practice, no source


def test_standard_atmosphere_sea_level_and_hydrostatic_balance() -> None:
    # Sea level is the definition of the 1976 US Standard Atmosphere: 288.15 K, 101325 Pa.
    assert standard_atmosphere_1976(0.0) == pytest.approx((15.0, 1013.25), abs=1e-12)
    # Hydrostatic balance dp/dH = -p g0 M0 / (R* T) in geopotential metres, USSA 1976
    # constants (from memory) g0 = 9.80665 m/s2, M0 = 0.0289644 kg/mol, R* = 8.31432 J/(mol K);
    # the derivative is taken centrally in geometric height z, dH/dz = (r0/(r0+z))^2.
    g0, M0, R = 9.80665, 0.0289644, 8.31432
    r0 = 6356766.0
    dz = 0.5
    for z in (5.0, 12.0, 500.0, 3000.0, 9000.0):
        T_K = standard_atmosphere_1976(z)[0] + 273.15
        p_up, p_down = standard_atmosphere_1976(z + dz)[1], standard_atmosphere_1976(z - dz)[1]
        dlnp_dz = math.log(p_up / p_down) / (2 * dz)
        expected = -g0 * M0 / (R * T_K) * (r0 / (r0 + z)) ** 2
        # 2e-6 relative: the exponent 5.25588 is g0 M0/(R* L) = 5.255877 rounded to 6
        # digits (6e-7); the central difference adds ~1e-10.
        assert dlnp_dz == pytest.approx(expected, rel=2e-6)
    # Temperature: 6.5 K per geopotential km (USSA 1976).
    assert standard_atmosphere_1976(1000.0)[0] == pytest.approx(
        15.0 - 6.5 * r0 / (r0 + 1000.0), abs=1e-9
    )


def test_longitude_is_normalised_and_azimuth_360_is_north(folder: Path) -> None:
    tables = with_changes({("site", "longitude_deg"): "339.6", ("camera", "azimuth_deg"): "360"})
    obs = read_observation(write(folder, render(tables)))
    assert obs.site.longitude_deg == pytest.approx(-20.4, abs=1e-12)
    assert obs.camera.azimuth_deg == 0.0


def test_terrain_horizon(folder: Path) -> None:
    tables = with_changes(
        {("site", "horizon"): '"terrain"', ("site", "horizon_altitude_deg"): "0.5"}
    )
    site = read_observation(write(folder, render(tables))).site
    assert (site.horizon, site.horizon_altitude_deg) == ("terrain", 0.5)


def test_calibration_resolved_against_the_toml_folder(folder: Path, tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    sub = folder / "sunset"
    (sub / "cal").mkdir(parents=True)
    (sub / "cal" / "c.json").write_text("{}")
    tables = with_changes({("camera", "calibration"): '"cal/c.json"'})
    path = sub / FILE_NAME
    path.write_text(render(tables))
    monkeypatch.chdir(folder)  # the working folder must not matter
    assert read_observation(path).camera.calibration == sub / "cal" / "c.json"


def test_toml_native_datetime_is_accepted(folder: Path) -> None:
    tables = with_changes({("camera", "video_start_utc"): "2026-06-21T20:40:00.125Z"})
    camera = read_observation(write(folder, render(tables))).camera
    assert camera.video_start_utc == parse_utc("2026-06-21T20:40:00.125Z", where="t")


# ---------------------------------------------------------------- file-level failures


def test_missing_file(tmp_path: Path) -> None:
    expect_error(tmp_path / FILE_NAME, "does not exist")


def test_folder_instead_of_file(tmp_path: Path) -> None:
    (tmp_path / FILE_NAME).mkdir()
    expect_error(tmp_path / FILE_NAME, "folder")


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root reads anything")
def test_unreadable_file(folder: Path) -> None:
    path = write(folder, render(VALID))
    path.chmod(0)
    try:
        expect_error(path, "cannot be read")
    finally:
        path.chmod(0o644)


def test_not_utf8(folder: Path) -> None:
    path = folder / FILE_NAME
    path.write_bytes(b'[site]\nname = "\xff"\n')
    expect_error(path, "UTF-8")


def test_toml_syntax_error_names_the_line(folder: Path) -> None:
    text = render(VALID).replace("eye_height_m = 12", "eye_height_m 12")
    line = text.splitlines().index("eye_height_m 12") + 1
    expect_error(write(folder, text), "TOML syntax error", f"line {line}")


def test_unknown_table(folder: Path) -> None:
    expect_error(write(folder, render(VALID) + "\n[optics]\nroll_deg = 1\n"),
                 "[optics]", "site, air, camera, model")


def test_top_level_key(folder: Path) -> None:
    expect_error(write(folder, "latitude_deg = 35.2\n" + render(VALID)), "latitude_deg")


def test_table_that_is_not_a_table(folder: Path) -> None:
    text = render({k: v for k, v in VALID.items() if k != "model"}) + "model = 3\n"
    # `model = 3` after [camera] belongs to [camera]: an unknown key there.
    expect_error(write(folder, text), "[camera] model is not a known key")
    expect_error(write(folder, "model = 3\n" + text.replace("model = 3\n", "")),
                 "[model] must be a table")


@pytest.mark.parametrize("table", ["air", "camera", "model"])
def test_missing_table_when_required(folder: Path, table: str) -> None:
    path = write(folder, render({k: v for k, v in VALID.items() if k != table}))
    expect_error(path, f"[{table}]", "missing", require=("site", table))
    # By default only [site] is required: every key of the other tables is optional.
    assert read_observation(path).site.latitude_deg == 35.2


def test_site_is_always_required(folder: Path) -> None:
    path = write(folder, render({k: v for k, v in VALID.items() if k != "site"}))
    expect_error(path, "[site]", "missing", require=())


def test_require_names_known_tables_only(folder: Path) -> None:
    with pytest.raises(ValueError, match="require"):
        read_observation(write(folder, render(VALID)), require=("site", "optics"))


# ---------------------------------------------------------------- key-level failures

# (table, key, literal or None to remove, fragments the message must hold)
BAD_KEYS = [
    ("site", "latitde_deg", "35.2", ["[site] latitde_deg is not a known key",
                                     "did you mean latitude_deg", "known: latitude_deg"]),
    ("camera", "roll_deg", "1.0", ["[camera] roll_deg is not a known key"]),
    ("site", "latitude_deg", None, ["[site] latitude_deg is required"]),
    ("site", "longitude_deg", None, ["[site] longitude_deg is required"]),
    ("site", "eye_height_m", None, ["[site] eye_height_m is required"]),
    ("site", "latitude_deg", '"35.2"', ["[site] latitude_deg must be a number", "string"]),
    ("site", "eye_height_m", "true", ["[site] eye_height_m must be a number", "boolean"]),
    ("air", "pressure_hPa", "[1016]", ["[air] pressure_hPa must be a number", "array"]),
    ("air", "temperature_C", "nan", ["[air] temperature_C must be a finite number"]),
    ("model", "layer_top_m", "inf", ["[model] layer_top_m must be a finite number"]),
    ("site", "horizon", "1", ["[site] horizon must be a string"]),
    ("site", "name", "3", ["[site] name must be a string"]),
    ("site", "name", '" "', ["[site] name must not be empty"]),
    ("camera", "calibration", "false", ["[camera] calibration must be a string"]),
    ("site", "latitude_deg", "90.5", ["[site] latitude_deg = 90.5", "-90..90"]),
    ("site", "latitude_deg", "-91", ["[site] latitude_deg = -91", "-90..90"]),
    ("site", "longitude_deg", "-180.1", ["[site] longitude_deg", "-180..360"]),
    ("site", "longitude_deg", "360.5", ["[site] longitude_deg", "-180..360"]),
    ("site", "eye_height_m", "-0.1", ["[site] eye_height_m = -0.1", ">= 0 and < 10000"]),
    ("site", "eye_height_m", "10000", ["[site] eye_height_m = 10000", "< 10000"]),
    ("site", "horizon", '"lake"', ['[site] horizon = "lake"', '"sea", "terrain"']),
    ("site", "horizon_altitude_deg", "0.5", ["[site] horizon_altitude_deg", '"terrain"']),
    ("air", "temperature_C", "-80.5", ["[air] temperature_C", "-80..60"]),
    ("air", "temperature_C", "61", ["[air] temperature_C", "-80..60"]),
    ("air", "pressure_hPa", "299", ["[air] pressure_hPa", "300..1100"]),
    ("air", "pressure_hPa", "1101", ["[air] pressure_hPa", "300..1100"]),
    ("air", "relative_humidity", "75", ["[air] relative_humidity", "0..1"]),
    ("air", "relative_humidity", "-0.01", ["[air] relative_humidity", "0..1"]),
    ("camera", "plate_scale_arcsec_per_px", "0", ["[camera] plate_scale_arcsec_per_px", "> 0"]),
    ("camera", "plate_scale_arcsec_per_px", "-2", ["[camera] plate_scale_arcsec_per_px"]),
    ("camera", "clock_uncertainty_s", "-0.1", ["[camera] clock_uncertainty_s", ">= 0"]),
    ("camera", "azimuth_deg", "-1", ["[camera] azimuth_deg", "0..360"]),
    ("camera", "azimuth_deg", "361", ["[camera] azimuth_deg", "0..360"]),
    ("camera", "clock_utc_offset_h", "14.5", ["[camera] clock_utc_offset_h", "-14..14"]),
    ("camera", "clock_utc_offset_h", "-15", ["[camera] clock_utc_offset_h", "-14..14"]),
    ("model", "layer_top_m", "0", ["[model] layer_top_m", "> 0 and <= 2000"]),
    ("model", "layer_top_m", "2000.5", ["[model] layer_top_m", "<= 2000"]),
    ("camera", "calibration", '"nowhere.json"', ["[camera] calibration", "nowhere.json",
                                                 "does not exist"]),
    ("camera", "calibration", '"."', ["[camera] calibration", "folder"]),
    ("camera", "video_start_utc", '"2026-06-21T21:40:00"', ["[camera] video_start_utc",
                                                            "no time zone"]),
    ("camera", "video_start_utc", "2026-06-21T21:40:00", ["[camera] video_start_utc",
                                                          "no time zone"]),
    ("camera", "video_start_utc", '"yesterday"', ["[camera] video_start_utc", "ISO 8601"]),
    ("camera", "video_start_utc", "1781998800", ["[camera] video_start_utc", "string"]),
]


@pytest.mark.parametrize(("table", "key", "literal", "fragments"), BAD_KEYS,
                         ids=[f"{t}.{k}={v}" for t, k, v, _ in BAD_KEYS])
def test_bad_key_is_refused(folder: Path, table: str, key: str, literal: str | None,
                            fragments: list[str]) -> None:
    expect_error(write(folder, render(with_changes({(table, key): literal}))), *fragments)


def test_terrain_requires_horizon_altitude(folder: Path) -> None:
    tables = with_changes({("site", "horizon"): '"terrain"'})
    expect_error(write(folder, render(tables)), "[site] horizon_altitude_deg is required")
    for bad in ("-5.5", "10.5"):
        tables["site"]["horizon_altitude_deg"] = bad
        expect_error(write(folder, render(tables)), "[site] horizon_altitude_deg", "-5..10")


def test_range_edges_are_accepted(folder: Path) -> None:
    tables = with_changes({
        ("site", "latitude_deg"): "-90", ("site", "longitude_deg"): "360",
        ("site", "eye_height_m"): "0", ("air", "temperature_C"): "60",
        ("air", "pressure_hPa"): "300", ("air", "relative_humidity"): "1",
        ("camera", "clock_uncertainty_s"): "0", ("camera", "clock_utc_offset_h"): "-14",
        ("model", "layer_top_m"): "2000",
    })
    obs = read_observation(write(folder, render(tables)))
    assert (obs.site.latitude_deg, obs.site.longitude_deg, obs.site.eye_height_m) == (
        -90.0, 0.0, 0.0)
    assert obs.model.layer_top_m == 2000.0


# ---------------------------------------------------------------- parse_utc / format_utc


def test_parse_utc_fractional_seconds_exact() -> None:
    t = parse_utc("2026-06-21T03:55:10.250Z", where="frames.csv")
    expected_whole = int(datetime(2026, 6, 21, 3, 55, 10, tzinfo=timezone.utc).timestamp())
    assert t == expected_whole + 0.25
    assert t - math.floor(t) == 0.25
    # Microseconds survive: the float nearest the exact value.
    assert parse_utc("2026-06-21T03:55:10.000001Z", where="x") == expected_whole + 1e-6


def test_parse_utc_offsets() -> None:
    utc = parse_utc("2026-06-21T03:55:10.250Z", where="x")
    assert parse_utc("2026-06-21T05:55:10.250+02:00", where="x") == utc
    assert parse_utc("2026-06-20T20:25:10.250-07:30", where="x") == utc
    assert parse_utc("2026-06-21T05:55:10.250+0200", where="x") == utc
    assert parse_utc("2026-06-21 05:55:10,250+02", where="x") == utc


@pytest.mark.parametrize("text", ["2026-06-21T03:55:10.250", "2026-06-21T03:55:10"])
def test_parse_utc_rejects_naive_times(text: str) -> None:
    with pytest.raises(InputError, match=r"frames.csv row 3: .* no time zone"):
        parse_utc(text, where="frames.csv row 3")


@pytest.mark.parametrize("text", ["2026-06-21", "03:55:10Z", "2026-06-21T03:55Z", "",
                                  "2026-02-30T00:00:00Z", "2026-06-21T24:00:00Z",
                                  "2026-06-21T23:59:60Z", "2026-06-21T03:55:10+24:00",
                                  "2026-06-21T03:55:10.Z"])
def test_parse_utc_rejects_malformed_times(text: str) -> None:
    with pytest.raises(InputError, match="frames.csv row 3"):
        parse_utc(text, where="frames.csv row 3")


def test_format_utc() -> None:
    t = parse_utc("2026-06-21T03:55:10.250Z", where="x")
    assert format_utc(t) == "2026-06-21T03:55:10.250Z"
    assert format_utc(t, 0) == "2026-06-21T03:55:10Z"
    assert format_utc(t, 1) == "2026-06-21T03:55:10.2Z"  # 0.25 is a tie: half to even
    assert format_utc(t + 0.9996) == "2026-06-21T03:55:11.250Z"
    assert format_utc(59.9996) == "1970-01-01T00:01:00.000Z"  # carry into the minute
    assert format_utc(-0.5, 1) == "1969-12-31T23:59:59.5Z"
    with pytest.raises(ValueError):
        format_utc(float("nan"))


utc_datetimes = st.datetimes(min_value=datetime(1900, 1, 1), max_value=datetime(2100, 1, 1),
                             timezones=st.just(timezone.utc))


@given(utc_datetimes)
def test_format_then_parse_round_trips_to_the_microsecond(moment: datetime) -> None:
    text = moment.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    t = parse_utc(text, where="x")
    assert format_utc(t, 6) == text
    assert parse_utc(format_utc(t, 6), where="x") == t
    micro = (moment - datetime(1970, 1, 1, tzinfo=timezone.utc)) // timedelta(microseconds=1)
    assert t == micro / 1e6


@given(utc_datetimes, st.integers(min_value=-14 * 60, max_value=14 * 60))
def test_offsets_denote_the_same_instant(moment: datetime, offset_min: int) -> None:
    local = moment.astimezone(timezone(timedelta(minutes=offset_min)))
    assert parse_utc(local.isoformat(), where="x") == parse_utc(
        moment.strftime("%Y-%m-%dT%H:%M:%S.%fZ"), where="x")


@given(st.floats(min_value=-2e9, max_value=4e9, allow_nan=False), st.integers(0, 6))
def test_parse_of_format_is_within_half_a_unit(t: float, digits: int) -> None:
    assert abs(parse_utc(format_utc(t, digits), where="x") - t) <= 0.5 * 10.0**-digits + 1e-6
