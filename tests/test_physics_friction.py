"""Coulomb friction with true sticking: held below breakaway, breakaway time, run-down to rest.

Setting (invented): a greenhouse vent actuator, a small geared motor whose gearbox has a
noticeable dry friction (referred to the motor shaft).

While the shaft is stuck the armature is an RL circuit; while it slides in one direction the
Coulomb torque is a constant ``T_c sgn(w)`` added to the load, so every piece is linear and has
a closed form (:func:`reference.linear_response`). Regime changes are found from the closed
forms: breakaway where ``K i(t) = T_c`` (:func:`reference.breakaway_time`), rest where the
closed-form speed crosses zero (scipy.optimize.brentq).

Tolerances: the pieces are propagated exactly and the engine locates each regime change to
1e-12 of a step, so the piecewise closed form is held to the project's 1e-6 limit (rounding
only). A regime change seen in the trace is held to one record interval, the spacing of the
samples that show it.
"""

from __future__ import annotations

import numpy as np
import pytest
from reference import (
    breakaway_time,
    build_scenario,
    linear_response,
    locked_rotor_current,
    relative_error,
    simulate_checked,
)
from scipy.optimize import brentq

VENT = dict(
    resistance=1.0,
    inductance=1e-3,
    torque_constant=0.05,
    inertia=2e-5,
    viscous_friction=1e-6,
    coulomb_friction=0.01,
)
R, L, K, J, B, TC = (
    VENT[k]
    for k in (
        "resistance",
        "inductance",
        "torque_constant",
        "inertia",
        "viscous_friction",
        "coulomb_friction",
    )
)
MODEL = dict(R=R, L=L, K=K, J=J, B=B)
STATE_TOL = 1e-6  # see the module docstring


def _vent(voltage, duration, events=(), title=""):
    return build_scenario(
        duration=duration,
        motor=VENT,
        supply=dict(voltage=abs(voltage) if voltage else 12.0),
        voltage=voltage,
        events=events,
        title=title,
    )


def test_below_breakaway_the_shaft_never_moves():
    voltage = 0.15
    assert K * voltage / R < TC  # the stall torque cannot overcome the dry friction
    res = simulate_checked(_vent(voltage, 20 * L / R, title="vent actuator, too weak to start"))
    tr = res.trace
    # No chatter: every sample is exactly zero, not merely small.
    assert np.all(tr["speed_rad_s"] == 0.0)
    assert np.all(tr["position_rad"] == 0.0)
    assert res.summary["energy_friction_J"] == 0.0  # static friction does no work
    # Source: Alexander & Sadiku, Fundamentals of Electric Circuits, 5th ed., sec. 7.6, step
    # response of an RL circuit (section number from memory).
    expected = locked_rotor_current(tr["time_s"], voltage, R, L)
    assert relative_error(tr["current_A"], expected) <= STATE_TOL
    # Static friction balances the motor torque (stick model of D. Karnopp, J. Dyn. Sys. Meas.
    # Control 107 (1985) 100-103, as cited by dcsim.plant.mechanics).
    np.testing.assert_allclose(tr["friction_torque_Nm"], K * tr["current_A"], rtol=1e-12)


def _assert_pieces(tr, current, speed, position):
    for col, expected in (
        ("current_A", current),
        ("speed_rad_s", speed),
        ("position_rad", position),
    ):
        err = relative_error(tr[col], expected)
        assert err <= STATE_TOL, (col, err)


def _breakaway_pieces(voltage: float, t: np.ndarray):
    """Closed form: stuck until K i = T_c sgn(V), then sliding with T_c sgn(V) opposing."""
    sign = np.sign(voltage)
    t_b = breakaway_time(abs(voltage), R, L, K, TC)
    i_b = float(locked_rotor_current(np.array([t_b]), voltage, R, L)[0])
    assert abs(K * i_b - sign * TC) <= 1e-12 * TC  # the closed forms agree on the breakaway
    stuck = t <= t_b
    slide = linear_response(
        np.maximum(t, t_b), **MODEL, voltage=voltage, torque=sign * TC, x0=(i_b, 0.0, 0.0), t0=t_b
    )
    current = np.where(stuck, locked_rotor_current(t, voltage, R, L), slide.current)
    speed = np.where(stuck, 0.0, slide.speed)
    position = np.where(stuck, 0.0, slide.position)
    return t_b, current, speed, position, slide


