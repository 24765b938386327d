"""The winding's thermal model on the machine-library kernel (wound-field machines).

Setting (invented): the separately excited drive of a harbour capstan, held at standstill
against its stop with the armature energised (a stalled warping head) while its field stays
excited -- the case that decides the armature's and the field's insulation class.
"""

from __future__ import annotations

import pytest
from scipy.optimize import brentq

import dcsim
from dcsim.errors import ScenarioError

ALPHA20 = 0.00393  # 1/K, annealed copper -- Source: IEC 60028 (resistance-temperature coefficient)
R20, VA = 2.0, 10.0  # ohm, V: armature at 20 degC, its locked-rotor voltage
RF, VF = 100.0, 100.0  # ohm, V: field (held at its given resistance)
R_WH, R_HA = 0.8, 1.6  # K/W
C_W, C_H = 20.0, 100.0  # J/K
AMBIENT_C = 25.0

TEXT = f"""
[simulation]
duration = "3000 s"
record_interval = "1 s"
[motor]
kind = "separately_excited"
resistance = "{R20} ohm"
inductance = "0.5 H"
inertia = "0.05 kg*m^2"
field_resistance = "{RF} ohm"
field_inductance = "20 H"
field_voltage = "{VF} V"
mutual_inductance = "1.5 H"
[load]
locked = true
[supply]
voltage = "{VA} V"
[control]
voltage = "{VA} V"
[thermal]
winding_to_housing = "{R_WH} K/W"
housing_to_ambient = "{R_HA} K/W"
winding_capacity = "{C_W} J/K"
housing_capacity = "{C_H} J/K"
ambient = "{AMBIENT_C} degC"
"""


def r_at(r20: float, t_c: float) -> float:
    """Copper resistance at t_c [degC] from its value at 20 degC (IEC 60028)."""
    return r20 * (1.0 + ALPHA20 * (t_c - 20.0))


def steady_rises(vf: float) -> tuple[float, float, float]:
    """Winding and housing rises [K] and the field loss [W] at the locked steady state.

    Derived: the two-node network (winding -> housing -> ambient) carries both losses through
    R_ha and the armature's also through R_wh; the armature's loss V^2 / R(T_w), the field's
    V_f^2 / R_f(T_h) (the field at the housing node), both by IEC 60028 copper: a fixed point
    in (T_w, T_h), solved by nested brentq.
    """

    def winding_rise(p_f: float) -> float:
        def residual(rise_w: float) -> float:
            p_w = VA**2 / r_at(R20, AMBIENT_C + rise_w)
            return (p_w + p_f) * R_HA + p_w * R_WH - rise_w

        return brentq(residual, 0.0, 2000.0, xtol=1e-12)

    def housing_residual(rise_h: float) -> float:
        p_f = vf**2 / r_at(RF, AMBIENT_C + rise_h)
        rise_w = winding_rise(p_f)
        p_w = VA**2 / r_at(R20, AMBIENT_C + rise_w)
        return (p_w + p_f) * R_HA - rise_h

    rise_h = brentq(housing_residual, 0.0, 2000.0, xtol=1e-12)
    p_f = vf**2 / r_at(RF, AMBIENT_C + rise_h)
    return winding_rise(p_f), rise_h, p_f


def test_locked_separately_excited_machine_settles_at_the_two_node_steady_state():
    res = dcsim.simulate(dcsim.load_scenario_text(TEXT, source="capstan.toml"))
    s = res.summary
    rise_w, rise_h, p_f = steady_rises(VF)
    # 3000 s is 18 of the slow time constant (at most (R_wh + R_ha) (C_w + C_h) = 288 s):
    # e^-10 of the rise is left, below the 0.01 K at which the coupling's passes stop.
    assert s["final_winding_temperature_K"] - 273.15 == pytest.approx(AMBIENT_C + rise_w, abs=0.05)
    assert s["final_housing_temperature_K"] - 273.15 == pytest.approx(AMBIENT_C + rise_h, abs=0.05)
    # the armature resistance followed: the final current is V / R(T_w) (IEC 60028)
    assert s["final_current_A"] == pytest.approx(VA / r_at(R20, AMBIENT_C + rise_w), rel=2e-4)
    # and the field's: it settles at V_f / R_f(T_h), Ohm's law at the housing temperature
    i_f = VF / r_at(RF, AMBIENT_C + rise_h)
    assert res.trace["field_current_A"][-1] == pytest.approx(i_f, rel=2e-4)
    assert s["thermal_passes"] <= 12


