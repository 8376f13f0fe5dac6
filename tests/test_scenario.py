"""Scenario files: strict validation with messages naming file, key and what was expected."""

from __future__ import annotations

import re

import pytest

from policy import InputError, load_scenario
from policy.inputs.scenario import SCHEMA

from .conftest import ROOT, write_scenario


def test_demo_scenario_reads(demo_scenario):
    s = demo_scenario
    assert s.level_values == ("recognizance", "supervision", "bond")
    assert s.outcome_keys == ("missed_court", "new_offense", "new_violent")
    assert s.cell_columns[-2:] == ("sex", "race_group")
    assert s.rule_covariates == ("aid_tier", "charge_class")
    assert s.data.kind == "simulate" and s.data.simulate == 20_000
    assert s.cost_columns == ("bond_cost",)


@pytest.mark.parametrize(
    "old, new, message",
    [
        ('seed = 7', 'seed = 7\ncolour = "blue"', "unknown key 'colour' in [scenario]; expected one of: description, seed, title"),
        ('title = "small test scenario"\n', "", "missing key 'title' in [scenario]; expected a string"),
        ("seed = 7", 'seed = "seven"', "key 'seed' in [scenario] must be an integer; got 'seven'"),
        ("cost = 750", 'cost = "cheap"', "key 'cost' in [[decisions]] #2 must be a number; got 'cheap'"),
        ('rule = ["aid_tier", "charge_class"]', 'rule = ["aid_tier", "zip_code"]',
         "[cells] rule lists 'zip_code', which is not a cell covariate or protected attribute"),
        ('[costs]\nunit = "USD"', '[costs]\nunit = "USD"\n[extras]\nx = 1', "unknown section [extras]"),
        ('cost = 750\n', 'cost = 750\ncost_column = "sup_cost"\n', "[[decisions]] #2 must give exactly one of 'cost'"),
        ('cost = 1000\n', 'cost = 1000\nimpossible_from = "jail"\n', "impossible_from' in [[outcomes]] #1 is 'jail', not a declared decision value"),
        ('case_table = "cases.csv"', 'case_table = "cases.csv"\nsimulate = 100', "[data] must give exactly one of case_table, counts_table, risk_level_table, simulate; got case_table, simulate"),
        ('case_table = "cases.csv"', 'case_table = "cases.xlsx"', "must end in .csv or .parquet"),
        ('value = "supervision"', 'value = "recognizance"', "[[decisions]] value 'recognizance' is declared twice"),
        ('key = "new_violent"', 'key = "new violent"', "must use letters, digits and _ only"),
        ('[aid]\nscore = "aid_tier"', '[aid]\nscore = "aid_points"', "[aid] score 'aid_points' must be a cell covariate"),
    ],
)
def test_bad_scenarios_name_file_key_and_expectation(tmp_path, old, new, message):
    path = write_scenario(tmp_path)
    text = path.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, 1))
    with pytest.raises(InputError) as err:
        load_scenario(path)
    assert str(err.value).startswith("scenario.toml: ")
    assert message in str(err.value)


def test_invalid_toml_and_missing_file(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[scenario\ntitle = 1")
    with pytest.raises(InputError, match="broken.toml: not valid TOML"):
        load_scenario(path)
    with pytest.raises(InputError, match="does not exist"):
        load_scenario(tmp_path / "absent.toml")
    path.write_bytes(b'[scenario]\ntitle = "caf\xe9"\n')
    with pytest.raises(InputError, match="broken.toml: not UTF-8 text"):
        load_scenario(path)


def test_unknown_column_in_data(tmp_path, small_case_table, capsys):
    from .conftest import run_cli

    path, frame = small_case_table
    path.write_text(path.read_text().replace('protected = ["sex", "race_group"]', 'protected = ["sex", "ethnicity"]'))
    code, _, err = run_cli(["check", path], capsys)
    assert code == 2
    assert "column 'ethnicity'" in err and "is missing" in err


def test_every_key_is_documented():
    doc = (ROOT / "docs" / "scenario.md").read_text(encoding="utf-8")
    parts = {chunk.split("\n", 1)[0].strip().strip("`"): chunk for chunk in doc.split("\n## ")[1:]}
    for section, keys in SCHEMA.items():
        assert section in parts, f"section {section} has no '## `{section}`' heading in docs/scenario.md"
        part = parts[section]
        for key in keys:
            assert re.search(rf"`{re.escape(key.name)}`", part), f"key {key.name!r} of {section} is not documented"


def test_every_scenario_file_loads():
    files = sorted((ROOT / "scenarios").rglob("*.toml"))
    assert files, "scenarios/ holds no scenario"
    for f in files:
        load_scenario(f)
