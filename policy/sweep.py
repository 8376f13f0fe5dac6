"""Cost-ratio sweeps: where each decision level, and lenient release above all, stays optimal.

Costs are value judgments, so the tool shows how the optimal rule changes as one or two of
them vary (method notes, section 7).

**The ratio.** A swept outcome kind j gets one cost c_j for every case, read on the axis as a
ratio to a reference decision cost: r_j = c_j / c_ref, where c_ref is the case-weighted mean cost
of imposing the reference level (by default the harshest) over all cells,
c_ref = sum_x w(x) c_dec(ref, x) / sum_x w(x). A decision cost that varies by cell (a bond
whose cost depends on the expected days held) therefore keeps its variation; the axis is the
outcome's cost in units of the average harshest-level cost, and the tables also give c_j in
the scenario's own unit. Every cost that is not swept stays at the scenario's value.

**One ratio, exact.** The total expected cost of decision d in rule cell g,
T_g(d; r) = sum_{x in g} w(x) C(d, x) = A_g(d) + r B_g(d), is a line in r with
A_g(d) = sum_x w (c_dec(d, x) + sum_{k != j} c_k p_kd(x)) and B_g(d) = c_ref sum_x w p_jd(x).
The optimal level is the lower envelope of the L lines; it is piecewise constant with at most
L - 1 breakpoints, each the crossing r = (A_g(a) - A_g(b)) / (B_g(b) - B_g(a)) of the two lines
optimal on either side. Moving right along r the active line's slope strictly decreases;
since p_jd is non-increasing in d, the optimal level never becomes more lenient as r grows.
At a breakpoint the tied levels include the one on the left, the more lenient, which the rule
takes. The share of cases at each level is a step function whose knots are the union of the
breakpoints; the optimal total cost is concave and piecewise linear with the same knots, and a
fixed compared rule's total cost is one line, so its regret is exactly piecewise linear.

**Two ratios, exact.** Leniency (level 0) is optimal in rule cell g iff, for every d >= 1,
Delta_g(d; r1, r2) = T_g(0) - T_g(d) <= 0 (ties go to the lenient level): an intersection of
L - 1 half-planes, a convex polygon once clipped to the displayed box. The share of cases for
which leniency is optimal is exact at any point; on a display grid each row is computed from
the exact interval of r1 in which each cell stays lenient.

**Robust lenient region.** With an interval [lower, upper] for every p_jd(x)
(:mod:`policy.bounds`: the monotone-response bounds or the sensitivity model with parameter
Gamma), leniency is optimal for every consistent distribution iff, for every d >= 1,
sum_x w [c_dec(0, x) - c_dec(d, x)] + sum_k c_k sum_x w (upper_k0(x) - lower_kd(x)) <= 0,
since every c_k >= 0. This is still linear in the swept costs, so the robust region is again
an interval of r (one ratio) or a convex polygon (two ratios). Wider intervals only raise the
left side, so the regions are nested: Gamma = 1 (the point estimate) contains every larger Gamma.

References
----------
Elkan, C. (2001). The foundations of cost-sensitive learning. IJCAI. (With one outcome and
two levels the breakpoint is the cost-sensitive threshold.)
Manski, C. F. (1997). Monotone treatment response. Econometrica 65(6), 1311-1334.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from .bounds import MISSING_TREATMENTS, RiskBounds, point_bounds, robust_assumptions
from .cautions import ASSUMPTIONS, CAUTIONS, assumptions_for
from .costs import Costs, costs_from_scenario
from .errors import InputError
from .pipeline import as_scenario, estimate
from .rules import Rule
from .solve import aggregation_matrix, argmin_lenient, optimal_rule
from .strata import RiskLevelEstimator, RiskLevels

__all__ = [
    "RatioAxis",
    "ratio_axis",
    "cost_lines",
    "Envelope",
    "lower_envelope",
    "StepFunction",
    "PiecewiseLinear",
    "lenient_margins",
    "lenient_intervals",
    "clip_polygons",
    "OneRatioSweep",
    "LenientMap",
    "sweep_one",
    "lenient_map",
    "SweepResult",
    "sweep_scenario",
    "assumption_lines",
    "default_range",
    "level_thresholds",
    "lenient_replicates",
    "LenientReplicates",
    "SweepBands",
    "sweep_bands",
]

#: relative tolerance under which two crossings of lines count as one point
CONCURRENT_TOLERANCE = 1e-9
#: Gamma values of the robust regions when none are given
DEFAULT_GAMMAS = (1.1, 1.25, 1.5)
SCALES = ("linear", "log")


# ----------------------------------------------------------------------------------------------
# The swept ratio
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RatioAxis:
    """One swept cost: outcome kind j's cost as a ratio to a reference decision cost.

    Attributes
    ----------
    outcome, outcome_index, outcome_label : str, int, str
        The swept outcome kind.
    reference_level, reference_label : int, str
        The decision level whose mean cost is the denominator.
    reference_cost : float
        c_ref = sum_x w(x) c_dec(ref, x) / sum_x w(x), in ``unit``.
    unit : str
    scenario_ratio : float
        The scenario's own cost of the outcome over c_ref.
    """

    outcome: str
    outcome_index: int
    outcome_label: str
    reference_level: int
    reference_label: str
    reference_cost: float
    unit: str
    scenario_ratio: float

    @property
    def title(self) -> str:
        """Axis title: what the ratio divides by what."""
        return f"cost of one {self.outcome_label} / mean cost of {self.reference_label}"

    @property
    def cost_title(self) -> str:
        return f"cost of one {self.outcome_label} ({self.unit})" if self.unit else f"cost of one {self.outcome_label}"

    def describe(self) -> dict[str, Any]:
        return {
            "outcome": self.outcome,
            "outcome_label": self.outcome_label,
            "reference_level": self.reference_label,
            "reference_cost": self.reference_cost,
            "unit": self.unit,
            "scenario_ratio": self.scenario_ratio,
            "definition": (f"ratio = cost of one {self.outcome_label} / {self.reference_cost:.6g} {self.unit}, the "
                           f"case-weighted mean cost of {self.reference_label}"),
        }


def ratio_axis(risk_levels: RiskLevels, costs: Costs, outcome: str, per: str | None = None) -> RatioAxis:
    """The swept ratio of one outcome kind's cost to a reference decision level's mean cost.

    Parameters
    ----------
    risk_levels : RiskLevels
        Supplies the cells' weights.
    costs : Costs
        The scenario's costs (the decision costs per cell give the reference cost).
    outcome : str
        Outcome key or label.
    per : str, optional
        Reference decision level (value or label); default the harshest.
    """
    keys, labels = risk_levels.outcome_keys, risk_levels.outcome_labels
    values, level_labels = risk_levels.level_values, risk_levels.level_labels
    j = _position(outcome, keys, labels, "ratio", "an outcome kind of the scenario")
    ref = len(values) - 1 if per is None else _position(per, values, level_labels, "reference level", "a decision level")
    w = risk_levels.weights
    c_ref = float(np.sum(w * costs.decision[:, ref]) / np.sum(w))
    if not c_ref > 0:
        raise InputError(
            f"the mean cost of decision level {values[ref]!r} is {c_ref:g}; a ratio needs a reference level "
            "whose cost is above 0 (choose another with --per)."
        )
    return RatioAxis(keys[j], j, labels[j], ref, level_labels[ref], c_ref, costs.unit,
                     float(costs.outcome[j]) / c_ref)


def _position(name: str, keys: Sequence[str], labels: Sequence[str], what: str, kind: str) -> int:
    """Position of ``name`` among keys (or, failing that, labels); a clear error otherwise."""
    for names in (keys, labels):
        if name in names:
            return list(names).index(name)
    raise InputError(f"{what} {name!r} is not {kind}; expected one of: {', '.join(keys)}.")


def cost_lines(risk_levels: RiskLevels, costs: Costs, axes: Sequence[RatioAxis]) -> tuple[np.ndarray, np.ndarray]:
    """Per-case expected cost as an affine function of the swept ratios.

    Returns
    -------
    base : ndarray of shape (n_cells, L)
        c_dec(d, x) + sum over outcome kinds not swept of c_k p_kd(x).
    slope : ndarray of shape (n_axes, n_cells, L)
        c_ref p_jd(x) for each swept outcome j: C(d, x; r) = base + sum_a r_a slope[a].
    """
    swept = [a.outcome_index for a in axes]
    if len(set(swept)) != len(swept):
        raise InputError("each ratio must sweep a different outcome kind.")
    fixed = costs.outcome.astype(np.float64).copy()
    fixed[swept] = 0.0
    base = costs.decision + np.matmul(fixed, risk_levels.p)
    slope = np.stack([a.reference_cost * risk_levels.p[:, a.outcome_index, :] for a in axes])
    return base, slope


# ----------------------------------------------------------------------------------------------
# Exact one-ratio machinery: lower envelopes, step functions, piecewise-linear functions
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Envelope:
    """The lower envelope of L lines A[g, d] + r B[g, d] for every row g, over the whole real line.

    Attributes
    ----------
    breaks : ndarray of shape (n, L - 1)
        Breakpoints in increasing order; +inf beyond ``count``.
    levels : ndarray of shape (n, L)
        ``levels[g, s]`` is optimal between ``breaks[g, s-1]`` and ``breaks[g, s]`` (segment 0
        starts at -inf); -1 beyond ``count + 1``.
    at_break : ndarray of shape (n, L - 1)
        Level at the breakpoint itself: the most lenient of the levels tied there; -1 beyond.
    count : ndarray of shape (n,)
        Number of breakpoints of each row.
    """

    breaks: np.ndarray
    levels: np.ndarray
    at_break: np.ndarray
    count: np.ndarray

    @property
    def n(self) -> int:
        return self.levels.shape[0]

    def level_at(self, r: float | np.ndarray) -> np.ndarray:
        """The optimal level of each row at ratio(s) ``r``; shape ``np.shape(r) + (n,)``."""
        r = np.asarray(r, dtype=np.float64)
        rr = r[..., None, None]
        seg = np.sum(self.breaks < rr, axis=-1)
        rows = np.arange(self.n)
        level = self.levels[rows, seg]
        on = self.breaks == rr
        hit = on.any(axis=-1)
        at = self.at_break[rows, np.argmax(on, axis=-1)]
        return np.where(hit, at, level)

    def lenient_until(self) -> np.ndarray:
        """For each row, the end of its first segment if that segment is level 0 (else -inf)."""
        first_end = self.breaks[:, 0]
        return np.where(self.levels[:, 0] == 0, first_end, -np.inf)


def lower_envelope(A: np.ndarray, B: np.ndarray) -> Envelope:
    """Exact lower envelope of the lines A[g, d] + r B[g, d], rows independent, ties to lower d.

    Parameters
    ----------
    A, B : ndarray of shape (n, L)
        Intercepts and slopes.

    Returns
    -------
    Envelope

    Notes
    -----
    A kinetic sweep from r = -inf, vectorized over rows: start on the line of largest slope
    (ties: smaller intercept, then lower index); repeatedly move to the earliest crossing
    r = (A_k - A_c) / (B_c - B_k) of the current line c with a line of smaller slope, taking,
    among lines concurrent there, the one of smallest slope (then lower index). Each move lowers
    the slope, so there are at most L - 1 moves. Each breakpoint is the crossing of the two
    lines optimal on either side, computed by one division.
    """
    # level-major (L, n) layout: reductions over the few levels become fast elementwise passes
    At = np.ascontiguousarray(np.asarray(A, dtype=np.float64).T)
    Bt = np.ascontiguousarray(np.asarray(B, dtype=np.float64).T)
    L, n = At.shape
    K = max(L - 1, 0)
    cols = np.arange(n)
    breaks = np.full((n, K), np.inf)
    levels = np.full((n, L), -1, dtype=np.int64)
    at_break = np.full((n, K), -1, dtype=np.int64)
    count = np.zeros(n, dtype=np.int64)
    top = np.where(Bt == Bt.max(axis=0), At, np.inf)
    cur = _first_true(top == top.min(axis=0))
    levels[:, 0] = cur
    pos = np.full(n, -np.inf)
    for _ in range(K):
        a_c, b_c = At[cur, cols], Bt[cur, cols]
        dB = b_c - Bt
        cand = dB > 0
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            tau = (At - a_c) / dB
        tau[~cand] = np.inf
        t = tau.min(axis=0)
        moving = t < np.inf
        if not moving.any():
            break
        tol = CONCURRENT_TOLERANCE * np.maximum(1.0, np.abs(np.where(moving, t, 0.0)))
        conc = tau <= t + tol
        b_conc = np.where(conc, Bt, np.inf)
        nxt = _first_true(conc & (b_conc == b_conc.min(axis=0)))
        tied_low = np.minimum(cur, _first_true(conc))
        # a crossing at the previous breakpoint (rounding) belongs to that breakpoint
        merge = moving & (t <= pos + tol)
        new = moving & ~merge
        if merge.any():
            m = np.flatnonzero(merge)
            levels[m, count[m]] = nxt[m]
            at_break[m, count[m] - 1] = np.minimum(at_break[m, count[m] - 1], tied_low[m])
        m = np.flatnonzero(new)
        breaks[m, count[m]] = t[m]
        at_break[m, count[m]] = tied_low[m]
        levels[m, count[m] + 1] = nxt[m]
        count = count + new
        pos = np.where(new, t, pos)
        cur = np.where(moving, nxt, cur)
    return Envelope(breaks, levels, at_break, count)


def _first_true(mask: np.ndarray) -> np.ndarray:
    """Position of the first True along the (short) first axis, 0 where there is none."""
    first = np.zeros(mask.shape[1:], dtype=np.int64)
    for d in range(mask.shape[0] - 1, -1, -1):
        first[mask[d]] = d
    return first


@dataclass(frozen=True)
class StepFunction:
    """A vector-valued step function of one real variable, exact at and between its knots.

    Attributes
    ----------
    knots : ndarray of shape (m,)
        Strictly increasing.
    between : ndarray of shape (m + 1, k)
        Values on (-inf, knots[0]), (knots[0], knots[1]), ..., (knots[-1], inf).
    at : ndarray of shape (m, k)
        Values at the knots themselves.
    """

    knots: np.ndarray
    between: np.ndarray
    at: np.ndarray

    @classmethod
    def from_events(cls, initial: np.ndarray, knots: np.ndarray, d_right: np.ndarray, d_at: np.ndarray) -> "StepFunction":
        """Build from changes at event points.

        Parameters
        ----------
        initial : ndarray of shape (k,)
            Value left of every event.
        knots : ndarray of shape (E,)
            Event points (may repeat).
        d_right : ndarray of shape (E, k)
            Change of the value from the left to the right of each event.
        d_at : ndarray of shape (E, k)
            Change of the value from the left of each event to the event point itself.
        """
        initial = np.asarray(initial, dtype=np.float64)
        k = initial.shape[-1]
        if len(knots) == 0:
            return cls(np.zeros(0), initial[None, :].copy(), np.zeros((0, k)))
        order = np.argsort(knots)
        ordered = knots[order]
        starts = np.flatnonzero(np.concatenate([[True], ordered[1:] != ordered[:-1]]))
        # component-major (k, E): sums and running sums along contiguous rows
        right = np.ascontiguousarray(np.asarray(d_right, dtype=np.float64).T)[:, order]
        at = np.ascontiguousarray(np.asarray(d_at, dtype=np.float64).T)[:, order]
        if len(starts) < len(ordered):
            right = np.add.reduceat(right, starts, axis=1)
            at = np.add.reduceat(at, starts, axis=1)
        between = np.empty((k, len(starts) + 1))
        between[:, 0] = initial
        np.cumsum(right, axis=1, out=between[:, 1:])
        between[:, 1:] += initial[:, None]
        return cls(ordered[starts], between.T.copy(), (between[:, :-1] + at).T.copy())

    def __call__(self, x: float | np.ndarray) -> np.ndarray:
        """Values at ``x``; shape ``np.shape(x) + (k,)``."""
        x = np.asarray(x, dtype=np.float64)
        i = np.searchsorted(self.knots, x, side="left")
        value = self.between[i]
        if len(self.knots):
            j = np.minimum(i, len(self.knots) - 1)
            hit = (i < len(self.knots)) & (self.knots[j] == x)
            value = np.where(hit[..., None], self.at[j], value)
        return value

    def pieces(self, lo: float, hi: float) -> tuple[np.ndarray, np.ndarray]:
        """The function on [lo, hi]: edges (lo, interior knots..., hi) and the value on each open piece.

        Returns
        -------
        edges : ndarray of shape (p + 1,)
        values : ndarray of shape (p, k)
        """
        inside = (self.knots > lo) & (self.knots < hi)
        interior = self.knots[inside]
        edges = np.concatenate([[lo], interior, [hi]])
        first = np.searchsorted(self.knots, lo, side="right")
        return edges, self.between[first: first + len(interior) + 1]


@dataclass(frozen=True)
class PiecewiseLinear:
    """A continuous piecewise-linear function given exactly by its values at its knots."""

    x: np.ndarray
    y: np.ndarray

    def __call__(self, r: float | np.ndarray) -> np.ndarray:
        return np.interp(r, self.x, self.y)


def _break_events(env: Envelope) -> tuple[np.ndarray, np.ndarray]:
    """Row and position of every breakpoint of an envelope (grouped by position)."""
    rows = [np.flatnonzero(env.count > k) for k in range(env.breaks.shape[1])]
    if not rows:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    return np.concatenate(rows), np.repeat(np.arange(len(rows)), [len(r) for r in rows])


def envelope_functions(env: Envelope, weights: np.ndarray, A: np.ndarray, B: np.ndarray) -> tuple[StepFunction, StepFunction]:
    """The two step functions of an envelope, built together from one sort of its breakpoints.

    Returns
    -------
    shares : StepFunction
        Cases at each optimal level (k = L components).
    total : StepFunction
        (intercept, slope) of the optimal total cost sum_g min_d (A + r B), which is
        continuous, concave and piecewise linear (k = 2); at a breakpoint it equals the left value.
    """
    n, L = A.shape
    rows = np.arange(n)
    l0 = env.levels[:, 0]
    # components 0..L-1: cases at each level; L, L+1: intercept and slope of the optimal total
    initial = np.concatenate([np.bincount(l0, weights=weights, minlength=L), [A[rows, l0].sum(), B[rows, l0].sum()]])
    g, s = _break_events(env)
    knots = env.breaks[g, s]
    order = np.argsort(knots)
    g, s, knots = g[order], s[order], knots[order]
    first = np.concatenate([[True], knots[1:] != knots[:-1]])
    uniq = knots[first]
    w = weights[g]
    before, after, at = env.levels[g, s], env.levels[g, s + 1], env.at_break[g, s]
    E = len(g)
    e = np.arange(E)
    # component-major changes at each event (sorted): running sums along contiguous rows
    change = np.zeros((L + 2, E))
    change[after, e] = w
    change[before, e] = -w
    change[L] = A[g, after] - A[g, before]
    change[L + 1] = B[g, after] - B[g, before]
    if len(uniq) < E:
        change = np.add.reduceat(change, np.flatnonzero(first), axis=1)
    between = np.empty((L + 2, len(uniq) + 1))
    between[:, 0] = initial
    np.cumsum(change, axis=1, out=between[:, 1:])
    between[:, 1:] += initial[:, None]
    # at a breakpoint the rule takes the most lenient tied level: the left value, except where
    # that level is neither side's (several lines meeting at one point)
    at_values = between[:L, :-1].copy()
    odd = np.flatnonzero(at != before)
    if len(odd):
        k = np.cumsum(first)[odd] - 1
        np.add.at(at_values, (at[odd], k), w[odd])
        np.add.at(at_values, (before[odd], k), -w[odd])
    shares = StepFunction(uniq, between[:L].T, at_values.T)
    total = StepFunction(uniq, between[L:].T, between[L:, :-1].T)
    return shares, total


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


# ----------------------------------------------------------------------------------------------
# Results
# ----------------------------------------------------------------------------------------------
def _check_range(lo: float, hi: float, scale: str, what: str = "range") -> None:
    if scale not in SCALES:
        raise InputError(f"scale must be one of {', '.join(SCALES)}; got {scale!r}.")
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise InputError(f"the {what} must be two finite numbers, low < high; got {lo!r} to {hi!r}.")
    if lo < 0:
        raise InputError(f"the {what} starts at {lo!r}; a cost ratio cannot be negative.")
    if scale == "log" and lo <= 0:
        raise InputError(f"a log scale needs a {what} above 0; got {lo!r} to {hi!r}.")


def default_range(axis: RatioAxis, scale: str) -> tuple[float, float]:
    """The range shown when none is given: 0 to 4x the scenario's ratio (linear), or the
    scenario's ratio divided and multiplied by 20 (log)."""
    r = axis.scenario_ratio
    if not r > 0:
        raise InputError(f"the scenario's cost of {axis.outcome_label} is 0, so no default range follows from it; give one.")
    return (r / 20.0, r * 20.0) if scale == "log" else (0.0, 4.0 * r)


