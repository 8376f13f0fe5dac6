"""Worker processes for the bootstrap: one worker, two, the default, and a pool reused by two maps.

Prints figures measured in one run (the machine is shared and noisy; the load average is printed):

- B bootstrap replicates of the demo county with N cases (the comparison's whole statistic),
  in this process (one worker), on 2 fresh worker processes (their start included), and with
  the default runner (:class:`policy.assessment.workers.Adaptive`: this process, or workers
  when the measured work pays for them and cores are idle). Targets: 2 workers at least 1.5x
  faster than 1 on an idle machine; the default never slower than 1 worker on a busy one.
- Two bootstraps in one command on one pool (started once) against two pools (started twice).

Usage: python benchmarks/bench_workers.py [--cases N] [--replicates B]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from policy import load_scenario  # noqa: E402
from policy.assessment.uncertainty import InProcess, bootstrap  # noqa: E402
from policy.assessment.workers import Adaptive, LocalProcesses  # noqa: E402
from policy.demo.quarrow import demo_scenario_path, simulate_cases  # noqa: E402
from policy.inputs.cells import CellTable  # noqa: E402
from bench_bootstrap import statistic_for  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", type=int, default=1_000_000)
    ap.add_argument("--replicates", type=int, default=1000)
    args = ap.parse_args()
    scenario = load_scenario(demo_scenario_path())
    frame, _ = simulate_cases(args.cases, seed=1)
    cells = CellTable.from_cases(frame, scenario)
    stat, rl = statistic_for(scenario, cells)
    load = os.getloadavg()[0]

    def run(runner):
        t = time.perf_counter()
        result = bootstrap(cells, stat, args.replicates, seed=7, runner=runner, outcome_model=rl.p)
        return time.perf_counter() - t, result

    one, r1 = run(InProcess())
    with LocalProcesses(2) as pool:
        two, r2 = run(pool)
    with Adaptive() as default:
        auto, r3 = run(default)
        decided = "; ".join(default.decisions)
    assert all((r1.replicates[k] == r.replicates[k]).all() for r in (r2, r3) for k in r1.replicates)  # same bits
    print(f"{args.cases:,} cases, {args.replicates:,} replicates; load average {load:.2f} before, "
          f"{os.getloadavg()[0]:.2f} after, on {os.cpu_count()} cores")
    print(f"  1 worker (this process): {one:7.2f} s")
    print(f"  2 worker processes:      {two:7.2f} s   speed-up {one / two:4.2f} (target >= 1.5 on an idle machine)")
    print(f"  default:                 {auto:7.2f} s   ratio to 1 worker {auto / one:4.2f} (target <= 1): {decided}")

    half = max(args.replicates // 2, 1)

    def twice(make):
        t = time.perf_counter()
        runner = make()
        for _ in range(2):
            bootstrap(cells, stat, half, seed=7, runner=runner, outcome_model=rl.p)
            if isinstance(runner, LocalProcesses) and make is not shared_pool:
                runner.close()
        runner.close()
        return time.perf_counter() - t

    pool = LocalProcesses(2)

    def shared_pool():
        return pool

    print(f"  two bootstraps of {half:,}: one pool {twice(shared_pool):7.2f} s, a pool each {twice(lambda: LocalProcesses(2)):7.2f} s")


if __name__ == "__main__":
    main()
