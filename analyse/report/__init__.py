"""report.html: one self-contained page on a measured sunset and the inferred lapse rate.

The page is rendered from ``template.html`` with Jinja2, autoescape on, so every string
that came from the user's files (site name, file names, TOML values, notes) is escaped.
Figures (:mod:`analyse.report.figures`) are embedded as base64 PNG ``data:`` URIs; the
page asks for nothing from outside (no scripts, fonts or style sheets), so it reads the
same offline and prints.

The words of the summary are built here from the measurement and the inference, for
every outcome of the fit: constrained, unconstrained, several minima, a bound at the
edge of the range scanned, or no fit at all (a recording without last light or without
a green segment).
"""

from __future__ import annotations

import base64
import collections
import importlib.resources
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from analyse.infer import (
    DRY_ADIABATIC_K_PER_KM,
    DUCTING_K_PER_KM,
    HEIGHT_CHANNELS,
    MIRAGE_K_PER_KM,
)
from analyse.predict import DETECTION_FRACTION
from analyse.measure import CHANNELS
from analyse.observation import format_utc
from analyse.report import figures as fg

__all__ = ["render_report", "write_report_html"]

STANDARD_LAPSE_K_PER_KM = 6.5  # US Standard Atmosphere 1976, troposphere
HEIGHT_WINDOW_S = (-75.0, 8.0)  # limb-height figure: window around the reference [s]
FLUX_WINDOW_S = (-25.0, 8.0)  # light-curve figure: window around the reference [s]
STRIP_PANELS = 12  # crops shown in the strip
PROFILE_TOP_M = 300.0  # temperature figure: top of the height axis [m]
SECONDS_PER_K_PER_KM = 1.0  # last light moves about 1 s per K/km (DESIGN.md planning figure)
_NAMES = fg.CHANNEL_NAMES


@dataclass(frozen=True)
class _Reference:
    """The time origin of the figures and how to say it."""

    t_unix_s: float
    label: str


def write_report_html(path, measurement, inference, obs, *, curves=None) -> None:
    """Write report.html for a measured sunset.

    Parameters
    ----------
    path : str or Path
        File to write (UTF-8).
    measurement : analyse.pipeline.Measurement
    inference : analyse.infer.Inference
    obs : analyse.observation.Observation
    curves : analyse.infer.ModelCurves, optional
        The best model on the recording's time axis (:func:`analyse.infer.model_curves`);
        without it the figures show the measurements only.
    """
    Path(path).write_text(render_report(measurement, inference, obs, curves=curves),
                          encoding="utf-8")


def render_report(measurement, inference, obs, *, curves=None) -> str:
    """The page as a string (see :func:`write_report_html`)."""
    import jinja2

    text = importlib.resources.files(__package__).joinpath("template.html").read_text("utf-8")
    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined,
                             trim_blocks=True, lstrip_blocks=True)
    ref = _reference(measurement)
    return env.from_string(text).render(
        title=_title(measurement, obs), summary=_summary(measurement, inference, obs),
        key_numbers=_key_numbers(measurement, inference),
        constraint=_constraint(inference), figures=_figures(measurement, inference, obs,
                                                            curves, ref),
        observation=_observation_rows(measurement, inference, obs),
        assumptions=_assumptions(inference), flags=_flag_counts(measurement.table),
        ducting=f"{DUCTING_K_PER_KM:g}", mirage=f"{MIRAGE_K_PER_KM:+g}",
        notes=_notes(measurement, inference), layer_top_m=f"{obs.model.layer_top_m:g}",
        status=inference.status, version=_version())


# --- numbers in words -----------------------------------------------------------------

def _ok(*xs) -> bool:
    return all(x is not None and np.isfinite(x) for x in xs)


def _pm(x: float, err: float, digits: int, unit: str) -> str:
    """``x ± err unit``, with decimals enough to show the error's first digit (up to 3)."""
    if not _ok(x):
        return "not measured"
    if _ok(err) and 0.0 < err < 10.0 ** -digits:
        digits = min(int(np.ceil(-np.log10(err))), 3)
    e = f" ± {err:.{digits}f}" if _ok(err) else ""
    return f"{x:.{digits}f}{e} {unit}".strip()


def _clock(t: float) -> str:
    return f"{format_utc(t, 2)[11:-1]} UTC" if _ok(t) else "not measured"


