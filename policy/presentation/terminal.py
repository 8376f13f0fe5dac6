"""What the command line prints: the cautions and assumptions, and each result as labelled,
formatted tables (control characters in labels shown visibly)."""

from __future__ import annotations


from rich.text import Text

from policy.cautions import CAUTIONS, assumptions_for
from policy.presentation.checks import (VisibleConsole)


# markup is off: labels from scenario files are printed as written, never as styles
console = VisibleConsole(highlight=False, markup=False, width=120, soft_wrap=True)


err_console = VisibleConsole(stderr=True, highlight=False, markup=False, soft_wrap=True)


def Table(*args, **kwargs):
    """A rich table (rich.table is imported when a command prints one, not at start-up)."""
    from rich.table import Table as RichTable

    return RichTable(*args, **kwargs)


def Panel(*args, **kwargs):
    """A rich panel (imported when used, like :func:`Table`)."""
    from rich.panel import Panel as RichPanel

    return RichPanel(*args, **kwargs)


def _print_doubt(found, ladder=None) -> None:
    console.print("Rules that hold under doubt:", style="bold")
    console.print(found.summary())
    if ladder is not None:
        console.print("Where each conclusion stops holding (doubt_ladder.csv):", style="bold")
        for line in ladder.lines():
            console.print(f"  - {line}", markup=False)
    console.print("Assumptions behind the robust and safe rules:", style="bold")
    for a in found.robust.bounds.assumptions:
        console.print(f"  - {a}")


def show_cautions() -> None:
    console.print(Panel("\n".join(f"- {c}" for c in CAUTIONS), title="Cautions", border_style="yellow"), soft_wrap=False)


def show_assumptions(figure: str) -> None:
    console.print("Assumptions behind these figures:", style="bold")
    for a in assumptions_for(figure):
        console.print(f"  - {a}")


def show_arm_check(check) -> None:
    """The randomized arm's verdict on unconfoundedness (printed right after the cautions)."""
    if check is None:
        return
    lines = check.lines()
    console.print(lines[0], style="bold red" if check.rejects else "green")
    for line in lines[1:]:
        console.print(line)


def show_written(paths) -> None:
    console.print(f"Wrote {len(paths)} files to {paths[0].parent if paths else '?'}: "
                  + ", ".join(p.name for p in paths))


def _rule_table(analysis) -> Table:
    rule = analysis.rule
    frame = rule.to_frame()
    label = analysis.scenario.column_label
    table = Table(title=f"{rule.name} (by {', '.join(label(c) for c in rule.rule_cells.columns)})", show_lines=False)
    for col in rule.rule_cells.columns:
        table.add_column(label(col))
    table.add_column("decision")
    table.add_column("cases", justify="right")
    for _, row in frame.iterrows():
        level = row["level"] + (" (split)" if row["split"] else "")
        table.add_row(*[str(row[c]) for c in rule.rule_cells.columns], level, f"{row.get('cases', float('nan')):,.0f}")
    return table


def fmt_factor(value: float, significant: int = 6) -> str:
    """A bound or reached value as people write it ('40,000', '0.15'), never '4e+04'."""
    from policy.presentation.report.formatting import fmt_factor as shown

    return shown(value, significant)


def _evaluation_table(evaluation, unit: str) -> Table:
    table = Table(title="Expected consequences of the rule")
    table.add_column("figure")
    table.add_column("value", justify="right")
    table.add_row(f"expected cost per 1,000 cases, {unit}", f"{evaluation.cost_per_1000:,.0f}")
    for lab, share in zip(evaluation.level_labels, evaluation.level_shares):
        table.add_row(f"share: {lab}", f"{share:.1%}")
    for lab, rate in zip(evaluation.outcome_labels, evaluation.outcome_rates):
        table.add_row(f"expected rate: {lab}", f"{rate:.1%}")
    return table


def _risk_table(rl) -> Table:
    summary = rl.summary(by_group=False)
    table = Table(title="Risk levels (share of cases)")
    table.add_column("outcome")
    for col in summary.columns:
        table.add_column(col, justify="right")
    for name, row in summary.iterrows():
        table.add_row(str(name), *[f"{v:.1%}" for v in row])
    return table


def _print_analysis(analysis) -> None:
    console.print(analysis.scenario.title, style="bold")
    console.print(_risk_table(analysis.risk_levels))
    console.print(_rule_table(analysis))
    console.print(_evaluation_table(analysis.evaluation, analysis.costs.unit))
    if getattr(analysis, "constrained", None) is not None:
        _print_constrained(analysis.constrained)
    show_assumptions("rule")
    show_cautions()
    show_arm_check(getattr(analysis, "arm_check", None))


def _constraint_table(constrained) -> Table:
    frame = constrained.to_frame()
    table = Table(title=f"Constraints (price {constrained.price_per_1000:,.0f} {constrained.unit} per 1,000 cases "
                        "above the unconstrained optimum)")
    for col in ("constraint", "bound", "reached", "binds", "saving if loosened one point, per 1,000", "saving if removed per 1,000"):
        table.add_column(col, justify="left" if col == "constraint" else "right")
    for _, row in frame.iterrows():
        bound = "none" if row["kind"] == "group_blind" else f"{row['bound_key'].replace('_', ' ')} {fmt_factor(row['bound'])}"
        table.add_row(f"{row['constraint']} ({row['kind']})", bound,
                      "" if row["value"] != row["value"] else fmt_factor(row["value"], 4),
                      "yes" if row["binding"] else "no",
                      "" if row["saving_per_point_per_1000"] != row["saving_per_point_per_1000"] or row["kind"] == "group_blind"
                      else f"{row['saving_per_point_per_1000']:,.0f}",
                      f"{row['saving_if_removed_per_1000']:,.0f}")
    return table


