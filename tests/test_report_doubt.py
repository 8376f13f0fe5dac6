"""The rules that hold under doubt in the report: which set is chosen and why, the table beside the
ordinary optimum, and the report's options.

Reference for the worst cases: brute force over the extreme points of the set (tests/test_robust.py),
a maximum over a polytope attained at a vertex (common practice: linear programming theory).
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

from policy.decision.doubt import DEFAULT_GAMMA, chosen_doubt, standing_frame
from policy.decision.robust import robust_rule
from policy.decision.safe import safe_rule
from policy.decision.solve import optimal_rule
from policy.errors import InputError

from .test_robust import as_rule, brute_worst_cost, brute_worst_regret, instance


def _check_with(check, rejects: bool, gamma_low: float):
    """The arm check with its verdict and Gamma_low set (a real ArmCheck, other fields as found)."""
    return dataclasses.replace(check, p_value=0.001 if rejects else 0.5, alpha=0.05, gamma_lower=gamma_low)


@pytest.fixture(scope="module")
def check(tmp_path_factory):
    from policy.demo.quarrow import CONFOUNDED, simulate_cases
    from policy.estimation.arm_check import arm_check
    from policy.running.pipeline import estimate

    from .conftest import write_scenario

    folder = tmp_path_factory.mktemp("check")
    frame, _ = simulate_cases(3_000, seed=7, model=CONFOUNDED)
    frame.to_csv(folder / "cases.csv", index=False)
    cells, _ = estimate(write_scenario(folder))
    return arm_check(cells, gamma=False)


def test_default_set_follows_the_arm_check(check):
    # rejects with a finite Gamma_low: that value, rounded up (never below what the data show)
    choice = chosen_doubt(_check_with(check, True, 1.2345), has_arm=True)
    assert choice.settings.gamma == 1.24 and not choice.settings.bounds and not choice.contradicted
    assert "contradicts unconfoundedness" in choice.reason and "1.24" in choice.reason
    # no finite Gamma reconciles the arms: the monotone bounds
    choice = chosen_doubt(_check_with(check, True, np.inf), has_arm=True)
    assert choice.settings.bounds and choice.settings.gamma is None
    # no rejection, or no arm at all: the moderate default
    for c in (_check_with(check, False, 1.0), None):
        choice = chosen_doubt(c, has_arm=c is not None)
        assert choice.settings.gamma == DEFAULT_GAMMA and "no proof" in choice.reason


def test_values_asked_for_win_and_a_contradicted_set_is_said(check):
    rejecting = _check_with(check, True, 1.8)
    choice = chosen_doubt(rejecting, gamma=1.25, has_arm=True)
    assert choice.settings.gamma == 1.25 and choice.contradicted and "contradict that set" in choice.reason
    assert not chosen_doubt(rejecting, gamma=2.0, has_arm=True).contradicted
    bounds = chosen_doubt(rejecting, bounds=True, safe_against="aid", has_arm=True)
    assert bounds.settings.bounds and bounds.settings.safe_against == "aid" and not bounds.contradicted
    with pytest.raises(InputError, match="not both"):
        chosen_doubt(rejecting, gamma=2.0, bounds=True)


def test_default_baseline_is_what_courts_did_without_the_aid_where_there_is_an_arm():
    assert chosen_doubt(None, has_arm=True).settings.safe_against == "courts-not-shown"
    assert chosen_doubt(None, has_arm=False).settings.safe_against == "courts"


@pytest.mark.parametrize("seed, kind", [(1, "gamma"), (2, "box"), (3, "gamma"), (4, "box")])
def test_standing_table_figures_are_the_brute_force_worst_cases(seed, kind):
    rl, costs, columns, bounds = instance(seed, 3, 2, kind, 2.5)
    optimum = optimal_rule(rl, costs, columns)
    index, groups = rl.layout.rule_index(columns)
    baseline = as_rule(np.eye(rl.n_levels)[np.zeros(len(groups), dtype=int)], index, groups, rl, "everyone released")
    robust = robust_rule(rl, costs, bounds, columns=columns, reference=optimum)
    safe = safe_rule(rl, costs, bounds, baseline, columns=columns)
    frame = standing_frame(robust, safe, rl, costs).set_index("role")
    assert list(frame.index) == ["ordinary optimum", "robust rule", "safe rule", "baseline"]
    rules = {"ordinary optimum": optimum, "robust rule": robust.rule, "safe rule": safe.rule, "baseline": baseline}
    for role, rule in rules.items():
        # the worst case over the set and monotonicity
        want = 1000 * brute_worst_cost(rule.cell_delta, rl, costs, bounds, monotone=True)
        assert frame.loc[role, "cost_worst_case"] == pytest.approx(want, rel=1e-9, abs=1e-6)
        regret = 1000 * brute_worst_regret(rule.cell_delta, baseline.cell_delta, rl, costs, bounds, monotone=True)
        assert frame.loc[role, "regret_worst_case"] == pytest.approx(regret, rel=1e-6, abs=1e-6)
        shares = np.average(rule.cell_delta, axis=0, weights=rl.weights)
        assert frame.loc[role, [f"share_{v}" for v in rl.level_values]].to_numpy(float) == pytest.approx(shares)
    # the robust rule's worst case is the least; the safe rule's worst-case regret is the least
    assert frame["cost_worst_case"].min() == pytest.approx(frame.loc["robust rule", "cost_worst_case"], rel=1e-9)
    assert frame["regret_worst_case"].min() == pytest.approx(frame.loc["safe rule", "regret_worst_case"], rel=1e-6, abs=1e-6)


# ----------------------------------------------------------------------------------------------
# The report
# ----------------------------------------------------------------------------------------------
def test_report_shows_the_rules_that_hold_under_doubt(small_case_table):
    from policy.presentation.report import build_report

    scenario, _ = small_case_table
    report = build_report(scenario, replicates=0, robust_gamma=2.0, safe_against="aid")
    section = next(s for s in report.sections if s.key == "under-doubt")
    found = report.results.comparison.under_doubt
    assert found.robust.bounds.gamma == 2.0 and found.safe.baseline.kind == "aid"
    assert "Gamma = 2, as asked" in section.context["reason"]
    html = report.html
    assert 'id="under-doubt"' in html and "Rules that hold if unconfoundedness fails" in html
    # the page's table holds the standing table's figures, as written to doubt_rules.csv
    standing = report.files["doubt_rules.csv"]
    view = section.context["standing"]
    assert [row[0] for row in view.rows] == list(standing["rule"])
    for row, (_, want) in zip(view.rows, standing.iterrows()):
        assert float(row[2].replace(",", "")) == pytest.approx(want["cost_point"], abs=0.5)
        assert float(row[3].replace(",", "")) == pytest.approx(want["cost_worst_case"], abs=0.5)
        assert float(row[4].replace(",", "")) == pytest.approx(want["regret_worst_case"], abs=0.5)
        assert row[3] in html
    # the arm check's verdict opens the section; the section sits right after the comparison
    keys = [s.key for s in report.sections]
    assert keys.index("under-doubt") == keys.index("comparison") + 1
    assert report.results.analysis.arm_check.headline() in html
    # the arm check in full points to the section
    full = html[html.index('id="arm-check-full"'):html.index("</section>", html.index('id="arm-check-full"'))]
    assert 'href="#under-doubt"' in full
    # and the ladder of sets, as written to doubt_ladder.csv
    ladder = report.files["doubt_ladder.csv"]
    assert "Where each conclusion stops holding" in html and list(ladder["set"])[-1] == "monotone bounds"
    assert [row[0] for row in section.context["ladder"].rows] == list(ladder["set"])


def test_report_without_doubt_has_no_such_section(small_case_table):
    from policy.presentation.report import build_report

    scenario, _ = small_case_table
    report = build_report(scenario, replicates=0, under_doubt=False)
    assert all(s.key != "under-doubt" for s in report.sections) and "doubt_rules.csv" not in report.files


def test_report_cli_writes_the_rules_and_refuses_bad_options(small_case_table, tmp_path, capsys):
    from .conftest import run_cli

    scenario, _ = small_case_table
    code, _, err = run_cli(["report", scenario, "-o", tmp_path / "bad", "--robust-gamma", "0.5"], capsys)
    assert code == 2 and "--robust-gamma must be" in err and not (tmp_path / "bad").exists()
    code, _, err = run_cli(["report", scenario, "-o", tmp_path / "bad", "--robust-gamma", "2", "--robust-bounds"], capsys)
    assert code == 2 and "not both" in err and not (tmp_path / "bad").exists()
    code, _, err = run_cli(["report", scenario, "-o", tmp_path / "bad", "--safe-against", "the mayor's rule",
                            "--replicates", "0", "--no-progress"], capsys)
    assert code == 2 and "names no rule of this scenario" in err and not (tmp_path / "bad").exists()
    out = tmp_path / "out"
    code, stdout, err = run_cli(["report", scenario, "-o", out, "--replicates", "0", "--no-progress",
                                 "--robust-bounds"], capsys)
    assert code == 0, err
    meta = json.loads((out / "safe_rule.json").read_text())
    assert meta["set"] == "bounds" and meta["baseline"].startswith("courts")
    assert "Rules that hold under doubt" in stdout and "monotone-response bounds, as asked" in stdout
    assert (out / "doubt_rules.csv").exists() and (out / "robust_rule.csv").exists()
