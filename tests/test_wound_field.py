"""Wound-field machines of the machine library: series, shunt, separately excited (with field
weakening) and compound, against closed forms, a scipy reference and the energy account.

Setting (invented): the drives of a harbour's bulk-cargo quay -- a series-wound traverse motor
of a grab crane on a 48 V battery, a shunt-wound belt-conveyor motor and a separately excited
capstan motor on a 220 V quay bus, and a compound-wound ship-loader boom motor.

Model (dcsim.engine.machine_kernel), ideal bridge applying the command ``V``::

    L_arm di_a/dt = V - R_arm i_a - K(m) w        K(m) = Phi(m): M m, or the magnetisation table
    L_f   di_f/dt = v_f - R_f i_f                  shunt / compound: v_f = V; separate: V_f
    J     dw/dt   = K(m) i_a - T_L - B w
    m = i_a (series), i_f (shunt, separate), i_f +- n i_a (compound, long shunt)

Source: S. J. Chapman, *Electric Machinery Fundamentals*, 4th ed., ch. 9 (DC motors: the
equivalent circuits of the four connections, ``E_A = K phi w``, ``T = K phi I_A``, the
magnetisation curve) -- from memory; A. E. Fitzgerald, C. Kingsley Jr., S. D. Umans, *Electric
Machinery*, 6th ed., ch. 7 (``e = L_af i_f w``; field weakening above base speed) -- from
memory. The steady states below are derived from these equations with all derivatives zero.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference import assert_energy_closes
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from dcsim import load_scenario_text, simulate
from dcsim.errors import ScenarioError, SimulationError

RPM = math.pi / 30.0  # rad/s per rpm

# Armature of every machine here [ohm, H, kg*m^2, N*m*s/rad]
RA, LA, J, B = 0.5, 5e-3, 0.05, 0.01

# Series traverse motor on a 48 V battery
VS_SER = 48.0
RF_SER, LF_SER, M_SER = 0.3, 10e-3, 30e-3  # series winding [ohm, H] and L_af [H]
J_SER, TL_SER = 0.02, 20.0
R_SER = RA + RF_SER  # the one loop resistance of the series machine

# 220 V quay bus: shunt conveyor, separately excited capstan, compound boom
VS = 220.0
RF_SH, LF_SH = 110.0, 11.0  # shunt field [ohm, H]: 2 A at 220 V, L_f / R_f = 0.1 s
M_SH = 1.0  # [H] -> K = 2 V*s/rad at 2 A
RF_SEP, LF_SEP, VF_SEP, M_SEP = 100.0, 5.0, 100.0, 1.2  # separate field: 1 A, K = 1.2
RSE, LSE = 0.1, 2e-3  # compound series winding [ohm, H]
# series turns ratio [field A per armature A]: the cumulative boom motor 0.02; the differential
# one 0.002 -- with 0.02 its starting inrush (V / (R_a + R_se) = 367 A, 7.3 field amps against
# a shunt field still building from 0 A) reverses the flux and it runs away backwards (test
# below), the differential machine's known starting hazard (Chapman ch. 9, from memory)
NSE = {"cumulative": 0.02, "differential": 0.002}
TL = 20.0

# Saturating magnetisation tables (back-EMF at 1000 rpm); invented, rounded numbers
SPEED_MAG = 1000.0 * RPM
TABLE_SER = [(0.0, 0.0), (20.0, 30.0), (40.0, 45.0), (60.0, 52.0)]
TABLE_SH = [(0.0, 0.0), (1.0, 150.0), (2.0, 250.0), (3.0, 300.0)]


def table_flux(m: float, table) -> float:
    """K = E(m) / w_mag by linear interpolation in the table (within its range), the
    definition of the magnetisation curve (Chapman ch. 9, from memory) -- written here again,
    independently of dcsim.plant.field."""
    i = [p[0] for p in table]
    e = [p[1] for p in table]
    assert 0.0 <= abs(m) <= i[-1]
    return math.copysign(float(np.interp(abs(m), i, e)) / SPEED_MAG, m)


def _table_toml(table) -> str:
    rows = ", ".join(f'["{a!r} A", "{e!r} V"]' for a, e in table)
    return f'magnetisation = [{rows}]\nmagnetisation_speed = "1000 rpm"\n'


def _text(
    kind: str,
    *,
    duration: float,
    volts: float = VS,
    load: float = TL,
    inertia: float = J,
    friction: float = B,
    mutual: float | None = None,
    table=None,
    locked: bool = False,
    record: str | None = None,
    extra_motor: str = "",
    control: str | None = None,
    tail: str = "",
    field_inductance: float | None = None,
) -> str:
    """TOML text of one of the quay's machines (SI numbers written with their units)."""
    motor = f'kind = "{kind}"\nresistance = "{RA} ohm"\ninductance = "{LA} H"\n'
    motor += f'inertia = "{inertia} kg*m^2"\nviscous_friction = "{friction} N*m*s/rad"\n'
    if kind == "series":
        motor += f'field_resistance = "{RF_SER} ohm"\nfield_inductance = "{LF_SER} H"\n'
        m_default = M_SER
    elif kind == "separately_excited":
        lf = LF_SEP if field_inductance is None else field_inductance
        motor += f'field_resistance = "{RF_SEP} ohm"\nfield_inductance = "{lf} H"\n'
        motor += f'field_voltage = "{VF_SEP} V"\n'
        m_default = M_SEP
    else:
        motor += f'field_resistance = "{RF_SH} ohm"\nfield_inductance = "{LF_SH} H"\n'
        m_default = M_SH
    if table is not None:
        motor += _table_toml(table)
    else:
        motor += f'mutual_inductance = "{mutual if mutual is not None else m_default} H"\n'
    rec = f'record_interval = "{record}"\n' if record else ""
    ctl = control or f'mode = "voltage"\nvoltage = "{volts} V"\n'
    return f"""
[about]
title = "Bulk-cargo quay drive (invented)"
[simulation]
duration = "{duration!r} s"
{rec}[motor]
{motor}{extra_motor}[load]
torque = "{load} N*m"
locked = {"true" if locked else "false"}
[supply]
voltage = "{VS_SER if kind == "series" else VS} V"
[control]
{ctl}{tail}"""


