"""The HiGHS driver: loading the LP, warm re-solves, status messages, and the most lenient
among several optimal vertices."""

from __future__ import annotations

import contextlib
import os
import sys
import time

import numpy as np
import scipy.sparse as sp

from policy.errors import SolverError
from policy.decision.constrained.settings import LPSettings
from policy.decision.constrained.program import _LPData


@contextlib.contextmanager
def quiet_stdout():
    """Point standard output (file descriptor 1) at the null device for a moment.

    HiGHS prints a banner from C++ when a solver object is made; this keeps command output clean.
    """
    sys.stdout.flush()
    saved, null = os.dup(1), os.open(os.devnull, os.O_WRONLY)
    os.dup2(null, 1)
    try:
        yield
    finally:
        os.dup2(saved, 1)
        os.close(saved)
        os.close(null)


def new_highs():
    """A silent ``highspy`` solver object (made without its banner on standard output)."""
    from highspy import _core

    with quiet_stdout():
        h = _core._Highs()
    h.setOptionValue("output_flag", False)
    return h


def load_lp(h, c: np.ndarray, A: sp.spmatrix, row_lo: np.ndarray, row_hi: np.ndarray,
            col_lo: np.ndarray, col_hi: np.ndarray) -> None:
    """Load ``min c'x subject to row_lo <= A x <= row_hi, col_lo <= x <= col_hi`` into a HiGHS object.

    The arrays go to HiGHS through highspy's array overload of ``passModel`` (filling a
    ``HighsLp`` field by field converts them far more slowly).
    """
    import highspy

    A = sp.csc_matrix(A)
    n = A.shape[1]
    status = h.passModel(
        n, A.shape[0], A.nnz, int(highspy.MatrixFormat.kColwise), int(highspy.ObjSense.kMinimize), 0.0,
        np.ascontiguousarray(c, dtype=np.float64), np.ascontiguousarray(col_lo, dtype=np.float64),
        np.ascontiguousarray(col_hi, dtype=np.float64), np.ascontiguousarray(row_lo, dtype=np.float64),
        np.ascontiguousarray(row_hi, dtype=np.float64), A.indptr[:-1].astype(np.int32), A.indices.astype(np.int32),
        np.ascontiguousarray(A.data, dtype=np.float64), np.zeros(n, dtype=np.int32))
    if status == highspy.HighsStatus.kError:
        raise SolverError(f"HiGHS refused the linear program ({A.shape[0]} rows, {n} columns); no rule is reported.")


_STOPPED = {"kTimeLimit": "it reached the time limit", "kIterationLimit": "it reached the iteration limit",
            "kInterrupt": "it was interrupted", "kHighsInterrupt": "it was interrupted",
            "kObjectiveBound": "it reached an objective bound", "kObjectiveTarget": "it reached an objective target",
            "kSolutionLimit": "it reached a solution limit", "kMemoryLimit": "it ran out of memory"}


def _highs_run(h, method: str) -> tuple[str, float]:
    """Run HiGHS with a method; the model status name and the run time."""
    import highspy

    h.setOptionValue("solver", method)
    start = time.perf_counter()
    status = h.run()
    seconds = time.perf_counter() - start
    if status == highspy.HighsStatus.kError:
        return "kSolveError", seconds
    return h.getModelStatus().name, seconds


def _highs_iterations(h) -> int:
    info = h.getInfo()
    return int(info.simplex_iteration_count + info.ipm_iteration_count + info.crossover_iteration_count)


def _status_error(status: str, what: str) -> SolverError:
    reason = _STOPPED.get(status)
    if reason is not None:
        return SolverError(f"{what}: the solver stopped before proving optimality ({reason}; status {status}); "
                           "no rule is reported. Raise [linear_program] time_limit or simplify the constraints.")
    return SolverError(f"{what}: the solver failed with status {status}; no rule is reported.")


