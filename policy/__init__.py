"""Release-rule analysis for pretrial decisions.

Stages (each a module with one job, data flowing one way):
scenario -> cells -> strata -> costs -> solve -> evaluate -> (compare, sweep, uncertainty)
-> plots, report, cli. For analysis of rules for groups of cases, never for a decision about
an individual.
"""

from .cautions import CAUTIONS
from .cells import CellLayout, CellTable, load_cell_table
from .constrained import ConstrainedProblem, ConstrainedRule, LPSettings, LPSolution, solve_constrained
from .constraints import ConstraintSpec
from .costs import Costs, costs_from_scenario, expected_cost
from .errors import InfeasibleError, InputError, PolicyError, SolverError
from .bounds import RiskBounds, manski_bounds, sensitivity_bounds
from .evaluate import Evaluation, evaluate
from .pipeline import Analysis, CheckReport, analyze, check, estimate
from .report import Report, build_report
from .uncertainty import BootstrapResult, bootstrap
from .compare import Comparison, compare
from .rules import Rule
from .scenario import Scenario, load_scenario
from .solve import optimal_rule
from .sweep import LenientMap, OneRatioSweep, SweepResult, lenient_map, ratio_axis, sweep_one, sweep_scenario
from .strata import (
    RiskLevelEstimator,
    RiskLevels,
    estimate_risk_levels,
    isotonic_nonincreasing,
    risk_level_distribution,
)

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