def _rule_cells(risk_levels: RiskLevels, columns: Sequence[str] | None) -> tuple[np.ndarray, pd.DataFrame, np.ndarray]:
    index, groups = risk_levels.layout.rule_index(columns)
    weights = np.bincount(index, weights=risk_levels.weights, minlength=len(groups))
    return index, groups, weights


def _plain_groups(groups: pd.DataFrame) -> pd.DataFrame:
    out = groups.reset_index(drop=True).copy()
    for c in out.columns:
        out[c] = out[c].astype(object)
    return out


@dataclass(frozen=True)
class AssumptionInfo:
    """What a robust region assumes (a summary of :class:`policy.bounds.RiskBounds`)."""

    key: str
    label: str
    gamma: float
    figure: str
    assumptions: tuple[str, ...]

    @property
    def table_gamma(self) -> float:
        """Gamma as written in tables: empty (nan) for the monotone bounds, which have none."""
        return self.gamma if np.isfinite(self.gamma) else np.nan


def assumption_lines(figure: str, robust: Sequence[AssumptionInfo | RiskBounds]) -> list[str]:
    """Plain statements of what a sweep's curves assume: those common to every curve (the
    figure kind's, :data:`policy.cautions.FIGURE_ASSUMPTIONS`), then what each robust
    assumption adds, then the caution on individual decisions."""
    common = assumptions_for(figure)
    lines = ["Assumes, for every curve: " + "; ".join(common) + "."]
    for info in robust:
        if info.figure == "rule" and ASSUMPTIONS["unconfoundedness"] not in common:
            lines.append(f"{info.label}: {ASSUMPTIONS['unconfoundedness']}.")
    gammas = [info.label for info in robust if info.figure == "sensitivity"]
    if gammas:
        lines.append(f"{', '.join(gammas)}: {ASSUMPTIONS['sensitivity']}.")
    for info in robust:
        if info.figure == "bounds":
            lines.append(f"{info.label}: {ASSUMPTIONS['bounds']}.")
    lines.append("For analysis of release rules for groups of cases, never for a decision about an individual; "
                 "local law, due process and the court's discretion govern.")
    return lines


