"""From a case table (or a counts table) to the validated cell table.

A *cell* is one combination of the cell covariates and protected attributes. Everything
downstream works on arrays over cells. The case table is aggregated in one vectorized pass:
every column is integer-coded, the codes are combined into one mixed-radix key per case, and a
single ``numpy.bincount`` counts cases per (cell, arm, decision level, recommended level,
outcome states), processed in chunks so memory stays bounded by the cell count.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.inputs.scenario import Scenario
from policy.inputs.tables import binary_states, describe_bad, read_table, require_columns, row_number

__all__ = ["BlockCounts", "CellLayout", "CellTable", "CodedColumn", "count_block", "load_cell_table", "aggregate_codes", "code_column"]

#: rows per chunk of the aggregation pass (bounds the temporary key array; a file is read in
#: blocks of this many rows, so that both add per-cell sums in the same order)
CHUNK_ROWS = 1 << 20
#: rows per step of the key computation within a chunk (the step's key stays in cache)
KEY_STEP = 1 << 15
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
    for value in uniques:
        if str(value) not in declared_text:
            raise InputError(
                f"{file}: column {column!r} has value {value!r}, which [cells] order.{column} does not list; "
                f"expected one of: {', '.join(declared_text)}."
            )
    by_text = {str(v): v for v in uniques}
    return [by_text[text] for text in declared_text if text in by_text]


@dataclass(frozen=True)
class CodedColumn:
    """A column as integer codes 0..size-1, read chunk by chunk without a full-length copy.

    Small integer columns are coded as ``value - offset`` on the fly (no hashing, no copy);
    categorical columns use their codes; anything else is factorized once.
    """

    values: np.ndarray
    offset: int
    uniques: list

    @property
    def size(self) -> int:
        return len(self.uniques)

    def add_to(self, key: np.ndarray, start: int, stop: int) -> None:
        """``key += code`` for rows start..stop, in place."""
        key += self.values[start:stop]
        if self.offset:
            key -= self.offset

    def codes(self) -> np.ndarray:
        return self.values - self.values.dtype.type(self.offset) if self.offset else self.values


def _smallest_int(codes: np.ndarray, size: int) -> np.ndarray:
    for dtype in (np.int8, np.int16, np.int32):
        if size < np.iinfo(dtype).max:
            return codes.astype(dtype, copy=False)
    return codes


def code_column(series: pd.Series, column: str, file: str, what: str = "column") -> CodedColumn:
    """Code a complete column (cell covariate, decision, recommendation) as integers."""
    if series.hasnans:
        rows = np.flatnonzero(series.isna().to_numpy())
        raise InputError(
            f"{file}: {what} {column!r} is empty in {len(rows)} rows (first: row {row_number(rows[0])}); "
            f"every row needs a value."
        )
    if isinstance(series.dtype, pd.CategoricalDtype):
        return CodedColumn(series.cat.codes.to_numpy(), 0, list(series.cat.categories))
    values = series.to_numpy()
    if values.dtype.kind == "u" and values.dtype.itemsize == 8:
        values = values.astype(np.int64)
    if values.dtype.kind in "iub" and len(values):
        lo, hi = int(values.min()), int(values.max())
        if hi - lo < (1 << 16):
            if values.dtype.kind == "b":
                return CodedColumn(values.view(np.int8), lo, [bool(v) for v in range(lo, hi + 1)])
            return CodedColumn(values, lo, list(range(lo, hi + 1)))
    codes, uniques = pd.factorize(series, sort=False)
    uniques = [u.item() if isinstance(u, np.generic) else u for u in uniques]
    return CodedColumn(_smallest_int(codes, len(uniques)), 0, uniques)


def categories_of(coded: CodedColumn, present: np.ndarray, declared: Sequence | None,
                  column: str, file: str) -> tuple[list, np.ndarray]:
    """Ordered categories of the codes present, and a lookup from code to category position
    (-1 for codes not present)."""
    values = [coded.uniques[i] for i in present.tolist()]
    cats = _ordered_categories(values, declared, column, file)
    position = {v: i for i, v in enumerate(cats)}
    lookup = np.full(coded.size, -1, dtype=np.int64)
    lookup[present] = [position[v] for v in values]
    return cats, lookup


def code_cell_column(series: pd.Series, column: str, file: str, declared: Sequence | None) -> tuple[np.ndarray, list]:
    """Codes 0..n-1 of a (small) table's cell column and its ordered categories (present values only)."""
    coded = code_column(series, column, file, "cell column")
    raw = coded.codes().astype(np.int64)
    present = np.flatnonzero(np.bincount(raw, minlength=coded.size))
    cats, lookup = categories_of(coded, present, declared, column, file)
    return lookup[raw], cats


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
        for col in scenario.cell_columns:
            codes, cats = code_cell_column(frame[col], col, file, scenario.order.get(col))
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


