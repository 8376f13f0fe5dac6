"""Risk-level tables with draws: validation, compare on such a table, and the round trip from the
tool's own bootstrap replicates."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from .conftest import run_cli
from policy.errors import InputError
from policy.estimation.from_scenario import risk_level_draws_from_frame
from policy.inputs.scenario import load_scenario

CANDIDATE = '''
[[candidate_rules]]
name = "tier threshold"
score_at_least = { recognizance = 1, supervision = 3, bond = 5 }

[aid]'''


@pytest.fixture
def round_trip(small_case_table, tmp_path):
    """The small case scenario (with a candidate rule) and a risk-level scenario whose table holds
    the case scenario's own 40 multinomial bootstrap replicates as draws."""
    from policy.assessment.draws_export import bootstrap_draws_table

    path, _ = small_case_table
    text = path.read_text().replace("\n[aid]", CANDIDATE, 1)
    path.write_text(text)
    table = bootstrap_draws_table(path, replicates=40, seed=7, resampling="multinomial")
    table.to_csv(tmp_path / "draws.csv", index=False)
    table_text = text.replace('case_table = "cases.csv"', 'risk_level_table = "draws.csv"').replace('arm = "aid_shown"\n', "")
    table_path = tmp_path / "from_draws.toml"
    table_path.write_text(table_text)
    return path, table_path, table


def test_round_trip_gives_the_bootstrap_intervals_of_the_rules_held_fixed(round_trip):
    # Self-consistency (Monte Carlo identity): the same replicates of p, fed back as draws, give the
    # same replicate values and so the same percentile intervals for every rule chosen on the point
    # estimate and held fixed (the optimum, the candidate), and the same paired differences.
    from policy.assessment.compare import compare

    cases_path, table_path, _ = round_trip
    on_cases = compare(cases_path, replicates=40, seed=7, resampling="multinomial", folds=0)
    on_table = compare(table_path)
    assert on_table.result.n_replicates == 40 and on_table.cells is None
    a = on_cases.comparison_frame().set_index("rule")
    b = on_table.comparison_frame().set_index("rule")
    assert list(b.index) == list(a.index)  # the table's optional columns give the aid's and the observed rules too
    held = list(b.index[b["kind"] != "observed"])
    assert sorted(b.loc[held, "kind"]) == ["aid", "candidate", "optimal"]
    cols = [c for c in b.columns if c.startswith(("cost_per", "regret_per", "rate_", "share_", "agreement"))
            and "_chosen_" not in c]
    # the interval allowing for the choice needs the world the replicates were drawn from: none with draws
    assert b.filter(like="_chosen_").isna().all().all() and a.iloc[:1].filter(like="_chosen_").notna().all().all()
    assert np.isfinite(b.loc[held, ["cost_per_1000_cases_lower", "cost_per_1000_cases_upper"]].to_numpy(float)).all()
    np.testing.assert_allclose(b.loc[held, cols].to_numpy(float), a.loc[held, cols].to_numpy(float), rtol=1e-8, atol=1e-9)
    # what courts did: the same rule (the same decision counts per cell), so the same point figures; its
    # intervals differ, since on the table the decisions are held fixed and only the risk levels vary
    observed = list(b.index[b["kind"] == "observed"])
    assert len(observed) == 2
    point = [c for c in cols if not c.endswith(("_lower", "_upper"))]
    np.testing.assert_allclose(b.loc[observed, point].to_numpy(float), a.loc[observed, point].to_numpy(float),
                               rtol=1e-9, atol=1e-9)
    da = on_cases.differences_frame()
    db = on_table.differences_frame()
    key = ["rule", "versus", "figure"] if "versus" in db.columns else list(db.columns[:3])
    merged = db.merge(da, on=key, suffixes=("_t", "_c"))
    merged = merged[merged[key[0]].isin(held) & merged[key[1]].isin(held)]  # pairs of rules held fixed on both
    assert len(merged) > 0
    for col in [c[:-2] for c in merged.columns if c.endswith("_t") and merged[c].dtype.kind == "f"]:
        np.testing.assert_allclose(merged[col + "_t"], merged[col + "_c"], rtol=1e-8, atol=1e-9, err_msg=col)
    # the optimum's stability is counted over the draws as over the replicates
    sa, sb = on_cases.stability_frame(), on_table.stability_frame()
    opt = on_table.rules[0].name
    np.testing.assert_allclose(sb[sb["rule"] == opt]["stability"].to_numpy(float),
                               sa[sa["rule"] == opt]["stability"].to_numpy(float), atol=1e-12)
    assert any("held fixed in every draw" in n and "decision shares" in n for n in on_table.notes)
    assert any("not scored" in n and "aid's effect" in n and "aid_recommends" not in n for n in on_table.notes)


