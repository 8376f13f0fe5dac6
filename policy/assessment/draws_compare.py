"""Comparing rules on a risk-level table: no cases behind it, intervals from its draws.

A risk-level table estimated elsewhere holds risk-level probabilities, optionally in draws
(:mod:`policy.estimation.draws`: posterior draws or replicates of the user's own estimator).
Here each draw plays the part of a bootstrap replicate: the rules chosen on the point estimate
(the optimum, the constrained optimum) and the committee's candidate rules are held fixed and
scored in every draw by :func:`policy.assessment.scoring.score_rules` under the table's fixed
cell weights; intervals are percentiles over the draws and paired differences are taken draw by
draw, exactly as for the tool's own replicates (:mod:`policy.assessment.paired`). How often each
rule cell's optimal level is chosen again is counted over the draws.

What courts did and the aid's recommendation are scored when the table carries them (optional
columns, :mod:`policy.decision.table_rules`), held fixed in every draw. What the table cannot
give is said, not guessed: the missing columns and the aid's effect by risk level (it needs the
cases) are listed in a note. Without draws the figures are point figures, with no interval.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from policy.assessment.scoring import score_rules
from policy.assessment.stability import resolved_figures
from policy.assessment.uncertainty import BootstrapResult, validate_settings
from policy.decision.costs import Costs, costs_from_scenario
from policy.decision.evaluate import evaluate, group_matrix
from policy.decision.solve import argmin_lenient, optimal_rule
from policy.errors import InputError
from policy.estimation.strata import risk_level_distribution

__all__ = ["DrawsResult", "score_draws", "compare_on_table"]

#: draws scored at once (bounds memory: a chunk holds chunk x cells x J x L outcome probabilities)
DRAW_CHUNK = 25


@dataclass(frozen=True)
class DrawsResult(BootstrapResult):
    """Point figures and their values in each draw of a risk-level table (same layout as a
    bootstrap result, so every comparison table is built the same way)."""

    @property
    def interval_label(self) -> str:
        return (f"{self.level:.0%} percentile interval over {self.n_replicates} draws" if self.n_replicates
                else "no interval (the risk-level table has no draws)")


def _figures(p: np.ndarray, w: np.ndarray, deltas, costs: Costs, onehot, attributes, rule_index, n_rule_cells) -> dict:
    b = p.shape[0]
    wb = np.broadcast_to(w, (b,) + w.shape)
    out = score_rules(deltas, p, wb, costs, onehot, attributes)
    del out["at_least"]
    per_case = costs.expected(p)
    member = np.eye(n_rule_cells)[rule_index]
    levels = argmin_lenient(member.T @ (wb[..., None] * per_case))
    best = np.eye(p.shape[-1])[levels][:, rule_index]
    out.update(resolved_figures(levels, [], [], per_case, wb, best))
    q = np.clip(risk_level_distribution(p), 0.0, 1.0)
    gw = wb @ onehot
    with np.errstate(invalid="ignore", divide="ignore"):
        out["risk_level_share"] = np.einsum("xg,bx,bxjr->bgjr", onehot, wb, q, optimize=True) / gw[:, :, None, None]
    return out


def score_draws(rules, point, p_draws: np.ndarray | None, costs: Costs, level: float = 0.95, seed: int = 0) -> DrawsResult:
    """Score fixed rules on the point risk levels and in every draw.

    Parameters
    ----------
    rules : sequence of Rule
        The first is the reference (regret and agreement are measured against it).
    point : RiskLevels
    p_draws : ndarray of shape (n_draws, n_cells, J, L), or None
        Outcome probabilities in every draw, cells in ``point``'s order (None: point figures only).
    costs : Costs
    level : float
        Coverage of the percentile intervals.
    seed : int
        Recorded in the outputs (draws need no random numbers).
    """
    onehot, labels = group_matrix(point.layout)
    attrs = list(dict.fromkeys(a for a, _ in labels if a != "all"))
    attributes = [np.array([i for i, (a, _) in enumerate(labels) if a == attr]) for attr in attrs]
    rule_index, groups = point.layout.rule_index()
    deltas = [np.asarray(r.cell_delta, dtype=np.float64) for r in rules]
    w = np.asarray(point.weights, dtype=np.float64)
    args = (deltas, costs, onehot, attributes, rule_index, len(groups))
    pt = {k: np.asarray(v)[0] for k, v in _figures(point.p[None], w, *args).items()}
    B = 0 if p_draws is None else int(p_draws.shape[0])
    if B == 0:
        reps = {k: np.empty((0,) + v.shape) for k, v in pt.items()}
    else:
        parts = [_figures(np.asarray(p_draws[i:i + DRAW_CHUNK], dtype=np.float64), w, *args) for i in range(0, B, DRAW_CHUNK)]
        reps = {k: np.concatenate([part[k] for part in parts], axis=0) for k in pt}
    return DrawsResult(pt, reps, B, seed, "draws", level, False, "draws")


def _from_frame(table, scenario):
    """The draws (or None), the point risk levels and the table's rules of a DataFrame."""
    from policy.decision.table_rules import rules_from_table_frame
    from policy.estimation.from_scenario import risk_level_draws_from_frame, risk_levels_from_frame

    file = table.attrs.get("file", "risk-level table (DataFrame)")
    if "draw" in table.columns:
        draws = risk_level_draws_from_frame(table, scenario, file)
        rl = draws.point
        labels = table["draw"].astype(str).str.strip().to_numpy()
        first = np.flatnonzero(labels == labels[0])
        rows = table.iloc[first].reset_index(drop=True)
    else:
        draws, rows, first = None, table.reset_index(drop=True), np.arange(len(table))
        rl = risk_levels_from_frame(rows, scenario, file)
    return draws, rl, rules_from_table_frame(rows, scenario, rl, file, first + 1)


