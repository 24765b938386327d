"""Runs with the winding's thermal model: the armature resistance following its temperature.

The winding's temperature changes over seconds to hours, the armature current over
milliseconds, so the two are coupled by *waveform relaxation* ([1]_): the electrical run is
repeated with the resistance held piecewise constant over short segments (events on
``motor.resistance`` at the segment boundaries, each at the temperature the previous pass gave
at the segment's middle), and the temperature is recomputed from that run's copper loss, until
two passes agree within :data:`SETTLED_K`. The coupling is weak (``alpha20`` times the rise is
of order 0.1-0.4), so a few passes settle it; a pass that does not settle means the
winding has no steady state (a current-controlled winding whose loss grows with its
temperature faster than its cooling), which is reported as such.

The loss between trace rows is the row's ``R i^2``, linear in between, scaled so that it
integrates to the run's exact copper loss (the kernel's Simpson integral at full rate): the
energy is exact, its distribution in time is the trace's.

References
----------
.. [1] E. Lelarasmee, A. E. Ruehli, A. L. Sangiovanni-Vincentelli, "The waveform relaxation
   method for time-domain analysis of large scale integrated circuits", IEEE Trans. CAD 1
   (1982) 131-145.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import numpy as np

from dcsim.errors import SimulationError
from dcsim.plant.thermal import periodic_start_rise, resistance_at, temperature_rise
from dcsim.results.trace import SimulationResult, Summary, Trace
from dcsim.scenario.schema import Event, Scenario

SETTLED_K = 0.01
"""Largest temperature change between two passes that counts as settled [K]. Project choice
(no source): a hundredth of a kelvin changes the resistance by 4e-5 of itself."""

MAX_PASSES = 12
"""Passes before the coupling is declared unsettled. Project choice (no source)."""

MIN_SEGMENTS = 20
MAX_SEGMENTS = 400
SEGMENTS_PER_TAU = 50
"""The resistance is updated every ``min(duration / 20, tau / 50)`` (at most 400 updates):
over a segment of ``tau / 50`` the temperature moves by at most 2 % of its distance to its
final value, taken at the segment's middle. Project choice (no source)."""


def simulate_with_winding(
    scenario: Scenario,
    run: Callable[[Scenario, Callable[[float], None] | None], SimulationResult],
    progress: Callable[[float], None] | None = None,
) -> SimulationResult:
    """Run a scenario with a ``[thermal]`` table (see the module docstring).

    Parameters
    ----------
    scenario : Scenario
        With ``scenario.thermal`` set.
    run : callable
        One electrical run: ``run(scenario, progress) -> SimulationResult``.
    progress : callable, optional
        Fraction done (0..1); each pass takes half of what is left.

    Returns
    -------
    SimulationResult
        The last pass, with the column ``winding_temperature_K`` [K] (and
        ``winding_resistance_ohm`` [ohm]) and the summary keys ``peak_winding_temperature_K``,
        ``final_winding_temperature_K``, ``initial_winding_temperature_K``,
        ``winding_temperature_rise_K`` (peak over the ambient), ``thermal_passes``.
    """
    th = scenario.thermal
    assert th is not None
    duration = scenario.simulation.duration
    cycle = scenario.simulation.cycle_time
    if not th.coupled:
        result = run(scenario, progress)
        r = np.full(result.trace.rows, scenario.motor.resistance)
        temp, start = _temperatures(scenario, result, r)
        return _finish(scenario, result, temp, r, start, passes=1)

    segments = int(
        min(
            MAX_SEGMENTS,
            max(MIN_SEGMENTS, math.ceil(SEGMENTS_PER_TAU * duration / th.time_constant)),
        )
    )
    edges = np.linspace(0.0, duration, segments + 1)
    mids = 0.5 * (edges[:-1] + edges[1:])
    start_K = th.initial_temperature if th.initial_temperature is not None else th.ambient
    seg_temp = np.full(segments, start_K)
    change = math.inf
    for n in range(MAX_PASSES):
        seg_r = resistance_at(scenario.motor.resistance, seg_temp, th.reference_temperature)
        variant = _with_resistances(scenario, edges, seg_r)
        result = run(variant, _scaled(progress, n))
        t = result.trace["time_s"]
        row_seg = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, segments - 1)
        r_rows = seg_r[row_seg]
        temp, start = _temperatures(scenario, result, r_rows)
        new_seg = np.interp(mids, t, temp)
        change = float(np.max(np.abs(new_seg - seg_temp)))
        if change <= SETTLED_K:
            return _finish(scenario, result, temp, r_rows, start, passes=n + 1)
        seg_temp = new_seg
    raise SimulationError(
        f"{scenario.source}: the winding temperature did not settle in {MAX_PASSES} passes of "
        f"the thermal coupling (last change {change:.3g} K): the winding has no steady state "
        "at this duty (its copper loss grows with temperature faster than it cools: a "
        "current-controlled winding past thermal runaway). Reduce the current or the thermal "
        "resistance, or set thermal.coupled = false to see the uncoupled rise."
        + ("" if cycle is None else " (with simulation.cycle_time: the periodic state)")
    )


