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

__all__ = ["POINT", "RiskLevelDraws", "parse_draws", "risk_level_draws_frame"]

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


def _check_values(frame: pd.DataFrame, draws: np.ndarray, scenario: Scenario, file: str) -> None:
    """Probabilities in [0, 1] summing to 1, checked on the whole table at once; the message names
    the draw, the cell and the value."""
    L = len(scenario.levels)
    q_cols = [f"risk_level_{r}" for r in range(L + 1)]
    missing = [c for c in q_cols if c not in frame.columns]
    if missing:
        return  # risk_levels_from_frame names the missing columns
    q = frame[q_cols].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(q) | (q < -1e-9) | (q > 1 + 1e-9)
    if bad.any():
        row, col = map(int, np.argwhere(bad)[0])
        raise InputError(
            f"{file}: draw {draws[row]!r}, cell {_cell_label(frame, row, scenario)}: column {q_cols[col]!r} must hold a "
            f"probability in [0, 1]; got {_shown(frame[q_cols[col]].iloc[row])} (row {row + 1}; {int(bad.any(axis=1).sum())} rows "
            "with such values).")
    off = np.abs(q.sum(axis=1) - 1.0) > 1e-6
    if off.any():
        row = int(np.flatnonzero(off)[0])
        raise InputError(
            f"{file}: draw {draws[row]!r}, cell {_cell_label(frame, row, scenario)}: risk_level_0..risk_level_{L} must sum "
            f"to 1 within 1e-6; they sum to {q[row].sum():.8f} (row {row + 1}; {int(off.sum())} rows off).")