# ----------------------------------------------------------------------------------------------
# The assembled data
# ----------------------------------------------------------------------------------------------
# ----------------------------------------------------------------------------------------------
def dual_degenerate(c: np.ndarray, reduced: np.ndarray, row_dual: np.ndarray) -> bool:
    """Some nonbasic column or row has a zero reduced cost: another optimal vertex may exist.

    Basic columns and rows have zero reduced cost and there are exactly n_rows of them, so
    more than n_rows zeros means a nonbasic one is zero as well.
    """
    tol = 1e-9 * max(float(np.abs(c).max()), 1e-12)
    zeros = int(np.count_nonzero(np.abs(reduced) <= tol) + np.count_nonzero(np.abs(row_dual) <= tol))
    return zeros > len(row_dual)


def most_lenient(h, A: sp.csr_matrix, c, x, y, reduced, lo, hi, harsh, col_hi, scale=None, offset: float = 0.0):
    """The most lenient of the optimal rules: minimize harshness over the optimal face of a loaded model.

    With the optimal dual (y, reduced costs) fixed, a feasible point is optimal exactly when it
    is zero on every column of positive reduced cost, at its upper bound on every column of
    negative reduced cost, and on the active bound of every row with a non-zero dual
    (complementary slackness). Those are fixed; the rest is free to move toward leniency.
    Reduced costs and duals within 1e-9 of the largest cost count as zero, the tie tolerance of
    the unconstrained rule. The model is restored afterwards (bounds, costs, basis).

    ``scale`` (default ``c``): the costs whose largest sets the tie tolerance and the optimum's
    relative tolerance (the costs in delta when the model is loaded in other variables); ``offset``:
    the objective's constant dropped by such a change of variables.

    Returns
    -------
    x2 : ndarray or None
        The most lenient optimal point (None if the pass failed; the first point stands).
    seconds, iterations
    """
    basis = h.getBasis()
    n = len(c)
    cols = np.arange(n, dtype=np.int32)
    scale = c if scale is None else scale
    tol = 1e-9 * max(float(np.abs(scale).max()), 1e-12)
    at_zero = np.flatnonzero(reduced > tol).astype(np.int32)
    at_upper = np.flatnonzero((reduced < -tol) & np.isfinite(col_hi)).astype(np.int32)
    rows = np.flatnonzero(np.abs(y) > tol).astype(np.int32)
    values = A[rows] @ x
    active = np.where(np.abs(values - hi[rows]) <= np.abs(values - lo[rows]), hi[rows], lo[rows])
    h.changeColsBounds(len(at_zero), at_zero, np.zeros(len(at_zero)), np.zeros(len(at_zero)))
    h.changeColsBounds(len(at_upper), at_upper, col_hi[at_upper], col_hi[at_upper])
    h.changeRowsBounds(len(rows), rows, active, active)
    h.changeColsCost(n, cols, harsh)
    status, seconds = _highs_run(h, "simplex")
    iterations = _highs_iterations(h)
    x2 = None
    if status == "kOptimal":
        candidate = np.asarray(h.getSolution().col_value)
        optimum = float((c * x).sum()) + offset
        if float((c * candidate).sum()) + offset <= optimum + 1e-9 * max(1.0, abs(optimum)):
            x2 = candidate
    changed = np.concatenate([at_zero, at_upper])
    h.changeColsBounds(len(changed), changed, np.zeros(len(changed)), col_hi[changed])
    h.changeRowsBounds(len(rows), rows, lo[rows], hi[rows])
    h.changeColsCost(n, cols, c)
    h.setBasis(basis)
    return x2, seconds, iterations


def _harshness(group_share: np.ndarray, n_levels: int) -> np.ndarray:
    """Share of cases times level / K for every decision probability: what the lenient pass minimizes."""
    return (group_share[:, None] * np.arange(n_levels)[None, :] / max(n_levels - 1, 1)).reshape(-1)


