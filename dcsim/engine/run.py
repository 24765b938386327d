"""``simulate``: scenario -> kernel -> :class:`~dcsim.results.trace.SimulationResult`."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from dcsim.engine import layout as L
from dcsim.engine.assemble import KernelInputs, assemble
from dcsim.engine.kernel import run_steps, start_run
from dcsim.errors import SimulationError
from dcsim.results.control import control_columns, control_summary
from dcsim.results.trace import SimulationResult, Summary, Trace
from dcsim.scenario.schema import Scenario

CHUNK_STEPS = 2_000_000
"""Steps per kernel call; between calls ``simulate`` reports progress."""


def run_inputs(
    ki: KernelInputs, progress: Callable[[float], None] | None = None
) -> tuple[int, float, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Run the kernel on assembled inputs.

    Parameters
    ----------
    ki : KernelInputs
        From :func:`~dcsim.engine.assemble.assemble`.
    progress : callable, optional
        Called with the fraction done (0..1) after each chunk of :data:`CHUNK_STEPS` steps.

    Returns
    -------
    status, t_stop, rec, acc, final_state, final_params
        Kernel status, time reached [s], trace columns (N_REC, rows), accumulators, state and
        parameters (after the events).
    """
    rec = np.zeros((L.N_REC, ki.rows))
    acc = np.zeros(L.N_ACC)
    p = ki.params.copy()
    x = ki.state0.copy()
    counters = np.zeros(2, dtype=np.int64)
    args = (ki.event_time_s, ki.event_index, ki.event_value)
    ctl, crec = controller_arrays(ki.controller, ki.steps_per_sample, ki.rows)
    start_run(p, x, ki.has_capacitor, *args, counters, rec, acc, ki.steps_per_sample, *ctl, crec)
    status, t_stop = L.STATUS_OK, 0.0
    for k_first in range(1, ki.n_steps + 1, CHUNK_STEPS):
        k_last = min(k_first + CHUNK_STEPS - 1, ki.n_steps)
        status, t_stop = run_steps(
            p, x, ki.has_capacitor, ki.step_s, k_first, k_last, ki.n_steps,
            ki.steps_per_row, ki.duration_s, *args, counters, rec, acc,
            ki.steps_per_sample, *ctl, crec,
        )  # fmt: skip
        if progress is not None:
            progress(k_last / ki.n_steps)
        if status != L.STATUS_OK:
            break
    n = counters[1]
    return int(status), float(t_stop), rec[:, :n], acc, x, p, crec[:, :n]


def controller_arrays(ctl, active: int, rows: int):
    """Working copies of the controller arrays ``(cp, cs, rng, segments)`` and the trace
    columns it fills (none in open loop)."""
    from dcsim.controllers.layout import N_CREC

    crec = np.zeros((N_CREC if active else 0, rows if active else 1))
    return (ctl.params.copy(), ctl.state0.copy(), ctl.rng0.copy(), ctl.segments), crec


def _stop_message(sc: Scenario, ki: KernelInputs, status: int, t_stop: float) -> str:
    where = f"{sc.source}: run stopped at t = {t_stop:.6g} s: "
    if status == L.STATUS_REGEN_NO_PATH:
        return where + (
            "the motor returns energy to a diode-fed supply (supply.regenerative = false) "
            "with no bus capacitance, so the bus voltage would rise without limit; give "
            "supply.capacitance (and a brake resistor), or make the supply regenerative"
        )
    if status == L.STATUS_BUS_NEGATIVE:
        return where + (
            "the bus voltage would go below zero: with the bridge fully on, the current "
            "through the source resistance (or out of the bus capacitor) exceeds what the "
            "source gives, as when a driven motor is plugged against a weak supply; the ideal "
            "bridge has no freewheeling diodes to clamp the bus, so this run cannot go on -- "
            "lower supply.resistance, add supply.capacitance, or lower the command"
        )
    fastest = min(ki.time_constants_s.items(), key=lambda kv: kv[1])
    if sc.simulation.step is not None:
        cause = (
            f"the step {ki.step_s:.3g} s set by simulation.step may be too large for the "
            f"fastest time constant ({fastest[0]}, {fastest[1]:.3g} s) -- remove or lower it "
            "-- or the parameters give an unbounded solution"
        )
    else:
        cause = (
            "the parameters give an unbounded solution or values beyond floating point "
            "(check the magnitudes and units of the voltages, resistances and inertias)"
        )
    return where + "the state became non-finite; " + cause


