"""A constrained sweep worked out by hand (policy/assessment/sweep/constrained.py), on the three cells
of tests/test_sweep_tables.py with one cap: at most a quarter of the cases at "conditions" or harsher.

Per case at ratio r (outcome cost 200 r): A (2 cases) 100 r, 100 + 50 r, 200 + 25 r; B (1 case)
100 r, 100 + 100 r, 200 + 50 r; C (1 case) 50 r + decision cost (always lenient).

- r = 1: everyone lenient, the cap is slack: cost 350 / 4 = 87.5 per case, price 0.
- r = 3: the optimum holds A at conditions (2 cases, half the cases). The cap allows 1 case, so
  one of A's two cases goes back to recognizance at 300 - 250 = 50 more: (950 + 50) / 4 = 250 per
  case, price 12.5; loosening the cap by a share e lets 4 e more cases of A stay at conditions,
  saving 50 per case moved: 50 per case per unit of the bound. A is split between two levels.
- r = 5: the optimum holds A and B at bond (3 cases). Only 1 may stay: B back to recognizance
  (500 - 450 = 50 more) and one case of A (500 - 325 = 175 more): (1350 + 225) / 4 = 393.75 per
  case, price 56.25; the next case freed is A's: 175 per case per unit of the bound.

The LP's optimum is unique at each point (the costs of moving differ), so these are the solver's
numbers whatever its path; scipy's HiGHS on an independent formulation agrees with the solver on
random instances in tests/test_sweep_constrained.py.
"""

from __future__ import annotations

import pickle
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from policy.assessment.sweep import ratio_axis, sweep_one
from policy.assessment.sweep.constrained import SWEEP_BLOCK, constrained_sweep, ratio_grid
from policy.assessment.uncertainty import InProcess
from policy.decision.constrained import LPSettings
from policy.errors import InputError

from .constrained_reference import random_instance
from .test_sweep_tables import LABELS, LEVELS, hand_example

CAP = [{"kind": "capacity", "name": "quarter", "at_least": "cond", "max_share": 0.25}]


@pytest.fixture(scope="module")
def swept():
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    calls = []
    cs = constrained_sweep(rl, costs, axis, [1.0, 3.0, 5.0], CAP, vary="quarter", values=[0.25, 1.0],
                           on_point=lambda done, total: calls.append((done, total)))
    return rl, costs, axis, cs, calls


def test_costs_prices_duals_and_shares_by_hand(swept):
    _, _, _, cs, calls = swept
    assert cs.varied == "quarter" and cs.scale == "linear" and cs.unit == "EUR" and "HiGHS" in cs.solver
    np.testing.assert_array_equal(cs.bounds, [0.25, 1.0])
    np.testing.assert_allclose(cs.ratios, [1.0, 3.0, 5.0])
    assert cs.feasible.all()
    np.testing.assert_allclose(cs.unconstrained, [87.5, 237.5, 337.5])
    np.testing.assert_allclose(cs.cost, [[87.5, 250.0, 393.75], [87.5, 237.5, 337.5]], rtol=1e-9)
    np.testing.assert_allclose(cs.price, [[0.0, 12.5, 56.25], [0.0, 0.0, 0.0]], atol=1e-9)
    np.testing.assert_allclose(cs.dual[..., 0], [[0.0, 50.0, 175.0], [0.0, 0.0, 0.0]], atol=1e-9)
    np.testing.assert_allclose(cs.removed[..., 0], [[0.0, 12.5, 56.25], [0.0, 0.0, 0.0]], atol=1e-9)
    np.testing.assert_array_equal(cs.split, [[0, 1, 1], [0, 0, 0]])
    np.testing.assert_allclose(cs.shares, [[[1, 0, 0], [0.75, 0.25, 0], [0.75, 0, 0.25]],
                                           [[1, 0, 0], [0.5, 0.5, 0], [0.25, 0, 0.75]]], atol=1e-9)
    assert calls == [(k, 6) for k in range(1, 7)]


