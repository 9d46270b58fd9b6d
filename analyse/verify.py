"""Checks of a claimed green-flash sighting against the physics of the setting sun.

Each check answers one question with evidence and a plain-language reason, and is
``passed`` (True), failed (False) or undecidable (None). A failed check is
``confident`` when its evidence is beyond its stated margin. The verdict:

* ``inconsistent`` when any check fails with confidence;
* ``inconclusive`` when a check needed for a positive answer cannot decide (the reason
  says which data would decide it);
* ``consistent`` otherwise.

The physically possible ranges come from the ray tracer over plausible atmospheres:
lapse rates from a strong inversion near the ducting threshold to strongly
superadiabatic (``GAMMA_RANGE_K_PER_KM``), detection levels from 1e-5 to 1e-3 of the
whole disc.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analyse.disc import blur_fraction_above
from analyse.infer import _conditions
from analyse.measure import CHANNELS
from analyse.predict import (
    build_models,
    last_light_altitude_deg,
    light_by_height,
    limb_elevation_deg,
)
from analyse.sun import sun_track

__all__ = ["Check", "Verdict", "GAMMA_RANGE_K_PER_KM", "verify_measurement"]

GAMMA_RANGE_K_PER_KM = (-110.0, 60.0)  # plausible near-surface lapse rates (DESIGN.md regimes)
DETECTION_RANGE = (1e-5, 1e-3)  # plausible detection levels, fraction of the disc's flux
SIGNIFICANCE = 3.0  # a colour offset or duration counts when beyond 3 sigma
APEX_TRUE_FACTOR = 1.5  # true / apparent height of the Sun's top above the horizon, at most
# (refraction compresses the disc near the horizon to about 0.8 of its size; DESIGN.md)
HORIZON_MARGIN_DEG = 1.0 / 60.0  # margin on the horizon window: the apex's measurement and
# the semidiameter's edge (common practice, no source)
ORDER_NOISE_FLOOR_PX = 0.3  # least step noise of an apex height: shake, compression (common
# practice, no source)
ORDER_JUMP_SIGMA = 4.0  # a step this many noise sigmas off the descent is a jump
CAST_FACTOR = 2.5  # disc G/R ratio above the model's by this factor: a green cast (white
# balance moves ratios by up to about x1.5-2; common practice, no source)


@dataclass(frozen=True)
class Check:
    name: str
    passed: bool | None
    confident: bool
    detail: str  # the evidence, with numbers
    reason: str  # plain language

    def __post_init__(self) -> None:
        # numpy comparisons give numpy booleans: "passed is False" and JSON need bool
        if self.passed is not None:
            object.__setattr__(self, "passed", bool(self.passed))
        object.__setattr__(self, "confident", bool(self.confident))

    def as_json(self) -> dict:
        return {"name": self.name, "passed": self.passed, "confident": self.confident,
                "detail": self.detail, "reason": self.reason}


@dataclass(frozen=True)
class Verdict:
    verdict: str
    checks: tuple[Check, ...]
    summary: str

    def as_json(self) -> dict:
        return {"schema": 1, "verdict": self.verdict, "summary": self.summary,
                "checks": [c.as_json() for c in self.checks]}


@dataclass(frozen=True)
class _Envelope:
    """Model extremes over plausible atmospheres and detection levels."""

    rg_offset_arcsec: tuple[float, float]
    green_duration_s: tuple[float, float]
    horizon_true_altitude_deg: tuple[float, float]
    gr_ratio: float  # model's G/R flux ratio of the disc at the horizon (standard air)
    models: tuple = ()


def _envelope(obs, sun_sd_arcsec: float, azimuth_deg: float, lat, lon, h, t_ref) -> _Envelope:
    cond = _conditions(obs)
    models = build_models(cond, [GAMMA_RANGE_K_PER_KM[0], 6.5, GAMMA_RANGE_K_PER_KM[1]],
                          azimuth_deg=azimuth_deg, rays=32, span_arcmin=30.0)  # one trace
    sd = sun_sd_arcsec / 3600.0
    offs, durs, hors = [], [], []
    rate = abs(float(sun_track(t_ref, lat, lon, h).altitude_rate_deg_per_s[0]))
    for m in models:
        hors.extend(m.curve.horizon.true_altitude_deg)
        for f in DETECTION_RANGE:
            a = {c: last_light_altitude_deg(m, c, sun_sd_arcsec, f) for c in ("r", "g")}
            durs.append((a["r"] - a["g"]) / rate)
        # green-above-red offset over the final minute before red last light
        a_r = last_light_altitude_deg(m, "r", sun_sd_arcsec, DETECTION_RANGE[0])
        top = a_r + sd + rate * np.linspace(0.1, 60.0, 31)
        d = (limb_elevation_deg(m, "g", top) - limb_elevation_deg(m, "r", top)) * 3600.0
        offs.extend(d[np.isfinite(d)])
    # Relative band fluxes through the horizon ray (sensitivity x spectrum x transmission)
    gr = _band_flux(models[1], "g") / _band_flux(models[1], "r")
    return _Envelope((min(offs), max(offs)), (min(durs), max(durs)),
                     (min(hors), max(hors)), float(gr), tuple(models))


def _band_flux(model, c: str) -> float:
    """Unnormalised flux of a channel through the horizon ray (for ratios only)."""
    from calibration.bands import solar_spectrum_relative

    ch = model.channels[c]
    lam = ch.band.wavelength_nm
    m = model.curve.horizon.airmass[ch.node_index]
    return float(np.sum(ch.band.sensitivity * solar_spectrum_relative(lam) * np.exp(-ch.tau * m)))


def _check_sun_at_horizon(meas, obs, env: _Envelope, track) -> Check:
    """When the Sun is last seen, its upper limb's true altitude must be at the sea horizon.

    The frame that matters is the last one showing the Sun (a clip may start with the
    Sun well up). Its top may stand ``h`` above the horizon line; near the horizon a true
    altitude difference appears compressed by refraction, so the true top lies between
    the horizon's true altitude plus ``h`` and plus ``APEX_TRUE_FACTOR h``, within the
    plausible atmospheres' horizons and the clock's uncertainty. Without a plate scale,
    ``h`` is unknown and the whole disc's height is allowed.
    """
    tab = meas.table
    sd = meas.semidiameter_arcsec / 3600.0
    top = track.altitude_deg + sd
    rate = np.abs(track.altitude_rate_deg_per_s)
    seen = np.flatnonzero(np.any(np.stack([tab.visible[c] for c in CHANNELS]), axis=0))
    mid_hor = 0.5 * sum(env.horizon_true_altitude_deg)
    k = int(seen[-1]) if seen.size else int(np.argmin(np.abs(top - mid_hor)))
    scale = meas.observables.plate_scale_arcsec_per_px
    h_px = np.array([tab.apex_height_px[c][k] for c in CHANNELS], dtype=float)
    h_deg = (float(np.nanmax(np.maximum(h_px, 0.0))) * scale / 3600.0
             if np.isfinite(scale) and np.any(np.isfinite(h_px)) else float("nan"))
    clock = float(rate[k]) * (3.0 * obs.camera.clock_uncertainty_s + 1.0)
    lo = env.horizon_true_altitude_deg[0] + (h_deg if np.isfinite(h_deg) else 0.0)
    hi = env.horizon_true_altitude_deg[1] + (APEX_TRUE_FACTOR * h_deg if np.isfinite(h_deg)
                                             else 2.0 * sd)
    lo, hi = lo - clock - HORIZON_MARGIN_DEG, hi + clock + HORIZON_MARGIN_DEG
    a = float(top[k])
    which = "when the Sun is last seen" if seen.size else "nearest the horizon (Sun not seen)"
    detail = (f"upper limb's true altitude {60 * a:+.1f}' {which} "
              f"({tab.sources[k]}); with its top "
              f"{'unknown' if not np.isfinite(h_deg) else f'{3600 * h_deg:.0f} arcsec'} above "
              f"the sea horizon it must lie between {60 * lo:+.1f}' and {60 * hi:+.1f}' "
              f"(plausible atmospheres, clock +-{obs.camera.clock_uncertainty_s:g} s)")
    if lo <= a <= hi:
        return Check("sun-at-horizon", True, True, detail,
                     "At the stated time and place the Sun was where its top could sit on the "
                     "sea horizon.")
    return Check("sun-at-horizon", False, True, detail,
                 f"At the stated time and place the Sun was not at the horizon "
                 f"({_nearest_setting(obs, float(track.t_unix_s[k]), sd, 0.5 * (lo + hi))}): "
                 "the site, the date or the clock is wrong.")


def _nearest_setting(obs, t_unix_s: float, sd_deg: float, top_deg: float) -> str:
    """When, within a day of a time, the Sun's top is nearest a true altitude, in words."""
    site = obs.site
    t = t_unix_s + np.arange(-14.0 * 3600.0, 14.0 * 3600.0 + 1.0, 120.0)
    top = sun_track(t, site.latitude_deg, site.longitude_deg, site.eye_height_m).altitude_deg
    cross = np.flatnonzero(np.diff(np.sign(top + sd_deg - top_deg)) != 0)
    if cross.size == 0:
        return "on that day its top never comes to the horizon there"
    dt = float(t[cross[np.argmin(np.abs(t[cross] - t_unix_s))]] - t_unix_s) / 3600.0
    return f"its top stood at the horizon about {abs(dt):.1f} h {'later' if dt > 0 else 'earlier'}"


