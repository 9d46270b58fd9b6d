"""``limbtrace verify`` end to end: genuine simulated sightings and tampered copies (issue 6).

Genuine sightings are simulated recordings (``tests.e2e_helpers.RECORDINGS``, shared
with test_end_to_end.py) in three atmospheres and cameras, and one still frame taken
from a clip near red last light. Tampered copies are made from the decoded frames of a
genuine clip (re-encoded as PNG with frames.csv) or from its observation.toml, and each
must be judged inconsistent with the check that names the tampering among the failed
ones. A small, blurred, saturated photo cannot be judged: inconclusive.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from analyse.frames import linear_to_srgb, srgb_to_linear
from analyse.verify import verify_measurement
from tests.e2e_helpers import (
    RECORDINGS,
    read_frames_csv,
    run_cli,
    scenario,
    write_frames_csv,
)

pytestmark = pytest.mark.slow

CHECK_NAMES = {"sun-at-horizon", "green-segment", "offset-size", "duration-size",
               "lens-fringing", "green-cast", "frame-order", "duplicate-frames", "timing",
               "saturation", "chroma-subsampling", "sun-direction"}

# Recordings of this file only.
LOCAL = {
    # Lateral colour posing as a rim: red and blue 2 px below green, at 12 arcsec/px,
    # where the air's own green-above-red offset (about 6 arcsec) is half a pixel.
    "fringe": scenario(camera={"width_px": 480, "height_px": 270,
                               "plate_scale_arcsec_per_px": 12.0, "horizon_row_px": 180.0,
                               "channel_offset_px": {"r": [0.0, 2.0], "b": [0.0, 2.0]}},
                       output={"seed": 11}),
    # A small, blurred, overexposed Sun (about 120 px across, blur 2.5 px, 40x full scale).
    "smallsat": scenario(time={"last_seconds": 6.0, "after_seconds": 0.5, "burst": None,
                               "fps": 2.0},
                         camera={"width_px": 320, "height_px": 180,
                                 "plate_scale_arcsec_per_px": 16.0, "horizon_row_px": 120.0,
                                 "psf_sigma_px": 2.5, "exposure_level": 40.0},
                         output={"seed": 12}),
}


@pytest.fixture(scope="session")
def recording(e2e_cache):
    return lambda name: e2e_cache.recording(name, {**RECORDINGS, **LOCAL}[name])


def _verdict(e2e_cache, folder: Path, key: str) -> dict:
    run, verdict = e2e_cache.verify(folder, key)
    assert run.code == 0, run.stderr
    assert verdict is not None and verdict["schema"] == 1
    assert {c["name"] for c in verdict["checks"]} <= CHECK_NAMES
    return verdict


def _failed(verdict: dict) -> set[str]:
    return {c["name"] for c in verdict["checks"] if c["passed"] is False and c["confident"]}


def _frames(folder: Path) -> list[tuple[str, str]]:
    return read_frames_csv(folder / "frames.csv")


def _rewrite(rec, dest: Path, indices, *, edit=None, shift_s: float = 0.0,
             order=None, observation: str | None = None) -> Path:
    """A sunset folder made from some frames of a PNG recording, edited.

    ``edit(linear_rgb) -> linear_rgb`` changes the decoded frames (re-encoded as 8-bit
    sRGB PNG); ``shift_s`` moves every time in frames.csv; ``order`` puts frame
    ``order[k]``'s picture under frame ``k``'s name and time; ``observation`` replaces
    observation.toml.
    """
    from analyse.observation import format_utc, parse_utc

    dest.mkdir()
    rows = [_frames(rec.folder)[i] for i in indices]
    pictures = [rows[k][0] for k in (order if order is not None else range(len(rows)))]
    for (name, _), source in zip(rows, pictures):
        if edit is None:
            shutil.copyfile(rec.folder / source, dest / name)
            continue
        rgb = np.asarray(Image.open(rec.folder / source).convert("RGB"))
        lin = edit(srgb_to_linear(rgb.astype(np.float64) / 255.0))
        out = np.round(linear_to_srgb(np.clip(lin, 0.0, 1.0)) * 255.0).astype(np.uint8)
        Image.fromarray(out).save(dest / name)
    times = [format_utc(parse_utc(t, where="time_utc") + shift_s, 3) for _, t in rows]
    write_frames_csv(dest / "frames.csv", [(n, t) for (n, _), t in zip(rows, times)])
    text = (rec.folder / "observation.toml").read_text(encoding="utf-8")
    (dest / "observation.toml").write_text(observation or text, encoding="utf-8")
    return dest


def _tampered(e2e_cache, recording, key: str, **edits) -> dict:
    """Verdict of a copy of the final 56 frames of the base clip (8 fps), edited."""
    rec = recording("base")
    folder = e2e_cache.once(f"tampered-{key}", lambda d: _rewrite(
        rec, d / "sunset", range(40, 96), **edits))
    return _verdict(e2e_cache, folder / "sunset", f"tampered-{key}")


# --- genuine sightings --------------------------------------------------------------------


@pytest.mark.parametrize("name", ["base", "shake", "lateral"])
def test_genuine_clips_are_consistent(e2e_cache, recording, name):
    """GAMMA 6.5 K/km at 35 N (PNG), 20 K/km at 45 N (shake, roll), 12 K/km at 40 N
    through a lens with 1.5 px of lateral colour (measured on the horizon, corrected)."""
    rec = recording(name)
    verdict = _verdict(e2e_cache, rec.folder, name)
    assert verdict["verdict"] == "consistent", verdict["summary"]
    passed = {c["name"] for c in verdict["checks"] if c["passed"]}
    assert {"sun-at-horizon", "green-segment", "offset-size", "lens-fringing", "green-cast",
            "frame-order", "timing"} <= passed


def _still_near_red_last_light(rec, dest: Path, before_s: float = 0.25) -> Path:
    """One frame from a genuine clip, the one nearest ``before_s`` before red last light."""
    from analyse.observation import parse_utc

    rows = _frames(rec.folder)
    t = np.array([parse_utc(time, where="time_utc") for _, time in rows])
    k = int(np.argmin(np.abs(t - (rec.truth["last_light_unix_s"]["r"] - before_s))))
    return _rewrite(rec, dest, [k])


def test_a_single_still_of_a_genuine_sighting_is_consistent(e2e_cache, recording):
    rec = recording("base")
    folder = e2e_cache.once("still-base", lambda d: _still_near_red_last_light(rec, d / "s"))
    verdict = _verdict(e2e_cache, folder / "s", "still-base")
    assert verdict["verdict"] == "consistent", verdict["summary"]
    checks = {c["name"]: c for c in verdict["checks"]}
    assert checks["green-segment"]["passed"] and checks["offset-size"]["passed"]
    assert "frame-order" not in checks and "timing" not in checks  # nothing to order


# --- tampered copies -----------------------------------------------------------------------


def _boost_green_in_disc(lin: np.ndarray) -> np.ndarray:
    """Green x 3 wherever the Sun's disc is (red far above the sky's level)."""
    red = lin[..., 0]
    disc = red > 8.0 * np.median(red)
    out = lin.copy()
    out[..., 1] = np.where(disc, 3.0 * lin[..., 1], lin[..., 1])
    return out


def test_green_boosted_disc_is_a_green_cast(e2e_cache, recording):
    verdict = _tampered(e2e_cache, recording, "cast", edit=_boost_green_in_disc)
    assert verdict["verdict"] == "inconsistent"
    assert "green-cast" in _failed(verdict)


def test_clock_three_hours_off_puts_the_sun_away_from_the_horizon(e2e_cache, recording):
    verdict = _tampered(e2e_cache, recording, "clock", shift_s=3 * 3600.0)
    assert verdict["verdict"] == "inconsistent"
    assert "sun-at-horizon" in _failed(verdict)
    reason = next(c["reason"] for c in verdict["checks"] if c["name"] == "sun-at-horizon")
    assert 2.0 <= float(re.search(r"about ([\d.]+) h", reason)[1]) <= 4.0


def test_wrong_site_puts_the_sun_away_from_the_horizon(e2e_cache, recording):
    text = (recording("base").folder / "observation.toml").read_text(encoding="utf-8")
    moved = re.sub(r"longitude_deg = \S+", "longitude_deg = 25.0", text)  # 45 deg east
    assert moved != text
    verdict = _tampered(e2e_cache, recording, "site", observation=moved)
    assert verdict["verdict"] == "inconsistent"
    assert "sun-at-horizon" in _failed(verdict)


def test_shuffled_frames_are_out_of_order(e2e_cache, recording):
    order = np.random.default_rng(3).permutation(56)
    verdict = _tampered(e2e_cache, recording, "shuffled", order=order)
    assert verdict["verdict"] == "inconsistent"
    assert "frame-order" in _failed(verdict)
    # Found by the jumps themselves, not only by the sign of the mean slope.
    detail = next(c["detail"] for c in verdict["checks"] if c["name"] == "frame-order")
    assert int(re.search(r"(\d+) jumps", detail)[1]) >= 10


def test_lens_fringe_posing_as_a_rim(e2e_cache, recording):
    verdict = _verdict(e2e_cache, recording("fringe").folder, "fringe")
    assert verdict["verdict"] == "inconsistent"
    assert "lens-fringing" in _failed(verdict)


def test_small_blurred_saturated_photo_is_inconclusive(e2e_cache, recording):
    rec = recording("smallsat")
    # 1.3 s before red last light: the thinner segments later on no longer clip.
    folder = e2e_cache.once("still-smallsat",
                            lambda d: _still_near_red_last_light(rec, d / "s", 1.3))
    verdict = _verdict(e2e_cache, folder / "s", "still-smallsat")
    assert verdict["verdict"] == "inconclusive", verdict["summary"]
    undecided = {c["name"] for c in verdict["checks"] if c["passed"] is None}
    assert "saturation" in undecided
    assert not _failed(verdict)


# --- the command's contract ----------------------------------------------------------------


def test_verdict_files_and_page(e2e_cache, recording):
    run, verdict = e2e_cache.verify(recording("base").folder, "base")
    out = e2e_cache.root / "verify-base" / "out"
    assert {p.name for p in out.iterdir()} == {"verdict.json", "verdict.html"}
    assert run.stdout.splitlines()[0].endswith(": consistent")
    html = (out / "verdict.html").read_text(encoding="utf-8")
    assert "Test &lt;b&gt;x&lt;/b&gt; shore &amp; cove" in html and "<b>x</b>" not in html
    assert json.loads((out / "verdict.json").read_text(encoding="utf-8")) == verdict


def test_library_and_command_agree(e2e_cache, recording):
    """verify_measurement on the measured folder gives the command's verdict."""
    from analyse.observation import read_observation
    from analyse.pipeline import measure_folder

    rec = recording("smallsat")
    obs = read_observation(rec.folder / "observation.toml")
    verdict = verify_measurement(measure_folder(rec.folder, obs, progress=False), obs)
    _, doc = e2e_cache.verify(rec.folder, "smallsat-clip")
    assert doc is not None and verdict.as_json() == doc


