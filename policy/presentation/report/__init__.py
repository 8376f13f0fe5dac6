r"""The committee report: one self-contained HTML file assembled from the stages' result objects.

The report computes nothing itself. :func:`build_report` runs the stages (the analysis with any
constrained rule, the comparison with its bootstrap intervals and the aid's effect, a sweep of
each outcome cost and the lenient map); :func:`render_report` turns their result objects, each
section by one builder of :data:`SECTION_BUILDERS`, into a :class:`Section`: a template under
``policy/presentation/templates/`` and the already-formatted figures it shows. The page embeds, as a JSON
data island, the per-cell outcome probabilities, weights and decision costs, so that its live
cost controls can re-run in plain JavaScript the same argmin as :func:`policy.decision.solve.optimal_rule`
(ties to the more lenient level within :data:`policy.decision.solve.TIE_TOLERANCE`) and the same sums as
:func:`policy.decision.evaluate.evaluate`.

Everything a scenario supplies (titles, labels, category values, cost sources) reaches the page
through jinja2's autoescaping or through the data island, whose JSON has ``<``, ``>``, ``&``,
U+2028 and U+2029 written as ``\u`` escapes, and the script writes it with ``textContent`` only.
The file requests nothing from any network: no external script, font, style sheet or image.

Modules: ``formatting`` (numbers, colours, tables and figures as the page shows them),
``model`` (the report's data classes), ``sections`` and ``sweep_section`` (each section's data
from the results), ``live`` (the data behind the live cost controls), ``page`` (rendering the
one-file page and building a report end to end).
"""

from __future__ import annotations

from policy.presentation.report.formatting import DIGITS, TableView, json_for_script
from policy.presentation.report.model import ComparedRule, ReportResults, Section
from policy.presentation.report.sweep_section import SECTION_BUILDERS, report_sections
from policy.presentation.report.live import live_data
from policy.presentation.report.page import Report, build_report, render_report

__all__ = [
    "ComparedRule",
    "Report",
    "ReportResults",
    "Section",
    "TableView",
    "build_report",
    "render_report",
    "report_sections",
    "live_data",
    "json_for_script",
    "SECTION_BUILDERS",
    "DIGITS",
]
