"""Reading input tables (CSV or Parquet) and checking their columns, with messages that name
the file, the column, the bad values, how many rows and the first row.

Rows are counted from 1 after the header line, in the order of the file.
"""

from __future__ import annotations

from contextlib import contextmanager
from contextvars import ContextVar
from pathlib import Path
from typing import Iterable, Iterator, Sequence

import numpy as np
import pandas as pd

from policy.errors import InputError

__all__ = ["check_header", "read_table", "first_bad_utf8", "describe_bad", "binary_states", "require_columns", "rows_from", "row_number"]

#: rows before the block being checked (a table read in blocks numbers its rows from the file's start)
_ROWS_BEFORE: ContextVar[int] = ContextVar("rows_before", default=0)
#: the shape of the CSV file being checked (its blank lines), so rows are numbered as its lines
_SHAPE: ContextVar = ContextVar("csv_shape", default=None)


@contextmanager
def rows_from(rows_before: int, shape=None) -> Iterator[None]:
    """Within this context, messages number rows as if ``rows_before`` rows came first (and,
    given the file's :class:`~policy.inputs.csv_shape.CsvShape`, count its blank lines too)."""
    token = _ROWS_BEFORE.set(int(rows_before))
    token_shape = _SHAPE.set(shape)
    try:
        yield
    finally:
        _ROWS_BEFORE.reset(token)
        _SHAPE.reset(token_shape)


def row_number(position: int) -> int:
    """1-based row number in the file of a 0-based position in the block being checked: row
    N is the file's N-th line after the header, blank lines included."""
    row = int(position) + 1 + _ROWS_BEFORE.get()
    shape = _SHAPE.get()
    return row if shape is None else shape.line_of_row(row) - shape.header_line


def check_header(names: Sequence[str], file: str, what: str) -> None:
    """Refuse a header that names a column twice (pandas would rename the second silently)."""
    names = [str(n) for n in names]
    seen: dict[str, int] = {}
    for i, name in enumerate(names, 1):
        if name in seen:
            raise InputError(f"{file}: the {what} has two columns named {name!r} (columns {seen[name]} and {i}); "
                             "rename one of them.")
        seen[name] = i


def _csv_header(path: Path) -> list[str]:
    """Column names as written on the first non-blank line of a CSV file (UTF-8)."""
    import csv

    try:
        with open(path, newline="", encoding="utf-8") as fh:
            for row in csv.reader(fh):
                if row:
                    return row
    except UnicodeDecodeError:
        _raise_not_utf8(path)
    return []


def first_bad_utf8(path: Path, chunk: int = 1 << 20) -> tuple[int, int]:
    """Byte offset and 1-based line of the first byte sequence that is not UTF-8."""
    line = 1
    offset = 0
    carry = b""
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            data = carry + block
            try:
                data.decode("utf-8")
                ok = len(data)
            except UnicodeDecodeError as exc:
                # an incomplete character at the block's end is not an error yet
                if exc.reason == "unexpected end of data" and block:
                    ok = exc.start
                else:
                    bad = exc.start
                    return offset + bad, line + data[:bad].count(b"\n")
            line += data[:ok].count(b"\n")
            offset += ok
            carry = data[ok:]
            if not block:
                return -1, -1


