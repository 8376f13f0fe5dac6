"""The files a scenario reads: its own file, its data table and any candidate-rule tables.

Used to make sure that no output of a run replaces one of the run's inputs.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from policy.inputs.scenario import Scenario

__all__ = ["input_paths"]


def _tables(raw: Any, base: Path) -> list[Path]:
    """Every ``table = "..."`` path in the scenario's sections, resolved against ``base``."""
    found = []
    if isinstance(raw, dict):
        for key, value in raw.items():
            if key == "table" and isinstance(value, str):
                found.append((base / value).resolve())
            else:
                found += _tables(value, base)
    elif isinstance(raw, list):
        for value in raw:
            found += _tables(value, base)
    return found


def input_paths(scenario: Scenario) -> list[Path]:
    """Resolved paths of every file the scenario reads (those that name a file)."""
    paths = [scenario.path, scenario.data.path] + _tables(dict(scenario.raw), scenario.base_dir)
    return [p for p in dict.fromkeys(paths) if p is not None]
