"""The constrained-rule LP in cumulative variables, for large numbers of rule cells.

With L decision levels, the decision probabilities delta(d | g) of a rule cell g are replaced by
the cumulative probabilities

    y_t(g) = P(D >= t | g) = sum_{d >= t} delta(d | g),   t = 1 .. L-1,

so that delta(0 | g) = 1 - y_1(g), delta(t | g) = y_t(g) - y_{t+1}(g) and
delta(L-1 | g) = y_{L-1}(g); in matrix form delta = T y + e. The sum-to-one row of every rule
cell disappears (it holds by construction), delta >= 0 becomes the boxes 0 <= y <= 1 and the
monotone rows y_t(g) - y_{t+1}(g) >= 0 (L-2 per rule cell), and each constraint block's rows
M delta in [lo, hi] become M T y in [lo - M e, hi - M e]. The LP has one column fewer per rule
cell and fewer nonzeros; its optimal vertices are those of the LP in delta (the map is an
affine bijection between the two feasible sets), and a constraint row has the same dual value
in both (the rows are the same functions of the rule).

Every column is boxed, so HiGHS's own start (the slack basis, every column at the bound its
cost prefers) is dual feasible, and the dual simplex's long-step ratio test moves many boxed
columns from bound to bound in one pivot: the first solve needs a handful of pivots, like the
LP in delta started from the unconstrained optimum's basis, where each split or moved rule cell
costs a pivot of its own. (The image of that basis here, with the monotone rows of the
unconstrained rule nonbasic, took 372 pivots instead of 7 at 2,000 rule cells: those rows have
no upper bound to flip to.) A rule cell whose costs are not convex in the level (the middle
level dearer than the mean of its neighbours' costs would allow) starts with a broken monotone
row, one pivot more. Measured on the benchmark LP (docs/performance.md), this
formulation's first solve and re-solves are faster than the LP in delta from about
:data:`CUMULATIVE_FROM_RULE_CELLS` rule cells on; below it the LP in delta is used, so small
problems (the demo's) solve exactly as before.

References: the change of variables to cumulative probabilities is the usual one for ordered
decisions (e.g. the cumulative-link parameterization of ordered outcomes, McCullagh, P. (1980).
Regression models for ordinal data. JRSS B 42, 109-142); bounded-variable dual simplex:
Koberstein, A. (2005). The dual simplex method, techniques for a fast and stable
implementation. PhD thesis, Universitaet Paderborn (bound flipping ratio test; recalled from
memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from policy.decision.constrained.program import _LPData

#: the LP is solved in cumulative variables from this many rule cells on (HiGHS called
#: directly, method "auto"); measured in benchmarks/bench_constrained.py
CUMULATIVE_FROM_RULE_CELLS = 1_000


@dataclass(frozen=True)
class CumulativeLP:
    """The rows of the LP in cumulative variables (columns g * (L-1) + t - 1 for y_t(g)).

    Rows: the G * (L-2) monotone rows first (rule cell g, t = 1 .. L-2: y_t - y_{t+1} >= 0),
    then the constraint blocks' rows in the order of :class:`_LPData`.
    """

    n_groups: int
    n_levels: int
    A: sp.csr_matrix
    At: sp.csr_matrix
    n_mono: int
    shift: np.ndarray  # M e: the constraint rows' values at the most lenient rule

    @property
    def n_cols(self) -> int:
        return self.n_groups * (self.n_levels - 1)

    def objective(self, c: np.ndarray) -> np.ndarray:
        """T'c: the cost of y_t(g) is c(g, t) - c(g, t-1) (the constant c'e is dropped)."""
        c = c.reshape(self.n_groups, self.n_levels)
        return (c[:, 1:] - c[:, :-1]).reshape(-1)

    def row_bounds(self, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Bounds of the rows from those of the LP in delta (whose first G rows are the sum-to-one rows)."""
        G = self.n_groups
        return (np.concatenate([np.zeros(self.n_mono), lo[G:] - self.shift]),
                np.concatenate([np.full(self.n_mono, np.inf), hi[G:] - self.shift]))

    def to_delta(self, y: np.ndarray) -> np.ndarray:
        """delta = T y + e, flattened g * L + d."""
        G, L = self.n_groups, self.n_levels
        y = np.asarray(y, dtype=np.float64).reshape(G, L - 1)
        delta = np.empty((G, L))
        delta[:, 0] = 1.0 - y[:, 0]
        delta[:, 1:L - 1] = y[:, :-1] - y[:, 1:]
        delta[:, L - 1] = y[:, -1]
        return delta.reshape(-1)

    def constraint_duals(self, row_dual: np.ndarray) -> np.ndarray:
        """Row duals laid out as the LP in delta's rows (zeros for the sum-to-one rows)."""
        return np.concatenate([np.zeros(self.n_groups), np.asarray(row_dual)[self.n_mono:]])


def cumulative_lp(data: _LPData) -> CumulativeLP:
    """The LP of ``data`` in cumulative variables (needs at least 2 decision levels)."""
    G, L = data.n_groups, data.n_levels
    m = L - 1
    # T: y_t(g) (column g * m + t - 1) enters delta(t - 1 | g) with -1 and delta(t | g) with +1
    ycol = np.arange(G * m)
    g, t = np.divmod(ycol, m)
    t = t + 1
    T = sp.csc_matrix((np.concatenate([-np.ones(G * m), np.ones(G * m)]),
                       (np.concatenate([g * L + t - 1, g * L + t]), np.concatenate([ycol, ycol]))), shape=(G * L, G * m))
    e = np.zeros(G * L)
    e[np.arange(G) * L] = 1.0
    coupling = data.coupling
    n_mono = G * (L - 2)
    r = np.arange(n_mono)
    gm, tm = np.divmod(r, max(L - 2, 1))
    mono = sp.csr_matrix((np.concatenate([np.ones(n_mono), -np.ones(n_mono)]),
                          (np.concatenate([r, r]), np.concatenate([gm * m + tm, gm * m + tm + 1]))), shape=(n_mono, G * m))
    A = sp.vstack([mono, (coupling @ T).tocsr()], format="csr")
    return CumulativeLP(G, L, A, A.T.tocsr(), n_mono, coupling @ e)
