"""Rules that hold under doubt: the robust rule (least worst-case cost over a set of outcome
probabilities) and the safe rule (least worst-case regret against a baseline), checked against
brute force over the extreme points of the set and over deterministic rules, at Gamma = 1
against the ordinary optimum, and on confounded simulated populations against the truth."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from policy.decision.constrained import ConstrainedProblem
from policy.decision.costs import Costs
from policy.decision.robust import robust_rule, rule_cost, uncertainty_set, worst_case_cost, worst_case_p
from policy.decision.rules import Rule
from policy.decision.safe import regret_parts, safe_rule, worst_case_regret
from policy.decision.solve import optimal_rule
from policy.estimation.bounds import RiskBounds, monotone_response_bounds, sensitivity_bounds, sensitivity_interval
from policy.errors import InputError

from .constrained_reference import random_instance

HYP = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# ----------------------------------------------------------------------------------------------
# Random small instances and brute force
# ----------------------------------------------------------------------------------------------
def instance(seed: int, levels: int, outcomes: int, kind: str, gamma: float = 2.0, scores: int = 2, buckets: int = 2):
    """Invented risk levels, costs, rule columns and a set: real sensitivity intervals ('gamma', from
    random decision shares), or a random box with non-increasing lower ends ('box', whose upper ends
    need not be monotone)."""
    rl, costs, columns = random_instance(seed, n_scores=scores, n_buckets=buckets, n_groups=2, levels=levels,
                                         outcomes=outcomes)
    rng = np.random.default_rng(seed + 1)
    if kind == "gamma":
        shares = rng.dirichlet(np.ones(levels), size=rl.n_cells)
        lo, hi = sensitivity_interval(rl.p, shares, gamma)
        bounds = RiskBounds("g", f"Gamma = {gamma:g}", lo, hi, gamma, "sensitivity")
    else:
        lo = rl.p * rng.uniform(0.3, 1.0, rl.p.shape)
        lo = np.maximum.accumulate(lo[..., ::-1], axis=-1)[..., ::-1]   # non-increasing, still <= p
        hi = np.minimum(1.0, rl.p * rng.uniform(1.0, 2.0, rl.p.shape) + rng.uniform(0, 0.2, rl.p.shape))
        bounds = RiskBounds("box", "a random box", lo, hi, np.inf, "bounds")
    return rl, costs, columns, bounds


def vertices(lo: np.ndarray, hi: np.ndarray, monotone: bool) -> np.ndarray:
    """Every extreme point of {lo <= p <= hi} (intersected with p_0 >= p_1 >= ...), by brute force.

    Each coordinate of an extreme point sits at a bound of its own or is tied, through a run of
    equal neighbours, to a bound of another coordinate; so every extreme point is among the
    feasible points whose coordinates take values from the 2L bounds (common practice:
    enumeration of a polytope's candidate vertices). Without monotonicity the box's own corners.
    """
    L = len(lo)
    if not monotone:
        return np.array(list(itertools.product(*zip(lo, hi))))
    values = np.concatenate([lo, hi])
    cand = np.array(list(itertools.product(values, repeat=L)))
    ok = ((cand >= lo - 1e-12) & (cand <= hi + 1e-12)).all(axis=1)
    ok &= (np.diff(cand, axis=1) <= 1e-12).all(axis=1)
    return cand[ok]


def brute_worst(coef: np.ndarray, bounds: RiskBounds, monotone: bool = True) -> float:
    """max over the set of sum coef * p, coef of shape (n, J, L): the set is a product over (cell,
    outcome kind), whose extreme points are tuples of the factors' extreme points, so the maximum
    of this separable function is the sum of the factors' maxima over their extreme points."""
    n, J, _ = coef.shape
    total = 0.0
    for x in range(n):
        for j in range(J):
            v = vertices(bounds.lower[x, j], bounds.upper[x, j], monotone)
            total += float((v @ coef[x, j]).max())
    return total


def brute_worst_cost(delta_cells, rl, costs, bounds, monotone=True) -> float:
    w = rl.weights / rl.weights.sum()
    fixed = float((w[:, None] * delta_cells * costs.decision).sum())
    coef = w[:, None, None] * costs.outcome[None, :, None] * delta_cells[:, None, :]
    return fixed + brute_worst(coef, bounds, monotone)


def brute_worst_regret(delta_cells, base_cells, rl, costs, bounds, monotone=True) -> float:
    return brute_worst_cost(delta_cells - base_cells, rl, costs, bounds, monotone)


def random_rule_cells(rng, rl, columns, deterministic=False):
    index, groups = rl.layout.rule_index(columns)
    G, L = len(groups), rl.n_levels
    if deterministic:
        delta = np.eye(L)[rng.integers(0, L, G)]
    else:
        delta = rng.dirichlet(np.ones(L) * 0.5, size=G)
    return delta, index


def as_rule(delta, index, groups, rl, name="random rule"):
    return Rule(name, "candidate", groups, index, delta, rl.level_values, rl.level_labels)


# ----------------------------------------------------------------------------------------------
# The worst case: the LP (or its closed form) against the extreme points
# ----------------------------------------------------------------------------------------------
@HYP
@given(seed=st.integers(0, 10_000), levels=st.integers(2, 3), outcomes=st.integers(1, 2),
       kind=st.sampled_from(["gamma", "box"]), gamma=st.floats(1.0, 6.0))
def test_worst_case_cost_equals_brute_force_over_extreme_points(seed, levels, outcomes, kind, gamma):
    rl, costs, columns, bounds = instance(seed, levels, outcomes, kind, gamma)
    rng = np.random.default_rng(seed)
    delta, index = random_rule_cells(rng, rl, columns)
    expected = brute_worst_cost(delta[index], rl, costs, bounds)
    assert worst_case_cost(delta[index], rl, costs, bounds) == pytest.approx(expected, rel=1e-9, abs=1e-9)


@HYP
@given(seed=st.integers(0, 10_000), levels=st.integers(2, 3), outcomes=st.integers(1, 2),
       kind=st.sampled_from(["gamma", "box"]), gamma=st.floats(1.0, 6.0), monotone=st.booleans())
def test_worst_case_regret_lp_equals_brute_force_over_extreme_points(seed, levels, outcomes, kind, gamma, monotone):
    rl, costs, columns, bounds = instance(seed, levels, outcomes, kind, gamma)
    rng = np.random.default_rng(seed)
    delta, index = random_rule_cells(rng, rl, columns)
    base = rng.dirichlet(np.ones(levels), size=rl.n_cells)   # a per-cell baseline (like an observed arm)
    expected = brute_worst_regret(delta[index], base, rl, costs, bounds, monotone)
    got = worst_case_regret(delta[index], base, rl, costs, bounds, monotone)
    assert got.total == pytest.approx(expected, rel=1e-7, abs=1e-7)
    assert got.per_rule_cell.sum() == pytest.approx(got.total)
    # the closed form (dynamic programming along the chain) the safe rule reports with
    parts = regret_parts(delta[index], base, rl, costs, bounds, monotone)
    assert parts.sum() == pytest.approx(expected, rel=1e-9, abs=1e-9)
    np.testing.assert_allclose(parts, got.per_rule_cell, rtol=1e-6, atol=1e-7)


@pytest.mark.slow
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10**6), levels=st.integers(2, 4), outcomes=st.integers(1, 3),
       kind=st.sampled_from(["gamma", "box"]), gamma=st.floats(1.0, 20.0), monotone=st.booleans())
