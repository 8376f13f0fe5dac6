"""The randomized arm's test of unconfoundedness and the least confounding it shows
(policy/estimation/arm_check.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable

from policy import CellTable, load_scenario
from policy.demo.quarrow import CONFOUNDED, DEMO, demo_scenario_path, simulate_cases, true_arm_rates
from policy.errors import InputError
from policy.estimation.arm_check import arm_check, cmh_by_level, discrepancy_at, gamma_lower_bound
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
    g = gamma_lower_bound(_table(events, observed))["gamma_lower"]
    assert 0.97 * gamma_true <= g <= gamma_true * 1.002


def test_gamma_lower_bound_is_one_when_arms_agree():
    events = np.array([[30, 31], [12, 12], [50, 48]])
    observed = np.array([[100, 100], [80, 80], [200, 200]])
    assert gamma_lower_bound(_table(events, observed))["gamma_lower"] == 1.0


def test_gamma_lower_bound_stays_below_the_simulators_truth(scenario):
    cells = _cells(scenario, 20_000, 21, CONFOUNDED)
    check = arm_check(cells)
    assert check.rejects
    assert 1.0 < check.gamma_lower <= _true_gamma(CONFOUNDED)


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
    truth = _true_gamma(CONFOUNDED)
    values = [arm_check(_cells(scenario, 20_000, 30_000 + s, CONFOUNDED)).gamma_lower for s in range(40)]
    assert np.mean(np.asarray(values) > truth) <= 0.05
    values = [arm_check(_cells(scenario, 20_000, 40_000 + s)).gamma_lower for s in range(40)]
    assert np.mean(np.asarray(values) > 1.0) <= 0.15
