"""Brush contact drop, brush friction and iron losses, with their energy keys.

Setting (invented): the motor of a small coolant pump on a lathe's chip conveyor, a brushed
permanent-magnet motor with carbon brushes, run from a 12 V bus.

Model (dcsim.plant.machine, dcsim.plant.mechanics)::

    L di/dt = v - 2 V_b sgn(i) - R i - K w          (held at i = 0 while |v - K w| < 2 V_b)
    J dw/dt = K i - (T_c + T_brush + T_h) sgn(w) - (B + B_e) w

Source: A. E. Fitzgerald, C. Kingsley Jr., S. D. Umans, *Electric Machinery*, 6th ed. (2003),
sec. 1.5 (core loss: hysteresis loss proportional to frequency, eddy-current loss to its
square, after Steinmetz) and ch. 7 (the brush contact drop of a DC machine, about 1 V a
brush, nearly constant) -- sections from memory.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference import assert_energy_closes

from dcsim import load_scenario_text, simulate
from dcsim.errors import ScenarioError

R, L, K, J = 1.0, 1e-3, 0.05, 2e-5  # [ohm, H, N*m/A, kg*m^2]
B, TC = 1e-6, 2e-3  # bearing viscous [N*m*s/rad] and Coulomb [N*m] friction
T_BR, T_H, B_E = 3e-3, 1.5e-3, 4e-6  # brush friction, hysteresis drag, eddy drag
V_B = 0.8  # contact drop per brush [V]
VS, RS = 12.0, 0.01  # bus source [V, ohm]
T_DRY = TC + T_BR + T_H  # every constant-magnitude drag [N*m]
B_ALL = B + B_E  # every drag proportional to speed [N*m*s/rad]
TAU_M = J * R / K**2  # mechanical time constant, 8 ms


def _text(
    volts: float,
    duration: float,
    *,
    drop: float = V_B,
    bridge: str = "averaged",
    locked: bool = False,
    extra: str = "",
    events: str = "",
    record: str = "100 us",
) -> str:
    bus = f'capacitance = "1 mF"\nresistance = "{RS} ohm"\n' if bridge != "ideal" else ""
    return f"""
