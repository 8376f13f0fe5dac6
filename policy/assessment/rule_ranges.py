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

Both assumptions (the sensitivity model and the monotone-response bounds) also assume
monotonicity: a harsher level never raises an outcome's probability for the same person, so
p_j0(x) >= p_j1(x) >= ... within every cell and outcome kind. With ``monotone=True`` (the
default) the ranges are taken over the box intersected with that chain (the chain-box of
:func:`policy.decision.safe.chain_box_maximum`): a cost or rate (coefficients >= 0) is largest at
p_d = min_{d' <= d} u_d' and smallest at p_d = max_{d' >= d} l_d', and a regret's extremes come
from the same dynamic program as the safe rule's worst case (:func:`regret_extremes`). Where a
cell's chain-box is empty (intervals that no non-increasing sequence meets, e.g. a point
estimate that is not monotone) that cell falls back to the box. Links between outcome kinds
(one nested in another) are still ignored, so the ranges remain outer ranges: they contain every
value the assumption allows and may be wider than the sharp range.

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

__all__ = ["rule_ranges", "regret_ranges", "regret_extremes"]


def _chain(lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """Whether each (cell, outcome kind) chain-box {l <= p <= u, p non-increasing in d} is
    non-empty, shape lower.shape[:-1]."""
    least = np.flip(np.maximum.accumulate(np.flip(lower, axis=-1), axis=-1), axis=-1)
    return (least <= upper + 1e-12).all(axis=-1)


def _monotone_ends(b: RiskBounds) -> tuple[np.ndarray, np.ndarray]:
    """The coordinatewise least and greatest points of each chain-box (the box's own ends where the
    chain-box is empty): every cost and rate with coefficients >= 0 is smallest at the first and
    largest at the second."""
    ok = _chain(b.lower, b.upper)[..., None]
    least = np.minimum(np.flip(np.maximum.accumulate(np.flip(b.lower, axis=-1), axis=-1), axis=-1), b.upper)
    most = np.maximum(np.minimum.accumulate(b.upper, axis=-1), b.lower)
    return np.where(ok, least, b.lower), np.where(ok, most, b.upper)


def regret_extremes(delta_a: np.ndarray, delta_b: np.ndarray, risk_levels: RiskLevels, costs: Costs,
                    bounds: RiskBounds, monotone: bool = True, boxes: "_Boxes | None" = None) -> tuple[float, float]:
    """The smallest and largest regret per case of rule A against rule B over a set: min and max
    over p of cost(A, p) - cost(B, p), p in the box (with ``monotone``, intersected with the chain
    p_j0 >= p_j1 >= ... of every cell and outcome kind; the box alone where that is empty).

    Parameters
    ----------
    delta_a, delta_b : ndarray of shape (n_cells, L)
        Per-cell decision probabilities of the two rules (``Rule.cell_delta``).
    risk_levels, costs, bounds
        The cells' weights, the costs and the set.
    monotone : bool
    boxes : optional
        The set's boxes prepared once for many pairs of rules (:func:`regret_ranges`).

    Returns
    -------
    (float, float)
        Smallest and largest regret per case; A costs more than B under every distribution of
        the set when the first is above 0.
    """
    w = np.asarray(risk_levels.weights, dtype=np.float64)
    W = w.sum()
    diff = np.asarray(delta_a, dtype=np.float64) - np.asarray(delta_b, dtype=np.float64)
    n, J, L = bounds.lower.shape
    a = (w[:, None, None] * costs.outcome[None, :, None] * diff[:, None, :] / W).reshape(n * J, L)
    top, bottom = (boxes or _Boxes(bounds, monotone)).extremes(a)
    fixed = float((w[:, None] * diff * costs.decision).sum() / W)
    return fixed + float(bottom.sum()), fixed + float(top.sum())


class _Boxes:
    """The (cell, outcome kind) boxes of one set, prepared for the regrets of many pairs of rules:
    which meet the chain, the chain-boxes' grids (:func:`policy.decision.safe.chain_box_grid`), and
    with ``skip`` each box's extremes for a zero objective, which every row where two rules agree
    takes without a dynamic program (the same numbers: only rows of +0 coefficients are skipped)."""

    def __init__(self, bounds: RiskBounds, monotone: bool, skip: bool = False):
        from policy.decision.safe import chain_box_grid

        n, J, L = bounds.lower.shape
        self.lo, self.hi = bounds.lower.reshape(n * J, L), bounds.upper.reshape(n * J, L)
        self.chain = _chain(self.lo, self.hi) if monotone else np.zeros(n * J, dtype=bool)
        self.chain_rows, self.box_rows = np.flatnonzero(self.chain), np.flatnonzero(~self.chain)
        self.position = np.cumsum(self.chain) - 1  # a chain row's place among the chain rows
        self.grid = chain_box_grid(self.lo[self.chain_rows], self.hi[self.chain_rows])
        self.zero = None
        self.zero = self.extremes(np.zeros(self.lo.shape)) if skip else None

    def extremes(self, a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per box, max a'p and min a'p over its chain-box (its box where the chain misses it)."""
        from policy.decision.safe import chain_box_maximum

        m = len(a)
        top, bottom = (np.empty(m), np.empty(m)) if self.zero is None else (self.zero[0].copy(), self.zero[1].copy())
        keep = None if self.zero is None else ~((a == 0) & ~np.signbit(a)).all(axis=-1)
        if keep is None or keep.all():
            box, chain = self.box_rows, self.chain_rows
        else:
            box, chain = np.flatnonzero(keep & ~self.chain), np.flatnonzero(keep & self.chain)
        if len(box):
            a_box, lo, hi = a[box], self.lo[box], self.hi[box]
            top[box] = chain_box_maximum(a_box, lo, hi, False)
            bottom[box] = -chain_box_maximum(-a_box, lo, hi, False)
        if len(chain):
            if len(chain) == len(self.chain_rows):  # every chain row: the grid as prepared
                grid = self.grid
            else:
                at = self.position[chain]
                grid = (self.grid[0][at], [mask[at] for mask in self.grid[1]])
            take = slice(None) if len(chain) == m else chain
            a_chain = a[take]
            top[take] = chain_box_maximum(a_chain, None, None, True, grid)
            bottom[take] = -chain_box_maximum(-a_chain, None, None, True, grid)
        return top, bottom


def _parts(rules: Sequence[Rule], weights: np.ndarray, costs: Costs):
    D = np.stack([r.cell_delta for r in rules])  # (R, n, L)
    w = np.asarray(weights, dtype=np.float64)
    W = w.sum()
    wd = w[None, :, None] * D
    fixed = np.einsum("rxd,xd->r", wd, costs.decision) / W
    return wd, fixed, W


def rule_ranges(rules: Sequence[Rule], risk_levels: RiskLevels, costs: Costs, intervals: Sequence[RiskBounds],
                monotone: bool = True) -> pd.DataFrame:
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
    monotone : bool
        Ranges over each box intersected with monotonicity in the level (default true; see the
        module notes); false: over the box alone.

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
        low, high = _monotone_ends(b) if monotone else (b.lower, b.upper)
        rates_lo = np.einsum("rxd,xjd->rj", wd, low) / W
        rates_hi = np.einsum("rxd,xjd->rj", wd, high) / W
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


def regret_ranges(rules: Sequence[Rule], risk_levels: RiskLevels, costs: Costs, intervals: Sequence[RiskBounds],
                  monotone: bool = True) -> pd.DataFrame:
    """The range of each rule's regret against each other rule under each assumption
    (parameters as :func:`rule_ranges`; with ``monotone``, by :func:`regret_extremes` over the
    chain-boxes, the two rules' costs taken at the same distribution).

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
    R = len(rules)
    for b in intervals:
        if monotone:
            lo, hi = np.zeros((R, R)), np.zeros((R, R))
            boxes = _Boxes(b, True, skip=R > 2)
            for a in range(R):
                for o in range(a + 1, R):
                    lo[a, o], hi[a, o] = regret_extremes(rules[a].cell_delta, rules[o].cell_delta, risk_levels, costs, b,
                                                         boxes=boxes)
                    lo[o, a], hi[o, a] = -hi[a, o], -lo[a, o]
        else:
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
