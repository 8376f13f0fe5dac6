"""Costs implied by current practice along one ratio (policy/assessment/implied.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import linprog

from policy.assessment.implied import implied_costs, implied_interval
from policy.assessment.implied_scenario import implied_scenario
from policy.assessment.sweep import cost_lines, ratio_axis
from policy.assessment.sweep.envelope import envelope_functions, lower_envelope
from policy.decision.costs import costs_from_scenario
from policy.decision.rules import Rule
from policy.decision.solve import aggregation_matrix
from policy.errors import InputError
from policy.running.pipeline import estimate

from .conftest import run_cli


@pytest.fixture(scope="module")
def demo(demo_scenario):
    cells, rl = estimate(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    axis = ratio_axis(rl, costs, "new_offense")
    index, groups = rl.layout.rule_index()
    base, slope = cost_lines(rl, costs, [axis])
    return demo_scenario, cells, rl, costs, axis, index, groups, base, slope[0]


def _optimum_knots(base, slope, w, index, n):
    M = aggregation_matrix(index, n, w)
    A, B = M @ base, M @ slope
    env = lower_envelope(A, B)
    _, total = envelope_functions(env, np.bincount(index, weights=w, minlength=n), A, B)
    return env, total.knots


def _lp_minimum(base, slope, w, index, n, delta, hi):
    """Reference: min over r of alpha + beta r - sum_g t_g subject to t_g <= A_g(d) + r B_g(d), a
    linear program (scipy.optimize.linprog, HiGHS); the minimum of a convex piecewise-linear
    function written with one epigraph variable per rule cell (common practice)."""
    M = aggregation_matrix(index, n, w)
    A, B = M @ base, M @ slope
    wd = w[:, None] * delta
    alpha, beta = np.sum(wd * base), np.sum(wd * slope)
    L = A.shape[1]
    c = np.concatenate([[beta], -np.ones(n)])
    rows = np.zeros((n * L, n + 1))
    g = np.repeat(np.arange(n), L)
    rows[np.arange(n * L), 1 + g] = 1.0
    rows[:, 0] = -B.reshape(-1)
    res = linprog(c, A_ub=rows, b_ub=A.reshape(-1), bounds=[(0, hi)] + [(None, None)] * n, method="highs")
    assert res.status == 0
    return (alpha + res.fun) / w.sum(), res.x[0]


def _mixed_rule(rl, index, groups, levels, rng, noise):
    """Decision shares per cell: the given level per rule cell, with a share ``noise`` of the
    cases of each cell spread at random over all levels."""
    L = len(rl.level_values)
    onehot = np.eye(L)[levels[index]]
    mix = rng.dirichlet(np.ones(L), size=len(index))
    delta = (1 - noise) * onehot + noise * mix
    return Rule.per_cell("courts (constructed)", "observed", rl.layout, delta, rl.level_values, rl.level_labels, rl.weights)


def test_minimum_matches_a_linear_program(demo):
    _, cells, rl, costs, axis, index, groups, base, slope = demo
    from policy.decision.candidates import observed_rules
    for rule in observed_rules(cells):
        res = implied_interval(base, slope, rl.weights, index, len(groups), rule.cell_delta, 0.0, 400.0)
        lp_value, lp_r = _lp_minimum(base, slope, rl.weights, index, len(groups), rule.cell_delta, 400.0)
        assert res.regret_per_case == pytest.approx(lp_value, rel=1e-7, abs=1e-6)
        assert res.r_lo - 1e-6 <= lp_r <= res.r_hi + 1e-6


def test_a_known_ratio_is_recovered_exactly_without_noise(demo):
    _, _, rl, costs, axis, index, groups, base, slope = demo
    env, knots = _optimum_knots(base, slope, rl.weights, index, len(groups))
    rng = np.random.default_rng(3)
    for r_star in (0.5 * axis.scenario_ratio, axis.scenario_ratio, 2.0 * axis.scenario_ratio):
        rule = _mixed_rule(rl, index, groups, env.level_at(r_star), rng, 0.0)
        res = implied_interval(base, slope, rl.weights, index, len(groups), rule.cell_delta)
        assert res.regret_per_case == pytest.approx(0.0, abs=1e-6)
        # the interval is the stretch between the optimum's knots on either side of r*
        i = np.searchsorted(knots, r_star)
        assert res.r_lo == pytest.approx(knots[i - 1] if i > 0 else 0.0, rel=1e-9)
        assert res.r_hi == pytest.approx(knots[i] if i < len(knots) else np.inf, rel=1e-9)


def test_a_known_ratio_is_recovered_within_the_rule_cells_resolution_with_noise(demo):
    _, _, rl, costs, axis, index, groups, base, slope = demo
    env, knots = _optimum_knots(base, slope, rl.weights, index, len(groups))
    rng = np.random.default_rng(4)
    for r_star in (0.5 * axis.scenario_ratio, axis.scenario_ratio, 2.0 * axis.scenario_ratio):
        rule = _mixed_rule(rl, index, groups, env.level_at(r_star), rng, 0.05)
        res = implied_interval(base, slope, rl.weights, index, len(groups), rule.cell_delta)
        # the resolution: the closed stretch between the optimum's knots on either side of r*
        i = np.searchsorted(knots, r_star)
        assert 0 < i < len(knots)
        assert knots[i - 1] - 1e-9 <= res.r_lo and res.r_hi <= knots[i] + 1e-9, (r_star, res)
        assert res.regret_per_case > 0


def test_groups_restrict_the_sums_and_differences_follow(demo):
    _, cells, rl, costs, axis, index, groups, base, slope = demo
    from policy.decision.candidates import observed_rules
    rules = observed_rules(cells)
    out = implied_costs(rl, costs, axis, rules)
    t = out.table
    assert set(t["protected"]) == {"all", *rl.layout.protected}
    for rule in rules:
        rows = t[(t["rule"] == rule.name) & (t["protected"] == "sex")]
        assert rows["cases"].sum() == pytest.approx(rl.weights.sum())
        for row in rows.itertuples():
            mask = np.asarray(rl.layout.frame["sex"] == row.group)
            res = implied_interval(base, slope, np.where(mask, rl.weights, 0.0), index, len(groups), rule.cell_delta)
            assert (res.r_lo, res.r_hi) == (row.ratio_low, row.ratio_high)
    d = out.differences.iloc[0]
    g = t[(t["rule"] == d["rule"]) & (t["protected"] == d["protected"])].set_index("group")
    assert d["ratio_difference_low"] == pytest.approx(g.loc[d["group"], "ratio_low"] - g.loc[d["versus"], "ratio_high"])
    assert out.sentences() and "acted as if" in out.sentences()[0]


def test_bad_range_is_refused(demo):
    _, _, rl, costs, axis, index, groups, base, slope = demo
    with pytest.raises(InputError, match="range"):
        implied_interval(base, slope, rl.weights, index, len(groups), np.eye(3)[np.zeros(len(index), int)], 5.0, 1.0)


def test_cli_sweep_implied_writes_the_tables_and_one_sentence_per_arm(small_case_table, tmp_path, capsys):
    scenario, _ = small_case_table
    code, out, err = run_cli(["sweep", scenario, "--out", tmp_path / "o", "--ratio", "new_offense", "--implied",
                              "--replicates", "0", "--no-figures"], capsys)
    assert code == 0, err
    import pandas as pd
    table = pd.read_csv(tmp_path / "o" / "implied_costs.csv")
    assert {"rule", "protected", "group", "ratio_low", "ratio_high", "cost_low", "cost_high", "regret_per_case"} <= set(table.columns)
    overall = table[table["protected"] == "all"]
    assert len(overall) == 2  # one per arm
    assert (overall["ratio_low"] <= overall["ratio_high"]).all()
    assert (tmp_path / "o" / "implied_differences.csv").exists()
    assert out.count("acted as if") == 2
    assert "not what any judge intended" in " ".join(out.split())


def test_cli_implied_needs_one_ratio_or_two(tmp_path, capsys):
    from .conftest import SCENARIOS
    code, out, err = run_cli(["sweep", SCENARIOS / "demo.toml", "--out", tmp_path / "o", "--ratio", "new_offense",
                              "--ratio", "missed_court", "--ratio", "new_violent", "--implied", "--no-figures"], capsys)
    assert code == 2 and "--implied" in err + out
    assert not (tmp_path / "o" / "implied_costs.csv").exists()


def test_bootstrap_intervals_hold_the_point_and_are_reproducible(demo_scenario):
    a = implied_scenario(demo_scenario, "new_offense", replicates=12, seed=5, workers=1)
    b = implied_scenario(demo_scenario, "new_offense", replicates=12, seed=5, workers=1)
    t = a.table
    assert (t["ratio_low_lower"] <= t["ratio_low"] + 1e-12).all()
    assert (t["ratio_high_upper"] >= t["ratio_high"] - 1e-12).all()
    assert t[["ratio_low_lower", "ratio_high_upper"]].equals(b.table[["ratio_low_lower", "ratio_high_upper"]])
    d = a.differences
    assert (d["ratio_difference_lower"] <= d["ratio_difference_low"] + 1e-12).all()
    assert (d["ratio_difference_upper"] >= d["ratio_difference_high"] - 1e-12).all()
    assert a.meta["replicates"] == 12
    assert "bootstrap interval" in a.sentences()[0]


def test_bootstrap_replicate_of_the_data_itself_gives_the_point(demo_scenario):
    # the statistic applied to the original counts must reproduce the exact intervals
    from policy.assessment.implied import protected_groups
    from policy.assessment.implied_bands import ImpliedReplicates
    from policy.assessment.uncertainty import CountResampler, OnRiskLevels
    from policy.estimation.strata import RiskLevelEstimator
    cells, rl = estimate(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    point = implied_scenario(demo_scenario, "new_offense", replicates=0)
    index, groups = rl.layout.rule_index()
    masks = [np.ones(len(rl.weights), dtype=bool)] + [m for _, _, m in protected_groups(rl)]
    est = RiskLevelEstimator.from_scenario(demo_scenario)
    stat = OnRiskLevels(ImpliedReplicates(costs, point.axis, index, len(groups), index, len(groups), masks, 0.0, np.inf),
                        est, est.design(cells.layout, len(cells.levels)))
    out = stat(CountResampler(cells).original)
    np.testing.assert_allclose(out["r_lo"].reshape(-1), point.table["ratio_low"], rtol=1e-7)


def _courts_at_known_cost(folder, seed, noise=0.1):
    """A simulated Quarrow case table whose courts follow the cost-minimizing rule at the small
    scenario's own costs (computed on the simulator's exact risk levels), with a share ``noise``
    of decisions drawn at random; outcomes follow from each case's risk level and its decision."""
    from policy import load_scenario
    from policy.demo.quarrow import simulate_cases, true_risk_levels
    from .conftest import write_scenario

    path = write_scenario(folder)
    scenario = load_scenario(path)
    truth, _ = true_risk_levels()
    costs = costs_from_scenario(scenario, truth)
    axis = ratio_axis(truth, costs, "new_offense")
    index, groups = truth.layout.rule_index()
    base, slope = cost_lines(truth, costs, [axis])
    env, _ = _optimum_knots(base, slope[0], truth.weights, index, len(groups))
    levels = groups.reset_index(drop=True).copy()
    levels["level"] = env.level_at(axis.scenario_ratio)
    for c in ("aid_tier", "charge_class"):
        levels[c] = levels[c].astype(object).astype(str)
    frame, sim = simulate_cases(20_000, seed=seed)
    key = frame[["aid_tier", "charge_class"]].astype(str)
    level = key.merge(levels, on=["aid_tier", "charge_class"], how="left")["level"].to_numpy()
    rng = np.random.default_rng(seed + 1)
    decision = np.where(rng.random(len(frame)) < noise, rng.integers(0, 3, len(frame)), level).astype(int)
    outcome = (decision[:, None] < sim["risk_level"]).astype(float)
    for j, col in enumerate(("missed_court", "new_offense", "new_violent")):
        frame[col] = pd.array(np.where(frame[col].isna(), np.nan, outcome[:, j]), dtype="Int64")
    frame["decision"] = np.asarray(["recognizance", "supervision", "bond"], dtype=object)[decision]
    frame.to_csv(folder / "cases.csv", index=False)
    return path, float(costs.outcome[axis.outcome_index])


