"""Bootstrap intervals of the costs implied by current practice: each replicate re-estimates the
risk levels and re-reads what courts did from its resampled counts, then recomputes every exact
implied interval (:mod:`policy.assessment.implied`).

The ends r_lo and r_hi are argmin figures, like the sweep's thresholds, so their intervals are
the symmetric intervals centred on the estimate of :func:`policy.assessment.sweep.bands.centred_interval`
(Hall 1988); the reported band of the implied ratio runs from the lower end of r_lo's interval
to the upper end of r_hi's. The axis keeps the original data's reference cost, so every
replicate's ratio is in the same unit.

References
----------
Hall, P. (1988). On symmetric bootstrap confidence intervals. Journal of the Royal Statistical
Society, Series B 50(1), 35-45 (from memory).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from policy.decision.candidates import observed_delta
from policy.decision.costs import Costs
from policy.errors import InputError
from policy.estimation.strata import RiskLevels
from policy.estimation.world import outcome_world
from policy.assessment.implied import ImpliedCosts, protected_groups, implied_interval
from policy.assessment.sweep.axes import RatioAxis
from policy.assessment.sweep.bands import centred_interval

__all__ = ["ImpliedReplicates", "implied_bands"]


class ImpliedReplicates:
    """A picklable statistic for :class:`policy.assessment.uncertainty.OnRiskLevels`: per replicate,
    arm and subset of cells (all cases, then each protected group), the exact implied interval."""

    def __init__(self, costs: Costs, axis: RatioAxis, index: np.ndarray, n_groups: int, fill_index: np.ndarray,
                 n_fill: int, masks: list[np.ndarray], lo: float, hi: float):
        self.costs, self.axis, self.index, self.n_groups = costs, axis, index, n_groups
        self.fill_index, self.n_fill, self.masks = fill_index, n_fill, masks
        self.lo, self.hi = float(lo), float(hi)

    def __call__(self, p: np.ndarray, batch) -> dict[str, np.ndarray]:
        b, n_arms = batch.cases.shape[0], batch.cases.shape[2]
        fixed = self.costs.outcome.astype(np.float64).copy()
        fixed[self.axis.outcome_index] = 0.0
        base = self.costs.decision[None] + np.matmul(fixed, p)            # (b, n, L)
        slope = self.axis.reference_cost * p[:, :, self.axis.outcome_index, :]
        weights = batch.weights.astype(np.float64)
        delta, _ = observed_delta(batch.cases.transpose(0, 2, 1, 3), self.fill_index, self.n_fill)  # (b, arms, n, L)
        r_lo = np.full((b, n_arms, len(self.masks)), np.nan)
        r_hi = np.full_like(r_lo, np.nan)
        for i in range(b):
            for a in range(n_arms):
                for s, mask in enumerate(self.masks):
                    try:
                        res = implied_interval(base[i], slope[i], np.where(mask, weights[i], 0.0), self.index,
                                               self.n_groups, delta[i, a], self.lo, self.hi)
                    except InputError:  # a replicate without cases in this group
                        continue
                    r_lo[i, a, s], r_hi[i, a, s] = res.r_lo, res.r_hi
        return {"r_lo": r_lo, "r_hi": r_hi}


def replicate_subsets(cells, risk_levels: RiskLevels, table, what: str):
    """What implied-cost replicates score: the rule cell of each cell of the risk levels and the
    number of rule cells, the same over the cell table's cells (to fill the observed rules), and
    the subsets of cases (all, then each protected group), checked against ``table``'s rows
    (one per arm and subset)."""
    index, groups = risk_levels.layout.rule_index()
    fill_index, fill_groups = cells.layout.rule_index()
    masks = [np.ones(len(risk_levels.weights), dtype=bool)] + [m for _, _, m in protected_groups(risk_levels)]
    n_arms = len(cells.arms)
    if len(table) != n_arms * len(masks):
        raise InputError(f"the {what} table has {len(table)} rows; the bootstrap expects one per arm ({n_arms}) and "
                         f"subset of cases ({len(masks)}): compute it from the observed rules with the groups.")
    return index, len(groups), fill_index, len(fill_groups), masks


def implied_bands(cells, risk_levels: RiskLevels, costs: Costs, implied: ImpliedCosts, estimator, replicates: int,
                  seed: int | None, method: str = "poisson", level: float = 0.95, outcomes: str = "model",
                  workers: int | None = None, runner=None, progress: bool = False) -> ImpliedCosts:
    """The implied intervals with bootstrap intervals added (module notes).

    ``implied`` must come from :func:`policy.assessment.implied.implied_costs` over the
    observed rules of ``cells`` (one per arm, in the arms' order) with the groups. Adds to its
    table ``ratio_low_lower``, ``ratio_high_upper``, ``cost_low_lower``, ``cost_high_upper`` and
    to its differences ``ratio_difference_lower``, ``ratio_difference_upper`` (and in cost),
    and records the bootstrap settings in ``meta``.
    """
    from policy.assessment.uncertainty import OnRiskLevels, bootstrap

    table = implied.table.copy()
    index, n_groups, fill_index, n_fill, masks = replicate_subsets(cells, risk_levels, table, "implied")
    n_arms = len(cells.arms)
    statistic = OnRiskLevels(ImpliedReplicates(costs, implied.axis, index, n_groups, fill_index, n_fill,
                                               masks, implied.lo, implied.hi),
                             estimator, estimator.design(cells.layout, len(cells.levels)))
    result = bootstrap(cells, statistic, replicates, seed, method, level, runner=runner, workers=workers,
                       progress=progress, description="implied costs: bootstrap replicates",
                       outcome_model=outcome_world(estimator, cells, outcomes))
    shape = (n_arms, len(masks))
    lo_point = table["ratio_low"].to_numpy(dtype=np.float64).reshape(shape)
    hi_point = table["ratio_high"].to_numpy(dtype=np.float64).reshape(shape)
    lo_reps, hi_reps = result.replicates["r_lo"], result.replicates["r_hi"]
    lower, _ = centred_interval(lo_point, lo_reps, level, implied.lo, implied.hi)
    _, upper = centred_interval(hi_point, hi_reps, level, implied.lo, implied.hi)
    c = implied.axis.reference_cost
    table["ratio_low_lower"], table["ratio_high_upper"] = lower.reshape(-1), upper.reshape(-1)
    table["cost_low_lower"], table["cost_high_upper"] = table["ratio_low_lower"] * c, table["ratio_high_upper"] * c
    diffs = implied.differences.copy()
    if len(diffs):
        subsets = list(zip(table["protected"][: len(masks)], table["group"][: len(masks)]))
        key = {(r, p, g): (a, s) for a, r in enumerate(table["rule"].unique()) for s, (p, g) in enumerate(subsets)}
        d_lo, d_hi = [], []
        for row in diffs.itertuples():
            a, s = key[(row.rule, row.protected, row.group)]
            _, v = key[(row.rule, row.protected, row.versus)]
            point_lo = lo_point[a, s] - hi_point[a, v]
            point_hi = hi_point[a, s] - lo_point[a, v]
            low, _ = centred_interval(np.array(point_lo), lo_reps[:, a, s] - hi_reps[:, a, v], level)
            _, high = centred_interval(np.array(point_hi), hi_reps[:, a, s] - lo_reps[:, a, v], level)
            d_lo.append(float(low))
            d_hi.append(float(high))
        diffs["ratio_difference_lower"], diffs["ratio_difference_upper"] = d_lo, d_hi
        diffs["cost_difference_lower"] = diffs["ratio_difference_lower"] * c
        diffs["cost_difference_upper"] = diffs["ratio_difference_upper"] * c
    label = f"{level:.0%} bootstrap interval centred on the estimate" if result.n_replicates else result.interval_label
    return dataclasses.replace(implied, table=table, differences=diffs, meta={**result.meta(), "interval": label})
