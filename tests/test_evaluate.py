"""Evaluation of rules under risk levels, checked by hand and by simulation."""

from __future__ import annotations

import numpy as np
import pytest

from policy import Costs, Rule, evaluate
from policy.demo.quarrow import simulate_cases, true_risk_levels

from .test_solve import make_risk_levels


def _small():
    # two cells, one outcome, two levels
    p = np.array([[[0.4, 0.1]], [[0.2, 0.2]]])
    rl = make_risk_levels(p, weights=[30, 10], groups=[0, 1])
    costs = Costs(np.array([[0.0, 100.0], [0.0, 100.0]]), np.array([1000.0]))
    return rl, costs


def test_hand_computed_figures():
    rl, costs = _small()
    delta = np.array([[0.0, 1.0], [1.0, 0.0]])  # cell 0 gets level 1, cell 1 level 0
    ev = evaluate(delta, rl, costs, name="hand")
    # cost: (30 * (100 + 0.1 * 1000) + 10 * (0 + 0.2 * 1000)) / 40 = (6000 + 2000) / 40
    assert ev.cost_per_case == pytest.approx(200.0)
    assert ev.cost_per_1000 == pytest.approx(200_000.0)
    assert ev.outcome_rates[0] == pytest.approx((30 * 0.1 + 10 * 0.2) / 40)
    np.testing.assert_allclose(ev.level_shares, [0.25, 0.75])
    # risk levels: cell 0 q = (0.6, 0.3, 0.1); cell 1 q = (0.8, 0.0, 0.2)
    within = ev.within_risk_levels()
    overall = within[(within["attribute"] == "all") & (within["level"] == "level 1")].set_index("risk_level")["share"]
    # P(D = 1 | R = 0) = 30 * 0.6 / (30 * 0.6 + 10 * 0.8)
    assert overall[0] == pytest.approx(18 / 26)
    assert overall[1] == pytest.approx(1.0)
    assert overall[2] == pytest.approx(3 / 5)
    mis = ev.misplaced().iloc[0]
    assert mis["safe_given_harsher"] == pytest.approx(18 / 26)
    assert mis["preventable_given_too_lenient"] == pytest.approx(0.0)


def test_fairness_gaps_by_hand():
    rl, costs = _small()
    # protected attribute 'group' = cell parity: cell 0 in group 0, cell 1 in group 1
    delta = np.array([[0.0, 1.0], [1.0, 0.0]])
    gaps = evaluate(delta, rl, costs).fairness_gaps()
    sp = gaps[gaps["kind"] == "statistical_parity"].iloc[0]
    assert sp["gap"] == pytest.approx(1.0) and sp["highest_group"] == "0"
    pf = gaps[(gaps["kind"] == "principal_fairness") & (gaps["risk_level"] == 0)].iloc[0]
    assert pf["gap"] == pytest.approx(1.0)
    # risk level 1 exists only in group 0: no gap can be computed
    assert np.isnan(gaps[(gaps["kind"] == "principal_fairness") & (gaps["risk_level"] == 1)]["gap"].iloc[0])


def test_regret_and_agreement():
    rl, costs = _small()
    a = Rule.per_cell("a", "candidate", rl.layout, np.array([[0.0, 1.0], [1.0, 0.0]]), rl.level_values, rl.level_labels)
    b = Rule.per_cell("b", "candidate", rl.layout, np.array([[1.0, 0.0], [1.0, 0.0]]), rl.level_values, rl.level_labels)
    ev = evaluate(b, rl, costs, reference=a)
    # b costs (30 * 400 + 10 * 200) / 40 = 350; a costs 200
    assert ev.regret_per_case == pytest.approx(150.0)
    assert ev.agreement == pytest.approx(0.25)


