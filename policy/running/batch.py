"""Many scenarios at once: a folder of scenario files (e.g. one per county) run as independent tasks.

Each scenario is analysed as ``solve`` does (:func:`policy.running.pipeline.analyze`: risk levels, the
optimal rule, the constrained optimum when the scenario declares constraints) in its own task,
on any :class:`~policy.assessment.uncertainty.TaskRunner` (:mod:`policy.running.distributed`: here, local worker
processes or a Dask cluster). Its files are written into a folder named after the scenario
file, and one summary table compares the scenarios side by side.

A scenario that fails (a bad file, constraints that cannot all hold, a solver failure, or an
unexpected error) is reported in the summary with its reason and gets no folder; the others go
on. Tasks read their scenario and data files where they run: on a cluster, the folder must be
on a file system every worker sees at the same path.
"""

from __future__ import annotations

import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

import pandas as pd

from policy.cautions import CAUTIONS, assumptions_for
from policy.errors import InputError, PolicyError
from policy.assessment.uncertainty import InProcess, TaskRunner

__all__ = ["ScenarioRun", "BatchResult", "run_batch", "run_scenario", "scenario_files", "SUMMARY_FILE"]

SUMMARY_FILE = "batch_summary.csv"


@dataclass(frozen=True)
class ScenarioRun:
    """The outcome of one scenario of a batch.

    Attributes
    ----------
    name : str
        The scenario file's stem (also its output folder's name).
    file : str
    status : {'done', 'failed'}
    reason : str
        Why it failed ('' when done).
    error : str
        The kind of failure: the error class (InputError, InfeasibleError, SolverError) or
        'unexpected' for a bug ('' when done).
    figures : dict
        Headline figures for the summary (empty when failed).
    files : dict
        Output files by name, as :func:`policy.outputs.write_outputs` takes them.
    """

    name: str
    file: str
    status: str
    reason: str = ""
    error: str = ""
    figures: Mapping[str, Any] = field(default_factory=dict)
    files: Mapping[str, Any] = field(default_factory=dict)


