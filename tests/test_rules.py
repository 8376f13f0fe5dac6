"""Release rules as the tool stores and shows them (policy/decision/rules.py), checked by hand.

Four cells in three observed rule cells (a fourth category of the rule column has no cell), a
deterministic rule built from one level per rule cell and a per-cell rule with two split cells;
every figure is worked out from the definitions in the module's docstrings.
"""

from __future__ import annotations

import html
import re

import numpy as np
import pandas as pd
import pytest

from policy.decision.rules import SPLIT_TOLERANCE, Rule
from policy.inputs.cells import CellLayout

VALUES = ("ror", "cond", "bond")
LABELS = ("recognizance", "conditions", "secured bond")


def layout(n=4, groups=(0, 1, 0, 2)):
    groups = np.resize(np.asarray(groups), n)
    frame = pd.DataFrame({
        "cell": pd.Categorical.from_codes(np.arange(n), categories=[f"c{i}" for i in range(n)], ordered=True),
        "group": pd.Categorical.from_codes(groups, categories=["g0", "g1", "g2", "g3"], ordered=True),
    })
    return CellLayout(frame, (), ("group",), None)


def test_from_levels_one_level_per_observed_rule_cell():
    lay = layout()
    rule = Rule.from_levels("by group", "candidate", lay, ["group"], [2, 0, 1], VALUES, LABELS,
                            weights=np.array([1.0, 2.0, 3.0, 4.0]), note="a note")
    assert (rule.name, rule.kind, rule.note) == ("by group", "candidate", "a note")
    assert rule.level_values == VALUES and rule.level_labels == LABELS
    assert list(rule.rule_cells["group"].astype(str)) == ["g0", "g1", "g2"]      # g3 has no cell
    np.testing.assert_array_equal(rule.index, [0, 1, 0, 2])
    np.testing.assert_array_equal(rule.delta, [[0, 0, 1], [1, 0, 0], [0, 1, 0]])
    np.testing.assert_array_equal(rule.weights, [4.0, 2.0, 4.0])                # 1 + 3, 2, 4
    np.testing.assert_array_equal(rule.cell_delta, [[0, 0, 1], [1, 0, 0], [0, 0, 1], [0, 1, 0]])
    assert rule.is_deterministic and len(rule.split_cells) == 0 and rule.n_rule_cells == 3
    np.testing.assert_array_equal(rule.level, [2, 0, 1])
    plain = Rule.from_levels("one rule cell", "optimal", lay, [], np.array([1.0]), VALUES, LABELS)
    assert plain.weights is None and plain.note == "" and plain.n_rule_cells == 1
    np.testing.assert_array_equal(plain.cell_delta, np.tile([0.0, 1.0, 0.0], (4, 1)))
    assert plain.delta.dtype == np.float64


def per_cell_rule(weights=np.array([1.0, 2.0, 3.0, 4.0])):
    delta = np.array([[0.5, 0.5, 0.0],                          # split: ties go to the lenient level
                      [1 - SPLIT_TOLERANCE, SPLIT_TOLERANCE, 0],  # split, just (the edge counts as split)
                      [0.0, 0.0, 1.0],
                      [0.0, 1 - SPLIT_TOLERANCE / 2, SPLIT_TOLERANCE / 2]])  # within the tolerance
    return Rule.per_cell("observed", "observed", layout(), delta, VALUES, LABELS, weights, note="what courts did")


def test_per_cell_rule_and_its_table_by_hand():
    rule = per_cell_rule()
    assert (rule.name, rule.kind, rule.note) == ("observed", "observed", "what courts did")
    assert rule.level_values == VALUES and rule.level_labels == LABELS and rule.delta.dtype == np.float64
    np.testing.assert_array_equal(rule.index, np.arange(4))
    np.testing.assert_array_equal(rule.weights, [1.0, 2.0, 3.0, 4.0])
    assert not rule.is_deterministic
    np.testing.assert_array_equal(rule.split_cells, [0, 1])
    np.testing.assert_array_equal(rule.level, [0, 0, 2, 1])
    frame = rule.to_frame()
    expected = pd.DataFrame({
        "cell": ["c0", "c1", "c2", "c3"], "group": ["g0", "g1", "g0", "g2"],
        "level": ["recognizance", "recognizance", "secured bond", "conditions"],
        "split": [True, True, False, False],
        "share_ror": rule.delta[:, 0], "share_cond": rule.delta[:, 1], "share_bond": rule.delta[:, 2],
        "cases": [1.0, 2.0, 3.0, 4.0],
    })
    pd.testing.assert_frame_equal(frame, expected, check_dtype=False)
    assert frame["cell"].dtype == object and frame["group"].dtype == object
    assert "cases" not in per_cell_rule(None).to_frame().columns
    pd.testing.assert_frame_equal(rule.summary(), frame)


def test_text_and_html_by_hand():
    rule = per_cell_rule()
    lines = str(rule).splitlines()
    assert lines[0] == "observed (4 rule cells by cell, group):"
    assert lines[1].split() == ["cell", "group", "level", "cases"]
    assert lines[2].split() == ["c0", "g0", "recognizance", "1.0"]
    assert lines[4].split() == ["c2", "g0", "secured", "bond", "3.0"]
    assert lines[6] == "2 rule cells are split between levels (a randomized rule); see share_* columns."
    assert len(lines) == 7
    plain = Rule.from_levels("all lenient", "candidate", layout(), [], [0], VALUES, LABELS)
    assert str(plain).splitlines() == ["all lenient (1 rule cells by nothing):", "       level", "recognizance"]
    # Reference: the standard library's HTML unescaping; the name is escaped like the table
    page = Rule.from_levels("score < 3 & no warrant", "candidate", layout(), ["group"], [0, 1, 2],
                            VALUES, LABELS)._repr_html_()
    assert page.startswith("<p><b>score &lt; 3 &amp; no warrant</b></p><table")
    head = re.search(r"<thead>(.*?)</thead>", page, re.S).group(1)
    assert [html.unescape(h) for h in re.findall(r"<th>(.*?)</th>", head)] == [
        "group", "level", "split", "share_ror", "share_cond", "share_bond"]      # no index column


def test_long_rules_show_sixty_rows_in_text():
    n = 61
    rule = Rule.per_cell("long", "candidate", layout(n), np.tile([1.0, 0.0, 0.0], (n, 1)), VALUES, LABELS)
    lines = str(rule).splitlines()
    assert lines[0] == "long (61 rule cells by cell, group):"
    assert lines[2].split()[0] == "c0" and lines[-1].split()[0] == "c60"
    # pandas shows 30 rows from each end around a "..." row when a table has more than 60
    shown = [line.split()[0] for line in lines[2:]]
    assert "..." in shown and "c30" not in shown and len(shown) == 61


@pytest.mark.parametrize("row, split", [([0.5, 0.25, 0.25], True), ([1.0, 0.0, 0.0], False)])
def test_split_flag_per_row(row, split):
    rule = Rule.per_cell("x", "candidate", layout(2), np.array([row, [0.0, 1.0, 0.0]]), VALUES, LABELS)
    assert list(rule.to_frame()["split"]) == [split, False]
    assert rule.note == "" and rule.weights is None


def test_integer_decisions_are_stored_as_probabilities():
    rule = Rule.per_cell("x", "candidate", layout(3), np.eye(3, dtype=np.int64), VALUES, LABELS)
    assert rule.delta.dtype == np.float64
