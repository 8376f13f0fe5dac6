"""The cost library (policy/data/cost_components.csv, policy/decision/cost_library.py)."""

from __future__ import annotations

import pytest

from policy.decision.cost_library import FLAGS, WARNING, component_value, cost_components, price_factor
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
