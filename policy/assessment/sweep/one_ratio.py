"""One ratio, exact: the sweep result (shares, breakpoints, regret of compared rules, robust
lenient intervals) and the function that computes it."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from policy.estimation.bounds import RiskBounds, point_bounds
from policy.decision.costs import Costs
from policy.errors import InputError
from policy.decision.rules import Rule
from policy.decision.solve import aggregation_matrix
from policy.estimation.strata import RiskLevels
from policy.assessment.sweep.axes import RatioAxis, _check_range, _plain_groups, _rule_cells, cost_lines
from policy.assessment.sweep.envelope import Envelope, PiecewiseLinear, StepFunction, envelope_functions, lower_envelope
from policy.assessment.sweep.regions import _margins, interval_shares, lenient_intervals
from policy.assessment.sweep.assumptions import AssumptionInfo, _info


@dataclass(frozen=True)
class OneRatioSweep:
    """Exact results of sweeping one cost ratio.

    Attributes
    ----------
    axis : RatioAxis
    lo, hi : float
        The range reported.
    scale : str
    rule_cells : DataFrame
        Values of the rule columns of each rule cell.
    weights : ndarray of shape (n_groups,)
    level_values, level_labels : tuple of str
    envelope : Envelope
        Exact optimal level of every rule cell along the ratio.
    shares : StepFunction
        Cases at each optimal level (k = L), not yet divided by the total.
    regret : dict of str to PiecewiseLinear
        Each compared rule's regret per case against the optimum, exact on [lo, hi].
    optimal : StepFunction
        (intercept, slope) of the optimal total cost on each piece (k = 2); see
        :meth:`optimal_cost_at`.
    robust : list of AssumptionInfo
        Point estimate first, then each Gamma, then the monotone bounds.
    lenient : list of (low, high)
        Per assumption: the interval of ratios where leniency is optimal for every consistent
        distribution, per rule cell (nan where empty).
    lenient_shares : list of StepFunction
        Per assumption: cases for which leniency is robustly optimal (k = 1).
    """

    axis: RatioAxis
    lo: float
    hi: float
    scale: str
    rule_cells: pd.DataFrame
    weights: np.ndarray
    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    envelope: Envelope
    shares: StepFunction
    regret: dict[str, PiecewiseLinear]
    optimal: StepFunction | None = None
    robust: list[AssumptionInfo] = field(default_factory=list)
    lenient: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list)
    lenient_shares: list[StepFunction] = field(default_factory=list)

    @property
    def total(self) -> float:
        return float(self.weights.sum())

    def optimal_cost_at(self, r: float | np.ndarray) -> np.ndarray:
        """Expected cost per case of the unconstrained optimum at ratio(s) ``r`` (exact)."""
        coef = self.optimal(r)
        return (coef[..., 0] + np.asarray(r) * coef[..., 1]) / self.total

    def share_at(self, r: float | np.ndarray) -> np.ndarray:
        """Share of cases at each optimal level at ratio(s) ``r``; shape ``np.shape(r) + (L,)``."""
        return self.shares(r) / self.total

    def lenient_share_at(self, r: float | np.ndarray, assumption: int = 0) -> np.ndarray:
        """Share of cases for which leniency is (robustly) optimal at ``r`` under an assumption."""
        return self.lenient_shares[assumption](r)[..., 0] / self.total

    def lenient_up_to(self, share: float = 0.5, assumption: int = 0) -> float:
        """The largest ratio in [lo, hi] up to which leniency stays optimal for at least ``share``
        of cases under an assumption (nan if it fails already at lo)."""
        edges, values = self.lenient_shares[assumption].pieces(self.lo, self.hi)
        v = values[:, 0] / self.total
        at_lo = self.lenient_share_at(self.lo, assumption)
        if at_lo < share - 1e-12:
            return float("nan")
        bad = np.flatnonzero(v < share - 1e-12)
        if len(bad) == 0:
            return float(self.hi)
        return float(edges[bad[0]])

    # -- tables ------------------------------------------------------------------------------
    def segments(self) -> pd.DataFrame:
        """One row per rule cell x stretch of the range with one optimal level.

        Columns: the rule columns, ``cases``, ``from_ratio``, ``to_ratio``, ``from_cost``,
        ``to_cost``, ``level``, ``level_label``.
        """
        env = self.envelope
        n, Lm1 = env.breaks.shape
        edges = np.concatenate([np.full((n, 1), -np.inf), env.breaks, np.full((n, 1), np.inf)], axis=1)
        # a padded breakpoint is +inf: the segment after the last real one runs to +inf
        seg = np.arange(Lm1 + 1)[None, :]
        a = np.maximum(edges[:, :-1], self.lo)
        b = np.minimum(np.where(seg < env.count[:, None], edges[:, 1:], np.inf), self.hi)
        real = (seg <= env.count[:, None]) & (b > a)
        g, s = np.nonzero(real)
        a, b, lev = a[g, s], b[g, s], env.levels[g, s]
        out = _plain_groups(self.rule_cells).iloc[g].reset_index(drop=True)
        out["cases"] = self.weights[g]
        out["from_ratio"], out["to_ratio"] = a, b
        out["from_cost"], out["to_cost"] = a * self.axis.reference_cost, b * self.axis.reference_cost
        out["level"] = np.asarray(self.level_values, dtype=object)[lev]
        out["level_label"] = np.asarray(self.level_labels, dtype=object)[lev]
        return out

    def breakpoints(self) -> pd.DataFrame:
        """One row per breakpoint inside the range: rule columns, ``cases``, ``ratio``, ``cost``,
        ``level_before``, ``level_after`` (labels)."""
        env = self.envelope
        g, s = np.nonzero(np.arange(env.breaks.shape[1])[None, :] < env.count[:, None])
        r = env.breaks[g, s]
        keep = (r >= self.lo) & (r <= self.hi)
        g, s, r = g[keep], s[keep], r[keep]
        order = np.lexsort((g, r))
        g, s, r = g[order], s[order], r[order]
        out = _plain_groups(self.rule_cells).iloc[g].reset_index(drop=True)
        out["cases"] = self.weights[g]
        out["ratio"] = r
        out["cost"] = r * self.axis.reference_cost
        labels = np.asarray(self.level_labels, dtype=object)
        out["level_before"] = labels[env.levels[g, s]]
        out["level_after"] = labels[env.levels[g, s + 1]]
        return out

    def share_table(self) -> pd.DataFrame:
        """The exact share step function on the range, tidy: ``from_ratio``, ``to_ratio``,
        ``from_cost``, ``to_cost``, ``level``, ``level_label``, ``share``, ``cases``."""
        edges, values = self.shares.pieces(self.lo, self.hi)
        p, L = values.shape
        i, d = np.indices((p, L)).reshape(2, -1)
        return pd.DataFrame({
            "from_ratio": edges[i], "to_ratio": edges[i + 1],
            "from_cost": edges[i] * self.axis.reference_cost, "to_cost": edges[i + 1] * self.axis.reference_cost,
            "level": np.asarray(self.level_values, dtype=object)[d],
            "level_label": np.asarray(self.level_labels, dtype=object)[d],
            "share": values[i, d] / self.total, "cases": values[i, d],
        })

    def regret_table(self) -> pd.DataFrame:
        """Each compared rule's exact regret at the ends of the range and at every knot inside:
        ``rule``, ``ratio``, ``cost``, ``regret_per_case``, ``regret_per_1000_cases``."""
        frames = []
        for name, f in self.regret.items():
            frames.append(pd.DataFrame({"rule": name, "ratio": f.x, "cost": f.x * self.axis.reference_cost,
                                        "regret_per_case": f.y, "regret_per_1000_cases": 1000.0 * f.y}))
        cols = ["rule", "ratio", "cost", "regret_per_case", "regret_per_1000_cases"]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)

    def robust_table(self) -> pd.DataFrame:
        """Per assumption and rule cell, the ratios where leniency stays optimal for every
        consistent distribution: ``assumption``, ``assumption_label``, ``gamma``, rule columns,
        ``cases``, ``lenient_from``, ``lenient_to`` (clipped to the range; empty when never)."""
        frames = []
        groups = _plain_groups(self.rule_cells)
        for info, (low, high) in zip(self.robust, self.lenient):
            f = groups.copy()
            f.insert(0, "gamma", info.table_gamma)
            f.insert(0, "assumption_label", info.label)
            f.insert(0, "assumption", info.key)
            f["cases"] = self.weights
            a, b = np.maximum(low, self.lo), np.minimum(high, self.hi)
            empty = np.isnan(low) | (a > b)
            f["lenient_from"] = np.where(empty, np.nan, a)
            f["lenient_to"] = np.where(empty, np.nan, b)
            frames.append(f)
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    def robust_share_table(self) -> pd.DataFrame:
        """Per assumption, the exact share of cases for which leniency is robustly optimal:
        ``assumption``, ``assumption_label``, ``gamma``, ``from_ratio``, ``to_ratio``,
        ``from_cost``, ``to_cost``, ``share_lenient``."""
        frames = []
        for info, f in zip(self.robust, self.lenient_shares):
            edges, values = f.pieces(self.lo, self.hi)
            frames.append(pd.DataFrame({
                "assumption": info.key, "assumption_label": info.label, "gamma": info.table_gamma,
                "from_ratio": edges[:-1], "to_ratio": edges[1:],
                "from_cost": edges[:-1] * self.axis.reference_cost, "to_cost": edges[1:] * self.axis.reference_cost,
                "share_lenient": values[:, 0] / self.total,
            }))
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    def summary(self, share: float = 0.5) -> pd.DataFrame:
        """Per assumption: the share of cases for which leniency is (robustly) optimal at the
        low end of the range and at the scenario's ratio, and the largest ratio up to which it
        stays optimal for at least ``share`` of cases (nan: below that share already at the low end).

        Columns: ``assumption``, ``share_lenient_at_low``, ``share_lenient_at_scenario``,
        ``share``, ``up_to_ratio``, ``up_to_cost``.
        """
        r0 = self.axis.scenario_ratio
        rows = []
        for a, info in enumerate(self.robust):
            up = self.lenient_up_to(share, a)
            rows.append({"assumption": info.label,
                         "share_lenient_at_low": float(self.lenient_share_at(self.lo, a)),
                         "share_lenient_at_scenario": float(self.lenient_share_at(r0, a)),
                         "share": share, "up_to_ratio": up, "up_to_cost": up * self.axis.reference_cost})
        return pd.DataFrame(rows)

    def __str__(self) -> str:
        n_break = int(((self.envelope.breaks >= self.lo) & (self.envelope.breaks <= self.hi)).sum())
        lines = [f"Sweep of {self.axis.title} from {self.lo:g} to {self.hi:g} ({self.scale}); "
                 f"{self.envelope.n:,} rule cells, {n_break:,} breakpoints in range.",
                 f"  1 on this axis = {self.axis.reference_cost:,.2f} {self.axis.unit}; "
                 f"the scenario's ratio is {self.axis.scenario_ratio:.4g}.",
                 "  optimal shares at the scenario's ratio: "
                 + ", ".join(f"{lab} {s:.1%}" for lab, s in zip(self.level_labels, self.share_at(self.axis.scenario_ratio)))]
        if self.robust:
            table = self.summary()
            share = table["share"].iloc[0]
            shown = pd.DataFrame({
                "assumption": table["assumption"],
                f"{self.level_labels[0]} at {self.lo:g}": table["share_lenient_at_low"].map(lambda v: f"{v:.1%}"),
                "at the scenario's ratio": table["share_lenient_at_scenario"].map(lambda v: f"{v:.1%}"),
                f"for >= {share:.0%} of cases up to ratio": table["up_to_ratio"].map(
                    lambda v: f"{v:.4g}" if np.isfinite(v) else f"never (< {share:.0%} at {self.lo:g})"),
                f"cost in {self.axis.unit}": table["up_to_cost"].map(lambda v: f"{v:,.0f}" if np.isfinite(v) else "-"),
            })
            lines.append(f"Share of cases for which {self.level_labels[0]} is optimal, whatever the confounding each "
                         "assumption allows:")
            lines.append(shown.to_string(index=False))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return "<pre>" + str(self).replace("&", "&amp;").replace("<", "&lt;") + "</pre>"


def _compared_line(rule: Rule, base: np.ndarray, slope: np.ndarray, weights: np.ndarray) -> tuple[float, float]:
    delta = rule.cell_delta
    if delta.shape != base.shape:
        raise InputError(
            f"rule {rule.name!r} gives decisions for {delta.shape[0]} cells with {delta.shape[1]} levels; "
            f"the risk levels have {base.shape[0]} cells with {base.shape[1]} levels."
        )
    wd = weights[:, None] * delta
    return float(np.sum(wd * base)), float(np.sum(wd * slope))


def sweep_one(risk_levels: RiskLevels, costs: Costs, axis: RatioAxis, lo: float, hi: float,
              rules: Sequence[Rule] = (), columns: Sequence[str] | None = None,
              assumptions: Sequence[RiskBounds] = (), scale: str = "linear") -> OneRatioSweep:
    """Exact one-ratio sweep: breakpoints, shares at each optimal level, regrets, robust leniency.

    Parameters
    ----------
    risk_levels, costs : RiskLevels, Costs
    axis : RatioAxis
        The swept ratio (:func:`ratio_axis`).
    lo, hi : float
        Range reported (the envelope itself covers the whole line).
    rules : sequence of Rule
        Rules whose regret against the optimum is traced; each rule is fixed along the sweep.
    columns : sequence of str, optional
        Rule columns of the optimum (default: the scenario's rule covariates).
    assumptions : sequence of RiskBounds
        Intervals for the robust lenient region (:func:`policy.estimation.bounds.robust_assumptions`);
        default the point estimate alone.
    scale : {'linear', 'log'}
        How figures show the axis.
    """
    _check_range(lo, hi, scale)
    index, groups, weights = _rule_cells(risk_levels, columns)
    base, slope = cost_lines(risk_levels, costs, [axis])
    M = aggregation_matrix(index, len(groups), risk_levels.weights)
    A, B = M @ base, M @ slope[0]
    env = lower_envelope(A, B)
    shares, total = envelope_functions(env, weights, A, B)
    inside = total.knots[(total.knots > lo) & (total.knots < hi)]
    x = np.concatenate([[lo], inside, [hi]])
    coef = total(x)
    opt = coef[:, 0] + x * coef[:, 1]
    W = float(risk_levels.weights.sum())
    regret = {}
    for rule in rules:
        alpha, beta = _compared_line(rule, base, slope[0], risk_levels.weights)
        regret[rule.name] = PiecewiseLinear(x, (alpha + beta * x - opt) / W)
    infos, intervals, lshares = [], [], []
    for b in (assumptions or [point_bounds(risk_levels)]):
        m = _margins(risk_levels, costs, [axis], index, len(groups), b, A, [B])
        low, high = lenient_intervals(m[..., 0], m[..., 1])
        infos.append(_info(b))
        intervals.append((low, high))
        lshares.append(interval_shares(low, high, weights))
    return OneRatioSweep(axis, float(lo), float(hi), scale, groups, weights, risk_levels.level_values,
                         risk_levels.level_labels, env, shares, regret, total, infos, intervals, lshares)
