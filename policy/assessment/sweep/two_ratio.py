"""Two ratios, exact: the lenient map (where leniency is optimal, with robust regions) and the
function that computes it."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from policy.estimation.bounds import RiskBounds, point_bounds
from policy.decision.costs import Costs
from policy.errors import InputError
from policy.decision.solve import aggregation_matrix, argmin_lenient
from policy.estimation.strata import RiskLevels
from policy.assessment.sweep.axes import RatioAxis, _check_range, _plain_groups, _rule_cells, cost_lines
from policy.assessment.sweep.regions import _margins, clip_polygons, lenient_intervals, polygon_area
from policy.assessment.sweep.assumptions import AssumptionInfo, _info


@dataclass(frozen=True)
class LenientMap:
    """Exact map of where leniency is optimal over two cost ratios.

    Attributes
    ----------
    axes : tuple of RatioAxis
        (horizontal, vertical).
    box : tuple of (float, float)
        ((lo_1, hi_1), (lo_2, hi_2)), the displayed region.
    scale : str
    rule_cells : DataFrame
    weights : ndarray of shape (n_groups,)
    robust : list of AssumptionInfo
        Point estimate first, then each Gamma, then the monotone bounds.
    margins : ndarray of shape (n_assumptions, n_groups, L - 1, 3)
        Half-plane coefficients: leniency is (robustly) optimal in rule cell g iff
        m0 + m1 r1 + m2 r2 <= 0 for every row.
    A, B : ndarray of shape (n_groups, L), (2, n_groups, L)
        Rule-cell cost lines of the point estimate: T_g(d) = A + r1 B[0] + r2 B[1].
    """

    axes: tuple[RatioAxis, RatioAxis]
    box: tuple[tuple[float, float], tuple[float, float]]
    scale: str
    rule_cells: pd.DataFrame
    weights: np.ndarray
    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    robust: list[AssumptionInfo]
    margins: np.ndarray
    A: np.ndarray
    B: np.ndarray

    @property
    def total(self) -> float:
        return float(self.weights.sum())

    def lenient_at(self, points: np.ndarray, assumption: int = 0) -> np.ndarray:
        """Whether leniency is (robustly) optimal in each rule cell at each point, shape (P, n_groups)."""
        pts = np.atleast_2d(np.asarray(points, dtype=np.float64))
        m = self.margins[assumption]
        delta = m[None, :, :, 0] + pts[:, 0, None, None] * m[None, :, :, 1] + pts[:, 1, None, None] * m[None, :, :, 2]
        return np.all(delta <= 0, axis=-1)

    def share_at(self, points: np.ndarray, assumption: int = 0, chunk: int = 4096) -> np.ndarray:
        """Exact share of cases for which leniency is (robustly) optimal at each point, shape (P,)."""
        pts = np.atleast_2d(np.asarray(points, dtype=np.float64))
        out = np.empty(len(pts))
        for s in range(0, len(pts), chunk):
            out[s:s + chunk] = self.lenient_at(pts[s:s + chunk], assumption) @ self.weights / self.total
        return out

    def levels_at(self, point: Sequence[float]) -> np.ndarray:
        """Optimal level of each rule cell at one point (point estimate; ties to the lenient level)."""
        total = self.A + point[0] * self.B[0] + point[1] * self.B[1]
        return argmin_lenient(total)

    def grid_axes(self, points: int = 200) -> tuple[np.ndarray, np.ndarray]:
        """Display grid coordinates along each axis (linear or log spaced)."""
        space = np.geomspace if self.scale == "log" else np.linspace
        return space(*self.box[0], points), space(*self.box[1], points)

    def grid(self, points: int = 200, assumption: int = 0, x: np.ndarray | None = None,
             y: np.ndarray | None = None) -> np.ndarray:
        """Exact lenient share on a display grid, shape (len(y), len(x)).

        Notes
        -----
        For each grid row r2 = y_i the lenient ratios r1 of rule cell g form the closed interval
        where (m0 + m2 y_i) + m1 r1 <= 0 for every comparison; the share along the row is the
        weight of the intervals holding each x, from two sorted cumulative sums.
        """
        if x is None or y is None:
            x, y = self.grid_axes(points)
        m = self.margins[assumption]
        const = m[None, :, :, 0] + y[:, None, None] * m[None, :, :, 2]
        slope = np.broadcast_to(m[None, :, :, 1], const.shape)
        low, high = lenient_intervals(const, slope)
        empty = np.isnan(low)
        low = np.where(empty, np.inf, low)
        high = np.where(empty, np.inf, high)
        out = np.empty((len(y), len(x)))
        w = self.weights
        for i in range(len(y)):
            ol, oh = np.argsort(low[i]), np.argsort(high[i])
            cl = np.concatenate([[0.0], np.cumsum(w[ol])])
            ch = np.concatenate([[0.0], np.cumsum(w[oh])])
            started = cl[np.searchsorted(low[i][ol], x, side="right")]
            ended = ch[np.searchsorted(high[i][oh], x, side="left")]
            out[i] = (started - ended) / self.total
        return out

    def polygons(self, assumption: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """Each rule cell's lenient region clipped to the box: padded vertices (n, M, 2), counts."""
        (x0, x1), (y0, y1) = self.box
        n = len(self.weights)
        box = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=np.float64)
        V = np.broadcast_to(box, (n, 4, 2)).copy()
        return clip_polygons(V, np.full(n, 4), self.margins[assumption])

    def polygon_table(self) -> pd.DataFrame:
        """Vertices of every rule cell's lenient polygon under every assumption: ``assumption``,
        ``assumption_label``, ``gamma``, rule columns, ``cases``, ``vertex``, ``ratio_1``,
        ``ratio_2``, ``cost_1``, ``cost_2``, ``area_share`` (the polygon's share of the box)."""
        groups = _plain_groups(self.rule_cells)
        (x0, x1), (y0, y1) = self.box
        box_area = (x1 - x0) * (y1 - y0)
        frames = []
        for a, info in enumerate(self.robust):
            V, cnt = self.polygons(a)
            area = polygon_area(V, cnt) / box_area
            g, v = np.nonzero(np.arange(V.shape[1])[None, :] < cnt[:, None])
            f = groups.iloc[g].reset_index(drop=True)
            f.insert(0, "gamma", info.table_gamma)
            f.insert(0, "assumption_label", info.label)
            f.insert(0, "assumption", info.key)
            f["cases"] = self.weights[g]
            f["vertex"] = v
            f["ratio_1"], f["ratio_2"] = V[g, v, 0], V[g, v, 1]
            f["cost_1"] = V[g, v, 0] * self.axes[0].reference_cost
            f["cost_2"] = V[g, v, 1] * self.axes[1].reference_cost
            f["area_share"] = area[g]
            frames.append(f)
        return pd.concat(frames, ignore_index=True)

    def grid_table(self, points: int = 200) -> pd.DataFrame:
        """Tidy display grid: ``assumption``, ``assumption_label``, ``gamma``, ``ratio_1``,
        ``ratio_2``, ``cost_1``, ``cost_2``, ``share_lenient``."""
        x, y = self.grid_axes(points)
        X, Y = np.meshgrid(x, y)
        frames = []
        for a, info in enumerate(self.robust):
            frames.append(pd.DataFrame({
                "assumption": info.key, "assumption_label": info.label, "gamma": info.table_gamma,
                "ratio_1": X.ravel(), "ratio_2": Y.ravel(),
                "cost_1": X.ravel() * self.axes[0].reference_cost, "cost_2": Y.ravel() * self.axes[1].reference_cost,
                "share_lenient": self.grid(points, a, x, y).ravel(),
            }))
        return pd.concat(frames, ignore_index=True)

    def summary(self) -> pd.DataFrame:
        """Per assumption: the share of cases for which leniency is optimal at the scenario's ratios."""
        p = np.array([[a.scenario_ratio for a in self.axes]])
        return pd.DataFrame([{"assumption": info.label, "share lenient at the scenario's ratios": float(self.share_at(p, a)[0])}
                             for a, info in enumerate(self.robust)])

    def __str__(self) -> str:
        (x0, x1), (y0, y1) = self.box
        lines = [f"Lenient map over {self.axes[0].title} ({x0:g} to {x1:g}) and {self.axes[1].title} "
                 f"({y0:g} to {y1:g}); {len(self.weights):,} rule cells.",
                 self.summary().to_string(index=False, float_format=lambda v: f"{v:.1%}")]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return "<pre>" + str(self).replace("&", "&amp;").replace("<", "&lt;") + "</pre>"


