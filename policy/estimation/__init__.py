"""Estimating risk levels (principal strata) and their bounds from a cell table.

Stage 2: takes a :class:`~policy.inputs.cells.CellTable` (or a risk-level table read from a
file) and returns :class:`~policy.estimation.strata.RiskLevels`; the monotone-response and
sensitivity bounds live here too.

May import: ``policy.inputs`` and the shared modules. Nothing from a later stage.
"""
