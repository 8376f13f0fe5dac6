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
