"""Transfer functions of stored video: code values -> linear light.

Private helper of :mod:`analyse.frames`. A video's header names how its R'G'B' code
values relate to light (ITU-T H.273 ``transfer_characteristics``); intensities are
compared only after undoing it. Stills and untagged video are taken as sRGB
(:func:`analyse.frames.srgb_to_linear`). For camera video the inverse of the camera's
opto-electronic transfer function (OETF) is applied: it returns the light the camera saw
(scene-referred), which is what the limb and flux models describe; a display's EOTF
(BT.1886's gamma 2.4) would add the display's rendering intent instead.

References
----------
.. [1] ITU-R Recommendation BT.709-6 (2015), item 1.2 (opto-electronic conversion);
   the same function in BT.601-7 and BT.2020-2 (its 10-bit constants rounded alike).
.. [2] ITU-R Recommendation BT.2100-2 (2018), table 5: hybrid log-gamma (HLG) OETF.
.. [3] SMPTE ST 2084:2014 and ITU-R BT.2100-2 table 4: perceptual quantizer (PQ) EOTF.
.. [4] ITU-T Recommendation H.273 (2016), table 3 (transfer_characteristics codes).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["TRANSFERS", "transfer_name", "to_linear"]

# BT.709 OETF [1]: V = 4.5 L below L = 0.018, else 1.099 L^0.45 - 0.099.
BT709_ALPHA = 1.099
BT709_BETA = 0.018
BT709_SLOPE = 4.5
BT709_POWER = 0.45
# HLG OETF [2]: E' = sqrt(3 E) up to E = 1/12, else a ln(12 E - b) + c.
HLG_A = 0.17883277
HLG_B = 1.0 - 4.0 * HLG_A
HLG_C = 0.5 - HLG_A * math.log(4.0 * HLG_A)
# PQ EOTF [3]: Y = (max(E'^(1/m2) - c1, 0) / (c2 - c3 E'^(1/m2)))^(1/m1), Y = 1 at 10000 cd/m^2.
PQ_M1 = 2610.0 / 16384.0
PQ_M2 = 2523.0 / 4096.0 * 128.0
PQ_C1 = 3424.0 / 4096.0
PQ_C2 = 2413.0 / 4096.0 * 32.0
PQ_C3 = 2392.0 / 4096.0 * 32.0

#: H.273 transfer_characteristics [4] -> name. 1, 6, 14 and 15 share BT.709's OETF.
TRANSFERS = {1: "BT.709", 6: "BT.709", 14: "BT.709", 15: "BT.709", 13: "sRGB", 8: "linear",
             16: "PQ", 18: "HLG"}


def transfer_name(code: int | None) -> tuple[str, bool]:
    """The transfer to decode with for a header's code, and whether the header named one
    that is supported (else sRGB, as for stills)."""
    if code in TRANSFERS:
        return TRANSFERS[code], True
    return "sRGB", False


def bt709_to_linear(v: np.ndarray) -> np.ndarray:
    """Inverse of the BT.709 OETF [1]: code values 0..1 -> scene light 0..1."""
    v = np.asarray(v, dtype=np.float64)
    knee = BT709_SLOPE * BT709_BETA
    power = ((np.maximum(v, knee) + BT709_ALPHA - 1.0) / BT709_ALPHA) ** (1.0 / BT709_POWER)
    return np.where(v < knee, v / BT709_SLOPE, power)


def hlg_to_linear(v: np.ndarray) -> np.ndarray:
    """Inverse of the HLG OETF [2]: code values 0..1 -> scene light 0..1."""
    v = np.asarray(v, dtype=np.float64)
    upper = (np.exp((np.maximum(v, 0.5) - HLG_C) / HLG_A) + HLG_B) / 12.0
    return np.where(v <= 0.5, v**2 / 3.0, upper)


def pq_to_linear(v: np.ndarray) -> np.ndarray:
    """The PQ EOTF [3]: code values 0..1 -> light as a fraction of 10000 cd/m^2."""
    p = np.asarray(v, dtype=np.float64).clip(0.0, 1.0) ** (1.0 / PQ_M2)
    return (np.maximum(p - PQ_C1, 0.0) / (PQ_C2 - PQ_C3 * p)) ** (1.0 / PQ_M1)


def to_linear(name: str, v: np.ndarray) -> np.ndarray:
    """Code values 0..1 -> linear light with the named transfer (:data:`TRANSFERS`)."""
    from analyse.frames import srgb_to_linear

    if name == "sRGB":
        return np.asarray(srgb_to_linear(np.asarray(v, dtype=np.float64)))
    funcs = {"BT.709": bt709_to_linear, "HLG": hlg_to_linear, "PQ": pq_to_linear,
             "linear": lambda x: np.asarray(x, dtype=np.float64)}
    if name not in funcs:
        raise ValueError(f"unknown transfer {name!r}")
    return funcs[name](v)
