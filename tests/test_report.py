"""report.html on invented recordings made with the forward model.

Each case is a small synthetic measurement (limb heights and light curves drawn from a
traced model at 6.5 K/km, 5 fps from 30 s before sunset) with an inference built by the fit's
own summariser from a chosen chi-square profile, so every outcome of the fit is covered:
constrained, unconstrained, several minima, a bound at the edge, and no fit at all (no
green segment; no last light). The page must parse, say the right things, embed every
image as a PNG data: URI, load nothing from elsewhere and escape the user's strings.
"""

from __future__ import annotations

import base64
import dataclasses
import io
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from analyse import infer, report
from analyse.frames import FrameInfo, FrameSet
from analyse.measure import CHANNELS, DiscGeometry, FrameTable, sequence_observables
from analyse.observation import Air, Camera, Model, Observation, Site
from analyse.pipeline import Measurement, StripFrame
from analyse.predict import Conditions, build_model, limb_elevation_deg, visible_fraction
from analyse.report import figures, render_report, write_report_html
from analyse.sun import sun_track, sunset_time

LAT, LON, EYE, DATE = 35.2, -20.4, 12.0, "2026-06-21"
SCALE = 2.0  # arcsec/px
HOSTILE = "<script>alert(1)</script>"
GRID = np.linspace(-120.0, 70.0, 1901)  # 0.1 K/km steps, 6.5 on the grid


@pytest.fixture(scope="module")
def model():
    cond = Conditions(LAT, LON, EYE, 17.0, 1016.0, 0.75)
    t0 = sunset_time(DATE, LAT, LON, EYE)
    az = float(sun_track(t0, LAT, LON, EYE).azimuth_deg[0])
    return build_model(cond, 6.5, azimuth_deg=az, rays=32, span_arcmin=20.0)


def _crop(h_px: float, w: int = 180, rows: int = 64, horizon: float = 48.0) -> np.ndarray:
    """A disc of 60 px radius whose top stands h_px above the horizon row (linear RGB)."""
    y, x = np.mgrid[0:rows, 0:w].astype(float)
    inside = (x - w / 2) ** 2 + (y - (horizon - h_px + 60.0)) ** 2 <= 60.0**2
    img = np.full((rows, w, 3), 0.02)
    img[inside & (y < horizon)] = (0.9, 0.45, 0.15)
    return img.astype(np.float16)


def _measurement(model, *, green_early=False, t_end_s=75.0, name_prefix="frame"):
    """Frames at 5 fps from 30 s before sunset (centre at -0.83 deg) to ``t_end_s`` after."""
    rng = np.random.default_rng(1)
    t_set = sunset_time(DATE, LAT, LON, EYE)
    t = t_set + np.arange(-30.0, t_end_s, 0.2)
    tr = sun_track(t, LAT, LON, EYE)
    sd = float(np.median(tr.semidiameter_arcsec))
    e_hor = float(np.mean(model.curve.horizon.apparent_elevation_deg[
        model.channels["g"].node_index]))
    n = t.size
    per = {k: {} for k in ("apex", "err", "nan", "vis", "flux", "ferr", "sky", "sat")}
    for c in CHANNELS:
        h = (limb_elevation_deg(model, c, tr.altitude_deg + sd / 3600) - e_hor) * 3600 / SCALE
        f = 1e5 * visible_fraction(model, c, tr.altitude_deg, sd) + rng.normal(0, 2.0, n)
        vis = f > 10.0
        if green_early and c == "g":  # green lost 1.5 s before red: no green segment
            last_r = np.flatnonzero(per["vis"]["r"])[-1]
            vis[last_r - 7:] = False
        per["apex"][c] = np.where(vis, h + rng.normal(0, 0.15, n), np.nan)
        per["err"][c], per["nan"][c] = np.full(n, 0.15), np.full(n, np.nan)
        per["vis"][c], per["flux"][c], per["ferr"][c] = vis, f, np.full(n, 2.0)
        per["sky"][c], per["sat"][c] = np.full(n, 0.1), np.zeros(n, bool)
    per["sat"]["r"][:3] = True
    flags = tuple(("r:edge-noisy",) if i % 50 == 0 else () for i in range(n))
    sources = tuple(f"{name_prefix}{i:04d}.png" for i in range(n))
    cols = dict(t_unix_s=t, horizon_found=np.ones(n, bool), horizon_row_px=np.full(n, 100.0),
                horizon_row_err_px=np.full(n, 0.05), roll_deg=np.zeros(n),
                roll_err_deg=np.full(n, 0.01), apex_height_px=per["apex"],
                apex_height_err_px=per["err"], width_px=per["nan"], height_px=per["nan"],
                visible=per["vis"], flux=per["flux"], flux_err=per["ferr"],
                sky_level=per["sky"], saturated=per["sat"], flags=flags, sources=sources)
    for f in dataclasses.fields(FrameTable):  # per-channel columns the report does not read
        cols.setdefault(f.name, per["nan"])
    table = FrameTable(**cols)
    ob = sequence_observables(table, plate_scale_arcsec_per_px=SCALE,
                              plate_scale_source="observation.toml",
                              colour_offset_dy_px={"r": 0.1, "g": 0.0, "b": -0.1},
                              colour_offset_source="horizon edge",
                              geometry=DiscGeometry(960.0, 1.0, 0.87, 0.01, 40, ""))
    vis_any = np.flatnonzero(per["vis"]["b"] | per["vis"]["g"] | per["vis"]["r"])
    strip = tuple(StripFrame(int(i), float(t[i]), _crop(max(per["apex"]["r"][i], 0.5)), 48.0,
                             {c: float(per["apex"][c][i]) for c in CHANNELS})
                  for i in vis_any[-20:])
    infos = tuple(FrameInfo(i, float(t[i]), sources[i], 1 / 4000, 100.0) for i in range(n))
    fs = FrameSet(Path("sunset"), "stills", (), infos, "frames.csv", 1920, 1080, 8, None,
                  ("a note with <b>markup</b> & an ampersand",))
    return Measurement(fs, table, ob, tr.altitude_deg, sd, strip, None,
                       fs.notes + ob.notes)


