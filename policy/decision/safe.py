"""The safe rule: the least worst-case regret against a baseline rule, certified no worse than it.

For a baseline b (what courts did in one arm, per cell, or a candidate rule) and the set U of
:mod:`policy.decision.robust` (box intervals intersected with monotonicity in d), the safe
rule solves

    R* = min_delta max_{p in U} [cost(delta, p) - cost(b, p)]

subject to the rule's constraints. If b itself satisfies them (always so without constraints
when b is a rule on the same rule cells), delta = b is feasible and R* <= 0: the safe rule is no
worse than the baseline under every distribution in U, and -R* is the improvement guaranteed
under all of them (zero where none can be certified). The worst case separates over cells, so
R* is the sum of per-rule-cell worst-case regrets, each reported on its own.

Notes
-----
The regret is linear in p: the coefficient of p_jd(x) is a_d = c_j w(x) (delta(d | g(x)) -
b(d | x)) / W, of either sign. For one (x, j), the inner maximum of a'p over
l <= p <= u, p_d >= p_{d+1} has the dual (see :mod:`policy.decision.robust`)

    min_{alpha, beta, mu >= 0} u'alpha - l'beta  s.t.  alpha_d - beta_d = a_d - mu_{d-1} + mu_d.

For given mu the best alpha, beta are the positive and negative parts of s_d = a_d - mu_{d-1} +
mu_d, with value sum_d max(u_d s_d, l_d s_d) (u >= l). Scaling mu by c_j w(x) / W and writing
the maximum with one epigraph variable t_d per level gives, for each uncertain (x, j),

    c_j w(x) / W * sum_d t_d,   t_d >= u_d s_d,  t_d >= l_d s_d,
    s_d = delta(d | g(x)) - b(d | x) - mu_{d-1} + mu_d,  mu >= 0,

linear in (delta, t, mu) jointly; by LP duality its minimum over (t, mu) is the inner maximum,
so minimizing over (delta, t, mu) together is one linear program (solved with HiGHS). Pairs
(x, j) whose interval is a point (Gamma = 1, structural zeros) or whose cost c_j is zero enter
the objective directly. Without monotonicity (``monotone=False``) mu is dropped and the set is
the box alone.

References
----------
Manski, C. F. (2004). Statistical treatment rules for heterogeneous populations. Econometrica
72(4), 1221-1246. (Treatment choice by minimax regret.)
Stoye, J. (2009). Minimax regret treatment choice with finite samples. Journal of Econometrics
151(1), 70-81.
Manski, C. F. (1997). Monotone treatment response. Econometrica 65(6), 1311-1334. (The bounds.)
Rosenbaum, P. R. (2002). Observational Studies, 2nd ed., chapter 4. Springer. (Gamma.)
Ben-Tal, A. and Nemirovski, A. (1999). Robust solutions of uncertain linear programs.
Operations Research Letters 25(1), 1-13.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from policy.cautions import CAUTIONS
from policy.decision.constrained.highs import _highs_iterations, _highs_run, _status_error, load_lp, new_highs
from policy.decision.constrained.settings import FEASIBILITY_TOLERANCE, LPSettings
from policy.decision.costs import Costs
from policy.decision.robust import check_bounds, rule_cost
from policy.decision.rules import Rule
from policy.errors import InputError, SolverError
from policy.estimation.bounds import RiskBounds
from policy.estimation.strata import RiskLevels

__all__ = ["RegretProgram", "worst_case_regret", "SafeRule", "safe_rule"]

#: a worst-case regret within this of zero (cost units per case, relative to the costs' scale) counts as zero
CERTIFY_TOLERANCE = 1e-7


class RegretProgram:
    """The worst-case regret against a baseline as linear-program data over (delta, t, mu).

    Parameters
    ----------
    risk_levels : RiskLevels
    costs : Costs
    bounds : RiskBounds
    baseline : ndarray of shape (n_cells, L)
        The baseline's decision probabilities in every cell.
    index : ndarray of shape (n_cells,)
        Rule cell of each cell; ``n_groups`` rule cells.
    monotone : bool
        Intersect the box with monotonicity in d (default true).

    Attributes
    ----------
    n_delta, n_cols : int
        Decision-probability columns (G * L, first) and all columns.
    c : ndarray of shape (n_cols,)
        Objective (per case): decision-cost and point-interval parts on delta, c_j w / W on t.
    constant : ndarray of shape (G,)
        The baseline's share of the regret of each rule cell (enters no column).
    A, lo, hi : the dual rows t_d - v_d (delta_d - mu_{d-1} + mu_d) >= -v_d b_d, v in {u, l}.
    """

    def __init__(self, risk_levels: RiskLevels, costs: Costs, bounds: RiskBounds, baseline: np.ndarray,
                 index: np.ndarray, n_groups: int, monotone: bool = True):
        check_bounds(bounds, risk_levels)
        b = np.asarray(baseline, dtype=np.float64)
        n, J, L = risk_levels.p.shape
        if b.shape != (n, L):
            raise InputError(f"the baseline rule has decision probabilities of shape {b.shape}; the cells need {(n, L)}.")
        w = np.asarray(risk_levels.weights, dtype=np.float64)
        W = float(w.sum())
        G = int(n_groups)
        oc = np.asarray(costs.outcome, dtype=np.float64)
        lo_p, hi_p = bounds.lower, bounds.upper
        self.G, self.L, self.index = G, L, np.asarray(index)
        # uncertain pairs (x, j): a cost, a case, and an interval of positive width somewhere
        width = (hi_p - lo_p).max(axis=-1)
        uncertain = (oc[None, :] > 0) & (w[:, None] > 0) & (width > 1e-12)
        fixed = ~uncertain
        # decision costs and point-interval outcome parts enter the objective on delta directly
        per_fixed = costs.decision + np.einsum("xjd,j->xd", np.where(fixed[..., None], lo_p, 0.0), oc)  # (n, L)
        scaled = w[:, None] * per_fixed / W
        obj_delta = np.stack([np.bincount(self.index, weights=scaled[:, d], minlength=G) for d in range(L)], axis=1)
        self.constant = -np.bincount(self.index, weights=(scaled * b).sum(axis=1), minlength=G)
        xs, js = np.nonzero(uncertain)
        m = len(xs)
        self.pairs = (xs, js)
        self.n_delta = G * L
        self.n_t = m * L
        self.n_mu = m * (L - 1) if monotone else 0
        self.n_cols = self.n_delta + self.n_t + self.n_mu
        scale = oc[js] * w[xs] / W  # (m,)
        self.c = np.concatenate([obj_delta.reshape(-1), np.repeat(scale, L), np.zeros(self.n_mu)])
        self.t_scale = scale
        # rows: for v in (u, l), k, d
        k = np.repeat(np.arange(m), L)
        d = np.tile(np.arange(L), m)
        g = self.index[xs][k]
        rows, cols, vals, rlo = [], [], [], []
        for side, v_all in enumerate((hi_p, lo_p)):
            v = v_all[xs[k], js[k], d]
            r = side * m * L + np.arange(m * L)
            rows += [r, r]
            cols += [self.n_delta + k * L + d, g * L + d]
            vals += [np.ones(m * L), -v]
            if monotone and L > 1:
                has_prev = d >= 1
                rows.append(r[has_prev])
                cols.append(self.n_delta + self.n_t + k[has_prev] * (L - 1) + d[has_prev] - 1)
                vals.append(v[has_prev])
                has_next = d <= L - 2
                rows.append(r[has_next])
                cols.append(self.n_delta + self.n_t + k[has_next] * (L - 1) + d[has_next])
                vals.append(-v[has_next])
            rlo.append(-v * b[xs[k], d])
        n_rows = 2 * m * L
        self.A = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                               shape=(n_rows, self.n_cols))
        self.lo = np.concatenate(rlo) if rlo else np.zeros(0)
        self.hi = np.full(n_rows, np.inf)
        self.col_lo = np.concatenate([np.zeros(self.n_delta), np.full(self.n_t, -np.inf), np.zeros(self.n_mu)])
        self.col_hi = np.concatenate([np.ones(self.n_delta), np.full(self.n_t, np.inf), np.full(self.n_mu, np.inf)])

    def per_rule_cell(self, x: np.ndarray) -> np.ndarray:
        """Worst-case regret per case contributed by each rule cell at a solution x, shape (G,).

        The set is a product over cells, so the worst cases of all rule cells are attained at
        once: these sum to the total worst-case regret.
        """
        G, L = self.G, self.L
        delta_part = (self.c[:self.n_delta] * x[:self.n_delta]).reshape(G, L).sum(axis=1)
        t = x[self.n_delta:self.n_delta + self.n_t].reshape(-1, L).sum(axis=1) * self.t_scale
        g_of_pair = self.index[self.pairs[0]]
        return delta_part + self.constant + np.bincount(g_of_pair, weights=t, minlength=G)

    def solve(self, extra_rows: tuple | None = None, fixed_delta: np.ndarray | None = None,
              settings: LPSettings | None = None) -> tuple[str, np.ndarray | None, float]:
        """Minimize the worst-case regret; returns (HiGHS status name, x, seconds).

        ``extra_rows`` (A, lower, upper) over the delta columns adds the rule's own rows (the
        simplex rows first); ``fixed_delta`` (G, L) fixes delta, leaving the inner worst case.
        """
        settings = settings or LPSettings()
        col_lo, col_hi = self.col_lo.copy(), self.col_hi.copy()
        if fixed_delta is not None:
            col_lo[:self.n_delta] = col_hi[:self.n_delta] = np.asarray(fixed_delta, dtype=np.float64).reshape(-1)
            blocks, lo, hi = [self.A], [self.lo], [self.hi]
        else:
            if extra_rows is None:
                simplex = sp.csr_matrix((np.ones(self.n_delta), (np.repeat(np.arange(self.G), self.L), np.arange(self.n_delta))),
                                        shape=(self.G, self.n_delta))
                extra_rows = (simplex, np.ones(self.G), np.ones(self.G))
            E, elo, ehi = extra_rows
            E = sp.hstack([sp.csr_matrix(E), sp.csr_matrix((E.shape[0], self.n_cols - self.n_delta))], format="csr")
            blocks, lo, hi = [E, self.A], [elo, self.lo], [ehi, self.hi]
        A = sp.vstack(blocks, format="csc")
        h = new_highs()
        if settings.time_limit is not None:
            h.setOptionValue("time_limit", float(settings.time_limit))
        load_lp(h, self.c, A, np.concatenate(lo), np.concatenate(hi), col_lo, col_hi)
        status, seconds = _highs_run(h, settings.first_method(self.n_cols))
        if status != "kOptimal":
            return status, None, seconds
        self.iterations = _highs_iterations(h)
        return status, np.asarray(h.getSolution().col_value), seconds


@dataclass(frozen=True)
class WorstCaseRegret:
    """A rule's largest regret against a baseline over a set, in total and per rule cell (per case)."""

    total: float
    per_rule_cell: np.ndarray


