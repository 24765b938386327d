"""Scenario -> flat kernel inputs: parameter vector, initial state, event table, step plan.

This is the one place that knows both the scenario's dotted keys and the kernel's array
layout (:mod:`dcsim.engine.layout`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dcsim.controllers.assemble import ControllerInputs, controller_inputs
from dcsim.engine import layout as L
from dcsim.errors import ScenarioError
from dcsim.scenario.schema import Scenario

PARAM_OF_KEY: dict[str, int] = {
    "motor.resistance": L.P_R,
    "motor.torque_constant": L.P_K,
    "motor.viscous_friction": L.P_B,
    "motor.coulomb_friction": L.P_TC,
    "motor.static_friction": L.P_TS,
    "load.torque": L.P_TL,
    "load.inertia": L.P_J,  # the event value is the load's; the kernel gets rotor + load
    "load.locked": L.P_LOCK,
    "supply.voltage": L.P_VS,
    "supply.resistance": L.P_RS,
    "supply.regenerative": L.P_REGEN,
    "control.voltage": L.P_VCMD,
    "motor.field_voltage": L.P_VF,
    "motor.field_resistance": L.P_RF,
    "motor.series_field_resistance": L.P_RSE,
}
"""Kernel parameter index of every key that events may change."""

STEPS_PER_TIME_CONSTANT = 10
"""Default step = fastest time constant / this. The linear part is exact at any step; the
step only has to resolve the quadrature of the summary integrals (Simpson's rule: relative
error about (h/tau)^4 / 180 on an exponential, ~6e-7 here) and of the third-order
correction of the bus term."""


MAX_USER_STEP_FRACTION = 0.25
"""A step set by the user may be at most this fraction of the fastest time constant: the
states are exact at any step, but the summary integrals use Simpson's rule over it (relative
error about (h/tau)^4 / 180, 2e-5 at a quarter)."""

DEFAULT_ROWS = 10_000
MAX_STEPS = 500_000_000
MAX_TRACE_BYTES = 2_000_000_000
"""Largest trace a run may allocate [bytes] (rows x columns x 8)."""


@dataclass(frozen=True)
class KernelInputs:
    """Everything the kernel (``start_run``, ``run_steps``) needs, as plain arrays and numbers."""

    params: np.ndarray
    state0: np.ndarray
    has_capacitor: bool
    step_s: float
    n_steps: int
    steps_per_row: int
    record_interval_s: float
    duration_s: float
    event_time_s: np.ndarray
    event_index: np.ndarray
    event_value: np.ndarray
    rows: int
    time_constants_s: dict
    controller: ControllerInputs | None = None
    steps_per_sample: int = 0


def control_grid(sample_s: float, record_s: float, h_target: float) -> tuple[float, int, int]:
    """A step that divides the controller's base sample and the record interval.

    Returns ``(h, steps per sample, steps per row)``. The step is the largest division of the
    common divisor of both times (to 1 ps) not above ``h_target``; when the two have no
    useful common divisor, the record interval is rounded to whole steps of the sample grid.
    """
    tp, rp = round(sample_s * 1e12), round(record_s * 1e12)
    g = math.gcd(tp, rp) * 1e-12 if tp > 0 and rp > 0 else 0.0
    if g >= h_target / 100.0:
        h = g / max(1, math.ceil(g / h_target - 1e-9))
    else:
        h = sample_s / max(1, math.ceil(sample_s / h_target - 1e-9))
    return h, max(1, round(sample_s / h)), max(1, round(record_s / h))


RUNAWAY_LIMIT_FACTOR = 10.0
"""Default over-speed limit of a series / differential compound machine, in units of
``V_s / K`` (``K`` at the locked-rotor field): a linear series machine passes it only below
about 1 % of its locked-rotor torque (``w = (V/(M i) - R/M)``; at ``i = i_stall / 10``,
``w = 9 R / M`` with ``V_s / K = R / M``), i.e. when it has truly lost its load
-- common practice (no source) for a guard that never trips in service."""

FIELD_WEAKENING_LIMIT = 4.0
"""Default over-speed limit of a separately excited machine with field weakening, in units of
its base speed: above the base speed the flux falls as ``1/w`` and nothing but the load holds
the speed, and wound-field DC machines are commonly built for a field-weakening range of
about 1:3 to 1:4 -- common practice (no source)."""


def default_max_speed(sc: Scenario) -> tuple[float, str]:
    """The over-speed limit the engine applies when ``motor.max_speed`` is not given [rad/s]
    (0.0: none) and how it was found, in words.

    Series and differential compound machines (they run away without load):
    :data:`RUNAWAY_LIMIT_FACTOR` x ``V_s / K`` with ``K`` the derived torque constant; a
    separately excited machine with ``base_speed``: :data:`FIELD_WEAKENING_LIMIT` x the base
    speed; the others none.
    """
    m = sc.motor
    if m.kind == "series" or (m.kind == "compound" and m.compound == "differential"):
        return (
            RUNAWAY_LIMIT_FACTOR * sc.supply.voltage / m.torque_constant,
            f"default {RUNAWAY_LIMIT_FACTOR:g} x V_s / K",
        )
    if m.kind == "separately_excited" and m.base_speed is not None:
        return (
            FIELD_WEAKENING_LIMIT * m.base_speed,
            f"default {FIELD_WEAKENING_LIMIT:g} x base_speed",
        )
    return 0.0, "none (no over-speed limit)"


SHAFT_KEYS = ("motor.coulomb_friction", "motor.static_friction", "load.torque", "load.inertia")
"""Keys whose value the gear and the hoist refer to the motor shaft (events re-map them)."""


def shaft_values(sc: Scenario, user: dict | None = None) -> dict[str, float]:
    """Shaft parameters at the motor side, with the gear and the hoist referred through.

    Parameters
    ----------
    sc : Scenario
        The scenario (its ``gear`` and ``hoist`` tables, the motor's inertia).
    user : dict, optional
        Present values of :data:`SHAFT_KEYS` (events change them); default: the scenario's.

    Returns
    -------
    dict
        ``inertia`` (rotor + gear + load / N^2) [kg*m^2], ``load_torque`` (the constant part
        ``T_const``) [N*m], ``coulomb`` (motor's + the gear's Coulomb-like part), ``static``
        (0: equal to ``coulomb``; else the motor's + the gear's part), ``gear_coulomb`` and
        ``gear_constant`` (``T_const - T_L / N``) [N*m], as
        :func:`dcsim.plant.mechanics.gear_torques` maps a load torque of constant sign.
        The hoist's load torque is ``m g r`` and its inertia ``m r^2`` at the drum (a rope
        without stretch or mass; Newton's second law for a point mass on a drum).
    """
    from dcsim.plant.mechanics import gear_torques

    if user is None:
        user = {k: sc.get(k) for k in SHAFT_KEYS}
    load_torque, load_inertia = float(user["load.torque"]), float(user["load.inertia"])
    coulomb, static = float(user["motor.coulomb_friction"]), user["motor.static_friction"]
    gear, hoist = sc.gear, sc.hoist
    if gear is None and hoist is None:  # no referral: the values as before, bit for bit
        return {
            "inertia": sc.motor.inertia + load_inertia,
            "load_torque": load_torque,
            "coulomb": coulomb,
            "static": float(static or 0.0),
            "gear_coulomb": 0.0,
            "gear_constant": 0.0,
        }
    if hoist is not None:
        load_torque = hoist.mass * hoist.gravity * hoist.drum_radius
        load_inertia += hoist.mass * hoist.drum_radius**2
    ratio, eta_f, eta_b, j_gear = 1.0, 1.0, 1.0, 0.0
    if gear is not None:
        ratio, eta_f, eta_b = gear.ratio, gear.forward_efficiency, gear.back_efficiency
        j_gear = gear.inertia
    t_const, t_gear, t_ideal = gear_torques(load_torque, ratio, eta_f, eta_b)
    return {
        "inertia": sc.motor.inertia + j_gear + load_inertia / ratio**2,
        "load_torque": t_const,
        "coulomb": coulomb + t_gear,
        "static": float(static) + t_gear if static else 0.0,
        "gear_coulomb": t_gear,
        "gear_constant": t_const - t_ideal,
    }


def shaft_event_rows(sc: Scenario, param_index: dict[str, int]) -> list[tuple[float, int, float]]:
    """Event rows ``(time, parameter index, value)`` of the shaft keys with a gear or hoist.

    Each event on a :data:`SHAFT_KEYS` key re-maps all shaft parameters (the gear's parts
    depend on the load torque and its sign, an event that flips the sign starts a new
    interval of constant sign with the mapping of the new value); rows are written only for
    the parameters that change. ``param_index`` maps the names of :func:`shaft_values` to
    the kernel's indices.
    """
    user = {k: sc.get(k) for k in SHAFT_KEYS}
    now = shaft_values(sc, user)
    rows = []
    for ev in sc.events:
        changed = False
        for key, value in ev.changes:
            if key in SHAFT_KEYS:
                user[key] = float(value)
                changed = True
        if not changed:
            continue
        new = shaft_values(sc, user)
        for name in _NAMES:
            if new[name] != now[name]:
                rows.append((ev.at, param_index[name], new[name]))
        now = new
    return rows


def gear_loss_power(sc: Scenario, time_s: np.ndarray, speed_rad_s: np.ndarray) -> np.ndarray:
    """Power lost in the gear at recorded instants [W] (0 without a gear or hoist).

    ``(T_const - T_L/N + T_gear sgn(w)) w`` with the parts of :func:`shaft_values` as the
    events leave them at each time (an event at ``t`` counts from ``t`` on).
    """
    w = np.asarray(speed_rad_s, dtype=float)
    t = np.asarray(time_s, dtype=float)
    if sc.gear is None and sc.hoist is None:
        return np.zeros_like(w)
    const = np.full(w.shape, shaft_values(sc)["gear_constant"])
    coul = np.full(w.shape, shaft_values(sc)["gear_coulomb"])
    for at, index, value in shaft_event_rows(sc, {n: n for n in _NAMES}):
        if index == "gear_constant":
            const[t >= at] = value
        elif index == "gear_coulomb":
            coul[t >= at] = value
    return (const + coul * np.sign(w)) * w


_NAMES = ("inertia", "load_torque", "coulomb", "static", "gear_coulomb", "gear_constant")


def _shaft_index() -> dict[str, int]:
    return {
        "inertia": L.P_J,
        "load_torque": L.P_TL,
        "coulomb": L.P_TC,
        "static": L.P_TS,
        "gear_coulomb": L.P_GEAR_COULOMB,
        "gear_constant": L.P_GEAR_CONST,
    }


def parameter_vector(sc: Scenario) -> np.ndarray:
    """Kernel parameter vector [SI] of a scenario at t = 0."""
    p = np.zeros(L.N_PARAM)
    m, ld, s, c = sc.motor, sc.load, sc.supply, sc.control
    p[L.P_R] = m.resistance
    p[L.P_L] = m.inductance
    p[L.P_K] = m.torque_constant
    p[L.P_J] = m.inertia + ld.inertia
    p[L.P_B] = m.viscous_friction
    p[L.P_TC] = m.coulomb_friction
    p[L.P_TL] = ld.torque
    p[L.P_LOCK] = 1.0 if ld.locked else 0.0
    p[L.P_VS] = s.voltage
    p[L.P_RS] = s.resistance
    p[L.P_C] = s.capacitance
    p[L.P_REGEN] = 1.0 if s.regenerative else 0.0
    p[L.P_VCMD] = c.voltage
    p[L.P_TS] = m.static_friction or 0.0  # None: the breakaway level is the Coulomb one
    p[L.P_TBR] = m.brush_friction
    p[L.P_TH] = m.hysteresis_loss_torque
    p[L.P_BE] = m.eddy_loss_coefficient
    p[L.P_VBRUSH] = m.brush_drop
    if sc.gear is not None or sc.hoist is not None:
        for name, index in _shaft_index().items():
            p[index] = shaft_values(sc)[name]
    machine_parameters(sc, p)
    return p


def machine_parameters(sc: Scenario, p: np.ndarray) -> None:
    """Fill the machine-library entries ``P_KIND .. P_GAP`` of ``p`` (in place) [SI].

    The series machine's field entries are its series winding; a compound machine's series
    winding is ``P_RSE, P_LSE`` with the signed turns ratio ``P_NSE`` (negative:
    differential). The over-speed limit defaults, for the series and the differential
    compound machine (which run away without load) and the field-weakened separately excited
    one, as :func:`default_max_speed` gives.
    """
    m = sc.motor
    p[L.P_KIND] = L.MACHINE_CODE[m.kind]
    p[L.P_RF] = m.field_resistance or 0.0
    p[L.P_LF] = m.field_inductance or 0.0
    p[L.P_MAF] = m.mutual_inductance or 0.0
    p[L.P_VF] = m.field_voltage or 0.0
    p[L.P_RSE] = m.series_field_resistance or 0.0
    p[L.P_LSE] = m.series_field_inductance or 0.0
    n_se = m.series_turns_ratio or 0.0
    p[L.P_NSE] = -n_se if m.compound == "differential" else n_se
    p[L.P_WBASE] = m.base_speed or 0.0
    p[L.P_WMAX] = m.max_speed if m.max_speed is not None else default_max_speed(sc)[0]
    p[L.P_NSEG] = m.commutator_segments or 0.0
    p[L.P_POLES] = m.pole_pairs
    p[L.P_J1] = m.inertia + (sc.gear.inertia if sc.gear is not None else 0.0)
    if sc.shaft is not None:
        p[L.P_KSH] = sc.shaft.stiffness
        p[L.P_CSH] = sc.shaft.damping
        p[L.P_GAP] = sc.shaft.backlash


def time_constants(p: np.ndarray) -> dict[str, float]:
    """Time constants of the drive [s], by name.

    ``electrical`` L/(R+R_s); ``electromechanical`` J (R+R_s) / K^2 (the mechanical time
    constant of a DC motor, e.g. Hughes & Drury, *Electric Motors and Drives*, ch. 4);
    ``electromechanical_resonance`` sqrt(L J)/K; ``viscous`` J/(B + B_e) (bearing and
    eddy-current drag); with a capacitor the source R_s C, the armature R C and the L-C
    resonance sqrt(L C).
    """
    r_tot = p[L.P_R] + p[L.P_RS]
    tau = {"electrical": p[L.P_L] / r_tot}
    if p[L.P_LOCK] < 0.5:
        tau["electromechanical"] = p[L.P_J] * r_tot / p[L.P_K] ** 2
        tau["electromechanical_resonance"] = math.sqrt(p[L.P_L] * p[L.P_J]) / p[L.P_K]
        b_visc = p[L.P_B] + p[L.P_BE]  # bearing viscous friction and eddy-current drag
        if b_visc > 0.0:
            tau["viscous"] = p[L.P_J] / b_visc
    if p[L.P_C] > 0.0:
        if p[L.P_RS] > 0.0:
            tau["source_rc"] = p[L.P_RS] * p[L.P_C]
        tau["armature_rc"] = p[L.P_R] * p[L.P_C]
        tau["lc_resonance"] = math.sqrt(p[L.P_L] * p[L.P_C])
    return tau


def _nice_interval(x: float) -> float:
    """Largest 1, 2 or 5 x 10^k not above ``x``."""
    e = math.floor(math.log10(x))
    for m in (5.0, 2.0, 1.0):
        if m * 10.0**e <= x * (1 + 1e-12):
            return m * 10.0**e
    return 10.0**e


def assemble(sc: Scenario) -> KernelInputs:
    """Turn a scenario into kernel inputs and choose the step.

    Raises
    ------
    ScenarioError
        When an event makes the parameters inconsistent, or the step would need too many
        steps.
    """
    p0 = parameter_vector(sc)
    duration = sc.simulation.duration

    times, idx, vals = [], [], []
    p_ev = p0.copy()
    taus = time_constants(p0)
    referred = sc.gear is not None or sc.hoist is not None
    shaft_rows = shaft_event_rows(sc, _shaft_index()) if referred else []
    for n, ev in enumerate(sc.events):
        if referred:
            for t_row, i_row, v_row in shaft_rows:
                if t_row == ev.at:
                    times.append(t_row)
                    idx.append(i_row)
                    vals.append(v_row)
                    p_ev[i_row] = v_row
            shaft_rows = [row for row in shaft_rows if row[0] != ev.at]
        for key, value in ev.changes:
            if key == "load.inertia" and sc.shaft is not None:
                raise ScenarioError(
                    "expected no event on load.inertia with a compliant [shaft] (a mass "
                    "engaging on the far side of the shaft is not modelled), found one",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
            if referred and key in SHAFT_KEYS:
                continue
            if key not in PARAM_OF_KEY:
                raise ScenarioError(
                    f"'{key}' cannot be changed by an event; changeable keys are "
                    + ", ".join(sorted(PARAM_OF_KEY)),
                    source=sc.source,
                    key=f"events[{n}].set",
                )
            v = float(value)
            if key == "motor.field_resistance" and sc.motor.kind == "permanent_magnet":
                raise ScenarioError(
                    "expected no event on motor.field_resistance: a permanent-magnet machine "
                    "has no field winding, found one",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
            if key == "motor.series_field_resistance" and sc.motor.kind != "compound":
                raise ScenarioError(
                    "expected no event on motor.series_field_resistance: only a compound "
                    f"machine has a separate series winding, found one on a {sc.motor.kind} "
                    "machine",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
            if key == "motor.field_voltage" and sc.motor.kind != "separately_excited":
                raise ScenarioError(
                    "expected no event on motor.field_voltage: only a separately excited "
                    f"machine has a field supply, found one on a {sc.motor.kind} machine",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
            if key == "motor.torque_constant" and sc.motor.kind != "permanent_magnet":
                kind = sc.motor.kind.replace("_", " ")
                raise ScenarioError(
                    "expected no event on motor.torque_constant: a "
                    f"{kind} machine's flux follows its field (the torque constant is "
                    "derived, not set; change motor.field_voltage or motor.field_resistance "
                    "instead), found one",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
            if key == "load.inertia":
                v += sc.motor.inertia
            times.append(ev.at)
            idx.append(PARAM_OF_KEY[key])
            vals.append(v)
            p_ev[PARAM_OF_KEY[key]] = v
            if p_ev[L.P_C] > 0.0 and p_ev[L.P_RS] <= 0.0:
                raise ScenarioError(
                    "expected a resistance > 0 while supply.capacitance > 0 (the source "
                    f"charges the capacitor through it), found {v!r} ohm",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
        for name, tau in time_constants(p_ev).items():
            taus[name] = min(taus.get(name, math.inf), tau)

    fastest = min(taus.values())
    if sc.simulation.record_interval is not None:
        record = sc.simulation.record_interval
    else:
        record = _nice_interval(duration / DEFAULT_ROWS)
    if sc.simulation.step is not None:
        h = sc.simulation.step
        fastest_name = min(taus, key=taus.get)
        if h > fastest * MAX_USER_STEP_FRACTION:
            raise ScenarioError(
                f"expected a step of at most {fastest * MAX_USER_STEP_FRACTION:.3g} s (a "
                f"quarter of the fastest time constant, {fastest_name} = {fastest:.3g} s), "
                f"found {h:.3g} s: the states stay exact at any step, but I2t, the peaks and "
                "the energy account are integrated over it; remove simulation.step to let "
                "dcsim choose",
                source=sc.source,
                key="simulation.step",
            )
        if sc.simulation.record_interval is not None:
            ratio = record / h
            if ratio < 1.0 - 1e-9 or abs(ratio - round(ratio)) > 1e-9 * ratio:
                raise ScenarioError(
                    f"expected a whole multiple of simulation.step ({h:.6g} s), found "
                    f"{record:.6g} s",
                    source=sc.source,
                    key="simulation.record_interval",
                )
        n_sub = max(1, round(record / h))
        record = n_sub * h
    else:
        h_target = fastest / STEPS_PER_TIME_CONSTANT
        n_sub = max(1, math.ceil(record / h_target - 1e-9))
        h = record / n_sub
    ctl = controller_inputs(sc)
    n_ctl = 0
    if ctl.closed_loop:
        n_ctl, h, n_sub, record = _sampled_grid(sc, ctl.sample_s, h, record, fastest)
    n_steps = max(1, math.ceil(duration / h - 1e-9))
    if n_steps > MAX_STEPS:
        raise ScenarioError(
            f"expected at most {MAX_STEPS:.0e} steps, found {n_steps:.3g} "
            f"(step {h:.3g} s over {duration:.3g} s, set by the fastest time constant, "
            f"{fastest:.3g} s): shorten simulation.duration",
            source=sc.source,
            key="simulation.step",
        )
    rows = n_steps // n_sub + (1 if n_steps % n_sub else 0) + 2
    if rows * L.N_REC * 8 > MAX_TRACE_BYTES:
        raise ScenarioError(
            f"expected at most {MAX_TRACE_BYTES // (L.N_REC * 8):.3g} trace rows (a "
            f"{MAX_TRACE_BYTES / 1e9:.0f} GB trace), found {rows:.3g} ({duration:.3g} s "
            f"recorded every {record:.3g} s): set a longer simulation.record_interval or a "
            "shorter duration",
            source=sc.source,
            key="simulation.record_interval",
        )

    x0 = np.zeros(L.N_STATE)
    has_cap = sc.supply.capacitance > 0.0
    if has_cap:
        x0[L.X_BUS] = sc.supply.voltage  # the bus capacitor starts charged to the source

    return KernelInputs(
        params=p0,
        state0=x0,
        has_capacitor=has_cap,
        step_s=h,
        n_steps=n_steps,
        steps_per_row=n_sub,
        record_interval_s=record,
        duration_s=duration,
        event_time_s=np.asarray(times, dtype=np.float64),
        event_index=np.asarray(idx, dtype=np.int64),
        event_value=np.asarray(vals, dtype=np.float64),
        rows=rows,
        time_constants_s=taus,
        controller=ctl,
        steps_per_sample=n_ctl,
    )


def _sampled_grid(
    sc: Scenario, sample_s: float, h: float, record: float, fastest: float
) -> tuple[int, float, int, float]:
    """``(steps per sample, step, steps per row, record interval)`` of a closed-loop run."""
    if sc.simulation.step is not None:
        ratio = sample_s / h
        if abs(ratio - round(ratio)) > 1e-9 * ratio or ratio < 1.0 - 1e-9:
            raise ScenarioError(
                f"expected a step that divides the fastest loop's sample time "
                f"({sample_s:.6g} s) into whole steps, found {h:.6g} s",
                source=sc.source,
                key="simulation.step",
            )
        n_sub = max(1, round(record / h))
        return round(ratio), h, n_sub, n_sub * h
    h, n_ctl, n_sub = control_grid(sample_s, record, min(h, fastest / STEPS_PER_TIME_CONSTANT))
    return n_ctl, h, n_sub, n_sub * h


# --------------------------------------------------------------------------------------------
# Averaged and switching bridge models (dcsim.engine.bridge_kernel)
# --------------------------------------------------------------------------------------------

MIN_GRID_PER_PERIOD = 8
"""Nominal steps per PWM period at least (trace rows that show the ripple)."""
DEFAULT_ROWS_SWITCHING = 200_000


@dataclass(frozen=True)
class BridgeInputs:
    """Everything :func:`dcsim.engine.bridge_kernel.run_periods` needs."""

    params: np.ndarray
    state0: np.ndarray
    modes0: np.ndarray
    period_s: float
    n_grid: int
    n_periods: int
    steps_per_row: int
    step_s: float
    record_interval_s: float
    duration_s: float
    event_time_s: np.ndarray
    event_index: np.ndarray
    event_value: np.ndarray
    ocv_soc: np.ndarray
    ocv_V: np.ndarray
    rows: int
    time_constants_s: dict
    switching: bool
    fuse_model: object | None
    controller: ControllerInputs | None = None
    periods_per_sample: int = 0


def _bridge_shaft_index() -> dict[str, int]:
    from dcsim.engine import bridge_layout as B

    return {
        "inertia": B.Q_J,
        "load_torque": B.Q_TL,
        "coulomb": B.Q_TC,
        "static": B.Q_TS,
        "gear_coulomb": B.Q_GEAR_COULOMB,
        "gear_constant": B.Q_GEAR_CONST,
    }


def bridge_parameters(sc: Scenario):
    """Parameter vector [SI] of the bridge kernel at t = 0 and the fuse model (or None)."""
    from dcsim.engine import bridge_layout as B

    q = np.zeros(B.N_Q)
    m, ld, s, c, br = sc.motor, sc.load, sc.supply, sc.control, sc.bridge
    q[B.Q_R] = m.resistance
    q[B.Q_L] = m.inductance
    q[B.Q_K] = m.torque_constant
    q[B.Q_J] = m.inertia + ld.inertia
    q[B.Q_B] = m.viscous_friction
    q[B.Q_TC] = m.coulomb_friction
    q[B.Q_TS] = m.static_friction or 0.0  # None: the breakaway level is the Coulomb one
    q[B.Q_VBRUSH] = m.brush_drop
    q[B.Q_TBR] = m.brush_friction
    q[B.Q_TH] = m.hysteresis_loss_torque
    q[B.Q_BE] = m.eddy_loss_coefficient
    q[B.Q_TL] = ld.torque
    if sc.gear is not None or sc.hoist is not None:
        for name, index in _bridge_shaft_index().items():
            q[index] = shaft_values(sc)[name]
    q[B.Q_LOCK] = 1.0 if ld.locked else 0.0
    bat = sc.battery
    q[B.Q_RS] = s.resistance + (bat.resistance if bat is not None else 0.0)
    q[B.Q_LS] = s.inductance
    q[B.Q_C] = s.capacitance
    q[B.Q_ESR] = s.esr
    q[B.Q_REGEN] = 1.0 if s.regenerative else 0.0
    q[B.Q_BMS_ICHG] = math.inf
    q[B.Q_BMS_IDIS] = math.inf
    q[B.Q_BMS_VFULL] = math.inf
    q[B.Q_BMS_VRECLOSE] = -math.inf
    q[B.Q_BMS_TRECLOSE] = math.inf
    if bat is not None:
        q[B.Q_BAT] = 1.0
        q[B.Q_BAT_Q] = bat.capacity
        q[B.Q_BAT_R] = bat.resistance
        for index, value in (
            (B.Q_BMS_ICHG, bat.max_charge_current),
            (B.Q_BMS_IDIS, bat.max_discharge_current),
            (B.Q_BMS_VFULL, bat.full_voltage),
            (B.Q_BMS_VRECLOSE, bat.reclose_voltage),
            (B.Q_BMS_TRECLOSE, bat.reclose_time),
        ):
            if value is not None:
                q[index] = value
    q[B.Q_RON] = br.on_resistance
    q[B.Q_VD] = br.diode_drop
    q[B.Q_TD] = br.dead_time
    q[B.Q_FS] = br.frequency
    q[B.Q_UNIPOLAR] = 1.0 if br.pwm == "unipolar" else 0.0
    q[B.Q_EDGE] = 1.0 if br.alignment == "edge" else 0.0
    q[B.Q_COUNTS] = br.duty_counts
    q[B.Q_MINPULSE] = br.min_pulse
    q[B.Q_SWITCHING] = 1.0 if br.model == "switching" else 0.0
    q[B.Q_VCMD] = c.voltage
    q[B.Q_VNOM] = s.voltage
    q[B.Q_ESW] = br.switching_energy
    q[B.Q_ESW_V] = br.switching_energy_voltage
    q[B.Q_ESW_I] = br.switching_energy_current
    q[B.Q_TR] = br.rise_time
    q[B.Q_TF] = br.fall_time
    q[B.Q_IPK] = br.trip_current_A
    q[B.Q_BLANK] = br.blanking_time
    # the decay of the PWM off-time and after the current comparator trips
    if br.decay is not None:
        q[B.Q_DECAY] = 1.0
        q[B.Q_SLOW_HIGH] = 1.0 if br.slow_decay == "high-side" else 0.0
        q[B.Q_FAST_SYNC] = 1.0 if br.fast_decay == "synchronous" else 0.0
        q[B.Q_FAST_FRAC] = {"slow": 0.0, "fast": 1.0, "mixed": br.fast_decay_fraction}[br.decay]
    elif br.pwm == "bipolar":  # the comparator turns on the opposite diagonal
        q[B.Q_FAST_SYNC] = 1.0
        q[B.Q_FAST_FRAC] = 1.0
    q[B.Q_CHOP_FIXED] = 1.0 if br.current_regulation == "fixed-off-time" else 0.0
    q[B.Q_TOFF] = br.off_time if br.off_time is not None else 0.0
    q[B.Q_TCD] = br.comparator_delay
    q[B.Q_TONMIN] = br.min_on_time
    q[B.Q_SENSE_BUS] = 0.0 if br.sense_location == "in-line" else 1.0
    q[B.Q_RSENSE] = br.sense_resistance
    if sc.brake is not None:
        q[B.Q_BRAKE_R] = sc.brake.resistance
        q[B.Q_BRAKE_ON] = sc.brake.on_voltage
        q[B.Q_BRAKE_OFF] = sc.brake.off_voltage
    if sc.protection is not None:
        q[B.Q_OV] = sc.protection.over_voltage
        q[B.Q_UV] = sc.protection.under_voltage
        q[B.Q_AUTO_RESTART] = 1.0 if sc.protection.restart == "auto" else 0.0
        q[B.Q_RESTART_DELAY] = sc.protection.restart_delay
        q[B.Q_RESTART_MARGIN] = sc.protection.restart_margin
        q[B.Q_OCP] = sc.protection.over_current
        q[B.Q_OCP_DG] = sc.protection.over_current_deglitch
        q[B.Q_OCP_RETRY] = 1.0 if sc.protection.over_current_action == "retry" else 0.0
        q[B.Q_OCP_RT] = sc.protection.over_current_retry_time
    q[B.Q_PRE_V] = math.inf
    if sc.precharge is not None:
        q[B.Q_PRE_R] = sc.precharge.resistance
        if sc.precharge.bypass_voltage is not None:
            q[B.Q_PRE_V] = sc.precharge.bypass_voltage
    fuse = None
    if sc.fuse is not None:
        from dcsim.power.fuse import scenario_fuse_model

        fuse = scenario_fuse_model(sc.fuse, sc.source)
        q[B.Q_FUSE] = 1.0
        q[B.Q_FUSE_IMIN] = fuse.min_melting_current_A
        q[B.Q_FUSE_TAU] = fuse.tau_s
    return q, fuse


def bridge_time_constants(sc: Scenario, q: np.ndarray) -> dict[str, float]:
    """Time constants of the drive with its bus circuit [s] (see :func:`time_constants`)."""
    from dcsim.engine import bridge_layout as B

    p = parameter_vector(sc)
    p[L.P_RS] = q[B.Q_RS]
    taus = time_constants(p)
    c = q[B.Q_C]
    if q[B.Q_LS] > 0.0:
        if q[B.Q_RS] > 0.0:
            taus["source_lr"] = q[B.Q_LS] / q[B.Q_RS]
        taus["source_lc_resonance"] = math.sqrt(q[B.Q_LS] * c)
    if q[B.Q_ESR] > 0.0:
        taus["capacitor_esr"] = q[B.Q_ESR] * c
    if q[B.Q_BRAKE_R] > 0.0:
        taus["brake_rc"] = q[B.Q_BRAKE_R] * c
    if q[B.Q_PRE_R] > 0.0:
        taus["precharge_rc"] = (q[B.Q_PRE_R] + q[B.Q_RS]) * c
    if q[B.Q_FUSE] > 0.0:
        taus["fuse_heating"] = q[B.Q_FUSE_TAU]
    # with the on-resistance in the loop the electrical time constant is shorter
    r_loop = q[B.Q_R] + 2.0 * q[B.Q_RON]
    taus["electrical"] = min(taus["electrical"], q[B.Q_L] / r_loop)
    return taus


def assemble_bridge(sc: Scenario) -> BridgeInputs:
    """Kernel inputs of the averaged and switching bridge models.

    The averaged model advances in nominal steps (a tenth of the fastest time constant); the
    switching model period by period, each PWM period cut into at least
    :data:`MIN_GRID_PER_PERIOD` nominal steps and, between them, at every switching instant.
    """
    from dcsim.engine import bridge_layout as B

    q, fuse = bridge_parameters(sc)
    duration = sc.simulation.duration
    taus = bridge_time_constants(sc, q)
    param_of_key = {
        "motor.resistance": B.Q_R,
        "motor.torque_constant": B.Q_K,
        "motor.viscous_friction": B.Q_B,
        "motor.coulomb_friction": B.Q_TC,
        "motor.static_friction": B.Q_TS,
        "load.torque": B.Q_TL,
        "load.inertia": B.Q_J,
        "load.locked": B.Q_LOCK,
        "supply.voltage": B.EV_SOURCE_VOLTAGE,
        "supply.resistance": B.Q_RS,
        "supply.regenerative": B.Q_REGEN,
        "control.voltage": B.Q_VCMD,
    }
    events: list[tuple[float, int, int, float]] = []  # (time, order, index, value)
    referred = sc.gear is not None or sc.hoist is not None
    shaft_rows = shaft_event_rows(sc, _bridge_shaft_index()) if referred else []
    for n, ev in enumerate(sc.events):
        if referred:
            for t_row, i_row, v_row in shaft_rows:
                if t_row == ev.at:
                    events.append((t_row, len(events), i_row, v_row))
            shaft_rows = [row for row in shaft_rows if row[0] != ev.at]
        for key, value in ev.changes:
            if referred and key in SHAFT_KEYS:
                continue
            if key not in param_of_key:
                raise ScenarioError(
                    f"expected no event on {key} with bridge.model = '{sc.bridge.model}': "
                    "it belongs to the wound-field machines, which run with the ideal bridge "
                    "only, found one",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
            v = float(value)
            if key == "load.inertia":
                v += sc.motor.inertia
            if key == "supply.resistance" and sc.battery is not None:
                v += sc.battery.resistance
            if key == "motor.resistance":
                taus["electrical"] = min(taus["electrical"], sc.motor.inductance / v)
            events.append((ev.at, len(events), param_of_key[key], v))
    prof = sc.supply_profile
    if prof is not None:
        ts, vs = prof.times_s, prof.voltages_V
        for k in range(len(ts)):
            t_abs = prof.start + ts[k]
            if t_abs > duration:
                break
            slope = 0.0
            if k + 1 < len(ts) and ts[k + 1] > ts[k]:
                slope = (vs[k + 1] - vs[k]) / (ts[k + 1] - ts[k])
            events.append((t_abs, len(events), B.EV_SOURCE_RAMP, vs[k]))
            events.append((t_abs, len(events), B.Q_SLOPE, slope))
    if sc.precharge is not None and sc.precharge.bypass_time is not None:
        if sc.precharge.bypass_time <= duration:
            events.append((sc.precharge.bypass_time, len(events), B.EV_BYPASS, 0.0))
    events.sort(key=lambda e: (e[0], e[1]))

    fastest = min(taus.values())
    switching = sc.bridge.model == "switching"
    user_step = sc.simulation.step
    if user_step is not None and user_step > fastest * MAX_USER_STEP_FRACTION:
        fastest_name = min(taus, key=taus.get)
        raise ScenarioError(
            f"expected a step of at most {fastest * MAX_USER_STEP_FRACTION:.3g} s (a quarter "
            f"of the fastest time constant, {fastest_name} = {fastest:.3g} s), found "
            f"{user_step:.3g} s; remove simulation.step to let dcsim choose",
            source=sc.source,
            key="simulation.step",
        )
    h_target = user_step if user_step is not None else fastest / STEPS_PER_TIME_CONSTANT
    record = sc.simulation.record_interval
    if switching:
        period = 1.0 / sc.bridge.frequency
        n_grid = max(MIN_GRID_PER_PERIOD, math.ceil(period / h_target - 1e-9))
        if record is not None:
            per_period = period / record
            if abs(per_period - round(per_period)) <= 1e-9 * per_period and per_period >= 1:
                # whole rows per period: a grid that puts every row on a step
                r = round(per_period)
                n_grid = r * math.ceil(n_grid / r)
            elif record < period / n_grid:
                n_grid = math.ceil(period / record - 1e-9)
        h = period / n_grid
    else:
        h = h_target
        if record is not None and record < h:
            h = record
        period = h
        n_grid = 1
    if record is None:
        rows_wanted = DEFAULT_ROWS_SWITCHING if switching else DEFAULT_ROWS
        record = max(h, duration / rows_wanted)
    n_sub = max(1, round(record / h))
    if not switching and sc.simulation.record_interval is not None:
        # the averaged model's step divides the record interval exactly
        n_sub = max(1, math.ceil(record / h_target - 1e-9))
        h = record / n_sub
        period = h
    record = n_sub * h
    if not switching:
        n_grid = n_sub  # a kernel "period" of the averaged model is one trace row
        period = record
    ctl = controller_inputs(sc)
    n_cp = 0
    if ctl.closed_loop:
        if switching:
            n_cp = max(1, round(ctl.sample_s / period))
        else:
            # a kernel period is one controller base sample; rows on the same step grid
            h, n_grid, n_sub = control_grid(ctl.sample_s, record, h_target)
            period = n_grid * h
            record = n_sub * h
            n_cp = 1
    n_periods = max(1, math.ceil(duration / period - 1e-9))
    total_steps = n_periods * n_grid
    if total_steps > MAX_STEPS:
        raise ScenarioError(
            f"expected at most {MAX_STEPS:.0e} steps, found {total_steps:.3g} (step {h:.3g} s "
            f"over {duration:.3g} s): shorten simulation.duration",
            source=sc.source,
            key="simulation.step",
        )
    rows = total_steps // n_sub + 3
    if rows * B.N_REC * 8 > MAX_TRACE_BYTES:
        raise ScenarioError(
            f"expected at most {MAX_TRACE_BYTES // (B.N_REC * 8):.3g} trace rows, found "
            f"{rows:.3g} ({duration:.3g} s recorded every {record:.3g} s): set a longer "
            "simulation.record_interval or a shorter duration",
            source=sc.source,
            key="simulation.record_interval",
        )

    x0 = np.zeros(B.N_A)
    x0[B.S_ONE] = 1.0
    x0[B.S_VS] = sc.supply.voltage
    if sc.supply.initial_bus_voltage is not None:
        x0[B.S_VC] = sc.supply.initial_bus_voltage
    elif sc.precharge is None:
        x0[B.S_VC] = sc.supply.voltage
    if sc.battery is not None:
        x0[B.S_SOC] = sc.battery.initial_state_of_charge
        pts = sc.battery.open_circuit_voltage
        ocv_soc = np.array([p[0] for p in pts])
        ocv_v = np.array([p[1] for p in pts])
    else:
        ocv_soc = np.zeros(2)
        ocv_v = np.zeros(2)
    md0 = np.zeros(B.N_M, dtype=np.int64)
    md0[B.M_SIGMA] = 1
    md0[B.M_PRE] = 1 if sc.precharge is not None else 0
    return BridgeInputs(
        params=q,
        state0=x0,
        modes0=md0,
        period_s=period,
        n_grid=n_grid,
        n_periods=n_periods,
        steps_per_row=n_sub,
        step_s=h,
        record_interval_s=record,
        duration_s=duration,
        event_time_s=np.array([e[0] for e in events], dtype=np.float64),
        event_index=np.array([e[2] for e in events], dtype=np.int64),
        event_value=np.array([e[3] for e in events], dtype=np.float64),
        ocv_soc=ocv_soc,
        ocv_V=ocv_v,
        rows=rows,
        time_constants_s=taus,
        switching=switching,
        fuse_model=fuse,
        controller=ctl,
        periods_per_sample=n_cp,
    )
