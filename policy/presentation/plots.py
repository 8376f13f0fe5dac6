"""Figures of sweeps and maps: presentation only, every number comes from the result objects.

One visual style for the tool: a light frame (left and bottom rules only), a faint horizontal
grid, a sans-serif face at print sizes, and colours from the Okabe-Ito palette, which stays
distinguishable with the common forms of colour-vision deficiency (Okabe and Ito, 2008,
"Color Universal Design"); every line also differs in dash pattern, so the figures read in
grey print. Sequential fills use matplotlib's ``cividis`` map, designed for readers with
colour-vision deficiency (Nunez, Anderton and Renslow, 2018, PLOS ONE). Each figure carries a
footnote with the assumptions it rests on (:mod:`policy.cautions`) and the scenario's own
labels and cost unit. Figures are built on :class:`matplotlib.figure.Figure` directly (no
pyplot state), and written as PNG and SVG through :func:`figure_files`, which plugs into the
all-or-nothing writer :func:`policy.outputs.write_outputs`.
"""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Any, Callable, Sequence

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import PercentFormatter

from policy.assessment.sweep import LenientMap, OneRatioSweep, SweepResult, assumption_lines

__all__ = ["STYLE", "level_colours", "assumption_colours", "RULE_COLOURS", "share_figure", "regret_figure", "price_figure", "map_figure", "figure_files",
           "save_figure", "sweep_files", "FORMATS"]

FORMATS = ("png", "svg")

#: rcParams of the tool's figures
STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 8.5,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": "#4d4d4d",
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "axes.grid.axis": "y",
    "grid.color": "#dcdcdc",
    "grid.linewidth": 0.6,
    "xtick.color": "#4d4d4d",
    "ytick.color": "#4d4d4d",
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "legend.frameon": False,
    "legend.fontsize": 7.5,
    "lines.linewidth": 1.6,
    "savefig.dpi": 200,
    "svg.hashsalt": "policy-release-rules",
    "svg.fonttype": "none",
}

#: Okabe-Ito colours, ordered from the lenient end (bluish green) to the harsh end (vermillion)
OKABE_ITO = {
    "bluish green": "#009E73",
    "sky blue": "#56B4E9",
    "blue": "#0072B2",
    "orange": "#E69F00",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
    "yellow": "#F0E442",
    "black": "#000000",
}
DASHES = ["solid", (0, (5, 2)), (0, (1.2, 1.6)), (0, (6, 2, 1.2, 2)), (0, (3, 1.5, 1, 1.5, 1, 1.5)), (0, (8, 3))]
#: characters per inch of figure width in the footnote (its wrapping width)
FOOTNOTE_CHARS_PER_INCH = 17.5


def level_colours(n_levels: int) -> list[str]:
    """Colours of decision levels 0..n-1, lenient (bluish green) to harsh (vermillion)."""
    if n_levels == 2:
        names = ["bluish green", "vermillion"]
    elif n_levels == 3:
        names = ["bluish green", "blue", "vermillion"]
    else:
        names = ["bluish green", "sky blue", "blue", "orange", "vermillion", "reddish purple", "yellow", "black"]
    if n_levels > len(names):
        raise ValueError(f"the figures can tell apart at most {len(names)} decision levels; got {n_levels}.")
    return [OKABE_ITO[n] for n in names[:n_levels]]


#: compared rules get a colour family of their own, apart from the decision levels' (regret figures)
RULE_COLOURS = ["#CC79A7", "#1a1a1a", "#E69F00", "#56B4E9", "#7A3E9D", "#8C6D31", "#999999"]
#: robust assumptions are greys, darkest for the narrowest, apart from levels' and rules' colours
RULE_MARKERS = ["o", "s", "^", "D", "v", "P", "X"]


def assumption_colours(n: int) -> list[str]:
    """Greys for n robust assumptions, dark (narrow) to light (wide): a family of their own."""
    return [mpl.colors.to_hex((v, v, v)) for v in np.linspace(0.15, 0.62, max(n, 1))]


def _robust_style(k: int, n: int, colour: str | None = None) -> dict:
    """Line style of the k-th of n robust assumptions (1..n-1; 0 is the point estimate): a grey,
    lighter and with another dash pattern for each wider assumption (``colour`` is not used: the
    assumptions have their own colour family, apart from the decision levels')."""
    return {"color": assumption_colours(n)[k], "linestyle": DASHES[min(k, len(DASHES) - 1)]}


