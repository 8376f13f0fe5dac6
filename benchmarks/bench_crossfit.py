"""Cross-fitting with K folds against a single fit on the full data.

A single fit: estimate the risk levels on the cell table, solve the unconstrained rule and score
every compared rule (what ``compare`` does once before its bootstrap). Cross-fitting: split the
counts into K folds, estimate the K training parts and K held-out folds in one batched call,
choose the rule on each training part and score every rule on each held-out fold
(:func:`policy.assessment.crossfit.cross_fit`). Target: K = 5 costs at most 6x a single fit.

Measured on the demo county (20,000 cases) and on a larger simulated county (``--cases``), in
this process, best of ``--repeat`` runs.

Usage: python benchmarks/bench_crossfit.py [--cases N] [--folds K] [--repeat N]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from policy import load_scenario  # noqa: E402
from policy.assessment.crossfit import cross_fit  # noqa: E402
from policy.assessment.uncertainty import one_blas_thread  # noqa: E402
from policy.decision.candidates import aid_rule, candidate_rules, observed_rules  # noqa: E402
from policy.decision.costs import costs_from_scenario  # noqa: E402
from policy.decision.evaluate import evaluate  # noqa: E402
from policy.decision.solve import optimal_rule  # noqa: E402
from policy.demo.quarrow import demo_scenario_path, simulate_cases  # noqa: E402
from policy.estimation.strata import RiskLevelEstimator  # noqa: E402
from policy.inputs.cells import CellTable  # noqa: E402


def best_of(fn, repeat):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def measure(scenario, cells, folds, repeat):
    est = RiskLevelEstimator.from_scenario(scenario)

    def single():
        rl = RiskLevelEstimator.from_scenario(scenario).fit(cells, scenario.level_labels, scenario.outcome_labels).risk_levels_
        costs = costs_from_scenario(scenario, rl)
        optimum = optimal_rule(rl, costs)
        rules = [optimum, aid_rule(cells, scenario.aid.name, scenario.level_labels)] + \
            candidate_rules(scenario, rl.layout, rl.weights) + observed_rules(cells, scenario.aid.name, scenario.level_labels)
        return rl, costs, rules, [evaluate(r, rl, costs).cost_per_case for r in rules]

    with one_blas_thread():
        t_single, (rl, costs, rules, _) = best_of(single, repeat)
        t_cf, cf = best_of(lambda: cross_fit(cells, rl, costs, est, rules, folds=folds, seed=1), repeat)
    return t_single, t_cf


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", type=int, default=200_000)
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    scenario = load_scenario(demo_scenario_path())
    for n in (20_000, args.cases):
        frame, _ = simulate_cases(n, seed=scenario.seed)
        cells = CellTable.from_cases(frame, scenario)
        t_single, t_cf = measure(scenario, cells, args.folds, args.repeat)
        print(f"{n:,} cases, {cells.n_cells:,} cells: single fit {1e3 * t_single:.0f} ms, "
              f"cross-fit K={args.folds} {1e3 * t_cf:.0f} ms, ratio {t_cf / t_single:.2f} (target <= 6)")


if __name__ == "__main__":
    main()
