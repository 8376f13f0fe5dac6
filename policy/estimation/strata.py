"""Risk levels (principal strata for ordered decisions) and their estimation from cell counts.

For outcome kind j and ordered decisions 0..K, with p_jd(x) = P(Y_j(d) = 1 | x) non-increasing
in d (monotonicity), the risk level R_j = min{d : Y_j(d) = 0} (K+1 if the outcome occurs under
every decision) has the distribution

    P(R_j = 0 | x) = 1 - p_j0(x),  P(R_j = k | x) = p_j,k-1(x) - p_jk(x),  P(R_j = K+1 | x) = p_jK(x).

Under unconfoundedness given the cell, p_jd(x) = P(Y_j = 1 | D = d, x). The cell estimator
pools both arms, shrinks each (cell, level) rate toward a pooled target (the cell's baseline
risk, shrunk toward a coarser group's, times the level's risk ratio: the Mantel-Haenszel ratio
common to all cells, or ratios varying with the cell columns where the data support it,
:mod:`policy.estimation.target`; beta-binomial with prior strengths by the method of moments,
optionally kept within a few standard errors of the cell's own rate), and projects each cell's rates
onto non-increasing sequences in d by weighted isotonic regression.

References
----------
Frangakis, C. E. and Rubin, D. B. (2002). Principal stratification in causal inference.
Biometrics 58(1), 21-29.
Robertson, T., Wright, F. T. and Dykstra, R. L. (1988). Order Restricted Statistical Inference.
Wiley. (The min-max formula for isotonic regression, Theorem 1.4.4.)
Kleinman, J. C. (1973). Proportions with extraneous variance: single and independent samples.
JASA 68(341), 46-54. (Method-of-moments weights for overdispersed proportions.)
Greenland, S. and Robins, J. M. (1985). Estimation of a common effect parameter from sparse
follow-up data. Biometrics 41(1), 55-68. (The Mantel-Haenszel risk ratio.)
Efron, B. and Morris, C. (1971). Limiting the risk of Bayes and empirical Bayes estimators,
Part I: the Bayes case. JASA 66(336), 807-815; Part II: the empirical Bayes case (1972), JASA
67(337), 130-139. (The limited-translation rule.)
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from policy.cautions import assumptions_for
from policy.inputs.cells import CellLayout, CellTable
from policy.errors import InputError
from policy.inputs.scenario import Scenario
from policy.estimation.loglinear import factor_matrices, loglinear_rates
from policy.estimation.target import cell_level_ratios, select_level_terms

__all__ = [
    "RiskLevels",
    "RiskLevelEstimator",
    "isotonic_nonincreasing",
    "risk_level_distribution",
    "risk_level_names",
]

#: bounds of the method-of-moments intra-cell correlation rho = 1 / (1 + prior strength)
RHO_BOUNDS = (1e-4, 0.5)
#: D of the limited-translation rule (a shrunk rate stays within D standard errors of the cell's
#: own); None: off by default (docs/method.md gives what it cost and gained on simulated data)
TRANSLATION_LIMIT = None


# ----------------------------------------------------------------------------------------------
# Array functions (vectorized over leading axes, so bootstrap replicates can share one call)
# ----------------------------------------------------------------------------------------------
def isotonic_nonincreasing(y: np.ndarray, w: np.ndarray | None = None) -> np.ndarray:
    """Weighted least-squares projection onto non-increasing sequences along the last axis.

    Parameters
    ----------
    y : ndarray of shape (..., n)
        Values to project, one sequence per leading index.
    w : ndarray of shape (..., n), optional
        Positive weights (default 1).

    Returns
    -------
    ndarray of shape (..., n)
        The fitted non-increasing sequences.

    Notes
    -----
    Uses the min-max formula (Robertson, Wright and Dykstra 1988, Thm 1.4.4), for a
    non-increasing fit f_i = min_{s<=i} max_{t>=i} Av(s, t), where Av(s, t) is the weighted
    mean of y_s..y_t. It costs O(n^2) per sequence and is exact, which suits the short
    sequences here (one value per decision level) and vectorizes over any number of cells
    and replicates. It gives the same answer as pool-adjacent-violators.
    """
    y = np.asarray(y, dtype=np.float64)
    w = np.ones_like(y) if w is None else np.broadcast_to(np.asarray(w, dtype=np.float64), y.shape)
    out = y.copy()
    # only sequences that break the order need work; most cells' rates are already monotone
    rows = np.flatnonzero((np.diff(y, axis=-1) > 0).any(axis=-1).reshape(-1))
    if len(rows):
        flat = out.reshape(-1, y.shape[-1])
        flat[rows] = _min_max_fit(y.reshape(-1, y.shape[-1])[rows], np.maximum(w.reshape(-1, y.shape[-1])[rows], 1e-300))
    return out


def _min_max_fit(y: np.ndarray, w: np.ndarray) -> np.ndarray:
    """The min-max formula on rows of y (m, n) with positive weights w (m, n)."""
    m, n = y.shape
    zero = np.zeros((m, 1))
    cy = np.concatenate([zero, np.cumsum(w * y, axis=-1)], axis=-1)
    cw = np.concatenate([zero, np.cumsum(w, axis=-1)], axis=-1)
    # avg[:, s, t] for s <= t
    with np.errstate(invalid="ignore", divide="ignore"):
        avg = (cy[:, None, 1:] - cy[:, :-1, None]) / (cw[:, None, 1:] - cw[:, :-1, None])
    s_idx, t_idx = np.indices((n, n))
    avg = np.where(t_idx >= s_idx, avg, -np.inf)
    # suffix max over t: m[:, s, i] = max_{t >= i} avg[s, t]
    suffix_max = np.flip(np.maximum.accumulate(np.flip(avg, axis=-1), axis=-1), axis=-1)
    # prefix min over s <= i, then the diagonal
    suffix_max = np.where(s_idx <= t_idx, suffix_max, np.inf)
    prefix_min = np.minimum.accumulate(suffix_max, axis=-2)
    return np.diagonal(prefix_min, axis1=-2, axis2=-1)


def risk_level_distribution(p: np.ndarray) -> np.ndarray:
    """Risk-level probabilities from outcome probabilities under each decision.

    Parameters
    ----------
    p : ndarray of shape (..., L)
        P(Y(d) = 1) for d = 0..L-1, non-increasing in d.

    Returns
    -------
    ndarray of shape (..., L + 1)
        P(R = r) for r = 0..L: 1 - p_0, then p_{k-1} - p_k, then p_{L-1}.
    """
    p = np.asarray(p, dtype=np.float64)
    first = 1.0 - p[..., :1]
    middle = p[..., :-1] - p[..., 1:]
    last = p[..., -1:]
    return np.concatenate([first, middle, last], axis=-1)


def outcome_probabilities(q: np.ndarray) -> np.ndarray:
    """Inverse of :func:`risk_level_distribution`: p_d = P(R > d) = sum_{r > d} q_r."""
    q = np.asarray(q, dtype=np.float64)
    tail = np.flip(np.cumsum(np.flip(q, axis=-1), axis=-1), axis=-1)
    return tail[..., 1:]


def risk_level_names(level_labels: Sequence[str]) -> list[str]:
    """Plain names of the risk levels 0..K+1 for K+1 decision levels."""
    names = ["safe"]
    for label in level_labels[1:]:
        names.append(f"preventable by {label} or harsher" if label != level_labels[-1] else f"preventable only by {label}")
    names.append("not preventable")
    return names


def moment_prior_strength(events: np.ndarray, trials: np.ndarray, target: np.ndarray, cell_axis: int = -3) -> np.ndarray:
    """Beta prior strength (in cases) for proportions around known targets, by moments.

    Parameters
    ----------
    events, trials : ndarray
        Counts per unit; the unit axis is ``cell_axis``.
    target : ndarray
        The prior mean of each unit's rate, broadcastable to ``events``.

    Returns
    -------
    ndarray
        ``events`` with the unit axis removed: kappa = 1/rho - 1 where rho, the intra-unit
        correlation, solves E[sum n (r - m)^2] = sum m (1 - m) (1 + (n - 1) rho) (Kleinman 1973),
        clipped to :data:`RHO_BOUNDS`.
    """
    n = trials.astype(np.float64)
    m = np.clip(target, 1e-9, 1 - 1e-9)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(n > 0, events / np.where(n > 0, n, 1), m)
    var = m * (1 - m)
    used = n > 0
    s = np.sum(np.where(used, n * (r - m) ** 2, 0.0), axis=cell_axis)
    base = np.sum(np.where(used, var, 0.0), axis=cell_axis)
    denom = np.sum(np.where(used, var * (n - 1), 0.0), axis=cell_axis)
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = (s - base) / denom
    rho = np.where(np.isfinite(rho), rho, RHO_BOUNDS[0])
    rho = np.clip(rho, *RHO_BOUNDS)
    return 1.0 / rho - 1.0


def level_risk_ratios(events: np.ndarray, observed: np.ndarray) -> np.ndarray:
    """Outcome risk at each decision level relative to the most lenient, by chained
    Mantel-Haenszel risk ratios of adjacent levels across cells.

    Parameters
    ----------
    events, observed : ndarray of shape (..., n_cells, J, L)

    Returns
    -------
    ndarray of shape (..., J, L)
        theta_0 = 1 and theta_d = prod_{k <= d} RR_k, where RR_k is the Mantel-Haenszel risk
        ratio of level k against level k-1 over the cells that observed both,
        RR_k = sum_x (a_x n0_x / T_x) / sum_x (c_x n1_x / T_x) with a, n1 the events and cases at
        level k, c, n0 those at level k-1 and T = n0 + n1 (Greenland and Robins 1985). Each RR_k
        is clipped to [0, 1]: under monotonicity a harsher level never raises the risk. Where no
        cell observed both levels (or no events at either), RR_k = 1.

    References
    ----------
    Mantel, N. and Haenszel, W. (1959). Statistical aspects of the analysis of data from
    retrospective studies of disease. JNCI 22(4), 719-748.
    Greenland, S. and Robins, J. M. (1985). Estimation of a common effect parameter from sparse
    follow-up data. Biometrics 41(1), 55-68.
    """
    events = np.asarray(events, dtype=np.float64)
    observed = np.asarray(observed, dtype=np.float64)
    a, n1 = events[..., 1:], observed[..., 1:]
    c, n0 = events[..., :-1], observed[..., :-1]
    total = n0 + n1
    both = (n0 > 0) & (n1 > 0)
    safe_total = np.where(both, total, 1.0)
    num = np.sum(np.where(both, a * n0 / safe_total, 0.0), axis=-3)
    den = np.sum(np.where(both, c * n1 / safe_total, 0.0), axis=-3)
    with np.errstate(invalid="ignore", divide="ignore"):
        rr = np.where(den > 0, num / np.where(den > 0, den, 1.0), 1.0)
    rr = np.clip(rr, 0.0, 1.0)
    ones = np.ones(rr.shape[:-1] + (1,))
    return np.concatenate([ones, np.cumprod(rr, axis=-1)], axis=-1)


def shrunk_baselines(events: np.ndarray, observed: np.ndarray, theta: np.ndarray,
                     factors: Sequence[tuple[sp.csr_matrix, np.ndarray]] | None) -> np.ndarray:
    """Each cell's risk under the most lenient level, shrunk toward a log-linear model's.

    With level ratios theta (common, shape (..., J, L), or per cell, shape (..., n_cells, J, L)),
    a cell's cases count as ``N_x = sum_d n_xd theta_d`` cases under
    the most lenient level (indirect standardization), with ``e_x = sum_d e_xd`` events. A
    main-effects log-linear model of e_x with exposure N_x (:func:`loglinear_rates`) gives each
    cell a model baseline m_x; the cell's baseline (e_x + k m_x) / (N_x + k) shrinks toward it,
    the prior strength k by moments.

    Returns
    -------
    ndarray of shape (..., n_cells, J)
    """
    e = events.sum(axis=-1)
    per_cell = theta if theta.ndim == observed.ndim else theta[..., None, :, :]
    n = np.sum(observed * per_cell, axis=-1)
    if factors:
        target = loglinear_rates(e, n, factors)
    else:
        target = np.broadcast_to(e.sum(axis=-2, keepdims=True) / np.maximum(n.sum(axis=-2, keepdims=True), 1e-300), e.shape)
    target = np.clip(target, 0.0, 1.0)
    k = moment_prior_strength(e, n, target, cell_axis=-2)[..., None, :]
    return (e + k * target) / (n + k)


def shrunk_rates(
    events: np.ndarray,
    observed: np.ndarray,
    factors: Sequence[tuple[sp.csr_matrix, np.ndarray]] | None,
    prior_strength: float | str = "auto",
    zero: np.ndarray | None = None,
    level_terms: bool | str = True,
    translation_limit: float | None = TRANSLATION_LIMIT,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Rates per (cell, outcome, level) shrunk toward a pooled target (beta-binomial).

    The target of cell x at level d is ``b_x * theta_d(x)``: the cell's baseline risk, shrunk
    toward a main-effects log-linear model's (:func:`shrunk_baselines`), times the level's risk
    ratio: common to all cells (:func:`level_risk_ratios`), or varying with the cell columns
    whose level terms the data support (:func:`policy.estimation.target.cell_level_ratios`). It
    carries a cell's own risk, seen at the levels it did observe, to the levels it did not.

    With a ``translation_limit`` D, each shrunk rate stays within D standard errors (the larger
    binomial one, at the shrunk or at the own rate) of the cell's own rate at that level (the
    limited-translation rule of Efron and Morris 1971, 1972): shrinkage can move a sparse cell
    far, a cell with thousands of cases hardly at all, so the bias from a target that fits a
    large cell poorly is at most D of its standard errors and vanishes as its cases grow.

    Parameters
    ----------
    events, observed : ndarray of shape (..., n_cells, J, L)
        Counts pooled over arms.
    factors : list from :func:`factor_matrices`, or None
        The cell columns of the baseline model; None: one overall baseline.
    prior_strength : 'auto' or float
        Prior strength (in cases) of each rate around its target; 'auto' estimates it by
        moments per outcome kind and level.
    zero : ndarray of shape (J, L) of bool, optional
        Structural zeros: the outcome cannot occur at these levels.
    level_terms : bool or 'all'
        Let the level ratios vary with the cell columns of ``factors`` where Akaike's
        information criterion keeps the term; False: common ratios only; 'all': every term.
    translation_limit : float or None
        D of the limited-translation rule; None: no limit.

    Returns
    -------
    rate : ndarray of shape (..., n_cells, J, L)
        Posterior mean rates (the target where a level was never observed).
    weight : ndarray of shape (..., n_cells, J, L)
        Observed cases plus prior strength: the weights of the isotonic projection.
    kappa : ndarray of shape (..., J, L)
        Prior strength used.
    target : ndarray of shape (..., n_cells, J, L)
        The target rates.
    """
    events = np.asarray(events, dtype=np.float64)
    observed = np.asarray(observed, dtype=np.float64)
    theta = level_risk_ratios(events, observed)
    if zero is not None:
        theta = np.where(zero, 0.0, theta)
    if level_terms and factors:
        theta, _ = cell_level_ratios(events, observed, factors, theta, zero, every=level_terms == "all")
    else:
        theta = np.broadcast_to(theta[..., None, :, :], events.shape)
    base = shrunk_baselines(events, observed, theta, factors)
    target = np.clip(base[..., None] * theta, 0.0, 1.0)
    if prior_strength == "auto":
        kappa = moment_prior_strength(events, observed, target)
    else:
        kappa = np.full(events.shape[:-3] + events.shape[-2:], float(prior_strength))
    k = kappa[..., None, :, :]
    weight = observed + k
    with np.errstate(invalid="ignore", divide="ignore"):
        rate = np.where(weight > 0, (events + k * target) / np.where(weight > 0, weight, 1), target)
        if translation_limit is not None:
            seen = observed > 0
            n_safe = np.where(seen, observed, 1.0)
            own = events / n_safe
            # the larger of the two binomial standard errors: a rare outcome's single event in a
            # small cell does not pin the estimate to it
            spread = np.maximum(rate * (1.0 - rate), own * (1.0 - own))
            reach = translation_limit * np.sqrt(spread / n_safe)
            rate = np.where(seen, np.clip(rate, own - reach, own + reach), rate)
    # a level never observed in a cell still needs a positive weight in the projection
    weight = np.where(weight > 0, weight, 1e-6)
    return rate, weight, kappa, target


