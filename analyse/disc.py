"""The solar disc: limb darkening and the flux of a horizontal slice of it.

Heights on the disc are in units of its semidiameter, ``y = (altitude - centre) / SD``,
from -1 (lower limb) to +1 (upper limb). With the linear limb-darkening law
``I(mu) / I(1) = 1 - u (1 - mu)``, the brightness integrated across a horizontal chord
at height ``y`` is::

    B(y) = 2 (1 - u) sqrt(1 - y^2) + u (pi / 2) (1 - y^2)

and the flux below height ``y`` has the closed form ``C(y)`` of :func:`flux_below`, so
the flux between two heights is a difference of ``C``: exact however thin the slice,
which is what the last light of a limb needs.

References
----------
.. [1] A. N. Cox (ed.), Allen's Astrophysical Quantities, 4th ed., Springer (2000),
   section 14.7 (solar limb darkening). The coefficients below are approximate values
   for the linear law, recalled from that table (from memory; good to about 0.05).
"""

from __future__ import annotations

import numpy as np

__all__ = ["limb_darkening_u", "chord_brightness", "flux_below", "total_flux",
           "blur_fraction_above"]

# Linear limb-darkening coefficient against wavelength: approximate, from memory of [1].
_LD_WAVELENGTH_NM = np.array([400.0, 500.0, 600.0, 700.0, 800.0])
_LD_U = np.array([0.82, 0.72, 0.62, 0.55, 0.49])


def limb_darkening_u(wavelength_nm) -> np.ndarray:
    """Linear limb-darkening coefficient ``u`` of the Sun at wavelengths [nm] (see [1])."""
    return np.interp(wavelength_nm, _LD_WAVELENGTH_NM, _LD_U)


def chord_brightness(y, u) -> np.ndarray:
    """``B(y)``: brightness integrated across the chord at height ``y`` (units of SD).

    Parameters broadcast; zero outside ``|y| < 1``. Normalised so the centre's
    intensity is 1 and lengths are in semidiameters.
    """
    y = np.asarray(y, dtype=float)
    q = np.clip(1.0 - y**2, 0.0, None)
    return 2.0 * (1.0 - u) * np.sqrt(q) + u * (np.pi / 2.0) * q


def flux_below(y, u) -> np.ndarray:
    """``C(y) = integral of B from -1 to y``: the flux of the disc below height ``y``.

    ``C(-1) = 0`` and ``C(1) = pi (1 - u / 3)`` (:func:`total_flux`).
    """
    y = np.clip(np.asarray(y, dtype=float), -1.0, 1.0)
    uniform = y * np.sqrt(1.0 - y**2) + np.arcsin(y) + np.pi / 2.0
    darkened = (np.pi / 2.0) * (y - y**3 / 3.0 + 2.0 / 3.0)
    return (1.0 - u) * uniform + u * darkened


def total_flux(u) -> np.ndarray:
    """Flux of the whole disc, ``pi (1 - u/3)``, in the units of :func:`flux_below`."""
    return np.pi * (1.0 - np.asarray(u, dtype=float) / 3.0)


def blur_fraction_above(h, sigma) -> np.ndarray:
    """Fraction of a thin limb segment's light that stays above the horizon after blur.

    A segment of height ``h`` cut from a large disc has a column-summed brightness
    ``~ sqrt(h - y)`` at height ``y`` above the horizon line (its chord); a Gaussian blur
    of ``sigma`` spills part of it below the line, where a flux sum above the line does
    not look. ``h`` and ``sigma`` in the same unit; broadcasts; 0.5 for ``h -> 0``.
    """
    from scipy.special import ndtr

    h = np.maximum(np.asarray(h, dtype=float), 1e-9)
    x, w = np.polynomial.legendre.leggauss(24)
    u = 0.5 * (x + 1.0)  # y / h on 0..1
    wt = 0.5 * w * np.sqrt(1.0 - u)
    frac = np.sum(wt * ndtr(h[..., None] * u / np.maximum(sigma, 1e-9)), axis=-1)
    return frac / np.sum(wt)
