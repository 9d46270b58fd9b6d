"""Inference of the near-surface lapse rate GAMMA from the measured observables.

For each trial GAMMA the forward model (:mod:`analyse.predict`) is traced once and
compared with every observable together:

* per channel, the upper limb's height above the sea horizon against time over the
  final minute (the offset between channels is contained in it);
* per channel, the last-light time. Like is compared with like: measurement and model
  both put last light where the visible flux falls below the model's detection fraction
  of the whole disc (:mod:`analyse.measure`); channels whose disc is too faint for that
  (only a noise limit measured, usually blue) are left out;

A common time offset ``delta`` (camera clock error, plus the time the eye height's and
the lens air's uncertainty shift the horizon by) enters every time-dependent residual.
It has a Gaussian prior of the combined width and is profiled out analytically (the
model is linear in ``delta`` near its best value). Likewise a constant height offset per
channel, with the lens colour offset's error as its prior width: the heights of a
channel share that offset's error; profiling a linear term with a Gaussian prior gives
the chi-square of its marginalisation (a fully correlated term in that channel's height
errors). So with a trustworthy clock the
absolute last-light times, which move about a second per K/km, carry their weight;
with a poor clock only the shapes and differences remain.

The chi-square profile is scanned over a wide range (strong inversion to strongly
superadiabatic) and refined around its minimum; the 1-sigma interval is where it rises
by 1 above the minimum. Several minima within 4 of the best, and profiles that stay
flat to the edge of the range, are reported as such and give no single value.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from analyse.disc import blur_fraction_above
from analyse.measure import CHANNELS
from analyse.predict import (
    DETECTION_FRACTION,
    Conditions,
    SunsetModel,
    build_model,
    build_models,
    horizon_elevation_deg,
    last_light_altitude_deg,
    limb_elevation_deg,
    visible_fraction,
)
from analyse.sun import sun_track

__all__ = ["SCAN_K_PER_KM", "Inference", "ModelCurves", "infer_lapse_rate", "model_curves",
           "regime"]

SCAN_K_PER_KM = np.array([-120.0, -95.0, -75.0, -58.0, -44.0, -32.0, -22.0, -13.0, -5.0, 1.0,
                          6.5, 12.0, 18.0, 26.0, 36.0, 50.0, 70.0])
EYE_HEIGHT_ERR_M = 0.5  # default uncertainty of the lens height over the sea (common practice, no source)
MODEL_FLOOR_ARCSEC = 0.4  # per 1-s bin: how well a single linear layer can follow a real
# profile's refraction near the horizon, and the image stages' systematics at the limb
# (0.1 px at 4 arcsec/px on simulated JPEG frames; common practice, no source)
LAST_LIGHT_FLOOR_S = 0.05  # systematic error of a last-light time beyond its fit (blur, the
# disc-flux scale: 0.2 s seen on simulated JPEG frames; common practice, no source)
PLATE_SCALE_REL_ERR = 0.005  # plate scale given by the user: 0.5 % (common practice, no source)
HEIGHT_WINDOW_S = 60.0  # limb heights used: the final minute before each channel's last light
HEIGHT_CHANNELS = ("r", "g")  # limb heights fitted: blue is faint and noisy at sunset
DEFAULT_BLUR_PX = 1.0  # edge blur when the limb fits gave none [px]
_BIN_S = 1.0  # limb heights are binned to 1 s medians (frame errors are correlated)
_SPAN_ARCMIN = 20.0
_RAYS = 32
DUCTING_K_PER_KM = -127.0  # ray curvature equals the Earth's (DESIGN.md)
MIRAGE_K_PER_KM = 34.0  # ray curvature reverses: inferior mirage (DESIGN.md)
DRY_ADIABATIC_K_PER_KM = 9.8  # g / c_p (textbook)


@dataclass(frozen=True)
class _Data:
    """The measured observables prepared for the fit."""

    t_bins: dict[str, np.ndarray]  # (B,) bin times [s]
    h_bins: dict[str, np.ndarray]  # (B,) limb height above the horizon [arcsec]
    h_err: dict[str, np.ndarray]
    last: dict[str, tuple[float, float]]  # measured last light (t, err) [s]
    disc_flux: dict[str, float]  # the whole disc's flux in the recording's units
    offset_err: dict[str, float] = field(default_factory=dict)  # colour offset, 1 sigma [arcsec]


@dataclass(frozen=True)
class _Trial:
    gamma: float
    chi2: float
    delta_s: float
    n_terms: int
    last_model: dict[str, float]
    detection_fraction: dict[str, float]
    flux_scale: dict[str, float]
    model: SunsetModel | None = field(default=None, repr=False)
    scale_correction: float = 0.0  # fitted relative plate-scale correction


@dataclass(frozen=True)
class Inference:
    """The fitted lapse rate, its profile and its honesty."""

    converged: bool
    status: str  # "constrained", "multiple minima", "unconstrained", "at the edge of the range"
    message: str
    lapse_rate_K_per_km: float  # NaN unless constrained
    lapse_rate_err_K_per_km: float
    interval_1sigma: tuple[float, float]
    interval_2sigma: tuple[float, float]
    gamma_grid: np.ndarray
    chi2: np.ndarray
    chi2_min: float
    dof: int
    clock_offset_s: float
    clock_prior_s: float
    regime: str
    best: _Trial = field(repr=False)
    notes: tuple[str, ...] = ()

    def as_json(self) -> dict:
        """Keys for result.json's "inference" block."""
        fin = np.isfinite(self.lapse_rate_K_per_km)
        num = lambda x, d=2: round(float(x), d) if np.isfinite(x) else None  # noqa: E731
        return {
            "lapse_rate_K_per_km": num(self.lapse_rate_K_per_km) if fin else None,
            "lapse_rate_err_K_per_km": num(self.lapse_rate_err_K_per_km) if fin else None,
            "status": self.status,
            "interval_1sigma_K_per_km": [num(v) for v in self.interval_1sigma],
            "interval_2sigma_K_per_km": [num(v) for v in self.interval_2sigma],
            "chi2_min": num(self.chi2_min, 3),
            "dof": self.dof,
            "clock_offset_s": num(self.clock_offset_s, 3),
            "clock_prior_s": num(self.clock_prior_s, 3),
            "regime": self.regime,
            "profile": {"lapse_rate_K_per_km": [num(g) for g in self.gamma_grid],
                        "chi2": [num(c, 3) for c in self.chi2]},
        }


