"""Release-rule analysis for pretrial decisions.

Stages, one folder each, data flowing one way: ``inputs`` -> ``estimation`` -> ``decision`` ->
``assessment`` -> ``running`` -> ``presentation`` (``demo`` is a data source). For analysis of
rules for groups of cases, never for a decision about an individual.
"""

from __future__ import annotations

import importlib

from policy.inputs import registry as _registry

# the demo's simulator is the [data] simulate source; its module is imported only when a
# scenario asks for it (policy.inputs never imports the demo itself)
_registry.register_simulator_module("policy.demo")
# the later stages' scenario sections register themselves when their modules are imported,
# which happens when the first scenario is parsed
for _module in ("policy.decision.constraints", "policy.decision.constrained.settings", "policy.decision.candidates",
                "policy.assessment.uncertainty"):
    _registry.register_section_module(_module)

#: where each public name lives; a name's module is imported on first use (``policy.X``,
#: ``from policy import X``), so ``import policy`` and ``python -m policy --help`` stay fast
_LAZY = {
    "CAUTIONS": "policy.cautions",
    "CellLayout": "policy.inputs.cells",
    "CellTable": "policy.inputs.cells",
    "load_cell_table": "policy.inputs.loading",
    "ConstrainedProblem": "policy.decision.constrained",
    "ConstrainedRule": "policy.decision.constrained",
    "LPSettings": "policy.decision.constrained",
    "LPSolution": "policy.decision.constrained",
    "solve_constrained": "policy.decision.constrained",
    "ConstraintSpec": "policy.decision.constraints",
    "CostFactor": "policy.decision.costs",
    "Costs": "policy.decision.costs",
    "costs_from_scenario": "policy.decision.costs",
    "expected_cost": "policy.decision.costs",
    "InfeasibleError": "policy.errors",
    "InputError": "policy.errors",
    "PolicyError": "policy.errors",
    "SolverError": "policy.errors",
    "RiskBounds": "policy.estimation.bounds",
    "manski_bounds": "policy.estimation.bounds",
    "sensitivity_bounds": "policy.estimation.bounds",
    "Evaluation": "policy.decision.evaluate",
    "evaluate": "policy.decision.evaluate",
    "estimate_risk_levels": "policy.estimation.from_scenario",
    "Analysis": "policy.running.pipeline",
    "CheckReport": "policy.running.pipeline",
    "analyze": "policy.running.pipeline",
    "check": "policy.running.pipeline",
    "estimate": "policy.running.pipeline",
    "Report": "policy.presentation.report",
    "build_report": "policy.presentation.report",
    "BootstrapResult": "policy.assessment.uncertainty",
    "bootstrap": "policy.assessment.uncertainty",
    "Comparison": "policy.assessment.compare",
    "compare": "policy.assessment.compare",
    "Rule": "policy.decision.rules",
    "Scenario": "policy.inputs.scenario",
    "load_scenario": "policy.inputs.scenario",
    "optimal_rule": "policy.decision.solve",
    "LenientMap": "policy.assessment.sweep",
    "OneRatioSweep": "policy.assessment.sweep",
    "SweepResult": "policy.assessment.sweep",
    "lenient_map": "policy.assessment.sweep",
    "ratio_axis": "policy.assessment.sweep",
    "sweep_one": "policy.assessment.sweep",
    "sweep_scenario": "policy.assessment.sweep",
    "RiskLevelEstimator": "policy.estimation.strata",
    "RiskLevels": "policy.estimation.strata",
    "isotonic_nonincreasing": "policy.estimation.strata",
    "risk_level_distribution": "policy.estimation.strata",
}


def __getattr__(name: str):
    """Import a public name's module on first use (PEP 562) and keep the name."""
    module = _LAZY.get(name)
    if module is None:
        if name == "demo":
            value = importlib.import_module("policy.demo")
            globals()[name] = value
            return value
        raise AttributeError(f"module 'policy' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY) | {"demo"})


__version__ = "0.1.0"

__all__ = [
    "CAUTIONS",
    "Analysis",
    "CellLayout",
    "CellTable",
    "CheckReport",
    "BootstrapResult",
    "Comparison",
    "ConstrainedProblem",
    "ConstrainedRule",
    "ConstraintSpec",
    "Costs",
    "Evaluation",
    "InfeasibleError",
    "InputError",
    "LPSettings",
    "LPSolution",
    "LenientMap",
    "OneRatioSweep",
    "PolicyError",
    "Report",
    "RiskBounds",
    "RiskLevelEstimator",
    "RiskLevels",
    "Rule",
    "Scenario",
    "SolverError",
    "SweepResult",
    "analyze",
    "build_report",
    "bootstrap",
    "check",
    "compare",
    "costs_from_scenario",
    "CostFactor",
    "estimate",
    "estimate_risk_levels",
    "evaluate",
    "expected_cost",
    "isotonic_nonincreasing",
    "lenient_map",
    "load_cell_table",
    "load_scenario",
    "manski_bounds",
    "optimal_rule",
    "ratio_axis",
    "risk_level_distribution",
    "sensitivity_bounds",
    "solve_constrained",
    "sweep_one",
    "sweep_scenario",
]
