"""Rules to compare with the optimum: candidate rules written in the scenario
(``[[candidate_rules]]``), what courts did in each arm (observed decision shares per cell), and
the risk aid's own recommendation.

Each is a :class:`~policy.decision.rules.Rule` over the same rule cells, possibly with split
decisions (observed rules), so that every rule is scored by the same arithmetic.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.inputs.cells import CellLayout, CellTable
from policy.errors import InputError
from policy.decision.rules import Rule
from policy.inputs.scenario import Key, Scenario, read_section, register_section
from policy.inputs.tables import read_table


__all__ = ["CandidateSpec", "candidate_rule", "candidate_rules", "observed_rules", "aid_rule", "observed_delta"]


CANDIDATE_KEYS = (
    Key("name", (str,), True, doc="the candidate's name in outputs"),
    Key("note", (str,), False, "", "what the candidate is and who proposed it"),
    Key("table", (str,), doc="CSV or Parquet file (relative to the scenario) with one row per rule cell: "
                             "the candidate's columns and a 'level' column (decision value or label)"),
    Key("rows", (list,), doc="the same table inline: a list of tables, each naming the candidate's columns and 'level'"),
    Key("score_at_least", (dict,), doc="threshold form on the aid's score: decision value or label = the lowest score "
                                       "value that gets it, e.g. { recognizance = 1, supervision = 3, bond = 5 }"),
)


@dataclass(frozen=True)
class CandidateSpec:
    """A candidate rule as written in the scenario, validated for form (not yet against data)."""

    name: str
    note: str
    where: str
    rows: tuple[Mapping[str, Any], ...] | None = None
    path: Path | None = None
    thresholds: tuple[tuple[int, Any], ...] | None = None


def _parse_candidates(raw: Any, scenario: Scenario) -> tuple[CandidateSpec, ...]:
    if raw is None:
        return ()
    file = scenario.file
    if not isinstance(raw, list):
        raise InputError(f"{file}: [[candidate_rules]] must be an array of tables (write [[candidate_rules]] before each one).")
    out, names = [], set()
    for i, entry in enumerate(raw, 1):
        where = f"[[candidate_rules]] #{i}"
        c = read_section(entry, CANDIDATE_KEYS, where, file)
        where = f"{where} ({c['name']!r})"
        if c["name"] in names:
            raise InputError(f"{file}: {where}: candidate name {c['name']!r} is used twice.")
        names.add(c["name"])
        forms = [k for k in ("table", "rows", "score_at_least") if c[k] is not None]
        if len(forms) != 1:
            raise InputError(f"{file}: {where} must give exactly one of table, rows, score_at_least; got {', '.join(forms) or 'none'}.")
        if c["table"] is not None:
            path = (scenario.base_dir / c["table"]).resolve()
            if path.suffix.lower() not in (".csv", ".parquet"):
                raise InputError(f"{file}: {where} table {c['table']!r} must end in .csv or .parquet.")
            out.append(CandidateSpec(c["name"], c["note"], where, path=path))
        elif c["rows"] is not None:
            rows = c["rows"]
            if not rows or not all(isinstance(r, dict) for r in rows):
                raise InputError(f"{file}: {where} rows must be a non-empty list of tables like {{ aid_tier = 1, level = \"recognizance\" }}.")
            out.append(CandidateSpec(c["name"], c["note"], where, rows=tuple(rows)))
        else:
            if scenario.aid.score is None:
                raise InputError(f"{file}: {where} uses score_at_least, but [aid] names no score column.")
            thresholds = sorted((scenario.level_index(k, f"{where} score_at_least level"), v)
                                for k, v in c["score_at_least"].items())
            if not thresholds:
                raise InputError(f"{file}: {where} score_at_least is empty; give each level the lowest score that gets it.")
            for level, value in thresholds:
                if not isinstance(value, (int, str)) or isinstance(value, bool):
                    raise InputError(f"{file}: {where} score_at_least.{scenario.level_values[level]} must be a score value "
                                     f"(an integer or a string); got {value!r}.")
            out.append(CandidateSpec(c["name"], c["note"], where, thresholds=tuple(thresholds)))
    return tuple(out)


register_section("[[candidate_rules]]", CANDIDATE_KEYS, _parse_candidates)


def _level_position(value: Any, level_values: Sequence[str], level_labels: Sequence[str]) -> int:
    text = str(value)
    for i, (v, lab) in enumerate(zip(level_values, level_labels)):
        if text in (v, lab):
            return i
    return -1


def _whole_text(value: Any) -> str:
    """Text of a value, with a float that is a whole number written as an integer (3.0 -> '3')."""
    v = value.item() if isinstance(value, np.generic) else value
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def _value_codes(values: Sequence[Any], column: str, layout: CellLayout, what: str) -> np.ndarray:
    """Category positions of written values (matched as text); unknown values raise."""
    cats = layout.categories(column)
    text = {str(c): i for i, c in enumerate(cats)}
    # a whole number stored as a float (Parquet 3.0) is the value 3 written in the scenario
    text.update({_whole_text(c): i for i, c in enumerate(cats) if _whole_text(c) not in text})
    codes = np.array([text.get(str(v), text.get(_whole_text(v), -1)) for v in values], dtype=np.int64)
    if (codes < 0).any():
        first = int(np.flatnonzero(codes < 0)[0])
        bad = sorted({str(v) for v, c in zip(values, codes) if c < 0})
        raise InputError(
            f"{what}: column {column!r} has value {values[first]!r} (row {first + 1}; {len(bad)} unknown values: "
            f"{', '.join(bad[:5])}), which no cell of the data has; expected one of: {', '.join(map(str, cats))}."
        )
    return codes


def candidate_rule(spec: CandidateSpec, layout: CellLayout, level_values: Sequence[str], level_labels: Sequence[str],
                   weights: np.ndarray | None = None, file: str = "<scenario>") -> Rule:
    """Build a candidate's :class:`Rule` on the data's cells; every rule cell must get a level.

    Raises
    ------
    InputError
        When the candidate names a column that is not a cell column, a value no cell has, a level
        that is not declared, a rule cell twice, or leaves a rule cell present in the data
        without a level.
    """
    what = f"{file}: {spec.where}"
    if spec.thresholds is not None:
        return _threshold_rule(spec, layout, level_values, level_labels, weights, what)
    if spec.path is not None:
        frame = read_table(spec.path, None, f"candidate rule table ({spec.where})")
        what = f"{spec.path.name} (candidate {spec.name!r}, {file} {spec.where.split(' (')[0]})"
    else:
        frame = pd.DataFrame(list(spec.rows))
    if "level" not in frame.columns:
        raise InputError(f"{what}: no 'level' column; every row must name the decision level of its rule cell.")
    columns = [c for c in frame.columns if c != "level"]
    if not columns:
        raise InputError(f"{what}: no rule columns besides 'level'; name the cell columns the rule uses.")
    for c in columns:
        if c not in layout.columns:
            raise InputError(f"{what}: column {c!r} is not a cell column; expected some of: {', '.join(layout.columns)}.")
    if frame[columns].isna().any().any():
        row = int(np.flatnonzero(frame[columns].isna().any(axis=1).to_numpy())[0])
        missing = [c for c in columns if pd.isna(frame[c].iloc[row])]
        raise InputError(f"{what}: row {row + 1} gives no value for {missing[0]!r}; every row must name a value of each rule column.")
    levels = np.array([_level_position(v, level_values, level_labels) for v in frame["level"]], dtype=np.int64)
    if (levels < 0).any():
        row = int(np.flatnonzero(levels < 0)[0])
        raise InputError(f"{what}: row {row + 1} has level {frame['level'].iloc[row]!r}, which is not a declared decision level; "
                         f"expected one of: {', '.join(level_values)}.")
    codes = [_value_codes(frame[c].tolist(), c, layout, what) for c in columns]
    sizes = [len(layout.categories(c)) for c in columns]
    key = np.ravel_multi_index(codes, sizes)
    uniq, first, count = np.unique(key, return_index=True, return_counts=True)
    if (count > 1).any():
        dup = np.flatnonzero(key == uniq[np.flatnonzero(count > 1)[0]])
        raise InputError(f"{what}: rows {dup[0] + 1} and {dup[1] + 1} give the same rule cell "
                         f"({_describe(frame.iloc[dup[0]], columns)}); each rule cell needs exactly one level.")
    index, groups = layout.group_by(columns)
    gkey = np.ravel_multi_index([groups[c].cat.codes.to_numpy(dtype=np.int64) for c in columns], sizes)
    pos = np.searchsorted(uniq, gkey)
    found = (pos < len(uniq)) & (uniq[np.minimum(pos, len(uniq) - 1)] == gkey)
    if not found.all():
        miss = np.flatnonzero(~found)
        cases = np.bincount(index, weights=weights, minlength=len(groups)) if weights is not None else None
        first_text = _describe(groups.iloc[miss[0]], columns)
        extra = f", {cases[miss[0]]:,.0f} cases" if cases is not None else ""
        raise InputError(f"{what}: leaves {len(miss)} rule cells of the data without a level (first: {first_text}{extra}); "
                         "give every combination of its columns a level.")
    group_level = levels[first][pos]
    unused = len(uniq) - len(np.unique(pos))
    note = spec.note
    if unused:
        note = (note + "; " if note else "") + f"{unused} rows name rule cells with no case in the data"
    return Rule.from_levels(spec.name, "candidate", layout, columns, group_level, level_values, level_labels, weights, note)


def _describe(row: pd.Series, columns: Sequence[str]) -> str:
    return ", ".join(f"{c}={v.item() if isinstance(v, np.generic) else v!r}" for c, v in ((c, row[c]) for c in columns))


def _threshold_rule(spec: CandidateSpec, layout: CellLayout, level_values, level_labels, weights, what: str) -> Rule:
    score = layout.score
    if score is None:
        raise InputError(f"{what}: score_at_least needs the aid's score column ([aid] score).")
    cats = layout.categories(score)
    positions = _value_codes([v for _, v in spec.thresholds], score, layout, f"{what} score_at_least")
    levels = [lv for lv, _ in spec.thresholds]
    if (np.diff(positions) <= 0).any():
        i = int(np.flatnonzero(np.diff(positions) <= 0)[0])
        raise InputError(f"{what}: score_at_least must rise with the level: {level_values[levels[i + 1]]!r} starts at "
                         f"{spec.thresholds[i + 1][1]!r}, not above {level_values[levels[i]]!r} at {spec.thresholds[i][1]!r}.")
    present = np.unique(layout.codes(score))
    if present.min() < positions[0]:
        below = [str(cats[c]) for c in present if c < positions[0]]
        raise InputError(f"{what}: scores {', '.join(below)} (present in the data) are below every threshold and would get "
                         f"no level; start the most lenient listed level at {cats[present.min()]!r} or lower.")
    group_level = np.asarray(levels)[np.searchsorted(positions, np.arange(len(cats)), side="right") - 1]
    index, groups = layout.group_by([score])
    return Rule.from_levels(spec.name, "candidate", layout, [score], group_level[groups[score].cat.codes.to_numpy()],
                            level_values, level_labels, weights, spec.note)


def candidate_rules(scenario: Scenario, layout: CellLayout, weights: np.ndarray | None = None) -> list[Rule]:
    """The scenario's candidate rules built on the data's cells."""
    specs = scenario.sections.get("candidate_rules") or ()
    return [candidate_rule(s, layout, scenario.level_values, scenario.level_labels, weights, scenario.file) for s in specs]


# ----------------------------------------------------------------------------------------------
# Observed rules and the aid's recommendation
# ----------------------------------------------------------------------------------------------
def observed_delta(cases: np.ndarray, fill_index: np.ndarray, n_fill: int) -> tuple[np.ndarray, np.ndarray]:
    """Empirical decision distribution per cell, batched, with a fallback for empty cells.

    Parameters
    ----------
    cases : ndarray of shape (..., n_cells, L)
        Cases per cell and decision level in one arm.
    fill_index : ndarray of shape (n_cells,)
        Coarser group of each cell (e.g. its rule cell) lending its mix to empty cells.
    n_fill : int

    Returns
    -------
    delta : ndarray of shape (..., n_cells, L)
        cases / cases.sum(-1); where a cell has none, the group's mix, else the arm's overall mix.
    borrowed : ndarray of shape (..., n_cells), bool
        Cells whose mix was borrowed.
    """
    cases = np.asarray(cases, dtype=np.float64)
    member = np.eye(n_fill)[fill_index]  # (n_cells, n_fill)
    group = member.T @ cases  # (..., n_fill, L)
    overall = cases.sum(axis=-2, keepdims=True)  # (..., 1, L)
    total = cases.sum(axis=-1, keepdims=True)
    g_cell = group[..., fill_index, :]
    g_total = g_cell.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        delta = np.where(total > 0, cases / total,
                         np.where(g_total > 0, g_cell / g_total, overall / overall.sum(axis=-1, keepdims=True)))
    return delta, total[..., 0] == 0


def observed_rules(cells: CellTable, aid_name: str = "the risk aid", level_labels: Sequence[str] | None = None) -> list[Rule]:
    """What courts did: one per-cell rule per arm (one rule without an arm column).

    The rule of arm a gives each cell the decision shares of its cases in that arm; a cell with
    no case in the arm borrows the arm's mix in its rule cell (see :func:`observed_delta`).
    """
    index, groups = cells.layout.rule_index()
    out = []
    for a, arm in enumerate(cells.arms):
        delta, borrowed = observed_delta(cells.cases[:, a, :], index, len(groups))
        if arm is None:
            name = "courts (observed)"
        else:
            name = f"courts, {aid_name} {'shown' if arm == 1 else 'not shown'}"
        w = cells.weights.astype(np.float64)
        note = ""
        if borrowed.any():
            note = (f"{int(borrowed.sum())} cells ({w[borrowed].sum() / w.sum():.1%} of cases) had no case in this arm; "
                    "their decision mix is the arm's mix in their rule cell")
        out.append(Rule.per_cell(name, "observed", cells.layout, delta, cells.levels, level_labels or cells.levels, w, note))
    return out


def aid_rule(cells: CellTable, aid_name: str = "the risk aid", level_labels: Sequence[str] | None = None) -> Rule | None:
    """The aid's recommendation as a rule: per cell, the shares of each recommended level."""
    if cells.recommended is None:
        return None
    rec = cells.recommended.sum(axis=1).astype(np.float64)
    delta = rec / rec.sum(axis=1, keepdims=True)
    constant = bool((delta.max(axis=1) == 1.0).all())
    note = ("one recommended level per cell" if constant else
            "the recommendation varies within some cells; its per-cell mix is held fixed across replicates")
    return Rule.per_cell(f"{aid_name} recommendation", "aid", cells.layout, delta, cells.levels,
                         level_labels or cells.levels, cells.weights.astype(np.float64), note)


# ----------------------------------------------------------------------------------------------
# Scoring rules, batched over replicates