def _coords(site) -> str:
    ns = "N" if site.latitude_deg >= 0 else "S"
    ew = "E" if site.longitude_deg >= 0 else "W"
    return f"{abs(site.latitude_deg):.4f}° {ns}, {abs(site.longitude_deg):.4f}° {ew}"


def _title(measurement, obs) -> dict:
    t = measurement.table.t_unix_s
    date = format_utc(float(t[0]), 0)[:10] if t.size and _ok(t[0]) else "unknown date"
    return {"date": date, "name": obs.site.name or "", "coords": _coords(obs.site),
            "eye": f"{obs.site.eye_height_m:g}"}


def _reference(measurement) -> _Reference:
    last = measurement.observables.last
    for c in ("r", "g", "b"):
        if _ok(last[c].t_unix_s):
            return _Reference(last[c].t_unix_s, f"{_NAMES[c]} last light")
    tab = measurement.table
    vis = np.flatnonzero(np.any([tab.visible[c] for c in CHANNELS], axis=0))
    if vis.size:
        return _Reference(float(tab.t_unix_s[vis[-1]]), "the last frame with the Sun seen")
    return _Reference(float(tab.t_unix_s[0]), "the first frame")


# --- the summary ----------------------------------------------------------------------

_METHOD_WORDS = {"never visible": "was never detected above the horizon",
                 "still visible in the last frame":
                 "was still detected in the last frame (the recording stops before it set)"}


def _why_no_last(ll) -> str:
    return _METHOD_WORDS.get(ll.method, f"could not be timed ({ll.method})")


def _green_sentences(ob) -> list[str]:
    r, g, b = ob.last["r"], ob.last["g"], ob.last["b"]
    if not _ok(r.t_unix_s) and not _ok(g.t_unix_s):
        return [f"No last light was measured: the red channel {_why_no_last(r)}, and the "
                f"green channel {_why_no_last(g)}. Nothing about a green segment can be said."]
    if not _ok(r.t_unix_s):
        return [f"The green channel's light was last detected at {_clock(g.t_unix_s)}, but "
                f"the red channel {_why_no_last(r)}, so the green segment was not timed."]
    out = [f"The red channel's light was last detected at {_clock(r.t_unix_s)}."]
    d, e = ob.green_duration_s, ob.green_duration_err_s
    if not _ok(g.t_unix_s):
        out.append(f"The green channel {_why_no_last(g)}, so no green segment was timed.")
    elif d < 0:
        out.append(f"No green segment was seen: the green channel's light vanished "
                   f"{-d:.2f} s before the red channel's, the opposite of what dispersion in "
                   "clear air does; haze, the detection thresholds or the measurement may be "
                   "the cause (see the notes below).")
    elif _ok(e) and d < 2.0 * e:
        out.append(f"Green outlasted red by only {_pm(d, e, 2, 's')}: not clearly more than "
                   "zero, so a green segment is not established.")
    else:
        out.append(f"A green segment was seen: green light outlasted red by {_pm(d, e, 2, 's')} "
                   f"and was last detected at {_clock(g.t_unix_s)}.")
    if _ok(b.t_unix_s):
        db = b.t_unix_s - r.t_unix_s
        out.append(f"Blue light was last detected {abs(db):.2f} s "
                   f"{'after' if db >= 0 else 'before'} red's.")
    return out


def _offset_sentence(ob) -> str:
    if not _ok(ob.rg_offset_arcsec):
        return ("The height of the green limb above the red one could not be measured (no "
                "frame with both limbs in the final minute before red last light).")
    return (f"Over the final minute before red last light the green upper limb stood "
            f"{_pm(ob.rg_offset_arcsec, ob.rg_offset_err_arcsec, 1, 'arcsec')} above the red "
            f"one (median of {ob.rg_offset_frames} frames, corrected for the lens's own colour "
            f"offset taken from: {ob.colour_offset_source}{_lens_error(ob)}).")


def _lens_error(ob) -> str:
    """The lens colour offset's share of the rg offset's error, when it is not small."""
    e = ob.colour_offset_dy_err_px.get("r", 0.0) * ob.plate_scale_arcsec_per_px
    if not (_ok(e) and e >= 0.1):
        return ""
    hint = ("; measuring the lens with limbtrace calibrate would remove most of it"
            if ob.colour_offset_source == "horizon edge" else "")
    return f"; that correction's own error, {e:.1f} arcsec, is included{hint}"


