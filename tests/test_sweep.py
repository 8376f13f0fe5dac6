"""Cost-ratio sweeps and lenient maps (policy/assessment/sweep/)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import linprog
from scipy.spatial import ConvexHull, HalfspaceIntersection

from policy.estimation.bounds import decision_shares, point_bounds, robust_assumptions, sensitivity_bounds
from policy.inputs.cells import CellLayout
from policy.decision.costs import Costs, costs_from_scenario
from policy.errors import InputError
from policy.decision.evaluate import evaluate
from policy.running.pipeline import estimate
from policy.decision.rules import Rule
from policy.decision.solve import optimal_rule
from policy.estimation.strata import RiskLevels
from policy.assessment.sweep import (
    StepFunction,
    clip_polygons,
    lenient_intervals,
    lenient_map,
    lower_envelope,
    ratio_axis,
    sweep_one,
    sweep_scenario,
)
from policy.assessment.sweep.envelope import envelope_functions
from policy.assessment.sweep.regions import polygon_area

from .conftest import SCENARIOS, run_cli


# -- helpers --------------------------------------------------------------------------------------
def synthetic(rng, n_cells=60, J=2, L=3, groups=None, decision=None):
    """Random risk levels (p non-increasing in d) and costs; rule cells are ``groups`` of cells."""
    p = np.sort(rng.uniform(0.0, 0.6, size=(n_cells, J, L)), axis=-1)[..., ::-1].copy()
    groups = np.arange(n_cells) if groups is None else groups
    frame = pd.DataFrame({
        "cell": pd.Categorical.from_codes(np.arange(n_cells), categories=[f"c{i}" for i in range(n_cells)], ordered=True),
        "group": pd.Categorical.from_codes(groups, categories=[f"g{i}" for i in range(groups.max() + 1)], ordered=True),
    })
    layout = CellLayout(frame, (), ("group",), None)
    levels = tuple(f"l{d}" for d in range(L))
    outcomes = tuple(f"o{j}" for j in range(J))
    rl = RiskLevels(layout, levels, levels, outcomes, outcomes, rng.integers(1, 100, n_cells).astype(float), p,
                    np.zeros_like(p, dtype=bool), {}, np.zeros((J, L), dtype=bool))
    if decision is None:
        decision = np.cumsum(rng.uniform(0, 500, size=(n_cells, L)), axis=1) - rng.uniform(0, 500, size=(n_cells, 1))
        decision[:, 0] = 0.0
        decision += rng.uniform(0, 300, size=(n_cells, 1)) * np.arange(L)
    costs = Costs(decision, rng.uniform(500, 5000, J), "USD", levels, outcomes)
    return rl, costs


def costs_at(costs, axis, r):
    return costs.with_outcome_cost(axis.outcome_index, r * axis.reference_cost)


def away_from(points, knots, tol=1e-7):
    if len(knots) == 0:
        return np.ones(len(points), dtype=bool)
    i = np.searchsorted(knots, points)
    near = np.zeros(len(points), dtype=bool)
    for j in (i - 1, i):
        ok = (j >= 0) & (j < len(knots))
        near[ok] |= np.abs(points[ok] - knots[j[ok]]) <= tol * np.maximum(1, np.abs(points[ok]))
    return ~near


# -- the lower envelope ---------------------------------------------------------------------------
def test_envelope_matches_a_dense_grid_argmin_away_from_breakpoints():
    # Reference: numpy's argmin on a dense grid (first minimum = the more lenient level).
    rng = np.random.default_rng(0)
    for L in (2, 3, 5):
        A, B = rng.normal(size=(400, L)), rng.normal(size=(400, L))
        env = lower_envelope(A, B)
        r = np.linspace(-6, 6, 6001)
        keep = away_from(r, np.unique(env.breaks[np.isfinite(env.breaks)]))
        grid = np.argmin(A[None] + r[:, None, None] * B[None], axis=-1)
        np.testing.assert_array_equal(env.level_at(r[keep]), grid[keep])
        assert (env.count <= L - 1).all()


def test_envelope_ties_go_to_the_more_lenient_level_at_breakpoints_and_on_identical_lines():
    # Integer lines meet at exact points: there numpy's argmin (first minimum) is the tie rule.
    rng = np.random.default_rng(1)
    A = rng.integers(0, 4, size=(3000, 4)).astype(float)
    B = rng.integers(0, 4, size=(3000, 4)).astype(float)
    env = lower_envelope(A, B)
    r = np.arange(-40, 41) / 8.0               # every crossing (A diff / B diff) of these lines
    grid = np.argmin(A[None] + r[:, None, None] * B[None], axis=-1)
    np.testing.assert_array_equal(env.level_at(r), grid)


def test_envelope_shares_and_optimal_cost_at_and_between_breakpoints():
    # Reference: numpy argmin (first minimum) and min at points that include every crossing of
    # integer lines, where several lines often meet at once.
    # intercepts in multiples of 12 put every crossing on an integer, so the half-integer grid
    # below holds every breakpoint and every value on it is exact in floating point
    rng = np.random.default_rng(7)
    A = 12.0 * rng.integers(0, 5, size=(4000, 4))
    B = rng.integers(0, 5, size=(4000, 4)).astype(float)
    w = rng.integers(1, 9, size=4000).astype(float)
    env = lower_envelope(A, B)
    shares, total = envelope_functions(env, w, A, B)
    assert (env.at_break[env.at_break >= 0] != env.levels[:, :-1][env.at_break >= 0]).any()
    r = np.arange(-100, 101) / 2.0
    values = A[None] + r[:, None, None] * B[None]
    level = np.argmin(values, axis=-1)
    for i, x in enumerate(r):
        np.testing.assert_allclose(shares(x), np.bincount(level[i], weights=w, minlength=4))
        coef = total(x)
        assert coef[0] + x * coef[1] == pytest.approx(values[i].min(axis=-1).sum(), rel=1e-12)


def test_envelope_breakpoints_are_the_crossings_of_the_neighbouring_lines():
    rng = np.random.default_rng(2)
    A, B = rng.normal(size=(500, 4)), rng.normal(size=(500, 4))
    env = lower_envelope(A, B)
    g, s = np.nonzero(np.arange(3)[None, :] < env.count[:, None])
    a, b = env.levels[g, s], env.levels[g, s + 1]
    cross = (A[g, a] - A[g, b]) / (B[g, b] - B[g, a])
    np.testing.assert_allclose(env.breaks[g, s], cross, rtol=1e-12)
    assert (env.breaks[:, :-1] < env.breaks[:, 1:]).all() or (env.breaks[:, :-1] <= env.breaks[:, 1:]).all()
    assert (env.breaks[:, :-1][np.isfinite(env.breaks[:, 1:])] < env.breaks[:, 1:][np.isfinite(env.breaks[:, 1:])]).all()


def test_textbook_threshold_for_two_levels_and_one_outcome():
    # Elkan (2001), "The Foundations of Cost-Sensitive Learning" (seen in the abstract): act iff
    # the prevented probability p0 - p1 > C_act / C_harm (derived in reference-values.md; an exact
    # tie stays lenient). With the ratio r = C_harm / C_act the breakpoint is r* = 1 / (p0 - p1).
    rng = np.random.default_rng(3)
    rl, costs = synthetic(rng, n_cells=200, J=1, L=2)
    costs = Costs(np.column_stack([np.zeros(200), np.full(200, 750.0)]), costs.outcome, "USD", rl.level_labels, rl.outcome_labels)
    axis = ratio_axis(rl, costs, "o0")
    assert axis.reference_cost == pytest.approx(750.0)
    s = sweep_one(rl, costs, axis, 0.0, 1e6)
    prevented = rl.p[:, 0, 0] - rl.p[:, 0, 1]
    has = prevented > 0
    np.testing.assert_allclose(s.envelope.breaks[has, 0], 1.0 / prevented[has], rtol=1e-12)
    assert (s.envelope.levels[has, :2] == [0, 1]).all()


# -- the one-ratio sweep --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def demo(demo_scenario):
    cells, rl = estimate(demo_scenario)
    costs = costs_from_scenario(demo_scenario, rl)
    return demo_scenario, cells, rl, costs


@pytest.mark.parametrize("outcome", ["missed_court", "new_offense", "new_violent"])
def test_share_step_function_matches_grid_argmin_on_the_demo(demo, outcome):
    # Reference: the foundation's optimal_rule re-solved at each ratio (argmin per rule cell).
    _, _, rl, costs = demo
    axis = ratio_axis(rl, costs, outcome)
    s = sweep_one(rl, costs, axis, 0.0, 6 * axis.scenario_ratio)
    rng = np.random.default_rng(4)
    r = np.sort(rng.uniform(0, 6 * axis.scenario_ratio, 60))
    r = r[away_from(r, s.shares.knots)]
    for x in r:
        rule = optimal_rule(rl, costs_at(costs, axis, x))
        direct = np.bincount(rule.level, weights=rule.weights, minlength=rl.n_levels) / rule.weights.sum()
        np.testing.assert_allclose(s.share_at(x), direct, atol=1e-12)
        np.testing.assert_array_equal(s.envelope.level_at(x), rule.level)


def test_optimal_level_never_becomes_more_lenient_as_an_outcome_cost_grows(demo):
    _, _, rl, costs = demo
    for key in rl.outcome_keys:
        env = sweep_one(rl, costs, ratio_axis(rl, costs, key), 0, 10).envelope
        seq = np.where(env.levels >= 0, env.levels, np.iinfo(np.int64).max)
        assert (np.diff(seq, axis=1) > 0).all()
        # at a breakpoint the rule takes the segment on its left (the more lenient level)
        g, s = np.nonzero(np.arange(env.breaks.shape[1])[None, :] < env.count[:, None])
        np.testing.assert_array_equal(env.at_break[g, s], env.levels[g, s])


def test_regret_is_exact_against_a_direct_evaluation(demo):
    # Reference: policy.decision.evaluate.evaluate of the fixed rule against the re-solved optimum.
    _, _, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_offense")
    fixed = optimal_rule(rl, costs, name="fixed")
    per_cell = Rule.per_cell("per cell", "candidate", rl.layout,
                             np.eye(rl.n_levels)[np.random.default_rng(5).integers(0, rl.n_levels, rl.n_cells)],
                             rl.level_values, rl.level_labels)
    s = sweep_one(rl, costs, axis, 0.0, 8.0, rules=[fixed, per_cell])
    for x in np.random.default_rng(6).uniform(0, 8, 25):
        c = costs_at(costs, axis, x)
        opt = optimal_rule(rl, c)
        for rule in (fixed, per_cell):
            ev = evaluate(rule, rl, c, reference=opt)
            assert float(s.regret[rule.name](x)) == pytest.approx(ev.regret_per_case, rel=1e-9, abs=1e-7)
    table = s.regret_table()
    assert set(table["rule"]) == {"fixed", "per cell"}
    assert table.groupby("rule")["ratio"].is_monotonic_increasing.all()
    assert float(s.regret["fixed"](axis.scenario_ratio)) == pytest.approx(0.0, abs=1e-6)


def test_tables_are_consistent(demo):
    _, _, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_violent")
    s = sweep_one(rl, costs, axis, 0.0, 100.0)
    seg = s.segments()
    # segments of each rule cell tile the range
    length = (seg["to_ratio"] - seg["from_ratio"]).groupby([seg[c] for c in s.rule_cells.columns], observed=True).sum()
    np.testing.assert_allclose(length.to_numpy(), 100.0)
    shares = s.share_table()
    np.testing.assert_allclose(shares.groupby("from_ratio")["share"].sum(), 1.0)
    bp = s.breakpoints()
    assert (bp["ratio"].between(0, 100)).all() and (bp["level_before"] != bp["level_after"]).all()
    np.testing.assert_allclose(bp["cost"], bp["ratio"] * axis.reference_cost)
    assert len(bp) == len(seg) - len(s.rule_cells)


def test_ratio_axis_reference_is_the_case_weighted_mean_of_the_harshest_cost(demo):
    scenario, _, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_offense")
    bond = rl.cell_costs["bond_cost"]
    assert axis.reference_cost == pytest.approx(np.average(bond, weights=rl.weights))
    assert axis.scenario_ratio == pytest.approx(5146.0 / axis.reference_cost)
    per = ratio_axis(rl, costs, "new offense", per="supervised release")
    assert per.reference_cost == pytest.approx(750.0) and per.outcome == "new_offense"
    with pytest.raises(InputError, match="outcome kind"):
        ratio_axis(rl, costs, "nothing")
    with pytest.raises(InputError, match="above 0"):
        ratio_axis(rl, costs, "new_offense", per="recognizance")


# -- robust leniency ------------------------------------------------------------------------------
def test_robust_lenient_flag_equals_the_optimum_at_the_least_favourable_distribution(demo):
    # Reference: solve.optimal_rule on the distribution with p_0 at its upper and every p_d (d>=1)
    # at its lower bound, the one most against leniency: leniency is optimal for every
    # distribution in the box iff it is optimal there.
    _, cells, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_violent")
    assumptions = robust_assumptions(rl, cells, [1.25, 2.0])
    s = sweep_one(rl, costs, axis, 0.0, 80.0, assumptions=assumptions)
    for a, b in enumerate(assumptions):
        witness = b.lower.copy()
        witness[:, :, 0] = b.upper[:, :, 0]
        low, high = s.lenient[a]
        for x in np.linspace(0.0, 80.0, 41):
            rule = optimal_rule(rl.with_p(witness), costs_at(costs, axis, x))
            flag = ~np.isnan(low) & (low <= x) & (x <= high)
            on_edge = np.isclose(x, low) | np.isclose(x, high)
            np.testing.assert_array_equal(flag[~on_edge], (rule.level == 0)[~on_edge])


def test_robust_leniency_holds_for_random_distributions_inside_the_bounds(demo):
    _, cells, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_violent")
    b = sensitivity_bounds(rl, decision_shares(cells), 1.25)
    s = sweep_one(rl, costs, axis, 0.0, 60.0, assumptions=[b])
    low, high = s.lenient[0]
    rng = np.random.default_rng(9)
    x = 5.0
    robust = ~np.isnan(low) & (low <= x) & (x <= high)
    assert robust.any()
    for _ in range(50):
        p = b.lower + rng.random(b.lower.shape) * (b.upper - b.lower)
        rule = optimal_rule(rl.with_p(p), costs_at(costs, axis, x))
        assert (rule.level[robust] == 0).all()


def test_gamma_one_reproduces_the_point_map_and_regions_shrink_with_gamma(demo):
    _, cells, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_violent")
    shares = decision_shares(cells)
    gammas = [1.0, 1.1, 1.25, 1.5, 2.0, 3.0]
    bs = [point_bounds(rl)] + [sensitivity_bounds(rl, shares, g) for g in gammas]
    s = sweep_one(rl, costs, axis, 0.0, 150.0, assumptions=bs)
    np.testing.assert_array_equal(s.lenient[0][0], s.lenient[1][0])
    np.testing.assert_array_equal(s.lenient[0][1], s.lenient[1][1])
    # the point-estimate lenient interval is the envelope's lenient segment
    until = s.envelope.lenient_until()
    has = np.isfinite(until) | (s.envelope.levels[:, 0] == 0)
    np.testing.assert_allclose(s.lenient[0][1][has], until[has], rtol=1e-9)
    grid = np.linspace(0, 150, 301)
    prev = prev_inside = prev_a = prev_b = None
    for a in range(1, len(bs)):
        low, high = s.lenient[a]
        share = s.lenient_share_at(grid, a)
        # within the range (costs are >= 0): a cell lenient under a larger Gamma is lenient
        # under every smaller one, on a sub-interval
        a_, b_ = np.maximum(low, 0.0), np.minimum(high, 150.0)
        inside = ~np.isnan(low) & (a_ <= b_)
        if prev is not None:
            assert (share <= prev + 1e-12).all()
            assert (inside <= prev_inside).all()
            assert (b_[inside] <= prev_b[inside] + 1e-9).all() and (a_[inside] >= prev_a[inside] - 1e-9).all()
        prev, prev_inside, prev_a, prev_b = share, inside, a_, b_
    assert s.lenient_share_at(5.0, len(bs) - 1) < s.lenient_share_at(5.0, 1)


def test_lenient_up_to_reads_the_share_curve(demo):
    _, cells, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_violent")
    s = sweep_one(rl, costs, axis, 0.0, 150.0, assumptions=robust_assumptions(rl, cells, [1.25]))
    for a in range(len(s.robust)):
        y = s.lenient_up_to(0.5, a)
        if np.isfinite(y):
            assert s.lenient_share_at(y, a) >= 0.5 - 1e-12
            assert s.lenient_share_at(min(y * (1 + 1e-6), 150.0), a) < 0.5 or y == 150.0
    summary = s.summary(0.5)
    assert list(summary["assumption"]) == [b.label for b in s.robust]


# -- step functions and intervals -----------------------------------------------------------------
def test_step_function_values_at_and_between_knots():
    f = StepFunction.from_events(np.array([1.0]), np.array([2.0, 1.0, 2.0]),
                                 np.array([[-1.0], [2.0], [0.5]]), np.array([[0.0], [2.0], [0.5]]))
    np.testing.assert_allclose(f(np.array([0.0, 1.0, 1.5, 2.0, 3.0]))[:, 0], [1.0, 3.0, 3.0, 3.5, 2.5])
    edges, values = f.pieces(0.5, 2.5)
    np.testing.assert_allclose(edges, [0.5, 1.0, 2.0, 2.5])
    np.testing.assert_allclose(values[:, 0], [1.0, 3.0, 2.5])


def test_lenient_intervals_solve_each_inequality():
    const = np.array([[-1.0, -2.0], [1.0, -1.0], [1.0, 0.0], [-1.0, 0.0]])
    slope = np.array([[1.0, 1.0], [-1.0, 1.0], [0.0, 1.0], [0.0, 0.0]])
    low, high = lenient_intervals(const, slope)
    np.testing.assert_allclose(low[[0, 1, 3]], [-np.inf, 1.0, -np.inf])
    np.testing.assert_allclose(high[[0, 1, 3]], [1.0, 1.0, np.inf])
    assert np.isnan(low[2]) and np.isnan(high[2])


# -- the two-ratio map ----------------------------------------------------------------------------
def test_exact_two_ratio_share_equals_grid_argmin_share_at_random_points():
    # Reference: numpy argmin over the decision levels at each point (first = lenient on ties).
    rng = np.random.default_rng(10)
    groups = rng.integers(0, 40, 300)
    groups = np.unique(groups, return_inverse=True)[1]
    rl, costs = synthetic(rng, n_cells=300, J=3, L=4, groups=groups)
    axes = [ratio_axis(rl, costs, "o0"), ratio_axis(rl, costs, "o2")]
    m = lenient_map(rl, costs, axes, [(0, 8), (0, 8)])
    pts = rng.uniform(0, 8, size=(500, 2))
    exact = m.share_at(pts)
    index, _ = rl.layout.rule_index()
    for (x, y), value in zip(pts, exact):
        c = costs.with_outcome_cost(axes[0].outcome_index, x * axes[0].reference_cost)
        c = c.with_outcome_cost(axes[1].outcome_index, y * axes[1].reference_cost)
        total = np.zeros((groups.max() + 1, rl.n_levels))
        np.add.at(total, index, rl.weights[:, None] * c.expected(rl.p))
        level = np.argmin(total, axis=1)
        w = np.bincount(index, weights=rl.weights)
        assert value == pytest.approx(w[level == 0].sum() / w.sum(), abs=1e-12)


def test_display_grid_equals_the_exact_share_at_its_points(demo):
    _, cells, rl, costs = demo
    axes = [ratio_axis(rl, costs, "new_violent"), ratio_axis(rl, costs, "missed_court")]
    m = lenient_map(rl, costs, axes, [(0, 80), (0, 2)], assumptions=robust_assumptions(rl, cells, [1.25]))
    for a in range(len(m.robust)):
        x, y = m.grid_axes(23)
        g = m.grid(23, a)
        X, Y = np.meshgrid(x, y)
        np.testing.assert_allclose(g.ravel(), m.share_at(np.column_stack([X.ravel(), Y.ravel()]), a), atol=1e-12)
    # Gamma = 1 (the point estimate) contains every robust region
    pts = np.random.default_rng(3).uniform([0, 0], [80, 2], size=(400, 2))
    base = m.lenient_at(pts, 0)
    for a in range(1, len(m.robust)):
        assert (m.lenient_at(pts, a) <= base).all()


def test_polygons_match_scipy_halfspace_intersection():
    # Reference: scipy.spatial.HalfspaceIntersection (Qhull) with an interior point from
    # scipy.optimize.linprog (Chebyshev centre), and ConvexHull for the area.
    rng = np.random.default_rng(12)
    n = 300
    box = np.array([[0, 0], [4, 0], [4, 3], [0, 3]], float)
    H = rng.normal(size=(n, 3, 3))
    V, cnt = clip_polygons(np.broadcast_to(box, (n, 4, 2)).copy(), np.full(n, 4), H)
    area = polygon_area(V, cnt)
    checked = 0
    for i in range(n):
        halfspaces = np.vstack([np.column_stack([H[i, :, 1], H[i, :, 2], H[i, :, 0]]),
                                [[-1, 0, 0], [1, 0, -4], [0, -1, 0], [0, 1, -3]]])
        norm = np.linalg.norm(halfspaces[:, :2], axis=1)
        res = linprog([0, 0, -1], A_ub=np.column_stack([halfspaces[:, :2], norm]), b_ub=-halfspaces[:, 2],
                      bounds=[(None, None), (None, None), (0, None)], method="highs")
        if res.status != 0 or res.x[2] < 1e-6:
            assert area[i] < 1e-9
            continue
        hs = HalfspaceIntersection(halfspaces, res.x[:2])
        ref = ConvexHull(hs.intersections).volume
        assert area[i] == pytest.approx(ref, rel=1e-9, abs=1e-12)
        # every vertex satisfies every half-plane
        v = V[i, :cnt[i]]
        assert (H[i, :, 0][None] + v[:, :1] * H[i, :, 1][None] + v[:, 1:] * H[i, :, 2][None] <= 1e-9).all()
        checked += 1
    assert checked > 50


def test_polygon_table_and_grid_table(demo):
    _, cells, rl, costs = demo
    axes = [ratio_axis(rl, costs, "new_violent"), ratio_axis(rl, costs, "missed_court")]
    m = lenient_map(rl, costs, axes, [(0, 80), (0, 2)], assumptions=robust_assumptions(rl, cells, [1.25]))
    poly = m.polygon_table()
    assert set(poly["assumption"]) <= {"point", "gamma=1.25", "bounds"}
    assert poly["ratio_1"].between(0, 80).all() and poly["ratio_2"].between(0, 2).all()
    # every vertex of a lenient polygon is lenient there (on its boundary at worst)
    for a, info in enumerate(m.robust):
        sub = poly[poly["assumption"] == info.key]
        if len(sub):
            pts = sub[["ratio_1", "ratio_2"]].to_numpy()
            groups = [tuple(r) for r in sub[list(m.rule_cells.columns)].astype(str).to_numpy()]
            keys = [tuple(r) for r in m.rule_cells.astype(str).to_numpy()]
            g = np.array([keys.index(k) for k in groups])
            mg = m.margins[a][g]
            delta = mg[..., 0] + pts[:, :1] * mg[..., 1] + pts[:, 1:] * mg[..., 2]
            assert (delta <= 1e-6 * np.abs(mg).sum(axis=-1).max()).all()
    grid = m.grid_table(11)
    assert len(grid) == 11 * 11 * len(m.robust)
    assert grid["share_lenient"].between(0, 1).all()


def test_map_rejects_bad_ranges(demo):
    _, _, rl, costs = demo
    axes = [ratio_axis(rl, costs, "new_violent"), ratio_axis(rl, costs, "missed_court")]
    with pytest.raises(InputError, match="log"):
        lenient_map(rl, costs, axes, [(0, 80), (0.1, 2)], scale="log")
    with pytest.raises(InputError, match="negative"):
        lenient_map(rl, costs, axes, [(-1, 80), (0, 2)])
    with pytest.raises(InputError, match="different outcome"):
        lenient_map(rl, costs, [axes[0], axes[0]], [(0, 80), (0, 2)])


# -- end to end -----------------------------------------------------------------------------------
def test_sweep_scenario_on_a_risk_level_table_has_no_robust_regions():
    res = sweep_scenario(SCENARIOS / "risk_level_table.toml", ["new_offense"])
    assert [b.key for b in res.assumptions] == ["point"]
    with pytest.raises(InputError, match="counts"):
        sweep_scenario(SCENARIOS / "risk_level_table.toml", ["new_offense"], gammas=[1.5])


def test_cli_sweep_writes_tables_and_figures(tmp_path, capsys):
    code, out, err = run_cli(["sweep", SCENARIOS / "demo.toml", "--out", tmp_path / "one", "--ratio", "new_violent",
                              "--range", "0:120", "--gamma", "1.25", "--figure", "svg", "--replicates", "20",
                              "--workers", "1", "--seed", "5"], capsys)
    assert code == 0, err
    files = sorted(p.name for p in (tmp_path / "one").iterdir() if not p.name.startswith("."))  # not the manifest
    assert files == sorted(["sweep.json", "sweep_breakpoints.csv", "sweep_lenient.csv", "sweep_lenient_shares.csv",
                            "sweep_regret.csv", "sweep_segments.csv", "sweep_shares.csv", "sweep_shares.svg",
                            "sweep_regret.svg", "sweep_bands.csv", "sweep_threshold_intervals.csv",
                            "arm_check.json", "arm_check_cells.csv"])
    bands = pd.read_csv(tmp_path / "one" / "sweep_bands.csv")
    assert (bands["lower"] <= bands["upper"] + 1e-12).all() and bands["ratio"].between(0, 120).all()
    assert json.loads((tmp_path / "one" / "sweep.json").read_text())["uncertainty"]["replicates"] == 20
    meta = json.loads((tmp_path / "one" / "sweep.json").read_text())
    assert meta["ranges"] == [[0.0, 120.0]] and meta["gammas"] == [1.25]
    assert meta["ratios"][0]["outcome"] == "new_violent" and meta["cautions"]
    assert "Cautions" in out and "Gamma = 1.25" in out
    code, out, err = run_cli(["sweep", SCENARIOS / "demo.toml", "--out", tmp_path / "two", "--ratio", "new_violent",
                              "--ratio", "missed_court", "--range", "1:120", "--range", "0.05:2", "--scale", "log",
                              "--table-points", "7", "--no-figures", "--replicates", "0"], capsys)
    assert code == 0, err
    grid = pd.read_csv(tmp_path / "two" / "map_grid.csv")
    assert len(grid) == 49 * grid["assumption"].nunique()
    np.testing.assert_allclose(np.sort(grid["ratio_1"].unique()), np.geomspace(1, 120, 7))


@pytest.mark.parametrize("args, message", [
    (["--ratio", "nothing"], "outcome kind"),
    (["--ratio", "new_offense", "--range", "5:1"], "low < high"),
    (["--ratio", "new_offense", "--range", "0:1", "--scale", "log"], "log scale"),
    (["--ratio", "new_offense", "--gamma", "0.5"], "Gamma"),
    (["--ratio", "new_offense", "--figure", "gif"], "figure format"),
    (["--ratio", "new_offense", "--resampling", "jackknife"], "resampling"),
])
def test_cli_sweep_errors_write_nothing(tmp_path, capsys, args, message):
    code, out, err = run_cli(["sweep", SCENARIOS / "demo.toml", "--out", tmp_path / "o", "--replicates", "0"] + args, capsys)
    assert code == 2 and message in err
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())


# -- replicates (what a bootstrap of the sweep computes) ------------------------------------------
def test_replicate_statistics_equal_one_sweep_per_replicate(demo):
    # Each replicate's lenient share and level thresholds equal a separate exact sweep on that
    # replicate's risk levels and weights; the thresholds read as "harsher than d iff r > t_d",
    # checked against numpy's argmin on a grid.
    from dataclasses import replace

    from policy.assessment.sweep import lenient_replicates, level_thresholds

    _, _, rl, costs = demo
    axis = ratio_axis(rl, costs, "new_violent")
    index, groups = rl.layout.rule_index()
    rng = np.random.default_rng(21)
    b = 5
    p = np.minimum.accumulate(np.clip(rl.p[None] * rng.uniform(0.7, 1.3, (b,) + rl.p.shape), 0, 1), axis=-1)
    w = rl.weights[None] * rng.poisson(1.0, (b, rl.n_cells))
    grid = np.linspace(0.0, 120.0, 61)
    out = lenient_replicates(p, w, costs, axis, index, len(groups), grid)
    assert out["share_lenient"].shape == (b, 61) and out["thresholds"].shape == (b, len(groups), rl.n_levels - 1)
    for k in range(b):
        r = replace(rl, p=p[k], weights=w[k].astype(float))
        s = sweep_one(r, costs, axis, 0.0, 120.0)
        np.testing.assert_allclose(out["share_lenient"][k], s.share_at(grid)[:, 0], atol=1e-12)
        np.testing.assert_array_equal(out["thresholds"][k], level_thresholds(s.envelope, rl.n_levels))
        level = optimal_rule(r, costs_at(costs, axis, 37.3)).level
        for d in range(rl.n_levels - 1):
            np.testing.assert_array_equal(level > d, 37.3 > out["thresholds"][k][:, d])


def test_bootstrap_bands_are_reproducible_and_centred_on_the_exact_sweep(demo_scenario):
    # Same seed, same bands; the bands come from re-estimated replicates (policy.assessment.uncertainty), and
    # their point is the exact sweep of the estimates.
    from policy.assessment.sweep import LenientReplicates

    kw = dict(gammas=[], bounds=False, replicates=40, seed=11, workers=1, grid_points=41)
    a = sweep_scenario(demo_scenario, ["new_offense"], **kw)
    b = sweep_scenario(demo_scenario, ["new_offense"], **kw)
    for name in ("lower", "upper", "thresholds_lower", "thresholds_upper"):
        np.testing.assert_array_equal(getattr(a.bands, name), getattr(b.bands, name))
    s, bands = a.sweep, a.bands
    index, groups = a.risk_levels.layout.rule_index()
    point = LenientReplicates(a.costs, s.axis, index, len(groups), bands.ratios, s.lo, s.hi)(
        a.risk_levels.p[None], type("Batch", (), {"weights": a.risk_levels.weights[None]})())
    np.testing.assert_allclose(point["share_lenient"][0], bands.share, atol=1e-12)
    np.testing.assert_array_equal(point["thresholds"][0], bands.thresholds)
    assert (bands.lower <= bands.upper + 1e-12).all()
    assert ((bands.thresholds_lower >= s.lo) & (bands.thresholds_upper <= s.hi)).all()
    c = sweep_scenario(demo_scenario, ["new_offense"], **{**kw, "seed": 12})
    assert not np.array_equal(a.bands.lower, c.bands.lower) or not np.array_equal(a.bands.upper, c.bands.upper)
    with pytest.raises(InputError, match="counts"):
        sweep_scenario(SCENARIOS / "risk_level_table.toml", ["new_offense"], replicates=10)
