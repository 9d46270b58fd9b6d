"""The forward model: what a camera records of a sunset through a model atmosphere.

For a site, a date, the air at the lens and a lapse rate, the model traces the transfer
curve of every wavelength of every colour channel (DESIGN.md: channels are bands), and
from it and the Sun's ephemeris derives per channel:

* the visible flux against time: the Sun's light that arrives along rays above the
  sea-horizon ray, each wavelength weighted by the channel's sensitivity, the solar
  spectrum and the transmission of the horizon ray; expressed as a fraction of the whole
  disc's flux seen through the horizon ray's air;
* last light: when that fraction falls below the detection level (a camera's, not one
  effective wavelength's setting, which is several tenths of a second earlier);
* the upper limb's apparent elevation against time (the flux-weighted mean of the
  wavelengths' limbs);
* horizon refraction and dip.

The whole disc's flux is computed with the closed-form slice flux of :mod:`analyse.disc`
over each linear piece of the transfer curve, so a sliver a fraction of an arcsecond
high is integrated exactly and mirage folds count every image.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from analyse import disc
from analyse.atmosphere import Atmosphere, linear_layer_atmosphere
from analyse.refraction import (
    Medium,
    TransferCurve,
    earth_radius_of_curvature_m,
    make_medium,
    transfer_curve,
    transfer_curves,
)
from analyse.sun import sun_track, sunset_time, time_of_altitude
from calibration.bands import (
    Band,
    aerosol_optical_depth_angstrom,
    band_weights,
    default_bands,
    rayleigh_optical_depth_bodhaine1999,
)

__all__ = [
    "DETECTION_FRACTION",
    "Conditions",
    "ChannelModel",
    "SunsetModel",
    "build_model",
    "build_models",
    "visible_fraction",
    "limb_elevation_deg",
    "last_light_altitude_deg",
    "horizon_elevation_deg",
    "light_by_height",
    "Prediction",
    "predict_sunset",
]

DETECTION_FRACTION = 1e-4  # default detection level: 1e-4 of the whole disc's flux (a
# segment about 3 arcsec high; common practice for a camera at ~2"/px, no source)
TAU_AEROSOL_550 = 0.1  # aerosol optical depth at 550 nm over the sea (typical, from memory)
ANGSTROM_ALPHA = 1.3  # Angstrom exponent (continental-maritime mix, from memory)


@dataclass(frozen=True)
class Conditions:
    """Where and in what air a sunset is seen (all SI or trade units)."""

    latitude_deg: float
    longitude_deg: float
    eye_height_m: float
    temperature_C: float
    pressure_hPa: float
    relative_humidity: float
    layer_top_m: float = 100.0
    tau_aerosol_550: float = TAU_AEROSOL_550
    angstrom_alpha: float = ANGSTROM_ALPHA


@dataclass(frozen=True)
class ChannelModel:
    """One channel's band and its node weights at the horizon."""

    band: Band
    node_index: np.ndarray  # (K,) rows of the transfer curve holding this band's nodes
    weights: np.ndarray  # (K,) sensitivity x solar spectrum x horizon-ray transmission
    tau: np.ndarray  # (K,) vertical optical depth above the eye (Rayleigh + aerosol)


@dataclass(frozen=True)
class SunsetModel:
    """A traced atmosphere: transfer curves of every node of every channel."""

    conditions: Conditions
    lapse_rate_K_per_km: float
    atmosphere: Atmosphere
    medium: Medium
    curve: TransferCurve
    channels: dict[str, ChannelModel]
    u_limb: np.ndarray  # (L,) limb-darkening coefficient per node


def _atmosphere(c: Conditions, lapse_rate_K_per_km: float) -> Atmosphere:
    return linear_layer_atmosphere(
        lapse_rate_K_per_km, layer_top_m=c.layer_top_m, eye_height_m=c.eye_height_m,
        temperature_C=c.temperature_C, pressure_hPa=c.pressure_hPa,
        relative_humidity=c.relative_humidity)


def _wavelengths(bands: dict[str, Band]) -> np.ndarray:
    return np.concatenate([b.wavelength_nm for b in bands.values()])


