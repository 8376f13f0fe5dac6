"""End-to-end runs of the stages for one scenario: what each command of the CLI calls.

Each function takes a :class:`~policy.inputs.scenario.Scenario` (or a path to one) and returns result
objects; writing files is separate (:meth:`Analysis.output_files` and
:func:`policy.outputs.write_outputs`), so a notebook user gets pandas objects and the command
line gets the same numbers on disk.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.cautions import CAUTIONS, assumptions_for
from policy.inputs.cells import CellTable
from policy.inputs.loading import load_cell_table
from policy.decision.costs import Costs, costs_from_scenario
from policy.decision.evaluate import Evaluation, evaluate
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario, as_scenario, load_scenario
from policy.decision.solve import optimal_rule
from policy.estimation.arm_check import ArmCheck, arm_check
from policy.estimation.from_scenario import estimate, estimate_risk_levels
from policy.estimation.strata import RiskLevels

__all__ = ["Analysis", "CheckReport", "check", "estimate", "analyze", "as_scenario", "write_demo_inputs"]


@dataclass(frozen=True)
class CheckReport:
    """What a scenario and its data hold, before any estimation."""

    scenario: Scenario
    cells: CellTable | None
    risk_levels: RiskLevels | None
    findings: dict[str, Any]
    #: the randomized arm's test of unconfoundedness, when the data have an arm
    arm_check: ArmCheck | None = None

    def rows(self) -> list[tuple[str, str]]:
        """The findings as (finding, text) with the scenario's labels, counts with thousands
        separators and shares as percentages, e.g. ``("cases per arm", "aid shown: 9,968; not shown: 10,032")``."""
        sc = self.scenario
        names = {**dict(zip(sc.level_values, sc.level_labels)), **dict(zip(sc.outcome_keys, sc.outcome_labels)),
                 "0": "aid not shown", "1": "aid shown"}

        def text(key: str, value: Any) -> str:
            if isinstance(value, dict):
                share = key.startswith("share")
                return "; ".join(f"{names.get(str(k), k)}: " + (f"{v:.1%}" if share else text(key, v)) for k, v in value.items())
            if isinstance(value, (int, np.integer)):
                return f"{int(value):,}"
            if isinstance(value, (float, np.floating)):
                return f"{float(value):,.0f}" if float(value) == int(value) else f"{float(value):,.1f}"
            return str(value)

        return [(key, text(key, value)) for key, value in self.findings.items()]

    def __str__(self) -> str:
        lines = [f"Scenario {self.scenario.file}: {self.scenario.title}"]
        for key, value in self.rows():
            lines.append(f"  {key}: {value}")
        return "\n".join(lines)


def check(scenario: Scenario | str | Path) -> CheckReport:
    """Validate a scenario and its data and say what was found.

    Returns cases, cells, sparse cells and, per outcome kind, the cell-levels never observed
    (where estimates will be borrowed from the target model).
    """
    scenario = as_scenario(scenario)
    if scenario.data.kind == "risk_level_table":
        from policy.decision.table_rules import table_rules
        from policy.estimation.from_scenario import load_risk_level_draws

        draws = load_risk_level_draws(scenario)
        rl = draws.point if draws is not None else estimate_risk_levels(scenario)
        from_table = table_rules(scenario, rl)
        findings = {
            "data": rl.source,
            "cells": rl.n_cells,
            "cases (weight)": float(rl.weights.sum()),
            "sparse cells": int((rl.weights < scenario.estimator.sparse_below).sum()),
            "draws": (f"{draws.n_draws} (point estimate: {draws.point_source})" if draws is not None
                      else "none: point figures only, no intervals"),
            "rules given by the table": "; ".join(r.name for r in from_table.rules) or "none",
        }
        return CheckReport(scenario, None, rl, findings)
    cells = load_cell_table(scenario)
    s = cells.summary(scenario.estimator.sparse_below)
    findings = {
        "data": s["source"],
        "cases": s["cases"],
        "cells": s["cells"],
        "cases per arm": s["cases_per_arm"] if cells.has_arm else "no arm column",
        "cases per decision level": s["cases_per_level"],
        f"sparse cells (< {s['sparse_below']} cases)": f"{s['sparse_cells']:,} holding {s['cases_in_sparse_cells']:,} cases",
        "median cases per cell": s["median_cases_per_cell"],
        "cell-levels never observed, per outcome": s["cell_levels_never_observed"],
        "share of cases with the outcome observed": {k: round(v, 4) for k, v in s["outcome_observed_share"].items()},
    }
    check_arms = arm_check(cells, outcome_labels=scenario.outcome_label_map) if cells.has_arm else None
    if check_arms is not None:
        findings["arm check (unconfoundedness)"] = "rejected" if check_arms.rejects else "not rejected"
    return CheckReport(scenario, cells, None, findings, check_arms)


@dataclass(frozen=True)
class Analysis:
    """The foundation's answer for one scenario: risk levels, costs, the optimal rule, its evaluation."""

    scenario: Scenario
    cells: CellTable | None
    risk_levels: RiskLevels
    costs: Costs
    rule: Rule
    evaluation: Evaluation
    extra_files: Mapping[str, Any] = field(default_factory=dict)
    #: the constrained optimal rule (policy.decision.constrained.ConstrainedRule) when constraints were declared
    constrained: Any = None
    #: the randomized arm's test of unconfoundedness, when the data have an arm
    arm_check: ArmCheck | None = None

    def output_files(self) -> dict[str, Any]:
        """Every output file of ``solve`` by name (documented in docs/outputs.md)."""
        files: dict[str, Any] = {}
        if self.cells is not None:
            files["cells.csv"] = self.cells.counts_frame(self.scenario)
        files["risk_levels.csv"] = self.risk_levels.to_frame()
        files["risk_level_shares.csv"] = self.risk_levels.shares()
        files["costs.csv"] = self.costs.to_frame()
        files["rule.csv"] = self.rule.to_frame()
        files["by_group.csv"] = self.evaluation.by_group()
        files["within_risk_levels.csv"] = self.evaluation.within_risk_levels()
        files["fairness_gaps.csv"] = self.evaluation.fairness_gaps()
        files["evaluation.json"] = {
            "scenario": self.scenario.title,
            "scenario_file": str(self.scenario.path) if self.scenario.path else None,
            "seed": self.scenario.seed,
            "data": self.risk_levels.source,
            "cost_unit": self.costs.unit,
            "cost_note": self.scenario.cost_note,
            "costs": self.costs.to_frame().to_dict(orient="records"),
            "rule": self.rule.name,
            "rule_columns": list(self.rule.rule_cells.columns),
            "overview": self.evaluation.overview(),
            "misplaced": self.evaluation.misplaced().to_dict(orient="records"),
            "assumptions": assumptions_for("rule"),
            "cautions": list(CAUTIONS),
        }
        if self.constrained is not None:
            files.update(self.constrained.output_files())
        if self.arm_check is not None:
            files.update(self.arm_check.output_files())
        files.update(self.extra_files)
        return files