def _compound(
    mode: str,
    *,
    duration: float,
    load: float = TL,
    record: str | None = None,
    n: float | None = None,
    extra: str = "",
) -> str:
    n = NSE[mode] if n is None else n
    extra += (
        f'compound = "{mode}"\nseries_field_resistance = "{RSE} ohm"\n'
        f'series_field_inductance = "{LSE} H"\nseries_turns_ratio = "{n}"\n'
    )
    return _text("compound", duration=duration, load=load, friction=0.0, record=record,
                 extra_motor=extra)  # fmt: skip


def _run(text: str):
    res = simulate(load_scenario_text(text, source="quay.toml"))
    assert_energy_closes(res.summary)
    return res


def _last(res, name: str) -> float:
    return float(res.trace[name][-1])


# --------------------------------------------------------------------------------------------
# 1. Series machine, linear magnetics
# --------------------------------------------------------------------------------------------


def test_series_locked_rotor_torque_goes_with_current_squared():
    # Source: Chapman ch. 9, series motor (from memory): K phi = M i_a below saturation, so
    # T = M i_a^2. Locked rotor (w = 0), derived: i_a = V / (R_a + R_f) after the loop's time
    # constant (L_a + L_f) / (R_a + R_f) = 18.75 ms; 0.5 s is 27 of them (e^-27 ~ 2e-12).
    torques, currents = [], []
    for v in (24.0, 48.0):
        res = _run(_text("series", duration=0.5, volts=v, locked=True, load=0.0))
        i = v / R_SER
        assert _last(res, "current_A") == pytest.approx(i, rel=1e-9)
        assert _last(res, "motor_torque_Nm") == pytest.approx(M_SER * i * i, rel=1e-9)
        assert _last(res, "field_current_A") == pytest.approx(i, rel=1e-9)  # one current
        torques.append(_last(res, "motor_torque_Nm"))
        currents.append(_last(res, "current_A"))
    # Torque ratio = current ratio squared (= 4 here; voltage ratio 2 at a locked rotor).
    assert torques[1] / torques[0] == pytest.approx((currents[1] / currents[0]) ** 2, rel=1e-9)
    assert torques[1] / torques[0] == pytest.approx(4.0, rel=1e-9)


def series_steady_state(v: float, t_load: float, b: float, m: float = M_SER) -> tuple[float, float]:
    """Steady ``(i, w)`` of the series machine, derived: with all derivatives zero,
    ``V = (R_a + R_f) i + M i w`` and ``M i^2 = T_L + B w``; eliminating
    ``w = (V - R i) / (M i)`` leaves ``g(i) = M i^2 - T_L - B (V - R i) / (M i) = 0``, which
    rises strictly on ``0 < i <= V / R`` (each term does), so its root there is unique."""

    def g(i):
        return m * i * i - t_load - b * (v - R_SER * i) / (m * i)

    i = brentq(g, 1e-9, v / R_SER, xtol=1e-15, rtol=1e-15)
    return i, (v - R_SER * i) / (m * i)


