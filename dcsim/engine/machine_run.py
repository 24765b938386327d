"""``simulate`` for the machine library: scenario -> machine kernel -> result.

Runs wound-field machines, commutator ripple and the compliant shaft
(:mod:`dcsim.engine.machine_kernel`) on the step grid that
:func:`~dcsim.engine.assemble.assemble` chooses (controller samples, events, trace rows),
each step cut into Runge-Kutta sub-steps of at most a tenth of the machine's fastest time
constant.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from dcsim.engine import layout as L
from dcsim.engine import machine_layout as M
from dcsim.engine.assemble import MAX_STEPS, KernelInputs, assemble, default_max_speed
from dcsim.errors import SimulationError
from dcsim.plant.field import curve_arrays
from dcsim.results.control import control_columns, control_summary
from dcsim.results.trace import SimulationResult, Summary, Trace
from dcsim.scenario.schema import Scenario

CHUNK_STEPS = 200_000
"""Steps per kernel call; between calls the run reports progress."""

SUBSTEPS_PER_TIME_CONSTANT = 10
"""Runge-Kutta sub-steps per fastest time constant (local error ~ (h/tau)^5 / 120)."""


@dataclass(frozen=True)
class MachineInputs:
    """Kernel inputs of a machine-library run."""

    base: KernelInputs
    state0: np.ndarray
    mag_i: np.ndarray
    mag_k: np.ndarray
    substep_s: float
    time_constants_s: dict


def needs_machine_kernel(sc: Scenario) -> bool:
    """A wound-field machine, commutator ripple or a compliant shaft."""
    return (
        sc.motor.kind != "permanent_magnet"
        or sc.motor.commutator_segments is not None
        or sc.shaft is not None
    )


TAU_KEYS = {
    "armature_loop": "motor.inductance",
    "field": "motor.field_inductance",
    "bus": "supply.capacitance",
    "bus_resonance": "supply.capacitance",
    "shaft_resonance": "shaft.stiffness",
    "shaft_damping": "shaft.damping",
}
"""The key a too-fast time constant most likely comes from (for the sub-step budget message)."""


def machine_time_constants(sc: Scenario, p: np.ndarray) -> dict[str, float]:
    """Time constants the sub-step must resolve [s], by name.

    ``armature_loop`` (L_a + series winding) / (R_a + series winding + R_s; with a bus
    capacitor without R_s); ``field`` L_f / R_f; with a capacitor ``bus`` R_s C and
    ``bus_resonance`` sqrt(L_loop C) (the armature inductance swinging with the capacitor
    through a fully-on bridge, derived); ``shaft_resonance`` 1 / w_r with
    ``w_r = sqrt(k (J1 + J2) / (J1 J2))`` (the two-mass resonance, derived);
    ``shaft_damping`` J1 J2 / ((J1 + J2) c).
    """
    kind = sc.motor.kind
    cap = p[L.P_C]
    r_loop, l_loop = p[L.P_R] + (p[L.P_RS] if cap <= 0.0 else 0.0), p[L.P_L]
    if kind == "series":
        r_loop += p[L.P_RF]
        l_loop += p[L.P_LF]
    elif kind == "compound":
        r_loop += p[L.P_RSE]
        l_loop += p[L.P_LSE]
    tau = {"armature_loop": l_loop / r_loop}
    if cap > 0.0:
        tau["bus"] = p[L.P_RS] * cap
        tau["bus_resonance"] = math.sqrt(l_loop * cap)
    if kind in ("separately_excited", "shunt", "compound"):
        tau["field"] = p[L.P_LF] / p[L.P_RF]
    if sc.shaft is not None:
        j1, j2 = p[L.P_J1], p[L.P_J] - p[L.P_J1]
        if j2 > 0.0:
            tau["shaft_resonance"] = 1.0 / math.sqrt(p[L.P_KSH] * (j1 + j2) / (j1 * j2))
            if p[L.P_CSH] > 0.0:
                tau["shaft_damping"] = j1 * j2 / ((j1 + j2) * p[L.P_CSH])
    return tau


def machine_inputs(sc: Scenario) -> MachineInputs:
    """Assemble a machine-library run (the common grid, then the machine's arrays)."""
    from dcsim.errors import ScenarioError

    if sc.shaft is not None and sc.load.inertia + _hoist_inertia(sc) <= 0.0:
        raise ScenarioError(
            "expected a load inertia > 0 on the far side of a compliant [shaft] (load.inertia, "
            "a hoist, or both), found none",
            source=sc.source,
            key="load.inertia",
        )
    ki = assemble(sc)
    taus = machine_time_constants(sc, ki.params)
    p_ev = ki.params.copy()  # the fastest of each over the run (events change R, R_f, R_s)
    for index, value in zip(ki.event_index, ki.event_value, strict=True):
        p_ev[int(index)] = value
        for name, tau in machine_time_constants(sc, p_ev).items():
            taus[name] = min(taus.get(name, math.inf), tau)
    fastest = min(taus.values())
    h_rk = min(ki.step_s, fastest / SUBSTEPS_PER_TIME_CONSTANT)
    n_rk = ki.duration_s / h_rk
    if n_rk > MAX_STEPS:
        name = min(taus, key=taus.get)
        raise ScenarioError(
            f"expected at most {MAX_STEPS:.0e} sub-steps, found {n_rk:.3g} (sub-step "
            f"{h_rk:.3g} s over {ki.duration_s:.3g} s, set by the fastest time constant, "
            f"{name} = {fastest:.3g} s): check {TAU_KEYS.get(name, 'the machine keys')} "
            "(value and unit) or shorten simulation.duration",
            source=sc.source,
            key=TAU_KEYS.get(name, "simulation.duration"),
        )
    x0 = np.zeros(M.N_MSTATE)
    x0[M.X_BUS] = ki.state0[L.X_BUS]  # a bus capacitor starts charged to the source
    if sc.motor.kind == "separately_excited":
        x0[M.X_FIELD] = sc.motor.field_voltage / sc.motor.field_resistance  # field on first
    mag_i, mag_k = curve_arrays(sc.motor.magnetisation, sc.motor.magnetisation_speed)
    return MachineInputs(ki, x0, mag_i, mag_k, h_rk, taus)


def _hoist_inertia(sc: Scenario) -> float:
    if sc.hoist is None:
        return 0.0
    return sc.hoist.mass * sc.hoist.drum_radius**2


def run_machine_inputs(mi: MachineInputs, progress: Callable[[float], None] | None = None):
    """Run the machine kernel; returns ``(status, t_stop, rec, acc, x, p, crec)``."""
    from dcsim.engine.machine_kernel import run_steps, start_run
    from dcsim.engine.run import controller_arrays

    ki = mi.base
    rec = np.zeros((M.N_MREC, ki.rows))
    acc = np.zeros(M.N_MACC)
    p = ki.params.copy()
    x = mi.state0.copy()
    counters = np.zeros(2, dtype=np.int64)
    ev = (ki.event_time_s, ki.event_index, ki.event_value)
    ctl, crec = controller_arrays(ki.controller, ki.steps_per_sample, ki.rows)
    mag = (mi.mag_i, mi.mag_k)
    start_run(p, x, *mag, *ev, counters, rec, acc, ki.steps_per_sample, *ctl, crec)
    status, t_stop = L.STATUS_OK, 0.0
    for k_first in range(1, ki.n_steps + 1, CHUNK_STEPS):
        k_last = min(k_first + CHUNK_STEPS - 1, ki.n_steps)
        status, t_stop = run_steps(
            p, x, *mag, ki.step_s, mi.substep_s, k_first, k_last, ki.n_steps,
            ki.steps_per_row, ki.duration_s, *ev, counters, rec, acc,
            ki.steps_per_sample, *ctl, crec,
        )  # fmt: skip
        if progress is not None:
            progress(k_last / ki.n_steps)
        if status != L.STATUS_OK:
            break
    n = counters[1]
    return int(status), float(t_stop), rec[:, :n], acc, x, p, crec[:, :n]


def stop_message(sc: Scenario, status: int, t_stop: float, x: np.ndarray, p: np.ndarray) -> str:
    """One plain message for a machine run that could not go on."""
    where = f"{sc.source}: run stopped at t = {t_stop:.6g} s: "
    if status == L.STATUS_OVERSPEED:
        w = abs(float(x[M.X_SPEED]))
        limit = float(p[L.P_WMAX])
        given = sc.motor.max_speed is not None
        default = default_max_speed(sc)[1]
        if sc.motor.kind == "series":
            why = (
                "a series machine without load runs away: its flux falls with the current, so "
                "the speed rises until something breaks -- couple the load before applying "
                "voltage, limit the voltage, or add a speed loop"
            )
        elif sc.motor.kind == "compound" and sc.motor.compound == "differential":
            why = (
                "a differential compound machine's series winding opposes its shunt field, so "
                "the flux falls as the armature current rises (at the inrush of a start it can "
                "reverse the flux and start the shaft backwards) -- lower "
                "motor.series_turns_ratio, limit the starting current, or add a speed loop"
            )
        elif sc.motor.kind == "separately_excited" and sc.motor.base_speed is not None:
            why = (
                "above motor.base_speed the field is weakened as 1/speed, so the torque falls "
                "and only the load holds the speed -- a light load runs far past the base "
                "speed; add a speed loop, raise the load, or give motor.max_speed"
            )
        else:
            why = "check the field (a weak or lost field lets the speed rise) and the load"
        return where + (
            f"the shaft reached {w:.4g} rad/s ({w * 30 / math.pi:.4g} rpm), above the "
            f"over-speed limit motor.max_speed = {limit:.4g} rad/s "
            f"({'given' if given else default}); {why}"
        )
    if status == L.STATUS_REGEN_NO_PATH:
        return where + (
            "the motor returns energy to a diode-fed supply (supply.regenerative = false) and "
            "the machine-library kernel has no bus capacitor or brake to take it; make the "
            "supply regenerative"
        )
    return where + (
        "the state became non-finite; the parameters give an unbounded solution or values "
        "beyond floating point (check the magnitudes and units of the field and shaft keys)"
    )


def simulate_machine(
    scenario: Scenario, progress: Callable[[float], None] | None = None
) -> SimulationResult:
    """:func:`dcsim.simulate` for wound-field machines, commutator ripple and compliant
    shafts (same result layout, with the machine's trace columns and summary keys)."""
    from dcsim.engine.run import check_finite_totals

    mi = machine_inputs(scenario)
    ki = mi.base
    status, t_stop, rec, acc, xf, pf, crec = run_machine_inputs(mi, progress)
    if status != L.STATUS_OK:
        raise SimulationError(stop_message(scenario, status, t_stop, xf, pf))
    columns = {name: rec[k] for k, name in enumerate(M.RECORD_NAMES)}
    columns.update(control_columns(scenario, crec))
    summary: dict[str, float | int | str] = {
        "peak_current_A": float(acc[M.M_PEAK_I]),
        "peak_current_time_s": float(acc[M.M_PEAK_I_TIME]),
        "i2t_A2s": float(acc[M.W_I2]),
        "final_speed_rad_s": float(xf[M.X_SPEED]),
        "final_current_A": float(xf[M.X_CURRENT]),
        "final_position_rad": float(xf[M.X_POSITION]),
        "peak_bus_voltage_V": float(acc[M.M_BUS_MAX]),
        "min_bus_voltage_V": float(acc[M.M_BUS_MIN]),
    }
    summary.update(machine_energy_account(scenario, ki.params, pf, acc, xf, mi.state0))
    check_finite_totals(scenario.source, summary)
    summary.update(machine_summary(scenario, pf, acc, xf))
    summary.update(
        {
            "duration_s": ki.duration_s,
            "step_s": ki.step_s,
            "substep_s": mi.substep_s,
            "record_interval_s": ki.record_interval_s,
            "steps": ki.n_steps,
            "substeps": int(acc[M.M_SUBSTEPS]),
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


def machine_energy_account(
    sc: Scenario,
    p0: np.ndarray,
    pf: np.ndarray,
    acc: np.ndarray,
    xf: np.ndarray,
    x0: np.ndarray,
) -> dict[str, float]:
    """Energy terms [J]; ``energy_from_supply_J`` (armature source plus, for a separately
    excited machine, the field supply: reported alone as ``field_supply_energy_J``) equals
    the sum of the others plus the residual. ``x0``: the initial state (a separately excited
    field starts settled and a bus capacitor charged, so their initial energy is subtracted
    from the change)."""
    from dcsim.engine.run import with_residual

    kind = sc.motor.kind
    with np.errstate(over="ignore", invalid="ignore"):
        if pf[L.P_KSH] > 0.0:
            j1, j2 = pf[L.P_J1], pf[L.P_J] - pf[L.P_J1]
            kinetic = 0.5 * (j1 * xf[M.X_SPEED] ** 2 + j2 * xf[M.X_LOAD_SPEED] ** 2)
            d = xf[M.X_POSITION] - xf[M.X_LOAD_POSITION]
            half = 0.5 * pf[L.P_GAP]
            tw = d - half if d > half else (d + half if d < -half else 0.0)
            spring = 0.5 * pf[L.P_KSH] * tw**2
        else:
            kinetic = 0.5 * pf[L.P_J] * xf[M.X_SPEED] ** 2
            spring = 0.0
        l_loop = p0[L.P_L] + (p0[L.P_LF] if kind == "series" else 0.0)
        l_loop += p0[L.P_LSE] if kind == "compound" else 0.0
        stored = 0.5 * l_loop * xf[M.X_CURRENT] ** 2 + spring
        if p0[L.P_C] > 0.0:
            stored += 0.5 * p0[L.P_C] * (xf[M.X_BUS] ** 2 - x0[M.X_BUS] ** 2)
        if kind in ("separately_excited", "shunt", "compound"):
            stored += 0.5 * p0[L.P_LF] * xf[M.X_FIELD] ** 2
            stored -= 0.5 * p0[L.P_LF] * x0[M.X_FIELD] ** 2
    terms = {
        "energy_from_supply_J": float(acc[M.W_SUPPLY] + acc[M.W_FIELD_SUPPLY]),
        "energy_source_loss_J": float(acc[M.W_SOURCE_LOSS]),
        "energy_copper_loss_J": float(acc[M.W_COPPER]),
        "energy_field_copper_loss_J": float(acc[M.W_FIELD_COPPER]),
        "energy_friction_J": float(acc[M.W_FRICTION]),
        "energy_to_load_J": float(acc[M.W_LOAD]),
        "energy_gear_loss_J": float(acc[M.W_GEAR]),
        "energy_shaft_damping_J": float(acc[M.W_SHAFT_DAMPING]),
        "energy_shaft_lock_J": float(acc[M.M_LOCK]),
        "energy_coupling_J": float(acc[M.M_COUPLING]),
        "energy_brush_friction_J": float(acc[M.W_BRUSH_FRICTION]),
        "energy_brush_drop_J": float(acc[M.W_BRUSH_DROP]),
        "energy_iron_loss_J": float(acc[M.W_IRON]),
        "kinetic_energy_change_J": float(kinetic),
        "stored_energy_change_J": float(stored),
    }
    out = with_residual(terms)
    out["field_supply_energy_J"] = float(acc[M.W_FIELD_SUPPLY])
    return out


def machine_summary(
    sc: Scenario, pf: np.ndarray, acc: np.ndarray, xf: np.ndarray
) -> dict[str, float | int | str]:
    """Machine-library summary keys: the kind, field, peaks and the commutator ripple."""
    m = sc.motor
    out: dict[str, float | int | str] = {
        "machine_kind": m.kind,
        "peak_speed_rad_s": float(acc[M.M_PEAK_SPEED]),
        "final_load_speed_rad_s": float(xf[M.X_LOAD_SPEED]),
    }
    if m.kind != "permanent_magnet":
        out["final_field_current_A"] = float(
            xf[M.X_CURRENT] if m.kind == "series" else xf[M.X_FIELD]
        )
        out["peak_field_current_A"] = float(
            acc[M.M_PEAK_I] if m.kind == "series" else acc[M.M_PEAK_FIELD]
        )
    if m.commutator_segments:
        n = int(m.commutator_segments)
        pulses = (n if n % 2 == 0 else 2 * n) * int(m.pole_pairs)
        per_turn = pulses // int(m.pole_pairs)
        out["commutator_pulses_per_turn"] = pulses
        out["commutator_ripple_pp_fraction"] = 1.0 - math.cos(math.pi / per_turn)
        out["commutator_ripple_frequency_Hz"] = abs(float(xf[M.X_SPEED])) * pulses / (2 * math.pi)
    if sc.shaft is not None:
        j1, j2 = pf[L.P_J1], pf[L.P_J] - pf[L.P_J1]
        wr = math.sqrt(pf[L.P_KSH] * (j1 + j2) / (j1 * j2))
        out["shaft_resonance_Hz"] = wr / (2 * math.pi)
    return out


__all__ = ["simulate_machine", "machine_inputs", "machine_time_constants"]
