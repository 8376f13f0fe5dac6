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

from policy.presentation.terminal import Table, _comparison_table, _difference_matrix, _print_analysis, _print_doubt, _print_ranges, _risk_table, console, err_console, show_arm_check, show_assumptions, show_cautions, show_written
from policy.presentation.cli_options import ConstraintOption, CostOption, DecisionCostOption, DecisionFactorOption, GroupBlindOption, IgnoreConstraintsOption, IntervalOption, LPSolverOption, MaxRateOption, MaxShareOption, OutOption, OutcomesOption, OverwriteOption, PrincipalFairnessOption, ProgressOption, ReplicatesOption, ResamplingOption, RobustBoundsOption, RobustGammaOption, RunOnOption, SafeAgainstOption, SeedOption, WorkersOption, _constraint_options, _decision_costs, _doubt, _pairs, _ranges, _runner, _vary
from policy.cautions import assumptions_for
from policy.errors import InputError, PolicyError
from policy.inputs.limits import MAX_REPLICATES, number as check_number
from policy.presentation.checks import (MAX_GRID_POINTS, check_options,
                                        claim, most_workers)

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


def command(fn):
    """Register a command whose tool errors become a message and the error's exit code."""

    @functools.wraps(fn)
    def run(*args, **kwargs):
        from policy.outputs import release_output_folders

        try:
            return fn(*args, **kwargs)
        except PolicyError as exc:
            err_console.print(f"error: {exc}", style="bold red")
            conflicts = getattr(exc, "conflicts", None)
            if conflicts is not None:
                err_console.print(conflicts.to_string(index=False))
            raise typer.Exit(exc.exit_code) from None
        finally:
            release_output_folders()

    return app.command()(run)


@command
def demo(out: Path = OutOption,
         cases: Optional[int] = typer.Option(None, help="Number of simulated cases (default: the demo scenario's)."),
         overwrite: bool = OverwriteOption):
    """Build the invented Quarrow County data, estimate risk levels, find the optimal rule, write all outputs."""
    from policy.inputs.limits import simulated_cases
    from policy.outputs import write_outputs
    from policy.running.pipeline import demo_files

    if cases is not None:
        simulated_cases(cases, "--cases")
    claim(out)
    analysis, files = demo_files(out, cases)
    paths = write_outputs(out, files, overwrite=overwrite,
                          keep=("cases.csv", "scenario.toml", "risk_level_draws.csv", "from_draws.toml"), command="demo")
    _print_analysis(analysis)
    console.print(f"Demo data and scenario: {out / 'cases.csv'}, {out / 'scenario.toml'}")
    console.print(f"The same risk levels with draws, and a scenario that reads them: {out / 'risk_level_draws.csv'}, "
                  f"{out / 'from_draws.toml'}")
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
    show_arm_check(report.arm_check)