def test_series_running_steady_state_matches_the_closed_form():
    i_ss, w_ss = series_steady_state(VS_SER, TL_SER, B)
    res = _run(_text("series", duration=3.0, volts=VS_SER, load=TL_SER, inertia=J_SER))
    # Settled: the slowest mode of the linearised machine here is ~0.1 s (J / (dT/dw + ...)),
    # 3 s is ~30 of them.
    assert res.summary["final_speed_rad_s"] == pytest.approx(w_ss, rel=1e-7)
    assert res.summary["final_current_A"] == pytest.approx(i_ss, rel=1e-7)
    assert _last(res, "motor_torque_Nm") == pytest.approx(M_SER * i_ss**2, rel=1e-7)
    assert _last(res, "flux_constant_V_s_rad") == pytest.approx(M_SER * i_ss, rel=1e-7)


# --------------------------------------------------------------------------------------------
# 2. Series machine with saturation
# --------------------------------------------------------------------------------------------


def test_series_with_a_saturating_table_gives_less_torque_than_the_square_law():
    # Source: Chapman ch. 9 (from memory): in saturation the flux rises less than the current,
    # so the series motor's torque K(i) i falls below the unsaturated i^2 line. The line's
    # slope is the table's first segment, M_0 = (30 V / w_mag) / 20 A. Locked rotor, derived:
    # i = V / (R_a + R_f), T = Phi(i) i with Phi read from the table.
    m0 = TABLE_SER[1][1] / SPEED_MAG / TABLE_SER[1][0]
    for v, saturated in ((12.0, False), (48.0, True)):  # 15 A (first segment), 60 A
        res = _run(_text("series", duration=0.5, volts=v, locked=True, load=0.0, table=TABLE_SER))
        i = v / R_SER
        t = _last(res, "motor_torque_Nm")
        assert _last(res, "current_A") == pytest.approx(i, rel=1e-9)
        assert t == pytest.approx(table_flux(i, TABLE_SER) * i, rel=1e-9)
        if saturated:
            assert t < 0.6 * m0 * i * i  # 29.8 N*m against 51.6 N*m on the line
        else:
            assert t == pytest.approx(m0 * i * i, rel=1e-9)


# --------------------------------------------------------------------------------------------
# 3. Series runaway
# --------------------------------------------------------------------------------------------


def test_unloaded_series_machine_runs_away_and_the_run_stops_naming_max_speed():
    # Source: Chapman ch. 9 (from memory): a series motor must never run unloaded -- with
    # T_L = 0 and no friction the steady state M i^2 = 0 needs i -> 0, i.e. w = (V - R i) /
    # (M i) -> infinity (derived from the steady equations above).
    text = _text("series", duration=5.0, volts=VS_SER, load=0.0, friction=0.0, inertia=J_SER)
    sc = load_scenario_text(text, source="quay.toml")
    with pytest.raises(SimulationError) as err:
        simulate(sc)
    msg = str(err.value)
    assert "motor.max_speed" in msg
    assert "default 10 x V_s / K" in msg
    # the default limit: 10 V_s / K with K the derived torque constant at the locked-rotor
    # current (dcsim.engine.assemble.machine_parameters, api)
    k_locked = M_SER * VS_SER / R_SER
    assert sc.motor.torque_constant == pytest.approx(k_locked, rel=1e-12)
    assert f"{10 * VS_SER / k_locked:.4g} rad/s" in msg
    # a given limit is named as given
    given = text.replace('field_inductance = "0.01 H"\n', 'field_inductance = "0.01 H"\n'
                         'max_speed = "800 rpm"\n')  # fmt: skip
    with pytest.raises(SimulationError, match=r"motor.max_speed = 83.78 rad/s \(given\)"):
        simulate(load_scenario_text(given, source="quay.toml"))


def test_loaded_series_machine_settles_below_its_limit():
    # The same machine with the crane's traverse load settles (test above for the value).
    res = _run(_text("series", duration=3.0, volts=VS_SER, load=TL_SER, inertia=J_SER))
    w_ss = series_steady_state(VS_SER, TL_SER, B)[1]
    assert res.summary["peak_speed_rad_s"] < 10 * VS_SER / (M_SER * VS_SER / R_SER)
    tail = res.trace["speed_rad_s"][-100:]
    assert np.all(np.abs(tail - w_ss) < 1e-6 * w_ss)


# --------------------------------------------------------------------------------------------
# 4. Shunt and separately excited: the speed-torque line
# --------------------------------------------------------------------------------------------


def line_speed(v: float, k: float, t_load: float, b: float, r: float = RA) -> float:
    """Steady speed on the speed-torque line w = V/K - R T/K^2 (Source: Chapman ch. 9, the
    shunt motor's terminal characteristic, from memory) with T = T_L + B w, derived: solving
    the linear equation for w gives w = (V/K - R T_L/K^2) / (1 + R B / K^2)."""
    return (v / k - r * t_load / k**2) / (1.0 + r * b / k**2)


