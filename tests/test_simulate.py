"""Tests for analyse.simulate and analyse.writers: synthetic sunsets from the forward model.

The frames are checked by pixel statistics against the forward model they come from
(last light, disc width and flattening, mirage images, reddening) and read back with the
project's own readers (frames.csv, EXIF, video timestamps). Images are small and the
scenes black where the test needs only the Sun.
"""

from __future__ import annotations

import dataclasses
import json
import tracemalloc
from pathlib import Path

import numpy as np
import pytest

from analyse import disc
from analyse.errors import InputError
from analyse.frames import open_frames, srgb_to_linear
from analyse.observation import read_observation
from analyse.scenario import Burst, read_scenario
from analyse.simulate import (
    Simulation,
    _check_span,
    _frame_times,
    disc_area_below_left,
    encode_srgb,
    iter_frames,
    prepare_simulation,
    render_radiance,
)
from analyse.sun import sun_track
from analyse.writers import run_simulate, truth_path
from calibration.bands import airmass_kasten_young1989

DETECTION = 1e-4  # predict's detection level (analyse.predict.DETECTION_FRACTION)
PLATE = 10.0  # arcsec/px in the physics tests

BASE: dict[str, dict[str, str]] = {
    "site": {"latitude_deg": "35.2", "longitude_deg": "-20.4", "eye_height_m": "12.0"},
    "air": {"temperature_C": "17.0", "pressure_hPa": "1016.0", "relative_humidity": "0.75"},
    "atmosphere": {"lapse_rate_K_per_km": "6.5"},
    "time": {"date": '"2026-06-21"', "last_seconds": "1.5", "fps": "30"},
    "camera": {"width_px": "160", "height_px": "120", "plate_scale_arcsec_per_px": "10.0",
               "horizon_row_px": "100.0", "psf_sigma_px": "0.0"},
    "scene": {"sky_level": "0.0", "sea_level": "0.0", "glitter": "false"},
}


def make_scenario(folder: Path, changes: dict[tuple[str, str], str | None] | None = None,
                  name: str = "scenario.toml") -> Path:
    """BASE with (table, key) set to a TOML literal (None removes the key)."""
    tables = {t: dict(keys) for t, keys in BASE.items()}
    for (table, key), literal in (changes or {}).items():
        if literal is None:
            tables[table].pop(key, None)
        else:
            tables.setdefault(table, {})[key] = literal
    text = "\n".join(f"[{t}]\n" + "\n".join(f"{k} = {v}" for k, v in keys.items())
                     for t, keys in tables.items())
    path = folder / name
    path.write_text(text + "\n", encoding="utf-8")
    return path


def fractions(sim: Simulation, image: np.ndarray, index: int) -> np.ndarray:
    """Each channel's summed signal over the whole disc's, seen through the horizon ray."""
    sd_px = sim.track.semidiameter_arcsec[index] / sim.scenario.camera.plate_scale_arcsec_per_px
    whole = [np.sum(c.weight * np.exp(-c.tau * c.horizon_airmass) * disc.total_flux(c.limb_u))
             * sd_px**2 for c in sim.channels]
    return image.reshape(-1, 3).sum(axis=0) / np.array(whole)


def edges(profile: np.ndarray) -> tuple[float, float]:
    """Sub-pixel ends of a lit run: an end pixel counts by its share of its inner neighbour."""
    lit = np.nonzero(profile > 1e-3 * profile.max())[0]
    i0, i1 = lit[0], lit[-1]
    return (i0 + 0.5 - profile[i0] / profile[i0 + 1],
            i1 - 0.5 + profile[i1] / profile[i1 - 1])


def with_camera(sim: Simulation, **changes) -> Simulation:
    """The same traced simulation with other camera settings."""
    camera = dataclasses.replace(sim.scenario.camera, **changes)
    return dataclasses.replace(sim, scenario=dataclasses.replace(sim.scenario, camera=camera))


def subset(sim: Simulation, frames: slice) -> Simulation:
    """The same simulation with only some of its frames."""
    track = dataclasses.replace(sim.track, **{
        f.name: getattr(sim.track, f.name)[frames] for f in dataclasses.fields(sim.track)})
    return dataclasses.replace(sim, frame_times_unix_s=sim.frame_times_unix_s[frames],
                               track=track, sun_light=sim.sun_light[:, frames])


