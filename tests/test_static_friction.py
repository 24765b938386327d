"""Static (breakaway) friction above the Coulomb level: breakaway under a ramp, stick-slip.

Setting (invented): the drive of a library book-lift carriage, a small geared motor whose
guide rails hold the carriage with a breakaway torque twice their sliding friction (referred
to the motor shaft).

Model (dcsim.plant.mechanics): a shaft at rest stays there while ``|K i - T_L| <= T_s``; once
it slides the friction is ``T_c sgn(w) + B w``; it sticks again when the speed reaches zero
with ``|K i - T_L| <= T_s``. Source: D. Karnopp, J. Dyn. Sys., Meas., Control 107(1) (1985)
100-103 (the stick/slip switch); B. Armstrong-Helouvry, P. Dupont, C. Canudas de Wit,
Automatica 30(7) (1994) 1083-1138 (static friction above Coulomb friction, and the stick-slip
limit cycle of integral control at low speed) -- sections from memory.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference import assert_energy_closes, simulate_checked
from scipy.linalg import expm
from scipy.optimize import brentq

from dcsim import load_scenario_text, simulate
from dcsim.errors import ScenarioError

R, L, K, J, B = 1.0, 1e-3, 0.05, 2e-5, 1e-6
TC, TS = 0.01, 0.02  # Coulomb and static friction [N*m]
TAU = L / R
I_BREAK = TS / K  # breakaway current without load torque [A]

MOTOR = f"""
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
coulomb_friction = "{TC} N*m"
"""


def _text(body: str, static: float | None = TS, load_torque: float = 0.0) -> str:
    static_line = "" if static is None else f'static_friction = "{static} N*m"\n'
    return MOTOR + static_line + f'[load]\ntorque = "{load_torque} N*m"\n' + body


# --------------------------------------------------------------------------------------------
# Keys
# --------------------------------------------------------------------------------------------

OPEN_LOOP = """
[simulation]
duration = "10 ms"
[supply]
voltage = "12 V"
[control]
mode = "voltage"
voltage = "1 V"
"""


def test_static_friction_defaults_to_the_coulomb_level():
    sc = load_scenario_text(_text(OPEN_LOOP, static=None))
    assert sc.motor.static_friction is None  # None: breakaway at coulomb_friction
    assert load_scenario_text(_text(OPEN_LOOP)).motor.static_friction == TS


def test_static_friction_below_coulomb_is_refused():
    with pytest.raises(ScenarioError) as err:
        load_scenario_text(_text(OPEN_LOOP, static=0.5 * TC), source="lift.toml")
    msg = str(err.value)
    assert msg.startswith("lift.toml: motor.static_friction: expected a breakaway torque at")
    assert "coulomb_friction" in msg and "found" in msg


def test_an_event_may_not_raise_coulomb_above_static():
    text = _text(OPEN_LOOP) + '[[events]]\nat = "1 ms"\nset = { "motor.coulomb_friction" = '
    text += f'"{2 * TS} N*m" }}\n'
    with pytest.raises(ScenarioError, match=r"events\[0\]\.set\.motor\.coulomb_friction: "):
        load_scenario_text(text, source="lift.toml")


# --------------------------------------------------------------------------------------------
# (a) Breakaway under a slow voltage ramp on a stuck shaft
# --------------------------------------------------------------------------------------------


def _locked_rl_ramp_current(t, v0: float, rate: float) -> np.ndarray:
    """Current of a locked R-L circuit from rest under ``v = v0 + rate * t`` [A].

    Source: Alexander & Sadiku, Fundamentals of Electric Circuits, 5th ed., ch. 7 (first-order
    circuits; the forced response to a ramp by the integrating factor) -- from memory:
    ``i = v0/R (1 - e^-t/tau) + rate/R (t - tau (1 - e^-t/tau))``, ``tau = L/R``.
    """
    t = np.asarray(t, dtype=float)
    decay = 1.0 - np.exp(-t / TAU)
    return v0 / R * decay + rate / R * (t - TAU * decay)


STAIR_DT = 0.1 * TAU  # step of the staircase that realises the ramp on the ideal bridge
RAMP_RATE = 100.0  # [V/s]


@pytest.mark.parametrize("load_torque", [0.0, 0.005])
def test_breakaway_under_a_voltage_ramp_ideal_bridge(load_torque):
    # The ideal bridge applies control.voltage; a ramp is written as the staircase a firmware
    # ramp is: v = RATE (k + 1/2) dt on [k dt, (k + 1) dt), equal to the ramp at mid-steps.
    n = 400
    events = "".join(
        f'[[events]]\nat = "{k * STAIR_DT!r} s"\nset = {{ "control.voltage" = '
        f'"{RAMP_RATE * (k + 0.5) * STAIR_DT!r} V" }}\n'
        for k in range(1, n)
    )
    body = f"""
