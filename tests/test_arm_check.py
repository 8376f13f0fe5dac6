"""The randomized arm's test of unconfoundedness and the least confounding it shows
(policy/estimation/arm_check.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable

from policy import CellTable, load_scenario
from policy.demo.quarrow import CONFOUNDED, DEMO, demo_scenario_path, simulate_cases, true_arm_rates, true_group_rates
from policy.errors import InputError
from policy.estimation.arm_check import (_invert, arm_check, cmh_by_level, discrepancy_at, gamma_lower_bound,
                                         overlap_gamma, overlap_odds_ratios)
from policy.inputs.cells import CellLayout


@pytest.fixture(scope="module")
def scenario():
    return load_scenario(demo_scenario_path())


def _cells(scenario, n, seed, model=DEMO) -> CellTable:
    frame, _ = simulate_cases(n, seed=seed, model=model)
    return CellTable.from_cases(frame, scenario)


def _table(events: np.ndarray, observed: np.ndarray) -> CellTable:
    """A one-outcome, one-level cell table from arrays of shape (n_cells, 2)."""
    n = events.shape[0]
    frame = pd.DataFrame({"stratum": pd.Categorical(np.arange(n), ordered=True)})
    obs = observed.astype(np.int64)[:, :, None, None]
    return CellTable(CellLayout(frame), ("only",), ("outcome",), (0, 1), obs[:, :, 0, :].copy(), obs,
                     events.astype(np.int64)[:, :, None, None], source="a constructed table")


# -- the statistic against statsmodels -------------------------------------------------------------
def test_cmh_per_level_matches_statsmodels(scenario):
    # Reference: statsmodels StratifiedTable.test_null_odds (Mantel-Haenszel test, no continuity
    # correction) and oddsratio_pooled (the Mantel-Haenszel estimator) on the same 2 x 2 x K tables.
    cells = _cells(scenario, 20_000, 11, CONFOUNDED)
    for j in range(len(cells.outcomes)):
        res = cmh_by_level(cells.events[:, :, j, :], cells.observed[:, :, j, :])
        for d in range(len(cells.levels)):
            keep = res["used"][:, d]
            a = cells.events[keep, 1, j, d]
            n1 = cells.observed[keep, 1, j, d]
            c = cells.events[keep, 0, j, d]
            n0 = cells.observed[keep, 0, j, d]
            if keep.sum() == 0:
                assert np.isnan(res["statistic"][d])
                continue
            tables = np.stack([np.stack([a, n1 - a]), np.stack([c, n0 - c])]).astype(float)  # (2, 2, K)
            ref = StratifiedTable(tables)
            assert res["statistic"][d] == pytest.approx(ref.test_null_odds(correction=False).statistic, rel=1e-9)
            assert res["odds_ratio"][d] == pytest.approx(ref.oddsratio_pooled, rel=1e-9)
            assert res["contribution"][:, d].sum() == pytest.approx(res["statistic"][d], rel=1e-9)


def test_q_is_the_sum_over_levels_and_its_p_value_is_chi_square(scenario):
    cells = _cells(scenario, 8_000, 12)
    check = arm_check(cells, gamma=False)
    for j, key in enumerate(cells.outcomes):
        res = cmh_by_level(cells.events[:, :, j, :], cells.observed[:, :, j, :])
        row = check.tests.set_index("outcome").loc[key]
        assert row["statistic"] == pytest.approx(np.nansum(res["statistic"]))
        # T(1) is the same statistic computed through the noncentral law at odds ratio 1
        assert discrepancy_at(cells.events[:, :, j, :], cells.observed[:, :, j, :], 1.0)[0] == pytest.approx(row["statistic"], rel=1e-9)
        assert row["p_value"] == pytest.approx(stats.chi2.sf(row["statistic"], row["df"]))


def test_needs_a_randomized_arm(scenario):
    cells = _cells(scenario, 2_000, 3)
    no_arm = CellTable(cells.layout, cells.levels, cells.outcomes, (None,), cells.cases.sum(axis=1, keepdims=True),
                       cells.observed.sum(axis=1, keepdims=True), cells.events.sum(axis=1, keepdims=True),
                       source="a table without an arm")
    with pytest.raises(InputError, match="randomized arm"):
        arm_check(no_arm)
    with pytest.raises(InputError, match="level"):
        arm_check(cells, alpha=1.5)


# -- the simulator's truth ---------------------------------------------------------------------------
def test_simulator_arms_agree_exactly_without_confounding_and_differ_with_it():
    _, rates, _ = true_arm_rates(DEMO)
    ok = np.isfinite(rates).all(axis=1)
    assert np.allclose(rates[:, 0][ok], rates[:, 1][ok], rtol=0, atol=1e-12)
    _, rates, _ = true_arm_rates(CONFOUNDED)
    assert np.nanmax(np.abs(rates[:, 1] - rates[:, 0])) > 0.05


def _true_gamma(model) -> float:
    """sqrt of the largest between-arm odds ratio of any cell x outcome x level in the exact truth."""
    _, r, _ = true_arm_rates(model)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = (r[:, 1] / (1 - r[:, 1])) / (r[:, 0] / (1 - r[:, 0]))
        g = np.sqrt(np.maximum(ratio, 1 / ratio))
    return float(np.nanmax(np.where(np.isfinite(g), g, np.nan)))


# -- Gamma_low on tables whose answer is known --------------------------------------------------------
@pytest.mark.parametrize("gamma_true", [1.5, 2.0, 3.0])
def test_gamma_lower_bound_recovers_a_known_odds_ratio_from_below(gamma_true):
    # every stratum's two arms have odds ratio exactly gamma_true^2 (the largest a sensitivity value
    # gamma_true allows); with many records the bound approaches gamma_true from below
    rng = np.random.default_rng(5)
    r0 = rng.uniform(0.1, 0.4, 30)
    odds1 = r0 / (1 - r0) * gamma_true ** 2
    r1 = odds1 / (1 + odds1)
    n = 200_000
    events = np.stack([np.round(r0 * n), np.round(r1 * n)], axis=1)
    observed = np.full((30, 2), n)
    g = gamma_lower_bound(_table(events, observed), overlap=False)["gamma_lower"]
    assert 0.97 * gamma_true <= g <= gamma_true * 1.002
    # every case of each arm at the one level: the sensitivity intervals are the rates themselves,
    # so no Gamma reconciles arms that differ
    assert gamma_lower_bound(_table(events, observed))["gamma_lower"] == np.inf


def _two_level_table(events: np.ndarray, observed: np.ndarray, shares: np.ndarray, cases: int) -> CellTable:
    """Two levels; outcome records at the first only, each arm's share of cases there ``shares`` (n, 2)."""
    n = events.shape[0]
    frame = pd.DataFrame({"stratum": pd.Categorical(np.arange(n), ordered=True)})
    first = np.round(shares * cases).astype(np.int64)
    case_counts = np.stack([first, cases - first], axis=2)
    obs = np.zeros((n, 2, 1, 2), dtype=np.int64)
    ev = np.zeros((n, 2, 1, 2), dtype=np.int64)
    obs[:, :, 0, 0], ev[:, :, 0, 0] = observed, events
    return CellTable(CellLayout(frame), ("first", "second"), ("outcome",), (0, 1), case_counts, obs, ev,
                     source="a constructed table")


