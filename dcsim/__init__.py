"""dcsim: time-domain simulation of brushed / permanent-magnet DC motor drives.

Public API::

    import dcsim
    sc = dcsim.load_scenario("scenarios/coolant_pump_start.toml")
    res = dcsim.simulate(sc)
    res.trace["current_A"], res.summary["i2t_A2s"]
    sc2 = sc.with_changes({"motor.inductance": "3 mH"})

The names are imported lazily, so that ``import dcsim`` (and the command line's ``--help``)
does not pay for numba, scipy or matplotlib until a simulation is run.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_LAZY = {
    "load_scenario": "dcsim.scenario.load",
    "load_scenario_text": "dcsim.scenario.load",
    "Scenario": "dcsim.scenario.schema",
    "simulate": "dcsim.engine.run",
    "SimulationResult": "dcsim.results.trace",
    "Trace": "dcsim.results.trace",
    "Summary": "dcsim.results.trace",
    "write_outputs": "dcsim.results.io",
    "DcsimError": "dcsim.errors",
    "ScenarioError": "dcsim.errors",
    "SimulationError": "dcsim.errors",
}

__all__ = [
    "DcsimError",
    "Scenario",
    "ScenarioError",
    "SimulationError",
    "SimulationResult",
    "Summary",
    "Trace",
    "__version__",
    "load_scenario",
    "load_scenario_text",
    "simulate",
    "write_outputs",
]

if TYPE_CHECKING:  # pragma: no cover
    from dcsim.engine.run import simulate
    from dcsim.errors import DcsimError, ScenarioError, SimulationError
    from dcsim.results.io import write_outputs
    from dcsim.results.trace import SimulationResult, Summary, Trace
    from dcsim.scenario.load import load_scenario, load_scenario_text
    from dcsim.scenario.schema import Scenario


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'dcsim' has no attribute {name!r}")
    return getattr(import_module(module), name)


def __dir__() -> list[str]:
    return __all__