def _scaled(progress, n: int):
    if progress is None:
        return None
    lo, width = 1.0 - 0.5**n, 0.5 ** (n + 1)
    return lambda f: progress(lo + width * f)


def _with_resistances(sc: Scenario, edges: np.ndarray, seg_r: np.ndarray) -> Scenario:
    """The scenario with the resistance of each segment set by events (t = 0 in the motor)."""
    motor = dataclasses.replace(sc.motor, resistance=float(seg_r[0]))
    extra = [
        Event(at=float(t), changes=(("motor.resistance", float(r)),))
        for t, r in zip(edges[1:-1], seg_r[1:], strict=True)
    ]
    events = tuple(sorted((*sc.events, *extra), key=lambda e: e.at))
    return dataclasses.replace(sc, motor=motor, events=events)


def _temperatures(
    sc: Scenario, result: SimulationResult, r_rows: np.ndarray
) -> tuple[np.ndarray, float]:
    """Winding temperature at each trace row [K], and at the start of the run [K]."""
    th = sc.thermal
    t = result.trace["time_s"]
    loss = r_rows * result.trace["current_A"] ** 2
    total = float(0.5 * np.sum(np.diff(t) * (loss[1:] + loss[:-1])))
    exact = float(result.summary["energy_copper_loss_J"])
    if total > 0.0:
        loss = loss * (exact / total)
    cycle = sc.simulation.cycle_time
    if cycle is not None:
        from_zero = temperature_rise(t, loss, th.resistance, th.time_constant, 0.0)
        theta0 = periodic_start_rise(from_zero[-1], float(t[-1]), cycle, th.time_constant)
        rise = from_zero + theta0 * np.exp(-(t - t[0]) / th.time_constant)
        start = th.ambient + theta0
    else:
        start = th.initial_temperature if th.initial_temperature is not None else th.ambient
        rise = temperature_rise(t, loss, th.resistance, th.time_constant, start - th.ambient)
    return th.ambient + rise, float(start)


def _finish(
    sc: Scenario,
    result: SimulationResult,
    temp: np.ndarray,
    r_rows: np.ndarray,
    start_K: float,
    *,
    passes: int,
) -> SimulationResult:
    columns = dict(result.trace.columns)
    columns["winding_temperature_K"] = temp
    columns["winding_resistance_ohm"] = np.asarray(r_rows, dtype=float)
    summary = dict(result.summary)
    peak = float(np.max(temp))
    summary.update(
        {
            "initial_winding_temperature_K": start_K,
            "peak_winding_temperature_K": peak,
            "peak_winding_temperature_time_s": float(result.trace["time_s"][int(np.argmax(temp))]),
            "final_winding_temperature_K": float(temp[-1]),
            "winding_temperature_rise_K": peak - sc.thermal.ambient,
            "thermal_passes": passes,
        }
    )
    own = {float(e.at) for e in sc.events}
    return dataclasses.replace(
        result,
        scenario=sc,
        trace=Trace(columns),
        summary=Summary(summary),
        event_times_s=tuple(t for t in result.event_times_s if t in own),
    )