@pytest.fixture(scope="module")
def standard(tmp_path_factory) -> Simulation:
    """6.5 K/km, default bands, the last 1.5 s before green last light and 1 s after, 30 fps."""
    return prepare_simulation(read_scenario(make_scenario(tmp_path_factory.mktemp("std"))))


# The last 2.5 s before green last light at 30 fps, plus one frame 200 s earlier.
LATE = "[0.0, " + ", ".join(f"{197.5 + k / 30:.4f}" for k in range(106)) + "]"


@pytest.fixture(scope="module")
def single_node(tmp_path_factory) -> dict[str, Simulation]:
    """One wavelength per channel (sharp edges), GAMMA 6.5 and -40 K/km, wide frames."""
    out = {}
    for gamma in ("6.5", "-40.0"):
        path = make_scenario(tmp_path_factory.mktemp("node"), {
            ("atmosphere", "lapse_rate_K_per_km"): gamma, ("time", "last_seconds"): "200.0",
            ("time", "fps"): None, ("time", "frame_times_s"): LATE,
            ("camera", "wavelengths_per_band"): "1", ("camera", "width_px"): "800",
            ("camera", "height_px"): "240", ("camera", "horizon_row_px"): "230.0"})
        out[gamma] = prepare_simulation(read_scenario(path))
    return out


def test_disc_area_below_left_against_counting() -> None:
    """H(x, y) equals the disc area counted on a fine grid (5e-4 of grid cell noise)."""
    g = np.linspace(-1.0, 1.0, 2001)
    xx, yy = np.meshgrid(g, g)
    inside = xx**2 + yy**2 < 1
    cell = (g[1] - g[0]) ** 2
    for x, y in [(0.3, 0.5), (-0.7, 0.2), (0.9, -0.6), (0.1, -0.95), (-0.2, 0.99), (1, 1)]:
        counted = np.count_nonzero(inside & (xx < x) & (yy < y)) * cell
        assert float(disc_area_below_left(np.array(x), np.array(y))) == pytest.approx(
            counted, abs=3e-3)
    assert float(disc_area_below_left(np.array(2.0), np.array(2.0))) == pytest.approx(np.pi)


def test_last_light_matches_predict(standard: Simulation) -> None:
    """Each channel's light crosses predict's detection level within one frame interval."""
    times = standard.frame_times_unix_s
    f = np.array([fractions(standard, render_radiance(standard, i), i)
                  for i in range(times.size)])
    step = 1 / 30
    for c, name in enumerate("rgb"):
        predicted = standard.prediction.last_light_unix_s[name]
        lit = np.nonzero(f[:, c] >= DETECTION)[0][-1]
        assert times[lit] <= predicted < times[lit] + step + 1e-6
        # Sharper: the crossing interpolated in f^(2/3) (a sliver's flux grows as h^1.5).
        g = f[lit:lit + 2, c] ** (2 / 3)
        t_cross = times[lit] + (g[0] - DETECTION ** (2 / 3)) / (g[0] - g[1]) * step
        assert t_cross == pytest.approx(predicted, abs=0.01)  # 10 ms: a third of a frame


def test_disc_width_and_flattening(single_node: dict[str, Simulation]) -> None:
    """Width = 2 SD / plate scale; height = the transfer curve's image of the diameter."""
    heights = {}
    for gamma, sim in single_node.items():
        image = render_radiance(sim, 0)[..., 1].astype(float)
        sd, a_c = sim.track.semidiameter_arcsec[0], sim.track.altitude_deg[0]
        lit = (image > 1e-3 * image.max()).sum(axis=1)
        rows = np.nonzero(lit >= lit.max() - 1)[0]
        width = max(np.subtract(*edges(image[r])[::-1]) for r in rows)
        assert width == pytest.approx(2 * sd / PLATE, abs=0.5)
        top, bottom = edges(image[:, int(np.argmax(image.sum(axis=0)))])
        model = sim.prediction.model
        k = model.channels["g"].node_index[0]
        expected = (model.curve.elevation_of(k, a_c + sd / 3600)
                    - model.curve.elevation_of(k, a_c - sd / 3600)) * 3600 / PLATE
        assert bottom - top == pytest.approx(float(expected), abs=0.5)
        assert width - (bottom - top) > 20  # flattened by refraction, not by a few px
        heights[gamma] = bottom - top
    assert heights["-40.0"] < heights["6.5"] - 20  # the inversion flattens much more