def _assemble(c: Conditions, gamma: float, atmosphere: Atmosphere, medium: Medium,
              curve: TransferCurve, bands: dict[str, Band]) -> SunsetModel:
    """Channel weights at the horizon ray for a traced atmosphere."""
    p_eye_hPa = float(np.interp(c.eye_height_m, atmosphere.height_m, atmosphere.pressure_Pa)) / 100
    channels, start = {}, 0
    for n, b in bands.items():
        k = np.arange(start, start + b.wavelength_nm.size)
        start += k.size
        m_hor = float(np.mean(curve.horizon.airmass[k]))
        w = band_weights(b, airmass=m_hor, pressure_hPa=p_eye_hPa,
                         tau_aerosol_550=c.tau_aerosol_550, angstrom_alpha=c.angstrom_alpha)
        tau = (rayleigh_optical_depth_bodhaine1999(b.wavelength_nm, pressure_hPa=p_eye_hPa)
               + aerosol_optical_depth_angstrom(b.wavelength_nm, c.tau_aerosol_550,
                                                c.angstrom_alpha))
        channels[n] = ChannelModel(b, k, np.asarray(w), np.asarray(tau))
    return SunsetModel(c, float(gamma), atmosphere, medium, curve, channels,
                       disc.limb_darkening_u(_wavelengths(bands)))


def build_model(conditions: Conditions, lapse_rate_K_per_km: float, *,
                bands: dict[str, Band] | None = None, azimuth_deg: float = 270.0,
                atmosphere: Atmosphere | None = None, rays: int = 48,
                span_arcmin: float = 45.0) -> SunsetModel:
    """Trace one atmosphere for all channels' wavelengths.

    Parameters
    ----------
    conditions : Conditions
    lapse_rate_K_per_km : float
        GAMMA of the near-surface layer [K/km] (ignored when ``atmosphere`` is given).
    bands : dict of Band, optional
        Channels; default :func:`calibration.bands.default_bands`.
    azimuth_deg : float
        Azimuth of the Sun [deg], for the Earth's radius of curvature along the path.
    atmosphere : Atmosphere, optional
        A ready atmosphere (e.g. a tabulated profile) instead of the linear layer.
    rays, span_arcmin : int, float
        Rays per wavelength and how far above the horizon they reach [arcmin].
    """
    c = conditions
    bands = default_bands() if bands is None else bands
    atmosphere = _atmosphere(c, lapse_rate_K_per_km) if atmosphere is None else atmosphere
    radius = earth_radius_of_curvature_m(c.latitude_deg, azimuth_deg)
    medium = make_medium(atmosphere, _wavelengths(bands), earth_radius_m=radius)
    curve = transfer_curve(medium, rays=rays, span_arcmin=span_arcmin)
    return _assemble(c, lapse_rate_K_per_km, atmosphere, medium, curve, bands)


def build_models(conditions: Conditions, lapse_rates_K_per_km, *,
                 bands: dict[str, Band] | None = None, azimuth_deg: float = 270.0,
                 rays: int = 48, span_arcmin: float = 45.0) -> list[SunsetModel]:
    """:func:`build_model` for several lapse rates, traced together in one integration."""
    c = conditions
    bands = default_bands() if bands is None else bands
    radius = earth_radius_of_curvature_m(c.latitude_deg, azimuth_deg)
    lam = _wavelengths(bands)
    atmospheres = [_atmosphere(c, g) for g in lapse_rates_K_per_km]
    media = [make_medium(a, lam, earth_radius_m=radius) for a in atmospheres]
    curves = transfer_curves(media, rays=rays, span_arcmin=span_arcmin)
    return [_assemble(c, g, a, m, cv, bands)
            for g, a, m, cv in zip(lapse_rates_K_per_km, atmospheres, media, curves)]


