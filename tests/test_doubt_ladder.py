"""Where each conclusion stops holding: the ordinary optimum, the robust and the safe rule over a
ladder of sets.

Reference: brute force over the extreme points of each set (tests/test_robust.py), the maximum of
a linear function over a polytope being attained at a vertex (common practice: linear
programming theory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from policy.decision.doubt import baseline_choices
from policy.decision.doubt_ladder import doubt_ladder
from policy.decision.robust import rule_cost, uncertainty_set
from policy.running.pipeline import analyze

from .test_robust import brute_worst_cost, brute_worst_regret


def test_ladder_rows_are_the_brute_force_worst_cases(small_case_table):
    scenario, _ = small_case_table
    a = analyze(scenario)
    rl, cells, costs = a.risk_levels, a.cells, a.costs
    baseline = baseline_choices(a.scenario, cells, rl, costs)["courts-not-shown"]
    ladder = doubt_ladder(rl, cells, costs, [3.0, 1.0, 1.5, 1.5], baseline, gamma_low=1.2)
    frame = ladder.frame
    assert list(frame["set"]) == ["Gamma = 1", "Gamma = 1.5", "Gamma = 3", "monotone bounds"]
    assert list(frame["contradicted"]) == [True, False, False, False]
    sets = [uncertainty_set(rl, cells, g) for g in (1.0, 1.5, 3.0)] + [uncertainty_set(rl, cells, bounds=True)]
    for (_, row), the_set in zip(frame.iterrows(), sets):
        worst = 1000 * brute_worst_cost(a.rule.cell_delta, rl, costs, the_set)
        assert row["optimum_cost_worst_case"] == pytest.approx(worst, rel=1e-9)
        regret = 1000 * brute_worst_regret(a.rule.cell_delta, baseline.cell_delta, rl, costs, the_set)
        assert row["optimum_regret_worst_case"] == pytest.approx(regret, rel=1e-6, abs=1e-3)
        if abs(regret) > 1e-3:  # away from the certification tolerance
            assert row["optimum_no_worse"] == (regret < 0)
        assert row["robust_cost_worst_case"] <= row["optimum_cost_worst_case"] * (1 + 1e-12)
        assert row["safe_certified"] and row["safe_guaranteed_saving"] >= 0
    # the sets grow along the ladder, so the optimum's worst case never falls
    assert np.all(np.diff(frame["optimum_cost_worst_case"]) >= -1e-6)
    # at Gamma = 1 the set is the point estimate: the robust rule costs what the optimum costs
    point = 1000 * rule_cost(a.rule.cell_delta, rl.p, rl.weights, costs)
    assert frame.loc[0, "robust_cost_point"] == pytest.approx(point, rel=1e-9) and frame.loc[0, "optimum_nearly_robust"]
    # the sentence names the last set up to which the optimum is certified no worse than the baseline
    holds = frame["optimum_no_worse"].to_numpy()
    last = frame["set"].iloc[int(np.argmin(holds)) - 1] if not holds.all() else frame["set"].iloc[-1]
    line = next(x for x in ladder.lines() if "is certified no worse than" in x or "is not certified" in x)
    assert (last in line) if holds[0] else ("is not certified" in line)
    assert any("contradicts Gamma = 1 " in x for x in ladder.lines())


def test_compare_writes_the_ladder(small_case_table, tmp_path, capsys):
    from policy.estimation.bounds_table import SENSITIVITY_GAMMAS

    from .conftest import run_cli

    scenario, _ = small_case_table
    out = tmp_path / "out"
    code, stdout, err = run_cli(["compare", scenario, "-o", out, "--replicates", "0", "--no-progress",
                                 "--robust-gamma", "1.75", "--safe-against", "courts-not-shown"], capsys)
    assert code == 0, err
    frame = pd.read_csv(out / "doubt_ladder.csv")
    gammas = sorted(set(SENSITIVITY_GAMMAS) | {1.75})
    ladder = frame["gamma"].iloc[:-1].tolist()
    assert set(gammas) <= set(ladder) and ladder == sorted(ladder)
    assert frame["set"].iloc[-1] == "monotone bounds" and "Where each conclusion stops holding" in stdout
