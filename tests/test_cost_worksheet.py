"""The cost worksheet (policy/assessment/cost_worksheet.py): each cost's build, sources and the
exact range over which the cost-minimizing rule does not change."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from policy.assessment.cost_worksheet import cost_ranges, cost_worksheet
from policy.assessment.sweep import ratio_axis, sweep_one
from policy.decision.costs import Costs, costs_from_scenario
from policy.decision.solve import optimal_rule
from policy.estimation.from_scenario import estimate
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellLayout
from policy.inputs.cost_library import FLAGS

from .conftest import run_cli


def test_one_cell_two_levels_the_range_is_the_cost_sensitive_threshold():
    # Elkan (2001), "The Foundations of Cost-Sensitive Learning" (docs/reference-values.md):
    # detain iff p0 - p1 > (c_detain - c_release) / c_harm. With p0 = 0.2, p1 = 0.05 and
    # c_detain = 30, release stays optimal for c_harm up to 30 / 0.15 = 200, and for a detention
    # cost from 0.15 x 120 = 18 upward when c_harm = 120.
    frame = pd.DataFrame({"cell": pd.Categorical(["a"], ordered=True)})
    p = np.array([[[0.2, 0.05]]])
    rl = RiskLevels(CellLayout(frame, (), ("cell",), None), ("release", "detain"), ("release", "detain"),
                    ("harm",), ("harm",), np.array([50.0]), p, np.zeros_like(p, dtype=bool))
    ranges = {(k, i): r for k, i, r in cost_ranges(rl, Costs(np.array([[0.0, 30.0]]), np.array([120.0])))}
    assert ranges[("outcome", 0)].low == 0.0
    assert ranges[("outcome", 0)].high == pytest.approx(200.0)
    assert ranges[("outcome", 0)].above == "cell a: release -> detain"
    assert ranges[("decision", 1)].low == pytest.approx(18.0) and ranges[("decision", 1)].high == np.inf
    assert ranges[("decision", 0)].high == pytest.approx(12.0)  # release costs more than 30 - 18


@pytest.fixture(scope="module")
def demo_sheet(demo_scenario):
    _, rl = estimate(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    return rl, costs, cost_worksheet(demo_scenario, rl, costs)


def test_inside_the_range_the_rule_holds_and_just_outside_it_changes(demo_scenario, demo_sheet):
    # checked by re-solving: the rule found at each cost value, against the closed-form range
    rl, costs, sheet = demo_sheet
    base = optimal_rule(rl, costs).cell_delta

    def rule_at(row, t):
        if row.kind == "outcome":
            c = costs.with_outcome_cost(list(sheet.costs["key"][sheet.costs["kind"] == "outcome"]).index(row.key), t)
        else:
            k = [lv.value for lv in demo_scenario.levels].index(row.key)
            factors = np.ones(len(demo_scenario.levels))
            if row.range_of == "cost":
                decision = costs.decision.copy()
                decision[:, k] = t
                c = Costs(decision, costs.outcome)
            else:
                factors[k] = t / row.value
                c = costs.with_decision_scale(factors)
        return optimal_rule(rl, c).cell_delta

    for row in sheet.costs.itertuples():
        span = row.high - row.low
        for t in (row.low + 1e-6 * span, 0.5 * (row.low + row.high), row.high - 1e-6 * span):
            assert np.array_equal(rule_at(row, t), base), (row.key, t)
        assert not np.array_equal(rule_at(row, row.high * (1 + 1e-6) + 1e-6), base), row.key
        if row.low > 0:
            assert not np.array_equal(rule_at(row, row.low * (1 - 1e-6)), base), row.key


def test_the_range_ends_are_breakpoints_of_the_exact_sweep(demo_scenario, demo_sheet):
    rl, costs, sheet = demo_sheet
    axis = ratio_axis(rl, costs, "new_offense")
    breaks = sweep_one(rl, costs, axis, 0.0, 10 * axis.scenario_ratio).breakpoints()["cost"].to_numpy()
    row = sheet.costs.set_index("key").loc["new_offense"]
    assert np.isclose(breaks, row["low"]).any() and np.isclose(breaks, row["high"]).any()
    assert not ((breaks > row["low"] + 1e-6) & (breaks < row["high"] - 1e-6)).any()


def test_every_number_has_a_source_or_says_assumption(demo_sheet):
    _, _, sheet = demo_sheet
    assert set(sheet.costs["provenance"]) <= set(FLAGS)
    assert set(sheet.components["provenance"]) <= set(FLAGS)
    unsourced = sheet.components[sheet.components["provenance"] != "assumption"]
    assert (unsourced["source"].str.len() > 10).all()
    bond = sheet.costs.set_index("key").loc["bond"]
    assert bond["range_of"] == "factor" and bond["low_factor"] < 1 < bond["high_factor"]
    assert bond["note"] == "the data's per-case costs agree with the build for every charge"  # [cells] labels
    assert bond["arithmetic"].startswith("charge misdemeanor: 6 x (85 + 11) + 2,500 = 3,076; charge felony:")
    offense = sheet.costs.set_index("key").loc["new_offense"]
    assert offense["provenance"] == "secondary" and "3,532 x 1.457" in offense["arithmetic"]
    assert "states 5,146; its build comes to 5,146.12" in offense["note"]


def test_cli_worksheet_writes_the_tables_and_marks_a_cost_set_on_the_command_line(tmp_path, capsys):
    from policy.demo.quarrow import demo_scenario_path

    code, out, err = run_cli(["worksheet", demo_scenario_path(), "--out", tmp_path / "w", "--cost", "missed_court=1500"],
                             capsys)
    assert code == 0, err
    table = pd.read_csv(tmp_path / "w" / "cost_worksheet.csv").set_index("key")
    assert table.loc["missed_court", "provenance"] == "set on the command line"
    assert table.loc["missed_court", "value"] == 1500
    parts = pd.read_csv(tmp_path / "w" / "cost_worksheet_components.csv")
    assert "missed_court" not in set(parts["cost"]) and "offense_larceny_theft" in set(parts["component"])
    data = json.loads((tmp_path / "w" / "cost_worksheet.json").read_text())
    assert "illustrative" in data["warning"] and data["price_year"] == 2024
    assert "the rule holds for" in out


def test_the_report_shows_the_worksheet_and_the_implied_costs(demo_scenario):
    from policy.assessment.implied import MEANING
    from policy.presentation.report import render_report
    from policy.running.pipeline import analyze

    report = render_report(analyze(demo_scenario))
    keys = [s.key for s in report.sections]
    assert keys.index("sweeps" if "sweeps" in keys else "comparison") < keys.index("cost-worksheet") < keys.index("implied-costs")
    text = " ".join(report.html.split())
    assert "3,532 x 1.457 = 5,146.12" in text and "illustrative defaults" in text
    assert "screen tier 4, charge misdemeanor: supervised release -&gt; secured bond" in text.lower()
    assert "if the courts were minimizing expected cost, they acted as if one new offense cost" in text
    assert " ".join(MEANING.split()).replace("'", "&#39;") in text
    assert "a disparity diagnostic in cost terms" in text
    implied = report.files["implied_costs.csv"]
    assert set(implied["outcome"]) == set(demo_scenario.outcome_keys)
    assert {"cost_worksheet.csv", "cost_worksheet_components.csv"} <= set(report.files)


@pytest.mark.parametrize("name", ["counts_table.toml", "risk_level_table.toml", "demo_constrained.toml"])
def test_every_kind_of_data_gets_a_worksheet_whose_ranges_hold_the_scenarios_costs(name):
    from policy.assessment.cost_worksheet import worksheet_scenario

    from .conftest import SCENARIOS

    sheet = worksheet_scenario(SCENARIOS / name)
    t = sheet.costs
    assert set(t["provenance"]) <= set(FLAGS) | {"stated, no flag"}
    assert ((t["low"] <= t["value"] * (1 + 1e-9)) & (t["value"] <= t["high"] * (1 + 1e-9))).all()
