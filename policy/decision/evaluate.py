"""Scoring any rule under the estimated risk levels.

For a rule with decision probabilities delta(d | x) per cell and risk levels with outcome
probabilities p_jd(x) and risk-level distribution q_jr(x) (method notes, section 6):

- expected cost per case       sum_x w(x) sum_d delta(d|x) C(d, x) / sum_x w(x)
- expected rate of outcome j   sum_x w(x) sum_d delta(d|x) p_jd(x) / sum_x w(x)
- share at level d             sum_x w(x) delta(d|x) / sum_x w(x)
- decision within risk level   P(D = d | R_j = r, A = a)
                               = sum_{x in a} w q_jr delta(d|x) / sum_{x in a} w q_jr
- principal fairness gap       max_a - min_a of P(D >= t | R_j = r, A = a)
  ("Principal Fairness for Human and Algorithmic Decision-Making", Statistical Science, 2023)
- statistical parity gap       max_a - min_a of P(D >= t | A = a)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from policy.inputs.cells import CellLayout
from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.estimation.strata import RiskLevels

__all__ = ["Evaluation", "evaluate", "group_matrix", "stratum_decision_mass"]


def group_matrix(layout: CellLayout) -> tuple[np.ndarray, list[tuple[str, str]]]:
    """One-hot membership of each cell in 'all' and in each protected group.

    Returns
    -------
    onehot : ndarray of shape (n_cells, G)
    labels : list of (attribute, group)
        ``("all", "all")`` first, then each protected attribute's groups in category order.
    """
    cols = [np.ones((layout.n_cells, 1))]
    labels = [("all", "all")]
    for attr in layout.protected:
        codes = layout.codes(attr)
        cats = layout.categories(attr)
        cols.append(np.eye(len(cats))[codes])
        labels += [(attr, str(c)) for c in cats]
    return np.concatenate(cols, axis=1), labels


def stratum_decision_mass(delta: np.ndarray, q: np.ndarray, weights: np.ndarray, onehot: np.ndarray) -> np.ndarray:
    """Cases per (group, outcome, risk level, decision): sum_{x in g} w q_jr(x) delta(d|x).

    Parameters
    ----------
    delta : ndarray of shape (..., n_cells, L)
    q : ndarray of shape (..., n_cells, J, L + 1)
    weights : ndarray of shape (..., n_cells)
    onehot : ndarray of shape (n_cells, G)

    Returns
    -------
    ndarray of shape (..., G, J, L + 1, L)
    """
    wq = q * weights[..., :, None, None]
    return np.einsum("xg,...xjr,...xd->...gjrd", onehot, wq, delta, optimize=True)


@dataclass(frozen=True)
class Evaluation:
    """A rule's expected consequences under the estimated risk levels.

    Attributes
    ----------
    rule_name, rule_kind : str
    unit : str
        Cost unit.
    cases : float
        Total weight (cases) evaluated.
    cost_per_case : float
    outcome_rates : ndarray of shape (J,)
    level_shares : ndarray of shape (L,)
    groups : list of (attribute, group)
    group_cases : ndarray of shape (G,)
    group_level_shares : ndarray of shape (G, L)
    group_outcome_rates : ndarray of shape (G, J)
    stratum_mass : ndarray of shape (G, J, L + 1, L)
        Cases per group, outcome kind, risk level and decision.
    regret_per_case : float or None
        Expected cost per case above the reference rule's.
    agreement : float or None
        Share of cases given the same level as the reference rule.
    """

    rule_name: str
    rule_kind: str
    unit: str
    level_labels: tuple[str, ...]
    outcome_keys: tuple[str, ...]
    outcome_labels: tuple[str, ...]
    risk_level_names: tuple[str, ...]
    cases: float
    cost_per_case: float
    outcome_rates: np.ndarray
    level_shares: np.ndarray
    groups: list[tuple[str, str]]
    group_cases: np.ndarray
    group_level_shares: np.ndarray
    group_outcome_rates: np.ndarray
    stratum_mass: np.ndarray
    regret_per_case: float | None = None
    agreement: float | None = None
    reference_name: str | None = None
    assumptions: tuple[str, ...] = field(default_factory=tuple)

    @property
    def cost_per_1000(self) -> float:
        return 1000.0 * self.cost_per_case

    # -- derived tables ----------------------------------------------------------------------
    def within_risk_levels(self) -> pd.DataFrame:
        """P(D = d | R_j = r, group): columns attribute, group, outcome, risk_level,
        risk_level_name, level, share, stratum_cases."""
        G, J, R, L = self.stratum_mass.shape
        mass = self.stratum_mass
        total = mass.sum(axis=-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            share = mass / total[..., None]
        g, j, r, d = np.indices(mass.shape).reshape(4, -1)
        return pd.DataFrame({
            "attribute": [self.groups[i][0] for i in g],
            "group": [self.groups[i][1] for i in g],
            "outcome": np.asarray(self.outcome_keys, dtype=object)[j],
            "risk_level": r,
            "risk_level_name": np.asarray(self.risk_level_names, dtype=object)[r],
            "level": np.asarray(self.level_labels, dtype=object)[d],
            "share": share.reshape(-1),
            "stratum_cases": total[g, j, r],
        })

    def at_least(self) -> np.ndarray:
        """P(D >= t | R_j = r, group) for t = 1..L-1, shape (G, J, L + 1, L - 1)."""
        mass = self.stratum_mass
        total = mass.sum(axis=-1, keepdims=True)
        tail = np.flip(np.cumsum(np.flip(mass, axis=-1), axis=-1), axis=-1)[..., 1:]
        with np.errstate(invalid="ignore", divide="ignore"):
            return tail / total

    def fairness_gaps(self) -> pd.DataFrame:
        """Largest difference between groups of each protected attribute.

        Rows of kind ``principal_fairness`` (per outcome, risk level, threshold) compare
        P(D >= t | R_j = r, A = a); rows of kind ``statistical_parity`` (per threshold) compare
        P(D >= t | A = a). Columns: kind, attribute, outcome, risk_level, risk_level_name,
        threshold (label of level t), gap, highest_group, lowest_group.
        """
        rows = []
        attrs = list(dict.fromkeys(a for a, _ in self.groups if a != "all"))
        at_least = self.at_least()
        shares_at_least = np.flip(np.cumsum(np.flip(self.group_level_shares, axis=-1), axis=-1), axis=-1)[:, 1:]
        G, J, R, T = at_least.shape
        for attr in attrs:
            idx = [i for i, (a, _) in enumerate(self.groups) if a == attr]
            names = [self.groups[i][1] for i in idx]
            for t in range(T):
                vals = shares_at_least[idx, t]
                rows.append(self._gap_row("statistical_parity", attr, "", -1, "", t, vals, names))
                for j in range(J):
                    for r in range(R):
                        vals = at_least[idx, j, r, t]
                        rows.append(self._gap_row("principal_fairness", attr, self.outcome_keys[j], r,
                                                  self.risk_level_names[r], t, vals, names))
        return pd.DataFrame(rows, columns=["kind", "attribute", "outcome", "risk_level", "risk_level_name",
                                           "threshold", "gap", "highest_group", "lowest_group"])

    def _gap_row(self, kind, attr, outcome, r, rname, t, vals, names):
        ok = np.isfinite(vals)
        if ok.sum() < 2:
            return (kind, attr, outcome, r, rname, self.level_labels[t + 1], np.nan, "", "")
        v = np.where(ok, vals, np.nan)
        hi, lo = int(np.nanargmax(v)), int(np.nanargmin(v))
        return (kind, attr, outcome, r, rname, self.level_labels[t + 1], float(v[hi] - v[lo]), names[hi], names[lo])

    def misplaced(self) -> pd.DataFrame:
        """Per outcome kind: share of safe cases given a harsher level than the most lenient,
        and share of preventable cases given a level too lenient to prevent the outcome."""
        mass = self.stratum_mass[0]  # overall
        J, R, L = mass.shape
        rows = []
        for j in range(J):
            safe = mass[j, 0]
            prev = mass[j, 1:L]  # risk levels 1..K, shape (K, L)
            too_lenient = sum(prev[k - 1, :k].sum() for k in range(1, L))
            with np.errstate(invalid="ignore", divide="ignore"):
                rows.append((self.outcome_keys[j],
                             safe[1:].sum() / safe.sum() if safe.sum() else np.nan,
                             too_lenient / prev.sum() if prev.sum() else np.nan))
        return pd.DataFrame(rows, columns=["outcome", "safe_given_harsher", "preventable_given_too_lenient"])

    def by_group(self) -> pd.DataFrame:
        """Decision shares and outcome rates per group: attribute, group, cases, ``share: <level label>``,
        ``rate: <outcome label>``."""
        out = pd.DataFrame(self.groups, columns=["attribute", "group"])
        out["cases"] = self.group_cases
        for d, lab in enumerate(self.level_labels):
            out[f"share: {lab}"] = self.group_level_shares[:, d]
        for j, key in enumerate(self.outcome_keys):
            out[f"rate: {self.outcome_labels[j]}"] = self.group_outcome_rates[:, j]
        return out

    def overview(self) -> dict:
        """The headline figures as a flat dict (for JSON outputs and comparison tables)."""
        out = {
            "rule": self.rule_name,
            "kind": self.rule_kind,
            "unit": self.unit,
            "cases": float(self.cases),
            "cost_per_case": float(self.cost_per_case),
            "cost_per_1000_cases": float(self.cost_per_1000),
        }
        for j, key in enumerate(self.outcome_keys):
            out[f"rate_{key}"] = float(self.outcome_rates[j])
        for d, lab in enumerate(self.level_labels):
            out[f"share_level_{d}"] = float(self.level_shares[d])
        if self.regret_per_case is not None:
            out["regret_per_case"] = float(self.regret_per_case)
            out["regret_per_1000_cases"] = 1000.0 * float(self.regret_per_case)
            out["agreement"] = float(self.agreement)
        return out

    def to_frame(self) -> pd.DataFrame:
        """Headline figures as a two-column table (figure, value)."""
        return pd.DataFrame(list(self.overview().items()), columns=["figure", "value"])

    def summary(self) -> str:
        return str(self)

    def __str__(self) -> str:
        lines = [f"{self.rule_name}: expected cost {self.cost_per_1000:,.0f} {self.unit} per 1,000 cases"]
        if self.regret_per_case is not None:
            lines.append(f"  regret against {self.reference_name}: {1000 * self.regret_per_case:,.0f} per 1,000 cases; "
                         f"same level for {self.agreement:.1%} of cases")
        lines.append("  decision shares: " + ", ".join(f"{lab} {s:.1%}" for lab, s in zip(self.level_labels, self.level_shares)))
        lines.append("  expected outcome rates: " + ", ".join(f"{lab} {r:.1%}" for lab, r in zip(self.outcome_labels, self.outcome_rates)))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return "<pre>" + str(self).replace("&", "&amp;").replace("<", "&lt;") + "</pre>" + self.by_group().to_html(index=False)


def evaluate(rule: Rule | np.ndarray, risk_levels: RiskLevels, costs: Costs,
             reference: Rule | None = None, name: str | None = None) -> Evaluation:
    """Score a rule under the estimated risk levels.

    Parameters
    ----------
    rule : Rule or ndarray of shape (n_cells, L)
        The rule, or decision probabilities for every cell.
    risk_levels : RiskLevels
    costs : Costs
    reference : Rule, optional
        A rule (usually the optimum) to report regret and agreement against.
    name : str, optional
        Name for a rule given as an array.
    """
    if isinstance(rule, Rule):
        delta, rule_name, kind = rule.cell_delta, rule.name, rule.kind
    else:
        delta, rule_name, kind = np.asarray(rule, dtype=np.float64), name or "rule", "given"
    w = risk_levels.weights
    total_w = w.sum()
    per_case = costs.expected(risk_levels.p)
    cost = float(np.sum(w[:, None] * delta * per_case) / total_w)
    rates = np.einsum("x,xd,xjd->j", w, delta, risk_levels.p) / total_w
    shares = (w[:, None] * delta).sum(axis=0) / total_w
    onehot, labels = group_matrix(risk_levels.layout)
    gw = onehot.T @ w
    with np.errstate(invalid="ignore", divide="ignore"):
        g_shares = (onehot.T @ (w[:, None] * delta)) / gw[:, None]
        g_rates = np.einsum("xg,x,xd,xjd->gj", onehot, w, delta, risk_levels.p, optimize=True) / gw[:, None]
    mass = stratum_decision_mass(delta, risk_levels.q, w, onehot)
    regret = agreement = None
    if reference is not None:
        ref = reference.cell_delta
        ref_cost = float(np.sum(w[:, None] * ref * per_case) / total_w)
        regret = cost - ref_cost
        agreement = float(np.sum(w[:, None] * np.minimum(delta, ref)) / total_w)
    return Evaluation(
        rule_name=rule_name,
        rule_kind=kind,
        unit=costs.unit,
        level_labels=risk_levels.level_labels,
        outcome_keys=risk_levels.outcome_keys,
        outcome_labels=risk_levels.outcome_labels,
        risk_level_names=tuple(risk_levels.risk_level_names),
        cases=float(total_w),
        cost_per_case=cost,
        outcome_rates=rates,
        level_shares=shares,
        groups=labels,
        group_cases=gw,
        group_level_shares=g_shares,
        group_outcome_rates=g_rates,
        stratum_mass=mass,
        regret_per_case=regret,
        agreement=agreement,
        reference_name=None if reference is None else reference.name,
        assumptions=risk_levels.assumptions,
    )
