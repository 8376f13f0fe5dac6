"""Declaring constraints: the checks of a constraint table with the whole message each bad value
gets, the spec a good table becomes, the command line's text forms and short options, and the
scenario's constraints followed by added ones.

The expected values are written out by hand from the key documentation in
policy/decision/constraints.py (CONSTRAINT_KEYS and the kinds' accepted keys) and the rules of
the house for bad input (name the file, the key, the bad value and what was expected).
"""

from __future__ import annotations

import pytest

from policy import load_scenario
from policy.decision.constraints import (
    ConstraintSpec,
    Vocabulary,
    parse_constraint_text,
    scenario_specs,
    shorthand_tables,
    spec_from_table,
)
from policy.errors import InputError

from .conftest import SCENARIOS

VOCAB = Vocabulary(("ror", "cond", "bond"), ("release", "conditions", "secured bond"), ("fta", "new"),
                   ("group", "sex"), ("score", "charge", "group", "sex"), ("score", "charge", "group"), "score", "c.toml")
NO_PROTECTED = Vocabulary(VOCAB.level_values, VOCAB.level_labels, VOCAB.outcome_keys, (), ("score", "charge"),
                          ("score", "charge"), None, "c.toml")


def message(table, vocab=VOCAB, **kw) -> str:
    with pytest.raises(InputError) as info:
        spec_from_table(table, vocab, 2, **kw)
    return str(info.value)


