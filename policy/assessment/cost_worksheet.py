"""The cost worksheet: for each cost of a scenario, how it was built, its sources and their
provenance flags, and the range over which the cost-minimizing rule does not change.

**The range, exactly.** Let one cost t vary with every other cost at the scenario's value. The
total expected cost of decision d in rule cell g is then a line in t,
T_g(d; t) = T_g(d; t0) + (t - t0) B_g(d), with B_g(d) = sum_{x in g} w(x) p_jd(x) for the cost
of outcome kind j, B_g(d) = [d = k] sum_{x in g} w(x) for a flat cost of decision level k, and
B_g(d) = [d = k] sum_{x in g} w(x) c_dec(k, x) for a factor on a level's per-cell costs (t is
then the factor, t0 = 1). The rule keeps level d*_g in cell g while T_g(d*_g; t) <= T_g(d; t)
for every other d: with D = T_g(d; t0) - T_g(d*_g; t0) >= 0 and E = B_g(d) - B_g(d*_g), each
pair bounds t from above at t0 + D / (-E) when E < 0 and from below at t0 - D / E when E > 0.
The range is the intersection over cells and levels, cut at t >= 0 (a cost is never negative):
the same breakpoints as the exact one-ratio sweep (:mod:`policy.assessment.sweep`), read off at
the scenario's own point. At an end a level ties; ties go to the more lenient level, so at
the upper end of a cost that makes the rule harsher the rule may already have changed.

The range is for the unconstrained cost-minimizing rule over the scenario's rule cells. A
narrow range marks a number whose source deserves the committee's scrutiny; a wide one a
number the recommendation does not hinge on.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.cautions import CAUTIONS, assumptions_for
from policy.decision.costs import Costs
from policy.decision.solve import aggregation_matrix, argmin_lenient
from policy.estimation.strata import RiskLevels
from policy.inputs.cost_build import fmt_amount
from policy.inputs.cost_library import FLAGS, WARNING

__all__ = ["CostRange", "cost_ranges", "CostWorksheet", "cost_worksheet", "worksheet_scenario"]

#: order of the provenance flags from strongest to weakest; a cost is as weak as its weakest part
_STRENGTH = {flag: i for i, flag in enumerate(FLAGS)}


@dataclass(frozen=True)
class CostRange:
    """Where one cost may move without changing the cost-minimizing rule.

    Attributes
    ----------
    value, low, high : float
        The cost (or factor) now and the ends of the range (``high`` may be +inf).
    below, above : str
        Which rule cell changes first, and how, just past each end ("" where none does).
    """

    value: float
    low: float
    high: float
    below: str = ""
    above: str = ""


def _range(total: np.ndarray, slope: np.ndarray, t0: float, groups: pd.DataFrame,
           level_labels: Sequence[str], label: Callable[[str], str] = str) -> CostRange:
    """The exact range of t keeping each rule cell's level (module docstring)."""
    g = np.arange(total.shape[0])
    best = argmin_lenient(total)
    gap = total - total[g, best][:, None]
    tilt = slope - slope[g, best][:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        up = np.where(tilt < 0, t0 + gap / -tilt, np.inf)
        down = np.where(tilt > 0, t0 - gap / tilt, -np.inf)
    high, low = float(up.min()), max(0.0, float(down.max()))

    def change(bound: np.ndarray, pick) -> str:
        cell, level = np.unravel_index(pick(bound), bound.shape)
        where = ", ".join(f"{label(c)} {groups.iloc[cell][c]}" for c in groups.columns)
        return f"{where}: {level_labels[best[cell]]} -> {level_labels[level]}"

    below = change(down, np.argmax) if float(down.max()) > 0 else ""
    above = change(up, np.argmin) if np.isfinite(high) else ""
    return CostRange(t0, low, high, below, above)


def cost_ranges(risk_levels: RiskLevels, costs: Costs, decision_flat: Sequence[bool] | None = None,
                columns: Sequence[str] | None = None,
                label: Callable[[str], str] = str) -> list[tuple[str, int, CostRange]]:
    """The range of each cost over which the cost-minimizing rule does not change.

    Parameters
    ----------
    risk_levels : RiskLevels
    costs : Costs
    decision_flat : sequence of bool, optional
        For each decision level, whether its cost is one number for every case (its range is
        in the cost unit) or per cell from a column (its range is a factor on those costs).
        Default: flat where every cell has the same cost.
    columns : sequence of str, optional
        Columns of the rule cells (default: the scenario's rule covariates).
    label : callable, optional
        A rule column's display name in the ``below``/``above`` texts (default: the name).

    Returns
    -------
    list of (kind, position, CostRange)
        ``("decision", k, ...)`` for each level, then ``("outcome", j, ...)`` for each kind.
    """
    index, groups = risk_levels.layout.rule_index(columns)
    m = aggregation_matrix(index, len(groups), risk_levels.weights)
    total = m @ costs.expected(risk_levels.p)
    n_levels = total.shape[1]
    if decision_flat is None:
        decision_flat = [bool(np.ptp(costs.decision[:, k]) == 0) for k in range(n_levels)]
    out = []
    cases = m @ np.ones(risk_levels.n_cells)
    for k in range(n_levels):
        slope = np.zeros_like(total)
        if decision_flat[k]:
            slope[:, k] = cases
            t0 = float(costs.decision[0, k]) if len(costs.decision) else 0.0
        else:
            slope[:, k] = m @ costs.decision[:, k]
            t0 = 1.0
        out.append(("decision", k, _range(total, slope, t0, groups, risk_levels.level_labels, label)))
    for j in range(len(costs.outcome)):
        out.append(("outcome", j, _range(total, m @ risk_levels.p[:, j, :], float(costs.outcome[j]), groups,
                                         risk_levels.level_labels, label)))
    return out


def _stated_flag(text: str) -> str:
    """The provenance flag a stated cost's source text names (its first), else 'assumption' when
    it names no source at all."""
    lowered = text.lower()
    found = sorted((lowered.find(flag), flag) for flag in FLAGS if flag in lowered)
    if found:
        return found[0][1]
    return "stated, no flag" if text.strip() else "assumption"


@dataclass
class CostWorksheet:
    """Each cost of a scenario with its build, sources, flags and the range where the rule holds.

    Attributes
    ----------
    costs : pandas.DataFrame
        One row per cost: ``kind, key, name, value, unit, built_from, arithmetic, sources,
        provenance, price_years, range_of, low, high, low_factor, high_factor, changes_below,
        changes_above, note``.
    components : pandas.DataFrame
        One row per cost and library component (or number written in the scenario) it uses.
    """

    title: str
    unit: str
    costs: pd.DataFrame
    components: pd.DataFrame
    price_year: int | None = None
    assumptions: tuple[str, ...] = field(default_factory=lambda: tuple(assumptions_for("sweep")))

    def to_frame(self) -> pd.DataFrame:
        return self.costs.copy()

    def describe(self) -> dict[str, Any]:
        return {"title": self.title, "unit": self.unit, "price_year": self.price_year, "warning": WARNING,
                "range_meaning": ("low..high: the values of this one cost (every other at the scenario's value) "
                                  "over which the unconstrained cost-minimizing rule does not change"),
                "assumptions": list(self.assumptions), "cautions": list(CAUTIONS),
                "costs": self.costs.replace({np.inf: None}).to_dict(orient="records"),
                "components": self.components.to_dict(orient="records")}

    def output_files(self) -> dict[str, Any]:
        return {"cost_worksheet.csv": self.costs, "cost_worksheet_components.csv": self.components,
                "cost_worksheet.json": self.describe()}

    def sentences(self) -> list[str]:
        """One plain line per cost: its value, build, flag and range."""
        lines = []
        for row in self.costs.itertuples():
            span = f"{fmt_amount(row.low)} to {'no limit' if not np.isfinite(row.high) else fmt_amount(row.high)}"
            factor = "" if row.range_of == "cost" else f" ({row.low_factor:.2f}x to {row.high_factor:.2f}x its per-cell costs)"
            what = "its cost" if row.range_of == "cost" else "its mean cost"
            lines.append(f"{row.name}: {row.arithmetic or fmt_amount(row.value)} [{row.provenance}]; "
                         f"the rule holds for {what} {span}{factor}")
        return lines

    def __str__(self) -> str:
        return "\n".join([f"Cost worksheet, {self.unit}", *(f"  {s}" for s in self.sentences()), WARNING])


def _component_rows(key: str, build) -> list[dict[str, Any]]:
    rows = []
    for part, built in build.parts:
        for c in built.components:
            rows.append({"cost": key, "class": part or "", "component": c.key, "what": c.component, "value": c.value,
                         "unit": c.unit, "year": c.year, "factor": c.factor, "in_scenario_prices": c.adjusted,
                         "price_note": c.price_note, "source": c.source, "provenance": c.provenance})
        for number in built.numbers:
            rows.append({"cost": key, "class": part or "", "component": "(a number in the scenario)", "what": "",
                         "value": number, "unit": "", "year": None, "factor": 1.0, "in_scenario_prices": number,
                         "price_note": "", "source": "written in the scenario's cost_from", "provenance": "assumption"})
    return rows


def cost_worksheet(scenario: Any, risk_levels: RiskLevels, costs: Costs, columns: Sequence[str] | None = None) -> CostWorksheet:
    """The worksheet of a scenario's costs as used in ``costs`` (see :class:`CostWorksheet`).

    A cost set on the command line (different from the scenario's) is marked so; its build
    from the library no longer applies to it.
    """
    entries = [("decision", lv.value, lv.label, lv, k) for k, lv in enumerate(scenario.levels)]
    entries += [("outcome", o.key, o.label, o, j) for j, o in enumerate(scenario.outcomes)]
    flat = [lv.cost_column is None for lv in scenario.levels]
    ranges = {(kind, i): r for kind, i, r in cost_ranges(risk_levels, costs, flat, columns, scenario.column_label)}
    weights = risk_levels.weights
    rows, parts = [], []
    for kind, key, label, item, i in entries:
        r = ranges[(kind, i)]
        column = costs.decision[:, i] if kind == "decision" else np.full(risk_levels.n_cells, costs.outcome[i])
        value = float(np.average(column, weights=weights)) if weights.sum() > 0 else float(column.mean())
        build = item.cost_build
        stated = item.cost if kind == "outcome" or item.cost_column is None else None
        overridden = stated is not None and abs(value - stated) > 1e-9 * max(1.0, abs(stated))
        note = ""
        if build is not None and not overridden:
            parts.extend(_component_rows(key, build))
            flags = [c.provenance for c in build.components] + ["assumption"] * sum(len(b.numbers) for _, b in build.parts)
            provenance = max(flags, key=lambda f: _STRENGTH.get(f, len(FLAGS))) if flags else "assumption"
            sources = "; ".join(f"{c.key}: {c.source} ({c.provenance})" for c in build.components)
            years = "; ".join(f"{c.key}: {c.price_note}" for c in build.components if c.year is not None)
            by_label = None if build.by is None else scenario.column_label(build.by)
            built_from, arithmetic = build_text(build, by_label)
            if build.by is not None:
                note = _by_check(build, risk_levels, costs.decision[:, i], by_label)
            elif abs(build.value - value) > 1e-9 * max(1.0, value):
                note = f"the scenario states {fmt_amount(value)}; its build comes to {fmt_amount(build.value)}"
        else:
            text = item.cost_source or ""
            provenance = "set on the command line" if overridden else _stated_flag(text)
            sources = "the command line" if overridden else (text or "none given")
            years, built_from = "", "stated in the scenario" if not overridden else "set on the command line"
            arithmetic = "" if kind == "outcome" or item.cost_column is None else f"per case from column {item.cost_column}"
        flat_range = kind == "outcome" or flat[i]
        unit_low, unit_high = (r.low, r.high) if flat_range else (r.low * value, r.high * value)
        base = r.value if flat_range else 1.0
        rows.append({"kind": kind, "key": key, "name": label, "value": value, "unit": scenario.cost_unit,
                     "built_from": built_from, "arithmetic": arithmetic, "sources": sources, "provenance": provenance,
                     "price_years": years, "range_of": "cost" if flat_range else "factor",
                     "low": unit_low, "high": unit_high,
                     "low_factor": r.low / base if base > 0 else np.nan,
                     "high_factor": r.high / base if base > 0 else np.nan,
                     "changes_below": r.below, "changes_above": r.above, "note": note})
    columns_out = ["cost", "class", "component", "what", "value", "unit", "year", "factor", "in_scenario_prices",
                   "price_note", "source", "provenance"]
    library = getattr(scenario, "cost_library", None)
    return CostWorksheet(scenario.title, scenario.cost_unit, pd.DataFrame(rows), pd.DataFrame(parts, columns=columns_out),
                         None if library is None else library.price_year)


def build_text(build, by_label: str | None = None) -> tuple[str, str]:
    """A build's expression(s) and its arithmetic, for a table (classes named by ``by_label``)."""
    if build.by is None:
        return build.parts[0][1].expression, build.parts[0][1].arithmetic
    label = by_label or build.by
    return ("; ".join(f"{label} {name}: {b.expression}" for name, b in build.parts), build.describe(label))


def _by_check(build, risk_levels: RiskLevels, cell_cost: np.ndarray, by_label: str | None = None) -> str:
    """Whether the data's per-cell costs agree with a build by class (case-weighted means)."""
    frame = risk_levels.layout.frame
    if build.by not in frame.columns:
        return ""
    values = frame[build.by].astype(str).to_numpy()
    off = []
    for name, built in build.parts:
        mask = values == name
        w = risk_levels.weights[mask]
        if not mask.any() or w.sum() <= 0:
            continue
        mean = float(np.average(cell_cost[mask], weights=w))
        if abs(mean - built.value) > 0.5:
            off.append(f"{name}: data {fmt_amount(mean)}, build {fmt_amount(built.value)}")
    if off:
        return "the data's per-case costs differ from the build (" + "; ".join(off) + ")"
    return f"the data's per-case costs agree with the build for every {by_label or build.by}"


def worksheet_scenario(scenario: Any, outcome_costs: Mapping[str, float] | None = None,
                       decision_costs: Mapping[str, float] | None = None) -> CostWorksheet:
    """The cost worksheet of one scenario end to end (what ``policy worksheet`` calls)."""
    from policy.decision.costs import costs_from_scenario
    from policy.estimation.from_scenario import estimate
    from policy.inputs.scenario import as_scenario

    scenario = as_scenario(scenario)
    _, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    return cost_worksheet(scenario, rl, costs)