def test_evaluation_of_the_court_matches_simulated_outcomes():
    # Under the simulator's exact truth, evaluating the court's own decision probabilities must
    # reproduce the outcome rates seen in a large simulated sample (consistency of the
    # evaluation formulas with the data-generating process).
    truth, court = true_risk_levels()
    arm_share = 0.5
    delta = arm_share * court[:, 0, :] + (1 - arm_share) * court[:, 1, :]
    costs = Costs(np.zeros((truth.n_cells, 3)), np.zeros(3))
    ev = evaluate(delta, truth, costs)
    frame, _ = simulate_cases(400_000, seed=31)
    for j, key in enumerate(("missed_court", "new_offense", "new_violent")):
        assert ev.outcome_rates[j] == pytest.approx(frame[key].mean(), abs=0.002)
    shares = frame["decision"].value_counts(normalize=True).reindex(["recognizance", "supervision", "bond"])
    np.testing.assert_allclose(ev.level_shares, shares.to_numpy(), atol=0.003)


def test_presentations(demo_scenario):
    from policy import analyze

    a = analyze(demo_scenario)
    text = str(a.evaluation)
    assert "per 1,000 cases" in text and "release on recognizance" in text
    assert "<table" in a.evaluation._repr_html_()
    frame = a.evaluation.by_group()
    assert set(frame["attribute"]) == {"all", "sex", "race_group"}
    assert a.rule.to_frame()["level"].isin(a.risk_levels.level_labels).all()
    summary = a.risk_levels.summary()
    assert list(summary.columns) == a.risk_levels.risk_level_names
    assert set(summary.index.get_level_values("attribute")) == {"all", "sex", "race_group"}
    np.testing.assert_allclose(summary.sum(axis=1), 1.0)
    assert list(a.risk_levels.summary(by_group=False).index) == list(a.risk_levels.outcome_labels)
    assert "Risk levels from" in str(a.risk_levels)


def test_misplaced_shares_with_three_levels_by_hand():
    # one outcome, three levels, so risk levels 0..3: risk level 1 is too leniently treated at
    # level 0, risk level 2 at levels 0 and 1, risk level 3 is preventable by no level.
    # cell 0 (30 cases): p = (0.5, 0.3, 0.1), q = (0.5, 0.2, 0.2, 0.1), rule (0.2, 0.5, 0.3)
    # cell 1 (10 cases): p = (0.4, 0.4, 0.0), q = (0.6, 0.0, 0.4, 0.0), rule: level 1
    p = np.array([[[0.5, 0.3, 0.1]], [[0.4, 0.4, 0.0]]])
    rl = make_risk_levels(p, weights=[30, 10], groups=[0, 1])
    costs = Costs(np.zeros((2, 3)), np.array([1000.0]))
    delta = np.array([[0.2, 0.5, 0.3], [0.0, 1.0, 0.0]])
    mis = evaluate(delta, rl, costs).misplaced().iloc[0]
    # too lenient: cell 0: 30 * (0.2 * 0.2 + 0.2 * (0.2 + 0.5)) = 5.4; cell 1: 10 * 0.4 * 1 = 4;
    # preventable cases (risk levels 1 and 2): 30 * 0.4 + 10 * 0.4 = 16
    assert mis["preventable_given_too_lenient"] == pytest.approx(9.4 / 16, rel=1e-12)
    # safe cases given level 1 or 2: 30 * 0.5 * 0.8 + 10 * 0.6 * 1 = 18 of 30 * 0.5 + 10 * 0.6 = 21
    assert mis["safe_given_harsher"] == pytest.approx(18 / 21, rel=1e-12)


