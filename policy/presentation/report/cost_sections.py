"""The report's cost sections: the cost worksheet (each cost's build, sources, flags and the range
where the recommended rule holds) and the costs implied by what courts did. Both read the
analysis the report is built on; the figures come from :mod:`policy.assessment.cost_worksheet`
and :mod:`policy.assessment.implied`."""

from __future__ import annotations

import math

import pandas as pd

from policy.cautions import assumptions_for
from policy.presentation.report.formatting import TableView, fmt_num
from policy.presentation.report.model import ReportResults, Section

__all__ = ["worksheet_section", "implied_section"]


def _end(value: float) -> str:
    return "no limit" if value is None or not math.isfinite(float(value)) else fmt_num(value)


def _signed(value: float) -> str:
    if value is None or not math.isfinite(float(value)):
        return "no limit" if value and value > 0 else "no limit below"
    return fmt_num(value)


def worksheet_section(results: ReportResults) -> Section | None:
    """Each cost of the scenario, how it was built and from what, and where the rule holds."""
    from policy.assessment.cost_worksheet import cost_worksheet
    from policy.inputs.cost_library import WARNING

    a = results.analysis
    sheet = cost_worksheet(a.scenario, a.risk_levels, a.costs)
    frame = sheet.costs
    rows = []
    for row in frame.itertuples():
        factor = "" if row.range_of == "cost" else f" ({row.low_factor:.2f}x to {row.high_factor:.2f}x)"
        rows.append((row.name, fmt_num(row.value, 2 if row.value != round(row.value) else 0), row.arithmetic or row.built_from,
                     row.provenance, f"{_end(row.low)} to {_end(row.high)}{factor}",
                     "; ".join(x for x in (row.changes_below and f"below: {row.changes_below}",
                                           row.changes_above and f"above: {row.changes_above}") if x)))
    costs = TableView(f"Each cost in {sheet.unit}, how it was built, the weakest provenance flag of its parts, and the "
                      "range over which the cost-minimizing rule does not change (that one cost moving, every other at "
                      "the scenario's value)",
                      ("cost", "value", "how it was built", "provenance", "the rule holds from ... to", "what changes first"),
                      tuple(rows), (False, True, False, False, True, False))
    parts = sheet.components
    sources = None
    if len(parts):
        used = parts.drop_duplicates("component")[["component", "what", "value", "unit", "year", "price_note", "source",
                                                   "provenance"]]
        sources = TableView.from_frame(
            used, "The components and their sources (every cost's components: cost_worksheet_components.csv)",
            {"value": lambda v: fmt_num(v, 2) if v != round(v) else fmt_num(v),
             "year": lambda v: "" if pd.isna(v) else f"{int(v)}"},
            rename={"what": "what it is", "price_note": "price year"})
    notes = [f"{row.name}: {row.note}" for row in frame.itertuples() if row.note]
    return Section(key="cost-worksheet", title="Where the costs come from, and which of them matter",
                   template="sections/cost_worksheet.html.j2",
                   context={"costs": costs, "sources": sources, "notes": notes, "warning": WARNING},
                   assumptions=sheet.assumptions, files=sheet.output_files())


def implied_section(results: ReportResults) -> Section | None:
    """Along each outcome's cost: the values under which what courts did comes closest to the
    cheapest rule (exact intervals; the bootstrap bands come from ``policy sweep --implied``)."""
    a = results.analysis
    if a.cells is None:
        return None
    from policy.assessment.implied import MEANING, implied_costs
    from policy.assessment.sweep.axes import ratio_axis
    from policy.decision.candidates import observed_rules

    sc = a.scenario
    rules = observed_rules(a.cells, sc.aid.name, sc.level_labels)
    if not rules:
        return None
    blocks, tables, differences = [], [], []
    for key in sc.outcome_keys:
        res = implied_costs(a.risk_levels, a.costs, ratio_axis(a.risk_levels, a.costs, key), rules)
        table = res.table.assign(outcome=key)
        tables.append(table)
        differences.append(res.differences.assign(outcome=key))
        shown = {p: sc.column_label(p) for p in sc.protected}
        table = table.assign(protected=table["protected"].map(lambda v: shown.get(v, v)))
        view = TableView.from_frame(
            table[["rule", "protected", "group", "cases", "cost_low", "cost_high", "regret_per_case"]],
            f"Cost of one {res.axis.outcome_label} in {res.axis.unit} under which the decisions come closest to the "
            f"cheapest rule; the scenario's is {fmt_num(res.axis.scenario_ratio * res.axis.reference_cost)}",
            {"cases": fmt_num, "cost_low": fmt_num, "cost_high": _end, "regret_per_case": lambda v: fmt_num(v, 2)},
            row_header=3, rename={"cost_low": "from", "cost_high": "to", "regret_per_case": "regret per case there"})
        diff = None
        if len(res.differences):
            named = res.differences.assign(protected=res.differences["protected"].map(lambda v: shown.get(v, v)))
            diff = TableView.from_frame(
                named[["rule", "protected", "group", "versus", "cost_difference_low", "cost_difference_high"]],
                f"Between groups: how much higher the implied cost of one {res.axis.outcome_label} is for the decisions "
                "one group received than for those the first group received (a disparity diagnostic in cost terms, "
                "not a finding about intent; intervals with bootstrap bands: sweep --implied)",
                {"cost_difference_low": _signed, "cost_difference_high": _signed}, row_header=4,
                rename={"versus": "against", "cost_difference_low": "from", "cost_difference_high": "to"})
        blocks.append({"title": f"The cost of one {res.axis.outcome_label}", "sentences": res.sentences(), "table": view,
                       "differences": diff})
    files = {"implied_costs.csv": pd.concat(tables, ignore_index=True),
             "implied_differences.csv": pd.concat(differences, ignore_index=True)}
    return Section(key="implied-costs", title="What the courts' decisions imply about the costs",
                   template="sections/implied.html.j2", context={"blocks": blocks, "meaning": MEANING},
                   assumptions=tuple(assumptions_for("sweep")), files=files)
