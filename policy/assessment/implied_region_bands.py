"""Bootstrap intervals of the implied region over two ratios, and the scenario wrapper that
``sweep --ratio A --ratio B --implied`` calls.

Each replicate re-estimates the risk levels, re-reads what courts did from its resampled counts
and recomputes every implied region (:mod:`policy.assessment.implied_region`). The region's
extents on each ratio are argmin figures like the one-ratio interval's ends, so each gets the
symmetric interval centred on the estimate (:func:`policy.assessment.sweep.bands.centred_interval`,
Hall 1988); the band reported on ratio i runs from the lower end of the low extent's interval
to the upper end of the high extent's. A replicate needs only the extents, so it solves 5 small
linear programs per arm and subset of cases (the minimum and the four axis directions, which
are among the point estimate's 16 and give the same extents): about 0.3 s on the demo
(docs/performance.md).
"""

from __future__ import annotations

import dataclasses
from typing import Any, Mapping, Sequence

import numpy as np

from policy.decision.candidates import observed_delta
from policy.decision.costs import Costs
from policy.errors import InputError
from policy.estimation.world import outcome_world
from policy.assessment.implied_bands import replicate_subsets
from policy.assessment.implied_region import ImpliedRegionCosts, implied_region, implied_region_costs
from policy.assessment.sweep.axes import RatioAxis
from policy.assessment.sweep.bands import centred_interval

__all__ = ["ImpliedRegionReplicates", "implied_region_bands", "implied_region_scenario"]


class ImpliedRegionReplicates:
    """A picklable statistic for :class:`policy.assessment.uncertainty.OnRiskLevels`: per replicate,
    arm and subset of cells, the implied region's extents on both ratios."""

    def __init__(self, costs: Costs, axes: Sequence[RatioAxis], index: np.ndarray, n_groups: int,
                 fill_index: np.ndarray, n_fill: int, masks: list[np.ndarray], box: np.ndarray):
        self.costs, self.axes, self.index, self.n_groups = costs, tuple(axes), index, n_groups
        self.fill_index, self.n_fill, self.masks, self.box = fill_index, n_fill, masks, np.asarray(box)

    def __call__(self, p: np.ndarray, batch) -> dict[str, np.ndarray]:
        b, n_arms = batch.cases.shape[0], batch.cases.shape[2]
        fixed = self.costs.outcome.astype(np.float64).copy()
        fixed[[a.outcome_index for a in self.axes]] = 0.0
        base = self.costs.decision[None] + np.matmul(fixed, p)                       # (b, n, L)
        slope = np.stack([a.reference_cost * p[:, :, a.outcome_index, :] for a in self.axes], axis=1)  # (b, 2, n, L)
        weights = batch.weights.astype(np.float64)
        delta, _ = observed_delta(batch.cases.transpose(0, 2, 1, 3), self.fill_index, self.n_fill)
        low = np.full((b, n_arms, len(self.masks), 2), np.nan)
        high = np.full_like(low, np.nan)
        for i in range(b):
            for a in range(n_arms):
                for s, mask in enumerate(self.masks):
                    try:
                        # the extents need only the four axis directions (among the point's 16)
                        res = implied_region(base[i], slope[i], np.where(mask, weights[i], 0.0), self.index,
                                             self.n_groups, delta[i, a], self.box, directions=4)
                    except InputError:  # a replicate without cases in this group
                        continue
                    low[i, a, s], high[i, a, s] = res.low, res.high
        return {"low": low, "high": high}


