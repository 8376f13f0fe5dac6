"""Comparison of rules: observed rules, candidates, batched scoring, the aid's effect, the CLI.

Checks against something outside the project: a pandas crosstab (observed rule), the
foundation's one-rule evaluation and argmin rule (batched scoring), and the demo simulator's
exact truth (expected costs and the aid's effect by risk level, within their intervals).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from policy import compare, load_scenario
from policy.inputs.cells import CellTable
from policy.assessment.compare import (
    CandidateSpec,
    ComparisonStatistic,
    aid_rule,
    candidate_rule,
    observed_delta,
    observed_rules,
    score_rules,
)
from policy.decision.costs import costs_from_scenario
from policy.demo.quarrow import demo_scenario_path, simulate_cases, true_risk_levels
from policy.errors import InputError
from policy.decision.evaluate import evaluate, group_matrix
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevelEstimator
from policy.assessment.uncertainty import CountResampler

from .conftest import run_cli, write_scenario


@pytest.fixture(scope="module")
def demo():
    """The demo scenario, its 20,000-case table, cell table, risk levels and costs."""
    scenario = load_scenario(demo_scenario_path())
    frame, _ = simulate_cases(20_000, seed=scenario.seed)
    cells = CellTable.from_cases(frame, scenario)
    rl = RiskLevelEstimator.from_scenario(scenario).fit(cells, scenario.level_labels, scenario.outcome_labels).risk_levels_
    costs = costs_from_scenario(scenario, rl)
    return scenario, frame, cells, rl, costs


# ----------------------------------------------------------------------------------------------
# Observed rules and the aid's recommendation
# ----------------------------------------------------------------------------------------------
def test_observed_rule_without_the_aid_equals_a_pandas_crosstab(demo):
    scenario, frame, cells, _, _ = demo
    rule = observed_rules(cells, scenario.aid.name)[0]
    assert rule.kind == "observed" and "not shown" in rule.name
    # independent reference: pandas crosstab of cell x decision among cases without the aid (common practice)
    sub = frame[frame["aid_shown"] == 0]
    key = sub[list(scenario.cell_columns)].astype(str).agg("|".join, axis=1)
    table = pd.crosstab(key, sub["decision"], normalize="index").reindex(columns=list(scenario.level_values), fill_value=0.0)
    cell_key = cells.layout.frame.astype(str).agg("|".join, axis=1)
    present = cell_key.isin(table.index).to_numpy()
    np.testing.assert_allclose(rule.cell_delta[present], table.loc[cell_key[present]].to_numpy(), rtol=0, atol=1e-12)
    # cells without a no-aid case borrow their rule cell's no-aid mix, and the note says how many
    assert (~present).sum() > 0 and f"{(~present).sum()} cells" in rule.note
    index, groups = cells.layout.rule_index()
    rc = pd.Series(groups.astype(str).agg("|".join, axis=1).to_numpy()[index])
    sub_rc = sub[list(scenario.rule_covariates)].astype(str).agg("|".join, axis=1)
    by_rc = pd.crosstab(sub_rc, sub["decision"], normalize="index").reindex(columns=list(scenario.level_values), fill_value=0.0)
    np.testing.assert_allclose(rule.cell_delta[~present], by_rc.loc[rc[~present]].to_numpy(), atol=1e-12)


def test_one_observed_rule_without_an_arm_column(demo):
    scenario, frame, _, _, _ = demo
    raw = dict(scenario.raw)
    raw["columns"] = {k: v for k, v in raw["columns"].items() if k != "arm"}
    no_arm = type(scenario).from_dict(raw)
    cells = CellTable.from_cases(frame, no_arm)
    rules = observed_rules(cells)
    assert len(rules) == 1 and rules[0].name == "courts (observed)"
    counts = cells.cases[:, 0, :]
    np.testing.assert_allclose(rules[0].cell_delta, counts / counts.sum(axis=1, keepdims=True))


def test_observed_delta_falls_back_to_the_group_then_the_whole_arm():
    cases = np.array([[2.0, 2.0], [0.0, 0.0], [0.0, 0.0], [1.0, 3.0]])
    delta, borrowed = observed_delta(cases, np.array([0, 0, 1, 2]), 3)
    np.testing.assert_allclose(delta, [[0.5, 0.5], [0.5, 0.5], [3 / 8, 5 / 8], [0.25, 0.75]])
    assert borrowed.tolist() == [False, True, True, False]


def test_aid_rule_is_the_recommendation_table(demo):
    scenario, frame, cells, _, _ = demo
    rule = aid_rule(cells, scenario.aid.name)
    # the Quarrow screen recommends one level per (tier, charge): a pandas groupby of the case table
    per_case = frame[list(scenario.cell_columns) + ["aid_recommendation"]].astype(str)
    key = per_case[list(scenario.cell_columns)].agg("|".join, axis=1)
    first = per_case.groupby(key)["aid_recommendation"].first()
    cell_key = cells.layout.frame.astype(str).agg("|".join, axis=1)
    expected = np.array([scenario.level_values.index(v) for v in first.loc[cell_key]])
    assert (rule.cell_delta.argmax(axis=1) == expected).all()
    assert rule.note == "one recommended level per cell"


# ----------------------------------------------------------------------------------------------
# Candidate rules
# ----------------------------------------------------------------------------------------------
def test_threshold_candidate_gives_levels_by_tier(demo):
    scenario, _, cells, _, _ = demo
    spec = scenario.sections["candidate_rules"][0]
    rule = candidate_rule(spec, cells.layout, scenario.level_values, scenario.level_labels, cells.weights)
    tiers = cells.layout.frame["aid_tier"].astype(int).to_numpy()
    expected = np.select([tiers <= 2, tiers <= 4], [0, 1], 2)
    assert (rule.cell_delta.argmax(axis=1) == expected).all() and rule.is_deterministic


def test_inline_and_file_candidates_agree(demo, tmp_path):
    scenario, _, cells, _, _ = demo
    spec = scenario.sections["candidate_rules"][1]
    inline = candidate_rule(spec, cells.layout, scenario.level_values, scenario.level_labels)
    pd.DataFrame(list(spec.rows)).to_csv(tmp_path / "rule.csv", index=False)
    from_file = candidate_rule(CandidateSpec("file", "", "[[candidate_rules]] #9", path=tmp_path / "rule.csv"),
                               cells.layout, scenario.level_values, scenario.level_labels)
    np.testing.assert_array_equal(inline.cell_delta, from_file.cell_delta)
    charge = cells.layout.frame["charge_class"].astype(str).to_numpy()
    tiers = cells.layout.frame["aid_tier"].astype(int).to_numpy()
    bond = (charge == "violent felony") & (tiers >= 4)
    assert (inline.cell_delta[:, 2] == bond).all()


def _rows(**change):
    rows = [{"aid_tier": t, "level": "recognizance" if t <= 2 else "bond"} for t in (1, 2, 3, 4, 5)]
    for i, row in change.items():
        rows[int(i[1:])] = row
    return rows


@pytest.mark.parametrize("rows, message", [
    (_rows(r0={"aid_tier": 9, "level": "bond"}), "column 'aid_tier' has value 9"),
    (_rows(r1={"aid_tier": 2, "level": "jail"}), "level 'jail', which is not a declared decision level"),
    (_rows(r2={"aid_tierr": 3, "level": "bond"}), "column 'aid_tierr' is not a cell column"),
    (_rows()[:4], "leaves 1 rule cells of the data without a level (first: aid_tier=5"),
    (_rows() + [{"aid_tier": 1, "level": "bond"}], "rows 1 and 6 give the same rule cell"),
    ([{"aid_tier": 1}], "no 'level' column"),
])
def test_candidate_errors_name_the_problem(demo, rows, message):
    scenario, _, cells, _, _ = demo
    spec = CandidateSpec("bad", "", "[[candidate_rules]] #1 ('bad')", rows=tuple(rows))
    with pytest.raises(InputError, match=message.replace("(", r"\(").replace(")", r"\)")):
        candidate_rule(spec, cells.layout, scenario.level_values, scenario.level_labels, cells.weights, "demo.toml")


@pytest.mark.parametrize("entry, message", [
    ('score_at_least = { recognizance = 1, supervision = 3, bond = 3 }', "must rise with the level"),
    ('score_at_least = { supervision = 3, bond = 5 }', "scores 1, 2 .* are below every threshold"),
    ('score_at_least = { recognizance = 1, custody = 5 }', "'custody' is not a declared decision level"),
    ('score_at_least = { recognizance = 0, bond = 5 }', "has value 0"),
    ('rows = [ { aid_tier = 1, level = "bond" } ]\nscore_at_least = { bond = 1 }', "exactly one of table, rows, score_at_least"),
    ('table = "rule.txt"', "must end in .csv or .parquet"),
])
def test_candidate_section_errors(tmp_path, entry, message):
    frame, _ = simulate_cases(3_000, seed=11)
    frame.to_csv(tmp_path / "cases.csv", index=False)
    text = write_scenario(tmp_path).read_text() + f'\n[[candidate_rules]]\nname = "c"\n{entry}\n'
    (tmp_path / "scenario.toml").write_text(text)
    with pytest.raises(InputError, match=message):
        compare(tmp_path / "scenario.toml", replicates=0)


def test_candidate_names_must_differ(tmp_path):
    text = write_scenario(tmp_path).read_text()
    for _ in range(2):
        text += '\n[[candidate_rules]]\nname = "same"\nscore_at_least = { recognizance = 1 }\n'
    (tmp_path / "scenario.toml").write_text(text)
    with pytest.raises(InputError, match="candidate name 'same' is used twice"):
        load_scenario(tmp_path / "scenario.toml")


# ----------------------------------------------------------------------------------------------
# Batched scoring equals the foundation's evaluation
# ----------------------------------------------------------------------------------------------
def test_batched_scores_equal_evaluate(demo):
    scenario, _, cells, rl, costs = demo
    rules = [optimal_rule(rl, costs), aid_rule(cells, "aid")] + observed_rules(cells)
    onehot, labels = group_matrix(rl.layout)
    attrs = [np.array([i for i, (a, _) in enumerate(labels) if a == attr]) for attr in rl.layout.protected]
    got = score_rules([r.cell_delta for r in rules], rl.p[None], rl.weights[None], costs, onehot, attrs)
    for i, rule in enumerate(rules):
        ev = evaluate(rule, rl, costs, reference=rules[0])
        assert got["cost"][0, i] == pytest.approx(ev.cost_per_case, rel=1e-12)
        assert got["regret"][0, i] == pytest.approx(ev.regret_per_case, abs=1e-9)
        assert got["agreement"][0, i] == pytest.approx(ev.agreement, rel=1e-12)
        np.testing.assert_allclose(got["rates"][0, i], ev.outcome_rates, rtol=1e-12)
        np.testing.assert_allclose(got["shares"][0, i], ev.level_shares, rtol=1e-12)
        mis = ev.misplaced()
        np.testing.assert_allclose(got["safe_harsher"][0, i], mis["safe_given_harsher"], rtol=1e-10)
        np.testing.assert_allclose(got["too_lenient"][0, i], mis["preventable_given_too_lenient"], rtol=1e-10)
        gaps = ev.fairness_gaps()
        for a, attr in enumerate(rl.layout.protected):
            sp = gaps[(gaps["kind"] == "statistical_parity") & (gaps["attribute"] == attr)]["gap"].to_numpy()
            np.testing.assert_allclose(got["parity_gap"][0, i, a], sp, rtol=1e-10)
            pf = gaps[(gaps["kind"] == "principal_fairness") & (gaps["attribute"] == attr)]
            # rows run threshold-major, then outcome, then risk level
            expect = pf["gap"].to_numpy().reshape(rl.n_levels - 1, len(rl.outcome_keys), rl.n_levels + 1)
            np.testing.assert_allclose(got["principal_gap"][0, i, a], np.moveaxis(expect, 0, -1), rtol=1e-10, equal_nan=True)


def test_statistic_on_the_data_reproduces_the_point_rules(demo):
    scenario, _, cells, rl, costs = demo
    est = RiskLevelEstimator.from_scenario(scenario)
    stat = ComparisonStatistic(est, est.design(cells.layout, 3), costs, cells.layout, [], True, 2)
    out = stat(CountResampler(cells).original)
    optimum = optimal_rule(rl, costs)
    # the replicate optimum is the foundation's argmin rule when the counts are the data's
    assert out["cost"][0, 0] == pytest.approx(evaluate(optimum, rl, costs).cost_per_case, rel=1e-12)
    shown, not_shown = observed_rules(cells)[1], observed_rules(cells)[0]
    at = lambda rule: evaluate(rule, rl, costs).at_least()
    np.testing.assert_allclose(out["effect"][0], at(shown) - at(not_shown), rtol=1e-10, atol=1e-14)


# ----------------------------------------------------------------------------------------------
# Against the simulator's exact truth
# ----------------------------------------------------------------------------------------------
def _truth_cells(truth, layout):
    """Position in the truth's cells of each data cell."""
    key = lambda f: f.astype(str).agg("|".join, axis=1)
    where = dict(zip(key(truth.layout.frame), range(truth.n_cells)))
    return np.array([where[k] for k in key(layout.frame)])