def _print_constrained(constrained) -> None:
    rule = constrained.rule
    frame = rule.to_frame()
    table = Table(title=f"{rule.name} (by {', '.join(rule.rule_cells.columns) or 'nothing'})")
    for col in rule.rule_cells.columns:
        table.add_column(col)
    table.add_column("decision")
    table.add_column("cases", justify="right")
    for _, row in frame.iterrows():
        if row["split"]:
            level = " / ".join(f"{lab} {row[f'share_{v}']:.0%}" for v, lab in zip(rule.level_values, rule.level_labels)
                               if row[f"share_{v}"] > 1e-6)
        else:
            level = row["level"]
        table.add_row(*[str(row[c]) for c in rule.rule_cells.columns], level, f"{row.get('cases', float('nan')):,.0f}")
    console.print(table)
    console.print(_constraint_table(constrained))
    console.print(_evaluation_table(constrained.evaluation, constrained.unit))
    if len(rule.split_cells):
        console.print(f"{len(rule.split_cells)} rule cells are split between levels: the optimum randomizes there "
                      "(shares above); a court would apply the levels to those shares of the cell's cases.")
    for note in constrained.notes:
        console.print(f"note: {note}")


def _interval_text(value: float, lo: float, hi: float, fmt: str) -> str:
    if value != value:  # NaN: not estimated (e.g. an arm with no cases)
        return "not estimated"
    if lo != lo or hi != hi:  # NaN: no interval
        return format(value, fmt)
    return f"{format(value, fmt)} ({format(lo, fmt)} to {format(hi, fmt)})"


def _comparison_table(comparison) -> Table:
    import numpy as np

    frame = comparison.comparison_frame()
    keys = comparison.risk_levels.outcome_keys
    first = comparison.risk_levels.outcome_labels[0]
    table = Table(title=f"Rules compared ({comparison.result.interval_label} in brackets)")
    table.add_column("rule")
    table.add_column(f"expected cost per 1,000 cases, {comparison.costs.unit}", justify="right")
    table.add_column("allowing for the rule's choice on these data", justify="right")
    table.add_column("regret per 1,000 cases", justify="right")
    table.add_column("same level as the optimum", justify="right")
    table.add_column(f"safe ({first}) given a harsher level", justify="right")
    table.add_column(f"preventable ({first}) given too lenient a level", justify="right")
    for _, row in frame.iterrows():
        table.add_row(
            row["rule"],
            _interval_text(row["cost_per_1000_cases"], row["cost_per_1000_cases_lower"], row["cost_per_1000_cases_upper"], ",.0f"),
            (f"{row['cost_per_1000_cases_chosen_lower']:,.0f} to {row['cost_per_1000_cases_chosen_upper']:,.0f}"
             if np.isfinite(row["cost_per_1000_cases_chosen_lower"]) else ""),
            _interval_text(row["regret_per_1000_cases"], row["regret_per_1000_cases_lower"], row["regret_per_1000_cases_upper"], ",.0f"),
            _interval_text(row["agreement"], row["agreement_lower"], row["agreement_upper"], ".1%"),
            _interval_text(row[f"safe_given_harsher_{keys[0]}"], row[f"safe_given_harsher_{keys[0]}_lower"],
                           row[f"safe_given_harsher_{keys[0]}_upper"], ".1%"),
            _interval_text(row[f"preventable_given_too_lenient_{keys[0]}"], row[f"preventable_given_too_lenient_{keys[0]}_lower"],
                           row[f"preventable_given_too_lenient_{keys[0]}_upper"], ".1%"),
        )
    return table


def _print_ranges(frame, unit: str) -> None:
    """Each rule's expected cost range at Gamma = 2 and under the monotone bounds (all in comparison_ranges.csv)."""
    import numpy as np

    console.print(f"Expected cost per 1,000 cases in {unit}, if unconfoundedness fails (every Gamma in comparison_ranges.csv; "
                  "regret ranges in comparison_regret_ranges.csv):", style="bold")
    for name, rows in frame.groupby("rule", sort=False):
        parts = [f"{label} {r['cost_per_1000_cases_lower']:,.0f} to {r['cost_per_1000_cases_upper']:,.0f}"
                 if np.isfinite(r["cost_per_1000_cases_lower"]) else f"{label} not estimated"
                 for key, label in (("gamma=2", "Gamma = 2:"), ("bounds", "monotone bounds:"))
                 for _, r in rows[rows["assumption"] == key].iterrows()]
        console.print(f"  - {name}: " + "; ".join(parts))


def _difference_matrix(comparison) -> Table:
    """Paired cost differences, rules numbered: row rule minus column rule, its interval, and
    the share of replicates in which the row rule is cheaper."""
    matrix = comparison.summary()
    table = Table(title=f"Paired differences in expected cost per 1,000 cases in {comparison.costs.unit}: row rule minus "
                        f"column rule ({comparison.result.interval_label} of the difference from the same replicates; "
                        "%: replicates in which the row rule is cheaper)")
    table.add_column("rule")
    for k in range(len(matrix)):
        table.add_column(f"minus {k + 1}", justify="right")
    for k, (name, row) in enumerate(matrix.iterrows()):
        table.add_row(Text(f"{k + 1} {name}"), *(v.replace(" cheaper", "") if v != "0" else "" for v in row))
    return table
