"""Mutation testing of the core formula modules with mutmut, outside the default test run.

mutmut (https://github.com/boxed/mutmut) plants one small change at a time in a module (an
operator, a constant, a keyword argument) and runs the tests that reach the changed function; a
change no test notices ("survived") marks a behaviour no test pins down. Results and the
reading of every survivor are kept in docs/mutation.md.

The run happens in a copy of the project (``policy/``, ``tests/``, ``scenarios/`` and
``pyproject.toml``) in a scratch folder, with mutmut's settings written into that copy's
``pyproject.toml``, so the working tree gets no ``mutants/`` folder and no settings that a
normal test run would see. Only each module's own fast test files run (the ``slow`` marker stays
excluded by the project's pytest settings).

Usage::

    pip install -e ".[mutation]"
    python scripts/mutation.py                       # the default modules
    python scripts/mutation.py solve costs --max-children 2 --report /tmp/mutation.json
    python scripts/mutation.py --list                # the modules it knows and their tests
    python scripts/mutation.py evaluate --only fairness_gaps by_group   # some functions only
    python scripts/mutation.py strata --tests tests/test_strata.py::test_moment_prior_strength_by_hand

Exit status 0 when the run completed (whatever survived: reading survivors is a person's job),
1 when mutmut itself failed.
"""

from __future__ import annotations

