"""Speed of the constrained-rule LP against HiGHS called directly on the same LP, in one run.

The LP has the shape of issue 3's targets: 3 decision levels, one outcome kind, principal
fairness over 2 groups x 4 risk levels x 2 thresholds, one capacity constraint; each rule cell
holds one cell of each group (a group-blind rule). Printed: seconds and the ratio tool / raw for

- a first solve (cold): the tool's build + solve against the best raw HiGHS method (ipm or simplex);
- a re-solve after a change of cost weights, of a tolerance and of a cap: the tool against raw
  HiGHS warm-started (the same model object, changed and re-run);
- the straightforward cvxpy route (Parameters, solved through cvxpy's HiGHS interface), for reference.

With ``--solvers`` it compares instead the LP solvers cvxpy offers here (and HiGHS called
directly) on the demo's constrained scenario and on the synthetic LP: seconds to a first
solve, the optimum's relative difference from HiGHS, and how many rule cells come out split.

Usage: python benchmarks/bench_constrained.py [--cells 2000 10000] [--repeat 5] [--solvers]
"""

from __future__ import annotations

import argparse
import platform
import time

import numpy as np
import pandas as pd

from policy.inputs.cells import CellLayout
from policy.decision.constrained import ConstrainedProblem, load_lp, new_highs
from policy.decision.costs import Costs
from policy.estimation.strata import RiskLevels

LEVELS = ("release", "supervision", "detention")


def synthetic(n_rule_cells: int, seed: int = 0) -> tuple[RiskLevels, Costs]:
    """Invented risk levels: n_rule_cells rule cells (score x bucket), each with one cell per group.

    Group b is riskier and more common at high scores, so a group-blind rule's decisions differ
    between the groups within risk levels; with these costs both constraints of :data:`SPECS`
    bind (the price is positive and a few rule cells are split).
    """
    rng = np.random.default_rng(seed)
    n_scores = 10
    n_buckets = n_rule_cells // n_scores
    score, bucket, group = np.meshgrid(np.arange(n_scores), np.arange(n_buckets), np.arange(2), indexing="ij")
    score, bucket, group = score.ravel(), bucket.ravel(), group.ravel()
    n = len(score)
    base = 1 / (1 + np.exp(-(-2.6 + 0.3 * score + 0.6 * group + rng.normal(0, 0.6, n))))
    kept = np.array([1.0, 0.75, 0.3])
    p = (base[:, None] * kept[None, :])[:, None, :]  # (n, 1, 3), non-increasing in the level
    frame = pd.DataFrame({
        "score": pd.Categorical.from_codes(score, categories=list(range(1, n_scores + 1)), ordered=True),
        "bucket": pd.Categorical.from_codes(bucket, categories=[f"b{i}" for i in range(n_buckets)], ordered=True),
        "group": pd.Categorical.from_codes(group, categories=["a", "b"], ordered=True),
    })
    layout = CellLayout(frame, ("group",), ("score", "bucket"), "score")
    w = rng.integers(5, 60, n).astype(float) * np.where(group == 1, 1 + 0.15 * score, 1.0)
    rl = RiskLevels(layout, LEVELS, LEVELS, ("harm",), ("harm",), w, p, np.zeros_like(p, dtype=bool), source="synthetic")
    decision = np.tile([0.0, 400.0, 3000.0], (n, 1))
    return rl, Costs(decision, np.array([12000.0]), "units", LEVELS, ("harm",))


SPECS = [
    {"kind": "principal_fairness", "outcome": "harm", "tolerance": 0.02},
    {"kind": "capacity", "at_least": "detention", "max_share": 0.10},
]


def raw_model(problem: ConstrainedProblem, method: str):
    """HiGHS on the tool's own LP arrays, loaded and solved directly."""
    data = problem._data
    c = data.objective(problem.outcome_costs, problem.decision_scale)
    lo, hi = data.row_bounds(problem._internal_bounds(), problem.active)
    h = new_highs()
    load_lp(h, c, data.A, lo, hi, np.zeros(data.n_cols), np.ones(data.n_cols))
    h.setOptionValue("solver", method)
    return h, c, lo, hi


