"""The safe rule: the least worst-case regret against a baseline rule, certified no worse than it.

For a baseline b (what courts did in one arm, per cell, or a candidate rule) and the set U of
:mod:`policy.decision.robust` (box intervals intersected with monotonicity in d), the safe
rule solves

    R* = min_delta max_{p in U} [cost(delta, p) - cost(b, p)]

subject to the rule's constraints. If b itself satisfies them, delta = b is feasible (a
per-cell baseline that varies within the rule cells is reached by letting each rule cell leave
a share of its cases to the baseline's practice, see :class:`RegretProgram`) and R* <= 0: the
safe rule is no worse than the baseline under every distribution in U, and -R* is the
improvement guaranteed under all of them (zero where none can be certified). The worst case
separates over cells, so R* is the sum of per-rule-cell worst-case regrets, each reported.

Notes
-----
The regret is linear in p: the coefficient of p_jd(x) is a_d = c_j w(x) (delta(d | g(x)) -
b(d | x)) / W, of either sign. For one (x, j), the inner maximum of a'p over
l <= p <= u, p_d >= p_{d+1} has the dual (see :mod:`policy.decision.robust`)

    min_{alpha, beta, mu >= 0} u'alpha - l'beta  s.t.  alpha_d - beta_d = a_d - mu_{d-1} + mu_d.

For given mu the best alpha, beta are the positive and negative parts of s_d = a_d - mu_{d-1} +
mu_d, with value sum_d (u_d s_d^+ - l_d s_d^-) (u >= l). Scaling mu by c_j w(x) / W and
splitting s = s+ - s- (both >= 0) gives, for each uncertain (x, j), the columns s+, s-, mu >= 0,
the objective c_j w(x) / W sum_d (u_d s+_d - l_d s-_d) and the equality rows

    s+_d - s-_d - delta(d | g(x)) + mu_{d-1} - mu_d = -b(d | x),

linear in (delta, s+, s-, mu) jointly; by LP duality its minimum over (s+, s-, mu) is the inner
maximum, so minimizing over all of them together is one linear program (solved with HiGHS).
Pairs (x, j) whose interval is a point (Gamma = 1, structural zeros) or whose cost c_j is zero
enter the objective directly. Without monotonicity (``monotone=False``) mu is dropped and the
set is the box alone.

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

from dataclasses import dataclass, replace
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

#: primal and dual feasibility tolerance of the HiGHS solves of the regret program
FEASIBILITY = 1e-9

#: how the note saying why a safe rule is not certified begins
NOT_CERTIFIED = "no rule within the constraints is certified no worse than the baseline"

#: a worst-case regret within this share of the baseline's expected cost per case counts as zero
CERTIFY_TOLERANCE = 1e-9


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
    keep : bool
        Add one column per rule cell, lambda_g in [0, 1]: the share of the rule cell's cases left
        to the baseline's own practice, so that a cell's decision probabilities are
        nu(d | g) + lambda_g b(d | x) (the delta columns then hold nu; each rule cell's nu and
        lambda sum to 1). Lets a rule on coarse rule cells keep a per-cell baseline.

    Attributes
    ----------
    n_delta, n_keep, n_cols : int
        Decision-probability columns (G * L, first), keep columns (G or 0, next) and all columns.
    c : ndarray of shape (n_cols,)
        Objective (per case): decision-cost and point-interval parts on delta; c_j w / W times the
        upper ends on s+ and minus the lower ends on s-.
    constant : ndarray of shape (G,)
        The baseline's share of the regret of each rule cell (enters no column).
    A, lo, hi : the dual rows s+_d - s-_d - delta_d + mu_{d-1} - mu_d = -b_d (equalities), one per
        uncertain (cell, outcome kind) and level.
    """

    def __init__(self, risk_levels: RiskLevels, costs: Costs, bounds: RiskBounds, baseline: np.ndarray,
                 index: np.ndarray, n_groups: int, monotone: bool = True, keep: bool = False):
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
        self.n_keep = G if keep else 0
        self.n_t = 2 * m * L
        self.n_mu = m * (L - 1) if monotone else 0
        self.n_cols = self.n_delta + self.n_keep + self.n_t + self.n_mu
        T0 = self.n_delta + self.n_keep
        M0 = T0 + self.n_t
        scale = oc[js] * w[xs] / W  # (m,)
        k = np.repeat(np.arange(m), L)
        d = np.tile(np.arange(L), m)
        u = hi_p[xs[k], js[k], d]
        low = lo_p[xs[k], js[k], d]
        keep_obj = -self.constant if keep else np.zeros(0)
        # s+ priced at the upper end, s- credited at the lower end
        self.c = np.concatenate([obj_delta.reshape(-1), keep_obj, scale[k] * u, -scale[k] * low, np.zeros(self.n_mu)])
        # one equality row per (pair k, level d): s+ - s- - delta(d|g) [- lambda_g b] + mu_{d-1} - mu_d = -b(d|x)
        g = self.index[xs][k]
        r = np.arange(m * L)
        rows = [r, r, r]
        cols = [T0 + k * L + d, T0 + m * L + k * L + d, g * L + d]
        vals = [np.ones(m * L), -np.ones(m * L), -np.ones(m * L)]
        bx = b[xs[k], d]
        if keep:
            rows.append(r)
            cols.append(self.n_delta + g)
            vals.append(-bx)
        if monotone and L > 1:
            has_prev = d >= 1
            rows.append(r[has_prev])
            cols.append(M0 + k[has_prev] * (L - 1) + d[has_prev] - 1)
            vals.append(np.ones(int(has_prev.sum())))
            has_next = d <= L - 2
            rows.append(r[has_next])
            cols.append(M0 + k[has_next] * (L - 1) + d[has_next])
            vals.append(-np.ones(int(has_next.sum())))
        n_rows = m * L
        self.A = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                               shape=(n_rows, self.n_cols))
        self.lo = -bx
        self.hi = -bx.copy()
        self.col_lo = np.zeros(self.n_cols)
        self.col_hi = np.concatenate([np.ones(self.n_delta + self.n_keep), np.full(self.n_t + self.n_mu, np.inf)])

    def per_rule_cell(self, x: np.ndarray) -> np.ndarray:
        """Worst-case regret per case contributed by each rule cell at a solution x, shape (G,).

        The set is a product over cells, so the worst cases of all rule cells are attained at
        once: these sum to the total worst-case regret.
        """
        G, L = self.G, self.L
        delta_part = (self.c[:self.n_delta] * x[:self.n_delta]).reshape(G, L).sum(axis=1)
        if self.n_keep:
            delta_part = delta_part + self.c[self.n_delta:self.n_delta + G] * x[self.n_delta:self.n_delta + G]
        T0 = self.n_delta + self.n_keep
        m = len(self.pairs[0])
        t = (self.c[T0:T0 + self.n_t] * x[T0:T0 + self.n_t]).reshape(2, m, L).sum(axis=(0, 2))
        g_of_pair = self.index[self.pairs[0]]
        return delta_part + self.constant + np.bincount(g_of_pair, weights=t, minlength=G)

    def solve(self, extra_rows: tuple | None = None, fixed: np.ndarray | None = None,
              settings: LPSettings | None = None) -> tuple[str, np.ndarray | None, float]:
        """Minimize the worst-case regret; returns (HiGHS status name, x, seconds).

        ``extra_rows`` (A, lower, upper) over the delta and keep columns adds the rule's own rows
        (the simplex rows first); ``fixed`` fixes the delta columns (G * L values, keep columns
        then 0) or the delta and keep columns (G * L + G values), leaving the inner worst case.
        """
        settings = settings or LPSettings()
        col_lo, col_hi = self.col_lo.copy(), self.col_hi.copy()
        if fixed is not None:
            values = np.asarray(fixed, dtype=np.float64).reshape(-1)
            n_fixed = self.n_delta + self.n_keep
            values = np.concatenate([values, np.zeros(n_fixed - len(values))])
            col_lo[:n_fixed] = col_hi[:n_fixed] = values
            blocks, lo, hi = [self.A], [self.lo], [self.hi]
        else:
            if extra_rows is None:
                simplex = sp.csr_matrix((np.ones(self.n_delta), (np.repeat(np.arange(self.G), self.L), np.arange(self.n_delta))),
                                        shape=(self.G, self.n_delta))
                if self.n_keep:
                    simplex = sp.hstack([simplex, sp.identity(self.G, format="csr")], format="csr")
                extra_rows = (simplex, np.ones(self.G), np.ones(self.G))
            E, elo, ehi = extra_rows
            E = sp.csr_matrix(E)
            E = sp.hstack([E, sp.csr_matrix((E.shape[0], self.n_cols - E.shape[1]))], format="csr")
            blocks, lo, hi = [E, self.A], [elo, self.lo], [ehi, self.hi]
        A = sp.vstack(blocks, format="csc")
        h = new_highs()
        if settings.time_limit is not None:
            h.setOptionValue("time_limit", float(settings.time_limit))
        # the certificate compares a worst case with 0: tighter than HiGHS's default 1e-7
        h.setOptionValue("primal_feasibility_tolerance", FEASIBILITY)
        h.setOptionValue("dual_feasibility_tolerance", FEASIBILITY)
        load_lp(h, self.c, A, np.concatenate(lo), np.concatenate(hi), col_lo, col_hi)
        status, seconds = _highs_run(h, settings.first_method(self.n_cols))
        if status != "kOptimal":
            return status, None, seconds
        self.iterations = _highs_iterations(h)
        x = np.asarray(h.getSolution().col_value)
        return status, x, seconds


