"""Design checks (dcsim.checks) against closed forms and hand-worked cases.

Fuse: the first-order heating model's response to the locked-rotor exponential and to the
start-up exponential of a motor (integrated analytically below); verdicts on drives whose
answer follows by hand. Regeneration: the energy of a stop against its closed form, the peak
bus voltage against the capacitor's energy balance. Thermal: the steady rise P R_th and the
time constant, copper's resistance at temperature, the intermittent-duty formula, and the
coupled run against scipy's solve_ivp. Duty: the RMS of a trapezoidal current cycle.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

import dcsim
from dcsim.checks.duty import rms_over_cycle
from dcsim.checks.fuse import equivalent_pulses, repeated_start_heat
from dcsim.checks.regen import find_stops
from dcsim.checks.session import run_checks
from dcsim.plant.thermal import (
    ALPHA20_PER_K,
    network_matrices,
    network_rise,
    periodic_start_rises,
    resistance_at,
)
from dcsim.scenario.schema import Thermal


def _one_node_rise(t, power_W, r_th, tau, x0=0.0):
    """The rise of the one-node network (the model under test) at the sample times [K]."""
    a, b = network_matrices(Thermal(resistance=r_th, time_constant=tau))
    return network_rise(t, power_W, a, b, np.array([x0]))[:, 0]


# --------------------------------------------------------------------------------------------
# The fuse heat integral
# --------------------------------------------------------------------------------------------


def _heat_of_exponentials(t, terms, tau_f, i_min):
    """Heat fraction of the first-order fuse model under i^2 = sum c_k exp(-k t), from cold.

    f(t) = 1/(tau I_min^2) int_0^t exp(-(t - s)/tau) i(s)^2 ds, and
    int_0^t exp(-(t - s)/tau) exp(-k s) ds = (exp(-k t) - exp(-t/tau)) / (1/tau - k)
    (k != 1/tau), tau (1 - exp(-t/tau)) for k = 0.
    """
    t = np.asarray(t, dtype=float)
    total = np.zeros_like(t)
    for c, k in terms:
        if k == 0.0:
            part = tau_f * (1.0 - np.exp(-t / tau_f))
        else:
            part = (np.exp(-k * t) - np.exp(-t / tau_f)) / (1.0 / tau_f - k)
        total += c * part
    return total / (tau_f * i_min**2)


LOCKED = """
[simulation]
duration = "{duration}"
record_interval = "{record}"
[motor]
resistance = "{r} ohm"
inductance = "{l}"
torque_constant = "0.05 N*m/A"
inertia = "{j} kg*m^2"
[load]
locked = {locked}
[supply]
voltage = "12 V"
resistance = "20 mohm"
capacitance = "100 uF"
[control]
voltage = "12 V"
[bridge]
model = "averaged"
[fuse]
rated_current = "5 A"
melting_i2t = "{i2t} A^2*s"
min_melting_current = "10.5 A"
"""


@functools.cache
def _run(text: str):
    return dcsim.simulate(dcsim.load_scenario_text(text))


def test_heat_fraction_under_the_locked_rotor_exponential():
    # Source: first-order fuse model (CHECKS.md, derived) integrated analytically for
    # i(t) = I (1 - exp(-t/tau_e)), i^2 = I^2 (1 - 2 exp(-t/tau_e) + exp(-2 t/tau_e)) (helper
    # above); tau_e = L / (R + R_s) = 20 ms. The bus capacitor's current (C R_s = 2 us) and the
    # bus voltage's dip R_s i are in the circuit: R_s is part of the total resistance, the
    # capacitor current is C R_s di/dt ~ 1e-4 of i.
    res = _run(
        LOCKED.format(
            duration="0.3 s", record="0.5 ms", r=0.58, l="12 mH", j=1e-4, locked="true", i2t=300.0
        )
    )
    big_i = 12.0 / 0.6
    tau_e = 0.012 / 0.6
    tau_f = 300.0 / 10.5**2
    t = res.trace["time_s"]
    ref = _heat_of_exponentials(
        t, [(big_i**2, 0.0), (-2 * big_i**2, 1 / tau_e), (big_i**2, 2 / tau_e)], tau_f, 10.5
    )
    assert res.summary["fuse_melted"] is False
    np.testing.assert_allclose(res.trace["fuse_heat_fraction"], ref, rtol=2e-3, atol=1e-6)
    np.testing.assert_allclose(
        res.trace["current_A"], big_i * (1 - np.exp(-t / tau_e)), rtol=1e-3, atol=1e-3
    )


def _start_text(i2t: float, r: float = 0.5, locked: str = "false", duration="0.3 s") -> str:
    return LOCKED.format(
        duration=duration, record="0.2 ms", r=r, l="10 uH", j=1e-4, locked=locked, i2t=i2t
    )


def _start_heat(i2t: float, t, r: float = 0.5):
    """Heat fraction over the start of the motor of _start_text, in closed form.

    Source: DC motor equations (e.g. Hughes & Drury, *Electric Motors and Drives*, ch. 3):
    L i' = V - R i - K w, J w' = K i from rest give i = V / (L (s1 - s2)) (exp(s1 t) -
    exp(s2 t)), s1,2 the roots of L J s^2 + R J s + K^2 = 0; i^2 is then three exponentials
    for the fuse integral of the helper above. R includes the source's 20 mohm.
    """
    r_tot, ind, j, k = r + 0.02, 10e-6, 1e-4, 0.05
    s1, s2 = np.roots([ind * j, r_tot * j, k * k])
    a = 12.0 / (ind * (s1 - s2))
    terms = [(a * a, -2 * s1), (-2 * a * a, -(s1 + s2)), (a * a, -2 * s2)]
    return _heat_of_exponentials(t, [(float(c), float(q)) for c, q in terms], i2t / 10.5**2, 10.5)


def test_heat_fraction_under_the_start_up_exponential():
    # Source: closed form of _start_heat (above). The 100 uF bus behind 20 mohm (2 us) is
    # left out of the closed form: its current is ~1e-4 of the armature's.
    res = _run(_start_text(20.0))
    t = res.trace["time_s"]
    np.testing.assert_allclose(
        res.trace["fuse_heat_fraction"], _start_heat(20.0, t), rtol=5e-3, atol=2e-4
    )


def _checked(text: str, checks: str):
    return run_checks(dcsim.load_scenario_text(text + "\n[checks]\n" + checks))


def _verdict(report, name):
    return next(v for v in report.verdicts if v.name == name)


def test_a_fuse_that_passes_both_ways():
    # Hand case. Start: peak of _start_heat (closed form) for I2t = 20 A^2 s is 0.25, below
    # the 0.75 margin. Stall: I = 12 V / 0.52 ohm = 23.1 A from the supply against I_min =
    # 10.5 A, tau = 20 / 10.5^2 = 0.181 s: melts at tau ln(I^2 / (I^2 - I_min^2)) = 0.0421 s
    # within the 0.5 s limit.
    # Source: first-order fuse model, closed forms (CHECKS.md, derived); Ohm's law.
    report = _checked(_start_text(20.0), 'stall_clear_time = "0.5 s"')
    t = np.linspace(0.0, 0.3, 30001)
    peak = float(np.max(_start_heat(20.0, t)))
    start = _verdict(report, "fuse.survives_start")
    assert start.status == "pass"
    assert start.figure == pytest.approx(peak, rel=5e-3)
    clear = _verdict(report, "fuse.clears_stall")
    big_i = 12.0 / 0.52
    tau = 20.0 / 10.5**2
    assert clear.status == "pass"
    assert clear.figure == pytest.approx(tau * math.log(big_i**2 / (big_i**2 - 10.5**2)), rel=2e-3)
    assert not report.failed


def test_a_fuse_that_blows_on_start():
    # Hand case: with I2t = 2 A^2 s the closed-form start heat (above) passes 1: the fuse
    # melts on a normal start (a nuisance blow) at the root of f(t) = 1.
    # Source: first-order fuse model, closed form of _start_heat; root by scipy brentq.
    grid = np.linspace(0.0, 0.02, 2001)
    first = int(np.argmax(_start_heat(2.0, grid) >= 1.0))  # the first grid point past 1
    t_melt = brentq(
        lambda t: float(_start_heat(2.0, np.array([t]))[0]) - 1.0, grid[first - 1], grid[first]
    )
    report = _checked(_start_text(2.0), 'stall_clear_time = "0.5 s"')
    start = _verdict(report, "fuse.survives_start")
    assert start.status == "fail"
    assert "melts at" in start.detail
    res = _run(_start_text(2.0))
    assert res.summary["fuse_melt_time_s"] == pytest.approx(t_melt, rel=2e-2)  # L/R 20 us
    assert report.failed


def test_a_fuse_that_never_clears_the_stall():
    # Hand case: with 1.5 ohm the stall draws 12 / 1.52 = 7.9 A, below I_min = 10.5 A: the
    # first-order model never melts (steady heat fraction (7.9/10.5)^2 = 0.57 < 1).
    # Source: first-order fuse model (CHECKS.md, derived); Ohm's law.
    report = _checked(_start_text(20.0, r=1.5), 'stall_clear_time = "0.5 s"')
    clear = _verdict(report, "fuse.clears_stall")
    assert clear.status == "fail" and clear.figure == math.inf
    assert "never clears" in clear.detail and "7.89" in clear.detail
    assert _verdict(report, "fuse.survives_start").status == "pass"


def test_a_fuse_that_clears_too_late():
    # Hand case: I2t = 200 A^2 s, tau = 1.81 s: the 23.1 A stall melts it at 0.421 s, after the
    # 0.2 s limit. Source: closed form of the first-order model (CHECKS.md, derived).
    report = _checked(_start_text(200.0), 'stall_clear_time = "0.2 s"')
    clear = _verdict(report, "fuse.clears_stall")
    big_i = 12.0 / 0.52
    tau = 200.0 / 10.5**2
    assert clear.status == "fail"
    # the run lasts 1.25 x 0.2 s: the melting time comes from the closed form at its end
    assert clear.figure == pytest.approx(tau * math.log(big_i**2 / (big_i**2 - 10.5**2)), rel=2e-3)


def test_derating_scales_the_heat_fraction():
    # Source: derating definition (dcsim.power.fuse.derated): every current of the curve
    # scales by d, so a heat fraction i^2 / (d I_min)^2 grows by 1/d^2.
    plain = _verdict(_checked(_start_text(20.0), ""), "fuse.survives_start")
    hot = _verdict(_checked(_start_text(20.0), "fuse_derating = 0.8"), "fuse.survives_start")
    assert hot.figure == pytest.approx(plain.figure / 0.64, rel=1e-12)


def test_repeated_starts_against_the_periodic_closed_form():
    # Source: first-order model (derived): a pulse of constant current I for D every T settles
    # where f(T) = f(0): f_peak = r (1 - exp(-D/tau)) / (1 - exp(-T/tau)), r = I^2/I_min^2.
    tau, r, d, period = 0.4, 0.6, 0.3, 1.1
    t = np.linspace(0.0, d, 3001)
    single = r * (1.0 - np.exp(-t / tau))
    settled = repeated_start_heat(t, single, period, tau)
    expected = r * -math.expm1(-d / tau) / -math.expm1(-period / tau)
    assert settled[-1] == pytest.approx(expected, rel=1e-12)
    assert float(np.max(settled)) == pytest.approx(expected, rel=1e-12)


def test_equivalent_pulse_of_a_rectangular_pulse():
    # Source: definition of the RMS: a rectangular pulse of I for D has RMS I over any window
    # up to D, and I sqrt(D / d) over a window d > D.
    t = np.linspace(0.0, 1.0, 10001)
    i = np.where(t <= 0.2, 5.0, 0.0)
    got = equivalent_pulses(t, i, np.array([0.1, 0.2, 0.5]))
    np.testing.assert_allclose(got, [5.0, 5.0, 5.0 * math.sqrt(0.2 / 0.5)], rtol=2e-3)


# --------------------------------------------------------------------------------------------
# Regeneration
# --------------------------------------------------------------------------------------------

STOP = """
[simulation]
duration = "1.4 s"
record_interval = "50 us"
[motor]
resistance = "0.5 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "2e-4 kg*m^2"
viscous_friction = "1e-5 N*m*s/rad"
[load]
inertia = "4e-4 kg*m^2"
[supply]
voltage = "24 V"
resistance = "50 mohm"
capacitance = "22 mF"
regenerative = false
[bridge]
model = "averaged"
[control]
voltage = "24 V"
[[events]]
at = "0.8 s"
set = { "control.voltage" = "8 V" }
"""


@functools.cache
def _stop_run():
    sc = dcsim.load_scenario_text(STOP)
    return sc, dcsim.simulate(sc)


def test_stop_energy_against_the_closed_form():
    # Source: energy balance of the armature (any machines text, e.g. Hughes & Drury ch. 3):
    # int -v_a i dt = 1/2 J (w1^2 - w2^2) - int R i^2 - int B w^2 + 1/2 L (i1^2 - i2^2); the
    # bridge here has no losses, so all of it reaches the bus. Trace integrals (trapezoid,
    # 50 us rows) limit the agreement to ~1e-4.
    sc, res = _stop_run()
    stops = find_stops(sc, res)
    assert len(stops) == 1
    s = stops[0]
    assert s.start_s == pytest.approx(0.8, abs=1e-4)
    assert s.kinetic_J > 1.0
    assert s.to_bus_J == pytest.approx(s.closed_form_J, rel=1e-3)
    assert s.kinetic_J == pytest.approx(
        0.5 * 6e-4 * (s.speed_start_rad_s**2 - s.speed_end_rad_s**2), rel=1e-12
    )


def test_peak_bus_voltage_from_the_capacitor_energy_balance():
    # Source: capacitor energy E = 1/2 C V^2 (CHECKS.md, derived): with the source's diode
    # blocked, the bus rises from V0 to V_peak with 1/2 C (V_peak^2 - V0^2) = energy the
    # bridge returns + what the source still delivers until its diode blocks.
    sc, res = _stop_run()
    tr = res.trace
    t, v = tr["time_s"], tr["bus_voltage_V"]
    a = int(np.searchsorted(t, 0.8))
    k = int(np.argmax(v))
    s = slice(a, k + 1)
    p = v * (tr["supply_current_A"] - tr["bridge_bus_current_A"])
    energy = float(np.trapezoid(p[s], t[s]))
    predicted = math.sqrt(v[a] ** 2 + 2.0 * energy / 22e-3)
    assert res.summary["peak_bus_voltage_V"] == pytest.approx(predicted, rel=1e-4)
    assert res.summary["peak_bus_voltage_V"] > 25.0


def test_regeneration_verdicts_on_the_stop():
    # The suggested capacitance is the capacitor energy balance solved for C (module
    # docstring): C = 2 E / ((V0 + dV)^2 - V0^2). Source: E = 1/2 C V^2 (derived).
    sc, _ = _stop_run()
    text = STOP + '\n[checks]\ncapacitor_rated_voltage = "25 V"\nallowed_bus_rise = "3 V"\n'
    report = run_checks(dcsim.load_scenario_text(text))
    cap = _verdict(report, "regeneration.capacitor_voltage")
    assert cap.status == "fail" and cap.figure > 25.0
    c_min = _verdict(report, "regeneration.min_capacitance")
    energy = _verdict(report, "regeneration.stop_energy").figure
    stop = find_stops(sc, _stop_run()[1])[0]
    assert c_min.figure == pytest.approx(
        2 * energy / ((stop.bus_start_V + 3.0) ** 2 - stop.bus_start_V**2), rel=1e-12
    )
    assert _verdict(report, "regeneration.brake_pulse_energy").status == "n/a"


# --------------------------------------------------------------------------------------------
# Thermal and duty cycle
# --------------------------------------------------------------------------------------------


def test_steady_rise_and_time_constant():
    # Source: lumped first-order thermal model (Incropera et al., Fundamentals of Heat and
    # Mass Transfer, 6th ed., sec. 5.1-5.3): constant P gives theta = P R_th (1 - exp(-t/tau)):
    # the rise settles at P R_th and reaches 63.2 % of it at t = tau.
    t = np.linspace(0.0, 3000.0, 601)
    rise = _one_node_rise(t, np.full(t.size, 40.0), 1.5, 300.0)
    np.testing.assert_allclose(rise, 60.0 * (1.0 - np.exp(-t / 300.0)), rtol=1e-12, atol=1e-12)
    assert float(np.interp(300.0, t, rise)) == pytest.approx(60.0 * (1 - math.exp(-1)), 1e-12)


def test_rise_under_a_ramp_of_loss():
    # Source: the exact solution of theta' = (k t R - theta)/tau from 0:
    # theta = k R (t - tau (1 - exp(-t/tau))) (first-order ODE with a ramp input, derived).
    t = np.linspace(0.0, 100.0, 11)
    rise = _one_node_rise(t, 2.0 * t, 0.5, 30.0)
    np.testing.assert_allclose(rise, 1.0 * (t - 30.0 * (1 - np.exp(-t / 30.0))), rtol=1e-12)


def test_resistance_at_temperature():
    # Source: IEC 60028: R(T) = R20 (1 + 0.00393 (T - 20 degC)) for annealed copper.
    assert ALPHA20_PER_K == 0.00393
    assert resistance_at(1.0, 373.15) == pytest.approx(1.0 + 0.00393 * 80.0, rel=1e-14)
    # given at 75 degC: R20 = R75 / (1 + 0.00393 * 55)
    r20 = 1.2 / (1 + 0.00393 * 55.0)
    assert resistance_at(1.2, 293.15, 348.15) == pytest.approx(r20, rel=1e-14)


def test_intermittent_duty_start_of_cycle():
    # Source: intermittent periodic duty of a first-order body (IEC 60034-1 duty type S3, from
    # memory; derived): a loss P for D every T settles at the end of the loss at
    # P R_th (1 - exp(-D/tau)) / (1 - exp(-T/tau)), and the cycle starts that much cooled
    # over T - D.
    p_rth, tau, d, period = 50.0, 200.0, 60.0, 240.0
    end_from_zero = p_rth * -math.expm1(-d / tau)
    a, _ = network_matrices(Thermal(resistance=1.0, time_constant=tau))
    start = float(periodic_start_rises(np.array([end_from_zero]), a, d, period)[0])
    end = p_rth * -math.expm1(-d / tau) / -math.expm1(-period / tau)
    assert start == pytest.approx(end * math.exp(-(period - d) / tau), rel=1e-12)


HEATED = """
[simulation]
duration = "{duration}"
record_interval = "1 ms"
{cycle}
[motor]
resistance = "0.8 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = true
[supply]
voltage = "6 V"
[control]
voltage = "6 V"
[thermal]
resistance = "4 K/W"
time_constant = "{tau}"
ambient = "25 degC"
reference_temperature = "25 degC"
insulation_class = "F"
coupled = {coupled}
"""


def test_coupled_winding_against_solve_ivp():
    # Source: scipy solve_ivp (Radau) of C dT/dt = R(T) i^2 - (T - T_amb) / R_th,
    # L di/dt = V - R(T) i with R(T) from IEC 60028 (alpha20 = 0.00393 /K), C = tau / R_th: the
    # locked rotor at a fixed voltage. Tolerance: the coupling settles to 0.01 K
    # per pass; the loss is linear between trace rows, so the start's step of current is
    # spread over the first row interval h: at most P h / (2 C) = P R_th h / (2 tau) = 0.023 K
    # for P = 45 W, h = 1 ms; the resistance is updated every tau / 50 at the segment middle.
    sc = dcsim.load_scenario_text(
        HEATED.format(duration="12 s", cycle="", tau="4 s", coupled="true")
    )
    res = dcsim.simulate(sc)
    ta, rth, tau = 298.15, 4.0, 4.0

    def rhs(_t, y):
        temp, i = y
        r = resistance_at(0.8, temp, 298.15)
        return [(r * i * i - (temp - ta) / rth) / (tau / rth), (6.0 - r * i) / 1e-3]

    t = res.trace["time_s"]
    ref = solve_ivp(rhs, (0.0, 12.0), [ta, 0.0], method="Radau", t_eval=t, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(res.trace["winding_temperature_K"], ref.y[0], atol=0.05)
    assert res.summary["thermal_passes"] >= 2
    assert (
        abs(res.summary["energy_balance_residual_J"]) < 1e-6 * res.summary["energy_copper_loss_J"]
    )
    # hotter winding, less current: the uncoupled run heats more
    plain = dcsim.simulate(
        dcsim.load_scenario_text(
            HEATED.format(duration="12 s", cycle="", tau="4 s", coupled="false")
        )
    )
    assert plain.summary["peak_winding_temperature_K"] > res.summary["peak_winding_temperature_K"]


def test_thermal_verdict_on_a_repeated_duty():
    # Source: intermittent duty (above) with P = V^2 / R = 45 W held (uncoupled) for D = 2 s
    # every 10 s, tau = 20 s, R_th = 4 K/W: the peak rise is theta_z(D) / (1 - exp(-T/tau)),
    # theta_z(D) = P R_th (1 - exp(-D/tau)) for a rectangular loss (here with the current's
    # rise over L/R integrated too); the class F limit 155 degC (IEC 60085).
    sc = dcsim.load_scenario_text(
        HEATED.format(duration="2 s", cycle='cycle_time = "10 s"', tau="20 s", coupled="false")
    )
    report = run_checks(sc)
    v = _verdict(report, "thermal.winding_temperature")
    # the loss is P (1 - exp(-t/tau_e))^2 with tau_e = L / R = 1.25 ms (locked rotor):
    # theta_z(D) = R_th / tau int_0^D exp(-(D - s)/tau) P(s) ds in closed form
    tau, d, tau_e = 20.0, 2.0, 1e-3 / 0.8
    terms = [(1.0, 0.0), (-2.0, 1.0 / tau_e), (1.0, 2.0 / tau_e)]
    conv = sum(c * (math.exp(-k * d) - math.exp(-d / tau)) / (1.0 / tau - k) for c, k in terms)
    peak_rise = 45.0 * 4.0 / tau * conv / -math.expm1(-10.0 / tau)
    assert v.values["winding_peak_K"] == pytest.approx(298.15 + peak_rise, abs=0.02)
    assert v.limit == pytest.approx(428.15)
    assert v.figure == pytest.approx(v.values["winding_peak_K"] + 10.0)
    assert v.status == "pass"


TRAPEZOID = """
[simulation]
duration = "1 s"
record_interval = "0.2 ms"
cycle_time = "2 s"
[motor]
resistance = "1 ohm"
inductance = "20 uH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = true
[supply]
voltage = "12 V"
resistance = "10 mohm"
capacitance = "100 uF"
initial_bus_voltage = "0 V"
[bridge]
model = "averaged"
[supply_profile]
points = [["0 s", "0 V"], ["0.1 s", "12 V"], ["0.4 s", "12 V"], ["0.6 s", "0 V"], ["1 s", "0 V"]]
[control]
voltage = "12 V"
[checks]
continuous_current = "5 A"
"""


def test_rms_of_a_trapezoidal_duty_cycle():
    # Source: RMS of a trapezoid (definition of the RMS, integrated by hand): ramps of ta and
    # td and a plateau tc at I give int i^2 dt = I^2 (ta/3 + tc + td/3); over a cycle T the
    # RMS is I sqrt((ta/3 + tc + td/3)/T). Here I = 12 V / 1.01 ohm (full duty, Ohm's law);
    # L/R = 20 us lags the current behind the voltage: on the ramps the lag's effect on
    # int i^2 cancels to first order between rise and fall; the 100 uF bus behind 10 mohm
    # (1 us) adds ~1e-6 s.
    report = run_checks(dcsim.load_scenario_text(TRAPEZOID))
    v = _verdict(report, "duty.rms_current")
    big_i = 12.0 / 1.01
    expected = big_i * math.sqrt((0.1 / 3 + 0.3 + 0.2 / 3) / 2.0)
    assert v.figure == pytest.approx(expected, rel=1e-4)
    assert rms_over_cycle(v.values["i2t_A2s"], 2.0) == v.figure
    assert v.status == "fail"  # 5.31 A RMS against a 5 A rating


def test_checks_without_ratings_are_not_applicable():
    report = run_checks(dcsim.load_scenario_text(_start_text(20.0)))
    by = {v.name: v for v in report.verdicts}
    assert by["fuse.clears_stall"].status == "n/a"
    assert "checks.stall_clear_time" in by["fuse.clears_stall"].detail
    assert by["thermal.winding_temperature"].status == "n/a"
    assert by["duty.peak_current"].status == "n/a"
    assert not report.failed
