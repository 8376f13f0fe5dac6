"""The estimator's formulas at their edges: small counts, empty and one-case units, integer input
and leading (replicate) axes (policy/estimation/strata.py)."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.contingency_tables import StratifiedTable

from policy.estimation.strata import RHO_BOUNDS, isotonic_nonincreasing, level_risk_ratios, moment_prior_strength


def test_isotonic_projection_of_integers_is_not_rounded():
    # pooling 1 and 4 gives their mean 2.5 (pool-adjacent-violators, derived), not an integer
    np.testing.assert_array_equal(isotonic_nonincreasing(np.array([[1, 4], [3, 2]])), [[2.5, 2.5], [3.0, 2.0]])
    np.testing.assert_array_equal(isotonic_nonincreasing(np.array([1, 4]), np.array([3, 1])), [1.75, 1.75])


def _mh(events, observed, k):
    # statsmodels' Mantel-Haenszel pooled risk ratio of level k against level k - 1 (reference)
    a, n1, c, n0 = events[:, k], observed[:, k], events[:, k - 1], observed[:, k - 1]
    tables = np.stack([np.stack([a, n1 - a], -1), np.stack([c, n0 - c], -1)], -2).transpose(1, 2, 0)
    return StratifiedTable(tables).riskratio_pooled


def test_level_risk_ratios_with_small_counts():
    # one cell: 1 event in 10 at level 0, 1 in 30 at level 1; the ratio (1/30) / (1/10) = 1/3 has
    # both Mantel-Haenszel sums below 1 (0.25 / 0.75)
    events, observed = np.array([[1.0, 1.0]]), np.array([[10.0, 30.0]])
    assert _mh(events, observed, 1) == pytest.approx(1 / 3)
    np.testing.assert_allclose(level_risk_ratios(events[:, None], observed[:, None])[0], [1.0, 1 / 3], rtol=1e-12)
    # no event at the lenient level, one at the harsher: the ratio is infinite, clipped to 1
    events = np.array([[0.0, 1.0]])
    np.testing.assert_array_equal(level_risk_ratios(events[:, None], np.array([[[10.0, 10.0]]]))[0], [1.0, 1.0])
    # no event at either level: no evidence of an effect, ratio 1
    np.testing.assert_array_equal(level_risk_ratios(np.zeros((1, 1, 2)), np.array([[[10.0, 10.0]]]))[0], [1.0, 1.0])


def test_level_risk_ratios_over_replicate_axes():
    # three levels, two outcome kinds, two replicates: a batch equals one call per replicate
    rng = np.random.default_rng(4)
    observed = rng.integers(20, 60, size=(2, 5, 2, 3)).astype(float)
    events = rng.binomial(observed.astype(int), [0.5, 0.3, 0.2]).astype(float)
    batch = level_risk_ratios(events, observed)
    assert batch.shape == (2, 2, 3)
    for b in range(2):
        np.testing.assert_allclose(batch[b], level_risk_ratios(events[b], observed[b]), rtol=1e-15)
        for j in range(2):
            ratios = [_mh(events[b, :, j], observed[b, :, j], k) for k in (1, 2)]
            np.testing.assert_allclose(batch[b, j], np.cumprod([1.0] + [min(r, 1.0) for r in ratios]), rtol=1e-10)


def test_moment_prior_strength_counts_one_case_units_and_skips_empty_ones():
    # Kleinman (1973), as in test_strata.py: sum n (r - m)^2 = sum m (1 - m) + rho sum m (1 - m) (n - 1).
    # Units (events / cases, target): 7/10 and 3/10 around 0.5, 1/1 around 0.2, and 0/0 around 0.3:
    # sum n (r - m)^2 = 0.4 + 0.4 + 0.64 = 1.44; sum m (1 - m) = 0.25 + 0.25 + 0.16 = 0.66;
    # sum m (1 - m) (n - 1) = 2.25 + 2.25 + 0 = 4.5; rho = 0.78 / 4.5; strength 4.5 / 0.78 - 1
    events = np.array([[7.0], [3.0], [1.0], [0.0]])
    trials = np.array([[10.0], [10.0], [1.0], [0.0]])
    target = np.array([[0.5], [0.5], [0.2], [0.3]])
    assert moment_prior_strength(events, trials, target, cell_axis=0)[0] == pytest.approx(4.5 / 0.78 - 1, rel=1e-12)
    # the unit without cases changes nothing
    assert moment_prior_strength(events[:3], trials[:3], target[:3], cell_axis=0)[0] == pytest.approx(4.5 / 0.78 - 1,
                                                                                                      rel=1e-12)


def test_moment_prior_strength_without_information_pools_fully():
    # only one-case units (or none): the moment equation has no n - 1 > 0 term, so rho is not
    # identified and the estimator takes the smallest rho (the strongest pooling), with no warning
    largest = 1.0 / RHO_BOUNDS[0] - 1.0
    events, trials = np.array([[1.0], [0.0], [0.0], [0.0]]), np.ones((4, 1))
    assert moment_prior_strength(events, trials, np.full((4, 1), 0.2), cell_axis=0)[0] == pytest.approx(largest)
    assert moment_prior_strength(events, trials, np.full((4, 1), 0.5), cell_axis=0)[0] == pytest.approx(largest)
    assert moment_prior_strength(np.zeros((3, 1)), np.zeros((3, 1)), np.full((3, 1), 0.2), cell_axis=0)[0] == \
        pytest.approx(largest)


def test_moment_prior_strength_around_a_certain_target():
    # a target of exactly 1 (or 0) has no binomial variance, yet a unit away from it shows spread:
    # the estimator keeps m (1 - m) above 0 (m within [1e-9, 1 - 1e-9]), so rho comes out at its
    # upper bound and the pooling is the weakest (prior strength 1 / 0.5 - 1 = 1), not the strongest
    weakest = 1.0 / RHO_BOUNDS[1] - 1.0
    events, trials = np.array([[9.0], [10.0]]), np.array([[10.0], [10.0]])
    assert moment_prior_strength(events, trials, np.ones((2, 1)), cell_axis=0)[0] == pytest.approx(weakest)
    assert moment_prior_strength(10.0 - events, trials, np.zeros((2, 1)), cell_axis=0)[0] == pytest.approx(weakest)