[simulation]
duration = "{duration!r} s"
record_interval = "{record}"
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{J} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
coulomb_friction = "{TC} N*m"
brush_drop = "{drop} V"
brush_friction = "{T_BR} N*m"
hysteresis_loss_torque = "{T_H} N*m"
eddy_loss_coefficient = "{B_E} N*m*s/rad"
[load]
locked = {"true" if locked else "false"}
[supply]
voltage = "{VS} V"
{bus}[bridge]
model = "{bridge}"
[control]
mode = "voltage"
voltage = "{volts} V"
{extra}{events}"""


BUS_ENERGY_J = 0.5 * 1e-3 * VS**2  # the bus capacitor's initial energy [J]


def _run(text: str):
    sc = load_scenario_text(text, source="pump.toml")
    res = simulate(sc)
    # Source: conservation of energy (first law)
    assert_energy_closes(res.summary, stored_J=BUS_ENERGY_J if sc.supply.capacitance else 0.0)
    return res


def _loop(bridge: str, volts: float) -> tuple[float, float]:
    """Armature EMF and loop resistance in steady state: the ideal bridge applies ``volts``
    (no source resistance here); the averaged one, see :func:`_averaged_loop`."""
    return (volts, R) if bridge == "ideal" else _averaged_loop(volts)


def _averaged_loop(volts: float) -> tuple[float, float]:
    """Armature EMF and loop resistance of the averaged bridge at duty ``m = v / V_s``: the
    bus node is ``V_s - R_s m i`` in steady state, so the armature sees ``m V_s - m^2 R_s i``.
    Source: state-space averaging (R. D. Middlebrook, S. Cuk, IEEE PESC 1976) -- from memory."""
    m = volts / VS
    return m * VS, R + m * m * RS


# --------------------------------------------------------------------------------------------
# Keys and bad input
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "key", ["brush_drop", "brush_friction", "hysteresis_loss_torque", "eddy_loss_coefficient"]
)
def test_negative_values_are_refused(key):
    # Source: project rule (one ScenarioError naming the file and the key)
    text = _text(6.0, 0.01)
    lines = [ln for ln in text.splitlines() if ln.startswith(f"{key} =")]
    assert len(lines) == 1
    value, unit = lines[0].split('"')[1].split(" ", 1)
    text = text.replace(lines[0], f'{key} = "-{value} {unit}"')
    with pytest.raises(ScenarioError) as err:
        load_scenario_text(text, source="pump.toml")
    msg = str(err.value)
    assert msg.startswith(f"pump.toml: motor.{key}: expected ")
    assert "found" in msg


def test_the_new_keys_default_to_zero():
    text = "\n".join(
        ln
        for ln in _text(6.0, 0.01).splitlines()
        if not ln.startswith(("brush_", "hysteresis_", "eddy_"))
    )
    m = load_scenario_text(text).motor
    assert (m.brush_drop, m.brush_friction, m.hysteresis_loss_torque) == (0.0, 0.0, 0.0)
    assert m.eddy_loss_coefficient == 0.0


# --------------------------------------------------------------------------------------------
# Brush contact drop: the ideal kernel and the bridge kernel (averaged model)
# --------------------------------------------------------------------------------------------

BRIDGES = ["ideal", "averaged"]


@pytest.mark.parametrize("bridge", BRIDGES)
@pytest.mark.parametrize("v", [6.0, -6.0])
def test_locked_rotor_current_with_the_brush_drop(bridge, v):
    # Source: Fitzgerald & Kingsley (brush drop, from memory) with Ohm's law on the locked
    # armature: i = (v - 2 V_b sgn(i)) / R, with the averaged bridge's source term.
    res = _run(_text(v, 0.03, locked=True, bridge=bridge))  # 30 electrical time constants
    emf, r_loop = _loop(bridge, v)
    i_ss = (emf - 2 * V_B * math.copysign(1.0, v)) / r_loop
    assert abs(i_ss - (v - 2 * V_B * math.copysign(1.0, v)) / R) < 0.01 * abs(i_ss)
    # tolerance: the transient left after 30 L/R is e^-30 ~ 1e-13; rounding of the kernel
    assert res.trace["current_A"][-1] == pytest.approx(i_ss, rel=1e-9)
    assert res.summary["energy_brush_drop_J"] > 0.0  # 2 V_b |i| >= 0 either way


@pytest.mark.parametrize("bridge", BRIDGES)
@pytest.mark.parametrize("locked", [True, False])
def test_the_brushes_block_below_twice_their_drop(locked, bridge):
    # Source: the brush pair as two diodes (Fitzgerald & Kingsley, ch. 7, from memory): with
    # |v - K w| < 2 V_b no current flows, so it stays exactly zero from rest.
    text = _text(1.2, 0.01, locked=locked, bridge=bridge)  # 1.2 V < 2 V_b = 1.6 V
    if bridge == "ideal":
        res = simulate(load_scenario_text(text))  # nothing flows: the account is all zeros
    else:
        res = _run(text)  # the bus capacitor's rounding-level exchange with the source
    assert np.all(res.trace["current_A"] == 0.0)
    assert np.all(res.trace["speed_rad_s"] == 0.0)
    # no current: every loss of the motor is exactly zero
    for key in (
        "energy_brush_drop_J",
        "energy_copper_loss_J",
        "energy_friction_J",
        "energy_brush_friction_J",
        "energy_iron_loss_J",
    ):
        assert res.summary[key] == 0.0, key


def _steady_speed(emf: float, r_loop: float) -> tuple[float, float]:
    """Steady speed and current of the loaded-by-drag machine: ``emf - 2 V_b = r i + K w``
    with ``K i = T_dry + B_all w`` (the two steady-state equations, linear in w)."""
    w = (emf - r_loop * T_DRY / K) / (K + r_loop * B_ALL / K)
    return w, (T_DRY + B_ALL * w) / K


@pytest.mark.parametrize("bridge", BRIDGES)
def test_free_running_speed_with_the_brush_drop(bridge):
    # Source: the DC machine's steady-state equations (Fitzgerald & Kingsley, ch. 7, from
    # memory) with the brush drop on the armature voltage.
    v = 6.0
    res = _run(_text(v, 0.25, bridge=bridge))  # 30 mechanical time constants
    emf, r_loop = _loop(bridge, v)
    w_ss, i_ss = _steady_speed(emf - 2 * V_B, r_loop)
    # tolerance: e^-30 of transient left; rounding
    assert res.trace["speed_rad_s"][-1] == pytest.approx(w_ss, rel=1e-9)
    assert res.trace["current_A"][-1] == pytest.approx(i_ss, rel=1e-9)


@pytest.mark.parametrize("bridge", BRIDGES)
def test_energy_keys_over_a_steady_window(bridge):
    # Source: closed-form integrals of constant powers over a window of steady running:
    # 2 V_b i (brush drop), T_brush w (brush friction), T_h w + B_e w^2 (iron loss, Steinmetz's
    # split, Fitzgerald & Kingsley sec. 1.5 from memory), T_c w + B w^2 (bearings).
    v = 6.0
    t1, t2 = 0.25, 0.35
    a = _run(_text(v, t1, bridge=bridge)).summary
    b = _run(_text(v, t2, bridge=bridge)).summary
    emf, r_loop = _loop(bridge, v)
    w, i = _steady_speed(emf - 2 * V_B, r_loop)
    dt = t2 - t1
    expect = {
        "energy_brush_drop_J": 2 * V_B * i * dt,
        "energy_brush_friction_J": T_BR * w * dt,
        "energy_iron_loss_J": (T_H * w + B_E * w * w) * dt,
        "energy_friction_J": (TC * w + B * w * w) * dt,
    }
    for key, value in expect.items():
        # tolerance: the accumulators' Simpson sums differ by rounding of the totals (~1e-12
        # of the run's total) and the transient left at t1 (e^-30)
        assert b[key] - a[key] == pytest.approx(value, rel=1e-8), key


# --------------------------------------------------------------------------------------------
# Brush friction and iron losses without the drop: both kernels
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("bridge", ["ideal", "averaged"])
def test_no_load_speed_and_current(bridge):
    # Source: steady state of the DC machine (Fitzgerald & Kingsley ch. 7, from memory):
    # V = R i + K w, K i = T_c + T_brush + T_h + (B + B_e) w.
    v = 6.0
    res = _run(_text(v, 0.25, bridge=bridge, drop=0.0))
    emf, r_loop = _loop(bridge, v)
    w_ss, i_ss = _steady_speed(emf, r_loop)
    # tolerance: e^-30 of transient left; rounding
    assert res.trace["speed_rad_s"][-1] == pytest.approx(w_ss, rel=1e-9)
    assert res.trace["current_A"][-1] == pytest.approx(i_ss, rel=1e-9)
    # the trace's friction column holds every drag torque
    assert res.trace["friction_torque_Nm"][-1] == pytest.approx(K * i_ss, rel=1e-9)


@pytest.mark.parametrize("bridge", ["ideal", "averaged"])
def test_energy_keys_steady_without_the_drop(bridge):
    # Source: closed-form integrals of constant powers over a steady window (as above)
    v = 6.0
    t1, t2 = 0.25, 0.3
    a = _run(_text(v, t1, bridge=bridge, drop=0.0)).summary
    b = _run(_text(v, t2, bridge=bridge, drop=0.0)).summary
    emf, r_loop = _loop(bridge, v)
    w, i = _steady_speed(emf, r_loop)
    dt = t2 - t1
    assert b["energy_brush_drop_J"] == 0.0
    # tolerance: rounding of the totals and e^-30 of transient at t1
    assert b["energy_brush_friction_J"] - a["energy_brush_friction_J"] == pytest.approx(
        T_BR * w * dt, rel=1e-8
    )
    assert b["energy_iron_loss_J"] - a["energy_iron_loss_J"] == pytest.approx(
        (T_H * w + B_E * w * w) * dt, rel=1e-8
    )


def _coast(w0: float, t):
    """Speed of a free shaft under J dw/dt = -(T + B w), T = T_dry, B = B_all, from w0.

    Source: linear first-order ODE with constant forcing (integrating factor; e.g. Boyce &
    DiPrima, *Elementary Differential Equations*, sec. 2.1 -- from memory):
    ``w = (w0 + T/B) e^{-B t/J} - T/B``, zero at ``t_s = (J/B) ln(1 + B w0 / T)``.
    """
    c = T_DRY / B_ALL
    return (w0 + c) * np.exp(-B_ALL * np.asarray(t) / J) - c


@pytest.mark.parametrize("bridge", BRIDGES)
def test_run_down_time_with_the_brushes_blocking(bridge):
    # Run up at 2.4 V, then command 0 V at t_off: the back-EMF (about 0.6 V) stays below
    # 2 V_b = 1.6 V, so the brushes block, the current is held at zero and the shaft coasts
    # against the drag torques alone.
    t_off, duration = 0.25, 0.4
    events = f'[[events]]\nat = "{t_off} s"\nset = {{ "control.voltage" = "0 V" }}\n'
    res = _run(_text(2.4, duration, events=events, bridge=bridge))
    t = res.trace["time_s"]
    i = res.trace["current_A"]
    w = res.trace["speed_rad_s"]
    after = np.nonzero((t > t_off) & (i == 0.0))[0]
    assert after.size > 0
    a = after[0]  # first row with the current held at zero
    assert np.all(i[a:] == 0.0)
    w_a, t_a = w[a], t[a]
    assert 0.0 < K * w_a < 2 * V_B
    turning = w[a:] > 0.0
    t_stop = t_a + J / B_ALL * math.log(1.0 + B_ALL * w_a / T_DRY)
    # the shaft stops (and sticks) within the row interval that holds t_stop
    last = a + np.nonzero(turning)[0][-1]
    assert t[last] < t_stop <= t[last + 1]
    assert np.all(w[last + 1 :] == 0.0)
    # the speed on the way, exact up to rounding (tolerance: the kernel's step is exact for
    # the linear part; 1e-9 of the initial speed covers the rounding)
    assert np.max(np.abs(w[a : last + 1] - _coast(w_a, t[a : last + 1] - t_a))) < 1e-9 * w_a
    # the coast's angle from J (0 - w_a) = -T t_s - B theta (integrating the equation)
    theta = (J * w_a - T_DRY * (t_stop - t_a)) / B_ALL
    pos = res.trace["position_rad"]
    assert pos[-1] - pos[a] == pytest.approx(theta, rel=1e-9)

    # the energy keys over the coast against their closed forms: brush friction T_br theta,
    # iron T_h theta + B_e W2, bearings T_c theta + B W2, with the integral of w^2 from the
    # energy balance J w_a^2 / 2 = T theta + B_all W2
    w2 = (0.5 * J * w_a**2 - T_DRY * theta) / B_ALL
    head = _run(_text(2.4, float(t_a), events=events, bridge=bridge)).summary
    tail = res.summary
    expect = {
        "energy_brush_friction_J": T_BR * theta,
        "energy_iron_loss_J": T_H * theta + B_E * w2,
        "energy_friction_J": TC * theta + B * w2,
        "energy_brush_drop_J": 0.0,
    }
    for key, value in expect.items():
        # tolerance: both runs take the same steps up to t_a; rounding of the totals
        assert tail[key] - head[key] == pytest.approx(value, rel=1e-7, abs=1e-12), key


# --------------------------------------------------------------------------------------------
# Iron loss in the thermal model
# --------------------------------------------------------------------------------------------

R_WH, R_HA, C_W, C_H = 2.0, 3.0, 0.02, 0.05  # [K/W, K/W, J/K, J/K]


@pytest.mark.parametrize("two_node", [True, False])
def test_iron_loss_heats_the_housing(two_node):
    # Source: steady state of the lumped thermal network (Incropera & DeWitt, Fundamentals of
    # Heat and Mass Transfer, 6th ed., sec. 3.1 thermal circuits): every watt leaves through
    # R_ha, so the housing rises (P_cu + P_fe) R_ha; the winding rises further by P_cu R_wh
    # only, because the iron loss enters the housing node. One node: (P_cu + P_fe) R_th.
    if two_node:
        net = (
            f'winding_to_housing = "{R_WH} K/W"\nhousing_to_ambient = "{R_HA} K/W"\n'
            f'winding_capacity = "{C_W} J/K"\nhousing_capacity = "{C_H} J/K"\n'
        )
        g1, g2 = 1 / R_WH, 1 / R_HA
        a = np.array([[-g1 / C_W, g1 / C_W], [g1 / C_H, -(g1 + g2) / C_H]])
        slowest = float(np.max(-1.0 / np.linalg.eigvals(a).real))
    else:
        net = f'resistance = "{R_HA} K/W"\ntime_constant = "0.2 s"\n'
        slowest = 0.2
    duration = 25.0 * slowest  # e^-25 of the thermal transient left
    thermal = f'[thermal]\n{net}ambient = "25 degC"\ncoupled = false\n'
    v = 9.0
    # rows every 100 us resolve the start (L/R = 1 ms): the thermal model scales the rows'
    # losses to the kernel's exact energies, so a trace that missed the inrush would scale
    # the steady loss too
    res = _run(_text(v, duration, bridge="ideal", drop=0.0, extra=thermal))
    w, i = _steady_speed(v, R)
    p_cu = R * i * i
    p_fe = T_H * w + B_E * w * w
    assert p_fe > 5 * p_cu  # the iron loss dominates, so the node it enters shows
    ambient = 298.15
    winding = res.summary["final_winding_temperature_K"] - ambient
    # tolerance: e^-25 of the thermal transient; the rows' losses are exact in steady state
    if two_node:
        housing = res.summary["final_housing_temperature_K"] - ambient
        assert housing == pytest.approx((p_cu + p_fe) * R_HA, rel=1e-7)
        assert winding == pytest.approx((p_cu + p_fe) * R_HA + p_cu * R_WH, rel=1e-7)
    else:
        assert winding == pytest.approx((p_cu + p_fe) * R_HA, rel=1e-7)


def test_locked_rotor_mean_current_switching_bridge():
    # The switching bridge (unipolar PWM at 20 kHz) puts the same drop in series: over a PWM
    # period in steady state the mean of L di/dt is zero, so R <i> = m <v_bus>_on - 2 V_b.
    # Source: volt-second balance on the inductor (N. Mohan, T. Undeland, W. Robbins, Power
    # Electronics, 3rd ed., ch. 7 -- from memory), with the averaged bus term of
    # _averaged_loop. Tolerance, set before the run: the bus ripple under a 10 mF capacitor,
    # I D T / C = 4.4 A x 25 us / 10 mF = 11 mV, moves the mean armature voltage by at most
    # m x 11 mV = 5.5 mV, i.e. 5.5 mA = 0.13 % of the current: 0.2 %.
    v = 6.0
    text = _text(v, 0.06, locked=True, bridge="switching", record="2.5 us")
    text = text.replace('capacitance = "1 mF"', 'capacitance = "10 mF"')
    sc = load_scenario_text(text)
    res = simulate(sc)
    assert_energy_closes(res.summary, stored_J=0.5 * 10e-3 * VS**2)
    t = res.trace["time_s"]
    i = res.trace["current_A"]
    last = t >= t[-1] - 20 * 50e-6 - 1e-12  # the last 20 PWM periods, whole
    mean = np.trapezoid(i[last], t[last]) / (t[last][-1] - t[last][0])
    emf, r_loop = _averaged_loop(v)
    i_ss = (emf - 2 * V_B) / r_loop
    assert mean == pytest.approx(i_ss, rel=2e-3)
    assert np.all(i[last] > 0.0)  # continuous conduction: the drop acts all the time


@pytest.mark.parametrize("bridge", BRIDGES)
def test_brush_friction_stays_apart_when_an_event_changes_coulomb_friction(bridge):
    # Source: the work of a constant-magnitude torque on a shaft that turns one way only is
    # that torque times the angle turned (W = T theta, e.g. Meriam & Kraige, Dynamics, work
    # of a couple -- from memory). Tolerance: Simpson's rule on the speed at h = tau/10 errs by
    # about (h/tau)^4/180 ~ 1e-7 at most (dcsim.engine.assemble); the angle is exact.
    events = '[[events]]\nat = "0.1 s"\nset = { "motor.coulomb_friction" = "6 mN*m" }\n'
    res = _run(_text(6.0, 0.2, bridge=bridge, drop=0.0, events=events))
    w = res.trace["speed_rad_s"]
    assert np.all(w >= 0.0)
    theta = res.trace["position_rad"][-1]
    assert res.summary["energy_brush_friction_J"] == pytest.approx(T_BR * theta, rel=1e-7)
    # the bearings' share follows the event: T_c theta(0.1 s) + T_c' (theta - theta(0.1 s))
    # + B W2, with W2 = int w^2 dt taken from the iron account (T_h theta + B_e W2)
    t = res.trace["time_s"]
    theta_ev = res.trace["position_rad"][int(np.argmin(np.abs(t - 0.1)))]
    w2 = (res.summary["energy_iron_loss_J"] - T_H * theta) / B_E
    bearings = TC * theta_ev + 6e-3 * (theta - theta_ev) + B * w2
    assert res.summary["energy_friction_J"] == pytest.approx(bearings, rel=1e-7)
