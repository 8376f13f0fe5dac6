"""Bias, mean absolute error and coverage of the comparison's intervals on simulated data.

Used by tests/test_coverage.py (a quick run by default, the full tables marked slow) and by hand
(``python -m tests.coverage PROCESS SETS REPLICATES [CASES]``, or ``python -m tests.coverage all
SETS REPLICATES``) to produce the tables recorded in docs/method.md.

For every data set drawn from a process of :mod:`tests.simulations` the comparison's figures are
computed as :func:`policy.compare` computes them (the cell estimator, the model-based Poisson
bootstrap, percentile intervals) and set against the process's exact population truth. Four
families of figures:

- ``shares``: the overall share of cases at each risk level, per outcome kind;
- ``effect``: the aid's effect on P(D >= t) within each risk level (the randomized arm);
- ``cost``: the expected cost per case of two fixed rules (a threshold rule and "everyone at
  level 1"), held fixed in every replicate;
- ``difference``: the paired difference of those two rules' costs, replicate by replicate;
- ``chosen``: the true expected cost per case of the rule chosen on the data set (the
  cost-minimizing rule), against the interval that allows for its choice
  (:mod:`policy.assessment.selection`); the truth differs between data sets;
- ``chosen_fixed``: the same truth against the percentile interval of the chosen rule held fixed
  (what the interval was before it allowed for the choice).

Each family reports the share of (data set, figure) pairs whose nominal 95% interval covers the
truth (the tool's percentile intervals, and for comparison basic intervals from the same
replicates), the lowest single figure's coverage, the mean absolute error and the bias in units of
the estimate's standard deviation over data sets.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from policy.assessment.compare import ComparisonStatistic
from policy.assessment.uncertainty import InProcess, bootstrap
from policy.decision.costs import costs_from_scenario
from policy.decision.evaluate import stratum_decision_mass
from policy.decision.rules import Rule
from policy.decision.solve import optimal_rule
from policy.assessment.selection import chosen_cost_interval, optimism_draws
from policy.estimation.strata import RiskLevelEstimator
from policy.estimation.world import world_probabilities
from policy.inputs.cells import CellTable

from .simulations import PROCESSES, Process, process

FAMILIES = ("shares", "effect", "cost", "difference", "chosen", "chosen_fixed")
#: families whose truth is the rule chosen on each data set (one truth per data set)
PER_SET = ("chosen", "chosen_fixed")


def _at_least(delta: np.ndarray, q: np.ndarray, w: np.ndarray) -> np.ndarray:
    """P(D >= t | R_j = r) for t = 1..L-1 under decision probabilities delta (n, L): (J, L+1, L-1)."""
    mass = stratum_decision_mass(delta, q, w, np.ones((len(w), 1)))[0]
    tail = np.flip(np.cumsum(np.flip(mass, -1), -1), -1)[..., 1:]
    return tail / mass.sum(-1, keepdims=True)


def truth_figures(proc: Process) -> dict[str, np.ndarray]:
    """Each family's figures from the exact truth, flattened."""
    truth = proc.truth
    q, w = truth.q, truth.weights
    costs = costs_from_scenario(proc.scenario, truth)
    per_case = costs.expected(truth.p)  # (n, L)
    rule_costs = np.array([np.einsum("x,xd,xd->", w, rule(truth.layout), per_case) / w.sum()
                           for rule in proc.rules.values()])
    return {
        "shares": (np.einsum("x,xjr->jr", w, q) / w.sum()).ravel(),
        "effect": (_at_least(proc.court[:, 1], q, w) - _at_least(proc.court[:, 0], q, w)).ravel(),
        "cost": rule_costs,
        "difference": rule_costs[:1] - rule_costs[1:2],
    }


def true_cost(proc: Process, rule: Rule) -> float:
    """Exact expected cost per case of a rule (given per rule cell of a data set's cells) in the
    process's population; NaN if the population has a rule cell the data set never saw."""
    truth = proc.truth
    cols = list(rule.rule_cells.columns)
    key = pd.Index(rule.rule_cells[cols].astype(str).agg("|".join, axis=1))
    pos = key.get_indexer(truth.layout.frame[cols].astype(str).agg("|".join, axis=1))
    if (pos < 0).any():
        return float("nan")
    per_case = costs_from_scenario(proc.scenario, truth).expected(truth.p)
    w = truth.weights
    return float(np.einsum("x,xd,xd->", w, rule.delta[pos], per_case) / w.sum())


