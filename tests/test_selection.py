"""The chosen rule's cost interval that allows for its choice on the same data.

Checks against something outside the project: scipy's basic bootstrap interval
(``scipy.stats.bootstrap(method="basic")``, Davison and Hinkley 1997, section 5.2) from the same
bootstrap distribution; the foundation's one-rule evaluation of a replicate's re-solved rule
under the bootstrap world; and, on a process with exact truth, the optimism an argmin over
noisy estimates shows (the in-sample cost below the chosen rule's true cost on average).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import scipy.stats

from policy import compare
from policy.assessment.scoring import ComparisonStatistic
from policy.assessment.selection import chosen_cost_columns, chosen_cost_interval, optimism_draws
from policy.assessment.uncertainty import CountResampler
from policy.decision.costs import costs_from_scenario
from policy.decision.evaluate import evaluate
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevelEstimator
from policy.estimation.world import world_probabilities
from policy.inputs.scenario import load_scenario

from .test_paired import small  # noqa: F401  (the module's 3,000-case demo scenario)


def test_basic_interval_equals_scipys():
    rng = np.random.default_rng(4)
    x = rng.gamma(2.0, 3.0, size=60)
    res = scipy.stats.bootstrap((x,), np.mean, method="basic", n_resamples=999, confidence_level=0.9,
                                random_state=np.random.default_rng(8))
    errors = res.bootstrap_distribution - x.mean()  # replicate estimate minus the estimate
    lo, hi = chosen_cost_interval(np.array([x.mean()]), errors[:, None], level=0.9)
    assert lo[0] == pytest.approx(res.confidence_interval.low, rel=1e-12)
    assert hi[0] == pytest.approx(res.confidence_interval.high, rel=1e-12)


def test_failed_replicates_are_left_out_and_too_many_give_no_interval():
    errors = np.array([[1.0, np.nan], [2.0, np.nan], [3.0, 1.0], [np.nan, np.nan]])
    lo, hi = chosen_cost_interval(np.array([10.0, 10.0]), errors, level=0.5)
    assert lo[0] == pytest.approx(10.0 - np.percentile([1.0, 2.0, 3.0], 75))
    assert hi[0] == pytest.approx(10.0 - np.percentile([1.0, 2.0, 3.0], 25))
    assert np.isnan(lo[1]) and np.isnan(hi[1])
    # without the world's cost (no chosen rules) nothing is reported
    lower, upper = chosen_cost_columns({"resolved_cost": np.array([1.0])}, {"resolved_cost": np.ones((3, 1))}, 4)
    assert np.isnan(lower).all() and np.isnan(upper).all()


def test_world_cost_is_the_resolved_rule_scored_in_the_world(small):  # noqa: F811
    from policy.estimation.from_scenario import estimate

    scenario = load_scenario(small)
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl)
    optimum = optimal_rule(rl, costs)
    est = RiskLevelEstimator.from_scenario(scenario)
    design = est.design(cells.layout, len(cells.levels))
    world = world_probabilities(est, cells)
    stat = ComparisonStatistic(est, design, costs, cells.layout, [], True, 2, base=rl, chosen=[optimum], world=world)
    batch = CountResampler(cells, outcome_model=world).draw(np.random.SeedSequence(5).spawn(3))
    out = stat(batch)
    p, _, _ = est.estimate_p(batch.pooled_events, batch.pooled_observed, design)
    in_world = rl.with_p(world)
    for i in range(3):
        again = optimal_rule(replace(rl, p=p[i], weights=batch.weights[i].astype(np.float64)), costs)
        # the foundation's evaluation of the replicate's rule in the bootstrap world (data's cases per cell)
        assert out["resolved_world_cost"][i, 0] == pytest.approx(evaluate(again, in_world, costs).cost_per_case, rel=1e-10)
    np.testing.assert_allclose(optimism_draws(out), out["resolved_cost"] - out["resolved_world_cost"])


def test_in_sample_cost_of_an_argmin_is_optimistic_and_the_interval_moves_up(small):  # noqa: F811
    c = compare(small, replicates=60, workers=1, folds=0)
    frame = c.comparison_frame()
    chosen = frame["kind"].isin(["optimal", "constrained"])
    assert chosen.iloc[0]
    lo, hi = frame["cost_per_1000_cases_chosen_lower"], frame["cost_per_1000_cases_chosen_upper"]
    assert lo[chosen].notna().all() and lo[~chosen].isna().all() and hi[~chosen].isna().all()
    assert (lo[chosen] < hi[chosen]).all()
    # the argmin's in-sample cost is optimistic in the bootstrap world: its mean optimism is below 0
    errors = optimism_draws(c.result.replicates)
    assert np.nanmean(errors[:, 0]) < 0
    # so the interval allowing for the choice is centred above the fixed-rule point
    mid = (lo.iloc[0] + hi.iloc[0]) / 2
    assert mid > frame["cost_per_1000_cases"].iloc[0]
    assert "allowing for its choice on these data" in str(c)
