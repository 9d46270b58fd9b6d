"""The calibration from the frames' measurements (the steps of ``limbtrace calibrate``).

Private helper of :mod:`calibration.run`, which measures the frames, writes the output
and re-exports this module's public names. :func:`calibrate_measurements` reduces the
sequence of :class:`FrameMeasure` (one per frame: discs, green's limb profile, horizon)
to the calibration document:

1. Ephemeris (:func:`analyse.sun.sun_track`) for the frame times; each disc centre's
   apparent altitude per channel is the mean of its two limbs' true altitudes lifted by
   refraction ray-traced through the standard atmosphere (lapse rate 6.5 K/km, the
   observation's air at the lens) at the channel's effective wavelength for that
   altitude (:mod:`calibration.bands`: sensitivity x solar spectrum x extinction).
2. Roll from the horizon when it is found in enough frames, else from the Sun's track.
3. Plate scale from the green disc's horizontal radius and the ephemeris semidiameter
   (the limb corrected for blur by the profile fit; the horizontal angular size of a
   refracted disc is ``SD cos(h_apparent) / cos(h_true)``; gnomonic magnification off
   the frame centre removed). Cross-check: a camera model fitted to the disc centres
   along the Sun's refracted path (:func:`calibration.optics.fit_camera`).
4. Lateral colour: disc-centre offsets of r and b from g, less the predicted
   atmospheric dispersion, fitted with a radial model or a constant.
5. Where the sequence comes low enough, the green-above-red offset's change with
   altitude against the predicted dispersion (``dispersion_check``).
6. Effective wavelengths for the recorded Sun and a table against altitude.

References
----------
U.S. Standard Atmosphere, 1976 (NOAA, NASA, USAF): the lapse rate of the predictions.
Angstrom, A. (1929). On the atmospheric transmission of sun radiation and on dust in
the air. Geogr. Ann. 11, 156-166 (the default Angstrom exponent).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline

from analyse import horizon as hz
from analyse.atmosphere import linear_layer_atmosphere
from analyse.errors import InputError
from analyse.frames import FrameSet
from analyse.observation import Observation, format_utc
from analyse.refraction import make_medium, refraction_table
from analyse.sun import SunTrack, sun_track
from calibration import optics as op
from calibration.bands import (
    Band,
    airmass_kasten_young1989,
    effective_wavelength_nm,
    effective_wavelength_table,
)
from calibration.store import SCHEMA

__all__ = ["FrameMeasure", "dispersion_check", "calibrate_measurements"]

MIN_HORIZON_FRAMES = 3  # roll from the horizon needs this many frames ...
HORIZON_MIN_FRACTION = 0.3  # ... and this fraction of the frames with a disc
MOTION_MIN_ALT_DEG = 4.0  # lower, refraction's gradient is too uncertain for the motion fit
STANDARD_LAPSE_RATE_K_PER_KM = 6.5  # US Standard Atmosphere 1976, for the predictions
WAVELENGTH_STEP_NM = 10.0  # refraction traced every 10 nm, linear between [nm]
REFRACTION_NODES = 48  # traced apparent altitudes, denser near the horizon
DENSE_STEP_DEG = 0.002  # spline resampling of the refraction table [deg]
# limb-model error, as a fraction of its correction (common practice, no source)
EDGE_SYSTEMATIC_FRACTION = 0.25
# relative error of the predicted dispersion above 1 deg altitude (common practice, no source)
DISPERSION_REL_ERR = 0.15
CHECK_MIN_ALT_DEG = 1.0  # frames lower than this are left out of the dispersion check
CHECK_MAX_LOW_ALT_DEG = 8.0  # the check needs frames below this apparent altitude
CHECK_MIN_CHANGE_PX = 0.1  # ... and a predicted change of green-above-red of this much
CHECK_MAX_RATIO_ERR = 0.15  # ... measured this well (zero dispersion then >= 6 sigma off)
CHECK_TOLERANCE = DISPERSION_REL_ERR  # allowed |ratio - 1| beyond 3 sigma
TABLE_ALTITUDES_DEG = (90.0, 60.0, 45.0, 30.0, 20.0, 15.0, 10.0, 7.0, 5.0, 4.0, 3.0, 2.0,
                       1.5, 1.0, 0.5, 0.0)
AEROSOL_TAU_550 = 0.1  # vertical aerosol optical depth at 550 nm (clear sky; from memory)
ANGSTROM_ALPHA = 1.3  # Angstrom exponent (Angstrom 1929's typical value; from memory)
_CHANNELS = ("r", "g", "b")


@dataclass(frozen=True)
class FrameMeasure:
    """One frame's disc fits (None when the disc was not measured: see ``message``),
    limb profile of green, horizon and the horizon's colour offsets."""

    index: int
    t_unix_s: float
    source: str
    discs: dict | None
    profile: op.EdgeProfile | None
    horizon: hz.HorizonLine | None
    horizon_dy_px: dict
    saturated: bool
    message: str = ""