def compare_solvers(cells: list[int], repeat: int) -> None:
    """First-solve time, optimum and split rule cells of each LP solver on the same LPs."""
    import cvxpy

    from policy.decision.constrained import LPSettings, LPSolution
    from policy.running.pipeline import analyze
    from policy.inputs.scenario import load_scenario
    from policy.decision.constraints import scenario_specs

    sc = load_scenario("scenarios/demo_constrained.toml")
    demo = analyze(sc, scenario_constraints=False)
    cases = [("demo_constrained", demo.risk_levels, demo.costs, scenario_specs(sc), None)]
    cases += [(f"synthetic {n:,}", *synthetic(n), SPECS, None) for n in cells]
    candidates = [("HIGHS direct, auto", LPSettings()), ("HIGHS direct, ipm", LPSettings(method="ipm")),
                  ("HIGHS direct, simplex", LPSettings(method="simplex")),
                  ("HIGHS via cvxpy", LPSettings(direct=False))]
    candidates += [(f"{name} via cvxpy", LPSettings(solver=name)) for name in ("CLARABEL", "SCIPY", "SCS", "OSQP")
                   if name in cvxpy.installed_solvers()]
    for label, rl, costs, specs, _ in cases:
        reference = None
        print(f"\n{label}:")
        for name, settings in candidates:
            times, result = [], None
            for _ in range(repeat if "synthetic" not in label or "SCS" not in name else 1):
                problem = ConstrainedProblem(rl, costs, specs, settings=settings)
                start = time.perf_counter()
                try:
                    result = problem.solve_lp()
                except Exception as exc:  # a solver that fails is reported, not hidden
                    result = f"{type(exc).__name__}: {str(exc).splitlines()[0][:90]}"
                times.append(time.perf_counter() - start)
            if isinstance(result, LPSolution):
                reference = reference if reference is not None else result.cost_per_case
                split = len(problem._present(result.delta, "rule").split_cells)
                print(f"  {name:24s} {min(times):8.3f} s   optimum rel. diff {abs(result.cost_per_case - reference) / abs(reference):.1e}"
                      f"   split rule cells {split}")
            else:
                print(f"  {name:24s} {min(times):8.3f} s   {result}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cells", type=int, nargs="+", default=[2000, 10000])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--solvers", action="store_true", help="compare the LP solvers instead")
    args = ap.parse_args()
    print(f"machine: {platform.processor() or platform.machine()}, python {platform.python_version()}")
    if args.solvers:
        compare_solvers(args.cells, args.repeat)
        return
    import cvxpy

    for n in args.cells:
        rl, costs = synthetic(n)
        problem = ConstrainedProblem(rl, costs, SPECS)
        check = problem.solve()
        print(f"\n{n:,} rule cells ({rl.n_cells:,} cells), {problem.n_rows:,} rows, {problem._data.A.nnz:,} nonzeros; "
              f"binding: {', '.join(check.to_frame().loc[check.to_frame()['binding'], 'constraint']) or 'none'}; "
              f"price {check.price_per_1000:,.0f} per 1,000 cases; {len(check.rule.split_cells)} split rule cells")

        # -- cold (interleaved, so the tool and the raw solver see the same machine load) -----------
        cold: dict[str, list[float]] = {"ipm": [], "simplex": [], "tool": [], "tool_solve": []}
        for _ in range(args.repeat):
            for method in ("ipm", "simplex"):
                h, *_ = raw_model(problem, method)  # the LP arrays are ready-made: only loading and solving count
                start = time.perf_counter()
                h.run()
                cold[method].append(time.perf_counter() - start)
                assert h.getModelStatus().name == "kOptimal"
            start = time.perf_counter()
            ConstrainedProblem(rl, costs, SPECS).solve_lp()
            cold["tool"].append(time.perf_counter() - start)
            p = ConstrainedProblem(rl, costs, SPECS)
            start = time.perf_counter()
            p.solve_lp()
            cold["tool_solve"].append(time.perf_counter() - start)
        raw = {m: min(cold[m]) for m in ("ipm", "simplex")}
        best_method = min(raw, key=raw.get)
        tool_cold, solve_only = min(cold["tool"]), min(cold["tool_solve"])
        print(f"  raw HiGHS cold: ipm {raw['ipm']:.3f} s, simplex {raw['simplex']:.3f} s (best: {best_method})")
        print(f"  tool first solve (build + solve): {tool_cold:.3f} s   ratio {tool_cold / raw[best_method]:.2f}")
        print(f"  tool first solve (solve only, built problem): {solve_only:.3f} s   ratio {solve_only / raw[best_method]:.2f}")

        # -- warm ------------------------------------------------------------------------------
        # Each timed re-solve starts from the base problem's optimum: change, solve (timed),
        # change back, solve (not timed). The raw model goes through the same steps.
        changes = {
            "cost weights": (lambda p, i: p.set_costs(outcome_costs=[12000.0 * (1 + 0.04 * (i % 5 + 1))]),
                             lambda p: p.set_costs(outcome_costs=[12000.0])),
            "tolerance": (lambda p, i: p.set_bounds({1: 0.02 + 0.002 * (i % 5 + 1)}), lambda p: p.set_bounds({1: 0.02})),
            "cap": (lambda p, i: p.set_bounds({2: 0.10 + 0.004 * (i % 5 + 1)}), lambda p: p.set_bounds({2: 0.10})),
        }
        for what, (change, revert) in changes.items():
            p = ConstrainedProblem(rl, costs, SPECS)
            p.solve_lp()
            # the raw model starts from the same kind of optimum as the tool (its first-solve
            # method): a degenerate LP has many optimal bases, and the pivots a re-solve needs
            # depend on which one it starts from
            h, *_ = raw_model(p, p.settings.first_method(p._data.n_cols))
            h.run()
            h.setOptionValue("solver", "simplex")
            cols = np.arange(p._data.n_cols, dtype=np.int32)
            rows = np.arange(p.n_rule_cells, p.n_rows, dtype=np.int32)

            def raw_apply(p=p, h=h, what=what):
                c = p._data.objective(p.outcome_costs, p.decision_scale)
                lo, hi = p._data.row_bounds(p._internal_bounds(), p.active)
                start = time.perf_counter()
                if what == "cost weights":
                    h.changeColsCost(len(cols), cols, c)
                else:
                    h.changeRowsBounds(len(rows), rows, lo[rows], hi[rows])
                h.run()
                sol = h.getSolution()
                np.asarray(sol.col_value), np.asarray(sol.row_dual)
                assert h.getModelStatus().name == "kOptimal"
                raw_iterations.append(h.getInfo().simplex_iteration_count)
                return time.perf_counter() - start

            tool_times, raw_times, lenient, tool_iterations, raw_iterations = [], [], 0, [], []
            for i in range(args.repeat * 4):
                change(p, i)
                start = time.perf_counter()
                sol = p.solve_lp()
                tool_times.append(time.perf_counter() - start)
                tool_iterations.append(sol.iterations)
                lenient += sol.lenient_pass
                raw_times.append(raw_apply())
                revert(p)
                p.solve_lp()
                raw_apply()
                raw_iterations.pop()
            t_tool, t_raw = float(np.median(tool_times)), float(np.median(raw_times))
            print(f"  re-solve after a change of {what}: tool {1000 * t_tool:.1f} ms, raw warm {1000 * t_raw:.1f} ms"
                  f"   ratio {t_tool / t_raw:.2f}   (median pivots: tool {np.median(tool_iterations):.0f}, "
                  f"raw {np.median(raw_iterations):.0f})" + (f"  ({lenient} lenient passes)" if lenient else ""))

        # -- the straightforward cvxpy route ------------------------------------------------------
        p = ConstrainedProblem(rl, costs, SPECS)
        start = time.perf_counter()
        prob = p.cvxpy_problem
        prob.solve(solver=cvxpy.HIGHS)
        cvx_first = time.perf_counter() - start
        times = []
        for i in range(args.repeat):
            p.set_costs(outcome_costs=[12000.0 * (1 + 0.05 * (i - 2))])
            prob = p.cvxpy_problem
            start = time.perf_counter()
            prob.solve(solver=cvxpy.HIGHS, warm_start=True)
            times.append(time.perf_counter() - start)
        print(f"  cvxpy + HiGHS through Parameters: first {cvx_first:.3f} s, re-solve after a cost change "
              f"{1000 * float(np.median(times)):.1f} ms")


if __name__ == "__main__":
    main()
