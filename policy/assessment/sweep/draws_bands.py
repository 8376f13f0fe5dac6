"""Bands of a one-ratio sweep from the draws of a risk-level table (no cases behind it).

Each draw of the table (:mod:`policy.estimation.draws`) plays the part of a bootstrap replicate
in :func:`policy.assessment.sweep.bands.sweep_bands`: its exact sweep of every rule cell is
recomputed at once (:func:`~policy.assessment.sweep.bands.lenient_replicates`, under the
table's fixed cell weights), and the lenient share's band and the thresholds' intervals are
the same centred intervals, with the percentile intervals over the draws beside them.
"""

from __future__ import annotations

import numpy as np

from policy.assessment.draws_compare import DRAW_CHUNK, DrawsResult
from policy.assessment.sweep.bands import SweepBands, centred_interval, lenient_replicates, level_thresholds
from policy.decision.costs import Costs
from policy.estimation.strata import RiskLevels

__all__ = ["draws_sweep_bands"]


def draws_sweep_bands(risk_levels: RiskLevels, costs: Costs, sweep, p_draws: np.ndarray, level: float = 0.95,
                      points: int = 200, seed: int = 0) -> SweepBands:
    """Bands on the lenient share and intervals on each rule cell's thresholds over the draws.

    Parameters
    ----------
    risk_levels : RiskLevels
        The point estimate the sweep was computed on.
    costs : Costs
    sweep : OneRatioSweep
    p_draws : ndarray of shape (n_draws, n_cells, J, L)
    level : float
    points : int
        Display grid of the band.
    seed : int
        Recorded only (draws need no random numbers).
    """
    space = np.geomspace if sweep.scale == "log" else np.linspace
    grid = space(sweep.lo, sweep.hi, points)
    index, groups = risk_levels.layout.rule_index(list(sweep.rule_cells.columns))
    w = np.asarray(risk_levels.weights, dtype=np.float64)
    parts = []
    for i in range(0, p_draws.shape[0], DRAW_CHUNK):
        p = np.asarray(p_draws[i:i + DRAW_CHUNK], dtype=np.float64)
        out = lenient_replicates(p, np.broadcast_to(w, (p.shape[0],) + w.shape), costs, sweep.axis, index, len(groups), grid)
        out["thresholds"] = np.clip(out["thresholds"], sweep.lo, sweep.hi)
        parts.append(out)
    reps = {k: np.concatenate([part[k] for part in parts], axis=0) for k in parts[0]}
    thresholds = np.clip(level_thresholds(sweep.envelope, len(sweep.level_values)), sweep.lo, sweep.hi)
    share = sweep.lenient_share_at(grid)
    result = DrawsResult({"share_lenient": share, "thresholds": thresholds}, reps, int(p_draws.shape[0]), seed,
                         "draws", level, False, "draws")
    p_lower, p_upper = result.interval("share_lenient")
    tp_lower, tp_upper = result.interval("thresholds")
    lower, upper = centred_interval(share, reps["share_lenient"], level, 0.0, 1.0)
    t_lower, t_upper = centred_interval(thresholds, reps["thresholds"], level, sweep.lo, sweep.hi)
    label = f"{level:.0%} interval over {result.n_replicates} draws centred on the estimate"
    meta = {**result.meta(), "interval": label, "percentile_interval": result.interval_label}
    return SweepBands(grid, share, lower, upper, thresholds, t_lower, t_upper, meta, label,
                      p_lower, p_upper, tp_lower, tp_upper)
