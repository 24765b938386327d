"""Open-loop linear drive against closed forms: voltage steps, worked examples, events.

Without Coulomb friction, clipping or a bus capacitor the drive is the linear 2-state model
(i, w) (+ theta), which dcsim advances with the matrix exponential: the trace must follow the
closed-form response of :func:`reference.linear_response` (scipy.linalg.expm) to rounding.

Tolerances
----------
``STATE_TOL = 1e-6`` relative to the peak: the limit the project sets for the linear
checks. The engine's propagator is exact for a linear segment, so what remains is rounding
carried through the N steps of a run (about N * eps * |A h| growth, 1e-13 .. 1e-10 here);
1e-6 is also the accuracy target of the default step for the integrals
(:data:`reference.ENERGY_CLOSURE`). Published values are held to half a unit of the last digit
printed.
"""

from __future__ import annotations

import numpy as np
import pytest
from reference import (
    breakaway_time,
    build_scenario,
    characteristic_coefficients,
    linear_response,
    locked_rotor_current,
    no_load_steady_state,
    relative_error,
    simulate_checked,
    solve_reference,
    speed_gain,
    system_matrix,
)

STATE_TOL = 1e-6  # see the module docstring

# The speed example parameter set of the project's check list (shared/design/CHECKS.md); its
# expected values are recomputed in the tests below from the derived model.
SPEED_EXAMPLE = dict(
    resistance=1.0, inductance=0.5, torque_constant=0.01, inertia=0.01, viscous_friction=0.1
)
# The position example parameter set of the same check list (shared/design/CHECKS.md); poles and
# gain are recomputed in the tests below from the derived model.
POSITION_EXAMPLE = dict(
    resistance=4.0,
    inductance=2.75e-6,
    torque_constant=0.0274,
    inertia=3.2284e-6,
    viscous_friction=3.5077e-6,
)


def _model(motor: dict, load_inertia: float = 0.0) -> dict:
    """Keyword arguments of :func:`reference.linear_response` for a motor table."""
    return dict(
        R=motor["resistance"],
        L=motor["inductance"],
        K=motor["torque_constant"],
        J=motor["inertia"] + load_inertia,
        B=motor.get("viscous_friction", 0.0),
    )


def _assert_follows(res, ref, tol=STATE_TOL):
    errors = {
        "current": relative_error(res.trace["current_A"], ref.current),
        "speed": relative_error(res.trace["speed_rad_s"], ref.speed),
        "position": relative_error(res.trace["position_rad"], ref.position),
    }
    assert all(e <= tol for e in errors.values()), errors
    return errors


# --------------------------------------------------------------------------------------------
# The two example parameter sets of the check list
# --------------------------------------------------------------------------------------------


def test_speed_example_published_values():
    m = _model(SPEED_EXAMPLE)
    # Source: derived -- speed/voltage transfer function K/((Js+b)(Ls+R)+K^2) of the
    # armature-controlled DC motor (Hughes & Drury, Electric Motors and Drives, 4th ed., ch. 3;
    # Franklin, Powell & Emami-Naeini, Feedback Control of Dynamic Systems, DC-motor model --
    # chapter from memory); DC gain K/(bR+K^2) and poles = roots of the characteristic
    # polynomial computed by numpy.roots. Expected values from the check list
    # (shared/design/CHECKS.md): 1 V gives 0.0999 rad/s, 4 decimals, so held to half a unit of
    # the 4th decimal.
    assert abs(speed_gain(m["R"], m["K"], m["B"]) - 0.0999) <= 0.5e-4
    # Poles -2.0025, -9.9975 (same source and check list, 4 decimals): numpy roots of the
    # characteristic polynomial (J s + b)(L s + R) + K^2.
    poles = np.sort(np.roots(characteristic_coefficients(**m)).real)
    np.testing.assert_allclose(poles, [-9.9975, -2.0025], rtol=0, atol=0.5e-4)
    # The state matrix the closed form uses has the same eigenvalues (to rounding: 1e-12).
    eig = np.sort(np.linalg.eigvals(system_matrix(**m)).real)
    np.testing.assert_allclose(eig, poles, rtol=1e-12)


