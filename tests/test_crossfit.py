"""Cross-fitting: folds drawn on counts, and the cross-fitted cost of the chosen rule.

Checks against something outside the project: scipy's hypergeometric and multivariate
hypergeometric distributions (a random permutation of a stratum's cases cut into folds), and
the foundation's estimation and one-rule evaluation of each held-out fold on its own.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from policy import load_scenario
from policy.assessment.crossfit import _deal, check_folds, cross_fit, multivariate_hypergeometric, split_folds
from policy.decision.candidates import aid_rule, candidate_rules, observed_rules
from policy.decision.costs import costs_from_scenario
from policy.decision.evaluate import evaluate
from policy.decision.solve import optimal_rule
from policy.errors import InputError
from policy.estimation.from_scenario import estimate
from policy.estimation.strata import RiskLevelEstimator

from .conftest import run_cli, write_scenario


def test_dealing_only_occupied_strata_draws_the_same_folds():
    # the deal skips the strata without cases in a slot; drawing every stratum, zeros included
    # (written out here from the module notes), must give the same folds from the same seed
    from policy.assessment.crossfit import _fold_sizes

    slots = np.random.default_rng(4).poisson(0.4, size=(500, 6)) * np.random.default_rng(5).integers(1, 30, size=(500, 1))
    slots[:, 2] = 0  # a slot no stratum has
    got = _deal(np.random.default_rng(9), slots, 4)
    rng = np.random.default_rng(9)
    room = _fold_sizes(rng, slots.sum(axis=1), 4)
    expected = np.zeros(slots.shape + (4,), dtype=np.int64)
    for s in np.flatnonzero(slots.any(axis=0)):
        x = multivariate_hypergeometric(rng, room, slots[:, s])
        expected[:, s] = x
        room -= x
    assert (slots == 0).mean() > 0.5 and np.array_equal(got, expected)
    assert (got.sum(axis=2) == slots).all()


def test_a_slots_share_of_a_fold_is_hypergeometric():
    rng = np.random.default_rng(8)
    slots = np.tile([30, 20, 10], (20_000, 1))  # 20,000 strata of 60 cases, 3 folds of 20
    dealt = _deal(rng, slots, 3)
    assert (dealt.sum(axis=2) == slots).all() and (dealt.sum(axis=1) == 20).all()
    # slot 0 in fold 1: Hypergeometric(M=60, n=30, N=20) (scipy.stats.hypergeom; common practice)
    x = dealt[:, 0, 1]
    ref = stats.hypergeom(60, 30, 20)
    support = np.arange(4, 17)
    observed = np.array([(x == k).sum() for k in support])
    expected = ref.pmf(support) * len(x)
    observed = np.append(observed, len(x) - observed.sum())
    expected = np.append(expected, len(x) - expected.sum())
    assert stats.chisquare(observed, expected).pvalue > 1e-3
    # the whole fold against scipy's multivariate hypergeometric (mean and covariance)
    ref = stats.multivariate_hypergeom([30, 20, 10], 20)
    np.testing.assert_allclose(dealt[:, :, 2].mean(axis=0), ref.mean(), atol=0.05)
    np.testing.assert_allclose(np.cov(dealt[:, :, 2].T), ref.cov(), atol=0.1)


def test_multivariate_hypergeometric_draws_without_replacement():
    rng = np.random.default_rng(1)
    colors = np.array([[5, 0, 3], [0, 0, 0], [2, 2, 2]])
    got = multivariate_hypergeometric(rng, colors, np.array([8, 0, 3]))
    assert (got.sum(axis=1) == [8, 0, 3]).all() and (got <= colors).all()
    np.testing.assert_array_equal(got[0], [5, 0, 3])


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    from policy.demo.quarrow import simulate_cases

    folder = tmp_path_factory.mktemp("crossfit")
    frame, _ = simulate_cases(3_000, seed=11)
    frame.to_csv(folder / "cases.csv", index=False)
    path = write_scenario(folder)
    scenario = load_scenario(path)
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl)
    return path, scenario, cells, rl, costs


def test_folds_are_stratified_by_cell_and_arm_and_add_up(small):
    _, _, cells, _, _ = small
    for table in (cells, replace(cells, state_counts=None)):  # joint outcome states, and margins only
        f = split_folds(table, 4, np.random.default_rng(3))
        for name in ("cases", "observed", "events"):
            np.testing.assert_array_equal(getattr(f, name).sum(axis=0), getattr(table, name))
        size = f.cases.sum(axis=-1)  # (K, n, A)
        assert (size.max(axis=0) - size.min(axis=0)).max() <= 1
        assert (f.observed <= f.cases[:, :, :, None, :]).all() and (f.events <= f.observed).all()


def test_cross_fitted_cost_is_the_held_out_folds_scored_one_by_one(small):
    _, scenario, cells, rl, costs = small
    optimum = optimal_rule(rl, costs)
    rules = [optimum, aid_rule(cells, scenario.aid.name, scenario.level_labels)] + \
        candidate_rules(scenario, rl.layout, rl.weights) + observed_rules(cells, scenario.aid.name, scenario.level_labels)
    est = RiskLevelEstimator.from_scenario(scenario)
    cf = cross_fit(cells, rl, costs, est, rules, folds=3, seed=5)
    again = cross_fit(cells, rl, costs, est, rules, folds=3, seed=5)
    np.testing.assert_array_equal(cf.fold_costs, again.fold_costs)
    assert cf.in_sample[0] == pytest.approx(evaluate(optimum, rl, costs).cost_per_case, rel=1e-12)
    # the same folds, each estimated and scored on its own by the foundation's fit and evaluation
    folds = split_folds(cells, 3, np.random.default_rng(np.random.SeedSequence([5, 0x43524F53])))
    total = 0.0
    for k in range(3):
        held = replace(cells, cases=folds.cases[k], observed=folds.observed[k], events=folds.events[k], state_counts=None)
        train = replace(cells, cases=cells.cases - folds.cases[k], observed=cells.observed - folds.observed[k],
                        events=cells.events - folds.events[k], state_counts=None)
        fit = lambda t: RiskLevelEstimator.from_scenario(scenario).fit(t, scenario.level_labels, scenario.outcome_labels).risk_levels_
        rl_train, rl_held = fit(train), fit(held)
        chosen = optimal_rule(rl_train, costs_from_scenario(scenario, rl_train))
        cost_k = evaluate(chosen, rl_held, costs).cost_per_case
        assert cf.fold_costs[k, 0] == pytest.approx(cost_k, rel=1e-9)
        assert cf.fold_costs[k, 1] == pytest.approx(evaluate(rules[1], rl_held, costs).cost_per_case, rel=1e-9)
        total += held.cases.sum() * cost_k
    assert cf.cross_fitted[0] == pytest.approx(total / cells.cases.sum(), rel=1e-9)
    frame = cf.to_frame()
    np.testing.assert_allclose(frame["regret_per_1000_cases_cross_fitted"], 1000 * (cf.cross_fitted - cf.cross_fitted[0]))
    assert "optimism" in cf.lines()[0]
    # more splits: the first is the same split, and the spread over splits is reported
    two = cross_fit(cells, rl, costs, est, rules, folds=3, seed=5, repeats=2)
    np.testing.assert_array_equal(two.fold_costs[:3], cf.fold_costs)
    assert np.isfinite(two.split_sd).all() and np.isnan(cf.split_sd).all()
    halves = [np.average(two.fold_costs[3 * r:3 * r + 3, 0], weights=two.fold_cases[3 * r:3 * r + 3]) for r in range(2)]
    assert two.split_sd[0] == pytest.approx(np.std(halves, ddof=1), rel=1e-9)


def test_folds_are_checked_and_compare_writes_the_cross_fitted_table(small, tmp_path, capsys):
    path = small[0]
    for bad in (1, -2, 2.5, True):
        with pytest.raises(InputError, match="folds"):
            check_folds(bad)
    assert check_folds(0) == 0
    code, stdout, err = run_cli(["compare", path, "--out", tmp_path / "o", "--replicates", "10", "--workers", "1",
                                 "--folds", "3"], capsys)
    assert code == 0, err
    assert "Cross-fitted expected cost" in stdout and "optimism" in stdout
    import pandas as pd

    table = pd.read_csv(tmp_path / "o" / "comparison_cross_fitted.csv")
    assert (table["folds"] == 3).all() and table["regret_per_1000_cases_cross_fitted"].iloc[0] == 0
    code, _, err = run_cli(["compare", path, "--out", tmp_path / "bad", "--folds", "1"], capsys)
    assert code == 2 and "folds must be 0" in err and not (tmp_path / "bad").exists()


@pytest.mark.slow
def test_cross_fitted_cost_of_the_chosen_rule_is_not_optimistic():
    """Over 40 simulated demo counties, the in-sample cost of the rule chosen on the data is below
    that rule's true cost on average (the winner's curse); the cross-fitted cost is not."""
    import pandas as pd

    from policy.demo.quarrow import demo_scenario_path, true_risk_levels
    from policy.inputs.scenario import DataSource

    base = load_scenario(demo_scenario_path())
    truth, _ = true_risk_levels()
    true_costs = costs_from_scenario(base, truth)
    key = lambda layout: layout.frame[["aid_tier", "charge_class"]].astype(str).agg("|".join, axis=1).to_numpy()
    errors = []
    for k in range(40):
        scenario = replace(base, data=DataSource("simulate", simulate=20_000), seed=8000 + k)
        cells, rl = estimate(scenario)
        costs = costs_from_scenario(scenario, rl)
        optimum = optimal_rule(rl, costs)
        cf = cross_fit(cells, rl, costs, RiskLevelEstimator.from_scenario(scenario), [optimum], folds=5, seed=k)
        # the chosen rule on the simulator's own cells: one level per (tier, charge) rule cell
        level = pd.Series(optimum.cell_delta.argmax(axis=1), index=key(rl.layout)).groupby(level=0).first()
        true = evaluate(np.eye(3)[level.loc[key(truth.layout)].to_numpy()], truth, true_costs).cost_per_case
        errors.append((cf.in_sample[0] - true, cf.cross_fitted[0] - true))
    e = 1000 * np.array(errors)
    mean, se = e.mean(axis=0), e.std(axis=0, ddof=1) / np.sqrt(len(e))
    # measured when written: in-sample -128,626 (se 34,893), cross-fitted +18,525 (se 39,495) per 1,000 cases
    assert mean[0] < -2 * se[0]
    assert abs(mean[1]) < 3 * se[1]
