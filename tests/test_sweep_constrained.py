"""Constrained optima along a cost-ratio sweep (policy/assessment/sweep/constrained.py)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from policy.decision.constrained import ConstrainedProblem
from policy.errors import InputError
from policy.assessment.sweep import ratio_axis, sweep_one, sweep_scenario
from policy.assessment.sweep.constrained import constrained_sweep, ratio_grid

from .conftest import SCENARIOS, run_cli
from .constrained_reference import random_instance, reference_solve

SPECS = [
    {"kind": "principal_fairness", "name": "fair", "outcome": "o0", "tolerance": 0.03},
    {"kind": "capacity", "name": "cap", "at_least": "L2", "max_share": 0.2},
]


def costs_at(costs, axis, r):
    return costs.with_outcome_cost(axis.outcome_index, r * axis.reference_cost)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_constrained_costs_and_prices_match_an_independent_linprog(seed):
    # Reference: scipy.optimize.linprog(method="highs") on a formulation written separately from
    # the definitions (tests/constrained_reference.py), solved afresh at each ratio.
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=3, n_groups=2)
    axis = ratio_axis(rl, costs, "o0")
    ratios = ratio_grid(0.0, 4 * axis.scenario_ratio, 7, "linear")
    cs = constrained_sweep(rl, costs, axis, ratios, SPECS, columns=columns)
    for i, r in enumerate(ratios):
        c = costs_at(costs, axis, r)
        expected, _ = reference_solve(rl, c, columns, SPECS)
        assert cs.cost[0, i] == pytest.approx(expected, rel=1e-7, abs=1e-9)
        for k, spec in enumerate(SPECS):
            without, _ = reference_solve(rl, c, columns, [s for s in SPECS if s is not spec])
            assert cs.removed[0, i, k] == pytest.approx(max(expected - without, 0.0), rel=1e-6, abs=1e-8)
    # the price is measured against the exact unconstrained optimum, never negative
    assert (cs.price >= -1e-9).all()
    assert np.allclose(cs.shares.sum(axis=-1), 1.0)


def test_loose_constraints_cost_nothing_and_give_the_unconstrained_shares():
    rl, costs, columns = random_instance(4, n_scores=3, n_buckets=3)
    axis = ratio_axis(rl, costs, "o1")
    loose = [{"kind": "capacity", "name": "cap", "at_least": "L1", "max_share": 1.0}]
    ratios = ratio_grid(0.0, 5.0, 41, "linear")
    cs = constrained_sweep(rl, costs, axis, ratios, loose, columns=columns)
    s = sweep_one(rl, costs, axis, 0.0, 5.0, columns=columns)
    np.testing.assert_allclose(cs.price[0], 0.0, atol=1e-9)
    knots = s.shares.knots
    away = np.array([np.all(np.abs(r - knots) > 1e-9) for r in ratios])
    np.testing.assert_allclose(cs.shares[0, away], s.share_at(ratios[away]), atol=1e-9)
    np.testing.assert_allclose(cs.removed[0], 0.0, atol=1e-9)


def test_looser_caps_never_cost_more_and_infeasible_points_are_reported():
    rl, costs, columns = random_instance(5, n_scores=3, n_buckets=3)
    axis = ratio_axis(rl, costs, "o0")
    specs = [{"kind": "capacity", "name": "cap", "at_least": "L1", "max_share": 0.3},
             {"kind": "outcome_cap", "name": "rate", "outcome": "o0", "max_rate": 0.0}]
    # an outcome rate of 0 cannot be reached while few cases may leave the lenient level
    rate0 = min(float(np.average(rl.p[:, 0, :].min(axis=1), weights=rl.weights)), 1.0)
    specs[1]["max_rate"] = rate0 + 0.5 * (float(np.average(rl.p[:, 0, 0], weights=rl.weights)) - rate0)
    cs = constrained_sweep(rl, costs, axis, ratio_grid(0.0, 3.0, 6, "linear"), specs, columns=columns,
                           vary="cap", values=[0.0, 0.2, 0.5, 1.0])
    assert not cs.feasible[0].any() and cs.feasible[-1].all()
    assert np.isnan(cs.cost[0]).all()
    ok = cs.feasible[1:] & cs.feasible[:-1]
    assert (cs.cost[1:][ok] <= cs.cost[:-1][ok] + 1e-9).all()
    frame = cs.to_frame()
    assert len(frame) == 4 * 6 and set(frame["bound"]) == {0.0, 0.2, 0.5, 1.0}
    assert (~frame["feasible"]).sum() == (~cs.feasible).sum()


def test_reused_problem_equals_fresh_solves():
    # Re-solving one compiled problem along the grid gives what a new problem gives at each ratio.
    rl, costs, columns = random_instance(6, n_scores=3, n_buckets=3, n_groups=2)
    axis = ratio_axis(rl, costs, "o1")
    ratios = ratio_grid(0.05, 10.0, 9, "log")
    cs = constrained_sweep(rl, costs, axis, ratios, SPECS, columns=columns, removal=False)
    for i, r in enumerate(ratios):
        fresh = ConstrainedProblem(rl, costs_at(costs, axis, r), SPECS, columns).solve_lp()
        assert cs.cost[0, i] == pytest.approx(fresh.cost_per_case, rel=1e-9, abs=1e-12)
        np.testing.assert_allclose(cs.dual[0, i], fresh.saving, rtol=1e-6, atol=1e-9)
    assert np.isnan(cs.removed).all()


def test_bad_requests():
    rl, costs, columns = random_instance(7)
    axis = ratio_axis(rl, costs, "o0")
    with pytest.raises(InputError, match="at least one constraint"):
        constrained_sweep(rl, costs, axis, [0.0, 1.0], [], columns=columns)
    with pytest.raises(InputError, match="no constraint is named"):
        constrained_sweep(rl, costs, axis, [0.0, 1.0], SPECS, columns=columns, vary="nope", values=[0.1])
    with pytest.raises(InputError, match="group-blind"):
        constrained_sweep(rl, costs, axis, [0.0, 1.0], [{"kind": "group_blind"}], columns=columns, vary=1, values=[0.1])
    with pytest.raises(InputError, match="values"):
        constrained_sweep(rl, costs, axis, [0.0, 1.0], SPECS, columns=columns, vary="cap", values=[])
    with pytest.raises(InputError, match="2 grid points"):
        ratio_grid(0.0, 1.0, 1, "linear")


def test_scenario_sweep_with_the_demo_constraints(tmp_path, capsys):
    code, out, err = run_cli(["sweep", SCENARIOS / "demo_constrained.toml", "--out", tmp_path, "--ratio", "new_offense",
                              "--lp-points", "6", "--vary", "at most 15% held=0.1,0.2", "--figure", "svg",
                              "--gamma", "1.25", "--replicates", "0"], capsys)
    assert code == 0, err
    frame = pd.read_csv(tmp_path / "sweep_constrained.csv")
    prices = pd.read_csv(tmp_path / "sweep_constraint_prices.csv")
    assert len(frame) == 12 and set(frame["varied"]) == {"at most 15% held"}
    assert (frame["price_per_1000"] >= -1e-6).all()
    assert set(prices["constraint"]) == {"no protected attributes", "alike within new-offense risk levels", "at most 15% held"}
    assert prices.loc[prices["kind"] == "group_blind", "dual_per_1000"].isna().all()
    meta = json.loads((tmp_path / "sweep.json").read_text())
    assert meta["constrained"]["varied"] == "at most 15% held" and meta["constrained"]["bounds"] == [0.1, 0.2]
    assert (tmp_path / "sweep_prices.svg").stat().st_size > 10_000
    assert "Constrained optimum re-solved at 6 ratios" in out


@pytest.mark.parametrize("args, message", [
    (["--ratio", "new_offense", "--ratio", "missed_court", "--max-share", "bond=0.1"], "one ratio"),
    (["--ratio", "new_offense", "--vary", "nothing=0.1"], "no constraint is named"),
    (["--ratio", "new_offense", "--vary", "1=0.1"], "group-blind"),
    (["--ratio", "new_offense", "--vary", "at most"], "NAME=V1,V2"),
])
def test_cli_constrained_sweep_errors(tmp_path, capsys, args, message):
    code, out, err = run_cli(["sweep", SCENARIOS / "demo_constrained.toml", "--out", tmp_path / "o", "--lp-points", "3",
                              "--replicates", "0"] + args, capsys)
    assert code == 2 and message in err
    assert not (tmp_path / "o").exists()


def test_no_constraints_means_no_constrained_outputs():
    res = sweep_scenario(SCENARIOS / "demo_constrained.toml", ["new_offense"], scenario_constraints=False,
                         gammas=[], bounds=False, replicates=0)
    assert res.constrained is None
    assert not any(name.startswith("sweep_constrain") for name in res.output_files())
