"""Last light at the detection level: the fading law, the disc's flux from chords.

Light curves are synthesised (invented data) from the closed-form limb-darkened segment
and from the forward model's own visible fraction (:func:`analyse.predict.visible_fraction`)
with the Sun's altitude falling at a steady rate, so the true crossing of the detection
level is known exactly: ``last_light_altitude_deg`` (the model's own root) over the rate.
"""

from __future__ import annotations

import numpy as np
import pytest

from analyse.disc import blur_fraction_above
from analyse.measure import (
    disc_flux_from_chords,
    last_light,
    segment_depth,
    segment_fraction,
)
from analyse.predict import (
    DETECTION_FRACTION,
    Conditions,
    build_model,
    last_light_altitude_deg,
    visible_fraction,
)

LEVEL = DETECTION_FRACTION
FPS = 8.0  # the end-to-end recordings' rate through the green segment
STEP_S = 1.0 / FPS


def test_thin_segment_law_and_its_limb_darkening_term():
    # Thin segment: (1 - u) (4 sqrt 2 / 3) eta^1.5 / (pi (1 - u/3)) plus the u pi/2 eta^2
    # term of the chord brightness integrated (analyse.disc); relative O(eta) beyond.
    u, eta = 0.65, np.array([1e-5, 1e-4, 1e-3])
    lead = (1 - u) * (4 * np.sqrt(2) / 3) * eta**1.5 + u * (np.pi / 2) * eta**2
    assert np.allclose(segment_fraction(eta, u), lead / (np.pi * (1 - u / 3)), rtol=3e-3)


@pytest.mark.parametrize("u", [0.0, 0.6, 0.8])
def test_segment_depth_inverts_segment_fraction(u):
    eta = np.geomspace(1e-6, 1.9, 50)
    assert np.allclose(segment_depth(segment_fraction(eta, u), u), eta, rtol=1e-5)
    assert segment_depth(0.0, u) == 0.0


def _segment_curve(t, t0, rate_sd_per_s, u, squeeze=0.8):
    """A refracted limb-darkened segment whose true depth falls at a steady rate."""
    return squeeze * segment_fraction(np.maximum(rate_sd_per_s * (t0 - t), 0.0), u)


def test_last_light_is_exact_on_the_closed_form_segment_law():
    u, rate, t0, q = 0.66, 10.6 / 944.0, 7.31, 0.8
    t = np.arange(0.0, 9.0, STEP_S)
    f = _segment_curve(t, t0, rate, u, q)
    true = t0 - segment_depth(LEVEL / q, u) / rate
    ll = last_light(t, f > 0.3 * LEVEL, f, np.full(t.size, 1e-8), disc_flux=1.0, limb_u=u)
    assert ll.method.startswith("fading fit")
    # F^(2/3) linear in time over 2-60 times the level lands 0.06 s early here; the
    # segment law is the curve itself: only rounding remains (1 ms).
    assert abs(ll.t_unix_s - true) < 1e-3


@pytest.fixture(scope="module")
def model_curves():
    """The forward model's visible fraction, base scenario's air (35 deg N, 10 m, 6.5 K/km),
    the true altitude falling 10.6 arcsec/s; and each channel's exact last light [s]."""
    cond = Conditions(35.2, -20.4, 10.0, 16.0, 1015.0, 0.7, 100.0)
    model = build_model(cond, 6.5, azimuth_deg=300.0, rays=32, span_arcmin=20.0)
    sd, rate = 944.0, -10.6 / 3600.0
    out = {}
    for c in ("r", "g"):
        a_last = last_light_altitude_deg(model, c, sd)
        t = np.arange(-12.0, 2.0, STEP_S) + 0.037  # frames not aligned with the crossing
        out[c] = t, visible_fraction(model, c, a_last + rate * t, sd)
    return out


@pytest.mark.parametrize("channel", ["r", "g"])
def test_last_light_on_the_model_light_curve(model_curves, channel):
    # The crossing is t = 0 by construction. Old law (F^(2/3) linear, 2-60 x level):
    # -0.08 s (red), -0.11 s (green): the channel's spread of wavelengths, whose horizons
    # differ by several arcsec, and limb darkening bend the final second. Allowed:
    # 0.03 s, a quarter of the frame interval.
    t, f = model_curves[channel]
    ll = last_light(t, f > 0.3 * LEVEL, f, np.full(t.size, 1e-8), channel=channel,
                    disc_flux=1.0)
    assert ll.method.startswith("fading fit")
    assert abs(ll.t_unix_s) < 0.03