def _check_direction(meas, obs, track) -> Check | None:
    az = obs.camera.azimuth_deg
    if az is None:
        return None
    fs = meas.frameset
    scale = meas.observables.plate_scale_arcsec_per_px
    half_fov = 0.5 * fs.width * scale / 3600.0 if np.isfinite(scale) else 30.0
    d = float((np.median(track.azimuth_deg) - az + 180.0) % 360.0 - 180.0)
    ok = abs(d) <= half_fov + 2.0
    detail = f"Sun's azimuth {np.median(track.azimuth_deg):.1f} deg, camera points to {az:.1f} deg"
    return Check("sun-direction", ok, True, detail,
                 "The camera pointed at the setting Sun." if ok else
                 f"The Sun was {abs(d):.0f} deg away from where the camera pointed.")


def _check_green_segment(meas) -> Check:
    ob, tab = meas.observables, meas.table
    single = len(tab) == 1
    if not single and np.isfinite(ob.green_duration_s):
        sig = ob.green_duration_s / max(ob.green_duration_err_s, 1e-3)
        ok = sig >= SIGNIFICANCE
        detail = (f"green outlasted red by {ob.green_duration_s:.2f} +- "
                  f"{ob.green_duration_err_s:.2f} s ({sig:.1f} sigma)")
        return Check("green-segment", ok, ok or sig < 0, detail,
                     "A green limb stayed above the horizon after the red one had set." if ok
                     else "No significant green segment after red last light.")
    # Single photo (or no last light): green limb above the red one in the same frames,
    # where neither is clipped (a saturated disc blooms, red most).
    dy = ob.colour_offset_dy_px
    g = tab.apex_height_px["g"] + dy.get("g", 0.0)
    r = tab.apex_height_px["r"] + dy.get("r", 0.0)
    e = np.hypot(tab.apex_height_err_px["g"], tab.apex_height_err_px["r"])
    only_green = _clean(tab, "g") & ~tab.visible["r"]
    diff = np.where(_clean(tab, "r", "g"), (g - r) / np.where(e > 0, e, np.nan), np.nan)
    if np.any(only_green):
        return Check("green-segment", True, True, f"{int(only_green.sum())} frame(s) show "
                     "green above the horizon with no red",
                     "Green light remained after the red limb set.")
    if not np.any(np.isfinite(diff)):
        return Check("green-segment", None, False,
                     "no unsaturated frame with both limbs measured",
                     "The photo does not show the Sun's top clearly enough to decide; a sharper, "
                     "unsaturated frame would.")
    best = float(np.nanmax(diff))
    ok = best >= SIGNIFICANCE
    return Check("green-segment", ok, ok or best < -SIGNIFICANCE,
                 f"green limb above red by {best:.1f} sigma at most",
                 "The green limb stands above the red one." if ok else
                 "The green limb does not stand out above the red one.")


