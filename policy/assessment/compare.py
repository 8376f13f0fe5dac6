"""Comparing release rules with what courts did, with and without the aid, with intervals.

Every rule is scored by the same evaluation under the estimated risk levels (method notes,
section 6): the unconstrained optimum, the aid's recommendation, the committee's candidate rules
from the scenario's ``[[candidate_rules]]``, and the *observed* rule of each arm (the empirical
decision distribution per cell among cases where the aid was not shown, and where it was).
With ``[[constraints]]`` the constrained optimum (:mod:`policy.decision.constrained`) joins them; other
rules solved per replicate join through ``solvers``.

The effect of showing the aid, by risk level, is

    P(D >= t | R_j = r, A = a, shown) - P(D >= t | R_j = r, A = a, not shown),

each term computed as in section 5 from the observed per-cell decision distribution of the arm,
weighted by every case's w(x) P(R_j = r | x). With a randomized arm both arms share one
population, so the difference is the aid's effect on decisions within the risk level (under
the assumptions listed beside it). The intention-to-treat difference is the plain difference
in decision shares between the arms.

Every figure is recomputed in each bootstrap replicate (:mod:`policy.assessment.uncertainty`): risk levels
re-estimated, the optimum re-solved, the observed rules re-counted, all vectorized across the
replicates of a chunk.

A cell with no case in an arm has no observed decisions for that arm; its decision mix is
borrowed from the same arm's cases in the cell's rule cell (or, failing that, from the whole
arm), and the outputs report how many cases sit in such cells.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.cautions import CAUTIONS, assumptions_for
from policy.inputs.cells import CellTable
from policy.decision.costs import Costs, costs_from_scenario
from policy.errors import InputError
from policy.decision.evaluate import evaluate, group_matrix
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevelEstimator, RiskLevels
from policy.estimation.world import outcome_world
from policy.assessment.selection import chosen_cost_columns
from policy.decision.candidates import CandidateSpec, aid_rule, candidate_rule, candidate_rules, observed_delta, observed_rules  # noqa: F401
from policy.assessment.crossfit import check_folds, cross_fit
from policy.assessment.paired import cost_matrix, paired_differences, paired_figures
from policy.assessment.stability import STABILITY, check_stability, level_shares, stability_frame, unstable_lines
from policy.assessment.scoring import ComparisonStatistic, ConstrainedSolver, RuleSolver, _tail, score_rules  # noqa: F401
from policy.assessment.uncertainty import BootstrapResult, TaskRunner, bootstrap, scenario_settings

__all__ = [
    "CandidateSpec",
    "candidate_rule",
    "candidate_rules",
    "observed_rules",
    "aid_rule",
    "observed_delta",
    "score_rules",
    "ComparisonStatistic",
    "Comparison",
    "compare",
]

# ----------------------------------------------------------------------------------------------
# The comparison
# ----------------------------------------------------------------------------------------------
def _reading(effect: float, lo: float, hi: float, r: int, t: int, L: int) -> tuple[str, str]:
    """Direction of the aid's effect and what it means for cases at risk level r, threshold t."""
    if np.isfinite(lo) and np.isfinite(hi) and (lo > 0 or hi < 0):
        direction = "harsher with the aid" if effect > 0 else "more lenient with the aid"
    elif np.isfinite(lo):
        direction = "no clear change (interval includes 0)"
    else:
        direction = "harsher with the aid" if effect > 0 else ("more lenient with the aid" if effect < 0 else "no change")
    if r == 0:
        meaning = "safe cases: a harsher decision prevents nothing"
    elif r == L:
        meaning = "not preventable by any level: a harsher decision prevents nothing"
    elif t == r:
        meaning = "this level or harsher prevents the outcome for these cases"
    elif t > r:
        meaning = "harsher than needed to prevent the outcome for these cases"
    else:
        meaning = "not harsh enough to prevent the outcome for these cases"
    return direction, meaning


