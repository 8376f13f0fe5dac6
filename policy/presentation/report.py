"""The committee report: one self-contained HTML file assembled from the stages' result objects.

The report computes nothing itself. :func:`build_report` runs the stages (the analysis with any
constrained rule, the comparison with its bootstrap intervals and the aid's effect, a sweep of
each outcome cost and the lenient map); :func:`render_report` turns their result objects, each
section by one builder of :data:`SECTION_BUILDERS`, into a :class:`Section`: a template under
``policy/presentation/templates/`` and the already-formatted figures it shows. The page embeds, as a JSON
data island, the per-cell outcome probabilities, weights and decision costs, so that its live
cost controls can re-run in plain JavaScript the same argmin as :func:`policy.decision.solve.optimal_rule`
(ties to the more lenient level within :data:`policy.decision.solve.TIE_TOLERANCE`) and the same sums as
:func:`policy.decision.evaluate.evaluate`.

Everything a scenario supplies (titles, labels, category values, cost sources) reaches the page
through jinja2's autoescaping or through the data island, whose JSON has ``<``, ``>``, ``&``,
U+2028 and U+2029 written as ``\\u`` escapes, and the script writes it with ``textContent`` only.
The file requests nothing from any network: no external script, font, style sheet or image.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd
from jinja2 import Environment, PackageLoader, StrictUndefined
from markupsafe import Markup

from policy.cautions import ASSUMPTIONS, CAUTIONS, assumptions_for
from policy.decision.evaluate import Evaluation, evaluate
from policy.running.pipeline import Analysis, analyze, as_scenario
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario
from policy.decision.solve import TIE_TOLERANCE

__all__ = [
    "ComparedRule",
    "Report",
    "ReportResults",
    "Section",
    "TableView",
    "build_report",
    "render_report",
    "report_sections",
    "live_data",
    "json_for_script",
    "SECTION_BUILDERS",
]

#: digits after the point of each kind of figure, on the page and in the JavaScript alike
DIGITS = {"share": 1, "rate": 2, "cost": 0}


# ----------------------------------------------------------------------------------------------
# Formatting (presentation only)
# ----------------------------------------------------------------------------------------------
def fmt_pct(value: float, digits: int = 1) -> str:
    """A fraction as a percentage, e.g. 0.1234 -> '12.3%'; missing as an en dash."""
    if value is None or not math.isfinite(float(value)):
        return "\u2013"
    return f"{100.0 * float(value):.{digits}f}%"


def fmt_num(value: float, digits: int = 0) -> str:
    """A number with thousands separators, e.g. 12345.6 -> '12,346'; missing as an en dash."""
    if value is None or not math.isfinite(float(value)):
        return "\u2013"
    text = f"{float(value):,.{digits}f}"
    # a negative number that rounds to zero shows as zero, as on the page's script
    return text[1:] if text.startswith("-") and not any(ch in "123456789" for ch in text) else text


def input_value(value: float) -> str:
    """A number as an HTML number input's value: the shortest round-trip text, '1000' not '1000.0'."""
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


def level_colours(n_levels: int) -> list[str]:
    """Colours of decision levels 0..n-1, lenient to harsh: the figures' (:func:`policy.presentation.plots.level_colours`)."""
    from policy.presentation.plots import level_colours as figure_colours  # noqa: F401

    return figure_colours(n_levels)


def risk_level_colours(n: int) -> list[str]:
    """Colours of risk levels 0..n-1 (safe to not preventable) from matplotlib's ``cividis``,
    a sequential map readable with colour-vision deficiency (Nunez, Anderton and Renslow 2018)."""
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps["cividis"]
    return [to_hex(cmap(1.0 - i / max(n - 1, 1) * 0.9)) for i in range(n)]


def json_for_script(obj: Any) -> Markup:
    """JSON text that is safe inside ``<script type="application/json">``.

    ``<``, ``>`` and ``&`` become ``\\u003c``, ``\\u003e``, ``\\u0026`` (so no ``</script>`` or
    ``<!--`` can appear), and U+2028/U+2029 become ``\\u2028``/``\\u2029``. ``JSON.parse``
    reads the escapes back as the original characters. Non-finite numbers are an error.
    """
    text = json.dumps(obj, separators=(",", ":"), allow_nan=False, ensure_ascii=False)
    for char, escape in (("&", "\\u0026"), ("<", "\\u003c"), (">", "\\u003e"),
                         ("\u2028", "\\u2028"), ("\u2029", "\\u2029")):
        text = text.replace(char, escape)
    return Markup(text)


