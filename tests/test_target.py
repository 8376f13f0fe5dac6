"""The shrinkage target's level effects: fits against statsmodels, selection, limited translation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import policy.estimation.target as target
from policy.estimation.strata import factor_matrices, shrunk_rates
from policy.estimation.target import cell_level_ratios, fit_level_model, score_statistics, select_level_terms
from policy.inputs.cells import CellLayout


def _grid(seed: int, cases=(40, 400), vary: float = 0.5):
    """12 cells (u: 4 categories, v: 3), 3 levels, one outcome kind; the level-2 ratio varies with u."""
    rng = np.random.default_rng(seed)
    u, v = np.meshgrid(np.arange(4), np.arange(3), indexing="ij")
    u, v = u.ravel(), v.ravel()
    frame = pd.DataFrame({"u": pd.Categorical(u, ordered=True), "v": pd.Categorical(v, ordered=True)})
    layout = CellLayout(frame)
    n = rng.integers(*cases, size=(12, 1, 3)).astype(float)
    base = 0.25 + 0.05 * v
    ratio = np.stack([np.ones(12), np.full(12, 0.7), 0.5 * (1 - vary * u / 4)], axis=-1)
    p = (base[:, None] * ratio)[:, None, :]
    events = rng.binomial(n.astype(int), p).astype(float)
    return events, n, layout, frame


def _statsmodels_poisson(events, n, frame, terms):
    """Poisson GLM (log link, offset log n) with a free baseline per cell, level effects and the
    given covariate-by-level terms: the reference the level model must reproduce."""
    import statsmodels.formula.api as smf
    import statsmodels.api as sm

    rows = []
    for x in range(events.shape[0]):
        for d in range(events.shape[-1]):
            rows.append({"cell": x, "level": d, "u": int(frame["u"].iloc[x]), "v": int(frame["v"].iloc[x]),
                         "e": events[x, 0, d], "n": n[x, 0, d]})
    data = pd.DataFrame(rows)
    formula = "e ~ C(cell) + C(level)" + "".join(f" + C({t}):C(level)" for t in terms)
    fit = smf.glm(formula, data, family=sm.families.Poisson(), offset=np.log(data["n"])).fit()
    mu = fit.fittedvalues.to_numpy().reshape(events.shape[0], events.shape[-1])
    rate = mu / n[:, 0, :]
    return rate / rate[:, :1], fit.deviance


def test_level_model_matches_statsmodels_poisson(monkeypatch):
    # independent reference: statsmodels' Poisson GLM with cell fixed effects and a u-by-level
    # interaction; with the ridge switched off the profiled Newton fit is the same maximum-likelihood
    # fit (Bishop, Fienberg and Holland 1975, ch. 3, Poisson-multinomial equivalence)
    monkeypatch.setattr(target, "RIDGE", 1e-10)
    events, n, layout, frame = _grid(3)
    factors = factor_matrices(layout, ["u", "v"])
    include = np.array([[True], [False]])
    theta, _ = fit_level_model(events, n, factors, include, tol=1e-12)
    ref, _ = _statsmodels_poisson(events, n, frame, ["u"])
    np.testing.assert_allclose(theta[:, 0, :], ref, rtol=1e-6)
    # both terms at once (block-coordinate Newton)
    theta2, _ = fit_level_model(events, n, factors, np.array([[True], [True]]), max_sweeps=500, tol=1e-12)
    ref2, _ = _statsmodels_poisson(events, n, frame, ["u", "v"])
    np.testing.assert_allclose(theta2[:, 0, :], ref2, rtol=1e-5)


def test_score_statistic_matches_statsmodels_score_test():
    # independent reference: statsmodels' score test of the u-by-level (or v-by-level) dummies
    # added to the Poisson GLM with cell fixed effects and level effects (Rao 1948)
    import statsmodels.api as sm
    import statsmodels.formula.api as smf

    events, n, layout, frame = _grid(4)
    got = score_statistics(events, n, factor_matrices(layout, ["u", "v"]), ridge=1e-10)[:, 0]
    rows = [{"cell": x, "level": d, "u": int(frame["u"].iloc[x]), "v": int(frame["v"].iloc[x]),
             "e": events[x, 0, d], "n": n[x, 0, d]} for x in range(12) for d in range(3)]
    data = pd.DataFrame(rows)
    base = smf.glm("e ~ C(cell) + C(level)", data, family=sm.families.Poisson(), offset=np.log(data["n"])).fit()
    for k, term in enumerate(["u", "v"]):
        dummies = pd.get_dummies(data[term].astype(str) + "_" + data["level"].astype(str)).astype(float)
        extra = dummies[[c for c in dummies.columns if not c.startswith("0_") and not c.endswith("_0")]]
        ref = base.model.score_test(base.params, exog_extra=extra.to_numpy())[0]
        assert got[k] == pytest.approx(float(np.ravel(ref)[0]), rel=1e-6)
    # and the likelihood-ratio statistic it stands in for is close (asymptotic equivalence)
    _, dev0 = _statsmodels_poisson(events, n, frame, [])
    _, dev_u = _statsmodels_poisson(events, n, frame, ["u"])
    assert got[0] == pytest.approx(dev0 - dev_u, rel=0.15)


def test_selection_keeps_the_varying_term_with_plenty_of_data():
    events, n, layout, _ = _grid(5, cases=(2_000, 4_000))
    include, lr = select_level_terms(events, n, factor_matrices(layout, ["u", "v"]))
    assert include[0, 0] and lr[0, 0] > 100
    theta, kept = cell_level_ratios(events, n, factor_matrices(layout, ["u", "v"]), np.ones((1, 3)))
    assert kept[0, 0]
    # the level-2 ratio falls with u as in the truth (0.5, 0.4375, 0.375, 0.3125), within noise
    by_u = theta[:, 0, 2].reshape(4, 3).mean(axis=1)
    np.testing.assert_allclose(by_u, 0.5 * (1 - 0.5 * np.arange(4) / 4), atol=0.04)
    assert (np.diff(theta, axis=-1) <= 1e-12).all()


def test_no_term_when_the_ratio_is_common():
    # a common ratio: the criterion keeps no term in most data sets (AIC: P(chi2_6 > 12) ~ 0.06)
    kept = [select_level_terms(*_grid(s, vary=0.0)[:2], factor_matrices(_grid(s, vary=0.0)[2], ["u"]))[0][0, 0]
            for s in range(20)]
    assert sum(kept) <= 5


def test_batched_selection_equals_one_at_a_time():
    events, n, layout, _ = _grid(6)
    factors = factor_matrices(layout, ["u", "v"])
    mult = np.random.default_rng(0).poisson(1.0, size=(4, 12, 1, 1))
    be, bn = events[None] * mult, n[None] * mult
    inc_b, lr_b = select_level_terms(be, bn, factors)
    for b in range(4):
        inc, lr = select_level_terms(be[b], bn[b], factors)
        np.testing.assert_array_equal(inc, inc_b[b])
        np.testing.assert_allclose(lr, lr_b[b], rtol=1e-8, atol=1e-9)


@pytest.mark.parametrize("limit", [1.0, 2.0])
def test_limited_translation_bounds_the_shift(limit):
    # a cell far from a target that fits the other cells: its shrunk rate moves at most `limit`
    # standard errors from its own rate (Efron and Morris 1971)
    # 30 cells where the harsher level keeps 80% of the risk, one large cell where it keeps 30%
    rng = np.random.default_rng(7)
    n = np.full((31, 1, 2), 150.0)
    n[0] = 1_500.0
    events = rng.binomial(n.astype(int), np.array([0.3, 0.24])).astype(float)
    events[0] = np.round(n[0] * np.array([0.45, 0.135]))
    rate, _, _, _ = shrunk_rates(events, n, None, 400.0, None, level_terms=False, translation_limit=limit)
    free, _, _, _ = shrunk_rates(events, n, None, 400.0, None, level_terms=False, translation_limit=None)
    own = events / n
    # the larger of the binomial standard errors at the shrunk and at the cell's own rate
    se = np.sqrt(np.maximum(free * (1 - free), own * (1 - own)) / n)
    assert (np.abs(rate - own) <= limit * se + 1e-12).all()
    assert (np.abs(free[0] - own[0]) > limit * se[0]).any()  # the limit did bind in the large cell
    inside = np.abs(free - own) <= limit * se
    np.testing.assert_array_equal(rate[inside], free[inside])  # and left alone what it did not bind


def test_one_term_fast_path_equals_the_general_fit():
    # the per-term exact fit used by default gives the general block fit's ratios
    events, n, layout, _ = _grid(9, cases=(500, 2_000))
    factors = factor_matrices(layout, ["u", "v"])
    mult = np.random.default_rng(1).poisson(1.0, size=(3, 12, 1, 1))
    be, bn = events[None] * mult, n[None] * mult
    include = np.zeros((3, 2, 1), dtype=bool)
    include[0, 0, 0] = include[1, 1, 0] = True  # replicate 2: no term
    fast = target._one_term_ratios(be, bn, factors, include, tol=1e-12)
    general, _ = fit_level_model(be[:2], bn[:2], factors, include[:2], tol=1e-12)
    np.testing.assert_allclose(fast[:2], general, rtol=1e-8)
    assert (fast[2] == 1).all()


def test_translation_limit_must_be_positive():
    from policy import InputError, RiskLevelEstimator

    with pytest.raises(InputError, match="translation_limit must be a number > 0 or None; got 0"):
        RiskLevelEstimator(translation_limit=0)


def test_fit_reports_the_kept_terms():
    # on the simulated process where the harsher levels' effect depends on prior record, the
    # estimator keeps the prior-by-level term at 20,000 cases; with level_terms=False it keeps none
    from policy import CellTable, RiskLevelEstimator

    from .simulations import process

    proc = process("varying")
    cells = CellTable.from_cases(proc.simulate(20_000, 3), proc.scenario)
    est = RiskLevelEstimator().fit(cells)
    assert est.level_terms_ == {"missed": ["prior"], "offense": ["prior"]}
    assert RiskLevelEstimator(level_terms=False).fit(cells).level_terms_ == {"missed": [], "offense": []}


def test_joint_newton_steps_reach_the_block_steps_optimum():
    # the joint Newton steps and block-coordinate steps run to convergence maximize the same
    # penalized likelihood: the same ratios, in a batch where the terms differ by leading index
    # and outcome kind (none, one, both), the ridge on
    events, n, layout, _ = _grid(5, cases=(300, 1_500))
    factors = factor_matrices(layout, ["u", "v"])
    mult = np.random.default_rng(2).poisson(1.0, size=(3, 12, 1, 1)) + 1
    be = np.concatenate([events[None] * mult, events[None] * mult[::-1]], axis=-2)
    bn = np.concatenate([n[None] * mult, n[None] * mult[::-1]], axis=-2)
    include = np.zeros((3, 2, 2), dtype=bool)
    include[0] = True
    include[1, 0, 0] = include[1, :, 1] = True
    include[2, 1, 1] = True
    joint, ll = fit_level_model(be, bn, factors, include, tol=1e-12)
    blocks, ll_blocks = fit_level_model(be, bn, factors, include, max_sweeps=20_000, tol=1e-13, joint=False)
    np.testing.assert_allclose(joint, blocks, rtol=1e-8)
    np.testing.assert_allclose(ll, ll_blocks, rtol=1e-12)
    # block steps stopped early are not there yet
    early, _ = fit_level_model(be, bn, factors, include, max_sweeps=3, joint=False)
    assert not np.allclose(early, joint, rtol=1e-8)