@pytest.mark.parametrize("table", [None, TABLE_SH], ids=["linear", "table"])
def test_shunt_steady_speed_on_the_speed_torque_line(table):
    # Shunt field across the terminals: steady i_f = V / R_f = 2 A, K = Phi(2 A) (derived).
    i_f = VS / RF_SH
    k = M_SH * i_f if table is None else table_flux(i_f, table)
    # 2 s = 20 field time constants (e^-20 ~ 2e-9) and many mechanical ones (J R / K^2 ~ 6 ms)
    res = _run(_text("shunt", duration=2.0, table=table))
    w = line_speed(VS, k, TL, B)
    i_a = (TL + B * w) / k
    assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-7)
    assert res.summary["final_current_A"] == pytest.approx(i_a, rel=1e-7)
    assert res.summary["final_field_current_A"] == pytest.approx(i_f, rel=1e-7)
    assert _last(res, "flux_constant_V_s_rad") == pytest.approx(k, rel=1e-7)
    # the terminals carry armature plus field current (Chapman ch. 9: I_L = I_A + I_F)
    assert _last(res, "supply_current_A") == pytest.approx(i_a + i_f, rel=1e-7)


@pytest.mark.parametrize("table", [None, TABLE_SH], ids=["linear", "table"])
def test_separately_excited_steady_speed_on_the_speed_torque_line(table):
    # Separate field from its own supply: i_f = V_f / R_f = 1 A (starts settled), K = Phi(1 A).
    i_f = VF_SEP / RF_SEP
    k = M_SEP * i_f if table is None else table_flux(i_f, table)
    res = _run(_text("separately_excited", duration=1.0, table=table))
    w = line_speed(VS, k, TL, B)
    i_a = (TL + B * w) / k
    assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-7)
    assert res.summary["final_current_A"] == pytest.approx(i_a, rel=1e-7)
    assert res.summary["final_field_current_A"] == pytest.approx(i_f, rel=1e-12)
    # the armature supply carries the armature current only; the field supply's energy is
    # V_f i_f t, reported apart and included in the supplied energy
    assert _last(res, "supply_current_A") == pytest.approx(i_a, rel=1e-7)
    assert res.summary["field_supply_energy_J"] == pytest.approx(VF_SEP * i_f * 1.0, rel=1e-9)


# --------------------------------------------------------------------------------------------
# 5. Field weakening above base speed (separately excited)
# --------------------------------------------------------------------------------------------

W_BASE = 175.0  # [rad/s], below the unweakened speed 176.4 rad/s at this load


def weakened_steady_state(v: float, k_r: float, w_b: float, t_load: float, r: float = RA):
    """Steady state above base speed with linear magnetics and B = 0, derived.

    Above w_b the field is set for K = K_r w_b / w, so the back-EMF e = K w = K_r w_b is
    constant. Armature, di/dt = 0: i = (V - K_r w_b) / R_a. Shaft, dw/dt = 0: K i = T_L, so
    K = T_L R_a / (V - K_r w_b), and w = e / K = K_r w_b / K. (The shaft's power e i is then
    constant: the constant-power range.) Returns (i, K, w).
    """
    i = (v - k_r * w_b) / r
    k = t_load * r / (v - k_r * w_b)
    return i, k, k_r * w_b / k


def test_field_weakening_steady_state_and_speed_rise():
    k_r = M_SEP * VF_SEP / RF_SEP
    i, k, w = weakened_steady_state(VS, k_r, W_BASE, TL)
    assert w > W_BASE  # the derivation applies (above base speed)
    base = f'base_speed = "{W_BASE} rad/s"\n'
    # Settling, derived by linearising about the point (i = (V - K w) / R_a quasi-static,
    # tau_f dK/dt = K_target(w) - K, J dw/dt = K i - T_L): the torque falls with speed
    # (-K^2/R_a = -2 N*m*s/rad) but the weakening raises it again (dT/dK dK_target/dw =
    # (V - 2 K w)/R_a * (-K/w) = +1.905), so the net restoring slope is only 0.095 and the
    # slow mode is ~ -0.095 / (2 tau_f + ...) -> ~1 s with the capstan's field (tau_f =
    # 50 ms). The check runs a light rotor (J/10) and a quick field (L_f/10, tau_f = 5 ms):
    # slow mode ~0.16 s, 3 s ~ 19 of them. The steady state depends on neither.
    res = _run(_text("separately_excited", duration=3.0, friction=0.0, inertia=J / 10,
                     field_inductance=LF_SEP / 10, extra_motor=base))  # fmt: skip
    assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-7)
    assert res.summary["final_current_A"] == pytest.approx(i, rel=1e-7)
    assert _last(res, "flux_constant_V_s_rad") == pytest.approx(k, rel=1e-7)
    assert res.summary["final_field_current_A"] == pytest.approx(k / M_SEP, rel=1e-7)
    e = _last(res, "flux_constant_V_s_rad") * _last(res, "speed_rad_s")
    assert e == pytest.approx(k_r * W_BASE, rel=1e-7)  # constant back-EMF
    # Unweakened, the same machine and load: on the line w = V/K_r - R T_L / K_r^2 (B = 0).
    plain = _run(_text("separately_excited", duration=3.0, friction=0.0, inertia=J / 10,
                       field_inductance=LF_SEP / 10))  # fmt: skip
    w_plain = line_speed(VS, k_r, TL, 0.0)
    assert plain.summary["final_speed_rad_s"] == pytest.approx(w_plain, rel=1e-7)
    assert res.summary["final_speed_rad_s"] > w_plain  # speed rises as the flux falls
    assert _last(res, "flux_constant_V_s_rad") < k_r