def _info(b: RiskBounds) -> AssumptionInfo:
    return AssumptionInfo(b.key, b.label, b.gamma, b.figure, tuple(b.assumptions) or tuple(assumptions_for(b.figure)))


@dataclass(frozen=True)
class OneRatioSweep:
    """Exact results of sweeping one cost ratio.

    Attributes
    ----------
    axis : RatioAxis
    lo, hi : float
        The range reported.
    scale : str
    rule_cells : DataFrame
        Values of the rule columns of each rule cell.
    weights : ndarray of shape (n_groups,)
    level_values, level_labels : tuple of str
    envelope : Envelope
        Exact optimal level of every rule cell along the ratio.
    shares : StepFunction
        Cases at each optimal level (k = L), not yet divided by the total.
    regret : dict of str to PiecewiseLinear
        Each compared rule's regret per case against the optimum, exact on [lo, hi].
    optimal : StepFunction
        (intercept, slope) of the optimal total cost on each piece (k = 2); see
        :meth:`optimal_cost_at`.
    robust : list of AssumptionInfo
        Point estimate first, then each Gamma, then the monotone bounds.
    lenient : list of (low, high)
        Per assumption: the interval of ratios where leniency is optimal for every consistent
        distribution, per rule cell (nan where empty).
    lenient_shares : list of StepFunction
        Per assumption: cases for which leniency is robustly optimal (k = 1).
    """

    axis: RatioAxis
    lo: float
    hi: float
    scale: str
    rule_cells: pd.DataFrame
    weights: np.ndarray
    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    envelope: Envelope
    shares: StepFunction
    regret: dict[str, PiecewiseLinear]
    optimal: StepFunction | None = None
    robust: list[AssumptionInfo] = field(default_factory=list)
    lenient: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list)
    lenient_shares: list[StepFunction] = field(default_factory=list)

    @property
    def total(self) -> float:
        return float(self.weights.sum())

    def optimal_cost_at(self, r: float | np.ndarray) -> np.ndarray:
        """Expected cost per case of the unconstrained optimum at ratio(s) ``r`` (exact)."""
        coef = self.optimal(r)
        return (coef[..., 0] + np.asarray(r) * coef[..., 1]) / self.total

    def share_at(self, r: float | np.ndarray) -> np.ndarray:
        """Share of cases at each optimal level at ratio(s) ``r``; shape ``np.shape(r) + (L,)``."""
        return self.shares(r) / self.total

    def lenient_share_at(self, r: float | np.ndarray, assumption: int = 0) -> np.ndarray:
        """Share of cases for which leniency is (robustly) optimal at ``r`` under an assumption."""
        return self.lenient_shares[assumption](r)[..., 0] / self.total

    def lenient_up_to(self, share: float = 0.5, assumption: int = 0) -> float:
        """The largest ratio in [lo, hi] up to which leniency stays optimal for at least ``share``
        of cases under an assumption (nan if it fails already at lo)."""
        edges, values = self.lenient_shares[assumption].pieces(self.lo, self.hi)
        v = values[:, 0] / self.total
        at_lo = self.lenient_share_at(self.lo, assumption)
        if at_lo < share - 1e-12:
            return float("nan")
        bad = np.flatnonzero(v < share - 1e-12)
        if len(bad) == 0:
            return float(self.hi)
        return float(edges[bad[0]])

    # -- tables ------------------------------------------------------------------------------
    def segments(self) -> pd.DataFrame:
        """One row per rule cell x stretch of the range with one optimal level.

        Columns: the rule columns, ``cases``, ``from_ratio``, ``to_ratio``, ``from_cost``,
        ``to_cost``, ``level``, ``level_label``.
        """
        env = self.envelope
        n, Lm1 = env.breaks.shape
        edges = np.concatenate([np.full((n, 1), -np.inf), env.breaks, np.full((n, 1), np.inf)], axis=1)
        # a padded breakpoint is +inf: the segment after the last real one runs to +inf
        seg = np.arange(Lm1 + 1)[None, :]
        a = np.maximum(edges[:, :-1], self.lo)
        b = np.minimum(np.where(seg < env.count[:, None], edges[:, 1:], np.inf), self.hi)
        real = (seg <= env.count[:, None]) & (b > a)
        g, s = np.nonzero(real)
        a, b, lev = a[g, s], b[g, s], env.levels[g, s]
        out = _plain_groups(self.rule_cells).iloc[g].reset_index(drop=True)
        out["cases"] = self.weights[g]
        out["from_ratio"], out["to_ratio"] = a, b
        out["from_cost"], out["to_cost"] = a * self.axis.reference_cost, b * self.axis.reference_cost
        out["level"] = np.asarray(self.level_values, dtype=object)[lev]
        out["level_label"] = np.asarray(self.level_labels, dtype=object)[lev]
        return out

    def breakpoints(self) -> pd.DataFrame:
        """One row per breakpoint inside the range: rule columns, ``cases``, ``ratio``, ``cost``,
        ``level_before``, ``level_after`` (labels)."""
        env = self.envelope
        g, s = np.nonzero(np.arange(env.breaks.shape[1])[None, :] < env.count[:, None])
        r = env.breaks[g, s]
        keep = (r >= self.lo) & (r <= self.hi)
        g, s, r = g[keep], s[keep], r[keep]
        order = np.lexsort((g, r))
        g, s, r = g[order], s[order], r[order]
        out = _plain_groups(self.rule_cells).iloc[g].reset_index(drop=True)
        out["cases"] = self.weights[g]
        out["ratio"] = r
        out["cost"] = r * self.axis.reference_cost
        labels = np.asarray(self.level_labels, dtype=object)
        out["level_before"] = labels[env.levels[g, s]]
        out["level_after"] = labels[env.levels[g, s + 1]]
        return out

    def share_table(self) -> pd.DataFrame:
        """The exact share step function on the range, tidy: ``from_ratio``, ``to_ratio``,
        ``from_cost``, ``to_cost``, ``level``, ``level_label``, ``share``, ``cases``."""
        edges, values = self.shares.pieces(self.lo, self.hi)
        p, L = values.shape
        i, d = np.indices((p, L)).reshape(2, -1)
        return pd.DataFrame({
            "from_ratio": edges[i], "to_ratio": edges[i + 1],
            "from_cost": edges[i] * self.axis.reference_cost, "to_cost": edges[i + 1] * self.axis.reference_cost,
            "level": np.asarray(self.level_values, dtype=object)[d],
            "level_label": np.asarray(self.level_labels, dtype=object)[d],
            "share": values[i, d] / self.total, "cases": values[i, d],
        })

    def regret_table(self) -> pd.DataFrame:
        """Each compared rule's exact regret at the ends of the range and at every knot inside:
        ``rule``, ``ratio``, ``cost``, ``regret_per_case``, ``regret_per_1000_cases``."""
        frames = []
        for name, f in self.regret.items():
            frames.append(pd.DataFrame({"rule": name, "ratio": f.x, "cost": f.x * self.axis.reference_cost,
                                        "regret_per_case": f.y, "regret_per_1000_cases": 1000.0 * f.y}))
        cols = ["rule", "ratio", "cost", "regret_per_case", "regret_per_1000_cases"]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)

    def robust_table(self) -> pd.DataFrame:
        """Per assumption and rule cell, the ratios where leniency stays optimal for every
        consistent distribution: ``assumption``, ``assumption_label``, ``gamma``, rule columns,
        ``cases``, ``lenient_from``, ``lenient_to`` (clipped to the range; empty when never)."""
        frames = []
        groups = _plain_groups(self.rule_cells)
        for info, (low, high) in zip(self.robust, self.lenient):
            f = groups.copy()
            f.insert(0, "gamma", info.table_gamma)
            f.insert(0, "assumption_label", info.label)
            f.insert(0, "assumption", info.key)
            f["cases"] = self.weights
            a, b = np.maximum(low, self.lo), np.minimum(high, self.hi)
            empty = np.isnan(low) | (a > b)
            f["lenient_from"] = np.where(empty, np.nan, a)
            f["lenient_to"] = np.where(empty, np.nan, b)
            frames.append(f)
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    def robust_share_table(self) -> pd.DataFrame:
        """Per assumption, the exact share of cases for which leniency is robustly optimal:
        ``assumption``, ``assumption_label``, ``gamma``, ``from_ratio``, ``to_ratio``,
        ``from_cost``, ``to_cost``, ``share_lenient``."""
        frames = []
        for info, f in zip(self.robust, self.lenient_shares):
            edges, values = f.pieces(self.lo, self.hi)
            frames.append(pd.DataFrame({
                "assumption": info.key, "assumption_label": info.label, "gamma": info.table_gamma,
                "from_ratio": edges[:-1], "to_ratio": edges[1:],
                "from_cost": edges[:-1] * self.axis.reference_cost, "to_cost": edges[1:] * self.axis.reference_cost,
                "share_lenient": values[:, 0] / self.total,
            }))
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    def summary(self, share: float = 0.5) -> pd.DataFrame:
        """Per assumption: the share of cases for which leniency is (robustly) optimal at the
        low end of the range and at the scenario's ratio, and the largest ratio up to which it
        stays optimal for at least ``share`` of cases (nan: below that share already at the low end).

        Columns: ``assumption``, ``share_lenient_at_low``, ``share_lenient_at_scenario``,
        ``share``, ``up_to_ratio``, ``up_to_cost``.
        """
        r0 = self.axis.scenario_ratio
        rows = []
        for a, info in enumerate(self.robust):
            up = self.lenient_up_to(share, a)
            rows.append({"assumption": info.label,
                         "share_lenient_at_low": float(self.lenient_share_at(self.lo, a)),
                         "share_lenient_at_scenario": float(self.lenient_share_at(r0, a)),
                         "share": share, "up_to_ratio": up, "up_to_cost": up * self.axis.reference_cost})
        return pd.DataFrame(rows)

    def __str__(self) -> str:
        n_break = int(((self.envelope.breaks >= self.lo) & (self.envelope.breaks <= self.hi)).sum())
        lines = [f"Sweep of {self.axis.title} from {self.lo:g} to {self.hi:g} ({self.scale}); "
                 f"{self.envelope.n:,} rule cells, {n_break:,} breakpoints in range.",
                 f"  1 on this axis = {self.axis.reference_cost:,.2f} {self.axis.unit}; "
                 f"the scenario's ratio is {self.axis.scenario_ratio:.4g}.",
                 "  optimal shares at the scenario's ratio: "
                 + ", ".join(f"{lab} {s:.1%}" for lab, s in zip(self.level_labels, self.share_at(self.axis.scenario_ratio)))]
        if self.robust:
            table = self.summary()
            share = table["share"].iloc[0]
            shown = pd.DataFrame({
                "assumption": table["assumption"],
                f"{self.level_labels[0]} at {self.lo:g}": table["share_lenient_at_low"].map(lambda v: f"{v:.1%}"),
                "at the scenario's ratio": table["share_lenient_at_scenario"].map(lambda v: f"{v:.1%}"),
                f"for >= {share:.0%} of cases up to ratio": table["up_to_ratio"].map(
                    lambda v: f"{v:.4g}" if np.isfinite(v) else f"never (< {share:.0%} at {self.lo:g})"),
                f"cost ({self.axis.unit})": table["up_to_cost"].map(lambda v: f"{v:,.0f}" if np.isfinite(v) else "-"),
            })
            lines.append(f"Share of cases for which {self.level_labels[0]} is optimal, whatever the confounding each "
                         "assumption allows:")
            lines.append(shown.to_string(index=False))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return "<pre>" + str(self).replace("&", "&amp;").replace("<", "&lt;") + "</pre>"


