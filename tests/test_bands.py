"""Sweep bands that contain their point: symmetric bootstrap intervals centred on the estimate.

Checks against something outside the project: numpy's percentile of hand-built absolute
deviations (the symmetric interval of Hall 1988, from memory) and the exact sweep's own point.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from policy.assessment.sweep import level_thresholds, ratio_axis, sweep_one
from policy.assessment.sweep.bands import centred_interval, sweep_bands
from policy.assessment.sweep.scenario_sweep import sweep_scenario
from policy.assessment.uncertainty import InProcess, percentile_interval
from policy.decision.costs import costs_from_scenario
from policy.estimation.strata import RiskLevelEstimator
from policy.running.pipeline import estimate


def test_centred_interval_contains_a_point_the_percentile_band_excludes():
    rng = np.random.default_rng(0)
    point = np.array([0.875, 0.5])
    # every replicate of the first figure above its point (an argmin figure that jumps)
    reps = np.stack([rng.uniform(0.935, 1.0, 400), rng.normal(0.5, 0.02, 400)], axis=1)
    plo, phi = percentile_interval(reps, 0.95)
    assert plo[0] > point[0]  # the percentile band lies beside its point
    lo, hi = centred_interval(point, reps, 0.95, 0.0, 1.0)
    assert (lo <= point).all() and (point <= hi).all()
    # half width: the 95% quantile of |replicate - point| (numpy's linear quantile; common practice)
    h = np.percentile(np.abs(reps - point), 95, axis=0)
    assert hi[0] == pytest.approx(min(point[0] + h[0], 1.0)) and lo[0] == pytest.approx(point[0] - h[0])
    assert hi[1] - lo[1] == pytest.approx(2 * h[1])
    # clipped to the range, NaN where the figure is mostly undefined, NaN without replicates
    reps2 = np.array([[np.nan], [np.nan], [0.2]])
    assert np.isnan(centred_interval(np.array([0.1]), reps2)[0]).all()
    assert np.isnan(centred_interval(np.array([0.1]), np.empty((0, 1)))[1]).all()


def test_sweep_bands_contain_the_exact_sweep(demo_scenario):
    result = sweep_scenario(demo_scenario, ["new_offense"], gammas=[], bounds=False, replicates=30, seed=3, workers=1,
                            grid_points=41)
    b = result.bands
    assert ((b.lower <= b.share + 1e-12) & (b.share <= b.upper + 1e-12)).all()
    ok = np.isfinite(b.thresholds_lower)
    assert ((b.thresholds_lower <= b.thresholds + 1e-12) & (b.thresholds <= b.thresholds_upper + 1e-12))[ok].all()
    table = b.band_table(result.sweep.axis)
    assert {"percentile_lower", "percentile_upper"} <= set(table.columns)
    assert "centred on the estimate" in b.label and "centred on the estimate" in str(result)
    assert b.meta["interval"] == b.label and "percentile" in b.meta["percentile_interval"]


# -- sweep_bands itself, called directly on the demo ---------------------------------------------
class CountingRunner(InProcess):
    """The in-process runner, counting the maps it is given (to see that a runner passed is used)
    and keeping what they return (the first task is the statistic on the data themselves)."""

    def __init__(self):
        super().__init__()
        self.maps = 0
        self.parts = None

    def map(self, *args, **kwargs):
        self.maps += 1
        self.parts = super().map(*args, **kwargs)
        return self.parts


@pytest.fixture(scope="module")
def demo_sweep(demo_scenario):
    cells, rl = estimate(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    axis = ratio_axis(rl, costs, "new_violent")
    return cells, rl, costs, sweep_one(rl, costs, axis, 0.0, 4 * axis.scenario_ratio), \
        RiskLevelEstimator.from_scenario(demo_scenario)


def test_sweep_bands_defaults_grid_clipping_and_labels(demo_sweep, capsys):
    cells, rl, costs, s, est = demo_sweep
    b = sweep_bands(cells, rl, costs, s, est, 10, 3, workers=1)
    assert capsys.readouterr().err == ""                            # no progress bar unless asked
    np.testing.assert_allclose(b.ratios, np.linspace(s.lo, s.hi, 200))
    np.testing.assert_allclose(b.share, s.lenient_share_at(b.ratios))
    np.testing.assert_array_equal(b.thresholds, np.clip(level_thresholds(s.envelope, rl.n_levels), s.lo, s.hi))
    assert b.meta["resampling"] == "poisson" and b.meta["outcomes"] == "model" and b.meta["seed"] == 3
    assert b.meta["replicates"] == 10 and b.label == "95% bootstrap interval centred on the estimate"
    assert b.meta["percentile_interval"] == "95% bootstrap percentile interval"
    # the intervals stay in the figures' ranges, and some reach their ends (the clip acts)
    assert (b.lower >= 0).all() and (b.upper <= 1).all() and (b.lower == 0).any()
    finite = np.isfinite(b.thresholds_lower)
    assert finite.any() and (b.thresholds_lower[finite] >= s.lo).all() and (b.thresholds_upper[finite] <= s.hi).all()
    assert (b.thresholds_lower == s.lo).any() and (b.thresholds_upper == s.hi).any()
    for lo, hi in ((b.percentile_lower, b.percentile_upper), (b.thresholds_percentile_lower, b.thresholds_percentile_upper)):
        ok = np.isfinite(lo)
        assert ok.any() and (lo[ok] <= hi[ok]).all()


def test_sweep_bands_follow_their_arguments(demo_sweep):
    cells, rl, costs, s, est = demo_sweep
    kw = dict(points=7, workers=1)
    b = sweep_bands(cells, rl, costs, s, est, 10, 3, **kw)
    again = sweep_bands(cells, rl, costs, s, est, 10, 3, **kw)
    np.testing.assert_array_equal(b.lower, again.lower)                 # the seed is used
    narrow = sweep_bands(cells, rl, costs, s, est, 10, 3, level=0.5, **kw)
    assert narrow.label == "50% bootstrap interval centred on the estimate"
    assert narrow.meta["percentile_interval"] == "50% bootstrap percentile interval"
    assert (narrow.lower >= b.lower - 1e-12).all() and (narrow.upper <= b.upper + 1e-12).all()
    assert (narrow.upper - narrow.lower < b.upper - b.lower).any()


def test_sweep_bands_resampling_outcomes_and_no_replicates(demo_sweep):
    cells, rl, costs, s, est = demo_sweep
    kw = dict(points=7, workers=1)
    b = sweep_bands(cells, rl, costs, s, est, 10, 3, **kw)
    cases = sweep_bands(cells, rl, costs, s, est, 10, 3, outcomes="cases", **kw)
    assert cases.meta["outcomes"] == "cases" and not np.array_equal(cases.lower, b.lower)
    multi = sweep_bands(cells, rl, costs, s, est, 10, 3, method="multinomial", **kw)
    assert multi.meta["resampling"] == "multinomial"
    none = sweep_bands(cells, rl, costs, s, est, 0, 3, **kw)
    assert none.label == "no interval (no replicates)" and np.isnan(none.lower).all()


def test_sweep_bands_runner_rule_columns_and_log_grid(demo_sweep):
    cells, rl, costs, s, est = demo_sweep
    kw = dict(points=7, workers=1)
    runner = CountingRunner()
    b = sweep_bands(cells, rl, costs, s, est, 10, 3, points=7, runner=runner)
    assert runner.maps == 1
    # the replicates' statistic applied to the unresampled counts re-estimates the risk levels with
    # the scenario's own model, so it gives the exact sweep's figures back
    on_data = runner.parts[0]
    np.testing.assert_allclose(on_data["share_lenient"][0], b.share, atol=1e-9)
    np.testing.assert_allclose(on_data["thresholds"][0], b.thresholds, rtol=1e-6)
    # one rule cell for everyone: its thresholds and their intervals
    axis = s.axis
    whole = sweep_one(rl, costs, axis, 0.5, 4 * axis.scenario_ratio, columns=[], scale="log")
    wb = sweep_bands(cells, rl, costs, whole, est, 10, 3, **kw)
    np.testing.assert_allclose(wb.ratios, np.geomspace(0.5, 4 * axis.scenario_ratio, 7))
    assert wb.thresholds.shape == wb.thresholds_lower.shape == (1, rl.n_levels - 1)


def test_sweep_bands_draw_their_progress_bar_on_standard_error_when_asked(demo_sweep, capsys, monkeypatch):
    # rich draws a progress bar only on a terminal; FORCE_COLOR makes its console treat the
    # captured standard error as one (rich's documented environment variable)
    cells, rl, costs, s, est = demo_sweep
    monkeypatch.setenv("FORCE_COLOR", "1")
    sweep_bands(cells, rl, costs, s, est, 2, 3, workers=1, points=5)
    assert capsys.readouterr().err == ""                            # off by default, even on a terminal
    sweep_bands(cells, rl, costs, s, est, 2, 3, workers=1, points=5, progress=True)
    captured = capsys.readouterr()
    assert captured.out == ""
    # the bar's lines without rich's terminal control sequences: the description, then the count
    lines = [line.strip() for line in re.split(r"[\r\n]", re.sub(r"\x1b\[[0-9;?]*[A-Za-z]", "", captured.err))]
    drawn = [line for line in lines if line]
    assert drawn and all(line.startswith("sweep: bootstrap replicates ") for line in drawn)
    assert "2/2" in drawn[-1]