@dataclass(frozen=True)
class Comparison:
    """Rules compared under the estimated risk levels, the aid's effect, and their intervals.

    Attributes
    ----------
    scenario : Scenario
    cells : CellTable
    risk_levels : RiskLevels
    costs : Costs
    rules : list of Rule
        In the order of every table: the optimum, solved rules, the aid's recommendation, the
        candidates, then the observed rule of each arm (not shown, shown).
    evaluations : list of Evaluation
        Point evaluation of each rule (:func:`policy.decision.evaluate.evaluate`, against the optimum).
    result : BootstrapResult
        Point values and replicates of every figure.
    """

    scenario: Scenario
    cells: CellTable
    risk_levels: RiskLevels
    costs: Costs
    rules: list
    evaluations: list
    result: BootstrapResult
    notes: tuple[str, ...] = field(default_factory=tuple)
    #: the randomized arm's test of unconfoundedness (policy.estimation.arm_check), when the data have an arm
    arm_check: Any = None
    #: realized cost of each arm, assumption-free (policy.assessment.arm_costs.ArmCosts), when the data have an arm
    arm_costs: Any = None
    #: each rule's cost and rates, and its regret against each other rule, under each Gamma and the bounds
    #: (policy.assessment.rule_ranges): two DataFrames, or None
    ranges: Any = None
    #: the robust and safe rules (policy.decision.doubt.RulesUnderDoubt) when asked for; they are among ``rules``
    under_doubt: Any = None
    #: rule cells re-chosen in fewer than this share of replicates are marked unstable
    stability: float = STABILITY
    #: cross-fitted costs (policy.assessment.crossfit.CrossFit), or None without cross-fitting
    crossfit: Any = None
    #: the optimum, robust and safe rules over a ladder of sets (policy.decision.doubt_ladder.DoubtLadder),
    #: with the rules under doubt
    doubt_ladder: Any = None

    # -- helpers -------------------------------------------------------------------------------
    def _fig(self, name: str):
        r = self.result
        lo, hi = r.interval(name)
        return np.asarray(r.point[name], dtype=np.float64), lo, hi

    def _stamp(self, frame: pd.DataFrame) -> pd.DataFrame:
        frame["replicates"] = self.result.n_replicates
        frame["seed"] = self.result.seed
        return frame

    @property
    def has_arm(self) -> bool:
        return self.cells is not None and self.cells.has_arm

    # -- tables --------------------------------------------------------------------------------
    def comparison_frame(self) -> pd.DataFrame:
        """One row per rule with every headline figure and its interval (docs/outputs.md)."""
        rl = self.risk_levels
        out = pd.DataFrame({"rule": [r.name for r in self.rules], "kind": [r.kind for r in self.rules]})

        def put(col, values, lo, hi, scale=1.0):
            out[col] = scale * values
            out[f"{col}_lower"] = scale * lo
            out[f"{col}_upper"] = scale * hi

        c, lo, hi = self._fig("cost")
        put("cost_per_1000_cases", c, lo, hi, 1000.0)
        # the chosen rules' true cost, allowing for their choice on the same data (policy.assessment.selection)
        out["cost_per_1000_cases_chosen_lower"], out["cost_per_1000_cases_chosen_upper"] = chosen_cost_columns(
            self.result.point, self.result.replicates, len(self.rules), self.result.level)
        c, lo, hi = self._fig("regret")
        put("regret_per_1000_cases", c, lo, hi, 1000.0)
        put("agreement", *self._fig("agreement"))
        fig = {k: self._fig(k) for k in ("rates", "shares", "safe_harsher", "too_lenient")}
        for j, key in enumerate(rl.outcome_keys):
            put(f"rate_{key}", *(a[:, j] for a in fig["rates"]))
        for d, value in enumerate(rl.level_values):
            put(f"share_{value}", *(a[:, d] for a in fig["shares"]))
        for j, key in enumerate(rl.outcome_keys):
            put(f"safe_given_harsher_{key}", *(a[:, j] for a in fig["safe_harsher"]))
        for j, key in enumerate(rl.outcome_keys):
            put(f"preventable_given_too_lenient_{key}", *(a[:, j] for a in fig["too_lenient"]))
        out["unit"] = self.costs.unit
        out["note"] = [r.note for r in self.rules]
        return self._stamp(out)

    def differences_frame(self) -> pd.DataFrame:
        """Every pair of rules' paired differences in cost, outcome rates and decision shares
        (:mod:`policy.assessment.paired`)."""
        rl, r = self.risk_levels, self.result
        figs, point, reps = paired_figures(r.point, r.replicates, rl.outcome_keys, rl.level_values)
        return self._stamp(paired_differences([x.name for x in self.rules], figs, point, reps, r.level))

    def summary(self) -> pd.DataFrame:
        """The compact matrix of paired cost differences per 1,000 cases: row rule minus column
        rule, its interval, and the share of replicates in which the row rule is cheaper."""
        return cost_matrix(self.differences_frame(), [x.name for x in self.rules])

    def stability_frame(self) -> pd.DataFrame:
        """Per rule cell of the chosen rules (the optimum, solved rules), how often each level is
        chosen again when re-solved in the replicates (:mod:`policy.assessment.stability`)."""
        r = self.result
        chosen = self.rules[:1 + sum(k.startswith("solved_share_") for k in r.point)]  # the optimum, solved rules
        L = self.risk_levels.n_levels
        shares = []
        for k, rule in enumerate(chosen):
            key = "optimal_level" if k == 0 else f"solved_share_{k - 1}"
            reps = r.replicates.get(key)
            if reps is None or r.n_replicates == 0:
                shares.append(np.full(rule.delta.shape, np.nan))
            elif k == 0:
                shares.append(level_shares(reps, L))
            else:
                with np.errstate(invalid="ignore"), warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)
                    shares.append(np.nanmean(reps.astype(np.float64), axis=0))
        return self._stamp(stability_frame(chosen, shares, self.stability, r.n_replicates))

    def gaps_frame(self) -> pd.DataFrame:
        """Every fairness gap of every rule by protected attribute, with its interval."""
        rl = self.risk_levels
        pf, pf_lo, pf_hi = self._fig("principal_gap")  # (R, A, J, L+1, L-1)
        sp, sp_lo, sp_hi = self._fig("parity_gap")  # (R, A, L-1)
        attrs = list(rl.layout.protected)
        names = rl.risk_level_names
        rows = []
        for i, rule in enumerate(self.rules):
            for a, attr in enumerate(attrs):
                for t in range(rl.n_levels - 1):
                    thr = rl.level_labels[t + 1]
                    rows.append((rule.name, "statistical_parity", attr, "", -1, "", thr, sp[i, a, t], sp_lo[i, a, t], sp_hi[i, a, t]))
                    for j, key in enumerate(rl.outcome_keys):
                        for r, rname in enumerate(names):
                            rows.append((rule.name, "principal_fairness", attr, key, r, rname, thr,
                                         pf[i, a, j, r, t], pf_lo[i, a, j, r, t], pf_hi[i, a, j, r, t]))
        frame = pd.DataFrame(rows, columns=["rule", "kind", "attribute", "outcome", "risk_level", "risk_level_name",
                                            "threshold", "gap", "gap_lower", "gap_upper"])
        return self._stamp(frame)

    def effect_frame(self) -> pd.DataFrame:
        """The aid's effect on P(D >= t | R_j = r, group), with intervals and a reading."""
        if not self.has_arm:
            return pd.DataFrame()
        rl = self.risk_levels
        eff, lo, hi = self._fig("effect")  # (G, J, L+1, L-1)
        shown, not_shown = self.result.point["effect_shown"], self.result.point["effect_not_shown"]
        cases = self.result.point["stratum_cases"]  # (G, J, L+1)
        _, labels = group_matrix(rl.layout)
        G, J, R, T = eff.shape
        g, j, r, t = (a.reshape(-1) for a in np.indices(eff.shape))
        frame = pd.DataFrame({
            "attribute": [labels[i][0] for i in g],
            "group": [labels[i][1] for i in g],
            "outcome": np.asarray(rl.outcome_keys, dtype=object)[j],
            "risk_level": r,
            "risk_level_name": np.asarray(rl.risk_level_names, dtype=object)[r],
            "threshold": np.asarray(rl.level_labels, dtype=object)[t + 1],
            "not_shown": not_shown.reshape(-1),
            "shown": shown.reshape(-1),
            "effect": eff.reshape(-1),
            "effect_lower": lo.reshape(-1),
            "effect_upper": hi.reshape(-1),
            "stratum_cases": cases[g, j, r],
        })
        read = [_reading(e, a, b, rr, tt + 1, rl.n_levels) for e, a, b, rr, tt in
                zip(frame["effect"], frame["effect_lower"], frame["effect_upper"], r, t)]
        frame["direction"] = [x[0] for x in read]
        frame["meaning"] = [x[1] for x in read]
        return self._stamp(frame)

    def itt_frame(self) -> pd.DataFrame:
        """Intention to treat: decision shares by arm and their difference, overall and by group."""
        if not self.has_arm:
            return pd.DataFrame()
        rl = self.risk_levels
        share = np.asarray(self.result.point["itt_share"])  # (G, A, L)
        cases = np.asarray(self.result.point["itt_cases"])  # (G, A)
        d, d_lo, d_hi = self._fig("itt_share_diff")
        t, t_lo, t_hi = self._fig("itt_at_least_diff")
        _, labels = group_matrix(rl.layout)
        rows = []
        for gi, (attr, group) in enumerate(labels):
            for lv in range(rl.n_levels):
                rows.append((attr, group, "share at level", rl.level_labels[lv], share[gi, 0, lv], share[gi, 1, lv],
                             d[gi, lv], d_lo[gi, lv], d_hi[gi, lv], cases[gi, 0], cases[gi, 1]))
            for k in range(rl.n_levels - 1):
                rows.append((attr, group, "share at level or harsher", rl.level_labels[k + 1],
                             _tail(share[gi, 0])[k], _tail(share[gi, 1])[k], t[gi, k], t_lo[gi, k], t_hi[gi, k],
                             cases[gi, 0], cases[gi, 1]))
        frame = pd.DataFrame(rows, columns=["attribute", "group", "figure", "level", "not_shown", "shown", "difference",
                                            "difference_lower", "difference_upper", "cases_not_shown", "cases_shown"])
        return self._stamp(frame)

    def shares_frame(self) -> pd.DataFrame:
        """Share of cases at each risk level, overall and by group, with intervals."""
        rl = self.risk_levels
        s, lo, hi = self._fig("risk_level_share")  # (G, J, L+1)
        _, labels = group_matrix(rl.layout)
        g, j, r = (a.reshape(-1) for a in np.indices(s.shape))
        frame = pd.DataFrame({
            "outcome": np.asarray(rl.outcome_keys, dtype=object)[j],
            "attribute": [labels[i][0] for i in g],
            "group": [labels[i][1] for i in g],
            "risk_level": r,
            "risk_level_name": np.asarray(rl.risk_level_names, dtype=object)[r],
            "share": s.reshape(-1),
            "share_lower": lo.reshape(-1),
            "share_upper": hi.reshape(-1),
        })
        return self._stamp(frame)

    def empty_arm_text(self) -> str:
        """Why the aid's effect cannot be estimated at all ('' when it can): an arm with no cases."""
        if not self.has_arm:
            return ""
        per_arm = self.cells.cases.sum(axis=(0, 2))
        missing = [("shown" if arm == 1 else "not shown") for arm, n in zip(self.cells.arms, per_arm) if n == 0]
        if not missing:
            return ""
        return (f"no case where the aid was {missing[0]}, so the aid's effect and what courts did in that arm cannot "
                "be estimated")

    def readings(self) -> list[str]:
        """Plain-words reading of the aid's effect where it matters, per outcome kind (overall):
        safe cases at the first harsher level, and each preventable risk level at the level that
        prevents it."""
        if not self.has_arm:
            return []
        rl = self.risk_levels
        eff, lo, hi = self._fig("effect")
        L = rl.n_levels
        pct = lambda v: f"{100 * v:+.1f}"
        out = []
        empty = self.empty_arm_text()
        if empty:
            return [f"not estimated: {empty}."]
        for j, label in enumerate(rl.outcome_labels):
            for r in range(0, L):
                t = max(r, 1)
                e, a, b = eff[0, j, r, t - 1], lo[0, j, r, t - 1], hi[0, j, r, t - 1]
                if not np.isfinite(e):
                    out.append(f"{label}, {rl.risk_level_names[r]}: not estimated (no cases of this risk level in one of the arms).")
                    continue
                direction, meaning = _reading(e, a, b, r, t, L)
                interval = f" ({self.result.interval_label}: {pct(a)} to {pct(b)})" if np.isfinite(a) else ""
                out.append(
                    f"{label}, {rl.risk_level_names[r]}: showing the aid changed the share given "
                    f"{rl.level_labels[t]} or harsher by {pct(e)} points{interval}; {direction}; {meaning}."
                )
        return out

    def output_files(self) -> dict[str, Any]:
        """Every output file of ``compare`` by name (documented in docs/outputs.md)."""
        files: dict[str, Any] = {
            "comparison.csv": self.comparison_frame(),
            "comparison_gaps.csv": self.gaps_frame(),
            "risk_level_share_intervals.csv": self.shares_frame(),
            "comparison_differences.csv": self.differences_frame(),
            "rule_stability.csv": self.stability_frame(),
        }
        if self.crossfit is not None:
            files["comparison_cross_fitted.csv"] = self._stamp(self.crossfit.to_frame())
        if self.has_arm:
            files["aid_effect.csv"] = self.effect_frame()
            files["aid_effect_itt.csv"] = self.itt_frame()
        files["compare.json"] = {
            "scenario": self.scenario.title,
            "scenario_file": str(self.scenario.path) if self.scenario.path else None,
            "data": self.risk_levels.source,
            "cost_unit": self.costs.unit,
            "reference_rule": self.rules[0].name,
            "rules": [{"name": r.name, "kind": r.kind, "note": r.note} for r in self.rules],
            **self.result.meta(),
            "readings": self.readings(),
            "cross_fitting": None if self.crossfit is None else {"folds": self.crossfit.folds, "repeats": self.crossfit.repeats,
                                                                  "seed": self.crossfit.seed, "lines": self.crossfit.lines()},
            "notes": list(self.notes),
            "assumptions": {
                "comparison": assumptions_for("evaluation"),
                "observed_rules": assumptions_for("observed_rule"),
                "aid_effect": assumptions_for("aid_effect") if self.has_arm else [],
            },
            "cautions": list(CAUTIONS),
        }
        if self.arm_check is not None:
            files.update(self.arm_check.output_files())
        if self.ranges is not None:
            files["comparison_ranges.csv"], files["comparison_regret_ranges.csv"] = self.ranges
        if self.arm_costs is not None:
            files["arm_costs.csv"] = self.arm_costs.to_frame()
            files["compare.json"]["assumption_free"] = self.arm_costs.summary()
        if self.under_doubt is not None:
            files.update(self.under_doubt.output_files())
        if self.doubt_ladder is not None:
            files.update(self.doubt_ladder.output_files())
        return files

    def __str__(self) -> str:
        frame = self.comparison_frame()
        lines = [f"Rules compared ({self.result.interval_label}, {self.result.n_replicates} replicates, seed {self.result.seed}):"]
        for _, row in frame.iterrows():
            lo, hi = row["cost_per_1000_cases_lower"], row["cost_per_1000_cases_upper"]
            interval = f" ({lo:,.0f} to {hi:,.0f})" if np.isfinite(lo) else ""
            clo, chi = row["cost_per_1000_cases_chosen_lower"], row["cost_per_1000_cases_chosen_upper"]
            if np.isfinite(clo):
                interval += f", allowing for its choice on these data {clo:,.0f} to {chi:,.0f}"
            lines.append(f"  {row['rule']}: {row['cost_per_1000_cases']:,.0f} per 1,000 cases{interval}; "
                         f"regret {row['regret_per_1000_cases']:,.0f}; agreement {row['agreement']:.1%}")
        lines += ["Paired differences in expected cost per 1,000 cases (row rule minus column rule):",
                  self.summary().to_string()]
        lines += unstable_lines(self.stability_frame())
        lines += [] if self.crossfit is None else [str(self.crossfit)]
        lines += self.readings()
        return "\n".join(lines)


