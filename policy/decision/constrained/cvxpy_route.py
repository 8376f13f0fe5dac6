"""The same linear program through cvxpy (any LP solver it offers), with costs and bounds as
Parameters so re-solves do not rebuild it."""

from __future__ import annotations

import contextlib
import time
import warnings
from typing import Any, Sequence

import numpy as np
import scipy.sparse as sp

from policy.decision.constraints import (
    ConstraintSpec,
)
from policy.errors import SolverError
from policy.decision.constrained.settings import LPSettings
from policy.decision.constrained.highs import quiet_stdout
from policy.decision.constrained.program import _LPData


class _CvxpyModel:
    """The LP declared in cvxpy: cost weights and bounds are scalar Parameters on constant data (DPP)."""

    def __init__(self, data: _LPData, specs: Sequence[ConstraintSpec]):
        import cvxpy as cp

        G, L, J = data.n_groups, data.n_levels, data.outcome.shape[0]
        n = G * L
        rows = np.arange(n)
        self.x = cp.Variable(n, nonneg=True, name="delta")
        self.outcome_costs = cp.Parameter(J, nonneg=True, name="outcome_costs")
        self.decision_scale = cp.Parameter(L, nonneg=True, name="decision_scale")
        K = len(data.blocks)
        self.bounds = cp.Parameter(K, nonneg=True, name="bounds") if K else None
        dec = sp.csr_matrix((data.decision.reshape(-1), (rows, np.tile(np.arange(L), G))), shape=(n, L))
        out = sp.csr_matrix(data.outcome.transpose(1, 2, 0).reshape(n, J))
        objective = (dec.T @ self.x) @ self.decision_scale + (out.T @ self.x) @ self.outcome_costs
        simplex = data.A[:G]
        constraints = [simplex @ self.x == 1]
        self.upper, self.lower = [], []
        for k, block in enumerate(data.blocks):
            if block.n_rows == 0:
                self.upper.append(None)
                self.lower.append(None)
                continue
            up = block.matrix @ self.x <= self.bounds[k]
            constraints.append(up)
            self.upper.append(up)
            if block.two_sided:
                low = block.matrix @ self.x >= -self.bounds[k]
                constraints.append(low)
                self.lower.append(low)
            else:
                self.lower.append(None)
        self.problem = cp.Problem(cp.Minimize(objective), constraints)
        if not self.problem.is_dpp():  # the problem must re-solve by changing parameter values only
            raise AssertionError("the constrained-rule LP is not DPP; re-solves would recompile it")

    def set_values(self, outcome_costs, decision_scale, bounds) -> None:
        self.outcome_costs.value = np.asarray(outcome_costs, dtype=np.float64)
        self.decision_scale.value = np.asarray(decision_scale, dtype=np.float64)
        if self.bounds is not None:
            self.bounds.value = np.asarray(bounds, dtype=np.float64)

    def solve(self, settings: LPSettings):
        import cvxpy as cp

        opts: dict[str, Any] = {}
        if settings.solver == "HIGHS":
            opts["highs_options"] = {"solver": settings.first_method(self.x.size), "output_flag": False}
            if settings.time_limit is not None:
                opts["highs_options"]["time_limit"] = float(settings.time_limit)
        elif settings.time_limit is not None and settings.solver == "CLARABEL":
            opts["time_limit"] = float(settings.time_limit)
        start = time.perf_counter()
        try:
            with warnings.catch_warnings(), (quiet_stdout() if settings.solver == "HIGHS" else contextlib.nullcontext()):
                # cvxpy warns of an inaccurate solution; its status says so and is refused below
                warnings.simplefilter("ignore", UserWarning)
                self.problem.solve(solver=settings.solver, warm_start=True, **opts)
        except cp.error.SolverError as exc:
            raise SolverError(f"the constrained rule's linear program: solver {settings.solver} failed ({exc}); no rule is reported.") from None
        seconds = time.perf_counter() - start
        status = self.problem.status
        stats = self.problem.solver_stats
        iterations = int(stats.num_iters or 0) if stats is not None else 0
        if status != cp.OPTIMAL:
            if status == cp.OPTIMAL_INACCURATE:
                status = "optimal_inaccurate (not accepted: the point may not be optimal)"
            return status, None, None, iterations, seconds, False
        duals = np.zeros(len(self.upper))
        for k, (up, low) in enumerate(zip(self.upper, self.lower)):
            for con in (up, low):
                if con is not None and con.dual_value is not None:
                    duals[k] += float(np.abs(np.asarray(con.dual_value)).sum())
        return status, np.asarray(self.x.value, dtype=np.float64), duals, iterations, seconds, False


# ----------------------------------------------------------------------------------------------
# Explaining infeasibility: the elastic program
