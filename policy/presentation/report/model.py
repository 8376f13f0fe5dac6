"""The report's data: sections, compared rules and the results a report is built from."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping


from policy.decision.evaluate import Evaluation, evaluate
from policy.running.pipeline import Analysis
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario


@dataclass(frozen=True)
class Bar:
    """One stacked bar: a label and (name, share, colour) segments; the numbers are in a table beside."""

    label: str
    segments: tuple[tuple[str, float, str], ...]


# ----------------------------------------------------------------------------------------------
# Sections
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Section:
    """One part of the report.

    Attributes
    ----------
    key : str
        The section's anchor (``id``) on the page.
    title : str
    template : str
        Template under ``policy/presentation/templates/`` that renders ``context``.
    context : mapping
        What the template shows, formatted from result objects.
    assumptions : tuple of str
        The assumptions the section's figures rest on (:mod:`policy.cautions`), shown beside them.
    files : mapping
        Tidy tables written beside ``report.html`` (name -> DataFrame or JSON object).
    """

    key: str
    title: str
    template: str
    context: Mapping[str, Any] = field(default_factory=dict)
    assumptions: tuple[str, ...] = ()
    files: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class ComparedRule:
    """A rule whose regret the live controls recompute.

    Attributes
    ----------
    rule : Rule
    evaluation : Evaluation
        Its evaluation at the report's starting costs, with regret against the cost-minimizing rule.
    note : str
        What the rule is, in a phrase.
    """

    rule: Rule
    evaluation: Evaluation
    note: str


@dataclass(frozen=True)
class ReportResults:
    """The result objects a report is assembled from.

    Only ``analysis`` is required; each later stage's result adds its sections when given.

    Attributes
    ----------
    analysis : Analysis
    compared : tuple of ComparedRule
        Rules scored against the cost-minimizing one, live on the page.
    constrained_sweeps : tuple of ConstrainedSweep
        The constrained optimum re-solved along each outcome cost's ratio
        (:mod:`policy.assessment.sweep.constrained`), shown at the point nearest the ratio chosen on the page.
    comparison : Comparison, optional
        The rules compared with intervals and the aid's effect (:func:`policy.assessment.compare.compare`).
    comparison_note : str
        Why there is no comparison, where there is none.
    sweeps : tuple of SweepResult
        One-ratio sweeps (:func:`policy.assessment.sweep.sweep_scenario`), with their robust lenient regions.
    lenient_map : SweepResult, optional
        A two-ratio lenient map.
    decision_costs : mapping, optional
        The decision-cost overrides the analysis was run with (flat costs, or
        :class:`policy.decision.costs.CostFactor` factors on per-cell costs), so that the page
        can state its starting costs as the command line that reproduces them.
    doubt_choice : DoubtChoice, optional
        The set and baseline of the rules that hold under doubt (:func:`policy.decision.doubt.chosen_doubt`)
        and why; the rules themselves are the comparison's ``under_doubt``.
    """

    analysis: Analysis
    compared: tuple[ComparedRule, ...] = ()
    constrained_sweeps: tuple[Any, ...] = ()
    comparison: Any = None
    comparison_note: str = ""
    sweeps: tuple[Any, ...] = ()
    lenient_map: Any = None
    decision_costs: Any = None
    doubt_choice: Any = None

    @property
    def scenario(self) -> Scenario:
        return self.analysis.scenario


def held_rule(analysis: Analysis) -> ComparedRule:
    """The cost-minimizing rule at the scenario's costs, as a rule compared while the costs move."""
    rule = analysis.rule
    return ComparedRule(rule, evaluate(rule, analysis.risk_levels, analysis.costs, reference=rule),
                        "the cost-minimizing rule at the scenario's own costs, held fixed while the costs move")