class _Refraction:
    """Ray-traced refraction of the standard atmosphere on a grid of wavelengths and
    apparent altitudes, resampled by cubic splines; apparent altitude from true."""

    def __init__(self, obs: Observation, lam_range_nm, app_range_deg) -> None:
        t_C, p_hPa, rh = obs.air_at_lens()
        atm = linear_layer_atmosphere(STANDARD_LAPSE_RATE_K_PER_KM,
                                      layer_top_m=obs.model.layer_top_m,
                                      eye_height_m=obs.site.eye_height_m, temperature_C=t_C,
                                      pressure_hPa=p_hPa, relative_humidity=rh)
        lo_nm = WAVELENGTH_STEP_NM * math.floor(lam_range_nm[0] / WAVELENGTH_STEP_NM)
        hi_nm = WAVELENGTH_STEP_NM * math.ceil(lam_range_nm[1] / WAVELENGTH_STEP_NM)
        self.lam = np.arange(lo_nm, hi_nm + 0.5 * WAVELENGTH_STEP_NM, WAVELENGTH_STEP_NM)
        if self.lam.size < 2:
            self.lam = np.array([lo_nm, lo_nm + WAVELENGTH_STEP_NM])
        lo, hi = app_range_deg
        nodes = np.geomspace(lo + 3.0, hi + 3.0, REFRACTION_NODES) - 3.0
        r = refraction_table(make_medium(atm, self.lam), nodes)  # (L, M) arcmin
        ok = np.all(np.isfinite(r), axis=0)
        nodes, r = nodes[ok], r[:, ok]
        self.app = np.arange(nodes[0], nodes[-1], DENSE_STEP_DEG)
        self.true = self.app[None, :] - CubicSpline(nodes, r, axis=1)(self.app) / 60.0

    def apparent_deg(self, true_deg, lam_nm) -> np.ndarray:
        """Apparent altitude [deg] of true altitudes at wavelengths (both (N,)); NaN
        outside the traced range."""
        true_deg, lam_nm = np.broadcast_arrays(np.asarray(true_deg, float),
                                               np.asarray(lam_nm, float))
        per = np.array([np.interp(true_deg, tj, self.app, left=np.nan, right=np.nan)
                        for tj in self.true])  # (L, N)
        j = np.clip(np.searchsorted(self.lam, lam_nm) - 1, 0, self.lam.size - 2)
        w = (lam_nm - self.lam[j]) / (self.lam[j + 1] - self.lam[j])
        cols = np.arange(true_deg.size)
        return (1.0 - w) * per[j, cols] + w * per[j + 1, cols]


def _extinction(obs: Observation) -> dict:
    """Extinction options for calibration.bands: the observation's pressure at the lens,
    the default aerosol."""
    return {"pressure_hPa": obs.air_at_lens()[1], "tau_aerosol_550": AEROSOL_TAU_550,
            "angstrom_alpha": ANGSTROM_ALPHA}


