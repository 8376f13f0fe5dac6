"""The rows each constraint kind adds to the linear program, read one by one on small hand-made
cells: the coefficients, the sidedness, the scale, and the words of every row's label and of the
note a constraint carries when it has nothing to compare (these words reach constraints.csv's
``binding_rows`` and ``note`` columns and the notes of a solve).

Coefficients of the fairness, capacity and outcome-cap rows are checked against the independent
formulation in tests/constrained_reference.py (written cell by cell from docs/method.md section
5); the group-blind and monotone rows, and every label, are written out here by hand from the
definitions in the module docstring of policy/decision/constraints.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy.decision.constraints import (
    RowContext,
    Vocabulary,
    constraint_rows,
    spec_from_table,
)
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellLayout

from . import constrained_reference as ref

VALUES = ("ror", "cond", "bond")
LABELS = ("release", "conditions", "secured bond")
OUTCOMES = ("fta", "new")


def _risk_levels(cells: list[tuple], columns: dict[str, list], protected, rule, score="score", seed=0):
    """Risk levels of the given cells (tuples of category values in the order of ``columns``)."""
    frame = pd.DataFrame({name: pd.Categorical([c[i] for c in cells], categories=cats, ordered=True)
                          for i, (name, cats) in enumerate(columns.items())})
    layout = CellLayout(frame, tuple(protected), tuple(rule), score)
    rng = np.random.default_rng(seed)
    n = len(cells)
    # p falls with the level and every risk level holds some mass (q > 0)
    p0 = rng.uniform(0.3, 0.8, size=(n, 2))
    p = p0[..., None] * np.array([1.0, 0.6, 0.25])
    w = rng.integers(2, 30, n).astype(float)
    return RiskLevels(layout, VALUES, LABELS, OUTCOMES, OUTCOMES, w, p, np.zeros_like(p, dtype=bool), source="hand cells")


def _block(rl, columns, table):
    vocab = Vocabulary.of_risk_levels(rl, columns)
    spec = spec_from_table(table, vocab, 1)
    index, rule_cells = rl.layout.rule_index(columns)
    ctx = RowContext(index, len(rule_cells), rule_cells, rl.weights, rl.p, rl.q, rl.layout, vocab, rl.risk_level_names)
    return constraint_rows(spec, ctx), index, rule_cells


def _labels(block):
    return [block.labels(i) for i in range(block.n_rows)]


def _reference_rows(rl, columns, table):
    """The independent formulation's rows; for two-sided kinds only the '<= bound' half of each pair."""
    g_of, groups = ref.rule_cells(rl, columns)
    rows = ref.constraint_rows(rl, columns, table, len(groups), g_of, rl.layout.frame)
    coef = np.array([r[0] for r in rows])
    return coef[::2] if table["kind"] in ("principal_fairness", "statistical_parity", "conditional_parity") else coef


# score x kind x group, group "c" declared but without cells, and no cell of group b with kind y
PARITY_COLUMNS = {"score": [1, 2], "kind": ["x", "y"], "group": ["a", "b", "c"]}
PARITY_CELLS = [(s, k, g) for s in (1, 2) for k in ("x", "y") for g in ("a", "b") if not (k == "y" and g == "b")]


@pytest.fixture(scope="module")
def parity_cells():
    return _risk_levels(PARITY_CELLS, PARITY_COLUMNS, ["group"], ["score", "kind"])


def test_the_names_risk_levels_offer(parity_cells):
    vocab = Vocabulary.of_risk_levels(parity_cells)
    assert vocab == Vocabulary(VALUES, LABELS, OUTCOMES, ("group",), ("score", "kind", "group"), ("score", "kind"), "score")
    assert Vocabulary.of_risk_levels(parity_cells, ["kind"]).rule_columns == ("kind",)
    assert Vocabulary.of_risk_levels(parity_cells, []).rule_columns == ()


def test_statistical_parity_rows_labels_and_skipped_pairs(parity_cells):
    rl, columns = parity_cells, ("score", "kind")
    table = {"kind": "statistical_parity", "tolerance": 0.1}
    block, _, _ = _block(rl, columns, table)
    assert block.two_sided is True and block.scale == 1.0
    assert _labels(block) == ["group a vs b, all cases, P(D >= conditions)",
                              "group a vs b, all cases, P(D >= secured bond)"]
    # pairs a-c and b-c: group c has no case, 2 thresholds each
    assert block.note == "4 comparisons skipped: a group has no cases in the population"
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, table), atol=1e-12)


