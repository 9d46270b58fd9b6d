"""The report's figures: plain arrays in, PNG bytes out.

Each function draws one figure on its own :class:`matplotlib.figure.Figure` with the
Agg canvas (no pyplot, no global backend or style state touched) and returns the PNG
file's bytes, written without the software metadata chunk so that the page holds no
address of any kind. Times are seconds relative to a reference chosen by the caller
(normally the red channel's last light); channels are ``"r"``, ``"g"``, ``"b"`` and are
drawn in red, green and blue.
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from analyse.frames import linear_to_srgb

__all__ = [
    "CHANNEL_COLOURS",
    "CHANNEL_NAMES",
    "limb_heights_png",
    "light_curves_png",
    "strip_png",
    "chi2_profile_png",
    "temperature_profile_png",
    "transfer_curves_png",
]

CHANNEL_COLOURS = {"r": "#b5332b", "g": "#23803a", "b": "#2d5aa8"}
CHANNEL_NAMES = {"r": "red", "g": "green", "b": "blue"}
_TICK_COLOURS = {"r": "#ff6a5c", "g": "#5fe07a", "b": "#7fa6ff"}  # bright, for dark crops
DPI = 110  # dots per inch of the embedded PNGs (about 800 px for a 7.5-inch figure)
_STYLE = {"font.size": 9.0, "axes.titlesize": 9.5, "axes.labelsize": 9.0,
          "legend.fontsize": 8.0, "axes.grid": True, "grid.color": "#dddddd",
          "grid.linewidth": 0.6, "axes.spines.top": False, "axes.spines.right": False}
STRETCH_PERCENTILES = (0.5, 99.7)  # common display stretch of the strip [percent]


def _new(width_in: float, height_in: float, rows: int = 1, cols: int = 1, **kw):
    fig = Figure(figsize=(width_in, height_in), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    with _style():
        axes = fig.subplots(rows, cols, squeeze=False, **kw)
    return fig, axes


def _style():
    import matplotlib

    return matplotlib.rc_context(_STYLE)


def _png(fig: Figure) -> bytes:
    buf = io.BytesIO()
    with _style():
        fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _finite(*arrays):
    ok = np.ones(np.shape(arrays[0]), bool)
    for a in arrays:
        ok &= np.isfinite(a)
    return ok


def limb_heights_png(t_s: np.ndarray, height_px: Mapping[str, np.ndarray], *,
                     arcsec_per_px: float, time_label: str,
                     model_t_s: np.ndarray | None = None,
                     model_height_px: Mapping[str, np.ndarray] | None = None) -> bytes:
    """Upper-limb height above the horizon against time, measured and modelled.

    Parameters
    ----------
    t_s : (N,) ndarray
        Frame times relative to the reference [s].
    height_px : dict of (N,) ndarray
        Per channel, limb apex above the horizon [px]; NaN where not measured.
    arcsec_per_px : float
        Plate scale for the second axis [arcsec/px].
    time_label : str
        What the times are relative to (axis label).
    model_t_s : (T,) ndarray, optional
        Model times on the same axis [s].
    model_height_px : dict of (T,) ndarray, optional
        Per channel, model limb height [px]; NaN below the horizon.
    """
    with _style():
        has_model = model_t_s is not None and model_height_px is not None
        fig, ax = _new(7.5, 5.2 if has_model else 3.6, 2 if has_model else 1, 1, sharex=True,
                       gridspec_kw={"height_ratios": [3, 1.2]} if has_model else None)
        top = ax[0, 0]
        for c, h in height_px.items():
            ok = _finite(t_s, h)
            top.plot(t_s[ok], h[ok], ".", ms=2.5, color=CHANNEL_COLOURS[c], alpha=0.6,
                     label=f"{CHANNEL_NAMES[c]}, measured")
            if has_model and c in model_height_px:
                top.plot(model_t_s, model_height_px[c], "-", lw=1.3, color=CHANNEL_COLOURS[c],
                         label=f"{CHANNEL_NAMES[c]}, model")
        top.axhline(0.0, color="k", lw=0.8)
        top.set_ylabel("limb above the horizon [px]")
        sec = top.secondary_yaxis("right", functions=(lambda p: p * arcsec_per_px,
                                                      lambda a: a / arcsec_per_px))
        sec.set_ylabel("[arcsec]")
        top.legend(ncol=2, loc="upper right")
        if has_model:
            _height_residuals(ax[1, 0], t_s, height_px, model_t_s, model_height_px,
                              arcsec_per_px)
        ax[-1, 0].set_xlabel(f"time [s] relative to {time_label}")
    return _png(fig)


def _height_residuals(ax, t_s, height_px, model_t_s, model_height_px, scale):
    for c, h in height_px.items():
        m = model_height_px.get(c)
        if m is None:
            continue
        okm = _finite(model_t_s, m)
        if np.count_nonzero(okm) < 2:
            continue
        at = np.interp(t_s, model_t_s[okm], m[okm], left=np.nan, right=np.nan)
        r = (h - at) * scale
        ok = _finite(t_s, r)
        ax.plot(t_s[ok], r[ok], ".", ms=2.0, color=CHANNEL_COLOURS[c], alpha=0.6)
    ax.axhline(0.0, color="k", lw=0.8)
    ax.set_ylabel("measured - model\n[arcsec]")


def light_curves_png(t_s: np.ndarray, flux: Mapping[str, np.ndarray], *,
                     threshold: Mapping[str, float], last_light_s: Mapping[str, float],
                     time_label: str, model_t_s: np.ndarray | None = None,
                     model_flux: Mapping[str, np.ndarray] | None = None,
                     model_last_light_s: Mapping[str, float] | None = None) -> bytes:
    """Visible flux above the horizon per channel, logarithmic, with last light marked.

    Parameters
    ----------
    t_s : (N,) ndarray
        Frame times relative to the reference [s].
    flux : dict of (N,) ndarray
        Per channel, sky-subtracted linear flux above the horizon [camera units];
        values <= 0 cannot be drawn on the logarithmic axis and are left out.
    threshold : dict of float
        Per channel, detection threshold [camera units].
    last_light_s : dict of float
        Per channel, measured last light relative to the reference [s] (NaN: none).
    time_label : str
        What the times are relative to.
    model_t_s, model_flux, model_last_light_s : optional
        The fitted model on the same axes.
    """
    fig, ax = _new(7.5, 4.4)
    ax = ax[0, 0]
    with _style():
        lows = []
        for c, f in flux.items():
            col = CHANNEL_COLOURS[c]
            ok = _finite(t_s, f) & (f > 0)
            ax.plot(t_s[ok], f[ok], ".", ms=2.5, color=col, alpha=0.6,
                    label=f"{CHANNEL_NAMES[c]}, measured")
            if model_flux is not None and c in model_flux:
                m = model_flux[c]
                okm = _finite(model_t_s, m) & (m > 0)
                ax.plot(model_t_s[okm], m[okm], "-", lw=1.2, color=col,
                        label=f"{CHANNEL_NAMES[c]}, model")
            thr = threshold.get(c, np.nan)
            if np.isfinite(thr) and thr > 0:
                ax.axhline(thr, color=col, lw=0.9, ls=(0, (5, 3)))
                lows.append(thr)
            if np.isfinite(last_light_s.get(c, np.nan)):
                ax.axvline(last_light_s[c], color=col, lw=1.0)
            ml = (model_last_light_s or {}).get(c, np.nan)
            if np.isfinite(ml):
                ax.axvline(ml, color=col, lw=1.0, ls=":")
        ax.set_yscale("log")
        if lows:
            ax.set_ylim(bottom=0.2 * min(lows))
        ax.plot([], [], "k", lw=0.9, ls=(0, (5, 3)), label="detection threshold")
        ax.plot([], [], "k", lw=1.0, label="last light, measured")
        if model_last_light_s:
            ax.plot([], [], "k", lw=1.0, ls=":", label="last light, model")
        fig.legend(loc="outside lower center", ncol=4)
        ax.set_xlabel(f"time [s] relative to {time_label}")
        ax.set_ylabel("visible flux above the horizon\n[linear camera units]")
    return _png(fig)


def _display(crops: Sequence[np.ndarray]) -> list[np.ndarray]:
    """Linear crops -> sRGB-encoded, one common contrast stretch, 0..1."""
    lin = [np.nan_to_num(np.asarray(c, dtype=np.float64), nan=0.0) for c in crops]
    allv = np.concatenate([c.ravel() for c in lin])
    lo, hi = np.percentile(allv, STRETCH_PERCENTILES)
    if not hi > lo:
        hi = lo + 1.0
    return [np.clip(linear_to_srgb(np.clip((c - lo) / (hi - lo), 0.0, 1.0)), 0.0, 1.0)
            for c in lin]


def _mosaic(shown: Sequence[np.ndarray], columns: int, zoom: int, gap: int):
    """Panels upscaled by ``zoom`` (nearest neighbour) on a white sheet; panel origins."""
    h, w = shown[0].shape[:2]
    rows = int(np.ceil(len(shown) / columns))
    sheet = np.ones((rows * (h * zoom + gap) - gap, columns * (w * zoom + gap) - gap, 3))
    origins = []
    for k, img in enumerate(shown):
        r, c = divmod(k, columns)
        y0, x0 = r * (h * zoom + gap), c * (w * zoom + gap)
        big = np.repeat(np.repeat(img[:h, :w], zoom, axis=0), zoom, axis=1)
        sheet[y0:y0 + big.shape[0], x0:x0 + big.shape[1]] = big
        origins.append((y0, x0))
    return sheet, origins


def strip_png(crops: Sequence[np.ndarray], labels: Sequence[str],
              horizon_row_px: Sequence[float], apex_height_px: Sequence[Mapping[str, float]],
              *, columns: int = 3, zoom: int = 2) -> bytes:
    """The last frames as enlarged crops, with the horizon and each limb apex ticked.

    Parameters
    ----------
    crops : sequence of (h, w, 3) ndarray
        Registered crops of equal shape in linear RGB [camera units], the limb apex at
        the centre column.
    labels : sequence of str
        One label per crop (its time).
    horizon_row_px : sequence of float
        Row of the horizon in each crop [px, from the top].
    apex_height_px : sequence of dict
        Per crop and channel, limb apex above the horizon [px] (NaN: not measured).
    columns, zoom : int
        Panels per row; enlargement (each pixel drawn as zoom x zoom).
    """
    if not crops:
        raise ValueError("strip_png needs at least one crop")
    shown = _display(crops)
    h, w = shown[0].shape[:2]
    gap = 26
    sheet, origins = _mosaic(shown, columns, zoom, gap)
    width_in = sheet.shape[1] / DPI
    fig = Figure(figsize=(width_in, (sheet.shape[0] + gap) / DPI), dpi=DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.0, 0.0, 1.0, sheet.shape[0] / (sheet.shape[0] + gap)))
    ax.set_axis_off()
    ax.imshow(sheet, interpolation="nearest", extent=(-0.5, sheet.shape[1] - 0.5,
                                                      sheet.shape[0] - 0.5, -0.5))
    tick = 0.07 * w * zoom
    for k, (y0, x0) in enumerate(origins):
        right = x0 + w * zoom - 0.5
        yh = y0 + (horizon_row_px[k] + 0.5) * zoom - 0.5
        for xs in ((x0 - 0.5, x0 - 0.5 + tick), (right - tick, right)):
            ax.plot(xs, (yh, yh), color="white", lw=1.4, solid_capstyle="butt")
        for c, hgt in apex_height_px[k].items():
            if np.isfinite(hgt) and c in _TICK_COLOURS:
                ax.plot((right - 1.6 * tick, right), (yh - hgt * zoom,) * 2,
                        color=_TICK_COLOURS[c], lw=1.4, solid_capstyle="butt")
        ax.text(x0 + 0.5 * w * zoom, y0 - 4, labels[k], ha="center", va="bottom", fontsize=8.5)
    ax.set_xlim(-0.5, sheet.shape[1] - 0.5)
    ax.set_ylim(sheet.shape[0] - 0.5, -gap)
    return _png(fig)


def chi2_profile_png(gamma_K_per_km: np.ndarray, chi2: np.ndarray, *, best_K_per_km: float,
                     constrained: bool, interval_1sigma: tuple[float, float],
                     interval_2sigma: tuple[float, float], level_1sigma: float,
                     level_2sigma: float, marks: Mapping[str, float]) -> bytes:
    """Chi-square profile over the lapse rate, relative to its minimum.

    Parameters
    ----------
    gamma_K_per_km, chi2 : (G,) ndarray
        Trial lapse rates [K/km] and the profiled chi-square at each.
    best_K_per_km : float
        Lowest-chi-square lapse rate [K/km].
    constrained : bool
        Whether the fit gives a single value (else the minimum is drawn dashed).
    interval_1sigma, interval_2sigma : (float, float)
        Intervals [K/km]; NaN ends are not drawn.
    level_1sigma, level_2sigma : float
        Rise above the minimum defining each interval.
    marks : dict of float
        Named reference lapse rates drawn as faint vertical lines [K/km].
    """
    fig, ax = _new(7.5, 4.0)
    ax = ax[0, 0]
    with _style():
        d = chi2 - np.nanmin(chi2)
        ax.plot(gamma_K_per_km, d, "k-", lw=1.3, label="chi-square profile")
        for lev, span, name, alpha in ((level_1sigma, interval_1sigma, "1 sigma", 0.22),
                                       (level_2sigma, interval_2sigma, "2 sigma", 0.10)):
            ax.axhline(lev, color="#555555", lw=0.8, ls="--")
            ax.annotate(name, (0.0, lev), xycoords=("axes fraction", "data"), xytext=(3, 2),
                        textcoords="offset points", fontsize=7.5, color="#555555")
            if np.all(np.isfinite(span)):
                ax.axvspan(*span, color="#3b6ea5", alpha=alpha, lw=0,
                           label=f"{name} interval {span[0]:.1f} to {span[1]:.1f} K/km")
        if np.isfinite(best_K_per_km):
            ax.axvline(best_K_per_km, color="#3b6ea5", lw=1.4, ls="-" if constrained else "--",
                       label=f"{'best' if constrained else 'lowest (not a constrained value)'}"
                             f": {best_K_per_km:.1f} K/km")
        lo, hi = _profile_xlim(gamma_K_per_km, constrained, interval_2sigma)
        ax.set_xlim(lo, hi)
        for name, g in marks.items():
            if lo <= g <= hi:
                ax.axvline(g, color="#999999", lw=0.7, ls=":")
                ax.annotate(name, (g, 1.0), xycoords=("data", "axes fraction"), rotation=90,
                            va="top", ha="right", fontsize=7, color="#777777")
        inside = (gamma_K_per_km >= lo) & (gamma_K_per_km <= hi) & np.isfinite(d)
        top = float(np.max(d[inside])) if np.any(inside) else level_2sigma
        ax.set_ylim(0.0, max(1.6 * level_2sigma, min(1.05 * top, 8.0 * level_2sigma)))
        ax.set_xlabel("lapse rate GAMMA = -dT/dz of the near-surface layer [K/km]")
        ax.set_ylabel("chi-square - minimum")
        fig.legend(loc="outside lower center", ncol=2, fontsize=7.5)
    return _png(fig)


def _profile_xlim(g: np.ndarray, constrained: bool, interval_2sigma) -> tuple[float, float]:
    """The whole scan, or around a constrained 2-sigma interval (3 widths, >= 5 K/km each side)."""
    lo2, hi2 = interval_2sigma
    if not constrained or not np.all(np.isfinite(interval_2sigma)):
        return float(g[0]), float(g[-1])
    w = max(hi2 - lo2, 5.0)
    return max(float(g[0]), lo2 - 1.5 * w), min(float(g[-1]), hi2 + 1.5 * w)


def temperature_profile_png(height_m: np.ndarray, temperature_C: np.ndarray | None, *,
                            label: str,
                            eye_height_m: float, layer_top_m: float,
                            lower_C: np.ndarray | None = None,
                            upper_C: np.ndarray | None = None, band_label: str = "",
                            reference_C: np.ndarray | None = None,
                            reference_label: str = "") -> bytes:
    """Temperature against height near the sea, with a shaded range and the lens height.

    Parameters
    ----------
    height_m : (H,) ndarray
        Heights above the sea [m].
    temperature_C : (H,) ndarray or None
        The fitted profile [deg C]; None when no single value is fitted.
    label : str
        Legend entry of that profile.
    eye_height_m, layer_top_m : float
        Lens height and top of the fitted layer [m].
    lower_C, upper_C : (H,) ndarray, optional
        Profiles at the ends of the interval, shaded between [deg C].
    band_label : str
        Legend entry of the shaded range.
    reference_C : (H,) ndarray, optional
        A reference profile (e.g. the standard lapse rate) [deg C], drawn dashed.
    reference_label : str
    """
    fig, ax = _new(5.6, 4.4)
    ax = ax[0, 0]
    with _style():
        if lower_C is not None and upper_C is not None:
            ax.fill_betweenx(height_m, np.minimum(lower_C, upper_C),
                             np.maximum(lower_C, upper_C), color="#3b6ea5", alpha=0.22, lw=0,
                             label=band_label)
        if reference_C is not None:
            ax.plot(reference_C, height_m, "--", color="#888888", lw=1.0, label=reference_label)
        if temperature_C is not None:
            ax.plot(temperature_C, height_m, "-", color="#1f3f66", lw=1.6, label=label)
        ax.axhline(eye_height_m, color="#aa6600", lw=1.0,
                   label=f"lens, {eye_height_m:g} m above the sea")
        if layer_top_m <= height_m[-1]:
            ax.axhline(layer_top_m, color="#666666", lw=0.8, ls=":",
                       label=f"top of the fitted layer, {layer_top_m:g} m")
        ax.set_ylim(0.0, float(height_m[-1]))
        ax.set_xlabel("air temperature [deg C]")
        ax.set_ylabel("height above the sea [m]")
        ax.legend(loc="best", fontsize=7.5)
    return _png(fig)


def transfer_curves_png(elevation_deg: Mapping[str, np.ndarray],
                        true_altitude_deg: Mapping[str, np.ndarray], *,
                        wavelength_nm: Mapping[str, float],
                        horizon_elevation_deg: Mapping[str, float]) -> bytes:
    """Refraction (apparent minus true altitude) against apparent elevation near the horizon.

    Parameters
    ----------
    elevation_deg, true_altitude_deg : dict of (M,) ndarray
        Per channel, one node wavelength's transfer curve [deg]; NaN for trapped rays.
    wavelength_nm : dict of float
        That node's wavelength per channel [nm].
    horizon_elevation_deg : dict of float
        Apparent elevation of the sea-horizon ray per channel [deg] (minus the dip).
    """
    fig, ax = _new(7.5, 3.8)
    ax = ax[0, 0]
    with _style():
        for c, e in elevation_deg.items():
            a = true_altitude_deg[c]
            ok = _finite(e, a)
            ax.plot(60.0 * e[ok], 60.0 * (e[ok] - a[ok]), "-", color=CHANNEL_COLOURS[c], lw=1.3,
                    label=f"{CHANNEL_NAMES[c]} channel, {wavelength_nm[c]:.0f} nm")
        dips = [60.0 * v for v in horizon_elevation_deg.values() if np.isfinite(v)]
        if dips:
            ax.axvline(float(np.mean(dips)), color="k", lw=1.0,
                       label=f"sea horizon (dip {-np.mean(dips):.2f} arcmin)")
        ax.axvline(0.0, color="#888888", lw=0.8, ls=":", label="horizontal plane of the lens")
        ax.set_xlabel("apparent elevation [arcmin]")
        ax.set_ylabel("refraction: apparent - true altitude\n[arcmin]")
        ax.legend(loc="upper right")
    return _png(fig)
