"""The lenient map over a risk-level table's draws: each draw's map is the exact map of that draw."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from .conftest import SCENARIOS, run_cli
from policy.assessment.sweep.draws_map import draws_map
from policy.assessment.sweep.scenario_sweep import sweep_scenario
from policy.assessment.sweep.two_ratio import lenient_map
from policy.estimation.from_scenario import load_risk_level_draws
from policy.inputs.scenario import load_scenario

PATH = SCENARIOS / "risk_level_draws.toml"
RATIOS = ["new_offense", "missed_court"]


def test_each_draw_of_the_map_is_the_exact_map_of_that_draw():
    # Self-consistency between two routes: the draws' shares at a point, scored in chunks from the
    # rule cells' cost lines, equal the exact two-ratio map (half-planes) of each draw taken alone as
    # a point estimate.
    result = sweep_scenario(PATH, RATIOS)
    dm = result.draws_map
    assert dm is not None and dm.n_draws == 50
    draws = load_risk_level_draws(load_scenario(PATH))
    m = result.map
    rng = np.random.default_rng(3)
    pts = np.column_stack([rng.uniform(*m.box[0], 40), rng.uniform(*m.box[1], 40)])
    got = dm._share_draws(pts)
    for b in (0, 17, 49):
        exact = lenient_map(replace(draws.point, p=draws.p[b]), result.costs, m.axes, m.box)
        np.testing.assert_allclose(got[b], exact.share_at(pts), atol=1e-12)
        np.testing.assert_array_equal(dm.lenient_draws(pts)[b], exact.lenient_at(pts))


def test_draws_equal_to_the_point_give_the_point_map():
    result = sweep_scenario(PATH, RATIOS)
    m, rl = result.map, result.risk_levels
    same = draws_map(m, rl, result.costs, np.broadcast_to(rl.p, (3,) + rl.p.shape))
    grid = same.grid_table(21)
    for col in ("share_lenient_mean_over_draws", "share_lenient_lower", "share_lenient_upper"):
        np.testing.assert_allclose(grid[col], grid["share_lenient"], atol=1e-12, err_msg=col)
    cells = same.rule_cell_table(21)
    np.testing.assert_array_equal(cells["share_of_draws_lenient_at_scenario_ratios"],
                                  cells["lenient_at_scenario_ratios"].astype(float))
    np.testing.assert_allclose(cells["grid_share_lenient_mean_over_draws"], cells["grid_share_lenient"], atol=1e-12)


def test_sweep_writes_the_map_over_draws_and_not_without_them(tmp_path, capsys):
    code, out, err = run_cli(["sweep", PATH, "--ratio", RATIOS[0], "--ratio", RATIOS[1], "--out", tmp_path / "a",
                              "--table-points", 11], capsys)
    assert code == 0, err
    grid = pd.read_csv(tmp_path / "a" / "map_draws_grid.csv")
    assert len(grid) == 121 and (grid["draws"] == 50).all()
    assert (grid["share_lenient_lower"] <= grid["share_lenient_mean_over_draws"] + 1e-12).all()
    assert (grid["share_lenient_mean_over_draws"] <= grid["share_lenient_upper"] + 1e-12).all()
    cells = pd.read_csv(tmp_path / "a" / "map_draws_rule_cells.csv")
    assert cells["share_of_draws_lenient_at_scenario_ratios"].between(0, 1).all()
    assert "Over the table's 50 draws" in out
    code, _, err = run_cli(["sweep", SCENARIOS / "risk_level_table.toml", "--ratio", RATIOS[0], "--ratio", RATIOS[1],
                            "--out", tmp_path / "b"], capsys)
    assert code == 0, err
    assert (tmp_path / "b" / "map_grid.csv").is_file() and not (tmp_path / "b" / "map_draws_grid.csv").exists()


def test_a_sweep_on_the_table_carries_the_rules_its_columns_give():
    result = sweep_scenario(PATH, ["new_offense"], grid_points=20)
    names = set(result.sweep.regret_table()["rule"])
    assert {"Quarrow Release Screen recommendation", "courts, Quarrow Release Screen not shown",
            "courts, Quarrow Release Screen shown"} <= names
    assert result.bands is not None and result.bands.meta["replicates"] == 50
