"""Risk levels: isotonic projection, the target model, shrinkage, recovery, and the risk-level table."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from scipy.optimize import isotonic_regression

from policy import CellTable, InputError, RiskLevelEstimator, estimate_risk_levels, isotonic_nonincreasing
from policy.demo.quarrow import simulate_cases, true_risk_levels
from policy.estimation.strata import (
    level_risk_ratios,
    moment_prior_strength,
    outcome_probabilities,
    risk_level_distribution,
)
from policy.estimation.from_scenario import risk_levels_from_frame
from policy.running.pipeline import estimate


# Pool-adjacent-violators vectors worked by hand (docs/reference-values.md, "Isotonic regression
# test vectors", derived; each also agrees with scipy.optimize.isotonic_regression); non-decreasing
# fits are obtained by negating our non-increasing projection.
@pytest.mark.parametrize(
    "y, w, expected",
    [
        ([3, 7, 5, 9, 8, 7, 10], None, [3, 6, 6, 8, 8, 8, 10]),
        ([1, 41, 51, 1, 2, 5, 24], [1, 2, 3, 4, 5, 6, 7], [1, 13.95, 13.95, 13.95, 13.95, 13.95, 24]),
        ([5, 3, 1, 2, 8, 10, 7, 9, 6, 4], None, [2.75] * 4 + [22 / 3] * 6),
        ([3, 2, 1], None, [2, 2, 2]),  # derived
        ([3, 2, 1], [1, 1, 4], [1.5, 1.5, 1.5]),  # derived
    ],
)
def test_isotonic_hand_worked_vectors(y, w, expected):
    got = -isotonic_nonincreasing(-np.asarray(y, float), None if w is None else np.asarray(w, float))
    np.testing.assert_allclose(got, expected, rtol=1e-12)


@settings(max_examples=300, deadline=None)
@given(
    hnp.arrays(np.float64, st.tuples(st.integers(1, 6), st.integers(1, 9)), elements=st.floats(-50, 50)),
    st.integers(0, 2**32 - 1),
)
def test_isotonic_matches_scipy(y, seed):
    # independent reference: scipy.optimize.isotonic_regression (pool-adjacent-violators)
    w = np.random.default_rng(seed).uniform(0.05, 5.0, size=y.shape)
    got = isotonic_nonincreasing(y, w)
    for i in range(y.shape[0]):
        ref = isotonic_regression(y[i], weights=w[i], increasing=False).x
        np.testing.assert_allclose(got[i], ref, rtol=1e-9, atol=1e-9)
    assert np.all(np.diff(got, axis=-1) <= 1e-12)


def test_risk_level_identities():
    rng = np.random.default_rng(0)
    p = -np.sort(-rng.random((500, 3, 4)), axis=-1)  # non-increasing in the level
    q = risk_level_distribution(p)
    assert q.shape == (500, 3, 5)
    assert (q >= -1e-15).all()
    np.testing.assert_allclose(q.sum(axis=-1), 1.0, atol=1e-12)
    np.testing.assert_allclose(outcome_probabilities(q), p, atol=1e-12)
    # P(R = 0) = 1 - p_0 and P(R = K+1) = p_K (docs/method.md section 2)
    np.testing.assert_allclose(q[..., 0], 1 - p[..., 0])
    np.testing.assert_allclose(q[..., -1], p[..., -1])


def test_level_risk_ratio_matches_statsmodels_mantel_haenszel():
    # independent reference: statsmodels' StratifiedTable.riskratio_pooled (the Mantel-Haenszel
    # pooled risk ratio) over the cells that observed both levels
    from statsmodels.stats.contingency_tables import StratifiedTable

    frame, _ = simulate_cases(30_000, seed=4)
    from policy import load_scenario
    from policy.demo.quarrow import demo_scenario_path

    sc = load_scenario(demo_scenario_path())
    cells = CellTable.from_cases(frame, sc)
    events = cells.events.sum(axis=1)[:, 0, :]
    observed = cells.observed.sum(axis=1)[:, 0, :]
    theta = level_risk_ratios(events[:, None, :], observed[:, None, :])[0]
    for k in (1, 2):
        both = (observed[:, k] > 0) & (observed[:, k - 1] > 0)
        a, n1 = events[both, k], observed[both, k]
        c, n0 = events[both, k - 1], observed[both, k - 1]
        # 2x2 tables [[exposed events, exposed non-events], [reference events, reference non-events]]
        tables = np.stack([np.stack([a, n1 - a], -1), np.stack([c, n0 - c], -1)], -2).transpose(1, 2, 0)
        ref = StratifiedTable(tables.astype(float)).riskratio_pooled
        assert theta[k] / theta[k - 1] == pytest.approx(min(ref, 1.0), rel=1e-10)


def test_loglinear_baseline_matches_statsmodels_poisson():
    # independent reference: statsmodels' Poisson GLM with log exposure as offset; iterative
    # proportional fitting without smoothing converges to the same maximum-likelihood fit
    # (Bishop, Fienberg and Holland 1975, ch. 3).
    import statsmodels.api as sm

    from policy.inputs.cells import CellLayout
    from policy.estimation.strata import factor_matrices, loglinear_rates

    rng = np.random.default_rng(12)
    a, b, c = np.meshgrid(np.arange(4), np.arange(3), np.arange(5), indexing="ij")
    frame = pd.DataFrame({k: pd.Categorical(v.reshape(-1), ordered=True) for k, v in zip("abc", (a, b, c))})
    layout = CellLayout(frame)
    exposure = rng.uniform(20, 200, len(frame))
    true_rate = 0.05 * np.exp(0.3 * a.reshape(-1) - 0.4 * b.reshape(-1) + 0.1 * c.reshape(-1))
    events = rng.poisson(exposure * true_rate).astype(float)
    got = loglinear_rates(events[:, None], exposure[:, None], factor_matrices(layout, ["a", "b", "c"]), smoothing=0.0)[:, 0]
    X = pd.get_dummies(frame, drop_first=True).astype(float)
    X.insert(0, "const", 1.0)
    ref = sm.GLM(events, X, family=sm.families.Poisson(), offset=np.log(exposure)).fit()
    np.testing.assert_allclose(got, ref.fittedvalues / exposure, rtol=1e-7)


def test_moment_prior_strength_recovers_known_overdispersion():
    # beta-binomial with known prior strength kappa = a + b: the moment estimator (Kleinman 1973)
    # should land near it with many units.
    rng = np.random.default_rng(1)
    m, kappa, units = 0.2, 40.0, 20_000
    rates = rng.beta(m * kappa, (1 - m) * kappa, size=units)
    n = rng.integers(5, 60, size=units)
    events = rng.binomial(n, rates)
    est = moment_prior_strength(events[:, None], n[:, None], np.full((units, 1), m), cell_axis=0)
    assert est[0] == pytest.approx(kappa, rel=0.12)


def test_moment_prior_strength_by_hand():
    # Kleinman (1973): for beta-binomial proportions with intra-unit correlation rho,
    # n Var(r) = m (1 - m) (1 + (n - 1) rho) (the beta-binomial variance; derived). Two units of
    # n = 10 with 7 and 3 events around m = 0.5: sum n (r - m)^2 = 2 * 10 * 0.04 = 0.8, and
    # 0.8 = 2 * 0.25 + 0.25 * (9 + 9) rho gives rho = 0.3 / 4.5 = 1/15, prior strength
    # 1/rho - 1 = 14 (with n in place of n - 1 it would be 5 / 0.3 - 1 = 15.67).
    est = moment_prior_strength(np.array([[7.0], [3.0]]), np.array([[10.0], [10.0]]), np.full((2, 1), 0.5), cell_axis=0)
    assert est[0] == pytest.approx(14.0, rel=1e-12)
    # units of one case carry no information on rho: they add m (1 - m) to both sides
    est = moment_prior_strength(np.array([[7.0], [3.0], [1.0]]), np.array([[10.0], [10.0], [1.0]]),
                                np.full((3, 1), 0.5), cell_axis=0)
    assert est[0] == pytest.approx(14.0, rel=1e-12)


def test_level_risk_ratio_is_clipped_at_one():
    # Two cells where the harsher level shows more events than the lenient one: statsmodels'
    # Mantel-Haenszel pooled risk ratio (independent reference) is above 1, and under
    # monotonicity the estimator clips it to 1 (docs/method.md); the next level's ratio, below 1,
    # is kept as it is, so the chained ratios are (1, 1, RR_2).
    from statsmodels.stats.contingency_tables import StratifiedTable

    events = np.array([[4.0, 6.0, 2.0], [10.0, 9.0, 3.0]])
    observed = np.array([[40.0, 30.0, 20.0], [50.0, 30.0, 25.0]])

    def mh(k):
        a, n1, c, n0 = events[:, k], observed[:, k], events[:, k - 1], observed[:, k - 1]
        tables = np.stack([np.stack([a, n1 - a], -1), np.stack([c, n0 - c], -1)], -2).transpose(1, 2, 0)
        return StratifiedTable(tables).riskratio_pooled

    assert mh(1) > 1.5 and mh(2) < 0.6
    theta = level_risk_ratios(events[:, None, :], observed[:, None, :])[0]
    np.testing.assert_allclose(theta, [1.0, 1.0, mh(2)], rtol=1e-12)


def test_projection_weights_are_observed_cases_plus_prior_strength():
    # docs/method.md: each cell's shrunk rates are projected onto non-increasing sequences with
    # weights observed cases + prior strength. One cell, one outcome, two levels, prior strength
    # 4: the level ratio is clipped to 1 (the raw rate rises, 0.2 -> 0.5) and the cell's
    # baseline is its pooled rate m = 22/104, so the shrunk rates are (20 + 4 m) / 104 and
    # (2 + 4 m) / 8; they break the order and pool to their mean weighted by 104 and 8.
    events = np.array([[[20.0, 2.0]]])
    observed = np.array([[[100.0, 4.0]]])
    p, kappa, target = RiskLevelEstimator(prior_strength=4.0).estimate_p(events, observed, [])
    m = 22 / 104
    np.testing.assert_allclose(target, m, rtol=1e-12)
    r0, r1 = (20 + 4 * m) / 104, (2 + 4 * m) / 8
    assert r1 > r0
    pooled = (104 * r0 + 8 * r1) / 112
    np.testing.assert_allclose(p[0, 0], [pooled, pooled], rtol=1e-12)
    # scipy's weighted isotonic regression (independent reference) agrees
    ref = isotonic_regression([r0, r1], weights=[104.0, 8.0], increasing=False).x
    np.testing.assert_allclose(p[0, 0], ref, rtol=1e-12)
    # and the weights matter here: equal weights, or observed cases alone, give other values
    assert abs(pooled - (r0 + r1) / 2) > 0.05 and abs(pooled - (100 * r0 + 4 * r1) / 104) > 0.004


def test_batched_estimation_equals_one_at_a_time(demo_scenario, demo_cases):
    frame, _ = demo_cases
    cells = CellTable.from_cases(frame, demo_scenario)
    est = RiskLevelEstimator.from_scenario(demo_scenario)
    design = est.design(cells.layout, 3)
    events = cells.events.sum(axis=1)
    observed = cells.observed.sum(axis=1)
    rng = np.random.default_rng(2)
    factors = rng.poisson(1.0, size=(3,) + events.shape[:1])[:, :, None, None]
    batch_e, batch_n = events[None] * factors, observed[None] * factors
    p_batch, _, _ = est.estimate_p(batch_e, batch_n, design)
    for b in range(3):
        p_one, _, _ = est.estimate_p(batch_e[b], batch_n[b], design)
        np.testing.assert_allclose(p_batch[b], p_one, rtol=1e-9, atol=1e-12)


def test_estimates_are_monotone_probabilities(demo_scenario):
    rl = estimate_risk_levels(demo_scenario)
    assert rl.p.shape == (rl.n_cells, 3, 3)
    assert ((rl.p >= 0) & (rl.p <= 1)).all()
    assert (np.diff(rl.p, axis=-1) <= 1e-12).all()
    np.testing.assert_allclose(rl.q.sum(axis=-1), 1.0, atol=1e-9)
    shares = rl.shares()
    by = shares.groupby(["outcome", "attribute", "group"])["share"].sum()
    np.testing.assert_allclose(by.to_numpy(), 1.0, atol=1e-9)
    # the never-observed flags match the cell table: a (cell, outcome, level) is borrowed
    # exactly where no outcome of that kind was recorded there and it is not a structural zero
    cells, rl_again = estimate(demo_scenario)
    np.testing.assert_array_equal(rl_again.p, rl.p)
    never = cells.observed.sum(axis=1) == 0
    np.testing.assert_array_equal(rl.borrowed, never & ~rl.structural_zero)
    assert rl.borrowed.any() and not rl.borrowed.all()


def _aligned_truth(rl):
    truth, _ = true_risk_levels()
    key_t = truth.layout.frame.astype(str).agg("|".join, axis=1)
    key_e = rl.layout.frame.astype(str).agg("|".join, axis=1)
    pos = pd.Index(key_t).get_indexer(key_e)
    assert (pos >= 0).all()
    return truth, pos


def test_recovers_true_risk_level_shares_at_large_n(demo_scenario):
    # 2,000,000 simulated cases: overall shares of each risk level within 0.004 of the exact
    # population truth, and cell-level probabilities close where cells are well populated.
    frame, _ = simulate_cases(2_000_000, seed=99)
    cells = CellTable.from_cases(frame, demo_scenario)
    rl = estimate_risk_levels(demo_scenario, cells)
    truth, pos = _aligned_truth(rl)
    w = rl.weights / rl.weights.sum()
    est_share = np.einsum("x,xjr->jr", w, rl.q)
    true_share = np.einsum("x,xjr->jr", truth.weights / truth.weights.sum(), truth.q)
    np.testing.assert_allclose(est_share, true_share, atol=0.004)
    big = rl.weights >= 2000
    err = np.abs(rl.p[big] - truth.p[pos][big])
    assert np.quantile(err, 0.95) < 0.03


def test_structural_zero_is_exact(tmp_path):
    from .conftest import write_scenario
    from policy import load_scenario

    frame, _ = simulate_cases(5_000, seed=8)
    frame.loc[frame["decision"] == "bond", "missed_court"] = 0
    frame.to_csv(tmp_path / "cases.csv", index=False)
    sc = load_scenario(write_scenario(tmp_path, replace={'cost = 1000\n': 'cost = 1000\nimpossible_from = "bond"\n'}))
    rl = estimate_risk_levels(sc)
    assert (rl.p[:, 0, 2] == 0).all()
    assert rl.structural_zero[0, 2] and not rl.structural_zero[0, 1]
    assert (rl.p[:, 1, 2] > 0).all()


def test_risk_level_table_round_trip(demo_scenario):
    rl = estimate_risk_levels(demo_scenario)
    frame = rl.to_frame()
    back = risk_levels_from_frame(frame, demo_scenario, file="risk_levels.csv")
    np.testing.assert_allclose(back.p, rl.p, atol=1e-12)
    np.testing.assert_array_equal(back.borrowed, rl.borrowed)
    np.testing.assert_allclose(back.weights, rl.weights)
    np.testing.assert_allclose(back.cell_costs["bond_cost"], rl.cell_costs["bond_cost"])


@pytest.mark.parametrize(
    "edit, message",
    [
        (lambda f: f.assign(risk_level_1=f["risk_level_1"] + 0.01), "must sum to 1 within 1e-6"),
        (lambda f: f.assign(risk_level_0=-0.2), "must hold probabilities in [0, 1]"),
        (lambda f: f.iloc[1:], "every cell needs a row for each of"),
        (lambda f: f.assign(outcome=f["outcome"].replace("new_violent", "arson")), "not declared outcome keys"),
        (lambda f: f.drop(columns=["risk_level_3"]), "column 'risk_level_3'"),
    ],
)
def test_risk_level_table_validation(demo_scenario, edit, message):
    rl = estimate_risk_levels(demo_scenario)
    frame = edit(rl.to_frame())
    with pytest.raises(InputError, match=message.replace("[", r"\[").replace("]", r"\]")):
        from policy.inputs.tables import require_columns
        from policy.estimation.from_scenario import risk_level_table_columns

        require_columns(frame.columns, risk_level_table_columns(demo_scenario), "risk_levels.csv", "a risk-level table")
        risk_levels_from_frame(frame, demo_scenario, file="risk_levels.csv")
