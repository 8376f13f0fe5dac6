"""Costs implied by current practice over two ratios (policy/assessment/implied_region.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy.assessment.implied import implied_interval
from policy.assessment.implied_region import implied_region, implied_region_costs
from policy.assessment.sweep import cost_lines, ratio_axis
from policy.decision.candidates import observed_rules
from policy.decision.costs import costs_from_scenario
from policy.decision.solve import aggregation_matrix, argmin_lenient
from policy.errors import InputError
from policy.running.pipeline import estimate

from .conftest import run_cli


@pytest.fixture(scope="module")
def demo(demo_scenario):
    cells, rl = estimate(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    axes = [ratio_axis(rl, costs, "new_offense"), ratio_axis(rl, costs, "new_violent")]
    index, groups = rl.layout.rule_index()
    base, slope = cost_lines(rl, costs, axes)
    box = np.array([[0.0, 4 * a.scenario_ratio] for a in axes])
    return demo_scenario, cells, rl, costs, axes, index, groups, base, slope, box


def _regret(base, slope, w, index, n, delta, r):
    """The regret evaluated directly: the rule's total cost minus the sum over rule cells of the
    cheapest level's total cost, at each point r of shape (k, 2) (per case)."""
    M = aggregation_matrix(index, n, w)
    A, B1, B2 = M @ base, M @ slope[0], M @ slope[1]
    wd = w[:, None] * delta
    alpha, b1, b2 = np.sum(wd * base), np.sum(wd * slope[0]), np.sum(wd * slope[1])
    r = np.atleast_2d(r)
    opt = np.min(A[None] + r[:, 0, None, None] * B1[None] + r[:, 1, None, None] * B2[None], axis=2).sum(axis=1)
    return (alpha + r[:, 0] * b1 + r[:, 1] * b2 - opt) / w.sum()


def test_the_minimum_is_no_higher_than_on_a_fine_grid_and_every_support_point_attains_it(demo):
    # the linear program's minimum (scipy's HiGHS) against the regret evaluated directly on a
    # 121 x 121 grid: a convex piecewise-linear function's minimum on a grid is at least the true one
    _, cells, rl, costs, axes, index, groups, base, slope, box = demo
    for rule in observed_rules(cells):
        res = implied_region(base, slope, rl.weights, index, len(groups), rule.cell_delta, box)
        x, y = np.meshgrid(np.linspace(*box[0], 121), np.linspace(*box[1], 121))
        grid = _regret(base, slope, rl.weights, index, len(groups), rule.cell_delta, np.column_stack([x.ravel(), y.ravel()]))
        assert res.regret_per_case <= grid.min() + 1e-6
        assert grid.min() - res.regret_per_case < 0.02 * max(res.regret_per_case, 1.0)
        at_vertices = _regret(base, slope, rl.weights, index, len(groups), rule.cell_delta, res.vertices)
        # within the region's tolerance, up to the solver's own feasibility tolerance (HiGHS, about 1e-7 relative)
        assert np.all(at_vertices <= res.regret_per_case + res.tolerance + 1e-6 * max(res.regret_per_case, 1.0))
        assert res.tolerance < 1e-5 * max(res.regret_per_case, 1.0) * 10
        assert np.all(res.low <= res.point) and np.all(res.point <= res.high)


def test_a_known_pair_of_ratios_is_recovered_without_noise(demo):
    # courts following the cost-minimizing rule at (r1*, r2*) exactly: regret 0 there, and the
    # region is the set of ratio pairs with that same rule, so its points give the same rule
    _, _, rl, costs, axes, index, groups, base, slope, box = demo
    M = aggregation_matrix(index, len(groups), rl.weights)
    for r_star in ([a.scenario_ratio for a in axes], [0.5 * axes[0].scenario_ratio, 2 * axes[1].scenario_ratio]):
        levels = argmin_lenient(M @ (base + r_star[0] * slope[0] + r_star[1] * slope[1]))
        delta = np.eye(base.shape[1])[levels[index]]
        res = implied_region(base, slope, rl.weights, index, len(groups), delta, box)
        assert res.regret_per_case == pytest.approx(0.0, abs=1e-6)
        assert np.all(res.low - 1e-6 <= r_star) and np.all(np.asarray(r_star) <= res.high + 1e-6)
        there = argmin_lenient(M @ (base + res.point[0] * slope[0] + res.point[1] * slope[1]))
        assert np.array_equal(there, levels)


