"""The 4:2:0 colour leak between the channels at the Sun's limb.

Used by :func:`analyse.limb.measure_limbs` when ``chroma_luma`` is given.

JPEG and most video keep the luma ``Y' = K_R R' + K_G G' + K_B B'`` of the encoded
(sRGB) values at full resolution and the colour differences at half resolution in
both directions, so each decoded channel is ``X' + D (X' - Y')``, with ``D`` the
chroma's resampling minus the identity [1]_. At a sunset limb the channels' edges
differ (dispersion lifts green a pixel or two above a much brighter red), and red's
edge leaks into green with weight ``-K_R``: on simulated H.264 and JPEG frames green's
apex reads 0.2 px low, red's edge is widened. The leak is predicted from the fitted
limb models (sky plus limb of each channel, encoded), with ``D`` the resampling's
vertical spread averaged over the row phase, :data:`CHROMA_420_KERNEL`, and each
channel with a disc is fitted again with it removed, most significant first, each
refit updating the prediction for the next. Only rows mix: the limb is level near the
apex. The same leak of the sky's own colour step at the horizon is in the sky model
(the columns beside the Sun went through the codec alike) and is left out.

References
----------
.. [1] ITU-R Recommendation BT.601-7 (2011), section 2.5.1 (luma weights 0.299, 0.587,
   0.114; also JPEG's JFIF 1.02, Hamilton 1992) and BT.709-6 (2015), items 3.2-3.3
   (0.2126, 0.7152, 0.0722); chroma siting and 2:1 decimation in both directions for
   4:2:0 per ITU-T H.264 (2019), annex E, and ITU-T T.81 (1992), section A.1.1.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from analyse._limbmodel import _limb_basis
from analyse._limbsky import _Frame
from analyse.frames import linear_to_srgb, srgb_to_linear

__all__ = ["LUMA_BT601", "LUMA_BT709", "CHROMA_420_KERNEL"]

LUMA_BT601 = (0.299, 0.587, 0.114)  # K_R, K_G, K_B: ITU-R BT.601-7 (JPEG/JFIF, SD video)
LUMA_BT709 = (0.2126, 0.7152, 0.0722)  # K_R, K_G, K_B: ITU-R BT.709-6 item 3.2 (HD video)
# Vertical spread of 4:2:0 chroma [-], averaged over the row phase: FFmpeg's (1, 3, 3, 1) / 8
# decimation with nearest-sample upsampling and libjpeg's 2x2 mean with its (3/4, 1/4)
# "fancy" upsampling both average to the binomial (1, 4, 6, 4, 1) / 16, variance 1 px^2
# (derived here; the round trip through FFmpeg is checked in tests/test_limb_fit.py).
CHROMA_420_KERNEL = np.array([1.0, 4.0, 6.0, 4.0, 1.0]) / 16.0


def _model_light(model, fr: _Frame, part: tuple[slice, slice], sky: np.ndarray) -> np.ndarray:
    """Sky plus a channel's fitted limb model on the crop's rows and columns ``part``."""
    top, sc, rc, sigma, a, b, offset = model
    s, h = fr.s[part], fr.h[part]
    step, ramp = _limb_basis(h, top - (s - sc) ** 2 / (2.0 * rc), sigma, rc)
    return sky + offset + a * step + b * ramp


def _leak_420(light: list[np.ndarray], sky: list[np.ndarray], luma) -> list[np.ndarray]:
    """What 4:2:0 chroma adds to each channel's excess over the sky model [linear].

    ``light`` and ``sky``: the three channels' linear light, with and without the Sun,
    on the same image rows (axis 0). Each is encoded (sRGB), its colour difference from
    the luma ``sum K_i X'_i`` spread by :data:`CHROMA_420_KERNEL` and decoded: the
    decoded minus the true light, less the same for the sky alone (already in the sky
    model, which went through the codec alike).
    """
    def through_codec(planes):
        code = [linear_to_srgb(np.maximum(p, 0.0)) for p in planes]
        luma_code = sum(k * x for k, x in zip(luma, code))
        out = []
        for p, x in zip(planes, code):
            diff = x - luma_code
            spread = ndimage.convolve1d(diff, CHROMA_420_KERNEL, axis=0, mode="nearest")
            out.append(srgb_to_linear(x + spread - diff) - np.maximum(p, 0.0))
        return out

    return [a - b for a, b in zip(through_codec(light), through_codec(sky))]
