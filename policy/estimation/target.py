"""The shrinkage target's level effects: how much each decision level lowers risk, cell by cell.

The cell estimator (:mod:`policy.estimation.strata`) shrinks every (cell, level) rate toward a
target ``b_x * theta_d(x)``: the cell's baseline risk times the risk at level d relative to the
most lenient level. This module decides what ``theta_d(x)`` is allowed to depend on.

The level effects are the terms of a Poisson log-linear model of the (cell, level) table with
log cases as offset (a working model for risk ratios; Zou 2004),

    log E[e_xd] = log n_xd + a_x + t_d + sum_{u in S} g_u[c_u(x), d],

with one free baseline a_x per cell (so only within-cell contrasts between levels inform the
level effects, as in the Mantel-Haenszel estimator), a common level effect t_d, and for each
cell column u in the selected set S a level effect per category of u. The baselines are
profiled out (the conditional multinomial likelihood of the events' split over levels within a
cell) and the effects fitted by Newton steps with a weak ridge. Each candidate term u is kept
when it passes Akaike's information criterion against the common-ratio model,

    LR_u = 2 [l(common + u) - l(common)] > 2 df_u,

with df_u = (categories of u - 1)(free levels - 1) (Akaike 1974), and LR_u computed as the
score statistic, its asymptotic equivalent (Rao 1948), which needs only the common-ratio fit
instead of one fit per candidate. Where a level's effect truly
varies with u, LR_u grows in proportion to the cases, so the term is kept with probability
tending to one, and the target, and with it the estimator, loses the bias a common ratio would
leave; where data are few or the effect is common, the common-ratio target (chained
Mantel-Haenszel ratios) is mostly kept. (The Bayesian criterion, log N per parameter, Schwarz
1978, is available; on the simulated processes of the tests it kept a real term too rarely at a
few thousand cases, docs/method.md.) Per outcome kind, the one term with the largest gain over
its penalty is kept: its model separates into one small exact fit per category, and no term is
kept for a column merely correlated with the one that matters. (``several=True`` keeps every
term that passes, fitted jointly.) Everything is vectorized over leading axes (bootstrap
replicates), and the selection is redone in every replicate, so intervals carry the
selection's own uncertainty.

References
----------
Bishop, Y. M. M., Fienberg, S. E. and Holland, P. W. (1975). Discrete Multivariate Analysis.
MIT Press.
Rao, C. R. (1948). Large sample tests of statistical hypotheses concerning several parameters
with applications to problems of estimation. Proc. Cambridge Philos. Soc. 44(1), 50-57.
Akaike, H. (1974). A new look at the statistical model identification. IEEE Trans. Automatic
Control 19(6), 716-723.
Schwarz, G. (1978). Estimating the dimension of a model. Ann. Statist. 6(2), 461-464.
Zou, G. (2004). A modified Poisson regression approach to prospective studies with binary
data. Am. J. Epidemiol. 159(7), 702-706.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import scipy.sparse as sp
from scipy.special import xlogy

__all__ = ["fit_level_model", "select_level_terms", "cell_level_ratios", "conditional_loglik", "score_statistics"]

#: ridge (inverse prior variance, on the log scale) of each covariate-by-level effect: keeps a
#: category without events at a level finite and pulls thin categories toward the common ratio
RIDGE = 1.0
#: a tiny ridge on the common level effects, only so that a level without data stays at zero
COMMON_RIDGE = 1e-6


def _group_sum(matrix: sp.csr_matrix, x: np.ndarray, axis: int) -> np.ndarray:
    """Category sums of x over its cell axis ``axis``: that axis becomes n_categories long."""
    moved = np.moveaxis(x, axis, 0)
    out = np.asarray(matrix @ moved.reshape(moved.shape[0], -1)).reshape((matrix.shape[0],) + moved.shape[1:])
    return np.moveaxis(out, 0, axis)


def _probabilities(observed: np.ndarray, eta: np.ndarray) -> np.ndarray:
    """pi_xd = n_xd exp(eta_xd) / sum_d n_xd exp(eta_xd): where a cell's events fall, given the levels."""
    mu = observed * np.exp(np.clip(eta, -60.0, 60.0))
    total = mu.sum(axis=-1, keepdims=True)
    return np.where(total > 0, mu / np.where(total > 0, total, 1.0), 0.0)


