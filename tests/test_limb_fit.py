"""The limb fit's numerical machinery against a reference library (scipy.optimize).

analyse.limb fits the apex with its own bounded Levenberg-Marquardt and variable
projection on pixels gathered in narrow bins; these checks hold it to
``scipy.optimize.least_squares`` (a published, independent implementation: trust-region
reflective, J. J. More 1978 / Branch, Coleman & Li 1999) on the same problems, pixel by
pixel, and check that the faster paths (batched Jacobian, the 1-D table far above the
horizon, warm starts) change nothing but the cost. The flux's pixel shares are held to
sampling, the 4:2:0 chroma leak to FFmpeg's own round trip (through PyAV).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import least_squares
from scipy.special import ndtr

from analyse import limb as lb
from analyse._chroma420 import _leak_420
from analyse._limbsky import _area_above
from analyse.horizon import find_horizon
from tests.synthetic import Scene, render


def _limb_pixels(top: float, sigma: float, radius: float, seed: int, noise: float = 0.01):
    """Pixels of a blurred limb-darkened limb near its apex: values, h, drop."""
    rng = np.random.default_rng(seed)
    s = np.repeat(np.arange(-20.0, 21.0), 24)
    h = np.tile(np.arange(24.0), 41) + top - 16.0 + 0.37
    drop = s**2 / (2.0 * radius)
    step, ramp = lb._limb_basis(h[None, :], (top - drop)[None, :], sigma, radius)
    values = 0.8 * step[0] + 0.8 * lb._ramp_ratio("g", radius) * ramp[0] + 0.05
    return values + rng.normal(0.0, noise, values.size), h, drop


def _pixel_fit_scipy(values, h, drop, top0, sigma0, radius, ratio):
    """The same model fitted pixel by pixel with scipy (sigma free, b = ratio a)."""

    def resid(p):
        step, ramp = lb._limb_basis(h[None, :], (p[0] - drop)[None, :], math.exp(p[1]), radius)
        a = np.column_stack([step[0] + ratio * ramp[0], np.ones_like(h)])
        coef = np.linalg.lstsq(a, values, rcond=None)[0]
        return a @ coef - values

    fit = least_squares(resid, [top0, math.log(sigma0)], method="trf", xtol=1e-10,
                        ftol=1e-12, gtol=1e-12)
    return fit.x[0], math.exp(fit.x[1])


@pytest.mark.parametrize("top,sigma,seed", [(18.0, 1.0, 1), (12.3, 1.6, 2), (25.7, 0.7, 3)])
def test_binned_apex_fit_matches_scipy_on_pixels(top, sigma, seed):
    # The binned fit (b held to the law by a strong prior) and scipy's pixel-level fit of
    # the same model with b tied to the law agree: the apex within 0.01 px (1/30 of the
    # issue's 0.3 px; covers the 0.1-px bins), the blur, a nuisance parameter that the
    # fit stops refining once a step moves log(sigma) by less than 2e-3, within 2 %.
    radius, ratio = 180.0, lb._ramp_ratio("g", 180.0)
    values, h, drop = _limb_pixels(top, sigma, radius, seed)
    fit = lb._fit_apex(values, h, drop, top + 0.6, 1.0, 1.0, radius, ratio, 1e3, True)
    ref_top, ref_sigma = _pixel_fit_scipy(values, h, drop, top + 0.6, 1.0, radius, ratio)
    assert fit.ok
    assert abs(fit.top_px - ref_top) < 0.01
    assert fit.sigma_px == pytest.approx(ref_sigma, rel=0.02)
    assert abs(fit.top_px - top) < 0.05  # and both find the truth (noise 1 % of the disc)


def test_binned_error_counts_the_scatter_within_bins():
    # The apex error from binned residuals plus the within-bin scatter equals the pixel
    # fit's: the noise is 0.01 and there are ~1000 pixels, so the error is a few 0.01 px.
    values, h, drop = _limb_pixels(18.0, 1.0, 180.0, 4, noise=0.02)
    fit = lb._fit_apex(values, h, drop, 18.4, 1.0, 1.0, 180.0,
                       lb._ramp_ratio("g", 180.0), 0.2, True)
    quieter = lb._fit_apex(*_limb_pixels(18.0, 1.0, 180.0, 4, noise=0.005), 18.4, 1.0, 1.0,
                           180.0, lb._ramp_ratio("g", 180.0), 0.2, True)
    assert 0.005 < fit.top_err_px < 0.1
    assert fit.top_err_px / quieter.top_err_px == pytest.approx(4.0, rel=0.2)


def test_ramp_table_matches_quadrature():
    # The tabulated blurred ramp J_1/2(z, w) = integral_0^max(z + w, 0) sqrt(v) phi(v - z) dv
    # against scipy.integrate.quad (QUADPACK, Piessens et al. 1983) at random points
    # between the grid's nodes. With sigma = 1 and R -> infinity the model's ramp is
    # J_1/2 itself. 5e-4 of a disc level: the bilinear interpolation on the 0.05 grid
    # reaches 2.6e-4 here (limits rounded to the integration grid reached 7e-3 and made
    # the fits' finite-difference Jacobians wrong by up to 90 %).
    from scipy.integrate import quad

    rng = np.random.default_rng(11)
    z, w = rng.uniform(-3.0, 12.0, 150), rng.uniform(0.0, 9.9, 150)
    ref = [quad(lambda v, zz=zz: math.sqrt(v) * math.exp(-0.5 * (v - zz) ** 2)
                / math.sqrt(2.0 * math.pi), 0.0, max(zz + ww, 0.0))[0] for zz, ww in zip(z, w)]
    _, ramp = lb._limb_basis(w, z + w, 1.0, 1e12)
    np.testing.assert_allclose(ramp, ref, atol=5e-4)


def test_apex_fit_gives_up_at_the_blur_floor():
    # A limb blurred by 1.0 px fitted with a floor of 1.3 px: the fit stops at the floor
    # and says so; with the floor below the truth it finds the blur (within 5 %).
    values, h, drop = _limb_pixels(18.0, 1.0, 180.0, 6)
    ratio = lb._ramp_ratio("g", 180.0)
    floored = lb._fit_apex(values, h, drop, 18.4, 1.5, 1.0, 180.0, ratio, 0.2, True,
                           sigma_floor=1.3)
    assert not floored.ok and floored.sigma_px == pytest.approx(1.3, rel=1e-6)
    free = lb._fit_apex(values, h, drop, 18.4, 1.5, 1.0, 180.0, ratio, 0.2, True,
                        sigma_floor=0.6)
    assert free.ok and free.sigma_px == pytest.approx(1.0, rel=0.05)


def test_far_above_the_line_the_table_is_the_same():
    # Points beyond the table's height range take its last column, whatever else is in
    # the call.
    rng = np.random.default_rng(5)
    h = rng.uniform(11.0, 40.0, 500)
    top = h + rng.uniform(-8.0, 8.0, 500)
    far = lb._limb_basis(h, top, 1.0, 150.0)
    mixed_h = np.append(h, 0.5)  # one point near the line forces the 2-D path for it
    mixed = lb._limb_basis(mixed_h, np.append(top, 1.0), 1.0, 150.0)
    np.testing.assert_allclose(mixed[0][:-1], far[0], atol=1e-12)
    np.testing.assert_allclose(mixed[1][:-1], far[1], atol=1e-9)


def test_levenberg_marquardt_agrees_with_scipy_and_respects_bounds():
    # Rosenbrock's function as residuals (H. H. Rosenbrock, Comput. J. 3, 175 (1960)):
    # minimum at (1, 1); with an upper bound 0.5 on x the constrained minimum lies on it.
    def fun(p):
        p = np.atleast_2d(p)
        return np.stack([10.0 * (p[:, 1] - p[:, 0] ** 2), 1.0 - p[:, 0]], axis=1)

    lo, hi = np.array([-2.0, -2.0]), np.array([2.0, 2.0])
    p, _, _, conv = lb._levenberg_marquardt(fun, [-1.2, 1.0], lo, hi, max_iter=200, tol=1e-8)
    assert conv and np.allclose(p, [1.0, 1.0], atol=1e-5)
    hi_b = np.array([0.5, 2.0])
    p, _, _, conv = lb._levenberg_marquardt(fun, [-1.2, 1.0], lo, hi_b, max_iter=200,
                                            tol=1e-8)
    ref = least_squares(lambda q: fun(q)[0], [-1.2, 1.0], bounds=(lo, hi_b)).x
    assert not conv  # held at a bound: not reported as converged
    assert np.allclose(p, ref, atol=1e-4) and p[0] == pytest.approx(0.5)


def test_warm_start_changes_nothing_but_the_cost():
    # Starting the fits at the previous frame's blurs lands on the same minimum
    # (the fit's own tolerance is 2e-3 px).
    img, _ = render(Scene(seed=11))
    line = find_horizon(img)
    sun = lb.locate_sun(img, line)
    cold = lb.measure_limbs(img, line, sun)
    other = {c: lb.ChannelLimb(c, True, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0,
                               False, (), 100.0, 2.2, 0.6) for c in "rgb"}
    warm = lb.measure_limbs(img, line, sun, previous=other)
    for c in ("r", "g"):
        assert cold[c].apex_height_px == pytest.approx(warm[c].apex_height_px, abs=5e-3)
        assert cold[c].edge_sigma_px == pytest.approx(warm[c].edge_sigma_px, abs=5e-3)


@pytest.mark.parametrize("slope", [0.0, 0.02, 0.3, -1.5])
def test_area_above_the_line_matches_supersampling(slope):
    # The share of a unit pixel above a line, in closed form, against 400 x 400 samples
    # of the pixel (their own error is ~1/400 where the line crosses it).
    h = np.linspace(-1.2, 1.2, 25)
    norm = math.hypot(1.0, slope)
    g = (np.arange(400) + 0.5) / 400 - 0.5
    dx, dy = np.meshgrid(g, g)
    sampled = [float(np.mean(hc + (slope * dx - dy) / norm > 0)) for hc in h]
    np.testing.assert_allclose(_area_above(h, slope), sampled, atol=3e-3)


def _codec_round_trip(code: np.ndarray, pix_fmt: str) -> np.ndarray:
    """16-bit RGB through FFmpeg's YCbCr (BT.709) ``pix_fmt`` and back (PyAV)."""
    av = pytest.importorskip("av")
    frame = av.VideoFrame.from_ndarray(np.ascontiguousarray(code), format="rgb48le")
    yuv = frame.reformat(format=pix_fmt, src_colorspace="ITU709", dst_colorspace="ITU709")
    return yuv.reformat(format="rgb48le", src_colorspace="ITU709",
                        dst_colorspace="ITU709").to_ndarray() / 65535.0


