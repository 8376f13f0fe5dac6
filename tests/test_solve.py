"""Costs and the unconstrained optimal rule."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy import Costs, InputError, RiskLevels, costs_from_scenario, estimate_risk_levels, optimal_rule
from policy.inputs.cells import CellLayout
from policy.decision.solve import argmin_lenient, rule_cell_costs


def make_risk_levels(p, weights=None, groups=None, rule=("tier",), protected=("group",)):
    """RiskLevels for hand-made probabilities p of shape (n_cells, J, L)."""
    n, J, L = p.shape
    frame = pd.DataFrame({
        "tier": pd.Categorical(np.arange(n) // 2 if groups is None else groups, ordered=True),
        "group": pd.Categorical(np.arange(n) % 2, ordered=True),
        "cell": pd.Categorical(np.arange(n), ordered=True),
    })
    layout = CellLayout(frame, tuple(protected), tuple(rule), "tier")
    return RiskLevels(
        layout=layout,
        level_values=tuple(f"l{d}" for d in range(L)),
        level_labels=tuple(f"level {d}" for d in range(L)),
        outcome_keys=tuple(f"o{j}" for j in range(J)),
        outcome_labels=tuple(f"outcome {j}" for j in range(J)),
        weights=np.ones(n) if weights is None else np.asarray(weights, float),
        p=p,
        borrowed=np.zeros_like(p, dtype=bool),
    )


def test_textbook_threshold_one_outcome_two_levels():
    # Elkan (2001), "The Foundations of Cost-Sensitive Learning" (docs/reference-values.md, seen in
    # the abstract; threshold derived): act iff the prevented risk p0 - p1 exceeds
    # (c_dec(1) - c_dec(0)) / c_outcome.
    rng = np.random.default_rng(5)
    n = 2_000
    p0 = rng.random(n)
    p1 = p0 * rng.random(n)
    rl = make_risk_levels(np.stack([p0, p1], axis=-1)[:, None, :], groups=np.arange(n), rule=("tier",))
    c_act, c_harm = 300.0, 1_000.0
    costs = Costs(np.tile([0.0, c_act], (n, 1)), np.array([c_harm]))
    rule = optimal_rule(rl, costs)
    act = rule.level[rl.layout.rule_index()[0]] == 1
    np.testing.assert_array_equal(act, (p0 - p1) > c_act / c_harm)


def test_ties_go_to_the_more_lenient_level():
    total = np.array([[5.0, 5.0, 7.0], [3.0, 2.0, 2.0], [1.0, 1.0 + 1e-13, 1.0]])
    np.testing.assert_array_equal(argmin_lenient(total), [0, 1, 0])
    # within the tolerance a lenient level counts as tied even where its cost is a rounding
    # error above the minimum (so a tolerance of zero fails) ...
    np.testing.assert_array_equal(argmin_lenient(np.array([[1.0 + 1e-13, 1.0, 5.0]])), [0])
    # ... and the tolerance is relative: a difference of 1e-3 on costs of 1e7 is 1e-10 of them
    # (tied), while on costs of 1 it is a real difference
    np.testing.assert_array_equal(argmin_lenient(np.array([[1e7 + 1e-3, 1e7], [1.0 + 1e-3, 1.0]])), [0, 1])
    # just outside the relative tolerance the cheaper harsher level wins
    np.testing.assert_array_equal(argmin_lenient(np.array([[1e7 * (1 + 1e-8), 1e7]])), [1])
    # an exact tie in expected cost: prevented risk times harm cost equals the decision cost
    p = np.array([[[0.5, 0.2]]])
    rl = make_risk_levels(p, groups=[0])
    rule = optimal_rule(rl, Costs(np.array([[0.0, 300.0]]), np.array([1000.0])))
    assert rule.level.tolist() == [0]


def test_rule_cells_sum_weighted_costs_like_pandas():
    rng = np.random.default_rng(9)
    n = 400
    p = -np.sort(-rng.random((n, 2, 3)), axis=-1)
    w = rng.integers(1, 50, n)
    groups = rng.integers(0, 12, n)
    rl = make_risk_levels(p, w, groups)
    costs = Costs(rng.uniform(0, 500, (n, 3)), np.array([800.0, 2500.0]))
    index, cells = rl.layout.rule_index()
    got = rule_cell_costs(rl, costs, index, len(cells))
    per_case = costs.decision + p[:, 0, :] * 800.0 + p[:, 1, :] * 2500.0
    ref = pd.DataFrame(per_case * w[:, None]).groupby(groups).sum().to_numpy()
    np.testing.assert_allclose(got, ref, rtol=1e-12)
    rule = optimal_rule(rl, costs)
    np.testing.assert_array_equal(rule.level, ref.argmin(axis=1))
    assert rule.is_deterministic
    np.testing.assert_allclose(rule.delta.sum(axis=1), 1.0)


def test_demo_costs_and_overrides(demo_scenario):
    rl = estimate_risk_levels(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    assert costs.decision.shape == (rl.n_cells, 3)
    assert (costs.decision[:, 0] == 0).all() and (costs.decision[:, 1] == 750).all()
    np.testing.assert_allclose(costs.decision[:, 2], rl.cell_costs["bond_cost"])
    other = costs_from_scenario(demo_scenario, rl, {"new_offense": 9000}, {"supervision": 100})
    assert other.outcome[1] == 9000 and (other.decision[:, 1] == 100).all()
    with pytest.raises(InputError, match="'arson' is not a declared outcome kind"):
        costs_from_scenario(demo_scenario, rl, {"arson": 1})
    with pytest.raises(InputError, match="'parole' is not a declared decision level"):
        costs_from_scenario(demo_scenario, rl, None, {"parole": 1})


def test_cheaper_harm_never_makes_the_rule_harsher(demo_scenario):
    # common practice (decision theory): lowering an outcome's cost can only move the optimum
    # toward more lenient levels in every rule cell
    rl = estimate_risk_levels(demo_scenario)
    base = costs_from_scenario(demo_scenario, rl)
    levels = [optimal_rule(rl, base.with_outcome_cost(2, c)).level for c in (200_000, 100_000, 50_000, 0)]
    for harsher, lenient in zip(levels, levels[1:]):
        assert (lenient <= harsher).all()


def test_tie_tolerance_at_its_edges_and_over_leading_axes():
    from policy.decision.solve import TIE_TOLERANCE

    # costs below 1 use an absolute floor of the tolerance: 0.5e-9 above a minimum of 0 is a
    # tie, 1.5e-9 is not
    np.testing.assert_array_equal(argmin_lenient(np.array([[0.5e-9, 0.0], [1.5e-9, 0.0]])), [0, 1])
    # a cost exactly at the edge of the tolerance still counts as tied
    np.testing.assert_array_equal(argmin_lenient(np.array([[1.0 + TIE_TOLERANCE, 1.0]])), [0])
    # with no tolerance: a plain argmin with exact ties to the first (most lenient) level
    np.testing.assert_array_equal(argmin_lenient(np.array([[2.0, 1.0, 1.0], [3.0, 3.0, 4.0]]), tol=0.0), [1, 0])
    # extra leading axes (bootstrap replicates): the argmin runs along the last axis only
    rng = np.random.default_rng(4)
    total = rng.random((2, 4, 3))
    np.testing.assert_array_equal(argmin_lenient(total), total.argmin(axis=-1))


def test_optimal_rule_names_its_cells_levels_and_cases():
    rng = np.random.default_rng(11)
    n = 12
    p = -np.sort(-rng.random((n, 1, 3)), axis=-1)
    w = rng.integers(1, 40, n).astype(float)
    rl = make_risk_levels(p, w, groups=np.arange(n) % 4)
    costs = Costs(np.tile([0.0, 200.0, 400.0], (n, 1)), np.array([1500.0]))
    rule = optimal_rule(rl, costs)
    assert rule.name == "cost-minimizing rule" and rule.kind == "optimal"
    assert rule.level_values == rl.level_values and rule.level_labels == rl.level_labels
    index, cells = rl.layout.rule_index()
    np.testing.assert_array_equal(rule.index, index)
    pd.testing.assert_frame_equal(rule.rule_cells, cells)
    # cases per rule cell, as pandas sums them (common practice)
    np.testing.assert_allclose(rule.weights, pd.Series(w).groupby(np.arange(n) % 4).sum().to_numpy())
    # other rule columns: one rule cell per cell here, each at its own argmin
    fine = optimal_rule(rl, costs, columns=["cell"], name="per cell")
    assert fine.name == "per cell" and fine.n_rule_cells == n
    np.testing.assert_array_equal(fine.level, costs.expected(rl.p).argmin(axis=1))


def test_cost_copies_change_only_what_they_say():
    decision = np.array([[0.0, 100.0, 300.0], [0.0, 120.0, 260.0]])
    base = Costs(decision, np.array([1000.0, 5000.0]), "USD", ("a", "b", "c"), ("o0", "o1"))
    one = base.with_outcome_cost(1, 7000.0)
    np.testing.assert_array_equal(one.outcome, [1000.0, 7000.0])
    np.testing.assert_array_equal(base.outcome, [1000.0, 5000.0])  # the original is untouched
    both = base.with_outcome_costs([10, 20])
    assert both.outcome.dtype == np.float64
    np.testing.assert_array_equal(both.outcome, [10.0, 20.0])
    np.testing.assert_array_equal(both.decision, decision)
    with pytest.raises(InputError, match=r"expected 2 outcome costs; got \(3,\)"):
        base.with_outcome_costs([1, 2, 3])
    scaled = base.with_decision_scale([1, 0.5, 2])
    np.testing.assert_array_equal(scaled.decision, [[0.0, 50.0, 600.0], [0.0, 60.0, 520.0]])
    np.testing.assert_array_equal(scaled.outcome, base.outcome)
    frame = base.to_frame()
    assert list(frame.columns) == ["kind", "name", "cost", "unit"]
    assert frame.values.tolist() == [
        ["decision", "a", 0.0, "USD"], ["decision", "b", 110.0, "USD"], ["decision", "c", 280.0, "USD"],
        ["outcome", "o0", 1000.0, "USD"], ["outcome", "o1", 5000.0, "USD"],
    ]


def test_scenario_costs_overrides_by_label_checks_and_names(demo_scenario):
    from dataclasses import replace

    from policy.decision.costs import expected_cost

    rl = estimate_risk_levels(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    assert costs.unit == demo_scenario.cost_unit
    assert costs.level_labels == demo_scenario.level_labels and costs.outcome_labels == demo_scenario.outcome_labels
    np.testing.assert_array_equal(expected_cost(rl, costs), costs.expected(rl.p))
    # a decision cost override may name the level by its label; an outcome cost may be fractional
    by_label = costs_from_scenario(demo_scenario, rl, {"new_offense": 1234.5}, {demo_scenario.level_labels[1]: 99.5})
    assert (by_label.decision[:, 1] == 99.5).all() and by_label.outcome[1] == 1234.5
    # the messages say which override was wrong
    with pytest.raises(InputError, match="decision cost override 'parole'"):
        costs_from_scenario(demo_scenario, rl, None, {"parole": 1})
    with pytest.raises(InputError, match="outcome cost override 'arson'"):
        costs_from_scenario(demo_scenario, rl, {"arson": 1})
    # zero costs are allowed; a negative one, of either kind, is not
    assert costs_from_scenario(demo_scenario, rl, {"new_offense": 0}).outcome[1] == 0
    with pytest.raises(InputError, match=r"^costs must be >= 0\.$"):
        costs_from_scenario(demo_scenario, rl, {"new_offense": -1})
    with pytest.raises(InputError, match=r"^costs must be >= 0\.$"):
        costs_from_scenario(demo_scenario, rl, None, {"supervision": -1})
    # a level whose cost comes from a column the data do not hold
    with pytest.raises(InputError, match="takes its cost from column 'bond_cost', which the data do not hold"):
        costs_from_scenario(demo_scenario, replace(rl, cell_costs={}))
