"""Costs implied by current practice along one ratio: for an observed rule (what courts did in an
arm), the exact interval of the swept cost ratio under which its decisions come closest to the
cheapest rule the rule cells allow, given the estimated risk levels, overall and per protected group.

**The inverse problem.** Along one swept ratio r (:mod:`policy.assessment.sweep`), the total
expected cost of decision d in rule cell g is the line T_g(d; r) = A_g(d) + r B_g(d). A fixed
rule delta (decision shares per cell) costs the line alpha + r beta, with
alpha = sum_x w(x) sum_d delta(d, x) base(d, x) and beta likewise with the slope. The cheapest
rule the rule cells allow costs OPT(r) = sum_g min_d T_g(d; r), a minimum of lines summed:
concave and piecewise linear, with knots at the envelope's breakpoints. The observed rule's
regret R(r) = alpha + r beta - OPT(r) is therefore convex and piecewise linear with the same
knots, and R(r) >= 0. Its minimum over [lo, hi] is attained at a knot or an end, and the set
of minimizers is one interval [r_lo, r_hi] (a single knot, or a flat stretch where the
observed rule differs from the optimum only by a rule that is itself optimal there). We
evaluate R exactly at the ends and at every knot inside, take the minimum and the first and
last points within a relative tolerance of it; beyond the last knot R is linear, so one more
point decides whether the flat stretch runs on to +inf.

**Per protected group.** The same with every sum restricted to the cells of one group (its
cases' weights; the other cells weigh 0): the ratio under which the decisions that group
received are closest to the cheapest rule for that group's cases. The difference between two
groups' intervals is the interval of differences [lo_a - hi_b, hi_a - lo_b].

**What it is not.** "Implied" is a statement about the decisions and the estimated risk
levels, never about judges' intent: it reads the decisions as if they were chosen to minimize
expected cost with every other cost at the scenario's value, and it inherits every assumption
of the risk levels (no unmeasured confounding for the point estimate). Courts weigh things
the cost model leaves out (law, the individual case, the hearing), so a large regret at the
minimum says the decisions are not well explained by any ratio on the axis.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd

from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.decision.solve import aggregation_matrix
from policy.cautions import CAUTIONS
from policy.errors import InputError
from policy.estimation.strata import RiskLevels
from policy.assessment.sweep.axes import RatioAxis, cost_lines
from policy.assessment.sweep.envelope import envelope_functions, lower_envelope

#: relative tolerance under which two regret values count as equal (common practice for
#: floating-point sums of a few thousand terms)
REGRET_TOLERANCE = 1e-9

#: what an implied cost means, shown beside every implied figure
MEANING = ("'Implied' means: the costs under which these decisions would be the cheapest of the rules the rule "
           "cells allow, given the estimated risk levels and every other cost at the scenario's value. It describes "
           "groups of decisions, not what any judge intended or valued, and it inherits the risk levels' assumptions; "
           "a difference between groups is a disparity diagnostic, not a finding about motive.")

__all__ = ["ImpliedInterval", "ImpliedCosts", "implied_interval", "implied_costs", "protected_groups",
           "REGRET_TOLERANCE", "MEANING"]


@dataclass(frozen=True)
class ImpliedInterval:
    """The exact minimizing interval of one rule's regret along a ratio.

    Attributes
    ----------
    r_lo, r_hi : float
        The ratios between which the regret is smallest (r_hi may be +inf).
    regret_per_case : float
        The smallest regret, per case of the sums (in the scenario's cost unit).
    cases : float
        Cases the sums run over.
    at_lo_end, at_hi_end : bool
        True where the interval touches the searched range's end (the rule may be better
        explained by a ratio beyond it).
    """

    r_lo: float
    r_hi: float
    regret_per_case: float
    cases: float
    at_lo_end: bool
    at_hi_end: bool


def implied_interval(base: np.ndarray, slope: np.ndarray, weights: np.ndarray, index: np.ndarray, n_groups: int,
                     delta: np.ndarray, lo: float = 0.0, hi: float = np.inf) -> ImpliedInterval:
    """Exact minimizing interval of a fixed rule's regret along one ratio (module notes).

    Parameters
    ----------
    base, slope : ndarray of shape (n_cells, L)
        Per-case expected cost of each decision is ``base + r * slope`` (:func:`cost_lines`).
    weights : ndarray of shape (n_cells,)
        Cases per cell (0 outside the cells the sums run over).
    index : ndarray of shape (n_cells,)
        Rule cell of each cell; ``n_groups`` rule cells.
    delta : ndarray of shape (n_cells, L)
        The fixed rule's decision shares in each cell.
    lo, hi : float
        Range searched (hi may be +inf).
    """
    w = np.asarray(weights, dtype=np.float64)
    W = float(w.sum())
    if not W > 0:
        raise InputError("the implied ratio needs cases to explain; the cells selected hold none.")
    if not (np.isfinite(lo) and lo >= 0 and hi > lo):
        raise InputError(f"the implied ratio's range must run from a finite low >= 0 to a higher high; got {lo!r} to {hi!r}.")
    M = aggregation_matrix(index, n_groups, w)
    A, B = M @ base, M @ slope
    env = lower_envelope(A, B)
    _, total = envelope_functions(env, np.bincount(index, weights=w, minlength=n_groups), A, B)
    wd = w[:, None] * delta
    alpha, beta = float(np.sum(wd * base)), float(np.sum(wd * slope))
    knots = total.knots[(total.knots > lo) & (total.knots < hi)]
    end = hi if np.isfinite(hi) else 2.0 * max(lo, knots[-1] if len(knots) else lo) + 1.0
    x = np.concatenate([[lo], knots, [end]])
    coef = total(x)
    regret = alpha + beta * x - (coef[:, 0] + x * coef[:, 1])
    tol = REGRET_TOLERANCE * max(float(np.max(np.abs(alpha + beta * x))), 1.0)
    best = float(regret.min())
    near = np.flatnonzero(regret <= best + tol)
    i0, i1 = int(near[0]), int(near[-1])
    r_lo, r_hi = float(x[i0]), float(x[i1])
    if i1 == len(x) - 1 and not np.isfinite(hi):
        r_hi = np.inf
    return ImpliedInterval(r_lo, r_hi, max(best, 0.0) / W, W, i0 == 0, i1 == len(x) - 1)


@dataclass(frozen=True)
class ImpliedCosts:
    """Implied intervals of each observed rule, overall and per protected group.

    Attributes
    ----------
    axis : RatioAxis
    lo, hi : float
    table : DataFrame
        One row per rule and group (``protected`` and ``group`` are "all" overall): ``rule``,
        ``protected``, ``group``, ``cases``, ``ratio_low``, ``ratio_high``, ``cost_low``,
        ``cost_high`` (in the axis unit), ``regret_per_case``, ``at_range_low``,
        ``at_range_high``, ``scenario_ratio``.
    differences : DataFrame
        Per rule, protected attribute and group after the first: ``rule``, ``protected``,
        ``group``, ``versus``, ``ratio_difference_low``, ``ratio_difference_high``,
        ``cost_difference_low``, ``cost_difference_high``.
    meta : dict or None
        Bootstrap settings when intervals were added (:func:`policy.assessment.implied_bands.implied_bands`).
    """

    axis: RatioAxis
    lo: float
    hi: float
    table: pd.DataFrame
    differences: pd.DataFrame = field(default_factory=pd.DataFrame)
    meta: dict | None = None

    def sentences(self) -> list[str]:
        """One plain sentence per rule (overall rows)."""
        out = []
        unit = f" {self.axis.unit}" if self.axis.unit else ""
        for row in self.table[self.table["protected"] == "all"].itertuples():
            high = "no upper limit" if not np.isfinite(row.cost_high) else f"{row.cost_high:,.0f}{unit}"
            if np.isclose(row.ratio_low, row.ratio_high):
                between = f"about {row.cost_low:,.0f}{unit} (ratio {row.ratio_low:.4g})"
            else:
                rh = "inf" if not np.isfinite(row.ratio_high) else f"{row.ratio_high:.4g}"
                between = f"between {row.cost_low:,.0f}{unit} and {high} (ratio {row.ratio_low:.4g} to {rh})"
            if "ratio_low_lower" in self.table and np.isfinite(row.ratio_low_lower):
                hu = "inf" if not np.isfinite(row.ratio_high_upper) else f"{row.cost_high_upper:,.0f}{unit}"
                between += f" [{self.meta['interval']}: {row.cost_low_lower:,.0f}{unit} to {hu}]"
            edge = ""
            if row.at_range_low or row.at_range_high:
                edge = " The interval touches the end of the range searched; a ratio beyond it may explain the decisions as well."
            out.append(f"{row.rule}: if the courts were minimizing expected cost, they acted as if one "
                       f"{self.axis.outcome_label} cost {between}, given the estimated risk levels and every other "
                       f"cost at the scenario's value; the decisions then still cost {row.regret_per_case:,.2f}{unit} "
                       f"per case more than the cheapest rule the rule cells allow.{edge}")
        return out

    def output_files(self) -> dict[str, Any]:
        """``implied_costs.csv``, ``implied_differences.csv`` and ``implied_costs.json`` (axis,
        range, what the figures mean and the cautions)."""
        return {"implied_costs.csv": self.table, "implied_differences.csv": self.differences,
                "implied_costs.json": {"axis": self.axis.describe(), "range": [self.lo, None if not np.isfinite(self.hi) else self.hi],
                                       "sentences": self.sentences(), "uncertainty": self.meta, "meaning": MEANING, "cautions": list(CAUTIONS)}}

    def __str__(self) -> str:
        lines = [f"Costs implied by current practice along {self.axis.title} "
                 f"(1 = {self.axis.reference_cost:,.2f} {self.axis.unit}; the scenario's ratio is {self.axis.scenario_ratio:.4g}):"]
        lines += ["  " + s for s in self.sentences()]
        lines.append("  " + MEANING)
        return "\n".join(lines)


def protected_groups(risk_levels: RiskLevels) -> list[tuple[str, str, np.ndarray]]:
    """(protected attribute, value, mask over cells) of every protected group with cells."""
    frame = risk_levels.layout.frame
    out = []
    for col in risk_levels.layout.protected:
        values = frame[col]
        cats = values.cat.categories if hasattr(values, "cat") else pd.unique(values)
        for v in cats:
            mask = np.asarray(values == v)
            if mask.any():
                out.append((col, str(v), mask))
    return out


def implied_costs(risk_levels: RiskLevels, costs: Costs, axis: RatioAxis, rules: Sequence[Rule],
                  columns: Sequence[str] | None = None, lo: float = 0.0, hi: float = np.inf,
                  by_group: bool = True) -> ImpliedCosts:
    """The implied interval of each rule along ``axis``, overall and per protected group.

    Parameters
    ----------
    risk_levels, costs : RiskLevels, Costs
    axis : RatioAxis
        The swept ratio (:func:`policy.assessment.sweep.ratio_axis`).
    rules : sequence of Rule
        Usually :func:`policy.decision.candidates.observed_rules` (one per arm).
    columns : sequence of str, optional
        Rule columns of the rules compared against (default: the scenario's rule covariates).
    lo, hi : float
        Range searched (default 0 to +inf: the whole axis).
    by_group : bool
        Add one row per protected group and the differences between groups.
    """
    index, groups = risk_levels.layout.rule_index(columns)
    base, slope = cost_lines(risk_levels, costs, [axis])
    slope = slope[0]
    w = risk_levels.weights.astype(np.float64)
    subsets = [("all", "all", np.ones(len(w), dtype=bool))] + (protected_groups(risk_levels) if by_group else [])
    rows, diffs = [], []
    c = axis.reference_cost
    for rule in rules:
        delta = rule.cell_delta
        if delta.shape != base.shape:
            raise InputError(f"rule {rule.name!r} gives decisions for {delta.shape[0]} cells with {delta.shape[1]} "
                             f"levels; the risk levels have {base.shape[0]} cells with {base.shape[1]} levels.")
        found: dict[str, list[tuple[str, ImpliedInterval]]] = {}
        for col, value, mask in subsets:
            res = implied_interval(base, slope, np.where(mask, w, 0.0), index, len(groups), delta, lo, hi)
            rows.append({"rule": rule.name, "protected": col, "group": value, "cases": res.cases,
                         "ratio_low": res.r_lo, "ratio_high": res.r_hi, "cost_low": res.r_lo * c,
                         "cost_high": res.r_hi * c, "regret_per_case": res.regret_per_case,
                         "at_range_low": res.at_lo_end, "at_range_high": res.at_hi_end,
                         "scenario_ratio": axis.scenario_ratio})
            if col != "all":
                found.setdefault(col, []).append((value, res))
        for col, items in found.items():
            (v0, r0), rest = items[0], items[1:]
            for v, r in rest:
                d_lo, d_hi = r.r_lo - r0.r_hi, r.r_hi - r0.r_lo
                diffs.append({"rule": rule.name, "protected": col, "group": v, "versus": v0,
                              "ratio_difference_low": d_lo, "ratio_difference_high": d_hi,
                              "cost_difference_low": d_lo * c, "cost_difference_high": d_hi * c})
    diff_cols = ["rule", "protected", "group", "versus", "ratio_difference_low", "ratio_difference_high",
                 "cost_difference_low", "cost_difference_high"]
    return ImpliedCosts(axis, float(lo), float(hi), pd.DataFrame(rows), pd.DataFrame(diffs, columns=diff_cols))
