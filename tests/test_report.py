"""The committee report without a browser: it builds for every scenario, it is self-contained,
and every label from a scenario reaches the page as text, never as markup."""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from policy.demo.quarrow import simulate_cases
from policy.running.pipeline import analyze
from policy.presentation.report import build_report, json_for_script, render_report

from .conftest import ROOT, run_cli, write_scenario

SCENARIO_FILES = sorted((ROOT / "scenarios").glob("*.toml"))
#: bootstrap replicates of the reports built here (the comparison's own tests check its intervals)
REPLICATES = 20

#: labels that would run code or add elements if a page pasted them in as markup
HOSTILE = {
    "title": "Quarrow <script>alert('title')</script> & \u2028co\u2029 </script><!--",
    "level": "<img src=x onerror=alert('level')>",
    "outcome": "</script><zzz-hostile>new offense</zzz-hostile>",
    "category": "<script>alert('cell')</script>",
    "source": "<a href=\"https://example.invalid/\">a link</a> & \"quotes\"",
    "unit": "<b>USD</b>",
}


class PageParser(HTMLParser):
    """Collects tags, attributes, text and the contents of <script> and <style> elements."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.scripts: list[str] = []
        self.styles: list[str] = []
        self._in: str | None = None

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag in ("script", "style"):
            self._in = tag
            (self.scripts if tag == "script" else self.styles).append("")

    def handle_endtag(self, tag):
        if tag == self._in:
            self._in = None

    def handle_data(self, data):
        if self._in == "script":
            self.scripts[-1] += data
        elif self._in == "style":
            self.styles[-1] += data
        else:
            self.text.append(data)


def parse(html: str) -> PageParser:
    parser = PageParser()
    parser.feed(html)
    parser.close()
    return parser


def island(html: str) -> dict:
    """The JSON data island, read back as JSON.parse would."""
    match = re.search(r'<script type="application/json" id="report-data">(.*?)</script>', html, flags=re.S)
    assert match, "no data island"
    return json.loads(match.group(1))


def hostile_scenario(folder: Path) -> Path:
    """The small scenario with hostile labels everywhere a scenario can put text on the page."""
    frame, _ = simulate_cases(3_000, seed=5)
    frame["charge_class"] = frame["charge_class"].replace({"felony": HOSTILE["category"]})
    frame.to_csv(folder / "cases.csv", index=False)
    return write_scenario(folder, replace={
        'title = "small test scenario"': f'title = {json.dumps(HOSTILE["title"])}\n'
                                         f'description = {json.dumps(HOSTILE["source"])}',
        'label = "secured bond"': f'label = {json.dumps(HOSTILE["level"])}\ncost_source = {json.dumps(HOSTILE["source"])}',
        'label = "new offense"': f'label = {json.dumps(HOSTILE["outcome"])}',
        'unit = "USD"': f'unit = {json.dumps(HOSTILE["unit"])}',
    })


# ----------------------------------------------------------------------------------------------
@pytest.mark.parametrize("scenario", SCENARIO_FILES, ids=[p.stem for p in SCENARIO_FILES])
def test_report_builds_for_every_scenario(scenario, tmp_path, capsys):
    code, out, err = run_cli(["report", scenario, "--out", tmp_path, "--replicates", REPLICATES, "--no-progress"], capsys)
    assert code == 0, err
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    page = parse(html)
    text = " ".join(" ".join(page.text).split())
    # the cautions come before any figure: before the first table and before the controls
    first_caution = text.index("not an assessment of any individual")
    assert first_caution < text.index("What the data hold")
    # the cautions come first, then the controls beside the summary, then the summary's first table
    assert html.index('id="cautions"') < html.index('id="cost-controls"') < html.index("<table")
    assert "local law" in text and "discretion" in text
    assert "Assumptions behind these figures" in text
    # every cost source of the scenario is on the page
    analysis = analyze(scenario)
    for level in analysis.scenario.levels:
        if level.cost_source:
            assert " ".join(level.cost_source.split()) in text
    # the tables beside the report are those of the analysis, and nothing is left half-written
    for name in analysis.output_files():
        assert (tmp_path / name).is_file(), name
    assert not list(tmp_path.glob(".*.partial"))
    assert "report.html" in out


@pytest.mark.parametrize("scenario", SCENARIO_FILES, ids=[p.stem for p in SCENARIO_FILES])
def test_the_data_island_holds_the_engines_arrays(scenario):
    analysis = analyze(scenario)
    report = render_report(analysis)
    live = island(report.html)["live"]
    rl, costs = analysis.risk_levels, analysis.costs
    n, J, L = rl.p.shape
    assert (live["n_cells"], live["n_outcomes"], live["n_levels"]) == (n, J, L)
    # the numbers are the engine's own doubles, not rounded copies
    np.testing.assert_array_equal(np.array(live["p"]).reshape(n, J, L), rl.p)
    np.testing.assert_array_equal(np.array(live["weights"]), rl.weights)
    np.testing.assert_array_equal(np.array(live["decision_base"]).reshape(n, L), costs.decision)
    np.testing.assert_array_equal(live["outcome_costs"], costs.outcome)
    np.testing.assert_array_equal(live["rule_index"], analysis.rule.index)
    np.testing.assert_array_equal(live["scenario_levels"], analysis.rule.level)
    assert len(live["rule_cells"]) == analysis.rule.n_rule_cells
    assert len(live["controls"]) == J + L


def test_page_is_self_contained(tmp_path):
    report = build_report(ROOT / "scenarios" / "demo.toml", replicates=REPLICATES)
    page = parse(report.html)
    names = {tag for tag, _ in page.tags}
    assert not names & {"link", "img", "iframe", "object", "embed", "base", "audio", "video", "source"}
    for tag, attrs in page.tags:
        assert "src" not in attrs, (tag, attrs)
        href = attrs.get("href", "#")
        # links go within the page, or to a table written beside it
        assert not href.strip() or href.startswith("#") or href in report.files, (tag, attrs)
        for value in attrs.values():
            assert "://" not in (value or ""), (tag, attrs)
    assert ":root" in page.styles[0]  # the report's own style sheet comes first
    # the figures are inline SVG, one per sweep figure and the map, and every id on the page is unique
    svgs = [attrs for tag, attrs in page.tags if tag == "svg" and attrs.get("role") == "img" and "aria-label" in attrs]
    outcomes = len(analyze(ROOT / "scenarios" / "demo.toml").scenario.outcomes)
    assert len([a for a in svgs if a.get("width") == "100%"]) == 2 * outcomes + 1
    ids = [attrs["id"] for _, attrs in page.tags if "id" in attrs]
    assert len(ids) == len(set(ids))
    for css in page.styles:
        assert "url(" not in css and "@import" not in css and "@font-face" not in css
    # two scripts: the data island and the inline program; the program loads nothing
    assert len(page.scripts) == 2
    program = page.scripts[1]
    for call in ("fetch(", "XMLHttpRequest", "import(", "WebSocket", "EventSource", "sendBeacon", ".innerHTML", "eval("):
        assert call not in program, call


def test_json_for_script_escapes_what_could_end_the_element():
    obj = {"a": HOSTILE["title"], "b": ["</script>", "<!--", "&amp;", "\u2028\u2029", "\u00e9"], "c": 1.5e-300}
    text = str(json_for_script(obj))
    for char in ("<", ">", "&", "\u2028", "\u2029"):
        assert char not in text
    # JSON.parse reads the escapes back as the original characters (json.loads follows the same
    # grammar: RFC 8259, section 7)
    assert json.loads(text) == obj
    with pytest.raises(ValueError):
        json_for_script({"x": float("nan")})


def test_hostile_labels_are_text_everywhere(tmp_path, capsys):
    scenario = hostile_scenario(tmp_path)
    code, _, err = run_cli(["report", scenario, "--out", tmp_path / "out", "--replicates", REPLICATES, "--no-progress"],
                           capsys)
    assert code == 0, err
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    page = parse(html)
    names = [tag for tag, _ in page.tags]
    # no element came from a label: two scripts (island and program), no image, no unknown tag
    assert names.count("script") == 2
    assert "img" not in names and "zzz-hostile" not in names
    files = {p.name for p in (tmp_path / "out").iterdir()}
    assert names.count("a") == sum(1 for _, attrs in page.tags
                                   if attrs.get("href", "").startswith("#") or attrs.get("href") in files)
    for _, attrs in page.tags:
        assert not any(key.startswith("on") for key in attrs), attrs
    # each label is on the page as written, as text
    text = "".join(page.text)
    for key in ("title", "level", "outcome", "category", "unit"):
        assert HOSTILE[key].replace("\u2028", "").replace("\u2029", "") in text.replace("\u2028", "").replace("\u2029", ""), key
    assert HOSTILE["source"] in text
    # the data island hides nothing that could close it, and reads back to the same labels
    raw = page.scripts[0]
    assert "<" not in raw and ">" not in raw and "\u2028" not in raw
    live = json.loads(raw)["live"]
    assert HOSTILE["level"] in live["level_labels"] and HOSTILE["outcome"] in live["outcome_labels"]
    assert any(HOSTILE["category"] in row for row in live["rule_cells"])


def test_report_starts_from_overridden_costs(tmp_path, capsys, small_case_table):
    scenario, _ = small_case_table
    code, _, err = run_cli(["report", scenario, "--out", tmp_path, "--replicates", REPLICATES, "--no-progress",
                            "--cost", "new_offense=20000",
                            "--decision-cost", "supervision=100"], capsys)
    assert code == 0, err
    live = island((tmp_path / "report.html").read_text(encoding="utf-8"))["live"]
    by_id = {c["id"]: c for c in live["controls"]}
    assert by_id["cost-outcome-1"]["value"] == 20000 and by_id["cost-level-1"]["value"] == 100
    rule = pd.read_csv(tmp_path / "rule.csv")
    expected = analyze(scenario, {"new_offense": 20000}, {"supervision": 100}).rule.to_frame()
    assert list(rule["level"]) == list(expected["level"])
    code, _, err = run_cli(["report", scenario, "--out", tmp_path / "bad", "--cost", "nope=1"], capsys)
    assert code == 2 and not (tmp_path / "bad").exists()


def test_controls_say_how_a_per_cell_cost_moves():
    report = render_report(analyze(ROOT / "scenarios" / "demo.toml"))
    live = island(report.html)["live"]
    bond = [c for c in live["controls"] if c["kind"] == "decision" and c["mode"] == "scale"]
    assert len(bond) == 1 and bond[0]["value"] == 1.0
    assert "a factor on each cell's own cost" in "".join(parse(report.html).text)
    for c in live["controls"]:
        assert c["min"] <= c["value"] <= c["max"] and c["step"] > 0



def test_report_reuses_its_cached_comparison_and_sweeps_until_an_input_changes(tmp_path, capsys):
    import shutil

    scenario = tmp_path / "demo.toml"
    shutil.copy(ROOT / "scenarios" / "demo.toml", scenario)
    out = tmp_path / "out"
    base = ["report", scenario, "--out", out, "--no-progress"]
    code, first, err = run_cli(base + ["--replicates", 5], capsys)
    assert code == 0, err
    assert "Computing the comparison with 5 bootstrap replicates" in first
    html = (out / "report.html").read_text(encoding="utf-8")
    assert len(list((out / ".policy-report-cache").iterdir())) == 1
    code, second, err = run_cli(base + ["--replicates", 5], capsys)
    assert code == 0, err
    assert "Reusing the comparison and sweeps" in second
    assert (out / "report.html").read_text(encoding="utf-8") == html
    # another cost, another replicate count or an edited scenario file: computed afresh
    for extra in (["--replicates", 5, "--cost", "new_offense=6000"], ["--replicates", 6]):
        code, text, err = run_cli(base + extra, capsys)
        assert code == 0, err
        assert "Computing the comparison" in text, extra
    scenario.write_text(scenario.read_text(encoding="utf-8").replace("seed = 20261202", "seed = 7"), encoding="utf-8")
    code, text, err = run_cli(base + ["--replicates", 5], capsys)
    assert code == 0, err
    assert "Computing the comparison" in text
    assert (out / "report.html").read_text(encoding="utf-8") != html


def test_rule_grid_lays_out_every_rule_cell_once():
    from policy.presentation.report import ReportResults
    from policy.presentation.report.summary import MAX_ACROSS, rule_grid

    for name in ("demo.toml", "demo_constrained.toml"):
        analysis = analyze(ROOT / "scenarios" / name)
        grid = rule_grid(ReportResults(analysis))
        rule = analysis.rule
        seen = [cell[0] for _, cells in grid["rows"] for cell in cells if cell is not None]
        assert sorted(seen) == list(range(rule.n_rule_cells)), name
        assert 1 <= len(grid["columns"]) <= MAX_ACROSS
        for _, cells in grid["rows"]:
            for cell in cells:
                if cell is not None:
                    g, d, label, _ = cell
                    assert d == int(rule.level[g]) and label == rule.level_labels[d]
        # headings are the scenario's labels, never raw column names with underscores
        assert "_" not in grid["row_title"] + grid["column_title"], (grid["row_title"], grid["column_title"])


def test_summary_gives_paired_intervals_shares_cheaper_and_stability_from_the_replicates():
    """The summary's paired differences, shares of replicates and stability, recomputed here from
    the comparison's raw replicates with numpy: percentile interval of the replicate-by-replicate
    difference (numpy.percentile, linear interpolation: the bootstrap percentile interval of Efron
    and Tibshirani 1993, section 13.3) and plain counts of replicates."""
    from policy.assessment.compare import compare
    from policy.presentation.report import ReportResults
    from policy.presentation.report.page import compared_rules
    from policy.presentation.report.summary import certainty_sentence, paired_with_recommended, stability

    analysis = analyze(ROOT / "scenarios" / "demo.toml")
    cmp = compare(analysis.scenario, replicates=12)
    results = ReportResults(analysis, tuple(compared_rules(cmp)), comparison=cmp)
    paired = paired_with_recommended(results)
    names = [r.name for r in cmp.rules]
    reps = 1000.0 * np.asarray(cmp.result.replicates["cost"], dtype=float)  # (B, R)
    point = 1000.0 * np.asarray(cmp.result.point["cost"], dtype=float)
    assert set(paired) == set(names[1:])
    for k, name in enumerate(names[1:], start=1):
        d, lo, hi, share = paired[name]
        diff = reps[:, k] - reps[:, 0]
        assert d == pytest.approx(point[k] - point[0])
        assert (lo, hi) == pytest.approx(tuple(np.percentile(diff, [2.5, 97.5])))
        assert share == pytest.approx(np.mean(reps[:, 0] < reps[:, k]))
    sentence = certainty_sentence(results)
    assert sentence.startswith("How sure: at the scenario's costs")
    for name in names[1:]:
        assert f"\u201c{name}\u201d ({paired[name][3]:.0%})" in sentence
        # named before "with the whole ... above zero" exactly when the interval lies above zero
        settled = sentence.split("with the whole")[0] if "with the whole" in sentence else ""
        assert (paired[name][1] > 0) == (f"\u201c{name}\u201d" in settled), (name, sentence)
    # each rule in exactly one of the three readings, by where its interval lies against zero
    from policy.presentation.report import summary as summary_module

    cases = {"a": (1.0, 0.5, 2.0, 0.9), "b": (0.1, -1.0, 1.0, 0.5), "c": (-2.0, -3.0, -1.0, 0.0)}
    from types import SimpleNamespace

    fake = SimpleNamespace(comparison=cmp, compared=[SimpleNamespace(rule=SimpleNamespace(kind="candidate", name=k))
                                                      for k in cases])
    original = summary_module.paired_with_recommended
    summary_module.paired_with_recommended = lambda results: cases
    try:
        text = certainty_sentence(fake)
    finally:
        summary_module.paired_with_recommended = original
    assert "costs less than \u201ca\u201d (90%), with the whole" in text
    assert "against \u201cb\u201d (50%), the interval includes zero" in text
    assert "\u201cc\u201d (0%) costs less than the recommended rule, with the whole interval below zero" in text
    # stability: the share of replicates whose re-solved rule picks each cell's level again
    again = (np.asarray(cmp.result.replicates["optimal_level"]) == analysis.rule.level[None, :]).mean(axis=0)
    view = stability(results)
    low = again < 0.8
    assert f"for {int((~low).sum())} of {analysis.rule.n_rule_cells} rule cells" in view["sentence"]
    assert [bool(n) for n in view["notes"]] == list(low)
    for g in np.flatnonzero(low):
        assert view["notes"][g] == f"picked again in {again[g]:.0%}"
    for line in view["lines"]:
        assert "_" not in line.split(":")[0]  # the scenario's column labels, not raw names
    # without replicates: no intervals, no stability, and the sentences say nothing
    none = ReportResults(analysis, tuple(compared_rules(compare(analysis.scenario, replicates=0))),
                         comparison=compare(analysis.scenario, replicates=0))
    assert paired_with_recommended(none) == {} and stability(none) is None and certainty_sentence(none) == ""
    # the recommended rule's interval allowing for its choice: comparison.csv's columns, in words
    from policy.presentation.report.formatting import DIGITS, fmt_num
    from policy.presentation.report.summary import chosen_interval_text

    row = cmp.comparison_frame().iloc[0]
    lo, hi = row["cost_per_1000_cases_chosen_lower"], row["cost_per_1000_cases_chosen_upper"]
    assert lo < hi
    assert (f"cases lies in {fmt_num(lo, DIGITS['cost'])} to {fmt_num(hi, DIGITS['cost'])} ({cmp.result.interval_label})"
            in chosen_interval_text(results))
    assert chosen_interval_text(none) == ""


def test_every_sweep_figure_has_a_table_agreeing_with_a_direct_solve():
    """The figures' text tables, checked against the solver run afresh at single costs (not the
    sweep's envelope): the optimal rule's shares in the middle of each piece, each rule's regret at
    the curves' knots, and the map's lenient share at its grid points."""
    from policy import costs_from_scenario, evaluate, optimal_rule
    from policy.assessment.sweep import sweep_scenario
    from policy.presentation.report.figure_tables import map_table, regret_table, robust_table, shares_table
    from policy.presentation.report.formatting import fmt_num, fmt_pct

    analysis = analyze(ROOT / "scenarios" / "demo.toml")
    sc, rl = analysis.scenario, analysis.risk_levels
    rules = {r.name: r for r in [analysis.rule]}

    def solve(costs: dict):
        c = costs_from_scenario(sc, rl, costs)
        rule = optimal_rule(rl, c)
        return rule, evaluate(rule, rl, c), c

    res = sweep_scenario(sc, ["new_offense"], rules=list(rules.values()), replicates=4)
    s = res.sweep
    axis = s.axis
    shares = shares_table(res, axis.unit)
    assert shares.columns[-1].endswith("over the piece") and len(shares.rows) >= 2
    for row in shares.rows:
        a, b = (float(v.replace(",", "")) for v in row[0].split(" to "))
        _, ev, _ = solve({"new_offense": 0.5 * (a + b) * axis.reference_cost})
        assert list(row[2:2 + rl.n_levels]) == [fmt_pct(v) for v in ev.level_shares], row
    lines = robust_table(res)
    assert [r[0] for r in lines.rows] == [info.label for info in s.robust]
    regret = regret_table(res, axis.unit)
    assert any("the scenario's" in h for h in regret.columns)
    for name, *cells in regret.rows:
        for head, text in zip(regret.columns[1:], cells):
            ratio = float(head.split()[1].rstrip(",")) if "the scenario's" not in head else axis.scenario_ratio
            cost = ratio * axis.reference_cost if "the scenario's" not in head else float(analysis.costs.outcome[axis.outcome_index])
            best, ev, c = solve({"new_offense": cost})
            held = evaluate(rules[name], rl, c, reference=best)
            # the column's ratio is printed to 3 digits: allow the regret's change over that rounding
            slope = abs(float(s.regret[name](ratio + 5e-4)) - float(s.regret[name](ratio - 5e-4)))
            assert abs(float(text.replace(",", "")) - 1000 * held.regret_per_case) <= 0.5 + 1000 * slope, (name, head, text)
    # the map's left panel: each grid point's lenient share equals a solve at those two costs
    both = sweep_scenario(sc, ["missed_court", "new_offense"])
    grid = map_table(both, points=3)
    ax = both.map.axes
    x, y = both.map.grid_axes(3)
    for i, row in enumerate(grid.rows):
        yi = y[len(y) - 1 - i]
        for j, text in enumerate(row[1:]):
            _, ev, _ = solve({"missed_court": x[j] * ax[0].reference_cost, "new_offense": yi * ax[1].reference_cost})
            assert text == fmt_pct(ev.level_shares[0]), (i, j, text, ev.level_shares[0])
    assert row[0].startswith(fmt_num(y[0], 3))


def test_the_unit_is_never_put_in_brackets_of_its_own():
    """A unit with brackets of its own ('USD (2024)') reads 'cost, USD (2024)' or 'in USD (2024)'
    on the page, never '(USD (2024))' or '(USD (2024);'."""
    report = build_report(ROOT / "scenarios" / "demo.toml", replicates=3)
    page = parse(report.html)
    unit = report.results.analysis.costs.unit
    assert "(" in unit  # the demo's unit has brackets, so the check can fail
    text = " ".join(page.text)
    assert f"({unit}" not in text, text[max(0, text.find(f"({unit}") - 80):text.find(f"({unit}") + 40]
    # the comparison's stability lines name rule cells by the scenario's labels, not raw column names
    start = report.html.index('id="comparison"')
    comparison = report.html[start:report.html.index("</section>", start)]
    assert "chosen again in" in comparison
    for column in report.results.analysis.rule.rule_cells.columns:
        assert f"{column} " not in comparison, column


def test_a_report_runs_the_arm_check_once_and_every_stage_shows_that_one(monkeypatch):
    """The randomized arm's check depends on the cases alone: the report runs it once (for the
    analysis) and hands it to the comparison and every sweep, instead of once per stage."""
    import policy.assessment.sweep.scenario_sweep as sweep_module
    import policy.estimation.arm_check as arm_module
    import policy.running.pipeline as pipeline

    calls = []
    real = arm_module.arm_check

    def counted(*args, **kwargs):
        calls.append(1)
        return real(*args, **kwargs)

    for module in (arm_module, pipeline, sweep_module):
        monkeypatch.setattr(module, "arm_check", counted)
    report = build_report(ROOT / "scenarios" / "demo.toml", replicates=2)
    results = report.results
    assert results.analysis.arm_check is not None and len(calls) == 1
    assert results.comparison.arm_check is results.analysis.arm_check
    assert all(res.arm_check is results.analysis.arm_check for res in (*results.sweeps, results.lenient_map))
    # and a stage run alone still runs its own
    from policy.assessment.compare import compare

    assert compare(ROOT / "scenarios" / "demo.toml", replicates=0).arm_check is not None and len(calls) == 2