# --------------------------------------------------------------------------------------------
# 6. Compound: cumulative and differential
# --------------------------------------------------------------------------------------------


def compound_steady_state(sign: float, t_load: float, n: float) -> tuple[float, float]:
    """Steady ``(i_a, w)`` of the long-shunt compound machine, linear magnetics, B = 0,
    derived: the shunt field across the terminals carries i_f = V / R_f; the flux constant is
    K(i_a) = M (i_f + sign n i_a) (sign +1 cumulative, -1 differential: Chapman ch. 9, from
    memory); armature V = (R_a + R_se) i_a + K w; shaft K i_a = T_L. The shaft equation alone
    fixes i_a: M (i_f + sign n i_a) i_a = T_L, a quadratic whose root nearest 0 is the
    operating point; then w = (V - (R_a + R_se) i_a) / K(i_a)."""
    i_f = VS / RF_SH
    a, b_, c = sign * n * M_SH, M_SH * i_f, -t_load
    i_a = t_load / b_ if a == 0.0 else (-b_ + math.sqrt(b_ * b_ - 4 * a * c)) / (2 * a)
    k = M_SH * (i_f + sign * n * i_a)
    return i_a, (VS - (RA + RSE) * i_a) / k


def test_compound_steady_states_and_their_speed_regulation():
    # No load (T_L = 0, B = 0): i_a = 0, so every connection runs at w_0 = V / (M V / R_f) =
    # R_f / M = 110 rad/s (derived from the function above with T_L = 0).
    w0 = RF_SH / M_SH
    for mode, sign in (("cumulative", 1.0), ("differential", -1.0)):
        assert compound_steady_state(sign, 0.0, NSE[mode]) == (0.0, pytest.approx(w0, rel=1e-15))
    speeds = {}
    for mode, sign in (("cumulative", 1.0), ("differential", -1.0)):
        i_a, w = compound_steady_state(sign, TL, NSE[mode])
        res = _run(_compound(mode, duration=2.0))
        assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-7), mode
        assert res.summary["final_current_A"] == pytest.approx(i_a, rel=1e-7), mode
        k = M_SH * (VS / RF_SH + sign * NSE[mode] * i_a)
        assert _last(res, "flux_constant_V_s_rad") == pytest.approx(k, rel=1e-7), mode
        speeds[mode] = res.summary["final_speed_rad_s"]
    # Speed regulation, derived: the load current strengthens the cumulative machine's flux
    # (and the numerator V - R i_a falls), so its speed drops below the plain-shunt value
    # (n = 0); the differential machine's flux falls with load, which offsets the R i_a drop.
    w_shunt = compound_steady_state(1.0, TL, 0.0)[1]
    drop = {mode: w0 - w for mode, w in speeds.items()}
    assert drop["cumulative"] > w0 - w_shunt > drop["differential"]
    assert drop["differential"] > 0.0  # this small ratio still droops, less than the shunt
    # the no-load run of the cumulative machine reaches w_0
    res = _run(_compound("cumulative", duration=4.0, load=0.0))
    assert res.summary["final_speed_rad_s"] == pytest.approx(w0, rel=1e-6)


def test_strong_differential_compound_starts_backwards_and_runs_away():
    # Source: Chapman ch. 9 (from memory): a differential compound motor is unstable -- its
    # flux falls as the load current rises -- and at a start the series winding's inrush can
    # overwhelm the shunt field still building up. Derived for n = 0.02 here: the inrush
    # 220 V / 0.6 ohm = 367 A makes 7.3 field amps against a shunt field of at most 2 A, so
    # K < 0 at the start and the shaft is driven backwards.
    with pytest.raises(SimulationError) as err:
        simulate(load_scenario_text(_compound("differential", duration=2.0, n=0.02),
                                    source="quay.toml"))  # fmt: skip
    msg = str(err.value)
    assert "motor.max_speed" in msg and "differential compound" in msg
    # the default limit, 10 V_s / K at the steady shunt field (K = M V / R_f = 2 V*s/rad)
    assert "motor.max_speed = 1100 rad/s" in msg


