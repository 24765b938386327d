"""The two-node thermal network (winding -> housing -> ambient) and the magnets' temperature.

Checked against the closed form of the network (steady rises, time constants from the
characteristic polynomial, the modal step response), the periodic duty by brute force over
many cycles, and the coupled machine (resistance and torque constant following the nodes)
against scipy's solve_ivp of the full electrical-mechanical-thermal system.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import dcsim
from dcsim.errors import ScenarioError
from dcsim.plant.thermal import (
    network_matrices,
    network_rise,
    periodic_start_rises,
    resistance_at,
    time_constants_s,
    torque_constant_at,
)
from dcsim.scenario.schema import MAGNET_COEFFICIENTS_PER_K, Thermal

NET = Thermal(
    winding_to_housing=0.8, housing_to_ambient=1.6, winding_capacity=120.0, housing_capacity=900.0
)


def _roots():
    """Roots of s^2 + s (G1/Cw + (G1 + G2)/Ch) + G1 G2 / (Cw Ch) = 0 (the network's
    characteristic polynomial, from its two nodal equations)."""
    g1, g2 = 1 / 0.8, 1 / 1.6
    cw, ch = 120.0, 900.0
    p = g1 / cw + (g1 + g2) / ch
    q = g1 * g2 / (cw * ch)
    d = math.sqrt(p * p - 4 * q)
    return (-p + d) / 2, (-p - d) / 2


def test_time_constants_from_the_characteristic_polynomial():
    # Source: nodal heat balance of a two-node lumped network (Incropera et al., 6th ed.,
    # sec. 3.1 and 5.1-5.3: thermal resistance and lumped capacitance), eigenvalues by hand.
    a, _ = network_matrices(NET)
    got = sorted(np.linalg.eigvals(a).real)
    s1, s2 = _roots()
    np.testing.assert_allclose(got, sorted([s1, s2]), rtol=1e-12)
    np.testing.assert_allclose(time_constants_s(a), [-1 / s2, -1 / s1], rtol=1e-12)


def test_steady_rises_and_the_modal_step_response():
    # Source: steady state of the network: theta_w = P (R_wh + R_ha), theta_h = P R_ha; the
    # step response theta(t) = theta_ss + c1 e^{s1 t} + c2 e^{s2 t} with theta(0) = 0 and
    # theta_w'(0) = P / C_w (the housing starts with no heat flow): c1 + c2 = -theta_ss_w,
    # s1 c1 + s2 c2 = P / C_w (solved by hand below).
    p = 50.0
    t = np.linspace(0.0, 60000.0, 6001)  # 26 slow time constants
    a, b = network_matrices(NET)
    x = network_rise(t, np.full(t.size, p), a, b, np.zeros(2))
    ss_w, ss_h = p * (0.8 + 1.6), p * 1.6
    assert x[-1, 0] == pytest.approx(ss_w, rel=1e-6)
    assert x[-1, 1] == pytest.approx(ss_h, rel=1e-6)
    s1, s2 = _roots()
    c2 = (p / 120.0 + s1 * ss_w) / (s2 - s1)
    c1 = -ss_w - c2
    np.testing.assert_allclose(
        x[:, 0], ss_w + c1 * np.exp(s1 * t) + c2 * np.exp(s2 * t), rtol=1e-9, atol=1e-9
    )


def test_one_node_network_is_the_first_order_model():
    # Source: lumped first-order model: theta = P R_th (1 - exp(-t/tau)).
    th = Thermal(resistance=2.0, time_constant=100.0)
    a, b = network_matrices(th)
    t = np.linspace(0.0, 500.0, 51)
    x = network_rise(t, np.full(t.size, 10.0), a, b, np.zeros(1))
    np.testing.assert_allclose(x[:, 0], 20.0 * (1 - np.exp(-t / 100.0)), rtol=1e-12)


def test_periodic_start_against_many_cycles():
    # Source: superposition (linear network): the settled cycle is the limit of repeating the
    # cycle from cold; here 400 cycles of 600 s (the slow time constant is ~2.3e3 s) done by
    # stepping the exact solution.
    a, b = network_matrices(NET)
    d, period = 120.0, 600.0
    t_on = np.linspace(0.0, d, 121)
    x_on = network_rise(t_on, np.full(t_on.size, 80.0), a, b, np.zeros(2))
    start = periodic_start_rises(x_on[-1], a, d, period)
    from scipy.linalg import expm

    x = np.zeros(2)
    on = expm(a * d)
    rest = expm(a * (period - d))
    for _ in range(400):
        x = rest @ (on @ x + x_on[-1])
    np.testing.assert_allclose(start, x, rtol=1e-9)


def test_magnet_coefficients_and_torque_constant():
    # Source: typical reversible temperature coefficients of remanence (from memory; the
    # magnet maker's grade data replaces them): hard ferrite -0.2 %/K, NdFeB -0.12 %/K,
    # SmCo -0.035 %/K, AlNiCo -0.02 %/K; K follows the remanence linearly.
    assert MAGNET_COEFFICIENTS_PER_K["ferrite"] == pytest.approx(-0.002)
    assert MAGNET_COEFFICIENTS_PER_K["ndfeb"] == pytest.approx(-0.0012)
    assert torque_constant_at(0.05, 393.15, 293.15, -0.002) == pytest.approx(0.05 * 0.8)


MACHINE = """
[simulation]
duration = "30 s"
record_interval = "2 ms"
[motor]
resistance = "0.6 ohm"
inductance = "0.5 mH"
torque_constant = "0.04 N*m/A"
inertia = "2e-5 kg*m^2"
viscous_friction = "1e-5 N*m*s/rad"
[load]
torque = "0.12 N*m"
[supply]
voltage = "12 V"
[control]
voltage = "12 V"
[thermal]
winding_to_housing = "2 K/W"
housing_to_ambient = "3 K/W"
winding_capacity = "2 J/K"
housing_capacity = "8 J/K"
ambient = "25 degC"
reference_temperature = "25 degC"
magnet_material = "ferrite"
"""


def test_coupled_machine_against_solve_ivp():
    # Source: scipy solve_ivp (Radau, rtol 1e-9) of the full system: L i' = V - R(T_w) i -
    # K(T_h) w, J w' = K(T_h) i - B w - T_L, and the two nodal heat balances with the copper
    # loss R(T_w) i^2 into the winding; R(T) per IEC 60028 (alpha20 = 0.00393 /K), K(T) with the
    # ferrite coefficient. Tolerances: the coupling settles to 0.01 K per pass; the resistance
    # and torque constant are held over segments of the winding's fastest time constant / 50
    # at the segment's middle (a second-order error: ~ (dT per segment)^2 / 8 ~ 1e-3 K); the
    # speed error is then ~ |c| dT ~ 2e-5 of itself.
    sc = dcsim.load_scenario_text(MACHINE)
    res = dcsim.simulate(sc)
    c = MAGNET_COEFFICIENTS_PER_K["ferrite"]
    ta = 298.15
    g1, g2, cw, ch = 0.5, 1 / 3, 2.0, 8.0

    def rhs(_t, y):
        i, w, tw, th = y
        r = resistance_at(0.6, tw, ta)
        k = torque_constant_at(0.04, th, ta, c)
        q = g1 * (tw - th)
        return [
            (12.0 - r * i - k * w) / 0.5e-3,
            (k * i - 1e-5 * w - 0.12) / 2e-5,
            (r * i * i - q) / cw,
            (q - g2 * (th - ta)) / ch,
        ]

    t = res.trace["time_s"]
    ref = solve_ivp(
        rhs, (0.0, 30.0), [0.0, 0.0, ta, ta], method="Radau", t_eval=t, rtol=1e-9, atol=1e-9
    )
    late = t > 0.5  # after the start-up transient (a few mechanical time constants)
    np.testing.assert_allclose(res.trace["winding_temperature_K"], ref.y[2], atol=0.03)
    np.testing.assert_allclose(res.trace["housing_temperature_K"], ref.y[3], atol=0.03)
    np.testing.assert_allclose(res.trace["speed_rad_s"][late], ref.y[1][late], rtol=2e-4)
    # the magnets heat up: the torque constant falls, the no-load-ish speed rises
    assert res.summary["final_torque_constant_Nm_A"] < 0.04
    assert res.trace["speed_rad_s"][-1] > res.trace["speed_rad_s"][int(np.searchsorted(t, 1.0))]


@pytest.mark.parametrize(
    ("change", "key"),
    [
        ('resistance = "1 K/W"\ntime_constant = "60 s"', "thermal.winding_to_housing"),
        ('housing_capacity = "8 J/K"', "thermal.housing_capacity"),
    ],
)
def test_bad_thermal_models_are_refused(change, key):
    # Source: project rule (one ScenarioError naming the key)
    if change.startswith("housing_capacity"):
        text = MACHINE.replace('housing_capacity = "8 J/K"\n', "")
    else:
        text = MACHINE.replace("[thermal]\n", "[thermal]\n" + change + "\n")
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario_text(text)
    assert key in str(info.value)


def test_magnets_need_the_two_node_model():
    text = """
[simulation]
duration = "1 s"
[motor]
resistance = "1 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[supply]
voltage = "12 V"
[thermal]
resistance = "1 K/W"
time_constant = "60 s"
magnet_material = "ndfeb"
"""
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario_text(text)
    assert "thermal.magnet_material" in str(info.value) and "two-node" in str(info.value)
