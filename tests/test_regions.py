"""Lenient regions at their edges (policy/assessment/sweep/regions.py): the margins by hand, intervals
that are empty, and polygons clipped through a vertex, down to a point or into many sides.

References: the margins' definition (docs/method.md, robust lenient region) worked out by hand on the
three cells of tests/test_sweep_tables.py; the area of a regular n-gon circumscribed about the unit
circle, n tan(pi / n) (elementary geometry); triangles and trapezoids by hand.
"""

from __future__ import annotations

import numpy as np
import pytest

from policy.assessment.sweep import ratio_axis, sweep_one
from policy.assessment.sweep.regions import clip_polygons, interval_shares, lenient_margins, polygon_area
from policy.estimation.bounds import RiskBounds

from .test_sweep_tables import hand_example


def test_lenient_margins_of_the_point_estimate_by_hand():
    # Delta_g(d) = sum_x w [c_dec(0) - c_dec(d) + c (p_0 - p_d)], c = 200 r:
    # A (2 cases): -200 + 100 r, -400 + 150 r; B: -100 + 0 r, -200 + 50 r; C: -100, -200
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    index, groups = rl.layout.rule_index()
    m = lenient_margins(rl, costs, [axis], index, len(groups))
    np.testing.assert_allclose(m, [[[-200, 100], [-400, 150]], [[-100, 0], [-200, 50]], [[-100, 0], [-200, 0]]])
    # one rule cell for all: the sums
    m1 = lenient_margins(rl, costs, [axis], np.zeros(3, dtype=np.int64), 1)
    np.testing.assert_allclose(m1, [[[-400, 100], [-800, 200]]])


def test_bounds_lower_only_use_the_lower_ends():
    # lower = p - 0.125 for every level and upper = p itself (the same array): leniency is robust iff
    # sum_x w [c_dec(0) - c_dec(d) + c (p_0 - lower_d)] <= 0: A up to 4/3, B up to 8/3, C up to 4
    rl, costs = hand_example()
    lower = np.clip(rl.p - 0.125, 0.0, 1.0)
    b = RiskBounds("gamma=2", "Gamma = 2", lower, rl.p, 2.0, "sensitivity")
    s = sweep_one(rl, costs, ratio_axis(rl, costs, "o0"), 0.0, 6.0, assumptions=[b])
    low, high = s.lenient[0]
    assert np.isneginf(low).all()
    np.testing.assert_allclose(high, [4 / 3, 8 / 3, 4.0])


def test_interval_shares_leave_out_empty_intervals():
    # cases 5 never lenient (nan), 1 on (-inf, 2], 2 on [1, inf), 4 on [0.5, 0.75]
    f = interval_shares(np.array([np.nan, -np.inf, 1.0, 0.5]), np.array([np.nan, 2.0, np.inf, 0.75]),
                        np.array([5.0, 1.0, 2.0, 4.0]))
    r = np.array([-1.0, 0.5, 0.6, 0.75, 0.9, 1.0, 2.0, 2.5])
    np.testing.assert_allclose(f(r)[:, 0], [1, 5, 5, 5, 1, 3, 3, 2])


BOX = np.array([[0.0, 0.0], [4.0, 0.0], [4.0, 3.0], [0.0, 3.0]])


def clip(box, planes):
    return clip_polygons(np.asarray(box, dtype=float)[None].copy(), np.array([len(box)]), np.asarray(planes, float)[None])


def test_clipping_through_a_vertex_keeps_it_once():
    # x + y <= 4 passes through the corner (4, 0): the trapezoid (0,0), (4,0), (1,3), (0,3), area
    # 12 - 9/2 = 7.5 (by hand)
    V, cnt = clip(BOX, [[-4.0, 1.0, 1.0]])
    assert cnt[0] == 4
    np.testing.assert_allclose(V[0, :4], [[0, 0], [4, 0], [1, 3], [0, 3]], atol=1e-12)
    assert polygon_area(V, cnt)[0] == pytest.approx(7.5)


def test_clipping_through_a_corner_computed_in_floating_point():
    # the anti-diagonal of the square [0.1, 100000.1]^2, with coefficients 0.1 that floating point
    # does not hold exactly: the crossing at the far corner lands 6e-12 from it and is the same
    # vertex; the triangle has three vertices and area 1e10 / 2 (by hand)
    lo, hi = 0.1, 100000.1
    square = [[lo, lo], [hi, lo], [hi, hi], [lo, hi]]
    V, cnt = clip(square, [[-(0.1 * hi + 0.1 * lo), 0.1, 0.1]])
    assert cnt[0] == 3
    np.testing.assert_allclose(V[0, :3], [[lo, lo], [hi, lo], [lo, hi]], atol=1e-12 * hi)
    assert polygon_area(V, cnt)[0] == pytest.approx(5e9, rel=1e-9)


def test_clipping_down_to_a_point_or_a_segment_leaves_nothing():
    # x + y <= 0 touches the box at (0, 0) only; y <= 0 along one side: no area, no vertex
    for plane in ([0.0, 1.0, 1.0], [0.0, 0.0, 1.0]):
        V, cnt = clip(BOX, [plane])
        assert cnt[0] == 0
        assert polygon_area(V, cnt)[0] == 0.0


def test_twelve_tangents_cut_a_regular_polygon():
    # Reference: the regular n-gon circumscribed about the unit circle has its vertices at radius
    # 1 / cos(pi / n), in order, and area n tan(pi / n) (elementary geometry).
    n = 12
    theta = 0.1 + 2 * np.pi * np.arange(n) / n
    planes = np.column_stack([-np.ones(n), np.cos(theta), np.sin(theta)])
    V, cnt = clip([[-2.0, -2.0], [2.0, -2.0], [2.0, 2.0], [-2.0, 2.0]], planes)
    assert cnt[0] == n
    v = V[0, :n]
    np.testing.assert_allclose(np.hypot(v[:, 0], v[:, 1]), 1 / np.cos(np.pi / n), rtol=1e-12)
    turn = np.diff(np.unwrap(np.arctan2(v[:, 1], v[:, 0])))
    np.testing.assert_allclose(turn, 2 * np.pi / n, rtol=1e-9)     # counter-clockwise, one after another
    assert polygon_area(V, cnt)[0] == pytest.approx(n * np.tan(np.pi / n), rel=1e-12)


def test_no_polygons():
    V, cnt = clip_polygons(np.zeros((0, 4, 2)), np.zeros(0, dtype=np.int64), np.zeros((0, 2, 3)))
    assert V.shape == (0, 0, 2) and cnt.shape == (0,)
    assert polygon_area(V, cnt).shape == (0,)
