"""What a one-ratio sweep reports, checked by hand on three cells (policy/assessment/sweep/one_ratio.py).

The example: three levels (decision costs 0, 100, 200 in every cell, so 1 on the axis is 200),
one outcome kind, one cell per rule cell.

=====  =====  ======================  =========================================================
cell   cases  p at levels 0, 1, 2     expected cost per case at ratio r (200 r p + decision cost)
=====  =====  ======================  =========================================================
A      2      0.5, 0.25, 0.125        100 r, 100 + 50 r, 200 + 25 r: level 0 up to 2, 1 up to 4, then 2
B      1      0.5, 0.5, 0.25          100 r, 100 + 100 r, 200 + 50 r: level 0 up to 4, then 2
C      1      0.25, 0.25, 0.25        50 r + decision cost: level 0 everywhere
=====  =====  ======================  =========================================================

Every figure below is worked out from that table by hand (ties go to the more lenient level, as
the cost-threshold rule is defined in docs/method.md), and the breakpoints are exact in floating
point. A second assumption widens p at level 0 by 0.125 (upper end) in every cell; leniency is
then optimal for every p in the box iff sum_x w [c_dec(0) - c_dec(d) + c (upper_0 - lower_d)] <= 0
for d = 1, 2 (docs/method.md, robust lenient region): A up to 4/3, B up to 8/3, C up to 4.
"""

from __future__ import annotations

import html
import re
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from policy.assessment.sweep import ratio_axis, sweep_one
from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.errors import InputError
from policy.estimation.bounds import RiskBounds, point_bounds
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellLayout

LEVELS = ("ror", "cond", "bond")
LABELS = ("recognizance", "conditions & reporting", "secured bond")


def levels_of(p, weights, groups=None):
    n, J, L = p.shape
    groups = np.arange(n) if groups is None else np.asarray(groups)
    frame = pd.DataFrame({
        "cell": pd.Categorical.from_codes(np.arange(n), categories=[f"c{i}" for i in range(n)], ordered=True),
        "group": pd.Categorical.from_codes(groups, categories=[f"g{i}" for i in range(groups.max() + 1)], ordered=True),
    })
    layout = CellLayout(frame, (), ("group",), None)
    outcomes = tuple(f"o{j}" for j in range(J))
    return RiskLevels(layout, LEVELS[:L], LABELS[:L], outcomes, tuple(f"outcome {j}" for j in range(J)),
                      np.asarray(weights, dtype=float), p, np.zeros_like(p, dtype=bool), {},
                      np.zeros((J, L), dtype=bool))


def hand_example():
    p = np.array([[[0.5, 0.25, 0.125]], [[0.5, 0.5, 0.25]], [[0.25, 0.25, 0.25]]])
    rl = levels_of(p, [2.0, 1.0, 1.0])
    costs = Costs(np.tile([0.0, 100.0, 200.0], (3, 1)), np.array([600.0]), "EUR", LEVELS, ("o0",))
    return rl, costs


def widened(rl):
    upper = rl.p.copy()
    upper[:, :, 0] += 0.125
    return RiskBounds("gamma=2", "Gamma = 2", rl.p, upper, 2.0, "sensitivity")


@pytest.fixture(scope="module")
def hand():
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    every = Rule.per_cell("all conditions", "candidate", rl.layout, np.tile([0.0, 1.0, 0.0], (3, 1)), LEVELS, LABELS)
    s = sweep_one(rl, costs, axis, 0.0, 6.0, rules=[every], assumptions=[point_bounds(rl), widened(rl)])
    return rl, costs, axis, every, s


