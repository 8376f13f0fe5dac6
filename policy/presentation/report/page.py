"""Rendering the one-file page, and building a report for a scenario end to end."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping, Sequence

from jinja2 import Environment, PackageLoader, StrictUndefined
from markupsafe import Markup

from policy.cautions import CAUTIONS
from policy.decision.evaluate import evaluate
from policy.running.pipeline import Analysis, analyze, as_scenario
from policy.decision.rules import Rule
from policy.inputs.scenario import Scenario
from policy.presentation.report.formatting import fmt_num, fmt_pct, input_value, json_for_script
from policy.presentation.report.model import ComparedRule, ReportResults, Section, held_rule
from policy.presentation.report.sweep_section import report_sections
from policy.presentation.report.live import live_data


# Rendering
# ----------------------------------------------------------------------------------------------
def _environment() -> Environment:
    env = Environment(loader=PackageLoader("policy.presentation", "templates"), autoescape=True, undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)
    env.filters["pct"] = fmt_pct
    env.filters["num"] = fmt_num
    env.globals["zip"] = zip
    env.filters["input_value"] = input_value
    return env


def _asset(env: Environment, name: str, closing: str) -> Markup:
    """A style sheet or script of the package, inlined verbatim; it must not close its element."""
    text = env.loader.get_source(env, name)[0]
    if closing in text.lower():
        raise RuntimeError(f"policy/presentation/templates/{name} contains {closing!r}, which would end its element early.")
    return Markup(text)


@dataclass(frozen=True)
class Report:
    """The committee report: the HTML page and the tidy tables written beside it.

    Attributes
    ----------
    scenario : Scenario
    html : str
        The whole self-contained page.
    sections : list of Section
    files : dict
        Tidy tables by file name (the stages' own output files).
    results : ReportResults
        The result objects the page was assembled from.
    """

    scenario: Scenario
    html: str
    sections: tuple[Section, ...]
    files: Mapping[str, Any]
    results: ReportResults | None = None
    #: files written beside the report that are not its tables (the cache of its costly results)
    cache: Mapping[str, Any] = field(default_factory=dict)
    #: whether the comparison and the sweeps came from that cache
    reused: bool = False

    def output_files(self) -> dict[str, Any]:
        """``report.html``, the tables beside it and the cache, for :func:`policy.outputs.write_outputs`."""
        return {"report.html": self.html, **self.files, **self.cache}

    def __str__(self) -> str:
        return (f"Report on {self.scenario.title}: {len(self.sections)} sections "
                f"({', '.join(s.title for s in self.sections)}), {len(self.html):,} characters of HTML, "
                f"{len(self.files)} tables beside it.")

    def _repr_html_(self) -> str:
        from html import escape

        return f'<iframe srcdoc="{escape(self.html, quote=True)}" style="width:100%;height:40em;border:1px solid #999"></iframe>'


def render_report(results: ReportResults | Analysis) -> Report:
    """Assemble the report from result objects; compute nothing.

    Parameters
    ----------
    results : ReportResults or Analysis
        The analysis, and the results of later stages where available.
    """
    if isinstance(results, Analysis):
        results = ReportResults(results, (held_rule(results),))
    env = _environment()
    sections = report_sections(results)
    sc = results.scenario
    figure_assumptions = [(s.title, s.key, list(s.assumptions)) for s in sections if s.assumptions]
    files: dict[str, Any] = {}
    for s in sections:
        files.update(s.files)
    summary = next((s for s in sections if s.key == "summary"), None)
    page = env.get_template("report.html.j2").render(
        title=sc.title,
        cautions=list(CAUTIONS),
        arm_check=getattr(results.analysis, "arm_check", None),
        arm_costs=getattr(results.comparison, "arm_costs", None),
        under_doubt=any(s.key == "under-doubt" for s in sections),
        summary=summary,
        sections=[s for s in sections if s is not summary],
        figure_assumptions=figure_assumptions,
        files=sorted(files),
        data=json_for_script({"live": live_data(results)}),
        style=_asset(env, "report.css", "</style"),
        script=_asset(env, "report.js", "</script"),
    )
    return Report(sc, page, tuple(sections), files, results)


#: what each kind of compared rule is, in the live table
KIND_NOTES = {
    "optimal": "the cost-minimizing rule at the scenario's own costs, held fixed while the costs move",
    "aid": "what the aid recommended",
    "candidate": "a candidate rule written in the scenario",
    "observed": "what courts did (decisions observed in the data)",
    "constrained": "the constrained optimal rule at the scenario's own costs, held fixed while the costs move",
}


def compared_rules(comparison) -> list[ComparedRule]:
    """The rules of a comparison, each with its point evaluation, as rules compared live."""
    out = []
    for rule, evaluation in zip(comparison.rules, comparison.evaluations):
        note = KIND_NOTES["optimal"] if rule.kind == "optimal" else (rule.note or KIND_NOTES.get(rule.kind, rule.kind))
        out.append(ComparedRule(rule, evaluation, note))
    return out


def build_report(scenario: Scenario | str | Path, outcome_costs: Mapping[str, float] | None = None,
                 decision_costs: Mapping[str, float] | None = None, replicates: int | None = None,
                 progress: bool = False, cache_folder: str | Path | None = None, robust_gamma: float | None = None,
                 robust_bounds: bool = False, safe_against: str | None = None, under_doubt: bool = True) -> Report:
    """Run the stages for a scenario and assemble their results into the committee report.

    Parameters
    ----------
    scenario : Scenario or path
    outcome_costs, decision_costs : mapping, optional
        What-if overrides of the scenario's costs, as for :func:`policy.running.pipeline.analyze`;
        the page's controls start from these costs.
    replicates : int, optional
        Bootstrap replicates of the comparison and of the sweeps' bands (default: the scenario's
        ``[uncertainty]``).
    progress : bool
        Show the bootstrap's progress bar.
    cache_folder : path, optional
        The report's output folder: reuse the comparison and the sweeps cached there for the same
        scenario file, data, costs and replicates (:mod:`policy.presentation.report.cache`), and
        return them in :attr:`Report.cache` to be written there.
    robust_gamma, robust_bounds, safe_against : optional
        The set (a Gamma value or the monotone bounds) and the baseline of the rules that hold
        under doubt; what is not given is chosen from the arm check
        (:func:`policy.decision.doubt.chosen_doubt`).
    under_doubt : bool
        Solve the robust and safe rules and show them (default true; they need counts, so a
        risk-level table has none).

    Returns
    -------
    Report
    """
    from policy.assessment.compare import compare
    from policy.presentation.report.cache import cache_bytes, cache_key, cache_name, load_cached

    from policy.decision.doubt import chosen_doubt

    scenario = as_scenario(scenario)
    analysis = analyze(scenario, outcome_costs, decision_costs)
    asked = (robust_gamma, bool(robust_bounds), safe_against) if under_doubt else None
    key = cache_key(scenario, outcome_costs, decision_costs, replicates, asked) if cache_folder is not None else None
    choice = None
    if under_doubt and analysis.cells is not None:
        choice = chosen_doubt(analysis.arm_check, robust_gamma, robust_bounds, safe_against,
                              has_arm=analysis.cells.has_arm)
    cached = load_cached(cache_folder, key) if key is not None else None
    comparison, why = None, ""
    if cached is not None:
        comparison = cached["comparison"]
    else:  # a risk-level table is compared too: intervals over its draws, or point figures without them
        comparison = compare(scenario, replicates=replicates, outcome_costs=outcome_costs,
                             decision_costs=decision_costs, progress=progress,
                             doubt=choice.settings if choice is not None else None, arm_checked=analysis.arm_check)
    compared = compared_rules(comparison)
    if analysis.constrained is not None and not any(c.rule.kind == "constrained" for c in compared):
        compared.append(held_constrained_rule(analysis))  # the comparison left it out: compared live all the same
    if cached is not None:
        sweeps, lenient_map = cached["sweeps"], cached["lenient_map"]
    else:
        sweeps, lenient_map = cost_sweeps(scenario, [c.rule for c in compared], outcome_costs, decision_costs,
                                          replicates, progress, analysis.arm_check)
    points = tuple(res.constrained for res in sweeps if res.constrained is not None)
    report = render_report(ReportResults(analysis, tuple(compared), points, comparison, why, tuple(sweeps), lenient_map,
                                         dict(decision_costs or {}), choice))
    if key is None:
        return report
    payload = {"comparison": comparison, "sweeps": list(sweeps), "lenient_map": lenient_map}
    return replace(report, cache={cache_name(key): cache_bytes(payload)}, reused=cached is not None)


def cost_sweeps(scenario: Scenario, rules: Sequence[Rule], outcome_costs: Mapping[str, float] | None = None,
                decision_costs: Mapping[str, float] | None = None, replicates: int | None = None,
                progress: bool = False, arm_checked: Any = None) -> tuple[list, Any]:
    """One exact sweep per outcome kind's cost ratio, with the compared rules' regret, bootstrap
    bands where the data hold counts and, with constraints, the constrained optimum re-solved
    along it; and the lenient map of the first two outcome kinds (:func:`policy.assessment.sweep.sweep_scenario`).
    ``arm_checked``: the randomized arm's check of the same data, run once for every sweep."""
    from policy.assessment.sweep import sweep_scenario

    keys = list(scenario.outcome_keys)
    # a risk-level table's bands come from its draws, if it has any (replicates 0: no bands)
    bands = replicates if scenario.data.kind != "risk_level_table" else (0 if replicates == 0 else None)
    sweeps = [sweep_scenario(scenario, [k], rules=list(rules), outcome_costs=outcome_costs,
                             decision_costs=decision_costs, replicates=bands, progress=progress,
                             arm_checked=arm_checked) for k in keys]
    lenient_map = (sweep_scenario(scenario, keys[:2], outcome_costs=outcome_costs, decision_costs=decision_costs,
                                  arm_checked=arm_checked)
                   if len(keys) >= 2 else None)
    return sweeps, lenient_map


def held_constrained_rule(analysis: Analysis) -> ComparedRule:
    """The constrained optimal rule at the scenario's costs, compared while the costs move."""
    con = analysis.constrained
    return ComparedRule(con.rule, evaluate(con.rule, analysis.risk_levels, analysis.costs, reference=analysis.rule),
                        KIND_NOTES["constrained"])
