"""The command line's options, and how their text becomes the library's arguments
(costs, constraints, ranges, the rules under doubt, where tasks run), checked as they are read."""

from __future__ import annotations

from typing import List, Optional


import typer

from policy.errors import InputError
from policy.inputs.limits import number as check_number
from policy.presentation.checks import (check_constraint_numbers)


OutOption = typer.Option(..., "--out", "-o", help="Output folder (created if missing).")


OverwriteOption = typer.Option(False, "--overwrite", help="Replace files in the output folder that this tool did not write "
                               "(or that were changed since); without it such files are left alone and the run is refused.")


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


WorkersOption = typer.Option(None, "--workers", help="Worker processes (default: this process, or up to every idle core when the measured work pays for starting them); the output does not depend on it.")


ProgressOption = typer.Option(True, "--progress/--no-progress", help="Show progress bars.")


RunOnOption = typer.Option(None, "--run-on", help="Where independent tasks run: here (this process), local or local:N "
                           "(a Dask cluster of N worker processes on this machine), or a Dask scheduler address such as "
                           "tcp://10.0.0.5:8786. Results are the same wherever they run. Dask is an optional extra: "
                           'pip install "policy-release-rules[distributed]".')


RobustGammaOption = typer.Option(None, "--robust-gamma", help="Also solve the robust rule: least worst-case expected cost when the odds of an outcome may differ by this factor G >= 1 between cases given different decisions.")


RobustBoundsOption = typer.Option(False, "--robust-bounds", help="Also solve the robust rule over the monotone-response bounds (monotonicity only).")


SafeAgainstOption = typer.Option(None, "--safe-against", help="Also solve the safe rule against this rule (courts, courts-shown, courts-not-shown, aid, optimum or a candidate's name): least worst-case regret over the set of --robust-gamma or --robust-bounds.")


LPSolverOption = typer.Option(None, "--lp-solver", help="LP solver for constrained rules (overrides [linear_program] solver), e.g. HIGHS, CLARABEL.")


def _constraint_options(sc, constraint, group_blind, principal_fairness, max_share, max_rate, solver):
    """Constraints added on the command line (as tables) and the LP settings in force."""
    from dataclasses import replace

    from policy.decision.constrained import lp_settings_from_table
    from policy.decision.constraints import parse_constraint_text, shorthand_tables

    check_constraint_numbers(principal_fairness, max_share, max_rate)
    added = [parse_constraint_text(text) for text in constraint or []]
    added += shorthand_tables(group_blind, principal_fairness or [], max_share or [], max_rate or [])
    settings = sc.sections.get("linear_program")
    if solver is not None:
        chosen = lp_settings_from_table({"solver": solver}, "--lp-solver", "the option")
        settings = replace(settings, solver=chosen.solver)
    return added, settings


def _doubt(gamma, bounds, safe_against):
    """The robust/safe rule options as DoubtSettings (None when none was given)."""
    from policy.decision.doubt import DoubtSettings

    if gamma is not None and bounds:
        raise InputError("give --robust-gamma or --robust-bounds, not both.")
    if gamma is not None:
        check_number(gamma, "--robust-gamma", low=1,
                     expected="a sensitivity parameter Gamma: a finite number >= 1 (or use --robust-bounds)")
    if safe_against is not None and gamma is None and not bounds:
        raise InputError("--safe-against needs a set to guard against: add --robust-gamma G or --robust-bounds.")
    doubt = DoubtSettings(gamma=gamma, bounds=bounds, safe_against=safe_against)
    return doubt if doubt.wanted else None


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
        out[key.strip()] = check_number(number, f"{what} {item}", low=0)
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
        lo, hi = (check_number(v, f"--range {item}", low=0, expected="two finite numbers >= 0 (a cost ratio is not negative)")
                  for v in pair)
        if not lo < hi:
            raise InputError(f"--range {item!r} must have LOW < HIGH (low < high); got {lo:g} to {hi:g}.")
        out.append((lo, hi))
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
    numbers = [check_number(v, f"--vary {text}", low=0) for v in numbers]
    return (int(name) if name.isdigit() else name), numbers


def _runner(run_on: Optional[str], workers: Optional[int]):
    """The runner of --run-on (None: this machine's, from --workers; default: :class:`Adaptive`)."""
    from contextlib import nullcontext

    from policy.running.distributed import run_on as runner_for

    if run_on is None:
        # one runner for the whole command: worker processes, if any, start once for all its tasks
        from policy.assessment.uncertainty import make_runner

        runner = make_runner(workers)
        return runner if hasattr(runner, "close") else nullcontext(runner)
    if workers is not None:
        raise InputError("give --workers (processes of this machine) or --run-on, not both.")
    return runner_for(run_on)