def _check_unique_ids(ids: pd.Series, column: str, file: str, rows: np.ndarray | None = None) -> None:
    """Raise if a case id appears twice. ``rows``: the 0-based file row of each value (default:
    their positions), for a check of only the rows that might hold duplicates."""
    ids = ids.reset_index(drop=True)
    dup = ids.duplicated(keep=False).to_numpy()
    if dup.any():
        at = np.arange(len(ids)) if rows is None else np.asarray(rows)
        first = int(np.flatnonzero(dup)[0])
        first_value = ids.iloc[first]
        same = at[np.flatnonzero((ids == first_value).to_numpy())]
        n_values = int(ids[dup].nunique())
        raise InputError(
            f"{file}: column {column!r} must identify each case once; {n_values} values appear more than once "
            f"in {int(dup.sum())} rows (first: {first_value!r} at rows {same[0] + 1} and {same[1] + 1})."
        )


def _level_text(value: Any) -> str:
    text = str(value.item() if isinstance(value, np.generic) else value)
    # integers stored as floats ("1.0") still name level "1"
    return text[:-2] if text.endswith(".0") and text[:-2].lstrip("-").isdigit() else text


def _undeclared(series: pd.Series, bad_values: list, scenario: Scenario, column: str, file: str) -> InputError:
    bad = series.isin(bad_values).to_numpy()
    shown, n, first = describe_bad(series.to_numpy(dtype=object), bad)
    return InputError(
        f"{file}: column {column!r} has values that are not declared decision levels: {shown} in {n} rows "
        f"(first: row {first}); expected one of: {', '.join(scenario.level_values)} (see [[decisions]] value in {scenario.file})."
    )


def _to_levels(counts: np.ndarray, axis: int, coded: CodedColumn, scenario: Scenario, column: str,
               frame: pd.DataFrame, file: str) -> np.ndarray:
    """Turn an axis of raw decision codes into the declared levels' axis (length L)."""
    values = scenario.level_values
    other = tuple(i for i in range(counts.ndim) if i != axis)
    present = np.flatnonzero(counts.sum(axis=other) > 0)
    mapping = np.zeros((coded.size, len(values)), dtype=np.int64)
    bad = []
    for code in present.tolist():
        text = _level_text(coded.uniques[code])
        if text in values:
            mapping[code, values.index(text)] = 1
        else:
            bad.append(coded.uniques[code])
    if bad:
        raise _undeclared(frame[column], bad, scenario, column, file)
    return np.moveaxis(np.moveaxis(counts, axis, -1) @ mapping, -1, axis)


def _level_codes(series: pd.Series, scenario: Scenario, column: str, file: str) -> np.ndarray:
    """Decision level position of each row of a (small) table; undeclared or empty values raise."""
    coded = code_column(series, column, file)
    values = scenario.level_values
    remap = np.array([values.index(_level_text(u)) if _level_text(u) in values else -1 for u in coded.uniques], dtype=np.int64)
    level = remap[coded.codes().astype(np.int64)]
    if (level < 0).any():
        bad = sorted({coded.uniques[i] for i in np.flatnonzero(remap < 0)}, key=str)
        raise _undeclared(series, bad, scenario, column, file)
    return level


def _present_categories(uniques: Sequence[list], codes: np.ndarray, scenario: Scenario,
                        file: str) -> tuple[dict, np.ndarray]:
    """Categories of each cell column among the cells present, and the order that sorts the
    cells by them (category order, first column slowest). ``codes[:, k]`` points into
    ``uniques[k]``."""
    categories, positions = {}, []
    for k, name in enumerate(scenario.cell_columns):
        raw = codes[:, k]
        coded = CodedColumn(np.empty(0, dtype=np.int64), 0, list(uniques[k]))
        cats, lookup = categories_of(coded, np.unique(raw), scenario.order.get(name), name, file)
        pos = lookup[raw]
        categories[name] = (cats, pos)
        positions.append(pos)
    order = np.lexsort(positions[::-1]) if positions else np.arange(len(codes))
    categories = {name: (cats, pos[order]) for name, (cats, pos) in categories.items()}
    return categories, order


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


