"""Costs implied by current practice over two ratios: for an observed rule, the region of two swept
cost ratios under which its decisions come closest to the cheapest rule the rule cells allow.

**The inverse problem in two ratios.** With two swept ratios r = (r1, r2) the total expected cost
of decision d in rule cell g is the plane T_g(d; r) = A_g(d) + r . B_g(d) (section 7 of the method
notes). The cheapest rule costs OPT(r) = sum_g min_d T_g(d; r), concave and piecewise linear; a
fixed rule delta costs alpha + beta . r, so its regret R(r) = alpha + beta . r - OPT(r) is convex
and piecewise linear, and the set where it is smallest is a convex polygon. Written with one
epigraph variable per rule cell, the minimum is the linear program

    min over (r, t) of alpha + beta . r - sum_g t_g
    subject to t_g <= A_g(d) + r . B_g(d) for every g and d, r in the box searched,

(solved with HiGHS through scipy). The region {r : R(r) <= R* + tol} is the projection onto r of
the same constraints plus alpha + beta . r - sum_g t_g <= R* + tol, so its extent along any
direction u is one more linear program (max u . r). The tool reports the extents along both axes
(the region's bounding box) and the support points in 16 directions, whose convex hull is the
region up to those directions (exact where the region is a polygon of at most 16 sides whose
vertices the directions pick out; always inside it).

**Per protected group**, as along one ratio: every sum restricted to the group's cells.
What "implied" means and does not: :data:`policy.assessment.implied.MEANING`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.optimize import linprog

from policy.cautions import CAUTIONS
from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.decision.solve import aggregation_matrix
from policy.errors import InputError, SolverError
from policy.estimation.strata import RiskLevels
from policy.assessment.implied import MEANING, protected_groups
from policy.assessment.sweep.axes import RatioAxis, cost_lines

__all__ = ["ImpliedRegion", "ImpliedRegionCosts", "implied_region", "implied_region_costs", "DIRECTIONS"]

#: directions in which the region's support points are found
DIRECTIONS = 16
#: tolerance on the regret, relative to the largest total cost on the box's corners (the
#: minimum itself is evaluated directly at the solver's point, so only the support programs
#: rely on the solver's accuracy, about 1e-9 relative on programs this small: common practice)
REGION_TOLERANCE = 1e-9


@dataclass(frozen=True)
class ImpliedRegion:
    """The region of two ratios where one rule's regret is smallest.

    Attributes
    ----------
    low, high : ndarray of shape (2,)
        The region's extent along each ratio (its bounding box).
    point : ndarray of shape (2,)
        A point inside the region: the mean of its support points.
    vertices : ndarray of shape (k, 2)
        Support points in :data:`DIRECTIONS` directions, distinct, in angular order.
    regret_per_case : float
    cases : float
    at_box_edge : bool
        The region touches the box searched (a ratio beyond it may explain the decisions as well).
    tolerance : float
        Regret per case within which a point counts as in the region.
    """

    low: np.ndarray
    high: np.ndarray
    point: np.ndarray
    vertices: np.ndarray
    regret_per_case: float
    cases: float
    at_box_edge: bool
    tolerance: float = 0.0


def _solve(c, a_ub, b_ub, bounds) -> Any:
    res = linprog(c, A_ub=a_ub, b_ub=b_ub, bounds=bounds, method="highs")
    if res.status != 0:
        raise SolverError(f"the implied-region linear program ended with status {res.status}: {res.message}")
    return res


def implied_region(base: np.ndarray, slope: np.ndarray, weights: np.ndarray, index: np.ndarray, n_groups: int,
                   delta: np.ndarray, box: Sequence[Sequence[float]], directions: int = DIRECTIONS) -> ImpliedRegion:
    """The region of two ratios where a fixed rule's regret is smallest (module notes).

    Parameters
    ----------
    base : ndarray of shape (n_cells, L)
    slope : ndarray of shape (2, n_cells, L)
        Per-case expected cost is ``base + r1 * slope[0] + r2 * slope[1]`` (:func:`cost_lines`).
    weights, index, n_groups, delta
        As for :func:`policy.assessment.implied.implied_interval`.
    box : ((lo1, hi1), (lo2, hi2))
        Finite range searched on each ratio.
    """
    w = np.asarray(weights, dtype=np.float64)
    W = float(w.sum())
    if not W > 0:
        raise InputError("the implied region needs cases to explain; the cells selected hold none.")
    box = np.asarray(box, dtype=np.float64)
    if box.shape != (2, 2) or not (np.isfinite(box).all() and (box[:, 0] >= 0).all() and (box[:, 1] > box[:, 0]).all()):
        raise InputError(f"the implied region's ranges must each run from a finite low >= 0 to a higher finite high; got {box.tolist()}.")
    M = aggregation_matrix(index, n_groups, w)
    A = M @ base                                       # (G, L)
    B = np.stack([M @ s for s in slope], axis=-1)      # (G, L, 2)
    wd = w[:, None] * delta
    alpha = float(np.sum(wd * base))
    beta = np.array([float(np.sum(wd * s)) for s in slope])
    G, L = A.shape
    # rows: t_g - B_g(d) . r <= A_g(d)
    rows = G * L
    g_of = np.repeat(np.arange(G), L)
    a_ub = sp.hstack([sp.csr_matrix(-B.reshape(rows, 2)),
                      sp.csr_matrix((np.ones(rows), (np.arange(rows), g_of)), shape=(rows, G))]).tocsr()
    b_ub = A.reshape(-1)
    bounds = [tuple(box[0]), tuple(box[1])] + [(None, None)] * G
    objective = np.concatenate([beta, -np.ones(G)])
    best = _solve(objective, a_ub, b_ub, bounds)
    # the regret at the solver's point, evaluated directly: at least the true minimum, so the
    # region below it (plus the tolerance) is never empty whatever the solver's own accuracy
    point = best.x[:2]
    r_star = max(float(best.fun), float(point @ beta - (A + B @ point).min(axis=1).sum()))
    corners = np.array([[x, y] for x in box[0] for y in box[1]])
    scale = max(float(np.max(np.abs(alpha + corners @ beta))), 1.0)
    tol = REGION_TOLERANCE * scale
    a_region = sp.vstack([a_ub, sp.csr_matrix(objective[None, :])]).tocsr()
    b_region = np.concatenate([b_ub, [r_star + tol]])
    angles = 2 * np.pi * np.arange(directions) / directions
    points = []
    for u in np.stack([np.cos(angles), np.sin(angles)], axis=1):
        res = _solve(np.concatenate([-u, np.zeros(G)]), a_region, b_region, bounds)
        points.append(res.x[:2])
    points = np.asarray(points)
    low = np.array([points[:, 0].min(), points[:, 1].min()])
    high = np.array([points[:, 0].max(), points[:, 1].max()])
    # distinct support points in angular order about their mean
    distinct = np.unique(np.round(points, 9), axis=0)
    centre = points.mean(axis=0)
    order = np.argsort(np.arctan2(distinct[:, 1] - centre[1], distinct[:, 0] - centre[0]))
    edge = bool(np.isclose(low, box[:, 0]).any() or np.isclose(high, box[:, 1]).any())
    return ImpliedRegion(low, high, centre, distinct[order], max(alpha + r_star, 0.0) / W, W, edge, tol / W)


@dataclass(frozen=True)
class ImpliedRegionCosts:
    """Implied regions of each observed rule over two ratios, overall and per protected group.

    Attributes
    ----------
    axes : tuple of RatioAxis
    box : ndarray of shape (2, 2)
    table : DataFrame
        One row per rule and group: ``rule``, ``protected``, ``group``, ``cases``, per ratio
        i = 1, 2 ``ratio{i}_low``, ``ratio{i}_high``, ``ratio{i}_point``, ``cost{i}_low``,
        ``cost{i}_high``, ``cost{i}_point``; ``regret_per_case``, ``at_box_edge``.
    vertices : DataFrame
        The support points: ``rule``, ``protected``, ``group``, ``vertex``, ``ratio1``, ``ratio2``, ``cost1``, ``cost2``.
    meta : dict or None
        Bootstrap settings when intervals were added.
    """

    axes: tuple[RatioAxis, RatioAxis]
    box: np.ndarray
    table: pd.DataFrame
    vertices: pd.DataFrame = field(default_factory=pd.DataFrame)
    meta: dict | None = None

    def sentences(self) -> list[str]:
        """One plain sentence per rule (overall rows)."""
        a1, a2 = self.axes
        unit = f" {a1.unit}" if a1.unit else ""
        out = []
        for row in self.table[self.table["protected"] == "all"].itertuples():
            spans = []
            for i, ax in ((1, a1), (2, a2)):
                lo, hi = getattr(row, f"cost{i}_low"), getattr(row, f"cost{i}_high")
                text = f"one {ax.outcome_label} {lo:,.0f} to {hi:,.0f}{unit}"
                if f"cost{i}_low_lower" in self.table and np.isfinite(getattr(row, f"cost{i}_low_lower")):
                    text += (f" [{self.meta['interval']}: {getattr(row, f'cost{i}_low_lower'):,.0f} to "
                             f"{getattr(row, f'cost{i}_high_upper'):,.0f}]")
                spans.append(text)
            edge = " The region touches the box searched; costs beyond it may explain the decisions as well." if row.at_box_edge else ""
            out.append(f"{row.rule}: if the courts were minimizing expected cost, they acted as if {spans[0]} and "
                       f"{spans[1]} (the region's extent on each cost; every other cost at the scenario's value); the "
                       f"decisions then still cost {row.regret_per_case:,.2f}{unit} per case more than the cheapest "
                       f"rule the rule cells allow.{edge}")
        return out

    def output_files(self) -> dict[str, Any]:
        """``implied_region.csv``, ``implied_region_vertices.csv`` and ``implied_region.json``."""
        return {"implied_region.csv": self.table, "implied_region_vertices.csv": self.vertices,
                "implied_region.json": {"axes": [a.describe() for a in self.axes], "box": self.box.tolist(),
                                        "sentences": self.sentences(), "uncertainty": self.meta, "meaning": MEANING,
                                        "cautions": list(CAUTIONS)}}

    def __str__(self) -> str:
        a1, a2 = self.axes
        lines = [f"Costs implied by current practice over {a1.outcome_label} and {a2.outcome_label}:"]
        lines += ["  " + s for s in self.sentences()]
        lines.append("  " + MEANING)
        return "\n".join(lines)


def implied_region_costs(risk_levels: RiskLevels, costs: Costs, axes: Sequence[RatioAxis], rules: Sequence[Rule],
                         box: Sequence[Sequence[float]], columns: Sequence[str] | None = None,
                         by_group: bool = True) -> ImpliedRegionCosts:
    """The implied region of each rule over two ratios, overall and per protected group."""
    if len(axes) != 2:
        raise InputError(f"an implied region needs two ratios; got {len(axes)}.")
    index, groups = risk_levels.layout.rule_index(columns)
    base, slope = cost_lines(risk_levels, costs, axes)
    w = risk_levels.weights.astype(np.float64)
    subsets = [("all", "all", np.ones(len(w), dtype=bool))] + (protected_groups(risk_levels) if by_group else [])
    c = np.array([a.reference_cost for a in axes])
    rows, verts = [], []
    for rule in rules:
        if rule.cell_delta.shape != base.shape:
            raise InputError(f"rule {rule.name!r} gives decisions for {rule.cell_delta.shape[0]} cells; the risk levels "
                             f"have {base.shape[0]}.")
        for col, value, mask in subsets:
            res = implied_region(base, slope, np.where(mask, w, 0.0), index, len(groups), rule.cell_delta, box)
            row = {"rule": rule.name, "protected": col, "group": value, "cases": res.cases}
            for i in range(2):
                row.update({f"ratio{i + 1}_low": res.low[i], f"ratio{i + 1}_high": res.high[i],
                            f"ratio{i + 1}_point": res.point[i], f"cost{i + 1}_low": res.low[i] * c[i],
                            f"cost{i + 1}_high": res.high[i] * c[i], f"cost{i + 1}_point": res.point[i] * c[i]})
            row.update({"regret_per_case": res.regret_per_case, "at_box_edge": res.at_box_edge})
            rows.append(row)
            for k, (x, y) in enumerate(res.vertices):
                verts.append({"rule": rule.name, "protected": col, "group": value, "vertex": k,
                              "ratio1": x, "ratio2": y, "cost1": x * c[0], "cost2": y * c[1]})
    return ImpliedRegionCosts(tuple(axes), np.asarray(box, dtype=np.float64), pd.DataFrame(rows), pd.DataFrame(verts))
