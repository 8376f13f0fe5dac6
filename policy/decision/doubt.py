"""Rules that hold under doubt for one scenario: pick the set and the baseline by name, then solve
the robust rule (:mod:`policy.decision.robust`) and the safe rule (:mod:`policy.decision.safe`).

What ``solve --robust-gamma / --robust-bounds / --safe-against`` and the same options of
``compare`` call.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

from policy.decision.candidates import aid_rule, candidate_rules, observed_rules
from policy.decision.costs import Costs
from policy.decision.robust import RobustRule, robust_rule, uncertainty_set
from policy.decision.rules import Rule
from policy.decision.safe import SafeRule, safe_rule
from policy.decision.solve import optimal_rule
from policy.errors import InputError
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellTable
from policy.inputs.scenario import Scenario

__all__ = ["DoubtSettings", "RulesUnderDoubt", "baseline_choices", "rules_under_doubt"]


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
class RulesUnderDoubt:
    """The robust rule and, with a baseline, the safe rule."""

    robust: RobustRule
    safe: SafeRule | None = None

    @property
    def rules(self) -> list[Rule]:
        return [self.robust.rule] + ([self.safe.rule] if self.safe is not None else [])

    def output_files(self) -> dict[str, Any]:
        files = self.robust.output_files()
        if self.safe is not None:
            files.update(self.safe.output_files())
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
    return RulesUnderDoubt(robust, safe)