def _sky(track: SunTrack, obs: Observation, bands: dict[str, Band], folder: Path) -> dict:
    """Per frame and channel: apparent altitude of the disc centre [deg] and the effective
    wavelength [nm]; shapes (N, 3) in r, g, b order."""
    sd = track.semidiameter_arcsec / 3600.0
    ext = _extinction(obs)
    m0 = airmass_kasten_young1989(90.0 - np.clip(track.altitude_deg, 0.0, 90.0))
    lam0 = np.stack([np.atleast_1d(effective_wavelength_nm(bands[c], airmass=m0, **ext))
                     for c in _CHANNELS], axis=1)
    lo = max(float(np.min(track.altitude_deg - sd)) - 0.1, 0.05)
    hi = min(float(np.max(track.altitude_deg + sd)) + 1.0, 89.0)
    if hi < lo + 0.5:
        raise InputError(f"the Sun is below the horizon at every frame time (true altitude "
                         f"{float(np.max(track.altitude_deg)):.1f} deg at most): check the "
                         "frame times and [site]", folder)
    refr = _Refraction(obs, (max(lam0.min() - 15.0, 300.0), lam0.max() + 15.0), (lo, hi))
    app = np.empty_like(lam0)
    lam = np.empty_like(lam0)
    for k, c in enumerate(_CHANNELS):
        centre = refr.apparent_deg(track.altitude_deg, lam0[:, k])
        m = airmass_kasten_young1989(90.0 - np.clip(centre, 0.0, 90.0))
        lam[:, k] = np.atleast_1d(effective_wavelength_nm(bands[c], airmass=m, **ext))
        up = refr.apparent_deg(track.altitude_deg + sd, lam[:, k])
        down = refr.apparent_deg(track.altitude_deg - sd, lam[:, k])
        app[:, k] = 0.5 * (up + down)
    return {"app_deg": app, "lam_nm": lam}


def _horizon_roll(ms: list[FrameMeasure], n_discs: int):
    """(roll, err, frames) from the frames' horizon lines, or None when too few."""
    lines = [m.horizon for m in ms if m.horizon is not None and m.horizon.found]
    if len(lines) < max(MIN_HORIZON_FRAMES, HORIZON_MIN_FRACTION * n_discs):
        return None
    roll, err, n = op.robust_mean([ln.roll_deg for ln in lines],
                                  [max(ln.roll_err_deg, 1e-4) for ln in lines])
    return roll, err, n


def _disc_scale(discs, profiles, track, app_g, roll_deg, focal_px, centre):
    """Plate scale from the green disc's horizontal radius, per frame and combined."""
    e = op.horizontal_direction(roll_deg)
    offsets = np.array([p.offset_px for p in profiles if p is not None and p.converged])
    offset = float(np.median(offsets)) if offsets.size else 0.0
    radius = np.array([op.radius_along_px(d, e) for d in discs]) + offset
    x, y = np.array([d.x_px for d in discs]), np.array([d.y_px for d in discs])
    mag = (np.ones_like(x) if focal_px is None else
           op.gnomonic_magnification(x, y, e, centre_px=centre, focal_px=focal_px))
    sd_app = track.semidiameter_arcsec * np.cos(np.radians(app_g)) / np.cos(
        np.radians(track.altitude_deg))
    per = sd_app * mag / radius
    scale, stat, _ = op.robust_mean(per)
    if not np.isfinite(stat):  # one frame: its edge scatter
        d = discs[0]
        stat = scale * d.rms_px * math.sqrt(2.0 / max(d.points, 1)) / radius[0]
    syst = scale * EDGE_SYSTEMATIC_FRACTION * abs(offset) / float(np.median(radius))
    return scale, math.hypot(stat, syst), offset, offsets.size


def _colour_inputs(discs, sky, scale, roll_deg):
    """Per channel r, b: measured offsets (N, 2), errors (N, 2), dispersion (N, 2) [px]."""
    up = np.array(op.up_direction(roll_deg))
    g = discs
    out = {}
    for k, c in ((0, "r"), (2, "b")):
        off = np.array([[d[c].x_px - d["g"].x_px, d[c].y_px - d["g"].y_px] for d in g])
        err = np.array([[math.hypot(d[c].x_err_px, d["g"].x_err_px),
                         math.hypot(d[c].y_err_px, d["g"].y_err_px)] for d in g])
        lift_px = (sky["app_deg"][:, k] - sky["app_deg"][:, 1]) * 3600.0 / scale
        out[c] = (off, err, lift_px[:, None] * up[None, :])
    return out


