"""Exact cost-ratio sweeps against vectorized grid argmins over the same rule cells.

Prints ratios measured in one run (the machines are shared and noisy; absolute times vary):

- one ratio, 10,000 rule cells, 3 levels, 3 outcome kinds: the exact result (breakpoints,
  the share step function, one compared rule's exact regret, the lenient interval of every
  rule cell) against a 100-point vectorized float64 grid argmin over the same rule-cell cost
  lines (target: at most 0.5x);
- two ratios, 2,000 rule cells: the exact lenient share on a 200 x 200 display grid (and the
  half-plane coefficients it needs) against one vectorized grid argmin over the same 40,000
  points, in chunks that fit in memory (target: at most 2x);
- the cells-to-rule-cells aggregation both share (reported, no target);
- a constrained sweep of 50 ratios on the constrained-rule benchmark LP (2,000 rule cells,
  principal fairness and a capacity cap; benchmarks/bench_constrained.py), re-using one
  compiled problem, against the best raw HiGHS chain built by hand (first solve from the
  unconstrained optimum's basis, then warm re-solves through the same 50 cost changes; first
  solve included; target: at most 1.3x), and against building the problem afresh at each
  ratio (reported).

Usage: python benchmarks/bench_sweep.py [--cells N] [--map-cells N] [--points N] [--lp-cells N]
"""

from __future__ import annotations

import argparse
import os
import gc
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from policy.inputs.cells import CellLayout  # noqa: E402
from policy.decision.costs import Costs  # noqa: E402
from policy.decision.rules import Rule  # noqa: E402
from policy.decision.solve import aggregation_matrix  # noqa: E402
from policy.estimation.strata import RiskLevels  # noqa: E402
from policy.assessment.sweep import cost_lines, lenient_map, ratio_axis, sweep_one  # noqa: E402


def best_of(fn, repeat=25):
    """Smallest wall time of ``repeat`` calls (garbage collection paused while timing)."""
    times = []
    out = None
    gc.collect()
    gc.disable()
    try:
        for _ in range(repeat):
            t = time.perf_counter()
            out = fn()
            times.append(time.perf_counter() - t)
    finally:
        gc.enable()
    return min(times), out


def synthetic(n_cells: int, seed: int = 0, L: int = 3, J: int = 3):
    """Random risk levels (non-increasing in the level) and costs, one rule cell per cell."""
    rng = np.random.default_rng(seed)
    p = np.sort(rng.uniform(0.0, 0.5, size=(n_cells, J, L)), axis=-1)[..., ::-1].copy()
    frame = pd.DataFrame({"cell": pd.Categorical.from_codes(np.arange(n_cells), categories=np.arange(n_cells), ordered=True)})
    layout = CellLayout(frame, (), ("cell",), None)
    levels = tuple(f"level {d}" for d in range(L))
    outcomes = tuple(f"outcome {j}" for j in range(J))
    rl = RiskLevels(layout, levels, levels, outcomes, outcomes, rng.integers(1, 200, n_cells).astype(float), p,
                    np.zeros_like(p, dtype=bool), {}, np.zeros((J, L), dtype=bool))
    decision = np.column_stack([np.zeros(n_cells), np.full(n_cells, 750.0), rng.uniform(2500, 6500, n_cells)])
    costs = Costs(decision, np.array([1000.0, 5000.0, 20000.0]), "USD", levels, outcomes)
    return rl, costs