def analyze(scenario: Scenario | str | Path, outcome_costs: Mapping[str, float] | None = None,
            decision_costs: Mapping[str, float] | None = None, constraints: Sequence[Any] = (),
            scenario_constraints: bool = True, lp_settings: Any = None) -> Analysis:
    """Estimate risk levels, build the costs, find the unconstrained optimal rule and score it.

    Parameters
    ----------
    scenario : Scenario or path
    outcome_costs, decision_costs : mapping, optional
        What-if overrides of the scenario's costs (by outcome key / decision value or label).
    constraints : sequence of dict or ConstraintSpec, optional
        Constraints added to the scenario's ``[[constraints]]`` (dicts use the same keys).
    scenario_constraints : bool
        Use the scenario's own ``[[constraints]]`` (default true).
    lp_settings : LPSettings, optional
        How to solve the linear program (default: the scenario's ``[linear_program]``).

    When any constraint applies, :attr:`Analysis.constrained` holds the constrained optimal
    rule (:class:`policy.decision.constrained.ConstrainedRule`); an :class:`~policy.errors.InfeasibleError`
    says which constraints conflict.
    """
    from policy.decision.constrained import ConstrainedProblem
    from policy.decision.constraints import scenario_specs

    scenario = as_scenario(scenario)
    specs = scenario_specs(scenario, constraints, scenario_constraints)
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    rule = optimal_rule(rl, costs)
    constrained = None
    if specs:
        settings = lp_settings if lp_settings is not None else scenario.sections.get("linear_program")
        constrained = ConstrainedProblem(rl, costs, specs, settings=settings).solve()
    check_arms = arm_check(cells, outcome_labels=scenario.outcome_label_map) if cells is not None and cells.has_arm else None
    return Analysis(scenario, cells, rl, costs, rule, evaluate(rule, rl, costs), constrained=constrained,
                    arm_check=check_arms)