def test_conditional_parity_rows_labels_and_skipped_pairs(parity_cells):
    rl, columns = parity_cells, ("score", "kind")
    table = {"kind": "conditional_parity", "within": "kind", "tolerance": 0.1}
    block, _, _ = _block(rl, columns, table)
    assert block.two_sided is True and block.scale == 1.0
    assert _labels(block) == ["group a vs b, kind = x, P(D >= conditions)",
                              "group a vs b, kind = x, P(D >= secured bond)"]
    # a vs b within kind y (no b case there): 2; a-c and b-c within x and y: 2 x 2 x 2
    assert block.note == "10 comparisons skipped: a group has no cases in the level of kind"
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, table), atol=1e-12)


def test_principal_fairness_rows_labels_at_chosen_levels_and_thresholds(parity_cells):
    rl, columns = parity_cells, ("score", "kind")
    table = {"kind": "principal_fairness", "outcome": "new", "tolerance": 0.05, "risk_levels": [3, 1],
             "thresholds": ["bond"]}
    block, _, _ = _block(rl, columns, table)
    assert block.two_sided is True and block.scale == 1.0
    assert _labels(block) == [
        "group a vs b, risk level 1 (preventable by conditions or harsher) for new, P(D >= secured bond)",
        "group a vs b, risk level 3 (not preventable) for new, P(D >= secured bond)"]
    assert block.note == "4 comparisons skipped: a group has no cases in the risk level"
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, dict(table, risk_levels=[1, 3])), atol=1e-12)
    every = {"kind": "principal_fairness", "outcome": "fta", "tolerance": 0.05}
    block, _, _ = _block(rl, columns, every)
    assert _labels(block)[:3] == [
        "group a vs b, risk level 0 (safe) for fta, P(D >= conditions)",
        "group a vs b, risk level 0 (safe) for fta, P(D >= secured bond)",
        "group a vs b, risk level 1 (preventable by conditions or harsher) for fta, P(D >= conditions)"]
    assert _labels(block)[4] == ("group a vs b, risk level 2 (preventable only by secured bond) for fta, "
                                 "P(D >= conditions)")
    assert block.n_rows == 8 and block.note == "16 comparisons skipped: a group has no cases in the risk level"
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, every), atol=1e-12)


def test_parity_of_two_attributes_with_three_groups_in_order():
    # attributes in the order declared, pairs (a, b), (a, c), (b, c), then strata, then thresholds
    columns = {"score": [1, 2], "group": ["a", "b", "c"], "sex": ["f", "m"]}
    cells = [(s, g, x) for s in (1, 2) for g in ("a", "b", "c") for x in ("f", "m")]
    rl = _risk_levels(cells, columns, ["group", "sex"], ["score"], seed=4)
    table = {"kind": "statistical_parity", "tolerance": 0.1, "thresholds": ["cond"]}
    block, _, _ = _block(rl, ("score",), table)
    assert _labels(block) == ["group a vs b, all cases, P(D >= conditions)",
                              "group a vs c, all cases, P(D >= conditions)",
                              "group b vs c, all cases, P(D >= conditions)",
                              "sex f vs m, all cases, P(D >= conditions)"]
    assert block.note == ""
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, ("score",), table), atol=1e-12)
    only_sex = dict(table, attribute="sex")
    block, _, _ = _block(rl, ("score",), only_sex)
    assert _labels(block) == ["sex f vs m, all cases, P(D >= conditions)"]
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, ("score",), only_sex), atol=1e-12)


