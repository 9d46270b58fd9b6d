"""The figures of report.html: data and captions for each panel, embedded as PNG URIs.

Each ``_fig_*`` picks the frames to show, calls the drawing function of
:mod:`analyse.report.figures` and writes the caption; a figure that cannot be drawn says
why instead. Times are relative to a reference (:func:`_reference`): a channel's last
light, else the last frame with the Sun seen.
"""

from __future__ import annotations

import base64
from dataclasses import dataclass

import numpy as np

from analyse.infer import (
    DRY_ADIABATIC_K_PER_KM,
    DUCTING_K_PER_KM,
    HEIGHT_CHANNELS,
    MIRAGE_K_PER_KM,
)
from analyse.measure import CHANNELS
from analyse.predict import DETECTION_FRACTION
from analyse.report import figures as fg
from analyse.report._words import _NAMES, STANDARD_LAPSE_K_PER_KM, _ok

__all__ = ["HEIGHT_WINDOW_S", "FLUX_WINDOW_S", "STRIP_PANELS", "PROFILE_TOP_M"]

HEIGHT_WINDOW_S = (-75.0, 8.0)  # limb-height figure: window around the reference [s]
FLUX_WINDOW_S = (-25.0, 8.0)  # light-curve figure: window around the reference [s]
STRIP_PANELS = 12  # crops shown in the strip
PROFILE_TOP_M = 300.0  # temperature figure: top of the height axis [m]


@dataclass(frozen=True)
class _Reference:
    """The time origin of the figures and how to say it."""

    t_unix_s: float
    label: str


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


def _uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _figure(key: str, title: str, caption: str, png: bytes | None, missing: str = "") -> dict:
    return {"key": key, "title": title, "caption": caption,
            "uri": _uri(png) if png is not None else "", "missing": missing}


def _window(t_rel: np.ndarray, window: tuple[float, float]) -> np.ndarray:
    return (t_rel >= window[0]) & (t_rel <= window[1])


def _last_drawn(ob, c: str) -> float:
    """The latest time [UTC s] whose apex of channel ``c`` is drawn: its measured last
    light plus that time's error (inf if unknown). After it the channel's light is below
    the detection level, and an apex found there is the noise's."""
    ll = ob.last[c]
    if not _ok(ll.t_unix_s):
        return float("inf")
    return ll.t_unix_s + (ll.err_s if _ok(ll.err_s) else 0.0)


def _before_last(tab, ob, c: str) -> np.ndarray:
    """Frames up to a channel's :func:`_last_drawn` time; all if unknown."""
    return tab.t_unix_s <= _last_drawn(ob, c)


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
    ticks = [{c: h for c, h in s.apex_height_px.items()
              if c not in m.observables.last or s.t_unix_s <= _last_drawn(m.observables, c)}
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
