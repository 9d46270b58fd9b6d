"""The lens colour offsets' error: in the pipeline's median and in the inference's fit."""

from __future__ import annotations

import numpy as np
import pytest

from analyse import infer
from analyse import pipeline as pl
from analyse.frames import FrameSet


def test_profiled_offset_is_the_marginal_chi2():
    # A linear nuisance term with a Gaussian prior, profiled, gives the chi-square of the
    # covariance with that term marginalised: r^T (C + J S J^T)^-1 r (the Woodbury
    # identity; e.g. Press et al., Numerical Recipes 3rd ed. (2007) 2.7.3 and 15.4).
    rng = np.random.default_rng(1)
    n = 12
    vals, rate = rng.normal(20, 5, n), rng.normal(0, 1, n)
    y, err = vals + rng.normal(0, 0.5, n), rng.uniform(0.3, 0.8, n)
    is_h = np.arange(n) < 10
    col = np.zeros((n, 1))
    col[:5, 0] = 1.0  # the first channel's five height bins
    sig = np.array([0.2, 0.01, 1.3])  # clock [s], scale [-], offset [arcsec]
    j = np.hstack([np.vstack([-rate, np.where(is_h, vals, 0.0)]).T, col])
    cov = np.diag(err**2) + j @ np.diag(sig**2) @ j.T
    r = y - vals
    want = float(r @ np.linalg.solve(cov, r))
    got = infer._chi2(vals, rate, y, err, is_h, sig[0], sig[1], (col, sig[2:]))[0]
    assert got == pytest.approx(want, rel=1e-9)
    assert infer._chi2(vals, rate, y, err, is_h, sig[0], sig[1])[0] > got  # the term frees


def test_offset_columns_follow_the_observed_order():
    bins = {"r": np.zeros(3), "g": np.zeros(2)}
    data = infer._Data(bins, bins, bins, {"r": (0.0, 1.0), "g": (1.0, 1.0)}, {},
                       {"r": 0.8, "g": 0.0})
    cols, prior = infer._offset_terms(data)
    assert cols.shape == (3 + 2 + 2, 1) and prior.tolist() == [0.8]
    assert cols[:, 0].tolist() == [1, 1, 1, 0, 0, 0, 0]  # red heights only, not the times
    none = infer._Data(data.t_bins, data.h_bins, data.h_err, data.last, {}, {})
    assert infer._offset_terms(none) is None


def _fs(chroma, matrix):
    return FrameSet(folder=None, kind="stills", files=(), infos=(), time_source="x",
                    width=10, height=10, bit_depth=8, chroma_subsampling=chroma, notes=(),
                    colour_matrix=matrix)


def test_pipeline_offset_error_has_the_chroma_term_only_for_420():
    dy = {"r": [-0.4, -0.5, -0.45, -0.5], "b": [0.1, 0.0, 0.05, 0.1]}
    edge = {"step_r": [0.06] * 4, "step_g": [0.035] * 4, "step_b": [0.016] * 4,
            "clip_r": [0.0] * 4, "clip_g": [0.0] * 4, "clip_b": [0.0] * 4}
    off, source, err_png = pl._colour_offsets(None, dy, (0, 0), edge, _fs(None, None))
    assert source == "horizon edge" and off["r"] == pytest.approx(-0.475)
    # frames only: 1.2533 * 1.4826 * MAD / sqrt(n), MAD = 0.025
    assert err_png["r"] == pytest.approx(1.2533 * 1.4826 * 0.025 / 2.0)
    _, _, err_422 = pl._colour_offsets(None, dy, (0, 0), edge, _fs("4:2:2", "BT.601"))
    assert err_422 == err_png  # 4:2:2 keeps every row of chroma
    _, _, err_420 = pl._colour_offsets(None, dy, (0, 0), edge, _fs("4:2:0", "BT.601"))
    from analyse.horizon_colour import chroma_offset_error

    chroma = chroma_offset_error({"r": 0.06, "g": 0.035, "b": 0.016}, (0.299, 0.587, 0.114))
    assert err_420["r"] == pytest.approx(np.hypot(err_png["r"], chroma["r"]))
    assert err_420["g"] == 0.0
