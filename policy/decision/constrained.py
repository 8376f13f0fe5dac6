"""Constrained optimal rules: one linear program over the decision probabilities of the rule cells.

Variables delta(d | g) >= 0 with sum_d delta(d | g) = 1 for every rule cell g. Objective: the
expected cost per case,

    sum_g sum_d delta(d | g) sum_{x in g} w(x) C(d, x) / sum_x w(x),
    C(d, x) = s_d c_dec(d, x) + sum_j c_j p_jd(x),

which is linear in the cost weights (outcome costs c_j and decision-cost scales s_d), so they are
scalar parameters multiplying constant vectors. Every constraint (:mod:`policy.decision.constraints`) is a
block of rows ``lower <= M delta <= upper`` whose bound is one scalar parameter (method notes,
section 5).

Build once, re-solve fast
-------------------------
:class:`ConstrainedProblem` assembles the rows and the objective once, declares the problem in
cvxpy with the cost weights and the bounds as ``cp.Parameter`` (checked to be DPP), and by
default solves the same data with HiGHS called directly through ``highspy``: the first solve by
its interior-point method with crossover (a vertex, so as few split rule cells as the
constraints allow), each later solve by its dual simplex warm-started from the last basis. A
change of cost weights or bounds only changes the costs or the row bounds of the loaded model;
risk levels of the same cells with other outcome probabilities (a bootstrap replicate) reload
the model and start from the last basis. Any other LP solver cvxpy offers can be chosen
(``[linear_program] solver``); it is then called through the cvxpy problem.

Every solve checks the solver's status and the returned point (each row within 1e-6), never
reports a non-optimal point as optimal, and, when the constraints cannot all hold, solves an
elastic version (one non-negative slack per constraint, minimizing total violation) to name the
constraints that conflict and how far each would have to loosen
(:class:`policy.errors.InfeasibleError` with a ``conflicts`` table).

References
----------
Corbett-Davies, S., Pierson, E., Feller, A., Goel, S. and Huq, A. (2017). Algorithmic decision
making and the cost of fairness. KDD '17. (Optimal rules under fairness constraints.)
Principal Fairness for Human and Algorithmic Decision-Making. Statistical Science (2023).
Huangfu, Q. and Hall, J. A. J. (2018). Parallelizing the dual revised simplex method.
Mathematical Programming Computation 10, 119-142. (HiGHS.)
Chinneck, J. W. (2008). Feasibility and Infeasibility in Optimization. Springer. (Elastic
programs for explaining infeasibility.)
"""

from __future__ import annotations

import contextlib
import functools
import os
import sys
import time
import warnings
from dataclasses import dataclass, field, replace
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from policy.cautions import CAUTIONS, assumptions_for
from policy.decision.constraints import (
    CONSTRAINT_KEYS,
    ConstraintSpec,
    RowBlock,
    RowContext,
    Vocabulary,
    constraint_rows,
    spec_from_table,
)
from policy.decision.costs import Costs
from policy.errors import InfeasibleError, InputError, PolicyError, SolverError
from policy.decision.evaluate import Evaluation, evaluate
from policy.decision.rules import SPLIT_TOLERANCE, Rule
from policy.inputs.scenario import Key, read_section, register_section
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevels

__all__ = [
    "LPSettings",
    "LPSolution",
    "ConstrainedProblem",
    "ConstrainedRule",
    "solve_constrained",
    "FEASIBILITY_TOLERANCE",
]

#: largest violation of any row accepted in a returned point (probability / share units)
FEASIBILITY_TOLERANCE = 1e-6
#: a row whose slack is at most this holds with equality ("binding")
BINDING_TOLERANCE = 1e-7
#: bound value that makes any row inactive (every row's value lies in [-1, 1])
INACTIVE_BOUND = 2.0

# ----------------------------------------------------------------------------------------------
# Settings: the scenario's [linear_program] section
# ----------------------------------------------------------------------------------------------
LP_KEYS: tuple[Key, ...] = (
    Key("solver", (str,), False, "HIGHS", "LP solver: HIGHS (default) or another LP solver cvxpy offers, e.g. CLARABEL, SCIPY"),
    Key("direct", (bool,), False, True, "HIGHS only: call HiGHS directly with warm starts (true) or through cvxpy (false)"),
    Key("method", (str,), False, "auto", "HIGHS only: first-solve method, 'auto', 'ipm' (interior point with crossover), 'simplex' or 'choose'"),
    Key("time_limit", (float,), doc="seconds a single solve may take; a solve that stops at it is an error"),
    Key("lenient_ties", (bool,), False, True, "among several optimal rules, return the most lenient (HIGHS direct only)"),
)
HIGHS_METHODS = ("auto", "ipm", "simplex", "choose")
#: solvers that return a vertex (HiGHS's simplex, or its interior point with crossover; SCIPY runs HiGHS)
VERTEX_SOLVERS = ("HIGHS", "SCIPY")
#: with method 'auto', the first solve uses the interior-point method (with crossover) from this
#: many decision probabilities (columns) on, the dual simplex below: the faster of the two on
#: the benchmark LP (benchmarks/bench_constrained.py; docs/performance.md)
IPM_FROM_COLUMNS = 20_000


@dataclass(frozen=True)
class LPSettings:
    """How the linear program is solved (see ``[linear_program]`` in docs/scenario.md)."""

    solver: str = "HIGHS"
    direct: bool = True
    method: str = "auto"
    time_limit: float | None = None
    lenient_ties: bool = True

    @property
    def uses_direct(self) -> bool:
        return self.solver == "HIGHS" and self.direct

    def first_method(self, n_cols: int) -> str:
        """The HiGHS method of a first (cold) solve of an LP with ``n_cols`` columns."""
        if self.method != "auto":
            return self.method
        return "ipm" if n_cols >= IPM_FROM_COLUMNS else "simplex"

    @property
    def label(self) -> str:
        if self.uses_direct:
            return f"HiGHS {highs_version()} via highspy (first solve: {self.method}; re-solves: warm dual simplex)"
        return f"{self.solver} via cvxpy"


