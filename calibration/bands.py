"""Camera colour channels as spectral bands, and the light that reaches them.

A colour channel integrates 80-120 nm of spectrum; near the horizon the short-wavelength
part of a band is lifted most by refraction and dimmed most by extinction. Each channel
is represented by ``K`` wavelengths (nodes), with weights::

    weight_k  ∝  sensitivity_k · S(lambda_k) · exp(-(tau_R(lambda_k) + tau_a(lambda_k)) · m)

with ``S`` the relative solar photon flux outside the atmosphere, ``tau_R`` the Rayleigh
optical depth (Bodhaine et al. 1999), ``tau_a`` the aerosol optical depth (Angstrom 1929)
and ``m`` the relative airmass along the ray (Kasten & Young 1989). Weights sum to 1
along the last axis and broadcast over airmass: airmass of shape (...) gives (..., K).
The spectrum, optical depths, airmass and transmission are computed in
:mod:`calibration._extinction` and re-exported here.

Nodes and sensitivities form a quadrature rule for the channel's own response curve R:
``sum_k sensitivity_k f(lambda_k) = ∫ R f dlambda / ∫ R dlambda`` exactly for polynomials
f of degree <= 2K - 1. So ``sensitivity_k`` is the share of the response carried by node
k (a quadrature weight), not R(lambda_k); smooth factors (solar spectrum, transmission)
are integrated over the band to high order with few nodes.

- Default bands (:func:`default_bands`): Gaussians, centre +- sigma, R 600 +- 30 nm,
  G 530 +- 30 nm, B 460 +- 30 nm (DESIGN.md; from memory, typical of CMOS colour
  sensors), sampled by Gauss-Hermite quadrature.
- Measured bands (:func:`bands_from_csv`): a table of the channel curves, interpolated
  by shape-preserving cubics (PCHIP; Fritsch & Carlson 1980) and turned into the Gauss
  quadrature rule of each curve (Golub & Welsch 1969), with the orthogonal polynomials
  built by the discretised Stieltjes procedure (Gautschi 2004).

The CSV format read by :func:`bands_from_csv`::

    # lines starting with '#' are comments (state the source of the curves here)
    wavelength_nm,r,g,b
    380,0.00,0.01,0.05
    ...

Columns in any order; wavelengths in nm, strictly increasing, within 200-1200 nm;
values are relative quantum efficiencies (photon response) >= 0 on any common scale;
at least 5 rows; every channel non-zero somewhere.

Not included: ozone (Chappuis band) absorption, water-vapour and O2 lines, and the
Fraunhofer lines of the solar spectrum (see :func:`solar_spectrum_relative`).
"""

from __future__ import annotations

import csv
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.polynomial.hermite_e import hermegauss
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import PchipInterpolator

from analyse.errors import InputError
from calibration._extinction import (
    STANDARD_PRESSURE_HPA,
    SUN_EFFECTIVE_TEMPERATURE_K,  # noqa: F401 - re-exported: analyse/report reads it here
    _vertical_optical_depth,
    aerosol_optical_depth_angstrom,
    airmass_kasten_young1989,
    rayleigh_optical_depth_bodhaine1999,
    solar_spectrum_relative,
    transmission,
)

__all__ = [
    "Band", "gaussian_band", "default_bands", "bands_from_csv", "solar_spectrum_relative",
    "rayleigh_optical_depth_bodhaine1999", "airmass_kasten_young1989",
    "aerosol_optical_depth_angstrom", "transmission", "band_weights",
    "effective_wavelength_nm", "effective_wavelength_table",
]  # fmt: skip

Spectrum = Callable[[NDArray[np.float64]], NDArray[np.float64]]

# --- constants -----------------------------------------------------------------------
DEFAULT_N_WAVELENGTHS = 7  # nodes per band; DESIGN.md asks for 5-9
# centre, sigma [nm] per channel; DESIGN.md defaults, from memory (typical CMOS)
DEFAULT_BAND_SHAPES_NM = {"r": (600.0, 30.0), "g": (530.0, 30.0), "b": (460.0, 30.0)}
CSV_WAVELENGTH_RANGE_NM = (200.0, 1200.0)  # nm; accepted in a band CSV (catches um input)
CSV_MIN_ROWS = 5  # rows; fewer cannot describe a band
MIN_NODE_WAVELENGTH_NM = 300.0  # nm; lower limit of Ciddor 1996, used by the ray tracer
CSV_CHANNELS = ("r", "g", "b")
_CSV_REFINE = 16  # sub-steps per tabulated interval when discretising a CSV curve