def test_axis_and_exact_costs_and_shares_by_hand(hand):
    rl, costs, axis, _, s = hand
    assert axis.reference_cost == 200.0 and axis.scenario_ratio == 3.0
    assert s.scale == "linear" and s.total == 4.0
    # per case at r = 3: A min(300, 250, 275) twice, B min(300, 400, 350), C 150 -> 950 / 4
    assert s.optimal_cost_at(3.0) == pytest.approx(237.5)
    np.testing.assert_allclose(s.optimal_cost_at(np.array([0.0, 2.0, 4.0, 6.0])), [0.0, 175.0, 300.0, 375.0])
    # at a breakpoint the more lenient level: r = 2 all at level 0; r = 4 A at 1, B and C at 0
    np.testing.assert_allclose(s.share_at(np.array([2.0, 3.0, 4.0, 5.0])),
                               [[1, 0, 0], [0.5, 0.5, 0], [0.5, 0.5, 0], [0.25, 0, 0.75]])
    seg = s.segments()
    expected = pd.DataFrame({
        "group": ["g0", "g0", "g0", "g1", "g1", "g2"],
        "cases": [2.0, 2.0, 2.0, 1.0, 1.0, 1.0],
        "from_ratio": [0.0, 2.0, 4.0, 0.0, 4.0, 0.0], "to_ratio": [2.0, 4.0, 6.0, 4.0, 6.0, 6.0],
        "from_cost": [0.0, 400.0, 800.0, 0.0, 800.0, 0.0], "to_cost": [400.0, 800.0, 1200.0, 800.0, 1200.0, 1200.0],
        "level": ["ror", "cond", "bond", "ror", "bond", "ror"],
        "level_label": ["recognizance", "conditions & reporting", "secured bond", "recognizance", "secured bond",
                        "recognizance"],
    })
    pd.testing.assert_frame_equal(seg, expected, check_dtype=False)
    table = s.share_table()
    assert list(table.columns) == ["from_ratio", "to_ratio", "from_cost", "to_cost", "level", "level_label",
                                   "share", "cases"]
    np.testing.assert_allclose(table["from_ratio"], np.repeat([0.0, 2.0, 4.0], 3))
    np.testing.assert_allclose(table["to_ratio"], np.repeat([2.0, 4.0, 6.0], 3))
    np.testing.assert_allclose(table["from_cost"], np.repeat([0.0, 400.0, 800.0], 3))
    np.testing.assert_allclose(table["to_cost"], np.repeat([400.0, 800.0, 1200.0], 3))
    assert list(table["level"]) == list(LEVELS) * 3 and list(table["level_label"]) == list(LABELS) * 3
    np.testing.assert_allclose(table["cases"], [4, 0, 0, 2, 2, 0, 1, 0, 3])
    np.testing.assert_allclose(table["share"], [1, 0, 0, 0.5, 0.5, 0, 0.25, 0, 0.75])


def test_breakpoints_at_both_ends_of_the_range_are_listed_once(hand):
    rl, costs, axis, every, _ = hand
    s = sweep_one(rl, costs, axis, 2.0, 4.0, rules=[every])
    bp = s.breakpoints()
    expected = pd.DataFrame({
        "group": ["g0", "g0", "g1"], "cases": [2.0, 2.0, 1.0], "ratio": [2.0, 4.0, 4.0], "cost": [400.0, 800.0, 800.0],
        "level_before": ["recognizance", "conditions & reporting", "recognizance"],
        "level_after": ["conditions & reporting", "secured bond", "secured bond"],
    })
    pd.testing.assert_frame_equal(bp, expected, check_dtype=False)
    assert str(s).splitlines()[0].endswith("3 rule cells, 3 breakpoints in range.")
    # segments of zero length (a breakpoint at an end of the range) are left out
    seg = s.segments()
    assert list(seg["group"]) == ["g0", "g1", "g2"] and list(seg["level"]) == ["cond", "ror", "ror"]
    np.testing.assert_allclose(seg[["from_ratio", "to_ratio"]].to_numpy(), [[2.0, 4.0]] * 3)
    # the regret is traced from the low end through the knots inside to the high end, each once
    regret = s.regret_table()
    np.testing.assert_allclose(regret["ratio"], [2.0, 4.0])
    np.testing.assert_allclose(regret["regret_per_case"], [50.0, 50.0])


def test_regret_table_by_hand(hand):
    # "all conditions" costs 400 + 250 r in total; the optimum 0, 700, 1200, 1500 at r = 0, 2, 4, 6
    _, _, _, _, s = hand
    expected = pd.DataFrame({
        "rule": ["all conditions"] * 4, "ratio": [0.0, 2.0, 4.0, 6.0], "cost": [0.0, 400.0, 800.0, 1200.0],
        "regret_per_case": [100.0, 50.0, 50.0, 100.0], "regret_per_1000_cases": [100000.0, 50000.0, 50000.0, 100000.0],
    })
    pd.testing.assert_frame_equal(s.regret_table(), expected, check_dtype=False)
    rl, costs, axis, every, _ = hand
    twice = sweep_one(rl, costs, axis, 0.0, 6.0, rules=[every, replace(every, name="again")]).regret_table()
    assert list(twice.index) == list(range(8)) and list(twice["rule"]) == ["all conditions"] * 4 + ["again"] * 4
    empty = sweep_one(rl, costs, axis, 0.0, 6.0).regret_table()
    assert len(empty) == 0
    assert list(empty.columns) == ["rule", "ratio", "cost", "regret_per_case", "regret_per_1000_cases"]