def _obs(name=HOSTILE):
    return Observation(Site(LAT, LON, EYE, "sea", None, name), Air(17.0, 1016.0, None),
                       Camera(SCALE, None, None, None, 0.2, 292.0), Model(100.0),
                       Path("observation.toml"))


def _inference(model, meas, chi, *, gamma=None):
    """The fit's own summariser on a chosen chi-square profile (39 degrees of freedom)."""
    k = int(np.argmin(chi))
    g = float(GRID[k]) if gamma is None else gamma
    last = {c: meas.observables.last[c].t_unix_s + 0.05 for c in CHANNELS}
    best = infer._Trial(g, float(chi[k]), 0.12, 40, last, {c: 2e-4 for c in CHANNELS},
                        {c: 1e5 for c in CHANNELS}, model, 0.001)
    return infer._summarise(GRID, chi, best, 39, 0.3, ["fitted 40 terms"])


class _Page(HTMLParser):
    """Collects tags, image sources and every attribute value of a page."""

    def __init__(self):
        super().__init__()
        self.tags, self.imgs, self.attrs, self.text = [], [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(v or "" for _, v in attrs)
        if tag == "img":
            self.imgs.append(dict(attrs)["src"])

    def handle_data(self, data):
        self.text.append(data)


def _parse(html: str) -> _Page:
    page = _Page()
    page.feed(html)
    page.close()
    return page


def _words(page: _Page) -> str:
    return re.sub(r"\s+", " ", " ".join(page.text))


def _check_self_contained(html: str, page: _Page, n_images: int) -> None:
    assert not re.search(r"https?://", html, re.IGNORECASE)
    assert "script" not in page.tags and "link" not in page.tags and "iframe" not in page.tags
    assert "url(" not in html and "@import" not in html
    assert len(page.imgs) == n_images
    for src in page.imgs:
        assert src.startswith("data:image/png;base64,")
        img = Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1], validate=True)))
        assert img.format == "PNG" and min(img.size) > 150
        img.load()  # decodes the whole image: a truncated PNG raises


@pytest.fixture(scope="module")
def constrained(model):
    meas = _measurement(model)
    inf = _inference(model, meas, (GRID - 6.5) ** 2 / 4.0 + 20.0)
    obs = _obs()
    return meas, inf, obs, _curves(model, meas)


def _curves(model, meas):
    """The model on the recording's time axis, as infer.model_curves gives it."""
    t = np.arange(meas.table.t_unix_s[0], meas.table.t_unix_s[-1], 0.1)
    tr = sun_track(t, LAT, LON, EYE)
    sd = meas.semidiameter_arcsec
    e_hor = float(np.mean(model.curve.horizon.apparent_elevation_deg[
        model.channels["g"].node_index]))
    h = {c: (limb_elevation_deg(model, c, tr.altitude_deg + sd / 3600) - e_hor) * 3600 / SCALE
         for c in CHANNELS}
    f = {c: 1e5 * visible_fraction(model, c, tr.altitude_deg, sd) for c in CHANNELS}
    last = {c: meas.observables.last[c].t_unix_s + 0.05 for c in CHANNELS}
    return infer.ModelCurves(t, h, f, last)