@dataclass(frozen=True, eq=False)
class Band:
    """One colour channel as a quadrature rule over wavelength.

    Attributes: ``name`` ("r", "g" or "b"); ``wavelength_nm`` (K,) node wavelengths,
    strictly increasing [nm]; ``sensitivity`` (K,) share of the channel's photon response
    carried by each node (quadrature weights >= 0, normalised to sum 1) [dimensionless];
    ``description``, where the band comes from, for reports. Arrays are made read-only.
    """

    name: str
    wavelength_nm: NDArray[np.float64]
    sensitivity: NDArray[np.float64]
    description: str

    def __post_init__(self) -> None:
        lam = np.array(self.wavelength_nm, dtype=float)
        sens = np.array(self.sensitivity, dtype=float)
        if lam.ndim != 1 or lam.shape != sens.shape or lam.size == 0:
            raise ValueError(
                f"Band {self.name!r}: wavelength_nm and sensitivity must be 1-D of equal "
                f"length, got shapes {lam.shape} and {sens.shape}"
            )
        ok = np.all(np.isfinite(lam)) and np.all(np.isfinite(sens)) and lam[0] > 0
        if not ok or np.any(np.diff(lam) <= 0) or np.any(sens < 0) or sens.sum() <= 0:
            raise ValueError(
                f"Band {self.name!r}: need finite wavelengths > 0, strictly increasing, "
                "and finite sensitivities >= 0, not all zero"
            )
        sens = sens / sens.sum()
        for field, value in (("wavelength_nm", lam), ("sensitivity", sens)):
            value.setflags(write=False)
            object.__setattr__(self, field, value)


# --- bands ---------------------------------------------------------------------------
def gaussian_band(
    name: str,
    centre_nm: float,
    sigma_nm: float,
    n_wavelengths: int = DEFAULT_N_WAVELENGTHS,
    description: str | None = None,
) -> Band:
    """A Gaussian channel response sampled by Gauss-Hermite quadrature.

    Nodes ``centre + sigma x_k`` and weights ``w_k`` come from the probabilists'
    Gauss-Hermite rule (weight ``exp(-x^2/2)``), so the band average of any polynomial
    of degree ``<= 2K - 1`` in wavelength is exact. Nodes and weights are symmetrised
    so that the flat-spectrum mean wavelength is the centre to rounding error.

    Parameters
    ----------
    name : str
        Channel name.
    centre_nm, sigma_nm : float
        Centre and standard deviation of the response [nm]; sigma > 0.
    n_wavelengths : int
        Number of nodes K, 1..20.
    description : str, optional
        Text for reports; default states the shape.
    """
    if not 1 <= int(n_wavelengths) <= 20:
        raise ValueError(f"n_wavelengths must be 1..20, got {n_wavelengths}")
    if not (np.isfinite(centre_nm) and np.isfinite(sigma_nm) and sigma_nm > 0):
        raise ValueError(f"need finite centre and sigma > 0, got {centre_nm}, {sigma_nm}")
    x, w = hermegauss(int(n_wavelengths))
    x = 0.5 * (x - x[::-1])
    w = 0.5 * (w + w[::-1])
    if description is None:
        description = f"Gaussian {centre_nm:g} +- {sigma_nm:g} nm, {n_wavelengths}-node rule"
    return Band(name, centre_nm + sigma_nm * x, w, description)


def default_bands(n_wavelengths: int = DEFAULT_N_WAVELENGTHS) -> dict[str, Band]:
    """The bands used when no calibration is given.

    Gaussians, centre +- sigma: R 600 +- 30 nm, G 530 +- 30 nm, B 460 +- 30 nm
    (DESIGN.md; from memory, typical of CMOS colour sensors, not a measured camera),
    each a ``n_wavelengths``-node Gauss-Hermite rule (:func:`gaussian_band`). Returns a
    dict with keys ``"r"``, ``"g"``, ``"b"``.
    """
    tail = f"(default, typical CMOS; from memory), {n_wavelengths}-node Gauss-Hermite rule"
    return {
        name: gaussian_band(name, c, s, n_wavelengths, f"Gaussian {c:g} +- {s:g} nm {tail}")
        for name, (c, s) in DEFAULT_BAND_SHAPES_NM.items()
    }


