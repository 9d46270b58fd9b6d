"""Helpers of the end-to-end tests: scenarios, simulated recordings and CLI runs, cached.

A recording is simulated once (``analyse.writers.run_simulate``) and its report or
verdict computed once per test session, also when pytest-xdist spreads the tests over
several worker processes: every worker looks into one shared cache folder, and a file
lock lets the first one build an entry while the others wait for it and then read it.

Per-frame facts that the truth file does not hold (the shake drawn for each frame) are
recorded while the frames are rendered, by wrapping the simulator's frame iterator.
"""

from __future__ import annotations

import contextlib
import copy
import fcntl
import io
import json
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["BASE_SCENARIO", "RECORDINGS", "scenario", "toml_text", "Cache", "Recording", "Report",
           "CliRun", "run_cli", "shared_root",
           "read_frames_table", "write_frames_csv", "read_frames_csv"]

# The base scenario: a fictional site in open water, 640 x 360 frames at 4 arcsec/px
# (the disc about 470 px wide), 2 fps while the disc sinks and 8 fps through the green
# segment, locked exposure, no lens artefacts. Variants override parts of it.
BASE_SCENARIO: dict[str, Any] = {
    "site": {"name": "Test shore", "latitude_deg": 35.2, "longitude_deg": -20.4,
             "eye_height_m": 10.0},
    "air": {"temperature_C": 16.0, "pressure_hPa": 1015.0, "relative_humidity": 0.7},
    "atmosphere": {"lapse_rate_K_per_km": 6.5, "layer_top_m": 100.0},
    "time": {"date": "2026-06-21", "last_seconds": 18.0, "after_seconds": 1.5,
             "burst": [{"start_s": 0.0, "count": 20, "fps": 2.0},
                       {"start_s": 10.0, "count": 76, "fps": 8.0}]},
    "camera": {"width_px": 640, "height_px": 360, "plate_scale_arcsec_per_px": 4.0,
               "horizon_row_px": 250.0, "psf_sigma_px": 0.9, "read_noise_e": 3.0,
               "full_well_e": 20000.0, "exposure": "locked", "exposure_level": 0.7},
    "scene": {"sky_level": 0.03, "sea_level": 0.3, "glitter": True, "glitter_level": 0.2},
    "output": {"format": "png", "seed": 1, "clock_uncertainty_s": 0.2},
}


