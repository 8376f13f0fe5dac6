"""The tool's own bootstrap replicates of risk levels, written as a risk-level table with draws.

:func:`bootstrap_draws_table` re-estimates the risk levels in each bootstrap replicate exactly as
``compare`` does (same resampler, same seeds, same outcome model; :mod:`policy.assessment.uncertainty`)
and writes them in the long layout of :mod:`policy.estimation.draws`: rows marked ``point`` hold the
estimates on the data, then one block per replicate. Fed back as a scenario's
``risk_level_table``, the rules chosen on the point estimate get the same replicate values, and so
the same intervals, as in ``compare`` on the cases, whenever the replicates keep the cells' sizes
(``resampling = "multinomial"``; with Poisson resampling the cell weights vary between replicates,
which a table with one weight per cell cannot carry).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from policy.assessment.uncertainty import OnRiskLevels, bootstrap, scenario_settings
from policy.estimation.draws import risk_level_draws_frame
from policy.estimation.strata import RiskLevelEstimator
from policy.estimation.world import outcome_world
from policy.errors import InputError

__all__ = ["bootstrap_draws_table", "decision_columns"]


def _outcome_probabilities(p: np.ndarray, batch) -> dict:
    return {"p": p}


def decision_columns(cells, level_values) -> dict:
    """What courts did and the aid's recommendation per cell, as the optional columns of a risk-level
    table (:mod:`policy.decision.table_rules`): ``decision_cases_<level>`` (with ``_not_shown`` /
    ``_shown`` by arm) and, where the aid recommends one level in every cell, ``aid_recommends``."""
    out = {}
    for a, arm in enumerate(cells.arms):
        suffix = "" if arm is None else ("_shown" if arm == 1 else "_not_shown")
        for d, value in enumerate(level_values):
            out[f"decision_cases_{value}{suffix}"] = cells.cases[:, a, d].astype(np.float64)
    if cells.recommended is not None:
        rec = cells.recommended.sum(axis=1)
        if ((rec > 0).sum(axis=1) == 1).all():
            out["aid_recommends"] = np.asarray(level_values, dtype=object)[rec.argmax(axis=1)]
    return out


def bootstrap_draws_table(scenario, replicates: int | None = None, seed: int | None = None, resampling: str | None = None,
                          outcomes: str | None = None, workers: int | None = None, runner=None,
                          decisions: bool = True) -> pd.DataFrame:
    """A risk-level table with draws: the scenario's estimates and their bootstrap replicates.

    Parameters
    ----------
    scenario : Scenario or path
        A scenario with cases (a case table, a counts table or the simulator).
    replicates, seed, resampling, outcomes : optional
        Override the scenario's ``[uncertainty]`` settings and ``[scenario] seed``, as for ``compare``.
    workers, runner : optional
        How replicates are run; the table does not depend on them.
    decisions : bool
        Also write what courts did (cases per decision level, by arm) and the aid's recommendation
        per cell, on the point rows (:func:`decision_columns`), so ``compare`` on the table scores
        them too.

    Returns
    -------
    DataFrame
        Cell columns, ``outcome``, ``draw`` (``point``, then 1..B), ``cases``, ``risk_level_0`` ...
        and the scenario's cost columns.
    """
    from policy.estimation.from_scenario import estimate
    from policy.inputs.scenario import as_scenario

    scenario = as_scenario(scenario)
    if scenario.data.kind == "risk_level_table":
        raise InputError(f"{scenario.file}: its data are already a risk-level table; bootstrap replicates need the cases.")
    settings = scenario_settings(scenario, "draws table:", replicates, None, resampling, outcomes)
    if settings.replicates < 1:
        raise InputError(f"draws table: replicates must be at least 1; got {settings.replicates!r}.")
    cells, rl = estimate(scenario)
    estimator = RiskLevelEstimator.from_scenario(scenario)
    statistic = OnRiskLevels(_outcome_probabilities, estimator, estimator.design(cells.layout, len(cells.levels)))
    result = bootstrap(cells, statistic, settings.replicates, scenario.seed if seed is None else seed,
                       settings.resampling, settings.interval, runner=runner, workers=workers,
                       description="draws table: bootstrap replicates",
                       outcome_model=outcome_world(estimator, cells, settings.outcomes))
    extra = decision_columns(cells, scenario.level_values) if decisions else None
    return risk_level_draws_frame(rl, result.replicates["p"], scenario.cell_columns, cell_values=extra)