def conditional_loglik(events: np.ndarray, observed: np.ndarray, eta: np.ndarray) -> np.ndarray:
    """Log-likelihood of the events' split over levels within each cell, summed over cells: (..., J).

    It equals the Poisson log-likelihood with a free baseline per cell, profiled over the
    baselines, up to a constant, so differences between models are likelihood-ratio statistics.
    """
    pi = _probabilities(observed, eta)
    with np.errstate(invalid="ignore", divide="ignore"):
        return xlogy(events, np.where(events > 0, pi, 1.0)).sum(axis=(-3, -1))


def _newton_step(events, observed, eta, matrix, codes, g, go, ridge, reference=None):
    """One Newton step of one block of level effects g (..., k, J, L) with the rest held fixed.

    ``go`` (..., J) says where the block is updated; ``reference`` (..., k, J) marks a category
    whose effect stays 0. Updates g and eta in place; returns the largest step (..., J).
    """
    L = events.shape[-1]
    pi = _probabilities(observed, eta)
    total = events.sum(axis=-1, keepdims=True)
    wpi = total * pi
    grad = _group_sum(matrix, events - wpi, -3)[..., 1:] - ridge * g[..., 1:]
    outer = _group_sum(matrix, wpi[..., 1:, None] * pi[..., None, 1:], -4)
    hess = -outer + np.eye(L - 1) * (_group_sum(matrix, wpi, -3)[..., 1:, None] + ridge)
    step = np.linalg.solve(hess, grad[..., None])[..., 0]
    step = np.clip(step, -3.0, 3.0)  # damping far from the optimum (cells without events at a level)
    keep = go[..., None, :, None]
    if reference is not None:
        keep = keep & ~reference[..., None]
    step = np.where(keep, step, 0.0)
    g[..., 1:] += step
    eta[..., 1:] += np.take(step, codes, axis=-3)
    return np.abs(step).max(axis=(-3, -1))