def regime(gamma: float) -> str:
    """Plain words for a lapse rate [K/km] of the near-surface layer."""
    if not np.isfinite(gamma):
        return "not determined"
    if gamma <= DUCTING_K_PER_KM:
        return "strong inversion at the ducting threshold: superior mirages and ducts likely"
    if gamma < -20.0:
        return "strong inversion (warmer air above cool sea): superior-mirage effects possible"
    if gamma < 0.0:
        return "inversion (temperature rising with height)"
    if gamma <= DRY_ADIABATIC_K_PER_KM:
        return ("stable, cooling with height less steeply than the dry adiabat's "
                f"{DRY_ADIABATIC_K_PER_KM:g} K/km")
    if gamma < MIRAGE_K_PER_KM:
        return "superadiabatic (sea warmer than the air)"
    return "strongly superadiabatic: ray curvature reversed, inferior mirage likely"


def _trend(t: np.ndarray, y: np.ndarray):
    """A cubic in time through y (the limb's smooth descent) and the robust scatter about it."""
    if y.size < 6:
        return (lambda x: np.full(np.shape(x), np.nan)), float("nan")
    t0, span = t.mean(), max(np.ptp(t), 1e-9)
    coef = np.polyfit((t - t0) / span, y, 3)
    trend = lambda x: np.polyval(coef, (np.asarray(x) - t0) / span)  # noqa: E731
    resid = y - trend(t)
    return trend, float(1.4826 * np.median(np.abs(resid - np.median(resid))))


