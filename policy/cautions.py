"""The cautions every output shows, and the assumptions each kind of figure rests on."""

from __future__ import annotations

__all__ = ["CAUTIONS", "ASSUMPTIONS", "assumptions_for"]

CAUTIONS: tuple[str, ...] = (
    "This analysis compares release rules for groups of cases. It is not an assessment of any "
    "individual and must not be used to decide any one person's release.",
    "Pretrial liberty is at stake. Release law, due process and equal-protection rules, and the "
    "court's discretion govern; defer to local law and licensed counsel.",
    "Every figure rests on stated assumptions (listed beside it); costs are value judgments "
    "that the people accountable for the rule must set and own.",
)

ASSUMPTIONS: dict[str, str] = {
    "monotonicity": "monotonicity: a harsher decision never makes an adverse outcome more likely for the same person",
    "unconfoundedness": "unconfoundedness given the cell: within a cell, the decision is independent of the potential outcomes",
    "exclusion": "exclusion restriction: showing the aid changes outcomes only through the decision",
    "randomized_arm": "the aid was shown or withheld at random",
    "costs": "the cost weights of the scenario (value judgments), in its stated unit",
    "sensitivity": "within a cell, unmeasured factors change the odds of the outcome between cases given different decisions by at most the stated factor Gamma",
    "bounds": "monotonicity only (no unconfoundedness): the bounds hold for every confounding story consistent with the data",
    "swept_costs": "the swept cost takes every value in the range shown; every other cost stays at the scenario's value (value judgments), in its stated unit",
}

#: which assumptions each kind of figure needs
FIGURE_ASSUMPTIONS: dict[str, tuple[str, ...]] = {
    "risk_levels": ("monotonicity", "unconfoundedness"),
    "rule": ("monotonicity", "unconfoundedness", "costs"),
    "evaluation": ("monotonicity", "unconfoundedness", "costs"),
    "observed_rule": ("monotonicity", "unconfoundedness", "costs"),
    "aid_effect": ("monotonicity", "unconfoundedness", "exclusion", "randomized_arm"),
    "bounds": ("bounds", "costs"),
    "sensitivity": ("monotonicity", "sensitivity", "costs"),
    "sweep": ("monotonicity", "unconfoundedness", "swept_costs"),
    "robust_sweep": ("monotonicity", "swept_costs"),
}


def assumptions_for(figure: str) -> list[str]:
    """Plain statements of the assumptions a kind of figure rests on."""
    return [ASSUMPTIONS[key] for key in FIGURE_ASSUMPTIONS[figure]]