@dataclass(frozen=True)
class BlockCounts:
    """Counts of a block of case rows by cell (before the cells are ordered).

    Attributes
    ----------
    uniques : list of list
        For each cell column, the values that ``codes`` point into.
    codes : ndarray of shape (n_present, n_cell_columns)
        Each present cell's value of each cell column, as positions in ``uniques``.
    counts : ndarray of shape (n_present, A, L, R, 3**J)
        Cases per cell x arm x decision level x recommended level (R = 1 without a
        recommendation column) x joint outcome state.
    cost_sums : dict of str to ndarray of shape (n_present,)
        Sum of each cost column per cell.
    observed_any : ndarray of shape (J,)
        Whether each outcome kind was observed in some row.
    rows : int
        Case rows counted.
    """

    uniques: list
    codes: np.ndarray
    counts: np.ndarray
    cost_sums: Mapping[str, np.ndarray]
    observed_any: np.ndarray
    rows: int


def count_block(frame: pd.DataFrame, scenario: Scenario, file: str, whole: bool = True) -> BlockCounts:
    """Validate and count one block of case rows (the whole table, or one block of a stream).

    With ``whole`` (the table is this one block) duplicate case ids and outcome columns empty
    in every row are errors here; a stream checks both over all its blocks instead.
    """
    typed = frame.attrs.get("format") == "parquet"
    require_columns(frame.columns, _case_columns(scenario), file, f"named in {scenario.file}")
    if whole and len(frame) == 0:
        raise InputError(f"{file}: the case table has no rows.")
    if whole and scenario.case_id is not None:
        _check_unique_ids(frame[scenario.case_id], scenario.case_id, file)

    cells = [code_column(frame[c], c, file, "cell column") for c in scenario.cell_columns]
    columns = list(cells)
    if scenario.arm is not None:
        arm = binary_states(frame[scenario.arm], scenario.arm, file, allow_missing=False, typed=typed) - 1
        columns.append(CodedColumn(arm, 0, [0, 1]))
    decision = code_column(frame[scenario.decision], scenario.decision, file)
    columns.append(decision)
    recommendation = None
    if scenario.aid.recommendation is not None:
        recommendation = code_column(frame[scenario.aid.recommendation], scenario.aid.recommendation, file)
        columns.append(recommendation)
    observed_any = np.zeros(len(scenario.outcomes), dtype=bool)
    for j, outcome in enumerate(scenario.outcomes):
        states = binary_states(frame[outcome.column], outcome.column, file, allow_missing=True, typed=typed)
        observed_any[j] = states.any()
        if whole and not observed_any[j]:
            raise InputError(f"{file}: outcome column {outcome.column!r} ({outcome.label}) is empty in every row; nothing can be estimated for it.")
        columns.append(CodedColumn(states, 0, [None, 0, 1]))
    costs_raw = {col: _cost_values(frame[col], col, file) for col in scenario.cost_columns}
    J = len(scenario.outcomes)
    if len(frame) == 0:
        shape = (0, 2 if scenario.arm is not None else 1, len(scenario.levels),
                 len(scenario.levels) if recommendation is not None else 1, 3 ** J)
        return BlockCounts([c.uniques for c in cells], np.zeros((0, len(cells)), dtype=np.int64),
                           np.zeros(shape, dtype=np.int64), {c: np.zeros(0) for c in costs_raw}, observed_any, 0)

    counts, cell_ids, cost_sums = aggregate_codes(columns, len(cells), costs_raw)
    # counts: (cells present, [arm], decision codes, [recommendation codes], 3, ..., 3)
    if scenario.arm is None:
        counts = counts[:, None]
    axis = 2
    counts = _to_levels(counts, axis, decision, scenario, scenario.decision, frame, file)
    if recommendation is not None:
        counts = _to_levels(counts, axis + 1, recommendation, scenario, scenario.aid.recommendation, frame, file)
    else:
        counts = counts[:, :, :, None]
    counts = counts.reshape(counts.shape[:4] + (3 ** J,))
    codes = np.stack(np.unravel_index(cell_ids, [c.size for c in cells]), axis=1).astype(np.int64)
    return BlockCounts([c.uniques for c in cells], codes, counts, cost_sums, observed_any, len(frame))