def _note_height(lines: Sequence[str], chars: int) -> float:
    return 0.15 * sum(len(textwrap.wrap(line, chars)) for line in lines) + 0.05


def _footnote(ax_note, lines: Sequence[str], chars: int) -> None:
    text = "\n".join(textwrap.fill(line, chars, subsequent_indent="   ") for line in lines)
    ax_note.axis("off")
    ax_note.text(0.0, 1.0, text, ha="left", va="top", fontsize=6.8, color="#333333", transform=ax_note.transAxes,
                 linespacing=1.35)


def _frame(width: float, height: float, note_lines: Sequence[str], legend_rows: int, ncols: int = 1):
    """A figure with ``ncols`` plotting panels, a legend row and a footnote, stacked."""
    legend_h = 0.17 * legend_rows + 0.1
    chars = int(FOOTNOTE_CHARS_PER_INCH * width)
    note_h = _note_height(note_lines, chars)
    with mpl.rc_context(STYLE):
        fig = Figure(figsize=(width, height + legend_h + note_h), layout="constrained")
        gs = fig.add_gridspec(3, ncols, height_ratios=[height, legend_h, note_h])
        axes = [fig.add_subplot(gs[0, c]) for c in range(ncols)]
        legend = fig.add_subplot(gs[1, :])
        legend.axis("off")
        note = fig.add_subplot(gs[2, :])
    _footnote(note, note_lines, chars)
    return fig, axes, legend


def _legend(legend_ax, handles, labels, ncol: int = 2, title: str | None = None, x: float = 0.0):
    """A legend in the legend row, anchored at fraction ``x`` of its width (several may share a row)."""
    old = legend_ax.get_legend()
    leg = legend_ax.legend(handles, labels, loc="upper left", bbox_to_anchor=(x, 1.0), ncol=ncol, title=title,
                           title_fontsize=7.5, alignment="left", borderaxespad=0.0)
    if old is not None:
        legend_ax.add_artist(old)
    return leg


def _ratio_axis(ax, sweep_axis, scale: str, lo: float, hi: float, which: str = "x") -> None:
    c = sweep_axis.reference_cost
    if which == "x":
        ax.set_xscale(scale)
        ax.set_xlim(lo, hi)
        ax.set_xlabel(sweep_axis.title)
        top = ax.secondary_xaxis("top", functions=(lambda r: r * c, lambda v: v / c))
        top.set_xlabel(sweep_axis.cost_title, fontsize=7.5, color="#4d4d4d")
        top.tick_params(labelsize=7, colors="#4d4d4d")
        if scale == "linear":
            top.xaxis.set_major_locator(mpl.ticker.MaxNLocator(5))
            top.xaxis.set_major_formatter(mpl.ticker.FuncFormatter(lambda v, _: f"{v:,.0f}"))
    else:
        ax.set_yscale(scale)
        ax.set_ylim(lo, hi)
        ax.set_ylabel(sweep_axis.title)


def _mark_scenario(ax, value: float, lo: float, hi: float) -> None:
    if lo <= value <= hi:
        ax.axvline(value, color="#7f7f7f", linewidth=0.8, linestyle=(0, (2, 2)), zorder=0)
        ax.annotate("scenario's cost", xy=(value, 0.985), xycoords=("data", "axes fraction"), xytext=(-2, 0),
                    textcoords="offset points", fontsize=6.5, color="#555555", va="top", ha="right", rotation=90)