import argparse
import ast
import difflib
import fnmatch
import functools
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: the fast tests of the constrained LP (test_constrained.py's property tests run 1,000 examples each)
_CONSTRAINED_FAST = (
    "tests/test_constrained_keys.py",
    "tests/test_constrained.py::test_random_optimum_matches_independent_linprog",
    "tests/test_constrained.py::test_statistical_parity_gives_a_threshold_per_group",
    "tests/test_constrained.py::test_unconstrained_optimum_is_one_threshold_on_risk_for_everyone",
)

#: module key -> (file to mutate, the fast test files or test ids that check it)
MODULES: dict[str, tuple[str, tuple[str, ...]]] = {
    "solve": ("policy/decision/solve.py", ("tests/test_solve.py",)),
    "costs": ("policy/decision/costs.py", ("tests/test_solve.py",)),
    "bounds": ("policy/estimation/bounds.py", ("tests/test_bounds.py",)),
    "evaluate": ("policy/decision/evaluate.py", ("tests/test_evaluate.py",)),
    "strata": ("policy/estimation/strata.py", ("tests/test_strata.py", "tests/test_strata_edges.py", "tests/test_risk_level_tables.py",
                                                   "tests/test_baseline_model.py")),
    "constraints": ("policy/decision/constraints.py", ("tests/test_constraint_rows.py", "tests/test_constraint_specs.py",
                                                       *_CONSTRAINED_FAST)),
    "envelope": ("policy/assessment/sweep/envelope.py", ("tests/test_sweep.py", "tests/test_envelope.py")),
    "one_ratio": ("policy/assessment/sweep/one_ratio.py", ("tests/test_sweep.py", "tests/test_envelope.py", "tests/test_sweep_tables.py")),
    "two_ratio": ("policy/assessment/sweep/two_ratio.py", ("tests/test_sweep.py", "tests/test_regions.py", "tests/test_lenient_map.py")),
    "regions": ("policy/assessment/sweep/regions.py", ("tests/test_sweep.py", "tests/test_sweep_tables.py", "tests/test_regions.py")),
    "bands": ("policy/assessment/sweep/bands.py", ("tests/test_bands.py", "tests/test_bands_tables.py", "tests/test_sweep.py")),
    "sweep_constrained": ("policy/assessment/sweep/constrained.py", ("tests/test_sweep_constrained.py", "tests/test_sweep_constrained_tables.py")),
    "rules": ("policy/decision/rules.py", ("tests/test_solve.py", "tests/test_evaluate.py", "tests/test_rules.py")),
    "loglinear": ("policy/estimation/loglinear.py", ("tests/test_baseline_model.py",)),
    "problem": ("policy/decision/constrained/problem.py", ("tests/test_constrained_problem.py", *_CONSTRAINED_FAST)),
    "cumulative": ("policy/decision/constrained/cumulative.py", ("tests/test_constrained_cumulative.py",)),
    "program": ("policy/decision/constrained/program.py", ("tests/test_constrained_problem.py", *_CONSTRAINED_FAST)),
    "elastic": ("policy/decision/constrained/elastic.py", ("tests/test_constrained_problem.py",)),
}
DEFAULT = ("solve", "costs", "bounds")


def copy_project(dest: Path) -> None:
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", "mutants", ".hypothesis")
    for name in ("policy", "tests", "scenarios"):
        shutil.copytree(ROOT / name, dest / name, ignore=ignore)
    shutil.copy(ROOT / "pyproject.toml", dest / "pyproject.toml")


def mutmut_settings(files: list[str], tests: list[str]) -> str:
    def toml_list(values):
        return "[" + ", ".join(json.dumps(v) for v in values) + "]"

    return (
        "\n[tool.mutmut]\n"
        'source_paths = ["policy"]\n'
        'also_copy = ["scenarios"]\n'
        f"only_mutate = {toml_list(files)}\n"
        f"pytest_add_cli_args_test_selection = {toml_list(tests)}\n"
        'pytest_add_cli_args = ["-p", "no:cacheprovider", "-q"]\n'
        "use_git_change_detection = false\n"
    )


@functools.lru_cache(maxsize=None)
def function_sources(path: Path) -> dict[str, str]:
    """Source of every function of a file, by name."""
    text = path.read_text(encoding="utf-8")
    lines = text.splitlines()
    return {node.name: "\n".join(lines[node.lineno - 1:node.end_lineno])
            for node in ast.walk(ast.parse(text)) if isinstance(node, ast.FunctionDef)}


def mutant_diff(scratch: Path, name: str) -> str:
    """The lines a mutant changes, read from mutmut's mutated copy of the module (the original
    of each function is kept there as ``<function>__mutmut_orig``); faster than ``mutmut show``."""
    module, function = name.rsplit(".", 1)
    sources = function_sources(scratch / "mutants" / (module.replace(".", "/") + ".py"))
    original = sources.get(re.sub(r"__mutmut_\d+$", "__mutmut_orig", function), "").splitlines()
    mutant = sources.get(function, "").splitlines()
    lines = difflib.unified_diff(original, mutant, lineterm="", n=0)
    return "\n".join(line for line in lines
                     if line[:1] in "+-" and not line.startswith(("+++", "---")) and "__mutmut_" not in line)


def mutant_patterns(files: list[str], functions: list[str]) -> list[str]:
    """mutmut's names of the mutants of some functions (``name``) or methods (``Class.method``
    or ``method`` of any class): ``module.x_name__mutmut_N`` and ``module.xǁClassǁmethod__mutmut_N``."""
    patterns = []
    for path in files:
        dotted = path[:-3].replace("/", ".")
        for f in functions:
            if "." in f:
                cls, meth = f.split(".", 1)
                patterns.append(f"{dotted}.xǁ{cls}ǁ{meth}__mutmut_*")
            else:
                patterns += [f"{dotted}.x_{f}__mutmut_*", f"{dotted}.xǁ*ǁ{f}__mutmut_*"]
    return patterns


def run(cmd: list[str], cwd: Path, env: dict) -> subprocess.CompletedProcess:
    return subprocess.run(cmd, cwd=cwd, env=env, text=True, capture_output=True)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("modules", nargs="*", default=list(DEFAULT), help=f"module keys (default: {' '.join(DEFAULT)})")
    ap.add_argument("--max-children", type=int, default=1, help="parallel test processes (default 1: the machine is shared)")
    ap.add_argument("--report", type=Path, default=None, help="write the counts and every survivor's diff as JSON here")
    ap.add_argument("--workdir", type=Path, default=None, help="scratch folder to run in (default: a temporary one, removed after)")
    ap.add_argument("--list", action="store_true", help="list the known modules and their test files")
    ap.add_argument("--only", nargs="+", metavar="FUNCTION", default=None,
                    help="mutate only these functions or methods (a name, or Class.method) of the modules")
    ap.add_argument("--tests", nargs="+", metavar="TEST", default=None,
                    help="run these test files or test ids instead of the modules' own test files")
    ap.add_argument("--report-only", action="store_true",
                    help="do not run: report the results already in --workdir (from an earlier run)")
    args = ap.parse_args(argv)
    if args.list:
        for key, (path, tests) in MODULES.items():
            print(f"{key:12s} {path:40s} {' '.join(tests)}")
        return 0
    unknown = [m for m in args.modules if m not in MODULES]
    if unknown:
        ap.error(f"unknown module {unknown[0]!r}; expected one of: {', '.join(MODULES)}")
    files = [MODULES[m][0] for m in args.modules]
    tests = args.tests or sorted({t for m in args.modules for t in MODULES[m][1]})
    patterns = mutant_patterns(files, args.only) if args.only else []

    if args.report_only and args.workdir is None:
        ap.error("--report-only needs the --workdir of an earlier run")
    scratch = args.workdir or Path(tempfile.mkdtemp(prefix="policy-mutation-"))
    scratch.mkdir(parents=True, exist_ok=True)
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}  # the mutated copy, not this tree
    env["PYTHONHASHSEED"] = "0"
    try:
        if not args.report_only:
            copy_project(scratch)
            with open(scratch / "pyproject.toml", "a", encoding="utf-8") as f:
                f.write(mutmut_settings(files, tests))
            print(f"mutating {', '.join(files)}; tests: {' '.join(tests)}; in {scratch}", flush=True)
            done = subprocess.run([sys.executable, "-m", "mutmut", "run", "--max-children", str(args.max_children),
                                   *patterns],
                                  cwd=scratch, env=env, text=True)
            if done.returncode != 0:
                print(f"mutmut run failed with exit status {done.returncode}", file=sys.stderr)
                return 1
        listing = run([sys.executable, "-m", "mutmut", "results", "--all", "true"], scratch, env)
        status = {}
        for line in listing.stdout.splitlines():
            m = re.match(r"\s*(\S+): (.+)$", line)
            if m:
                status[m.group(1)] = m.group(2).strip()
        report: dict = {"modules": {}, "survivors": {}}
        for path in files:
            dotted = path[:-3].replace("/", ".")
            mine = {k: v for k, v in status.items() if k.startswith(dotted + ".")
                    and (not patterns or any(fnmatch.fnmatchcase(k, p) for p in patterns))}
            counts = Counter(mine.values())
            report["modules"][path] = dict(counts, total=len(mine))
            for name, st in sorted(mine.items()):
                if st != "killed":
                    report["survivors"][name] = {"status": st, "diff": mutant_diff(scratch, name)}
        for path, counts in report["modules"].items():
            total = counts["total"]
            killed = counts.get("killed", 0)
            rest = ", ".join(f"{k} {v}" for k, v in sorted(counts.items()) if k not in ("total", "killed"))
            print(f"{path}: {total} mutants, {killed} killed ({killed / max(total, 1):.0%}); {rest or 'no others'}")
        for name, info in report["survivors"].items():
            print(f"\n--- {name}: {info['status']}\n{info['diff']}")
        if args.report:
            args.report.write_text(json.dumps(report, indent=2), encoding="utf-8")
        return 0
    finally:
        if args.workdir is None:
            shutil.rmtree(scratch, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
