"""The estimator's baseline model: a main-effects log-linear (Poisson) model of events per cell
with exposure as offset, fitted by iterative proportional fitting.

A sweep of the fitting matches, one cell column at a time, the fitted events to the observed
events in every category of that column (Deming and Stephan 1940); for a main-effects Poisson
model with log exposure as offset it converges to the maximum-likelihood fit (Bishop, Fienberg
and Holland 1975, ch. 3). The fitted rate of a cell is a product of one factor per cell column,
so the sweeps can run on a smaller table: with the column of most categories (B) set aside, the
cells' exposure times B's factors, summed over the cells that share the other columns'
categories, is all the other columns' steps need, and B's own step needs only each category's
exposure times the other factors. The same steps in the same order, on the combinations of the
other columns instead of every cell (:func:`loglinear_rates`, ``collapse``).

References
----------
Deming, W. E. and Stephan, F. F. (1940). On a least squares adjustment of a sampled frequency
table when the expected marginal totals are known. Ann. Math. Statist. 11(4), 427-444.
Bishop, Y. M. M., Fienberg, S. E. and Holland, P. W. (1975). Discrete Multivariate Analysis.
MIT Press.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import scipy.sparse as sp

from policy.inputs.cells import CellLayout

__all__ = ["factor_matrices", "loglinear_rates"]


def factor_matrices(layout: CellLayout, columns: Sequence[str]) -> list[tuple[sp.csr_matrix, np.ndarray]]:
    """Per cell column: a sparse (n_categories, n_cells) membership matrix and each cell's category."""
    return [_membership(layout.codes(col), len(layout.categories(col))) for col in columns]


def _membership(codes: np.ndarray, k: int) -> tuple[sp.csr_matrix, np.ndarray]:
    """A (k, n) membership matrix of n units coded 0..k-1, and the codes."""
    n = len(codes)
    order = np.argsort(codes, kind="stable")
    indptr = np.searchsorted(codes[order], np.arange(k + 1))
    return sp.csr_matrix((np.ones(n), order, indptr), shape=(k, n)), codes


def loglinear_rates(events: np.ndarray, exposure: np.ndarray, factors: Sequence[tuple[sp.csr_matrix, np.ndarray]],
                    smoothing: float = 1.0, max_sweeps: int = 200, tol: float = 1e-9,
                    collapse: bool | None = None) -> np.ndarray:
    """Rates of a main-effects log-linear (Poisson) model, fitted by iterative proportional fitting.

    Parameters
    ----------
    events, exposure : ndarray of shape (..., n_cells, J)
        Events and exposure (cases) per cell; leading axes are independent fits.
    factors : sequence of (sparse matrix of shape (n_categories, n_cells), codes of shape (n_cells,))
        The cell columns of the model (:func:`factor_matrices`).
    smoothing : float
        Expected events (at the overall rate) added to both sides of every category's margin
        ratio. A converged fit still matches every margin, so where every category has an event
        the result is the Poisson maximum-likelihood fit whatever the smoothing (it only slows the
        first sweeps). It matters for a category without events: with 0 its own margin is
        left unmatched (its ratio is held at 1); with more, its rate falls with every sweep
        toward the maximum-likelihood 0 and stays positive (the sweeps stop at ``max_sweeps``).
    collapse : bool or None
        Run the sweeps on the combinations of all cell columns but the one of most categories
        (the same steps, summed in another order, so the same fit up to rounding); None: where
        that table is small enough to save work.

    Returns
    -------
    ndarray of shape (..., n_cells, J)
        Fitted rate per unit of exposure: exp(alpha + sum_u beta_u[category of the cell]).

    Notes
    -----
    Iterative proportional fitting (Deming and Stephan 1940) matches, one cell column at a
    time, the fitted events to the observed events in every category; for a main-effects
    Poisson model with log exposure as offset it converges to the maximum-likelihood fit
    (Bishop, Fienberg and Holland 1975, ch. 3). Each sweep stops a fit when no ratio moved
    more than ``tol`` on the log scale.
    """
    events = np.asarray(events, dtype=np.float64)
    exposure = np.asarray(exposure, dtype=np.float64)
    total_e = events.sum(axis=-2, keepdims=True)
    total_n = exposure.sum(axis=-2, keepdims=True)
    overall = (total_e + 0.5) / (total_n + 1.0)
    lead, (n, J) = events.shape[:-2], events.shape[-2:]
    fits = int(np.prod(lead, dtype=np.int64))

    # the loop works on cells-first matrices (n_cells, fits * J): the layout the sparse group sums
    # take, so no sweep copies or moves an array
    def cells_first(x: np.ndarray) -> np.ndarray:
        return np.ascontiguousarray(np.moveaxis(np.broadcast_to(x, lead + (x.shape[-2], J)), -2, 0).reshape(x.shape[-2], -1))

    exposure_c = cells_first(exposure)
    overall_c = cells_first(overall)  # (1, fits * J)
    observed_margins = [np.asarray(matrix @ cells_first(events)) for matrix, _ in factors]
    plan = _collapsed_plan(factors, n) if collapse is not False else None
    if plan is not None and (collapse or plan.saves):
        rate = _sweeps_collapsed(plan, factors, exposure_c, overall_c, observed_margins, smoothing, max_sweeps, tol, fits, J)
    else:
        rate = _sweeps_cells(factors, exposure_c, overall_c, observed_margins, smoothing, max_sweeps, tol, fits, J)
    return np.ascontiguousarray(np.moveaxis(rate.reshape((n,) + lead + (J,)), 0, -2))


