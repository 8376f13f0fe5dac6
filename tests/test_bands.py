"""Sweep bands that contain their point: symmetric bootstrap intervals centred on the estimate.

Checks against something outside the project: numpy's percentile of hand-built absolute
deviations (the symmetric interval of Hall 1988, from memory) and the exact sweep's own point.
"""

from __future__ import annotations

import numpy as np
import pytest

from policy.assessment.sweep.bands import centred_interval
from policy.assessment.sweep.scenario_sweep import sweep_scenario
from policy.assessment.uncertainty import percentile_interval


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
