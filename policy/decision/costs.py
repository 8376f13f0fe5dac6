"""Costs: the user's value judgments turned into the expected cost of each decision in each cell.

Expected cost of decision d in cell x (method notes, section 4):

    C(d, x) = c_dec(d, x) + sum_j c_j p_jd(x),

with c_dec(d, x) the cost of imposing level d (a number, or a per-cell cost column) and c_j the
cost of one adverse outcome of kind j. C is linear in the cost weights, which later stages use to
re-solve or sweep without rebuilding anything.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.inputs.scenario import Scenario
from policy.estimation.strata import RiskLevels

__all__ = ["CostFactor", "Costs", "costs_from_scenario", "expected_cost"]


@dataclass(frozen=True)
class Costs:
    """Cost weights in one unit.

    Attributes
    ----------
    decision : ndarray of shape (n_cells, L)
        Cost of imposing each decision level on one case of each cell.
    outcome : ndarray of shape (J,)
        Cost of one adverse outcome of each kind.
    unit : str
        The unit of every cost.
    level_labels, outcome_labels : tuple of str
        Names for presentation.
    """

    decision: np.ndarray
    outcome: np.ndarray
    unit: str = ""
    level_labels: tuple[str, ...] = ()
    outcome_labels: tuple[str, ...] = ()

    def expected(self, p: np.ndarray) -> np.ndarray:
        """Expected cost per case, shape (..., n_cells, L), from p of shape (..., n_cells, J, L)."""
        return self.decision + np.einsum("...xjd,j->...xd", p, self.outcome)

    def with_outcome_cost(self, j: int, value: float) -> "Costs":
        """A copy with the cost of outcome kind ``j`` replaced."""
        outcome = self.outcome.copy()
        outcome[j] = value
        return replace(self, outcome=outcome)

    def with_outcome_costs(self, values: Sequence[float]) -> "Costs":
        outcome = np.asarray(values, dtype=np.float64)
        if outcome.shape != self.outcome.shape:
            raise InputError(f"expected {self.outcome.shape[0]} outcome costs; got {outcome.shape}.")
        return replace(self, outcome=outcome)

    def with_decision_scale(self, factors: Sequence[float]) -> "Costs":
        """A copy with each decision level's cost multiplied by a factor."""
        f = np.asarray(factors, dtype=np.float64)
        return replace(self, decision=self.decision * f)

    def to_frame(self) -> pd.DataFrame:
        """The weights as a table: kind (decision / outcome), name, mean cost per case, unit."""
        def mean(column: np.ndarray) -> float:
            # one cost in every cell is written as given (0.4, not the mean's 0.39999999999999997)
            return float(column[0]) if len(column) and column.min() == column.max() else float(column.mean())

        rows = [("decision", lab, mean(self.decision[:, d]), self.unit) for d, lab in enumerate(self.level_labels)]
        rows += [("outcome", lab, float(c), self.unit) for lab, c in zip(self.outcome_labels, self.outcome)]
        return pd.DataFrame(rows, columns=["kind", "name", "cost", "unit"])


class CostFactor(float):
    """A decision-cost override that is a factor on the level's per-cell costs from its
    ``cost_column`` (in place of the scenario's ``cost_factor``), not a flat cost per case.

    ``decision_costs={"bond": CostFactor(1.5)}`` gives every cell 1.5 times its own bond cost;
    ``{"bond": 1.5}`` would give every case a flat cost of 1.5.
    """

    def __repr__(self) -> str:
        return f"CostFactor({float(self)!r})"


def costs_from_scenario(scenario: Scenario, risk_levels: RiskLevels,
                        outcome_costs: Mapping[str, float] | None = None,
                        decision_costs: Mapping[str, float] | None = None) -> Costs:
    """Cost weights of a scenario for the cells of ``risk_levels``.

    Parameters
    ----------
    scenario : Scenario
    risk_levels : RiskLevels
        Supplies the cells and their per-cell cost columns.
    outcome_costs, decision_costs : mapping, optional
        Overrides by outcome key / decision value (for what-if runs from the command line). A
        decision override that is a :class:`CostFactor` multiplies the level's per-cell costs.
    """
    n = risk_levels.n_cells
    decision = np.empty((n, len(scenario.levels)))
    overrides = dict(decision_costs or {})
    for key in overrides:
        scenario.level_index(key, "decision cost override")
    for d, level in enumerate(scenario.levels):
        given = overrides.get(level.value, overrides.get(level.label))
        if given is not None and not isinstance(given, CostFactor):
            decision[:, d] = float(given)
        elif level.cost is not None:
            if given is not None:
                raise InputError(f"a cost factor for decision level {level.value!r} needs a per-cell cost (cost_column); "
                                 f"its cost is one number, {level.cost:g}: set it directly instead.")
            decision[:, d] = level.cost
        else:
            if level.cost_column not in risk_levels.cell_costs:
                raise InputError(
                    f"{scenario.file}: decision level {level.value!r} takes its cost from column {level.cost_column!r}, "
                    "which the data do not hold."
                )
            factor = level.cost_factor if given is None else float(given)
            decision[:, d] = np.asarray(risk_levels.cell_costs[level.cost_column], dtype=np.float64) * factor
    outcome = np.array([o.cost for o in scenario.outcomes], dtype=np.float64)
    for key, value in (outcome_costs or {}).items():
        outcome[scenario.outcome_index(key, "outcome cost override")] = float(value)
    if (outcome < 0).any() or (decision < 0).any():
        raise InputError("costs must be >= 0.")
    return Costs(decision, outcome, scenario.cost_unit, scenario.level_labels, scenario.outcome_labels)


def expected_cost(risk_levels: RiskLevels, costs: Costs) -> np.ndarray:
    """C(d, x) for every cell and decision level, shape (n_cells, L)."""
    return costs.expected(risk_levels.p)