def test_evaluation_carries_its_names_counts_and_stratum_rates():
    # the three-level example above, evaluated as a bare array and against a reference rule
    p = np.array([[[0.5, 0.3, 0.1]], [[0.4, 0.4, 0.0]]])
    rl = make_risk_levels(p, weights=[30, 10], groups=[0, 1])
    costs = Costs(np.zeros((2, 3)), np.array([1000.0]), "USD")
    delta = np.array([[0.2, 0.5, 0.3], [0.0, 1.0, 0.0]])
    ev = evaluate(delta, rl, costs)
    assert (ev.rule_name, ev.rule_kind, ev.unit, ev.cases) == ("rule", "given", "USD", 40.0)
    assert ev.reference_name is None and ev.assumptions == rl.assumptions
    ref = Rule.per_cell("a", "candidate", rl.layout, delta, rl.level_values, rl.level_labels)
    assert evaluate(delta, rl, costs, name="b", reference=ref).reference_name == "a"
    # groups: 'all' first, then the protected attribute (cell 0 in group 0, cell 1 in group 1)
    assert ev.groups[0] == ("all", "all")
    np.testing.assert_allclose(ev.group_cases, [40.0, 30.0, 10.0])
    rate0 = 0.2 * 0.5 + 0.5 * 0.3 + 0.3 * 0.1
    np.testing.assert_allclose(ev.group_outcome_rates[:, 0], [(30 * rate0 + 10 * 0.4) / 40, rate0, 0.4])
    assert list(ev.misplaced().columns) == ["outcome", "safe_given_harsher", "preventable_given_too_lenient"]
    # P(D >= t | R = r) overall, by hand: cell 0 q = (0.5, 0.2, 0.2, 0.1), cell 1 q = (0.6, 0, 0.4, 0)
    at_least = ev.at_least()
    assert at_least.shape == (3, 1, 4, 2)
    # risk level 2: mass 30 * 0.2 = 6 (rule 0.2, 0.5, 0.3) and 10 * 0.4 = 4 (level 1)
    np.testing.assert_allclose(at_least[0, 0, 2], [(6 * 0.8 + 4) / 10, 6 * 0.3 / 10])
    # risk level 0: mass 15 and 6
    np.testing.assert_allclose(at_least[0, 0, 0], [(15 * 0.8 + 6) / 21, 15 * 0.3 / 21])
    within = ev.within_risk_levels()
    assert list(within.columns) == ["attribute", "group", "outcome", "risk_level", "risk_level_name", "level",
                                    "share", "stratum_cases"]
    assert set(zip(within["attribute"], within["group"])) == {("all", "all"), ("group", "0"), ("group", "1")}
    assert set(within["outcome"]) == {"o0"} and set(within["risk_level_name"]) == set(rl.risk_level_names)
    row = within[(within["attribute"] == "all") & (within["risk_level"] == 2)]
    np.testing.assert_allclose(row["share"], [0.6 * 0.2, (6 * 0.5 + 4) / 10, 0.6 * 0.3])
    np.testing.assert_allclose(row["stratum_cases"], 10.0)


def _six_cells():
    # six cells, one outcome, three levels; protected attributes 'group' (cell parity) and 'tier'
    # (cells 0-1, 2-3, 4-5); each cell given one level
    p = np.array([[0.5, 0.3, 0.3], [0.6, 0.2, 0.2], [0.4, 0.3, 0.1], [0.7, 0.5, 0.2], [0.3, 0.2, 0.0],
                  [0.5, 0.1, 0.05]])[:, None, :]
    rl = make_risk_levels(p, weights=[10, 30, 20, 20, 25, 15], groups=[0, 0, 1, 1, 2, 2], protected=("group", "tier"))
    level = np.array([0, 2, 2, 2, 1, 0])
    costs = Costs(np.tile([0.0, 100.0, 300.0], (6, 1)), np.array([1000.0]), "EUR")
    return rl, level, np.eye(3)[level], costs