def test_green_segment_longer_in_an_inversion(single_node: dict[str, Simulation]) -> None:
    """Frames with green but no red light: as many as predict's green duration says."""
    counts = {}
    for gamma, sim in single_node.items():
        f = np.array([fractions(sim, render_radiance(sim, i), i)
                      for i in range(1, sim.frame_times_unix_s.size)])
        green = np.count_nonzero((f[:, 1] >= DETECTION) & (f[:, 0] < DETECTION))
        assert green == pytest.approx(sim.prediction.green_duration_s * 30, abs=1.01)
        counts[gamma] = green
    assert counts["-40.0"] >= counts["6.5"] + 5


def test_reddening_follows_the_airmass_of_each_ray(single_node: dict[str, Simulation]) -> None:
    """Rows at equal distance above and below the disc's centre (same limb darkening)
    differ in colour by exp(-(tau_g - tau_r) (m_low - m_high)) of their own rays."""
    sim = single_node["6.5"]
    image = render_radiance(sim, 0).astype(float)
    col = int(np.argmax(image[..., 1].sum(axis=0)))
    model = sim.prediction.model
    cam = sim.scenario.camera
    e = sim.horizon_elevation_deg + (cam.horizon_row() - np.arange(cam.height_px)) * PLATE / 3600
    kr, kg = (model.channels[c].node_index[0] for c in "rg")
    offset = (model.curve.true_altitude_at(kg, e) - sim.track.altitude_deg[0]) * 3600
    sd = sim.track.semidiameter_arcsec[0]
    high = int(np.nanargmin(np.abs(offset - 0.5 * sd)))
    low = int(np.nanargmin(np.abs(offset + 0.5 * sd)))
    ratio = (image[low, col, 1] / image[low, col, 0]) / (image[high, col, 1] / image[high, col, 0])
    tau = {c: model.channels[c].tau[0] for c in "rg"}
    m = {k: np.interp(e[[low, high]], model.curve.apparent_elevation_deg[k],
                      model.curve.airmass[k]) for k in (kr, kg)}
    expected = np.exp(-(tau["g"] * (m[kg][0] - m[kg][1]) - tau["r"] * (m[kr][0] - m[kr][1])))
    assert expected < 0.97  # a real reddening over half a disc
    assert ratio == pytest.approx(expected, rel=0.01)  # 1 %: rows sampled 1 px apart


def test_ray_airmass_matches_kasten_young_at_apparent_altitude(standard: Simulation) -> None:
    """The airmass integrated along the traced rays, which sets the transmission, agrees
    with Kasten & Young (1989) fed the apparent altitude, not the true one."""
    curve = standard.prediction.model.curve
    k = standard.prediction.model.channels["g"].node_index[3]
    e, a, m = curve.apparent_elevation_deg[k], curve.true_altitude_deg[k], curve.airmass[k]
    sel = (e > 0.3) & (a > 0.05)
    apparent = airmass_kasten_young1989(90 - e[sel])
    true = airmass_kasten_young1989(90 - a[sel])
    # Kasten & Young 1989, Appl. Opt. 28, 4735: fit to a ray trace of the ISO standard
    # atmosphere; 3 % allows for this scenario's warmer, humid air at an eye of 12 m
    # (common practice, no source).
    assert np.allclose(m[sel], apparent, rtol=0.03)
    assert np.all(true > 1.1 * m[sel])


