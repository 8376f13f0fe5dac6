"""Comparing release rules with what courts did, with and without the aid, with intervals.

Every rule is scored by the same evaluation under the estimated risk levels (method notes,
section 6): the unconstrained optimum, the aid's recommendation, the committee's candidate rules
from the scenario's ``[[candidate_rules]]``, and the *observed* rule of each arm (the empirical
decision distribution per cell among cases where the aid was not shown, and where it was).
With ``[[constraints]]`` the constrained optimum (:mod:`policy.decision.constrained`) joins them; other
rules solved per replicate join through ``solvers``.

The effect of showing the aid, by risk level, is

    P(D >= t | R_j = r, A = a, shown) - P(D >= t | R_j = r, A = a, not shown),

each term computed as in section 5 from the observed per-cell decision distribution of the arm,
weighted by every case's w(x) P(R_j = r | x). With a randomized arm both arms share one
population, so the difference is the aid's effect on decisions within the risk level (under
the assumptions listed beside it). The intention-to-treat difference is the plain difference
in decision shares between the arms.

Every figure is recomputed in each bootstrap replicate (:mod:`policy.assessment.uncertainty`): risk levels
re-estimated, the optimum re-solved, the observed rules re-counted, all vectorized across the
replicates of a chunk.

A cell with no case in an arm has no observed decisions for that arm; its decision mix is
borrowed from the same arm's cases in the cell's rule cell (or, failing that, from the whole
arm), and the outputs report how many cases sit in such cells.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from policy.cautions import CAUTIONS, assumptions_for
from policy.inputs.cells import CellLayout, CellTable
from policy.decision.costs import Costs, costs_from_scenario
from policy.errors import InputError, PolicyError
from policy.decision.evaluate import evaluate, group_matrix
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario
from policy.decision.solve import argmin_lenient, optimal_rule
from policy.estimation.strata import RiskLevelEstimator, RiskLevels, risk_level_distribution
from policy.decision.candidates import CandidateSpec, aid_rule, candidate_rule, candidate_rules, observed_delta, observed_rules  # noqa: F401
from policy.assessment.uncertainty import BootstrapResult, ResampledCounts, TaskRunner, UncertaintySettings, bootstrap, validate_settings

__all__ = [
    "CandidateSpec",
    "candidate_rule",
    "candidate_rules",
    "observed_rules",
    "aid_rule",
    "observed_delta",
    "score_rules",
    "ComparisonStatistic",
    "Comparison",
    "compare",
]

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
                 solvers: Sequence[RuleSolver] = (), base: RiskLevels | None = None):
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

    def __call__(self, batch: ResampledCounts) -> dict[str, np.ndarray]:
        p, _, _ = self.estimator.estimate_p(batch.pooled_events, batch.pooled_observed, self.design)
        w = batch.weights
        b, n, J, L = p.shape
        # the unconstrained optimum of each replicate (ties to the more lenient level)
        per_case = self.costs.expected(p)
        member = np.eye(self.n_rule_cells)[self.rule_index]  # (n, G)
        total = member.T @ (w[..., None] * per_case)  # (b, G, L)
        best = np.eye(L)[argmin_lenient(total)][:, self.rule_index]  # (b, n, L)
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


# ----------------------------------------------------------------------------------------------
# The comparison
# ----------------------------------------------------------------------------------------------
def _reading(effect: float, lo: float, hi: float, r: int, t: int, L: int) -> tuple[str, str]:
    """Direction of the aid's effect and what it means for cases at risk level r, threshold t."""
    if np.isfinite(lo) and np.isfinite(hi) and (lo > 0 or hi < 0):
        direction = "harsher with the aid" if effect > 0 else "more lenient with the aid"
    elif np.isfinite(lo):
        direction = "no clear change (interval includes 0)"
    else:
        direction = "harsher with the aid" if effect > 0 else ("more lenient with the aid" if effect < 0 else "no change")
    if r == 0:
        meaning = "safe cases: a harsher decision prevents nothing"
    elif r == L:
        meaning = "not preventable by any level: a harsher decision prevents nothing"
    elif t == r:
        meaning = "this level or harsher prevents the outcome for these cases"
    elif t > r:
        meaning = "harsher than needed to prevent the outcome for these cases"
    else:
        meaning = "not harsh enough to prevent the outcome for these cases"
    return direction, meaning


