"""Case table -> cell table: aggregation, the counts-table route, and every bad input."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import policy.inputs.counting as counting_mod
from policy import CellTable, InputError, load_scenario
from policy.inputs.loading import load_cell_table
from policy.inputs.counting import aggregate_codes, code_column

from .conftest import run_cli, write_scenario


def test_counts_match_a_pandas_crosstab(demo_scenario, demo_cases):
    frame, _ = demo_cases
    table = CellTable.from_cases(frame, demo_scenario)
    # independent reference: pandas group-by over the same columns
    cols = list(demo_scenario.cell_columns)
    ref = frame.groupby(cols + ["aid_shown", "decision"], observed=True).agg(
        cases=("case_id", "size"),
        observed=("new_offense", "count"),
        events=("new_offense", "sum"),
    )
    got = table.to_frame().rename(columns={"arm": "aid_shown"})
    got = got[got["cases"] > 0].set_index(cols + ["aid_shown", "decision"]).sort_index()
    ref = ref.sort_index()
    assert len(got) == len(ref)
    np.testing.assert_array_equal(got.loc[ref.index, "cases"].to_numpy(), ref["cases"].to_numpy())
    np.testing.assert_array_equal(got.loc[ref.index, "observed_new_offense"].to_numpy(), ref["observed"].to_numpy())
    np.testing.assert_array_equal(got.loc[ref.index, "events_new_offense"].to_numpy(), ref["events"].to_numpy())
    assert table.n_cases == len(frame)
    assert table.state_counts.sum() == len(frame)


def test_recommended_and_cost_columns(demo_scenario, demo_cases):
    frame, _ = demo_cases
    table = CellTable.from_cases(frame, demo_scenario)
    assert table.recommended.sum() == len(frame)
    rec_share = table.recommended.sum(axis=(0, 1)) / len(frame)
    ref = frame["aid_recommendation"].value_counts(normalize=True).reindex(demo_scenario.level_values).to_numpy()
    np.testing.assert_allclose(rec_share, ref)
    # the per-cell mean of the cost column, weighted by cases, gives the overall mean
    mean = np.sum(table.cell_costs["bond_cost"] * table.weights) / table.weights.sum()
    assert mean == pytest.approx(frame["bond_cost"].mean())


def test_case_and_counts_routes_agree(tmp_path, demo_scenario, demo_cases):
    frame, _ = demo_cases
    from_cases = CellTable.from_cases(frame, demo_scenario)
    counts = from_cases.counts_frame(demo_scenario)
    counts.to_csv(tmp_path / "counts.csv", index=False)
    raw = dict(demo_scenario.raw)
    raw["data"] = {"counts_table": "counts.csv"}
    scenario = type(demo_scenario).from_dict(raw, tmp_path / "scenario.toml")
    from_counts = load_cell_table(scenario)
    assert from_counts.layout.frame.astype(str).equals(from_cases.layout.frame.astype(str))
    for name in ("cases", "observed", "events", "recommended"):
        np.testing.assert_array_equal(getattr(from_counts, name), getattr(from_cases, name))
    np.testing.assert_allclose(from_counts.cell_costs["bond_cost"], from_cases.cell_costs["bond_cost"])
    # and both give the same risk levels
    from policy import estimate_risk_levels

    a = estimate_risk_levels(demo_scenario, from_cases)
    b = estimate_risk_levels(scenario, from_counts)
    np.testing.assert_allclose(a.p, b.p, atol=1e-12)


def test_parquet_and_csv_agree(tmp_path, small_case_table):
    scenario_path, frame = small_case_table
    frame.to_parquet(tmp_path / "cases.parquet", index=False)
    a = load_cell_table(load_scenario(scenario_path))
    b = load_cell_table(load_scenario(write_scenario(tmp_path, "cases.parquet")))
    np.testing.assert_array_equal(a.cases, b.cases)
    np.testing.assert_array_equal(a.events, b.events)


def test_chunked_and_sparse_paths_agree(monkeypatch):
    rng = np.random.default_rng(3)
    n = 50_000
    sizes = (4, 3, 5, 2, 3, 3, 3)
    raw = [rng.integers(0, k, n).astype(np.int8) for k in sizes]
    raw[0] += 7  # a small-integer column that does not start at 0
    columns = [code_column(pd.Series(r), f"c{i}", "t") for i, r in enumerate(raw)]
    costs = {"c": rng.random(n)}
    dense = aggregate_codes(columns, 3, costs)
    chunked = aggregate_codes(columns, 3, costs, chunk_rows=7_001)
    monkeypatch.setattr(counting_mod, "DENSE_KEYS", 10)
    sparse = aggregate_codes(columns, 3, costs, chunk_rows=9_999)
    for other in (chunked, sparse):
        np.testing.assert_array_equal(other[0], dense[0])
        np.testing.assert_array_equal(other[1], dense[1])
        np.testing.assert_allclose(other[2]["c"], dense[2]["c"])
    assert dense[0].shape[1:] == sizes[3:]
    # reference: one combination's count by direct masking
    mask = (raw[0] == 8) & (raw[1] == 2) & (raw[2] == 3) & (raw[3] == 1) & (raw[4] == 2) & (raw[5] == 0) & (raw[6] == 1)
    cell_pos = int(np.searchsorted(dense[1], np.ravel_multi_index((1, 2, 3), (4, 3, 5))))
    assert dense[0][cell_pos, 1, 2, 0, 1] == mask.sum()
    cell = (raw[0] == 8) & (raw[1] == 2) & (raw[2] == 3)
    assert dense[2]["c"][cell_pos] == pytest.approx(costs["c"][cell].sum())


def test_integer_coded_table_equals_text_coded_table(demo_scenario, demo_cases):
    # the fast small-integer path and the factorizing path give the same cell table
    frame, _ = demo_cases
    coded = frame.copy()
    for col in ("age_band", "charge_class", "prior_record", "pending_case", "sex", "race_group"):
        coded[col] = coded[col].astype("category")
    a = CellTable.from_cases(frame, demo_scenario)
    b = CellTable.from_cases(coded, demo_scenario)
    assert a.layout.frame.astype(str).equals(b.layout.frame.astype(str))
    np.testing.assert_array_equal(a.state_counts, b.state_counts)


# ---------------------------------------------------------------------------------------------
# Bad input: each gives a message naming column, values, row count and first row, exit code 2,
# and writes nothing.
# ---------------------------------------------------------------------------------------------
def _run_bad(tmp_path, capsys, frame=None, writer=None, table="cases.csv"):
    if writer is not None:
        writer(tmp_path / table)
    elif frame is not None:
        frame.to_csv(tmp_path / table, index=False)
    scenario = write_scenario(tmp_path, table)
    out = tmp_path / "out"
    code, stdout, stderr = run_cli(["estimate", scenario, "--out", out], capsys)
    assert code == 2, stderr
    assert not out.exists() or not any(out.iterdir()), "nothing may be written on bad input"
    return " ".join(stderr.split())


@pytest.fixture
def cases3000():
    from policy.demo.quarrow import simulate_cases

    return simulate_cases(3_000, seed=5)[0]


def test_missing_column(tmp_path, capsys, cases3000):
    msg = _run_bad(tmp_path, capsys, cases3000.drop(columns=["prior_record"]))
    assert "column 'prior_record'" in msg and "is missing" in msg and "the table has:" in msg


def test_undeclared_decision(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame.loc[[9, 40, 41], "decision"] = "house arrest"
    msg = _run_bad(tmp_path, capsys, frame)
    assert "column 'decision'" in msg and "'house arrest'" in msg
    assert "in 3 rows (first: row 10)" in msg and "expected one of: recognizance, supervision, bond" in msg


def test_outcome_not_binary(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame["missed_court"] = frame["missed_court"].astype(object)
    frame.loc[117, "missed_court"] = 2
    frame.loc[200, "missed_court"] = "yes"
    msg = _run_bad(tmp_path, capsys, frame)
    assert "column 'missed_court' must be 0/1 or empty" in msg
    assert "'2'" in msg and "'yes'" in msg and "in 2 rows (first: row 118)" in msg


def test_arm_not_binary(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame.loc[4, "aid_shown"] = 3
    msg = _run_bad(tmp_path, capsys, frame)
    assert "column 'aid_shown' must be 0 or 1" in msg and "{3}" in msg and "in 1 rows (first: row 5)" in msg


def test_arm_empty(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame["aid_shown"] = frame["aid_shown"].astype(float)
    frame.loc[[6, 8], "aid_shown"] = np.nan
    msg = _run_bad(tmp_path, capsys, frame)
    assert "column 'aid_shown' must be 0 or 1 in every row" in msg and "2 rows are empty (first: row 7)" in msg


def test_empty_table(tmp_path, capsys, cases3000):
    msg = _run_bad(tmp_path, capsys, cases3000.iloc[:0])
    assert "cases.csv: the case table has no rows" in msg


def test_outcome_entirely_missing(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame["new_violent"] = np.nan
    msg = _run_bad(tmp_path, capsys, frame)
    assert "outcome column 'new_violent'" in msg and "empty in every row" in msg


def test_duplicate_case_ids(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame.loc[20, "case_id"] = frame.loc[3, "case_id"]
    msg = _run_bad(tmp_path, capsys, frame)
    assert "column 'case_id' must identify each case once" in msg
    assert "'QC-000004' at rows 4 and 21" in msg


def test_not_utf8(tmp_path, capsys, cases3000):
    def writer(path):
        text = cases3000.to_csv(index=False).encode("utf-8")
        lines = text.split(b"\n")
        lines[5] = lines[5].replace(b"QC-", b"Q\xe9-", 1)
        path.write_bytes(b"\n".join(lines))

    msg = _run_bad(tmp_path, capsys, writer=writer)
    assert "cases.csv: the file is not UTF-8 text" in msg and "line 6" in msg


def test_parquet_wrong_type(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame["new_offense"] = frame["new_offense"].astype("string")
    msg = _run_bad(tmp_path, capsys, writer=lambda p: frame.to_parquet(p, index=False), table="cases.parquet")
    assert "column 'new_offense' has type" in msg and "expected integer or boolean 0/1" in msg


def test_cell_column_with_blanks(tmp_path, capsys, cases3000):
    frame = cases3000.copy()
    frame.loc[[2, 3], "age_band"] = np.nan
    msg = _run_bad(tmp_path, capsys, frame)
    assert "cell column 'age_band' is empty in 2 rows (first: row 3)" in msg


def test_structural_zero_contradicted(tmp_path, capsys, cases3000):
    cases3000.to_csv(tmp_path / "cases.csv", index=False)
    scenario = write_scenario(tmp_path, replace={'cost = 1000\n': 'cost = 1000\nimpossible_from = "bond"\n'})
    code, _, err = run_cli(["check", scenario], capsys)
    assert code == 2
    assert "declared impossible from level 'bond'" in " ".join(err.split())


def test_counts_table_must_nest(tmp_path, demo_scenario, demo_cases):
    frame, _ = demo_cases
    counts = CellTable.from_cases(frame.iloc[:2000], demo_scenario).counts_frame(demo_scenario)
    counts.loc[3, "events_new_offense"] = counts.loc[3, "observed_new_offense"] + 1
    with pytest.raises(InputError, match=r"events_new_offense > observed_new_offense in 1 rows \(first: row 4\)"):
        CellTable.from_counts(counts, demo_scenario)