def test_capacity_and_outcome_cap_rows(parity_cells):
    rl, columns = parity_cells, ("score", "kind")
    W = rl.weights.sum()
    share = {"kind": "capacity", "at_least": "cond", "max_share": 0.4}
    block, _, _ = _block(rl, columns, share)
    assert block.two_sided is False and block.scale == 1.0 and block.note == ""
    assert _labels(block) == ["share of cases at conditions or harsher"]
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, share), atol=1e-12)
    # in cases: the same row (a share), the declared cap divided by the total weight
    cases = {"kind": "capacity", "max_cases": 12.0}
    block, _, _ = _block(rl, columns, cases)
    assert block.two_sided is False and block.scale == W
    assert _labels(block) == ["share of cases at secured bond or harsher"]
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, dict(cases, at_least="bond")), atol=1e-12)
    cap = {"kind": "outcome_cap", "outcome": "new", "max_rate": 0.2}
    block, _, _ = _block(rl, columns, cap)
    assert block.two_sided is False and block.scale == 1.0 and block.note == ""
    assert _labels(block) == ["expected rate of new"]
    assert np.allclose(block.matrix.toarray(), _reference_rows(rl, columns, cap), atol=1e-12)


# score x group x sex, all in the rule: rule cell g = 4 score + 2 group + sex (category order)
BLIND_COLUMNS = {"score": [1, 2], "group": ["a", "b"], "sex": ["f", "m"]}
BLIND_CELLS = [(s, g, x) for s in (1, 2) for g in ("a", "b") for x in ("f", "m")]


def _equality_matrix(pairs, G, L):
    """Rows delta(d | g) - delta(d | h) = 0 for each (g, h) and each level d but the last (the
    last follows from the rows summing to 1), by hand."""
    rows = []
    for g, h in pairs:
        for d in range(L - 1):
            row = np.zeros(G * L)
            row[g * L + d], row[h * L + d] = 1.0, -1.0
            rows.append(row)
    return np.array(rows)


def test_group_blind_rows_and_labels():
    rl = _risk_levels(BLIND_CELLS, BLIND_COLUMNS, ["group", "sex"], ["score", "group", "sex"])
    columns = ("score", "group", "sex")
    block, _, rule_cells = _block(rl, columns, {"kind": "group_blind", "attribute": "group"})
    assert len(rule_cells) == 8 and block.two_sided and block.scale == 1.0 and block.note == ""
    # each rule cell of group b is tied to the one of group a with the same score and sex
    assert np.array_equal(block.matrix.toarray(), _equality_matrix([(2, 0), (3, 1), (6, 4), (7, 5)], 8, 3))
    assert _labels(block) == [
        "P(D = release) equal for score=1, group=b, sex=f and group=a",
        "P(D = conditions) equal for score=1, group=b, sex=f and group=a",
        "P(D = release) equal for score=1, group=b, sex=m and group=a",
        "P(D = conditions) equal for score=1, group=b, sex=m and group=a",
        "P(D = release) equal for score=2, group=b, sex=f and group=a",
        "P(D = conditions) equal for score=2, group=b, sex=f and group=a",
        "P(D = release) equal for score=2, group=b, sex=m and group=a",
        "P(D = conditions) equal for score=2, group=b, sex=m and group=a"]
    # blind to every protected attribute: each rule cell tied to (same score, a, f)
    block, _, _ = _block(rl, columns, {"kind": "group_blind"})
    assert np.array_equal(block.matrix.toarray(), _equality_matrix([(1, 0), (2, 0), (3, 0), (5, 4), (6, 4), (7, 4)], 8, 3))
    assert _labels(block)[:2] == ["P(D = release) equal for score=1, group=a, sex=m and group=a, sex=f",
                                  "P(D = conditions) equal for score=1, group=a, sex=m and group=a, sex=f"]
    assert _labels(block)[-1] == "P(D = conditions) equal for score=2, group=b, sex=m and group=a, sex=f"
    # the rule uses only the protected attributes: every rule cell tied to the first
    block, _, _ = _block(rl, ("group", "sex"), {"kind": "group_blind"})
    assert np.array_equal(block.matrix.toarray(), _equality_matrix([(1, 0), (2, 0), (3, 0)], 4, 3))
    assert _labels(block)[0] == "P(D = release) equal for group=a, sex=m and group=a, sex=f"