def _ratios(observed: np.ndarray, fitted: np.ndarray, overall_c: np.ndarray, smoothing: float,
            active_c: np.ndarray) -> np.ndarray:
    """One step's ratio per category and column of fits: observed over fitted margin, both
    smoothed; 1 where either side is 0 or the fit has stopped."""
    num, den = observed + smoothing * overall_c, fitted + smoothing * overall_c
    return np.where((num > 0) & (den > 0) & active_c, num / np.where(den > 0, den, 1.0), 1.0)


def _largest_change(ratio: np.ndarray, fits: int, J: int) -> np.ndarray:
    """Per fit, the largest |log ratio| of one step: (fits,)."""
    return np.abs(np.log(ratio)).reshape(ratio.shape[0], fits, J).max(axis=(0, 2))


def _sweeps_cells(factors, exposure_c, overall_c, observed_margins, smoothing, max_sweeps, tol, fits, J):
    """The sweeps on every cell: rate (n_cells, fits * J)."""
    n = exposure_c.shape[0]
    rate = np.broadcast_to(overall_c, (n, fits * J)).copy()
    # each fit (leading index) stops on its own, so a fit gives the same numbers alone or in a batch
    active = np.ones(fits, dtype=bool)
    active_c = np.ones(fits * J, dtype=bool)
    for _ in range(max_sweeps):
        change = np.zeros(fits)
        for (matrix, codes), obs in zip(factors, observed_margins):
            ratio = _ratios(obs, np.asarray(matrix @ (exposure_c * rate)), overall_c, smoothing, active_c)
            rate *= ratio[codes]
            change = np.maximum(change, _largest_change(ratio, fits, J))
        active &= change >= tol
        active_c = np.repeat(active, J)
        if not active.any():
            break
    return rate


class _Plan:
    """The cell column B of most categories set aside, and the combinations of the others."""

    def __init__(self, factors, b: int, key: np.ndarray, first: np.ndarray):
        self.b = b
        self.key = key  # (n_cells,) each cell's combination
        n, n_a = len(key), len(first)
        self.to_combos = sp.csr_matrix((np.ones(n), (key, np.arange(n))), shape=(n_a, n))
        self.members = {u: _membership(codes[first], matrix.shape[0]) for u, (matrix, codes) in enumerate(factors) if u != b}
        # work per sweep, in passes over an array of (rows, fits): every cell column's step on
        # every cell (about 4 passes), against 3 passes over the cells per regrouping and B's
        # step, and 4 per other column's step on the combinations
        U = len(factors)
        regroupings = 2 if b in (0, U - 1) else 3
        self.saves = regroupings * 3 * n + 4 * (U - 1) * n_a < 4 * U * n


def _collapsed_plan(factors, n: int) -> _Plan | None:
    """The plan of the collapsed sweeps, or None with fewer than two cell columns."""
    if len(factors) < 2 or n == 0:
        return None
    sizes = [matrix.shape[0] for matrix, _ in factors]
    b = int(np.argmax(sizes))
    others = [u for u in range(len(factors)) if u != b]
    if np.prod([float(sizes[u]) for u in others]) < 2.0 ** 62:
        key = np.zeros(n, dtype=np.int64)
        for u in others:
            key = key * sizes[u] + factors[u][1]
        _, first, key = np.unique(key, return_index=True, return_inverse=True)
    else:
        _, first, key = np.unique(np.stack([factors[u][1] for u in others], axis=1), axis=0,
                                  return_index=True, return_inverse=True)
    return _Plan(factors, b, key.reshape(-1), first)


def _sweeps_collapsed(plan: _Plan, factors, exposure_c, overall_c, observed_margins, smoothing, max_sweeps, tol,
                      fits, J):
    """The sweeps of :func:`_sweeps_cells` on the combinations of the columns other than B.

    The rate of cell x is a[combination of x] * f[B's category of x]; a column's step on the
    combinations needs their exposure weighted by f, regrouped after every step of B."""
    b_codes = factors[plan.b][1]
    b_matrix = factors[plan.b][0]
    a = np.broadcast_to(overall_c, (plan.to_combos.shape[0], fits * J)).copy()
    f = np.ones((b_matrix.shape[0], fits * J))
    active = np.ones(fits, dtype=bool)
    active_c = np.ones(fits * J, dtype=bool)
    for _ in range(max_sweeps):
        change = np.zeros(fits)
        combo_exposure = None
        for u, obs in enumerate(observed_margins):
            if u == plan.b:
                fitted = f * np.asarray(b_matrix @ (exposure_c * a[plan.key]))
                ratio = _ratios(obs, fitted, overall_c, smoothing, active_c)
                f *= ratio
                combo_exposure = None
            else:
                if combo_exposure is None:
                    combo_exposure = np.asarray(plan.to_combos @ (exposure_c * f[b_codes]))
                matrix, codes = plan.members[u]
                ratio = _ratios(obs, np.asarray(matrix @ (combo_exposure * a)), overall_c, smoothing, active_c)
                a *= ratio[codes]
            change = np.maximum(change, _largest_change(ratio, fits, J))
        active &= change >= tol
        active_c = np.repeat(active, J)
        if not active.any():
            break
    return a[plan.key] * f[b_codes]