def test_costs_and_the_aids_effect_match_the_truth_within_their_intervals(demo):
    scenario = demo[0]
    # five expected costs are checked at once: 99% intervals keep the chance that a calibrated
    # interval misses any of them near 5% (Bonferroni; common practice)
    c = compare(scenario, replicates=400, workers=1, interval=0.99)
    truth, court = true_risk_levels()
    costs = costs_from_scenario(scenario, truth)
    pos = _truth_cells(truth, c.risk_levels.layout)
    # fixed rules on the truth's cells: the candidates by their own definition, the aid's table by
    # (tier, charge) and what courts did by the simulator's exact decision probabilities
    cands = [candidate_rule(s, truth.layout, scenario.level_values, scenario.level_labels)
             for s in scenario.sections["candidate_rules"]]
    aid = c.rules[1]
    tc = truth.layout.frame[["aid_tier", "charge_class"]].astype(str).agg("|".join, axis=1)
    dc = c.risk_levels.layout.frame[["aid_tier", "charge_class"]].astype(str).agg("|".join, axis=1)
    level_of = pd.Series(aid.cell_delta.argmax(axis=1), index=dc.to_numpy()).groupby(level=0).first()
    aid_truth = np.eye(3)[level_of.loc[tc].to_numpy()]
    true_delta = {aid.name: aid_truth, cands[0].name: cands[0].cell_delta, cands[1].name: cands[1].cell_delta,
                  c.rules[-2].name: court[:, 0], c.rules[-1].name: court[:, 1]}
    frame = c.comparison_frame().set_index("rule")
    for name, delta in true_delta.items():
        # truth: sum_x w(x) sum_d delta(d|x) C(d, x) / sum_x w(x) under the exact p (method notes, section 6)
        true_cost = 1000 * evaluate(delta, truth, costs).cost_per_case
        row = frame.loc[name]
        assert row["cost_per_1000_cases_lower"] <= true_cost <= row["cost_per_1000_cases_upper"], (name, true_cost, row[:4])
    assert len(pos) == c.risk_levels.n_cells
    # the aid's effect by risk level, overall and by group, against the exact effect
    onehot, _ = group_matrix(truth.layout)
    at = lambda d: evaluate(d, truth, costs).at_least()
    true_effect = at(court[:, 1]) - at(court[:, 0])  # (G, J, K+2, K)
    lo, hi = c.result.interval("effect", level=0.95)
    ok = np.isfinite(true_effect) & np.isfinite(lo)
    inside = (lo <= true_effect) & (true_effect <= hi)
    assert inside[0][ok[0]].mean() >= 0.85, inside[0]
    assert inside[ok].mean() >= 0.85


