"""The averaged and switching bridge models and the bus circuit against closed forms.

Each check names where its reference comes from. The drives here are invented test rigs (a
locked-rotor bench, a flywheel on a diode-fed bus); their numbers are chosen so the
reference's assumptions hold (e.g. L/R long against the PWM period for the ripple formulas).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import dcsim
from dcsim.errors import ScenarioError
from tests.reference import assert_energy_closes

V_BUS = 24.0
L_ARM = 2e-3
F_PWM = 20e3
T_PWM = 1.0 / F_PWM


def bench(
    *,
    model: str = "switching",
    pwm: str = "unipolar",
    volts: float = 12.0,
    duration: str = "0.08 s",
    record: str | None = "0.3125 us",
    resistance: float = 0.4,
    locked: bool = True,
    extra: str = "",
    bridge_extra: str = "",
    supply_extra: str = "",
    load_torque: float = 0.0,
) -> str:
    """A locked-rotor (or free) bench on a stiff 24 V bus, as scenario text."""
    rec = f'record_interval = "{record}"' if record else ""
    return f"""
[simulation]
duration = "{duration}"
{rec}
[motor]
resistance = "{resistance} ohm"
inductance = "{L_ARM} H"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = {"true" if locked else "false"}
torque = "{load_torque} N*m"
[supply]
voltage = "{V_BUS} V"
resistance = "1 mohm"
capacitance = "1 F"
{supply_extra}
[control]
voltage = "{volts} V"
[bridge]
model = "{model}"
pwm = "{pwm}"
frequency = "{F_PWM} Hz"
{bridge_extra}
{extra}
"""


def run(text: str):
    sc = dcsim.load_scenario_text(text)
    res = dcsim.simulate(sc)
    # the bench's 1 F bus holds C V^2 / 2 = 288 J; the stored-energy change is a difference of
    # two such numbers (see assert_energy_closes)
    assert_energy_closes(res.summary, stored_J=0.5 * sc.supply.capacitance * sc.supply.voltage**2)
    return res


def last_periods(res, n: int = 2):
    t = res.trace["time_s"]
    sel = t >= t[-1] - n * T_PWM - 1e-12
    return t[sel], res.trace["current_A"][sel]


# --------------------------------------------------------------------------------------------
# Ripple and the averaged model
# --------------------------------------------------------------------------------------------


def ripple_formula(pwm: str, m: float) -> float:
    """Peak-to-peak armature current ripple, L dominant.

    Source: Mohan, Undeland & Robbins, *Power Electronics*, 3rd ed., full-bridge dc-dc
    converter chapter (section from memory; the formulas are in ../shared/design/CHECKS.md):
    bipolar 2 V D (1 - D) / (L f_s) with D = (1 + m)/2; unipolar V d (1 - d) / (2 L f_s) with
    d = |m| (ripple at twice the switching frequency).
    """
    if pwm == "bipolar":
        d = 0.5 * (1.0 + m)
        return 2.0 * V_BUS * d * (1.0 - d) / (L_ARM * F_PWM)
    d = abs(m)
    return V_BUS * d * (1.0 - d) / (2.0 * L_ARM * F_PWM)


@pytest.mark.parametrize("pwm", ["unipolar", "bipolar"])
def test_ripple_matches_the_textbook_formula_and_its_maximum(pwm):
    # L/R = 5 ms = 100 PWM periods (the formula's assumption); 0.08 s = 16 L/R: steady state.
    # Edges fall on the record grid (T/160) for these duties, so the peaks are sampled.
    duties = [0.0, 0.25, 0.5, 0.75] if pwm == "bipolar" else [0.25, 0.5, 0.75]
    ripples = []
    for m in duties:
        res = run(bench(pwm=pwm, volts=m * V_BUS))
        _, i = last_periods(res)
        pp = float(i.max() - i.min())
        ref = ripple_formula(pwm, m)
        # Source: Mohan, Undeland & Robbins (above); 3 % as the issue asks
        assert pp == pytest.approx(ref, rel=0.03), (pwm, m, pp, ref)
        ripples.append(pp)
    # where the maximum occurs: bipolar at zero mean output, unipolar at |Vo| = V/2
    # Source: same (derivative of D (1 - D) and d (1 - d))
    expected_at = 0.0 if pwm == "bipolar" else 0.5
    assert duties[int(np.argmax(ripples))] == expected_at


def test_unipolar_ripple_is_at_twice_the_switching_frequency():
    # Source: Mohan, Undeland & Robbins (above): unipolar PWM doubles the ripple frequency
    res = run(bench(pwm="unipolar", volts=6.0))
    t, i = last_periods(res, n=4)
    x = i - i.mean()
    spectrum = np.abs(np.fft.rfft(x))
    freqs = np.fft.rfftfreq(len(x), d=t[1] - t[0])
    assert abs(freqs[np.argmax(spectrum)] - 2 * F_PWM) <= freqs[1]  # within one bin


@pytest.mark.parametrize("pwm", ["unipolar", "bipolar"])
def test_switching_cycle_average_matches_the_averaged_model(pwm):
    # The cycle average of the switching model's current equals the averaged model's
    # current to within 1 % of the ripple amplitude in steady state.
    # Source: state-space averaging, R. D. Middlebrook and S. Cuk, "A general unified approach
    # to modelling switching-converter power stages", IEEE PESC 1976 (exact for the cycle
    # average when the ripple is linear, i.e. L/R >> T).
    for m in (0.25, 0.75):
        sw = run(bench(pwm=pwm, volts=m * V_BUS))
        av = run(bench(pwm=pwm, volts=m * V_BUS, model="averaged", record=None))
        t, i = last_periods(sw, n=1)
        mean = np.trapezoid(i, t) / (t[-1] - t[0])
        pp = float(i.max() - i.min())
        assert abs(mean - av.summary["final_current_A"]) <= 0.01 * pp


def test_averaged_model_with_lossless_switches_is_the_ideal_bridge_on_a_stiff_bus():
    # With R_on = 0, no dead time and a stiff bus, the cycle average is m V_bus = the command.
    # Source: definition of the duty cycle (mean of the switched voltage)
    text = bench(model="averaged", volts=12.0, locked=False, record=None, duration="0.2 s")
    av = run(text)
    ideal_text = text.replace('model = "averaged"', 'model = "ideal"')
    ideal_text = ideal_text.split("[bridge]")[0]
    ideal = dcsim.simulate(dcsim.load_scenario_text(ideal_text))
    assert av.summary["final_speed_rad_s"] == pytest.approx(
        ideal.summary["final_speed_rad_s"], rel=1e-4
    )


# --------------------------------------------------------------------------------------------
# Dead time, diodes, on-resistance
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("model", ["switching", "averaged"])
@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_dead_time_voltage_error(model, sign):
    # Each leg loses t_d per period against its current: the mean armature voltage falls by
    # 2 t_d f_s V_bus against the current direction (one dead time per period in each leg
    # applies the wrong rail; derived per leg, e.g. Mohan, Undeland & Robbins, blanking-time
    # effect in the PWM inverter chapter -- section from memory). Locked rotor: the mean
    # current moves by that voltage over R.
    td = 1e-6
    volts = sign * 12.0
    record = None if model == "averaged" else "0.3125 us"
    base = run(bench(model=model, volts=volts, record=record))
    dead = run(bench(model=model, volts=volts, record=record, bridge_extra=f'dead_time = "{td} s"'))
    if model == "switching":
        t, i0 = last_periods(base, n=1)
        t1, i1 = last_periods(dead, n=1)
        mean0 = np.trapezoid(i0, t) / (t[-1] - t[0])
        mean1 = np.trapezoid(i1, t1) / (t1[-1] - t1[0])
    else:
        mean0 = base.summary["final_current_A"]
        mean1 = dead.summary["final_current_A"]
    dv = (mean1 - mean0) * 0.4  # the armature resistance
    expected = -2.0 * td * F_PWM * V_BUS * np.sign(volts)
    assert dv == pytest.approx(expected, rel=0.01)


def test_on_resistance_and_diode_losses_enter_the_account():
    # Source: conduction loss R_on i^2 per conducting switch (Joule); the account closes.
    res = run(
        bench(
            volts=12.0,
            bridge_extra='on_resistance = "20 mohm"\ndiode_drop = "0.8 V"\ndead_time = "1 us"',
        )
    )
    s = res.summary
    assert s["energy_bridge_loss_J"] > 0.0
    # steady locked current with 2 R_on in the loop (each leg through a switch) and the
    # dead-time error: I = (m V - 2 t_d f_s (V + 2 V_d)) / (R + 2 R_on (1 - 2 t_d f_s))
    # Source: averaged leg model derived in dcsim.engine.bridge_kernel (docstring)
    td, vd, ron = 1e-6, 0.8, 0.02
    delta = 2 * td * F_PWM
    i_ref = (0.5 * V_BUS - delta * V_BUS - 2 * vd * delta) / (0.4 + 2 * ron * (1 - delta))
    t, i = last_periods(res, n=1)
    assert np.trapezoid(i, t) / (t[-1] - t[0]) == pytest.approx(i_ref, rel=2e-3)


def test_all_switches_off_the_current_decays_through_the_diodes_then_stays_at_zero():
    # Over-voltage trip on a spinning motor: the bridge turns every switch off, the armature
    # current returns to the bus through the freewheeling diodes and stops at zero (the
    # back-EMF is below the bus + two diode drops): discontinuous conduction, terminals at the
    # back-EMF. Source: diode commutation in a full bridge (Mohan, Undeland & Robbins, full-
    # bridge chapter, from memory); back-EMF e = K w (any machines text).
    text = bench(
        volts=20.0,
        locked=False,
        record="2.5 us",
        duration="0.3 s",
        bridge_extra='diode_drop = "0.7 V"',
        extra='[protection]\nover_voltage = "30 V"\n',
        supply_extra="",
    )
    text += '\n[[events]]\nat = "0.2 s"\nset = { "supply.voltage" = "31 V" }\n'
    res = run(text)
    trips = res.summary["trips"]
    assert [e["kind"] for e in trips] == ["over_voltage"]
    tr = res.trace
    t = tr["time_s"]
    after = t > trips[0]["time_s"] + 0.02
    assert np.all(tr["current_A"][after] == 0.0)
    assert np.all(tr["bridge_enabled"][after] == 0.0)
    np.testing.assert_allclose(
        tr["armature_voltage_V"][after], 0.05 * tr["speed_rad_s"][after], rtol=1e-12
    )


# --------------------------------------------------------------------------------------------
# Bus: regeneration, brake chopper, trips, pre-charge, switching energy
# --------------------------------------------------------------------------------------------

FLYWHEEL = """
[simulation]
duration = "{duration}"
[motor]
resistance = "0.5 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "2e-3 kg*m^2"
[supply]
voltage = "24 V"
resistance = "0.05 ohm"
capacitance = "4.7 mF"
regenerative = false
[control]
voltage = "24 V"
[bridge]
model = "averaged"
{extra}
[[events]]
at = "0.8 s"
set = {{ "control.voltage" = "6 V" }}
"""


def test_regeneration_into_a_capacitor_without_chopper():
    # A flywheel at speed slowed by a lower command returns energy to a diode-fed bus, whose
    # capacitor takes it all: 1/2 C (V^2 - V0^2) = kinetic energy released - losses.
    # Source: capacitor energy E = C V^2 / 2 (CHECKS.md, derived) and conservation of energy.
    before = run(FLYWHEEL.format(duration="0.8 s", extra=""))
    whole = run(FLYWHEEL.format(duration="1.6 s", extra=""))
    b, w = before.summary, whole.summary
    # the source still feeds the bus until it rises above 24 V, then its diode blocks
    from_source = (w["energy_from_supply_J"] - b["energy_from_supply_J"]) - (
        w["energy_source_loss_J"] - b["energy_source_loss_J"]
    )
    assert 0.0 <= from_source < 0.01 * w["energy_from_supply_J"]
    released = b["final_speed_rad_s"] ** 2 - w["final_speed_rad_s"] ** 2
    released *= 0.5 * 2e-3
    stored_l = 0.5 * 1e-3 * (w["final_current_A"] ** 2 - b["final_current_A"] ** 2)
    losses = sum(
        w[k] - b[k] for k in ("energy_copper_loss_J", "energy_friction_J", "energy_bridge_loss_J")
    )
    v0 = before.trace["bus_voltage_V"][-1]
    v_expected = math.sqrt(v0**2 + 2.0 * (released + from_source - stored_l - losses) / 4.7e-3)
    assert whole.trace["bus_voltage_V"][-1] == pytest.approx(v_expected, rel=1e-6)
    assert w["peak_bus_voltage_V"] > 30.0  # the pump-up is real


def test_brake_chopper_holds_the_bus_inside_its_band():
    # The chopper's comparator switches at the set levels exactly (located crossings), so the
    # bus stays in [off, on] once it first reaches `on`; the resistor's energy closes the
    # account. Source: hysteresis comparator definition; conservation of energy.
    extra = '[brake]\nresistance = "4 ohm"\non_voltage = "28 V"\noff_voltage = "27 V"\n'
    res = run(FLYWHEEL.format(duration="1.6 s", extra=extra))
    s = res.summary
    assert s["peak_bus_voltage_V"] <= 28.0 * (1 + 1e-9)
    assert s["energy_to_brake_resistor_J"] > 0.0
    tr = res.trace
    on = tr["brake_current_A"] > 0
    assert on.any()
    first = np.argmax(on)  # the chopper has switched on: the bus is in the band from here
    assert tr["bus_voltage_V"][first:].min() >= 27.0 - 1e-6
    # peak power at the switch-on voltage: V_on^2 / R (CHECKS.md rule of thumb, derived)
    assert s["peak_brake_power_W"] == pytest.approx(28.0**2 / 4.0, rel=1e-6)


def test_trips_fire_at_their_levels_and_are_listed():
    # Source: comparator definition (the trip is located where the bus crosses the level).
    extra = '[protection]\nover_voltage = "29 V"\n'
    res = run(FLYWHEEL.format(duration="1.6 s", extra=extra))
    trips = res.summary["trips"]
    assert len(trips) == 1 and trips[0]["kind"] == "over_voltage"
    assert trips[0]["bus_voltage_V"] == pytest.approx(29.0, abs=1e-6)
    assert trips[0]["time_s"] > 0.8
    # after the trip the armature's inductive energy still reaches the bus through the diodes:
    # at most L i^2 / 2 on top of C V^2 / 2 at the trip (the motor then coasts, open)
    peak = res.summary["peak_bus_voltage_V"]
    i_max = res.summary["peak_current_A"]
    assert 29.0 <= peak <= math.sqrt(29.0**2 + 1e-3 * i_max**2 / 4.7e-3)


def test_under_voltage_trip_and_auto_restart():
    text = bench(
        model="averaged",
        volts=12.0,
        record=None,
        duration="0.6 s",
        extra=(
            '[protection]\nunder_voltage = "18 V"\nrestart = "auto"\nrestart_delay = "50 ms"\n'
            'restart_margin = "1 V"\n'
            "[supply_profile]\nstart = \"0.1 s\"\npoints = [['0 s', '24 V'], ['10 ms', '12 V'],"
            " ['100 ms', '12 V'], ['110 ms', '24 V']]\n"
        ),
    )
    res = run(text)
    s = res.summary
    assert [e["kind"] for e in s["trips"]] == ["under_voltage"]
    assert s["trips"][0]["bus_voltage_V"] == pytest.approx(18.0, abs=1e-3)
    # the trip is where the bus (which lags the ramping source by about R_s C = 1 ms, a
    # first-order lag) crosses 18 V: check against the recorded bus voltage
    tr = res.trace
    t, vb = tr["time_s"], tr["bus_voltage_V"]
    k = int(np.argmax(vb <= 18.0))
    t_cross = t[k - 1] + (18.0 - vb[k - 1]) * (t[k] - t[k - 1]) / (vb[k] - vb[k - 1])
    assert s["trips"][0]["time_s"] == pytest.approx(t_cross, abs=(t[1] - t[0]) * 0.05)
    assert 0.105 < s["trips"][0]["time_s"] < 0.105 + 2e-3
    # restart: at the first check (each kernel period, here a trace row) after the bus is back
    # above 19 V (trip level + margin) and the 50 ms delay has passed
    assert len(s["restarts"]) == 1
    back = t[(t > 0.2) & (vb >= 19.0)][0]
    assert back - (t[1] - t[0]) <= s["restarts"][0]["time_s"] <= back + 1e-12
    assert s["restarts"][0]["bus_voltage_V"] >= 19.0


def test_precharge_follows_the_rc_charge_and_bypasses_at_its_voltage():
    # Source: RC charging V(t) = V (1 - exp(-t / RC)) (any circuits text); bypass at
    # V_b: t = -RC ln(1 - V_b / V).
    text = bench(
        model="averaged",
        volts=12.0,
        record="0.1 ms",
        duration="0.5 s",
        extra='[precharge]\nresistance = "10 ohm"\nbypass_voltage = "22 V"\n',
    ).replace('capacitance = "1 F"', 'capacitance = "4.7 mF"')
    res = run(text)
    rc = (10.0 + 1e-3) * 4.7e-3
    t_b = -rc * math.log(1 - 22.0 / 24.0)
    assert res.summary["precharge_bypass_time_s"] == pytest.approx(t_b, rel=1e-6)
    tr = res.trace
    pre = tr["time_s"] < t_b
    np.testing.assert_allclose(
        tr["bus_voltage_V"][pre], 24.0 * (1 - np.exp(-tr["time_s"][pre] / rc)), rtol=1e-6
    )
    assert np.all(tr["current_A"][pre] == 0.0)  # the bridge waits for the bypass
    assert res.summary["energy_precharge_loss_J"] > 0.0


def test_switching_energy_per_transition():
    # Without conduction losses the bridge loss is the switching energy times the number of
    # leg transitions. Source: definition of the per-event energy.
    res = run(bench(volts=12.0, duration="5 ms", bridge_extra='switching_energy = "10 uJ"'))
    s = res.summary
    assert s["switching_events"] == pytest.approx(4 * 5e-3 * F_PWM, abs=2)
    assert s["energy_bridge_loss_J"] == pytest.approx(10e-6 * s["switching_events"], rel=1e-9)


def test_peak_current_limit_ends_the_pulse():
    # Locked-rotor start with a stall current of 60 A and a 20 A cycle-by-cycle limit: the
    # current never exceeds the limit by more than its rise over the blanking time
    # (V / L * t_blank), and the events are counted.
    # Source: definition of cycle-by-cycle limiting (e.g. Mohan, Undeland & Robbins, current-
    # mode control -- from memory); di/dt = V / L at zero current and speed.
    res = run(
        bench(
            volts=V_BUS,
            duration="20 ms",
            record="1 us",
            resistance=0.4,
            bridge_extra='peak_current_limit = "20 A"\nblanking_time = "1 us"',
        )
    )
    s = res.summary
    assert s["current_limit_events"] > 100
    assert s["peak_current_A"] <= 20.0 + V_BUS / L_ARM * 1e-6 + 1e-9
    assert s["peak_current_A"] >= 20.0 - 1e-9
    assert res.trace["current_limit_active"].max() == 1.0


# --------------------------------------------------------------------------------------------
# Battery and fuse
# --------------------------------------------------------------------------------------------

BATTERY = """
[simulation]
duration = "2 s"
[motor]
resistance = "0.3 ohm"
inductance = "1 mH"
torque_constant = "0.03 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
torque = "0.05 N*m"
[supply]
capacitance = "2.2 mF"
[control]
voltage = "12 V"
[bridge]
model = "averaged"
[battery]
open_circuit_voltage = [[0.0, "11.0 V"], [0.5, "12.2 V"], [1.0, "12.8 V"]]
resistance = "20 mohm"
capacity = "0.01 A*h"
initial_state_of_charge = 0.55
"""


def test_battery_terminal_voltage_and_state_of_charge():
    # Source: Thevenin battery model, terminal V = OCV(SOC) - I R, and coulomb counting
    # SOC(t) = SOC0 - int I dt / Q (e.g. Plett, *Battery Management Systems*, vol. 1, ch. 2 --
    # from memory).
    res = run(BATTERY)
    tr = res.trace
    soc_pts, v_pts = [0.0, 0.5, 1.0], [11.0, 12.2, 12.8]
    np.testing.assert_allclose(
        tr["source_voltage_V"], np.interp(tr["state_of_charge"], soc_pts, v_pts), rtol=1e-12
    )
    np.testing.assert_allclose(
        tr["bus_voltage_V"],
        tr["source_voltage_V"] - tr["supply_current_A"] * 0.02,
        rtol=1e-9,
        atol=1e-9,
    )
    q = 0.01 * 3600.0
    charge = np.trapezoid(tr["supply_current_A"], tr["time_s"])
    assert res.summary["final_state_of_charge"] == pytest.approx(0.55 - charge / q, abs=2e-5)
    assert res.summary["final_state_of_charge"] < 0.5  # it crossed a table breakpoint


FUSED = """
[simulation]
duration = "{duration}"
[motor]
resistance = "{r} ohm"
inductance = "1 uH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = true
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
melting_i2t = "10 A^2*s"
min_melting_current = "10.5 A"
"""


@pytest.mark.parametrize("r", [0.6, 0.9])
def test_fuse_melting_time_under_constant_current(r):
    # Source: first-order fuse heating model (CHECKS.md, derived): constant I melts at
    # t = tau ln(I^2 / (I^2 - I_min^2)), tau = I2t / I_min^2. L/R and the bus R C are 1-2 us:
    # the supply current is constant within ~10 us of the start (0.03 % of the melting time).
    res = run(FUSED.format(duration="0.2 s", r=r))
    s = res.summary
    current = 12.0 / (r + 0.02)
    tau = 10.0 / 10.5**2
    t_ref = tau * math.log(current**2 / (current**2 - 10.5**2))
    assert s["fuse_melted"] is True
    assert s["fuse_melt_time_s"] == pytest.approx(t_ref, rel=1e-3)
    assert s["peak_fuse_heat_fraction"] == 1.0
    tr = res.trace
    later = tr["time_s"] > s["fuse_melt_time_s"] + 1e-3
    assert np.all(tr["supply_current_A"][later] == 0.0)  # the supply line is open


def test_fuse_adiabatic_limit_for_short_pulses():
    # Source: CHECKS.md: for short pulses the element melts at I^2 t = melting I2t
    # (adiabatic); the first-order model's cooling makes the integral exceed it by at most a
    # fraction t_melt / tau. The pulse here is the start-up inrush of a locked rotor.
    text = FUSED.format(duration="5 ms", r=0.03).replace(
        'duration = "5 ms"', 'duration = "5 ms"\nrecord_interval = "0.1 us"'
    )
    res = run(text)
    s = res.summary
    tau = 10.0 / 10.5**2
    t_melt = s["fuse_melt_time_s"]
    assert t_melt < 0.01 * tau
    tr = res.trace
    before = tr["time_s"] <= t_melt
    i2t = np.trapezoid(tr["supply_current_A"][before] ** 2, tr["time_s"][before])
    assert 10.0 * (1 - 1e-3) <= i2t <= 10.0 * (1 + t_melt / tau + 1e-3)


def test_fuse_survives_below_its_minimum_melting_current():
    res = run(
        FUSED.format(duration="1 s", r=2.0).replace('inductance = "1 uH"', 'inductance = "1 mH"')
    )
    s = res.summary
    assert s["fuse_melted"] is False and s["fuse_melt_time_s"] is None
    # steady heat fraction (I / I_min)^2 approached as 1 - exp(-t / tau)
    # Source: first-order model above, closed form under constant current
    tau = 10.0 / 10.5**2
    frac = (12.0 / 2.02 / 10.5) ** 2 * (1 - math.exp(-1.0 / tau))
    assert s["peak_fuse_heat_fraction"] == pytest.approx(frac, rel=1e-4)


# --------------------------------------------------------------------------------------------
# Supply profiles in the kernel
# --------------------------------------------------------------------------------------------


def test_source_voltage_follows_a_points_profile_exactly():
    # Source: linear interpolation between the given points (the profile's definition).
    text = bench(
        model="averaged",
        volts=6.0,
        record="0.1 ms",
        duration="0.1 s",
        extra=(
            "[supply_profile]\nstart = \"20 ms\"\npoints = [['0 ms', '24 V'], ['5 ms', '9 V'],"
            " ['20 ms', '9 V'], ['70 ms', '20 V']]\n"
        ),
    )
    res = run(text)
    t = res.trace["time_s"]
    ref = np.interp(t, [0.0, 0.02, 0.025, 0.04, 0.09], [24.0, 24.0, 9.0, 9.0, 20.0])
    np.testing.assert_allclose(res.trace["source_voltage_V"], ref, rtol=1e-9, atol=1e-9)


# --------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------

BAD = [
    (
        bench(model="ideal", record=None) + '[brake]\nresistance = "4 ohm"\non_voltage = "30 V"\n'
        'off_voltage = "28 V"\n',
        "brake",
        "expected bridge.model = 'averaged' or 'switching'",
    ),
    (
        bench(model="averaged", record=None).replace('capacitance = "1 F"', ""),
        "supply.capacitance",
        "needs a bus capacitor",
    ),
    (
        bench(bridge_extra='dead_time = "30 us"'),
        "bridge.dead_time",
        "shorter than half the PWM period",
    ),
    (
        bench(model="averaged", record=None, bridge_extra='peak_current_limit = "10 A"'),
        "bridge.peak_current_limit",
        "expected bridge.model = 'switching'",
    ),
    (
        bench(extra='[brake]\nresistance = "4 ohm"\non_voltage = "27 V"\noff_voltage = "28 V"\n'),
        "brake.off_voltage",
        "below brake.on_voltage",
    ),
    (
        bench(extra='[precharge]\nresistance = "10 ohm"\n'),
        "precharge.bypass_time",
        "bypass_time or bypass_voltage",
    ),
    (
        bench(
            extra="[supply_profile]\nstandard = 'semi-f47'\npoints = [['0 s', '1 V'], "
            "['1 s', '2 V']]\n"
        ),  # fmt: skip
        "supply_profile",
        "exactly one of standard, points or file",
    ),
    (
        bench(bridge_extra="duty_counts = 10.5"),
        "bridge.duty_counts",
        "whole number",
    ),
    (
        BATTERY.replace("[supply]", '[supply]\nvoltage = "12 V"'),
        "supply.voltage",
        "expected no supply.voltage with a [battery]",
    ),
    (
        BATTERY.replace('[[0.0, "11.0 V"], [0.5', '[[0.6, "11.0 V"], [0.5'),
        "battery.open_circuit_voltage",
        "rise from point to point",
    ),
    (
        bench().replace('pwm = "unipolar"', 'pwm = "tripolar"'),
        "bridge.pwm",
        "one of 'unipolar', 'bipolar'",
    ),
]


@pytest.mark.parametrize(("text", "key", "fragment"), BAD)
def test_bad_power_stage_input_gets_one_clear_message(text, key, fragment):
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario_text(text, source="rig.toml")
    err = info.value
    assert err.key == key, str(err)
    assert fragment in str(err)
    assert str(err).startswith("rig.toml")


# --------------------------------------------------------------------------------------------
# Bus details and modulator settings
# --------------------------------------------------------------------------------------------


def test_supply_inductance_rings_with_the_bus_capacitor_at_the_lc_frequency():
    # The bus capacitor starts at 20 V behind a 24 V source with 10 uH of wiring inductance and
    # the bridge at zero duty (no load): it rings at f = 1 / (2 pi sqrt(L_s C)).
    # Source: any circuits text (natural frequency of a series RLC); the damping by R_s =
    # 5 mohm shifts it by sqrt(1 - zeta^2), zeta = R_s/2 sqrt(C/L_s) = 0.008: 3e-5 relative.
    text = bench(model="averaged", volts=0.0, record="0.5 us", duration="2 ms").replace(
        'resistance = "1 mohm"\ncapacitance = "1 F"',
        'resistance = "5 mohm"\ncapacitance = "100 uF"\ninductance = "10 uH"\n'
        'initial_bus_voltage = "20 V"',
    )
    sc = dcsim.load_scenario_text(text)
    res = dcsim.simulate(sc)
    assert_energy_closes(res.summary, stored_J=0.5 * 100e-6 * 24.0**2)
    t, vb = res.trace["time_s"], res.trace["bus_voltage_V"]
    x = vb - 24.0
    k = np.nonzero((x[:-1] < 0) & (x[1:] >= 0))[0]
    ups = t[k] - x[k] * (t[k + 1] - t[k]) / (x[k + 1] - x[k])  # interpolated crossings
    f_meas = (len(ups) - 1) / (ups[-1] - ups[0])
    f_ref = 1.0 / (2 * math.pi * math.sqrt(10e-6 * 100e-6))
    assert f_meas == pytest.approx(f_ref, rel=1e-4)
    # the swing: 4 V about 24 V, decaying as exp(-R_s t / (2 L_s)); the first maximum at half a
    # period (Source: series RLC step response, underdamped)
    assert vb.max() == pytest.approx(24.0 + 4.0 * math.exp(-5e-3 * 0.5 / f_ref / 2e-5), rel=1e-3)


def test_capacitor_esr_loss_is_its_current_squared_times_esr():
    # Source: Joule's law on the ESR; the account closes with the ESR term. Averaged bridge:
    # the capacitor current is smooth, so the trapezoid of the trace is accurate.
    text = bench(model="averaged", volts=12.0, duration="5 ms", record="1 us").replace(
        'capacitance = "1 F"', 'capacitance = "220 uF"\nesr = "50 mohm"'
    )
    res = run(text)
    tr = res.trace
    quad = np.trapezoid(0.05 * tr["capacitor_current_A"] ** 2, tr["time_s"])
    assert res.summary["energy_capacitor_esr_J"] == pytest.approx(quad, rel=1e-4)
    assert res.summary["energy_capacitor_esr_J"] > 0.0


def test_duty_is_quantised_to_timer_counts_and_short_pulses_are_dropped():
    # Source: a timer compare register holds whole counts: d = round(d N) / N; a modulator
    # drops pulses shorter than its minimum (definition of the setting).
    res = run(bench(volts=0.43 * V_BUS, duration="1 ms", bridge_extra="duty_counts = 10"))
    # unipolar: d_A = round(7.15)/10 = 0.7, d_B = round(2.85)/10 = 0.3 -> m = 0.4
    assert res.trace["duty"][-1] == pytest.approx(0.4, abs=1e-12)
    res = run(bench(volts=0.99 * V_BUS, duration="1 ms", bridge_extra='min_pulse = "1 us"'))
    # d_A = 0.995: its low pulse 0.25 us < 1 us -> 1; d_B = 0.005: high pulse dropped -> 0
    assert res.trace["duty"][-1] == pytest.approx(1.0, abs=1e-12)


def test_edge_aligned_ripple():
    # Edge-aligned carriers: bipolar ripple is the same as centre-aligned (one on and one off
    # interval per period either way); unipolar with both pulses starting the period gives one
    # pulse of m T per period, ripple V m (1 - m) / (L f_s) at f_s.
    # Source: Mohan, Undeland & Robbins (as above), the same volt-second argument.
    for pwm, ref in (
        ("bipolar", ripple_formula("bipolar", 0.5)),
        ("unipolar", V_BUS * 0.5 * 0.5 / (L_ARM * F_PWM)),
    ):
        res = run(bench(pwm=pwm, volts=12.0, bridge_extra='alignment = "edge"'))
        _, i = last_periods(res)
        assert float(i.max() - i.min()) == pytest.approx(ref, rel=0.03)


def test_generic_fuse_class_warns_in_the_summary():
    text = FUSED.format(duration="10 ms", r=2.0).replace(
        'melting_i2t = "10 A^2*s"\nmin_melting_current = "10.5 A"', 'generic_class = "time-lag"'
    )
    res = run(text)
    assert "maker" in res.summary["fuse_warning"]


def test_with_changes_on_power_stage_scenarios():
    # The optional parts survive a change, are re-validated, and derived data is re-resolved.
    root = Path(__file__).resolve().parents[1] / "scenarios"
    pump = dcsim.load_scenario(root / "pump_cranking_dip_fuse.toml")
    changed = pump.with_changes({"fuse.rated_current": "10 A", "supply.voltage": "13 V"})
    assert changed.fuse.rated_current == 10.0 and pump.fuse.rated_current == 7.5
    # the ISO profile starts and ends at the (new) nominal voltage
    assert changed.supply_profile.voltages_V[0] == changed.supply_profile.voltages_V[-1] == 13.0
    with pytest.raises(ScenarioError) as info:
        pump.with_changes({"brake.resistance": "5 ohm"})  # a chopper needs its levels too
    assert info.value.key == "brake.on_voltage"
    battery = dcsim.load_scenario_text(BATTERY)
    fuller = battery.with_changes({"battery.initial_state_of_charge": 0.9})
    # Source: linear interpolation of the OCV table: 12.2 + (12.8 - 12.2) * 0.4 / 0.5
    assert fuller.supply.voltage == pytest.approx(12.68)
