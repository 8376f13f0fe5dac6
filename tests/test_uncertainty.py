"""The bootstrap engine: agreement with scipy, the resampling schemes, determinism (coverage: tests/test_coverage.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from policy import load_scenario
from policy.inputs.cells import CellTable
from policy.demo.quarrow import demo_scenario_path, simulate_cases
from policy.errors import InputError
from policy.inputs.scenario import Scenario
from policy.estimation.strata import RiskLevelEstimator
from policy.assessment.uncertainty import (
    CHUNK,
    CountResampler,
    InProcess,
    LocalProcesses,
    OnRiskLevels,
    bootstrap,
    bootstrap_risk_levels,
    percentile_interval,
)

from .conftest import write_scenario


def _one_cell_scenario() -> Scenario:
    return Scenario.from_dict({
        "scenario": {"title": "one cell"},
        "data": {"simulate": 1},
        "columns": {"decision": "decision"},
        "decisions": [{"value": "0", "label": "lenient", "cost": 0.0}, {"value": "1", "label": "middle", "cost": 1.0},
                      {"value": "2", "label": "harsh", "cost": 2.0}],
        "outcomes": [{"key": "fta", "label": "failure to appear", "cost": 1.0},
                     {"key": "new", "label": "new offense", "cost": 1.0}],
        "costs": {"unit": "points"},
        "cells": {"covariates": ["site"], "rule": ["site"]},
    })


def _one_cell(n: int, seed: int):
    rng = np.random.default_rng(seed)
    decision = rng.choice(3, size=n, p=[0.5, 0.3, 0.2])
    fta = (rng.random(n) < 0.2).astype(float)
    new = np.where(rng.random(n) < 0.5, fta, (rng.random(n) < 0.1).astype(float))  # correlated with fta
    fta[rng.random(n) < 0.1] = np.nan
    frame = pd.DataFrame({"site": "one", "decision": decision.astype(str), "fta": pd.array(fta, dtype="Int64"),
                          "new": pd.array(new, dtype="Int64")})
    return frame, CellTable.from_cases(frame, _one_cell_scenario())


def _mean_level(batch):
    levels = np.arange(batch.cases.shape[-1])
    cases = batch.cases.sum(axis=(1, 2))
    return {"mean": (cases * levels).sum(-1) / cases.sum(-1)}


def test_percentile_interval_of_a_mean_matches_scipy_bootstrap():
    # independent reference: scipy.stats.bootstrap(method="percentile") on the case values
    # (SciPy reference guide, scipy.stats.bootstrap). With one cell and no arm, redrawing the
    # cell's cases (multinomial) is the ordinary case bootstrap, so the two intervals estimate the
    # same quantiles; they differ only by Monte Carlo error.
    frame, cells = _one_cell(400, 1)
    values = frame["decision"].astype(int).to_numpy()
    B = 20_000
    ours = bootstrap(cells, _mean_level, B, seed=3, method="multinomial", runner=InProcess())
    ref = stats.bootstrap((values,), np.mean, n_resamples=B, method="percentile", random_state=4, vectorized=True)
    se = values.std(ddof=1) / np.sqrt(len(values))
    assert ours.point["mean"] == pytest.approx(values.mean())
    lo, hi = ours.interval("mean")
    # Monte Carlo sd of a 2.5% bootstrap quantile with B draws is about
    # sqrt(0.025 * 0.975 / B) / phi(1.96) * se = 0.019 se; the difference of two is 0.027 se (common practice)
    assert abs(lo - ref.confidence_interval.low) < 0.12 * se
    assert abs(hi - ref.confidence_interval.high) < 0.12 * se
    # the Poisson bootstrap approximates the same distribution (Hanley and MacGibbon 2006)
    pois = bootstrap(cells, _mean_level, B, seed=3, method="poisson", runner=InProcess())
    plo, phi = pois.interval("mean")
    assert abs(plo - ref.confidence_interval.low) < 0.2 * se and abs(phi - ref.confidence_interval.high) < 0.2 * se


def test_percentile_interval_is_numpy_percentile_and_skips_undefined_replicates():
    x = np.random.default_rng(0).normal(size=(1000, 3))
    x[:10, 1] = np.nan
    x[:700, 2] = np.nan
    lo, hi = percentile_interval(x, 0.9)
    np.testing.assert_allclose(lo[0], np.percentile(x[:, 0], 5))
    np.testing.assert_allclose(hi[1], np.percentile(x[10:, 1], 95))
    assert np.isnan(lo[2]) and np.isnan(hi[2])  # undefined in most replicates: no interval


def test_poisson_counts_have_poisson_moments_and_keep_cases_whole():
    _, cells = _one_cell(2_000, 2)
    rs = CountResampler(cells, "poisson")
    batch = rs.draw(np.random.SeedSequence(1).spawn(4000))
    # a slot with n cases becomes Poisson(n): mean n, variance n (common practice)
    n = cells.cases[0, 0]
    np.testing.assert_allclose(batch.cases[:, 0, 0].mean(axis=0), n, rtol=0.02)
    np.testing.assert_allclose(batch.cases[:, 0, 0].var(axis=0), n, rtol=0.1)
    assert (batch.observed <= batch.cases[:, :, :, None, :]).all() and (batch.events <= batch.observed).all()
    # joint states: events of both kinds in one replicate come from the same resampled cases, so
    # the replicate correlation of the two event counts matches the data's within-case correlation
    both = batch.events[:, 0, 0, :, :].sum(axis=-1)
    assert np.corrcoef(both[:, 0], both[:, 1])[0, 1] > 0.3


def test_multinomial_keeps_every_cell_and_arm_size(demo_cells):
    rs = CountResampler(demo_cells, "multinomial")
    batch = rs.draw(np.random.SeedSequence(2).spawn(20))
    np.testing.assert_array_equal(batch.cases.sum(axis=-1), np.broadcast_to(demo_cells.cases.sum(axis=-1), batch.cases.shape[:-1]))
    assert not (batch.cases == demo_cells.cases).all()


def test_counts_table_fallback_and_model_outcomes_keep_margins(demo_cells, demo_scenario):
    counts = CellTable.from_counts(demo_cells.counts_frame(demo_scenario), demo_scenario)
    assert counts.state_counts is None
    rs = CountResampler(counts, "poisson")
    assert not rs.joint
    batch = rs.draw(np.random.SeedSequence(3).spawn(400))
    np.testing.assert_allclose(batch.cases.mean(axis=0).sum(), counts.cases.sum(), rtol=0.002)
    np.testing.assert_allclose(batch.events.mean(axis=0).sum(axis=(0, 1, 3)), counts.events.sum(axis=(0, 1, 3)), rtol=0.02)
    assert (batch.events <= batch.observed).all() and (batch.observed <= batch.cases[:, :, :, None, :]).all()
    # model-based outcomes: events follow the given probabilities
    p = np.full((counts.n_cells, 3, 3), 0.25)
    model = CountResampler(demo_cells, "poisson", outcome_model=p).draw(np.random.SeedSequence(4).spawn(200))
    assert model.events.sum() / model.observed.sum() == pytest.approx(0.25, abs=0.003)


@pytest.fixture(scope="module")
def demo_cells():
    scenario = load_scenario(demo_scenario_path())
    frame, _ = simulate_cases(20_000, seed=scenario.seed)
    return CellTable.from_cases(frame, scenario)


def _safe_share(p, batch):
    w = batch.weights
    return {"safe": (w[..., None] * (1 - p[..., :, 0])).sum(axis=1) / w.sum(axis=1)[:, None]}


def test_same_seed_same_bits_whatever_the_workers(demo_cells, demo_scenario):
    est = RiskLevelEstimator.from_scenario(demo_scenario)
    stat = OnRiskLevels(_safe_share, est, est.design(demo_cells.layout, 3))
    B = 2 * CHUNK + 3  # an incomplete last chunk too
    one = bootstrap(demo_cells, stat, B, seed=11, runner=InProcess())
    two = bootstrap(demo_cells, stat, B, seed=11, runner=LocalProcesses(2))
    again = bootstrap(demo_cells, stat, B, seed=11, workers=1)
    assert one.replicates["safe"].tobytes() == two.replicates["safe"].tobytes() == again.replicates["safe"].tobytes()
    other = bootstrap(demo_cells, stat, B, seed=12, runner=InProcess())
    assert not np.array_equal(one.replicates["safe"], other.replicates["safe"])
    assert one.meta()["replicates"] == B and one.meta()["seed"] == 11
    # the point figure is the estimator's own on the data
    rl = est.fit(demo_cells).risk_levels_
    np.testing.assert_allclose(one.point["safe"], (rl.weights[:, None] * rl.q[:, :, 0]).sum(0) / rl.weights.sum(), rtol=1e-12)
    # the entry point for later stages: model-based by default, recorded in the result
    model = bootstrap_risk_levels(demo_cells, _safe_share, est, 30, seed=11, runner=InProcess())
    assert model.outcomes == "model" and model.meta()["outcomes"] == "model"
    np.testing.assert_allclose(model.point["safe"], one.point["safe"], rtol=1e-12)
    lo, hi = model.interval("safe")
    assert (lo < model.point["safe"]).all() and (model.point["safe"] < hi).all()


@pytest.mark.parametrize("entry, message", [
    ("replicates = -1", "replicates must be >= 0"),
    ("interval = 1.5", "interval must lie strictly between 0 and 1"),
    ('resampling = "jackknife"', "resampling must be one of: poisson, multinomial"),
    ('outcomes = "both"', "outcomes must be one of: model, cases"),
    ("replicate = 10", "unknown key 'replicate' in \\[uncertainty\\]"),
])
def test_uncertainty_section_errors(tmp_path, entry, message):
    path = write_scenario(tmp_path)
    path.write_text(path.read_text() + f"\n[uncertainty]\n{entry}\n")
    with pytest.raises(InputError, match=message):
        load_scenario(path)


def test_a_chunk_scored_in_small_batches_agrees_and_repeats_its_bits(demo_cells, demo_scenario, monkeypatch):
    # tables with many cells score a chunk in several batches (memory): every replicate agrees
    # with scoring the whole chunk at once to rounding (sums over a batch axis of another length
    # may round differently), for the comparison's whole statistic too, and the batch size
    # depends only on the table, so a run repeats its bits
    import policy.assessment.uncertainty as uncertainty
    from policy.assessment.compare import ComparisonStatistic
    from policy.decision.costs import costs_from_scenario

    est = RiskLevelEstimator.from_scenario(demo_scenario)
    rl = est.fit(demo_cells).risk_levels_
    statistics = [OnRiskLevels(_safe_share, est, est.design(demo_cells.layout, 3)),
                  ComparisonStatistic(est, est.design(demo_cells.layout, len(demo_cells.levels)),
                                      costs_from_scenario(demo_scenario, rl), demo_cells.layout, [],
                                      demo_cells.has_arm, len(demo_cells.arms))]
    B = CHUNK + 4
    whole = [bootstrap(demo_cells, s, B, seed=5, runner=InProcess(), outcome_model=rl.p) for s in statistics]
    monkeypatch.setattr(uncertainty, "BATCH_BYTES", 3 * uncertainty.CountResampler(demo_cells).bytes_per_replicate)
    batched = [bootstrap(demo_cells, s, B, seed=5, runner=InProcess(), outcome_model=rl.p) for s in statistics]
    again = bootstrap(demo_cells, statistics[1], B, seed=5, runner=InProcess(), outcome_model=rl.p)
    for a, b in zip(whole, batched):
        assert a.replicates.keys() == b.replicates.keys()
        for k in a.replicates:
            np.testing.assert_allclose(np.asarray(b.replicates[k], dtype=float), np.asarray(a.replicates[k], dtype=float),
                                       rtol=1e-9, atol=1e-12, err_msg=k)
    for k in again.replicates:
        assert np.asarray(again.replicates[k]).tobytes() == np.asarray(batched[1].replicates[k]).tobytes(), k