def _solve_rate(p: float, pi: float, k: float) -> float:
    """r with pi r + (1 - pi) S_k(r) = p, by scipy's Brent root finder (an independent reference)."""
    from scipy.optimize import brentq

    return brentq(lambda r: pi * r + (1 - pi) * (k * r / (k * r + 1 - r)) - p, 0.0, 1.0, xtol=1e-15)


def test_invert_matches_a_root_finder():
    rng = np.random.default_rng(3)
    for _ in range(200):
        p, pi, k = rng.uniform(0.01, 0.95), rng.uniform(0, 1), np.exp(rng.uniform(-2, 2))
        assert _invert(np.array(p), np.array(pi), k) == pytest.approx(_solve_rate(p, pi, k), abs=1e-10)


def test_overlap_odds_ratios_reduce_to_gamma_squared_without_shares_and_to_one_with_all_cases():
    events = np.array([[[30], [40]], [[12], [9]]], dtype=float)
    observed = np.array([[[100], [100]], [[80], [70]]], dtype=float)
    up, down = overlap_odds_ratios(events, observed, np.zeros((2, 2, 1)), 2.0)
    assert up == pytest.approx(4.0) and down == pytest.approx(0.25)
    up, down = overlap_odds_ratios(events, observed, np.ones((2, 2, 1)), 2.0)
    assert np.all(up == 1.0) and np.all(down == 1.0)
    up, down = overlap_odds_ratios(events, observed, np.full((2, 2, 1), 0.5), 2.0)
    assert np.all((up > 1) & (up < 4)) and np.all((down < 1) & (down > 0.25))


