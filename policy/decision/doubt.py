"""Rules that hold under doubt for one scenario: pick the set and the baseline by name, then solve
the robust rule (:mod:`policy.decision.robust`) and the safe rule (:mod:`policy.decision.safe`).

What ``solve --robust-gamma / --robust-bounds / --safe-against`` and the same options of
``compare`` call.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.decision.candidates import aid_rule, candidate_rules, observed_rules
from policy.decision.costs import Costs
from policy.decision.robust import RobustRule, robust_rule, uncertainty_set
from policy.decision.rules import Rule
from policy.decision.safe import SafeRule, safe_rule
from policy.decision.solve import optimal_rule
from policy.errors import InputError
from policy.estimation.arm_check import gamma_low_rounded
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellTable
from policy.inputs.scenario import Scenario

__all__ = ["DEFAULT_GAMMA", "DoubtChoice", "DoubtSettings", "RulesUnderDoubt", "baseline_choices", "chosen_doubt",
           "rules_under_doubt"]

#: Gamma of the set guarded against by default when the arm check finds no confounding (or cannot
#: run): a moderate departure from unconfoundedness, chosen by the tool (an assumption, not a finding)
DEFAULT_GAMMA = 1.5


@dataclass(frozen=True)
class DoubtSettings:
    """Which set to guard against and which baseline to beat.

    Attributes
    ----------
    gamma : float or None
        Sensitivity parameter Gamma >= 1 of the set (or None with ``bounds``).
    bounds : bool
        Guard against the monotone-response bounds instead.
    safe_against : str or None
        Baseline of the safe rule, by key or name (:func:`baseline_choices`); None: no safe rule.
    missing : {'worst_case', 'ignore'}
        Missing outcome records in the monotone bounds.
    monotone : bool
        The safe rule's set includes monotonicity in the decision level.
    """

    gamma: float | None = None
    bounds: bool = False
    safe_against: str | None = None
    missing: str = "worst_case"
    monotone: bool = True

    @property
    def wanted(self) -> bool:
        return self.gamma is not None or self.bounds or self.safe_against is not None


@dataclass(frozen=True)
class DoubtChoice:
    """The set and baseline chosen for the rules that hold under doubt, and why.

    Attributes
    ----------
    settings : DoubtSettings
    reason : str
        Why this set, in a sentence or two (which values were asked for, what the arm check found).
    contradicted : bool
        The arm check shows more confounding than the set allows (Gamma below Gamma_low): the
        data contradict the set, and the rules' guarantees may not hold.
    """

    settings: DoubtSettings
    reason: str
    contradicted: bool = False


def _gamma_text(g: float) -> str:
    return f"{g:.2f}".rstrip("0").rstrip(".")


def chosen_doubt(check: Any = None, gamma: float | None = None, bounds: bool = False, safe_against: str | None = None,
                 has_arm: bool = False, default_gamma: float = DEFAULT_GAMMA) -> DoubtChoice:
    """The set and baseline of the rules that hold under doubt: the values asked for, else chosen
    from what the randomized arm shows.

    Parameters
    ----------
    check : ArmCheck, optional
        The arm check (:func:`policy.estimation.arm_check.arm_check`), where the data have an arm.
    gamma, bounds : optional
        A Gamma value, or the monotone bounds, asked for (at most one of the two).
    safe_against : str, optional
        The safe rule's baseline asked for (default: what courts did without the aid where the
        data have an arm, else what courts did).
    has_arm : bool
        The data have a randomized arm (so ``courts-not-shown`` exists).
    default_gamma : float
        Gamma when nothing is asked for and the arm check does not reject (or cannot run).

    Returns
    -------
    DoubtChoice
        When nothing is asked for: Gamma_low (rounded up to 2 decimals) where the arm check
        rejects and Gamma_low is finite; the monotone bounds where it is infinite; else
        ``default_gamma``.
    """
    if gamma is not None and bounds:
        raise InputError("give a Gamma value or the monotone bounds for the rules that hold under doubt, not both.")
    low = float(getattr(check, "gamma_lower", float("nan"))) if check is not None else float("nan")
    rejects = bool(check is not None and check.rejects)
    shown = f"the least confounding the randomized arm shows is Gamma_low = {'infinity' if low == np.inf else _gamma_text(low)}"
    contradicted = False
    if bounds:
        reason = "Guarding against the monotone-response bounds, as asked: they assume monotonicity only."
    elif gamma is not None:
        reason = f"Guarding against confounding up to Gamma = {_gamma_text(gamma)}, as asked."
        if rejects and low == low and gamma < low:
            contradicted = True
            reason += (f" The data contradict that set: {shown} (the arm check rejects unconfoundedness), so the "
                       "guarantees below may not hold; use Gamma of at least that value or the monotone bounds.")
    elif rejects and low == np.inf:
        bounds = True
        reason = ("The randomized arm contradicts unconfoundedness and no finite Gamma reconciles its two arms, so the "
                  "rules guard against the monotone-response bounds (monotonicity only).")
    elif rejects and low == low:
        gamma = gamma_low_rounded(low)
        reason = (f"The randomized arm contradicts unconfoundedness; the rules guard against confounding up to "
                  f"Gamma = {_gamma_text(gamma)}, since {shown} (rounded up here; a lower confidence bound: the "
                  "confounding present may be larger; the monotone bounds hold at any Gamma).")
    else:
        gamma = default_gamma
        found = ("the randomized arm found no contradiction of unconfoundedness" if check is not None and check.tested
                 else "the data have no randomized arm to test unconfoundedness with" if check is None
                 else "the arm check could not be run")
        reason = (f"Guarding against confounding up to Gamma = {_gamma_text(gamma)}, a moderate departure chosen by the "
                  f"tool ({found}; that is no proof that there is none).")
    if safe_against is None:
        safe_against = "courts-not-shown" if has_arm else "courts"
        reason += (" The safe rule is set against what courts did " + ("without the aid." if has_arm else "(observed)."))
    return DoubtChoice(DoubtSettings(gamma=gamma, bounds=bounds, safe_against=safe_against), reason, contradicted)


@dataclass(frozen=True)
class RulesUnderDoubt:
    """The robust rule and, with a baseline, the safe rule.

    ``standing`` (:func:`standing_frame`) sets them beside the ordinary optimum and the baseline.
    """

    robust: RobustRule
    safe: SafeRule | None = None
    standing: pd.DataFrame | None = None

    @property
    def rules(self) -> list[Rule]:
        return [self.robust.rule] + ([self.safe.rule] if self.safe is not None else [])

    def output_files(self) -> dict[str, Any]:
        files = self.robust.output_files()
        if self.safe is not None:
            files.update(self.safe.output_files())
        if self.standing is not None:
            files["doubt_rules.csv"] = self.standing
        return files

    def summary(self) -> str:
        return "\n".join([self.robust.summary()] + ([self.safe.summary()] if self.safe is not None else []))

    __str__ = summary


def baseline_choices(scenario: Scenario, cells: CellTable, risk_levels: RiskLevels, costs: Costs) -> dict[str, Rule]:
    """Rules a safe rule can be set against, by key: ``courts`` (or ``courts-shown`` and
    ``courts-not-shown`` with an arm column: what courts did), ``aid`` (the aid's recommendation,
    where the data hold one), ``optimum`` (the point-estimate optimum) and each candidate rule's
    own name. Every rule's full name is accepted as well (case does not matter)."""
    out: dict[str, Rule] = {}
    for arm, rule in zip(cells.arms, observed_rules(cells, scenario.aid.name, scenario.level_labels)):
        out["courts" if arm is None else ("courts-shown" if arm == 1 else "courts-not-shown")] = rule
    aid = aid_rule(cells, scenario.aid.name, scenario.level_labels)
    if aid is not None:
        out["aid"] = aid
    out["optimum"] = optimal_rule(risk_levels, costs)
    for rule in candidate_rules(scenario, risk_levels.layout, risk_levels.weights):
        out[rule.name] = rule
    return out


