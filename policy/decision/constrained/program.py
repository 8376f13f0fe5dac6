"""The linear program's data, built once per problem: objective, constraint matrix and row
bounds in probabilities of each decision level per rule cell."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from policy.decision.constraints import (
    CONSTRAINT_KEYS,
    ConstraintSpec,
    RowBlock,
    RowContext,
    Vocabulary,
    constraint_rows,
    spec_from_table,
)
from policy.errors import InputError
from policy.estimation.strata import RiskLevels


@dataclass(frozen=True)
class _LPData:
    """Objective parts and rows for one set of risk levels and decision costs."""

    n_groups: int
    n_levels: int
    total: float
    group_share: np.ndarray  # (G,) W_g / W
    decision: np.ndarray  # (G, L) sum_{x in g} w c_dec(d, x) / W
    outcome: np.ndarray  # (J, G, L) sum_{x in g} w p_jd(x) / W
    blocks: tuple[RowBlock, ...]
    A: sp.csr_matrix  # simplex rows first, then each block's rows
    offsets: np.ndarray  # (K + 1,) row offsets of the blocks in A
    context: RowContext
    coupling: sp.csr_matrix  # the blocks' rows only (A without the simplex rows)
    At: sp.csr_matrix  # A transposed, for reduced costs c - A'y

    @property
    def n_cols(self) -> int:
        return self.n_groups * self.n_levels

    def objective(self, outcome_costs: np.ndarray, decision_scale: np.ndarray) -> np.ndarray:
        """c = sum_d s_d Dec[:, d] + sum_j c_j Out[j], flattened g * L + d."""
        # a loop over the few outcome kinds: a BLAS call for so small a contraction costs more
        # (thread start-up) than the arithmetic
        c = self.decision * decision_scale
        for j, cost in enumerate(outcome_costs):
            c += cost * self.outcome[j]
        return c.reshape(-1)

    def row_bounds(self, internal: np.ndarray, active: np.ndarray, infinite: float = np.inf) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of every row of A for bounds ``internal`` (K,); inactive blocks are free."""
        n_rows = self.A.shape[0]
        lo, hi = np.empty(n_rows), np.empty(n_rows)
        G = self.n_groups
        lo[:G] = hi[:G] = 1.0
        for k, block in enumerate(self.blocks):
            a, b = self.offsets[k], self.offsets[k + 1]
            if not active[k]:
                lo[a:b], hi[a:b] = -infinite, infinite
                continue
            hi[a:b] = internal[k]
            lo[a:b] = -internal[k] if block.two_sided else -infinite
        return lo, hi


def _assemble(risk_levels: RiskLevels, decision_costs: np.ndarray, specs: Sequence[ConstraintSpec],
              index: np.ndarray, rule_cells: pd.DataFrame, vocab: Vocabulary) -> _LPData:
    G, L = len(rule_cells), risk_levels.n_levels
    w = risk_levels.weights
    total = float(w.sum())
    ctx = RowContext(index, G, rule_cells, w, risk_levels.p, risk_levels.q, risk_levels.layout, vocab,
                     risk_levels.risk_level_names)
    dec = _aggregate(index, G, w, decision_costs)
    out = np.stack([_aggregate(index, G, w, risk_levels.p[:, j, :]) for j in range(risk_levels.p.shape[1])])
    blocks = tuple(constraint_rows(spec, ctx) for spec in specs)
    simplex = sp.csr_matrix((np.ones(G * L), (np.repeat(np.arange(G), L), np.arange(G * L))), shape=(G, G * L))
    A = sp.vstack([simplex] + [b.matrix for b in blocks], format="csr")
    offsets = G + np.concatenate([[0], np.cumsum([b.n_rows for b in blocks])]).astype(np.int64)
    return _LPData(G, L, total, np.bincount(index, weights=w, minlength=G) / total, dec, out, blocks, A, offsets, ctx,
                   A[G:].tocsr(), A.T.tocsr())


# ----------------------------------------------------------------------------------------------
# The solution of one solve
# ----------------------------------------------------------------------------------------------
def _row_sums(a: np.ndarray) -> np.ndarray:
    """Sums along the short last axis, by columns (numpy's reduction over a short last axis is slow)."""
    out = a[:, 0].copy()
    for d in range(1, a.shape[1]):
        out += a[:, d]
    return out


def _aggregate(index: np.ndarray, n_groups: int, weights: np.ndarray, per_cell: np.ndarray) -> np.ndarray:
    """sum_{x in g} w(x) v(x, d) / sum_x w(x) for every rule cell g and level d; per_cell (n_cells, L)."""
    total = weights.sum()
    return np.stack([np.bincount(index, weights=weights * per_cell[:, d], minlength=n_groups) for d in range(per_cell.shape[1])],
                    axis=1) / total


def _validated_specs(constraints: Sequence[ConstraintSpec | Mapping], vocab: Vocabulary) -> tuple[ConstraintSpec, ...]:
    specs = []
    for i, c in enumerate(constraints, 1):
        if isinstance(c, ConstraintSpec):
            raw = {k.name: getattr(c, k.name) for k in CONSTRAINT_KEYS if getattr(c, k.name) is not None}
            raw = {k: list(v) if isinstance(v, tuple) else v for k, v in raw.items()}
            if c.kind == "monotone" and raw.get("tolerance") == 0.0:
                raw.pop("tolerance")
            specs.append(spec_from_table(raw, vocab, i, where=f"constraint {c.name!r}"))
        elif isinstance(c, Mapping):
            specs.append(spec_from_table(dict(c), vocab, i, where=f"constraint #{i}"))
        else:
            raise InputError(f"constraint #{i} must be a ConstraintSpec or a table of keys; got {type(c).__name__}.")
    names = [s.name for s in specs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"two constraints are named {dup[0]!r}; give each its own name.")
    return tuple(specs)


# ----------------------------------------------------------------------------------------------
# The two ways of solving


@dataclass(frozen=True)
class LPSolution:
    """What one solve returns, before any presentation.

    Attributes
    ----------
    delta : ndarray of shape (G, L)
        Decision probabilities of the rule cells (rows sum to 1).
    cost_per_case : float
        Expected cost per case of the rule, in the cost unit.
    saving : ndarray of shape (K,)
        Dual value of each constraint: the fall in expected cost per case for each unit its
        bound is loosened (cost unit per unit of the declared bound), at the margin.
    row_values : tuple of ndarray
        Each constraint's row values at the rule (probability / share units).
    status : str
        The solver's status (always optimal here; anything else raises).
    solver : str
    iterations : int
    seconds : float
        Time spent in the solver.
    lenient_pass : bool
        A second pass chose the most lenient of several optimal rules.
    """

    delta: np.ndarray
    cost_per_case: float
    saving: np.ndarray
    row_values: tuple[np.ndarray, ...]
    status: str
    solver: str
    iterations: int
    seconds: float
    lenient_pass: bool = False


# ----------------------------------------------------------------------------------------------
# The problem: build once, set weights and bounds, re-solve
# ----------------------------------------------------------------------------------------------
