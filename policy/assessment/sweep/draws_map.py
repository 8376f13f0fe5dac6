"""The lenient map over the draws of a risk-level table: how often release at the most lenient
level is optimal, draw by draw.

Each draw of the table (:mod:`policy.estimation.draws`) gives every rule cell g its own cost lines
over the two swept ratios, T_gb(d; r1, r2) = A_gb(d) + r1 B1_gb(d) + r2 B2_gb(d) (case-weighted
sums over the rule cell's cells, as for the point estimate's map,
:func:`policy.assessment.sweep.two_ratio.lenient_map`). At a point of the map the most lenient
level is optimal in draw b where it is the smallest (ties to the lenient level, as for the
optimum). Two tables follow:

- on a grid of the two ratios, the share of cases for which leniency is optimal: on the point
  estimate, its mean over the draws (the case-weighted share of draws in which leniency is
  optimal) and its percentile interval over the draws;
- per rule cell, the share of draws in which leniency is optimal at the scenario's ratios, and
  the share of the grid where it is (point estimate and mean over draws).

The draws are scored in chunks (:data:`policy.assessment.draws_compare.DRAW_CHUNK`); what is kept
is the rule cells' cost lines, draws x rule cells x levels numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from policy.assessment.draws_compare import DRAW_CHUNK
from policy.assessment.sweep.axes import _plain_groups
from policy.assessment.sweep.two_ratio import LenientMap
from policy.decision.costs import Costs
from policy.decision.solve import aggregation_matrix, argmin_lenient
from policy.estimation.strata import RiskLevels

__all__ = ["DrawsMap", "draws_map", "rule_cell_lines"]

#: numbers evaluated at once (draws x points x rule cells x levels) when a grid is scored
_BLOCK = 4_000_000


def rule_cell_lines(p: np.ndarray, weights: np.ndarray, costs: Costs, axes, index: np.ndarray,
                    n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Rule cells' cost lines over two ratios for a batch of draws.

    Parameters
    ----------
    p : ndarray of shape (b, n_cells, J, L)
    weights : ndarray of shape (n_cells,)
    costs : Costs
    axes : two RatioAxis
    index : ndarray of shape (n_cells,)
        Rule cell of each cell.

    Returns
    -------
    A : ndarray of shape (b, n_groups, L)
    B : ndarray of shape (b, 2, n_groups, L)
        T(d) = A + r1 B[:, 0] + r2 B[:, 1], as :func:`policy.assessment.sweep.axes.cost_lines`
        aggregated by :func:`policy.assessment.sweep.two_ratio.lenient_map`.
    """
    b, n, J, L = p.shape
    fixed = costs.outcome.astype(np.float64).copy()
    fixed[[a.outcome_index for a in axes]] = 0.0
    base = costs.decision[None] + np.matmul(fixed, p)                                    # (b, n, L)
    M = aggregation_matrix(index, n_groups, np.asarray(weights, dtype=np.float64))

    def agg(x):  # (b, n, L) -> (b, G, L)
        return (M @ x.transpose(1, 0, 2).reshape(n, b * L)).reshape(n_groups, b, L).transpose(1, 0, 2)

    A = agg(base)
    B = np.stack([agg(a.reference_cost * p[:, :, a.outcome_index, :]) for a in axes], axis=1)
    return A, B


