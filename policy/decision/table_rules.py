"""What courts did and what the aid recommends, read from optional columns of a risk-level table.

A risk-level table estimated elsewhere holds no cases, but it may say per cell what courts did and
which level the aid recommends, so that ``compare`` scores the same rules on it as on a case table:

- ``decision_share_<level>`` for every decision level (what courts did, no arm), or
  ``decision_share_<level>_not_shown`` and ``decision_share_<level>_shown`` (by arm: without and
  with the aid shown): each cell's share of decisions at each level, summing to 1;
- ``decision_cases_<level>`` with the same suffixes: the cases per decision level instead of
  shares (a cell with none in an arm borrows the arm's mix in its rule cell, as for a case table,
  :func:`policy.decision.candidates.observed_delta`);
- ``aid_recommends``: the decision level (value or label) the aid recommends in the cell.

The values belong to the cell: every outcome row of a cell repeats them. In a table with draws they
are read from the rows of the draw listed first in the file (the ``point`` rows of a table the tool
writes); the rows of the other draws may repeat them or leave them empty. The rules they give are
held fixed in every draw: their intervals carry the uncertainty of the risk levels only, not that
of the decision shares.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from policy.decision.candidates import observed_delta
from policy.decision.rules import Rule
from policy.errors import InputError
from policy.estimation.strata import RiskLevels
from policy.inputs.scenario import Scenario

__all__ = ["TableRules", "table_rule_columns", "table_rules", "rules_from_table_frame"]

#: column suffix of each arm: '' (no arm), then without and with the aid shown (arm 0, arm 1)
ARM_SUFFIXES = {"": None, "_not_shown": 0, "_shown": 1}
AID_COLUMN = "aid_recommends"
#: rows of a CSV read at once
CHUNK_ROWS = 500_000


@dataclass(frozen=True)
class TableRules:
    """The rules a risk-level table's optional columns give, and what it does not say.

    Attributes
    ----------
    aid : Rule or None
        The aid's recommendation (``aid_recommends``).
    observed : list of Rule
        What courts did: one rule without an arm, else one per arm present.
    missing : list of str
        What could not be scored for want of columns, in words.
    """

    aid: Rule | None = None
    observed: list = field(default_factory=list)
    missing: list = field(default_factory=list)

    @property
    def rules(self) -> list[Rule]:
        return ([self.aid] if self.aid is not None else []) + list(self.observed)


def _shown(value) -> str:
    return repr(value.item() if isinstance(value, np.generic) else value)


def table_rule_columns(columns, level_values) -> list[str]:
    """The optional rule columns among ``columns`` (a table's header)."""
    names = {AID_COLUMN}
    for kind in ("share", "cases"):
        names |= {f"decision_{kind}_{v}{s}" for v in level_values for s in ARM_SUFFIXES}
    return [c for c in columns if c in names]


def _cell_positions(frame: pd.DataFrame, risk_levels: RiskLevels, columns, file: str, rows: np.ndarray) -> np.ndarray:
    def key(f):
        k = f[columns[0]].astype(str)
        for c in columns[1:]:
            k = k + "\x1f" + f[c].astype(str)
        return k.to_numpy()

    pos = pd.Index(key(risk_levels.layout.frame[list(columns)].reset_index(drop=True))).get_indexer(key(frame))
    if (pos < 0).any():
        i = int(np.flatnonzero(pos < 0)[0])
        raise InputError(f"{file}: row {rows[i]} names a cell that the risk-level table does not have "
                         f"({', '.join(f'{c}={_shown(frame[c].iloc[i])}' for c in columns)}).")
    return pos


def _per_cell(values: np.ndarray, pos: np.ndarray, n: int, column: str, file: str, rows: np.ndarray, shown) -> np.ndarray:
    """One value per cell; every row of a cell must give the same one."""
    out = np.full(n, np.nan, dtype=values.dtype) if values.dtype.kind == "f" else np.empty(n, dtype=values.dtype)
    out[pos] = values
    same = (out[pos] == values) | (pd.isna(out[pos]) & pd.isna(values))
    if not same.all():
        i = int(np.flatnonzero(~same)[0])
        raise InputError(f"{file}: column {column!r} must be the same in every outcome row of a cell; row {rows[i]} has "
                         f"{shown(i)} where another row of its cell has {_shown(out[pos[i]])}.")
    return out


def rules_from_table_frame(frame: pd.DataFrame, scenario: Scenario, risk_levels: RiskLevels, file: str,
                           rows: np.ndarray | None = None) -> TableRules:
    """Validate the optional rule columns of a risk-level table's rows (one draw) and build the rules.

    Parameters
    ----------
    frame : DataFrame
        The cell columns and the optional columns, one row per cell x outcome (one draw's rows).
    scenario : Scenario
    risk_levels : RiskLevels
        The table's point risk levels (its cells, weights and rule cells).
    file : str
        Named in messages.
    rows : ndarray of int, optional
        File row of each row (1-based, for messages; default 1..len(frame)).
    """
    rows = np.arange(1, len(frame) + 1) if rows is None else np.asarray(rows)
    present = set(table_rule_columns(frame.columns, scenario.level_values))
    values, labels = list(scenario.level_values), list(scenario.level_labels)
    cols = list(scenario.cell_columns)
    n = risk_levels.n_cells
    pos = _cell_positions(frame, risk_levels, cols, file, rows) if present else None
    w = np.asarray(risk_levels.weights, dtype=np.float64)
    aid_name = scenario.aid.name
    out = TableRules()
    arms = {}
    for suffix, arm in ARM_SUFFIXES.items():
        if all(any(f"decision_{kind}_{v}{suffix}" in present for v in values) for kind in ("share", "cases")):
            raise InputError(f"{file}: give either decision_share_<level>{suffix} or decision_cases_<level>{suffix} "
                             "columns, not both.")
        for kind in ("share", "cases"):
            want = [f"decision_{kind}_{v}{suffix}" for v in values]
            have = [c for c in want if c in present]
            if have and len(have) < len(want):
                raise InputError(f"{file}: column {have[0]!r} needs its companions for every decision level; missing: "
                                 f"{', '.join(c for c in want if c not in present)}.")
            if not have:
                continue
            block = frame[want].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
            bad = ~np.isfinite(block) | (block < 0) | ((block > 1 + 1e-9) if kind == "share" else False)
            if bad.any():
                i, j = map(int, np.argwhere(bad)[0])
                expected = "a share in [0, 1]" if kind == "share" else "a number of cases >= 0"
                raise InputError(f"{file}: column {want[j]!r} must hold {expected}; got {_shown(frame[want[j]].iloc[i])} "
                                 f"(row {rows[i]}).")
            cell = np.stack([_per_cell(block[:, j], pos, n, c, file, rows, lambda i, j=j: _shown(block[i, j]))
                             for j, c in enumerate(want)], axis=1)
            if np.isnan(cell).any():
                raise InputError(f"{file}: a cell has no row giving {want[0]!r} and its companions.")
            if kind == "share":
                off = np.abs(cell.sum(axis=1) - 1.0) > 1e-6
                if off.any():
                    g = int(np.flatnonzero(off)[0])
                    i = int(np.flatnonzero(pos == g)[0])
                    raise InputError(f"{file}: columns decision_share_<level>{suffix} must sum to 1 within 1e-6 in every "
                                     f"row; they sum to {cell[g].sum():.8f} in row {rows[i]}.")
                delta, borrowed = cell, np.zeros(n, dtype=bool)
            else:
                index, groups = risk_levels.layout.rule_index()
                delta, borrowed = observed_delta(cell, index, len(groups))
            arms[arm] = (delta, borrowed, kind)
    if None in arms and len(arms) > 1:
        raise InputError(f"{file}: give decision shares either without an arm (decision_share_<level>) or by arm "
                         "(decision_share_<level>_not_shown, decision_share_<level>_shown), not both.")
    for arm, (delta, borrowed, kind) in sorted(arms.items(), key=lambda a: -1 if a[0] is None else a[0]):
        name = "courts (observed)" if arm is None else f"courts, {aid_name} {'shown' if arm == 1 else 'not shown'}"
        note = (f"decision {'shares' if kind == 'share' else 'counts'} per cell from the risk-level table, held fixed "
                "in every draw")
        if borrowed.any():
            note += (f"; {int(borrowed.sum())} cells ({w[borrowed].sum() / w.sum():.1%} of cases) had no case in this "
                     "arm, their decision mix is the arm's mix in their rule cell")
        out.observed.append(Rule.per_cell(name, "observed", risk_levels.layout, delta, values, labels, w, note))
    if AID_COLUMN in present:
        text = frame[AID_COLUMN].astype(str).str.strip().to_numpy()
        level = np.array([values.index(t) if t in values else labels.index(t) if t in labels else -1 for t in text])
        if (level < 0).any():
            i = int(np.flatnonzero(level < 0)[0])
            raise InputError(f"{file}: column {AID_COLUMN!r} must name a decision level; got {_shown(frame[AID_COLUMN].iloc[i])} "
                             f"(row {rows[i]}); expected one of: {', '.join(values)}.")
        cell = _per_cell(level.astype(np.float64), pos, n, AID_COLUMN, file, rows, lambda i: repr(text[i]))
        if np.isnan(cell).any():
            raise InputError(f"{file}: a cell has no row giving {AID_COLUMN!r}.")
        out = TableRules(Rule.per_cell(f"{aid_name} recommendation", "aid", risk_levels.layout,
                                       np.eye(len(values))[cell.astype(np.int64)], values, labels, w,
                                       "one recommended level per cell, from the risk-level table"),
                         out.observed)
    if not out.observed:
        out.missing.append("what courts did with and without the aid (the observed rules need each cell's decision "
                           "shares by arm: columns decision_share_<level>_not_shown and decision_share_<level>_shown, "
                           "or decision_share_<level> without an arm)")
    if out.aid is None:
        out.missing.append(f"the aid's recommendation (column {AID_COLUMN}: the level it recommends in each cell)")
    return out


def _read_first_draw(scenario: Scenario, columns: list[str], header: list[str]) -> tuple[pd.DataFrame, np.ndarray]:
    """The rows of the draw listed first (all rows without draws) and their file rows."""
    path = scenario.data.path
    use = list(scenario.cell_columns) + columns + (["draw"] if "draw" in header else [])
    if path.suffix.lower() == ".parquet":
        import pyarrow.parquet as pq

        blocks = (b.to_pandas() for b in pq.ParquetFile(path).iter_batches(batch_size=CHUNK_ROWS, columns=use))
    else:
        blocks = pd.read_csv(path, usecols=use, chunksize=CHUNK_ROWS, encoding="utf-8",
                             dtype={"draw": str, "aid_recommends": str})
    parts, rows, first, offset = [], [], None, 0
    for block in blocks:
        keep = np.ones(len(block), dtype=bool)
        if "draw" in block.columns:
            label = block["draw"].astype(str).str.strip()
            first = label.iloc[0] if first is None and len(block) else first
            keep = (label == first).to_numpy()
        parts.append(block[keep])
        rows.append(offset + np.flatnonzero(keep) + 1)
        offset += len(block)
    return pd.concat(parts, ignore_index=True), np.concatenate(rows)


#: the last table's rules, by the file's state and the scenario's levels and cells
_LAST: dict = {}


def table_rules(scenario: Scenario, risk_levels: RiskLevels) -> TableRules:
    """The aid's recommendation and what courts did, from a risk-level table's optional columns.

    Parameters
    ----------
    scenario : Scenario
        A scenario whose ``[data]`` is a risk-level table.
    risk_levels : RiskLevels
        Its point risk levels (:func:`policy.estimation.from_scenario.load_risk_level_table`).
    """
    path = scenario.data.path
    st = path.stat()
    key = (str(path.resolve()), st.st_mtime_ns, st.st_size, scenario.level_values, scenario.level_labels,
           scenario.cell_columns, scenario.aid.name, risk_levels.n_cells)
    if key in _LAST:
        return _LAST[key]
    from policy.estimation.draws_netcdf import NETCDF_SUFFIXES, netcdf_cell_frame

    if path.suffix.lower() in NETCDF_SUFFIXES:  # the rule columns are coordinates along 'cell'
        frame = netcdf_cell_frame(path, scenario, table_rule_columns)
        out = rules_from_table_frame(frame, scenario, risk_levels, path.name)
        _LAST.clear()
        _LAST[key] = out
        return out
    if path.suffix.lower() == ".parquet":
        import pyarrow.parquet as pq

        header = list(pq.read_schema(path).names)
    else:
        header = list(pd.read_csv(path, nrows=0, encoding="utf-8").columns)
    wanted = table_rule_columns(header, scenario.level_values)
    if wanted:
        frame, rows = _read_first_draw(scenario, wanted, header)
        out = rules_from_table_frame(frame, scenario, risk_levels, path.name, rows)
    else:
        out = rules_from_table_frame(pd.DataFrame(columns=list(scenario.cell_columns)), scenario, risk_levels, path.name)
    _LAST.clear()
    _LAST[key] = out
    return out
