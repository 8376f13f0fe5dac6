"""The report's table of each compared rule's expected cost when unconfoundedness is relaxed."""

from __future__ import annotations

import numpy as np

from policy.presentation.report.formatting import TableView, fmt_num

__all__ = ["ranges_view"]


def ranges_view(comparison) -> TableView | None:
    """Each rule's expected cost range per 1,000 cases at the point estimate, at each Gamma of
    ``comparison_ranges.csv`` from 1.25 up (with the data's own Gamma_low) and under the monotone
    bounds; None when the comparison has no ranges."""
    ranges = getattr(comparison, "ranges", None)
    if ranges is None:
        return None
    frame = ranges[0]
    keys = [k for k in dict.fromkeys(frame["assumption"])
            if k in ("point", "bounds") or frame.loc[frame["assumption"] == k, "gamma"].iloc[0] >= 1.25]
    labels = {"point": "point estimate", "bounds": "monotone bounds"}
    header = tuple(labels.get(k, k.replace("gamma=", "Gamma = ")) for k in keys)
    rows = []
    for name, part in frame.groupby("rule", sort=False):
        by = part.set_index("assumption")
        cells = []
        for k in keys:
            lo, hi = by.loc[k, "cost_per_1000_cases_lower"], by.loc[k, "cost_per_1000_cases_upper"]
            cells.append(fmt_num(lo) if np.isclose(lo, hi) else f"{fmt_num(lo)} to {fmt_num(hi)}")
        rows.append((name,) + tuple(cells))
    return TableView(f"Expected cost per 1,000 cases in {comparison.costs.unit}, if unconfoundedness fails: the range "
                     "over every distribution each assumption allows (outer ranges; regret ranges in "
                     "comparison_regret_ranges.csv)", ("rule",) + header, tuple(rows), (False,) + (True,) * len(keys))
