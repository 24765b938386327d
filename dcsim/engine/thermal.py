"""Runs with the machine's thermal model: the armature resistance (and, with magnets, the
torque constant) following the temperatures.

The winding's temperature changes over seconds to hours, the armature current over
milliseconds, so the two are coupled by *waveform relaxation* ([1]_): the electrical run is
repeated with the resistance held piecewise constant over short segments (events on
``motor.resistance`` at the segment boundaries, each at the temperature the previous pass gave
at the segment's middle), and the temperature is recomputed from that run's copper loss, until
two passes agree within :data:`SETTLED_K`. The coupling is weak (``alpha20`` times the rise is
of order 0.1-0.4), so a few passes settle it; a pass that does not settle means the
winding has no steady state (a current-controlled winding whose loss grows with its
temperature faster than its cooling), which is reported as such. With the two-node network
(winding -> housing -> ambient) and a magnet coefficient, the torque constant follows the
housing node's temperature the same way (events on ``motor.torque_constant``).

The loss between trace rows is the row's ``R i^2``, linear in between, scaled so that it
integrates to the run's exact copper loss (the kernel's Simpson integral at full rate): the
energy is exact, its distribution in time is the trace's.

The iron loss (``motor.hysteresis_loss_torque``, ``motor.eddy_loss_coefficient``) heats the
machine too: the row's ``T_h |w| + B_e w^2`` (:mod:`dcsim.plant.machine`), scaled the same way
to the run's ``energy_iron_loss_J``, enters the **housing node** of the two-node network (the
armature iron sits in the rotor and stator body, not in the winding's copper; a lumped split
of our own, no source) and the **winding node** of the one-node model (its only node). Brush
losses are not fed to the network (they heat the commutator, outside both nodes). A
wound-field machine's field copper loss (:func:`field_loss_rows`, scaled to
``energy_field_copper_loss_J``) goes where the iron loss goes: the field poles sit in the
stator body (the same lumped split), and the field windings' resistances follow that node
(IEC 60028 copper, events on ``motor.field_resistance`` and, compound,
``motor.series_field_resistance``, as the armature's follow the winding node).

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
from dcsim.plant.thermal import (
    free_response,
    network_matrices,
    network_rise,
    periodic_start_rises,
    resistance_at,
    time_constants_s,
    torque_constant_at,
)
from dcsim.results.trace import SimulationResult, Summary, Trace
from dcsim.scenario.schema import Event, Scenario

SETTLED_K = 0.01
"""Largest temperature change between two passes that counts as settled [K]. Project choice
(no source): a hundredth of a kelvin changes the resistance by 4e-5 of itself."""

MAX_PASSES = 12
"""Passes before the coupling is declared unsettled. Project choice (no source)."""

RELAXATION_RANGE = (0.1, 10.0)
"""Bounds of the relaxation factor between passes. Aitken's dynamic relaxation (B. M. Irons,
R. C. Tuck, "A version of the Aitken accelerator for computer iteration", Int. J. Numer.
Meth. Eng. 1 (1969) 275-277) sets it from the last two updates: for a coupling of gain
``g`` per pass it tends to ``1 / (1 - g)`` -- below 1 for an alternating coupling (the field
and armature losses of a voltage-fed machine fall as the copper warms), above 1 for a slowly
converging one (a current-fed winding near its limit). A diverging coupling (``g > 1``,
thermal runaway) gives a negative factor, held at the lower bound, so it is never driven to
the fixed point with no physical meaning and is still reported. The upper bound (``g`` up to
0.9) keeps one noisy estimate from throwing the temperatures far. Project choice (no source)
for the bounds."""

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
        The last pass, with the columns ``winding_temperature_K`` [K] and
        ``winding_resistance_ohm`` [ohm] (two-node: ``housing_temperature_K`` [K]; with magnets
        ``torque_constant_Nm_A``) and the summary keys ``peak_winding_temperature_K``,
        ``peak_winding_temperature_time_s``, ``final_winding_temperature_K``,
        ``initial_winding_temperature_K``, ``winding_temperature_rise_K`` (peak over the
        ambient), ``thermal_passes`` (two-node also ``peak_housing_temperature_K``,
        ``final_housing_temperature_K``).
    """
    th = scenario.thermal
    assert th is not None
    a, b = network_matrices(th)
    if not th.coupled:
        result = run(scenario, progress)
        r = np.full(result.trace.rows, scenario.motor.resistance)
        temps, start = _temperatures(scenario, result, r, a, b)
        return _finish(scenario, result, temps, r, None, start, passes=1)

    duration = scenario.simulation.duration
    fastest = float(time_constants_s(a)[0])  # the winding node's, which R must follow
    per_tau = math.ceil(SEGMENTS_PER_TAU * duration / fastest)
    segments = int(min(MAX_SEGMENTS, max(MIN_SEGMENTS, per_tau)))
    edges = np.linspace(0.0, duration, segments + 1)
    mids = 0.5 * (edges[:-1] + edges[1:])
    x_start = _initial_rises(th, a)
    seg_temp = np.tile(th.ambient + x_start, (segments, 1))
    magnets = th.two_node and th.magnet_coefficient_per_K != 0.0
    change = math.inf
    omega, step_prev = 1.0, None
    for n in range(MAX_PASSES):
        seg_r = resistance_at(scenario.motor.resistance, seg_temp[:, 0], th.reference_temperature)
        seg_k = None
        if magnets:
            seg_k = torque_constant_at(
                scenario.motor.torque_constant,
                seg_temp[:, 1],
                th.reference_temperature,
                th.magnet_coefficient_per_K,
            )
        seg_field = _field_resistances(scenario, seg_temp)
        variant = _with_segments(scenario, edges, seg_r, seg_k, seg_field)
        result = run(variant, _scaled(progress, n))
        t = result.trace["time_s"]
        row_seg = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, segments - 1)
        r_rows = seg_r[row_seg]
        k_rows = None if seg_k is None else seg_k[row_seg]
        field_rows = {key: v[row_seg] for key, v in seg_field.items()}
        temps, start = _temperatures(scenario, result, r_rows, a, b, field_rows)
        new_seg = np.column_stack([np.interp(mids, t, temps[:, j]) for j in range(temps.shape[1])])
        step = new_seg - seg_temp
        change = float(np.max(np.abs(step)))
        if change <= SETTLED_K:
            return _finish(scenario, result, temps, r_rows, k_rows, start, passes=n + 1)
        if step_prev is not None:
            d = step - step_prev
            dd = float(np.sum(d * d))
            if dd > 0.0:
                omega = -omega * float(np.sum(step_prev * d)) / dd
            omega = min(max(omega, RELAXATION_RANGE[0]), RELAXATION_RANGE[1])
        seg_temp = seg_temp + omega * step
        step_prev = step
    cycle = scenario.simulation.cycle_time
    raise SimulationError(
        f"{scenario.source}: the winding temperature did not settle in {MAX_PASSES} passes of "
        f"the thermal coupling (last change {change:.3g} K): the winding has no steady state "
        "at this duty (its copper loss grows with temperature faster than it cools: a "
        "current-controlled winding past thermal runaway). Reduce the current or the thermal "
        "resistance, or set thermal.coupled = false to see the uncoupled rise."
        + ("" if cycle is None else " (with simulation.cycle_time: the periodic state)")
    )


