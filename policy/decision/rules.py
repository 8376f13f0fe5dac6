"""Release rules: decision probabilities delta(d | rule cell), deterministic or randomized.

A rule assigns each rule cell g a distribution over decision levels. Every rule that the tool
scores (an optimum, the aid's recommendation, a committee's candidate, what courts actually did)
is a :class:`Rule`, so one evaluation serves them all.
"""

from __future__ import annotations

import html
from dataclasses import dataclass

import numpy as np
import pandas as pd

from policy.inputs.cells import CellLayout

__all__ = ["Rule"]

#: a rule cell whose largest decision probability is below this is reported as split
SPLIT_TOLERANCE = 1e-6


@dataclass(frozen=True)
class Rule:
    """Decision probabilities per rule cell.

    Attributes
    ----------
    name : str
        How the rule is called in outputs.
    kind : str
        'optimal', 'constrained', 'observed', 'aid', 'candidate'.
    rule_cells : DataFrame of shape (n_rule_cells, n_rule_columns)
        The values of the rule's columns in each rule cell.
    index : ndarray of shape (n_cells,)
        The rule cell of each cell.
    delta : ndarray of shape (n_rule_cells, L)
        Decision probabilities; rows sum to 1.
    level_values, level_labels : tuple of str
        Decision levels, most lenient first.
    weights : ndarray of shape (n_rule_cells,)
        Cases in each rule cell (for presentation).
    """

    name: str
    kind: str
    rule_cells: pd.DataFrame
    index: np.ndarray
    delta: np.ndarray
    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    weights: np.ndarray | None = None
    note: str = ""

    @property
    def n_rule_cells(self) -> int:
        return self.delta.shape[0]

    @property
    def cell_delta(self) -> np.ndarray:
        """Decision probabilities of every cell, shape (n_cells, L)."""
        return self.delta[self.index]

    @property
    def is_deterministic(self) -> bool:
        return bool((self.delta.max(axis=1) > 1 - SPLIT_TOLERANCE).all())

    @property
    def split_cells(self) -> np.ndarray:
        """Positions of rule cells split between levels (a randomized rule)."""
        return np.flatnonzero(self.delta.max(axis=1) <= 1 - SPLIT_TOLERANCE)

    @property
    def level(self) -> np.ndarray:
        """Most probable level of each rule cell (ties to the more lenient), shape (n_rule_cells,)."""
        return np.argmax(self.delta >= self.delta.max(axis=1, keepdims=True) - SPLIT_TOLERANCE, axis=1)

    @classmethod
    def from_levels(cls, name: str, kind: str, layout: CellLayout, columns, levels: np.ndarray,
                    level_values, level_labels, weights: np.ndarray | None = None, note: str = "") -> "Rule":
        """A deterministic rule: one level per rule cell of ``layout.group_by(columns)``."""
        index, groups = layout.group_by(columns)
        levels = np.asarray(levels, dtype=np.int64)
        delta = np.zeros((len(groups), len(level_values)))
        delta[np.arange(len(groups)), levels] = 1.0
        w = None if weights is None else np.bincount(index, weights=weights, minlength=len(groups))
        return cls(name, kind, groups, index, delta, tuple(level_values), tuple(level_labels), w, note)

    @classmethod
    def per_cell(cls, name: str, kind: str, layout: CellLayout, delta: np.ndarray,
                 level_values, level_labels, weights: np.ndarray | None = None, note: str = "") -> "Rule":
        """A rule given for every cell (rule cells = cells), e.g. an observed decision distribution."""
        delta = np.asarray(delta, dtype=np.float64)
        return cls(name, kind, layout.frame.copy(), np.arange(layout.n_cells), delta,
                   tuple(level_values), tuple(level_labels), weights, note)

    # -- presentation ------------------------------------------------------------------------
    def to_frame(self) -> pd.DataFrame:
        """One row per rule cell: its columns, ``level`` (most probable level's label),
        ``split`` (true where the rule randomizes), ``share_<level>`` and ``cases``."""
        out = self.rule_cells.reset_index(drop=True).copy()
        for c in out.columns:
            out[c] = out[c].astype(object)
        out["level"] = np.asarray(self.level_labels, dtype=object)[self.level]
        out["split"] = self.delta.max(axis=1) <= 1 - SPLIT_TOLERANCE
        for d, value in enumerate(self.level_values):
            out[f"share_{value}"] = self.delta[:, d]
        if self.weights is not None:
            out["cases"] = self.weights
        return out

    def summary(self) -> pd.DataFrame:
        """Rule cells by level: a compact table for reading."""
        return self.to_frame()

    def __str__(self) -> str:
        frame = self.to_frame()
        cols = list(self.rule_cells.columns)
        lines = [f"{self.name} ({self.n_rule_cells} rule cells by {', '.join(cols) or 'nothing'}):"]
        shown = frame[cols + ["level"] + (["cases"] if "cases" in frame else [])]
        lines.append(shown.to_string(index=False, max_rows=60))
        split = self.split_cells
        if len(split):
            lines.append(f"{len(split)} rule cells are split between levels (a randomized rule); see share_* columns.")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return f"<p><b>{html.escape(self.name)}</b></p>" + self.to_frame().to_html(index=False)
