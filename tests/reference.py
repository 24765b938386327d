"""Reference solutions the physics tests hold the dcsim engine against.

Nothing here imports the engine. Two independent references of the drive equations::

    L di/dt = v_a - R i - K w
    J dw/dt = K i - B w - T_c sgn(w) - T_load        (w = 0 while stuck)
    dtheta/dt = w
    C dv/dt = i_s - i_b,  i_s = (V_s - v) / R_s  (0 while a diode front end blocks)

1. :func:`linear_response`: the closed-form response of the linear (i, w, theta) model to a
   constant armature voltage and a constant opposing torque from any initial state, from the
   matrix exponential of the augmented system matrix (scipy.linalg.expm; the augmented-matrix
   form of the forced response: C. Van Loan, "Computing integrals involving the matrix
   exponential", IEEE Trans. Autom. Control 23 (1978) 395-404 -- citation from memory).
2. :func:`solve_reference`: the full equations (capacitor bus with the ideal bridge's
   ``i_b = v_a i / v``, diode front end, Coulomb friction as ``T_c sgn(w)`` with sticking at
   rest) integrated by scipy's ``solve_ivp`` (Radau IIA, rtol = 1e-10), one regime at a time,
   each regime change located by solve_ivp's event finder. Meant for runs where the shaft does
   not reverse through zero speed: reaching rest raises :class:`ReferenceLimit`.

Plus the textbook closed forms the checks use (locked-rotor current and its I^2 t, steady
states, breakaway time, the characteristic polynomial) and :func:`build_scenario`, which writes
a scenario as TOML text with units and reads it back through the project's loader.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from scipy.integrate import solve_ivp
from scipy.linalg import expm

from dcsim.scenario.schema import Control, Event, Load, Motor, Scenario, Simulation, Supply

try:  # the TOML loader exercises unit parsing; fall back to dataclasses if it does not import
    from dcsim.scenario.load import load_scenario_text
except ImportError:  # pragma: no cover - only while the loader is being written
    load_scenario_text = None


# --------------------------------------------------------------------------------------------
# Scenario building
# --------------------------------------------------------------------------------------------

_UNITS: dict[str, str | None] = {
    "simulation.duration": "s",
    "simulation.record_interval": "s",
    "simulation.step": "s",
    "motor.resistance": "ohm",
    "motor.inductance": "H",
    "motor.torque_constant": "N*m/A",
    "motor.inertia": "kg*m^2",
    "motor.viscous_friction": "N*m*s/rad",
    "motor.coulomb_friction": "N*m",
    "load.inertia": "kg*m^2",
    "load.torque": "N*m",
    "load.locked": None,
    "supply.voltage": "V",
    "supply.resistance": "ohm",
    "supply.capacitance": "F",
    "supply.regenerative": None,
    "control.voltage": "V",
}
"""SI unit each key is written in (``None``: a TOML boolean)."""


def _toml_value(key: str, value: float | bool) -> str:
    unit = _UNITS[key]
    if unit is None:
        return "true" if value else "false"
    return f'"{float(value)!r} {unit}"'


def build_scenario(
    *,
    duration: float,
    motor: Mapping[str, float],
    supply: Mapping[str, float | bool],
    load: Mapping[str, float | bool] | None = None,
    voltage: float = 0.0,
    events: Sequence[tuple[float, Mapping[str, float | bool]]] = (),
    step: float | None = None,
    record_interval: float | None = None,
    title: str = "",
) -> Scenario:
    """A scenario from SI numbers, read through the TOML loader when it is available.

    Every value is written as a unit string in its SI unit (``"0.002 H"``), so the loader's
    unit parsing is exercised while the numbers reach the engine unchanged: the loaded scenario
    is checked to hold exactly the floats given.

    Parameters
    ----------
    duration : float
        Run length [s].
    motor, supply, load : mapping
        Table keys as in the scenario contract, SI values.
    voltage : float
        Open-loop armature voltage command [V].
    events : sequence of (time [s], {dotted key: SI value})
        Scenario events.
    step, record_interval : float, optional
        Plant step and trace spacing [s]; ``None`` lets dcsim choose.
    title : str
        Free text for ``[about]`` (the invented setting of the test).
    """
    load = dict(load or {})
    tables: dict[str, dict[str, float | bool]] = {
        "simulation": {"duration": duration},
        "motor": dict(motor),
        "load": load,
        "supply": dict(supply),
        "control": {"voltage": voltage},
    }
    if step is not None:
        tables["simulation"]["step"] = step
    if record_interval is not None:
        tables["simulation"]["record_interval"] = record_interval

    direct = Scenario(
        simulation=Simulation(**tables["simulation"]),
        motor=Motor(**tables["motor"]),
        supply=Supply(**tables["supply"]),
        load=Load(**load),
        control=Control(mode="voltage", voltage=voltage),
        events=tuple(
            Event(at=float(at), changes=tuple((k, v) for k, v in changes.items()))
            for at, changes in sorted(events, key=lambda e: e[0])
        ),
    )
    if load_scenario_text is None:
        return direct

    lines = []
    if title:
        lines += ["[about]", f"title = {title!r}", ""]
    for table, values in tables.items():
        lines.append(f"[{table}]")
        if table == "control":
            lines.append('mode = "voltage"')
        lines += [f"{k} = {_toml_value(f'{table}.{k}', v)}" for k, v in values.items()]
        lines.append("")
    for at, changes in events:
        lines += ["[[events]]", f"at = {_toml_value('simulation.duration', at)}"]
        pairs = ", ".join(f'"{k}" = {_toml_value(k, v)}' for k, v in changes.items())
        lines += [f"set = {{ {pairs} }}", ""]
    sc = load_scenario_text("\n".join(lines), source="<physics test>")
    for table in ("simulation", "motor", "load", "supply", "control"):
        assert getattr(sc, table) == getattr(direct, table), (table, getattr(sc, table))
    assert [(e.at, dict(e.changes)) for e in sc.events] == [
        (e.at, dict(e.changes)) for e in direct.events
    ]
    return sc


# --------------------------------------------------------------------------------------------
# Closed forms
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LinearResponse:
    """States of the linear model at the requested times.

    Attributes
    ----------
    time : array
        [s]
    current : array
        Armature current [A].
    speed : array
        Shaft speed [rad/s].
    position : array
        Shaft angle [rad].
    """

    time: np.ndarray
    current: np.ndarray
    speed: np.ndarray
    position: np.ndarray

    def state_at(self, k: int) -> tuple[float, float, float]:
        """(i, w, theta) of sample ``k``."""
        return float(self.current[k]), float(self.speed[k]), float(self.position[k])


def system_matrix(R: float, L: float, K: float, J: float, B: float = 0.0) -> np.ndarray:
    """State matrix of ``x = (i, w)`` [1/s], ``x' = A x + (v/L, -T/J)``.

    Source: derived -- the armature-circuit and shaft equations of the armature-controlled DC
    motor, ``L di/dt = v - R i - K w`` and ``J dw/dt = K i - B w - T`` (Hughes & Drury,
    *Electric Motors and Drives*, 4th ed., ch. 3; Franklin, Powell & Emami-Naeini, *Feedback
    Control of Dynamic Systems*, DC-motor model -- chapter from memory), written in state form.
    """
    return np.array([[-R / L, -K / L], [K / J, -B / J]])


def linear_response(
    t: np.ndarray,
    *,
    R: float,
    L: float,
    K: float,
    J: float,
    B: float = 0.0,
    voltage: float,
    torque: float = 0.0,
    x0: tuple[float, float, float] = (0.0, 0.0, 0.0),
    t0: float = 0.0,
) -> LinearResponse:
    """Exact response of the linear motor model to constant inputs, from ``x0`` at ``t0``.

    With ``z = (i, w, theta, 1)`` the forced system is autonomous, ``z' = M z``, with
    ``M = [[A, b], [0, 0]]`` and ``b = (v/L, -T/J, 0)``, so ``z(t) = expm(M (t - t0)) z(t0)``
    (evaluated by scipy.linalg.expm, batched over the times).

    Parameters
    ----------
    t : array
        Times [s], each >= ``t0``.
    R, L, K, J, B : float
        Resistance [ohm], inductance [H], torque constant [N*m/A], inertia [kg*m^2], viscous
        friction [N*m*s/rad].
    voltage : float
        Armature voltage [V].
    torque : float
        Constant torque opposing positive rotation [N*m] (load, plus a sliding Coulomb torque
        with its sign).
    x0 : (i [A], w [rad/s], theta [rad])
        State at ``t0``.
    t0 : float
        Start time [s].
    """
    t = np.asarray(t, dtype=float)
    m = np.zeros((4, 4))
    m[:2, :2] = system_matrix(R, L, K, J, B)
    m[2, 1] = 1.0
    m[0, 3] = voltage / L
    m[1, 3] = -torque / J
    z0 = np.array([*x0, 1.0])
    dt = t - t0
    if np.any(dt < 0.0):
        raise ValueError("linear_response: times before t0")
    z = expm(dt[:, None, None] * m) @ z0
    return LinearResponse(time=t, current=z[:, 0], speed=z[:, 1], position=z[:, 2])


def characteristic_coefficients(
    R: float, L: float, K: float, J: float, B: float = 0.0
) -> np.ndarray:
    """Coefficients of ``(J s + B)(L s + R) + K^2`` (highest power first).

    Source: derived -- speed/voltage transfer function ``K / ((J s + b)(L s + R) + K^2)`` of the
    armature-controlled DC motor (Hughes & Drury, *Electric Motors and Drives*, 4th ed., ch. 3;
    Franklin, Powell & Emami-Naeini, *Feedback Control of Dynamic Systems*, DC-motor model --
    chapter from memory); its denominator is this polynomial.
    """
    return np.polymul([J, B], [L, R]) + np.array([0.0, 0.0, K * K])


def speed_gain(R: float, K: float, B: float) -> float:
    """Steady-state speed per volt, ``K / (R B + K^2)`` [rad/s per V] (s -> 0 of w/V)."""
    return K / (R * B + K * K)


def no_load_steady_state(
    voltage: float, R: float, K: float, B: float, coulomb: float = 0.0, load: float = 0.0
) -> tuple[float, float]:
    """Steady speed [rad/s] and current [A] at constant voltage with w > 0.

    From ``0 = v - R i - K w`` and ``0 = K i - B w - T_c - T_load``:
    ``w = (K v - R (T_c + T_load)) / (K^2 + R B)``, ``i = (B w + T_c + T_load) / K``.
    Source: Hughes & Drury, *Electric Motors and Drives*, 4th ed., ch. 3 (steady-state
    equivalent circuit and torque-speed line; chapter from memory).
    """
    w = (K * voltage - R * (coulomb + load)) / (K * K + R * B)
    return w, (B * w + coulomb + load) / K


def locked_rotor_current(t: np.ndarray, voltage: float, R: float, L: float) -> np.ndarray:
    """``i(t) = V/R (1 - exp(-t R/L))`` [A]: RL circuit step (w = 0, no back-EMF).

    Source: Alexander & Sadiku, *Fundamentals of Electric Circuits*, 5th ed., sec. 7.6 (step
    response of an RL circuit; section number from memory).
    """
    return voltage / R * -np.expm1(-np.asarray(t, dtype=float) * R / L)


def locked_rotor_i2t(duration: float, voltage: float, R: float, L: float) -> float:
    """Closed-form ``integral_0^T i^2 dt`` of :func:`locked_rotor_current` [A^2 s].

    ``(V/R)^2 [T - 2 tau (1 - e^(-T/tau)) + tau/2 (1 - e^(-2T/tau))]``, ``tau = L/R``.
    """
    tau = L / R
    a = -math.expm1(-duration / tau)
    b = -math.expm1(-2.0 * duration / tau)
    return (voltage / R) ** 2 * (duration - 2.0 * tau * a + 0.5 * tau * b)


def breakaway_time(voltage: float, R: float, L: float, K: float, threshold: float) -> float:
    """Time [s] at which the locked-rotor current makes ``K i = threshold`` (K V/R > threshold).

    Inverts :func:`locked_rotor_current`: ``t = -(L/R) ln(1 - threshold R / (K V))``.
    """
    return -(L / R) * math.log1p(-threshold * R / (K * voltage))


# --------------------------------------------------------------------------------------------
# solve_ivp reference of the full (non-linear, hybrid) equations
# --------------------------------------------------------------------------------------------


class ReferenceLimit(RuntimeError):
    """The run left what the reference integrator models (e.g. the shaft came to rest)."""


@dataclass(frozen=True)
class Drive:
    """Parameters of the reference model [SI]; field names follow the scenario keys."""

    resistance: float
    inductance: float
    torque_constant: float
    inertia: float
    viscous_friction: float = 0.0
    coulomb_friction: float = 0.0
    load_torque: float = 0.0
    supply_voltage: float = 0.0
    supply_resistance: float = 0.0
    capacitance: float = 0.0
    regenerative: bool = True
    command: float = 0.0


_DRIVE_FIELD = {
    "motor.resistance": "resistance",
    "motor.torque_constant": "torque_constant",
    "motor.viscous_friction": "viscous_friction",
    "motor.coulomb_friction": "coulomb_friction",
    "load.torque": "load_torque",
    "supply.voltage": "supply_voltage",
    "supply.resistance": "supply_resistance",
    "supply.regenerative": "regenerative",
    "control.voltage": "command",
}


def drive_from_scenario(sc: Scenario) -> tuple[Drive, list[tuple[float, dict[str, object]]]]:
    """Reference parameters at t = 0 and the scenario events as field changes."""
    if sc.load.locked:
        raise ReferenceLimit("the reference integrator does not model a locked rotor")
    d = Drive(
        resistance=sc.motor.resistance,
        inductance=sc.motor.inductance,
        torque_constant=sc.motor.torque_constant,
        inertia=sc.motor.inertia + sc.load.inertia,
        viscous_friction=sc.motor.viscous_friction,
        coulomb_friction=sc.motor.coulomb_friction,
        load_torque=sc.load.torque,
        supply_voltage=sc.supply.voltage,
        supply_resistance=sc.supply.resistance,
        capacitance=sc.supply.capacitance,
        regenerative=sc.supply.regenerative,
        command=sc.control.voltage,
    )
    changes = [(ev.at, {_DRIVE_FIELD[k]: v for k, v in ev.changes}) for ev in sc.events]
    return d, changes


@dataclass(frozen=True)
class _Regime:
    stuck: bool  # shaft held at rest by static friction
    fsign: float  # direction of the sliding Coulomb torque (0 without Coulomb friction)
    full: bool  # bridge fully on (the bus cannot give the command)
    blocked: bool  # diode front end blocking


@dataclass(frozen=True)
class ReferenceSolution:
    """Reference states and derived quantities at the requested times [SI].

    ``events`` lists ``(time [s], what)`` for every located regime change.
    """

    time: np.ndarray
    current: np.ndarray
    speed: np.ndarray
    position: np.ndarray
    bus_voltage: np.ndarray
    supply_current: np.ndarray
    events: list[tuple[float, str]]


def _armature_and_bus(d: Drive, g: _Regime, i: float, v: float) -> tuple[float, float, float]:
    """Armature voltage, bridge bus current, supply current [V, A, A]."""
    if d.capacitance > 0.0:
        if g.full:
            sign = math.copysign(1.0, d.command)
            va, ib = sign * v, sign * i
        else:
            va, ib = d.command, d.command * i / v
        i_s = 0.0 if g.blocked else (d.supply_voltage - v) / d.supply_resistance
        return va, ib, i_s
    # Stiff source: the bus is the source voltage.
    va = max(-d.supply_voltage, min(d.supply_voltage, d.command))
    ib = va * i / d.supply_voltage if d.supply_voltage > 0.0 else 0.0
    return va, ib, ib


def _rhs(d: Drive, g: _Regime):
    R, L, K, J, B = (
        d.resistance,
        d.inductance,
        d.torque_constant,
        d.inertia,
        d.viscous_friction,
    )
    has_cap = d.capacitance > 0.0
    opposing = d.load_torque + d.coulomb_friction * g.fsign

    def f(_t, y):
        i, w = y[0], y[1]
        v = y[3] if has_cap else d.supply_voltage
        va, ib, i_s = _armature_and_bus(d, g, i, v)
        out = [(va - R * i - K * w) / L, 0.0 if g.stuck else (K * i - B * w - opposing) / J, w]
        if has_cap:
            out.append((i_s - ib) / d.capacitance)
        return out

    def jac(_t, y):
        n = len(y)
        a = np.zeros((n, n))
        a[0, 0] = -R / L
        a[0, 1] = -K / L
        if not g.stuck:
            a[1, 0] = K / J
            a[1, 1] = -B / J
        a[2, 1] = 1.0
        if has_cap:
            i, v = y[0], y[3]
            c = d.capacitance
            if g.full:
                sign = math.copysign(1.0, d.command)
                a[0, 3] = sign / L
                a[3, 0] = -sign / c
            else:
                a[3, 0] = -d.command / (v * c)
                a[3, 3] = d.command * i / (v * v * c)
            if not g.blocked:
                a[3, 3] -= 1.0 / (d.supply_resistance * c)
        return a

    return f, jac


def _guards(d: Drive, g: _Regime) -> list[tuple[str, object]]:
    """Guard functions of a regime: each >= 0 while it holds; an event when one falls to 0."""
    K, tc, tl = d.torque_constant, d.coulomb_friction, d.load_torque
    out: list[tuple[str, object]] = []
    if tc > 0.0:
        if g.stuck:
            out.append(("breakaway+", lambda t, y: tc - (K * y[0] - tl)))
            out.append(("breakaway-", lambda t, y: tc + (K * y[0] - tl)))
        else:
            out.append(("rest", lambda t, y: g.fsign * y[1]))
    if d.capacitance > 0.0:
        vc = abs(d.command)
        if d.command != 0.0:
            if g.full:
                out.append(("bridge in control", lambda t, y: vc - y[3]))
            else:
                out.append(("bridge fully on", lambda t, y: y[3] - vc))
        if not d.regenerative:
            vs = d.supply_voltage
            if g.blocked:
                out.append(("diode conducts", lambda t, y: y[3] - vs))
            else:
                out.append(("diode blocks", lambda t, y: vs - y[3]))
    for _, fn in out:
        fn.terminal = True
        fn.direction = -1.0
    return out


def _initial_regime(d: Drive, y: np.ndarray) -> _Regime:
    i, w = y[0], y[1]
    drive = d.torque_constant * i - d.load_torque
    tc = d.coulomb_friction
    stuck = tc > 0.0 and w == 0.0 and abs(drive) <= tc
    if tc <= 0.0:
        fsign = 0.0
    elif w != 0.0:
        fsign = math.copysign(1.0, w)
    else:
        fsign = 0.0 if stuck else math.copysign(1.0, drive)
    has_cap = d.capacitance > 0.0
    v = y[3] if has_cap else d.supply_voltage
    full = has_cap and abs(d.command) > v
    blocked = has_cap and (not d.regenerative) and v > d.supply_voltage
    return _Regime(stuck=stuck, fsign=fsign, full=full, blocked=blocked)


def _after(d: Drive, g: _Regime, what: str, y: np.ndarray) -> _Regime:
    if what.startswith("breakaway"):
        drive = d.torque_constant * y[0] - d.load_torque
        return replace(g, stuck=False, fsign=math.copysign(1.0, drive))
    if what == "rest":
        raise ReferenceLimit("the shaft reached rest; the reference does not follow reversal")
    if what.startswith("bridge"):
        return replace(g, full=not g.full)
    if what.startswith("diode"):
        return replace(g, blocked=not g.blocked)
    raise AssertionError(what)


def solve_reference(
    sc: Scenario,
    t_eval: np.ndarray,
    *,
    rtol: float = 1e-10,
    atol: float = 1e-13,
) -> ReferenceSolution:
    """Integrate the drive equations of ``sc`` with scipy ``solve_ivp`` (Radau).

    The run is cut at every scenario event and every regime change (stuck / sliding, bridge in
    control / fully on, diode conducting / blocking); each piece is one smooth ODE integrated
    by Radau IIA (order 5) with its analytic Jacobian, and the next piece starts from the
    located state. The bus capacitor starts charged to the supply voltage, as in dcsim.

    Source: scipy.integrate.solve_ivp, method "Radau" (Radau IIA of order 5, after Hairer &
    Wanner, *Solving Ordinary Differential Equations II*, as the scipy documentation states),
    with its event location on the dense output.

    Parameters
    ----------
    sc : Scenario
        Scenario (open-loop voltage mode, free rotor).
    t_eval : array
        Increasing output times within the run [s].
    rtol, atol : float
        solve_ivp tolerances [-, state units].

    Raises
    ------
    ReferenceLimit
        The shaft comes to rest (the reference does not model reversal), or the scenario needs
        a model it lacks (a locked rotor, a resistive source without capacitor).
    """
    d, changes = drive_from_scenario(sc)
    if d.capacitance <= 0.0 and d.supply_resistance > 0.0:
        raise ReferenceLimit("no capacitor with source resistance: use the closed form")
    has_cap = d.capacitance > 0.0
    t_eval = np.asarray(t_eval, dtype=float)
    n = 4 if has_cap else 3
    y = np.zeros(n)
    if has_cap:
        y[3] = d.supply_voltage
    out = np.full((n, t_eval.size), np.nan)
    supply = np.full(t_eval.size, np.nan)
    stops = sorted({float(at) for at, _ in changes if 0.0 < at < sc.simulation.duration})
    stops.append(sc.simulation.duration)
    located: list[tuple[float, str]] = []
    pending = list(changes)
    t = 0.0
    zero_length = 0
    for stop in stops:
        while pending and pending[0][0] <= t:
            d = replace(d, **pending.pop(0)[1])
        g = _initial_regime(d, y)
        while t < stop:
            f, jac = _rhs(d, g)
            guards = _guards(d, g)
            sol = solve_ivp(
                f,
                (t, stop),
                y,
                method="Radau",
                jac=jac,
                rtol=rtol,
                atol=atol,
                dense_output=True,
                events=[fn for _, fn in guards] or None,
            )
            if sol.status < 0:
                raise RuntimeError(f"solve_ivp failed: {sol.message}")
            t_end = float(sol.t[-1])
            inside = (t_eval >= t) & (t_eval <= t_end)
            if np.any(inside):
                vals = sol.sol(t_eval[inside])
                out[:, inside] = vals
                for k, idx in enumerate(np.flatnonzero(inside)):
                    v = vals[3, k] if has_cap else d.supply_voltage
                    supply[idx] = _armature_and_bus(d, g, vals[0, k], v)[2]
            y = np.array(sol.y[:, -1])
            if sol.status == 1:
                which = next(k for k, te in enumerate(sol.t_events) if te.size)
                what = guards[which][0]
                located.append((t_end, what))
                if what == "rest":
                    y[1] = 0.0
                g = _after(d, g, what, y)
                zero_length = zero_length + 1 if t_end == t else 0
                if zero_length > 8:
                    raise ReferenceLimit(f"regime changes do not advance at t = {t} s")
            t = t_end if sol.status == 1 else stop
        t = stop
    bus = out[3] if has_cap else np.full(t_eval.size, sc.supply.voltage)
    return ReferenceSolution(
        time=t_eval,
        current=out[0],
        speed=out[1],
        position=out[2],
        bus_voltage=bus,
        supply_current=supply,
        events=located,
    )


# --------------------------------------------------------------------------------------------
# Energy account
# --------------------------------------------------------------------------------------------

ENERGY_TERMS = (
    "energy_source_loss_J",
    "energy_copper_loss_J",
    "energy_friction_J",
    "energy_to_load_J",
    "energy_gear_loss_J",
    "energy_shaft_lock_J",
    "energy_coupling_J",
    "energy_brush_drop_J",
    "energy_brush_friction_J",
    "energy_iron_loss_J",
    "kinetic_energy_change_J",
    "stored_energy_change_J",
)
"""Every way the supplied energy can go (scenario contract, summary keys)."""

POWER_STAGE_ENERGY_TERMS = (
    "energy_bridge_loss_J",
    "energy_to_brake_resistor_J",
    "energy_capacitor_esr_J",
    "energy_precharge_loss_J",
    "energy_fuse_arc_J",
    "energy_current_sense_J",
)
"""The further terms of the averaged and switching bridge models."""

MACHINE_ENERGY_TERMS = (
    "energy_field_copper_loss_J",
    "energy_shaft_damping_J",
)
"""The further terms of the machine-library kernel (wound-field machines, compliant shaft)."""

ENERGY_CLOSURE = 1e-6
"""Allowed residual of the energy account, as a fraction of its largest term. The default
step is a tenth of the fastest time constant, where Simpson's rule on the fastest exponential
errs by about (h/tau)^4/180 ~ 6e-7 of its integral (dcsim.engine.assemble); 1e-6 is that
figure rounded up, the project's accuracy target for the account."""


