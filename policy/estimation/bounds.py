"""Bounds on the outcome probabilities when the decision may be confounded within a cell.

Two ways to drop unconfoundedness (method notes, section 3), each giving, for every cell x,
outcome kind j and decision level d, an interval [lower, upper] that holds p_jd(x) =
P(Y_j(d) = 1 | x):

**Monotone treatment response bounds** (Manski 1997). Only monotonicity is assumed: a harsher
decision never makes the outcome more likely, Y(d) >= Y(d+1). A case given decision z reveals
Y(z); for d < z monotonicity gives Y(d) >= Y(z), for d > z it gives Y(d) <= Y(z). With the
cell's shares P(D = z, outcome recorded as 1 / as 0),

    lower_d = P(Y = 1, D >= d)
    upper_d = 1 - P(Y = 0, D <= d)        ( = P(Y = 1, D <= d) + P(D > d) with no missing records )

A case whose outcome record is missing reveals nothing, so it counts as 1 in the upper and 0
in the lower bound (``missing="worst_case"``, the default); with ``missing="ignore"`` the
missing records of a (cell, decision) are taken to fare like the recorded ones there.

**Sensitivity parameter Gamma >= 1.** Write p_d^(z) = P(Y(d) = 1 | D = z, x) for the cases
given decision z; only p_d^(d) is identified (estimated by the tool's point estimate
p^_d(x), which assumes p_d^(z) = p_d^(d) for all z). The model: within a cell, the odds of the
outcome under decision d differ between the cases given different decisions by a factor of at
most Gamma,

    1/Gamma <= odds(p_d^(z)) / odds(p_d^(z')) <= Gamma   for all z, z',

together with monotonicity applied to each group (p_d^(z) >= p^_z for z > d, p_d^(z) <= p^_z
for z < d). With pi_z the cell's share of cases given decision z, L_G(m) = m / (m + G(1-m))
and U_G(m) = G m / (G m + 1 - m) the probabilities whose odds are those of m divided and
multiplied by G, the sharp interval for p_d = sum_z pi_z p_d^(z) is

    lower_d = pi_d p^_d + sum_{z<d} pi_z L_G(p^_d) + sum_{z>d} pi_z max(L_G(p^_d), p^_z)
    upper_d = pi_d p^_d + sum_{z<d} pi_z min(U_G(p^_d), p^_z) + sum_{z>d} pi_z U_G(p^_d).

Gamma = 1 gives lower = upper = p^_d (the point estimate); the intervals widen with Gamma and
tend, as Gamma grows, to the monotone-response bounds evaluated at the estimated rates:
[sum_{z>=d} pi_z p^_z, sum_{z<=d} pi_z p^_z + sum_{z>d} pi_z].

The extremes of every group sit within a factor Gamma of each other in odds, so each interval
is attained (sharp) for each (cell, outcome kind, level) on its own; the tool uses the box of
these intervals, which contains every joint distribution consistent with the assumptions.

References
----------
Manski, C. F. (1997). Monotone treatment response. Econometrica 65(6), 1311-1334.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from policy.cautions import assumptions_for
from policy.inputs.cells import CellTable
from policy.errors import InputError
from policy.estimation.strata import RiskLevels

__all__ = [
    "RiskBounds",
    "monotone_response_bounds",
    "odds_shift",
    "sensitivity_interval",
    "decision_shares",
    "manski_bounds",
    "sensitivity_bounds",
    "point_bounds",
    "robust_assumptions",
]

MISSING_TREATMENTS = ("worst_case", "ignore")


# ----------------------------------------------------------------------------------------------
# Array functions (vectorized over leading axes)
# ----------------------------------------------------------------------------------------------
def monotone_response_bounds(cases: np.ndarray, observed: np.ndarray, events: np.ndarray,
                             missing: str = "worst_case") -> tuple[np.ndarray, np.ndarray]:
    """Manski (1997) bounds on P(Y(d) = 1) for an outcome that cannot rise with a harsher decision.

    Parameters
    ----------
    cases : ndarray of shape (..., L)
        Cases (or population shares) given each decision level z, per unit (cell).
    observed : ndarray of shape (..., J, L)
        Of those, the cases whose outcome of kind j was recorded.
    events : ndarray of shape (..., J, L)
        Of those, the cases with the adverse outcome.
    missing : {'worst_case', 'ignore'}
        'worst_case': a missing record could be either value (only monotonicity is assumed).
        'ignore': missing records of a (unit, level) fare like its recorded ones; where a
        level has cases but no record at all, its cases still count as unknown.

    Returns
    -------
    lower, upper : ndarray of shape (..., J, L)
        lower_d = P(Y = 1, D >= d), upper_d = 1 - P(Y = 0, D <= d); both non-increasing in d.

    Notes
    -----
    For a case given z, monotonicity gives Y(d) >= Y(z) when d < z and Y(d) <= Y(z) when
    d > z, and Y(d) = Y(z) when d = z. The lower bound puts Y(d) = 1 only where it is forced
    (a recorded event at z >= d); the upper puts Y(d) = 0 only where forced (a recorded
    non-event at z <= d).
    """
    if missing not in MISSING_TREATMENTS:
        raise InputError(f"missing must be one of {', '.join(MISSING_TREATMENTS)}; got {missing!r}.")
    cases = np.asarray(cases, dtype=np.float64)[..., None, :]
    observed = np.asarray(observed, dtype=np.float64)
    events = np.asarray(events, dtype=np.float64)
    total = cases.sum(axis=-1, keepdims=True)
    non_events = observed - events
    if missing == "ignore":
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(observed > 0, cases / np.where(observed > 0, observed, 1.0), 0.0)
        events = events * scale
        non_events = non_events * scale
    share_events = events / total
    share_non_events = non_events / total
    # P(Y = 1, D >= d): reversed cumulative sum over the level axis
    lower = np.flip(np.cumsum(np.flip(share_events, axis=-1), axis=-1), axis=-1)
    upper = 1.0 - np.cumsum(share_non_events, axis=-1)
    return np.clip(lower, 0.0, 1.0), np.clip(upper, 0.0, 1.0)


def odds_shift(m: np.ndarray, factor: float | np.ndarray) -> np.ndarray:
    """The probability whose odds are those of ``m`` times ``factor``: f m / (f m + 1 - m)."""
    m = np.asarray(m, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = factor * m / (factor * m + 1.0 - m)
    return np.where(m <= 0, 0.0, np.where(m >= 1, 1.0, out))


def sensitivity_interval(p: np.ndarray, shares: np.ndarray, gamma: float) -> tuple[np.ndarray, np.ndarray]:
    """Bounds on p_d under the odds-ratio sensitivity model with parameter ``gamma``.

    Parameters
    ----------
    p : ndarray of shape (..., J, L)
        Point estimates p^_d (non-increasing in d), read as P(Y(d) = 1 | D = d, x).
    shares : ndarray of shape (..., L)
        The cell's share of cases given each decision level (rows sum to 1).
    gamma : float
        Gamma >= 1.

    Returns
    -------
    lower, upper : ndarray of shape (..., J, L)
        See the module notes for the formula.
    """
    if not np.isfinite(gamma) or gamma < 1:
        raise InputError(f"Gamma must be a finite number >= 1; got {gamma!r}.")
    p = np.asarray(p, dtype=np.float64)
    pi = np.asarray(shares, dtype=np.float64)[..., None, None, :]  # (..., 1, 1(d), L(z))
    L = p.shape[-1]
    z = np.arange(L)
    below = (z[None, :] < z[:, None])  # [d, z]: z < d
    above = (z[None, :] > z[:, None])  # [d, z]: z > d
    lo_g = odds_shift(p, 1.0 / gamma)[..., :, None]   # L_G(p_d), shape (..., J, L(d), 1)
    hi_g = odds_shift(p, gamma)[..., :, None]
    pz = p[..., None, :]                              # p_z, shape (..., J, 1, L(z))
    lo_z = np.where(above, np.maximum(lo_g, pz), lo_g)
    hi_z = np.where(below, np.minimum(hi_g, pz), hi_g)
    same = np.eye(L, dtype=bool)
    lo_z = np.where(same, p[..., :, None], lo_z)
    hi_z = np.where(same, p[..., :, None], hi_z)
    lower = np.sum(pi * lo_z, axis=-1)
    upper = np.sum(pi * hi_z, axis=-1)
    return np.clip(lower, 0.0, 1.0), np.clip(upper, 0.0, 1.0)


def decision_shares(cells: CellTable) -> np.ndarray:
    """Each cell's share of cases given each decision level, pooled over arms; shape (n_cells, L)."""
    cases = cells.cases.sum(axis=1).astype(np.float64)
    return cases / cases.sum(axis=1, keepdims=True)