def test_speed_example_step_response_and_steady_state():
    m = _model(SPEED_EXAMPLE)
    slowest = np.min(np.abs(np.roots(characteristic_coefficients(**m)).real))
    duration = 30.0 / slowest  # 30 time constants: the transient left is e^-30 ~ 1e-13
    sc = build_scenario(
        duration=duration,
        motor=SPEED_EXAMPLE,
        supply=dict(voltage=1.0),
        voltage=1.0,
        title="check-list speed example, 1 V step",
    )
    res = simulate_checked(sc)
    ref = linear_response(res.trace["time_s"], **m, voltage=1.0)
    _assert_follows(res, ref)
    w_end = res.summary["final_speed_rad_s"]
    # Source: derived -- DC gain K/(bR+K^2) of the speed/voltage transfer function
    # K/((Js+b)(Ls+R)+K^2) (Hughes & Drury, Electric Motors and Drives, 4th ed., ch. 3 --
    # chapter from memory); 0.0999 rad/s at 1 V (4 decimals) per the check list
    # (shared/design/CHECKS.md).
    assert abs(w_end - 0.0999) <= 0.5e-4
    # Steady state K V / (R b + K^2) exactly: the e^-30 transient and the rounding of 1e4 steps
    # are both far below 1e-9.
    assert abs(w_end / speed_gain(m["R"], m["K"], m["B"]) - 1.0) <= 1e-9


def test_position_example_published_values():
    m = _model(POSITION_EXAMPLE)
    # Source: derived -- position/voltage transfer function theta/V =
    # K / (s ((J s + b)(L s + R) + K^2)) of the armature-controlled DC motor (Hughes & Drury,
    # Electric Motors and Drives, 4th ed., ch. 3; Franklin, Powell & Emami-Naeini, Feedback
    # Control of Dynamic Systems, DC-motor model -- chapter from memory); poles = roots computed
    # by numpy.roots. Expected poles 0, -59.23, -1.4545e6 per the check list
    # (shared/design/CHECKS.md), held to half a unit of the last printed digit.
    poles = np.sort(np.roots(np.append(characteristic_coefficients(**m), 0.0)).real)
    np.testing.assert_allclose(poles[2], 0.0, atol=1e-9)
    assert abs(poles[1] - -59.23) <= 0.005
    assert abs(poles[0] - -1.4545e6) <= 50.0
    # Stiffness: the poles are 2.5e4 apart.
    assert poles[0] / poles[1] > 2e4
    # Velocity gain K/(bR+K^2) = 35.83 rad/s per V (same derivation and check list, 2 decimals).
    assert abs(speed_gain(m["R"], m["K"], m["B"]) - 35.83) <= 0.005
    # The closed form reaches it: 1 s is 59 slow time constants (e^-59: nothing left).
    far = linear_response(np.array([1.0]), **m, voltage=1.0)
    assert abs(far.speed[0] / speed_gain(m["R"], m["K"], m["B"]) - 1.0) <= 1e-12


def test_position_example_stiff_step_response():
    m = _model(POSITION_EXAMPLE)
    sc = build_scenario(
        duration=0.1,  # 6 mechanical time constants; 1.5e6 steps at the default step
        motor=POSITION_EXAMPLE,
        supply=dict(voltage=1.0),
        voltage=1.0,
        title="check-list position example, 1 V step",
    )
    res = simulate_checked(sc)
    ref = linear_response(res.trace["time_s"], **m, voltage=1.0)
    _assert_follows(res, ref)
    # The current spike of the fast pole is resolved: its peak (near V/R - the rotor hardly
    # moves in the 0.7 us electrical time constant) from the closed form on a grid of tau/100.
    # Sampling a smooth maximum errs by ~(grid/2)^2 i'' / 2 ~ 1e-9 relative here (i'' is set
    # by the slow pole), and the engine samples the current at every half step (tau/20), also
    # far below the 1e-6 limit.
    fine = np.linspace(0.0, 20 * m["L"] / m["R"], 2001)
    spike = linear_response(fine, **m, voltage=1.0).current.max()
    assert abs(res.summary["peak_current_A"] / spike - 1.0) <= STATE_TOL


# --------------------------------------------------------------------------------------------
# Voltage steps over several parameter sets (invented settings)
# --------------------------------------------------------------------------------------------