def chain_box_maximum(a: np.ndarray, lower: np.ndarray, upper: np.ndarray, monotone: bool = True,
                      grid: tuple[np.ndarray, list[np.ndarray]] | None = None) -> np.ndarray:
    """max a'p over {lower <= p <= upper, p_0 >= p_1 >= ...}, for many chain-boxes at once.

    Parameters
    ----------
    a, lower, upper : ndarray of shape (m, L)
    monotone : bool
        Without it, the box alone: sum_d max(a_d l_d, a_d u_d).
    grid : tuple, optional
        :func:`chain_box_grid` of these boxes, when many objectives share them (``lower`` and
        ``upper`` are then not read with ``monotone``).

    Returns
    -------
    ndarray of shape (m,)

    Notes
    -----
    Every extreme point of the set has its coordinates among the 2L bounds (a coordinate not at a
    bound of its own is tied to a neighbour, and a run of tied coordinates sits at a bound of one
    of them), so the maximum is taken over non-increasing sequences with values in that finite
    set, by dynamic programming along d: best_d(v) = a_d v + max_{v' >= v} best_{d-1}(v') for v in
    [l_d, u_d]. O(m L^2), vectorized over the m boxes (common practice: dynamic programming over
    a chain).
    """
    if not monotone:
        return np.maximum(a * lower, a * upper).sum(axis=-1)
    values, allowed_at = chain_box_grid(lower, upper) if grid is None else grid
    best = None
    for d in range(a.shape[-1]):
        allowed = allowed_at[d]
        if best is None:
            reach = np.zeros_like(values)
        else:  # the best over v' >= v: a suffix maximum along the sorted values
            reach = np.flip(np.maximum.accumulate(np.flip(best, axis=-1), axis=-1), axis=-1)
        best = np.where(allowed, reach + a[:, d:d + 1] * values, -np.inf)
    return best.max(axis=-1)