def test_constrained_fit_page(constrained):
    meas, inf, obs, curves = constrained
    assert inf.status == "constrained"
    html = render_report(meas, inf, obs, curves=curves)
    page = _parse(html)
    _check_self_contained(html, page, 6)
    words = _words(page)
    ob = meas.observables
    assert f"green light outlasted red by {ob.green_duration_s:.2f} ± " in words
    found = re.search(r"limb stood ([\d.]+) ± ([\d.]+) arcsec above the red", words)
    value, err = float(found[1]), float(found[2])
    assert abs(value - ob.rg_offset_arcsec) <= 0.005  # printed to 2 decimals
    assert abs(err - ob.rg_offset_err_arcsec) <= 0.005
    assert err > 0.0  # a small error keeps a significant digit instead of reading "± 0.0"
    # (g - 6.5)^2 / 4: chi-square rises by 1 at 6.5 +- 2 and by 4 at 6.5 +- 4.
    assert "6.5 ± 2.0 K/km (1 sigma; 2-sigma range 2.5 to 10.5 K/km)" in words
    assert "stable, cooling with height less steeply than the dry adiabat" in words
    assert "the model shows no mirage" in words
    assert "trusted to ± 0.30 s" in words and "carries most of the weight" in words
    assert "Eye safety" in words and "live view" in words
    assert "Limits of the model" in words
    for c in ("red", "green", "blue"):
        assert "(default, typical CMOS; from memory)" in words and f"{c}: Gaussian" in words
    assert "r:edge-noisy" in words and "red channel saturated" in words


def test_user_strings_are_escaped(constrained, tmp_path):
    meas, inf, obs, curves = constrained
    sources = tuple(f"<img src=x onerror=alert(2)>{i}.png" for i in range(len(meas.table)))
    meas = dataclasses.replace(meas, table=dataclasses.replace(meas.table, sources=sources))
    out = tmp_path / "report.html"
    write_report_html(out, meas, inf, obs, curves=curves)
    html = out.read_text(encoding="utf-8")
    assert HOSTILE not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "&lt;img src=x onerror=alert(2)&gt;0.png" in html
    assert "a note with &lt;b&gt;markup&lt;/b&gt; &amp; an ampersand" in html
    page = _parse(html)
    assert "script" not in page.tags and "b" not in page.tags
    assert all(src.startswith("data:") for src in page.imgs)


def test_unconstrained_fit_page(model):
    meas = _measurement(model)
    inf = _inference(model, meas, 10.0 + 0.01 * np.sin(GRID))
    assert inf.status == "unconstrained"
    html = render_report(meas, inf, _obs("Cape Ardent"), curves=None)
    page = _parse(html)
    _check_self_contained(html, page, 6)
    words = _words(page)
    assert "not constrained by this recording" in words
    assert "no statement about the air" in words
    assert "Whether a mirage was likely cannot be said" in words
    assert "none (unconstrained)" in words
    assert "Status: unconstrained." in words
    assert "Sunset of 2026-06-2" in words and "Cape Ardent" in words


@pytest.mark.parametrize("case, expected", [
    ("multiple minima", "The lapse rate is ambiguous: several lapse rates fit"),
    ("at the edge of the range", "The lapse rate is above about"),
])
def test_other_fit_outcomes_are_worded(model, case, expected):
    meas = _measurement(model)
    if case == "multiple minima":
        chi = np.minimum((GRID + 40.0) ** 2 / 4.0, (GRID - 20.0) ** 2 / 4.0 + 0.5) + 5.0
    else:  # rises only towards inversions: a lower bound
        chi = 5.0 + np.where(GRID < 30.0, ((GRID - 30.0) / 4.0) ** 2, 0.0) - 1e-3 * GRID
    inf = _inference(model, meas, chi)
    assert inf.status == case
    words = " ".join(report._summary(meas, inf, _obs()))  # the page's summary paragraphs
    assert expected in words
    assert "Whether a mirage was likely cannot be said" in words


def test_recording_without_green_segment(model):
    meas = _measurement(model, green_early=True)
    assert meas.observables.green_duration_s < 0
    inf = infer._failed("no green segment to fit")
    html = render_report(meas, inf, _obs(), curves=None)
    page = _parse(html)
    _check_self_contained(html, page, 3)  # heights, light curves, strip; no fit figures
    words = _words(page)
    assert "No green segment was seen" in words
    assert "No lapse rate was fitted: no green segment to fit." in words
    assert words.count("Not drawn: no fit was made") == 3
    assert "no green segment" in words  # the measurement's own note is listed