def test_chroma_leak_matches_ffmpeg_420_round_trip():
    # Three horizontal edges like a sunset limb's (red bright, green 1.7 px higher and dim,
    # blue faint) through FFmpeg's 4:2:0 and back, minus the same through 4:4:4 (which
    # keeps its rounding, not the chroma's loss), averaged over the two row phases: the
    # predicted leak follows it (16-bit, so rounding does not hide it). Agreement to
    # 35 % rms (no source: what remains is the phase average of a nonlinear round trip).
    from analyse.frames import linear_to_srgb, srgb_to_linear

    y = np.arange(48.0)[:, None] * np.ones((1, 16))
    levels = [(0.02, 0.6, 24.3), (0.01, 0.08, 22.6), (0.006, 0.012, 21.8)]
    light = [lo + (hi - lo) * ndtr(y - at) for lo, hi, at in levels]
    code = np.stack([np.round(65535 * linear_to_srgb(p)) for p in light], 2).astype(np.uint16)
    full = srgb_to_linear(_codec_round_trip(code, "yuv444p16le"))
    even = srgb_to_linear(_codec_round_trip(code, "yuv420p16le")) - full
    odd = srgb_to_linear(_codec_round_trip(code[1:], "yuv420p16le")) - full[1:]
    actual = 0.5 * (even[1:-1] + odd[:-1])
    true = srgb_to_linear(code / 65535.0)
    sky = [np.full_like(y, lo) for lo, _, _ in levels]
    predicted = _leak_420([true[..., i] for i in range(3)], sky, lb.LUMA_BT709)
    for i in range(3):
        a, p = actual[..., i], predicted[i][1:-1]
        assert np.sqrt(np.mean((p - a) ** 2)) < 0.35 * np.sqrt(np.mean(a**2)), i
        assert np.corrcoef(a.ravel(), p.ravel())[0, 1] > 0.95