def _compared_line(rule: Rule, base: np.ndarray, slope: np.ndarray, weights: np.ndarray) -> tuple[float, float]:
    delta = rule.cell_delta
    if delta.shape != base.shape:
        raise InputError(
            f"rule {rule.name!r} gives decisions for {delta.shape[0]} cells with {delta.shape[1]} levels; "
            f"the risk levels have {base.shape[0]} cells with {base.shape[1]} levels."
        )
    wd = weights[:, None] * delta
    return float(np.sum(wd * base)), float(np.sum(wd * slope))


def sweep_one(risk_levels: RiskLevels, costs: Costs, axis: RatioAxis, lo: float, hi: float,
              rules: Sequence[Rule] = (), columns: Sequence[str] | None = None,
              assumptions: Sequence[RiskBounds] = (), scale: str = "linear") -> OneRatioSweep:
    """Exact one-ratio sweep: breakpoints, shares at each optimal level, regrets, robust leniency.

    Parameters
    ----------
    risk_levels, costs : RiskLevels, Costs
    axis : RatioAxis
        The swept ratio (:func:`ratio_axis`).
    lo, hi : float
        Range reported (the envelope itself covers the whole line).
    rules : sequence of Rule
        Rules whose regret against the optimum is traced; each rule is fixed along the sweep.
    columns : sequence of str, optional
        Rule columns of the optimum (default: the scenario's rule covariates).
    assumptions : sequence of RiskBounds
        Intervals for the robust lenient region (:func:`policy.bounds.robust_assumptions`);
        default the point estimate alone.
    scale : {'linear', 'log'}
        How figures show the axis.
    """
    _check_range(lo, hi, scale)
    index, groups, weights = _rule_cells(risk_levels, columns)
    base, slope = cost_lines(risk_levels, costs, [axis])
    M = aggregation_matrix(index, len(groups), risk_levels.weights)
    A, B = M @ base, M @ slope[0]
    env = lower_envelope(A, B)
    shares, total = envelope_functions(env, weights, A, B)
    inside = total.knots[(total.knots > lo) & (total.knots < hi)]
    x = np.concatenate([[lo], inside, [hi]])
    coef = total(x)
    opt = coef[:, 0] + x * coef[:, 1]
    W = float(risk_levels.weights.sum())
    regret = {}
    for rule in rules:
        alpha, beta = _compared_line(rule, base, slope[0], risk_levels.weights)
        regret[rule.name] = PiecewiseLinear(x, (alpha + beta * x - opt) / W)
    infos, intervals, lshares = [], [], []
    for b in (assumptions or [point_bounds(risk_levels)]):
        m = _margins(risk_levels, costs, [axis], index, len(groups), b, A, [B])
        low, high = lenient_intervals(m[..., 0], m[..., 1])
        infos.append(_info(b))
        intervals.append((low, high))
        lshares.append(interval_shares(low, high, weights))
    return OneRatioSweep(axis, float(lo), float(hi), scale, groups, weights, risk_levels.level_values,
                         risk_levels.level_labels, env, shares, regret, total, infos, intervals, lshares)


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