def _bin_heights(t, h, per_frame):
    """1-s bins: the trend at the bin's mean time plus the median residual in it.

    (A plain median of a steep ramp picks the middle frames and averages no noise.)
    """
    trend, scatter = _trend(t, h)
    if not np.isfinite(scatter):
        return np.zeros(0), np.zeros(0), np.zeros(0), scatter
    edges = np.arange(t.min(), t.max() + _BIN_S, _BIN_S)
    which = np.digitize(t, edges)
    resid = h - trend(t)
    tb, hb, eb = [], [], []
    for k in np.unique(which):
        s = which == k
        tm = float(np.mean(t[s]))
        tb.append(tm)
        hb.append(float(trend(tm) + np.median(resid[s])))
        eb.append(float(1.2533 * np.median(per_frame[s]) / np.sqrt(s.sum())))
    return np.array(tb), np.array(hb), np.array(eb), scatter


def _prepare(measurement) -> _Data:
    ob = measurement.observables
    tab = measurement.table
    scale = ob.plate_scale_arcsec_per_px
    sd = measurement.semidiameter_arcsec
    t_bins, h_bins, h_err, last, blur, off_err = {}, {}, {}, {}, {}, {}
    for c in CHANNELS:
        ll = ob.last[c]
        if not np.isfinite(ll.t_unix_s) or not ll.method.startswith("fading fit to"):
            continue  # a noise-limited last light depends on the camera, not the air
        last[c] = (ll.t_unix_s, float(np.hypot(ll.err_s, LAST_LIGHT_FLOOR_S)))
        sig = tab.edge_sigma_px[c][np.isfinite(tab.edge_sigma_px[c])]
        blur[c] = float(np.median(sig) if sig.size else DEFAULT_BLUR_PX) * scale
        h = (tab.apex_height_px[c] + ob.colour_offset_dy_px.get(c, 0.0)) * scale
        # Apex heights under three blurs are set more by the blur than by the limb.
        base = (tab.visible[c] & tab.horizon_found & np.isfinite(h) & (h > 3.0 * blur[c])
                & (tab.t_unix_s <= ll.t_unix_s) & (tab.t_unix_s >= ll.t_unix_s - HEIGHT_WINDOW_S))
        ok = base if c in HEIGHT_CHANNELS else np.zeros_like(base)
        t, hh = tab.t_unix_s[ok], h[ok]
        err = tab.apex_height_err_px[c][ok] * scale
        _, scatter = _trend(t, hh)
        per_frame = np.maximum(np.nan_to_num(err, nan=0.0), np.nan_to_num(scatter, nan=0.0))
        per_frame = np.maximum(per_frame, 0.05 * scale)  # floor: 0.05 px (common practice, no source)
        t_bins[c], h_bins[c], h_err[c], _ = _bin_heights(t, hh, per_frame)
        h_err[c] = np.hypot(h_err[c], MODEL_FLOOR_ARCSEC)
        off_err[c] = float(ob.colour_offset_dy_err_px.get(c, 0.0)) * scale
    return _Data(t_bins, h_bins, h_err, last, dict(ob.disc_flux), off_err)


class _SunInterp:
    """True altitude of the Sun's centre against time and back, from one dense track."""

    def __init__(self, lat, lon, height_m, t0, t1):
        self.t = np.arange(t0, t1, 1.0)
        tr = sun_track(self.t, lat, lon, height_m)
        self.a = tr.altitude_deg
        self.rate = tr.altitude_rate_deg_per_s
        self.sd = float(np.median(tr.semidiameter_arcsec))
        self.azimuth = float(np.median(tr.azimuth_deg))

    def altitude(self, t):
        return np.interp(t, self.t, self.a)

    def time_of(self, a):
        return np.interp(-np.asarray(a), -self.a, self.t)

    def rate_at(self, t):
        return np.interp(t, self.t, self.rate)