def test_point_is_the_mean_over_draws_without_marked_rows(round_trip):
    from policy.estimation.strata import risk_level_distribution

    _, table_path, table = round_trip
    scenario = load_scenario(table_path)
    draws = risk_level_draws_from_frame(table[table["draw"] != "point"], scenario)
    assert draws.point_source == "mean over draws" and draws.n_draws == 40
    np.testing.assert_allclose(risk_level_distribution(draws.point.p), risk_level_distribution(draws.p).mean(axis=0), atol=1e-12)
    marked = risk_level_draws_from_frame(table, scenario)
    assert marked.point_source == "marked"
    assert not np.allclose(marked.point.p, draws.point.p)


def _bad(table, scenario, match):
    with pytest.raises(InputError, match=match):
        risk_level_draws_from_frame(table, scenario, "t.csv")


def test_bad_draws_are_refused_with_the_draw_cell_and_value(round_trip):
    _, table_path, table = round_trip
    scenario = load_scenario(table_path)
    t = table.copy()
    row = int(np.flatnonzero(t["draw"] == "3")[4])
    t.loc[row, "risk_level_1"] = 1.7
    _bad(t, scenario, r"draw '3', cell .*outcome=.*'risk_level_1' must hold a probability in \[0, 1\]; got 1.7")
    t = table.copy()
    t.loc[row, "risk_level_0"] = t.loc[row, "risk_level_0"] * 0.5
    _bad(t, scenario, r"draw '3', cell .*must sum to 1 within 1e-6")
    t = table.drop(index=row)
    _bad(t, scenario, r"draw '3' has no row for cell .*outcome=.*every draw needs exactly one row")
    t = table.copy()
    t.loc[t["draw"] == "5", "cases"] = t.loc[t["draw"] == "5", "cases"] + 1
    _bad(t, scenario, r"column 'cases' of draw '5' differs from draw 'point' in cell .*outcome=")
    t = table.copy()
    t.loc[row, "draw"] = ""
    _bad(t, scenario, r"column 'draw' is empty in row")
    _bad(table[table["draw"] == "point"], scenario, r"only 'point' rows")
    t = table[table["draw"] != "7"].copy()
    t = pd.concat([t, table[(table["draw"] == "7")].iloc[3:]])  # draw 7 misses a cell's rows
    _bad(t, scenario, r"draw '7'")


def test_compare_on_a_table_with_draws_through_the_cli(round_trip, tmp_path, capsys):
    _, table_path, _ = round_trip
    code, out, _ = run_cli(["compare", table_path, "--out", tmp_path / "o"], capsys)
    assert code == 0 and "percentile interval over 40 draws" in out
    frame = pd.read_csv(tmp_path / "o" / "comparison.csv")
    assert (frame["cost_per_1000_cases_lower"] <= frame["cost_per_1000_cases"] + 1e-9).all()
    assert frame["cost_per_1000_cases_upper"].notna().all() and (frame["replicates"] == 40).all()


