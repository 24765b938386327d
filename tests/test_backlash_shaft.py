"""The compliant shaft with backlash of the machine-library kernel: the dead zone, a two-mass
transient against scipy, the energy account across contacts, a hoist on a compliant shaft,
and the peak trackers at events and controller samples.

Setting (invented): the drive of a canal lock-gate winch -- a brushed permanent-magnet motor
coupled to its rope drum through a flexible coupling with play (and, for the hoist, through a
gearbox lifting the counterweight of a footbridge).

Model (dcsim.engine.machine_kernel), ideal bridge applying the command ``V``::

    L di/dt     = V - R i - K w_1
    J_1 dw_1/dt = K i - T_s - B w_1
    J_2 dw_2/dt = T_s - T_L
    T_s = k (d - b/2) + c (w_1 - w_2)  for d > b/2,   k (d + b/2) + c (w_1 - w_2)  for d < -b/2,
    T_s = 0                            for |d| <= b/2,  d = theta_1 - theta_2

Source: the dead-zone model of backlash (M. Nordin and P.-O. Gutman, "Controlling mechanical
systems with backlash -- a survey", Automatica 38 (2002) 1633-1649, sec. 2) -- common practice;
the two-mass equations are Newton's second law for each inertia.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

import dcsim
from tests.reference import ENERGY_CLOSURE, ENERGY_TERMS, MACHINE_ENERGY_TERMS

R, L, K, J1, J2, KS, V, B = 1.0, 1e-3, 0.05, 1e-4, 3e-4, 4.0, 5.0, 1e-5
HALF = 0.01  # half the play [rad]: backlash b = 0.02 rad (1.15 deg)
JR = 1.0 / J1 + 1.0 / J2  # relative acceleration per unit shaft torque [1/(kg*m^2)]

ACCOUNT = ENERGY_TERMS + MACHINE_ENERGY_TERMS
"""Where the machine kernel's supplied energy goes (dcsim.engine.machine_run)."""


def _text(*, v=V, tl=0.0, c=0.0, b=2 * HALF, duration=0.05, rec="10 us", step=None,
          supply="", events="", vs=V, control=None) -> str:  # fmt: skip
    step_line = f'step = "{step}"' if step else ""
    control = control or f'voltage = "{v} V"'
    return f"""
[simulation]
duration = "{duration} s"
record_interval = "{rec}"
{step_line}
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J1} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
[supply]
voltage = "{vs} V"
{supply}
[control]
{control}
[load]
inertia = "{J2} kg*m^2"
torque = "{tl} N*m"
[shaft]
stiffness = "{KS} N*m/rad"
damping = "{c} N*m*s/rad"
backlash = "{b} rad"
{events}
"""


def _run(**kw):
    return dcsim.simulate(dcsim.load_scenario_text(_text(**kw), source="lock_gate.toml"))


def _reference(c, tl, half, t_end, t_eval, v=V):
    """The model above integrated by scipy (DOP853, rtol 1e-13), one contact regime at a time,
    each contact and separation instant located by solve_ivp's event finder (so the dead
    zone's switching is exact to the event tolerance). State ``i, w1, th1, w2, th2, E_c``
    with ``E_c`` the energy dissipated in the shaft's damping. Returns the states at
    ``t_eval`` (an increasing array inside ``[0, t_end]``) and the switching instants."""

    def rhs(mode):
        def f(t, y):
            i, w1, th1, w2, th2, _ = y
            ts, pc = 0.0, 0.0
            if mode != 0 or half == 0.0:
                ts = KS * (th1 - th2 - mode * half) + c * (w1 - w2)
                pc = c * (w1 - w2) ** 2
            return [(v - R * i - K * w1) / L, (K * i - ts - B * w1) / J1, w1, (ts - tl) / J2,
                    w2, pc]  # fmt: skip

        return f

    def edge(sign, direction):
        def e(t, y):
            return y[2] - y[4] - sign * half

        e.terminal, e.direction = True, direction
        return e

    events = {0: [edge(1, 1), edge(-1, -1)], 1: [edge(1, -1)], -1: [edge(-1, 1)]}
    if half == 0.0:
        events = {0: []}
    t, y, mode = 0.0, np.zeros(6), 0
    out, switches = [], []
    while True:
        sel = t_eval[(t_eval >= t) & (t_eval <= t_end)]
        sol = solve_ivp(rhs(mode), (t, t_end), y, method="DOP853", rtol=1e-13, atol=1e-15,
                        events=events[mode], t_eval=sel)  # fmt: skip
        assert sol.success
        out.append(sol.y)
        if sol.status != 1:
            break
        j = next(n for n, te in enumerate(sol.t_events) if len(te))
        t, y = sol.t_events[j][0], sol.y_events[j][0]
        switches.append((t, y[1] - y[3]))
        mode = (1 if j == 0 else -1) if mode == 0 else 0
        t_eval = t_eval[t_eval > t]
    return np.concatenate(out, axis=1), switches