@dataclass(frozen=True)
class _Prediction:
    """The model's values of every fitted quantity for one GAMMA (a flat vector)."""

    values: np.ndarray  # model heights [arcsec] of every bin, then last-light times [s]
    rate: np.ndarray  # d(value)/dt of each: -height rate for heights, 1 for times
    last: dict[str, float]
    detection_fraction: dict[str, float]
    flux_scale: dict[str, float]


def _predict(model: SunsetModel, data: _Data, sun: _SunInterp) -> _Prediction:
    """Model heights at the measured bin times and model last-light times.

    Last light is compared like with like: the measurement found it where the visible
    flux fell below the model's detection fraction of the disc (channels for which it
    could only find the noise limit are left out of the fit in :func:`_prepare`).
    """
    e_hor = horizon_elevation_deg(model)
    sd_deg = sun.sd / 3600.0
    vals, rates, last, det, scale = [], [], {}, {}, {}
    for c in data.last:
        t = data.t_bins[c]
        h0 = (limb_elevation_deg(model, c, sun.altitude(t) + sd_deg, extrapolate=True)
              - e_hor) * 3600.0
        h1 = (limb_elevation_deg(model, c, sun.altitude(t + 0.5) + sd_deg, extrapolate=True)
              - e_hor) * 3600.0
        vals.append(h0)
        rates.append((h1 - h0) / 0.5)
    for c in data.last:
        det[c], scale[c] = DETECTION_FRACTION, data.disc_flux.get(c, np.nan)
        a_last = last_light_altitude_deg(model, c, sun.sd, DETECTION_FRACTION)
        last[c] = float(sun.time_of(a_last))
        vals.append(np.array([last[c]]))
        rates.append(np.array([-1.0]))
    return _Prediction(np.concatenate(vals), np.concatenate(rates), last, det, scale)