def test_tables_by_hand(swept):
    _, _, _, cs, _ = swept
    frame = cs.to_frame()
    expected = pd.DataFrame({
        "varied": ["quarter"] * 6, "bound": [0.25] * 3 + [1.0] * 3, "ratio": [1.0, 3.0, 5.0] * 2,
        "cost": [200.0, 600.0, 1000.0] * 2, "feasible": [True] * 6,
        "cost_per_1000": [87500.0, 250000.0, 393750.0, 87500.0, 237500.0, 337500.0],
        "unconstrained_per_1000": [87500.0, 237500.0, 337500.0] * 2,
        "price_per_1000": [0.0, 12500.0, 56250.0, 0.0, 0.0, 0.0],
        "split_rule_cells": [0, 1, 1, 0, 0, 0],
        "share_ror": [1.0, 0.75, 0.75, 1.0, 0.5, 0.25], "share_cond": [0.0, 0.25, 0.0, 0.0, 0.5, 0.0],
        "share_bond": [0.0, 0.0, 0.25, 0.0, 0.0, 0.75],
    })
    pd.testing.assert_frame_equal(frame, expected, check_dtype=False, atol=1e-6)
    prices = cs.price_table()
    expected = pd.DataFrame({
        "varied": ["quarter"] * 6, "bound": [0.25] * 3 + [1.0] * 3, "ratio": [1.0, 3.0, 5.0] * 2,
        "cost": [200.0, 600.0, 1000.0] * 2, "constraint": ["quarter"] * 6, "kind": ["capacity"] * 6,
        "saving_if_removed_per_1000": [0.0, 12500.0, 56250.0, 0.0, 0.0, 0.0],
        "dual_per_1000": [0.0, 50000.0, 175000.0, 0.0, 0.0, 0.0],
    })
    pd.testing.assert_frame_equal(prices, expected, check_dtype=False, atol=1e-6)
    # the scenario's ratio is 3, a grid point
    summary = cs.summary()
    expected = pd.DataFrame({"bound": [0.25, 1.0], "ratio": [3.0, 3.0], "price_per_1000_there": [12500.0, 0.0],
                             "lowest_price_per_1000": [0.0, 0.0], "highest_price_per_1000": [56250.0, 0.0],
                             "infeasible_points": [0, 0]})
    pd.testing.assert_frame_equal(summary, expected, check_dtype=False, atol=1e-6)


def test_text_by_hand(swept):
    _, _, _, cs, _ = swept
    lines = str(cs).splitlines()
    assert lines[0] == (f"Constrained optimum re-solved at 3 ratios from 1 to 5; 'quarter' bound over 0.25, 1 "
                        f"(quarter; {cs.solver}).")
    assert lines[1] == "  bound 0.25: price 0 to 56,250 EUR per 1,000 cases over the grid; 12,500 near the scenario's ratio"
    assert lines[2] == "  bound 1: price 0 to 0 EUR per 1,000 cases over the grid; 0 near the scenario's ratio"
    assert len(lines) == 3


