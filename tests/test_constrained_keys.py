"""Constraint keys that change what the linear program means: a capacity cap in cases
(``max_cases``) and principal fairness held only at chosen risk levels (``risk_levels``).

Each is solved and checked against the independent formulation in tests/constrained_reference.py
(the LP written cell by cell from docs/method.md section 5 and solved by
scipy.optimize.linprog(method="highs"); common practice: check an LP against a separately built
formulation of it), and each test also shows that the key changes the optimum, so a solver that
ignored the key could not pass.
"""

from __future__ import annotations

import pytest

from policy.decision.constrained import ConstrainedProblem
from policy.decision.solve import optimal_rule

from .constrained_reference import constraint_violation, random_instance, reference_solve


def rel_close(a: float, b: float, rel: float = 1e-6) -> bool:
    return abs(a - b) <= rel * max(1.0, abs(a), abs(b))


def _cases_at_or_above(rl, columns, delta_rule_cells, t):
    """Expected cases given level t or harsher, from rule-cell decision probabilities."""
    index, _ = rl.layout.rule_index(columns)
    return float((rl.weights * delta_rule_cells[index, t:].sum(axis=1)).sum())


@pytest.mark.parametrize("seed", [0, 3, 7])
def test_capacity_in_cases_caps_the_number_of_cases(seed):
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=3, n_groups=2)
    t = 1
    free = optimal_rule(rl, costs, columns)
    index, _ = rl.layout.rule_index(columns)
    free_cases = float((rl.weights * free.delta[index, t:].sum(axis=1)).sum())
    assert free_cases > 10  # the unconstrained optimum puts cases at L1 or harsher
    max_cases = round(0.5 * free_cases, 1)  # a cap in cases that binds
    spec = {"kind": "capacity", "at_least": "L1", "max_cases": max_cases}
    lp = ConstrainedProblem(rl, costs, [spec], columns=columns).solve_lp()
    expected, ref_delta = reference_solve(rl, costs, columns, [spec])
    assert expected is not None
    assert rel_close(lp.cost_per_case, expected)
    # the cap holds, and binds: the optimum uses the whole allowance and costs more than the free one
    assert _cases_at_or_above(rl, columns, lp.delta, t) == pytest.approx(max_cases, rel=1e-6)
    assert _cases_at_or_above(rl, columns, ref_delta, t) == pytest.approx(max_cases, rel=1e-6)
    free_cost = float((rl.weights[:, None] * free.delta[index] * costs.expected(rl.p)).sum() / rl.weights.sum())
    assert lp.cost_per_case > free_cost + 1e-6
    # the same cap written as a share of all cases gives the same LP
    as_share = {"kind": "capacity", "at_least": "L1", "max_share": max_cases / rl.weights.sum()}
    assert rel_close(ConstrainedProblem(rl, costs, [as_share], columns=columns).solve_lp().cost_per_case, lp.cost_per_case)


@pytest.mark.parametrize("seed, levels", [(0, [1]), (3, [0, 2]), (5, [3])])
def test_principal_fairness_at_chosen_risk_levels(seed, levels):
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    base = {"kind": "principal_fairness", "outcome": "o0", "tolerance": 0.02}
    at_one = dict(base, risk_levels=levels)
    every = ConstrainedProblem(rl, costs, [base], columns=columns).solve_lp()
    only_one = ConstrainedProblem(rl, costs, [at_one], columns=columns).solve_lp()
    expected_every, _ = reference_solve(rl, costs, columns, [base])
    expected_one, _ = reference_solve(rl, costs, columns, [at_one])
    assert rel_close(every.cost_per_case, expected_every)
    assert rel_close(only_one.cost_per_case, expected_one)
    # holding the gap at some risk levels asks less than at all of them, and here strictly less
    assert only_one.cost_per_case < every.cost_per_case - 1e-6
    # the rule found holds the gap where it was asked for (the definition, cell by cell) ...
    index, _ = rl.layout.rule_index(columns)
    cell_delta = only_one.delta[index]
    assert constraint_violation(rl, columns, at_one, cell_delta) <= 1e-7
    # ... and not at every risk level (otherwise the key made no difference)
    assert constraint_violation(rl, columns, base, cell_delta) > 1e-4


