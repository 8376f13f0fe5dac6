"""Cross-fitted expected cost of the estimated optimum: chosen on some cases, scored on others.

The cost-minimizing rule is chosen on the data it is then scored on, so its in-sample expected
cost is optimistic (the winner's curse of an argmin). Cross-fitting removes the optimism: split
the cases into K folds, choose the rule on K - 1 of them, score it on the held-out fold, and add
the held-out costs over the folds (sample splitting for the value of an estimated policy;
Chernozhukov et al. 2018 for cross-fitting, Athey and Wager 2021 for policy learning). Every
compared rule is scored on the same held-out folds, so the cross-fitted regret of a compared
rule against the chosen procedure is paired by fold:

    CF(rule)   = sum_k W_k cost_k(rule_k) / sum_k W_k,
    regret_CF  = CF(rule) - CF(optimum),
    optimism   = CF(optimum) - in-sample cost of the optimum,

with W_k the cases of fold k, rule_k the rule chosen on the other folds (fixed rules, and what
courts did as counted on the full data, are the same in every fold), and cost_k the expected
cost under risk levels re-estimated on fold k alone.

Folds are drawn on counts, never case by case: within each cell x arm the N cases go to the K
folds in sizes differing by at most one (a stratified split), and the cases of each count slot
(decision level x joint outcome state) are dealt to the folds by a multivariate hypergeometric
draw, one slot after the other, against the folds' remaining room. That is exactly the
distribution of the counts when the cell x arm's cases are permuted at random and cut into
folds. Without joint outcome states (a counts table) the cases per level are dealt this way,
then the observed cases per outcome kind among them and the events among those (outcome kinds
of one case treated as independent, as in the bootstrap's fallback). Every fold is estimated
and scored in one batched call, in this process: the result depends only on the seed.

References
----------
Chernozhukov, V., Chetverikov, D., Demirer, M., Duflo, E., Hansen, C., Newey, W. and Robins, J.
(2018). Double/debiased machine learning for treatment and structural parameters. The
Econometrics Journal 21(1), C1-C68.
Athey, S. and Wager, S. (2021). Policy learning with observational data. Econometrica 89(1),
133-161.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from typing import Any, Sequence

import numpy as np
import pandas as pd

from policy.decision.costs import Costs
from policy.decision.rules import Rule
from policy.decision.solve import argmin_lenient
from policy.errors import InputError, PolicyError
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellTable
from policy.assessment.uncertainty import one_blas_thread

__all__ = ["FoldCounts", "multivariate_hypergeometric", "split_folds", "CrossFit", "cross_fit", "check_folds"]

#: kinds of rule chosen on the data (their cross-fitted minus in-sample cost is their optimism)
CHOSEN = ("optimal", "constrained")
#: a fixed word mixed into the root seed, so that the folds' stream differs from the bootstrap's
_STREAM = 0x43524F53


def check_folds(folds: int, where: str = "folds") -> int:
    """0 (no cross-fitting) or at least 2 folds."""
    if isinstance(folds, bool) or not isinstance(folds, (int, np.integer)) or folds < 0 or folds == 1:
        raise InputError(f"{where} must be 0 (no cross-fitting) or a whole number of at least 2 folds; got {folds!r}.")
    return int(folds)


def multivariate_hypergeometric(rng: np.random.Generator, colors: np.ndarray, nsample: np.ndarray) -> np.ndarray:
    """Counts of each colour in a draw of ``nsample`` without replacement, for many urns at once.

    Parameters
    ----------
    colors : ndarray of int, shape (..., K)
        Items of each of K colours in each urn.
    nsample : ndarray of int, shape (...)
        Items drawn from each urn (at most its total).

    Returns
    -------
    ndarray of int, shape (..., K)

    Notes
    -----
    Colour by colour: the count of colour k is hypergeometric given the items still to draw and
    the items of colours k..K-1 left (the conditional form of the distribution; Johnson, Kotz and
    Balakrishnan 1997, Discrete Multivariate Distributions, ch. 39).
    """
    colors = np.asarray(colors, dtype=np.int64)
    left = np.asarray(nsample, dtype=np.int64).copy()
    K = colors.shape[-1]
    out = np.zeros(colors.shape, dtype=np.int64)
    rest = colors.sum(axis=-1)
    for k in range(K - 1):
        rest = rest - colors[..., k]
        x = rng.hypergeometric(colors[..., k], rest, left)
        out[..., k] = x
        left = left - x
    out[..., K - 1] = left
    return out


def _fold_sizes(rng: np.random.Generator, total: np.ndarray, K: int) -> np.ndarray:
    """Sizes (..., K) differing by at most one, the larger ones at a random offset per stratum."""
    base, extra = np.divmod(total, K)
    offset = rng.integers(0, K, size=total.shape)
    k = np.arange(K)
    return base[..., None] + (((k - offset[..., None]) % K) < extra[..., None])


def _deal(rng: np.random.Generator, slots: np.ndarray, K: int) -> np.ndarray:
    """Deal each stratum's cases, counted per slot (G, S), to K folds: (G, S, K)."""
    room = _fold_sizes(rng, slots.sum(axis=1), K)
    out = np.zeros(slots.shape + (K,), dtype=np.int64)
    # only the strata with cases in the slot draw (a draw of nothing takes no random numbers, so
    # the folds are the same as drawing every stratum)
    for s in np.flatnonzero(slots.any(axis=0)):
        rows = np.flatnonzero(slots[:, s])
        x = multivariate_hypergeometric(rng, room[rows], slots[rows, s])
        out[rows, s] = x
        room[rows] -= x
    return out