@pytest.mark.parametrize("channel", ["r", "g"])
def test_last_light_on_a_noisy_quantised_blurred_model_curve(model_curves, channel):
    """5 % scatter per frame, sums quantised to 0.2 of the level, Gaussian blur of 1.1 px
    with the apexes of the faintest segments misread (a thin-segment fit that does not go
    below 1.6 px), one frame whose flux collapsed (a failed sky). The recording's flux is
    the model's times 5e4 (disc flux), the apex height 0.8 arcsec-per-px squeeze."""
    t, frac = model_curves[channel]
    rng = np.random.default_rng(7)
    disc, blur = 5e4, 1.1
    h_true = 0.8 * 944.0 * segment_depth(frac / 0.8, 0.62) / 4.0  # [px] at 4 arcsec/px
    flux = disc * frac * blur_fraction_above(h_true, blur) * (1 + 0.05 * rng.normal(size=t.size))
    q = 0.2 * LEVEL * disc
    flux = np.round(flux / q) * q
    flux[np.flatnonzero(frac < 4 * LEVEL)[0]] *= 0.3
    err = np.full(t.size, 0.05 * LEVEL * disc)
    h_meas = np.where(h_true > 3 * blur, h_true, np.maximum(h_true, 1.6))
    ll = last_light(t, flux > 5 * err, flux, err, channel=channel, disc_flux=disc,
                    height_px=h_meas, blur_px=blur)
    # Half a frame interval: scatter of the fit (its own error about 0.02 s) and the
    # model's curvature; the old law with per-frame apexes lands 0.08-0.10 s early.
    assert abs(ll.t_unix_s) < 0.5 * STEP_S
    assert abs(ll.t_unix_s) < 4.0 * ll.err_s + 0.03


@pytest.mark.parametrize("squeeze", [0.57, 0.82, 1.1])  # inversion, standard, superadiabatic
def test_disc_flux_from_chords_does_not_assume_the_atmosphere(squeeze):
    """Segments squeezed vertically by refraction: the chord is the true disc's, the apex
    the squeezed one; the flux of each is the disc's times squeeze x S(eta) x blur share."""
    r, u, blur, disc = 236.0, 0.62, 1.1, 8.0e4
    eta = np.linspace(0.01, 0.25, 40)  # true depth [semidiameters]
    h = squeeze * eta * r
    w = 2.0 * r * np.sqrt(2.0 * eta - eta**2)
    rng = np.random.default_rng(3)
    w = w + rng.normal(0.0, 0.3, eta.size)  # 0.3 px chord noise
    h = h + rng.normal(0.0, 0.1, eta.size)
    flux = disc * squeeze * segment_fraction(eta, u) * blur_fraction_above(h, blur)
    got = disc_flux_from_chords(h, w, flux, np.ones(eta.size, bool), blur_px=blur,
                                radius_px=r, limb_u=u, max_height_px=0.3 * r)
    # 2 %: the chord and apex noise through the median (a model-based V(h) for 0.82 would
    # be off by sqrt(0.82 / squeeze) - 1, 20 % for the inversion).
    assert abs(got / disc - 1.0) < 0.02


def test_disc_flux_from_chords_needs_segments():
    nan = np.full(5, np.nan)
    assert np.isnan(disc_flux_from_chords(nan, nan, nan, np.ones(5, bool), blur_px=1.0,
                                          radius_px=200.0, limb_u=0.6, max_height_px=60.0))


@pytest.mark.parametrize("blur", [1e-3, 1.1])  # a sharp image, the recordings' blur
@pytest.mark.parametrize("channel", ["r", "g"])
def test_last_light_where_the_final_apexes_were_not_measured(model_curves, channel, blur):
    """The apex fit gives up on the thinnest segments (NaN below 4 px) while their flux is
    still measured: their height is unknown, not zero (read as zero, blur would seem to
    hide half their light and last light would land 0.2-0.3 s late)."""
    t, frac = model_curves[channel]
    rng = np.random.default_rng(11)
    disc = 1e5
    h_true = 0.8 * 944.0 * segment_depth(frac / 0.8, 0.62) / 4.0  # [px] at 4 arcsec/px
    flux = disc * frac * blur_fraction_above(h_true, blur) + rng.normal(0.0, 0.5, t.size)
    h_meas = np.where(h_true > 4.0, h_true + rng.normal(0.0, 0.15, t.size), np.nan)
    ll = last_light(t, flux > 2.5, flux, np.full(t.size, 0.5), channel=channel,
                    disc_flux=disc, height_px=h_meas, blur_px=blur)
    assert ll.method.startswith("fading fit")
    # A quarter of the frame interval, as on the noise-free curve: noise 5 % of the level.
    assert abs(ll.t_unix_s) < 0.03