@dataclass(frozen=True)
class TableView:
    """A table as the page shows it: caption, header and already formatted cells.

    ``numeric`` marks right-aligned columns; ``row_header`` the leading columns that name a row
    (rendered as ``<th scope="row">``).
    """

    caption: str
    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[bool, ...] = ()
    row_header: int = 1
    note: str = ""

    @classmethod
    def from_frame(cls, frame: pd.DataFrame, caption: str, formats: Mapping[str, Callable[[Any], str]] | None = None,
                   row_header: int = 1, note: str = "", rename: Mapping[str, str] | None = None) -> "TableView":
        """Format a DataFrame: each column by ``formats[column]`` (default ``str``)."""
        formats = dict(formats or {})
        cols = list(frame.columns)
        rows = tuple(
            tuple(formats.get(c, _plain)(v) for c, v in zip(cols, values))
            for values in frame.itertuples(index=False, name=None)
        )
        numeric = tuple(c in formats for c in cols)
        names = tuple((rename or {}).get(c, str(c)) for c in cols)
        return cls(caption, names, rows, numeric, row_header, note)


def _plain(value: Any) -> str:
    if isinstance(value, float) and not math.isfinite(value):
        return "\u2013"
    return str(value)


@dataclass(frozen=True)
class Bar:
    """One stacked bar: a label and (name, share, colour) segments; the numbers are in a table beside."""

    label: str
    segments: tuple[tuple[str, float, str], ...]


# ----------------------------------------------------------------------------------------------
# Sections
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Section:
    """One part of the report.

    Attributes
    ----------
    key : str
        The section's anchor (``id``) on the page.
    title : str
    template : str
        Template under ``policy/presentation/templates/`` that renders ``context``.
    context : mapping
        What the template shows, formatted from result objects.
    assumptions : tuple of str
        The assumptions the section's figures rest on (:mod:`policy.cautions`), shown beside them.
    files : mapping
        Tidy tables written beside ``report.html`` (name -> DataFrame or JSON object).
    """

    key: str
    title: str
    template: str
    context: Mapping[str, Any] = field(default_factory=dict)
    assumptions: tuple[str, ...] = ()
    files: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class ComparedRule:
    """A rule whose regret the live controls recompute.

    Attributes
    ----------
    rule : Rule
    evaluation : Evaluation
        Its evaluation at the report's starting costs, with regret against the cost-minimizing rule.
    note : str
        What the rule is, in a phrase.
    """

    rule: Rule
    evaluation: Evaluation
    note: str


@dataclass(frozen=True)
class ReportResults:
    """The result objects a report is assembled from.

    Only ``analysis`` is required; each later stage's result adds its sections when given.

    Attributes
    ----------
    analysis : Analysis
    compared : tuple of ComparedRule
        Rules scored against the cost-minimizing one, live on the page.
    constrained_sweeps : tuple of ConstrainedSweep
        The constrained optimum re-solved along each outcome cost's ratio
        (:mod:`policy.assessment.sweep.constrained`), shown at the point nearest the ratio chosen on the page.
    comparison : Comparison, optional
        The rules compared with intervals and the aid's effect (:func:`policy.assessment.compare.compare`).
    comparison_note : str
        Why there is no comparison, where there is none.
    sweeps : tuple of SweepResult
        One-ratio sweeps (:func:`policy.assessment.sweep.sweep_scenario`), with their robust lenient regions.
    lenient_map : SweepResult, optional
        A two-ratio lenient map.
    """

    analysis: Analysis
    compared: tuple[ComparedRule, ...] = ()
    constrained_sweeps: tuple[Any, ...] = ()
    comparison: Any = None
    comparison_note: str = ""
    sweeps: tuple[Any, ...] = ()
    lenient_map: Any = None

    @property
    def scenario(self) -> Scenario:
        return self.analysis.scenario


