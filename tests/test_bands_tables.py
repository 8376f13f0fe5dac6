"""Level thresholds, replicate statistics and the band tables of a one-ratio sweep, by hand
(policy/assessment/sweep/bands.py), on the three cells of tests/test_sweep_tables.py:
A harsher than level 0 above r = 2 and than level 1 above 4, B harsher than both above 4
(it skips level 1), C never.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from policy.assessment.sweep import LenientReplicates, lenient_replicates, level_thresholds, lower_envelope
from policy.assessment.sweep.bands import SweepBands, centred_interval

from .test_sweep_tables import hand  # noqa: F401  (the fixture)


def test_level_thresholds_by_hand(hand):  # noqa: F811
    _, _, _, _, s = hand
    np.testing.assert_array_equal(level_thresholds(s.envelope, 3), [[2.0, 4.0], [4.0, 4.0], [np.inf, np.inf]])


def test_level_thresholds_of_lines_that_start_harsh():
    # Reference: the definition "level(r) > d exactly for r > t_d", read off numpy's argmin
    # (first minimum) on a grid. Row 0: parallel lines, level 1 everywhere (harsher than 0 from
    # -inf); row 1: lines 0, 5 + 9 r, r - 1, levels 1, 2, 0 with breakpoints -0.75 and 1 (a row
    # whose level falls: the first rise above d counts); row 2: lines 2 r, 1 + r, 3, levels 0, 1, 2
    # with breakpoints 1 and 2.
    A = np.array([[1.0, 0.0, 5.0], [0.0, 5.0, -1.0], [0.0, 1.0, 3.0]])
    B = np.array([[0.0, 0.0, 0.0], [0.0, 9.0, 1.0], [2.0, 1.0, 0.0]])
    env = lower_envelope(A, B)
    t = level_thresholds(env, 3)
    np.testing.assert_array_equal(t, [[-np.inf, np.inf], [-np.inf, -0.75], [1.0, 2.0]])
    r = np.linspace(-5, 5, 1001)
    level = np.argmin(A[None] + r[:, None, None] * B[None], axis=-1)
    for row in (0, 2):
        for d in range(2):
            np.testing.assert_array_equal(level[:, row] > d, r > t[row, d])
    np.testing.assert_array_equal(level[:, 1] > 1, (r > -0.75) & (r < 1.0))


def test_lenient_replicates_by_hand(hand):  # noqa: F811
    rl, costs, axis, _, _ = hand
    index, groups = rl.layout.rule_index()
    # replicate 0: the estimates; replicate 1: cell A with no case; one grid of ratios
    p = np.stack([rl.p, rl.p])
    w = np.array([[2.0, 1.0, 1.0], [0.0, 1.0, 1.0]])
    out = lenient_replicates(p, w, costs, axis, index, len(groups), np.array([1.0, 3.0, 5.0]))
    np.testing.assert_allclose(out["share_lenient"], [[1.0, 0.5, 0.25], [1.0, 1.0, 0.5]])
    np.testing.assert_array_equal(out["thresholds"][0], [[2.0, 4.0], [4.0, 4.0], [np.inf, np.inf]])
    # the same weights for every replicate, given once
    once = lenient_replicates(p, rl.weights, costs, axis, index, len(groups), np.array([3.0]))
    np.testing.assert_allclose(once["share_lenient"], [[0.5], [0.5]])
    # the statistic clips the thresholds to the range and reads each replicate's weights
    batch = type("Batch", (), {"weights": w})()
    clipped = LenientReplicates(costs, axis, index, len(groups), np.array([3.0]), 2.5, 4.5)(p, batch)
    np.testing.assert_array_equal(clipped["thresholds"][0], [[2.5, 4.0], [4.0, 4.0], [4.5, 4.5]])
    np.testing.assert_allclose(clipped["share_lenient"], [[0.5], [1.0]])


def test_band_and_threshold_tables_by_hand(hand):  # noqa: F811
    rl, costs, axis, _, s = hand
    ratios = np.array([1.0, 3.0, 5.0])
    t = np.clip(level_thresholds(s.envelope, 3), s.lo, s.hi)
    bands = SweepBands(ratios, np.array([1.0, 0.5, 0.25]), np.array([0.9, 0.4, 0.2]), np.array([1.0, 0.6, 0.3]),
                       t, t - 0.5, t + 0.5, {"replicates": 3}, "95% bootstrap interval centred on the estimate",
                       np.array([0.95, 0.45, 0.2]), np.array([1.0, 0.55, 0.3]), t - 1.0, t + 1.0)
    table = bands.band_table(axis)
    expected = pd.DataFrame({"ratio": ratios, "cost": [200.0, 600.0, 1000.0], "share_lenient": [1.0, 0.5, 0.25],
                             "lower": [0.9, 0.4, 0.2], "upper": [1.0, 0.6, 0.3],
                             "percentile_lower": [0.95, 0.45, 0.2], "percentile_upper": [1.0, 0.55, 0.3]})
    pd.testing.assert_frame_equal(table, expected)
    th = bands.threshold_table(s)
    expected = pd.DataFrame({
        "group": ["g0", "g0", "g1", "g1", "g2", "g2"], "cases": [2.0, 2.0, 1.0, 1.0, 1.0, 1.0],
        "harsher_than": ["recognizance", "conditions & reporting"] * 3,
        "ratio": [2.0, 4.0, 4.0, 4.0, 6.0, 6.0], "lower": [1.5, 3.5, 3.5, 3.5, 5.5, 5.5],
        "upper": [2.5, 4.5, 4.5, 4.5, 6.5, 6.5],
        "cost": [400.0, 800.0, 800.0, 800.0, 1200.0, 1200.0], "cost_lower": [300.0, 700.0, 700.0, 700.0, 1100.0, 1100.0],
        "cost_upper": [500.0, 900.0, 900.0, 900.0, 1300.0, 1300.0],
        "percentile_lower": [1.0, 3.0, 3.0, 3.0, 5.0, 5.0], "percentile_upper": [3.0, 5.0, 5.0, 5.0, 7.0, 7.0],
    })
    pd.testing.assert_frame_equal(th, expected, check_dtype=False)
    # without the percentile intervals the columns are there, empty
    bare = SweepBands(ratios, bands.share, bands.lower, bands.upper, t, t, t, {}, "")
    assert bare.band_table(axis)[["percentile_lower", "percentile_upper"]].isna().all().all()
    assert (bare.band_table(axis)[["percentile_lower", "percentile_upper"]].dtypes == np.float64).all()
    assert bare.threshold_table(s)[["percentile_lower", "percentile_upper"]].isna().all().all()


def test_centred_interval_by_hand():
    # |replicate - point| = 0.1, 0.2, 0.3, 0.4: numpy's linear 50% quantile 0.25 (common practice)
    point = np.array([0.5])
    reps = np.array([[0.6], [0.3], [0.8], [0.1]])
    lo, hi = centred_interval(point, reps, 0.5)
    assert lo[0] == pytest.approx(0.25) and hi[0] == pytest.approx(0.75)
    lo, hi = centred_interval(point, reps, 0.5, 0.3, 0.7)            # clipped to [0.3, 0.7]
    assert (lo[0], hi[0]) == (pytest.approx(0.3), pytest.approx(0.7))
    # undefined in exactly half the replicates: no interval; in fewer than half: the rest decide;
    # each figure on its own count
    half = np.array([[np.nan, 0.5], [0.6, 0.5], [np.inf, 0.5], [0.4, 0.5]])
    lo, hi = centred_interval(np.array([0.5, 0.5]), half, 0.5)
    assert np.isnan(lo[0]) and np.isnan(hi[0]) and (lo[1], hi[1]) == (0.5, 0.5)
    most = np.array([[np.nan], [0.6], [0.7], [0.4]])
    lo, hi = centred_interval(point, most)
    assert hi[0] == pytest.approx(0.5 + np.percentile([0.1, 0.2, 0.1], 95))
    # one replicate: the interval reaches it on both sides
    lo, hi = centred_interval(point, np.array([[0.7]]))
    assert (lo[0], hi[0]) == (pytest.approx(0.3), pytest.approx(0.7))
    # a single figure without replicates; a figure undefined in every replicate, with no warning
    lo, hi = centred_interval(np.float64(0.5), np.empty(0))
    assert np.isnan(lo) and np.isnan(hi)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lo, hi = centred_interval(np.array([0.5, 0.5]), np.array([[np.nan, 0.4], [np.nan, 0.6]]))
    assert np.isnan(lo[0]) and np.isnan(hi[0]) and hi[1] == pytest.approx(0.6)


def test_level_thresholds_with_two_and_four_levels():
    # Reference: numpy's argmin (first minimum) on a grid, read as "level(r) > d iff r > t_d"
    rng = np.random.default_rng(3)
    for L in (2, 4):
        # levels that only grow with r: slopes decreasing in the level
        A = np.cumsum(rng.uniform(0, 2, (50, L)), axis=1)
        B = -np.cumsum(rng.uniform(0, 2, (50, L)), axis=1)
        env = lower_envelope(A, B)
        t = level_thresholds(env, L)
        r = np.linspace(-3, 8, 2201)
        level = np.argmin(A[None] + r[:, None, None] * B[None], axis=-1)
        for d in range(L - 1):
            on_grid = np.isin(r[:, None], t[:, d][None])    # at a threshold itself the tie goes lenient
            np.testing.assert_array_equal((level > d)[~on_grid.any(axis=1)], (r[:, None] > t[None, :, d])[~on_grid.any(axis=1)])