def visible_fraction(model: SunsetModel, channel: str, centre_altitude_deg,
                     semidiameter_arcsec) -> np.ndarray:
    """A channel's visible flux as a fraction of the whole disc seen through the horizon ray.

    Parameters
    ----------
    model : SunsetModel
    channel : str
    centre_altitude_deg : (N,) array_like
        True altitude of the Sun's centre [deg].
    semidiameter_arcsec : float or (N,) array_like

    Returns
    -------
    (N,) ndarray
        Fraction, 0 when nothing is above the horizon; about 0.8 for the whole disc just
        above it (the image is flattened by refraction).
    """
    ch = model.channels[channel]
    a_c = np.atleast_1d(np.asarray(centre_altitude_deg, dtype=float))
    sd = np.broadcast_to(np.asarray(semidiameter_arcsec, dtype=float) / 3600.0, a_c.shape)
    total = np.zeros(a_c.shape)
    for w, k, tau in zip(ch.weights, ch.node_index, ch.tau):
        e = model.curve.apparent_elevation_deg[k]
        a = model.curve.true_altitude_deg[k]
        m = model.curve.airmass[k]
        u = model.u_limb[k]
        ok = np.isfinite(a[:-1]) & np.isfinite(a[1:]) & (a[1:] != a[:-1])
        slope = np.where(ok, (e[1:] - e[:-1]) / np.where(ok, a[1:] - a[:-1], 1.0), 0.0)
        m_mid = 0.5 * (m[1:] + m[:-1])
        t_rel = np.where(ok, np.exp(-tau * (np.nan_to_num(m_mid) - m[0])), 0.0)
        y = (np.nan_to_num(a)[None, :] - a_c[:, None]) / sd[:, None]
        c = disc.flux_below(y, u)
        pieces = slope * t_rel * (c[:, 1:] - c[:, :-1])
        # Beyond the traced span the disc is whole: add what lies above the last ray.
        top = (disc.total_flux(u) - c[:, -1]) * slope[-1]
        total += w * (pieces.sum(axis=1) + top) / disc.total_flux(u)
    return total


def limb_elevation_deg(model: SunsetModel, channel: str, top_altitude_deg, *,
                       extrapolate: bool = False) -> np.ndarray:
    """Apparent elevation [deg] of a channel's upper limb: weighted mean over its nodes.

    NaN where the limb is below the horizon at any node carrying weight, unless
    ``extrapolate``: then the transfer curve's first piece is continued below the
    horizon, so that a fit sees how far below the horizon the model puts the limb.
    """
    ch = model.channels[channel]
    a_top = np.atleast_1d(np.asarray(top_altitude_deg, dtype=float))
    rows = []
    for k in ch.node_index:
        e = model.curve.elevation_of(k, a_top)
        if extrapolate:
            ec, ac = model.curve.apparent_elevation_deg[k], model.curve.true_altitude_deg[k]
            slope = (ec[1] - ec[0]) / (ac[1] - ac[0])
            e = np.where(np.isnan(e) & (a_top < ac[0]), ec[0] + slope * (a_top - ac[0]), e)
        rows.append(e)
    return np.sum(ch.weights[:, None] * np.stack(rows), axis=0)


def horizon_elevation_deg(model: SunsetModel) -> float:
    """Apparent elevation of the sea horizon as a camera's horizon line shows it [deg].

    The green channel's horizon ray (the horizon line is found on green); the channels'
    horizons differ by well under an arcsecond.
    """
    ch = model.channels.get("g") or next(iter(model.channels.values()))
    return float(np.mean(model.curve.horizon.apparent_elevation_deg[ch.node_index]))


def light_by_height(model: SunsetModel, channel: str, semidiameter_arcsec: float, *,
                    points: int = 400, depth: float = 0.6):
    """A channel's apex height above the horizon line and visible fraction, as the Sun sets.

    Returns
    -------
    centre_altitude_deg, apex_height_arcsec, fraction : (points,) ndarray
        From the limb just below the horizon (negative heights: extrapolated) up to the
        centre ``depth`` semidiameters below the horizon ray.
    """
    hz = model.curve.horizon.true_altitude_deg[model.channels[channel].node_index]
    sd = semidiameter_arcsec / 3600.0
    a_c = np.linspace(hz.min() - sd - 2.0 / 3600.0, hz.max() - depth * sd, points)
    h = (limb_elevation_deg(model, channel, a_c + sd, extrapolate=True)
         - horizon_elevation_deg(model)) * 3600.0
    return a_c, h, visible_fraction(model, channel, a_c, semidiameter_arcsec)


def last_light_altitude_deg(model: SunsetModel, channel: str, semidiameter_arcsec: float,
                            detection_fraction: float = DETECTION_FRACTION) -> float:
    """True altitude of the Sun's centre [deg] at which a channel's light is last detected."""
    hz = model.curve.horizon.true_altitude_deg[model.channels[channel].node_index]
    sd = semidiameter_arcsec / 3600.0
    lo, hi = float(hz.min() - 1.2 * sd), float(hz.max() + sd)  # nothing / whole disc visible
    for _ in range(6):  # vectorised bisection: 64 probes per round
        grid = np.linspace(lo, hi, 64)
        f = visible_fraction(model, channel, grid, semidiameter_arcsec)
        i = int(np.clip(np.searchsorted(f, detection_fraction), 1, 63))
        lo, hi = grid[i - 1], grid[i]
    f_lo, f_hi = visible_fraction(model, channel, [lo, hi], semidiameter_arcsec)
    return float(lo + (detection_fraction - f_lo) / (f_hi - f_lo) * (hi - lo))


