"""The demo's outputs are identical to the recorded ones (tests/reference/demo_digests.json,
written by tests/reference/demo_digests.py) to 9 significant digits of every number: a
refactoring must not change any output file, while the last bits that differ between library
releases on a fresh machine do not count.
A change that is meant to change outputs rewrites the digests with that script, in the same commit."""

from __future__ import annotations

import json

from .conftest import ROOT
from .reference.demo_digests import run_all


def test_demo_outputs_are_identical_to_the_recorded_ones(tmp_path):
    recorded = json.loads((ROOT / "tests" / "reference" / "demo_digests.json").read_text(encoding="utf-8"))
    now = run_all(tmp_path.resolve())
    assert sorted(now) == sorted(recorded)
    changed = sorted(name for name in now if now[name] != recorded[name])
    assert changed == []
