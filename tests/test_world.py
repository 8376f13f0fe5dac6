"""The liberal bootstrap world: every covariate-by-level term in the target, fitted jointly."""

from __future__ import annotations

import numpy as np

import policy.estimation.target as target
from policy.estimation.strata import RiskLevelEstimator, factor_matrices, isotonic_nonincreasing, shrunk_rates
from policy.estimation.target import cell_level_ratios
from policy.estimation.world import liberal_estimator, outcome_world, world_probabilities
from policy.inputs.cells import CellTable

from .simulations import process
from .test_target import _grid, _statsmodels_poisson


def test_every_term_is_the_joint_poisson_fit(monkeypatch):
    # independent reference: statsmodels' Poisson GLM with cell fixed effects and both
    # covariate-by-level interactions (the ridge switched off, so both are maximum likelihood)
    monkeypatch.setattr(target, "RIDGE", 1e-10)
    events, n, layout, frame = _grid(3)
    theta, include = cell_level_ratios(events, n, factor_matrices(layout, ["u", "v"]), np.ones((1, 3)), every=True)
    assert include.all()
    ref, _ = _statsmodels_poisson(events, n, frame, ["u", "v"])
    np.testing.assert_allclose(theta[:, 0, :], np.minimum.accumulate(np.clip(ref, 0, 1), axis=-1), rtol=1e-5)


def test_the_world_keeps_a_term_the_selection_missed():
    # few cases: on many data sets the criterion keeps no term, yet the level-2 ratio falls with u
    # (truth 0.5, 0.3875, 0.275, 0.1625); on those data sets the estimate's target is one ratio for
    # all cells, while the liberal world's ratios, averaged over them, fall with u
    missed = []
    for seed in range(40):
        events, n, layout, _ = _grid(seed, cases=(40, 120), vary=0.9)
        factors = factor_matrices(layout, ["u", "v"])
        theta, kept = cell_level_ratios(events, n, factors, np.ones((1, 3)))
        if kept.any():
            continue
        assert np.ptp(theta[:, 0, 2]) == 0
        liberal, _ = cell_level_ratios(events, n, factors, np.ones((1, 3)), every=True)
        missed.append(liberal[:, 0, 2].reshape(4, 3).mean(axis=1))
    assert len(missed) >= 5
    by_u = np.mean(missed, axis=0)
    assert (np.diff(by_u) < 0).all() and by_u[0] - by_u[-1] > 0.1, by_u


def test_world_is_the_estimators_own_steps_with_every_term():
    proc = process("four_levels")
    cells = CellTable.from_cases(proc.simulate(3_000, 11), proc.scenario)
    est = RiskLevelEstimator.from_scenario(proc.scenario)
    world = world_probabilities(est, cells)
    # monotone, in [0, 1], shaped like the estimate
    fitted = est.fit(cells).risk_levels_.p
    assert world.shape == fitted.shape
    assert (np.diff(world, axis=-1) <= 1e-12).all() and (world >= 0).all() and (world <= 1).all()
    # the same as the estimator asked for every term
    events, observed = cells.events.sum(axis=1), cells.observed.sum(axis=1)
    rate, weight, _, _ = shrunk_rates(events, observed, est.design(cells.layout), est.prior_strength, None, "all")
    np.testing.assert_allclose(world, np.clip(isotonic_nonincreasing(rate, weight), 0, 1), rtol=1e-12)
    assert liberal_estimator(est).level_terms == "all"
    assert outcome_world(est, cells, "cases") is None
    np.testing.assert_array_equal(outcome_world(est, cells, "model"), world)


def test_common_ratios_only_without_target_covariates():
    # no cell column to vary with: the liberal world is the estimate itself
    proc = process("varying")
    cells = CellTable.from_cases(proc.simulate(2_000, 3), proc.scenario)
    est = RiskLevelEstimator(target_covariates=[])
    np.testing.assert_allclose(world_probabilities(est, cells), est.fit(cells).risk_levels_.p, rtol=1e-12)
