"""A scenario's risk levels: estimated from its cell table, or read from a risk-level table.

The second way in: a table of risk-level (principal stratum) probabilities estimated elsewhere,
one row per cell and outcome kind, validated like every other input. :func:`estimate` is what
every scenario-level function calls: the cell table (None for a risk-level table) and the
risk levels.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.estimation.draws import RiskLevelDraws, parse_draws, read_draws
from policy.estimation.strata import RiskLevelEstimator, RiskLevels, outcome_probabilities
from policy.inputs.cells import CellLayout, CellTable
from policy.inputs.loading import load_cell_table
from policy.inputs.counting import code_cell_column
from policy.inputs.scenario import Scenario, as_scenario
from policy.inputs.tables import read_table, require_columns
from policy.inputs.limits import LARGEST

__all__ = ["estimate", "estimate_risk_levels", "load_risk_level_draws", "load_risk_level_table", "risk_level_draws_from_frame", "risk_levels_from_frame",
           "risk_level_table_columns"]



def _shown(value) -> str:
    """A table value for messages: numpy scalars as plain Python values (-0.1, not np.float64(-0.1))."""
    return repr(value.item() if isinstance(value, np.generic) else value)

def risk_level_table_columns(scenario: Scenario) -> list[str]:
    L = len(scenario.levels)
    return list(scenario.cell_columns) + ["outcome", "cases"] + [f"risk_level_{r}" for r in range(L + 1)] + list(scenario.cost_columns)


def risk_levels_from_frame(frame: pd.DataFrame, scenario: Scenario, file: str | None = None) -> RiskLevels:
    """Validate an already estimated risk-level table (one row per cell x outcome kind).

    Columns: the cell columns, ``outcome`` (an outcome key), ``cases`` (weight of the cell),
    ``risk_level_0`` ... ``risk_level_{K+1}`` (probabilities in [0, 1] summing to 1 within
    1e-6), optional ``borrowed_<level>`` flags, and the cost columns.
    """
    file = file or frame.attrs.get("file", "risk-level table")
    L, J = len(scenario.levels), len(scenario.outcomes)
    cols = risk_level_table_columns(scenario)
    require_columns(frame.columns, cols, file, f"a risk-level table for {scenario.file}")
    if len(frame) == 0:
        raise InputError(f"{file}: the risk-level table has no rows.")
    keys = frame["outcome"].astype(str).to_numpy()
    unknown = ~np.isin(keys, scenario.outcome_keys)
    if unknown.any():
        rows = np.flatnonzero(unknown)
        raise InputError(
            f"{file}: column 'outcome' has values that are not declared outcome keys: "
            f"{sorted(set(keys[rows]))[:5]} in {len(rows)} rows (first: row {rows[0] + 1}); expected one of: "
            f"{', '.join(scenario.outcome_keys)}."
        )
    q_cols = [f"risk_level_{r}" for r in range(L + 1)]
    q = frame[q_cols].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(q) | (q < -1e-9) | (q > 1 + 1e-9)
    if bad.any():
        row, col = map(int, np.argwhere(bad)[0])
        n = int(bad.any(axis=1).sum())
        raise InputError(
            f"{file}: column {q_cols[col]!r} must hold probabilities in [0, 1]; got {_shown(frame[q_cols[col]].iloc[row])} "
            f"({n} rows with such values, first: row {row + 1})."
        )
    off = np.abs(q.sum(axis=1) - 1.0) > 1e-6
    if off.any():
        rows = np.flatnonzero(off)
        raise InputError(
            f"{file}: risk_level_0..risk_level_{L} must sum to 1 within 1e-6 in every row; they sum to "
            f"{q[rows[0]].sum():.8f} in row {rows[0] + 1} ({len(rows)} rows off)."
        )
    weights = pd.to_numeric(frame["cases"], errors="coerce").to_numpy(dtype=np.float64)
    badw = ~np.isfinite(weights) | (weights <= 0)
    if badw.any():
        rows = np.flatnonzero(badw)
        raise InputError(f"{file}: column 'cases' must hold weights > 0; got {_shown(frame['cases'].iloc[rows[0]])} in {len(rows)} rows (first: row {rows[0] + 1}).")

    codes, cats = [], {}
    for col in scenario.cell_columns:
        c, k = code_cell_column(frame[col], col, file, scenario.order.get(col))
        codes.append(c)
        cats[col] = k
    sizes = [len(cats[c]) for c in scenario.cell_columns]
    key = np.ravel_multi_index(codes, sizes)
    cell_ids, cell_pos = np.unique(key, return_inverse=True)
    n_cells = len(cell_ids)
    j_idx = np.array([scenario.outcome_keys.index(k) for k in keys])
    slot = cell_pos * J + j_idx
    counts = np.bincount(slot, minlength=n_cells * J)
    if (counts > 1).any():
        row = int(np.flatnonzero(counts[slot] > 1)[0])
        raise InputError(f"{file}: a cell has more than one row for outcome {keys[row]!r} (first: row {row + 1}); each cell x outcome must appear once.")
    if (counts == 0).any():
        cell = int(np.flatnonzero(counts == 0)[0]) // J
        row = int(np.flatnonzero(cell_pos == cell)[0])
        have = sorted(set(keys[cell_pos == cell]))
        raise InputError(f"{file}: the cell of row {row + 1} has rows for outcomes {have} only; every cell needs a row for each of: {', '.join(scenario.outcome_keys)}.")
    w_cell = np.zeros(n_cells)
    w_cell[cell_pos] = weights
    mismatch = np.abs(weights - w_cell[cell_pos]) > 1e-9 * np.maximum(1.0, weights)
    if mismatch.any():
        row = int(np.flatnonzero(mismatch)[0])
        raise InputError(f"{file}: column 'cases' differs between outcome rows of the same cell (first: row {row + 1}).")
    qq = np.zeros((n_cells, J, L + 1))
    qq[cell_pos, j_idx] = np.clip(q, 0.0, 1.0)
    qq /= qq.sum(axis=-1, keepdims=True)
    p = outcome_probabilities(qq)
    borrowed = np.zeros((n_cells, J, L), dtype=bool)
    for d, value in enumerate(scenario.level_values):
        col = f"borrowed_{value}"
        if col in frame.columns:
            borrowed[cell_pos, j_idx, d] = frame[col].astype(str).str.lower().isin(["true", "1"]).to_numpy()
    zero = np.zeros((J, L), dtype=bool)
    for j, o in enumerate(scenario.outcomes):
        if o.impossible_from is not None:
            zero[j, o.impossible_from:] = True
            viol = p[:, j, o.impossible_from:].max() if n_cells else 0.0
            if viol > 1e-6:
                raise InputError(
                    f"{file}: outcome {o.key!r} is declared impossible from level {o.impossible_from} on, but the table "
                    f"gives it probability {viol:.4f} there (risk_level_{o.impossible_from + 1} and above must be 0)."
                )
    cell_costs = {}
    for col in scenario.cost_columns:
        values = pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=np.float64)
        bad = ~np.isfinite(values) | (values < 0) | (values > LARGEST)
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise InputError(f"{file}: cost column {col!r} must hold finite numbers >= 0 (at most {LARGEST:g}); "
                             f"got {_shown(frame[col].iloc[row])} in row {row + 1}.")
        v = np.zeros(n_cells)
        v[cell_pos] = values
        cell_costs[col] = v
    parts = np.unravel_index(cell_ids, sizes)
    layout_frame = pd.DataFrame({
        c: pd.Categorical.from_codes(part.astype(np.int64), categories=cats[c], ordered=True)
        for c, part in zip(scenario.cell_columns, parts)
    })
    layout = CellLayout(layout_frame, scenario.protected, scenario.rule_covariates, scenario.aid.score)
    return RiskLevels(
        layout=layout,
        level_values=scenario.level_values,
        level_labels=scenario.level_labels,
        outcome_keys=scenario.outcome_keys,
        outcome_labels=scenario.outcome_labels,
        weights=w_cell,
        p=p,
        borrowed=borrowed,
        cell_costs=cell_costs,
        structural_zero=zero,
        source=f"risk-level table {file}",
    )


def load_risk_level_table(scenario: Scenario) -> RiskLevels:
    """Read and validate the scenario's already estimated risk-level table (with draws: their
    point estimate, :func:`load_risk_level_draws`)."""
    draws = load_risk_level_draws(scenario)
    if draws is not None:
        return draws.point
    cols = risk_level_table_columns(scenario)
    frame = read_table(scenario.data.path, None, f"risk-level table ({scenario.file} [data] risk_level_table)")
    require_columns(frame.columns, cols, frame.attrs["file"], f"a risk-level table for {scenario.file}")
    return risk_levels_from_frame(frame, scenario)


def risk_level_draws_from_frame(frame: pd.DataFrame, scenario: Scenario, file: str | None = None) -> RiskLevelDraws:
    """Validate a risk-level table with a ``draw`` column (:mod:`policy.estimation.draws`): the point
    risk levels (rows marked ``point``, else the mean over draws) and the draws."""
    return parse_draws(frame, scenario, risk_levels_from_frame, file)


#: the last risk-level table read, by the file's state and what of the scenario its reading depends on: one
#: command reads the same table for the point estimate, the comparison and each sweep (a report: several)
_LAST_READ: dict = {}


def _read_key(scenario: Scenario):
    try:
        st = scenario.data.path.stat()
    except OSError:
        return None
    return (str(scenario.data.path.resolve()), st.st_mtime_ns, st.st_size,
            repr((scenario.levels, scenario.outcomes, scenario.covariates, scenario.protected, scenario.rule_covariates,
                  sorted(scenario.order.items()), scenario.aid, scenario.bins)))


def load_risk_level_draws(scenario: Scenario):
    """The scenario's risk-level table as :class:`policy.estimation.draws.RiskLevelDraws`, or None
    when the table has no ``draw`` column (point estimates only). A CSV table is read in blocks;
    the last table read is kept (one at a time) while its file is unchanged."""
    key = _read_key(scenario)
    if key is not None and key in _LAST_READ:
        return _LAST_READ[key]
    _LAST_READ.clear()  # the previous table's draws are freed before the next is read
    draws = _load_risk_level_draws(scenario)
    if key is not None:
        _LAST_READ[key] = draws
    return draws


def _load_risk_level_draws(scenario: Scenario):
    what = f"risk-level table ({scenario.file} [data] risk_level_table)"
    path = scenario.data.path
    from policy.estimation.draws_netcdf import NETCDF_SUFFIXES, read_netcdf_draws

    if path.suffix.lower() in NETCDF_SUFFIXES:
        if not path.is_file():
            raise InputError(f"The {what} {str(path)!r} does not exist.")
        return read_netcdf_draws(path, scenario, risk_levels_from_frame)
    header = None
    if path.suffix.lower() == ".csv" and path.is_file():
        try:
            header = list(pd.read_csv(path, nrows=0, encoding="utf-8").columns)
        except (UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError):
            header = None  # read_table below says what is wrong with the file
    elif path.suffix.lower() == ".parquet" and path.is_file():
        from policy.inputs.tables import parquet_schema

        header = list(parquet_schema(path, risk_level_table_columns(scenario), what).names)
    if header is not None:
        require_columns(header, risk_level_table_columns(scenario), path.name, f"a risk-level table for {scenario.file}")
        return read_draws(path, scenario, risk_levels_from_frame) if "draw" in header else None
    frame = read_table(path, None, what)
    require_columns(frame.columns, risk_level_table_columns(scenario), frame.attrs["file"], f"a risk-level table for {scenario.file}")
    return risk_level_draws_from_frame(frame, scenario) if "draw" in frame.columns else None


def estimate_risk_levels(scenario: Scenario, cells: CellTable | None = None) -> RiskLevels:
    """Risk levels for a scenario: estimated from its cell table, or read from its risk-level table.

    Parameters
    ----------
    scenario : Scenario
    cells : CellTable, optional
        An already built cell table (default: :func:`policy.inputs.loading.load_cell_table`).
    """
    if scenario.data.kind == "risk_level_table":
        return load_risk_level_table(scenario)
    cells = cells if cells is not None else load_cell_table(scenario)
    est = RiskLevelEstimator.from_scenario(scenario).fit(cells, scenario.level_labels, scenario.outcome_labels)
    return est.risk_levels_


def estimate(scenario: Scenario | str | Path) -> tuple[CellTable | None, RiskLevels]:
    """The cell table (None for a risk-level table) and the risk levels of a scenario."""
    scenario = as_scenario(scenario)
    if scenario.data.kind == "risk_level_table":
        return None, estimate_risk_levels(scenario)
    cells = load_cell_table(scenario)
    return cells, estimate_risk_levels(scenario, cells)
