"""Bootstrap of a constrained rule on two local Dask workers against the same bootstrap in-process.

Prints figures measured in one run (the machines are shared and noisy; absolute times vary):

- 200 bootstrap replicates of the constrained demo scenario (scenarios/demo_constrained.toml:
  20,000 simulated cases, group-blind rule, principal fairness and a capacity cap), each
  re-estimating the risk levels, re-solving the unconstrained and the constrained optimum (a
  linear program per replicate) and scoring every rule: the statistic ``compare`` bootstraps.
  In this process, and on a local Dask cluster of 2 worker processes (one thread each), runs
  interleaved; the target is a ratio of at least 1.7 on a 2-core machine;
- the same on the standard library's process pool (``--workers 2``; reported);
- the time to start the local cluster and to bring its workers up to speed (first run: imports
  and the first linear program of each worker), reported apart: a cluster is started once for a
  command (a batch of scenarios, a sweep with bands) or is already running;
- that the replicates are the same bits everywhere.

Usage: python benchmarks/bench_distributed.py [--replicates B] [--repeat R]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from policy import load_scenario  # noqa: E402
from policy.assessment.compare import ComparisonStatistic, ConstrainedSolver  # noqa: E402
from policy.decision.constraints import scenario_specs  # noqa: E402
from policy.decision.costs import costs_from_scenario  # noqa: E402
from policy.running.distributed import run_on  # noqa: E402
from policy.running.pipeline import estimate  # noqa: E402
from policy.estimation.strata import RiskLevelEstimator  # noqa: E402
from policy.assessment.uncertainty import InProcess, LocalProcesses, bootstrap  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--replicates", type=int, default=200)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    scenario = load_scenario(ROOT / "scenarios" / "demo_constrained.toml")
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl)
    est = RiskLevelEstimator.from_scenario(scenario)
    statistic = ComparisonStatistic(est, est.design(cells.layout, len(cells.levels)), costs, cells.layout, [],
                                    cells.has_arm, len(cells.arms),
                                    [ConstrainedSolver(scenario_specs(scenario), scenario.sections.get("linear_program"))], rl)

    def run(runner):
        t = time.perf_counter()
        result = bootstrap(cells, statistic, args.replicates, seed=scenario.seed, runner=runner, outcome_model=rl.p)
        return time.perf_counter() - t, result

    load = os.getloadavg()
    t0 = time.perf_counter()
    with run_on("local:2") as dask_runner:
        t_start = time.perf_counter() - t0
        t_first, _ = run(dask_runner)
        here, there, pool = [], [], []
        reference = None
        for _ in range(args.repeat):
            t, a = run(InProcess())
            here.append(t)
            t, b = run(dask_runner)
            there.append(t)
            reference = reference or a
            same = all(np.array_equal(a.replicates[k], b.replicates[k], equal_nan=True) for k in a.replicates)
            assert same, "replicates differ between in-process and the cluster"
    for _ in range(max(1, args.repeat // 2)):
        t, c = run(LocalProcesses(2))  # its pool is started inside each run
        pool.append(t)
    assert all(np.array_equal(reference.replicates[k], c.replicates[k], equal_nan=True) for k in reference.replicates)
    med = np.median
    print(f"constrained demo: {cells.n_cases:,} cases, {cells.n_cells} cells, {args.replicates} replicates "
          f"(one LP per replicate), load average before the run {load[0]:.2f} / {load[1]:.2f} (1 / 5 min), "
          f"{os.cpu_count()} cores")
    print(f"in this process:                {med(here):6.2f} s (median of {len(here)}; runs {', '.join(f'{x:.2f}' for x in here)})")
    print(f"local Dask cluster, 2 workers:  {med(there):6.2f} s (median of {len(there)}; runs {', '.join(f'{x:.2f}' for x in there)})"
          f"   ratio {med(here) / med(there):4.2f}  (target >= 1.7)")
    print(f"process pool, 2 workers:        {med(pool):6.2f} s (pool started in each run)   ratio {med(here) / med(pool):4.2f}  (reported)")
    print(f"cluster start {t_start:.2f} s; first run on fresh workers {t_first:.2f} s (imports, first LP); "
          f"start + first run against in-process: ratio {med(here) / (t_start + t_first):4.2f}")
    print("replicates identical in the three places: yes")


if __name__ == "__main__":
    main()