# ----------------------------------------------------------------------------------------------
# Result type of the stage
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RiskLevels:
    """Estimated risk levels for every cell and outcome kind.

    Attributes
    ----------
    layout : CellLayout
        What each cell is.
    level_values, level_labels : tuple of str
        Decision levels 0..K, most lenient first (L = K + 1 of them).
    outcome_keys, outcome_labels : tuple of str
        Outcome kinds (J of them).
    weights : ndarray of shape (n_cells,)
        Cases (or population weight) per cell.
    p : ndarray of shape (n_cells, J, L)
        P(adverse outcome | decision d, cell), non-increasing in d.
    borrowed : ndarray of shape (n_cells, J, L), bool
        The level was never observed in the cell: its estimate comes from the pooled rate.
    cell_costs : dict of str to ndarray of shape (n_cells,)
        Per-cell values of cost columns.
    structural_zero : ndarray of shape (J, L), bool
        Levels declared to make the outcome impossible.
    prior_strength : ndarray of shape (J, L) or None
        Prior strength used by the estimator (cases), if estimated here.
    source : str
        Where the estimates came from.
    """

    layout: CellLayout
    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    outcome_keys: tuple[str, ...]
    outcome_labels: tuple[str, ...]
    weights: np.ndarray
    p: np.ndarray
    borrowed: np.ndarray
    cell_costs: Mapping[str, np.ndarray] = field(default_factory=dict)
    structural_zero: np.ndarray | None = None
    prior_strength: np.ndarray | None = None
    source: str = ""
    assumptions: tuple[str, ...] = tuple(assumptions_for("risk_levels"))

    @property
    def n_cells(self) -> int:
        return self.layout.n_cells

    @property
    def n_levels(self) -> int:
        return len(self.level_values)

    @property
    def q(self) -> np.ndarray:
        """Risk-level distribution, shape (n_cells, J, L + 1)."""
        return np.clip(risk_level_distribution(self.p), 0.0, 1.0)

    @property
    def risk_level_names(self) -> list[str]:
        return risk_level_names(self.level_labels)

    def with_p(self, p: np.ndarray, source: str | None = None) -> "RiskLevels":
        """The same cells with other outcome probabilities (used by bounds and bootstrap)."""
        from dataclasses import replace

        return replace(self, p=p, source=self.source if source is None else source)

    # -- presentation ------------------------------------------------------------------------
    def shares(self) -> pd.DataFrame:
        """Share of cases at each risk level, overall and by each protected group.

        Columns: ``outcome``, ``attribute`` ("all" overall), ``group``, ``risk_level`` (0..K+1),
        ``risk_level_name``, ``share``, ``cases``.
        """
        q = self.q
        names = self.risk_level_names
        rows = []
        splits = [("all", np.zeros(self.n_cells, dtype=np.int64), ["all"])]
        for attr in self.layout.protected:
            splits.append((attr, self.layout.codes(attr), [str(c) for c in self.layout.categories(attr)]))
        for attr, codes, groups in splits:
            n_groups = len(groups)
            wsum = np.bincount(codes, weights=self.weights, minlength=n_groups)
            for j, key in enumerate(self.outcome_keys):
                for r, name in enumerate(names):
                    share = np.bincount(codes, weights=self.weights * q[:, j, r], minlength=n_groups)
                    for g, group in enumerate(groups):
                        rows.append((key, attr, group, r, name, share[g] / wsum[g] if wsum[g] else np.nan, wsum[g]))
        return pd.DataFrame(rows, columns=["outcome", "attribute", "group", "risk_level", "risk_level_name", "share", "cases"])

    def summary(self, by_group: bool = True) -> pd.DataFrame:
        """Shares of cases at each risk level: one row per (attribute, group, outcome kind),
        one column per risk level. The rows with attribute ``all`` are the overall shares;
        ``by_group=False`` keeps only those, indexed by outcome label."""
        shares = self.shares()
        labels = dict(zip(self.outcome_keys, self.outcome_labels))
        shares["outcome"] = shares["outcome"].map(labels)
        table = shares.pivot_table(index=["attribute", "group", "outcome"], columns="risk_level_name",
                                   values="share", sort=False)
        table = table[self.risk_level_names]
        table.columns.name = None
        if not by_group:
            table = table.loc["all"].droplevel("group")
            table.index.name = None
        return table

    def __str__(self) -> str:
        lines = [f"Risk levels from {self.source} ({self.n_cells:,} cells, {self.weights.sum():,.0f} cases):"]
        lines.append(self.summary(by_group=False).to_string(float_format=lambda v: f"{v:6.1%}"))
        borrowed = self.borrowed.any(axis=1).sum(axis=0)
        lines.append("Cells where a level was never observed (estimate borrowed from the pooled rate): "
                     + ", ".join(f"{lab}: {int(n):,}" for lab, n in zip(self.level_labels, borrowed)))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return f"<p>Risk levels from {self.source}</p>" + self.summary().to_html(float_format=lambda v: f"{v:.1%}")

    def to_frame(self) -> pd.DataFrame:
        """One row per cell x outcome: cell columns, ``outcome``, ``cases``, ``risk_level_0`` ...
        ``risk_level_{K+1}``, ``p_<level>`` and ``borrowed_<level>`` per decision level, and the
        cost columns. Loading it back with :func:`load_risk_level_table` gives the same estimates.
        """
        J, L = len(self.outcome_keys), self.n_levels
        cell = np.repeat(np.arange(self.n_cells), J)
        outcome = np.tile(np.arange(J), self.n_cells)
        out = self.layout.frame.iloc[cell].reset_index(drop=True).copy()
        for c in out.columns:
            out[c] = out[c].astype(object)
        out["outcome"] = np.asarray(self.outcome_keys, dtype=object)[outcome]
        out["cases"] = self.weights[cell]
        q = self.q.reshape(-1, L + 1)
        for r in range(L + 1):
            out[f"risk_level_{r}"] = q[:, r]
        p = self.p.reshape(-1, L)
        b = self.borrowed.reshape(-1, L)
        for d, value in enumerate(self.level_values):
            out[f"p_{value}"] = p[:, d]
        for d, value in enumerate(self.level_values):
            out[f"borrowed_{value}"] = b[:, d]
        for col, values in self.cell_costs.items():
            out[col] = values[cell]
        return out