def parse_draws(frame: pd.DataFrame, scenario: Scenario, parse, file: str | None = None) -> RiskLevelDraws:
    """Validate a risk-level table with a ``draw`` column; the point risk levels and the draws
    (called as :func:`policy.estimation.from_scenario.risk_level_draws_from_frame`).

    Parameters
    ----------
    frame : DataFrame
        The columns of a risk-level table (``risk_levels_from_frame``)
        and ``draw`` (any label; ``point`` marks the point estimate).
    scenario : Scenario
    parse : callable
        ``parse(frame, scenario, file) -> RiskLevels``: the validation of one table without draws.
    file : str, optional
        Named in messages.
    """
    file = file or frame.attrs.get("file", "risk-level table")
    if "draw" not in frame.columns:
        raise InputError(f"{file}: a table of draws needs a 'draw' column.")
    draws = frame["draw"].astype(str).str.strip().to_numpy()
    if (draws == "").any() or frame["draw"].isna().any():
        row = int(np.flatnonzero((draws == "") | frame["draw"].isna().to_numpy())[0])
        raise InputError(f"{file}: column 'draw' is empty in row {row + 1}; expected a draw label (or {POINT!r}).")
    _check_values(frame, draws, scenario, file)
    ids = list(dict.fromkeys(draws))
    ids_draws = [d for d in ids if d != POINT]
    if not ids_draws:
        raise InputError(f"{file}: column 'draw' holds only {POINT!r} rows; expected at least one draw besides the point.")
    d_idx = pd.Index(ids).get_indexer(draws)
    # the first draw is parsed in full (cells, structure, weights, costs, impossible outcomes); every
    # other draw is checked against it and filled in at once, without a per-draw pass
    d0 = ids[0]
    rows0 = np.flatnonzero(d_idx == 0)
    try:
        rl0 = parse(frame.iloc[rows0].reset_index(drop=True), scenario, f"{file} (draw {d0!r}; rows counted within the draw)")
    except InputError as err:
        raise InputError(str(err)) from None
    cols = list(scenario.cell_columns)
    key_frame = frame[cols + ["outcome"]].astype(str)
    key = key_frame.groupby(cols + ["outcome"], sort=False).ngroup().to_numpy()
    n_keys = int(key.max()) + 1
    J, n0 = len(scenario.outcomes), len(rl0.weights)
    # each key's cell position in the first draw's layout and its outcome position
    layout = rl0.layout.frame[cols].astype(str).reset_index(drop=True)
    layout["_cell"] = np.arange(n0)
    first = key_frame.iloc[rows0].reset_index(drop=True)
    first["_key"] = key[rows0]
    first = first.merge(layout, on=cols, how="left")
    cell_of = np.full(n_keys, -1)
    cell_of[first["_key"].to_numpy()] = first["_cell"].to_numpy()
    j_of = np.full(n_keys, -1)
    j_of[first["_key"].to_numpy()] = pd.Index(scenario.outcome_keys).get_indexer(first["outcome"])
    counts = np.bincount(d_idx * n_keys + key, minlength=len(ids) * n_keys).reshape(len(ids), n_keys)
    if (counts != 1).any():
        d, k = map(int, np.argwhere(counts != 1)[0])
        row = int(np.flatnonzero(key == k)[0])
        what = "has no row" if counts[d, k] == 0 else "has more than one row"
        other = ids[0] if d else ids[int(np.flatnonzero(counts[:, k])[0])]
        raise InputError(f"{file}: draw {ids[d]!r} {what} for cell {_cell_label(frame, row, scenario)} (draw {other!r} has "
                         "one); every draw needs exactly one row for each cell x outcome of every other draw.")
    L = len(scenario.levels)
    q_cols = [f"risk_level_{r}" for r in range(L + 1)]
    q = np.clip(frame[q_cols].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64), 0.0, 1.0)
    q /= q.sum(axis=1, keepdims=True)
    qq = np.zeros((len(ids), n0, J, L + 1))
    qq[d_idx, cell_of[key], j_of[key]] = q
    del q
    weights = pd.to_numeric(frame["cases"], errors="coerce").to_numpy(dtype=np.float64)
    w0 = rl0.weights[cell_of[key]]
    diff = ~(np.abs(weights - w0) <= 1e-9 * np.maximum(1.0, w0))
    if diff.any():
        row = int(np.flatnonzero(diff)[0])
        raise InputError(f"{file}: column 'cases' of draw {draws[row]!r} differs from draw {d0!r} in cell "
                         f"{_cell_label(frame, row, scenario)}: {_shown(frame['cases'].iloc[row])} against "
                         f"{rl0.weights[cell_of[key[row]]]!r}; the weights must be the same in every draw.")
    all_p = outcome_probabilities(qq)
    del qq
    for j, o in enumerate(scenario.outcomes):
        if o.impossible_from is not None:
            viol = all_p[:, :, j, o.impossible_from:].max(axis=(1, 2))
            if (viol > 1e-6).any():
                d = int(np.flatnonzero(viol > 1e-6)[0])
                raise InputError(f"{file}: draw {ids[d]!r}: outcome {o.key!r} is declared impossible from level "
                                 f"{o.impossible_from} on, but the draw gives it probability {viol[d]:.4f} there "
                                 f"(risk_level_{o.impossible_from + 1} and above must be 0).")
    parsed = {d: replace(rl0, p=all_p[i]) for i, d in enumerate(ids) if d == POINT}
    p = all_p[[i for i, d in enumerate(ids) if d != POINT]]
    del all_p
    if POINT in parsed:
        point, source = parsed[POINT], "marked"
    else:
        point, source = replace(rl0, p=outcome_probabilities(risk_level_distribution(p).mean(axis=0))), "mean over draws"
    point = replace(point, source=f"{point.source.split(' (draw')[0]} (point: {source}; {len(ids_draws)} draws)")
    return RiskLevelDraws(point, p, ids_draws, source)


def risk_level_draws_frame(point: RiskLevels, p_draws: np.ndarray, cell_columns, draw_ids=None) -> pd.DataFrame:
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
        parts.append(part)
    return pd.concat(parts, ignore_index=True)
