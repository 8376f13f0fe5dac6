"""Release-rule analysis for pretrial decisions.

Stages, one folder each, data flowing one way: ``inputs`` -> ``estimation`` -> ``decision`` ->
``assessment`` -> ``running`` -> ``presentation`` (``demo`` is a data source). For analysis of
rules for groups of cases, never for a decision about an individual.
"""

from policy.cautions import CAUTIONS
from policy.inputs.cells import CellLayout, CellTable
from policy.inputs.loading import load_cell_table
from policy.decision.constrained import ConstrainedProblem, ConstrainedRule, LPSettings, LPSolution, solve_constrained
from policy.decision.constraints import ConstraintSpec
from policy.decision.costs import CostFactor, Costs, costs_from_scenario, expected_cost
from policy.errors import InfeasibleError, InputError, PolicyError, SolverError
from policy.estimation.bounds import RiskBounds, manski_bounds, sensitivity_bounds
from policy.decision.evaluate import Evaluation, evaluate
from policy.estimation.from_scenario import estimate_risk_levels
from policy.running.pipeline import Analysis, CheckReport, analyze, check, estimate
from policy.presentation.report import Report, build_report
from policy.assessment.uncertainty import BootstrapResult, bootstrap
from policy.assessment.compare import Comparison, compare
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario, load_scenario
from policy.decision.solve import optimal_rule
from policy.assessment.sweep import LenientMap, OneRatioSweep, SweepResult, lenient_map, ratio_axis, sweep_one, sweep_scenario
from policy.estimation.strata import (
    RiskLevelEstimator,
    RiskLevels,
    isotonic_nonincreasing,
    risk_level_distribution,
)

from policy import demo as demo  # registers the demo's simulator as the [data] simulate source

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
