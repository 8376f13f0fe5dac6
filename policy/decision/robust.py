"""The robust rule: the least worst-case expected cost over a set of outcome probabilities.

Without unconfoundedness the outcome probabilities p_jd(x) are only known to lie in a set U
(:mod:`policy.estimation.bounds`): the box of intervals [l_jd(x), u_jd(x)] of the sensitivity
model at a chosen Gamma, or of the monotone-response bounds, intersected with monotonicity
(p_jd(x) non-increasing in d, which every distribution with Y(d) >= Y(d+1) satisfies). U
contains every distribution consistent with the data and the stated assumptions (it is an
outer set: conclusions drawn from it are conservative). The robust rule solves

    min_delta  max_{p in U}  sum_x w(x) sum_d delta(d | g(x)) [c_dec(d, x) + sum_j c_j p_jd(x)] / W

subject to the same constraints as any rule (:mod:`policy.decision.constraints`, evaluated under
the point estimate, as for the ordinary constrained optimum).

Notes
-----
The inner maximum separates over (x, j): max a'p subject to l <= p <= u and p_d >= p_{d+1},
with a_d = c_j w(x) delta(d | g(x)) / W >= 0 (costs and decision probabilities are never
negative). Its LP dual (multipliers alpha, beta >= 0 on p <= u and p >= l, mu_d >= 0 on
p_{d+1} - p_d <= 0) is

    min u'alpha - l'beta  subject to  alpha_d - beta_d + mu_{d-1} - mu_d = a_d.

For a >= 0 every feasible p has p_d <= p_d' <= u_d' for d' <= d, so p_d <= p*_d = min_{d' <= d}
u_d' (the running minimum of the upper ends), and p* is feasible (non-increasing, and >= l since
l is non-increasing and l <= u): a'p <= a'p*. The intervals of :mod:`policy.estimation.bounds`
are non-increasing, so p* = u, and alpha = a, beta = mu = 0 is a dual point of the same value,
certifying the maximum. So the worst case of EVERY rule is attained at the same p*, and the
robust rule is the ordinary (constrained) optimum with the outcomes priced at p*: one linear
program of the ordinary size. With coefficients of either sign (the regret against a baseline,
:mod:`policy.decision.safe`) the dual does not collapse and the program grows by the dual's
variables.

References
----------
Manski, C. F. (1997). Monotone treatment response. Econometrica 65(6), 1311-1334. (The bounds.)
Rosenbaum, P. R. (2002). Observational Studies, 2nd ed., chapter 4. Springer. (The sensitivity
parameter Gamma.)
Ben-Tal, A. and Nemirovski, A. (1999). Robust solutions of uncertain linear programs.
Operations Research Letters 25(1), 1-13. (Dualizing the inner maximum of a robust LP.)
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.cautions import CAUTIONS
from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.decision.solve import optimal_rule
from policy.errors import InputError
from policy.estimation.bounds import RiskBounds, decision_shares, manski_bounds, sensitivity_bounds
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellTable

__all__ = ["uncertainty_set", "worst_case_p", "rule_cost", "worst_case_cost", "RobustRule", "robust_rule"]


def uncertainty_set(risk_levels: RiskLevels, cells: CellTable | None, gamma: float | None = None,
                    bounds: bool = False, missing: str = "worst_case") -> RiskBounds:
    """The set the robust and safe rules guard against: intervals at one Gamma, or the monotone bounds.

    Parameters
    ----------
    risk_levels : RiskLevels
        Point estimates (the centre of the sensitivity intervals).
    cells : CellTable or None
        The counts per cell and decision level (needed for both kinds).
    gamma : float, optional
        Gamma >= 1 of the sensitivity model (1 gives the point estimate itself).
    bounds : bool
        The monotone-response bounds instead (Manski 1997); ``gamma`` must then be None.
    missing : {'worst_case', 'ignore'}
        Treatment of missing outcome records in the monotone bounds.
    """
    if bounds == (gamma is not None):
        raise InputError("give either a Gamma value or the monotone bounds (one of the two) for a rule that holds under doubt.")
    if gamma is not None and (not np.isfinite(gamma) or gamma < 1):
        raise InputError(f"Gamma must be a finite number >= 1; got {gamma!r}.")
    if cells is None:
        raise InputError(f"the robust and safe rules need the counts per cell and decision level, which {risk_levels.source} "
                         "does not hold; use a case or counts table.")
    if bounds:
        return manski_bounds(cells, risk_levels, missing)
    return sensitivity_bounds(risk_levels, decision_shares(cells), float(gamma))


def check_bounds(bounds: RiskBounds, risk_levels: RiskLevels) -> None:
    """The intervals are of the risk levels' shape and ordered (lower <= upper), else InputError."""
    shape = risk_levels.p.shape
    if bounds.lower.shape != shape or bounds.upper.shape != shape:
        raise InputError(f"the intervals {bounds.key!r} have shape {bounds.lower.shape}; the risk levels have {shape}.")
    bad = ~(bounds.lower <= bounds.upper + 1e-12)
    if bad.any():
        x, j, d = (int(i[0]) for i in np.nonzero(bad))
        raise InputError(f"the intervals {bounds.key!r} have lower > upper at cell {x}, outcome {j}, level {d} "
                         f"({bounds.lower[x, j, d]!r} > {bounds.upper[x, j, d]!r}); expected lower <= upper.")


