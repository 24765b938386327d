"""Supply side: a diode-fed bus pumped up by an overhauling load; a soft source without capacitor.

Settings (invented):

* a harbour winch lowering a pallet: the load drives the drum (negative load torque), the
  drive holds a modest armature voltage, the motor generates, and the diode front end of the
  dock supply cannot take the energy back -- it charges the bus capacitor;
* a coolant pump at the end of a long cable (0.5 ohm) with no bus capacitor: the bus sags with
  the current, and a command above what the sagging bus can give leaves the bridge fully on.
"""

from __future__ import annotations

import numpy as np
import pytest
from reference import (
    ENERGY_CLOSURE,
    build_scenario,
    bus_error_bound,
    fastest_time_constant,
    linear_response,
    relative_error,
    simulate_checked,
    solve_reference,
)
from scipy.optimize import brentq

# Relative: identities the engine evaluates in a few floating-point operations from the same
# numbers (error a few eps ~ 1e-15); 1e-12 separates rounding from any modelling slip.
ROUNDING = 1e-12

# --------------------------------------------------------------------------------------------
# Diode front end, overhauling load
# --------------------------------------------------------------------------------------------

WINCH = dict(
    resistance=0.8,
    inductance=1.5e-3,
    torque_constant=0.06,
    inertia=5e-4,
    viscous_friction=2e-5,
)
DIODE_FED = dict(voltage=24.0, resistance=0.15, capacitance=4.7e-3, regenerative=False)
LOWERING = -0.1  # load torque [N*m]: the pallet's weight drives the drum forward
COMMAND = 12.0  # armature voltage [V], below the back-EMF the lowering speed reaches


def _lowering(step=None):
    return build_scenario(
        duration=0.4,
        motor=WINCH,
        supply=DIODE_FED,
        load=dict(torque=LOWERING),
        voltage=COMMAND,
        step=step,
        title="harbour winch lowering a pallet on a diode-fed dock supply",
    )


def test_diode_fed_bus_is_pumped_up_by_an_overhauling_load():
    res = simulate_checked(_lowering())
    tr, s = res.trace, res.summary
    K, L, C = WINCH["torque_constant"], WINCH["inductance"], DIODE_FED["capacitance"]
    vs = DIODE_FED["voltage"]

    # The scenario does what it says: at the end the back-EMF exceeds the command and the
    # current is negative (the machine generates).
    assert K * s["final_speed_rad_s"] > COMMAND
    assert s["final_current_A"] < 0.0

    # A diode cannot carry current back to the source: never negative, and exactly zero
    # whenever the bus is above the source voltage (the diode blocks).
    assert np.all(tr["supply_current_A"] >= 0.0)
    above = tr["bus_voltage_V"] > vs
    assert np.all(tr["supply_current_A"][above] == 0.0)
    # The bus rises above V_s, and keeps rising once blocked (it only takes the regenerated
    # current: C dv/dt = -v_a i / v > 0).
    assert s["peak_bus_voltage_V"] > vs + 1.0
    assert tr["bus_voltage_V"][-1] == s["peak_bus_voltage_V"]
    first_above = np.flatnonzero(above)[0]
    assert np.all(above[first_above:])
    assert np.all(np.diff(tr["bus_voltage_V"][first_above:]) > 0.0)

    # Bridge power balance at every sample (ideal bridge, Source: Mohan, Undeland & Robbins,
    # Power Electronics, 3rd ed., full-bridge dc-dc converter chapter: v_a i = v_d i_d;
    # chapter from memory).
    p_arm = tr["armature_voltage_V"] * tr["current_A"]
    p_bus = tr["bus_voltage_V"] * tr["bridge_bus_current_A"]
    assert np.max(np.abs(p_arm - p_bus)) <= ROUNDING * np.max(np.abs(p_arm))

    # Capacitor energy 1/2 C (V_end^2 - V_0^2) (Source: E = 1/2 C V^2, CHECKS.md derived).
    v0, v_end = tr["bus_voltage_V"][0], tr["bus_voltage_V"][-1]
    assert v0 == vs  # the capacitor starts charged to the supply
    cap_energy = 0.5 * C * (v_end**2 - v0**2)
    inductor_energy = 0.5 * L * s["final_current_A"] ** 2
    largest = max(abs(s[k]) for k in s if k.endswith("_J") and k != "energy_balance_residual_J")
    # The stored term is exactly these two (same final state; rounding only).
    assert abs(s["stored_energy_change_J"] - (cap_energy + inductor_energy)) <= ROUNDING * largest
    # What the account says reached the capacitor: supplied minus every loss, the load's work,
    # the kinetic and the inductor energy. It closes like the account itself.
    implied = (
        s["energy_from_supply_J"]
        - s["energy_source_loss_J"]
        - s["energy_copper_loss_J"]
        - s["energy_friction_J"]
        - s["energy_to_load_J"]
        - s["energy_shaft_lock_J"]
        - s["kinetic_energy_change_J"]
        - inductor_energy
    )
    assert abs(implied - cap_energy) <= ENERGY_CLOSURE * largest
    assert s["energy_to_load_J"] < 0.0  # the load did work on the shaft
    assert cap_energy > 0.1 * abs(s["energy_to_load_J"])  # a real share of it went to the bus