def test_mirage_shows_the_inverted_image_joining_the_disc(tmp_path: Path) -> None:
    """A sea 1 K warmer than the air, decaying over a metre, seen from 3 m: below the
    vanishing line the frames show the lower disc again, inverted, joined to it."""
    z = np.concatenate([[0.0], np.geomspace(0.02, 30.0, 30), [60.0, 100.0]])
    t = 15.0 + np.exp(-z / 1.0) - 0.0065 * z
    path = make_scenario(tmp_path, {
        ("atmosphere", "lapse_rate_K_per_km"): None, ("air", "temperature_C"): None,
        ("atmosphere", "profile_height_m"): "[" + ", ".join(f"{v:.5f}" for v in z) + "]",
        ("atmosphere", "profile_temperature_C"): "[" + ", ".join(f"{v:.5f}" for v in t) + "]",
        ("site", "eye_height_m"): "3.0", ("time", "last_seconds"): "200.0",
        ("time", "fps"): "0.2", ("camera", "width_px"): "800", ("camera", "height_px"): "240",
        ("camera", "horizon_row_px"): "200.0", ("camera", "wavelengths_per_band"): "3"})
    sim = prepare_simulation(read_scenario(path))
    model = sim.prediction.model
    k = model.channels["g"].node_index[1]
    e, a = model.curve.apparent_elevation_deg[k], model.curve.true_altitude_deg[k]
    assert model.curve.folded[k]
    v = int(np.nanargmin(a))  # the vanishing line: lowest true altitude seen
    row_v = 200.0 - (e[v] - sim.horizon_elevation_deg) * 3600 / PLATE
    sd = sim.track.semidiameter_arcsec[0]
    rel = (sim.track.altitude_deg - a[v]) * 3600 / sd  # disc centre above it [SD]
    assert (a[0] - a[v]) * 3600 < 0.3 * sd  # the mirror zone is narrower than the disc

    def column(i: int) -> np.ndarray:
        img = render_radiance(sim, i)[..., 1]
        p = img[:, int(np.argmax(img.sum(axis=0)))]
        return p > 1e-3 * p.max()

    # Lower limb still above the mirrored zone: a dark gap between the disc and the sea.
    early = column(int(np.argmin(np.abs(rel - 1.5))))
    assert not early[int(row_v) + 1:200].any()
    # Centre half a radius above the vanishing line: lit without a gap from the disc's
    # top through the vanishing line down to the sea horizon (the inverted image).
    joined = column(int(np.argmin(np.abs(rel - 0.5))))
    lit = np.nonzero(joined)[0]
    assert lit[0] < row_v - 50 and lit[-1] >= 199
    assert np.all(np.diff(lit) == 1)


def test_lateral_colour_and_shake_shift_the_image(single_node: dict[str, Simulation]) -> None:
    sim = single_node["6.5"]
    base = render_radiance(sim, 0).astype(float)
    moved = render_radiance(with_camera(sim, channel_offset_px=(("r", 0.5, 0.0),
                                                                  ("b", 0.0, -0.4))),
                            0, shake_px=(1.3, -0.7)).astype(float)
    yy, xx = np.mgrid[:base.shape[0], :base.shape[1]]

    def centroid(img: np.ndarray) -> np.ndarray:
        return np.array([np.sum(xx * img), np.sum(yy * img)]) / img.sum()

    # analytic pixel coverage: shifts come out to a few thousandths of a pixel
    for c, offset in enumerate([(0.5, 0.0), (0.0, 0.0), (0.0, -0.4)]):
        shift = centroid(moved[..., c]) - centroid(base[..., c])
        assert shift == pytest.approx(np.add(offset, (1.3, -0.7)), abs=0.02)


def test_roll_tilts_the_horizon(standard: Simulation) -> None:
    sim = with_camera(standard, roll_deg=2.0)
    sim = dataclasses.replace(sim, scenario=dataclasses.replace(
        sim.scenario, scene=dataclasses.replace(sim.scenario.scene, sky_level=0.05)))
    image = render_radiance(sim, sim.frame_times_unix_s.size - 1)[..., 1].astype(float)
    rows = []
    for x in range(5, 155):  # sub-pixel sky/sea edge of each column, by its sky share
        col = image[:, x]
        j = int(np.argmax(-np.diff(col[60:140]))) + 60  # the step from sky to sea
        sky, sea = col[j - 3], col[j + 4]
        rows.append(j - 2.5 + np.sum((col[j - 2:j + 4] - sea) / (sky - sea)))
    slope, at_centre = np.polyfit(np.arange(5, 155) - 79.5, rows, 1)
    assert slope == pytest.approx(-np.tan(np.radians(2.0)), abs=2e-3)  # rises to the right
    assert at_centre == pytest.approx(100.0, abs=0.1)


