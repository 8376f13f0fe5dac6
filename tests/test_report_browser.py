"""The committee report in a real browser: Debian's Chromium, headless, driven by playwright.

The page is opened from disk with every request intercepted (any URL that is not ``file:``
fails the test), its cost controls are moved with the keyboard and by typing, and every number
the page shows is checked against the tool's Python engine (policy.decision.costs, policy.decision.solve,
policy.decision.evaluate) for the same costs, to the precision the page displays. Where Chromium or
playwright is missing, these tests fail with a message saying how to install them: they never
skip.
"""

from __future__ import annotations

import os
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from policy import costs_from_scenario, evaluate, optimal_rule
from policy.outputs import write_outputs
from policy.running.pipeline import analyze
from policy.presentation.report import DIGITS, build_report
from policy.presentation.report.sections import shown_name

from .conftest import ROOT, run_cli
from .test_report import HOSTILE, hostile_scenario

#: Debian's chromium package; never a browser downloaded by a test tool
CHROMIUM = os.environ.get("POLICY_TEST_CHROMIUM", "/usr/bin/chromium")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]
INSTALL = "run `sh scripts/test-setup.sh` (installs Debian's chromium package; the README's test command runs it) and install the test extra (playwright)"
#: bootstrap replicates of the reports built here (the comparison's own tests check its intervals)
REPLICATES = 20


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    """A fresh headless Chromium profile; fails (never skips) where the browser cannot start."""
    try:
        from playwright.sync_api import sync_playwright
    except ImportError as exc:  # pragma: no cover - the failure path is the point
        pytest.fail(f"playwright is not installed ({exc}); {INSTALL}.", pytrace=False)
    if not (Path(CHROMIUM).is_file() or shutil.which(CHROMIUM)):
        pytest.fail(f"Chromium was not found at {CHROMIUM}; {INSTALL}.", pytrace=False)
    profile = tmp_path_factory.mktemp("chromium-profile")
    with sync_playwright() as pw:
        try:
            context = pw.chromium.launch_persistent_context(
                str(profile), executable_path=CHROMIUM, headless=True, args=FLAGS,
                viewport={"width": 1280, "height": 1000}, offline=True)
        except Exception as exc:  # the browser would not start: say so loudly
            pytest.fail(f"Chromium at {CHROMIUM} could not be started: {exc}; {INSTALL}.", pytrace=False)
        yield context
        context.close()


@dataclass
class OpenPage:
    page: object
    requests: list
    problems: list
    dialogs: list

    def violations(self) -> list:
        return self.page.evaluate("window.__cspViolations || []")


def open_report(browser, path: Path) -> OpenPage:
    """Open a report from disk, refusing (and recording) every request that is not a file."""
    page = browser.new_page()
    requests, problems, dialogs = [], [], []

    def route(r):
        requests.append(r.request.url)
        if r.request.url.startswith("file:"):
            r.continue_()
        else:
            r.abort()

    page.route("**/*", route)
    browser.on("request", lambda req: None if req.url in requests else requests.append(req.url))
    page.on("console", lambda m: problems.append(f"console {m.type}: {m.text}") if m.type in ("error", "warning") else None)
    page.on("pageerror", lambda e: problems.append(f"page error: {e}"))
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    # requests the page's content security policy refuses never reach the route: count them too
    page.add_init_script("window.__cspViolations = [];"
                         "document.addEventListener('securitypolicyviolation',"
                         " e => window.__cspViolations.push(e.blockedURI + ' ' + e.violatedDirective));")
    page.goto(path.as_uri())
    page.wait_for_load_state("load")
    return OpenPage(page, requests, problems, dialogs)


def assert_offline(opened: OpenPage, path: Path) -> None:
    assert opened.requests, "the route saw no request at all: the interception is not working"
    foreign = [u for u in opened.requests if not u.startswith("file:")]
    assert not foreign, f"the report tried to reach the network: {foreign}"
    assert set(opened.requests) == {path.as_uri()}, opened.requests
    assert not opened.violations(), opened.violations()
    assert not opened.problems, opened.problems
    assert not opened.dialogs, opened.dialogs


# ----------------------------------------------------------------------------------------------
# Reading the page and asking the engine
# ----------------------------------------------------------------------------------------------
def number(text: str) -> float:
    return float(text.replace(",", "").replace("%", "").strip())


