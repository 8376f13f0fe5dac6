"""CSV case tables read with pyarrow's streaming CSV reader, in blocks typed as pandas types them.

The job: yield a CSV case table in blocks of exactly ``block_rows`` rows as pandas frames that
are equal, column by column, to what ``pandas.read_csv(chunksize=block_rows)`` gives the counting
code (:func:`policy.inputs.counting.count_block`), without making a Python string per row:

- **Cell columns** and the other few-valued columns (decision, recommendation, arm, outcomes)
  are read dictionary-encoded, so a block reaches pandas as integer codes plus its distinct
  texts. Cell columns become categoricals of text (typed from all their values at the end, as
  before); the others are typed from the block's distinct texts by pandas' own parser (its
  type for a column depends on the set of texts, not on how often each occurs) and expanded
  by their codes.
- **Cost columns** are read as text and converted with Arrow's cast (integers when every
  value is one, as pandas does; else floats); text that is not a number leaves the block's
  column as text, so the message about it is the one pandas' reading gave.
- **Case ids** stay Arrow strings (pandas' Arrow-backed string type): the id check hashes them
  from their bytes and never needs Python strings.
- Missing values are the texts pandas reads as missing (``pandas._libs.parsers.STR_NA_VALUES``:
  empty, ``NA``, ``null``, ...), quoted or not.

Anything the reader refuses (a malformed line, text that is not UTF-8, ...) raises
:class:`ArrowRefused`; the caller then reads the file with pandas from the start, whose
messages are the tool's messages for such files.
"""

from __future__ import annotations

import io
from typing import Iterator, Sequence

import numpy as np
import pandas as pd

__all__ = ["ArrowRefused", "arrow_csv_blocks", "PANDAS_NA_TEXTS"]

#: bytes per block of the streaming reader (several per block of rows)
READ_BLOCK_BYTES = 8 << 20


def _pandas_na_texts() -> list[str]:
    try:
        from pandas._libs.parsers import STR_NA_VALUES

        return sorted(STR_NA_VALUES)
    except ImportError:  # pragma: no cover - the list of pandas 2.x, recalled from its documentation
        return ["", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND", "1.#QNAN", "<NA>",
                "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null"]


#: texts read as missing, as pandas' CSV reader does by default
PANDAS_NA_TEXTS = _pandas_na_texts()


class ArrowRefused(Exception):
    """pyarrow's reader could not read the file as the fast path needs; read it with pandas."""


def _typed_texts(texts: list[str], with_missing: bool) -> np.ndarray:
    """What pandas' CSV parser makes of a column holding exactly these texts (and a missing
    value, if ``with_missing``): an array of the same length (plus one for the missing value)."""
    buffer = io.StringIO()
    buffer.write("value\n")
    for text in texts:
        buffer.write('"' + text.replace('"', '""') + '"\n')
    if with_missing:
        buffer.write('""\n')
    buffer.seek(0)
    return pd.read_csv(buffer, low_memory=False)["value"].to_numpy()


def _typed_column(arr) -> pd.Series:
    """A dictionary-encoded Arrow column as the pandas column pandas' CSV reader would give."""
    import pyarrow as pa

    indices = arr.indices.to_numpy(zero_copy_only=False) if arr.null_count == 0 else \
        arr.indices.fill_null(-1).to_numpy(zero_copy_only=False)
    indices = indices.astype(np.int64, copy=False)
    dictionary = arr.dictionary
    if len(indices) == 0:
        return pd.Series(_typed_texts([], False)[:0])
    counts = np.bincount(indices[indices >= 0], minlength=len(dictionary)) if arr.null_count else \
        np.bincount(indices, minlength=len(dictionary))
    present = np.flatnonzero(counts)
    texts = pa.array(dictionary).take(pa.array(present)).to_pylist()
    has_missing = arr.null_count > 0
    typed = _typed_texts(texts, has_missing)
    lookup = np.full(len(dictionary) + 1, -1, dtype=np.int64)  # position -1: the missing value
    lookup[present] = np.arange(len(present))
    if isinstance(typed, np.ndarray) and typed.dtype.kind in "biuf":
        if has_missing:
            lookup[-1] = len(present)
        return pd.Series(typed[lookup[indices]])
    # text stays text: as a categorical of the same values (missing: no category), which the
    # counting code reads by its codes instead of hashing a Python string per row
    categories = pd.Index(list(typed[:len(present)]), dtype=object)
    return pd.Series(pd.Categorical.from_codes(lookup[indices].astype(np.int32), categories=categories))