def test_diode_fed_bus_against_radau_reference():
    """The same run against the solve_ivp reference (diode switching located by both), inside
    the (loose, second-order) bound of :func:`reference.bus_error_bound`, and third order when
    the step halves (Source: Hochbruck & Ostermann, Acta Numerica 19 (2010), sec. 2.2:
    exponential quadrature with the forcing interpolated at three nodes)."""
    res = simulate_checked(_lowering())
    tr, h = res.trace, res.summary["step_s"]
    ref = solve_reference(_lowering(), tr["time_s"], rtol=1e-12)
    assert [what for _, what in ref.events] == ["diode blocks"]
    t_block = ref.events[0][0]
    t = tr["time_s"]
    blocked = np.flatnonzero((t > 0.0) & (tr["supply_current_A"] == 0.0))
    assert t_block < t[blocked[0]] <= t_block + res.summary["record_interval_s"] * (1 + 1e-9)

    swing = float(np.max(ref.bus_voltage) - np.min(ref.bus_voltage))
    tol = bus_error_bound(h, fastest_time_constant(res.scenario), swing)
    err = float(np.max(np.abs(tr["bus_voltage_V"] - ref.bus_voltage)))
    assert err <= tol, (err, tol)
    # The bridge stays in control: the armature sees the command whatever the bus does, so
    # current and speed are exact (to the reference's 1e-11 of the peak).
    assert relative_error(tr["current_A"], ref.current) <= 1e-11
    assert relative_error(tr["speed_rad_s"], ref.speed) <= 1e-11

    # The order, from twice the default step down to it.
    coarse = simulate_checked(_lowering(step=2.0 * h))
    ref2 = solve_reference(_lowering(), coarse.trace["time_s"], rtol=1e-12)
    err2 = err
    err = float(np.max(np.abs(coarse.trace["bus_voltage_V"] - ref2.bus_voltage)))
    assert err2 > 1e-10 * swing  # well above the reference's own error (1e-12 relative)
    # 2^3 to within the next-order term (h / tau ~ 3 %, band as in test_physics_nonlinear).
    assert 7.0 <= err / err2 <= 9.0, err / err2


# --------------------------------------------------------------------------------------------
# Source resistance, no capacitor
# --------------------------------------------------------------------------------------------

PUMP = dict(
    resistance=1.2,
    inductance=2e-3,
    torque_constant=0.05,
    inertia=1e-4,
    viscous_friction=1e-5,
)
VS, RS = 24.0, 0.5
MODEL = dict(R=1.2, L=2e-3, K=0.05, J=1e-4, B=1e-5)


def _pump_on_cable(command):
    return build_scenario(
        duration=0.2,
        motor=PUMP,
        supply=dict(voltage=VS, resistance=RS),
        voltage=command,
        title="coolant pump at the end of a long cable",
    )


def _assert_bus_identities(tr):
    """Source: Kirchhoff's voltage law over the source resistance, v = V_s - R_s i_s, and the
    lossless bridge v_a i = v i_b (Mohan, Undeland & Robbins, full-bridge dc-dc converter
    chapter; chapter from memory)."""
    vb, i_s = tr["bus_voltage_V"], tr["supply_current_A"]
    assert np.max(np.abs(vb - (VS - RS * i_s))) <= ROUNDING * VS
    p_arm = tr["armature_voltage_V"] * tr["current_A"]
    p_bus = vb * tr["bridge_bus_current_A"]
    assert np.max(np.abs(p_arm - p_bus)) <= ROUNDING * np.max(np.abs(p_arm))
    # Without a capacitor the source carries the bridge current itself.
    np.testing.assert_array_equal(i_s, tr["bridge_bus_current_A"])
    # The stable operating point: the high root of v^2 - V_s v + R_s P = 0.
    assert np.all(vb > VS / 2.0)