def implied_region_bands(cells, risk_levels, costs: Costs, implied: ImpliedRegionCosts, estimator, replicates: int,
                         seed: int | None, method: str = "poisson", level: float = 0.95, outcomes: str = "model",
                         workers: int | None = None, runner=None, progress: bool = False) -> ImpliedRegionCosts:
    """The implied regions with bootstrap intervals of their extents added (module notes):
    ``ratio{i}_low_lower``, ``ratio{i}_high_upper`` and the same in cost, for i = 1, 2."""
    from policy.assessment.uncertainty import OnRiskLevels, bootstrap

    table = implied.table.copy()
    index, n_groups, fill_index, n_fill, masks = replicate_subsets(cells, risk_levels, table, "implied-region")
    n_arms = len(cells.arms)
    statistic = OnRiskLevels(ImpliedRegionReplicates(costs, implied.axes, index, n_groups, fill_index,
                                                     n_fill, masks, implied.box),
                             estimator, estimator.design(cells.layout, len(cells.levels)))
    result = bootstrap(cells, statistic, replicates, seed, method, level, runner=runner, workers=workers,
                       progress=progress, description="implied region: bootstrap replicates",
                       outcome_model=outcome_world(estimator, cells, outcomes))
    shape = (n_arms, len(masks))
    for i, axis in enumerate(implied.axes):
        lo_point = table[f"ratio{i + 1}_low"].to_numpy(dtype=np.float64).reshape(shape)
        hi_point = table[f"ratio{i + 1}_high"].to_numpy(dtype=np.float64).reshape(shape)
        box_lo, box_hi = implied.box[i]
        lower, _ = centred_interval(lo_point, result.replicates["low"][..., i], level, box_lo, box_hi)
        _, upper = centred_interval(hi_point, result.replicates["high"][..., i], level, box_lo, box_hi)
        table[f"ratio{i + 1}_low_lower"], table[f"ratio{i + 1}_high_upper"] = lower.reshape(-1), upper.reshape(-1)
        table[f"cost{i + 1}_low_lower"] = table[f"ratio{i + 1}_low_lower"] * axis.reference_cost
        table[f"cost{i + 1}_high_upper"] = table[f"ratio{i + 1}_high_upper"] * axis.reference_cost
    label = f"{level:.0%} bootstrap interval centred on the estimate" if result.n_replicates else result.interval_label
    return dataclasses.replace(implied, table=table, meta={**result.meta(), "interval": label})


def implied_region_scenario(scenario: Any, ratios: Sequence[str], ranges: Sequence[Sequence[float] | None] | None = None,
                            per: str | None = None, outcome_costs: Mapping[str, float] | None = None,
                            decision_costs: Mapping[str, float] | None = None, replicates: int | None = None,
                            seed: int | None = None, resampling: str | None = None, interval: float | None = None,
                            outcomes: str | None = None, workers: int | None = None, runner: Any = None,
                            progress: bool = False) -> ImpliedRegionCosts:
    """Costs implied by what courts did (each arm) over two ratios in one scenario.

    ``ranges`` are the boxes searched on each ratio (default, as for the sweep, 0 to 4 times the
    scenario's ratio). Needs the cases behind the estimates; the bootstrap settings override the
    scenario's ``[uncertainty]`` (0 replicates: no intervals).
    """
    from policy.decision.candidates import observed_rules
    from policy.decision.costs import costs_from_scenario
    from policy.estimation.from_scenario import estimate
    from policy.estimation.strata import RiskLevelEstimator
    from policy.inputs.scenario import as_scenario
    from policy.assessment.sweep.axes import default_range, ratio_axis
    from policy.assessment.uncertainty import scenario_settings

    scenario = as_scenario(scenario)
    if len(ratios) != 2:
        raise InputError(f"an implied region reads two ratios; got {len(ratios)}.")
    cells, rl = estimate(scenario)
    if cells is None:
        raise InputError(f"{scenario.file}: implied costs need the observed decisions (a case or counts table, or the "
                         "simulator); a risk-level table holds none.")
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    axes = [ratio_axis(rl, costs, r, per) for r in ratios]
    ranges = list(ranges or [None, None]) + [None] * (2 - len(ranges or []))
    box = [tuple(r) if r is not None else default_range(a, "linear") for r, a in zip(ranges, axes)]
    rules = observed_rules(cells, scenario.aid.name, scenario.level_labels)
    out = implied_region_costs(rl, costs, axes, rules, box)
    u = scenario_settings(scenario, "implied region:", replicates, interval, resampling, outcomes)
    if u.replicates > 0:
        out = implied_region_bands(cells, rl, costs, out, RiskLevelEstimator.from_scenario(scenario), u.replicates,
                                   scenario.seed if seed is None else seed, u.resampling, u.interval, u.outcomes,
                                   workers, runner, progress)
    return out
