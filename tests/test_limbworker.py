"""analyse._limbworker: the worker process returns what measure_limbs returns here."""

from __future__ import annotations

import numpy as np
import pytest

from analyse import limb as lb
from analyse._limbworker import LimbMeasurer
from analyse.horizon import find_horizon
from tests.synthetic import Scene, render


def _jobs():
    for seed in (21, 22, 23):
        img, _ = render(Scene(seed=seed))
        line = find_horizon(img)
        yield img, line, lb.locate_sun(img, line)


def test_worker_and_here_give_the_same_limbs_in_order():
    jobs = list(_jobs())
    got = {}
    for parallel in (False, True):
        with LimbMeasurer(parallel) as m:
            for job in jobs:
                m.submit(*job)
            got[parallel] = [m.result() for _ in jobs]
    for here, there in zip(got[False], got[True]):
        for c in "rgb":
            a, b = here[c], there[c]
            assert a.flags == b.flags
            np.testing.assert_array_equal([a.apex_height_px, a.flux, a.width_px],
                                          [b.apex_height_px, b.flux, b.width_px])


def test_an_error_in_the_worker_is_raised_here():
    img, line, sun = next(_jobs())
    with LimbMeasurer(True) as m:
        m.submit(img[..., 0], line, sun)  # not (H, W, 3): measure_limbs refuses it
        with pytest.raises(RuntimeError, match="image must be"):
            m.result()
