"""A current loop around a rotor without viscous friction: the hidden mode at the stability
boundary.

Setting (invented): the current loop of a frictionless test rig for the harbour capstan's
drive, a permanent-magnet motor on a free flywheel (B = 0).

With ``B = 0`` the rotor integrates the torque freely, so the plant ``i / v = J s / ((L s + R)
J s + K^2)`` has a zero at ``s = 0`` (``z = 1`` sampled) where the PI controller has its pole:
the closed loop keeps a mode exactly on the stability boundary that the current never shows
(it is the speed's). A plain pole test sees it at ``|z| = 1 +- 1e-16`` and calls some
tolerance corners unstable at random; the loop's figures must not depend on rounding.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from dcsim import load_scenario_text
from dcsim.tuning import analysis
from dcsim.tuning.plants import loop_plant
from dcsim.tuning.tuner import _loop_tf, tune

RIG = """
[simulation]
duration = "0.2 s"
[motor]
resistance = "0.5 ohm"
inductance = "5 mH"
torque_constant = "1 N*m/A"
inertia = "0.05 kg*m^2"
[supply]
voltage = "220 V"
[control]
mode = "current"
[control.current]
sample_time = "100 us"
kp = 3.0
ki = 300.0
limit = "220 V"
[control.reference]
kind = "step"
value = "10 A"
"""


def _rig():
    return load_scenario_text(RIG, source="rig.toml")


def test_every_corner_is_stable_and_its_overshoot_finite():
    rig = _rig()
    tol = {"motor.resistance": 0.1, "motor.torque_constant": 0.1, "motor.inductance": 0.1}
    res = tune(rig, "current", "imc", tolerances=tol)
    assert res.figures.stable
    assert "unstable_corner" not in res.worst_case
    assert math.isfinite(res.worst_case["overshoot_percent"]["value"])


@pytest.mark.parametrize("k_factor", [0.9, 1.0, 1.1])
def test_figures_equal_the_full_loop_step_response(k_factor):
    rig = _rig()
    res = tune(rig, "current", "imc")
    sc = rig.with_changes({"motor.torque_constant": rig.motor.torque_constant * k_factor})
    plant = loop_plant(sc, "current", sample_time_s=res.sample_time_s)
    loop = _loop_tf(plant, res.kp, res.ki, res.kd, "discrete", "backward", 0.0)
    # Source: python-control's step response of the full closed loop (the cancelled pair
    # kept), 2 s = 200 time constants of its slowest visible mode (pole near 0.990 per 100 us
    # step), against its own last value
    full = control.feedback(loop, 1)
    t = np.arange(20000) * full.dt
    _, y = control.step_response(full, T=t)
    y = np.squeeze(y)
    figures = analysis.analyse(loop)
    assert figures.stable
    assert figures.overshoot_percent == pytest.approx(100 * (y.max() / y[-1] - 1), rel=1e-6)
    # Source: derived -- the ramp steady state: with B = 0 a constant current accelerates the
    # rotor at K i / J, the back-EMF rises at K^2 i / J, and only a constant error e can make
    # the PI's integral ramp as fast: ki e = K^2 i / J, so i / i_ref = 1 / (1 + K^2 / (J ki))
    k = sc.motor.torque_constant
    static = 1.0 / (1.0 + k**2 / (sc.motor.inertia * res.ki))
    reduced = analysis._without_cancelled_modes(full)
    # 1e-6: the reduced loop is rebuilt from computed poles and zeros; its slow pair (0.99004
    # and 0.99010 per step) sits 0.01 from z = 1, so the eigenvalue solver's ~1e-10 on each
    # root becomes ~1e-8 in the product (1 - z) / (1 - p) of the DC gain
    assert abs(complex(reduced.dcgain())) == pytest.approx(static, rel=1e-6)
    assert y[-1] == pytest.approx(static, rel=1e-6)


def test_a_truly_unstable_loop_stays_unstable():
    rig = _rig()
    # Ten times the IMC gain at this sample time drives the sampled loop past its gain
    # margin (Franklin, Powell & Workman, *Digital Control of Dynamic Systems*, root locus of
    # a sampled loop -- from memory); nothing is cancelled away.
    res = tune(rig, "current", "imc")
    plant = loop_plant(rig, "current", sample_time_s=res.sample_time_s)
    gm = (
        10 ** (res.figures.gain_margin_dB / 20) if math.isfinite(res.figures.gain_margin_dB) else 50
    )
    loop = _loop_tf(plant, 2 * gm * res.kp, 2 * gm * res.ki, 0.0, "discrete", "backward", 0.0)
    assert not analysis.analyse(loop).stable