def test_robust_tables_and_summary_by_hand(hand):
    _, _, _, _, s = hand
    robust = s.robust_table()
    expected = pd.DataFrame({
        "assumption": ["point"] * 3 + ["gamma=2"] * 3,
        "assumption_label": ["point estimate"] * 3 + ["Gamma = 2"] * 3,
        "gamma": [1.0] * 3 + [2.0] * 3,
        "group": ["g0", "g1", "g2"] * 2,
        "cases": [2.0, 1.0, 1.0] * 2,
        "lenient_from": [0.0] * 6,
        "lenient_to": [2.0, 4.0, 6.0, 4 / 3, 8 / 3, 4.0],
    })
    pd.testing.assert_frame_equal(robust, expected, check_dtype=False)
    shares = s.robust_share_table()
    assert list(shares.columns) == ["assumption", "assumption_label", "gamma", "from_ratio", "to_ratio",
                                    "from_cost", "to_cost", "share_lenient"]
    assert list(shares["assumption"]) == ["point"] * 3 + ["gamma=2"] * 4
    assert list(shares["assumption_label"]) == ["point estimate"] * 3 + ["Gamma = 2"] * 4
    np.testing.assert_allclose(shares["gamma"], [1.0] * 3 + [2.0] * 4)
    edges = [0.0, 2.0, 4.0, 6.0], [0.0, 4 / 3, 8 / 3, 4.0, 6.0]
    np.testing.assert_allclose(shares["from_ratio"], edges[0][:-1] + edges[1][:-1])
    np.testing.assert_allclose(shares["to_ratio"], edges[0][1:] + edges[1][1:])
    np.testing.assert_allclose(shares["from_cost"], 200.0 * shares["from_ratio"])
    np.testing.assert_allclose(shares["to_cost"], 200.0 * shares["to_ratio"])
    np.testing.assert_allclose(shares["share_lenient"], [1, 0.5, 0.25, 1, 0.5, 0.25, 0.0])
    assert list(shares.index) == list(range(7))
    # the default assumption is the first (the point estimate)
    assert s.lenient_share_at(3.0) == 0.5 and s.lenient_share_at(3.0, 1) == 0.25
    summary = s.summary()
    expected = pd.DataFrame({"assumption": ["point estimate", "Gamma = 2"], "share_lenient_at_low": [1.0, 1.0],
                             "share_lenient_at_scenario": [0.5, 0.25], "share": [0.5, 0.5],
                             "up_to_ratio": [4.0, 8 / 3], "up_to_cost": [800.0, 1600 / 3]})
    pd.testing.assert_frame_equal(summary, expected)
    # without any assumption (a sweep built by hand) the tables are empty
    bare = replace(s, robust=[], lenient=[], lenient_shares=[])
    assert bare.robust_table().empty and bare.robust_share_table().empty and bare.summary().empty


def test_robust_intervals_clipped_to_the_range_by_hand(hand):
    # on [2, 6] the point-estimate interval of A is the single point 2 (a tie goes lenient);
    # under the widened bounds A's interval (-inf, 4/3] lies wholly below the range: empty
    rl, costs, axis, _, _ = hand
    s = sweep_one(rl, costs, axis, 2.0, 6.0, assumptions=[point_bounds(rl), widened(rl)])
    robust = s.robust_table()
    assert robust["lenient_from"].dtype == np.float64 and robust["lenient_to"].dtype == np.float64
    np.testing.assert_allclose(robust["lenient_from"], [2.0, 2.0, 2.0, np.nan, 2.0, 2.0])
    np.testing.assert_allclose(robust["lenient_to"], [2.0, 4.0, 6.0, np.nan, 8 / 3, 4.0])
    summary = s.summary()
    np.testing.assert_allclose(summary["share_lenient_at_low"], [1.0, 0.5])
    np.testing.assert_allclose(summary["share_lenient_at_scenario"], [0.5, 0.25])
    np.testing.assert_allclose(summary["up_to_ratio"], [4.0, 8 / 3])
    later = sweep_one(rl, costs, axis, 3.0, 6.0).robust_table()
    np.testing.assert_allclose(later["lenient_from"], [np.nan, 3.0, 3.0])
    np.testing.assert_allclose(later["lenient_to"], [np.nan, 4.0, 6.0])


def test_lenient_up_to_at_its_edges(hand):
    # the point-estimate lenient share is 1 on [0, 2], 1/2 on (2, 4], 1/4 beyond
    rl, costs, axis, _, s = hand
    assert s.lenient_up_to() == 4.0          # share 1/2 holds up to 4 (a share equal to the target counts)
    assert s.lenient_up_to(0.75) == 2.0
    assert s.lenient_up_to(0.25) == 6.0      # never below: the high end
    assert s.lenient_up_to(0.5, 1) == pytest.approx(8 / 3)
    later = sweep_one(rl, costs, axis, 3.0, 6.0)
    assert later.lenient_up_to(0.5) == 4.0   # exactly the share at the low end still counts
    assert np.isnan(later.lenient_up_to(0.75))


