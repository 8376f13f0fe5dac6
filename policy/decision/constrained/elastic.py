"""Infeasibility explained: an elastic program that finds the fewest, smallest loosenings of
the constraints that make the problem feasible."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from policy.decision.constraints import (
    ConstraintSpec,
)
from policy.decision.constrained.settings import FEASIBILITY_TOLERANCE
from policy.decision.constrained.highs import _highs_run, _status_error, load_lp, new_highs
from policy.decision.constrained.program import _LPData


# ----------------------------------------------------------------------------------------------
def elastic_conflicts(data: _LPData, specs: Sequence[ConstraintSpec], internal: np.ndarray, active: np.ndarray,
                      declared: np.ndarray) -> tuple[pd.DataFrame, float]:
    """Which constraints conflict and how far each must loosen.

    Solves min sum_k s_k subject to the rule-cell rows and, for every active constraint k,
    ``M_k delta <= b_k + s_k`` (and ``M_k delta >= -b_k - s_k`` for two-sided rows), s_k >= 0
    (Chinneck 2008, the elastic program). A constraint is *involved* when it must loosen or its
    rows carry a non-zero dual (they take part in the proof that the rest cannot hold). For each
    involved constraint the same program with only its own slack free says how far loosening
    it alone would have to go (infinite when that cannot help).

    Returns
    -------
    conflicts : DataFrame
        constraint, kind, arguments, bound_key, bound, unit, involved, loosen_by,
        loosened_bound, alone_by, alone_bound (bounds in each constraint's declared unit).
    total : float
        The smallest total violation (probability / share units).
    """
    G, n = data.n_groups, data.n_cols
    K = len(specs)
    top = [data.A[:G], sp.csr_matrix((G, K))]
    blocks_rows, lo_parts, hi_parts, owner = [top], [np.ones(G)], [np.ones(G)], [np.full(G, -1)]
    for k, block in enumerate(data.blocks):
        if not active[k] or block.n_rows == 0:
            continue
        e = sp.csr_matrix((np.ones(block.n_rows), (np.arange(block.n_rows), np.full(block.n_rows, k))), shape=(block.n_rows, K))
        blocks_rows.append([block.matrix, -e])
        lo_parts.append(np.full(block.n_rows, -np.inf))
        hi_parts.append(np.full(block.n_rows, internal[k]))
        owner.append(np.full(block.n_rows, k))
        if block.two_sided:
            blocks_rows.append([block.matrix, e])
            lo_parts.append(np.full(block.n_rows, -internal[k]))
            hi_parts.append(np.full(block.n_rows, np.inf))
            owner.append(np.full(block.n_rows, k))
    A = sp.bmat(blocks_rows, format="csc")
    lo, hi = np.concatenate(lo_parts), np.concatenate(hi_parts)
    owner = np.concatenate(owner)
    c = np.concatenate([np.zeros(n), np.ones(K)])
    col_hi = np.concatenate([np.ones(n), np.where(active, np.inf, 0.0)])
    h = new_highs()
    load_lp(h, c, A, lo, hi, np.zeros(n + K), col_hi)
    status, _ = _highs_run(h, "simplex")
    if status != "kOptimal":
        raise _status_error(status, "the elastic program that explains the conflict")
    sol = h.getSolution()
    s = np.asarray(sol.col_value)[n:]
    total = float(s.sum())
    y = np.abs(np.asarray(sol.row_dual))
    dual_by = np.bincount(owner[owner >= 0], weights=y[owner >= 0], minlength=K)
    involved = active & ((s > FEASIBILITY_TOLERANCE) | (dual_by > 1e-9))
    basis = h.getBasis()
    alone = np.full(K, np.inf)
    for k in np.flatnonzero(involved):
        only = np.where(np.arange(K) == k, np.inf, 0.0)
        h.changeColsBounds(K, np.arange(n, n + K, dtype=np.int32), np.zeros(K), only)
        status, _ = _highs_run(h, "simplex")
        if status == "kOptimal":
            alone[k] = float(np.asarray(h.getSolution().col_value)[n + k])
        elif status not in ("kInfeasible", "kUnboundedOrInfeasible"):
            raise _status_error(status, "the elastic program that explains the conflict")
        h.setBasis(basis)
    scales = np.array([b.scale for b in data.blocks])
    rows = []
    for k, spec in enumerate(specs):
        by = float(s[k] * scales[k])
        alone_by = float(alone[k] * scales[k]) if np.isfinite(alone[k]) else np.inf
        limit = np.inf if spec.bound_key == "max_cases" else 1.0
        rows.append({
            "constraint": spec.name,
            "kind": spec.kind,
            "arguments": spec.arguments(),
            "bound_key": "" if spec.kind == "group_blind" else spec.bound_key,
            "bound": float(declared[k]),
            "unit": spec.bound_unit,
            "involved": bool(involved[k]),
            "loosen_by": by,
            "loosened_bound": min(float(declared[k]) + by, limit),
            "alone_by": alone_by if involved[k] else np.nan,
            "alone_bound": min(float(declared[k]) + alone_by, limit) if involved[k] and np.isfinite(alone_by) else np.nan,
        })
    return pd.DataFrame(rows), total


# ----------------------------------------------------------------------------------------------
# The presented result
# ----------------------------------------------------------------------------------------------