W = "[[constraints]] #2"
BAD = [
    ({"kind": "fair"}, (f"c.toml: key 'kind' in {W} is 'fair'; expected one of: principal_fairness, statistical_parity, "
                       "conditional_parity, group_blind, capacity, outcome_cap, monotone.")),
    ({"kind": "capacity", "max_share": 0.1, "tolerance": 0.1},
     f"c.toml: key 'tolerance' in {W} has no meaning for kind 'capacity'; that kind takes: at_least, max_cases, max_share."),
    ({"kind": "group_blind", "outcome": "new"},
     f"c.toml: key 'outcome' in {W} has no meaning for kind 'group_blind'; that kind takes: attribute."),
    ({"kind": "outcome_cap", "outcome": "fta"},
     f"c.toml: missing key 'max_rate' in {W} (kind 'outcome_cap'); expected outcome_cap: largest expected rate of the outcome, 0..1."),
    ({"kind": "outcome_cap"},  # the first missing key in alphabetical order
     f"c.toml: missing key 'max_rate' in {W} (kind 'outcome_cap'); expected outcome_cap: largest expected rate of the outcome, 0..1."),
    ({"kind": "conditional_parity", "tolerance": 0.1},
     f"c.toml: missing key 'within' in {W} (kind 'conditional_parity'); expected cell covariate whose levels conditional_parity holds within."),
    ({"kind": "outcome_cap", "outcome": "arrest", "max_rate": 0.1},
     f"c.toml: key 'outcome' in {W} is 'arrest', not a declared outcome kind; expected one of: fta, new."),
    ({"kind": "statistical_parity", "attribute": "age", "tolerance": 0.1},
     f"c.toml: key 'attribute' in {W} is 'age', not a protected attribute; expected one of: group, sex."),
    ({"kind": "conditional_parity", "within": "court", "tolerance": 0.1},
     f"c.toml: key 'within' in {W} is 'court', not a cell column; expected one of: score, charge, group, sex."),
    ({"kind": "conditional_parity", "within": "sex", "tolerance": 0.1},
     f"c.toml: key 'within' in {W} names the protected attribute 'sex'; parity within its levels compares nothing."),
    ({"kind": "principal_fairness", "outcome": "new", "tolerance": 0.1, "risk_levels": [0, 4]},
     f"c.toml: key 'risk_levels' in {W} must list risk levels 0..3; got [0, 4]."),
    ({"kind": "principal_fairness", "outcome": "new", "tolerance": 0.1, "risk_levels": [-1]},
     f"c.toml: key 'risk_levels' in {W} must list risk levels 0..3; got [-1]."),
    ({"kind": "principal_fairness", "outcome": "new", "tolerance": 0.1, "risk_levels": []},
     f"c.toml: key 'risk_levels' in {W} must list risk levels 0..3; got []."),
    ({"kind": "statistical_parity", "tolerance": 0.1, "thresholds": []},
     f"c.toml: key 'thresholds' in {W} is empty; list decision values or leave it out."),
    ({"kind": "statistical_parity", "tolerance": 0.1, "thresholds": ["bond", "jail"]},
     f"c.toml: key 'thresholds' in {W}: level 'jail' is not a declared decision level; expected one of: ror, cond, bond."),
    ({"kind": "statistical_parity", "tolerance": 0.1, "thresholds": ["cond", "release"]},
     f"c.toml: key 'thresholds' in {W} names the most lenient level 'ror'; P(D >= it) is 1 for every rule."),
    ({"kind": "capacity", "at_least": "ror", "max_share": 0.1},
     f"c.toml: key 'at_least' in {W} names the most lenient level; every case is at it or harsher."),
    ({"kind": "capacity", "at_least": "jail", "max_share": 0.1},
     f"c.toml: key 'at_least' in {W}: level 'jail' is not a declared decision level; expected one of: ror, cond, bond."),
    ({"kind": "capacity"}, f"c.toml: {W} (kind 'capacity') must give exactly one of 'max_share' (0..1) or 'max_cases'."),
    ({"kind": "capacity", "max_share": 0.1, "max_cases": 10.0},
     f"c.toml: {W} (kind 'capacity') must give exactly one of 'max_share' (0..1) or 'max_cases'."),
    ({"kind": "capacity", "max_share": 1.5}, f"c.toml: key 'max_share' in {W} must be a share in 0..1; got 1.5."),
    ({"kind": "capacity", "max_share": -0.25}, f"c.toml: key 'max_share' in {W} must be a share in 0..1; got -0.25."),
    ({"kind": "capacity", "max_cases": -1.0}, f"c.toml: key 'max_cases' in {W} must be >= 0; got -1.0."),
    ({"kind": "statistical_parity", "tolerance": 1.5},
     f"c.toml: key 'tolerance' in {W} must be in 0..1 (a probability); got 1.5."),
    ({"kind": "monotone", "tolerance": -0.5},
     f"c.toml: key 'tolerance' in {W} must be in 0..1 (a probability); got -0.5."),
    ({"kind": "outcome_cap", "outcome": "new", "max_rate": 1.25},
     f"c.toml: key 'max_rate' in {W} must be in 0..1 (a probability); got 1.25."),
    ({"kind": "outcome_cap", "outcome": "new", "max_rate": -0.5},
     f"c.toml: key 'max_rate' in {W} must be in 0..1 (a probability); got -0.5."),
    ({"kind": "capacity", "cap": 3}, (f"c.toml: unknown key 'cap' in {W}; expected one of: at_least, attribute, kind, "
                                     "max_cases, max_rate, max_share, name, outcome, risk_levels, score, thresholds, tolerance, within.")),
    ({"kind": "capacity", "max_share": "abc"}, f"c.toml: key 'max_share' in {W} must be a number; got 'abc'."),
    ("capacity", f"c.toml: {W} must be a table; got str 'capacity'."),
    ({"kind": "monotone", "score": "sex"},
     f"c.toml: {W} (kind 'monotone'): the score 'sex' is not a rule column; expected one of: score, charge, group."),
]


@pytest.mark.parametrize("table, expected", BAD)
def test_a_bad_table_gets_the_whole_message(table, expected):
    assert message(table) == expected


@pytest.mark.parametrize("kind, extra", [("principal_fairness", {"outcome": "new", "tolerance": 0.1}),
                                         ("statistical_parity", {"tolerance": 0.1}),
                                         ("conditional_parity", {"within": "score", "tolerance": 0.1}),
                                         ("group_blind", {})])
def test_fairness_kinds_need_protected_attributes(kind, extra):
    assert message({"kind": kind, **extra}, NO_PROTECTED) == (
        f"c.toml: {W} (kind {kind!r}) needs protected attributes; [cells] protected is empty.")


def test_messages_without_protected_attributes_or_score_and_with_another_name():
    assert message({"kind": "statistical_parity", "attribute": "sex", "tolerance": 0.1}, NO_PROTECTED) == (
        f"c.toml: key 'attribute' in {W} is 'sex', not a protected attribute; expected one of: "
        "(none declared in [cells] protected).")
    assert message({"kind": "monotone"}, NO_PROTECTED) == (
        f"c.toml: {W} (kind 'monotone') needs an ordered score: give 'score' or [aid] score.")
    assert message({"kind": "capacity"}, where="added constraint #5") == (
        "c.toml: added constraint #5 (kind 'capacity') must give exactly one of 'max_share' (0..1) or 'max_cases'.")