@pytest.mark.parametrize("case, words", [
    ("missing", "folder does not exist"),
    ("empty", "has no frames"),
    ("no-observation", "observation.toml is missing"),
    ("bad-observation", "latitude_deg"),
])
def test_bad_input_exits_2_with_one_line(tmp_path, recording, case, words):
    folder = tmp_path / "claim"
    if case != "missing":
        folder.mkdir()
    if case == "empty":
        shutil.copyfile(recording("base").folder / "observation.toml",
                        folder / "observation.toml")
    if case in ("no-observation", "bad-observation"):
        shutil.copyfile(recording("base").folder / "frame_00050.png", folder / "a.png")
        write_frames_csv(folder / "frames.csv", [("a.png", "2026-06-21T20:00:00.000Z")])
    if case == "bad-observation":
        (folder / "observation.toml").write_text(
            "[site]\nlatitude_deg = 123.0\nlongitude_deg = 0.0\neye_height_m = 5.0\n",
            encoding="utf-8")
    run = run_cli("verify", folder, "--quiet")
    assert run.code == 2
    assert run.stderr.startswith("limbtrace: error: ") and run.stderr.count("\n") == 1
    assert words in run.stderr and "Traceback" not in run.stderr
    assert not (tmp_path / "claim-verify").exists()
