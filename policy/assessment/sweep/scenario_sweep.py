"""One scenario swept end to end (what the ``sweep`` command calls): the result object and its
output tables."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from policy.estimation.arm_check import ArmCheck, arm_check, gamma_low_rounded, with_gamma_low
from policy.estimation.bounds import MISSING_TREATMENTS, RiskBounds, robust_assumptions
from policy.cautions import CAUTIONS, assumptions_for
from policy.decision.costs import Costs, costs_from_scenario
from policy.errors import InputError
from policy.estimation.from_scenario import estimate
from policy.inputs.scenario import as_scenario
from policy.decision.rules import Rule
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevelEstimator, RiskLevels
from policy.assessment.sweep.axes import DEFAULT_GAMMAS, default_range, ratio_axis
from policy.assessment.sweep.one_ratio import OneRatioSweep, sweep_one
from policy.assessment.sweep.two_ratio import LenientMap, lenient_map
from policy.assessment.sweep.bands import SweepBands, sweep_bands


# ----------------------------------------------------------------------------------------------
# One scenario, end to end (what the `sweep` command calls)
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SweepResult:
    """A sweep of one scenario: a one-ratio sweep or a two-ratio map, and what produced it."""

    scenario: Any
    risk_levels: RiskLevels
    costs: Costs
    sweep: OneRatioSweep | None
    map: LenientMap | None
    assumptions: list[RiskBounds]
    settings: dict[str, Any]
    #: the constrained optimum along the ratio (policy.assessment.sweep.constrained.ConstrainedSweep), when constraints apply
    constrained: Any = None
    #: bootstrap intervals of the one-ratio sweep (SweepBands), when replicates were asked for
    bands: SweepBands | None = None
    #: the randomized arm's test of unconfoundedness (policy.estimation.arm_check), when the data have an arm
    arm_check: ArmCheck | None = None
    #: the lenient map over a risk-level table's draws (policy.assessment.sweep.draws_map.DrawsMap), two ratios
    draws_map: Any = None

    def __str__(self) -> str:
        text = str(self.sweep if self.sweep is not None else self.map)
        if self.constrained is not None:
            text += "\n" + str(self.constrained)
        if self.bands is not None:
            b = self.bands
            i = int(np.argmin(np.abs(b.ratios - self.sweep.axis.scenario_ratio)))
            text += (f"\nLenient share near the scenario's ratio ({b.ratios[i]:.4g}): {b.share[i]:.1%} "
                     f"({b.lower[i]:.1%} to {b.upper[i]:.1%}, {b.label}, {b.meta['replicates']} replicates, seed {b.meta['seed']}).")
        if self.draws_map is not None:
            text += "\n" + self.draws_map.summary()
        if "constraints" in self.settings:
            text += "\nNote: " + self.settings["constraints"] + "."
        return text

    def describe(self) -> dict[str, Any]:
        """Metadata written to sweep.json."""
        res = self.sweep if self.sweep is not None else self.map
        axes = [res.axis] if self.sweep is not None else list(res.axes)
        figure_keys = ["rule"] + [b.figure for b in self.assumptions[1:]]
        assumptions = list(dict.fromkeys(a for k in figure_keys for a in assumptions_for(k)))
        summary = res.summary(self.settings["share"]) if self.sweep is not None else res.summary()
        summary = summary.astype(object).where(summary.notna(), None)
        return {
            "scenario": self.scenario.title,
            "scenario_file": str(self.scenario.path) if self.scenario.path else None,
            "seed": self.scenario.seed,
            "data": self.risk_levels.source,
            "kind": "one ratio" if self.sweep is not None else "two ratios",
            "ratios": [a.describe() for a in axes],
            "costs_held": {k: float(c) for k, c in zip(self.risk_levels.outcome_keys, self.costs.outcome)
                           if k not in {a.outcome for a in axes}},
            "cost_unit": self.costs.unit,
            "rule_columns": list(res.rule_cells.columns),
            "rule_cells": int(len(res.weights)),
            **self.settings,
            "robust": [{"key": b.key, "label": b.label, "gamma": b.gamma if np.isfinite(b.gamma) else None,
                        "note": b.note} for b in self.assumptions],
            "summary": summary.to_dict(orient="records"),
            "constrained": self._describe_constrained(),
            "uncertainty": (self.bands.meta if self.bands is not None else
                            self.draws_map.meta() if self.draws_map is not None else None),
            "assumptions": assumptions,
            "cautions": list(CAUTIONS),
        }

    def _describe_constrained(self) -> dict[str, Any] | None:
        c = self.constrained
        if c is None:
            return None
        summary = c.summary()
        return {
            "constraints": [spec.describe() for spec in c.specs],
            "grid_points": int(len(c.ratios)),
            "varied": c.varied,
            "bounds": [float(b) for b in c.bounds] if c.varied else None,
            "solver": c.solver,
            "summary": summary.astype(object).where(summary.notna(), None).to_dict(orient="records"),
        }

    def band_figure(self) -> dict[str, Any] | None:
        """The bootstrap band as the share figure draws it (x, low, high, label, note), or None."""
        s, bands = self.sweep, self.bands
        if s is None or bands is None:
            return None
        m = bands.meta
        return {"x": bands.ratios, "low": bands.lower, "high": bands.upper,
                "label": f"{s.level_labels[0]}: {bands.label.split(' bootstrap')[0]} interval",
                "note": (f"Band: {bands.label} of the share of cases at {s.level_labels[0]}, from "
                         f"{m['replicates']} bootstrap replicates ({m['resampling']} resampling of cases, "
                         f"outcomes from the {'estimated risk levels' if m['outcomes'] == 'model' else 'cases'}, "
                         f"seed {m['seed']}); each replicate re-estimates the risk levels.")
                if m["resampling"] != "draws" else (f"Band: {bands.label} of the share of cases at {s.level_labels[0]}, "
                                                    f"from {m['replicates']} draws of the risk-level table, each swept exactly.")}

    def output_files(self, table_points: int = 51) -> dict[str, Any]:
        """Every output table of ``sweep`` by name (documented in docs/outputs.md); the figures are
        drawn by :func:`policy.presentation.plots.sweep_files`.

        Parameters
        ----------
        table_points : int
            Points per axis of the grid written to ``map_grid.csv`` (two ratios); the figure
            uses the finer display grid of the settings.
        """
        files: dict[str, Any] = {}
        if self.sweep is not None:
            s = self.sweep
            files["sweep_segments.csv"] = s.segments()
            files["sweep_breakpoints.csv"] = s.breakpoints()
            files["sweep_shares.csv"] = s.share_table()
            files["sweep_regret.csv"] = s.regret_table()
            files["sweep_lenient.csv"] = s.robust_table()
            files["sweep_lenient_shares.csv"] = s.robust_share_table()
            c, bands = self.constrained, self.bands
            if bands is not None:
                files["sweep_bands.csv"] = bands.band_table(s.axis)
                files["sweep_threshold_intervals.csv"] = bands.threshold_table(s)
            if c is not None:
                files["sweep_constrained.csv"] = c.to_frame()
                files["sweep_constraint_prices.csv"] = c.price_table()
        else:
            m = self.map
            files["map_grid.csv"] = m.grid_table(table_points)
            files["map_polygons.csv"] = m.polygon_table()
            if self.draws_map is not None:
                files["map_draws_grid.csv"] = self.draws_map.grid_table(table_points)
                files["map_draws_rule_cells.csv"] = self.draws_map.rule_cell_table(table_points)
        files["sweep.json"] = self.describe()
        return files


def _scenario_rules(scenario, cells, rl) -> list[Rule]:
    """The rules a comparison scores besides the optimum: the aid's recommendation, the scenario's
    candidate rules and what courts did (in each arm), so a sweep's regret covers each of them."""
    from policy.decision.candidates import aid_rule, candidate_rules, observed_rules

    rules: list[Rule] = []
    from_table = None
    if cells is None:  # a risk-level table: the aid and what courts did where its optional columns say
        from policy.decision.table_rules import table_rules

        from_table = table_rules(scenario, rl)
    if cells is not None:
        aid = aid_rule(cells, scenario.aid.name, scenario.level_labels)
        rules += [aid] if aid is not None else []
    elif from_table.aid is not None:
        rules.append(from_table.aid)
    rules += candidate_rules(scenario, rl.layout, rl.weights)
    if cells is not None:
        rules += observed_rules(cells, scenario.aid.name, scenario.level_labels)
    else:
        rules += from_table.observed
    return rules