def _steps(edges: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates tracing a step function exactly: each piece's value across [edge_i, edge_i+1]."""
    x = np.repeat(edges, 2)[1:-1]
    y = np.repeat(values, 2)
    return x, y


def share_figure(sweep: OneRatioSweep, bands: dict | None = None, constrained=None) -> Figure:
    """Share of cases at each optimal level along the ratio, with robust lenient shares.

    Parameters
    ----------
    sweep : OneRatioSweep
    bands : dict, optional
        ``{"x": (n,), "low": (n,), "high": (n,), "label": str, "note": str}``: an interval band
        around the lenient share (from the bootstrap), drawn when given; the note joins the footnote.
    constrained : ConstrainedSweep, optional
        Adds the lenient share of the constrained optimum at its grid points (declared bounds).
    """
    robust = sweep.robust
    lines = assumption_lines("robust_sweep" if len(robust) > 1 else "sweep", robust)
    if bands is not None and bands.get("note"):
        lines.insert(1, bands["note"])
    if constrained is not None:
        lines.insert(1, f"Markers: {sweep.level_labels[0]} under the constrained optimum ("
                        + "; ".join(spec.describe() for spec in constrained.specs) + "), re-solved at each marker.")
    n_rows = max(len(sweep.level_labels) + (bands is not None) + (constrained is not None), len(robust) - 1)
    fig, (ax,), legend = _frame(7.2, 3.8, lines, n_rows + 1)
    with mpl.rc_context(STYLE):
        colours = level_colours(len(sweep.level_labels))
        edges, values = sweep.shares.pieces(sweep.lo, sweep.hi)
        shares = values / sweep.total
        for d, label in enumerate(sweep.level_labels):
            x, y = _steps(edges, shares[:, d])
            ax.plot(x, y, color=colours[d], linestyle=DASHES[d % len(DASHES)], label=label, zorder=3)
        if bands is not None:
            ax.fill_between(bands["x"], bands["low"], bands["high"], step="post", color=colours[0], alpha=0.18,
                            linewidth=0, label=bands.get("label", "interval"), zorder=2)
        if constrained is not None:
            row = _declared_row(constrained)
            ax.plot(constrained.ratios, constrained.shares[row, :, 0], linestyle="none", marker="o", markersize=3.2,
                    markerfacecolor="white", markeredgecolor=colours[0], markeredgewidth=1.0, zorder=4,
                    label=f"{sweep.level_labels[0]}, constrained optimum")
        for k, (info, f) in enumerate(zip(robust[1:], sweep.lenient_shares[1:]), start=1):
            e, v = f.pieces(sweep.lo, sweep.hi)
            x, y = _steps(e, v[:, 0] / sweep.total)
            ax.plot(x, y, linewidth=1.1, label=info.label, zorder=2, **_robust_style(k, len(robust), colours[0]))
        _ratio_axis(ax, sweep.axis, sweep.scale, sweep.lo, sweep.hi)
        _mark_scenario(ax, sweep.axis.scenario_ratio, sweep.lo, sweep.hi)
        ax.set_ylim(-0.02, 1.02)
        ax.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=0))
        ax.set_ylabel("share of cases")
        ax.set_title(f"Optimal decision as the cost of one {sweep.axis.outcome_label} varies")
        handles, labels = ax.get_legend_handles_labels()
        n_main = len(sweep.level_labels) + (bands is not None) + (constrained is not None)
        _legend(legend, handles[:n_main], labels[:n_main], ncol=1, title="Optimal decision level")
        if len(handles) > n_main:
            _legend(legend, handles[n_main:], labels[n_main:], ncol=1, x=0.5,
                    title=f"{sweep.level_labels[0]} optimal whatever the confounding, under")
    return fig