# ----------------------------------------------------------------------------------------------
# Result type
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RiskBounds:
    """An interval for every outcome probability p_jd(x), and what it assumes.

    Attributes
    ----------
    key : str
        Short name used in output tables: ``point``, ``gamma=<G>``, ``bounds``.
    label : str
        Name for people ("point estimate", "Gamma = 2", "monotone bounds").
    lower, upper : ndarray of shape (n_cells, J, L)
    gamma : float
        1 for the point estimate, Gamma for the sensitivity model, inf for the monotone bounds.
    figure : str
        Key of :data:`policy.cautions.FIGURE_ASSUMPTIONS` naming what the interval assumes.
    note : str
        How missing records were treated, or other details.
    """

    key: str
    label: str
    lower: np.ndarray
    upper: np.ndarray
    gamma: float
    figure: str
    note: str = ""
    assumptions: tuple[str, ...] = field(default=())

    @property
    def width(self) -> np.ndarray:
        return self.upper - self.lower

    def contains(self, p: np.ndarray, tol: float = 1e-12) -> np.ndarray:
        """Whether each p_jd(x) lies in its interval, shape of ``p``."""
        return (p >= self.lower - tol) & (p <= self.upper + tol)

    def to_frame(self, risk_levels: RiskLevels) -> pd.DataFrame:
        """Tidy table: cell columns, ``cases``, ``assumption``, ``gamma``, ``outcome``, ``level``,
        ``lower``, ``upper``, ``point`` (the point estimate)."""
        n, J, L = self.lower.shape
        cell, j, d = np.indices((n, J, L)).reshape(3, -1)
        out = risk_levels.layout.frame.iloc[cell].reset_index(drop=True).copy()
        for c in out.columns:
            out[c] = out[c].astype(object)
        out["cases"] = risk_levels.weights[cell]
        out["assumption"] = self.key
        out["gamma"] = self.gamma
        out["outcome"] = np.asarray(risk_levels.outcome_keys, dtype=object)[j]
        out["level"] = np.asarray(risk_levels.level_values, dtype=object)[d]
        out["lower"] = self.lower.reshape(-1)
        out["upper"] = self.upper.reshape(-1)
        out["point"] = risk_levels.p.reshape(-1)
        return out

    def __str__(self) -> str:
        w = self.width
        return (f"{self.label}: intervals for {w.shape[0]:,} cells x {w.shape[1]} outcome kinds x {w.shape[2]} levels; "
                f"median width {np.median(w):.3f}, largest {w.max():.3f}. {self.note}").strip()


