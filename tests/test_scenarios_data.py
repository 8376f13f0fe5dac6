"""The example scenarios' data files are what their generating script writes."""

from __future__ import annotations

import importlib.util

import pandas as pd

from .conftest import SCENARIOS


def test_committed_data_match_the_generating_script(tmp_path):
    spec = importlib.util.spec_from_file_location("make_data", SCENARIOS / "data" / "make_data.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    for fresh in module.build(tmp_path):
        committed = pd.read_csv(SCENARIOS / "data" / fresh.name, low_memory=False)
        pd.testing.assert_frame_equal(pd.read_csv(fresh, low_memory=False), committed, check_exact=False, rtol=1e-7, atol=1e-8)
