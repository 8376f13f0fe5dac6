"""Each section's data, assembled from the results (one builder per section)."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from policy.cautions import ASSUMPTIONS, assumptions_for
from policy.presentation.report.ranges_view import ranges_view
from policy.assessment.stability import unstable_lines
from policy.presentation.report.formatting import DIGITS, TableView, fmt_factor, fmt_interval, fmt_num, fmt_pct, level_colours, risk_level_colours
from policy.presentation.report.model import Bar, ReportResults, Section
from policy.presentation.report.live import _constant, controls


def scenario_section(results: ReportResults) -> Section:
    """The question and the scenario: decision levels, outcome kinds, costs with units and sources."""
    sc, costs = results.scenario, results.analysis.costs
    unit = costs.unit or "(no unit given)"
    levels = []
    for d, level in enumerate(sc.levels):
        source = level.cost_source or "(no source given)"
        if _constant(costs.decision[:, d]):
            value = float(costs.decision[0, d]) if len(costs.decision) else float(level.cost or 0.0)
            cost = fmt_num(value, 0)
            if level.cost is None or value != level.cost:
                source = f"set for this report, not the scenario's; the scenario's: {source}"
        else:
            mean = float(np.average(costs.decision[:, d], weights=results.analysis.risk_levels.weights))
            factor = "" if level.cost_factor == 1 else f" \u00d7 {fmt_factor(level.cost_factor)}"
            cost = f"per case from column {level.cost_column}{factor} (mean {fmt_num(mean, 0)})"
        levels.append((str(d), level.label, level.value, cost, source))
    outcomes = []
    for o, value in zip(sc.outcomes, costs.outcome):
        source = o.cost_source or "(no source given)"
        if value != o.cost:
            source = f"set for this report (the scenario's: {fmt_num(o.cost, 0)}, {source})"
        outcomes.append((o.label, o.key, fmt_num(value, 0), source))
    return Section(
        key="scenario",
        title="The question and the scenario",
        template="sections/scenario.html.j2",
        context={
            "description": sc.description.strip(),
            "file": sc.file,
            "unit": unit,
            "cost_note": sc.cost_note,
            "levels": TableView(f"Decision levels, most lenient first (costs in {unit} per case)",
                                ("level", "label", "value in the data", f"cost in {unit}", "source of the cost"),
                                tuple(levels), (True, False, False, True, False)),
            "outcomes": TableView(f"Outcome kinds (costs in {unit} per adverse outcome)",
                                  ("outcome", "key", f"cost in {unit}", "source of the cost"),
                                  tuple(outcomes), (False, False, True, False)),
            "rule_columns": [sc.column_label(c) for c in results.analysis.rule.rule_cells.columns],
            "protected": [sc.column_label(c) for c in sc.protected],
            "covariates": [sc.column_label(c) for c in sc.covariates],
            "seed": sc.seed,
        },
        assumptions=(ASSUMPTIONS["costs"],),
    )


def data_section(results: ReportResults) -> Section:
    """The data: cases, cells, arms, sparse cells."""
    a = results.analysis
    sparse_below = a.scenario.estimator.sparse_below
    rows: list[tuple[str, str]] = [("source", a.risk_levels.source)]
    if a.cells is not None:
        s = a.cells.summary(sparse_below)
        rows += [
            ("cases", fmt_num(s["cases"])),
            ("cells (combinations of the cell covariates)", fmt_num(s["cells"])),
            ("median cases per cell", fmt_num(s["median_cases_per_cell"], 1)),
            (f"sparse cells (fewer than {sparse_below} cases)",
             f"{fmt_num(s['sparse_cells'])} cells holding {fmt_num(s['cases_in_sparse_cells'])} cases"),
        ]
        if a.cells.has_arm:
            rows.append(("cases per arm (aid shown = 1, not shown = 0)",
                         "; ".join(f"{arm}: {fmt_num(n)}" for arm, n in s["cases_per_arm"].items())))
        else:
            rows.append(("arms", "no arm column: the aid's effect cannot be estimated"))
        label = dict(zip(a.scenario.level_values, a.scenario.level_labels))
        rows.append(("cases per decision level",
                     "; ".join(f"{label.get(k, k)}: {fmt_num(n)}" for k, n in s["cases_per_level"].items())))
        outcome_label = dict(zip(a.scenario.outcome_keys, a.scenario.outcome_labels))
        rows.append(("cell-levels never observed (estimate borrowed from the pooled rate)",
                     "; ".join(f"{outcome_label[k]}: {fmt_num(n)}" for k, n in s["cell_levels_never_observed"].items())))
        rows.append(("share of cases with the outcome observed",
                     "; ".join(f"{outcome_label[k]}: {fmt_pct(v)}" for k, v in s["outcome_observed_share"].items())))
    else:
        w = a.risk_levels.weights
        rows += [
            ("cases (weight)", fmt_num(float(w.sum()))),
            ("cells", fmt_num(a.risk_levels.n_cells)),
            (f"sparse cells (fewer than {sparse_below} cases)", fmt_num(int((w < sparse_below).sum()))),
            ("arms", "risk levels estimated elsewhere: no decisions observed here"),
        ]
    return Section(
        key="data",
        title="The data",
        template="sections/data.html.j2",
        context={"findings": TableView("What the data hold", ("finding", "value"), tuple(rows), (False, False))},
    )


def risk_level_section(results: ReportResults) -> Section:
    """Risk levels: share of cases at each, overall and by protected group."""
    rl = results.analysis.risk_levels
    who = results.scenario.column_label
    shares = rl.shares()
    names = rl.risk_level_names
    colours = risk_level_colours(len(names))
    label = dict(zip(rl.outcome_keys, rl.outcome_labels))
    wide = shares.pivot_table(index=["outcome", "attribute", "group"], columns="risk_level", values="share", sort=False)
    wide = wide.reset_index()
    order = {k: i for i, k in enumerate(rl.outcome_keys)}
    wide = wide.sort_values("outcome", key=lambda s: s.map(order), kind="stable")
    cases = shares.drop_duplicates(["attribute", "group"]).set_index(["attribute", "group"])["cases"]
    tables, bars = [], []
    for key in rl.outcome_keys:
        part = wide[wide["outcome"] == key]
        frame = pd.DataFrame({
            "group": [("all cases" if a == "all" else f"{who(a)}: {g}") for a, g in zip(part["attribute"], part["group"])],
            "cases": [float(cases[(a, g)]) for a, g in zip(part["attribute"], part["group"])],
        })
        for r, name in enumerate(names):
            frame[name] = part[r].to_numpy()
        fmts = {"cases": fmt_num, **{n: fmt_pct for n in names}}
        tables.append(TableView.from_frame(frame, f"{label[key]}: share of cases at each risk level", fmts))
        bars.append((label[key], [Bar(g, tuple((n, float(v), c) for n, v, c in zip(names, row, colours)))
                                  for g, row in zip(frame["group"], frame[names].to_numpy())]))
    return Section(
        key="risk-levels",
        title="Risk levels",
        template="sections/risk_levels.html.j2",
        context={"tables": tables, "bars": bars, "legend": list(zip(names, colours)), "source": rl.source},
        assumptions=tuple(assumptions_for("risk_levels")),
    )


def live_rule_section(results: ReportResults) -> Section:
    """The cost-minimizing rule with live cost controls, its consequences and each compared rule's regret."""
    a = results.analysis
    ev, rule, costs = a.evaluation, a.rule, a.costs
    frame = rule.to_frame()
    columns = list(rule.rule_cells.columns)
    rule_rows = [
        ([str(v) for v in frame.loc[i, columns]], fmt_num(frame.loc[i, "cases"]) if "cases" in frame else "\u2013",
         str(frame.loc[i, "level"]) + (" (split)" if frame.loc[i, "split"] else ""))
        for i in range(len(frame))
    ]
    compared = [{"name": shown_name(c.rule), "note": c.note, "cost": fmt_num(c.evaluation.cost_per_1000),
                 "regret": fmt_num(1000.0 * c.evaluation.regret_per_case), "agreement": fmt_pct(c.evaluation.agreement)}
                for c in results.compared]
    return Section(
        key="rule",
        title="The cost-minimizing rule: move the costs",
        template="sections/rule.html.j2",
        context={
            "unit": costs.unit,
            "controls": controls(results),
            "rule_columns": columns,
            "rule_column_labels": [a.scenario.column_label(col) for col in columns],
            "rule_rows": rule_rows,
            "level_labels": list(ev.level_labels),
            "level_colours": level_colours(len(ev.level_labels)),
            "shares": [fmt_pct(s, DIGITS["share"]) for s in ev.level_shares],
            "share_values": [float(s) for s in ev.level_shares],
            "rates": [(lab, fmt_pct(r, DIGITS["rate"])) for lab, r in zip(ev.outcome_labels, ev.outcome_rates)],
            "cost_per_1000": fmt_num(ev.cost_per_1000, DIGITS["cost"]),
            "compared": compared,
        },
        assumptions=tuple(assumptions_for("rule")),
        files=a.output_files(),
    )