@dataclass(frozen=True)
class Comparison:
    """Rules compared under the estimated risk levels, the aid's effect, and their intervals.

    Attributes
    ----------
    scenario : Scenario
    cells : CellTable
    risk_levels : RiskLevels
    costs : Costs
    rules : list of Rule
        In the order of every table: the optimum, solved rules, the aid's recommendation, the
        candidates, then the observed rule of each arm (not shown, shown).
    evaluations : list of Evaluation
        Point evaluation of each rule (:func:`policy.decision.evaluate.evaluate`, against the optimum).
    result : BootstrapResult
        Point values and replicates of every figure.
    """

    scenario: Scenario
    cells: CellTable
    risk_levels: RiskLevels
    costs: Costs
    rules: list
    evaluations: list
    result: BootstrapResult
    notes: tuple[str, ...] = field(default_factory=tuple)

    # -- helpers -------------------------------------------------------------------------------
    def _fig(self, name: str):
        r = self.result
        lo, hi = r.interval(name)
        return np.asarray(r.point[name], dtype=np.float64), lo, hi

    def _stamp(self, frame: pd.DataFrame) -> pd.DataFrame:
        frame["replicates"] = self.result.n_replicates
        frame["seed"] = self.result.seed
        return frame

    @property
    def has_arm(self) -> bool:
        return self.cells.has_arm

    # -- tables --------------------------------------------------------------------------------
    def comparison_frame(self) -> pd.DataFrame:
        """One row per rule with every headline figure and its interval (docs/outputs.md)."""
        rl = self.risk_levels
        out = pd.DataFrame({"rule": [r.name for r in self.rules], "kind": [r.kind for r in self.rules]})

        def put(col, values, lo, hi, scale=1.0):
            out[col] = scale * values
            out[f"{col}_lower"] = scale * lo
            out[f"{col}_upper"] = scale * hi

        c, lo, hi = self._fig("cost")
        put("cost_per_1000_cases", c, lo, hi, 1000.0)
        c, lo, hi = self._fig("regret")
        put("regret_per_1000_cases", c, lo, hi, 1000.0)
        put("agreement", *self._fig("agreement"))
        fig = {k: self._fig(k) for k in ("rates", "shares", "safe_harsher", "too_lenient")}
        for j, key in enumerate(rl.outcome_keys):
            put(f"rate_{key}", *(a[:, j] for a in fig["rates"]))
        for d, value in enumerate(rl.level_values):
            put(f"share_{value}", *(a[:, d] for a in fig["shares"]))
        for j, key in enumerate(rl.outcome_keys):
            put(f"safe_given_harsher_{key}", *(a[:, j] for a in fig["safe_harsher"]))
        for j, key in enumerate(rl.outcome_keys):
            put(f"preventable_given_too_lenient_{key}", *(a[:, j] for a in fig["too_lenient"]))
        out["unit"] = self.costs.unit
        out["note"] = [r.note for r in self.rules]
        return self._stamp(out)

    def gaps_frame(self) -> pd.DataFrame:
        """Every fairness gap of every rule by protected attribute, with its interval."""
        rl = self.risk_levels
        pf, pf_lo, pf_hi = self._fig("principal_gap")  # (R, A, J, L+1, L-1)
        sp, sp_lo, sp_hi = self._fig("parity_gap")  # (R, A, L-1)
        attrs = list(rl.layout.protected)
        names = rl.risk_level_names
        rows = []
        for i, rule in enumerate(self.rules):
            for a, attr in enumerate(attrs):
                for t in range(rl.n_levels - 1):
                    thr = rl.level_labels[t + 1]
                    rows.append((rule.name, "statistical_parity", attr, "", -1, "", thr, sp[i, a, t], sp_lo[i, a, t], sp_hi[i, a, t]))
                    for j, key in enumerate(rl.outcome_keys):
                        for r, rname in enumerate(names):
                            rows.append((rule.name, "principal_fairness", attr, key, r, rname, thr,
                                         pf[i, a, j, r, t], pf_lo[i, a, j, r, t], pf_hi[i, a, j, r, t]))
        frame = pd.DataFrame(rows, columns=["rule", "kind", "attribute", "outcome", "risk_level", "risk_level_name",
                                            "threshold", "gap", "gap_lower", "gap_upper"])
        return self._stamp(frame)

    def effect_frame(self) -> pd.DataFrame:
        """The aid's effect on P(D >= t | R_j = r, group), with intervals and a reading."""
        if not self.has_arm:
            return pd.DataFrame()
        rl = self.risk_levels
        eff, lo, hi = self._fig("effect")  # (G, J, L+1, L-1)
        shown, not_shown = self.result.point["effect_shown"], self.result.point["effect_not_shown"]
        cases = self.result.point["stratum_cases"]  # (G, J, L+1)
        _, labels = group_matrix(rl.layout)
        G, J, R, T = eff.shape
        g, j, r, t = (a.reshape(-1) for a in np.indices(eff.shape))
        frame = pd.DataFrame({
            "attribute": [labels[i][0] for i in g],
            "group": [labels[i][1] for i in g],
            "outcome": np.asarray(rl.outcome_keys, dtype=object)[j],
            "risk_level": r,
            "risk_level_name": np.asarray(rl.risk_level_names, dtype=object)[r],
            "threshold": np.asarray(rl.level_labels, dtype=object)[t + 1],
            "not_shown": not_shown.reshape(-1),
            "shown": shown.reshape(-1),
            "effect": eff.reshape(-1),
            "effect_lower": lo.reshape(-1),
            "effect_upper": hi.reshape(-1),
            "stratum_cases": cases[g, j, r],
        })
        read = [_reading(e, a, b, rr, tt + 1, rl.n_levels) for e, a, b, rr, tt in
                zip(frame["effect"], frame["effect_lower"], frame["effect_upper"], r, t)]
        frame["direction"] = [x[0] for x in read]
        frame["meaning"] = [x[1] for x in read]
        return self._stamp(frame)

    def itt_frame(self) -> pd.DataFrame:
        """Intention to treat: decision shares by arm and their difference, overall and by group."""
        if not self.has_arm:
            return pd.DataFrame()
        rl = self.risk_levels
        share = np.asarray(self.result.point["itt_share"])  # (G, A, L)
        cases = np.asarray(self.result.point["itt_cases"])  # (G, A)
        d, d_lo, d_hi = self._fig("itt_share_diff")
        t, t_lo, t_hi = self._fig("itt_at_least_diff")
        _, labels = group_matrix(rl.layout)
        rows = []
        for gi, (attr, group) in enumerate(labels):
            for lv in range(rl.n_levels):
                rows.append((attr, group, "share at level", rl.level_labels[lv], share[gi, 0, lv], share[gi, 1, lv],
                             d[gi, lv], d_lo[gi, lv], d_hi[gi, lv], cases[gi, 0], cases[gi, 1]))
            for k in range(rl.n_levels - 1):
                rows.append((attr, group, "share at level or harsher", rl.level_labels[k + 1],
                             _tail(share[gi, 0])[k], _tail(share[gi, 1])[k], t[gi, k], t_lo[gi, k], t_hi[gi, k],
                             cases[gi, 0], cases[gi, 1]))
        frame = pd.DataFrame(rows, columns=["attribute", "group", "figure", "level", "not_shown", "shown", "difference",
                                            "difference_lower", "difference_upper", "cases_not_shown", "cases_shown"])
        return self._stamp(frame)

    def shares_frame(self) -> pd.DataFrame:
        """Share of cases at each risk level, overall and by group, with intervals."""
        rl = self.risk_levels
        s, lo, hi = self._fig("risk_level_share")  # (G, J, L+1)
        _, labels = group_matrix(rl.layout)
        g, j, r = (a.reshape(-1) for a in np.indices(s.shape))
        frame = pd.DataFrame({
            "outcome": np.asarray(rl.outcome_keys, dtype=object)[j],
            "attribute": [labels[i][0] for i in g],
            "group": [labels[i][1] for i in g],
            "risk_level": r,
            "risk_level_name": np.asarray(rl.risk_level_names, dtype=object)[r],
            "share": s.reshape(-1),
            "share_lower": lo.reshape(-1),
            "share_upper": hi.reshape(-1),
        })
        return self._stamp(frame)

    def readings(self) -> list[str]:
        """Plain-words reading of the aid's effect where it matters, per outcome kind (overall):
        safe cases at the first harsher level, and each preventable risk level at the level that
        prevents it."""
        if not self.has_arm:
            return []
        rl = self.risk_levels
        eff, lo, hi = self._fig("effect")
        L = rl.n_levels
        pct = lambda v: f"{100 * v:+.1f}"
        out = []
        for j, label in enumerate(rl.outcome_labels):
            for r in range(0, L):
                t = max(r, 1)
                e, a, b = eff[0, j, r, t - 1], lo[0, j, r, t - 1], hi[0, j, r, t - 1]
                direction, meaning = _reading(e, a, b, r, t, L)
                interval = f" ({self.result.interval_label}: {pct(a)} to {pct(b)})" if np.isfinite(a) else ""
                out.append(
                    f"{label}, {rl.risk_level_names[r]}: showing the aid changed the share given "
                    f"{rl.level_labels[t]} or harsher by {pct(e)} points{interval}; {direction}; {meaning}."
                )
        return out

    def output_files(self) -> dict[str, Any]:
        """Every output file of ``compare`` by name (documented in docs/outputs.md)."""
        files: dict[str, Any] = {
            "comparison.csv": self.comparison_frame(),
            "comparison_gaps.csv": self.gaps_frame(),
            "risk_level_share_intervals.csv": self.shares_frame(),
        }
        if self.has_arm:
            files["aid_effect.csv"] = self.effect_frame()
            files["aid_effect_itt.csv"] = self.itt_frame()
        files["compare.json"] = {
            "scenario": self.scenario.title,
            "scenario_file": str(self.scenario.path) if self.scenario.path else None,
            "data": self.risk_levels.source,
            "cost_unit": self.costs.unit,
            "reference_rule": self.rules[0].name,
            "rules": [{"name": r.name, "kind": r.kind, "note": r.note} for r in self.rules],
            **self.result.meta(),
            "readings": self.readings(),
            "notes": list(self.notes),
            "assumptions": {
                "comparison": assumptions_for("evaluation"),
                "observed_rules": assumptions_for("observed_rule"),
                "aid_effect": assumptions_for("aid_effect") if self.has_arm else [],
            },
            "cautions": list(CAUTIONS),
        }
        return files

    def __str__(self) -> str:
        frame = self.comparison_frame()
        lines = [f"Rules compared ({self.result.interval_label}, {self.result.n_replicates} replicates, seed {self.result.seed}):"]
        for _, row in frame.iterrows():
            lo, hi = row["cost_per_1000_cases_lower"], row["cost_per_1000_cases_upper"]
            interval = f" ({lo:,.0f} to {hi:,.0f})" if np.isfinite(lo) else ""
            lines.append(f"  {row['rule']}: {row['cost_per_1000_cases']:,.0f} per 1,000 cases{interval}; "
                         f"regret {row['regret_per_1000_cases']:,.0f}; agreement {row['agreement']:.1%}")
        lines += self.readings()
        return "\n".join(lines)


