"""Case tables larger than memory: read in blocks, counted by cell, merged by cell.

A statewide case table may hold tens of millions of cases: far more than fit in memory as
Python objects, yet every figure depends on them only through their counts per cell. This
module reads a Parquet or CSV case table in blocks of :data:`BLOCK_ROWS` rows, counts each
block with the same code as an in-memory table (:func:`policy.inputs.counting.count_block`: integer
codes, one mixed-radix key, one ``numpy.bincount``) and merges the blocks' counts by their cell
values. Memory is bounded by the number of cells, plus eight bytes per case for the check that
case ids are unique (below), never by the case rows themselves.

- **Parquet** is read with ``pyarrow.parquet.ParquetFile.iter_batches``; text columns are read
  dictionary-encoded, so each block reaches pandas as categoricals (codes, no strings per row).
  A background thread reads and converts the next block while this one is counted.
- **CSV** is read with pyarrow's streaming CSV reader (:mod:`policy.inputs.csv_blocks`): cell
  columns dictionary-encoded, every block typed as pandas' reader types it; a file that reader
  refuses is read with pandas in chunks instead. Cell columns are read as text and typed at the
  end from their distinct values by pandas' own parser, so a column such as ``1, 2, ..., 12``
  gets integer categories (sorted 1, 2, ..., 12) exactly as when the whole file is read at
  once, whatever the values of one chunk.
- **Blocks are aligned with the in-memory aggregation's chunks** (:data:`policy.inputs.counting.CHUNK_ROWS`
  rows), so per-cell cost sums are added in the same order and the cell table is identical, to
  the bit, to :meth:`policy.inputs.cells.CellTable.from_cases` on the whole table (tested).
- **Case ids** are checked for duplicates over the whole file with bounded memory: each id
  becomes a 64-bit key (the value itself for integer ids; a hash of the bytes for text ids),
  the keys are sorted once at the end, and the few keys seen more than once are checked
  exactly in a second pass that reads only the id column. A hash collision between two
  different ids is therefore never reported as a duplicate. CSV ids are compared as written
  (text: ``012`` and ``12`` are two cases).
- Errors name the file's own row numbers. A table read in several blocks stops at the first
  block with a bad value; its message says which rows were checked.
"""

from __future__ import annotations

import csv
import io
from concurrent.futures import ThreadPoolExecutor
from contextlib import nullcontext
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np
import pandas as pd

from policy.inputs.cells import CellTable
from policy.inputs.counting import CHUNK_ROWS, BlockCounts, _case_columns, _check_unique_ids, count_block
from policy.inputs.csv_blocks import ArrowRefused, arrow_csv_blocks
from policy.errors import InputError
from policy.inputs.scenario import Scenario
from policy.inputs.csv_shape import check_csv_shape
from policy.inputs.tables import _csv_header, check_header, first_bad_utf8, parquet_schema, require_columns, rows_from

__all__ = ["BLOCK_ROWS", "stream_cell_table", "id_keys"]

#: rows per block: the in-memory aggregation's chunk, so both add cost sums in the same order
BLOCK_ROWS = CHUNK_ROWS
#: at most this many distinct id lengths are hashed group by group; beyond, pandas hashes them
_MAX_ID_LENGTHS = 64
#: rows per batch read from Parquet (blocks are assembled from them)
READ_BATCH_ROWS = 1 << 18