@pytest.mark.parametrize("gamma_true", [1.3, 2.0])
def test_overlap_gamma_lower_bound_recovers_a_known_boundary_from_below(gamma_true):
    # arm rates built (with scipy's root finder) so that the two arms' sensitivity intervals at
    # gamma_true just meet: arm 1's lower end at the same p as arm 0's upper end
    rng = np.random.default_rng(8)
    k = 30
    p = rng.uniform(0.1, 0.4, k)
    shares = rng.uniform(0.3, 0.8, (k, 2))
    r0 = np.array([_solve_rate(pp, s, gamma_true) for pp, s in zip(p, shares[:, 0])])
    r1 = np.array([_solve_rate(pp, s, 1 / gamma_true) for pp, s in zip(p, shares[:, 1])])
    n = 400_000
    records = np.round(shares * n).astype(np.int64)
    events = np.round(np.stack([r0, r1], axis=1) * records)
    table = _two_level_table(events, records, shares, n)
    g = gamma_lower_bound(table)["gamma_lower"]
    assert 0.97 * gamma_true <= g <= gamma_true * 1.002
    # the odds-ratio consequence alone gives a weaker (smaller) value on the same table
    assert gamma_lower_bound(table, overlap=False)["gamma_lower"] < g
    # and the population figure of the same rates is gamma_true itself
    rates = np.full((k, 2, 1, 2), np.nan)   # no outcome records at the second level
    rates[:, :, 0, 0] = np.stack([r0, r1], axis=1)
    pop_shares = np.stack([shares, 1 - shares], axis=2)
    assert overlap_gamma(rates, pop_shares) == pytest.approx(gamma_true, rel=1e-4)


def test_population_overlap_gamma_lies_between_one_and_the_simulators_gamma():
    # exact rates: without confounding the arms' intervals meet at Gamma = 1; with it, they meet
    # at a Gamma above 1 and at most the Gamma the simulator satisfies within each arm (its groups'
    # largest odds ratio of a potential outcome, computed from the enumerated population)
    _, rates, shares = true_arm_rates(DEMO)
    assert overlap_gamma(rates, shares) == 1.0
    _, rates, shares = true_arm_rates(CONFOUNDED)
    _, _, truth = true_group_rates(CONFOUNDED)
    low = overlap_gamma(rates, shares)
    assert 1.0 < low <= truth


def test_gamma_lower_bound_is_one_when_arms_agree():
    events = np.array([[30, 31], [12, 12], [50, 48]])
    observed = np.array([[100, 100], [80, 80], [200, 200]])
    assert gamma_lower_bound(_table(events, observed))["gamma_lower"] == 1.0


def test_gamma_lower_bound_stays_below_the_simulators_truth(scenario):
    cells = _cells(scenario, 20_000, 21, CONFOUNDED)
    check = arm_check(cells)
    assert check.rejects
    assert 1.0 < check.gamma_lower <= true_group_rates(CONFOUNDED)[2]
    assert check.gamma_lower >= gamma_lower_bound(cells, overlap=False)["gamma_lower"]


# -- size and power ------------------------------------------------------------------------------------
def test_size_and_power_quick(scenario):
    # quick version of the slow checks below: few data sets, a wide band. P(>= 3 of 8 rejections)
    # at a true level of 5% is below 0.6%.
    false = sum(arm_check(_cells(scenario, 20_000, 500 + s), gamma=False).rejects for s in range(8))
    assert false <= 2
    hits = sum(arm_check(_cells(scenario, 20_000, 600 + s, CONFOUNDED), gamma=False).rejects for s in range(4))
    assert hits >= 3


@pytest.mark.slow
def test_size_over_200_data_sets(scenario):
    # each outcome kind's test at 5%, and the Bonferroni verdict, on 200 data sets that satisfy the
    # assumption: rejection rates within 3 Monte Carlo standard errors of 5% (sd = 1.5 points)
    reps = 200
    per_kind = np.zeros(3)
    verdict = 0
    for s in range(reps):
        check = arm_check(_cells(scenario, 20_000, 10_000 + s), gamma=False)
        per_kind += (check.tests["p_value"] < 0.05).to_numpy()
        verdict += check.rejects
    mc = 3 * np.sqrt(0.05 * 0.95 / reps)
    assert np.all(np.abs(per_kind / reps - 0.05) <= mc), per_kind / reps
    assert verdict / reps <= 0.05 + mc


@pytest.mark.slow
def test_power_on_confounded_data_of_the_demos_size(scenario):
    reps = 60
    hits = sum(arm_check(_cells(scenario, 20_000, 20_000 + s, CONFOUNDED), gamma=False).rejects for s in range(reps))
    assert hits / reps > 0.9


@pytest.mark.slow
def test_gamma_lower_bound_rarely_exceeds_the_truth(scenario):
    # a lower confidence bound of the least Gamma the arms allow (the population figure of the
    # exact rates), so at most about 5% above it, and never above the simulator's own Gamma
    _, rates, shares = true_arm_rates(CONFOUNDED)
    least = overlap_gamma(rates, shares)
    values = np.asarray([arm_check(_cells(scenario, 20_000, 30_000 + s, CONFOUNDED)).gamma_lower for s in range(40)])
    assert np.mean(values > least) <= 0.1 and np.all(values <= true_group_rates(CONFOUNDED)[2])
    assert np.mean(values > _true_gamma(CONFOUNDED)) <= 0.05
    values = [arm_check(_cells(scenario, 20_000, 40_000 + s)).gamma_lower for s in range(40)]
    assert np.mean(np.asarray(values) > 1.0) <= 0.15