def _observed(data: _Data) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Measured values in the order of :func:`_predict`, their errors, and a height mask."""
    y = [data.h_bins[c] for c in data.last] + [np.array([data.last[c][0]]) for c in data.last]
    e = [data.h_err[c] for c in data.last] + [np.array([data.last[c][1]]) for c in data.last]
    is_h = [np.ones(data.h_bins[c].size, bool) for c in data.last] + [
        np.zeros(1, bool) for _ in data.last]
    return np.concatenate(y), np.concatenate(e), np.concatenate(is_h)


def _offset_terms(data: _Data) -> tuple[np.ndarray, np.ndarray] | None:
    """Columns (n, K) and prior widths (K,) [arcsec] of the channels' constant height
    offsets, in the order of :func:`_observed`; None when no channel has a finite,
    positive colour-offset error."""
    sizes = [data.h_bins[c].size for c in data.last] + [1] * len(data.last)
    cols, prior = [], []
    for i, c in enumerate(data.last):
        e = data.offset_err.get(c, 0.0)
        if np.isfinite(e) and e > 0 and sizes[i]:
            col = np.zeros(sum(sizes))
            col[sum(sizes[:i]):sum(sizes[:i + 1])] = 1.0
            cols.append(col)
            prior.append(e)
    return (np.stack(cols, axis=1), np.array(prior)) if cols else None


def _chi2(pred_values, pred_rate, y, err, is_h, clock_prior_s, scale_prior, offsets=None):
    """Chi-square with the clock offset and plate-scale error profiled out (linear, priors).

    Model: y = m(t - delta) * (1 + eps on heights) ~ m - rate*delta + eps*m*is_h, plus
    ``offsets`` (columns, prior widths; :func:`_offset_terms`): per channel a constant
    on its heights.
    """
    r = y - pred_values
    j = np.vstack([-pred_rate, np.where(is_h, pred_values, 0.0)]).T
    sig = np.array([clock_prior_s, scale_prior])
    if offsets is not None:
        j, sig = np.hstack([j, offsets[0]]), np.concatenate([sig, offsets[1]])
    w = 1.0 / err**2
    a = j.T @ (j * w[:, None]) + np.diag(1.0 / sig**2)
    b = j.T @ (w * r)
    p = np.linalg.solve(a, b)
    resid = r - j @ p
    chi2 = float(np.sum(resid**2 * w) + np.sum((p / sig) ** 2))
    return chi2, float(p[0]), float(p[1])


def _clock_prior_s(obs, sun: _SunInterp, t_ref: float) -> float:
    """Width of the common time offset: clock, plus the eye height's effect on the dip.

    The dip changes by 1.76'/(2 sqrt(h)) per metre of eye height (derivative of the
    nautical almanac's dip formula); the Sun needs that much altitude change's worth of
    time to make it up.
    """
    h = max(obs.site.eye_height_m, 0.5)
    err_h = getattr(obs.site, "eye_height_err_m", None) or EYE_HEIGHT_ERR_M
    ddip_deg = 1.76 / (2.0 * np.sqrt(h)) * err_h / 60.0
    t_eye = ddip_deg / max(abs(sun.rate_at(t_ref)), 1e-6)
    return float(np.hypot(obs.camera.clock_uncertainty_s, t_eye))


def _scale_prior(measurement) -> float:
    """Relative uncertainty of the plate scale, by where it came from."""
    ob = measurement.observables
    if ob.plate_scale_source.startswith("disc width"):
        g = ob.geometry
        return float(max(g.rx_err_px / g.rx_px, 1e-3)) if np.isfinite(g.rx_px) else 0.01
    calib = getattr(measurement, "calibration", None) or {}
    if ob.plate_scale_source == "calibration" and calib.get("plate_scale_err_arcsec_per_px"):
        return float(calib["plate_scale_err_arcsec_per_px"] / ob.plate_scale_arcsec_per_px)
    return PLATE_SCALE_REL_ERR


def _conditions(obs) -> Conditions:
    t_C, p_hPa, rh = obs.air_at_lens()
    return Conditions(obs.site.latitude_deg, obs.site.longitude_deg, obs.site.eye_height_m,
                      t_C, p_hPa, rh, obs.model.layer_top_m)


def _crossings(g: np.ndarray, chi: np.ndarray, level: float) -> tuple[float, float]:
    """Lowest and highest GAMMA where the profile stays below ``level``."""
    below = g[chi <= level]
    return (float(below[0]), float(below[-1])) if below.size else (np.nan, np.nan)


class _Emulator:
    """Predictions at traced GAMMAs, splined across GAMMA for a fine chi-square profile.

    Tracing an atmosphere costs a few tenths of a second; the predicted observables are
    smooth in GAMMA, so a cubic spline through the traced ones gives the profile on a
    fine grid, and the minimum and its interval are then traced exactly.
    """

    def __init__(self, make_prediction) -> None:
        self.make = make_prediction
        self.preds: dict[float, _Prediction] = {}

    def add(self, gammas, progress: bool) -> None:
        from tqdm import tqdm

        todo = [float(g) for g in gammas if float(g) not in self.preds]
        if not todo:
            return
        with tqdm(total=len(todo), disable=not progress or None, desc="fitting lapse rate",
                  unit="atmosphere", leave=False) as bar:
            self.preds.update(self.make(todo))  # traced together: one integration
            bar.update(len(todo))

    def profile(self, fine, y, err, is_h, clock_prior, scale_prior, offsets=None):
        from scipy.interpolate import CubicSpline

        g = np.array(sorted(self.preds))
        vals = np.stack([self.preds[x].values for x in g])
        rates = np.stack([self.preds[x].rate for x in g])
        v_f, r_f = CubicSpline(g, vals, axis=0)(fine), CubicSpline(g, rates, axis=0)(fine)
        return np.array([_chi2(v, r, y, err, is_h, clock_prior, scale_prior, offsets)[0]
                         for v, r in zip(v_f, r_f)])


def infer_lapse_rate(measurement, obs, *, bands=None, progress: bool = False) -> Inference:
    """Fit GAMMA to a sunset's measured observables; see the module docstring."""
    if not np.isfinite(measurement.observables.plate_scale_arcsec_per_px):
        return _failed("no plate scale: limb heights cannot be turned into angles")
    data = _prepare(measurement)
    if not {"r", "g"} <= set(data.last):
        return _failed("red or green last light not measured: nothing to fit")
    t = measurement.table.t_unix_s
    sun = _SunInterp(obs.site.latitude_deg, obs.site.longitude_deg, obs.site.eye_height_m,
                     float(t.min()) - 600.0, float(t.max()) + 900.0)
    cond = _conditions(obs)
    clock_prior = _clock_prior_s(obs, sun, data.last["g"][0])
    scale_prior = _scale_prior(measurement)
    y, err, is_h = _observed(data)
    offsets = _offset_terms(data)

    def make(gammas: list[float]) -> dict[float, _Prediction]:
        models = build_models(cond, gammas, bands=bands, azimuth_deg=sun.azimuth, rays=_RAYS,
                              span_arcmin=_SPAN_ARCMIN)
        return {g: _predict(m, data, sun) for g, m in zip(gammas, models)}

    emu = _Emulator(make)
    emu.add(SCAN_K_PER_KM, progress)
    fine = np.linspace(SCAN_K_PER_KM[0], SCAN_K_PER_KM[-1], 3801)  # 0.05 K/km steps
    for _ in range(3):  # trace the minimum and its 1-sigma ends exactly, re-spline
        chi = emu.profile(fine, y, err, is_h, clock_prior, scale_prior, offsets)
        k = int(np.argmin(chi))
        lo, hi = _crossings(fine, chi, chi[k] + max(chi[k] / max(y.size - 1, 1), 1.0))
        new = [fine[k]] + [x for x in (lo, hi) if np.isfinite(x)]
        gaps = np.min(np.abs(np.array(sorted(emu.preds))[:, None] - np.array(new)[None, :]),
                      axis=0)
        if np.all(gaps < 0.05):
            break
        emu.add([round(float(x), 3) for x, gap in zip(new, gaps) if gap >= 0.05], progress)
    chi = emu.profile(fine, y, err, is_h, clock_prior, scale_prior, offsets)
    k = int(np.argmin(chi))
    best_g = float(fine[k])
    model = build_model(cond, best_g, bands=bands, azimuth_deg=sun.azimuth, rays=_RAYS,
                        span_arcmin=_SPAN_ARCMIN)
    pred = _predict(model, data, sun)
    chi2, delta, eps = _chi2(pred.values, pred.rate, y, err, is_h, clock_prior, scale_prior,
                             offsets)
    best = _Trial(best_g, chi2, delta, int(y.size), pred.last, pred.detection_fraction,
                  pred.flux_scale, model, eps)
    dof = max(int(y.size) - 1, 1)
    notes = [f"fitted {int(np.count_nonzero(is_h))} limb-height bins and "
             f"{int(np.count_nonzero(~is_h))} last-light times; common time offset "
             f"{delta:+.2f} s (prior {clock_prior:.2f} s), plate-scale correction "
             f"{100 * eps:+.2f} % (prior {100 * scale_prior:.2f} %)"]
    return _summarise(fine, chi, best, dof, clock_prior, notes)


