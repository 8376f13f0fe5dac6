"""The live controls and their data: what the page's JavaScript needs to re-solve and re-score
rules as costs move (the same argmin and sums as the Python engine)."""

from __future__ import annotations

import math
import shlex
from typing import Any

import numpy as np

from policy.decision.solve import TIE_TOLERANCE
from policy.presentation.report.formatting import DIGITS, fmt_num, level_colours, tint
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


def starting_factor(results: ReportResults, d: int) -> float:
    """The factor on a level's per-cell costs the report starts from: a
    :class:`~policy.decision.costs.CostFactor` override, else the scenario's ``cost_factor``."""
    from policy.decision.costs import CostFactor

    level = results.scenario.levels[d]
    given = dict(results.decision_costs or {})
    value = given.get(level.value, given.get(level.label))
    return float(value) if isinstance(value, CostFactor) else float(level.cost_factor)


def unscaled_costs(results: ReportResults, d: int) -> np.ndarray:
    """A per-cell cost level's costs from its column, before any factor (shape n_cells)."""
    level = results.scenario.levels[d]
    return np.asarray(results.analysis.risk_levels.cell_costs[level.cost_column], dtype=np.float64)


def controls(results: ReportResults) -> list[dict[str, Any]]:
    """One control per outcome cost and per decision level's cost, with its range and meaning.

    A level whose cost is one number is set directly; a level whose cost comes per cell from a
    cost column is set by a factor on those costs (its cells keep their relative costs; the
    command line's ``--decision-cost-factor``).
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
            factor = starting_factor(results, d)
            out.append({"id": f"cost-level-{d}", "kind": "decision", "index": d, "mode": "scale",
                        "label": f"cost of {level.label}: a factor on each cell's own cost",
                        "value": factor, "min": 0.0, "max": max(4.0, _slider_max(factor, 1.0)), "step": 0.01,
                        "mean": mean, "mean_text": fmt_num(mean),
                        "source": level.cost_source, "unit": costs.unit})
    return out


def _finite_list(values: np.ndarray) -> list:
    """Numbers for JSON, with None where a value is missing (an infeasible grid point)."""
    return [float(v) if np.isfinite(v) else None for v in np.asarray(values, dtype=np.float64)]


def export_data(results: ReportResults) -> dict[str, Any]:
    """What the export needs: the scenario's path as a shell word, its keys, and the starting costs."""
    sc = results.scenario
    path = str(sc.path) if sc.path is not None else "SCENARIO.toml"
    return {
        "scenario": shlex.quote(path),
        "outcome_keys": list(sc.outcome_keys),
        "level_values": list(sc.level_values),
        "level_columns": [level.cost_column for level in sc.levels],
        "rule_columns": [str(c) for c in results.analysis.rule.rule_cells.columns],
        "rule_column_labels": [sc.column_label(str(c)) for c in results.analysis.rule.rule_cells.columns],
    }


def live_data(results: ReportResults) -> dict[str, Any]:
    """What the page's script needs to recompute the rule: per-cell arrays and the compared rules.

    Keys: ``p`` (n_cells x J x L, flattened row-major), ``weights``, ``decision_base`` (n_cells x L,
    the decision costs per cell; a level set by a factor has its unscaled per-cell costs here), ``outcome_costs``, ``controls``, ``rule_index`` (the
    rule cell of each cell), ``rule_cells`` (their values, as text), ``scenario_levels`` (the
    rule at the scenario's costs), ``compared`` (name, ``delta`` per rule cell, ``index`` per cell),
    ``tie_tolerance``, ``digits`` and labels.
    """
    a = results.analysis
    rl, costs, rule = a.risk_levels, a.costs, a.rule
    compared = [{"name": c.rule.name, "kind": c.rule.kind, "delta": c.rule.delta.tolist(), "index": c.rule.index.tolist()}
                for c in results.compared]
    base = costs.decision.copy()
    ctl = controls(results)
    for c in ctl:
        if c["mode"] == "scale":
            base[:, c["index"]] = unscaled_costs(results, c["index"])
    return {
        "export": export_data(results),
        "n_cells": int(rl.n_cells),
        "n_outcomes": len(rl.outcome_keys),
        "n_levels": int(rl.n_levels),
        "level_labels": list(rl.level_labels),
        "outcome_labels": list(rl.outcome_labels),
        "unit": costs.unit,
        "weights": rl.weights.astype(float).tolist(),
        "p": rl.p.reshape(-1).tolist(),
        "decision_base": base.reshape(-1).tolist(),
        "outcome_costs": costs.outcome.tolist(),
        "controls": [{k: c[k] for k in ("id", "kind", "index", "mode", "value", "min", "max", "step")}
                     for c in ctl],
        "rule_index": rule.index.tolist(),
        "rule_cells": [[str(v) for v in row] for row in rule.rule_cells.itertuples(index=False, name=None)],
        "scenario_levels": rule.level.tolist(),
        "rule_cases": [float(v) for v in rule.weights],
        "level_values": list(a.scenario.level_values),
        "level_colours": [[c, tint(c)] for c in level_colours(int(rl.n_levels))],
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
