"""The constrained-rule LP in cumulative variables (used from CUMULATIVE_FROM_RULE_CELLS rule cells
on) against the LP in decision probabilities and against an independent formulation solved by
scipy's HiGHS (scipy.optimize.linprog, tests/constrained_reference.py)."""

from __future__ import annotations

import numpy as np
import pytest

from policy import analyze
from policy.decision.constrained import ConstrainedProblem, LPSettings, cumulative
from policy.errors import InfeasibleError

from .conftest import SCENARIOS
from .constrained_reference import constraint_violation, random_instance, reference_solve
from .test_constrained import ALL_KINDS_SPECS, DEMO_RULE, demo_specs


def rel_close(a: float, b: float, rel: float) -> bool:
    return abs(a - b) <= rel * max(1.0, abs(a), abs(b))


def harshness(rl, problem, delta) -> float:
    """Share of cases times level / (L-1), summed: what the most-lenient pass minimizes."""
    share = np.bincount(problem.index, weights=rl.weights, minlength=problem.n_rule_cells) / rl.weights.sum()
    return float((share[:, None] * delta * np.arange(rl.n_levels)[None, :]).sum() / (rl.n_levels - 1))


@pytest.fixture
def always_cumulative(monkeypatch):
    """Solve every LP in cumulative variables, however few its rule cells."""
    monkeypatch.setattr(cumulative, "CUMULATIVE_FROM_RULE_CELLS", 0)


def both(rl, costs, specs, columns, monkeypatch, solve=lambda p: p.solve_lp()):
    """The same problem solved in decision probabilities and in cumulative variables."""
    monkeypatch.setattr(cumulative, "CUMULATIVE_FROM_RULE_CELLS", 10**9)
    delta_problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    in_delta = solve(delta_problem)
    assert delta_problem._highs.cum is None
    monkeypatch.setattr(cumulative, "CUMULATIVE_FROM_RULE_CELLS", 0)
    cum_problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    in_cum = solve(cum_problem)
    assert cum_problem._highs.cum is not None
    return delta_problem, in_delta, cum_problem, in_cum


def test_the_change_of_variables_maps_rule_and_rows_exactly():
    # delta = T y + e (docs/method.md section 5 written in cumulative probabilities): a random
    # rule's cumulative probabilities map back to it, and every row of the cumulative LP equals
    # the corresponding row of the LP in delta, shifted by its value at the most lenient rule
    rl, costs, columns = random_instance(2, n_scores=3, n_buckets=3, n_groups=2, levels=4)
    problem = ConstrainedProblem(rl, costs, ALL_KINDS_SPECS[:4], columns=columns)
    data = problem._data
    lp = cumulative.cumulative_lp(data)
    rng = np.random.default_rng(0)
    delta = rng.dirichlet(np.ones(data.n_levels), size=data.n_groups)
    y = np.cumsum(delta[:, ::-1], axis=1)[:, ::-1][:, 1:]  # y_t = P(D >= t)
    assert np.allclose(lp.to_delta(y).reshape(delta.shape), delta, atol=1e-15)
    values = lp.A @ y.reshape(-1)
    assert np.all(values[:lp.n_mono] >= -1e-15)  # monotone rows hold for any rule
    assert np.allclose(values[lp.n_mono:] + lp.shift, data.coupling @ delta.reshape(-1), atol=1e-14)
    c = rng.normal(size=data.n_cols)
    assert np.isclose(lp.objective(c) @ y.reshape(-1) + c[::data.n_levels].sum(), c @ delta.reshape(-1), atol=1e-13)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("aware", [False, True])
def test_random_optimum_matches_linprog_and_the_lp_in_delta(seed, aware, monkeypatch):
    # reference: scipy.optimize.linprog(method="highs") on the independent formulation
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=3, n_groups=3, aware=aware, drop=0.2,
                                         levels=3 + seed % 2, ties=seed % 3 == 0)
    specs = [dict(s) for s in ALL_KINDS_SPECS] + ([{"kind": "group_blind"}] if aware else [])
    expected, _ = reference_solve(rl, costs, columns, specs)
    assert expected is not None
    dp, in_delta, cp, in_cum = both(rl, costs, specs, columns, monkeypatch)
    assert rel_close(in_cum.cost_per_case, expected, 1e-9)
    assert rel_close(in_cum.cost_per_case, in_delta.cost_per_case, 1e-12)
    assert np.abs(in_cum.delta.sum(axis=1) - 1).max() <= 1e-12 and in_cum.delta.min() >= 0
    index, _ = rl.layout.group_by(columns)
    for spec in specs:
        # each constraint checked by its definition in tests/constrained_reference.py
        assert constraint_violation(rl, columns, spec, in_cum.delta[index]) <= 1e-6, spec
    # the most lenient optimum is as lenient in both formulations
    assert abs(harshness(rl, cp, in_cum.delta) - harshness(rl, dp, in_delta.delta)) <= 1e-9


