"""The cost library (policy/data/cost_components.csv, policy.inputs.cost_library.py)."""

from __future__ import annotations

import re

import pytest

from policy.inputs.cost_library import FLAGS, WARNING, component_value, cost_components, price_factor
from policy.errors import InputError


def test_every_component_has_a_flag_and_a_source_or_says_assumption():
    lib = cost_components()
    assert set(lib["provenance"]) <= set(FLAGS)
    sourced = lib[lib["provenance"] != "assumption"]
    assert (sourced["source"].str.len() > 10).all()
    assert sourced["year"].notna().all()
    for kind in ("jail_day", "supervision_day", "warrant_missed_court", "detention_harm", "offense_larceny_theft"):
        assert kind in set(lib["key"])
    assert "illustrative" in WARNING


def test_the_demo_scenarios_cited_costs_follow_from_the_library():
    # scenarios/demo.toml: new offense 5,146 = larceny/theft 3,532 (2008 USD) x CPI 1.457, new
    # violent offense 155,928 = aggravated assault 107,020 x 1.457 (McCollister, French & Fang
    # 2010, Table 5; secondary, docs/reference-values.md); a bond's cost = days held x (85 + 11) + 2,500.
    assert round(component_value("offense_larceny_theft", 2024)) == 5146
    assert round(component_value("offense_aggravated_assault", 2024)) == 155928
    day = component_value("jail_day") + component_value("liberty_day")
    assert day == 96.0
    assert [component_value(f"days_held_{c}") * day + component_value("detention_harm")
            for c in ("misdemeanor", "felony", "violent_felony")] == [3076.0, 4516.0, 6340.0]


def test_no_price_factor_is_guessed():
    assert price_factor(2008, 2024) == pytest.approx(1.457)
    with pytest.raises(InputError, match="no price-index factor from 2011 to 2024"):
        component_value("liberty_day", 2024)


def test_a_library_with_a_bad_flag_or_no_source_is_refused(tmp_path):
    text = (tmp_path / "x.csv")
    header = "key,kind,component,value,unit,year,source,provenance,note\n"
    text.write_text(header + "a,decision,x,1,USD,2020,somewhere,guess,\n")
    with pytest.raises(InputError, match="provenance 'guess'"):
        cost_components(text)
    text.write_text(header + "a,decision,x,1,USD,2020,,seen,\n")
    with pytest.raises(InputError, match="names no source"):
        cost_components(text)
    text.write_text(header + "a,decision,x,-3,USD,2020,a source,seen,\n")
    with pytest.raises(InputError, match="value"):
        cost_components(text)


# --- costs built from the library in a scenario (cost_from) -------------------------------------

def test_the_demo_builds_its_costs_from_the_library_and_the_stated_costs_agree(demo_scenario, demo_cases):
    # The reader refuses a stated cost that differs from its build by more than half a unit, so
    # loading the demo is itself the check; the values are re-derived here by hand from the
    # published figures (McCollister, French & Fang 2010, Table 5, secondary; CPI-U factor 1.457,
    # secondary) and the demo's assumptions.
    levels = {lv.value: lv for lv in demo_scenario.levels}
    outcomes = {o.key: o for o in demo_scenario.outcomes}
    assert levels["supervision"].cost_build.value == 75 * 10 == levels["supervision"].cost
    assert outcomes["new_offense"].cost_build.value == pytest.approx(3532 * 1.457)
    assert outcomes["new_violent"].cost_build.value == pytest.approx(107020 * 1.457)
    assert outcomes["missed_court"].cost_build.value == outcomes["missed_court"].cost == 1000
    assert "3,532 x 1.457 = 5,146.12" in outcomes["new_offense"].cost_build.describe()
    bond = levels["bond"].cost_build
    assert bond.by == "charge_class"
    built = {name: part.value for name, part in bond.parts}
    assert built == {"misdemeanor": 3076.0, "felony": 4516.0, "violent felony": 6340.0}
    # the simulated cases' per-case bond cost is exactly the build for each charge class
    frame, _ = demo_cases
    means = frame.groupby("charge_class", observed=True)["bond_cost"].agg(["min", "max"])
    for name, value in built.items():
        assert means.loc[name, "min"] == means.loc[name, "max"] == value
    jail = next(c for c in bond.components if c.key == "jail_day")
    assert jail.factor == 1.0 and "not adjusted" in jail.price_note and jail.provenance == "seen"