def _initial_rises(th, a: np.ndarray) -> np.ndarray:
    """Node rises at t = 0 before any pass (the periodic start is found from the first pass)."""
    n = a.shape[0]
    if th.initial_temperature is None:
        return np.zeros(n)
    return np.full(n, th.initial_temperature - th.ambient)  # the machine soaked at it


def _scaled(progress, n: int):
    if progress is None:
        return None
    lo, width = 1.0 - 0.5**n, 0.5 ** (n + 1)
    return lambda f: progress(lo + width * f)


def _field_resistances(sc: Scenario, seg_temp: np.ndarray) -> dict[str, np.ndarray]:
    """Each segment's field-winding resistances [ohm] of a wound-field machine, by key: the
    field windings sit on the stator poles, so they follow the housing node (one-node model:
    its node) by IEC 60028 copper, from their values at ``thermal.reference_temperature``."""
    m, th = sc.motor, sc.thermal
    if m.kind == "permanent_magnet" or not th.coupled:
        return {}
    node = seg_temp[:, 1] if th.two_node else seg_temp[:, 0]
    out = {"field_resistance": resistance_at(m.field_resistance, node, th.reference_temperature)}
    if m.kind == "compound":
        out["series_field_resistance"] = resistance_at(
            m.series_field_resistance, node, th.reference_temperature
        )
    return out


def _with_segments(
    sc: Scenario,
    edges: np.ndarray,
    seg_r: np.ndarray,
    seg_k: np.ndarray | None,
    seg_field: dict[str, np.ndarray] | None = None,
) -> Scenario:
    """The scenario with each segment's resistance (and torque constant, field resistances)
    set by events."""
    seg_field = seg_field or {}
    motor = dataclasses.replace(sc.motor, resistance=float(seg_r[0]))
    extra = []
    for m, t in enumerate(edges[1:-1], start=1):
        changes = [("motor.resistance", float(seg_r[m]))]
        if seg_k is not None:
            changes.append(("motor.torque_constant", float(seg_k[m])))
        changes += [(f"motor.{key}", float(v[m])) for key, v in seg_field.items()]
        extra.append(Event(at=float(t), changes=tuple(changes)))
    if seg_k is not None:
        motor = dataclasses.replace(motor, torque_constant=float(seg_k[0]))
    if seg_field:
        motor = dataclasses.replace(motor, **{key: float(v[0]) for key, v in seg_field.items()})
    events = tuple(sorted((*sc.events, *extra), key=lambda e: e.at))
    return dataclasses.replace(sc, motor=motor, events=events)


