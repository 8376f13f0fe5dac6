"""Counting cases by cell: coding covariate columns to integers and one bincount per chunk.

The hot path of reading a case table: every column is coded once (categories in declared or
natural order), a cell key is formed from the codes, and counts (cell x arm x level x outcome
states) are added with one ``numpy.bincount`` per chunk, or by sorting and merging when the
key space is too large for a dense count. Used by the in-memory table and by the streamed read
(:mod:`policy.inputs.stream`) alike, so both give the same cell table.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.inputs.limits import LARGEST
from policy.inputs.scenario import Scenario
from policy.inputs.tables import binary_states, describe_bad, require_columns, row_number


__all__ = ["BlockCounts", "CodedColumn", "count_block", "aggregate_codes", "code_column", "CHUNK_ROWS"]

#: rows per chunk of the aggregation pass (bounds the temporary key array; a file is read in
#: blocks of this many rows, so that both add per-cell sums in the same order)
CHUNK_ROWS = 1 << 20
#: rows per step of the key computation within a chunk (the step's key stays in cache)
KEY_STEP = 1 << 15
#: largest key space counted with one dense bincount; beyond it keys are sorted and merged
DENSE_KEYS = 1 << 22



def _is_number(value: Any) -> bool:
    if isinstance(value, bool):
        return False
    if isinstance(value, (int, float, np.number)):
        return True
    try:
        float(value)
        return True
    except (TypeError, ValueError):
        return False


def _ordered_categories(uniques: Sequence, declared: Sequence | None, column: str, file: str,
                        one_kind: bool = False) -> list:
    if declared is None:
        numbers = [v for v in uniques if _is_number(v)] if one_kind else []
        # a rule column: text among its numbers is a typo, not a category
        if numbers and len(numbers) < len(uniques):
            texts = sorted({str(v) for v in uniques if not _is_number(v)})
            shown = ", ".join(repr(t) for t in texts[:5]) + (", ..." if len(texts) > 5 else "")
            raise InputError(
                f"{file}: rule column {column!r} mixes numbers and text: {shown} among numbers such as "
                f"{', '.join(str(v) for v in sorted(numbers, key=float)[:5])}; a cell column holds one kind of value "
                f"(or list every value in [cells] order.{column})."
            )
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
                  column: str, file: str, one_kind: bool = False) -> tuple[list, np.ndarray]:
    """Ordered categories of the codes present, and a lookup from code to category position
    (-1 for codes not present)."""
    values = [coded.uniques[i] for i in present.tolist()]
    cats = _ordered_categories(values, declared, column, file, one_kind)
    position = {v: i for i, v in enumerate(cats)}
    lookup = np.full(coded.size, -1, dtype=np.int64)
    lookup[present] = [position[v] for v in values]
    return cats, lookup


def code_cell_column(series: pd.Series, column: str, file: str, declared: Sequence | None,
                     one_kind: bool = False) -> tuple[np.ndarray, list]:
    """Codes 0..n-1 of a (small) table's cell column and its ordered categories (present values only)."""
    coded = code_column(series, column, file, "cell column")
    raw = coded.codes().astype(np.int64)
    present = np.flatnonzero(np.bincount(raw, minlength=coded.size))
    cats, lookup = categories_of(coded, present, declared, column, file, one_kind)
    return lookup[raw], cats


# ----------------------------------------------------------------------------------------------
# The cell table
# ----------------------------------------------------------------------------------------------

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
    # a blank id means the case has none: it is counted, and not compared with other ids
    given = (ids.notna() & (ids.astype(str).str.strip() != "")).to_numpy()
    if not given.all():
        at = np.arange(len(ids)) if rows is None else np.asarray(rows)
        ids, rows = ids[given].reset_index(drop=True), at[given]
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
        cats, lookup = categories_of(coded, np.unique(raw), scenario.order.get(name), name, file,
                                     name in scenario.rule_covariates or name == scenario.aid.score)
        pos = lookup[raw]
        categories[name] = (cats, pos)
        positions.append(pos)
    order = np.lexsort(positions[::-1]) if positions else np.arange(len(codes))
    categories = {name: (cats, pos[order]) for name, (cats, pos) in categories.items()}
    return categories, order


def _cost_values(series: pd.Series, column: str, file: str) -> np.ndarray:
    values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(values) | (values < 0) | (values > LARGEST)
    if bad.any():
        text, n, first = describe_bad(series.to_numpy(dtype=object), bad)
        raise InputError(f"{file}: cost column {column!r} must hold finite numbers >= 0 (at most {LARGEST:g}) in every row; "
                         f"got {text} in {n} rows (first: row {first}).")
    return values




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
    if scenario.bins:
        from policy.inputs.bins import apply_bins

        frame = apply_bins(frame, scenario.bins, file)
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