def test_with_a_little_noise_the_region_stays_within_the_rule_cells_resolution(demo):
    _, _, rl, costs, axes, index, groups, base, slope, box = demo
    M = aggregation_matrix(index, len(groups), rl.weights)
    rng = np.random.default_rng(5)
    r_star = [a.scenario_ratio for a in axes]
    levels = argmin_lenient(M @ (base + r_star[0] * slope[0] + r_star[1] * slope[1]))
    L = base.shape[1]
    delta = 0.95 * np.eye(L)[levels[index]] + 0.05 * rng.dirichlet(np.ones(L), size=len(index))
    res = implied_region(base, slope, rl.weights, index, len(groups), delta, box)
    assert res.regret_per_case > 0
    # each support point lies in the closed cell of ratio pairs where the rule at r* is optimal
    # (on its boundary a tie may go to the more lenient level, as at the one-ratio interval's ends)
    for v in res.vertices:
        total = M @ (base + v[0] * slope[0] + v[1] * slope[1])
        chosen = total[np.arange(len(levels)), levels]
        # (up to the region's tolerance, in total cost)
        assert np.all(chosen <= total.min(axis=1) + res.tolerance * res.cases + 1e-6 * np.abs(total).max()), v


def test_fixing_one_ratio_by_a_narrow_box_gives_the_one_ratio_interval(demo):
    # with the second ratio held in a tiny box at the scenario's value, the region's extent on
    # the first is the one-ratio implied interval (policy.assessment.implied)
    _, cells, rl, costs, axes, index, groups, base, slope, box = demo
    r2 = axes[1].scenario_ratio
    rule = observed_rules(cells)[0]
    one = implied_interval(base + r2 * slope[1], slope[0], rl.weights, index, len(groups), rule.cell_delta, *box[0])
    res = implied_region(base, slope, rl.weights, index, len(groups), rule.cell_delta, [box[0], (r2, r2 * (1 + 1e-9))])
    # the region admits a regret within its tolerance (1e-9 of the largest total cost), so where
    # the regret is nearly flat its ends may lie a little outside the exact interval
    scale = box[0][1]
    assert res.low[0] == pytest.approx(one.r_lo, abs=1e-3 * scale)
    assert res.high[0] == pytest.approx(one.r_hi, abs=1e-3 * scale)
    assert res.low[0] <= one.r_lo + 1e-9 * scale and one.r_hi <= res.high[0] + 1e-9 * scale
    assert res.regret_per_case == pytest.approx(one.regret_per_case, rel=1e-5, abs=1e-4)


def test_groups_tables_and_a_bad_box(demo):
    _, cells, rl, costs, axes, index, groups, base, slope, box = demo
    out = implied_region_costs(rl, costs, axes, observed_rules(cells), box)
    assert set(out.table["protected"]) == {"all", *rl.layout.protected}
    assert (out.table["cost1_low"] == out.table["ratio1_low"] * axes[0].reference_cost).all()
    assert set(out.vertices.columns) >= {"rule", "group", "ratio1", "ratio2", "cost1", "cost2"}
    assert "acted as if one new offense" in out.sentences()[0]
    with pytest.raises(InputError, match="finite"):
        implied_region(base, slope, rl.weights, index, len(groups), observed_rules(cells)[0].cell_delta,
                       [(0, np.inf), (0, 1)])


def test_cli_sweep_two_ratios_implied_writes_the_region_with_bands(small_case_table, tmp_path, capsys):
    scenario, _ = small_case_table
    code, out, err = run_cli(["sweep", scenario, "--out", tmp_path / "o", "--ratio", "new_offense", "--ratio",
                              "missed_court", "--implied", "--replicates", "4", "--no-figures"], capsys)
    assert code == 0, err
    table = pd.read_csv(tmp_path / "o" / "implied_region.csv")
    assert {"ratio1_low", "ratio2_high", "cost1_low_lower", "cost2_high_upper"} <= set(table.columns)
    assert (table["ratio1_low"] <= table["ratio1_high"]).all()
    assert (tmp_path / "o" / "implied_region_vertices.csv").exists()
    assert "acted as if" in out


def test_four_directions_give_the_same_extents_as_sixteen(demo):
    # the bootstrap solves only the axis directions; 0, 90, 180 and 270 degrees are among the 16
    _, cells, rl, costs, axes, index, groups, base, slope, box = demo
    for rule in observed_rules(cells):
        full = implied_region(base, slope, rl.weights, index, len(groups), rule.cell_delta, box)
        four = implied_region(base, slope, rl.weights, index, len(groups), rule.cell_delta, box, directions=4)
        np.testing.assert_allclose(four.low, full.low, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(four.high, full.high, rtol=1e-9, atol=1e-9)