def _temperatures(
    sc: Scenario,
    result: SimulationResult,
    r_rows: np.ndarray,
    a: np.ndarray,
    b: np.ndarray,
    field_rows: dict[str, np.ndarray] | None = None,
) -> tuple[np.ndarray, float]:
    """Node temperatures at each trace row [K] (column 0 the winding), and the winding's at the
    start of the run [K]."""
    th = sc.thermal
    t = result.trace["time_s"]
    loss = _scaled_to(t, r_rows * result.trace["current_A"] ** 2, "energy_copper_loss_J", result)
    m = sc.motor
    w = result.trace["speed_rad_s"]
    iron = m.hysteresis_loss_torque * np.abs(w) + m.eddy_loss_coefficient * w * w
    # the stator's loss: iron and field copper, both into the housing node (two nodes)
    stator = _scaled_to(t, iron, "energy_iron_loss_J", result)
    field = field_loss_rows(sc, result, field_rows)
    stator = stator + _scaled_to(t, field, "energy_field_copper_loss_J", result)
    b_stator = b if not th.two_node else np.array([0.0, 1.0 / th.housing_capacity])
    cycle = sc.simulation.cycle_time
    n = a.shape[0]
    has_stator = bool(np.any(stator != 0.0))
    if cycle is not None:
        from_zero = network_rise(t, loss, a, b, np.zeros(n))
        if has_stator:
            from_zero = from_zero + network_rise(t, stator, a, b_stator, np.zeros(n))
        x0 = periodic_start_rises(from_zero[-1], a, float(t[-1] - t[0]), cycle)
        rises = from_zero + free_response(a, x0, t)
    else:
        x0 = _initial_rises(th, a)
        rises = network_rise(t, loss, a, b, x0)
        if has_stator:  # superposition: the network is linear
            rises = rises + network_rise(t, stator, a, b_stator, np.zeros(n))
    return th.ambient + rises, float(th.ambient + x0[0])


def field_loss_rows(
    sc: Scenario, result: SimulationResult, field_rows: dict[str, np.ndarray] | None = None
) -> np.ndarray:
    """Copper loss of a wound-field machine's field windings at each trace row [W].

    Shunt / separately excited ``R_f i_f^2``; series ``R_f i_a^2`` (its series field);
    compound ``R_f i_f^2 + R_se i_a^2``; zeros for a permanent-magnet machine. The
    resistances at each row come from ``field_rows`` (keys ``field_resistance``,
    ``series_field_resistance``, as the thermal coupling set them), else the given ones.
    """
    m = sc.motor
    i_a = result.trace["current_A"]
    if m.kind == "permanent_magnet":
        return np.zeros_like(i_a)
    field_rows = field_rows or {}
    rf = field_rows.get("field_resistance", m.field_resistance or 0.0)
    if m.kind == "series":
        return rf * i_a * i_a
    i_f = result.trace["field_current_A"]
    loss = rf * i_f * i_f
    if m.kind == "compound":
        rse = field_rows.get("series_field_resistance", m.series_field_resistance or 0.0)
        loss = loss + rse * i_a * i_a
    return loss


def _scaled_to(t: np.ndarray, power_W: np.ndarray, key: str, result: SimulationResult):
    """The rows' power [W] scaled so that its trapezoidal integral is the summary's ``key``."""
    total = float(0.5 * np.sum(np.diff(t) * (power_W[1:] + power_W[:-1])))
    exact = float(result.summary.get(key, total))
    if total > 0.0:
        return power_W * (exact / total)
    return power_W


def _finish(
    sc: Scenario,
    result: SimulationResult,
    temps: np.ndarray,
    r_rows: np.ndarray,
    k_rows: np.ndarray | None,
    start_K: float,
    *,
    passes: int,
) -> SimulationResult:
    columns = dict(result.trace.columns)
    winding = temps[:, 0]
    columns["winding_temperature_K"] = winding
    columns["winding_resistance_ohm"] = np.asarray(r_rows, dtype=float)
    summary = dict(result.summary)
    peak = float(np.max(winding))
    summary.update(
        {
            "initial_winding_temperature_K": start_K,
            "peak_winding_temperature_K": peak,
            "peak_winding_temperature_time_s": float(
                result.trace["time_s"][int(np.argmax(winding))]
            ),
            "final_winding_temperature_K": float(winding[-1]),
            "winding_temperature_rise_K": peak - sc.thermal.ambient,
            "thermal_passes": passes,
        }
    )
    if temps.shape[1] > 1:
        columns["housing_temperature_K"] = temps[:, 1]
        summary["peak_housing_temperature_K"] = float(np.max(temps[:, 1]))
        summary["final_housing_temperature_K"] = float(temps[-1, 1])
    if k_rows is not None:
        columns["torque_constant_Nm_A"] = np.asarray(k_rows, dtype=float)
        summary["final_torque_constant_Nm_A"] = float(k_rows[-1])
    own = {float(e.at) for e in sc.events}
    return dataclasses.replace(
        result,
        scenario=sc,
        trace=Trace(columns),
        summary=Summary(summary),
        event_times_s=tuple(t for t in result.event_times_s if t in own),
    )
