"""Tests for analyse.horizon on synthetic frames with a known horizon (tests/synthetic.py).

Tolerances: the issue asks for the horizon's height within 0.2 px and its roll within
0.05 deg; the lens's colour offset from the horizon edge within about 0.1 px.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import ndtr

from analyse.frames import linear_to_srgb, srgb_to_linear
from analyse.horizon import TUKEY_C, HorizonLine, column_edges, find_horizon, robust_line
from analyse.horizon_colour import (
    CENTROID_HALF_PX,
    _clip_shift,
    chroma_offset_error,
    clip_offset_error,
    encoding_bias,
    horizon_colour_offsets,
)
from tests.synthetic import Scene, render

ROW_TOL_PX = 0.2  # issue's requirement
ROLL_TOL_DEG = 0.05  # issue's requirement


def _true_roll_deg(truth) -> float:
    return -math.degrees(math.atan(truth.slope))


def _check_line(line: HorizonLine, truth) -> None:
    assert line.found, line.message
    assert line.message == ""
    assert abs(line.row_px - truth.row_px) < ROW_TOL_PX
    assert abs(line.roll_deg - _true_roll_deg(truth)) < ROLL_TOL_DEG
    assert line.x_ref_px == pytest.approx(truth.x_ref_px)


@pytest.mark.parametrize("roll_deg, row_px", [(0.0, 150.3), (1.3, 131.77), (-1.9, 160.5)])
def test_rolled_horizon_with_sun_on_it(roll_deg, row_px):
    img, truth = render(Scene(roll_deg=roll_deg, horizon_row_px=row_px, glitter=True,
                              seed=3))
    _check_line(find_horizon(img), truth)  # outliers rejected without help
    _check_line(find_horizon(img, exclude_x=(80.0, 220.0)), truth)


@pytest.mark.parametrize("scene", [
    Scene(jpeg_quality=85, roll_deg=0.7, seed=1),
    Scene(shake_px=3.0, shake_angle_deg=60.0, roll_deg=-0.4, seed=2),
    Scene(psf_sigma_px=1.6, sun=False, seed=4),
    Scene(colour_offset_px={"r": (0.5, 1.5), "b": (-0.3, -1.0)}, roll_deg=0.9, seed=5),
], ids=["jpeg-q85", "shake", "soft", "colour-offset"])
def test_degraded_frames(scene):
    img, truth = render(scene)
    _check_line(find_horizon(img), truth)


def _codes_to_linear(codes) -> dict:
    return {c: float(srgb_to_linear(v / 255.0)) for c, v in zip("rgb", codes)}


@pytest.mark.parametrize("sky, sea", [((22.0, 11.8, 5.3), (5.6, 2.4, 1.1)),
                                      ((12.0, 12.0, 12.0), (2.5, 2.5, 2.5))],
                         ids=["red", "grey"])
def test_dim_8bit_edge_is_unbiased(sky, sea):
    # A dim sky over a darker sea, as in the simulated recordings (green 12 -> 2.5 sRGB
    # codes), stored as 8-bit sRGB with sensor noise of ~1.4 codes: the code values'
    # rounding is dithered by the noise and leaves no bias at any sub-pixel position or
    # phase of an 8-row block. (Through JPEG 85 the same frames are off by up to 0.2-0.4
    # px at some block phases: the codec's DCT quantisation of the noise-free dark blocks
    # and of their chroma; see issue 4's notes. Not asserted here.)
    errors = []
    for k in range(8):
        scene = Scene(shape=(120, 480), horizon_row_px=56.0 + k + 0.5 * (k % 2) + 0.13,
                      sun=False, sky_level=_codes_to_linear(sky), sea_level=_codes_to_linear(sea),
                      psf_sigma_px=0.9, gain_e=20000.0, read_noise_e=3.0, seed=20 + k)
        img, truth = render(scene)
        img = srgb_to_linear(np.round(linear_to_srgb(np.clip(img, 0, 1)) * 255) / 255)
        line = find_horizon(img.astype(np.float32))
        assert line.found, line.message
        errors.append(line.row_px - truth.row_px)
    # 0.08 px: what the PNG/TIFF recordings reach end to end; the mean of 8 frames within
    # 0.03 px (common practice, no source: a bias well below the 0.2 px).
    assert np.max(np.abs(errors)) < 0.08
    assert abs(np.mean(errors)) < 0.03


def test_edge_width_and_contrast_are_reported():
    img, truth = render(Scene(psf_sigma_px=1.5, sun=False, seed=6))
    line = find_horizon(img)
    # Gaussian PSF 1.5 px plus the pixel box (1/12 px^2); 0.2 px covers noise and sampling.
    assert line.edge_sigma_px == pytest.approx(math.sqrt(1.5**2 + 1 / 12), abs=0.2)
    # Green sky 0.14 over sea 0.04 at the horizon (Scene defaults); 15 % for the gradients.
    assert line.edge_contrast == pytest.approx(0.10, rel=0.15)


def test_noise_is_estimated_per_column():
    # A faint step (1 over 0, sigma 1.2 px) in every column; the first 20 columns have
    # noise 0.03, the other 80 noise 0.6 (a bright disc's photon noise). The quiet
    # columns find the step at their own noise (SNR ~30), not at the noisy majority's.
    rng = np.random.default_rng(0)
    rows = np.arange(40)[:, None]
    strip = 1.0 - ndtr((rows - 20.3) / 1.2) * np.ones((1, 100))
    strip += np.where(np.arange(100) < 20, 0.03, 0.6) * rng.standard_normal((40, 100))
    row, snr, _, _, polarity = column_edges(strip, np.zeros(100), np.full(100, 39.0),
                                            polarity=-1)
    quiet = np.isfinite(row[:20])
    # The noise is a median over +-4 neighbouring column pairs: the last quiet columns
    # next to the noisy ones may fail.
    assert quiet.sum() >= 15
    assert np.median(row[:20][quiet]) == pytest.approx(20.3, abs=0.05)  # 0.05: noise 0.03
    assert np.isfinite(row[20:]).sum() <= 2  # SNR ~2 there: below EDGE_MIN_SNR
    assert polarity == -1


def test_sun_wider_than_most_of_the_frame():
    # DEVELOPERS.md known gap: the disc 300 px wide in a 400 px frame (75 %), a dim sky
    # beside it (photon noise of the disc ~5x the sky's), the disc's columns left out by
    # the caller: the 80 columns beside it still give the line.
    scene = Scene(shape=(220, 400), radius_px=150.0, roll_deg=0.8,
                  apex_height_px={"r": 118.0, "g": 120.0, "b": 121.0},
                  sky_level={"r": 0.06, "g": 0.03, "b": 0.015},
                  sea_level={"r": 0.018, "g": 0.009, "b": 0.0045},
                  disc_level={"r": 0.9, "g": 0.6, "b": 0.35}, glitter=True, seed=12)
    img, truth = render(scene)
    _check_line(find_horizon(img, exclude_x=(40.0, 360.0)), truth)


def test_robust_line_is_converged():
    # The returned line is a fixed point of the Tukey-biweight reweighting (the early
    # stop leaves it within 1e-6 px), and the outlying block of points gets zero weight.
    rng = np.random.default_rng(3)
    x = np.arange(480) * 4.0 + 1.5
    y = 300.0 + 0.004 * (x - 958.5) + 0.08 * rng.standard_normal(x.size)
    y[100:160] += 6.0
    row, slope, cov, inliers, scale = robust_line(x, y, 958.5)
    assert not inliers[100:160].any() and inliers.sum() > 400
    r = y - row - slope * (x - 958.5)
    w = np.clip(1.0 - (r / (TUKEY_C * scale)) ** 2, 0.0, None) ** 2
    a = np.column_stack([np.ones_like(x), x - 958.5]) * np.sqrt(w)[:, None]
    again = np.linalg.lstsq(a, y * np.sqrt(w), rcond=None)[0]
    assert again[0] == pytest.approx(row, abs=1e-5)
    assert again[1] * 1916.0 == pytest.approx(slope * 1916.0, abs=1e-5)
    assert row == pytest.approx(300.0, abs=0.03)  # 0.08 px noise over ~400 points
    assert math.sqrt(cov[0, 0]) == pytest.approx(0.08 / math.sqrt(inliers.sum()), rel=0.5)


def test_prior_narrows_the_search():
    first, truth1 = render(Scene(horizon_row_px=140.2, roll_deg=0.5, seed=7))
    second, truth2 = render(Scene(horizon_row_px=146.9, roll_deg=0.6, seed=8))  # camera shook
    prior = find_horizon(first)
    _check_line(prior, truth1)
    _check_line(find_horizon(second, prior=prior), truth2)
    far = HorizonLine(True, 60.0, prior.x_ref_px, 0.0, 0.1, 0.0, 0.01, 100, "")
    missed = find_horizon(second, prior=far)  # the band holds no horizon: the caller retries
    assert not missed.found and missed.message


def test_pure_sky_has_no_horizon():
    img, _ = render(Scene(horizon_row_px=400.0, sun=False, seed=9))  # the line below the frame
    line = find_horizon(img)
    assert not line.found
    assert "edge" in line.message
    assert math.isnan(line.row_px)
    offs = horizon_colour_offsets(img, line)
    assert {"r", "b", "step_g", "clip_g"} <= set(offs)
    assert all(math.isnan(v) for v in offs.values())


def test_colour_offsets_recovered():
    offsets = {"r": (0.5, 1.5), "b": (-0.3, -1.0)}
    img, truth = render(Scene(colour_offset_px=offsets, roll_deg=0.9, seed=10))
    line = find_horizon(img)
    found = horizon_colour_offsets(img, line, exclude_x=(90.0, 210.0))
    for c in ("r", "b"):
        # Issue: ~0.1 px. The horizontal part of the offset moves a rolled edge by
        # -slope*dx (< 0.01 px here), inside the tolerance.
        assert found[c] == pytest.approx(truth.colour_dy_px[c], abs=0.1)


def test_encoding_bias_of_the_centroid():
    # The sRGB curve stretches dark values: a bright-over-dark step's encoded gradient has
    # its centroid on the dark side (below, y down positive) by a good part of sigma.
    assert 0.1 < encoding_bias(0.22, 0.05, 1.0, 5) < 0.5
    assert encoding_bias(0.05, 0.22, 1.0, 5) == pytest.approx(-encoding_bias(0.22, 0.05, 1.0, 5))
    # A faint step sees a locally linear curve: no bias.
    assert abs(encoding_bias(0.1002, 0.1, 1.0, 5)) < 1e-3


def test_line_geometry():
    # A line rising to the right: y decreases with x, slope < 0, roll > 0 (FOLDER-FORMAT.md).
    line = HorizonLine(True, 100.0, 50.0, -0.02, 0.1, math.degrees(math.atan(0.02)), 0.01,
                       10, "")
    assert line.row_at(150.0) == pytest.approx(98.0)
    assert line.height_above(150.0, 98.0) == pytest.approx(0.0)
    normal = np.array([-0.02, -1.0]) / math.hypot(1.0, 0.02)  # unit vector "up" from the line
    point = np.array([150.0, 98.0]) + 3.5 * normal
    assert line.height_above(*point) == pytest.approx(3.5)
    assert line.roll_deg > 0


def test_bad_image_shape_is_refused():
    with pytest.raises(ValueError, match="shape"):
        find_horizon(np.zeros((10, 10, 4)))
    with pytest.raises(ValueError, match="shape"):
        horizon_colour_offsets(np.zeros((40, 40)), HorizonLine(True, 20, 20, 0, 0, 0, 0, 9, ""))


def test_chroma_offset_error_by_hand():
    # BT.601 luma (ITU-R BT.601-7): Y = 0.299 R + 0.587 G + 0.114 B of the encoded steps.
    steps = {"r": 0.06, "g": 0.035, "b": 0.016}
    y = 0.299 * 0.06 + 0.587 * 0.035 + 0.114 * 0.016
    share = (0.06 - y) / 0.06 - (0.035 - y) / 0.035
    # Bennett (1948): a uniform error over a range d has variance d^2/12; d = 2 rows.
    want = abs(share) * 2.0 / math.sqrt(12.0)
    err = chroma_offset_error(steps, (0.299, 0.587, 0.114))
    assert err["r"] == pytest.approx(want, rel=1e-9)
    assert chroma_offset_error(steps, (0.299, 0.587, 0.114), spacing_px=1.0)["r"] == (
        pytest.approx(want / 2.0, rel=1e-9))
    # A grey edge (all steps alike) carries no chroma: nothing for the codec to misplace.
    assert chroma_offset_error({"r": 0.03, "g": 0.03, "b": 0.03},
                               (0.299, 0.587, 0.114))["r"] == pytest.approx(0.0, abs=1e-12)
    # A channel without a step cannot be placed: capped at the centroid window.
    assert chroma_offset_error({"r": 0.03, "g": 0.03, "b": 0.0},
                               (0.299, 0.587, 0.114))["b"] == CENTROID_HALF_PX


def test_clip_shift_counts_only_clipping_near_the_edge():
    # Synthetic: a window of 13 rows (bright above, dark below), 4 blocks of 2 columns.
    px = np.full((13, 4, 2), 0.01)
    px[:6] = 0.2
    enc = linear_to_srgb(np.array([0.2, 0.01]))
    step = float(enc[0] - enc[1])
    assert _clip_shift(px, float(enc[0]), float(enc[1])) == pytest.approx(0.0, abs=1e-12)
    noisy = px.copy()
    noisy[6:, :, 0] = 0.0  # half the dark side's samples cut at 0, evenly: a level change
    assert _clip_shift(noisy, float(enc[0]), float(enc[1])) == pytest.approx(0.0, abs=1e-12)
    ringing = px.copy()
    ringing[7:9] = 0.0  # two rows undershooting just below the edge, the outer row not
    want = 2 * float(enc[1]) / step  # each clipped row: the dark level's worth, per step
    assert _clip_shift(ringing, float(enc[0]), float(enc[1])) == pytest.approx(want)
    assert clip_offset_error({"r": 0.3, "g": 0.4, "b": 0.0})["r"] == pytest.approx(0.5)


def test_codec_colour_offset_bias_within_its_error():
    # Synthetic check: a dark sky over a darker sea, no lateral colour, through JPEG q85
    # (OpenCV's encoder, 4:2:0 chroma) with the edge at several places in the 16-row
    # chroma blocks. The codec moves the r edge by up to ~0.9 px; the chroma term must
    # cover it within 3 sigma (a judgement: common practice, no source), and on the
    # same scene in PNG the offset is within 0.1 px (the module's tolerance).
    sky = {"r": 0.0085, "g": 0.0034, "b": 0.0015}
    sea = {"r": 0.0017, "g": 0.0007, "b": 0.0003}
    ratios = []
    for row in (150.3, 152.6, 155.1, 157.8):
        for q in (None, 85):
            img, _ = render(Scene(shape=(220, 400), horizon_row_px=row, sun=False,
                                  sky_level=sky, sea_level=sea, gain_e=40000.0,
                                  read_noise_e=3.0, jpeg_quality=q, seed=3))
            offs = horizon_colour_offsets(img, find_horizon(img))
            if q is None:
                assert abs(offs["r"]) < 0.1
                continue
            err = chroma_offset_error({c: offs[f"step_{c}"] for c in "rgb"},
                                      (0.299, 0.587, 0.114))  # JFIF: BT.601 luma
            ratios.append(abs(offs["r"]) / err["r"])
    assert max(ratios) < 3.0
    assert max(ratios) > 1.0  # the codec's bias is real: the term is not decoration
