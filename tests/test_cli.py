"""The command line: every scenario file runs, outputs are complete, exit codes are distinct."""

from __future__ import annotations

import json
import subprocess
import sys

import pandas as pd
import pytest

import policy

from .conftest import ROOT, run_cli

#: every scenario file under scenarios/, the batch folder scenarios/counties/ included
SCENARIO_FILES = sorted((ROOT / "scenarios").rglob("*.toml"))


def test_the_scenario_list_holds_the_county_folder():
    names = {p.relative_to(ROOT / "scenarios").as_posix() for p in SCENARIO_FILES}
    assert {"demo.toml", "counties/ostrevale.toml", "counties/pellingford.toml", "counties/wexmarrow.toml"} <= names


@pytest.mark.parametrize("scenario", SCENARIO_FILES,
                         ids=[p.relative_to(ROOT / "scenarios").with_suffix("").as_posix() for p in SCENARIO_FILES])
def test_every_scenario_runs_through_check_and_solve(scenario, tmp_path, capsys):
    code, out, err = run_cli(["check", scenario], capsys)
    assert code == 0, err
    assert "valid" in out
    code, out, err = run_cli(["solve", scenario, "--out", tmp_path], capsys)
    assert code == 0, err
    assert (tmp_path / "rule.csv").is_file() and (tmp_path / "evaluation.json").is_file()
    assert "not an assessment of any individual" in " ".join(out.split())
    assert not list(tmp_path.glob("*.partial")) and not list(tmp_path.glob(".*.partial"))


def test_demo_writes_data_scenario_and_outputs(tmp_path, capsys):
    code, out, err = run_cli(["demo", "--out", tmp_path, "--cases", "4000"], capsys)
    assert code == 0, err
    for name in ("cases.csv", "scenario.toml", "cells.csv", "risk_levels.csv", "risk_level_shares.csv",
                 "costs.csv", "rule.csv", "by_group.csv", "within_risk_levels.csv", "fairness_gaps.csv",
                 "evaluation.json"):
        assert (tmp_path / name).is_file(), name
    cases = pd.read_csv(tmp_path / "cases.csv")
    assert len(cases) == 4000
    summary = json.loads((tmp_path / "evaluation.json").read_text())
    assert summary["overview"]["cases"] == 4000
    assert summary["cautions"] and summary["assumptions"]
    # the written scenario reads the written table and gives the same rule
    code, _, err = run_cli(["solve", tmp_path / "scenario.toml", "--out", tmp_path / "again"], capsys)
    assert code == 0, err
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "rule.csv"), pd.read_csv(tmp_path / "again" / "rule.csv"))
    # deterministic: the same command gives the same bytes
    code, _, _ = run_cli(["demo", "--out", tmp_path / "twice", "--cases", "4000"], capsys)
    assert (tmp_path / "twice" / "cases.csv").read_bytes() == (tmp_path / "cases.csv").read_bytes()
    assert (tmp_path / "twice" / "rule.csv").read_bytes() == (tmp_path / "rule.csv").read_bytes()
    assert (tmp_path / "twice" / "risk_level_draws.csv").read_bytes() == (tmp_path / "risk_level_draws.csv").read_bytes()


def test_estimate_outputs_round_trip_as_a_risk_level_table(tmp_path, capsys, small_case_table):
    scenario, _ = small_case_table
    code, _, err = run_cli(["estimate", scenario, "--out", tmp_path / "est"], capsys)
    assert code == 0, err
    text = scenario.read_text().replace('case_table = "cases.csv"', 'risk_level_table = "est/risk_levels.csv"')
    text = text.replace('arm = "aid_shown"\n', "")
    (tmp_path / "from_table.toml").write_text(text)
    code, _, err = run_cli(["solve", tmp_path / "from_table.toml", "--out", tmp_path / "b"], capsys)
    assert code == 0, err
    code, _, err = run_cli(["solve", scenario, "--out", tmp_path / "a"], capsys)
    a = pd.read_csv(tmp_path / "a" / "rule.csv")
    b = pd.read_csv(tmp_path / "b" / "rule.csv")
    pd.testing.assert_frame_equal(a, b)


def test_cost_overrides_and_bad_override(tmp_path, capsys, small_case_table):
    scenario, _ = small_case_table
    code, _, _ = run_cli(["solve", scenario, "--out", tmp_path / "x", "--cost", "new_violent=0", "--decision-cost", "bond=1e9"], capsys)
    assert code == 0
    rule = pd.read_csv(tmp_path / "x" / "rule.csv")
    assert (rule["level"] != "secured bond").all()
    code, _, err = run_cli(["solve", scenario, "--out", tmp_path / "y", "--cost", "new_violent"], capsys)
    assert code == 2 and "must look like NAME=NUMBER" in err
    assert not (tmp_path / "y").exists()


def test_usage_error_and_missing_scenario(tmp_path, capsys):
    code, _, _ = run_cli(["solve"], capsys)
    assert code == 2
    code, _, err = run_cli(["check", tmp_path / "nope.toml"], capsys)
    assert code == 2 and "does not exist" in err


def test_module_entry_point():
    done = subprocess.run([sys.executable, "-m", "policy", "--help"], capture_output=True, text=True, cwd=ROOT)
    assert done.returncode == 0
    for verb in ("demo", "check", "estimate", "solve"):
        assert verb in done.stdout


