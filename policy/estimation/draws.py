"""Draws of risk levels (posterior draws or replicates of any estimator) from a risk-level table.

A risk-level table may carry a ``draw`` column: then it holds, for every draw, one full table
(every cell x outcome kind once), each draw validated like a table without draws (probabilities
in [0, 1] summing to 1, zero where an outcome is declared impossible, the same cells and weights
in every draw). Rows whose draw is ``point`` are the point estimate the user marks; without them
the point estimate is the mean over draws (the mean of the risk-level probabilities, hence of the
outcome probabilities, which are linear in them). :func:`policy.estimation.from_scenario.risk_level_draws_from_frame` returns the
point :class:`~policy.estimation.strata.RiskLevels` and the draws as one array of outcome
probabilities of shape (n_draws, n_cells, J, L), the layout every comparison figure is computed on.

:func:`risk_level_draws_frame` writes such a table from replicate arrays (the tool's own bootstrap
replicates, for instance), so the two routes can be checked against each other.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.estimation.strata import RiskLevels, outcome_probabilities, risk_level_distribution
from policy.inputs.scenario import Scenario

__all__ = ["POINT", "RiskLevelDraws", "parse_draws", "read_draws", "risk_level_draws_frame"]

#: the draw value that marks the user's point estimate
POINT = "point"


@dataclass(frozen=True)
class RiskLevelDraws:
    """The point risk levels and the draws of a risk-level table.

    Attributes
    ----------
    point : RiskLevels
        The rows marked ``point``, or the mean over draws.
    p : ndarray of shape (n_draws, n_cells, J, L)
        Outcome probabilities under each decision in every draw, cells in ``point``'s order.
    draw_ids : list of str
    point_source : str
        'marked' or 'mean over draws'.
    """

    point: RiskLevels
    p: np.ndarray
    draw_ids: list
    point_source: str

    @property
    def n_draws(self) -> int:
        return int(self.p.shape[0])


def _shown(value) -> str:
    return repr(value.item() if isinstance(value, np.generic) else value)


def _cell_label(frame: pd.DataFrame, row: int, scenario: Scenario) -> str:
    return ", ".join(f"{c}={_shown(frame[c].iloc[row])}" for c in scenario.cell_columns) + f", outcome={frame['outcome'].iloc[row]!r}"


def _check_values(frame: pd.DataFrame, draws: np.ndarray, scenario: Scenario, file: str, offset: int = 0) -> np.ndarray:
    """Probabilities in [0, 1] summing to 1, checked on a block of rows at once (the message names
    the draw, the cell, the value and the file row); returns them as an array."""
    L = len(scenario.levels)
    q_cols = [f"risk_level_{r}" for r in range(L + 1)]
    q = frame[q_cols].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(q) | (q < -1e-9) | (q > 1 + 1e-9)
    if bad.any():
        row, col = map(int, np.argwhere(bad)[0])
        raise InputError(
            f"{file}: draw {draws[row]!r}, cell {_cell_label(frame, row, scenario)}: column {q_cols[col]!r} must hold a "
            f"probability in [0, 1]; got {_shown(frame[q_cols[col]].iloc[row])} (row {offset + row + 1}).")
    off = np.abs(q.sum(axis=1) - 1.0) > 1e-6
    if off.any():
        row = int(np.flatnonzero(off)[0])
        raise InputError(
            f"{file}: draw {draws[row]!r}, cell {_cell_label(frame, row, scenario)}: risk_level_0..risk_level_{L} must sum "
            f"to 1 within 1e-6; they sum to {q[row].sum():.8f} (row {offset + row + 1}).")
    return q


def _labels(frame: pd.DataFrame, file: str, offset: int = 0) -> np.ndarray:
    draws = frame["draw"].astype(str).str.strip().to_numpy()
    empty = (draws == "") | frame["draw"].isna().to_numpy()
    if empty.any():
        row = int(np.flatnonzero(empty)[0])
        raise InputError(f"{file}: column 'draw' is empty in row {offset + row + 1}; expected a draw label (or {POINT!r}).")
    return draws


def _row_keys(frame: pd.DataFrame, columns) -> np.ndarray:
    key = frame[columns[0]].astype(str)
    for c in columns[1:]:
        key = key + "\x1f" + frame[c].astype(str)
    return key.to_numpy()


class _Filler:
    """Fills the draws' outcome probabilities block by block, checked against the first draw."""

    def __init__(self, template: RiskLevels, ids: list, scenario: Scenario, file: str):
        self.rl0, self.ids, self.scenario, self.file = template, ids, scenario, file
        cols = list(scenario.cell_columns)
        J = len(scenario.outcomes)
        cell_keys = _row_keys(template.layout.frame[cols].reset_index(drop=True), cols)
        self.index = pd.Index(np.char.add(np.repeat(cell_keys.astype(str), J),
                                          np.tile(np.array(["\x1f" + k for k in scenario.outcome_keys]), len(cell_keys))))
        self.n, self.J, self.L = len(template.weights), J, len(scenario.levels)
        self.slot = {d: i for i, d in enumerate(i for i in ids if i != POINT)}
        self.p = np.zeros((len(self.slot), self.n, J, self.L))
        self.p_point = np.zeros((self.n, J, self.L)) if POINT in ids else None
        self.seen = np.zeros((len(ids), self.n * J), dtype=np.int32)
        self.id_index = pd.Index(ids)

    def add(self, frame: pd.DataFrame, draws: np.ndarray, offset: int) -> None:
        q = _check_values(frame, draws, self.scenario, self.file, offset)
        cols = list(self.scenario.cell_columns) + ["outcome"]
        k = self.index.get_indexer(_row_keys(frame, cols))
        if (k < 0).any():
            row = int(np.flatnonzero(k < 0)[0])
            raise InputError(f"{self.file}: draw {draws[row]!r} has a row for cell {_cell_label(frame, row, self.scenario)} "
                             f"(row {offset + row + 1}) that draw {self.ids[0]!r} does not have; every draw needs exactly one "
                             "row for each cell x outcome of every other draw.")
        d = self.id_index.get_indexer(draws)
        np.add.at(self.seen, (d, k), 1)
        cell, j = k // self.J, k % self.J
        weights = pd.to_numeric(frame["cases"], errors="coerce").to_numpy(dtype=np.float64)
        w0 = self.rl0.weights[cell]
        diff = ~(np.abs(weights - w0) <= 1e-9 * np.maximum(1.0, w0))
        if diff.any():
            row = int(np.flatnonzero(diff)[0])
            raise InputError(f"{self.file}: column 'cases' of draw {draws[row]!r} differs from draw {self.ids[0]!r} in cell "
                             f"{_cell_label(frame, row, self.scenario)}: {_shown(frame['cases'].iloc[row])} against "
                             f"{w0[row]!r} (row {offset + row + 1}); the weights must be the same in every draw.")
        q = np.clip(q, 0.0, 1.0)
        p = outcome_probabilities(q / q.sum(axis=1, keepdims=True))
        point = draws == POINT
        if point.any():
            self.p_point[cell[point], j[point]] = p[point]
        slot = np.array([self.slot.get(x, -1) for x in self.ids])[d[~point]]
        self.p[slot, cell[~point], j[~point]] = p[~point]

    def finish(self) -> RiskLevelDraws:
        if (self.seen != 1).any():
            d, k = map(int, np.argwhere(self.seen != 1)[0])
            what = "has no row" if self.seen[d, k] == 0 else "has more than one row"
            cell = self.rl0.layout.frame.iloc[k // self.J]
            label = ", ".join(f"{c}={_shown(cell[c])}" for c in self.scenario.cell_columns)
            raise InputError(f"{self.file}: draw {self.ids[d]!r} {what} for cell {label}, "
                             f"outcome={self.scenario.outcome_keys[k % self.J]!r}; every draw needs exactly one row for "
                             "each cell x outcome of every other draw.")
        for j, o in enumerate(self.scenario.outcomes):
            if o.impossible_from is not None:
                viol = self.p[:, :, j, o.impossible_from:].max(axis=(1, 2))
                if (viol > 1e-6).any():
                    d = int(np.flatnonzero(viol > 1e-6)[0])
                    raise InputError(f"{self.file}: draw {list(self.slot)[d]!r}: outcome {o.key!r} is declared impossible "
                                     f"from level {o.impossible_from} on, but the draw gives it probability {viol[d]:.4f} "
                                     f"there (risk_level_{o.impossible_from + 1} and above must be 0).")
        if self.p_point is not None:
            point, source = replace(self.rl0, p=self.p_point), "marked"
        else:
            # the mean of the risk-level probabilities is the mean of the outcome probabilities (linear in them)
            point, source = replace(self.rl0, p=self.p.mean(axis=0)), "mean over draws"
        point = replace(point, source=f"{self.rl0.source.split(' (draw')[0]} (point: {source}; {len(self.slot)} draws)")
        return RiskLevelDraws(point, self.p, list(self.slot), source)


def _template(frame: pd.DataFrame, ids: list, scenario: Scenario, parse, file: str) -> RiskLevels:
    """The first draw parsed in full (cells, structure, weights, costs, impossible outcomes)."""
    if not [d for d in ids if d != POINT]:
        raise InputError(f"{file}: column 'draw' holds only {POINT!r} rows; expected at least one draw besides the point.")
    try:
        return parse(frame.reset_index(drop=True), scenario, f"{file} (draw {ids[0]!r}; rows counted within the draw)")
    except InputError as err:
        raise InputError(str(err)) from None


def parse_draws(frame: pd.DataFrame, scenario: Scenario, parse, file: str | None = None) -> RiskLevelDraws:
    """Validate a risk-level table with a ``draw`` column; the point risk levels and the draws
    (called as :func:`policy.estimation.from_scenario.risk_level_draws_from_frame`).

    Parameters
    ----------
    frame : DataFrame
        The columns of a risk-level table (``risk_levels_from_frame``) and ``draw`` (any label;
        ``point`` marks the point estimate).
    scenario : Scenario
    parse : callable
        ``parse(frame, scenario, file) -> RiskLevels``: the validation of one table without draws.
    file : str, optional
        Named in messages.
    """
    file = file or frame.attrs.get("file", "risk-level table")
    if "draw" not in frame.columns:
        raise InputError(f"{file}: a table of draws needs a 'draw' column.")
    draws = _labels(frame, file)
    _check_values(frame, draws, scenario, file)
    ids = list(dict.fromkeys(draws))
    filler = _Filler(_template(frame[draws == ids[0]], ids, scenario, parse, file), ids, scenario, file)
    filler.add(frame, draws, 0)
    return filler.finish()


def read_draws(path, scenario: Scenario, parse, chunk_rows: int = 500_000) -> RiskLevelDraws:
    """Read a CSV or Parquet risk-level table with draws in blocks of ``chunk_rows`` rows, so that
    the table is never held whole: one pass for the draw labels, one for the first draw's rows, one
    to fill the draws (their outcome probabilities are the one array kept, n_draws x cells x J x L).
    A Parquet file is read in record batches of the same size (pyarrow's ``iter_batches``)."""
    from pathlib import Path

    path = Path(path)
    file = path.name
    parquet = path.suffix.lower() == ".parquet"

    def blocks(usecols=None, **kw):
        offset = 0
        if parquet:
            import pyarrow.parquet as pq

            for batch in pq.ParquetFile(path).iter_batches(batch_size=chunk_rows, columns=usecols):
                block = batch.to_pandas()
                yield block, offset
                offset += len(block)
            return
        kw.setdefault("dtype", {"draw": str, "aid_recommends": str})
        for block in pd.read_csv(path, chunksize=chunk_rows, encoding="utf-8", usecols=usecols, **kw):
            yield block, offset
            offset += len(block)

    ids: dict = {}
    for block, offset in blocks(usecols=["draw"], dtype={"draw": str}, keep_default_na=False):
        ids.update(dict.fromkeys(_labels(block, file, offset)))
    ids = list(ids)
    first = [block[_labels(block, file, offset) == ids[0]] for block, offset in blocks()]
    filler = _Filler(_template(pd.concat(first, ignore_index=True), ids, scenario, parse, file), ids, scenario, file)
    del first
    for block, offset in blocks():
        filler.add(block, _labels(block, file, offset), offset)
    return filler.finish()


def risk_level_draws_frame(point: RiskLevels, p_draws: np.ndarray, cell_columns, draw_ids=None,
                           cell_values=None) -> pd.DataFrame:
    """A long risk-level table with draws: the point rows (draw ``point``) then every draw.

    Parameters
    ----------
    point : RiskLevels
        Gives the cells, weights, cost columns and the point rows.
    p_draws : ndarray of shape (n_draws, n_cells, J, L)
        Outcome probabilities in every draw (e.g. the tool's own bootstrap replicates).
    cell_columns : sequence of str
        The scenario's cell columns, in the layout.
    draw_ids : sequence, optional
        Labels of the draws (default 1..n_draws).
    cell_values : mapping of str to ndarray of shape (n_cells,), optional
        Further per-cell columns (what courts did, the aid's recommendation:
        :mod:`policy.decision.table_rules`), written on the point rows and left empty in the draws'.
    """
    p_draws = np.asarray(p_draws, dtype=np.float64)
    B, n, J, L = p_draws.shape
    ids = [str(i + 1) for i in range(B)] if draw_ids is None else [str(d) for d in draw_ids]
    cells = point.layout.frame[list(cell_columns)].astype(str).reset_index(drop=True)
    parts = []
    for label, p in [(POINT, point.p)] + list(zip(ids, p_draws)):
        q = np.clip(risk_level_distribution(p), 0.0, 1.0)
        q = q / q.sum(axis=-1, keepdims=True)
        part = cells.loc[np.repeat(np.arange(n), J)].reset_index(drop=True)
        part["outcome"] = np.tile(np.asarray(point.outcome_keys, dtype=object), n)
        part["draw"] = label
        part["cases"] = np.repeat(point.weights, J)
        for r in range(L + 1):
            part[f"risk_level_{r}"] = q[:, :, r].reshape(-1)
        for col, v in point.cell_costs.items():
            part[col] = np.repeat(v, J)
        for col, v in (cell_values or {}).items():
            v = np.asarray(v)
            part[col] = np.repeat(v, J) if label == POINT else pd.Series([None] * (n * J), dtype=object if v.dtype.kind in "OUS" else np.float64)
        parts.append(part)
    return pd.concat(parts, ignore_index=True)