# ------------------------------------------------------------------------------------------
# 1. the dead zone
# ------------------------------------------------------------------------------------------


def test_load_torque_alone_crosses_the_gap_as_a_free_mass():
    tl = 0.05
    res = _run(v=0.0, tl=tl)
    tr = res.trace
    t, d = tr["time_s"], tr["position_rad"] - tr["load_position_rad"]
    gap = np.abs(d) <= HALF
    first = int(np.argmax(~gap))  # first row in contact
    assert 0 < first < len(t) - 1
    before = slice(0, first)
    # Source: derived -- inside the play nothing couples the masses: the unpowered motor
    # (i = 0, w_1 = 0, V = 0) stays exactly at rest, no shaft torque, and the load mass is
    # accelerated by T_L alone: w_2 = -T_L t / J_2, theta_2 = -T_L t^2 / (2 J_2). RK4 is
    # exact for a quadratic, so the trace agrees to rounding.
    for name in ("current_A", "speed_rad_s", "position_rad", "shaft_torque_Nm",
                 "shaft_twist_rad"):  # fmt: skip
        assert np.all(tr[name][before] == 0.0), name
    a = tl / J2
    assert np.allclose(tr["load_speed_rad_s"][before], -a * t[before], rtol=1e-12, atol=1e-15)
    assert np.allclose(tr["load_position_rad"][before], -0.5 * a * t[before] ** 2,
                       rtol=1e-12, atol=1e-18)  # fmt: skip
    # Source: derived -- the gap closes when d = a t^2 / 2 reaches b / 2 (from rest at the
    # middle of the play): t* = sqrt(b / a) with b = 2 HALF; the first row in contact is the
    # first row after t* (rows 10 us apart)
    t_star = math.sqrt(2 * HALF / a)
    assert t[first - 1] < t_star <= t[first]
    assert tr["shaft_torque_Nm"][first] > 0.0  # the load now hangs on the shaft


def test_motor_crosses_the_gap_as_an_unloaded_motor():
    res = _run()
    tr = res.trace
    t, d = tr["time_s"], tr["position_rad"] - tr["load_position_rad"]
    first = int(np.argmax(np.abs(d) > HALF))
    assert 0 < first < len(t) - 1
    before = slice(0, first)
    # Source: derived -- inside the play the free load (T_L = 0) gets no torque: it stays
    # exactly at rest, the shaft passes exactly nothing
    for name in ("load_speed_rad_s", "load_position_rad", "shaft_torque_Nm", "shaft_twist_rad"):
        assert np.all(tr[name][before] == 0.0), name
    # Source: the motor alone (inertia J_1) is linear, L di = V - R i - K w, J_1 dw = K i - B w;
    # its exact response from rest is the matrix exponential of the augmented matrix
    # (scipy.linalg.expm; Van Loan, IEEE TAC 23 (1978) 395, the forcing as an extra state)
    a = np.array([[-R / L, -K / L, 0.0, V / L], [K / J1, -B / J1, 0.0, 0.0],
                  [0.0, 1.0, 0.0, 0.0], [0.0, 0.0, 0.0, 0.0]])  # fmt: skip

    def motor(time):
        return scipy.linalg.expm(a * time) @ np.array([0.0, 0.0, 0.0, 1.0])

    ref = np.array([motor(x) for x in t[:first]])
    # RK4 at h = 10 us on tau = L/R = 1 ms: global error ~ (t/tau) (h/tau)^4 / 120, about
    # 4e-10 of the peak over the ~4 tau before contact; 1e-8 bounds it
    for col, name in ((0, "current_A"), (1, "speed_rad_s"), (2, "position_rad")):
        x = tr[name][before]
        assert np.max(np.abs(x - ref[:, col])) <= 1e-8 * np.max(np.abs(ref[:, col])), name
    # Source: derived -- the gap closes when theta_1(t*) = b/2 (the load at rest at 0)
    t_star = brentq(lambda x: motor(x)[2] - HALF, t[first - 1] / 2, 2 * t[first])
    assert t[first - 1] < t_star <= t[first]
    assert tr["shaft_torque_Nm"][first] > 0.0


