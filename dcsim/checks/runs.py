"""The simulations the checks need: the scenario itself and its variants.

- ``nominal``: the scenario as written.
- ``high_supply``: the same at ``checks.supply_max`` (the hardest start for the fuse). In
  voltage mode the commanded voltage scales with the supply (the same duty: an open-loop PWM
  drive passes a higher supply on to the armature).
- ``stall``: the rotor locked from t = 0 for 1.25 x ``checks.stall_clear_time``, at
  ``checks.supply_min`` when given (the slowest clearing), everything else as written (a
  supply profile or events included). With a ``[thermal]`` table the stalled winding starts at
  the nominal run's hottest temperature (hot copper draws the least stall current: the slowest
  clearing) and is not repeated.

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


def variants(sc: Scenario) -> list[tuple[str, str, Callable[[dict[str, Run]], Scenario]]]:
    """``(name, description, build)`` of every run the scenario's checks need, in order;
    ``build(done)`` gets the runs made so far."""
    out: list[tuple[str, str, Callable[[dict[str, Run]], Scenario]]] = [
        ("nominal", "the scenario as written", lambda done: sc)
    ]
    ck = sc.checks
    if sc.fuse is not None and ck is not None and ck.supply_max is not None:
        out.append(
            (
                "high_supply",
                f"supply.voltage = {ck.supply_max:g} V (checks.supply_max)"
                + (", the same duty" if sc.control.mode == "voltage" else ""),
                lambda done: _at_supply(sc, ck.supply_max, "checks.supply_max"),
            )
        )
    if sc.fuse is not None and ck is not None and ck.stall_clear_time is not None:
        where = "" if ck.supply_min is None else f", supply.voltage = {ck.supply_min:g} V"
        if sc.thermal is not None:
            where += ", the winding starting at the nominal run's hottest"
        out.append(
            (
                "stall",
                f"rotor locked from t = 0 for {STALL_RUN_FACTOR * ck.stall_clear_time:g} s{where}",
                lambda done: _stalled(sc, done.get("nominal")),
            )
        )
    return out


def run_all(sc: Scenario, progress: Callable[[str, float], None] | None = None) -> CheckRuns:
    """Run every variant; ``progress(name, fraction)`` reports each run's progress."""
    runs: dict[str, Run] = {}
    for name, description, build in variants(sc):
        try:
            variant = build(runs)
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
    changes: dict[str, float] = {"supply.voltage": voltage_V}
    if sc.control.mode == "voltage" and sc.supply.voltage > 0.0:
        changes["control.voltage"] = sc.control.voltage * voltage_V / sc.supply.voltage
    return sc.with_changes(changes)


def _stalled(sc: Scenario, nominal: Run | None) -> Scenario:
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
    simulation = dataclasses.replace(
        base.simulation, duration=duration, record_interval=None, cycle_time=None
    )
    thermal = base.thermal
    if thermal is not None and nominal is not None and nominal.result is not None:
        hottest = float(nominal.result.summary["peak_winding_temperature_K"])
        thermal = dataclasses.replace(thermal, initial_temperature=hottest)
    load = dataclasses.replace(base.load, locked=True)
    return dataclasses.replace(
        base, simulation=simulation, load=load, events=events, thermal=thermal
    ).with_changes({})
