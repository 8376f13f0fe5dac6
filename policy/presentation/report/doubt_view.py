"""The report's section on rules that hold under doubt: which set they guard against and why, and
the robust and safe rules beside the ordinary optimum and the safe rule's baseline.

Formats the :class:`policy.decision.doubt.RulesUnderDoubt` the comparison solved and the
:class:`policy.decision.doubt.DoubtChoice` that picked its set; computes nothing.
"""

from __future__ import annotations

from policy.presentation.report.formatting import TableView, fmt_num, fmt_pct
from policy.presentation.report.model import ReportResults, Section

__all__ = ["doubt_section", "ladder_view", "standing_view"]

#: what each row of the standing table is, in a phrase
ROLE_NOTES = {
    "ordinary optimum": "best if unconfoundedness holds (point estimate)",
    "robust rule": "least worst-case expected cost over the set",
    "safe rule": "least worst-case regret against the baseline",
    "baseline": "what the safe rule must never do worse than",
}


def standing_view(found, level_labels, unit: str) -> TableView:
    """The standing table (:func:`policy.decision.doubt.standing_frame`) as the page shows it."""
    frame = found.standing
    levels = [c for c in frame.columns if c.startswith("share_")]
    regret = "regret_worst_case" in frame.columns
    baseline = found.safe.baseline.name if found.safe is not None else ""
    columns = (("rule", "what it is", "expected cost if unconfoundedness holds", "worst-case expected cost")
               + ((f"worst-case regret against {baseline} (at most 0: never worse)",) if regret else ())
               + tuple(f"share: {lab}" for lab in level_labels[:len(levels)]))
    rows = []
    for _, row in frame.iterrows():
        rows.append((row["rule"], ROLE_NOTES.get(row["role"], row["role"]), fmt_num(row["cost_point"]),
                     fmt_num(row["cost_worst_case"]))
                    + ((fmt_num(row["regret_worst_case"]),) if regret else ())
                    + tuple(fmt_pct(row[c]) for c in levels))
    caption = (f"The rules under {frame['set'].iloc[0]}: expected cost per 1,000 cases in {unit} under the point "
               "estimate and at the worst distribution the set allows, and each rule's decision shares")
    return TableView(caption, columns, tuple(rows), (False, False, True, True) + ((True,) if regret else ())
                     + (True,) * len(levels))


def ladder_view(ladder, level_labels, unit: str) -> TableView:
    """The ladder of sets (:class:`policy.decision.doubt_ladder.DoubtLadder`) as the page shows it."""
    frame = ladder.frame
    regret = "optimum_regret_worst_case" in frame.columns
    lenient = f"robust_share_{frame.columns[frame.columns.str.startswith('robust_share_')][0][len('robust_share_'):]}"
    columns = (("set", "contradicted by the randomized arm", f"{ladder.reference}: worst-case cost",
                "robust rule: worst-case cost", "robust rule: cost if unconfoundedness holds",
                f"robust rule: share {level_labels[0]}")
               + ((f"{ladder.reference}: worst-case regret against {ladder.baseline}",
                   f"safe rule: guaranteed saving against {ladder.baseline}") if regret else ()))
    rows = []
    for _, row in frame.iterrows():
        rows.append((row["set"], "yes" if row["contradicted"] else "no", fmt_num(row["optimum_cost_worst_case"]),
                     fmt_num(row["robust_cost_worst_case"]), fmt_num(row["robust_cost_point"]), fmt_pct(row[lenient]))
                    + ((fmt_num(row["optimum_regret_worst_case"]),
                        fmt_num(row["safe_guaranteed_saving"]) if row["safe_certified"] else "not certified")
                       if regret else ()))
    caption = (f"Where each conclusion stops holding: each set from slight confounding to the monotone bounds, per "
               f"1,000 cases in {unit} (doubt_ladder.csv)")
    return TableView(caption, columns, tuple(rows), (False, False) + (True,) * (len(columns) - 2))


def doubt_section(results: ReportResults) -> Section | None:
    """Which assumption the rule needs, what the randomized arm says of it, and the rules that
    hold when it fails; None when the comparison solved no such rules."""
    cmp = results.comparison
    found = getattr(cmp, "under_doubt", None) if cmp is not None else None
    if found is None:
        return None
    choice = results.doubt_choice
    check = getattr(results.analysis, "arm_check", None)
    robust, safe = found.robust, found.safe
    lines = [line.strip() for line in found.summary().splitlines() if line.strip()]
    return Section(
        key="under-doubt",
        title="Rules that hold if unconfoundedness fails",
        template="sections/doubt.html.j2",
        context={
            "verdict": check.headline() if check is not None else "",
            "rejects": bool(check is not None and check.rejects),
            "reason": choice.reason if choice is not None else "",
            "contradicted": bool(choice is not None and choice.contradicted),
            "set_label": robust.bounds.label,
            "standing": standing_view(found, cmp.risk_levels.level_labels, cmp.costs.unit),
            "ladder": (ladder_view(cmp.doubt_ladder, cmp.risk_levels.level_labels, cmp.costs.unit)
                       if getattr(cmp, "doubt_ladder", None) is not None else None),
            "ladder_lines": cmp.doubt_ladder.lines() if getattr(cmp, "doubt_ladder", None) is not None else [],
            "lines": lines,
            "certified": None if safe is None else safe.certified,
            "set_assumptions": list(robust.bounds.assumptions),
            "notes": list(robust.notes) + ([] if safe is None else list(safe.notes)),
        },
        assumptions=tuple(robust.bounds.assumptions),
    )