def test_text_and_html_by_hand(hand):
    _, _, _, _, s = hand
    text = str(s)
    lines = text.splitlines()
    assert lines[0] == ("Sweep of cost of one outcome 0 / mean cost of secured bond from 0 to 6 (linear); "
                        "3 rule cells, 3 breakpoints in range.")
    assert lines[1] == "  1 on this axis = 200.00 EUR; the scenario's ratio is 3."
    assert lines[2] == ("  optimal shares at the scenario's ratio: recognizance 50.0%, conditions & reporting 50.0%, "
                        "secured bond 0.0%")
    assert lines[3] == ("Share of cases for which recognizance is optimal, whatever the confounding each "
                        "assumption allows:")
    header = lines[4].split()
    assert header[:5] == ["assumption", "recognizance", "at", "0", "at"]
    assert "for >= 50% of cases up to ratio" in lines[4] and "cost in EUR" in lines[4]
    assert lines[5].split() == ["point", "estimate", "100.0%", "50.0%", "4", "800"]
    assert lines[6].split() == ["Gamma", "=", "2", "100.0%", "25.0%", "2.667", "533"]
    assert len(lines) == 7
    later = sweep_one(*hand[:3], 5.0, 6.0, assumptions=[point_bounds(hand[0])])
    rows = str(later).splitlines()
    assert rows[-1].split() == ["point", "estimate", "25.0%", "50.0%", "never", "(<", "50%", "at", "5)", "-"]
    # Reference: the standard library's HTML unescaping gives the text back; no bare "&" or "<"
    for sweep in (s, later):
        page = sweep._repr_html_()
        assert page.startswith("<pre>") and page.endswith("</pre>")
        body = page[5:-6]
        assert html.unescape(body) == str(sweep)
        assert "<" not in body and "&" not in re.sub("&(amp|lt);", "", body)


def test_segments_with_two_levels_by_hand():
    # decision costs 0 and 100 (1 on the axis = 100): A 50 r against 100 + 25 r, lenient up to 4;
    # B and C: the second level prevents nothing, lenient everywhere
    rl = levels_of(np.array([[[0.5, 0.25]], [[0.5, 0.5]], [[0.25, 0.25]]]), [2.0, 1.0, 1.0])
    costs = Costs(np.tile([0.0, 100.0], (3, 1)), np.array([300.0]), "EUR", LEVELS[:2], ("o0",))
    s = sweep_one(rl, costs, ratio_axis(rl, costs, "o0"), 0.0, 6.0)
    seg = s.segments()
    assert list(seg["group"]) == ["g0", "g0", "g1", "g2"] and list(seg["level"]) == ["ror", "cond", "ror", "ror"]
    np.testing.assert_allclose(seg[["from_ratio", "to_ratio"]].to_numpy(), [[0, 4], [4, 6], [0, 6], [0, 6]])
    np.testing.assert_allclose(seg["to_cost"], [400.0, 600.0, 600.0, 600.0])


def test_rule_columns_and_scale_are_kept():
    # Reference: the definition, argmin over the summed lines of the single rule cell, computed here.
    rl, costs = hand_example()
    axis = ratio_axis(rl, costs, "o0")
    one = sweep_one(rl, costs, axis, 1.0, 6.0, columns=[], scale="log")
    assert one.scale == "log" and len(one.rule_cells) == 1
    # totals over the four cases: 350 r, 400 + 250 r, 800 + 150 r all meet at r = 4
    np.testing.assert_allclose(one.share_at(np.array([3.0, 4.0, 5.0])), [[1, 0, 0], [1, 0, 0], [0, 0, 1]])


def test_a_rule_for_other_cells_is_refused_with_both_shapes():
    rl = levels_of(np.full((4, 1, 3), 0.25), [1.0, 1.0, 1.0, 1.0])
    costs = Costs(np.tile([0.0, 100.0, 200.0], (4, 1)), np.array([600.0]), "EUR", LEVELS, ("o0",))
    other = levels_of(np.full((2, 1, 3), 0.25), [1.0, 1.0])
    rule = Rule.per_cell("elsewhere", "candidate", other.layout, np.eye(3)[:2], LEVELS, LABELS)
    with pytest.raises(InputError) as err:
        sweep_one(rl, costs, ratio_axis(rl, costs, "o0"), 0.0, 6.0, rules=[rule])
    assert str(err.value) == ("rule 'elsewhere' gives decisions for 2 cells with 3 levels; "
                              "the risk levels have 4 cells with 3 levels.")