def _clean(tab, *channels: str) -> np.ndarray:
    """Frames where each channel is visible and its disc not clipped."""
    out = np.ones(len(tab), bool)
    for c in channels:
        out &= tab.visible[c] & ~tab.saturated[c]
    return out


def _frame_offset(meas) -> tuple[float, float, int]:
    """Green limb above red [arcsec] in the frames showing both, lens offset corrected."""
    ob, tab = meas.observables, meas.table
    scale = ob.plate_scale_arcsec_per_px
    dy = ob.colour_offset_dy_px
    d = (tab.apex_height_px["g"] + dy.get("g", 0.0)) - (tab.apex_height_px["r"] + dy.get("r", 0.0))
    e = np.hypot(tab.apex_height_err_px["g"], tab.apex_height_err_px["r"])
    use = _clean(tab, "r", "g") & np.isfinite(d) & np.isfinite(e)
    if not np.isfinite(scale) or not np.any(use):
        return float("nan"), float("nan"), 0
    n = int(np.count_nonzero(use))
    err = float(np.median(e[use])) * 1.2533 / np.sqrt(n)  # standard error of a median
    return float(np.median(d[use])) * scale, err * scale, n


def _within(value, err, lo, hi) -> tuple[bool, bool]:
    """(inside the range within 3 sigma, outside it beyond 3 sigma)."""
    inside = lo - SIGNIFICANCE * err <= value <= hi + SIGNIFICANCE * err
    return inside, not inside