# ----------------------------------------------------------------------------------------------
# The estimator
# ----------------------------------------------------------------------------------------------
class RiskLevelEstimator:
    """Cell estimator of risk levels: pooled over arms, shrunk, projected to monotone.

    Parameters
    ----------
    prior_strength : 'auto' or float, default 'auto'
        Strength (in cases) of the beta prior of each cell's rate around its target; 'auto'
        estimates it per outcome kind and level by the method of moments.
    target_covariates : sequence of str or None, default None
        Cell columns of the log-linear baseline model that sparse cells borrow from.
        None: every cell column; empty: one overall baseline.
    structural_zeros : mapping of int to int, optional
        Outcome position -> first decision level at which the outcome cannot occur.
    level_terms : bool, default True
        Let each level's risk ratio vary with a target covariate where Akaike's information
        criterion keeps that covariate-by-level term (:mod:`policy.estimation.target`); False:
        one common ratio per level.
    translation_limit : float or None, default None
        A shrunk rate stays within this many standard errors of the cell's own rate at the level
        (limited translation, Efron and Morris 1971); None: no limit.

    Attributes
    ----------
    risk_levels_ : RiskLevels
        The estimates after :meth:`fit`.
    prior_strength_ : ndarray of shape (J, L)
        The prior strength used.
    level_ratios_ : ndarray of shape (J, L)
        Risk at each level relative to the most lenient, averaged over cells as the target
        weighs them.
    level_terms_ : dict of str to list of str
        Outcome key -> the cell columns whose level terms the criterion kept.
    target_ : ndarray of shape (n_cells, J, L)
        The target rates.

    Notes
    -----
    Steps, per outcome kind, vectorized over cells (and over bootstrap replicates):

    1. level risk ratios theta_d by chained Mantel-Haenszel estimators over cells
       (:func:`level_risk_ratios`), clipped so a harsher level never raises risk; where
       Akaike's information criterion keeps covariate-by-level terms, per-cell ratios
       theta_d(x) from a log-linear model with those terms instead
       (:func:`policy.estimation.target.cell_level_ratios`);
    2. each cell's baseline risk b_x by indirect standardization, shrunk toward a main-effects
       log-linear model's fitted by iterative proportional fitting (:func:`shrunk_baselines`);
    3. each (cell, level) rate shrunk toward the target b_x theta_d(x) (beta-binomial, prior
       strength by moments, Kleinman 1973), with a ``translation_limit`` kept within that many
       standard errors of the cell's own rate (Efron and Morris 1971); a level never observed in a cell
       takes the target;
    4. projection onto non-increasing sequences over the levels, weighted by observed cases
       plus prior strength (:func:`isotonic_nonincreasing`).

    Outputs flag the levels a cell never observed (``borrowed``).
    """

    def __init__(self, prior_strength: float | str = "auto", target_covariates: Sequence[str] | None = None,
                 structural_zeros: Mapping[int, int] | None = None, level_terms: bool = True,
                 translation_limit: float | None = TRANSLATION_LIMIT):
        if translation_limit is not None and not translation_limit > 0:
            raise InputError(f"translation_limit must be a number > 0 or None; got {translation_limit!r}.")
        self.level_terms = level_terms if level_terms == "all" else bool(level_terms)
        self.translation_limit = translation_limit
        self.prior_strength = prior_strength
        self.target_covariates = None if target_covariates is None else tuple(target_covariates)
        self.structural_zeros = dict(structural_zeros or {})

    @classmethod
    def from_scenario(cls, scenario: Scenario) -> "RiskLevelEstimator":
        zeros = {j: o.impossible_from for j, o in enumerate(scenario.outcomes) if o.impossible_from is not None}
        est = scenario.estimator
        return cls(est.prior_strength, est.target_covariates, zeros, est.level_terms, est.translation_limit)

    def zero_mask(self, J: int, L: int) -> np.ndarray:
        mask = np.zeros((J, L), dtype=bool)
        for j, d in self.structural_zeros.items():
            mask[j, d:] = True
        return mask

    def design(self, layout: CellLayout, n_levels: int | None = None) -> list:
        """The baseline model's structure for these cells (:func:`factor_matrices`)."""
        columns = layout.columns if self.target_covariates is None else self.target_covariates
        for col in columns:
            if col not in layout.columns:
                raise InputError(f"target_covariates lists {col!r}, which is not a cell column; expected one of: {', '.join(layout.columns)}.")
        return factor_matrices(layout, columns)

    def estimate_p(self, events: np.ndarray, observed: np.ndarray, design: list) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Monotone outcome probabilities from counts pooled over arms.

        Parameters
        ----------
        events, observed : ndarray of shape (..., n_cells, J, L)
        design : list
            From :meth:`design`.

        Returns
        -------
        p : ndarray of shape (..., n_cells, J, L)
        kappa : ndarray of shape (..., J, L)
        target : ndarray of shape (..., n_cells, J, L)
        """
        J, L = events.shape[-2:]
        zero = self.zero_mask(J, L)
        # structural zeros are known, not estimated
        observed = np.where(zero, 0, observed)
        events = np.where(zero, 0, events)
        rate, weight, kappa, target = shrunk_rates(events, observed, design, self.prior_strength, zero,
                                                   self.level_terms, self.translation_limit)
        rate = np.where(zero, 0.0, rate)
        p = isotonic_nonincreasing(rate, weight)
        return np.clip(np.where(zero, 0.0, p), 0.0, 1.0), kappa, target

    def fit(self, cells: CellTable, level_labels: Sequence[str] | None = None,
            outcome_labels: Sequence[str] | None = None) -> "RiskLevelEstimator":
        """Estimate risk levels from a cell table."""
        events = cells.events.sum(axis=1)
        observed = cells.observed.sum(axis=1)
        J, L = events.shape[1:]
        zero = self.zero_mask(J, L)
        seen = observed.sum(axis=0) > 0
        missing = ~seen & ~zero
        if missing.any():
            j, d = map(int, np.argwhere(missing)[0])
            raise InputError(
                f"{cells.source}: outcome {cells.outcomes[j]!r} is never observed among cases given level "
                f"{cells.levels[d]!r}; the data cannot tell how cases fare under it. Declare it impossible "
                "there (impossible_from) or supply risk levels estimated elsewhere."
            )
        p, kappa, target = self.estimate_p(events, observed, self.design(cells.layout, L))
        self.prior_strength_ = kappa
        self.target_ = target
        # the target is baseline x level ratio, so its level profile gives the ratios back
        level_sums = target.sum(axis=0)
        self.level_ratios_ = level_sums / np.where(level_sums[:, :1] > 0, level_sums[:, :1], 1.0)
        design = self.design(cells.layout, L)
        names = cells.layout.columns if self.target_covariates is None else self.target_covariates
        kept = (select_level_terms(np.where(zero, 0, events), np.where(zero, 0, observed), design, zero)[0]
                if self.level_terms and design else np.zeros((len(names), J), dtype=bool))
        self.level_terms_ = {key: [c for u, c in enumerate(names) if kept[u, j]] for j, key in enumerate(cells.outcomes)}
        self.risk_levels_ = RiskLevels(
            layout=cells.layout,
            level_values=cells.levels,
            level_labels=tuple(level_labels or cells.levels),
            outcome_keys=cells.outcomes,
            outcome_labels=tuple(outcome_labels or cells.outcomes),
            weights=cells.weights.astype(np.float64),
            p=p,
            borrowed=(observed == 0) & ~zero,
            cell_costs=dict(cells.cell_costs),
            structural_zero=zero,
            prior_strength=kappa,
            source=f"cell estimator on {cells.source}",
        )
        return self
