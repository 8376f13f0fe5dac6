"""How stable each rule cell's chosen level is across bootstrap replicates.

The rule chosen on the full data is held fixed and scored in every replicate (its figures get
smooth intervals); beside it, this module reports for every rule cell how often the rule
re-solved on each replicate picks each level. With the chosen rule's decision probabilities
delta(d | g) and the replicates' re-solved ones delta*_b(d | g),

    share_optimal(d | g) = mean_b delta*_b(d | g),
    stability(g)         = sum_d min(delta(d | g), share_optimal(d | g)),

so for a deterministic rule the stability is the share of replicates in which the rule cell's
chosen level is chosen again (for a split cell, the overlap of the two distributions). Cells
whose stability is below a stated threshold (default 0.8) are marked: the data do not settle
their level, and a committee should read their decision as a judgment the estimates leave open.
This is the bootstrap "selection frequency" of a decision (Efron 2014 discusses the same
instability of a choice made on the data).

References
----------
Efron, B. (2014). Estimation and accuracy after model selection. Journal of the American
Statistical Association 109(507), 991-1007.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from policy.decision.rules import Rule
from policy.decision.solve import aggregation_matrix
from policy.errors import InputError

__all__ = ["STABILITY", "check_stability", "rule_cell_means", "level_shares", "stability_frame"]

#: default share of replicates below which a rule cell's level is marked unstable
STABILITY = 0.8


def check_stability(value: float, where: str = "stability") -> float:
    """A stability threshold must lie in (0, 1]."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{where} must be a number between 0 and 1 (e.g. 0.8); got {value!r}.") from None
    if not 0.0 < v <= 1.0:
        raise InputError(f"{where} must lie in (0, 1] (e.g. 0.8); got {value!r}.")
    return v


def rule_cell_means(delta: np.ndarray, index: np.ndarray, n_groups: int) -> np.ndarray:
    """Mean decision probabilities of each rule cell's cells, shape (b, n_groups, L), float32.

    A rule gives every cell of a rule cell the same probabilities, so the mean is that rule
    cell's delta (NaN where a replicate's solve failed).
    """
    b, n, L = delta.shape
    size = np.bincount(index, minlength=n_groups).astype(np.float64)
    S = aggregation_matrix(index, n_groups, 1.0 / size[index])
    flat = np.moveaxis(delta, 1, 0).reshape(n, b * L)
    return np.moveaxis((S @ flat).reshape(n_groups, b, L), 1, 0).astype(np.float32)


def level_shares(levels: np.ndarray, n_levels: int) -> np.ndarray:
    """Share of replicates in which each level is chosen, from levels of shape (B, G): (G, L)."""
    levels = np.asarray(levels)
    return (levels[..., None] == np.arange(n_levels)).mean(axis=0)