def test_fairness_gaps_with_three_groups_and_two_attributes_by_hand():
    rl, level, delta, costs = _six_cells()
    gaps = evaluate(delta, rl, costs).fairness_gaps()
    assert list(gaps.columns) == ["kind", "attribute", "outcome", "risk_level", "risk_level_name", "threshold", "gap",
                                  "highest_group", "lowest_group"]
    # per attribute and threshold: one statistical-parity row and one row per risk level (0..3)
    assert len(gaps) == 2 * 2 * (1 + 4) and "all" not in set(gaps["attribute"])
    sp = gaps[gaps["kind"] == "statistical_parity"].set_index(["attribute", "threshold"])
    assert (sp["risk_level"] == -1).all() and (sp["outcome"] == "").all() and (sp["risk_level_name"] == "").all()
    # P(D >= 1 | tier): tier 0: 30 / 40, tier 1: 40 / 40, tier 2: 25 / 40; P(D >= 2): 30/40, 1, 0
    assert tuple(sp.loc[("tier", "level 1"), ["gap", "highest_group", "lowest_group"]]) == pytest.approx((15 / 40, "1", "2"))
    assert tuple(sp.loc[("tier", "level 2"), ["gap", "highest_group", "lowest_group"]]) == (1.0, "1", "2")
    # P(D >= 1 | group): even cells (10, 20, 25 cases) 45 / 55, odd (30, 20, 15) 50 / 65; P(D >= 2): 20/55, 50/65
    assert tuple(sp.loc[("group", "level 1"), ["gap", "highest_group", "lowest_group"]]) == pytest.approx((45 / 55 - 50 / 65, "0", "1"))
    assert tuple(sp.loc[("group", "level 2"), ["gap", "highest_group", "lowest_group"]]) == pytest.approx((50 / 65 - 20 / 55, "1", "0"))
    # principal fairness by the definition, cell by cell: P(D >= t | R = r, A = a) is the share of
    # the cases of risk level r in group a (weight w * q_r) given level t or harsher
    q = rl.q[:, 0, :]
    pf = gaps[gaps["kind"] == "principal_fairness"]
    assert set(pf["outcome"]) == {"o0"}
    for attr, members in (("group", [[0, 2, 4], [1, 3, 5]]), ("tier", [[0, 1], [2, 3], [4, 5]])):
        for t in (1, 2):
            for r in range(4):
                vals = []
                for cells in members:
                    mass = sum(rl.weights[c] * q[c, r] for c in cells)
                    vals.append(sum(rl.weights[c] * q[c, r] for c in cells if level[c] >= t) / mass if mass > 0 else np.nan)
                row = pf[(pf["attribute"] == attr) & (pf["threshold"] == f"level {t}") & (pf["risk_level"] == r)].iloc[0]
                assert row["risk_level_name"] == rl.risk_level_names[r]
                finite = [(v, str(i)) for i, v in enumerate(vals) if np.isfinite(v)]
                assert row["gap"] == pytest.approx(max(finite)[0] - min(finite)[0], abs=1e-12)
                if max(finite)[0] > min(finite)[0]:
                    assert row["highest_group"] == max(finite)[1] and row["lowest_group"] == min(finite)[1]
    # risk level 2 (q = p1 - p2) is empty in tier 0 (p1 = p2 there): the gap is over tiers 1 and 2;
    # tier 1 (q 0.2 and 0.3, both at level 2): 1; tier 2 (25 cases q 0.2 at level 1, 15 q 0.05 at level 0)
    row = pf[(pf["attribute"] == "tier") & (pf["risk_level"] == 2) & (pf["threshold"] == "level 1")].iloc[0]
    assert tuple(row[["gap", "highest_group", "lowest_group"]]) == pytest.approx((1 - 5 / 5.75, "1", "2"))