def read_table(path: Path, columns: Sequence[str] | None, what: str) -> pd.DataFrame:
    """Read a CSV or Parquet table, only the given columns if any.

    Parameters
    ----------
    path : Path
        The file; its suffix (``.csv`` or ``.parquet``) chooses the reader.
    columns : sequence of str or None
        Columns needed. A missing one raises :class:`InputError` listing those present.
    what : str
        What the table is and which scenario key named it, for messages
        (e.g. ``"case table (demo.toml [data] case_table)"``).
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(f"The {what} {str(path)!r} is a folder, not a file; give the table's file.")
    if not path.is_file():
        raise InputError(f"The {what} {str(path)!r} does not exist.")
    suffix = path.suffix.lower()
    if suffix == ".parquet":
        import pyarrow.parquet as pq

        parquet_schema(path, columns, what)
        frame = pq.read_table(path, columns=list(dict.fromkeys(columns)) if columns else None).to_pandas()
    elif suffix == ".csv":
        try:
            header = pd.read_csv(path, nrows=0, encoding="utf-8")
        except UnicodeDecodeError:
            _raise_not_utf8(path)
        except pd.errors.EmptyDataError:
            raise InputError(f"{path.name}: the {what} is empty (no header line).") from None
        check_header(_csv_header(path), path.name, what)
        require_columns(list(header.columns), columns, path.name, what)
        from policy.inputs.csv_shape import check_csv_shape

        check_csv_shape(path, what)
        try:
            frame = pd.read_csv(
                path,
                usecols=list(dict.fromkeys(columns)) if columns else None,
                encoding="utf-8",
                low_memory=False,
            )
        except UnicodeDecodeError:
            _raise_not_utf8(path)
        except pd.errors.ParserError as exc:
            raise InputError(f"{path.name}: not a well-formed CSV file ({exc}).") from None
    else:
        raise InputError(f"The {what} {path.name!r} must end in .csv or .parquet.")
    frame.attrs["file"] = path.name
    frame.attrs["format"] = suffix.lstrip(".")
    return frame


def _raise_not_utf8(path: Path) -> None:
    offset, line = first_bad_utf8(path)
    raise InputError(
        f"{path.name}: the file is not UTF-8 text (first bad byte at offset {offset}, line {line}); "
        "save it as UTF-8 and try again."
    ) from None


def require_columns(present: Iterable[str], needed: Sequence[str] | None, file: str, what: str) -> None:
    """Raise if any needed column is absent, naming it and the columns present."""
    present = list(present)
    for col in needed or ():
        if col not in present:
            shown = ", ".join(present[:30]) + (", ..." if len(present) > 30 else "")
            raise InputError(f"{file}: column {col!r} ({what}) is missing; the table has: {shown}.")


def describe_bad(values: pd.Series | np.ndarray, bad: np.ndarray, limit: int = 5) -> tuple[str, int, int]:
    """Text of the distinct bad values, the number of bad rows and the first bad row (1-based)."""
    rows = np.flatnonzero(bad)
    vals = pd.unique(pd.Series(np.asarray(values)[rows[:10_000]], dtype=object))
    shown = sorted((repr(v.item() if isinstance(v, np.generic) else v) for v in vals), key=str)
    text = "{" + ", ".join(shown[:limit]) + (", ..." if len(shown) > limit else "") + "}"
    return text, len(rows), row_number(rows[0])


def binary_states(series: pd.Series, column: str, file: str, allow_missing: bool, typed: bool = False) -> np.ndarray:
    """Code a 0/1 column as int8 states: 0 = missing, 1 = zero, 2 = one.

    Accepts integer, boolean, float (NaN = missing) and, unless ``typed`` (a file format that
    stores column types, such as Parquet), text columns ("0", "1", "").
    Raises :class:`InputError` naming the bad values, their row count and the first row.
    """
    expected = "0/1 or empty" if allow_missing else "0 or 1"
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype) and not isinstance(dtype, pd.CategoricalDtype):
        if series.hasnans:
            missing = series.isna().to_numpy()
            states = np.where(missing, 0, series.fillna(False).to_numpy(dtype=bool).astype(np.int8) + 1).astype(np.int8)
        else:
            states = series.to_numpy(dtype=bool).astype(np.int8) + 1
            missing = None
    elif pd.api.types.is_integer_dtype(dtype) or pd.api.types.is_float_dtype(dtype):
        arr = series.to_numpy(dtype=np.float64, na_value=np.nan) if series.hasnans or pd.api.types.is_float_dtype(dtype) else series.to_numpy()
        states = _numeric_states(arr)
        if states is not None:  # every value 0, 1 or missing (the usual case): no masks needed
            if not allow_missing and arr.dtype.kind == "f":
                missing = states == 0
            else:
                missing = None
        elif arr.dtype.kind == "f":
            missing = np.isnan(arr)
            bad = ~missing & (arr != 0) & (arr != 1)
        else:
            missing = None
            bad = (arr != 0) & (arr != 1)
        if states is None:
            text, n, first = describe_bad(arr, bad)
            raise InputError(f"{file}: column {column!r} must be {expected}; got {text} in {n} rows (first: row {first}).")
    else:
        if typed:
            kind = "text" if (isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(dtype)
                              or dtype == object) else f"values of type {dtype}"
            raise InputError(f"{file}: column {column!r} holds {kind}; expected integer or boolean 0/1 (null for missing) "
                             "in this Parquet file: store the column as numbers.")
        text_values = series.astype("string").str.strip()
        missing = text_values.isna() | (text_values == "")
        zero = text_values == "0"
        one = text_values == "1"
        bad = (~(missing | zero | one)).to_numpy(dtype=bool)
        if bad.any():
            text, n, first = describe_bad(series.to_numpy(dtype=object), bad)
            raise InputError(f"{file}: column {column!r} must be {expected}; got {text} in {n} rows (first: row {first}).")
        missing = missing.to_numpy(dtype=bool)
        states = np.where(missing, 0, np.where(one.to_numpy(dtype=bool), 2, 1)).astype(np.int8)
    if not allow_missing and missing is not None and missing.any():
        rows = np.flatnonzero(missing)
        raise InputError(f"{file}: column {column!r} must be {expected} in every row; {len(rows)} rows are empty (first: row {row_number(rows[0])}).")
    return states


#: rows per step of :func:`_numeric_states` (its temporaries stay in the processor's cache)
_STEP = 1 << 14


def _numeric_states(arr: np.ndarray) -> np.ndarray | None:
    """States (0 missing, 1 zero, 2 one) of a numeric 0/1 array (NaN = missing), or None if it
    holds any other value. Done in cache-sized steps: the column is read once."""
    out = np.empty(len(arr), dtype=np.int8)
    if arr.dtype.kind == "f":
        for start in range(0, len(arr), _STEP):
            a = arr[start:start + _STEP]
            o = out[start:start + _STEP]
            one = a == 1
            np.add(a == 0, one, out=o, casting="unsafe")
            o += one
            if not (o.astype(bool) | np.isnan(a)).all():
                return None
        return out
    unsigned = arr.view(np.dtype(f"u{arr.dtype.itemsize}")) if arr.dtype.kind == "i" else arr
    for start in range(0, len(arr), _STEP):
        a = unsigned[start:start + _STEP]
        if (a > 1).any():  # negative numbers are large as unsigned
            return None
        np.add(a, 1, out=out[start:start + _STEP], casting="unsafe")
    return out


def parquet_schema(path: Path, columns: Sequence[str], what: str):
    """A Parquet file's schema, its header checked and the required columns present."""
    import pyarrow.parquet as pq

    try:
        schema = pq.read_schema(path)
    except Exception as exc:  # pyarrow raises several types for a damaged file
        raise InputError(f"{path.name}: not a readable Parquet file ({exc}).") from None
    check_header(schema.names, path.name, what)
    require_columns(schema.names, columns, path.name, what)
    return schema
