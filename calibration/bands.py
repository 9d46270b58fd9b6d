"""Camera colour channels as spectral bands, and the light that reaches them.

A colour channel integrates 80-120 nm of spectrum; near the horizon the short-wavelength
part of a band is lifted most by refraction and dimmed most by extinction. Each channel
is represented by ``K`` wavelengths (nodes), with weights::

    weight_k  ∝  sensitivity_k · S(lambda_k) · exp(-(tau_R(lambda_k) + tau_a(lambda_k)) · m)

with ``S`` the relative solar photon flux outside the atmosphere, ``tau_R`` the Rayleigh
optical depth (Bodhaine et al. 1999), ``tau_a`` the aerosol optical depth (Angstrom 1929)
and ``m`` the relative airmass along the ray (Kasten & Young 1989). Weights sum to 1
along the last axis and broadcast over airmass: airmass of shape (...) gives (..., K).

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
SUN_EFFECTIVE_TEMPERATURE_K = 5772.0  # K; IAU 2015 Resolution B3, nominal T_eff of the Sun
SECOND_RADIATION_CONSTANT_NM_K = 1.438776877e7  # nm K; c2 = hc/k, exact since SI 2019
REFERENCE_WAVELENGTH_NM = 550.0  # nm; where the solar spectrum is normalised to 1
STANDARD_PRESSURE_HPA = 1013.25  # hPa; Bodhaine et al. 1999 standard conditions
STANDARD_LATITUDE_DEG = 45.0  # deg; Bodhaine et al. 1999 standard conditions
RAYLEIGH_VALID_NM = (200.0, 1200.0)  # nm; range where eq. 30 is used here (NaN outside)
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


# --- spectrum and extinction ---------------------------------------------------------
def solar_spectrum_relative(wavelength_nm: ArrayLike) -> NDArray[np.float64]:
    """Relative photon flux of the Sun outside the atmosphere (approximation).

    A black body at the Sun's nominal effective temperature, 5772 K, in photon units:
    ``N(lambda) ∝ lambda^-4 / (exp(c2 / (lambda T)) - 1)``, normalised to 1 at 550 nm.
    This is an approximation, not a solar spectrum: the Fraunhofer lines and line
    blanketing are ignored, and the true spectrum departs from it by several per cent
    between 450 and 650 nm and by more below 450 nm (from memory, not checked against a
    tabulated spectrum). Only the spectrum's slope across one band matters here.

    Parameters
    ----------
    wavelength_nm : array_like
        Vacuum wavelength [nm].

    Returns
    -------
    ndarray
        Photon flux per unit wavelength relative to 550 nm [dimensionless], same shape.

    References
    ----------
    Prsa, A. et al. (2016). Nominal values for selected solar and planetary quantities:
    IAU 2015 Resolution B3. AJ 152, 41 (T_eff = 5772 K).
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    ref = REFERENCE_WAVELENGTH_NM
    c2_over_t = SECOND_RADIATION_CONSTANT_NM_K / SUN_EFFECTIVE_TEMPERATURE_K  # nm
    x, x_ref = c2_over_t / lam, c2_over_t / ref
    return (ref / lam) ** 4 * np.expm1(x_ref) / np.expm1(x)


def _gravity_list1968_cm_s2(latitude_deg: ArrayLike, height_m: ArrayLike) -> NDArray[Any]:
    """Gravity at latitude and height, as used by Bodhaine et al. 1999 (after List 1968)."""
    c = np.cos(np.radians(2.0 * np.asarray(latitude_deg, dtype=float)))
    z = np.asarray(height_m, dtype=float)
    g0 = 980.6160 * (1.0 - 0.0026373 * c + 0.0000059 * c**2)
    dg = (3.085462e-4 + 2.27e-7 * c) * z - (7.254e-11 + 1.0e-13 * c) * z**2
    return g0 - dg - (1.517e-17 + 6.0e-20 * c) * z**3


