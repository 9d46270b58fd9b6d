"""Issue 7's end-to-end check: a report with the camera's calibration is at least as tight.

Invented data: the demo sunset folder (sample_frames/, simulated with a 4 arcsec/px
camera whose lens shifts red by (0.35, -0.05) px and blue by (-0.30, 0.10) px), and a
calibration sequence of the same camera with the Sun 5 deg up on the same evening,
rendered by tests/calib_synthetic.py and measured by ``limbtrace calibrate``.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from analyse.cli import main
from analyse.sun import sunset_time, time_of_altitude
from calibration.run import run_calibrate
from tests.calib_synthetic import tracking_scene, write_folder

SAMPLE = Path(__file__).resolve().parent.parent / "sample_frames"
LAT, LON, EYE, DATE = 57.1, -20.4, 14.0, "2026-06-21"


@pytest.fixture(scope="module")
def calibration(tmp_path_factory) -> Path:
    ss = sunset_time(DATE, LAT, LON, EYE)
    t0 = time_of_altitude(5.0, ss - 2400.0, LAT, LON, EYE)
    scene = tracking_scene(t0, 240.0, 8, 1, shape=(560, 640), plate_scale_arcsec_per_px=4.0,
                           roll_deg=0.0, latitude_deg=LAT, longitude_deg=LON, eye_height_m=EYE,
                           temperature_C=11.5, pressure_hPa=1018.0,
                           colour_d0_px={"r": (0.35, -0.05), "b": (-0.30, 0.10)},
                           colour_k={"r": 0.0, "b": 0.0})
    folder = write_folder(scene, tmp_path_factory.mktemp("cal") / "camera-run")
    doc = run_calibrate(folder, quiet=True)
    return Path(doc["path"])


def _report(folder: Path, out: Path) -> dict:
    assert main(["report", str(folder), "--out", str(out), "--quiet"]) == 0
    return json.loads((out / "result.json").read_text())


def test_calibration_tightens_or_keeps_the_interval_and_is_named(calibration, tmp_path):
    plain = tmp_path / "plain"
    shutil.copytree(SAMPLE, plain)
    calibrated = tmp_path / "calibrated"
    shutil.copytree(SAMPLE, calibrated)
    shutil.copy(calibration, calibrated / "calibration.json")
    toml = (calibrated / "observation.toml").read_text()
    lines = [ln for ln in toml.splitlines() if not ln.startswith("plate_scale_arcsec_per_px")]
    toml = "\n".join(lines).replace("[camera]", '[camera]\ncalibration = "calibration.json"')
    (calibrated / "observation.toml").write_text(toml + "\n")

    without = _report(plain, tmp_path / "plain-report")
    with_cal = _report(calibrated, tmp_path / "calibrated-report")
    assert with_cal["observables"]["plate_scale_source"] == "calibration"
    assert with_cal["observables"]["colour_offset_source"] == "calibration"
    lo0, hi0 = without["inference"]["interval_2sigma_K_per_km"]
    lo1, hi1 = with_cal["inference"]["interval_2sigma_K_per_km"]
    # Issue 7: tighter or equal (5 % slack for the profile's 0.05 K/km grid).
    assert hi1 - lo1 <= 1.05 * (hi0 - lo0) + 0.1, (without["inference"], with_cal["inference"])
    html = (tmp_path / "calibrated-report" / "report.html").read_text()
    assert "calibration.json" in html