def scenario_files(folder: str | Path) -> list[Path]:
    """The scenario files (``*.toml``) of a folder, sorted by name."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"The scenario folder {str(folder)!r} does not exist (or is not a folder).")
    files = sorted(p for p in folder.glob("*.toml") if p.is_file())
    if not files:
        raise InputError(f"The folder {str(folder)!r} holds no scenario files (*.toml).")
    names = [p.stem for p in files]
    if SUMMARY_FILE.removesuffix(".csv") in names:
        raise InputError(f"A scenario may not be called {SUMMARY_FILE.removesuffix('.csv')!r} (the summary's name).")
    return files


def _figures(analysis) -> dict[str, Any]:
    ev = analysis.evaluation
    out: dict[str, Any] = {
        "title": analysis.scenario.title,
        "data": analysis.risk_levels.source,
        "seed": analysis.scenario.seed,
        "cases": float(analysis.risk_levels.weights.sum()),
        "cells": int(analysis.risk_levels.n_cells),
        "unit": analysis.costs.unit,
        "rule_cells": int(len(analysis.rule.rule_cells)),
        "cost_per_1000_cases": float(ev.cost_per_1000),
    }
    for value, share in zip(analysis.scenario.level_values, ev.level_shares):
        out[f"share_{value}"] = float(share)
    for key, rate in zip(analysis.scenario.outcome_keys, ev.outcome_rates):
        out[f"rate_{key}"] = float(rate)
    c = analysis.constrained
    if c is not None:
        out["constrained_cost_per_1000_cases"] = 1000.0 * float(c.cost_per_case)
        out["constrained_price_per_1000_cases"] = float(c.price_per_1000)
        out["constrained_split_rule_cells"] = int(len(c.rule.split_cells))
        for value, share in zip(analysis.scenario.level_values, c.evaluation.level_shares):
            out[f"constrained_share_{value}"] = float(share)
    return out


def run_scenario(settings: Mapping[str, Any], path: str) -> ScenarioRun:
    """The pure task of a batch: analyse one scenario file; every failure becomes a record."""
    from policy.running.pipeline import analyze

    path = Path(path)
    try:
        analysis = analyze(path, settings.get("outcome_costs"), settings.get("decision_costs"))
        return ScenarioRun(path.stem, path.name, "done", figures=_figures(analysis), files=analysis.output_files())
    except PolicyError as exc:
        return ScenarioRun(path.stem, path.name, "failed", reason=str(exc), error=type(exc).__name__)
    except Exception as exc:  # a bug: reported with its place, the other scenarios go on
        where = traceback.extract_tb(exc.__traceback__)[-1]
        return ScenarioRun(path.stem, path.name, "failed", error="unexpected",
                           reason=f"unexpected error {type(exc).__name__}: {exc} (at {Path(where.filename).name}:{where.lineno}); "
                                  "please report it")


@dataclass(frozen=True)
class BatchResult:
    """Every scenario's outcome, in file-name order."""

    folder: Path
    runs: tuple[ScenarioRun, ...]
    where: str = "in this process"

    @property
    def done(self) -> list[ScenarioRun]:
        return [r for r in self.runs if r.status == "done"]

    @property
    def failed(self) -> list[ScenarioRun]:
        return [r for r in self.runs if r.status == "failed"]

    def summary(self) -> pd.DataFrame:
        """One row per scenario: status, reason, and the headline figures side by side."""
        rows = []
        for r in self.runs:
            row = {"scenario": r.name, "file": r.file, "status": r.status, "error": r.error, "reason": r.reason,
                   "outputs": f"{r.name}/" if r.status == "done" else ""}
            row.update(r.figures)
            rows.append(row)
        frame = pd.DataFrame(rows)
        lead = ["scenario", "file", "status", "error", "reason", "title", "data", "seed", "cases", "cells", "rule_cells",
                "unit", "cost_per_1000_cases"]
        first = [c for c in lead if c in frame.columns]
        rest = [c for c in frame.columns if c not in first and c != "outputs"]
        return frame[first + rest + ["outputs"]]

    def output_files(self) -> dict[str, Any]:
        """Each done scenario's files in its own folder, the summary table and its notes."""
        files: dict[str, Any] = {}
        for r in self.done:
            for name, content in r.files.items():
                files[f"{r.name}/{name}"] = content
        files[SUMMARY_FILE] = self.summary()
        files["batch.json"] = {
            "folder": str(self.folder),
            "scenarios": len(self.runs),
            "done": [r.name for r in self.done],
            "failed": [{"scenario": r.name, "error": r.error, "reason": r.reason} for r in self.failed],
            "ran": self.where,
            "assumptions": assumptions_for("rule"),
            "cautions": list(CAUTIONS),
        }
        return files

    def __str__(self) -> str:
        lines = [f"{len(self.runs)} scenarios from {self.folder}: {len(self.done)} done, {len(self.failed)} failed ({self.where})."]
        for r in self.failed:
            lines.append(f"  failed: {r.file}: {r.reason}")
        return "\n".join(lines)


def run_batch(folder: str | Path, runner: TaskRunner | None = None, outcome_costs: Mapping[str, float] | None = None,
              decision_costs: Mapping[str, float] | None = None, on_done: Callable[[str], None] | None = None,
              where: str = "in this process") -> BatchResult:
    """Analyse every scenario of a folder as an independent task.

    Parameters
    ----------
    folder : path
        A folder of scenario files (``*.toml``); their data paths are relative to each file.
    runner : TaskRunner, optional
        Where the scenarios run (default: in this process, one after the other).
    outcome_costs, decision_costs : mapping, optional
        What-if cost overrides applied to every scenario (as for ``solve``).
    on_done : callable, optional
        Called with each scenario file's name as its task finishes (e.g. to advance a progress bar).
    where : str
        Words for where the tasks ran, recorded in ``batch.json``.
    """
    files = scenario_files(folder)
    settings = {"outcome_costs": dict(outcome_costs or {}), "decision_costs": dict(decision_costs or {})}
    tasks = [str(p.resolve()) for p in files]
    announce = None if on_done is None else (lambda i: on_done(files[i].name))
    runs = (runner or InProcess()).map(run_scenario, settings, tasks, announce)
    return BatchResult(Path(folder), tuple(runs), where)
