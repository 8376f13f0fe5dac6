"""Deciding: costs, rules, the unconstrained and constrained optima, and what a rule does.

Stage 3: from :class:`~policy.estimation.strata.RiskLevels` and the user's costs to a
:class:`~policy.decision.rules.Rule` (argmin per rule cell, or the linear program with
fairness, capacity and interpretability constraints) and its
:class:`~policy.decision.evaluate.Evaluation` (expected cost, rates and shares; the same
arithmetic that defines the optimum, so the constrained solver reports its rule's evaluation).

May import: ``policy.estimation``, ``policy.inputs`` and the shared modules.
"""