# ----------------------------------------------------------------------------------------------
# Replicates (bootstrap): the same exact answers for many re-estimated risk levels at once
# ----------------------------------------------------------------------------------------------
def level_thresholds(env: Envelope, n_levels: int) -> np.ndarray:
    """For each row and level d < L - 1, the ratio above which the optimal level is harsher than d.

    Returns
    -------
    ndarray of shape (n, L - 1)
        t_d = the first breakpoint after which the level exceeds d (+inf if it never does, -inf
        if it already does at r = -inf). For an outcome-cost sweep, where levels only grow,
        level(r) > d exactly for r > t_d, so t_0 is where leniency ends.
    """
    n = env.n
    out = np.full((n, n_levels - 1), np.inf)
    out[env.levels[:, :1] > np.arange(n_levels - 1)[None, :]] = -np.inf
    for s in range(env.breaks.shape[1] - 1, -1, -1):
        real = s < env.count
        after = env.levels[:, s + 1]
        before = np.maximum.accumulate(env.levels[:, : s + 1], axis=1)[:, -1]
        for d in range(n_levels - 1):
            crosses = real & (before <= d) & (after > d)
            out[crosses, d] = env.breaks[crosses, s]
    return out


def lenient_replicates(p: np.ndarray, weights: np.ndarray, costs: Costs, axis: RatioAxis, index: np.ndarray,
                       n_groups: int, ratios: np.ndarray) -> dict[str, np.ndarray]:
    """Share of cases for which leniency is optimal on a grid, and each rule cell's level
    thresholds, for a batch of risk-level replicates at once.

    Parameters
    ----------
    p : ndarray of shape (b, n_cells, J, L)
        Outcome probabilities of each replicate.
    weights : ndarray of shape (b, n_cells) or (n_cells,)
        Cases per cell in each replicate.
    costs : Costs
        The scenario's costs (the swept outcome's cost is replaced along the ratio).
    axis : RatioAxis
    index : ndarray of shape (n_cells,)
        Rule cell of each cell; ``n_groups`` rule cells.
    ratios : ndarray of shape (P,)
        Grid on which the lenient share is evaluated (exactly, at each point).

    Returns
    -------
    dict
        ``share_lenient`` (b, P) and ``thresholds`` (b, n_groups, L - 1) (see
        :func:`level_thresholds`): the same numbers :func:`sweep_one` gives for each replicate,
        from one lower envelope over all replicates' rule cells.
    """
    p = np.asarray(p, dtype=np.float64)
    b, n, J, L = p.shape
    w = np.broadcast_to(np.asarray(weights, dtype=np.float64), (b, n))
    fixed = costs.outcome.astype(np.float64).copy()
    fixed[axis.outcome_index] = 0.0
    base = costs.decision[None] + np.matmul(fixed, p)                 # (b, n, L)
    slope = axis.reference_cost * p[:, :, axis.outcome_index, :]       # (b, n, L)
    S = aggregation_matrix(index, n_groups, np.ones(n))
    A = (S @ (w[..., None] * base).transpose(1, 0, 2).reshape(n, b * L)).reshape(n_groups, b, L)
    B = (S @ (w[..., None] * slope).transpose(1, 0, 2).reshape(n, b * L)).reshape(n_groups, b, L)
    env = lower_envelope(A.transpose(1, 0, 2).reshape(b * n_groups, L), B.transpose(1, 0, 2).reshape(b * n_groups, L))
    W = (S @ w.T).T                                                    # (b, n_groups)
    thresholds = level_thresholds(env, L).reshape(b, n_groups, L - 1)
    lenient = env.level_at(np.asarray(ratios, dtype=np.float64)).reshape(len(ratios), b, n_groups) == 0
    share = np.einsum("pbg,bg->bp", lenient, W) / W.sum(axis=1)[:, None]
    return {"share_lenient": share, "thresholds": thresholds}