def test_the_example_table_of_draws_runs_through_compare_and_solve(tmp_path, capsys):
    from .conftest import SCENARIOS

    path = SCENARIOS / "risk_level_draws.toml"
    code, out, _ = run_cli(["compare", path, "--out", tmp_path / "c"], capsys)
    assert code == 0 and "percentile interval over 50 draws" in out
    frame = pd.read_csv(tmp_path / "c" / "comparison.csv")
    assert list(frame["kind"]) == ["optimal", "aid", "candidate", "observed", "observed"]
    assert (frame["replicates"] == 50).all() and frame["cost_per_1000_cases_lower"].notna().all()
    import json

    notes = json.loads((tmp_path / "c" / "compare.json").read_text())["notes"]
    assert any("50 draws" in n for n in notes) and any("not scored" in n and "aid's effect" in n for n in notes)
    assert any("taken from the table's decision shares" in n for n in notes)
    # solve reads the same table's point rows
    code, _, _ = run_cli(["solve", path, "--out", tmp_path / "s"], capsys)
    assert code == 0
    # check says what the table holds: its draws and the rules its optional columns give
    from policy.running.pipeline import check

    findings = check(path).findings
    assert findings["draws"] == "50 (point estimate: marked)"
    assert findings["rules given by the table"].split("; ") == [
        "Quarrow Release Screen recommendation", "courts, Quarrow Release Screen not shown",
        "courts, Quarrow Release Screen shown"]
    assert check(SCENARIOS / "risk_level_table.toml").findings["rules given by the table"] == "none"


def test_a_duplicated_row_in_one_draw_is_refused(round_trip):
    _, table_path, table = round_trip
    scenario = load_scenario(table_path)
    t = pd.concat([table, table[table["draw"] == "9"].iloc[[2]]], ignore_index=True)
    _bad(t, scenario, r"draw '9' has more than one row for cell")


def test_a_csv_of_draws_read_in_blocks_equals_the_table_read_whole(round_trip, tmp_path):
    from policy.estimation.draws import read_draws
    from policy.estimation.from_scenario import risk_levels_from_frame

    _, table_path, table = round_trip
    scenario = load_scenario(table_path)
    whole = risk_level_draws_from_frame(table, scenario)
    blocks = read_draws(tmp_path / "draws.csv", scenario, risk_levels_from_frame, chunk_rows=997)
    assert blocks.draw_ids == whole.draw_ids and blocks.point_source == "marked"
    np.testing.assert_allclose(blocks.p, whole.p, atol=1e-12)
    np.testing.assert_allclose(blocks.point.p, whole.point.p, atol=1e-12)
    # a bad value deep in the file: the message names the draw, the cell and the file's row
    t = table.copy()
    row = int(np.flatnonzero(t["draw"] == "30")[10])
    t.loc[row, "risk_level_2"] = -0.25
    t.to_csv(tmp_path / "bad.csv", index=False)
    with pytest.raises(InputError, match=rf"bad.csv: draw '30', cell .*got -0.25 \(row {row + 1}\)"):
        read_draws(tmp_path / "bad.csv", scenario, risk_levels_from_frame, chunk_rows=997)


def test_sweep_bands_from_the_draws_equal_the_bootstrap_bands(round_trip):
    # Self-consistency: the same replicates of p, swept exactly, give the same percentile bands of
    # the lenient share and the same centred intervals of every rule cell's thresholds.
    from policy.assessment.sweep.scenario_sweep import sweep_scenario

    cases_path, table_path, _ = round_trip
    on_cases = sweep_scenario(cases_path, ["new_violent"], replicates=40, seed=7, resampling="multinomial", grid_points=60)
    on_table = sweep_scenario(table_path, ["new_violent"], grid_points=60)
    a, b = on_cases.bands, on_table.bands
    assert b is not None and b.meta["resampling"] == "draws" and b.meta["replicates"] == 40
    for name in ("share", "lower", "upper", "percentile_lower", "percentile_upper", "thresholds", "thresholds_lower",
                 "thresholds_upper"):
        np.testing.assert_allclose(getattr(b, name), getattr(a, name), rtol=1e-8, atol=1e-9, err_msg=name)
    assert np.isfinite(b.percentile_lower).all() and (b.upper - b.lower).max() > 0