def one_ratio(n_cells: int, grid_points: int = 100) -> None:
    rl, costs = synthetic(n_cells)
    axis = ratio_axis(rl, costs, "outcome 1")
    lo, hi = 0.0, 10.0
    compared = Rule.from_levels("fixed", "candidate", rl.layout, ["cell"], np.ones(n_cells, dtype=np.int64),
                                rl.level_values, rl.level_labels, rl.weights)
    index, _ = rl.layout.rule_index()

    def lines():
        base, slope = cost_lines(rl, costs, [axis])
        M = aggregation_matrix(index, n_cells, rl.weights)
        return M @ base, M @ slope[0]

    t_agg, (A, B) = best_of(lines)
    grid = np.linspace(lo, hi, grid_points)

    def grid_argmin():
        return np.argmin(A[None, :, :] + grid[:, None, None] * B[None, :, :], axis=-1)

    t_grid, levels = best_of(grid_argmin)
    t_exact, sweep = best_of(lambda: sweep_one(rl, costs, axis, lo, hi, rules=[compared]))
    # the exact answer agrees with the grid wherever the grid is not on a breakpoint
    assert (sweep.envelope.level_at(grid) == levels).mean() > 0.999
    print(f"one ratio, {n_cells:,} rule cells x {rl.n_levels} levels:")
    print(f"  cells -> rule-cell cost lines (shared by both):      {1e3 * t_agg:8.2f} ms")
    print(f"  {grid_points}-point vectorized grid argmin (reference):  {1e3 * t_grid:8.2f} ms")
    print(f"  exact sweep (breakpoints, shares, regret, lenient):  {1e3 * t_exact:8.2f} ms "
          f"({int(sweep.envelope.count.sum()):,} breakpoints; includes the aggregation)")
    print(f"  ratio exact / grid argmin: {t_exact / t_grid:.2f} (target <= 0.5)")
    print(f"  ratio exact / (aggregation + grid argmin): {t_exact / (t_agg + t_grid):.2f}")


def two_ratios(n_cells: int, points: int = 200, chunk: int = 100) -> None:
    rl, costs = synthetic(n_cells, seed=1)
    axes = [ratio_axis(rl, costs, "outcome 1"), ratio_axis(rl, costs, "outcome 2")]
    box = [(0.0, 10.0), (0.0, 20.0)]
    index, _ = rl.layout.rule_index()
    base, slope = cost_lines(rl, costs, axes)
    M = aggregation_matrix(index, n_cells, rl.weights)
    A, B1, B2 = M @ base, M @ slope[0], M @ slope[1]
    x = np.linspace(*box[0], points)
    y = np.linspace(*box[1], points)
    X, Y = (v.ravel() for v in np.meshgrid(x, y))
    w = np.bincount(index, weights=rl.weights, minlength=n_cells)

    def grid_argmin():
        share = np.empty(len(X))
        for s in range(0, len(X), chunk):
            total = A[None] + X[s:s + chunk, None, None] * B1[None] + Y[s:s + chunk, None, None] * B2[None]
            share[s:s + chunk] = (np.argmin(total, axis=-1) == 0) @ w / w.sum()
        return share

    t_grid, ref = best_of(grid_argmin, repeat=3)

    def exact():
        m = lenient_map(rl, costs, axes, box)
        return m.grid(points)

    t_exact, share = best_of(exact, repeat=3)
    agree = np.abs(share.ravel() - ref) < 1e-12
    assert agree.mean() > 0.999
    print(f"two ratios, {n_cells:,} rule cells, {points} x {points} display grid:")
    print(f"  vectorized grid argmin over the same points (reference): {1e3 * t_grid:8.1f} ms")
    print(f"  exact lenient share on the grid (incl. half-planes):     {1e3 * t_exact:8.1f} ms")
    print(f"  ratio exact / grid argmin: {t_exact / t_grid:.3f} (target <= 2)")