def energy_account(
    ki: KernelInputs, acc: np.ndarray, xf: np.ndarray, pf: np.ndarray
) -> dict[str, float]:
    """Energy terms of a run [J]; ``energy_from_supply_J`` equals the sum of the others.

    The kinetic and stored terms come from the initial and final states, the others from the
    kernel's full-rate integrals, so the residual measures the integration error. ``pf``
    are the parameters at the end (an event may have changed the inertia on the shaft).
    """
    p, x0 = ki.params, ki.state0
    with np.errstate(over="ignore", invalid="ignore"):  # overflow is reported by simulate
        kinetic = 0.5 * (pf[L.P_J] * xf[L.X_SPEED] ** 2 - p[L.P_J] * x0[L.X_SPEED] ** 2)
        stored = 0.5 * p[L.P_L] * (xf[L.X_CURRENT] ** 2 - x0[L.X_CURRENT] ** 2)
        if ki.has_capacitor:
            stored += 0.5 * p[L.P_C] * (xf[L.X_BUS] ** 2 - x0[L.X_BUS] ** 2)
    terms = {
        "energy_from_supply_J": float(acc[L.A_SUPPLY]),
        "energy_source_loss_J": float(acc[L.A_SOURCE_LOSS]),
        "energy_copper_loss_J": float(acc[L.A_COPPER]),
        "energy_friction_J": float(acc[L.A_FRICTION]),
        "energy_to_load_J": float(acc[L.A_LOAD]),
        "energy_gear_loss_J": float(acc[L.A_GEAR]),
        "energy_shaft_lock_J": float(acc[L.A_LOCK]),
        "energy_coupling_J": float(acc[L.A_COUPLING]),
        "energy_brush_drop_J": float(acc[L.A_BRUSH_DROP]),
        "energy_brush_friction_J": float(acc[L.A_BRUSH_FRICTION]),
        "energy_iron_loss_J": float(acc[L.A_IRON]),
        "kinetic_energy_change_J": float(kinetic),
        "stored_energy_change_J": float(stored),
    }
    return with_residual(terms)


def with_residual(terms: dict[str, float]) -> dict[str, float]:
    """``terms`` plus ``energy_balance_residual_J``: the supply term minus all the others."""
    with np.errstate(over="ignore", invalid="ignore"):
        spent = sum(v for k, v in terms.items() if k != "energy_from_supply_J")
        terms["energy_balance_residual_J"] = terms["energy_from_supply_J"] - spent
    return terms


def check_finite_totals(source: str, summary: dict) -> None:
    """Refuse a summary whose numbers overflowed (SimulationError naming them)."""
    bad = sorted(k for k, v in summary.items() if isinstance(v, float) and not np.isfinite(v))
    if bad:
        raise SimulationError(
            f"{source}: the run's totals are not finite ({', '.join(bad)}): the values exceed "
            "floating point; check the magnitudes and units of the scenario"
        )


def simulate(
    scenario: Scenario, progress: Callable[[float], None] | None = None
) -> SimulationResult:
    """Run a scenario and return its trace and summary.

    Pure: the same scenario gives the same result.

    Parameters
    ----------
    scenario : Scenario
        A validated scenario (from :func:`dcsim.load_scenario`).
    progress : callable, optional
        Called with the fraction done (0..1) during long runs.

    Returns
    -------
    SimulationResult
        ``.trace`` (columns as in the contract) and ``.summary`` (SI numbers).

    Raises
    ------
    ScenarioError
        Inconsistent parameters found while assembling.
    SimulationError
        The run could not go on (the message says when and the likely cause).
    """
    if scenario.thermal is not None:
        from dcsim.engine.thermal import simulate_with_winding

        return simulate_with_winding(scenario, _simulate_electrical, progress)
    return _simulate_electrical(scenario, progress)


