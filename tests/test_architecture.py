"""The package's shape: stages in folders, imports one way (import-linter's contracts in
pyproject.toml), no import circles (grimp's import graph), modules of one job and bounded size."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import grimp
import numpy as np
import pytest
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from .conftest import ROOT

STAGES = ("inputs", "estimation", "decision", "assessment", "running", "presentation", "demo")


def _lint_imports(root: Path) -> subprocess.CompletedProcess:
    """Run import-linter on the package under ``root`` with the project's contracts."""
    env = {"PYTHONPATH": str(root), "PATH": str(Path(sys.executable).parent)}
    return subprocess.run([sys.executable, "-c", "import sys; from importlinter.cli import lint_imports_command; "
                           "sys.exit(lint_imports_command())", "--config", str(root / "pyproject.toml"), "--no-cache"],
                          cwd=root, env=env, capture_output=True, text=True, timeout=120)


def test_every_stage_is_a_folder_with_a_docstring_saying_its_job_and_imports():
    for stage in STAGES:
        init = ROOT / "policy" / stage / "__init__.py"
        assert init.is_file(), stage
        doc = init.read_text(encoding="utf-8")
        assert doc.startswith(('"""', 'r"""')) and ("May import" in doc or "may import" in doc), stage


def test_import_contracts_are_kept():
    result = _lint_imports(ROOT)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "2 kept, 0 broken" in result.stdout


@pytest.mark.parametrize("module, bad_import", [
    ("inputs/tables.py", "from policy.presentation import plots"),    # a stage reaching up into presentation
    ("estimation/strata.py", "from policy.demo import quarrow"),       # estimation reaching into the demo
    ("errors.py", "import policy.decision.rules"),                      # a shared helper importing a stage
])
def test_import_contracts_fail_on_an_import_against_the_flow(tmp_path, module, bad_import):
    shutil.copytree(ROOT / "policy", tmp_path / "policy", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / "pyproject.toml", tmp_path / "pyproject.toml")
    target = tmp_path / "policy" / module
    target.write_text(target.read_text(encoding="utf-8") + f"\n{bad_import}  # planted\n", encoding="utf-8")
    result = _lint_imports(tmp_path)
    assert result.returncode != 0
    assert "BROKEN" in result.stdout


def _module_graph():
    graph = grimp.build_graph("policy", cache_dir=None)
    modules = sorted(graph.modules)
    index = {m: i for i, m in enumerate(modules)}
    rows, cols = [], []
    for m in modules:
        for imported in graph.find_modules_directly_imported_by(m):
            if imported in index:
                rows.append(index[m])
                cols.append(index[imported])
    adjacency = csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(len(modules), len(modules)))
    return graph, modules, adjacency


def test_no_import_circles_between_modules():
    # Strongly connected components of the module import graph (imports inside functions
    # included, as grimp reads them): a circle is a component of more than one module.
    graph, modules, adjacency = _module_graph()
    n, labels = connected_components(adjacency, directed=True, connection="strong")
    circles = [[modules[i] for i in np.flatnonzero(labels == c)] for c in range(n) if (labels == c).sum() > 1]
    assert circles == [], f"import circles: {circles}"


def test_no_module_imports_its_own_package_root():
    # A child importing ``policy`` itself (the root re-exports everything) would hide a circle.
    graph, modules, _ = _module_graph()
    offenders = [m for m in modules if m != "policy" and "policy" in graph.find_modules_directly_imported_by(m)]
    assert offenders == []


def test_modules_stay_small():
    sizes = {p.relative_to(ROOT).as_posix(): len(p.read_text(encoding="utf-8").splitlines())
             for p in (ROOT / "policy").rglob("*.py")}
    assert {name: n for name, n in sizes.items() if n > 720} == {}


def _fresh_python(code: str) -> str:
    """Run ``code`` in a new interpreter on this tree; its standard output."""
    env = {"PYTHONPATH": str(ROOT), "PATH": str(Path(sys.executable).parent)}
    result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    return result.stdout.strip()


def test_every_module_that_registers_a_scenario_section_is_named_to_the_scenario_reader():
    # sections register on import; the reader imports only the modules named in policy/__init__,
    # so a module left out would make its section "unknown" in a command that does not import it
    code = ("import importlib, pkgutil, policy; from policy.inputs import scenario as s; "
            "named = set(s.load_section_modules()); "
            "[importlib.import_module(m.name) for m in pkgutil.walk_packages(policy.__path__, 'policy.') "
            "if not m.name.endswith('__main__')]; print(sorted(set(s.SCHEMA) - named))")
    assert _fresh_python(code) == "[]"


def test_help_imports_no_data_or_solver_library():
    # start-up stays fast: the command line's help needs none of these
    code = ("import sys, runpy; sys.argv = ['policy', '--help']\n"
            "try:\n    runpy.run_module('policy', run_name='__main__')\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in ('pandas', 'scipy', 'matplotlib', 'cvxpy', 'pyarrow', 'highspy') if m in sys.modules))")
    assert _fresh_python(code).splitlines()[-1] == "[]"


def test_public_names_resolve_on_first_use():
    code = ("import sys, policy; before = 'pandas' in sys.modules; "
            "missing = [n for n in policy.__all__ if not hasattr(policy, n)]; "
            "from policy import RiskLevels, analyze; print(before, missing, 'policy.demo' in sys.modules)")
    # importing the package loads no stage; every name in __all__ resolves; the demo is a module away
    assert _fresh_python(code) == "False [] False"