def test_shaft_torque_is_the_dead_zone_law_pointwise():
    c = 2e-3
    rev = '[[events]]\nat = "40 ms"\nset = { "control.voltage" = "-5 V" }\n'
    res = _run(c=c, duration=0.1, events=rev)
    tr = res.trace
    th1, th2 = tr["position_rad"], tr["load_position_rad"]
    d = th1 - th2
    ts, tw = tr["shaft_torque_Nm"], tr["shaft_twist_rad"]
    inside = np.abs(d) <= HALF
    pos, neg = d > HALF, d < -HALF
    # the run has both contacts, the forward drive and, after the reversal, the backward one
    assert pos.sum() > 100 and neg.sum() > 100 and inside.sum() > 100
    # Source: the dead-zone law (module docstring), pointwise from the trace's own columns;
    # rounding: d is a difference of angles up to |theta| (eps |theta| in d)
    rnd = 4e-16 * (np.abs(th1) + np.abs(th2))
    assert np.all(ts[inside] == 0.0) and np.all(tw[inside] == 0.0)
    for side, sign in ((pos, 1.0), (neg, -1.0)):
        twist = d[side] - sign * HALF
        assert np.all(np.abs(tw[side] - twist) <= rnd[side])
        law = KS * twist + c * (tr["speed_rad_s"][side] - tr["load_speed_rad_s"][side])
        assert np.all(np.abs(ts[side] - law) <= KS * rnd[side] + 1e-15 * np.abs(law))
    # Source: derived -- with T_L = 0 the load coasts at constant speed between contacts:
    # within every run of consecutive rows inside the play the load speed does not change
    w2 = tr["load_speed_rad_s"]
    runs = 0
    k = 0
    while k < len(d):
        if not inside[k]:
            k += 1
            continue
        m = k
        while m + 1 < len(d) and inside[m + 1]:
            m += 1
        if m > k:
            assert np.all(w2[k : m + 1] == w2[k]), (tr["time_s"][k], tr["time_s"][m])
            runs += 1
        k = m + 1
    assert runs >= 2  # the start and the crossing after the reversal


# ------------------------------------------------------------------------------------------
# 2. two-mass transient against scipy
# ------------------------------------------------------------------------------------------


def test_two_mass_transient_matches_scipy():
    c, tl = 2e-3, 0.05
    errors = {}
    for step in (None, "40 us", "20 us"):
        res = _run(c=c, tl=tl, b=0.0, duration=0.1, rec="80 us", step=step)
        tr = res.trace
        t = tr["time_s"]
        # Source: scipy.integrate.solve_ivp, DOP853 at rtol 1e-13 (Hairer, Norsett & Wanner,
        # Solving ODEs I, sec. II.10), of the same equations written out here (no play)
        y, switches = _reference(c, tl, 0.0, t[-1], t.copy())
        assert not switches
        err = 0.0
        for col, name in ((0, "current_A"), (1, "speed_rad_s"), (3, "load_speed_rad_s")):
            err = max(err, np.max(np.abs(tr[name] - y[col])) / np.max(np.abs(y[col])))
        twist = y[2] - y[4]
        err = max(err, np.max(np.abs(tr["shaft_twist_rad"] - twist)) / np.max(np.abs(twist)))
        errors[step] = (res.summary["substep_s"], err)
    # the default sub-step: the step grid's (80 us rows, one step each), within a tenth of
    # the fastest time constant tau = L/R = 1 ms (dcsim.engine.machine_run)
    h_default, err_default = errors[None]
    tau = L / R
    assert h_default <= tau / 10
    # RK4 on a decaying mode: the local error of a step is (h/tau)^5/120 of the mode
    # (the Taylor remainder of e^z after the z^4 term), damped as it goes, so the global error
    # stays near (h/tau)^4/120 of its amplitude (3.4e-7 at h/tau = 0.08; observed 1.3e-7)
    assert err_default <= (h_default / tau) ** 4 / 120
    # fourth order: halving the sub-step divides the error by 2^4 = 16 (12 allows for the
    # next term of the error expansion; observed 16.4); the reference's own error, ~1e-12,
    # is far below both
    assert errors["40 us"][1] <= err_default / 12
    assert errors["20 us"][1] <= errors["40 us"][1] / 12