def test_one_bound_as_declared_infeasible_points_and_no_removal():
    # a second cap, of 0 at "conditions" or harsher: everyone lenient, 350 / 4 at r = 1 and
    # (600 + 300 + 150) / 4 = 262.5 at r = 3 (price 25 per case)
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    specs = CAP + [{"kind": "capacity", "name": "none", "at_least": "cond", "max_share": 0.0}]
    cs = constrained_sweep(rl, costs, axis, [1.0, 3.0], specs, removal=False)
    assert cs.varied is None and np.isnan(cs.bounds).all() and cs.cost.shape == (1, 2)
    np.testing.assert_allclose(cs.cost[0], [87.5, 262.5])
    assert np.isnan(cs.removed).all()
    frame = cs.to_frame()
    assert list(frame["varied"]) == ["", ""] and frame["bound"].isna().all()
    assert list(cs.price_table()["constraint"]) == ["quarter", "none"] * 2
    assert np.isnan(cs.summary()["bound"]).all()
    lines = str(cs).splitlines()
    assert lines[0] == f"Constrained optimum re-solved at 2 ratios from 1 to 3 (quarter, none; {cs.solver})."
    assert lines[1] == "  price 0 to 25,000 EUR per 1,000 cases over the grid; 25,000 near the scenario's ratio"
    assert (cs.price_table()["varied"] == "").all()
    # an outcome rate of 0.1 cannot be reached (everyone at bond gives (2 x 0.125 + 0.25 + 0.25) / 4
    # = 0.1875): reported as infeasible, and the sweep goes on to the next bound
    rate = CAP + [{"kind": "outcome_cap", "name": "rate", "outcome": "o0", "max_rate": 0.1}]
    infeasible = constrained_sweep(rl, costs, axis, [1.0, 3.0], rate, vary="rate", values=[0.1, 1.0])
    assert not infeasible.feasible[0].any() and infeasible.feasible[1].all()
    assert np.isnan(infeasible.cost[0]).all() and np.isnan(infeasible.shares[0]).all()
    np.testing.assert_allclose(infeasible.cost[1], [87.5, 250.0])
    table = infeasible.summary()
    assert np.isnan(table["price_per_1000_there"][0]) and np.isnan(table["lowest_price_per_1000"][0])
    assert table["infeasible_points"].tolist() == [2, 0]
    text_rows = str(infeasible).splitlines()
    assert text_rows[1] == "  bound 0.1: the constraints cannot all hold anywhere on the grid"


def test_more_points_than_one_block_and_a_given_unconstrained_sweep():
    # Reference: each grid point solved alone (a sweep of that one ratio)
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    ratios = ratio_grid(0.0, 5.5, SWEEP_BLOCK + 2, "linear")
    s = sweep_one(rl, costs, axis, 0.0, 5.5)
    cs = constrained_sweep(rl, costs, axis, ratios, CAP, unconstrained=s, scale="log")
    assert cs.scale == "log"
    for i, r in enumerate(ratios):
        alone = constrained_sweep(rl, costs, axis, [r], CAP)
        assert cs.cost[0, i] == pytest.approx(alone.cost[0, 0], rel=1e-9, abs=1e-9)
        assert alone.unconstrained[0] == pytest.approx(float(s.optimal_cost_at(r)))
    np.testing.assert_allclose(cs.unconstrained, s.optimal_cost_at(ratios))


@pytest.mark.parametrize("ratios", [[], [[1.0, 2.0]], [-1.0, 1.0], [1.0, np.inf]])
def test_bad_ratios_are_refused(ratios):
    rl, costs = hand_example()
    with pytest.raises(InputError) as err:
        constrained_sweep(rl, costs, ratio_axis(rl, costs, "o0"), ratios, CAP)
    assert str(err.value) == "the ratios of a constrained sweep must be finite numbers >= 0."


def test_ratio_grid_by_hand():
    np.testing.assert_allclose(ratio_grid(1.0, 9.0, 3, "linear"), [1.0, 5.0, 9.0])
    np.testing.assert_allclose(ratio_grid(1.0, 9.0, 3, "log"), [1.0, 3.0, 9.0])
    assert len(ratio_grid(0.0, 1.0, 2, "linear")) == 2
    with pytest.raises(InputError) as err:
        ratio_grid(0.0, 1.0, 1, "linear")
    assert str(err.value) == "a constrained sweep needs at least 2 grid points; got 1."


class PicklingRunner(InProcess):
    """The in-process runner, but the shared state goes through pickle first, as it does to a
    worker process (which then builds its own problem)."""

    def map(self, fn, shared, tasks, finished=None):
        return super().map(fn, pickle.loads(pickle.dumps(shared)), tasks, finished)


