"""The sweeps section: each cost ratio's sweep and the lenient map, with robust regions and
figures inline; and the list of section builders in page order."""

from __future__ import annotations

from typing import Callable


from policy.presentation.report.figure_tables import map_table, regret_table, robust_table, shares_table
from policy.presentation.report.formatting import TableView, fmt_num, fmt_pct, inline_svg
from policy.presentation.report.model import ReportResults, Section
from policy.presentation.report.summary import summary_section
from policy.presentation.report.doubt_view import doubt_section
from policy.presentation.report.cost_sections import implied_section, worksheet_section
from policy.presentation.report.sections import aid_effect_section, comparison_section, constrained_section, data_section, groups_section, live_rule_section, risk_level_section, scenario_section


#: the figures of a one-ratio sweep shown in the report, with what each shows
SWEEP_FIGURES = (
    ("sweep_shares.svg", "Decision shares of the optimal rule along the {} ratio"),
    ("sweep_regret.svg", "Regret of each compared rule along the {} ratio"),
    ("sweep_prices.svg", "Price of the constraints along the {} ratio"),
)


def sweep_section(results: ReportResults) -> Section | None:
    """Sweeps of each cost ratio and the lenient map, with their robust lenient regions, figures inline."""
    if not results.sweeps and results.lenient_map is None:
        return None
    from policy.assessment.sweep import assumption_lines
    from policy.presentation.plots import sweep_files

    blocks, files = [], {}
    for i, res in enumerate(results.sweeps):
        sw = res.sweep
        axis = sw.axis
        kind = "robust_sweep" if len(res.assumptions) > 1 else "sweep"
        share = float(res.settings["share"])
        summary = sw.summary(share).drop(columns=["share"], errors="ignore")
        never = f"never (below {fmt_pct(share, 0)} already at ratio {fmt_num(sw.lo, 2)})"
        view = TableView.from_frame(
            summary, f"Where {sw.level_labels[0]} stays optimal as the {axis.outcome_label} cost varies, "
                     "under each assumption",
            {"share_lenient_at_low": fmt_pct, "share_lenient_at_scenario": fmt_pct,
             "up_to_ratio": lambda v: fmt_num(v, 2) if v == v else never,
             "up_to_cost": lambda v: fmt_num(v) if v == v else "never"},
            rename={"share_lenient_at_low": f"share of cases, ratio {fmt_num(sw.lo, 2)}",
                    "share_lenient_at_scenario": "share of cases, scenario's ratio",
                    "up_to_ratio": f"stays optimal for at least {fmt_pct(share, 0)} of cases up to ratio",
                    "up_to_cost": f"that is, up to a cost in {axis.unit} of"})
        columns = list(sw.rule_cells.columns)
        breaks_view = TableView.from_frame(
            sw.breakpoints().rename(columns={c: results.scenario.column_label(c) for c in columns}), f"Where a rule cell's optimal level changes along the {axis.outcome_label} ratio (exact)",
            {"cases": fmt_num, "ratio": lambda v: fmt_num(v, 3), "cost": fmt_num},
            row_header=max(len(columns), 1), rename={"level_before": "optimal below", "level_after": "optimal above"})
        outputs = sweep_files(res, ("svg",))
        figures = [inline_svg(outputs[name], f"sweep{i}-{name[:-4]}", label.format(axis.outcome_label))
                   for name, label in SWEEP_FIGURES if name in outputs]
        prices = None
        if res.constrained is not None:
            c = res.constrained
            prices = TableView.from_frame(
                c.summary().drop(columns=["bound"]),
                f"Price of the constraints along the {axis.outcome_label} ratio ({c.unit} per 1,000 cases; "
                f"{len(c.ratios)} ratios re-solved)",
                {"ratio": lambda v: fmt_num(v, 3), "price_per_1000_there": fmt_num, "lowest_price_per_1000": fmt_num,
                 "highest_price_per_1000": fmt_num, "infeasible_points": fmt_num},
                row_header=0,
                rename={"ratio": "grid ratio nearest the scenario's", "price_per_1000_there": "price there",
                        "lowest_price_per_1000": "lowest price", "highest_price_per_1000": "highest price",
                        "infeasible_points": "ratios where the constraints cannot all hold"})
        # every figure as a table (for screen readers and print)
        tables = [shares_table(res, axis.unit), robust_table(res), regret_table(res, axis.unit)]
        blocks.append({
            "figure_tables": [t for t in tables if t is not None],
            "title": f"Cost of one {axis.outcome_label}, as a ratio to the mean cost of {axis.reference_label}",
            "definition": axis.describe()["definition"],
            "scenario_ratio": fmt_num(axis.scenario_ratio, 3),
            "summary": view, "breakpoints": breaks_view, "prices": prices, "figures": figures,
            "lines": assumption_lines(kind, res.assumptions)[:-1],
        })
        files.update({f"sweep_{axis.outcome}_{name.removeprefix('sweep_')}": content
                      for name, content in outputs.items() if not name.endswith(".svg") and name != "sweep.json"})
    lm = None
    if results.lenient_map is not None:
        res = results.lenient_map
        m = res.map
        kind = "robust_sweep" if len(res.assumptions) > 1 else "sweep"
        ax = m.axes
        outputs = sweep_files(res, ("svg",), 51)
        summary = m.summary()
        lm = {
            "title": f"Where {m.level_labels[0]} stays optimal: {ax[0].outcome_label} against {ax[1].outcome_label}",
            "definitions": [a.describe()["definition"] for a in ax],
            "summary": TableView.from_frame(summary, "Share of cases for which leniency is optimal at the scenario's "
                                            "ratios, under each assumption",
                                            {c: fmt_pct for c in summary.columns if c != "assumption"}),
            "grid": map_table(res),
            "figure": inline_svg(outputs["map_lenient.svg"], "map",
                                 f"Lenient map of {ax[0].outcome_label} against {ax[1].outcome_label}"),
            "lines": assumption_lines(kind, res.assumptions)[:-1],
            "note": res.settings.get("constraints", ""),
            "lenient": m.level_labels[0],
            "draws": res.draws_map.summary() if getattr(res, "draws_map", None) is not None else "",
        }
        files.update({name: content for name, content in outputs.items()
                      if not name.endswith(".svg") and name != "sweep.json"})
    return Section(
        key="sweeps",
        title="If the costs were different: sweeps and the lenient map",
        template="sections/sweeps.html.j2",
        context={"blocks": blocks, "map": lm},
        files=files,
    )


#: the section builders, in page order; each takes ReportResults and returns a Section or None
SECTION_BUILDERS: list[Callable[[ReportResults], Section | None]] = [
    summary_section,
    scenario_section,
    data_section,
    risk_level_section,
    live_rule_section,
    constrained_section,
    comparison_section,
    doubt_section,
    aid_effect_section,
    sweep_section,
    worksheet_section,
    implied_section,
    groups_section,
]


def report_sections(results: ReportResults) -> list[Section]:
    """Every section the results support, in page order."""
    return [s for s in (build(results) for build in SECTION_BUILDERS) if s is not None]


# ----------------------------------------------------------------------------------------------
