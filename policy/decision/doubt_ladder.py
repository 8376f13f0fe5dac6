"""Where each conclusion stops holding: the ordinary optimum, the robust rule and the safe rule
over a ladder of sets, from slight confounding (Gamma near 1) to the monotone-response bounds.

For every set of the ladder (the sensitivity model's intervals at each Gamma, then the monotone
bounds; :func:`policy.decision.robust.uncertainty_set`), :func:`doubt_ladder` solves the robust
rule and, with a baseline, the safe rule, and scores the ordinary optimum: its worst-case
expected cost and its worst-case regret against the baseline. Reading down the ladder, a
conclusion such as "the optimum is no worse than what courts did" holds up to the last set at
which that worst-case regret is still at most 0; sets with Gamma below the least confounding the
randomized arm shows (Gamma_low, :mod:`policy.estimation.arm_check`) are marked as contradicted
by the data.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import math

import pandas as pd

from policy.decision.costs import Costs
from policy.decision.robust import robust_rule, rule_cost, uncertainty_set, worst_case_p
from policy.decision.rules import Rule
from policy.decision.safe import CERTIFY_TOLERANCE, safe_rule, worst_case_regret
from policy.decision.solve import optimal_rule
from policy.estimation.arm_check import gamma_low_rounded
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellTable

__all__ = ["DoubtLadder", "NEARLY_ROBUST", "doubt_ladder", "ladder_for"]

#: the ordinary optimum counts as (nearly) robust at a set when its worst-case cost is within this
#: share of the least worst case (the robust rule's): a reading threshold, not a statistical one
NEARLY_ROBUST = 0.001


@dataclass(frozen=True)
class DoubtLadder:
    """The rules and the ordinary optimum over a ladder of sets.

    Attributes
    ----------
    frame : DataFrame
        One row per set, weakest assumption last: ``set`` (label), ``gamma`` (inf for the
        bounds), ``contradicted`` (Gamma below the data's Gamma_low), per 1,000 cases
        ``optimum_cost_worst_case``, ``robust_cost_worst_case``, ``robust_cost_point``,
        ``optimum_nearly_robust`` (the optimum's worst case is within :data:`NEARLY_ROBUST` of the
        least, the robust rule's), and with a
        baseline ``optimum_regret_worst_case`` (the optimum's worst-case regret against it),
        ``optimum_no_worse`` (that regret is at most 0), ``safe_certified``,
        ``safe_guaranteed_saving``, ``safe_cost_point``; ``robust_share_<level>`` (the robust
        rule's share at each level).
    reference : str
        The ordinary optimum's name.
    baseline : str
        The baseline's name ('' without one).
    unit : str
    """

    frame: pd.DataFrame
    reference: str
    baseline: str = ""
    unit: str = ""

    def _last(self, column: str) -> str | None:
        """Label of the last set, reading down the ladder, up to which ``column`` holds at every set
        (None when it fails at the first)."""
        last = None
        for _, row in self.frame.iterrows():
            if not bool(row[column]):
                break
            last = row["set"]
        return last

    def lines(self) -> list[str]:
        """Where each conclusion stops holding, in sentences."""
        ref = _the(self.reference)
        ref = ref[0].upper() + ref[1:]
        out = []
        last, n = self._last("optimum_nearly_robust"), len(self.frame)
        near = f"within {NEARLY_ROBUST:.1%} of the least possible (the robust rule's)"
        if last is None:
            out.append(f"Even at {_the(self.frame['set'].iloc[0])} the worst case of {_the(self.reference)} is not "
                       f"{near}: guarding against slight confounding already calls for another rule.")
        elif last == self.frame["set"].iloc[-1]:
            out.append(f"The worst case of {_the(self.reference)} is {near} under every set, up to {_the(last)}.")
        else:
            out.append(f"The worst case of {_the(self.reference)} is {near} up to {_the(last)}; beyond it, the robust "
                       "rule guards against the worst case better.")
        if self.baseline:
            last = self._last("optimum_no_worse")
            if last is None:
                out.append(f"{ref} is not certified no worse than {_the(self.baseline)} even at "
                           f"{_the(self.frame['set'].iloc[0])}.")
            else:
                out.append(f"{ref} is certified no worse than {_the(self.baseline)} up to {_the(last)}"
                           + ("" if last == self.frame["set"].iloc[-1] else "; beyond it, it may cost more") + ".")
            last = self._last("safe_certified")
            gains = self.frame.loc[self.frame["safe_guaranteed_saving"] > 0, "set"]
            out.append(f"The safe rule against {_the(self.baseline)} is certified no worse up to "
                       f"{_the(last) if last is not None else 'no set'}"
                       + (f", with a guaranteed saving up to {_the(gains.iloc[-1])}." if len(gains) else
                          "; it guarantees no saving at any set."))
        bad = self.frame.loc[self.frame["contradicted"], "set"]
        if len(bad):
            out.append(f"The randomized arm contradicts {', '.join(bad)} ({len(bad)} of {n} sets): conclusions that "
                       "hold only there are not supported by the data.")
        return out

    def output_files(self) -> dict[str, Any]:
        """``doubt_ladder.csv`` (documented in docs/outputs.md)."""
        return {"doubt_ladder.csv": self.frame}


def _the(name: str) -> str:
    """A rule's or set's name as read in a sentence: 'the cost-minimizing rule', 'the monotone bounds',
    'Gamma = 2', 'courts, ... not shown' (names that start with a capital, or 'courts', as they are)."""
    return f"the {name}" if name.endswith(("rule", "bounds")) and name[:1].islower() else name


def doubt_ladder(risk_levels: RiskLevels, cells: CellTable, costs: Costs, gammas: Sequence[float],
                 baseline: Rule | None = None, constraints: Sequence[Any] = (), lp_settings: Any = None,
                 reference: Rule | None = None, gamma_low: float = float("nan"), bounds: bool = True,
                 missing: str = "worst_case", monotone: bool = True) -> DoubtLadder:
    """The ordinary optimum, the robust rule and the safe rule at each Gamma and under the bounds.

    Parameters
    ----------
    risk_levels, cells, costs
        The estimates, the counts behind them and the costs.
    gammas : sequence of float
        Gamma values >= 1 (sorted, duplicates dropped).
    baseline : Rule, optional
        The safe rule's baseline; without one, no safe rule and no regret columns.
    constraints, lp_settings
        The rules' constraints and how to solve them (as for the ordinary optimum).
    reference : Rule, optional
        The ordinary optimum (default: the unconstrained one).
    gamma_low : float
        The least confounding the randomized arm shows where its check rejects (NaN otherwise):
        sets with a smaller Gamma are marked ``contradicted``.
    bounds : bool
        End the ladder with the monotone-response bounds (default true).
    missing, monotone
        As for :func:`policy.decision.robust.uncertainty_set` and :func:`policy.decision.safe.safe_rule`.
    """
    reference = reference if reference is not None else optimal_rule(risk_levels, costs)
    sets = [uncertainty_set(risk_levels, cells, float(g)) for g in sorted(set(float(g) for g in gammas))]
    if bounds:
        sets.append(uncertainty_set(risk_levels, cells, bounds=True, missing=missing))
    w = risk_levels.weights
    rows = []
    for the_set in sets:
        robust = robust_rule(risk_levels, costs, the_set, constraints, settings=lp_settings, reference=reference)
        worst = worst_case_p(the_set)
        optimum_worst = rule_cost(reference.cell_delta, worst, w, costs)
        row = {"set": the_set.label, "gamma": the_set.gamma,
               "contradicted": bool(gamma_low == gamma_low and the_set.gamma < gamma_low),
               "optimum_cost_worst_case": 1000.0 * optimum_worst,
               "robust_cost_worst_case": 1000.0 * robust.worst_case_cost_per_case,
               "robust_cost_point": 1000.0 * robust.point_cost_per_case,
               "optimum_nearly_robust": bool(optimum_worst <= robust.worst_case_cost_per_case
                                             + NEARLY_ROBUST * abs(robust.worst_case_cost_per_case))}
        if baseline is not None:
            safe = safe_rule(risk_levels, costs, the_set, baseline, constraints, settings=lp_settings, monotone=monotone)
            regret = worst_case_regret(reference, baseline, risk_levels, costs, the_set, monotone).total
            tol = CERTIFY_TOLERANCE * max(1.0, safe.cost_scale)
            row.update({"optimum_regret_worst_case": 1000.0 * regret, "optimum_no_worse": bool(regret <= tol),
                        "safe_certified": safe.certified, "safe_guaranteed_saving": safe.guaranteed_improvement_per_1000,
                        "safe_cost_point": 1000.0 * rule_cost(safe.rule.cell_delta, risk_levels.p, w, costs)})
        shares = (w[:, None] * robust.rule.cell_delta).sum(axis=0) / float(w.sum())
        row.update({f"robust_share_{v}": float(s) for v, s in zip(risk_levels.level_values, shares)})
        rows.append(row)
    return DoubtLadder(pd.DataFrame(rows), reference.name, baseline.name if baseline is not None else "", costs.unit)


def ladder_for(found: Any, doubt: Any, check: Any, risk_levels: RiskLevels, cells: CellTable, costs: Costs,
               gammas: Sequence[float], constraints: Sequence[Any] = (), lp_settings: Any = None) -> DoubtLadder:
    """The ladder beside rules already solved under doubt (:class:`policy.decision.doubt.RulesUnderDoubt`):
    the same reference, baseline, constraints and monotonicity; ``gammas`` plus the Gamma of
    ``doubt`` and the arm check's Gamma_low (rounded up to 2 decimals) where it rejects."""
    low = float(check.gamma_lower) if check is not None and check.rejects else float("nan")
    values = [float(g) for g in gammas]
    if doubt.gamma is not None:
        values.append(float(doubt.gamma))
    if 1 < low < math.inf:
        values.append(gamma_low_rounded(low))
    baseline = found.safe.baseline if found.safe is not None else None
    return doubt_ladder(risk_levels, cells, costs, values, baseline, constraints, lp_settings, found.robust.reference,
                        low, True, doubt.missing, doubt.monotone)