# --------------------------------------------------------------------------------------------
# 7. Transients against scipy's Radau
# --------------------------------------------------------------------------------------------


def _radau(rhs, t, x0):
    sol = solve_ivp(rhs, (0.0, t[-1]), x0, method="Radau", t_eval=t, rtol=1e-10, atol=1e-12)
    assert sol.success
    return sol.y


TRANSIENT_RTOL = 1e-6
"""Allowed difference at the trace rows, relative to each column's largest magnitude. The
kernel takes classical RK4 sub-steps of at most a tenth of the fastest time constant
(dcsim.engine.machine_run); RK4's global error is of order (h/tau)^4 ~ 1e-4 of the fastest
mode's amplitude at that bound, but the default step here is smaller: h/tau ~ 0.01 for the
loops below, (0.01)^4 = 1e-8, so 1e-6 leaves room for the error constant and for Radau's own
rtol = 1e-10 (both estimates: Hairer, Norsett & Wanner, *Solving ODEs I*, sec. II.3, from
memory)."""


def _compare(res, ref: dict[str, np.ndarray]) -> None:
    for name, want in ref.items():
        got = res.trace[name]
        scale = float(np.max(np.abs(want)))
        err = float(np.max(np.abs(got - want)))
        assert err <= TRANSIENT_RTOL * scale, (name, err / scale)


def test_series_start_against_radau():
    # The series start from rest, the load acting from t = 0 (Source: scipy Radau IIA).
    # At this light load the steady speed (~96 rad/s) is above the default over-speed limit
    # 3 V_s / K_locked = 80 rad/s, so a limit is given.
    res = _run(_text("series", duration=0.4, volts=VS_SER, load=5.0, inertia=J_SER,
                     record="1 ms", extra_motor='max_speed = "3000 rpm"\n'))  # fmt: skip
    t = res.trace["time_s"]

    def rhs(_t, x):
        i, w = x
        k = M_SER * i
        return [
            (VS_SER - R_SER * i - k * w) / (LA + LF_SER),
            (k * i - 5.0 - B * w) / J_SER,
        ]

    i, w = _radau(rhs, t, [0.0, 0.0])
    _compare(res, {"current_A": i, "speed_rad_s": w, "motor_torque_Nm": M_SER * i * i})


def test_shunt_start_with_field_build_up_against_radau():
    # Field and armature switched on together, field from 0 A (Source: scipy Radau IIA).
    res = _run(_text("shunt", duration=0.5, load=5.0, record="1 ms"))
    t = res.trace["time_s"]

    def rhs(_t, x):
        i, i_f, w = x
        k = M_SH * i_f
        return [
            (VS - RA * i - k * w) / LA,
            (VS - RF_SH * i_f) / LF_SH,
            (k * i - 5.0 - B * w) / J,
        ]

    i, i_f, w = _radau(rhs, t, [0.0, 0.0, 0.0])
    _compare(
        res,
        {"current_A": i, "field_current_A": i_f, "speed_rad_s": w,
         "supply_current_A": i + i_f},
    )  # fmt: skip


# --------------------------------------------------------------------------------------------
# 8. Energy account and field copper loss
# --------------------------------------------------------------------------------------------

ENERGY_CASES = {
    "series": _text("series", duration=0.3, volts=VS_SER, load=TL_SER, inertia=J_SER,
                    record="100 us"),
    "shunt": _text("shunt", duration=0.3, record="100 us"),
    "separately_excited": _text("separately_excited", duration=0.3, record="100 us"),
    "weakened": _text("separately_excited", duration=0.3, record="100 us",
                      extra_motor=f'base_speed = "{W_BASE / 2} rad/s"\nmax_speed = "2000 rad/s"\n'),
    "cumulative": _compound("cumulative", duration=0.3, record="100 us"),
    "differential": _compound("differential", duration=0.3, record="100 us"),
}  # fmt: skip


def _trapezoid(y: np.ndarray, t: np.ndarray) -> float:
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(t)))