def lp_settings_from_table(raw: Any, file: str = "<scenario>", where: str = "[linear_program]") -> LPSettings:
    """Validate a ``[linear_program]`` table."""
    s = read_section(raw, LP_KEYS, where, file)
    solver = s["solver"].upper()
    import cvxpy as cp

    installed = cp.installed_solvers()
    if solver not in installed:
        raise InputError(f"{file}: key 'solver' in {where} is {s['solver']!r}; expected one of the installed solvers: "
                         f"{', '.join(installed)}.")
    if s["method"] not in HIGHS_METHODS:
        raise InputError(f"{file}: key 'method' in {where} is {s['method']!r}; expected one of: {', '.join(HIGHS_METHODS)}.")
    if s["time_limit"] is not None and s["time_limit"] <= 0:
        raise InputError(f"{file}: key 'time_limit' in {where} must be > 0 seconds; got {s['time_limit']!r}.")
    return LPSettings(solver, s["direct"], s["method"], s["time_limit"], s["lenient_ties"])


def _parse_lp_section(raw: Any, scenario) -> LPSettings:
    return LPSettings() if raw is None else lp_settings_from_table(raw, scenario.file)


register_section("[linear_program]", LP_KEYS, _parse_lp_section)


# ----------------------------------------------------------------------------------------------
# HiGHS called directly
# ----------------------------------------------------------------------------------------------
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