def test_rolling_shutter_reads_each_row_later(single_node: dict[str, Simulation]) -> None:
    """Row y of a rolling-shutter frame is row y of a global-shutter frame taken
    rolling_shutter_s * y / (H - 1) later."""
    sim = single_node["6.5"]
    readout, y = 1.0, 180
    late_by = readout * y / (sim.scenario.camera.height_px - 1)
    rolling = render_radiance(with_camera(sim, rolling_shutter_s=readout), 0)
    site = sim.scenario.site
    track = sun_track(sim.frame_times_unix_s + late_by, site.latitude_deg, site.longitude_deg,
                      site.eye_height_m)
    late = render_radiance(dataclasses.replace(sim, track=track), 0)
    now = render_radiance(sim, 0)
    scale = now[y].max()
    assert np.abs(rolling[y] - late[y]).max() < 1e-3 * scale
    assert np.abs(rolling[y] - now[y]).max() > 0.05 * scale  # the Sun did move


def test_exposure_noise_and_reproducibility(standard: Simulation) -> None:
    """Auto exposure raises the gain as the Sun sets; locked keeps it; noise variance in
    electrons is signal + read noise^2; the same seed gives the same frames."""
    sim = with_camera(subset(standard, slice(None, None, 4)),  # every 4th frame: fast
                      exposure="auto", read_noise_e=5.0, full_well_e=4000.0)
    sim = dataclasses.replace(sim, scenario=dataclasses.replace(
        sim.scenario, scene=dataclasses.replace(sim.scenario.scene, sky_level=0.1),
        output=dataclasses.replace(sim.scenario.output, format="tiff")))
    records, images = zip(*iter_frames(sim))
    gains = np.array([r.gain_e for r in records])
    assert gains[-1] > 1.5 * gains[0] and np.all(np.diff(gains) >= -1e-6 * gains[0])
    locked = [r.gain_e for r, _ in iter_frames(with_camera(sim, exposure="locked"))]
    assert np.ptp(locked) == 0
    # Two frames after sunset: same scene, independent noise.
    a, b = (srgb_to_linear(images[i][20:60, 20:140, 1] / 65535.0) * 4000.0 for i in (-1, -2))
    a, b = a / gains[-1] * gains[-1], b / gains[-2] * gains[-1]  # same gain scale
    signal = 0.5 * (a + b).mean()
    variance = np.var(a - b) / 2
    # 10 %: 4800 pixel pairs give about 3 % scatter of a variance (common practice, no source)
    assert variance == pytest.approx(signal + 25.0, rel=0.1)
    again = [img for _, img in iter_frames(sim)]
    assert all(np.array_equal(x, y) for x, y in zip(images, again))


def test_encode_srgb_matches_the_standard_curve() -> None:
    linear = np.array([0.0, 0.0031308, 0.01, 0.18, 0.5, 1.0, 1.5], np.float32)
    # IEC 61966-2-1 encoding: 12.92 x below 0.0031308, else 1.055 x^(1/2.4) - 0.055
    expected = np.where(linear <= 0.0031308, 12.92 * linear,
                        1.055 * np.minimum(linear, 1) ** (1 / 2.4) - 0.055)
    assert np.array_equal(encode_srgb(linear, 8), np.round(expected * 255).astype(np.uint8))
    assert np.abs(encode_srgb(linear, 16).astype(float) - expected * 65535).max() <= 1


def test_frame_times_bursts_jitter_and_window(standard: Simulation) -> None:
    sc = standard.scenario
    pred = standard.prediction

    def times(**timing) -> np.ndarray:
        spec = dataclasses.replace(sc.timing, **{"fps": None, **timing})
        return _frame_times(dataclasses.replace(sc, timing=spec), pred)

    t = times(bursts=(Burst(0.0, 3, 10.0), Burst(1.0, 2, 20.0)))
    assert np.allclose(t - t[0], [0.0, 0.1, 0.2, 1.0, 1.05], atol=1e-9)
    assert np.allclose(t * 1000, np.round(t * 1000), atol=1e-3)  # whole milliseconds
    jittered = np.diff(times(fps=30.0, fps_jitter=0.2))
    assert jittered.std() > 0.003 and np.all(jittered > 0)
    with pytest.raises(InputError, match="beyond"):
        times(frame_times_s=(0.0, 5.0))
    with pytest.raises(InputError, match="bursts overlap"):
        times(bursts=(Burst(0.0, 5, 10.0), Burst(0.2, 2, 10.0)))
    early = sun_track(standard.frame_times_unix_s[:1] - 3000.0, 35.2, -20.4, 12.0)
    with pytest.raises(InputError, match="start later"):
        _check_span(sc, standard.prediction.model.curve.true_altitude_deg, early)