def constrained(n_rule_cells: int, points: int = 50, fresh_points: int = 5) -> None:
    from dataclasses import replace

    from bench_constrained import SPECS, cumulative_model, raw_model, raw_warm_basis
    from bench_constrained import synthetic as lp_instance

    from policy.decision.constrained import ConstrainedProblem, LPSettings
    from policy.assessment.sweep.constrained import constrained_sweep, ratio_grid

    rl, costs = lp_instance(n_rule_cells)
    axis = ratio_axis(rl, costs, "harm")
    ratios = ratio_grid(0.5 * axis.scenario_ratio, 1.5 * axis.scenario_ratio, points, "linear")
    unconstrained = sweep_one(rl, costs, axis, float(ratios[0]), float(ratios[-1]))
    timings = {}
    for label, lenient in (("tool, most lenient of tied optima", True), ("tool, any optimum", False)):
        settings = replace(LPSettings(), lenient_ties=lenient)
        timings[label], sweep = best_of(lambda: constrained_sweep(rl, costs, axis, ratios, SPECS, settings=settings,
                                                                  removal=False, unconstrained=unconstrained), repeat=3)
    base = ConstrainedProblem(rl, costs, SPECS)
    base.solve_lp()

    def raw():
        # the best raw chain built by hand: the first solve (timed, loading included) from the
        # unconstrained optimum's basis, then warm dual simplex re-solves through the same 50 cost changes
        cols = np.arange(base._data.n_cols, dtype=np.int32)
        outcome = costs.outcome.copy()
        spent, values = 0.0, []
        h = None
        for r in ratios:
            outcome[0] = r * axis.reference_cost
            c = base._data.objective(outcome, base.decision_scale)
            t = time.perf_counter()
            if h is None:
                base.set_costs(outcome_costs=outcome)
                h, c0, lo0, _ = raw_model(base, "simplex")
                h.setBasis(raw_warm_basis(base, c0, len(lo0)))
            else:
                h.changeColsCost(len(cols), cols, c)
            h.run()
            sol = h.getSolution()  # the rule and the duals, as the tool returns them
            np.asarray(sol.col_value), np.asarray(sol.row_dual)
            values.append(h.getInfo().objective_function_value)
            spent += time.perf_counter() - t
        return spent, np.array(values)

    def raw_cumulative():
        # the same chain in cumulative variables (benchmarks/bench_constrained.py): the first solve
        # cold without presolve, change of variables and loading timed, then warm re-solves
        spent, values = 0.0, []
        h = T = None
        outcome = costs.outcome.copy()
        for r in ratios:
            outcome[0] = r * axis.reference_cost
            c = base._data.objective(outcome, base.decision_scale)
            t = time.perf_counter()
            if h is None:
                base.set_costs(outcome_costs=outcome)
                h, T, e, constant = cumulative_model(base)
                cols = np.arange(T.shape[1], dtype=np.int32)
                e0 = e
            else:
                h.changeColsCost(len(cols), cols, T.T @ c)
            h.run()
            sol = h.getSolution()  # the rule and the duals, as the tool returns them
            np.asarray(sol.col_value), np.asarray(sol.row_dual)
            values.append(h.getInfo().objective_function_value + float(c @ e0))
            spent += time.perf_counter() - t
        return spent, np.array(values)

    t_delta, t_cum = [], []
    for _ in range(3):  # interleaved
        t_delta.append(raw()[0])
        t_cum.append(raw_cumulative()[0])
    t_raw = min(min(t_delta), min(t_cum))
    _, raw_values = raw()
    assert np.allclose(raw_values, sweep.cost[0], rtol=1e-7)
    assert np.allclose(raw_cumulative()[1], sweep.cost[0], rtol=1e-7)

    def fresh():
        for r in ratios[:fresh_points]:
            ConstrainedProblem(rl, costs.with_outcome_cost(0, r * axis.reference_cost), SPECS).solve_lp()

    t_fresh, _ = best_of(fresh, repeat=2)
    t_fresh *= points / fresh_points
    print(f"constrained sweep, {n_rule_cells:,} rule cells, {points} ratios (duals only):")
    print(f"  raw HiGHS chains, first solve included: from the unconstrained basis {min(t_delta):.3f} s, in cumulative "
          f"variables {min(t_cum):.3f} s; the faster is the reference: {t_raw:8.3f} s (load average {os.getloadavg()[0]:.1f})")
    for label, t in timings.items():
        print(f"  {label + ':':48s}{t:8.3f} s   ratio {t / t_raw:.2f} (target <= 1.3)")
    print(f"  building the problem afresh at each ratio (from {fresh_points} ratios): {t_fresh:8.3f} s   "
          f"ratio {t_fresh / t_raw:.1f}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cells", type=int, default=10_000)
    ap.add_argument("--map-cells", type=int, default=2_000)
    ap.add_argument("--points", type=int, default=200)
    ap.add_argument("--lp-cells", type=int, default=2_000)
    ap.add_argument("--only-constrained", action="store_true", help="run only the constrained sweep")
    args = ap.parse_args()
    if not args.only_constrained:
        one_ratio(args.cells)
        two_ratios(args.map_cells, args.points)
    constrained(args.lp_cells)


if __name__ == "__main__":
    main()
