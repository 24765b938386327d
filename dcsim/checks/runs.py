"""The simulations the checks need: the scenario itself and its variants.

- ``nominal``: the scenario as written.
- ``high_supply``: the same at ``checks.supply_max`` (the hardest start for the fuse).
- ``stall``: the rotor locked from t = 0 for 1.25 x ``checks.stall_clear_time``, at
  ``checks.supply_min`` when given (the slowest clearing), everything else as written.

A run that stops (the kernel's :class:`~dcsim.errors.SimulationError`) is kept as its message:
the checks that needed it fail and say why.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field

from dcsim.engine.run import simulate
from dcsim.errors import ScenarioError, SimulationError
from dcsim.results.trace import SimulationResult
from dcsim.scenario.schema import Scenario

STALL_RUN_FACTOR = 1.25
"""The locked-rotor run lasts this many times the clearing limit, so that a fuse melting a
little late shows when. Project choice (no source)."""


@dataclass(frozen=True)
class Run:
    """One simulation behind the checks.

    Attributes
    ----------
    name : str
        ``"nominal"``, ``"high_supply"`` or ``"stall"``.
    description : str
        What differs from the scenario, in words.
    scenario : Scenario or None
        The variant (``None`` when it could not be built).
    result : SimulationResult or None
        ``None`` when the run stopped or could not be built.
    error : str
        Why there is no result ("" otherwise).
    """

    name: str
    description: str
    scenario: Scenario | None = None
    result: SimulationResult | None = None
    error: str = ""


@dataclass(frozen=True)
class CheckRuns:
    """The runs of one check session, by name."""

    runs: dict[str, Run] = field(default_factory=dict)

    def get(self, name: str) -> Run | None:
        return self.runs.get(name)

    def result(self, name: str) -> SimulationResult | None:
        run = self.runs.get(name)
        return None if run is None else run.result


def variants(sc: Scenario) -> list[tuple[str, str, Callable[[], Scenario]]]:
    """``(name, description, build)`` of every run the scenario's checks need."""
    out: list[tuple[str, str, Callable[[], Scenario]]] = [
        ("nominal", "the scenario as written", lambda: sc)
    ]
    ck = sc.checks
    if sc.fuse is not None and ck is not None and ck.supply_max is not None:
        out.append(
            (
                "high_supply",
                f"supply.voltage = {ck.supply_max:g} V (checks.supply_max)",
                lambda: _at_supply(sc, ck.supply_max, "checks.supply_max"),
            )
        )
    if sc.fuse is not None and ck is not None and ck.stall_clear_time is not None:
        where = "" if ck.supply_min is None else f", supply.voltage = {ck.supply_min:g} V"
        out.append(
            (
                "stall",
                f"rotor locked from t = 0 for {STALL_RUN_FACTOR * ck.stall_clear_time:g} s{where}",
                lambda: _stalled(sc),
            )
        )
    return out


def run_all(sc: Scenario, progress: Callable[[str, float], None] | None = None) -> CheckRuns:
    """Run every variant; ``progress(name, fraction)`` reports each run's progress."""
    runs: dict[str, Run] = {}
    for name, description, build in variants(sc):
        try:
            variant = build()
        except ScenarioError as err:
            runs[name] = Run(name, description, error=f"cannot build this run: {err}")
            continue
        report = None if progress is None else (lambda f, n=name: progress(n, f))
        try:
            result = simulate(variant, report)
        except SimulationError as err:
            runs[name] = Run(name, description, variant, error=f"the run stopped: {err}")
            continue
        runs[name] = Run(name, description, variant, result)
    return CheckRuns(runs)


def _at_supply(sc: Scenario, voltage_V: float, key: str) -> Scenario:
    if sc.battery is not None:
        raise ScenarioError(
            "expected no supply corner with a [battery] (its open-circuit voltage is the supply "
            "voltage; change battery.initial_state_of_charge instead)",
            source=sc.source,
            key=key,
        )
    return sc.with_changes({"supply.voltage": voltage_V})


def _stalled(sc: Scenario) -> Scenario:
    ck = sc.checks
    assert ck is not None and ck.stall_clear_time is not None
    base = sc if ck.supply_min is None else _at_supply(sc, ck.supply_min, "checks.supply_min")
    duration = STALL_RUN_FACTOR * ck.stall_clear_time
    events = tuple(
        dataclasses.replace(e, changes=tuple(c for c in e.changes if c[0] != "load.locked"))
        for e in base.events
        if e.at <= duration
    )
    events = tuple(e for e in events if e.changes)
    cycle = base.simulation.cycle_time
    simulation = dataclasses.replace(
        base.simulation,
        duration=duration,
        record_interval=None,
        cycle_time=None if cycle is None else max(cycle, duration),
    )
    load = dataclasses.replace(base.load, locked=True)
    return dataclasses.replace(base, simulation=simulation, load=load, events=events).with_changes(
        {}
    )
