#!/usr/bin/env python3
"""Time the lapse-rate fit (target: under 5 s on this 2-core machine); prints, never asserts.

The measurement is made by the forward model itself (tests/test_infer.py), so only the
fit is timed: 17 trial atmospheres traced together, an emulated chi-square profile, and
the exact re-traces of its minimum and interval ends.
"""

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from analyse import infer  # noqa: E402
from tests.test_infer import synthetic_measurement  # noqa: E402


def main() -> None:
    meas, obs = synthetic_measurement(6.5)
    infer.infer_lapse_rate(meas, obs)  # warm: astropy tables, imports
    cpu, wall = time.process_time(), time.perf_counter()
    res = infer.infer_lapse_rate(meas, obs)
    cpu, wall = time.process_time() - cpu, time.perf_counter() - wall
    print(f"fit: {res.lapse_rate_K_per_km:.2f} +- {res.lapse_rate_err_K_per_km:.2f} K/km "
          f"(truth 6.5), status {res.status}")
    print(f"fit time: {cpu:.2f} s CPU, {wall:.2f} s wall; ratio to the 5 s target: "
          f"{cpu / 5.0:.2f} (CPU), {wall / 5.0:.2f} (wall)")


if __name__ == "__main__":
    main()