def shown_name(rule) -> str:
    """A compared rule's name in the live table: an optimum held at the scenario's costs says so."""
    if rule.kind in ("optimal", "constrained"):
        return f"{rule.name} at the scenario's costs (held fixed)"
    return rule.name


def groups_section(results: ReportResults) -> Section:
    """Decision shares and outcome rates by group, and where risk levels land, at the scenario's costs."""
    ev = results.analysis.evaluation
    by_group = ev.by_group()
    who = results.scenario.column_label
    by_group.insert(0, "who", [("all cases" if a == "all" else f"{who(a)}: {g}") for a, g in zip(by_group["attribute"], by_group["group"])])
    by_group = by_group.drop(columns=["attribute", "group"])
    fmts = {c: (fmt_pct if c.startswith(("share:", "rate:")) else fmt_num) for c in by_group.columns if c != "who"}
    label = dict(zip(ev.outcome_keys, ev.outcome_labels))
    misplaced = ev.misplaced()
    misplaced["outcome"] = misplaced["outcome"].map(label)
    within = ev.within_risk_levels()
    overall = within[within["attribute"] == "all"].copy()
    wide = overall.pivot_table(index=["outcome", "risk_level", "risk_level_name"], columns="level", values="share", sort=False)
    wide = wide.reset_index()
    wide["outcome"] = wide["outcome"].map(label)
    wide = wide.rename(columns={"risk_level_name": "risk level"})[["outcome", "risk level", *ev.level_labels]]
    wide.columns.name = None
    gaps = ev.fairness_gaps().dropna(subset=["gap"]).sort_values("gap", ascending=False).head(10)
    gaps = gaps.assign(outcome=gaps["outcome"].map(lambda k: label.get(k, "(all)")))
    gaps = gaps[["kind", "attribute", "outcome", "risk_level_name", "threshold", "gap", "highest_group", "lowest_group"]]
    gaps["kind"] = gaps["kind"].str.replace("_", " ")
    gaps["attribute"] = gaps["attribute"].map(lambda a: who(a) if isinstance(a, str) else a)
    return Section(
        key="groups",
        title="Who gets what, at the scenario's costs",
        template="sections/groups.html.j2",
        context={
            "by_group": TableView.from_frame(by_group, "Decision shares and expected outcome rates by group", fmts),
            "within": TableView.from_frame(wide, "Decision given within each risk level (all cases)",
                                           {c: fmt_pct for c in ev.level_labels}, row_header=2),
            "misplaced": TableView.from_frame(
                misplaced, "Cases the rule treats harsher or more leniently than their risk level calls for",
                {"safe_given_harsher": fmt_pct, "preventable_given_too_lenient": fmt_pct},
                rename={"safe_given_harsher": "safe cases given a harsher level",
                        "preventable_given_too_lenient": "preventable cases given a level too lenient to prevent it"}),
            "gaps": TableView.from_frame(
                gaps, "The ten largest gaps between groups (P(decision at or above threshold), within risk level "
                      "for principal fairness)", {"gap": lambda v: fmt_pct(v, 1)},
                rename={"risk_level_name": "risk level", "highest_group": "highest", "lowest_group": "lowest"}),
        },
        assumptions=tuple(assumptions_for("evaluation")),
    )