def _lenient(A: np.ndarray, B: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Whether the most lenient level is optimal, shape (b, P, G), in blocks of points."""
    b, G, L = A.shape
    out = np.empty((b, len(points), G), dtype=bool)
    step = max(1, _BLOCK // max(1, b * G * L))
    for s in range(0, len(points), step):
        pt = points[s:s + step]
        T = A[:, None] + pt[None, :, 0, None, None] * B[:, None, 0] + pt[None, :, 1, None, None] * B[:, None, 1]
        out[:, s:s + step] = argmin_lenient(T) == 0
    return out


@dataclass(frozen=True)
class DrawsMap:
    """The lenient map over a table's draws (see the module's notes).

    Attributes
    ----------
    map : LenientMap
        The point estimate's exact map (axes, box, rule cells, weights).
    A, B : ndarray of shape (n_draws, G, L), (n_draws, 2, G, L)
        Each draw's rule-cell cost lines.
    level : float
        Coverage of the percentile intervals.
    """

    map: LenientMap
    A: np.ndarray
    B: np.ndarray
    level: float = 0.95

    @property
    def n_draws(self) -> int:
        return int(self.A.shape[0])

    def lenient_draws(self, points: np.ndarray) -> np.ndarray:
        """Whether leniency is optimal in each draw, rule cell and point, shape (n_draws, P, G)."""
        points = np.atleast_2d(np.asarray(points, dtype=np.float64))
        out = np.empty((self.n_draws, len(points), len(self.map.weights)), dtype=bool)
        for i in range(0, self.n_draws, DRAW_CHUNK):
            out[i:i + DRAW_CHUNK] = _lenient(self.A[i:i + DRAW_CHUNK], self.B[i:i + DRAW_CHUNK], points)
        return out

    def _share_draws(self, points: np.ndarray) -> np.ndarray:
        """Share of cases for which leniency is optimal in each draw, shape (n_draws, P)."""
        points = np.atleast_2d(np.asarray(points, dtype=np.float64))
        w = self.map.weights / self.map.total
        out = np.empty((self.n_draws, len(points)))
        step = max(1, _BLOCK // max(1, DRAW_CHUNK * len(w) * self.A.shape[-1]))
        for s in range(0, len(points), step):
            out[:, s:s + step] = self.lenient_draws(points[s:s + step]) @ w
        return out

    def meta(self) -> dict:
        return {"draws": self.n_draws, "interval": f"{self.level:.0%} percentile interval over {self.n_draws} draws",
                "resampling": "draws"}

    def grid_table(self, points: int = 51) -> pd.DataFrame:
        """``ratio_1``, ``ratio_2``, ``cost_1``, ``cost_2``, ``share_lenient`` (point estimate, exact),
        ``share_lenient_mean_over_draws`` (the case-weighted share of draws in which leniency is
        optimal), ``share_lenient_lower``, ``share_lenient_upper`` (percentile interval over the
        draws), ``draws``."""
        m = self.map
        x, y = m.grid_axes(points)
        X, Y = np.meshgrid(x, y)
        pts = np.column_stack([X.ravel(), Y.ravel()])
        reps = self._share_draws(pts)
        a = (1 - self.level) / 2
        return pd.DataFrame({
            "ratio_1": pts[:, 0], "ratio_2": pts[:, 1],
            "cost_1": pts[:, 0] * m.axes[0].reference_cost, "cost_2": pts[:, 1] * m.axes[1].reference_cost,
            "share_lenient": m.grid(points, 0, x, y).ravel(),
            "share_lenient_mean_over_draws": reps.mean(axis=0),
            "share_lenient_lower": np.quantile(reps, a, axis=0),
            "share_lenient_upper": np.quantile(reps, 1 - a, axis=0),
            "draws": self.n_draws,
        })

    def rule_cell_table(self, points: int = 51) -> pd.DataFrame:
        """Per rule cell: the rule columns, ``cases``, ``lenient_at_scenario_ratios`` (point
        estimate), ``share_of_draws_lenient_at_scenario_ratios``, ``grid_share_lenient`` (share of
        the grid's points where leniency is optimal, point estimate) and
        ``grid_share_lenient_mean_over_draws``, ``draws``."""
        m = self.map
        here = np.array([[a.scenario_ratio for a in m.axes]])
        x, y = m.grid_axes(points)
        X, Y = np.meshgrid(x, y)
        pts = np.column_stack([X.ravel(), Y.ravel()])
        grid_draws = np.zeros(len(m.weights))
        step = max(1, _BLOCK // max(1, DRAW_CHUNK * len(m.weights) * self.A.shape[-1]))
        for s in range(0, len(pts), step):
            grid_draws += self.lenient_draws(pts[s:s + step]).sum(axis=(0, 1))
        out = _plain_groups(m.rule_cells)
        out["cases"] = m.weights
        out["lenient_at_scenario_ratios"] = m.lenient_at(here)[0]
        out["share_of_draws_lenient_at_scenario_ratios"] = self.lenient_draws(here)[:, 0].mean(axis=0)
        out["grid_share_lenient"] = m.lenient_at(pts).mean(axis=0)
        out["grid_share_lenient_mean_over_draws"] = grid_draws / (len(pts) * self.n_draws)
        out["draws"] = self.n_draws
        return out

    def summary(self) -> str:
        here = np.array([[a.scenario_ratio for a in self.map.axes]])
        reps = self._share_draws(here)[:, 0]
        a = (1 - self.level) / 2
        return (f"Over the table's {self.n_draws} draws, the share of cases for which {self.map.level_labels[0]} is "
                f"optimal at the scenario's ratios is {reps.mean():.1%} on average ({self.level:.0%} of draws between "
                f"{np.quantile(reps, a):.1%} and {np.quantile(reps, 1 - a):.1%}).")


def draws_map(lenient: LenientMap, risk_levels: RiskLevels, costs: Costs, p_draws: np.ndarray,
              level: float = 0.95) -> DrawsMap:
    """The lenient map over a risk-level table's draws.

    Parameters
    ----------
    lenient : LenientMap
        The point estimate's map (gives the axes, the box and the rule cells).
    risk_levels : RiskLevels
        The point estimate (cells, weights).
    costs : Costs
    p_draws : ndarray of shape (n_draws, n_cells, J, L)
    level : float
        Coverage of the percentile intervals.
    """
    index, groups = risk_levels.layout.rule_index(list(lenient.rule_cells.columns))
    parts = [rule_cell_lines(np.asarray(p_draws[i:i + DRAW_CHUNK], dtype=np.float64), risk_levels.weights, costs,
                             lenient.axes, index, len(groups)) for i in range(0, p_draws.shape[0], DRAW_CHUNK)]
    return DrawsMap(lenient, np.concatenate([a for a, _ in parts]), np.concatenate([b for _, b in parts]), level)
