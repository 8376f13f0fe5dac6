"""The estimator's baseline model and shrinkage on small hand examples, fast enough to run under
mutation testing: the membership matrices of the cell columns, the log-linear baseline by
iterative proportional fitting (against statsmodels' Poisson GLM, and against the fitting steps
written out with plain loops), the shrunk baselines and rates and the monotone probabilities
built from their documented formulas (docs/method.md, the docstrings of
policy/estimation/strata.py). The building blocks these formulas call (Mantel-Haenszel level
ratios, the moment estimator, the isotonic projection) have their own checks against statsmodels
and scipy in tests/test_strata.py and tests/test_strata_edges.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy.errors import InputError
from policy.estimation.strata import (
    RiskLevelEstimator,
    factor_matrices,
    isotonic_nonincreasing,
    level_risk_ratios,
    loglinear_rates,
    moment_prior_strength,
    shrunk_baselines,
    shrunk_rates,
)
from policy.inputs.cells import CellLayout


def _layout():
    # 6 cells: u in {u0, u1, u2} x v in {v0, v1}, and a category "u3" of u without cells
    u = ["u0", "u0", "u1", "u1", "u2", "u2"]
    v = ["v0", "v1", "v0", "v1", "v0", "v1"]
    frame = pd.DataFrame({"u": pd.Categorical(u, categories=["u0", "u1", "u2", "u3"], ordered=True),
                          "v": pd.Categorical(v, categories=["v0", "v1"], ordered=True)})
    return CellLayout(frame)


def test_membership_matrices_by_hand():
    layout = _layout()
    (mu, cu), (mv, cv) = factor_matrices(layout, ["u", "v"])
    assert mu.shape == (4, 6) and mv.shape == (2, 6)
    assert np.array_equal(mu.toarray(), [[1, 1, 0, 0, 0, 0], [0, 0, 1, 1, 0, 0], [0, 0, 0, 0, 1, 1], [0, 0, 0, 0, 0, 0]])
    assert np.array_equal(mv.toarray(), [[1, 0, 1, 0, 1, 0], [0, 1, 0, 1, 0, 1]])
    assert list(cu) == [0, 0, 1, 1, 2, 2] and list(cv) == [0, 1, 0, 1, 0, 1]
    # cells in another order: rows still by category, columns by cell
    frame = layout.frame.iloc[[5, 0, 3]].reset_index(drop=True)
    (m, c), = factor_matrices(CellLayout(frame), ["v"])
    assert np.array_equal(m.toarray(), [[0, 1, 0], [1, 0, 1]]) and list(c) == [1, 0, 1]
    assert factor_matrices(layout, []) == []


def _ipf_by_loops(events, exposure, codes_list, n_categories, smoothing, max_sweeps, tol=1e-9):
    """Iterative proportional fitting of one fit (events, exposure of shape (n_cells, J)), written
    with plain loops from the docstring of loglinear_rates (Deming and Stephan 1940)."""
    n, J = events.shape
    overall = (events.sum(axis=0) + 0.5) / (exposure.sum(axis=0) + 1.0)
    rate = np.tile(overall, (n, 1))
    for _ in range(max_sweeps):
        change = 0.0
        for codes, K in zip(codes_list, n_categories):
            for k in range(K):
                members = codes == k
                for j in range(J):
                    num = events[members, j].sum() + smoothing * overall[j]
                    den = (exposure[members, j] * rate[members, j]).sum() + smoothing * overall[j]
                    ratio = num / den if num > 0 and den > 0 else 1.0
                    rate[members, j] *= ratio
                    change = max(change, abs(np.log(ratio)))
        if change < tol:
            break
    return rate


def _counts(seed=0, fits=()):
    rng = np.random.default_rng(seed)
    exposure = rng.uniform(20, 80, fits + (6, 2))
    events = rng.poisson(exposure * np.array([0.1, 0.3])).astype(float)
    return events, exposure


def test_loglinear_rates_match_statsmodels_poisson_per_fit_and_outcome():
    # reference: statsmodels' Poisson GLM (main effects, log exposure as offset); a leading axis
    # of two fits and two outcome kinds, each its own fit
    import statsmodels.api as sm

    layout = _layout()
    events, exposure = _counts(1, fits=(2,))
    got = loglinear_rates(events, exposure, factor_matrices(layout, ["u", "v"]), smoothing=0.0)
    X = pd.get_dummies(layout.frame, drop_first=True).astype(float)
    X = X.loc[:, X.any()]  # the category without cells has no column
    X.insert(0, "const", 1.0)
    for f in range(2):
        for j in range(2):
            ref = sm.GLM(events[f, :, j], X, family=sm.families.Poisson(), offset=np.log(exposure[f, :, j])).fit()
            np.testing.assert_allclose(got[f, :, j], ref.fittedvalues / exposure[f, :, j], rtol=1e-7)


@pytest.mark.parametrize("smoothing, max_sweeps", [(1.0, 200), (1.0, 1), (2.5, 3), (0.0, 200)])
def test_loglinear_rates_follow_the_fitting_steps(smoothing, max_sweeps):
    # a category without events (u2 for outcome 0) and one without cells (u3): the smoothing keeps
    # the fit finite, and the sweeps stop only at max_sweeps or when no ratio moves more than tol
    layout = _layout()
    events, exposure = _counts(2)
    events[4:, 0] = 0.0
    factors = factor_matrices(layout, ["u", "v"])
    got = loglinear_rates(events, exposure, factors, smoothing=smoothing, max_sweeps=max_sweeps)
    expected = _ipf_by_loops(events, exposure, [c for _, c in factors], [4, 2], smoothing, max_sweeps)
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    # in a batch, each fit gives what it gives alone (each stops on its own)
    other = events.copy()
    other[:, 1] = np.arange(6.0)
    batch = loglinear_rates(np.stack([events, other]), np.stack([exposure, exposure]), factors, smoothing=smoothing,
                            max_sweeps=max_sweeps)
    np.testing.assert_allclose(batch[0], got, rtol=1e-12)
    np.testing.assert_allclose(batch[1], _ipf_by_loops(other, exposure, [c for _, c in factors], [4, 2], smoothing,
                                                       max_sweeps), rtol=1e-12)


def test_loglinear_rates_stop_at_the_tolerance():
    layout = _layout()
    events, exposure = _counts(3)
    factors = factor_matrices(layout, ["u", "v"])
    codes = [c for _, c in factors]
    # the defaults: smoothing 1, at most 200 sweeps, tolerance 1e-9 (a category without events
    # runs them all)
    empty = events.copy()
    empty[4:, 0] = 0.0
    np.testing.assert_allclose(loglinear_rates(empty, exposure, factors),
                               _ipf_by_loops(empty, exposure, codes, [4, 2], 1.0, 200, 1e-9), rtol=1e-12)
    # with a loose tolerance two fits of a batch stop after different numbers of sweeps, each
    # as it would alone
    batch = loglinear_rates(np.stack([events, empty]), np.stack([exposure, exposure]), factors, tol=1e-3)
    for f, e in enumerate((events, empty)):
        np.testing.assert_allclose(batch[f], _ipf_by_loops(e, exposure, codes, [4, 2], 1.0, 200, 1e-3), rtol=1e-12)
    for tol in (1e-2, 1e-5):
        got = loglinear_rates(events, exposure, factors, tol=tol)
        np.testing.assert_allclose(got, _ipf_by_loops(events, exposure, codes, [4, 2], 1.0, 200, tol), rtol=1e-12)
    assert not np.allclose(loglinear_rates(events, exposure, factors, tol=1e-1),
                           loglinear_rates(events, exposure, factors, tol=1e-12), rtol=1e-9, atol=0)


def _three_columns(order):
    # 30 of the 36 combinations of u (3 categories) x v (2) x w (6, the column of most
    # categories), in the column order given: the sweeps can run on the u x v combinations
    rng = np.random.default_rng(11)
    full = pd.MultiIndex.from_product([range(3), range(2), range(6)], names=["u", "v", "w"]).to_frame(index=False)
    frame = full.iloc[np.sort(rng.choice(len(full), 30, replace=False))].reset_index(drop=True)
    cats = {"u": ["u0", "u1", "u2"], "v": ["v0", "v1"], "w": [f"w{k}" for k in range(6)]}
    frame = pd.DataFrame({c: pd.Categorical(np.asarray(cats[c])[frame[c]], categories=cats[c], ordered=True)
                          for c in order})
    layout = CellLayout(frame)
    exposure = rng.uniform(5, 60, (2, 30, 2))
    w = layout.codes("w")
    events = rng.poisson(exposure * np.array([0.1, 0.3]) * (1 + 0.2 * w)[:, None]).astype(float)
    events[1][w == 2, 0] = 0.0  # a category of the largest column without events in one fit
    return layout, events, exposure


@pytest.mark.parametrize("order", [("u", "w", "v"), ("w", "u", "v"), ("u", "v", "w")])
@pytest.mark.parametrize("smoothing, max_sweeps, tol", [(1.0, 200, 1e-9), (1.0, 1, 1e-9), (2.5, 3, 1e-9),
                                                        (0.0, 200, 1e-9), (1.0, 200, 1e-3)])
def test_collapsed_sweeps_take_the_same_steps(order, smoothing, max_sweeps, tol):
    # the sweeps on the combinations of the other columns against the fitting steps written out
    # with plain loops on every cell (and the sweeps on every cell): the same steps in the same
    # order, each fit of the batch stopping on its own
    layout, events, exposure = _three_columns(order)
    factors = factor_matrices(layout, list(order))
    codes = [c for _, c in factors]
    sizes = [len(layout.categories(c)) for c in order]
    fast = loglinear_rates(events, exposure, factors, smoothing=smoothing, max_sweeps=max_sweeps, tol=tol, collapse=True)
    cells = loglinear_rates(events, exposure, factors, smoothing=smoothing, max_sweeps=max_sweeps, tol=tol, collapse=False)
    np.testing.assert_allclose(fast, cells, rtol=1e-12)
    for f in range(2):
        expected = _ipf_by_loops(events[f], exposure[f], codes, sizes, smoothing, max_sweeps, tol)
        np.testing.assert_allclose(fast[f], expected, rtol=1e-12)


def test_collapsed_sweeps_match_statsmodels_poisson():
    # reference: statsmodels' Poisson GLM (main effects, log exposure as offset), fit by fit
    import statsmodels.api as sm

    layout, events, exposure = _three_columns(("u", "w", "v"))
    events[1][layout.codes("w") == 2, 0] = 1.0  # every category with an event: a finite optimum
    got = loglinear_rates(events, exposure, factor_matrices(layout, ["u", "w", "v"]), smoothing=0.0, collapse=True)
    X = pd.get_dummies(layout.frame, drop_first=True).astype(float)
    X.insert(0, "const", 1.0)
    for f in range(2):
        for j in range(2):
            ref = sm.GLM(events[f, :, j], X, family=sm.families.Poisson(), offset=np.log(exposure[f, :, j])).fit()
            np.testing.assert_allclose(got[f, :, j], ref.fittedvalues / exposure[f, :, j], rtol=1e-7)


def _level_counts(seed=4):
    rng = np.random.default_rng(seed)
    observed = rng.integers(0, 40, size=(6, 2, 3)).astype(float)
    observed[0, :, 2] = 0.0  # a level never observed in cell 0
    rate = np.array([0.3, 0.2])[None, :, None] * np.array([1.0, 0.7, 0.4]) * rng.uniform(0.6, 1.4, size=(6, 1, 1))
    events = rng.binomial(observed.astype(int), np.clip(rate, 0, 1)).astype(float)
    return events, observed


def test_shrunk_baselines_by_their_formula():
    # N_x = sum_d n_xd theta_d, e_x = sum_d e_xd, m_x the log-linear rate of e_x with exposure N_x,
    # k by moments around m_x, baseline (e_x + k m_x) / (N_x + k)
    layout = _layout()
    events, observed = _level_counts()
    theta = level_risk_ratios(events, observed)
    factors = factor_matrices(layout, ["u", "v"])
    e = events.sum(axis=-1)
    N = (observed * theta[None]).sum(axis=-1)
    m = np.clip(loglinear_rates(e, N, factors), 0, 1)
    k = moment_prior_strength(e, N, m, cell_axis=-2)
    np.testing.assert_allclose(shrunk_baselines(events, observed, theta, factors), (e + k * m) / (N + k), rtol=1e-12)
    # ratios per cell (shape of the counts) enter the same way
    per_cell = np.broadcast_to(theta, observed.shape).copy()
    per_cell[3] *= 0.9
    N = (observed * per_cell).sum(axis=-1)
    m = np.clip(loglinear_rates(e, N, factors), 0, 1)
    k = moment_prior_strength(e, N, m, cell_axis=-2)
    np.testing.assert_allclose(shrunk_baselines(events, observed, per_cell, factors), (e + k * m) / (N + k), rtol=1e-12)
    # without a model: one overall rate per outcome kind
    N = (observed * theta[None]).sum(axis=-1)
    m = np.broadcast_to(e.sum(axis=0) / N.sum(axis=0), e.shape)
    k = moment_prior_strength(e, N, m, cell_axis=-2)
    np.testing.assert_allclose(shrunk_baselines(events, observed, theta, None), (e + k * m) / (N + k), rtol=1e-12)
    np.testing.assert_allclose(shrunk_baselines(events, observed, theta, []), (e + k * m) / (N + k), rtol=1e-12)
    # fractions of a case: the overall rate has no floor on the exposure
    small = shrunk_baselines(events * 1e-3, observed * 1e-3, theta, None)
    N3, e3 = N * 1e-3, e * 1e-3
    m3 = np.broadcast_to(e3.sum(axis=0) / N3.sum(axis=0), e.shape)
    k3 = moment_prior_strength(e3, N3, m3, cell_axis=-2)
    np.testing.assert_allclose(small, (e3 + k3 * m3) / (N3 + k3), rtol=1e-12)
    # a leading axis of two fits (ratios per fit), with and without a model: each fit as alone
    events2 = np.stack([events, events[::-1]])
    observed2 = np.stack([observed, observed[::-1]])
    theta2 = np.stack([theta, theta * 0.9])
    for f in (factors, None):
        both = shrunk_baselines(events2, observed2, theta2, f)
        for i in range(2):
            np.testing.assert_allclose(both[i], shrunk_baselines(events2[i], observed2[i], theta2[i], f), rtol=1e-12)


def test_baseline_model_rates_above_one_are_clipped():
    # the cells of u2 were seen only at the harshest level, every case with the event: with a
    # ratio of 0.4 there they count as 0.4 cases each under the most lenient level, so the
    # model's rate for u2 is 2.5 events per case; the target is clipped to 1 (a probability)
    layout = _layout()
    events, observed = _level_counts(9)
    observed[4:, 0, :] = [0.0, 0.0, 30.0]
    events[4:, 0, :] = [0.0, 0.0, 30.0]
    theta = np.array([[1.0, 0.7, 0.4], [1.0, 0.8, 0.6]])
    factors = factor_matrices(layout, ["u"])
    e = events.sum(axis=-1)
    N = (observed * theta[None]).sum(axis=-1)
    raw = loglinear_rates(e, N, factors)
    assert raw[4, 0] > 2
    m = np.clip(raw, 0, 1)
    k = moment_prior_strength(e, N, m, cell_axis=-2)
    np.testing.assert_allclose(shrunk_baselines(events, observed, theta, factors), (e + k * m) / (N + k), rtol=1e-12)


@pytest.mark.parametrize("prior", ["auto", 7.5, 0.5])
def test_shrunk_rates_by_their_formula(prior):
    # target b_x theta_d (clipped to 1), rate (e + k target) / (n + k), the target where nothing
    # was seen, the weight n + k (1e-6 where it is 0); structural zeros make theta 0 there (no
    # case is counted at such a level, so the level ratios alone would carry the level before)
    layout = _layout()
    events, observed = _level_counts(5)
    zero = np.array([[False, False, False], [False, False, True]])
    events[:, 1, 2] = 0.0
    observed[:, 1, 2] = 0.0
    # cell 5 seen only at the harshest level, every case with the event: its baseline exceeds 1
    observed[5, 0, :] = [0.0, 0.0, 30.0]
    events[5, 0, :] = [0.0, 0.0, 30.0]
    factors = factor_matrices(layout, ["u"])
    theta = np.where(zero, 0.0, level_risk_ratios(events, observed))
    base = shrunk_baselines(events, observed, np.broadcast_to(theta, events.shape), factors)
    target = np.clip(base[..., None] * theta, 0, 1)
    kappa = moment_prior_strength(events, observed, target) if prior == "auto" else np.full((2, 3), prior)
    weight = observed + kappa
    rate = np.where(weight > 0, (events + kappa * target) / np.where(weight > 0, weight, 1), target)
    assert base[5, 0] > 1 and level_risk_ratios(events, observed)[1, 2] > 0
    got_rate, got_weight, got_kappa, got_target = shrunk_rates(events, observed, factors, prior, zero, level_terms=False)
    np.testing.assert_allclose(got_target, target, rtol=1e-12)
    np.testing.assert_allclose(got_kappa, kappa, rtol=1e-12)
    np.testing.assert_allclose(got_rate, rate, rtol=1e-12)
    np.testing.assert_allclose(got_weight, np.where(weight > 0, weight, 1e-6), rtol=1e-12)
    assert (got_target[:, 1, 2] == 0).all()
    if prior == "auto":
        # the defaults: prior strength by moments, level terms where the criterion keeps them
        default = shrunk_rates(events, observed, factors, zero=zero)
        explicit = shrunk_rates(events, observed, factors, "auto", zero, level_terms=True)
        for a, b in zip(default, explicit):
            np.testing.assert_allclose(a, b, rtol=1e-12)
    else:
        # no prior: a level never observed has weight 1e-6 and takes the target
        r0, w0, k0, t0 = shrunk_rates(events, observed, factors, 0.0, zero, level_terms=False)
        assert w0[0, 0, 2] == 1e-6 and r0[0, 0, 2] == t0[0, 0, 2] and (k0 == 0).all()
        seen = observed > 0
        np.testing.assert_allclose(r0[seen], (events / np.where(seen, observed, 1))[seen], rtol=1e-12)


def test_shrunk_rates_within_the_translation_limit():
    # Efron and Morris 1971: each rate seen in a cell stays within D standard errors (the larger
    # binomial one, at the shrunk or the own rate) of the cell's own rate
    events, observed = _level_counts(6)
    events, observed = 25 * events, 25 * observed  # the same own rates, a fifth of the standard errors
    observed[1, 0, 0], events[1, 0, 0] = 1.0, 1.0  # a level seen in one case
    free, _, _, _ = shrunk_rates(events, observed, None, 300.0, None, level_terms=False, translation_limit=None)
    for D in (0.5, 2.0):
        got, _, _, _ = shrunk_rates(events, observed, None, 300.0, None, level_terms=False, translation_limit=D)
        seen = observed > 0
        own = events / np.where(seen, observed, 1)
        reach = D * np.sqrt(np.maximum(free * (1 - free), own * (1 - own)) / np.where(seen, observed, 1))
        expected = np.where(seen, np.clip(free, own - reach, own + reach), free)
        np.testing.assert_allclose(got, expected, rtol=1e-12)
        assert (got != free).any()


def test_level_terms_enter_through_per_cell_ratios():
    from policy.estimation.target import cell_level_ratios

    layout = _layout()
    events, observed = _level_counts(7)
    factors = factor_matrices(layout, ["u", "v"])
    zero = np.array([[False, False, False], [False, True, True]])
    events[:, 1, 1:] = observed[:, 1, 1:] = 0.0
    theta0 = np.where(zero, 0.0, level_risk_ratios(events, observed))
    for every in (False, True):
        theta, _ = cell_level_ratios(events, observed, factors, theta0, zero, every=every)
        base = shrunk_baselines(events, observed, theta, factors)
        target = np.clip(base[..., None] * theta, 0, 1)
        _, _, _, got = shrunk_rates(events, observed, factors, 5.0, zero, level_terms="all" if every else True)
        np.testing.assert_allclose(got, target, rtol=1e-12)
        assert (got[:, 1, 1:] == 0).all()


def test_estimator_settings_zero_mask_and_probabilities():
    assert RiskLevelEstimator(structural_zeros={1: 2}).zero_mask(2, 4).tolist() == [[False] * 4, [False, False, True, True]]
    assert not RiskLevelEstimator().zero_mask(2, 3).any()
    est = RiskLevelEstimator(prior_strength=3.0, target_covariates=["u"], structural_zeros={1: 2}, level_terms="all",
                             translation_limit=0.1)
    assert (est.prior_strength, est.target_covariates, est.structural_zeros, est.level_terms, est.translation_limit) == \
        (3.0, ("u",), {1: 2}, "all", 0.1)
    defaults = RiskLevelEstimator(level_terms=0)
    assert (defaults.prior_strength, defaults.target_covariates, defaults.structural_zeros, defaults.level_terms,
            defaults.translation_limit) == ("auto", None, {}, False, None)
    assert RiskLevelEstimator(level_terms=1).level_terms is True and RiskLevelEstimator().level_terms is True
    assert RiskLevelEstimator(translation_limit=0.5).translation_limit == 0.5
    assert RiskLevelEstimator(structural_zeros={0: 1}).zero_mask(1, 2).dtype == bool
    for bad in (0.0, -1.0):
        with pytest.raises(InputError) as info:
            RiskLevelEstimator(translation_limit=bad)
        assert str(info.value) == f"translation_limit must be a number > 0 or None; got {bad!r}."
    # p: the shrunk rates with structural zeros set to 0, projected onto non-increasing rows with
    # weights observed + prior strength, and clipped to [0, 1]
    layout = _layout()
    events, observed = _level_counts(8)
    events[:, 1, 2] = 3.0  # events at an impossible level are not counted
    zero = est.zero_mask(2, 3)
    design = est.design(layout)
    p, kappa, target = est.estimate_p(events, observed, design)
    e0, n0 = np.where(zero, 0, events), np.where(zero, 0, observed)
    rate, weight, k, t = shrunk_rates(e0, n0, design, 3.0, zero, "all", 0.1)
    assert not np.allclose(rate, shrunk_rates(e0, n0, design, 3.0, zero, "all", None)[0])  # the limit binds
    expected = np.clip(np.where(zero, 0.0, isotonic_nonincreasing(np.where(zero, 0.0, rate), weight)), 0, 1)
    np.testing.assert_allclose(p, expected, rtol=1e-12)
    np.testing.assert_allclose(kappa, k, rtol=1e-12)
    np.testing.assert_allclose(target, t, rtol=1e-12)
    assert (target[:, 1, 2] == 0).all()
    assert (p[:, 1, 2] == 0).all() and (np.diff(p, axis=-1) <= 1e-15).all()


def test_common_and_per_cell_level_ratios_and_a_batch():
    # a strong level-by-u effect: with level_terms=False the common ratios are used all the same
    layout = _layout()
    rng = np.random.default_rng(11)
    observed = np.full((6, 1, 3), 400.0)
    drop = np.where(np.array([0, 0, 1, 1, 2, 2]) == 0, 0.2, 0.9)[:, None]
    rate = 0.3 * np.stack([np.ones(6), drop[:, 0], drop[:, 0] ** 2], axis=-1)[:, None, :]
    events = rng.binomial(400, rate).astype(float)
    factors = factor_matrices(layout, ["u"])
    common = shrunk_rates(events, observed, factors, 5.0, None, level_terms=False)[3]
    per_cell = shrunk_rates(events, observed, factors, 5.0, None, level_terms=True)[3]
    theta = level_risk_ratios(events, observed)
    base = shrunk_baselines(events, observed, np.broadcast_to(theta, events.shape), factors)
    np.testing.assert_allclose(common, np.clip(base[..., None] * theta, 0, 1), rtol=1e-12)
    assert np.abs(per_cell - common).max() > 0.01
    # by default the level terms the criterion keeps are used
    np.testing.assert_allclose(shrunk_rates(events, observed, factors, 5.0)[3], per_cell, rtol=1e-12)
    # a leading axis of two fits with a given prior strength: each fit as alone, kappa per fit
    e2, n2 = np.stack([events, events[::-1]]), np.stack([observed, observed])
    out = shrunk_rates(e2, n2, factors, 5.0, None, level_terms=False)
    assert out[2].shape == (2, 1, 3) and (out[2] == 5.0).all()
    for i in range(2):
        for a, b in zip(out, shrunk_rates(e2[i], n2[i], factors, 5.0, None, level_terms=False)):
            np.testing.assert_allclose(a[i], b, rtol=1e-12)


def test_collapsed_sweeps_with_more_combinations_than_an_integer_key_holds():
    # columns whose categories multiply past 2**62 are grouped by their rows of codes instead of
    # one integer key: the same fit as the sweeps on every cell
    from policy.estimation.loglinear import _collapsed_plan, _membership

    rng = np.random.default_rng(12)
    n, k = 40, 2 ** 16  # four columns of 2**16 categories besides the largest: 2**64 combinations
    codes = [rng.integers(0, 3, n), rng.integers(0, 2, n) * (k - 1), rng.integers(0, 2, n), rng.integers(0, 2, n) * 7,
             rng.integers(0, 2, n)]
    factors = [_membership(codes[0], 2 ** 17)] + [_membership(c, k) for c in codes[1:]]
    plan = _collapsed_plan(factors, n)
    assert plan.b == 0 and len(set(zip(*codes[1:]))) == plan.to_combos.shape[0]
    exposure = rng.uniform(5, 50, (n, 2))
    events = rng.poisson(exposure * 0.2).astype(float)
    for sweeps in (1, 3):
        np.testing.assert_allclose(loglinear_rates(events, exposure, factors, max_sweeps=sweeps, collapse=True),
                                   loglinear_rates(events, exposure, factors, max_sweeps=sweeps, collapse=False), rtol=1e-12)


def test_combinations_past_two_to_the_64_are_not_folded_together():
    # five columns besides the largest, of 2**16 (four) and 2 categories: 2**65 combinations. An
    # integer key (c1 2**49 + c2 2**33 + c3 2**17 + c4 2 + c5) would wrap modulo 2**64 in int64 and
    # fold c1 = 0 onto c1 = 2**15 (arithmetic by hand); the plan must keep them apart, and the
    # collapsed fit must equal the sweeps on every cell
    from policy.estimation.loglinear import _collapsed_plan, _membership

    rng = np.random.default_rng(5)
    n, k = 40, 2 ** 16
    c1 = rng.integers(0, 2, n) * 2 ** 15
    codes = [rng.integers(0, 3, n), c1, rng.integers(0, 2, n), rng.integers(0, 2, n), rng.integers(0, 2, n),
             rng.integers(0, 2, n)]
    factors = [_membership(codes[0], 2 ** 17)] + [_membership(c, k) for c in codes[1:5]] + [_membership(codes[5], 2)]
    combos = set(zip(*codes[1:]))
    folded = {(0,) + c[1:] for c in combos}
    assert len(folded) < len(combos)                        # the data do have combinations a wrapped key folds
    plan = _collapsed_plan(factors, n)
    assert plan.b == 0 and plan.to_combos.shape[0] == len(combos)
    exposure = rng.uniform(5, 50, (n, 2))
    events = rng.poisson(exposure * 0.2).astype(float)
    events[c1 > 0] = rng.poisson(exposure[c1 > 0] * 0.5)    # the two halves of c1 differ in rate
    for sweeps in (1, 3):
        np.testing.assert_allclose(loglinear_rates(events, exposure, factors, max_sweeps=sweeps, collapse=True),
                                   loglinear_rates(events, exposure, factors, max_sweeps=sweeps, collapse=False), rtol=1e-12)
