"""Coverage of the comparison's intervals over many simulated data sets of the demo county.

Used by tests/test_uncertainty.py (a short run by default, the long one marked slow) and by
hand (``python -m tests.coverage SETS CASES REPLICATES``) to produce the figures recorded in
docs/method.md. Two truths are covered:

- the *population* truth: stratum shares and the aid's effect computed from the simulator's
  exact per-cell risk levels and court decision probabilities (:func:`policy.demo.quarrow.true_risk_levels`);
- the estimator's *finite-n target* E[estimate]: the mean of the point estimates over the data
  sets. The cell estimator shrinks toward a target (a main-effects log-linear model fitted by
  iterative proportional fitting, times Mantel-Haenszel level ratios), so its expectation differs
  from the population truth by a shrinkage bias that no interval can remove; coverage of
  E[estimate] checks that the intervals have the right width and centre for what the estimator
  estimates.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, replace

import numpy as np

from policy import compare, load_scenario
from policy.demo.quarrow import demo_scenario_path, true_risk_levels
from policy.decision.evaluate import stratum_decision_mass
from policy.inputs.scenario import DataSource
from policy.assessment.uncertainty import InProcess


def truth_figures() -> tuple[np.ndarray, np.ndarray]:
    """Population stratum shares (J, K+2) and the aid's effect (J, K+2, K) from the exact truth."""
    truth, court = true_risk_levels()
    q, w = truth.q, truth.weights
    shares = np.einsum("x,xjr->jr", w, q) / w.sum()
    one = np.ones((truth.n_cells, 1))

    def at_least(delta):
        mass = stratum_decision_mass(delta, q, w, one)[0]  # (J, R, L)
        tail = np.flip(np.cumsum(np.flip(mass, -1), -1), -1)[..., 1:]
        return tail / mass.sum(-1, keepdims=True)

    return shares, at_least(court[:, 1]) - at_least(court[:, 0])


@dataclass
class Coverage:
    share_truth: np.ndarray
    share_target: np.ndarray
    effect_truth: np.ndarray
    effect_target: np.ndarray
    share_bias_sd: np.ndarray
    effect_bias_sd: np.ndarray

    def report(self) -> str:
        def fmt(a):
            a = a[np.isfinite(a)]
            return f"mean {a.mean():.3f}, min {a.min():.3f}, max {a.max():.3f} over {a.size} figures"

        return "\n".join([
            f"stratum shares, population truth:   {fmt(self.share_truth)}",
            f"stratum shares, finite-n target:    {fmt(self.share_target)}",
            f"aid's effect, population truth:     {fmt(self.effect_truth)}",
            f"aid's effect, finite-n target:      {fmt(self.effect_target)}",
            f"stratum shares, |bias| / sd:        {fmt(np.abs(self.share_bias_sd))}",
            f"aid's effect, |bias| / sd:          {fmt(np.abs(self.effect_bias_sd))}",
        ])


def coverage_study(sets: int, cases: int, replicates: int, first_seed: int = 5000, **kwargs) -> Coverage:
    """Simulate ``sets`` demo data sets of ``cases`` cases, run ``compare`` on each and count how
    often the overall stratum shares' and the aid's effect's intervals cover each truth."""
    base = load_scenario(demo_scenario_path())
    share_true, effect_true = truth_figures()
    est = {"share": [], "effect": []}
    lo = {"share": [], "effect": []}
    hi = {"share": [], "effect": []}
    for k in range(sets):
        scenario = replace(base, data=DataSource("simulate", simulate=cases), seed=first_seed + k)
        c = compare(scenario, replicates=replicates, runner=InProcess(), **kwargs)
        for name, key in (("share", "risk_level_share"), ("effect", "effect")):
            low, high = c.result.interval(key)
            est[name].append(c.result.point[key][0])
            lo[name].append(low[0])
            hi[name].append(high[0])
    out = {}
    for name, true in (("share", share_true), ("effect", effect_true)):
        e, a, b = (np.array(x[name]) for x in (est, lo, hi))
        target = e.mean(axis=0)
        out[f"{name}_truth"] = np.where(np.isfinite(true), ((a <= true) & (true <= b)).mean(axis=0), np.nan)
        out[f"{name}_target"] = np.where(np.isfinite(true), ((a <= target) & (target <= b)).mean(axis=0), np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[f"{name}_bias_sd"] = (target - true) / e.std(axis=0, ddof=1)
    return Coverage(**out)


if __name__ == "__main__":  # pragma: no cover - a manual run for the documentation
    sets, cases, replicates = (int(a) for a in sys.argv[1:4])
    extra = dict(a.split("=") for a in sys.argv[4:])
    print(f"{sets} data sets of {cases:,} cases, {replicates} replicates, {extra or 'defaults'}")
    print(coverage_study(sets, cases, replicates, **extra).report())
