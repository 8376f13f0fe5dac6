"""The report's first screen: the recommended rule as a grid, what it changes against each
compared rule, its shares and rates, the costs at which it would change, and the export of the
chosen costs (a scenario snippet, the command line, the rule as CSV).

Everything here is formatted from result objects at the report's starting costs; the page's
script recomputes the same figures when a cost moves (``report.js``). Figures of later stages
(paired differences with intervals, stability, an assumption verdict) slot in as extra entries of
``rows[i]["figures"]`` and ``verdicts`` without a change to the template.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from policy.presentation.report.formatting import DIGITS, fmt_interval, fmt_num, fmt_pct, level_colours, tint
from policy.cautions import assumptions_for
from policy.presentation.report.live import controls
from policy.presentation.report.model import ReportResults, Section

#: what each kind of compared rule is, as a reader says it
KIND_WORDS = {"observed": "what courts did", "aid": "the aid's recommendation", "candidate": "candidate rule",
              "optimal": "cost-minimizing at the scenario's costs", "constrained": "constrained optimum at the scenario's costs"}


#: at most this many columns across the rule grid (more read badly beside the summary's figures)
MAX_ACROSS = 6


def _ordered_unique(values: pd.Series) -> list:
    seen: dict = {}
    for v in values:
        seen.setdefault(v, None)
    return list(seen)


def rule_grid(results: ReportResults) -> dict[str, Any]:
    """The rule as a grid over its columns: across, the columns with the fewest values (as many
    as give at most :data:`MAX_ACROSS` grid columns, at least one), down the combinations of the
    others; each cell names its rule cell.

    Returns a dict with ``row_title``, ``column_title``, ``columns`` (values as text), ``rows``
    (label, cells), each cell ``None`` (no such combination in the data) or ``(g, level, label,
    cases)``.
    """
    a = results.analysis
    sc, rule = a.scenario, a.rule
    cells = rule.rule_cells.reset_index(drop=True)
    names = list(cells.columns)
    level = rule.level
    labels = list(rule.level_labels)
    cases = np.asarray(rule.weights, dtype=float)
    if not names:
        return {"row_title": "", "column_title": "", "columns": ["every case"],
                "rows": [("all cases", [(0, int(level[0]), labels[int(level[0])], fmt_num(cases[0]))])]}
    if len(names) == 1:
        col = names[0]
        rows = [(str(v), [(g, int(level[g]), labels[int(level[g])], fmt_num(cases[g]))])
                for g, v in enumerate(cells[col])]
        return {"row_title": sc.column_label(col), "column_title": "", "columns": ["decision"], "rows": rows}
    # across: the columns with the fewest values, as many as keep at most MAX_ACROSS columns
    by_size = sorted(names, key=lambda c: (cells[c].nunique(), names.index(c)))
    across = [by_size[0]]
    for c in by_size[1:-1]:
        if np.prod([cells[a].nunique() for a in across]) * cells[c].nunique() > MAX_ACROSS:
            break
        across.append(c)
    across = [c for c in names if c in across]
    down = [c for c in names if c not in across]
    join = lambda frame: frame.astype(str).agg(" \u00b7 ".join, axis=1)
    key, head = join(cells[down]), join(cells[across])
    column_values = _ordered_unique(head)
    where = {(k, v): g for g, (k, v) in enumerate(zip(key, head))}
    rows = []
    for k in _ordered_unique(key):
        row = []
        for v in column_values:
            g = where.get((k, v))
            row.append(None if g is None else (g, int(level[g]), labels[int(level[g])], fmt_num(cases[g])))
        rows.append((k, row))
    return {"row_title": " \u00b7 ".join(sc.column_label(c) for c in down),
            "column_title": " \u00b7 ".join(sc.column_label(c) for c in across),
            "columns": [str(v) for v in column_values], "rows": rows}


def nearest_breakpoints(results: ReportResults) -> list[dict[str, str]]:
    """Per outcome cost swept: the nearest exact breakpoint below and above the scenario's cost,
    with the rule cell that changes and how (from the sweeps' breakpoint tables)."""
    sc = results.scenario
    out = []
    for res in results.sweeps:
        sw = res.sweep
        axis = sw.axis
        here = float(results.analysis.costs.outcome[axis.outcome_index])
        table = sw.breakpoints()
        columns = list(sw.rule_cells.columns)

        def describe(row) -> str:
            where = ", ".join(f"{sc.column_label(c)} {row[c]}" for c in columns) or "every case"
            return f"{where}: {row['level_before']} \u2192 {row['level_after']}"

        below = table[table["cost"] < here - 1e-9 * max(1.0, here)]
        above = table[table["cost"] > here + 1e-9 * max(1.0, here)]
        lo_cost, hi_cost = sw.lo * axis.reference_cost, sw.hi * axis.reference_cost
        entry = {"outcome_index": str(axis.outcome_index), "label": axis.outcome_label, "cost": fmt_num(here),
                 "below_lead": "the rule changes at" if len(below) else "", "above_lead": "it changes at" if len(above) else ""}
        if len(below):
            row = below.iloc[-1]
            entry["below"] = fmt_num(row["cost"])
            entry["below_text"] = f"({describe(row)})"
        else:
            entry["below"] = "no change"
            entry["below_text"] = f"(down to {fmt_num(lo_cost)})"
        if len(above):
            row = above.iloc[0]
            entry["above"] = fmt_num(row["cost"])
            entry["above_text"] = f"({describe(row)})"
        else:
            entry["above"] = "no change"
            entry["above_text"] = f"(up to {fmt_num(hi_cost)})"
        out.append(entry)
    return out


def compared_rows(results: ReportResults) -> list[dict[str, Any]]:
    """Each compared rule against the recommended one at the report's costs: cost, the
    difference, shares and rates; with the comparison's bootstrap intervals where there is one
    (they hold at the scenario's costs only)."""
    frame = results.comparison.comparison_frame().set_index("rule") if results.comparison is not None else None
    out = []
    for i, c in enumerate(results.compared):
        if c.rule.kind == "optimal":
            continue
        ev = c.evaluation
        kind = c.rule.kind
        regret = fmt_num(1000.0 * ev.regret_per_case, DIGITS["cost"])
        if frame is not None and c.rule.name in frame.index:
            row = frame.loc[c.rule.name]
            regret = fmt_interval(row["regret_per_1000_cases"], row["regret_per_1000_cases_lower"],
                                  row["regret_per_1000_cases_upper"], lambda v: fmt_num(v, DIGITS["cost"]))
        out.append({"index": i, "name": c.rule.name, "kind": KIND_WORDS.get(kind, kind),
                    "cost": fmt_num(ev.cost_per_1000, DIGITS["cost"]),
                    "difference": "+" + regret if not regret.startswith("-") else regret,
                    "shares": [fmt_pct(s, DIGITS["share"]) for s in ev.level_shares],
                    "rates": [fmt_pct(r, DIGITS["rate"]) for r in ev.outcome_rates],
                    "figures": []})
    return out


def change_sentence(name: str, labels, mine, theirs, cost_gap: str, less: bool) -> str:
    """'Against NAME, the recommended rule gives L1 to a% of cases instead of b%, ..., and costs X less per 1,000 cases.'
    (The page's script writes the same sentence when a cost moves.)"""
    parts = [f"{lab} to {m} of cases instead of {t}" if k == 0 else f"{lab} to {m} instead of {t}"
             for k, (lab, m, t) in enumerate(zip(labels, mine, theirs))]
    return (f"Against \u201c{name}\u201d, the recommended rule gives " + ", ".join(parts)
            + f", and costs {cost_gap} {'less' if less else 'more'} per 1,000 cases.")


def change_sentences(results: ReportResults) -> list[tuple[int, str]]:
    """What the recommended rule changes against what courts did (each observed rule), in words."""
    ev = results.analysis.evaluation
    mine = [fmt_pct(v, DIGITS["share"]) for v in ev.level_shares]
    out = []
    for i, c in enumerate(results.compared):
        if c.rule.kind != "observed":
            continue
        e = c.evaluation
        gap = 1000.0 * (e.cost_per_case - ev.cost_per_case)
        out.append((i, change_sentence(c.rule.name, ev.level_labels, mine,
                                       [fmt_pct(v, DIGITS["share"]) for v in e.level_shares],
                                       fmt_num(abs(gap), DIGITS["cost"]), gap > 0)))
    return out


def constrained_note(results: ReportResults) -> str:
    """Where the scenario declares constraints: that the grid is the unconstrained optimum, and
    what the constrained rule costs more (its price), so the reader does not take one for the other."""
    con = results.analysis.constrained
    if con is None:
        return ""
    return (f"The scenario declares constraints. The grid shows the cost-minimizing rule without them, which this "
            f"page recomputes as costs move; {con.rule.name}, which meets them, costs "
            f"{fmt_num(con.price_per_1000)} {con.unit} more per 1,000 cases and is in the section "
            "\u201cThe constrained rule and its price\u201d (and in the comparison below).")


def summary_section(results: ReportResults) -> Section:
    """The first screen: the rule's grid, headline, what it changes, where it would change, export."""
    a = results.analysis
    ev = a.evaluation
    colours = level_colours(len(ev.level_labels))
    headline = [(lab, fmt_pct(s, DIGITS["share"])) for lab, s in zip(ev.level_labels, ev.level_shares)]
    return Section(
        key="summary",
        title="Summary: the recommended rule",
        template="sections/summary.html.j2",
        context={
            "unit": a.costs.unit,
            "controls": controls(results),
            "grid": rule_grid(results),
            "levels": [(lab, colours[d], tint(colours[d])) for d, lab in enumerate(ev.level_labels)],
            "headline": headline,
            "share_values": [float(s) for s in ev.level_shares],
            "rates": [(lab, fmt_pct(r, DIGITS["rate"])) for lab, r in zip(ev.outcome_labels, ev.outcome_rates)],
            "cost_per_1000": fmt_num(ev.cost_per_1000, DIGITS["cost"]),
            "rule_name": a.rule.name,
            "rows": compared_rows(results),
            "interval_label": results.comparison.result.interval_label if results.comparison is not None else "",
            "breakpoints": nearest_breakpoints(results),
            "verdicts": [],
            "constrained_note": constrained_note(results),
            "changes": change_sentences(results),
        },
        assumptions=tuple(assumptions_for("rule")),
    )
