"""Battery charge acceptance and the battery-management disconnect (averaged bridge).

The bench is a harbour winch on a 12 V battery: it starts lifting, then at 0.2 s the load
turns overhauling (a load being lowered) and drives the machine as a generator, which pushes
current back into a nearly full battery. The disconnect opens at its charge-current limit
or at the full-charge voltage; the bus is then left to its capacitor.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import dcsim
from dcsim.errors import ScenarioError
from tests.reference import assert_energy_closes

C_BUS = 4.7e-3  # [F]
R_BAT = 0.02  # [ohm]
OCV_EMPTY, OCV_FULL = 11.8, 12.8  # open-circuit voltage at SOC 0 and 1 [V], linear between

WINCH = """
[simulation]
duration = "{duration}"
record_interval = "50 us"
[motor]
resistance = "0.5 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "2e-4 kg*m^2"
[load]
torque = "0.05 N*m"
[supply]
capacitance = "4.7 mF"
[control]
voltage = "6 V"
[bridge]
model = "averaged"
[battery]
open_circuit_voltage = [[0.0, "11.8 V"], [1.0, "12.8 V"]]
resistance = "20 mohm"
capacity = "2 A*h"
initial_state_of_charge = 0.98
{bms}
[[events]]
at = "0.2 s"
set = {{ "load.torque" = "-0.5 N*m" }}
{events}
"""


def winch(duration: str = "0.35 s", bms: str = 'max_charge_current = "3 A"', events: str = ""):
    sc = dcsim.load_scenario_text(WINCH.format(duration=duration, bms=bms, events=events))
    res = dcsim.simulate(sc)
    # Source: conservation of energy (first law); C V^2 / 2 of the bus is the stored scale
    assert_energy_closes(res.summary, stored_J=0.5 * C_BUS * 14.0**2)
    return res


def ocv(soc):
    """Open-circuit voltage of the bench's battery table [V] (linear in SOC)."""
    return OCV_EMPTY + (OCV_FULL - OCV_EMPTY) * soc


def test_charge_current_never_exceeds_its_limit_while_the_disconnect_is_closed():
    res = winch()
    tr, s = res.trace, res.summary
    (opened,) = s["battery_disconnects"]
    assert opened["cause"] == "charge_current"
    assert s["battery_reconnects"] == [] and not s["battery_connected_at_end"]
    charge = -tr["supply_current_A"]
    closed = tr["battery_connected"] == 1.0
    # the disconnect opens at the located crossing: no row while closed is above the limit
    # (1e-9: the located crossing's rounding, a fraction of the limit)
    assert np.max(charge[closed]) <= 3.0 * (1.0 + 1e-9)
    assert np.max(charge[closed]) > 2.9  # the limit was approached, not avoided
    # while open the line carries nothing
    assert np.all(tr["supply_current_A"][~closed] == 0.0)
    # the opening lies between the last row with the line closed and the next row
    t = tr["time_s"]
    last = np.flatnonzero(closed)[-1]
    assert t[last] <= opened["time_s"] <= t[last + 1]
    # located to the crossing: at the opening the battery carries exactly the limit, so the
    # bus (no wiring resistance) shows the Thevenin terminal voltage OCV(SOC) + R_bat I_chg.
    # Source: Thevenin battery model, terminal V = OCV - R i (e.g. Plett, Battery Management
    # Systems, vol. 1, ch. 2 -- from memory). The SOC moves by 3 A x 50 us / 7200 C = 2e-8
    # within a row, so interpolating it costs less than 1e-7 V.
    soc = np.interp(opened["time_s"], t, tr["state_of_charge"])
    assert opened["bus_voltage_V"] == pytest.approx(ocv(soc) + R_BAT * 3.0, abs=1e-7)