def aggregate_codes(
    columns: Sequence[CodedColumn],
    n_cell_columns: int,
    cost_values: Mapping[str, np.ndarray] | None = None,
    chunk_rows: int = CHUNK_ROWS,
) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Count cases per combination of integer-coded columns, compacted to the cells present.

    Parameters
    ----------
    columns : sequence of CodedColumn
        The cell columns first (``n_cell_columns`` of them), then any others (arm, decision,
        recommendation, outcome states).
    n_cell_columns : int
        How many of ``columns`` define the cell.
    cost_values : dict of str to ndarray of shape (n,), optional
        Per-case costs to sum per cell.
    chunk_rows : int
        Rows per chunk; bounds the temporary key array.

    Returns
    -------
    counts : ndarray of shape (n_cells, size of each non-cell column ...)
        Case counts for the cells present.
    cell_ids : ndarray of shape (n_cells,)
        Mixed-radix id of each present cell over the cell columns' codes.
    cost_sums : dict of str to ndarray of shape (n_cells,)
        Sum of each cost column per present cell.

    Notes
    -----
    Each chunk's codes are combined in place into one mixed-radix int64 key (Horner's scheme)
    and counted with a single ``numpy.bincount``. When the key space is larger than
    :data:`DENSE_KEYS`, chunks are counted by sorting (``numpy.unique``) and merged.
    """
    n = len(columns[0].values)
    sizes = [c.size for c in columns]
    n_radix = int(np.prod([int(s) for s in sizes[:n_cell_columns]]))
    inner_sizes = sizes[n_cell_columns:]
    inner = int(np.prod([int(s) for s in inner_sizes]))
    space = n_radix * inner
    if space >= 1 << 62:
        raise InputError(
            f"the cell columns allow {n_radix:,} combinations, too many to count; "
            "use fewer or coarser cell covariates."
        )
    dense = space <= DENSE_KEYS
    cost_values = dict(cost_values or {})
    acc = np.zeros(space, dtype=np.int64) if dense else None
    cost_acc: dict = {c: np.zeros(n_radix) for c in cost_values} if dense else {c: [] for c in cost_values}
    sparse_parts: list[tuple[np.ndarray, np.ndarray]] = []
    for start in range(0, n, chunk_rows):
        stop = min(n, start + chunk_rows)
        key = np.zeros(stop - start, dtype=np.int64)
        cell_key = np.empty(stop - start, dtype=np.int64) if cost_values else None
        # Horner's scheme in cache-sized steps: each step's key stays in cache across the columns
        for step in range(start, stop, KEY_STEP):
            end = min(stop, step + KEY_STEP)
            part = key[step - start:end - start]
            for i, (col, size) in enumerate(zip(columns, sizes)):
                if i:
                    part *= size
                col.add_to(part, step, end)
                if i == n_cell_columns - 1 and cell_key is not None:
                    cell_key[step - start:end - start] = part
        if dense:
            acc += np.bincount(key, minlength=space)
            for c, values in cost_values.items():
                cost_acc[c] += np.bincount(cell_key, weights=values[start:stop], minlength=n_radix)
        else:
            sparse_parts.append(np.unique(key, return_counts=True))
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
            v = np.concatenate([p[1] for p in parts])
            uu, inv2 = np.unique(u, return_inverse=True)
            cost_sums[c] = np.bincount(inv2, weights=v)[np.searchsorted(uu, present)]
    return counts.reshape((len(present),) + tuple(inner_sizes)), present, cost_sums


#: The case simulator behind ``[data] simulate``: set by the demo package when it is imported
#: (:func:`register_simulator`), so this stage never imports the demo.
_SIMULATOR: Callable[[int, int | None], pd.DataFrame] | None = None


def register_simulator(simulate: Callable[[int, int | None], pd.DataFrame]) -> None:
    """Make ``simulate(n_cases, seed)`` the source of scenarios whose ``[data]`` says ``simulate``."""
    global _SIMULATOR
    _SIMULATOR = simulate


def load_cell_table(scenario: Scenario, progress: bool | None = None) -> CellTable:
    """The cell table of a scenario: read its case or counts table, or run its simulator.

    A case table file is read in blocks (:func:`policy.inputs.stream.stream_cell_table`), with a
    progress bar when ``progress`` (None: when standard error is a terminal and the file is
    large).
    """
    kind = scenario.data.kind
    if kind == "simulate":
        if _SIMULATOR is None:
            raise InputError(f"{scenario.file}: [data] simulate needs the demo's simulator, which is not loaded "
                             "(import policy, or policy.demo, first).")
        frame = _SIMULATOR(scenario.data.simulate, scenario.seed)
        return CellTable.from_cases(frame, scenario, file=f"simulated case table ({scenario.data.simulate:,} cases)")
    if kind == "case_table":
        from policy.inputs.stream import stream_cell_table

        # read in blocks (policy.inputs.stream): memory bounded by the cells, identical to reading it whole
        return stream_cell_table(scenario.data.path, scenario, f"case table ({scenario.file} [data] case_table)",
                                 progress=progress)
    if kind == "counts_table":
        frame = read_table(scenario.data.path, _counts_columns(scenario), f"counts table ({scenario.file} [data] counts_table)")
        return CellTable.from_counts(frame, scenario)
    raise InputError(f"{scenario.file}: [data] gives a risk-level table; there is no cell table of counts to read.")
