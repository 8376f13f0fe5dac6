"""What a set of risk levels shows: shares by group, the summary table, text, HTML, the
risk-level table and copies with other probabilities, checked by hand on three cells
(policy/estimation/strata.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy.estimation.strata import RiskLevels, risk_level_names
from policy.inputs.cells import CellLayout


def three_cells():
    # cells 0 and 2 in group "a", cell 1 in "b"; group "c" has no cells
    # outcome o0: p = (0.5, 0.2), (0.4, 0.4), (0.1, 0.0) -> q = (0.5, 0.3, 0.2), (0.6, 0, 0.4), (0.9, 0.1, 0)
    # outcome o1: p = (0.2, 0.1), (0.3, 0.1), (0.0, 0.0) -> q = (0.8, 0.1, 0.1), (0.7, 0.2, 0.1), (1, 0, 0)
    frame = pd.DataFrame({
        "area": pd.Categorical(["north", "south", "east"], categories=["north", "south", "east"], ordered=True),
        "group": pd.Categorical(["a", "b", "a"], categories=["a", "b", "c"], ordered=True),
    })
    p = np.array([[[0.5, 0.2], [0.2, 0.1]], [[0.4, 0.4], [0.3, 0.1]], [[0.1, 0.0], [0.0, 0.0]]])
    borrowed = np.zeros_like(p, dtype=bool)
    borrowed[0, 1, 1] = borrowed[0, 0, 1] = True   # cell 0 never saw level 1 (both outcomes)
    borrowed[2, 0, 0] = True                       # cell 2 never saw level 0 for outcome o0
    return RiskLevels(CellLayout(frame, ("group",), ("area",), None), ("ror", "bond"), ("release", "bond set"),
                      ("o0", "o1"), ("missed court", "arrest"), np.array([10.0, 30.0, 60.0]), p, borrowed,
                      {"jail_cost": np.array([5.0, 6.0, 7.0])}, source="hand table")


def test_risk_level_names_for_two_and_three_levels():
    assert risk_level_names(["release", "bond"]) == ["safe", "preventable only by bond", "not preventable"]
    assert risk_level_names(["a", "b", "c"]) == ["safe", "preventable by b or harsher", "preventable only by c",
                                                 "not preventable"]


def test_shares_by_group_by_hand():
    rl = three_cells()
    shares = rl.shares()
    assert list(shares.columns) == ["outcome", "attribute", "group", "risk_level", "risk_level_name", "share", "cases"]
    # (attribute, group) x outcome x risk level: (1 + 3 groups) x 2 x 3
    assert len(shares) == 4 * 2 * 3
    o0 = shares[shares["outcome"] == "o0"].set_index(["attribute", "group", "risk_level"]).sort_index()
    # overall: r0 (10 * 0.5 + 30 * 0.6 + 60 * 0.9) / 100, r1 (3 + 0 + 6) / 100, r2 (2 + 12 + 0) / 100
    np.testing.assert_allclose(o0.loc[("all", "all"), "share"], [0.77, 0.09, 0.14])
    np.testing.assert_allclose(o0.loc[("group", "a"), "share"], [59 / 70, 9 / 70, 2 / 70])
    np.testing.assert_allclose(o0.loc[("group", "b"), "share"], [0.6, 0.0, 0.4])
    assert o0.loc[("group", "c"), "share"].isna().all() and (o0.loc[("group", "c"), "cases"] == 0).all()
    np.testing.assert_allclose(o0.loc[("group", "a"), "cases"], 70.0)
    assert list(o0.loc[("all", "all"), "risk_level_name"]) == rl.risk_level_names
    o1 = shares[(shares["outcome"] == "o1") & (shares["attribute"] == "all")]
    np.testing.assert_allclose(o1["share"], [(8 + 21 + 60) / 100, (1 + 6) / 100, (1 + 3) / 100])


def test_summary_text_and_html_by_hand():
    rl = three_cells()
    table = rl.summary()
    assert list(table.columns) == rl.risk_level_names and table.columns.name is None
    # in the order of the groups and outcome kinds, not sorted by label
    assert list(table.index) == [("all", "all", "missed court"), ("all", "all", "arrest"),
                                 ("group", "a", "missed court"), ("group", "a", "arrest"),
                                 ("group", "b", "missed court"), ("group", "b", "arrest")]
    np.testing.assert_allclose(table.loc[("group", "a", "missed court")], [59 / 70, 9 / 70, 2 / 70])
    overall = rl.summary(by_group=False)
    assert list(overall.index) == ["missed court", "arrest"] and overall.index.name is None
    np.testing.assert_allclose(overall.loc["arrest"], [0.89, 0.07, 0.04])
    lines = str(rl).splitlines()
    assert lines[0] == "Risk levels from hand table (3 cells, 100 cases):"
    assert lines[1:4] == overall.to_string(float_format=lambda v: f"{v:6.1%}").splitlines()
    assert "  77.0%" in lines[2] and "  14.0%" in lines[2]
    # level 'release' unseen in cell 2 (o0); level 'bond set' unseen in cell 0 (both outcomes: one cell)
    assert lines[4] == ("Cells where a level was never observed (estimate borrowed from the pooled rate): "
                        "release: 1, bond set: 1")
    assert len(lines) == 5
    html = rl._repr_html_()
    assert html == "<p>Risk levels from hand table</p>" + table.to_html(float_format=lambda v: f"{v:.1%}")
    assert "84.3%" in html  # 59 / 70


def test_risk_level_table_rows_by_hand():
    rl = three_cells()
    frame = rl.to_frame()
    assert list(frame.columns) == ["area", "group", "outcome", "cases", "risk_level_0", "risk_level_1", "risk_level_2",
                                   "p_ror", "p_bond", "borrowed_ror", "borrowed_bond", "jail_cost"]
    # one row per cell x outcome, cells first
    assert list(frame["area"]) == ["north", "north", "south", "south", "east", "east"]
    assert list(frame["group"]) == ["a", "a", "b", "b", "a", "a"]
    assert frame["area"].dtype == object and frame["group"].dtype == object
    assert list(frame["outcome"]) == ["o0", "o1"] * 3
    np.testing.assert_allclose(frame["cases"], [10, 10, 30, 30, 60, 60])
    np.testing.assert_allclose(frame[["risk_level_0", "risk_level_1", "risk_level_2"]].iloc[2], [0.6, 0.0, 0.4])
    np.testing.assert_allclose(frame[["risk_level_0", "risk_level_1", "risk_level_2"]].iloc[3], [0.7, 0.2, 0.1])
    np.testing.assert_allclose(frame["p_ror"], [0.5, 0.2, 0.4, 0.3, 0.1, 0.0])
    np.testing.assert_allclose(frame["p_bond"], [0.2, 0.1, 0.4, 0.1, 0.0, 0.0])
    assert list(frame["borrowed_ror"]) == [False, False, False, False, True, False]
    assert list(frame["borrowed_bond"]) == [True, True, False, False, False, False]
    np.testing.assert_allclose(frame["jail_cost"], [5, 5, 6, 6, 7, 7])


def test_a_copy_with_other_probabilities_keeps_everything_else():
    rl = three_cells()
    p = rl.p * 0.5
    same_source = rl.with_p(p)
    assert same_source.p is p and same_source.source == "hand table"
    other = rl.with_p(p, source="replicate 3")
    assert other.source == "replicate 3" and other.p is p
    for name in ("layout", "level_values", "level_labels", "outcome_keys", "outcome_labels", "weights", "borrowed",
                 "cell_costs", "assumptions"):
        assert getattr(other, name) is getattr(rl, name)
    np.testing.assert_allclose(other.q[1, 0], [0.8, 0.0, 0.2])
    assert rl.p[1, 0, 0] == pytest.approx(0.4)


# -- the estimator's fit: what it keeps besides the risk levels ------------------------------------
def four_cells(seed=3):
    """Counts for four cells (area x band), two outcome kinds, two levels, no arm. Outcome o0's
    level effect depends strongly on the area (ratio 0.2 in north, 0.95 in south), so its level
    term by area is kept; outcome o1 is declared impossible at level 1 (no events there)."""
    from policy.inputs.cells import CellTable

    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "area": pd.Categorical(["north", "north", "south", "south"], categories=["north", "south"], ordered=True),
        "band": pd.Categorical(["low", "high", "low", "high"], categories=["low", "high"], ordered=True),
    })
    cases = np.array([[4000, 3000], [3000, 4000], [3500, 3500], [2500, 4500]])[:, None, :]
    base = np.array([0.06, 0.12, 0.08, 0.15])
    ratio = np.array([0.2, 0.2, 0.95, 0.95])
    p0 = np.stack([base, base * ratio], axis=-1)
    p1 = np.stack([np.array([0.03, 0.05, 0.04, 0.02]), np.zeros(4)], axis=-1)
    p = np.stack([p0, p1], axis=1)[:, None]                                   # (4, 1, 2, 2)
    observed = np.repeat(cases[:, :, None, :], 2, axis=2)
    events = rng.binomial(observed, p)
    return CellTable(CellLayout(frame, (), ("area", "band"), None), ("ror", "bond"), ("o0", "o1"), (None,),
                     cases, observed, events, source="four cells.csv")


def test_fit_keeps_its_prior_strength_target_ratios_terms_and_names():
    from policy.estimation.strata import RiskLevelEstimator, level_risk_ratios
    from policy.estimation.target import select_level_terms

    cells = four_cells()
    est = RiskLevelEstimator(structural_zeros={1: 1}).fit(cells)
    rl = est.risk_levels_
    events, observed = cells.events.sum(axis=1), cells.observed.sum(axis=1)
    zero = np.array([[False, False], [False, True]])
    p, kappa, target = est.estimate_p(events, observed, est.design(cells.layout, 2))
    np.testing.assert_array_equal(rl.p, p)
    np.testing.assert_array_equal(est.prior_strength_, kappa)
    np.testing.assert_array_equal(rl.prior_strength, kappa)
    np.testing.assert_array_equal(est.target_, target)
    np.testing.assert_array_equal(rl.structural_zero, zero)
    assert rl.p[:, 1, 1].max() == 0.0 and not rl.borrowed.any()
    # the target is a baseline times a level ratio, so the case-summed target's level profile
    # gives the ratios back: per outcome kind, target summed over cells / its level-0 value
    np.testing.assert_allclose(est.level_ratios_, target.sum(axis=0) / target.sum(axis=0)[:, :1], rtol=1e-12)
    assert est.level_ratios_.shape == (2, 2) and (est.level_ratios_[:, 0] == 1).all()
    assert est.level_ratios_[1, 1] == 0.0
    # kept level terms: those select_level_terms keeps on the same counts (o0's area term here)
    kept = select_level_terms(np.where(zero, 0, events), np.where(zero, 0, observed), est.design(cells.layout, 2),
                              zero)[0]
    assert est.level_terms_ == {"o0": ["area"], "o1": []}
    assert kept[:, 0].tolist() == [True, False]
    common = RiskLevelEstimator(structural_zeros={1: 1}, level_terms=False).fit(cells)
    assert common.level_terms_ == {"o0": [], "o1": []}
    # without level terms the target's ratios are the chained Mantel-Haenszel ratios
    mh = level_risk_ratios(np.where(zero, 0, events), np.where(zero, 0, observed))
    np.testing.assert_allclose(common.level_ratios_, np.where(zero, 0.0, mh), rtol=1e-9)
    # names, labels, weights and source
    assert rl.level_labels == ("ror", "bond") and rl.outcome_labels == ("o0", "o1")
    labelled = RiskLevelEstimator(structural_zeros={1: 1}).fit(cells, ["release", "bond set"], ["missed", "offense"])
    assert labelled.risk_levels_.level_labels == ("release", "bond set")
    assert labelled.risk_levels_.outcome_labels == ("missed", "offense")
    assert rl.source == "cell estimator on four cells.csv"
    assert rl.weights.dtype == np.float64 and rl.weights.tolist() == [7000.0, 7000.0, 7000.0, 7000.0]


def test_fit_with_chosen_target_covariates_and_unseen_levels():
    from policy.errors import InputError
    from policy.estimation.strata import RiskLevelEstimator

    cells = four_cells()
    est = RiskLevelEstimator(structural_zeros={1: 1}, target_covariates=["band"])
    assert len(est.design(cells.layout)) == 1
    assert RiskLevelEstimator(target_covariates=[]).design(cells.layout) == []
    est.fit(cells)
    # the area term is no candidate when the target uses the band alone
    assert est.level_terms_ == {"o0": [], "o1": []}
    with pytest.raises(InputError) as err:
        RiskLevelEstimator(target_covariates=["band", "court"]).design(cells.layout)
    assert str(err.value) == "target_covariates lists 'court', which is not a cell column; expected one of: area, band."
    # outcome o1 at level 'bond' with nothing observed and not declared impossible
    observed = cells.observed.copy()
    observed[:, :, 1, 1] = 0
    events = np.where(observed > 0, cells.events, 0)
    from dataclasses import replace

    unseen = replace(cells, observed=observed, events=events)
    with pytest.raises(InputError) as err:
        RiskLevelEstimator().fit(unseen)
    assert str(err.value) == (
        "four cells.csv: outcome 'o1' is never observed among cases given level 'bond'; the data cannot tell how "
        "cases fare under it. Declare it impossible there (impossible_from) or supply risk levels estimated elsewhere.")
    # seen in one cell only: estimated (borrowed elsewhere), no error
    observed[0, 0, 1, 1] = 1
    rl = RiskLevelEstimator().fit(replace(cells, observed=observed, events=events)).risk_levels_
    assert rl.borrowed[1:, 1, 1].all() and not rl.borrowed[0, 1, 1] and not rl.borrowed[:, 0].any()


def test_estimator_settings_come_from_the_scenario(demo_scenario):
    from dataclasses import replace

    from policy.estimation.strata import RiskLevelEstimator

    column = demo_scenario.cell_columns[0]
    outcomes = list(demo_scenario.outcomes)
    outcomes[2] = replace(outcomes[2], impossible_from=1)
    sc = replace(demo_scenario, outcomes=outcomes,
                 estimator=replace(demo_scenario.estimator, prior_strength=12.0, target_covariates=(column,)))
    est = RiskLevelEstimator.from_scenario(sc)
    assert est.prior_strength == 12.0 and est.target_covariates == (column,)
    assert est.structural_zeros == {2: 1}


def test_fit_of_an_outcome_impossible_at_every_level():
    from policy.estimation.strata import RiskLevelEstimator

    est = RiskLevelEstimator(structural_zeros={1: 0}).fit(four_cells())
    # no target anywhere: its level ratios are 0 (not 0 / 0), its probabilities 0
    np.testing.assert_array_equal(est.level_ratios_[1], [0.0, 0.0])
    np.testing.assert_array_equal(est.risk_levels_.p[:, 1], 0.0)
    assert est.level_ratios_[0, 0] == 1.0


def test_fit_counts_only_free_levels_in_the_criterion_for_level_terms():
    # three levels, the outcome impossible at the harshest: a level term by area has one free
    # level (level 1), so Akaike's criterion charges it 2 x 1 parameters. Its statistic here is
    # about 3.7 (select_level_terms on the same counts), above 2 but below the 4 that two free
    # levels would cost, so the term is kept only when the impossible level is left out.
    from policy.estimation.strata import RiskLevelEstimator
    from policy.estimation.target import select_level_terms
    from policy.inputs.cells import CellTable

    frame = pd.DataFrame({
        "area": pd.Categorical(["north", "north", "south", "south"], categories=["north", "south"], ordered=True),
        "band": pd.Categorical(["low", "high", "low", "high"], categories=["low", "high"], ordered=True),
    })
    cases = np.array([[400, 300, 200], [300, 400, 200], [350, 350, 200], [250, 450, 200]])[:, None, :]
    base = np.array([0.3, 0.35, 0.3, 0.35])
    ratio = np.array([0.58, 0.58, 0.9, 0.9])
    p = np.stack([base, base * ratio, 0 * base], -1)[:, None, None, :]
    observed = cases[:, :, None, :].copy()
    events = np.random.default_rng(0).binomial(observed, p)
    cells = CellTable(CellLayout(frame, (), ("area", "band"), None), ("ror", "conditions", "bond"), ("fta",), (None,),
                      cases, observed, events, source="three levels.csv")
    est = RiskLevelEstimator(structural_zeros={0: 2})
    zero = np.array([[False, False, True]])
    e, n = np.where(zero, 0, events.sum(axis=1)), np.where(zero, 0, observed.sum(axis=1))
    design = est.design(cells.layout)
    kept, statistic = select_level_terms(e, n, design, zero)
    assert 2.0 < statistic[0, 0] < 4.0 and kept[:, 0].tolist() == [True, False]
    assert not select_level_terms(e, n, design, None)[0].any()
    assert est.fit(cells).level_terms_ == {"fta": ["area"]}


def _three_level_cells(ratio_north: float, ratio_south: float, east: bool):
    """Invented counts: level 2 makes the outcome impossible; optional 'east' cells seen only there."""
    from policy.inputs.cells import CellTable

    areas = ["north", "north", "south", "south"] + (["east", "east"] if east else [])
    frame = pd.DataFrame({"area": pd.Categorical(areas, categories=["north", "south", "east"], ordered=True),
                          "band": pd.Categorical(["low", "high"] * (len(areas) // 2), categories=["low", "high"], ordered=True)})
    cases = np.array([[400, 300, 200], [300, 400, 200], [350, 350, 200], [250, 450, 200]]
                     + ([[0, 0, 200], [0, 0, 150]] if east else []))[:, None, :]
    base = np.array([0.3, 0.35, 0.3, 0.35] + [0.3] * (len(areas) - 4))
    ratio = np.array([ratio_north] * 2 + [ratio_south] * 2 + [1.0] * (len(areas) - 4))
    p = np.stack([base, base * ratio, 0 * base], -1)[:, None, None, :]
    observed = cases[:, :, None, :].copy()
    events = np.random.default_rng(0).binomial(observed, p)
    return CellTable(CellLayout(frame, (), ("area", "band"), None), ("ror", "conditions", "bond"), ("fta",), (None,),
                     cases, observed, events, source="three levels.csv")


def test_cases_at_an_impossible_level_add_nothing_to_the_level_term_criterion():
    # Akaike's criterion for a level term charges 2 x (categories with cases - 1) x free levels
    # (Akaike 1974; the count worked by hand). Cases recorded only at the impossible level carry no
    # information on the level ratios: the two 'east' cells below, seen only at level 2, must not
    # count as a third category (which would charge 4 instead of 2 and drop the term, whose score
    # statistic is about 3.7 with or without them), and the events there, 0, must stay 0.
    from policy.estimation.strata import RiskLevelEstimator
    from policy.estimation.target import select_level_terms

    est = RiskLevelEstimator(structural_zeros={0: 2})
    zero = np.array([[False, False, True]])
    cells = _three_level_cells(0.58, 0.9, east=True)
    e = np.where(zero, 0, cells.events.sum(axis=1))
    n = np.where(zero, 0, cells.observed.sum(axis=1))
    _, statistic = select_level_terms(e, n, est.design(cells.layout), zero)
    assert 2.0 < statistic[0, 0] < 4.0
    assert est.fit(cells).level_terms_ == {"fta": ["area"]}
    # the same ratio in both areas: no term passes (statistics below 2, by select_level_terms);
    # an event counted at the impossible level would make both areas' ratios there differ from 0
    cells = _three_level_cells(0.75, 0.75, east=False)
    e = np.where(zero, 0, cells.events.sum(axis=1))
    n = np.where(zero, 0, cells.observed.sum(axis=1))
    _, statistic = select_level_terms(e, n, est.design(cells.layout), zero)
    assert (statistic[:, 0] < 2.0).all()
    assert est.fit(cells).level_terms_ == {"fta": []}