def test_recording_without_last_light(model):
    meas = _measurement(model, t_end_s=0.0)  # stops about 40 s before last light
    assert not np.isfinite(meas.observables.last["r"].t_unix_s)
    inf = infer._failed("red or green last light not measured: nothing to fit")
    html = render_report(meas, inf, _obs(), curves=None)
    page = _parse(html)
    _check_self_contained(html, page, 3)
    words = _words(page)
    assert "No last light was measured" in words and "recording stops before it set" in words
    assert "relative to the last frame with the Sun seen" in words  # the strip's caption


def test_strip_uses_one_common_stretch():
    bright = np.full((8, 12, 3), 0.8)
    faint = np.full((8, 12, 3), 0.2)
    bright[0, 0], faint[0, 0] = 0.0, 0.0
    shown = figures._display([bright, faint])
    # A per-panel stretch would make both panels equally bright.
    assert shown[0][4, 4, 0] > shown[1][4, 4, 0] + 0.2


def _chromium() -> str | None:
    path = shutil.which("chromium") or ("/usr/bin/chromium"
                                        if os.path.exists("/usr/bin/chromium") else None)
    if path is None and os.environ.get("LIMBTRACE_INSTALL_CHROMIUM") == "1":
        subprocess.run(["apt-get", "install", "-y", "chromium"], check=True,
                       capture_output=True, timeout=600)
        path = shutil.which("chromium")
    return path


def test_report_renders_in_headless_chromium(constrained, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("no chromium at /usr/bin/chromium (set LIMBTRACE_INSTALL_CHROMIUM=1 to "
                    "install it with apt-get)")
    meas, inf, obs, curves = constrained
    report = tmp_path / "report.html"
    write_report_html(report, meas, inf, obs, curves=curves)
    shot = tmp_path / "shot.png"
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             f"--user-data-dir={tmp_path / 'profile'}"]
    subprocess.run([browser, *flags, f"--screenshot={shot}", "--window-size=1200,3000",
                    report.as_uri()], capture_output=True, timeout=60, check=False)
    assert shot.is_file() and shot.stat().st_size > 20_000
    img = np.asarray(Image.open(shot).convert("RGB"))
    assert img.shape[:2] == (3000, 1200)
    # The figures drew: the page's own styles have no green, the channel plots do. (Measured
    # here: about 5800 such pixels with the figures, about 230 with the images removed.)
    r, g, b = (img[..., k].astype(int) for k in range(3))
    assert np.count_nonzero((g > r + 40) & (g > b + 40)) > 1500
    dom = subprocess.run([browser, *flags, "--dump-dom", report.as_uri()],
                         capture_output=True, timeout=60, text=True).stdout
    assert dom.count("<img") == 6 and "What the data constrain" in dom


def test_lens_error_named_with_its_remedy():
    # The rg sentence names the colour offset's share of the error (r offset error x plate
    # scale) when it is 0.1 arcsec or more, and points to a calibration when the offset
    # came from the horizon; a calibration's own offsets carry no such hint.
    from types import SimpleNamespace

    from analyse.report._words import _lens_error

    def ob(err_px, source):
        return SimpleNamespace(colour_offset_dy_err_px={"r": err_px},
                               plate_scale_arcsec_per_px=4.0, colour_offset_source=source)

    words = _lens_error(ob(0.25, "horizon edge"))
    assert "1.0 arcsec" in words and "limbtrace calibrate" in words
    assert "calibrate" not in _lens_error(ob(0.25, "calibration"))
    assert _lens_error(ob(0.01, "horizon edge")) == ""


def test_apexes_after_a_channels_last_light_are_not_drawn():
    # After a channel's measured last light (plus its error) its light is below the
    # detection level; an apex found there is noise and figure (a) leaves it out.
    from types import SimpleNamespace

    from analyse.report._panels import _before_last

    tab = SimpleNamespace(t_unix_s=np.array([0.0, 1.0, 2.0, 3.0]))
    ob = SimpleNamespace(last={"g": SimpleNamespace(t_unix_s=1.9, err_s=0.2),
                               "r": SimpleNamespace(t_unix_s=float("nan"), err_s=float("nan"))})
    assert _before_last(tab, ob, "g").tolist() == [True, True, True, False]
    assert _before_last(tab, ob, "r").size == 4