def _cost_column(arr) -> pd.Series:
    """A text cost column as pandas types it: integers, floats, or (any non-number) text."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if arr.null_count == 0:
        try:
            return pd.Series(pc.cast(arr, pa.int64()).to_numpy())
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            pass
    try:
        return pd.Series(pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return pd.Series(arr.to_pandas(), dtype=object)


def arrow_csv_blocks(path, columns: Sequence[str], cell_columns: Sequence[str], id_column: str | None,
                     cost_columns: Sequence[str], block_rows: int, file: str) -> Iterator[tuple[pd.DataFrame, int]]:
    """Yield (frame, bytes read) per block of exactly ``block_rows`` rows (the last shorter).

    Raises
    ------
    ArrowRefused
        The reader could not read the file (the caller reads it with pandas instead).
    """
    import pyarrow as pa
    import pyarrow.csv as pcsv

    text = pa.string()
    coded = pa.dictionary(pa.int32(), pa.string())
    types = {c: (text if c == id_column or c in cost_columns else coded) for c in columns}
    convert = pcsv.ConvertOptions(include_columns=list(columns), column_types=types, null_values=PANDAS_NA_TEXTS,
                                  strings_can_be_null=True, quoted_strings_can_be_null=True)
    stream = pa.OSFile(str(path), "rb")
    try:
        try:
            reader = pcsv.open_csv(stream, read_options=pcsv.ReadOptions(block_size=READ_BLOCK_BYTES, use_threads=True),
                                   convert_options=convert)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError, StopIteration) as exc:
            raise ArrowRefused(str(exc)) from None
        pending: list = []
        held = done = 0
        cells = set(cell_columns)

        def frame_of(table) -> pd.DataFrame:
            table = table.unify_dictionaries().combine_chunks()
            out = {}
            for name in columns:
                arr = table.column(name).chunk(0) if table.column(name).num_chunks else pa.array([], type=types[name])
                if name in cells:
                    out[name] = pd.Series(pd.Categorical.from_codes(
                        arr.indices.fill_null(-1).to_numpy(zero_copy_only=False).astype(np.int32, copy=False)
                        if len(arr) else np.zeros(0, dtype=np.int32),
                        categories=pd.Index(arr.dictionary.to_pylist(), dtype=object)))
                elif name == id_column:
                    out[name] = pd.Series(arr.to_pandas(types_mapper=pd.ArrowDtype)) if arr.null_count == 0 else \
                        pd.Series(arr.to_pandas(), dtype=object)
                elif name in cost_columns:
                    out[name] = _cost_column(arr)
                else:
                    out[name] = _typed_column(arr)
            frame = pd.DataFrame(out, copy=False)
            frame.attrs["file"] = file
            frame.attrs["format"] = "csv"
            return frame

        while True:
            try:
                batch = reader.read_next_batch()
            except StopIteration:
                break
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
                raise ArrowRefused(str(exc)) from None
            pending.append(batch)
            held += batch.num_rows
            while held >= block_rows:
                table = pa.Table.from_batches(pending)
                rest = table.slice(block_rows)
                pending, held = rest.to_batches(), rest.num_rows
                frame = frame_of(table.slice(0, block_rows))
                del table, rest
                done += block_rows
                yield frame, stream.tell()
        if held or not done:
            table = pa.Table.from_batches(pending, schema=reader.schema)
            pending = []
            yield frame_of(table), stream.tell()
    finally:
        stream.close()