def compare(scenario, replicates: int | None = None, seed: int | None = None, resampling: str | None = None,
            interval: float | None = None, outcomes: str | None = None, workers: int | None = None, runner: TaskRunner | None = None,
            progress: bool = False, rules: Sequence[Rule] = (), solvers: Sequence[RuleSolver] = (),
            constraints: bool = True,
            outcome_costs: Mapping[str, float] | None = None,
            decision_costs: Mapping[str, float] | None = None) -> Comparison:
    """Compare the optimum, the aid's recommendation, candidates and observed rules, with intervals.

    Parameters
    ----------
    scenario : Scenario or path
    replicates, seed, resampling, interval, outcomes : optional
        Override the scenario's ``[uncertainty]`` settings and ``[scenario] seed``.
    workers, runner : optional
        How replicates are run (see :func:`policy.assessment.uncertainty.bootstrap`); the output does not
        depend on them.
    progress : bool
        Show a progress bar.
    rules : sequence of Rule
        Further fixed rules to compare (built on the scenario's cells).
    solvers : sequence of callable
        ``solver(risk_levels, costs) -> Rule`` re-run in every replicate; the point rule comes
        from the same solver on the estimates.
    constraints : bool
        With the scenario's ``[[constraints]]``, also compare the constrained optimum
        (:mod:`policy.decision.constrained`), re-solved in every replicate (default true).
    outcome_costs, decision_costs : mapping, optional
        What-if cost overrides, as for ``solve``.
    """
    from policy.estimation.from_scenario import estimate
    from policy.inputs.scenario import as_scenario

    scenario = as_scenario(scenario)
    if scenario.data.kind == "risk_level_table":
        raise InputError(
            f"{scenario.file}: compare needs the cases behind the estimates (a case table, a counts table or the "
            "simulator): observed rules, the aid's effect and every interval come from them, and a risk-level table "
            "holds neither decisions nor counts. Use `solve` to score rules on a risk-level table."
        )
    base: UncertaintySettings = scenario.sections.get("uncertainty") or UncertaintySettings()
    settings = validate_settings(
        base.replicates if replicates is None else replicates,
        base.interval if interval is None else interval,
        base.resampling if resampling is None else resampling,
        "compare:",
        base.outcomes if outcomes is None else outcomes,
    )
    from policy.decision.constrained import ConstrainedProblem
    from policy.decision.constraints import scenario_specs

    specs = scenario_specs(scenario) if constraints else ()
    cells, rl = estimate(scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    optimum = optimal_rule(rl, costs)
    solvers = list(solvers)
    solved = [s(rl, costs) for s in solvers]
    if specs:
        lp = scenario.sections.get("linear_program")
        solved.append(ConstrainedProblem(rl, costs, specs, settings=lp).solve().rule)
        solvers.append(ConstrainedSolver(specs, lp))
    if any(not isinstance(r, Rule) for r in solved):
        raise InputError("a solver given to compare must return a Rule for the point estimates.")
    aid = aid_rule(cells, scenario.aid.name, scenario.level_labels)
    fixed = ([aid] if aid is not None else []) + candidate_rules(scenario, rl.layout, rl.weights) + list(rules)
    observed = observed_rules(cells, scenario.aid.name, scenario.level_labels)
    all_rules = [optimum] + solved + fixed + observed
    names = [r.name for r in all_rules]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"{scenario.file}: two compared rules are both called {dup[0]!r}; give candidates distinct names.")
    evaluations = [evaluate(r, rl, costs, reference=optimum) for r in all_rules]
    estimator = RiskLevelEstimator.from_scenario(scenario)
    statistic = ComparisonStatistic(estimator, estimator.design(cells.layout, len(cells.levels)), costs, cells.layout,
                                    [r.cell_delta for r in fixed], cells.has_arm, len(cells.arms), solvers, rl)
    result = bootstrap(cells, statistic, settings.replicates, scenario.seed if seed is None else seed,
                       settings.resampling, settings.interval, runner=runner, workers=workers, progress=progress,
                       description="compare: bootstrap replicates",
                       outcome_model=rl.p if settings.outcomes == "model" else None)
    notes = [r.note and f"{r.name}: {r.note}" for r in all_rules if r.note]
    if result.outcomes == "model":
        notes.append("replicate outcomes were drawn from the estimated risk levels (model-based bootstrap), "
                     "independently per outcome kind given cell and level")
    elif not result.joint_states:
        notes.append("counts-table input: outcome kinds of one case were resampled independently given cell, arm and level")
    notes.append("the optimum is re-solved in each replicate; its estimated cost is optimistic (chosen on the same data)")
    failed = result.replicates.get("solver_failed")
    for k, rule in enumerate(solved):
        if failed is not None and failed.shape[0] and failed[:, k].any():
            notes.append(f"{rule.name}: no solution in {int(failed[:, k].sum())} of {result.n_replicates} replicates "
                         "(left out of its intervals)")
    return Comparison(scenario, cells, rl, costs, all_rules, evaluations, result, tuple(notes))