def _colour(discs, sky, scale, roll_deg, fs: FrameSet):
    """Lateral colour fits for r and b, and the radial decision."""
    x = np.array([d["g"].x_px for d in discs])
    y = np.array([d["g"].y_px for d in discs])
    centre = (0.5 * (fs.width - 1), 0.5 * (fs.height - 1))
    span = op.radial_span_fraction(x, y, fs.width, fs.height)
    radial = span >= op.RADIAL_MIN_SPAN_FRACTION and len(discs) >= op.RADIAL_MIN_FRAMES
    inputs = _colour_inputs(discs, sky, scale, roll_deg)
    fits = {}
    for c, (off, err, disp) in inputs.items():
        fit = op.fit_lateral_colour(x, y, off, err, disp, centre_px=centre, radial=radial)
        extra = DISPERSION_REL_ERR * np.abs(np.median(disp, axis=0))
        fits[c] = dataclasses.replace(fit, offset_err_px=tuple(
            float(math.hypot(e, a)) for e, a in zip(fit.offset_err_px, extra)))
    return fits, radial, span, centre, inputs


def dispersion_check(x_px, y_px, offset_px, offset_err_px, dispersion_px, apparent_alt_deg,
                     lift_arcsec, *, centre_px: tuple[float, float], radial: bool) -> dict:
    """The red channel's measured offset from green against the predicted dispersion.

    The lens model of :func:`calibration.optics.fit_lateral_colour` is fitted together
    with a free factor ``s`` on the predicted dispersion, over frames above
    :data:`CHECK_MIN_ALT_DEG`. Tested only when some frame is below
    :data:`CHECK_MAX_LOW_ALT_DEG`, the prediction changes by at least
    :data:`CHECK_MIN_CHANGE_PX` across the frames and ``s`` is measured to
    :data:`CHECK_MAX_RATIO_ERR`; then the two agree when ``|s - 1| <= 3 sigma_s +``
    :data:`CHECK_TOLERANCE`.

    Parameters
    ----------
    x_px, y_px : (N,) array_like
        Green disc centres [px].
    offset_px, offset_err_px : (N, 2) array_like
        Red's disc centre minus green's, and errors [px].
    dispersion_px : (N, 2) array_like
        Predicted displacement of red from green by the atmosphere [px].
    apparent_alt_deg : (N,) array_like
        The Sun's apparent altitude [deg].
    lift_arcsec : (N,) array_like
        Predicted green-above-red [arcsec] (for the message).
    centre_px : (cx, cy)
        Frame centre [px].
    radial : bool
        Whether the lens model is radial.

    Returns
    -------
    dict
        ``{"agree": True/False/None, "detail": str}`` and, when fitted, ``"ratio"`` and
        ``"ratio_err"`` (``s`` and its 1-sigma error).
    """
    app = np.asarray(apparent_alt_deg, float)
    lift = np.asarray(lift_arcsec, float)
    disp = np.asarray(dispersion_px, float)
    use = app >= CHECK_MIN_ALT_DEG
    if not use.any() or app[use].min() > CHECK_MAX_LOW_ALT_DEG:
        return {"agree": None, "detail": f"not tested: no frame between {CHECK_MIN_ALT_DEG:g} "
                f"and {CHECK_MAX_LOW_ALT_DEG:g} deg apparent altitude (lowest "
                f"{app.min():.1f} deg)"}
    change = float(np.ptp(np.hypot(*disp[use].T)))
    lo, hi = int(np.argmin(np.where(use, app, np.inf))), int(np.argmax(np.where(use, app, -1)))
    where = (f"predicted green above red {lift[hi]:.1f}\" at {app[hi]:.1f} deg and "
             f"{lift[lo]:.1f}\" at {app[lo]:.1f} deg apparent altitude")
    if change < CHECK_MIN_CHANGE_PX or int(use.sum()) < 4:
        return {"agree": None, "detail": f"not tested: {where}, a change of only {change:.2f} "
                f"px over {int(use.sum())} frames"}
    fit = op.fit_lateral_colour(np.asarray(x_px)[use], np.asarray(y_px)[use],
                                np.asarray(offset_px)[use], np.asarray(offset_err_px)[use],
                                disp[use], centre_px=centre_px, radial=radial,
                                free_dispersion=True)
    s, ds = fit.dispersion_ratio, fit.dispersion_ratio_err
    if not np.isfinite(ds) or ds > CHECK_MAX_RATIO_ERR:
        return {"agree": None, "ratio": s, "ratio_err": ds,
                "detail": f"inconclusive: {where}; measured/predicted = {s:.2f} +- {ds:.2f}"}
    agree = bool(abs(s - 1.0) <= 3.0 * ds + CHECK_TOLERANCE)
    return {"agree": agree, "ratio": s, "ratio_err": ds,
            "detail": f"{where} (standard atmosphere, effective wavelengths); the measured change "
            f"is {s:.2f} +- {ds:.2f} times the predicted: {'agree' if agree else 'disagree'}"}