def compared_rows(page) -> dict:
    """Each compared rule's row: name -> (expected cost, regret, agreement) as shown."""
    rows = page.locator("#compared-table tbody tr[data-compared]")
    out = {}
    for i in range(rows.count()):
        row = rows.nth(i)
        out[row.locator("th").inner_text().strip()] = tuple(
            row.locator(f'[data-live="{k}"]').inner_text().strip() for k in ("compared-cost", "regret", "agreement"))
    return out


def shown(page) -> dict:
    """What the page shows, as a reader would read it."""
    texts = lambda sel: [t.strip() for t in page.locator(sel).all_inner_texts()]
    rows = page.locator("#rule-table tbody tr")
    rule = {}
    for i in range(rows.count()):
        row = rows.nth(i)
        key = tuple(t.strip() for t in row.locator("th").all_inner_texts())
        rule[key] = (row.locator('[data-live="level"]').inner_text().strip(),
                     row.locator('[data-live="changed"]').inner_text().strip())
    return {
        "shares": texts('#shares-table [data-live="share"]'),
        "rates": texts('#rates-table [data-live="rate"]'),
        "cost": texts('.headline [data-live="cost"]')[0],
        "lenient": texts('.headline [data-live="share"]')[0],
        "compared": compared_rows(page),
        "rule": rule,
        "status": page.locator("#live-status").inner_text(),
    }


def engine(results, outcome_costs=None, decision_costs=None, scale=None):
    """The Python engine's answer for the given costs: the rule, its evaluation, and each compared
    rule's evaluation against it (policy.decision.costs, policy.decision.solve, policy.decision.evaluate)."""
    analysis = results.analysis
    rl = analysis.risk_levels
    costs = costs_from_scenario(analysis.scenario, rl, outcome_costs, decision_costs)
    if scale:
        costs = costs.with_decision_scale([scale.get(d, 1.0) for d in range(rl.n_levels)])
    rule = optimal_rule(rl, costs)
    compared = {shown_name(c.rule): evaluate(c.rule, rl, costs, reference=rule) for c in results.compared}
    return rule, evaluate(rule, rl, costs), compared


def close(text: str, value: float, digits: int, scale: float = 1.0) -> bool:
    """The shown text equals ``value * scale`` to the displayed number of digits."""
    return abs(number(text) - value * scale) <= 0.5 * 10.0 ** -digits + 1e-9 * max(1.0, abs(value * scale))


def assert_matches_engine(view: dict, results, rule, ev, compared) -> None:
    analysis = results.analysis
    for text, share in zip(view["shares"], ev.level_shares, strict=True):
        assert close(text, share, DIGITS["share"], 100), (text, share)
    assert view["lenient"] == view["shares"][0]
    for text, rate in zip(view["rates"], ev.outcome_rates, strict=True):
        assert close(text, rate, DIGITS["rate"], 100), (text, rate)
    assert close(view["cost"], ev.cost_per_case, DIGITS["cost"], 1000), (view["cost"], ev.cost_per_1000)
    assert set(view["compared"]) == set(compared)
    for name, e in compared.items():
        cost, regret, agreement = view["compared"][name]
        assert close(cost, e.cost_per_case, DIGITS["cost"], 1000), (name, cost, e.cost_per_1000)
        assert close(regret, e.regret_per_case, DIGITS["cost"], 1000), (name, regret, 1000 * e.regret_per_case)
        assert close(agreement, e.agreement, DIGITS["share"], 100), (name, agreement, e.agreement)
    frame, base = rule.to_frame(), analysis.rule.to_frame()
    columns = list(rule.rule_cells.columns)
    assert len(view["rule"]) == len(frame)
    for i in range(len(frame)):
        key = tuple(str(v) for v in frame.loc[i, columns])
        level, changed = view["rule"][key]
        assert level == frame.loc[i, "level"], (key, level, frame.loc[i, "level"])
        assert changed == ("changed" if frame.loc[i, "level"] != base.loc[i, "level"] else ""), key


def set_number(page, control: str, value: str) -> None:
    box = page.locator(f"#{control}-number")
    box.fill(value)  # types the text and fires the input event, as a reader typing would


# ----------------------------------------------------------------------------------------------
def built_report(folder: Path, scenario: Path):
    report = build_report(scenario, replicates=REPLICATES)
    write_outputs(folder, report.output_files())
    return folder / "report.html", report.results


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    return built_report(tmp_path_factory.mktemp("demo-report"), ROOT / "scenarios" / "demo.toml")


@pytest.fixture
def demo_page(browser, demo_report):
    """The demo report open in a fresh page; afterwards, no request may have left the file."""
    path, results = demo_report
    opened = open_report(browser, path)
    yield opened.page, results
    assert_offline(opened, path)
    opened.page.close()


