"""The invented Quarrow County: a case simulator with exact per-cell truth, for the demo and tests.

Not a stage: a data source. It registers its simulator with ``policy.inputs.cells`` as the
``[data] simulate`` source when imported (``policy/__init__`` imports it), so the cell stage
never imports the demo.

May import: ``policy.inputs``, ``policy.estimation`` and the shared modules.
"""

from policy.demo.quarrow import DEMO, builtin_scenarios, demo_scenario_path, simulate_cases, true_risk_levels

from policy.inputs.loading import register_simulator


def _simulated_cases(n_cases: int, seed: int | None):
    return simulate_cases(n_cases, seed=seed)[0]


register_simulator(_simulated_cases)

__all__ = ["simulate_cases", "true_risk_levels", "DEMO", "builtin_scenarios", "demo_scenario_path"]
