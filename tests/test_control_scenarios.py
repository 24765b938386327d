"""Closed-loop scenario keys (messages for bad input) and the loops over the PWM bridges.

The loop physics on the ideal bridge is checked against python-control in
``test_control_loops.py``; here: what the loader accepts and refuses, the form conversions,
and the closed loop over the averaged and switching bridges (energy account, integral
action, the duty the controller sets).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import dcsim
from dcsim.errors import ScenarioError
from dcsim.scenario import load_scenario_text
from tests.reference import assert_energy_closes

BASE = """
[simulation]
duration = "{duration}"
record_interval = "50 us"
[motor]
resistance = "0.8 ohm"
inductance = "1.2 mH"
torque_constant = "0.06 N*m/A"
inertia = "2e-4 kg*m^2"
viscous_friction = "2e-5 N*m*s/rad"
[supply]
voltage = "48 V"
{supply}
{bridge}
[control]
mode = "{mode}"
[control.current]
kp = "6.03 V/A"
ki = "4021 V/(A*s)"
sample_time = "50 us"
[control.speed]
kp = "0.5 A*s/rad"
ki = "63 A/rad"
sample_time = "200 us"
limit = "12 A"
[control.position]
kp = "60 1/s"
sample_time = "1 ms"
limit = "300 rad/s"
{reference}
{extra}
"""

STEP = """[control.reference]
kind = "step"
value = "100 rad/s"
at = "5 ms"
"""


def scenario(
    *, mode="speed", reference=STEP, extra="", bridge="", supply="", duration="0.3 s"
) -> str:
    return BASE.format(
        mode=mode,
        reference=reference,
        extra=extra,
        bridge=bridge,
        supply=supply,
        duration=duration,
    )


def error(text: str) -> ScenarioError:
    with pytest.raises(ScenarioError) as info:
        load_scenario_text(text)
    return info.value


# --------------------------------------------------------------------------------------------
# Loader: every bad input names the key, what was expected and what was found
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "key", "fragment"),
    [
        (
            scenario().replace('sample_time = "200 us"', 'sample_time = "120 us"'),
            "control.speed.sample_time",
            "expected a whole multiple of the fastest loop's sample time",
        ),
        (
            scenario().replace('limit = "12 A"\n', ""),
            "control.speed.limit",
            "missing key",
        ),
        (
            scenario(reference=STEP.replace('value = "100 rad/s"', 'value = "100 rad"')),
            "control.reference.value",
            "expected a value of the controlled quantity (e.g. '200 rad/s'), found '100 rad'",
        ),
        (
            scenario(
                reference='[control.reference]\nkind = "s-curve"\ndistance = "1 rad"\n'
                'speed = "1 rad/s"\nacceleration = "1 rad/s^2"\njerk = "1 rad/s^3"\n'
            ),
            "control.reference.kind",
            "'s-curve' is a position move",
        ),
        (
            scenario(reference=STEP + 'rate = "10 rad/s^2"\n'),
            "control.reference.rate",
            "expected no rate in a 'step' reference",
        ),
        (
            scenario(reference='[control.reference]\nkind = "ramp"\nvalue = "10 rad/s"\n'),
            "control.reference.rate",
            "expected exactly one of rate and ramp_time",
        ),
        (
            scenario(mode="position", reference='[control.reference]\nkind = "trapezoid"\n'),
            "control.reference.acceleration",
            "missing key: a 'trapezoid' reference needs acceleration, distance, speed",
        ),
        (
            scenario(extra="[sensors]\ncurrent_adc_bits = 12\n"),
            "sensors.current_range",
            "expected the ADC's full scale",
        ),
        (
            scenario(extra="[sensors]\nencoder_lines = 100.5\n"),
            "sensors.encoder_lines",
            "expected a whole number",
        ),
        (
            scenario().replace('ki = "63 A/rad"', 'gain = "0.5 A*s/rad"'),
            "control.speed.gain",
            "expected kp, ki, kd for the 'parallel' form",
        ),
        (
            scenario().replace('kp = "0.5 A*s/rad"', 'kp = "0.5 A*s/rad"\nanti_windup = "windup"'),
            "control.speed.anti_windup",
            "one of 'clamping', 'back-calculation', 'none'",
        ),
        (
            scenario(
                bridge='[bridge]\nmodel = "switching"\nfrequency = "15 kHz"',
                supply='resistance = "0.1 ohm"\ncapacitance = "2 mF"',
            ),
            "control.current.sample_time",
            "expected a whole number of PWM periods",
        ),
        (
            scenario(mode="voltage", reference=STEP),
            "control.reference.value",
            "expected a [control.reference] only in a closed-loop control mode",
        ),
    ],
    ids=lambda v: v if isinstance(v, str) and len(v) < 40 else None,
)
def test_bad_control_input_names_key_expectation_and_finding(text, key, fragment):
    err = error(text)
    assert err.key == key, str(err)
    assert fragment in str(err)
    assert "found" in str(err) or "missing" in str(err)


def test_mode_needs_its_loops():
    text = scenario(mode="position").replace(
        '[control.position]\nkp = "60 1/s"\nsample_time = "1 ms"\nlimit = "300 rad/s"\n', ""
    )
    err = error(text.replace('value = "100 rad/s"', 'value = "1 rad"'))
    assert err.key == "control.position"
    assert "runs the loops position -> speed -> current" in str(err)


def test_ideal_and_series_forms_convert_to_parallel():
    # Source: Astrom & Hagglund, PID Controllers: Theory, Design and Tuning, 2nd ed. (1995),
    # sec. 3.4: ideal K(1 + 1/(sTi) + sTd) -> kp = K, ki = K/Ti, kd = K Td; series
    # K'(1 + 1/(sTi'))(1 + sTd') -> kp = K'(1 + Td'/Ti'), ki = K'/Ti', kd = K' Td'.
    form = (
        'form = "{f}"\ngain = "0.5 A*s/rad"\nintegral_time = "8 ms"\n'
        'derivative_time = "1 ms"\nsample_time = "200 us"\nlimit = "12 A"\n'
    )
    base = scenario().replace(
        'kp = "0.5 A*s/rad"\nki = "63 A/rad"\nsample_time = "200 us"\nlimit = "12 A"\n', "{L}"
    )
    ideal = load_scenario_text(base.replace("{L}", form.format(f="ideal")))
    assert ideal.control.speed.parallel_gains() == pytest.approx((0.5, 0.5 / 8e-3, 0.5e-3))
    series = load_scenario_text(base.replace("{L}", form.format(f="series")))
    assert series.control.speed.parallel_gains() == pytest.approx(
        (0.5 * (1 + 1.0 / 8.0), 0.5 / 8e-3, 0.5e-3)
    )


def test_loop_keys_change_through_with_changes():
    sc = load_scenario_text(scenario())
    sc2 = sc.with_changes({"control.speed.kp": "0.7 A*s/rad", "control.reference.value": 50})
    assert sc2.control.speed.kp == 0.7 and sc.control.speed.kp == 0.5
    assert sc2.get("control.reference.value") == 50.0
    with pytest.raises(ScenarioError, match="did you mean 'control.speed.limit'"):
        sc.with_changes({"control.speed.limt": "3 A"})


def test_loop_keys_are_not_changeable_by_events():
    text = scenario() + '[[events]]\nat = "0.1 s"\nset = { "control.speed.kp" = 1 }\n'
    err = error(text)
    assert "expected a key an event may change" in str(err)
    assert err.key == "events[0].set.control.speed.kp"


# --------------------------------------------------------------------------------------------
# The loops over the PWM bridges
# --------------------------------------------------------------------------------------------

PWM = {
    "averaged": '[bridge]\nmodel = "averaged"\nfrequency = "20 kHz"\nduty_counts = 2500',
    "switching": '[bridge]\nmodel = "switching"\nfrequency = "20 kHz"',
}
BUS = 'resistance = "0.1 ohm"\ncapacitance = "2 mF"'
LOAD_STEP = '[[events]]\nat = "0.15 s"\nset = { "load.torque" = "0.2 N*m" }\n'


@pytest.mark.parametrize("model", ["averaged", "switching"])
def test_speed_loop_over_pwm_bridge_removes_the_load_step_error(model):
    sc = load_scenario_text(
        scenario(bridge=PWM[model], supply=BUS, extra=LOAD_STEP, duration="0.4 s")
    )
    res = dcsim.simulate(sc)
    s = res.summary
    # Source: energy conservation; the account closes over the bus circuit and the losses.
    assert_energy_closes(s, stored_J=0.5 * 2e-3 * 48.0**2)
    # Source: final-value theorem -- a PI speed loop (integral action) leaves no steady-state
    # error after a constant load step (any control text, e.g. Franklin, Powell &
    # Emami-Naeini, Feedback Control of Dynamic Systems, steady-state error chapter -- from
    # memory). The residue is the slowest closed-loop mode after 0.25 s (|e| < 1e-3 rad/s
    # here; the switching model adds the PWM current ripple's effect on the sampled speed).
    tol = 1e-3 if model == "averaged" else 2e-2
    assert abs(s["final_error_rad_s"]) < tol
    steps = s["load_steps"]
    assert len(steps) == 1 and steps[0]["dip_rad_s"] < 0.0
    assert steps[0]["recovery_time_s"] is not None
    assert s["located_regime_changes"] < 50  # no chattering at the sample instants


def test_averaged_duty_is_command_over_measured_bus():
    sc = load_scenario_text(
        scenario(bridge=PWM["averaged"].replace("duty_counts = 2500", ""), supply=BUS)
    )
    tr = dcsim.simulate(sc).trace
    # rows every 50 us fall on the samples; a row at a sample instant shows the duty and
    # the controller values just after the sample (unquantised duty here): m = v / v_bus,meas
    # (the duty of the averaged bridge without dead time is its modulation). Source: the
    # definition of the averaged full bridge, v_a = m v_bus (Mohan, Undeland & Robbins,
    # Power Electronics, 3rd ed., full-bridge dc-dc converter chapter -- from memory).
    k = np.arange(10, tr.rows - 1)
    expected = tr["voltage_command_V"][k] / tr["measured_bus_voltage_V"][k]
    assert np.allclose(tr["duty"][k], np.clip(expected, -1, 1), rtol=1e-12, atol=1e-15)


def test_holding_against_friction_at_rest_does_not_chatter():
    # Regression: a position loop holding a load at rest with Coulomb friction on the
    # averaged bridge must stick the shaft at a located zero of speed (the shaft reaches rest
    # exactly there), not slide back and forth at every rounding step.
    text = scenario(
        mode="position",
        bridge=PWM["averaged"],
        supply=BUS,
        reference='[control.reference]\nkind = "step"\nvalue = "0.5 rad"\nat = "5 ms"\n',
        duration="0.2 s",
    ).replace('viscous_friction = "2e-5 N*m*s/rad"', 'coulomb_friction = "0.03 N*m"')
    res = dcsim.simulate(load_scenario_text(text))
    assert res.summary["located_regime_changes"] < 200
    assert math.isfinite(res.summary["final_error_rad"])


def test_reference_may_be_written_under_the_outermost_loop():
    plain = load_scenario_text(scenario())
    under = load_scenario_text(
        scenario(reference=STEP.replace("[control.reference]", "[control.speed.reference]"))
    )
    assert under.control.reference == plain.control.reference
    err = error(
        scenario(reference=STEP.replace("[control.reference]", "[control.current.reference]"))
    )
    assert err.key == "control.current.reference"
    assert "expected the reference under the outermost loop of control mode 'speed'" in str(err)
    both = scenario(
        reference=STEP + STEP.replace("[control.reference]", "[control.speed.reference]")
    )
    assert "expected one reference" in str(error(both))


def test_table_reference_from_a_csv_file(tmp_path):
    csv = tmp_path / "speeds.csv"
    csv.write_text("time [s],speed [rad/s]\n0,0\n0.05,80\n0.1,80\n0.15,20\n", encoding="utf-8")
    path = tmp_path / "belt.toml"
    path.write_text(
        scenario(reference='[control.reference]\nkind = "table"\nfile = "speeds.csv"\n'),
        encoding="utf-8",
    )
    sc = dcsim.load_scenario(path)
    assert sc.control.reference.times_s == (0.0, 0.05, 0.1, 0.15)
    tr = dcsim.simulate(sc).trace
    # the reference column is the table interpolated linearly (numpy.interp is the
    # reference for piecewise-linear interpolation), held after the last point
    t = tr["time_s"]
    expected = np.interp(t, [0.0, 0.05, 0.1, 0.15], [0.0, 80.0, 80.0, 20.0])
    assert np.allclose(tr["reference_speed_rad_s"], expected, rtol=0, atol=1e-9)
    bad = tmp_path / "bad.csv"
    bad.write_text("0,0\n0.1\n", encoding="utf-8")
    path.write_text(
        scenario(reference='[control.reference]\nkind = "table"\nfile = "bad.csv"\n'),
        encoding="utf-8",
    )
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario(path)
    assert info.value.key == "control.reference.file"
    assert "line 2" in str(info.value)


def test_position_hold_reports_the_load_step_dip_and_return():
    ref = '[control.reference]\nkind = "step"\nvalue = "2 rad"\nat = "5 ms"\n'
    text = scenario(mode="position", reference=ref, duration="0.6 s") + LOAD_STEP.replace(
        '"0.15 s"', '"0.3 s"'
    )
    s = dcsim.simulate(load_scenario_text(text)).summary
    (step,) = s["load_steps"]
    # a load torque opposing positive rotation pushes the held shaft back: the angle and the
    # speed dip below their references, then the integral actions bring the angle back
    # (final-value theorem, as above)
    assert step["dip_rad"] < 0.0 and step["speed_dip_rad_s"] < 0.0
    assert step["recovery_time_s"] is not None and step["recovery_time_s"] < 0.3
    assert abs(s["final_error_rad"]) < step["band_rad"]