@dataclass(frozen=True)
class Prediction:
    """The observables of one sunset for one atmosphere."""

    lapse_rate_K_per_km: float
    layer_top_m: float
    dip_arcmin: dict[str, float]
    horizon_refraction_arcmin: dict[str, float]
    last_light_unix_s: dict[str, float]
    green_duration_s: float
    rg_offset_arcsec: float
    detection_fraction: float
    semidiameter_arcsec: float
    sunset_azimuth_deg: float
    model: SunsetModel = field(repr=False)
    notes: tuple[str, ...] = ()


def _channel_mean(model: SunsetModel, values: np.ndarray) -> dict[str, float]:
    return {n: float(np.sum(ch.weights * values[ch.node_index]))
            for n, ch in model.channels.items()}


def predict_sunset(conditions: Conditions, date_iso: str, lapse_rate_K_per_km: float = 6.5, *,
                   bands: dict[str, Band] | None = None,
                   detection_fraction: float = DETECTION_FRACTION,
                   atmosphere: Atmosphere | None = None) -> Prediction:
    """Predict the evening's sunset at a site for one atmosphere.

    Parameters
    ----------
    conditions : Conditions
    date_iso : str
        Local date ``YYYY-MM-DD``.
    lapse_rate_K_per_km : float
        GAMMA of the near-surface layer [K/km].
    bands : dict of Band, optional
    detection_fraction : float
        Detection level, fraction of the whole disc's flux.
    atmosphere : Atmosphere, optional
        Replaces the linear layer (e.g. a tabulated profile).
    """
    c = conditions
    if not 0.0 < detection_fraction < 0.5:
        raise ValueError(f"detection_fraction must be within 0..0.5, got {detection_fraction}")
    t0 = sunset_time(date_iso, c.latitude_deg, c.longitude_deg, c.eye_height_m)
    sun0 = sun_track(t0, c.latitude_deg, c.longitude_deg, c.eye_height_m)
    model = build_model(c, lapse_rate_K_per_km, bands=bands,
                        azimuth_deg=float(sun0.azimuth_deg[0]), atmosphere=atmosphere)
    sd = float(sun0.semidiameter_arcsec[0])
    a_last = {n: last_light_altitude_deg(model, n, sd, detection_fraction) for n in model.channels}
    ducted = model.curve.horizon.method == "search"
    finite = [] if ducted else [n for n in a_last if np.isfinite(a_last[n])]
    last = {n: float("nan") for n in a_last}
    if finite:
        t_last = time_of_altitude(np.array([a_last[n] for n in finite]), t0,
                                  c.latitude_deg, c.longitude_deg, c.eye_height_m)
        last.update(zip(finite, (float(t) for t in np.atleast_1d(t_last))))
    notes = []
    if len(finite) < len(a_last):
        notes.append("rays near the horizon are trapped in a duct at this lapse rate: the sea "
                     "horizon and last light are not defined by this single-layer model "
                     "(superior mirages and ducted images expected)")
    hz = model.curve.horizon
    green = last.get("g", np.nan) - last.get("r", np.nan)
    offset = (_rg_offset_arcsec(model, last, c)
              if np.isfinite(last.get("r", np.nan)) and "g" in last else np.nan)
    return Prediction(float(lapse_rate_K_per_km), c.layer_top_m,
                      _channel_mean(model, hz.dip_arcmin),
                      _channel_mean(model, hz.refraction_arcmin), last, float(green),
                      float(offset), detection_fraction, sd, float(sun0.azimuth_deg[0]), model,
                      tuple(notes))


def _rg_offset_arcsec(model: SunsetModel, last: dict[str, float], c: Conditions) -> float:
    """Green limb above red limb [arcsec], median over the final 60 s before red last light."""
    t = last["r"] - np.arange(60.0, 0.0, -1.0)
    track = sun_track(t, c.latitude_deg, c.longitude_deg, c.eye_height_m)
    top = track.altitude_deg + track.semidiameter_arcsec / 3600.0
    diff = (limb_elevation_deg(model, "g", top) - limb_elevation_deg(model, "r", top)) * 3600
    diff = diff[np.isfinite(diff)]
    return float(np.median(diff)) if diff.size else float("nan")
