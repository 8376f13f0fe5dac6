"""Names of the modules that extend the input stage when imported, kept as strings.

Scenario sections of later stages and the ``[data] simulate`` source register themselves when
their modules are imported. The package names those modules here (``policy/__init__``), and
the input stage imports them by name only when a scenario is parsed or a simulated case table
is read: so this stage never imports a later one, and start-up imports none of them.
This module imports nothing, so naming a module costs nothing at start-up.
"""

from __future__ import annotations

#: modules that call :func:`policy.inputs.scenario.register_section` when imported
SECTION_MODULES: list[str] = []
#: modules that call :func:`policy.inputs.loading.register_simulator` when imported
SIMULATOR_MODULES: list[str] = []


def register_section_module(module: str) -> None:
    """Name a module that registers scenario sections when imported (imported on first parse)."""
    if module not in SECTION_MODULES:
        SECTION_MODULES.append(module)


def register_simulator_module(module: str) -> None:
    """Name a module that registers the ``[data] simulate`` source when imported (imported when
    a simulated scenario's cases are read and no simulator is registered yet)."""
    if module not in SIMULATOR_MODULES:
        SIMULATOR_MODULES.append(module)