class LenientReplicates:
    """A picklable statistic for the bootstrap (:class:`policy.uncertainty.OnRiskLevels`):
    ``(p, batch) -> lenient_replicates(...)`` with the replicate's cell weights, the thresholds
    clipped to the range [lo, hi] (lo: harsher already at lo; hi: not harsher before hi)."""

    def __init__(self, costs: Costs, axis: RatioAxis, index: np.ndarray, n_groups: int, ratios: np.ndarray,
                 lo: float, hi: float):
        self.costs, self.axis, self.index, self.n_groups = costs, axis, index, n_groups
        self.ratios = np.asarray(ratios, dtype=np.float64)
        self.lo, self.hi = float(lo), float(hi)

    def __call__(self, p: np.ndarray, batch) -> dict[str, np.ndarray]:
        out = lenient_replicates(p, batch.weights, self.costs, self.axis, self.index, self.n_groups, self.ratios)
        out["thresholds"] = np.clip(out["thresholds"], self.lo, self.hi)
        return out


@dataclass(frozen=True)
class SweepBands:
    """Bootstrap percentile intervals of a one-ratio sweep.

    Attributes
    ----------
    ratios : ndarray of shape (P,)
        Display grid of the band.
    share, lower, upper : ndarray of shape (P,)
        Share of cases for which leniency is optimal (point estimate, exact) and its interval.
    thresholds, thresholds_lower, thresholds_upper : ndarray of shape (n_groups, L - 1)
        Each rule cell's level thresholds (:func:`level_thresholds`) clipped to the range, and
        their intervals.
    meta : dict
        Replicates, seed, resampling, outcome draws, interval (:meth:`BootstrapResult.meta`).
    label : str
        E.g. "95% bootstrap percentile interval".
    """

    ratios: np.ndarray
    share: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    thresholds: np.ndarray
    thresholds_lower: np.ndarray
    thresholds_upper: np.ndarray
    meta: dict
    label: str

    def band_table(self, axis: RatioAxis) -> pd.DataFrame:
        """``ratio``, ``cost``, ``share_lenient``, ``lower``, ``upper``."""
        return pd.DataFrame({"ratio": self.ratios, "cost": self.ratios * axis.reference_cost,
                             "share_lenient": self.share, "lower": self.lower, "upper": self.upper})

    def threshold_table(self, sweep: "OneRatioSweep") -> pd.DataFrame:
        """One row per rule cell and level d < L - 1: the rule columns, ``cases``,
        ``harsher_than`` (label of level d), ``ratio`` (above it the optimal level is harsher than
        d; clipped to the range), ``lower``, ``upper``, and the same in the cost unit."""
        g, d = np.indices(self.thresholds.shape).reshape(2, -1)
        out = _plain_groups(sweep.rule_cells).iloc[g].reset_index(drop=True)
        out["cases"] = sweep.weights[g]
        out["harsher_than"] = np.asarray(sweep.level_labels, dtype=object)[d]
        for name, values in (("ratio", self.thresholds), ("lower", self.thresholds_lower), ("upper", self.thresholds_upper)):
            out[name] = values.reshape(-1)
        c = sweep.axis.reference_cost
        out["cost"], out["cost_lower"], out["cost_upper"] = out["ratio"] * c, out["lower"] * c, out["upper"] * c
        return out


def sweep_bands(cells, risk_levels: RiskLevels, costs: Costs, sweep: "OneRatioSweep", estimator, replicates: int,
                seed: int | None, method: str = "poisson", level: float = 0.95, outcomes: str = "model",
                points: int = 200, workers: int | None = None, runner=None, progress: bool = False) -> SweepBands:
    """Bootstrap bands on the lenient share and intervals on each rule cell's thresholds.

    Each replicate resamples the cell counts (:func:`policy.uncertainty.bootstrap`),
    re-estimates the risk levels with ``estimator``, and recomputes the exact sweep of all its
    rule cells at once (:func:`lenient_replicates`); the intervals are percentile intervals.
    """
    from .uncertainty import OnRiskLevels, bootstrap

    space = np.geomspace if sweep.scale == "log" else np.linspace
    grid = space(sweep.lo, sweep.hi, points)
    index, groups = risk_levels.layout.rule_index(list(sweep.rule_cells.columns))
    statistic = OnRiskLevels(LenientReplicates(costs, sweep.axis, index, len(groups), grid, sweep.lo, sweep.hi),
                             estimator, estimator.design(cells.layout, len(cells.levels)))
    result = bootstrap(cells, statistic, replicates, seed, method, level, runner=runner, workers=workers,
                       progress=progress, description="sweep: bootstrap replicates",
                       outcome_model=risk_levels.p if outcomes == "model" else None)
    lower, upper = result.interval("share_lenient")
    t_lower, t_upper = result.interval("thresholds")
    thresholds = np.clip(level_thresholds(sweep.envelope, len(sweep.level_values)), sweep.lo, sweep.hi)
    return SweepBands(grid, sweep.lenient_share_at(grid), lower, upper, thresholds, t_lower, t_upper,
                      result.meta(), result.interval_label)