def _zero_where_impossible(lower: np.ndarray, upper: np.ndarray, risk_levels: RiskLevels) -> tuple[np.ndarray, np.ndarray]:
    zero = risk_levels.structural_zero
    if zero is None:
        return lower, upper
    return np.where(zero, 0.0, lower), np.where(zero, 0.0, upper)


def manski_bounds(cells: CellTable, risk_levels: RiskLevels, missing: str = "worst_case") -> RiskBounds:
    """Monotone treatment response bounds for every cell of a cell table (Manski 1997).

    Parameters
    ----------
    cells : CellTable
        Counts; arms are pooled (the bounds do not use the exclusion restriction).
    risk_levels : RiskLevels
        The same cells (supplies the declared structural zeros, which are known and kept at 0).
    missing : {'worst_case', 'ignore'}
        Treatment of missing outcome records (see :func:`monotone_response_bounds`).
    """
    _check_same_cells(cells, risk_levels)
    lower, upper = monotone_response_bounds(cells.cases.sum(axis=1), cells.observed.sum(axis=1),
                                            cells.events.sum(axis=1), missing)
    lower, upper = _zero_where_impossible(lower, upper, risk_levels)
    note = ("missing outcome records could be either value" if missing == "worst_case"
            else "missing outcome records fare like recorded ones within cell and level")
    return RiskBounds("bounds", "monotone bounds", lower, upper, np.inf, "bounds", note,
                      tuple(assumptions_for("bounds")))