def compare_on_table(scenario, interval: float | None = None, seed: int | None = None, constraints: bool = True,
                     outcome_costs: Mapping[str, float] | None = None, decision_costs: Mapping[str, float] | None = None,
                     rules=(), table=None) -> tuple:
    """Compare rules on a scenario whose data are a risk-level table (with or without draws).

    Scores the optimum, the constrained optimum (with ``[[constraints]]``), the candidate rules
    and any further ``rules``, each chosen once on the point estimate and held fixed in every
    draw. Returns what :class:`policy.assessment.compare.Comparison` is built from (called by
    :func:`policy.assessment.compare.compare`): the risk levels, costs, rules, evaluations,
    the :class:`DrawsResult` and the notes.

    ``table`` (a pandas DataFrame in the layout of the scenario's risk-level table, with or without
    a ``draw`` column and the optional rule columns) replaces the file the scenario names.
    """
    from policy.decision.candidates import candidate_rules
    from policy.decision.table_rules import table_rules
    from policy.estimation.from_scenario import load_risk_level_draws, load_risk_level_table
    from policy.inputs.scenario import as_scenario

    scenario = as_scenario(scenario)
    if scenario.data.kind != "risk_level_table":
        raise InputError(f"{scenario.file}: compare_on_table needs a scenario whose [data] is a risk_level_table.")
    base = scenario.sections.get("uncertainty")
    level = (base.interval if base is not None else 0.95) if interval is None else interval
    validate_settings(1, level, "poisson", "compare:")
    if table is None:
        draws = load_risk_level_draws(scenario)
        rl = draws.point if draws is not None else load_risk_level_table(scenario)
        from_table = None
    else:
        draws, rl, from_table = _from_frame(table, scenario)
    costs = costs_from_scenario(scenario, rl, outcome_costs, decision_costs)
    optimum = optimal_rule(rl, costs)
    solved = []
    if constraints:
        from policy.decision.constrained import ConstrainedProblem
        from policy.decision.constraints import scenario_specs

        specs = scenario_specs(scenario)
        if specs:
            solved.append(ConstrainedProblem(rl, costs, specs, settings=scenario.sections.get("linear_program")).solve().rule)
    from_table = table_rules(scenario, rl) if from_table is None else from_table
    all_rules = ([optimum] + solved + ([from_table.aid] if from_table.aid is not None else [])
                 + candidate_rules(scenario, rl.layout, rl.weights) + list(rules) + from_table.observed)
    names = [r.name for r in all_rules]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"{scenario.file}: two compared rules are both called {dup[0]!r}; give candidates distinct names.")
    result = score_draws(all_rules, rl, None if draws is None else draws.p, costs, level,
                         scenario.seed if seed is None else seed)
    evaluations = [evaluate(r, rl, costs, reference=optimum) for r in all_rules]
    notes = [f"{r.name}: {r.note}" for r in all_rules if r.note]
    if draws is None:
        notes.append("the risk-level table has no draws: point figures only, no intervals (add a 'draw' column with "
                     "posterior draws or replicates of your estimator to get them)")
    else:
        notes.append(f"intervals are percentiles over the table's {draws.n_draws} draws (each draw plays the part of a "
                     f"bootstrap replicate); point figures use the {draws.point_source}; the rules chosen on the point "
                     "estimate are held fixed and scored in every draw, differences are paired draw by draw")
        if solved:
            notes.append("the constrained optimum is solved once on the point estimate and held fixed across draws "
                         "(its stability is not re-counted)")
    if from_table.observed:
        notes.append("what courts did is taken from the table's decision shares and held fixed in every draw: its "
                     "intervals carry the uncertainty of the risk levels only, not that of the decision shares")
    missing = from_table.missing + ["the aid's effect on decisions by risk level (it needs the cases)"]
    notes.append("not scored (missing from a risk-level table): " + "; ".join(missing))
    return rl, costs, all_rules, evaluations, result, tuple(notes)