@pytest.mark.slow
def test_bootstrap_interval_covers_the_cost_courts_were_made_to_follow(tmp_path):
    # Courts made to follow a known cost; the implied interval with its bootstrap interval
    # must contain it in at least 90 of 100 simulated data sets. 30% of decisions are random:
    # the risk under a level courts almost never use in a cell is barely estimable, and with 10%
    # the estimated optimum (and with it the implied cost) drifted to 0 in 4 of 6 trial sets.
    hits, n_sets = 0, 100
    for k in range(n_sets):
        folder = tmp_path / f"s{k}"
        folder.mkdir()
        path, true_cost = _courts_at_known_cost(folder, 1000 + k, noise=0.3)
        out = implied_scenario(path, "new_offense", replicates=100, seed=k, workers=1)
        t = out.table[out.table["protected"] == "all"]
        hits += int(((t["cost_low_lower"] <= true_cost) & (true_cost <= t["cost_high_upper"])).all())
    assert hits >= 90, hits


def test_cli_implied_on_a_risk_level_table_is_refused_and_writes_nothing(tmp_path, capsys):
    from .conftest import SCENARIOS
    code, out, err = run_cli(["sweep", SCENARIOS / "risk_level_table.toml", "--out", tmp_path / "o", "--ratio",
                              "new_offense", "--implied", "--no-figures"], capsys)
    assert code == 2 and "observed decisions" in err + out
    assert not (tmp_path / "o").exists()


def test_the_minimum_agrees_with_the_sweeps_regret_curve(demo):
    # the sweep's exact regret of the same rule (policy.assessment.sweep.sweep_one) is smallest
    # where the implied interval says, with the same value
    from policy.assessment.sweep import sweep_one
    from policy.decision.candidates import observed_rules
    _, cells, rl, costs, axis, index, groups, base, slope = demo
    rule = observed_rules(cells)[0]
    s = sweep_one(rl, costs, axis, 0.0, 10.0 * axis.scenario_ratio, rules=[rule])
    f = s.regret[rule.name]
    res = implied_interval(base, slope, rl.weights, index, len(groups), rule.cell_delta, 0.0, 10.0 * axis.scenario_ratio)
    assert f.y.min() == pytest.approx(res.regret_per_case, rel=1e-9)
    assert f(res.r_lo) == pytest.approx(f.y.min(), rel=1e-9)
    assert f.x[np.argmin(f.y)] == pytest.approx(res.r_lo, rel=1e-12)
