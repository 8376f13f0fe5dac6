"""Ranges of compared rules' costs, rates and regret under each assumption
(policy/assessment/rule_ranges.py)."""

from __future__ import annotations

import itertools
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from policy import load_scenario
from policy.assessment.rule_ranges import regret_extremes, regret_ranges, rule_ranges
from policy.decision.candidates import observed_rules
from policy.decision.costs import costs_from_scenario
from policy.decision.evaluate import evaluate
from policy.decision.solve import optimal_rule
from policy.demo.quarrow import demo_scenario_path
from policy.estimation.bounds import robust_assumptions
from policy.running.pipeline import estimate

from .test_robust import brute_worst, instance, random_rule_cells


@pytest.fixture(scope="module")
def setup():
    scenario = load_scenario(demo_scenario_path())
    scenario = replace(scenario, data=replace(scenario.data, simulate=6_000))
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl)
    rules = [optimal_rule(rl, costs)] + observed_rules(cells, "the aid")
    intervals = robust_assumptions(rl, cells, [2.0], True)
    return cells, rl, costs, rules, intervals


def test_point_ranges_collapse_to_the_evaluation(setup):
    _, rl, costs, rules, intervals = setup
    frame = rule_ranges(rules, rl, costs, intervals)
    point = frame[frame["assumption"] == "point"]
    for rule, (_, row) in zip(rules, point.iterrows()):
        ev = evaluate(rule, rl, costs)
        assert row["cost_per_1000_cases_lower"] == pytest.approx(ev.cost_per_1000, rel=1e-12)
        assert row["cost_per_1000_cases_upper"] == pytest.approx(ev.cost_per_1000, rel=1e-12)
        for j, key in enumerate(rl.outcome_keys):
            assert row[f"rate_{key}_lower"] == pytest.approx(ev.outcome_rates[j], rel=1e-12)
    regret = regret_ranges(rules, rl, costs, intervals)
    first = regret[(regret["assumption"] == "point") & (regret["against"] == rules[0].name)]
    for rule, (_, row) in zip(rules[1:], first.iterrows()):
        gap = 1000 * (evaluate(rule, rl, costs).cost_per_case - evaluate(rules[0], rl, costs).cost_per_case)
        assert row["regret_per_1000_cases_lower"] == pytest.approx(gap, rel=1e-9, abs=1e-6)
        assert row["regret_per_1000_cases_upper"] == pytest.approx(gap, rel=1e-9, abs=1e-6)


def test_ranges_widen_from_the_point_and_regret_is_antisymmetric(setup):
    _, rl, costs, rules, intervals = setup
    frame = rule_ranges(rules, rl, costs, intervals).set_index(["rule", "assumption"])
    for rule in rules:
        p = frame.loc[(rule.name, "point")]
        g = frame.loc[(rule.name, "gamma=2")]
        assert g["cost_per_1000_cases_lower"] <= p["cost_per_1000_cases_lower"] + 1e-9
        assert g["cost_per_1000_cases_upper"] >= p["cost_per_1000_cases_upper"] - 1e-9
    regret = regret_ranges(rules, rl, costs, intervals).set_index(["rule", "against", "assumption"])
    a, b = rules[0].name, rules[1].name
    for key in ("point", "gamma=2", "bounds"):
        assert regret.loc[(a, b, key), "regret_per_1000_cases_lower"] == pytest.approx(
            -regret.loc[(b, a, key), "regret_per_1000_cases_upper"])


def test_regret_range_equals_brute_force_over_the_box_vertices(setup):
    # Common practice: a linear function over a box attains its extremes at vertices. Free 8
    # interval entries (the rest held at a point) and enumerate all 2^8 vertices.
    _, rl, costs, rules, intervals = setup
    rng = np.random.default_rng(0)
    box = intervals[1]
    lower, upper = rl.p.copy(), rl.p.copy()
    picks = [tuple(rng.integers(0, s) for s in rl.p.shape) for _ in range(8)]
    for idx in picks:
        lower[idx], upper[idx] = box.lower[idx], box.upper[idx]
    small = replace(box, key="small", lower=lower, upper=upper)
    got = regret_ranges(rules[:2], rl, costs, [small], monotone=False).iloc[0]
    got_cost = rule_ranges(rules[:1], rl, costs, [small], monotone=False).iloc[0]
    values, costs_a = [], []
    for corner in itertools.product((0, 1), repeat=len(picks)):
        p = rl.p.copy()
        for c, idx in zip(corner, picks):
            p[idx] = upper[idx] if c else lower[idx]
        probe = replace(rl, p=p)
        ca = evaluate(rules[0], probe, costs).cost_per_case
        values.append(ca - evaluate(rules[1], probe, costs).cost_per_case)
        costs_a.append(ca)
    assert got["regret_per_1000_cases_lower"] == pytest.approx(1000 * min(values), rel=1e-9, abs=1e-6)
    assert got["regret_per_1000_cases_upper"] == pytest.approx(1000 * max(values), rel=1e-9, abs=1e-6)
    assert got_cost["cost_per_1000_cases_lower"] == pytest.approx(1000 * min(costs_a), rel=1e-12)
    assert got_cost["cost_per_1000_cases_upper"] == pytest.approx(1000 * max(costs_a), rel=1e-12)