# ----------------------------------------------------------------------------------------------
# Blocks of a file
# ----------------------------------------------------------------------------------------------
class _Source:
    """A case table file read in blocks of exactly ``block_rows`` rows (the last one shorter)."""

    def __init__(self, path: Path, columns: list[str], what: str, text_columns: list[str], block_rows: int,
                 plain: tuple[str, ...] = (), cost_columns: tuple[str, ...] = ()):
        self.path, self.columns, self.what, self.block_rows = path, columns, what, int(block_rows)
        self.text_columns = text_columns
        self.plain, self.cost_columns = plain, cost_columns
        self.with_pandas = False  # CSV: pyarrow's streaming reader first; pandas where it refuses
        self.kind = path.suffix.lower().lstrip(".")
        self.shape = None
        if path.is_dir():
            raise InputError(f"The {what} {str(path)!r} is a folder, not a file; give the table's file.")
        if not path.is_file():
            raise InputError(f"The {what} {str(path)!r} does not exist.")
        if self.kind == "parquet":
            import pyarrow as pa
            import pyarrow.parquet as pq

            schema = parquet_schema(path, columns, what)
            # text columns arrive as categoricals, except ``plain`` ones (case ids: all distinct)
            self.dictionary = [c for c in columns if c not in plain and (pa.types.is_string(schema.field(c).type)
                               or pa.types.is_large_string(schema.field(c).type))]
            self.file = pq.ParquetFile(path, read_dictionary=self.dictionary, pre_buffer=False)
            self.total = self.file.metadata.num_rows
            self.unit = "rows"
        elif self.kind == "csv":
            try:
                header = pd.read_csv(path, nrows=0, encoding="utf-8")
            except UnicodeDecodeError:
                self._not_utf8()
            except pd.errors.EmptyDataError:
                raise InputError(f"{path.name}: the {what} is empty (no header line).") from None
            check_header(_csv_header(path), path.name, what)
            require_columns(list(header.columns), columns, path.name, what)
            self.shape = check_csv_shape(path, what)
            self.total = path.stat().st_size
            self.unit = "bytes"
        else:
            raise InputError(f"The {what} {path.name!r} must end in .csv or .parquet.")

    def _not_utf8(self):
        offset, line = first_bad_utf8(self.path)
        raise InputError(
            f"{self.path.name}: the file is not UTF-8 text (first bad byte at offset {offset}, line {line}); "
            "save it as UTF-8 and try again."
        ) from None

    def blocks(self, columns: list[str] | None = None) -> Iterator[tuple[pd.DataFrame, int]]:
        """Yield (frame, position) per block; position counts rows (Parquet) or bytes read (CSV)."""
        columns = columns or self.columns
        if self.kind == "parquet":
            yield from self._parquet_blocks(columns)
        else:
            yield from self._csv_blocks(columns)

    def _parquet_blocks(self, columns):
        import pyarrow as pa

        pending: list = []
        held = 0
        done = 0
        try:
            # small batches: a block is cut at an exact row count, and the rest of a batch it cuts
            # keeps that whole batch in memory
            batches = self.file.iter_batches(batch_size=min(self.block_rows, READ_BATCH_ROWS), columns=columns, use_threads=True)
            for batch in batches:
                pending.append(batch)
                held += batch.num_rows
                while held >= self.block_rows:
                    table = pa.Table.from_batches(pending)
                    rest = table.slice(self.block_rows)
                    pending, held = rest.to_batches(), rest.num_rows
                    frame = self._frame(table.slice(0, self.block_rows))
                    del table, rest  # only the pandas block stays alive while it is counted
                    done += self.block_rows
                    yield frame, done
            if held or not done:
                table = pa.Table.from_batches(pending) if pending else self.file.schema_arrow.empty_table().select(columns)
                pending = []
                frame = self._frame(table)
                done += table.num_rows
                del table
                yield frame, done
        except InputError:
            raise
        except (OSError, ValueError, pa.ArrowException) as exc:
            raise InputError(f"{self.path.name}: not a readable Parquet file ({exc}).") from None

    def _frame(self, table) -> pd.DataFrame:
        # contiguous columns first: converting 16 chunks of dictionaries costs 3x more (measured)
        frame = table.combine_chunks().to_pandas(split_blocks=True)
        frame.attrs["file"] = self.path.name
        frame.attrs["format"] = "parquet"
        return frame

    def _csv_blocks(self, columns):
        if not self.with_pandas:
            cells = [c for c in self.text_columns if c in columns and c not in self.plain]
            ids = next((c for c in self.plain if c in columns), None)
            yield from arrow_csv_blocks(self.path, columns, cells, ids, [c for c in self.cost_columns if c in columns],
                                        self.block_rows, self.path.name)
            return
        text = {c: str for c in self.text_columns if c in columns}
        with open(self.path, "rb") as handle:
            try:
                reader = pd.read_csv(handle, usecols=columns, encoding="utf-8", dtype=text,
                                     chunksize=self.block_rows, low_memory=False)
                produced = False
                for frame in reader:
                    produced = True
                    frame.attrs["file"] = self.path.name
                    frame.attrs["format"] = "csv"
                    yield frame, handle.tell()
                if not produced:
                    frame = pd.read_csv(self.path, usecols=columns, encoding="utf-8", dtype=text)
                    frame.attrs["file"] = self.path.name
                    frame.attrs["format"] = "csv"
                    yield frame, self.total
            except UnicodeDecodeError:
                self._not_utf8()
            except pd.errors.ParserError as exc:
                raise InputError(f"{self.path.name}: not a well-formed CSV file ({exc}).") from None