def unconstrained_basis(c: np.ndarray, n_groups: int, n_levels: int, n_rows: int):
    """The simplex basis of the unconstrained optimum, a start for the first solve of the constrained LP.

    In each rule cell g the cheapest decision level's probability is basic (ties to the most
    lenient level, the lowest), the other levels' are nonbasic at 0; every rule cell's
    sum-to-one row is nonbasic (at its bound, 1) and every constraint row is basic (its slack).
    That is n_groups + (n_rows - n_groups) = n_rows basic variables with a non-singular basis
    matrix (the identity, up to the order of the basic columns within the simplex rows).
    It is dual feasible: with the constraint rows' duals at 0 and the sum-to-one row of g at
    min_d c(g, d), every reduced cost c(g, d) - min_d c(g, d) is >= 0; only the constraint rows
    the unconstrained rule breaks are primal infeasible, so the dual simplex needs about one
    pivot per such row, not one per rule cell (a dual feasible start needs no dual phase 1:
    Koberstein, A. (2005). The dual simplex method, techniques for a fast and stable
    implementation. PhD thesis, Universitaet Paderborn; reference recalled from memory).
    """
    import highspy

    status = highspy.HighsBasisStatus
    best = np.argmin(c.reshape(n_groups, n_levels), axis=1)
    cols = np.full(n_groups * n_levels, status.kLower, dtype=object)
    cols[np.arange(n_groups) * n_levels + best] = status.kBasic
    basis = highspy.HighsBasis()
    basis.col_status = cols.tolist()
    basis.row_status = [status.kLower] * n_groups + [status.kBasic] * (n_rows - n_groups)
    return basis


