"""Lenient regions: where release at the most lenient level stays optimal, as intervals of one
ratio and convex polygons over two (half-plane clipping)."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from policy.estimation.bounds import RiskBounds, point_bounds
from policy.decision.costs import Costs
from policy.decision.solve import aggregation_matrix
from policy.estimation.strata import RiskLevels
from policy.assessment.sweep.axes import RatioAxis
from policy.assessment.sweep.envelope import StepFunction


# ----------------------------------------------------------------------------------------------
# Lenient regions: margins, intervals, polygons
# ----------------------------------------------------------------------------------------------
def lenient_margins(risk_levels: RiskLevels, costs: Costs, axes: Sequence[RatioAxis], index: np.ndarray,
                    n_groups: int, bounds: RiskBounds | None = None) -> np.ndarray:
    """Coefficients of the largest possible advantage of the lenient level, per rule cell.

    Parameters
    ----------
    risk_levels, costs : RiskLevels, Costs
    axes : sequence of RatioAxis
        The swept ratios r_1..r_K.
    index : ndarray of shape (n_cells,)
        Rule cell of each cell.
    n_groups : int
    bounds : RiskBounds, optional
        Intervals for p; default the point estimate.

    Returns
    -------
    ndarray of shape (n_groups, L - 1, 1 + K)
        ``M[g, d-1] = (m0, m1, ..., mK)`` with Delta_g(d; r) = m0 + sum_a r_a m_a, where
        Delta_g(d) = sum_{x in g} w [c_dec(0, x) - c_dec(d, x)
        + sum_k c_k (upper_k0(x) - lower_kd(x))]. Leniency is optimal for every distribution
        within the bounds iff Delta_g(d) <= 0 for every d >= 1.
    """
    b = bounds if bounds is not None else point_bounds(risk_levels)
    diff = b.upper[:, :, :1] - b.lower[:, :, 1:]  # (n_cells, J, L-1)
    swept = [a.outcome_index for a in axes]
    fixed = costs.outcome.astype(np.float64).copy()
    fixed[swept] = 0.0
    const = costs.decision[:, :1] - costs.decision[:, 1:] + np.einsum("xjd,j->xd", diff, fixed)
    parts = [const] + [a.reference_cost * diff[:, a.outcome_index, :] for a in axes]
    per_cell = np.stack(parts, axis=-1)  # (n_cells, L-1, 1+K)
    M = aggregation_matrix(index, n_groups, risk_levels.weights)
    n, Lm1, K1 = per_cell.shape
    return np.asarray(M @ per_cell.reshape(n, -1)).reshape(n_groups, Lm1, K1)


def _margins(risk_levels: RiskLevels, costs: Costs, axes: Sequence[RatioAxis], index: np.ndarray, n_groups: int,
             bounds: RiskBounds, A: np.ndarray, B: Sequence[np.ndarray]) -> np.ndarray:
    """:func:`lenient_margins`, read off the rule-cell cost lines when the bounds are the point
    estimate itself (then Delta_g(d) = T_g(0) - T_g(d) exactly, the envelope's own numbers)."""
    if bounds.lower is risk_levels.p and bounds.upper is risk_levels.p:
        parts = [A[:, :1] - A[:, 1:]] + [b[:, :1] - b[:, 1:] for b in B]
        return np.stack(parts, axis=-1)
    return lenient_margins(risk_levels, costs, axes, index, n_groups, bounds)


def lenient_intervals(const: np.ndarray, slope: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The closed interval of r where const + r slope <= 0 for every column.

    Parameters
    ----------
    const, slope : ndarray of shape (..., m)

    Returns
    -------
    low, high : ndarray of shape (...)
        The interval [low, high] (possibly infinite ends); empty rows have low = high = nan.
    """
    # comparison-major: the reductions over the few comparisons are elementwise passes
    c = np.ascontiguousarray(np.moveaxis(np.asarray(const, dtype=np.float64), -1, 0))
    b = np.ascontiguousarray(np.moveaxis(np.asarray(slope, dtype=np.float64), -1, 0))
    with np.errstate(invalid="ignore", divide="ignore"):
        root = -c / b
    low = np.maximum.reduce(np.where(b < 0, root, -np.inf), axis=0)
    high = np.minimum.reduce(np.where(b > 0, root, np.inf), axis=0)
    never = np.logical_or.reduce((b == 0) & (c > 0), axis=0) | (low > high)
    return np.where(never, np.nan, low), np.where(never, np.nan, high)


def interval_shares(low: np.ndarray, high: np.ndarray, weights: np.ndarray) -> StepFunction:
    """Cases whose closed interval [low, high] holds r, as a step function (k = 1)."""
    ok = ~np.isnan(low)
    low, high, w = low[ok], high[ok], weights[ok]
    initial = np.array([w[np.isneginf(low)].sum()])
    start = np.isfinite(low)
    stop = np.isfinite(high)
    knots = np.concatenate([low[start], high[stop]])
    d_right = np.concatenate([w[start], -w[stop]])[:, None]
    d_at = np.concatenate([w[start], np.zeros(int(stop.sum()))])[:, None]
    return StepFunction.from_events(initial, knots, d_right, d_at)


def clip_polygons(vertices: np.ndarray, count: np.ndarray, halfplanes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Clip convex polygons by half-planes h0 + h1 x + h2 y <= 0 (Sutherland-Hodgman), vectorized.

    Parameters
    ----------
    vertices : ndarray of shape (n, M, 2)
        Counter-clockwise vertices, padded beyond ``count``.
    count : ndarray of shape (n,)
    halfplanes : ndarray of shape (n, H, 3)

    Returns
    -------
    vertices : ndarray of shape (n, M', 2)
    count : ndarray of shape (n,)
        0 for an empty region. Repeated consecutive vertices are removed.
    """
    V, cnt = np.asarray(vertices, dtype=np.float64), np.asarray(count, dtype=np.int64)
    n = V.shape[0]
    rows = np.arange(n)[:, None]
    for h in range(halfplanes.shape[1]):
        M = V.shape[1]
        if M == 0:
            break
        i = np.arange(M)[None, :]
        valid = i < cnt[:, None]
        nxt = np.where(cnt[:, None] > 0, (i + 1) % np.maximum(cnt[:, None], 1), 0)
        c = halfplanes[:, h, :]
        s = c[:, None, 0] + c[:, None, 1] * V[..., 0] + c[:, None, 2] * V[..., 1]
        s_next = s[rows, nxt]
        inside, inside_next = s <= 0, s_next <= 0
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            t = s / (s - s_next)
            cross = V + t[..., None] * (V[rows, nxt] - V)
        keep_v = valid & inside
        keep_x = valid & (inside != inside_next)
        out = np.stack([V, cross], axis=2).reshape(n, 2 * M, 2)
        mask = np.stack([keep_v, keep_x], axis=2).reshape(n, 2 * M)
        V, cnt = _compact(out, mask)
        V, cnt = _drop_repeats(V, cnt)
    return V, cnt


def _compact(points: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    order = np.argsort(~mask, axis=1, kind="stable")
    cnt = mask.sum(axis=1)
    width = int(cnt.max()) if len(cnt) else 0
    pts = np.take_along_axis(points, order[..., None], axis=1)[:, :width]
    return pts, cnt


def _drop_repeats(V: np.ndarray, cnt: np.ndarray, tol: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    if V.shape[1] == 0:
        return V, cnt
    n, M, _ = V.shape
    i = np.arange(M)[None, :]
    prev = (i - 1) % np.maximum(cnt[:, None], 1)
    rows = np.arange(n)[:, None]
    scale = tol * np.maximum(1.0, np.abs(V).max(axis=(1, 2)))[:, None]
    same = np.all(np.abs(V - V[rows, prev]) <= scale[..., None], axis=-1) & (cnt[:, None] > 1)
    keep = (i < cnt[:, None]) & ~same
    V, cnt = _compact(V, keep)
    # a polygon with fewer than 3 distinct vertices encloses nothing
    return V, np.where(cnt >= 3, cnt, 0)


def polygon_area(vertices: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Shoelace area of each padded polygon, shape (n,)."""
    n, M, _ = vertices.shape
    if M == 0:
        return np.zeros(n)
    i = np.arange(M)[None, :]
    nxt = (i + 1) % np.maximum(count[:, None], 1)
    rows = np.arange(n)[:, None]
    x, y = vertices[..., 0], vertices[..., 1]
    cross = x * y[rows, nxt] - x[rows, nxt] * y
    return 0.5 * np.abs(np.sum(np.where(i < count[:, None], cross, 0.0), axis=1))