def test_demo_report_offline_live_and_equal_to_the_engine(demo_page, tmp_path):
    page, results = demo_page
    analysis = results.analysis

    # on opening, the script's figures equal the engine's at the scenario's own costs
    view = shown(page)
    assert_matches_engine(view, results, *engine(results))
    assert "scenario's own costs" in view["status"]
    # the cautions are on the first screen, before any table of numbers
    caution = page.locator("#cautions")
    assert caution.is_visible() and caution.bounding_box()["y"] + caution.bounding_box()["height"] < 1000
    assert caution.bounding_box()["y"] < page.locator("table").first.bounding_box()["y"]

    # drag the new-offense cost up with the keyboard (Page Up) until the lenient share moves
    j = analysis.scenario.outcome_index("new_offense")
    slider = page.locator(f"#cost-outcome-{j}-range")
    slider.focus()
    for _ in range(10):
        page.keyboard.press("PageUp")
        if shown(page)["lenient"] != view["lenient"]:
            break
    value = float(slider.input_value())
    assert value > analysis.costs.outcome[j]
    assert float(page.locator(f"#cost-outcome-{j}-number").input_value()) == value
    rule, ev, compared = engine(results, {"new_offense": value})
    after = shown(page)
    assert_matches_engine(after, results, rule, ev, compared)
    # the committee sees the rule and the lenient share change
    assert any(changed for _, changed in after["rule"].values())
    assert after["lenient"] != view["lenient"]
    assert "costs chosen here" in after["status"]

    # type costs: a fixed decision cost and the factor on the bond's per-cell cost
    set_number(page, "cost-level-1", "400")
    set_number(page, "cost-level-2", "1.5")
    rule, ev, compared = engine(results, {"new_offense": value}, {"supervision": 400}, scale={2: 1.5})
    assert_matches_engine(shown(page), results, rule, ev, compared)
    mean = float(np.average(analysis.costs.decision[:, 2], weights=analysis.risk_levels.weights))
    assert close(page.locator("#cost-level-2-mean").inner_text(), 1.5 * mean, 0)
    # a bad entry is marked and changes nothing
    set_number(page, "cost-outcome-0", "-5")
    assert page.locator("#cost-outcome-0-number").get_attribute("aria-invalid") == "true"
    assert_matches_engine(shown(page), results, rule, ev, compared)

    page.screenshot(path=str(tmp_path / "report-after-moving-costs.png"), full_page=True)
    assert (tmp_path / "report-after-moving-costs.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    # printed: no controls, and the costs used are stated
    page.emulate_media(media="print")
    assert not page.locator("#cost-controls").is_visible()
    printed = page.locator("#printed-costs")
    assert printed.is_visible() and "costs chosen on the page" in printed.inner_text()
    page.emulate_media(media="screen")

    # back to the scenario's costs
    page.locator("#reset-costs").click()
    assert_matches_engine(shown(page), results, *engine(results))


def test_every_control_has_a_label_and_takes_the_keyboard(demo_page):
    page, results = demo_page
    analysis = results.analysis
    inputs = page.locator("#cost-controls input")
    assert inputs.count() == 2 * (len(analysis.scenario.outcomes) + len(analysis.scenario.levels))
    for i in range(inputs.count()):
        handle = inputs.nth(i)
        ident = handle.get_attribute("id")
        assert page.locator(f'label[for="{ident}"]').count() == 1, ident
    # Tab from the skip link reaches the first slider
    page.keyboard.press("Tab")
    assert page.evaluate("document.activeElement.className") == "skip"
    page.keyboard.press("Enter")
    for _ in range(40):
        page.keyboard.press("Tab")
        if page.evaluate("document.activeElement.type") == "range":
            break
    assert page.evaluate("document.activeElement.type") == "range"


def test_hostile_labels_stay_text_in_the_browser(browser, tmp_path, capsys):
    scenario = hostile_scenario(tmp_path)
    code, _, err = run_cli(["report", scenario, "--out", tmp_path / "out", "--replicates", REPLICATES, "--no-progress"],
                           capsys)
    assert code == 0, err
    path = tmp_path / "out" / "report.html"
    opened = open_report(browser, path)
    page = opened.page
    analysis = analyze(scenario)
    # move every outcome slider so the script rewrites the rule table and the status line
    for j in range(len(analysis.scenario.outcomes)):
        page.locator(f"#cost-outcome-{j}-range").focus()
        page.keyboard.press("End")
    assert page.locator("img, zzz-hostile").count() == 0
    assert page.locator("script").count() == 2
    body = page.locator("body").inner_text()
    assert HOSTILE["level"] in body and HOSTILE["category"] in body and HOSTILE["outcome"] in body
    levels = page.locator('#rule-table [data-live="level"]').all_inner_texts()
    assert HOSTILE["level"] in levels
    assert page.title().startswith("Quarrow <script>")
    assert_offline(opened, path)
    page.close()


def test_ties_go_to_the_lenient_level_as_in_the_engine(demo_page):
    page, results = demo_page
    analysis = results.analysis
    # every cost zero: every level ties in every rule cell, and both engines pick the most lenient
    controls = page.locator('#cost-controls input[type="number"]')
    for i in range(controls.count()):
        controls.nth(i).fill("0")
    L = analysis.risk_levels.n_levels
    rule, ev, compared = engine(results, {k: 0.0 for k in analysis.scenario.outcome_keys},
                                {v: 0.0 for v in analysis.scenario.level_values}, scale={L - 1: 0.0})
    assert (rule.level == 0).all()
    assert_matches_engine(shown(page), results, rule, ev, compared)
    # only the decision costs: supervision free, recognizance and bond as in the scenario
    page.locator("#reset-costs").click()
    page.locator("#cost-level-1-number").fill("0")
    rule, ev, compared = engine(results, None, {analysis.scenario.level_values[1]: 0.0})
    assert_matches_engine(shown(page), results, rule, ev, compared)


@pytest.fixture(scope="module")
def constrained_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("constrained-report")
    path, results = built_report(folder, ROOT / "scenarios" / "demo_constrained.toml")
    return folder, results


def test_constrained_report_compares_each_rule_once(constrained_report):
    """The constrained optimum joins the comparison once (the comparison solves it in every
    replicate; the page does not add a second copy of it)."""
    _, results = constrained_report
    names = [c.rule.name for c in results.compared]
    assert len(names) == len(set(names)), names
    assert [c.rule.kind for c in results.compared].count("constrained") == 1


def constrained_shown(page) -> dict:
    texts = lambda kind: [t.strip() for t in page.locator(f'#constrained-live [data-live="{kind}"]').all_inner_texts()]
    return {"cost": texts("c-cost")[0], "price": texts("c-price")[0], "shares": texts("c-share"),
            "note": page.locator("#constrained-note").inner_text()}


def assert_constrained_matches(view: dict, con) -> None:
    assert close(view["cost"], con.cost_per_case, DIGITS["cost"], 1000), (view["cost"], con.cost_per_case)
    assert close(view["price"], con.price_per_case, DIGITS["cost"], 1000), (view["price"], con.price_per_case)
    for text, v in zip(view["shares"], con.evaluation.level_shares, strict=True):
        assert close(text, v, DIGITS["share"], 100), (text, v)


def test_constrained_figures_come_from_the_nearest_precomputed_point(browser, constrained_report):
    import pandas as pd

    folder, results = constrained_report
    analysis = results.analysis
    path = folder / "report.html"
    opened = open_report(browser, path)
    page = opened.page
    # at the scenario's costs: the constrained rule solved at exactly those costs
    view = constrained_shown(page)
    assert "exactly these costs" in view["note"]
    assert_constrained_matches(view, analysis.constrained)

    j = analysis.scenario.outcome_index("new_offense")
    page.locator(f"#cost-outcome-{j}-range").focus()
    for _ in range(3):
        page.keyboard.press("PageUp")
    value = float(page.locator(f"#cost-outcome-{j}-range").input_value())
    # the nearest feasible point on the ratio axis, c_j / mean cost of the harshest level
    grid = pd.read_csv(folder / "sweep_new_offense_constrained.csv")
    grid = grid[grid["feasible"]]
    c_ref = float(np.average(analysis.costs.decision[:, -1], weights=analysis.risk_levels.weights))
    ratio = float(grid["ratio"].to_numpy()[np.argmin(np.abs(grid["ratio"].to_numpy() - value / c_ref))])
    nearest = ratio * c_ref
    # the point's figures equal a constrained solve at that point's costs, done afresh
    fresh = analyze(analysis.scenario, {"new_offense": nearest}).constrained
    view = constrained_shown(page)
    assert_constrained_matches(view, fresh)
    assert "nearest" in view["note"] and f"{nearest:,.0f}" in view["note"]
    # the constrained rule held at the scenario's costs is one of the compared rules, live
    assert shown_name(analysis.constrained.rule) in shown(page)["compared"]
    assert_matches_engine(shown(page), results, *engine(results, {"new_offense": value}))
    # another cost moved too: the page says the constrained figures do not follow it
    page.locator("#cost-level-1-number").fill("500")
    assert "not reflected" in constrained_shown(page)["note"]
    assert_offline(opened, path)
    page.close()


# ----------------------------------------------------------------------------------------------
# The first screen, the layout at a laptop's and a phone's size, print, and the export
# ----------------------------------------------------------------------------------------------
WIDE = {"width": 1366, "height": 900}
PHONE = {"width": 390, "height": 844}


def box(page, selector: str) -> dict:
    """An element's box in the viewport (CSS pixels)."""
    return page.evaluate("s => { const r = document.querySelector(s).getBoundingClientRect();"
                         " return {top: r.top, bottom: r.bottom, left: r.left, right: r.right, width: r.width}; }", selector)


def in_view(page, selector: str, size: dict) -> bool:
    """Whether the element is wholly inside the viewport (to a pixel: focus scrolls to fractional positions)."""
    b = box(page, selector)
    return b["top"] >= -1 and b["bottom"] <= size["height"] + 1 and b["left"] >= -1 and b["right"] <= size["width"] + 1


def grid_levels(page) -> dict:
    """The rule grid as shown: rule cell index -> decision level label."""
    cells = page.locator("[data-grid-cell]")
    return {int(cells.nth(i).get_attribute("data-grid-cell")):
            cells.nth(i).locator('[data-live="grid-level"]').inner_text().strip() for i in range(cells.count())}


def test_the_first_screen_decides(demo_page, tmp_path):
    page, results = demo_page
    page.set_viewport_size(WIDE)
    page.evaluate("window.scrollTo(0, 0)")
    # the summary follows the cautions, and it and the whole rule grid are in the first viewport
    cautions, summary = box(page, "#cautions"), box(page, "#summary")
    assert cautions["bottom"] <= summary["top"]
    assert in_view(page, "#rule-grid", WIDE), box(page, "#rule-grid")
    assert in_view(page, "#summary-title", WIDE)
    page.screenshot(path=str(tmp_path / "first-screen-1366.png"))
    # the grid has text in every cell: each rule cell's level, as the engine's rule says
    rule = results.analysis.rule
    shown_levels = grid_levels(page)
    assert sorted(shown_levels) == list(range(rule.n_rule_cells))
    for g, text in shown_levels.items():
        assert text == rule.level_labels[int(rule.level[g])], (g, text)
    # the headline names every decision level with its share
    shares = [t.strip() for t in page.locator('#summary-shares [data-live="summary-share"]').all_inner_texts()]
    ev = results.analysis.evaluation
    assert len(shares) == len(ev.level_labels)
    for text, share in zip(shares, ev.level_shares):
        assert close(text, share, DIGITS["share"], 100)
    headline = page.locator("#summary-shares").inner_text()
    for label in ev.level_labels:
        assert label in headline
    # every compared rule but the optimum has a row in the summary, with the comparison's interval
    rows = page.locator("#summary-compared tbody tr[data-summary-rule]")
    assert rows.count() == sum(1 for c in results.compared if c.rule.kind != "optimal")
    assert "(" in rows.first.locator('[data-live="sum-diff"]').inner_text()
    # what it changes against what courts did, in words; the script writes the tool's sentence
    from policy.presentation.report.summary import change_sentences

    sentences = [t.strip() for t in page.locator('#summary [data-live="change"]').all_inner_texts()]
    assert sentences == [text for _, text in change_sentences(results)] and sentences
        # no raw column name in the grid's headings
    heads = page.locator("#rule-grid thead").inner_text()
    for column in rule.rule_cells.columns:
        assert column not in heads or column == results.scenario.column_label(column)


def test_a_cost_slider_and_the_figures_it_moves_are_in_view_together(demo_page, tmp_path):
    page, results = demo_page
    page.set_viewport_size(WIDE)
    page.evaluate("window.scrollTo(0, 0)")
    before = grid_levels(page)
    sliders = page.locator('#cost-controls input[type="range"]')
    for i in range(sliders.count()):
        sliders.nth(i).focus()
        assert in_view(page, "#rule-grid", WIDE), (i, box(page, "#rule-grid"))
        assert in_view(page, "#cost-figure", WIDE), (i, box(page, "#cost-figure"))
        assert in_view(page, f"#{sliders.nth(i).get_attribute('id')}", WIDE)
    # scrolled down the page, the panel stays beside the figures
    page.evaluate("window.scrollTo(0, 6000)")
    j = results.scenario.outcome_index("new_offense")
    slider = page.locator(f"#cost-outcome-{j}-range")
    slider.focus()
    assert in_view(page, f"#cost-outcome-{j}-range", WIDE)
    page.evaluate("window.scrollTo(0, 0)")
    slider.focus()
    for _ in range(8):
        page.keyboard.press("PageUp")
    assert in_view(page, "#rule-grid", WIDE) and in_view(page, "#cost-figure", WIDE)
    after = grid_levels(page)
    assert after != before
    value = float(slider.input_value())
    rule, ev, _ = engine(results, {"new_offense": value})
    for g, text in after.items():
        assert text == rule.level_labels[int(rule.level[g])]
    changed = page.locator("td.changed[data-grid-cell]")
    assert changed.count() == int((rule.level != results.analysis.rule.level).sum()) > 0
    assert "was" in changed.first.inner_text()
    page.screenshot(path=str(tmp_path / "slider-focused-1366.png"))
    # the shares of replicates and the stability notes hold at the scenario's costs only: gone here
    texts = lambda kind: [t.strip() for t in page.locator(f'[data-live="{kind}"]').all_inner_texts()]
    assert texts("sum-cheaper") and not any(texts("sum-cheaper")) and not any(texts("grid-stability"))
    assert texts("sum-chosen") == [""]  # the interval allowing for the rule's choice: at the scenario's costs only
    page.locator("#reset-costs").click()
    assert texts("sum-chosen")[0].startswith("Allowing for its having been chosen on these data")
    assert all(t.startswith("recommended cheaper in ") for t in texts("sum-cheaper"))
    assert all(t.startswith("\u00b7 picked again in ") for t in texts("grid-stability")) and texts("grid-stability")


def test_on_a_phone_charts_are_full_width_and_tables_fit(demo_page, tmp_path):
    page, results = demo_page
    page.set_viewport_size(PHONE)
    page.evaluate("window.scrollTo(0, 0)")
    page.screenshot(path=str(tmp_path / "first-screen-390.png"))
    # nothing runs off the side of the page
    assert page.evaluate("document.documentElement.scrollWidth") <= PHONE["width"]
    # charts: every figure and bar as wide as the viewport less the page's margins
    margins = 2 * 16
    widths = page.evaluate("Array.from(document.querySelectorAll('figure svg, svg.bar'))"
                           ".filter(e => e.getClientRects().length).map(e => e.getBoundingClientRect().width)")
    assert widths and min(widths) >= PHONE["width"] - margins - 1, sorted(widths)[:5]
    # and their text reads: no letter of a chart's text (drawn as SVG text) smaller than 9 CSS pixels
    smallest = page.evaluate("Math.min(...Array.from(document.querySelectorAll('figure svg text')).map(t =>"
                             " parseFloat(getComputedStyle(t).fontSize) * Math.hypot(t.getScreenCTM().a, t.getScreenCTM().b)))")
    assert smallest >= 9.0, smallest
    # tables: none wider than the space it has
    over = page.evaluate("Array.from(document.querySelectorAll('table')).filter(t => t.getClientRects().length)"
                         ".filter(t => t.scrollWidth > t.parentElement.clientWidth + 1"
                         " || t.getBoundingClientRect().right > window.innerWidth + 1).map(t => t.id || t.className"
                         " || (t.caption && t.caption.textContent))")
    assert not over, over
    # the summary and its grid come before the controls, and the grid fits the screen's width
    assert box(page, "#summary")["top"] < box(page, "#control-panel")["top"]
    grid = box(page, "#rule-grid")
    assert grid["left"] >= 0 and grid["right"] <= PHONE["width"]
    page.set_viewport_size({"width": 1280, "height": 1000})


def pdf_pages(pdf: bytes) -> int:
    """Pages of a PDF: its page objects (ISO 32000-1, 7.7.3.3: a page object has /Type /Page)."""
    import re

    return len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf))