# ----------------------------------------------------------------------------------------------
# One scenario, end to end (what the `sweep` command calls)
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SweepResult:
    """A sweep of one scenario: a one-ratio sweep or a two-ratio map, and what produced it."""

    scenario: Any
    risk_levels: RiskLevels
    costs: Costs
    sweep: OneRatioSweep | None
    map: LenientMap | None
    assumptions: list[RiskBounds]
    settings: dict[str, Any]
    #: the constrained optimum along the ratio (policy.sweep_constrained.ConstrainedSweep), when constraints apply
    constrained: Any = None
    #: bootstrap intervals of the one-ratio sweep (SweepBands), when replicates were asked for
    bands: SweepBands | None = None

    def __str__(self) -> str:
        text = str(self.sweep if self.sweep is not None else self.map)
        if self.constrained is not None:
            text += "\n" + str(self.constrained)
        if self.bands is not None:
            b = self.bands
            i = int(np.argmin(np.abs(b.ratios - self.sweep.axis.scenario_ratio)))
            text += (f"\nLenient share near the scenario's ratio ({b.ratios[i]:.4g}): {b.share[i]:.1%} "
                     f"({b.lower[i]:.1%} to {b.upper[i]:.1%}, {b.label}, {b.meta['replicates']} replicates, seed {b.meta['seed']}).")
        if "constraints" in self.settings:
            text += "\nNote: " + self.settings["constraints"] + "."
        return text

    def describe(self) -> dict[str, Any]:
        """Metadata written to sweep.json."""
        res = self.sweep if self.sweep is not None else self.map
        axes = [res.axis] if self.sweep is not None else list(res.axes)
        figure_keys = ["rule"] + [b.figure for b in self.assumptions[1:]]
        assumptions = list(dict.fromkeys(a for k in figure_keys for a in assumptions_for(k)))
        summary = res.summary(self.settings["share"]) if self.sweep is not None else res.summary()
        summary = summary.astype(object).where(summary.notna(), None)
        return {
            "scenario": self.scenario.title,
            "scenario_file": str(self.scenario.path) if self.scenario.path else None,
            "seed": self.scenario.seed,
            "data": self.risk_levels.source,
            "kind": "one ratio" if self.sweep is not None else "two ratios",
            "ratios": [a.describe() for a in axes],
            "costs_held": {k: float(c) for k, c in zip(self.risk_levels.outcome_keys, self.costs.outcome)
                           if k not in {a.outcome for a in axes}},
            "cost_unit": self.costs.unit,
            "rule_columns": list(res.rule_cells.columns),
            "rule_cells": int(len(res.weights)),
            **self.settings,
            "robust": [{"key": b.key, "label": b.label, "gamma": b.gamma if np.isfinite(b.gamma) else None,
                        "note": b.note} for b in self.assumptions],
            "summary": summary.to_dict(orient="records"),
            "constrained": self._describe_constrained(),
            "uncertainty": self.bands.meta if self.bands is not None else None,
            "assumptions": assumptions,
            "cautions": list(CAUTIONS),
        }

    def _describe_constrained(self) -> dict[str, Any] | None:
        c = self.constrained
        if c is None:
            return None
        summary = c.summary()
        return {
            "constraints": [spec.describe() for spec in c.specs],
            "grid_points": int(len(c.ratios)),
            "varied": c.varied,
            "bounds": [float(b) for b in c.bounds] if c.varied else None,
            "solver": c.solver,
            "summary": summary.astype(object).where(summary.notna(), None).to_dict(orient="records"),
        }

    def output_files(self, figures: Sequence[str] = ("png", "svg"), table_points: int = 51) -> dict[str, Any]:
        """Every output file of ``sweep`` by name (documented in docs/outputs.md).

        Parameters
        ----------
        figures : sequence of {'png', 'svg'}
            Figure formats (empty: no figures).
        table_points : int
            Points per axis of the grid written to ``map_grid.csv`` (two ratios); the figure
            uses the finer display grid of the settings.
        """
        from . import plots

        files: dict[str, Any] = {}
        if self.sweep is not None:
            s = self.sweep
            files["sweep_segments.csv"] = s.segments()
            files["sweep_breakpoints.csv"] = s.breakpoints()
            files["sweep_shares.csv"] = s.share_table()
            files["sweep_regret.csv"] = s.regret_table()
            files["sweep_lenient.csv"] = s.robust_table()
            files["sweep_lenient_shares.csv"] = s.robust_share_table()
            c, bands = self.constrained, self.bands
            band = None
            if bands is not None:
                files["sweep_bands.csv"] = bands.band_table(s.axis)
                files["sweep_threshold_intervals.csv"] = bands.threshold_table(s)
                m = bands.meta
                band = {"x": bands.ratios, "low": bands.lower, "high": bands.upper,
                        "label": f"{s.level_labels[0]}: {bands.label.split(' bootstrap')[0]} interval",
                        "note": (f"Band: {bands.label} of the share of cases at {s.level_labels[0]}, from "
                                 f"{m['replicates']} bootstrap replicates ({m['resampling']} resampling of cases, "
                                 f"outcomes from the {'estimated risk levels' if m['outcomes'] == 'model' else 'cases'}, "
                                 f"seed {m['seed']}); each replicate re-estimates the risk levels.")}
            figs = {"sweep_shares": lambda: plots.share_figure(s, band, constrained=c),
                    "sweep_regret": lambda: plots.regret_figure(s)}
            if c is not None:
                files["sweep_constrained.csv"] = c.to_frame()
                files["sweep_constraint_prices.csv"] = c.price_table()
                figs["sweep_prices"] = lambda: plots.price_figure(c)
        else:
            m = self.map
            files["map_grid.csv"] = m.grid_table(table_points)
            files["map_polygons.csv"] = m.polygon_table()
            figs = {"map_lenient": lambda: plots.map_figure(m, self.settings["grid_points"], self.settings["share"])}
        files["sweep.json"] = self.describe()
        for stem, make in figs.items():
            files.update(plots.figure_files(stem, make, figures))
        return files