def test_a_good_table_becomes_its_spec():
    spec = spec_from_table({"kind": "principal_fairness", "outcome": "new", "attribute": "sex", "tolerance": 0.05,
                            "risk_levels": [3, 1, 3], "thresholds": ["secured bond", "cond"]}, VOCAB, 2)
    # default name: position and kind; risk levels sorted once each; thresholds by value
    assert spec == ConstraintSpec("principal_fairness", "#2 principal_fairness", outcome="new", attribute="sex",
                                  risk_levels=(1, 3), thresholds=("bond", "cond"), tolerance=0.05)
    assert spec_from_table({"kind": "conditional_parity", "within": "charge", "tolerance": 0.0, "name": "c"}, VOCAB, 2) == \
        ConstraintSpec("conditional_parity", "c", within="charge", tolerance=0.0)
    # capacity: the harshest level by default, a label read as its value; the bounds at their ends
    assert spec_from_table({"kind": "capacity", "max_share": 1.0}, VOCAB, 1) == \
        ConstraintSpec("capacity", "#1 capacity", at_least="bond", max_share=1.0)
    assert spec_from_table({"kind": "capacity", "at_least": "conditions", "max_cases": 0.0}, VOCAB, 1) == \
        ConstraintSpec("capacity", "#1 capacity", at_least="cond", max_cases=0.0)
    assert spec_from_table({"kind": "capacity", "max_share": 0.0}, VOCAB, 1).max_share == 0.0
    assert spec_from_table({"kind": "outcome_cap", "outcome": "fta", "max_rate": 1.0}, VOCAB, 3) == \
        ConstraintSpec("outcome_cap", "#3 outcome_cap", outcome="fta", max_rate=1.0)
    assert spec_from_table({"kind": "outcome_cap", "outcome": "fta", "max_rate": 0.0}, VOCAB, 3).max_rate == 0.0
    assert spec_from_table({"kind": "statistical_parity", "tolerance": 1.0}, VOCAB, 3).tolerance == 1.0
    # monotone: the aid's score by default, tolerance 0 unless given
    assert spec_from_table({"kind": "monotone"}, VOCAB, 4) == ConstraintSpec("monotone", "#4 monotone", score="score", tolerance=0.0)
    assert spec_from_table({"kind": "monotone", "score": "charge", "tolerance": 0.02}, VOCAB, 4) == \
        ConstraintSpec("monotone", "#4 monotone", score="charge", tolerance=0.02)
    assert spec_from_table({"kind": "group_blind", "attribute": "group"}, VOCAB, 1) == \
        ConstraintSpec("group_blind", "#1 group_blind", attribute="group")
    assert spec_from_table({"kind": "principal_fairness", "outcome": "new", "tolerance": 0.1,
                            "risk_levels": [0, 3]}, VOCAB, 1).risk_levels == (0, 3)


def test_a_spec_names_its_bound_unit_arguments_and_itself():
    pf = ConstraintSpec("principal_fairness", "pf", outcome="new", attribute="sex", risk_levels=(1, 3),
                        thresholds=("cond", "bond"), tolerance=0.05)
    assert (pf.bound_key, pf.bound, pf.bound_unit) == ("tolerance", 0.05, "probability difference")
    assert pf.arguments() == "outcome=new, attribute=sex, risk_levels=1|3, thresholds=cond|bond"
    assert pf.describe() == "pf: principal_fairness (outcome=new, attribute=sex, risk_levels=1|3, thresholds=cond|bond), tolerance 0.05"
    share = ConstraintSpec("capacity", "held", at_least="bond", max_share=0.15)
    assert (share.bound_key, share.bound, share.bound_unit) == ("max_share", 0.15, "share of cases")
    assert share.describe() == "held: capacity (at_least=bond), max_share 0.15"
    cases = ConstraintSpec("capacity", "held", at_least="cond", max_cases=120.0)
    assert (cases.bound_key, cases.bound, cases.bound_unit) == ("max_cases", 120.0, "cases")
    assert cases.describe() == "held: capacity (at_least=cond), max_cases 120"
    cap = ConstraintSpec("outcome_cap", "cap", outcome="fta", max_rate=0.3)
    assert (cap.bound_key, cap.bound, cap.bound_unit) == ("max_rate", 0.3, "outcome rate")
    blind = ConstraintSpec("group_blind", "blind")
    assert (blind.bound_key, blind.bound) == ("tolerance", 0.0) and isinstance(blind.bound, float)
    assert blind.arguments() == "" and blind.describe() == "blind: group_blind"
    mono = ConstraintSpec("monotone", "m", within="charge", score="score")
    assert mono.arguments() == "within=charge, score=score"
    assert mono.describe() == "m: monotone (within=charge, score=score), tolerance 0"
    assert ConstraintSpec("statistical_parity", "sp", tolerance=0.1).describe() == "sp: statistical_parity, tolerance 0.1"


