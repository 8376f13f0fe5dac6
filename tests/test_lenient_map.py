"""What a two-ratio lenient map reports, checked by hand (policy/assessment/sweep/two_ratio.py).

Three cells, three levels (decision costs 0, 100, 200), two outcome kinds. The first ratio r1 is
outcome 0's cost over the mean cost of the harshest level (200), the second r2 is outcome 1's cost
over the mean cost of the middle level (100), so the two axes have different units.

====  =====  ==================  ==================  ===================================
cell  cases  p of outcome 0      p of outcome 1      lenient iff (Delta(d) <= 0, d = 1, 2)
====  =====  ==================  ==================  ===================================
A     2      0.5, 0.25, 0.125    0.25, 0.25, 0.25    -200 + 100 r1 <= 0: r1 <= 2
B     1      0.25, 0.25, 0.25    0.5, 0.25, 0.25     -100 + 25 r2 <= 0: r2 <= 4
C     1      0.5, 0.25, 0.25     0.5, 0.25, 0.25     -100 + 50 r1 + 25 r2 <= 0: r1 + r2 / 2 <= 2
====  =====  ==================  ==================  ===================================

(Delta(d) = T(0) - T(d), the definition in docs/method.md; the d = 2 rows never bind in the box.)
On the box [1, 4] x [1, 8] (area 21) the regions are A [1, 2] x [1, 8] (area 7), B [1, 4] x [1, 4]
(area 9) and C the triangle (1, 1), (1.5, 1), (1, 2) (area 1/4).
"""

from __future__ import annotations

import html
import re
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from policy.assessment.sweep import lenient_map, ratio_axis
from policy.decision.costs import Costs
from policy.errors import InputError
from policy.estimation.bounds import RiskBounds, point_bounds

from .test_sweep_tables import LABELS, LEVELS, levels_of

BOX = [(1.0, 4.0), (1.0, 8.0)]


def two_outcomes():
    p = np.array([[[0.5, 0.25, 0.125], [0.25, 0.25, 0.25]],
                  [[0.25, 0.25, 0.25], [0.5, 0.25, 0.25]],
                  [[0.5, 0.25, 0.25], [0.5, 0.25, 0.25]]])
    rl = levels_of(p, [2.0, 1.0, 1.0])
    costs = Costs(np.tile([0.0, 100.0, 200.0], (3, 1)), np.array([400.0, 200.0]), "EUR", LEVELS, ("o0", "o1"))
    return rl, costs, [ratio_axis(rl, costs, "o0"), ratio_axis(rl, costs, "o1", per="cond")]


def widened(rl):
    upper = rl.p.copy()
    upper[:, :, 0] += 0.125
    return RiskBounds("gamma=2", "Gamma = 2", rl.p, upper, 2.0, "sensitivity")


@pytest.fixture(scope="module")
def hand():
    rl, costs, axes = two_outcomes()
    return rl, costs, axes, lenient_map(rl, costs, axes, BOX, assumptions=[point_bounds(rl), widened(rl)])


def test_axes_margins_and_levels_by_hand(hand):
    rl, costs, axes, m = hand
    assert [a.reference_cost for a in axes] == [200.0, 100.0] and [a.scenario_ratio for a in axes] == [2.0, 2.0]
    assert m.scale == "linear" and m.level_values == LEVELS and m.level_labels == LABELS and m.total == 4.0
    assert m.box == ((1.0, 4.0), (1.0, 8.0))
    np.testing.assert_allclose(m.margins[0][:, 0], [[-200, 100, 0], [-100, 0, 25], [-100, 50, 25]])
    # at r1 = 3, r2 = 2 (outcome costs 600 and 200) per case: A 350, 300, 325; B 250, 300, 400;
    # C 400, 300, 400 -> levels 1, 0, 1
    np.testing.assert_array_equal(m.levels_at((3.0, 2.0)), [1, 0, 1])
    # Reference: the definition, argmin over levels of the expected costs with both costs set
    rng = np.random.default_rng(0)
    for x, y in rng.uniform(0, 8, size=(20, 2)):
        c = costs.with_outcome_cost(0, 200.0 * x).with_outcome_cost(1, 100.0 * y)
        np.testing.assert_array_equal(m.levels_at((x, y)), np.argmin(c.expected(rl.p), axis=1))


