"""The report's first screen: the recommended rule as a grid, what it changes against each
compared rule, its shares and rates, the costs at which it would change, and the export of the
chosen costs (a scenario snippet, the command line, the rule as CSV).

Everything here is formatted from result objects at the report's starting costs; the page's
script recomputes the same figures when a cost moves (``report.js``). Where the
comparison has bootstrap replicates, the summary also gives each compared rule's paired
difference with its interval, the share of replicates in which the recommended rule is cheaper,
and how often each rule cell's level is picked again (all at the scenario's costs).
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


def paired_with_recommended(results: ReportResults) -> dict[str, tuple[float, float, float, float]]:
    """Each compared rule's paired difference in expected cost per 1,000 cases against the
    recommended rule (the comparison's optimum, held fixed), from the same bootstrap replicates:
    rule name -> (difference, lower, upper, share of replicates in which the recommended rule is
    strictly cheaper). Empty without a comparison or without replicates."""
    cmp = results.comparison
    if cmp is None or not cmp.result.n_replicates:
        return {}
    best = cmp.rules[0].name  # the optimum comes first in the comparison's order
    frame = cmp.differences_frame()
    frame = frame[(frame["figure"] == "cost_per_1000_cases") & (frame["first_rule"] == best)]
    return {r.second_rule: (-r.difference, -r.difference_upper, -r.difference_lower, r.share_first_lower)
            for r in frame.itertuples(index=False)}


def chosen_interval_text(results: ReportResults) -> str:
    """The recommended rule's cost interval that allows for its having been chosen on the same
    data (:mod:`policy.assessment.selection`), in one sentence; empty without replicates."""
    cmp = results.comparison
    if cmp is None or not cmp.result.n_replicates:
        return ""
    row = cmp.comparison_frame().iloc[0]  # the optimum comes first
    lo, hi = row.get("cost_per_1000_cases_chosen_lower", np.nan), row.get("cost_per_1000_cases_chosen_upper", np.nan)
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return ""
    return (f"Allowing for its having been chosen on these data, the recommended rule's expected cost per 1,000 "
            f"cases lies in {fmt_num(lo, DIGITS['cost'])} to {fmt_num(hi, DIGITS['cost'])} ({cmp.result.interval_label});"
            f" the {fmt_num(row['cost_per_1000_cases'], DIGITS['cost'])} above is scored on the same data it was chosen"
            " on, which flatters it.")


def cheaper_text(share: float) -> str:
    """'recommended cheaper in 90%' (of the replicates; empty when the share is not defined)."""
    return f"recommended cheaper in {fmt_pct(share, 0)}" if np.isfinite(share) else ""


def compared_rows(results: ReportResults) -> list[dict[str, Any]]:
    """Each compared rule against the recommended one at the report's costs: cost, the
    difference, shares and rates; where the comparison has replicates, the paired difference's
    interval and the share of replicates in which the recommended rule is cheaper (they hold at
    the scenario's costs only)."""
    paired = paired_with_recommended(results)
    out = []
    for i, c in enumerate(results.compared):
        if c.rule.kind == "optimal":
            continue
        ev = c.evaluation
        kind = c.rule.kind
        regret = fmt_num(1000.0 * ev.regret_per_case, DIGITS["cost"])
        cheaper = ""
        if c.rule.name in paired:
            d, lo, hi, share = paired[c.rule.name]
            regret = fmt_interval(d, lo, hi, lambda v: fmt_num(v, DIGITS["cost"]))
            cheaper = cheaper_text(share)
        out.append({"index": i, "name": c.rule.name, "kind": KIND_WORDS.get(kind, kind),
                    "cost": fmt_num(ev.cost_per_1000, DIGITS["cost"]),
                    "difference": "+" + regret if not regret.startswith("-") else regret,
                    "cheaper": cheaper,
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


def certainty_sentence(results: ReportResults) -> str:
    """How sure the comparison is, in one sentence: the rules the recommended one beats in the
    paired interval, those it does not (the data do not settle which is cheaper), and those that
    beat it (a rule using finer information than the rule cells can cost less)."""
    paired = paired_with_recommended(results)
    if not paired:
        return ""
    cmp = results.comparison
    label, n = cmp.result.interval_label, cmp.result.n_replicates
    clear, open_, beaten = [], [], []
    for c in results.compared:
        if c.rule.kind == "optimal" or c.rule.name not in paired:
            continue
        d, lo, hi, share = paired[c.rule.name]
        text = f"\u201c{c.rule.name}\u201d ({fmt_pct(share, 0)})"
        (clear if lo > 0 else beaten if hi < 0 else open_).append(text)
    parts = []
    if clear:
        parts.append("the recommended rule costs less than " + _join(clear) + ", with the whole " + label
                     + " of the paired difference above zero")
    if open_:
        parts.append(("against " if parts else "the recommended rule's difference from ") + _join(open_)
                     + (", the interval" if parts else " has an interval that") + " includes zero: the data do not settle "
                     "which is cheaper")
    if beaten:
        parts.append(_join(beaten) + " cost" + ("s" if len(beaten) == 1 else "") + " less than the recommended rule, "
                     "with the whole interval below zero (a rule using finer information than the rule cells can)")
    return (f"How sure: at the scenario's costs, {'; '.join(parts)}. In brackets, the share of the {n} bootstrap "
            "replicates in which the recommended rule is cheaper; every rule is scored in the same replicates.")


def _join(items: list[str]) -> str:
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def stability(results: ReportResults, limit: int = 6) -> dict[str, Any] | None:
    """How often the rule re-solved in each bootstrap replicate picks each rule cell's level again:
    a sentence, the least settled cells in words, and per rule cell a grid note for those below the
    comparison's threshold. None without replicates."""
    cmp = results.comparison
    if cmp is None or not cmp.result.n_replicates:
        return None
    frame = cmp.stability_frame()
    frame = frame[frame["rule"] == cmp.rules[0].name].reset_index(drop=True)
    rule = results.analysis.rule
    if len(frame) != rule.n_rule_cells or not frame["stability"].notna().any():
        return None
    sc = results.scenario
    columns = list(rule.rule_cells.columns)
    threshold = float(frame["stability_threshold"].iloc[0])
    value = frame["stability"].to_numpy(dtype=float)
    low = value < threshold
    cases = np.asarray(rule.weights, dtype=float)
    settled = fmt_pct(cases[~low].sum() / cases.sum(), DIGITS["share"]) if cases.sum() > 0 else "\u2013"
    sentence = (f"Re-solved on each of the {cmp.result.n_replicates} bootstrap replicates, the rule picks the same level "
                f"again in at least {threshold:.0%} of them for {int((~low).sum())} of {len(value)} rule cells "
                f"({settled} of cases).")
    if low.any():
        sentence += (" The others are not settled by the data: read their level as a judgment the estimates leave open"
                     " (marked in the grid).")
    others = [c for c in frame.columns if c.startswith("share_optimal_")]
    labels = dict(zip((f"share_optimal_{v}" for v in sc.level_values), rule.level_labels))
    lines = []
    for g in np.argsort(value, kind="stable")[: int(low.sum())][:limit]:
        row = frame.iloc[g]
        where = ", ".join(f"{sc.column_label(c)} {rule.rule_cells.iloc[g][c]}" for c in columns) or "every case"
        alt = max((c for c in others if labels.get(c) != row["level"]), key=lambda c: row[c], default=None)
        tail = f"; {labels.get(alt, alt)} in {row[alt]:.0%}" if alt is not None and row[alt] > 0 else ""
        lines.append(f"{where}: {row['level']} picked again in {value[g]:.0%} of replicates{tail}")
    notes = [f"picked again in {v:.0%}" if bad else "" for v, bad in zip(value, low)]
    return {"sentence": sentence, "lines": lines, "more": max(0, int(low.sum()) - limit), "notes": notes}


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
            "chosen_interval": chosen_interval_text(results),
            "rule_name": a.rule.name,
            "rows": compared_rows(results),
            "interval_label": results.comparison.result.interval_label if results.comparison is not None else "",
            "breakpoints": nearest_breakpoints(results),
            "verdicts": [],
            "constrained_note": constrained_note(results),
            "changes": change_sentences(results),
            "certainty": certainty_sentence(results),
            "stability": stability(results),
        },
        assumptions=tuple(assumptions_for("rule")),
    )