[simulation]
duration = "{n * STAIR_DT!r} s"
record_interval = "{STAIR_DT / 10!r} s"
[supply]
voltage = "12 V"
[control]
mode = "voltage"
voltage = "{RAMP_RATE * 0.5 * STAIR_DT!r} V"
{events}"""
    res = simulate_checked(load_scenario_text(_text(body, load_torque=load_torque)))
    tr = res.trace
    t, i, w = tr["time_s"], tr["current_A"], tr["speed_rad_s"]
    i_break = (TS + load_torque) / K
    moving = np.flatnonzero(w != 0.0)
    assert moving.size > 0 and np.all(w[moving[0] :] > 0.0)
    first = moving[0]

    # Closed form of the staircase: superposition of R-L step responses, exact for the
    # staircase. Source: Alexander & Sadiku, Fundamentals of Electric Circuits, sec. 7.6 (RL
    # step response) and the linearity of the circuit (superposition).
    def stair_current(tt: float) -> float:
        k = np.arange(0, int(tt // STAIR_DT) + 1)
        dv = np.full(k.size, RAMP_RATE * STAIR_DT)
        dv[0] = RAMP_RATE * 0.5 * STAIR_DT
        return float(np.sum(dv / R * (1.0 - np.exp(-(tt - k * STAIR_DT) / TAU))))

    t_b = brentq(lambda tt: stair_current(tt) - i_break, 0.0, n * STAIR_DT, xtol=1e-15)
    # The shaft is held until the row after t_b and moves from the first row past it (rows
    # are 1/10 of a staircase step apart).
    assert t[first - 1] <= t_b < t[first]
    stuck = t <= t_b
    i_ref = np.array([stair_current(x) for x in t[stuck]])
    # Stuck: an exact R-L circuit (the engine's pieces are exact to rounding; 1e-9 of the peak)
    assert np.max(np.abs(i[stuck] - i_ref)) <= 1e-9 * i_break
    # The static level, not the Coulomb level, holds the shaft: the last stuck row is
    # above the Coulomb breakaway current, within one row of the static one.
    assert K * i[first - 1] - load_torque > TC
    assert abs(i[first - 1] - i_break) <= (i[first] - i[first - 2])

    # Against the continuous ramp: the staircase minus the ramp is a zero-mean sawtooth of
    # amplitude A = RATE dt / 2, whose running integral stays within A dt / 4; through the R-L
    # circuit, L de/dt + R e = s, so |e| <= 2 max|int s| / L = RATE dt^2 / (4 L) (integration
    # by parts, derived here). The ramp current rises at (RATE/R)(1 - e^-t/tau), so the
    # breakaway instants differ by at most dt^2 / (4 tau (1 - e^-t/tau)).
    t_ramp = brentq(
        lambda tt: float(_locked_rl_ramp_current(tt, 0.0, RAMP_RATE)) - i_break, 0.0, 1.0
    )
    bound = STAIR_DT**2 / (4.0 * TAU * (1.0 - math.exp(-t_ramp / TAU)))
    assert abs(t_b - t_ramp) <= bound
    # No energy at breakaway: the account closes (simulate_checked) and friction worked only
    # while sliding, at (T_c + B w) w >= 0 -- nothing is booked while stuck.
    assert res.summary["energy_friction_J"] > 0.0


@pytest.mark.parametrize("model", ["averaged", "switching"])
def test_breakaway_under_a_supply_ramp_pwm_bridge(model):
    # Duty 1 (command = nominal supply voltage): the armature sees the bus capacitor, fed
    # through the wiring from a source ramping at RATE. Locked-shaft circuit, linear in
    # y = (i, v_C, V_s, 1):
    #   L di/dt = v_C - R i,  C dv_C/dt = (V_s - v_C)/R_s - i,  dV_s/dt = RATE.
    rs, cap, v0, rate = 0.01, 1e-3, 0.1, 50.0
    duration = 0.03
    body = f"""