def _prefetched(items: Iterator[Any]) -> Iterator[Any]:
    """Iterate ``items`` with the next one read in a background thread (reading and decoding a
    block release the GIL, so they overlap with counting the previous one)."""
    sentinel = object()
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="policy-read") as pool:
        future = pool.submit(next, items, sentinel)
        while True:
            item = future.result()
            if item is sentinel:
                return
            future = pool.submit(next, items, sentinel)
            yield item


# ----------------------------------------------------------------------------------------------
# Merging blocks by cell
# ----------------------------------------------------------------------------------------------
class _Merged:
    """Counts of all blocks so far, by cell value (memory grows with the cells, not the rows)."""

    def __init__(self, n_columns: int):
        self.values: list[list] = [[] for _ in range(n_columns)]
        self.index: list[dict] = [{} for _ in range(n_columns)]
        self.codes = np.zeros((0, n_columns), dtype=np.int64)
        self.counts: np.ndarray | None = None
        self.cost_sums: dict[str, np.ndarray] = {}
        self.observed_any: np.ndarray | None = None
        self.rows = 0

    def _global_codes(self, block: BlockCounts) -> np.ndarray:
        out = np.empty_like(block.codes)
        for k, uniques in enumerate(block.uniques):
            used = np.unique(block.codes[:, k])
            lookup = np.full(len(uniques), -1, dtype=np.int64)
            index, values = self.index[k], self.values[k]
            for u in used.tolist():
                value = uniques[u]
                code = index.get(value)
                if code is None:
                    code = index[value] = len(values)
                    values.append(value)
                lookup[u] = code
            out[:, k] = lookup[block.codes[:, k]]
        return out

    def add(self, block: BlockCounts) -> None:
        self.rows += block.rows
        self.observed_any = block.observed_any.copy() if self.observed_any is None else self.observed_any | block.observed_any
        if self.counts is None:
            self.counts = np.zeros((0,) + block.counts.shape[1:], dtype=np.int64)
            self.cost_sums = {c: np.zeros(0) for c in block.cost_sums}
        if not block.rows:
            return
        self._combine(self._global_codes(block), block.counts, block.cost_sums)

    def _combine(self, codes: np.ndarray, counts: np.ndarray, cost_sums) -> None:
        """Add cells (codes into ``values``) to the totals; sums are added as old + new, in
        block order, as the in-memory aggregation adds its chunks."""
        both = np.concatenate([self.codes, codes])
        uniq, inverse = np.unique(both, axis=0, return_inverse=True)
        inverse = inverse.reshape(-1)
        old, new = inverse[:len(self.codes)], inverse[len(self.codes):]
        total = np.zeros((len(uniq),) + counts.shape[1:], dtype=np.int64)
        total[old] = self.counts
        np.add.at(total, new, counts)
        sums = {}
        for c, add in cost_sums.items():
            s = np.zeros(len(uniq))
            s[old] = self.cost_sums[c]
            np.add.at(s, new, add)
            sums[c] = s
        self.codes, self.counts, self.cost_sums = uniq, total, sums

    def retype(self, column: int, typed: list) -> None:
        """Replace one column's values by typed ones (CSV text -> what pandas infers); cells
        whose values become equal are merged."""
        new_index: dict = {}
        new_values: list = []
        lookup = np.empty(len(typed), dtype=np.int64)
        for i, value in enumerate(typed):
            code = new_index.get(value)
            if code is None:
                code = new_index[value] = len(new_values)
                new_values.append(value)
            lookup[i] = code
        self.values[column], self.index[column] = new_values, new_index
        if len(new_values) == len(typed):
            self.codes[:, column] = lookup[self.codes[:, column]]
            return
        codes = self.codes.copy()
        codes[:, column] = lookup[codes[:, column]]
        counts, sums = self.counts, self.cost_sums
        self.codes = np.zeros((0, codes.shape[1]), dtype=np.int64)
        self.counts = np.zeros((0,) + counts.shape[1:], dtype=np.int64)
        self.cost_sums = {c: np.zeros(0) for c in sums}
        self._combine(codes, counts, sums)

    def block_counts(self) -> BlockCounts:
        return BlockCounts([list(v) for v in self.values], self.codes, self.counts, self.cost_sums,
                           self.observed_any, self.rows)