def test_the_summary_prints_on_at_most_two_a4_pages(demo_page, tmp_path):
    page, results = demo_page
    page.emulate_media(media="print")
    whole = page.pdf(format="A4", print_background=True)
    (tmp_path / "report.pdf").write_bytes(whole)
    # the summary (title, cautions, summary) alone: the rest of the page starts on a new page in print
    assert page.evaluate("getComputedStyle(document.querySelector('.rest')).breakBefore") == "page"
    # the grid and the summary's tables are not cut across pages
    for selector in ("#rule-grid", "#summary-compared"):
        assert page.evaluate(f"getComputedStyle(document.querySelector('{selector}')).breakInside") == "avoid"
    page.add_style_tag(content=".rest, footer { display: none !important; }")
    first = page.pdf(format="A4", print_background=True)
    (tmp_path / "summary.pdf").write_bytes(first)
    page.emulate_media(media="screen")
    assert 1 <= pdf_pages(first) <= 2, pdf_pages(first)
    assert pdf_pages(whole) > pdf_pages(first)


def test_the_exported_command_line_reproduces_the_page(demo_page, tmp_path, capsys):
    import json
    import shlex
    import tomllib
    from urllib.parse import unquote

    import pandas as pd

    page, results = demo_page
    analysis = results.analysis
    j = analysis.scenario.outcome_index("new_offense")
    page.locator(f"#cost-outcome-{j}-range").focus()
    for _ in range(6):
        page.keyboard.press("PageUp")
    set_number(page, "cost-level-1", "612.5")
    set_number(page, "cost-level-2", "1.37")
    view = shown(page)
    page.locator("#export summary").click()
    command = page.locator("#export-command").input_value()
    words = shlex.split(command)
    assert words[:2] == ["policy", "solve"]
    assert "--decision-cost-factor" in words and "bond=1.37" in words
    out = tmp_path / "chosen"
    args = words[1:]
    args[args.index("--out") + 1] = str(out)
    code, _, err = run_cli(args, capsys)
    assert code == 0, err
    # the command's figures are the page's, to the digits the page shows
    evaluation = json.loads((out / "evaluation.json").read_text())
    written = pd.read_csv(out / "rule.csv")
    value = float(page.locator(f"#cost-outcome-{j}-number").input_value())
    rule, ev, compared = engine(results, {"new_offense": value}, {"supervision": 612.5}, scale={2: 1.37})
    assert_matches_engine(view, results, rule, ev, compared)
    assert list(written["level"]) == [rule.level_labels[int(d)] for d in rule.level]
    assert list(written["level"]) == [grid_levels(page)[g] for g in range(rule.n_rule_cells)]
    overview = evaluation["overview"]
    assert close(view["cost"], overview["cost_per_case"], DIGITS["cost"], 1000), overview
    for d, text in enumerate(view["shares"]):
        assert close(text, overview[f"share_level_{d}"], DIGITS["share"], 100), (text, overview)
    for k, text in zip(analysis.scenario.outcome_keys, view["rates"]):
        assert close(text, overview[f"rate_{k}"], DIGITS["rate"], 100), (text, overview)
    # the snippet, put in the scenario, gives the same costs
    snippet = tomllib.loads(page.locator("#export-snippet").input_value())
    bond = [d for d in snippet["decisions"] if d["value"] == "bond"][0]
    assert bond["cost_factor"] == 1.37 and [d for d in snippet["decisions"] if d["value"] == "supervision"][0]["cost"] == 612.5
    assert [o for o in snippet["outcomes"] if o["key"] == "new_offense"][0]["cost"] == value
    # the rule as CSV, from the page itself
    href = page.locator("#export-rule").get_attribute("href")
    assert href.startswith("data:text/csv;charset=utf-8,")
    from io import StringIO

    csv = pd.read_csv(StringIO(unquote(href.split(",", 1)[1])))
    assert list(csv["level"]) == list(written["level"])
    assert list(csv.columns[: len(rule.rule_cells.columns)]) == list(rule.rule_cells.columns)
    # the breakpoints the page shows at these costs are the exact sweep's nearest ones
    from policy.assessment.sweep import sweep_scenario
    from policy.decision.costs import CostFactor

    costs = {"new_offense": value}
    decisions = {"supervision": 612.5, "bond": CostFactor(1.37)}
    swept = sweep_scenario(analysis.scenario, ["new_offense"], ranges=[(0.0, 40.0)], outcome_costs=costs,
                           decision_costs=decisions, gammas=[], bounds=False).sweep
    table = swept.breakpoints()
    item = page.locator(f'#summary-breakpoints li[data-outcome="{j}"]')
    above = table[table["cost"] > value]["cost"].min()
    below = table[table["cost"] < value]["cost"].max()
    assert close(item.locator('[data-live="bp-above"]').inner_text(), above, 0), (above, item.inner_text())
    assert close(item.locator('[data-live="bp-below"]').inner_text(), below, 0), (below, item.inner_text())
    page.locator("#reset-costs").click()


