"""Tests for analyse.scenario: reading and validating scenario files for simulate."""

from __future__ import annotations

from pathlib import Path

import pytest

from analyse.errors import InputError
from analyse.scenario import Burst, read_scenario

VALID: dict[str, dict[str, str]] = {
    "site": {"name": '"Cape Ardent lookout"', "latitude_deg": "57.1",
             "longitude_deg": "-20.4", "eye_height_m": "12"},
    "air": {"temperature_C": "12.0", "pressure_hPa": "1016.0", "relative_humidity": "0.75"},
    "atmosphere": {"lapse_rate_K_per_km": "6.5", "layer_top_m": "100.0"},
    "time": {"date": '"2026-06-21"', "last_seconds": "20.0", "fps": "30"},
    "camera": {"width_px": "640", "height_px": "480", "plate_scale_arcsec_per_px": "5.0"},
    "output": {"format": '"png"'},
}


def write(folder: Path, changes: dict[tuple[str, str], str | None] | None = None,
          extra: str = "") -> Path:
    """VALID with (table, key) set to a TOML literal (None removes it), written to a file."""
    tables = {name: dict(keys) for name, keys in VALID.items()}
    for (table, key), literal in (changes or {}).items():
        if literal is None:
            tables[table].pop(key, None)
        else:
            tables.setdefault(table, {})[key] = literal
    text = "\n\n".join(f"[{name}]\n" + "\n".join(f"{k} = {v}" for k, v in keys.items())
                       for name, keys in tables.items())
    path = folder / "scenario.toml"
    path.write_text(text + "\n" + extra, encoding="utf-8")
    return path


def test_valid_file_and_defaults(tmp_path: Path) -> None:
    sc = read_scenario(write(tmp_path))
    assert sc.site.latitude_deg == 57.1 and sc.site.name == "Cape Ardent lookout"
    assert sc.timing.last_seconds == 20.0 and sc.timing.fps == 30.0
    assert sc.timing.after_seconds == 1.0  # default
    assert sc.camera.horizon_row() == pytest.approx(0.6 * 480)  # default, module docstring
    assert sc.camera.offset_px("r") == (0.0, 0.0)
    assert sc.camera.exposure == "locked" and sc.output.format == "png"
    assert sc.bit_depth == 8
    assert sc.scene.glitter is True


def test_longitude_wraps_and_integers_accepted(tmp_path: Path) -> None:
    sc = read_scenario(write(tmp_path, {("site", "longitude_deg"): "339"}))
    assert sc.site.longitude_deg == pytest.approx(-21.0)


def test_explicit_window_profile_offsets_and_bursts(tmp_path: Path) -> None:
    changes = {("time", "last_seconds"): None, ("time", "fps"): None,
               ("time", "start_utc"): '"2026-06-21T22:40:00Z"',
               ("time", "end_utc"): "2026-06-21T22:41:00.5Z",  # a TOML date-time
               ("atmosphere", "lapse_rate_K_per_km"): None,
               ("atmosphere", "profile_height_m"): "[0, 1, 10, 100]",
               ("atmosphere", "profile_temperature_C"): "[16, 14, 13.5, 13]",
               ("air", "temperature_C"): None,
               ("camera", "channel_offset_px"): "{r = [0.3, 0.0], b = [-0.3, 0.1]}",
               ("output", "format"): '"tiff"'}
    burst = ("\n[[time.burst]]\nstart_s = 0.0\ncount = 10\nfps = 20\n"
             "\n[[time.burst]]\nstart_s = 30.0\ncount = 5\nfps = 10.0\n")
    sc = read_scenario(write(tmp_path, changes, extra=burst))
    assert sc.timing.end_unix_s - sc.timing.start_unix_s == pytest.approx(60.5)
    assert sc.timing.bursts == (Burst(0.0, 10, 20.0), Burst(30.0, 5, 10.0))
    assert sc.atmosphere.lapse_rate_K_per_km is None
    assert sc.atmosphere.profile_height_m == (0.0, 1.0, 10.0, 100.0)
    assert sc.camera.offset_px("b") == (-0.3, 0.1)
    assert sc.bit_depth == 16


