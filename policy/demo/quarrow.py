"""The invented demo jurisdiction, Quarrow County, and its case simulator.

Everything here is made up for demonstration: the county, its risk aid (the Quarrow Release
Screen, 0-12 points in five tiers) and its recommendation table, the courts' habits and the
people. The simulator draws each case's risk levels (principal strata) from a known model that
satisfies monotonicity, draws the court's decision from the cell (so unconfoundedness given the
cell holds by construction; in :data:`CONFOUNDED` the courts also act on a factor that neither the
cells nor the screen record), with the aid shown to a random half of the hearings, and records
the outcome of the decision actually made. :func:`true_risk_levels` gives the exact per-cell
truth for recovery and coverage tests, :func:`true_arm_rates` the exact rate per cell, arm and level.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit

from policy.inputs.cells import CellLayout
from policy.estimation.strata import RiskLevels

__all__ = ["simulate_cases", "true_risk_levels", "true_arm_rates", "true_group_rates", "DEMO", "CONFOUNDED", "builtin_scenarios", "demo_scenario_path"]

LEVELS = ("recognizance", "supervision", "bond")
OUTCOMES = ("missed_court", "new_offense", "new_violent")


@dataclass(frozen=True)
class DemoModel:
    """Parameters of the invented county. Effects are on the log-odds scale."""

    ages: tuple = ("18-25", "26-40", "41+")
    age_p: tuple = (0.30, 0.45, 0.25)
    charges: tuple = ("misdemeanor", "felony", "violent felony")
    charge_p: tuple = (0.55, 0.32, 0.13)
    priors: tuple = ("none", "some", "extensive")
    sexes: tuple = ("female", "male")
    sex_p: tuple = (0.24, 0.76)
    races: tuple = ("A", "B", "C")
    race_p: tuple = (0.50, 0.35, 0.15)
    # prior record distribution by race group: uneven records, not uneven behaviour
    prior_p_by_race: tuple = ((0.50, 0.35, 0.15), (0.38, 0.38, 0.24), (0.45, 0.37, 0.18))
    pending_p: float = 0.22
    # unmeasured-by-the-cell factor seen by the aid: earlier missed appearances (0, 1, 2+)
    missed_before_p_by_age: tuple = ((0.62, 0.25, 0.13), (0.68, 0.22, 0.10), (0.78, 0.16, 0.06))
    # the aid's points
    points_age: tuple = (2, 1, 0)
    points_charge: tuple = (0, 1, 2)
    points_prior: tuple = (0, 2, 3)
    points_pending: int = 2
    points_missed: tuple = (0, 2, 3)
    tier_cuts: tuple = (2, 4, 6, 8)  # points <= 2 tier 1, <= 4 tier 2, ... > 8 tier 5
    # risk under recognizance: intercept and effects per outcome kind (missed court, new offense)
    base: tuple = (-2.05, -2.35)
    age_eff: tuple = ((0.35, 0.45), (0.0, 0.0), (-0.45, -0.55))
    charge_eff: tuple = ((0.0, 0.0), (0.10, 0.20), (-0.10, 0.30))
    prior_eff: tuple = ((0.0, 0.0), (0.40, 0.50), (0.75, 0.95))
    pending_eff: tuple = (0.30, 0.45)
    missed_eff: tuple = ((0.0, 0.0), (0.65, 0.20), (1.05, 0.35))
    sex_eff: tuple = ((0.0, -0.20), (0.0, 0.0))
    # share of new offenses that are violent, by charge class
    violent_share: tuple = (0.08, 0.14, 0.30)
    # outcome probability kept at each level relative to recognizance (missed court, new offense)
    kept: tuple = ((1.0, 1.0), (0.72, 0.84), (0.30, 0.42))
    # the court's ordered-logit decision model
    court_cuts: tuple = (1.05, 2.75)
    court_age: tuple = (0.15, 0.0, -0.25)
    court_charge: tuple = (0.0, 0.95, 2.10)
    court_prior: tuple = (0.0, 0.55, 1.15)
    court_pending: float = 0.45
    court_race: tuple = (0.0, 0.30, 0.15)
    court_race_with_aid: tuple = (0.0, 0.12, 0.06)
    court_tier_with_aid: float = 0.45  # per tier above 3, when the aid is shown
    court_sex: tuple = (-0.25, 0.0)
    # a factor neither the cells nor the screen record: ties to the community that the court hears
    # about at the hearing (share of cases that have them, their effect on the log-odds of missed
    # court and new offense, and the court's reaction without and with the screen shown). Absent
    # in the demo (share 0: unconfoundedness given the cell holds); see CONFOUNDED.
    ties_p: float = 0.0
    ties_eff: tuple = (0.0, 0.0)
    court_ties: float = 0.0
    court_ties_with_aid: float = 0.0
    # days held if a secured bond is set, by charge class; cost per day
    bond_days: tuple = (6.0, 21.0, 40.0)
    cost_per_day: float = 96.0  # 85 jail + 11 liberty (see scenarios/demo.toml for sources)
    detention_harm: float = 2500.0  # employment and family (an assumption of the demo)
    missing_share: float = 0.04
    aid_share: float = 0.5


DEMO = DemoModel()
#: A confounded variant: courts hear of each person's ties to the community, which lower the risk and
#: which neither the cells nor the screen record, and lean on them less when the screen is shown.
CONFOUNDED = DemoModel(ties_p=0.5, ties_eff=(-1.6, -1.3), court_ties=-2.6, court_ties_with_aid=-0.4)
CELL_COLUMNS = ("age_band", "charge_class", "prior_record", "pending_case", "aid_tier", "sex", "race_group")


def _tier(points: np.ndarray, m: DemoModel) -> np.ndarray:
    return 1 + np.searchsorted(np.asarray(m.tier_cuts), points, side="left")


def _recommendation(tier: np.ndarray, charge: np.ndarray) -> np.ndarray:
    """The Quarrow Release Screen's own table: tiers 1-2 recognizance, 3 supervision,
    4 supervision (bond for a violent felony), 5 bond."""
    rec = np.select([tier <= 2, tier == 3, tier == 4], [0, 1, 1], default=2)
    return np.where((tier == 4) & (charge == 2), 2, rec)


def _p_recognizance(age, charge, prior, pending, missed, sex, ties, m: DemoModel) -> np.ndarray:
    """P(outcome | recognizance) for missed court and new offense, shape (..., 2)."""
    out = []
    for j in range(2):
        eta = (m.base[j] + np.take([a[j] for a in m.age_eff], age) + np.take([c[j] for c in m.charge_eff], charge)
               + np.take([p[j] for p in m.prior_eff], prior) + m.pending_eff[j] * pending
               + np.take([e[j] for e in m.missed_eff], missed) + np.take([s[j] for s in m.sex_eff], sex)
               + m.ties_eff[j] * ties)
        out.append(expit(eta))
    return np.stack(out, axis=-1)


def _p_all(p0: np.ndarray, charge: np.ndarray, m: DemoModel) -> np.ndarray:
    """P(outcome | decision), shape (..., 3 outcomes, 3 levels), non-increasing in the level."""
    kept = np.asarray(m.kept)  # (levels, 2)
    p_mc = p0[..., 0:1] * kept[:, 0]
    p_no = p0[..., 1:2] * kept[:, 1]
    p_v = p_no * np.take(m.violent_share, charge)[..., None]
    return np.stack([p_mc, p_no, p_v], axis=-2)


def _court_probabilities(age, charge, prior, pending, tier, sex, race, arm, ties, m: DemoModel) -> np.ndarray:
    eta = (np.take(m.court_age, age) + np.take(m.court_charge, charge) + np.take(m.court_prior, prior)
           + m.court_pending * pending + np.take(m.court_sex, sex)
           + np.where(arm == 1, np.take(m.court_race_with_aid, race) + m.court_tier_with_aid * (tier - 3)
                      + m.court_ties_with_aid * ties,
                      np.take(m.court_race, race) + m.court_ties * ties))
    c1, c2 = m.court_cuts
    f1, f2 = expit(eta - c1), expit(eta - c2)  # P(D >= 1), P(D >= 2)
    return np.stack([1 - f1, f1 - f2, f2], axis=-1)


def simulate_cases(n: int = 20_000, seed: int | np.random.Generator | None = 20261202,
                   model: DemoModel = DEMO) -> tuple[pd.DataFrame, dict]:
    """Draw ``n`` first-appearance hearings of the invented Quarrow County.

    Parameters
    ----------
    n : int
        Number of cases.
    seed : int, Generator or None
        Random state; the same seed gives the same table.
    model : DemoModel

    Returns
    -------
    cases : DataFrame
        One row per case: case_id, the cell columns, aid_points, aid_shown (0/1),
        aid_recommendation, decision, the three outcome columns (0/1, empty when the record was
        not found) and bond_cost (expected cost of the detention a secured bond brings).
    truth : dict
        ``risk_level`` : ndarray of shape (n, 3) with each case's true risk level per outcome,
        and the arrays the tests use.
    """
    from policy.inputs.limits import simulated_cases, whole_number

    n = simulated_cases(n, "the number of simulated cases")
    if isinstance(seed, int) and not isinstance(seed, bool):
        whole_number(seed, "the simulation's seed", low=0)
    rng = np.random.default_rng(seed)
    m = model
    age = rng.choice(3, size=n, p=m.age_p)
    charge = rng.choice(3, size=n, p=m.charge_p)
    race = rng.choice(3, size=n, p=m.race_p)
    sex = rng.choice(2, size=n, p=m.sex_p)
    u = rng.random(n)
    prior = (u[:, None] > np.cumsum(np.asarray(m.prior_p_by_race)[race], axis=1)[:, :2]).sum(axis=1)
    pending = (rng.random(n) < m.pending_p).astype(np.int64)
    u = rng.random(n)
    missed = (u[:, None] > np.cumsum(np.asarray(m.missed_before_p_by_age)[age], axis=1)[:, :2]).sum(axis=1)
    points = (np.take(m.points_age, age) + np.take(m.points_charge, charge) + np.take(m.points_prior, prior)
              + m.points_pending * pending + np.take(m.points_missed, missed))
    tier = _tier(points, m)
    # drawn only when the model has the factor, so the demo's own draws stay as they were
    ties = (rng.random(n) < m.ties_p).astype(np.int64) if m.ties_p > 0 else np.zeros(n, dtype=np.int64)
    p = _p_all(_p_recognizance(age, charge, prior, pending, missed, sex, ties, m), charge, m)  # (n, 3, 3)
    # risk level R_j = number of levels under which the outcome occurs: P(R > d) = p_d
    u = rng.random(n)
    risk = np.empty((n, 3), dtype=np.int64)
    risk[:, 0] = (u[:, None] < p[:, 0, :]).sum(axis=1)
    u = rng.random(n)
    risk[:, 1] = (u[:, None] < p[:, 1, :]).sum(axis=1)
    # a new violent offense is a new offense that is violent: R_violent is R_new or 0
    violent = rng.random(n) < np.take(m.violent_share, charge)
    risk[:, 2] = np.where(violent, risk[:, 1], 0)
    arm = (rng.random(n) < m.aid_share).astype(np.int64)
    probs = _court_probabilities(age, charge, prior, pending, tier, sex, race, arm, ties, m)
    decision = (rng.random(n)[:, None] > np.cumsum(probs, axis=1)[:, :2]).sum(axis=1)
    outcome = (decision[:, None] < risk).astype(np.float64)
    record_missing = rng.random(n) < m.missing_share
    outcome[record_missing, 1:] = np.nan  # the offense records come from one source
    outcome[rng.random(n) < m.missing_share, 0] = np.nan
    frame = pd.DataFrame({
        "case_id": [f"QC-{i:06d}" for i in range(1, n + 1)],
        "age_band": np.asarray(m.ages, dtype=object)[age],
        "charge_class": np.asarray(m.charges, dtype=object)[charge],
        "prior_record": np.asarray(m.priors, dtype=object)[prior],
        "pending_case": np.asarray(["no", "yes"], dtype=object)[pending],
        "aid_points": points,
        "aid_tier": tier,
        "sex": np.asarray(m.sexes, dtype=object)[sex],
        "race_group": np.asarray(m.races, dtype=object)[race],
        "aid_shown": arm,
        "aid_recommendation": np.asarray(LEVELS, dtype=object)[_recommendation(tier, charge)],
        "decision": np.asarray(LEVELS, dtype=object)[decision],
        "missed_court": pd.array(outcome[:, 0], dtype="Int64"),
        "new_offense": pd.array(outcome[:, 1], dtype="Int64"),
        "new_violent": pd.array(outcome[:, 2], dtype="Int64"),
        "bond_cost": np.take(m.bond_days, charge) * m.cost_per_day + m.detention_harm,
    })
    truth = {"risk_level": risk, "decision": decision, "arm": arm, "p_case": p}
    return frame, truth


def _enumerate(m: DemoModel) -> dict:
    """Every combination of the cell columns and the factors the cell does not hold, with its
    probability, outcome probabilities, court decision probabilities per arm and cell position."""
    ties_values = range(2) if m.ties_p > 0 else range(1)
    combos = np.array(list(itertools.product(range(3), range(3), range(3), range(2), range(3), range(2), range(3),
                                             ties_values)))
    age, charge, prior, pending, missed, sex, race, ties = combos.T
    prob = (np.take(m.age_p, age) * np.take(m.charge_p, charge) * np.take(m.race_p, race) * np.take(m.sex_p, sex)
            * np.asarray(m.prior_p_by_race)[race, prior] * np.where(pending == 1, m.pending_p, 1 - m.pending_p)
            * np.asarray(m.missed_before_p_by_age)[age, missed] * np.where(ties == 1, m.ties_p, 1 - m.ties_p))
    points = (np.take(m.points_age, age) + np.take(m.points_charge, charge) + np.take(m.points_prior, prior)
              + m.points_pending * pending + np.take(m.points_missed, missed))
    tier = _tier(points, m)
    p = _p_all(_p_recognizance(age, charge, prior, pending, missed, sex, ties, m), charge, m)
    court = np.stack([_court_probabilities(age, charge, prior, pending, tier, sex, race, np.full_like(age, a), ties, m)
                      for a in (0, 1)], axis=1)
    cell_codes = [age, charge, prior, pending, tier - 1, sex, race]
    sizes = [3, 3, 3, 2, 5, 2, 3]
    key = np.ravel_multi_index(cell_codes, sizes)
    cells, pos = np.unique(key, return_inverse=True)
    parts = np.unravel_index(cells, sizes)
    cats = [list(m.ages), list(m.charges), list(m.priors), ["no", "yes"], [1, 2, 3, 4, 5], list(m.sexes), list(m.races)]
    frame = pd.DataFrame({c: pd.Categorical.from_codes(part.astype(np.int64), categories=k, ordered=True)
                          for c, part, k in zip(CELL_COLUMNS, parts, cats)})
    return {"prob": prob, "p": p, "court": court, "pos": pos, "frame": frame}


def _cell_sum(pos: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Sum of ``values`` (n_combos, ...) over the combinations of each cell."""
    flat = values.reshape(len(pos), -1)
    out = np.stack([np.bincount(pos, weights=flat[:, k]) for k in range(flat.shape[1])], axis=1)
    return out.reshape((-1,) + values.shape[1:])