def assert_energy_closes(summary: Mapping[str, float], stored_J: float = 0.0) -> float:
    """Assert that the supplied energy equals the sum of where it went; return the residual.

    The residual is recomputed here from the terms (not read from the engine), and held to
    :data:`ENERGY_CLOSURE` of the largest term. Source: conservation of energy (first law).
    ``stored_J``: the energy held in the stores at the start (e.g. ``C V^2 / 2`` of a bus
    capacitor); the stored-energy change is a difference of two such values and carries the
    rounding of that size, so it counts as a term.
    """
    extra = POWER_STAGE_ENERGY_TERMS + MACHINE_ENERGY_TERMS
    names = ENERGY_TERMS + tuple(k for k in extra if k in summary)
    terms = [summary["energy_from_supply_J"]] + [summary[k] for k in names]
    residual = summary["energy_from_supply_J"] - math.fsum(summary[k] for k in names)
    largest = max([abs(v) for v in terms] + [stored_J])
    assert largest > 0.0
    # The engine's own residual is the same sum: equal to rounding of the largest term.
    assert abs(summary["energy_balance_residual_J"] - residual) <= 1e-12 * largest
    assert abs(residual) <= ENERGY_CLOSURE * largest, (
        f"energy account open by {residual:.3e} J = {residual / largest:.3e} of the largest "
        f"term {largest:.3e} J"
    )
    return residual / largest