@command
def estimate(scenario: Path = typer.Argument(..., help="Scenario file (TOML)."), out: Path = OutOption,
             overwrite: bool = OverwriteOption):
    """Estimate risk levels per cell and write the cell table, risk-level tables and their bounds under weaker assumptions."""
    from policy.outputs import write_outputs
    from policy.running.pipeline import as_scenario, estimate as run_estimate

    from policy.estimation.arm_check import arm_check, with_gamma_low
    from policy.estimation.bounds_table import SENSITIVITY_GAMMAS, bounds_table

    sc = as_scenario(scenario)
    inputs = claim(out, sc)
    cells, rl = run_estimate(sc)
    files = {"risk_levels.csv": rl.to_frame(), "risk_level_shares.csv": rl.shares()}
    check = arm_check(cells, outcome_labels=sc.outcome_label_map) if cells is not None and cells.has_arm else None
    if cells is not None:
        gammas = with_gamma_low(SENSITIVITY_GAMMAS, check)
        files = {"cells.csv": cells.counts_frame(sc), **files, "risk_bounds.csv": bounds_table(rl, cells, gammas)}
    if check is not None:
        files.update(check.output_files())
    paths = write_outputs(out, files, inputs=inputs, overwrite=overwrite, command="estimate")
    console.print(_risk_table(rl))
    show_assumptions("risk_levels")
    show_cautions()
    show_arm_check(check)
    show_written(paths)


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
    robust_gamma: Optional[float] = RobustGammaOption,
    robust_bounds: bool = RobustBoundsOption,
    safe_against: Optional[str] = SafeAgainstOption,
    overwrite: bool = OverwriteOption,
):
    """Find the expected-cost-minimizing release rule and write it with its evaluation.

    With constraints (the scenario's [[constraints]] or the options below), also the constrained
    optimal rule, its price and the constraint table. Exit code 3 and no files when the
    constraints cannot all hold. With --robust-gamma or --robust-bounds, also the robust rule
    (and with --safe-against the safe rule) under the same constraints.
    """
    from policy.outputs import write_outputs
    from policy.running.pipeline import analyze, as_scenario

    sc = as_scenario(scenario)
    added, settings = _constraint_options(sc, constraint, group_blind, principal_fairness, max_share, max_rate, solver)
    doubt = _doubt(robust_gamma, robust_bounds, safe_against)
    outcome_costs, decision_costs = _pairs(cost, "--cost"), _decision_costs(decision_cost, decision_cost_factor)
    inputs = claim(out, sc)
    analysis = analyze(sc, outcome_costs, decision_costs, constraints=added,
                       scenario_constraints=not ignore_constraints, lp_settings=settings)
    files = analysis.output_files()
    found = ladder = None
    if doubt is not None:
        from policy.decision.doubt import rules_under_doubt

        c = analysis.constrained
        from policy.decision.doubt_ladder import ladder_for
        from policy.estimation.bounds_table import SENSITIVITY_GAMMAS

        found = rules_under_doubt(sc, analysis.cells, analysis.risk_levels, analysis.costs, doubt,
                                  c.specs if c is not None else (), settings, c.rule if c is not None else analysis.rule,
                                  where="--safe-against")
        ladder = ladder_for(found, doubt, analysis.arm_check, analysis.risk_levels, analysis.cells, analysis.costs,
                            SENSITIVITY_GAMMAS, c.specs if c is not None else (), settings)
        files.update(found.output_files())
        files.update(ladder.output_files())
    paths = write_outputs(out, files, inputs=inputs, overwrite=overwrite, command="solve")
    _print_analysis(analysis)
    if found is not None:
        _print_doubt(found, ladder)
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
    overwrite: bool = OverwriteOption,
    cache: bool = typer.Option(True, "--cache/--no-cache", help="Reuse the comparison and sweeps cached in the output folder when the scenario file, data, costs and replicates are unchanged."),
    robust_gamma: Optional[float] = typer.Option(None, "--robust-gamma", help="Guard the robust and safe rules against confounding up to this Gamma >= 1 (default: the least confounding the randomized arm shows where its check rejects, else 1.5)."),
    robust_bounds: bool = typer.Option(False, "--robust-bounds", help="Guard the robust and safe rules against the monotone-response bounds (monotonicity only)."),
    safe_against: Optional[str] = typer.Option(None, "--safe-against", help="Baseline of the safe rule (courts, courts-shown, courts-not-shown, aid, optimum or a candidate's name; default: what courts did without the aid)."),
    doubt: bool = typer.Option(True, "--doubt/--no-doubt", help="Solve and show the rules that hold if unconfoundedness fails."),
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
    check_options(replicates=(replicates, 0, MAX_REPLICATES))
    _doubt(robust_gamma, robust_bounds, None)
    inputs = claim(out, sc)
    n = replicates if replicates is not None else sc.sections["uncertainty"].replicates
    asked = (robust_gamma, bool(robust_bounds), safe_against) if doubt else None
    if cache and (out / cache_name(cache_key(sc, outcome_costs, decision_costs, replicates, asked))).is_file():
        console.print(f"Reusing the comparison and sweeps cached in {out / CACHE_FOLDER} (same scenario file, data, "
                      "costs and replicates); --no-cache computes them afresh.")
    elif sc.data.kind != "risk_level_table" and n:
        lo, hi = 0.3 * n, 0.8 * n
        span = f"{lo:.0f} to {hi:.0f} seconds" if hi < 120 else f"{lo / 60:.0f} to {hi / 60:.0f} minutes"
        console.print(f"Computing the comparison with {n:,} bootstrap replicates and {len(sc.outcomes)} sweeps with bands: "
                      f"about {span} at 0.3 to 0.8 s per replicate (measured on a shared 2-core machine); the progress "
                      "bars show the time left. --replicates 100 gives a draft in a tenth of the time.")
    built = build_report(sc, outcome_costs, decision_costs, replicates=replicates, progress=progress,
                         cache_folder=out if cache else None, robust_gamma=robust_gamma, robust_bounds=robust_bounds,
                         safe_against=safe_against, under_doubt=doubt)
    paths = write_outputs(out, built.output_files(), inputs=inputs, overwrite=overwrite, command="report")
    console.print(str(built))
    show_cautions()
    show_arm_check(getattr(built.results.analysis, "arm_check", None) if built.results is not None else None)
    found = getattr(built.results.comparison, "under_doubt", None) if built.results is not None else None
    if found is not None:
        console.print(built.results.doubt_choice.reason)
        _print_doubt(found, built.results.comparison.doubt_ladder)
    show_written([p for p in paths if CACHE_FOLDER not in p.parts])
    console.print(f"Open {out / 'report.html'} in a web browser; it needs no network.")