def bands_from_csv(
    path: str | Path, n_wavelengths: int = DEFAULT_N_WAVELENGTHS
) -> dict[str, Band]:
    """Read measured channel curves and turn each into a K-node quadrature rule.

    Each curve is interpolated between rows by shape-preserving cubics (PCHIP: no
    overshoot, so no negative response), discretised on a grid 16 times finer than the
    table (trapezoid rule), and replaced by its own K-node Gauss rule (nodes are the
    zeros of the polynomials orthogonal under the curve; Golub & Welsch 1969). The rule
    keeps the curve's moments 0..2K-1 in wavelength; nodes lie inside the curve's
    support and weights are positive.

    Parameters
    ----------
    path : str or Path
        CSV file in the format described in the module docstring.
    n_wavelengths : int
        Nodes per band K.

    Returns
    -------
    dict of str to Band
        Keys ``"r"``, ``"g"``, ``"b"``.

    Raises
    ------
    InputError
        Unreadable or empty file, missing or unknown column, non-numeric, non-finite or
        negative value, unsorted wavelengths, too few rows, a channel zero everywhere.

    References
    ----------
    Golub, G. H., Welsch, J. H. (1969). Calculation of Gauss quadrature rules.
    Math. Comp. 23, 221-230. doi:10.1090/S0025-5718-69-99647-1
    Gautschi, W. (2004). Orthogonal Polynomials: Computation and Approximation.
    Oxford University Press (discretised Stieltjes procedure, sec. 2.2).
    Fritsch, F. N., Carlson, R. E. (1980). Monotone piecewise cubic interpolation.
    SIAM J. Numer. Anal. 17, 238-246. doi:10.1137/0717021
    """
    path = Path(path)
    lam, curves = _read_band_table(path)
    bands = {}
    for name in CSV_CHANNELS:
        nodes, weights = _gauss_rule_for_curve(lam, curves[name], int(n_wavelengths), path, name)
        if nodes[0] < MIN_NODE_WAVELENGTH_NM:
            raise InputError(
                f"column {name} responds so far into the ultraviolet that a band node falls at "
                f"{nodes[0]:.0f} nm, below the refractivity model's {MIN_NODE_WAVELENGTH_NM:g} nm",
                path,
            )
        text = (
            f"measured curve from {path.name} ({lam.size} rows, {lam[0]:g}-{lam[-1]:g} nm), "
            f"{n_wavelengths}-node Gauss quadrature"
        )
        bands[name] = Band(name, nodes, weights, text)
    return bands