class _HighsDriver:
    """One HiGHS model kept loaded between solves so that re-solves start from the last basis.

    With method ``auto`` a first solve (a new model without a basis) starts the dual simplex
    from :func:`unconstrained_basis`; the start depends only on the LP, so the result is the
    same bits in any process. From :data:`~policy.decision.constrained.cumulative.CUMULATIVE_FROM_RULE_CELLS`
    rule cells on (method ``auto``), the model is loaded in cumulative variables
    (:mod:`policy.decision.constrained.cumulative`) and the dual simplex starts from HiGHS's own
    slack basis, which is dual feasible there; points, duals and the lenient pass are mapped back to decision probabilities.
    """

    def __init__(self, settings: LPSettings):
        self.settings = settings
        self.h = None
        self.best_basis = None
        self.shape = None
        self.fresh = True
        self.cum = None
        self.reuse_cum = False

    def _load(self, data: _LPData, c, lo, hi, keep_rows: bool = False) -> None:
        from policy.decision.constrained import cumulative

        if keep_rows and self.cum is not None:
            pass  # a restart of the same data (restart()): the rows stand
        elif self.settings.method == "auto" and data.n_levels >= 2 and data.n_groups >= cumulative.CUMULATIVE_FROM_RULE_CELLS:
            # the rows depend on the risk levels: rebuilt on every new load (vectorized)
            self.cum = cumulative.cumulative_lp(data)
        else:
            self.cum = None
        A = data.A if self.cum is None else self.cum.A
        basis = self.h.getBasis() if self.h is not None and self.shape == A.shape else None
        h = new_highs()
        if self.settings.time_limit is not None:
            h.setOptionValue("time_limit", float(self.settings.time_limit))
        if self.cum is not None:
            h.setOptionValue("presolve", "off")  # a warm start skips it anyway; cold it only costs time here
        c, lo, hi = self._model_arrays(data, c, lo, hi)
        n = A.shape[1]
        load_lp(h, c, A, lo, hi, np.zeros(n), np.ones(n))
        self.fresh = basis is None or not basis.valid
        if not self.fresh:
            h.setBasis(basis)
        self.h, self.shape, self.reuse_cum = h, A.shape, False
        self.cols = np.arange(n, dtype=np.int32)
        first = data.n_groups if self.cum is None else self.cum.n_mono
        self.rows = np.arange(first, A.shape[0], dtype=np.int32)

    def _model_arrays(self, data: _LPData, c, lo, hi):
        """Objective and row bounds of the loaded model (in cumulative variables when it is in them)."""
        if self.cum is None:
            return c, lo, hi
        return (self.cum.objective(c), *self.cum.row_bounds(lo, hi))

    def solve(self, data: _LPData, c, lo, hi, dirty, lenient: bool):
        reload = self.h is None or dirty["model"]
        if reload:
            self._load(data, c, lo, hi, keep_rows=self.reuse_cum and not dirty["model"])
        mc, mlo, mhi = self._model_arrays(data, c, lo, hi)
        if not reload:
            if dirty["cost"]:
                self.h.changeColsCost(len(self.cols), self.cols, mc)
            if dirty["bounds"] and len(self.rows):
                first = int(self.rows[0])
                self.h.changeRowsBounds(len(self.rows), self.rows, mlo[first:], mhi[first:])
        warm = not self.fresh and self.h.getBasis().valid
        self.fresh = False
        if not warm and self.settings.method == "auto":
            if self.cum is None:
                self.h.setBasis(unconstrained_basis(c, data.n_groups, data.n_levels, data.A.shape[0]))
            # in cumulative variables HiGHS's own start (slack basis, every boxed column at the
            # bound its cost prefers) is dual feasible, and its long-step ratio test flips many
            # boxed columns per pivot: a handful of pivots (cumulative.py)
            warm = True
        status, seconds = _highs_run(self.h, "simplex" if warm else self.settings.first_method(data.n_cols))
        iterations = _highs_iterations(self.h)
        if status != "kOptimal":
            return status, None, None, iterations, seconds, False
        sol = self.h.getSolution()
        x = np.asarray(sol.col_value)
        y = np.asarray(sol.row_dual)
        full_y = y if self.cum is None else self.cum.constraint_duals(y)
        cumulative = np.concatenate([[0.0], np.cumsum(np.abs(full_y))])
        block_duals = cumulative[data.offsets[1:]] - cumulative[data.offsets[:-1]]
        lenient_pass = False
        A, At = (data.A, data.At) if self.cum is None else (self.cum.A, self.cum.At)
        # HiGHS's reduced costs are c - A'y; computing them costs less than converting its list
        reduced = mc - At @ y if lenient else None
        # the tie tolerance is relative to the costs in delta, whichever variables are loaded
        if lenient and dual_degenerate(c, reduced, y):
            harsh = _harshness(data.group_share, data.n_levels)
            x2, extra_seconds, extra_iter = most_lenient(self.h, A, mc, x, y, reduced, mlo, mhi,
                                                         harsh if self.cum is None else self.cum.objective(harsh),
                                                         np.ones(A.shape[1]), scale=c,
                                                         offset=0.0 if self.cum is None else float(c[::data.n_levels].sum()))
            seconds += extra_seconds
            iterations += extra_iter
            if x2 is not None:
                x, lenient_pass = x2, True
        if self.cum is not None:
            x = self.cum.to_delta(x)
        self.best_basis = self.h.getBasis()
        return status, x, block_duals, iterations, seconds, lenient_pass

    def restart(self) -> None:
        """Make the next solve start as on a newly loaded model, keeping the model loaded.

        In decision probabilities HiGHS's solver state (basis, factorization, solution) is
        cleared and the first solve sets the unconstrained optimum's basis again. In cumulative
        variables, where the first solve starts from HiGHS's own start, a cleared model gave
        other last bits than a new one, so the model is loaded anew, from the rows already built.
        """
        if self.cum is not None:
            self.h, self.reuse_cum = None, True
        elif self.h is not None:
            self.h.clearSolver()
        self.fresh = True
        self.best_basis = None

    def restore_best(self) -> None:
        if self.h is not None and self.best_basis is not None and self.best_basis.valid:
            self.h.setBasis(self.best_basis)
