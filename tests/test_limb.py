"""Tests for analyse.limb on synthetic frames with a known Sun (tests/synthetic.py).

The truth is the geometric upper limb of each channel's limb-darkened disc, measured
perpendicular to the true green horizon. The scenes' limb-darkening coefficients
(0.58/0.66/0.74) differ from those the fit assumes (analyse.disc at 600/530/460 nm) by
0.02-0.04, as the real Sun's will.

Tolerances: the issue asks for the upper-limb apex within 0.3 px (0.5 px for a saturated
disc).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import ndtr

from analyse.horizon import HorizonLine, find_horizon
from analyse.limb import (
    LUMA_BT601,
    VISIBILITY_SIGMA,
    SunLocation,
    locate_sun,
    measure_limbs,
)
from tests.synthetic import CHANNELS, Scene, render

APEX_TOL_PX = 0.3  # issue's requirement
APEX_SATURATED_TOL_PX = 0.5  # issue's requirement


def _true_line(truth) -> HorizonLine:
    return HorizonLine(True, truth.row_px, truth.x_ref_px, truth.slope, 0.0,
                       -math.degrees(math.atan(truth.slope)), 0.0, 100, "")


def _measure(scene: Scene, **kwargs):
    img, truth = render(scene)
    line = find_horizon(img)
    assert line.found, line.message
    sun = locate_sun(img, line)
    assert sun.found, sun.message
    return measure_limbs(img, line, sun, **kwargs), truth, line


def _apex_errors(limbs, truth, line) -> dict[str, float]:
    """Measured minus true apex height; the truth is re-expressed above the found line."""
    out = {}
    for c in CHANNELS:
        x, y = truth.apex_xy_px[c]
        out[c] = limbs[c].apex_height_px - float(line.height_above(x, y))
    return out


@pytest.mark.parametrize("scene", [
    Scene(seed=1),
    Scene(roll_deg=1.4, sun_s_px=-20.0, seed=2),
    Scene(radius_px=70.0, shape=(260, 340), apex_height_px={"r": 45.0, "g": 47.5, "b": 48.2},
          seed=3),
    Scene(flattening=0.85, seed=4),
    Scene(apex_height_px={"r": 105.0, "g": 107.0, "b": 108.0}, shape=(280, 300), seed=5),
    Scene(apex_height_px={"r": 9.0, "g": 10.5, "b": 11.5}, seed=6),
    Scene(shake_px=3.0, shake_angle_deg=70.0, seed=7),
    Scene(glitter=True, seed=8),
    Scene(psf_sigma_px=1.5, seed=9),
], ids=["level", "rolled", "larger", "flattened", "whole-disc", "low", "shake", "glitter",
        "soft"])
def test_apex_of_each_channel(scene):
    limbs, truth, line = _measure(scene)
    for c, err in _apex_errors(limbs, truth, line).items():
        assert limbs[c].visible and not limbs[c].saturated
        assert abs(err) < APEX_TOL_PX, (c, err, limbs[c])
        assert 0 < limbs[c].apex_height_err_px < 0.2
        assert limbs[c].apex_x_px == pytest.approx(truth.apex_xy_px[c][0], abs=1.0)


def test_lateral_colour_offset_moves_the_channels():
    # The lens shifts r down 1.5 px and b up 1.0 px with everything in them: relative to
    # the green horizon, their limbs move by as much (measure.py removes it).
    offsets = {"r": (0.5, 1.5), "b": (-0.3, -1.0)}
    limbs, truth, line = _measure(Scene(colour_offset_px=offsets, seed=10))
    for c, err in _apex_errors(limbs, truth, line).items():
        assert abs(err) < APEX_TOL_PX, (c, err)


def test_dispersion_green_above_red():
    limbs, truth, line = _measure(Scene(apex_height_px={"r": 30.0, "g": 32.6, "b": 33.5},
                                        seed=11))
    measured = limbs["g"].apex_height_px - limbs["r"].apex_height_px
    # Differences cancel the common part of the model's error: 0.15 px (no source; the
    # channels' limb-darkening mismatches differ by 0.02).
    assert measured == pytest.approx(2.6, abs=0.15)


def test_jpeg_q85():
    limbs, truth, line = _measure(Scene(jpeg_quality=85, seed=12))
    err = _apex_errors(limbs, truth, line)
    assert abs(err["r"]) < APEX_TOL_PX and abs(err["g"]) < APEX_TOL_PX, err
    # Blue through 4:2:0 chroma: the decoded channel is its smoothed self plus the sharp
    # part of the luma, whose edge is red's and green's (blue weighs 0.11 in it), so
    # blue's edge is pulled toward theirs: 0.4-0.7 px on these frames (measured, no
    # source); the tolerance only guards against worse.
    assert abs(err["b"]) < 0.8, err


def test_saturated_disc_is_flagged_and_measured():
    scene = Scene(disc_level={"r": 2.5, "g": 1.6, "b": 1.3}, seed=13)
    limbs, truth, line = _measure(scene)
    for c, err in _apex_errors(limbs, truth, line).items():
        assert limbs[c].saturated and "saturated" in limbs[c].flags
        assert abs(err) < APEX_SATURATED_TOL_PX, (c, err)


@pytest.mark.parametrize("heights", [{"r": 1.2, "g": 2.0, "b": 3.1},
                                     {"r": 2.5, "g": 3.5, "b": 4.4}])
def test_thin_segment(heights):
    scene = Scene(apex_height_px=heights, seed=14)
    limbs, truth, line = _measure(scene)
    for c, err in _apex_errors(limbs, truth, line).items():
        assert "thin-segment" in limbs[c].flags
        assert abs(err) < APEX_TOL_PX, (c, err)
        # Its chord on the horizon: 2 sqrt(2 R h - h^2); 1.5 px (no source: the ends of a
        # blurred sliver are faint).
        assert limbs[c].width_px == pytest.approx(truth.chord_px[c], abs=1.5)
    known, _, _ = _measure(scene, radius_px=scene.radius_px)  # radius from earlier frames
    for c, err in _apex_errors(known, truth, line).items():
        assert abs(err) < 0.2, (c, err)


def test_visibility_flips_when_the_segment_sets():
    # The pipeline passes the previous frame's Sun when none is found; so do we.
    scene = Scene(apex_height_px={"r": -1.5, "g": 0.8, "b": 2.0}, seed=15)
    img, truth = render(scene)
    line = find_horizon(img)
    sun = SunLocation(True, truth.x_ref_px, truth.row_px - 5.0, 25.0, "")
    limbs = measure_limbs(img, line, sun)
    assert not limbs["r"].visible and math.isnan(limbs["r"].apex_height_px)
    assert limbs["r"].significance < VISIBILITY_SIGMA
    assert limbs["g"].visible and limbs["b"].visible
    gone = Scene(apex_height_px={"r": -3.0, "g": -2.0, "b": -1.0}, seed=16)
    img, _ = render(gone)
    limbs = measure_limbs(img, find_horizon(img), sun)
    assert not any(limbs[c].visible for c in CHANNELS)


def test_flux_error_is_honest_on_empty_sky():
    # No Sun above the line: flux / flux_err must scatter like a unit normal. 15 frames:
    # the sample sd of 15 unit normals lies in 0.6-1.4 with ~95 % probability.
    z = []
    for seed in range(15):
        img, truth = render(Scene(apex_height_px={"r": -4.0, "g": -4.0, "b": -4.0},
                                  seed=100 + seed))
        sun = SunLocation(True, truth.x_ref_px, truth.row_px - 8.0, 30.0, "")
        limbs = measure_limbs(img, _true_line(truth), sun)
        z.extend(limbs[c].flux / limbs[c].flux_err for c in CHANNELS)
    z = np.array(z)
    assert 0.6 < np.std(z) < 1.4
    assert abs(np.mean(z)) < 0.6


def test_significance_proportional_to_flux():
    results = []
    for scale in (0.25, 0.5, 1.0):
        levels = {"r": 0.7 * scale, "g": 0.45 * scale, "b": 0.28 * scale}
        limbs, _, _ = _measure(Scene(disc_level=levels, apex_height_px={
            "r": 6.0, "g": 6.5, "b": 7.0}, seed=17))
        results.append([(limbs[c].flux, limbs[c].significance) for c in CHANNELS])
    flux = np.array([[f for f, _ in row] for row in results])
    sig = np.array([[s for _, s in row] for row in results])
    # Flux follows the disc's brightness (5 %: noise); with the sky's noise fixed, so does
    # the significance (20 %: the Sun's box grows a little with its brightness).
    np.testing.assert_allclose(flux / flux[-1], [[0.25] * 3, [0.5] * 3, [1.0] * 3], rtol=0.05)
    ratio = sig / flux
    np.testing.assert_allclose(ratio / ratio[-1], 1.0, rtol=0.2)


@pytest.mark.parametrize("scene", [
    Scene(seed=18),
    Scene(apex_height_px={"r": 105.0, "g": 107.0, "b": 108.0}, shape=(280, 300), seed=19),
], ids=["cut-by-horizon", "whole-disc"])
def test_width_and_height(scene):
    limbs, truth, _ = _measure(scene)
    for c in CHANNELS:
        # The chord: 1 px in ~100 (no source; 1 % of the plate scale).
        assert limbs[c].width_px == pytest.approx(truth.chord_px[c], abs=1.0)
    whole = scene.apex_height_px["r"] > 2 * scene.radius_px
    expected = 2 * scene.radius_px if whole else scene.apex_height_px["r"]
    # The lower limb comes from the side edges' ellipse fit: 1.5 px.
    assert limbs["r"].height_px == pytest.approx(expected, abs=1.5)


def test_locate_sun():
    img, truth = render(Scene(glitter=True, seed=20))
    line = find_horizon(img)
    sun = locate_sun(img, line)
    assert sun.found and sun.message == ""
    assert sun.x_px == pytest.approx(truth.x_ref_px, abs=5.0)
    assert sun.y_px < line.row_at(sun.x_px)  # above the line, not on the glitter
    assert sun.radius_px == pytest.approx(50.0, rel=0.2)


def test_no_sun():
    img, _ = render(Scene(sun=False, seed=21))
    line = find_horizon(img)
    sun = locate_sun(img, line)
    assert not sun.found and sun.message
    limbs = measure_limbs(img, line, sun)
    assert all("no-sun" in limbs[c].flags and not limbs[c].visible for c in CHANNELS)


def test_no_horizon_never_raises():
    img, _ = render(Scene(seed=22))
    nothing = HorizonLine(False, np.nan, 150.0, np.nan, np.nan, np.nan, np.nan, 0, "none")
    limbs = measure_limbs(img, nothing, locate_sun(img))
    assert all("no-horizon" in limbs[c].flags for c in CHANNELS)


def test_bad_image_shape_is_refused():
    with pytest.raises(ValueError, match="shape"):
        locate_sun(np.zeros((20, 20)))


def _band_frame(offset: float, centre: float, blur: float):
    """A faint band of light astride a level horizon, drawn as exact pixel integrals:
    ``exp(-x^2 / 2 w^2)`` across, a Gaussian of ``blur`` around ``centre`` above the line
    in height; sky above and sea below the line by pixel coverage. Returns the frame, the
    line, a first guess of the Sun and the band's light above the line."""
    rows, cols, x_c, w = 120, 160, 80.0, 8.0
    line_row = 80.0 + offset
    h = line_row - np.arange(rows, dtype=float)[:, None]  # pixel centres above the line
    cover = np.clip(h + 0.5, 0.0, 1.0)
    across = np.exp(-0.5 * ((np.arange(cols) - x_c) / w) ** 2)[None, :]
    band = ndtr((h + 0.5 - centre) / blur) - ndtr((h - 0.5 - centre) / blur)
    plane = 0.05 * cover + 0.2 * (1.0 - cover) + 0.3 * band * across
    img = np.repeat(plane[..., None], 3, axis=2).astype(np.float32)
    line = HorizonLine(True, line_row, x_c, 0.0, 0.0, 0.0, 0.0, 100, "")
    above = 0.3 * float(across.sum()) * (1.0 - float(ndtr(-centre / blur)))
    return img, line, SunLocation(True, x_c, line_row - 3.0, 10.0, ""), above