def _motion_fit(g, track, app_g, scale0, centre) -> tuple[op.CameraFit, int]:
    """Camera model fitted to the disc centres of frames above MOTION_MIN_ALT_DEG."""
    use = app_g >= MOTION_MIN_ALT_DEG
    if use.sum() < op.MIN_POINTING_FRAMES:
        return op.CameraFit(False, np.nan, np.nan, np.nan, np.nan, (), (), np.nan, 0,
                            f"fewer than {op.MIN_POINTING_FRAMES} frames with the Sun above "
                            f"{MOTION_MIN_ALT_DEG:g} deg"), 0
    x = np.array([d.x_px for d in g])[use]
    y = np.array([d.y_px for d in g])[use]
    t, az, alt = track.t_unix_s[use], track.azimuth_deg[use], app_g[use]
    v = op.sky_vectors(az, alt)
    step_deg = np.degrees(np.arccos(np.clip(np.sum(v[1:] * v[:-1], axis=1), -1.0, 1.0)))
    pointing = op.split_pointings(t, x, y, step_deg * 3600.0 / scale0)
    cam = op.fit_camera(t, az, alt, x, y, pointing, centre_px=centre,
                        scale_guess_arcsec_per_px=scale0)
    return cam, int(pointing.max()) + 1


def _geometry(ms, discs, track, sky, fs: FrameSet, notes: list[str]) -> dict:
    """Roll, plate scale (disc width) and the camera fit (Sun's motion)."""
    centre = (0.5 * (fs.width - 1), 0.5 * (fs.height - 1))
    g = [d["g"] for d in discs]
    profiles = [m.profile for m in ms]
    app_g = sky["app_deg"][:, 1]
    horizon = _horizon_roll(ms, len(discs))
    scale0, _, _, _ = _disc_scale(g, profiles, track, app_g, horizon[0] if horizon else 0.0,
                                  None, centre)
    cam, pointings = _motion_fit(g, track, app_g, scale0, centre)
    if horizon is not None:
        roll, roll_err, source = horizon[0], horizon[1], f"horizon ({horizon[2]} frames)"
    elif cam.converged:
        roll, roll_err, source = cam.roll_deg, cam.roll_err_deg, "sun motion"
    else:
        roll, roll_err, source = 0.0, None, "not measured (assumed level)"
        notes.append(f"roll not measured: no horizon in view and no usable track ({cam.message})")
    scale, scale_err, offset, n_prof = _disc_scale(
        g, profiles, track, app_g, roll, op.ARCSEC_PER_RAD / scale0, centre)
    if n_prof == 0:
        notes.append("limb profile not fitted (saturated or unusual disc): the radius is that "
                     "of the steepest edge, biased inward by a fraction of the blur")
    if cam.converged:
        diff = cam.plate_scale_arcsec_per_px - scale
        sig = math.hypot(scale_err, cam.plate_scale_err_arcsec_per_px)
        if abs(diff) > 3.0 * sig:
            notes.append(f"the Sun's motion gives a plate scale "
                         f"{cam.plate_scale_arcsec_per_px:.4f} "
                         f"arcsec/px, {diff / scale * 100:+.2f} % from the disc's (> 3 sigma): "
                         "check the frame times and for lens distortion")
    return {"scale": scale, "scale_err": scale_err, "roll": roll, "roll_err": roll_err,
            "roll_source": source, "camera": cam, "edge_offset_px": offset,
            "pointings": pointings}