def regret_figure(sweep: OneRatioSweep) -> Figure:
    """Each compared rule's regret per 1,000 cases against the optimum along the ratio (exact)."""
    lines = assumption_lines("sweep", [])
    lines.insert(1, "Regret: expected cost per 1,000 cases above the rule optimal at each ratio (over the same "
                    "rule cells); a rule that uses finer information can have negative regret.")
    fig, (ax,), legend = _frame(7.2, 3.6, lines, (len(sweep.regret) + 1) // 2)
    with mpl.rc_context(STYLE):
        for k, (name, f) in enumerate(sweep.regret.items()):
            ax.plot(f.x, 1000.0 * f.y, color=RULE_COLOURS[k % len(RULE_COLOURS)], linestyle=DASHES[k % len(DASHES)],
                    marker=RULE_MARKERS[k % len(RULE_MARKERS)], markevery=0.12, markersize=3.5, label=name)
        ax.axhline(0.0, color="#4d4d4d", linewidth=0.8)
        _ratio_axis(ax, sweep.axis, sweep.scale, sweep.lo, sweep.hi)
        _mark_scenario(ax, sweep.axis.scenario_ratio, sweep.lo, sweep.hi)
        unit = f", {sweep.axis.unit}" if sweep.axis.unit else ""
        ax.set_ylabel(f"regret per 1,000 cases{unit}")
        ax.yaxis.set_major_formatter(mpl.ticker.FuncFormatter(lambda v, _: f"{v:,.0f}"))
        ax.set_title(f"Cost of keeping a fixed rule as the cost of one {sweep.axis.outcome_label} varies")
        if sweep.regret:
            _legend(legend, *ax.get_legend_handles_labels())
    return fig


def _declared_row(constrained) -> int:
    """Row of a constrained sweep with the declared bounds (the row whose varied bound is the
    declared one, else the middle row)."""
    if constrained.varied is None:
        return 0
    spec = next(s for s in constrained.specs if s.name == constrained.varied)
    hit = np.flatnonzero(np.isclose(constrained.bounds, spec.bound))
    return int(hit[0]) if len(hit) else len(constrained.bounds) // 2


def price_figure(constrained) -> Figure:
    """The price of the constraints along the ratio: in all (left; one line per value of a varied
    bound) and of each constraint, as the saving if it alone were removed (right)."""
    c = constrained
    lines = assumption_lines("sweep", [])
    lines.insert(1, "Price: expected cost per 1,000 cases of the constrained optimum above the unconstrained one "
                    "(same rule cells), re-solved at each marker. Right: what removing each constraint alone would "
                    "save, the others kept." + (f" Right panel at {c.varied} = {c.bounds[_declared_row(c)]:g}." if c.varied else ""))
    n_rows = max(len(c.bounds) if c.varied else 1, len(c.specs))
    fig, (left, right), legend = _frame(10.0, 3.8, lines, n_rows + 1, ncols=2)
    unit = f", {c.unit}" if c.unit else ""
    with mpl.rc_context(STYLE):
        shades = mpl.colormaps["cividis"](np.linspace(0.1, 0.85, len(c.bounds))) if c.varied else [OKABE_ITO["black"]]
        for b, colour in enumerate(shades):
            label = f"{c.varied} = {c.bounds[b]:g}" if c.varied else "all constraints together"
            left.plot(c.ratios, 1000.0 * c.price[b], color=colour, marker="o", markersize=2.6,
                      linestyle=DASHES[b % len(DASHES)], label=label)
        row = _declared_row(c)
        palette = [OKABE_ITO[n] for n in ("blue", "orange", "reddish purple", "sky blue", "vermillion", "bluish green")]
        for k, spec in enumerate(c.specs):
            right.plot(c.ratios, 1000.0 * c.removed[row, :, k], color=palette[k % len(palette)], marker="o",
                       markersize=2.6, linestyle=DASHES[k % len(DASHES)], label=f"{spec.name} ({spec.kind})")
        for ax in (left, right):
            ax.axhline(0.0, color="#4d4d4d", linewidth=0.8)
            _ratio_axis(ax, c.axis, c.scale, float(c.ratios[0]), float(c.ratios[-1]))
            _mark_scenario(ax, c.axis.scenario_ratio, float(c.ratios[0]), float(c.ratios[-1]))
            ax.set_ylabel(f"per 1,000 cases{unit}")
            ax.yaxis.set_major_formatter(mpl.ticker.FuncFormatter(lambda v, _: f"{v:,.0f}"))
        left.set_title("Price of the constraints")
        right.set_title("Saving if one constraint were removed")
        h1, l1 = left.get_legend_handles_labels()
        h2, l2 = right.get_legend_handles_labels()
        _legend(legend, h1, l1, ncol=1, title="Price" + (f", by {c.varied}" if c.varied else ""))
        _legend(legend, h2, l2, ncol=1, x=0.5, title="Constraint removed")
    return fig


def map_figure(lmap: LenientMap, points: int = 200, share: float = 0.5) -> Figure:
    """Two-ratio lenient map: the point-estimate share (left) and nested robust regions (right).

    The right panel fills, for each assumption, the region where leniency is optimal for at
    least ``share`` of cases under every distribution the assumption allows; the regions nest
    (a larger Gamma gives a smaller region).
    """
    robust = lmap.robust
    lines = assumption_lines("robust_sweep" if len(robust) > 1 else "sweep", robust)
    lines.insert(1, f"Left: share of cases for which {lmap.level_labels[0]} is optimal. Right: where it is optimal "
                    f"for at least {share:.0%} of cases under each assumption; the regions nest.")
    fig, (left, right), legend = _frame(10.0, 4.2, lines, 1 + (len(robust) + 2) // 4, ncols=2)
    x, y = lmap.grid_axes(points)
    with mpl.rc_context(STYLE):
        grids = [lmap.grid(points, a, x, y) for a in range(len(robust))]
        mesh = left.pcolormesh(x, y, grids[0], cmap="cividis", vmin=0.0, vmax=1.0, shading="nearest",
                               rasterized=True)
        cs = left.contour(x, y, grids[0], levels=[0.25, 0.5, 0.75], colors="white", linewidths=0.8)
        left.clabel(cs, fmt=lambda v: f"{v:.0%}", fontsize=6.5)
        bar = fig.colorbar(mesh, ax=left, fraction=0.05, pad=0.02)
        bar.ax.set_title("share of\ncases", fontsize=7, loc="left")
        bar.formatter = PercentFormatter(1.0, decimals=0)
        bar.update_ticks()
        left.set_title(f"Share of cases: {lmap.level_labels[0]} optimal")
        shades = assumption_colours(len(robust))[::-1]
        handles = []
        for k, (info, g) in enumerate(zip(robust, grids)):
            inside = (g >= share - 1e-12).astype(float)
            if inside.any():
                right.contourf(x, y, inside, levels=[0.5, 1.5], colors=[shades[k]])
                right.contour(x, y, inside, levels=[0.5], colors=["#222222"], linewidths=0.7,
                              linestyles=[DASHES[min(k, len(DASHES) - 1)]])
            handles.append(mpl.patches.Patch(facecolor=shades[k], edgecolor="#222222",
                                             label=info.label + ("" if inside.any() else " (nowhere)")))
        if not any((g >= share - 1e-12).any() for g in grids):
            right.text(0.5, 0.5, f"No region: under no assumption is\n{lmap.level_labels[0]} optimal\nfor at least "
                                 f"{share:.0%} of cases\nanywhere in this range.", ha="center", va="center",
                       transform=right.transAxes, fontsize=9, color="#1a1a1a")
        right.set_title("Robust to confounding")
        marker = None
        for ax in (left, right):
            ax.grid(False)
            _ratio_axis(ax, lmap.axes[0], lmap.scale, *lmap.box[0])
            _ratio_axis(ax, lmap.axes[1], lmap.scale, *lmap.box[1], which="y")
            s1, s2 = (a.scenario_ratio for a in lmap.axes)
            if lmap.box[0][0] <= s1 <= lmap.box[0][1] and lmap.box[1][0] <= s2 <= lmap.box[1][1]:
                marker = ax.plot([s1], [s2], marker="X", color=OKABE_ITO["vermillion"], markeredgecolor="white",
                                 markersize=7, linestyle="none", label="scenario's costs", zorder=5)[0]
        if marker is not None:
            handles.append(marker)
        _legend(legend, handles, [h.get_label() for h in handles], ncol=4,
                title=f"Right panel: {lmap.level_labels[0]} optimal for >= {share:.0%} of cases under")
    return fig


def figure_files(stem: str, make: Callable[[], Figure], formats: Sequence[str] = FORMATS) -> dict[str, Callable[[Path], None]]:
    """Writers for one figure in several formats, for :func:`policy.outputs.write_outputs`.

    The figure is drawn once, on the first write, and each writer saves it to the temporary
    path it is given.
    """
    bad = [f for f in formats if f not in FORMATS]
    if bad:
        from policy.errors import InputError

        raise InputError(f"figure format {bad[0]!r} is not supported; expected one of: {', '.join(FORMATS)}.")
    cache: dict[str, Figure] = {}

    def writer(fmt: str) -> Callable[[Path], None]:
        def write(path: Path) -> None:
            if "figure" not in cache:
                cache["figure"] = make()
            save_figure(cache["figure"], path, fmt)

        return write

    return {f"{stem}.{fmt}": writer(fmt) for fmt in formats}


def save_figure(fig: Figure, path: str | Path, fmt: str) -> None:
    """Save a figure in the tool's style: SVG text stays text, no time stamps (same input, same bytes)."""
    with mpl.rc_context(STYLE):
        metadata = {"Date": None} if fmt == "svg" else {"Software": None}
        fig.savefig(path, format=fmt, metadata=metadata)


def sweep_files(result: "SweepResult", figures: Sequence[str] = ("png", "svg"), table_points: int = 51) -> dict[str, Any]:
    """Every output file of ``sweep``: the result's tables (:meth:`SweepResult.output_files`) and
    its figures in each format (empty ``figures``: tables only), figures as writers drawn on demand."""
    files = result.output_files(table_points)
    if result.sweep is not None:
        s, c = result.sweep, result.constrained
        band = result.band_figure()
        figs = {"sweep_shares": lambda: share_figure(s, band, constrained=c),
                "sweep_regret": lambda: regret_figure(s)}
        if c is not None:
            figs["sweep_prices"] = lambda: price_figure(c)
    else:
        m = result.map
        figs = {"map_lenient": lambda: map_figure(m, result.settings["grid_points"], result.settings["share"])}
    for stem, make in figs.items():
        files.update(figure_files(stem, make, figures))
    return files