def _failed(message: str) -> Inference:
    nan2 = (np.nan, np.nan)
    dummy = _Trial(np.nan, np.nan, np.nan, 0, {}, {}, {}, None)
    return Inference(False, "not fitted", message, np.nan, np.nan, nan2, nan2, np.zeros(0),
                     np.zeros(0), np.nan, 0, np.nan, np.nan, regime(np.nan), dummy, (message,))


def _summarise(g, chi, best: _Trial, dof: int, prior: float, notes: list[str]) -> Inference:
    chi_min = float(chi.min())
    s2 = max(chi_min / dof, 1.0)
    if s2 > 1.5:
        notes.append(f"the best fit has chi-square {chi_min:.1f} for {dof} degrees of freedom: "
                     f"uncertainties are scaled by {np.sqrt(s2):.2f} (the model or the error "
                     "estimates miss something)")
    i1 = _crossings(g, chi, chi_min + s2)
    i2 = _crossings(g, chi, chi_min + 4.0 * s2)
    interior = np.flatnonzero((chi[1:-1] < chi[:-2]) & (chi[1:-1] < chi[2:])) + 1
    k = int(np.argmin(chi))
    others = [int(i) for i in interior if chi[i] < chi_min + 4.0 * s2 and abs(g[i] - g[k]) > 3.0
              and np.max(chi[min(i, k):max(i, k) + 1]) > chi[i] + s2]
    status, message, value, err = "constrained", "", best.gamma, 0.5 * (i1[1] - i1[0])
    if np.ptp(chi) < s2:
        status, message = "unconstrained", ("the data do not constrain the lapse rate: the "
                                             "chi-square varies by less than 1 over "
                                             f"{g[0]:g}..{g[-1]:g} K/km")
    elif others:
        status = "multiple minima"
        message = "several lapse rates fit about equally well: " + ", ".join(
            f"{g[i]:.1f} K/km" for i in [k] + others)
    elif i2[0] <= g[0] + 1e-9 or i2[1] >= g[-1] - 1e-9:
        status = "at the edge of the range"
        message = (f"the 2-sigma interval {i2[0]:.0f}..{i2[1]:.0f} K/km reaches the edge of the "
                   "range scanned: only a bound is known")
    if status != "constrained":
        value, err = np.nan, np.nan
        notes.append(message)
    return Inference(True, status, message, float(value), float(err), i1, i2, g, chi, chi_min,
                     dof, best.delta_s, prior, regime(best.gamma if status == "constrained"
                                                      else np.nan), best, tuple(notes))