[simulation]
duration = "{duration} s"
record_interval = "10 us"
[supply]
voltage = "{v0} V"
resistance = "{rs} ohm"
capacitance = "{cap} F"
initial_bus_voltage = "{v0} V"
[supply_profile]
points = [["0 s", "{v0} V"], ["{duration} s", "{v0 + rate * duration!r} V"]]
[bridge]
model = "{model}"
frequency = "20 kHz"
[control]
mode = "voltage"
voltage = "{v0} V"
"""
    res = simulate(load_scenario_text(_text(body)))
    assert_energy_closes(res.summary, stored_J=0.5 * cap * v0**2)
    tr = res.trace
    t, i, w = tr["time_s"], tr["current_A"], tr["speed_rad_s"]
    assert np.all(tr["duty"] == 1.0)  # no switching: the two models are the same circuit
    a = np.zeros((4, 4))
    a[0, 0], a[0, 1] = -R / L, 1.0 / L
    a[1, 0], a[1, 1], a[1, 2] = -1.0 / cap, -1.0 / (rs * cap), 1.0 / (rs * cap)
    a[2, 3] = rate
    y0 = np.array([0.0, v0, v0, 1.0])

    # Source: the forced response of a linear system by the matrix exponential of the
    # augmented matrix (C. Van Loan, IEEE Trans. Autom. Control 23 (1978) 395-404 -- from
    # memory), scipy.linalg.expm as the reference.
    def current(tt: float) -> float:
        return float((expm(a * tt) @ y0)[0])

    t_b = brentq(lambda tt: current(tt) - I_BREAK, 1e-6, duration, xtol=1e-14)
    first = np.flatnonzero(w != 0.0)[0]
    assert np.all(w[first:] > 0.0)
    assert t[first - 1] <= t_b < t[first]
    stuck = t <= t_b
    i_ref = np.array([current(x) for x in t[stuck]])
    # Stuck pieces: exact exponentials (the kernel's 8x8 propagator) -- 1e-9 of the level.
    assert np.max(np.abs(i[stuck] - i_ref)) <= 1e-9 * I_BREAK
    assert K * i[first - 1] > TC  # held by the static level, well above Coulomb


def _open_loop(voltage: float, duration: float, coulomb: float, static: float, events=""):
    text = MOTOR.replace(f'coulomb_friction = "{TC} N*m"', f'coulomb_friction = "{coulomb} N*m"')
    text += f'static_friction = "{static} N*m"\n'
    text += f"""
[simulation]
duration = "{duration} s"
record_interval = "{TAU / 50} s"
[supply]
voltage = "12 V"
[control]
mode = "voltage"
voltage = "{voltage} V"
{events}"""
    return simulate_checked(load_scenario_text(text))


def test_static_friction_without_coulomb_friction():
    # T_c = 0 < T_s: held until K i = T_s, then only viscous friction acts while sliding.
    v = 1.0
    res = _open_loop(v, 10 * TAU, 0.0, TS)
    tr = res.trace
    t, w = tr["time_s"], tr["speed_rad_s"]
    # Locked R-L step response i = V/R (1 - e^-t/tau) reaches T_s / K at
    # t_b = -tau ln(1 - R T_s / (K V)). Source: Alexander & Sadiku, Fundamentals of Electric
    # Circuits, sec. 7.6 (RL step response).
    t_b = -TAU * math.log(1.0 - R * TS / (K * v))
    first = np.flatnonzero(w != 0.0)[0]
    assert t[first - 1] <= t_b < t[first]
    sliding = slice(first, None)
    assert np.all(w[sliding] > 0.0)
    # sliding friction is the viscous term alone (no Coulomb level): B w
    np.testing.assert_allclose(tr["friction_torque_Nm"][sliding], B * w[sliding], rtol=1e-12)


def test_an_event_lowering_the_static_friction_releases_a_stuck_shaft():
    # Stuck at the steady locked current V/R, with T_c < K V/R < T_s; at 5 tau an event
    # lowers the breakaway torque below K i: the shaft breaks away at that instant.
    v = 0.3
    assert TC < K * v / R < TS
    t_ev = 5 * TAU
    events = f'[[events]]\nat = "{t_ev} s"\nset = {{ "motor.static_friction" = "{TC} N*m" }}\n'
    res = _open_loop(v, 10 * TAU, TC, TS, events)
    tr = res.trace
    t, w = tr["time_s"], tr["speed_rad_s"]
    assert np.all(w[t <= t_ev] == 0.0)
    assert np.all(w[t > t_ev] > 0.0)


# --------------------------------------------------------------------------------------------
# (b) Stick-slip under a PI speed loop at a low reference
# --------------------------------------------------------------------------------------------

W_REF = 1.0  # [rad/s]
KP_W, KI_W, H_W = 0.005, 0.5, 500e-6  # speed loop [A*s/rad, A/rad, s]
ALPHA = 2000.0  # current-loop bandwidth [rad/s]: IMC gains kp = alpha L, ki = alpha R
H_I = 50e-6
ROW = 100e-6


def _speed_loop(static: float | None, duration: float = 3.0):
    body = f"""