def test_a_level_by_value_or_label():
    assert [VOCAB.level(v, "x") for v in ("ror", "cond", "bond", "release", "conditions", "secured bond")] == [0, 1, 2, 0, 1, 2]
    with pytest.raises(InputError) as info:
        VOCAB.level(2, "key 'at_least'")
    assert str(info.value) == "c.toml: key 'at_least' 2 is not a declared decision level; expected one of: ror, cond, bond."


def test_constraint_text_of_the_command_line():
    assert parse_constraint_text(" kind=capacity, at_least = bond ,,max_share=15%") == \
        {"kind": "capacity", "at_least": "bond", "max_share": 0.15}
    assert parse_constraint_text("kind=principal_fairness,outcome=new,tolerance=1e-2,risk_levels=1| 3|,thresholds=cond| bond") == \
        {"kind": "principal_fairness", "outcome": "new", "tolerance": 0.01, "risk_levels": [1, 3], "thresholds": ["cond", "bond"]}
    # what is not a number stays text, for spec_from_table to name; at_least is a level, not a number
    assert parse_constraint_text("tolerance=abc,risk_levels=x|2,at_least=2,max_cases=40") == \
        {"tolerance": "abc", "risk_levels": ["x", 2], "at_least": "2", "max_cases": 40.0}
    assert parse_constraint_text("risk_levels=1.5") == {"risk_levels": ["1.5"]}
    # list items are numbers only where the key lists integers; a value may hold "="
    assert parse_constraint_text("thresholds=2|3,name=cap=8%") == {"thresholds": ["2", "3"], "name": "cap=8%"}
    for text, part in (("kind", "kind"), ("kind=capacity,=3", "=3")):
        with pytest.raises(InputError) as info:
            parse_constraint_text(text)
        assert str(info.value) == (f"constraint {text!r}: {part!r} must look like KEY=VALUE, "
                                   "e.g. kind=capacity,at_least=bond,max_share=0.15.")
    with pytest.raises(InputError) as info:
        parse_constraint_text("kind=capacity,cap=3")
    assert str(info.value) == ("constraint 'kind=capacity,cap=3': unknown key 'cap'; expected one of: at_least, attribute, "
                               "kind, max_cases, max_rate, max_share, name, outcome, risk_levels, score, thresholds, "
                               "tolerance, within.")
    # parsed text is validated like a scenario's table
    assert spec_from_table(parse_constraint_text("kind=capacity,max_share=8%,name=held"), VOCAB, 1) == \
        ConstraintSpec("capacity", "held", at_least="bond", max_share=0.08)


def test_short_options_of_the_command_line():
    assert shorthand_tables() == []
    assert shorthand_tables(group_blind=True, principal_fairness=["new=0.02"], max_share=[" bond = 8% ", "cond=0.5"],
                            max_rate=["fta=0.3"]) == [
        {"kind": "group_blind"},
        {"kind": "principal_fairness", "outcome": "new", "tolerance": 0.02},
        {"kind": "capacity", "at_least": "bond", "max_share": 0.08},
        {"kind": "capacity", "at_least": "cond", "max_share": 0.5},
        {"kind": "outcome_cap", "outcome": "fta", "max_rate": 0.3}]
    for kw, text in (({"max_share": ["bond"]}, "--max-share 'bond' must look like NAME=NUMBER, e.g. --max-share bond=0.15."),
                     ({"max_share": ["bond=x=0.1"]},
                      "--max-share 'bond=x=0.1' must look like NAME=NUMBER, e.g. --max-share bond=0.15."),
                     ({"max_share": ["bond=x"]}, "--max-share 'bond=x' must look like NAME=NUMBER, e.g. --max-share bond=0.15."),
                     ({"max_rate": [" =0.2"]}, "--max-rate ' =0.2' must look like NAME=NUMBER, e.g. --max-rate new_offense=0.02."),
                     ({"principal_fairness": ["new"]},
                      "--principal-fairness 'new' must look like NAME=NUMBER, e.g. --principal-fairness new_offense=0.02.")):
        with pytest.raises(InputError) as info:
            shorthand_tables(**kw)
        assert str(info.value) == text


