"""Brown-out: the lowest bus voltage of the run against the controller's brown-out threshold.

A controller (its regulator and supervisor) resets when its supply, the bus, falls below its
brown-out threshold; the drive then stops whatever it was doing. The check holds the nominal
run's minimum bus voltage, with its time, against ``checks.brown_out_voltage`` (a pass at or
above it). The margin is ``(V_min - V_bo) / V_bo``.
"""

from __future__ import annotations

import numpy as np

from dcsim.checks.runs import CheckRuns
from dcsim.checks.verdict import Verdict, judged, not_applicable
from dcsim.results.trace import SimulationResult
from dcsim.scenario.schema import Checks, Scenario

GROUP = "bus"
NAME = "bus.brown_out"
TITLE = "Bus stays above the controller's brown-out threshold"


def minimum_bus_voltage(result: SimulationResult) -> tuple[float, float]:
    """Lowest bus voltage of a run [V] and its time [s].

    The summary's ``min_bus_voltage_V`` and ``min_bus_voltage_time_s`` (the bridge models
    track both at every sub-step); without the time (the ideal bridge), the time of the
    lowest trace row.
    """
    s = result.summary
    v_min = float(s["min_bus_voltage_V"])
    t_min = s.get("min_bus_voltage_time_s")
    if t_min is None:
        tr = result.trace
        t_min = float(tr["time_s"][int(np.argmin(tr["bus_voltage_V"]))])
    return v_min, float(t_min)


def brown_out_checks(sc: Scenario, runs: CheckRuns) -> list[Verdict]:
    """The brown-out verdict of the nominal run (module docstring)."""
    ck = sc.checks or Checks()
    if ck.brown_out_voltage is None:
        return [not_applicable(NAME, GROUP, TITLE, "give checks.brown_out_voltage")]
    result = runs.result("nominal")
    if result is None:
        run = runs.get("nominal")
        why = run.error if run is not None and run.error else "no nominal run"
        return [Verdict(NAME, GROUP, TITLE, "fail", detail=why)]
    v_min, t_min = minimum_bus_voltage(result)
    return [
        judged(
            NAME,
            GROUP,
            TITLE,
            v_min,
            ck.brown_out_voltage,
            "V",
            upper=False,
            detail=f"lowest bus voltage {v_min:.4g} V at {t_min:.4g} s",
            values={"min_bus_voltage_time_s": t_min},
        )
    ]