# where each marked element starts and ends in the printed PDF: an internal link to an id makes
# Chromium write a named destination for it (its page and its top), read back from the PDF's
# catalog (ISO 32000-1: 7.7.2 the catalog's /Dests, 7.7.3 the page tree, 12.3.2.2 explicit
# destinations [page /XYZ left top zoom])
MARK_ENDS = """() => {
  const shown = Array.from(document.querySelectorAll('table tr, figure')).filter(e => e.getClientRects().length);
  const links = document.createElement('div');
  links.style.display = 'none';
  const pairs = shown.map((e, i) => {
    e.id = e.id || ('printed-start-' + i);
    const box = e.tagName === 'TR' ? e.cells[0] : e;  // a row's cells are as tall as the row
    box.style.position = 'relative';
    const end = document.createElement('span');
    end.id = 'printed-end-' + i;
    end.style.cssText = 'position: absolute; left: 0; bottom: 0; width: 0; height: 0';
    box.appendChild(end);
    for (const id of [e.id, end.id]) { const a = document.createElement('a'); a.href = '#' + id; links.appendChild(a); }
    return [e.id, end.id, e.tagName.toLowerCase()];
  });
  document.body.appendChild(links);
  return pairs;
}"""


def pdf_destinations(pdf: bytes) -> dict[str, tuple[int, float]]:
    """Named destinations of a PDF written by Chromium (objects uncompressed, no object streams):
    name -> (page index from 0, top in points from the page's bottom)."""
    import re

    objects = {int(m.group(1)): m.group(2) for m in re.finditer(rb"(?m)^(\d+) 0 obj\s*(.*?)endobj", pdf, re.S)}
    catalog = objects[int(re.search(rb"/Root (\d+) 0 R", pdf).group(1))]
    order: list[int] = []

    def walk(n: int) -> None:
        body = objects[n]
        kids = re.search(rb"/Kids\s*\[(.*?)\]", body, re.S)
        if kids and re.search(rb"/Type\s*/Pages", body):
            for k in re.findall(rb"(\d+) 0 R", kids.group(1)):
                walk(int(k))
        else:
            order.append(n)

    walk(int(re.search(rb"/Pages (\d+) 0 R", catalog).group(1)))
    page = {n: i for i, n in enumerate(order)}
    dests = objects[int(re.search(rb"/Dests (\d+) 0 R", catalog).group(1))]
    return {m.group(1).decode(): (page[int(m.group(2))], float(m.group(3)))
            for m in re.finditer(rb"/([^\s/\[\]<>()]+)\s*\[(\d+) 0 R /XYZ [-\d.]+ ([-\d.]+)", dests)}