@pytest.mark.parametrize(
    ("changes", "needle"),
    [
        ({("camera", "colour"): "1"}, "[camera] colour is not a known key"),
        ({("camera", "plate_scale_arcsec_per_px"): "-2.0"}, "plate_scale_arcsec_per_px"),
        ({("camera", "plate_scale_arcsec_per_px"): "0"}, "plate_scale_arcsec_per_px"),
        ({("time", "fps"): "0"}, "[time] fps = 0"),
        ({("time", "fps"): '"30"'}, "[time] fps must be a number"),
        ({("site", "latitude_deg"): "95"}, "[site] latitude_deg"),
        ({("site", "latitude_deg"): None}, "[site] latitude_deg is required"),
        ({("site", "eye_height_m"): "true"}, "[site] eye_height_m must be a number"),
        ({("air", "relative_humidity"): "1.5"}, "[air] relative_humidity"),
        ({("time", "date"): '"21/06/2026"'}, "[time] date"),
        ({("time", "start_utc"): '"2026-06-21T22:40:00Z"'}, "end_utc"),
        ({("time", "frame_times_s"): "[0.0, 1.0]"}, "give exactly one"),
        ({("time", "fps"): None}, "give exactly one"),
        ({("time", "fps_jitter"): "0.9"}, "[time] fps_jitter"),
        ({("camera", "exposure"): '"manual"'}, "[camera] exposure"),
        ({("camera", "width_px"): "640.5"}, "[camera] width_px must be an integer"),
        ({("camera", "horizon_row_px"): "480"}, "[camera] horizon_row_px"),
        ({("camera", "channel_offset_px"): "{g = [1.0, 0.0]}"}, "channel_offset_px"),
        ({("camera", "channel_offset_px"): "{r = [1.0]}"}, "channel_offset_px"),
        ({("camera", "bands_csv"): '"missing.csv"'}, "[camera] bands_csv"),
        ({("output", "format"): '"gif"'}, "[output] format"),
        ({("output", "format"): '"h264"'}, None),  # valid: 640 x 480 is even
        ({("output", "format"): '"h264"', ("camera", "width_px"): "641"}, "must be even"),
        ({("atmosphere", "profile_height_m"): "[0, 10]"}, "profile_temperature_C"),
        ({("atmosphere", "lapse_rate_K_per_km"): None,
          ("atmosphere", "profile_height_m"): "[1, 10]",
          ("atmosphere", "profile_temperature_C"): "[15, 14]",
          ("air", "temperature_C"): None}, "must start at 0"),
        ({("atmosphere", "profile_height_m"): "[0, 10]",
          ("atmosphere", "profile_temperature_C"): "[15, 14]",
          ("air", "temperature_C"): None}, "cannot be given with a temperature profile"),
        ({("atmosphere", "lapse_rate_K_per_km"): None,
          ("atmosphere", "profile_height_m"): "[0, 10]",
          ("atmosphere", "profile_temperature_C"): "[15, 14]"}, "[air] temperature_C"),
    ],
)
def test_bad_keys_are_refused_with_file_and_key(tmp_path: Path, changes, needle) -> None:
    path = write(tmp_path, changes)
    if needle is None:
        read_scenario(path)
        return
    with pytest.raises(InputError) as info:
        read_scenario(path)
    line = info.value.one_line()
    assert needle in line
    assert str(path) in line and "\n" not in line


def test_unknown_table_missing_table_syntax_and_missing_file(tmp_path: Path) -> None:
    with pytest.raises(InputError, match=r"unknown table \[lens\]"):
        read_scenario(write(tmp_path, extra="[lens]\nfocal_mm = 600\n"))
    path = write(tmp_path)
    path.write_text(path.read_text().replace("[camera]", "[kamera]"))
    with pytest.raises(InputError, match="unknown table"):
        read_scenario(path)
    path.write_text("[site\n")
    with pytest.raises(InputError, match="TOML syntax error"):
        read_scenario(path)
    path.write_text('[site]\nlatitude_deg = 1.0\nlongitude_deg = 1.0\neye_height_m = 1.0\n')
    with pytest.raises(InputError, match=r"table \[time\] is missing"):
        read_scenario(path)
    with pytest.raises(InputError, match="does not exist"):
        read_scenario(tmp_path / "nope.toml")


def test_bad_burst_entries(tmp_path: Path) -> None:
    changes = {("time", "fps"): None}
    bad = "\n[[time.burst]]\nstart_s = 0.0\ncount = 0\nfps = 20\n"
    with pytest.raises(InputError, match=r"\[time.burst #1\] count"):
        read_scenario(write(tmp_path, changes, extra=bad))
    bad = "\n[[time.burst]]\nstart_s = 0.0\ncount = 3\nrate = 20\n"
    with pytest.raises(InputError, match="rate is not a known key"):
        read_scenario(write(tmp_path, changes, extra=bad))


def test_times_need_a_zone(tmp_path: Path) -> None:
    changes = {("time", "last_seconds"): None, ("time", "start_utc"): "2026-06-21T22:40:00",
               ("time", "end_utc"): '"2026-06-21T22:41:00Z"'}
    with pytest.raises(InputError, match="no time zone"):
        read_scenario(write(tmp_path, changes))
    changes[("time", "start_utc")] = '"2026-06-21T22:40:00"'
    with pytest.raises(InputError, match="no time zone"):
        read_scenario(write(tmp_path, changes))