def true_risk_levels(model: DemoModel = DEMO) -> tuple[RiskLevels, np.ndarray]:
    """The exact population truth of the simulator per cell.

    Enumerates every combination of the cell columns and the factors the cell does not hold
    (earlier missed appearances; ties to the community where the model has them), with its
    probability, and mixes within cells.

    Returns
    -------
    truth : RiskLevels
        Weights are the population share of each cell (summing to 1); p is exact.
    decision_probabilities : ndarray of shape (n_cells, 2 arms, 3 levels)
        The court's exact decision distribution per cell and arm.
    """
    m = model
    e = _enumerate(m)
    prob, pos, frame = e["prob"], e["pos"], e["frame"]
    w = np.bincount(pos, weights=prob)
    p_cell = _cell_sum(pos, prob[:, None, None] * e["p"]) / w[:, None, None]
    court_cell = _cell_sum(pos, prob[:, None, None] * e["court"]) / w[:, None, None]
    layout = CellLayout(frame, ("sex", "race_group"), ("aid_tier", "charge_class"), "aid_tier")
    truth = RiskLevels(
        layout=layout,
        level_values=LEVELS,
        level_labels=LEVELS,
        outcome_keys=OUTCOMES,
        outcome_labels=OUTCOMES,
        weights=w,
        p=p_cell,
        borrowed=np.zeros_like(p_cell, dtype=bool),
        cell_costs={"bond_cost": np.asarray(m.bond_days)[frame["charge_class"].cat.codes.to_numpy()] * m.cost_per_day
                    + m.detention_harm},
        source="the simulator's exact population truth",
    )
    return truth, court_cell