@pytest.mark.parametrize("voltage", [2.0, -2.0])
def test_breakaway_time_and_sliding_motion(voltage):
    duration = 0.05
    res = simulate_checked(_vent(voltage, duration, title="vent actuator opening / closing"))
    tr = res.trace
    t = tr["time_s"]
    t_b, current, speed, position, _ = _breakaway_pieces(voltage, t)
    assert 0.0 < t_b < 0.01 * duration

    # First nonzero speed sample lies in the record interval after the breakaway instant.
    moving = np.flatnonzero(tr["speed_rad_s"] != 0.0)
    t_first = t[moving[0]]
    dt_rec = res.summary["record_interval_s"]
    assert t_b < t_first <= t_b + dt_rec * (1 + 1e-9), (t_b, t_first, dt_rec)
    # Before it: exactly at rest; after it: moving the way the voltage pushes, all the time.
    assert np.all(tr["speed_rad_s"][: moving[0]] == 0.0)
    assert np.all(np.sign(tr["speed_rad_s"][moving[0] :]) == np.sign(voltage))

    # The whole run against the piecewise closed form.
    _assert_pieces(tr, current, speed, position)


def test_run_down_comes_to_rest_and_stays_there():
    """Voltage cut to zero by an event: the shaft coasts (back-EMF braking plus dry friction),
    stops where the closed-form speed reaches zero, and then stays exactly at rest."""
    voltage, t_off, duration = 2.0, 0.03, 0.08
    res = simulate_checked(
        _vent(voltage, duration, events=[(t_off, {"control.voltage": 0.0})], title="vent run-down")
    )
    tr = res.trace
    t = tr["time_s"]

    # Closed form, piece by piece: stuck -> sliding at 2 V -> sliding at 0 V -> stuck.
    t_b, current, speed, position, _ = _breakaway_pieces(voltage, np.minimum(t, t_off))
    i_b = float(locked_rotor_current(np.array([t_b]), voltage, R, L)[0])
    at_off = linear_response(
        np.array([t_off]), **MODEL, voltage=voltage, torque=TC, x0=(i_b, 0.0, 0.0), t0=t_b
    ).state_at(0)

    def coast(tt):
        return linear_response(
            np.atleast_1d(tt), **MODEL, voltage=0.0, torque=TC, x0=at_off, t0=t_off
        )

    t_stop = brentq(lambda tt: coast(tt).speed[0], t_off, duration, xtol=1e-15, rtol=1e-15)
    i_stop, _, th_stop = coast(t_stop).state_at(0)
    assert abs(K * i_stop) <= TC  # at rest the current cannot restart it: it sticks
    assert t_stop < 0.7 * duration  # enough samples at rest to see it stay there

    rest = t > t_stop
    coasting = (t > t_off) & ~rest
    c_tr = coast(np.clip(t, t_off, t_stop))
    # At rest with v = 0 the current decays as an RL circuit: i_stop e^(-(t - t_stop) R/L).
    i_rest = i_stop * np.exp(-np.maximum(t - t_stop, 0.0) * R / L)
    current = np.where(rest, i_rest, np.where(coasting, c_tr.current, current))
    speed = np.where(rest, 0.0, np.where(coasting, c_tr.speed, speed))
    position = np.where(rest, th_stop, np.where(coasting, c_tr.position, position))
    _assert_pieces(tr, current, speed, position)

    # Comes to rest within one record interval of the closed-form instant, then stays: every
    # later sample is exactly zero (no creep, no chatter).
    stopped = np.flatnonzero((t > t_off) & (tr["speed_rad_s"] == 0.0))
    t_zero = t[stopped[0]]
    dt_rec = res.summary["record_interval_s"]
    assert t_stop <= t_zero <= t_stop + dt_rec * (1 + 1e-9), (t_stop, t_zero)
    assert np.all(tr["speed_rad_s"][stopped[0] :] == 0.0)
    assert np.all(tr["speed_rad_s"][(t > 0.01) & (t < t_stop)] > 0.0)
    assert res.summary["final_speed_rad_s"] == 0.0