# ------------------------------------------------------------------------------------------
# 3. accuracy and the energy account across contact instants
# ------------------------------------------------------------------------------------------

STEPS_US = (40.0, 20.0, 12.5, 10.0, 5.0)


@pytest.mark.parametrize("c", [2e-3, 0.0])
def test_contact_instants_first_order_with_damping_second_without(c):
    """The contact instants are not located: a sub-step that contains one is integrated with
    the regime of its stages. Derived bound: with damping the relative acceleration jumps by
    ``c |w_1 - w_2| (1/J_1 + 1/J_2)`` at the instant; misplacing the jump by at most one
    sub-step ``h`` errs the relative speed by at most that times ``h`` per contact (first
    order). Without damping the torque is continuous and its rate jumps by ``k |w_1 - w_2|
    (1/J_1 + 1/J_2)``: at most that times ``h^2 / 2`` per contact (second order). The errors
    move with the phase of the contact in its sub-step, so they are bounded, not fitted."""
    for step in STEPS_US:
        res = _run(c=c, duration=0.05, rec="1 ms", step=f"{step} us")
        tr = res.trace
        y, switches = _reference(c, 0.0, HALF, tr["time_s"][-1], tr["time_s"].copy())
        assert len(switches) >= 1
        jumps = sum(abs(dw) for _, dw in switches)
        h = step * 1e-6
        err = np.max(np.abs((tr["speed_rad_s"] - tr["load_speed_rad_s"]) - (y[1] - y[3])))
        first_order = c * jumps * JR * h
        second_order = KS * jumps * JR * h * h / 2
        if c > 0.0:
            assert err <= first_order, (step, err, first_order)
            if step <= 10.0:  # and it is not second order (observed 8x above it and more)
                assert err > second_order, (step, err, second_order)
        else:
            assert err <= second_order, (step, err, second_order)


@pytest.mark.parametrize("c", [2e-3, 0.0])
def test_energy_account_across_contacts(c):
    for step in (40.0, 20.0, 10.0):
        res = _run(c=c, duration=0.05, rec="1 ms", step=f"{step} us")
        s = res.summary
        terms = [s[k] for k in ACCOUNT]
        # Source: conservation of energy (first law), recomputed from the terms. The power
        # integrands pass through the same RK4 stages as the states, so the account closes
        # to the quadrature's consistency with the state update even where the trajectory
        # is only first order (above): the project's closure target ENERGY_CLOSURE of the
        # throughput (tests/reference.py; observed ~1e-9 here)
        residual = s["energy_from_supply_J"] - math.fsum(terms)
        assert abs(s["energy_balance_residual_J"] - residual) <= 1e-12 * s["energy_from_supply_J"]
        assert abs(residual) <= ENERGY_CLOSURE * s["energy_from_supply_J"]
        y, switches = _reference(c, 0.0, HALF, res.trace["time_s"][-1],
                                 res.trace["time_s"].copy())  # fmt: skip
        if c == 0.0:
            assert s["energy_shaft_damping_J"] == 0.0
            continue
        # Source: the located reference's damping loss, integral of c (w_1 - w_2)^2 over the
        # contact. Derived bound, first order: the misplaced jump of the damping power
        # c dw^2 at each contact (<= c dw^2 h), plus the relative-speed error e (bounded
        # above) acting on 2 c |dw| over the contact time T: 2 c |dw|_max e T
        e_ref = y[5][-1]
        h = step * 1e-6
        dw_max = np.max(np.abs(y[1] - y[3]))
        e_bound = c * sum(abs(dw) for _, dw in switches) * JR * h
        bound = sum(c * dw**2 * h for _, dw in switches) + 2 * c * dw_max * e_bound * 0.05
        assert abs(s["energy_shaft_damping_J"] - e_ref) <= bound, (step, e_ref, bound)
        assert bound < 1e-2 * e_ref  # the bound is a check, not a blanket