def _mass_weighted_height_m(altitude_m: ArrayLike) -> NDArray[np.float64]:
    """Mass-weighted height of the air column above a site, Bodhaine et al. 1999."""
    return 0.73737 * np.asarray(altitude_m, dtype=float) + 5517.56


def rayleigh_optical_depth_bodhaine1999(
    wavelength_nm: ArrayLike,
    pressure_hPa: ArrayLike = STANDARD_PRESSURE_HPA,
    latitude_deg: ArrayLike = STANDARD_LATITUDE_DEG,
    altitude_m: ArrayLike = 0.0,
) -> NDArray[np.float64]:
    """Vertical Rayleigh optical depth of the atmosphere above a site.

    Eq. 30 of Bodhaine et al. (1999), their fit for 1013.25 hPa, sea level, 45 deg
    latitude and 360 ppm CO2 (lambda in micrometres)::

        tau = 0.0021520 (1.0455996 - 341.29061 l^-2 - 0.90230850 l^2)
                        / (1 + 0.0027059889 l^-2 - 85.968563 l^2)

    scaled to other sites as their ``tau = sigma P A / (m_a g)`` implies: by
    ``P / 1013.25 hPa`` and by ``g_std / g``, with ``g`` the gravity (List 1968, as
    quoted in the paper) at the mass-weighted height of the column,
    ``z_c = 0.73737 z + 5517.56 m``; ``g_std`` is the same at 45 deg and z = 0. The
    mean molecular weight is kept at its 360 ppm CO2 value (100 ppm more CO2 raises tau
    by 7e-5 relative in the paper's full method). The fit agrees with the paper's full
    calculation to 6e-5 over 250-850 nm and 5e-4 at 1000 nm (tests/published); NaN is
    returned outside 200-1200 nm.

    Parameters
    ----------
    wavelength_nm : array_like
        Vacuum wavelength [nm].
    pressure_hPa, latitude_deg, altitude_m : array_like
        Surface pressure [hPa], geodetic latitude [deg], height above sea level [m].

    Returns
    -------
    ndarray
        Optical depth for a vertical path [dimensionless]; inputs broadcast.

    References
    ----------
    Bodhaine, B. A., Wood, N. B., Dutton, E. G., Slusser, J. R. (1999). On Rayleigh
    optical depth calculations. J. Atmos. Oceanic Technol. 16, 1854-1861, eq. 30.
    doi:10.1175/1520-0426(1999)016<1854:ORODC>2.0.CO;2
    List, R. J. (1968). Smithsonian Meteorological Tables, 6th ed. (gravity formula).
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    inside = (lam >= RAYLEIGH_VALID_NM[0]) & (lam <= RAYLEIGH_VALID_NM[1])
    l2 = np.where(inside, lam / 1000.0, 0.55) ** 2  # micrometres squared
    num = 1.0455996 - 341.29061 / l2 - 0.90230850 * l2
    tau = 0.0021520 * num / (1.0 + 0.0027059889 / l2 - 85.968563 * l2)  # eq. 30
    g_std = _gravity_list1968_cm_s2(STANDARD_LATITUDE_DEG, _mass_weighted_height_m(0.0))
    g_site = _gravity_list1968_cm_s2(latitude_deg, _mass_weighted_height_m(altitude_m))
    scaled = tau * np.asarray(pressure_hPa, dtype=float) / STANDARD_PRESSURE_HPA * g_std / g_site
    return np.where(inside, scaled, np.nan)


def airmass_kasten_young1989(apparent_zenith_deg: ArrayLike) -> NDArray[np.float64]:
    """Relative optical airmass from the apparent zenith angle.

    ``m = 1 / (cos z + 0.50572 (96.07995 - z)^-1.6364)``, z in degrees; 1 at the zenith,
    37.92 at z = 90 deg. Valid for 0 <= z <= 90 deg; NaN outside (not clipped).

    Parameters
    ----------
    apparent_zenith_deg : array_like
        Apparent (refracted) zenith angle [deg].

    Returns
    -------
    ndarray
        Airmass relative to the vertical path [dimensionless], same shape.

    References
    ----------
    Kasten, F., Young, A. T. (1989). Revised optical air mass tables and approximation
    formula. Appl. Opt. 28, 4735-4738. doi:10.1364/AO.28.004735
    """
    z = np.asarray(apparent_zenith_deg, dtype=float)
    valid = (z >= 0.0) & (z <= 90.0)
    zs = np.where(valid, z, 0.0)
    m = 1.0 / (np.cos(np.radians(zs)) + 0.50572 * (96.07995 - zs) ** -1.6364)
    return np.where(valid, m, np.nan)


def aerosol_optical_depth_angstrom(
    wavelength_nm: ArrayLike, tau_550: ArrayLike = 0.1, angstrom_alpha: ArrayLike = 1.3
) -> NDArray[np.float64]:
    """Aerosol optical depth by Angstrom's power law, anchored at 550 nm.

    ``tau_a = tau_550 (lambda / 550 nm)^-alpha``. The defaults (0.1, 1.3) are a clear
    continental sky (from memory; Angstrom's own typical alpha is 1.3); a marine
    horizon often has lower alpha and higher tau.

    Parameters
    ----------
    wavelength_nm : array_like
        Wavelength [nm].
    tau_550, angstrom_alpha : array_like
        Vertical aerosol optical depth at 550 nm (>= 0) and Angstrom exponent [1].

    Returns
    -------
    ndarray
        Vertical aerosol optical depth [dimensionless]; inputs broadcast.

    References
    ----------
    Angstrom, A. (1929). On the atmospheric transmission of sun radiation and on dust
    in the air. Geogr. Ann. 11, 156-166.
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    tau = np.asarray(tau_550, dtype=float)
    if np.any(tau < 0):
        raise ValueError(f"tau_550 must be >= 0, got {tau_550}")
    return tau * (lam / REFERENCE_WAVELENGTH_NM) ** -np.asarray(angstrom_alpha, dtype=float)


def _vertical_optical_depth(
    wavelength_nm: ArrayLike, pressure_hPa: float, tau_aerosol_550: float, angstrom_alpha: float
) -> NDArray[np.float64]:
    tau_r = rayleigh_optical_depth_bodhaine1999(wavelength_nm, pressure_hPa)
    return tau_r + aerosol_optical_depth_angstrom(wavelength_nm, tau_aerosol_550, angstrom_alpha)


def transmission(
    wavelength_nm: ArrayLike,
    airmass: ArrayLike,
    *,
    pressure_hPa: float = STANDARD_PRESSURE_HPA,
    tau_aerosol_550: float = 0.1,
    angstrom_alpha: float = 1.3,
) -> NDArray[np.float64]:
    """Direct-beam transmission ``exp(-(tau_R + tau_a) m)``.

    Parameters
    ----------
    wavelength_nm : array_like
        Wavelength [nm].
    airmass : array_like
        Relative airmass of the path, >= 0 [dimensionless]; NaN propagates.
        ``wavelength_nm`` and ``airmass`` broadcast by numpy rules: pass
        ``airmass[..., None]`` with a (K,) wavelength array to get shape (..., K).
    pressure_hPa : float
        Surface pressure for the Rayleigh term [hPa].
    tau_aerosol_550, angstrom_alpha : float
        Aerosol optical depth at 550 nm and Angstrom exponent [dimensionless].

    Returns
    -------
    ndarray
        Transmission, 0..1 [dimensionless].
    """
    m = np.asarray(airmass, dtype=float)
    if np.any(m < 0):
        raise ValueError("airmass must be >= 0 (NaN allowed)")
    tau = _vertical_optical_depth(wavelength_nm, pressure_hPa, tau_aerosol_550, angstrom_alpha)
    return np.exp(-tau * m)


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
