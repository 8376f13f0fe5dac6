"""Constrained optimal rules: one linear program over the decision probabilities of the rule cells.

Variables delta(d | g) >= 0 with sum_d delta(d | g) = 1 for every rule cell g. Objective: the
expected cost per case,

    sum_g sum_d delta(d | g) sum_{x in g} w(x) C(d, x) / sum_x w(x),
    C(d, x) = s_d c_dec(d, x) + sum_j c_j p_jd(x),

which is linear in the cost weights (outcome costs c_j and decision-cost scales s_d), so they are
scalar parameters multiplying constant vectors. Every constraint (:mod:`policy.decision.constraints`) is a
block of rows ``lower <= M delta <= upper`` whose bound is one scalar parameter (method notes,
section 5).

Build once, re-solve fast
-------------------------
:class:`ConstrainedProblem` assembles the rows and the objective once, declares the problem in
cvxpy with the cost weights and the bounds as ``cp.Parameter`` (checked to be DPP), and by
default solves the same data with HiGHS called directly through ``highspy``: the first solve by
its dual simplex started from the basis of the unconstrained optimum (each rule cell at its
cheapest level; dual feasible, so only the constraint rows that rule breaks need pivots), each
later solve by the dual simplex warm-started from the last basis. Both end at a vertex, so as
few rule cells are split as the constraints allow. A
change of cost weights or bounds only changes the costs or the row bounds of the loaded model;
risk levels of the same cells with other outcome probabilities (a bootstrap replicate) reload
the model and start from the last basis. Any other LP solver cvxpy offers can be chosen
(``[linear_program] solver``); it is then called through the cvxpy problem.

Every solve checks the solver's status and the returned point (each row within 1e-6), never
reports a non-optimal point as optimal, and, when the constraints cannot all hold, solves an
elastic version (one non-negative slack per constraint, minimizing total violation) to name the
constraints that conflict and how far each would have to loosen
(:class:`policy.errors.InfeasibleError` with a ``conflicts`` table).

References
----------
Corbett-Davies, S., Pierson, E., Feller, A., Goel, S. and Huq, A. (2017). Algorithmic decision
making and the cost of fairness. KDD '17. (Optimal rules under fairness constraints.)
Principal Fairness for Human and Algorithmic Decision-Making. Statistical Science (2023).
Huangfu, Q. and Hall, J. A. J. (2018). Parallelizing the dual revised simplex method.
Mathematical Programming Computation 10, 119-142. (HiGHS.)
Chinneck, J. W. (2008). Feasibility and Infeasibility in Optimization. Springer. (Elastic
programs for explaining infeasibility.)

Modules: ``settings`` (the ``[linear_program]`` section), ``program`` (the LP's rows and
columns built once), ``highs`` (the HiGHS driver: warm starts, most-lenient optimum), ``cumulative`` (the same LP
in cumulative variables P(D >= t | g), loaded from 1,000 rule cells on), ``cvxpy_route``
(the same LP through cvxpy), ``problem`` (:class:`ConstrainedProblem`: re-solves and prices),
``elastic`` (which constraints conflict when infeasible), ``result`` (:class:`ConstrainedRule`).
"""

from __future__ import annotations

from policy.decision.constrained.settings import FEASIBILITY_TOLERANCE, LPSettings, lp_settings_from_table
from policy.decision.constrained.program import LPSolution
from policy.decision.constrained.highs import load_lp, new_highs
from policy.decision.constrained.problem import ConstrainedProblem, solve_constrained
from policy.decision.constrained.result import ConstrainedRule

__all__ = [
    "LPSettings",
    "LPSolution",
    "ConstrainedProblem",
    "ConstrainedRule",
    "solve_constrained",
    "lp_settings_from_table",
    "load_lp",
    "new_highs",
    "FEASIBILITY_TOLERANCE",
]
