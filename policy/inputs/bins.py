"""Numeric cell columns binned as the scenario says (``[cells] bins``): values to labelled intervals.

A binned column (age in years, a count of prior cases) is read as numbers and each value is
replaced by the label of its interval before the column is coded, so a cell is an interval, not
each distinct value. Intervals are closed below and open above: with cuts ``c1 < ... < ck`` the
bins are ``(-inf, c1)``, ``[c1, c2)``, ..., ``[ck, inf)``, labelled in that order (which is also
the column's display order).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.errors import InputError

__all__ = ["Bins", "parse_bins", "apply_bins"]


@dataclass(frozen=True)
class Bins:
    """Cut points (increasing) and one label per interval (``len(cuts) + 1``)."""

    cuts: tuple[float, ...]
    labels: tuple[str, ...]

    def labels_of(self, values: np.ndarray) -> np.ndarray:
        """Each number's interval label (object array); missing stays missing (None)."""
        v = np.asarray(values, dtype=np.float64)
        index = np.searchsorted(np.asarray(self.cuts), v, side="right")
        out = np.asarray(self.labels, dtype=object)[np.minimum(index, len(self.labels) - 1)]
        out[np.isnan(v)] = None
        return out


def _number(v: float) -> str:
    return f"{v:g}" if float(v) != int(v) else f"{int(v)}"


def default_labels(cuts: Sequence[float]) -> tuple[str, ...]:
    """'under 25', '25 to under 40', '40 or more' for cuts [25, 40]."""
    c = [_number(x) for x in cuts]
    return tuple([f"under {c[0]}"] + [f"{a} to under {b}" for a, b in zip(c, c[1:])] + [f"{c[-1]} or more"])


def parse_bins(raw: Mapping[str, Any], cell_columns: Sequence[str], order: Mapping[str, Any], file: str) -> dict[str, Bins]:
    """Validate ``[cells] bins``: ``name = { cuts = [...], labels = [...] }`` per cell column."""
    out: dict[str, Bins] = {}
    for name, spec in raw.items():
        where = f"[cells] bins.{name}"
        if name not in cell_columns:
            raise InputError(f"{file}: {where} names {name!r}, which is not a cell column; expected one of: {', '.join(cell_columns)}.")
        if name in order:
            raise InputError(f"{file}: {where} and [cells] order.{name} both set the order of {name!r}; the bins' labels give it, remove the order.")
        if not isinstance(spec, dict) or set(spec) - {"cuts", "labels"} or "cuts" not in spec:
            raise InputError(f"{file}: {where} must be a table with 'cuts' (increasing numbers) and optional 'labels'; got {spec!r}.")
        cuts = spec["cuts"]
        if (not isinstance(cuts, list) or not cuts
                or not all(isinstance(c, (int, float)) and not isinstance(c, bool) and np.isfinite(c) for c in cuts)):
            raise InputError(f"{file}: {where}.cuts must be a non-empty list of finite numbers; got {cuts!r}.")
        if any(b <= a for a, b in zip(cuts, cuts[1:])):
            raise InputError(f"{file}: {where}.cuts must increase strictly; got {cuts!r}.")
        labels = spec.get("labels")
        if labels is None:
            labels = default_labels(cuts)
        elif (not isinstance(labels, list) or len(labels) != len(cuts) + 1
              or not all(isinstance(x, str) and x.strip() for x in labels)):
            raise InputError(f"{file}: {where}.labels must be {len(cuts) + 1} non-empty texts (one per interval, "
                             f"for {len(cuts)} cut points); got {labels!r}.")
        elif len(set(labels)) != len(labels):
            raise InputError(f"{file}: {where}.labels lists {sorted({x for x in labels if labels.count(x) > 1})[0]!r} twice.")
        out[name] = Bins(tuple(float(c) for c in cuts), tuple(labels))
    return out


def apply_bins(frame: pd.DataFrame, bins: Mapping[str, Bins], file: str) -> pd.DataFrame:
    """A copy of ``frame`` with each binned column's numbers replaced by their interval labels.

    Raises InputError naming the file, the column, the first value that is not a number, its row
    in the file (:func:`policy.inputs.tables.row_number`, right for a block of a stream too) and
    how many rows hold one.
    """
    from policy.inputs.tables import row_number

    present = [name for name in bins if name in frame.columns]
    if not present:
        return frame
    out = frame.copy(deep=False)
    for name in present:
        column = frame[name]
        numbers = pd.to_numeric(column, errors="coerce").to_numpy(dtype=np.float64)
        bad = np.isnan(numbers) & column.notna().to_numpy()
        if bad.any():
            rows = np.flatnonzero(bad)
            raise InputError(f"{file}: column {name!r} is binned in [cells] bins, so it must hold numbers; "
                             f"{len(rows):,} rows do not, the first is row {row_number(rows[0])} with {column.iloc[rows[0]]!r}.")
        out[name] = pd.Series(bins[name].labels_of(numbers), index=frame.index, dtype=object)
    return out
