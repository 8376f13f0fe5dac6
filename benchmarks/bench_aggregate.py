"""Aggregation of a large case table into cells, and estimation + unconstrained rule on 10,000 cells.

Prints ratios measured in one run (the machines are shared and noisy; absolute times vary):

- aggregation of 10,000,000 already-loaded rows (six small-integer columns) by
  ``CellTable.from_cases`` against a bare numpy ``bincount`` pass over a combined key of the
  same integer-coded columns (target: at most 1.5x);
- peak extra memory of that aggregation against the raw column bytes (target: at most 2x);
- reading the same columns from Parquet with pyarrow, and from CSV (reported, no target);
- estimating risk levels for 10,000 cells and solving the unconstrained rule against the
  aggregation time (target: under a tenth).

Usage: python benchmarks/bench_aggregate.py [--rows N]
"""

from __future__ import annotations

import argparse
import gc
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from policy import CellTable, RiskLevelEstimator, Scenario, optimal_rule  # noqa: E402
from policy.decision.costs import Costs  # noqa: E402


def scenario(covariates, sizes_note=""):
    return Scenario.from_dict({
        "scenario": {"title": f"benchmark {sizes_note}"},
        "data": {"case_table": "unused.csv"},
        "columns": {"arm": "arm", "decision": "decision"},
        "decisions": [{"value": str(d), "label": f"level {d}", "cost": float(100 * d)} for d in range(3)],
        "outcomes": [{"key": "outcome", "label": "outcome", "cost": 1000.0}],
        "costs": {"unit": "USD"},
        "cells": {"covariates": covariates, "rule": covariates[:1]},
    })


def best_of(fn, repeat=5):
    times = []
    for _ in range(repeat):
        gc.collect()
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=10_000_000)
    args = ap.parse_args()
    n = args.rows
    rng = np.random.default_rng(0)
    frame = pd.DataFrame({
        "tier": rng.integers(1, 6, n).astype(np.int8),
        "charge": rng.integers(0, 3, n).astype(np.int8),
        "prior": rng.integers(0, 3, n).astype(np.int8),
        "arm": rng.integers(0, 2, n).astype(np.int8),
        "decision": rng.integers(0, 3, n).astype(np.int8),
        "outcome": (rng.random(n) < 0.15).astype(np.int8),
    })
    raw_bytes = sum(frame[c].to_numpy().nbytes for c in frame.columns)
    sc = scenario(["tier", "charge", "prior"], "six columns")
    cols = [frame[c].to_numpy() for c in frame.columns]

    def bare():
        key = cols[0].astype(np.int64) - 1
        for c, size in zip(cols[1:], (3, 3, 2, 3, 2)):
            key *= size
            key += c
        return np.bincount(key, minlength=5 * 3 * 3 * 2 * 3 * 2)

    t_bare, ref = best_of(bare)
    t_tool, table = best_of(lambda: CellTable.from_cases(frame, sc, file="benchmark"))
    assert table.n_cases == n and int(ref.sum()) == n

    gc.collect()
    tracemalloc.start()
    CellTable.from_cases(frame, sc, file="benchmark")
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    with tempfile.TemporaryDirectory() as tmp:
        import pyarrow.parquet as pq

        path = Path(tmp) / "cases.parquet"
        frame.to_parquet(path, index=False)
        t_parquet, _ = best_of(lambda: pq.read_table(path).to_pandas(), repeat=3)
        small = frame.iloc[:1_000_000]
        csv = Path(tmp) / "cases.csv"
        small.to_csv(csv, index=False)
        t_csv, _ = best_of(lambda: pd.read_csv(csv), repeat=3)
        t_csv *= n / len(small)

    # 10,000 cells: five covariates of 10 x 10 x 10 x 5 x 2 categories, 1,000,000 cases
    m = 1_000_000
    big = pd.DataFrame({
        "a": rng.integers(0, 10, m).astype(np.int8), "b": rng.integers(0, 10, m).astype(np.int8),
        "c": rng.integers(0, 10, m).astype(np.int8), "d": rng.integers(0, 5, m).astype(np.int8),
        "e": rng.integers(0, 2, m).astype(np.int8), "arm": rng.integers(0, 2, m).astype(np.int8),
        "decision": rng.integers(0, 3, m).astype(np.int8), "outcome": (rng.random(m) < 0.2).astype(np.int8),
    })
    sc10k = scenario(["a", "b", "c", "d", "e"], "10,000 cells")
    cells10k = CellTable.from_cases(big, sc10k, file="benchmark")
    est = RiskLevelEstimator.from_scenario(sc10k)

    def estimate_and_solve():
        rl = est.fit(cells10k).risk_levels_
        costs = Costs(np.tile([0.0, 100.0, 200.0], (rl.n_cells, 1)), np.array([1000.0]), "USD")
        return optimal_rule(rl, costs)

    t_est, _ = best_of(estimate_and_solve)

    print(f"rows: {n:,}; raw column bytes: {raw_bytes / 1e6:.0f} MB; cells: {table.n_cells:,}")
    print(f"bare bincount pass:                 {1000 * t_bare:8.1f} ms")
    print(f"CellTable.from_cases:               {1000 * t_tool:8.1f} ms   ratio {t_tool / t_bare:5.2f}  (target <= 1.5)")
    print(f"peak extra memory of aggregation:   {peak / 1e6:8.1f} MB   ratio {peak / raw_bytes:5.2f}  (target <= 2.0)")
    print(f"read the columns from Parquet:      {1000 * t_parquet:8.1f} ms   (reported, pyarrow)")
    print(f"read the columns from CSV (scaled): {1000 * t_csv:8.1f} ms   (reported, pandas)")
    print(f"estimate + rule, {cells10k.n_cells:,} cells:     {1000 * t_est:8.1f} ms   ratio to aggregation {t_est / t_tool:5.3f}  (target < 0.1)")


if __name__ == "__main__":
    main()