@functools.lru_cache(maxsize=1)
def highs_version() -> str:
    try:
        from importlib.metadata import version

        return version("highspy")
    except Exception:  # pragma: no cover - metadata missing
        return "?"


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
@dataclass(frozen=True)
class _LPData:
    """Objective parts and rows for one set of risk levels and decision costs."""

    n_groups: int
    n_levels: int
    total: float
    group_share: np.ndarray  # (G,) W_g / W
    decision: np.ndarray  # (G, L) sum_{x in g} w c_dec(d, x) / W
    outcome: np.ndarray  # (J, G, L) sum_{x in g} w p_jd(x) / W
    blocks: tuple[RowBlock, ...]
    A: sp.csr_matrix  # simplex rows first, then each block's rows
    offsets: np.ndarray  # (K + 1,) row offsets of the blocks in A
    context: RowContext
    coupling: sp.csr_matrix  # the blocks' rows only (A without the simplex rows)
    At: sp.csr_matrix  # A transposed, for reduced costs c - A'y

    @property
    def n_cols(self) -> int:
        return self.n_groups * self.n_levels

    def objective(self, outcome_costs: np.ndarray, decision_scale: np.ndarray) -> np.ndarray:
        """c = sum_d s_d Dec[:, d] + sum_j c_j Out[j], flattened g * L + d."""
        # a loop over the few outcome kinds: a BLAS call for so small a contraction costs more
        # (thread start-up) than the arithmetic
        c = self.decision * decision_scale
        for j, cost in enumerate(outcome_costs):
            c += cost * self.outcome[j]
        return c.reshape(-1)

    def row_bounds(self, internal: np.ndarray, active: np.ndarray, infinite: float = np.inf) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of every row of A for bounds ``internal`` (K,); inactive blocks are free."""
        n_rows = self.A.shape[0]
        lo, hi = np.empty(n_rows), np.empty(n_rows)
        G = self.n_groups
        lo[:G] = hi[:G] = 1.0
        for k, block in enumerate(self.blocks):
            a, b = self.offsets[k], self.offsets[k + 1]
            if not active[k]:
                lo[a:b], hi[a:b] = -infinite, infinite
                continue
            hi[a:b] = internal[k]
            lo[a:b] = -internal[k] if block.two_sided else -infinite
        return lo, hi


def _assemble(risk_levels: RiskLevels, decision_costs: np.ndarray, specs: Sequence[ConstraintSpec],
              index: np.ndarray, rule_cells: pd.DataFrame, vocab: Vocabulary) -> _LPData:
    G, L = len(rule_cells), risk_levels.n_levels
    w = risk_levels.weights
    total = float(w.sum())
    ctx = RowContext(index, G, rule_cells, w, risk_levels.p, risk_levels.q, risk_levels.layout, vocab,
                     risk_levels.risk_level_names)
    dec = _aggregate(index, G, w, decision_costs)
    out = np.stack([_aggregate(index, G, w, risk_levels.p[:, j, :]) for j in range(risk_levels.p.shape[1])])
    blocks = tuple(constraint_rows(spec, ctx) for spec in specs)
    simplex = sp.csr_matrix((np.ones(G * L), (np.repeat(np.arange(G), L), np.arange(G * L))), shape=(G, G * L))
    A = sp.vstack([simplex] + [b.matrix for b in blocks], format="csr")
    offsets = G + np.concatenate([[0], np.cumsum([b.n_rows for b in blocks])]).astype(np.int64)
    return _LPData(G, L, total, np.bincount(index, weights=w, minlength=G) / total, dec, out, blocks, A, offsets, ctx,
                   A[G:].tocsr(), A.T.tocsr())


# ----------------------------------------------------------------------------------------------
# The solution of one solve
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LPSolution:
    """What one solve returns, before any presentation.

    Attributes
    ----------
    delta : ndarray of shape (G, L)
        Decision probabilities of the rule cells (rows sum to 1).
    cost_per_case : float
        Expected cost per case of the rule, in the cost unit.
    saving : ndarray of shape (K,)
        Dual value of each constraint: the fall in expected cost per case for each unit its
        bound is loosened (cost unit per unit of the declared bound), at the margin.
    row_values : tuple of ndarray
        Each constraint's row values at the rule (probability / share units).
    status : str
        The solver's status (always optimal here; anything else raises).
    solver : str
    iterations : int
    seconds : float
        Time spent in the solver.
    lenient_pass : bool
        A second pass chose the most lenient of several optimal rules.
    """

    delta: np.ndarray
    cost_per_case: float
    saving: np.ndarray
    row_values: tuple[np.ndarray, ...]
    status: str
    solver: str
    iterations: int
    seconds: float
    lenient_pass: bool = False


# ----------------------------------------------------------------------------------------------
# The problem: build once, set weights and bounds, re-solve
# ----------------------------------------------------------------------------------------------
class ConstrainedProblem:
    """The constrained-rule linear program of one set of cells, built once and re-solved fast.

    Parameters
    ----------
    risk_levels : RiskLevels
    costs : Costs
    constraints : sequence of ConstraintSpec or dict
        Constraints (dicts use the keys of a ``[[constraints]]`` table).
    columns : sequence of str, optional
        Rule columns (default: the layout's rule columns).
    settings : LPSettings, optional

    Examples
    --------
    >>> problem = ConstrainedProblem(risk_levels, costs, [{"kind": "capacity", "max_share": 0.15}])
    >>> result = problem.solve()                      # ConstrainedRule: rule, price, duals, evaluation
    >>> problem.set_costs(outcome_costs=[1000, 9000, 155928])
    >>> fast = problem.solve_lp()                     # LPSolution: warm re-solve, no presentation
    >>> problem.set_bounds({"#1 capacity": 0.20})     # by name or position, in declared units
    >>> problem.set_risk_levels(replicate)            # same cells, other p: warm start from the last basis
    """

    def __init__(self, risk_levels: RiskLevels, costs: Costs, constraints: Sequence[ConstraintSpec | Mapping] = (),
                 columns: Sequence[str] | None = None, settings: LPSettings | None = None):
        self.settings = settings or LPSettings()
        self.columns = tuple(risk_levels.layout.rule_columns if columns is None else columns)
        self.vocab = Vocabulary.of_risk_levels(risk_levels, self.columns)
        missing = [c for c in self.columns if c not in risk_levels.layout.columns]
        if missing:
            raise InputError(f"rule column {missing[0]!r} is not a cell column; expected some of: "
                             f"{', '.join(risk_levels.layout.columns)}.")
        self.specs = _validated_specs(constraints, self.vocab)
        self.index, self.rule_cells = risk_levels.layout.rule_index(self.columns)
        self.risk_levels = risk_levels
        self.base_costs = costs
        self.outcome_costs = np.asarray(costs.outcome, dtype=np.float64).copy()
        self.decision_scale = np.ones(risk_levels.n_levels)
        self.declared = np.array([s.bound for s in self.specs], dtype=np.float64)
        self.active = np.ones(len(self.specs), dtype=bool)
        self._data = _assemble(risk_levels, costs.decision, self.specs, self.index, self.rule_cells, self.vocab)
        self._model: _CvxpyModel | None = _CvxpyModel(self._data, self.specs)
        self._highs: _HighsDriver | None = None
        self._dirty = {"cost": True, "bounds": True, "model": True}

    # -- sizes ---------------------------------------------------------------------------------
    @property
    def n_rule_cells(self) -> int:
        return self._data.n_groups

    @property
    def n_rows(self) -> int:
        """Rows of the LP: one per rule cell (decision probabilities sum to 1) plus the constraints' rows."""
        return self._data.A.shape[0]

    @property
    def cvxpy_problem(self):
        """The cvxpy problem (DPP) with the current parameter values."""
        model = self._cvxpy()
        model.set_values(self.outcome_costs, self.decision_scale, self._internal_bounds(inactive=INACTIVE_BOUND))
        return model.problem

    def spec_position(self, key: str | int) -> int:
        """Position of a constraint given by name or 1-based position."""
        if isinstance(key, (int, np.integer)) and not isinstance(key, bool):
            if not 1 <= key <= len(self.specs):
                raise InputError(f"constraint position {key} is out of range 1..{len(self.specs)}.")
            return int(key) - 1
        names = [s.name for s in self.specs]
        if key not in names:
            raise InputError(f"no constraint is named {key!r}; the constraints are: {', '.join(names) or '(none)'}.")
        return names.index(key)

    # -- parameters ----------------------------------------------------------------------------
    def set_costs(self, costs: Costs | None = None, *, outcome_costs: Sequence[float] | None = None,
                  decision_scale: Sequence[float] | None = None) -> "ConstrainedProblem":
        """Change the cost weights; nothing is rebuilt unless ``costs`` brings other per-cell decision costs.

        Parameters
        ----------
        costs : Costs, optional
            New costs of the same cells; they replace the loaded ones (``decision_scale`` goes
            back to 1). Per-cell decision costs that differ re-aggregate the objective (cheap).
        outcome_costs : sequence of float, shape (J,), optional
            Cost of one adverse outcome of each kind.
        decision_scale : sequence of float, shape (L,), optional
            Factor on each decision level's cost (relative to the loaded decision costs).
        """
        if costs is not None:
            if costs.decision.shape != self.base_costs.decision.shape:
                raise InputError(f"costs for {costs.decision.shape[0]} cells given; the problem has {self.base_costs.decision.shape[0]}.")
            if not np.array_equal(costs.decision, self.base_costs.decision):
                self._data = replace(self._data, decision=_aggregate(self.index, self._data.n_groups, self.risk_levels.weights, costs.decision))
                self._model = None
            self.decision_scale = np.ones(self.risk_levels.n_levels)
            self.base_costs = costs
            self.outcome_costs = np.asarray(costs.outcome, dtype=np.float64).copy()
        if outcome_costs is not None:
            oc = np.asarray(outcome_costs, dtype=np.float64)
            if oc.shape != self.outcome_costs.shape or (oc < 0).any() or not np.isfinite(oc).all():
                raise InputError(f"outcome_costs must be {self.outcome_costs.shape[0]} numbers >= 0; got {list(oc)}.")
            self.outcome_costs = oc.copy()
        if decision_scale is not None:
            ds = np.asarray(decision_scale, dtype=np.float64)
            if ds.shape != self.decision_scale.shape or (ds < 0).any() or not np.isfinite(ds).all():
                raise InputError(f"decision_scale must be {self.decision_scale.shape[0]} numbers >= 0; got {list(ds)}.")
            self.decision_scale = ds.copy()
        self._dirty["cost"] = True
        return self

    def set_bounds(self, bounds: Mapping[str | int, float]) -> "ConstrainedProblem":
        """Change tolerances and caps, by constraint name or 1-based position, in each bound's declared unit."""
        for key, value in bounds.items():
            k = self.spec_position(key)
            spec = self.specs[k]
            value = float(value)
            upper = np.inf if spec.bound_key == "max_cases" else 1.0
            if not 0 <= value <= upper:
                raise InputError(f"bound {spec.bound_key} of {spec.name!r} must be in 0..{upper:g}; got {value!r}.")
            if spec.kind == "group_blind" and value != 0:
                raise InputError(f"{spec.name!r} (group_blind) has no tolerance; it can only be removed from the constraints.")
            self.declared[k] = value
        self._dirty["bounds"] = True
        return self

    def set_active(self, key: str | int, active: bool) -> "ConstrainedProblem":
        """Switch one constraint off (or back on) without rebuilding anything."""
        self.active[self.spec_position(key)] = bool(active)
        self._dirty["bounds"] = True
        return self

    def set_risk_levels(self, risk_levels: RiskLevels, costs: Costs | None = None) -> "ConstrainedProblem":
        """Load risk levels of the same cells with other outcome probabilities (e.g. a bootstrap replicate).

        The rows and the objective are recomputed (vectorized); the next solve starts from the
        last basis.
        """
        same = (risk_levels.n_cells == self.risk_levels.n_cells and risk_levels.n_levels == self.risk_levels.n_levels
                and (risk_levels.layout is self.risk_levels.layout or risk_levels.layout.frame.equals(self.risk_levels.layout.frame)))
        if not same:
            raise InputError(f"risk levels of {risk_levels.n_cells} cells and {risk_levels.n_levels} levels given; the problem "
                             f"was built for other cells ({self.risk_levels.n_cells} cells, {self.risk_levels.n_levels} levels). "
                             "Build a new ConstrainedProblem for them.")
        costs = costs if costs is not None else self.base_costs
        self.risk_levels = risk_levels
        self.base_costs = costs
        self._data = _assemble(risk_levels, costs.decision, self.specs, self.index, self.rule_cells, self.vocab)
        self._model = None
        self._dirty = {"cost": True, "bounds": True, "model": True}
        return self

    def forget_basis(self) -> "ConstrainedProblem":
        """Make the next solve start cold, as on a newly built problem.

        Warm re-solves depend on the basis the last solve left; a degenerate LP has several,
        and two paths to the same optimum may differ in the last bits. Tasks that may run in any
        process (bootstrap chunks, blocks of sweep points) call this first, so their results
        depend only on their own inputs.
        """
        self._highs = None
        self._model = None
        self._dirty = {"cost": True, "bounds": True, "model": True}
        return self

    def current_costs(self) -> Costs:
        """The cost weights in force, as a :class:`~policy.decision.costs.Costs`."""
        return replace(self.base_costs, decision=self.base_costs.decision * self.decision_scale, outcome=self.outcome_costs.copy())

    def _internal_bounds(self, inactive: float | None = None) -> np.ndarray:
        scales = np.array([b.scale for b in self._data.blocks])
        out = self.declared / np.where(scales > 0, scales, 1.0)
        if inactive is not None:
            out = np.where(self.active, out, inactive)
        return out

    def _cvxpy(self) -> "_CvxpyModel":
        if self._model is None:
            self._model = _CvxpyModel(self._data, self.specs)
        return self._model

    # -- solving -------------------------------------------------------------------------------
    def solve_lp(self, lenient_ties: bool | None = None) -> LPSolution:
        """Solve the LP with the current weights and bounds.

        Raises
        ------
        InfeasibleError
            The constraints cannot all hold; ``conflicts`` names them and how far each must loosen.
        SolverError
            The solver failed or stopped early, or returned a point that breaks a row.
        """
        lenient = self.settings.lenient_ties if lenient_ties is None else lenient_ties
        c = self._data.objective(self.outcome_costs, self.decision_scale)
        lo, hi = self._data.row_bounds(self._internal_bounds(), self.active)
        if self.settings.uses_direct:
            if self._highs is None:
                self._highs = _HighsDriver(self.settings)
            result = self._highs.solve(self._data, c, lo, hi, self._dirty, lenient)
        else:
            model = self._cvxpy()
            model.set_values(self.outcome_costs, self.decision_scale, self._internal_bounds(inactive=INACTIVE_BOUND))
            result = model.solve(self.settings)
        self._dirty = {"cost": False, "bounds": False, "model": False}
        status, x, block_duals, iterations, seconds, lenient_pass = result
        if status in ("kInfeasible", "kUnboundedOrInfeasible", "infeasible", "infeasible_inaccurate"):
            raise self._infeasible(status)
        if status not in ("kOptimal", "optimal"):
            raise _status_error(status, "the constrained rule's linear program")
        return self._solution(c, lo, hi, x, block_duals, status, iterations, seconds, lenient_pass)

    def _solution(self, c, lo, hi, x, block_duals, status, iterations, seconds, lenient_pass) -> LPSolution:
        """Check the solver's point and turn it into decision probabilities.

        The point is accepted only if every decision probability is >= -1e-6, every rule cell's
        probabilities sum to 1 within 1e-6, and, after clipping and renormalizing, every
        constraint row holds within :data:`FEASIBILITY_TOLERANCE`.
        """
        data = self._data
        G, L = data.n_groups, data.n_levels
        raw = x.reshape(G, L)
        sums = _row_sums(raw)
        delta = np.maximum(raw, 0.0)
        delta /= _row_sums(delta)[:, None]
        flat = delta.reshape(-1)
        values = data.coupling @ flat
        violation = np.maximum(np.maximum(lo[G:] - values, values - hi[G:]), 0.0)
        checks = [("a decision probability below 0", -raw.min()),
                  ("the decision probabilities of a rule cell not summing to 1", np.abs(sums - 1.0).max())]
        if violation.size:
            i = int(np.argmax(violation))
            block = int(np.searchsorted(data.offsets, G + i, side="right") - 1)
            checks.append((f"constraint {self.specs[block].name!r}", violation[i]))
        for where, amount in checks:
            if amount > FEASIBILITY_TOLERANCE:
                raise SolverError(f"the solver reported status {status} but its point breaks {where} by {amount:.2e} "
                                  f"(more than {FEASIBILITY_TOLERANCE:g}); no rule is reported.")
        row_values = tuple(values[data.offsets[k] - G:data.offsets[k + 1] - G] for k in range(len(data.blocks)))
        scales = np.array([b.scale for b in data.blocks])
        saving = np.asarray(block_duals, dtype=np.float64) / np.where(scales > 0, scales, 1.0) if len(scales) else np.zeros(0)
        return LPSolution(delta, float((c * flat).sum()), saving, row_values, "optimal", self.settings.label, iterations, seconds, lenient_pass)

    def solve(self, name: str = "constrained optimal rule", sensitivity: bool = True) -> "ConstrainedRule":
        """Solve and present: the rule, its price against the unconstrained optimum, each constraint's dual
        value and whether it binds, and the rule's evaluation.

        Parameters
        ----------
        name : str
            The rule's name in outputs.
        sensitivity : bool
            Also re-solve (warm) with each bound loosened by one point and without each constraint
            in turn, to report what loosening or removing it would save.
        """
        lp = self.solve_lp()
        costs = self.current_costs()
        rl = self.risk_levels
        unconstrained = optimal_rule(rl, costs, self.columns, name="unconstrained optimal rule")
        rule = self._present(lp.delta, name)
        evaluation = evaluate(rule, rl, costs, reference=unconstrained)
        unc_eval = evaluate(unconstrained, rl, costs)
        removed = loosened = np.full(len(self.specs), np.nan)
        if sensitivity and len(self.specs):
            loosened, removed = self._sensitivity(lp.cost_per_case)
        table = self._table(lp, loosened, removed)
        notes = [f"{s.name}: {b.note}." for s, b in zip(self.specs, self._data.blocks) if b.note]
        if self.settings.solver not in VERTEX_SOLVERS:
            notes.append(f"{self.settings.solver} need not return a vertex: where several rules are optimal it may return "
                         "a mixture of them, so split rule cells can be an artifact of the solver; HIGHS returns a vertex.")
        return ConstrainedRule(
            rule=rule,
            evaluation=evaluation,
            unconstrained=unconstrained,
            unconstrained_evaluation=unc_eval,
            constraints=table,
            specs=self.specs,
            lp=lp,
            unit=costs.unit,
            notes=tuple(notes),
        )

    def _present(self, delta: np.ndarray, name: str) -> Rule:
        """The rule on the rule columns, without the attributes a group-blind constraint removed from use."""
        blind = set()
        for spec, block, on in zip(self.specs, self._data.blocks, self.active):
            if spec.kind == "group_blind" and on and block.n_rows:
                blind.update(a for a in (self.vocab.protected if spec.attribute is None else (spec.attribute,)) if a in self.columns)
        rl = self.risk_levels
        cases = np.bincount(self.index, weights=rl.weights, minlength=self._data.n_groups)
        note = "randomized where split" if (delta.max(axis=1) <= 1 - SPLIT_TOLERANCE).any() else ""
        if not blind:
            return Rule(name, "constrained", self.rule_cells, self.index, delta, rl.level_values, rl.level_labels, cases, note)
        keep = [c for c in self.columns if c not in blind]
        index, groups = rl.layout.group_by(keep)
        fine_to_coarse = np.zeros(self._data.n_groups, dtype=np.int64)
        fine_to_coarse[self.index] = index
        n = len(groups)
        w = np.bincount(fine_to_coarse, weights=cases, minlength=n)
        coarse = np.stack([np.bincount(fine_to_coarse, weights=cases * delta[:, d], minlength=n) for d in range(delta.shape[1])], axis=1)
        coarse /= w[:, None]
        return Rule(name, "constrained", groups, index, coarse, rl.level_values, rl.level_labels, w, note)

    def _sensitivity(self, cost: float) -> tuple[np.ndarray, np.ndarray]:
        """Expected cost per case saved by loosening each bound one point, and by removing each constraint.

        Warm re-solves, each from the optimum. One point is 0.01 of a probability, share or rate
        (1% of the cases for ``max_cases``); a bound already at its limit cannot loosen (NaN).
        The saving per point is what the re-solve shows, not the dual value: on a degenerate LP
        the dual is one of several and may price tightening rather than loosening.
        """
        K = len(self.specs)
        per_point, removed = np.full(K, np.nan), np.full(K, np.nan)
        for k, (spec, block) in enumerate(zip(self.specs, self._data.blocks)):
            if not self.active[k]:
                continue
            if block.n_rows == 0:
                per_point[k] = removed[k] = 0.0
                continue
            before = self.declared[k]
            try:
                if spec.kind != "group_blind":
                    step = 0.01 * (self._data.total if spec.bound_key == "max_cases" else 1.0)
                    limit = np.inf if spec.bound_key == "max_cases" else 1.0
                    self.declared[k] = min(limit, before + step)
                    if self.declared[k] > before:
                        self._dirty["bounds"] = True
                        gain = cost - self.solve_lp(lenient_ties=False).cost_per_case
                        per_point[k] = max(gain, 0.0) * step / (self.declared[k] - before)
                    self.declared[k] = before
                self.active[k] = False
                self._dirty["bounds"] = True
                removed[k] = max(cost - self.solve_lp(lenient_ties=False).cost_per_case, 0.0)
            finally:
                self.declared[k] = before
                self.active[k] = True
                self._dirty["bounds"] = True
        if self._highs is not None:
            self._highs.restore_best()
        return per_point, removed

    def _table(self, lp: LPSolution, loosened: np.ndarray, removed: np.ndarray) -> pd.DataFrame:
        rows = []
        internal = self._internal_bounds()
        for k, (spec, block) in enumerate(zip(self.specs, self._data.blocks)):
            v = lp.row_values[k]
            if block.n_rows:
                slack_hi = internal[k] - v
                slack = np.minimum(slack_hi, v + internal[k]) if block.two_sided else slack_hi
                reached = np.abs(v) if block.two_sided else v
                i = int(np.argmax(reached))
                value = float(reached[i] * block.scale)
                value = 0.0 if abs(value) < 1e-12 else value
                min_slack = float(slack.min() * block.scale)
                binding = bool(slack.min() <= BINDING_TOLERANCE)
                tight = np.flatnonzero(slack <= BINDING_TOLERANCE)
                where = "; ".join(block.labels(int(r)) for r in tight[:3]) + (f"; and {len(tight) - 3} more" if len(tight) > 3 else "")
            else:
                value, min_slack, binding, where = np.nan, np.nan, False, ""
            # the equality rows of a group-blind rule have no tolerance to loosen, and their
            # multipliers are not unique (solvers return different ones): no dual is reported
            dual = float(lp.saving[k]) if self.active[k] and spec.kind != "group_blind" and block.n_rows else np.nan
            rows.append({
                "constraint": spec.name,
                "kind": spec.kind,
                "arguments": spec.arguments(),
                "bound_key": "" if spec.kind == "group_blind" else spec.bound_key,
                "bound": self.declared[k],
                "unit": spec.bound_unit,
                "rows": block.n_rows,
                "value": value,
                "slack": min_slack,
                "binding": binding,
                "dual": dual,
                "dual_per_1000": 1000.0 * dual,
                "saving_per_point_per_1000": 1000.0 * loosened[k],
                "saving_if_removed_per_1000": 1000.0 * removed[k],
                "binding_rows": where,
                "note": block.note,
            })
        return pd.DataFrame(rows, columns=["constraint", "kind", "arguments", "bound_key", "bound", "unit", "rows", "value",
                                           "slack", "binding", "dual", "dual_per_1000", "saving_per_point_per_1000",
                                           "saving_if_removed_per_1000", "binding_rows", "note"])

    # -- infeasibility -------------------------------------------------------------------------
    def _infeasible(self, status: str) -> PolicyError:
        conflicts, total = elastic_conflicts(self._data, self.specs, self._internal_bounds(), self.active, self.declared)
        if total <= FEASIBILITY_TOLERANCE:
            return SolverError(f"the solver reported the constraints infeasible (status {status}), but a version with "
                               f"slack finds them violated by only {total:.1e} in total; this is solver trouble, not a "
                               "conflict. Try another [linear_program] solver or method.")
        involved = conflicts[conflicts["involved"]]
        lines = ["The constraints cannot all hold at once. These conflict:"]
        for _, row in involved.iterrows():
            about = ", ".join(filter(None, [row["kind"] if row["kind"] not in row["constraint"] else "", row["arguments"]]))
            text = f"  - {row['constraint']}" + (f" ({about})" if about else "")
            blind = row["kind"] == "group_blind"
            if row["loosen_by"] > 0:
                text += (f": letting decisions differ by {row['loosen_by']:.4g} between groups" if blind else
                         f": loosen {row['bound_key']} by {row['loosen_by']:.4g} to {row['loosened_bound']:.4g}")
            if np.isfinite(row["alone_bound"]):
                text += (f"; alone, letting decisions differ by {row['alone_by']:.4g} between groups would do" if blind else
                         f"; loosened alone, {row['bound_key']} {row['alone_bound']:.4g} would do")
            else:
                text += "; loosening it alone cannot make the constraints hold"
            lines.append(text)
        lines.append("'loosen ... by' is one smallest total loosening (summed in probability and share units); "
                     "'alone' loosens that constraint only and keeps the others.")
        return InfeasibleError("\n".join(lines), conflicts)


def _row_sums(a: np.ndarray) -> np.ndarray:
    """Sums along the short last axis, by columns (numpy's reduction over a short last axis is slow)."""
    out = a[:, 0].copy()
    for d in range(1, a.shape[1]):
        out += a[:, d]
    return out


def _aggregate(index: np.ndarray, n_groups: int, weights: np.ndarray, per_cell: np.ndarray) -> np.ndarray:
    """sum_{x in g} w(x) v(x, d) / sum_x w(x) for every rule cell g and level d; per_cell (n_cells, L)."""
    total = weights.sum()
    return np.stack([np.bincount(index, weights=weights * per_cell[:, d], minlength=n_groups) for d in range(per_cell.shape[1])],
                    axis=1) / total


def _validated_specs(constraints: Sequence[ConstraintSpec | Mapping], vocab: Vocabulary) -> tuple[ConstraintSpec, ...]:
    specs = []
    for i, c in enumerate(constraints, 1):
        if isinstance(c, ConstraintSpec):
            raw = {k.name: getattr(c, k.name) for k in CONSTRAINT_KEYS if getattr(c, k.name) is not None}
            raw = {k: list(v) if isinstance(v, tuple) else v for k, v in raw.items()}
            if c.kind == "monotone" and raw.get("tolerance") == 0.0:
                raw.pop("tolerance")
            specs.append(spec_from_table(raw, vocab, i, where=f"constraint {c.name!r}"))
        elif isinstance(c, Mapping):
            specs.append(spec_from_table(dict(c), vocab, i, where=f"constraint #{i}"))
        else:
            raise InputError(f"constraint #{i} must be a ConstraintSpec or a table of keys; got {type(c).__name__}.")
    names = [s.name for s in specs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"two constraints are named {dup[0]!r}; give each its own name.")
    return tuple(specs)


# ----------------------------------------------------------------------------------------------
# The two ways of solving
# ----------------------------------------------------------------------------------------------
def dual_degenerate(c: np.ndarray, reduced: np.ndarray, row_dual: np.ndarray) -> bool:
    """Some nonbasic column or row has a zero reduced cost: another optimal vertex may exist.

    Basic columns and rows have zero reduced cost and there are exactly n_rows of them, so
    more than n_rows zeros means a nonbasic one is zero as well.
    """
    tol = 1e-9 * max(float(np.abs(c).max()), 1e-12)
    zeros = int(np.count_nonzero(np.abs(reduced) <= tol) + np.count_nonzero(np.abs(row_dual) <= tol))
    return zeros > len(row_dual)


def most_lenient(h, A: sp.csr_matrix, c, x, y, reduced, lo, hi, harsh, col_hi):
    """The most lenient of the optimal rules: minimize harshness over the optimal face of a loaded model.

    With the optimal dual (y, reduced costs) fixed, a feasible point is optimal exactly when it
    is zero on every column of positive reduced cost, at its upper bound on every column of
    negative reduced cost, and on the active bound of every row with a non-zero dual
    (complementary slackness). Those are fixed; the rest is free to move toward leniency.
    Reduced costs and duals within 1e-9 of the largest cost count as zero, the tie tolerance of
    the unconstrained rule. The model is restored afterwards (bounds, costs, basis).

    Returns
    -------
    x2 : ndarray or None
        The most lenient optimal point (None if the pass failed; the first point stands).
    seconds, iterations
    """
    basis = h.getBasis()
    n = len(c)
    cols = np.arange(n, dtype=np.int32)
    tol = 1e-9 * max(float(np.abs(c).max()), 1e-12)
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
        optimum = float((c * x).sum())
        if float((c * candidate).sum()) <= optimum + 1e-9 * max(1.0, abs(optimum)):
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


class _HighsDriver:
    """One HiGHS model kept loaded between solves so that re-solves start from the last basis."""

    def __init__(self, settings: LPSettings):
        self.settings = settings
        self.h = None
        self.best_basis = None
        self.shape = None

    def _load(self, data: _LPData, c, lo, hi) -> None:
        basis = self.h.getBasis() if self.h is not None and self.shape == data.A.shape else None
        h = new_highs()
        if self.settings.time_limit is not None:
            h.setOptionValue("time_limit", float(self.settings.time_limit))
        n = data.n_cols
        load_lp(h, c, data.A, lo, hi, np.zeros(n), np.ones(n))
        if basis is not None and basis.valid:
            h.setBasis(basis)
        self.h, self.shape = h, data.A.shape
        self.cols = np.arange(n, dtype=np.int32)
        self.rows = np.arange(data.n_groups, data.A.shape[0], dtype=np.int32)

    def solve(self, data: _LPData, c, lo, hi, dirty, lenient: bool):
        if self.h is None or dirty["model"]:
            self._load(data, c, lo, hi)
        else:
            if dirty["cost"]:
                self.h.changeColsCost(len(self.cols), self.cols, c)
            if dirty["bounds"] and len(self.rows):
                G = data.n_groups
                self.h.changeRowsBounds(len(self.rows), self.rows, lo[G:], hi[G:])
        warm = self.h.getBasis().valid
        status, seconds = _highs_run(self.h, "simplex" if warm else self.settings.first_method(data.n_cols))
        iterations = _highs_iterations(self.h)
        if status != "kOptimal":
            return status, None, None, iterations, seconds, False
        sol = self.h.getSolution()
        x = np.asarray(sol.col_value)
        y = np.asarray(sol.row_dual)
        cumulative = np.concatenate([[0.0], np.cumsum(np.abs(y))])
        block_duals = cumulative[data.offsets[1:]] - cumulative[data.offsets[:-1]]
        lenient_pass = False
        # HiGHS's reduced costs are c - A'y; computing them costs less than converting its list
        reduced = c - data.At @ y if lenient else None
        if lenient and dual_degenerate(c, reduced, y):
            x2, extra_seconds, extra_iter = most_lenient(self.h, data.A, c, x, y, reduced, lo, hi,
                                                         _harshness(data.group_share, data.n_levels), np.ones(data.n_cols))
            seconds += extra_seconds
            iterations += extra_iter
            if x2 is not None:
                x, lenient_pass = x2, True
        self.best_basis = self.h.getBasis()
        return status, x, block_duals, iterations, seconds, lenient_pass

    def restore_best(self) -> None:
        if self.h is not None and self.best_basis is not None and self.best_basis.valid:
            self.h.setBasis(self.best_basis)


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
# ----------------------------------------------------------------------------------------------
def elastic_conflicts(data: _LPData, specs: Sequence[ConstraintSpec], internal: np.ndarray, active: np.ndarray,
                      declared: np.ndarray) -> tuple[pd.DataFrame, float]:
    """Which constraints conflict and how far each must loosen.

    Solves min sum_k s_k subject to the rule-cell rows and, for every active constraint k,
    ``M_k delta <= b_k + s_k`` (and ``M_k delta >= -b_k - s_k`` for two-sided rows), s_k >= 0
    (Chinneck 2008, the elastic program). A constraint is *involved* when it must loosen or its
    rows carry a non-zero dual (they take part in the proof that the rest cannot hold). For each
    involved constraint the same program with only its own slack free says how far loosening
    it alone would have to go (infinite when that cannot help).

    Returns
    -------
    conflicts : DataFrame
        constraint, kind, arguments, bound_key, bound, unit, involved, loosen_by,
        loosened_bound, alone_by, alone_bound (bounds in each constraint's declared unit).
    total : float
        The smallest total violation (probability / share units).
    """
    G, n = data.n_groups, data.n_cols
    K = len(specs)
    top = [data.A[:G], sp.csr_matrix((G, K))]
    blocks_rows, lo_parts, hi_parts, owner = [top], [np.ones(G)], [np.ones(G)], [np.full(G, -1)]
    for k, block in enumerate(data.blocks):
        if not active[k] or block.n_rows == 0:
            continue
        e = sp.csr_matrix((np.ones(block.n_rows), (np.arange(block.n_rows), np.full(block.n_rows, k))), shape=(block.n_rows, K))
        blocks_rows.append([block.matrix, -e])
        lo_parts.append(np.full(block.n_rows, -np.inf))
        hi_parts.append(np.full(block.n_rows, internal[k]))
        owner.append(np.full(block.n_rows, k))
        if block.two_sided:
            blocks_rows.append([block.matrix, e])
            lo_parts.append(np.full(block.n_rows, -internal[k]))
            hi_parts.append(np.full(block.n_rows, np.inf))
            owner.append(np.full(block.n_rows, k))
    A = sp.bmat(blocks_rows, format="csc")
    lo, hi = np.concatenate(lo_parts), np.concatenate(hi_parts)
    owner = np.concatenate(owner)
    c = np.concatenate([np.zeros(n), np.ones(K)])
    col_hi = np.concatenate([np.ones(n), np.where(active, np.inf, 0.0)])
    h = new_highs()
    load_lp(h, c, A, lo, hi, np.zeros(n + K), col_hi)
    status, _ = _highs_run(h, "simplex")
    if status != "kOptimal":
        raise _status_error(status, "the elastic program that explains the conflict")
    sol = h.getSolution()
    s = np.asarray(sol.col_value)[n:]
    total = float(s.sum())
    y = np.abs(np.asarray(sol.row_dual))
    dual_by = np.bincount(owner[owner >= 0], weights=y[owner >= 0], minlength=K)
    involved = active & ((s > FEASIBILITY_TOLERANCE) | (dual_by > 1e-9))
    basis = h.getBasis()
    alone = np.full(K, np.inf)
    for k in np.flatnonzero(involved):
        only = np.where(np.arange(K) == k, np.inf, 0.0)
        h.changeColsBounds(K, np.arange(n, n + K, dtype=np.int32), np.zeros(K), only)
        status, _ = _highs_run(h, "simplex")
        if status == "kOptimal":
            alone[k] = float(np.asarray(h.getSolution().col_value)[n + k])
        elif status not in ("kInfeasible", "kUnboundedOrInfeasible"):
            raise _status_error(status, "the elastic program that explains the conflict")
        h.setBasis(basis)
    scales = np.array([b.scale for b in data.blocks])
    rows = []
    for k, spec in enumerate(specs):
        by = float(s[k] * scales[k])
        alone_by = float(alone[k] * scales[k]) if np.isfinite(alone[k]) else np.inf
        limit = np.inf if spec.bound_key == "max_cases" else 1.0
        rows.append({
            "constraint": spec.name,
            "kind": spec.kind,
            "arguments": spec.arguments(),
            "bound_key": "" if spec.kind == "group_blind" else spec.bound_key,
            "bound": float(declared[k]),
            "unit": spec.bound_unit,
            "involved": bool(involved[k]),
            "loosen_by": by,
            "loosened_bound": min(float(declared[k]) + by, limit),
            "alone_by": alone_by if involved[k] else np.nan,
            "alone_bound": min(float(declared[k]) + alone_by, limit) if involved[k] and np.isfinite(alone_by) else np.nan,
        })
    return pd.DataFrame(rows), total


# ----------------------------------------------------------------------------------------------
# The presented result
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ConstrainedRule:
    """A constrained optimal rule with its price and what each constraint costs.

    Attributes
    ----------
    rule : Rule
        Kind ``'constrained'``; on the rule columns without attributes a group-blind constraint
        removed. Rule cells split between levels are a randomized rule (see :attr:`split`).
    evaluation : Evaluation
        The rule scored under the risk levels; its regret is the price against the
        unconstrained optimum.
    unconstrained : Rule
        The unconstrained optimum on the same rule columns (the foundation's argmin rule).
    unconstrained_evaluation : Evaluation
    constraints : DataFrame
        One row per constraint (see :meth:`to_frame`).
    specs : tuple of ConstraintSpec
    lp : LPSolution
    unit : str
    notes : tuple of str
    """

    rule: Rule
    evaluation: Evaluation
    unconstrained: Rule
    unconstrained_evaluation: Evaluation
    constraints: pd.DataFrame
    specs: tuple[ConstraintSpec, ...]
    lp: LPSolution
    unit: str
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def cost_per_case(self) -> float:
        return self.evaluation.cost_per_case

    @property
    def price_per_case(self) -> float:
        """Expected cost per case above the unconstrained optimum."""
        return self.evaluation.cost_per_case - self.unconstrained_evaluation.cost_per_case

    @property
    def price_per_1000(self) -> float:
        return 1000.0 * self.price_per_case

    @property
    def split(self) -> pd.DataFrame:
        """Rule cells the optimum splits between levels, with the share of cases given each level."""
        frame = self.rule.to_frame()
        return frame[frame["split"]].reset_index(drop=True)

    def to_frame(self) -> pd.DataFrame:
        """The constraint table: constraint, kind, arguments, bound_key, bound, unit, rows, value, slack,
        binding, dual, dual_per_1000, saving_per_point_per_1000, saving_if_removed_per_1000,
        binding_rows, note (documented in docs/outputs.md)."""
        return self.constraints.copy()

    def overview(self) -> dict[str, Any]:
        """Headline figures as a flat dict."""
        return {
            "rule": self.rule.name,
            "unit": self.unit,
            "cost_per_case": self.cost_per_case,
            "cost_per_1000_cases": 1000.0 * self.cost_per_case,
            "unconstrained_cost_per_case": self.unconstrained_evaluation.cost_per_case,
            "unconstrained_cost_per_1000_cases": 1000.0 * self.unconstrained_evaluation.cost_per_case,
            "price_per_case": self.price_per_case,
            "price_per_1000_cases": self.price_per_1000,
            "split_rule_cells": int(len(self.rule.split_cells)),
            "cases_in_split_rule_cells": float(self.split["cases"].sum()) if "cases" in self.split else 0.0,
            "solver": self.lp.solver,
            "solver_status": self.lp.status,
            "solver_iterations": self.lp.iterations,
            "most_lenient_of_ties": self.lp.lenient_pass,
        }

    def summary(self) -> str:
        return str(self)

    def __str__(self) -> str:
        lines = [
            f"{self.rule.name}: expected cost {1000 * self.cost_per_case:,.0f} {self.unit} per 1,000 cases",
            f"  price of the constraints: {self.price_per_1000:,.0f} per 1,000 cases ({self.price_per_case:,.2f} per case) "
            f"above the unconstrained optimum ({1000 * self.unconstrained_evaluation.cost_per_case:,.0f})",
        ]
        for _, row in self.constraints.iterrows():
            bound = "" if row["kind"] == "group_blind" else f" {row['bound_key']} {row['bound']:g};"
            state = "binds" if row["binding"] else "does not bind"
            step = "1% of the cases" if row["bound_key"] == "max_cases" else "one point (0.01)"
            text = f"  - {row['constraint']}:{bound} {state}"
            if np.isfinite(row["value"]):
                text += f" (reached {row['value']:.4g})"
            if np.isfinite(row["saving_per_point_per_1000"]) and row["kind"] != "group_blind":
                text += f"; loosening it by {step} saves {row['saving_per_point_per_1000']:,.0f} per 1,000 cases"
            if np.isfinite(row["saving_if_removed_per_1000"]):
                text += f"; removing it saves {row['saving_if_removed_per_1000']:,.0f} per 1,000 cases"
            lines.append(text)
        split = self.split
        if len(split):
            lines.append(f"  {len(split)} rule cells are split between levels (a randomized rule):")
            share_cols = [c for c in split.columns if c.startswith("share_")]
            cols = list(self.rule.rule_cells.columns)
            for _, row in split.iterrows():
                where = ", ".join(f"{c}={row[c]}" for c in cols)
                shares = ", ".join(f"{lab} {row[c]:.1%}" for lab, c in zip(self.rule.level_labels, share_cols) if row[c] > SPLIT_TOLERANCE)
                lines.append(f"    {where}: {shares}")
        else:
            lines.append("  every rule cell gets one decision level (no randomization).")
        lines.extend(f"  note: {n}" for n in self.notes)
        lines.append(str(self.evaluation))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        text = str(self).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
        return f"<pre>{text}</pre>" + self.constraints.to_html(index=False) + self.rule._repr_html_()

    def output_files(self) -> dict[str, Any]:
        """The files of a constrained solve (documented in docs/outputs.md)."""
        return {
            "constrained_rule.csv": self.rule.to_frame(),
            "constraints.csv": self.to_frame(),
            "constrained_by_group.csv": self.evaluation.by_group(),
            "constrained_within_risk_levels.csv": self.evaluation.within_risk_levels(),
            "constrained_fairness_gaps.csv": self.evaluation.fairness_gaps(),
            "constrained_evaluation.json": {
                "overview": self.overview(),
                "evaluation": self.evaluation.overview(),
                "constraints": [s.describe() for s in self.specs],
                "split_rule_cells": self.split.to_dict(orient="records"),
                "notes": list(self.notes),
                "assumptions": assumptions_for("rule"),
                "cautions": list(CAUTIONS),
            },
        }


def solve_constrained(risk_levels: RiskLevels, costs: Costs, constraints: Sequence[ConstraintSpec | Mapping],
                      columns: Sequence[str] | None = None, settings: LPSettings | None = None,
                      name: str = "constrained optimal rule") -> ConstrainedRule:
    """Build the constrained LP once and solve it (see :class:`ConstrainedProblem` for re-solves)."""
    return ConstrainedProblem(risk_levels, costs, constraints, columns, settings).solve(name)