def _check_size(meas, env: _Envelope) -> list[Check]:
    ob = meas.observables
    out = []
    lo, hi = env.rg_offset_arcsec
    offset, offset_err, source = ob.rg_offset_arcsec, ob.rg_offset_err_arcsec, ""
    if not np.isfinite(offset):  # a single photo, or no red last light: the frames' own
        offset, offset_err, n = _frame_offset(meas)
        source = f" (median of {n} unsaturated frame(s) with both limbs)" if n else ""
    if np.isfinite(offset):
        err = max(offset_err, 0.5 * ob.plate_scale_arcsec_per_px)
        ok, bad = _within(offset, err, lo, hi)
        out.append(Check("offset-size", ok, bad,
                         f"green above red {offset:.1f} +- {err:.1f} arcsec{source}; the ray "
                         f"tracer allows {lo:.1f} to {hi:.1f} arcsec here",
                         "The green limb's height above the red one is what the air can make."
                         if ok else "The green limb sits further above the red one than any "
                         "plausible "
                         "air can bend light apart." if offset > hi else
                         "The green limb sits lower against the red one than the air's "
                         "dispersion puts it."))
    else:
        out.append(Check("offset-size", None, False, "offset not measured",
                         "The green-above-red offset could not be measured (a plate scale and "
                         "unsaturated frames with both limbs would decide it)."))
    dlo, dhi = env.green_duration_s
    if np.isfinite(ob.green_duration_s) and len(meas.table) > 1:
        err = max(ob.green_duration_err_s, 0.02)
        ok, bad = _within(ob.green_duration_s, err, min(dlo, 0.0), dhi)
        out.append(Check("duration-size", ok, bad,
                         f"green segment {ob.green_duration_s:.2f} +- {err:.2f} s; the ray tracer "
                         f"allows up to {dhi:.2f} s here",
                         "The green segment lasted as long as the physics allows." if ok else
                         "The green segment lasted longer than any plausible atmosphere allows "
                         "(a mirage outside the model, or a timing problem)."))
    return out


