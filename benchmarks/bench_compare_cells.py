"""`compare` at about 100,000 cells: where its time goes, and one bootstrap replicate.

Simulates the invented demo county with one more invented cell column (``precinct``, 128
values by default: about 85,000 cells from 1,000,000 cases), writes it to Parquet beside a copy
of the demo scenario, and runs ``policy compare`` on it in its own process (wall time, CPU, peak memory); with ``--parts`` in this process, timing its
main parts (wall and CPU: the machines are shared); with ``--statistic-only`` one chunk of
bootstrap replicates of the comparison's statistic (``bench_bootstrap.statistic_for``).

Target (docs/performance.md, "The bootstrap at about 100,000 cells"): ``compare`` with 50
replicates on 100,000 cells in at most 60 s and 2 GB.

Usage: python benchmarks/bench_compare_cells.py [--cases N] [--precincts P] [--replicates B]
       [--workers W] [--parts | --statistic-only] [--folder DIR]
"""

from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from policy import load_scenario  # noqa: E402
from policy.demo.quarrow import demo_scenario_path, simulate_cases  # noqa: E402

#: the parts of compare timed on their own: (module, function name)
PARTS = (
    ("policy.assessment.compare", "outcome_world"),
    ("policy.assessment.compare", "bootstrap"),
    ("policy.assessment.compare", "cross_fit"),
    ("policy.assessment.rule_ranges", "regret_ranges"),
    ("policy.assessment.rule_ranges", "rule_ranges"),
    ("policy.estimation.arm_check", "arm_check"),
)


def write_scenario(folder: Path, cases: int, precincts: int) -> Path:
    frame, _ = simulate_cases(cases, seed=1)
    frame["precinct"] = np.char.add("p", np.random.default_rng(5).integers(precincts, size=len(frame)).astype(str))
    frame.to_parquet(folder / "cases.parquet")
    text = demo_scenario_path().read_text(encoding="utf-8")
    text = text.replace("simulate = 20000", 'case_table = "cases.parquet"  #', 1)
    covariates = '"aid_tier"]'
    text = text.replace(covariates, '"aid_tier", "precinct"]', 1)
    path = folder / "scenario.toml"
    path.write_text(text, encoding="utf-8")
    return path


def timed_parts():
    import importlib

    times = {}
    for module, name in PARTS:
        mod = importlib.import_module(module)
        original = getattr(mod, name)

        def wrapper(*args, _original=original, _name=name, **kwargs):
            wall, cpu = time.perf_counter(), time.process_time()
            try:
                return _original(*args, **kwargs)
            finally:
                spent = times.setdefault(_name, [0.0, 0.0])
                spent[0] += time.perf_counter() - wall
                spent[1] += time.process_time() - cpu

        setattr(mod, name, wrapper)
    return times


def statistic_only(scenario_path: Path, replicates: int) -> None:
    from policy.assessment.uncertainty import CountResampler, _Chunk, run_chunk
    from policy.inputs.loading import load_cell_table

    from bench_bootstrap import statistic_for

    scenario = load_scenario(scenario_path)
    cells = load_cell_table(scenario)
    stat, rl = statistic_for(scenario, cells)
    resampler = CountResampler(cells, outcome_model=rl.p)
    seeds = tuple(np.random.SeedSequence(7).spawn(replicates))
    wall, cpu = time.perf_counter(), time.process_time()
    run_chunk((resampler, stat), _Chunk(0, seeds))
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    print(f"cells: {cells.n_cells:,}; one chunk of {replicates} replicates: {wall / replicates:.2f} s wall, "
          f"{cpu / replicates:.2f} s CPU per replicate")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", type=int, default=1_000_000)
    ap.add_argument("--precincts", type=int, default=128)
    ap.add_argument("--replicates", type=int, default=50)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--statistic-only", action="store_true")
    ap.add_argument("--parts", action="store_true", help="run compare in this process and time its main parts")
    ap.add_argument("--folder", type=Path, default=None, help="where the table and scenario go (default: a temporary folder)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = args.folder or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        scenario_path = write_scenario(folder, args.cases, args.precincts)
        if args.statistic_only:
            statistic_only(scenario_path, args.replicates)
            return
        command = ["compare", str(scenario_path), "--out", str(folder / "out"), "--replicates", str(args.replicates),
                   "--workers", str(args.workers), "--no-progress"]
        if not args.parts:
            # the command as a user runs it, in its own process: wall time, CPU and peak memory
            import subprocess

            wall = time.perf_counter()
            subprocess.run([sys.executable, "-m", "policy", *command], check=True, stdout=subprocess.DEVNULL)
            wall = time.perf_counter() - wall
            use = resource.getrusage(resource.RUSAGE_CHILDREN)
            print(f"compare, {args.replicates} replicates, {args.workers} worker(s): {wall:.1f} s wall, "
                  f"{use.ru_utime + use.ru_stime:.1f} s CPU, peak {use.ru_maxrss / 1e6:.2f} GB (target: 60 s, 2 GB)")
            return
        from policy.presentation.cli import main as cli

        times = timed_parts()
        sys.argv = ["policy", *command]
        wall, cpu = time.perf_counter(), time.process_time()
        try:
            cli()
        except SystemExit as stop:
            if stop.code:
                raise
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        print(f"compare in this process, {args.replicates} replicates, {args.workers} worker(s): {wall:.1f} s wall, "
              f"{cpu:.1f} s CPU")
        for name, (w, c) in times.items():
            print(f"  {name:16s} {w:7.1f} s wall {c:7.1f} s CPU")

if __name__ == "__main__":
    main()