def _clip_current(command):
    """Armature current at which the sagging bus, V_s - R_s i, just equals the command [A]."""
    return (VS - command) / RS


@pytest.mark.parametrize(
    ("command", "regime"),
    [
        (6.0, "in control"),  # peak current ~5 A: the bus (>= 21.5 V) always covers 6 V
        (VS, "fully on"),  # asks for the whole source: the armature gets V_s - R_s i
    ],
)
def test_soft_source_single_regime(command, regime):
    res = simulate_checked(_pump_on_cable(command))
    tr = res.trace
    _assert_bus_identities(tr)
    if regime == "in control":
        ref = linear_response(tr["time_s"], **MODEL, voltage=command)
        assert np.all(tr["armature_voltage_V"] == command)
    else:
        # Fully on: L di/dt = V_s - (R + R_s) i - K w -- the linear model with R + R_s.
        ref = linear_response(tr["time_s"], **dict(MODEL, R=MODEL["R"] + RS), voltage=VS)
        va = VS - RS * tr["current_A"]
        assert np.max(np.abs(tr["armature_voltage_V"] - va)) <= ROUNDING * VS
    # Exact propagation of a linear regime: the project's 1e-6 limit (rounding only).
    assert relative_error(tr["current_A"], ref.current) <= 1e-6
    assert relative_error(tr["speed_rad_s"], ref.speed) <= 1e-6


def test_soft_source_clips_the_start_up_and_recovers():
    """Command 18 V: the start-up current sags the bus below 18 V, the bridge is fully on
    until the current falls back to (V_s - 18 V) / R_s = 12 A, then in control again. Each
    piece is linear; the switching instants come from the closed forms (brentq)."""
    command = 18.0
    res = simulate_checked(_pump_on_cable(command))
    tr = res.trace
    t = tr["time_s"]
    _assert_bus_identities(tr)
    i_clip = _clip_current(command)

    def piece1(tt):
        return linear_response(np.atleast_1d(tt), **MODEL, voltage=command)

    # Brackets for brentq from a coarse scan (any sign change will do; brentq refines it).
    dense = np.linspace(0.0, 0.05, 501)
    k_on = np.flatnonzero(piece1(dense).current > i_clip)[0]
    t_on = brentq(lambda tt: piece1(tt).current[0] - i_clip, dense[k_on - 1], dense[k_on])
    x_on = piece1(t_on).state_at(0)
    full = dict(MODEL, R=MODEL["R"] + RS)

    def piece2(tt):
        return linear_response(np.atleast_1d(tt), **full, voltage=VS, x0=x_on, t0=t_on)

    dense = np.linspace(t_on, 0.2, 2001)[1:]
    k_off = np.flatnonzero(piece2(dense).current < i_clip)[0]
    t_off = brentq(lambda tt: piece2(tt).current[0] - i_clip, dense[k_off - 1], dense[k_off])
    x_off = piece2(t_off).state_at(0)
    first, second = t <= t_on, (t > t_on) & (t <= t_off)
    third = t > t_off
    current, speed = np.empty_like(t), np.empty_like(t)
    for mask, piece in (
        (first, piece1(t[first])),
        (second, piece2(t[second])),
        (third, linear_response(t[third], **MODEL, voltage=command, x0=x_off, t0=t_off)),
    ):
        current[mask], speed[mask] = piece.current, piece.speed
    assert relative_error(tr["current_A"], current) <= 1e-6
    assert relative_error(tr["speed_rad_s"], speed) <= 1e-6
    # The bridge is fully on exactly between the two instants (to one record interval).
    dt_rec = res.summary["record_interval_s"]
    clipped = tr["armature_voltage_V"] < command
    on_times = t[clipped]
    assert t_on < on_times[0] <= t_on + dt_rec * (1 + 1e-9)
    assert t_off - dt_rec * (1 + 1e-9) <= on_times[-1] <= t_off
    assert res.summary["located_regime_changes"] == 2
    assert res.summary["min_bus_voltage_V"] < command