def worst_case_regret(rule: Rule | np.ndarray, baseline: Rule | np.ndarray, risk_levels: RiskLevels, costs: Costs,
                      bounds: RiskBounds, monotone: bool = True) -> WorstCaseRegret:
    """max over the set of [cost(rule, p) - cost(baseline, p)] per case, by the dual program with the rule fixed.

    Parameters
    ----------
    rule, baseline : Rule or ndarray of shape (n_cells, L)
        Per-cell decision probabilities are accepted for either.
    risk_levels, costs, bounds, monotone
        As for :func:`safe_rule`.

    Returns
    -------
    WorstCaseRegret
        ``per_rule_cell`` over the rule's rule cells (over cells when an array is given).
    """
    delta = rule.cell_delta if isinstance(rule, Rule) else np.asarray(rule, dtype=np.float64)
    b = baseline.cell_delta if isinstance(baseline, Rule) else np.asarray(baseline, dtype=np.float64)
    n = risk_levels.n_cells
    program = RegretProgram(risk_levels, costs, bounds, b, np.arange(n), n, monotone)
    status, x, _ = program.solve(fixed_delta=delta)
    if x is None:
        raise _status_error(status, "the worst-case regret's linear program")
    per_cell = program.per_rule_cell(x)
    if isinstance(rule, Rule):
        per = np.bincount(rule.index, weights=per_cell, minlength=rule.n_rule_cells)
    else:
        per = per_cell
    return WorstCaseRegret(float(per_cell.sum()), per)