@pytest.fixture(scope="module")
def constrained_scenario():
    return load_scenario(SCENARIOS / "demo_constrained.toml")


def test_scenario_constraints_then_added_ones(constrained_scenario):
    s = constrained_scenario
    own = scenario_specs(s)
    assert [c.name for c in own] == ["no protected attributes", "alike within new-offense risk levels", "at most 15% held"]
    assert [c.kind for c in own] == ["group_blind", "principal_fairness", "capacity"]
    added = scenario_specs(s, [{"kind": "outcome_cap", "outcome": "new_offense", "max_rate": 0.2},
                               ConstraintSpec("capacity", "given", at_least="supervision", max_share=0.5)])
    assert added[:3] == own and added[4] == ConstraintSpec("capacity", "given", at_least="supervision", max_share=0.5)
    assert added[3] == ConstraintSpec("outcome_cap", "#4 outcome_cap", outcome="new_offense", max_rate=0.2)
    alone = scenario_specs(s, [{"kind": "outcome_cap", "outcome": "new_offense", "max_rate": 0.2}], use_scenario=False)
    assert alone == (ConstraintSpec("outcome_cap", "#1 outcome_cap", outcome="new_offense", max_rate=0.2),)
    with pytest.raises(InputError) as info:
        scenario_specs(s, [{"kind": "capacity"}])
    assert str(info.value) == ("demo_constrained.toml: added constraint #4 (kind 'capacity') must give exactly one of "
                               "'max_share' (0..1) or 'max_cases'.")
    with pytest.raises(InputError) as info:
        scenario_specs(s, [{"kind": "capacity", "max_share": 0.2, "name": "at most 15% held"}])
    assert str(info.value) == "demo_constrained.toml: two constraints are named 'at most 15% held'; give each its own 'name'."


def test_the_names_a_scenario_offers(constrained_scenario):
    s = constrained_scenario
    vocab = Vocabulary.of_scenario(s)
    assert vocab == Vocabulary(s.level_values, s.level_labels, s.outcome_keys, s.protected, s.cell_columns,
                               s.rule_covariates, "aid_tier", "demo_constrained.toml")
    assert vocab.cell_columns == ("age_band", "charge_class", "prior_record", "pending_case", "aid_tier", "sex", "race_group")
    assert vocab.rule_columns == ("aid_tier", "charge_class", "sex", "race_group")


def test_scenario_file_constraints_checked_where_they_are_read(tmp_path):
    text = (SCENARIOS / "demo_constrained.toml").read_text(encoding="utf-8")
    twice = tmp_path / "twice.toml"
    twice.write_text(text + '\n[[constraints]]\nkind = "capacity"\nname = "at most 15% held"\nmax_share = 0.3\n', encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_scenario(twice)
    assert str(info.value) == "twice.toml: two constraints are named 'at most 15% held'; give each its own 'name'."
    not_array = tmp_path / "flat.toml"
    # a constraint without a name is named by its position in the file
    unnamed = tmp_path / "unnamed.toml"
    unnamed.write_text(text + '\n[[constraints]]\nkind = "outcome_cap"\noutcome = "new_offense"\nmax_rate = 0.3\n', encoding="utf-8")
    assert load_scenario(unnamed).sections["constraints"][3].name == "#4 outcome_cap"
    unnamed.write_text(text + '\n[[constraints]]\nkind = "outcome_cap"\noutcome = "new_offense"\n', encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_scenario(unnamed)
    assert str(info.value).startswith("unnamed.toml: missing key 'max_rate' in [[constraints]] #4 (kind 'outcome_cap')")
    plain = (SCENARIOS / "demo.toml").read_text(encoding="utf-8")
    not_array.write_text("constraints = 3\n" + plain, encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_scenario(not_array)
    assert str(info.value) == "flat.toml: constraints must be an array of tables ([[constraints]]); got int."