def _typed_like_pandas(texts: list[str]) -> list:
    """The values pandas' CSV parser gives a column holding exactly these texts (its type is
    inferred from the set of values, so the distinct texts decide it as the whole column would)."""
    if not texts:
        return []
    buffer = io.StringIO()
    writer = csv.writer(buffer, quoting=csv.QUOTE_ALL, lineterminator="\n")
    writer.writerow(["value"])
    for text in texts:
        writer.writerow([text])
    buffer.seek(0)
    parsed = pd.read_csv(buffer, na_filter=False, low_memory=False)["value"]
    return [v.item() if isinstance(v, np.generic) else v for v in parsed.tolist()]


# ----------------------------------------------------------------------------------------------
# Case ids: 64-bit keys
# ----------------------------------------------------------------------------------------------
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
#: odd multipliers of the successive 64-bit words of an id before the final mix
_WORD = tuple(np.uint64(m) for m in (0xD6E8FEB86659FD93, 0xA0761D6478BD642F, 0xE7037ED1A0B428DB, 0x8EBC6AF09C88C6E3))


def _mix(h: np.ndarray) -> np.ndarray:
    """The splitmix64 finalizer (Steele, Lea and Flood 2014), in place on uint64 arrays."""
    h ^= h >> np.uint64(30)
    h *= _M1
    h ^= h >> np.uint64(27)
    h *= _M2
    h ^= h >> np.uint64(31)
    return h