def _split_text(row: pd.Series, level_values: Sequence[str], level_labels: Sequence[str]) -> str:
    """A rule cell's decision: the level, or the split between levels of a randomized rule."""
    if not row["split"]:
        return str(row["level"])
    parts = [f"{lab} {fmt_pct(row[f'share_{v}'], 0)}" for v, lab in zip(level_values, level_labels) if row[f"share_{v}"] > 5e-4]
    return "split: " + ", ".join(parts)


def constrained_section(results: ReportResults) -> Section | None:
    """The constrained rule: its price, what each constraint costs, the rule, and the rule near the chosen costs."""
    con = results.analysis.constrained
    if con is None:
        return None
    unit = con.unit
    ev, unc = con.evaluation, con.unconstrained_evaluation
    table = con.to_frame()
    rows = []
    for _, r in table.iterrows():
        bound = "" if r["kind"] == "group_blind" else f"{r['bound_key'].replace('_', ' ')} {fmt_factor(r['bound'])} ({r['unit']})"
        rows.append((str(r["constraint"]), str(r["kind"]).replace("_", " "), str(r["arguments"]), bound,
                     "binds" if r["binding"] else "does not bind",
                     "\u2013" if not np.isfinite(r["value"]) else fmt_factor(r["value"], 4),
                     fmt_num(r["saving_per_point_per_1000"]), fmt_num(r["saving_if_removed_per_1000"])))
    constraints = TableView(
        f"The constraints and what each costs per 1,000 cases, in {unit}",
        ("constraint", "kind", "applies to", "bound", "at the optimum", "value reached",
         "saving if loosened a step", "saving if removed alone"),
        tuple(rows), (False, False, False, False, False, True, True, True),
        note="A step is one point (0.01) of a tolerance or share, or 1% of the cases for a cap in cases; both "
             "savings are measured by solving again. Which rows bind is in constraints.csv beside this report.")
    frame = con.rule.to_frame()
    columns = list(con.rule.rule_cells.columns)
    rule_rows = tuple(tuple(str(v) for v in frame.loc[i, columns])
                      + (fmt_num(frame.loc[i, "cases"]), _split_text(frame.loc[i], con.rule.level_values, con.rule.level_labels))
                      for i in range(len(frame)))
    rule = TableView(f"{con.rule.name}, by rule cell", tuple(results.scenario.column_label(c) for c in columns) + ("cases", "decision"), rule_rows,
                     tuple([False] * len(columns) + [True, False]), row_header=max(len(columns), 1))
    figures = [("expected cost per 1,000 cases", fmt_num(ev.cost_per_1000), fmt_num(unc.cost_per_1000))]
    figures += [(f"share: {lab}", fmt_pct(a, DIGITS["share"]), fmt_pct(b, DIGITS["share"]))
                for lab, a, b in zip(ev.level_labels, ev.level_shares, unc.level_shares)]
    figures += [(f"expected rate: {lab}", fmt_pct(a, DIGITS["rate"]), fmt_pct(b, DIGITS["rate"]))
                for lab, a, b in zip(ev.outcome_labels, ev.outcome_rates, unc.outcome_rates)]
    versus = TableView("The constrained rule against the unconstrained optimum on the same rule columns",
                       ("figure", con.rule.name, con.unconstrained.name), tuple(figures), (False, True, True))
    sweeps = results.constrained_sweeps
    return Section(
        key="constrained",
        title="The constrained rule and its price",
        template="sections/constrained.html.j2",
        context={
            "unit": unit,
            "price": fmt_num(con.price_per_1000),
            "cost": fmt_num(ev.cost_per_1000),
            "unconstrained_cost": fmt_num(unc.cost_per_1000),
            "constraints": constraints,
            "rule": rule,
            "versus": versus,
            "notes": list(con.notes),
            "live": bool(sweeps),
            "level_labels": list(ev.level_labels),
            "outcome_labels": list(ev.outcome_labels),
            "shares": [fmt_pct(v, DIGITS["share"]) for v in ev.level_shares],
            "points": len(sweeps[0].ratios) if sweeps else 0,
            "reference_label": sweeps[0].axis.reference_label if sweeps else "",
        },
        assumptions=tuple(assumptions_for("rule")),
    )


