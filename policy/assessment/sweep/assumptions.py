"""The assumptions behind each sweep figure: the point estimate, the sensitivity model at each
Gamma and the monotone-response bounds, in words."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from policy.estimation.bounds import RiskBounds
from policy.cautions import ASSUMPTIONS, assumptions_for


@dataclass(frozen=True)
class AssumptionInfo:
    """What a robust region assumes (a summary of :class:`policy.estimation.bounds.RiskBounds`)."""

    key: str
    label: str
    gamma: float
    figure: str
    assumptions: tuple[str, ...]

    @property
    def table_gamma(self) -> float:
        """Gamma as written in tables: empty (nan) for the monotone bounds, which have none."""
        return self.gamma if np.isfinite(self.gamma) else np.nan


def assumption_lines(figure: str, robust: Sequence[AssumptionInfo | RiskBounds]) -> list[str]:
    """Plain statements of what a sweep's curves assume: those common to every curve (the
    figure kind's, :data:`policy.cautions.FIGURE_ASSUMPTIONS`), then what each robust
    assumption adds, then the caution on individual decisions."""
    common = assumptions_for(figure)
    lines = ["Assumes, for every curve: " + "; ".join(common) + "."]
    for info in robust:
        if info.figure == "rule" and ASSUMPTIONS["unconfoundedness"] not in common:
            lines.append(f"{info.label}: {ASSUMPTIONS['unconfoundedness']}.")
    gammas = [info.label for info in robust if info.figure == "sensitivity"]
    if gammas:
        lines.append(f"{', '.join(gammas)}: {ASSUMPTIONS['sensitivity']}.")
    for info in robust:
        if info.figure == "bounds":
            lines.append(f"{info.label}: {ASSUMPTIONS['bounds']}.")
    lines.append("For analysis of release rules for groups of cases, never for a decision about an individual; "
                 "local law, due process and the court's discretion govern.")
    return lines


def _info(b: RiskBounds) -> AssumptionInfo:
    return AssumptionInfo(b.key, b.label, b.gamma, b.figure, tuple(b.assumptions) or tuple(assumptions_for(b.figure)))
