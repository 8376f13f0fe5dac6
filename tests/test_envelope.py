"""Lower envelopes and their step functions at the edges: rows without any breakpoint
(policy/assessment/sweep/envelope.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy.assessment.sweep import lower_envelope, ratio_axis, sweep_one
from policy.assessment.sweep.envelope import envelope_functions
from policy.decision.costs import Costs
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellLayout


def flat_outcome_levels(rng, n_cells=30, L=3):
    """Risk levels whose first outcome has the same probability at every decision level (the
    decision prevents none of it), so sweeping its cost moves no cell: no breakpoints."""
    p = np.sort(rng.uniform(0.0, 0.6, size=(n_cells, 2, L)), axis=-1)[..., ::-1].copy()
    p[:, 0, :] = p[:, 0, :1]
    frame = pd.DataFrame({
        "cell": pd.Categorical.from_codes(np.arange(n_cells), categories=[f"c{i}" for i in range(n_cells)], ordered=True),
        "group": pd.Categorical.from_codes(np.arange(n_cells), categories=[f"g{i}" for i in range(n_cells)], ordered=True),
    })
    layout = CellLayout(frame, (), ("group",), None)
    levels = tuple(f"l{d}" for d in range(L))
    outcomes = ("o0", "o1")
    rl = RiskLevels(layout, levels, levels, outcomes, outcomes, rng.integers(1, 100, n_cells).astype(float), p,
                    np.zeros_like(p, dtype=bool), {}, np.zeros((2, L), dtype=bool))
    decision = np.cumsum(rng.uniform(0, 400, size=(n_cells, L)), axis=1)
    decision[:, 0] = 0.0
    costs = Costs(decision, np.array([1500.0, 2500.0]), "USD", levels, outcomes)
    return rl, costs


def test_envelope_functions_of_rows_without_breakpoints():
    # Reference: numpy's argmin (first minimum = the more lenient level) and min over the levels.
    # Each row's lines are parallel (one slope per row), so the lowest intercept wins everywhere.
    A = np.array([[1.0, 2.0, 3.0], [4.0, 0.5, 5.0], [2.0, 2.0, 1.0]])
    B = np.array([[1.0, 1.0, 1.0], [-2.0, -2.0, -2.0], [0.0, 0.0, 0.0]])
    w = np.array([2.0, 3.0, 5.0])
    env = lower_envelope(A, B)
    assert (env.count == 0).all()
    shares, total = envelope_functions(env, w, A, B)
    assert len(shares.knots) == 0 and len(total.knots) == 0
    for r in (-10.0, 0.0, 0.3, 7.0):
        values = A + r * B
        np.testing.assert_allclose(shares(r), np.bincount(np.argmin(values, axis=1), weights=w, minlength=3))
        coef = total(r)
        assert coef[0] + r * coef[1] == pytest.approx(values.min(axis=1).sum(), rel=1e-12)


def test_one_ratio_sweep_of_an_outcome_no_decision_prevents():
    # Sweeping the cost of an outcome the decision does not change: every cell keeps the level
    # of least expected cost at any ratio (numpy's argmin of the per-cell expected costs).
    rng = np.random.default_rng(11)
    rl, costs = flat_outcome_levels(rng)
    axis = ratio_axis(rl, costs, "o0")
    s = sweep_one(rl, costs, axis, 0.0, 50.0)
    assert (s.envelope.count == 0).all()
    for r in (0.0, 1.0, 50.0):
        c = costs.with_outcome_cost(0, r * axis.reference_cost)
        expected = c.decision + np.einsum("gjd,j->gd", rl.p, c.outcome)
        best = np.argmin(expected, axis=1)
        np.testing.assert_allclose(s.share_at(r), np.bincount(best, weights=rl.weights, minlength=3) / rl.weights.sum())
        optimum = np.sum(rl.weights * expected.min(axis=1)) / rl.weights.sum()
        assert s.optimal_cost_at(r) == pytest.approx(optimum, rel=1e-12)
    assert s.segments()["from_ratio"].min() == pytest.approx(0.0)


def test_envelope_of_a_single_level():
    # one decision level: one line per row, no breakpoint columns (L - 1 = 0), everything at level 0
    A, B = np.array([[3.0], [1.0]]), np.array([[2.0], [-1.0]])
    w = np.array([4.0, 6.0])
    env = lower_envelope(A, B)
    assert env.breaks.shape == (2, 0) and env.at_break.shape == (2, 0)
    assert env.count.tolist() == [0, 0] and env.levels.tolist() == [[0], [0]]
    np.testing.assert_array_equal(env.level_at(np.array([-5.0, 0.0, 5.0])), np.zeros((3, 2)))
    shares, total = envelope_functions(env, w, A, B)
    np.testing.assert_array_equal(shares(1.5), [10.0])
    np.testing.assert_array_equal(total(1.5), [4.0, 1.0])   # intercepts 3 + 1, slopes 2 - 1


def test_envelope_pads_unused_positions_and_reports_where_leniency_ends():
    # row 0: lines 0, 1, 2 with slopes 2, 1, 0: level 2 (the smallest slope... at r -> -inf the
    # largest slope is lowest) -- reference: numpy's argmin at points far out on either side
    A = np.array([[0.0, 1.0, 3.0], [0.0, 0.0, 0.0], [5.0, 1.0, 0.0]])
    B = np.array([[1.0, 0.0, -1.0], [0.0, 0.0, 0.0], [-1.0, 0.0, 1.0]])
    env = lower_envelope(A, B)
    far = np.array([-1e6, 1e6])
    grid = np.argmin(A[None] + far[:, None, None] * B[None], axis=-1)
    np.testing.assert_array_equal(env.level_at(far), grid)
    # row 0 starts lenient and leaves it at r = 1 (0 + r = 1); row 1 is lenient everywhere (ties
    # to the lenient level, no breakpoint); row 2 starts at the harshest level: leniency never
    # holds on a first segment, -inf
    np.testing.assert_array_equal(env.count, [2, 0, 2])
    np.testing.assert_allclose(env.lenient_until(), [1.0, np.inf, -np.inf])
    # positions beyond a row's breakpoints hold +inf (breaks) and -1 (levels, at_break)
    np.testing.assert_array_equal(env.breaks[1], [np.inf, np.inf])
    np.testing.assert_array_equal(env.levels[1], [0, -1, -1])
    np.testing.assert_array_equal(env.at_break[1], [-1, -1])


def test_step_function_without_events_and_pieces_from_a_knot():
    from policy.assessment.sweep import StepFunction

    flat = StepFunction.from_events(np.array([2.0, 5.0]), np.zeros(0), np.zeros((0, 2)), np.zeros((0, 2)))
    assert flat.knots.shape == (0,) and flat.at.shape == (0, 2)
    np.testing.assert_array_equal(flat(np.array([-1.0, 0.0, 3.0])), [[2.0, 5.0]] * 3)
    edges, values = flat.pieces(0.0, 1.0)
    np.testing.assert_array_equal(edges, [0.0, 1.0])
    np.testing.assert_array_equal(values, [[2.0, 5.0]])
    # the worked example of test_sweep.py: 1 before 1, 3 on (1, 2), 2.5 after 2; a range that
    # starts or ends on a knot has no empty piece
    f = StepFunction.from_events(np.array([1.0]), np.array([2.0, 1.0, 2.0]),
                                 np.array([[-1.0], [2.0], [0.5]]), np.array([[0.0], [2.0], [0.5]]))
    edges, values = f.pieces(1.0, 2.5)
    np.testing.assert_array_equal(edges, [1.0, 2.0, 2.5])
    np.testing.assert_array_equal(values[:, 0], [3.0, 2.5])
    edges, values = f.pieces(0.5, 2.0)
    np.testing.assert_array_equal(edges, [0.5, 1.0, 2.0])
    np.testing.assert_array_equal(values[:, 0], [1.0, 3.0])


def _three_lines(t, gap):
    # slopes 1, 0, -1 (levels 0, 1, 2): level 0 meets level 1 at t and level 2 at t + gap, so
    # level 1 is optimal only on (t, t + 2 gap)
    return np.array([[0.0, t, 2.0 * (t + gap)]]), np.array([[1.0, 0.0, -1.0]])


@pytest.mark.parametrize("t, gap, one_point", [
    (1e6, 1e-4, True),        # 1e-10 of the crossing: within the relative tolerance (1e-9 of |r|)
    (1e6, 1e-2, False),       # 1e-8 of it: two breakpoints
    (1.0, 0.5e-9, True),      # near 0 the tolerance is absolute: 1e-9
    (1.0, 1.5e-9, False),
])
def test_crossings_closer_than_the_tolerance_count_as_one_point(t, gap, one_point):
    # CONCURRENT_TOLERANCE (policy/assessment/sweep/axes.py): crossings within 1e-9 * max(1, |r|) are one
    # breakpoint, where the rule takes the most lenient tied level
    A, B = _three_lines(t, gap)
    env = lower_envelope(A, B)
    if one_point:
        assert env.count[0] == 1 and env.levels[0].tolist() == [0, 2, -1]
        assert env.breaks[0, 0] == pytest.approx(t, rel=1e-9) and env.at_break[0, 0] == 0
    else:
        assert env.count[0] == 2 and env.levels[0].tolist() == [0, 1, 2]
        np.testing.assert_allclose(env.breaks[0], [t, t + 2 * gap], rtol=1e-15)


def test_a_piece_shorter_than_the_concurrency_tolerance_joins_the_previous_breakpoint():
    # Three lines (slopes 1 + 2.2e-10, 1 and 0) crafted so that the middle one is lowest only on
    # an interval of about 1.06e-6 after t0 = 1057.628082, just under the concurrency tolerance
    # at its end t1 (1e-9 x |t1|), while the third line's crossing with the first, computed in floating
    # point, lies just beyond it (it is not concurrent at t0; found by a search over such
    # triples). The sweep meets the middle line's end within the tolerance of its previous
    # breakpoint and merges the two: one breakpoint, from the first line to the third, and the
    # lowest level tied there. Checked against the lines evaluated by numpy on either side.
    A = np.array([0.0, 2.3732310975812025e-07, 1057.628083510924])
    B = np.array([1.0000000002243918, 1.0, 0.0])
    t0 = (A[1] - A[0]) / (B[0] - B[1])
    assert (A[2] - A[0]) / (B[0] - B[2]) > t0 + 1e-9 * t0          # not concurrent at t0
    t1 = (A[2] - A[1]) / (B[1] - B[2])
    assert t0 < t1 <= t0 + 1e-9 * t1                                # but ends within the tolerance
    for order in ([0, 1, 2], [2, 1, 0]):                             # the same lines, levels reversed
        env = lower_envelope(A[None, order], B[None, order])
        first, last = order.index(0), order.index(2)
        assert env.count.tolist() == [1]
        assert env.breaks[0, 0] == pytest.approx(t0, rel=1e-12) and env.breaks[0, 1] == np.inf
        assert env.levels[0].tolist() == [first, last, -1]
        # every line is within the tolerance of the others at t0: the tie goes to the lowest level
        assert env.at_break[0].tolist() == [0, -1]
        for r, level in ((t0 - 1.0, first), (t0 + 1.0, last)):
            assert int(np.argmin(A[order] + r * B[order])) == level


def test_a_crossing_exactly_at_the_concurrency_tolerance_counts_as_the_same_point():
    # lines 0 + 2r, 500 + 1.5r, T + r: the first two cross at t0 = 1000 (by hand), the first and
    # the third at T (the slopes differ by exactly 1). T = t0 + 1e-9 x t0, the tolerance's edge
    # computed as the sweep computes it, still counts as concurrent (the same boundary as the
    # merge into a previous breakpoint): one breakpoint, straight to the smallest slope. One
    # floating-point step further it is a crossing of its own, at t0 + 2 x 1e-6 (by hand).
    from policy.assessment.sweep.axes import CONCURRENT_TOLERANCE

    t0 = 1000.0
    T = t0 + CONCURRENT_TOLERANCE * max(1.0, t0)
    B = np.array([[2.0, 1.5, 1.0]])
    env = lower_envelope(np.array([[0.0, 500.0, T]]), B)
    assert env.count.tolist() == [1] and env.breaks[0, 0] == t0
    assert env.levels[0].tolist() == [0, 2, -1] and env.at_break[0].tolist() == [0, -1]
    env = lower_envelope(np.array([[0.0, 500.0, np.nextafter(T, np.inf)]]), B)
    assert env.count.tolist() == [2] and env.levels[0].tolist() == [0, 1, 2]
    assert env.breaks[0, 0] == t0 and env.breaks[0, 1] == pytest.approx(t0 + 2e-6, rel=1e-12)
