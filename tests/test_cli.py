"""The command line: the contract's JSON keys, exit codes and one-line errors."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from analyse.cli import main

OBS = """[site]
name = "Test shore"
latitude_deg = 35.2
longitude_deg = -20.4
eye_height_m = 12.0

[air]
temperature_C = 17.0
pressure_hPa = 1016.0
relative_humidity = 0.75
"""


def write_obs(tmp_path: Path, text: str = OBS) -> Path:
    p = tmp_path / "observation.toml"
    p.write_text(text, encoding="utf-8")
    return p


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_predict_json_carries_the_contract_keys(tmp_path, capsys):
    code, out, err = run(capsys, "predict", str(write_obs(tmp_path)), "--date", "2026-06-21",
                         "--json")
    assert code == 0, err
    doc = json.loads(out)
    for key in ("schema", "lapse_rate_K_per_km", "layer_top_m", "dip_arcmin",
                "horizon_refraction_arcmin", "last_light_utc", "green_duration_s",
                "rg_offset_arcsec"):
        assert key in doc
    assert set(doc["horizon_refraction_arcmin"]) == {"r", "g", "b"}
    assert set(doc["last_light_utc"]) == {"r", "g", "b"}
    assert doc["schema"] == 1 and doc["lapse_rate_K_per_km"] == 6.5
    # Red sets first, blue last; the green segment is positive and under two seconds
    # (common practice, no source: one to two seconds at mid-latitudes).
    t = doc["last_light_utc"]
    assert t["r"] < t["g"] < t["b"]
    assert 0.2 < doc["green_duration_s"] < 2.0


def test_predict_text_names_units_and_the_safety_caution(tmp_path, capsys):
    code, out, _ = run(capsys, "predict", str(write_obs(tmp_path)), "--date", "2026-06-21")
    assert code == 0
    assert "arcmin" in out and "Test shore" in out and "solar filter" in out


def test_refraction_json_carries_the_contract_keys(capsys):
    code, out, err = run(capsys, "refraction", "--altitudes", "0,1,45", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["schema"] == 1
    assert doc["apparent_altitude_deg"] == [0.0, 1.0, 45.0]
    assert len(doc["refraction_arcmin"]) == 3 and doc["dip_arcmin"] == 0.0
    # Bennett 1982 at 45 deg (10 C, 1010 hPa): cot(45 + 7.31/49.4) = 0.995'; refined 0.967'.
    assert abs(doc["refraction_arcmin"][2] - 0.97) < 0.05


def test_refraction_below_the_sea_horizon_is_null(capsys):
    code, out, _ = run(capsys, "refraction", "--eye-height-m", "10", "--altitudes=-0.5,0",
                       "--json")
    doc = json.loads(out)
    assert code == 0 and doc["refraction_arcmin"][0] is None and doc["dip_arcmin"] > 5.0


@pytest.mark.parametrize("edit, fragment", [
    ("latitude_deg = 35.2", "latitude_deg = 95"),
    ("eye_height_m = 12.0", "eye_height_m = -3"),
    ("name = \"Test shore\"", "nmae = \"Test shore\""),
])
def test_bad_observation_exits_2_with_one_line_naming_the_key(tmp_path, capsys, edit, fragment):
    path = write_obs(tmp_path, OBS.replace(edit, fragment))
    code, out, err = run(capsys, "predict", str(path), "--date", "2026-06-21")
    key = fragment.split(" =")[0]
    assert code == 2
    assert err.count("\n") == 1 and key in err and "observation.toml" in err
    assert "Traceback" not in err


def test_missing_file_exits_2(tmp_path, capsys):
    code, _, err = run(capsys, "predict", str(tmp_path / "nope.toml"), "--date", "2026-06-21")
    assert code == 2 and "nope.toml" in err and err.count("\n") == 1


def test_bad_option_values_exit_2(capsys):
    code, _, err = run(capsys, "refraction", "--humidity", "3")
    assert code == 2 and "--humidity" in err
    code, _, err = run(capsys, "refraction", "--altitudes", "a,b")
    assert code == 2 and "--altitudes" in err


def test_report_refuses_a_missing_folder_and_a_folder_without_observation(tmp_path, capsys):
    code, _, err = run(capsys, "report", str(tmp_path / "none"))
    assert code == 2 and "does not exist" in err
    empty = tmp_path / "empty"
    empty.mkdir()
    code, _, err = run(capsys, "report", str(empty))
    assert code == 2 and "observation.toml" in err


def test_console_script_exit_status(tmp_path):
    """The installed entry point exits 2 on bad input (a separate process)."""
    proc = subprocess.run([sys.executable, "-m", "analyse.cli", "predict",
                           str(tmp_path / "x.toml"), "--date", "2026-06-21"],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2 and proc.stderr.startswith("limbtrace: error:")


def test_predict_in_a_duct_says_so_instead_of_failing(tmp_path, capsys):
    # -130 K/km is past the ducting threshold (ray curvature equal to the Earth's near
    # -127 K/km, DESIGN.md): the horizon ray is trapped, last light is not defined.
    code, out, err = run(capsys, "predict", str(write_obs(tmp_path)), "--date", "2026-06-21",
                         "--lapse-rate", "-130", "--json")
    doc = json.loads(out)
    assert code == 0, err
    assert doc["green_duration_s"] is None and doc["last_light_utc"]["g"] is None
    assert any("duct" in n for n in doc["notes"])