def _page_text(html: str) -> str:
    import re

    html = re.sub(r"<(script|style)\b.*?</\1>", " ", html, flags=re.S)
    return " ".join(re.sub(r"<[^>]+>", " ", html).replace("&#39;", "'").split())


def test_report_on_a_table_with_draws_compares_and_bands_from_the_draws(round_trip, tmp_path, capsys):
    # The report's comparison is compare's on the same table (same intervals over the 40 draws),
    # and every sweep carries bands from the draws (the round trip above checks those against the
    # bootstrap of the cases).
    from policy.assessment.compare import compare

    _, table_path, _ = round_trip
    code, out, err = run_cli(["report", table_path, "--out", tmp_path / "r", "--no-progress"], capsys)
    assert code == 0, err
    got = pd.read_csv(tmp_path / "r" / "comparison.csv")
    want = compare(table_path).comparison_frame()
    assert (got["replicates"] == 40).all() and got["cost_per_1000_cases_upper"].notna().all()
    np.testing.assert_allclose(got["cost_per_1000_cases_lower"], want["cost_per_1000_cases_lower"], rtol=1e-9)
    for key in load_scenario(table_path).outcome_keys:
        bands = pd.read_csv(tmp_path / "r" / f"sweep_{key}_bands.csv")
        assert len(bands) > 0 and (bands.filter(like="upper").to_numpy() >= bands.filter(like="lower").to_numpy() - 1e-12).all()
    text = _page_text((tmp_path / "r" / "report.html").read_text(encoding="utf-8"))
    assert "the risk-level table carries 40 draws" in text
    assert "from 40 draws of the risk-level table" in text
    assert "not scored (missing from a risk-level table)" in text
    # the lenient map over the draws
    assert "Over the table's 40 draws, the share of cases for which" in text
    grid = pd.read_csv(tmp_path / "r" / "map_draws_grid.csv")
    assert (grid["draws"] == 40).all() and grid["share_lenient_mean_over_draws"].between(0, 1).all()


def test_report_on_a_table_without_draws_gives_point_figures_and_says_so(round_trip, tmp_path, capsys):
    _, table_path, table = round_trip
    point = table[table["draw"] == "point"].drop(columns="draw")
    point.to_csv(tmp_path / "point.csv", index=False)
    path = tmp_path / "point.toml"
    path.write_text(table_path.read_text().replace('risk_level_table = "draws.csv"', 'risk_level_table = "point.csv"'))
    code, _, err = run_cli(["report", path, "--out", tmp_path / "r", "--no-progress"], capsys)
    assert code == 0, err
    got = pd.read_csv(tmp_path / "r" / "comparison.csv")
    assert (got["replicates"] == 0).all() and got["cost_per_1000_cases_lower"].isna().all()
    assert got["cost_per_1000_cases"].notna().all()
    assert sorted(got["kind"]) == ["aid", "candidate", "observed", "observed", "optimal"]
    assert not list((tmp_path / "r").glob("sweep_*_bands.csv"))
    text = _page_text((tmp_path / "r" / "report.html").read_text(encoding="utf-8"))
    assert "carries no draws, so the figures are point figures with no interval" in text


def _point_rows(table):
    return table[table["draw"] == "point"].drop(columns="draw").reset_index(drop=True)