def held_rule(analysis: Analysis) -> ComparedRule:
    """The cost-minimizing rule at the scenario's costs, as a rule compared while the costs move."""
    rule = analysis.rule
    return ComparedRule(rule, evaluate(rule, analysis.risk_levels, analysis.costs, reference=rule),
                        "the cost-minimizing rule at the scenario's own costs, held fixed while the costs move")


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
            cost = f"per case from column {level.cost_column} (mean {fmt_num(mean, 0)})"
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
                                ("level", "label", "value in the data", f"cost ({unit})", "source of the cost"),
                                tuple(levels), (True, False, False, True, False)),
            "outcomes": TableView(f"Outcome kinds (costs in {unit} per adverse outcome)",
                                  ("outcome", "key", f"cost ({unit})", "source of the cost"),
                                  tuple(outcomes), (False, False, True, False)),
            "rule_columns": list(results.analysis.rule.rule_cells.columns),
            "protected": list(sc.protected),
            "covariates": list(sc.covariates),
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
            "group": [("all cases" if a == "all" else f"{a}: {g}") for a, g in zip(part["attribute"], part["group"])],
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
    compared = [{"name": c.rule.name, "note": c.note, "cost": fmt_num(c.evaluation.cost_per_1000),
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


def groups_section(results: ReportResults) -> Section:
    """Decision shares and outcome rates by group, and where risk levels land, at the scenario's costs."""
    ev = results.analysis.evaluation
    by_group = ev.by_group()
    by_group.insert(0, "who", [("all cases" if a == "all" else f"{a}: {g}") for a, g in zip(by_group["attribute"], by_group["group"])])
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
        bound = "" if r["kind"] == "group_blind" else f"{r['bound_key']} {r['bound']:g} ({r['unit']})"
        rows.append((str(r["constraint"]), str(r["kind"]).replace("_", " "), str(r["arguments"]), bound,
                     "binds" if r["binding"] else "does not bind",
                     "\u2013" if not np.isfinite(r["value"]) else f"{r['value']:.4g}",
                     fmt_num(r["saving_per_point_per_1000"]), fmt_num(r["saving_if_removed_per_1000"])))
    constraints = TableView(
        f"The constraints and what each costs (per 1,000 cases, {unit})",
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
    rule = TableView(f"{con.rule.name}, by rule cell", tuple(columns) + ("cases", "decision"), rule_rows,
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


def fmt_interval(value: float, lo: float, hi: float, fmt: Callable[[float], str]) -> str:
    """A figure with its interval in brackets, e.g. '12.3% (10.1% to 14.0%)'; without one where missing."""
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return fmt(value)
    return f"{fmt(value)} ({fmt(lo)} to {fmt(hi)})"


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

    main_rows, share_rows = [], []
    for _, row in frame.iterrows():
        main_rows.append((row["rule"], row["kind"], iv(row, "cost_per_1000_cases", cost),
                          iv(row, "regret_per_1000_cases", cost), iv(row, "agreement", pct1)))
        share_rows.append((row["rule"],) + tuple(iv(row, f"share_{v}", pct1) for v in rl.level_values)
                          + tuple(iv(row, f"rate_{k}", pct2) for k in rl.outcome_keys))
    label = cmp.result.interval_label
    unit = cmp.costs.unit
    costs_view = TableView(f"Expected cost, regret and agreement per 1,000 cases ({unit}; {label} in brackets)",
                           ("rule", "kind", "expected cost", "regret against the cost-minimizing rule",
                            "same decision as the cost-minimizing rule"),
                           tuple(main_rows), (False, False, True, True, True))
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
    return Section(
        key="comparison",
        title="Compared with what courts did, the aid and candidate rules",
        template="sections/comparison.html.j2",
        context={
            "costs": costs_view, "shares": shares_view, "misplaced": misplaced_view,
            "rules": [(rule.name, rule.kind, rule.note) for rule in cmp.rules],
            "replicates": r.n_replicates, "seed": r.seed, "label": label, "notes": list(cmp.notes),
            "observed_assumptions": assumptions_for("observed_rule"),
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
        return Section(key="aid-effect", title="The effect of showing the aid, by risk level",
                       template="sections/unavailable.html.j2",
                       context={"why": "The data have no arm column (whether the aid was shown), so the aid's effect "
                                       "on decisions cannot be estimated."})
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


def inline_svg(write: Callable[[Path], None], key: str, label: str) -> Markup:
    """A figure, written as SVG by ``write(path)`` (a writer of :func:`policy.presentation.plots.figure_files`),
    as an element to place inside the page.

    Its ids get the prefix ``key`` (figures share glyph and clip-path ids otherwise), comments,
    metadata and namespace declarations go, and it scales to the page's width. Text drawn as
    paths carries no markup; ``label`` (escaped) names the figure for screen readers.
    """
    import re
    import tempfile
    from html import escape

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "figure.svg"
        write(path)
        text = path.read_text(encoding="utf-8")
    text = text[text.index("<svg"):]
    text = re.sub(r"<!--.*?-->", "", text, flags=re.S)
    text = re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{key}-{m.group(1)}"', text)
    text = re.sub(r'((?:xlink:)?href)="#([^"]+)"', lambda m: f'{m.group(1)}="#{key}-{m.group(2)}"', text)
    text = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{key}-{m.group(1)})", text)
    root = re.match(r"<svg\b[^>]*>", text).group(0)
    clean = re.sub(r'\s(?:width|height|version|xmlns(?::\w+)?)="[^"]*"', "", root)
    clean = clean[:-1] + f' width="100%" role="img" aria-label="{escape(label, quote=True)}">'
    return Markup(clean + text[len(root):])


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
        view = TableView.from_frame(
            summary, f"Where {sw.level_labels[0]} stays optimal as the {axis.outcome_label} cost varies, "
                     "under each assumption",
            {"share_lenient_at_low": fmt_pct, "share_lenient_at_scenario": fmt_pct,
             "up_to_ratio": lambda v: fmt_num(v, 2), "up_to_cost": fmt_num},
            rename={"share_lenient_at_low": f"share of cases, ratio {fmt_num(sw.lo, 2)}",
                    "share_lenient_at_scenario": "share of cases, scenario's ratio",
                    "up_to_ratio": f"stays optimal for at least {fmt_pct(share, 0)} of cases up to ratio",
                    "up_to_cost": f"that is, up to a cost of ({axis.unit})"})
        columns = list(sw.rule_cells.columns)
        breaks_view = TableView.from_frame(
            sw.breakpoints(), f"Where a rule cell's optimal level changes along the {axis.outcome_label} ratio (exact)",
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
        blocks.append({
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
            "figure": inline_svg(outputs["map_lenient.svg"], "map",
                                 f"Lenient map of {ax[0].outcome_label} against {ax[1].outcome_label}"),
            "lines": assumption_lines(kind, res.assumptions)[:-1],
            "note": res.settings.get("constraints", ""),
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
    scenario_section,
    data_section,
    risk_level_section,
    live_rule_section,
    constrained_section,
    comparison_section,
    aid_effect_section,
    sweep_section,
    groups_section,
]


def report_sections(results: ReportResults) -> list[Section]:
    """Every section the results support, in page order."""
    return [s for s in (build(results) for build in SECTION_BUILDERS) if s is not None]


# ----------------------------------------------------------------------------------------------
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
# Rendering
# ----------------------------------------------------------------------------------------------
def _environment() -> Environment:
    env = Environment(loader=PackageLoader("policy.presentation", "templates"), autoescape=True, undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)
    env.filters["pct"] = fmt_pct
    env.filters["num"] = fmt_num
    env.globals["zip"] = zip
    env.filters["input_value"] = input_value
    return env


def _asset(env: Environment, name: str, closing: str) -> Markup:
    """A style sheet or script of the package, inlined verbatim; it must not close its element."""
    text = env.loader.get_source(env, name)[0]
    if closing in text.lower():
        raise RuntimeError(f"policy/presentation/templates/{name} contains {closing!r}, which would end its element early.")
    return Markup(text)


@dataclass(frozen=True)
class Report:
    """The committee report: the HTML page and the tidy tables written beside it.

    Attributes
    ----------
    scenario : Scenario
    html : str
        The whole self-contained page.
    sections : list of Section
    files : dict
        Tidy tables by file name (the stages' own output files).
    results : ReportResults
        The result objects the page was assembled from.
    """

    scenario: Scenario
    html: str
    sections: tuple[Section, ...]
    files: Mapping[str, Any]
    results: ReportResults | None = None

    def output_files(self) -> dict[str, Any]:
        """``report.html`` and the tables beside it, for :func:`policy.outputs.write_outputs`."""
        return {"report.html": self.html, **self.files}

    def __str__(self) -> str:
        return (f"Report on {self.scenario.title}: {len(self.sections)} sections "
                f"({', '.join(s.title for s in self.sections)}), {len(self.html):,} characters of HTML, "
                f"{len(self.files)} tables beside it.")

    def _repr_html_(self) -> str:
        from html import escape

        return f'<iframe srcdoc="{escape(self.html, quote=True)}" style="width:100%;height:40em;border:1px solid #999"></iframe>'


def render_report(results: ReportResults | Analysis) -> Report:
    """Assemble the report from result objects; compute nothing.

    Parameters
    ----------
    results : ReportResults or Analysis
        The analysis, and the results of later stages where available.
    """
    if isinstance(results, Analysis):
        results = ReportResults(results, (held_rule(results),))
    env = _environment()
    sections = report_sections(results)
    sc = results.scenario
    figure_assumptions = [(s.title, s.key, list(s.assumptions)) for s in sections if s.assumptions]
    files: dict[str, Any] = {}
    for s in sections:
        files.update(s.files)
    page = env.get_template("report.html.j2").render(
        title=sc.title,
        cautions=list(CAUTIONS),
        sections=sections,
        figure_assumptions=figure_assumptions,
        files=sorted(files),
        data=json_for_script({"live": live_data(results)}),
        style=_asset(env, "report.css", "</style"),
        script=_asset(env, "report.js", "</script"),
    )
    return Report(sc, page, tuple(sections), files, results)


#: what each kind of compared rule is, in the live table
KIND_NOTES = {
    "optimal": "the cost-minimizing rule at the scenario's own costs, held fixed while the costs move",
    "aid": "what the aid recommended",
    "candidate": "a candidate rule written in the scenario",
    "observed": "what courts did (decisions observed in the data)",
}


def compared_rules(comparison) -> list[ComparedRule]:
    """The rules of a comparison, each with its point evaluation, as rules compared live."""
    out = []
    for rule, evaluation in zip(comparison.rules, comparison.evaluations):
        note = KIND_NOTES["optimal"] if rule.kind == "optimal" else (rule.note or KIND_NOTES.get(rule.kind, rule.kind))
        out.append(ComparedRule(rule, evaluation, note))
    return out


def build_report(scenario: Scenario | str | Path, outcome_costs: Mapping[str, float] | None = None,
                 decision_costs: Mapping[str, float] | None = None, replicates: int | None = None,
                 progress: bool = False) -> Report:
    """Run the stages for a scenario and assemble their results into the committee report.

    Parameters
    ----------
    scenario : Scenario or path
    outcome_costs, decision_costs : mapping, optional
        What-if overrides of the scenario's costs, as for :func:`policy.running.pipeline.analyze`;
        the page's controls start from these costs.
    replicates : int, optional
        Bootstrap replicates of the comparison and of the sweeps' bands (default: the scenario's
        ``[uncertainty]``).
    progress : bool
        Show the bootstrap's progress bar.

    Returns
    -------
    Report
    """
    from policy.assessment.compare import compare

    scenario = as_scenario(scenario)
    analysis = analyze(scenario, outcome_costs, decision_costs)
    comparison, why = None, ""
    if scenario.data.kind == "risk_level_table":
        why = ("The risk levels came from a table estimated elsewhere: it holds no observed decisions and no counts, "
               "so there is nothing courts did to compare and no bootstrap interval.")
        compared = [held_rule(analysis)]
    else:
        comparison = compare(scenario, replicates=replicates, outcome_costs=outcome_costs,
                             decision_costs=decision_costs, progress=progress)
        compared = compared_rules(comparison)
    if analysis.constrained is not None:
        compared.append(held_constrained_rule(analysis))
    sweeps, lenient_map = cost_sweeps(scenario, [c.rule for c in compared], outcome_costs, decision_costs,
                                      replicates, progress)
    points = tuple(res.constrained for res in sweeps if res.constrained is not None)
    return render_report(ReportResults(analysis, tuple(compared), points, comparison, why, tuple(sweeps), lenient_map))


def cost_sweeps(scenario: Scenario, rules: Sequence[Rule], outcome_costs: Mapping[str, float] | None = None,
                decision_costs: Mapping[str, float] | None = None, replicates: int | None = None,
                progress: bool = False) -> tuple[list, Any]:
    """One exact sweep per outcome kind's cost ratio, with the compared rules' regret, bootstrap
    bands where the data hold counts and, with constraints, the constrained optimum re-solved
    along it; and the lenient map of the first two outcome kinds (:func:`policy.assessment.sweep.sweep_scenario`)."""
    from policy.assessment.sweep import sweep_scenario

    keys = list(scenario.outcome_keys)
    bands = replicates if scenario.data.kind != "risk_level_table" else 0
    sweeps = [sweep_scenario(scenario, [k], rules=list(rules), outcome_costs=outcome_costs,
                             decision_costs=decision_costs, replicates=bands, progress=progress) for k in keys]
    lenient_map = (sweep_scenario(scenario, keys[:2], outcome_costs=outcome_costs, decision_costs=decision_costs)
                   if len(keys) >= 2 else None)
    return sweeps, lenient_map


def held_constrained_rule(analysis: Analysis) -> ComparedRule:
    """The constrained optimal rule at the scenario's costs, compared while the costs move."""
    con = analysis.constrained
    return ComparedRule(con.rule, evaluate(con.rule, analysis.risk_levels, analysis.costs, reference=analysis.rule),
                        "the constrained optimal rule at the scenario's own costs, held fixed while the costs move")