def sweep_scenario(scenario, ratios: Sequence[str], ranges: Sequence[Sequence[float] | None] | None = None,
                   scale: str = "linear", per: str | None = None, gammas: Sequence[float] | None = None,
                   bounds: bool | None = None, missing: str = "worst_case", rules: Sequence[Rule] | None = None,
                   grid_points: int = 200, share: float = 0.5, outcome_costs: Mapping[str, float] | None = None,
                   decision_costs: Mapping[str, float] | None = None, constraints: Sequence[Any] = (),
                   scenario_constraints: bool = True, lp_settings: Any = None, lp_points: int = 50,
                   vary: str | int | None = None, vary_values: Sequence[float] | None = None, removal: bool = True,
                   replicates: int | None = None, seed: int | None = None, resampling: str | None = None,
                   interval: float | None = None, outcomes: str | None = None, workers: int | None = None,
                   runner: Any = None, progress: bool = False,
                   on_step: Callable[[str], None] | None = None,
                   on_point: Callable[[int, int], None] | None = None) -> SweepResult:
    """Sweep one cost ratio (exact curves) or two (exact lenient map) for a scenario.

    Parameters
    ----------
    scenario : Scenario or path
    ratios : one or two outcome keys
        The swept outcome kinds.
    ranges : sequence of (low, high) or None
        One per ratio; None picks :func:`default_range`.
    scale : {'linear', 'log'}
    per : str, optional
        Reference decision level of the ratios (default: the harshest).
    gammas : sequence of float, optional
        Sensitivity parameters of the robust regions (1 is the point estimate itself). Default
        :data:`DEFAULT_GAMMAS` when the data hold counts, none for a risk-level table.
    bounds : bool, optional
        Add the monotone-response bounds (default: when the data hold counts).
    missing : {'worst_case', 'ignore'}
        Missing outcome records in the bounds.
    rules : sequence of Rule, optional
        Compared rules (one ratio); default: the rule optimal at the scenario's own costs and
        the rule that releases every case at the most lenient level.
    grid_points : int
        Display grid per axis (two ratios).
    share : float
        The share of cases in "leniency stays optimal for at least this share of cases up to
        ratio Y" (summaries, and the robust regions of the map figure).
    outcome_costs, decision_costs : mapping, optional
        What-if overrides of the scenario's costs, as in ``solve``.
    constraints : sequence of dict or ConstraintSpec, optional
        Constraints added to the scenario's ``[[constraints]]``; with any constraint (and one
        ratio) the constrained optimum is re-solved along the ratio
        (:func:`policy.sweep_constrained.constrained_sweep`).
    scenario_constraints : bool
        Use the scenario's own ``[[constraints]]``.
    lp_settings : LPSettings, optional
        How to solve the linear program (default: the scenario's ``[linear_program]``).
    lp_points : int
        Ratios of the constrained re-solves (evenly spaced on the scale).
    vary, vary_values : optional
        A constraint (name or 1-based position) whose tolerance or cap takes each value in turn.
    removal : bool
        Price each constraint by re-solving without it (else: dual values only).
    replicates, seed, resampling, interval, outcomes : optional
        Bootstrap bands (one ratio, data with counts): override the scenario's ``[uncertainty]``
        settings and ``[scenario] seed``; 0 replicates: no bands.
    workers, runner : optional
        How the replicates run (:func:`policy.uncertainty.bootstrap`); a ``runner`` also runs the blocks
        of constrained re-solves (default: in this process). The output does not depend on them.
    progress : bool
        Show progress bars (rich, on standard error) for the bootstrap and the constrained re-solves.
    on_step : callable, optional
        Called with a description after each stage (drives a progress bar).
    on_point : callable, optional
        Called with (points done, points in all) during the constrained re-solves.
    """
    from .constraints import scenario_specs
    from .sweep_constrained import constrained_sweep, ratio_grid

    step = on_step or (lambda what: None)
    scenario = as_scenario(scenario)
    ratios = list(ratios)
    if len(ratios) not in (1, 2):
        raise InputError(f"give one ratio (a sweep) or two (a map); got {len(ratios)}.")
    if grid_points < 2:
        raise InputError(f"the display grid needs at least 2 points per axis; got {grid_points}.")
    if not 0 < share <= 1:
        raise InputError(f"the share of cases must be in (0, 1]; got {share!r}.")
    if missing not in MISSING_TREATMENTS:
        raise InputError(f"missing records must be treated as one of {', '.join(MISSING_TREATMENTS)}; got {missing!r}.")
    specs = scenario_specs(scenario, constraints, scenario_constraints)
    if len(ratios) == 2 and (constraints or vary is not None):
        raise InputError("constrained optima are re-solved along one ratio; give one --ratio with constraints.")
    if vary is not None and not specs:
        raise InputError("there is no constraint whose bound could vary; declare or add one.")
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    step("estimated risk levels")
    u = None  # bootstrap settings, checked before any long computation
    if cells is not None and len(ratios) == 1:
        from .uncertainty import UncertaintySettings, validate_settings

        base = scenario.sections.get("uncertainty") or UncertaintySettings()
        u = validate_settings(base.replicates if replicates is None else replicates,
                              base.interval if interval is None else interval,
                              base.resampling if resampling is None else resampling, "sweep:",
                              base.outcomes if outcomes is None else outcomes)
    elif cells is None and replicates:
        raise InputError(f"{scenario.file}: bootstrap bands need the cases behind the estimates (a case or counts "
                         "table, or the simulator); a risk-level table holds no counts to resample.")
    axes = [ratio_axis(rl, costs, r, per) for r in ratios]
    ranges = list(ranges) if ranges is not None else [None] * len(axes)
    if len(ranges) != len(axes):
        raise InputError(f"give one range per ratio: {len(axes)} ratios, {len(ranges)} ranges.")
    box = [tuple(map(float, r)) if r is not None else default_range(a, scale) for a, r in zip(axes, ranges)]
    if gammas is None:
        gammas = DEFAULT_GAMMAS if cells is not None else ()
    if bounds is None:
        bounds = cells is not None
    assumptions = robust_assumptions(rl, cells, gammas, bounds, missing)
    step("bounds and sensitivity intervals")
    settings = {"scale": scale, "ranges": [list(b) for b in box], "gammas": [b.gamma for b in assumptions if b.figure == "sensitivity"],
                "bounds": bool(bounds), "missing_records": missing, "grid_points": grid_points, "share": float(share)}
    if len(axes) == 1:
        if rules is None:
            base_rule = optimal_rule(rl, costs, name="rule optimal at the scenario's costs")
            lenient_all = Rule.from_levels(f"everyone: {rl.level_labels[0]}", "candidate", rl.layout,
                                           list(rl.layout.rule_columns), np.zeros(len(base_rule.rule_cells), dtype=np.int64),
                                           rl.level_values, rl.level_labels, rl.weights)
            rules = [base_rule, lenient_all]
        s = sweep_one(rl, costs, axes[0], *box[0], rules=rules, assumptions=assumptions, scale=scale)
        step("exact sweep")
        constrained = None
        if specs:
            from .uncertainty import _progress

            lp = lp_settings if lp_settings is not None else scenario.sections.get("linear_program")
            grid = ratio_grid(*box[0], lp_points, scale)
            n_points = lp_points * (len(vary_values) if vary is not None and vary_values else 1)
            with _progress(progress, "sweep: constrained re-solves", n_points) as advance:
                def point(done: int, total: int) -> None:
                    if advance is not None:
                        advance(1)
                    if on_point is not None:
                        on_point(done, total)

                constrained = constrained_sweep(rl, costs, axes[0], grid, specs, settings=lp, vary=vary, values=vary_values,
                                                removal=removal, scale=scale, unconstrained=s, on_point=point, runner=runner)
            step("constrained re-solves")
        bands = None
        if u is not None and u.replicates > 0:
            bands = sweep_bands(cells, rl, costs, s, RiskLevelEstimator.from_scenario(scenario), u.replicates,
                                scenario.seed if seed is None else seed, u.resampling, u.interval, u.outcomes,
                                grid_points, workers, runner, progress)
            step("bootstrap bands")
        return SweepResult(scenario, rl, costs, s, None, assumptions, settings, constrained, bands)
    if specs:
        settings["constraints"] = "the scenario's constraints are not applied to a two-ratio map (sweep one ratio for them)"
    m = lenient_map(rl, costs, axes, box, assumptions=assumptions, scale=scale)
    step("exact lenient map")
    return SweepResult(scenario, rl, costs, None, m, assumptions, settings)
