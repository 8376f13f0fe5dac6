"""Case tables read in blocks (policy.inputs.stream): the same cell table as reading them whole, ids
checked across blocks, file row numbers in messages, and memory bounded on 20,000,000 rows."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import policy.inputs.stream as stream
from policy import CellTable, load_scenario
from policy.inputs.counting import _case_columns
from policy.errors import InputError
from policy.inputs.stream import id_keys, stream_cell_table
from policy.inputs.tables import read_table

from .conftest import ROOT, run_cli, write_scenario


def assert_same_table(a: CellTable, b: CellTable) -> None:
    pd.testing.assert_frame_equal(a.layout.frame, b.layout.frame)
    for name in ("cases", "observed", "events", "recommended", "state_counts"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    assert a.cell_costs.keys() == b.cell_costs.keys()
    for column in a.cell_costs:  # bit for bit: sums are added in the same order
        assert np.array_equal(a.cell_costs[column], b.cell_costs[column]), column


@pytest.fixture(scope="module")
def cases30k():
    from policy.demo.quarrow import simulate_cases

    return simulate_cases(30_000, seed=11)[0]


@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
@pytest.mark.parametrize("block_rows", [4_096, 7_001])
def test_blocks_give_the_table_read_whole(tmp_path, demo_scenario, cases30k, suffix, block_rows, monkeypatch):
    path = tmp_path / f"cases{suffix}"
    cases30k.to_parquet(path, index=False) if suffix == ".parquet" else cases30k.to_csv(path, index=False)
    whole = CellTable.from_cases(read_table(path, _case_columns(demo_scenario), "case table"), demo_scenario)
    # the in-memory path adds cost sums in chunks of CHUNK_ROWS; blocks must use the same rows
    monkeypatch.setattr("policy.inputs.counting.CHUNK_ROWS", block_rows)
    import policy.inputs.counting

    whole_chunked = CellTable.from_cases(read_table(path, _case_columns(demo_scenario), "case table"), demo_scenario)
    streamed = stream_cell_table(path, demo_scenario, block_rows=block_rows)
    assert_same_table(streamed, whole_chunked)
    # counts agree with the unchunked read exactly; cost means to rounding
    for name in ("cases", "observed", "events", "recommended", "state_counts"):
        np.testing.assert_array_equal(getattr(streamed, name), getattr(whole, name))
    np.testing.assert_allclose(streamed.cell_costs["bond_cost"], whole.cell_costs["bond_cost"], rtol=1e-12)
    assert policy.inputs.counting.CHUNK_ROWS == block_rows
    # reference: pandas' own groupby count of the cases per cell (common practice)
    reference = cases30k.groupby(list(demo_scenario.cell_columns), observed=True).size()
    expected = {tuple(map(str, key)): int(n) for key, n in reference.items()}
    got = {tuple(map(str, row)): int(n) for row, n in zip(streamed.layout.frame.itertuples(index=False), streamed.weights)}
    assert got == expected


def test_default_blocks_match_the_in_memory_chunks(tmp_path, demo_scenario, cases30k):
    # the default block is the in-memory aggregation's chunk: the two are one computation
    assert stream.BLOCK_ROWS == __import__("policy.inputs.counting", fromlist=["CHUNK_ROWS"]).CHUNK_ROWS
    path = tmp_path / "cases.parquet"
    cases30k.to_parquet(path, index=False)
    assert_same_table(stream_cell_table(path, demo_scenario),
                      CellTable.from_cases(read_table(path, _case_columns(demo_scenario), "t"), demo_scenario))


def test_csv_cell_values_are_typed_as_for_the_whole_file(tmp_path, demo_scenario, cases30k):
    """A CSV column is typed from all its values: integers 1..12 sort as numbers even if one
    block holds only 1..9, and a column with one text value is text everywhere."""
    frame = cases30k.copy()
    rng = np.random.default_rng(3)
    frame["prior_record"] = rng.integers(1, 10, len(frame))
    frame.loc[25_000:, "prior_record"] = rng.integers(1, 13, len(frame) - 25_000)
    frame["pending_case"] = rng.integers(0, 3, len(frame)).astype(str)
    frame.loc[20_000, "pending_case"] = "unknown"
    path = tmp_path / "cases.csv"
    frame.to_csv(path, index=False)
    scenario = load_scenario(write_scenario(tmp_path, "cases.csv"))
    import policy.inputs.counting

    whole = read_table(path, _case_columns(scenario), "t")
    assert whole["prior_record"].dtype.kind == "i" and whole["pending_case"].dtype.kind in "OT"
    old = policy.inputs.counting.CHUNK_ROWS
    policy.inputs.counting.CHUNK_ROWS = 4_096
    try:
        expected = CellTable.from_cases(whole, scenario)
    finally:
        policy.inputs.counting.CHUNK_ROWS = old
    streamed = stream_cell_table(path, scenario, block_rows=4_096)
    assert_same_table(streamed, expected)
    assert streamed.layout.categories("prior_record") == list(range(1, 13))


def test_duplicate_ids_across_blocks_give_the_whole_file_message(tmp_path, demo_scenario, cases30k, capsys):
    frame = cases30k.copy()
    frame.loc[[9_000, 21_000], "case_id"] = frame.loc[4, "case_id"]
    path = tmp_path / "cases.parquet"
    frame.to_parquet(path, index=False)
    with pytest.raises(InputError) as whole:
        CellTable.from_cases(read_table(path, _case_columns(demo_scenario), "t"), demo_scenario, file="cases.parquet")
    with pytest.raises(InputError) as streamed:
        stream_cell_table(path, demo_scenario, block_rows=4_096)
    assert str(streamed.value) == str(whole.value)
    assert "'QC-000005' at rows 5 and 9001" in str(streamed.value) and "in 3 rows" in str(streamed.value)


def test_hash_collisions_are_rechecked_exactly(tmp_path, demo_scenario, cases30k, monkeypatch):
    """With a deliberately poor key (16 values) nearly every id collides: the exact second
    look finds no duplicate and the table is read."""
    path = tmp_path / "cases.parquet"
    cases30k.to_parquet(path, index=False)
    real = stream.id_keys
    monkeypatch.setattr(stream, "id_keys", lambda values: real(values) % np.uint64(16))
    table = stream_cell_table(path, demo_scenario, block_rows=4_096)
    assert table.n_cases == len(cases30k)


def test_id_keys():
    texts = ["QC-1", "QC-10", "QC-100", "QC-1", "Ärger-7", "", "x" * 40, "QC-10"]
    keys = id_keys(pa.array(texts))
    for i, a in enumerate(texts):
        for j, b in enumerate(texts):
            assert (keys[i] == keys[j]) == (a == b), (a, b)
    many = [f"C{i}" for i in range(200_000)]
    assert len(np.unique(id_keys(pd.Series(many)))) == len(many)
    ints = np.array([5, 7, 5, -1], dtype=np.int64)
    np.testing.assert_array_equal(id_keys(pa.array(ints)).view(np.int64), ints)
    floats = id_keys(pd.Series([1.5, np.nan, 1.5]))
    assert floats[0] == floats[2] != floats[1]


def test_errors_in_a_later_block_name_file_rows(tmp_path, demo_scenario, cases30k):
    frame = cases30k.copy()
    frame["missed_court"] = frame["missed_court"].astype(object)
    frame.loc[[9_999, 10_200], "missed_court"] = 7
    path = tmp_path / "cases.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(InputError) as err:
        stream_cell_table(path, demo_scenario, block_rows=4_096)
    text = str(err.value)
    assert "column 'missed_court' must be 0/1 or empty" in text and "(first: row 10000)" in text
    assert "rows 8,193 to 12,288 checked" in text


def test_case_table_files_take_the_streaming_path(tmp_path, capsys, cases30k):
    cases30k.to_parquet(tmp_path / "cases.parquet", index=False)
    scenario = write_scenario(tmp_path, "cases.parquet")
    code, stdout, err = run_cli(["check", scenario], capsys)
    assert code == 0, err
    assert "30000" in stdout.replace(",", "")


TWENTY_MILLION = 20_000_000
# Peak memory of this count is a benchmark figure, not a test assertion (machines are shared):
# benchmarks/bench_stream.py measures it and checks it against its bound.


def _write_big(path, demo_scenario) -> pd.DataFrame:
    """A 20,000,000-row Parquet file: 20 row groups of one simulated million, new ids in each."""
    from policy.demo.quarrow import simulate_cases

    base, _ = simulate_cases(1_000_000, seed=4)
    base = base.drop(columns=["case_id"])
    table = pa.Table.from_pandas(base, preserve_index=False)
    schema = table.schema.insert(0, pa.field("case_id", pa.int64()))
    with pq.ParquetWriter(path, schema) as writer:
        for k in range(TWENTY_MILLION // len(base)):
            ids = pa.array(np.arange(k * len(base), (k + 1) * len(base), dtype=np.int64))
            writer.write_table(table.add_column(0, "case_id", ids))
    return base


@pytest.mark.slow
def test_twenty_million_rows_are_counted_exactly(tmp_path, demo_scenario):
    path = tmp_path / "cases20m.parquet"
    base = _write_big(path, demo_scenario)
    code = textwrap.dedent(f"""
        import json, sys
        sys.path.insert(0, {str(ROOT)!r})
        from policy import load_scenario
        from policy.inputs.stream import stream_cell_table
        table = stream_cell_table({str(path)!r}, load_scenario({str(ROOT / 'scenarios' / 'demo.toml')!r}), progress=False)
        print(json.dumps({{"cases": table.n_cases, "per_level": table.cases.sum(axis=(0, 1)).tolist()}}))
    """)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    got = json.loads(done.stdout.strip().splitlines()[-1])
    assert got["cases"] == TWENTY_MILLION
    # reference: pandas value_counts of the decisions of the million rows repeated 20 times (common practice)
    expected = base["decision"].value_counts().reindex(list(demo_scenario.level_values)).to_numpy() * 20
    assert got["per_level"] == expected.tolist()


def test_progress_bar_reads_the_same(tmp_path, demo_scenario, cases30k, capsys):
    path = tmp_path / "cases.csv"
    cases30k.to_csv(path, index=False)
    quiet = stream_cell_table(path, demo_scenario, block_rows=8_192, progress=False)
    shown = stream_cell_table(path, demo_scenario, block_rows=8_192, progress=True)
    assert_same_table(quiet, shown)


def _with_pandas(monkeypatch):
    """Make the CSV reader take the pandas route (as for a file pyarrow's reader refuses)."""
    def refuse(*args, **kwargs):
        raise stream.ArrowRefused("test: read with pandas")
        yield  # pragma: no cover - a generator, like the real reader

    monkeypatch.setattr(stream, "arrow_csv_blocks", refuse)


def _tricky(cases: pd.DataFrame) -> pd.DataFrame:
    """Texts where the two CSV readers could differ: missing-value words, quoted fields,
    outcome columns empty in whole blocks, integer and decimal costs, numeric-looking cells."""
    frame = cases.copy()
    frame["missed_court"] = frame["missed_court"].astype(object)
    frame.loc[:5_000, "missed_court"] = "NA"  # missing (pandas' word for it) in the whole first block
    frame.loc[5_001:5_100, "missed_court"] = ""
    frame["new_offense"] = frame["new_offense"].astype(object)
    frame.loc[7_000:7_010, "new_offense"] = "null"
    frame["bond_cost"] = frame["bond_cost"].round(0).astype(int)  # integers in early blocks ...
    frame["bond_cost"] = frame["bond_cost"].astype(object)
    frame.loc[20_000:, "bond_cost"] = frame.loc[20_000:, "bond_cost"].astype(float) + 0.25  # ... decimals later
    frame["case_id"] = frame["case_id"].astype(str) + ",x"  # quoted in the file (holds a comma)
    return frame


def test_csv_through_pyarrow_equals_csv_through_pandas(tmp_path, demo_scenario, cases30k, monkeypatch):
    # the pandas route is the reference: pyarrow's streaming reader must give the same cell table
    path = tmp_path / "cases.csv"
    _tricky(cases30k).to_csv(path, index=False)
    fast = stream_cell_table(path, demo_scenario, block_rows=5_000)
    _with_pandas(monkeypatch)
    slow = stream_cell_table(path, demo_scenario, block_rows=5_000)
    assert_same_table(fast, slow)


@pytest.mark.parametrize("column, value", [("missed_court", 7), ("decision", "jail"), ("bond_cost", "-5"),
                                           ("bond_cost", "lots"), ("sex", "")])
def test_csv_messages_are_the_same_through_pyarrow_and_pandas(tmp_path, demo_scenario, cases30k, monkeypatch,
                                                              column, value):
    frame = cases30k.copy()
    frame[column] = frame[column].astype(object)
    frame.loc[[9_999, 10_200], column] = value
    path = tmp_path / "cases.csv"
    frame.to_csv(path, index=False)
    messages = []
    for route in ("pyarrow", "pandas"):
        if route == "pandas":
            _with_pandas(monkeypatch)
        with pytest.raises(InputError) as err:
            stream_cell_table(path, demo_scenario, block_rows=4_096)
        messages.append(str(err.value))
    assert messages[0] == messages[1]
    assert "(first: row 10000)" in messages[0] and "rows 8,193 to 12,288 checked" in messages[0]


def test_a_line_with_a_field_too_many_is_refused_before_either_reader(tmp_path, demo_scenario, cases30k):
    # pyarrow's reader would stop there and pandas would read on silently; the shape check
    # refuses the file first, naming the line
    path = tmp_path / "cases.csv"
    cases30k.to_csv(path, index=False)
    lines = path.read_text().splitlines()
    lines[20_000] += ",extra"
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match="line 20001"):
        stream_cell_table(path, demo_scenario, block_rows=4_096)


def test_a_csv_pyarrow_refuses_is_read_with_pandas(tmp_path, demo_scenario, cases30k, monkeypatch):
    # where pyarrow's streaming reader refuses a file (here made to refuse at its first block),
    # the file is read again with pandas, giving the same cell table as the pandas route itself
    import pyarrow.csv as pcsv

    path = tmp_path / "cases.csv"
    cases30k.to_csv(path, index=False)
    expected = stream_cell_table(path, demo_scenario, block_rows=4_096)

    def refuse(*args, **kwargs):
        raise pa.ArrowInvalid("CSV parse error (made to refuse by the test)")

    monkeypatch.setattr(pcsv, "open_csv", refuse)
    assert_same_table(expected, stream_cell_table(path, demo_scenario, block_rows=4_096))
    _with_pandas(monkeypatch)
    assert_same_table(expected, stream_cell_table(path, demo_scenario, block_rows=4_096))
