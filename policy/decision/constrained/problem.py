"""The constrained problem: built once, re-solved after cost, bound or risk-level changes, with
the constraints' prices (dual values and re-solves without each constraint)."""

from __future__ import annotations

from dataclasses import replace
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from policy.decision.constraints import (
    ConstraintSpec,
    Vocabulary,
)
from policy.decision.costs import Costs
from policy.errors import InfeasibleError, InputError, PolicyError, SolverError
from policy.decision.evaluate import evaluate
from policy.decision.rules import SPLIT_TOLERANCE, Rule
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevels
from policy.decision.constrained.settings import BINDING_TOLERANCE, FEASIBILITY_TOLERANCE, INACTIVE_BOUND, LPSettings, VERTEX_SOLVERS
from policy.decision.constrained.highs import _HighsDriver, _status_error
from policy.decision.constrained.program import LPSolution, _aggregate, _assemble, _row_sums, _validated_specs
from policy.decision.constrained.cvxpy_route import _CvxpyModel
from policy.decision.constrained.elastic import elastic_conflicts
from policy.decision.constrained.result import ConstrainedRule


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
        self._model: _CvxpyModel | None = None  # declared in cvxpy only when a cvxpy solver or the problem is asked for
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
    def in_cumulative_variables(self) -> bool:
        """HiGHS is given this LP in cumulative variables (:mod:`policy.decision.constrained.cumulative`)."""
        from policy.decision.constrained import cumulative

        return (self.settings.uses_direct and self.settings.method == "auto" and self._data.n_levels >= 2
                and self._data.n_groups >= cumulative.CUMULATIVE_FROM_RULE_CELLS)

    @property
    def solver_label(self) -> str:
        """How this problem's LP is solved, for outputs."""
        return self.settings.label_for(self.in_cumulative_variables)

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

    def set_objective_probabilities(self, p: np.ndarray) -> "ConstrainedProblem":
        """Price the outcomes at probabilities ``p`` (n_cells, J, L) other than the loaded point estimates.

        The constraints' rows keep the loaded risk levels; only the objective changes (the robust
        rule prices outcomes at their worst case, :mod:`policy.decision.robust`). Loading risk
        levels again (:meth:`set_risk_levels`) prices them at the new estimates.
        """
        p = np.asarray(p, dtype=np.float64)
        if p.shape != self.risk_levels.p.shape:
            raise InputError(f"outcome probabilities of shape {p.shape} given; the problem's cells need {self.risk_levels.p.shape}.")
        outcome = np.stack([_aggregate(self.index, self._data.n_groups, self.risk_levels.weights, p[:, j, :])
                            for j in range(p.shape[1])])
        self._data = replace(self._data, outcome=outcome)
        self._model = None
        self._dirty["cost"] = True
        return self

    def rows(self):
        """The LP's rows over the decision probabilities (columns g * L + d) and their bounds in force.

        Returns (A, lower, upper): A is sparse with one row per rule cell (probabilities sum to 1)
        first, then each constraint's rows; inactive constraints have infinite bounds.
        """
        lo, hi = self._data.row_bounds(self._internal_bounds(), self.active)
        return self._data.A, lo, hi

    def present(self, delta: np.ndarray, name: str) -> Rule:
        """Decision probabilities of the rule cells (G, L) as a Rule (coarsened where a group-blind constraint binds)."""
        return self._present(delta, name)

    def forget_basis(self) -> "ConstrainedProblem":
        """Make the next solve start as on a newly built problem (from the unconstrained optimum's basis).

        Warm re-solves depend on the basis the last solve left; a degenerate LP has several,
        and two paths to the same optimum may differ in the last bits. Tasks that may run in any
        process (bootstrap chunks, blocks of sweep points) call this first, so their results
        depend only on their own inputs.
        """
        if self._highs is not None and self._highs.h is not None and not self._dirty["model"]:
            # the loaded model stays; only the solver's state goes (reloading costs more than a
            # first solve at this size). Same bits as a reload: tests/test_constrained_cumulative.py
            self._highs.restart()
        else:
            self._highs = None
            self._dirty = {"cost": True, "bounds": True, "model": True}
        self._model = None
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
        return LPSolution(delta, float((c * flat).sum()), saving, row_values, "optimal", self.solver_label, iterations, seconds, lenient_pass)

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


def solve_constrained(risk_levels: RiskLevels, costs: Costs, constraints: Sequence[ConstraintSpec | Mapping],
                      columns: Sequence[str] | None = None, settings: LPSettings | None = None,
                      name: str = "constrained optimal rule") -> ConstrainedRule:
    """Build the constrained LP once and solve it (see :class:`ConstrainedProblem` for re-solves)."""
    return ConstrainedProblem(risk_levels, costs, constraints, columns, settings).solve(name)