# ------------------------------------------------------------------------------------------
# 4. a hoist on a compliant shaft
# ------------------------------------------------------------------------------------------

RH, LH, KH, JMH, BH = 1.5, 2e-3, 0.05, 2e-5, 1e-6  # motor [ohm, H, N*m/A, kg*m^2, N*m*s/rad]
NG, EF, EB, JG = 25.0, 0.7, 0.4, 3e-6  # gear: ratio, efficiencies, inertia [kg*m^2]
MH, RD, G = 8.0, 0.03, 9.80665  # counterweight [kg], drum radius [m], standard gravity
KH_S, CH_S, BH_S = 0.5, 1.2e-3, 0.05  # shaft at the motor side [N*m/rad, N*m*s/rad, rad]
TLH = MH * G * RD  # torque at the drum [N*m]; Source: weight m g on a lever r (statics)


def _hoist(v: float, duration: float = 1.0):
    text = f"""
[simulation]
duration = "{duration} s"
[motor]
resistance = {RH}
inductance = {LH}
torque_constant = {KH}
inertia = {JMH}
viscous_friction = {BH}
[supply]
voltage = 24
[control]
voltage = {v}
[gear]
ratio = {NG}
forward_efficiency = {EF}
back_efficiency = {EB}
inertia = {JG}
[hoist]
mass = {MH}
drum_radius = {RD}
[shaft]
stiffness = {KH_S}
damping = {CH_S}
backlash = {BH_S}
"""
    return dcsim.simulate(dcsim.load_scenario_text(text, source="footbridge.toml"))


@pytest.mark.parametrize("v", [12.0, -2.0])
def test_hoist_settles_to_the_static_twist(v):
    """The gear is on the motor side of the shaft (its inertia in J_1; dcsim.scenario.schema
    Shaft), so the shaft is the gear's output shaft referred to the motor: it carries the
    drum torque m g r through the ratio, T_L / N, and the gear's loss (forward efficiency
    lifting, back efficiency lowering) is taken at the motor side."""
    res = _hoist(v)
    tr, s = res.trace, res.summary
    # settled: the slowest mode is the electromechanical one, J R / K^2 = 21 ms, and the
    # shaft's (zeta = c / (2 sqrt(k J_eq)) = 0.3 at 255 rad/s): 1 s is > 45 of either
    # Source: derived, statics of the load-side mass at constant speed: T_s = T_L / N with
    # no relative speed, so k (d - b/2) = T_L / N: twist T_L / (N k), angle d = b/2 + that
    t_shaft = TLH / NG
    assert tr["shaft_torque_Nm"][-1] == pytest.approx(t_shaft, rel=1e-9)
    assert tr["shaft_twist_rad"][-1] == pytest.approx(t_shaft / KH_S, rel=1e-9)
    d = tr["position_rad"][-1] - tr["load_position_rad"][-1]
    assert d == pytest.approx(BH_S / 2 + t_shaft / KH_S, rel=1e-9)
    assert s["final_load_speed_rad_s"] == pytest.approx(s["final_speed_rad_s"], rel=1e-9)
    # Source: steady state of the DC machine through the gear (as tests/test_gear_hoist.py):
    # K i = T_L / (N eta_f) + B w lifting, K i = eta_b T_L / N + B w lowering; V = R i + K w
    t_m = TLH / (NG * EF) if v > 0 else EB * TLH / NG
    i_ref, w_ref = np.linalg.solve(np.array([[KH, -BH], [RH, KH]]), np.array([t_m, v]))
    assert s["final_speed_rad_s"] == pytest.approx(w_ref, rel=1e-9)
    assert s["final_current_A"] == pytest.approx(i_ref, rel=1e-9)
    # Source: conservation of energy (first law), recomputed from the terms
    terms = [s[k] for k in ACCOUNT]
    largest = max(abs(x) for x in [s["energy_from_supply_J"], *terms])
    assert abs(s["energy_from_supply_J"] - math.fsum(terms)) <= ENERGY_CLOSURE * largest
    theta2 = tr["load_position_rad"][-1]
    # Source: potential energy m g h of the counterweight, h = r theta_2 / N (the load-side
    # angle referred to the motor): the load's work on the shaft
    assert s["energy_to_load_J"] == pytest.approx(MH * G * RD * theta2 / NG, rel=1e-9)
    if v < 0:
        # lowering: the counterweight drives the machine as a generator, energy returns to
        # the supply. Source: power balance at the generator point, eta_b T_L |w| / N =
        # -V i + R i^2 + B w^2 (conservation of energy), checked on the settled state
        assert s["energy_from_supply_J"] < 0.0
        assert i_ref > 0.0 and w_ref < 0.0
        returned = -v * i_ref
        assert EB * TLH * abs(w_ref) / NG == pytest.approx(
            returned + RH * i_ref**2 + BH * w_ref**2, rel=1e-12
        )
        assert tr["supply_current_A"][-1] == pytest.approx(-returned / 24.0, rel=1e-9)


