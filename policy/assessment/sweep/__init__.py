"""Cost-ratio sweeps: where each decision level, and lenient release above all, stays optimal.

Costs are value judgments, so the tool shows how the optimal rule changes as one or two of
them vary (method notes, section 7).

**The ratio.** A swept outcome kind j gets one cost c_j for every case, read on the axis as a
ratio to a reference decision cost: r_j = c_j / c_ref, where c_ref is the case-weighted mean cost
of imposing the reference level (by default the harshest) over all cells,
c_ref = sum_x w(x) c_dec(ref, x) / sum_x w(x). A decision cost that varies by cell (a bond
whose cost depends on the expected days held) therefore keeps its variation; the axis is the
outcome's cost in units of the average harshest-level cost, and the tables also give c_j in
the scenario's own unit. Every cost that is not swept stays at the scenario's value.

**One ratio, exact.** The total expected cost of decision d in rule cell g,
T_g(d; r) = sum_{x in g} w(x) C(d, x) = A_g(d) + r B_g(d), is a line in r with
A_g(d) = sum_x w (c_dec(d, x) + sum_{k != j} c_k p_kd(x)) and B_g(d) = c_ref sum_x w p_jd(x).
The optimal level is the lower envelope of the L lines; it is piecewise constant with at most
L - 1 breakpoints, each the crossing r = (A_g(a) - A_g(b)) / (B_g(b) - B_g(a)) of the two lines
optimal on either side. Moving right along r the active line's slope strictly decreases;
since p_jd is non-increasing in d, the optimal level never becomes more lenient as r grows.
At a breakpoint the tied levels include the one on the left, the more lenient, which the rule
takes. The share of cases at each level is a step function whose knots are the union of the
breakpoints; the optimal total cost is concave and piecewise linear with the same knots, and a
fixed compared rule's total cost is one line, so its regret is exactly piecewise linear.

**Two ratios, exact.** Leniency (level 0) is optimal in rule cell g iff, for every d >= 1,
Delta_g(d; r1, r2) = T_g(0) - T_g(d) <= 0 (ties go to the lenient level): an intersection of
L - 1 half-planes, a convex polygon once clipped to the displayed box. The share of cases for
which leniency is optimal is exact at any point; on a display grid each row is computed from
the exact interval of r1 in which each cell stays lenient.

**Robust lenient region.** With an interval [lower, upper] for every p_jd(x)
(:mod:`policy.estimation.bounds`: the monotone-response bounds or the sensitivity model with parameter
Gamma), leniency is optimal for every consistent distribution iff, for every d >= 1,
sum_x w [c_dec(0, x) - c_dec(d, x)] + sum_k c_k sum_x w (upper_k0(x) - lower_kd(x)) <= 0,
since every c_k >= 0. This is still linear in the swept costs, so the robust region is again
an interval of r (one ratio) or a convex polygon (two ratios). Wider intervals only raise the
left side, so the regions are nested: Gamma = 1 (the point estimate) contains every larger Gamma.

References
----------
Elkan, C. (2001). The foundations of cost-sensitive learning. IJCAI. (With one outcome and
two levels the breakpoint is the cost-sensitive threshold.)
Manski, C. F. (1997). Monotone treatment response. Econometrica 65(6), 1311-1334.

Modules: ``axes`` (the swept ratio and its cost lines), ``envelope`` (exact lower envelopes
and step functions), ``regions`` (lenient intervals and polygons), ``assumptions`` (the robust
assumptions' lines), ``one_ratio`` and ``two_ratio`` (the two kinds of result), ``bands``
(bootstrap bands), ``constrained`` (constrained optima re-solved along a ratio) and
``scenario_sweep`` (one scenario end to end). Figures are drawn by ``policy.presentation``.
"""

from __future__ import annotations

from policy.assessment.sweep.axes import DEFAULT_GAMMAS, RatioAxis, cost_lines, default_range, ratio_axis
from policy.assessment.sweep.envelope import Envelope, PiecewiseLinear, StepFunction, lower_envelope
from policy.assessment.sweep.regions import clip_polygons, lenient_intervals, lenient_margins
from policy.assessment.sweep.assumptions import AssumptionInfo, assumption_lines
from policy.assessment.sweep.one_ratio import OneRatioSweep, sweep_one
from policy.assessment.sweep.two_ratio import LenientMap, lenient_map
from policy.assessment.sweep.bands import LenientReplicates, SweepBands, lenient_replicates, level_thresholds, sweep_bands
from policy.assessment.sweep.scenario_sweep import SweepResult, sweep_scenario

__all__ = [
    "RatioAxis",
    "ratio_axis",
    "cost_lines",
    "Envelope",
    "lower_envelope",
    "StepFunction",
    "PiecewiseLinear",
    "lenient_margins",
    "lenient_intervals",
    "clip_polygons",
    "OneRatioSweep",
    "LenientMap",
    "sweep_one",
    "lenient_map",
    "SweepResult",
    "sweep_scenario",
    "AssumptionInfo",
    "assumption_lines",
    "default_range",
    "DEFAULT_GAMMAS",
    "level_thresholds",
    "lenient_replicates",
    "LenientReplicates",
    "SweepBands",
    "sweep_bands",
]