def _find_baseline(name: str, choices: Mapping[str, Rule], where: str) -> Rule:
    wanted = name.strip().lower()
    for key, rule in choices.items():
        if wanted in (key.lower(), rule.name.lower()):
            return rule
    raise InputError(f"{where} {name!r} names no rule of this scenario; expected one of: {', '.join(choices)}.")


def rules_under_doubt(scenario: Scenario, cells: CellTable | None, risk_levels: RiskLevels, costs: Costs,
                      doubt: DoubtSettings, constraints: Sequence[Any] = (), lp_settings: Any = None,
                      reference: Rule | None = None, where: str = "safe_against") -> RulesUnderDoubt:
    """Solve the robust rule (and the safe rule against the named baseline) for a scenario's estimates.

    Parameters
    ----------
    scenario : Scenario
    cells : CellTable
        The counts behind the estimates (the sets need them).
    risk_levels : RiskLevels
    costs : Costs
    doubt : DoubtSettings
    constraints : sequence of ConstraintSpec or dict
        The rule's constraints (the same as the ordinary optimum's).
    lp_settings : LPSettings, optional
    reference : Rule, optional
        The ordinary optimum the robust rule is set against (default: the unconstrained optimum).
    where : str
        How the baseline option is called in messages.
    """
    if doubt.safe_against is not None and doubt.gamma is None and not doubt.bounds:
        raise InputError(f"{where} needs a set to guard against: give a Gamma value or ask for the monotone bounds.")
    the_set = uncertainty_set(risk_levels, cells, doubt.gamma, doubt.bounds, doubt.missing)
    reference = reference if reference is not None else optimal_rule(risk_levels, costs)
    robust = robust_rule(risk_levels, costs, the_set, constraints, settings=lp_settings, reference=reference)
    safe = None
    if doubt.safe_against is not None:
        baseline = _find_baseline(doubt.safe_against, baseline_choices(scenario, cells, risk_levels, costs), where)
        safe = safe_rule(risk_levels, costs, the_set, baseline, constraints, settings=lp_settings, monotone=doubt.monotone)
    return RulesUnderDoubt(robust, safe, standing_frame(robust, safe, risk_levels, costs))


