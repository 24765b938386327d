"""The DC-bus capacitor on the machine-library kernel (wound-field machines, ripple, shaft).

Setting (invented): the brushed hoist and conveyor machines of a quarry's tipping station fed
from a 220 V rectifier with a bus capacitor bank; lowering a skip drives the machine back.

Model: the ideal averaged bridge applies the command (or the whole bus, fully on) and draws
``i_bus = v_a i_t / v_bus`` from the capacitor; the source charges it through its
resistance, ``C dv/dt = (V_s - v) / R_s - i_bus``, and a diode front end
(``supply.regenerative = false``) passes no current back while ``v > V_s``. Source: the
capacitor's and Ohm's laws with the power balance of a lossless averaged converter (e.g.
Mohan, Undeland, Robbins, *Power Electronics*, ch. 7, from memory); the machines' equations
as in tests/test_wound_field.py (Chapman, *Electric Machinery Fundamentals*, ch. 9, from
memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from dcsim import load_scenario_text, simulate

VS, RS, C = 220.0, 0.2, 10e-3
RA, LA, J, B = 0.5, 5e-3, 0.05, 0.01
RF, LF, M = 110.0, 11.0, 1.0  # shunt field: 2 A, tau_f = 0.1 s, K = 2 V*s/rad settled


def _text(*, volts: float, load: float, duration: float, regen: bool = True,
          record: str = "0.5 ms") -> str:  # fmt: skip
    return f"""
[simulation]
duration = "{duration} s"
record_interval = "{record}"
[motor]
kind = "shunt"
resistance = "{RA} ohm"
inductance = "{LA} H"
inertia = "{J} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
field_resistance = "{RF} ohm"
field_inductance = "{LF} H"
mutual_inductance = "{M} H"
[load]
torque = "{load} N*m"
[supply]
voltage = "{VS} V"
resistance = "{RS} ohm"
capacitance = "{C} F"
regenerative = {str(regen).lower()}
[control]
voltage = "{volts} V"
"""


def test_shunt_start_from_a_capacitor_bus_against_radau():
    # Source: scipy.integrate.solve_ivp (Radau, rtol 1e-10) of the shunt machine on the
    # capacitor bus: armature, field across the terminals (the bridge output v_a), shaft and
    # bus; v_a = 120 V stays below the bus throughout (checked), so the bridge is in control
    # and the equations are smooth.
    va, load = 120.0, 10.0
    res = simulate(load_scenario_text(_text(volts=va, load=load, duration=0.6), source="q.toml"))
    tr = res.trace
    assert np.min(tr["bus_voltage_V"]) > va

    def rhs(_t, y):
        i, w, i_f, v = y
        k = M * i_f
        i_bus = va * (i + i_f) / v
        return [
            (va - RA * i - k * w) / LA,
            (k * i - load - B * w) / J,
            (va - RF * i_f) / LF,
            ((VS - v) / RS - i_bus) / C,
        ]

    t = tr["time_s"]
    sol = solve_ivp(rhs, (0.0, t[-1]), [0.0, 0.0, 0.0, VS], method="Radau", t_eval=t,
                    rtol=1e-10, atol=1e-12)  # fmt: skip
    assert sol.success
    # 1e-6 of each column's range: RK4 at h <= tau/10 as in tests/test_wound_field.py
    # (TRANSIENT_RTOL there)
    for name, ref in (("current_A", sol.y[0]), ("speed_rad_s", sol.y[1]),
                      ("field_current_A", sol.y[2]), ("bus_voltage_V", sol.y[3])):  # fmt: skip
        scale = np.max(np.abs(ref)) if name != "bus_voltage_V" else np.ptp(ref)
        assert np.max(np.abs(tr[name] - ref)) <= 1e-6 * scale, name
    # the source current is the charging current of the capacitor's Ohm's law
    assert np.allclose(tr["supply_current_A"], (VS - tr["bus_voltage_V"]) / RS, rtol=0, atol=1e-9)
    s = res.summary
    largest = max(abs(v) for k, v in s.items() if k.endswith("_J") and "residual" not in k)
    # Source: conservation of energy (the capacitor's 1/2 C v^2 in the stored term)
    assert abs(s["energy_balance_residual_J"]) <= 1e-6 * largest


def test_overhauling_load_charges_the_bus_behind_a_diode_front_end():
    # An overhauling load (negative torque: a skip running down) drives the machine above its
    # no-load speed; the command 200 V is below its back-EMF, so it generates into the bus.
    # Source: the diode passes no current back (Mohan et al. ch. 5, from memory): wherever
    # the bus is above the source the supply current is zero, and the energy the machine
    # returns is stored in the capacitor -- the bus peak satisfies the account,
    # 1/2 C (v_peak^2 - v_0^2) = energy into the bus while blocked (checked through the
    # closing account, and against the trace's own integral of v_bus i_bus).
    text = _text(volts=200.0, load=-40.0, duration=1.5, regen=False, record="0.1 ms")
    res = simulate(load_scenario_text(text, source="q.toml"))
    tr, s = res.trace, res.summary
    above = tr["bus_voltage_V"] > VS + 1e-9
    assert above.any()
    assert np.all(tr["supply_current_A"][above] == 0.0)
    assert np.all(tr["supply_current_A"] >= -1e-12)
    assert s["peak_bus_voltage_V"] > VS
    # the capacitor's energy rise equals the bridge's returned energy over the run's last
    # blocked stretch: trapezoid of v_bus i_bus over the trace (0.1 ms rows, smooth signals)
    t, v, ib = tr["time_s"], tr["bus_voltage_V"], tr["bridge_bus_current_A"]
    last = np.flatnonzero(~above)[-1] + 1  # first row of the final blocked stretch
    p_in = -v[last:] * ib[last:]  # power into the capacitor while the source is blocked
    e_trace = float(np.sum(0.5 * (p_in[1:] + p_in[:-1]) * np.diff(t[last:])))
    e_cap = 0.5 * C * (v[-1] ** 2 - v[last] ** 2)
    assert e_cap == pytest.approx(e_trace, rel=1e-4)
    largest = max(abs(x) for k, x in s.items() if k.endswith("_J") and "residual" not in k)
    assert abs(s["energy_balance_residual_J"]) <= 1e-6 * largest


def test_regenerative_source_takes_the_energy_back():
    # The same overhauling load on a regenerative source: the bus settles where the source
    # takes the returned current, v = V_s - R_s i_s with i_s < 0 (Ohm's law), no diode.
    text = _text(volts=200.0, load=-40.0, duration=3.0, regen=True)
    res = simulate(load_scenario_text(text, source="q.toml"))
    tr = res.trace
    assert tr["supply_current_A"][-1] < 0.0
    assert tr["bus_voltage_V"][-1] == pytest.approx(VS - RS * tr["supply_current_A"][-1],
                                                    rel=1e-9)  # fmt: skip
