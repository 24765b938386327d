"""The speed loop's regenerative current limit (``control.speed.regen_limit``).

Setting (invented): a parcel conveyor's drive, whose belt drag (dry friction referred to the
motor shaft) is large; the supply behind the bus is a diode front end (not regenerative) with a
bus capacitor, so every joule the motor returns while braking raises the bus.

With the measured speed positive the current command may not go below ``-regen_limit``: the
deceleration is then the constant torque ``K I_regen + T_c`` on the inertia, and the belt drag
takes the kinetic energy that a harder braking current would have pushed into the capacitor.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference import assert_energy_closes

from dcsim import load_scenario_text, simulate
from dcsim.errors import ScenarioError

R, L, K, J, TC = 1.0, 1e-3, 0.05, 2e-4, 0.1  # [ohm, H, N*m/A, kg*m^2, N*m]
VS, RS, CAP = 24.0, 0.1, 2.2e-3  # supply [V, ohm, F]
LIMIT, REGEN = 5.0, 0.5  # speed loop's current limits [A]
W1, W2 = 300.0, 50.0  # speed before and after the step down [rad/s]
T_STEP = 1.0  # [s], on the speed loop's sample grid
KP_W, KI_W, H_W = 0.2, 5.0, 500e-6
ALPHA, H_I = 2000.0, 50e-6  # IMC current loop: kp = alpha L, ki = alpha R
ROW = H_I / 4  # four rows per current sample: integrands smooth within each pair of rows


def _conveyor(regen: float | None, duration: float = 2.2, extra: str = ""):
    regen_line = "" if regen is None else f'regen_limit = "{regen} A"\n'
    text = f"""
[simulation]
duration = "{duration} s"
record_interval = "{ROW} s"
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J} kg*m^2"
coulomb_friction = "{TC} N*m"
[supply]
voltage = "{VS} V"
resistance = "{RS} ohm"
capacitance = "{CAP} F"
regenerative = false
[control]
mode = "speed"
[control.current]
kp = "{ALPHA * L} V/A"
ki = "{ALPHA * R} V/(A*s)"
sample_time = "{H_I} s"
limit = "{VS} V"
back_emf_feedforward = true
[control.speed]
kp = "{KP_W} A*s/rad"
ki = "{KI_W} A/rad"
sample_time = "{H_W} s"
limit = "{LIMIT} A"
{regen_line}[control.reference]
kind = "step"
initial = "{W1} rad/s"
value = "{W2} rad/s"
at = "{T_STEP} s"
{extra}"""
    sc = load_scenario_text(text, source="conveyor.toml")
    res = simulate(sc)
    # the capacitor starts charged to the supply voltage: C V^2 / 2 is a store, not a term
    assert_energy_closes(res.summary, stored_J=0.5 * CAP * VS**2)
    return res


def test_regen_limit_needs_a_speed_loop():
    text = f"""