def _lapse_sentences(inf, layer_top_m: float) -> list[str]:
    if inf.status == "constrained" and _ok(inf.lapse_rate_K_per_km):
        g, e = inf.lapse_rate_K_per_km, inf.lapse_rate_err_K_per_km
        lo2, hi2 = inf.interval_2sigma
        change = -g * layer_top_m / 1000.0
        std = "inside" if _ok(lo2, hi2) and lo2 <= STANDARD_LAPSE_K_PER_KM <= hi2 else "outside"
        return [f"Lapse rate of the air from the sea surface to {layer_top_m:g} m: "
                f"{_pm(g, e, 1, 'K/km')} (1 sigma; 2-sigma range {lo2:.1f} to {hi2:.1f} K/km).",
                f"In words: the temperature {'fell' if change < 0 else 'rose'} by about "
                f"{abs(change):.2f} °C over those {layer_top_m:g} m. The air was: {inf.regime}. "
                f"The standard atmosphere's {STANDARD_LAPSE_K_PER_KM} K/km lies {std} the "
                "2-sigma range."]
    if inf.status == "not fitted":
        return [f"No lapse rate was fitted: {inf.message}."]
    if inf.status == "unconstrained":
        return [f"The lapse rate is not constrained by this recording: {inf.message}. "
                "This page therefore makes no statement about the air's temperature profile."]
    if inf.status == "multiple minima":
        return [f"The lapse rate is ambiguous: {inf.message}. These candidates mean very "
                "different air, so no single value is reported."]
    return [f"Only a bound on the lapse rate is known: {inf.message}.", _bound_sentence(inf)]


def _bound_sentence(inf) -> str:
    lo, hi = inf.interval_2sigma
    g = np.asarray(inf.gamma_grid, dtype=float)
    if not g.size or not _ok(lo, hi):
        return "The data say little about the air beyond that."
    if lo <= g[0] + 1e-9 and hi < g[-1] - 1e-9:
        what = (" so the air near the sea was warming with height (an inversion)"
                if hi < 0 else "")
        return f"The lapse rate is below about {hi:.0f} K/km (2 sigma){what}."
    if hi >= g[-1] - 1e-9 and lo > g[0] + 1e-9:
        what = (", so the air cooled with height faster than the dry adiabatic rate "
                "(superadiabatic)" if lo > DRY_ADIABATIC_K_PER_KM else "")
        return f"The lapse rate is above about {lo:.0f} K/km (2 sigma){what}."
    return "The data say little about the air beyond that."


def _mirage_sentence(inf) -> str:
    model = inf.best.model
    folded = model is not None and bool(np.any(model.curve.folded))
    extra = (" The fitted model's transfer curve folds: one point of the Sun is seen at more "
             "than one elevation, which is a mirage." if folded else "")
    if inf.status != "constrained" or not _ok(inf.lapse_rate_K_per_km):
        return ("Whether a mirage was likely cannot be said from this fit." + extra).strip()
    g = inf.lapse_rate_K_per_km
    if g <= DUCTING_K_PER_KM:
        text = ("Rays near the horizon bend about as much as the sea's surface curves: "
                "superior mirages, a stretched or stacked Sun and ducting are likely.")
    elif g >= MIRAGE_K_PER_KM:
        text = ("Close to the sea, rays bend upward: an inferior mirage (the Sun's lower edge "
                "joined to an inverted image below it) is likely.")
    else:
        text = ("At this lapse rate rays curve the same way at every height of the layer, so "
                "the model shows no mirage; a thin layer right at the sea, which one linear "
                "layer cannot describe, could still make one.")
    return text + extra


def _summary(measurement, inference, obs) -> list[str]:
    ob = measurement.observables
    out = [" ".join(_green_sentences(ob)), _offset_sentence(ob)]
    out.append(" ".join(_lapse_sentences(inference, obs.model.layer_top_m)))
    out.append(_mirage_sentence(inference))
    return out