@command
def sweep(
    scenario: Path = typer.Argument(..., help="Scenario file (TOML)."),
    out: Path = OutOption,
    ratio: List[str] = typer.Option(..., "--ratio", help="Outcome key whose cost is swept; once for a sweep, twice for a map."),
    range_: Optional[List[str]] = typer.Option(None, "--range", help="LOW:HIGH of each ratio, in --ratio order (default 0 to 4x the scenario's)."),
    scale: str = typer.Option("linear", "--scale", help="linear or log."),
    per: Optional[str] = typer.Option(None, "--per", help="Decision level whose mean cost divides the swept cost (default the harshest)."),
    gamma: Optional[List[float]] = typer.Option(None, "--gamma", help="Sensitivity parameter of a robust region (repeatable; default 1.1, 1.25, 1.5, 2, 3, 5 and, with a randomized arm, the data's own lower bound Gamma_low)."),
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
    implied: bool = typer.Option(False, "--implied", help="Also find the ratio (one --ratio) or the region of two ratios (two) under which what courts did (each arm, each protected group) comes closest to the cheapest rule (data with cases)."),
    replicates: Optional[int] = ReplicatesOption,
    seed: Optional[int] = SeedOption,
    resampling: Optional[str] = ResamplingOption,
    outcomes: Optional[str] = OutcomesOption,
    interval: Optional[float] = IntervalOption,
    workers: Optional[int] = WorkersOption,
    progress: bool = ProgressOption,
    run_on: Optional[str] = RunOnOption,
    overwrite: bool = OverwriteOption,
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
    check_options(points=(points, 2, MAX_GRID_POINTS), table_points=(table_points, 2, MAX_GRID_POINTS),
             lp_points=(lp_points, 2, MAX_GRID_POINTS), share=(share, 0, 1), interval=(interval, 0, 1),
             replicates=(replicates, 0, MAX_REPLICATES), seed=(seed, 0, None), workers=(workers, 1, most_workers()))
    if share <= 0:
        raise InputError(f"--share must be a share of cases above 0 and at most 1; got {share:g}.")
    for g in gamma or []:
        check_number(g, "--gamma", low=1, expected="a sensitivity parameter Gamma: a finite number >= 1 (1: no confounding)")
    ranges = _ranges(range_)
    outcome_costs, decision_costs = _pairs(cost, "--cost"), _decision_costs(decision_cost, decision_cost_factor)
    inputs = claim(out, sc)
    formats = [] if no_figures else list(figure or ["png", "svg"])
    unknown = [f for f in formats if f not in ("png", "svg")]
    if unknown:
        raise InputError(f"--figure {unknown[0]!r} is not a figure format; expected png or svg.")
    if implied and len(ratio) not in (1, 2):
        raise InputError(f"--implied reads one ratio or two; got {len(ratio)} --ratio options.")
    with _runner(run_on, workers) as runner:
        result = sweep_scenario(
            sc, ratio, ranges=ranges, scale=scale, per=per, gammas=gamma or None,
            bounds=False if no_bounds else None, missing=missing, grid_points=points, share=share,
            outcome_costs=outcome_costs, decision_costs=decision_costs,
            constraints=added, scenario_constraints=not ignore_constraints, lp_settings=settings, lp_points=lp_points,
            vary=varied, vary_values=values, removal=not duals_only, replicates=replicates, seed=seed, resampling=resampling,
            interval=interval, outcomes=outcomes, workers=workers, progress=progress, runner=runner)
    files = sweep_files(result, formats, table_points)
    if result.arm_check is not None:
        files.update(result.arm_check.output_files())
    implied_result = None
    if implied:
        from policy.assessment.implied_region_bands import implied_region_scenario
        from policy.assessment.implied_scenario import implied_scenario

        bootstrap = dict(replicates=replicates, seed=seed, resampling=resampling, interval=interval,
                         outcomes=outcomes, workers=workers, progress=progress)
        with _runner(run_on, workers) as runner:
            if len(ratio) == 1:
                implied_result = implied_scenario(sc, ratio[0], per, outcome_costs=outcome_costs,
                                                  decision_costs=decision_costs, runner=runner, **bootstrap)
            else:
                implied_result = implied_region_scenario(sc, ratio, ranges, per, outcome_costs=outcome_costs,
                                                         decision_costs=decision_costs, runner=runner, **bootstrap)
        files.update(implied_result.output_files())
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

        paths = write_outputs(out, {name: advancing(name, c) if name in drawn else c for name, c in files.items()},
                              inputs=inputs, overwrite=overwrite, command="sweep")
    console.print(result.scenario.title, style="bold")
    console.print(str(result))
    console.print("Assumptions behind these figures:", style="bold")
    for line in assumption_lines("robust_sweep" if len(result.assumptions) > 1 else "sweep", result.assumptions)[:-1]:
        console.print(f"  - {line}")
    if implied_result is not None:
        console.print(str(implied_result))
    show_cautions()
    show_arm_check(result.arm_check)
    show_written(paths)


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
    robust_gamma: Optional[float] = RobustGammaOption,
    robust_bounds: bool = RobustBoundsOption,
    safe_against: Optional[str] = SafeAgainstOption,
    stability: float = typer.Option(0.8, help="Mark rule cells of the chosen rules whose level is chosen again in fewer than this share of replicates."),
    folds: int = typer.Option(5, help="Cross-fit the chosen rules: choose on all folds but one, score on the held-out one (0: no cross-fitting)."),
    fold_repeats: int = typer.Option(1, help="Independent splits into folds, averaged (more: less noise from the split)."),
    overwrite: bool = OverwriteOption,
):
    """Compare the optimum, the aid's recommendation, candidate rules and what courts did, with intervals.

    With --robust-gamma or --robust-bounds the robust rule (and with --safe-against the safe rule) joins them."""
    from policy.assessment.compare import compare as run_compare
    from policy.assessment.stability import unstable_lines
    from policy.outputs import write_outputs

    check_options(replicates=(replicates, 0, MAX_REPLICATES), seed=(seed, 0, None), interval=(interval, 0, 1),
             workers=(workers, 1, most_workers()))
    inputs = claim(out, scenario)
    with _runner(run_on, workers) as runner:
        comparison = run_compare(scenario, replicates=replicates, seed=seed, resampling=resampling, interval=interval,
                                 outcomes=outcomes, workers=workers, progress=progress, runner=runner,
                                 doubt=_doubt(robust_gamma, robust_bounds, safe_against), stability=stability,
                                 folds=folds, fold_repeats=fold_repeats)
    paths = write_outputs(out, comparison.output_files(), inputs=inputs, overwrite=overwrite, command="compare")
    r = comparison.result
    console.print(comparison.scenario.title, style="bold")
    if r.method == "draws":  # a risk-level table: intervals over its draws, if any
        console.print(f"{r.interval_label.capitalize()}: figures from the risk-level table, no cases behind it.")
    else:
        console.print(f"{r.n_replicates} bootstrap replicates ({r.method} resampling of cases, outcomes from the "
                      f"{'risk levels re-estimated with every covariate-by-level term' if r.outcomes == 'model' else 'cases themselves'}), "
                      f"seed {r.seed}.")
    if comparison.arm_costs is not None:
        for line in comparison.arm_costs.lines():
            console.print(line)
        console.print("The table below is model-based: it assumes what is listed under it.")
    console.print(_comparison_table(comparison))
    if comparison.ranges is not None:
        _print_ranges(comparison.ranges[0], comparison.costs.unit)
    if r.n_replicates:
        console.print(_difference_matrix(comparison))
        console.print("Stability of the chosen rules' levels (rule_stability.csv):", style="bold")
        for line in unstable_lines(comparison.stability_frame()):
            console.print(f"  {line}", markup=False)
    if comparison.crossfit is not None:
        console.print("Cross-fitted expected cost per 1,000 cases (chosen on all folds but one, scored on the held-out "
                      "one; comparison_cross_fitted.csv):", style="bold")
        for line in comparison.crossfit.lines():
            console.print(f"  - {line}", markup=False)
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
    if comparison.under_doubt is not None:
        _print_doubt(comparison.under_doubt, comparison.doubt_ladder)
    for note in comparison.notes:
        console.print(f"Note: {note}")
    show_cautions()
    show_arm_check(comparison.arm_check)
    show_written(paths)


