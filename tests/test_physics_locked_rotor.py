"""Locked rotor: the armature is an RL circuit; stall current and torque; locking by event.

Setting (invented): a harbour winch whose drum brake is held while the drive is energised
(a locked-rotor inrush test).
"""

from __future__ import annotations

import math

import numpy as np
from reference import (
    build_scenario,
    linear_response,
    locked_rotor_current,
    locked_rotor_i2t,
    relative_error,
    simulate_checked,
)

WINCH = dict(resistance=0.8, inductance=1.5e-3, torque_constant=0.06, inertia=2e-4)
VOLTAGE = 24.0
TAU = WINCH["inductance"] / WINCH["resistance"]  # electrical time constant [s]

# The propagator is exact for the linear RL segment: only rounding remains (see
# test_physics_linear), held to the project's 1e-6 limit for state checks.
STATE_TOL = 1e-6


def _locked(duration, **extra):
    return build_scenario(
        duration=duration,
        motor=WINCH,
        load=dict(locked=True),
        supply=dict(voltage=VOLTAGE),
        voltage=VOLTAGE,
        title="harbour winch, brake held (locked-rotor inrush)",
        **extra,
    )


def test_locked_rotor_inrush_current_peak_and_i2t():
    duration = 5.0 * TAU  # still rising at the end, so the peak is the last value
    # Rows every tau/10, so that the step is the engine's default rule (fastest time constant
    # / 10) and not set finer by the default row spacing: the quadrature error is then visible.
    res = simulate_checked(_locked(duration, record_interval=TAU / 10.0))
    assert abs(res.summary["step_s"] / (TAU / 10.0) - 1.0) <= 1e-12
    tr, s = res.trace, res.summary
    R, L = WINCH["resistance"], WINCH["inductance"]

    # Source: Alexander & Sadiku, Fundamentals of Electric Circuits, 5th ed., sec. 7.6 (step
    # response of an RL circuit; section number from memory): i = V/R (1 - e^(-t R/L)).
    expected = locked_rotor_current(tr["time_s"], VOLTAGE, R, L)
    assert relative_error(tr["current_A"], expected) <= STATE_TOL

    # The rotor does not move at all: exactly zero, not merely small.
    assert np.all(tr["speed_rad_s"] == 0.0)
    assert np.all(tr["position_rad"] == 0.0)
    assert s["final_speed_rad_s"] == 0.0
    assert s["kinetic_energy_change_J"] == 0.0

    # Peak: the current rises monotonically, so the peak is i(T) at T (to rounding).
    i_end = float(locked_rotor_current(np.array([duration]), VOLTAGE, R, L)[0])
    assert abs(s["peak_current_A"] / i_end - 1.0) <= STATE_TOL
    assert abs(s["peak_current_time_s"] - duration) <= 1e-9 * duration

    # I^2 t against the closed-form integral. The engine integrates with Simpson's rule over
    # each step H; for i^2 = (V/R)^2 (1 - 2 e^(-t/tau) + e^(-2t/tau)) the composite rule minus
    # the integral is +(H^4 / 2880) [f'''(T) - f'''(0)] to leading order (Source: Burden &
    # Faires, Numerical Analysis, composite Simpson's rule error term -- from memory; it follows
    # from the single-panel error, integral minus rule = -(H/2)^5 f''''/90), with
    # f''' = (V/R)^2 (2 e^(-t/tau) - 8 e^(-2t/tau)) / tau^3. The measured error must be that
    # leading term to within 10 %: the next term is smaller by about (H/tau)^2 = 1e-2; plus
    # the rounding of summing N steps (N eps of the total at worst).
    exact = locked_rotor_i2t(duration, VOLTAGE, R, L)
    h = s["step_s"]

    def f3(t):
        return (VOLTAGE / R) ** 2 * (2 * math.exp(-t / TAU) - 8 * math.exp(-2 * t / TAU)) / TAU**3

    predicted = (h**4 / 2880.0) * (f3(duration) - f3(0.0))
    error = s["i2t_A2s"] - exact
    rounding = s["steps"] * np.finfo(float).eps * exact
    assert abs(error - predicted) <= 0.1 * abs(predicted) + rounding, (error, predicted)
    # ... and that is within the project's 1e-6 accuracy target at the default step.
    assert abs(error) <= 1e-6 * exact

    # Copper loss is R I^2 t (same integral).
    assert abs(s["energy_copper_loss_J"] - R * s["i2t_A2s"]) <= 1e-12 * s["energy_copper_loss_J"]


def test_stall_current_and_torque():
    """Stall torque K V / R once the inrush has settled (30 time constants: e^-30 ~ 1e-13)."""
    res = simulate_checked(_locked(30.0 * TAU))
    R, K = WINCH["resistance"], WINCH["torque_constant"]
    # Source: Hughes & Drury, Electric Motors and Drives, 4th ed., ch. 3 (chapter from memory): at
    # standstill E = 0, I = V/R and T = K I. 1e-9 leaves room only for rounding.
    assert abs(res.summary["final_current_A"] / (VOLTAGE / R) - 1.0) <= 1e-9
    assert abs(res.trace["motor_torque_Nm"][-1] / (K * VOLTAGE / R) - 1.0) <= 1e-9
    # Locked: the shaft holds the whole stall torque and never moves.
    assert np.all(res.trace["speed_rad_s"] == 0.0)


def test_locking_a_turning_rotor_by_event():
    """The winch drum brake is applied while the motor runs: the speed drops to zero at the
    event, the kinetic energy at that instant goes to ``energy_shaft_lock_J``, and after it the
    current follows the RL response from its value at the event."""
    t_lock = 0.0412345  # off the step grid
    duration = t_lock + 10.0 * TAU
    sc = build_scenario(
        duration=duration,
        motor=WINCH,
        supply=dict(voltage=VOLTAGE),
        voltage=VOLTAGE,
        events=[(t_lock, {"load.locked": True})],
        title="harbour winch, drum brake applied while turning",
    )
    res = simulate_checked(sc)
    tr = res.trace
    R, L, K, J = (WINCH[k] for k in ("resistance", "inductance", "torque_constant", "inertia"))
    free = linear_response(np.minimum(tr["time_s"], t_lock), R=R, L=L, K=K, J=J, voltage=VOLTAGE)
    i_e, w_e, th_e = linear_response(
        np.array([t_lock]), R=R, L=L, K=K, J=J, voltage=VOLTAGE
    ).state_at(0)
    after = tr["time_s"] > t_lock
    assert w_e > 10.0  # the rotor really was turning

    # Source: conservation of energy - the brake takes the kinetic energy 1/2 J w^2 at once.
    assert abs(res.summary["energy_shaft_lock_J"] / (0.5 * J * w_e**2) - 1.0) <= STATE_TOL
    assert np.all(tr["speed_rad_s"][after] == 0.0)
    assert relative_error(tr["position_rad"], np.where(after, th_e, free.position)) <= STATE_TOL
    # RL response from i_e: i = V/R + (i_e - V/R) e^(-(t - t_lock)/tau).
    dt = np.maximum(tr["time_s"] - t_lock, 0.0)
    rl = VOLTAGE / R + (i_e - VOLTAGE / R) * np.exp(-dt / TAU)
    assert relative_error(tr["current_A"], np.where(after, rl, free.current)) <= STATE_TOL
