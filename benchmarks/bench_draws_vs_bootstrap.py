"""Comparing rules over a risk-level table's draws against the same number of bootstrap replicates.

The target (docs/performance.md): ``compare`` over 1,000 draws x 10,000 cells x 3 outcome kinds
takes at most twice the time of ``compare`` with 1,000 bootstrap replicates of the tool's own
estimator on a counts table of the same 10,000 cells, and peaks under 2 GB.

Both inputs are synthetic and invented: cells a (CELLS_A values) x b (50) x sex x group, an arm,
3 decision levels. The counts table draws cases, observed outcomes and events per cell x arm x
level; the table of draws holds, per cell and outcome kind, Dirichlet draws around a base
risk-level distribution (written to CSV draw by draw, read back in blocks by ``compare``). Each
``compare`` runs in a fresh process on one worker (no cross-fitting), so the peak resident memory
(ru_maxrss) is its own.

    python benchmarks/bench_draws_vs_bootstrap.py [DRAWS] [CELLS_A]    # default 1000 50
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

COMMON = '''
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
[uncertainty]
resampling = "multinomial"
'''
COUNTS = '''[scenario]
title = "bootstrap benchmark (invented)"
seed = 1
[data]
counts_table = "counts.csv"
[columns]
arm = "arm"
decision = "decision"
''' + COMMON
DRAWS = '''[scenario]
title = "draws benchmark (invented)"
seed = 1
[data]
risk_level_table = "draws.csv"
''' + COMMON
OUTCOMES = ["missed_court", "new_offense", "new_violent"]

RUN = '''
import resource, sys, time
sys.path.insert(0, {root!r})
from policy.assessment.compare import compare
t = time.perf_counter()
c = compare({path!r}, replicates={replicates}, workers=1, folds=0)
print(f"{{time.perf_counter() - t:.1f}} {{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f}} "
      f"{{c.result.n_replicates}}")
'''


def cells_frame(n_a: int) -> pd.DataFrame:
    a, b, s, g = np.meshgrid(np.arange(n_a), np.arange(50), [0, 1], [0, 1], indexing="ij")
    return pd.DataFrame({"a": a.ravel(), "b": b.ravel(), "sex": np.where(s.ravel(), "f", "m"),
                         "group": np.where(g.ravel(), "A", "B")})


def write_counts(folder: Path, cells: pd.DataFrame, rng) -> None:
    n = len(cells)
    rows = cells.loc[np.repeat(np.arange(n), 6)].reset_index(drop=True)
    rows["arm"] = np.tile(np.repeat([0, 1], 3), n)
    rows["decision"] = np.tile(["recognizance", "supervision", "bond"], 2 * n)
    rows["cases"] = rng.poisson([8, 4, 2], size=(2 * n, 3)).ravel() + 1
    risk = np.array([0.20, 0.15, 0.02])
    for k, o in enumerate(OUTCOMES):
        rows[f"observed_{o}"] = rows["cases"]
        rate = risk[k] * np.tile([1.0, 0.7, 0.3], 2 * n)
        rows[f"events_{o}"] = rng.binomial(rows["cases"].to_numpy(), rate)
    rows.to_csv(folder / "counts.csv", index=False)


def write_draws(folder: Path, cells: pd.DataFrame, draws: int, rng) -> None:
    n = len(cells)
    base = rng.dirichlet([30, 2, 2, 1], size=(n, 3))
    rows = cells.loc[np.repeat(np.arange(n), 3)].reset_index(drop=True)
    rows["outcome"] = np.tile(OUTCOMES, n)
    rows["cases"] = np.repeat(rng.integers(5, 50, n), 3)
    for d in range(draws):
        q = rng.dirichlet(np.ones(4), size=(n, 3)) * 0.05 + base * 0.95
        part = rows.copy()
        part["draw"] = str(d + 1)
        for r in range(4):
            part[f"risk_level_{r}"] = q[:, :, r].ravel()
        part.to_csv(folder / "draws.csv", mode="a", header=d == 0, index=False, float_format="%.9f")


def run(path: Path, replicates: int) -> tuple[float, float, int]:
    code = RUN.format(root=str(ROOT), path=str(path), replicates=replicates)
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True).stdout.split()
    return float(out[0]), float(out[1]), int(out[2])


def main(draws: int = 1000, n_a: int = 50) -> None:
    folder = Path(tempfile.mkdtemp())
    rng = np.random.default_rng(0)
    cells = cells_frame(n_a)
    write_counts(folder, cells, rng)
    write_draws(folder, cells, draws, rng)
    (folder / "counts.toml").write_text(COUNTS)
    (folder / "draws.toml").write_text(DRAWS)
    size = (folder / "draws.csv").stat().st_size / 2**20
    print(f"{len(cells):,} cells x 3 outcome kinds; {draws} draws ({draws * len(cells) * 3:,} rows, CSV of {size:,.0f} MB) "
          f"against {draws} bootstrap replicates of a counts table of the same cells")
    t_draws, m_draws, b_draws = run(folder / "draws.toml", draws)
    print(f"compare over the draws:      {t_draws:7.1f} s, peak RSS {m_draws:,.0f} MB ({b_draws} draws)")
    t_boot, m_boot, b_boot = run(folder / "counts.toml", draws)
    print(f"compare with the bootstrap:  {t_boot:7.1f} s, peak RSS {m_boot:,.0f} MB ({b_boot} replicates)")
    print(f"ratio draws / bootstrap: {t_draws / t_boot:.2f} (target: at most 2); peak under 2 GB: {m_draws < 2048}")


if __name__ == "__main__":
    main(*(int(x) for x in sys.argv[1:]))
