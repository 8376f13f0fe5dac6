"""The bootstrap world: the outcome probabilities that model-based replicates draw events from.

The model-based (parametric) bootstrap draws each replicate's events among the observed cases
from estimated outcome probabilities and re-runs the whole estimator on them, so each interval
carries the spread of the estimator *as it behaves in that world*. Drawing from the estimate
itself is the usual choice (Laird and Louis 1987), but it hides the estimator's main error
source where cells are large: the selection of the covariate-by-level terms of the shrinkage
target (:mod:`policy.estimation.target`). When the data set at hand happened not to keep a term
the truth has, the estimate has no such term, the world drawn from it has none either, the
replicates hardly ever keep it, and every replicate repeats the point estimate's bias: the
interval is centred on the wrong place and as narrow as if the selection had been right
(measured: a paired cost difference on a process whose harsher levels' effect varies with prior
record covered 0.765 of 200 data sets; docs/method.md).

The world built here is *liberal*: the same estimator, with every covariate-by-level term in the
target, fitted jointly with the ridge that keeps thin categories near the common ratio
(``level_terms="all"``). Where a term is real, the world has it, and the replicates, which
re-do the estimator's own selection, keep it in some replicates and miss it in others, as the
estimator would on new data; the spread of the replicate estimates then reaches from the
estimate with the term to the estimate without it, and the interval allows for the selection.
Where no term is real, the liberal world differs from the estimate by the ridge-shrunk noise of
the unneeded terms, which the estimator's shrinkage mostly smooths away again. This is the
bootstrap of a whole model-selection procedure from a world at least as rich as the selected
model (Efron 2014, section 2, who bootstraps the selection rule itself; the liberal world is our
choice so that the selection can err in both directions in the replicates).

References
----------
Laird, N. M. and Louis, T. A. (1987). Empirical Bayes confidence intervals based on bootstrap
samples. JASA 82(399), 739-750.
Efron, B. (2014). Estimation and accuracy after model selection. JASA 109(507), 991-1007.
"""

from __future__ import annotations

import numpy as np

from policy.inputs.cells import CellTable

__all__ = ["liberal_estimator", "world_probabilities", "outcome_world"]

#: the bootstrap's choices of where replicate outcomes come from (``[uncertainty] outcomes``)
MODEL, CASES = "model", "cases"


def liberal_estimator(estimator):
    """A copy of a :class:`~policy.estimation.strata.RiskLevelEstimator` whose target keeps every
    covariate-by-level term (no selection), everything else unchanged."""
    from policy.estimation.strata import RiskLevelEstimator

    return RiskLevelEstimator(estimator.prior_strength, estimator.target_covariates, estimator.structural_zeros,
                              "all", estimator.translation_limit)


def world_probabilities(estimator, cells: CellTable) -> np.ndarray:
    """Outcome probabilities (n_cells, J, L) of the liberal bootstrap world for these cells.

    The estimator's own steps (pooled counts, beta-binomial shrinkage, monotone projection) with
    every covariate-by-level term in the target. Cells and levels are those of ``cells``; a level
    a cell never observed takes the target's rate, as in the estimate.
    """
    events = cells.events.sum(axis=1)
    observed = cells.observed.sum(axis=1)
    liberal = liberal_estimator(estimator)
    return liberal.estimate_p(events, observed, liberal.design(cells.layout, events.shape[-1]))[0]


def outcome_world(estimator, cells: CellTable, outcomes: str) -> np.ndarray | None:
    """What a bootstrap draws replicate events from: the liberal world for ``outcomes = 'model'``,
    nothing (each case keeps its outcomes) for ``'cases'``."""
    return world_probabilities(estimator, cells) if outcomes == MODEL else None