def _constraint(inf) -> str:
    if inf.status == "not fitted" or not _ok(inf.clock_prior_s):
        return ("No fit was made, so this recording constrains nothing about the air; the "
                "times and offsets above describe the recording only.")
    p, d = inf.clock_prior_s, inf.clock_offset_s
    head = (f"The frame times were trusted to ± {p:.2f} s (camera clock and the lens height's "
            f"effect on the dip) and the fit shifted them by {d:+.2f} s. ")
    if p <= 0.5:
        return head + ("With so good a clock the absolute time of last light, which moves "
                       "about a second per K/km, carries most of the weight.")
    if p <= 3.0:
        return head + ("The absolute time of last light adds a moderate constraint (about a "
                       "second per K/km); the rest comes from the limb's descent and the "
                       "differences between the colours.")
    return head + ("With so loose a clock only the shape of the limb's descent and the "
                   "differences between the colours constrain the air; these change by a few "
                   "milliseconds and under 0.1 arcsec per K/km, so expect a wide interval.")


def _key_numbers(measurement, inf) -> list[tuple[str, str]]:
    ob = measurement.observables
    lapse = (_pm(inf.lapse_rate_K_per_km, inf.lapse_rate_err_K_per_km, 1, "K/km")
             if inf.status == "constrained" else f"none ({inf.status})")
    return [("Red last light", _clock(ob.last["r"].t_unix_s)),
            ("Green last light", _clock(ob.last["g"].t_unix_s)),
            ("Green segment", _pm(ob.green_duration_s, ob.green_duration_err_s, 2, "s")),
            ("Green limb above red", _pm(ob.rg_offset_arcsec, ob.rg_offset_err_arcsec, 1,
                                         "arcsec")),
            ("Lapse rate (sea to layer top)", lapse),
            ("The air", inf.regime)]


# --- figures --------------------------------------------------------------------------

def _uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _figure(key: str, title: str, caption: str, png: bytes | None, missing: str = "") -> dict:
    return {"key": key, "title": title, "caption": caption,
            "uri": _uri(png) if png is not None else "", "missing": missing}


def _window(t_rel: np.ndarray, window: tuple[float, float]) -> np.ndarray:
    return (t_rel >= window[0]) & (t_rel <= window[1])


def _before_last(tab, ob, c: str) -> np.ndarray:
    """Frames up to a channel's measured last light (and its error); all if unknown.
    After it the channel's light is below the detection level, and an apex found there
    is the noise's."""
    ll = ob.last[c]
    if not _ok(ll.t_unix_s):
        return np.ones(tab.t_unix_s.shape, bool)
    return tab.t_unix_s <= ll.t_unix_s + (ll.err_s if _ok(ll.err_s) else 0.0)


def _fig_heights(m, curves, ref: _Reference) -> dict:
    tab, ob = m.table, m.observables
    t = tab.t_unix_s - ref.t_unix_s
    sel = _window(t, HEIGHT_WINDOW_S)
    h = {c: np.where(tab.visible[c] & tab.horizon_found & _before_last(tab, ob, c),
                     tab.apex_height_px[c] + ob.colour_offset_dy_px.get(c, 0.0), np.nan)[sel]
         for c in HEIGHT_CHANNELS}
    title = "Upper limb above the sea horizon"
    if not any(np.any(np.isfinite(v)) for v in h.values()):
        return _figure("a", title, "", None, "no limb height was measured near the end.")
    mt = mh = None
    if curves is not None:
        s = _window(curves.t_unix_s - ref.t_unix_s, HEIGHT_WINDOW_S)
        mt, mh = curves.t_unix_s[s] - ref.t_unix_s, {c: v[s] for c, v in
                                                     curves.apex_height_px.items()
                                                     if c in HEIGHT_CHANNELS}
    png = fg.limb_heights_png(t[sel], h, arcsec_per_px=ob.plate_scale_arcsec_per_px,
                              time_label=ref.label, model_t_s=mt, model_height_px=mh)
    cap = ("Height of each colour channel's upper-limb apex above the sea-horizon line, per "
           "frame, corrected for the lens's vertical colour offset (source: "
           f"{ob.colour_offset_source}); arcsec from a plate scale of "
           f"{ob.plate_scale_arcsec_per_px:.3f} arcsec/px ({ob.plate_scale_source}).")
    cap += (" Blue is left out: at sunset its limb is too faint to locate reliably, and the "
            "fit does not use it. Apexes lower than three times the edge blur (the last second "
            "or so) are drawn but not fitted: there the blur, not the limb, sets the height. "
            "Frames after a channel's last light are not drawn: its light is below the "
            "detection level there, and an apex found in them is the noise's.")
    cap += (" Lines: the best-fitting model on the camera's clock (fitted time offset and "
            "plate-scale correction applied); lower panel: measured minus model."
            if curves is not None else " No model is drawn: nothing was fitted.")
    return _figure("a", title, cap, png)


