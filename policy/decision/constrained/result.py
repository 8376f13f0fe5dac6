"""The constrained optimal rule as a result object: its split rule cells, evaluation, prices and files."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from policy.cautions import CAUTIONS, assumptions_for
from policy.decision.constraints import (
    ConstraintSpec,
)
from policy.decision.evaluate import Evaluation
from policy.decision.rules import SPLIT_TOLERANCE, Rule
from policy.decision.constrained.program import LPSolution


@dataclass(frozen=True)
class ConstrainedRule:
    """A constrained optimal rule with its price and what each constraint costs.

    Attributes
    ----------
    rule : Rule
        Kind ``'constrained'``; on the rule columns without attributes a group-blind constraint
        removed. Rule cells split between levels are a randomized rule (see :attr:`split`).
    evaluation : Evaluation
        The rule scored under the risk levels; its regret is the price against the
        unconstrained optimum.
    unconstrained : Rule
        The unconstrained optimum on the same rule columns (the foundation's argmin rule).
    unconstrained_evaluation : Evaluation
    constraints : DataFrame
        One row per constraint (see :meth:`to_frame`).
    specs : tuple of ConstraintSpec
    lp : LPSolution
    unit : str
    notes : tuple of str
    """

    rule: Rule
    evaluation: Evaluation
    unconstrained: Rule
    unconstrained_evaluation: Evaluation
    constraints: pd.DataFrame
    specs: tuple[ConstraintSpec, ...]
    lp: LPSolution
    unit: str
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def cost_per_case(self) -> float:
        return self.evaluation.cost_per_case

    @property
    def price_per_case(self) -> float:
        """Expected cost per case above the unconstrained optimum."""
        return self.evaluation.cost_per_case - self.unconstrained_evaluation.cost_per_case

    @property
    def price_per_1000(self) -> float:
        return 1000.0 * self.price_per_case

    @property
    def split(self) -> pd.DataFrame:
        """Rule cells the optimum splits between levels, with the share of cases given each level."""
        frame = self.rule.to_frame()
        return frame[frame["split"]].reset_index(drop=True)

    def to_frame(self) -> pd.DataFrame:
        """The constraint table: constraint, kind, arguments, bound_key, bound, unit, rows, value, slack,
        binding, dual, dual_per_1000, saving_per_point_per_1000, saving_if_removed_per_1000,
        binding_rows, note (documented in docs/outputs.md)."""
        return self.constraints.copy()

    def overview(self) -> dict[str, Any]:
        """Headline figures as a flat dict."""
        return {
            "rule": self.rule.name,
            "unit": self.unit,
            "cost_per_case": self.cost_per_case,
            "cost_per_1000_cases": 1000.0 * self.cost_per_case,
            "unconstrained_cost_per_case": self.unconstrained_evaluation.cost_per_case,
            "unconstrained_cost_per_1000_cases": 1000.0 * self.unconstrained_evaluation.cost_per_case,
            "price_per_case": self.price_per_case,
            "price_per_1000_cases": self.price_per_1000,
            "split_rule_cells": int(len(self.rule.split_cells)),
            "cases_in_split_rule_cells": float(self.split["cases"].sum()) if "cases" in self.split else 0.0,
            "solver": self.lp.solver,
            "solver_status": self.lp.status,
            "solver_iterations": self.lp.iterations,
            "most_lenient_of_ties": self.lp.lenient_pass,
        }

    def summary(self) -> str:
        return str(self)

    def __str__(self) -> str:
        lines = [
            f"{self.rule.name}: expected cost {1000 * self.cost_per_case:,.0f} {self.unit} per 1,000 cases",
            f"  price of the constraints: {self.price_per_1000:,.0f} per 1,000 cases ({self.price_per_case:,.2f} per case) "
            f"above the unconstrained optimum ({1000 * self.unconstrained_evaluation.cost_per_case:,.0f})",
        ]
        for _, row in self.constraints.iterrows():
            bound = "" if row["kind"] == "group_blind" else f" {row['bound_key']} {row['bound']:g};"
            state = "binds" if row["binding"] else "does not bind"
            step = "1% of the cases" if row["bound_key"] == "max_cases" else "one point (0.01)"
            text = f"  - {row['constraint']}:{bound} {state}"
            if np.isfinite(row["value"]):
                text += f" (reached {row['value']:.4g})"
            if np.isfinite(row["saving_per_point_per_1000"]) and row["kind"] != "group_blind":
                text += f"; loosening it by {step} saves {row['saving_per_point_per_1000']:,.0f} per 1,000 cases"
            if np.isfinite(row["saving_if_removed_per_1000"]):
                text += f"; removing it saves {row['saving_if_removed_per_1000']:,.0f} per 1,000 cases"
            lines.append(text)
        split = self.split
        if len(split):
            lines.append(f"  {len(split)} rule cells are split between levels (a randomized rule):")
            share_cols = [c for c in split.columns if c.startswith("share_")]
            cols = list(self.rule.rule_cells.columns)
            for _, row in split.iterrows():
                where = ", ".join(f"{c}={row[c]}" for c in cols)
                shares = ", ".join(f"{lab} {row[c]:.1%}" for lab, c in zip(self.rule.level_labels, share_cols) if row[c] > SPLIT_TOLERANCE)
                lines.append(f"    {where}: {shares}")
        else:
            lines.append("  every rule cell gets one decision level (no randomization).")
        lines.extend(f"  note: {n}" for n in self.notes)
        lines.append(str(self.evaluation))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        text = str(self).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
        return f"<pre>{text}</pre>" + self.constraints.to_html(index=False) + self.rule._repr_html_()

    def output_files(self) -> dict[str, Any]:
        """The files of a constrained solve (documented in docs/outputs.md)."""
        return {
            "constrained_rule.csv": self.rule.to_frame(),
            "constraints.csv": self.to_frame(),
            "constrained_by_group.csv": self.evaluation.by_group(),
            "constrained_within_risk_levels.csv": self.evaluation.within_risk_levels(),
            "constrained_fairness_gaps.csv": self.evaluation.fairness_gaps(),
            "constrained_evaluation.json": {
                "overview": self.overview(),
                "evaluation": self.evaluation.overview(),
                "constraints": [s.describe() for s in self.specs],
                "split_rule_cells": self.split.to_dict(orient="records"),
                "notes": list(self.notes),
                "assumptions": assumptions_for("rule"),
                "cautions": list(CAUTIONS),
            },
        }