def comparison_section(results: ReportResults) -> Section:
    """The optimum against what courts did, the aid's recommendation and candidate rules, with intervals."""
    cmp = results.comparison
    if cmp is None:
        return Section(key="comparison", title="Compared with what courts did, the aid and candidate rules",
                       template="sections/unavailable.html.j2", context={"why": results.comparison_note})
    frame = cmp.comparison_frame()
    rl = cmp.risk_levels
    cost = lambda v: fmt_num(v)
    pct1 = lambda v: fmt_pct(v, DIGITS["share"])
    pct2 = lambda v: fmt_pct(v, DIGITS["rate"])

    def iv(row, col, fmt):
        return fmt_interval(row[col], row[f"{col}_lower"], row[f"{col}_upper"], fmt)

    def chosen(row):
        lo, hi = row["cost_per_1000_cases_chosen_lower"], row["cost_per_1000_cases_chosen_upper"]
        return f"{cost(lo)} to {cost(hi)}" if np.isfinite(lo) else ""

    main_rows, share_rows = [], []
    for _, row in frame.iterrows():
        main_rows.append((row["rule"], row["kind"], iv(row, "cost_per_1000_cases", cost), chosen(row),
                          iv(row, "regret_per_1000_cases", cost), iv(row, "agreement", pct1)))
        share_rows.append((row["rule"],) + tuple(iv(row, f"share_{v}", pct1) for v in rl.level_values)
                          + tuple(iv(row, f"rate_{k}", pct2) for k in rl.outcome_keys))
    label = cmp.result.interval_label
    unit = cmp.costs.unit
    costs_view = TableView(f"Expected cost, regret and agreement per 1,000 cases in {unit} ({label} in brackets)",
                           ("rule", "kind", "expected cost", "expected cost allowing for the rule's choice on these data",
                            "regret against the cost-minimizing rule", "same decision as the cost-minimizing rule"),
                           tuple(main_rows), (False, False, True, True, True, True))
    shares_view = TableView(f"Decision shares and expected outcome rates ({label} in brackets)",
                            ("rule",) + tuple(f"share: {lab}" for lab in rl.level_labels)
                            + tuple(f"rate: {lab}" for lab in rl.outcome_labels),
                            tuple(share_rows), (False,) + (True,) * (rl.n_levels + len(rl.outcome_keys)))
    misplaced_rows = []
    for _, row in frame.iterrows():
        misplaced_rows.append((row["rule"],) + tuple(iv(row, f"safe_given_harsher_{k}", pct1) for k in rl.outcome_keys)
                              + tuple(iv(row, f"preventable_given_too_lenient_{k}", pct1) for k in rl.outcome_keys))
    misplaced_view = TableView(
        f"Cases given a harsher level than their risk level calls for, or one too lenient to prevent the outcome ({label})",
        ("rule",) + tuple(f"safe ({lab}) given a harsher level" for lab in rl.outcome_labels)
        + tuple(f"preventable ({lab}) given too lenient a level" for lab in rl.outcome_labels),
        tuple(misplaced_rows), (False,) + (True,) * (2 * len(rl.outcome_keys)))
    r = cmp.result
    extra = {"differences": None, "stability": [], "crossfit": None}
    if r.n_replicates:
        matrix = cmp.summary()
        extra["differences"] = TableView(
            f"Paired differences in expected cost per 1,000 cases in {unit}: row rule minus column rule, with the {label} "
            "of the difference from the same replicates and the share of replicates in which the row rule is cheaper",
            ("rule",) + tuple(str(c) for c in matrix.columns),
            tuple((name,) + tuple(v if v != "0" else "" for v in row) for name, row in matrix.iterrows()),
            (False,) + (True,) * len(matrix.columns))
        stab = cmp.stability_frame()
        named = [c for c in cmp.rules[0].rule_cells.columns if c in stab.columns]
        extra["stability"] = unstable_lines(stab.rename(columns={c: cmp.scenario.column_label(c) for c in named}))
    if cmp.crossfit is not None:
        cf = cmp.crossfit.to_frame()
        extra["crossfit"] = TableView(
            f"In-sample and cross-fitted expected cost per 1,000 cases in {unit} ({cmp.crossfit.folds} folds: chosen on all "
            "folds but one, scored on the held-out one)",
            ("rule", "cost in sample", "cost cross-fitted", "cross-fitted minus in sample", "regret in sample",
             "regret cross-fitted"),
            tuple((x["rule"], cost(x["cost_per_1000_cases_in_sample"]), cost(x["cost_per_1000_cases_cross_fitted"]),
                   cost(x["cross_fitted_minus_in_sample"]), cost(x["regret_per_1000_cases_in_sample"]),
                   cost(x["regret_per_1000_cases_cross_fitted"])) for _, x in cf.iterrows()),
            (False,) + (True,) * 5)
    return Section(
        key="comparison",
        title="Compared with what courts did, the aid and candidate rules",
        template="sections/comparison.html.j2",
        context={
            "costs": costs_view, "shares": shares_view, "misplaced": misplaced_view,
            "rules": [(rule.name, rule.kind, rule.note) for rule in cmp.rules],
            "replicates": r.n_replicates, "seed": r.seed, "label": label, "from_table": cmp.cells is None,
            # each rule's own note is in the list of rules above; the rest once here
            "notes": [n for n in cmp.notes if not any(n == f"{rule.name}: {rule.note}" for rule in cmp.rules)],
            "observed_assumptions": assumptions_for("observed_rule"),
            "assumption_free": cmp.arm_costs.lines() if getattr(cmp, "arm_costs", None) is not None else [],
            "ranges": ranges_view(cmp), **extra,
        },
        assumptions=tuple(assumptions_for("evaluation")),
        files=cmp.output_files(),
    )