def worst_case_p(bounds: RiskBounds) -> np.ndarray:
    """The probabilities at which every rule's expected cost is largest over the set, shape (n_cells, J, L).

    p*_d = min_{d' <= d} u_d', never below l_d: the largest non-increasing sequence within the
    box (see the module notes for why it is the worst case of every rule).
    """
    return np.maximum(np.minimum.accumulate(bounds.upper, axis=-1), bounds.lower)


def rule_cost(delta_cells: np.ndarray, p: np.ndarray, weights: np.ndarray, costs: Costs) -> float:
    """Expected cost per case of per-cell decision probabilities (n_cells, L) under probabilities p (n_cells, J, L)."""
    per = costs.expected(p)
    return float((weights[:, None] * delta_cells * per).sum() / weights.sum())


def worst_case_cost(rule: Rule | np.ndarray, risk_levels: RiskLevels, costs: Costs, bounds: RiskBounds) -> float:
    """A rule's largest expected cost per case over the set (at :func:`worst_case_p`)."""
    check_bounds(bounds, risk_levels)
    delta = rule.cell_delta if isinstance(rule, Rule) else np.asarray(rule, dtype=np.float64)
    return rule_cost(delta, worst_case_p(bounds), risk_levels.weights, costs)


@dataclass(frozen=True)
class RobustRule:
    """The rule with the least worst-case expected cost over a set, and what that guarantees.

    Attributes
    ----------
    rule : Rule
    bounds : RiskBounds
        The set (its key, label and assumptions).
    worst_case_cost_per_case : float
        Largest expected cost per case of the rule over the set: no distribution in the set makes
        it costlier.
    point_cost_per_case : float
        Its expected cost under the point estimate (unconfoundedness given the cell).
    reference : Rule or None
        The ordinary optimum it is set against (same constraints), if given.
    reference_worst_case_per_case, reference_point_cost_per_case : float
        The same two figures for the reference (NaN without one).
    constrained : bool
        The constraints were imposed (a linear program was solved).
    unit : str
    notes : tuple of str
    lp : LPSolution or None
    """

    rule: Rule
    bounds: RiskBounds
    worst_case_cost_per_case: float
    point_cost_per_case: float
    reference: Rule | None = None
    reference_worst_case_per_case: float = float("nan")
    reference_point_cost_per_case: float = float("nan")
    constrained: bool = False
    unit: str = ""
    notes: tuple[str, ...] = ()
    lp: Any = None

    @property
    def protection_per_1000(self) -> float:
        """How much lower its worst case is than the reference's, per 1,000 cases (>= 0)."""
        return 1000.0 * (self.reference_worst_case_per_case - self.worst_case_cost_per_case)

    @property
    def premium_per_1000(self) -> float:
        """How much more it costs than the reference under the point estimate, per 1,000 cases (>= 0)."""
        return 1000.0 * (self.point_cost_per_case - self.reference_point_cost_per_case)

    def overview(self) -> dict:
        """The figures as one record (what ``robust_rule.json`` holds besides the assumptions)."""
        return {
            "rule": self.rule.name,
            "set": self.bounds.key,
            "set_label": self.bounds.label,
            "gamma": None if not np.isfinite(self.bounds.gamma) else self.bounds.gamma,
            "constrained": self.constrained,
            "worst_case_cost_per_1000_cases": 1000.0 * self.worst_case_cost_per_case,
            "point_cost_per_1000_cases": 1000.0 * self.point_cost_per_case,
            "reference_rule": None if self.reference is None else self.reference.name,
            "reference_worst_case_cost_per_1000_cases": _none_if_nan(1000.0 * self.reference_worst_case_per_case),
            "reference_point_cost_per_1000_cases": _none_if_nan(1000.0 * self.reference_point_cost_per_case),
            "protection_per_1000_cases": _none_if_nan(self.protection_per_1000),
            "premium_per_1000_cases": _none_if_nan(self.premium_per_1000),
            "cost_unit": self.unit,
        }

    def to_frame(self) -> pd.DataFrame:
        """The rule per rule cell (as :meth:`Rule.to_frame`)."""
        return self.rule.to_frame()

    def output_files(self) -> dict[str, Any]:
        """``robust_rule.csv`` and ``robust_rule.json`` (documented in docs/outputs.md)."""
        return {"robust_rule.csv": self.to_frame(),
                "robust_rule.json": {**self.overview(), "set_note": self.bounds.note, "notes": list(self.notes),
                                     "assumptions": list(self.bounds.assumptions), "cautions": list(CAUTIONS)}}

    def summary(self) -> str:
        lines = [f"{self.rule.name}: least worst-case expected cost over {self.bounds.label} "
                 f"({'with' if self.constrained else 'without'} constraints).",
                 f"  worst case {1000 * self.worst_case_cost_per_case:,.0f} {self.unit} per 1,000 cases; "
                 f"under the point estimate {1000 * self.point_cost_per_case:,.0f}."]
        if self.reference is not None:
            lines.append(f"  {self.reference.name}: worst case {1000 * self.reference_worst_case_per_case:,.0f}, "
                         f"point estimate {1000 * self.reference_point_cost_per_case:,.0f} "
                         f"(the robust rule lowers the worst case by {self.protection_per_1000:,.0f} and costs "
                         f"{self.premium_per_1000:,.0f} more if the point estimate is right).")
        return "\n".join(lines)

    __str__ = summary

    def _repr_html_(self) -> str:
        return "<pre>" + self.summary() + "</pre>" + self.to_frame().to_html(index=False)