def _simulate_electrical(
    scenario: Scenario, progress: Callable[[float], None] | None = None
) -> SimulationResult:
    """:func:`simulate` without the winding's thermal model."""
    from dcsim.engine.machine_run import needs_machine_kernel, simulate_machine

    if needs_machine_kernel(scenario):
        return simulate_machine(scenario, progress)
    if scenario.bridge.model != "ideal":
        return _simulate_bridge(scenario, progress)
    ki = assemble(scenario)
    status, t_stop, rec, acc, xf, pf, crec = run_inputs(ki, progress)
    if status != L.STATUS_OK:
        raise SimulationError(_stop_message(scenario, ki, status, t_stop))
    columns = {name: rec[k] for k, name in enumerate(L.RECORD_NAMES)}
    columns.update(control_columns(scenario, crec))
    summary: dict[str, float | int | str] = {
        "peak_current_A": float(acc[L.A_PEAK_I]),
        "peak_current_time_s": float(acc[L.A_PEAK_I_TIME]),
        "i2t_A2s": float(acc[L.A_I2T]),
        "final_speed_rad_s": float(xf[L.X_SPEED]),
        "final_current_A": float(xf[L.X_CURRENT]),
        "final_position_rad": float(xf[L.X_POSITION]),
        "peak_bus_voltage_V": float(acc[L.A_BUS_MAX]),
        "min_bus_voltage_V": float(acc[L.A_BUS_MIN]),
    }
    summary.update(energy_account(ki, acc, xf, pf))
    check_finite_totals(scenario.source, summary)
    summary.update(
        {
            "duration_s": ki.duration_s,
            "step_s": ki.step_s,
            "record_interval_s": ki.record_interval_s,
            "steps": ki.n_steps,
            "located_regime_changes": int(acc[L.A_SPLITS]),
        }
    )
    if ki.steps_per_sample:
        summary.update(control_summary(scenario, columns, ki.controller.sample_s))
    return SimulationResult(
        scenario=scenario,
        trace=Trace(columns),
        summary=Summary(summary),
        step_s=ki.step_s,
        record_interval_s=ki.record_interval_s,
        event_times_s=tuple(sorted({float(t) for t in ki.event_time_s})),
    )


def _simulate_bridge(
    scenario: Scenario, progress: Callable[[float], None] | None
) -> SimulationResult:
    """:func:`simulate` for the averaged and switching bridge models."""
    from dcsim.engine import bridge_layout as B
    from dcsim.engine.assemble import assemble_bridge
    from dcsim.engine.run_bridge import bridge_summary, run_bridge_inputs, stop_message

    bi = assemble_bridge(scenario)
    status, t_stop, rec, acc, xf, qf, trips, crec, chops = run_bridge_inputs(bi, progress)
    if status != B.STATUS_OK:
        raise SimulationError(stop_message(scenario.source, status, t_stop))
    columns = {name: rec[k] for k, name in enumerate(B.RECORD_NAMES)}
    columns.update(control_columns(scenario, crec))
    summary = bridge_summary(scenario, bi, acc, xf, qf, trips, chops)
    if bi.periods_per_sample:
        summary.update(control_summary(scenario, columns, bi.controller.sample_s))
    return SimulationResult(
        scenario=scenario,
        trace=Trace(columns),
        summary=Summary(summary),
        step_s=bi.step_s,
        record_interval_s=bi.record_interval_s,
        event_times_s=tuple(sorted({float(t) for t in bi.event_time_s})),
        chops=chops,
    )
