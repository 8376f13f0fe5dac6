"""Assessing rules: comparisons, bootstrap uncertainty and cost-ratio sweeps.

Stage 4: scores many rules under the same risk levels (the optimum, candidates, what courts
did), resamples to give intervals, and sweeps cost ratios exactly. Results are objects with
tables; figures are drawn by ``policy.presentation`` from them.

May import: ``policy.decision``, ``policy.estimation``, ``policy.inputs`` and the shared modules.
"""
