"""Sequence observables on synthetic per-frame series with known truth (invented data)."""

from __future__ import annotations

import numpy as np
import pytest

from analyse.measure import disc_geometry, exposure_changes, last_light


def fading_series(t_end=7.03, rate_px_s=2.0, fps=10.0, noise=1.0, seed=2):
    """A limb segment of height h = rate (t_end - t): flux ~ h^1.5 (circular segment)."""
    t = np.arange(0.0, 10.0, 1.0 / fps)
    h = np.clip((t_end - t) * rate_px_s, 0.0, None)
    flux = 10.0 * h**1.5 + np.random.default_rng(seed).normal(0.0, noise, t.size)
    err = np.full(t.size, noise)
    return t, flux > 5.0 * err, flux, err


def test_last_light_is_interpolated_between_frames():
    t, vis, flux, err = fading_series()
    ll = last_light(t, vis, flux, err)
    true = 7.03 - (5.0 / 10.0) ** (2.0 / 3.0) / 2.0  # where 10 h^1.5 = 5 sigma
    assert ll.method == "noise limit, fading fit"
    assert t[ll.last_visible_index] <= ll.t_unix_s <= t[ll.first_dark_index]
    assert abs(ll.t_unix_s - true) < 0.1  # within one frame interval (issue's requirement)
    assert 0.0 < ll.err_s <= 0.1 / np.sqrt(12.0) + 1e-12


def test_a_one_frame_blip_after_dark_is_not_last_light():
    t, vis, flux, err = fading_series()
    first_dark = int(np.flatnonzero(vis)[-1]) + 1
    vis2, flux2 = vis.copy(), flux.copy()
    blip = first_dark + 10
    vis2[blip], flux2[blip] = True, 50.0
    assert last_light(t, vis2, flux2, err).first_dark_index == first_dark


def test_never_visible_and_still_visible_are_reported():
    t = np.arange(10.0)
    assert last_light(t, np.zeros(10, bool), np.zeros(10), np.ones(10)).method == "never visible"
    assert "still visible" in last_light(t, np.ones(10, bool), np.ones(10) * 9, np.ones(10)).method


def test_disc_geometry_recovers_radius_and_flattening():
    rx, f = 300.0, 0.85
    h = np.linspace(5.0, 250.0, 40)
    w = 2 * rx * np.sqrt(2 * h / (f * rx) - h**2 / (f * rx) ** 2)
    w += np.random.default_rng(1).normal(0.0, 0.3, h.size)
    g = disc_geometry(h, w)
    assert abs(g.rx_px - rx) < 0.5  # 0.5 px: the disc-width tolerance
    assert abs(g.flattening - f) < 0.005
    assert g.rx_err_px < 0.5 and g.flattening_err < 0.01


def test_disc_geometry_refuses_too_little_data():
    g = disc_geometry([1.0, 2.0], [10.0, 12.0])
    assert np.isnan(g.rx_px) and "too few" in g.message


def test_exposure_jumps_are_found_but_smooth_dimming_is_not():
    sky = 0.5 * np.exp(-np.arange(100) / 200.0)
    assert exposure_changes(sky).size == 0
    sky[60:] *= 2.0
    assert list(exposure_changes(sky)) == [60]
    sky[80:] /= 1.5  # a second step down
    assert list(exposure_changes(sky)) == [60, 80]


def test_a_single_odd_sky_level_is_not_an_exposure_change():
    # One frame 30 % off its neighbours (the sky beside a faint apex is noisy; seen on
    # a locked-exposure recording) is not a step; NaN frames are skipped.
    sky = 0.5 * np.exp(-np.arange(100) / 200.0)
    sky[40] *= 1.3
    sky[70] = np.nan
    assert exposure_changes(sky).size == 0
    sky[75:] *= 0.5
    assert list(exposure_changes(sky)) == [75]


def _offset_table(n=200, seed=5):
    """Synthetic frames: green 1.5 px above red, 0.1 px frame noise, all visible."""
    from analyse.measure import CHANNELS, FrameTable

    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 50.0, n)
    h = {"r": 10.0 + rng.normal(0, 0.1, n), "g": 11.5 + rng.normal(0, 0.1, n),
         "b": np.full(n, np.nan)}
    per = lambda v: {c: np.full(n, v) for c in CHANNELS}  # noqa: E731
    return FrameTable(t, np.ones(n, bool), per(100.0)["r"], per(0.1)["r"], np.zeros(n),
                      np.zeros(n), h, per(0.1), per(0.0), per(10.0), per(5.0), per(1.0),
                      {c: np.ones(n, bool) for c in CHANNELS}, per(1.0), per(0.1), per(0.1),
                      {c: np.zeros(n, bool) for c in CHANNELS}, ((),) * n, ("x",) * n)


def test_colour_offset_error_is_common_to_all_frames():
    from analyse.measure import green_above_red

    tab = _offset_table()
    dy = {"r": -0.2, "g": 0.0}
    off, err, n = green_above_red(tab, t_last_red=50.0, plate_scale_arcsec_per_px=4.0,
                                  colour_offset_dy_px=dy)
    assert n == 200 and off == pytest.approx((1.5 + 0.2) * 4.0, abs=0.1)
    off2, err2, _ = green_above_red(tab, t_last_red=50.0, plate_scale_arcsec_per_px=4.0,
                                    colour_offset_dy_px=dy,
                                    colour_offset_dy_err_px={"r": 0.3, "g": 0.0})
    assert off2 == off
    # Quadrature with the median's standard error; it does not shrink with frames.
    assert err2 == pytest.approx(np.hypot(err, 0.3 * 4.0))
    _, err_more, _ = green_above_red(_offset_table(2000), t_last_red=50.0,
                                     plate_scale_arcsec_per_px=4.0, colour_offset_dy_px=dy,
                                     colour_offset_dy_err_px={"r": 0.3})
    assert err_more > 0.3 * 4.0
    # Unknown errors count as zero rather than poisoning the result.
    _, err_nan, _ = green_above_red(tab, t_last_red=50.0, plate_scale_arcsec_per_px=4.0,
                                    colour_offset_dy_px=dy, colour_offset_dy_err_px={"r": np.nan})
    assert err_nan == err


def test_relative_exposure_and_fluxes_per_unit_exposure():
    # Recorded linear light is proportional to exposure time x gain (ISO) below the clip
    # level (the definition of a linear sensor); a 1 % change is treated as none.
    from analyse.measure import per_exposure, relative_exposure

    rel = relative_exposure([1 / 1000, 1 / 500, 1 / 250], [100, 100, 200])
    assert rel.tolist() == pytest.approx([1.0, 2.0, 8.0])
    assert relative_exposure([1 / 1000, 1 / 1000], None) is None
    assert relative_exposure([1 / 1000, 1.005 / 1000], None) is None
    assert relative_exposure([1 / 1000, None], None) is None
    table = _offset_table(n=3)
    scaled = per_exposure(table, rel)
    assert scaled.flux["g"].tolist() == pytest.approx((table.flux["g"] / rel).tolist())
    assert scaled.sky_level["r"].tolist() == pytest.approx((table.sky_level["r"] / rel).tolist())
    assert scaled.apex_height_px["g"] is table.apex_height_px["g"]