def stability_frame(rules: Sequence[Rule], shares: Sequence[np.ndarray], threshold: float = STABILITY,
                    replicates: int = 0) -> pd.DataFrame:
    """One row per rule and rule cell: chosen level, how often each level is re-chosen, stability.

    Parameters
    ----------
    rules : sequence of Rule
        The rules chosen on the full data (e.g. the cost-minimizing rule, a constrained optimum).
    shares : sequence of ndarray of shape (n_rule_cells, L)
        For each rule, share_optimal(d | g) over the replicates (NaN without replicates).
    threshold : float
        Cells with stability below it are marked ``stable = False``.

    Returns
    -------
    DataFrame
        ``rule``, the rule columns (empty for a rule without them), ``cases``, ``level`` (chosen
        level's label), ``share_optimal_<level value>``, ``stability``, ``stable``,
        ``stability_threshold``.
    """
    frames = []
    for rule, share in zip(rules, shares):
        base = rule.to_frame()
        cols = list(rule.rule_cells.columns)
        out = pd.DataFrame({"rule": rule.name}, index=base.index)
        out = pd.concat([out, base[cols]], axis=1)
        out["cases"] = base["cases"] if "cases" in base else np.nan
        out["level"] = base["level"]
        share = np.asarray(share, dtype=np.float64)
        for d, value in enumerate(rule.level_values):
            out[f"share_optimal_{value}"] = share[:, d]
        stability = np.minimum(rule.delta, share).sum(axis=1)
        out["stability"] = np.where(np.isfinite(share).all(axis=1) & (replicates > 0), stability, np.nan)
        out["stable"] = np.where(np.isfinite(out["stability"]), out["stability"] >= threshold, None)
        out["stability_threshold"] = threshold
        frames.append(out)
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def resolved_figures(levels: np.ndarray, solved: Sequence[np.ndarray], indices: Sequence[tuple[np.ndarray, int]],
                     per_case: np.ndarray, weights: np.ndarray, best: np.ndarray,
                     world: tuple[np.ndarray, np.ndarray] | None = None) -> dict[str, np.ndarray]:
    """What the comparison keeps of the rules re-solved in a batch of replicates.

    Parameters
    ----------
    levels : ndarray of shape (b, G)
        Level of each rule cell in each replicate's unconstrained optimum.
    solved : sequence of ndarray of shape (b, n_cells, L)
        Each further solver's decision probabilities per cell (NaN where it failed).
    indices : sequence of (index, n_groups)
        Each solver's rule cell of every cell.
    per_case : ndarray of shape (b, n_cells, L)
        Expected cost per case of each level.
    weights : ndarray of shape (b, n_cells)
    best : ndarray of shape (b, n_cells, L)
        The unconstrained optimum per cell.
    world : (per_case (n_cells, L), weights (n_cells,)), optional
        Expected cost per case of each level, and the cases per cell, in the bootstrap world
        (:mod:`policy.estimation.world`): the truth the replicates were drawn from.

    Returns
    -------
    dict
        ``optimal_level`` (b, G) int8; ``solved_share_<k>`` (b, G_k, L) float32 for each solver;
        ``resolved_cost`` (b, 1 + S): each re-solved rule's expected cost per case in its own
        replicate (the optimum first); with ``world``, ``resolved_world_cost`` (b, 1 + S): the same
        rules' expected cost in the bootstrap world (:mod:`policy.assessment.selection`).
    """
    out: dict[str, np.ndarray] = {"optimal_level": np.asarray(levels, dtype=np.int8)}
    W = weights.sum(axis=-1)
    cost = [np.einsum("bx,bxd,bxd->b", weights, d, per_case) / W for d in [best] + list(solved)]
    for k, (d, (index, n_groups)) in enumerate(zip(solved, indices)):
        out[f"solved_share_{k}"] = rule_cell_means(d, index, n_groups)
    out["resolved_cost"] = np.stack(cost, axis=1)
    if world is not None:
        world_case, world_w = world
        out["resolved_world_cost"] = np.stack([np.einsum("x,bxd,xd->b", world_w, d, world_case) / world_w.sum()
                                               for d in [best] + list(solved)], axis=1)
    return out


def unstable_lines(frame: pd.DataFrame, limit: int = 12) -> list[str]:
    """Plain-words lines naming the rule cells marked unstable in a :func:`stability_frame`."""
    if frame.empty or not frame["stability"].notna().any():
        return []
    threshold = float(frame["stability_threshold"].iloc[0])
    skip = {"rule", "cases", "level", "stability", "stable", "stability_threshold", "replicates", "seed"}
    lines = []
    for name, rows in frame.groupby("rule", sort=False):
        cols = [c for c in rows.columns if c not in skip and not c.startswith("share_optimal_") and rows[c].notna().any()]
        bad = rows[rows["stable"] == False]  # noqa: E712  (object column: True, False or None)
        share = bad["cases"].sum() / rows["cases"].sum() if rows["cases"].notna().all() and rows["cases"].sum() else np.nan
        head = (f"{name}: {len(bad)} of {len(rows)} rule cells chosen again in fewer than {threshold:.0%} of replicates"
                + (f" ({share:.1%} of cases)" if np.isfinite(share) else ""))
        lines.append(head + (":" if len(bad) else "."))
        for _, r in bad.head(limit).iterrows():
            where = ", ".join(f"{c} {r[c]}" for c in cols) or "all cases"
            lines.append(f"  {where}: {r['level']} chosen again in {r['stability']:.0%}")
        if len(bad) > limit:
            lines.append(f"  ... and {len(bad) - limit} more (rule_stability.csv)")
    return lines