def _none_if_nan(x: float):
    return None if x != x else float(x)


def robust_rule(risk_levels: RiskLevels, costs: Costs, bounds: RiskBounds,
                constraints: Sequence[Any | Mapping] = (), columns: Sequence[str] | None = None,
                settings: Any = None, reference: Rule | None = None, name: str | None = None) -> RobustRule:
    """The rule that minimizes the worst-case expected cost over the set ``bounds``.

    Parameters
    ----------
    risk_levels : RiskLevels
        Point estimates: they define the constraints' rows (and the point-estimate figures).
    costs : Costs
    bounds : RiskBounds
        The set (:func:`uncertainty_set`): intervals per cell, outcome kind and level.
    constraints : sequence of ConstraintSpec or dict
        As for :class:`policy.decision.constrained.ConstrainedProblem`; none gives the
        unconstrained robust rule (one level per rule cell, ties to the more lenient).
    columns : sequence of str, optional
        Rule columns (default: the layout's rule columns).
    settings : LPSettings, optional
    reference : Rule, optional
        The ordinary optimum to set it against (its worst case and point cost are reported).
    name : str, optional

    Raises
    ------
    InfeasibleError
        The constraints cannot all hold (the same verdict as for the ordinary optimum).

    Notes
    -----
    Solved as the ordinary problem with the outcomes priced at the worst case p*
    (:func:`worst_case_p`); see the module notes for the dual argument.
    """
    check_bounds(bounds, risk_levels)
    name = name or f"robust rule ({bounds.label})"
    worst = worst_case_p(bounds)
    lp = None
    if constraints:
        from policy.decision.constrained import ConstrainedProblem

        problem = ConstrainedProblem(risk_levels, costs, constraints, columns, settings)
        problem.set_objective_probabilities(worst)
        lp = problem.solve_lp()
        rule = problem.present(lp.delta, name)
        rule = Rule(rule.name, "robust", rule.rule_cells, rule.index, rule.delta, rule.level_values, rule.level_labels,
                    rule.weights, rule.note)
    else:
        rule = optimal_rule(risk_levels.with_p(worst), costs, columns, name)
        rule = Rule(rule.name, "robust", rule.rule_cells, rule.index, rule.delta, rule.level_values, rule.level_labels,
                    rule.weights, rule.note)
    w = risk_levels.weights
    worst_cost = rule_cost(rule.cell_delta, worst, w, costs)
    point_cost = rule_cost(rule.cell_delta, risk_levels.p, w, costs)
    ref_worst = ref_point = float("nan")
    if reference is not None:
        ref_worst = rule_cost(reference.cell_delta, worst, w, costs)
        ref_point = rule_cost(reference.cell_delta, risk_levels.p, w, costs)
    notes = []
    if constraints:
        notes.append("the constraints are evaluated under the point estimate, as for the ordinary constrained optimum")
    return RobustRule(rule, bounds, worst_cost, point_cost, reference, ref_worst, ref_point, bool(constraints),
                      costs.unit, tuple(notes), lp)