# ----------------------------------------------------------------------------------------------
# With monotonicity: the box intersected with p_0 >= p_1 >= ... in every cell and outcome kind
# ----------------------------------------------------------------------------------------------
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), levels=st.integers(2, 3), outcomes=st.integers(1, 2),
       kind=st.sampled_from(["gamma", "box"]), gamma=st.floats(1.0, 6.0))
def test_monotone_regret_extremes_equal_brute_force_over_extreme_points(seed, levels, outcomes, kind, gamma):
    # the extreme points of each chain-box enumerated by brute force (tests/test_robust.py);
    # a linear function's extremes over a polytope are at its vertices (common practice)
    rl, costs, columns, bounds = instance(seed, levels, outcomes, kind, gamma)
    rng = np.random.default_rng(seed)
    da, ia = random_rule_cells(rng, rl, columns)
    db, ib = random_rule_cells(rng, rl, columns)
    a, b = da[ia], db[ib]
    lo, hi = regret_extremes(a, b, rl, costs, bounds, monotone=True)
    w = rl.weights / rl.weights.sum()
    fixed = float((w[:, None] * (a - b) * costs.decision).sum())
    coef = w[:, None, None] * costs.outcome[None, :, None] * (a - b)[:, None, :]
    assert hi == pytest.approx(fixed + brute_worst(coef, bounds, True), rel=1e-9, abs=1e-12)
    assert lo == pytest.approx(fixed - brute_worst(-coef, bounds, True), rel=1e-9, abs=1e-12)
    box_lo, box_hi = regret_extremes(a, b, rl, costs, bounds, monotone=False)
    assert box_hi == pytest.approx(fixed + brute_worst(coef, bounds, False), rel=1e-9, abs=1e-12)
    assert box_lo <= lo + 1e-12 and hi <= box_hi + 1e-12


def test_monotone_ranges_lie_within_the_box_ranges_and_agree_with_the_extremes(setup):
    _, rl, costs, rules, intervals = setup
    mono = regret_ranges(rules, rl, costs, intervals).set_index(["rule", "against", "assumption"])
    box = regret_ranges(rules, rl, costs, intervals, monotone=False).set_index(["rule", "against", "assumption"])
    assert (mono["regret_per_1000_cases_lower"] >= box["regret_per_1000_cases_lower"] - 1e-6).all()
    assert (mono["regret_per_1000_cases_upper"] <= box["regret_per_1000_cases_upper"] + 1e-6).all()
    narrower = (box["regret_per_1000_cases_upper"] - box["regret_per_1000_cases_lower"]
                - mono["regret_per_1000_cases_upper"] + mono["regret_per_1000_cases_lower"])
    assert (narrower.xs("bounds", level="assumption") > 0).all()   # the monotone bounds' upper ends are not a chain
    lo, hi = regret_extremes(rules[0].cell_delta, rules[1].cell_delta, rl, costs, intervals[-1])
    row = mono.loc[(rules[0].name, rules[1].name, intervals[-1].key)]
    assert 1000 * lo == pytest.approx(row["regret_per_1000_cases_lower"]) and 1000 * hi == pytest.approx(
        row["regret_per_1000_cases_upper"])
    costs_mono = rule_ranges(rules, rl, costs, intervals)
    costs_box = rule_ranges(rules, rl, costs, intervals, monotone=False)
    assert (costs_mono["cost_per_1000_cases_upper"] <= costs_box["cost_per_1000_cases_upper"] + 1e-6).all()
    assert (costs_mono["cost_per_1000_cases_lower"] >= costs_box["cost_per_1000_cases_lower"] - 1e-6).all()


def test_regret_ranges_of_rules_that_agree_on_most_cells_equal_each_pair_alone(setup):
    # the ranges prepare each set's boxes once and skip the rows where two rules agree; every
    # pair must give the same numbers, to the bit, as regret_extremes alone on every row
    _, rl, costs, rules, intervals = setup
    other = optimal_rule(rl, costs.with_outcome_cost(2, 1.5 * costs.outcome[2]))
    rules = [rules[0], replace(other, name="optimum at a dearer new violent offense"),
             replace(rules[0], name="the optimum again")] + rules[1:]
    changed = ~np.all(rules[0].cell_delta == rules[1].cell_delta, axis=1)
    assert 0 < changed.sum() < len(changed)  # the two optima agree on some cells and not on others
    got = regret_ranges(rules, rl, costs, intervals).set_index(["rule", "against", "assumption"])
    for b in intervals:
        for ra, rb in itertools.permutations(rules, 2):
            lo, hi = regret_extremes(ra.cell_delta, rb.cell_delta, rl, costs, b)
            row = got.loc[(ra.name, rb.name, b.key)]
            assert (row["regret_per_1000_cases_lower"], row["regret_per_1000_cases_upper"]) == (1000 * lo, 1000 * hi)
    same = got.loc[(rules[0].name, rules[2].name)]
    assert (same["regret_per_1000_cases_lower"] == 0).all() and (same["regret_per_1000_cases_upper"] == 0).all()