@command
def batch(
    folder: Path = typer.Argument(..., help="Folder of scenario files (*.toml), e.g. one per county."),
    out: Path = OutOption,
    cost: Optional[List[str]] = CostOption,
    decision_cost: Optional[List[str]] = DecisionCostOption,
    run_on: Optional[str] = typer.Option("here", "--run-on", help=RunOnOption.help),
    progress: bool = ProgressOption,
    overwrite: bool = OverwriteOption,
):
    """Solve every scenario of a folder as independent tasks; write each one's files in its own folder and one summary table.

    A scenario that fails is reported with its reason (in the summary and here) and the others go
    on; the exit code is then 2, with the files of the scenarios that were done written.
    """
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from policy.running.batch import SUMMARY_FILE, run_batch, scenario_files
    from policy.running.distributed import describe_where, run_on as runner_for
    from policy.outputs import write_outputs

    files_in = scenario_files(folder)
    n = len(files_in)
    outcome_costs, decision_costs = _pairs(cost, "--cost"), _pairs(decision_cost, "--decision-cost")
    claim(out)
    inputs = [p.resolve() for p in files_in] + [p.resolve() for p in Path(folder).iterdir() if p.is_file()]
    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                   console=err_console, transient=True, disable=not progress)
    with runner_for(run_on) as runner, bar:
        task = bar.add_task("batch: scenarios", total=n)
        result = run_batch(folder, runner, outcome_costs, decision_costs,
                           on_done=lambda name: bar.update(task, advance=1, description=f"batch: {name} finished"),
                           where=describe_where(run_on))
    paths = write_outputs(out, result.output_files(), inputs=inputs, overwrite=overwrite, command="batch")
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