def _fig_flux(m, curves, ref: _Reference) -> dict:
    tab, ob = m.table, m.observables
    t = tab.t_unix_s - ref.t_unix_s
    sel = _window(t, FLUX_WINDOW_S)
    title = "Light above the horizon in the final seconds"
    flux = {c: tab.flux[c][sel] for c in CHANNELS}
    if not any(np.any(np.isfinite(v) & (v > 0)) for v in flux.values()):
        return _figure("b", title, "", None, "no positive flux was measured near the end.")
    kw = {}
    if curves is not None:
        s = _window(curves.t_unix_s - ref.t_unix_s, FLUX_WINDOW_S)
        kw = {"model_t_s": curves.t_unix_s[s] - ref.t_unix_s,
              "model_flux": {c: v[s] for c, v in curves.flux.items()},
              "model_last_light_s": {c: v - ref.t_unix_s
                                     for c, v in curves.last_light_unix_s.items()}}
    level = {c: (ob.disc_flux[c] * DETECTION_FRACTION
                 if ob.last[c].method.startswith("fading fit to") else ob.last[c].threshold_flux)
             for c in CHANNELS}
    png = fg.light_curves_png(
        t[sel], flux, threshold=level,
        last_light_s={c: ob.last[c].t_unix_s - ref.t_unix_s for c in CHANNELS},
        time_label=ref.label, **kw)
    cap = ("Sky-subtracted linear flux of the Sun above the horizon per channel (logarithmic; "
           "frames with zero or negative flux cannot be drawn). Dashed: each channel's "
           f"detection level, {DETECTION_FRACTION:g} of the whole disc's flux (or, where the "
           "disc is too faint for that, 5 times the flux noise); solid vertical: measured last "
           "light (" + ", ".join(f"{_NAMES[c]} by {ob.last[c].method}" for c in CHANNELS) + ").")
    cap += (" Lines and dotted verticals: the best-fitting model's visible flux, scaled to "
            "the recording, and its last light." if curves is not None else "")
    return _figure("b", title, cap, png)


def _fig_strip(m, ref: _Reference) -> dict:
    title = "The last frames, enlarged"
    strip = list(m.strip)
    if not strip:
        return _figure("c", title, "", None, "no crops of the final frames were kept "
                       "(the limb apex was never measured close enough to the horizon).")
    pick = np.unique(np.round(np.linspace(0, len(strip) - 1, min(STRIP_PANELS, len(strip)))))
    shown = [strip[int(i)] for i in pick]
    last = {c: ll.t_unix_s + (ll.err_s if _ok(ll.err_s) else 0.0)
            for c, ll in m.observables.last.items() if _ok(ll.t_unix_s)}
    ticks = [{c: h for c, h in s.apex_height_px.items() if s.t_unix_s <= last.get(c, np.inf)}
             for s in shown]
    png = fg.strip_png([np.asarray(s.crop, dtype=float) for s in shown],
                       [f"{s.t_unix_s - ref.t_unix_s:+.2f} s" for s in shown],
                       [s.horizon_row_px for s in shown], ticks)
    cap = (f"{len(shown)} of the {len(strip)} crops kept around the green limb's apex, "
           f"labelled with the time relative to {ref.label}; registered to the horizon, "
           "encoded as sRGB for display with one common contrast stretch (so fading is "
           "real), pixels enlarged without smoothing. White ticks at both edges: the "
           "horizon line; coloured ticks at the right edge: each channel's measured limb "
           "apex, up to that channel's last light.")
    return _figure("c", title, cap, png)


