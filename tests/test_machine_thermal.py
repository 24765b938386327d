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


def test_locked_separately_excited_machine_settles_at_the_two_node_steady_state():
    res = dcsim.simulate(dcsim.load_scenario_text(TEXT, source="capstan.toml"))
    s = res.summary
    p_field = VF**2 / RF  # W, into the housing node (the field poles sit in the stator)

    # Source: derived -- steady state of the two-node network (winding -> housing ->
    # ambient): the housing carries both losses to ambient, the winding's own loss also
    # crosses R_wh; the armature's loss V^2 / R(T) with R(T) = R20 (1 + alpha20 (T - 20 degC))
    # (IEC 60028), solved for the winding temperature with brentq.
    def residual(rise_w: float) -> float:
        t_w = AMBIENT_C + rise_w
        p_w = VA**2 / (R20 * (1.0 + ALPHA20 * (t_w - 20.0)))
        return (p_w + p_field) * R_HA + p_w * R_WH - rise_w

    rise_w = brentq(residual, 0.0, 1000.0, xtol=1e-12)
    p_w = VA**2 / (R20 * (1.0 + ALPHA20 * (AMBIENT_C + rise_w - 20.0)))
    rise_h = (p_w + p_field) * R_HA
    # 3000 s is 18 of the slow time constant (at most (R_wh + R_ha) (C_w + C_h) = 288 s):
    # e^-10 of the rise is left, below the 0.01 K at which the coupling's passes stop.
    assert s["final_winding_temperature_K"] - 273.15 == pytest.approx(AMBIENT_C + rise_w, abs=0.05)
    assert s["final_housing_temperature_K"] - 273.15 == pytest.approx(AMBIENT_C + rise_h, abs=0.05)
    # the armature resistance followed: the final current is V / R(T_w) (IEC 60028)
    r_hot = R20 * (1.0 + ALPHA20 * (AMBIENT_C + rise_w - 20.0))
    assert s["final_current_A"] == pytest.approx(VA / r_hot, rel=2e-4)
    # the field's copper energy is V_f^2 / R_f over the run (its current settled from the
    # start: field_voltage / field_resistance), exactly
    assert s["energy_field_copper_loss_J"] == pytest.approx(p_field * 3000.0, rel=1e-9)


def test_field_loss_heats_the_housing_node():
    # With the field switched off (field_voltage tiny) the housing runs cooler by
    # P_field * R_ha -- derived from the same network, superposition of the losses.
    cold = TEXT.replace(f'field_voltage = "{VF} V"', 'field_voltage = "1e-6 V"')
    hot = dcsim.simulate(dcsim.load_scenario_text(TEXT, source="capstan.toml")).summary
    off = dcsim.simulate(dcsim.load_scenario_text(cold, source="capstan.toml")).summary
    # the armature's loss is the same (locked: no back-EMF, so the field does not enter the
    # armature circuit), apart from its resistance following the warmer winding
    dh = hot["final_housing_temperature_K"] - off["final_housing_temperature_K"]
    p_w_hot = VA * hot["final_current_A"]  # locked: all of V i is copper loss
    p_w_off = VA * off["final_current_A"]
    assert dh == pytest.approx((VF**2 / RF + p_w_hot - p_w_off) * R_HA, abs=0.05)


def test_magnets_on_a_wound_field_machine_are_refused():
    text = TEXT.replace("[thermal]\n", '[thermal]\nmagnet_material = "ferrite"\n')
    with pytest.raises(ScenarioError) as err:
        dcsim.load_scenario_text(text, source="capstan.toml")
    assert err.value.key == "thermal.magnet_material"
    assert "has no magnets" in str(err.value)
