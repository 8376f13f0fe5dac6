"""Speed of the robust rule's first solve against the ordinary constrained solve, in one run.

The LP is the constrained-rule benchmark's (benchmarks/bench_constrained.py: 3 decision levels,
one outcome kind, principal fairness over 2 groups and a capacity cap, one cell per group in each
rule cell), at 2,000 and 10,000 rule cells. The set is the sensitivity model's at Gamma = 2 around
the estimates, with invented decision shares per cell. Printed, best of ``--repeat`` runs:

- ordinary: build the constrained problem and solve it cold (``ConstrainedProblem(...).solve_lp()``);
- robust: :func:`policy.decision.robust.robust_rule` with the same constraints (build, worst-case
  probabilities, cold solve, and its worst-case and point figures), and the ratio robust / ordinary
  (target <= 3);
- safe (for reference, no target): :func:`policy.decision.safe.safe_rule` against a rule on the
  same rule cells (everyone released) and against a per-cell baseline (invented court shares, so
  the rule may leave cases to the baseline's practice); its LP carries the dual's variables.

Usage: python benchmarks/bench_robust.py [--cells 2000 10000] [--repeat 3] [--no-safe]
"""

from __future__ import annotations

import argparse
import platform
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_constrained import SPECS, synthetic  # noqa: E402

from policy.decision.constrained import ConstrainedProblem  # noqa: E402
from policy.decision.robust import robust_rule  # noqa: E402
from policy.decision.rules import Rule  # noqa: E402
from policy.decision.safe import safe_rule  # noqa: E402
from policy.estimation.bounds import RiskBounds, sensitivity_interval  # noqa: E402


def best_of(fn, repeat: int) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - start)
    return best, out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--cells", type=int, nargs="+", default=[2000, 10000], help="rule cells")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--no-safe", action="store_true", help="leave out the safe rule")
    args = parser.parse_args()
    print(f"python {platform.python_version()}, {platform.machine()}; best of {args.repeat}")
    print(f"{'rule cells':>10} {'ordinary s':>11} {'robust s':>9} {'ratio':>6} {'safe s':>8} {'ratio':>6} "
          f"{'safe/cell s':>11} {'ratio':>6}")
    for n_rule in args.cells:
        rl, costs = synthetic(n_rule)
        rng = np.random.default_rng(1)
        shares = rng.dirichlet([4.0, 2.0, 1.0], size=rl.n_cells)
        lo, hi = sensitivity_interval(rl.p, shares, 2.0)
        bounds = RiskBounds("gamma=2", "Gamma = 2", lo, hi, 2.0, "sensitivity")
        t_ord, lp = best_of(lambda: ConstrainedProblem(rl, costs, SPECS).solve_lp(), args.repeat)
        t_rob, robust = best_of(lambda: robust_rule(rl, costs, bounds, SPECS), args.repeat)
        assert robust.worst_case_cost_per_case >= robust.point_cost_per_case - 1e-9
        line = f"{n_rule:>10,} {t_ord:>11.3f} {t_rob:>9.3f} {t_rob / t_ord:>6.2f}"
        if not args.no_safe:
            index, groups = rl.layout.rule_index()
            released = Rule("everyone released", "candidate", groups, index, np.eye(3)[np.zeros(len(groups), dtype=int)],
                            rl.level_values, rl.level_labels)
            courts = Rule.per_cell("courts", "observed", rl.layout, shares, rl.level_values, rl.level_labels)
            t_safe, safe = best_of(lambda: safe_rule(rl, costs, bounds, released, SPECS), 1)
            t_cell, safe_cell = best_of(lambda: safe_rule(rl, costs, bounds, courts, SPECS), 1)
            assert safe.certified and safe_cell.certified
            line += f" {t_safe:>8.3f} {t_safe / t_ord:>6.2f} {t_cell:>11.3f} {t_cell / t_ord:>6.2f}"
        print(line, flush=True)


if __name__ == "__main__":
    main()
