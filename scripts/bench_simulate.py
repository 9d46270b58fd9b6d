"""Benchmark `limbtrace simulate`: a 640 x 480, 20-second, 30 fps sequence (target < 60 s).

Prints the wall time of the whole run (tracing the atmosphere, rendering, writing PNG
stills) and its ratio to the 60 s target, then the peak memory (resident set) of the
same run for 10 s and for 20 s of frames, each in a fresh process: memory must not grow
with the number of frames.

    .venv/bin/python scripts/bench_simulate.py            # all of it
    .venv/bin/python scripts/bench_simulate.py --seconds 5  # a quick timing only
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_S = 60.0  # issue 3: under 60 s on this machine

SCENARIO = """\
[site]
name = "Benchmark point"
latitude_deg = 35.2
longitude_deg = -20.4
eye_height_m = 12.0

[air]
temperature_C = 17.0
pressure_hPa = 1016.0
relative_humidity = 0.75

[time]
date = "2026-06-21"
last_seconds = {seconds}
after_seconds = 0.0
fps = 30.0

[camera]
width_px = 640
height_px = 480
plate_scale_arcsec_per_px = 5.0
horizon_row_px = 300.0
channel_offset_px = {{ r = [0.3, 0.0], b = [-0.3, 0.1] }}
shake_px = 0.3

[output]
format = "png"
seed = 1
"""


def run(seconds: float, folder: Path) -> float:
    """Simulate ``seconds`` of frames into ``folder``; return the wall time [s]."""
    from analyse.writers import run_simulate

    path = folder / "bench.toml"
    path.write_text(SCENARIO.format(seconds=seconds), encoding="utf-8")
    start = time.perf_counter()
    truth = run_simulate(path, folder / "frames", force=True, quiet=True)
    elapsed = time.perf_counter() - start
    print(f"  {truth['rendering']['frame_count']} frames of 640 x 480 in {elapsed:.1f} s "
          f"({1000 * elapsed / truth['rendering']['frame_count']:.0f} ms per frame)")
    return elapsed


def peak_rss_mb(seconds: float) -> float:
    """Peak resident memory [MB] of a fresh process simulating ``seconds`` of frames."""
    out = subprocess.run([sys.executable, __file__, "--seconds", str(seconds), "--child"],
                         check=True, capture_output=True, text=True).stdout
    return float(out.strip().splitlines()[-1])


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=20.0)
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    with tempfile.TemporaryDirectory() as tmp:
        if args.child:
            run(args.seconds, Path(tmp))
            print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
            return 0
        print(f"simulate: {args.seconds:g} s at 30 fps, 640 x 480, PNG")
        elapsed = run(args.seconds, Path(tmp))
    print(f"time: {elapsed:.1f} s = {elapsed / TARGET_S:.2f} x the {TARGET_S:g} s target")
    if args.seconds == 20.0:
        short, long = peak_rss_mb(10.0), peak_rss_mb(20.0)
        print(f"peak memory: {short:.0f} MB for 10 s, {long:.0f} MB for 20 s "
              f"(ratio {long / short:.2f})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
