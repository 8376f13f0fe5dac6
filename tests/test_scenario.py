"""Scenario files: strict validation with messages naming file, key and what was expected."""

from __future__ import annotations

import re

import pytest

from policy import InputError, load_scenario
from policy.inputs.scenario import load_section_modules

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
        ('[aid]\n', '[estimator]\ntranslation_limit = 0\n[aid]\n',
         "key 'translation_limit' in [estimator] must be a number > 0 (standard errors); got 0.0"),
        ('[aid]\n', '[estimator]\nlevel_terms = "yes"\n[aid]\n', "key 'level_terms' in [estimator] must be"),
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
    for section, keys in load_section_modules().items():
        assert section in parts, f"section {section} has no '## `{section}`' heading in docs/scenario.md"
        part = parts[section]
        for key in keys:
            assert re.search(rf"`{re.escape(key.name)}`", part), f"key {key.name!r} of {section} is not documented"


def test_every_scenario_file_loads():
    files = sorted((ROOT / "scenarios").rglob("*.toml"))
    assert files, "scenarios/ holds no scenario"
    for f in files:
        load_scenario(f)


def test_numeric_cell_columns_binned_in_the_scenario(tmp_path):
    """[cells] bins cut a numeric column into labelled intervals, closed below, open above."""
    import numpy as np
    import pandas as pd

    import policy
    from policy.errors import InputError
    from policy.inputs.bins import Bins, default_labels

    b = Bins((25.0, 40.0), ("young", "middle", "older"))
    # searchsorted(side="right") puts a value equal to a cut in the interval above it (numpy docs)
    assert list(b.labels_of(np.array([18, 24.9, 25, 39, 40, 77, np.nan]))) == ["young", "young", "middle", "middle",
                                                                          "older", "older", None]
    assert default_labels([25, 40]) == ("under 25", "25 to under 40", "40 or more")

    rng = np.random.default_rng(3)
    n = 600
    ages = rng.integers(18, 70, n)
    frame = pd.DataFrame({"age": ages, "decision": rng.choice(["r", "b"], n),
                          "fta": rng.integers(0, 2, n)})
    frame.to_csv(tmp_path / "cases.csv", index=False)
    text = """[scenario]
title = "binned ages (invented)"
[data]
case_table = "cases.csv"
[[decisions]]
value = "r"
label = "release"
cost = 0.0
[[decisions]]
value = "b"
label = "bond"
cost = 500.0
[[outcomes]]
key = "fta"
label = "failure to appear"
cost = 1000.0
[costs]
unit = "USD"
[cells]
covariates = ["age"]
rule = ["age"]
BINS
"""
    (tmp_path / "s.toml").write_text(text.replace("BINS", 'bins = { age = { cuts = [25, 40], labels = ["18-24", "25-39", "40+"] } }'))
    analysis = policy.analyze(tmp_path / "s.toml")
    frame_rule = analysis.rule.to_frame()
    assert list(frame_rule["age"]) == ["18-24", "25-39", "40+"]
    expected = [int((ages < 25).sum()), int(((ages >= 25) & (ages < 40)).sum()), int((ages >= 40).sum())]
    assert list(frame_rule["cases"]) == expected
    # bad bins: each message names the key and what was expected
    for bins, words in (('{ age = { cuts = [40, 25] } }', "increase"),
                        ('{ age = { cuts = [25], labels = ["a"] } }', "2 non-empty texts"),
                        ('{ sex = { cuts = [1] } }', "not a cell column"),
                        ('{ age = { cuts = [] } }', "non-empty list")):
        (tmp_path / "bad.toml").write_text(text.replace("BINS", f"bins = {bins}"))
        with pytest.raises(InputError, match=words):
            policy.analyze(tmp_path / "bad.toml")
    # a value that is not a number names the file, column, row and value
    frame["age"] = frame["age"].astype(object)
    frame.loc[7, "age"] = "unknown"
    frame.to_csv(tmp_path / "cases.csv", index=False)
    with pytest.raises(InputError, match=r"cases.csv: column 'age' is binned.*row 8 with 'unknown'"):
        policy.analyze(tmp_path / "s.toml")


def test_estimator_keys_reach_the_estimator(tmp_path):
    from policy.estimation.strata import RiskLevelEstimator

    default = RiskLevelEstimator.from_scenario(load_scenario(write_scenario(tmp_path)))
    assert default.level_terms is True and default.translation_limit is None
    path = write_scenario(tmp_path, replace={"[aid]\n": "[estimator]\nlevel_terms = false\ntranslation_limit = 2\n[aid]\n"})
    est = RiskLevelEstimator.from_scenario(load_scenario(path))
    assert est.level_terms is False and est.translation_limit == 2.0
