"""Speed of the constrained-rule LP against HiGHS called directly on the same LP, in one run.

The LP has the shape of issue 3's targets: 3 decision levels, one outcome kind, principal
fairness over 2 groups x 4 risk levels x 2 thresholds, one capacity constraint; each rule cell
holds one cell of each group (a group-blind rule). Printed: seconds and the ratio tool / raw for

- a first solve: the tool's build + solve, and its solve of a built problem, against the best
  cold raw HiGHS method (ipm or simplex) and against the best raw configuration built by hand
  (HiGHS's dual simplex from the unconstrained optimum's basis, or the LP in cumulative
  variables y_t(g) = P(D >= t | g) solved without presolve);
- a re-solve after a change of cost weights, of a tolerance and of a cap: the tool against raw
  HiGHS warm-started (the same model object, changed and re-run), in decision probabilities and
  in cumulative variables, the ratio taken to the faster of the two;
- the straightforward cvxpy route (Parameters, solved through cvxpy's HiGHS interface), for reference.

With ``--solvers`` it compares instead the LP solvers cvxpy offers here (and HiGHS called
directly) on the demo's constrained scenario and on the synthetic LP: seconds to a first
solve, the optimum's relative difference from HiGHS, and how many rule cells come out split.

Usage: python benchmarks/bench_constrained.py [--cells 2000 10000] [--repeat 5] [--solvers]
"""

from __future__ import annotations

import argparse
import os
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


def raw_warm_basis(problem: ConstrainedProblem, c: np.ndarray, n_rows: int):
    """The unconstrained optimum's basis, built by hand: each rule cell's cheapest level basic,
    the other levels at 0, the sum-to-one rows at their bound, the constraint rows' slacks basic."""
    import highspy

    G, L = problem._data.n_groups, problem._data.n_levels
    status = highspy.HighsBasisStatus
    best = np.argmin(c.reshape(G, L), axis=1)
    cols = np.full(G * L, status.kLower, dtype=object)
    cols[np.arange(G) * L + best] = status.kBasic
    basis = highspy.HighsBasis()
    basis.col_status = cols.tolist()
    basis.row_status = [status.kLower] * G + [status.kBasic] * (n_rows - G)
    return basis


