"""Constrained rules along a swept cost: the linear program re-solved at grid points.

An unconstrained rule follows any cost exactly (the argmin per rule cell; see
:mod:`policy.solve`), but a constrained rule needs its linear program solved at each cost
(method notes, section 7: "re-solve the LP along a grid, re-using the compiled problem"). Here
one outcome kind's cost is swept over a grid with every other cost at the scenario's value, and
:class:`policy.constrained.ConstrainedProblem` is re-solved warm at each point. Points are
also read on the ratio axis of the sweeps, r = c_j / c_ref, with c_ref the case-weighted mean
cost of the harshest decision level at the scenario's costs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from .constrained import ConstrainedProblem

__all__ = ["ConstrainedSweep", "sweep_constrained"]


@dataclass(frozen=True)
class ConstrainedSweep:
    """The constrained optimal rule at each point of one outcome kind's cost.

    Attributes
    ----------
    outcome, outcome_label : str
    outcome_index : int
    reference_label : str
        The decision level whose mean cost is the ratio's denominator (the harshest).
    reference_cost : float
        c_ref, in ``unit``.
    unit : str
    values : ndarray of shape (P,)
        The swept outcome cost at each point, in ``unit``.
    cost_per_case, price_per_case : ndarray of shape (P,)
        Expected cost of the constrained rule, and its excess over the unconstrained optimum on
        the same rule columns, per case.
    level_shares : ndarray of shape (P, L)
    outcome_rates : ndarray of shape (P, J)
    delta : ndarray of shape (P, G, L)
        The constrained rule's decision probabilities per rule cell.
    rule_cells : DataFrame of shape (G, n_columns)
    level_labels, outcome_keys, outcome_labels : tuple of str
    """

    outcome: str
    outcome_label: str
    outcome_index: int
    reference_label: str
    reference_cost: float
    unit: str
    values: np.ndarray
    cost_per_case: np.ndarray
    price_per_case: np.ndarray
    level_shares: np.ndarray
    outcome_rates: np.ndarray
    delta: np.ndarray
    rule_cells: pd.DataFrame
    level_labels: tuple[str, ...]
    outcome_keys: tuple[str, ...]
    outcome_labels: tuple[str, ...]

    @property
    def ratios(self) -> np.ndarray:
        """The swept cost over c_ref at each point (NaN where c_ref is 0)."""
        if self.reference_cost > 0:
            return self.values / self.reference_cost
        return np.full_like(self.values, np.nan)

    def to_frame(self) -> pd.DataFrame:
        """One row per point: outcome, cost, ratio, cost and price per 1,000 cases, share_<level>, rate_<outcome>."""
        out = pd.DataFrame({
            "outcome": self.outcome,
            "cost": self.values,
            "ratio": self.ratios,
            "reference_level": self.reference_label,
            "reference_cost": self.reference_cost,
            "cost_per_1000_cases": 1000.0 * self.cost_per_case,
            "price_per_1000_cases": 1000.0 * self.price_per_case,
        })
        for d, lab in enumerate(self.level_labels):
            out[f"share: {lab}"] = self.level_shares[:, d]
        for j, key in enumerate(self.outcome_keys):
            out[f"rate_{key}"] = self.outcome_rates[:, j]
        out["unit"] = self.unit
        return out


def sweep_constrained(problem: ConstrainedProblem, outcome: int, values: Sequence[float],
                      name: str = "constrained optimal rule") -> ConstrainedSweep:
    """Solve the constrained rule at each value of one outcome kind's cost, other costs as loaded.

    Parameters
    ----------
    problem : ConstrainedProblem
        Built on the scenario's costs; its outcome costs are restored afterwards.
    outcome : int
        Position of the swept outcome kind.
    values : sequence of float
        Costs of one adverse outcome of that kind, >= 0.

    Returns
    -------
    ConstrainedSweep
    """
    rl = problem.risk_levels
    base = problem.outcome_costs.copy()
    values = np.asarray(values, dtype=np.float64)
    results = []
    try:
        for v in values:
            costs = base.copy()
            costs[outcome] = v
            problem.set_costs(outcome_costs=costs)
            results.append(problem.solve(name, sensitivity=False))
    finally:
        problem.set_costs(outcome_costs=base)
    first = results[0]
    K = rl.n_levels - 1
    w = rl.weights
    decision = problem.current_costs().decision
    c_ref = float(np.sum(w * decision[:, K]) / np.sum(w))
    return ConstrainedSweep(
        outcome=rl.outcome_keys[outcome],
        outcome_label=rl.outcome_labels[outcome],
        outcome_index=int(outcome),
        reference_label=rl.level_labels[K],
        reference_cost=c_ref,
        unit=first.unit,
        values=values,
        cost_per_case=np.array([r.cost_per_case for r in results]),
        price_per_case=np.array([r.price_per_case for r in results]),
        level_shares=np.stack([r.evaluation.level_shares for r in results]),
        outcome_rates=np.stack([r.evaluation.outcome_rates for r in results]),
        delta=np.stack([r.rule.delta for r in results]),
        rule_cells=first.rule.rule_cells,
        level_labels=rl.level_labels,
        outcome_keys=rl.outcome_keys,
        outcome_labels=rl.outcome_labels,
    )