def _bytes_keys(offsets: np.ndarray, data: np.ndarray, lengths: np.ndarray | None = None) -> np.ndarray | None:
    """Hash of each string's bytes (strings given by Arrow offsets into ``data``), grouped by
    length so every group is one fixed-width matrix read as 64-bit words; None when there are
    too many lengths. ``lengths``: the strings' own byte lengths when ``data`` holds them
    padded (they enter the hash, so padding never makes two ids equal)."""
    widths = np.diff(offsets)
    lengths = widths if lengths is None else lengths
    n = len(widths)
    out = np.empty(n, dtype=np.uint64)
    if n == 0:
        return out
    lo, hi = int(widths.min()), int(widths.max())
    if lo == hi:
        groups = [(lo, None)]
    else:
        present = np.flatnonzero(np.bincount(widths - lo))
        if len(present) > _MAX_ID_LENGTHS:
            return None
        groups = [(int(lo + p), np.flatnonzero(widths == lo + p)) for p in present]
    for width, rows in groups:
        padded_width = max(8, (width + 7) // 8 * 8)
        m = n if rows is None else len(rows)
        padded = np.zeros((m, padded_width), dtype=np.uint8)
        if width:
            if rows is None:
                start = int(offsets[0])
                padded[:, :width] = data[start:start + n * width].reshape(n, width)
            else:
                padded[:, :width] = data[offsets[rows][:, None] + np.arange(width)]
        words = padded.view("<u8")
        h = (lengths if rows is None else lengths[rows]).astype(np.uint64)
        h *= _GOLDEN
        for k in range(words.shape[1]):
            h += words[:, k] * _WORD[k % len(_WORD)]
        _mix(h)
        if rows is None:
            out[:] = h
        else:
            out[rows] = h
    return out


def id_keys(values: Any) -> np.ndarray:
    """A 64-bit key per case id (uint64): equal ids have equal keys.

    Integer ids are their own key (exact); text ids are hashed from their UTF-8 bytes (different
    ids may share a key, rarely: callers re-check equal keys exactly); anything else is hashed
    with ``pandas.util.hash_array``.
    """
    import pyarrow as pa

    try:
        arr = values if isinstance(values, (pa.Array, pa.ChunkedArray)) else pa.array(values, from_pandas=True)
    except (pa.ArrowException, TypeError, ValueError):
        arr = None
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    if arr is not None and arr.null_count == 0:
        if pa.types.is_integer(arr.type):
            return arr.to_numpy().astype(np.int64, copy=False).view(np.uint64)
        if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
            wide = np.int64 if pa.types.is_large_string(arr.type) else np.int32
            offsets = np.frombuffer(arr.buffers()[1], dtype=wide)[arr.offset:arr.offset + len(arr) + 1]
            data_buffer = arr.buffers()[2]
            data = np.frombuffer(data_buffer, dtype=np.uint8) if data_buffer is not None else np.zeros(0, np.uint8)
            offsets = offsets.astype(np.int64)
            lengths = np.diff(offsets)
            if len(lengths) and lengths.min() != lengths.max():
                # pad to one width in pyarrow (fast); non-ASCII text may still vary: grouped below
                import pyarrow.compute as pc

                widest = pc.max(pc.utf8_length(arr)).as_py()
                padded = pc.utf8_rpad(arr, width=widest, padding="\0")
                padded_offsets = np.frombuffer(padded.buffers()[1], dtype=wide)[padded.offset:padded.offset + len(padded) + 1]
                widths = np.diff(padded_offsets)
                if widths.min() == widths.max():
                    return _bytes_keys(padded_offsets.astype(np.int64), np.frombuffer(padded.buffers()[2], dtype=np.uint8), lengths)
            keys = _bytes_keys(offsets, data)
            if keys is not None:
                return keys
    plain = values.to_numpy(zero_copy_only=False) if arr is not None and values is arr else np.asarray(values, dtype=object)
    return pd.util.hash_array(np.asarray(plain, dtype=object))


class _IdCheck:
    """Bounded-memory duplicate check of case ids across blocks (8 bytes per case)."""

    def __init__(self, column: str, total_rows: int | None):
        self.column = column
        self.keys = np.empty(total_rows, dtype=np.uint64) if total_rows else None
        self.parts: list[np.ndarray] = []
        self.filled = 0

    def add(self, keys: np.ndarray) -> None:
        if self.keys is not None and self.filled + len(keys) <= len(self.keys):
            self.keys[self.filled:self.filled + len(keys)] = keys
        else:
            self.parts.append(keys)
        self.filled += len(keys)

    def repeated(self) -> np.ndarray:
        """Keys seen more than once."""
        keys = self.keys[:self.filled] if self.keys is not None else np.zeros(0, dtype=np.uint64)
        if self.parts:
            keys = np.concatenate([keys] + self.parts)
        self.keys, self.parts = None, []
        keys.sort()
        same = keys[1:] == keys[:-1]
        return np.unique(keys[1:][same])

    def check(self, source: _Source, file: str, repeated: np.ndarray) -> None:
        """Read the id column again and compare the ids behind repeated keys exactly."""
        values, rows = [], []
        start = 0
        for frame, _ in source.blocks([self.column]):
            ids = frame[self.column]
            hit = np.flatnonzero(np.isin(id_keys(ids), repeated))
            if len(hit):
                values.append(ids.iloc[hit].astype(object))
                rows.append(start + hit)
            start += len(frame)
        if values:
            _check_unique_ids(pd.concat(values, ignore_index=True), self.column, file, np.concatenate(rows))


# ----------------------------------------------------------------------------------------------
# The streamed cell table
# ----------------------------------------------------------------------------------------------
def stream_cell_table(path: str | Path, scenario: Scenario, what: str | None = None, block_rows: int = BLOCK_ROWS,
                      progress: bool | None = None) -> CellTable:
    """Aggregate a Parquet or CSV case table into cells, reading it in blocks.

    Parameters
    ----------
    path : path
        The case table (``.parquet`` or ``.csv``).
    scenario : Scenario
    what : str, optional
        What the table is, for messages (default: ``"case table (<scenario> [data] case_table)"``).
    block_rows : int
        Rows per block (default :data:`BLOCK_ROWS`; other values give the same counts, and cost
        means that may differ in the last bits).
    progress : bool or None
        Show a progress bar on standard error; None: when standard error is a terminal and the
        table has more than one block.

    Returns
    -------
    CellTable
        Identical to ``CellTable.from_cases`` on the whole table read at once.
    """
    path = Path(path)
    what = what or f"case table ({scenario.file} [data] case_table)"
    columns = _case_columns(scenario)
    cell_columns = list(scenario.cell_columns)
    id_column = scenario.case_id
    text = cell_columns + ([id_column] if id_column else [])
    source = _Source(path, columns, what, text, block_rows, plain=(id_column,) if id_column else (),
                     cost_columns=tuple(scenario.cost_columns))
    try:
        return _count_source(source, scenario, cell_columns, id_column, progress)
    except ArrowRefused:
        # a file pyarrow's reader refuses (a malformed line, text that is not UTF-8, ...) is read
        # again with pandas, whose messages name what is wrong
        source.with_pandas = True
        return _count_source(source, scenario, cell_columns, id_column, progress)


def _count_source(source: _Source, scenario: Scenario, cell_columns: list[str], id_column: str | None,
                  progress: bool | None) -> CellTable:
    """Count every block of ``source`` into one cell table (the body of :func:`stream_cell_table`)."""
    file = source.path.name
    merged = _Merged(len(cell_columns))
    ids = _IdCheck(id_column, source.total if source.kind == "parquet" else None) if id_column else None
    with _progress_bar(progress, source, file) as advance:
        start = 0
        for frame, position in _prefetched(source.blocks()):
            keys = id_keys(frame[id_column]) if id_column else None
            n = len(frame)
            try:
                with rows_from(start, source.shape):
                    block = count_block(frame, scenario, file, whole=False)
            except InputError as exc:
                if start == 0 and n < source.block_rows:
                    raise  # the whole table was this one block: the message is the in-memory one
                raise InputError(f"{exc} (rows {start + 1:,} to {start + n:,} checked; the table is read in blocks of "
                                 f"{source.block_rows:,} rows and stops at the first block with an error)") from None
            if ids is not None:
                ids.add(keys)
            merged.add(block)
            start += n
            if advance is not None:
                advance(position)
    if merged.rows == 0:
        raise InputError(f"{file}: the case table has no rows.")
    if ids is not None:
        repeated = ids.repeated()
        if len(repeated):
            ids.check(source, file, repeated)
    if source.kind == "csv":
        for k in range(len(cell_columns)):
            merged.retype(k, _typed_like_pandas(merged.values[k]))
    return CellTable.from_block_counts(merged.block_counts(), scenario, file)


def _progress_bar(show: bool | None, source: _Source, file: str):
    """A rich progress bar of rows (Parquet) or bytes (CSV) read; yields ``advance(position)``."""
    if show is None:
        from rich.console import Console

        show = Console(stderr=True).is_terminal and source.total > (source.block_rows if source.kind == "parquet"
                                                                     else 64 << 20)
    if not show:
        return nullcontext(None)
    return _Bar(source, file)


class _Bar:
    def __init__(self, source: _Source, file: str):
        self.source, self.file = source, file

    def __enter__(self) -> Callable[[int], None]:
        from rich.console import Console
        from rich.progress import (BarColumn, DownloadColumn, MofNCompleteColumn, Progress, TextColumn,
                                   TimeElapsedColumn, TimeRemainingColumn)

        amount = MofNCompleteColumn() if self.source.unit == "rows" else DownloadColumn()
        self.bar = Progress(TextColumn("{task.description}"), BarColumn(), amount, TextColumn(self.source.unit),
                            TimeElapsedColumn(), TimeRemainingColumn(), console=Console(stderr=True), transient=True)
        self.bar.__enter__()
        task = self.bar.add_task(f"counting cases of {self.file}", total=self.source.total)
        return lambda position: self.bar.update(task, completed=min(position, self.source.total))

    def __exit__(self, *exc) -> None:
        self.bar.__exit__(*exc)