def test_public_api_is_guarded():
    # every name in __all__ exists, and nothing private leaks into it
    for name in policy.__all__:
        assert hasattr(policy, name), name
        assert not name.startswith("_")
    assert len(set(policy.__all__)) == len(policy.__all__)
    for name in ("analyze", "estimate_risk_levels", "optimal_rule", "evaluate", "load_scenario", "CellTable"):
        assert name in policy.__all__


def test_a_factor_on_per_cell_costs_from_the_command_line_and_the_scenario(tmp_path, capsys):
    """--decision-cost-factor bond=F multiplies every cell's bond cost, as cost_factor = F in the
    scenario does, and as the report's control for a per-cell cost does."""
    import numpy as np

    from policy.decision.costs import CostFactor

    demo = ROOT / "scenarios" / "demo.toml"
    base = policy.analyze(demo)
    factored = policy.analyze(demo, decision_costs={"bond": CostFactor(1.5)})
    np.testing.assert_array_equal(factored.costs.decision[:, 2], base.costs.decision[:, 2] * 1.5)
    np.testing.assert_array_equal(factored.costs.decision[:, :2], base.costs.decision[:, :2])
    code, _, err = run_cli(["solve", demo, "--out", tmp_path / "cli", "--decision-cost-factor", "bond=1.5"], capsys)
    assert code == 0, err
    text = demo.read_text(encoding="utf-8").replace('cost_column = "bond_cost"', 'cost_column = "bond_cost"\ncost_factor = 1.5')
    (tmp_path / "factor.toml").write_text(text, encoding="utf-8")
    from_file = policy.analyze(tmp_path / "factor.toml")
    np.testing.assert_array_equal(from_file.costs.decision, factored.costs.decision)
    written = pd.read_csv(tmp_path / "cli" / "rule.csv")
    assert list(written["level"]) == list(factored.rule.to_frame()["level"])
    # a factor on a level whose cost is one number, both options for one level, a negative factor
    for args in (["--decision-cost-factor", "supervision=2"], ["--decision-cost-factor", "bond=2", "--decision-cost", "bond=9"],
                 ["--decision-cost-factor", "bond=-1"]):
        code, _, err = run_cli(["solve", demo, "--out", tmp_path / "bad"] + args, capsys)
        assert code == 2 and "factor" in err, (args, err)
    assert not (tmp_path / "bad").exists()
    # cost_factor without cost_column in a scenario file
    bad = text.replace('cost = 750.0', 'cost = 750.0\ncost_factor = 2.0')
    (tmp_path / "bad.toml").write_text(bad, encoding="utf-8")
    code, _, err = run_cli(["check", tmp_path / "bad.toml"], capsys)
    assert code == 2 and "cost_factor" in err and "cost_column" in err, err


def test_costs_csv_writes_a_cost_as_given(tmp_path, capsys):
    # 0.4 averaged over many equal cells is 0.39999999999999997 in binary floating point (common
    # practice: the mean of n copies of x need not round-trip to x); one cost is written as given
    code, _, err = run_cli(["solve", ROOT / "scenarios" / "demo.toml", "--out", tmp_path, "--decision-cost", "supervision=0.4"],
                           capsys)
    assert code == 0, err
    text = (tmp_path / "costs.csv").read_text()
    assert "supervised release,0.4," in text and "0.39999" not in text


def test_check_and_compare_print_labels_and_formatted_numbers(tmp_path, capsys):
    demo = ROOT / "scenarios" / "demo.toml"
    code, out, err = run_cli(["check", demo], capsys)
    assert code == 0, err
    assert "{" not in out and "missed_court" not in out and "0.96" not in out
    assert "failure to appear: 96.2%" in " ".join(out.split()) and "20,000" in out
    code, out, err = run_cli(["compare", demo, "--out", tmp_path, "--replicates", "4", "--no-progress"], capsys)
    assert code == 0, err
    flat = " ".join(out.split())
    assert "missed_court" not in flat and "safe (failure" in flat


def test_help_names_values_not_python_types(capsys):
    for verb in ("solve", "report", "sweep", "compare", "batch"):
        code, out, _ = run_cli([verb, "--help"], capsys)
        assert code == 0
        assert "list[" not in out and "<int>" not in out and "<float>" not in out, verb
    code, out, _ = run_cli(["solve", "--help"], capsys)
    assert "--cost KEY=NUMBER" in out and "--decision-cost-factor VALUE=FACTOR" in out


def test_sweep_regret_covers_every_compared_rule(tmp_path, capsys):
    from policy.assessment.compare import compare

    demo = ROOT / "scenarios" / "demo.toml"
    code, _, err = run_cli(["sweep", demo, "--out", tmp_path, "--ratio", "new_offense", "--replicates", "0",
                            "--no-figures", "--no-bounds", "--no-progress"], capsys)
    assert code == 0, err
    regret = pd.read_csv(tmp_path / "sweep_regret.csv")
    names = set(regret["rule"])
    compared = compare(demo, replicates=2)
    for rule in compared.rules:
        if rule.kind != "optimal":
            assert rule.name in names, rule.name
    assert any(n.startswith("everyone:") for n in names)