def test_headline_figures_table_text_and_html_by_hand():
    rl, level, delta, costs = _six_cells()
    ref = Rule.per_cell("lenient <all> & co", "candidate", rl.layout, np.eye(3)[np.zeros(6, int)], rl.level_values,
                        rl.level_labels)
    ev = evaluate(delta, rl, costs, name="given", reference=ref)
    # 120 cases: level 0 for 25 (cells 0, 5), level 1 for 25 (cell 4), level 2 for 70
    shares = [25 / 120, 25 / 120, 70 / 120]
    rate = (10 * 0.5 + 30 * 0.2 + 20 * 0.1 + 20 * 0.2 + 25 * 0.2 + 15 * 0.5) / 120
    cost = (25 * 100 + 70 * 300) / 120 + 1000 * rate
    ref_cost = 1000 * (10 * 0.5 + 30 * 0.6 + 20 * 0.4 + 20 * 0.7 + 25 * 0.3 + 15 * 0.5) / 120
    overview = ev.overview()
    assert list(overview) == ["rule", "kind", "unit", "cases", "cost_per_case", "cost_per_1000_cases", "rate_o0",
                              "share_level_0", "share_level_1", "share_level_2", "regret_per_case",
                              "regret_per_1000_cases", "agreement"]
    assert (overview["rule"], overview["kind"], overview["unit"], overview["cases"]) == ("given", "given", "EUR", 120.0)
    assert overview["cost_per_case"] == pytest.approx(cost, rel=1e-12)
    assert overview["cost_per_1000_cases"] == pytest.approx(1000 * cost, rel=1e-12)
    assert overview["rate_o0"] == pytest.approx(rate, rel=1e-12)
    assert [overview[f"share_level_{d}"] for d in range(3)] == pytest.approx(shares, rel=1e-12)
    assert overview["regret_per_case"] == pytest.approx(cost - ref_cost, rel=1e-12)
    assert overview["regret_per_1000_cases"] == pytest.approx(1000 * (cost - ref_cost), rel=1e-12)
    assert overview["agreement"] == pytest.approx(25 / 120, rel=1e-12)
    assert all(type(v) in (str, float) for v in overview.values())
    plain = evaluate(delta, rl, costs).overview()
    assert "regret_per_case" not in plain and "agreement" not in plain and "regret_per_1000_cases" not in plain
    frame = ev.to_frame()
    assert list(frame.columns) == ["figure", "value"]
    assert list(frame["figure"]) == list(overview) and list(frame["value"]) == list(overview.values())
    text = str(ev)
    assert ev.summary() == text
    assert text.splitlines() == [
        f"given: expected cost {1000 * cost:,.0f} EUR per 1,000 cases",
        f"  regret against lenient <all> & co: {1000 * (cost - ref_cost):,.0f} per 1,000 cases; same level for 20.8% of cases",
        "  decision shares: level 0 20.8%, level 1 20.8%, level 2 58.3%",
        f"  expected outcome rates: outcome 0 {rate:.1%}",
    ]
    assert len(str(evaluate(delta, rl, costs)).splitlines()) == 3
    by_group = ev.by_group()
    assert list(by_group.columns) == ["attribute", "group", "cases", "share: level 0", "share: level 1",
                                      "share: level 2", "rate: outcome 0"]
    assert list(zip(by_group["attribute"], by_group["group"])) == [("all", "all"), ("group", "0"), ("group", "1"),
                                                                   ("tier", "0"), ("tier", "1"), ("tier", "2")]
    np.testing.assert_allclose(by_group["cases"], [120, 55, 65, 40, 40, 40])
    np.testing.assert_allclose(by_group.iloc[3, 3:6].astype(float), [10 / 40, 0, 30 / 40])
    np.testing.assert_allclose(by_group["rate: outcome 0"].iloc[5], (25 * 0.2 + 15 * 0.5) / 40)
    html = ev._repr_html_()
    assert html.startswith("<pre>given: expected cost")
    assert "lenient &lt;all> &amp; co" in html and "<all>" not in html
    assert html.split("</pre>", 1)[1] == by_group.to_html(index=False)


def test_undefined_gaps_name_their_threshold_and_no_group():
    # the three-level example: cell 1 (group 1) has q = (0.6, 0, 0.4, 0), so risk levels 1 and 3
    # hold cases of group 0 only and their principal-fairness gaps are undefined
    p = np.array([[[0.5, 0.3, 0.1]], [[0.4, 0.4, 0.0]]])
    rl = make_risk_levels(p, weights=[30, 10], groups=[0, 1])
    gaps = evaluate(np.array([[0.2, 0.5, 0.3], [0.0, 1.0, 0.0]]), rl, Costs(np.zeros((2, 3)), np.array([1000.0]))).fairness_gaps()
    pf = gaps[gaps["kind"] == "principal_fairness"]
    undefined = pf[pf["risk_level"].isin([1, 3])]
    assert undefined["gap"].isna().all() and len(undefined) == 4
    assert list(undefined["threshold"]) == ["level 1", "level 1", "level 2", "level 2"]
    assert (undefined["highest_group"] == "").all() and (undefined["lowest_group"] == "").all()


def test_text_lists_every_outcome_rate():
    p = np.array([[[0.5, 0.25], [0.2, 0.1]], [[0.4, 0.4], [0.3, 0.0]]])
    rl = make_risk_levels(p, weights=[30, 10], groups=[0, 1])
    ev = evaluate(np.array([[1.0, 0.0], [0.0, 1.0]]), rl, Costs(np.zeros((2, 2)), np.array([100.0, 50.0])))
    # outcome 0: (30 * 0.5 + 10 * 0.4) / 40; outcome 1: (30 * 0.2 + 10 * 0.0) / 40
    assert str(ev).splitlines()[-1] == "  expected outcome rates: outcome 0 47.5%, outcome 1 15.0%"