[simulation]
duration = "{duration} s"
record_interval = "{ROW} s"
[supply]
voltage = "12 V"
[control]
mode = "speed"
[control.current]
kp = "{ALPHA * L} V/A"
ki = "{ALPHA * R} V/(A*s)"
sample_time = "{H_I} s"
limit = "12 V"
[control.speed]
kp = "{KP_W} A*s/rad"
ki = "{KI_W} A/rad"
sample_time = "{H_W} s"
limit = "2 A"
[control.reference]
kind = "step"
value = "{W_REF} rad/s"
at = "0 s"
"""
    return simulate_checked(load_scenario_text(_text(body, static=static)))


def _sticks(tr) -> list[tuple[int, int]]:
    """(first, last) row of every stretch of exactly zero speed."""
    z = tr["speed_rad_s"] == 0.0
    edges = np.flatnonzero(np.diff(z.astype(int)))
    starts = [0] if z[0] else []
    starts += [e + 1 for e in edges if z[e + 1]]
    ends = [e for e in edges if z[e]]
    if z[-1]:
        ends.append(z.size - 1)
    return list(zip(starts, ends, strict=True))


# Timing bound of a breakaway against the integrator's ramp (derived here): the speed loop's
# command is a staircase within one speed sample H_W of the ramp (backward Euler puts each
# sample's increment in at once); with the shaft stuck there is no back-EMF and the IMC current
# loop is first order, so the current follows a ramp one time constant 1/ALPHA late, plus up
# to one current sample H_I of hold; the trace shows the breakaway to one row.
T_BOUND = H_W + 1.0 / ALPHA + H_I + ROW


def test_static_excess_gives_a_stick_slip_limit_cycle():
    res = _speed_loop(TS)
    tr = res.trace
    t = tr["time_s"]
    sticks = _sticks(tr)
    # A limit cycle: the shaft comes back to rest again and again, and breaks away again.
    assert len(sticks) >= 4

    # First stick, from rest with an empty integrator: the command is kp e + ki e t with
    # e = w_ref, breakaway when K i* = T_s (+ T_L = 0). Source: Armstrong-Helouvry et al.,
    # Automatica 30(7) (1994) 1083-1138, stick-slip under integral control -- from memory.
    t_first = (TS / K - KP_W * W_REF) / (KI_W * W_REF)
    assert abs(t[sticks[0][1]] - t_first) <= T_BOUND

    # Later sticks: during each the measured speed is zero, so the integrator ramps at
    # ki w_ref from its value at the first sample in the stick; breakaway when the command
    # reaches T_s / K. The stick's duration follows from that ramp.
    cmd, integ = tr["current_command_A"], tr["speed_integrator_A"]
    for first, last in sticks[1:]:
        if last == t.size - 1:
            continue  # the run ends inside this stick
        # first speed sample inside the stick (rows on the sample grid: every H_W / ROW rows)
        k = first + 1
        while abs(round(t[k] / H_W) * H_W - t[k]) > 1e-9 * H_W:
            k += 1
        # during the stick the recorded command is kp w_ref + integrator (P on zero speed)
        assert abs(cmd[k] - (KP_W * W_REF + integ[k])) <= 1e-12
        slope = (integ[k + 20] - integ[k]) / (t[k + 20] - t[k])
        assert abs(slope - KI_W * W_REF) <= 1e-9 * KI_W * W_REF
        t_break = t[k] + (TS / K - cmd[k]) / (KI_W * W_REF)
        assert abs(t[last] - t_break) <= T_BOUND
        assert t[last] - t[first] > 10 * T_BOUND  # a real stick, not a touch of zero speed


def test_without_static_excess_the_same_loop_settles():
    res = _speed_loop(None)
    tr = res.trace
    t, w = tr["time_s"], tr["speed_rad_s"]
    sticks = _sticks(tr)
    assert len(sticks) == 1 and sticks[0][0] == 0  # stuck only before the first breakaway
    # The first breakaway is now at the Coulomb level T_c / K.
    t_first = (TC / K - KP_W * W_REF) / (KI_W * W_REF)
    assert abs(t[sticks[0][1]] - t_first) <= T_BOUND
    # ... and the loop then settles at the reference (integral action: zero steady error).
    assert np.all(w[sticks[0][1] + 1 :] > 0.0)
    assert abs(w[-1] - W_REF) <= 1e-3 * W_REF