def test_after_opening_the_bus_rise_follows_the_capacitor_energy_balance():
    # With the line open and no chopper, everything the bridge returns charges the capacitor:
    # 1/2 C (V2^2 - V1^2) = energy returned = work of the load - copper - friction - change of
    # kinetic energy - change of the inductance's energy, between two instants after the
    # opening (the same run cut at two durations).
    # Source: capacitor energy E = C V^2 / 2 and conservation of energy (as the regeneration
    # test of the power stage).
    a = winch("0.3 s")
    b = winch("0.35 s")
    assert a.summary["battery_disconnects"][0]["time_s"] < 0.3  # open over the whole interval
    sa, sb = a.summary, b.summary
    assert sb["energy_from_supply_J"] - sa["energy_from_supply_J"] == 0.0
    d = {k: sb[k] - sa[k] for k in sb if k.startswith("energy_") and k.endswith("_J")}
    inertia, ind = 2e-4, 1e-3
    kinetic = 0.5 * inertia * (sb["final_speed_rad_s"] ** 2 - sa["final_speed_rad_s"] ** 2)
    magnetic = 0.5 * ind * (sb["final_current_A"] ** 2 - sa["final_current_A"] ** 2)
    returned = (
        -d["energy_to_load_J"]
        - d["energy_copper_loss_J"]
        - d["energy_friction_J"]
        - d["energy_bridge_loss_J"]
        - kinetic
        - magnetic
    )
    v1 = a.trace["bus_voltage_V"][-1]
    v2 = b.trace["bus_voltage_V"][-1]
    assert v2 > v1 + 5.0  # a real rise
    # 1e-6: the project's accuracy target for the energy account (tests/reference.py)
    assert 0.5 * C_BUS * (v2**2 - v1**2) == pytest.approx(returned, rel=1e-6)


def test_full_charge_voltage_opens_the_disconnect_at_its_level():
    # No current limit: the terminal voltage OCV - R_bat i rises with the charge current
    # until it reaches the full-charge voltage; without wiring resistance the bus equals the
    # terminal voltage, so the logged bus voltage is the level itself (the located crossing,
    # to rounding). Source: Thevenin battery model (as above).
    res = winch(bms='full_voltage = "12.85 V"')
    (opened,) = res.summary["battery_disconnects"]
    assert opened["cause"] == "full_voltage"
    assert opened["bus_voltage_V"] == pytest.approx(12.85, rel=1e-9)
    tr = res.trace
    closed = tr["battery_connected"] == 1.0
    terminal = tr["source_voltage_V"] - R_BAT * tr["supply_current_A"]
    assert np.max(terminal[closed]) <= 12.85 * (1.0 + 1e-9)


def test_discharge_over_current_opens_the_disconnect():
    # Lifting draws from the battery; a 2 A discharge limit is crossed at the start, where the
    # logged bus shows OCV - R_bat I_dis. Source: Thevenin battery model (as above).
    res = winch("0.25 s", bms='max_discharge_current = "2 A"')
    opened = res.summary["battery_disconnects"][0]
    assert opened["cause"] == "discharge_current"
    soc = np.interp(opened["time_s"], res.trace["time_s"], res.trace["state_of_charge"])
    assert opened["bus_voltage_V"] == pytest.approx(ocv(soc) - R_BAT * 2.0, abs=1e-7)


def test_reclose_by_hysteresis_when_the_bus_falls_back():
    # At 0.3 s the load stops overhauling and is lifted again: the bridge draws on the
    # capacitor, the bus falls, and at the reclose level the disconnect closes (a located
    # crossing: the logged bus is the level). Source: hysteresis comparator definition.
    events = '[[events]]\nat = "0.3 s"\nset = { "load.torque" = "0.5 N*m" }'
    res = winch(
        "0.5 s", bms='max_charge_current = "3 A"\nreclose_voltage = "12.6 V"', events=events
    )
    s, tr = res.summary, res.trace
    (opened,) = s["battery_disconnects"]
    (closed_again,) = s["battery_reconnects"]
    assert 0.3 < closed_again["time_s"] < 0.5
    assert closed_again["bus_voltage_V"] == pytest.approx(12.6, rel=1e-9)
    t = tr["time_s"]
    open_rows = (t > opened["time_s"]) & (t < closed_again["time_s"])
    assert np.all(tr["battery_connected"][open_rows] == 0.0)
    assert np.min(tr["bus_voltage_V"][open_rows]) >= 12.6 * (1.0 - 1e-9)
    assert s["battery_connected_at_end"]
    assert tr["battery_connected"][-1] == 1.0
    assert s["min_bus_voltage_time_s"] >= closed_again["time_s"]  # the inrush dip follows