def _scenario_with(tmp_path, old: str, new: str, extra: str = ""):
    from policy.demo.quarrow import demo_scenario_path
    from policy.inputs.scenario import load_scenario

    text = demo_scenario_path().read_text(encoding="utf-8")
    assert old in text
    path = tmp_path / "s.toml"
    path.write_text(text.replace(old, new) + extra, encoding="utf-8")
    return lambda: load_scenario(path)


def test_a_stated_cost_that_differs_from_its_build_is_refused(tmp_path):
    load = _scenario_with(tmp_path, "cost = 750.0", "cost = 760.0")
    with pytest.raises(InputError, match=r"'cost' in \[\[decisions\]\] #2 is 760 but its cost_from comes to 75 x 10 = 750"):
        load()


def test_a_cost_given_only_by_its_build(tmp_path):
    sc = _scenario_with(tmp_path, 'cost = 1000.0\ncost_from = "warrant_missed_court"',
                        'cost_from = "warrant_missed_court * 1.5"')()
    assert sc.outcomes[0].cost == 1500.0 and sc.outcomes[0].cost_build.parts[0][1].numbers == (1.5,)


@pytest.mark.parametrize("old, new, message", [
    ('cost_from = "warrant_missed_court"', 'cost_from = "warrant_served"', "'warrant_served' is not in the cost library"),
    ('cost_from = "warrant_missed_court"', 'cost_from = "warrant_missed_court +"', "not an arithmetic expression"),
    ('cost_from = "warrant_missed_court"', 'cost_from = "__import__(\'os\')"', "is not allowed"),
    ('unadjusted = ["jail_day", "liberty_day"]', 'unadjusted = ["jail_day"]', "'liberty_day' is in 2011 prices and"),
    ('cost_by = "charge_class"', 'cost_by = "offense_class"', "'offense_class', not a cell column"),
    ('cost_by = "charge_class"\n', '', "needs cost_by"),
    (', "violent felony" = "days_held_violent_felony * (jail_day + liberty_day) + detention_harm"', '',
     "expected one entry for each value of 'charge_class'"),
    ('price_year = 2024', 'price_year = 24', "must be a year"),
])
def test_bad_builds_are_refused_with_the_key_named(tmp_path, old, new, message):
    load = _scenario_with(tmp_path, old, new)
    with pytest.raises(InputError, match=re.escape(message)):
        load()


def test_a_scenarios_own_library_and_price_index(tmp_path):
    # a user's library and index of the package's shape, named relative to the scenario file;
    # the arithmetic is checked by hand: 200 x 1.1 = 220, and 3 x 50 = 150 (no price year)
    header = "key,kind,component,value,unit,year,source,provenance,note\n"
    (tmp_path / "lib.csv").write_text(header + "warrant_local,outcome,warrant,200,USD,2020,county budget 2020 (invented),seen,\n"
                                      "visits,days,check-ins,3,visits,,no source at hand,assumption,\n"
                                      "visit_cost,decision,one check-in,50,USD per visit,,no source at hand,assumption,\n")
    (tmp_path / "index.csv").write_text("from_year,to_year,factor,index,source,provenance\n"
                                        "2020,2024,1.1,an invented index,for the test only,assumption\n")
    load = _scenario_with(tmp_path, 'price_year = 2024\nunadjusted = ["jail_day", "liberty_day"]',
                          'price_year = 2024\nfile = "lib.csv"\nprice_index = "index.csv"')
    text = (tmp_path / "s.toml").read_text()
    text = text.replace('cost = 1000.0\ncost_from = "warrant_missed_court"', 'cost_from = "warrant_local"')
    text = text.replace('cost = 750.0\ncost_from = "days_supervised * supervision_day"', 'cost_from = "visits * visit_cost"')
    for key in ("offense_larceny_theft", "offense_aggravated_assault"):
        text = text.replace(f'cost_from = "{key}"\n', "")
    cut = text.index("cost_by = ")
    text = text[:cut] + text[text.index("\n", text.index("cost_from = {", cut)) + 1:]
    (tmp_path / "s.toml").write_text(text)
    sc = load()
    assert sc.outcomes[0].cost == pytest.approx(220.0) and sc.levels[1].cost == 150.0
    assert sc.outcomes[0].cost_build.describe() == "200 x 1.1 = 220"
    assert sc.cost_library.path == (tmp_path / "lib.csv").resolve()
    (tmp_path / "s.toml").write_text(text.replace('file = "lib.csv"', 'file = "nowhere.csv"'))
    with pytest.raises(InputError, match=r"\[cost_library\] file 'nowhere.csv' does not exist"):
        load()