# ------------------------------------------------------------------------------------------
# 5. peak trackers at events and controller samples (regression)
# ------------------------------------------------------------------------------------------

_STEP_UP = '[[events]]\nat = "20 ms"\nset = { "supply.voltage" = "24 V" }\n'


@pytest.mark.parametrize("duration", [0.04, 0.02])
def test_peak_bus_voltage_right_after_a_supply_event(duration):
    """A supply stepped from 12 V to 24 V at 20 ms with 0.5 ohm source resistance and the
    bridge fully on (command 24 V). Source: Ohm's law, v_bus = V_s - R_s i, with the current
    continuous at the event and rising after it (more voltage), so the bus voltage's
    largest value is the instant right after the step: 24 V - R_s i(20 ms). The kernel used
    to update its peaks at sub-step ends only and missed it (and missed it entirely when the
    event ends the run)."""
    supply = 'resistance = "0.5 ohm"'
    res = _run(v=24.0, vs=12.0, tl=0.05, c=1e-3, duration=duration, supply=supply,
               events=_STEP_UP)  # fmt: skip
    tr, s = res.trace, res.summary
    k = int(np.argmin(np.abs(tr["time_s"] - 0.02)))
    assert tr["time_s"][k] == pytest.approx(0.02, abs=1e-12)
    i_event = tr["supply_current_A"][k]
    assert i_event > 0.0
    v_peak = 24.0 - 0.5 * i_event
    assert tr["bus_voltage_V"][k] == pytest.approx(v_peak, rel=1e-14)
    assert s["peak_bus_voltage_V"] == pytest.approx(v_peak, rel=1e-14)
    assert s["peak_bus_voltage_V"] >= tr["bus_voltage_V"].max()


def test_peak_trackers_bound_every_recorded_value_under_a_current_loop():
    """A sampled current loop steps the command at every sample, and with source resistance
    the bus voltage jumps with it. The trackers see every state the trace records (sub-step
    ends, events, samples), so they bound the trace -- derived (a maximum over a superset).
    Before the fix the lowest bus voltage here came right after a sample and was missed."""
    ctl = ('mode = "current"\n[control.current]\nkp = "2 V/A"\nki = "3000 V/(A*s)"\n'
           'sample_time = "100 us"\nlimit = "12 V"\n[control.reference]\nkind = "step"\n'
           'value = "3 A"\nat = "0 s"')  # fmt: skip
    res = _run(tl=0.05, c=1e-3, duration=0.06, rec="100 us", vs=12.0, control=ctl,
               supply='resistance = "0.5 ohm"')  # fmt: skip
    tr, s = res.trace, res.summary
    assert s["min_bus_voltage_V"] <= tr["bus_voltage_V"].min()
    assert s["peak_bus_voltage_V"] >= tr["bus_voltage_V"].max()
    assert s["peak_current_A"] >= np.max(np.abs(tr["current_A"]))
    assert s["peak_speed_rad_s"] >= np.max(np.abs(tr["speed_rad_s"]))
    assert tr["bus_voltage_V"].min() < 12.0 - 1e-3  # the loop drew current through R_s