def test_a_reclose_level_above_what_the_battery_accepts_waits_for_the_bus():
    # A reclose level of 13.5 V lies above OCV + R_bat I_chg = 12.84 V: closing there would
    # charge the battery at (13.5 - 12.78) / 0.02 = 36 A and open at once. The disconnect
    # waits instead; the bus falls on, and it recloses once the closed line would carry at
    # most the limit -- found at a step boundary (not located), so within one nominal step's
    # fall of the bus below OCV + R_bat I_chg. Source: Thevenin battery model (as above).
    events = '[[events]]\nat = "0.3 s"\nset = { "load.torque" = "0.5 N*m" }'
    res = winch(
        "0.5 s", bms='max_charge_current = "3 A"\nreclose_voltage = "13.5 V"', events=events
    )
    s, tr = res.summary, res.trace
    (closed_again,) = s["battery_reconnects"]
    t = tr["time_s"]
    level = ocv(np.interp(closed_again["time_s"], t, tr["state_of_charge"])) + R_BAT * 3.0
    near = np.abs(t - closed_again["time_s"]) <= 1e-3
    fall_per_step = np.max(-np.diff(tr["bus_voltage_V"][near]) / np.diff(t[near])) * s["step_s"]
    assert level - fall_per_step <= closed_again["bus_voltage_V"] <= level
    after = t > closed_again["time_s"]
    assert np.max(-tr["supply_current_A"][after]) <= 3.0
    assert len(s["battery_disconnects"]) == 1 and s["battery_connected_at_end"]


def test_reclose_by_time_at_the_first_period_start_after_the_delay():
    # The reclose time is checked at each kernel period start (here one trace row, 50 us):
    # it recloses at the first period start at or after opening + delay. The bus is then far
    # above the battery, so the charge current at once exceeds its limit again and the
    # disconnect reopens at the same instant; this repeats every delay.
    # Source: the rule as documented (README, battery keys).
    res = winch("0.35 s", bms='max_charge_current = "3 A"\nreclose_time = "20 ms"')
    s = res.summary
    period = s["record_interval_s"]
    opens, closes = s["battery_disconnects"], s["battery_reconnects"]
    assert len(closes) >= 3 and len(opens) == len(closes) + 1
    for before, rc, after in zip(opens[:-1], closes, opens[1:], strict=True):
        due = math.ceil((before["time_s"] + 0.02) / period - 1e-9) * period
        assert rc["time_s"] == pytest.approx(due, abs=1e-12)
        assert after["time_s"] == rc["time_s"]
        assert after["cause"] == "charge_current"


BAD = [
    ('max_charge_current = "-3 A"', "battery.max_charge_current", "expected"),
    ('max_discharge_current = "0 A"', "battery.max_discharge_current", "expected"),
    ('full_voltage = "-14 V"', "battery.full_voltage", "expected"),
    ('full_voltage = "14 V"\nreclose_voltage = "14.5 V"', "battery.reclose_voltage", "below"),
    ('full_voltage = "14 V"\nreclose_voltage = "14 V"', "battery.reclose_voltage", "below"),
    ('reclose_time = "1 s"', "battery.reclose_time", "for a disconnect to reclose"),
    ('max_charge_current = "3 A"\nreclose_time = "-1 s"', "battery.reclose_time", "expected"),
    ('max_charge_current = "3 V"', "battery.max_charge_current", "current"),
]


@pytest.mark.parametrize(("bms", "key", "fragment"), BAD)
def test_bad_disconnect_keys_get_one_clear_message(bms, key, fragment):
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario_text(WINCH.format(duration="0.1 s", bms=bms, events=""), "hoist.toml")
    err = info.value
    assert err.key == key, str(err)
    assert fragment in str(err)
    assert str(err).startswith("hoist.toml")


def test_a_disconnect_with_supply_inductance_is_refused():
    text = WINCH.format(duration="0.1 s", bms='max_charge_current = "3 A"', events="")
    text = text.replace("[supply]", '[supply]\ninductance = "10 uH"')
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario_text(text, "hoist.toml")
    assert info.value.key == "supply.inductance"
    assert "not modelled" in str(info.value)
