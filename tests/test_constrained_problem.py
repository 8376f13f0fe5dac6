"""The constrained problem's interface on small random instances: changing costs, bounds, active
constraints and probabilities and re-solving, the rows and bounds it hands the solver, the
constraint table of a solve (value, slack, binding rows, duals, savings), the presented rule and
the messages of bad calls.

Every optimum is checked against tests/constrained_reference.py: the LP written cell by cell from
docs/method.md section 5 and solved by scipy.optimize.linprog(method="highs") (common practice:
check an LP against a separately built formulation of it). Table entries are checked against
their definitions (slack = bound - value, saving = cost difference of two reference solves).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from policy.decision.constrained import (
    ConstrainedProblem,
    LPSettings,
    solve_constrained,
)
from policy.decision.costs import Costs
from policy.decision.solve import optimal_rule
from policy.errors import InfeasibleError, InputError, SolverError
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellLayout

from .constrained_reference import random_instance, reference_solve


def close(a: float, b: float, rel: float = 1e-7) -> bool:
    return abs(a - b) <= rel * max(1.0, abs(a), abs(b))


@pytest.fixture(scope="module")
def instance():
    return random_instance(3, n_scores=3, n_buckets=2, n_groups=2)


def _free_share(rl, costs, columns, t=1):
    index, _ = rl.layout.rule_index(columns)
    free = optimal_rule(rl, costs, columns).delta[index]
    return float((rl.weights * free[:, t:].sum(axis=1)).sum() / rl.weights.sum())


def test_cost_changes_resolve_to_the_reference_optimum(instance):
    rl, costs, columns = instance
    cap = round(0.6 * _free_share(rl, costs, columns), 4)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": cap, "name": "cap"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    assert problem.n_rule_cells == 6 and problem.n_rows == 6 + 1
    problem.solve_lp()
    outcome = np.array([700.0, 1500.0])
    scale = np.array([1.0, 0.5, 2.0])
    got = problem.set_costs(outcome_costs=outcome, decision_scale=scale).solve_lp().cost_per_case
    expected, _ = reference_solve(rl, replace(costs, decision=costs.decision * scale, outcome=outcome), columns, specs)
    assert close(got, expected)
    current = problem.current_costs()
    assert np.array_equal(current.decision, costs.decision * scale) and np.array_equal(current.outcome, outcome)
    # other per-cell decision costs: the objective is rebuilt, the scale goes back to 1
    other = replace(costs, decision=costs.decision * 1.5)
    got = problem.set_costs(other).solve_lp().cost_per_case
    assert np.array_equal(problem.decision_scale, np.ones(3)) and np.array_equal(problem.outcome_costs, costs.outcome)
    expected, _ = reference_solve(rl, other, columns, specs)
    assert close(got, expected)
    # the same decision costs again: nothing to rebuild, the same optimum
    assert close(problem.set_costs(replace(other, decision=other.decision.copy())).solve_lp().cost_per_case, expected)


def test_bad_cost_changes_are_refused_with_the_expected_shape(instance):
    rl, costs, columns = instance
    problem = ConstrainedProblem(rl, costs, [], columns=columns)
    for kw, text in (({"outcome_costs": [1.0]}, "outcome_costs must be 2 numbers >= 0; got [np.float64(1.0)]."),
                     ({"outcome_costs": [1.0, -2.0]}, "outcome_costs must be 2 numbers >= 0; got [np.float64(1.0), np.float64(-2.0)]."),
                     ({"outcome_costs": [1.0, np.inf]}, "outcome_costs must be 2 numbers >= 0; got [np.float64(1.0), np.float64(inf)]."),
                     ({"decision_scale": [1.0, 1.0]}, "decision_scale must be 3 numbers >= 0; got [np.float64(1.0), np.float64(1.0)]."),
                     ({"decision_scale": [1.0, -1.0, 1.0]},
                      "decision_scale must be 3 numbers >= 0; got [np.float64(1.0), np.float64(-1.0), np.float64(1.0)]."),
                     ({"decision_scale": [1.0, np.nan, 1.0]},
                      "decision_scale must be 3 numbers >= 0; got [np.float64(1.0), np.float64(nan), np.float64(1.0)].")):
        with pytest.raises(InputError) as info:
            problem.set_costs(**kw)
        assert str(info.value) == text
    fewer = replace(costs, decision=costs.decision[:5])
    with pytest.raises(InputError) as info:
        problem.set_costs(fewer)
    assert str(info.value) == "costs for 5 cells given; the problem has 12."
    # zero costs are allowed at the edge
    problem.set_costs(outcome_costs=[0.0, 0.0], decision_scale=[0.0, 0.0, 0.0])
    assert problem.solve_lp().cost_per_case == 0.0


def test_bounds_by_name_or_position_in_declared_units(instance):
    rl, costs, columns = instance
    W = rl.weights.sum()
    share = _free_share(rl, costs, columns)
    specs = [{"kind": "capacity", "at_least": "L1", "max_cases": round(0.5 * share * W, 2), "name": "cases"},
             {"kind": "statistical_parity", "tolerance": 0.2, "name": "parity"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    A, lo, hi = problem.rows()
    G = problem.n_rule_cells
    assert A.shape[0] == G + 1 + 2 and (lo[:G] == 1).all() and (hi[:G] == 1).all()
    # the cap in cases enters as a share (declared / total weight), one-sided; parity two-sided
    assert lo[G] == -np.inf and hi[G] == pytest.approx(round(0.5 * share * W, 2) / W, rel=1e-15)
    assert list(lo[G + 1:]) == [-0.2, -0.2] and list(hi[G + 1:]) == [0.2, 0.2]
    problem.solve_lp()
    new_cases = round(0.7 * share * W, 2)
    problem.set_bounds({1: new_cases, "parity": 0.05})
    _, lo, hi = problem.rows()
    assert hi[G] == pytest.approx(new_cases / W, rel=1e-15) and list(hi[G + 1:]) == [0.05, 0.05]
    expected, _ = reference_solve(rl, costs, columns, [dict(specs[0], max_cases=new_cases), dict(specs[1], tolerance=0.05)])
    assert close(problem.solve_lp().cost_per_case, expected)
    # a constraint switched off: its rows are free, the optimum is the one without it
    problem.set_active("parity", False)
    _, lo, hi = problem.rows()
    assert (lo[G + 1:] == -np.inf).all() and (hi[G + 1:] == np.inf).all()
    expected, _ = reference_solve(rl, costs, columns, [dict(specs[0], max_cases=new_cases)])
    assert close(problem.solve_lp().cost_per_case, expected)
    problem.set_active(2, True)
    assert list(problem.rows()[2][G + 1:]) == [0.05, 0.05]
    # the ends of each unit are allowed; a cap in cases has no upper end
    problem.set_bounds({"parity": 1.0, "cases": 10 * W})
    problem.set_bounds({"parity": 0.0, "cases": 0.0})


def test_bad_bounds_and_keys_name_the_constraint(instance):
    rl, costs, columns = instance
    specs = [{"kind": "capacity", "max_share": 0.3, "name": "held"}, {"kind": "group_blind", "name": "blind"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    for bounds, text in (({"held": 1.5}, "bound max_share of 'held' must be in 0..1; got 1.5."),
                         ({1: -0.1}, "bound max_share of 'held' must be in 0..1; got -0.1."),
                         ({"blind": 0.1}, "'blind' (group_blind) has no tolerance; it can only be removed from the constraints."),
                         ({3: 0.1}, "constraint position 3 is out of range 1..2."),
                         ({0: 0.1}, "constraint position 0 is out of range 1..2."),
                         ({np.int64(0): 0.1}, "constraint position 0 is out of range 1..2."),
                         ({True: 0.1}, "no constraint is named True; the constraints are: held, blind."),
                         ({"cap": 0.1}, "no constraint is named 'cap'; the constraints are: held, blind.")):
        with pytest.raises(InputError) as info:
            problem.set_bounds(bounds)
        assert str(info.value) == text
    assert problem.spec_position(np.int64(2)) == 1 and problem.spec_position("blind") == 1
    problem.set_bounds({"blind": 0.0})  # 0 is its only bound
    with pytest.raises(InputError) as info:
        ConstrainedProblem(rl, costs, [], columns=columns).set_active("x", False)
    assert str(info.value) == "no constraint is named 'x'; the constraints are: (none)."
    with pytest.raises(InputError) as info:
        ConstrainedProblem(rl, costs, [], columns=("score", "court"))
    assert str(info.value) == "rule column 'court' is not a cell column; expected some of: score, bucket, group."


def test_other_probabilities_for_the_rows_or_only_for_the_objective(instance):
    rl, costs, columns = instance
    specs = [{"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.3}, {"kind": "capacity", "max_share": 0.4}]
    p2 = np.clip(rl.p * np.random.default_rng(0).uniform(0.7, 1.2, size=rl.p.shape), 0.0, 1.0)
    p2 = np.minimum.accumulate(p2, axis=-1)  # still non-increasing in the level
    other = rl.with_p(p2)
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    problem.solve_lp()
    expected, _ = reference_solve(other, costs, columns, specs)
    assert close(problem.set_risk_levels(other).solve_lp().cost_per_case, expected)
    # only the objective priced at p2: rows stay at the loaded p (capacity rows do not depend on p)
    problem = ConstrainedProblem(rl, costs, specs[1:], columns=columns)
    problem.set_objective_probabilities(p2)
    expected, _ = reference_solve(other, costs, columns, specs[1:])
    assert close(problem.solve_lp().cost_per_case, expected)
    # the outcome cap's row keeps the loaded p, the objective prices at p2 (both by their definitions)
    lp = ConstrainedProblem(rl, costs, specs, columns=columns).set_objective_probabilities(p2).solve_lp()
    index, _ = rl.layout.rule_index(columns)
    delta, w = lp.delta[index], rl.weights
    assert lp.row_values[0][0] == pytest.approx(float((w[:, None] * delta * rl.p[:, 0, :]).sum() / w.sum()), rel=1e-9)
    assert lp.cost_per_case == pytest.approx(float((w[:, None] * delta * costs.expected(p2)).sum() / w.sum()), rel=1e-9)
    with pytest.raises(InputError) as info:
        problem.set_objective_probabilities(p2[:, :1])
    assert str(info.value) == "outcome probabilities of shape (12, 1, 3) given; the problem's cells need (12, 2, 3)."
    fewer = random_instance(3, n_scores=2, n_buckets=2, n_groups=2)[0]
    with pytest.raises(InputError) as info:
        problem.set_risk_levels(fewer)
    assert str(info.value) == ("risk levels of 8 cells and 3 levels given; the problem was built for other cells "
                               "(12 cells, 3 levels). Build a new ConstrainedProblem for them.")


def test_constraint_table_of_a_solve(instance):
    rl, costs, columns = instance
    W = rl.weights.sum()
    share = _free_share(rl, costs, columns)
    cap_cases = round(0.5 * share * W, 2)
    specs = [{"kind": "capacity", "at_least": "L1", "max_cases": cap_cases, "name": "cases"},
             {"kind": "statistical_parity", "tolerance": 0.9, "name": "loose"},
             {"kind": "outcome_cap", "outcome": "o1", "max_rate": 1.0, "name": "never"}]
    result = ConstrainedProblem(rl, costs, specs, columns=columns).solve()
    table = result.to_frame().set_index("constraint")
    cost, _ = reference_solve(rl, costs, columns, specs)
    assert close(result.lp.cost_per_case, cost)
    # the binding cap: reached exactly (in cases), no slack, its one row named
    row = table.loc["cases"]
    assert (row["kind"], row["arguments"], row["bound_key"], row["unit"], row["rows"]) == ("capacity", "at_least=L1", "max_cases", "cases", 1)
    assert row["bound"] == cap_cases and row["value"] == pytest.approx(cap_cases, rel=1e-7)
    assert abs(row["slack"]) < 1e-6 and row["binding"] and row["binding_rows"] == "share of cases at L1 or harsher"
    # what loosening it by 1% of the cases, or removing it, saves: two more reference solves
    step = 0.01 * W
    looser, _ = reference_solve(rl, costs, columns, [dict(specs[0], max_cases=cap_cases + step)] + specs[1:])
    removed, _ = reference_solve(rl, costs, columns, specs[1:])
    assert row["saving_per_point_per_1000"] == pytest.approx(1000 * (cost - looser), rel=1e-6, abs=1e-6)
    assert row["saving_if_removed_per_1000"] == pytest.approx(1000 * (cost - removed), rel=1e-6, abs=1e-6)
    assert row["saving_if_removed_per_1000"] > 0
    # the dual per case in the declared unit (per case capped): at most the saving of a whole point per case
    assert row["dual"] > 0 and row["dual_per_1000"] == pytest.approx(1000 * row["dual"])
    assert row["dual"] * step >= (cost - looser) - 1e-9
    # a loose two-sided parity: its value the largest gap, its slack bound - value, not binding
    row = table.loc["loose"]
    assert row["rows"] == 2 and not row["binding"] and row["binding_rows"] == "" and row["note"] == ""
    assert row["slack"] == pytest.approx(0.9 - row["value"], abs=1e-12) and 0 <= row["value"] < 0.9
    assert row["saving_if_removed_per_1000"] == pytest.approx(0.0, abs=1e-6) and row["dual"] == pytest.approx(0.0, abs=1e-9)
    assert row["saving_per_point_per_1000"] == pytest.approx(0.0, abs=1e-6)
    row = table.loc["never"]
    assert np.isnan(row["saving_per_point_per_1000"])  # at 1 already: it cannot loosen
    assert row["unit"] == "outcome rate" and row["bound_key"] == "max_rate" and row["value"] <= 1.0
    assert row["slack"] == pytest.approx(1.0 - row["value"], abs=1e-12)
    # the headline: the price is the cost above the unconstrained optimum
    free = optimal_rule(rl, costs, columns)
    index, _ = rl.layout.rule_index(columns)
    free_cost = float((rl.weights[:, None] * free.delta[index] * costs.expected(rl.p)).sum() / W)
    assert result.price_per_case == pytest.approx(cost - free_cost, rel=1e-6, abs=1e-9)
    assert result.notes == ()


def test_table_of_group_blind_inactive_and_rowless_constraints():
    rl, costs, _columns = random_instance(5, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    specs = [{"kind": "capacity", "max_share": 0.2, "name": "off"}, {"kind": "group_blind", "name": "blind"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=("score", "group"))
    problem.set_active("off", False)
    result = problem.solve(name="blind rule")
    table = result.to_frame().set_index("constraint")
    blind = table.loc["blind"]
    assert blind["bound_key"] == "" and blind["rows"] == 6 and np.isnan(blind["dual"])
    # removing it (the constraint after an inactive one) saves what the reference says
    expected, _ = reference_solve(rl, costs, ("score", "group"), specs[1:])
    free, _ = reference_solve(rl, costs, ("score", "group"), [])
    assert blind["saving_if_removed_per_1000"] == pytest.approx(1000 * (expected - free), rel=1e-6, abs=1e-6)
    assert np.isnan(blind["saving_per_point_per_1000"])  # nothing to loosen by a point
    coarse = result.rule
    assert (coarse.name, coarse.kind, coarse.level_values, coarse.level_labels) == ("blind rule", "constrained",
                                                                                    rl.level_values, rl.level_labels)
    score = rl.layout.codes("score")
    assert np.allclose(coarse.weights, np.bincount(score, weights=rl.weights))
    assert coarse.note == ("randomized where split" if (coarse.delta.max(axis=1) <= 1 - 1e-6).any() else "")
    # the group stays a rule column when the group-blind constraint is off, or with other constraints only
    problem.set_active("blind", False)
    assert list(problem.solve(sensitivity=False).rule.rule_cells.columns) == ["score", "group"]
    other = ConstrainedProblem(rl, costs, [{"kind": "capacity", "max_share": 0.3}], columns=("score", "group"))
    assert list(other.solve(sensitivity=False).rule.rule_cells.columns) == ["score", "group"]
    off = table.loc["off"]
    assert np.isnan(off["dual"]) and np.isnan(off["saving_if_removed_per_1000"]) and np.isnan(off["saving_per_point_per_1000"])
    # the rule is presented without the group (every rule cell of a score alike), its cost by reference
    assert list(result.rule.rule_cells.columns) == ["score"]
    assert close(result.lp.cost_per_case, expected)
    assert np.allclose(result.rule.delta, result.lp.delta.reshape(3, 2, 3)[:, 0, :], atol=1e-9)
    # blind already (no protected rule column): no row, nothing reached, nothing saved, a note
    result = ConstrainedProblem(rl, costs, specs[1:], columns=("score", "bucket")).solve()
    row = result.to_frame().iloc[0]
    assert row["rows"] == 0 and np.isnan(row["value"]) and np.isnan(row["slack"]) and not row["binding"]
    assert row["binding_rows"] == "" and row["saving_if_removed_per_1000"] == 0.0 and row["saving_per_point_per_1000"] == 0.0
    assert row["note"] == "already blind: the rule columns hold no protected attribute it names"
    assert list(result.rule.rule_cells.columns) == ["score", "bucket"]


def test_a_solver_that_need_not_return_a_vertex_says_so(instance):
    rl, costs, columns = instance
    result = ConstrainedProblem(rl, costs, [{"kind": "capacity", "max_share": 0.3}], columns=columns,
                                settings=LPSettings(solver="CLARABEL")).solve(sensitivity=False)
    assert result.notes == (("CLARABEL need not return a vertex: where several rules are optimal it may return a mixture "
                            "of them, so split rule cells can be an artifact of the solver; HIGHS returns a vertex."),)
    expected, _ = reference_solve(rl, costs, columns, [{"kind": "capacity", "max_share": 0.3}])
    assert close(result.lp.cost_per_case, expected, 1e-5)


def test_conflicting_constraints_name_how_far_to_loosen(instance):
    rl, costs, columns = instance
    W = rl.weights.sum()
    harshest = float((rl.weights * rl.p[:, 0, -1]).sum() / W)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": 0.0, "name": "none held"},
             {"kind": "outcome_cap", "outcome": "o0", "max_rate": round(harshest + 0.01, 4), "name": "few"},
             {"kind": "statistical_parity", "tolerance": 1.0, "name": "loose"}]
    with pytest.raises(InfeasibleError) as info:
        ConstrainedProblem(rl, costs, specs, columns=columns).solve_lp()
    conflicts = info.value.conflicts.set_index("constraint")
    assert list(conflicts["involved"]) == [True, True, False]
    by = conflicts.loc["none held", "loosen_by"] + conflicts.loc["few", "loosen_by"]
    assert by > 0
    # loosening by the amounts found makes the reference LP feasible
    loosened = [dict(specs[0], max_share=conflicts.loc["none held", "loosened_bound"] + 1e-9),
                dict(specs[1], max_rate=conflicts.loc["few", "loosened_bound"] + 1e-9)]
    assert reference_solve(rl, costs, columns, loosened)[0] is not None
    lines = str(info.value).splitlines()
    assert lines[0] == "The constraints cannot all hold at once. These conflict:"
    assert lines[1].startswith("  - none held (capacity, at_least=L1)")
    assert lines[2].startswith("  - few (outcome_cap, outcome=o0)")
    assert lines[-1] == ("'loosen ... by' is one smallest total loosening (summed in probability and share units); "
                         "'alone' loosens that constraint only and keeps the others.")
    assert len(lines) == 4


def _cap_problem(rl, costs, columns):
    cap = round(0.5 * _free_share(rl, costs, columns), 4)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": cap, "name": "cap"}]
    return specs, ConstrainedProblem(rl, costs, specs, columns=columns)


def test_warm_resolves_follow_every_change_that_moves_the_optimum(instance):
    # each change is made after a solve (so the solver re-solves from its last state) and moves
    # the optimum; each re-solve equals a fresh reference solve
    rl, costs, columns = instance
    specs, problem = _cap_problem(rl, costs, columns)
    first = problem.solve_lp()
    # no outcome cost: everyone at the most lenient level (no decision cost)
    lp = problem.set_costs(outcome_costs=[0.0, 0.0]).solve_lp()
    assert np.allclose(lp.delta[:, 0], 1.0) and not np.allclose(lp.delta, first.delta)
    # the decision costs scaled: harsher levels free, the cap binds
    lp = problem.set_costs(outcome_costs=costs.outcome, decision_scale=[1.0, 0.0, 0.0]).solve_lp()
    expected, _ = reference_solve(rl, replace(costs, decision=costs.decision * [1.0, 0.0, 0.0]), columns, specs)
    assert close(lp.cost_per_case, expected) and lp.delta[:, 0].min() < 1
    # a looser cap after a solve
    problem.set_costs(costs)
    problem.solve_lp()
    lp = problem.set_bounds({"cap": 1.0}).solve_lp()
    free, _ = reference_solve(rl, costs, columns, [])
    assert close(lp.cost_per_case, free) and close(problem.set_bounds({"cap": 0.0}).solve_lp().cost_per_case,
                                                   reference_solve(rl, costs, columns, [dict(specs[0], max_share=0.0)])[0])
    # other probabilities after a solve: the outcome cap's row moves with them
    half = rl.with_p(rl.p * np.array([0.5, 1.0])[None, :, None])
    index, _ = rl.layout.rule_index(columns)

    def rate(r, delta):
        return float((r.weights[:, None] * delta[index] * r.p[:, 0, :]).sum() / r.weights.sum())

    # a cap on o0 that binds at the loaded probabilities; at the halved ones it binds less or
    # not at all, so the optimum moves (a solver left with the loaded row would keep the old one)
    free_rate = rate(rl, optimal_rule(rl, costs, columns).delta)
    harshest = float((rl.weights * rl.p[:, 0, -1]).sum() / rl.weights.sum())
    cap = [{"kind": "outcome_cap", "outcome": "o0", "max_rate": round(0.5 * (free_rate + harshest), 6)}]
    problem = ConstrainedProblem(rl, costs, cap, columns=columns)
    first = problem.solve_lp()
    assert rate(rl, first.delta) == pytest.approx(cap[0]["max_rate"], rel=1e-6)
    expected, _ = reference_solve(half, costs, columns, cap)
    lp = problem.set_risk_levels(half).solve_lp()
    assert close(lp.cost_per_case, expected) and not np.allclose(lp.delta, first.delta, atol=1e-6)
    # priced at other probabilities after a solve
    problem = ConstrainedProblem(rl, costs, [], columns=columns)
    problem.solve_lp()
    expected, _ = reference_solve(half, costs, columns, [])
    assert close(problem.set_objective_probabilities(half.p).solve_lp().cost_per_case, expected)


def test_what_a_solve_returns(instance):
    rl, costs, columns = instance
    W = rl.weights.sum()
    share = _free_share(rl, costs, columns)
    specs = [{"kind": "capacity", "at_least": "L1", "max_cases": round(0.5 * share * W, 2), "name": "cases"},
             {"kind": "statistical_parity", "tolerance": 0.5, "name": "parity"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    lp = problem.solve_lp()
    assert lp.status == "optimal" and lp.solver == problem.solver_label and lp.solver.startswith("HiGHS")
    assert isinstance(lp.iterations, int) and lp.iterations >= 0 and isinstance(lp.seconds, float) and lp.seconds >= 0
    assert lp.lenient_pass in (False, True)
    assert [len(v) for v in lp.row_values] == [1, 2]
    index, _ = rl.layout.rule_index(columns)
    share_at = float((rl.weights * lp.delta[index, 1:].sum(axis=1)).sum() / W)
    assert lp.row_values[0][0] == pytest.approx(share_at, rel=1e-9)
    # the cap's dual per case of the cap (the LP's row is a share): what loosening by one case saves
    step = 1.0
    looser, _ = reference_solve(rl, costs, columns, [dict(specs[0], max_cases=specs[0]["max_cases"] + step), specs[1]])
    assert lp.saving[0] == pytest.approx(lp.cost_per_case - looser, rel=1e-5) and lp.saving[1] == pytest.approx(0.0, abs=1e-9)
    result = problem.solve(name="capped")
    assert result.rule.name == "capped" and result.rule.kind == "constrained"
    assert result.unconstrained.name == "unconstrained optimal rule" and result.unconstrained.kind != "constrained"
    assert np.array_equal(result.unconstrained.delta, optimal_rule(rl, costs, columns).delta)
    assert result.specs == problem.specs and result.unit == costs.unit == "units"
    assert result.evaluation.reference_name == "unconstrained optimal rule"
    assert result.evaluation.regret_per_case == pytest.approx(result.price_per_case, rel=1e-9, abs=1e-12)
    assert result.rule.level_values == rl.level_values and result.rule.level_labels == rl.level_labels
    assert np.allclose(result.rule.weights, np.bincount(index, weights=rl.weights))
    assert list(result.rule.rule_cells.columns) == list(columns)
    split = (result.rule.delta.max(axis=1) <= 1 - 1e-6).any()
    assert result.rule.note == ("randomized where split" if split else "")
    assert split  # a binding cap in cases splits one rule cell
    # without constraints nothing is split and there is nothing to price
    free = ConstrainedProblem(rl, costs, [], columns=columns).solve()
    assert free.rule.note == "" and len(free.to_frame()) == 0 and free.price_per_case == pytest.approx(0.0, abs=1e-9)


def test_ties_go_to_the_most_lenient_optimal_rule():
    # half the cells cost the same at L0 and L1: among the optimal rules the LP returns the most
    # lenient unless asked not to (the argmin rule of policy/decision/solve.py breaks ties the same way)
    rl, costs, columns = random_instance(2, n_scores=4, n_buckets=3, ties=True)
    problem = ConstrainedProblem(rl, costs, [], columns=columns)
    lp = problem.solve_lp()
    assert np.allclose(lp.delta, optimal_rule(rl, costs, columns).delta, atol=1e-9)
    assert lp.lenient_pass is True  # the optimum is dual degenerate here: the second pass ran
    plain = ConstrainedProblem(rl, costs, [], columns=columns, settings=LPSettings(lenient_ties=False)).solve_lp()
    assert plain.lenient_pass is False and close(plain.cost_per_case, lp.cost_per_case, 1e-12)
    assert ConstrainedProblem(rl, costs, [], columns=columns, settings=LPSettings(lenient_ties=False)).solve_lp().lenient_pass is False
    assert problem.solve_lp(lenient_ties=False).lenient_pass is False
    lenient = ConstrainedProblem(rl, costs, [], columns=columns, settings=LPSettings(lenient_ties=False)).solve_lp(lenient_ties=True)
    assert np.allclose(lenient.delta, lp.delta, atol=1e-9)


def test_many_binding_rows_are_summed_up():
    # a tight statistical parity over three groups and two thresholds: more than three rows bind
    rl, costs, columns = random_instance(2, n_scores=3, n_buckets=2, n_groups=3, aware=True)
    result = ConstrainedProblem(rl, costs, [{"kind": "statistical_parity", "tolerance": 0.0, "name": "sp"}],
                                columns=columns).solve(sensitivity=False)
    row = result.to_frame().iloc[0]
    assert row["rows"] == 6 and row["binding"] and row["value"] == 0.0
    parts = row["binding_rows"].split("; ")
    assert parts[:3] == ["group g0 vs g1, all cases, P(D >= L1)", "group g0 vs g1, all cases, P(D >= L2)",
                         "group g0 vs g2, all cases, P(D >= L1)"]
    assert parts[3] == "and 3 more" and len(parts) == 4


def test_the_conflict_message_line_by_line(instance):
    # no case above L0 and an outcome cap: loosening either alone helps while the cap is above the
    # harshest rule's rate; below it, loosening the capacity alone cannot
    rl, costs, columns = instance
    W = rl.weights.sum()
    harshest = float((rl.weights * rl.p[:, 0, -1]).sum() / W)
    for cap, alone_helps in ((round(harshest + 0.01, 4), True), (round(harshest - 0.01, 4), False)):
        specs = [{"kind": "capacity", "at_least": "L1", "max_share": 0.0, "name": "capacity none held"},
                 {"kind": "outcome_cap", "outcome": "o0", "max_rate": cap, "name": "few"}]
        with pytest.raises(InfeasibleError) as info:
            ConstrainedProblem(rl, costs, specs, columns=columns).solve_lp()
        t = info.value.conflicts.set_index("constraint")
        a, b = t.loc["capacity none held"], t.loc["few"]
        # the kind is not repeated where the name holds it already
        first = "  - capacity none held (at_least=L1)"
        if a["loosen_by"] > 0:
            first += f": loosen max_share by {a['loosen_by']:.4g} to {a['loosened_bound']:.4g}"
        first += (f"; loosened alone, max_share {a['alone_bound']:.4g} would do" if alone_helps else
                  "; loosening it alone cannot make the constraints hold")
        second = "  - few (outcome_cap, outcome=o0)"
        if b["loosen_by"] > 0:
            second += f": loosen max_rate by {b['loosen_by']:.4g} to {b['loosened_bound']:.4g}"
        second += f"; loosened alone, max_rate {b['alone_bound']:.4g} would do"
        assert str(info.value).splitlines() == [
            "The constraints cannot all hold at once. These conflict:", first, second,
            ("'loosen ... by' is one smallest total loosening (summed in probability and share units); "
            "'alone' loosens that constraint only and keeps the others.")]
        assert a["loosen_by"] + b["loosen_by"] > 0
        assert np.isfinite(a["alone_bound"]) == alone_helps
        # the reference LP: the cap loosened alone to its bound is feasible, a little less is not
        assert reference_solve(rl, costs, columns, [specs[0], dict(specs[1], max_rate=b["alone_bound"] + 1e-7)])[0] is not None
        assert reference_solve(rl, costs, columns, [specs[0], dict(specs[1], max_rate=b["alone_bound"] - 1e-4)])[0] is None


def test_rule_columns_default_to_the_layouts_and_limit_the_names():
    rl, costs, columns = random_instance(4, n_scores=3, n_buckets=2, n_groups=2)
    assert ConstrainedProblem(rl, costs, []).columns == columns == ("score", "bucket")
    assert ConstrainedProblem(rl, costs, []).n_rule_cells == 6
    # a monotone score must be one of the problem's rule columns, not only of the layout's
    with pytest.raises(InputError) as info:
        ConstrainedProblem(rl, costs, [{"kind": "monotone", "score": "bucket"}], columns=("score",))
    assert str(info.value) == ("<constraints>: constraint #1 (kind 'monotone'): the score 'bucket' is not a rule column; "
                               "expected one of: score.")


def test_a_solver_stopped_early_is_an_error_naming_the_program(instance):
    rl, costs, columns = instance
    problem = ConstrainedProblem(rl, costs, [{"kind": "capacity", "max_share": 0.2}], columns=columns,
                                 settings=LPSettings(time_limit=1e-12))
    with pytest.raises(SolverError) as info:
        problem.solve_lp()
    text = str(info.value)
    assert text.startswith("the constrained rule's linear program: the solver stopped before proving optimality (")
    assert "status kTimeLimit" in text and text.endswith("Raise [linear_program] time_limit or simplify the constraints.")


def test_other_risk_levels_must_be_of_the_same_cells_and_levels(instance):
    rl, costs, columns = instance
    problem = ConstrainedProblem(rl, costs, [], columns=columns)
    # an equal layout that is another object is accepted; other cells of the same number, or
    # the same cells with another number of levels, are not
    copy = RiskLevels(CellLayout(rl.layout.frame.copy(), rl.layout.protected, rl.layout.rule_columns, rl.layout.score),
                      rl.level_values, rl.level_labels, rl.outcome_keys, rl.outcome_labels, rl.weights, rl.p, rl.borrowed)
    problem.set_risk_levels(copy)
    assert close(problem.solve().lp.cost_per_case, reference_solve(rl, costs, columns, [])[0])
    frame = rl.layout.frame.copy()
    frame["score"] = frame["score"].cat.rename_categories([7, 8, 9])
    other = RiskLevels(CellLayout(frame, rl.layout.protected, rl.layout.rule_columns, rl.layout.score),
                       rl.level_values, rl.level_labels, rl.outcome_keys, rl.outcome_labels, rl.weights, rl.p, rl.borrowed)
    two = RiskLevels(rl.layout, rl.level_values[:2], rl.level_labels[:2], rl.outcome_keys, rl.outcome_labels, rl.weights,
                     rl.p[..., :2], rl.borrowed[..., :2])
    for bad, levels in ((other, 3), (two, 2)):
        with pytest.raises(InputError) as info:
            problem.set_risk_levels(bad)
        assert str(info.value).startswith(f"risk levels of 12 cells and {levels} levels given; the problem was built for other cells")
    # with costs of their own: the objective uses them
    dearer = replace(costs, decision=costs.decision * 2.0)
    expected, _ = reference_solve(rl, dearer, columns, [])
    assert close(problem.set_risk_levels(rl, dearer).solve_lp().cost_per_case, expected)


def test_cvxpy_route_follows_changes_and_inactive_constraints(instance):
    rl, costs, columns = instance
    cap = round(0.5 * _free_share(rl, costs, columns), 4)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": cap, "name": "cap"},
             {"kind": "capacity", "at_least": "L1", "max_share": 0.0, "name": "none"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns, settings=LPSettings(solver="CLARABEL"))
    problem.set_active("none", False)
    assert close(problem.solve_lp().cost_per_case, reference_solve(rl, costs, columns, specs[:1])[0], 1e-5)
    dearer = replace(costs, decision=costs.decision * 2.0)
    problem.set_costs(dearer)
    assert close(problem.solve_lp().cost_per_case, reference_solve(rl, dearer, columns, specs[:1])[0], 1e-5)
    half = rl.with_p(rl.p * 0.5)
    problem.set_objective_probabilities(half.p)
    assert close(problem.solve_lp().cost_per_case, reference_solve(half, dearer, columns, specs[:1])[0], 1e-5)
    problem.set_risk_levels(half, dearer)
    assert close(problem.solve_lp().cost_per_case, reference_solve(half, dearer, columns, specs[:1])[0], 1e-5)
    problem.forget_basis()
    problem.set_active("none", True)
    assert close(problem.solve_lp().cost_per_case, reference_solve(half, dearer, columns, specs)[0], 1e-5)
    # conflicting constraints found infeasible by cvxpy's solver are explained as with HiGHS
    conflict = ConstrainedProblem(rl, costs, [{"kind": "capacity", "max_share": 0.0},
                                              {"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.0}],
                                  columns=columns, settings=LPSettings(solver="CLARABEL"))
    with pytest.raises(InfeasibleError):
        conflict.solve_lp()


def test_solve_defaults_and_what_sensitivity_adds(instance):
    rl, costs, _ = instance
    cap = round(0.5 * _free_share(rl, costs, ("score",)), 4)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": cap, "name": "cap"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=("score",))
    result = problem.solve()
    assert result.rule.name == "constrained optimal rule"
    # the unconstrained optimum on the problem's rule columns, not the layout's
    assert list(result.unconstrained.rule_cells.columns) == ["score"]
    assert np.array_equal(result.unconstrained.delta, optimal_rule(rl, costs, ("score",)).delta)
    row = result.to_frame().iloc[0]
    assert np.isfinite(row["saving_if_removed_per_1000"]) and np.isfinite(row["saving_per_point_per_1000"])
    # one point of a share is 0.01: the saving per point against two reference solves
    base, _ = reference_solve(rl, costs, ("score",), specs)
    looser, _ = reference_solve(rl, costs, ("score",), [dict(specs[0], max_share=cap + 0.01)])
    assert row["saving_per_point_per_1000"] == pytest.approx(1000 * (base - looser), rel=1e-6, abs=1e-6)
    # after the re-solves of the sensitivity, the problem solves as before
    assert close(problem.solve_lp().cost_per_case, base)
    row = problem.solve(sensitivity=False).to_frame().iloc[0]
    assert np.isnan(row["saving_if_removed_per_1000"]) and np.isnan(row["saving_per_point_per_1000"])
    # without constraints: no saving per constraint, the table's columns still named
    free = ConstrainedProblem(rl, costs, [], columns=("score",))
    assert free.solve_lp().saving.shape == (0,)
    assert list(free.solve().to_frame().columns) == [
        "constraint", "kind", "arguments", "bound_key", "bound", "unit", "rows", "value", "slack", "binding", "dual",
        "dual_per_1000", "saving_per_point_per_1000", "saving_if_removed_per_1000", "binding_rows", "note"]


def test_values_and_slacks_of_one_and_two_sided_rows():
    # one-sided rows (monotone: usually negative values) report their largest value, two-sided
    # ones their largest absolute value; slack = bound - value, in each bound's unit
    for seed in range(3):
        rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=2, n_groups=2, aware=True)
        W = rl.weights.sum()
        specs = [{"kind": "monotone", "tolerance": 0.3, "name": "mono"},
                 {"kind": "statistical_parity", "tolerance": 0.6, "name": "sp"},
                 {"kind": "capacity", "max_cases": 0.9 * W, "name": "cases"}]
        result = ConstrainedProblem(rl, costs, specs, columns=columns).solve(sensitivity=False)
        table = result.to_frame().set_index("constraint")
        mono, sp_values, cases = result.lp.row_values
        assert table.loc["mono", "value"] == pytest.approx(mono.max(), abs=1e-12)
        assert table.loc["mono", "slack"] == pytest.approx(0.3 - mono.max(), abs=1e-12)
        assert table.loc["sp", "value"] == pytest.approx(np.abs(sp_values).max(), abs=1e-12)
        assert table.loc["sp", "slack"] == pytest.approx(0.6 - np.abs(sp_values).max(), abs=1e-12)
        assert table.loc["cases", "value"] == pytest.approx(cases[0] * W, rel=1e-9)
        assert table.loc["cases", "slack"] == pytest.approx(0.9 * W - cases[0] * W, rel=1e-9)
    # exactly three and exactly four binding rows: named all, or three and "1 more"
    rl, costs, columns = random_instance(2, n_scores=3, n_buckets=2, n_groups=3, aware=True)
    three = ConstrainedProblem(rl, costs, [{"kind": "statistical_parity", "tolerance": 0.0, "thresholds": ["L2"]}],
                               columns=columns).solve(sensitivity=False).to_frame().iloc[0]["binding_rows"]
    assert three.count("; ") == 2 and "more" not in three
    rl, costs, columns = random_instance(2, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    four = ConstrainedProblem(rl, costs, [{"kind": "conditional_parity", "within": "bucket", "tolerance": 0.0}],
                              columns=columns).solve(sensitivity=False).to_frame().iloc[0]
    assert four["rows"] == 4 and four["binding_rows"].endswith("; and 1 more") and four["binding_rows"].count("; ") == 3


def test_one_call_solve_present_and_forget_basis(instance):
    rl, costs, columns = instance
    cap = round(0.5 * _free_share(rl, costs, columns), 4)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": cap}]
    expected, _ = reference_solve(rl, costs, columns, specs)
    result = solve_constrained(rl, costs, specs, columns=columns, settings=LPSettings(), name="one call")
    assert result.rule.name == "one call" and close(result.lp.cost_per_case, expected)
    assert list(result.rule.rule_cells.columns) == list(columns)
    assert solve_constrained(rl, costs, specs, columns).rule.name == "constrained optimal rule"
    assert list(solve_constrained(rl, costs, specs, ("score",)).rule.rule_cells.columns) == ["score"]
    with pytest.raises(SolverError):  # the settings given are used
        solve_constrained(rl, costs, specs, columns, settings=LPSettings(time_limit=1e-12))
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    problem.forget_basis()  # before any solve: nothing to forget
    lp = problem.solve_lp()
    shown = problem.present(lp.delta, "shown")
    assert shown.name == "shown" and np.array_equal(shown.delta, lp.delta) and shown.kind == "constrained"
    # after forgetting its basis a problem solves as a newly built one, to the bit
    problem.set_costs(outcome_costs=costs.outcome * 1.5).solve_lp()
    problem.set_costs(outcome_costs=costs.outcome)
    again = problem.forget_basis().solve_lp()
    fresh = ConstrainedProblem(rl, costs, specs, columns=columns).solve_lp()
    assert np.array_equal(again.delta, fresh.delta) and again.cost_per_case == fresh.cost_per_case
    # and after a change of the model (other risk levels), followed by other costs, too
    problem.set_risk_levels(rl.with_p(rl.p * 0.9))
    problem.forget_basis()
    problem.set_costs(outcome_costs=costs.outcome * 2.0)
    assert close(problem.solve_lp().cost_per_case,
                 reference_solve(rl.with_p(rl.p * 0.9), replace(costs, outcome=costs.outcome * 2.0), columns, specs)[0])


def test_savings_of_a_constraint_after_one_without_rows():
    rl, costs, columns = random_instance(5, n_scores=3, n_buckets=2, n_groups=2)
    cap = round(0.5 * _free_share(rl, costs, columns), 4)
    specs = [{"kind": "group_blind", "name": "blind"}, {"kind": "capacity", "at_least": "L1", "max_share": cap, "name": "cap"}]
    table = ConstrainedProblem(rl, costs, specs, columns=columns).solve().to_frame().set_index("constraint")
    assert table.loc["blind", "rows"] == 0 and table.loc["blind", "saving_if_removed_per_1000"] == 0.0
    base, _ = reference_solve(rl, costs, columns, specs[1:])
    free, _ = reference_solve(rl, costs, columns, [])
    assert table.loc["cap", "saving_if_removed_per_1000"] == pytest.approx(1000 * (base - free), rel=1e-6)


def test_group_blind_on_one_of_two_protected_attributes():
    # score x group x sex, both protected and in the rule: blind to the group only, the rule is
    # presented on score and sex; with a binding cap one coarse rule cell is split and says so
    from .test_constraint_rows import BLIND_CELLS, BLIND_COLUMNS, _risk_levels

    rl = _risk_levels(BLIND_CELLS, BLIND_COLUMNS, ["group", "sex"], ["score", "group", "sex"], seed=3)
    rng = np.random.default_rng(3)
    decision = np.cumsum(rng.uniform(0, 300, size=(8, 3)), axis=1)
    decision[:, 0] = 0.0
    costs = Costs(decision, np.array([900.0, 1500.0]), "units", rl.level_labels, rl.outcome_labels)
    columns = ("score", "group", "sex")
    blind = {"kind": "group_blind", "attribute": "group"}
    result = ConstrainedProblem(rl, costs, [blind], columns=columns).solve(sensitivity=False)
    assert list(result.rule.rule_cells.columns) == ["score", "sex"]
    assert close(result.lp.cost_per_case, reference_solve(rl, costs, columns, [blind])[0])
    share = _free_share(rl, costs, ("score", "sex"))
    capped = [blind, {"kind": "capacity", "at_least": "cond", "max_share": round(0.5 * share, 4)}]
    result = ConstrainedProblem(rl, costs, capped, columns=columns).solve(sensitivity=False)
    assert close(result.lp.cost_per_case, reference_solve(rl, costs, columns, capped)[0])
    assert (result.rule.delta.max(axis=1) <= 1 - 1e-6).any() and result.rule.note == "randomized where split"


def test_constraints_given_as_specs_are_checked_against_the_problem(instance):
    rl, costs, columns = instance
    from policy.decision.constraints import ConstraintSpec

    specs = [ConstraintSpec("monotone", "mono", score="score", tolerance=0.0),
             ConstraintSpec("statistical_parity", "sp", thresholds=("L2",), tolerance=0.1),
             ConstraintSpec("principal_fairness", "pf", outcome="o0", risk_levels=(1, 2), tolerance=0.2),
             {"kind": "capacity", "max_share": 0.6, "name": "cap"}]
    problem = ConstrainedProblem(rl, costs, specs, columns=columns)
    assert problem.specs[:3] == tuple(specs[:3])
    assert problem.specs[3] == ConstraintSpec("capacity", "cap", at_least="L2", max_share=0.6)
    # zero and non-zero tolerances kept as given, a table without a name named by its position
    more = [ConstraintSpec("statistical_parity", "sp0", tolerance=0.0), ConstraintSpec("monotone", "m2", score="score", tolerance=0.02),
            ConstraintSpec("monotone", "m1", score="score", tolerance=1.0), {"kind": "capacity", "max_share": 0.6}]
    assert ConstrainedProblem(rl, costs, more, columns=columns).specs == tuple(more[:3]) + (
        ConstraintSpec("capacity", "#4 capacity", at_least="L2", max_share=0.6),)
    as_tables = [{"kind": "monotone", "score": "score", "name": "mono"},
                 {"kind": "statistical_parity", "thresholds": ["L2"], "tolerance": 0.1, "name": "sp"},
                 {"kind": "principal_fairness", "outcome": "o0", "risk_levels": [1, 2], "tolerance": 0.2, "name": "pf"},
                 specs[3]]
    assert close(problem.solve_lp().cost_per_case, reference_solve(rl, costs, columns, as_tables)[0])
    for bad, text in (([ConstraintSpec("capacity", "big", at_least="L1", max_share=2.0)],
                       "<constraints>: key 'max_share' in constraint 'big' must be a share in 0..1; got 2.0."),
                      ([{"kind": "capacity"}],
                       "<constraints>: constraint #1 (kind 'capacity') must give exactly one of 'max_share' (0..1) or 'max_cases'."),
                      ([{"kind": "capacity", "max_share": 0.1}, "capacity"],
                       "constraint #2 must be a ConstraintSpec or a table of keys; got str."),
                      ([{"kind": "capacity", "max_share": 0.1, "name": "x"}, {"kind": "capacity", "max_share": 0.2, "name": "y"},
                        ConstraintSpec("capacity", "x", at_least="L2", max_share=0.3)],
                       "two constraints are named 'x'; give each its own name.")):
        with pytest.raises(InputError) as info:
            ConstrainedProblem(rl, costs, bad, columns=columns)
        assert str(info.value) == text


def test_conflict_table_in_each_bound_unit(instance):
    # the same conflict with the capacity in cases: how far to loosen it is in cases, without the
    # upper end of a share; a constraint not involved has no 'alone' figures
    rl, costs, columns = instance
    W = rl.weights.sum()
    harshest = float((rl.weights * rl.p[:, 0, -1]).sum() / W)
    # switched off, first and last: two constraints that would conflict with everything
    off = [{"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.0, "name": "off first"},
           {"kind": "outcome_cap", "outcome": "o1", "max_rate": 0.0, "name": "off last"}]
    share_specs = [off[0], {"kind": "statistical_parity", "tolerance": 1.0, "name": "loose"},
                   {"kind": "capacity", "at_least": "L1", "max_share": 0.0, "name": "held"},
                   {"kind": "outcome_cap", "outcome": "o0", "max_rate": round(harshest + 0.01, 4), "name": "few"}, off[1]]
    case_specs = list(share_specs)
    case_specs[2] = {"kind": "capacity", "at_least": "L1", "max_cases": 0.0, "name": "held"}
    tables = []
    for specs in (share_specs, case_specs):
        problem = ConstrainedProblem(rl, costs, specs, columns=columns)
        problem.set_active("off first", False).set_active("off last", False)
        with pytest.raises(InfeasibleError) as info:
            problem.solve_lp()
        tables.append(info.value.conflicts.set_index("constraint"))
        assert not info.value.conflicts["involved"].iloc[[0, 1, 4]].any()
    shares, cases = tables
    assert list(cases.columns) == ["kind", "arguments", "bound_key", "bound", "unit", "involved", "loosen_by",
                                   "loosened_bound", "alone_by", "alone_bound"]
    assert (cases.loc["held", "bound_key"], cases.loc["held", "unit"], cases.loc["held", "bound"]) == ("max_cases", "cases", 0.0)
    assert cases.loc["held", "loosen_by"] == pytest.approx(shares.loc["held", "loosen_by"] * W, rel=1e-6)
    assert cases.loc["held", "alone_by"] == pytest.approx(shares.loc["held", "alone_by"] * W, rel=1e-6)
    assert cases.loc["held", "alone_bound"] == pytest.approx(cases.loc["held", "alone_by"], rel=1e-9)
    assert cases.loc["held", "alone_bound"] > 1  # cases have no upper end of 1
    row = shares.loc["loose"]
    assert not row["involved"] and row["loosen_by"] == 0 and np.isnan(row["alone_by"]) and np.isnan(row["alone_bound"])
    assert (row["bound_key"], row["bound"], row["unit"]) == ("tolerance", 1.0, "probability difference")


def test_lenient_ties_across_rule_cells_are_weighed_by_cases():
    # A tie built by hand (one outcome, no outcome cost, a cap on its rate). Rule cell A (score 1):
    # three cells of 10 cases; rule cell B (score 2): three cells of 30 cases. Moving a case of A
    # to L1, or a case of B to L2, lowers the outcome from 0.5 to 0.3 for a decision cost of 100:
    # every split that meets the cap costs the same. With case shares 1/4 and 3/4 the cap of 0.4
    # asks 1/4 dA + 3/4 dB = 1/2 of the cases moved (dA, dB: the shares moved). The most lenient
    # of these rules (fewest cases times levels, docs/method.md section 5) minimizes
    # 1/4 dA + 3/4 * 2 dB: dA = 1, dB = 1/3 (worked by hand). Weighing the rule cells by their
    # number of cells (1/2 each) would minimize dA/2 + dB instead: dA = 0, dB = 2/3.
    frame = pd.DataFrame({
        "score": pd.Categorical([1, 1, 1, 2, 2, 2], categories=[1, 2], ordered=True),
        "bucket": pd.Categorical(["b0", "b1", "b2"] * 2, categories=["b0", "b1", "b2"], ordered=True),
    })
    layout = CellLayout(frame, (), ("score", "bucket"), "score")
    values = ("L0", "L1", "L2")
    a, b = [0.5, 0.3, 0.3], [0.5, 0.5, 0.3]
    p = np.array([a] * 3 + [b] * 3, dtype=float)[:, None, :]
    w = np.array([10.0] * 3 + [30.0] * 3)
    rl = RiskLevels(layout, values, values, ("o0",), ("o0",), w, p, np.zeros_like(p, dtype=bool), source="by hand")
    decision = np.array([[0.0, 100.0, 150.0]] * 3 + [[0.0, 150.0, 100.0]] * 3)
    costs = Costs(decision, np.array([0.0]), "units", values, ("o0",))
    specs = [{"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.4}]
    lp = ConstrainedProblem(rl, costs, specs, columns=("score",)).solve_lp()
    assert lp.lenient_pass is True
    assert np.allclose(lp.delta, [[0.0, 1.0, 0.0], [2 / 3, 0.0, 1 / 3]], atol=1e-7)
    # the cost of every tied rule: half the cases moved at 100 each
    assert close(lp.cost_per_case, 50.0)
    expected, _ = reference_solve(rl, costs, ("score",), specs)
    assert close(lp.cost_per_case, expected)


def test_a_capacity_in_cases_loosened_by_the_elastic_program():
    # Two outcomes, each 0.8 released and 0.1 held (invented, worked by hand); 40 cases in two
    # cells, no one may be held (max_cases 0), and each outcome is capped at 0.45. Holding a share
    # x lowers both rates by 0.7 x, so loosening the capacity by x = 0.5 meets both caps at a total
    # loosening of 0.5, while loosening the caps instead costs 2 x 0.35 = 0.7 (the smallest total
    # loosening, docs/method.md section 5): the capacity is loosened by 0.5 x 40 = 20 cases.
    frame = pd.DataFrame({"score": pd.Categorical([1, 2], categories=[1, 2], ordered=True)})
    layout = CellLayout(frame, (), ("score",), "score")
    values, keys = ("L0", "L1"), ("o0", "o1")
    p = np.array([[[0.8, 0.1], [0.8, 0.1]]] * 2)
    rl = RiskLevels(layout, values, values, keys, keys, np.array([30.0, 10.0]), p, np.zeros_like(p, dtype=bool),
                    source="by hand")
    costs = Costs(np.array([[0.0, 100.0]] * 2), np.array([0.0, 0.0]), "units", values, keys)
    specs = [{"kind": "capacity", "at_least": "L1", "max_cases": 0.0, "name": "none held"},
             {"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.45, "name": "cap 0"},
             {"kind": "outcome_cap", "outcome": "o1", "max_rate": 0.45, "name": "cap 1"}]
    with pytest.raises(InfeasibleError) as info:
        ConstrainedProblem(rl, costs, specs, columns=("score",)).solve_lp()
    table = info.value.conflicts.set_index("constraint")
    held = table.loc["none held"]
    assert held["unit"] == "cases" and held["involved"]
    assert held["loosen_by"] == pytest.approx(20.0, rel=1e-9)
    assert held["loosened_bound"] == pytest.approx(20.0, rel=1e-9)
    assert table.loc["cap 0", "loosen_by"] == pytest.approx(0.0, abs=1e-9)
    assert table.loc["cap 1", "loosen_by"] == pytest.approx(0.0, abs=1e-9)
    # the bound found holds: the reference LP with 20 cases held is feasible, with 19.9 it is not
    assert reference_solve(rl, costs, ("score",), [dict(specs[0], max_cases=20.0 + 1e-9)] + specs[1:])[0] is not None
    assert reference_solve(rl, costs, ("score",), [dict(specs[0], max_cases=19.9)] + specs[1:])[0] is None


def test_conflict_table_row_of_a_group_blind_constraint():
    # a group-blind constraint has no bound to loosen: in the conflict table its bound key is empty
    # (docs/outputs.md, the conflict table's columns) and its bound 0; the others name theirs
    rl, costs, columns = random_instance(3, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    W = rl.weights.sum()
    harshest = float((rl.weights * rl.p[:, 0, -1]).sum() / W)
    specs = [{"kind": "group_blind", "name": "blind"},
             {"kind": "capacity", "at_least": "L1", "max_share": 0.0, "name": "none held"},
             {"kind": "outcome_cap", "outcome": "o0", "max_rate": round(harshest + 0.01, 4), "name": "few"}]
    with pytest.raises(InfeasibleError) as info:
        ConstrainedProblem(rl, costs, specs, columns=columns).solve_lp()
    table = info.value.conflicts.set_index("constraint")
    blind = table.loc["blind"]
    assert blind["kind"] == "group_blind" and blind["bound_key"] == "" and blind["bound"] == 0.0
    assert table.loc["none held", "bound_key"] == "max_share" and table.loc["few", "bound_key"] == "max_rate"


def test_a_conflict_smaller_than_the_feasibility_tolerance_is_reported_as_solver_trouble():
    # a capacity just below the smallest share that meets the outcome cap: HiGHS reports the LP
    # infeasible, but the elastic program finds the constraints violated by less than the
    # feasibility tolerance (1e-6) in total: that is named solver trouble, not a conflict. The
    # capacity is found here by bisection between a clear conflict and a feasible bound (the
    # independent reference LP, scipy's HiGHS, agrees on both), so the test follows the solver's
    # own tolerance rather than a bound found once on one HiGHS release
    rl, costs, columns = random_instance(0, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    cap = {"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.3694, "name": "few"}
    with_capacity = lambda share: [{"kind": "capacity", "at_least": "L1", "max_share": share, "name": "held"}, cap]
    lo, hi = 0.2655, 0.27
    assert reference_solve(rl, costs, columns, with_capacity(lo))[0] is None
    assert reference_solve(rl, costs, columns, with_capacity(hi))[0] is not None
    with pytest.raises(InfeasibleError):  # a bound 0.001 under the edge is a conflict
        ConstrainedProblem(rl, costs, with_capacity(lo), columns=columns).solve_lp()
    trouble = None
    for _ in range(80):  # conflicts below, feasible above, and between them a band narrower than 1e-6
        mid = 0.5 * (lo + hi)
        try:
            ConstrainedProblem(rl, costs, with_capacity(mid), columns=columns).solve_lp()
        except SolverError as error:
            trouble = error
            break
        except InfeasibleError:
            lo = mid
        else:
            hi = mid
    assert trouble is not None, (lo, hi)
    text = str(trouble)
    assert text.startswith("the solver reported the constraints infeasible (status kInfeasible), but a version with "
                           "slack finds them violated by only ")
    assert text.endswith("in total; this is solver trouble, not a conflict. Try another [linear_program] solver or method.")
    total = float(text.split("violated by only ")[1].split(" ")[0])
    assert 0 < total <= 1e-6  # FEASIBILITY_TOLERANCE