def _fig_chi2(inf) -> dict:
    title = "How well each lapse rate fits"
    g, chi = np.asarray(inf.gamma_grid, float), np.asarray(inf.chi2, float)
    if g.size < 2 or not np.any(np.isfinite(chi)):
        return _figure("d", title, "", None, f"no fit was made ({inf.message}).")
    s2 = max(inf.chi2_min / max(inf.dof, 1), 1.0) if _ok(inf.chi2_min) else 1.0
    marks = {"standard 6.5": STANDARD_LAPSE_K_PER_KM, "isothermal 0": 0.0,
             "dry adiabatic 9.8": DRY_ADIABATIC_K_PER_KM,
             "inferior mirage 34": MIRAGE_K_PER_KM, "ducting -127": DUCTING_K_PER_KM}
    png = fg.chi2_profile_png(
        g, chi, best_K_per_km=float(inf.best.gamma), constrained=inf.status == "constrained",
        interval_1sigma=inf.interval_1sigma, interval_2sigma=inf.interval_2sigma,
        level_1sigma=s2, level_2sigma=4.0 * s2, marks=marks)
    cap = (f"Chi-square of all fitted observables against the trial lapse rate, minus its "
           f"minimum ({inf.chi2_min:.1f} for {inf.dof} degrees of freedom); the time offset "
           "and plate-scale correction are profiled out at each trial. The 1- and 2-sigma "
           "levels are rises of 1 and 4")
    cap += (f", scaled by the reduced chi-square {s2:.2f} because the fit is worse than the "
            "error estimates allow." if s2 > 1.0 else ".")
    cap += (f" The scan covered {g[0]:g} to {g[-1]:g} K/km"
            + ("; shown around the 2-sigma interval." if inf.status == "constrained" else ".")
            + f" Status: {inf.status}.")
    return _figure("d", title, cap, png)


def _profile(cond, gamma: float, z: np.ndarray) -> np.ndarray:
    from analyse.atmosphere import linear_layer_atmosphere

    atm = linear_layer_atmosphere(gamma, layer_top_m=cond.layer_top_m,
                                  eye_height_m=cond.eye_height_m,
                                  temperature_C=cond.temperature_C,
                                  pressure_hPa=cond.pressure_hPa,
                                  relative_humidity=cond.relative_humidity)
    return atm.temperature_at(z) - 273.15


def _fig_temperature(inf) -> dict:
    title = "Temperature near the sea"
    model = inf.best.model
    if model is None or not _ok(inf.best.gamma):
        return _figure("e", title, "", None, f"no fit was made ({inf.message}).")
    cond = model.conditions
    z = np.linspace(0.0, max(PROFILE_TOP_M, min(1.2 * cond.layer_top_m, 2000.0)), 301)
    g = float(inf.best.gamma)
    lo, hi = inf.interval_1sigma
    fitted = inf.status == "constrained"
    band = {}
    if _ok(lo, hi):
        what = "1-sigma range" if fitted else "within 1 sigma of the lowest chi-square"
        band = {"lower_C": _profile(cond, lo, z), "upper_C": _profile(cond, hi, z),
                "band_label": f"{what}, {lo:.1f} to {hi:.1f} K/km"}
    png = fg.temperature_profile_png(
        z, _profile(cond, g, z) if fitted else None, label=f"fitted, {g:.1f} K/km",
        eye_height_m=cond.eye_height_m, layer_top_m=cond.layer_top_m,
        reference_C=_profile(cond, STANDARD_LAPSE_K_PER_KM, z),
        reference_label=f"standard lapse rate, {STANDARD_LAPSE_K_PER_KM} K/km", **band)
    cap = (f"The model's air temperature against height: one linear layer from the sea to "
           f"{cond.layer_top_m:g} m at the fitted lapse rate, the US Standard Atmosphere "
           f"1976 gradients above, every profile passing through the lens temperature "
           f"({cond.temperature_C:.1f} °C at {cond.eye_height_m:g} m). The shaded range is "
           "drawn between the profiles at the ends of the 1-sigma interval; the dashed line "
           "is the standard lapse rate for comparison.")
    if not fitted:
        cap += (f" No single profile is drawn: the lapse rate is not constrained "
                f"({inf.status}).")
    return _figure("e", title, cap, png)