def standing_frame(robust: RobustRule, safe: SafeRule | None, risk_levels: RiskLevels, costs: Costs) -> pd.DataFrame:
    """The ordinary optimum (the robust rule's reference), the robust rule, the safe rule and its
    baseline side by side, per 1,000 cases: ``cost_point`` (expected cost under the point
    estimate), ``cost_worst_case`` (largest over the set), and with a safe rule
    ``regret_worst_case`` (largest regret against the baseline over the set and monotonicity;
    at most 0: never worse than the baseline) and ``share_<level>`` (share of cases at each
    level, under the rule)."""
    from policy.decision.robust import rule_cost, worst_case_p
    from policy.decision.safe import worst_case_regret

    rows: list[tuple[str, str, Rule]] = []
    if robust.reference is not None:
        rows.append(("ordinary optimum", robust.reference.name, robust.reference))
    rows.append(("robust rule", robust.rule.name, robust.rule))
    if safe is not None:
        rows += [("safe rule", safe.rule.name, safe.rule), ("baseline", safe.baseline.name, safe.baseline)]
    worst = worst_case_p(robust.bounds)
    w = risk_levels.weights
    out = []
    for role, name, rule in rows:
        delta = rule.cell_delta
        rec = {"role": role, "rule": name, "set": robust.bounds.label,
               "cost_point": 1000.0 * rule_cost(delta, risk_levels.p, w, costs),
               "cost_worst_case": 1000.0 * rule_cost(delta, worst, w, costs)}
        if safe is not None:
            rec["regret_worst_case"] = (1000.0 * safe.worst_case_regret_per_case if role == "safe rule" else
                                        1000.0 * worst_case_regret(delta, safe.baseline, risk_levels, costs, safe.bounds,
                                                                   safe.monotone).total)
        shares = (np.asarray(w, dtype=np.float64)[:, None] * delta).sum(axis=0) / float(np.sum(w))
        rec.update({f"share_{v}": float(s) for v, s in zip(rule.level_values, shares)})
        out.append(rec)
    return pd.DataFrame(out)