# ----------------------------------------------------------------------------------------------
# The command line
# ----------------------------------------------------------------------------------------------
def test_compare_command_writes_every_table_with_replicates_and_seed(small_case_table, tmp_path, capsys):
    path, _ = small_case_table
    out = tmp_path / "out"
    code, stdout, err = run_cli(["compare", path, "--out", out, "--replicates", "30", "--workers", "1", "--no-progress"], capsys)
    assert code == 0, err
    for name in ("comparison.csv", "comparison_gaps.csv", "risk_level_share_intervals.csv", "aid_effect.csv",
                 "aid_effect_itt.csv"):
        table = pd.read_csv(out / name)
        assert (table["replicates"] == 30).all() and (table["seed"] == 7).all(), name
    meta = json.loads((out / "compare.json").read_text())
    assert meta["replicates"] == 30 and meta["seed"] == 7 and meta["cautions"]
    assert "Cautions" in stdout and "Assumptions behind these figures" in stdout and "Effect of showing the aid" in stdout
    comparison = pd.read_csv(out / "comparison.csv")
    assert list(comparison["kind"]) == ["optimal", "aid", "observed", "observed"]
    assert (comparison["cost_per_1000_cases_lower"] <= comparison["cost_per_1000_cases_upper"]).all()
    # the same seed on two worker processes gives the same bytes
    out2 = tmp_path / "out2"
    code, _, err = run_cli(["compare", path, "--out", out2, "--replicates", "30", "--workers", "2", "--no-progress"], capsys)
    assert code == 0, err
    for f in out.iterdir():
        assert (out2 / f.name).read_bytes() == f.read_bytes(), f.name


