"""What each compared rule costs, and how it compares with each other rule, under weaker
assumptions: ranges over the sensitivity intervals at each Gamma and over the monotone bounds.

For a rule delta(d | x) and intervals [l_jd(x), u_jd(x)] for every outcome probability (one
:class:`~policy.estimation.bounds.RiskBounds`), the expected cost per case

    cost(delta, p) = (1/W) sum_x w(x) sum_d delta(d|x) [c_dec(d, x) + sum_j c_j p_jd(x)]

is linear in p with coefficients c_j w(x) delta(d|x) >= 0, so over the box of intervals it
ranges from its value at the lower ends to its value at the upper ends; so does each outcome
rate. The regret of rule A against rule B, cost(A, p) - cost(B, p), has coefficients
c_j w(x) (delta_A - delta_B)(d|x) of either sign: its largest value takes the upper end where
the coefficient is positive and the lower end where it is negative, its smallest the reverse.
A regret range that lies wholly above 0 says A costs more than B under every distribution the
assumption allows.

The box ignores the links between the intervals (monotonicity across levels within a cell,
one outcome kind nested in another), so the ranges are outer ranges: they contain every value
the assumption allows and may be wider than the sharp range.

References
----------
Manski, C. F. (1997). Monotone treatment response. Econometrica 65(6), 1311-1334.
Rosenbaum, P. R. (2002). Observational Studies, 2nd ed. Springer.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.estimation.bounds import RiskBounds
from policy.estimation.strata import RiskLevels

__all__ = ["rule_ranges", "regret_ranges"]


def _parts(rules: Sequence[Rule], weights: np.ndarray, costs: Costs):
    D = np.stack([r.cell_delta for r in rules])  # (R, n, L)
    w = np.asarray(weights, dtype=np.float64)
    W = w.sum()
    wd = w[None, :, None] * D
    fixed = np.einsum("rxd,xd->r", wd, costs.decision) / W
    return wd, fixed, W


def rule_ranges(rules: Sequence[Rule], risk_levels: RiskLevels, costs: Costs, intervals: Sequence[RiskBounds]) -> pd.DataFrame:
    """The range of each rule's expected cost and outcome rates under each assumption.

    Parameters
    ----------
    rules : sequence of Rule
        On the same cells as the intervals.
    risk_levels : RiskLevels
        The cells (their weights and outcome keys).
    costs : Costs
    intervals : sequence of RiskBounds
        E.g. :func:`policy.estimation.bounds.robust_assumptions` (point, each Gamma, the bounds).

    Returns
    -------
    DataFrame
        One row per rule x assumption: ``rule``, ``kind``, ``assumption``, ``gamma`` (1 point,
        NaN for the bounds), ``cost_per_1000_cases_lower``, ``cost_per_1000_cases_upper``,
        ``rate_<outcome>_lower``, ``rate_<outcome>_upper``.
    """
    wd, fixed, W = _parts(rules, risk_levels.weights, costs)
    rows = []
    for b in intervals:
        rates_lo = np.einsum("rxd,xjd->rj", wd, b.lower) / W
        rates_hi = np.einsum("rxd,xjd->rj", wd, b.upper) / W
        lo = fixed + rates_lo @ costs.outcome
        hi = fixed + rates_hi @ costs.outcome
        for i, rule in enumerate(rules):
            row = {"rule": rule.name, "kind": rule.kind, "assumption": b.key,
                   "gamma": b.gamma if np.isfinite(b.gamma) else np.nan,
                   "cost_per_1000_cases_lower": 1000 * lo[i], "cost_per_1000_cases_upper": 1000 * hi[i]}
            for j, key in enumerate(risk_levels.outcome_keys):
                row[f"rate_{key}_lower"] = rates_lo[i, j]
                row[f"rate_{key}_upper"] = rates_hi[i, j]
            rows.append(row)
    return pd.DataFrame(rows)


def regret_ranges(rules: Sequence[Rule], risk_levels: RiskLevels, costs: Costs, intervals: Sequence[RiskBounds]) -> pd.DataFrame:
    """The range of each rule's regret against each other rule under each assumption
    (parameters as :func:`rule_ranges`).

    Returns
    -------
    DataFrame
        One row per assumption x ordered pair of distinct rules: ``rule``, ``against``,
        ``assumption``, ``gamma``, ``regret_per_1000_cases_lower``, ``regret_per_1000_cases_upper``
        (cost of ``rule`` minus cost of ``against``), ``verdict`` (``costs more`` when the whole
        range is above 0, ``costs less`` when below, ``either`` otherwise).
    """
    wd, fixed, W = _parts(rules, risk_levels.weights, costs)
    diff = wd[:, None] - wd[None, :]  # (R, R, n, L)
    base = fixed[:, None] - fixed[None, :]
    c = costs.outcome
    rows = []
    for b in intervals:
        coef = diff[:, :, :, None, :] * c[None, None, None, :, None]  # (R, R, n, J, L)
        hi = base + np.where(coef > 0, coef * b.upper, coef * b.lower).sum(axis=(2, 3, 4)) / W
        lo = base + np.where(coef > 0, coef * b.lower, coef * b.upper).sum(axis=(2, 3, 4)) / W
        for a, ra in enumerate(rules):
            for o, rb in enumerate(rules):
                if a == o:
                    continue
                verdict = "costs more" if lo[a, o] > 1e-12 else ("costs less" if hi[a, o] < -1e-12 else "either")
                rows.append({"rule": ra.name, "against": rb.name, "assumption": b.key,
                             "gamma": b.gamma if np.isfinite(b.gamma) else np.nan,
                             "regret_per_1000_cases_lower": 1000 * lo[a, o],
                             "regret_per_1000_cases_upper": 1000 * hi[a, o], "verdict": verdict})
    return pd.DataFrame(rows)
