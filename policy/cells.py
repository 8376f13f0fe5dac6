"""From a case table (or a counts table) to the validated cell table.

A *cell* is one combination of the cell covariates and protected attributes. Everything
downstream works on arrays over cells. The case table is aggregated in one vectorized pass:
every column is integer-coded, the codes are combined into one mixed-radix key per case, and a
single ``numpy.bincount`` counts cases per (cell, arm, decision level, recommended level,
outcome states), processed in chunks so memory stays bounded by the cell count.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from .errors import InputError
from .scenario import Scenario
from .tables import binary_states, describe_bad, read_table, require_columns

__all__ = ["CellLayout", "CellTable", "load_cell_table", "aggregate_codes"]

#: rows per chunk of the aggregation pass (bounds the temporary key array)
CHUNK_ROWS = 1 << 21
#: largest key space counted with one dense bincount; beyond it keys are sorted and merged
DENSE_KEYS = 1 << 22


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


def _ordered_categories(uniques: Sequence, declared: Sequence | None, column: str, file: str) -> list:
    if declared is None:
        try:
            return sorted(uniques)
        except TypeError:
            return sorted(uniques, key=str)
    declared_text = [str(v) for v in declared]
    out = []
    for value in uniques:
        if str(value) not in declared_text:
            raise InputError(
                f"{file}: column {column!r} has value {value!r}, which [cells] order.{column} does not list; "
                f"expected one of: {', '.join(declared_text)}."
            )
    by_text = {str(v): v for v in uniques}
    for text in declared_text:
        if text in by_text:
            out.append(by_text[text])
    return out


def code_cell_column(series: pd.Series, column: str, file: str, declared: Sequence | None) -> tuple[np.ndarray, list]:
    """Integer codes 0..n-1 for a cell column and its ordered categories (present values only)."""
    if series.hasnans:
        missing = series.isna().to_numpy()
        rows = np.flatnonzero(missing)
        raise InputError(
            f"{file}: cell column {column!r} is empty in {len(rows)} rows (first: row {rows[0] + 1}); "
            "cell columns must be complete."
        )
    values = series.to_numpy() if not isinstance(series.dtype, pd.CategoricalDtype) else None
    if values is not None and values.dtype.kind in "iub":
        # small integer codes: use the values themselves (no hashing), then keep present ones
        lo, hi = int(values.min()), int(values.max())
        if hi - lo < (1 << 16):
            raw = (values - values.dtype.type(lo)) if lo else values
            present = np.flatnonzero(np.bincount(raw.astype(np.intp, copy=False), minlength=hi - lo + 1))
            cats = _ordered_categories([v + lo for v in present.tolist()], declared, column, file)
            lookup = np.full(hi - lo + 1, -1, dtype=np.int32)
            lookup[np.asarray(cats, dtype=np.int64) - lo] = np.arange(len(cats), dtype=np.int32)
            return lookup[raw], cats
    codes, uniques = pd.factorize(series, sort=False)
    uniques = list(uniques)
    cats = _ordered_categories(uniques, declared, column, file)
    position = {v: i for i, v in enumerate(cats)}
    remap = np.array([position[v] for v in uniques], dtype=np.int32)
    return remap[codes], cats


# ----------------------------------------------------------------------------------------------
# The cell table
# ----------------------------------------------------------------------------------------------
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
        typed = frame.attrs.get("format") == "parquet"
        require_columns(frame.columns, _case_columns(scenario), file, f"named in {scenario.file}")
        n = len(frame)
        if n == 0:
            raise InputError(f"{file}: the case table has no rows.")
        if scenario.case_id is not None:
            _check_unique_ids(frame[scenario.case_id], scenario.case_id, file)

        cell_codes, categories = [], {}
        for col in scenario.cell_columns:
            codes, cats = code_cell_column(frame[col], col, file, scenario.order.get(col))
            cell_codes.append(codes)
            categories[col] = cats
        level_codes = _level_codes(frame[scenario.decision], scenario, scenario.decision, file, typed)
        if scenario.arm is not None:
            arm_codes = binary_states(frame[scenario.arm], scenario.arm, file, allow_missing=False, typed=typed) - 1
            arms: tuple = (0, 1)
        else:
            arm_codes, arms = None, (None,)
        rec_codes = None
        if scenario.aid.recommendation is not None:
            rec_codes = _level_codes(frame[scenario.aid.recommendation], scenario, scenario.aid.recommendation, file, typed)
        states = []
        for outcome in scenario.outcomes:
            s = binary_states(frame[outcome.column], outcome.column, file, allow_missing=True, typed=typed)
            if not s.any():
                raise InputError(f"{file}: outcome column {outcome.column!r} ({outcome.label}) is empty in every row; nothing can be estimated for it.")
            states.append(s)
        costs_raw = {}
        for col in scenario.cost_columns:
            costs_raw[col] = _cost_values(frame[col], col, file)

        counts, cell_ids, cost_sums = aggregate_codes(
            cell_codes, [len(categories[c]) for c in scenario.cell_columns],
            arm_codes, level_codes, len(scenario.levels), states, rec_codes, costs_raw,
        )
        table = cls._from_counts_array(counts, cell_ids, categories, scenario, arms, rec_codes is not None, cost_sums, f"case table {file}")
        _check_structural_zeros(table, scenario, file)
        return table

    @classmethod
    def _from_counts_array(cls, counts, cell_ids, categories, scenario, arms, has_rec, cost_sums, source) -> "CellTable":
        # counts: (n_cells, A, L, R, 3**J) -> margins
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
        sizes = [len(categories[c]) for c in scenario.cell_columns]
        parts = np.unravel_index(cell_ids, sizes)
        frame = pd.DataFrame({
            c: pd.Categorical.from_codes(p.astype(np.int64), categories=categories[c], ordered=True)
            for c, p in zip(scenario.cell_columns, parts)
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
        for col in scenario.cell_columns:
            codes, cats = code_cell_column(frame[col], col, file, scenario.order.get(col))
            cell_codes.append(codes)
            categories[col] = cats
        level_codes = _level_codes(frame[scenario.decision], scenario, scenario.decision, file, typed)
        if scenario.arm is not None:
            arm_codes = binary_states(frame[scenario.arm], scenario.arm, file, allow_missing=False, typed=typed) - 1
            arms: tuple = (0, 1)
        else:
            arm_codes, arms = np.zeros(len(frame), dtype=np.int8), (None,)
        sizes = [len(categories[c]) for c in scenario.cell_columns]
        key_cells = np.ravel_multi_index(cell_codes, sizes)
        cell_ids, cell_pos = np.unique(key_cells, return_inverse=True)
        A, L, J = len(arms), len(scenario.levels), len(scenario.outcomes)
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
            i = int(np.flatnonzero(w == 0)[0])
            raise InputError(f"{file}: a cell has rows but no cases (cell {i + 1}); remove rows with cases = 0 only.")
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


def _case_columns(scenario: Scenario) -> list[str]:
    cols = list(scenario.cell_columns) + [scenario.decision] + [o.column for o in scenario.outcomes]
    if scenario.arm is not None:
        cols.append(scenario.arm)
    if scenario.case_id is not None:
        cols.append(scenario.case_id)
    if scenario.aid.recommendation is not None:
        cols.append(scenario.aid.recommendation)
    cols += list(scenario.cost_columns)
    return list(dict.fromkeys(cols))


def _counts_columns(scenario: Scenario) -> list[str]:
    cols = list(scenario.cell_columns)
    if scenario.arm is not None:
        cols.append(scenario.arm)
    cols += [scenario.decision, "cases"]
    if scenario.aid.recommendation is not None:
        cols.append("recommended")
    for o in scenario.outcomes:
        cols += [f"observed_{o.key}", f"events_{o.key}"]
    cols += list(scenario.cost_columns)
    return list(dict.fromkeys(cols))


def _check_unique_ids(ids: pd.Series, column: str, file: str) -> None:
    dup = ids.duplicated(keep=False).to_numpy()
    if dup.any():
        rows = np.flatnonzero(dup)
        first_value = ids.iloc[rows[0]]
        same = np.flatnonzero((ids == first_value).to_numpy())
        n_values = int(ids[dup].nunique())
        raise InputError(
            f"{file}: column {column!r} must identify each case once; {n_values} values appear more than once "
            f"in {len(rows)} rows (first: {first_value!r} at rows {same[0] + 1} and {same[1] + 1})."
        )


def _level_codes(series: pd.Series, scenario: Scenario, column: str, file: str, typed: bool) -> np.ndarray:
    """Decision level position of each row; undeclared or empty values raise."""
    values = scenario.level_values
    codes, uniques = pd.factorize(series, sort=False, use_na_sentinel=True)
    if (codes < 0).any():
        rows = np.flatnonzero(codes < 0)
        raise InputError(f"{file}: column {column!r} is empty in {len(rows)} rows (first: row {rows[0] + 1}); expected one of: {', '.join(values)}.")
    text = [str(u.item() if isinstance(u, np.generic) else u) for u in uniques]
    # integers stored as floats ("1.0") still name level "1"
    text = [t[:-2] if t.endswith(".0") and t[:-2].lstrip("-").isdigit() else t for t in text]
    remap = np.array([values.index(t) if t in values else -1 for t in text], dtype=np.int8)
    level = remap[codes]
    if (level < 0).any():
        bad = level < 0
        shown, n, first = describe_bad(series.to_numpy(dtype=object), bad)
        raise InputError(
            f"{file}: column {column!r} has values that are not declared decision levels: {shown} in {n} rows "
            f"(first: row {first}); expected one of: {', '.join(values)} (see [[decisions]] value in {scenario.file})."
        )
    return level


def _cost_values(series: pd.Series, column: str, file: str) -> np.ndarray:
    values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        text, n, first = describe_bad(series.to_numpy(dtype=object), bad)
        raise InputError(f"{file}: cost column {column!r} must hold numbers >= 0 in every row; got {text} in {n} rows (first: row {first}).")
    return values


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


def aggregate_codes(
    cell_codes: Sequence[np.ndarray],
    cell_sizes: Sequence[int],
    arm_codes: np.ndarray | None,
    level_codes: np.ndarray,
    n_levels: int,
    outcome_states: Sequence[np.ndarray],
    rec_codes: np.ndarray | None = None,
    cost_values: Mapping[str, np.ndarray] | None = None,
    chunk_rows: int = CHUNK_ROWS,
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Count integer-coded cases per (cell, arm, level, recommended level, outcome states).

    Parameters
    ----------
    cell_codes : sequence of ndarray of shape (n,)
        Codes 0..size-1 of each cell column.
    cell_sizes : sequence of int
        Number of categories of each cell column.
    arm_codes : ndarray of shape (n,) or None
        0/1 arm of each case.
    level_codes : ndarray of shape (n,)
        Decision level 0..L-1 of each case.
    n_levels : int
        L.
    outcome_states : sequence of ndarray of shape (n,)
        Per outcome kind: 0 missing, 1 no event, 2 event.
    rec_codes : ndarray of shape (n,) or None
        The aid's recommended level of each case.
    cost_values : dict of str to ndarray of shape (n,), optional
        Per-case costs to sum per cell.

    Returns
    -------
    counts : ndarray of shape (n_cells, A, L, R, 3**J)
        Case counts for the cells present (A = 1 without arm, R = 1 without recommendation).
    cell_ids : ndarray of shape (n_cells,)
        Mixed-radix id of each present cell (``numpy.ravel_multi_index`` of its codes).
    cost_sums : dict of str to ndarray of shape (n_cells,)
        Sum of each cost column per present cell.

    Notes
    -----
    One ``bincount`` per chunk over a single combined key. When the key space is larger than
    :data:`DENSE_KEYS`, chunks are counted by sorting (``numpy.unique``) and merged.
    """
    n = len(level_codes)
    A = 1 if arm_codes is None else 2
    R = 1 if rec_codes is None else n_levels
    S = 3 ** len(outcome_states)
    inner = A * n_levels * R * S
    n_radix = int(np.prod([int(s) for s in cell_sizes]))
    space = n_radix * inner
    if space >= 1 << 62:
        raise InputError(
            f"the cell columns allow {n_radix:,} combinations, too many to count; "
            "use fewer or coarser cell covariates."
        )
    dense = space <= DENSE_KEYS
    cost_values = dict(cost_values or {})
    acc = np.zeros(space, dtype=np.int64) if dense else None
    cost_acc = {c: np.zeros(n_radix) for c in cost_values} if dense else {c: [] for c in cost_values}
    sparse_parts: list[tuple[np.ndarray, np.ndarray]] = []
    strides = np.cumprod([1] + list(cell_sizes[::-1]))[::-1][1:]
    for start in range(0, n, chunk_rows):
        stop = min(n, start + chunk_rows)
        cell_key = np.zeros(stop - start, dtype=np.int64)
        for codes, stride in zip(cell_codes, strides):
            cell_key += codes[start:stop].astype(np.int64) * int(stride)
        key = cell_key * inner
        rest = level_codes[start:stop].astype(np.int64)
        if arm_codes is not None:
            rest += arm_codes[start:stop].astype(np.int64) * n_levels
        if rec_codes is not None:
            rest = rest * R + rec_codes[start:stop]
        for states in outcome_states:
            rest = rest * 3 + states[start:stop]
        key += rest
        if dense:
            acc += np.bincount(key, minlength=space)
            for c, values in cost_values.items():
                cost_acc[c] += np.bincount(cell_key, weights=values[start:stop], minlength=n_radix)
        else:
            uniq, cnt = np.unique(key, return_counts=True)
            sparse_parts.append((uniq, cnt))
            for c, values in cost_values.items():
                u, inv = np.unique(cell_key, return_inverse=True)
                cost_acc[c].append((u, np.bincount(inv, weights=values[start:stop])))
    if dense:
        grid = acc.reshape(n_radix, inner)
        present = np.flatnonzero(grid.any(axis=1))
        counts = grid[present]
        cost_sums = {c: v[present] for c, v in cost_acc.items()}
    else:
        keys = np.concatenate([u for u, _ in sparse_parts])
        cnts = np.concatenate([c for _, c in sparse_parts])
        uniq, inv = np.unique(keys, return_inverse=True)
        total = np.bincount(inv, weights=cnts).astype(np.int64)
        present, cell_pos = np.unique(uniq // inner, return_inverse=True)
        counts = np.zeros((len(present), inner), dtype=np.int64)
        np.add.at(counts, (cell_pos, uniq % inner), total)
        cost_sums = {}
        for c, parts in cost_acc.items():
            u = np.concatenate([p[0] for p in parts])
            s = np.concatenate([p[1] for p in parts])
            uu, inv2 = np.unique(u, return_inverse=True)
            cost_sums[c] = np.bincount(inv2, weights=s)[np.searchsorted(uu, present)]
    counts = counts.reshape(len(present), A, n_levels, R, S)
    return counts, present, cost_sums


def load_cell_table(scenario: Scenario) -> CellTable:
    """The cell table of a scenario: read its case or counts table, or run its simulator."""
    kind = scenario.data.kind
    if kind == "simulate":
        from .demo import simulate_cases

        frame, _ = simulate_cases(scenario.data.simulate, seed=scenario.seed)
        return CellTable.from_cases(frame, scenario, file=f"simulated case table ({scenario.data.simulate:,} cases)")
    if kind == "case_table":
        frame = read_table(scenario.data.path, _case_columns(scenario), f"case table ({scenario.file} [data] case_table)")
        return CellTable.from_cases(frame, scenario)
    if kind == "counts_table":
        frame = read_table(scenario.data.path, _counts_columns(scenario), f"counts table ({scenario.file} [data] counts_table)")
        return CellTable.from_counts(frame, scenario)
    raise InputError(f"{scenario.file}: [data] gives a risk-level table; there is no cell table of counts to read.")