def true_arm_rates(model: DemoModel = DEMO) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """The exact outcome rate of every cell x arm x decision level, as the data would show it.

    Returns
    -------
    cells : DataFrame
        The cell columns (same cells and order as :func:`true_risk_levels`).
    rates : ndarray of shape (n_cells, 2 arms, 3 outcome kinds, 3 levels)
        P(Y_j = 1 | D = d, x, arm): equal across arms exactly when the court acts on the cell alone.
    decision_probabilities : ndarray of shape (n_cells, 2 arms, 3 levels)
    """
    e = _enumerate(model)
    prob, pos = e["prob"], e["pos"]
    w = np.bincount(pos, weights=prob)
    mass = prob[:, None, None] * e["court"]  # (combos, arm, level)
    both = _cell_sum(pos, mass[:, :, None, :] * e["p"][:, None, :, :])  # (cells, arm, J, L)
    at = _cell_sum(pos, mass)  # (cells, arm, L)
    return e["frame"], both / at[:, :, None, :], at / w[:, None, None]


def true_group_rates(model: DemoModel = DEMO) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """The exact rate of every potential outcome among the cases given each decision, per cell and arm.

    Returns
    -------
    cells : DataFrame
        As :func:`true_arm_rates`.
    rates : ndarray of shape (n_cells, 2 arms, 3 outcome kinds, 3 levels d, 3 levels z)
        P(Y_j(d) = 1 | D = z, x, arm): the rate the cases given level z would have had at level d
        (z = d is the observed rate of :func:`true_arm_rates`).
    gamma : float
        The sensitivity model's Gamma that the simulator satisfies exactly within each arm: the
        largest odds ratio of Y_j(d) between two groups given different levels, over cells, arms,
        outcome kinds and levels (groups of positive probability only).
    """
    e = _enumerate(model)
    prob, pos = e["prob"], e["pos"]
    mass = prob[:, None, None] * e["court"]  # (combos, arm, z)
    both = _cell_sum(pos, mass[:, :, None, None, :] * e["p"][:, None, :, :, None])  # (cells, arm, J, d, z)
    at = _cell_sum(pos, mass)  # (cells, arm, z)
    with np.errstate(invalid="ignore", divide="ignore"):
        rates = both / at[:, :, None, None, :]
        odds = np.log(rates / (1.0 - rates))
    odds = np.where(at[:, :, None, None, :] > 1e-12, odds, np.nan)
    spread = np.nanmax(odds, axis=-1) - np.nanmin(odds, axis=-1)
    return e["frame"], rates, float(np.exp(np.nanmax(spread)))


def builtin_scenarios() -> Path:
    """Folder of the example scenarios shipped with the tool."""
    package = Path(__file__).resolve().parent.parent  # the policy package folder
    for candidate in (package / "_scenarios", package.parent / "scenarios"):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError("the example scenarios are not installed with this copy of the tool")


def demo_scenario_path() -> Path:
    """The built-in demo scenario file."""
    return builtin_scenarios() / "demo.toml"
