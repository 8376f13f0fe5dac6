"""An independent formulation of the constrained-rule LP, for checking policy.constrained.

Everything here is written from the definitions in docs/method.md section 5, cell by cell with
plain loops, without using policy.decision.constraints or policy.decision.constrained: the rule cells come from a
pandas groupby, the risk-level probabilities from q_r = p_{r-1} - p_r, and the LP is solved by
scipy.optimize.linprog(method="highs"). Random instances for the tests are built here too.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd
from scipy.optimize import linprog

from policy.inputs.cells import CellLayout
from policy.decision.costs import Costs
from policy.estimation.strata import RiskLevels


def random_instance(seed: int, n_scores: int = 3, n_buckets: int = 2, n_groups: int = 2, levels: int = 3,
                    outcomes: int = 2, aware: bool = False, drop: float = 0.0, ties: bool = False):
    """Invented risk levels of small random cells: score x bucket x group (group protected).

    Returns (risk_levels, costs, rule_columns). ``aware`` puts the group in the rule columns;
    ``drop`` removes that share of cells at random (keeping at least two); ``ties`` gives some
    cells the same expected cost at two levels.
    """
    rng = np.random.default_rng(seed)
    grid = np.array(np.meshgrid(np.arange(n_scores), np.arange(n_buckets), np.arange(n_groups), indexing="ij")).reshape(3, -1).T
    if drop:
        keep = rng.random(len(grid)) >= drop
        keep[rng.choice(len(grid), 2, replace=False)] = True
        grid = grid[keep]
    n = len(grid)
    frame = pd.DataFrame({
        "score": pd.Categorical.from_codes(grid[:, 0], categories=list(range(1, n_scores + 1)), ordered=True),
        "bucket": pd.Categorical.from_codes(grid[:, 1], categories=[f"b{i}" for i in range(n_buckets)], ordered=True),
        "group": pd.Categorical.from_codes(grid[:, 2], categories=[f"g{i}" for i in range(n_groups)], ordered=True),
    })
    rule = ("score", "bucket", "group") if aware else ("score", "bucket")
    layout = CellLayout(frame, ("group",), rule, "score")
    p0 = rng.uniform(0.05, 0.8, size=(n, outcomes))
    kept = np.cumprod(rng.uniform(0.3, 1.0, size=(n, outcomes, levels)), axis=-1)
    kept[..., 0] = 1.0
    p = p0[..., None] * kept
    values = tuple(f"L{d}" for d in range(levels))
    keys = tuple(f"o{j}" for j in range(outcomes))
    w = rng.integers(1, 50, n).astype(float)
    rl = RiskLevels(layout, values, values, keys, keys, w, p, np.zeros_like(p, dtype=bool), source="random instance")
    decision = np.cumsum(rng.uniform(0, 300, size=(n, levels)), axis=1)
    decision[:, 0] = 0.0
    outcome_costs = rng.uniform(100, 2000, outcomes)
    if ties:
        # the first half of the cells: level 1 costs exactly what level 0 costs
        half = n // 2
        p[:half, :, 1] = p[:half, :, 0]
        decision[:half, 1] = decision[:half, 0]
    return rl, Costs(decision, outcome_costs, "units", values, keys), rule


def rule_cells(rl: RiskLevels, columns) -> tuple[np.ndarray, pd.DataFrame]:
    """Rule cell of each cell by pandas groupby (independent of CellLayout.group_by)."""
    frame = rl.layout.frame[list(columns)].astype(str)
    if not len(columns):
        return np.zeros(rl.n_cells, dtype=int), pd.DataFrame(index=[0])
    keys = frame.apply(tuple, axis=1)
    uniq = sorted(set(keys))
    pos = {k: i for i, k in enumerate(uniq)}
    return np.array([pos[k] for k in keys]), pd.DataFrame(uniq, columns=list(columns))


def q_of(p_row: np.ndarray) -> np.ndarray:
    """Risk-level probabilities of one cell and outcome: q_0 = 1 - p_0, q_k = p_{k-1} - p_k, q_L = p_{L-1}."""
    padded = np.concatenate([[1.0], p_row, [0.0]])
    return padded[:-1] - padded[1:]


def constraint_rows(rl: RiskLevels, columns, spec: dict, G: int, g_of: np.ndarray, cells_frame: pd.DataFrame):
    """Rows (coefficient vector over delta[g, d] flattened, sense, bound) of one constraint, by definition.

    sense '<=' rows are coef @ delta <= bound; two-sided constraints give two '<=' rows.
    """
    L = rl.n_levels
    w = rl.weights
    W = w.sum()
    levels = list(rl.level_values)
    kind = spec["kind"]
    attrs = [spec["attribute"]] if spec.get("attribute") else list(rl.layout.protected)
    thresholds = [levels.index(t) for t in spec["thresholds"]] if spec.get("thresholds") else list(range(1, L))
    rows = []

    def tail_coef(weights_per_cell, t):
        coef = np.zeros(G * L)
        for x in range(rl.n_cells):
            for d in range(t, L):
                coef[g_of[x] * L + d] += weights_per_cell[x]
        return coef

    def parity(stratum_weight_fn, strata):
        for attr in attrs:
            groups = sorted(set(cells_frame[attr].astype(str)))
            member = cells_frame[attr].astype(str).to_numpy()
            for a, b in combinations(groups, 2):
                for s in strata:
                    sw = np.array([stratum_weight_fn(x, s) for x in range(rl.n_cells)])
                    wa = np.where(member == a, sw, 0.0)
                    wb = np.where(member == b, sw, 0.0)
                    if wa.sum() <= 1e-12 * max(sw.sum(), 1e-300) or wb.sum() <= 1e-12 * max(sw.sum(), 1e-300):
                        continue
                    for t in thresholds:
                        diff = tail_coef(wa / wa.sum(), t) - tail_coef(wb / wb.sum(), t)
                        rows.append((diff, spec["tolerance"]))
                        rows.append((-diff, spec["tolerance"]))

    if kind == "principal_fairness":
        j = list(rl.outcome_keys).index(spec["outcome"])
        risk = spec.get("risk_levels") or list(range(L + 1))
        parity(lambda x, r: w[x] * q_of(rl.p[x, j])[r], risk)
    elif kind == "statistical_parity":
        parity(lambda x, s: w[x], [0])
    elif kind == "conditional_parity":
        z = cells_frame[spec["within"]].astype(str).to_numpy()
        parity(lambda x, s: w[x] * (z[x] == s), sorted(set(z)))
    elif kind == "capacity":
        t = levels.index(spec.get("at_least", levels[-1]))
        cap = spec["max_share"] if "max_share" in spec else spec["max_cases"] / W
        rows.append((tail_coef(w / W, t), cap))
    elif kind == "outcome_cap":
        j = list(rl.outcome_keys).index(spec["outcome"])
        coef = np.zeros(G * L)
        for x in range(rl.n_cells):
            for d in range(L):
                coef[g_of[x] * L + d] += w[x] * rl.p[x, j, d] / W
        rows.append((coef, spec["max_rate"]))
    elif kind == "group_blind":
        others = [c for c in columns if c not in attrs]
        gframe = pd.DataFrame({"g": g_of, **{c: cells_frame[c].astype(str) for c in others}}).drop_duplicates("g")
        for _, members in gframe.groupby(others if others else (lambda i: 0)):
            gs = sorted(members["g"])
            for g in gs[1:]:
                for d in range(L):
                    coef = np.zeros(G * L)
                    coef[g * L + d], coef[gs[0] * L + d] = 1.0, -1.0
                    rows.append((coef, 0.0))
                    rows.append((-coef, 0.0))
    elif kind == "monotone":
        score = spec.get("score", "score")
        others = [c for c in columns if c != score]
        gframe = pd.DataFrame({"g": g_of, "s": cells_frame[score].cat.codes.to_numpy(),
                               **{c: cells_frame[c].astype(str) for c in others}}).drop_duplicates("g")
        for _, members in gframe.groupby(others if others else (lambda i: 0)):
            ordered = members.sort_values("s")["g"].tolist()
            for lo, hi in zip(ordered[:-1], ordered[1:]):
                for t in thresholds:
                    coef = np.zeros(G * L)
                    for d in range(t, L):
                        coef[lo * L + d] += 1.0
                        coef[hi * L + d] -= 1.0
                    rows.append((coef, spec.get("tolerance", 0.0)))
    else:
        raise ValueError(kind)
    return rows


def reference_solve(rl: RiskLevels, costs: Costs, columns, specs) -> tuple[float | None, np.ndarray | None]:
    """Optimal expected cost per case (None if infeasible) and delta (G, L) by linprog(method='highs')."""
    g_of, groups = rule_cells(rl, columns)
    G, L = len(groups), rl.n_levels
    W = rl.weights.sum()
    c = np.zeros(G * L)
    for x in range(rl.n_cells):
        for d in range(L):
            cost = costs.decision[x, d] + sum(costs.outcome[j] * rl.p[x, j, d] for j in range(rl.p.shape[1]))
            c[g_of[x] * L + d] += rl.weights[x] * cost / W
    A_eq = np.zeros((G, G * L))
    for g in range(G):
        A_eq[g, g * L:(g + 1) * L] = 1.0
    rows = [r for spec in specs for r in constraint_rows(rl, columns, spec, G, g_of, rl.layout.frame)]
    A_ub = np.array([r[0] for r in rows]) if rows else None
    b_ub = np.array([r[1] for r in rows]) if rows else None
    res = linprog(c, A_ub=A_ub, b_ub=b_ub, A_eq=A_eq, b_eq=np.ones(G), bounds=(0, None), method="highs")
    if res.status == 2:
        # HiGHS's presolve can declare infeasible a problem whose rows nearly cancel (a
        # tolerance of ~1e-8 on a gap that is 0 up to rounding); confirm without presolve.
        res = linprog(c, A_ub=A_ub, b_ub=b_ub, A_eq=A_eq, b_eq=np.ones(G), bounds=(0, None), method="highs",
                      options={"presolve": False})
    if res.status == 2:
        return None, None
    assert res.status == 0, res.message
    return float(res.fun), res.x.reshape(G, L)


def constraint_violation(rl: RiskLevels, columns, spec: dict, cell_delta: np.ndarray) -> float:
    """Largest violation of one constraint by a rule given per cell (delta of each cell's rule cell)."""
    g_of = np.arange(rl.n_cells)
    L = rl.n_levels
    frame = rl.layout.frame.copy()
    flat = cell_delta.reshape(-1)
    if spec["kind"] in ("group_blind", "monotone"):
        # these compare rule cells: evaluate on the rule cells of the given columns
        g_of, groups = rule_cells(rl, columns)
        G = len(groups)
        delta = np.zeros((G, L))
        delta[g_of] = cell_delta
        flat = delta.reshape(-1)
        rows = constraint_rows(rl, columns, spec, G, g_of, frame)
    else:
        rows = constraint_rows(rl, [], spec, rl.n_cells, g_of, frame)
    return max([float(coef @ flat - bound) for coef, bound in rows], default=0.0)
