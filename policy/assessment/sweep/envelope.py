"""Exact one-ratio machinery: lower envelopes of cost lines, and the step and piecewise-linear
functions they make (shares, optimal cost, regret) along the ratio."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from policy.assessment.sweep.axes import CONCURRENT_TOLERANCE


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
        if self.breaks.shape[-1] == 0:  # one decision level: no breakpoints
            return level
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
    first = np.ones(len(knots), dtype=bool)   # the first event at each distinct knot (none if no knots)
    first[1:] = knots[1:] != knots[:-1]
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