def _check_fringing(meas) -> Check:
    """Lateral colour shows on every edge; dispersion only vertically on the upper limb.

    The rim is the lens's fringe when the lens's vertical shift, measured on the horizon
    (or by a calibration) at the rim's own rows, accounts for most of it. A sideways
    colour shift at the apex shows lateral colour too, but once the vertical part is
    measured and corrected it says nothing more; it decides only when the vertical
    shift could not be measured.
    """
    ob, tab = meas.observables, meas.table
    both = _clean(tab, "r", "g")
    dx = (tab.apex_x_px["g"] - tab.apex_x_px["r"])[both]
    dx = dx[np.isfinite(dx)]
    raw = (tab.apex_height_px["g"] - tab.apex_height_px["r"])[both]
    raw = raw[np.isfinite(raw)]
    # The lens displaces red down by this much relative to green (y down): red reads lower.
    lens_shift = ob.colour_offset_dy_px.get("r", 0.0) - ob.colour_offset_dy_px.get("g", 0.0)
    if raw.size == 0:
        return Check("lens-fringing", None, False,
                     "no unsaturated frame with both limbs measured",
                     "Colour edges could not be compared.")
    med_raw = float(np.median(raw))
    med_dx = float(np.median(dx)) if dx.size else 0.0
    corrected = med_raw - lens_shift
    detail = (f"raw green-above-red at the limb {med_raw:+.2f} px; the horizon edge shows the "
              f"lens shifting red down by {lens_shift:+.2f} px; sideways shift at the apex "
              f"{med_dx:+.2f} px (source: {ob.colour_offset_source})")
    lens_explains = abs(lens_shift) >= 0.5 and abs(corrected) < 0.5 * abs(med_raw)
    unmeasured = ob.colour_offset_source.startswith("none")
    sideways = unmeasured and abs(med_dx) >= 1.0 and abs(med_dx) >= 0.5 * abs(med_raw)
    if lens_explains or sideways:
        return Check("lens-fringing", False, True, detail,
                     "The green rim is the lens's own colour fringe: the same colour shift "
                     "appears on other edges (the horizon, or sideways), which atmospheric "
                     "dispersion cannot do.")
    return Check("lens-fringing", True, True, detail,
                 "The colour offset is vertical and only on the Sun's upper limb, as dispersion "
                 "makes it; the lens's own fringe is corrected.")


def _check_artefacts(meas, env: _Envelope) -> list[Check]:
    fs, tab, ob = meas.frameset, meas.table, meas.observables
    out = []
    chroma = fs.chroma_subsampling
    if chroma in ("4:2:0", "4:2:2", "4:1:1"):
        colour_px = 2.0
        off_px = ob.rg_offset_arcsec / ob.plate_scale_arcsec_per_px if np.isfinite(
            ob.rg_offset_arcsec) else np.nan
        decides = np.isfinite(off_px) and off_px >= colour_px
        out.append(Check("chroma-subsampling", True if decides else None, False,
                         f"colour stored at {chroma}: one colour sample per {colour_px:g} px; "
                         f"measured offset {off_px:.2f} px",
                         "Colour is stored at reduced resolution; the green rim spans enough "
                         "colour samples to be real." if decides else
                         "Colour is stored at reduced resolution, coarser than the green rim: "
                         "colour offsets below 2 px cannot be trusted. Full-resolution colour "
                         "(raw or 4:4:4 frames) would decide."))
    sat = np.any(np.stack([tab.saturated[c] for c in CHANNELS]), axis=0)
    frac = float(np.mean(sat))
    if frac > 0.5:
        out.append(Check("saturation", None, False, f"{100 * frac:.0f} % of frames have a "
                         "saturated disc", "Most frames are overexposed: colours at the limb "
                         "bloom and clip. A shorter exposure would decide."))
    else:
        out.append(Check("saturation", True, True, f"{100 * frac:.0f} % of frames saturated",
                         "Exposure leaves the limb unsaturated in most frames."))
    out.append(_check_cast(meas, env))
    out.extend(_check_order(meas))
    return out