STEP_CASES = {
    # A coolant pump: small 24 V motor, overdamped.
    "coolant pump": dict(
        motor=dict(
            resistance=1.2,
            inductance=2e-3,
            torque_constant=0.05,
            inertia=1e-4,
            viscous_friction=1e-5,
        ),
        load=dict(inertia=5e-5),
        voltage=24.0,
        duration=0.3,
    ),
    # A laboratory sample spinner: tiny inertia and a large inductance, so the poles are
    # complex and the current rings.
    "sample spinner": dict(
        motor=dict(resistance=0.5, inductance=10e-3, torque_constant=0.05, inertia=2e-6),
        load={},
        voltage=6.0,
        duration=0.05,
    ),
    # A warehouse shuttle driven in reverse against a constant load torque (no Coulomb
    # friction, so the linear model holds through zero speed).
    "warehouse shuttle reverse": dict(
        motor=dict(
            resistance=0.35,
            inductance=0.6e-3,
            torque_constant=0.12,
            inertia=2e-3,
            viscous_friction=3e-4,
        ),
        load=dict(inertia=4e-3, torque=0.5),
        voltage=-48.0,
        duration=0.5,
    ),
}


@pytest.mark.parametrize("name", list(STEP_CASES))
def test_voltage_step_matches_closed_form(name):
    c = STEP_CASES[name]
    sc = build_scenario(
        duration=c["duration"],
        motor=c["motor"],
        load=c["load"],
        supply=dict(voltage=abs(c["voltage"])),
        voltage=c["voltage"],
        title=name,
    )
    res = simulate_checked(sc)
    ref = linear_response(
        res.trace["time_s"],
        **_model(c["motor"], c["load"].get("inertia", 0.0)),
        voltage=c["voltage"],
        torque=c["load"].get("torque", 0.0),
    )
    _assert_follows(res, ref)


def test_sample_spinner_is_underdamped():
    """The spinner case really exercises complex poles (otherwise it duplicates the pump)."""
    m = _model(STEP_CASES["sample spinner"]["motor"])
    poles = np.roots(characteristic_coefficients(**m))
    assert np.all(np.abs(poles.imag) > 0.5 * np.abs(poles.real))


# --------------------------------------------------------------------------------------------
# Events: piecewise closed form, the second piece from the state at the event
# --------------------------------------------------------------------------------------------

PUMP = STEP_CASES["coolant pump"]["motor"]


@pytest.mark.parametrize(
    ("change", "before", "after"),
    [
        # The pump's impeller meets a blockage: load torque steps up.
        ("load.torque", dict(voltage=24.0, torque=0.0), dict(voltage=24.0, torque=0.15)),
        # The pump is reversed (plugging): the command steps from +24 V to -24 V.
        ("control.voltage", dict(voltage=24.0, torque=0.0), dict(voltage=-24.0, torque=0.0)),
    ],
)
def test_event_mid_run_piecewise_closed_form(change, before, after):
    t_event = 0.0371234567  # off the step grid: the engine must land on it exactly
    new_value = after["torque"] if change == "load.torque" else after["voltage"]
    sc = build_scenario(
        duration=0.1,
        motor=PUMP,
        supply=dict(voltage=24.0),
        voltage=before["voltage"],
        load=dict(torque=before["torque"]),
        events=[(t_event, {change: new_value})],
        title=f"coolant pump, {change} event",
    )
    res = simulate_checked(sc)
    m = _model(PUMP)
    t = res.trace["time_s"]
    first = linear_response(t, **m, **before)
    at_event = linear_response(np.array([t_event]), **m, **before).state_at(0)
    second = linear_response(np.maximum(t, t_event), **m, **after, x0=at_event, t0=t_event)
    pick = t <= t_event
    for col, a, b in (
        ("current_A", first.current, second.current),
        ("speed_rad_s", first.speed, second.speed),
        ("position_rad", first.position, second.position),
    ):
        expected = np.where(pick, a, b)
        err = relative_error(res.trace[col], expected)
        assert err <= STATE_TOL, (col, err)
    # The event really changed the trajectory (else the check would prove nothing).
    assert relative_error(first.current[~pick], second.current[~pick]) > 1e-2


# --------------------------------------------------------------------------------------------
# Steady states
# --------------------------------------------------------------------------------------------


def _settling_time(m: dict, count: float = 30.0) -> float:
    """``count`` times the slowest time constant of the linear model [s]."""
    slowest = np.min(np.abs(np.linalg.eigvals(system_matrix(**m)).real))
    return count / slowest


