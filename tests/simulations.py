"""Invented data-generating processes with exact truth, for the coverage and accuracy studies.

Each process is a grid of cells with, per cell, its population share, the probability of each
adverse outcome under each decision level (non-increasing in the level, so monotonicity holds),
and the court's decision probabilities with and without the aid (so unconfoundedness given the
cell holds by construction, the arm randomized 50/50). Four processes:

- ``demo``: the invented Quarrow County (:mod:`policy.demo.quarrow`), 3 levels, 3 outcome kinds,
  about 740 occupied cells (about 27 cases a cell at 20,000 cases);
- ``varying``: 12 cells, 3 levels, where how much a harsher level lowers risk depends on prior
  record (the case a common level ratio gets wrong);
- ``four_levels``: 36 cells, 4 levels, some cells with a dozen or so cases and levels a cell
  rarely sees, the harshest level's effect varying with prior record;
- ``many_small``: 144 cells with about 20 cases each, a baseline with an interaction the
  main-effects target does not have.

Everything here is made up; no real place, court or data.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
from scipy.special import expit

from policy.demo.quarrow import LEVELS as DEMO_LEVELS, demo_scenario_path, simulate_cases, true_risk_levels
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellLayout
from policy.inputs.scenario import Scenario, load_scenario

__all__ = ["Process", "PROCESSES", "process"]


@dataclass(frozen=True)
class Process:
    """One data-generating process: its scenario, exact truth and two fixed rules.

    Attributes
    ----------
    name : str
    scenario : Scenario
    truth : RiskLevels
        Exact per-cell outcome probabilities; weights are population shares (sum 1).
    court : ndarray of shape (n_cells, 2, L)
        Decision probabilities per cell without (0) and with (1) the aid.
    rules : dict of str to callable
        Fixed rules: layout -> decision probabilities per cell (n_cells, L).
    simulate : callable
        (n, seed) -> case table.
    cases : int
        Default data-set size.
    """

    name: str
    scenario: Scenario
    truth: RiskLevels
    court: np.ndarray
    rules: dict[str, Callable[[CellLayout], np.ndarray]]
    simulate: Callable[[int, int], pd.DataFrame]
    cases: int

    @property
    def cases_per_cell(self) -> float:
        return self.cases / self.truth.n_cells


def _ordered_logit(eta: np.ndarray, cuts: np.ndarray) -> np.ndarray:
    """Decision probabilities (..., L) of an ordered logit with P(D >= k) = expit(eta - cut_k)."""
    tail = expit(eta[..., None] - np.asarray(cuts))
    upper = np.concatenate([np.ones(eta.shape + (1,)), tail], axis=-1)
    lower = np.concatenate([tail, np.zeros(eta.shape + (1,))], axis=-1)
    return upper - lower


def _scenario(columns: dict[str, tuple[str, ...]], levels: int, rule: list[str]) -> Scenario:
    decision_costs = {3: (0.0, 700.0, 2600.0), 4: (0.0, 400.0, 1300.0, 3200.0)}[levels]
    return Scenario.from_dict({
        "scenario": {"title": "simulated coverage process", "seed": 1},
        "data": {"simulate": 1},
        "columns": {"arm": "aid_shown", "decision": "decision"},
        "decisions": [{"value": f"L{d}", "label": f"level {d}", "cost": c} for d, c in enumerate(decision_costs)],
        "outcomes": [{"key": "missed", "label": "failure to appear", "cost": 1000.0},
                     {"key": "offense", "label": "new offense", "cost": 6000.0}],
        "costs": {"unit": "points"},
        "cells": {"covariates": list(columns), "rule": rule, "order": {k: list(v) for k, v in columns.items()}},
    })


def _grid_process(name: str, columns: dict[str, tuple[str, ...]], probs: list[np.ndarray],
                  p_fn: Callable[..., np.ndarray], court_fn: Callable[..., np.ndarray], levels: int,
                  cases: int) -> Process:
    """A process on the full grid of independent cell columns."""
    sizes = [len(v) for v in columns.values()]
    codes = np.array(list(itertools.product(*[range(k) for k in sizes])))  # (n_cells, U)
    w = np.prod([np.asarray(pr)[codes[:, u]] for u, pr in enumerate(probs)], axis=0)
    p = p_fn(*codes.T)  # (n_cells, 2, L)
    court = np.stack([court_fn(*codes.T, arm=a) for a in (0, 1)], axis=1)
    frame = pd.DataFrame({c: pd.Categorical.from_codes(codes[:, u], categories=list(cats), ordered=True)
                          for u, (c, cats) in enumerate(columns.items())})
    rule = list(columns)[:2]
    scenario = _scenario(columns, levels, rule)
    layout = CellLayout(frame, (), tuple(rule), None)
    level_values = scenario.level_values
    truth = RiskLevels(layout=layout, level_values=level_values, level_labels=scenario.level_labels,
                       outcome_keys=scenario.outcome_keys, outcome_labels=scenario.outcome_labels, weights=w, p=p,
                       borrowed=np.zeros(p.shape, dtype=bool), source=f"the exact truth of process {name!r}")
    first = list(columns)[0]

    def threshold(lay: CellLayout) -> np.ndarray:
        return np.eye(levels)[np.minimum(lay.codes(first), levels - 1)]

    def middle(lay: CellLayout) -> np.ndarray:
        return np.eye(levels)[np.ones(lay.n_cells, dtype=np.int64)]

    def simulate(n: int, seed: int) -> pd.DataFrame:
        rng = np.random.default_rng(seed)
        cell = rng.choice(len(w), size=n, p=w / w.sum())
        arm = (rng.random(n) < 0.5).astype(np.int64)
        decision = (rng.random(n)[:, None] > np.cumsum(court[cell, arm], axis=1)[:, :-1]).sum(axis=1)
        # risk level R_j = number of levels under which the outcome occurs; the outcome is seen when D < R
        risk = (rng.random((n, 2))[:, :, None] < p[cell]).sum(axis=-1)
        outcome = (decision[:, None] < risk).astype(np.float64)
        outcome[rng.random((n, 2)) < 0.03] = np.nan
        out = {c: np.asarray(cats, dtype=object)[codes[cell, u]] for u, (c, cats) in enumerate(columns.items())}
        out.update({"aid_shown": arm, "decision": np.asarray(level_values, dtype=object)[decision],
                    "missed": pd.array(outcome[:, 0], dtype="Int64"), "offense": pd.array(outcome[:, 1], dtype="Int64")})
        return pd.DataFrame(out)

    return Process(name, scenario, truth, court, {"threshold on " + first: threshold, "all at level 1": middle},
                   simulate, cases)


def _varying() -> Process:
    columns = {"prior": ("none", "some", "extensive"), "age": ("older", "younger"), "charge": ("minor", "serious")}
    kept = np.array([[[1.0, 0.80, 0.55], [1.0, 0.85, 0.60]],     # none: (missed, offense) by level
                     [[1.0, 0.65, 0.35], [1.0, 0.70, 0.40]],     # some
                     [[1.0, 0.45, 0.15], [1.0, 0.50, 0.20]]])    # extensive

    def p_fn(prior, age, charge):
        base = np.stack([expit(-1.4 + 0.5 * prior + 0.3 * age + 0.1 * charge),
                         expit(-1.7 + 0.6 * prior + 0.4 * age + 0.3 * charge)], axis=-1)
        return base[..., None] * kept[prior]

    def court_fn(prior, age, charge, arm):
        eta = 0.7 * prior + 0.5 * charge - 0.2 * age + arm * (0.35 * (prior - 1) - 0.1)
        return _ordered_logit(eta, [0.2, 1.6])

    return _grid_process("varying", columns, [np.array([0.45, 0.35, 0.20]), np.array([0.5, 0.5]), np.array([0.6, 0.4])],
                         p_fn, court_fn, 3, 6_000)


def _four_levels() -> Process:
    columns = {"prior": ("none", "some", "extensive"), "charge": ("minor", "felony", "violent"),
               "age": ("older", "younger"), "pending": ("no", "yes")}
    kept_missed = np.array([1.0, 0.80, 0.60, 0.30])
    kept_offense = np.array([1.0, 0.85, 0.65, 0.35])
    harsh_by_prior = np.array([1.0, 0.85, 0.65])  # the two harshest levels help more with a longer record

    def p_fn(prior, charge, age, pending):
        base = np.stack([expit(-1.5 + 0.45 * prior + 0.1 * charge + 0.3 * age + 0.3 * pending),
                         expit(-1.9 + 0.55 * prior + 0.25 * charge + 0.4 * age + 0.4 * pending)], axis=-1)
        extra = np.where(np.arange(4) >= 2, harsh_by_prior[prior][:, None], 1.0)  # (n, L)
        kept = np.stack([kept_missed * extra, kept_offense * extra], axis=1)
        return base[..., None] * kept

    def court_fn(prior, charge, age, pending, arm):
        eta = 0.6 * prior + 0.8 * charge + 0.3 * pending + arm * 0.3 * (prior + charge - 2)
        return _ordered_logit(eta, [0.0, 1.3, 2.8])

    probs = [np.array([0.5, 0.35, 0.15]), np.array([0.55, 0.33, 0.12]), np.array([0.5, 0.5]), np.array([0.8, 0.2])]
    return _grid_process("four_levels", columns, probs, p_fn, court_fn, 4, 10_000)


def _many_small() -> Process:
    columns = {"a": ("a0", "a1", "a2"), "b": ("b0", "b1", "b2"), "c": ("c0", "c1"), "d": ("d0", "d1"),
               "e": ("e0", "e1", "e2", "e3")}
    kept = np.array([[1.0, 0.75, 0.40], [1.0, 0.85, 0.50]])

    def p_fn(a, b, c, d, e):
        inter = 0.3 * ((a == 2) & (e >= 2))
        base = np.stack([expit(-1.6 + 0.4 * a + 0.3 * b + 0.2 * c - 0.3 * d + 0.15 * e + inter),
                         expit(-1.9 + 0.5 * a + 0.2 * b + 0.3 * c - 0.2 * d + 0.10 * e + inter)], axis=-1)
        return base[..., None] * kept

    def court_fn(a, b, c, d, e, arm):
        eta = 0.5 * a + 0.4 * b + 0.2 * e + arm * (0.3 * (a - 1))
        return _ordered_logit(eta, [0.6, 2.0])

    probs = [np.full(3, 1 / 3), np.full(3, 1 / 3), np.full(2, 0.5), np.full(2, 0.5), np.full(4, 0.25)]
    return _grid_process("many_small", columns, probs, p_fn, court_fn, 3, 3_000)


def _demo() -> Process:
    truth, court = true_risk_levels()
    scenario = load_scenario(demo_scenario_path())
    tier_level = np.array([0, 0, 1, 1, 2])

    def threshold(lay: CellLayout) -> np.ndarray:
        return np.eye(3)[tier_level[lay.codes("aid_tier")]]

    def middle(lay: CellLayout) -> np.ndarray:
        return np.eye(3)[np.ones(lay.n_cells, dtype=np.int64)]

    def simulate(n: int, seed: int) -> pd.DataFrame:
        return simulate_cases(n, seed=seed)[0]

    assert tuple(truth.level_values) == DEMO_LEVELS
    return Process("demo", scenario, truth, court, {"tiers 1-2 / 3-4 / 5": threshold, "all supervised": middle},
                   simulate, 20_000)


PROCESSES = {"demo": _demo, "varying": _varying, "four_levels": _four_levels, "many_small": _many_small}


def process(name: str) -> Process:
    """The named process (see the module docstring)."""
    return PROCESSES[name]()
