"""Scenarios: the TOML files dcsim runs, read into immutable SI dataclasses.

Use :func:`load_scenario` (a file) or :func:`load_scenario_text` (a string); change a copy with
:meth:`Scenario.with_changes`. :data:`KEYS` lists every accepted key with its unit and default.
"""

from dcsim.scenario.load import apply_changes, load_scenario, load_scenario_text
from dcsim.scenario.schema import (
    KEYS,
    REQUIRED,
    REQUIRED_TABLES,
    About,
    Control,
    Event,
    KeySpec,
    Load,
    Motor,
    Scenario,
    Simulation,
    Supply,
    changeable_keys,
)

__all__ = [
    "KEYS",
    "REQUIRED",
    "REQUIRED_TABLES",
    "About",
    "Control",
    "Event",
    "KeySpec",
    "Load",
    "Motor",
    "Scenario",
    "Simulation",
    "Supply",
    "apply_changes",
    "changeable_keys",
    "load_scenario",
    "load_scenario_text",
]