def test_observed_and_aid_rules_from_the_table_equal_those_from_the_cases(round_trip):
    # The same rule two ways: from the case table (policy.decision.candidates) and from the
    # columns the export writes (decision counts by arm, the aid's level per cell).
    from policy.decision.candidates import aid_rule, observed_rules
    from policy.decision.table_rules import rules_from_table_frame
    from policy.estimation.from_scenario import estimate

    cases_path, table_path, table = round_trip
    cells, _ = estimate(cases_path)
    scenario = load_scenario(table_path)
    point = _point_rows(table)
    rl = risk_level_draws_from_frame(table, scenario).point
    got = rules_from_table_frame(point, scenario, rl, "t.csv")
    want = observed_rules(cells, scenario.aid.name, scenario.level_labels)
    assert [r.name for r in got.observed] == [r.name for r in want] and got.missing == []
    for g, w in zip(got.observed, want):
        np.testing.assert_allclose(g.cell_delta, w.cell_delta, atol=1e-12)
    np.testing.assert_allclose(got.aid.cell_delta, aid_rule(cells, scenario.aid.name).cell_delta, atol=1e-12)
    # shares instead of counts give the same rule where every cell has cases in the arm
    shares = point.copy()
    for suffix in ("_not_shown", "_shown"):
        cols = [f"decision_cases_{v}{suffix}" for v in scenario.level_values]
        total = shares[cols].sum(axis=1)
        for v, c in zip(scenario.level_values, cols):
            shares[f"decision_share_{v}{suffix}"] = np.where(total > 0, shares[c] / total.where(total > 0, 1), 1 / 3)
        shares = shares.drop(columns=cols)
    by_share = rules_from_table_frame(shares, scenario, rl, "t.csv")
    has = cells.cases.sum(axis=2) > 0
    for g, w, a in zip(by_share.observed, want, range(2)):
        np.testing.assert_allclose(g.cell_delta[has[:, a]], w.cell_delta[has[:, a]], atol=1e-12)


def test_bad_rule_columns_are_refused_naming_the_column_and_value(round_trip):
    from policy.decision.table_rules import rules_from_table_frame

    _, table_path, table = round_trip
    scenario = load_scenario(table_path)
    rl = risk_level_draws_from_frame(table, scenario).point
    point = _point_rows(table)

    def bad(frame, match):
        with pytest.raises(InputError, match=match):
            rules_from_table_frame(frame, scenario, rl, "t.csv")

    t = point.copy()
    t.loc[4, "decision_cases_bond_shown"] = -2
    bad(t, r"t.csv: column 'decision_cases_bond_shown' must hold a number of cases >= 0; got -2.0 \(row 5\)")
    t = point.drop(columns="decision_cases_supervision_not_shown")
    bad(t, r"column 'decision_cases_recognizance_not_shown' needs its companions .*missing: decision_cases_supervision_not_shown")
    t = point.copy()
    t.loc[2, "aid_recommends"] = "jail"
    bad(t, r"column 'aid_recommends' must name a decision level; got 'jail' \(row 3\); expected one of: recognizance")
    t = point.copy()
    t.loc[1, "decision_cases_bond_shown"] = t.loc[1, "decision_cases_bond_shown"] + 1  # row 2: the cell's second outcome
    bad(t, r"column 'decision_cases_bond_shown' must be the same in every outcome row of a cell; row 2")
    t = point.copy()
    for v in scenario.level_values:
        t[f"decision_share_{v}_shown"] = 0.4
    bad(t, r"either decision_share_<level>_shown or decision_cases_<level>_shown columns, not both")
    t = point.drop(columns=[c for c in point.columns if c.startswith("decision_cases")])
    for v in scenario.level_values:
        t[f"decision_share_{v}"] = 0.4
    bad(t, r"decision_share_<level> must sum to 1 within 1e-6 in every row; they sum to 1.20000000 in row 1")
    t.loc[:, "decision_share_bond"] = 0.2
    t.loc[7, "decision_share_bond"] = 1.5
    bad(t, r"column 'decision_share_bond' must hold a share in \[0, 1\]; got 1.5 \(row 8\)")


