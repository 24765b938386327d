"""The tuner's plants and figures against python-control built independently in the test."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

import dcsim
from dcsim.tuning.analysis import analyse
from dcsim.tuning.plants import controller_tf, loop_plant

R, L, K, J, B = 0.8, 1.2e-3, 0.06, 2.0e-4, 2.0e-5
H = 50e-6

DRIVE = f"""
[simulation]
duration = "0.1 s"
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
[load]
locked = {{locked}}
[supply]
voltage = "48 V"
[control]
mode = "current"
computation_delay = {{delay}}
[control.current]
kp = "4.8 V/A"
ki = "3200 V/(A*s)"
sample_time = "{H} s"
"""


def _scenario(locked=False, delay=False):
    return dcsim.load_scenario_text(
        DRIVE.format(locked=str(locked).lower(), delay=str(delay).lower())
    )


def _reference_plant(locked: bool):
    s = control.tf("s")
    if locked:
        return 1 / (L * s + R)
    return (J * s + B) / ((L * s + R) * (J * s + B) + K**2)


@pytest.mark.parametrize("locked", [True, False])
@pytest.mark.parametrize("delay", [False, True])
def test_current_loop_figures_equal_python_control_margins(locked, delay):
    # Source: python-control (reference library): the same loop built here from the motor
    # equations, sampled with sample_system (zero-order hold) and the controller's z-domain
    # form, then control.stability_margins. The tuner's figures must equal it.
    sc = _scenario(locked, delay)
    plant = loop_plant(sc, "current")
    pd = control.sample_system(_reference_plant(locked), H, method="zoh")
    if delay:
        pd = pd * control.tf([1], [1, 0], H)
    z = control.tf([1, 0], [1], H)
    c = 4.8 + 3200 * H * z / (z - 1)  # backward Euler, as dcsim.controllers.pid runs it
    gms, pms, _, wpcs, wgcs, _ = control.stability_margins(c * pd, returnall=True)
    # python-control lists every crossing; the reported ones are the highest gain crossover
    # and the first phase crossover above it (the margin against a gain increase)
    k = int(np.argmax(wgcs))
    wgc, pm = wgcs[k], pms[k]
    above = [j for j in range(len(wpcs)) if wpcs[j] > wgc]
    gm = gms[min(above, key=lambda j: wpcs[j])] if above else math.inf
    _, cd = controller_tf(4.8, 3200, 0.0, H, discretisation="backward-euler")
    f = analyse(control.ss(cd) * plant.discrete)
    assert f.phase_margin_deg == pytest.approx(pm, rel=1e-6)
    assert f.crossover_rad_s == pytest.approx(wgc, rel=1e-6)
    if math.isfinite(gm):
        assert f.gain_margin_dB == pytest.approx(20 * math.log10(gm), rel=1e-6)
    # delay margin: the phase margin over the crossover frequency (its definition)
    assert f.delay_margin_s == pytest.approx(math.radians(pm) / wgc, rel=1e-6)


def test_sampled_plant_is_the_aliasing_sum_of_the_continuous_one():
    # Source: the frequency response of a ZOH-sampled plant is the sum over the aliases,
    # P_d(e^{jwh}) = sum_k P(j(w + k ws)) * (1 - e^{-j(w + k ws) h}) / (j (w + k ws) h)
    # (Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed., the sampling
    # theorem chapter -- from memory). Summed to |k| <= N = 20000; the plant falls as
    # 1/(L w) and the hold factor as 2/(w h), so the tail beyond N is below
    # 2 sum_{k>N} 2/(L k ws * k ws h) = 4/(L ws^2 h) sum_{k>N} 1/k^2 < 4/(L ws^2 h N).
    sc = _scenario(locked=False)
    plant = loop_plant(sc, "current")
    p = _reference_plant(False)
    ws = 2 * math.pi / H
    n = 20000
    tail = 2.0 / (math.pi * L * ws * n)
    for w in (200.0, 2000.0, 0.3 * ws):
        k = np.arange(-n, n + 1)
        wk = w + k * ws
        terms = np.asarray(p(1j * wk)).reshape(-1) * (1 - np.exp(-1j * wk * H)) / (1j * wk * H)
        alias_sum = terms.sum()
        exact = complex(plant.discrete(np.exp(1j * w * H)))
        assert abs(exact - alias_sum) <= tail


def test_discrete_phase_at_crossover_against_one_and_a_half_samples_of_delay():
    # The continuous approximation of sampling with one sample of computation delay is the
    # plant with e^{-1.5 s h} (the hold as half a sample: Astrom & Wittenmark 1997, sec. 8.2).
    # The hold's phase is exactly -w h/2; what differs is the aliasing, whose relative size
    # the sum above bounds: computed here from the first alias pair, times 2 for the rest.
    sc = _scenario(locked=False, delay=True)
    plant = loop_plant(sc, "current")
    _, cd = controller_tf(4.8, 3200, 0.0, H, discretisation="backward-euler")
    wc = analyse(control.ss(cd) * plant.discrete).crossover_rad_s
    p = _reference_plant(False)
    approx = complex(p(1j * wc)) * np.exp(-1.5j * wc * H)
    exact = complex(plant.discrete(np.exp(1j * wc * H)))
    dphi = abs(np.angle(exact / approx))
    ws = 2 * math.pi / H
    alias = sum(
        abs(complex(p(1j * (wc + k * ws))) * (1 - np.exp(-1j * (wc + k * ws) * H)))
        / abs((wc + k * ws) * H)
        for k in (-1, 1)
    ) / abs(complex(p(1j * wc)))
    assert dphi <= 2 * alias  # [rad]
    assert math.degrees(dphi) < 0.5  # and small in practice at w_c h = 0.15


def test_speed_plant_closes_the_current_loop_and_samples_both_rates_consistently():
    # Multirate: the speed plant at 4 x the current loop's sample time is the current loop
    # closed at its rate, lifted to the outer rate. Its static gain must equal the continuous
    # plant's K / B through a closed current loop of unity static gain (final-value theorem).
    sc = dcsim.load_scenario_text(
        DRIVE.format(locked="false", delay="false").replace('mode = "current"', 'mode = "speed"')
        + '[control.speed]\nkp = "0.5 A*s/rad"\nki = "20 A/rad"\nsample_time = "200 us"\n'
        'limit = "10 A"\n'
    )
    p = loop_plant(sc, "speed")
    assert p.sample_time_s == pytest.approx(200e-6)
    dc_d = complex(control.dcgain(p.discrete))
    dc_c = complex(control.dcgain(p.continuous_no_delay))
    assert dc_d.real == pytest.approx(K / B, rel=1e-6)
    assert dc_c.real == pytest.approx(K / B, rel=1e-6)