def one_data_set(proc: Process, cases: int, replicates: int, seed: int, estimator: RiskLevelEstimator | None = None,
                 world: str = "liberal") -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Point estimates and 95% percentile intervals of every family on one simulated data set.

    ``world``: where replicate events are drawn from: 'liberal' (what ``compare`` does,
    :mod:`policy.estimation.world`) or 'estimate' (the point estimate itself, for comparison).
    """
    frame = proc.simulate(cases, seed)
    cells = CellTable.from_cases(frame, proc.scenario)
    est = estimator or RiskLevelEstimator.from_scenario(proc.scenario)
    est = est.fit(cells)
    rl = est.risk_levels_
    costs = costs_from_scenario(proc.scenario, rl)
    fixed = [rule(rl.layout) for rule in proc.rules.values()]
    optimum = optimal_rule(rl, costs)
    model = world_probabilities(est, cells) if world == "liberal" else rl.p
    statistic = ComparisonStatistic(est, est.design(cells.layout, len(cells.levels)), costs, cells.layout, fixed,
                                    cells.has_arm, len(cells.arms), base=rl, chosen=[optimum], world=model)
    result = bootstrap(cells, statistic, replicates, seed + 7_919, "poisson", 0.95, runner=InProcess(),
                       outcome_model=model)

    def family(point, reps):
        lo, hi = np.nanpercentile(reps, [2.5, 97.5], axis=0) if len(reps) else (np.nan * point, np.nan * point)
        return point.ravel(), np.asarray(lo).ravel(), np.asarray(hi).ravel()

    pt, rp = result.point, result.replicates
    in_sample = np.asarray(pt["resolved_cost"][:1], dtype=np.float64)
    errors = optimism_draws(rp)
    chosen = (chosen_cost_interval(in_sample, errors[:, :1]) if errors is not None and len(errors)
              else (np.nan * in_sample, np.nan * in_sample))
    truth = np.array([true_cost(proc, optimum)])
    return {
        "chosen": (in_sample, chosen[0], chosen[1], truth),
        "chosen_fixed": family(pt["cost"][:1], rp["cost"][:, :1]) + (truth,),
        "shares": family(pt["risk_level_share"][0], rp["risk_level_share"][:, 0]),
        "effect": family(pt["effect"][0], rp["effect"][:, 0]),
        "cost": family(pt["cost"][1:3], rp["cost"][:, 1:3]),
        "difference": family(pt["cost"][1:2] - pt["cost"][2:3], rp["cost"][:, 1:2] - rp["cost"][:, 2:3]),
    }


@dataclass
class Study:
    """Per family: estimates, interval ends (data sets x figures) and the truth (figures, or data
    sets x figures for the families of :data:`PER_SET`)."""

    process: str
    cases: int
    cells: int
    replicates: int
    estimate: dict[str, np.ndarray] = field(default_factory=dict)
    lower: dict[str, np.ndarray] = field(default_factory=dict)
    upper: dict[str, np.ndarray] = field(default_factory=dict)
    truth: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def sets(self) -> int:
        return len(next(iter(self.estimate.values())))

    def _truth(self, name: str) -> np.ndarray:
        """The truth as (data sets, figures); figures whose truth is undefined everywhere dropped."""
        return np.broadcast_to(self.truth[name], self.estimate[name].shape)

    def covered(self, name: str, kind: str = "percentile") -> np.ndarray:
        """(data sets, figures) of 1.0 (covered), 0.0, or NaN where the truth is undefined.

        ``kind``: 'percentile' (the tool's intervals) or 'basic', the same replicates reflected
        about the point estimate, [2 est - upper, 2 est - lower] (Davison and Hinkley 1997,
        ch. 5), which removes a bias the bootstrap reproduces instead of doubling it. The
        ``chosen`` family's interval is already a basic one: it has no 'basic' variant (NaN).
        """
        t = self._truth(name)
        keep = np.isfinite(t).any(axis=0)
        t, lo, hi = t[:, keep], self.lower[name][:, keep], self.upper[name][:, keep]
        if kind == "basic":
            if name == "chosen":
                return np.full(t.shape, np.nan)
            e = self.estimate[name][:, keep]
            lo, hi = 2 * e - hi, 2 * e - lo
        return np.where(np.isfinite(t), ((lo <= t) & (t <= hi)).astype(np.float64), np.nan)

    def coverage(self, name: str, kind: str = "percentile") -> float:
        c = self.covered(name, kind)
        return float(np.nanmean(c)) if np.isfinite(c).any() else float("nan")

    def monte_carlo_sd(self, name: str) -> float:
        """Monte Carlo sd of the family's mean coverage, treating its figures as one per data set
        (conservative: figures of one data set are correlated, so they count once)."""
        c = self.coverage(name)
        return float(np.sqrt(max(c * (1 - c), 0.0025) / self.sets))

    def table(self) -> pd.DataFrame:
        rows = []
        for name in FAMILIES:
            t = self._truth(name)
            keep = np.isfinite(t).any(axis=0)
            e, t = self.estimate[name][:, keep], t[:, keep]
            with np.errstate(invalid="ignore", divide="ignore"):
                bias = np.nanmean(e - t, axis=0)
                sd = np.nanstd(e, axis=0, ddof=1)
                ratio = np.abs(bias) / np.where(sd > 0, sd, np.nan)
            per_figure = np.nanmean(self.covered(name), axis=0)
            rows.append({
                "process": self.process, "cases": self.cases, "cases_per_cell": round(self.cases / self.cells),
                "data_sets": self.sets, "replicates": self.replicates, "family": name, "figures": int(keep.sum()),
                "coverage": self.coverage(name), "mc_sd": self.monte_carlo_sd(name), "lowest": float(per_figure.min()),
                "coverage_basic": self.coverage(name, "basic"),
                "mae": float(np.nanmean(np.abs(e - t))), "mean_abs_bias": float(np.nanmean(np.abs(bias))),
                "bias_over_sd_mean": float(np.nanmean(ratio)), "bias_over_sd_max": float(np.nanmax(ratio)),
            })
        return pd.DataFrame(rows)


def coverage_study(name: str, sets: int, replicates: int, cases: int | None = None, first_seed: int = 5000,
                   estimator: RiskLevelEstimator | None = None, world: str = "liberal") -> Study:
    """Run ``sets`` data sets of process ``name`` with ``replicates`` bootstrap replicates each
    (``world``: see :func:`one_data_set`)."""
    proc = process(name)
    n = cases or proc.cases
    study = Study(name, n, proc.truth.n_cells, replicates, truth=truth_figures(proc))
    runs = [one_data_set(proc, n, replicates, first_seed + k, estimator, world) for k in range(sets)]
    for fam in FAMILIES:
        study.estimate[fam] = np.array([r[fam][0] for r in runs])
        study.lower[fam] = np.array([r[fam][1] for r in runs])
        study.upper[fam] = np.array([r[fam][2] for r in runs])
        if fam in PER_SET:
            study.truth[fam] = np.array([r[fam][3] for r in runs])
    return study


# ----------------------------------------------------------------------------------------------
# Accuracy of the cell estimates: the estimator against plain rates projected to monotone
# ----------------------------------------------------------------------------------------------
ESTIMATORS = {
    "cell estimator": dict(),
    "common level ratios": dict(level_terms=False, translation_limit=None),
    "limited translation, D = 2": dict(translation_limit=2.0),
    "plain rates + isotonic": dict(prior_strength=0.0, level_terms=False, translation_limit=None),
}


def accuracy_study(name: str, sets: int, cases: int | None = None, first_seed: int = 9000) -> pd.DataFrame:
    """Mean absolute error of p_jd(x) per estimator: case-weighted over cells, averaged over data sets
    (one row per estimator; ``mae_large`` over cells with at least 1,000 cases)."""
    proc = process(name)
    n = cases or proc.cases
    truth = proc.truth
    key_t = pd.Index(truth.layout.frame.astype(str).agg("|".join, axis=1))
    base = RiskLevelEstimator.from_scenario(proc.scenario)
    errors = {k: [] for k in ESTIMATORS}
    large = {k: [] for k in ESTIMATORS}
    for s in range(sets):
        cells = CellTable.from_cases(proc.simulate(n, first_seed + s), proc.scenario)
        pos = key_t.get_indexer(cells.layout.frame.astype(str).agg("|".join, axis=1))
        w = cells.weights.astype(np.float64)
        for label, kw in ESTIMATORS.items():
            est = RiskLevelEstimator(kw.get("prior_strength", base.prior_strength), base.target_covariates,
                                     base.structural_zeros, kw.get("level_terms", True),
                                     kw.get("translation_limit", None)).fit(cells)
            err = np.abs(est.risk_levels_.p - truth.p[pos]).mean(axis=(1, 2))
            errors[label].append(np.sum(w * err) / w.sum())
            big = w >= 1000
            large[label].append(np.sum((w * err)[big]) / w[big].sum() if big.any() else np.nan)
    return pd.DataFrame({"process": name, "cases": n, "estimator": list(ESTIMATORS),
                         "mae": [np.mean(errors[k]) for k in ESTIMATORS],
                         "mae_large": [np.nanmean(large[k]) if np.isfinite(large[k]).any() else np.nan for k in ESTIMATORS]})


if __name__ == "__main__":  # pragma: no cover - a manual run for the documentation
    which, sets, replicates = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    cases = int(sys.argv[4]) if len(sys.argv) > 4 else None
    pd.set_option("display.width", 200)
    pd.set_option("display.max_columns", 30)
    for name in (PROCESSES if which == "all" else which.split(",")):
        print(accuracy_study(name, min(sets, 20), cases).to_string(index=False), flush=True)
        print(coverage_study(name, sets, replicates, cases).table().to_string(index=False, float_format=lambda v: f"{v:.3f}"),
              flush=True)
