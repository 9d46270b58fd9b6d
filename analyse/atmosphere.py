"""Model atmospheres and the refractive index of moist air.

The contract's model (FOLDER-FORMAT.md): temperature falls linearly with height from
the sea surface to ``layer_top_m`` at the lapse rate GAMMA = -dT/dz; above the layer the
1976 US Standard Atmosphere's gradients continue from the layer-top temperature; the
temperature at the lens is the observer's; pressure follows hydrostatic balance from
the pressure at the lens; water vapour pressure is the lens value decaying
exponentially with height. A tabulated temperature profile may replace the linear
layer (only a profile whose curvature changes with height makes mirages).

Everything is tabulated on one height grid, fine near the sea (1 cm) and coarse aloft
(about 1 % of the height), with the heights where dT/dz jumps inserted as nodes so the
ray tracer can step onto them.

Refractivity follows Ciddor (1996), written as ``n - 1 = A(lambda) D(z) + B(lambda) W(z)``:
``A, B`` are the refractivities of standard dry air and standard water vapour, ``D, W``
the density ratios of the dry and wet components. The split lets the tracer share one
height table between all wavelengths.

References
----------
.. [1] U.S. Standard Atmosphere, 1976. NOAA-S/T 76-1562, Washington, 1976.
.. [2] P. E. Ciddor, "Refractive index of air: new equations for the visible and near
   infrared", Appl. Opt. 35, 1566-1573 (1996). doi:10.1364/AO.35.001566
.. [3] R. S. Davis, "Equation for the determination of the density of moist air
   (1981/91)", Metrologia 29, 67-70 (1992). doi:10.1088/0026-1394/29/1/008
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "Atmosphere",
    "ussa1976",
    "linear_layer_atmosphere",
    "tabulated_atmosphere",
    "saturation_vapour_pressure_davis1992",
    "ciddor1996_coefficients",
    "ciddor1996_density_ratios",
    "refractivity_ciddor1996",
    "relative_density",
]

# --- constants -------------------------------------------------------------------
R_GAS = 8.314510  # J/(mol K), value used by Ciddor 1996 [2]
R_STAR_USSA = 8.31432  # J/(mol K), gas constant as adopted by USSA 1976 [1] (its Table I uses it)
M_AIR_USSA = 0.0289644  # kg/mol, mean molar mass of dry air, USSA 1976 [1]
G0 = 9.80665  # m/s^2, standard gravity, USSA 1976 [1]
R0_GEOPOTENTIAL = 6356766.0  # m, Earth radius for geopotential height, USSA 1976 [1]
T0_STD = 288.15  # K, sea-level temperature, USSA 1976 [1]
P0_STD = 101325.0  # Pa, sea-level pressure, USSA 1976 [1]
CO2_PPM = 450.0  # ppm, Ciddor's standard CO2 mole fraction [2]
HUMIDITY_SCALE_HEIGHT_M = 2000.0  # m, water-vapour scale height (typical, from memory)
TOP_M = 86000.0  # m, top of the tabulated atmosphere (USSA 1976 layer 7 ends at 86 km)

# USSA 1976 layers: base geopotential height [m] and lapse rate dT/dH [K/m], [1] table 4.
_USSA_BASE_H = np.array([0.0, 11000.0, 20000.0, 32000.0, 47000.0, 51000.0, 71000.0, 84852.0])
_USSA_LAPSE = np.array([-0.0065, 0.0, 0.001, 0.0028, 0.0, -0.0028, -0.002, 0.0])


def _geopotential_m(height_m: np.ndarray) -> np.ndarray:
    """Geopotential height from geometric height, eq. 18 of [1]."""
    return R0_GEOPOTENTIAL * height_m / (R0_GEOPOTENTIAL + height_m)


def ussa1976(height_m: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    """Temperature and pressure of the 1976 US Standard Atmosphere.

    Parameters
    ----------
    height_m : (N,) array_like
        Geometric height above mean sea level [m], valid 0 to 86 000 m.

    Returns
    -------
    temperature_K, pressure_Pa : (N,) ndarray
        Kinetic temperature [K] and pressure [Pa]; NaN outside the valid range.

    References
    ----------
    .. [1] U.S. Standard Atmosphere 1976, eqs. 23 (temperature), 33a and 33b (pressure).
    """
    z = np.asarray(height_m, dtype=float)
    h = _geopotential_m(z)
    t_base, p_base = [T0_STD], [P0_STD]
    for i in range(1, len(_USSA_BASE_H)):
        dh = _USSA_BASE_H[i] - _USSA_BASE_H[i - 1]
        t_base.append(t_base[-1] + _USSA_LAPSE[i - 1] * dh)
        p_base.append(_layer_pressure(p_base[-1], t_base[-2], _USSA_LAPSE[i - 1], dh))
    i = np.clip(np.searchsorted(_USSA_BASE_H, h, side="right") - 1, 0, len(_USSA_BASE_H) - 1)
    lapse = _USSA_LAPSE[i]
    dh = h - _USSA_BASE_H[i]
    temperature = np.asarray(t_base)[i] + lapse * dh
    pressure = _layer_pressure(np.asarray(p_base)[i], np.asarray(t_base)[i], lapse, dh)
    bad = (z < -1.0) | (z > TOP_M + 1.0)
    return np.where(bad, np.nan, temperature), np.where(bad, np.nan, pressure)


def _layer_pressure(p_b, t_b, lapse, dh):
    """Hydrostatic pressure within one USSA layer, eqs. 33a (lapse != 0) and 33b of [1]."""
    p_b, t_b, lapse, dh = (np.asarray(v, dtype=float) for v in (p_b, t_b, lapse, dh))
    k = G0 * M_AIR_USSA / R_STAR_USSA
    with np.errstate(divide="ignore", invalid="ignore"):
        power = p_b * (t_b / (t_b + lapse * dh)) ** (k / np.where(lapse == 0, 1.0, lapse))
    iso = p_b * np.exp(-k * dh / t_b)
    return np.where(lapse == 0, iso, power)


@dataclass(frozen=True)
class Atmosphere:
    """A spherically stratified atmosphere tabulated against height above the sea.

    Attributes
    ----------
    height_m : (H,) ndarray
        Geometric height above the sea surface [m], increasing from 0 to ``TOP_M``.
    temperature_K, pressure_Pa, vapour_pressure_Pa : (H,) ndarray
        Temperature [K], total pressure [Pa] and water-vapour partial pressure [Pa].
    kinks_m : (K,) ndarray
        Heights [m] where dT/dz jumps (layer top, standard-atmosphere layer bases).
    eye_height_m : float
        Height of the observer's lens [m].
    description : str
        One line for reports.
    """

    height_m: np.ndarray
    temperature_K: np.ndarray
    pressure_Pa: np.ndarray
    vapour_pressure_Pa: np.ndarray
    kinks_m: np.ndarray
    eye_height_m: float
    description: str

    def temperature_at(self, height_m: np.ndarray | float) -> np.ndarray:
        """Temperature [K] at arbitrary heights [m] (linear in each grid cell)."""
        return np.interp(height_m, self.height_m, self.temperature_K)


def height_grid(kinks_m: np.ndarray, *, surface_step_m: float = 0.01, growth: float = 0.01):
    """Height nodes [m]: ``surface_step_m`` at the sea, growing by ``growth`` per node.

    The spacing is about ``growth * (z + surface_step_m / growth)``: 1 cm at the sea,
    1 m at 100 m, 100 m at 10 km. The kink heights are inserted as nodes.
    """
    z0 = surface_step_m / growth
    k = np.arange(int(np.ceil(np.log1p(TOP_M / z0) / growth)) + 1)
    z = np.minimum(z0 * np.expm1(k * growth), TOP_M)
    z = np.union1d(z, np.asarray(kinks_m, dtype=float))
    return z[(z >= 0) & (z <= TOP_M)]


def _standard_shape(height_m: np.ndarray) -> np.ndarray:
    """USSA 1976 temperature [K] at geometric heights (for its gradients)."""
    return ussa1976(np.clip(height_m, 0.0, TOP_M))[0]


def _ussa_kinks_m() -> np.ndarray:
    """Geometric heights [m] of the USSA 1976 layer bases (geopotential inverted)."""
    h = _USSA_BASE_H[1:]
    return R0_GEOPOTENTIAL * h / (R0_GEOPOTENTIAL - h)


def _build(height_nodes_m, temperature_nodes_K, kinks, *, eye_height_m, pressure_hPa,
           relative_humidity, description) -> Atmosphere:
    """Tabulate T from nodes (standard gradients above the last node), then p and e."""
    z = height_grid(np.concatenate([kinks, [eye_height_m]]))
    top = height_nodes_m[-1]
    t = np.interp(z, height_nodes_m, temperature_nodes_K)
    above = z > top
    t[above] = temperature_nodes_K[-1] + _standard_shape(z[above]) - _standard_shape(top)
    if np.any(t < 150.0):
        raise ValueError(f"temperature profile falls below 150 K ({np.nanmin(t):.1f} K)")
    p = _hydrostatic_pressure(z, t, eye_height_m, pressure_hPa * 100.0)
    t_eye = float(np.interp(eye_height_m, z, t))
    e_eye = relative_humidity * saturation_vapour_pressure_davis1992(t_eye)
    e = e_eye * np.exp(-(z - eye_height_m) / HUMIDITY_SCALE_HEIGHT_M)
    e = np.minimum(e, saturation_vapour_pressure_davis1992(t))  # never supersaturated
    return Atmosphere(z, t, p, e, np.unique(kinks), float(eye_height_m), description)


def _hydrostatic_pressure(z, t, eye_height_m, p_eye_Pa):
    """Integrate dp/dz = -p g(z) M / (R T) from the lens outwards (trapezoid on g/T).

    M and R are USSA 1976's, so that the standard case reproduces :func:`ussa1976`.
    """
    g = G0 * (R0_GEOPOTENTIAL / (R0_GEOPOTENTIAL + z)) ** 2
    f = g / t
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (f[1:] + f[:-1]) * np.diff(z))])
    cum_eye = np.interp(eye_height_m, z, cum)
    return p_eye_Pa * np.exp(-(M_AIR_USSA / R_STAR_USSA) * (cum - cum_eye))


def _validate_air(eye_height_m, temperature_C, pressure_hPa, relative_humidity):
    if not 0.0 <= eye_height_m < 10000.0:
        raise ValueError(f"eye_height_m must be within 0..10000 m, got {eye_height_m}")
    if not -80.0 <= temperature_C <= 60.0:
        raise ValueError(f"temperature_C must be within -80..60 C, got {temperature_C}")
    if not 300.0 <= pressure_hPa <= 1100.0:
        raise ValueError(f"pressure_hPa must be within 300..1100 hPa, got {pressure_hPa}")
    if not 0.0 <= relative_humidity <= 1.0:
        raise ValueError(f"relative_humidity must be within 0..1, got {relative_humidity}")


def linear_layer_atmosphere(
    lapse_rate_K_per_km: float,
    *,
    layer_top_m: float = 100.0,
    eye_height_m: float = 0.0,
    temperature_C: float = 15.0,
    pressure_hPa: float = 1013.25,
    relative_humidity: float = 0.0,
) -> Atmosphere:
    """The contract's atmosphere: a linear near-surface layer under the standard one.

    Parameters
    ----------
    lapse_rate_K_per_km : float
        GAMMA = -dT/dz in the layer [K/km]; 6.5 standard, negative in an inversion.
    layer_top_m : float
        Top of the near-surface layer [m].
    eye_height_m : float
        Height of the lens above the sea [m].
    temperature_C, pressure_hPa, relative_humidity : float
        Air at the lens [deg C], [hPa], [0..1].

    Returns
    -------
    Atmosphere
    """
    _validate_air(eye_height_m, temperature_C, pressure_hPa, relative_humidity)
    if not 0.0 < layer_top_m <= 2000.0:
        raise ValueError(f"layer_top_m must be within 0..2000 m, got {layer_top_m}")
    if not -1000.0 <= lapse_rate_K_per_km <= 1000.0:
        raise ValueError("lapse_rate_K_per_km must be within -1000..1000, "
                         f"got {lapse_rate_K_per_km}")
    gamma = lapse_rate_K_per_km / 1000.0
    # Shape relative to T(0) = 0, then shifted so that T(eye) is the lens temperature.
    shape_top = -gamma * layer_top_m
    if eye_height_m <= layer_top_m:
        shape_eye = -gamma * eye_height_m
    else:
        shape_eye = shape_top + _standard_shape(eye_height_m) - _standard_shape(layer_top_m)
    t_surface = temperature_C + 273.15 - shape_eye
    nodes = np.array([0.0, layer_top_m])
    temps = np.array([t_surface, t_surface + shape_top])
    kinks = np.concatenate([[layer_top_m], _ussa_kinks_m() + 0.0])
    return _build(nodes, temps, kinks, eye_height_m=eye_height_m, pressure_hPa=pressure_hPa,
                  relative_humidity=relative_humidity,
                  description=f"linear layer {lapse_rate_K_per_km:+.1f} K/km to "
                  f"{layer_top_m:g} m, US Standard Atmosphere 1976 gradients above")


def tabulated_atmosphere(
    height_m: np.ndarray,
    temperature_K: np.ndarray,
    *,
    eye_height_m: float = 0.0,
    pressure_hPa: float = 1013.25,
    relative_humidity: float = 0.0,
) -> Atmosphere:
    """An atmosphere from a table of temperatures (linear between the nodes).

    Parameters
    ----------
    height_m : (K,) array_like
        Heights above the sea [m], strictly increasing, the first 0.
    temperature_K : (K,) array_like
        Temperatures at those heights [K]. Above the last node the US Standard
        Atmosphere's gradients continue.
    eye_height_m, pressure_hPa, relative_humidity : float
        Lens height [m]; pressure [hPa] and relative humidity [0..1] at the lens. The
        lens temperature is the table's.
    """
    z = np.asarray(height_m, dtype=float)
    t = np.asarray(temperature_K, dtype=float)
    if z.ndim != 1 or z.shape != t.shape or z.size < 2:
        raise ValueError("height_m and temperature_K must be 1-D arrays of equal length >= 2")
    if z[0] != 0.0 or np.any(np.diff(z) <= 0):
        raise ValueError("height_m must start at 0 and increase strictly")
    if np.any((t < 150.0) | (t > 350.0)):
        raise ValueError("temperature_K must lie within 150..350 K")
    t_eye_C = float(np.interp(eye_height_m, z, t)) - 273.15
    _validate_air(eye_height_m, t_eye_C, pressure_hPa, relative_humidity)
    kinks = np.concatenate([z[1:], _ussa_kinks_m()])
    return _build(z, t, kinks, eye_height_m=eye_height_m, pressure_hPa=pressure_hPa,
                  relative_humidity=relative_humidity,
                  description=f"tabulated profile of {z.size} nodes to {z[-1]:g} m, "
                  "US Standard Atmosphere 1976 gradients above")


def saturation_vapour_pressure_davis1992(temperature_K: np.ndarray | float) -> np.ndarray:
    """Saturation vapour pressure over water [Pa], CIPM-81/91 formula.

    Valid roughly from -20 to +100 C over liquid water (used as is below).

    References
    ----------
    .. [3] Davis 1992, eq. A1.1 (the formula Ciddor 1996 uses, his Appendix A).
    """
    t = np.asarray(temperature_K, dtype=float)
    a, b, c, d = 1.2378847e-5, -1.9121316e-2, 33.93711047, -6.3431645e3  # [3] eq. A1.1
    return np.exp(a * t**2 + b * t + c + d / t)


def _enhancement_factor(pressure_Pa, temperature_K):
    """Enhancement factor of water vapour in air, Davis 1992 [3] eq. A1.2."""
    t_C = np.asarray(temperature_K) - 273.15
    return 1.00062 + 3.14e-8 * np.asarray(pressure_Pa) + 5.6e-7 * t_C**2


def _compressibility(pressure_Pa, temperature_K, x_w):
    """Compressibility of moist air, Davis 1992 [3] eq. A1.4 (Ciddor's eq. 12)."""
    p, t, x = (np.asarray(v, dtype=float) for v in (pressure_Pa, temperature_K, x_w))
    t_C = t - 273.15
    a0, a1, a2 = 1.58123e-6, -2.9331e-8, 1.1043e-10
    b0, b1, c0, c1 = 5.707e-6, -2.051e-8, 1.9898e-4, -2.376e-6
    d, e = 1.83e-11, -0.765e-8
    pt = p / t
    return (1 - pt * (a0 + a1 * t_C + a2 * t_C**2 + (b0 + b1 * t_C) * x + (c0 + c1 * t_C) * x**2)
            + pt**2 * (d + e * x**2))


def ciddor1996_coefficients(wavelength_nm, co2_ppm: float = CO2_PPM):
    """Refractivities of standard dry air and of standard water vapour, Ciddor 1996.

    Parameters
    ----------
    wavelength_nm : (L,) array_like
        Vacuum wavelength [nm], valid 300 to 1690 nm.
    co2_ppm : float
        CO2 mole fraction [ppm].

    Returns
    -------
    n_axs_minus_1, n_ws_minus_1 : (L,) ndarray
        ``n - 1`` of dry air at 15 C, 101 325 Pa and ``co2_ppm`` (eqs. 1 and 2 of [2]),
        and of pure water vapour at 20 C, 1333 Pa (eq. 3 of [2], with cf = 1.022).
    """
    lam = np.asarray(wavelength_nm, dtype=float)
    if np.any((lam < 300.0) | (lam > 1690.0)):
        raise ValueError(f"wavelength_nm must lie within 300..1690 nm (Ciddor 1996), got {lam}")
    s2 = (1000.0 / lam) ** 2  # sigma^2 [um^-2]
    k0, k1, k2, k3 = 238.0185, 5792105.0, 57.362, 167917.0  # [2] eq. 1
    n_as = 1e-8 * (k1 / (k0 - s2) + k3 / (k2 - s2))
    n_axs = n_as * (1 + 0.534e-6 * (co2_ppm - 450.0))  # [2] eq. 2
    w0, w1, w2, w3, cf = 295.235, 2.6422, -0.032380, 0.004028, 1.022  # [2] eq. 3
    n_ws = 1e-8 * cf * (w0 + w1 * s2 + w2 * s2**2 + w3 * s2**3)
    return n_axs, n_ws


def ciddor1996_density_ratios(temperature_K, pressure_Pa, vapour_pressure_Pa,
                              co2_ppm: float = CO2_PPM):
    """Density ratios of the dry and wet components to Ciddor's standard states.

    Returns ``rho_a / rho_axs`` and ``rho_w / rho_ws`` (eqs. 4, 5 and 9 of [2]); then
    ``n - 1 = (rho_a/rho_axs)(n_axs - 1) + (rho_w/rho_ws)(n_ws - 1)``.
    """
    t = np.asarray(temperature_K, dtype=float)
    p = np.asarray(pressure_Pa, dtype=float)
    e = np.asarray(vapour_pressure_Pa, dtype=float)
    m_a = 1e-3 * (28.9635 + 12.011e-6 * (co2_ppm - 400.0))  # [2] eq. 4 [kg/mol]
    m_w = 0.018015  # kg/mol, [2]
    x_w = _enhancement_factor(p, t) * e / p
    z = _compressibility(p, t, x_w)
    rho_axs = 101325.0 * m_a / (_compressibility(101325.0, 288.15, 0.0) * R_GAS * 288.15)
    rho_ws = 1333.0 * m_w / (_compressibility(1333.0, 293.15, 1.0) * R_GAS * 293.15)
    rho_a = p * m_a * (1 - x_w) / (z * R_GAS * t)
    rho_w = p * m_w * x_w / (z * R_GAS * t)
    return rho_a / rho_axs, rho_w / rho_ws


def refractivity_ciddor1996(wavelength_nm, temperature_K, pressure_Pa, vapour_pressure_Pa,
                            co2_ppm: float = CO2_PPM) -> np.ndarray:
    """Refractive index minus one of moist air, Ciddor 1996.

    Parameters broadcast against each other: wavelength [nm, vacuum], temperature [K],
    total pressure [Pa], water-vapour partial pressure [Pa].

    References
    ----------
    .. [2] Ciddor 1996, eq. 5 with eqs. 1-4 and 9 and the Davis 1992 density of moist air.
    """
    a, b = ciddor1996_coefficients(wavelength_nm, co2_ppm)
    d, w = ciddor1996_density_ratios(temperature_K, pressure_Pa, vapour_pressure_Pa, co2_ppm)
    return a * d + b * w


def relative_density(atmosphere: Atmosphere) -> np.ndarray:
    """Dry-air density relative to Ciddor's standard dry air, on the height grid."""
    d, _ = ciddor1996_density_ratios(atmosphere.temperature_K, atmosphere.pressure_Pa,
                                     atmosphere.vapour_pressure_Pa)
    return d