@pytest.mark.parametrize("phase", [0.0, 0.5])
def test_420_leak_is_removed_close_to_the_horizon(phase):
    # The sunset disc of tests/test_limb.py's 4:2:0 check sunk to red 8 px, green 9.7 px
    # above the line (JPEG quality 100: 4:2:0 chroma, little else lost): the leak
    # prediction includes the disc's light cut at the line and the rows down to it, and
    # green's apex comes back within 0.1 px as it does 20 px up (no source; 0.04 px on
    # these renders, -0.14 to -0.22 px uncorrected). Red's segment is still a disc (not
    # thin), so its model predicts the leak.
    from analyse.horizon import HorizonLine

    level = {"r": 0.7, "g": 0.1, "b": 0.015}
    scene = Scene(jpeg_quality=100, seed=33, horizon_row_px=150.3 + phase, disc_level=level,
                  sky_level={"r": 0.02, "g": 0.01, "b": 0.006},
                  sea_level={"r": 0.05, "g": 0.03, "b": 0.02},
                  apex_height_px={"r": 8.0, "g": 9.7, "b": 10.5})
    img, truth = render(scene)
    line = HorizonLine(True, truth.row_px, truth.x_ref_px, truth.slope, 0.0,
                       -math.degrees(math.atan(truth.slope)), 0.0, 100, "")
    sun = lb.SunLocation(True, truth.x_ref_px, truth.row_px - 10.0, 50.0, "")
    plain = lb.measure_limbs(img, line, sun)
    fixed = lb.measure_limbs(img, line, sun, chroma_luma=lb.LUMA_BT601)
    assert "thin-segment" not in fixed["r"].flags
    assert plain["g"].apex_height_px - truth.apex_height_px["g"] < -0.1
    assert abs(fixed["g"].apex_height_px - truth.apex_height_px["g"]) < 0.1
