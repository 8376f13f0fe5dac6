"""Paired differences between compared rules and the stability of the chosen rule's cells.

Checks against something outside the project: numpy's percentile of hand-built replicate
differences (the percentile interval, Efron and Tibshirani 1993, ch. 13), hand counts of the
share of replicates in which a rule is cheaper, and the foundation's one-rule evaluation of the
chosen rule under a replicate's re-estimated risk levels (the rule is held fixed).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from policy import compare
from policy.assessment.compare import ComparisonStatistic
from policy.assessment.paired import cost_matrix, paired_differences, paired_figures
from policy.assessment.stability import level_shares, rule_cell_means, stability_frame, unstable_lines
from policy.assessment.uncertainty import CountResampler, percentile_interval
from policy.decision.costs import costs_from_scenario
from policy.decision.evaluate import evaluate
from policy.decision.rules import Rule
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevelEstimator
from policy.inputs.scenario import load_scenario

from .conftest import run_cli


def test_paired_difference_against_a_hand_computation():
    point = np.array([[10.0], [12.0], [11.0]])
    reps = np.array([[[9.0], [12.0], [8.0]],
                     [[11.0], [10.0], [11.0]],
                     [[10.0], [13.0], [12.0]],
                     [[12.0], [15.0], [np.nan]]])
    frame = paired_differences(["a", "b", "c"], ["cost"], point, reps, level=0.5)
    assert list(zip(frame["first_rule"], frame["second_rule"])) == [("a", "b"), ("a", "c"), ("b", "c")]
    ab = frame.iloc[0]
    assert ab["difference"] == -2.0
    # a - b in the four replicates: -3, 1, -3, -3; a cheaper in 3 of 4 (hand count)
    d = np.array([-3.0, 1.0, -3.0, -3.0])
    assert ab["difference_lower"] == pytest.approx(np.percentile(d, 25))  # numpy's linear quantile (common practice)
    assert ab["difference_upper"] == pytest.approx(np.percentile(d, 75))
    assert ab["share_first_lower"] == 0.75 and ab["share_second_lower"] == 0.25
    # a - c: 1, 0, -2, (undefined): one lower, one higher, one tie among the three defined
    ac = frame.iloc[1]
    assert ac["share_first_lower"] == pytest.approx(1 / 3) and ac["share_second_lower"] == pytest.approx(1 / 3)
    matrix = cost_matrix(frame.assign(figure="cost_per_1000_cases"), ["a", "b", "c"])
    assert matrix.loc["a", "minus b"].startswith("-2 (") and matrix.loc["a", "minus b"].endswith("75% cheaper")
    assert matrix.loc["b", "minus a"].startswith("+2 (") and matrix.loc["b", "minus a"].endswith("25% cheaper")


def test_paired_interval_is_much_narrower_than_the_marginal_ones_when_costs_move_together():
    rng = np.random.default_rng(3)
    B = 2000
    common = rng.normal(0.0, 100.0, B)  # what both rules share: how costly the population is
    a = 1000.0 + common + rng.normal(0.0, 2.0, B)
    b = 1010.0 + common + rng.normal(0.0, 2.0, B)
    point = {"cost": np.array([1.000, 1.010]), "rates": np.zeros((2, 1)), "shares": np.ones((2, 1))}
    reps = {"cost": np.stack([a, b], axis=1) / 1000.0, "rates": np.zeros((B, 2, 1)), "shares": np.ones((B, 2, 1))}
    names, p, r = paired_figures(point, reps, ["x"], ["only"])
    assert names == ["cost_per_1000_cases", "rate_x", "share_only"]
    frame = paired_differences(["a", "b"], names, p, r)
    row = frame[frame["figure"] == "cost_per_1000_cases"].iloc[0]
    paired_width = row["difference_upper"] - row["difference_lower"]
    (alo, blo), (ahi, bhi) = percentile_interval(r[:, :, 0])
    # the naive interval of a difference built from the marginal ones: (a_lo - b_hi, a_hi - b_lo)
    naive_width = (ahi - blo) - (alo - bhi)
    assert paired_width < naive_width / 20
    assert row["difference_upper"] < 0  # the paired interval excludes zero; the marginal ones overlap
    assert alo < bhi and blo < ahi
    # independent noise of sd 2 on each: the difference has sd 2 * sqrt(2) (common practice)
    assert paired_width == pytest.approx(2 * 1.96 * 2 * np.sqrt(2), rel=0.1)
    assert row["share_first_lower"] > 0.99


def test_level_shares_and_stability_by_hand():
    levels = np.array([[0, 2], [0, 1], [1, 2], [0, 2]])
    np.testing.assert_allclose(level_shares(levels, 3), [[0.75, 0.25, 0.0], [0.0, 0.25, 0.75]])
    groups = pd.DataFrame({"tier": [1, 2]})
    rule = Rule("chosen", "optimal", groups, np.array([0, 0, 1]), np.array([[1.0, 0, 0], [0, 0.5, 0.5]]),
                ("a", "b", "c"), ("A", "B", "C"), np.array([10.0, 5.0]))
    share = level_shares(levels, 3)
    frame = stability_frame([rule], [share], threshold=0.8, replicates=4)
    # deterministic cell: share of replicates re-choosing its level; split cell: overlap min(0.5, .25) + min(0.5, .75)
    assert frame["stability"].tolist() == pytest.approx([0.75, 0.75])
    assert frame["stable"].tolist() == [False, False]
    assert frame["share_optimal_c"].tolist() == [0.0, 0.75]
    assert "2 of 2 rule cells" in unstable_lines(frame)[0]
    # a rule cell's mean of its cells' probabilities (cells 0 and 1 form rule cell 0)
    delta = np.array([[[1.0, 0, 0], [1.0, 0, 0], [0, 1.0, 0]]])
    np.testing.assert_allclose(rule_cell_means(delta, rule.index, 2)[0], [[1, 0, 0], [0, 1, 0]])


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    from policy.demo.quarrow import simulate_cases

    from .conftest import write_scenario

    folder = tmp_path_factory.mktemp("paired")
    frame, _ = simulate_cases(3_000, seed=11)
    frame.to_csv(folder / "cases.csv", index=False)
    return write_scenario(folder)


def test_the_chosen_rule_is_held_fixed_in_every_replicate(small):
    scenario = load_scenario(small)
    from policy.estimation.from_scenario import estimate

    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl)
    optimum = optimal_rule(rl, costs)
    est = RiskLevelEstimator.from_scenario(scenario)
    design = est.design(cells.layout, len(cells.levels))
    stat = ComparisonStatistic(est, design, costs, cells.layout, [], True, 2, chosen=[optimum])
    batch = CountResampler(cells).draw(np.random.SeedSequence(5).spawn(3))
    out = stat(batch)
    p, _, _ = est.estimate_p(batch.pooled_events, batch.pooled_observed, design)
    for i in range(3):
        world = replace(rl, p=p[i], weights=batch.weights[i].astype(np.float64))
        # the point rule scored under the replicate's risk levels (the foundation's evaluation)
        assert out["cost"][i, 0] == pytest.approx(evaluate(optimum, world, costs).cost_per_case, rel=1e-10)
        # the replicate's own optimum: its levels and its cost, never above the fixed rule's
        again = optimal_rule(world, costs)
        np.testing.assert_array_equal(out["optimal_level"][i], again.level)
        assert out["resolved_cost"][i, 0] == pytest.approx(evaluate(again, world, costs).cost_per_case, rel=1e-10)
        assert out["resolved_cost"][i, 0] <= out["cost"][i, 0] + 1e-9


def test_compare_writes_paired_differences_and_stability(small, tmp_path, capsys):
    c = compare(small, replicates=40, workers=1, stability=0.9)
    diff = c.differences_frame()
    names = [r.name for r in c.rules]
    R = len(names)
    L, J = c.risk_levels.n_levels, len(c.risk_levels.outcome_keys)
    assert len(diff) == R * (R - 1) // 2 * (1 + J + L)
    # regret is the paired difference against the chosen rule, read the other way round
    cost = diff[(diff["figure"] == "cost_per_1000_cases") & (diff["first_rule"] == names[0])].set_index("second_rule")
    frame = c.comparison_frame().set_index("rule")
    for name in names[1:]:
        assert cost.loc[name, "difference"] == pytest.approx(-frame.loc[name, "regret_per_1000_cases"])
        assert cost.loc[name, "difference_lower"] == pytest.approx(-frame.loc[name, "regret_per_1000_cases_upper"])
    stab = c.stability_frame()
    assert (stab["rule"] == names[0]).all() and len(stab) == c.rules[0].n_rule_cells
    shares = stab.filter(like="share_optimal_").to_numpy()
    np.testing.assert_allclose(shares.sum(axis=1), 1.0)
    assert (stab["stable"] == (stab["stability"] >= 0.9)).all()
    assert "minus cost-minimizing rule" in c.summary().columns
    code, stdout, err = run_cli(["compare", small, "--out", tmp_path / "o", "--replicates", "20", "--workers", "1",
                                 "--stability", "0.95"], capsys)
    assert code == 0, err
    assert "Paired differences in expected cost" in stdout and "chosen again in fewer than 95%" in stdout
    written = pd.read_csv(tmp_path / "o" / "rule_stability.csv")
    assert (written["stability_threshold"] == 0.95).all() and (written["replicates"] == 20).all()
    assert set(pd.read_csv(tmp_path / "o" / "comparison_differences.csv")["figure"]) >= {"cost_per_1000_cases"}
    code, _, err = run_cli(["compare", small, "--out", tmp_path / "bad", "--stability", "1.5"], capsys)
    assert code == 2 and "stability must lie in (0, 1]" in err and not (tmp_path / "bad").exists()