def _segment_ratio(meas, env: _Envelope, h_r_px: np.ndarray) -> np.ndarray:
    """The model's G/R flux ratio of the segment above the horizon, by red apex height.

    Near last light the green segment outgrows the red one (dispersion; the blur hides
    more of the thinner red): the whole disc's ratio times the channels' visible
    fractions (standard air), each times the share the blur leaves above the line.
    """
    scale = meas.observables.plate_scale_arcsec_per_px
    if not np.isfinite(scale):
        return np.full(np.shape(h_r_px), env.gr_ratio)
    model, sd = env.models[1], meas.semidiameter_arcsec
    curves = {c: light_by_height(model, c, sd) for c in ("r", "g")}  # (a_c, h, v) each
    sig = meas.table.edge_sigma_px["g"]
    blur = (float(np.nanmedian(sig)) if np.any(np.isfinite(sig)) else 1.0) * scale
    a_r, h_r, v_r = curves["r"]
    good = np.isfinite(h_r) & (v_r > 0)
    a = np.interp(np.asarray(h_r_px, float) * scale, h_r[good], a_r[good])
    vis = {c: np.interp(a, a_c, v) * blur_fraction_above(np.maximum(np.interp(a, a_c, h), 0.0),
                                                        blur)
           for c, (a_c, h, v) in curves.items()}
    return env.gr_ratio * vis["g"] / np.maximum(vis["r"], 1e-12)


def _check_cast(meas, env: _Envelope) -> Check:
    """A green cast over the whole disc: the disc's G/R far above what air and camera allow.

    The ratio is compared frame by frame with the model's for a segment of that height
    (the higher half of the frames in a clip; every frame of a photo or two).
    """
    tab = meas.table
    ok = _clean(tab, "r", "g") & (tab.flux["r"] > 0) & np.isfinite(tab.apex_height_px["r"])
    if not np.any(ok):
        return Check("green-cast", None, False, "no unsaturated frame with both channels",
                     "The colour balance of the disc could not be checked.")
    early = ok & (tab.apex_height_px["r"] >= np.nanpercentile(
        np.where(ok, tab.apex_height_px["r"], np.nan), 50))
    measured = tab.flux["g"][early] / tab.flux["r"][early]
    expected = _segment_ratio(meas, env, tab.apex_height_px["r"][early])
    ratio, model = float(np.median(measured)), float(np.median(expected))
    excess = float(np.median(measured / expected))
    cast = excess > CAST_FACTOR
    return Check("green-cast", not cast, cast,
                 f"green/red flux ratio of the Sun above the horizon {ratio:.2f}, the model's "
                 f"for segments of that height {model:.2f} (x{excess:.2f}); air and a normal "
                 f"white balance allow up to x{CAST_FACTOR:g}",
                 "The whole disc has been made green: an edit or a colour setting, not the air."
                 if cast else "The disc's colour balance is natural for the low Sun.")


def _check_order(meas) -> list[Check]:
    """The setting Sun only sinks: heights must fall with time; no frame twice."""
    tab = meas.table
    if len(tab) < 3:
        return []
    h = tab.apex_height_px["r"]
    t = tab.t_unix_s
    ok = np.isfinite(h) & _clean(tab, "r")
    out = []
    if np.count_nonzero(ok) >= 5:
        hh, tt = h[ok], t[ok]
        err = np.nan_to_num(tab.apex_height_err_px["r"][ok], nan=0.0)
        slope = float(np.polyfit(tt - tt[0], hh, 1)[0])
        # Each step against the steady descent, in units of its own measurement noise (a
        # noise estimated from the steps themselves would grow with the shuffling).
        excess = np.diff(hh) - slope * np.diff(tt)
        noise = np.hypot(np.hypot(err[1:], err[:-1]), ORDER_NOISE_FLOOR_PX)
        jumps = int(np.count_nonzero(np.abs(excess) > ORDER_JUMP_SIGMA * noise + 0.5))
        bad = jumps > max(1, 0.05 * excess.size) or slope > 0
        out.append(Check("frame-order", not bad, bad,
                         f"{jumps} jumps of the limb off its steady descent among {excess.size} "
                         f"steps; mean slope {slope:+.2f} px/s",
                         "The Sun sinks steadily from frame to frame." if not bad else
                         "The Sun jumps up and down between frames: frames are out of order or "
                         "their times were changed."))
    dup = int(np.count_nonzero(np.diff(np.stack([tab.flux[c] for c in CHANNELS]), axis=1)
                               .__abs__().sum(axis=0) == 0))
    out.append(Check("duplicate-frames", dup == 0, dup > 0,
                     f"{dup} frame(s) identical to the one before",
                     "No frame appears twice." if dup == 0 else
                     "Some frames are exact copies of the one before: the clip was padded or "
                     "edited."))
    return out


