"""The report's section on rules that hold under doubt: which set they guard against and why, and
the robust and safe rules beside the ordinary optimum and the safe rule's baseline.

Formats the :class:`policy.decision.doubt.RulesUnderDoubt` the comparison solved and the
:class:`policy.decision.doubt.DoubtChoice` that picked its set; computes nothing.
"""

from __future__ import annotations

from policy.presentation.report.formatting import TableView, fmt_num, fmt_pct
from policy.presentation.report.model import ReportResults, Section

__all__ = ["doubt_section", "standing_view"]

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
    caption = (f"The rules under {frame['set'].iloc[0]}: expected cost per 1,000 cases ({unit}) under the point "
               "estimate and at the worst distribution the set allows, and each rule's decision shares")
    return TableView(caption, columns, tuple(rows), (False, False, True, True) + ((True,) if regret else ())
                     + (True,) * len(levels))


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
            "lines": lines,
            "certified": None if safe is None else safe.certified,
            "set_assumptions": list(robust.bounds.assumptions),
            "notes": list(robust.notes) + ([] if safe is None else list(safe.notes)),
        },
        assumptions=tuple(robust.bounds.assumptions),
    )