def test_compare_command_rejects_bad_settings_and_risk_level_tables(small_case_table, tmp_path, capsys):
    path, _ = small_case_table
    code, _, err = run_cli(["compare", path, "--out", tmp_path / "o", "--resampling", "jackknife"], capsys)
    assert code == 2 and "resampling must be one of: poisson, multinomial" in err
    assert not (tmp_path / "o").exists()
    code, _, _ = run_cli(["estimate", path, "--out", tmp_path / "est"], capsys)
    assert code == 0
    text = path.read_text().replace('case_table = "cases.csv"', 'risk_level_table = "est/risk_levels.csv"')
    text = text.replace('arm = "aid_shown"\n', "")
    path.write_text(text)
    code, out, _ = run_cli(["compare", path, "--out", tmp_path / "o"], capsys)
    # a risk-level table without draws: point figures, said to have no interval
    assert code == 0 and "no interval (the risk-level table has no draws)" in out.lower()


def test_constrained_optimum_is_compared_and_never_beats_the_optimum():
    from policy.decision.constrained import ConstrainedProblem
    from policy.decision.constraints import scenario_specs

    path = demo_scenario_path().with_name("demo_constrained.toml")
    c = compare(path, replicates=30, workers=1)
    kinds = [r.kind for r in c.rules]
    assert kinds[:2] == ["optimal", "constrained"]
    scenario = c.scenario
    point = ConstrainedProblem(c.risk_levels, c.costs, scenario_specs(scenario),
                               settings=scenario.sections.get("linear_program")).solve()
    # the regret of the constrained optimum is its price against the unconstrained one (issue 3's figure)
    assert c.result.point["regret"][1] == pytest.approx(point.price_per_case, rel=1e-9, abs=1e-9)
    # re-solved in every replicate on the same rule columns: the linear program's optimum can never
    # cost less than the argmin rule it constrains (common practice: a constrained minimum)
    resolved = c.result.replicates["resolved_cost"]
    assert (resolved[:, 1] - resolved[:, 0] >= -1e-9 * np.abs(resolved[:, 0])).all()
    assert not c.result.replicates["solver_failed"].any()
    # both chosen rules are held fixed in the scored figures; each has its stability by rule cell
    stab = c.stability_frame()
    assert list(dict.fromkeys(stab["rule"])) == [r.name for r in c.rules[:2]]
    assert stab["stability"].between(0, 1).all()
    # the constrained optimum is chosen again on each fold's training part and scored held out
    assert c.crossfit.kinds[:2] == ("optimal", "constrained") and np.isfinite(c.crossfit.fold_costs).all()
    assert c.crossfit.in_sample[1] - c.crossfit.in_sample[0] == pytest.approx(point.price_per_case, rel=1e-9, abs=1e-9)