@dataclass(frozen=True)
class SafeRule:
    """The rule with the least worst-case regret against a baseline, and the improvement it guarantees.

    Attributes
    ----------
    rule : Rule
    baseline : Rule
    bounds : RiskBounds
    worst_case_regret_per_case : float
        R*: the largest amount per case by which the rule can cost more than the baseline under
        any distribution in the set (<= 0 when certified).
    per_rule_cell : ndarray of shape (n_rule_cells,)
        Each rule cell's part of R* (per case of all cases).
    point_regret_per_case : float
        cost(rule) - cost(baseline) under the point estimate.
    monotone : bool
        The set includes monotonicity in d.
    constrained : bool
    unit : str
    notes : tuple of str
    """

    rule: Rule
    baseline: Rule
    bounds: RiskBounds
    worst_case_regret_per_case: float
    per_rule_cell: np.ndarray
    point_regret_per_case: float
    monotone: bool = True
    constrained: bool = False
    unit: str = ""
    notes: tuple[str, ...] = ()
    seconds: float = 0.0

    @property
    def certified(self) -> bool:
        """No distribution in the set makes the rule costlier than the baseline."""
        return self.worst_case_regret_per_case <= self._tol

    @property
    def _tol(self) -> float:
        return CERTIFY_TOLERANCE * max(1.0, abs(self.point_regret_per_case))

    @property
    def guaranteed_improvement_per_1000(self) -> float:
        """-1000 R* where certified, else 0: saving per 1,000 cases under every distribution in the set."""
        gain = -self.worst_case_regret_per_case
        return 1000.0 * gain if gain > self._tol else 0.0

    def overview(self) -> dict:
        return {
            "rule": self.rule.name,
            "baseline": self.baseline.name,
            "set": self.bounds.key,
            "set_label": self.bounds.label,
            "gamma": None if not np.isfinite(self.bounds.gamma) else self.bounds.gamma,
            "monotone": self.monotone,
            "constrained": self.constrained,
            "certified": self.certified,
            "worst_case_regret_per_1000_cases": 1000.0 * self.worst_case_regret_per_case,
            "guaranteed_improvement_per_1000_cases": self.guaranteed_improvement_per_1000,
            "point_regret_per_1000_cases": 1000.0 * self.point_regret_per_case,
            "rule_cells_with_certified_improvement": int((self.per_rule_cell < -self._tol).sum()),
            "cost_unit": self.unit,
        }

    def to_frame(self) -> pd.DataFrame:
        """The rule per rule cell (as :meth:`Rule.to_frame`) with ``worst_case_regret_per_1000_cases``
        (this rule cell's part of the worst-case regret, per 1,000 cases of all cases) and
        ``guaranteed_improvement_per_1000_cases`` (its negative where below zero, else 0)."""
        out = self.rule.to_frame()
        part = 1000.0 * self.per_rule_cell
        out["worst_case_regret_per_1000_cases"] = part
        out["guaranteed_improvement_per_1000_cases"] = np.where(part < -1000.0 * self._tol, -part, 0.0)
        return out

    def output_files(self) -> dict[str, Any]:
        """``safe_rule.csv`` and ``safe_rule.json`` (documented in docs/outputs.md)."""
        return {"safe_rule.csv": self.to_frame(),
                "safe_rule.json": {**self.overview(), "set_note": self.bounds.note, "notes": list(self.notes),
                                   "assumptions": list(self.bounds.assumptions), "cautions": list(CAUTIONS)}}

    def summary(self) -> str:
        head = (f"{self.rule.name}: least worst-case regret against {self.baseline.name} over {self.bounds.label}"
                f"{' and monotonicity' if self.monotone else ''}.")
        if self.certified:
            body = (f"  certified no worse than the baseline under every distribution in the set; guaranteed saving "
                    f"{self.guaranteed_improvement_per_1000:,.0f} {self.unit} per 1,000 cases "
                    f"({int((self.per_rule_cell < -self._tol).sum())} rule cells improve for certain); "
                    f"under the point estimate it saves {max(0.0, -1000 * self.point_regret_per_case):,.0f}"
                    + ("" if self.point_regret_per_case <= self._tol else
                       f" (it costs {1000 * self.point_regret_per_case:,.0f} more: the price of the guarantee)") + ".")
        else:
            body = (f"  NOT certified: under some distribution in the set it costs up to "
                    f"{1000 * self.worst_case_regret_per_case:,.0f} {self.unit} per 1,000 cases more than the baseline "
                    "(the rule's constraints or rule cells exclude the baseline itself).")
        return head + "\n" + body

    __str__ = summary

    def _repr_html_(self) -> str:
        return "<pre>" + self.summary() + "</pre>" + self.to_frame().to_html(index=False)