def test_lenient_cells_and_shares_at_points_by_hand(hand):
    _, _, _, m = hand
    pts = np.array([[2.0, 0.0], [2.004, 0.0], [1.0, 2.0], [3.0, 4.0], [3.0, 4.004], [1.0, 3.0]])
    expected = [1.0, 0.25, 1.0, 0.25, 0.0, 0.75]
    np.testing.assert_allclose(m.share_at(pts, chunk=2), expected)               # in pieces of two points
    np.testing.assert_array_equal(m.lenient_at(pts), [[1, 1, 1], [0, 1, 0], [1, 1, 1], [0, 1, 0], [0, 0, 0],
                                                       [1, 1, 0]])
    np.testing.assert_allclose(m.share_at(pts), expected)
    assert m.share_at([[1.0, 2.0]], 1)[0] < m.share_at([[1.0, 2.0]])[0]       # the default is the point estimate
    # under the wider bounds at (1, 2): A -200 + 150 + 50 = 0 and B -100 + 25 + 75 = 0 (ties, lenient),
    # C -100 + 75 + 75 > 0
    np.testing.assert_array_equal(m.lenient_at([[1.0, 2.0]], 1), [[True, True, False]])


def test_grid_by_hand(hand):
    _, _, _, m = hand
    x, y = m.grid_axes(4)
    np.testing.assert_allclose(x, [1, 2, 3, 4])
    np.testing.assert_allclose(y, [1, 10 / 3, 17 / 3, 8])
    g = m.grid(4)
    # rows y = 1, 10/3, 17/3, 8: A while x <= 2, B while y <= 4, C while x + y / 2 <= 2
    np.testing.assert_allclose(g, [[1.0, 0.75, 0.25, 0.25], [0.75, 0.75, 0.25, 0.25], [0.5, 0.5, 0, 0],
                                   [0.5, 0.5, 0, 0]])
    assert m.grid().shape == (200, 200) and len(m.grid_axes()[0]) == 200
    np.testing.assert_allclose(m.grid(4, x=np.array([1.0, 4.0])), g)          # x alone: the display grid
    np.testing.assert_allclose(m.grid(4, 0, np.array([1.0, 4.0]), np.array([1.0])), [[1.0, 0.25]])
    log = lenient_map(*two_outcomes(), BOX, scale="log")
    np.testing.assert_allclose(log.grid_axes(3)[0], [1, 2, 4])
    np.testing.assert_allclose(log.grid_axes(3)[1], [1, np.sqrt(8), 8])


def test_grid_row_where_no_cell_is_ever_lenient():
    # only the cells B and C with outcome 0 prevented nowhere: at r2 > 4 no rule cell is lenient
    # for any r1 (empty intervals), so the share is 0 there
    p = np.array([[[0.25, 0.25, 0.25], [0.5, 0.25, 0.25]], [[0.25, 0.25, 0.25], [0.5, 0.25, 0.25]]])
    rl = levels_of(p, [1.0, 3.0])
    costs = Costs(np.tile([0.0, 100.0, 200.0], (2, 1)), np.array([400.0, 200.0]), "EUR", LEVELS, ("o0", "o1"))
    m = lenient_map(rl, costs, [ratio_axis(rl, costs, "o0"), ratio_axis(rl, costs, "o1", per="cond")],
                    [(0.0, 2.0), (0.0, 8.0)])
    np.testing.assert_allclose(m.grid(3), [[1, 1, 1], [1, 1, 1], [0, 0, 0]])


def test_polygon_table_by_hand(hand):
    _, _, _, m = hand
    V, cnt = m.polygons()
    np.testing.assert_array_equal(cnt, [4, 4, 3])
    # under the wider bounds: A 150 r1 + 25 r2 <= 200, the triangle (1, 1), (7/6, 1), (1, 2) (area 1/12);
    # B 25 r1 + 37.5 r2 <= 100, the triangle (1, 1), (2.5, 1), (1, 2) (area 3/4); C nowhere in the
    # box (-100 + 75 r1 + 37.5 r2 > 0 there)
    V1, cnt1 = m.polygons(1)
    np.testing.assert_array_equal(cnt1, [3, 3, 0])
    np.testing.assert_allclose(sorted(map(tuple, V1[1, :3])), [(1, 1), (1, 2), (2.5, 1)])
    wide = m.polygon_table()
    wide = wide[wide["assumption"] == "gamma=2"]
    np.testing.assert_allclose(wide["area_share"], [1 / 12 / 21] * 3 + [0.75 / 21] * 3)
    table = m.polygon_table()
    assert list(table.index) == list(range(17))
    table = table.iloc[:11]
    assert list(table.columns) == ["assumption", "assumption_label", "gamma", "group", "cases", "vertex",
                                   "ratio_1", "ratio_2", "cost_1", "cost_2", "area_share"]
    assert (table["assumption"] == "point").all()
    assert (table["assumption_label"] == "point estimate").all() and (table["gamma"] == 1.0).all()
    assert list(table["group"]) == ["g0"] * 4 + ["g1"] * 4 + ["g2"] * 3
    assert list(table["cases"]) == [2.0] * 4 + [1.0] * 7
    assert list(table["vertex"]) == [0, 1, 2, 3, 0, 1, 2, 3, 0, 1, 2]
    np.testing.assert_allclose(table["area_share"], [7 / 21] * 4 + [9 / 21] * 4 + [0.25 / 21] * 3)
    np.testing.assert_allclose(table["cost_1"], 200.0 * table["ratio_1"])
    np.testing.assert_allclose(table["cost_2"], 100.0 * table["ratio_2"])
    corners = {g: sorted(map(tuple, np.round(t[["ratio_1", "ratio_2"]].to_numpy(), 12)))
               for g, t in table.groupby("group", observed=True)}
    assert corners == {"g0": [(1, 1), (1, 8), (2, 1), (2, 8)], "g1": [(1, 1), (1, 4), (4, 1), (4, 4)],
                       "g2": [(1, 1), (1, 2), (1.5, 1)]}