[simulation]
duration = "10 ms"
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J} kg*m^2"
[supply]
voltage = "{VS} V"
[control]
mode = "current"
[control.current]
kp = "2 V/A"
sample_time = "50 us"
[control.speed]
kp = "0.05 A*s/rad"
sample_time = "500 us"
limit = "5 A"
regen_limit = "1 A"
"""
    with pytest.raises(ScenarioError) as err:
        load_scenario_text(text, source="conveyor.toml")
    assert str(err.value).startswith(
        "conveyor.toml: control.speed.regen_limit: expected control.mode 'speed' or 'position'"
    )
    with pytest.raises(ScenarioError, match="regen_limit: expected .* greater than 0"):
        load_scenario_text(text.replace('"1 A"', '"-1 A"'), source="conveyor.toml")


def test_braking_command_is_clamped_and_the_deceleration_is_constant_torque():
    res = _conveyor(REGEN)
    tr = res.trace
    t, w, cmd = tr["time_s"], tr["speed_rad_s"], tr["current_command_A"]
    before = t < T_STEP
    assert abs(w[before][-1] - W1) <= 1e-3 * W1  # settled at W1 before the step
    # The command never goes below -regen_limit (the clamp is exact) and reaches it.
    assert cmd.min() >= -REGEN
    assert np.any(cmd == -REGEN)
    # While the speed is positive, the drive still motors up to +limit (acceleration).
    assert cmd.max() == LIMIT

    # Deceleration against the closed form: with i = -I_regen, J dw/dt = -(K I_regen + T_c)
    # (constant braking torque, B = 0). Source: Newton's second law for rotation,
    # J dw/dt = sum of torques (e.g. Hughes & Drury, Electric Motors and Drives, ch. 1 --
    # from memory); t = J (w1 - w_x) / (K I_regen + T_c).
    # The speed loop stays clamped while kp (w2 - w) + I0 <= -I_regen (clamping anti-windup
    # holds the integrator at I0 = T_c / K, the steady friction current): measure the time to
    # w_x = w2 + 2 (I_regen + I0) / kp, inside that band.
    i0 = TC / K
    w_x = W2 + 2.0 * (REGEN + i0) / KP_W
    assert w_x < W1
    decel = (K * REGEN + TC) / J
    # The IMC current loop with back-EMF feed-forward is first order, 1/alpha: the current
    # reaches -I_regen from I0 late by 1/alpha on average, so the speed lags the constant-
    # torque line by K (I0 + I_regen) / (alpha J), i.e. by K (I0 + I_regen) / (alpha J decel)
    # in time (the integral of a first-order step response's error, derived here).
    lag = K * (i0 + REGEN) / (ALPHA * J * decel)
    t_expected = T_STEP + lag + (W1 - w_x) / decel
    cross = np.flatnonzero((t > T_STEP) & (w <= w_x))[0]
    # Bound (derived): the step is seen at the next speed sample (<= H_W), the current loop
    # holds each command one sample H_I, the first-order model of the sampled loop is good to
    # about one more H_I, and the crossing shows to one row.
    assert abs(t[cross] - t_expected) <= H_W + 2.0 * H_I + ROW
    # The slope in the clamped band is the constant braking torque over J (rows 0.1 s apart
    # inside the band: the current is settled at -I_regen there).
    band = np.flatnonzero((t > T_STEP + 20.0 / ALPHA) & (w >= w_x))
    t_a, t_b = t[band[0]], t[band[-1]]
    slope = (w[band[-1]] - w[band[0]]) / (t_b - t_a)
    # The speed in the feed-forward is one speed sample old at most: a voltage error of up
    # to K decel H_W, whose mean the current loop's integrator removes; what is left is a
    # zero-mean ripple of the current below di = K decel H_W / (R + alpha L) (through the
    # loop's resistance at high frequency). Its running integral over a period stays below
    # di H_W, so each end speed of the band is off by at most K di H_W / J (derived here).
    # Anti-windup at the asymmetric bound: clamping holds the integrator through the band
    # (conditional integration, Astrom & Hagglund, PID Controllers, 2nd ed., sec. 3.5).
    integ = tr["speed_integrator_A"][band]
    assert np.all(integ == integ[0])
    assert abs(integ[0] - i0) <= 1e-3 * i0  # the friction current it held before the step
    di = K * decel * H_W / (R + ALPHA * L)
    tol = 2.0 * K * di * H_W / J / abs(w[band[0]] - w[band[-1]])
    assert abs(slope / -decel - 1.0) <= tol


def _simpson(y: np.ndarray, h: float) -> float:
    """Composite Simpson's rule over an even number of intervals (Burden & Faires, Numerical
    Analysis, sec. 4.4)."""
    n = (y.size - 1) // 2 * 2
    y = y[: n + 1]
    return float(h / 3.0 * (y[0] + y[-1] + 4.0 * y[1:-1:2].sum() + 2.0 * y[2:-1:2].sum()))


def test_bus_peak_from_the_capacitor_energy_balance_and_lower_with_the_limit():
    limited = _conveyor(REGEN)
    free = _conveyor(None)
    pk_lim = limited.summary["peak_bus_voltage_V"]
    pk_free = free.summary["peak_bus_voltage_V"]
    assert VS < pk_lim < pk_free  # the limit lowers the peak (the belt drag takes the energy)

    for res in (limited, free):
        tr = res.trace
        t, v = tr["time_s"], tr["bus_voltage_V"]
        i, w = tr["current_A"], tr["speed_rad_s"]
        k_pk = int(np.argmax(v))
        # rows from the first one with the source diode blocked (v > V_s) to the peak row,
        # starting on a current sample, so that Simpson's row pairs never straddle a sample
        # (where the command, and so di/dt, jumps)
        k0 = int(np.flatnonzero((t > T_STEP) & (v > VS))[0])
        k0 += (-k0) % 4
        n = (k_pk - k0) // 4 * 4
        seg = slice(k0, k0 + n + 1)
        # Energy balance of the capacitor behind a lossless bridge, source blocked:
        # d(C v^2 / 2)/dt = -v i_b = -v_a i, and the armature gives v_a i = R i^2 + K w i +
        # d(L i^2 / 2)/dt, so C (v1^2 - v0^2)/2 = -int (R i^2 + K w i) dt - L (i1^2 - i0^2)/2.
        # Source: energy stored in a capacitor and an inductor, e.g. Alexander & Sadiku,
        # Fundamentals of Electric Circuits, secs. 6.2 and 6.4 -- from memory.
        gained = 0.5 * CAP * (v[seg][-1] ** 2 - v[seg][0] ** 2)
        power = -(R * i[seg] ** 2 + K * w[seg] * i[seg])
        magnetic = 0.5 * L * (i[seg][-1] ** 2 - i[seg][0] ** 2)
        fine = _simpson(power, ROW) - magnetic
        coarse = _simpson(power[::2], 2 * ROW) - magnetic
        # Simpson's error is about (fine - coarse)/15 (Richardson, Burden & Faires sec. 4.5);
        # allow the whole difference, plus rounding of the two energies.
        assert abs(gained - fine) <= abs(fine - coarse) + 1e-9 * gained, (gained, fine, coarse)

        # The peak is bounded by the energy at hand (closed form): the capacitor cannot gain
        # more than the kinetic energy released, J (w1^2 - w2^2) / 2 (first law).
        k_step = int(np.searchsorted(t, T_STEP))
        e_cap = 0.5 * CAP * (res.summary["peak_bus_voltage_V"] ** 2 - v[k_step] ** 2)
        assert 0.0 < e_cap < 0.5 * J * (W1**2 - W2**2)

    # With the limit, the clamped stretch alone returns (closed form, i = -I_regen, w linear):
    # int (K w - R I) I dt from the settled current to w_x, a lower bound of the gain.
    i0 = TC / K
    decel = (K * REGEN + TC) / J
    w_x = W2 + 2.0 * (REGEN + i0) / KP_W
    w_s = W1 - decel * (20.0 / ALPHA)  # speed once the current has settled (20 / alpha)
    duration = (w_s - w_x) / decel
    e_sat = REGEN * (K * 0.5 * (w_s + w_x) * duration - R * REGEN * duration)
    tr = limited.trace
    v_step = tr["bus_voltage_V"][int(np.searchsorted(tr["time_s"], T_STEP))]
    assert 0.5 * CAP * (pk_lim**2 - v_step**2) >= e_sat
    # and the peak it implies alone is already well above the supply
    assert math.sqrt(VS**2 + 2.0 * e_sat / CAP) > VS + 1.0