def simulate_checked(sc: Scenario):
    """``dcsim.engine.run.simulate`` followed by :func:`assert_energy_closes`."""
    from dcsim.engine.run import simulate

    res = simulate(sc)
    assert_energy_closes(res.summary)
    return res


def relative_error(value: np.ndarray, reference: np.ndarray) -> float:
    """``max |value - reference| / max |reference|``: error relative to the reference's peak
    (a pointwise ratio is meaningless where the reference passes through zero)."""
    value = np.asarray(value, dtype=float)
    reference = np.asarray(reference, dtype=float)
    return float(np.max(np.abs(value - reference)) / np.max(np.abs(reference)))


def bus_error_bound(step: float, tau: float, swing: float) -> float:
    """Upper estimate of dcsim's bus-voltage error from its ETD2RK bus term [V].

    ETD2RK takes the non-linear forcing ``F = -v_a i / (C v)`` of the bus equation as linear
    over a step, which errs locally by ``-(h^3/12) F''``: the remainder of linear interpolation,
    ``F''/2 s (s - h)``, integrated over the step (derived; it is the form of the ETD2RK local
    error in Cox & Matthews, J. Comput. Phys. 176 (2002) 430-455 -- from memory). With
    ``F''`` of order ``F / tau^2`` for the fastest time constant ``tau`` and ``F tau`` of order
    the swing of the bus voltage, the local errors add up (undamped) to about
    ``(h / tau)^2 / 12 * swing``: second order in the step. It is an upper estimate, since
    ``F`` varies on the fastest time scale only at the start of a transient and the source
    damps the bus error; the sharp check is the order itself (error / 4 for step / 2).

    Parameters
    ----------
    step : float
        Plant step h [s].
    tau : float
        Fastest time constant of the drive [s].
    swing : float
        Range (max - min) of the bus voltage over the run [V].
    """
    return (step / tau) ** 2 / 12.0 * swing


def fastest_time_constant(sc: Scenario) -> float:
    """Fastest time constant of a drive with a bus capacitor [s], from its parameters: source
    R_s C, armature R C, L / (R + R_s), sqrt(L C) and the electromechanical J (R + R_s) / K^2
    (the last as in dcsim.engine.assemble, after Hughes & Drury, Electric Motors and Drives,
    4th ed., ch. 4)."""
    m, s = sc.motor, sc.supply
    j = m.inertia + sc.load.inertia
    r_tot = m.resistance + s.resistance
    taus = [m.inductance / r_tot, j * r_tot / m.torque_constant**2]
    if s.capacitance > 0.0:
        taus += [
            s.resistance * s.capacitance,
            m.resistance * s.capacitance,
            math.sqrt(m.inductance * s.capacitance),
        ]
    return min(taus)
