"""Rebuild the demo sunset folder ``sample_frames/`` from ``scripts/sample_scenario.toml``.

The scenario is fictional (an invented site, date and camera); the frames are rendered
by ``limbtrace simulate`` (analyse.writers.run_simulate) and replace the folder. Its truth
file, the scenario's true observables, is written beside it as
``sample_frames.truth.json``. The folder must stay under 5 MB.

    .venv/bin/python scripts/make_sample_frames.py
"""

from __future__ import annotations

import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SCENARIO = REPO / "scripts" / "sample_scenario.toml"
FOLDER = REPO / "sample_frames"
MAX_BYTES = 5_000_000
HEADER = """\
# Demo sunset folder: a fictional scenario, simulated frames (scripts/make_sample_frames.py
# from scripts/sample_scenario.toml). "Cape Ardent" is an invented headland on an invented
# coast; its coordinates lie in open ocean water so that it names no real place.
"""


def main() -> int:
    sys.path.insert(0, str(REPO))
    from analyse.writers import run_simulate, truth_path

    truth = run_simulate(SCENARIO, FOLDER, force=True)
    observation = FOLDER / "observation.toml"
    observation.write_text(HEADER + observation.read_text(encoding="utf-8"), encoding="utf-8")
    size = sum(p.stat().st_size for p in FOLDER.iterdir())
    frames = truth["rendering"]["frame_count"]
    print(f"{FOLDER.name}/: {frames} frames, {size / 1e6:.2f} MB; truth in "
          f"{truth_path(FOLDER).name}")
    print(f"green last light {truth['last_light_utc']['g']}, green lasts "
          f"{truth['green_duration_s']:.2f} s, green above red {truth['rg_offset_arcsec']:.1f}\"")
    if size > MAX_BYTES:
        print(f"too large: {size} bytes > {MAX_BYTES}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
