"""Every sweep figure as a text table, for screen readers and for print.

The one-ratio sweep's figures are exact step and piecewise-linear functions, so a table listing
their pieces and knots says all that is drawn:

* the share figure: each piece of the optimal rule (ratio and cost from-to) with the share of cases
  at every decision level, and the bootstrap band of the lenient share over the piece (its lowest
  lower and highest upper end there); then, per assumption, the pieces on which the lenient level
  stays optimal whatever the confounding, with their shares;
* the regret figure: every compared rule's regret at each knot of any regret curve (between two
  columns each curve is a straight line) and at the scenario's ratio;
* the lenient map: the left panel's share on a coarse grid of the two ratios (the full grid is in
  ``map_grid.csv``); its right panel is already said in words by the table of shares at the
  scenario's ratios under each assumption.
"""

from __future__ import annotations

import numpy as np

from policy.presentation.report.formatting import TableView, fmt_num, fmt_pct

#: points per axis of the lenient map's text grid
MAP_POINTS = 6


def _ratio(v: float) -> str:
    return fmt_num(v, 3)


def _merged(edges: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Adjacent pieces with equal values joined (a knot where nothing drawn changes is no row)."""
    keep = np.ones(len(values), dtype=bool)
    keep[1:] = np.any(values[1:] != values[:-1], axis=tuple(range(1, values.ndim)))
    starts = np.flatnonzero(keep)
    return np.append(edges[starts], edges[-1]), values[starts]


def shares_table(res, unit: str) -> TableView:
    """The share figure of a one-ratio sweep as a table, piece by piece (exact)."""
    s = res.sweep
    axis = s.axis
    edges, values = _merged(*s.shares.pieces(s.lo, s.hi))
    shares = values / s.total
    band = res.band_figure()
    rows = []
    for i in range(len(shares)):
        a, b = edges[i], edges[i + 1]
        row = (f"{_ratio(a)} to {_ratio(b)}", f"{fmt_num(a * axis.reference_cost)} to {fmt_num(b * axis.reference_cost)}")
        row += tuple(fmt_pct(v) for v in shares[i])
        if band is not None:
            x = np.asarray(band["x"], dtype=float)
            inside = (x >= a) & (x <= b)
            if not inside.any():
                inside = np.abs(x - 0.5 * (a + b)) == np.abs(x - 0.5 * (a + b)).min()
            lo, hi = np.asarray(band["low"], dtype=float)[inside], np.asarray(band["high"], dtype=float)[inside]
            row += (f"{fmt_pct(np.nanmin(lo))} to {fmt_pct(np.nanmax(hi))}" if np.isfinite(lo).any() else "\u2013",)
        rows.append(row)
    columns = ("ratio", f"cost in {unit}") + tuple(f"share: {lab}" for lab in s.level_labels)
    if band is not None:
        columns += (f"{band['label']} over the piece",)
    return TableView(f"The share figure as a table: the optimal rule's share of cases at each level, piece by piece, "
                     f"as the {axis.outcome_label} cost varies (exact; sweep_{axis.outcome}_shares.csv)",
                     columns, tuple(rows), (False, False) + (True,) * (len(columns) - 2), row_header=2)


def robust_table(res) -> TableView | None:
    """The share figure's lines under each assumption: on which ratios the lenient level stays
    optimal whatever the confounding, and for what share of cases."""
    s = res.sweep
    if len(s.robust) < 2:
        return None
    rows = []
    for info, f in zip(s.robust, s.lenient_shares):
        edges, values = _merged(*f.pieces(s.lo, s.hi))
        share = values[:, 0] / s.total
        parts = [f"{_ratio(edges[i])} to {_ratio(edges[i + 1])}: {fmt_pct(share[i])}" for i in range(len(share))]
        rows.append((info.label, "; ".join(parts)))
    return TableView(f"The figure's lines as a table: share of cases for which {s.level_labels[0]} stays optimal "
                     f"whatever the confounding, under each assumption, by ratio (exact; "
                     f"sweep_{s.axis.outcome}_lenient_shares.csv)",
                     ("assumption", "ratio from-to: share of cases"), tuple(rows), (False, False))


def regret_table(res, unit: str) -> TableView:
    """The regret figure as a table: each compared rule's exact regret at every knot and at the
    scenario's ratio; each curve is straight between two rows."""
    s = res.sweep
    axis = s.axis
    knots = np.unique(np.concatenate([np.asarray(f.x, dtype=float) for f in s.regret.values()]
                                     + [[s.lo, s.hi, axis.scenario_ratio]]))
    knots = knots[(knots >= s.lo) & (knots <= s.hi)]
    head = tuple(f"ratio {_ratio(r)}" + (" (the scenario's)" if np.isclose(r, axis.scenario_ratio, rtol=1e-12, atol=0.0) else "")
                 + f", cost {fmt_num(r * axis.reference_cost)}" for r in knots)
    rows = tuple((name,) + tuple(fmt_num(1000.0 * float(v)) for v in f(knots)) for name, f in s.regret.items())
    return TableView(f"The regret figure as a table: each rule's regret per 1,000 cases in {unit} as the "
                     f"{axis.outcome_label} cost varies, at every knot of the curves and at the scenario's ratio "
                     f"(exact; each curve is straight between two columns; sweep_{axis.outcome}_regret.csv)",
                     ("rule",) + head, rows, (False,) + (True,) * len(head))


def map_table(res, points: int = MAP_POINTS) -> TableView:
    """The lenient map's left panel as a coarse grid: the share of cases for which the lenient
    level is optimal (point estimate), the second ratio down (highest first, as drawn), the first
    across."""
    m = res.map
    ax = m.axes
    x, y = m.grid_axes(points)
    grid = m.grid(points, 0, x, y)
    head = tuple(f"{_ratio(v)} ({fmt_num(v * ax[0].reference_cost)})" for v in x)
    rows = tuple((f"{_ratio(v)} ({fmt_num(v * ax[1].reference_cost)})",) + tuple(fmt_pct(g) for g in grid[i])
                 for i, v in reversed(list(enumerate(y))))
    return TableView(f"The map's left panel as a table: share of cases for which {m.level_labels[0]} is optimal "
                     f"(point estimate), {ax[1].outcome_label} ratio down and {ax[0].outcome_label} ratio across "
                     f"(cost in brackets; a finer grid under every assumption in map_grid.csv)",
                     (f"{ax[1].outcome_label} \\ {ax[0].outcome_label}",) + head, rows, (False,) + (True,) * len(head))