def test_field_loss_heats_the_housing_node():
    # With the field switched off (field_voltage tiny) the housing runs cooler by the field's
    # loss times R_ha, less the armature's own change -- the same derived network.
    cold = TEXT.replace(f'field_voltage = "{VF} V"', 'field_voltage = "1e-6 V"')
    hot = dcsim.simulate(dcsim.load_scenario_text(TEXT, source="capstan.toml")).summary
    off = dcsim.simulate(dcsim.load_scenario_text(cold, source="capstan.toml")).summary
    _, rise_h_hot, _ = steady_rises(VF)
    _, rise_h_off, _ = steady_rises(1e-6)
    dh = hot["final_housing_temperature_K"] - off["final_housing_temperature_K"]
    assert dh == pytest.approx(rise_h_hot - rise_h_off, abs=0.1)
    assert dh > 0.5 * VF**2 / r_at(RF, AMBIENT_C + rise_h_hot) * R_HA


def test_magnets_on_a_wound_field_machine_are_refused():
    text = TEXT.replace("[thermal]\n", '[thermal]\nmagnet_material = "ferrite"\n')
    with pytest.raises(ScenarioError) as err:
        dcsim.load_scenario_text(text, source="capstan.toml")
    assert err.value.key == "thermal.magnet_material"
    assert "has no magnets" in str(err.value)


def test_field_resistance_events_are_refused_where_there_is_no_such_winding():
    pm = TEXT.replace('kind = "separately_excited"\n', "").replace(
        f'field_resistance = "{RF} ohm"\nfield_inductance = "20 H"\nfield_voltage = "{VF} V"\n'
        'mutual_inductance = "1.5 H"\n',
        'torque_constant = "1.5 N*m/A"\n',
    ).replace("[thermal]", '[[events]]\nat = "1 s"\nset = { "motor.field_resistance" = "90 ohm" }'
              "\n[thermal]")  # fmt: skip
    with pytest.raises(ScenarioError) as err:
        dcsim.simulate(dcsim.load_scenario_text(pm, source="capstan.toml"))
    assert err.value.key == "events[0].set.motor.field_resistance"
    sep = TEXT.replace(
        "[thermal]",
        '[[events]]\nat = "1 s"\nset = { "motor.series_field_resistance" = "0.1 ohm" }\n[thermal]',
    )
    with pytest.raises(ScenarioError) as err:
        dcsim.simulate(dcsim.load_scenario_text(sep, source="capstan.toml"))
    assert "only a compound machine" in str(err.value)


RUNAWAY = """
[simulation]
duration = "24 s"
record_interval = "10 ms"
[motor]
resistance = "0.8 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = true
[supply]
voltage = "48 V"
[control]
mode = "current"
[control.current]
sample_time = "100 us"
kp = 2.0
ki = 2000.0
limit = "48 V"
[control.reference]
kind = "step"
value = "{amps} A"
[thermal]
resistance = "{rth} K/W"
time_constant = "1 s"
ambient = "25 degC"
reference_temperature = "25 degC"
"""


def test_relaxed_coupling_still_reports_a_runaway_and_settles_a_stable_current_drive():
    # Source: derived from the one-node balance at a held current I: rise = R_th R(T) I^2 with
    # R(T) = R_ref (1 + alpha (T - T_ref)) (IEC 60028 copper, reference 25 degC):
    # rise = R_th R_ref I^2 / (1 - R_th R_ref alpha' I^2), alpha' = alpha20 / (1 + alpha20 *
    # 5 K), which has a positive (physical) solution only while R_th R_ref alpha' I^2 < 1.
    alpha = ALPHA20 / (1.0 + ALPHA20 * 5.0)
    amps = 8.0
    g_stable, g_runaway = 2.0 * 0.8 * alpha * amps**2, 20.0 * 0.8 * alpha * amps**2
    assert g_stable < 1.0 < g_runaway
    with pytest.raises(dcsim.errors.SimulationError, match="did not settle"):
        dcsim.simulate(dcsim.load_scenario_text(RUNAWAY.format(amps=amps, rth=20.0)))
    res = dcsim.simulate(dcsim.load_scenario_text(RUNAWAY.format(amps=amps, rth=2.0)))
    rise = 2.0 * 0.8 * amps**2 / (1.0 - g_stable)
    # the coupled winding settles with tau / (1 - g) = 1.65 s (derived from the same balance):
    # 24 s leave e^-14 of the rise
    assert res.summary["final_winding_temperature_K"] - 298.15 == pytest.approx(rise, abs=0.05)