def test_a_worker_builds_its_own_problem_with_the_same_answers():
    rl, costs, _ = random_instance(3, n_scores=3, n_buckets=2, n_groups=2)
    columns = ["score"]                                 # not the layout's own rule columns
    axis = ratio_axis(rl, costs, "o0")
    specs = [{"kind": "principal_fairness", "name": "fair", "outcome": "o0", "tolerance": 0.03},
             {"kind": "capacity", "name": "cap", "at_least": "L2", "max_share": 0.2}]
    settings = LPSettings(method="ipm")
    ratios = ratio_grid(0.0, 3.0, 4, "linear")
    here = constrained_sweep(rl, costs, axis, ratios, specs, columns=columns, settings=settings, vary="cap",
                             values=[0.1, 0.3])
    there = constrained_sweep(rl, costs, axis, ratios, specs, columns=columns, settings=settings, vary="cap",
                              values=[0.1, 0.3], runner=PicklingRunner())
    assert "ipm" in here.solver
    for name in ("cost", "shares", "dual", "removed"):
        np.testing.assert_allclose(getattr(there, name), getattr(here, name), rtol=1e-7, atol=1e-9)
    np.testing.assert_array_equal(there.split, here.split)


def test_group_blind_rules_have_no_dual_and_one_rule_cell_for_everyone():
    rl, costs, columns = random_instance(2, n_scores=3, n_buckets=2, n_groups=2, aware=True)
    axis = ratio_axis(rl, costs, "o0")
    specs = [{"kind": "group_blind", "name": "blind"}, {"kind": "capacity", "name": "cap", "at_least": "L1",
                                                         "max_share": 0.4}]
    cs = constrained_sweep(rl, costs, axis, [0.5, 2.0], specs, columns=columns)
    assert np.isnan(cs.dual[..., 0]).all() and np.isfinite(cs.dual[..., 1]).all()
    assert cs.price_table()["dual_per_1000"].isna().tolist() == [True, False] * 2
    # one rule cell for the hand example's four cases: 350 r, 400 + 250 r, 800 + 150 r in total, all
    # lenient at r = 3 (the cap is slack): 1050 / 4 per case, and the unconstrained optimum on the
    # same rule columns costs the same
    rl, costs = hand_example()
    one = constrained_sweep(rl, costs, ratio_axis(rl, costs, "o0"), [3.0], CAP, columns=[])
    assert one.cost[0, 0] == pytest.approx(262.5) and one.unconstrained[0] == pytest.approx(262.5)


def test_no_constraint_message_and_stored_labels():
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    with pytest.raises(InputError) as err:
        constrained_sweep(rl, costs, axis, [1.0], [])
    assert str(err.value) == "a constrained sweep needs at least one constraint."
    cs = constrained_sweep(rl, costs, axis, [1.0], CAP)
    assert cs.level_labels == LABELS and cs.level_values == LEVELS and cs.split.dtype == np.int64
    assert [s.name for s in cs.specs] == ["quarter"] and cs.axis is axis


def test_text_without_a_unit_and_with_some_infeasible_points(swept):
    # a sweep whose second grid point (the scenario's ratio) could not be solved, built from the
    # hand example's result (constraints that do not involve costs hold at every ratio or none,
    # so the library itself meets this only when the solver fails at a point)
    _, _, _, cs, _ = swept
    feasible = cs.feasible.copy()
    feasible[0, 1] = False
    cost = np.where(feasible, cs.cost, np.nan)
    partial = replace(cs, feasible=feasible, cost=cost, unit="")
    lines = str(partial).splitlines()
    assert lines[1] == ("  bound 0.25: price 0 to 56,250 per 1,000 cases over the grid; nan near the scenario's ratio; "
                        "infeasible at 1 points")
    summary = partial.summary()
    assert np.isnan(summary["price_per_1000_there"][0]) and summary["infeasible_points"].tolist() == [1, 0]
