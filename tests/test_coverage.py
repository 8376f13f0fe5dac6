"""Coverage, bias and accuracy on four simulated data-generating processes (tests/simulations.py).

The default run is quick: a few data sets per process, few replicates, and a band around the
91%-98% target widened by three Monte Carlo standard deviations of the family's mean coverage.
``pytest -m slow`` runs the full tables recorded in docs/method.md.

The coverage target applies to processes whose cells hold on average at least 200 cases
(``varying``, ``four_levels``); every family meets it since the bootstrap draws from the liberal
world (:mod:`policy.estimation.world`; ``SHORTFALLS`` would hold a family that misses it to its
measured floor). On the sparse ones (``demo``, ``many_small``)
the shrinkage bias can rival the standard error (docs/method.md gives the measured figures);
there the tests check that the estimator keeps its accuracy advantage over plain rates, and the
full run holds coverage to a floor.
"""

from __future__ import annotations

import numpy as np
import pytest

from .coverage import FAMILIES, accuracy_study, coverage_study, truth_figures
from .simulations import PROCESSES, process

TARGET = (0.91, 0.98)
DENSE = ("varying", "four_levels")
#: families that miss the target where it applies, with the floor the full run must keep: the
#: measured coverage less three Monte Carlo sd (docs/method.md gives the figures and the cause)
SHORTFALLS: dict[tuple[str, str], float] = {}
#: measured and recorded, never held to the target: the chosen rule's held-fixed interval, which
#: does not allow for the rule's choice on the same data (the ``chosen`` family does)
REPORTED_ONLY = ("chosen_fixed",)


def _band(study, name):
    # three Monte Carlo sd of the family mean; the sd counts each data set once (conservative)
    mc = study.monte_carlo_sd(name)
    return TARGET[0] - 3 * mc, TARGET[1] + 3 * mc


@pytest.mark.parametrize("name", PROCESSES)
def test_truth_is_a_distribution(name):
    # the exact truth: risk-level shares of each outcome kind sum to 1, every p is monotone
    proc = process(name)
    assert np.isclose(proc.truth.weights.sum(), 1.0)
    assert (np.diff(proc.truth.p, axis=-1) <= 1e-12).all()
    shares = truth_figures(proc)["shares"].reshape(len(proc.truth.outcome_keys), -1)
    np.testing.assert_allclose(shares.sum(axis=1), 1.0, atol=1e-12)
    np.testing.assert_allclose(proc.court.sum(axis=-1), 1.0, atol=1e-12)


@pytest.mark.parametrize("name", DENSE)
def test_coverage_quick_dense(name):
    study = coverage_study(name, sets=12, replicates=60)
    table = study.table()
    for fam in FAMILIES:
        if (name, fam) in SHORTFALLS or fam in REPORTED_ONLY:
            continue  # checked against its measured floor in the full run only
        lo, hi = _band(study, fam)
        assert lo <= study.coverage(fam) <= hi, table.to_string()


@pytest.mark.parametrize("name", ("demo", "many_small"))
def test_accuracy_beats_plain_rates_on_sparse_cells(name):
    # the cell estimator's mean absolute error against the exact truth stays well below plain
    # rates projected to monotone (the same data sets for both)
    table = accuracy_study(name, sets=2).set_index("estimator")
    assert table.loc["cell estimator", "mae"] < 0.75 * table.loc["plain rates + isotonic", "mae"], table.to_string()


def test_accuracy_where_level_effects_vary():
    # where a harsher level's effect depends on prior record, the selected covariate-by-level
    # terms make the estimator more accurate than common level ratios
    table = accuracy_study("varying", sets=4).set_index("estimator")
    assert table.loc["cell estimator", "mae"] < table.loc["common level ratios", "mae"], table.to_string()
    assert table.loc["cell estimator", "mae"] < table.loc["plain rates + isotonic", "mae"], table.to_string()


# ----------------------------------------------------------------------------------------------
# The full tables (docs/method.md)
# ----------------------------------------------------------------------------------------------
SLOW_SIZES = {"varying": (100, 200), "four_levels": (100, 200), "many_small": (100, 200), "demo": (100, 100)}


@pytest.mark.slow
@pytest.mark.parametrize("name", DENSE)
def test_coverage_full_dense(name):
    sets, replicates = SLOW_SIZES[name]
    study = coverage_study(name, sets=sets, replicates=replicates)
    table = study.table()
    print(table.to_string())
    for fam in FAMILIES:
        if fam in REPORTED_ONLY:
            continue
        if (name, fam) in SHORTFALLS:
            assert study.coverage(fam) >= SHORTFALLS[name, fam], table.to_string()
            continue
        lo, hi = _band(study, fam)
        assert lo <= study.coverage(fam) <= hi, table.to_string()


@pytest.mark.slow
@pytest.mark.parametrize("name", ("demo", "many_small"))
def test_coverage_full_sparse(name):
    # below 200 cases a cell the target does not apply; the families' coverage is measured and
    # recorded, and must not collapse
    sets, replicates = SLOW_SIZES[name]
    study = coverage_study(name, sets=sets, replicates=replicates)
    table = study.table()
    print(table.to_string())
    for fam in FAMILIES:
        assert study.coverage(fam) >= 0.75, table.to_string()