@pytest.mark.parametrize("case", list(ENERGY_CASES))
def test_energy_account_closes_and_field_copper_loss_is_the_integral(case):
    res = _run(ENERGY_CASES[case])  # asserts the account closes
    tr = res.trace
    t, i_a, i_f = tr["time_s"], tr["current_A"], tr["field_current_A"]
    if case == "series":
        p_field = RF_SER * i_a**2  # the series winding carries the armature current
    elif case in ("cumulative", "differential"):
        p_field = RF_SH * i_f**2 + RSE * i_a**2  # shunt field and series winding
    elif case == "shunt":
        p_field = RF_SH * i_f**2
    else:
        p_field = RF_SEP * i_f**2
    got = res.summary["energy_field_copper_loss_J"]
    want = _trapezoid(p_field, t)
    # Trapezoid error, Euler-Maclaurin (standard; the leading term derived from it):
    # ~ h^2/12 (p'(T) - p'(0)). Estimated here from the trace (h = 100 us) it is below
    # 1e-7 of the loss for every case, so the loss is held to 1e-6 of itself: the trapezoid's
    # own error with a margin for the crude end slopes (the inrush at t = 0 is steep).
    h = t[1] - t[0]
    slope = np.gradient(p_field, t)
    estimate = h * h / 12.0 * abs(slope[-1] - slope[0])
    assert estimate <= 1e-7 * want
    assert abs(got - want) <= 1e-6 * want, (got, want, estimate)
    assert got > 0.0
    if case in ("separately_excited", "weakened"):
        # The field circuit alone, derived: L_f i_f di_f/dt = v_f i_f - R_f i_f^2, integrated:
        # field supply energy = field copper loss + L_f (i_f(T)^2 - i_f(0)^2) / 2, with
        # i_f(0) = V_f / R_f (the separate field starts settled). Unweakened the two
        # currents are equal and the supply energy is the copper loss.
        i0, i1 = VF_SEP / RF_SEP, float(i_f[-1])
        assert i_f[0] == pytest.approx(i0, rel=1e-15)
        stored = 0.5 * LF_SEP * (i1 * i1 - i0 * i0)
        assert res.summary["field_supply_energy_J"] == pytest.approx(got + stored, rel=1e-9)
        if case == "weakened":
            assert stored < -0.1 * got  # the weakened field gave back magnetic energy


# --------------------------------------------------------------------------------------------
# 9. Loader messages
# --------------------------------------------------------------------------------------------

BASES = {
    "series": _text("series", duration=0.1),
    "shunt": _text("shunt", duration=0.1),
    "separately_excited": _text("separately_excited", duration=0.1),
    "compound": _compound("cumulative", duration=0.1),
}
MISSING = [
    ("series", "field_resistance"),
    ("series", "field_inductance"),
    ("shunt", "field_resistance"),
    ("shunt", "field_inductance"),
    ("separately_excited", "field_resistance"),
    ("separately_excited", "field_inductance"),
    ("separately_excited", "field_voltage"),
    ("compound", "field_resistance"),
    ("compound", "field_inductance"),
    ("compound", "series_field_resistance"),
    ("compound", "series_field_inductance"),
    ("compound", "series_turns_ratio"),
]


def _refused(text: str, key: str) -> str:
    # Source: project rule (one ScenarioError naming the file and the key, what was expected
    # and what was found)
    with pytest.raises(ScenarioError) as err:
        simulate(load_scenario_text(text, source="quay.toml"))
    assert err.value.key == key, str(err.value)
    msg = str(err.value)
    assert msg.startswith(f"quay.toml: {key}: ")
    assert "expected" in msg and "found" in msg, msg
    return msg


def _drop(text: str, key: str) -> str:
    lines = text.splitlines()
    kept = [ln for ln in lines if not ln.startswith(f"{key} =")]
    assert len(kept) == len(lines) - 1
    return "\n".join(kept) + "\n"


def _add_motor(text: str, line: str) -> str:
    assert text.count("[motor]\n") == 1
    return text.replace("[motor]\n", f"[motor]\n{line}\n")


@pytest.mark.parametrize(("kind", "key"), MISSING)
def test_missing_field_key_is_named(kind, key):
    msg = _refused(_drop(BASES[kind], key), f"motor.{key}")
    assert kind.replace("_", " ") in msg and "missing key" in msg


@pytest.mark.parametrize("kind", list(BASES))
def test_torque_constant_for_a_wound_field_machine_is_refused(kind):
    msg = _refused(_add_motor(BASES[kind], 'torque_constant = "1 N*m/A"'), "motor.torque_constant")
    assert kind in msg


def test_both_mutual_inductance_and_magnetisation_are_refused():
    text = _add_motor(BASES["shunt"], _table_toml(TABLE_SH).rstrip("\n"))
    assert "both" in _refused(text, "motor.magnetisation")


def test_neither_mutual_inductance_nor_magnetisation_is_refused():
    text = _drop(BASES["shunt"], "mutual_inductance")
    assert "neither" in _refused(text, "motor.mutual_inductance")


def test_table_not_starting_at_zero_is_refused():
    table = [(0.1, 0.0), (1.0, 150.0), (2.0, 250.0)]
    text = _text("shunt", duration=0.1, table=table)
    assert "0.1 A" in _refused(text, "motor.magnetisation")


