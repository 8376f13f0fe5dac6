"""Checks of the command line's own input before anything is computed: numeric options in
range, the output folder claimed, and terminal text with its control characters shown.

The CLI calls these at the start of each command, so a bad option or an unusable output folder
stops the run before any work and before any file is written.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import List, Optional

from rich.console import Console

from policy.inputs.limits import number as check_number, whole_number

__all__ = ["VisibleConsole", "MAX_GRID_POINTS", "claim", "check_options", "check_constraint_numbers", "most_workers"]

#: most grid points per axis of a sweep (a map's grid holds points**2 cells, each a rule)
MAX_GRID_POINTS = 2_000

#: control characters (C0 but line end and tab, DEL, C1): a title or label holding them could clear
#: the screen or retitle the window; they are shown as \xNN instead
_CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f]")


class VisibleConsole(Console):
    """A console that shows control characters in text visibly (``\\x1b``) instead of sending them."""

    def render_str(self, text, **kwargs):
        return super().render_str(_CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", text), **kwargs)


def claim(out: Path, *scenarios) -> list:
    """Check and hold the output folder before computing; return the input files of the run
    (of each scenario given as a path or a Scenario)."""
    from policy.inputs.paths import input_paths
    from policy.outputs import claim_output_folder
    from policy.running.pipeline import as_scenario

    claim_output_folder(out)
    return [p for sc in scenarios if sc is not None for p in input_paths(as_scenario(sc))]


def most_workers() -> int:
    """Most worker processes of --workers: four per core (more only add waiting and memory)."""
    from policy.running.distributed import MAX_LOCAL_WORKERS_PER_CORE, available_cores

    return MAX_LOCAL_WORKERS_PER_CORE * available_cores()


def check_options(**values) -> None:
    """Check numeric options: name -> (value, low, high); None values were not given."""
    for name, (value, low, high) in values.items():
        if value is None:
            continue
        option = "--" + name.replace("_", "-")
        if isinstance(value, int) and not isinstance(value, bool):
            whole_number(value, option, low=low, high=high)
        elif name == "interval":
            check_number(value, option, low=0, high=1, low_open=True, high_open=True,
                         expected="a coverage strictly between 0 and 1, e.g. 0.95")
        else:
            check_number(value, option, low=low, high=high)


def check_constraint_numbers(principal_fairness: Optional[List[str]], max_share: Optional[List[str]],
                             max_rate: Optional[List[str]]) -> None:
    """The numbers of the NAME=NUMBER constraint shorthands: finite, in 0..1, the option named."""
    for option, items in (("--principal-fairness", principal_fairness), ("--max-share", max_share),
                          ("--max-rate", max_rate)):
        for item in items or []:
            _, _, value = item.partition("=")
            try:
                value = float(value)
            except ValueError:
                continue  # the constraint's own parser says what it expected
            check_number(value, f"{option} {item}", low=0, high=1, expected="a share or probability in 0..1")