@pytest.mark.parametrize("coulomb", [0.0, 0.02])
def test_no_load_speed_and_current(coulomb):
    """w = (K V - R T_c) / (K^2 + R B), i = (B w + T_c) / K after the transient has died."""
    motor = dict(PUMP, coulomb_friction=coulomb)
    m = _model(motor)
    sc = build_scenario(
        duration=_settling_time(m),
        motor=motor,
        supply=dict(voltage=24.0),
        voltage=24.0,
        title="coolant pump running dry (no load)",
    )
    res = simulate_checked(sc)
    # Source: Hughes & Drury, Electric Motors and Drives, 4th ed., ch. 3 (steady state;
    # chapter from memory).
    w_ss, i_ss = no_load_steady_state(24.0, m["R"], m["K"], m["B"], coulomb)
    if coulomb == 0.0:
        assert w_ss == pytest.approx(m["K"] * 24.0 / (m["K"] ** 2 + m["R"] * m["B"]), rel=1e-15)
        assert i_ss == pytest.approx(m["B"] * w_ss / m["K"], rel=1e-15)
    # After 30 slowest time constants the transient is e^-30 ~ 1e-13 of the step: 1e-9 leaves
    # room only for rounding.
    assert abs(res.summary["final_speed_rad_s"] / w_ss - 1.0) <= 1e-9
    assert abs(res.summary["final_current_A"] / i_ss - 1.0) <= 1e-9
    assert abs(res.trace["motor_torque_Nm"][-1] - m["K"] * i_ss) <= 1e-9 * m["K"] * i_ss


# --------------------------------------------------------------------------------------------
# The references agree with each other (so a kernel error is not a reference error)
# --------------------------------------------------------------------------------------------


def test_closed_form_agrees_with_python_control():
    """Source: python-control ``forced_response`` on the same state-space model."""
    import control

    m = _model(SPEED_EXAMPLE)
    a = system_matrix(**m)
    b = np.array([[1.0 / m["L"], 0.0], [0.0, -1.0 / m["J"]]])
    sys = control.ss(a, b, np.eye(2), np.zeros((2, 2)))
    t = np.linspace(0.0, 3.0, 301)
    u = np.vstack([np.full_like(t, 1.0), np.full_like(t, 0.002)])
    x0 = [0.3, -0.05]
    out = control.forced_response(sys, T=t, U=u, X0=x0).outputs
    ref = linear_response(t, **m, voltage=1.0, torque=0.002, x0=(*x0, 0.0))
    # Both are exact for constant inputs; they differ by rounding only (1e-12 of the peak).
    assert relative_error(ref.current, out[0]) <= 1e-12
    assert relative_error(ref.speed, out[1]) <= 1e-12


@pytest.mark.parametrize("rtol", [1e-10, 1e-12])
def test_radau_reference_agrees_with_closed_form(rtol):
    """The solve_ivp reference on linear pieces is within 10 rtol of the closed form, with and
    without a located regime change (breakaway from dry friction). Radau's global error is a
    small multiple of rtol over these runs, and its dense output (used at the output times) is
    held to the same, so 10 rtol bounds what the kernel comparisons inherit."""
    c = STEP_CASES["coolant pump"]
    sc = build_scenario(
        duration=c["duration"],
        motor=c["motor"],
        load=c["load"],
        supply=dict(voltage=24.0),
        voltage=24.0,
    )
    t = np.linspace(0.0, c["duration"], 601)
    ref = solve_reference(sc, t, rtol=rtol)
    exact = linear_response(t, **_model(c["motor"], c["load"]["inertia"]), voltage=24.0)
    assert relative_error(ref.current, exact.current) <= 10 * rtol
    assert relative_error(ref.speed, exact.speed) <= 10 * rtol

    # Breakaway: stuck until K i = T_c (RL closed form), then sliding with T_c opposing.
    motor = dict(c["motor"], coulomb_friction=0.1)
    sc = build_scenario(duration=0.1, motor=motor, supply=dict(voltage=24.0), voltage=24.0)
    m = _model(motor)
    t_b = breakaway_time(24.0, m["R"], m["L"], m["K"], 0.1)
    t = np.linspace(0.0, 0.1, 601)
    ref = solve_reference(sc, t, rtol=rtol)
    assert ref.events[0][1] == "breakaway+"
    assert abs(ref.events[0][0] - t_b) <= 10 * rtol * t_b
    i_b = 0.1 / m["K"]
    slide = linear_response(
        np.maximum(t, t_b), **m, voltage=24.0, torque=0.1, x0=(i_b, 0.0, 0.0), t0=t_b
    )
    current = np.where(t <= t_b, locked_rotor_current(t, 24.0, m["R"], m["L"]), slide.current)
    speed = np.where(t <= t_b, 0.0, slide.speed)
    assert relative_error(ref.current, current) <= 10 * rtol
    assert relative_error(ref.speed, speed) <= 10 * rtol