def fit_level_model(events: np.ndarray, observed: np.ndarray, factors: Sequence[tuple[sp.csr_matrix, np.ndarray]],
                    include: np.ndarray, max_sweeps: int = 100, tol: float = 1e-7,
                    joint: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Fit the level model with cell baselines and the included covariate-by-level terms.

    Parameters
    ----------
    events, observed : ndarray of shape (..., n_cells, J, L)
        Events and cases per cell and level (pooled over arms).
    factors : sequence of (sparse matrix (n_categories, n_cells), codes (n_cells,))
        Candidate cell columns (:func:`policy.estimation.strata.factor_matrices`).
    include : ndarray of shape (..., U, J), bool
        Which cell column's level terms are in the model, per outcome kind (U = len(factors)).
    joint : bool
        With more than one term, Newton steps on all blocks of effects at once (default);
        False: on one block at a time (converges slowly where cell columns are associated).

    Returns
    -------
    theta : ndarray of shape (..., n_cells, J, L)
        Fitted risk at each level relative to the most lenient, per cell (1 at level 0).
    loglik : ndarray of shape (..., J)
        :func:`conditional_loglik` at the fit.

    Notes
    -----
    The cell baselines are profiled out: within a cell, the events fall on the levels with
    probabilities pi_xd = n_xd theta_xd / sum_d n_xd theta_xd (a multinomial logit; Bishop,
    Fienberg and Holland 1975, ch. 3, on the equivalence of Poisson and conditional multinomial
    fits). log theta_xd = t_d + sum_u g_u[c_u(x), d], each g_u coded against its largest
    category and given a ridge penalty :data:`RIDGE`; fitted by Newton steps on all effects at
    once (the information matrix summed over the cells of each pair of categories), or with
    ``joint=False`` or a single block by block-coordinate Newton steps (each block separates into
    one small system per category). Each leading index and outcome kind stops on its own, so a
    fit gives the same numbers alone or in a batch.
    """
    e_all = np.asarray(events, dtype=np.float64)
    n_all = np.asarray(observed, dtype=np.float64)
    lead = e_all.shape[:-3]
    J, L = e_all.shape[-2:]
    include = np.asarray(include, dtype=bool)
    # fit on the cells that inform the level effects (exactly nothing is lost), then give every
    # cell its theta from the fitted effects
    informative = _informative(e_all, n_all)
    e, n = e_all[..., informative, :, :], n_all[..., informative, :, :]
    n_cells = e.shape[-3]
    eta = np.zeros(e.shape)
    # where an outcome kind has one term, that term's effects per category carry the level
    # effects alone (one separable block: exact Newton); with several, a common block plus
    # terms coded against their largest category (Newton steps on all blocks at once)
    count = include.sum(axis=-2)  # (..., J)
    common = (sp.csr_matrix(np.ones((1, n_cells))), np.zeros(n_cells, dtype=np.int64))
    blocks = [(common, np.zeros(e_all.shape[-3]), np.zeros(lead + (1, J, L)), count != 1, COMMON_RIDGE, None)]
    for u, factor in enumerate(factors):
        on = include[..., u, :]
        if not on.any():
            continue
        matrix, codes = _restrict(factor, informative)
        size = _group_sum(matrix, n.sum(axis=(-2, -1)), -1)  # (..., k)
        largest = np.arange(matrix.shape[0]) == size.argmax(axis=-1)[..., None]
        reference = largest[..., :, None] & (count > 1)[..., None, :]  # (..., k, J)
        blocks.append(((matrix, codes), factor[1], np.zeros(lead + (matrix.shape[0], J, L)), on, RIDGE, reference))
    active = np.ones(lead + (J,), dtype=bool)
    together = joint and len(blocks) > 2
    if together:
        _joint_newton(e, n, eta, blocks, active, max_sweeps, tol)
    for _ in range(0 if together else max_sweeps):
        change = np.zeros(lead + (J,))
        for (matrix, codes), _, g, on, ridge, reference in blocks:
            change = np.maximum(change, _newton_step(e, n, eta, matrix, codes, g, on & active, ridge, reference))
        active &= change >= tol
        if not active.any():
            break
    eta_all = np.zeros(e_all.shape)
    for _, codes_all, g, _, _, _ in blocks:
        eta_all += np.take(g, codes_all.astype(np.int64), axis=-3)
    return np.exp(eta_all), conditional_loglik(e, n, eta)


def _joint_newton(e, n, eta, blocks, active, max_sweeps, tol):
    """Newton steps on every block of level effects at once (updates each block's g and eta in
    place). With several terms, steps on one block at a time converge slowly where the cell
    columns are associated; the joint information matrix couples the blocks through their
    categories' shared cells (sums over the cells of each pair of categories), and each step
    solves for all effects of an outcome kind together. Effects held at 0 (a term not included
    for that outcome kind or leading index, a reference category) get identity rows."""
    L = e.shape[-1]
    lead, J, m = e.shape[:-3], e.shape[-2], L - 1
    sizes = [g.shape[-3] for _, _, g, _, _, _ in blocks]
    offsets = np.concatenate([[0], np.cumsum(sizes)]) * m
    P = int(offsets[-1])
    # the pairs' membership matrices on the fitted cells (a block with itself: its own)
    pairs = {}
    for b, ((mb, cb), *_rest) in enumerate(blocks):
        for c in range(b, len(blocks)):
            (mc, cc) = blocks[c][0]
            if b == c:
                pairs[b, c] = mb
            else:
                key = cb.astype(np.int64) * mc.shape[0] + cc
                pairs[b, c] = _pair_matrix(key, mb.shape[0] * mc.shape[0])
    fixed = np.zeros(lead + (J, P), dtype=bool)
    ridge = np.zeros(P)
    for b, (_, _, g, on, rdg, reference) in enumerate(blocks):
        part = np.broadcast_to(~on[..., None], lead + (J, sizes[b] * m))
        if reference is not None:
            ref = np.moveaxis(reference, -1, -2)  # (..., J, k)
            part = part | np.repeat(ref, m, axis=-1)
        fixed[..., offsets[b]:offsets[b + 1]] = part
        ridge[offsets[b]:offsets[b + 1]] = rdg
    eye = np.eye(P)
    for _ in range(max_sweeps):
        pi = _probabilities(n, eta)
        wpi = e.sum(axis=-1, keepdims=True) * pi
        resid = (e - wpi)[..., 1:]
        info_x = wpi[..., 1:, None] * (np.eye(m) - pi[..., None, 1:])  # (..., cells, J, m, m)
        grad = np.zeros(lead + (J, P))
        info = np.zeros(lead + (J, P, P))
        for b, (_, _, g, _, _, _) in enumerate(blocks):
            kb = sizes[b]
            gb = _group_sum(blocks[b][0][0], resid, -3) - ridge[offsets[b]] * g[..., 1:]  # (..., k, J, m)
            grad[..., offsets[b]:offsets[b + 1]] = np.moveaxis(gb, -3, -2).reshape(lead + (J, kb * m))
            for c in range(b, len(blocks)):
                kc = sizes[c]
                s = _group_sum(pairs[b, c], info_x, -4)  # (..., kb * kc, J, m, m) or (..., kb, J, m, m)
                if b == c:
                    s = np.moveaxis(s, -4, -3)  # (..., J, kb, m, m)
                    block = np.zeros(lead + (J, kb, m, kb, m))
                    idx = np.arange(kb)
                    block[..., idx, :, idx, :] = np.moveaxis(s, -3, 0)
                    info[..., offsets[b]:offsets[b + 1], offsets[b]:offsets[b + 1]] = block.reshape(lead + (J, kb * m, kb * m))
                else:
                    s = s.reshape(lead + (kb, kc, J, m, m))
                    s = np.moveaxis(s, -3, -5)  # (..., J, kb, kc, m, m)
                    s = np.swapaxes(s, -3, -2).reshape(lead + (J, kb * m, kc * m))
                    info[..., offsets[b]:offsets[b + 1], offsets[c]:offsets[c + 1]] = s
                    info[..., offsets[c]:offsets[c + 1], offsets[b]:offsets[b + 1]] = np.swapaxes(s, -1, -2)
        info = info + np.diag(ridge)
        info = np.where(fixed[..., None] | fixed[..., None, :], eye, info)
        grad = np.where(fixed, 0.0, grad)
        step = np.clip(np.linalg.solve(info, grad[..., None])[..., 0], -3.0, 3.0)
        step = np.where(active[..., None], step, 0.0)
        for b, ((_, codes), _, g, _, _, _) in enumerate(blocks):
            sb = np.moveaxis(step[..., offsets[b]:offsets[b + 1]].reshape(lead + (J, sizes[b], m)), -2, -3)
            g[..., 1:] += sb
            eta[..., 1:] += np.take(sb, codes, axis=-3)
        active &= np.abs(step).max(axis=-1) >= tol
        if not active.any():
            break


def _pair_matrix(key: np.ndarray, size: int) -> sp.csr_matrix:
    """A (size, n) membership matrix of n cells coded 0..size-1."""
    return sp.csr_matrix((np.ones(len(key)), (key, np.arange(len(key)))), shape=(size, len(key)))


def _informative(events: np.ndarray, observed: np.ndarray) -> np.ndarray:
    """Cells (n_cells,) with events and at least two observed levels in some leading index."""
    several = (observed > 0).sum(axis=-1) >= 2
    has = events.sum(axis=-1) > 0
    both = several & has  # (..., n_cells, J)
    return both.reshape((-1,) + both.shape[-2:]).any(axis=(0, -1))


def _restrict(factor: tuple[sp.csr_matrix, np.ndarray], cells: np.ndarray) -> tuple[sp.csr_matrix, np.ndarray]:
    """A cell column's membership matrix and codes on a subset of cells (same categories)."""
    matrix, codes = factor
    return sp.csr_matrix(matrix[:, np.flatnonzero(cells)]), codes[cells]


def _one_term_ratios(events: np.ndarray, observed: np.ndarray, factors: Sequence[tuple[sp.csr_matrix, np.ndarray]],
                     include: np.ndarray, max_sweeps: int = 100, tol: float = 1e-7) -> np.ndarray:
    """theta (..., n_cells, J, L) where each outcome kind of each leading index has at most one term.

    The model with one term u has level effects per category of u and nothing else, so its fit
    separates into one exact Newton fit per category; each term is fitted only on the leading
    indices that chose it. Where no term is included, theta is 1.
    """
    shape = events.shape
    n_cells, J, L = shape[-3:]
    e = events.reshape((-1, n_cells, J, L))
    n = observed.reshape((-1, n_cells, J, L))
    inc = include.reshape((-1, len(factors), J))
    theta = np.ones(e.shape)
    for u, factor in enumerate(factors):
        rows = np.flatnonzero(inc[:, u, :].any(axis=-1))
        if not rows.size:
            continue
        sub_e, sub_n = e[rows], n[rows]
        keep = _informative(sub_e, sub_n)
        matrix, codes = _restrict(factor, keep)
        fit_e, fit_n = sub_e[:, keep], sub_n[:, keep]  # gathered once, not at every step
        eta = np.zeros(fit_e.shape)
        g = np.zeros((len(rows), matrix.shape[0], J, L))
        active = inc[rows, u, :].copy()
        for _ in range(max_sweeps):
            change = _newton_step(fit_e, fit_n, eta, matrix, codes, g, active, RIDGE)
            active &= change >= tol
            if not active.any():
                break
        fitted = np.exp(np.take(g, factor[1], axis=-3))
        theta[rows] = np.where(inc[rows, u, :][:, None, :, None], fitted, theta[rows])
    return theta.reshape(shape)


def _common_fit(events: np.ndarray, observed: np.ndarray, max_sweeps: int = 100, tol: float = 1e-7) -> np.ndarray:
    """The linear predictor (..., n_cells, J, L) of the common-ratio model (level effects only)."""
    n_cells = events.shape[-3]
    lead, (J, L) = events.shape[:-3], events.shape[-2:]
    matrix, codes = sp.csr_matrix(np.ones((1, n_cells))), np.zeros(n_cells, dtype=np.int64)
    eta = np.zeros(events.shape)
    g = np.zeros(lead + (1, J, L))
    active = np.ones(lead + (J,), dtype=bool)
    for _ in range(max_sweeps):
        change = _newton_step(events, observed, eta, matrix, codes, g, active, COMMON_RIDGE)
        active &= change >= tol
        if not active.any():
            break
    return eta


def score_statistics(events: np.ndarray, observed: np.ndarray, factors: Sequence[tuple[sp.csr_matrix, np.ndarray]],
                     ridge: float | None = None) -> np.ndarray:
    """Score (Lagrange multiplier) statistic of each covariate-by-level term against common ratios.

    Parameters
    ----------
    events, observed : ndarray of shape (..., n_cells, J, L)
    factors : candidate cell columns
    ridge : float, optional
        Added to each category's information (default :data:`RIDGE`), so a category without
        events at a level adds nothing instead of dividing by zero.

    Returns
    -------
    ndarray of shape (..., U, J)
        S_u = sum_c G_c' H_c^-1 G_c, with G_c the score and H_c the information of category c's
        level effects at the common-ratio fit. Asymptotically equivalent to the likelihood-ratio
        statistic (Rao 1948) and needs one fit instead of one per term.
    """
    ridge = RIDGE if ridge is None else ridge
    L = events.shape[-1]
    eta = _common_fit(events, observed)
    pi = _probabilities(observed, eta)
    wpi = events.sum(axis=-1, keepdims=True) * pi
    resid = events - wpi
    outer_x = wpi[..., 1:, None] * pi[..., None, 1:]
    out = []
    for matrix, _ in factors:
        grad = _group_sum(matrix, resid, -3)[..., 1:]
        hess = -_group_sum(matrix, outer_x, -4) + np.eye(L - 1) * (_group_sum(matrix, wpi, -3)[..., 1:, None] + ridge)
        step = np.linalg.solve(hess, grad[..., None])[..., 0]
        out.append((grad * step).sum(axis=(-3, -1)))
    return np.stack(out, axis=-2)


def select_level_terms(events: np.ndarray, observed: np.ndarray, factors: Sequence[tuple[sp.csr_matrix, np.ndarray]],
                       zero: np.ndarray | None = None, penalty: str = "aic",
                       several: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Which cell columns' level terms pass the information criterion.

    Parameters
    ----------
    events, observed : ndarray of shape (..., n_cells, J, L)
    factors : candidate cell columns
    zero : ndarray of shape (J, L), bool, optional
        Structural zeros (levels with no free effect).
    penalty : {'aic', 'bic'}
        Penalty per parameter: 2 (Akaike 1974) or log N_j (Schwarz 1978).
    several : bool
        Keep every term that passes; default: only the one with the largest gain over its
        penalty, per outcome kind (one separable fit, and no term kept for a column merely
        correlated with the one that matters).

    Returns
    -------
    include : ndarray of shape (..., U, J), bool
        Term u kept for outcome kind j: S_u > 2 df_u ('aic') or df_u log N_j ('bic').
    statistic : ndarray of shape (..., U, J)
        The score statistic S_u of each term against the common-ratio model
        (:func:`score_statistics`), which stands in for the likelihood-ratio statistic.
    """
    e = np.asarray(events, dtype=np.float64)
    n = np.asarray(observed, dtype=np.float64)
    lead = e.shape[:-3]
    U, (J, L) = len(factors), e.shape[-2:]
    if U == 0 or L < 2:
        return np.zeros(lead + (U, J), dtype=bool), np.zeros(lead + (U, J))
    # cells without events or with one level observed add exactly nothing to the likelihood
    # ratios: leave them out (the union over the batch, so a fit is the same alone or batched)
    informative = _informative(e, n)
    full = factors
    df_cases = n
    e, n = e[..., informative, :, :], n[..., informative, :, :]
    factors = [_restrict(f, informative) for f in factors]
    # each term's score statistic at the common-ratio fit
    lr = score_statistics(e, n, factors)  # (..., U, J)
    free = L - 1 - (0 if zero is None else np.asarray(zero, dtype=bool).sum(axis=-1))  # (J,)
    cats = np.array([(_group_sum(matrix, df_cases.sum(axis=(-2, -1)), -1) > 0).sum(axis=-1) for matrix, _ in full])  # (U, ...)
    df = (np.moveaxis(np.atleast_1d(cats), 0, -1)[..., None] - 1) * free  # (..., U, J)
    cases = df_cases.sum(axis=(-3, -1))  # (..., J)
    per_df = (np.log(np.maximum(cases, 2.0)) if penalty == "bic" else np.full(cases.shape, 2.0))[..., None, :]
    gain = np.where(df > 0, lr - df * per_df, -np.inf)
    if not several:
        # the one term with the largest gain, where it passes
        best = gain.argmax(axis=-2)[..., None, :] == np.arange(U)[:, None]
        return best & (gain > 0), lr
    return gain > 0, lr


def cell_level_ratios(events: np.ndarray, observed: np.ndarray, factors: Sequence[tuple[sp.csr_matrix, np.ndarray]],
                      common: np.ndarray, zero: np.ndarray | None = None,
                      several: bool = False, every: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Risk at each level relative to the most lenient, per cell, with the selected terms.

    Parameters
    ----------
    events, observed : ndarray of shape (..., n_cells, J, L)
    factors : candidate cell columns (empty: the common ratios only)
    common : ndarray of shape (..., J, L)
        The common level ratios used where no term is selected (chained Mantel-Haenszel).
    zero : ndarray of shape (J, L), bool, optional
    several : bool
        Keep every term that passes and fit them jointly (:func:`fit_level_model`); default:
        the best one per outcome kind (:func:`select_level_terms`).
    every : bool
        Keep every term with at least one degree of freedom, without a criterion, fitted jointly
        (the ridge :data:`RIDGE` keeps thin categories near the common ratio): the liberal model
        of the bootstrap world (:mod:`policy.estimation.world`).

    Returns
    -------
    theta : ndarray of shape (..., n_cells, J, L)
        Non-increasing in the level, 1 at level 0, 0 at structural zeros.
    include : ndarray of shape (..., U, J), bool
        The selected terms.
    """
    e = np.asarray(events, dtype=np.float64)
    n = np.asarray(observed, dtype=np.float64)
    include, _ = select_level_terms(e, n, factors, zero, several=several)
    if every:
        include, several = np.full(include.shape, e.shape[-1] > 1), True
    theta = np.broadcast_to(np.asarray(common)[..., None, :, :], e.shape)
    any_term = include.any(axis=-2)  # (..., J)
    if any_term.any():
        fitted = fit_level_model(e, n, factors, include)[0] if several else _one_term_ratios(e, n, factors, include)
        # monotonicity: a harsher level never raises the risk
        fitted = np.minimum.accumulate(np.clip(fitted, 0.0, 1.0), axis=-1)
        theta = np.where(any_term[..., None, :, None], fitted, theta)
    if zero is not None:
        theta = np.where(zero, 0.0, theta)
    return np.array(theta), include