def test_group_blind_rows_hold_exactly_the_blind_rules():
    # the rows admit a rule iff it gives equal probabilities to rule cells differing only in the
    # attribute (the definition): a blind rule gives 0 on every row, an unblind one does not
    rl = _risk_levels(BLIND_CELLS, BLIND_COLUMNS, ["group", "sex"], ["score", "group", "sex"])
    block, _, rule_cells = _block(rl, ("score", "group", "sex"), {"kind": "group_blind", "attribute": "sex"})
    rng = np.random.default_rng(1)
    by_score_group = rng.dirichlet(np.ones(3), size=4)
    key = rule_cells["score"].cat.codes.to_numpy() * 2 + rule_cells["group"].cat.codes.to_numpy()
    blind = by_score_group[key]
    assert np.abs(block.matrix @ blind.reshape(-1)).max() < 1e-15
    unblind = blind.copy()
    unblind[5] = [0.2, 0.3, 0.5] if not np.allclose(blind[5], [0.2, 0.3, 0.5]) else [0.5, 0.3, 0.2]
    assert np.abs(block.matrix @ unblind.reshape(-1)).max() > 1e-3


def _monotone_matrix(pairs_by_threshold, G, L):
    """Rows P(D >= t | lo) - P(D >= t | hi) <= tol, by hand: +1 on lo's levels >= t, -1 on hi's."""
    rows = []
    for t, pairs in pairs_by_threshold:
        for lo, hi in pairs:
            row = np.zeros(G * L)
            row[lo * L + t:lo * L + L] = 1.0
            row[hi * L + t:hi * L + L] = -1.0
            rows.append(row)
    return np.array(rows)


def test_monotone_rows_and_labels():
    # score 1..3 x group, no cell at (score 2, group b): rule cells (1,a)=0 (1,b)=1 (2,a)=2 (3,a)=3 (3,b)=4;
    # adjacent present scores within a group: (0,2), (2,3) in a and (1,4) in b
    columns = {"score": [1, 2, 3], "group": ["a", "b"]}
    cells = [(s, g) for s in (1, 2, 3) for g in ("a", "b") if (s, g) != (2, "b")]
    rl = _risk_levels(cells, columns, ["group"], ["score", "group"])
    block, _, _ = _block(rl, ("score", "group"), {"kind": "monotone", "tolerance": 0.01})
    assert block.two_sided is False and block.scale == 1.0 and block.note == ""
    pairs = [(0, 2), (2, 3), (1, 4)]
    assert np.array_equal(block.matrix.toarray(), _monotone_matrix([(1, pairs), (2, pairs)], 5, 3))
    assert _labels(block) == [
        "P(D >= conditions) at score=1 <= at score=2 (group=a)",
        "P(D >= conditions) at score=2 <= at score=3 (group=a)",
        "P(D >= conditions) at score=1 <= at score=3 (group=b)",
        "P(D >= secured bond) at score=1 <= at score=2 (group=a)",
        "P(D >= secured bond) at score=2 <= at score=3 (group=a)",
        "P(D >= secured bond) at score=1 <= at score=3 (group=b)"]
    # one threshold; the score the only rule column (no other column to name)
    block, _, rule_cells = _block(rl, ("score",), {"kind": "monotone", "thresholds": ["bond"]})
    assert len(rule_cells) == 3
    assert np.array_equal(block.matrix.toarray(), _monotone_matrix([(2, [(0, 1), (1, 2)])], 3, 3))
    assert _labels(block) == ["P(D >= secured bond) at score=1 <= at score=2",
                              "P(D >= secured bond) at score=2 <= at score=3"]


def test_monotone_without_two_scores_to_compare_has_no_row_and_says_why():
    columns = {"score": [1, 2], "group": ["a", "b"]}
    rl = _risk_levels([(1, "a"), (2, "b")], columns, ["group"], ["score", "group"])
    block, _, _ = _block(rl, ("score", "group"), {"kind": "monotone"})
    assert block.n_rows == 0 and block.matrix.shape == (0, 6) and block.two_sided is False
    assert block.note == "no two rule cells differ only in score"


def test_rows_match_the_independent_formulation_on_random_cells():
    # every kind on random cells (some dropped) against tests/constrained_reference.py's rows
    rl, _, columns = ref.random_instance(6, n_scores=3, n_buckets=3, n_groups=3, drop=0.3)
    for table in ({"kind": "principal_fairness", "outcome": "o1", "tolerance": 0.05},
                  {"kind": "statistical_parity", "tolerance": 0.1, "thresholds": ["L2"]},
                  {"kind": "conditional_parity", "within": "bucket", "tolerance": 0.1},
                  {"kind": "capacity", "at_least": "L1", "max_share": 0.5},
                  {"kind": "outcome_cap", "outcome": "o0", "max_rate": 0.3}):
        block, _, _ = _block(rl, columns, table)
        expected = _reference_rows(rl, columns, table)
        assert block.matrix.shape == expected.shape, table
        assert np.allclose(block.matrix.toarray(), expected, atol=1e-12), table