def _effective(bands, sky, obs) -> tuple[dict, float, dict]:
    """Effective wavelengths at the recording's median altitude, and the table."""
    alt = float(np.median(sky["app_deg"][:, 1]))
    ext = _extinction(obs)
    m = float(airmass_kasten_young1989(90.0 - min(max(alt, 0.0), 90.0)))
    now = {c: effective_wavelength_nm(bands[c], airmass=m, **ext) for c in _CHANNELS}
    table = {"altitude_deg": list(TABLE_ALTITUDES_DEG)}
    for c in _CHANNELS:
        table[c] = [float(v) for v in effective_wavelength_table(bands[c], TABLE_ALTITUDES_DEG,
                                                                 **ext)[1]]
    return now, alt, table


def _colour_doc(fits, radial, span, centre) -> dict:
    doc = {
        "channel_offset_px": {c: list(fits[c].offset_px) for c in ("r", "b")},
        "channel_offset_err_px": {c: list(fits[c].offset_err_px) for c in ("r", "b")},
        "colour_model": "radial" if radial else "constant",
        "colour_model_criterion": (
            f"radial when the disc centres span >= {op.RADIAL_MIN_SPAN_FRACTION:g} of the frame "
            f"diagonal over >= {op.RADIAL_MIN_FRAMES} frames; spanned {span:.2f}"),
        "radial_model": None,
        "atmospheric_dispersion_removed": True,
    }
    if radial:
        doc["radial_model"] = {
            "centre_px": list(centre), "k": {c: fits[c].k for c in ("r", "b")},
            "k_err": {c: fits[c].k_err for c in ("r", "b")},
            "formula": "offset(p) = channel_offset_px + k (p - centre_px), p = (x, y) [px]"}
    return doc


def _horizon_colour(ms, fits, radial, centre) -> dict | None:
    """The horizon's measured r/b offsets from green against the lens model's, per channel."""
    out = {}
    for c in ("r", "b"):
        vals = [m.horizon_dy_px.get(c, np.nan) for m in ms]
        rows = [m.horizon.row_at(centre[0]) for m in ms
                if m.horizon is not None and m.horizon.found]
        vals = np.array([v for v in vals if np.isfinite(v)])
        if vals.size == 0 or not rows:
            return None
        model = fits[c].offset_px[1] + (fits[c].k * (float(np.median(rows)) - centre[1]))
        out[c] = {"measured_dy_px": float(np.median(vals)), "model_dy_px": float(model)}
    return out