def test_demo_prices_duals_and_sensitivity_match(monkeypatch):
    # the whole presentation (rule, price, each constraint's dual, saving per point loosened and
    # if removed) agrees between the two formulations on the demo's constrained problem
    a = analyze(SCENARIOS / "demo.toml")
    dp, in_delta, cp, in_cum = both(a.risk_levels, a.costs, demo_specs(), DEMO_RULE, monkeypatch, solve=lambda p: p.solve())
    assert rel_close(in_cum.cost_per_case, in_delta.cost_per_case, 1e-12)
    t_delta, t_cum = in_delta.constraints, in_cum.constraints
    for column in ("dual", "saving_per_point_per_1000", "saving_if_removed_per_1000", "value", "slack"):
        a_, b_ = t_delta[column].to_numpy(float), t_cum[column].to_numpy(float)
        # per 1,000 cases, in cost units of about 10^4: 1e-6 is rounding
        assert np.allclose(a_, b_, rtol=1e-7, atol=1e-6, equal_nan=True), column
    assert list(t_delta["binding"]) == list(t_cum["binding"])
    assert np.allclose(in_cum.rule.delta, in_delta.rule.delta, atol=1e-9)


def test_resolves_in_cumulative_variables_equal_fresh_solves(always_cumulative):
    # reference: scipy.optimize.linprog(method="highs") on the independent formulation after each change
    rl, costs, columns = random_instance(4, n_scores=4, n_buckets=4, n_groups=2)
    specs = [{"kind": "principal_fairness", "outcome": "o0", "tolerance": 0.03},
             {"kind": "capacity", "at_least": "L2", "max_share": 0.2}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    problem.solve_lp()
    problem.set_costs(outcome_costs=costs.outcome * np.array([1.3, 0.7]))
    changed = problem.solve_lp()
    expected, _ = reference_solve(rl, problem.current_costs(), columns, specs)
    assert rel_close(changed.cost_per_case, expected, 1e-9)
    problem.set_bounds({1: 0.05, 2: 0.1})
    tighter = problem.solve_lp()
    moved = [dict(specs[0], tolerance=0.05), dict(specs[1], max_share=0.1)]
    expected, _ = reference_solve(rl, problem.current_costs(), columns, moved)
    assert rel_close(tighter.cost_per_case, expected, 1e-9)
    problem.set_active(2, False)
    expected, _ = reference_solve(rl, problem.current_costs(), columns, moved[:1])
    assert rel_close(problem.solve_lp().cost_per_case, expected, 1e-9)
    problem.set_active(2, True)
    other = rl.with_p(rl.p * np.random.default_rng(1).uniform(0.8, 1.0, size=rl.p.shape[:2])[..., None])
    problem.set_risk_levels(other)
    expected, _ = reference_solve(other, problem.current_costs(), columns, moved)
    assert rel_close(problem.solve_lp().cost_per_case, expected, 1e-9)


def test_infeasible_constraints_are_still_named(always_cumulative):
    a = analyze(SCENARIOS / "demo.toml")
    specs = demo_specs() + [{"kind": "outcome_cap", "outcome": "new_offense", "max_rate": 0.10}]
    with pytest.raises(InfeasibleError) as err:
        ConstrainedProblem(a.risk_levels, a.costs, specs, columns=DEMO_RULE).solve_lp()
    assert err.value.conflicts["involved"].any()


def test_above_the_threshold_the_lp_is_cumulative_and_matches_linprog():
    # a problem of 1,200 rule cells (above CUMULATIVE_FROM_RULE_CELLS, no patching) against
    # scipy.optimize.linprog(method="highs") on the independent formulation, and against the same
    # LP in decision probabilities started cold (method "simplex")
    rl, costs, columns = random_instance(0, n_scores=20, n_buckets=60, n_groups=2)
    specs = [{"kind": "principal_fairness", "outcome": "o0", "tolerance": 0.03},
             {"kind": "capacity", "at_least": "L2", "max_share": 0.2}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    assert problem.n_rule_cells >= cumulative.CUMULATIVE_FROM_RULE_CELLS
    lp = problem.solve_lp()
    assert problem._highs.cum is not None
    expected, _ = reference_solve(rl, costs, columns, specs)
    cold = ConstrainedProblem(rl, costs, specs, columns=columns, settings=LPSettings(method="simplex")).solve_lp()
    assert rel_close(lp.cost_per_case, expected, 1e-9)
    assert rel_close(lp.cost_per_case, cold.cost_per_case, 1e-12)
    assert np.allclose(lp.saving, cold.saving, rtol=1e-7, atol=1e-12)
    assert lp.iterations < cold.iterations


@pytest.mark.parametrize("threshold", [0, 10**9])
def test_sweep_blocks_give_the_bits_of_blocks_solved_on_fresh_problems(threshold, monkeypatch):
    # each block of a constrained sweep restarts the loaded model (its solver state cleared)
    # instead of reloading it; the points must be the same bits as each block solved on a newly
    # built problem, as in another process
    from policy.assessment.sweep.constrained import SWEEP_BLOCK, _SweepShared, constrained_sweep, ratio_grid, solve_sweep_block
    from policy.assessment.sweep.axes import ratio_axis

    monkeypatch.setattr(cumulative, "CUMULATIVE_FROM_RULE_CELLS", threshold)
    rl, costs, columns = random_instance(7, n_scores=4, n_buckets=5, n_groups=2)
    specs = [{"kind": "principal_fairness", "outcome": "o0", "tolerance": 0.02},
             {"kind": "capacity", "at_least": "L2", "max_share": 0.15}]
    axis = ratio_axis(rl, costs, "o1")
    ratios = ratio_grid(0.05, 20.0, 2 * SWEEP_BLOCK + 3, "log")
    swept = constrained_sweep(rl, costs, axis, ratios, specs, columns=columns, removal=True)
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    points = [(0, i) for i in range(len(ratios))]
    for k in range(0, len(points), SWEEP_BLOCK):
        shared = _SweepShared(rl, costs, problem.specs, problem.columns, problem.settings, axis.outcome_index,
                              axis.reference_cost, ratios, np.array([np.nan]), None, True, None)
        for (_, i), point in zip(points[k:k + SWEEP_BLOCK], solve_sweep_block(shared, tuple(points[k:k + SWEEP_BLOCK]))):
            assert point[0] == swept.cost[0, i]
            assert np.array_equal(point[1], swept.shares[0, i])
            assert np.array_equal(point[3], swept.dual[0, i], equal_nan=True)
            assert np.array_equal(point[4], swept.removed[0, i], equal_nan=True)


def test_the_solver_label_says_which_variables(monkeypatch):
    rl, costs, columns = random_instance(1, n_scores=3, n_buckets=3, n_groups=2)
    specs = [{"kind": "capacity", "at_least": "L2", "max_share": 0.2}]
    monkeypatch.setattr(cumulative, "CUMULATIVE_FROM_RULE_CELLS", 10**9)
    assert "unconstrained optimum's basis" in ConstrainedProblem(rl, costs, specs, columns=columns).solve_lp().solver
    monkeypatch.setattr(cumulative, "CUMULATIVE_FROM_RULE_CELLS", 0)
    assert "cumulative variables" in ConstrainedProblem(rl, costs, specs, columns=columns).solve_lp().solver


def test_two_decision_levels_have_no_monotone_rows(monkeypatch):
    # with two levels the cumulative LP has one variable P(D >= 1) per rule cell and no monotone
    # row; the optimum is the reference's (scipy.optimize.linprog on tests/constrained_reference.py)
    rl, costs, columns = random_instance(3, n_scores=3, n_buckets=2, n_groups=2, levels=2, aware=True)
    specs = [{"kind": "statistical_parity", "tolerance": 0.05}, {"kind": "capacity", "max_share": 0.4}]
    expected, _ = reference_solve(rl, costs, columns, specs)
    _, in_delta, cp, in_cum = both(rl, costs, specs, columns, monkeypatch)
    lp = cumulative.cumulative_lp(cp._data)
    assert lp.n_mono == 0 and lp.A.shape == (cp._data.coupling.shape[0], cp.n_rule_cells)
    assert rel_close(in_cum.cost_per_case, expected, 1e-9) and rel_close(in_delta.cost_per_case, expected, 1e-9)
