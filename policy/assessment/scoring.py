"""Scoring many rules in each bootstrap replicate: one matrix product per replicate for every
rule's expected cost, outcome rates, decision shares, gaps between groups and risk-level figures,
with rules that are re-solved per replicate (the optimum, the constrained optimum) among them.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any, Callable, Sequence

import numpy as np

from policy.inputs.cells import CellLayout
from policy.decision.costs import Costs
from policy.errors import PolicyError
from policy.decision.evaluate import group_matrix
from policy.decision.rules import Rule
from policy.decision.solve import argmin_lenient
from policy.estimation.strata import RiskLevelEstimator, RiskLevels, risk_level_distribution
from policy.decision.candidates import CandidateSpec, aid_rule, candidate_rule, candidate_rules, observed_delta, observed_rules  # noqa: F401
from policy.assessment.stability import resolved_figures
from policy.assessment.uncertainty import ResampledCounts



#: ``solver(risk_levels, costs)`` -> a Rule, or decision probabilities per cell (n_cells, L)
RuleSolver = Callable[[RiskLevels, Costs], "Rule | np.ndarray"]


class ConstrainedSolver:
    """Re-solves the scenario's constrained optimum in each replicate.

    Picklable: each process builds its own linear program (:class:`policy.decision.constrained.ConstrainedProblem`)
    on first use and then only reloads the replicate's risk levels, warm-starting from the last
    basis. Returns the decision probabilities per cell.
    """

    def __init__(self, specs: Sequence[Any], settings: Any = None):
        self.specs = tuple(specs)
        self.settings = settings
        self._problem = None

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state["_problem"] = None
        return state

    def start_batch(self) -> None:
        """Forget the last basis (the next solve starts from the unconstrained optimum's): a chunk
        of replicates then gives the same bits in any process."""
        if self._problem is not None:
            self._problem.forget_basis()

    def __call__(self, risk_levels: RiskLevels, costs: Costs) -> np.ndarray:
        from policy.decision.constrained import ConstrainedProblem

        if self._problem is None or self._problem.risk_levels.layout is not risk_levels.layout:
            self._problem = ConstrainedProblem(risk_levels, costs, self.specs, settings=self.settings)
        else:
            self._problem.set_risk_levels(risk_levels, costs)
        return self._problem.solve_lp().delta[self._problem.index]

# ----------------------------------------------------------------------------------------------
def _tail(x: np.ndarray) -> np.ndarray:
    """Sum over levels >= t for t = 1..L-1 along the last axis."""
    return np.flip(np.cumsum(np.flip(x, axis=-1), axis=-1), axis=-1)[..., 1:]


def _gap(values: np.ndarray) -> np.ndarray:
    """Largest minus smallest along the last axis, over defined values; NaN with fewer than two."""
    ok = np.isfinite(values)
    hi = np.where(ok, values, -np.inf).max(axis=-1)
    lo = np.where(ok, values, np.inf).min(axis=-1)
    return np.where(ok.sum(axis=-1) >= 2, hi - lo, np.nan)


def score_rules(deltas: Sequence[np.ndarray], p: np.ndarray, w: np.ndarray, costs: Costs, onehot: np.ndarray,
                attributes: Sequence[np.ndarray], reference: int = 0) -> dict[str, np.ndarray]:
    """Evaluate several rules at once under a batch of risk-level estimates.

    The figures are those of :func:`policy.decision.evaluate.evaluate` (whose formulas they repeat,
    vectorized over a leading batch axis and over rules; the tests check that both agree).

    Parameters
    ----------
    deltas : sequence of ndarray of shape (b, n_cells, L) or (n_cells, L)
        Decision probabilities of each rule.
    p : ndarray of shape (b, n_cells, J, L)
    w : ndarray of shape (b, n_cells)
    costs : Costs
    onehot : ndarray of shape (n_cells, G)
        Group membership (:func:`policy.decision.evaluate.group_matrix`), 'all' first.
    attributes : sequence of ndarray
        Column positions in ``onehot`` of each protected attribute's groups.
    reference : int
        Position of the rule that regret and agreement are measured against.

    Returns
    -------
    dict
        ``cost`` (b, R) per case, ``regret`` (b, R), ``agreement`` (b, R), ``rates`` (b, R, J),
        ``shares`` (b, R, L), ``safe_harsher`` and ``too_lenient`` (b, R, J), ``principal_gap``
        (b, R, n_attr, J, L + 1, L - 1), ``parity_gap`` (b, R, n_attr, L - 1), ``at_least``
        (b, R, G, J, L + 1, L - 1) and ``stratum_cases`` (b, G, J, L + 1).
    """
    b = p.shape[0]
    q = np.clip(risk_level_distribution(p), 0.0, 1.0)
    per_case = costs.expected(p)  # (b, n, L)
    W = w.sum(axis=-1)
    D = np.stack([np.broadcast_to(d, (b,) + d.shape[-2:]) for d in deltas], axis=1)  # (b, R, n, L)
    wd = w[:, None, :, None] * D
    cost = np.einsum("brxd,bxd->br", wd, per_case) / W[:, None]
    rates = np.einsum("brxd,bxjd->brj", wd, p, optimize=True) / W[:, None, None]
    shares = wd.sum(axis=2) / W[:, None, None]
    agreement = np.minimum(wd, wd[:, reference:reference + 1]).sum(axis=(2, 3)) / W[:, None]
    gw = w @ onehot  # (b, G)
    with np.errstate(invalid="ignore", divide="ignore"):
        g_shares = np.einsum("xg,brxd->brgd", onehot, wd, optimize=True) / gw[:, None, :, None]
    # cases per (rule, group, outcome, risk level, decision): sum_x w q_jr(x) delta(d|x) over the
    # group's cells, as policy.decision.evaluate.stratum_decision_mass, with one matrix product per replicate
    n, R = D.shape[2], D.shape[1]
    J, K2 = q.shape[-2:]
    wq = (w[:, :, None, None] * q).reshape(b, n, 1, J * K2) * onehot[None, :, :, None]  # (b, n, G, J*K2)
    mass = np.swapaxes(wq.reshape(b, n, -1), 1, 2) @ np.swapaxes(D, 1, 2).reshape(b, n, R * D.shape[-1])
    mass = np.moveaxis(mass.reshape(b, onehot.shape[1], J, K2, R, D.shape[-1]), 4, 1)  # (b, R, G, J, K2, L)
    total = mass.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        at_least = _tail(mass) / total[..., None]
        overall = mass[:, :, 0]  # (b, R, J, L+1, L)
        safe = overall[..., 0, :]
        safe_harsher = safe[..., 1:].sum(axis=-1) / safe.sum(axis=-1)
        L = D.shape[-1]
        prev = overall[..., 1:L, :]  # risk levels 1..K
        lenient = np.tril(np.ones((L - 1, L)))  # risk level k = i + 1 is not prevented by levels d <= i
        too_lenient = (prev * lenient).sum(axis=(-2, -1)) / prev.sum(axis=(-2, -1))
    g_at_least = _tail(g_shares)  # (b, R, G, L-1)
    principal = np.stack([_gap(np.moveaxis(at_least[:, :, idx], 2, -1)) for idx in attributes], axis=2) if attributes else \
        np.empty((b, D.shape[1], 0) + at_least.shape[3:])
    parity = np.stack([_gap(np.moveaxis(g_at_least[:, :, idx], 2, -1)) for idx in attributes], axis=2) if attributes else \
        np.empty((b, D.shape[1], 0, L - 1))
    return {
        "cost": cost,
        "regret": cost - cost[:, reference:reference + 1],
        "agreement": agreement,
        "rates": rates,
        "shares": shares,
        "safe_harsher": safe_harsher,
        "too_lenient": too_lenient,
        "principal_gap": principal,
        "parity_gap": parity,
        "at_least": at_least,
        "stratum_cases": total[:, 0],
    }


class ComparisonStatistic:
    """Everything :func:`compare` reports, as a function of one batch of resampled counts.

    Picklable, so worker processes can run it. In each replicate: risk levels re-estimated,
    the unconstrained optimum re-solved (and any ``solvers`` re-run), observed rules re-counted,
    every rule scored; plus the aid's effect by risk level, the intention-to-treat differences
    and the risk-level shares.
    """

    def __init__(self, estimator: RiskLevelEstimator, design: np.ndarray, costs: Costs, layout: CellLayout,
                 fixed: Sequence[np.ndarray], has_arm: bool, n_arms: int,
                 solvers: Sequence[RuleSolver] = (), base: RiskLevels | None = None,
                 chosen: Sequence[Rule] = (), world: np.ndarray | None = None):
        self.estimator = estimator
        self.design = design
        self.costs = costs
        self.rule_index, groups = layout.rule_index()
        self.n_rule_cells = len(groups)
        self.fixed = [np.asarray(d, dtype=np.float64) for d in fixed]
        self.has_arm = has_arm
        self.n_arms = n_arms
        self.solvers = list(solvers)
        self.base = base
        self.onehot, labels = group_matrix(layout)
        attrs = list(dict.fromkeys(a for a, _ in labels if a != "all"))
        self.attributes = [np.array([i for i, (a, _) in enumerate(labels) if a == attr]) for attr in attrs]
        # the optimum and solved rules chosen on the full data, held fixed and scored in every
        # replicate (the re-solved ones then only give each rule cell's stability)
        self.chosen = [np.asarray(r.cell_delta, dtype=np.float64) for r in chosen]
        self.chosen_index = [(r.index, r.n_rule_cells) for r in chosen[1:]]
        # the bootstrap world's expected cost per case of each level and its cases per cell: the
        # re-solved rules' cost there is what their in-sample cost estimates (policy.assessment.selection)
        self.world = None
        if world is not None and base is not None:
            self.world = (costs.expected(np.asarray(world, dtype=np.float64)[None])[0], np.asarray(base.weights, dtype=np.float64))

    def __call__(self, batch: ResampledCounts) -> dict[str, np.ndarray]:
        p, _, _ = self.estimator.estimate_p(batch.pooled_events, batch.pooled_observed, self.design)
        w = batch.weights
        b, n, J, L = p.shape
        # the unconstrained optimum of each replicate (ties to the more lenient level)
        per_case = self.costs.expected(p)
        member = np.eye(self.n_rule_cells)[self.rule_index]  # (n, G)
        total = member.T @ (w[..., None] * per_case)  # (b, G, L)
        levels = argmin_lenient(total)  # (b, G)
        best = np.eye(L)[levels][:, self.rule_index]  # (b, n, L)
        deltas = [best]
        failed = np.zeros((b, len(self.solvers)), dtype=bool)
        for k, solver in enumerate(self.solvers):
            if hasattr(solver, "start_batch"):
                solver.start_batch()
            solved = np.full((b, n, L), np.nan)
            for i in range(b):
                try:
                    got = solver(replace(self.base, p=p[i], weights=w[i].astype(np.float64)), self.costs)
                except PolicyError:  # e.g. constraints that cannot all hold in this replicate
                    failed[i, k] = True
                    continue
                solved[i] = got.cell_delta if isinstance(got, Rule) else got
            deltas.append(solved)
        deltas += self.fixed
        arm_deltas = [observed_delta(batch.cases[:, :, a, :], self.rule_index, self.n_rule_cells)[0] for a in range(self.n_arms)]
        if self.chosen:
            out = score_rules(self.chosen + self.fixed + arm_deltas, p, w, self.costs, self.onehot, self.attributes)
            out.update(resolved_figures(levels, deltas[1:len(self.solvers) + 1], self.chosen_index, per_case, w, best,
                                        self.world))
        else:
            out = score_rules(deltas + arm_deltas, p, w, self.costs, self.onehot, self.attributes)
        q = np.clip(risk_level_distribution(p), 0.0, 1.0)
        gw = w @ self.onehot
        with np.errstate(invalid="ignore", divide="ignore"):
            out["risk_level_share"] = np.einsum("xg,bx,bxjr->bgjr", self.onehot, w, q, optimize=True) / gw[:, :, None, None]
        if self.has_arm:
            shown, not_shown = out["at_least"][:, -1], out["at_least"][:, -2]
            out["effect_shown"], out["effect_not_shown"] = shown, not_shown
            out["effect"] = shown - not_shown
            arm_cases = np.einsum("xg,bxad->bgad", self.onehot, batch.cases, optimize=True)  # (b, G, A, L)
            with np.errstate(invalid="ignore", divide="ignore"):
                arm_share = arm_cases / arm_cases.sum(axis=-1, keepdims=True)
            out["itt_share"] = arm_share  # (b, G, A, L)
            out["itt_share_diff"] = arm_share[:, :, 1] - arm_share[:, :, 0]
            out["itt_at_least_diff"] = _tail(arm_share[:, :, 1]) - _tail(arm_share[:, :, 0])
            out["itt_cases"] = arm_cases.sum(axis=-1)
        del out["at_least"]  # large; the effect keeps what is reported
        out["solver_failed"] = failed
        return out
