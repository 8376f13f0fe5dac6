"""The confounded demo scenario through the command line: the arm check warns right after the
cautions, and the bounds and the assumption-free comparison are written."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from .conftest import SCENARIOS, run_cli

CONFOUNDED = SCENARIOS / "demo_confounded.toml"


def _after_cautions(out: str) -> str:
    """What the command printed after the cautions panel (the only rounded box of the output)."""
    assert "Cautions" in out
    return out.rsplit("╯", 1)[1].lstrip()


def test_check_and_solve_warn_on_the_confounded_demo(tmp_path, capsys):
    code, out, err = run_cli(["check", CONFOUNDED], capsys)
    assert code == 0, err
    assert "arm check (unconfoundedness)" in out and "rejected" in out
    assert "WARNING: the randomized arm contradicts unconfoundedness" in out
    code, out, err = run_cli(["solve", CONFOUNDED, "--out", tmp_path], capsys)
    assert code == 0, err
    assert _after_cautions(out).startswith("WARNING: the randomized arm contradicts unconfoundedness")
    assert "monotone-response bounds" in out
    summary = json.loads((tmp_path / "arm_check.json").read_text())
    assert summary["rejects"] is True and summary["p_value_bonferroni"] < 0.05
    assert summary["gamma_lower"] > 1
    assert len(summary["top_cells"]) == 5
    cells = pd.read_csv(tmp_path / "arm_check_cells.csv")
    assert {"outcome", "level", "rate_shown", "rate_not_shown", "contribution"} <= set(cells.columns)


def test_estimate_writes_the_bounds_table(tmp_path, capsys):
    code, out, err = run_cli(["estimate", CONFOUNDED, "--out", tmp_path], capsys)
    assert code == 0, err
    assert _after_cautions(out).startswith("WARNING")
    frame = pd.read_csv(tmp_path / "risk_bounds.csv")
    gamma_low = json.loads((tmp_path / "arm_check.json").read_text())["gamma_lower"]
    expected = ["point"] + [f"gamma_{g:g}_{e}" for g in sorted([1.1, 1.25, 1.5, 2, 3, 5, np.ceil(gamma_low * 100) / 100])
                            for e in ("lower", "upper")] + ["bounds_lower", "bounds_upper"]
    assert [c for c in frame.columns if c == "point" or c.startswith(("gamma_", "bounds_"))] == expected
    # the sensitivity intervals contain the point estimate and widen with Gamma
    assert (frame["gamma_1.1_lower"] <= frame["point"] + 1e-12).all()
    assert (frame["gamma_5_lower"] <= frame["gamma_1.1_lower"] + 1e-12).all()
    assert (frame["gamma_5_upper"] >= frame["gamma_1.1_upper"] - 1e-12).all()
    assert (frame["bounds_lower"] <= frame["bounds_upper"] + 1e-12).all()


def test_compare_reports_the_assumption_free_difference(tmp_path, capsys):
    code, out, err = run_cli(["compare", CONFOUNDED, "--out", tmp_path, "--replicates", "20", "--workers", "1",
                              "--no-progress"], capsys)
    assert code == 0, err
    assert "Assumption-free comparison of the arms" in out
    assert _after_cautions(out).startswith("WARNING")
    costs = pd.read_csv(tmp_path / "arm_costs.csv")
    assert len(costs) == 3 and costs["figure"].iloc[2].startswith("difference")
    assert costs["realized_cost_per_1000_cases"].iloc[2] == pytest.approx(
        costs["realized_cost_per_1000_cases"].iloc[1] - costs["realized_cost_per_1000_cases"].iloc[0])
    summary = json.loads((tmp_path / "compare.json").read_text())
    assert "randomization" in " ".join(summary["assumption_free"]["assumes"]) or \
        "at random" in " ".join(summary["assumption_free"]["assumes"])


def test_sweep_adds_the_datas_gamma(tmp_path, capsys):
    code, out, err = run_cli(["sweep", CONFOUNDED, "--out", tmp_path, "--ratio", "new_offense", "--replicates", "0",
                              "--no-figures", "--no-progress"], capsys)
    assert code == 0, err
    meta = json.loads((tmp_path / "sweep.json").read_text())
    assert meta["gamma_lower_from_arm_check"] > 1
    assert meta["gamma_lower_from_arm_check"] in meta["gammas"]
    assert max(meta["gammas"]) >= 5
    assert _after_cautions(out).startswith("WARNING")


def test_report_page_shows_the_verdict_under_the_cautions():
    from policy.presentation.report import render_report
    from policy.running.pipeline import analyze

    html = render_report(analyze(CONFOUNDED)).html
    cautions, arm, contents = html.find('id="cautions"'), html.find('id="arm-check"'), html.find('aria-label="contents"')
    assert 0 < cautions < arm < contents
    assert "<strong>Warning: it contradicts unconfoundedness" in html


def test_report_comparison_opens_with_the_assumption_free_figure():
    from policy.assessment.compare import compare
    from policy.presentation.report import render_report
    from policy.presentation.report.model import ReportResults
    from policy.presentation.report.page import compared_rules
    from policy.running.pipeline import analyze

    comparison = compare(CONFOUNDED, replicates=0)
    html = render_report(ReportResults(analyze(CONFOUNDED), tuple(compared_rules(comparison)), (), comparison)).html
    section = html[html.find('<section id="comparison"'):]
    assert section.find("Assumption-free comparison of the arms") < section.find("<table")
    assert "difference (shown - not shown)" in section
    assert "if unconfoundedness fails" in section and "monotone bounds" in section

