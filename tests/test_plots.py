"""Figures of sweeps and maps (policy/presentation/plots.py): produced for every example scenario, non-empty."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import matplotlib.image as mpimg
import numpy as np
import pytest

from policy import load_scenario
from policy.outputs import write_outputs
from policy.presentation.plots import level_colours, save_figure, share_figure, sweep_files
from policy.assessment.sweep import sweep_scenario

from .conftest import SCENARIOS

SCENARIO_FILES = sorted(SCENARIOS.glob("*.toml"))


def _check_png(path):
    image = mpimg.imread(path)
    assert image.shape[0] > 300 and image.shape[1] > 300
    # something is drawn: a fair share of pixels is not the white background, in several colours
    rgb = image[..., :3]
    inked = np.any(rgb < 0.95, axis=-1)
    assert inked.mean() > 0.02
    assert np.ptp(rgb[inked], axis=0).max() > 0.5


def _svg_text(path):
    root = ET.parse(path).getroot()
    assert root.tag.endswith("svg")
    assert sum(1 for el in root.iter() if el.tag.endswith("path")) > 10
    # the footnote wraps its lines, so words are compared with whitespace runs made single spaces
    return " ".join(" ".join(t for el in root.iter() if el.tag.endswith("text") for t in el.itertext()).split())


@pytest.mark.parametrize("path", SCENARIO_FILES, ids=[p.stem for p in SCENARIO_FILES])
def test_figures_for_every_scenario(path, tmp_path):
    scenario = load_scenario(path)
    keys = list(scenario.outcome_keys)
    counts = scenario.data.kind != "risk_level_table"
    one = sweep_scenario(scenario, keys[:1], lp_points=8, replicates=10 if counts else None, workers=1)
    written = write_outputs(tmp_path / "one", sweep_files(one))
    two = sweep_scenario(scenario, keys[:2])
    written += write_outputs(tmp_path / "two", sweep_files(two, table_points=5))
    figures = [p for p in written if p.suffix in (".png", ".svg")]
    stems = ["sweep_shares", "sweep_regret", "map_lenient"] + (["sweep_prices"] if one.constrained is not None else [])
    assert sorted(p.name for p in figures) == sorted(f"{stem}.{fmt}" for stem in stems for fmt in ("png", "svg"))
    assert (one.constrained is not None) == bool(scenario.sections.get("constraints"))
    # bands wherever there are counts to resample or draws to sweep, and the figure says how they were made
    from policy.assessment.sweep.scenario_sweep import _has_draws

    banded = counts or _has_draws(scenario)
    assert (one.bands is not None) == banded
    for p in figures:
        assert p.stat().st_size > 10_000
        if p.suffix == ".png":
            _check_png(p)
        else:
            text = _svg_text(p)
            # the scenario's own labels and unit, and the assumptions footnote
            assert scenario.outcomes[0].label in text
            assert scenario.cost_unit in text
            assert "Assumes, for every curve" in text and "individual" in text
            if p.stem == "sweep_shares":
                for label in scenario.level_labels:
                    assert label in text
                assert ("bootstrap replicates" in text or "draws" in text) == banded


def test_share_figure_draws_bands_and_is_reproducible(tmp_path, demo_scenario):
    res = sweep_scenario(demo_scenario, ["new_offense"], gammas=[1.25], replicates=0)
    s = res.sweep
    x = np.linspace(s.lo, s.hi, 30)
    mid = s.lenient_share_at(x)
    bands = {"x": x, "low": np.clip(mid - 0.05, 0, 1), "high": np.clip(mid + 0.05, 0, 1), "label": "95% interval"}
    save_figure(share_figure(s, bands), tmp_path / "a.svg", "svg")
    assert "95% interval" in _svg_text(tmp_path / "a.svg")
    # the same result written twice gives the same bytes
    first = write_outputs(tmp_path / "r1", sweep_files(res, ["svg"]))
    second = write_outputs(tmp_path / "r2", sweep_files(res, ["svg"]))
    for a, b in zip(first, second):
        if a.suffix == ".svg":
            assert a.read_bytes() == b.read_bytes()


def test_level_colours_are_distinct_for_every_supported_count():
    for n in range(2, 9):
        colours = level_colours(n)
        assert len(set(colours)) == n
    with pytest.raises(ValueError, match="at most"):
        level_colours(9)