def safe_rule(risk_levels: RiskLevels, costs: Costs, bounds: RiskBounds, baseline: Rule,
              constraints: Sequence[Any | Mapping] = (), columns: Sequence[str] | None = None,
              settings: LPSettings | None = None, monotone: bool = True, name: str | None = None) -> SafeRule:
    """The rule that minimizes the worst-case regret against ``baseline`` over the set ``bounds``.

    Parameters
    ----------
    risk_levels : RiskLevels
        Point estimates (they define the constraints' rows and the point-estimate figures).
    costs : Costs
    bounds : RiskBounds
        The set (:func:`policy.decision.robust.uncertainty_set`).
    baseline : Rule
        On any rule cells of the same cells (an observed arm's per-cell rule, a candidate, the aid).
    constraints, columns, settings
        As for :class:`policy.decision.constrained.ConstrainedProblem`.
    monotone : bool
        Intersect the box with monotonicity in d (default true; it still contains every
        distribution consistent with the data, and certifies more).
    name : str, optional

    Raises
    ------
    InfeasibleError
        The constraints cannot all hold.
    SolverError
    """
    from policy.decision.constrained import ConstrainedProblem

    check_bounds(bounds, risk_levels)
    if not isinstance(baseline, Rule):
        raise InputError(f"the baseline of a safe rule must be a Rule; got {type(baseline).__name__}.")
    name = name or f"safe rule against {baseline.name} ({bounds.label})"
    problem = ConstrainedProblem(risk_levels, costs, constraints, columns, settings)
    program = RegretProgram(risk_levels, costs, bounds, baseline.cell_delta, problem.index, problem.n_rule_cells, monotone)
    status, x, seconds = program.solve(extra_rows=problem.rows(), settings=problem.settings)
    if status in ("kInfeasible", "kUnboundedOrInfeasible"):
        problem.solve_lp()  # the ordinary program has the same rows: it names the conflicting constraints
        raise SolverError(f"the safe rule's linear program was reported {status}, though the constraints can hold.")
    if x is None:
        raise _status_error(status, "the safe rule's linear program")
    G, L = problem.n_rule_cells, risk_levels.n_levels
    raw = x[:G * L].reshape(G, L)
    if raw.min() < -FEASIBILITY_TOLERANCE or np.abs(raw.sum(axis=1) - 1).max() > FEASIBILITY_TOLERANCE:
        raise SolverError("the safe rule's solver returned decision probabilities that are not a distribution; no rule is reported.")
    delta = np.maximum(raw, 0.0)
    delta /= delta.sum(axis=1, keepdims=True)
    per_group = program.per_rule_cell(x)
    rule = problem.present(delta, name)
    rule = Rule(rule.name, "safe", rule.rule_cells, rule.index, rule.delta, rule.level_values, rule.level_labels,
                rule.weights, rule.note)
    if len(rule.rule_cells) != G:  # coarsened by a group-blind constraint: parts summed over the merged rule cells
        fine_to_coarse = np.zeros(G, dtype=np.int64)
        fine_to_coarse[problem.index] = rule.index
        per_group = np.bincount(fine_to_coarse, weights=per_group, minlength=rule.n_rule_cells)
    w = risk_levels.weights
    point = rule_cost(rule.cell_delta, risk_levels.p, w, costs) - rule_cost(baseline.cell_delta, risk_levels.p, w, costs)
    notes = []
    if constraints:
        notes.append("the constraints are evaluated under the point estimate, as for the ordinary constrained optimum")
    result = SafeRule(rule, baseline, bounds, float(per_group.sum()), per_group, point, monotone, bool(constraints),
                      costs.unit, tuple(notes), seconds)
    if not result.certified:
        result = SafeRule(rule, baseline, bounds, result.worst_case_regret_per_case, per_group, point, monotone,
                          bool(constraints), costs.unit,
                          result.notes + ("no rule on these rule cells within the constraints is certified no worse than "
                                          "the baseline: the baseline varies within rule cells or breaks a constraint",),
                          seconds)
    return result