def lenient_map(risk_levels: RiskLevels, costs: Costs, axes: Sequence[RatioAxis],
                box: Sequence[Sequence[float]], columns: Sequence[str] | None = None,
                assumptions: Sequence[RiskBounds] = (), scale: str = "linear") -> LenientMap:
    """Exact two-ratio map of where leniency is optimal, with robust regions.

    Parameters
    ----------
    risk_levels, costs : RiskLevels, Costs
    axes : two RatioAxis
    box : ((lo_1, hi_1), (lo_2, hi_2))
        The displayed region (the half-planes themselves are exact everywhere).
    columns : sequence of str, optional
        Rule columns (default: the scenario's rule covariates).
    assumptions : sequence of RiskBounds
        Default the point estimate alone.
    scale : {'linear', 'log'}
    """
    if len(axes) != 2:
        raise InputError(f"a map needs exactly two ratios; got {len(axes)}.")
    (x0, x1), (y0, y1) = box
    _check_range(x0, x1, scale, "first range")
    _check_range(y0, y1, scale, "second range")
    index, groups, weights = _rule_cells(risk_levels, columns)
    base, slope = cost_lines(risk_levels, costs, axes)
    M = aggregation_matrix(index, len(groups), risk_levels.weights)
    A = M @ base
    B = np.stack([M @ s for s in slope])
    bs = list(assumptions or [point_bounds(risk_levels)])
    margins = np.stack([_margins(risk_levels, costs, axes, index, len(groups), b, A, B) for b in bs])
    return LenientMap(tuple(axes), ((float(x0), float(x1)), (float(y0), float(y1))), scale, groups, weights,
                      risk_levels.level_values, risk_levels.level_labels, [_info(b) for b in bs], margins, A, B)
