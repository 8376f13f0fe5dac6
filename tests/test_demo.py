"""The invented demo county: deterministic, monotone, and plausible against sanity ranges."""

from __future__ import annotations

import numpy as np
import pandas as pd

from policy.demo.quarrow import simulate_cases, true_risk_levels


def test_same_seed_same_table():
    a, _ = simulate_cases(2_000, seed=3)
    b, _ = simulate_cases(2_000, seed=3)
    c, _ = simulate_cases(2_000, seed=4)
    pd.testing.assert_frame_equal(a, b)
    assert not a.equals(c)


def test_truth_is_monotone_and_outcomes_follow_risk_levels():
    truth, court = true_risk_levels()
    assert (np.diff(truth.p, axis=-1) <= 1e-15).all()
    np.testing.assert_allclose(truth.weights.sum(), 1.0)
    np.testing.assert_allclose(court.sum(axis=-1), 1.0)
    # a violent new offense is a new offense: its probability never exceeds it
    assert (truth.p[:, 2, :] <= truth.p[:, 1, :] + 1e-15).all()
    frame, sim = simulate_cases(5_000, seed=2)
    seen = frame["new_offense"].notna().to_numpy()
    occurs = sim["decision"] < sim["risk_level"][:, 1]
    np.testing.assert_array_equal(frame.loc[seen, "new_offense"].to_numpy(dtype=int), occurs[seen].astype(int))


def test_plausible_against_sanity_ranges(demo_cases):
    # Sanity ranges from docs/reference-values.md ("Pretrial outcome rates"): most decisions are
    # the most lenient level (common practice); a minority of released people miss court and
    # failure to appear is around a fifth to a quarter (memory); rearrest around a sixth
    # (memory); new violent offenses during release are rare (common practice).
    frame, _ = demo_cases
    shares = frame["decision"].value_counts(normalize=True)
    assert shares.idxmax() == "recognizance" and shares["recognizance"] > 0.45
    released = frame[frame["decision"] != "bond"]
    fta = released["missed_court"].mean()
    assert 0.10 < fta < 0.30
    assert 0.08 < released["new_offense"].mean() < 0.22
    assert released["new_violent"].mean() < 0.04
    # the aid's tiers run 1..5 with fewest at the top
    tiers = frame["aid_tier"].value_counts().sort_index()
    assert list(tiers.index) == [1, 2, 3, 4, 5] and tiers[5] < tiers[1]