def chain_box_grid(lower: np.ndarray, upper: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
    """The values an extreme point of each chain-box can take, sorted (m, 2L), and which of them
    each coordinate d allows (L masks of shape (m, 2L)): what :func:`chain_box_maximum` needs
    besides the objective."""
    values = np.sort(np.concatenate([lower, upper], axis=-1), axis=-1)   # (m, 2L)
    return values, [(values >= lower[:, d:d + 1] - 1e-15) & (values <= upper[:, d:d + 1] + 1e-15)
                    for d in range(lower.shape[-1])]


def regret_parts(delta_cells: np.ndarray, baseline: np.ndarray, risk_levels: RiskLevels, costs: Costs,
                 bounds: RiskBounds, monotone: bool = True) -> np.ndarray:
    """Each cell's part of the worst-case regret (per case of all cases), shape (n_cells,), in closed form.

    The same figure the regret program's dual gives (:func:`worst_case_regret`), by
    :func:`chain_box_maximum` for every (cell, outcome kind).
    """
    w = np.asarray(risk_levels.weights, dtype=np.float64)
    W = w.sum()
    diff = np.asarray(delta_cells, dtype=np.float64) - np.asarray(baseline, dtype=np.float64)   # (n, L)
    n, J, L = risk_levels.p.shape
    a = (w[:, None, None] * costs.outcome[None, :, None] * diff[:, None, :] / W).reshape(n * J, L)
    inner = chain_box_maximum(a, bounds.lower.reshape(n * J, L), bounds.upper.reshape(n * J, L), monotone).reshape(n, J)
    return (w[:, None] * diff * costs.decision).sum(axis=1) / W + inner.sum(axis=1)


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
    status, x, _ = program.solve(fixed=delta)
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
        The safe rule as scored (per cell where it keeps a per-cell baseline's practice).
    baseline : Rule
    bounds : RiskBounds
    rule_cells : DataFrame
        The rule cells it was chosen on.
    levels : ndarray of shape (n_rule_cells, L)
        Share of each rule cell's cases given each level by the rule itself.
    keep : ndarray of shape (n_rule_cells,)
        Share of each rule cell's cases left to the baseline's practice (0 without that option).
    cases : ndarray of shape (n_rule_cells,)
    per_rule_cell : ndarray of shape (n_rule_cells,)
        Each rule cell's part of the worst-case regret (per case of all cases); they sum to it.
    worst_case_regret_per_case : float
        R*: the largest amount per case by which the rule can cost more than the baseline under
        any distribution in the set (<= 0 when certified).
    point_regret_per_case : float
        cost(rule) - cost(baseline) under the point estimate.
    monotone, constrained : bool
    unit : str
    notes : tuple of str
    seconds : float
        Time in the solver.
    cost_scale : float
        The baseline's expected cost per case under the point estimate: worst-case regrets within
        :data:`CERTIFY_TOLERANCE` of it count as zero (solver tolerance).
    """

    rule: Rule
    baseline: Rule
    bounds: RiskBounds
    rule_cells: pd.DataFrame
    levels: np.ndarray
    keep: np.ndarray
    cases: np.ndarray
    per_rule_cell: np.ndarray
    worst_case_regret_per_case: float
    point_regret_per_case: float
    monotone: bool = True
    constrained: bool = False
    unit: str = ""
    notes: tuple[str, ...] = ()
    seconds: float = 0.0
    cost_scale: float = 1.0

    @property
    def _tol(self) -> float:
        return CERTIFY_TOLERANCE * max(1.0, self.cost_scale)

    @property
    def certified(self) -> bool:
        """No distribution in the set makes the rule costlier than the baseline."""
        return self.worst_case_regret_per_case <= self._tol

    @property
    def guaranteed_improvement_per_1000(self) -> float:
        """-1000 R* where that is positive, else 0: the saving per 1,000 cases under every distribution in the set."""
        gain = -self.worst_case_regret_per_case
        return 1000.0 * gain if gain > self._tol else 0.0

    @property
    def improved_rule_cells(self) -> int:
        return int((self.per_rule_cell < -self._tol).sum())

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
            "rule_cells": int(len(self.per_rule_cell)),
            "rule_cells_with_certified_improvement": self.improved_rule_cells,
            "share_of_cases_left_to_baseline": float((self.keep * self.cases).sum() / self.cases.sum()),
            "cost_unit": self.unit,
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per rule cell: its columns, ``cases``, ``keep_baseline`` (share of its cases left to
        the baseline's practice), ``share_<level>`` (share given each level by the rule),
        ``worst_case_regret_per_1000_cases`` (its part of the worst-case regret, per 1,000 cases of
        all cases) and ``guaranteed_improvement_per_1000_cases`` (the negative of that part where
        below zero, else 0)."""
        out = self.rule_cells.reset_index(drop=True).copy()
        for c in out.columns:
            out[c] = out[c].astype(object)
        out["cases"] = self.cases
        out["keep_baseline"] = self.keep
        for d, value in enumerate(self.rule.level_values):
            out[f"share_{value}"] = self.levels[:, d]
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
        kept = self.overview()["share_of_cases_left_to_baseline"]
        if self.certified:
            body = (f"  certified no worse than the baseline under every distribution in the set; guaranteed saving "
                    f"{self.guaranteed_improvement_per_1000:,.0f} {self.unit} per 1,000 cases "
                    f"({self.improved_rule_cells} of {len(self.per_rule_cell)} rule cells improve for certain"
                    + (f"; {kept:.1%} of cases left to the baseline's practice" if self.keep.any() else "") + "); "
                    f"under the point estimate it saves {max(0.0, -1000 * self.point_regret_per_case):,.0f}"
                    + ("" if self.point_regret_per_case <= self._tol else
                       f" (it costs {1000 * self.point_regret_per_case:,.0f} more: the price of the guarantee)") + ".")
        else:
            why = [n.split(": ", 1)[1] for n in self.notes if n.startswith(NOT_CERTIFIED)]
            body = (f"  NOT certified: under some distribution in the set it costs up to "
                    f"{1000 * self.worst_case_regret_per_case:,.0f} {self.unit} per 1,000 cases more than the baseline"
                    + (f" ({why[0]})." if why else "."))
        return head + "\n" + body

    __str__ = summary

    def _repr_html_(self) -> str:
        return "<pre>" + self.summary() + "</pre>" + self.to_frame().to_html(index=False)


def _keep_rows(problem, baseline: np.ndarray, risk_levels: RiskLevels) -> sp.csr_matrix | None:
    """Coefficients of the keep columns in the rule's rows, or None where the rows cannot take them.

    A row's value is linear in the per-cell decision probabilities; a cell-level problem (every
    cell its own rule cell) with the same constraints gives the per-cell coefficients, valid when
    its rows are those of the rule-cell problem (A_cell P = A_rule, P spreading each rule cell's
    probabilities over its cells); rows that depend on the rule cells themselves (a group-blind
    or monotone-in-score constraint) fail that check. Column g of the result is
    sum_{x in g} sum_d A_cell[:, x L + d] b(d | x), with the simplex rows' identity.
    """
    from policy.decision.constrained import ConstrainedProblem

    G, L, n = problem.n_rule_cells, risk_levels.n_levels, risk_levels.n_cells
    A_rule, _, _ = problem.rows()
    if A_rule.shape[0] == G:   # no constraint rows: the simplex rows only
        return sp.identity(G, format="csr")
    try:
        cell_problem = ConstrainedProblem(risk_levels, problem.base_costs, problem.specs,
                                          list(risk_levels.layout.frame.columns), problem.settings)
    except InputError:
        return None
    A_cell, _, _ = cell_problem.rows()
    if A_cell.shape[0] - n != A_rule.shape[0] - G:
        return None
    spread = sp.csr_matrix((np.ones(n * L), (np.arange(n * L), (problem.index[:, None] * L + np.arange(L)).reshape(-1))),
                           shape=(n * L, G * L))
    rows_cell = A_cell[n:] @ spread
    if abs(rows_cell - A_rule[G:]).max() > 1e-12 * max(1.0, abs(A_rule).max()):
        return None
    keep_cell = sp.csr_matrix((baseline.reshape(-1), (np.arange(n * L), np.repeat(problem.index, L))), shape=(n * L, G))
    return sp.vstack([sp.identity(G, format="csr"), A_cell[n:] @ keep_cell], format="csr")


def safe_rule(risk_levels: RiskLevels, costs: Costs, bounds: RiskBounds, baseline: Rule,
              constraints: Sequence[Any | Mapping] = (), columns: Sequence[str] | None = None,
              settings: LPSettings | None = None, monotone: bool = True, keep_baseline: bool | None = None,
              keep_where_uncertified: bool = True, name: str | None = None) -> SafeRule:
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
    keep_baseline : bool, optional
        Let each rule cell leave a share of its cases to the baseline's own practice (see
        :class:`RegretProgram`). Default: where the baseline varies within the rule cells (a
        per-cell observed rule), so that keeping it is always possible and the rule is certified
        whenever the baseline meets the constraints.
    keep_where_uncertified : bool
        In every rule cell where no improvement can be certified (its part of the worst-case
        regret is not below 0), decide as the baseline does, where the constraints allow it
        (default true). Such a rule cell's part is 0 either way, so the worst-case regret does
        not change; without it the solver's vertex stands, which may change practice there
        without any certain gain.
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
    if baseline.cell_delta.shape != (risk_levels.n_cells, risk_levels.n_levels):
        raise InputError(f"the baseline {baseline.name!r} covers {baseline.cell_delta.shape[0]} cells; the estimates have "
                         f"{risk_levels.n_cells}.")
    name = name or f"safe rule against {baseline.name} ({bounds.label})"
    problem = ConstrainedProblem(risk_levels, costs, constraints, columns, settings)
    G, L = problem.n_rule_cells, risk_levels.n_levels
    b = baseline.cell_delta
    w = risk_levels.weights
    mean = np.stack([np.bincount(problem.index, weights=w * b[:, d], minlength=G) for d in range(L)], axis=1)
    mean /= np.maximum(np.bincount(problem.index, weights=w, minlength=G), 1e-300)[:, None]
    varies = bool(np.abs(mean[problem.index] - b).max() > 1e-9)
    if keep_baseline is None:
        keep_baseline = varies
    notes = []
    keep_rows = _keep_rows(problem, b, risk_levels) if keep_baseline else None
    if keep_baseline and keep_rows is None:
        notes.append("the constraints depend on the rule cells (group-blind or monotone in score), so the rule cannot "
                     "leave cases to the baseline's per-cell practice")
    keep = keep_rows is not None
    program = RegretProgram(risk_levels, costs, bounds, b, problem.index, G, monotone, keep)
    A, lo, hi = problem.rows()
    extra = (sp.hstack([A, keep_rows], format="csr") if keep else A, lo, hi)
    status, x, seconds = program.solve(extra_rows=extra, settings=problem.settings)
    if status in ("kInfeasible", "kUnboundedOrInfeasible"):
        problem.solve_lp()  # the ordinary program has the same rows: it names the conflicting constraints
        raise SolverError(f"the safe rule's linear program was reported {status}, though the constraints can hold.")
    if x is None:
        raise _status_error(status, "the safe rule's linear program")
    n_rule = program.n_delta + program.n_keep
    baseline_cost = rule_cost(b, risk_levels.p, risk_levels.weights, costs)

    def rounded(point: np.ndarray):
        """The rule's probabilities of a solution, checked, with solver dust (below 1e-9) set to 0."""
        nu = point[:G * L].reshape(G, L)
        lam = point[G * L:n_rule] if keep else np.zeros(G)
        total = nu.sum(axis=1) + lam
        if nu.min() < -FEASIBILITY_TOLERANCE or (keep and lam.min() < -FEASIBILITY_TOLERANCE) \
                or np.abs(total - 1).max() > FEASIBILITY_TOLERANCE:
            raise SolverError("the safe rule's solver returned decision probabilities that are not a distribution; "
                              "no rule is reported.")
        nu, lam = np.maximum(nu, 0.0), np.clip(lam, 0.0, 1.0)
        nu, lam = np.where(nu < 1e-9, 0.0, nu), np.where(lam < 1e-9, 0.0, lam)
        scale = nu.sum(axis=1) + lam
        nu, lam = nu / scale[:, None], lam / scale
        return nu, lam, np.concatenate([nu.reshape(-1), lam if keep else np.zeros(0)])

    def parts(nu: np.ndarray, lam: np.ndarray) -> np.ndarray:
        """Each rule cell's part of the worst-case regret of the rule (nu, lam), in closed form."""
        cell_delta = nu[problem.index] + lam[problem.index, None] * b
        per_cell = regret_parts(cell_delta, b, risk_levels, costs, bounds, monotone)
        return np.bincount(problem.index, weights=per_cell, minlength=G)

    nu, lam, _ = rounded(x)
    per_group = parts(nu, lam)
    tol = CERTIFY_TOLERANCE * max(1.0, baseline_cost)
    uncertain = per_group > -tol
    if keep_where_uncertified and uncertain.any():
        nu2, lam2 = nu.copy(), lam.copy()
        if keep:
            nu2[uncertain], lam2[uncertain] = 0.0, 1.0
        else:  # the baseline's own levels, where it is constant within each rule cell
            nu2[uncertain] = mean[uncertain]
        values = A @ nu2.reshape(-1) + (keep_rows @ lam2 if keep else 0.0)
        if (keep or not varies) and ((values >= lo - FEASIBILITY_TOLERANCE) & (values <= hi + FEASIBILITY_TOLERANCE)).all():
            again = parts(nu2, lam2)
            if again.sum() <= per_group.sum() + tol:
                nu, lam, per_group = nu2, lam2, again
    cases = np.bincount(problem.index, weights=risk_levels.weights, minlength=G)
    rule_cells = problem.rule_cells
    if keep:
        cell_delta = nu[problem.index] + lam[problem.index, None] * b
        rule = Rule.per_cell(name, "safe", risk_levels.layout, cell_delta, risk_levels.level_values, risk_levels.level_labels,
                             risk_levels.weights, "leaves some cases to the baseline's practice" if lam.any() else "")
    else:
        rule = problem.present(nu, name)
        rule = Rule(rule.name, "safe", rule.rule_cells, rule.index, rule.delta, rule.level_values, rule.level_labels,
                    rule.weights, rule.note)
        if len(rule.rule_cells) != G:  # coarsened by a group-blind constraint: parts summed over the merged rule cells
            fine_to_coarse = np.zeros(G, dtype=np.int64)
            fine_to_coarse[problem.index] = rule.index
            per_group = np.bincount(fine_to_coarse, weights=per_group, minlength=rule.n_rule_cells)
            rule_cells, nu, lam, cases = rule.rule_cells, rule.delta, np.zeros(rule.n_rule_cells), rule.weights
    w = risk_levels.weights
    point = rule_cost(rule.cell_delta, risk_levels.p, w, costs) - rule_cost(b, risk_levels.p, w, costs)
    if constraints:
        notes.append("the constraints are evaluated under the point estimate, as for the ordinary constrained optimum")
    result = SafeRule(rule, baseline, bounds, rule_cells, nu, lam, cases, per_group, float(per_group.sum()), point, monotone,
                      bool(constraints), costs.unit, tuple(notes), seconds, baseline_cost)
    if not result.certified:
        why = ("the baseline breaks a constraint" if keep or not keep_baseline else
               "the baseline varies within the rule cells and a constraint depends on the rule cells themselves")
        result = replace(result, notes=result.notes + (f"{NOT_CERTIFIED}: {why}",))
    return result
