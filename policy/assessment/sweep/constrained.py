"""Constrained optima along a cost-ratio sweep, and the price of each constraint along it.

The constrained optimum has no closed form in the ratio: it is re-solved on a grid of ratios
(and, optionally, of one constraint's tolerance or cap), re-using one compiled linear program
(:class:`policy.decision.constrained.ConstrainedProblem`: the costs and bounds are parameters of a model
built once, and each re-solve starts from the last basis). At each grid point it reports

- the constrained optimum's expected cost per case and its decision shares;
- its **price**: the expected cost above the unconstrained optimum at that ratio,
  C_constrained(r) - OPT(r) / sum_x w(x), where OPT is the exact piecewise-linear optimum of
  :func:`policy.assessment.sweep.sweep_one` (same rule cells);
- the price of **each constraint**: what removing it alone would save (a warm re-solve without
  it), and its dual value (the saving per unit its bound is loosened, at the margin; on a
  degenerate LP the solver returns one of several duals).

A grid point where the constraints cannot all hold is reported as infeasible and the sweep
goes on.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.decision.constrained import ConstrainedProblem, LPSettings
from policy.decision.constraints import ConstraintSpec
from policy.decision.costs import Costs
from policy.errors import InfeasibleError, InputError
from policy.decision.rules import SPLIT_TOLERANCE
from policy.estimation.strata import RiskLevels
from policy.assessment.sweep.axes import RatioAxis
from policy.assessment.sweep.one_ratio import OneRatioSweep, sweep_one
from policy.assessment.uncertainty import InProcess

__all__ = ["ConstrainedSweep", "constrained_sweep", "ratio_grid", "solve_sweep_block", "SWEEP_BLOCK"]

#: grid points per task of a constrained sweep (fixed, so results do not depend on the workers)
SWEEP_BLOCK = 10


def ratio_grid(lo: float, hi: float, points: int, scale: str) -> np.ndarray:
    """Grid of ratios for the constrained re-solves: evenly spaced, or evenly in log on a log scale."""
    if points < 2:
        raise InputError(f"a constrained sweep needs at least 2 grid points; got {points}.")
    return np.geomspace(lo, hi, points) if scale == "log" else np.linspace(lo, hi, points)


@dataclass(frozen=True)
class ConstrainedSweep:
    """Constrained optima on a grid of ratios (rows: values of the varied bound, if any).

    Attributes
    ----------
    axis : RatioAxis
    ratios : ndarray of shape (P,)
    scale : str
    specs : tuple of ConstraintSpec
    varied : str or None
        Name of the constraint whose bound varies along the rows (None: one row, as declared).
    bounds : ndarray of shape (B,)
        That bound's values (the declared value when nothing varies; nan for a group-blind rule).
    level_values, level_labels : tuple of str
    feasible : ndarray of shape (B, P), bool
    cost : ndarray of shape (B, P)
        Expected cost per case of the constrained optimum (nan where infeasible).
    unconstrained : ndarray of shape (P,)
        Expected cost per case of the unconstrained optimum (exact).
    shares : ndarray of shape (B, P, L)
        Share of cases at each level under the constrained optimum.
    split : ndarray of shape (B, P), int
        Rule cells the constrained optimum splits between levels.
    dual : ndarray of shape (B, P, K)
        Saving per case per unit each constraint's bound is loosened (nan for group-blind rules).
    removed : ndarray of shape (B, P, K)
        Saving per case if the constraint alone were removed (nan when not computed).
    unit, solver : str
    """

    axis: RatioAxis
    ratios: np.ndarray
    scale: str
    specs: tuple[ConstraintSpec, ...]
    varied: str | None
    bounds: np.ndarray
    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    feasible: np.ndarray
    cost: np.ndarray
    unconstrained: np.ndarray
    shares: np.ndarray
    split: np.ndarray
    dual: np.ndarray
    removed: np.ndarray
    unit: str
    solver: str

    @property
    def price(self) -> np.ndarray:
        """Expected cost per case above the unconstrained optimum, shape (B, P)."""
        return self.cost - self.unconstrained[None, :]

    def _row_labels(self) -> list:
        return list(self.bounds) if self.varied is not None else [np.nan]

    def to_frame(self) -> pd.DataFrame:
        """One row per grid point: ``varied``, ``bound``, ``ratio``, ``cost``, ``feasible``,
        ``cost_per_1000``, ``unconstrained_per_1000``, ``price_per_1000``, ``split_rule_cells``,
        ``share_<level value>``."""
        B, P = self.cost.shape
        b, i = np.indices((B, P)).reshape(2, -1)
        out = pd.DataFrame({
            "varied": self.varied or "",
            "bound": np.asarray(self._row_labels(), dtype=float)[b],
            "ratio": self.ratios[i],
            "cost": self.ratios[i] * self.axis.reference_cost,
            "feasible": self.feasible.reshape(-1),
            "cost_per_1000": 1000.0 * self.cost.reshape(-1),
            "unconstrained_per_1000": 1000.0 * self.unconstrained[i],
            "price_per_1000": 1000.0 * self.price.reshape(-1),
            "split_rule_cells": self.split.reshape(-1),
        })
        for d, value in enumerate(self.level_values):
            out[f"share_{value}"] = self.shares[..., d].reshape(-1)
        return out

    def price_table(self) -> pd.DataFrame:
        """The price of each constraint at each grid point, tidy: ``varied``, ``bound``,
        ``ratio``, ``cost``, ``constraint``, ``kind``, ``saving_if_removed_per_1000``,
        ``dual_per_1000``."""
        B, P, K = self.dual.shape
        b, i, k = np.indices((B, P, K)).reshape(3, -1)
        return pd.DataFrame({
            "varied": self.varied or "",
            "bound": np.asarray(self._row_labels(), dtype=float)[b],
            "ratio": self.ratios[i],
            "cost": self.ratios[i] * self.axis.reference_cost,
            "constraint": np.asarray([s.name for s in self.specs], dtype=object)[k],
            "kind": np.asarray([s.kind for s in self.specs], dtype=object)[k],
            "saving_if_removed_per_1000": 1000.0 * self.removed.reshape(-1),
            "dual_per_1000": 1000.0 * self.dual.reshape(-1),
        })

    def summary(self) -> pd.DataFrame:
        """Per row (bound value): the price per 1,000 cases at the scenario's ratio (nearest grid
        point) and its range over the grid."""
        i = int(np.argmin(np.abs(self.ratios - self.axis.scenario_ratio)))
        rows = []
        for b, label in enumerate(self._row_labels()):
            price = 1000.0 * self.price[b]
            ok = self.feasible[b]
            rows.append({
                "bound": label,
                "ratio": float(self.ratios[i]),
                "price_per_1000_there": float(price[i]) if ok[i] else np.nan,
                "lowest_price_per_1000": float(np.nanmin(price)) if ok.any() else np.nan,
                "highest_price_per_1000": float(np.nanmax(price)) if ok.any() else np.nan,
                "infeasible_points": int((~ok).sum()),
            })
        return pd.DataFrame(rows)

    def __str__(self) -> str:
        names = ", ".join(s.name for s in self.specs)
        what = f"; {self.varied!r} bound over {', '.join(f'{v:g}' for v in self.bounds)}" if self.varied else ""
        lines = [f"Constrained optimum re-solved at {len(self.ratios)} ratios from {self.ratios[0]:g} to "
                 f"{self.ratios[-1]:g}{what} ({names}; {self.solver})."]
        table = self.summary()
        unit = f" {self.unit}" if self.unit else ""
        for _, row in table.iterrows():
            head = f"  bound {row['bound']:g}: " if self.varied else "  "
            if np.isfinite(row["lowest_price_per_1000"]):
                lines.append(f"{head}price {row['lowest_price_per_1000']:,.0f} to {row['highest_price_per_1000']:,.0f}{unit} "
                             f"per 1,000 cases over the grid; {row['price_per_1000_there']:,.0f} near the scenario's ratio"
                             + (f"; infeasible at {int(row['infeasible_points'])} points" if row["infeasible_points"] else ""))
            else:
                lines.append(f"{head}the constraints cannot all hold anywhere on the grid")
        return "\n".join(lines)


def constrained_sweep(risk_levels: RiskLevels, costs: Costs, axis: RatioAxis, ratios: np.ndarray,
                      constraints: Sequence[ConstraintSpec | Mapping], columns: Sequence[str] | None = None,
                      settings: LPSettings | None = None, vary: str | int | None = None,
                      values: Sequence[float] | None = None, removal: bool = True, scale: str = "linear",
                      unconstrained: OneRatioSweep | None = None,
                      on_point: Callable[[int, int], None] | None = None, runner=None) -> ConstrainedSweep:
    """Re-solve the constrained optimum along a grid of ratios, re-using one compiled problem.

    Parameters
    ----------
    risk_levels, costs : RiskLevels, Costs
    axis : RatioAxis
        The swept ratio.
    ratios : ndarray of shape (P,)
        Grid of ratios (:func:`ratio_grid`).
    constraints : sequence of ConstraintSpec or dict
        As for :class:`policy.decision.constrained.ConstrainedProblem`.
    columns : sequence of str, optional
        Rule columns (default: the layout's rule columns).
    settings : LPSettings, optional
    vary : str or int, optional
        A constraint (name or 1-based position) whose bound takes each of ``values`` in turn.
    values : sequence of float, optional
        The bound values (in the bound's declared unit).
    removal : bool
        Also re-solve without each constraint in turn (its saving if removed).
    scale : str
        How figures show the ratio.
    unconstrained : OneRatioSweep, optional
        The exact unconstrained sweep on the same rule columns (computed if not given).
    on_point : callable, optional
        Called with (points done, points in all) after each grid point.
    runner : TaskRunner, optional
        Where the blocks of :data:`SWEEP_BLOCK` grid points run (default: in this process;
        :mod:`policy.running.distributed`). The result does not depend on it.
    """
    ratios = np.asarray(ratios, dtype=np.float64)
    if ratios.ndim != 1 or len(ratios) == 0 or (ratios < 0).any() or not np.isfinite(ratios).all():
        raise InputError("the ratios of a constrained sweep must be finite numbers >= 0.")
    if not constraints:
        raise InputError("a constrained sweep needs at least one constraint.")
    problem = ConstrainedProblem(risk_levels, costs, constraints, columns, settings)
    specs = problem.specs
    if unconstrained is None:
        lo, hi = float(ratios.min()), float(ratios.max())
        unconstrained = sweep_one(risk_levels, costs, axis, lo, hi if hi > lo else lo + 1.0, columns=problem.columns)
    opt = unconstrained.optimal_cost_at(ratios)
    if vary is not None:
        k_vary = problem.spec_position(vary)
        if specs[k_vary].kind == "group_blind":
            raise InputError(f"{specs[k_vary].name!r} is a group-blind rule; it has no tolerance or cap to vary.")
        if values is None or len(values) == 0:
            raise InputError(f"give the values of the bound of {specs[k_vary].name!r} to sweep.")
        bounds = np.asarray(values, dtype=np.float64)
        varied = specs[k_vary].name
    else:
        bounds, varied, k_vary = np.array([np.nan]), None, None
    B, P, K, L = len(bounds), len(ratios), len(specs), risk_levels.n_levels
    feasible = np.zeros((B, P), dtype=bool)
    cost = np.full((B, P), np.nan)
    shares = np.full((B, P, L), np.nan)
    split = np.zeros((B, P), dtype=np.int64)
    dual = np.full((B, P, K), np.nan)
    removed = np.full((B, P, K), np.nan)
    # fixed blocks of grid points (bound rows, then ratios), each solved warm within itself and
    # started at its first point from that point's unconstrained optimum (a basis computed from
    # the block's own inputs): the same bits whether the blocks run here, in other processes or
    # on a cluster
    points = [(b, i) for b in range(B) for i in range(P)]
    blocks = [tuple(points[k:k + SWEEP_BLOCK]) for k in range(0, len(points), SWEEP_BLOCK)]
    shared = _SweepShared(risk_levels, costs, specs, problem.columns, problem.settings, axis.outcome_index,
                          axis.reference_cost, ratios, bounds, k_vary, removal, problem)
    done = [0]

    def finished(k: int) -> None:
        for _ in blocks[k]:
            done[0] += 1
            if on_point:
                on_point(done[0], B * P)

    results = (runner or InProcess()).map(solve_sweep_block, shared, blocks, finished)
    for block, result in zip(blocks, results):
        for (b, i), point in zip(block, result):
            if point is None:
                continue
            feasible[b, i] = True
            cost[b, i], shares[b, i], split[b, i], dual[b, i], removed[b, i] = point
    return ConstrainedSweep(axis, ratios, scale, specs, varied, bounds, risk_levels.level_values,
                            risk_levels.level_labels, feasible, cost, opt, shares, split, dual, removed, costs.unit,
                            problem.solver_label)


@dataclass
class _SweepShared:
    """What every block of a constrained sweep needs (sent once to each worker)."""

    risk_levels: RiskLevels
    costs: Costs
    specs: tuple
    columns: tuple
    settings: LPSettings
    outcome_index: int
    reference_cost: float
    ratios: np.ndarray
    bounds: np.ndarray
    k_vary: int | None
    removal: bool
    problem: ConstrainedProblem | None = None

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state["problem"] = None  # each process builds its own (a loaded solver does not travel)
        return state


def solve_sweep_block(shared: _SweepShared, block: tuple) -> list:
    """The pure task of a constrained sweep: solve one block of grid points ``(b, i)`` in order.

    The process's problem is built once; each block forgets the last block's basis
    (:meth:`~policy.decision.constrained.ConstrainedProblem.forget_basis`) and starts from the
    basis of its first point's unconstrained optimum. Returns per point None
    (infeasible) or (cost per case, shares (L,), split rule cells, duals (K,), savings if removed (K,)).
    """
    if shared.problem is None:
        shared.problem = ConstrainedProblem(shared.risk_levels, shared.costs, shared.specs, shared.columns, shared.settings)
    problem = shared.problem.forget_basis()
    K = len(problem.specs)
    weights = np.bincount(problem.index, weights=shared.risk_levels.weights, minlength=problem.n_rule_cells)
    total = weights.sum()
    blind = np.array([s.kind == "group_blind" for s in problem.specs])
    outcome = np.asarray(shared.costs.outcome, dtype=np.float64).copy()
    out: list = []
    for b, i in block:
        if shared.k_vary is not None:
            problem.set_bounds({shared.k_vary + 1: float(shared.bounds[b])})
        outcome[shared.outcome_index] = shared.ratios[i] * shared.reference_cost
        problem.set_costs(outcome_costs=outcome)
        try:
            lp = problem.solve_lp()
        except InfeasibleError:
            out.append(None)
            continue
        removed = np.full(K, np.nan)
        if shared.removal:
            for k in range(K):
                # fewer constraints only widen the feasible set: this re-solve is feasible
                problem.set_active(k + 1, False)
                try:
                    removed[k] = max(lp.cost_per_case - problem.solve_lp(lenient_ties=False).cost_per_case, 0.0)
                finally:
                    problem.set_active(k + 1, True)
        out.append((lp.cost_per_case, weights @ lp.delta / total,
                    int((lp.delta.max(axis=1) <= 1 - SPLIT_TOLERANCE).sum()),
                    np.where(blind, np.nan, lp.saving), removed))
    return out