def scenario(**tables: dict[str, Any] | None) -> dict[str, Any]:
    """The base scenario with tables updated key by key (a value None removes the key)."""
    out = copy.deepcopy(BASE_SCENARIO)
    for name, update in tables.items():
        table = out.setdefault(name, {})
        for key, value in (update or {}).items():
            if value is None:
                table.pop(key, None)
            else:
                table[key] = value
    return out


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(float(v)) if isinstance(v, float) else str(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {v!r} as TOML")


def toml_text(doc: dict[str, Any]) -> str:
    """A scenario dict as TOML (lists of dicts in [time] become [[time.burst]] tables)."""
    lines: list[str] = []
    for name, table in doc.items():
        lines.append(f"[{name}]")
        arrays = {k: v for k, v in table.items() if isinstance(v, list) and v
                  and isinstance(v[0], dict)}
        lines += [f"{k} = {_toml_value(v)}" for k, v in table.items() if k not in arrays]
        for key, items in arrays.items():
            for item in items:
                lines.append(f"[[{name}.{key}]]")
                lines += [f"{k} = {_toml_value(v)}" for k, v in item.items()]
        lines.append("")
    return "\n".join(lines)


@dataclass(frozen=True)
class CliRun:
    """One in-process run of the command line."""

    code: int
    stdout: str
    stderr: str


def run_cli(*argv: str | Path) -> CliRun:
    """``limbtrace ARGV`` in this process; its exit status and what it printed."""
    from analyse.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return CliRun(int(code), out.getvalue(), err.getvalue())


@dataclass(frozen=True)
class Recording:
    """A simulated sunset folder, its truth and the shake of each frame."""

    folder: Path
    truth: dict[str, Any]
    shake_px: np.ndarray  # (N, 2) dx right, dy down, per frame [px]
    true_unix_s: np.ndarray  # (N,) true frame times [s]


@dataclass(frozen=True)
class Report:
    """A run of ``limbtrace report`` and its output folder."""

    run: CliRun
    out: Path

    @property
    def result(self) -> dict[str, Any]:
        return json.loads((self.out / "result.json").read_text(encoding="utf-8"))

    def frames(self):
        return read_frames_table(self.out / "frames.ecsv")


def read_frames_table(path: Path):
    from astropy.table import Table

    return Table.read(path, format="ascii.ecsv")


def _simulate(scenario_doc: dict[str, Any], work: Path, name: str) -> None:
    """Render a scenario into ``work/name`` with per-frame facts in ``work/name.frames.json``."""
    from analyse import writers

    path = work / f"{name}.scenario.toml"
    path.write_text(toml_text(scenario_doc), encoding="utf-8")
    records: list = []
    original = writers.iter_frames

    def spy(sim, **kwargs):
        for record, image in original(sim, **kwargs):
            records.append(record)
            yield record, image

    writers.iter_frames = spy
    try:
        writers.run_simulate(path, work / name, quiet=True)
    finally:
        writers.iter_frames = original
    facts = {"shake_px": [list(r.shake_px) for r in records],
             "true_unix_s": [r.t_unix_s for r in records]}
    (work / f"{name}.frames.json").write_text(json.dumps(facts), encoding="utf-8")


class Cache:
    """Recordings and command runs shared by every test (and xdist worker) of a session."""

    def __init__(self, root: Path) -> None:
        self.root = Path(root)
        self.root.mkdir(parents=True, exist_ok=True)

    @contextlib.contextmanager
    def _lock(self, name: str):
        with open(self.root / f".{name}.lock", "w") as handle:
            fcntl.flock(handle, fcntl.LOCK_EX)
            try:
                yield
            finally:
                fcntl.flock(handle, fcntl.LOCK_UN)

    def once(self, name: str, build: Callable[[Path], None]) -> Path:
        """``root/name``, built by ``build(root/name)`` the first time it is asked for."""
        target = self.root / name
        done = self.root / f".{name}.done"
        with self._lock(name):
            if not done.exists():
                if target.exists():
                    shutil.rmtree(target)
                target.mkdir()
                build(target)
                done.write_text("ok", encoding="utf-8")
        return target

    def recording(self, name: str, scenario_doc: dict[str, Any]) -> Recording:
        """A simulated sunset folder for a scenario (see :func:`scenario`)."""
        work = self.once(f"sim-{name}", lambda d: _simulate(scenario_doc, d, name))
        facts = json.loads((work / f"{name}.frames.json").read_text(encoding="utf-8"))
        truth = json.loads((work / f"{name}.truth.json").read_text(encoding="utf-8"))
        return Recording(work / name, truth, np.array(facts["shake_px"], float),
                         np.array(facts["true_unix_s"], float))

    def report(self, rec: Recording, *extra: str) -> Report:
        """``limbtrace report FOLDER --out <cache>/... --quiet``, run once."""
        key = f"report-{rec.folder.name}" + "".join(e.strip("-") for e in extra)

        def build(d: Path) -> None:
            run = run_cli("report", rec.folder, "--out", d / "out", "--quiet", *extra)
            (d / "run.json").write_text(json.dumps(run.__dict__), encoding="utf-8")

        d = self.once(key, build)
        run = CliRun(**json.loads((d / "run.json").read_text(encoding="utf-8")))
        return Report(run, d / "out")

    def verify(self, folder: Path, key: str) -> tuple[CliRun, dict[str, Any] | None]:
        """``limbtrace verify FOLDER --out <cache>/... --quiet``, run once; verdict.json."""

        def build(d: Path) -> None:
            run = run_cli("verify", folder, "--out", d / "out", "--quiet")
            (d / "run.json").write_text(json.dumps(run.__dict__), encoding="utf-8")

        d = self.once(f"verify-{key}", build)
        run = CliRun(**json.loads((d / "run.json").read_text(encoding="utf-8")))
        verdict = d / "out" / "verdict.json"
        return run, (json.loads(verdict.read_text(encoding="utf-8")) if verdict.is_file()
                     else None)


def shared_root(base_temp: Path) -> Path:
    """One folder for every xdist worker of a session (each has its own base temp below)."""
    worker = os.environ.get("PYTEST_XDIST_WORKER")
    return (Path(base_temp).parent if worker else Path(base_temp)) / "e2e-cache"


def read_frames_csv(path: Path) -> list[tuple[str, str]]:
    rows = Path(path).read_text(encoding="utf-8").splitlines()[1:]
    return [tuple(r.split(",", 1)) for r in rows if r.strip()]  # type: ignore[misc]


def write_frames_csv(path: Path, rows: list[tuple[str, str]]) -> None:
    Path(path).write_text("file,time_utc\n" + "".join(f"{f},{t}\n" for f, t in rows),
                          encoding="utf-8")


def _site(lat: float, eye: float, name: str = "Test shore") -> dict[str, Any]:
    return {"name": name, "latitude_deg": lat, "eye_height_m": eye}


# The recordings the end-to-end tests share (by name, so that test_end_to_end.py and
# test_verify.py reuse each other's). Inference cases span GAMMA -25..40 K/km, eye
# heights 5-20 m and latitudes 30-60 deg; each also exercises one camera variant.
RECORDINGS: dict[str, dict[str, Any]] = {
    # PNG, no lens artefacts; a site name with markup for the escaping check.
    "base": scenario(site=_site(35.2, 10.0, "Test <b>x</b> shore & cove")),
    # 16-bit TIFF, an isothermal layer, low eye, low latitude.
    "tiff16": scenario(site=_site(30.5, 5.0), atmosphere={"lapse_rate_K_per_km": 0.0},
                       output={"format": "tiff", "seed": 2}),
    # JPEG quality 85 (4:2:0 chroma) with EXIF times, an inversion.
    "jpeg85": scenario(site=_site(50.0, 15.0), atmosphere={"lapse_rate_K_per_km": -25.0},
                       output={"format": "jpeg", "jpeg_quality": 85, "seed": 3}),
    # Mild shake (0.5 px rms per axis) and a rolled horizon, superadiabatic air.
    "shake": scenario(site=_site(45.0, 20.0), atmosphere={"lapse_rate_K_per_km": 20.0},
                      camera={"shake_px": 0.5, "roll_deg": 0.5}, output={"seed": 4}),
    # H.264 4:2:0 video, strongly superadiabatic air, high latitude.
    "h264": scenario(site=_site(58.0, 8.0), atmosphere={"lapse_rate_K_per_km": 40.0},
                     output={"format": "h264", "seed": 5}),
    # Lateral colour: red 1.5 px from green (1.2 right, 0.9 up), blue opposite.
    "lateral": scenario(site=_site(40.0, 12.0), atmosphere={"lapse_rate_K_per_km": 12.0},
                        camera={"channel_offset_px": {"r": [1.2, -0.9], "b": [-1.2, 0.9]}},
                        output={"seed": 6}),
    # HD video at 30 fps (the frame rate of most cameras' video): 1920 x 1080 at 5 arcsec/px,
    # the last 6 s before green last light and 1.5 s after, H.264, slight shake and lens
    # colour offsets. After sunset H.264's smoothed noise leaves the sky's glow above the
    # Sun standing out; it must not be taken for the Sun.
    "hd30": scenario(camera={"width_px": 1920, "height_px": 1080,
                             "plate_scale_arcsec_per_px": 5.0, "horizon_row_px": 700.0,
                             "shake_px": 0.3,
                             "channel_offset_px": {"r": [0.3, 0.0], "b": [-0.3, 0.1]}},
                     time={"last_seconds": 6.0, "after_seconds": 1.5, "burst": None,
                           "fps": 30.0},
                     output={"format": "h264", "seed": 4}),
    # Automatic exposure (the gain follows the dimming Sun with a 0.5 s lag, up 12-fold),
    # written to each JPEG's EXIF exposure time.
    "auto": scenario(camera={"exposure": "auto"},
                     output={"format": "jpeg", "jpeg_quality": 95, "seed": 9}),
    # The Sun still well up when the recording stops: no last light, no green segment
    # (frames over the first 16 s of a window that ends at green last light 44 s later;
    # at 8 arcsec/px the horizon beside the disc stays in view).
    "early": scenario(time={"last_seconds": 60.0, "after_seconds": 0.0, "burst": None,
                            "frame_times_s": [float(k) for k in range(16)]},
                      camera={"plate_scale_arcsec_per_px": 8.0, "horizon_row_px": 280.0}),
}