def _document(ms, discs, track, sky, geo, colour, check, bands_doc, eff, fs, obs) -> dict:
    fits, radial, span, centre, _ = colour
    now, alt, table = eff
    cam = geo["camera"]
    doc = {
        "schema": SCHEMA,
        "created_by": "limbtrace calibrate",
        "source_folder": fs.folder.name,
        "frames_total": len(fs.infos), "frames_measured": len(ms), "frames_used": len(discs),
        "time_range_utc": [format_utc(float(track.t_unix_s.min())),
                           format_utc(float(track.t_unix_s.max()))],
        "sun_apparent_altitude_range_deg": [float(sky["app_deg"][:, 1].min()),
                                            float(sky["app_deg"][:, 1].max())],
        "plate_scale_arcsec_per_px": geo["scale"],
        "plate_scale_err_arcsec_per_px": geo["scale_err"],
        "plate_scale_method": "green disc's horizontal radius against the ephemeris semidiameter",
        "limb_blur_correction_px": geo["edge_offset_px"],
        "motion_plate_scale_arcsec_per_px": (cam.plate_scale_arcsec_per_px
                                             if cam.converged else None),
        "motion_plate_scale_err_arcsec_per_px": (cam.plate_scale_err_arcsec_per_px
                                                 if cam.converged else None),
        "motion_roll_deg": cam.roll_deg if cam.converged else None,
        "motion_roll_err_deg": cam.roll_err_deg if cam.converged else None,
        "motion_fit_rms_px": cam.rms_px if cam.converged else None,
        "motion_fit": (f"{cam.frames} frames above {MOTION_MIN_ALT_DEG:g} deg, "
                       f"{geo['pointings']} pointing(s)" if cam.converged else cam.message),
        "roll_deg": geo["roll"], "roll_err_deg": geo["roll_err"],
        "roll_source": geo["roll_source"],
    }
    doc |= _colour_doc(fits, radial, span, centre)
    doc["horizon_colour_check"] = _horizon_colour(ms, fits, radial, centre)
    doc |= {
        "effective_wavelength_nm": now, "effective_wavelength_altitude_deg": alt,
        "effective_wavelength_table": table,
        "extinction": _extinction(obs) | {"rayleigh": "Bodhaine et al. 1999",
                                          "airmass": "Kasten & Young 1989",
                                          "aerosol": "Angstrom 1929"},
        "bands": bands_doc, "dispersion_check": check,
        "refraction_model": (f"ray-traced, linear layer {STANDARD_LAPSE_RATE_K_PER_KM} K/km "
                             "under the US Standard Atmosphere 1976, air at the lens from "
                             "observation.toml"),
    }
    return doc


def calibrate_measurements(ms: list[FrameMeasure], fs: FrameSet, obs: Observation,
                           bands: dict[str, Band], bands_doc: dict) -> dict:
    """Reduce the frames' measurements to the calibration (module docstring, steps 1-6)."""
    good = [m for m in ms if m.discs is not None]
    if not good:
        reasons = sorted({m.message for m in ms if m.message})
        raise InputError(f"no whole solar disc in any of the {len(ms)} frames measured "
                         f"({'; '.join(reasons[:3])})", fs.folder)
    notes: list[str] = list(fs.notes)
    reasons: dict[str, int] = {}
    for m in ms:
        if m.discs is None:
            reasons[m.message] = reasons.get(m.message, 0) + 1
    if reasons:
        notes.append(f"{len(ms) - len(good)} of {len(ms)} frames not used: " + "; ".join(
            f"{why} ({n})" for why, n in sorted(reasons.items(), key=lambda kv: -kv[1])))
    track = sun_track(np.array([m.t_unix_s for m in good]), obs.site.latitude_deg,
                      obs.site.longitude_deg, obs.site.eye_height_m)
    sky = _sky(track, obs, bands, fs.folder)
    ok = np.all(np.isfinite(sky["app_deg"]), axis=1)
    if not ok.all():
        notes.append(f"{int((~ok).sum())} frames left out: the Sun too low for the refraction "
                     "model")
        good = [m for m, k in zip(good, ok) if k]
        if not good:
            raise InputError("the Sun is too low in every frame with a whole disc", fs.folder)
        track = sun_track(np.array([m.t_unix_s for m in good]), obs.site.latitude_deg,
                          obs.site.longitude_deg, obs.site.eye_height_m)
        sky = {k: v[ok] for k, v in sky.items()}
    if any(m.saturated for m in good):
        notes.append("the disc is saturated in some frames: its edges may be bloomed")
    discs = [m.discs for m in good]
    geo = _geometry(good, discs, track, sky, fs, notes)
    colour = _colour(discs, sky, geo["scale"], geo["roll"], fs)
    off, err, disp = colour[4]["r"]
    check = dispersion_check([d["g"].x_px for d in discs], [d["g"].y_px for d in discs], off,
                             err, disp, sky["app_deg"][:, 1],
                             (sky["app_deg"][:, 1] - sky["app_deg"][:, 0]) * 3600.0,
                             centre_px=colour[3], radial=colour[1])
    doc = _document(ms, discs, track, sky, geo, colour, check, bands_doc,
                    _effective(bands, sky, obs), fs, obs)
    doc["notes"] = notes
    return doc