def test_grid_table_and_summary_by_hand(hand):
    _, _, _, m = hand
    assert len(m.grid_table()) == 2 * 200 * 200
    grid = m.grid_table(4)
    assert list(grid.columns) == ["assumption", "assumption_label", "gamma", "ratio_1", "ratio_2", "cost_1", "cost_2",
                                  "share_lenient"]
    assert list(grid.index) == list(range(32))
    assert list(grid["assumption"]) == ["point"] * 16 + ["gamma=2"] * 16
    assert list(grid["assumption_label"]) == ["point estimate"] * 16 + ["Gamma = 2"] * 16
    np.testing.assert_allclose(grid["gamma"], [1.0] * 16 + [2.0] * 16)
    first = grid.iloc[:16]
    np.testing.assert_allclose(first["ratio_1"], np.tile([1, 2, 3, 4], 4))
    np.testing.assert_allclose(first["ratio_2"], np.repeat([1, 10 / 3, 17 / 3, 8], 4))
    np.testing.assert_allclose(first["cost_1"], 200.0 * first["ratio_1"])
    np.testing.assert_allclose(first["cost_2"], 100.0 * first["ratio_2"])
    np.testing.assert_allclose(first["share_lenient"], m.grid(4).ravel())
    np.testing.assert_allclose(grid["share_lenient"].iloc[16:], m.grid(4, 1).ravel())
    assert grid["share_lenient"].iloc[16] == 0.75                     # (1, 1) under the wider bounds: A and B
    # at the scenario's ratios (2, 2): A (a tie) and B lenient, C not; none under the wider bounds
    expected = pd.DataFrame({"assumption": ["point estimate", "Gamma = 2"],
                             "share lenient at the scenario's ratios": [0.75, 0.0]})
    pd.testing.assert_frame_equal(m.summary(), expected)


def test_text_and_html_by_hand(hand):
    _, _, _, m = hand
    lines = str(m).splitlines()
    assert lines[0] == ("Lenient map over cost of one outcome 0 / mean cost of secured bond (1 to 4) and cost of one "
                        "outcome 1 / mean cost of conditions & reporting (1 to 8); 3 rule cells.")
    assert lines[1].split() == ["assumption", "share", "lenient", "at", "the", "scenario's", "ratios"]
    assert lines[2].split() == ["point", "estimate", "75.0%"] and lines[3].split() == ["Gamma", "=", "2", "0.0%"]
    assert len(lines) == 4
    # Reference: the standard library's HTML unescaping gives the text back; no bare "&" or "<"
    marked = replace(m, robust=[replace(m.robust[0], label="point <estimate>")] + m.robust[1:])
    for shown in (m, marked):
        page = shown._repr_html_()
        assert page.startswith("<pre>") and page.endswith("</pre>")
        body = page[5:-6]
        assert html.unescape(body) == str(shown)
        assert "<" not in body and "&" not in re.sub("&(amp|lt);", "", body)
    assert "point <estimate>" in str(marked)


def test_rule_columns_and_bad_requests():
    rl, costs, axes = two_outcomes()
    one = lenient_map(rl, costs, axes, BOX, columns=[])
    assert len(one.rule_cells) == 1 and one.margins.shape == (1, 1, 2, 3)
    with pytest.raises(InputError) as err:
        lenient_map(rl, costs, axes[:1], BOX)
    assert str(err.value) == "a map needs exactly two ratios; got 1."
    with pytest.raises(InputError, match="^the first range must be two finite numbers"):
        lenient_map(rl, costs, axes, [(4.0, 1.0), (1.0, 8.0)])
    with pytest.raises(InputError, match="^the second range must be two finite numbers"):
        lenient_map(rl, costs, axes, [(1.0, 4.0), (8.0, 1.0)])
