"""The assumption-free comparison of the arms (policy/assessment/arm_costs.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy import CellTable, load_scenario
from policy.assessment.arm_costs import realized_arm_costs
from policy.decision.costs import costs_from_scenario
from policy.demo.quarrow import demo_scenario_path, simulate_cases
from policy.errors import InputError
from policy.estimation.from_scenario import estimate_risk_levels

OUTCOME_COSTS = {"missed_court": 1000.0, "new_offense": 5146.0, "new_violent": 155928.0}  # demo.toml


@pytest.fixture(scope="module")
def data():
    scenario = load_scenario(demo_scenario_path())
    frame, _ = simulate_cases(6_000, seed=44)
    cells = CellTable.from_cases(frame, scenario)
    costs = costs_from_scenario(scenario, estimate_risk_levels(scenario, cells))
    return scenario, frame, cells, costs


def _per_case(frame: pd.DataFrame, missing: str) -> pd.Series:
    """Each case's realized cost straight from its row (common practice: the plain sum over cases)."""
    decision = np.select([frame["decision"] == "recognizance", frame["decision"] == "supervision"], [0.0, 750.0],
                         frame["bond_cost"].to_numpy())
    total = pd.Series(decision, index=frame.index)
    keys = ["age_band", "charge_class", "prior_record", "pending_case", "aid_tier", "sex", "race_group", "aid_shown",
            "decision"]
    for col, c in OUTCOME_COSTS.items():
        y = frame[col].astype("float64")
        if missing == "none":
            y = y.fillna(0.0)
        elif missing == "all":
            y = y.fillna(1.0)
        else:  # the recorded rate of the case's cell, arm and level; failing that, of its arm and level
            by_cell = frame.assign(y=y).groupby(keys, observed=True)["y"].transform("mean")
            by_arm = frame.assign(y=y).groupby(["aid_shown", "decision"], observed=True)["y"].transform("mean")
            y = y.fillna(by_cell).fillna(by_arm)
        total += c * y
    return total


def test_realized_costs_equal_the_plain_sum_over_cases(data):
    _, frame, cells, costs = data
    result = realized_arm_costs(cells, costs, replicates=0).to_frame().set_index("figure")
    for arm, name in enumerate(result.index[:2]):
        rows = frame["aid_shown"] == arm
        for missing, col in (("none", "if_missing_none"), ("all", "if_missing_all"), ("cell", "realized_cost_per_1000_cases")):
            per_case = _per_case(frame, missing)[rows]
            assert result.loc[name, col] == pytest.approx(1000 * per_case.mean(), rel=1e-10)
    diff = result.iloc[2]
    assert diff["realized_cost_per_1000_cases"] == pytest.approx(
        result.iloc[1]["realized_cost_per_1000_cases"] - result.iloc[0]["realized_cost_per_1000_cases"])


def test_intervals_and_missing_ranges_surround_the_figure(data):
    _, _, cells, costs = data
    frame = realized_arm_costs(cells, costs, replicates=60, seed=3, workers=1).to_frame()
    assert (frame["lower"] <= frame["realized_cost_per_1000_cases"]).all()
    assert (frame["realized_cost_per_1000_cases"] <= frame["upper"]).all()
    assert (frame["if_missing_none"] <= frame["realized_cost_per_1000_cases"] + 1e-6).all()
    assert (frame["realized_cost_per_1000_cases"] <= frame["if_missing_all"] + 1e-6).all()
    assert (frame["assumes"] == "randomization of the arm only").all()


def test_needs_an_arm(data):
    _, _, cells, costs = data
    no_arm = CellTable(cells.layout, cells.levels, cells.outcomes, (None,), cells.cases.sum(axis=1, keepdims=True),
                       cells.observed.sum(axis=1, keepdims=True), cells.events.sum(axis=1, keepdims=True),
                       source="a table without an arm")
    with pytest.raises(InputError, match="randomized arm"):
        realized_arm_costs(no_arm, costs, replicates=0)