@pytest.mark.parametrize(
    "table",
    [
        [(0.0, 0.0), (1.0, 150.0), (1.0, 200.0)],  # current does not rise
        [(0.0, 0.0), (1.0, 150.0), (2.0, 150.0)],  # back-EMF does not rise
        [(0.0, 0.0), (2.0, 150.0), (1.0, 200.0)],  # current falls
    ],
)
def test_table_not_rising_is_refused(table):
    text = _text("shunt", duration=0.1, table=table)
    assert "rising" in _refused(text, "motor.magnetisation")


def test_magnetisation_without_its_speed_is_refused():
    text = _drop(_text("shunt", duration=0.1, table=TABLE_SH), "magnetisation_speed")
    _refused(text, "motor.magnetisation_speed")


@pytest.mark.parametrize("line", ['field_resistance = "100 ohm"', 'field_voltage = "100 V"',
                                  'mutual_inductance = "1 H"'])  # fmt: skip
def test_field_key_on_a_permanent_magnet_machine_is_refused(line):
    text = f"""
[simulation]
duration = "0.1 s"
[motor]
resistance = "{RA} ohm"
inductance = "{LA} H"
torque_constant = "1 N*m/A"
inertia = "{J} kg*m^2"
{line}
[supply]
voltage = "{VS} V"
[control]
mode = "voltage"
voltage = "{VS} V"
"""
    key = "motor." + line.split(" =")[0]
    assert "permanent-magnet" in _refused(text, key)


@pytest.mark.parametrize("kind", list(BASES))
def test_switching_bridge_with_a_wound_field_machine_is_refused(kind):
    # with the bus capacitor every PWM bridge needs, so that the machine's refusal is reached
    text = BASES[kind].replace("[supply]\n", '[supply]\ncapacitance = "1 mF"\n')
    text += '[bridge]\nmodel = "switching"\n'
    msg = _refused(text, "bridge.model")
    assert "ideal" in msg and "switching" in msg


def test_field_voltage_event_on_a_shunt_machine_is_refused():
    text = BASES["shunt"] + '[[events]]\nat = "0.05 s"\nset = { "motor.field_voltage" = "50 V" }\n'
    msg = _refused(text, "events[0].set.motor.field_voltage")
    assert "shunt" in msg


def test_field_voltage_event_on_a_separately_excited_machine_runs():
    # Derived: after the field supply steps from V_f to V_f / 2 the field current settles at
    # V_f / (2 R_f) (L_f / R_f = 50 ms; 1 s later ~20 time constants) and the speed on the
    # line with K = M V_f / (2 R_f).
    ev = '[[events]]\nat = "0.5 s"\nset = { "motor.field_voltage" = "50 V" }\n'
    res = _run(_text("separately_excited", duration=1.5, load=5.0) + ev)
    k = M_SEP * 0.5 * VF_SEP / RF_SEP
    assert res.summary["final_field_current_A"] == pytest.approx(0.5, rel=1e-7)
    assert res.summary["final_speed_rad_s"] == pytest.approx(line_speed(VS, k, 5.0, B), rel=1e-6)


def test_speed_loop_runs_a_separately_excited_machine():
    # A PI speed loop over a PI current loop (tuned by the usual rules, common practice (no
    # source): current loop kp = L wc, ki = R wc at wc = 2000 rad/s; speed loop kp = J wc / K,
    # ki = kp wc / 4 at wc = 50 rad/s). Source: the final value theorem -- with integral
    # action the steady speed error under a constant load is zero, and the steady armature
    # current is (T_L + B w) / K (shaft equation with dw/dt = 0).
    k = M_SEP * VF_SEP / RF_SEP
    kp_s = J * 50.0 / k
    control = (
        'mode = "speed"\n[control.current]\n'
        f'kp = "{LA * 2000.0} V/A"\nki = "{RA * 2000.0} V/(A*s)"\nsample_time = "100 us"\n'
        f'[control.speed]\nkp = "{kp_s} A*s/rad"\nki = "{kp_s * 50.0 / 4} A/rad"\n'
        'sample_time = "200 us"\nlimit = "40 A"\n'
        '[control.reference]\nkind = "step"\nvalue = "100 rad/s"\n'
    )
    res = _run(_text("separately_excited", duration=2.0, load=10.0, control=control))
    # Settled: the closed loop's slowest mode is ~4 / wc = 80 ms (the PI zero at wc / 4);
    # 2 s is 25 of them (e^-25 ~ 1e-11), so 1e-8 leaves room for rounding only.
    assert res.summary["final_speed_rad_s"] == pytest.approx(100.0, rel=1e-8)
    assert res.summary["final_current_A"] == pytest.approx((10.0 + B * 100.0) / k, rel=1e-8)