def _fig_transfer(inf) -> dict:
    title = "Refraction near the horizon in the fitted air"
    model = inf.best.model
    if model is None:
        return _figure("f", title, "", None, f"no fit was made ({inf.message}).")
    cur = model.curve
    node = {c: int(ch.node_index[int(np.argmax(ch.weights))]) for c, ch in
            model.channels.items()}
    png = fg.transfer_curves_png(
        {c: cur.apparent_elevation_deg[k] for c, k in node.items()},
        {c: cur.true_altitude_deg[k] for c, k in node.items()},
        wavelength_nm={c: float(cur.wavelength_nm[k]) for c, k in node.items()},
        horizon_elevation_deg={c: float(cur.horizon.apparent_elevation_deg[k])
                               for c, k in node.items()})
    cap = (f"Ray-traced refraction (apparent minus true altitude) against apparent elevation "
           f"for the lapse rate of lowest chi-square ({inf.best.gamma:.1f} K/km), at each "
           "channel's most heavily weighted node wavelength. The curves start at the sea "
           "horizon, the lowest ray that escapes; below it the eye sees the sea.")
    return _figure("f", title, cap, png)


def _figures(m, inf, obs, curves, ref: _Reference) -> list[dict]:
    return [_fig_heights(m, curves, ref), _fig_flux(m, curves, ref), _fig_strip(m, ref),
            _fig_chi2(inf), _fig_temperature(inf), _fig_transfer(inf)]


# --- the observation, assumptions, flags ----------------------------------------------

def _air_rows(obs) -> list[tuple[str, str]]:
    t_C, p_hPa, rh = obs.air_at_lens()
    given = obs.air
    def mark(v):
        return "" if v is not None else " (not given: default)"
    return [("Air at the lens", f"{t_C:.1f} °C{mark(given.temperature_C)}; "
             f"{p_hPa:.1f} hPa{mark(given.pressure_hPa)}; relative humidity "
             f"{100 * rh:.0f} %{mark(given.relative_humidity)}")]


def _camera_keys(cam) -> str:
    keys = []
    for k, v in vars(cam).items():
        if v is None:
            continue
        if k == "video_start_utc":
            v = format_utc(v)
        elif isinstance(v, Path):
            v = v.name
        keys.append(f"{k} = {v}")
    return "; ".join(keys) or "none"


def _exposure(fs) -> str:
    exp = sorted({i.exposure_s for i in fs.infos if i.exposure_s})
    iso = sorted({i.iso for i in fs.infos if i.iso})
    parts = []
    if exp:
        parts.append("exposure " + " to ".join(_seconds(v) for v in dict.fromkeys(
            (exp[0], exp[-1]))))
    if iso:
        parts.append("ISO " + ", ".join(f"{v:g}" for v in iso[:4]))
    return "; ".join(parts) or "not recorded"


def _seconds(v: float) -> str:
    """An exposure time as photographers write it: 1/4000 s, 0.3 s, 2 s."""
    if v < 0.25 and abs(1.0 / v - round(1.0 / v)) < 0.01 * (1.0 / v):
        return f"1/{round(1.0 / v)} s"
    return f"{v:.3g} s"


def _recording_rows(m) -> list[tuple[str, str]]:
    fs, tab = m.frameset, m.table
    rows = [("Frames", f"{len(tab)} ({fs.kind}, {fs.width} x {fs.height} px, "
             f"{fs.bit_depth}-bit)")]
    if len(tab):
        rows.append(("First and last frame",
                     f"{tab.sources[0]} at {_clock(tab.t_unix_s[0])}; "
                     f"{tab.sources[-1]} at {_clock(tab.t_unix_s[-1])}"))
    rows += [("Time source", fs.time_source),
             ("Chroma subsampling", fs.chroma_subsampling or "none (full colour resolution)"),
             ("Colour matrix", fs.colour_matrix or "none (stored as RGB)"),
             ("Transfer function", f"{fs.transfer} (code values to linear light)"),
             ("Exposure", _exposure(fs))]
    alt = np.asarray(m.sun_altitude_deg, float)
    if alt.size and np.any(np.isfinite(alt)):
        rows.append(("Sun's centre, true altitude", f"{np.nanmax(alt):.3f}° to "
                     f"{np.nanmin(alt):.3f}°; semidiameter {m.semidiameter_arcsec:.1f} arcsec"))
    return rows