@command
def worksheet(
    scenario: Path = typer.Argument(..., help="Scenario file (TOML)."),
    out: Path = OutOption,
    cost: Optional[List[str]] = CostOption,
    decision_cost: Optional[List[str]] = DecisionCostOption,
    decision_cost_factor: Optional[List[str]] = DecisionFactorOption,
    overwrite: bool = OverwriteOption,
):
    """Write the cost worksheet: each cost, how it was built, its sources and flags, and the range over which the cost-minimizing rule does not change."""
    from policy.assessment.cost_worksheet import worksheet_scenario
    from policy.outputs import write_outputs
    from policy.running.pipeline import as_scenario

    sc = as_scenario(scenario)
    outcome_costs, decision_costs = _pairs(cost, "--cost"), _decision_costs(decision_cost, decision_cost_factor)
    inputs = claim(out, sc)
    sheet = worksheet_scenario(sc, outcome_costs, decision_costs)
    paths = write_outputs(out, sheet.output_files(), inputs=inputs, overwrite=overwrite, command="worksheet")
    console.print(sc.title, style="bold")
    console.print(str(sheet))
    console.print("Assumptions behind the ranges:", style="bold")
    for line in sheet.assumptions:
        console.print(f"  - {line}")
    show_cautions()
    show_written(paths)


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
