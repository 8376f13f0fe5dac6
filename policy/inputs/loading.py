"""Where a scenario's cell table comes from: its case table (read in blocks), its counts
table, or the simulator that the demo registers for ``[data] simulate``.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Callable

from policy.errors import InputError
from policy.inputs.registry import SIMULATOR_MODULES, register_simulator_module

if TYPE_CHECKING:  # the readers are imported when a table is read: importing this module stays cheap
    import pandas as pd

    from policy.inputs.cells import CellTable
    from policy.inputs.scenario import Scenario

__all__ = ["load_cell_table", "register_simulator", "register_simulator_module"]


#: The case simulator behind ``[data] simulate``: set by the demo package when it is imported
#: (:func:`register_simulator`), so this stage never imports the demo.
_SIMULATOR: Callable[[int, int | None], "pd.DataFrame"] | None = None


def register_simulator(simulate: Callable[[int, int | None], "pd.DataFrame"]) -> None:
    """Make ``simulate(n_cases, seed)`` the source of scenarios whose ``[data]`` says ``simulate``."""
    global _SIMULATOR
    _SIMULATOR = simulate


def _simulator() -> Callable[[int, int | None], "pd.DataFrame"] | None:
    for module in SIMULATOR_MODULES:  # named by the package (policy.inputs.registry)
        if _SIMULATOR is not None:
            break
        importlib.import_module(module)
    return _SIMULATOR


def load_cell_table(scenario: Scenario, progress: bool | None = None) -> CellTable:
    """The cell table of a scenario: read its case or counts table, or run its simulator.

    A case table file is read in blocks (:func:`policy.inputs.stream.stream_cell_table`), with a
    progress bar when ``progress`` (None: when standard error is a terminal and the file is
    large).
    """
    from policy.inputs.cells import CellTable
    from policy.inputs.counting import _counts_columns
    from policy.inputs.stream import stream_cell_table
    from policy.inputs.tables import read_table

    kind = scenario.data.kind
    if kind == "simulate":
        simulate = _simulator()
        if simulate is None:
            raise InputError(f"{scenario.file}: [data] simulate needs the demo's simulator, which is not loaded "
                             "(import policy, or policy.demo, first).")
        frame = simulate(scenario.data.simulate, scenario.seed)
        return CellTable.from_cases(frame, scenario, file=f"simulated case table ({scenario.data.simulate:,} cases)")
    if kind == "case_table":
        # read in blocks (policy.inputs.stream): memory bounded by the cells, identical to reading it whole
        return stream_cell_table(scenario.data.path, scenario, f"case table ({scenario.file} [data] case_table)",
                                 progress=progress)
    if kind == "counts_table":
        frame = read_table(scenario.data.path, _counts_columns(scenario), f"counts table ({scenario.file} [data] counts_table)")
        return CellTable.from_counts(frame, scenario)
    raise InputError(f"{scenario.file}: [data] gives a risk-level table; there is no cell table of counts to read.")