def test_monotone_where_the_last_rule_cell_has_no_neighbour():
    # rule cells (1,a,f)=0 (2,a,f)=1 (2,b,f)=2: the last one has no other score in group b, so the
    # rows compare only 0 with 1 and still span every rule cell's columns
    columns = {"score": [1, 2], "group": ["a", "b"], "sex": ["f"]}
    rl = _risk_levels([(1, "a", "f"), (2, "a", "f"), (2, "b", "f")], columns, ["group", "sex"], ["score", "group", "sex"])
    block, _, _ = _block(rl, ("score", "group", "sex"), {"kind": "monotone", "thresholds": ["cond"]})
    assert block.matrix.shape == (1, 9)
    assert np.array_equal(block.matrix.toarray(), _monotone_matrix([(1, [(0, 1)])], 3, 3))
    assert _labels(block) == ["P(D >= conditions) at score=1 <= at score=2 (group=a, sex=f)"]


def test_parity_rows_of_a_rule_for_everyone_alike():
    # no rule column: one rule cell, so P(D >= t | A = a) is the same for every group and each row is 0
    rl = _risk_levels(PARITY_CELLS, PARITY_COLUMNS, ["group"], ["score", "kind"])
    block, _, rule_cells = _block(rl, (), {"kind": "statistical_parity", "tolerance": 0.0})
    assert len(rule_cells) == 1 and block.matrix.shape == (2, 3)
    assert _labels(block) == ["group a vs b, all cases, P(D >= conditions)", "group a vs b, all cases, P(D >= secured bond)"]
    assert np.allclose(block.matrix.toarray(), 0.0, atol=1e-15)


def test_parity_rows_when_every_pair_lacks_a_group():
    # group b is declared but has no cell: the only pair is skipped, no row, a note
    columns = {"score": [1, 2], "group": ["a", "b"]}
    rl = _risk_levels([(1, "a"), (2, "a")], columns, ["group"], ["score"])
    block, _, _ = _block(rl, ("score",), {"kind": "statistical_parity", "tolerance": 0.1})
    assert block.n_rows == 0 and block.matrix.shape == (0, 6)
    assert block.note == "2 comparisons skipped: a group has no cases in the population"


def test_a_group_counts_as_empty_relative_to_the_largest_weight():
    # P(D >= t | A = a) does not depend on the unit of the weights: weights of 1e-15 give the rows
    # of weights of 1; a group whose weight is at most 1e-12 of the largest group's counts as empty
    # (the cut-off of _parity_block, relative to the largest total)
    rl = _risk_levels(PARITY_CELLS, PARITY_COLUMNS, ["group"], ["score", "kind"])
    table = {"kind": "statistical_parity", "tolerance": 0.1}
    block, _, _ = _block(rl, ("score", "kind"), table)
    tiny = RiskLevels(rl.layout, VALUES, LABELS, OUTCOMES, OUTCOMES, rl.weights * 1e-15, rl.p, rl.borrowed)
    small, _, _ = _block(tiny, ("score", "kind"), table)
    assert small.n_rows == 2 and np.allclose(small.matrix.toarray(), block.matrix.toarray(), rtol=1e-12, atol=0)
    group = rl.layout.codes("group")
    largest = rl.weights[group == 0].sum()  # group a's total, a whole number (exact in floating point)
    for factor, rows in ((1e-12, 0), (1.5e-12, 2)):
        w = rl.weights.copy()
        w[group == 1] = 0.0
        w[np.flatnonzero(group == 1)[0]] = factor * largest  # one cell of group b, the others empty
        edge = RiskLevels(rl.layout, VALUES, LABELS, OUTCOMES, OUTCOMES, w, rl.p, rl.borrowed)
        block, _, _ = _block(edge, ("score", "kind"), table)
        assert block.n_rows == rows, factor
