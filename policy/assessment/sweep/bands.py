"""Bootstrap bands of a one-ratio sweep: each replicate's thresholds and shares, re-estimated.

The lenient share and the thresholds are argmin figures: they jump when a rule cell's optimal
level flips, and their bootstrap distribution can sit wholly on one side of the estimate (a
percentile band read "87.5% (93.5% to 100.0%)"). The bands are therefore **symmetric intervals
centred on the estimate** (Hall 1988): with theta the point figure and theta*_b the replicates,

    h = the level-quantile of |theta*_b - theta|,   interval = [theta - h, theta + h]

(clipped to the figure's range). It contains its point by construction; where the replicates
sit on one side of the estimate it is wider than the percentile band, which the tables keep
beside it.

References
----------
Hall, P. (1988). On symmetric bootstrap confidence intervals. Journal of the Royal Statistical
Society, Series B 50(1), 35-45 (from memory).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from policy.decision.costs import Costs
from policy.decision.solve import aggregation_matrix
from policy.estimation.strata import RiskLevels
from policy.estimation.world import outcome_world
from typing import TYPE_CHECKING

from policy.assessment.sweep.axes import RatioAxis, _plain_groups
from policy.assessment.sweep.envelope import Envelope, lower_envelope

if TYPE_CHECKING:  # annotations only: the sweep result is built before its bands
    from policy.assessment.sweep.one_ratio import OneRatioSweep


# ----------------------------------------------------------------------------------------------
# Replicates (bootstrap): the same exact answers for many re-estimated risk levels at once
# ----------------------------------------------------------------------------------------------
def level_thresholds(env: Envelope, n_levels: int) -> np.ndarray:
    """For each row and level d < L - 1, the ratio above which the optimal level is harsher than d.

    Returns
    -------
    ndarray of shape (n, L - 1)
        t_d = the first breakpoint after which the level exceeds d (+inf if it never does, -inf
        if it already does at r = -inf). For an outcome-cost sweep, where levels only grow,
        level(r) > d exactly for r > t_d, so t_0 is where leniency ends.
    """
    n = env.n
    out = np.full((n, n_levels - 1), np.inf)
    out[env.levels[:, :1] > np.arange(n_levels - 1)[None, :]] = -np.inf
    for s in range(env.breaks.shape[1] - 1, -1, -1):
        real = s < env.count
        after = env.levels[:, s + 1]
        before = np.maximum.accumulate(env.levels[:, : s + 1], axis=1)[:, -1]
        for d in range(n_levels - 1):
            crosses = real & (before <= d) & (after > d)
            out[crosses, d] = env.breaks[crosses, s]
    return out


def lenient_replicates(p: np.ndarray, weights: np.ndarray, costs: Costs, axis: RatioAxis, index: np.ndarray,
                       n_groups: int, ratios: np.ndarray) -> dict[str, np.ndarray]:
    """Share of cases for which leniency is optimal on a grid, and each rule cell's level
    thresholds, for a batch of risk-level replicates at once.

    Parameters
    ----------
    p : ndarray of shape (b, n_cells, J, L)
        Outcome probabilities of each replicate.
    weights : ndarray of shape (b, n_cells) or (n_cells,)
        Cases per cell in each replicate.
    costs : Costs
        The scenario's costs (the swept outcome's cost is replaced along the ratio).
    axis : RatioAxis
    index : ndarray of shape (n_cells,)
        Rule cell of each cell; ``n_groups`` rule cells.
    ratios : ndarray of shape (P,)
        Grid on which the lenient share is evaluated (exactly, at each point).

    Returns
    -------
    dict
        ``share_lenient`` (b, P) and ``thresholds`` (b, n_groups, L - 1) (see
        :func:`level_thresholds`): the same numbers :func:`sweep_one` gives for each replicate,
        from one lower envelope over all replicates' rule cells.
    """
    p = np.asarray(p, dtype=np.float64)
    b, n, J, L = p.shape
    w = np.broadcast_to(np.asarray(weights, dtype=np.float64), (b, n))
    fixed = costs.outcome.astype(np.float64).copy()
    fixed[axis.outcome_index] = 0.0
    base = costs.decision[None] + np.matmul(fixed, p)                 # (b, n, L)
    slope = axis.reference_cost * p[:, :, axis.outcome_index, :]       # (b, n, L)
    S = aggregation_matrix(index, n_groups, np.ones(n))
    A = (S @ (w[..., None] * base).transpose(1, 0, 2).reshape(n, b * L)).reshape(n_groups, b, L)
    B = (S @ (w[..., None] * slope).transpose(1, 0, 2).reshape(n, b * L)).reshape(n_groups, b, L)
    env = lower_envelope(A.transpose(1, 0, 2).reshape(b * n_groups, L), B.transpose(1, 0, 2).reshape(b * n_groups, L))
    W = (S @ w.T).T                                                    # (b, n_groups)
    thresholds = level_thresholds(env, L).reshape(b, n_groups, L - 1)
    lenient = env.level_at(np.asarray(ratios, dtype=np.float64)).reshape(len(ratios), b, n_groups) == 0
    share = np.einsum("pbg,bg->bp", lenient, W) / W.sum(axis=1)[:, None]
    return {"share_lenient": share, "thresholds": thresholds}


class LenientReplicates:
    """A picklable statistic for the bootstrap (:class:`policy.assessment.uncertainty.OnRiskLevels`):
    ``(p, batch) -> lenient_replicates(...)`` with the replicate's cell weights, the thresholds
    clipped to the range [lo, hi] (lo: harsher already at lo; hi: not harsher before hi)."""

    def __init__(self, costs: Costs, axis: RatioAxis, index: np.ndarray, n_groups: int, ratios: np.ndarray,
                 lo: float, hi: float):
        self.costs, self.axis, self.index, self.n_groups = costs, axis, index, n_groups
        self.ratios = np.asarray(ratios, dtype=np.float64)
        self.lo, self.hi = float(lo), float(hi)

    def __call__(self, p: np.ndarray, batch) -> dict[str, np.ndarray]:
        out = lenient_replicates(p, batch.weights, self.costs, self.axis, self.index, self.n_groups, self.ratios)
        out["thresholds"] = np.clip(out["thresholds"], self.lo, self.hi)
        return out


def centred_interval(point: np.ndarray, replicates: np.ndarray, level: float = 0.95, lo: float = -np.inf,
                     hi: float = np.inf) -> tuple[np.ndarray, np.ndarray]:
    """Symmetric bootstrap interval centred on the point figure (module notes), clipped to [lo, hi].

    Parameters
    ----------
    point : ndarray of shape S
    replicates : ndarray of shape (B,) + S
    level : float

    Returns
    -------
    lower, upper : ndarray of shape S
        NaN where the figure is undefined in more than half of the replicates, or B = 0.
    """
    point = np.asarray(point, dtype=np.float64)
    reps = np.asarray(replicates, dtype=np.float64)
    if reps.shape[0] == 0:
        return np.full(point.shape, np.nan), np.full(point.shape, np.nan)
    dev = np.abs(reps - point)
    finite = np.isfinite(dev)
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="All-NaN slice encountered", category=RuntimeWarning)
        h = np.nanpercentile(np.where(finite, dev, np.nan), 100 * level, axis=0)
    enough = finite.sum(axis=0) * 2 > reps.shape[0]
    lower = np.where(enough, np.clip(point - h, lo, hi), np.nan)
    upper = np.where(enough, np.clip(point + h, lo, hi), np.nan)
    return lower, upper


@dataclass(frozen=True)
class SweepBands:
    """Bootstrap percentile intervals of a one-ratio sweep.

    Attributes
    ----------
    ratios : ndarray of shape (P,)
        Display grid of the band.
    share, lower, upper : ndarray of shape (P,)
        Share of cases for which leniency is optimal (point estimate, exact) and its interval.
    thresholds, thresholds_lower, thresholds_upper : ndarray of shape (n_groups, L - 1)
        Each rule cell's level thresholds (:func:`level_thresholds`) clipped to the range, and
        their intervals.
        The intervals are centred on their points (:func:`centred_interval`).
    meta : dict
        Replicates, seed, resampling, outcome draws, interval (:meth:`BootstrapResult.meta`).
    label : str
        E.g. "95% bootstrap interval centred on the estimate".
    percentile_lower, percentile_upper : ndarray of shape (P,)
        The percentile band of the lenient share, for reference (it can exclude the point).
    thresholds_percentile_lower, thresholds_percentile_upper : ndarray of shape (n_groups, L - 1)
    """

    ratios: np.ndarray
    share: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    thresholds: np.ndarray
    thresholds_lower: np.ndarray
    thresholds_upper: np.ndarray
    meta: dict
    label: str
    percentile_lower: np.ndarray | None = None
    percentile_upper: np.ndarray | None = None
    thresholds_percentile_lower: np.ndarray | None = None
    thresholds_percentile_upper: np.ndarray | None = None

    def band_table(self, axis: RatioAxis) -> pd.DataFrame:
        """``ratio``, ``cost``, ``share_lenient``, ``lower``, ``upper`` (centred on the share),
        ``percentile_lower``, ``percentile_upper``."""
        nan = np.full(self.share.shape, np.nan)
        return pd.DataFrame({"ratio": self.ratios, "cost": self.ratios * axis.reference_cost,
                             "share_lenient": self.share, "lower": self.lower, "upper": self.upper,
                             "percentile_lower": nan if self.percentile_lower is None else self.percentile_lower,
                             "percentile_upper": nan if self.percentile_upper is None else self.percentile_upper})

    def threshold_table(self, sweep: "OneRatioSweep") -> pd.DataFrame:
        """One row per rule cell and level d < L - 1: the rule columns, ``cases``,
        ``harsher_than`` (label of level d), ``ratio`` (above it the optimal level is harsher than
        d; clipped to the range), ``lower``, ``upper``, and the same in the cost unit."""
        g, d = np.indices(self.thresholds.shape).reshape(2, -1)
        out = _plain_groups(sweep.rule_cells).iloc[g].reset_index(drop=True)
        out["cases"] = sweep.weights[g]
        out["harsher_than"] = np.asarray(sweep.level_labels, dtype=object)[d]
        for name, values in (("ratio", self.thresholds), ("lower", self.thresholds_lower), ("upper", self.thresholds_upper)):
            out[name] = values.reshape(-1)
        c = sweep.axis.reference_cost
        out["cost"], out["cost_lower"], out["cost_upper"] = out["ratio"] * c, out["lower"] * c, out["upper"] * c
        for name, values in (("percentile_lower", self.thresholds_percentile_lower),
                             ("percentile_upper", self.thresholds_percentile_upper)):
            out[name] = np.nan if values is None else values.reshape(-1)
        return out


def sweep_bands(cells, risk_levels: RiskLevels, costs: Costs, sweep: "OneRatioSweep", estimator, replicates: int,
                seed: int | None, method: str = "poisson", level: float = 0.95, outcomes: str = "model",
                points: int = 200, workers: int | None = None, runner=None, progress: bool = False) -> SweepBands:
    """Bootstrap bands on the lenient share and intervals on each rule cell's thresholds.

    Each replicate resamples the cell counts (:func:`policy.assessment.uncertainty.bootstrap`),
    re-estimates the risk levels with ``estimator``, and recomputes the exact sweep of all its
    rule cells at once (:func:`lenient_replicates`); the intervals are symmetric intervals
    centred on the exact sweep's figures (:func:`centred_interval`), with the percentile
    intervals beside them.
    """
    from policy.assessment.uncertainty import OnRiskLevels, bootstrap

    space = np.geomspace if sweep.scale == "log" else np.linspace
    grid = space(sweep.lo, sweep.hi, points)
    index, groups = risk_levels.layout.rule_index(list(sweep.rule_cells.columns))
    statistic = OnRiskLevels(LenientReplicates(costs, sweep.axis, index, len(groups), grid, sweep.lo, sweep.hi),
                             estimator, estimator.design(cells.layout, len(cells.levels)))
    result = bootstrap(cells, statistic, replicates, seed, method, level, runner=runner, workers=workers,
                       progress=progress, description="sweep: bootstrap replicates",
                       outcome_model=outcome_world(estimator, cells, outcomes))
    p_lower, p_upper = result.interval("share_lenient")
    tp_lower, tp_upper = result.interval("thresholds")
    thresholds = np.clip(level_thresholds(sweep.envelope, len(sweep.level_values)), sweep.lo, sweep.hi)
    share = sweep.lenient_share_at(grid)
    lower, upper = centred_interval(share, result.replicates["share_lenient"], level, 0.0, 1.0)
    t_lower, t_upper = centred_interval(thresholds, result.replicates["thresholds"], level, sweep.lo, sweep.hi)
    label = f"{level:.0%} bootstrap interval centred on the estimate" if result.n_replicates else result.interval_label
    meta = {**result.meta(), "interval": label, "percentile_interval": result.interval_label}
    return SweepBands(grid, share, lower, upper, thresholds, t_lower, t_upper, meta, label,
                      p_lower, p_upper, tp_lower, tp_upper)