def _check_timing(meas, env: _Envelope, track) -> Check | None:
    """The limb must sink at the rate the ephemeris and the transfer curve give."""
    tab, ob = meas.table, meas.observables
    ok = np.isfinite(tab.apex_height_px["r"]) & _clean(tab, "r")  # clipped discs bloom
    if np.count_nonzero(ok) < 5 or not np.isfinite(ob.plate_scale_arcsec_per_px):
        return None
    t, h = tab.t_unix_s[ok], tab.apex_height_px["r"][ok] * ob.plate_scale_arcsec_per_px
    if np.ptp(t) < 2.0:
        return None
    measured = np.polyfit(t - t[0], h, 1)[0]
    m = env.models[1]
    a = np.interp(t, track.t_unix_s, track.altitude_deg) + meas.semidiameter_arcsec / 3600.0
    e = limb_elevation_deg(m, "r", a)
    good = np.isfinite(e)
    if np.count_nonzero(good) < 5:
        return None
    expected = np.polyfit(t[good] - t[0], e[good] * 3600.0, 1)[0]
    ratio = measured / expected
    ok_rate = 0.75 <= ratio <= 1.3
    return Check("timing", ok_rate, not ok_rate,
                 f"limb sinks at {measured:.2f} arcsec/s; the ephemeris gives {expected:.2f} "
                 f"arcsec/s (ratio {ratio:.2f}; 0.75-1.3 allowed for the air and the plate scale)",
                 "The frame times match the Sun's motion." if ok_rate else
                 "The frame times do not match the Sun's motion: the clip was sped up, slowed "
                 "down or its timestamps were edited (or the plate scale is wrong).")


def verify_measurement(meas, obs) -> Verdict:
    """Run every check on a measured folder and decide the verdict."""
    lat, lon, h = obs.site.latitude_deg, obs.site.longitude_deg, obs.site.eye_height_m
    track = sun_track(meas.table.t_unix_s, lat, lon, h)
    t_ref = float(np.median(meas.table.t_unix_s))
    env = _envelope(obs, meas.semidiameter_arcsec, float(np.median(track.azimuth_deg)),
                    lat, lon, h, t_ref)
    checks = [_check_sun_at_horizon(meas, obs, env, track)]
    for extra in (_check_direction(meas, obs, track), _check_green_segment(meas)):
        if extra is not None:
            checks.append(extra)
    checks += _check_size(meas, env)
    checks.append(_check_fringing(meas))
    checks += _check_artefacts(meas, env)
    timing = _check_timing(meas, env, track)
    if timing is not None:
        checks.append(timing)
    return _decide(tuple(checks))


def _decide(checks: tuple[Check, ...]) -> Verdict:
    failed = [c for c in checks if c.passed is False and c.confident]
    open_ = [c for c in checks if c.passed is None or (c.passed is False and not c.confident)]
    if failed:
        summary = "Inconsistent with the physics of the setting Sun: " + "; ".join(
            c.reason for c in failed)
        return Verdict("inconsistent", checks, summary)
    if open_:
        summary = "Inconclusive: " + "; ".join(c.reason for c in open_)
        return Verdict("inconclusive", checks, summary)
    return Verdict("consistent", checks, "Consistent: every check agrees with a real green "
                   "segment of the setting Sun seen through the air.")
