"""The unconstrained cost-minimizing release rule.

For each rule cell g, choose the decision d minimizing sum_{x in g} w(x) C(d, x); ties go to the
more lenient level (method notes, section 4). With one outcome and two decisions this is the
cost-sensitive threshold rule: act iff p_0 - p_1 > (c_dec(1) - c_dec(0)) / c_j
(Elkan 2001, "The Foundations of Cost-Sensitive Learning").
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import scipy.sparse as sp

from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.estimation.strata import RiskLevels

__all__ = ["optimal_rule", "rule_cell_costs", "argmin_lenient"]

#: relative tolerance under which two expected costs count as tied
TIE_TOLERANCE = 1e-9


def argmin_lenient(total: np.ndarray, tol: float = TIE_TOLERANCE) -> np.ndarray:
    """Index of the smallest value along the last axis; ties (within ``tol`` relative) go to the first.

    Parameters
    ----------
    total : ndarray of shape (..., L)

    Returns
    -------
    ndarray of shape (...)
    """
    best = total.min(axis=-1, keepdims=True)
    slack = tol * np.maximum(1.0, np.abs(best))
    return np.argmax(total <= best + slack, axis=-1)


def aggregation_matrix(index: np.ndarray, n_groups: int, weights: np.ndarray) -> sp.csr_matrix:
    """Sparse (n_groups, n_cells) matrix summing weighted cell values into rule cells."""
    n = len(index)
    return sp.csr_matrix((weights, (index, np.arange(n))), shape=(n_groups, n))


def rule_cell_costs(risk_levels: RiskLevels, costs: Costs, index: np.ndarray, n_groups: int) -> np.ndarray:
    """Total expected cost of each decision in each rule cell, sum_x w(x) C(d, x); shape (n_groups, L)."""
    per_case = costs.expected(risk_levels.p)
    return aggregation_matrix(index, n_groups, risk_levels.weights) @ per_case


def optimal_rule(risk_levels: RiskLevels, costs: Costs, columns: Sequence[str] | None = None,
                 name: str = "cost-minimizing rule") -> Rule:
    """The unconstrained expected-cost-minimizing rule over rule cells.

    Parameters
    ----------
    risk_levels : RiskLevels
    costs : Costs
    columns : sequence of str, optional
        Columns of the rule cells (default: the scenario's rule covariates).
    name : str

    Returns
    -------
    Rule
        Deterministic; ties go to the more lenient level.
    """
    layout = risk_levels.layout
    index, groups = layout.rule_index(columns)
    total = rule_cell_costs(risk_levels, costs, index, len(groups))
    levels = argmin_lenient(total)
    delta = np.zeros_like(total)
    delta[np.arange(len(groups)), levels] = 1.0
    weights = np.bincount(index, weights=risk_levels.weights, minlength=len(groups))
    return Rule(name, "optimal", groups, index, delta, risk_levels.level_values, risk_levels.level_labels, weights)
