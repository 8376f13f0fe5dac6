"""The command line: parse, call one library function, write its files, print a summary.

No numerics live here. Exit codes: 0 success, 2 bad input, 3 constraints that cannot all hold,
4 solver trouble, 5 tasks that could not be run to the end where they were sent (--run-on),
1 anything unexpected.
"""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import functools

import typer
from rich.console import Console
from rich.panel import Panel
from rich.table import Table

from policy.cautions import CAUTIONS, assumptions_for
from policy.errors import InputError, PolicyError

app = typer.Typer(
    add_completion=False,
    rich_markup_mode=None,
    no_args_is_help=True,
    help=(
        "Release-rule analysis for pretrial decisions: risk levels, cost-minimizing rules, "
        "comparisons and sweeps. For analysis of rules for groups of cases, never for a "
        "decision about an individual."
    ),
)
# markup is off: labels from scenario files are printed as written, never as styles
console = Console(highlight=False, markup=False, width=120, soft_wrap=True)
err_console = Console(stderr=True, highlight=False, markup=False, soft_wrap=True)

def command(fn):
    """Register a command whose tool errors become a message and the error's exit code."""

    @functools.wraps(fn)
    def run(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except PolicyError as exc:
            err_console.print(f"error: {exc}", style="bold red")
            conflicts = getattr(exc, "conflicts", None)
            if conflicts is not None:
                err_console.print(conflicts.to_string(index=False))
            raise typer.Exit(exc.exit_code) from None

    return app.command()(run)


OutOption = typer.Option(..., "--out", "-o", help="Output folder (created if missing).")
CostOption = typer.Option(None, "--cost", help="Override an outcome cost: KEY=NUMBER (repeatable).")
DecisionCostOption = typer.Option(None, "--decision-cost", help="Override a decision level's cost: VALUE=NUMBER (repeatable).")
DecisionFactorOption = typer.Option(None, "--decision-cost-factor", help="Multiply a decision level's per-cell costs (from its cost_column) by a factor: VALUE=FACTOR, e.g. bond=1.5 (repeatable).")
ConstraintOption = typer.Option(None, "--constraint", help="Add a constraint with the keys of a [[constraints]] table: kind=capacity,at_least=bond,max_share=0.15 (repeatable; list values joined by |).")
GroupBlindOption = typer.Option(False, "--group-blind", help="Add: the rule may not use any protected attribute.")
PrincipalFairnessOption = typer.Option(None, "--principal-fairness", help="Add principal fairness for an outcome: OUTCOME=TOLERANCE, e.g. new_offense=0.02 (repeatable).")
MaxShareOption = typer.Option(None, "--max-share", help="Add a capacity cap: LEVEL=SHARE of cases at that level or harsher, e.g. bond=0.15 (repeatable).")
MaxRateOption = typer.Option(None, "--max-rate", help="Add an outcome-rate cap: OUTCOME=RATE, e.g. missed_court=0.15 (repeatable).")
IgnoreConstraintsOption = typer.Option(False, "--ignore-scenario-constraints", help="Leave out the scenario's own [[constraints]].")
ReplicatesOption = typer.Option(None, "--replicates", help="Bootstrap replicates (default: [uncertainty] replicates, 1000; 0: no intervals).")
SeedOption = typer.Option(None, "--seed", help="Root seed of the bootstrap (default: [scenario] seed).")
ResamplingOption = typer.Option(None, "--resampling", help="'poisson' or 'multinomial' (default: [uncertainty] resampling).")
OutcomesOption = typer.Option(None, "--outcomes", help="'model' or 'cases' (default: [uncertainty] outcomes).")
IntervalOption = typer.Option(None, "--interval", help="Coverage of the intervals (default: [uncertainty] interval, 0.95).")
WorkersOption = typer.Option(None, "--workers", help="Worker processes (default: every core); the output does not depend on it.")
ProgressOption = typer.Option(True, "--progress/--no-progress", help="Show progress bars.")
RunOnOption = typer.Option(None, "--run-on", help="Where independent tasks run: here (this process), local or local:N "
                           "(a Dask cluster of N worker processes on this machine), or a Dask scheduler address such as "
                           "tcp://10.0.0.5:8786. Results are the same wherever they run. Dask is an optional extra: "
                           'pip install "policy-release-rules[distributed]".')
LPSolverOption = typer.Option(None, "--lp-solver", help="LP solver for constrained rules (overrides [linear_program] solver), e.g. HIGHS, CLARABEL.")


def _constraint_options(sc, constraint, group_blind, principal_fairness, max_share, max_rate, solver):
    """Constraints added on the command line (as tables) and the LP settings in force."""
    from dataclasses import replace

    from policy.decision.constrained import lp_settings_from_table
    from policy.decision.constraints import parse_constraint_text, shorthand_tables

    added = [parse_constraint_text(text) for text in constraint or []]
    added += shorthand_tables(group_blind, principal_fairness or [], max_share or [], max_rate or [])
    settings = sc.sections.get("linear_program")
    if solver is not None:
        chosen = lp_settings_from_table({"solver": solver}, "--lp-solver", "the option")
        settings = replace(settings, solver=chosen.solver)
    return added, settings


def _pairs(values: Optional[List[str]], what: str) -> dict[str, float]:
    out: dict[str, float] = {}
    for item in values or []:
        key, sep, value = item.partition("=")
        try:
            number = float(value)
        except ValueError:
            number = None
        if not sep or not key or number is None:
            raise InputError(f"{what} {item!r} must look like NAME=NUMBER, e.g. new_offense=8000.")
        out[key.strip()] = number
    return out


def _decision_costs(decision_cost: Optional[List[str]], factors: Optional[List[str]] = None) -> dict:
    """--decision-cost flat costs and --decision-cost-factor factors on per-cell costs, by level."""
    from policy.decision.costs import CostFactor

    out: dict = _pairs(decision_cost, "--decision-cost")
    for key, value in _pairs(factors, "--decision-cost-factor").items():
        if key in out:
            raise InputError(f"--decision-cost and --decision-cost-factor both set level {key!r}; give one of them.")
        if value < 0:
            raise InputError(f"--decision-cost-factor {key}={value:g}: a factor must be >= 0.")
        out[key] = CostFactor(value)
    return out


def show_cautions() -> None:
    console.print(Panel("\n".join(f"- {c}" for c in CAUTIONS), title="Cautions", border_style="yellow"), soft_wrap=False)


def show_assumptions(figure: str) -> None:
    console.print("Assumptions behind these figures:", style="bold")
    for a in assumptions_for(figure):
        console.print(f"  - {a}")


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
    table.add_row(f"expected cost per 1,000 cases ({unit})", f"{evaluation.cost_per_1000:,.0f}")
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


@command
def demo(out: Path = OutOption,
         cases: Optional[int] = typer.Option(None, help="Number of simulated cases (default: the demo scenario's).")):
    """Build the invented Quarrow County data, estimate risk levels, find the optimal rule, write all outputs."""
    from policy.outputs import write_outputs
    from policy.running.pipeline import analyze, write_demo_inputs

    if cases is not None and cases <= 0:
        raise InputError(f"--cases must be a positive number of cases; got {cases}.")
    analysis = analyze(write_demo_inputs(out, cases)[0])
    paths = write_outputs(out, analysis.output_files())
    _print_analysis(analysis)
    console.print(f"Demo data and scenario: {out / 'cases.csv'}, {out / 'scenario.toml'}")
    show_written(paths)


@command
def check(scenario: Path = typer.Argument(..., help="Scenario file (TOML).")):
    """Validate a scenario and its data; report cases, cells, sparse cells and levels never observed."""
    from policy.running.pipeline import check as run_check

    report = run_check(scenario)
    table = Table(title=f"{report.scenario.title}: what the data hold")
    table.add_column("finding")
    table.add_column("value")
    for key, value in report.rows():
        table.add_row(key, value)
    console.print(table)
    console.print("The scenario and its data are valid.", style="green")


@command
def estimate(scenario: Path = typer.Argument(..., help="Scenario file (TOML)."), out: Path = OutOption):
    """Estimate risk levels per cell and write the cell table and risk-level tables."""
    from policy.outputs import write_outputs
    from policy.running.pipeline import as_scenario, estimate as run_estimate

    sc = as_scenario(scenario)
    cells, rl = run_estimate(sc)
    files = {"risk_levels.csv": rl.to_frame(), "risk_level_shares.csv": rl.shares()}
    if cells is not None:
        files = {"cells.csv": cells.counts_frame(sc), **files}
    paths = write_outputs(out, files)
    console.print(_risk_table(rl))
    show_assumptions("risk_levels")
    show_cautions()
    show_written(paths)


def _print_analysis(analysis) -> None:
    console.print(analysis.scenario.title, style="bold")
    console.print(_risk_table(analysis.risk_levels))
    console.print(_rule_table(analysis))
    console.print(_evaluation_table(analysis.evaluation, analysis.costs.unit))
    if getattr(analysis, "constrained", None) is not None:
        _print_constrained(analysis.constrained)
    show_assumptions("rule")
    show_cautions()


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


@command
def solve(
    scenario: Path = typer.Argument(..., help="Scenario file (TOML)."),
    out: Path = OutOption,
    cost: Optional[List[str]] = CostOption,
    decision_cost: Optional[List[str]] = DecisionCostOption,
    decision_cost_factor: Optional[List[str]] = DecisionFactorOption,
    constraint: Optional[List[str]] = ConstraintOption,
    group_blind: bool = GroupBlindOption,
    principal_fairness: Optional[List[str]] = PrincipalFairnessOption,
    max_share: Optional[List[str]] = MaxShareOption,
    max_rate: Optional[List[str]] = MaxRateOption,
    ignore_constraints: bool = IgnoreConstraintsOption,
    solver: Optional[str] = LPSolverOption,
):
    """Find the expected-cost-minimizing release rule and write it with its evaluation.

    With constraints (the scenario's [[constraints]] or the options below), also the constrained
    optimal rule, its price and the constraint table. Exit code 3 and no files when the
    constraints cannot all hold.
    """
    from policy.outputs import write_outputs
    from policy.running.pipeline import analyze, as_scenario

    sc = as_scenario(scenario)
    added, settings = _constraint_options(sc, constraint, group_blind, principal_fairness, max_share, max_rate, solver)
    analysis = analyze(sc, _pairs(cost, "--cost"), _decision_costs(decision_cost, decision_cost_factor), constraints=added,
                       scenario_constraints=not ignore_constraints, lp_settings=settings)
    paths = write_outputs(out, analysis.output_files())
    _print_analysis(analysis)
    show_written(paths)


@command
def report(
    scenario: Path = typer.Argument(..., help="Scenario file (TOML)."),
    out: Path = OutOption,
    cost: Optional[List[str]] = typer.Option(None, "--cost", help="Start from another outcome cost: KEY=NUMBER (repeatable)."),
    decision_cost: Optional[List[str]] = typer.Option(None, "--decision-cost", help="Start from another decision level's cost: VALUE=NUMBER (repeatable)."),
    decision_cost_factor: Optional[List[str]] = typer.Option(None, "--decision-cost-factor", help="Start from a factor on a decision level's per-cell costs: VALUE=FACTOR (repeatable)."),
    replicates: Optional[int] = typer.Option(None, help="Bootstrap replicates of the comparison and the sweeps' bands (default: [uncertainty] replicates)."),
    progress: bool = typer.Option(True, "--progress/--no-progress", help="Show a progress bar."),
    cache: bool = typer.Option(True, "--cache/--no-cache", help="Reuse the comparison and sweeps cached in the output folder when the scenario file, data, costs and replicates are unchanged."),
):
    """Write the committee report: one self-contained HTML page with live cost controls, and its tables.

    The comparison's bootstrap and the sweeps' bands take most of the time (minutes at 1,000
    replicates); they are cached in OUT/.policy-report-cache and reused while nothing they depend on changes.
    """
    from policy.outputs import write_outputs
    from policy.presentation.report import build_report
    from policy.presentation.report.cache import CACHE_FOLDER, cache_key, cache_name
    from policy.running.pipeline import as_scenario

    sc = as_scenario(scenario)
    outcome_costs, decision_costs = _pairs(cost, "--cost"), _decision_costs(decision_cost, decision_cost_factor)
    if replicates is not None and replicates < 0:
        raise InputError(f"--replicates must be 0 or more; got {replicates}.")
    n = replicates if replicates is not None else sc.sections["uncertainty"].replicates
    if cache and (out / cache_name(cache_key(sc, outcome_costs, decision_costs, replicates))).is_file():
        console.print(f"Reusing the comparison and sweeps cached in {out / CACHE_FOLDER} (same scenario file, data, "
                      "costs and replicates); --no-cache computes them afresh.")
    elif sc.data.kind != "risk_level_table" and n:
        lo, hi = 0.3 * n, 0.8 * n
        span = f"{lo:.0f} to {hi:.0f} seconds" if hi < 120 else f"{lo / 60:.0f} to {hi / 60:.0f} minutes"
        console.print(f"Computing the comparison with {n:,} bootstrap replicates and {len(sc.outcomes)} sweeps with bands: "
                      f"about {span} at 0.3 to 0.8 s per replicate (measured on a shared 2-core machine); the progress "
                      "bars show the time left. --replicates 100 gives a draft in a tenth of the time.")
    built = build_report(sc, outcome_costs, decision_costs, replicates=replicates, progress=progress,
                         cache_folder=out if cache else None)
    paths = write_outputs(out, built.output_files())
    console.print(str(built))
    show_cautions()
    show_written([p for p in paths if CACHE_FOLDER not in p.parts])
    console.print(f"Open {out / 'report.html'} in a web browser; it needs no network.")


def _ranges(values: Optional[List[str]]) -> Optional[list]:
    if not values:
        return None
    out = []
    for item in values:
        lo, sep, hi = item.partition(":")
        try:
            pair = (float(lo), float(hi))
        except ValueError:
            pair = None
        if not sep or pair is None:
            raise InputError(f"--range {item!r} must look like LOW:HIGH, e.g. 0:40.")
        out.append(pair)
    return out


def _vary(text: Optional[str]) -> tuple:
    if text is None:
        return None, None
    name, sep, values = text.rpartition("=")
    try:
        numbers = [float(v) for v in values.split(",") if v.strip()]
    except ValueError:
        numbers = []
    if not sep or not name.strip() or not numbers:
        raise InputError(f"--vary {text!r} must look like NAME=V1,V2,..., e.g. '#3 capacity=0.1,0.15,0.2' or 3=0.1,0.2.")
    name = name.strip()
    return (int(name) if name.isdigit() else name), numbers


@command
def sweep(
    scenario: Path = typer.Argument(..., help="Scenario file (TOML)."),
    out: Path = OutOption,
    ratio: List[str] = typer.Option(..., "--ratio", help="Outcome key whose cost is swept; once for a sweep, twice for a map."),
    range_: Optional[List[str]] = typer.Option(None, "--range", help="LOW:HIGH of each ratio, in --ratio order (default 0 to 4x the scenario's)."),
    scale: str = typer.Option("linear", "--scale", help="linear or log."),
    per: Optional[str] = typer.Option(None, "--per", help="Decision level whose mean cost divides the swept cost (default the harshest)."),
    gamma: Optional[List[float]] = typer.Option(None, "--gamma", help="Sensitivity parameter of a robust region (repeatable; default 1.1, 1.25, 1.5)."),
    no_bounds: bool = typer.Option(False, "--no-bounds", help="Leave out the monotone-response bounds."),
    missing: str = typer.Option("worst_case", "--missing", help="Missing outcome records in the bounds: worst_case or ignore."),
    share: float = typer.Option(0.5, "--share", help="Share of cases in 'lenient stays optimal for this share up to ratio Y'."),
    points: int = typer.Option(200, "--points", help="Display grid points per axis of the map figure."),
    table_points: int = typer.Option(51, "--table-points", help="Grid points per axis written to map_grid.csv."),
    figure: Optional[List[str]] = typer.Option(None, "--figure", help="Figure format png or svg (repeatable; default both)."),
    no_figures: bool = typer.Option(False, "--no-figures", help="Write the tables only."),
    cost: Optional[List[str]] = CostOption,
    decision_cost: Optional[List[str]] = DecisionCostOption,
    decision_cost_factor: Optional[List[str]] = DecisionFactorOption,
    constraint: Optional[List[str]] = ConstraintOption,
    group_blind: bool = GroupBlindOption,
    principal_fairness: Optional[List[str]] = PrincipalFairnessOption,
    max_share: Optional[List[str]] = MaxShareOption,
    max_rate: Optional[List[str]] = MaxRateOption,
    ignore_constraints: bool = IgnoreConstraintsOption,
    solver: Optional[str] = LPSolverOption,
    lp_points: int = typer.Option(50, "--lp-points", help="Ratios at which the constrained optimum is re-solved (one ratio, with constraints)."),
    vary: Optional[str] = typer.Option(None, "--vary", help="Sweep a constraint's tolerance or cap too: NAME=V1,V2,... (NAME or its 1-based position)."),
    duals_only: bool = typer.Option(False, "--duals-only", help="Price each constraint by its dual value only (no re-solve without it)."),
    replicates: Optional[int] = ReplicatesOption,
    seed: Optional[int] = SeedOption,
    resampling: Optional[str] = ResamplingOption,
    outcomes: Optional[str] = OutcomesOption,
    interval: Optional[float] = IntervalOption,
    workers: Optional[int] = WorkersOption,
    progress: bool = ProgressOption,
    run_on: Optional[str] = RunOnOption,
):
    """Sweep one cost ratio (exact breakpoints, shares, regret) or map two (exact lenient regions), robust to confounding."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    from policy.outputs import write_outputs
    from policy.running.pipeline import as_scenario
    from policy.assessment.sweep import assumption_lines, sweep_scenario
    from policy.presentation.plots import sweep_files

    sc = as_scenario(scenario)
    added, settings = _constraint_options(sc, constraint, group_blind, principal_fairness, max_share, max_rate, solver)
    varied, values = _vary(vary)
    if table_points < 2:
        raise InputError(f"--table-points must be at least 2; got {table_points}.")
    formats = [] if no_figures else list(figure or ["png", "svg"])
    unknown = [f for f in formats if f not in ("png", "svg")]
    if unknown:
        raise InputError(f"--figure {unknown[0]!r} is not a figure format; expected png or svg.")
    with _runner(run_on, workers) as runner:
        result = sweep_scenario(
            sc, ratio, ranges=_ranges(range_), scale=scale, per=per, gammas=gamma or None,
            bounds=False if no_bounds else None, missing=missing, grid_points=points, share=share,
            outcome_costs=_pairs(cost, "--cost"), decision_costs=_decision_costs(decision_cost, decision_cost_factor),
            constraints=added, scenario_constraints=not ignore_constraints, lp_settings=settings, lp_points=lp_points,
            vary=varied, vary_values=values, removal=not duals_only, replicates=replicates, seed=seed, resampling=resampling,
            interval=interval, outcomes=outcomes, workers=workers, progress=progress, runner=runner)
    files = sweep_files(result, formats, table_points)
    drawn = [name for name, content in files.items() if callable(content)]
    bar = Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                   TimeElapsedColumn(), console=err_console, transient=True, disable=not progress)
    with bar:
        task = bar.add_task("sweep: drawing figures", total=len(drawn))

        def advancing(name, write):
            def run(path):
                write(path)
                bar.update(task, advance=1, description=f"sweep: drew {name}")
            return run

        paths = write_outputs(out, {name: advancing(name, c) if name in drawn else c for name, c in files.items()})
    console.print(result.scenario.title, style="bold")
    console.print(str(result))
    console.print("Assumptions behind these figures:", style="bold")
    for line in assumption_lines("robust_sweep" if len(result.assumptions) > 1 else "sweep", result.assumptions)[:-1]:
        console.print(f"  - {line}")
    show_cautions()
    show_written(paths)


def _interval_text(value: float, lo: float, hi: float, fmt: str) -> str:
    if lo != lo or hi != hi:  # NaN: no interval
        return format(value, fmt)
    return f"{format(value, fmt)} ({format(lo, fmt)} to {format(hi, fmt)})"


def _comparison_table(comparison) -> Table:
    frame = comparison.comparison_frame()
    keys = comparison.risk_levels.outcome_keys
    first = comparison.risk_levels.outcome_labels[0]
    table = Table(title=f"Rules compared ({comparison.result.interval_label} in brackets)")
    table.add_column("rule")
    table.add_column(f"expected cost per 1,000 cases ({comparison.costs.unit})", justify="right")
    table.add_column("regret per 1,000 cases", justify="right")
    table.add_column("same level as the optimum", justify="right")
    table.add_column(f"safe ({first}) given a harsher level", justify="right")
    table.add_column(f"preventable ({first}) given too lenient a level", justify="right")
    for _, row in frame.iterrows():
        table.add_row(
            row["rule"],
            _interval_text(row["cost_per_1000_cases"], row["cost_per_1000_cases_lower"], row["cost_per_1000_cases_upper"], ",.0f"),
            _interval_text(row["regret_per_1000_cases"], row["regret_per_1000_cases_lower"], row["regret_per_1000_cases_upper"], ",.0f"),
            _interval_text(row["agreement"], row["agreement_lower"], row["agreement_upper"], ".1%"),
            _interval_text(row[f"safe_given_harsher_{keys[0]}"], row[f"safe_given_harsher_{keys[0]}_lower"],
                           row[f"safe_given_harsher_{keys[0]}_upper"], ".1%"),
            _interval_text(row[f"preventable_given_too_lenient_{keys[0]}"], row[f"preventable_given_too_lenient_{keys[0]}_lower"],
                           row[f"preventable_given_too_lenient_{keys[0]}_upper"], ".1%"),
        )
    return table


@command
def compare(
    scenario: Path = typer.Argument(..., help="Scenario file (TOML)."),
    out: Path = OutOption,
    replicates: Optional[int] = ReplicatesOption,
    seed: Optional[int] = SeedOption,
    resampling: Optional[str] = ResamplingOption,
    outcomes: Optional[str] = OutcomesOption,
    interval: Optional[float] = IntervalOption,
    workers: Optional[int] = WorkersOption,
    progress: bool = ProgressOption,
    run_on: Optional[str] = RunOnOption,
):
    """Compare the optimum, the aid's recommendation, candidate rules and what courts did, with intervals."""
    from policy.assessment.compare import compare as run_compare
    from policy.outputs import write_outputs

    with _runner(run_on, workers) as runner:
        comparison = run_compare(scenario, replicates=replicates, seed=seed, resampling=resampling, interval=interval,
                                 outcomes=outcomes, workers=workers, progress=progress, runner=runner)
    paths = write_outputs(out, comparison.output_files())
    r = comparison.result
    console.print(comparison.scenario.title, style="bold")
    console.print(f"{r.n_replicates} bootstrap replicates ({r.method} resampling of cases, outcomes from the "
                  f"{'estimated risk levels' if r.outcomes == 'model' else 'cases themselves'}), seed {r.seed}.")
    console.print(_comparison_table(comparison))
    show_assumptions("evaluation")
    console.print("Observed rules (what courts did) also assume:", style="bold")
    for a in assumptions_for("observed_rule"):
        console.print(f"  - {a}")
    readings = comparison.readings()
    if readings:
        console.print("Effect of showing the aid, by risk level (overall; by group in aid_effect.csv):", style="bold")
        for line in readings:
            console.print(f"  - {line}")
        show_assumptions("aid_effect")
    for note in comparison.notes:
        console.print(f"Note: {note}")
    show_cautions()
    show_written(paths)


def _runner(run_on: Optional[str], workers: Optional[int]):
    """The runner of --run-on (None: the command's own default, e.g. --workers)."""
    from contextlib import nullcontext

    from policy.running.distributed import run_on as runner_for

    if run_on is None:
        return nullcontext(None)
    if workers is not None:
        raise InputError("give --workers (processes of this machine) or --run-on, not both.")
    return runner_for(run_on)


@command
def batch(
    folder: Path = typer.Argument(..., help="Folder of scenario files (*.toml), e.g. one per county."),
    out: Path = OutOption,
    cost: Optional[List[str]] = CostOption,
    decision_cost: Optional[List[str]] = DecisionCostOption,
    run_on: Optional[str] = typer.Option("here", "--run-on", help=RunOnOption.help),
    progress: bool = ProgressOption,
):
    """Solve every scenario of a folder as independent tasks; write each one's files in its own folder and one summary table.

    A scenario that fails is reported with its reason (in the summary and here) and the others go
    on; the exit code is then 2, with the files of the scenarios that were done written.
    """
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from policy.running.batch import SUMMARY_FILE, run_batch, scenario_files
    from policy.running.distributed import describe_where, run_on as runner_for
    from policy.outputs import write_outputs

    n = len(scenario_files(folder))
    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                   console=err_console, transient=True, disable=not progress)
    with runner_for(run_on) as runner, bar:
        task = bar.add_task("batch: scenarios", total=n)
        result = run_batch(folder, runner, _pairs(cost, "--cost"), _pairs(decision_cost, "--decision-cost"),
                           on_done=lambda name: bar.update(task, advance=1, description=f"batch: {name} finished"),
                           where=describe_where(run_on))
    paths = write_outputs(out, result.output_files())
    summary = result.summary()
    table = Table(title=f"{len(result.runs)} scenarios ({result.where})")
    for col in ("scenario", "status", "cases", "cost per 1,000 cases", "constrained price per 1,000", "outputs or reason"):
        table.add_column(col, justify="right" if col not in ("scenario", "status", "outputs or reason") else "left")
    for _, row in summary.iterrows():
        done = row["status"] == "done"
        price = row.get("constrained_price_per_1000_cases", float("nan"))
        table.add_row(row["scenario"], row["status"], f"{row['cases']:,.0f}" if done else "",
                      f"{row['cost_per_1000_cases']:,.0f} {row['unit']}" if done else "",
                      f"{price:,.0f}" if done and price == price else "",
                      row["outputs"] if done else row["reason"])
    console.print(table)
    for r in result.failed:
        err_console.print(f"failed: {r.file}: {r.reason}", style="bold red")
    show_assumptions("rule")
    show_cautions()
    console.print(f"Wrote {SUMMARY_FILE} and batch.json to {out}, and each done scenario's files in a folder of its name "
                  f"({len(paths)} files).")
    if result.failed:
        raise typer.Exit(2)


def _plain_metavars() -> None:
    """Show each option's value as NAME=VALUE, TEXT, NUMBER or PATH in --help, never a Python type like <list[str]>."""
    import inspect

    for info in app.registered_commands:
        for param in inspect.signature(info.callback).parameters.values():
            option = param.default
            if not isinstance(option, typer.models.OptionInfo) or option.metavar:
                continue
            text = str(param.annotation)
            words = (option.help or "").replace(",", " ").split()
            pair = next((w.rstrip(").:") for w in words if "=" in w and w.split("=")[0].isupper()), None)
            if "List" in text or "list" in text:
                option.metavar = pair or "TEXT"
            elif "Path" in text:
                option.metavar = "PATH"
            elif "int" in text or "float" in text:
                option.metavar = "NUMBER"
            elif "str" in text:
                option.metavar = "TEXT"


_plain_metavars()


def main(argv: Optional[List[str]] = None) -> int:
    """Run the command line; return the exit code."""
    try:
        app(args=argv, prog_name="policy")
    except SystemExit as exc:
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    return 0
