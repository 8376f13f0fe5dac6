"""The swept ratio: its axis, the cost lines of each rule cell and the default ranges."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import pandas as pd

from policy.decision.costs import Costs
from policy.errors import InputError
from policy.estimation.bounds_table import SENSITIVITY_GAMMAS
from policy.estimation.strata import RiskLevels


#: relative tolerance under which two crossings of lines count as one point
CONCURRENT_TOLERANCE = 1e-9
#: Gamma values of the robust regions when none are given: from slight confounding to odds that
#: differ five-fold, beyond which the intervals are close to the monotone-response bounds that
#: follow them. With a randomized arm the sweep adds the data's own lower bound Gamma_low
#: (policy.estimation.arm_check) to these.
DEFAULT_GAMMAS = SENSITIVITY_GAMMAS
SCALES = ("linear", "log")


# ----------------------------------------------------------------------------------------------
# The swept ratio
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RatioAxis:
    """One swept cost: outcome kind j's cost as a ratio to a reference decision cost.

    Attributes
    ----------
    outcome, outcome_index, outcome_label : str, int, str
        The swept outcome kind.
    reference_level, reference_label : int, str
        The decision level whose mean cost is the denominator.
    reference_cost : float
        c_ref = sum_x w(x) c_dec(ref, x) / sum_x w(x), in ``unit``.
    unit : str
    scenario_ratio : float
        The scenario's own cost of the outcome over c_ref.
    """

    outcome: str
    outcome_index: int
    outcome_label: str
    reference_level: int
    reference_label: str
    reference_cost: float
    unit: str
    scenario_ratio: float

    @property
    def title(self) -> str:
        """Axis title: what the ratio divides by what."""
        return f"cost of one {self.outcome_label} / mean cost of {self.reference_label}"

    @property
    def cost_title(self) -> str:
        return f"cost of one {self.outcome_label}, {self.unit}" if self.unit else f"cost of one {self.outcome_label}"

    def describe(self) -> dict[str, Any]:
        return {
            "outcome": self.outcome,
            "outcome_label": self.outcome_label,
            "reference_level": self.reference_label,
            "reference_cost": self.reference_cost,
            "unit": self.unit,
            "scenario_ratio": self.scenario_ratio,
            "definition": (f"ratio = cost of one {self.outcome_label} / {self.reference_cost:.6g} {self.unit}, the "
                           f"case-weighted mean cost of {self.reference_label}"),
        }


def ratio_axis(risk_levels: RiskLevels, costs: Costs, outcome: str, per: str | None = None) -> RatioAxis:
    """The swept ratio of one outcome kind's cost to a reference decision level's mean cost.

    Parameters
    ----------
    risk_levels : RiskLevels
        Supplies the cells' weights.
    costs : Costs
        The scenario's costs (the decision costs per cell give the reference cost).
    outcome : str
        Outcome key or label.
    per : str, optional
        Reference decision level (value or label); default the harshest.
    """
    keys, labels = risk_levels.outcome_keys, risk_levels.outcome_labels
    values, level_labels = risk_levels.level_values, risk_levels.level_labels
    j = _position(outcome, keys, labels, "ratio", "an outcome kind of the scenario")
    ref = len(values) - 1 if per is None else _position(per, values, level_labels, "reference level", "a decision level")
    w = risk_levels.weights
    c_ref = float(np.sum(w * costs.decision[:, ref]) / np.sum(w))
    if not c_ref > 0:
        raise InputError(
            f"the mean cost of decision level {values[ref]!r} is {c_ref:g}; a ratio needs a reference level "
            "whose cost is above 0 (choose another with --per)."
        )
    return RatioAxis(keys[j], j, labels[j], ref, level_labels[ref], c_ref, costs.unit,
                     float(costs.outcome[j]) / c_ref)


def _position(name: str, keys: Sequence[str], labels: Sequence[str], what: str, kind: str) -> int:
    """Position of ``name`` among keys (or, failing that, labels); a clear error otherwise."""
    for names in (keys, labels):
        if name in names:
            return list(names).index(name)
    raise InputError(f"{what} {name!r} is not {kind}; expected one of: {', '.join(keys)}.")


def cost_lines(risk_levels: RiskLevels, costs: Costs, axes: Sequence[RatioAxis]) -> tuple[np.ndarray, np.ndarray]:
    """Per-case expected cost as an affine function of the swept ratios.

    Returns
    -------
    base : ndarray of shape (n_cells, L)
        c_dec(d, x) + sum over outcome kinds not swept of c_k p_kd(x).
    slope : ndarray of shape (n_axes, n_cells, L)
        c_ref p_jd(x) for each swept outcome j: C(d, x; r) = base + sum_a r_a slope[a].
    """
    swept = [a.outcome_index for a in axes]
    if len(set(swept)) != len(swept):
        raise InputError("each ratio must sweep a different outcome kind.")
    fixed = costs.outcome.astype(np.float64).copy()
    fixed[swept] = 0.0
    base = costs.decision + np.matmul(fixed, risk_levels.p)
    slope = np.stack([a.reference_cost * risk_levels.p[:, a.outcome_index, :] for a in axes])
    return base, slope


def _check_range(lo: float, hi: float, scale: str, what: str = "range") -> None:
    if scale not in SCALES:
        raise InputError(f"scale must be one of {', '.join(SCALES)}; got {scale!r}.")
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise InputError(f"the {what} must be two finite numbers, low < high; got {lo!r} to {hi!r}.")
    if lo < 0:
        raise InputError(f"the {what} starts at {lo!r}; a cost ratio cannot be negative.")
    if scale == "log" and lo <= 0:
        raise InputError(f"a log scale needs a {what} above 0; got {lo!r} to {hi!r}.")


def default_range(axis: RatioAxis, scale: str) -> tuple[float, float]:
    """The range shown when none is given: 0 to 4x the scenario's ratio (linear), or the
    scenario's ratio divided and multiplied by 20 (log)."""
    r = axis.scenario_ratio
    if not r > 0:
        raise InputError(f"the scenario's cost of {axis.outcome_label} is 0, so no default range follows from it; give one.")
    return (r / 20.0, r * 20.0) if scale == "log" else (0.0, 4.0 * r)


def _rule_cells(risk_levels: RiskLevels, columns: Sequence[str] | None) -> tuple[np.ndarray, pd.DataFrame, np.ndarray]:
    index, groups = risk_levels.layout.rule_index(columns)
    weights = np.bincount(index, weights=risk_levels.weights, minlength=len(groups))
    return index, groups, weights


def _plain_groups(groups: pd.DataFrame) -> pd.DataFrame:
    out = groups.reset_index(drop=True).copy()
    for c in out.columns:
        out[c] = out[c].astype(object)
    return out