def sensitivity_bounds(risk_levels: RiskLevels, shares: np.ndarray, gamma: float) -> RiskBounds:
    """Intervals under the sensitivity model with parameter ``gamma`` around the point estimate.

    Parameters
    ----------
    risk_levels : RiskLevels
        Point estimates p^_jd(x).
    shares : ndarray of shape (n_cells, L)
        Each cell's decision shares (:func:`decision_shares`).
    gamma : float
        Gamma >= 1; 1 returns the point estimate itself.
    """
    shares = np.asarray(shares, dtype=np.float64)
    if shares.shape != (risk_levels.n_cells, risk_levels.n_levels):
        raise InputError(f"decision shares must have shape {(risk_levels.n_cells, risk_levels.n_levels)}; got {shares.shape}.")
    lower, upper = sensitivity_interval(risk_levels.p, shares, float(gamma))
    lower, upper = _zero_where_impossible(lower, upper, risk_levels)
    if gamma == 1:
        lower = upper = risk_levels.p
    key = f"gamma={gamma:g}"
    return RiskBounds(key, f"Gamma = {gamma:g}", lower, upper, float(gamma), "sensitivity",
                      "odds of the outcome may differ by this factor between cases given different decisions",
                      tuple(assumptions_for("sensitivity")))


def point_bounds(risk_levels: RiskLevels) -> RiskBounds:
    """The point estimate as a degenerate interval (unconfoundedness given the cell)."""
    return RiskBounds("point", "point estimate", risk_levels.p, risk_levels.p, 1.0, "rule",
                      "unconfoundedness given the cell", tuple(assumptions_for("rule")))


def robust_assumptions(risk_levels: RiskLevels, cells: CellTable | None, gammas: Sequence[float] = (),
                       bounds: bool = True, missing: str = "worst_case") -> list[RiskBounds]:
    """The point estimate, then one interval per Gamma (ascending), then the monotone bounds.

    Parameters
    ----------
    risk_levels : RiskLevels
    cells : CellTable or None
        Needed for anything beyond the point estimate (decision shares and counts).
    gammas : sequence of float
        Gamma values >= 1 (1 is dropped: it is the point estimate).
    bounds : bool
        Include the monotone-response bounds.
    missing : {'worst_case', 'ignore'}
    """
    out = [point_bounds(risk_levels)]
    gammas = sorted({float(g) for g in gammas})
    bad = [g for g in gammas if not np.isfinite(g) or g < 1]
    if bad:
        raise InputError(f"Gamma values must be finite numbers >= 1; got {bad[0]!r}.")
    gammas = [g for g in gammas if g > 1]
    if (gammas or bounds) and cells is None:
        raise InputError(
            f"robust regions need the counts per cell and decision level, which {risk_levels.source} does not hold; "
            "use a case or counts table, or ask for no Gamma values and no bounds."
        )
    if gammas:
        shares = decision_shares(cells)
        _check_same_cells(cells, risk_levels)
        out += [sensitivity_bounds(risk_levels, shares, g) for g in gammas]
    if bounds:
        out.append(manski_bounds(cells, risk_levels, missing))
    return out


def _check_same_cells(cells: CellTable, risk_levels: RiskLevels) -> None:
    if cells.n_cells != risk_levels.n_cells or tuple(cells.levels) != tuple(risk_levels.level_values):
        raise InputError(
            f"the cell table ({cells.n_cells} cells, levels {cells.levels}) and the risk levels "
            f"({risk_levels.n_cells} cells, levels {risk_levels.level_values}) must describe the same cells."
        )
