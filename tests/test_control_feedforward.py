"""Feed-forward terms of the loops, against the physics they compensate.

With integral action a loop ends up supplying, through its integrator, whatever its
feed-forward leaves out; so the integrator's settled value measures the feed-forward:
- the speed loop during a constant-acceleration ramp must command ``J a / K`` (Newton's second
  law for the rotor: ``J dw/dt = K i - B w``), plus ``B w / K`` for the viscous friction;
- the current loop at a settled speed must command ``R i + K w`` (the armature equation at
  constant current), of which the back-EMF feed-forward supplies ``K w_measured``.
"""

from __future__ import annotations

import numpy as np
import pytest

import dcsim

R, L, K, J, B = 0.8, 1.2e-3, 0.06, 2.0e-4, 2.0e-5
ACC = 2000.0  # ramp acceleration [rad/s^2]
WC = 600.0  # speed-loop crossover [rad/s]: kp = J wc / K, ki = kp wc / 4 (common practice)
KP_S = J * WC / K
KI_S = KP_S * WC / 4.0

SPEED = f"""
[simulation]
duration = "0.12 s"
record_interval = "100 us"
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
[supply]
voltage = "48 V"
[control]
mode = "speed"
[control.current]
kp = "6.03 V/A"
ki = "4021 V/(A*s)"
sample_time = "100 us"
back_emf_feedforward = {{bemf}}
[control.speed]
kp = "{KP_S} A*s/rad"
ki = "{KI_S} A/rad"
sample_time = "100 us"
limit = "12 A"
acceleration_feedforward = {{acc}}
friction_feedforward = {{fric}}
[control.reference]
kind = "ramp"
value = "200 rad/s"
rate = "{ACC} rad/s^2"
at = "0 s"
"""


def _run(acc=False, fric=False, bemf=False):
    text = SPEED.format(acc=str(acc).lower(), fric=str(fric).lower(), bemf=str(bemf).lower())
    return dcsim.simulate(dcsim.load_scenario_text(text)).trace


def _during_ramp(tr):
    # late in the ramp (0 .. 0.1 s), when the loop's transient from the start has decayed
    t = tr["time_s"]
    return (t > 0.07) & (t < 0.095)


def test_speed_integrator_supplies_j_a_over_k_without_feedforward():
    tr = _run()
    sel = _during_ramp(tr)
    w = tr["speed_rad_s"][sel]
    # Source: Newton's second law for the rotor, J dw/dt = K i - B w: the current the loop
    # must command during the ramp is J a / K + B w / K. The speed loop's output is
    # kp e + integrator; with a type-1 loop on a ramp the error e is constant and small, so
    # the integrator carries (J a + B w) / K - kp e.
    need = (J * ACC + B * w) / K
    e = tr["speed_command_rad_s"][sel] - tr["measured_speed_rad_s"][sel]
    expected = need - KP_S * e
    got = tr["speed_integrator_A"][sel]
    # the current loop (type 1) lags a ramp disturbance (the back-EMF K a t) by K a / ki_c
    # (final-value theorem), so its command is higher than the current by that much
    lag = K * ACC / 4021.0
    assert np.allclose(got, expected + lag, rtol=1e-3, atol=0)
    assert need.min() > 6.0  # the term is large: 6.67 A for the acceleration alone


def test_acceleration_and_friction_feedforward_leave_the_integrator_idle():
    tr = _run(acc=True, fric=True)
    sel = _during_ramp(tr)
    # the feed-forward supplies (J a + B w_ref) / K; the integrator is left with the
    # difference between reference and measured speed times B / K (tiny) -- bound it by 1 %
    # of what it carried without feed-forward.
    assert np.max(np.abs(tr["speed_integrator_A"][sel])) < 0.01 * J * ACC / K
    # and the following error during the ramp collapses (it was set by the integrator lag)
    e_ff = np.abs(tr["reference_speed_rad_s"][sel] - tr["speed_rad_s"][sel]).max()
    e_no = np.abs(_run()["reference_speed_rad_s"][sel] - _run()["speed_rad_s"][sel]).max()
    assert e_ff < 0.05 * e_no


@pytest.mark.parametrize("bemf", [False, True])
def test_current_integrator_carries_the_back_emf_unless_fed_forward(bemf):
    tr = _run(acc=True, fric=True, bemf=bemf)
    sel = _during_ramp(tr)
    w = tr["measured_speed_rad_s"][sel]
    i_cmd = tr["current_command_A"][sel]
    i = tr["measured_current_A"][sel]
    # Source: the armature equation L di/dt = v - R i - K w; with the current (nearly)
    # constant the loop must apply v = R i + K w (+ L di/dt, here L * 0 + ripple-free). Its
    # output is kp (i_ref - i) + integrator + feed-forward K w_measured.
    v_needed = R * i + K * w
    ff = K * w if bemf else 0.0
    expected_integrator = v_needed - 6.03 * (i_cmd - i) - ff
    got = tr["current_integrator_V"][sel]
    assert np.allclose(got, expected_integrator, atol=0.02 * np.abs(v_needed).max())
    # with the feed-forward the integrator is left with the resistive drop R i alone
    resistive = R * i
    assert np.allclose(got, resistive if bemf else resistive + K * w, rtol=0.02)