def _read_band_table(path: Path) -> tuple[NDArray[Any], dict[str, NDArray[Any]]]:
    """Parse and validate a band CSV; every failure is an InputError naming the file."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read band table: {exc}", path) from exc
    numbered = enumerate(text.splitlines(), start=1)
    lines = [(n, line) for n, line in numbered if line.strip() and line.lstrip()[0] != "#"]
    if not lines:
        raise InputError("band table is empty (expected header wavelength_nm,r,g,b)", path)
    header_line, header_text = lines[0]
    header = [cell.strip().lower() for cell in next(csv.reader([header_text]))]
    expected = ("wavelength_nm", *CSV_CHANNELS)
    for column in expected:
        if column not in header:
            raise InputError(
                f"missing column '{column}' in header on line {header_line} "
                f"(found: {','.join(header)}; expected: {','.join(expected)})",
                path,
            )
    extra = [c for c in header if c not in expected or header.count(c) > 1]
    if extra:
        raise InputError(f"unknown or repeated column '{extra[0]}' on line {header_line}", path)
    values = np.empty((len(lines) - 1, len(header)))
    for i, (number, line) in enumerate(lines[1:]):
        cells = next(csv.reader([line]))
        if len(cells) != len(header):
            raise InputError(f"line {number} has {len(cells)} fields, not {len(header)}", path)
        for j, cell in enumerate(cells):
            values[i, j] = _parse_cell(cell, header[j], number, path)
    table = {name: values[:, header.index(name)] for name in expected}
    _check_band_table(table, [number for number, _ in lines[1:]], path)
    return table["wavelength_nm"], {name: table[name] for name in CSV_CHANNELS}


def _parse_cell(cell: str, column: str, line_number: int, path: Path) -> float:
    """One numeric cell: finite, and >= 0."""
    try:
        value = float(cell)
    except ValueError:
        raise InputError(
            f"column {column} line {line_number}: {cell.strip()!r} is not a number", path
        ) from None
    if not np.isfinite(value):
        raise InputError(f"column {column} line {line_number}: {value} is not finite", path)
    if value < 0:
        raise InputError(f"negative value {value:g} in column {column} line {line_number}", path)
    return value


def _check_band_table(table: dict[str, NDArray[Any]], line_numbers: list[int], path: Path) -> None:
    """Row count, wavelength order and range, non-zero channels."""
    lam = table["wavelength_nm"]
    if lam.size < CSV_MIN_ROWS:
        raise InputError(f"only {lam.size} data rows; need at least {CSV_MIN_ROWS}", path)
    bad = np.flatnonzero(np.diff(lam) <= 0)
    if bad.size:
        i = bad[0] + 1
        raise InputError(
            f"wavelengths not strictly increasing: {lam[i]:g} nm on line {line_numbers[i]} "
            f"follows {lam[i - 1]:g} nm",
            path,
        )
    low, high = CSV_WAVELENGTH_RANGE_NM
    if lam[0] < low or lam[-1] > high:
        raise InputError(
            f"wavelengths {lam[0]:g}-{lam[-1]:g} outside {low:g}-{high:g} nm "
            "(column wavelength_nm must be in nanometres)",
            path,
        )
    for name in CSV_CHANNELS:
        if not np.any(table[name] > 0):
            raise InputError(f"column {name} is zero everywhere", path)


def _gauss_rule_for_curve(
    lam: NDArray[np.float64], curve: NDArray[np.float64], k: int, path: Path, name: str
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """K-node Gauss rule for a tabulated curve (PCHIP, Stieltjes, Golub-Welsch)."""
    if not 1 <= k <= 20:
        raise ValueError(f"n_wavelengths must be 1..20, got {k}")
    # fine grid: each tabulated interval split in _CSV_REFINE parts, trapezoid masses
    t = np.linspace(0.0, lam.size - 1.0, (lam.size - 1) * _CSV_REFINE + 1)
    x = np.interp(t, np.arange(lam.size), lam)
    y = np.maximum(PchipInterpolator(lam, curve)(x), 0.0)  # PCHIP does not overshoot
    half_dx = 0.5 * np.diff(x)
    mass = np.concatenate([half_dx * y[:-1], [0.0]]) + np.concatenate([[0.0], half_dx * y[1:]])
    keep = mass > 0
    if np.count_nonzero(keep) < k:
        raise InputError(f"column {name} is non-zero over too few rows for {k} nodes", path)
    x, mass = x[keep], mass[keep]
    total = mass.sum()
    mean = np.sum(mass * x) / total
    scale = np.sqrt(np.sum(mass * (x - mean) ** 2) / total) or 1.0
    u = (x - mean) / scale  # centred, scaled variable: keeps the recursion well conditioned
    alpha, beta = np.zeros(k), np.zeros(k)
    q_prev, q = np.zeros_like(u), np.full_like(u, 1.0 / np.sqrt(total))
    for j in range(k):  # orthonormal Stieltjes recursion
        alpha[j] = np.sum(mass * u * q * q)
        r = (u - alpha[j]) * q - (beta[j] * q_prev if j else 0.0)
        if j + 1 < k:
            beta[j + 1] = np.sqrt(np.sum(mass * r * r))
            q_prev, q = q, r / beta[j + 1]
    jacobi = np.diag(alpha) + np.diag(beta[1:], 1) + np.diag(beta[1:], -1)
    nodes, vectors = np.linalg.eigh(jacobi)
    weights = vectors[0] ** 2
    return mean + scale * nodes, weights / weights.sum()


# --- band weights --------------------------------------------------------------------
def band_weights(
    band: Band,
    *,
    airmass: ArrayLike = 0.0,
    spectrum: Spectrum | None = solar_spectrum_relative,
    pressure_hPa: float = STANDARD_PRESSURE_HPA,
    tau_aerosol_550: float = 0.1,
    angstrom_alpha: float = 1.3,
) -> NDArray[np.float64]:
    """Normalised node weights: sensitivity x spectrum x transmission.

    Computed in logarithms and normalised by the largest term, so long paths (large
    airmass) do not underflow to 0/0.

    Parameters
    ----------
    band : Band
        The channel, K nodes.
    airmass : array_like, shape (...)
        Relative airmass per ray [dimensionless], >= 0; 0 means outside the atmosphere.
        NaN gives NaN weights.
    spectrum : callable or None
        Relative photon flux as a function of wavelength [nm]; default the solar
        approximation :func:`solar_spectrum_relative`; None for a flat spectrum.
    pressure_hPa, tau_aerosol_550, angstrom_alpha : float
        Extinction parameters, see :func:`transmission`.

    Returns
    -------
    (..., K) ndarray
        Weights summing to 1 along the last axis [dimensionless].
    """
    m = np.asarray(airmass, dtype=float)
    if np.any(m < 0):
        raise ValueError("airmass must be >= 0 (NaN allowed)")
    lam = band.wavelength_nm
    flux = np.ones_like(lam) if spectrum is None else np.asarray(spectrum(lam), dtype=float)
    if flux.shape != lam.shape or np.any(flux < 0) or not np.all(np.isfinite(flux)):
        raise ValueError("spectrum must return finite values >= 0, one per wavelength")
    tau = _vertical_optical_depth(lam, pressure_hPa, tau_aerosol_550, angstrom_alpha)
    with np.errstate(divide="ignore"):
        log_w = np.log(band.sensitivity * flux) - tau * m[..., None]
    peak = np.max(log_w, axis=-1, keepdims=True)
    w = np.exp(log_w - peak)
    return w / np.sum(w, axis=-1, keepdims=True)


def effective_wavelength_nm(
    band: Band, *, airmass: ArrayLike = 0.0, **extinction: Any
) -> float | NDArray[np.float64]:
    """Photon-flux-weighted mean wavelength of a band, ``sum_k w_k lambda_k``.

    The mean wavelength of the detected photons, with ``w`` from :func:`band_weights`.
    It summarises a band for reports and calibration; the ray tracer should trace all
    nodes (a band's light does not set when its mean wavelength does).

    Parameters
    ----------
    band : Band
        The channel.
    airmass : array_like, shape (...)
        Relative airmass per ray [dimensionless].
    **extinction
        ``spectrum``, ``pressure_hPa``, ``tau_aerosol_550``, ``angstrom_alpha``, as in
        :func:`band_weights`.

    Returns
    -------
    float or (...) ndarray
        Effective wavelength [nm]; a float for scalar airmass.
    """
    lam_eff = np.sum(band_weights(band, airmass=airmass, **extinction) * band.wavelength_nm, -1)
    return float(lam_eff) if lam_eff.ndim == 0 else lam_eff


def effective_wavelength_table(
    band: Band, altitudes_deg: ArrayLike, **extinction: Any
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Effective wavelength against apparent solar altitude (reddening as the Sun sinks).

    Airmass from :func:`airmass_kasten_young1989` at zenith angle ``90 - altitude``;
    altitudes below 0 (outside that formula's range) give NaN.

    Parameters
    ----------
    band : Band
        The channel.
    altitudes_deg : array_like, shape (N,)
        Apparent altitudes of the Sun [deg].
    **extinction
        ``spectrum``, ``pressure_hPa``, ``tau_aerosol_550``, ``angstrom_alpha`` as in
        :func:`band_weights`.

    Returns
    -------
    altitudes_deg : (N,) ndarray
        The altitudes [deg].
    effective_wavelength_nm : (N,) ndarray
        Effective wavelength at each [nm].
    """
    alt = np.atleast_1d(np.asarray(altitudes_deg, dtype=float))
    m = airmass_kasten_young1989(90.0 - alt)
    lam_eff = effective_wavelength_nm(band, airmass=m, **extinction)
    return alt, np.asarray(lam_eff)