@pytest.mark.parametrize("seed", [1, 4])
def test_outcome_cap_holds_the_expected_rate_where_it_binds(seed):
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=3, n_groups=2)
    index, _ = rl.layout.rule_index(columns)
    W = rl.weights.sum()

    def rate(delta_rule_cells):
        """Expected rate of outcome o0, case-weighted, from rule-cell decision probabilities."""
        return float((rl.weights[:, None] * delta_rule_cells[index] * rl.p[:, 0, :]).sum() / W)

    free = rate(optimal_rule(rl, costs, columns).delta)
    harshest = float((rl.weights * rl.p[:, 0, -1]).sum() / W)
    assert free > harshest + 1e-3
    cap = round(0.5 * (free + harshest), 6)  # reachable, and below the free optimum's rate
    spec = {"kind": "outcome_cap", "outcome": "o0", "max_rate": cap}
    lp = ConstrainedProblem(rl, costs, [spec], columns=columns).solve_lp()
    expected, ref_delta = reference_solve(rl, costs, columns, [spec])
    assert expected is not None and rel_close(lp.cost_per_case, expected)
    assert rate(lp.delta) == pytest.approx(cap, rel=1e-6) and rate(ref_delta) == pytest.approx(cap, rel=1e-6)


@pytest.mark.parametrize("seed", [0, 3])
def test_principal_fairness_skips_a_risk_level_one_group_lacks(seed):
    # in group g1 level L1 prevents nothing (p at L0 = p at L1), so risk level 1 holds no case of
    # that group: its comparisons cannot be made and are skipped with a note; the rule is the one
    # found when risk level 1 is not asked for at all
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    p = rl.p.copy()
    g1 = rl.layout.codes("group") == 1
    p[g1, 0, 1] = p[g1, 0, 0]
    rl = rl.with_p(p)
    assert (rl.q[g1, 0, 1] == 0).all() and (rl.q[~g1, 0, 1] > 0).all()
    base = {"kind": "principal_fairness", "outcome": "o0", "tolerance": 0.02, "name": "pf"}
    every = ConstrainedProblem(rl, costs, [base], columns=columns).solve_lp()
    without = ConstrainedProblem(rl, costs, [dict(base, risk_levels=[0, 2, 3])], columns=columns).solve_lp()
    assert rel_close(every.cost_per_case, without.cost_per_case, 1e-9)
    # two thresholds (L1, L2) of one pair of groups at one risk level
    notes = ConstrainedProblem(rl, costs, [base], columns=columns).solve(sensitivity=False).notes
    assert "pf: 2 comparisons skipped: a group has no cases in the risk level." in notes
    expected, _ = reference_solve(rl, costs, columns, [dict(base, risk_levels=[0, 2, 3])])
    assert rel_close(every.cost_per_case, expected)


def test_group_blind_on_rule_columns_without_the_attribute_changes_nothing():
    # the rule columns (score, bucket) hold no protected attribute: the rule is blind already, the
    # constraint adds no row, says so, and the optimum is the unconstrained one
    rl, costs, columns = random_instance(2, n_scores=3, n_buckets=2, n_groups=2, aware=False)
    spec = {"kind": "group_blind", "name": "blind"}
    problem = ConstrainedProblem(rl, costs, [spec], columns=columns)
    free = ConstrainedProblem(rl, costs, [], columns=columns)
    A, lower, upper = problem.rows()
    assert A.shape == free.rows()[0].shape
    assert rel_close(problem.solve_lp().cost_per_case, free.solve_lp().cost_per_case, 1e-12)
    notes = problem.solve(sensitivity=False).notes
    assert "blind: already blind: the rule columns hold no protected attribute it names." in notes
