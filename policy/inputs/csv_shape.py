"""The shape of a CSV file checked before it is read: every line has as many fields as the
header, and no value holds a NUL byte.

pandas, asked for some columns only, ignores fields beyond the header's and fills missing ones
with empty values, so a row shifted by a stray comma would be read as a different case without a
word. This pass finds such lines in the raw bytes, vectorized: a comma or line end counts only
outside double quotes (quote parity is the running count of quote characters, which an escaped
quote ``""`` leaves unchanged), and blank lines are skipped as pandas skips them. It also
records where blank lines fall, so messages can number rows as the file's lines.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from policy.errors import InputError

__all__ = ["CsvShape", "check_csv_shape"]

#: bytes read per step
_BLOCK = 1 << 24


@dataclass(frozen=True)
class CsvShape:
    """What the scan found: fields of the header, data rows, and the blank lines.

    ``blank_after[k]`` is the number of data rows before the k-th blank line after the header.
    """

    fields: int
    rows: int
    blank_after: np.ndarray
    header_line: int = 1

    def line_of_row(self, row: int) -> int:
        """1-based line of the file where 1-based data row ``row`` starts (values holding line ends
        inside quotes are not counted)."""
        return self.header_line + int(row) + int(np.searchsorted(self.blank_after, int(row) - 1, side="right"))


def check_csv_shape(path: str | Path, what: str) -> CsvShape:
    """Scan a CSV file; raise :class:`InputError` naming the first line with a NUL byte or with
    more or fewer fields than the header (and how many such lines there are)."""
    path = Path(path)
    quote, comma, newline, nul, cr = ord('"'), ord(","), ord("\n"), 0, ord("\r")
    inside = False            # inside quotes at the start of the block
    line = 1                  # 1-based line number at the start of the block
    fields_now = 1            # fields of the current (unfinished) line so far
    length_now = 0            # bytes of the current line so far (outside a trailing \r)
    header_fields = None
    line_header = 1
    rows = 0
    blanks: list[int] = []
    bad_first: tuple[int, int] | None = None
    bad_count = 0
    with open(path, "rb") as fh:
        while True:
            block = fh.read(_BLOCK)
            if not block:
                break
            b = np.frombuffer(block, dtype=np.uint8)
            zero = np.flatnonzero(b == nul)
            if len(zero):
                at = int(zero[0])
                raise InputError(f"{path.name}: the {what} holds a NUL byte (a zero byte) on line "
                                 f"{line + int(np.count_nonzero(b[:at] == newline))}; a text value cannot hold one. "
                                 "Check how the file was exported.")
            isq = b == quote
            if inside or isq.any():
                parity = np.bitwise_xor.accumulate(isq.view(np.uint8))
                ends_quoted = bool(parity[-1]) != inside
                before = parity ^ isq.view(np.uint8)  # quotes before each byte, mod 2
                outside = before == (1 if inside else 0)
                ends = np.flatnonzero((b == newline) & outside)
                cpos = np.flatnonzero((b == comma) & outside)
                inside = ends_quoted
            else:
                ends = np.flatnonzero(b == newline)
                cpos = np.flatnonzero(b == comma)
            c_before = np.searchsorted(cpos, ends)  # commas of the block before each line end
            for_lines_fields = np.empty(len(ends), dtype=np.int64)
            lengths = np.empty(len(ends), dtype=np.int64)
            if len(ends):
                for_lines_fields[:] = np.diff(c_before, prepend=0) + 1
                for_lines_fields[0] += fields_now - 1
                starts = np.concatenate([[0], ends[:-1] + 1])
                lengths[:] = ends - starts - (b[np.maximum(ends - 1, 0)] == cr) * (ends > starts)
                lengths[0] += length_now
            for k in range(0, len(ends)) if header_fields is None else ():
                # header: the first non-blank line
                if lengths[k] == 0:
                    continue
                header_fields = int(for_lines_fields[k])
                line_header = line + k
                for_lines_fields = for_lines_fields[k + 1:]
                lengths = lengths[k + 1:]
                first_line = line + k + 1
                break
            else:
                first_line = line
            if header_fields is not None and len(lengths):
                blank = lengths == 0
                nonblank = ~blank
                data_index = rows + np.cumsum(nonblank) - nonblank  # data rows before each line
                blanks.extend(data_index[blank].tolist())
                wrong = nonblank & (for_lines_fields != header_fields)
                if wrong.any():
                    k = int(np.flatnonzero(wrong)[0])
                    if bad_first is None:
                        bad_first = (first_line + k, int(for_lines_fields[k]))
                    bad_count += int(wrong.sum())
                rows += int(nonblank.sum())
            line += len(ends)
            if len(ends):
                last = ends[-1]
                fields_now = len(cpos) - int(c_before[-1]) + 1
                rest = b[last + 1:]
                length_now = len(rest) - (1 if len(rest) and rest[-1] == cr else 0)
            else:
                fields_now += len(cpos)
                length_now += len(b)
    # the last line, if the file does not end with a line end
    if length_now > 0:
        if header_fields is None:
            header_fields = fields_now
        else:
            if fields_now != header_fields:
                if bad_first is None:
                    bad_first = (line, fields_now)
                bad_count += 1
            rows += 1
    if bad_first is not None:
        raise InputError(f"{path.name}: line {bad_first[0]} of the {what} has {bad_first[1]} fields where the header "
                         f"has {header_fields} ({bad_count} such lines); a stray or missing comma shifts every value "
                         "after it. Quote values that hold commas and check the export.")
    return CsvShape(header_fields or 0, rows, np.asarray(blanks, dtype=np.int64), line_header)