@dataclass(frozen=True)
class ModelCurves:
    """The best-fitting model on the recording's time axis, for figures.

    Times are the camera's (the fitted clock offset applied); heights are in pixels of
    the recording (the fitted plate-scale correction applied); fluxes in the recording's
    linear units (the fitted flux scale applied).
    """

    t_unix_s: np.ndarray  # (T,)
    apex_height_px: dict[str, np.ndarray]  # (T,) per channel, NaN below the horizon
    flux: dict[str, np.ndarray]  # (T,) per channel
    last_light_unix_s: dict[str, float]  # model last light on the camera's clock


def model_curves(inference: Inference, measurement, obs, *, step_s: float = 0.1) -> ModelCurves | None:
    """Sample the best model over the recording for plotting (None if nothing was fitted)."""
    best = inference.best
    if best.model is None:
        return None
    model = best.model
    t = measurement.table.t_unix_s
    grid = np.arange(float(t.min()), float(t.max()) + step_s, step_s)
    sun = _SunInterp(obs.site.latitude_deg, obs.site.longitude_deg, obs.site.eye_height_m,
                     float(t.min()) - 600.0, float(t.max()) + 900.0)
    e_hor = float(np.mean(model.curve.horizon.apparent_elevation_deg[model.channels["g"].node_index]))
    a_c = sun.altitude(grid - best.delta_s)
    scale = measurement.observables.plate_scale_arcsec_per_px
    heights, fluxes = {}, {}
    sig = measurement.table.edge_sigma_px
    for c in model.channels:
        h = (limb_elevation_deg(model, c, a_c + sun.sd / 3600.0) - e_hor) * 3600.0
        heights[c] = h * (1.0 + best.scale_correction) / scale
        s = best.flux_scale.get(c, np.nan)
        blur_px = np.nanmedian(sig[c]) if np.any(np.isfinite(sig[c])) else DEFAULT_BLUR_PX
        fluxes[c] = s * visible_fraction(model, c, a_c, sun.sd) * blur_fraction_above(
            np.nan_to_num(np.maximum(h, 0.0)), blur_px * scale)
    last = {c: v + best.delta_s for c, v in best.last_model.items()}
    return ModelCurves(grid, heights, fluxes, last)