# --- the folder on disk ---------------------------------------------------------------

WRITE = {("time", "last_seconds"): "1.0", ("time", "after_seconds"): "0.5",
         ("time", "fps"): "10", ("camera", "wavelengths_per_band"): "3",
         ("scene", "sky_level"): "0.03", ("scene", "sea_level"): "0.3",
         ("scene", "glitter"): "true", ("site", "name"): '"Test point"',
         ("output", "clock_utc_offset_h"): "5.5", ("output", "clock_error_s"): "2.25"}


@pytest.mark.parametrize("fmt", ["png", "tiff", "jpeg", "h264"])
def test_folder_round_trip(tmp_path: Path, fmt: str) -> None:
    """The written folder opens with the project's readers; every frame time reads back."""
    changes = {**WRITE, ("output", "format"): f'"{fmt}"'}
    if fmt == "h264":
        changes[("time", "fps_jitter")] = "0.3"  # variable frame rate
    out = tmp_path / "sunset"
    truth = run_simulate(make_scenario(tmp_path, changes), out, quiet=True)
    assert truth_path(out).is_file() and not (out / truth_path(out).name).exists()
    assert json.loads(truth_path(out).read_text()) == truth
    obs = read_observation(out / "observation.toml")
    assert obs.site.name == "Test point"
    assert obs.camera.plate_scale_arcsec_per_px == 10.0
    frames = open_frames(out, video_start_utc=obs.camera.video_start_utc,
                         clock_utc_offset_h=obs.camera.clock_utc_offset_h)
    sim = prepare_simulation(read_scenario(tmp_path / "scenario.toml"))
    written = sim.frame_times_unix_s + 2.25
    read = np.array([info.t_unix_s for info in frames.infos])
    assert read.size == written.size == truth["rendering"]["frame_count"]
    assert np.abs(read - written).max() < 1e-6  # float rounding of ms or 1/90000 s ticks
    expected_source = {"png": "frames.csv", "tiff": "frames.csv", "jpeg": "exif",
                       "h264": "video pts + video_start_utc"}[fmt]
    assert frames.time_source == expected_source
    if fmt == "tiff":
        assert frames.bit_depth == 16
    if fmt == "h264":
        ticks = np.round((written - written[0]) * 90000)
        assert frames.frame_pts == tuple(int(t) for t in ticks)
        assert len(set(np.diff(ticks))) > 1 and frames.chroma_subsampling == "4:2:0"
    if fmt == "jpeg":
        assert frames.infos[0].exposure_s == pytest.approx(0.0005)


def test_refuses_to_overwrite_and_leaves_nothing_after_a_crash(tmp_path: Path,
                                                                monkeypatch) -> None:
    scenario = make_scenario(tmp_path, WRITE)
    out = tmp_path / "sunset"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(InputError, match="not empty") as info:
        run_simulate(scenario, out, quiet=True)
    assert "\n" not in info.value.one_line()
    assert (out / "keep.txt").read_text() == "mine" and not truth_path(out).exists()
    bad = make_scenario(tmp_path, {("camera", "plate_scale_arcsec_per_px"): "-1.0"}, "bad.toml")
    with pytest.raises(InputError, match="plate_scale_arcsec_per_px"):
        run_simulate(bad, tmp_path / "other", quiet=True)
    assert not (tmp_path / "other").exists()

    def crashing(sim):
        frames = iter_frames(sim)
        yield next(frames)
        raise RuntimeError("disk full")

    monkeypatch.setattr("analyse.writers.iter_frames", crashing)
    with pytest.raises(RuntimeError):
        run_simulate(scenario, out, force=True, quiet=True)
    assert (out / "keep.txt").exists()  # the old folder is untouched
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml", "scenario.toml", "sunset"]
    monkeypatch.undo()
    run_simulate(scenario, out, force=True, quiet=True)
    assert not (out / "keep.txt").exists() and (out / "frames.csv").is_file()


def test_memory_stays_flat_in_the_number_of_frames(standard: Simulation) -> None:
    peaks = []
    for n in (10, 40):
        sim = subset(standard, slice(0, n))
        tracemalloc.start()
        for _ in iter_frames(sim):
            pass
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    assert peaks[1] < 1.1 * peaks[0]