def _has_draws(scenario) -> bool:
    """Whether the scenario's risk-level table carries a ``draw`` column (its header only)."""
    import pandas as pd

    path = scenario.data.path
    try:
        if path.suffix.lower() in (".nc", ".nc4", ".netcdf"):
            return True  # netCDF holds draws only
        if path.suffix.lower() == ".parquet":
            import pyarrow.parquet as pq

            return "draw" in pq.read_schema(path).names
        return path.suffix.lower() == ".csv" and "draw" in pd.read_csv(path, nrows=0).columns
    except Exception:  # an unreadable file is reported by the reader itself
        return False


def sweep_scenario(scenario, ratios: Sequence[str], ranges: Sequence[Sequence[float] | None] | None = None,
                   scale: str = "linear", per: str | None = None, gammas: Sequence[float] | None = None,
                   bounds: bool | None = None, missing: str = "worst_case", rules: Sequence[Rule] | None = None,
                   grid_points: int = 200, share: float = 0.5, outcome_costs: Mapping[str, float] | None = None,
                   decision_costs: Mapping[str, float] | None = None, constraints: Sequence[Any] = (),
                   scenario_constraints: bool = True, lp_settings: Any = None, lp_points: int = 50,
                   vary: str | int | None = None, vary_values: Sequence[float] | None = None, removal: bool = True,
                   replicates: int | None = None, seed: int | None = None, resampling: str | None = None,
                   interval: float | None = None, outcomes: str | None = None, workers: int | None = None,
                   runner: Any = None, progress: bool = False,
                   on_step: Callable[[str], None] | None = None,
                   on_point: Callable[[int, int], None] | None = None, arm_checked: ArmCheck | None = None) -> SweepResult:
    """Sweep one cost ratio (exact curves) or two (exact lenient map) for a scenario.

    Parameters
    ----------
    scenario : Scenario or path
    ratios : one or two outcome keys
        The swept outcome kinds.
    ranges : sequence of (low, high) or None
        One per ratio; None picks :func:`default_range`.
    scale : {'linear', 'log'}
    per : str, optional
        Reference decision level of the ratios (default: the harshest).
    gammas : sequence of float, optional
        Sensitivity parameters of the robust regions (1 is the point estimate itself). Default
        :data:`DEFAULT_GAMMAS` when the data hold counts, with the randomized arm's lower bound
        Gamma_low (:func:`policy.estimation.arm_check.arm_check`) added where it is above 1;
        none for a risk-level table.
    bounds : bool, optional
        Add the monotone-response bounds (default: when the data hold counts).
    missing : {'worst_case', 'ignore'}
        Missing outcome records in the bounds.
    rules : sequence of Rule, optional
        Compared rules (one ratio); default: the rule optimal at the scenario's own costs, the
        aid's recommendation, the scenario's candidate rules, what courts did (per arm) and the
        rule that releases every case at the most lenient level.
    grid_points : int
        Display grid per axis (two ratios).
    share : float
        The share of cases in "leniency stays optimal for at least this share of cases up to
        ratio Y" (summaries, and the robust regions of the map figure).
    outcome_costs, decision_costs : mapping, optional
        What-if overrides of the scenario's costs, as in ``solve``.
    constraints : sequence of dict or ConstraintSpec, optional
        Constraints added to the scenario's ``[[constraints]]``; with any constraint (and one
        ratio) the constrained optimum is re-solved along the ratio
        (:func:`policy.assessment.sweep.constrained.constrained_sweep`).
    scenario_constraints : bool
        Use the scenario's own ``[[constraints]]``.
    lp_settings : LPSettings, optional
        How to solve the linear program (default: the scenario's ``[linear_program]``).
    lp_points : int
        Ratios of the constrained re-solves (evenly spaced on the scale).
    vary, vary_values : optional
        A constraint (name or 1-based position) whose tolerance or cap takes each value in turn.
    removal : bool
        Price each constraint by re-solving without it (else: dual values only).
    replicates, seed, resampling, interval, outcomes : optional
        Bootstrap bands (one ratio, data with counts): override the scenario's ``[uncertainty]``
        settings and ``[scenario] seed``; 0 replicates: no bands.
    workers, runner : optional
        How the replicates run (:func:`policy.assessment.uncertainty.bootstrap`); a ``runner`` also runs the blocks
        of constrained re-solves (default: in this process). The output does not depend on them.
    progress : bool
        Show progress bars (rich, on standard error) for the bootstrap and the constrained re-solves.
    on_step : callable, optional
        Called with a description after each stage (drives a progress bar).
    on_point : callable, optional
        Called with (points done, points in all) during the constrained re-solves.
    arm_checked : ArmCheck, optional
        The randomized arm's check already run on the same scenario's data (it depends on the
        cases alone), so that several sweeps of one data set run it once; default: run here.
    """
    from policy.decision.constraints import scenario_specs
    from policy.assessment.sweep.constrained import constrained_sweep, ratio_grid

    step = on_step or (lambda what: None)
    scenario = as_scenario(scenario)
    ratios = list(ratios)
    if len(ratios) not in (1, 2):
        raise InputError(f"give one ratio (a sweep) or two (a map); got {len(ratios)}.")
    if grid_points < 2:
        raise InputError(f"the display grid needs at least 2 points per axis; got {grid_points}.")
    if not 0 < share <= 1:
        raise InputError(f"the share of cases must be in (0, 1]; got {share!r}.")
    if missing not in MISSING_TREATMENTS:
        raise InputError(f"missing records must be treated as one of {', '.join(MISSING_TREATMENTS)}; got {missing!r}.")
    specs = scenario_specs(scenario, constraints, scenario_constraints)
    if len(ratios) == 2 and (constraints or vary is not None):
        raise InputError("constrained optima are re-solved along one ratio; give one --ratio with constraints.")
    if vary is not None and not specs:
        raise InputError("there is no constraint whose bound could vary; declare or add one.")
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    step("estimated risk levels")
    u = None  # bootstrap settings, checked before any long computation
    if cells is not None and len(ratios) == 1:
        from policy.assessment.uncertainty import scenario_settings

        u = scenario_settings(scenario, "sweep:", replicates, interval, resampling, outcomes)
    elif cells is None and replicates and not _has_draws(scenario):
        raise InputError(f"{scenario.file}: bootstrap bands need the cases behind the estimates (a case or counts "
                         "table, or the simulator) or draws in the risk-level table (a 'draw' column); this risk-level "
                         "table has neither.")
    axes = [ratio_axis(rl, costs, r, per) for r in ratios]
    ranges = list(ranges) if ranges is not None else [None] * len(axes)
    if len(ranges) != len(axes):
        raise InputError(f"give one range per ratio: {len(axes)} ratios, {len(ranges)} ranges.")
    box = [tuple(map(float, r)) if r is not None else default_range(a, scale) for a, r in zip(axes, ranges)]
    check = (arm_checked if arm_checked is not None else arm_check(cells, outcome_labels=scenario.outcome_label_map)
             ) if cells is not None and cells.has_arm else None
    if gammas is None:
        gammas = with_gamma_low(DEFAULT_GAMMAS if cells is not None else (), check)
    if bounds is None:
        bounds = cells is not None
    assumptions = robust_assumptions(rl, cells, gammas, bounds, missing)
    step("bounds and sensitivity intervals")
    settings = {"scale": scale, "ranges": [list(b) for b in box], "gammas": [b.gamma for b in assumptions if b.figure == "sensitivity"],
                "bounds": bool(bounds), "missing_records": missing, "grid_points": grid_points, "share": float(share),
                "gamma_lower_from_arm_check": (None if check is None or not np.isfinite(check.gamma_lower)
                                               else gamma_low_rounded(check.gamma_lower))}
    if len(axes) == 1:
        if rules is None:
            base_rule = optimal_rule(rl, costs, name="rule optimal at the scenario's costs")
            lenient_all = Rule.from_levels(f"everyone: {rl.level_labels[0]}", "candidate", rl.layout,
                                           list(rl.layout.rule_columns), np.zeros(len(base_rule.rule_cells), dtype=np.int64),
                                           rl.level_values, rl.level_labels, rl.weights)
            rules = [base_rule] + _scenario_rules(scenario, cells, rl) + [lenient_all]
        s = sweep_one(rl, costs, axes[0], *box[0], rules=rules, assumptions=assumptions, scale=scale)
        step("exact sweep")
        constrained = None
        if specs:
            from policy.assessment.uncertainty import _progress

            lp = lp_settings if lp_settings is not None else scenario.sections.get("linear_program")
            grid = ratio_grid(*box[0], lp_points, scale)
            n_points = lp_points * (len(vary_values) if vary is not None and vary_values else 1)
            with _progress(progress, "sweep: constrained re-solves", n_points) as advance:
                def point(done: int, total: int) -> None:
                    if advance is not None:
                        advance(1)
                    if on_point is not None:
                        on_point(done, total)

                constrained = constrained_sweep(rl, costs, axes[0], grid, specs, settings=lp, vary=vary, values=vary_values,
                                                removal=removal, scale=scale, unconstrained=s, on_point=point, runner=runner)
            step("constrained re-solves")
        bands = None
        if u is not None and u.replicates > 0:
            bands = sweep_bands(cells, rl, costs, s, RiskLevelEstimator.from_scenario(scenario), u.replicates,
                                scenario.seed if seed is None else seed, u.resampling, u.interval, u.outcomes,
                                grid_points, workers, runner, progress)
            step("bootstrap bands")
        elif cells is None and replicates != 0:  # a risk-level table: bands from its draws, if it has any
            from policy.assessment.sweep.draws_bands import draws_sweep_bands
            from policy.estimation.from_scenario import load_risk_level_draws

            draws = load_risk_level_draws(scenario)
            if draws is not None:
                u_level = (scenario.sections.get("uncertainty").interval if scenario.sections.get("uncertainty") else 0.95)
                bands = draws_sweep_bands(rl, costs, s, draws.p, u_level if interval is None else interval, grid_points,
                                          scenario.seed if seed is None else seed)
                step("bands from the table's draws")
        return SweepResult(scenario, rl, costs, s, None, assumptions, settings, constrained, bands, check)
    if specs:
        settings["constraints"] = "the scenario's constraints are not applied to a two-ratio map (sweep one ratio for them)"
    m = lenient_map(rl, costs, axes, box, assumptions=assumptions, scale=scale)
    step("exact lenient map")
    over_draws = None
    if cells is None and replicates != 0:  # a risk-level table: the map over its draws, if it has any
        from policy.assessment.sweep.draws_map import draws_map
        from policy.estimation.from_scenario import load_risk_level_draws

        draws = load_risk_level_draws(scenario)
        if draws is not None:
            u_level = (scenario.sections.get("uncertainty").interval if scenario.sections.get("uncertainty") else 0.95)
            over_draws = draws_map(m, rl, costs, draws.p, u_level if interval is None else interval)
            step("the map over the table's draws")
    return SweepResult(scenario, rl, costs, None, m, assumptions, settings, arm_check=check, draws_map=over_draws)
