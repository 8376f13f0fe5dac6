"""From a case table (or a counts table) to the validated cell table.

A *cell* is one combination of the cell covariates and protected attributes. Everything
downstream works on arrays over cells. The case table is aggregated in one vectorized pass:
every column is integer-coded, the codes are combined into one mixed-radix key per case, and a
single ``numpy.bincount`` counts cases per (cell, arm, decision level, recommended level,
outcome states), processed in chunks so memory stays bounded by the cell count.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.inputs.scenario import Scenario
from policy.inputs.counting import (
    BlockCounts,
    _cost_values,
    _counts_columns,
    _level_codes,
    _present_categories,
    code_cell_column,
    count_block,
)
from policy.inputs.tables import binary_states, describe_bad, require_columns


__all__ = ["CellLayout", "CellTable"]


# ----------------------------------------------------------------------------------------------
# Cell layout: which covariate values each cell has, and the roles of the columns
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CellLayout:
    """The covariate values of every cell and the roles of the columns.

    Attributes
    ----------
    frame : DataFrame of shape (n_cells, n_columns)
        One ordered categorical column per cell column.
    protected : tuple of str
        Protected attributes (also cell columns).
    rule_columns : tuple of str
        The columns a rule may use.
    score : str or None
        The cell column holding the risk aid's score or tier.
    """

    frame: pd.DataFrame
    protected: tuple[str, ...] = ()
    rule_columns: tuple[str, ...] = ()
    score: str | None = None

    @property
    def n_cells(self) -> int:
        return len(self.frame)

    @property
    def columns(self) -> tuple[str, ...]:
        return tuple(self.frame.columns)

    def codes(self, column: str) -> np.ndarray:
        """Integer codes (category positions) of one cell column, shape (n_cells,)."""
        return self.frame[column].cat.codes.to_numpy(dtype=np.int64)

    def categories(self, column: str) -> list:
        return list(self.frame[column].cat.categories)

    def group_by(self, columns: Sequence[str]) -> tuple[np.ndarray, pd.DataFrame]:
        """Group cells by some of their columns.

        Returns
        -------
        index : ndarray of shape (n_cells,)
            For each cell, the position of its group.
        groups : DataFrame of shape (n_groups, len(columns))
            The groups' values, in category order.
        """
        columns = list(columns)
        if not columns:
            return np.zeros(self.n_cells, dtype=np.int64), pd.DataFrame(index=pd.RangeIndex(1))
        sizes = [len(self.frame[c].cat.categories) for c in columns]
        key = np.ravel_multi_index([self.codes(c) for c in columns], sizes)
        uniq, index = np.unique(key, return_inverse=True)
        parts = np.unravel_index(uniq, sizes)
        groups = pd.DataFrame(
            {c: pd.Categorical.from_codes(p, dtype=self.frame[c].dtype) for c, p in zip(columns, parts)}
        )
        return index.astype(np.int64), groups

    def rule_index(self, columns: Sequence[str] | None = None) -> tuple[np.ndarray, pd.DataFrame]:
        """Rule cells: cells grouped by the rule covariates (or the columns given)."""
        return self.group_by(self.rule_columns if columns is None else columns)

    def take(self, rows: np.ndarray) -> "CellLayout":
        """The layout of a subset of cells."""
        return CellLayout(self.frame.iloc[rows].reset_index(drop=True), self.protected, self.rule_columns, self.score)


@dataclass(frozen=True)
class CellTable:
    """Counts per cell x arm x decision level (x outcome kind): the validated input of estimation.

    Attributes
    ----------
    layout : CellLayout
        What each cell is.
    levels : tuple of str
        Decision level values, most lenient first (length L).
    outcomes : tuple of str
        Outcome kind keys (length J).
    arms : tuple
        Arm values, ``(0, 1)`` for a randomized aid, ``(None,)`` without an arm column.
    cases : ndarray of shape (n_cells, n_arms, L)
        Number of cases.
    observed : ndarray of shape (n_cells, n_arms, J, L)
        Cases whose outcome of each kind was observed.
    events : ndarray of shape (n_cells, n_arms, J, L)
        Cases with the adverse outcome.
    recommended : ndarray of shape (n_cells, n_arms, L) or None
        Cases for which the aid recommended each level.
    cell_costs : dict of str to ndarray of shape (n_cells,)
        Mean per-case value of each cost column in each cell.
    source : str
        Where the counts came from.
    state_counts : ndarray of shape (n_cells, n_arms, L, 3**J) or None
        Cases per joint outcome state (per outcome kind: 0 missing, 1 no event, 2 event;
        outcome 0 is the most significant base-3 digit). Known when aggregated from cases;
        None for a counts table, which holds only the margins. Resampling cases (the
        bootstrap) needs it to keep outcome kinds of one case together.
    """

    layout: CellLayout
    levels: tuple[str, ...]
    outcomes: tuple[str, ...]
    arms: tuple
    cases: np.ndarray
    observed: np.ndarray
    events: np.ndarray
    recommended: np.ndarray | None = None
    cell_costs: Mapping[str, np.ndarray] = field(default_factory=dict)
    source: str = ""
    state_counts: np.ndarray | None = None

    # -- shapes and margins ------------------------------------------------------------------
    @property
    def n_cells(self) -> int:
        return self.layout.n_cells

    @property
    def weights(self) -> np.ndarray:
        """Cases per cell, shape (n_cells,)."""
        return self.cases.sum(axis=(1, 2))

    @property
    def n_cases(self) -> int:
        return int(self.cases.sum())

    @property
    def has_arm(self) -> bool:
        return self.arms != (None,)

    def sparse(self, below: int) -> np.ndarray:
        """Cells with fewer than ``below`` cases, shape (n_cells,) bool."""
        return self.weights < below

    def unobserved_levels(self) -> np.ndarray:
        """(n_cells, J, L) bool: the outcome was never observed at that level in the cell."""
        return self.observed.sum(axis=1) == 0

    # -- construction ------------------------------------------------------------------------
    @classmethod
    def from_cases(cls, frame: pd.DataFrame, scenario: Scenario, file: str | None = None) -> "CellTable":
        """Aggregate a case table (one row per case) into cells.

        Parameters
        ----------
        frame : DataFrame
            The case table with the columns the scenario names.
        scenario : Scenario
            Column mapping, decision levels, outcome kinds and cell columns.
        file : str, optional
            The table's name for messages (default: ``frame.attrs['file']``).
        """
        file = file or frame.attrs.get("file", "case table")
        block = count_block(frame, scenario, file, whole=True)
        return cls.from_block_counts(block, scenario, file)

    @classmethod
    def from_block_counts(cls, block: "BlockCounts", scenario: Scenario, file: str) -> "CellTable":
        """The cell table of a case table counted in one block (or in several, merged by
        :mod:`policy.inputs.stream`): cells ordered by their categories, margins, cost means."""
        if block.rows == 0:
            raise InputError(f"{file}: the case table has no rows.")
        for j, outcome in enumerate(scenario.outcomes):
            if not block.observed_any[j]:
                raise InputError(f"{file}: outcome column {outcome.column!r} ({outcome.label}) is empty in every row; nothing can be estimated for it.")
        categories, order = _present_categories(block.uniques, block.codes, scenario, file)
        arms: tuple = (0, 1) if scenario.arm is not None else (None,)
        table = cls._from_counts_array(block.counts[order], categories, scenario, arms, scenario.aid.recommendation is not None,
                                       {c: v[order] for c, v in block.cost_sums.items()}, f"case table {file}")
        _check_structural_zeros(table, scenario, file)
        return table

    @classmethod
    def _from_counts_array(cls, counts, categories, scenario, arms, has_rec, cost_sums, source) -> "CellTable":
        # counts: (n_cells, A, L, R, 3**J) -> margins; categories: column -> (values, codes per cell)
        J, L = len(scenario.outcomes), len(scenario.levels)
        n_cells = counts.shape[0]
        by_state = counts.reshape(counts.shape[:4] + (3,) * J)
        cases = counts.sum(axis=(3, 4))
        recommended = counts.sum(axis=(2, 4)) if has_rec else None
        base = by_state.sum(axis=3)  # drop recommendation: (n, A, L, 3, ..., 3)
        observed = np.empty((n_cells, len(arms), J, L), dtype=np.int64)
        events = np.empty_like(observed)
        for j in range(J):
            other = tuple(3 + k for k in range(J) if k != j)
            per_state = base.sum(axis=other) if other else base  # (n, A, L, 3)
            observed[:, :, j, :] = per_state[..., 1] + per_state[..., 2]
            events[:, :, j, :] = per_state[..., 2]
        frame = pd.DataFrame({
            c: pd.Categorical.from_codes(codes, categories=values, ordered=True)
            for c, (values, codes) in categories.items()
        })
        w = cases.sum(axis=(1, 2))
        cell_costs = {col: s / w for col, s in cost_sums.items()}
        layout = CellLayout(frame, scenario.protected, scenario.rule_covariates, scenario.aid.score)
        return cls(layout, scenario.level_values, scenario.outcome_keys, arms, cases, observed, events,
                   recommended, cell_costs, source, state_counts=counts.sum(axis=3))

    @classmethod
    def from_counts(cls, frame: pd.DataFrame, scenario: Scenario, file: str | None = None) -> "CellTable":
        """Read an aggregated counts table: one row per cell x arm x decision level.

        Columns: the cell columns, the arm column (if the scenario has one), the decision
        column, ``cases``, ``observed_<key>`` and ``events_<key>`` for every outcome kind,
        ``recommended`` (cases for which the aid recommended this row's level, if the scenario
        names a recommendation column) and each cost column (the mean per-case cost of the
        rows' cases). Rows with the same cell, arm and level are added together.
        """
        file = file or frame.attrs.get("file", "counts table")
        typed = frame.attrs.get("format") == "parquet"
        needed = list(_counts_columns(scenario))
        require_columns(frame.columns, needed, file, f"a counts table for {scenario.file}")
        if len(frame) == 0:
            raise InputError(f"{file}: the counts table has no rows.")
        count_cols = [c for c in needed if c == "cases" or c == "recommended" or c.startswith(("observed_", "events_"))]
        numbers = {}
        for col in count_cols:
            values = pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=np.float64)
            bad = ~np.isfinite(values) | (values < 0) | (values != np.round(values))
            if bad.any():
                text, k, first = describe_bad(frame[col].to_numpy(dtype=object), bad)
                raise InputError(f"{file}: column {col!r} must hold whole numbers >= 0; got {text} in {k} rows (first: row {first}).")
            numbers[col] = values.astype(np.int64)
        for o in scenario.outcomes:
            obs, ev = numbers[f"observed_{o.key}"], numbers[f"events_{o.key}"]
            for bad, text in ((ev > obs, f"events_{o.key} > observed_{o.key}"), (obs > numbers["cases"], f"observed_{o.key} > cases")):
                if bad.any():
                    rows = np.flatnonzero(bad)
                    raise InputError(f"{file}: {text} in {len(rows)} rows (first: row {rows[0] + 1}); counts must nest.")
        cell_codes, categories = [], {}
        if scenario.bins:
            from policy.inputs.bins import apply_bins

            frame = apply_bins(frame, scenario.bins, file)
        for col in scenario.cell_columns:
            codes, cats = code_cell_column(frame[col], col, file, scenario.order.get(col),
                                           col in scenario.rule_covariates or col == scenario.aid.score)
            cell_codes.append(codes)
            categories[col] = cats
        level_codes = _level_codes(frame[scenario.decision], scenario, scenario.decision, file)
        if scenario.arm is not None:
            arm_codes = binary_states(frame[scenario.arm], scenario.arm, file, allow_missing=False, typed=typed) - 1
            arms: tuple = (0, 1)
        else:
            arm_codes, arms = np.zeros(len(frame), dtype=np.int8), (None,)
        sizes = [len(categories[c]) for c in scenario.cell_columns]
        key_cells = np.ravel_multi_index(cell_codes, sizes)
        cell_ids, cell_pos = np.unique(key_cells, return_inverse=True)
        A, L = len(arms), len(scenario.levels)
        n_cells = len(cell_ids)
        flat = (cell_pos * A + arm_codes) * L + level_codes
        size = n_cells * A * L

        def add(values):
            return np.bincount(flat, weights=values, minlength=size).round().astype(np.int64).reshape(n_cells, A, L)

        cases = add(numbers["cases"])
        observed = np.stack([add(numbers[f"observed_{o.key}"]) for o in scenario.outcomes], axis=2)
        events = np.stack([add(numbers[f"events_{o.key}"]) for o in scenario.outcomes], axis=2)
        recommended = add(numbers["recommended"]) if "recommended" in numbers else None
        cost_sums = {}
        for col in scenario.cost_columns:
            values = _cost_values(frame[col], col, file)
            cost_sums[col] = np.bincount(cell_pos, weights=values * numbers["cases"], minlength=n_cells)
        w = cases.sum(axis=(1, 2))
        if (w == 0).any():
            empty = np.flatnonzero(w == 0)
            i = int(empty[0])
            row = int(np.flatnonzero(cell_pos == i)[0])
            where = ", ".join(f"{c}={frame[c].iloc[row]}" for c in scenario.cell_columns)
            raise InputError(f"{file}: {len(empty)} cells have rows but no cases (first: {where}, row {row + 1}); "
                             "remove rows with cases = 0 only.")
        parts = np.unravel_index(cell_ids, sizes)
        cells = pd.DataFrame({
            c: pd.Categorical.from_codes(p.astype(np.int64), categories=categories[c], ordered=True)
            for c, p in zip(scenario.cell_columns, parts)
        })
        layout = CellLayout(cells, scenario.protected, scenario.rule_covariates, scenario.aid.score)
        table = cls(layout, scenario.level_values, scenario.outcome_keys, arms, cases, observed, events,
                    recommended, {c: s / w for c, s in cost_sums.items()}, f"counts table {file}")
        _check_structural_zeros(table, scenario, file)
        return table

    def to_frame(self) -> pd.DataFrame:
        """The counts table: one row per cell x arm x decision level with cases > 0 (or with
        cases the aid recommended that level for).

        Reading it back with :meth:`from_counts` gives the same cell table.
        """
        n, A, L = self.cases.shape
        idx_cell, idx_arm, idx_level = np.unravel_index(np.arange(n * A * L), (n, A, L))
        keep = self.cases.reshape(-1) > 0
        if self.recommended is not None:
            keep |= self.recommended.reshape(-1) > 0
        out = self.layout.frame.iloc[idx_cell[keep]].reset_index(drop=True).copy()
        for c in out.columns:
            out[c] = out[c].astype(object)
        if self.has_arm:
            out["arm"] = np.asarray(self.arms)[idx_arm[keep]]
        out["decision"] = np.asarray(self.levels, dtype=object)[idx_level[keep]]
        out["cases"] = self.cases.reshape(-1)[keep]
        if self.recommended is not None:
            out["recommended"] = self.recommended.reshape(-1)[keep]
        for j, key in enumerate(self.outcomes):
            out[f"observed_{key}"] = self.observed[:, :, j, :].reshape(-1)[keep]
            out[f"events_{key}"] = self.events[:, :, j, :].reshape(-1)[keep]
        for col, values in self.cell_costs.items():
            out[col] = values[idx_cell[keep]]
        return out

    def counts_frame(self, scenario: Scenario) -> pd.DataFrame:
        """:meth:`to_frame` with the scenario's own names for the arm and decision columns."""
        frame = self.to_frame()
        names = {"decision": scenario.decision}
        if scenario.arm is not None:
            names["arm"] = scenario.arm
        return frame.rename(columns=names)

    # -- presentation ------------------------------------------------------------------------
    def summary(self, sparse_below: int = 20) -> dict[str, Any]:
        """Counts a reader needs before trusting estimates: cases, cells, sparse cells, gaps."""
        unobserved = self.unobserved_levels()
        w = self.weights
        return {
            "source": self.source,
            "cases": self.n_cases,
            "cells": self.n_cells,
            "arms": [a for a in self.arms if a is not None],
            "cases_per_arm": {str(a): int(self.cases[:, i].sum()) for i, a in enumerate(self.arms)},
            "cases_per_level": dict(zip(self.levels, self.cases.sum(axis=(0, 1)).tolist())),
            "sparse_below": sparse_below,
            "sparse_cells": int((w < sparse_below).sum()),
            "cases_in_sparse_cells": int(w[w < sparse_below].sum()),
            "median_cases_per_cell": float(np.median(w)),
            "cell_levels_never_observed": {
                key: int(unobserved[:, j, :].sum()) for j, key in enumerate(self.outcomes)
            },
            "outcome_observed_share": {
                key: float(self.observed[:, :, j, :].sum() / max(self.n_cases, 1)) for j, key in enumerate(self.outcomes)
            },
        }

    def __str__(self) -> str:
        s = self.summary()
        return (
            f"Cell table from {s['source']}: {s['cases']:,} cases in {s['cells']:,} cells, "
            f"{s['sparse_cells']:,} cells with fewer than {s['sparse_below']} cases."
        )


def _check_structural_zeros(table: CellTable, scenario: Scenario, file: str) -> None:
    for j, o in enumerate(scenario.outcomes):
        if o.impossible_from is None:
            continue
        ev = int(table.events[:, :, j, o.impossible_from:].sum())
        if ev:
            raise InputError(
                f"{file}: outcome {o.key!r} is declared impossible from level {scenario.levels[o.impossible_from].value!r} "
                f"on (impossible_from in {scenario.file}), but the data hold {ev} such events there."
            )