def test_the_demo_writes_a_table_of_draws_that_compare_reads(tmp_path, capsys):
    # The route from the README: the demo's own risk levels with 20 replicates as draws, read back
    # as risk levels estimated elsewhere, give the demo's rule and every kind of compared rule.
    code, _, err = run_cli(["demo", "--out", tmp_path / "d", "--cases", "4000"], capsys)
    assert code == 0, err
    scenario = load_scenario(tmp_path / "d" / "from_draws.toml")
    assert scenario.data.kind == "risk_level_table" and "draws" in scenario.title
    code, out, err = run_cli(["compare", tmp_path / "d" / "from_draws.toml", "--out", tmp_path / "c"], capsys)
    assert code == 0, err
    frame = pd.read_csv(tmp_path / "c" / "comparison.csv")
    assert set(frame["kind"]) == {"optimal", "aid", "candidate", "observed"} and (frame["replicates"] == 20).all()
    code, _, err = run_cli(["solve", tmp_path / "d" / "from_draws.toml", "--out", tmp_path / "s"], capsys)
    assert code == 0, err
    rule = pd.read_csv(tmp_path / "s" / "rule.csv")
    demo_rule = pd.read_csv(tmp_path / "d" / "rule.csv")
    assert list(rule["level"]) == list(demo_rule["level"])


def test_a_parquet_table_of_draws_is_read_in_batches_like_the_csv(round_trip, tmp_path):
    from policy.estimation.draws import read_draws
    from policy.estimation.from_scenario import load_risk_level_draws, risk_levels_from_frame

    _, table_path, table = round_trip
    table.to_parquet(tmp_path / "draws.parquet", index=False, row_group_size=1000)
    scenario = load_scenario(table_path)
    whole = risk_level_draws_from_frame(table, scenario)
    batches = read_draws(tmp_path / "draws.parquet", scenario, risk_levels_from_frame, chunk_rows=997)
    assert batches.draw_ids == whole.draw_ids and batches.point_source == "marked"
    np.testing.assert_allclose(batches.p, whole.p, atol=1e-12)
    path = tmp_path / "parquet.toml"
    path.write_text(table_path.read_text().replace('"draws.csv"', '"draws.parquet"'))
    loaded = load_risk_level_draws(load_scenario(path))
    np.testing.assert_allclose(loaded.p, whole.p, atol=1e-12)
    from policy.decision.table_rules import table_rules

    from_parquet, from_csv = table_rules(load_scenario(path), loaded.point), table_rules(scenario, whole.point)
    assert [r.name for r in from_parquet.rules] == [r.name for r in from_csv.rules] and len(from_csv.rules) == 3
    for a, b in zip(from_parquet.rules, from_csv.rules):
        np.testing.assert_allclose(a.cell_delta, b.cell_delta, atol=1e-12)
    bad = table.copy()
    row = int(np.flatnonzero(bad["draw"] == "12")[5])
    bad.loc[row, "risk_level_0"] = 2.5
    bad.to_parquet(tmp_path / "bad.parquet", index=False)
    with pytest.raises(InputError, match=rf"bad.parquet: draw '12', cell .*got 2.5 \(row {row + 1}\)"):
        read_draws(tmp_path / "bad.parquet", scenario, risk_levels_from_frame, chunk_rows=997)


def test_compare_takes_the_table_as_a_dataframe(round_trip):
    # From Python: the same table as a DataFrame gives what the file gives.
    from policy.assessment.compare import compare

    cases_path, table_path, table = round_trip
    from_file = compare(table_path).comparison_frame()
    from_frame = compare(table_path, table=table).comparison_frame()
    pd.testing.assert_frame_equal(from_frame, from_file)
    point = table[table["draw"] == "point"].drop(columns="draw")
    no_draws = compare(table_path, table=point).comparison_frame()
    assert (no_draws["replicates"] == 0).all() and len(no_draws) == len(from_file)
    np.testing.assert_allclose(no_draws["cost_per_1000_cases"], from_file["cost_per_1000_cases"], rtol=1e-12)
    with pytest.raises(InputError, match="replaces a risk-level table; this scenario's data are a case table"):
        compare(cases_path, table=table)