@dataclass(frozen=True)
class FoldCounts:
    """Counts of each fold (leading axis K), shaped like the cell table's."""

    cases: np.ndarray     # (K, n, A, L)
    observed: np.ndarray  # (K, n, A, J, L)
    events: np.ndarray    # (K, n, A, J, L)


def split_folds(cells: CellTable, folds: int, rng: np.random.Generator) -> FoldCounts:
    """Split a cell table's cases into ``folds`` folds stratified by cell and arm (module notes)."""
    n, A, L = cells.cases.shape
    J = len(cells.outcomes)
    K = folds
    if cells.state_counts is not None:
        S = cells.state_counts.shape[-1]
        dealt = _deal(rng, cells.state_counts.reshape(n * A, L * S).astype(np.int64), K)  # (G, L*S, K)
        states = np.moveaxis(dealt.reshape(n, A, L, S, K), -1, 0)  # (K, n, A, L, S)
        digit = (np.arange(S)[:, None] // 3 ** (J - 1 - np.arange(J))[None, :]) % 3  # (S, J)
        cases = states.sum(axis=-1)
        observed = np.einsum("knals,sj->knajl", states, (digit > 0).astype(np.int64))
        events = np.einsum("knals,sj->knajl", states, (digit == 2).astype(np.int64))
    else:
        dealt = _deal(rng, cells.cases.reshape(n * A, L).astype(np.int64), K).reshape(n, A, L, K)
        room = np.broadcast_to(dealt[:, :, None], (n, A, J, L, K))
        obs = multivariate_hypergeometric(rng, room, cells.observed.astype(np.int64))
        ev = multivariate_hypergeometric(rng, obs, cells.events.astype(np.int64))
        cases = np.moveaxis(dealt, -1, 0)
        observed, events = np.moveaxis(obs, -1, 0), np.moveaxis(ev, -1, 0)
    return FoldCounts(cases.astype(np.float64), observed.astype(np.float64), events.astype(np.float64))


@dataclass(frozen=True)
class CrossFit:
    """In-sample and cross-fitted expected cost of every compared rule (module notes).

    Attributes
    ----------
    names, kinds : tuple of str
        The compared rules, the chosen ones (``optimal``, ``constrained``) first.
    in_sample : ndarray of shape (R,)
        Expected cost per case on the full data (the chosen rules chosen on them).
    fold_costs : ndarray of shape (repeats * K, R)
        Expected cost per case of each rule on each held-out fold (NaN where a solve failed).
    fold_cases : ndarray of shape (repeats * K,)
    folds, repeats, seed : int
    unit : str
    """

    names: tuple
    kinds: tuple
    in_sample: np.ndarray
    fold_costs: np.ndarray
    fold_cases: np.ndarray
    folds: int
    repeats: int
    seed: int
    unit: str = ""

    @property
    def cross_fitted(self) -> np.ndarray:
        """Cross-fitted expected cost per case of each rule, shape (R,): held-out costs weighted by
        each fold's cases (averaged over repeats)."""
        w = self.fold_cases[:, None] * np.isfinite(self.fold_costs)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.nansum(w * self.fold_costs, axis=0) / w.sum(axis=0)

    @property
    def split_sd(self) -> np.ndarray:
        """Standard deviation over the independent splits of each rule's cross-fitted cost per
        case, shape (R,) (NaN with one split): how much the figure owes to the draw of the folds."""
        if self.repeats < 2:
            return np.full(len(self.names), np.nan)
        costs = self.fold_costs.reshape(self.repeats, self.folds, -1)
        cases = self.fold_cases.reshape(self.repeats, self.folds, 1) * np.isfinite(costs)
        with np.errstate(invalid="ignore", divide="ignore"):
            per_split = np.nansum(cases * costs, axis=1) / cases.sum(axis=1)
        return np.std(per_split, axis=0, ddof=1)

    @property
    def regret_fold_se(self) -> np.ndarray:
        """Standard error of the cross-fitted regret from its spread over the held-out folds,
        sd_k(regret_k) / sqrt(number of folds), shape (R,). A rough guide: the folds' estimates
        are not independent, and no unbiased estimator of this variance exists (Bengio and
        Grandvalet 2004, No unbiased estimator of the variance of K-fold cross-validation,
        Journal of Machine Learning Research 5, 1089-1105)."""
        regret = self.fold_costs - self.fold_costs[:, :1]
        n = np.isfinite(regret).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return np.where(n >= 2, np.nanstd(regret, axis=0, ddof=1) / np.sqrt(n), np.nan)

    def to_frame(self) -> pd.DataFrame:
        """One row per rule (columns in docs/outputs.md)."""
        cf, ins = 1000.0 * self.cross_fitted, 1000.0 * self.in_sample
        return pd.DataFrame({
            "rule": list(self.names),
            "kind": list(self.kinds),
            "cost_per_1000_cases_in_sample": ins,
            "cost_per_1000_cases_cross_fitted": cf,
            "cross_fitted_minus_in_sample": cf - ins,
            "cross_fitted_split_sd": 1000.0 * self.split_sd,
            "regret_per_1000_cases_in_sample": ins - ins[0],
            "regret_per_1000_cases_cross_fitted": cf - cf[0],
            "regret_cross_fitted_fold_se": 1000.0 * self.regret_fold_se,
            "folds": self.folds,
            "repeats": self.repeats,
            "seed": self.seed,
        })

    def lines(self) -> list[str]:
        """Plain-words reading: the optimism of the chosen rule, and regret in and out of sample."""
        frame = self.to_frame()
        first = frame.iloc[0]
        out = [f"{first['rule']}: {first['cost_per_1000_cases_in_sample']:,.0f} per 1,000 cases in sample, "
               f"{first['cost_per_1000_cases_cross_fitted']:,.0f} cross-fitted ({self.folds} folds"
               + (f", {self.repeats} splits" if self.repeats > 1 else "")
               + f"): optimism {first['cross_fitted_minus_in_sample']:+,.0f}"
               + (f" (sd over splits {first['cross_fitted_split_sd']:,.0f})." if self.repeats > 1 else
                  " (one split of the cases; --fold-repeats averages more).")]
        for _, r in frame.iloc[1:].iterrows():
            if not np.isfinite(r["regret_per_1000_cases_cross_fitted"]):
                out.append(f"{r['rule']}: not cross-fitted (its figures cannot be computed on these data, e.g. an arm "
                           "with no cases).")
                continue
            shift = f"{r['cross_fitted_minus_in_sample']:+,.0f}"
            move = (f"its optimism {shift}" if r["kind"] in CHOSEN else
                    f"its own cost moves by {shift} scored on held-out folds")
            out.append(f"{r['rule']}: regret {r['regret_per_1000_cases_in_sample']:,.0f} in sample, "
                       f"{r['regret_per_1000_cases_cross_fitted']:,.0f} cross-fitted (fold standard error "
                       f"{r['regret_cross_fitted_fold_se']:,.0f}; {move}).")
        return out

    def __str__(self) -> str:
        return "\n".join(["Cross-fitted expected cost (chosen on other folds, scored on the held-out one):"] + self.lines())


def cross_fit(cells: CellTable, risk_levels: RiskLevels, costs: Costs, estimator, rules: Sequence[Rule],
              solvers: Sequence[Any] = (), folds: int = 5, seed: int | None = None, repeats: int = 1) -> CrossFit:
    """Cross-fitted expected cost and regret of the estimated optimum and every compared rule.

    Parameters
    ----------
    cells : CellTable
    risk_levels : RiskLevels
        The full data's estimates (their layout and labels; their costs are the in-sample figures).
    costs : Costs
    estimator : RiskLevelEstimator
    rules : sequence of Rule
        The compared rules: first the cost-minimizing rule, then one rule per ``solvers`` entry
        (chosen again on each fold's training part), then fixed rules (scored as they are,
        what courts did included).
    solvers : sequence of callable
        ``solver(risk_levels, costs) -> Rule or decision probabilities per cell``.
    folds : int
        K >= 2.
    seed : int, optional
        Root seed of the split (None: fresh entropy, recorded).
    repeats : int
        Independent splits averaged (default 1).
    """
    K = check_folds(folds)
    if K < 2:
        raise InputError("cross_fit needs at least 2 folds.")
    if repeats < 1:
        raise InputError(f"repeats must be at least 1; got {repeats!r}.")
    root = np.random.SeedSequence(seed)
    seed_used = int(root.entropy)
    rng = np.random.default_rng(np.random.SeedSequence([seed_used, _STREAM]))
    parts = [split_folds(cells, K, rng) for _ in range(repeats)]
    held = FoldCounts(*(np.concatenate([getattr(p, f) for p in parts]) for f in ("cases", "observed", "events")))
    with one_blas_thread():
        return _fit(cells, risk_levels, costs, estimator, rules, solvers, held, K, int(repeats), seed_used)


def _fit(cells, risk_levels, costs, estimator, rules, solvers, held, K, repeats, seed_used) -> CrossFit:
    from policy.decision.evaluate import evaluate

    total = FoldCounts(cells.cases[None].astype(np.float64), cells.observed[None].astype(np.float64),
                       cells.events[None].astype(np.float64))
    train = FoldCounts(*(getattr(total, f) - getattr(held, f) for f in ("cases", "observed", "events")))
    b = held.cases.shape[0]
    design = estimator.design(cells.layout, len(cells.levels))
    # every training part and held-out fold estimated in one batched call
    p, _, _ = estimator.estimate_p(np.concatenate([train.events, held.events]).sum(axis=2),
                                   np.concatenate([train.observed, held.observed]).sum(axis=2), design)
    p_train, p_held = p[:b], p[b:]
    w_train, w_held = train.cases.sum(axis=(2, 3)), held.cases.sum(axis=(2, 3))
    rule_index, groups = risk_levels.layout.rule_index()
    G, L = len(groups), risk_levels.n_levels
    per_train = costs.expected(p_train)
    member = np.eye(G)[rule_index]
    best = np.eye(L)[argmin_lenient(member.T @ (w_train[..., None] * per_train))][:, rule_index]  # (b, n, L)
    deltas = [best]
    for solver in solvers:
        solved = np.full(best.shape, np.nan)
        for i in range(b):
            if hasattr(solver, "start_batch"):
                solver.start_batch()
            try:
                got = solver(replace(risk_levels, p=p_train[i], weights=w_train[i]), costs)
            except PolicyError:
                continue
            solved[i] = got.cell_delta if isinstance(got, Rule) else got
        deltas.append(solved)
    deltas += [np.broadcast_to(r.cell_delta, best.shape) for r in rules[1 + len(solvers):]]
    per_held = costs.expected(p_held)
    W = w_held.sum(axis=1)
    fold_costs = np.stack([np.einsum("bx,bxd,bxd->b", w_held, d, per_held) / W for d in deltas], axis=1)
    in_sample = np.array([evaluate(r, risk_levels, costs).cost_per_case for r in rules])
    return CrossFit(tuple(r.name for r in rules), tuple(r.kind for r in rules), in_sample, fold_costs, W,
                    K, repeats, seed_used, costs.unit)
