"""The camera's sensor: electrons, photon and read noise, the full well, sRGB codes.

What :func:`analyse.simulate.iter_frames` does to each frame's radiance after the blur
and the exposure: pure functions over numpy arrays.

References
----------
.. [1] IEC 61966-2-1:1999, sRGB encoding (section 5.3).
"""

from __future__ import annotations

import cv2
import numpy as np

from analyse.frames import linear_to_srgb

__all__ = ["encode_srgb"]


def _sensor(radiance, gain, cam, noise, bits) -> np.ndarray:
    """Electrons, photon and read noise, full-well clipping, sRGB encoding."""
    electrons = radiance * np.float32(gain)
    sigma = electrons + np.float32(cam.read_noise_e**2)
    cv2.sqrt(sigma, sigma)
    sigma *= noise
    electrons += sigma
    electrons *= np.float32(1.0 / cam.full_well_e)
    return encode_srgb(electrons, bits)


def encode_srgb(linear: np.ndarray, bits: int = 8) -> np.ndarray:
    """Linear light -> sRGB code values (IEC 61966-2-1), clipped to 0..1 first.

    Parameters
    ----------
    linear : ndarray
        Linear values, 1 = full scale [-].
    bits : {8, 16}

    Returns
    -------
    ndarray of uint8 or uint16
        ``round(sRGB(linear) (2^bits - 1))``, through a table on a linear grid of 2^16
        (8 bit) or 2^20 (16 bit) steps, finer than one code at the dark end.

    References
    ----------
    IEC 61966-2-1:1999, section 5.3 (encoding), via :func:`analyse.frames.linear_to_srgb`.
    """
    lut = _srgb_table(bits)
    n = np.float32(lut.size - 1)
    index = linear * n
    index += np.float32(0.5)
    np.clip(index, 0.0, n, out=index)
    return lut[index.astype(np.int32)]


_TABLES: dict[int, np.ndarray] = {}


def _srgb_table(bits: int) -> np.ndarray:
    if bits not in (8, 16):
        raise ValueError(f"bits must be 8 or 16, got {bits}")
    if bits not in _TABLES:
        n = 2**16 if bits == 8 else 2**20
        codes = np.round(linear_to_srgb(np.linspace(0.0, 1.0, n)) * (2**bits - 1))
        _TABLES[bits] = codes.astype(np.uint8 if bits == 8 else np.uint16)
    return _TABLES[bits]