def write_demo_inputs(folder: str | Path, cases: int | None = None) -> tuple[Path, pd.DataFrame]:
    """Write the demo's case table and a scenario file that reads it into ``folder``.

    Returns the new scenario's path and the case table. The scenario is the built-in demo's,
    with ``[data] simulate`` replaced by ``case_table = "cases.csv"``.
    """
    from policy.demo.quarrow import demo_scenario_path, simulate_cases
    from policy.outputs import write_outputs

    source = demo_scenario_path()
    base = load_scenario(source)
    n = cases or base.data.simulate
    frame, _ = simulate_cases(n, seed=base.seed)
    text = source.read_text(encoding="utf-8")
    text, count = re.subn(r"(?m)^simulate\s*=\s*\d+.*$", 'case_table = "cases.csv"   # written by `policy demo`', text)
    if count != 1:
        raise RuntimeError("the demo scenario's [data] simulate line was not found")
    folder = Path(folder)
    write_outputs(folder, {"cases.csv": frame, "scenario.toml": text})
    return folder / "scenario.toml", frame


def demo_files(folder: str | Path, cases: int | None = None) -> tuple["Analysis", dict[str, Any]]:
    """The demo's analysis and every file ``policy demo`` writes into ``folder`` (case table,
    scenario and outputs), to be written at once with :func:`policy.outputs.write_outputs`.

    The case table and scenario are staged in a temporary folder while the analysis runs; the
    analysis records the scenario as ``folder/scenario.toml``, where it will be.
    """
    import dataclasses
    import tempfile

    with tempfile.TemporaryDirectory(prefix="policy-demo-") as tmp:
        scenario_path, frame = write_demo_inputs(tmp, cases)
        text = scenario_path.read_text(encoding="utf-8")
        scenario = dataclasses.replace(load_scenario(scenario_path), path=(Path(folder) / "scenario.toml").resolve())
        analysis = analyze(scenario)
        draws, draws_text = demo_draws(scenario_path, text)
    return analysis, {"cases.csv": frame, "scenario.toml": text, DEMO_DRAWS: draws, DEMO_DRAWS_SCENARIO: draws_text,
                      **analysis.output_files()}


#: the demo's risk-level table with draws and the scenario that reads it (the route for risk levels
#: estimated elsewhere), and the number of draws in it
DEMO_DRAWS, DEMO_DRAWS_SCENARIO, DEMO_DRAW_COUNT = "risk_level_draws.csv", "from_draws.toml", 20


def demo_draws(scenario_path: Path, text: str) -> tuple[pd.DataFrame, str]:
    """The demo's risk levels with the tool's own bootstrap replicates as draws (multinomial, cell
    sizes held), what courts did and the screen's level per cell, and a scenario that reads them."""
    from policy.assessment.draws_export import bootstrap_draws_table

    table = bootstrap_draws_table(scenario_path, replicates=DEMO_DRAW_COUNT, resampling="multinomial", workers=1)
    q = [c for c in table.columns if c.startswith("risk_level_")]
    table[q[:-1]] = table[q[:-1]].round(9)
    table[q[-1]] = (1.0 - table[q[:-1]].sum(axis=1)).clip(lower=0.0)
    out, n = re.subn(r"(?m)^case_table\s*=.*$", f'risk_level_table = "{DEMO_DRAWS}"   # written by `policy demo`', text)
    out, m = re.subn(r"(?m)^arm\s*=.*\n", "", out)  # a risk-level table has no arm column
    out, k = re.subn(r'(?m)^title\s*=.*$', 'title = "Quarrow County from risk-level draws (invented demo)"', out)
    if (n, m, k) != (1, 1, 1):
        raise RuntimeError("the demo scenario's case_table, arm or title line was not found")
    head = (f"# The demo's risk levels with {DEMO_DRAW_COUNT} of the tool's own bootstrap replicates as draws, read from\n"
            f"# {DEMO_DRAWS} (written by `policy demo`): the route for risk levels estimated elsewhere (posterior\n"
            "# draws of any model fit the same columns). Its point rows also say what courts did, by arm, and the\n"
            "# screen's recommended level per cell. Try `policy compare from_draws.toml --out from-draws`.\n")
    return table, head + out
