"""Bounds on outcome probabilities without unconfoundedness (policy/estimation/bounds.py)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import expit, logit

from policy.estimation.bounds import (
    decision_shares,
    manski_bounds,
    monotone_response_bounds,
    odds_shift,
    robust_assumptions,
    sensitivity_bounds,
    sensitivity_interval,
)
from policy.demo.quarrow import true_risk_levels
from policy.errors import InputError
from policy.running.pipeline import estimate


# -- Manski (1997): the worked numbers -----------------------------------------------------------
def test_manski_worked_example():
    # Manski (1997), "Monotone Treatment Response", Econometrica 65(6) (seen); the worked numbers
    # are derived in docs/reference-values.md: decisions z in {0,1,2} with P(z) = (0.3, 0.5, 0.2)
    # and P(y=1|z) = (0.2, 0.3, 0.5), the outcome rising with the index; the monotone bounds on
    # P(y(1)=1) are [0.21, 0.55]. Our outcome falls with the index, so the levels are reversed.
    share = np.array([0.3, 0.5, 0.2])[::-1]
    rate = np.array([0.2, 0.3, 0.5])[::-1]
    lower, upper = monotone_response_bounds(share, share[None, :], (share * rate)[None, :])
    assert lower[0, 1] == pytest.approx(0.21, abs=1e-12)
    assert upper[0, 1] == pytest.approx(0.55, abs=1e-12)


def test_manski_worked_example_no_assumption_bounds():
    # Same worked example (reference-values.md, derived): without monotonicity the bounds on
    # P(y(1)=1) are [0.15, 0.65] (Manski 1997, seen: the no-assumption bounds
    # [P(y=1, z=1), P(y=1, z=1) + P(z != 1)]). Monotonicity links Y(1) only to recorded
    # outcomes, so with the outcome recorded only for the cases given level 1 and treated as
    # unknown elsewhere (worst case), the monotone bounds are exactly the no-assumption bounds.
    share = np.array([0.2, 0.5, 0.3])
    rate = np.array([0.5, 0.3, 0.2])
    recorded = np.array([0.0, 1.0, 0.0])
    lower, upper = monotone_response_bounds(share, (share * recorded)[None, :], (share * rate * recorded)[None, :])
    assert lower[0, 1] == pytest.approx(0.15, abs=1e-12)
    assert upper[0, 1] == pytest.approx(0.65, abs=1e-12)
    # with every outcome recorded the monotone bounds [0.21, 0.55] lie strictly inside them
    mlo, mhi = monotone_response_bounds(share, share[None, :], (share * rate)[None, :])
    assert 0.15 < mlo[0, 1] and mhi[0, 1] < 0.65


def test_manski_counts_and_shares_agree_and_bounds_are_monotone():
    rng = np.random.default_rng(3)
    cases = rng.integers(1, 50, size=(40, 4)).astype(float)
    observed = np.minimum(cases[:, None, :], rng.integers(0, 50, size=(40, 2, 4)))
    events = np.floor(observed * rng.random((40, 2, 4)))
    lo, hi = monotone_response_bounds(cases, observed, events)
    n = cases.sum(axis=1, keepdims=True)
    lo2, hi2 = monotone_response_bounds(cases / n, observed / n[..., None], events / n[..., None])
    np.testing.assert_allclose(lo, lo2, atol=1e-12)
    np.testing.assert_allclose(hi, hi2, atol=1e-12)
    assert (np.diff(lo, axis=-1) <= 1e-12).all() and (np.diff(hi, axis=-1) <= 1e-12).all()
    assert (lo <= hi + 1e-12).all()


def _random_population(rng, types=30, L=3, missing=0.0):
    """A population of case types with monotone potential outcomes and confounded decisions.

    Each type t has a risk level R_t (Y_t(d) = 1 iff d < R_t) and its own decision
    distribution, so the decision depends on the potential outcomes within the cell.
    """
    w = rng.random(types)
    risk = rng.integers(0, L + 1, size=types)
    y = (np.arange(L)[None, :] < risk[:, None]).astype(float)   # Y_t(d)
    pz = rng.dirichlet(np.ones(L) * 0.7, size=types)             # P(D = z | t)
    truth = (w[:, None] * y).sum(axis=0) / w.sum()
    cases = (w[:, None] * pz).sum(axis=0)
    observed = cases * (1 - missing)
    events = (w[:, None] * pz * y).sum(axis=0) * (1 - missing)
    return truth, cases, observed[None, :], events[None, :]


def test_manski_bounds_contain_the_truth_of_confounded_populations():
    # Definition check (Manski 1997, seen): under monotonicity the bounds hold for every
    # population, whatever the dependence of the decision on the potential outcomes.
    rng = np.random.default_rng(11)
    for _ in range(500):
        truth, cases, observed, events = _random_population(rng, L=int(rng.integers(2, 5)))
        lo, hi = monotone_response_bounds(cases, observed, events)
        assert (lo[0] <= truth + 1e-12).all() and (truth <= hi[0] + 1e-12).all()


def test_manski_bounds_with_missing_records():
    rng = np.random.default_rng(12)
    for _ in range(200):
        truth, cases, observed, events = _random_population(rng, missing=0.3)
        for how in ("worst_case", "ignore"):
            lo, hi = monotone_response_bounds(cases, observed, events, missing=how)
            assert (lo[0] <= truth + 1e-12).all() and (truth <= hi[0] + 1e-12).all()
        wide = monotone_response_bounds(cases, observed, events, "worst_case")
        narrow = monotone_response_bounds(cases, observed, events, "ignore")
        assert (wide[0] <= narrow[0] + 1e-12).all() and (narrow[1] <= wide[1] + 1e-12).all()
    with pytest.raises(InputError, match="missing"):
        monotone_response_bounds(cases, observed, events, missing="drop")


def _extremal_population(share, rate, end):
    """Case types (decision z, recorded outcome y, weight, potential outcomes Y(0..L-1)) that
    reproduce the data and put Y(d) as low (``end='lower'``) or high as monotonicity allows.

    A case given z with Y(z) = y has Y(d) >= y for d < z and Y(d) <= y for d > z. The lowest
    such vector is y up to z and 0 after; the highest is 1 before z and y from z on.
    """
    L = len(share)
    types = []
    for z in range(L):
        for y, weight in ((1, share[z] * rate[z]), (0, share[z] * (1 - rate[z]))):
            d = np.arange(L)
            if end == "lower":
                potential = np.where(d <= z, y, 0)
            else:
                potential = np.where(d < z, 1, y)
            types.append((z, y, weight, potential.astype(float)))
    return types


def test_manski_bounds_are_attained():
    # Sharpness (Manski 1997, seen): a population consistent with the data and with
    # monotonicity attains each end. Build it type by type and check that it is such a
    # population: monotone potential outcomes, the recorded outcome is Y(z), and it reproduces
    # the decision shares and outcome rates; then its P(Y(d) = 1) is the bound at every d.
    share = np.array([0.25, 0.45, 0.3])
    rate = np.array([0.4, 0.25, 0.1])
    lo, hi = monotone_response_bounds(share, share[None, :], (share * rate)[None, :])
    for end, bound in (("lower", lo[0]), ("upper", hi[0])):
        types = _extremal_population(share, rate, end)
        for z, y, _, potential in types:
            assert (np.diff(potential) <= 0).all()          # a harsher decision never raises Y
            assert potential[z] == y                         # consistent with the record
        weight = np.array([t[2] for t in types])
        given = np.array([t[0] for t in types])
        recorded = np.array([t[1] for t in types])
        np.testing.assert_allclose(np.bincount(given, weights=weight), share, atol=1e-15)
        np.testing.assert_allclose(np.bincount(given, weights=weight * recorded) / share, rate, atol=1e-12)
        attained = weight @ np.stack([t[3] for t in types])  # P(Y(d) = 1) for d = 0..L-1
        np.testing.assert_allclose(bound, attained, atol=1e-12)
    assert (hi[0] - lo[0] > 0.1).all()                       # not a point interval


def test_ignoring_records_missing_at_random_gives_the_full_data_bounds():
    # Missing completely at random within each (cell, level), at rates that differ by level:
    # the recorded cases are a scaled copy of all cases there, so with missing="ignore" the
    # bounds must be those of the full data (common practice: the defining property of
    # ignoring records missing at random). Worst-case treatment must be strictly wider.
    rng = np.random.default_rng(21)
    for _ in range(200):
        L = int(rng.integers(2, 5))
        truth, cases, observed, events = _random_population(rng, L=L)
        kept = rng.uniform(0.2, 0.9, size=L)
        full = monotone_response_bounds(cases, observed, events)
        ignore = monotone_response_bounds(cases, observed * kept, events * kept, missing="ignore")
        np.testing.assert_allclose(ignore[0], full[0], atol=1e-12)
        np.testing.assert_allclose(ignore[1], full[1], atol=1e-12)
        worst = monotone_response_bounds(cases, observed * kept, events * kept)
        assert (worst[1] - worst[0] > ignore[1] - ignore[0] + 1e-9).all()


def test_manski_bounds_contain_the_simulator_truth_in_every_cell():
    # The demo simulator's exact per-cell truth (policy.demo.quarrow.true_risk_levels) and its exact
    # decision distribution per cell and arm, as population counts (arms half each).
    truth, court = true_risk_levels()
    share = court.mean(axis=1)                                  # P(D = z | cell)
    cases = truth.weights[:, None] * share
    events = cases[:, None, :] * truth.p                        # unconfounded given the cell
    lo, hi = monotone_response_bounds(cases, np.broadcast_to(cases[:, None, :], events.shape), events)
    assert (lo <= truth.p + 1e-12).all() and (truth.p <= hi + 1e-12).all()
    assert (hi - lo).max() > 0.05                              # not a trivial point interval


def test_manski_bounds_of_the_demo_keep_structural_zeros(tmp_path):
    from policy import load_scenario
    from .conftest import SCENARIOS

    sc = load_scenario(SCENARIOS / "observational_detention.toml")
    cells, rl = estimate(sc)
    b = manski_bounds(cells, rl)
    assert rl.structural_zero.any()
    assert (b.lower[:, rl.structural_zero] == 0).all() and (b.upper[:, rl.structural_zero] == 0).all()
    assert (b.lower <= b.upper + 1e-12).all()
    frame = b.to_frame(rl)
    assert len(frame) == rl.p.size and {"lower", "upper", "point", "assumption"} <= set(frame.columns)


# -- the sensitivity parameter Gamma --------------------------------------------------------------
def test_odds_shift_multiplies_the_odds():
    m = np.array([0.01, 0.2, 0.5, 0.9])
    for f in (0.5, 2.0, 7.0):
        shifted = odds_shift(m, f)
        np.testing.assert_allclose(shifted / (1 - shifted), f * m / (1 - m), rtol=1e-12)


def _monotone_p(rng, n, J, L):
    return np.sort(rng.random((n, J, L)) * 0.6, axis=-1)[..., ::-1]


def test_gamma_one_is_the_point_estimate_and_intervals_nest():
    rng = np.random.default_rng(5)
    p = _monotone_p(rng, 50, 2, 3)
    shares = rng.dirichlet(np.ones(3), size=50)
    lo, hi = sensitivity_interval(p, shares, 1.0)
    np.testing.assert_allclose(lo, p, atol=1e-15)
    np.testing.assert_allclose(hi, p, atol=1e-15)
    prev = (lo, hi)
    for g in (1.1, 1.5, 2, 4, 10):
        lo, hi = sensitivity_interval(p, shares, g)
        assert (lo <= prev[0] + 1e-15).all() and (hi >= prev[1] - 1e-15).all()
        assert (lo <= p + 1e-15).all() and (p <= hi + 1e-15).all()
        prev = (lo, hi)


def test_large_gamma_approaches_the_monotone_bounds_at_the_estimated_rates():
    # Manski (1997, seen): with the estimated rates standing in for the identified ones, the
    # monotone bounds are [sum_{z>=d} pi_z p_z, sum_{z<=d} pi_z p_z + sum_{z>d} pi_z].
    rng = np.random.default_rng(6)
    p = _monotone_p(rng, 30, 1, 4)
    shares = rng.dirichlet(np.ones(4), size=30)
    lo, hi = sensitivity_interval(p, shares, 1e9)
    mlo, mhi = monotone_response_bounds(shares, shares[:, None, :], shares[:, None, :] * p)
    np.testing.assert_allclose(lo, mlo, atol=1e-8)
    np.testing.assert_allclose(hi, mhi, atol=1e-8)


def test_gamma_interval_is_the_extreme_over_the_model_by_search():
    # Brute force over the model's definition: every group's log-odds of Y(d) lies in one window
    # of width log(Gamma) that holds the identified group's; groups given z > d have
    # P(Y(d)=1) >= p_z and those given z < d at most p_z (monotonicity). Slide the window over a
    # fine grid and take the extreme of sum_z pi_z P(Y(d)=1 | D=z).
    rng = np.random.default_rng(8)
    for _ in range(40):
        L = int(rng.integers(2, 5))
        p = np.sort(rng.uniform(0.02, 0.8, size=L))[::-1]
        shares = rng.dirichlet(np.ones(L))
        gamma = float(rng.uniform(1.05, 4.0))
        lo, hi = sensitivity_interval(p[None, :], shares, gamma)
        width = np.log(gamma)
        for d in range(L):
            best_lo, best_hi = np.inf, -np.inf
            for start in np.linspace(logit(p[d]) - width, logit(p[d]), 4001):
                a, b = expit(start), expit(start + width)
                low_z = np.array([a if z < d else (max(a, p[z]) if z > d else p[d]) for z in range(L)])
                high_z = np.array([min(b, p[z]) if z < d else (b if z > d else p[d]) for z in range(L)])
                best_lo = min(best_lo, shares @ low_z)
                best_hi = max(best_hi, shares @ high_z)
            assert lo[0, d] == pytest.approx(best_lo, abs=2e-4)
            assert hi[0, d] == pytest.approx(best_hi, abs=2e-4)


def test_sensitivity_bounds_reject_gamma_below_one():
    rng = np.random.default_rng(1)
    with pytest.raises(InputError, match="Gamma"):
        sensitivity_interval(_monotone_p(rng, 2, 1, 3), np.full((2, 3), 1 / 3), 0.5)


def test_robust_assumptions_order_and_needs(demo_scenario):
    cells, rl = estimate(demo_scenario)
    out = robust_assumptions(rl, cells, [2.0, 1.0, 1.5])
    assert [b.key for b in out] == ["point", "gamma=1.5", "gamma=2", "bounds"]
    np.testing.assert_array_equal(out[0].lower, rl.p)
    np.testing.assert_array_equal(sensitivity_bounds(rl, decision_shares(cells), 1.0).upper, rl.p)
    with pytest.raises(InputError, match="counts"):
        robust_assumptions(rl, None, [1.5])
    with pytest.raises(InputError, match="Gamma"):
        robust_assumptions(rl, cells, [0.9])
    assert [b.key for b in robust_assumptions(rl, None, [], bounds=False)] == ["point"]


# -- what the result objects carry ---------------------------------------------------------------
def test_bound_results_name_their_assumption_and_pool_the_arms(demo_scenario):
    from policy.cautions import assumptions_for

    cells, rl = estimate(demo_scenario)
    assert cells.cases.shape[1] == 2  # two arms, pooled by the bounds
    point = robust_assumptions(rl, None, [], bounds=False)[0]
    assert (point.key, point.label, point.gamma, point.figure) == ("point", "point estimate", 1.0, "rule")
    assert point.note == "unconfoundedness given the cell" and point.assumptions == tuple(assumptions_for("rule"))
    assert point.lower is rl.p and point.upper is rl.p

    shares = decision_shares(cells)
    pooled_cases = cells.cases[:, 0] + cells.cases[:, 1]
    np.testing.assert_allclose(shares, pooled_cases / pooled_cases.sum(axis=1, keepdims=True), rtol=1e-15)
    g = sensitivity_bounds(rl, shares, 2.5)
    assert (g.key, g.label, g.gamma, g.figure) == ("gamma=2.5", "Gamma = 2.5", 2.5, "sensitivity")
    assert g.note == "odds of the outcome may differ by this factor between cases given different decisions"
    assert g.assumptions == tuple(assumptions_for("sensitivity"))
    lo, hi = sensitivity_interval(rl.p, shares, 2.5)
    np.testing.assert_array_equal(g.lower, lo)
    np.testing.assert_array_equal(g.upper, hi)
    with pytest.raises(InputError, match=r"decision shares must have shape \("):
        sensitivity_bounds(rl, shares[:, :2], 2.0)

    for missing, note in (("worst_case", "missing outcome records could be either value"),
                          ("ignore", "missing outcome records fare like recorded ones within cell and level")):
        b = manski_bounds(cells, rl, missing)
        assert (b.key, b.label, b.gamma, b.figure, b.note) == ("bounds", "monotone bounds", np.inf, "bounds", note)
        assert b.assumptions == tuple(assumptions_for("bounds"))
        lo, hi = monotone_response_bounds(pooled_cases, cells.observed[:, 0] + cells.observed[:, 1],
                                          cells.events[:, 0] + cells.events[:, 1], missing)
        np.testing.assert_array_equal(b.lower, lo)
        np.testing.assert_array_equal(b.upper, hi)
        # robust_assumptions passes the treatment of missing records on
        assert robust_assumptions(rl, cells, [], missing=missing)[-1].note == note
    assert (cells.observed < cells.cases[:, :, None, :]).any()  # the demo has missing records


def test_sensitivity_bounds_keep_structural_zeros():
    from policy import load_scenario
    from .conftest import SCENARIOS

    sc = load_scenario(SCENARIOS / "observational_detention.toml")
    cells, rl = estimate(sc)
    b = sensitivity_bounds(rl, decision_shares(cells), 3.0)
    lo, hi = sensitivity_interval(rl.p, decision_shares(cells), 3.0)
    zero = np.broadcast_to(rl.structural_zero, lo.shape)
    assert zero.any()
    assert (b.lower[zero] == 0).all() and (b.upper[zero] == 0).all()
    np.testing.assert_array_equal(b.lower[~zero], lo[~zero])
    np.testing.assert_array_equal(b.upper[~zero], hi[~zero])


def test_bounds_table_contains_and_text():
    from .test_solve import make_risk_levels

    p = np.array([[[0.4, 0.2]], [[0.3, 0.1]], [[0.6, 0.5]]])
    rl = make_risk_levels(p, weights=[10, 20, 30], groups=[0, 0, 1])
    lower, upper = p - 0.05, p + np.array([0.1, 0.2, 0.3])[:, None, None]
    from policy.estimation.bounds import RiskBounds

    b = RiskBounds("gamma=2", "Gamma = 2", lower, upper, 2.0, "sensitivity", "a note")
    frame = b.to_frame(rl)
    assert list(frame.columns) == ["tier", "group", "cell", "cases", "assumption", "gamma", "outcome", "level",
                                   "lower", "upper", "point"]
    assert frame["cell"].tolist() == [0, 0, 1, 1, 2, 2] and frame["tier"].tolist() == [0, 0, 0, 0, 1, 1]
    assert frame["cases"].tolist() == [10, 10, 20, 20, 30, 30]
    assert set(frame["assumption"]) == {"gamma=2"} and set(frame["gamma"]) == {2.0}
    assert frame["outcome"].tolist() == ["o0"] * 6 and frame["level"].tolist() == ["l0", "l1"] * 3
    np.testing.assert_array_equal(frame["lower"], lower.reshape(-1))
    np.testing.assert_array_equal(frame["upper"], upper.reshape(-1))
    np.testing.assert_array_equal(frame["point"], p.reshape(-1))
    # contains: inside, at either end within the tolerance, and outside either end
    np.testing.assert_array_equal(b.contains(p), np.ones_like(p, dtype=bool))
    edge = b.contains(lower - 5e-13) & b.contains(upper + 5e-13)
    assert edge.all()
    assert not b.contains(lower - 1e-9).any() and not b.contains(upper + 1e-9).any()
    # exactly at the tolerance is still inside
    assert b.contains(lower - 1e-12).all() and b.contains(upper + 1e-12).all()
    np.testing.assert_allclose(b.width, upper - lower)
    text = str(b)
    assert text.startswith("Gamma = 2: intervals for 3 cells x 1 outcome kinds x 2 levels;")
    assert f"median width {np.median(upper - lower):.3f}, largest {(upper - lower).max():.3f}. a note" in text


def test_bounds_inputs_are_checked_with_clear_messages(demo_scenario):
    from dataclasses import replace

    cells, rl = estimate(demo_scenario)
    with pytest.raises(InputError, match="missing must be one of worst_case, ignore; got 'drop'"):
        monotone_response_bounds(np.ones(2), np.ones((1, 2)), np.zeros((1, 2)), missing="drop")
    # bounds alone (no Gamma) also need the counts
    with pytest.raises(InputError, match=r"does not hold; use a case or counts table, or ask for no Gamma values and no bounds\.$"):
        robust_assumptions(rl, None, [], bounds=True)
    # cells and risk levels that differ in the number of cells, or in the levels only
    fewer = replace(rl, layout=rl.layout.take(np.arange(rl.n_cells - 1)), p=rl.p[:-1])
    with pytest.raises(InputError, match="must describe the same cells"):
        manski_bounds(cells, fewer)
    relabelled = replace(rl, level_values=tuple(reversed(rl.level_values)))
    with pytest.raises(InputError, match="must describe the same cells"):
        manski_bounds(cells, relabelled)


def test_odds_shift_ends_and_bounds_stay_probabilities_under_rounding():
    for f in (0.5, 2.0):
        np.testing.assert_array_equal(odds_shift(np.array([0.0, 1.0]), f), [0.0, 1.0])
    # shares 0.6, 0.3, 0.1 of cases: the cumulative sums of these shares miss 1 by 2.2e-16 in floating
    # point, so unclipped ends would leave [0, 1]
    cases = np.array([0.6, 0.3, 0.1])
    lo, hi = monotone_response_bounds(cases, cases[None, :], np.zeros((1, 3)))   # no events at all
    assert hi[0, -1] == 0.0 and (hi >= 0).all()
    lo, hi = monotone_response_bounds(cases, cases[None, :], cases[None, :])     # events everywhere
    assert lo[0, 0] == 1.0 and (lo <= 1).all()
    # decision shares that add to 1 + 2.2e-16: with p = 1 at every level both ends are exactly 1
    rng = np.random.default_rng(0)
    shares = next(s for s in (rng.dirichlet(np.ones(3)) for _ in range(10_000)) if s.sum() > 1)
    lo, hi = sensitivity_interval(np.ones((1, 3)), shares, 2.0)
    assert (lo == 1.0).all() and (hi == 1.0).all()