def test_many_worst_case_regrets_equal_brute_force(seed, levels, outcomes, kind, gamma, monotone):
    # the long version of the check above: more instances, up to 4 levels and 3 outcome kinds
    rl, costs, columns, bounds = instance(seed, levels, outcomes, kind, gamma)
    rng = np.random.default_rng(seed)
    delta, index = random_rule_cells(rng, rl, columns, deterministic=bool(seed % 2))
    base = rng.dirichlet(np.ones(levels), size=rl.n_cells)
    expected = brute_worst_regret(delta[index], base, rl, costs, bounds, monotone)
    assert worst_case_regret(delta[index], base, rl, costs, bounds, monotone).total == pytest.approx(expected, rel=1e-7, abs=1e-7)
    assert worst_case_cost(delta[index], rl, costs, bounds) == pytest.approx(brute_worst_cost(delta[index], rl, costs, bounds),
                                                                             rel=1e-9, abs=1e-9)


def test_joint_enumeration_of_a_tiny_set_agrees():
    # the full product of extreme points (not factor by factor) on 2 cells x 1 outcome x 3 levels
    rl, costs, columns, bounds = instance(3, 3, 1, "box", scores=1, buckets=1)
    rng = np.random.default_rng(3)
    base = rng.dirichlet(np.ones(3), size=rl.n_cells)
    delta = rng.dirichlet(np.ones(3), size=rl.n_cells)
    factors = [vertices(bounds.lower[x, 0], bounds.upper[x, 0], True) for x in range(rl.n_cells)]
    w = rl.weights / rl.weights.sum()
    best = -np.inf
    for combo in itertools.product(*factors):
        p = np.array(combo)[:, None, :]
        best = max(best, rule_cost(delta, p, rl.weights, costs) - rule_cost(base, p, rl.weights, costs))
    assert worst_case_regret(delta, base, rl, costs, bounds).total == pytest.approx(best, rel=1e-7, abs=1e-7)
    assert w.sum() == pytest.approx(1.0)