def _fit_rows(inf) -> list[tuple[str, str]]:
    model = inf.best.model
    if model is not None:
        bands = "; ".join(f"{_NAMES[c]}: {ch.band.description}"
                          for c, ch in model.channels.items())
    else:
        from calibration.bands import default_bands

        bands = "none used (no fit); the defaults would be " + "; ".join(
            f"{_NAMES[c]}: {b.description}" for c, b in default_bands().items())
    det = inf.best.detection_fraction or {}
    rows = [("Bands used", bands),
            ("Detection fractions", ", ".join(f"{_NAMES[c]} {v:.2g}" for c, v in det.items())
             or "not determined")]
    if _ok(inf.chi2_min):
        rows.append(("Fit", f"status {inf.status}; chi-square {inf.chi2_min:.1f} for "
                     f"{inf.dof} degrees of freedom; time offset {inf.clock_offset_s:+.2f} s "
                     f"(prior ± {inf.clock_prior_s:.2f} s); plate-scale correction "
                     f"{100 * getattr(inf.best, 'scale_correction', np.nan):+.2f} %"))
    return rows


def _observation_rows(m, inf, obs) -> list[tuple[str, str]]:
    site, ob = obs.site, m.observables
    horizon = (site.horizon if site.horizon_altitude_deg is None
               else f"{site.horizon}, at {site.horizon_altitude_deg:g}°")
    geo = ob.geometry
    rows = [("Site", f"{site.name + ', ' if site.name else ''}{_coords(site)}; horizon: "
             f"{horizon}"),
            ("Lens height above the sea", f"{site.eye_height_m:g} m"),
            *_air_rows(obs),
            ("Observation file", obs.path.name if obs.path is not None else "not recorded"),
            ("Camera keys", _camera_keys(obs.camera)),
            ("Calibration", "none" if not m.calibration else
             "used; keys: " + ", ".join(sorted(str(k) for k in m.calibration))),
            *_recording_rows(m),
            ("Plate scale", f"{ob.plate_scale_arcsec_per_px:.4f} arcsec/px, from "
             f"{ob.plate_scale_source}"),
            ("Colour offsets (vertical, relative to green)",
             ", ".join(f"{_NAMES[c]} {v:+.2f}"
                       + (f" ± {e:.2f}" if _ok(e := ob.colour_offset_dy_err_px.get(c, np.nan))
                          and e > 0 else "") + " px"
                       for c, v in ob.colour_offset_dy_px.items())
             + f", from {ob.colour_offset_source}"),
            ("Disc flattening (vertical / horizontal)",
             _pm(geo.flattening, geo.flattening_err, 3, "") if _ok(geo.flattening)
             else f"not measured ({geo.message or 'no usable chords'})"),
            ("Last-light method", ", ".join(f"{_NAMES[c]}: {ob.last[c].method}"
                                            for c in CHANNELS)),
            *_fit_rows(inf)]
    return rows


def _assumptions(inf) -> dict:
    """Values quoted by the template's list of assumptions."""
    from analyse.infer import EYE_HEIGHT_ERR_M, MODEL_FLOOR_ARCSEC
    from analyse.predict import ANGSTROM_ALPHA, TAU_AEROSOL_550
    from calibration.bands import SUN_EFFECTIVE_TEMPERATURE_K

    model = inf.best.model
    return {"tau": f"{TAU_AEROSOL_550:g}", "alpha": f"{ANGSTROM_ALPHA:g}",
            "floor": f"{MODEL_FLOOR_ARCSEC:g}", "eye_err": f"{EYE_HEIGHT_ERR_M:g}",
            "sun_K": f"{SUN_EFFECTIVE_TEMPERATURE_K:g}",
            "default_bands": model is None or any("default" in ch.band.description
                                                  for ch in model.channels.values())}


def _flag_counts(table) -> list[tuple[str, int]]:
    counts = collections.Counter(f for flags in table.flags for f in flags)
    counts["frame without a horizon"] = int(np.count_nonzero(~table.horizon_found))
    for c in CHANNELS:
        counts[f"{_NAMES[c]} channel saturated"] = int(np.count_nonzero(table.saturated[c]))
    return sorted(((k, v) for k, v in counts.items() if v), key=lambda kv: (-kv[1], kv[0]))


def _notes(m, inf) -> list[str]:
    from analyse._offline import offline_notes

    return list(dict.fromkeys([*m.notes, *inf.notes, *offline_notes()]))


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    from analyse.results import MODEL_VERSION

    try:
        v = version("limbtrace")
    except PackageNotFoundError:
        v = "(version unknown)"
    return f"limbtrace {v}; {MODEL_VERSION}"
