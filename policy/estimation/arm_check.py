"""Test unconfoundedness with the randomized arm, and the least confounding the data show.

Where the aid was shown at a random part of the hearings (arm Z), unconfoundedness given the
cell within each arm, randomization of Z and the exclusion restriction imply (method notes,
section 10)

    P(Y_j = 1 | D = d, x, Z = 1) = P(Y_j(d) = 1 | x) = P(Y_j = 1 | D = d, x, Z = 0),

so within every cell x decision level the outcome rate must not differ by arm.

**The test** (:func:`arm_check`), per outcome kind j: for every decision level d, the
Cochran-Mantel-Haenszel statistic of the 2 x 2 tables (arm x outcome recorded as 1 / 0) over
the cells where both arms have a recorded outcome at d,

    CMH_d = (sum_x (a_x - E a_x))^2 / sum_x V_x,
    E a_x = n1_x m_x / N_x,   V_x = n1_x n0_x m_x (N_x - m_x) / (N_x^2 (N_x - 1)),

(a_x events where the aid was shown, n1_x / n0_x records with / without the aid, m_x events,
N_x records), and the statistic Q_j = sum_d CMH_d, chi-square with one degree of freedom per
level that has information, under the hypothesis. The levels are separate because selection on
an unrecorded factor pushes the rates in opposite directions at the lenient and the harsh end
(a court that holds the riskier cases leaves safer ones at release on recognizance); a single
common odds ratio over all levels would let those cancel. Within a level, the direction of a
confounded selection is shared by the cells, which is where a one-degree-of-freedom pooled
statistic has its power. Outcome records that are missing are left out (missing at random given
cell, arm and level). The verdict over outcome kinds is Bonferroni's: reject when the smallest
p-value times the number of kinds tested is below the level.

**The least confounding the data show** (:func:`gamma_lower_bound`). Under the sensitivity
model of :mod:`policy.estimation.bounds` applied within each arm (the odds of Y_j(d) = 1 differ
between the arm's cases given different decisions by at most a factor Gamma), p_jd(x) is a
mixture of the arm's groups, so its odds lie within a factor Gamma of the arm's rate at (x, d);
both arms' rates then have odds within Gamma of the same p_jd(x), and their odds ratio lies in
[Gamma^-2, Gamma^2]. For a given Gamma the statistic

    T(Gamma) = sum_d max(Z_d(Gamma^2), -Z_d(Gamma^-2), 0)^2,

where Z_d(psi) standardizes sum_x a_x by its mean and variance with every stratum's odds ratio
at psi (Fisher's noncentral hypergeometric law given the table's margins), is bounded by a
chi-square with one degree of freedom per level under that hypothesis; T(1) is Q_j. Gamma_low
is the smallest Gamma at which T(Gamma) no longer exceeds the critical value the test uses (the
largest such value over outcome kinds). It is 1 exactly when the test does not reject, and
every Gamma below it is contradicted by the data at the test's level: a lower confidence bound
on the confounding present (or a sign that the exclusion restriction fails). By default the
strata's odds ratios are not Gamma^2 and Gamma^-2 but those at which the two arms' sensitivity
intervals of p_jd(x) just meet (:func:`overlap_odds_ratios`): a share pi_zd(x) of arm z's cases
was given d, so p_jd(x) is pi r + (1 - pi) x (a rate within Gamma's odds of r), a narrower
interval than the odds alone give, and a larger (sharper) Gamma_low; :func:`overlap_gamma` gives
the same figure for exact rates.

References
----------
Mantel, N. and Haenszel, W. (1959). Statistical aspects of the analysis of data from
retrospective studies of disease. Journal of the National Cancer Institute 22(4), 719-748.
Rosenbaum, P. R. (2002). Observational Studies, 2nd ed. Springer (the odds-ratio sensitivity
parameter Gamma).
Birch, M. W. (1964). The detection of partial association, I: the 2 x 2 case. Journal of the
Royal Statistical Society B 26(2), 313-324 (the conditional law of a 2 x 2 table at a given odds
ratio).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import pandas as pd
from scipy import special

from policy.errors import InputError
from policy.estimation.bounds import odds_shift
from policy.inputs.cells import CellTable

__all__ = ["ArmCheck", "arm_check", "cmh_by_level", "discrepancy_at", "gamma_lower_bound", "gamma_low_rounded",
           "overlap_gamma", "overlap_odds_ratios"]

#: the largest Gamma searched; a stratum needing more is reported as infinite
GAMMA_CEILING = 1e6


# ----------------------------------------------------------------------------------------------
# Array functions
# ----------------------------------------------------------------------------------------------
def cmh_by_level(events: np.ndarray, observed: np.ndarray) -> dict[str, np.ndarray]:
    """Cochran-Mantel-Haenszel statistics per decision level, pooled over cells.

    Parameters
    ----------
    events, observed : ndarray of shape (n_cells, 2, L)
        Events and recorded outcomes of one outcome kind; arm axis (not shown, shown).

    Returns
    -------
    dict of ndarray
        ``difference`` (n_cells, L): a_x - E a_x (events where the aid was shown, minus those
        expected with equal rates); ``variance`` (n_cells, L): V_x (0 outside the strata used);
        ``used`` (n_cells, L): both arms have a record; ``statistic`` (L,): CMH_d (NaN where no
        stratum has information); ``odds_ratio`` (L,): the Mantel-Haenszel common odds ratio,
        shown against not shown; ``contribution`` (n_cells, L): each stratum's share of CMH_d,
        (a_x - E a_x) sum(a - E a) / sum V, which adds up to CMH_d over the cells.
    """
    e = np.asarray(events, dtype=np.float64)
    n = np.asarray(observed, dtype=np.float64)
    n0, n1 = n[:, 0], n[:, 1]
    a, c = e[:, 1], e[:, 0]
    used = (n0 > 0) & (n1 > 0)
    N = n0 + n1
    m = a + c
    with np.errstate(invalid="ignore", divide="ignore"):
        expected = np.where(used, n1 * m / N, 0.0)
        var = np.where(used & (N > 1), n1 * n0 * m * (N - m) / (N * N * (N - 1)), 0.0)
        diff = np.where(used, a - expected, 0.0)
        total_diff = diff.sum(axis=0)
        total_var = var.sum(axis=0)
        statistic = np.where(total_var > 0, total_diff ** 2 / total_var, np.nan)
        contribution = np.where(total_var > 0, diff * total_diff / total_var, 0.0)
        b, d = n1 - a, n0 - c  # non-events shown, not shown
        num = np.where(used, a * d / N, 0.0).sum(axis=0)
        den = np.where(used, b * c / N, 0.0).sum(axis=0)
        odds_ratio = np.where(total_var > 0, num / den, np.nan)
    return {"difference": diff, "variance": var, "used": used & (var > 0), "statistic": statistic,
            "odds_ratio": odds_ratio, "contribution": contribution}


def _z_at(events: np.ndarray, observed: np.ndarray, used: np.ndarray, odds_ratio: float) -> np.ndarray:
    """Per decision level, (sum a - sum E_psi a) / sqrt(sum Var_psi a) with every stratum's 2 x 2
    table at the common odds ratio psi (Fisher's noncentral hypergeometric law of a given the
    margins; psi = 1 gives the Mantel-Haenszel mean and variance). Shape (L,); NaN without
    information."""
    e = np.asarray(events, dtype=np.float64)
    n = np.asarray(observed, dtype=np.float64)
    n0, n1 = n[:, 0], n[:, 1]
    a = e[:, 1]
    m = e.sum(axis=1)
    N = n0 + n1
    ok = used & (m > 0) & (m < N)
    mean = np.zeros_like(a)
    var = np.zeros_like(a)
    if ok.any():
        psi = np.broadcast_to(np.asarray(odds_ratio, dtype=np.float64), a.shape)[ok]
        from scipy import stats  # imported here: scipy.stats costs a second of start-up to commands that never get here

        mu, v = stats.nchypergeom_fisher.stats(N[ok].astype(np.int64), n1[ok].astype(np.int64),
                                               m[ok].astype(np.int64), psi, moments="mv")
        mean[ok], var[ok] = mu, v
    total_var = var.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total_var > 0, np.where(ok, a - mean, 0.0).sum(axis=0) / np.sqrt(total_var), np.nan)


def _invert(p: np.ndarray, pi: np.ndarray, k: float) -> np.ndarray:
    """The rate r with pi r + (1 - pi) S_k(r) = p, S_k(r) the probability whose odds are k times
    r's: the root in [0, 1] of pi (k - 1) r^2 + (pi + (1 - pi) k - p (k - 1)) r - p = 0."""
    a = pi * (k - 1.0)
    b = pi + (1.0 - pi) * k - p * (k - 1.0)
    root = np.sqrt(np.maximum(b * b + 4.0 * a * p, 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(b + root > 0, 2.0 * p / (b + root), 1.0)
    return np.clip(r, 0.0, 1.0)


def _arm_interval(r: np.ndarray, pi: np.ndarray, gamma: float) -> tuple[np.ndarray, np.ndarray]:
    """The sensitivity interval of p_d(x) from one arm: pi r + (1 - pi) [S_{1/Gamma}(r), S_Gamma(r)],
    r the arm's rate at (x, d) and pi its share of cases given d (the levels' monotone links left
    out, so the interval is an outer one)."""
    lo = pi * r + (1.0 - pi) * odds_shift(r, 1.0 / gamma)
    hi = pi * r + (1.0 - pi) * odds_shift(r, gamma)
    return lo, hi


def overlap_odds_ratios(events: np.ndarray, observed: np.ndarray, shares: np.ndarray,
                        gamma: float) -> tuple[np.ndarray, np.ndarray]:
    """Per stratum, the largest and smallest odds ratio (shown against not shown) of two arm rates
    whose sensitivity intervals at ``gamma`` still meet, at the stratum's own margin.

    Parameters
    ----------
    events, observed : ndarray of shape (n_cells, 2, L)
    shares : ndarray of shape (n_cells, 2, L)
        Each arm's share of the cell's cases given each level.
    gamma : float

    Returns
    -------
    upper, lower : ndarray of shape (n_cells, L)
        At the upper end, arm 1's interval starts where arm 0's ends (a common p with
        p = pi_1 r_1 + (1 - pi_1) S_{1/Gamma}(r_1) = pi_0 r_0 + (1 - pi_0) S_Gamma(r_0)), the pair
        chosen so that n_0 r_0 + n_1 r_1 equals the stratum's events; the lower end likewise with
        the arms' roles swapped. With no share at d (pi = 0) they are Gamma^2 and Gamma^-2.
    """
    n = np.asarray(observed, dtype=np.float64)
    m = np.asarray(events, dtype=np.float64).sum(axis=1)
    pi0, pi1 = shares[:, 0], shares[:, 1]

    def ends(k1: float, k0: float) -> np.ndarray:
        lo, hi = np.zeros_like(m), np.ones_like(m)
        for _ in range(45):   # the pair's events grow with the common p: bisection
            p = 0.5 * (lo + hi)
            r1, r0 = _invert(p, pi1, k1), _invert(p, pi0, k0)
            low = n[:, 0] * r0 + n[:, 1] * r1 < m
            lo, hi = np.where(low, p, lo), np.where(low, hi, p)
        p = 0.5 * (lo + hi)
        r1, r0 = _invert(p, pi1, k1), _invert(p, pi0, k0)
        with np.errstate(invalid="ignore", divide="ignore"):
            return (r1 / (1 - r1)) / (r0 / (1 - r0))

    up = ends(1.0 / gamma, gamma)
    down = ends(gamma, 1.0 / gamma)
    # in [1, Gamma^2] and [Gamma^-2, 1] (rounding aside), and exactly 1 within 1e-9 of it
    up = np.clip(np.where(np.isfinite(up), up, gamma ** 2), 1.0, gamma ** 2)
    down = np.clip(np.where(np.isfinite(down) & (down > 0), down, gamma ** -2), gamma ** -2, 1.0)
    up = np.where(up < 1 + 1e-9, 1.0, up)
    down = np.where(down > 1 - 1e-9, 1.0, down)
    return up, down


def overlap_gamma(rates: np.ndarray, shares: np.ndarray, tol: float = 1e-6) -> float:
    """The smallest Gamma at which, in every cell x outcome kind x decision level, the two arms'
    sensitivity intervals of p_jd(x) meet (exact rates: a population figure, not a test).

    Parameters
    ----------
    rates : ndarray of shape (n_cells, 2, J, L)
        Each arm's outcome rate at (x, j, d) (NaN where an arm has no case at d).
    shares : ndarray of shape (n_cells, 2, L)
        Each arm's share of the cell's cases given each level.
    """
    r = np.asarray(rates, dtype=np.float64)
    pi = np.broadcast_to(np.asarray(shares, dtype=np.float64)[:, :, None, :], r.shape)
    use = np.isfinite(r).all(axis=1) & (pi > 0).all(axis=1)
    r0, r1 = r[:, 0][use], r[:, 1][use]
    p0, p1 = pi[:, 0][use], pi[:, 1][use]

    def meets(g: float) -> bool:
        lo0, hi0 = _arm_interval(r0, p0, g)
        lo1, hi1 = _arm_interval(r1, p1, g)
        return bool(((lo1 <= hi0 + 1e-12) & (lo0 <= hi1 + 1e-12)).all())

    if meets(1.0):
        return 1.0
    lo, hi = 0.0, np.log(GAMMA_CEILING)
    if not meets(GAMMA_CEILING):
        return float("inf")
    while hi - lo > tol:
        mid = 0.5 * (lo + hi)
        lo, hi = (lo, mid) if meets(np.exp(mid)) else (mid, hi)
    return float(np.exp(hi))


def discrepancy_at(events: np.ndarray, observed: np.ndarray, gamma: float,
                   shares: np.ndarray | None = None) -> tuple[float, int]:
    """The arm discrepancy left over at sensitivity value ``gamma``, for one outcome kind.

    Parameters
    ----------
    events, observed : ndarray of shape (n_cells, 2, L)
        Arm axis (not shown, shown).
    gamma : float
        Gamma >= 1.
    shares : ndarray of shape (n_cells, 2, L), optional
        Each arm's share of the cell's cases given each level: the strata's odds ratios are then
        those at which the arms' sensitivity intervals just meet (:func:`overlap_odds_ratios`),
        at most Gamma^2; without them, Gamma^2 and Gamma^-2 throughout.

    Returns
    -------
    statistic : float
        T(Gamma) = sum over levels of max(Z_d(psi+), -Z_d(psi-), 0)^2, where Z_d(psi) is the
        standardized excess of events where the aid was shown over their expectation with each
        stratum's odds ratio at psi (psi+ = Gamma^2, psi- = Gamma^-2 without shares). T(1) is
        the sum of the levels' Cochran-Mantel-Haenszel statistics; T falls as Gamma grows.
    df : int
        Levels with information (the chi-square degrees of freedom bounding T under the
        hypothesis that every stratum's odds ratio lies in [Gamma^-2, Gamma^2]).
    """
    observed = np.asarray(observed)
    used = (observed[:, 0] > 0) & (observed[:, 1] > 0)
    if shares is None or gamma == 1:
        psi_up, psi_down = gamma ** 2, gamma ** -2
    else:
        psi_up, psi_down = overlap_odds_ratios(events, observed, np.asarray(shares, dtype=np.float64), gamma)
    up = _z_at(events, observed, used, psi_up)
    down = _z_at(events, observed, used, psi_down)
    informative = np.isfinite(up)
    excess = np.maximum(np.maximum(np.where(informative, up, 0.0), np.where(informative, -down, 0.0)), 0.0)
    return float(np.sum(excess ** 2)), int(informative.sum())


def gamma_lower_bound(cells: CellTable, alpha: float = 0.05, tol: float = 1e-3, overlap: bool = True) -> dict[str, Any]:
    """The smallest Gamma that reconciles the two arms, from below with confidence 1 - alpha.

    Parameters
    ----------
    cells : CellTable
        With a randomized arm (arms 0 = not shown, 1 = shown).
    alpha : float
        Level; Bonferroni over the outcome kinds with information, as the test's verdict.
    tol : float
        Precision of the search on log Gamma.
    overlap : bool
        Test that the arms' sensitivity intervals meet (default; :func:`overlap_odds_ratios`),
        which uses each arm's decision shares; false: only the odds-ratio consequence
        [Gamma^-2, Gamma^2], a weaker bound.

    Returns
    -------
    dict
        ``gamma_lower``: the largest over outcome kinds of the smallest Gamma at which
        T(Gamma) <= the chi-square (1 - alpha / kinds) quantile (1 where the test does not
        reject; inf where even :data:`GAMMA_CEILING` is rejected); ``per_outcome``: each kind's
        value.

    Notes
    -----
    Under the sensitivity model with parameter Gamma in each arm, every group of the arm's
    cases has odds of Y(d) = 1 within a factor Gamma of the others, so p_d(x), a mixture of
    them, has odds within Gamma of each arm's rate at (x, d), and the two arms' odds ratio at
    (x, d) lies in [Gamma^-2, Gamma^2]. T(Gamma) tests that consequence (the one-sided
    statistics at the ends of the interval are the least favourable points, as in Rosenbaum's
    sensitivity analysis of stratified 2 x 2 tables), so every Gamma it rejects is contradicted
    by the data. With ``overlap`` the intervals are sharper still: p_d(x) is the arm's share
    pi given d times its rate plus the rest within Gamma's odds, so the two arms' rates may differ
    by an odds ratio psi+_x(Gamma) <= Gamma^2 only (:func:`overlap_odds_ratios`, at the stratum's
    margin), and T(Gamma) uses those. The links between levels are left out, so the value found
    is still conservative.
    """
    _require_arm(cells)
    J = len(cells.outcomes)
    cases = np.asarray(cells.cases, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = np.nan_to_num(cases / cases.sum(axis=2, keepdims=True)) if overlap else None
    at_one = [discrepancy_at(cells.events[:, :, j, :], cells.observed[:, :, j, :], 1.0) for j in range(J)]
    tested = [j for j in range(J) if at_one[j][1] > 0]
    per_outcome = {key: 1.0 for key in cells.outcomes}
    for j in tested:
        t1, df = at_one[j]
        crit = special.chdtri(df, alpha / len(tested))  # the chi-square quantile of upper tail alpha / tests
        if t1 <= crit:
            continue
        ev, obs = cells.events[:, :, j, :], cells.observed[:, :, j, :]

        def rejected(g):
            return discrepancy_at(ev, obs, g, shares)[0] > crit

        if rejected(GAMMA_CEILING):
            per_outcome[cells.outcomes[j]] = np.inf
            continue
        lo, hi = 0.0, np.log(GAMMA_CEILING)
        while hi - lo > tol:
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if rejected(np.exp(mid)) else (lo, mid)
        per_outcome[cells.outcomes[j]] = float(np.exp(hi))
    return {"gamma_lower": max(per_outcome.values()), "per_outcome": per_outcome}


def _require_arm(cells: CellTable) -> None:
    if not cells.has_arm or len(cells.arms) != 2:
        raise InputError("the arm check needs a randomized arm (the [columns] arm key, with values 0 and 1); "
                         f"{cells.source} has none.")


# ----------------------------------------------------------------------------------------------
# Result
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ArmCheck:
    """Whether the two arms agree within every cell x decision level, per outcome kind.

    Attributes
    ----------
    tests : DataFrame
        One row per outcome kind: ``outcome``, ``statistic`` (Q_j), ``df``, ``p_value``,
        ``strata`` (cell x level tables used), ``levels`` (levels with information),
        ``rejects`` (at ``alpha`` after Bonferroni over kinds).
    levels : DataFrame
        One row per outcome kind x decision level: CMH_d, the Mantel-Haenszel odds ratio (shown
        against not shown), strata used, events observed and expected where the aid was shown,
        and the direction in words.
    cells : DataFrame
        Every stratum used: cell columns, outcome, level, records and events per arm, rates,
        the difference a - E a and the stratum's contribution to CMH_d.
    alpha : float
    p_value : float
        Bonferroni-adjusted smallest p-value over outcome kinds.
    gamma_lower : float
        See :func:`gamma_lower_bound`.
    gamma_by_outcome : dict
        The same per outcome kind.
    """

    tests: pd.DataFrame
    levels: pd.DataFrame
    cells: pd.DataFrame
    alpha: float
    p_value: float
    gamma_lower: float
    gamma_by_outcome: dict
    top: int = 5
    #: display label of each outcome key (the scenario's labels) for the verdict and its lines
    outcome_labels: dict = field(default_factory=dict)

    def label(self, key: str) -> str:
        return self.outcome_labels.get(key, key)

    @property
    def rejects(self) -> bool:
        return bool(self.p_value < self.alpha)

    @property
    def tested(self) -> bool:
        return bool((self.tests["df"] > 0).any()) if len(self.tests) else False

    def top_cells(self, n: int | None = None) -> pd.DataFrame:
        """The strata contributing most to the statistics of the outcome kinds that reject (or
        to all, when none rejects), largest contribution first."""
        n = self.top if n is None else n
        rejecting = set(self.tests.loc[self.tests["rejects"], "outcome"])
        frame = self.cells if not rejecting else self.cells[self.cells["outcome"].isin(rejecting)]
        return frame.sort_values("contribution", ascending=False, kind="stable").head(n)

    def verdict(self) -> str:
        """One sentence: what the test found."""
        if not self.tested:
            return "The arm check could not be run: no cell x decision level has recorded outcomes in both arms."
        worst = self.tests.sort_values("p_value", kind="stable").iloc[0]
        if self.rejects:
            small = (f" (A test at level {self.alpha:g} also rejects about {self.alpha:.0%} of data sets that satisfy "
                     "the assumption; a Gamma this small may be such a false alarm, or slight confounding.)"
                     if self.gamma_lower < 1.1 else "")
            return (f"WARNING: the randomized arm contradicts unconfoundedness given the cell (or the exclusion "
                    f"restriction): within cells and decision levels, outcome rates differ with and without the aid "
                    f"(worst: {self.label(worst['outcome'])}, p = {worst['p_value']:.2g}; Bonferroni-adjusted p = "
                    f"{self.p_value:.2g} < {self.alpha:g}). The data show confounding of at least Gamma = "
                    f"{_fmt_gamma(self.gamma_lower)} ({1 - self.alpha:.0%} confidence; sensitivity results below "
                    "that Gamma are contradicted by the data). Point figures may be wrong: "
                    "rely on the monotone-response bounds and the sensitivity results at Gamma of at least that value."
                    + small)
        return (f"Arm check: within cells and decision levels, outcome rates with and without the aid agree "
                f"(smallest p = {worst['p_value']:.2g}, Bonferroni-adjusted {self.p_value:.2g} >= {self.alpha:g}). "
                "No contradiction of unconfoundedness found; the test has power only where the aid moved decisions.")

    def headline(self) -> str:
        """The verdict in one or two sentences (the report's first word on the assumption)."""
        if not self.tested:
            return "The arm check could not be run: no cell x decision level has recorded outcomes in both arms."
        worst = self.tests.sort_values("p_value", kind="stable").iloc[0]
        if not self.rejects:
            return (f"Outcome rates with and without the aid agree within cells and decision levels (Bonferroni-adjusted "
                    f"p = {self.p_value:.2g}): no contradiction of unconfoundedness found.")
        small = (f"; a {self.alpha:.0%} test also flags 1 data set in {round(1 / self.alpha):d} that satisfies it"
                 if self.gamma_lower < 1.1 else "")
        return (f"Warning: it contradicts unconfoundedness for {self.label(worst['outcome'])} (adjusted "
                f"p = {self.p_value:.2g}; confounding of at least Gamma = {_fmt_gamma(self.gamma_lower)}). Rely on the "
                f"bounds and on sensitivity results at Gamma of at least that{small}.")

    def lines(self) -> list[str]:
        """The verdict, then one line per outcome kind and the cells contributing most."""
        out = [self.verdict()]
        for _, row in self.tests.iterrows():
            if row["df"] == 0:
                out.append(f"  {self.label(row['outcome'])}: no stratum with information")
                continue
            out.append(f"  {self.label(row['outcome'])}: Q = {row['statistic']:.2f} on {row['df']} df, p = {row['p_value']:.2g}, "
                       f"{row['strata']} cell x level strata")
        if self.rejects:
            for _, row in self.levels[self.levels["outcome"].isin(self.tests.loc[self.tests["rejects"], "outcome"])].iterrows():
                if row["statistic"] == row["statistic"]:
                    out.append(f"  {self.label(row['outcome'])} at {row['level']}: {row['direction']} "
                               f"(odds ratio {row['odds_ratio']:.2f}, CMH {row['statistic']:.1f})")
            cols = [c for c in self.cells.columns if c not in _STRATUM_COLUMNS]
            out.append("  cells contributing most:")
            for _, row in self.top_cells().iterrows():
                where = ", ".join(f"{c}={row[c]}" for c in cols)
                out.append(f"    {where}; {self.label(row['outcome'])} at {row['level']}: rate {row['rate_shown']:.1%} shown "
                           f"vs {row['rate_not_shown']:.1%} not shown ({row['records_shown']:.0f} / "
                           f"{row['records_not_shown']:.0f} records), contribution {row['contribution']:.1f}")
        return out

    def __str__(self) -> str:
        return "\n".join(self.lines())

    def summary(self) -> dict[str, Any]:
        """What the JSON output holds."""
        return {
            "test": "Cochran-Mantel-Haenszel per decision level, pooled over cells, summed over levels (one test per outcome kind)",
            "alpha": self.alpha,
            "rejects": self.rejects,
            "p_value_bonferroni": self.p_value,
            "verdict": self.verdict(),
            "per_outcome": self.tests.to_dict(orient="records"),
            "per_level": self.levels.to_dict(orient="records"),
            "top_cells": self.top_cells().to_dict(orient="records"),
            "gamma_lower": self.gamma_lower if np.isfinite(self.gamma_lower) else None,
            "gamma_lower_by_outcome": self.gamma_by_outcome,
            "gamma_confidence": 1 - self.alpha,
            "gamma_definition": ("smallest sensitivity value Gamma at which the data no longer reject (at the test's "
                                 "level) that in every cell x decision level the two arms' sensitivity intervals of "
                                 "the outcome probability meet, as the sensitivity model with that Gamma implies: "
                                 "a lower confidence bound on the confounding present (docs/method.md)"),
            "assumes": ["the aid was shown or withheld at random",
                        "missing outcome records are missing at random given cell, arm and decision level"],
        }

    def output_files(self) -> dict[str, Any]:
        """``arm_check.json`` (verdict and tests) and ``arm_check_cells.csv`` (every stratum)."""
        return {"arm_check.json": _jsonable(self.summary()), "arm_check_cells.csv": self.cells}


_STRATUM_COLUMNS = ("outcome", "level", "records_not_shown", "events_not_shown", "records_shown", "events_shown",
                    "rate_not_shown", "rate_shown", "difference", "contribution")


def _fmt_gamma(g: float) -> str:
    if np.isnan(g):
        return "(not computed)"
    return "infinity" if not np.isfinite(g) else f"{g:.2f}"


def _jsonable(value):
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if np.isfinite(v) else None
    return value


def arm_check(cells: CellTable, alpha: float = 0.05, top: int = 5, gamma: bool = True,
              outcome_labels: Mapping[str, str] | None = None) -> ArmCheck:
    """Test, per outcome kind, that outcome rates agree with and without the aid within every
    cell x decision level, and bound from below the confounding the arms show.

    Parameters
    ----------
    cells : CellTable
        With a randomized arm (raises :class:`~policy.errors.InputError` without one).
    alpha : float
        Level of the test (after Bonferroni over outcome kinds) and 1 - confidence of Gamma_low.
    top : int
        Number of cells listed as contributing most.
    gamma : bool
        Also search for Gamma_low (:func:`gamma_lower_bound`); without it, ``gamma_lower`` is NaN.
    outcome_labels : mapping, optional
        Display label of each outcome key, used in the verdict and its lines.

    Returns
    -------
    ArmCheck
    """
    if not 0 < alpha < 1:
        raise InputError(f"the arm check's level must be between 0 and 1; got {alpha!r}.")
    _require_arm(cells)
    gam = gamma_lower_bound(cells, alpha) if gamma else {"gamma_lower": np.nan, "per_outcome": {}}
    rows, level_rows, strata = [], [], []
    layout = cells.layout.frame.reset_index(drop=True)
    for j, key in enumerate(cells.outcomes):
        res = cmh_by_level(cells.events[:, :, j, :], cells.observed[:, :, j, :])
        informative = np.isfinite(res["statistic"])
        q = float(np.nansum(res["statistic"]))
        df = int(informative.sum())
        p = float(special.chdtrc(df, q)) if df else np.nan  # chi-square upper tail
        rows.append({"outcome": key, "statistic": q, "df": df, "p_value": p, "strata": int(res["used"].sum()),
                     "levels": df})
        for d, level in enumerate(cells.levels):
            diff = float(res["difference"][:, d].sum())
            expected_shown = float((cells.events[:, 1, j, d] * res["used"][:, d]).sum() - diff)
            if not informative[d]:
                direction = "no information"
            elif diff > 0:
                direction = "more outcomes where the aid was shown than equal rates would give"
            else:
                direction = "fewer outcomes where the aid was shown than equal rates would give"
            level_rows.append({"outcome": key, "level": level, "statistic": float(res["statistic"][d]),
                               "odds_ratio": float(res["odds_ratio"][d]), "strata": int(res["used"][:, d].sum()),
                               "events_shown": float((cells.events[:, 1, j, d] * res["used"][:, d]).sum()),
                               "expected_shown": expected_shown, "direction": direction})
        x, d = np.nonzero(res["used"])
        part = layout.iloc[x].reset_index(drop=True).astype(object)
        obs, ev = cells.observed[x, :, j, d], cells.events[x, :, j, d]
        part["outcome"] = key
        part["level"] = np.asarray(cells.levels, dtype=object)[d]
        part["records_not_shown"], part["events_not_shown"] = obs[:, 0], ev[:, 0]
        part["records_shown"], part["events_shown"] = obs[:, 1], ev[:, 1]
        part["rate_not_shown"] = ev[:, 0] / obs[:, 0]
        part["rate_shown"] = ev[:, 1] / obs[:, 1]
        part["difference"] = res["difference"][x, d]
        part["contribution"] = res["contribution"][x, d]
        strata.append(part)
    tests = pd.DataFrame(rows)
    tested = tests["df"] > 0
    n_tested = int(tested.sum())
    p_min = float(tests.loc[tested, "p_value"].min()) if n_tested else np.nan
    p_adj = min(1.0, p_min * n_tested) if n_tested else np.nan
    tests["rejects"] = tested & (tests["p_value"] * max(n_tested, 1) < alpha)
    cells_frame = pd.concat(strata, ignore_index=True) if strata else pd.DataFrame()
    return ArmCheck(tests, pd.DataFrame(level_rows), cells_frame, alpha, p_adj, gam["gamma_lower"],
                    gam["per_outcome"], top, dict(outcome_labels or {}))


def gamma_low_rounded(gamma_lower: float) -> float:
    """Gamma_low rounded up to 2 decimals, so that the value shown is never one the data contradict."""
    return float(np.ceil(gamma_lower * 100 - 1e-9) / 100)


def with_gamma_low(gammas, check: "ArmCheck | None") -> tuple:
    """``gammas`` with the least confounding the arms show (Gamma_low, rounded up to 2 decimals)
    added, when the arm check found any (1 < Gamma_low < inf)."""
    gammas = tuple(gammas)
    if check is not None and 1 < check.gamma_lower < np.inf:
        gammas += (gamma_low_rounded(check.gamma_lower),)
    return gammas