# ----------------------------------------------------------------------------------------------
# The robust rule is the best in the worst case
# ----------------------------------------------------------------------------------------------
CAPACITY = [{"kind": "capacity", "at_least": "L1", "max_share": 0.5}]


def feasible(problem: ConstrainedProblem, delta: np.ndarray) -> bool:
    A, lo, hi = problem.rows()
    v = A @ delta.reshape(-1)
    return bool(((v >= lo - 1e-9) & (v <= hi + 1e-9)).all())


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), levels=st.integers(2, 3), kind=st.sampled_from(["gamma", "box"]),
       constrained=st.booleans())
def test_robust_rule_worst_case_is_never_above_another_feasible_rule(seed, levels, kind, constrained):
    rl, costs, columns, bounds = instance(seed, levels, 2, kind, 3.0)
    specs = CAPACITY if constrained else []
    robust = robust_rule(rl, costs, bounds, specs, columns)
    problem = ConstrainedProblem(rl, costs, specs, columns)
    assert feasible(problem, robust.rule.delta)
    rng = np.random.default_rng(seed)
    tried = 0
    for _ in range(40):
        delta, index = random_rule_cells(rng, rl, columns, deterministic=bool(rng.integers(2)))
        if not feasible(problem, delta):
            delta = 0.5 * delta + 0.5 * robust.rule.delta        # still feasible if the constraint is convex
            if not feasible(problem, delta):
                continue
        tried += 1
        assert robust.worst_case_cost_per_case <= worst_case_cost(delta[index], rl, costs, bounds) + 1e-9
    assert tried > 0
    # its own worst case, recomputed by brute force over the extreme points
    assert robust.worst_case_cost_per_case == pytest.approx(brute_worst_cost(robust.rule.cell_delta, rl, costs, bounds), rel=1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_constrained_robust_rule_matches_an_independent_linprog_at_the_worst_case(seed):
    # reference: scipy.optimize.linprog(method="highs") on the LP written out cell by cell in
    # tests/constrained_reference.py, with every p replaced by the worst case p* (common practice:
    # check an LP against a separately built formulation). The constraints chosen here do not
    # depend on p, so pricing at p* and constraining at the point estimate is the same program.
    from .constrained_reference import reference_solve

    rl, costs, columns, bounds = instance(seed, 3, 2, "gamma", 2.0, scores=3, buckets=2)
    specs = [{"kind": "capacity", "at_least": "L1", "max_share": 0.4}, {"kind": "statistical_parity", "tolerance": 0.1}]
    expected, _ = reference_solve(rl.with_p(worst_case_p(bounds)), costs, columns, specs)
    robust = robust_rule(rl, costs, bounds, specs, columns)
    assert robust.worst_case_cost_per_case == pytest.approx(expected, rel=1e-7)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("constrained", [False, True])
def test_robust_and_safe_rules_against_every_deterministic_rule(seed, constrained):
    # brute force over all L^G deterministic rules of a tiny instance (4 rule cells, 3 levels),
    # each scored by brute force over the extreme points
    rl, costs, columns, bounds = instance(seed, 3, 2, "gamma" if seed % 2 else "box", 2.5)
    specs = CAPACITY if constrained else []
    problem = ConstrainedProblem(rl, costs, specs, columns)
    index, groups = problem.index, problem.rule_cells
    G, L = len(groups), rl.n_levels
    baseline = as_rule(np.eye(L)[np.zeros(G, dtype=int)], index, groups, rl, "everyone released")
    worst, regret = [], []
    for levels in itertools.product(range(L), repeat=G):
        delta = np.eye(L)[list(levels)]
        if not feasible(problem, delta):
            continue
        worst.append(brute_worst_cost(delta[index], rl, costs, bounds))
        regret.append(brute_worst_regret(delta[index], baseline.cell_delta, rl, costs, bounds))
    robust = robust_rule(rl, costs, bounds, specs, columns)
    safe = safe_rule(rl, costs, bounds, baseline, specs, columns)
    tol = 1e-9 * max(1.0, abs(min(worst)))          # solver tolerance, relative to the costs
    assert robust.worst_case_cost_per_case <= min(worst) + tol
    assert safe.worst_case_regret_per_case <= min(regret) + tol
    if not constrained:  # the unconstrained robust optimum is deterministic: it equals the best of them
        assert robust.worst_case_cost_per_case == pytest.approx(min(worst), rel=1e-9)
    # the safe rule's figure is its true worst case
    assert safe.worst_case_regret_per_case == pytest.approx(
        brute_worst_regret(safe.rule.cell_delta, baseline.cell_delta, rl, costs, bounds), rel=1e-7, abs=tol)
    # the baseline (every rule cell at level 0) meets the capacity cap, so the safe rule is certified
    assert safe.certified and safe.worst_case_regret_per_case <= tol


# ----------------------------------------------------------------------------------------------
# Gamma = 1: both rules are the ordinary optimum
# ----------------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", range(5))
def test_at_gamma_one_both_rules_are_the_ordinary_optimum(seed):
    rl, costs, columns = random_instance(seed, n_scores=3, n_buckets=2, n_groups=2)
    shares = np.random.default_rng(seed).dirichlet(np.ones(rl.n_levels), size=rl.n_cells)
    point = sensitivity_bounds(rl, shares, 1.0)
    optimum = optimal_rule(rl, costs, columns)
    robust = robust_rule(rl, costs, point, columns=columns)
    np.testing.assert_array_equal(robust.rule.delta, optimum.delta)
    assert robust.worst_case_cost_per_case == pytest.approx(robust.point_cost_per_case)
    baseline = as_rule(np.eye(rl.n_levels)[np.zeros(len(optimum.rule_cells), dtype=int)], optimum.index,
                       optimum.rule_cells, rl, "everyone released")
    safe = safe_rule(rl, costs, point, baseline, columns=columns)
    np.testing.assert_allclose(safe.rule.delta, optimum.delta, atol=1e-7)
    assert safe.worst_case_regret_per_case == pytest.approx(safe.point_regret_per_case, rel=1e-7, abs=1e-9)
    # with constraints: the constrained optimum's cost
    specs = [{"kind": "capacity", "at_least": "L2", "max_share": 0.2}, {"kind": "statistical_parity", "tolerance": 0.1}]
    lp = ConstrainedProblem(rl, costs, specs, columns).solve_lp()
    robust_c = robust_rule(rl, costs, point, specs, columns)
    safe_c = safe_rule(rl, costs, point, baseline, specs, columns)
    assert robust_c.point_cost_per_case == pytest.approx(lp.cost_per_case, rel=1e-7)
    assert rule_cost(safe_c.rule.cell_delta, rl.p, rl.weights, costs) == pytest.approx(lp.cost_per_case, rel=1e-6)


# ----------------------------------------------------------------------------------------------
# Confounded populations: the safe rule is never worse than its baseline under the truth
# ----------------------------------------------------------------------------------------------
def confounded_quarrow(strength: float):
    """The demo simulator's exact per-cell truth with decisions made to depend on the risk level.

    Within each cell and outcome kind, P(R = r | D = z) = q_r (1 + e (r - rbar)(z - zbar)), which
    keeps P(R = r) = q_r (the truth) and P(D = z) = the court's shares, while harsher decisions go
    to riskier cases (e > 0). Returns the truth, confounded observed rates (what the unconfounded
    estimator would take for p), the population's Manski bounds, and the decision shares.
    """
    from policy.demo.quarrow import true_risk_levels

    truth, court = true_risk_levels()
    pi = court.mean(axis=1)                                        # P(D = z | x), shape (n, L)
    p = truth.p
    n, J, L = p.shape
    q = np.concatenate([1 - p[..., :1], p[..., :-1] - p[..., 1:], p[..., -1:]], axis=-1)   # (n, J, L + 1)
    r = np.arange(L + 1)
    z = np.arange(L)
    rbar = (q * r).sum(axis=-1, keepdims=True)                     # (n, J, 1)
    zbar = (pi * z).sum(axis=-1)[:, None, None]                    # (n, 1, 1)
    tilt = (r[None, None, None, :] - rbar[..., None]) * (z[None, None, :, None] - zbar[..., None])  # (n, J, L, L+1)
    e = strength / np.maximum(np.abs(tilt).max(axis=(-1, -2), keepdims=True), 1e-12)
    cond = q[:, :, None, :] * (1 + e * tilt)                      # P(R = r | D = z), (n, J, L, L+1)
    assert (cond >= -1e-12).all()
    np.testing.assert_allclose((pi[:, None, :, None] * cond).sum(axis=2), q, atol=1e-12)
    # the outcome of a case given z occurs iff its risk level is above z
    above = r[None, :] > z[:, None]                                # (L, L+1)
    observed_rate = (cond * above).sum(axis=-1)                    # P(Y = 1 | D = z), (n, J, L)
    cases = truth.weights[:, None] * pi
    events = cases[:, None, :] * observed_rate
    lo, hi = monotone_response_bounds(cases, np.broadcast_to(cases[:, None, :], events.shape), events)
    point = np.minimum.accumulate(observed_rate, axis=-1)          # what a naive analysis would use
    bounds = RiskBounds("bounds", "monotone bounds", lo, hi, np.inf, "bounds")
    return truth, truth.with_p(point, "confounded estimate"), bounds, pi


def quarrow_costs(rl):
    decision = np.stack([np.zeros(rl.n_cells), np.full(rl.n_cells, 750.0), rl.cell_costs["bond_cost"]], axis=1)
    return Costs(decision, np.array([1000.0, 5146.0, 155928.0]), "USD", rl.level_labels, rl.outcome_keys)


@pytest.mark.parametrize("strength", [0.5, 0.9])
def test_safe_rule_true_regret_is_never_positive_on_confounded_data(strength):
    truth, naive, bounds, pi = confounded_quarrow(strength)
    assert bounds.contains(truth.p).all()                          # Manski (1997): the bounds hold the truth
    assert np.abs(naive.p - truth.p).max() > 0.05                  # the naive estimate is far off
    sets = [bounds]
    # the smallest Gamma of a grid whose intervals around the naive estimate hold the truth, if any
    for gamma in (1.5, 2, 3, 5, 8, 13, 20, 50, 200, 1000):
        around = sensitivity_bounds(naive, pi, gamma)
        if around.contains(truth.p).all():
            sets.append(around)
            break
    costs = quarrow_costs(truth)
    all_columns = list(truth.layout.frame.columns)
    courts = Rule.per_cell("courts", "observed", truth.layout, pi, truth.level_values, truth.level_labels)
    naive_optimum = optimal_rule(naive, costs, name="naive optimum")
    G = len(naive_optimum.rule_cells)

    def everyone(level):
        return Rule.from_levels(f"everyone at {level}", "candidate", truth.layout, truth.layout.rule_columns,
                                np.full(G, level), truth.level_values, truth.level_labels)

    cases = [(courts, all_columns, []), (naive_optimum, None, []), (everyone(0), None, []), (everyone(2), None, []),
             (everyone(0), None, [{"kind": "capacity", "at_least": "bond", "max_share": 0.3}])]
    improved = 0
    for the_set in sets:
        for baseline, columns, specs in cases:
            safe = safe_rule(naive, costs, the_set, baseline, specs, columns)
            assert safe.certified
            baseline_cost = rule_cost(baseline.cell_delta, truth.p, truth.weights, costs)
            true_regret = rule_cost(safe.rule.cell_delta, truth.p, truth.weights, costs) - baseline_cost
            assert true_regret <= 1e-9 * baseline_cost
            assert true_regret <= safe.worst_case_regret_per_case + 1e-9 * baseline_cost
            improved += safe.guaranteed_improvement_per_1000 > 0
        # the robust rule's true cost never exceeds its worst case
        robust = robust_rule(naive, costs, the_set)
        assert rule_cost(robust.rule.cell_delta, truth.p, truth.weights, costs) <= robust.worst_case_cost_per_case * (1 + 1e-12)
    if strength == 0.5:
        assert len(sets) == 2 and improved >= 1                    # a guarantee that is not always zero


@pytest.mark.parametrize("specs", [[], [{"kind": "capacity", "at_least": "bond", "max_share": 0.6}]])
def test_safe_rule_on_coarser_rule_cells_keeps_a_per_cell_baseline_where_it_cannot_do_better(specs):
    truth, naive, bounds, pi = confounded_quarrow(0.5)
    costs = quarrow_costs(truth)
    courts = Rule.per_cell("courts", "observed", truth.layout, pi, truth.level_values, truth.level_labels)
    around = sensitivity_bounds(naive, pi, 3.0)
    for the_set in (bounds, around):
        safe = safe_rule(naive, costs, the_set, courts, specs)     # rule cells: aid tier x charge class
        assert safe.certified and safe.keep.max() > 0
        assert len(safe.rule_cells) == len(naive.layout.rule_index()[1])
        baseline_cost = rule_cost(courts.cell_delta, truth.p, truth.weights, costs)
        if the_set is bounds or around.contains(truth.p).all():
            assert rule_cost(safe.rule.cell_delta, truth.p, truth.weights, costs) <= baseline_cost * (1 + 1e-9)
        # its reported worst case is the worst case of the rule it returns (the dual with the rule fixed)
        again = worst_case_regret(safe.rule, courts, naive, costs, the_set)
        assert again.total == pytest.approx(safe.worst_case_regret_per_case, rel=1e-6, abs=1e-9 * baseline_cost)
        frame = safe.to_frame()
        shares = frame[[c for c in frame.columns if c.startswith("share_")]].sum(axis=1) + frame["keep_baseline"]
        np.testing.assert_allclose(shares, 1.0, atol=1e-9)
        # where no improvement is certain, practice stays as it was
        uncertified = frame["guaranteed_improvement_per_1000_cases"] == 0
        assert (frame.loc[uncertified, "keep_baseline"] == 1.0).all()
        if specs:
            problem = ConstrainedProblem(naive, costs, specs, list(naive.layout.frame.columns))
            A, lo, hi = problem.rows()
            assert feasible(problem, safe.rule.cell_delta)


def test_safe_rule_with_rule_cell_constraints_says_it_cannot_keep_a_per_cell_baseline():
    rl, costs, columns, bounds = instance(2, 3, 2, "gamma", 2.0)
    rng = np.random.default_rng(2)
    courts = Rule.per_cell("courts", "observed", rl.layout, rng.dirichlet(np.ones(3), size=rl.n_cells),
                           rl.level_values, rl.level_labels)
    # rule cells by score x bucket: the per-cell baseline varies within them, and the rows of a
    # monotone-in-score constraint differ between a rule-cell and a cell-level problem
    safe = safe_rule(rl, costs, bounds, courts, [{"kind": "monotone"}], ["score", "bucket"])
    assert any("cannot leave cases" in n for n in safe.notes)
    if not safe.certified:
        assert safe.guaranteed_improvement_per_1000 == 0.0 and "NOT certified" in str(safe)


# ----------------------------------------------------------------------------------------------
# Inputs and outputs
# ----------------------------------------------------------------------------------------------
def test_worst_case_p_is_the_running_minimum_of_the_upper_ends():
    lo = np.array([[[0.3, 0.2, 0.1]]])
    hi = np.array([[[0.5, 0.6, 0.15]]])
    p = worst_case_p(RiskBounds("b", "b", lo, hi, np.inf, "bounds"))
    np.testing.assert_allclose(p, [[[0.5, 0.5, 0.15]]])


def test_uncertainty_set_needs_exactly_one_kind_and_the_counts():
    rl, costs, columns = random_instance(0)
    with pytest.raises(InputError, match="either a Gamma"):
        uncertainty_set(rl, None)
    with pytest.raises(InputError, match="counts per cell"):
        uncertainty_set(rl, None, gamma=2.0)
    with pytest.raises(InputError, match="Gamma must be"):
        uncertainty_set(rl, None, gamma=0.5)


def test_bad_intervals_and_baselines_are_refused():
    rl, costs, columns, bounds = instance(0, 3, 2, "box")
    flipped = RiskBounds("x", "x", bounds.upper + 0.1, bounds.lower, np.inf, "bounds")
    with pytest.raises(InputError, match="lower > upper"):
        robust_rule(rl, costs, flipped, columns=columns)
    with pytest.raises(InputError, match="baseline"):
        safe_rule(rl, costs, bounds, np.zeros((rl.n_cells, 3)), columns=columns)


def test_output_files_hold_the_figures_and_the_cautions():
    rl, costs, columns, bounds = instance(1, 3, 2, "gamma", 2.0)
    optimum = optimal_rule(rl, costs, columns)
    robust = robust_rule(rl, costs, bounds, columns=columns, reference=optimum)
    files = robust.output_files()
    assert set(files) == {"robust_rule.csv", "robust_rule.json"}
    meta = files["robust_rule.json"]
    assert meta["worst_case_cost_per_1000_cases"] == pytest.approx(1000 * robust.worst_case_cost_per_case)
    assert meta["protection_per_1000_cases"] >= -1e-6 and meta["premium_per_1000_cases"] >= -1e-6
    assert meta["cautions"] and meta["set"] == "g"
    safe = safe_rule(rl, costs, bounds, optimum, columns=columns)
    frame = safe.output_files()["safe_rule.csv"]
    assert frame["worst_case_regret_per_1000_cases"].sum() == pytest.approx(1000 * safe.worst_case_regret_per_case)
    assert (frame["guaranteed_improvement_per_1000_cases"] >= 0).all()


# ----------------------------------------------------------------------------------------------
# The command line
# ----------------------------------------------------------------------------------------------
def test_solve_writes_the_robust_and_safe_rules(small_case_table, tmp_path, capsys):
    import json

    import pandas as pd

    from .conftest import run_cli

    scenario, _ = small_case_table
    out = tmp_path / "out"
    code, stdout, err = run_cli(["solve", scenario, "-o", out, "--robust-gamma", "2", "--safe-against", "courts-not-shown"], capsys)
    assert code == 0, err
    assert "Rules that hold under doubt" in stdout and "certified no worse" in stdout
    meta = json.loads((out / "safe_rule.json").read_text())
    assert meta["certified"] and meta["gamma"] == 2 and meta["guaranteed_improvement_per_1000_cases"] >= 0
    robust = json.loads((out / "robust_rule.json").read_text())
    assert robust["reference_rule"] == "cost-minimizing rule" and robust["protection_per_1000_cases"] >= -1e-6
    frame = pd.read_csv(out / "safe_rule.csv")
    assert {"keep_baseline", "worst_case_regret_per_1000_cases", "guaranteed_improvement_per_1000_cases"} <= set(frame.columns)
    assert (out / "robust_rule.csv").exists() and (out / "rule.csv").exists()


@pytest.mark.parametrize("argv, message", [
    (["--safe-against", "courts-shown"], "--safe-against needs a set"),
    (["--robust-gamma", "0.5"], "--robust-gamma must be"),
    (["--robust-gamma", "2", "--robust-bounds"], "not both"),
    (["--robust-bounds", "--safe-against", "the mayor's rule"], "names no rule of this scenario"),
])
def test_solve_refuses_bad_doubt_options_and_writes_nothing(small_case_table, tmp_path, capsys, argv, message):
    from .conftest import run_cli

    scenario, _ = small_case_table
    out = tmp_path / "out"
    code, _, err = run_cli(["solve", scenario, "-o", out] + argv, capsys)
    assert code == 2 and message in err
    assert not out.exists()


def test_compare_adds_the_robust_and_safe_rules(small_case_table, tmp_path, capsys):
    import pandas as pd

    from .conftest import run_cli

    scenario, _ = small_case_table
    out = tmp_path / "out"
    code, stdout, err = run_cli(["compare", scenario, "-o", out, "--replicates", "5", "--no-progress",
                                 "--robust-bounds", "--safe-against", "aid"], capsys)
    assert code == 0, err
    rules = pd.read_csv(out / "comparison.csv")["rule"].tolist()
    assert any(r.startswith("robust rule (monotone bounds)") for r in rules)
    assert any(r.startswith("safe rule against") for r in rules)
    assert (out / "safe_rule.json").exists() and (out / "robust_rule.json").exists()


@HYP
@given(seed=st.integers(0, 10_000), levels=st.integers(2, 5), gamma=st.floats(1.0, 50.0))
def test_sensitivity_intervals_are_non_increasing_so_the_worst_case_is_their_upper_end(seed, levels, gamma):
    # the claim of docs/method.md that the set U is a chain of intervals whose ends fall with the
    # level (so U is never empty and p* = u)
    rng = np.random.default_rng(seed)
    p = np.sort(rng.uniform(0, 1, size=(20, 2, levels)), axis=-1)[..., ::-1]
    shares = rng.dirichlet(np.ones(levels), size=20)
    lo, hi = sensitivity_interval(p, shares, gamma)
    assert (np.diff(lo, axis=-1) <= 1e-12).all() and (np.diff(hi, axis=-1) <= 1e-12).all()
    np.testing.assert_allclose(worst_case_p(RiskBounds("g", "g", lo, hi, gamma, "sensitivity")), hi, rtol=0, atol=1e-12)
