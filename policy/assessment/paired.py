"""Paired differences between compared rules, from the replicates that scored them all.

A committee choosing between two rules needs the interval of their *difference*, not two
intervals side by side. Every compared rule is scored under the same re-estimated risk levels
in each bootstrap replicate, so rule i minus rule k can be taken replicate by replicate: the
uncertainty the two rules share (how risky the population is, how costly its outcomes) cancels,
and the interval of the difference is much narrower than the two marginal intervals suggest
(Efron and Tibshirani 1993, sections 13.3 and 16.4, on paired bootstrap comparisons).

For each unordered pair (i, k), i before k in the comparison's rule order, and each figure f
(expected cost per 1,000 cases, each outcome rate, each decision share):

    difference      = f_i - f_k on the data,
    interval        = percentile interval of f_i* - f_k* over the replicates b,
    share_first_lower = #{b : f_i* < f_k*} / #{b : both defined}
    (and share_second_lower the same with f_k* < f_i*; ties count in neither).

For the cost, ``share_first_lower`` is the share of replicates in which the first rule is
strictly cheaper: a bootstrap measure of how often the data favour it, not a probability that it
is cheaper in the population. Nothing is re-estimated here: the module only reads the
replicates :func:`policy.assessment.compare.compare` already drew.

References
----------
Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from policy.assessment.uncertainty import percentile_interval

__all__ = ["paired_figures", "paired_differences", "cost_matrix"]


def paired_figures(point: Mapping[str, np.ndarray], replicates: Mapping[str, np.ndarray], outcome_keys: Sequence[str],
                   level_values: Sequence) -> tuple[list[str], np.ndarray, np.ndarray]:
    """The figures compared pairwise, stacked on one axis.

    Parameters
    ----------
    point : mapping
        ``cost`` (R,) per case, ``rates`` (R, J), ``shares`` (R, L).
    replicates : mapping
        The same figures with a leading replicate axis (B, ...).

    Returns
    -------
    names : list of str
        ``cost_per_1000_cases``, ``rate_<key>`` for each outcome kind, ``share_<value>`` for each level.
    point : ndarray of shape (R, F)
    reps : ndarray of shape (B, R, F)
    """
    names = ["cost_per_1000_cases"] + [f"rate_{k}" for k in outcome_keys] + [f"share_{v}" for v in level_values]

    def stack(src, lead):
        cost = 1000.0 * np.asarray(src["cost"], dtype=np.float64)[..., None]
        return np.concatenate([cost, np.asarray(src["rates"], dtype=np.float64), np.asarray(src["shares"], dtype=np.float64)],
                              axis=-1).reshape(lead + (cost.shape[-2], len(names)))

    p = stack(point, ())
    b = np.asarray(replicates["cost"]).shape[0]
    return names, p, stack(replicates, (b,))


def paired_differences(rule_names: Sequence[str], figure_names: Sequence[str], point: np.ndarray, reps: np.ndarray,
                       level: float = 0.95) -> pd.DataFrame:
    """Every pair of rules' difference in every figure, with its paired percentile interval.

    Parameters
    ----------
    rule_names : sequence of str
        R names, in the order of the rule axis.
    figure_names : sequence of str
        F names, in the order of the figure axis.
    point : ndarray of shape (R, F)
    reps : ndarray of shape (B, R, F)
        The same replicates for every rule (B = 0: no intervals).
    level : float
        Coverage of the percentile intervals.

    Returns
    -------
    DataFrame
        One row per pair (i < k) and figure: ``first_rule``, ``second_rule``, ``figure``,
        ``first_value``, ``second_value``, ``difference`` (first minus second),
        ``difference_lower``, ``difference_upper``, ``share_first_lower`` and
        ``share_second_lower`` (shares of the replicates where both are defined; ties count in
        neither).
    """
    R, F = point.shape
    i, k = np.triu_indices(R, 1)
    diff = point[i] - point[k]  # (P, F)
    B = reps.shape[0]
    if B:
        d = reps[:, i] - reps[:, k]  # (B, P, F)
        lo, hi = percentile_interval(d, level)
        ok = np.isfinite(d)
        with np.errstate(invalid="ignore", divide="ignore"):
            lower = np.where(ok, reps[:, i] < reps[:, k], False).sum(axis=0) / ok.sum(axis=0)
            higher = np.where(ok, reps[:, i] > reps[:, k], False).sum(axis=0) / ok.sum(axis=0)
    else:
        lo = hi = lower = higher = np.full(diff.shape, np.nan)
    P = len(i)
    names = np.asarray(rule_names, dtype=object)
    return pd.DataFrame({
        "first_rule": np.repeat(names[i], F),
        "second_rule": np.repeat(names[k], F),
        "figure": np.tile(np.asarray(figure_names, dtype=object), P),
        "first_value": point[i].reshape(-1),
        "second_value": point[k].reshape(-1),
        "difference": diff.reshape(-1),
        "difference_lower": lo.reshape(-1),
        "difference_upper": hi.reshape(-1),
        "share_first_lower": lower.reshape(-1),
        "share_second_lower": higher.reshape(-1),
    })


def cost_matrix(differences: pd.DataFrame, rule_names: Sequence[str], figure: str = "cost_per_1000_cases") -> pd.DataFrame:
    """The compact matrix of one figure's paired differences: row rule minus column rule.

    Each entry reads "difference (lower to upper); p% lower" ("p% cheaper" for the cost), where p
    is the share of replicates in which the row rule's figure is below the column rule's. The matrix
    is antisymmetric: the lower triangle is the upper one read the other way round.
    """
    rows = differences[differences["figure"] == figure]
    word = "cheaper" if figure.startswith("cost") else "lower"
    names = list(rule_names)
    cell = {name: {other: "" for other in names} for name in names}

    def text(d, lo, hi, share):
        interval = f" ({lo:,.0f} to {hi:,.0f})" if np.isfinite(lo) else ""
        tail = f"; {share:.0%} {word}" if np.isfinite(share) else ""
        return f"{d:+,.0f}{interval}{tail}"

    for r in rows.itertuples(index=False):
        cell[r.first_rule][r.second_rule] = text(r.difference, r.difference_lower, r.difference_upper, r.share_first_lower)
        cell[r.second_rule][r.first_rule] = text(-r.difference, -r.difference_upper, -r.difference_lower, r.share_second_lower)
    for name in names:
        cell[name][name] = "0"
    frame = pd.DataFrame([[cell[a][b] for b in names] for a in names], index=pd.Index(names, name="rule"),
                         columns=[f"minus {b}" for b in names])
    return frame
