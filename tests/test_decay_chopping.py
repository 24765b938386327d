"""Decay modes, fixed-off-time chopping and the over-current trip of the switching bridge.

Every check holds the kernel against the closed-form exponentials of each circuit interval
(the armature and bus as a linear circuit, solved here with scipy's matrix exponential) or a
closed form derived in the test. The rigs are invented benches: a locked rotor on a stiff
24 V bus, or a free rotor spinning on it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import expm
from scipy.optimize import brentq

import dcsim
from dcsim.errors import ScenarioError
from tests.reference import assert_energy_closes

V = 24.0
R = 1.0
L = 1e-3
K = 0.05
F = 20e3
T = 1.0 / F
RS = 1e-5  # supply resistance: bus time constant R_s C = 10 us with C = 1 F
C = 1.0


def bench(*, volts=V, duration="2 ms", locked=True, inertia=1e-4, load_torque=0.0,
          record="1 us", step="1 us", bridge="", protection="", motor_extra=""):  # fmt: skip
    rec = f'record_interval = "{record}"\nstep = "{step}"' if record else ""
    prot = f"[protection]\n{protection}" if protection else ""
    return f"""
[simulation]
duration = "{duration}"
{rec}
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{inertia} kg*m^2"
{motor_extra}
[load]
locked = {"true" if locked else "false"}
torque = "{load_torque} N*m"
[supply]
voltage = "{V} V"
resistance = "{RS} ohm"
capacitance = "{C} F"
[control]
voltage = "{volts} V"
[bridge]
model = "switching"
frequency = "{F} Hz"
alignment = "edge"
{bridge}
{prot}
"""


def run(text: str):
    sc = dcsim.load_scenario_text(text)
    res = dcsim.simulate(sc)
    assert_energy_closes(res.summary, stored_J=0.5 * C * V**2)
    return res


def interval(y0, tau, *, g, r, v_drop=0.0, locked=True, inertia=1e-4, load_torque=0.0):
    """State ``[i, w, v_C]`` after ``tau`` of one linear interval of the bridge circuit:
    ``L di/dt = g v_C - r i - K w - v_drop``, ``J dw/dt = K i - T_L`` (0 when locked),
    ``C dv_C/dt = (V - v_C)/R_s - g i``. Exact: the matrix exponential of the augmented
    system (Moler & Van Loan, SIAM Review 45 (2003), method 10; scipy.linalg.expm)."""
    a = np.zeros((4, 4))
    a[0, :] = [-r / L, -K / L, g / L, -v_drop / L]
    if not locked:
        a[1, :] = [K / inertia, 0.0, 0.0, -load_torque / inertia]
    a[2, :] = [-g / C, 0.0, -1.0 / (RS * C), V / (RS * C)]
    return (expm(a * tau) @ np.array([*y0, 1.0]))[:3]


def rows_in(res, t0, t1):
    t = res.trace["time_s"]
    return np.flatnonzero((t >= t0 - 1e-12) & (t <= t1 + 1e-12))


def state(res, k):
    tr = res.trace
    return np.array([tr["current_A"][k], tr["speed_rad_s"][k], tr["bus_voltage_V"][k]])


# --------------------------------------------------------------------------------------------
# Decay modes: each interval of a period against its exponential
# --------------------------------------------------------------------------------------------

R_ON = 0.02
V_D = 0.7


@pytest.mark.parametrize("locked", [True, False])
def test_slow_decay_recirculates_with_the_armature_time_constant(locked):
    # Edge-aligned drive for d T = 20 us (A high, B low), then slow decay on the low side
    # (both low: the current recirculates through the armature and two switches, against
    # its own back-EMF), with a 1 us dead time at each of A's edges (its lower diode carries
    # the current). The period from the state at its start, interval by interval: dead time
    # (g = 0, r = R + R_on, one diode drop), drive (g = 1, r = R + 2 R_on), dead time, slow
    # decay (g = 0, r = R + 2 R_on). Both sides are exact exponentials: they agree to
    # rounding (1e-9 of 10 A).
    # Source: circuit laws of the H-bridge (e.g. Mohan, Undeland & Robbins, Power
    # Electronics, 3rd ed., full-bridge converter chapter -- from memory).
    bridge = f'decay = "slow"\non_resistance = "{R_ON} ohm"\ndiode_drop = "{V_D} V"\n'
    bridge += 'dead_time = "1 us"'
    res = run(bench(volts=0.4 * V, locked=locked, bridge=bridge, record="0.25 us",
                    step="0.25 us", duration="1 ms"))  # fmt: skip
    t_p = 1e-3 - 2 * T
    k0 = rows_in(res, t_p, t_p)[0]
    y = state(res, k0)
    kw = dict(locked=locked)
    diode = dict(g=0.0, r=R + R_ON, v_drop=V_D)
    plan = [
        (1e-6, diode),  # A low -> high: its lower diode carries the current first
        (0.4 * T - 1e-6, dict(g=1.0, r=R + 2 * R_ON)),
        (1e-6, diode),  # A high -> low
        (0.6 * T - 1e-6, dict(g=0.0, r=R + 2 * R_ON)),
    ]
    t = t_p
    checked = 0
    for length, circuit in plan:
        for k in rows_in(res, t, t + length):
            ref = interval(y, res.trace["time_s"][k] - t, **circuit, **kw)
            assert res.trace["current_A"][k] == pytest.approx(ref[0], abs=1e-9)
            checked += 1
        y = interval(y, length, **circuit, **kw)
        t += length
    assert checked >= 200
    # slow decay states only: both low (leg code 1) in the off-time, drive (A 2, B 1)
    states = set(res.trace["bridge_state"][rows_in(res, t_p + 0.5 * T, t_p + 0.9 * T)])
    assert states == {4.0}  # 3 * LEG_LOW + LEG_LOW


def test_fast_decay_returns_the_current_to_the_bus_then_stops_at_zero():
    # A free rotor spinning (E below V, settled): after the drive (d = 0.3), fast
    # decay through the diodes: the armature sees -(V + 2 V_d), the current falls against
    # the bus and the back-EMF to zero and stays there (discontinuous conduction: the
    # diodes block while |E| < V + 2 V_d), the terminals showing the back-EMF.
    # Source: as above; the zero-current interval from the diode's blocking condition.
    bridge = f'decay = "fast"\ndiode_drop = "{V_D} V"'
    res = run(bench(volts=0.3 * V, locked=False, inertia=1e-5, bridge=bridge,
                    record="0.25 us", step="0.25 us", duration="20 ms"))  # fmt: skip
    t_p = 20e-3 - 2 * T
    k_off = rows_in(res, t_p + 0.3 * T, t_p + 0.3 * T)[0]
    y = state(res, k_off)
    assert y[0] > 0.0
    circuit = dict(g=-1.0, r=R, v_drop=2 * V_D, locked=False, inertia=1e-5)
    t_zero = brentq(lambda s: interval(y, s, **circuit)[0], 0.0, 0.4 * T)
    falling = rows_in(res, t_p + 0.3 * T, t_p + 0.3 * T + t_zero)
    for k in falling:
        ref = interval(y, res.trace["time_s"][k] - (t_p + 0.3 * T), **circuit)
        assert res.trace["current_A"][k] == pytest.approx(ref[0], abs=1e-9)
    zero = rows_in(res, t_p + 0.3 * T + t_zero + 1e-7, t_p + T - 1e-7)
    assert len(falling) > 5 and len(zero) > 5
    assert np.all(res.trace["current_A"][zero] == 0.0)
    e = K * res.trace["speed_rad_s"][zero]
    assert np.allclose(res.trace["armature_voltage_V"][zero], e, rtol=1e-12)


# --------------------------------------------------------------------------------------------
# Speed against duty: linear in slow decay, bent by discontinuous current in fast decay
# --------------------------------------------------------------------------------------------


def _dcm_speed(d, load_torque, v=V, r=R, ind=2e-4):
    """Settled speed in fast decay (diodes, no drops) with discontinuous current.

    Per period with a constant back-EMF E: the current rises from 0 for d T under
    (V - E - R i), falls under (-V - E - R i) to zero at t_z and stays there. Its mean is
    (1/T)[a (dT - tau (1 - e^{-dT/tau})) + tau i1 - b t_z] with a = (V - E)/R,
    b = (V + E)/R, i1 = a (1 - e^{-dT/tau}), t_z = tau ln((i1 + b)/b); the shaft settles where
    K * mean(i) = T_L. Solved for E by brentq; returns (E/K, dT + t_z).
    Source: integration of the two first-order intervals (e.g. Mohan, Undeland & Robbins,
    dc-motor drives, discontinuous conduction -- from memory).
    """
    tau = ind / r

    def mean_current(e):
        a, b = (v - e) / r, (v + e) / r
        i1 = a * (1.0 - math.exp(-d * T / tau))
        tz = tau * math.log((i1 + b) / b)
        return (a * (d * T - tau * (1.0 - math.exp(-d * T / tau))) + tau * i1 - b * tz) / T, tz

    e = brentq(lambda e: mean_current(e)[0] - load_torque / K, 0.0, v * 0.999)
    return e / K, d * T + mean_current(e)[1]


def test_speed_against_duty_linear_in_slow_decay_bent_in_fast_decay():
    from dcsim.studies.duty_curve import speed_duty_curve

    # Light load 5 mN*m (0.1 A mean), L = 0.2 mH so the current is discontinuous in fast
    # decay. In discontinuous conduction the mean current hardly depends on the speed
    # (dI/dE = -0.015 A/V at d = 0.3, from the closed form below), so the shaft settles with
    # J / (K^2 |dI/dE|) = 26 ms for J = 1e-6 kg m^2: the mean over the second half of a
    # 0.5 s run carries e^-9.6 of the start. The mean is exact for a periodic steady state
    # (mean L di/dt = mean J dw/dt = 0); the reference holds the back-EMF constant within a
    # period, while the speed swings by K I T / J ~ 0.08 % (the pulse sees a speed below
    # the mean by about half of that): 4e-4 at most, with the bus droop (R_s I ~ 1e-6 V),
    # inside the tolerance 1e-3.
    tl = 0.005
    text = bench(volts=0.0, locked=False, inertia=1e-6, load_torque=tl, record=None,
                 duration="0.5 s", bridge="")  # fmt: skip
    text = text.replace(f'inductance = "{L} H"', 'inductance = "0.2 mH"')
    sc = dcsim.load_scenario_text(text)
    duties = [0.3, 0.6]
    curve = speed_duty_curve(sc, duties, decays=("slow", "fast"))
    for j, d in enumerate(duties):
        # slow decay: the armature's mean voltage is d V (continuous current, the current
        # may reverse through the low-side switches): K w = d V - R T_L / K.
        # Source: average output voltage of the PWM bridge in continuous conduction (Mohan,
        # Undeland & Robbins, dc-dc converter chapter -- from memory).
        w_slow = (d * V - R * tl / K) / K
        assert curve.speed_rad_s[0, j] == pytest.approx(w_slow, rel=1e-3)
        w_fast, t_end = _dcm_speed(d, tl, ind=2e-4)
        assert t_end < T  # the reference's premise: the current stops within the period
        assert curve.speed_rad_s[1, j] == pytest.approx(w_fast, rel=1e-3)
        # the bend: fast decay is far from the continuous-current line (2d - 1) V / K
        assert curve.speed_rad_s[1, j] > ((2 * d - 1) * V - R * tl / K) / K + 50.0


# --------------------------------------------------------------------------------------------
# Fixed-off-time chopping: peak, valley and period against the closed form
# --------------------------------------------------------------------------------------------

R_SENSE = 0.05
I_TRIP = 10.0
T_OFF = 20e-6
T_CD = 0.5e-6


def chopper(decay="slow", location="in-line", extra=""):
    return (
        f'decay = "{decay}"\ncurrent_regulation = "fixed-off-time"\n'
        f'sense_resistance = "{R_SENSE} ohm"\nsense_threshold = "{I_TRIP * R_SENSE} V"\n'
        f'sense_location = "{location}"\noff_time = "{T_OFF} s"\n'
        f'comparator_delay = "{T_CD} s"\n{extra}'
    )


def _chop_closed_form(decay, fraction=0.0, location="in-line", t_on=None):
    """Periodic steady state of fixed-off-time chopping on a locked rotor (no drops).

    Drive: L di/dt = V - R_d i (R_d = R + R_sense), i.e. i -> A = V/R_d with tau_d = L/R_d;
    the trip at I_trip, the switches off T_cd later: I_p = A - (A - I_trip) e^{-T_cd/tau_d}.
    Off-time: fast decay (diodes) L di/dt = -V - R_f i; slow decay L di/dt = -R_s i (the sense
    resistor in the path in line, not on the low side while the current recirculates).
    Rise from the valley to I_trip: t_r = tau_d ln((A - I_v)/(A - I_trip)). With a forced
    on-time t_on (minimum on-time or blanking): I_p = A (1 - a) + I_v a, a = e^{-t_on/tau_d}.
    Source: solution of the first-order RL intervals (e.g. Mohan, Undeland & Robbins,
    current-regulated drives -- from memory); derived here.
    """
    rd = R + R_SENSE
    a_inf = V / rd
    tau_d = L / rd
    r_slow = R + (R_SENSE if location == "in-line" else 0.0)
    r_fast = R + R_SENSE
    frac = {"slow": 0.0, "fast": 1.0, "mixed": fraction}[decay]

    def valley(ip):
        tf = frac * T_OFF
        i1 = -V / r_fast + (ip + V / r_fast) * math.exp(-tf * r_fast / L)
        return i1 * math.exp(-(T_OFF - tf) * r_slow / L)

    if t_on is None:
        ip = a_inf - (a_inf - I_TRIP) * math.exp(-T_CD / tau_d)
        iv = valley(ip)
        t_r = tau_d * math.log((a_inf - iv) / (a_inf - I_TRIP))
        return ip, iv, t_r + T_CD + T_OFF
    a = math.exp(-t_on / tau_d)
    # valley() is affine in ip: solve ip = A (1 - a) + valley(ip) a
    v0 = valley(0.0)
    v1 = valley(1.0) - v0
    ip = (a_inf * (1 - a) + v0 * a) / (1 - v1 * a)
    return ip, valley(ip), t_on + T_OFF


@pytest.mark.parametrize(
    ("decay", "location", "extra", "fraction"),
    [
        ("slow", "in-line", "", 0.0),
        ("fast", "in-line", "", 1.0),
        ("mixed", "in-line", "fast_decay_fraction = 0.3", 0.3),
        ("slow", "low-side", "", 0.0),
    ],
)
def test_fixed_off_time_chopping_against_the_closed_form(decay, location, extra, fraction):
    # PWM input at 100 % (d = 1): the comparator alone regulates. Tolerance 1e-5: the bus
    # node moves by R_s x (the supply current's swing) ~ 1e-4 V within a chop (4e-6 of V),
    # and the chop figures depend on V less than proportionally.
    res = run(bench(bridge=chopper(decay, location, extra), record=None, duration="3 ms"))
    s = res.summary
    ip, iv, period = _chop_closed_form(decay, fraction, location)
    assert s["current_limit_events"] > 20
    assert s["last_chop_peak_A"] == pytest.approx(ip, rel=1e-5)
    assert s["last_chop_valley_A"] == pytest.approx(iv, rel=1e-5)
    assert s["last_chop_period_s"] == pytest.approx(period, rel=1e-5)
    # the comparator delay makes the peak overshoot the trip level
    assert ip - I_TRIP > 1e-3
    chops = res.chops
    assert chops.shape[0] == s["current_limit_events"]
    assert np.all(np.diff(chops[:, 0]) > T_OFF)


@pytest.mark.parametrize("which", ["min_on_time", "blanking_time"])
def test_minimum_on_time_and_blanking_stretch_the_pulse(which):
    # A forced on-time of 30 us (longer than the natural rise, ~14 us): every pulse lasts
    # 30 us (minimum on-time) or 30 us + the comparator delay (blanking: the comparator is
    # ignored for 30 us, finds the current above the level and trips at once).
    # The peak converges on its fixed point by e^{-(t_on + t_off)/tau} = 0.95 a chop: 20 ms
    # (390 chops) leave 1e-9 of the start.
    t_forced = 30e-6
    res = run(bench(bridge=chopper(extra=f'{which} = "{t_forced} s"'), record=None,
                    duration="20 ms"))  # fmt: skip
    t_on = t_forced if which == "min_on_time" else t_forced + T_CD
    ip, iv, period = _chop_closed_form("slow", t_on=t_on)
    s = res.summary
    assert s["last_chop_peak_A"] == pytest.approx(ip, rel=1e-5)
    assert s["last_chop_valley_A"] == pytest.approx(iv, rel=1e-5)
    assert s["last_chop_period_s"] == pytest.approx(period, rel=1e-5)


def test_cycle_by_cycle_limit_overshoots_by_the_comparator_delay():
    # Cycle-by-cycle (the pulse ends for the rest of the period) with a 0.5 us comparator
    # delay: the first pulse from rest crosses 10 A, the switches open T_cd later:
    # peak = A - (A - I_trip) e^{-T_cd/tau}, the drive-path exponential (closed form above).
    bridge = f'pwm = "bipolar"\npeak_current_limit = "{I_TRIP} A"\ncomparator_delay = "{T_CD} s"'
    res = run(bench(bridge=bridge, record=None, duration="3 ms"))
    a_inf, tau = V / R, L / R
    ip = a_inf - (a_inf - I_TRIP) * math.exp(-T_CD / tau)
    assert res.summary["chop_peak_max_A"] == pytest.approx(ip, rel=1e-5)
    assert res.summary["peak_current_A"] == pytest.approx(ip, rel=1e-5)
    # every decay ends with its period
    ends = res.chops[:, 2]
    ends = ends[~np.isnan(ends)]
    assert np.allclose(ends / T, np.round(ends / T), atol=1e-6)


# --------------------------------------------------------------------------------------------
# Over-current protection: deglitch, latch, retry, and what the sense resistor sees
# --------------------------------------------------------------------------------------------


def _crossing(level, r=R):
    """Time the locked-rotor current V/r (1 - e^{-t r/L}) reaches ``level`` (closed form)."""
    return -L / r * math.log(1.0 - level * r / V)


def test_over_current_trips_after_the_deglitch_time_and_latches():
    # Source: the locked-rotor RL step response (any circuits text); the trip rule itself is
    # the definition of a deglitch filter (common practice (no source)).
    prot = 'over_current = "10 A"\nover_current_deglitch = "5 us"'
    res = run(bench(bridge='decay = "slow"', protection=prot, record=None, duration="5 ms"))
    trips = res.summary["trips"]
    assert len(trips) == 1 and trips[0]["kind"] == "over_current"
    assert trips[0]["time_s"] == pytest.approx(_crossing(10.0) + 5e-6, rel=1e-5)
    assert res.summary["restarts"] == []
    assert res.summary["final_current_A"] == 0.0  # latched off: the diodes emptied it


def test_over_current_retries_after_its_retry_time():
    # Retry checked at each PWM period start: the restart is the first period start at or
    # after trip + retry time; the current has returned to zero through the diodes by then
    # (L i / V ~ 0.4 ms < 2 ms), so the second trip repeats the first's timing.
    prot = (
        'over_current = "10 A"\nover_current_deglitch = "5 us"\n'
        'over_current_action = "retry"\nover_current_retry_time = "2 ms"'
    )
    res = run(bench(bridge='decay = "slow"', protection=prot, record=None, duration="5 ms"))
    trips, restarts = res.summary["trips"], res.summary["restarts"]
    t1 = _crossing(10.0) + 5e-6
    t_restart = math.ceil((t1 + 2e-3) / T - 1e-9) * T
    assert restarts[0]["time_s"] == pytest.approx(t_restart, rel=1e-9)
    assert trips[1]["time_s"] == pytest.approx(t_restart + t1, rel=1e-5)


def test_over_current_deglitch_ignores_the_chopping_overshoot():
    # The chopper's peak overshoots 10 A by the comparator delay; an over-current level just
    # above the trip level sees the current above it for a short, computable time: from the
    # crossing of I_ocp in the rise (drive exponential) to the decay start, then back below
    # in slow decay. A deglitch 20 % longer never trips; 20 % shorter trips.
    rd = R + R_SENSE
    a_inf, tau_d = V / rd, L / rd
    ip = a_inf - (a_inf - I_TRIP) * math.exp(-T_CD / tau_d)
    i_ocp = I_TRIP + 0.5 * (ip - I_TRIP)
    t_up = tau_d * math.log((a_inf - I_TRIP) / (a_inf - i_ocp))  # from the trip to I_ocp
    t_down = L / rd * math.log(ip / i_ocp)  # slow decay (in-line sense in the path)
    above = (T_CD - t_up) + t_down
    for factor, trips_expected in ((1.2, 0), (0.8, 1)):
        prot = f'over_current = "{i_ocp} A"\nover_current_deglitch = "{factor * above} s"'
        res = run(bench(bridge=chopper(), protection=prot, record=None, duration="1 ms"))
        assert len(res.summary["trips"]) == trips_expected, factor


def test_low_side_sense_misses_the_recirculating_current():
    # One sense resistor in the bridge's low-side return sees the bus current g i: the
    # current recirculating through both low-side switches in slow decay does not pass it
    # (Kirchhoff's current law at the common return). So an over-current level of 11 A
    # under a 12 A mean current, with a deglitch longer than the 25 us pulses, trips with
    # the sensor in line with the armature and never with it on the low side.
    # Source: circuit topology (common practice (no source)).
    prot = 'over_current = "11 A"\nover_current_deglitch = "30 us"'
    for location, n_trips in (("in-line", 1), ("low-side", 0)):
        bridge = f'decay = "slow"\nsense_resistance = "10 mohm"\nsense_location = "{location}"'
        res = run(bench(volts=0.5 * V, bridge=bridge, protection=prot, duration="10 ms",
                        record="1 us"))  # fmt: skip
        assert len(res.summary["trips"]) == n_trips, location
        if location == "low-side":
            tr = res.trace
            recirculating = tr["bridge_state"] == 4.0
            driving = tr["bridge_state"] == 7.0
            assert recirculating.sum() > 100 and driving.sum() > 100
            assert np.all(tr["sensed_current_A"][recirculating] == 0.0)
            assert np.allclose(tr["sensed_current_A"][driving], tr["current_A"][driving])
            # the sense loss is R_sense i^2 while it carries the current (the drive only)
            assert res.summary["energy_current_sense_J"] > 0.0


# --------------------------------------------------------------------------------------------
# Messages
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("bridge", "key"),
    [
        ('decay = "slow"\npwm = "bipolar"', "bridge.pwm"),
        ("fast_decay_fraction = 0.3", "bridge.fast_decay_fraction"),
        ('decay = "mixed"\nfast_decay_fraction = 1.5', "bridge.fast_decay_fraction"),
        ('sense_threshold = "0.5 V"', "bridge.sense_resistance"),
        (
            'peak_current_limit = "5 A"\nsense_resistance = "0.1 ohm"\nsense_threshold = "0.5 V"',
            "bridge.sense_threshold",
        ),
        ('peak_current_limit = "5 A"\ncurrent_regulation = "fixed-off-time"', "bridge.off_time"),
        ('peak_current_limit = "5 A"\noff_time = "20 us"', "bridge.off_time"),
        ('comparator_delay = "1 us"', "bridge.comparator_delay"),
        ('peak_current_limit = "5 A"\ncomparator_delay = "1 ms"', "bridge.comparator_delay"),
    ],
)
def test_bad_driver_keys_give_one_message(bridge, key):
    with pytest.raises(ScenarioError) as err:
        dcsim.load_scenario_text(bench(bridge=bridge))
    assert key in str(err.value)
    assert "\n" not in str(err.value)


def test_decay_needs_the_switching_model():
    text = bench(bridge='decay = "fast"').replace('model = "switching"', 'model = "averaged"')
    with pytest.raises(ScenarioError, match="bridge.decay"):
        dcsim.load_scenario_text(text)


# --------------------------------------------------------------------------------------------
# Commands
# --------------------------------------------------------------------------------------------


def test_duty_curve_command_writes_its_files(tmp_path, capsys):
    from dcsim.cli import main

    path = tmp_path / "rig.toml"
    path.write_text(bench(volts=12.0, locked=False, inertia=1e-6, load_torque=0.005,
                          record=None, duration="20 ms"))  # fmt: skip
    out = tmp_path / "out"
    assert main(["duty-curve", str(path), "--out", str(out), "--points", "2"]) == 0
    text = capsys.readouterr().out
    assert "settled speed against drive duty" in text and "Caution" in text
    rows = (out / "duty_curve.csv").read_text().splitlines()
    assert rows[0] == "decay,duty,speed_rad_s,current_A,ripple_A"
    assert len(rows) == 1 + 3 * 2
    assert (out / "duty_curve.png").stat().st_size > 10_000
    # an averaged-bridge scenario: one line naming the key, exit 2
    path.write_text(bench(duration="20 ms").replace('"switching"', '"averaged"'))
    assert main(["duty-curve", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert "bridge.model" in err and "\n" not in err


def test_run_writes_the_comparator_log(tmp_path):
    from dcsim.cli import main

    path = tmp_path / "chop.toml"
    path.write_text(bench(bridge=chopper(), record=None, duration="1 ms"))
    assert main(["run", str(path), "--out", str(tmp_path / "o")]) == 0
    lines = (tmp_path / "o" / "chops.csv").read_text().splitlines()
    assert lines[0] == "decay_start_s,current_at_start_A,decay_end_s,current_at_end_A"
    res = dcsim.simulate(dcsim.load_scenario_text(path.read_text()))
    assert len(lines) - 1 == res.chops.shape[0] == res.summary["current_limit_events"]
    first = [float(v) for v in lines[1].split(",")]
    assert first == pytest.approx(res.chops[0].tolist(), rel=1e-15)
