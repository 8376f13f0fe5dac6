"""The live controls and their data: what the page's JavaScript needs to re-solve and re-score
rules as costs move (the same argmin and sums as the Python engine)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from policy.decision.solve import TIE_TOLERANCE
from policy.presentation.report.formatting import DIGITS, fmt_num
from policy.presentation.report.model import ReportResults


# The live controls and their data
# ----------------------------------------------------------------------------------------------
def _constant(column: np.ndarray) -> bool:
    """Whether a decision level costs the same in every cell (then it is set as one number)."""
    return len(column) == 0 or float(column.min()) == float(column.max())


def _slider_max(value: float, fallback: float) -> float:
    """A round upper end for a cost slider: about four times the value (or the fallback)."""
    top = 4.0 * (value if value > 0 else fallback if fallback > 0 else 1000.0)
    mag = 10.0 ** math.floor(math.log10(top))
    for step in (1.0, 2.0, 2.5, 5.0, 10.0):
        if step * mag >= top:
            return step * mag
    return 10.0 * mag


def controls(results: ReportResults) -> list[dict[str, Any]]:
    """One control per outcome cost and per decision level's cost, with its range and meaning.

    A level whose cost is one number is set directly; a level whose cost comes per cell from a
    cost column is scaled by a factor (its cells keep their relative costs).
    """
    a = results.analysis
    sc, costs, w = a.scenario, a.costs, a.risk_levels.weights
    biggest = float(max(costs.outcome.max(initial=0.0), costs.decision.max(initial=0.0)))
    out: list[dict[str, Any]] = []
    for j, o in enumerate(sc.outcomes):
        value = float(costs.outcome[j])
        top = _slider_max(value, biggest)
        out.append({"id": f"cost-outcome-{j}", "kind": "outcome", "index": j, "mode": "value",
                    "label": f"cost of one {o.label}", "value": value, "min": 0.0, "max": top, "step": top / 400,
                    "source": o.cost_source, "unit": costs.unit})
    for d, level in enumerate(sc.levels):
        column = costs.decision[:, d]
        if _constant(column):
            value = float(column[0]) if len(column) else float(level.cost or 0.0)
            top = _slider_max(value, biggest / 4)
            out.append({"id": f"cost-level-{d}", "kind": "decision", "index": d, "mode": "value",
                        "label": f"cost of {level.label} (per case)", "value": value, "min": 0.0, "max": top,
                        "step": top / 400, "source": level.cost_source, "unit": costs.unit})
        else:
            mean = float(np.average(costs.decision[:, d], weights=w))
            out.append({"id": f"cost-level-{d}", "kind": "decision", "index": d, "mode": "scale",
                        "label": f"cost of {level.label}: factor on each cell's cost from column {level.cost_column}",
                        "value": 1.0, "min": 0.0, "max": 4.0, "step": 0.01, "mean": mean, "mean_text": fmt_num(mean),
                        "source": level.cost_source, "unit": costs.unit})
    return out


def _finite_list(values: np.ndarray) -> list:
    """Numbers for JSON, with None where a value is missing (an infeasible grid point)."""
    return [float(v) if np.isfinite(v) else None for v in np.asarray(values, dtype=np.float64)]


def live_data(results: ReportResults) -> dict[str, Any]:
    """What the page's script needs to recompute the rule: per-cell arrays and the compared rules.

    Keys: ``p`` (n_cells x J x L, flattened row-major), ``weights``, ``decision_base`` (n_cells x L,
    the scenario's decision costs per cell), ``outcome_costs``, ``controls``, ``rule_index`` (the
    rule cell of each cell), ``rule_cells`` (their values, as text), ``scenario_levels`` (the
    rule at the scenario's costs), ``compared`` (name, ``delta`` per rule cell, ``index`` per cell),
    ``tie_tolerance``, ``digits`` and labels.
    """
    a = results.analysis
    rl, costs, rule = a.risk_levels, a.costs, a.rule
    compared = [{"name": c.rule.name, "delta": c.rule.delta.tolist(), "index": c.rule.index.tolist()}
                for c in results.compared]
    return {
        "n_cells": int(rl.n_cells),
        "n_outcomes": len(rl.outcome_keys),
        "n_levels": int(rl.n_levels),
        "level_labels": list(rl.level_labels),
        "outcome_labels": list(rl.outcome_labels),
        "unit": costs.unit,
        "weights": rl.weights.astype(float).tolist(),
        "p": rl.p.reshape(-1).tolist(),
        "decision_base": costs.decision.reshape(-1).tolist(),
        "outcome_costs": costs.outcome.tolist(),
        "controls": [{k: c[k] for k in ("id", "kind", "index", "mode", "value", "min", "max", "step")}
                     for c in controls(results)],
        "rule_index": rule.index.tolist(),
        "rule_cells": [[str(v) for v in row] for row in rule.rule_cells.itertuples(index=False, name=None)],
        "scenario_levels": rule.level.tolist(),
        "compared": compared,
        "tie_tolerance": TIE_TOLERANCE,
        "digits": DIGITS,
        "constrained": [
            {"outcome_index": sw.axis.outcome_index, "ratios": sw.ratios.tolist(), "reference_cost": sw.axis.reference_cost,
             "feasible": sw.feasible[0].tolist(), "cost": _finite_list(sw.cost[0]), "price": _finite_list(sw.price[0]),
             "shares": [_finite_list(row) for row in sw.shares[0]]}
            for sw in results.constrained_sweeps
        ],
    }


# ----------------------------------------------------------------------------------------------