def compare(scenario, replicates: int | None = None, seed: int | None = None, resampling: str | None = None,
            interval: float | None = None, outcomes: str | None = None, workers: int | None = None, runner: TaskRunner | None = None,
            progress: bool = False, rules: Sequence[Rule] = (), solvers: Sequence[RuleSolver] = (),
            constraints: bool = True,
            outcome_costs: Mapping[str, float] | None = None,
            decision_costs: Mapping[str, float] | None = None, doubt: Any = None, stability: float = 0.8,
            folds: int = 5, fold_repeats: int = 1, arm_checked: Any = None, table: Any = None) -> Comparison:
    """Compare the optimum, the aid's recommendation, candidates and observed rules, with intervals.

    Parameters
    ----------
    scenario : Scenario or path
    replicates, seed, resampling, interval, outcomes : optional
        Override the scenario's ``[uncertainty]`` settings and ``[scenario] seed``.
    workers, runner : optional
        How replicates are run (see :func:`policy.assessment.uncertainty.bootstrap`); the output does not
        depend on them.
    progress : bool
        Show a progress bar.
    rules : sequence of Rule
        Further fixed rules to compare (built on the scenario's cells).
    solvers : sequence of callable
        ``solver(risk_levels, costs) -> Rule`` re-run in every replicate; the point rule comes
        from the same solver on the estimates.
    constraints : bool
        With the scenario's ``[[constraints]]``, also compare the constrained optimum
        (:mod:`policy.decision.constrained`), re-solved in every replicate (default true).
    outcome_costs, decision_costs : mapping, optional
        What-if cost overrides, as for ``solve``.
    doubt : DoubtSettings, optional
        Also compare the robust rule (and the safe rule against a baseline) of
        :mod:`policy.decision.doubt`, solved once on the estimates with the scenario's constraints
        and held fixed across replicates.
    stability : float
        Rule cells of the chosen rules whose level is chosen again in fewer than this share of
        replicates are marked unstable (``rule_stability.csv``; default 0.8).
    folds : int
        Cross-fit the chosen rules with this many folds (:mod:`policy.assessment.crossfit`;
        0: no cross-fitting; default 5), seeded from the bootstrap's seed.
    fold_repeats : int
        Independent splits into folds, averaged (default 1; more reduce the split's noise).
    arm_checked : ArmCheck, optional
        The randomized arm's check already run on the same scenario's data (it depends on the
        cases alone, not on costs or replicates), so that a caller running several stages on one
        data set runs it once; default: run here.
    table : DataFrame, optional
        For a scenario whose data are a risk-level table: the table (with or without draws) as a
        pandas DataFrame, in place of the file the scenario names.
    """
    from policy.estimation.from_scenario import estimate
    from policy.inputs.scenario import as_scenario

    scenario = as_scenario(scenario)
    if scenario.data.kind == "risk_level_table":  # no cases: intervals from the table's draws, if any
        from policy.assessment.draws_compare import compare_on_table

        rl, costs, rules, evaluations, result, notes = compare_on_table(scenario, interval, seed, constraints, outcome_costs,
                                                                        decision_costs, rules, table)
        return Comparison(scenario, None, rl, costs, rules, evaluations, result, notes,
                          stability=check_stability(stability, "compare: stability"))
    if table is not None:
        raise InputError(f"{scenario.file}: a table given from Python replaces a risk-level table; this scenario's data "
                         f"are a {scenario.data.kind.replace('_', ' ')}.")
    settings = scenario_settings(scenario, "compare:", replicates, interval, resampling, outcomes)
    stability = check_stability(stability, "compare: stability")
    folds = check_folds(folds, "compare: folds")
    if isinstance(fold_repeats, bool) or not isinstance(fold_repeats, (int, np.integer)) or fold_repeats < 1:
        raise InputError(f"compare: fold repeats must be a whole number of at least 1; got {fold_repeats!r}.")
    from policy.decision.constrained import ConstrainedProblem
    from policy.decision.constraints import scenario_specs

    specs = scenario_specs(scenario) if constraints else ()
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    optimum = optimal_rule(rl, costs)
    solvers = list(solvers)
    solved = [s(rl, costs) for s in solvers]
    if specs:
        lp = scenario.sections.get("linear_program")
        solved.append(ConstrainedProblem(rl, costs, specs, settings=lp).solve().rule)
        solvers.append(ConstrainedSolver(specs, lp))
    if any(not isinstance(r, Rule) for r in solved):
        raise InputError("a solver given to compare must return a Rule for the point estimates.")
    aid = aid_rule(cells, scenario.aid.name, scenario.level_labels)
    fixed = ([aid] if aid is not None else []) + candidate_rules(scenario, rl.layout, rl.weights) + list(rules)
    under_doubt = None
    if doubt is not None:
        from policy.decision.doubt import rules_under_doubt

        under_doubt = rules_under_doubt(scenario, cells, rl, costs, doubt, specs, scenario.sections.get("linear_program"),
                                        solved[-1] if specs else optimum, where="--safe-against")
        fixed += under_doubt.rules
    observed = observed_rules(cells, scenario.aid.name, scenario.level_labels)
    all_rules = [optimum] + solved + fixed + observed
    names = [r.name for r in all_rules]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"{scenario.file}: two compared rules are both called {dup[0]!r}; give candidates distinct names.")
    evaluations = [evaluate(r, rl, costs, reference=optimum) for r in all_rules]
    estimator = RiskLevelEstimator.from_scenario(scenario)
    world = outcome_world(estimator, cells, settings.outcomes) if settings.replicates else None
    statistic = ComparisonStatistic(estimator, estimator.design(cells.layout, len(cells.levels)), costs, cells.layout,
                                    [r.cell_delta for r in fixed], cells.has_arm, len(cells.arms), solvers, rl,
                                    chosen=[optimum] + solved, world=rl.p if world is None else world)
    result = bootstrap(cells, statistic, settings.replicates, scenario.seed if seed is None else seed,
                       settings.resampling, settings.interval, runner=runner, workers=workers, progress=progress,
                       description="compare: bootstrap replicates",
                       outcome_model=world)
    notes = [r.note and f"{r.name}: {r.note}" for r in all_rules if r.note]
    if result.outcomes == "model":
        notes.append("replicate outcomes were drawn from the risk levels re-estimated with every covariate-by-level term in "
                     "the estimator's target, so replicates can miss or keep a term as the estimate did (model-based bootstrap), "
                     "independently per outcome kind given cell and level")
    elif not result.joint_states:
        notes.append("counts-table input: outcome kinds of one case were resampled independently given cell, arm and level")
    notes.append("the rules chosen on the full data (the optimum and any solved rule) are held fixed and scored in every "
                 "replicate; regret intervals are paired differences against the optimum so held; how often each rule "
                 "cell's level is chosen again when re-solved is in rule_stability.csv; the optimum's estimated cost is "
                 "optimistic (chosen on the same data); cost_per_1000_cases_chosen_lower and _upper give an interval for "
                 "its true cost that allows for that choice")
    if under_doubt is not None:
        notes.append("the robust and safe rules are solved once on the estimates and held fixed across replicates")
    if cells.has_arm and (cells.cases.sum(axis=(0, 2)) == 0).any():
        arm = "shown" if int(np.flatnonzero(cells.cases.sum(axis=(0, 2)) == 0)[0]) == 1 else "not shown"
        notes.append(f"no case where the aid was {arm}: figures of that arm (what courts did there, the aid's effect) "
                     "are left empty, not estimated")
    failed = result.replicates.get("solver_failed")
    for k, rule in enumerate(solved):
        if failed is not None and failed.shape[0] and failed[:, k].any():
            notes.append(f"{rule.name}: no solution in {int(failed[:, k].sum())} of {result.n_replicates} replicates "
                         "(left out of its intervals)")
    from policy.assessment.arm_costs import realized_arm_costs
    from policy.assessment.rule_ranges import regret_ranges, rule_ranges
    from policy.estimation.arm_check import arm_check, with_gamma_low
    from policy.estimation.bounds import robust_assumptions
    from policy.estimation.bounds_table import SENSITIVITY_GAMMAS

    arm_costs = check = None
    gammas = SENSITIVITY_GAMMAS
    if cells.has_arm:
        arm_costs = realized_arm_costs(cells, costs, settings.replicates, scenario.seed if seed is None else seed,
                                       settings.resampling, settings.interval, runner=runner, workers=workers,
                                       arm_labels=tuple(r.name for r in observed))
        check = arm_checked if arm_checked is not None else arm_check(cells, outcome_labels=scenario.outcome_label_map)
        gammas = with_gamma_low(gammas, check)
    ladder = None
    if under_doubt is not None:
        from policy.decision.doubt_ladder import ladder_for

        ladder = ladder_for(under_doubt, doubt, check, rl, cells, costs, SENSITIVITY_GAMMAS, specs,
                            scenario.sections.get("linear_program"))
    intervals = robust_assumptions(rl, cells, gammas, True)
    ranges = (rule_ranges(all_rules, rl, costs, intervals), regret_ranges(all_rules, rl, costs, intervals))
    crossfit = cross_fit(cells, rl, costs, estimator, all_rules, solvers, folds, result.seed, fold_repeats) if folds else None
    return Comparison(scenario, cells, rl, costs, all_rules, evaluations, result, tuple(notes), stability=stability,
                      crossfit=crossfit, arm_check=check, arm_costs=arm_costs, ranges=ranges, under_doubt=under_doubt,
                      doubt_ladder=ladder)
