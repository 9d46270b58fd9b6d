"""Transfer functions of stored video against the standards that define them.

Each check transcribes the standard's formula or constants (cited beside it) and holds
analyse._transfer to it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from analyse import _transfer as tf


def test_bt709_inverse_oetf():
    # ITU-R BT.709-6 (2015), item 1.2: V = 1.099 L^0.45 - 0.099 for 1 >= L >= 0.018,
    # V = 4.500 L for 0.018 > L >= 0. The inverse must return L to float rounding.
    light = np.concatenate([np.linspace(0.0, 0.0179, 50), np.linspace(0.018, 1.0, 200)])
    code = np.where(light < 0.018, 4.5 * light, 1.099 * light**0.45 - 0.099)
    np.testing.assert_allclose(tf.bt709_to_linear(code), light, rtol=1e-9, atol=1e-12)
    # The two segments meet near V = 0.081 (4.5 x 0.018); the standard's rounded constants
    # leave a step of 0.3 % there (the power segment gives 0.0809 at L = 0.018).
    assert tf.bt709_to_linear(0.081) == pytest.approx(0.018, rel=5e-3)


def test_hlg_inverse_oetf():
    # ITU-R BT.2100-2 (2018), table 5: a = 0.17883277, b = 1 - 4a = 0.28466892,
    # c = 0.5 - a ln(4a) = 0.55991073 (printed to 8 decimals); E' = sqrt(3 E) for
    # 0 <= E <= 1/12, else a ln(12 E - b) + c.
    assert tf.HLG_B == pytest.approx(0.28466892, abs=5e-9)
    assert tf.HLG_C == pytest.approx(0.55991073, abs=5e-9)
    light = np.linspace(0.0, 1.0, 301)
    code = np.where(light <= 1.0 / 12.0, np.sqrt(3.0 * light),
                    0.17883277 * np.log(np.maximum(12.0 * light - 0.28466892, 1e-12))
                    + 0.55991073)
    np.testing.assert_allclose(tf.hlg_to_linear(code), light, rtol=1e-6, atol=1e-9)
    assert tf.hlg_to_linear(1.0) == pytest.approx(1.0, abs=1e-6)  # peak code, peak light


def test_pq_eotf():
    # SMPTE ST 2084:2014 / ITU-R BT.2100-2 table 4: m1 = 2610/16384 = 0.1593017578125,
    # m2 = 2523/4096 x 128 = 78.84375, c1 = 3424/4096 = 0.8359375,
    # c2 = 2413/4096 x 32 = 18.8515625, c3 = 2392/4096 x 32 = 18.6875 (exact binary fractions).
    assert (tf.PQ_M1, tf.PQ_M2, tf.PQ_C1, tf.PQ_C2, tf.PQ_C3) == (
        0.1593017578125, 78.84375, 0.8359375, 18.8515625, 18.6875)
    assert tf.pq_to_linear(1.0) == pytest.approx(1.0, rel=1e-12)  # 10000 cd/m^2
    assert tf.pq_to_linear(0.0) == 0.0
    # 100 cd/m^2 is at a PQ signal of about 0.508 (from memory, the commonly quoted
    # "SDR white near half the PQ range"); 2 % covers the quoted digits.
    assert 10000.0 * tf.pq_to_linear(0.5081) == pytest.approx(100.0, rel=0.02)


def test_h273_codes():
    # ITU-T H.273 (2016) table 3: 1 BT.709, 6 SMPTE 170M (BT.601), 14/15 BT.2020 10/12-bit
    # (the BT.709 OETF), 13 IEC 61966-2-1 (sRGB), 16 SMPTE ST 2084 (PQ), 18 ARIB STD-B67
    # (HLG); 2 is "unspecified".
    assert [tf.transfer_name(c)[0] for c in (1, 6, 14, 15, 13, 16, 18)] == [
        "BT.709", "BT.709", "BT.709", "BT.709", "sRGB", "PQ", "HLG"]
    assert tf.transfer_name(2) == ("sRGB", False)
    assert not math.isnan(float(tf.to_linear("linear", 0.25)))
