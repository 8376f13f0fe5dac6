"""The cost library: cost components with value, unit, price year, source and provenance flag
(``policy/data/cost_components.csv``), the price-year factors at hand, and the arithmetic that
builds a cost from components. The numbers are illustrative defaults to replace."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from policy.errors import InputError

DATA = Path(__file__).resolve().parents[1] / "data"
#: provenance flags (docs/reference-values.md)
FLAGS = ("seen", "secondary", "memory", "assumption")
COLUMNS = ("key", "kind", "component", "value", "unit", "year", "source", "provenance", "note")
WARNING = ("The cost library's numbers are illustrative defaults for an invented county, not recommendations: "
           "replace each with your jurisdiction's own figure and source.")

__all__ = ["cost_components", "price_factor", "component_value", "FLAGS", "WARNING"]


def cost_components(path: str | Path | None = None) -> pd.DataFrame:
    """The cost components, checked: one row per ``key`` with ``kind``, ``component``, ``value``,
    ``unit``, ``year`` (price year; empty for an assumption without one), ``source``,
    ``provenance`` (one of :data:`FLAGS`) and ``note``.

    Parameters
    ----------
    path : path, optional
        A library of the same shape (default: the package's ``cost_components.csv``).
    """
    path = Path(path) if path is not None else DATA / "cost_components.csv"
    frame = pd.read_csv(path, dtype={"key": str, "source": str, "provenance": str}, keep_default_na=False)
    missing = [c for c in COLUMNS if c not in frame.columns]
    if missing:
        raise InputError(f"{path}: column {missing[0]!r} is missing; expected the columns {', '.join(COLUMNS)}.")
    bad = ~frame["provenance"].isin(FLAGS)
    if bad.any():
        row = frame[bad].iloc[0]
        raise InputError(f"{path}: component {row['key']!r} has provenance {row['provenance']!r}; expected one of "
                         f"{', '.join(FLAGS)}.")
    unsourced = (frame["provenance"] != "assumption") & (frame["source"].str.strip().isin(["", "no source at hand"]))
    if unsourced.any():
        raise InputError(f"{path}: component {frame[unsourced].iloc[0]['key']!r} names no source; flag it "
                         "'assumption' or give its source.")
    values = pd.to_numeric(frame["value"], errors="coerce")
    if values.isna().any() or (values < 0).any():
        row = frame[values.isna() | (values < 0)].iloc[0]
        raise InputError(f"{path}: component {row['key']!r} has value {row['value']!r}; expected a number >= 0.")
    if frame["key"].duplicated().any():
        raise InputError(f"{path}: component {frame['key'][frame['key'].duplicated()].iloc[0]!r} appears twice.")
    frame["value"] = values.astype(np.float64)
    frame["year"] = pd.to_numeric(frame["year"].replace("", np.nan), errors="coerce").astype("Int64")
    return frame


def price_factor(from_year: int, to_year: int, path: str | Path | None = None) -> float:
    """The price-index factor from one year's prices to another's, from ``price_index.csv``;
    1 for the same year. A pair with no stated factor is an error (no guessing)."""
    if from_year == to_year:
        return 1.0
    path = Path(path) if path is not None else DATA / "price_index.csv"
    table = pd.read_csv(path)
    hit = table[(table["from_year"] == from_year) & (table["to_year"] == to_year)]
    if hit.empty:
        pairs = ", ".join(f"{a}->{b}" for a, b in zip(table["from_year"], table["to_year"]))
        raise InputError(f"{path}: no price-index factor from {from_year} to {to_year} is at hand (have: {pairs}); "
                         "give the value in the target year's prices yourself.")
    return float(hit["factor"].iloc[0])


def component_value(key: str, to_year: int | None = None, library: pd.DataFrame | None = None) -> float:
    """One component's value, in ``to_year``'s prices when given (components without a price
    year are taken as they are)."""
    lib = cost_components() if library is None else library
    rows = lib[lib["key"] == key]
    if rows.empty:
        raise InputError(f"cost component {key!r} is not in the library; expected one of: {', '.join(lib['key'])}.")
    row = rows.iloc[0]
    if to_year is None or pd.isna(row["year"]):
        return float(row["value"])
    return float(row["value"]) * price_factor(int(row["year"]), int(to_year))
