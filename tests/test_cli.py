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
