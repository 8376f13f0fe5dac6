"""Time and peak memory of reading risk-level draws and comparing rules over them.

A synthetic invented table: CELLS cells (a x b x sex x group) x 3 outcome kinds x DRAWS draws,
built in memory as a DataFrame (no CSV parsing), read by
``risk_level_draws_from_frame`` and scored by ``score_draws`` (the optimum and one fixed rule).

    python benchmarks/bench_draws.py [DRAWS] [CELLS_A]          # in memory
    python benchmarks/bench_draws.py [DRAWS] [CELLS_A] csv      # written to a CSV draw by draw,
                                                                # read back in blocks in a fresh process
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

SCENARIO = '''
[scenario]
title = "draws benchmark (invented)"
seed = 1
[data]
risk_level_table = "unused.csv"
[[decisions]]
value = "recognizance"
label = "recognizance"
cost = 0.0
[[decisions]]
value = "supervision"
label = "supervision"
cost = 750.0
[[decisions]]
value = "bond"
label = "bond"
cost = 4000.0
[[outcomes]]
key = "missed_court"
label = "missed court"
cost = 1000.0
[[outcomes]]
key = "new_offense"
label = "new offense"
cost = 5146.0
[[outcomes]]
key = "new_violent"
label = "new violent"
cost = 155928.0
[costs]
unit = "USD"
[cells]
covariates = ["a", "b"]
protected = ["sex", "group"]
rule = ["a"]
'''


def main(draws: int = 200, n_a: int = 50, mode: str = "memory") -> None:
    from policy.assessment.draws_compare import score_draws
    from policy.decision.costs import costs_from_scenario
    from policy.decision.solve import optimal_rule
    from policy.estimation.from_scenario import risk_level_draws_from_frame
    from policy.inputs.scenario import load_scenario

    folder = Path(tempfile.mkdtemp())
    (folder / "s.toml").write_text(SCENARIO)
    scenario = load_scenario(folder / "s.toml")
    rng = np.random.default_rng(0)
    a, b, s, g = np.meshgrid(np.arange(n_a), np.arange(50), [0, 1], [0, 1], indexing="ij")
    cells = pd.DataFrame({"a": a.ravel(), "b": b.ravel(), "sex": np.where(s.ravel(), "f", "m"),
                          "group": np.where(g.ravel(), "A", "B")})
    n = len(cells)
    base = rng.dirichlet([30, 2, 2, 1], size=(n, 3))
    rows = cells.loc[np.repeat(np.arange(n), 3)].reset_index(drop=True)
    rows["outcome"] = np.tile(["missed_court", "new_offense", "new_violent"], n)
    rows["cases"] = np.repeat(rng.integers(5, 50, n), 3)
    parts = []
    for d in range(draws):
        q = rng.dirichlet(np.ones(4), size=(n, 3)) * 0.05 + base * 0.95
        part = rows.copy()
        part["draw"] = str(d + 1)
        for r in range(4):
            part[f"risk_level_{r}"] = q[:, :, r].ravel()
        if mode == "csv":
            part.to_csv(folder / "draws.csv", mode="a", header=d == 0, index=False, float_format="%.9f")
        else:
            parts.append(part)
    if mode == "csv":
        import subprocess

        size = (folder / "draws.csv").stat().st_size / 2**20
        print(f"{draws} draws x {n:,} cells x 3 outcomes: {draws * n * 3:,} rows, CSV of {size:,.0f} MB")
        code = (f"import resource, time; from policy.assessment.compare import compare; t = time.perf_counter(); "
                f"c = compare({str(folder / 's.toml')!r}); print(f'compare from the CSV: {{time.perf_counter() - t:.1f}} s; '"
                f"f'peak RSS {{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:,.0f}} MB; ' + c.result.interval_label)")
        (folder / "s.toml").write_text(SCENARIO.replace("unused.csv", "draws.csv"))
        subprocess.run([sys.executable, "-c", code], check=True)
        return
    frame = pd.concat(parts, ignore_index=True)
    del parts
    print(f"{draws} draws x {n:,} cells x 3 outcomes: {len(frame):,} rows, "
          f"{frame.memory_usage(deep=True).sum() / 2**20:,.0f} MB as a DataFrame")
    t = time.perf_counter()
    got = risk_level_draws_from_frame(frame, scenario, "bench")
    t_read = time.perf_counter() - t
    del frame
    costs = costs_from_scenario(scenario, got.point)
    opt = optimal_rule(got.point, costs)
    t = time.perf_counter()
    result = score_draws([opt], got.point, got.p, costs)
    t_score = time.perf_counter() - t
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"read and validate: {t_read:.1f} s; score over draws: {t_score:.1f} s; "
          f"cost interval {result.interval('cost')}; peak RSS {peak:,.0f} MB")


if __name__ == "__main__":
    main(*(int(x) if x.isdigit() else x for x in sys.argv[1:]))
