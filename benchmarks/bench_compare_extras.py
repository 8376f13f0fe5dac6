"""What paired differences and rule-cell stability add to ``compare``'s time.

Both reuse the replicates ``compare`` already draws: in each replicate the statistic scores the
chosen rule held fixed (instead of the re-solved one, the same work) and keeps the re-solved
rule's level per rule cell and its cost (the extra work); afterwards the paired differences,
their matrix and the stability table are read off the replicates. Measured in one run, on the
demo county (20,000 cases), in this process (one worker):

- ``compare`` end to end (the reference);
- the statistic on the same batches of replicates without and with the chosen rules (its extra
  time per replicate, scaled to the replicates of the run);
- ``differences_frame``, ``summary`` and ``stability_frame`` after the run;

- the liberal bootstrap world (:mod:`policy.estimation.world`), fitted once per run, and the
  statistic with the world's cost of each re-solved rule (the interval allowing for the chosen
  rule's choice, :mod:`policy.assessment.selection`);

and prints the extras as a share of ``compare``'s time (target: at most 10%); and, apart, the
cross-fitting that ``compare`` now also runs (5 folds), as a share of the same time.

Usage: python benchmarks/bench_compare_extras.py [--replicates B] [--repeat N]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from policy import compare, load_scenario  # noqa: E402
from policy.assessment.compare import ComparisonStatistic  # noqa: E402
from policy.assessment.crossfit import cross_fit  # noqa: E402
from policy.assessment.uncertainty import CHUNK, CountResampler, one_blas_thread  # noqa: E402
from policy.decision.candidates import aid_rule, candidate_rules  # noqa: E402
from policy.decision.costs import costs_from_scenario  # noqa: E402
from policy.decision.solve import optimal_rule  # noqa: E402
from policy.demo.quarrow import demo_scenario_path  # noqa: E402
from policy.estimation.from_scenario import estimate  # noqa: E402
from policy.estimation.strata import RiskLevelEstimator  # noqa: E402
from policy.estimation.world import world_probabilities  # noqa: E402


def best_of(fn, repeat):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--replicates", type=int, default=200)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    scenario = load_scenario(demo_scenario_path())
    t_compare, c = best_of(lambda: compare(scenario, replicates=args.replicates, workers=1), args.repeat)

    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl)
    optimum = optimal_rule(rl, costs)
    est = RiskLevelEstimator.from_scenario(scenario)
    design = est.design(cells.layout, len(cells.levels))
    aid = aid_rule(cells, scenario.aid.name, scenario.level_labels)
    fixed = [r.cell_delta for r in [aid] + candidate_rules(scenario, rl.layout, rl.weights)]
    resampler = CountResampler(cells, "poisson", rl.p)
    seeds = np.random.SeedSequence(1).spawn(4 * CHUNK)
    batches = [resampler.draw(seeds[i:i + CHUNK]) for i in range(0, len(seeds), CHUNK)]
    plain = ComparisonStatistic(est, design, costs, cells.layout, fixed, True, 2)
    held = ComparisonStatistic(est, design, costs, cells.layout, fixed, True, 2, chosen=[optimum])
    t_world, world = best_of(lambda: world_probabilities(est, cells), args.repeat)
    in_world = ComparisonStatistic(est, design, costs, cells.layout, fixed, True, 2, base=rl, chosen=[optimum],
                                   world=world)

    def run(stat):
        with one_blas_thread():
            for b in batches:
                stat(b)

    t_plain, _ = best_of(lambda: run(plain), args.repeat)
    t_held, _ = best_of(lambda: run(held), args.repeat)
    t_in_world, _ = best_of(lambda: run(in_world), args.repeat)
    per_rep = (t_held - t_plain) / len(seeds)
    per_rep_world = (t_in_world - t_held) / len(seeds)
    t_post, _ = best_of(lambda: (c.differences_frame(), c.summary(), c.stability_frame()), args.repeat)
    extra = max(per_rep, 0.0) * args.replicates + t_post
    extra_world = t_world + max(per_rep_world, 0.0) * args.replicates
    rules = c.rules
    with one_blas_thread():
        t_cf, _ = best_of(lambda: cross_fit(cells, rl, costs, est, rules, folds=5, seed=1), args.repeat)
    print(f"compare, demo, {args.replicates} replicates, one worker: {t_compare:.2f} s")
    print(f"statistic per replicate: {1e3 * t_plain / len(seeds):.2f} ms re-solved only, "
          f"{1e3 * t_held / len(seeds):.2f} ms with the chosen rule held fixed (extra {1e3 * per_rep:+.3f} ms)")
    print(f"paired differences, matrix and stability tables after the run: {1e3 * t_post:.1f} ms")
    print(f"extras / compare: {extra / t_compare:.3f} (target <= 0.10)")
    print(f"liberal bootstrap world, once per run: {1e3 * t_world:.0f} ms; world cost of the re-solved rule per "
          f"replicate: {1e3 * per_rep_world:+.3f} ms; together / compare: {extra_world / t_compare:.3f}")
    print(f"cross-fitting, 5 folds (part of compare's time since --folds 5 is the default): {1e3 * t_cf:.0f} ms, "
          f"{t_cf / t_compare:.3f} of compare")


if __name__ == "__main__":
    main()
