"""Shared fixtures: the demo scenario, small scenario files written on the fly, and a CLI runner."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from policy import load_scenario
from policy.presentation.cli import main
from policy.demo.quarrow import demo_scenario_path, simulate_cases

ROOT = Path(__file__).resolve().parents[1]
SCENARIOS = ROOT / "scenarios"


@pytest.fixture(scope="session")
def demo_scenario():
    return load_scenario(demo_scenario_path())


@pytest.fixture(scope="session")
def demo_cases():
    frame, truth = simulate_cases(20_000, seed=20261202)
    return frame, truth


SMALL_SCENARIO = """
[scenario]
title = "small test scenario"
seed = 7

[data]
case_table = "{table}"

[columns]
case_id = "case_id"
arm = "aid_shown"
decision = "decision"

[[decisions]]
value = "recognizance"
label = "release on recognizance"
cost = 0

[[decisions]]
value = "supervision"
label = "supervised release"
cost = 750

[[decisions]]
value = "bond"
label = "secured bond"
cost_column = "bond_cost"

[[outcomes]]
key = "missed_court"
label = "failure to appear"
cost = 1000

[[outcomes]]
key = "new_offense"
label = "new offense"
cost = 5146

[[outcomes]]
key = "new_violent"
label = "new violent offense"
cost = 155928

[costs]
unit = "USD"

[cells]
covariates = ["age_band", "charge_class", "prior_record", "pending_case", "aid_tier"]
protected = ["sex", "race_group"]
rule = ["aid_tier", "charge_class"]

[aid]
score = "aid_tier"
recommendation = "aid_recommendation"
"""


def write_scenario(folder: Path, table_name: str = "cases.csv", text: str = SMALL_SCENARIO, replace: dict | None = None) -> Path:
    """Write the small scenario (optionally edited) pointing at ``table_name`` in ``folder``."""
    body = textwrap.dedent(text).replace("{table}", table_name)
    for old, new in (replace or {}).items():
        body = body.replace(old, new)
    path = folder / "scenario.toml"
    path.write_text(body, encoding="utf-8")
    return path


@pytest.fixture
def small_case_table(tmp_path):
    """A 3,000-case demo table written as CSV with its scenario; returns (scenario path, frame)."""
    frame, _ = simulate_cases(3_000, seed=11)
    frame.to_csv(tmp_path / "cases.csv", index=False)
    return write_scenario(tmp_path), frame


def run_cli(argv, capsys):
    """Run the command line in-process; return (exit code, stdout, stderr)."""
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err