def cumulative_model(problem: ConstrainedProblem):
    """The same LP in cumulative variables y_t(g) = P(D >= t | g), t = 1..L-1, loaded in HiGHS.

    delta(0 | g) = 1 - y_1(g), delta(t | g) = y_t(g) - y_{t+1}(g), delta(L-1 | g) = y_{L-1}(g): the
    sum-to-one rows disappear (one fewer column per rule cell), delta >= 0 becomes 0 <= y <= 1 and
    y_1 >= y_2 >= ... (L-2 rows per rule cell). With every column boxed, HiGHS's slack basis with
    each column at the bound its cost prefers is dual feasible, so a cold dual simplex starts
    near the unconstrained optimum. Presolve off (it only costs time on this LP).
    Returns the loaded model, the map T (x = T y + e), e and the objective's constant.
    """
    import scipy.sparse as sp

    data = problem._data
    G, L = data.n_groups, data.n_levels
    c = data.objective(problem.outcome_costs, problem.decision_scale)
    lo, hi = data.row_bounds(problem._internal_bounds(), problem.active)
    # T: column (g, t) of y, t = 1..L-1, enters delta(t - 1 | g) with -1 and delta(t | g) with +1
    g, t = np.repeat(np.arange(G), L - 1), np.tile(np.arange(1, L), G)
    ycol = np.arange(G * (L - 1))
    T = sp.csr_matrix((np.concatenate([-np.ones(len(ycol)), np.ones(len(ycol))]),
                       (np.concatenate([g * L + t - 1, g * L + t]), np.concatenate([ycol, ycol]))), shape=(G * L, G * (L - 1)))
    e = np.zeros(G * L)
    e[np.arange(G) * L] = 1.0
    coupling = data.coupling
    shift = coupling @ e
    mono_rows = G * (L - 2)
    gm, tm = np.repeat(np.arange(G), L - 2), np.tile(np.arange(L - 2), G)
    mono = sp.csr_matrix((np.concatenate([np.ones(mono_rows), -np.ones(mono_rows)]),
                          (np.concatenate([np.arange(mono_rows)] * 2), np.concatenate([gm * (L - 1) + tm, gm * (L - 1) + tm + 1]))),
                         shape=(mono_rows, G * (L - 1)))
    A = sp.vstack([mono, coupling @ T], format="csr")
    row_lo = np.concatenate([np.zeros(mono_rows), lo[G:] - shift])
    row_hi = np.concatenate([np.full(mono_rows, np.inf), hi[G:] - shift])
    h = new_highs()
    load_lp(h, T.T @ c, A, row_lo, row_hi, np.zeros(A.shape[1]), np.ones(A.shape[1]))
    h.setOptionValue("solver", "simplex")
    h.setOptionValue("presolve", "off")
    return h, T, e, float(c @ e)


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
    print(f"machine: {platform.processor() or platform.machine()}, python {platform.python_version()}, "
          f"load average {os.getloadavg()[0]:.1f}")
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

        # -- first solve (interleaved, so the tool and the raw solver see the same machine load) -----
        # raw references on the tool's own LP arrays, timed from loading them into HiGHS to the
        # solution: HiGHS cold (ipm, simplex), HiGHS's dual simplex from the unconstrained optimum's
        # basis built by hand, and the cumulative formulation solved cold without presolve (its
        # change of variables timed too)
        cold: dict[str, list[float]] = {"ipm": [], "simplex": [], "warm basis": [], "cumulative": [],
                                        "tool": [], "tool_solve": []}
        iterations: dict[str, int] = {}
        for _ in range(args.repeat):
            for method in ("ipm", "simplex", "warm basis"):
                start = time.perf_counter()
                h, c, lo, hi = raw_model(problem, "simplex" if method == "warm basis" else method)
                if method == "warm basis":
                    h.setBasis(raw_warm_basis(problem, c, len(lo)))
                h.run()
                np.asarray(h.getSolution().col_value)
                cold[method].append(time.perf_counter() - start)
                assert h.getModelStatus().name == "kOptimal"
                iterations[method] = int(h.getInfo().simplex_iteration_count + h.getInfo().ipm_iteration_count)
                if method == "warm basis":
                    x_warm = np.asarray(h.getSolution().col_value)
            start = time.perf_counter()
            h, T, e, constant = cumulative_model(problem)
            h.run()
            x_cum = T @ np.asarray(h.getSolution().col_value) + e
            cold["cumulative"].append(time.perf_counter() - start)
            assert h.getModelStatus().name == "kOptimal"
            iterations["cumulative"] = int(h.getInfo().simplex_iteration_count)
            start = time.perf_counter()
            ConstrainedProblem(rl, costs, SPECS).solve_lp()
            cold["tool"].append(time.perf_counter() - start)
            p = ConstrainedProblem(rl, costs, SPECS)
            start = time.perf_counter()
            first = p.solve_lp()
            cold["tool_solve"].append(time.perf_counter() - start)
        c = problem._data.objective(problem.outcome_costs, problem.decision_scale)
        print(f"  optimum: tool {first.cost_per_case:.12g}, raw warm {c @ x_warm:.12g}, cumulative {c @ x_cum:.12g} "
              f"(rel. diff {abs(c @ x_cum - first.cost_per_case) / abs(first.cost_per_case):.1e}); tool pivots {first.iterations}")
        best = {m: min(cold[m]) for m in cold}
        cold_best = min(best["ipm"], best["simplex"])
        hand_best = min(best["warm basis"], best["cumulative"])
        print("  raw HiGHS first solve: " + ", ".join(f"{m} {best[m]:.3f} s ({iterations[m]} it.)"
                                                     for m in ("ipm", "simplex", "warm basis", "cumulative")))
        tool_cold, solve_only = best["tool"], best["tool_solve"]
        print(f"  tool first solve (build + solve): {tool_cold:.3f} s   ratio to best cold raw {tool_cold / cold_best:.2f}")
        print(f"  tool first solve (solve only, built problem): {solve_only:.3f} s   ratio to best cold raw "
              f"{solve_only / cold_best:.2f} (target <= 0.2), to best hand-built raw {solve_only / hand_best:.2f} (target <= 1.5)")

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
            # the raw model starts from the same kind of optimum as the tool (its first solve, from
            # the unconstrained optimum's basis): a degenerate LP has many optimal bases, and the
            # pivots a re-solve needs depend on which one it starts from
            h, c0, lo0, _ = raw_model(p, "simplex")
            h.setBasis(raw_warm_basis(p, c0, len(lo0)))
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

            # the same re-solves in cumulative variables, warm from that model's own first optimum
            hc, T, e, _ = cumulative_model(p)
            hc.run()
            G, L = p._data.n_groups, p._data.n_levels
            n_mono = G * (L - 2)
            shift = p._data.coupling @ e
            ccols = np.arange(T.shape[1], dtype=np.int32)
            crows = np.arange(n_mono, n_mono + len(shift), dtype=np.int32)

            def raw_apply_cumulative(p=p, h=hc, what=what):
                c = p._data.objective(p.outcome_costs, p.decision_scale)
                lo, hi = p._data.row_bounds(p._internal_bounds(), p.active)
                start = time.perf_counter()
                if what == "cost weights":
                    h.changeColsCost(len(ccols), ccols, T.T @ c)
                else:
                    h.changeRowsBounds(len(crows), crows, lo[G:] - shift, hi[G:] - shift)
                h.run()
                sol = h.getSolution()
                np.asarray(sol.col_value), np.asarray(sol.row_dual)
                assert h.getModelStatus().name == "kOptimal"
                return time.perf_counter() - start

            tool_times, raw_times, cum_times, lenient, tool_iterations, raw_iterations = [], [], [], 0, [], []
            for i in range(args.repeat * 4):
                change(p, i)
                start = time.perf_counter()
                sol = p.solve_lp()
                tool_times.append(time.perf_counter() - start)
                tool_iterations.append(sol.iterations)
                lenient += sol.lenient_pass
                raw_times.append(raw_apply())
                cum_times.append(raw_apply_cumulative())
                revert(p)
                p.solve_lp()
                raw_apply()
                raw_apply_cumulative()
                raw_iterations.pop()
            t_tool, t_raw, t_cum = (float(np.median(t)) for t in (tool_times, raw_times, cum_times))
            print(f"  re-solve after a change of {what}: tool {1000 * t_tool:.1f} ms, raw warm {1000 * t_raw:.1f} ms, "
                  f"raw warm cumulative {1000 * t_cum:.1f} ms   ratio to the best raw {t_tool / min(t_raw, t_cum):.2f} "
                  f"(target <= 1.2)   (median pivots: tool {np.median(tool_iterations):.0f}, raw {np.median(raw_iterations):.0f})"
                  + (f"  ({lenient} lenient passes)" if lenient else ""))

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
