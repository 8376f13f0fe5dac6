"""Costs implied by current practice for one scenario end to end (what ``sweep --implied``
calls): estimate, read what courts did in each arm, find the exact implied intervals and,
with replicates, their bootstrap intervals."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from policy.errors import InputError
from policy.assessment.implied import ImpliedCosts, implied_costs

__all__ = ["implied_scenario"]


def implied_scenario(scenario: Any, ratio: str, per: str | None = None, lo: float = 0.0, hi: float = np.inf,
                     outcome_costs: Mapping[str, float] | None = None,
                     decision_costs: Mapping[str, float] | None = None, replicates: int | None = None,
                     seed: int | None = None, resampling: str | None = None, interval: float | None = None,
                     outcomes: str | None = None, workers: int | None = None, runner: Any = None,
                     progress: bool = False) -> ImpliedCosts:
    """Costs implied by what courts did (each arm) in one scenario along ``ratio``.

    Needs the cases behind the estimates (a case or counts table, or the simulator): a
    risk-level table holds no observed decisions. ``replicates`` and the other bootstrap
    settings override the scenario's ``[uncertainty]`` (0 replicates: no intervals); see
    :func:`policy.assessment.implied_bands.implied_bands`.
    """
    from policy.decision.candidates import observed_rules
    from policy.decision.costs import costs_from_scenario
    from policy.estimation.from_scenario import estimate
    from policy.inputs.scenario import as_scenario
    from policy.assessment.sweep.axes import ratio_axis

    scenario = as_scenario(scenario)
    cells, rl = estimate(scenario)
    if cells is None:
        raise InputError(f"{scenario.file}: implied costs need the observed decisions (a case or counts table, or the "
                         "simulator); a risk-level table holds none.")
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    axis = ratio_axis(rl, costs, ratio, per)
    rules = observed_rules(cells, scenario.aid.name, scenario.level_labels)
    out = implied_costs(rl, costs, axis, rules, lo=lo, hi=hi)
    from policy.assessment.uncertainty import scenario_settings

    u = scenario_settings(scenario, "implied costs:", replicates, interval, resampling, outcomes)
    if u.replicates > 0:
        from policy.assessment.implied_bands import implied_bands
        from policy.estimation.strata import RiskLevelEstimator

        out = implied_bands(cells, rl, costs, out, RiskLevelEstimator.from_scenario(scenario), u.replicates,
                            scenario.seed if seed is None else seed, u.resampling, u.interval, u.outcomes,
                            workers, runner, progress)
    return out