def cut_across_pages(page) -> tuple[list, int]:
    """The table rows and figures whose start and end print on different A4 pages, and how many were checked."""
    page.emulate_media(media="print")
    pairs = page.evaluate(MARK_ENDS)
    found = pdf_destinations(page.pdf(format="A4", print_background=True))
    page.emulate_media(media="screen")
    checked = [(a, e, kind) for a, e, kind in pairs if a in found and e in found]
    return [(kind, a, found[a], found[e]) for a, e, kind in checked if found[a][0] != found[e][0]], len(checked)


def test_cut_across_pages_finds_a_row_taller_than_a_page(browser, tmp_path):
    """The check itself: a row taller than an A4 page must be reported cut, the short ones before it not."""
    rows = "".join(f'<tr><td style="height: {1500 if i == 2 else 100}px">row {i}</td></tr>' for i in range(4))
    path = tmp_path / "tall.html"
    path.write_text(f"<!doctype html><html><body><table>{rows}</table></body></html>", encoding="utf-8")
    page = browser.new_page()
    page.goto(path.as_uri())
    cut, checked = cut_across_pages(page)
    page.close()
    assert checked == 4
    assert [c[1] for c in cut][:1] == ["printed-start-2"], cut


def test_no_table_row_or_figure_is_cut_across_printed_pages(demo_page):
    page, _ = demo_page
    shown = page.evaluate("Array.from(document.querySelectorAll('table tr, figure')).length")
    cut, checked = cut_across_pages(page)
    assert checked >= 0.9 * shown > 0, (checked, shown)  # only what print hides (the controls) goes unchecked
    assert not cut, cut[:10]