@pytest.mark.parametrize("centre,blur", [(0.3, 0.8), (-0.2, 1.0)])
def test_flux_astride_the_line_follows_the_light_above_it(centre, blur):
    # The last light of a faint segment: as the line slides over a pixel's centre, the row
    # astride it counts by its area above the line, so the flux stays within a few
    # percent of the light above the line (4.5 % for a uniform row under light that
    # changes within it, the 1-D integral of these bands, computed; no source). Counted
    # wholly or not at all, it read 0.57-1.33 of it.
    ratio = []
    for offset in np.linspace(-0.45, 0.45, 7):
        img, line, sun, above = _band_frame(offset, centre, blur)
        ratio.append(measure_limbs(img, line, sun)["g"].flux / above)
    assert 0.95 < min(ratio) and max(ratio) < 1.05, np.round(ratio, 3)


SUNSET = {"disc_level": {"r": 0.7, "g": 0.1, "b": 0.015},
          "sky_level": {"r": 0.02, "g": 0.01, "b": 0.006},
          "sea_level": {"r": 0.05, "g": 0.03, "b": 0.02},
          "apex_height_px": {"r": 20.0, "g": 21.7, "b": 22.5}}


@pytest.mark.parametrize("phase", [0.0, 0.5])
def test_420_chroma_leak_is_removed(phase):
    # A red sunset disc through JPEG's 4:2:0 chroma (quality 100: little else is lost).
    # Green sits 1.7 px above a disc seven times brighter in red, whose edge leaks into
    # it through the half-resolution chroma: read as full-resolution colour, green's apex
    # is 0.17-0.3 px low (16 renders); with the leak modelled (JPEG's BT.601 luma
    # weights), within 0.1 px (at most 0.09 on those renders; no source).
    scene = Scene(jpeg_quality=100, seed=33, horizon_row_px=150.3 + phase, **SUNSET)
    img, truth = render(scene)
    line = _true_line(truth)
    sun = SunLocation(True, truth.x_ref_px, truth.row_px - 10.0, 50.0, "")
    plain = measure_limbs(img, line, sun)
    fixed = measure_limbs(img, line, sun, chroma_luma=LUMA_BT601)
    assert plain["g"].apex_height_px - truth.apex_height_px["g"] < -0.15
    for c in ("r", "g"):
        assert abs(fixed[c].apex_height_px - truth.apex_height_px[c]) < 0.1, c
        assert "thin-segment" not in fixed[c].flags
    assert fixed["g"].flux == plain["g"].flux  # the flux is not refitted
