"""The words of report.html: the summary, the key numbers and the table rows.

Every sentence is built from the measurement and the inference, for every outcome of the
fit: constrained, unconstrained, several minima, a bound at the edge of the range scanned,
or no fit at all (a recording without last light or without a green segment). The
functions return plain strings and tuples; :mod:`analyse.report` puts them in the page.
"""

from __future__ import annotations

import collections
from pathlib import Path

import numpy as np

from analyse.infer import DRY_ADIABATIC_K_PER_KM, DUCTING_K_PER_KM, MIRAGE_K_PER_KM
from analyse.measure import CHANNELS
from analyse.observation import format_utc
from analyse.report import figures as fg

__all__ = ["STANDARD_LAPSE_K_PER_KM", "SECONDS_PER_K_PER_KM"]

STANDARD_LAPSE_K_PER_KM = 6.5  # US Standard Atmosphere 1976, troposphere
SECONDS_PER_K_PER_KM = 1.0  # last light moves about 1 s per K/km (DESIGN.md planning figure)
_NAMES = fg.CHANNEL_NAMES


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