def aid_effect_section(results: ReportResults) -> Section | None:
    """The effect of showing the aid on decisions, by risk level, with intervals."""
    cmp = results.comparison
    if cmp is None:
        return None
    if not cmp.has_arm:
        why = ("The data have no arm column (whether the aid was shown), so the aid's effect on decisions cannot be "
               "estimated." if cmp.cells is not None else
               "The risk levels come from a table estimated elsewhere: the aid's effect on decisions within each risk "
               "level needs the cases (decisions and outcomes by arm), which the table does not hold.")
        return Section(key="aid-effect", title="The effect of showing the aid, by risk level",
                       template="sections/unavailable.html.j2", context={"why": why})
    rl = cmp.risk_levels
    label = dict(zip(rl.outcome_keys, rl.outcome_labels))
    eff = cmp.effect_frame()
    eff = eff[eff["attribute"] == "all"]
    pct = lambda v: fmt_pct(v, DIGITS["share"])
    signed = lambda v: ("+" if v > 0 else "") + fmt_pct(v, DIGITS["share"])
    tables = []
    for key in rl.outcome_keys:
        part = eff[eff["outcome"] == key]
        rows = tuple((row["risk_level_name"], f"{row['threshold']} or harsher", pct(row["not_shown"]), pct(row["shown"]),
                      fmt_interval(row["effect"], row["effect_lower"], row["effect_upper"], signed),
                      row["direction"], row["meaning"])
                     for _, row in part.iterrows())
        tables.append(TableView(
            f"{label[key]}: share given a level or harsher, by risk level, without and with the aid "
            f"(all cases; {cmp.result.interval_label} in brackets)",
            ("risk level", "decision", "aid not shown", "aid shown", "difference (points)", "direction", "what it means"),
            rows, (False, False, True, True, True, False, False), row_header=2))
    itt = cmp.itt_frame()
    itt = itt[itt["attribute"] == "all"]
    itt_rows = tuple((f"{row['figure']}: {row['level']}", pct(row["not_shown"]), pct(row["shown"]),
                      fmt_interval(row["difference"], row["difference_lower"], row["difference_upper"], signed))
                     for _, row in itt.iterrows())
    itt_view = TableView(f"Decision shares by arm, all cases ({cmp.result.interval_label} in brackets)",
                         ("figure", "aid not shown", "aid shown", "difference (points)"), itt_rows,
                         (False, True, True, True))
    return Section(
        key="aid-effect",
        title="The effect of showing the aid, by risk level",
        template="sections/aid_effect.html.j2",
        context={"readings": cmp.readings(), "tables": tables, "itt": itt_view, "aid": cmp.scenario.aid.name},
        assumptions=tuple(assumptions_for("aid_effect")),
    )
